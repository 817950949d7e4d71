//! Tag URIs (RFC 4151): permanent identifiers minted by whoever controls a
//! domain name or an email address, with no server to resolve them. The
//! Atom index uses them as ids when no public base URL is configured, so
//! that an id never depends on how a client happened to reach the service.
//!
//! Syntax (RFC 4151 §2.1, from memory):
//!
//! ```text
//! tagURI        = "tag:" taggingEntity ":" specific
//! taggingEntity = authorityName "," date
//! authorityName = DNSname / emailAddress
//! date          = year ["-" month ["-" day]]
//! DNSname       = DNScomp *( "." DNScomp )
//! DNScomp       = alphaNum [*(alphaNum / "-") alphaNum]
//! emailAddress  = 1*(alphaNum / "-" / "." / "_") "@" DNSname
//! specific      = *( pchar / "/" / "?" )        ; pchar from RFC 3986
//! ```
//!
//! The date must be one on which the tagging entity controlled the name, and
//! never in the future: callers pass the day a message was sent or the day
//! the database was created.

use chrono::{DateTime, Utc};

use super::CapError;

fn is_dns_name(s: &str) -> bool {
    !s.is_empty()
        && s.split('.').all(|comp| {
            let b = comp.as_bytes();
            !b.is_empty()
                && b[0].is_ascii_alphanumeric()
                && b[b.len() - 1].is_ascii_alphanumeric()
                && b.iter().all(|c| c.is_ascii_alphanumeric() || *c == b'-')
        })
}

/// Whether `s` can be the authority of a tag URI: a DNS name or an email
/// address of the forms above. Public so that configuration can check
/// `alerts.sender` when the Atom ids will be tag URIs.
pub fn is_tag_authority(s: &str) -> bool {
    match s.split_once('@') {
        Some((local, domain)) => {
            !local.is_empty()
                && local
                    .chars()
                    .all(|c| c.is_ascii_alphanumeric() || matches!(c, '-' | '.' | '_'))
                && is_dns_name(domain)
        }
        None => is_dns_name(s),
    }
}

/// `s` with every byte that is not a `pchar`, `/` or `?` (RFC 3986 §3.3:
/// unreserved, sub-delims, `:` and `@`) percent-encoded.
fn encode_specific(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for b in s.bytes() {
        let keep = b.is_ascii_alphanumeric() || b"-._~!$&'()*+,;=:@/?".contains(&b);
        if keep {
            out.push(char::from(b));
        } else {
            out.push_str(&format!("%{b:02X}"));
        }
    }
    out
}

/// `tag:{authority},{YYYY-MM-DD}:{specific}`. The domain part of the
/// authority is lower-cased: DNS names are case-insensitive (RFC 4343) but
/// tags are compared as strings, so one spelling keeps one id.
pub(super) fn tag_uri(
    authority: &str,
    day: DateTime<Utc>,
    specific: &str,
) -> Result<String, CapError> {
    if !is_tag_authority(authority) {
        return Err(CapError::InvalidTagAuthority(authority.to_owned()));
    }
    let authority = match authority.split_once('@') {
        Some((local, domain)) => format!("{local}@{}", domain.to_ascii_lowercase()),
        None => authority.to_ascii_lowercase(),
    };
    Ok(format!(
        "tag:{authority},{}:{}",
        day.format("%Y-%m-%d"),
        encode_specific(specific)
    ))
}

#[cfg(test)]
mod tests {
    use super::*;
    use chrono::TimeZone;

    #[test]
    fn authorities_are_dns_names_or_email_addresses() {
        // RFC 4151 §2.1 grammar; the first three are authorities of the
        // RFC's own examples (from memory).
        for ok in [
            "timothy@hpl.hp.com",
            "my-ids.com",
            "blogger.com",
            "reachcast@localhost",
            "alerts@cast.fernhollow.example",
            "cast.fernhollow.example",
            "a-b.example",
            "x_y.z@q1.example",
        ] {
            assert!(is_tag_authority(ok), "{ok}");
        }
        for bad in [
            "",
            "@example.org",
            "reachcast@",
            "-lead.example",
            "trail-.example",
            "two..dots",
            "urn:reachcast",
            "a+b@example.org",
            "reachcast@exa_mple.org",
        ] {
            assert!(!is_tag_authority(bad), "{bad}");
        }
    }

    #[test]
    fn tag_uris_have_the_rfc_4151_shape() {
        let day = Utc
            .with_ymd_and_hms(2031, 3, 14, 23, 59, 59)
            .single()
            .expect("valid");
        assert_eq!(
            tag_uri("Alerts@Cast.Fernhollow.Example", day, "cap/r 1#x").expect("tag"),
            "tag:Alerts@cast.fernhollow.example,2031-03-14:cap/r%201%23x"
        );
        assert!(matches!(
            tag_uri("not an authority", day, "x"),
            Err(CapError::InvalidTagAuthority(_))
        ));
    }
}
