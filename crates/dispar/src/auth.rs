//! API keys: the token format, hashing, and the [`Caller`] extractor that
//! authenticates every `/v1` request.
//!
//! # Tokens
//!
//! A token reads `dsp_<id>_<secret>`: the fixed prefix `dsp_` (so leaked keys are
//! easy to recognise and scan for), the key's id as the store numbered it, and 32
//! random bytes from the operating system (`getrandom`; 256 bits, twice the 128 the
//! issue asks for) as 64 lower-case hex digits. The store keeps only SHA-256 of the
//! secret's 32 bytes. A request's key is looked up by id and its hash compared with
//! `subtle::ConstantTimeEq`, so the comparison time does not depend on how many
//! leading bytes match. A fast hash is enough because the secret is random, not a
//! password: there is nothing to guess.
//!
//! # Roles
//!
//! | role   | may |
//! |--------|-----|
//! | admin  | everything |
//! | read   | every `GET` under `/v1` |
//! | ingest | write counts for its own sites; read its own sites (`GET /v1/sites/{site}`, counts with `site=` one of them, revisions) |
//!
//! A missing or bad key is 401 with `WWW-Authenticate: Bearer realm="dispar"` (plus
//! `error="invalid_token"` when a key was sent, RFC 6750 section 3); a valid key
//! without the right is 403 (`error="insufficient_scope"`).

use std::fmt;

use axum::extract::FromRequestParts;
use axum::http::header::{self, HeaderValue};
use axum::http::request::Parts;
use dispar_core::code::SiteCode;
use dispar_store::{KeyId, KeyRole};
use sha2::{Digest, Sha256};
use subtle::ConstantTimeEq;

use crate::error::{ApiError, ProblemKind};
use crate::state::AppState;

/// The fixed start of every token.
pub const TOKEN_PREFIX: &str = "dsp_";
/// Random bytes in a secret.
pub const SECRET_BYTES: usize = 32;

/// A newly made secret (shown once) and its hash (stored).
pub struct NewSecret {
    /// The secret as 64 hex digits.
    pub secret_hex: String,
    /// SHA-256 of the secret's bytes.
    pub hash: [u8; 32],
}

impl fmt::Debug for NewSecret {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.debug_struct("NewSecret").finish_non_exhaustive()
    }
}

/// Makes a new random secret.
pub fn new_secret() -> Result<NewSecret, getrandom::Error> {
    let mut bytes = [0u8; SECRET_BYTES];
    getrandom::fill(&mut bytes)?;
    Ok(NewSecret {
        secret_hex: hex::encode(bytes),
        hash: hash_secret(&bytes),
    })
}

/// SHA-256 of a secret's bytes.
pub fn hash_secret(secret: &[u8]) -> [u8; 32] {
    Sha256::digest(secret).into()
}

/// The token a client sends for key `id` with `secret_hex`.
pub fn token(id: KeyId, secret_hex: &str) -> String {
    format!("{TOKEN_PREFIX}{id}_{secret_hex}")
}

/// A token taken apart: the key id and the secret's bytes.
#[derive(PartialEq, Eq)]
pub struct ParsedToken {
    /// The key id.
    pub id: KeyId,
    /// The secret's bytes.
    pub secret: [u8; SECRET_BYTES],
}

impl fmt::Debug for ParsedToken {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.debug_struct("ParsedToken")
            .field("id", &self.id)
            .finish_non_exhaustive()
    }
}

/// Reads a token of the form `dsp_<id>_<64 hex digits>`.
pub fn parse_token(token: &str) -> Option<ParsedToken> {
    let rest = token.strip_prefix(TOKEN_PREFIX)?;
    let (id, secret) = rest.split_once('_')?;
    if id.is_empty() || !id.bytes().all(|b| b.is_ascii_digit()) {
        return None;
    }
    let id: KeyId = id.parse().ok()?;
    let mut bytes = [0u8; SECRET_BYTES];
    hex::decode_to_slice(secret, &mut bytes).ok()?;
    Some(ParsedToken { id, secret: bytes })
}

/// Compares a secret with a stored hash in constant time.
pub fn secret_matches(secret: &[u8], stored_hash: &[u8]) -> bool {
    let computed = hash_secret(secret);
    computed.as_slice().ct_eq(stored_hash).into()
}

/// The authenticated caller of a request.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Caller {
    /// The key's id.
    pub key_id: KeyId,
    /// Its role.
    pub role: KeyRole,
    /// For ingest keys, the sites it may write.
    pub sites: Vec<SiteCode>,
}

impl Caller {
    /// Admin keys only.
    pub fn require_admin(&self) -> Result<(), ApiError> {
        if self.role == KeyRole::Admin {
            Ok(())
        } else {
            Err(ApiError::forbidden(format!(
                "This needs an admin key; this key's role is {}.",
                self.role
            )))
        }
    }

    /// Read and admin keys (reading everything).
    pub fn require_read_all(&self) -> Result<(), ApiError> {
        match self.role {
            KeyRole::Admin | KeyRole::Read => Ok(()),
            KeyRole::Ingest => Err(ApiError::forbidden(
                "This needs a read or admin key; an ingest key may read only its own sites.",
            )),
        }
    }

    /// True when the key may read data of `site`.
    pub fn can_read_site(&self, site: &str) -> bool {
        match self.role {
            KeyRole::Admin | KeyRole::Read => true,
            KeyRole::Ingest => self.sites.iter().any(|s| s.as_str() == site),
        }
    }

    /// Read keys, admin keys, and ingest keys of `site`.
    pub fn require_read_site(&self, site: &str) -> Result<(), ApiError> {
        if self.can_read_site(site) {
            Ok(())
        } else {
            Err(ApiError::forbidden(format!(
                "This ingest key may read only its own sites ({}), not {site}.",
                self.site_list()
            )))
        }
    }

    /// True when the key may write counts of `site`.
    pub fn can_write_site(&self, site: &str) -> bool {
        match self.role {
            KeyRole::Admin => true,
            KeyRole::Read => false,
            KeyRole::Ingest => self.sites.iter().any(|s| s.as_str() == site),
        }
    }

    /// Admin keys, and ingest keys of `site`.
    pub fn require_write_site(&self, site: &str) -> Result<(), ApiError> {
        if self.can_write_site(site) {
            return Ok(());
        }
        Err(match self.role {
            KeyRole::Read => ApiError::forbidden("A read key cannot write counts."),
            _ => ApiError::forbidden(format!(
                "This ingest key may write only its own sites ({}), not {site}; nothing was written.",
                self.site_list()
            )),
        })
    }

    fn site_list(&self) -> String {
        if self.sites.is_empty() {
            "none".to_owned()
        } else {
            self.sites
                .iter()
                .map(SiteCode::as_str)
                .collect::<Vec<_>>()
                .join(", ")
        }
    }
}

/// 429 with `Retry-After` in whole seconds (at least 1).
fn rate_limited(wait: std::time::Duration, rate: u32) -> ApiError {
    let seconds = wait.as_secs_f64().ceil().max(1.0);
    #[allow(clippy::cast_possible_truncation, clippy::cast_sign_loss)]
    let seconds = seconds.min(3600.0) as u32;
    ApiError::new(
        ProblemKind::RateLimited,
        format!(
            "This API key sent more than {rate} requests a second (with a burst of {}); retry after {seconds} s.",
            2 * u64::from(rate)
        ),
    )
    .with_retry_after(seconds)
}

fn unauthorized(detail: &str, key_sent: bool) -> ApiError {
    let challenge = if key_sent {
        "Bearer realm=\"dispar\", error=\"invalid_token\""
    } else {
        "Bearer realm=\"dispar\""
    };
    ApiError::new(ProblemKind::Unauthorized, detail)
        .with_header(header::WWW_AUTHENTICATE, challenge)
}

/// The bearer token of a request, if it has an `Authorization: Bearer` header.
fn bearer(value: &HeaderValue) -> Option<&str> {
    let text = value.to_str().ok()?;
    let (scheme, token) = text.split_once(' ')?;
    if scheme.eq_ignore_ascii_case("bearer") {
        Some(token.trim())
    } else {
        None
    }
}

impl FromRequestParts<AppState> for Caller {
    type Rejection = ApiError;

    async fn from_request_parts(parts: &mut Parts, state: &AppState) -> Result<Self, ApiError> {
        if let Some(caller) = parts.extensions.get::<Caller>() {
            return Ok(caller.clone());
        }
        let Some(value) = parts.headers.get(header::AUTHORIZATION) else {
            return Err(unauthorized(
                "This request needs an API key: send `Authorization: Bearer <key>`.",
                false,
            ));
        };
        let Some(token) = bearer(value) else {
            return Err(unauthorized(
                "The Authorization header must use the Bearer scheme: `Authorization: Bearer <key>`.",
                true,
            ));
        };
        let Some(parsed) = parse_token(token) else {
            return Err(unauthorized("The API key is malformed.", true));
        };
        let key = match state.gate().cached_key(parsed.id) {
            Some(key) => key,
            None => {
                let key = state
                    .store()
                    .find_key(parsed.id)
                    .await
                    .map_err(ApiError::from)?;
                let Some(key) = key else {
                    return Err(unauthorized("The API key is not valid.", true));
                };
                state.gate().remember_key(&key);
                key
            }
        };
        if !secret_matches(&parsed.secret, &key.secret_hash) {
            return Err(unauthorized("The API key is not valid.", true));
        }
        if key.is_revoked() {
            return Err(unauthorized("The API key has been revoked.", true));
        }
        if let Err(wait) = state.gate().admit(key.id, &state.limits()) {
            return Err(rate_limited(wait, state.limits().rate_limit));
        }
        let caller = Caller {
            key_id: key.id,
            role: key.role,
            sites: key.sites,
        };
        tracing::Span::current().record("key_id", caller.key_id);
        parts.extensions.insert(caller.clone());
        Ok(caller)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_new_token_parses_back_and_matches_its_hash() {
        let s = new_secret().expect("random");
        let t = token(42, &s.secret_hex);
        assert!(t.starts_with("dsp_42_"));
        assert_eq!(t.len(), "dsp_42_".len() + 64);
        let p = parse_token(&t).expect("parses");
        assert_eq!(p.id, 42);
        assert!(secret_matches(&p.secret, &s.hash));
        let other = new_secret().expect("random");
        assert!(!secret_matches(&p.secret, &other.hash));
    }

    #[test]
    fn malformed_tokens_are_refused() {
        let good = "a".repeat(64);
        for bad in [
            String::new(),
            format!("dsp__{good}"),
            format!("dsp_x1_{good}"),
            format!("dsp_-1_{good}"),
            format!("xyz_1_{good}"),
            format!("dsp_1_{}", &good[..63]),
            format!("dsp_1_{good}a"),
            format!("dsp_1_{}", "g".repeat(64)),
            "dsp_1".to_owned(),
        ] {
            assert!(parse_token(&bad).is_none(), "{bad:?} should not parse");
        }
    }

    #[test]
    fn a_hash_of_the_wrong_length_never_matches() {
        assert!(!secret_matches(b"x", &[0u8; 31]));
    }
}
