//! The gauge: what it measures and the plausibility limits its readings
//! are checked against, declared once ([`GaugeSpec`]) and checked by pure
//! functions ([`check_id`], [`GaugeSpec::check`]). Its readings (parsing,
//! per-row checks, the batch plan, the forecast rule) are in [`readings`].
//! Pure; no I/O, no SQL, no HTTP.
//!
//! ```
//! use reachcast::gauge::{GaugeSpec, Measures};
//!
//! let spec = GaugeSpec {
//!     name: "  Alder Weir ".into(),
//!     reach: None,
//!     chainage_m: None,
//!     measures: Measures::Stage,
//!     rating_curve: None,
//!     stage_min_m: 0.0,
//!     stage_max_m: 10.0,
//!     max_rise_m_per_h: 1.0,
//!     discharge_min_m3s: None,
//!     discharge_max_m3s: None,
//! };
//! assert_eq!(spec.clone().check().unwrap().name, "Alder Weir");
//! let bad = GaugeSpec { stage_max_m: -1.0, ..spec };
//! assert_eq!(bad.check().unwrap_err().field, "stage_max_m");
//! ```

pub mod ratings;
pub mod readings;

use chrono::{DateTime, Utc};
use serde::{Deserialize, Serialize};

use crate::engine::rating::RatingCurve;

/// What a gauge measures.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Measures {
    Stage,
    Discharge,
    Both,
}

impl Measures {
    pub fn as_str(self) -> &'static str {
        match self {
            Measures::Stage => "stage",
            Measures::Discharge => "discharge",
            Measures::Both => "both",
        }
    }

    pub fn parse(s: &str) -> Option<Self> {
        match s {
            "stage" => Some(Measures::Stage),
            "discharge" => Some(Measures::Discharge),
            "both" => Some(Measures::Both),
            _ => None,
        }
    }
}

/// Everything that describes a gauge: the fields a client sets with
/// `PUT /api/gauges/{id}` and the store keeps. The API's names are these
/// names, so the client's JSON deserializes straight into it; unknown
/// members are refused.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct GaugeSpec {
    pub name: String,
    /// The reach the gauge sits on, if any.
    #[serde(default)]
    pub reach: Option<String>,
    /// Where on that reach (m from its upstream end).
    #[serde(default)]
    pub chainage_m: Option<f64>,
    pub measures: Measures,
    /// Stage to discharge, in the rating format of REACH.json; a gauge
    /// that reports stage needs one to feed a forecast.
    #[serde(default)]
    pub rating_curve: Option<RatingCurve>,
    /// Plausible stage range (m).
    pub stage_min_m: f64,
    pub stage_max_m: f64,
    /// Plausible rate of change of stage (m/h, rising or falling).
    pub max_rise_m_per_h: f64,
    /// Plausible discharge range (m³/s), each bound optional.
    #[serde(default)]
    pub discharge_min_m3s: Option<f64>,
    #[serde(default)]
    pub discharge_max_m3s: Option<f64>,
}

/// A stored gauge.
#[derive(Debug, Clone, PartialEq)]
pub struct Gauge {
    /// The slug in its URL ([`valid_slug`]).
    pub id: String,
    pub spec: GaugeSpec,
    pub created_at: DateTime<Utc>,
    pub updated_at: DateTime<Utc>,
}

/// Why a gauge description was refused: the field, as the API names it,
/// and what is wrong with it.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("{field}: {message}")]
pub struct FieldError {
    pub field: String,
    pub message: String,
}

impl FieldError {
    fn new(field: &str, message: impl Into<String>) -> Self {
        Self {
            field: field.to_owned(),
            message: message.into(),
        }
    }
}

/// Whether `id` is a slug: 1 to 64 of `a-z`, `0-9`, `-`, starting with a
/// letter or digit. Gauge ids, reach ids and key gauge lists use it.
pub fn valid_slug(id: &str) -> bool {
    !id.is_empty()
        && id.len() <= 64
        && id
            .bytes()
            .all(|b| b.is_ascii_lowercase() || b.is_ascii_digit() || b == b'-')
        && !id.starts_with('-')
}

/// The slug of a display name: ASCII letters lower-cased and digits kept,
/// every other run of characters one `-`, no `-` at either end, cut to 64
/// bytes. Empty when the name has no ASCII letter or digit. Points of
/// interest and their levels take it as their default id.
pub fn slug_of(name: &str) -> String {
    let mut out = String::new();
    for c in name.chars() {
        if c.is_ascii_alphanumeric() {
            out.push(c.to_ascii_lowercase());
        } else if !out.is_empty() && !out.ends_with('-') {
            out.push('-');
        }
    }
    out.truncate(64);
    while out.ends_with('-') {
        out.pop();
    }
    out
}

/// Checks a gauge id (the path segment, named `gauge`).
pub fn check_id(id: &str) -> Result<(), FieldError> {
    if valid_slug(id) {
        Ok(())
    } else {
        Err(FieldError::new(
            "gauge",
            "a gauge id is 1 to 64 of a-z, 0-9 and -, not starting with -",
        ))
    }
}

/// Longest gauge name, in characters.
pub const MAX_NAME_CHARS: usize = 200;

fn finite(field: &str, v: f64) -> Result<(), FieldError> {
    if v.is_finite() {
        Ok(())
    } else {
        Err(FieldError::new(field, "must be a finite number"))
    }
}

impl GaugeSpec {
    /// Checks the description and returns it with its name trimmed. The
    /// first bad field is named. Whether `reach` exists is for the caller
    /// (it needs the store).
    pub fn check(mut self) -> Result<Self, FieldError> {
        crate::text::check(&self.name, MAX_NAME_CHARS).map_err(|m| FieldError::new("name", m))?;
        self.name = self.name.trim().to_owned();
        self.check_stage()?;
        if let Some(c) = self.chainage_m {
            finite("chainage_m", c)?;
        }
        self.check_discharge()?;
        if let Some(rating) = &self.rating_curve {
            // The engine's own check, so a bad curve is refused here and
            // not discovered by a failing forecast run.
            rating
                .validate()
                .map_err(|e| FieldError::new("rating_curve", e.to_string()))?;
        }
        Ok(self)
    }

    fn check_stage(&self) -> Result<(), FieldError> {
        finite("stage_min_m", self.stage_min_m)?;
        finite("stage_max_m", self.stage_max_m)?;
        if self.stage_max_m <= self.stage_min_m {
            return Err(FieldError::new(
                "stage_max_m",
                "must be greater than stage_min_m",
            ));
        }
        if !(self.max_rise_m_per_h.is_finite() && self.max_rise_m_per_h > 0.0) {
            return Err(FieldError::new(
                "max_rise_m_per_h",
                "must be a positive number (metres per hour)",
            ));
        }
        Ok(())
    }

    fn check_discharge(&self) -> Result<(), FieldError> {
        if let Some(q) = self.discharge_min_m3s
            && !(q.is_finite() && q >= 0.0)
        {
            return Err(FieldError::new(
                "discharge_min_m3s",
                "must be a finite number of at least 0",
            ));
        }
        if let Some(q) = self.discharge_max_m3s {
            finite("discharge_max_m3s", q)?;
            if q <= self.discharge_min_m3s.unwrap_or(0.0) {
                return Err(FieldError::new(
                    "discharge_max_m3s",
                    "must be greater than discharge_min_m3s (and than 0)",
                ));
            }
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn spec() -> GaugeSpec {
        GaugeSpec {
            name: "Alder Weir".into(),
            reach: None,
            chainage_m: Some(1250.0),
            measures: Measures::Both,
            rating_curve: Some(RatingCurve::Table {
                points: vec![[0.0, 0.0], [2.0, 40.0]],
            }),
            stage_min_m: 0.0,
            stage_max_m: 10.0,
            max_rise_m_per_h: 1.0,
            discharge_min_m3s: Some(0.0),
            discharge_max_m3s: Some(500.0),
        }
    }

    fn field_of(s: GaugeSpec) -> String {
        s.check().expect_err("refused").field
    }

    #[test]
    fn a_good_description_passes_with_its_name_trimmed() {
        let s = GaugeSpec {
            name: "  Alder Weir\t".into(),
            ..spec()
        };
        let checked = s.check().expect("valid");
        assert_eq!(checked.name, "Alder Weir");
        assert_eq!(checked.stage_max_m, 10.0);
    }

    #[test]
    fn each_bad_field_is_named() {
        let cases: Vec<(GaugeSpec, &str)> = vec![
            (
                GaugeSpec {
                    name: " ".into(),
                    ..spec()
                },
                "name",
            ),
            (
                GaugeSpec {
                    name: "x".repeat(MAX_NAME_CHARS + 1),
                    ..spec()
                },
                "name",
            ),
            (
                GaugeSpec {
                    stage_min_m: f64::NAN,
                    ..spec()
                },
                "stage_min_m",
            ),
            (
                GaugeSpec {
                    stage_max_m: 0.0,
                    ..spec()
                },
                "stage_max_m",
            ),
            (
                GaugeSpec {
                    max_rise_m_per_h: 0.0,
                    ..spec()
                },
                "max_rise_m_per_h",
            ),
            (
                GaugeSpec {
                    max_rise_m_per_h: f64::INFINITY,
                    ..spec()
                },
                "max_rise_m_per_h",
            ),
            (
                GaugeSpec {
                    chainage_m: Some(f64::INFINITY),
                    ..spec()
                },
                "chainage_m",
            ),
            (
                GaugeSpec {
                    discharge_min_m3s: Some(-1.0),
                    ..spec()
                },
                "discharge_min_m3s",
            ),
            (
                GaugeSpec {
                    discharge_min_m3s: Some(600.0),
                    ..spec()
                },
                "discharge_max_m3s",
            ),
            (
                GaugeSpec {
                    discharge_min_m3s: None,
                    discharge_max_m3s: Some(0.0),
                    ..spec()
                },
                "discharge_max_m3s",
            ),
        ];
        for (s, field) in cases {
            assert_eq!(field_of(s.clone()), field, "{s:?}");
        }
    }

    /// A rating table must increase in both stage and discharge (the
    /// engine's rule; a falling discharge with rising stage is not a
    /// stage–discharge relation).
    #[test]
    fn a_rating_the_engine_refuses_is_refused_naming_the_curve() {
        let s = GaugeSpec {
            rating_curve: Some(RatingCurve::Table {
                points: vec![[0.0, 10.0], [2.0, 5.0]],
            }),
            ..spec()
        };
        assert_eq!(field_of(s), "rating_curve");
    }

    #[test]
    fn names_slug_to_ids() {
        assert_eq!(slug_of("Sallowgate Bridge"), "sallowgate-bridge");
        assert_eq!(
            slug_of("  0.5 m below levee crest "),
            "0-5-m-below-levee-crest"
        );
        assert_eq!(slug_of("Île—Ford"), "le-ford");
        assert_eq!(slug_of("→ ←"), "");
        let long = slug_of(&"ab ".repeat(40));
        assert!(long.len() <= 64 && valid_slug(&long), "{long}");
    }

    #[test]
    fn ids_are_slugs() {
        for ok in ["alder-weir", "g1", "0", &"a".repeat(64)] {
            assert!(check_id(ok).is_ok(), "{ok}");
        }
        for bad in ["", "-a", "Alder", "alder_weir", "a b", "é", &"a".repeat(65)] {
            assert_eq!(check_id(bad).expect_err(bad).field, "gauge");
        }
    }

    /// The API's JSON is this type's JSON: unknown members are refused and
    /// the rating is typed.
    #[test]
    fn the_wire_form_is_the_spec() {
        let json = r#"{"name": "G", "measures": "stage", "stage_min_m": 0, "stage_max_m": 5,
            "max_rise_m_per_h": 1, "rating_curve": {"kind": "power",
            "segments": [{"c": 10, "e": 0.2, "b": 1.6}]}}"#;
        let s: GaugeSpec = serde_json::from_str(json).expect("parses");
        assert!(matches!(s.rating_curve, Some(RatingCurve::Power { .. })));
        assert_eq!(s.reach, None);
        let unknown = r#"{"name": "G", "measures": "stage", "stage_min_m": 0,
            "stage_max_m": 5, "max_rise_m_per_h": 1, "colour": "blue"}"#;
        let e = serde_json::from_str::<GaugeSpec>(unknown).expect_err("refused");
        assert!(e.to_string().contains("colour"), "{e}");
    }
}
