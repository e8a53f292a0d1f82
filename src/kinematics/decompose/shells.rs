//! Grouping channels into Q² shells per current kind: equal `|n_f|², |n_i|², |n_q|²`
//! without twists, equal Q² within a tolerance with twists.

use super::ChannelValue;
use crate::data::{norm2, sub, CurrentKind};
use crate::kinematics::setup::KinematicSetup;
use crate::Result;
use std::collections::BTreeMap;

/// A shell: its label, current kind and channels.
pub(super) type Shell<'a> = (String, CurrentKind, Vec<&'a ChannelValue>);

/// Group channels into Q² shells per current kind, in a deterministic order.
pub(super) fn shells<'a>(
    channels: &'a [ChannelValue],
    setup: &KinematicSetup,
    tol: f64,
) -> Result<Vec<Shell<'a>>> {
    if !setup.is_twisted() {
        let mut map: BTreeMap<(CurrentKind, i32, i32, i32), Vec<&ChannelValue>> = BTreeMap::new();
        for c in channels {
            let key = (
                c.current.kind(),
                norm2(c.pf),
                norm2(sub(c.pf, c.q)),
                norm2(c.q),
            );
            map.entry(key).or_default().push(c);
        }
        return Ok(map
            .into_iter()
            .map(|((kind, f, i, q), v)| (format!("nf2={f} ni2={i} nq2={q}"), kind, v))
            .collect());
    }
    let mut keyed = channels
        .iter()
        .map(|c| {
            let k = setup.on_shell(c.pf, c.q, None)?;
            Ok((c.current.kind(), crate::kinematics::q_squared(&k), c))
        })
        .collect::<Result<Vec<_>>>()?;
    keyed.sort_by(|a, b| a.0.cmp(&b.0).then(a.1.total_cmp(&b.1)));
    let mut out: Vec<Shell<'a>> = Vec::new();
    let mut start = f64::NAN;
    for (kind, q2, c) in keyed {
        match out.last_mut() {
            Some(last) if last.1 == kind && (q2 - start).abs() <= tol => last.2.push(c),
            _ => {
                start = q2;
                out.push((format!("Q2={q2:.6}"), kind, vec![c]));
            }
        }
    }
    Ok(out)
}
