//! Times as the store keeps them: RFC 3339 text in the one wire form
//! (`crate::wire_time`), written by [`now_text`] and read by [`read`].
//! Rows written by earlier releases (`+00:00`, nanoseconds) read too.
//! CAP messages keep their own fixed-width CAP time text (so that text
//! order is time order); it is RFC 3339 as well and reads the same way.

use chrono::{DateTime, Utc};

use super::StoreError;

/// Now, in the stored form.
pub(super) fn now_text() -> String {
    crate::wire_time::format(Utc::now())
}

/// A stored time of `column`; a value that does not parse is corruption.
pub(super) fn read(column: &str, text: &str) -> Result<DateTime<Utc>, StoreError> {
    DateTime::parse_from_rfc3339(text)
        .map(|t| t.with_timezone(&Utc))
        .map_err(|e| StoreError::Corrupt(format!("{column} `{text}`: {e}")))
}

/// A nullable stored time.
pub(super) fn read_opt(
    column: &str,
    text: Option<String>,
) -> Result<Option<DateTime<Utc>>, StoreError> {
    text.map(|t| read(column, &t)).transpose()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn reads_what_it_writes_and_older_forms() {
        let now = now_text();
        assert_eq!(crate::wire_time::format(read("t", &now).unwrap()), now);
        let old = read("t", "2026-03-14T00:00:01.123456789+00:00").unwrap();
        assert_eq!(crate::wire_time::format(old), "2026-03-14T00:00:01.123Z");
        let cap = read("t", "2026-03-14T01:00:00-00:00").unwrap();
        assert_eq!(crate::wire_time::format(cap), "2026-03-14T01:00:00.000Z");
        assert!(
            matches!(read("c", "yesterday"), Err(StoreError::Corrupt(m)) if m.contains("c `yesterday`"))
        );
        assert_eq!(read_opt("c", None).unwrap(), None);
    }
}
