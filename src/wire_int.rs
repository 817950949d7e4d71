//! Whole numbers on the wire. JSON has one number type, and JSON Schema's
//! `"type": "integer"` admits any number with a zero fractional part, so
//! `645.0` is as much an integer as `645` (JSON Schema 2020-12 validation,
//! §6.1.1). serde's integer types refuse the first; this adapter takes both
//! and still refuses a fraction or a value out of the target's range.
//!
//! `#[serde(deserialize_with = "crate::wire_int::whole")]`.

use std::fmt;
use std::marker::PhantomData;

use serde::Deserializer;
use serde::de::{self, Visitor};

/// Deserialises an unsigned whole number written as an integer or as a
/// number with no fractional part.
pub fn whole<'de, D, T>(d: D) -> Result<T, D::Error>
where
    D: Deserializer<'de>,
    T: TryFrom<u64>,
{
    d.deserialize_any(Whole(PhantomData))
}

struct Whole<T>(PhantomData<T>);

impl<T: TryFrom<u64>> Whole<T> {
    fn fit<E: de::Error>(n: u64) -> Result<T, E> {
        T::try_from(n).map_err(|_| E::custom(format!("{n} is too large")))
    }
}

impl<T: TryFrom<u64>> Visitor<'_> for Whole<T> {
    type Value = T;

    fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
        f.write_str("a whole number, not negative")
    }

    fn visit_u64<E: de::Error>(self, n: u64) -> Result<T, E> {
        Self::fit(n)
    }

    fn visit_i64<E: de::Error>(self, n: i64) -> Result<T, E> {
        let n = u64::try_from(n).map_err(|_| E::custom(format!("{n} is negative")))?;
        Self::fit(n)
    }

    fn visit_f64<E: de::Error>(self, x: f64) -> Result<T, E> {
        // Every whole f64 below 2^64 is exactly a u64, so the cast below
        // loses nothing once the range and fraction are checked.
        if x.fract() != 0.0 || !x.is_finite() {
            return Err(E::custom(format!("{x} is not a whole number")));
        }
        if !(0.0..18_446_744_073_709_551_616.0).contains(&x) {
            return Err(E::custom(format!("{x} is out of range")));
        }
        Self::fit(x as u64)
    }
}

#[cfg(test)]
mod tests {
    use serde::Deserialize;

    #[derive(Debug, Deserialize)]
    struct T {
        #[serde(deserialize_with = "super::whole")]
        n: u32,
    }

    fn parse(json: &str) -> Result<u32, String> {
        serde_json::from_str::<T>(json)
            .map(|t| t.n)
            .map_err(|e| e.to_string())
    }

    /// JSON Schema 2020-12 validation §6.1.1: "integer" matches any number
    /// with a zero fractional part, so 1.0 and 1e2 are integers.
    #[test]
    fn a_number_with_no_fraction_is_whole() {
        assert_eq!(parse(r#"{"n": 645}"#), Ok(645));
        assert_eq!(parse(r#"{"n": 645.0}"#), Ok(645));
        assert_eq!(parse(r#"{"n": 1e2}"#), Ok(100));
        assert_eq!(parse(r#"{"n": -0.0}"#), Ok(0));
    }

    #[test]
    fn fractions_negatives_and_overflow_are_refused() {
        assert!(parse(r#"{"n": 1.5}"#).unwrap_err().contains("not a whole"));
        assert!(parse(r#"{"n": -3}"#).unwrap_err().contains("negative"));
        assert!(
            parse(r#"{"n": 4294967296}"#)
                .unwrap_err()
                .contains("too large")
        );
        assert!(
            parse(r#"{"n": 1e300}"#)
                .unwrap_err()
                .contains("out of range")
        );
        assert!(parse(r#"{"n": "7"}"#).is_err());
    }
}
