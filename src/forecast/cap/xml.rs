//! Writing XML text.

use std::fmt::Write as _;

/// Escapes text for an XML text node or a double- or single-quoted
/// attribute: the five predefined entities (XML 1.0 §2.4), and characters
/// that XML 1.0 does not allow at all (most C0 controls, U+FFFE, U+FFFF)
/// become U+FFFD, because user-chosen names must never make a document
/// that consumers reject.
pub fn xml_escape(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&apos;"),
            '\t' | '\n' | '\r' => out.push(c),
            c if (c as u32) < 0x20 || c == '\u{FFFE}' || c == '\u{FFFF}' => out.push('\u{FFFD}'),
            c => out.push(c),
        }
    }
    out
}

pub(super) fn element(out: &mut String, indent: &str, name: &str, text: &str) {
    let _ = writeln!(out, "{indent}<{name}>{}</{name}>", xml_escape(text));
}
