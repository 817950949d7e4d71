//! The gauge: what it measures and the plausibility limits its readings
//! are checked against. Its readings (parsing, per-row checks, the batch
//! plan, the forecast rule) are in [`readings`]. Pure; no I/O, no SQL, no
//! HTTP.

pub mod readings;

use serde::{Deserialize, Serialize};

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

/// A gauge and the plausibility limits its readings are checked against.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Gauge {
    pub id: String,
    pub name: String,
    pub reach: Option<String>,
    pub chainage_m: Option<f64>,
    pub measures: Measures,
    pub rating_curve: Option<serde_json::Value>,
    pub stage_min_m: f64,
    pub stage_max_m: f64,
    pub max_rise_m_per_h: f64,
    pub discharge_min_m3s: Option<f64>,
    pub discharge_max_m3s: Option<f64>,
    pub created_at: String,
    pub updated_at: String,
}

/// Whether `id` is a gauge slug: 1 to 64 of `a-z`, `0-9`, `-`, starting
/// with a letter or digit.
pub fn valid_slug(id: &str) -> bool {
    !id.is_empty()
        && id.len() <= 64
        && id
            .bytes()
            .all(|b| b.is_ascii_lowercase() || b.is_ascii_digit() || b == b'-')
        && !id.starts_with('-')
}
