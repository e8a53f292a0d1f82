//! One look for every chart of every run: a fixed colour and marker per estimator (so
//! two-state is the same blue circle in every report), the names of quantities and units
//! with real sub- and superscripts (`G_{E}`, `Q^{2}`, `r_{E}^{2}`, in the markup of
//! [`crate::report::plot::markup`]), and file stems that name the channel.

use crate::data::momentum_text;
use crate::ratio::{ChannelKey, Estimator};
use crate::report::plot::Marker;

/// Palette index of a band showing a final value (black, drawn light).
pub(super) const FINAL_COLOUR: usize = 7;

/// Palette index of data drawn beside a fit in the fit's colour (black).
pub(super) const DATA_COLOUR: usize = 7;

/// Palette indices for the plateaus at the separations, chosen by `tsep mod 5` so that
/// neighbouring separations (1, 2 or 4 apart) always differ.
const TSEP_COLOURS: [usize; 5] = [2, 3, 4, 5, 6];

/// The colour of the data and fits at one source–sink separation.
pub(super) fn tsep_colour(tsep: u32) -> usize {
    TSEP_COLOURS[tsep as usize % TSEP_COLOURS.len()]
}

/// Colour and marker of an estimator, the same in every chart and every run: two-state a
/// blue circle (without its smallest separation a blue triangle), summation a vermillion square, every plateau a diamond in its separation's
/// colour (the plateau without a separation a green triangle).
pub(super) fn estimator_style(e: Estimator) -> (usize, Marker) {
    match e {
        Estimator::TwoState => (0, Marker::Circle),
        Estimator::TwoStateLate => (0, Marker::Triangle),
        Estimator::Summation => (1, Marker::Square),
        Estimator::Plateau { tsep: None } => (2, Marker::Triangle),
        Estimator::Plateau { tsep: Some(t) } => (tsep_colour(t), Marker::Diamond),
    }
}

/// A form factor's name with its subscript: `GE` → `G_{E}`, `G5` → `G_{5}`, `F` → `F`.
pub(super) fn form_factor(name: &str) -> String {
    match name.strip_prefix('G') {
        Some(sub) if !sub.is_empty() => format!("G_{{{sub}}}"),
        _ => name.to_string(),
    }
}

/// A quantity of the final table or the Q² fits, typeset: `GE(0)` → `G_{E}(0)`, `r2_GE` →
/// `r_{E}^{2}`, `r_GM` → `r_{M}`, `kappa` → `κ`, `r1^2` → `r_{1}^{2}`.
pub(in crate::pipeline::output) fn quantity(name: &str) -> String {
    let sub = |ff: &str| form_factor(ff).replace("G_{", "").replace('}', "");
    if let Some(ff) = name.strip_prefix("r2_") {
        return format!("r_{{{}}}^{{2}}", sub(ff));
    }
    if let Some(ff) = name.strip_prefix("r_") {
        return format!("r_{{{}}}", sub(ff));
    }
    if let Some(ff) = name.strip_suffix("(0)") {
        return format!("{}(0)", form_factor(ff));
    }
    match name {
        "kappa" => "κ".into(),
        "r1" | "r2" => format!("r_{{{}}}", &name[1..]),
        "r1^2" | "r2^2" => format!("r_{{{}}}^{{2}}", &name[1..2]),
        _ => form_factor(name),
    }
}

/// A unit typeset: `fm^2` → `fm^{2}`.
pub(in crate::pipeline::output) fn unit(u: &str) -> String {
    match u.split_once('^') {
        Some((base, power)) => format!("{base}^{{{power}}}"),
        None => u.to_string(),
    }
}

/// An axis label `quantity (unit)`, typeset.
pub(super) fn axis_label(name: &str, u: &str) -> String {
    if u.is_empty() {
        quantity(name)
    } else {
        format!("{} ({})", quantity(name), unit(u))
    }
}

/// A file stem part that is safe on every file system: letters, digits, `-`, `_`, `.`.
pub(super) fn file_safe(s: &str) -> String {
    let mut out = String::new();
    for c in s.chars() {
        match c {
            c if c.is_ascii_alphanumeric() || c == '-' || c == '_' || c == '.' => out.push(c),
            '=' | ' ' | ',' => out.push('_'),
            '^' => out.push_str("_pow"),
            _ => {}
        }
    }
    out
}

/// The file stem part of a momentum: `0.0.1`, negative components as `m1` (`m1.0.0`).
pub(super) fn momentum_stem(v: [i32; 3]) -> String {
    v.iter()
        .map(|c| {
            if *c < 0 {
                format!("m{}", -c)
            } else {
                c.to_string()
            }
        })
        .collect::<Vec<_>>()
        .join(".")
}

/// The file stem part of a channel: `V4-unpol-pf0.0.0-q0.0.1` (negative components as `m1`),
/// with the flavour and diagram when the channel has them.
pub(super) fn channel_stem(k: &ChannelKey) -> String {
    let p = momentum_stem;
    let mut stem = format!("{}-{}-pf{}-q{}", k.current, k.projector, p(k.pf), p(k.q));
    if let Some(fl) = &k.flavor {
        stem.push_str(&format!("-{}", file_safe(&fl.to_string())));
    }
    if let Some(d) = &k.diagram {
        stem.push_str(&format!("-{}", file_safe(&format!("{d:?}"))));
    }
    stem
}

/// A momentum as written everywhere in the output: `(0,0,-1)`.
pub(super) fn momentum(p: [i32; 3]) -> String {
    momentum_text(p)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names_are_typeset() {
        assert_eq!(quantity("GE"), "G_{E}");
        assert_eq!(quantity("GE(0)"), "G_{E}(0)");
        assert_eq!(quantity("r2_GE"), "r_{E}^{2}");
        assert_eq!(quantity("r_GM"), "r_{M}");
        assert_eq!(quantity("r2_F"), "r_{F}^{2}");
        assert_eq!(quantity("kappa"), "κ");
        assert_eq!(quantity("r1^2"), "r_{1}^{2}");
        assert_eq!(quantity("r2"), "r_{2}");
        assert_eq!(axis_label("r2_GE", "fm^2"), "r_{E}^{2} (fm^{2})");
    }

    #[test]
    fn every_estimator_keeps_its_look() {
        assert_eq!(estimator_style(Estimator::TwoState), (0, Marker::Circle));
        assert_eq!(estimator_style(Estimator::Summation), (1, Marker::Square));
        let colours: Vec<usize> = [8, 10, 12, 14, 16]
            .into_iter()
            .map(|t| estimator_style(Estimator::plateau_at(t)).0)
            .collect();
        let mut distinct = colours.clone();
        distinct.sort();
        distinct.dedup();
        assert_eq!(distinct.len(), 5, "{colours:?}");
        assert!(!colours.contains(&0) && !colours.contains(&1));
    }
}
