//! A per-current phase convention: a complex unit multiplying the data of that current
//! before the decomposition (docs/methods.md §5), written `1`, `-1`, `i` or `-i` in settings.

use nalgebra::Complex;
use serde::{Deserialize, Serialize};

/// A complex unit `1`, `-1`, `i` or `-i`.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(try_from = "PhaseText", into = "String")]
pub struct Phase(Complex<f64>);

/// How a phase may be written: a string (`"i"`, `"-i"`, `"1"`, `"-1"`) or the numbers 1 / -1.
#[derive(Clone, Debug, PartialEq, Deserialize, schemars::JsonSchema)]
#[serde(untagged)]
enum PhaseText {
    Number(f64),
    Text(String),
}

impl Phase {
    /// The phase `1` (no change).
    pub const ONE: Phase = Phase(Complex::new(1.0, 0.0));

    /// The complex unit.
    pub fn value(self) -> Complex<f64> {
        self.0
    }

    /// Parse `1`, `+1`, `-1`, `i`, `+i`, `-i` (spaces ignored).
    pub fn parse(text: &str) -> Option<Phase> {
        let t: String = text.chars().filter(|c| !c.is_whitespace()).collect();
        let v = match t.as_str() {
            "1" | "+1" => Complex::new(1.0, 0.0),
            "-1" => Complex::new(-1.0, 0.0),
            "i" | "+i" => Complex::new(0.0, 1.0),
            "-i" => Complex::new(0.0, -1.0),
            _ => return None,
        };
        Some(Phase(v))
    }
}

impl Default for Phase {
    fn default() -> Self {
        Phase::ONE
    }
}

impl TryFrom<PhaseText> for Phase {
    type Error = String;
    fn try_from(v: PhaseText) -> Result<Self, String> {
        let text = match v {
            PhaseText::Number(x) => format!("{x}"),
            PhaseText::Text(s) => s,
        };
        Phase::parse(&text).ok_or_else(|| format!("phase `{text}` is not one of 1, -1, i, -i"))
    }
}

impl From<Phase> for String {
    fn from(p: Phase) -> String {
        let v = p.0;
        match (v.re.round() as i32, v.im.round() as i32) {
            (1, _) => "1".into(),
            (-1, _) => "-1".into(),
            (_, 1) => "i".into(),
            _ => "-i".into(),
        }
    }
}

impl schemars::JsonSchema for Phase {
    fn schema_name() -> String {
        "Phase".into()
    }
    fn json_schema(gen: &mut schemars::gen::SchemaGenerator) -> schemars::schema::Schema {
        PhaseText::json_schema(gen)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn phases_parse_from_yaml_strings_and_numbers() {
        let m: std::collections::BTreeMap<String, Phase> =
            serde_yaml_ng::from_str("V1: i\nA4: -1\nS: '-i'\nP: 1\n").expect("valid phases");
        let near = |p: Phase, re: f64, im: f64| (p.value() - Complex::new(re, im)).norm() < 1e-15;
        assert!(near(m["V1"], 0.0, 1.0));
        assert!(near(m["A4"], -1.0, 0.0));
        assert!(near(m["S"], 0.0, -1.0));
        assert!(near(m["P"], 1.0, 0.0));
        assert!(serde_yaml_ng::from_str::<Phase>("2").is_err());
        assert!(serde_yaml_ng::from_str::<Phase>("j").is_err());
    }
}
