//! The levels watched at a point of interest: the user's thresholds and,
//! where surveyed, the bridge's low chord and deck, each with a stable id,
//! a kind and a CAP severity. One list, so that every answer (the forecast,
//! the exceedance board, CAP, the dashboard) reports the same levels.

use serde::{Deserialize, Serialize};

use super::spec::{
    DECK_ID, DECK_SEVERITY, LOW_CHORD_ID, LOW_CHORD_SEVERITY, PointSpec, Severity, ThresholdSpec,
};

/// A threshold this close (m) to the low chord or the deck is the same
/// level: reach files written before the low chord and deck were levels
/// often typed them again as thresholds, and one level must not be
/// reported twice. Half a millimetre is below any surveyed elevation's
/// resolution (common practice: levels are given to the millimetre).
pub const SAME_LEVEL_M: f64 = 0.0005;

/// What a level is.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Default, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum LevelKind {
    /// A level the user named.
    #[default]
    Threshold,
    /// The underside of a bridge deck.
    LowChord,
    /// The top of a bridge deck or road.
    Deck,
}

impl LevelKind {
    /// The wire spelling (as serialized): `threshold`, `low_chord`, `deck`.
    pub fn as_str(self) -> &'static str {
        match self {
            LevelKind::Threshold => "threshold",
            LevelKind::LowChord => "low_chord",
            LevelKind::Deck => "deck",
        }
    }
}

/// A level to watch at one point.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LevelDef {
    /// Unique at the point; `low_chord` and `deck` for those kinds.
    pub id: String,
    pub kind: LevelKind,
    pub name: String,
    /// Elevation (m).
    pub elevation: f64,
    pub severity: Severity,
    /// Names of thresholds merged into this level (same elevation).
    pub also_named: Vec<String>,
}

/// The levels of a point, lowest first (at one elevation: thresholds, then
/// the low chord, then the deck). Threshold severities are ranked among the
/// thresholds ([`ThresholdSpec::severity_at_rank`]). A threshold within
/// [`SAME_LEVEL_M`] of the low chord or the deck is merged into it; the
/// merged level keeps the higher severity and lists the threshold's name.
pub fn levels_of(p: &PointSpec) -> Vec<LevelDef> {
    let mut structural: Vec<LevelDef> = structural_levels(p);
    let mut ranked: Vec<&ThresholdSpec> = p.thresholds.iter().collect();
    ranked.sort_by(|a, b| a.elevation.total_cmp(&b.elevation));
    let count = ranked.len();
    let mut out = Vec::with_capacity(count + structural.len());
    for (rank, t) in ranked.into_iter().enumerate() {
        let severity = t.severity_at_rank(rank, count);
        match structural
            .iter_mut()
            .find(|s| (s.elevation - t.elevation).abs() <= SAME_LEVEL_M)
        {
            Some(s) => {
                s.severity = s.severity.max(severity);
                s.also_named.push(t.name.clone());
            }
            None => out.push(LevelDef {
                id: t.level_id(),
                kind: LevelKind::Threshold,
                name: t.name.clone(),
                elevation: t.elevation,
                severity,
                also_named: Vec::new(),
            }),
        }
    }
    out.append(&mut structural);
    out.sort_by(|a, b| {
        a.elevation
            .total_cmp(&b.elevation)
            .then(a.kind.cmp(&b.kind))
    });
    out
}

/// The low chord and the deck, where the point has them.
fn structural_levels(p: &PointSpec) -> Vec<LevelDef> {
    let low_chord_severity = p.low_chord_severity.unwrap_or(LOW_CHORD_SEVERITY);
    let deck_severity = p.deck_severity.unwrap_or(DECK_SEVERITY);
    [
        (
            p.low_chord,
            LOW_CHORD_ID,
            LevelKind::LowChord,
            "low chord",
            low_chord_severity,
        ),
        (p.deck, DECK_ID, LevelKind::Deck, "deck", deck_severity),
    ]
    .into_iter()
    .filter_map(|(z, id, kind, name, severity)| {
        Some(LevelDef {
            id: id.to_owned(),
            kind,
            name: name.to_owned(),
            elevation: z?,
            severity,
            also_named: Vec::new(),
        })
    })
    .collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::forecast::spec::PointKind;

    fn bridge(thresholds: &[(&str, f64)]) -> PointSpec {
        PointSpec {
            id: None,
            name: "Sallowgate Bridge".into(),
            channel: None,
            chainage: 0.0,
            kind: PointKind::Bridge,
            low_chord: Some(51.64),
            deck: Some(52.64),
            low_chord_severity: None,
            deck_severity: None,
            thresholds: thresholds
                .iter()
                .map(|(n, z)| ThresholdSpec {
                    id: None,
                    name: (*n).into(),
                    elevation: *z,
                    severity: None,
                })
                .collect(),
            gauge: None,
        }
    }

    #[test]
    fn low_chord_and_deck_are_levels_with_default_severities() {
        let l = levels_of(&bridge(&[("bank full", 50.24), ("debris watch", 51.04)]));
        let ids: Vec<&str> = l.iter().map(|l| l.id.as_str()).collect();
        assert_eq!(ids, ["bank-full", "debris-watch", "low_chord", "deck"]);
        assert_eq!(l[2].severity, Severity::Severe);
        assert_eq!(l[3].severity, Severity::Extreme);
        assert_eq!(
            (l[2].kind, l[3].kind),
            (LevelKind::LowChord, LevelKind::Deck)
        );
        // Thresholds keep their rank among thresholds only.
        assert_eq!(
            (l[0].severity, l[1].severity),
            (Severity::Minor, Severity::Severe)
        );
    }

    #[test]
    fn a_threshold_at_the_low_chord_is_not_reported_twice() {
        let l = levels_of(&bridge(&[("water on the beams", 51.6404), ("watch", 51.0)]));
        assert_eq!(l.len(), 3, "{l:?}");
        let lc = &l[1];
        assert_eq!(lc.kind, LevelKind::LowChord);
        assert_eq!(lc.elevation, 51.64);
        assert_eq!(lc.also_named, ["water on the beams"]);
        // Rank-derived Severe (highest of two thresholds) vs the default
        // Severe: the higher of the two, Severe.
        assert_eq!(lc.severity, Severity::Severe);
        // 1 mm away is another level.
        assert_eq!(levels_of(&bridge(&[("x", 51.641)])).len(), 3);
    }

    #[test]
    fn configured_severities_win() {
        let mut p = bridge(&[]);
        p.low_chord_severity = Some(Severity::Moderate);
        p.deck_severity = Some(Severity::Severe);
        let l = levels_of(&p);
        assert_eq!(
            (l[0].severity, l[1].severity),
            (Severity::Moderate, Severity::Severe)
        );
    }
}
