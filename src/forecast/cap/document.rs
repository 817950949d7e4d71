//! The CAP 1.2 XML document of a planned message.

use chrono::{DateTime, Duration, Utc};
use serde::{Deserialize, Serialize};

use super::lexical::{cap_time, check_uri, is_cap_token, truncate_seconds};
use super::xml::XmlDoc;
use super::{
    CAP_NAMESPACE, CapError, Circle, MsgType, Planned, Reference, Situation, Subject, categories,
    certainty, description, event, headline, instruction, parameters, response_type, severity,
    urgency,
};

/// How long a message stays valid after it is sent, unless the forecast
/// exceedance lasts longer (see [`CapOptions::validity`]).
pub const DEFAULT_VALIDITY: Duration = Duration::hours(6);

/// CAP §3.2.1 `status`: how the message is to be handled. `Actual` in
/// service; a demonstration uses `Exercise` or `Test` so that no consumer
/// acts on it.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
pub enum Status {
    #[default]
    Actual,
    Exercise,
    System,
    Test,
    Draft,
}

impl Status {
    /// The CAP spelling.
    pub fn cap_value(self) -> &'static str {
        match self {
            Status::Actual => "Actual",
            Status::Exercise => "Exercise",
            Status::System => "System",
            Status::Test => "Test",
            Status::Draft => "Draft",
        }
    }
}

/// Rendering choices that are the deployment's, not the forecast's.
#[derive(Debug, Clone, PartialEq)]
pub struct CapOptions {
    /// CAP `status`; `Actual` in service, `Exercise` or `Test` for demos.
    pub status: Status,
    /// CAP `senderName`: human-readable name of the issuing service.
    pub sender_name: String,
    /// CAP `web`: absolute URL of the dashboard for this reach, if any.
    pub web: Option<String>,
    /// A message expires this long after it is sent, or when the forecast
    /// says the water falls back below, whichever is later. Consumers drop
    /// expired messages, so if this service stops sending, its last
    /// statement fades instead of standing forever; while it runs, the
    /// expiry is never earlier than the forecast end of the exceedance.
    pub validity: Duration,
    /// CAP `language` (RFC 3066 code).
    pub language: String,
}

impl Default for CapOptions {
    fn default() -> Self {
        Self {
            status: Status::Actual,
            sender_name: "reachcast advisory river-stage forecast".to_owned(),
            web: None,
            validity: DEFAULT_VALIDITY,
            language: "en".to_owned(),
        }
    }
}

/// CAP `expires` (see [`CapOptions::validity`]); a `Cancel` lasts only the
/// validity, long enough for every consumer to see it.
pub fn expires(msg: &Planned, validity: Duration) -> Result<DateTime<Utc>, CapError> {
    let base = msg
        .sent
        .checked_add_signed(validity)
        .ok_or(CapError::TimeOutOfRange)?;
    Ok(match msg.situation() {
        Some(s) if msg.msg_type != MsgType::Cancel => match s.back_below {
            Some(b) if b > base => truncate_seconds(b),
            _ => base,
        },
        _ => base,
    })
}

fn check_circle(c: &Circle) -> Result<(), CapError> {
    if !(c.lat.is_finite() && (-90.0..=90.0).contains(&c.lat)) {
        return Err(CapError::InvalidCircle(format!(
            "latitude {} outside -90..90",
            c.lat
        )));
    }
    if !(c.lon.is_finite() && (-180.0..=180.0).contains(&c.lon)) {
        return Err(CapError::InvalidCircle(format!(
            "longitude {} outside -180..180",
            c.lon
        )));
    }
    if !(c.radius_km.is_finite() && c.radius_km >= 0.0) {
        return Err(CapError::InvalidCircle(format!(
            "radius {} km must be zero or positive",
            c.radius_km
        )));
    }
    Ok(())
}

/// Renders a planned message as a CAP 1.2 XML document (UTF-8).
///
/// Element order follows the CAP 1.2 schema sequence (from memory):
/// `alert` = identifier, sender, sent, status, msgType, scope, references,
/// info; `info` = language, category, event, responseType, urgency,
/// severity, certainty, onset, expires, senderName, headline, description,
/// instruction, web, parameter, area; `area` = areaDesc, circle.
pub fn render_cap(msg: &Planned, opts: &CapOptions) -> Result<String, CapError> {
    if !is_cap_token(&msg.sender) {
        return Err(CapError::InvalidSender(msg.sender.clone()));
    }
    if !is_cap_token(&msg.identifier) {
        return Err(CapError::InvalidReference {
            identifier: msg.identifier.clone(),
            reason: "the identifier has a space, comma, `<` or `&`".to_owned(),
        });
    }
    if opts.language.trim().is_empty() {
        return Err(CapError::Empty("language"));
    }
    if let Some(web) = &opts.web {
        check_uri("web", web)?;
    }
    if let Some(c) = msg.situation().and_then(|s| s.location) {
        check_circle(&c)?;
    }

    let mut x = XmlDoc::new()?;
    x.start("alert", &[("xmlns", CAP_NAMESPACE)])?;
    x.text("identifier", &msg.identifier)?;
    x.text("sender", &msg.sender)?;
    x.text("sent", &cap_time(msg.sent))?;
    x.text("status", opts.status.cap_value())?;
    x.text("msgType", msg.msg_type.cap_value())?;
    x.text("scope", "Public")?;
    if !msg.references.is_empty() {
        let refs: Vec<String> = msg.references.iter().map(Reference::triple).collect();
        x.text("references", &refs.join(" "))?;
    }
    write_info(&mut x, msg, opts)?;
    x.end("alert")?;
    x.finish()
}

/// The `info` block, in schema order (see [`render_cap`]).
fn write_info(x: &mut XmlDoc, msg: &Planned, opts: &CapOptions) -> Result<(), CapError> {
    x.start("info", &[])?;
    x.text("language", &opts.language)?;
    for c in categories(msg) {
        x.text("category", c)?;
    }
    x.text("event", &event(msg))?;
    if let Some(r) = response_type(msg) {
        x.text("responseType", r)?;
    }
    x.text("urgency", urgency(msg))?;
    x.text("severity", severity(msg))?;
    x.text("certainty", certainty(msg))?;
    if msg.msg_type != MsgType::Cancel
        && let Some(t) = msg.situation().and_then(Situation::onset)
    {
        x.text("onset", &cap_time(t))?;
    }
    x.text("expires", &cap_time(expires(msg, opts.validity)?))?;
    if !opts.sender_name.trim().is_empty() {
        x.text("senderName", &opts.sender_name)?;
    }
    x.text("headline", &headline(msg))?;
    x.text("description", &description(msg))?;
    x.text("instruction", instruction())?;
    if let Some(web) = &opts.web {
        x.text("web", web)?;
    }
    for (name, value) in parameters(msg) {
        x.start("parameter", &[])?;
        x.text("valueName", name)?;
        x.text("value", &value)?;
        x.end("parameter")?;
    }
    x.start("area", &[])?;
    let area_desc = match &msg.subject {
        Subject::Forecast(s) => format!("{}, {}", s.point_name, s.reach_name),
        Subject::Withdrawn {
            reach_name,
            point_name,
        } => format!("{point_name}, {reach_name}"),
    };
    x.text("areaDesc", &area_desc)?;
    if let Some(c) = msg.situation().and_then(|s| s.location) {
        let circle = format!("{:.6},{:.6} {:.3}", c.lat, c.lon, c.radius_km);
        x.text("circle", &circle)?;
    }
    x.end("area")?;
    x.end("info")
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::forecast::cap::fixtures::{ISSUER, situation, t};
    use crate::forecast::cap::plan;

    #[test]
    fn special_characters_in_names_are_escaped() {
        let mut s = situation();
        s.point_name = "Mill <Lane> & \"Ford\" 'Crossing'\u{7}".into();
        let p = plan(&[], &[s], t(6, 0), &ISSUER).expect("plan");
        let xml = render_cap(&p[0], &CapOptions::default()).expect("render");
        // XML 1.0 §2.4: `<` and `&` never appear raw in text; §2.2: U+0007
        // is no XML character, so it is replaced.
        assert!(
            xml.contains("Mill &lt;Lane&gt; &amp; &quot;Ford&quot; &apos;Crossing&apos;\u{FFFD}")
        );
        assert!(!xml.contains("<Lane>"));
        assert!(!xml.contains("& \""));
        assert!(!xml.contains('\u{7}'));
    }

    #[test]
    fn expires_is_validity_or_back_below_whichever_later() {
        let p = plan(&[], &[situation()], t(6, 0), &ISSUER).expect("plan");
        // back_below 14:00 is later than 06:00 + 6 h.
        assert_eq!(expires(&p[0], DEFAULT_VALIDITY).expect("expires"), t(14, 0));
        let mut s = situation();
        s.back_below = Some(t(10, 0));
        let p = plan(&[], &[s], t(6, 0), &ISSUER).expect("plan");
        assert_eq!(expires(&p[0], DEFAULT_VALIDITY).expect("expires"), t(12, 0));
    }

    #[test]
    fn bad_render_inputs_are_typed_errors() {
        let p = plan(&[], &[situation()], t(6, 0), &ISSUER).expect("plan");
        let opts = CapOptions {
            web: Some("not a url".into()),
            ..CapOptions::default()
        };
        assert!(matches!(
            render_cap(&p[0], &opts),
            Err(CapError::InvalidUri { .. })
        ));
        let mut s = situation();
        s.location = Some(Circle {
            lat: 95.0,
            lon: 0.0,
            radius_km: 1.0,
        });
        let p = plan(&[], &[s], t(6, 0), &ISSUER).expect("plan");
        assert!(matches!(
            render_cap(&p[0], &CapOptions::default()),
            Err(CapError::InvalidCircle(_))
        ));
    }
}
