//! The operator basis of a data set and its correlator matrices: which operators the
//! `sink_op` / `source_op` labels name, the `N x N` two-point matrix at every momentum, and
//! the single-operator view (one operator's diagonal correlators, labels dropped) that the
//! side-by-side comparison and `data.operator` use.

use crate::data::{Momentum, Operators, Series, ThreePointData, TwoPointData};
use crate::error::{Error, Result};
use std::collections::{BTreeMap, BTreeSet};

/// The operators named in the two-point table, sorted (the matrix order); empty when the
/// table carries no operator labels.
pub fn operators(two: &TwoPointData) -> Vec<String> {
    let set: BTreeSet<&str> = two
        .channels
        .keys()
        .filter_map(|k| k.ops.as_ref())
        .flat_map(|o| [o.sink.as_str(), o.source.as_str()])
        .collect();
    set.into_iter().map(String::from).collect()
}

/// Whether either table carries operator labels.
pub fn has_operators(two: &TwoPointData, three: &ThreePointData) -> bool {
    two.channels.keys().any(|k| k.ops.is_some()) || three.channels.keys().any(|k| k.ops.is_some())
}

/// The two-point matrix at every momentum, row-major `[sink i * n + source j]` over `ops`.
/// Every element must be present (a missing one is named); channels without operator labels
/// are not part of any matrix.
pub fn twopt_matrices<'a>(
    two: &'a TwoPointData,
    ops: &[String],
) -> Result<BTreeMap<Momentum, Vec<&'a Series>>> {
    let mut by_momentum: BTreeMap<Momentum, BTreeMap<&Operators, &Series>> = BTreeMap::new();
    for (k, s) in &two.channels {
        if let Some(o) = &k.ops {
            by_momentum.entry(k.momentum).or_default().insert(o, s);
        }
    }
    let mut out = BTreeMap::new();
    for (p, elements) in by_momentum {
        let mut matrix = Vec::with_capacity(ops.len() * ops.len());
        for a in ops {
            for b in ops {
                let s = elements.get(&Operators::new(a, b)).ok_or_else(|| {
                    Error::analysis(
                        "gevp",
                        format!(
                            "the two-point matrix at momentum ({},{},{}) lacks the element \
                             sink_op `{a}`, source_op `{b}` (operators {ops:?}); the variational \
                             analysis needs every sink and source pair",
                            p[0], p[1], p[2]
                        ),
                    )
                })?;
                matrix.push(*s);
            }
        }
        out.insert(p, matrix);
    }
    if out.is_empty() {
        return Err(Error::analysis(
            "gevp",
            "the two-point table has no channels with sink_op / source_op labels: the \
             variational analysis needs a correlator matrix",
        ));
    }
    Ok(out)
}

/// One operator's view of the data: the diagonal correlators `(op, op)` of both tables with
/// their operator labels dropped (channels of other operator pairs, and unlabelled ones, are
/// left out). Errors when the operator appears in neither table.
pub fn select_operator(
    two: &TwoPointData,
    three: &ThreePointData,
    op: &str,
) -> Result<(TwoPointData, ThreePointData)> {
    let want = Operators::diagonal(op);
    let two_out = TwoPointData {
        configs: two.configs.clone(),
        channels: diagonal_of(&two.channels, &want, |k| &mut k.ops),
    };
    let three_out = ThreePointData {
        configs: three.configs.clone(),
        channels: diagonal_of(&three.channels, &want, |k| &mut k.ops),
    };
    if two_out.channels.is_empty() {
        let known = operators(two);
        return Err(Error::config(format!(
            "operator `{}` has no diagonal two-point correlator (sink_op = source_op = `{}`); \
             operators in the data: {known:?}",
            crate::error::printable(op),
            crate::error::printable(op)
        )));
    }
    Ok((two_out, three_out))
}

/// The channels whose operator pair is `want`, with the operator labels removed from the keys.
fn diagonal_of<K: Ord + Clone>(
    channels: &BTreeMap<K, Series>,
    want: &Operators,
    ops: impl Fn(&mut K) -> &mut Option<Operators>,
) -> BTreeMap<K, Series> {
    channels
        .iter()
        .filter_map(|(k, s)| {
            let mut k = k.clone();
            (ops(&mut k).take().as_ref() == Some(want)).then(|| (k, s.clone()))
        })
        .collect()
}
