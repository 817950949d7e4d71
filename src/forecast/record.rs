//! The record of one forecast run, as stored and read back: its status,
//! where its inputs came from (provenance), the engine's diagnostics and
//! the results at each point of interest.
//!
//! These are the typed seams between the forecast cycle, the store and the
//! API: nothing reads a run's JSON by key. Every field added after the
//! first stored runs has a serde default, so runs stored by earlier
//! versions stay readable.

use chrono::{DateTime, Utc};
use serde::{Deserialize, Deserializer, Serialize};

use super::{
    assemble,
    digest::ResultsDigest,
    ensemble::{EnsembleSpec, spec::member_count, summary::EnsembleSummary},
    multipliers::RoughnessMultipliers,
    profile::StoredProfile,
    run::{PointForecast, RunOutput},
    spec::{Method, RoutingSpec},
};

/// Where a run stands.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum RunStatus {
    /// Recorded, routing not finished.
    Running,
    /// Finished with results.
    Ok,
    /// Finished with an error; the last good run stays served.
    Failed,
}

impl RunStatus {
    /// The stored and wire spelling.
    pub fn as_str(self) -> &'static str {
        match self {
            RunStatus::Running => "running",
            RunStatus::Ok => "ok",
            RunStatus::Failed => "failed",
        }
    }
}

impl std::str::FromStr for RunStatus {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, String> {
        match s {
            "running" => Ok(RunStatus::Running),
            "ok" => Ok(RunStatus::Ok),
            "failed" => Ok(RunStatus::Failed),
            other => Err(format!("unknown run status `{other}`")),
        }
    }
}

/// The cycle's rules in force for a run (configuration, recorded so a run
/// can be explained after the configuration changes).
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
#[serde(default)]
pub struct RuleSettings {
    pub lookback_hours: u64,
    pub horizon_hours: u64,
    pub max_gap_minutes: u64,
    pub stale_after_minutes: u64,
    /// `persistence` or `recession`.
    pub extrapolation: String,
}

/// A JSON `null` is how a non-finite number was stored (JSON has no NaN).
fn nan_if_null<'de, D: Deserializer<'de>>(d: D) -> Result<f64, D::Error> {
    Ok(Option::<f64>::deserialize(d)?.unwrap_or(f64::NAN))
}

/// What the engine said about a run, in the form stored and served.
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
#[serde(default)]
pub struct RunDiagnostics {
    #[serde(deserialize_with = "nan_if_null")]
    pub mass_balance_error_pct: f64,
    #[serde(deserialize_with = "nan_if_null")]
    pub max_froude: f64,
    #[serde(deserialize_with = "nan_if_null")]
    pub max_froude_chainage: f64,
    /// Ponce–Li–Simons dimensionless period; `None` when not computed.
    pub applicability_number: Option<f64>,
    #[serde(deserialize_with = "nan_if_null")]
    pub applicability_threshold: f64,
    /// Number of nodes that ran dry.
    pub dry_nodes: usize,
    pub extrapolated_chainages: Vec<f64>,
    pub steps: usize,
    pub rejected_steps: usize,
    pub newton_iterations_total: usize,
    #[serde(deserialize_with = "nan_if_null")]
    pub dt_min_used: f64,
    #[serde(deserialize_with = "nan_if_null")]
    pub dt_max_used: f64,
    pub wall_time_s: Option<f64>,
    pub warnings: Vec<String>,
}

impl RunDiagnostics {
    /// The stored form of a run's engine diagnostics.
    pub fn of(out: &RunOutput) -> Self {
        let d = &out.diagnostics;
        Self {
            mass_balance_error_pct: d.mass_balance_error_pct,
            max_froude: d.max_froude,
            max_froude_chainage: d.max_froude_chainage,
            applicability_number: d.applicability_number,
            applicability_threshold: d.applicability_threshold,
            dry_nodes: d.dry_nodes.len(),
            extrapolated_chainages: d.extrapolated_chainages.clone(),
            steps: d.steps,
            rejected_steps: d.rejected_steps,
            newton_iterations_total: d.newton_iterations_total,
            dt_min_used: d.dt_min_used,
            dt_max_used: d.dt_max_used,
            wall_time_s: d.wall_time_s,
            warnings: d.warnings.iter().map(ToString::to_string).collect(),
        }
    }
}

/// Where a run's inputs came from and how it was computed.
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
#[serde(default)]
pub struct RunProvenance {
    pub reach_version: i64,
    pub method: Method,
    pub routing: RoutingSpec,
    pub upstream_gauge: Option<String>,
    /// The Manning's n multipliers of the reach version routed (1 and 1
    /// when it carries none, and in runs made before calibration).
    pub roughness: RoughnessMultipliers,
    pub rules: RuleSettings,
    /// The reachcast version that made the run.
    pub engine_version: String,
    /// How the inflow was assembled; `None` when assembly failed.
    pub inflow: Option<assemble::Provenance>,
    /// Routing wall time (s); `None` until routed.
    pub wall_time_s: Option<f64>,
    /// `None` until routed.
    pub diagnostics: Option<RunDiagnostics>,
    /// The ensemble's settings and seed; `None` when it is off (and in
    /// runs made before ensembles).
    pub ensemble: Option<EnsembleProvenance>,
    /// Each tributary with a gauge: where its inflow came from.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub laterals: Vec<LateralProvenance>,
    /// Set for a hindcast run: a past instant replayed as if live.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub hindcast: Option<HindcastProvenance>,
}

/// Where a gauged tributary's inflow came from in one run.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LateralProvenance {
    /// The tributary's name in the reach description.
    pub name: String,
    /// Its gauge; `None` for a tributary fed by an upload alone.
    pub gauge: Option<String>,
    /// The assembly from the gauge's readings (and the upload after
    /// them); `None` when the gauge could not be used.
    pub inflow: Option<assemble::Provenance>,
    /// The version of the upload for this tributary that was used.
    pub upload_version: Option<i64>,
    /// Why something other than the gauge was used.
    pub fallback: Option<String>,
}

impl LateralProvenance {
    /// The tributary's gauge was silent (or unusable) when the run was
    /// made; never for a tributary without a gauge.
    pub fn stale(&self) -> bool {
        self.gauge.is_some() && self.inflow.as_ref().is_none_or(|i| i.stale)
    }
}

/// How a hindcast run was made.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct HindcastProvenance {
    /// The past instant the run is issued for.
    #[serde(with = "crate::wire_time")]
    pub issued: DateTime<Utc>,
    pub knowledge: Knowledge,
    /// The reach version in force then was none (the reach was described
    /// later), so its first version was used.
    #[serde(default)]
    pub first_version_used: bool,
}

/// What a hindcast counts as known at its issue time.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "snake_case")]
pub enum Knowledge {
    /// Readings timed and received by then, at the revision in force then
    /// (a confirmation after then does not count): what the service had.
    #[default]
    AsReceived,
    /// Readings timed by then, as stored now (later revisions included):
    /// for a period from before the readings were loaded.
    AsTimed,
}

impl Knowledge {
    pub fn as_str(self) -> &'static str {
        match self {
            Knowledge::AsReceived => "as_received",
            Knowledge::AsTimed => "as_timed",
        }
    }
}

/// How a run's ensemble was made.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct EnsembleProvenance {
    /// The reach's `ensemble` section in force, with `members` as routed.
    pub settings: EnsembleSpec,
    /// The members the reach asked for (more than `settings.members` when
    /// the service's `forecast.max_ensemble_members` limited them).
    pub requested_members: usize,
    /// The spreads are the built-in defaults, not verified error
    /// statistics of this reach.
    pub spreads_are_defaults: bool,
    /// The perturbations' seed (the run id).
    pub seed: u64,
    /// The upload's extra inflow traces, routed with its main series as
    /// equally likely scenarios in place of perturbing the inflow; empty
    /// when the inflow was perturbed.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub traces: Vec<String>,
}

impl EnsembleProvenance {
    /// The provenance of an ensemble with `settings`, at most
    /// `max_members` members (a whole number per inflow scenario), over
    /// the upload's extra `traces`, seeded by `seed`; `None` when it is
    /// off.
    pub fn of(
        settings: &EnsembleSpec,
        max_members: usize,
        seed: u64,
        traces: Vec<String>,
    ) -> Option<Self> {
        let scenarios = 1 + traces.len();
        let members = member_count(settings.members.min(max_members), scenarios);
        let used = if traces.is_empty() {
            settings.clone()
        } else {
            settings.for_traces()
        };
        let spreads_are_defaults = used.spreads_are_defaults();
        if members == 0 {
            return None;
        }
        Some(Self {
            settings: EnsembleSpec { members, ..used },
            requested_members: settings.members,
            spreads_are_defaults,
            seed,
            traces,
        })
    }
}

/// A run's ensemble, attached after its deterministic results.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "status", rename_all = "snake_case")]
pub enum EnsembleRecord {
    /// Routed and summarised.
    Ready {
        summary: EnsembleSummary,
        wall_time_s: f64,
    },
    /// Could not be made; the deterministic results stand alone.
    Failed { error: String, wall_time_s: f64 },
}

impl EnsembleRecord {
    /// The summary, when the ensemble is ready.
    pub fn summary(&self) -> Option<&EnsembleSummary> {
        match self {
            EnsembleRecord::Ready { summary, .. } => Some(summary),
            EnsembleRecord::Failed { .. } => None,
        }
    }
}

impl RunProvenance {
    /// The run's inflow assembly found the upstream gauge silent. Only a
    /// gauge can fall silent: a reach fed by uploads alone is never stale
    /// for want of readings.
    pub fn inflow_stale(&self) -> bool {
        self.upstream_gauge.is_some() && self.inflow.as_ref().is_some_and(|i| i.stale)
    }
}

/// A run's results as stored.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct StoredResults {
    pub method: Method,
    #[serde(with = "crate::wire_time")]
    pub start: DateTime<Utc>,
    #[serde(with = "crate::wire_time")]
    pub end: DateTime<Utc>,
    pub nodes: usize,
    pub points: Vec<PointForecast>,
    #[serde(default)]
    pub diagnostics: RunDiagnostics,
    /// What the longitudinal profile needs; absent in runs stored before
    /// the profile existed.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub profile: Option<StoredProfile>,
    /// In a reach of several channels, the flow split at every junction
    /// (discharges at the points' times).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub junctions: Vec<crate::forecast::network::JunctionFlow>,
}

impl StoredResults {
    /// The stored form of a routing output of a run issued at `issued`
    /// (the instant the forecast is for; its look-back lies before it).
    pub fn of(out: RunOutput, issued: DateTime<Utc>) -> Self {
        let diagnostics = RunDiagnostics::of(&out);
        let profile = StoredProfile::keep(&out.node_rows, issued);
        Self {
            profile,
            method: out.method,
            start: out.start,
            end: out.end,
            nodes: out.nodes,
            points: out.points,
            junctions: out.junctions,
            diagnostics,
        }
    }

    /// Gives points and levels of a run stored before they had ids the
    /// ids their names slug to, which is what the reach version of that
    /// run gives them by default.
    pub fn fill_legacy_ids(&mut self) {
        for p in &mut self.points {
            if p.id.is_empty() {
                p.id = crate::gauge::slug_of(&p.name);
            }
            for l in &mut p.levels {
                if l.id.is_empty() {
                    l.id = crate::gauge::slug_of(&l.name);
                }
            }
        }
    }
}

/// One forecast run as recorded.
#[derive(Debug, Clone, PartialEq)]
pub struct RunRecord {
    pub id: i64,
    pub reach_id: String,
    pub reach_version: i64,
    pub inflow_forecast_id: Option<i64>,
    pub started_at: DateTime<Utc>,
    pub finished_at: Option<DateTime<Utc>>,
    pub status: RunStatus,
    pub error: Option<String>,
    pub provenance: RunProvenance,
    /// `Some` for an `ok` run read with its results.
    pub results: Option<StoredResults>,
    /// `Some` once the run's ensemble is attached (read with the results).
    pub ensemble: Option<EnsembleRecord>,
    /// When retention replaced the results and ensemble by `digest`.
    pub pruned_at: Option<DateTime<Utc>>,
    /// What is kept of pruned results (read with the results).
    pub digest: Option<ResultsDigest>,
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A provenance stored by the first release (before these types):
    /// keys it lacks take their defaults, and `null` numbers read as NaN.
    #[test]
    fn first_release_provenance_reads() {
        let old = r#"{"reach_version":3,"method":"diffusive","upstream_gauge":"g1",
            "rules":{"lookback_hours":12,"horizon_hours":48,"max_gap_minutes":60,
            "stale_after_minutes":90,"extrapolation":"recession"},"engine_version":"0.1.0",
            "wall_time_s":0.5,"diagnostics":{"mass_balance_error_pct":null,"max_froude":0.4,
            "dry_nodes":0,"warnings":["w"]}}"#;
        let p: RunProvenance = serde_json::from_str(old).unwrap();
        assert_eq!(p.reach_version, 3);
        assert_eq!(p.rules.extrapolation, "recession");
        let d = p.diagnostics.clone().unwrap();
        assert!(d.mass_balance_error_pct.is_nan());
        assert_eq!(d.max_froude, 0.4);
        assert_eq!(d.warnings, ["w"]);
        assert!(!p.inflow_stale(), "no inflow provenance: not stale");
    }

    #[test]
    fn status_spellings() {
        for s in [RunStatus::Running, RunStatus::Ok, RunStatus::Failed] {
            assert_eq!(s.as_str().parse::<RunStatus>(), Ok(s));
            assert_eq!(serde_json::to_value(s).unwrap(), s.as_str());
        }
        assert!("done".parse::<RunStatus>().is_err());
    }
}
