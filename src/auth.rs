//! API keys and per-key rate limits, independent of HTTP.
//!
//! A key reads `rck_<id>_<secret>`: `id` is 8 random bytes in hex, used to
//! find the key; `secret` is 32 random bytes (256 bits) in hex. Only the
//! SHA-256 of the secret is stored. For a high-entropy random token a single
//! fast hash is adequate (common practice for API tokens: there is no
//! dictionary to guess from, so slow password hashing adds nothing); the
//! comparison runs in constant time.

use std::{
    collections::HashMap,
    fmt,
    str::FromStr,
    sync::Mutex,
    time::{Duration, Instant},
};

use serde::Serialize;
use sha2::{Digest, Sha256};
use subtle::ConstantTimeEq;

/// What a key may do. `admin` may do everything the others may.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Role {
    /// Posts readings for the gauges named on the key.
    Gauge,
    /// Uploads inflow forecasts, triggers runs, confirms flagged readings.
    Forecaster,
    /// Manages gauges, reaches and keys; may do what the other roles may.
    Admin,
}

impl Role {
    pub fn as_str(self) -> &'static str {
        match self {
            Role::Gauge => "gauge",
            Role::Forecaster => "forecaster",
            Role::Admin => "admin",
        }
    }
}

impl fmt::Display for Role {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.as_str())
    }
}

impl FromStr for Role {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        match s {
            "gauge" => Ok(Role::Gauge),
            "forecaster" => Ok(Role::Forecaster),
            "admin" => Ok(Role::Admin),
            other => Err(format!(
                "unknown role `{other}` (expected gauge, forecaster or admin)"
            )),
        }
    }
}

/// Prefix of every key.
pub const KEY_PREFIX: &str = "rck_";

/// A freshly made key: the full text (shown once) and what is stored.
#[derive(Debug, Clone)]
pub struct NewKey {
    pub id: String,
    pub token: String,
    pub secret_hash: [u8; 32],
}

/// Makes a new random key from the operating system's random source.
pub fn generate_key() -> Result<NewKey, getrandom::Error> {
    let mut id = [0u8; 8];
    let mut secret = [0u8; 32];
    getrandom::fill(&mut id)?;
    getrandom::fill(&mut secret)?;
    let id = hex::encode(id);
    let secret = hex::encode(secret);
    Ok(NewKey {
        token: format!("{KEY_PREFIX}{id}_{secret}"),
        secret_hash: hash_secret(&secret),
        id,
    })
}

/// SHA-256 of the secret part's text.
pub fn hash_secret(secret: &str) -> [u8; 32] {
    Sha256::digest(secret.as_bytes()).into()
}

/// Splits `rck_<id>_<secret>` into id and secret; `None` when malformed.
pub fn parse_token(token: &str) -> Option<(&str, &str)> {
    let rest = token.strip_prefix(KEY_PREFIX)?;
    let (id, secret) = rest.split_once('_')?;
    let hex_ok = |s: &str, len: usize| s.len() == len && s.bytes().all(|b| b.is_ascii_hexdigit());
    (hex_ok(id, 16) && hex_ok(secret, 64)).then_some((id, secret))
}

/// Constant-time comparison of a presented secret with a stored hash.
pub fn secret_matches(secret: &str, stored: &[u8]) -> bool {
    let presented = hash_secret(secret);
    stored.len() == 32 && bool::from(presented.as_slice().ct_eq(stored))
}

/// A key as stored, without its secret.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct KeyInfo {
    pub id: String,
    pub name: String,
    pub role: Role,
    pub gauges: Vec<String>,
    pub created_at: String,
    pub revoked_at: Option<String>,
}

/// Per-key token buckets: `rate` tokens per second refill up to `burst`;
/// each request takes one.
#[derive(Debug)]
pub struct RateLimiter {
    rate: f64,
    burst: f64,
    buckets: Mutex<HashMap<String, (f64, Instant)>>,
}

impl RateLimiter {
    pub fn new(rate_per_sec: f64, burst: u32) -> Self {
        Self {
            rate: rate_per_sec,
            burst: f64::from(burst),
            buckets: Mutex::new(HashMap::new()),
        }
    }

    /// Takes a token for `key` at `now`; `Err(wait)` says how long until one
    /// is available.
    pub fn check(&self, key: &str, now: Instant) -> Result<(), Duration> {
        let mut buckets = match self.buckets.lock() {
            Ok(b) => b,
            Err(poisoned) => poisoned.into_inner(),
        };
        let (tokens, last) = buckets.entry(key.to_owned()).or_insert((self.burst, now));
        let elapsed = now.saturating_duration_since(*last).as_secs_f64();
        *tokens = (*tokens + elapsed * self.rate).min(self.burst);
        *last = now;
        if *tokens >= 1.0 {
            *tokens -= 1.0;
            Ok(())
        } else {
            Err(Duration::from_secs_f64((1.0 - *tokens) / self.rate))
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn generated_keys_parse_and_verify() {
        let k = generate_key().expect("random");
        let (id, secret) = parse_token(&k.token).expect("parses");
        assert_eq!(id, k.id);
        assert!(secret_matches(secret, &k.secret_hash));
        assert!(!secret_matches(&"0".repeat(64), &k.secret_hash));
        // 256-bit secret: 64 hex digits.
        assert_eq!(secret.len(), 64);
        let other = generate_key().expect("random");
        assert_ne!(k.token, other.token);
    }

    #[test]
    fn malformed_tokens_are_refused() {
        assert!(parse_token("rck_abc").is_none());
        assert!(parse_token("xyz_0123456789abcdef_00").is_none());
        assert!(parse_token(&format!("rck_0123456789abcdef_{}", "g".repeat(64))).is_none());
    }

    /// Reference: SHA-256("abc") from FIPS 180-2, Appendix B.1 (test vector).
    #[test]
    fn hash_is_sha256() {
        assert_eq!(
            hex::encode(hash_secret("abc")),
            "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
        );
    }

    #[test]
    fn bucket_refills_at_the_rate() {
        let limiter = RateLimiter::new(2.0, 2);
        let t0 = Instant::now();
        assert!(limiter.check("a", t0).is_ok());
        assert!(limiter.check("a", t0).is_ok());
        let wait = limiter.check("a", t0).expect_err("empty");
        assert!((wait.as_secs_f64() - 0.5).abs() < 1e-9, "{wait:?}");
        // Another key has its own bucket.
        assert!(limiter.check("b", t0).is_ok());
        assert!(limiter.check("a", t0 + Duration::from_millis(500)).is_ok());
    }
}
