//! Browser sessions for the pages: a person signs in once with an API key with read
//! access and gets a session cookie; the key never travels again, and never in a URL.
//!
//! A session id is 128 random bits from the operating system, sent as 32 hex digits
//! in the cookie [`COOKIE`] (`HttpOnly`, `SameSite=Strict`, `Path=/`, and `Secure`
//! when the page was served over https), written and read with axum-extra's
//! `CookieJar`. The database keeps SHA-256 of the id's bytes with the key id and the
//! session's lifetime (`Store::create_page_session`), as it keeps only the hash of an
//! API key's secret: sessions survive a restart, every instance on one database knows
//! them, and a copy of the table signs nobody in. Each page request looks the key up
//! again, so revoking the key ends its sessions.

use std::time::Duration;

use axum::http::HeaderMap;
use axum::http::header;
use axum_extra::extract::cookie::{Cookie, CookieJar, SameSite};

use crate::auth::hash_secret;

/// Name of the session cookie.
pub const COOKIE: &str = "dispar_session";

/// How long a session lasts from sign-in.
pub const SESSION_TTL: Duration = Duration::from_secs(12 * 60 * 60);

/// Most live sessions of one API key (people sharing a read key on a few screens);
/// signing in beyond it ends that key's oldest session. No overall cap is needed:
/// sessions are rows in the database, at most this many per key an admin made.
pub const MAX_SESSIONS_PER_KEY: usize = 50;

/// Random bytes in a session id.
const ID_BYTES: usize = 16;

/// A new session id: the cookie's value and the hash the store keeps.
pub struct NewSessionId {
    /// 32 hex digits, for the cookie.
    pub cookie_value: String,
    /// SHA-256 of the id's bytes.
    pub hash: [u8; 32],
}

impl std::fmt::Debug for NewSessionId {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("NewSessionId").finish_non_exhaustive()
    }
}

/// Makes a random session id.
pub fn new_session_id() -> Result<NewSessionId, getrandom::Error> {
    let mut bytes = [0u8; ID_BYTES];
    getrandom::fill(&mut bytes)?;
    Ok(NewSessionId {
        cookie_value: hex::encode(bytes),
        hash: hash_secret(&bytes),
    })
}

/// The hash of the session id in the request's cookies, if one of ours is there
/// (32 hex digits).
pub fn session_hash(jar: &CookieJar) -> Option<[u8; 32]> {
    let value = jar.get(COOKIE)?.value_trimmed();
    let mut bytes = [0u8; ID_BYTES];
    hex::decode_to_slice(value, &mut bytes).ok()?;
    Some(hash_secret(&bytes))
}

/// The cookie that starts a session.
pub fn session_cookie(value: String, secure: bool) -> Cookie<'static> {
    Cookie::build((COOKIE, value))
        .path("/")
        .max_age(time::Duration::seconds(
            i64::try_from(SESSION_TTL.as_secs()).unwrap_or(i64::MAX),
        ))
        .http_only(true)
        .same_site(SameSite::Strict)
        .secure(secure)
        .build()
}

/// The cookie that removes the session cookie (same attributes, empty, `Max-Age=0`).
pub fn removal_cookie(secure: bool) -> Cookie<'static> {
    Cookie::build((COOKIE, ""))
        .path("/")
        .max_age(time::Duration::ZERO)
        .http_only(true)
        .same_site(SameSite::Strict)
        .secure(secure)
        .build()
}

/// When to mark the session cookie `Secure`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum SecureCookies {
    /// When the request came over https according to `X-Forwarded-Proto` or
    /// `Forwarded: proto=https` (set by a TLS-terminating proxy; dispar itself
    /// serves plain HTTP).
    #[default]
    Auto,
    /// Always (the server is only reached over https).
    Always,
    /// Never (plain HTTP on a trusted network, or local use).
    Never,
}

impl SecureCookies {
    /// Whether the cookie of a response to a request with `headers` gets `Secure`.
    pub fn secure_for(self, headers: &HeaderMap) -> bool {
        match self {
            SecureCookies::Always => true,
            SecureCookies::Never => false,
            SecureCookies::Auto => came_over_https(headers),
        }
    }
}

/// True when a proxy says the request came over https.
pub fn came_over_https(headers: &HeaderMap) -> bool {
    let forwarded_proto = headers
        .get("x-forwarded-proto")
        .and_then(|v| v.to_str().ok())
        .and_then(|v| v.split(',').next())
        .is_some_and(|v| v.trim().eq_ignore_ascii_case("https"));
    let forwarded = headers
        .get(header::FORWARDED)
        .and_then(|v| v.to_str().ok())
        .and_then(|v| v.split(',').next())
        .is_some_and(|first| {
            first.split(';').any(|pair| {
                pair.split_once('=').is_some_and(|(k, v)| {
                    k.trim().eq_ignore_ascii_case("proto")
                        && v.trim().trim_matches('"').eq_ignore_ascii_case("https")
                })
            })
        });
    forwarded_proto || forwarded
}

/// `next` when it is a path of one of our pages (so a sign-in link cannot send the
/// person to another site): starts with one `/`, no backslash, no control
/// characters, not too long.
pub fn safe_next(next: Option<&str>) -> Option<&str> {
    let n = next?;
    let ok = n.starts_with('/')
        && !n.starts_with("//")
        && !n.contains('\\')
        && n.len() <= 2048
        && !n.chars().any(char::is_control)
        && ["/report", "/series"]
            .iter()
            .any(|p| n == *p || n.starts_with(&format!("{p}?")));
    ok.then_some(n)
}

/// True when a form post comes from another site: `Sec-Fetch-Site` says so, or
/// `Origin` names a host other than `Host`. (The session cookie is `SameSite=Strict`
/// already; this also refuses cross-site sign-in posts.)
pub fn cross_site(headers: &HeaderMap) -> bool {
    if let Some(site) = headers.get("sec-fetch-site").and_then(|v| v.to_str().ok())
        && !matches!(site, "same-origin" | "none")
    {
        return true;
    }
    let Some(origin) = headers.get(header::ORIGIN).and_then(|v| v.to_str().ok()) else {
        return false;
    };
    if origin == "null" {
        return true;
    }
    let host = headers
        .get(header::HOST)
        .and_then(|v| v.to_str().ok())
        .unwrap_or("");
    let origin_host = origin.split_once("://").map_or(origin, |(_, rest)| rest);
    !origin_host.eq_ignore_ascii_case(host)
}

#[cfg(test)]
mod tests {
    use super::*;
    use axum::http::HeaderValue;

    fn headers(pairs: &[(&'static str, &'static str)]) -> HeaderMap {
        let mut h = HeaderMap::new();
        for (k, v) in pairs {
            h.append(*k, HeaderValue::from_static(v));
        }
        h
    }

    #[test]
    fn the_session_cookie_is_http_only_strict_and_secure_over_https() {
        let c = session_cookie("0123456789abcdef0123456789abcdef".to_owned(), false).to_string();
        for part in [
            "dispar_session=0123456789abcdef0123456789abcdef",
            "HttpOnly",
            "SameSite=Strict",
            "Path=/",
            "Max-Age=43200",
        ] {
            assert!(c.contains(part), "{part} in {c}");
        }
        assert!(!c.contains("Secure"), "{c}");
        assert!(
            session_cookie("x".to_owned(), true)
                .to_string()
                .contains("; Secure")
        );
        let gone = removal_cookie(false).to_string();
        assert!(
            gone.contains("Max-Age=0") && gone.contains("HttpOnly") && gone.contains("Path=/"),
            "{gone}"
        );
    }

    #[test]
    fn https_is_detected_from_proxy_headers_only_in_auto_mode() {
        let plain = headers(&[]);
        let proxied = headers(&[("x-forwarded-proto", "https")]);
        let forwarded = headers(&[("forwarded", "for=1.2.3.4;proto=https;host=x")]);
        assert!(!SecureCookies::Auto.secure_for(&plain));
        assert!(SecureCookies::Auto.secure_for(&proxied));
        assert!(SecureCookies::Auto.secure_for(&forwarded));
        assert!(SecureCookies::Always.secure_for(&plain));
        assert!(!SecureCookies::Never.secure_for(&proxied));
        assert!(!SecureCookies::Auto.secure_for(&headers(&[("x-forwarded-proto", "http")])));
    }

    #[test]
    fn the_session_id_is_read_from_among_other_cookies_and_only_its_hash_kept() {
        let id = new_session_id().expect("random bytes");
        assert_eq!(id.cookie_value.len(), 32);
        assert_ne!(
            id.cookie_value,
            new_session_id().expect("random bytes").cookie_value,
            "each sign-in gets a new random id"
        );
        let mut h = HeaderMap::new();
        h.insert(
            "cookie",
            HeaderValue::from_str(&format!(
                "theme=dark; dispar_session={}; x=1",
                id.cookie_value
            ))
            .expect("header"),
        );
        let jar = CookieJar::from_headers(&h);
        assert_eq!(session_hash(&jar), Some(id.hash));
        assert_ne!(
            id.hash[..16],
            hex::decode(&id.cookie_value).expect("hex")[..]
        );
        let short = CookieJar::from_headers(&headers(&[("cookie", "dispar_session=short")]));
        assert_eq!(session_hash(&short), None);
        assert_eq!(session_hash(&CookieJar::from_headers(&headers(&[]))), None);
    }

    #[test]
    fn only_local_page_paths_are_followed_after_sign_in() {
        assert_eq!(
            safe_next(Some("/report?period=2026-W16")),
            Some("/report?period=2026-W16")
        );
        assert_eq!(safe_next(Some("/series")), Some("/series"));
        for bad in [
            "https://evil.example/",
            "//evil.example/report",
            "/\\evil.example",
            "/reporting",
            "/v1/reports",
            "report",
            "/report\n?x",
        ] {
            assert_eq!(safe_next(Some(bad)), None, "{bad:?}");
        }
        assert_eq!(safe_next(None), None);
    }

    #[test]
    fn cross_site_posts_are_recognised() {
        assert!(!cross_site(&headers(&[("host", "127.0.0.1:8080")])));
        assert!(!cross_site(&headers(&[
            ("host", "127.0.0.1:8080"),
            ("origin", "http://127.0.0.1:8080"),
            ("sec-fetch-site", "same-origin"),
        ])));
        assert!(cross_site(&headers(&[
            ("host", "127.0.0.1:8080"),
            ("origin", "https://evil.example"),
        ])));
        assert!(cross_site(&headers(&[
            ("host", "127.0.0.1:8080"),
            ("sec-fetch-site", "cross-site"),
        ])));
        assert!(cross_site(&headers(&[("host", "a"), ("origin", "null")])));
    }
}
