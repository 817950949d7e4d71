//! Forecast threshold exceedances as OASIS CAP 1.2 alert messages, with an
//! Atom (RFC 4287) index feed for automated emergency-management systems.
//!
//! Two steps, both pure (no I/O, no clock: the caller passes `now`):
//!
//! 1. [`plan`] compares the latest forecast [`Situation`]s with the messages
//!    already [`Issued`] and decides, per (reach, point, threshold) [`Key`],
//!    whether a new `Alert`, an `Update`, a `Cancel` or nothing is due. A
//!    consumer of CAP keeps the latest message of a chain as the current
//!    statement, so we only send again when something it relies on changed
//!    materially; sending on every model run would drown the signal.
//! 2. [`render_cap`] and [`render_atom`] turn planned messages into XML.
//!    The XML goes through quick-xml's writer, so escaping is the
//!    library's job (`xml.rs`).
//!
//! Files: `situation.rs` (what a run forecasts for one point and threshold),
//! `plan.rs` (Alert/Update/Cancel chains and identifiers), `wording.rs`
//! (what a message says), `document.rs` (the CAP document), `atom.rs` (the
//! Atom index and its ids), `tag.rs` (tag URIs), `lexical.rs` (tokens,
//! times and URIs as CAP and Atom write them), `xml.rs` (writing XML).
//!
//! Every message carries [`crate::CAUTION`]: the output is advisory model
//! output, not an official warning.
//!
//! Standards followed (section numbers of OASIS CAP 1.2, 2010, RFC 4287 and
//! RFC 4151; where a detail was recalled rather than read it says "from
//! memory"):
//! - CAP §3.2.1 `alert`: identifier, sender, sent, status, msgType, scope are
//!   required; identifier and sender must not contain spaces, commas or the
//!   restricted characters `<` and `&`, and the identifier is unique for the
//!   sender (it carries the database's identity, see [`Issuer`]);
//!   `references` is a space-separated list of `sender,identifier,sent`
//!   triples.
//! - CAP §3.2.2 `info`: category, event, urgency, severity, certainty are
//!   required; the vocabularies are listed on the enums below.
//! - CAP §3.2.4 `area`: areaDesc required; `circle` is `lat,lon radius` in
//!   WGS 84 with the radius in kilometres (from memory).
//! - CAP §3.3.2 date-times: `YYYY-MM-DDThh:mm:ss±hh:mm`, no `Z`; UTC is
//!   written `-00:00` (see [`cap_time`]).
//! - RFC 4287 §4.1.1/§4.1.2: feed and entry require id, title, updated; a
//!   feed needs an author unless every entry has one; an entry without
//!   content needs a `rel="alternate"` link; §4.2.6: an id is permanent and
//!   never changes, so it never comes from the request (see [`AtomIds`]).
//! - RFC 4151: tag URIs, the Atom ids when no public base URL is set.

mod atom;
mod document;
mod lexical;
mod plan;
mod situation;
mod tag;
mod wording;
mod xml;

#[cfg(test)]
mod fixtures;

pub use atom::{AtomIds, Feed, FeedEntry, render_atom};
pub use document::{CapOptions, DEFAULT_VALIDITY, Status, expires, render_cap};
pub use lexical::{atom_time, cap_time, is_cap_token};
pub use plan::{
    CREST_CHANGE_M, ELEVATION_CHANGE_M, Issued, Issuer, Material, MsgType, ONSET_SHIFT, Planned,
    Reference, Subject, plan,
};
pub use situation::{Certainty, Circle, Key, RunContext, Situation};
pub use tag::is_tag_authority;
pub use wording::{
    EXPECTED_WITHIN, categories, certainty, description, event, headline, instruction, parameters,
    response_type, severity, summary, urgency,
};

/// XML namespace of CAP 1.2 documents (CAP §3.2.1, from memory; also in
/// shared/REFERENCES.md).
pub const CAP_NAMESPACE: &str = "urn:oasis:names:tc:emergency:cap:1.2";

/// XML namespace of Atom (RFC 4287 §2).
pub const ATOM_NAMESPACE: &str = "http://www.w3.org/2005/Atom";

/// Media type under which CAP documents are served and linked.
pub const CAP_MEDIA_TYPE: &str = "application/cap+xml";

/// Media type of the Atom index (RFC 4287 §7).
pub const ATOM_MEDIA_TYPE: &str = "application/atom+xml";

/// Why a message could not be planned or rendered.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum CapError {
    /// CAP §3.2.1: sender must be non-empty and free of spaces, commas,
    /// `<` and `&`.
    #[error("sender `{0}`: must be non-empty without spaces, commas, `<` or `&` (CAP 1.2 §3.2.1)")]
    InvalidSender(String),
    /// An earlier message cannot be referenced because its sender or
    /// identifier would break the `sender,identifier,sent` triple.
    #[error("earlier message `{identifier}` cannot be referenced: {reason}")]
    InvalidReference { identifier: String, reason: String },
    /// A number in a situation is NaN or infinite.
    #[error("{key}: {field} must be a finite number")]
    NonFinite { key: String, field: &'static str },
    /// The database identity that goes into identifiers must be ASCII
    /// letters and digits.
    #[error("instance id `{0}`: must be non-empty ASCII letters and digits")]
    InvalidInstance(String),
    /// Two situations share a key, so the plan would be ambiguous.
    #[error("{0}: the same reach, point and threshold appear twice")]
    DuplicateKey(String),
    /// `now` lies before a message it would reference; the chain would no
    /// longer read forwards in time.
    #[error("now ({now}) is before the earlier message `{identifier}` sent {sent}")]
    ClockBehind {
        identifier: String,
        sent: String,
        now: String,
    },
    /// A URL or IRI that must be absolute is not.
    #[error("{field} `{value}`: must be an absolute URI without spaces")]
    InvalidUri { field: &'static str, value: String },
    /// A tag URI (RFC 4151) needs a DNS name or an email address as its
    /// authority.
    #[error(
        "`{0}` cannot mint tag URIs: it must be a domain name or an email address (RFC 4151 §2.1)"
    )]
    InvalidTagAuthority(String),
    /// A circle outside WGS 84 ranges or with a negative radius.
    #[error("area circle: {0}")]
    InvalidCircle(String),
    /// A text field that must not be empty is.
    #[error("{0} must not be empty")]
    Empty(&'static str),
    /// A forecast with no samples cannot describe the stage from now on.
    #[error("point `{0}`: the forecast has no usable samples")]
    EmptyForecast(String),
    /// A time computation went outside the representable range.
    #[error("time out of range")]
    TimeOutOfRange,
    /// The XML writer reported an error (not expected when writing to
    /// memory).
    #[error("writing XML: {0}")]
    Xml(String),
}
