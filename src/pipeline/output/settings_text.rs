//! The resolved settings as the report shows them: the pipeline's YAML with every default
//! filled in, each number to six significant digits (`6.66134e-15`, not
//! `6.661338147750939e-15`, for a tolerance the code derives from machine precision).

use crate::pipeline::spec::PipelineSpec;
use serde_yaml_ng::Value;

/// Round a float to six significant digits (exactly representable values are unchanged).
fn round6(x: f64) -> f64 {
    if !x.is_finite() || x == 0.0 {
        return x;
    }
    format!("{x:.5e}").parse().unwrap_or(x)
}

fn tidy(v: &mut Value) {
    match v {
        Value::Number(n) if n.is_f64() => {
            if let Some(x) = n.as_f64() {
                *v = Value::from(round6(x));
            }
        }
        Value::Sequence(s) => s.iter_mut().for_each(tidy),
        Value::Mapping(m) => m.iter_mut().for_each(|(_, v)| tidy(v)),
        Value::Tagged(t) => tidy(&mut t.value),
        _ => {}
    }
}

/// The YAML text of `spec` with short numbers.
pub(super) fn resolved(spec: &PipelineSpec) -> String {
    match serde_yaml_ng::to_value(spec) {
        Ok(mut v) => {
            tidy(&mut v);
            serde_yaml_ng::to_string(&v).unwrap_or_default()
        }
        Err(e) => format!("(settings could not be shown: {e})"),
    }
}

#[cfg(test)]
mod tests {
    use super::round6;

    #[test]
    fn numbers_are_shortened() {
        assert_eq!(round6(6.661338147750939e-15), 6.66134e-15);
        assert_eq!(round6(-0.1234567890123), -0.123457);
        assert_eq!(round6(1e-10), 1e-10);
        assert_eq!(round6(0.1), 0.1);
        assert_eq!(format!("{}", round6(20240601.0)), "20240600");
    }
}
