//! The Atom (RFC 4287) index of current CAP messages.

use chrono::{DateTime, Utc};

use super::lexical::{atom_time, check_uri};
use super::xml::XmlDoc;
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
    let mut x = XmlDoc::new()?;
    x.start("feed", &[("xmlns", ATOM_NAMESPACE)])?;
    x.text("id", &feed.id)?;
    x.text("title", &feed.title)?;
    x.text("updated", &atom_time(updated))?;
    let self_link = [
        ("rel", "self"),
        ("type", ATOM_MEDIA_TYPE),
        ("href", feed.self_url.as_str()),
    ];
    x.empty("link", &self_link)?;
    x.start("author", &[])?;
    x.text("name", &feed.author_name)?;
    x.end("author")?;
    x.text("subtitle", CAUTION)?;
    for e in entries {
        x.start("entry", &[])?;
        x.text("id", &e.id)?;
        x.text("title", &e.title)?;
        x.text("updated", &atom_time(e.updated))?;
        let link = [
            ("rel", "alternate"),
            ("type", CAP_MEDIA_TYPE),
            ("href", e.cap_url.as_str()),
        ];
        x.empty("link", &link)?;
        x.text("summary", &e.summary)?;
        x.end("entry")?;
    }
    x.end("feed")?;
    x.finish()
}
