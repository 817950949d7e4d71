//! The lexical forms CAP and Atom ask for: tokens (identifier, sender),
//! date-times and absolute URIs.

use chrono::{DateTime, SecondsFormat, Timelike, Utc};

use super::CapError;

/// CAP §3.2.1: identifier and sender "MUST NOT include spaces, commas or
/// restricted characters (< and &)" (from memory). Other whitespace is
/// refused too, since `references` splits on it. Public so that
/// configuration can check `alerts.sender` before the first message.
pub fn is_cap_token(s: &str) -> bool {
    !s.is_empty()
        && !s
            .chars()
            .any(|c| c.is_whitespace() || c.is_control() || matches!(c, ',' | '<' | '&'))
}

pub(super) fn truncate_seconds(t: DateTime<Utc>) -> DateTime<Utc> {
    t.with_nanosecond(0).unwrap_or(t)
}

/// A CAP date-time (CAP §3.3.2): `YYYY-MM-DDThh:mm:ss-00:00`, whole seconds.
///
/// CAP forbids alphabetic zone designators such as `Z` and says "The
/// timezone for UTC MUST be represented as -00:00". That sentence is quoted
/// identically by several independent CAP libraries citing CAP-v1.2-os
/// §3.3.2; the OASIS document itself was not re-read here. (RFC 3339 §4.3
/// gives `-00:00` the sense "UTC, local offset unknown", which is true of a
/// forecast service: it knows no local zone of its consumers.)
pub fn cap_time(t: DateTime<Utc>) -> String {
    truncate_seconds(t)
        .format("%Y-%m-%dT%H:%M:%S-00:00")
        .to_string()
}

/// An RFC 3339 date-time for Atom (RFC 4287 §3.3), whole seconds, `Z`.
pub fn atom_time(t: DateTime<Utc>) -> String {
    truncate_seconds(t).to_rfc3339_opts(SecondsFormat::Secs, true)
}

/// An absolute URI: a scheme (RFC 3986 §3.1), a colon, something after it,
/// and no whitespace or characters that need escaping in XML.
fn is_absolute_uri(s: &str) -> bool {
    let Some((scheme, rest)) = s.split_once(':') else {
        return false;
    };
    let mut chars = scheme.chars();
    chars.next().is_some_and(|c| c.is_ascii_alphabetic())
        && chars.all(|c| c.is_ascii_alphanumeric() || matches!(c, '+' | '-' | '.'))
        && !rest.is_empty()
        && !s.chars().any(|c| c.is_whitespace() || c.is_control())
}

pub(super) fn check_uri(field: &'static str, value: &str) -> Result<(), CapError> {
    if is_absolute_uri(value) {
        Ok(())
    } else {
        Err(CapError::InvalidUri {
            field,
            value: value.to_owned(),
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use chrono::{Duration, TimeZone};

    #[test]
    fn cap_time_has_offset_and_no_fraction() {
        let x = Utc
            .with_ymd_and_hms(2031, 1, 2, 3, 4, 5)
            .single()
            .expect("valid")
            + Duration::milliseconds(987);
        assert_eq!(cap_time(x), "2031-01-02T03:04:05-00:00");
        assert_eq!(atom_time(x), "2031-01-02T03:04:05Z");
    }
}
