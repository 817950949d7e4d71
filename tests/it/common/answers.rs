//! Checks of HTTP answers that many tests make: the status (with the body
//! in the message when it is wrong), RFC 9457 problem documents and the one
//! wire form of a time.

use serde_json::Value;

/// Asserts the status, showing the body when it differs; returns the body.
pub async fn body_of(res: reqwest::Response, status: u16) -> String {
    let got = res.status().as_u16();
    let body = res.text().await.expect("body");
    assert_eq!(got, status, "{body}");
    body
}

/// [`body_of`] for a JSON body.
pub async fn json_of(res: reqwest::Response, status: u16) -> Value {
    let body = body_of(res, status).await;
    serde_json::from_str(&body).unwrap_or_else(|e| panic!("not JSON ({e}): {body}"))
}

/// Asserts a 2xx status, showing the body when it is not.
pub async fn assert_success(res: reqwest::Response) {
    let status = res.status();
    let body = res.text().await.unwrap_or_default();
    assert!(status.is_success(), "{status}: {body}");
}

/// Asserts an RFC 9457 problem (§3: media type application/problem+json,
/// members type, title, status) and returns its body.
pub async fn problem(res: reqwest::Response, status: u16) -> Value {
    assert_eq!(res.status().as_u16(), status);
    assert_eq!(
        res.headers()["content-type"],
        "application/problem+json",
        "RFC 9457 §3 media type"
    );
    let body: Value = res.json().await.expect("problem json");
    assert_eq!(body["status"], status, "{body}");
    assert!(
        body["type"].is_string() && body["title"].is_string(),
        "{body}"
    );
    body
}

/// Asserts the one wire form of a time (README, "API"): an RFC 3339 §5.6
/// date-time in UTC with exactly three fraction digits and `Z`, e.g.
/// `2026-03-01T03:15:00.000Z`.
pub fn assert_wire_time(v: &Value) {
    let s = v
        .as_str()
        .unwrap_or_else(|| panic!("a time string, got {v}"));
    let shape: String = s
        .chars()
        .map(|c| if c.is_ascii_digit() { 'd' } else { c })
        .collect();
    assert_eq!(shape, "dddd-dd-ddTdd:dd:dd.dddZ", "{s}");
    assert!(chrono::DateTime::parse_from_rfc3339(s).is_ok(), "{s}");
}
