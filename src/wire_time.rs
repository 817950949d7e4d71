//! The one form of a time on the wire: RFC 3339 in UTC with milliseconds
//! and `Z` (`2026-03-01T06:15:00.000Z`), as the README promises.
//!
//! chrono's own `Serialize` writes as many fractional digits as the value
//! has (nanoseconds, or none) and `to_rfc3339` writes `+00:00`; a client
//! comparing times as text, or parsing them with a fixed pattern, would see
//! several shapes for one instant. Every JSON field that holds a time goes
//! through [`format`] or one of the serde adapters below. Reading accepts
//! any RFC 3339 time, so documents stored before this rule stay readable.

use chrono::{DateTime, SecondsFormat, Utc};
use serde::{Deserialize, Deserializer, Serializer};

/// `t` as RFC 3339 UTC with milliseconds and `Z`.
pub fn format(t: DateTime<Utc>) -> String {
    t.to_rfc3339_opts(SecondsFormat::Millis, true)
}

/// `#[serde(with = "crate::wire_time")]` for a `DateTime<Utc>`.
pub fn serialize<S: Serializer>(t: &DateTime<Utc>, s: S) -> Result<S::Ok, S::Error> {
    s.serialize_str(&format(*t))
}

/// Reads any RFC 3339 time (chrono's own rules).
pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<DateTime<Utc>, D::Error> {
    DateTime::<Utc>::deserialize(d)
}

/// `#[serde(with = "crate::wire_time::option")]` for an
/// `Option<DateTime<Utc>>` (`null` when absent).
pub mod option {
    use super::*;

    pub fn serialize<S: Serializer>(t: &Option<DateTime<Utc>>, s: S) -> Result<S::Ok, S::Error> {
        match t {
            Some(t) => s.serialize_str(&format(*t)),
            None => s.serialize_none(),
        }
    }

    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<Option<DateTime<Utc>>, D::Error> {
        Option::<DateTime<Utc>>::deserialize(d)
    }
}

/// `#[serde(with = "crate::wire_time::vec")]` for a `Vec<DateTime<Utc>>`.
pub mod vec {
    use super::*;
    use serde::ser::SerializeSeq;

    pub fn serialize<S: Serializer>(ts: &[DateTime<Utc>], s: S) -> Result<S::Ok, S::Error> {
        let mut seq = s.serialize_seq(Some(ts.len()))?;
        for t in ts {
            seq.serialize_element(&format(*t))?;
        }
        seq.end()
    }

    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<Vec<DateTime<Utc>>, D::Error> {
        Vec::<DateTime<Utc>>::deserialize(d)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[derive(serde::Serialize, serde::Deserialize, PartialEq, Debug)]
    struct Doc {
        #[serde(with = "super")]
        at: DateTime<Utc>,
        #[serde(with = "super::option")]
        maybe: Option<DateTime<Utc>>,
        #[serde(with = "super::vec")]
        times: Vec<DateTime<Utc>>,
    }

    /// RFC 3339 §5.6: `time-secfrac` and `Z` are both allowed; the service
    /// always writes exactly three fraction digits and `Z`.
    #[test]
    fn one_shape_whatever_the_precision() {
        let whole = DateTime::parse_from_rfc3339("2026-03-01T06:15:00+00:00").unwrap();
        let nanos = DateTime::parse_from_rfc3339("2026-03-01T06:15:00.123456789Z").unwrap();
        let doc = Doc {
            at: whole.with_timezone(&Utc),
            maybe: Some(nanos.with_timezone(&Utc)),
            times: vec![whole.with_timezone(&Utc)],
        };
        let json = serde_json::to_string(&doc).unwrap();
        assert_eq!(
            json,
            r#"{"at":"2026-03-01T06:15:00.000Z","maybe":"2026-03-01T06:15:00.123Z","times":["2026-03-01T06:15:00.000Z"]}"#
        );
        let none = serde_json::to_string(&Doc { maybe: None, ..doc }).unwrap();
        assert!(none.contains(r#""maybe":null"#), "{none}");
    }

    #[test]
    fn reads_older_shapes() {
        let old =
            r#"{"at":"2026-03-01T07:15:00+01:00","maybe":null,"times":["2026-03-01T06:15:00.5Z"]}"#;
        let doc: Doc = serde_json::from_str(old).unwrap();
        assert_eq!(format(doc.at), "2026-03-01T06:15:00.000Z");
        assert_eq!(format(doc.times[0]), "2026-03-01T06:15:00.500Z");
    }
}
