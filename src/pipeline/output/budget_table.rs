//! The final values as the report page shows them: one row per quantity (form factors by
//! shell), `value(stat)(sys)` and every part of the error budget written to the same last
//! digit as the value, so a reader can add them up by eye.

use super::tables::quoted;
use crate::pipeline::run::RunResults;
use crate::report::{Cell, Table};

/// Decimal places of the value in a `value(e1)(e2)` text (`0.968(18)(8)` → 3).
fn decimals(quoted: &str) -> usize {
    let value = quoted.split('(').next().unwrap_or("");
    value.split_once('.').map_or(0, |(_, frac)| frac.len())
}

/// A typeset quantity name for the page (`r2_GE` → `r_{E}^{2}`, `GE(0)` → `G_{E}(0)`).
fn typeset(q: &str) -> String {
    super::charts::typeset_quantity(q)
}

/// The budget table of the page.
pub(super) fn budget_table(results: &RunResults) -> Table {
    let mut t = Table::new(
        "final values and error budget",
        &[
            "quantity",
            "shell",
            "Q^{2} (GeV^{2})",
            "value(stat)(sys)",
            "stat",
            "excited states",
            "fit range",
            "Q^{2} model",
            "Z",
            "total",
            "variants used",
            "unit",
        ],
    );
    for r in &results.final_results {
        let b = &r.budget;
        let q = quoted(r);
        let d = decimals(&q);
        let err = |e: f64| {
            Cell::Text(if e.is_finite() {
                format!("{e:.d$}")
            } else {
                "–".into()
            })
        };
        t.rows.push(vec![
            Cell::Text(typeset(&r.quantity)),
            Cell::from(r.shell.clone().unwrap_or_default()),
            Cell::Text(
                r.q2.and_then(|q| q.1)
                    .map_or(String::new(), |q| format!("{q:.3}")),
            ),
            Cell::Text(q),
            err(b.stat),
            err(b.excited_states),
            err(b.fit_range),
            err(b.q2_model),
            err(b.renormalization),
            err(b.total()),
            Cell::Text(format!("{} of {}", b.n_used(), b.variants.len())),
            Cell::Text(super::charts::typeset_unit(&r.unit)),
        ]);
    }
    t
}

#[cfg(test)]
mod tests {
    use super::decimals;

    #[test]
    fn decimals_of_a_quoted_value() {
        assert_eq!(decimals("0.968(18)(8)"), 3);
        assert_eq!(decimals("2.72(47)(31)"), 2);
        assert_eq!(decimals("12(3)(1)"), 0);
    }
}
