//! Which twist each two-point function carries (docs/methods.md §1).
//!
//! Why it exists: with twisted boundary conditions the sink and source quark lines may carry
//! different twist angles, so a two-point function at integer momentum `n` stands for the
//! lattice momentum `(2 pi n + theta_sink) / L` when the three-point channels use `n` as a sink
//! momentum `p_f`, and `(2 pi n + theta_source) / L` when they use it as a source momentum
//! `p_i = p_f - q`. The two-point data have no column saying which twist a function carries,
//! so one function cannot serve both sides with different twists: such a momentum is refused
//! by name. Two-point momenta that no channel uses are taken to carry the sink twist.

use crate::data::{momentum_text, sub, Momentum};
use crate::{Error, Result};
use std::collections::BTreeMap;

/// The side of a three-point channel a momentum is used on, with the channel that uses it.
#[derive(Clone, Copy)]
struct Use {
    sink: bool,
    pf: Momentum,
    q: Momentum,
}

impl Use {
    fn describe(&self, twist: [f64; 3]) -> String {
        let (pf, q) = (momentum_text(self.pf), momentum_text(self.q));
        if self.sink {
            format!("the sink momentum p_f of channel p_f = {pf}, q = {q} (sink twist {twist:?})")
        } else {
            format!(
                "the source momentum p_i = p_f - q of channel p_f = {pf}, q = {q} (source twist \
                 {twist:?})"
            )
        }
    }
}

/// The twist angles (radians, per direction) of the two-point function at every momentum:
/// `sink` at every sink momentum `p_f` of `channels` (pairs `(p_f, q)`), `source` at every
/// source momentum `p_i = p_f - q`, `sink` at the momenta of `two_point` that no channel uses.
///
/// A momentum used on both sides while `sink != source` is an error that names it and one
/// channel of each side: the two-point data cannot say which twist that function carries.
pub fn twists_by_side(
    channels: impl IntoIterator<Item = (Momentum, Momentum)>,
    two_point: impl IntoIterator<Item = Momentum>,
    sink: [f64; 3],
    source: [f64; 3],
) -> Result<BTreeMap<Momentum, [f64; 3]>> {
    let mut used: BTreeMap<Momentum, Use> = BTreeMap::new();
    for (pf, q) in channels {
        for (n, on_sink) in [(pf, true), (sub(pf, q), false)] {
            let this = Use {
                sink: on_sink,
                pf,
                q,
            };
            let first = *used.entry(n).or_insert(this);
            if first.sink != on_sink && sink != source {
                let twist = |u: &Use| if u.sink { sink } else { source };
                let sides = if (first.pf, first.q) == (pf, q) {
                    format!(
                        "both the sink and the source momentum of the forward channel p_f = \
                         {}, q = {} (sink twist {sink:?}, source twist {source:?})",
                        momentum_text(pf),
                        momentum_text(q)
                    )
                } else {
                    format!(
                        "{}\n  and {}",
                        first.describe(twist(&first)),
                        this.describe(twist(&this))
                    )
                };
                // one line per part: the CLI shortens lines of more than 400 characters
                return Err(Error::config(format!(
                    "twisted boundary conditions: momentum {n} is used on both sides with \
                     different twists:\n  {sides}.\nThe two-point data have no column saying \
                     which twist a function carries, so one two-point function at {n} cannot \
                     serve both sides: choose sink momenta that no channel uses as a source \
                     momentum, or equal sink and source twists",
                    n = momentum_text(n),
                )));
            }
        }
    }
    let mut out: BTreeMap<Momentum, [f64; 3]> = used
        .into_iter()
        .map(|(n, u)| (n, if u.sink { sink } else { source }))
        .collect();
    for n in two_point {
        out.entry(n).or_insert(sink);
    }
    Ok(out)
}
