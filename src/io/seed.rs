//! Random seeds read from YAML (pipeline and mock files): any integer from 0 to 2^64 − 1.
//!
//! Why it exists: the YAML parser's own message for a seed out of range ("as u128, expected
//! any YAML value") does not say what a seed may be.

use serde::de::{self, Deserializer, Visitor};
use std::fmt;

/// Deserialize a seed, with a message that states the allowed range.
pub fn seed<'de, D: Deserializer<'de>>(d: D) -> Result<u64, D::Error> {
    d.deserialize_any(SeedVisitor)
}

struct SeedVisitor;

fn out_of_range<E: de::Error>(shown: impl fmt::Display) -> E {
    E::custom(format!(
        "seed {shown} is out of range; expected an integer from 0 to 18446744073709551615 (2^64 - 1)"
    ))
}

impl Visitor<'_> for SeedVisitor {
    type Value = u64;

    fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
        f.write_str("an integer from 0 to 18446744073709551615 (2^64 - 1)")
    }

    fn visit_u64<E: de::Error>(self, v: u64) -> Result<u64, E> {
        Ok(v)
    }

    fn visit_i64<E: de::Error>(self, v: i64) -> Result<u64, E> {
        u64::try_from(v).map_err(|_| out_of_range(v))
    }

    fn visit_u128<E: de::Error>(self, v: u128) -> Result<u64, E> {
        u64::try_from(v).map_err(|_| out_of_range(v))
    }

    fn visit_i128<E: de::Error>(self, v: i128) -> Result<u64, E> {
        u64::try_from(v).map_err(|_| out_of_range(v))
    }

    fn visit_f64<E: de::Error>(self, v: f64) -> Result<u64, E> {
        Err(E::custom(format!(
            "seed {v} is not an integer; expected an integer from 0 to 18446744073709551615"
        )))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[derive(serde::Deserialize)]
    struct S {
        #[serde(deserialize_with = "seed")]
        seed: u64,
    }

    fn parse(text: &str) -> Result<u64, String> {
        serde_yaml_ng::from_str::<S>(text)
            .map(|s| s.seed)
            .map_err(|e| e.to_string())
    }

    #[test]
    fn full_range_and_clear_refusals() {
        assert_eq!(parse("seed: 0"), Ok(0));
        assert_eq!(parse("seed: 18446744073709551615"), Ok(u64::MAX));
        let e = parse("seed: 18446744073709551616").unwrap_err();
        assert!(e.contains("out of range") && e.contains("2^64 - 1"), "{e}");
        let e = parse("seed: -1").unwrap_err();
        assert!(e.contains("seed -1 is out of range"), "{e}");
        let e = parse("seed: 1.5").unwrap_err();
        assert!(e.contains("not an integer"), "{e}");
        let e = parse("seed: abc").unwrap_err();
        assert!(e.contains("expected an integer from 0"), "{e}");
    }
}
