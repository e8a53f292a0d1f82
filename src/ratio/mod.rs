//! The three-point/two-point ratio and excited-state control (docs/methods.md §3, §4).
//!
//! A three-point function decays with the energies of the states it connects and carries
//! their unknown overlaps; the ratio of docs/methods.md §3 cancels both, so that at large source–sink
//! separation it tends to the matrix element `Pi(Gamma, O; p_f, p_i)`. At the separations a
//! lattice can afford, excited states still contaminate it. This module builds the ratio per
//! resample and extracts the matrix element three ways, reported side by side:
//!
//! - **plateau** ([`plateau`]): a correlated constant fit over `tau in [tau_cut, tsep - tau_cut]`
//!   at each `tsep` (closed form `c = 1^T W y / 1^T W 1`);
//! - **summation** ([`summation`]): `S(tsep) = sum_tau R` is linear in `tsep` with slope equal to
//!   the matrix element up to `O(tsep e^{-Delta tsep})` (Maiani et al., Nucl. Phys. B 293 (1987)
//!   420; Capitani et al., Phys. Rev. D 86 (2012) 074502);
//! - **two-state** ([`two_state`]): the exact two-state form of the ratio with the two-point
//!   gaps and amplitude ratios, in three variants ([`TwoStateVariant`]): fixed per resample
//!   (linear, closed form; the default), floating gaps with Gaussian priors, or a joint fit
//!   with the two-point functions sharing energies, gaps and amplitude ratios.
//!
//! [`crosscheck`] compares them with the error of each difference taken from the resamples of
//! the difference (the estimates share the same data and are correlated); [`formfactor_check`]
//! does the same per form factor and Q² shell after the decomposition and flags plateaus biased
//! by excited states; the
//! `final_method` [`Estimator`] picks the number that feeds the decomposition (where the
//! renormalization is applied, in `kinematics::renorm`); [`average`] averages equivalent
//! channels (same kinematic factor up to sign) before any fit.
//!
//! ## Use
//!
//! [`build::build_ratios`] makes the ratio of every channel from binned data; optionally
//! [`average::average_channels`] merges equivalent ones; [`analyse::analyse_channel`] runs every
//! method on one channel ([`analyse_all`] does both steps for all channels, one channel at a
//! time per thread, in parallel; [`analyse_all_consuming`] also drops the tables as it goes).
//! The two-state fit needs, per momentum, a [`TwoPointStates`] (ground energy,
//! amplitude ratio `a = A_1/A_0`, gap `Delta = E_1 - E_0`, all resampled) from the spectrum
//! stage.
//!
//! ## Output
//!
//! Per channel ([`ChannelKey`]: a three-point key without `tsep`), a [`ChannelResult`]:
//! - `ratio`: the ratio at every `(tsep, tau)` ([`RatioSummary`]: central value and error of
//!   the real and imaginary part; the resampled [`RatioPoint`]s are dropped once the channel's
//!   fits are done) and the negative-root counts;
//! - `plateaus`: one [`PlateauFit`] per `tsep` (value, `tau` range, fit quality per part);
//! - `summation`: [`SummationFit`] (the sums `S(tsep)`, slope = matrix element, intercept);
//! - `two_state`: [`TwoStateFit`] (`M`, `c_i`, `c_f`, `c_if`, fitted gaps for the non-linear
//!   variants);
//! - `crosscheck`: [`CrossCheckRow`]s (difference, its resampled error, significance, flag);
//! - `final_method`, `final_estimate`: the bare matrix element that feeds the decomposition;
//! - `notes`: why a method was skipped.
//!
//! Every estimate is a [`ReIm`] pair of [`Resampled`] values; fits carry a [`FitQuality`]
//! (correlated chi-square, dof, p-value) per part and the covariance warnings.
//!
//! Real and imaginary parts are fitted separately with the same (real) model in the linear
//! fits (`C3` is complex, `C2` real, and a kinematic factor may be purely imaginary); the
//! non-linear two-state variants fit both jointly with shared gaps. A part that is exactly zero
//! everywhere is returned as exactly zero without a fit.
//!
//! ## Policies
//!
//! - Negative product under the root of the ratio ([`NegativeRootPolicy`]): by default the
//!   sample uses `sqrt(|product|)`; alternatively the point is dropped when the central product
//!   is negative. Either way the count per channel is reported; no NaN leaves the stage.
//! - A summation window with a dropped point is left out of the summation fit.
//! - The covariance of every fit is estimated once from the resamples
//!   ([`crate::resample::covariance`], user options) and frozen for all resamples.

pub mod analyse;
pub mod average;
pub mod build;
pub mod crosscheck;
pub mod estimator;
mod factors;
pub mod formfactor_check;
mod lsq;
pub mod plateau;
pub mod settings;
mod stream;
pub mod summation;
pub mod two_state;

pub use analyse::{analyse_channel, ChannelResult};
pub use build::{
    build_ratios, ChannelRatio, NegativeRootCount, PointSummary, RatioPoint, RatioSummary,
};
pub use crosscheck::{CrossCheckRow, Flag};
pub use estimator::Estimator;
pub use plateau::PlateauFit;
pub use settings::{NegativeRootPolicy, RatioSettings, TwoStateVariant};
pub use stream::{analyse_all, analyse_all_consuming, analyse_all_with_progress};
pub use summation::SummationFit;
pub use two_state::{FittedGaps, TwoPointStates, TwoStateFit};

use crate::data::ThreePointKey;
use crate::resample::{Part, Resampled};
use serde::Serialize;
use std::fmt;

/// The stage name used in [`crate::Error::Analysis`].
pub(crate) const STAGE: &str = "ratio";

/// A three-point channel without its source–sink separation: the unit of excited-state
/// analysis (all `tsep` of one channel are fitted together).
///
/// It holds the channel's [`ThreePointKey`] with `tsep = 0` and no operators (the ratio
/// stage works on single-operator or projected data), so the channel fields are written once;
/// they are read through `Deref` (`key.pf`, `key.current`, ...). The order is that of the
/// fields `pf, q, current, projector, flavor, diagram`.
#[derive(Clone, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub struct ChannelKey(ThreePointKey);

impl ChannelKey {
    /// The channel of a three-point key (its `tsep` and operators dropped).
    pub fn of(key: &ThreePointKey) -> Self {
        ChannelKey(ThreePointKey {
            tsep: 0,
            ops: None,
            ..key.clone()
        })
    }

    /// The three-point key of this channel at separation `tsep`.
    pub fn at(&self, tsep: u32) -> ThreePointKey {
        ThreePointKey {
            tsep,
            ..self.0.clone()
        }
    }
}

/// The channel fields (`tsep` is always 0 here: use [`ChannelKey::at`] for a separation).
impl std::ops::Deref for ChannelKey {
    type Target = ThreePointKey;
    fn deref(&self) -> &ThreePointKey {
        &self.0
    }
}

/// Written as the six channel fields, as before the key held a [`ThreePointKey`].
impl Serialize for ChannelKey {
    fn serialize<S: serde::Serializer>(&self, s: S) -> std::result::Result<S::Ok, S::Error> {
        use serde::ser::SerializeStruct;
        let mut st = s.serialize_struct("ChannelKey", 6)?;
        st.serialize_field("pf", &self.pf)?;
        st.serialize_field("q", &self.q)?;
        st.serialize_field("current", &self.current)?;
        st.serialize_field("projector", &self.projector)?;
        st.serialize_field("flavor", &self.flavor)?;
        st.serialize_field("diagram", &self.diagram)?;
        st.end()
    }
}

impl fmt::Display for ChannelKey {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "pf={} q={} {} {}",
            crate::data::momentum_text(self.pf),
            crate::data::momentum_text(self.q),
            self.current,
            self.projector
        )?;
        if let Some(fl) = &self.flavor {
            write!(f, " flavor={fl}")?;
        }
        if let Some(d) = &self.diagram {
            write!(f, " diagram={d:?}")?;
        }
        Ok(())
    }
}

/// A complex quantity as a pair of resampled real and imaginary parts.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ReIm {
    /// Real part.
    pub re: Resampled,
    /// Imaginary part.
    pub im: Resampled,
}

impl ReIm {
    /// The real or the imaginary part.
    pub fn part(&self, part: Part) -> &Resampled {
        match part {
            Part::Re => &self.re,
            Part::Im => &self.im,
        }
    }

    /// Apply `f` to both parts.
    pub fn map_parts(&self, f: impl Fn(&Resampled) -> Resampled) -> ReIm {
        ReIm {
            re: f(&self.re),
            im: f(&self.im),
        }
    }
}

/// Quality of one correlated fit, evaluated on the central data.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct FitQuality {
    /// Correlated chi-square (plus prior terms for prior-constrained fits).
    pub chi2: f64,
    /// Degrees of freedom (points minus parameters).
    pub dof: i64,
    /// p-value from the chi-square distribution with `dof` degrees of freedom (NaN, i.e.
    /// undefined, when `dof <= 0`, as in [`crate::fit::p_value`]).
    pub p_value: f64,
}

/// A fitted complex estimate: each part fitted separately, each with its fit quality.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ReImFit {
    /// The estimate.
    pub value: ReIm,
    /// Fit quality of the real part.
    pub quality_re: FitQuality,
    /// Fit quality of the imaginary part.
    pub quality_im: FitQuality,
    /// Warnings of the covariance estimates (too few resamples for the number of points,
    /// poor conditioning), one line each.
    pub warnings: Vec<String>,
}
