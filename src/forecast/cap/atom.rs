//! The Atom (RFC 4287) index of current CAP messages.

use std::fmt::Write as _;

use chrono::{DateTime, Utc};

use super::lexical::{atom_time, check_uri};
use super::xml::{element, xml_escape};
use super::{ATOM_MEDIA_TYPE, ATOM_NAMESPACE, CAP_MEDIA_TYPE, CapError, Planned, headline};
use crate::CAUTION;

/// The Atom feed's own metadata.
#[derive(Debug, Clone, PartialEq)]
pub struct Feed {
    /// Permanent absolute IRI of the feed (RFC 4287 §4.2.6).
    pub id: String,
    pub title: String,
    /// URL at which the feed itself is served (`rel="self"`).
    pub self_url: String,
    /// Feed-level author (RFC 4287 §4.1.1: required unless every entry has
    /// one; entries here inherit it).
    pub author_name: String,
}

/// One entry of the index: a current CAP message and where it is served.
#[derive(Debug, Clone, PartialEq)]
pub struct FeedEntry {
    /// Permanent absolute IRI of the entry.
    pub id: String,
    pub title: String,
    pub summary: String,
    pub updated: DateTime<Utc>,
    /// URL of the CAP document.
    pub cap_url: String,
}

impl FeedEntry {
    /// The entry for a message served at `cap_url`. Its id is that URL:
    /// the URL names the message's identifier, which is never reused, so
    /// it is as permanent as RFC 4287 §4.2.6 asks; and a consumer that has
    /// the id can fetch the document.
    pub fn for_message(msg: &Planned, cap_url: &str) -> FeedEntry {
        let title = headline(msg);
        FeedEntry {
            id: cap_url.to_owned(),
            summary: format!("{} ({}). {}", title, msg.msg_type.cap_value(), CAUTION),
            title,
            updated: msg.sent,
            cap_url: cap_url.to_owned(),
        }
    }
}

/// Renders the Atom index of current CAP messages (RFC 4287): feed id,
/// title, updated, author and `rel="self"` link; per entry id, title,
/// updated, summary and a `rel="alternate"` link of type
/// `application/cap+xml` to the CAP document.
pub fn render_atom(
    feed: &Feed,
    entries: &[FeedEntry],
    updated: DateTime<Utc>,
) -> Result<String, CapError> {
    check_uri("feed id", &feed.id)?;
    check_uri("feed self URL", &feed.self_url)?;
    if feed.title.trim().is_empty() {
        return Err(CapError::Empty("feed title"));
    }
    if feed.author_name.trim().is_empty() {
        return Err(CapError::Empty("feed author name"));
    }
    for e in entries {
        check_uri("entry id", &e.id)?;
        check_uri("entry CAP URL", &e.cap_url)?;
        if e.title.trim().is_empty() {
            return Err(CapError::Empty("entry title"));
        }
    }
    let mut x = String::new();
    x.push_str("<?xml version=\"1.0\" encoding=\"UTF-8\"?>\n");
    let _ = writeln!(x, "<feed xmlns=\"{ATOM_NAMESPACE}\">");
    let f = "  ";
    element(&mut x, f, "id", &feed.id);
    element(&mut x, f, "title", &feed.title);
    element(&mut x, f, "updated", &atom_time(updated));
    let _ = writeln!(
        x,
        "{f}<link rel=\"self\" type=\"{ATOM_MEDIA_TYPE}\" href=\"{}\"/>",
        xml_escape(&feed.self_url)
    );
    let _ = writeln!(x, "{f}<author>");
    element(&mut x, "    ", "name", &feed.author_name);
    let _ = writeln!(x, "{f}</author>");
    element(&mut x, f, "subtitle", CAUTION);
    for e in entries {
        let n = "    ";
        let _ = writeln!(x, "{f}<entry>");
        element(&mut x, n, "id", &e.id);
        element(&mut x, n, "title", &e.title);
        element(&mut x, n, "updated", &atom_time(e.updated));
        let _ = writeln!(
            x,
            "{n}<link rel=\"alternate\" type=\"{CAP_MEDIA_TYPE}\" href=\"{}\"/>",
            xml_escape(&e.cap_url)
        );
        element(&mut x, n, "summary", &e.summary);
        let _ = writeln!(x, "{f}</entry>");
    }
    x.push_str("</feed>\n");
    Ok(x)
}
