//! The Atom (RFC 4287) index of current CAP messages.

use chrono::{DateTime, Utc};

use super::lexical::{atom_time, check_uri};
use super::tag::tag_uri;
use super::xml::XmlDoc;
use super::{
    ATOM_MEDIA_TYPE, ATOM_NAMESPACE, CAP_MEDIA_TYPE, CapError, Planned, headline, summary,
};
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
    /// The entry for a message with Atom id `id` (see [`AtomIds::entry`]),
    /// its document served at `cap_url`.
    pub fn for_message(msg: &Planned, id: &str, cap_url: &str) -> FeedEntry {
        FeedEntry {
            id: id.to_owned(),
            title: headline(msg),
            summary: summary(msg),
            updated: msg.sent,
            cap_url: cap_url.to_owned(),
        }
    }
}

/// Where the Atom ids come from. RFC 4287 §4.2.6: an id is a permanent,
/// universally unique IRI that never changes, even when the entry is
/// relocated; so it must not come from the request (its `Host` header
/// says only how this client reached the service today).
#[derive(Debug, Clone, PartialEq)]
pub enum AtomIds {
    /// `alerts.base_url` is set: the permanent URLs under it, which a
    /// consumer can also fetch.
    Url {
        /// Absolute, without a trailing `/`.
        base: String,
    },
    /// No public URL: tag URIs (RFC 4151) minted under the CAP sender.
    Tag {
        /// The CAP sender: a domain name or an email address.
        authority: String,
        /// `service_meta.instance_id`: which database's feed it is.
        instance: String,
        /// When the database was created: the feed's tag date.
        created: DateTime<Utc>,
    },
}

impl AtomIds {
    /// The id of the feed served at `path`: the URL under the base, or
    /// `tag:{sender},{database creation day}:{instance}{path}`.
    pub fn feed(&self, path: &str) -> Result<String, CapError> {
        match self {
            AtomIds::Url { base } => Ok(format!("{base}{path}")),
            AtomIds::Tag {
                authority,
                instance,
                created,
            } => tag_uri(authority, *created, &format!("{instance}{path}")),
        }
    }

    /// The id of the entry for CAP message `identifier`, sent at `sent`,
    /// whose document is served at `path`: the URL under the base, or
    /// `tag:{sender},{day sent}:cap/{identifier}` (identifiers are never
    /// reused and carry the database's identity).
    pub fn entry(
        &self,
        identifier: &str,
        sent: DateTime<Utc>,
        path: &str,
    ) -> Result<String, CapError> {
        match self {
            AtomIds::Url { base } => Ok(format!("{base}{path}")),
            AtomIds::Tag { authority, .. } => {
                tag_uri(authority, sent, &format!("cap/{identifier}"))
            }
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
