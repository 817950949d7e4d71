//! A small XML tree for checking CAP and Atom documents in tests, parsed
//! with quick-xml (an independent parser), and the CAP 1.2 lexical checks
//! shared by the reference and service tests.

use std::collections::HashMap;

use chrono::{DateTime, Utc};
use quick_xml::events::Event;
use quick_xml::name::ResolveResult;
use quick_xml::reader::NsReader;

/// A parsed element: namespace, local name, attributes, text, children.
#[derive(Debug, Default)]
pub struct El {
    pub ns: Option<String>,
    pub name: String,
    pub attrs: HashMap<String, String>,
    pub text: String,
    pub children: Vec<El>,
}

impl El {
    pub fn all(&self, name: &str) -> Vec<&El> {
        self.children.iter().filter(|c| c.name == name).collect()
    }
    pub fn one(&self, name: &str) -> &El {
        let v = self.all(name);
        assert_eq!(v.len(), 1, "<{}> must have exactly one <{name}>", self.name);
        v[0]
    }
    pub fn text_of(&self, name: &str) -> &str {
        &self.one(name).text
    }
    pub fn opt_text(&self, name: &str) -> Option<&str> {
        self.opt(name).map(|e| e.text.as_str())
    }
    pub fn opt(&self, name: &str) -> Option<&El> {
        let v = self.all(name);
        assert!(v.len() <= 1, "<{}> has more than one <{name}>", self.name);
        v.first().copied()
    }
    pub fn names(&self) -> Vec<&str> {
        self.children.iter().map(|c| c.name.as_str()).collect()
    }
}

/// Parses a whole document into a tree, failing on any well-formedness
/// error; also returns the XML declaration's version and encoding.
pub fn parse_document(xml: &str) -> (El, String, String) {
    let mut reader = NsReader::from_str(xml);
    let mut stack: Vec<El> = vec![El::default()];
    let (mut version, mut encoding) = (String::new(), String::new());
    loop {
        let (ns, ev) = reader.read_resolved_event().expect("well-formed XML");
        let ns = match ns {
            ResolveResult::Bound(n) => Some(n.as_ref().to_owned()),
            _ => None,
        };
        match ev {
            Event::Decl(d) => {
                version = d.version().expect("version").into_owned();
                encoding = d
                    .encoding()
                    .map(|e| e.expect("encoding").into_owned())
                    .unwrap_or_default();
            }
            Event::Start(e) => stack.push(element(ns, &e)),
            Event::Empty(e) => {
                let el = element(ns, &e);
                stack.last_mut().expect("parent").children.push(el);
            }
            Event::End(_) => {
                let el = stack.pop().expect("open element");
                stack.last_mut().expect("parent").children.push(el);
            }
            Event::Text(t) => stack
                .last_mut()
                .expect("parent")
                .text
                .push_str(&t.xml10_content()),
            Event::GeneralRef(r) => {
                let s = if r.is_char_ref() {
                    r.resolve_char_ref()
                        .expect("char ref")
                        .expect("char")
                        .to_string()
                } else {
                    let name = r.xml10_content();
                    quick_xml::escape::resolve_predefined_entity(&name)
                        .expect("only predefined entities")
                        .to_owned()
                };
                stack.last_mut().expect("parent").text.push_str(&s);
            }
            Event::CData(_) | Event::Comment(_) | Event::PI(_) | Event::DocType(_) => {}
            Event::Eof => break,
        }
    }
    let mut doc = stack.pop().expect("document");
    assert!(stack.is_empty(), "unclosed elements");
    assert_eq!(doc.children.len(), 1, "exactly one root element");
    (doc.children.remove(0), version, encoding)
}

fn element(ns: Option<String>, e: &quick_xml::events::BytesStart<'_>) -> El {
    let mut attrs = HashMap::new();
    for a in e.attributes() {
        let a = a.expect("attribute");
        let key = a.key.as_ref().to_owned();
        let value = a
            .normalized_value(quick_xml::XmlVersion::Explicit1_0)
            .expect("attribute value")
            .into_owned();
        attrs.insert(key, value);
    }
    El {
        ns,
        name: e.local_name().as_ref().to_owned(),
        attrs,
        ..El::default()
    }
}

/// The root element of a well-formed document.
pub fn parse(xml: &str) -> El {
    parse_document(xml).0
}

/// OASIS CAP 1.2 §3.3.2: `YYYY-MM-DDThh:mm:ssXzh:zm`, X being `+` or `-`;
/// alphabetic designators such as `Z` must not be used. Fractional seconds
/// are allowed by xs:dateTime but this project never emits them, so they
/// are refused here.
pub fn is_cap_time(s: &str) -> bool {
    let b = s.as_bytes();
    let digits = |r: std::ops::Range<usize>| r.clone().all(|i| b[i].is_ascii_digit());
    b.len() == 25
        && digits(0..4)
        && b[4] == b'-'
        && digits(5..7)
        && b[7] == b'-'
        && digits(8..10)
        && b[10] == b'T'
        && digits(11..13)
        && b[13] == b':'
        && digits(14..16)
        && b[16] == b':'
        && digits(17..19)
        && (b[19] == b'+' || b[19] == b'-')
        && digits(20..22)
        && b[22] == b':'
        && digits(23..25)
        && DateTime::parse_from_rfc3339(s).is_ok()
}

pub fn cap_time_value(s: &str) -> DateTime<Utc> {
    DateTime::parse_from_rfc3339(s)
        .expect("CAP time")
        .with_timezone(&Utc)
}

/// OASIS CAP 1.2 §3.2.1: identifier and sender "MUST NOT include spaces,
/// commas or restricted characters (< and &)" (from memory).
pub fn is_cap_token(s: &str) -> bool {
    !s.is_empty()
        && !s
            .chars()
            .any(|c| c.is_whitespace() || matches!(c, ',' | '<' | '&'))
}
