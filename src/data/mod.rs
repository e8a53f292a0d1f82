//! The data model: per-configuration correlators keyed by channel.
//!
//! Time (or insertion time `tau`) and configuration are dense axes. A [`Series`] stores its
//! values time-major with configurations contiguous, `values[t * n_cfg + cfg]`, so that
//! resampling one time slice over configurations is a single contiguous sweep.
//!
//! Channel keys follow shared conventions (see `DEVELOPERS.md`): momenta are integer vectors
//! in units of `2 pi / L`; the source momentum of a three-point channel is `p_f - q`.

pub mod flavor;

use schemars::JsonSchema;
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;
use std::fmt;

/// An integer lattice momentum in units of `2 pi / L`.
pub type Momentum = [i32; 3];

/// The columns that name a three-point channel (without `tsep`) in every table that lists
/// channels: the exchange format's three-point table and the ratio-stage outputs.
pub const CHANNEL_COLUMNS: [&str; 8] = [
    "pfx",
    "pfy",
    "pfz",
    "qx",
    "qy",
    "qz",
    "current",
    "projector",
];

/// A momentum as every message, table title and plot writes it: `(0,0,-1)`.
pub fn momentum_text(p: Momentum) -> String {
    format!("({},{},{})", p[0], p[1], p[2])
}

/// Squared length of an integer momentum.
pub fn norm2(p: Momentum) -> i32 {
    p[0] * p[0] + p[1] * p[1] + p[2] * p[2]
}

/// Component-wise difference `a - b`.
pub fn sub(a: Momentum, b: Momentum) -> Momentum {
    [a[0] - b[0], a[1] - b[1], a[2] - b[2]]
}

/// The current inserted in a three-point function (docs/data-format.md names).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
#[allow(missing_docs)]
pub enum Current {
    V1,
    V2,
    V3,
    V4,
    A1,
    A2,
    A3,
    A4,
    S,
    P,
    T12,
    T13,
    T14,
    T23,
    T24,
    T34,
}

/// The Lorentz structure of a current.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
pub enum CurrentKind {
    /// Vector `V_mu`.
    Vector,
    /// Axial vector `A_mu`.
    Axial,
    /// Scalar `S`.
    Scalar,
    /// Pseudoscalar `P`.
    Pseudoscalar,
    /// Tensor `T_mu_nu`.
    Tensor,
}

impl Current {
    /// Every current, in docs/data-format.md order.
    pub const ALL: [Current; 16] = [
        Current::V1,
        Current::V2,
        Current::V3,
        Current::V4,
        Current::A1,
        Current::A2,
        Current::A3,
        Current::A4,
        Current::S,
        Current::P,
        Current::T12,
        Current::T13,
        Current::T14,
        Current::T23,
        Current::T24,
        Current::T34,
    ];

    /// The name used in the CSV tables (`V1`, ..., `T34`).
    pub fn name(self) -> &'static str {
        match self {
            Current::V1 => "V1",
            Current::V2 => "V2",
            Current::V3 => "V3",
            Current::V4 => "V4",
            Current::A1 => "A1",
            Current::A2 => "A2",
            Current::A3 => "A3",
            Current::A4 => "A4",
            Current::S => "S",
            Current::P => "P",
            Current::T12 => "T12",
            Current::T13 => "T13",
            Current::T14 => "T14",
            Current::T23 => "T23",
            Current::T24 => "T24",
            Current::T34 => "T34",
        }
    }

    /// Parse a CSV name; `None` for anything not in `docs/data-format.md`.
    pub fn parse(s: &str) -> Option<Current> {
        Current::ALL.iter().copied().find(|c| c.name() == s)
    }

    /// The message for a name that is not a current: the near miss, if any, and every
    /// valid name.
    pub fn unknown(name: &str) -> String {
        let names: Vec<&str> = Current::ALL.iter().map(|c| c.name()).collect();
        let mut m = format!("`{name}` is not a current");
        if let Some(s) = crate::error::suggest(name, &names) {
            m.push_str(&format!("; did you mean `{s}`?"));
        }
        m.push_str(&format!(" Valid: {}.", names.join(", ")));
        m
    }

    /// The Lorentz structure.
    pub fn kind(self) -> CurrentKind {
        use Current::*;
        match self {
            V1 | V2 | V3 | V4 => CurrentKind::Vector,
            A1 | A2 | A3 | A4 => CurrentKind::Axial,
            S => CurrentKind::Scalar,
            P => CurrentKind::Pseudoscalar,
            _ => CurrentKind::Tensor,
        }
    }

    /// Euclidean Lorentz indices (1..=4, 4 = time): one for V/A, two for T, none for S/P.
    pub fn indices(self) -> Vec<usize> {
        use Current::*;
        match self {
            V1 | A1 => vec![1],
            V2 | A2 => vec![2],
            V3 | A3 => vec![3],
            V4 | A4 => vec![4],
            S | P => vec![],
            T12 => vec![1, 2],
            T13 => vec![1, 3],
            T14 => vec![1, 4],
            T23 => vec![2, 3],
            T24 => vec![2, 4],
            T34 => vec![3, 4],
        }
    }
}

impl fmt::Display for Current {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

/// The spin projector of a three-point function (docs/data-format.md names).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
pub enum Projector {
    /// `unpol`: `(1 + gamma_4) / 2`.
    Unpol,
    /// `pol1`..`pol3`: `(1 + gamma_4)/2 i gamma_5 gamma_k`, k = 1..3.
    Pol(u8),
    /// `none`: spin-0 hadrons.
    None,
}

impl Projector {
    /// The name used in the CSV tables.
    pub fn name(self) -> &'static str {
        match self {
            Projector::Unpol => "unpol",
            Projector::Pol(1) => "pol1",
            Projector::Pol(2) => "pol2",
            Projector::Pol(3) => "pol3",
            Projector::Pol(_) => "pol?",
            Projector::None => "none",
        }
    }

    /// Parse a CSV name; `None` for anything not in docs/data-format.md.
    pub fn parse(s: &str) -> Option<Projector> {
        match s {
            "unpol" => Some(Projector::Unpol),
            "pol1" => Some(Projector::Pol(1)),
            "pol2" => Some(Projector::Pol(2)),
            "pol3" => Some(Projector::Pol(3)),
            "none" => Some(Projector::None),
            _ => None,
        }
    }
}

impl fmt::Display for Projector {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

/// Connected or disconnected quark-line diagram.
#[derive(
    Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize, JsonSchema,
)]
#[serde(rename_all = "lowercase")]
pub enum Diagram {
    /// Connected diagram.
    Connected,
    /// Disconnected (quark loop) diagram.
    Disconnected,
}

/// The sink and source interpolating operators of a correlator between operators of a
/// basis (the `sink_op` and `source_op` columns): element `(sink, source)` of a correlator
/// matrix for the variational analysis.
#[derive(Clone, Debug, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
pub struct Operators {
    /// Operator at the sink (time `t`, or `tsep` in a three-point function).
    pub sink: String,
    /// Operator at the source (time 0).
    pub source: String,
}

impl Operators {
    /// The pair `(sink, source)`.
    pub fn new(sink: &str, source: &str) -> Self {
        Operators {
            sink: sink.to_string(),
            source: source.to_string(),
        }
    }

    /// The diagonal pair `(op, op)`.
    pub fn diagonal(op: &str) -> Self {
        Operators::new(op, op)
    }
}

impl fmt::Display for Operators {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}<-{}", self.sink, self.source)
    }
}

/// Key of a two-point channel.
#[derive(Clone, Debug, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
pub struct TwoPointKey {
    /// Momentum in units of `2 pi / L`.
    pub momentum: Momentum,
    /// Interpolator label (`src-snk` for a correlator matrix); `None` when the table has no
    /// `smear` column.
    pub smear: Option<String>,
    /// Sink and source operators, when the table has `sink_op` / `source_op` columns and
    /// the row fills them.
    pub ops: Option<Operators>,
}

/// Key of a three-point channel; `tau` is the dense axis of its [`Series`].
#[derive(Clone, Debug, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
pub struct ThreePointKey {
    /// Source–sink separation.
    pub tsep: u32,
    /// Sink momentum.
    pub pf: Momentum,
    /// Momentum injected by the current; the source momentum is `pf - q`.
    pub q: Momentum,
    /// The inserted current.
    pub current: Current,
    /// The spin projector.
    pub projector: Projector,
    /// Flavour label (`u`, `d`, `u-d`, ...), if the table has one.
    pub flavor: Option<String>,
    /// Diagram label, if the table has one.
    pub diagram: Option<Diagram>,
    /// Sink and source operators, when the table has `sink_op` / `source_op` columns and
    /// the row fills them.
    pub ops: Option<Operators>,
}

impl ThreePointKey {
    /// Source momentum `p_i = p_f - q`.
    pub fn source_momentum(&self) -> Momentum {
        sub(self.pf, self.q)
    }
}

/// One channel's per-configuration values: `n_t` time slices by `n_cfg` configurations,
/// stored time-major (`[t * n_cfg + cfg]`).
#[derive(Clone, Debug, PartialEq)]
pub struct Series {
    /// Number of configurations.
    pub n_cfg: usize,
    /// Number of time slices (`T` for a two-point function, `tsep + 1` for a three-point one).
    pub n_t: usize,
    /// Real parts.
    pub re: Vec<f64>,
    /// Imaginary parts.
    pub im: Vec<f64>,
}

impl Series {
    /// A zero-filled series.
    pub fn zeros(n_t: usize, n_cfg: usize) -> Self {
        Series {
            n_cfg,
            n_t,
            re: vec![0.0; n_t * n_cfg],
            im: vec![0.0; n_t * n_cfg],
        }
    }

    /// Real parts at time `t` over all configurations (contiguous).
    pub fn re_at(&self, t: usize) -> &[f64] {
        &self.re[t * self.n_cfg..(t + 1) * self.n_cfg]
    }

    /// Imaginary parts at time `t` over all configurations (contiguous).
    pub fn im_at(&self, t: usize) -> &[f64] {
        &self.im[t * self.n_cfg..(t + 1) * self.n_cfg]
    }

    /// Index of `(t, cfg)` in `re` / `im`.
    pub fn index(&self, t: usize, cfg: usize) -> usize {
        t * self.n_cfg + cfg
    }
}

/// All two-point channels of an ensemble, on a common list of configurations.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct TwoPointData {
    /// Configuration numbers in Monte Carlo order (ascending); the `cfg` axis of every series.
    pub configs: Vec<i64>,
    /// Channels. Every series has `n_cfg = configs.len()`.
    pub channels: BTreeMap<TwoPointKey, Series>,
}

/// All three-point channels of an ensemble, on a common list of configurations.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct ThreePointData {
    /// Configuration numbers in Monte Carlo order (ascending).
    pub configs: Vec<i64>,
    /// Channels; the time axis of each series is `tau = 0..=tsep`.
    pub channels: BTreeMap<ThreePointKey, Series>,
}
