//! A time window of a calibration: `FROM/TO`, two RFC 3339 times with
//! offsets joined by `/` (the ISO 8601 interval form), both ends included.

use chrono::{DateTime, Utc};

/// `from ..= to`, `from` before `to`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
pub struct Window {
    #[serde(with = "crate::wire_time")]
    pub from: DateTime<Utc>,
    #[serde(with = "crate::wire_time")]
    pub to: DateTime<Utc>,
}

impl Window {
    /// `t` lies in the window, ends included.
    pub fn contains(&self, t: DateTime<Utc>) -> bool {
        self.from <= t && t <= self.to
    }

    /// The two windows share an instant.
    pub fn overlaps(&self, other: &Window) -> bool {
        self.from <= other.to && other.from <= self.to
    }
}

impl std::fmt::Display for Window {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(
            f,
            "{}/{}",
            crate::wire_time::format(self.from),
            crate::wire_time::format(self.to)
        )
    }
}

impl std::str::FromStr for Window {
    type Err = String;

    fn from_str(s: &str) -> Result<Self, String> {
        let (a, b) = s
            .split_once('/')
            .ok_or_else(|| format!("`{s}` is not FROM/TO (two RFC 3339 times joined by /)"))?;
        let time = |t: &str| {
            DateTime::parse_from_rfc3339(t.trim())
                .map(|t| t.with_timezone(&Utc))
                .map_err(|e| format!("`{t}` is not an RFC 3339 time with an offset ({e})"))
        };
        let (from, to) = (time(a)?, time(b)?);
        if from >= to {
            return Err(format!("`{s}`: the window must end after it starts"));
        }
        Ok(Self { from, to })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// ISO 8601 writes a time interval as `start/end` (ISO 8601-1:2019,
    /// §5.5.2, from memory).
    #[test]
    fn parses_an_interval_and_refuses_bad_ones() {
        let w: Window = "2026-03-14T00:00:00Z/2026-03-15T06:00:00+01:00"
            .parse()
            .expect("valid");
        assert_eq!(w.to.to_rfc3339(), "2026-03-15T05:00:00+00:00");
        assert!(w.contains(w.from) && w.contains(w.to));
        assert!("2026-03-14T00:00:00Z".parse::<Window>().is_err());
        assert!(
            "2026-03-15T00:00:00Z/2026-03-14T00:00:00Z"
                .parse::<Window>()
                .is_err()
        );
        assert!(
            "2026-03-14/2026-03-15".parse::<Window>().is_err(),
            "no time of day"
        );
    }
}
