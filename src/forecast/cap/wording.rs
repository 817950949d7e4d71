//! What a message says: CAP `urgency`, `severity`, `certainty`,
//! `responseType`, `category`, `event`, `headline`, `description`,
//! `instruction` and `parameter`s, all pure functions of a [`Planned`]
//! message.

use std::fmt::Write as _;

use chrono::{DateTime, Duration, Utc};

use super::lexical::cap_time;
use super::{MsgType, Planned, Subject};
use crate::CAUTION;
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
        (Subject::Forecast(s), _) => match s.first_above {
            _ if s.above_now => "Immediate",
            Some(t) if t <= msg.sent => "Immediate",
            Some(t) if t - msg.sent <= EXPECTED_WITHIN => "Expected",
            Some(_) => "Future",
            None => "Unknown",
        },
    }
}

/// CAP §3.2.2 `certainty` of a message.
pub fn certainty(msg: &Planned) -> &'static str {
    match &msg.subject {
        Subject::Withdrawn { .. } => "Unknown",
        Subject::Forecast(s) if s.stale => "Possible",
        Subject::Forecast(_) => "Likely",
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

/// CAP `event`: the same text for every message of a chain, naming the
/// user's threshold.
pub fn event(msg: &Planned) -> String {
    format!("River stage forecast to exceed {}", msg.key.threshold)
}

fn short_time(t: DateTime<Utc>) -> String {
    t.format("%d %b %H:%M UTC").to_string()
}

fn long_time(t: DateTime<Utc>) -> String {
    t.format("%Y-%m-%d %H:%M UTC").to_string()
}

/// CAP `headline`, under 160 characters (CAP §3.2.2 suggests 160 as a
/// target for short displays, from memory); longer names are cut with `…`.
pub fn headline(msg: &Planned) -> String {
    let k = &msg.key;
    let text = match (&msg.subject, msg.msg_type) {
        (Subject::Withdrawn { .. }, _) => format!(
            "Advisory withdrawn: {} at {} is no longer forecast",
            k.threshold, k.point
        ),
        (Subject::Forecast(_), MsgType::Cancel) => format!(
            "Advisory ended: {} no longer forecast above {}",
            k.point, k.threshold
        ),
        (Subject::Forecast(s), _) if s.above_now => {
            format!("Advisory: {} forecast above {} now", k.point, k.threshold)
        }
        (Subject::Forecast(s), _) => match s.first_above {
            Some(t) => format!(
                "Advisory: {} forecast to exceed {} from {}",
                k.point,
                k.threshold,
                short_time(t)
            ),
            None => format!("Advisory: {} forecast to exceed {}", k.point, k.threshold),
        },
    };
    if text.chars().count() < 160 {
        text
    } else {
        let mut cut: String = text.chars().take(158).collect();
        cut.push('…');
        cut
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
        Subject::Withdrawn { reach_name } => {
            let _ = writeln!(
                d,
                "The threshold \"{}\" at {} on {} is no longer part of this forecast's \
                 configuration, so the earlier messages about it are withdrawn. This says \
                 nothing about the river stage there.",
                k.threshold, k.point, reach_name
            );
        }
        Subject::Forecast(s) => {
            let _ = writeln!(
                d,
                "{} ({}) on {}, chainage {:.0} m.",
                s.point_name, s.point_kind, s.reach_name, s.chainage
            );
            let _ = writeln!(
                d,
                "Threshold \"{}\": elevation {:.2} m.",
                s.threshold_name, s.elevation
            );
            if msg.msg_type == MsgType::Cancel {
                let _ = writeln!(
                    d,
                    "The stage is no longer forecast to exceed this threshold; the earlier \
                     messages about it are cancelled."
                );
            } else if s.above_now {
                let _ = writeln!(d, "The stage is above this threshold now.");
            }
            if msg.msg_type != MsgType::Cancel
                && !s.above_now
                && let Some(t) = s.first_above
            {
                let _ = writeln!(
                    d,
                    "Forecast to rise above the threshold at {}.",
                    long_time(t)
                );
            }
            if msg.msg_type != MsgType::Cancel {
                match s.back_below {
                    Some(t) => {
                        let _ = writeln!(d, "Forecast to fall back below at {}.", long_time(t));
                    }
                    None => {
                        let _ = writeln!(
                            d,
                            "Forecast to stay above it to the end of the forecast period."
                        );
                    }
                }
            }
            let _ = writeln!(
                d,
                "Forecast crest {:.2} m at {}, {:+.2} m relative to the threshold.",
                s.crest_stage,
                long_time(s.crest_time),
                s.margin
            );
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
            p.push(("reachcast:point_name", msg.key.point.clone()));
            p.push(("reachcast:threshold_name", msg.key.threshold.clone()));
        }
        Subject::Forecast(s) => {
            p.push(("reachcast:point_name", s.point_name.clone()));
            p.push(("reachcast:point_kind", s.point_kind.to_string()));
            p.push(("reachcast:chainage_m", format!("{:.1}", s.chainage)));
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
            p.push(("reachcast:run_id", s.run_id.to_string()));
            p.push(("reachcast:run_finished", cap_time(s.run_finished)));
            p.push(("reachcast:forecast_stale", s.stale.to_string()));
        }
    }
    p
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
