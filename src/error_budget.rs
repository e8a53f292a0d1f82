//! The final number of a quantity and its error budget, from the analysis variants a
//! pipeline names (excited-state estimators, their `tsep`, Q² models).
//!
//! Why a module of its own: every estimator is a defensible choice, and picking one hides
//! the uncertainty of the choice. Here each quantity gets one value averaged over the
//! variants, with the spread of the variants quoted as systematic errors, split by the
//! choice that caused it. Pure computation: variants in, a [`Budget`] out.
//!
//! **Rule (equal weights over the excited-state-controlled estimators).** Variants are
//! grouped hierarchically: fit ranges (the `tsep` of a plateau) within an estimator,
//! estimators within a Q² model, Q² models at the top. Each level is an equal-weight mean of
//! the level below, so the final value is a fixed linear combination of the variants and its
//! statistical error follows from the resamples of that combination (the variants come from
//! the same data and are correlated). The Akaike-information weights of Jay & Neil,
//! Phys. Rev. D 103 (2021) 114502, compare fits to the same data and are used where that holds
//! (the spectrum's fit windows, whose spread is therefore already inside the statistical
//! error here), but a plateau at one `tsep`, the summation slope and a two-state fit see
//! different data, so their χ² cannot be compared.
//!
//! **Plateaus are a diagnostic, not a variant.** A plateau at finite `tsep` keeps excited
//! states at order `e^{-Δ tsep/2}`, all with the sign of the contamination, so averaging
//! plateaus in moves the value towards the contaminated side; the summation method
//! (Maiani et al. 1987; Capitani et al., Phys. Rev. D 86 (2012) 074502) and the two-state fit
//! suppress or model that term, and it is common practice to quote those and to show the
//! plateaus as the check of the trend in `tsep`. So when a Q² model has a summation or
//! two-state result, its plateaus get weight 0 (reason listed); with plateaus only, the
//! plateaus are averaged and their spread is the fit-range error. Measured on mock ensembles
//! (`tests/studies/final_coverage.sh`): the plateaus lay 1.6–25 standard deviations below the
//! truth and still carried about a third of the weight, because the cross-check below compares
//! against a reference whose own error is large.
//!
//! **Excited-state error: the full difference between the estimators.** Per Q² model it is
//! the range (largest minus smallest central value) of the summation and two-state results,
//! including one that the cross-check excluded from the value (common practice: the difference
//! between the summation and the two-state result is quoted as the excited-state systematic).
//! Both estimators are biased towards the plateaus when excited states are not fully removed,
//! so the truth tends to lie beyond the pair, not between them: the standard deviation of the
//! two (half the difference) covered the truth of the strong-excited-state mock at 78 % within
//! 2σ, the full difference at 88 %. Nor may a variant that fails the cross-check stop counting:
//! a summation far from the two-state result is the sign of strong contamination, and dropping
//! it set the excited-state error to zero exactly then.
//!
//! **Cross-check.** A variant whose difference from the reference estimator (two-state if
//! present, else summation) with the same Q² model exceeds two standard deviations of the
//! resampled difference is excluded from the value (weight 0) and listed with the reason.
//!
//! **Pinned.** When the user pins one estimator the value is that estimator's (averaged over
//! Q² models only when several are given) and the budget says so; the estimator spread is
//! then not quoted.
//!
//! The renormalization error is `|value| dZ/Z` and is added in quadrature like the others.

use crate::ratio::Estimator;
use crate::resample::Resampled;
use std::collections::BTreeMap;

/// One analysis variant of one quantity.
#[derive(Clone, Debug)]
pub struct Variant {
    /// The excited-state estimator (a plateau carries its `tsep`, the fit-range choice).
    pub estimator: Estimator,
    /// The Q² model (empty for a form factor at one shell).
    pub model: String,
    /// The value, per resample.
    pub value: Resampled,
    /// Relative renormalization error `dZ/Z` that applies to this value (0 for ratios).
    pub z_relative: f64,
}

/// How the final value was chosen.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Rule {
    /// Hierarchical equal-weight average, spread as systematic.
    EqualWeights,
    /// One estimator pinned by the user.
    Pinned(Estimator),
}

impl std::fmt::Display for Rule {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Rule::EqualWeights => f.write_str("equal-weight average"),
            Rule::Pinned(e) => write!(f, "pinned to {e}"),
        }
    }
}

/// A variant's part in the final value.
#[derive(Clone, Debug)]
pub struct Weighted {
    /// The variant.
    pub variant: Variant,
    /// Its weight in the final value (0 when excluded or not selected).
    pub weight: f64,
    /// Why it has no weight, if so.
    pub excluded: Option<String>,
}

/// The final value of one quantity with its error budget.
#[derive(Clone, Debug)]
pub struct Budget {
    /// The final value, per resample.
    pub value: Resampled,
    /// Statistical error (from the resamples of the weighted combination).
    pub stat: f64,
    /// Spread between estimators.
    pub excited_states: f64,
    /// Spread between fit ranges (`tsep`) of one estimator.
    pub fit_range: f64,
    /// Spread between Q² models.
    pub q2_model: f64,
    /// `|value| dZ/Z`.
    pub renormalization: f64,
    /// The rule that made the value.
    pub rule: Rule,
    /// Every variant with its weight.
    pub variants: Vec<Weighted>,
}

impl Budget {
    /// All systematic parts in quadrature.
    pub fn sys(&self) -> f64 {
        [
            self.excited_states,
            self.fit_range,
            self.q2_model,
            self.renormalization,
        ]
        .iter()
        .map(|x| x * x)
        .sum::<f64>()
        .sqrt()
    }

    /// Statistical and systematic errors in quadrature.
    pub fn total(&self) -> f64 {
        self.stat.hypot(self.sys())
    }

    /// Variants that carry weight.
    pub fn n_used(&self) -> usize {
        self.variants.iter().filter(|w| w.weight > 0.0).count()
    }
}

/// Significance above which a variant fails the cross-check.
pub const CROSSCHECK_SIGMA: f64 = 2.0;

/// The final value of one quantity from its variants; `None` when no variant has a finite
/// value. `pin` restricts the value to one estimator (a bare `plateau` pins the largest
/// `tsep`).
pub fn final_value(variants: &[Variant], pin: Option<Estimator>) -> Option<Budget> {
    let mut weighted: Vec<Weighted> = variants
        .iter()
        .map(|v| Weighted {
            variant: v.clone(),
            weight: 0.0,
            excluded: (!v.value.is_finite()).then(|| "not finite".to_string()),
        })
        .collect();
    let rule = match pin {
        Some(p) => {
            let chosen = pinned_estimator(variants, p)?;
            for w in &mut weighted {
                if w.excluded.is_none() && w.variant.estimator != chosen {
                    w.excluded = Some(format!("final value pinned to {chosen}"));
                }
            }
            Rule::Pinned(chosen)
        }
        None => {
            exclude_plateaus(&mut weighted);
            exclude_failed_crosscheck(&mut weighted);
            Rule::EqualWeights
        }
    };
    // model → estimator kind → fit ranges (indices of the used variants)
    let mut tree: BTreeMap<&str, BTreeMap<Estimator, Vec<usize>>> = BTreeMap::new();
    for (i, w) in weighted.iter().enumerate() {
        if w.excluded.is_none() {
            tree.entry(w.variant.model.as_str())
                .or_default()
                .entry(w.variant.estimator.kind())
                .or_default()
                .push(i);
        }
    }
    if tree.is_empty() {
        return None;
    }
    let mut weights = vec![0.0; weighted.len()];
    let (mut fit_range_sq, mut n_fit_groups) = (0.0, 0usize);
    let (mut excited_sq, mut n_models) = (0.0, 0usize);
    let mut model_means = Vec::new();
    let n_model = tree.len() as f64;
    for (model, kinds) in &tree {
        let n_kind = kinds.len() as f64;
        let mut kind_means = Vec::new();
        for idx in kinds.values() {
            let n = idx.len() as f64;
            let centrals: Vec<f64> = idx
                .iter()
                .map(|&i| weighted[i].variant.value.central)
                .collect();
            fit_range_sq += spread(&centrals).powi(2);
            n_fit_groups += 1;
            kind_means.push(mean(&centrals));
            for &i in idx {
                weights[i] = 1.0 / (n * n_kind * n_model);
            }
        }
        excited_sq += match &rule {
            Rule::EqualWeights => controlled_range(&weighted, model)
                .unwrap_or_else(|| spread(&kind_means))
                .powi(2),
            Rule::Pinned(_) => spread(&kind_means).powi(2),
        };
        n_models += 1;
        model_means.push(mean(&kind_means));
    }
    let used: Vec<(&Resampled, f64)> = weighted
        .iter()
        .zip(&weights)
        .filter(|(_, &w)| w > 0.0)
        .map(|(v, &w)| (&v.variant.value, w))
        .collect();
    let value = weighted_sum(&used)?;
    let z_relative: f64 = weighted
        .iter()
        .zip(&weights)
        .map(|(v, w)| w * v.variant.z_relative)
        .sum();
    for (w, x) in weighted.iter_mut().zip(weights) {
        w.weight = x;
    }
    Some(Budget {
        stat: value.error(),
        excited_states: (excited_sq / n_models as f64).sqrt(),
        fit_range: (fit_range_sq / n_fit_groups as f64).sqrt(),
        q2_model: spread(&model_means),
        renormalization: value.central.abs() * z_relative.abs(),
        value,
        rule,
        variants: weighted,
    })
}

/// The concrete estimator a pin means among the variants (`plateau` → largest `tsep`).
fn pinned_estimator(variants: &[Variant], pin: Estimator) -> Option<Estimator> {
    variants
        .iter()
        .map(|v| v.estimator)
        .filter(|&e| pin.selects(e))
        .max()
}

/// Whether an estimator suppresses or models the excited states (summation, two-state), as
/// opposed to a plateau at one `tsep`.
fn controls_excited_states(e: Estimator) -> bool {
    matches!(e, Estimator::Summation | Estimator::TwoState)
}

/// Plateaus get no weight where the same Q² model has a finite summation or two-state result
/// (module documentation: plateaus are a diagnostic).
fn exclude_plateaus(weighted: &mut [Weighted]) {
    let controlled: Vec<String> = weighted
        .iter()
        .filter(|w| w.excluded.is_none() && controls_excited_states(w.variant.estimator))
        .map(|w| w.variant.model.clone())
        .collect();
    for w in weighted.iter_mut() {
        if w.excluded.is_none()
            && !controls_excited_states(w.variant.estimator)
            && controlled.contains(&w.variant.model)
        {
            w.excluded = Some("plateau: a check, not averaged".to_string());
        }
    }
}

/// The excited-state error of one Q² model: the range of the finite summation and two-state
/// central values, whether or not the cross-check kept them; `None` with fewer than two.
fn controlled_range(weighted: &[Weighted], model: &str) -> Option<f64> {
    let centrals: Vec<f64> = weighted
        .iter()
        .filter(|w| w.variant.model == model && controls_excited_states(w.variant.estimator))
        .filter(|w| w.variant.value.is_finite())
        .map(|w| w.variant.value.central)
        .collect();
    if centrals.len() < 2 {
        return None;
    }
    let lo = centrals.iter().copied().fold(f64::INFINITY, f64::min);
    let hi = centrals.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    Some(hi - lo)
}

/// The reference of the cross-check: two-state if present, else summation.
fn reference_kind(weighted: &[Weighted]) -> Option<Estimator> {
    [Estimator::TwoState, Estimator::Summation]
        .into_iter()
        .find(|r| weighted.iter().any(|w| w.variant.estimator == *r))
}

fn exclude_failed_crosscheck(weighted: &mut [Weighted]) {
    let Some(reference) = reference_kind(weighted) else {
        return;
    };
    let refs: BTreeMap<String, Resampled> = weighted
        .iter()
        .filter(|w| w.variant.estimator == reference && w.excluded.is_none())
        .map(|w| (w.variant.model.clone(), w.variant.value.clone()))
        .collect();
    for w in weighted.iter_mut() {
        if w.excluded.is_some() || w.variant.estimator == reference {
            continue;
        }
        let Some(r) = refs.get(&w.variant.model) else {
            continue;
        };
        let Ok(d) = w.variant.value.try_zip_map(r, "cross-check", |a, b| a - b) else {
            continue;
        };
        let sigma = d.central.abs() / d.error();
        if sigma > CROSSCHECK_SIGMA {
            w.excluded = Some(format!("{sigma:.1} sigma from {reference}"));
        }
    }
}

/// `None` when the variants do not share one resample plan.
fn weighted_sum(items: &[(&Resampled, f64)]) -> Option<Resampled> {
    let values: Vec<&Resampled> = items.iter().map(|(v, _)| *v).collect();
    let ws: Vec<f64> = items.iter().map(|(_, w)| *w).collect();
    Resampled::try_combine(&values, "variants of a final value", |xs| {
        xs.iter().zip(&ws).map(|(x, w)| x * w).sum()
    })
    .ok()
}

fn mean(xs: &[f64]) -> f64 {
    xs.iter().sum::<f64>() / xs.len() as f64
}

/// Standard deviation about the mean (divisor `n`): the spread of equally weighted choices.
fn spread(xs: &[f64]) -> f64 {
    if xs.len() < 2 {
        return 0.0;
    }
    let m = mean(xs);
    (xs.iter().map(|x| (x - m).powi(2)).sum::<f64>() / xs.len() as f64).sqrt()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::resample::Scheme;

    fn var(e: Estimator, model: &str, central: f64, shifts: &[f64]) -> Variant {
        Variant {
            estimator: e,
            model: model.to_string(),
            value: Resampled::new(
                central,
                shifts.iter().map(|s| central + s).collect(),
                Scheme::Jackknife,
            ),
            z_relative: 0.0,
        }
    }

    const NOISE: [f64; 4] = [0.01, -0.01, 0.02, -0.02];
    const WIDE: [f64; 4] = [0.3, -0.3, 0.1, -0.1];

    #[test]
    fn equal_weights_and_spreads_by_level() {
        // Analytic: summation 1.0 and two-state 1.2 → mean 1.1, excited-state error the full
        // difference 0.2; the plateaus get no weight next to them.
        let v = [
            var(Estimator::plateau_at(10), "", 1.0, &NOISE),
            var(Estimator::plateau_at(12), "", 1.0, &NOISE),
            var(Estimator::Summation, "", 1.0, &NOISE),
            var(Estimator::TwoState, "", 1.2, &WIDE),
        ];
        let b = final_value(&v, None).unwrap_or_else(|| panic!("no budget"));
        assert!((b.value.central - 1.1).abs() < 1e-12);
        assert!((b.excited_states - 0.2).abs() < 1e-12);
        assert_eq!(b.fit_range, 0.0);
        let w: Vec<f64> = b.variants.iter().map(|w| w.weight).collect();
        assert_eq!(w, vec![0.0, 0.0, 0.5, 0.5]);
        assert!(b.variants[..2].iter().all(|w| w
            .excluded
            .as_deref()
            .is_some_and(|r| r.starts_with("plateau"))));
        // the statistical error is that of the combination 0.5 summation + 0.5 two-state
        let shifts: Vec<f64> = NOISE.iter().zip(WIDE).map(|(a, b)| 0.5 * (a + b)).collect();
        let expected = var(Estimator::TwoState, "", 1.1, &shifts).value.error();
        assert!((b.stat - expected).abs() < 1e-12);
    }

    #[test]
    fn plateaus_alone_are_averaged_with_their_spread() {
        // Analytic: plateaus 1.0 and 1.2 with nothing else → mean 1.1, fit-range error the
        // standard deviation 0.1, no excited-state error.
        let v = [
            var(Estimator::plateau_at(10), "", 1.0, &NOISE),
            var(Estimator::plateau_at(12), "", 1.2, &NOISE),
        ];
        let b = final_value(&v, None).unwrap_or_else(|| panic!("no budget"));
        assert!(b.variants.iter().all(|w| w.excluded.is_none()));
        assert!((b.value.central - 1.1).abs() < 1e-12);
        assert!((b.fit_range - 0.1).abs() < 1e-12);
        assert_eq!(b.excited_states, 0.0);
    }

    #[test]
    fn a_variant_far_from_the_reference_is_excluded_but_counts_in_the_error() {
        // the summation differs by 0.5 with a difference error of ~0.02 × sqrt(3/4 · 10):
        // excluded from the value, which is the two-state result; the excited-state error is
        // still the full difference 0.5
        let v = [
            var(Estimator::plateau_at(8), "", 0.4, &NOISE),
            var(Estimator::Summation, "", 0.5, &[0.02, -0.02, 0.0, 0.0]),
            var(Estimator::TwoState, "", 1.0, &NOISE),
        ];
        let b = final_value(&v, None).unwrap_or_else(|| panic!("no budget"));
        assert!(b.variants[1]
            .excluded
            .as_deref()
            .is_some_and(|r| r.contains("sigma from two_state")));
        assert_eq!(b.variants[1].weight, 0.0);
        assert!((b.value.central - 1.0).abs() < 1e-12);
        assert!((b.excited_states - 0.5).abs() < 1e-12);
        assert_eq!(b.n_used(), 1);
    }

    #[test]
    fn models_and_renormalization() {
        let mut v = vec![
            var(Estimator::TwoState, "dipole", 2.0, &NOISE),
            var(Estimator::TwoState, "z-expansion", 2.4, &NOISE),
        ];
        for x in &mut v {
            x.z_relative = 0.05;
        }
        let b = final_value(&v, None).unwrap_or_else(|| panic!("no budget"));
        assert!((b.value.central - 2.2).abs() < 1e-12);
        assert!((b.q2_model - 0.2).abs() < 1e-12);
        assert!((b.renormalization - 0.11).abs() < 1e-12);
        assert!((b.total() - b.stat.hypot(0.2).hypot(0.11)).abs() < 1e-12);
    }

    #[test]
    fn pinned_estimator_keeps_only_its_variants() {
        let v = [
            var(Estimator::plateau_at(10), "", 0.9, &NOISE),
            var(Estimator::plateau_at(12), "", 0.95, &NOISE),
            var(Estimator::TwoState, "", 1.2, &NOISE),
        ];
        let b = final_value(&v, Some(Estimator::Plateau { tsep: None }))
            .unwrap_or_else(|| panic!("no budget"));
        assert_eq!(b.rule, Rule::Pinned(Estimator::plateau_at(12)));
        assert_eq!(b.value.central, 0.95);
        assert_eq!(b.excited_states, 0.0);
        assert!(final_value(&v, Some(Estimator::Summation)).is_none());
    }

    #[test]
    fn nothing_finite_gives_none() {
        let v = [var(Estimator::TwoState, "", f64::NAN, &NOISE)];
        assert!(final_value(&v, None).is_none());
        assert!(final_value(&[], None).is_none());
    }
}
