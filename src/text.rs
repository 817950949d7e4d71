//! Free text a person writes: a gauge's name, a gauging's method, the note
//! of a rating version, the reason for a shift or an upload. One rule for
//! all of them, stated the same way in the OpenAPI document so that it
//! promises what the server takes: 1 to `max` characters (Unicode scalar
//! values, as JSON Schema's `maxLength` counts them) of which at least one
//! is not white space.
//!
//! "White space" is Unicode's `White_Space` property, which is what
//! `char::is_whitespace` and `str::trim` use. Regular-expression dialects
//! disagree on `\s` (ECMA-262 counts U+FEFF, Python counts U+001C–U+001F),
//! so the schema's pattern lists the characters instead of writing `\S`.

/// The `White_Space` characters (Unicode 15, PropList.txt), as inclusive
/// ranges.
const WHITE_SPACE: &[(char, char)] = &[
    ('\u{9}', '\u{d}'),
    ('\u{20}', '\u{20}'),
    ('\u{85}', '\u{85}'),
    ('\u{a0}', '\u{a0}'),
    ('\u{1680}', '\u{1680}'),
    ('\u{2000}', '\u{200a}'),
    ('\u{2028}', '\u{2029}'),
    ('\u{202f}', '\u{202f}'),
    ('\u{205f}', '\u{205f}'),
    ('\u{3000}', '\u{3000}'),
];

/// The OpenAPI `pattern` of a text that is not blank: one character
/// outside [`WHITE_SPACE`] anywhere (JSON Schema patterns are not
/// anchored).
pub fn not_blank_pattern() -> String {
    let mut p = String::from("[^");
    for &(a, b) in WHITE_SPACE {
        p.push_str(&format!("\\u{:04x}", a as u32));
        if a != b {
            p.push_str(&format!("-\\u{:04x}", b as u32));
        }
    }
    p.push(']');
    p
}

/// Checks `text` against the rule; the message says what is accepted.
pub fn check(text: &str, max: usize) -> Result<(), String> {
    let n = text.chars().count();
    if n == 0 || n > max || text.chars().all(char::is_whitespace) {
        return Err(format!(
            "1 to {max} characters, not all white space (got {n})"
        ));
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn listed(c: char) -> bool {
        WHITE_SPACE.iter().any(|&(a, b)| (a..=b).contains(&c))
    }

    /// The listed set is exactly what the standard library calls white
    /// space, over every Unicode scalar value.
    #[test]
    fn the_list_is_the_standard_librarys_white_space() {
        for c in (0..=0x10_ffff).filter_map(char::from_u32) {
            assert_eq!(listed(c), c.is_whitespace(), "U+{:04X}", c as u32);
        }
    }

    #[test]
    fn blank_long_and_empty_texts_are_refused() {
        assert!(check("current meter", 100).is_ok());
        assert!(check(" x ", 3).is_ok());
        assert!(check("", 100).is_err());
        assert!(check("\n\u{3000}\t", 100).is_err());
        assert!(check("abcd", 3).is_err());
        // Counted in scalar values, as JSON Schema's maxLength counts.
        assert!(check("ééé", 3).is_ok());
        // U+FEFF and U+200B are not White_Space: they count as text.
        assert!(check("\u{feff}", 3).is_ok());
    }

    /// Every free-text field of the OpenAPI document carries this rule's
    /// pattern, written out the same way.
    #[test]
    fn the_openapi_document_states_the_rule() {
        let doc: serde_json::Value =
            serde_json::from_str(crate::http::openapi::DOCUMENT).expect("the document is JSON");
        let mut found = Vec::new();
        collect_patterns(&doc, &mut found);
        let ours: Vec<_> = found
            .iter()
            .filter(|p| p.starts_with("[^\\u0009"))
            .collect();
        assert_eq!(ours.len(), 6, "{found:?}");
        assert!(ours.iter().all(|p| **p == not_blank_pattern()), "{ours:?}");
    }

    fn collect_patterns(v: &serde_json::Value, out: &mut Vec<String>) {
        match v {
            serde_json::Value::Object(m) => {
                if let Some(serde_json::Value::String(p)) = m.get("pattern") {
                    out.push(p.clone());
                }
                m.values().for_each(|x| collect_patterns(x, out));
            }
            serde_json::Value::Array(a) => a.iter().for_each(|x| collect_patterns(x, out)),
            _ => {}
        }
    }

    #[test]
    fn the_pattern_lists_the_ranges() {
        let p = not_blank_pattern();
        assert!(p.starts_with("[^\\u0009-\\u000d\\u0020\\u0085"), "{p}");
        assert!(p.ends_with("\\u205f\\u3000]"), "{p}");
    }
}
