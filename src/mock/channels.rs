//! Which three-point momenta a mock ensemble covers.
//!
//! Either the spec's explicit `(p_f, q)` pairs, or every `q` with `|n_q|^2 <= max_q2` for each
//! sink momentum, optionally thinned to one representative per `(|n_q|^2, |n_i|^2)` shell (the
//! channels of a shell share `Q^2` on the continuum dispersion relation, docs/methods.md §5).

use super::spec::MomentumSelection;
use crate::data::{norm2, sub, Momentum};
use std::collections::BTreeSet;

/// The `(p_f, q)` pairs selected by the spec, without repeats, in a fixed order.
pub fn momentum_pairs(sel: &MomentumSelection) -> Vec<(Momentum, Momentum)> {
    let mut out: Vec<(Momentum, Momentum)> = Vec::new();
    let mut push = |pair: (Momentum, Momentum)| {
        if !out.contains(&pair) {
            out.push(pair);
        }
    };
    for p in &sel.pairs {
        push((p.pf, p.q));
    }
    if let Some(max_q2) = sel.max_q2 {
        let qs = shell_order(max_q2);
        for &pf in &sel.sink {
            let mut seen = BTreeSet::new();
            for &q in &qs {
                let shell = (norm2(q), norm2(sub(pf, q)));
                if !sel.representatives || seen.insert(shell) {
                    push((pf, q));
                }
            }
        }
    }
    out
}

/// Every integer `q` with `|q|^2 <= max_q2`, ordered by `|q|^2`, then fewest negative
/// components, then largest `z`, `y`, `x` — so `(0,0,1)`, `(0,1,1)`, `(1,1,1)`, `(0,0,2)` lead
/// their shells and become the representatives.
fn shell_order(max_q2: u32) -> Vec<Momentum> {
    let r = (max_q2 as f64).sqrt().floor() as i32;
    let mut qs: Vec<Momentum> = Vec::new();
    for x in -r..=r {
        for y in -r..=r {
            for z in -r..=r {
                let q = [x, y, z];
                if norm2(q) as u32 <= max_q2 {
                    qs.push(q);
                }
            }
        }
    }
    qs.sort_by_key(|q| {
        let negatives = q.iter().filter(|&&c| c < 0).count();
        (norm2(*q), negatives, -q[2], -q[1], -q[0])
    });
    qs
}

#[cfg(test)]
mod tests {
    use super::*;

    // Counting check: the number of integer vectors with |n|^2 <= 4 is 1 + 6 + 12 + 8 + 6 = 33
    // (sums of three squares, a textbook count); representatives keep one per shell.
    #[test]
    fn shells_and_representatives() {
        let mut sel = MomentumSelection {
            sink: vec![[0, 0, 0]],
            max_q2: Some(4),
            representatives: false,
            ..Default::default()
        };
        assert_eq!(momentum_pairs(&sel).len(), 33);
        sel.representatives = true;
        let qs: Vec<Momentum> = momentum_pairs(&sel).into_iter().map(|(_, q)| q).collect();
        assert_eq!(
            qs,
            vec![[0, 0, 0], [0, 0, 1], [0, 1, 1], [1, 1, 1], [0, 0, 2]]
        );
    }

    // A moving sink splits a |q|^2 shell by |p_i|^2: p_f = (0,0,1), |q|^2 = 1 gives
    // p_i = 0 (q = p_f), |p_i|^2 = 2 (q perpendicular) and |p_i|^2 = 4 (q = -p_f).
    #[test]
    fn moving_sink_shells() {
        let sel = MomentumSelection {
            sink: vec![[0, 0, 1]],
            max_q2: Some(1),
            representatives: true,
            ..Default::default()
        };
        let pairs = momentum_pairs(&sel);
        let pis: BTreeSet<i32> = pairs.iter().map(|(pf, q)| norm2(sub(*pf, *q))).collect();
        assert_eq!(pairs.len(), 4);
        assert_eq!(pis, BTreeSet::from([0, 1, 2, 4]));
    }
}
