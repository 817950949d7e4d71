//! A small front to quick-xml's writer for the CAP and Atom documents:
//! two-space indentation, a UTF-8 declaration, elements that hold text,
//! and empty elements with attributes. Escaping (XML 1.0 §2.4) is the
//! library's: `BytesText::new` and attribute values escape `<`, `>`, `&`,
//! `'`, `"` and `\r`.
//!
//! What escaping cannot fix is a character XML 1.0 does not allow at all
//! (§2.2 `Char`: most C0 controls, U+FFFE, U+FFFF): no entity can stand
//! for it, and a document holding one is rejected by every conforming
//! parser. User-chosen names could carry one, so [`legal_text`] replaces
//! them with U+FFFD before the writer sees the text.

use std::borrow::Cow;

use quick_xml::Writer;
use quick_xml::events::{BytesDecl, BytesEnd, BytesStart, BytesText, Event};

use super::CapError;

/// `s` with every character outside XML 1.0's `Char` production replaced
/// by U+FFFD. (Rust `char`s are never surrogates, so only C0 controls
/// other than tab, line feed and carriage return, and U+FFFE/U+FFFF, are
/// left to replace.)
pub(super) fn legal_text(s: &str) -> Cow<'_, str> {
    let illegal = |c: char| {
        (c < '\u{20}' && !matches!(c, '\t' | '\n' | '\r')) || matches!(c, '\u{FFFE}' | '\u{FFFF}')
    };
    if s.chars().any(illegal) {
        Cow::Owned(
            s.chars()
                .map(|c| if illegal(c) { '\u{FFFD}' } else { c })
                .collect(),
        )
    } else {
        Cow::Borrowed(s)
    }
}

/// An XML document being written to memory.
pub(super) struct XmlDoc {
    writer: Writer<Vec<u8>>,
}

/// Writing to a `Vec` does not fail; should the library ever report an
/// error anyway, it becomes a typed one rather than a panic.
fn write_error(e: impl std::fmt::Display) -> CapError {
    CapError::Xml(e.to_string())
}

impl XmlDoc {
    /// A document that starts with `<?xml version="1.0" encoding="UTF-8"?>`.
    pub(super) fn new() -> Result<Self, CapError> {
        let mut writer = Writer::new_with_indent(Vec::new(), b' ', 2);
        writer
            .write_event(Event::Decl(BytesDecl::new("1.0", Some("UTF-8"), None)))
            .map_err(write_error)?;
        Ok(Self { writer })
    }

    /// Opens `<name attr="…">`; close it with [`XmlDoc::end`].
    pub(super) fn start(&mut self, name: &str, attrs: &[(&str, &str)]) -> Result<(), CapError> {
        let start = Self::tag(name, attrs);
        self.writer
            .write_event(Event::Start(start))
            .map_err(write_error)
    }

    /// Closes the element opened last.
    pub(super) fn end(&mut self, name: &str) -> Result<(), CapError> {
        self.writer
            .write_event(Event::End(BytesEnd::new(name)))
            .map_err(write_error)
    }

    /// `<name>text</name>`.
    pub(super) fn text(&mut self, name: &str, text: &str) -> Result<(), CapError> {
        self.writer
            .create_element(name)
            .write_text_content(BytesText::new(&legal_text(text)))
            .map(|_| ())
            .map_err(write_error)
    }

    /// `<name attr="…"/>`.
    pub(super) fn empty(&mut self, name: &str, attrs: &[(&str, &str)]) -> Result<(), CapError> {
        let tag = Self::tag(name, attrs);
        self.writer
            .write_event(Event::Empty(tag))
            .map_err(write_error)
    }

    /// The document's text, ending with a line feed.
    pub(super) fn finish(self) -> Result<String, CapError> {
        let mut bytes = self.writer.into_inner();
        bytes.push(b'\n');
        String::from_utf8(bytes).map_err(write_error)
    }

    fn tag<'a>(name: &'a str, attrs: &[(&str, &str)]) -> BytesStart<'a> {
        let mut tag = BytesStart::new(name);
        for (key, value) in attrs {
            tag.push_attribute((*key, legal_text(value).as_ref()));
        }
        tag
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn characters_xml_forbids_become_replacement_characters() {
        // XML 1.0 §2.2: Char excludes U+0007 and U+FFFE but allows tab,
        // line feed and carriage return.
        assert_eq!(legal_text("bell\u{7} \u{FFFE}"), "bell\u{FFFD} \u{FFFD}");
        assert!(matches!(legal_text("tab\tlf\ncr\r"), Cow::Borrowed(_)));
    }

    #[test]
    fn the_writer_escapes_text_and_attributes() {
        let mut doc = XmlDoc::new().expect("doc");
        doc.start("a", &[("href", "x?a=1&b=\"2\"")]).expect("start");
        doc.text("b", "<c> & d\u{7}").expect("text");
        doc.end("a").expect("end");
        let xml = doc.finish().expect("finish");
        assert_eq!(
            xml,
            "<?xml version=\"1.0\" encoding=\"UTF-8\"?>\n\
             <a href=\"x?a=1&amp;b=&quot;2&quot;\">\n  \
             <b>&lt;c&gt; &amp; d\u{FFFD}</b>\n\
             </a>\n"
        );
    }
}
