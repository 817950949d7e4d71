//! Shared test inputs: an invented bridge forecast and a sender.

use chrono::{DateTime, TimeZone, Utc};

use super::{Issued, Issuer, Planned, Situation};
use crate::forecast::levels::LevelKind;
use crate::forecast::spec::{PointKind, Severity};

pub const SENDER: &str = "reachcast@brindlemoor.example";

/// A database identity of the form `service_meta.instance_id` takes (32
/// lower-case hex digits; invented).
pub const INSTANCE: &str = "5eed0f1e2d3c4b5a69788796a5b4c3d2";

pub const ISSUER: Issuer<'static> = Issuer {
    sender: SENDER,
    instance: INSTANCE,
};

pub fn t(h: u32, m: u32) -> DateTime<Utc> {
    Utc.with_ymd_and_hms(2031, 3, 14, h, m, 0)
        .single()
        .expect("valid time")
}

/// A bridge on an invented reach, forecast to exceed "Road closed" at
/// 09:00, crest 12.40 m at 11:00, back below at 14:00; now is 06:00.
pub fn situation() -> Situation {
    Situation {
        reach_id: "brindlemoor".into(),
        reach_name: "Brindlemoor River".into(),
        point_id: "sallowgate-bridge".into(),
        point_name: "Sallowgate Bridge".into(),
        point_kind: PointKind::Bridge,
        chainage: 4200.0,
        level_id: "road-closed".into(),
        level_kind: LevelKind::Threshold,
        threshold_name: "Road closed".into(),
        elevation: 12.0,
        severity: Severity::Moderate,
        exceeded: true,
        above_now: false,
        above_since: None,
        above_since_start: false,
        first_above: Some(t(9, 0)),
        back_below: Some(t(14, 0)),
        crest_stage: 12.4,
        crest_time: t(11, 0),
        margin: 0.4,
        run_id: 7,
        run_finished: t(5, 50),
        stale: false,
        location: None,
        chance: None,
        alert_floor: None,
    }
}

pub fn issued(p: &[Planned]) -> Vec<Issued> {
    p.iter().map(Planned::to_issued).collect()
}
