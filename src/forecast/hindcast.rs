//! The plan of a hindcast: the past issue times a period is replayed at,
//! checked before anything runs. Each refusal names the field.

use chrono::{DateTime, Duration, Utc};

use super::record::Knowledge;

/// A hindcast to run: issue times from `from` to `to` every `every`.
#[derive(Debug, Clone, PartialEq)]
pub struct Plan {
    pub issues: Vec<DateTime<Utc>>,
    pub knowledge: Knowledge,
}

/// Why a plan was refused: the field and what is wrong.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct PlanError {
    pub field: &'static str,
    pub detail: String,
}

/// The shortest spacing of issue times: finer than live runs would make
/// many runs that say the same.
pub const MIN_EVERY_MINUTES: u64 = 5;

/// Plans issue times `from`, `from + every`, … up to `to` (inclusive),
/// all strictly before `now` and at most `max_runs` of them.
pub fn plan(
    from: DateTime<Utc>,
    to: DateTime<Utc>,
    every_minutes: u64,
    knowledge: Knowledge,
    max_runs: u64,
    now: DateTime<Utc>,
) -> Result<Plan, PlanError> {
    let bad = |field, detail: String| Err(PlanError { field, detail });
    if to >= now {
        return bad(
            "to",
            "must be in the past: a hindcast replays what has happened".to_owned(),
        );
    }
    if from > to {
        return bad("from", "must not be after `to`".to_owned());
    }
    if !(MIN_EVERY_MINUTES..=10_080).contains(&every_minutes) {
        return bad(
            "every_minutes",
            format!("must be {MIN_EVERY_MINUTES} to 10080, got {every_minutes}"),
        );
    }
    let step_ms = i64::try_from(every_minutes * 60_000).unwrap_or(i64::MAX);
    let span_ms = (to - from).num_milliseconds();
    let count = span_ms / step_ms + 1;
    if u64::try_from(count).unwrap_or(u64::MAX) > max_runs {
        return bad(
            "every_minutes",
            format!(
                "the period would take {count} runs; at most {max_runs} (forecast.max_hindcast_runs): widen the spacing or shorten the period"
            ),
        );
    }
    let issues = (0..count)
        .map(|k| from + Duration::milliseconds(k * step_ms))
        .collect();
    Ok(Plan { issues, knowledge })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn t(h: i64) -> DateTime<Utc> {
        DateTime::from_timestamp(1_790_000_000, 0).unwrap() + Duration::hours(h)
    }

    #[test]
    fn issue_times_cover_the_period_inclusive() {
        let p = plan(t(0), t(6), 180, Knowledge::AsReceived, 10, t(7)).unwrap();
        assert_eq!(p.issues, vec![t(0), t(3), t(6)]);
        let p = plan(t(0), t(0), 60, Knowledge::AsTimed, 1, t(1)).unwrap();
        assert_eq!(p.issues, vec![t(0)]);
    }

    #[test]
    fn refusals_name_the_field() {
        let e = |r: Result<Plan, PlanError>| r.unwrap_err().field;
        assert_eq!(
            e(plan(t(0), t(7), 60, Knowledge::AsReceived, 10, t(7))),
            "to"
        );
        assert_eq!(
            e(plan(t(3), t(1), 60, Knowledge::AsReceived, 10, t(7))),
            "from"
        );
        assert_eq!(
            e(plan(t(0), t(1), 1, Knowledge::AsReceived, 10, t(7))),
            "every_minutes"
        );
        let many = plan(t(0), t(6), 5, Knowledge::AsReceived, 10, t(7)).unwrap_err();
        assert!(many.detail.contains("73 runs"), "{}", many.detail);
    }
}
