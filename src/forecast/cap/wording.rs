//! What a message says: CAP `urgency`, `severity`, `certainty`,
//! `responseType`, `category`, `event`, `headline`, `description`,
//! `instruction` and `parameter`s, all pure functions of a [`Planned`]
//! message.

use std::fmt::Write as _;

use chrono::{DateTime, Duration, Utc};

use super::lexical::cap_time;
use super::{MsgType, Planned, Situation, Subject};
use crate::CAUTION;
use crate::forecast::levels::LevelKind;
use crate::forecast::spec::PointKind;

/// A first crossing at most this far ahead makes the urgency `Expected`
/// (CAP §3.2.2: "responsive action should be taken soon (within next
/// hour)", from memory).
pub const EXPECTED_WITHIN: Duration = Duration::hours(1);

/// CAP §3.2.2 `urgency` of a message.
pub fn urgency(msg: &Planned) -> &'static str {
    match (&msg.subject, msg.msg_type) {
        (Subject::Withdrawn { .. }, _) => "Unknown",
        (Subject::Forecast(_), MsgType::Cancel) => "Past",
        (Subject::Forecast(s), _) => match s.onset() {
            _ if s.above_now => "Immediate",
            Some(t) if t <= msg.sent => "Immediate",
            Some(t) if t - msg.sent <= EXPECTED_WITHIN => "Expected",
            Some(_) => "Future",
            None => "Unknown",
        },
    }
}

/// CAP §3.2.2 `certainty` of a message ([`Situation::certainty`]).
pub fn certainty(msg: &Planned) -> &'static str {
    match &msg.subject {
        Subject::Withdrawn { .. } => "Unknown",
        Subject::Forecast(s) => s.certainty().cap_value(),
    }
}

/// CAP §3.2.2 `severity` of a message.
pub fn severity(msg: &Planned) -> &'static str {
    match &msg.subject {
        Subject::Withdrawn { .. } => "Unknown",
        Subject::Forecast(s) => s.severity.cap_value(),
    }
}

/// CAP §3.2.2 `responseType`, if any.
pub fn response_type(msg: &Planned) -> Option<&'static str> {
    match (&msg.subject, msg.msg_type) {
        (Subject::Withdrawn { .. }, _) => None,
        (Subject::Forecast(_), MsgType::Cancel) => Some("AllClear"),
        (Subject::Forecast(s), _) if s.stale => Some("Monitor"),
        (Subject::Forecast(_), _) => match urgency(msg) {
            "Immediate" | "Expected" => Some("Prepare"),
            _ => Some("Monitor"),
        },
    }
}

/// CAP §3.2.2 `category` values. `Met` is CAP's category for floods
/// ("Meteorological (inc. flood)"). A bridge or road crossing also gets
/// `Transport` ("Public and private transportation") so that road and rail
/// operators filtering by category see water at their crossings. `Safety`
/// is not added: it is CAP's catch-all for general public safety and would
/// add nothing a consumer can filter on.
pub fn categories(msg: &Planned) -> Vec<&'static str> {
    let mut c = vec!["Met"];
    if let Some(s) = msg.situation()
        && matches!(s.point_kind, PointKind::Bridge | PointKind::RoadCrossing)
    {
        c.push("Transport");
    }
    c
}

/// CAP `event`: what kind of event the chain is about, naming the user's
/// threshold (or the structure's part).
pub fn event(msg: &Planned) -> String {
    match msg.situation() {
        Some(s) if s.level_kind == LevelKind::LowChord => {
            "River stage forecast to reach a bridge low chord".to_owned()
        }
        Some(s) if s.level_kind == LevelKind::Deck => {
            "Bridge deck or road forecast under water".to_owned()
        }
        Some(s) => format!("River stage forecast to exceed {}", s.threshold_name),
        None => format!("River stage forecast to exceed {}", msg.key.level),
    }
}

fn short_time(t: DateTime<Utc>) -> String {
    t.format("%d %b %H:%M UTC").to_string()
}

fn long_time(t: DateTime<Utc>) -> String {
    t.format("%Y-%m-%d %H:%M UTC").to_string()
}

/// How a level is named in a sentence: `the low chord`, `the deck`, or the
/// threshold's name.
fn level_words(s: &Situation) -> String {
    match s.level_kind {
        LevelKind::LowChord => "the low chord".to_owned(),
        LevelKind::Deck => "the deck".to_owned(),
        LevelKind::Threshold => s.threshold_name.clone(),
    }
}

/// CAP `headline`, under 160 characters (CAP §3.2.2 suggests 160 as a
/// target for short displays, from memory); longer names are cut with `…`.
pub fn headline(msg: &Planned) -> String {
    let text = match (&msg.subject, msg.msg_type) {
        (Subject::Withdrawn { point_name, .. }, _) => format!(
            "Advisory withdrawn: level {} at {point_name} is no longer forecast",
            msg.key.level
        ),
        (Subject::Forecast(s), MsgType::Cancel) => format!(
            "Advisory ended: {} no longer forecast above {}",
            s.point_name,
            level_words(s)
        ),
        (Subject::Forecast(s), _) => forecast_headline(s),
    };
    if text.chars().count() < 160 {
        text
    } else {
        let mut cut: String = text.chars().take(158).collect();
        cut.push('…');
        cut
    }
}

/// The headline of an `Alert` or `Update`: the structure's parts in the
/// words a planner uses ("reaches the low chord", "deck under water").
fn forecast_headline(s: &Situation) -> String {
    let p = &s.point_name;
    if let (true, Some(c)) = (s.members_only(), s.chance) {
        let from = c
            .earliest_first_above
            .map(|t| format!(", earliest {}", short_time(t)))
            .unwrap_or_default();
        return format!(
            "Advisory: {p}: {} of {} scenarios reach {}{from}",
            c.members_reaching,
            c.members,
            level_words(s)
        );
    }
    let from = s.first_above.map(short_time);
    match (s.level_kind, s.above_now, from) {
        (LevelKind::LowChord, true, _) => format!("Advisory: {p}: water at the low chord now"),
        (LevelKind::LowChord, false, Some(t)) => {
            format!("Advisory: {p}: water forecast to reach the low chord from {t}")
        }
        (LevelKind::Deck, true, _) => format!("Advisory: {p}: deck under water now"),
        (LevelKind::Deck, false, Some(t)) => {
            format!("Advisory: {p}: deck forecast under water from {t}")
        }
        (_, true, _) => format!("Advisory: {p} forecast above {} now", s.threshold_name),
        (_, false, Some(t)) => format!(
            "Advisory: {p} forecast to exceed {} from {t}",
            s.threshold_name
        ),
        (_, false, None) => format!("Advisory: {p} forecast to exceed {}", level_words(s)),
    }
}

/// The Atom entry summary of a message: its headline, its `msgType`, and
/// the caution.
pub fn summary(msg: &Planned) -> String {
    format!(
        "{} ({}). {}",
        headline(msg),
        msg.msg_type.cap_value(),
        CAUTION
    )
}

/// CAP `description`: what the forecast says, where, from which run, how
/// fresh, ending with the caution.
pub fn description(msg: &Planned) -> String {
    let mut d = String::new();
    let k = &msg.key;
    match &msg.subject {
        Subject::Withdrawn {
            reach_name,
            point_name,
        } => {
            let _ = writeln!(
                d,
                "The level `{}` at {} on {} is no longer part of this forecast's \
                 configuration, so the earlier messages about it are withdrawn. This says \
                 nothing about the river stage there.",
                k.level, point_name, reach_name
            );
        }
        Subject::Forecast(s) => {
            let _ = writeln!(
                d,
                "{} ({}) on {}, chainage {:.0} m.",
                s.point_name, s.point_kind, s.reach_name, s.chainage
            );
            forecast_lines(&mut d, msg.msg_type, s);
            let _ = writeln!(
                d,
                "Forecast crest {:.2} m at {}, {:+.2} m relative to this level.",
                s.crest_stage,
                long_time(s.crest_time),
                s.margin
            );
            chance_lines(&mut d, s);
            let _ = writeln!(
                d,
                "Model run {} finished at {}.",
                s.run_id,
                long_time(s.run_finished)
            );
            if s.stale {
                let _ = writeln!(
                    d,
                    "This forecast is stale: no newer model run finished when one was due, so \
                     it may be out of date."
                );
            }
        }
    }
    d.push_str(CAUTION);
    d
}

/// What the ensemble says about the level, in words and numbers, and why
/// a message was sent for a level the central forecast does not reach.
fn chance_lines(d: &mut String, s: &Situation) {
    let Some(c) = s.chance else { return };
    let when = match (c.earliest_first_above, c.median_first_above) {
        (Some(e), Some(m)) => format!(
            "; earliest first crossing {}, median {}",
            long_time(e),
            long_time(m)
        ),
        _ => String::new(),
    };
    let _ = writeln!(
        d,
        "Ensemble: {} of {} scenarios ({:.0} %) reach this level{when}.",
        c.members_reaching,
        c.members,
        c.probability * 100.0
    );
    if s.members_only() {
        let floor = s.alert_floor.unwrap_or(0.0) * 100.0;
        let _ = writeln!(
            d,
            "The central forecast stays below this level. This message is sent because at \
             least {floor:.0} % of the scenarios reach it."
        );
    }
}

/// What the forecast says about the level: its elevation, since when it
/// is above, when it is reached and when the water falls back below.
fn forecast_lines(d: &mut String, msg_type: MsgType, s: &Situation) {
    let _ = match s.level_kind {
        LevelKind::LowChord => writeln!(
            d,
            "Low chord of the bridge: elevation {:.2} m.",
            s.elevation
        ),
        LevelKind::Deck => writeln!(d, "Deck: elevation {:.2} m.", s.elevation),
        LevelKind::Threshold => writeln!(
            d,
            "Threshold \"{}\": elevation {:.2} m.",
            s.threshold_name, s.elevation
        ),
    };
    if msg_type == MsgType::Cancel {
        let _ = writeln!(
            d,
            "The stage is no longer forecast to exceed this level; the earlier messages about \
             it are cancelled."
        );
        return;
    }
    let _ = writeln!(d, "{}", when_sentence(s));
}

/// When the water is above the level: since when (while above now) or
/// from when, and until when, in one or two sentences.
fn when_sentence(s: &Situation) -> String {
    let until = match s.back_below {
        Some(t) => format!("Forecast to fall back below at {}.", long_time(t)),
        None => "Forecast to stay above it to the end of the forecast period.".to_owned(),
    };
    if s.above_now {
        let since = match (s.above_since, s.above_since_start) {
            (Some(t), false) => {
                format!("The stage is above this level now, since {}.", long_time(t))
            }
            (Some(t), true) => format!(
                "The stage is above this level now, and has been since at least {} (the start \
                 of the modelled look-back).",
                long_time(t)
            ),
            (None, _) => "The stage is above this level now.".to_owned(),
        };
        return format!("{since}\n{until}");
    }
    let Some(t) = s.first_above else {
        return until;
    };
    let from = long_time(t);
    match (s.level_kind, s.back_below) {
        (LevelKind::Deck, Some(b)) => {
            format!("Deck forecast under water from {from} to {}.", long_time(b))
        }
        (LevelKind::Deck, None) => format!("Deck forecast under water from {from}.\n{until}"),
        (LevelKind::LowChord, _) => format!("Forecast to reach the low chord at {from}.\n{until}"),
        (LevelKind::Threshold, _) => {
            format!("Forecast to rise above the threshold at {from}.\n{until}")
        }
    }
}

/// CAP `instruction`: the caution itself, so that a consumer that shows
/// only the instruction still shows it.
pub fn instruction() -> &'static str {
    CAUTION
}

/// CAP `parameter` pairs (valueName, value). Names are this service's own,
/// prefixed `reachcast:` so they cannot be mistaken for another system's;
/// quantities in metres, times in the CAP form.
pub fn parameters(msg: &Planned) -> Vec<(&'static str, String)> {
    let mut p = vec![("reachcast:reach_id", msg.key.reach.clone())];
    match &msg.subject {
        Subject::Withdrawn { .. } => {
            p.push(("reachcast:point_id", msg.key.point.clone()));
            p.push(("reachcast:level_id", msg.key.level.clone()));
        }
        Subject::Forecast(s) => {
            p.push(("reachcast:point_id", s.point_id.clone()));
            p.push(("reachcast:point_name", s.point_name.clone()));
            p.push(("reachcast:point_kind", s.point_kind.to_string()));
            p.push(("reachcast:chainage_m", format!("{:.1}", s.chainage)));
            p.push(("reachcast:level_id", s.level_id.clone()));
            p.push(("reachcast:level_kind", s.level_kind.as_str().to_owned()));
            p.push(("reachcast:threshold_name", s.threshold_name.clone()));
            p.push((
                "reachcast:threshold_elevation_m",
                format!("{:.3}", s.elevation),
            ));
            p.push(("reachcast:crest_stage_m", format!("{:.3}", s.crest_stage)));
            p.push(("reachcast:crest_time", cap_time(s.crest_time)));
            p.push(("reachcast:margin_m", format!("{:.3}", s.margin)));
            if let Some(t) = s.first_above {
                p.push(("reachcast:first_above", cap_time(t)));
            }
            if let Some(t) = s.back_below {
                p.push(("reachcast:back_below", cap_time(t)));
            }
            p.push(("reachcast:above_now", s.above_now.to_string()));
            if let Some(t) = s.above_since {
                p.push(("reachcast:above_since", cap_time(t)));
            }
            p.push(("reachcast:run_id", s.run_id.to_string()));
            p.push(("reachcast:run_finished", cap_time(s.run_finished)));
            p.push(("reachcast:forecast_stale", s.stale.to_string()));
            chance_parameters(&mut p, s);
        }
    }
    p
}

/// The ensemble's probability and member count as parameters.
fn chance_parameters(p: &mut Vec<(&'static str, String)>, s: &Situation) {
    let Some(c) = s.chance else { return };
    p.push(("reachcast:probability", format!("{:.3}", c.probability)));
    p.push(("reachcast:ensemble_members", c.members.to_string()));
    p.push(("reachcast:members_reaching", c.members_reaching.to_string()));
    if let Some(t) = c.earliest_first_above {
        p.push(("reachcast:earliest_first_above", cap_time(t)));
    }
    if let Some(t) = c.median_first_above {
        p.push(("reachcast:median_first_above", cap_time(t)));
    }
    p.push(("reachcast:members_only", s.members_only().to_string()));
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::forecast::cap::fixtures::{ISSUER, situation, t};
    use crate::forecast::cap::{Situation, plan};

    #[test]
    fn urgency_follows_time_to_onset() {
        let at = |now: DateTime<Utc>, s: Situation| {
            let p = plan(&[], &[s], now, &ISSUER).expect("plan");
            urgency(&p[0])
        };
        assert_eq!(at(t(6, 0), situation()), "Future");
        assert_eq!(at(t(8, 0), situation()), "Expected");
        assert_eq!(at(t(8, 1), situation()), "Expected");
        let mut s = situation();
        s.above_now = true;
        s.first_above = Some(t(6, 0));
        assert_eq!(at(t(6, 0), s), "Immediate");
    }

    #[test]
    fn headline_stays_under_160_characters() {
        let mut s = situation();
        s.point_name = "Sallowgate ".repeat(30);
        let p = plan(&[], &[s], t(6, 0), &ISSUER).expect("plan");
        assert!(headline(&p[0]).chars().count() < 160);
        assert!(
            headline(&plan(&[], &[situation()], t(6, 0), &ISSUER).expect("plan")[0])
                .contains("Sallowgate Bridge")
        );
    }

    /// The planner's words for a bridge: the low chord is "reached", the
    /// deck is "under water from … to …"; since when while above now.
    #[test]
    fn bridge_levels_are_worded_as_planners_say_them() {
        let mut lc = situation();
        lc.level_id = "low_chord".into();
        lc.level_kind = LevelKind::LowChord;
        lc.threshold_name = "low chord".into();
        let p = plan(&[], &[lc.clone()], t(6, 0), &ISSUER).expect("plan");
        assert_eq!(
            headline(&p[0]),
            "Advisory: Sallowgate Bridge: water forecast to reach the low chord from 14 Mar 09:00 UTC"
        );
        assert!(
            description(&p[0]).contains("Forecast to reach the low chord at 2031-03-14 09:00 UTC.")
        );
        let mut deck = lc.clone();
        deck.level_id = "deck".into();
        deck.level_kind = LevelKind::Deck;
        let p = plan(&[], &[deck], t(6, 0), &ISSUER).expect("plan");
        assert!(
            description(&p[0]).contains(
                "Deck forecast under water from 2031-03-14 09:00 UTC to 2031-03-14 14:00 UTC."
            ),
            "{}",
            description(&p[0])
        );
        lc.above_now = true;
        lc.above_since = Some(t(4, 30));
        let p = plan(&[], &[lc], t(6, 0), &ISSUER).expect("plan");
        assert!(description(&p[0]).contains("above this level now, since 2031-03-14 04:30 UTC"));
        assert!(headline(&p[0]).ends_with("water at the low chord now"));
    }

    #[test]
    fn caution_is_in_description_and_instruction() {
        let p = plan(&[], &[situation()], t(6, 0), &ISSUER).expect("plan");
        assert!(description(&p[0]).ends_with(CAUTION));
        assert_eq!(instruction(), CAUTION);
    }

    #[test]
    fn categories_add_transport_at_crossings_only() {
        let p = plan(&[], &[situation()], t(6, 0), &ISSUER).expect("plan");
        assert_eq!(categories(&p[0]), vec!["Met", "Transport"]);
        let mut s = situation();
        s.point_kind = PointKind::Town;
        let p = plan(&[], &[s], t(6, 0), &ISSUER).expect("plan");
        assert_eq!(categories(&p[0]), vec!["Met"]);
    }
}
