//! Browser sessions for the pages: a person signs in once with a read key and gets a
//! session cookie; the key never travels again, and never in a URL.
//!
//! A session id is 128 random bits from the operating system, sent as 32 hex digits
//! in the cookie [`COOKIE`] (`HttpOnly`, `SameSite=Strict`, `Path=/`, and `Secure`
//! when the page was served over https). The server keeps, in memory, the id -> (key
//! id, role, expiry) map: a restart signs everyone out, and with several instances a
//! session is only known to the instance that made it (sign in again). Each page
//! request looks the key up again, so revoking the key ends its sessions.

use std::collections::HashMap;
use std::sync::Mutex;
use std::time::{Duration, Instant};

use axum::http::HeaderMap;
use axum::http::header;
use dispar_store::{KeyId, KeyRole};

/// Name of the session cookie.
pub const COOKIE: &str = "dispar_session";

/// How long a session lasts from sign-in.
pub const SESSION_TTL: Duration = Duration::from_secs(12 * 60 * 60);

/// Most sessions held at once; signing in beyond it ends the oldest session.
pub const MAX_SESSIONS: usize = 10_000;

/// Most live sessions of one API key (people sharing a read key on a few screens).
pub const MAX_SESSIONS_PER_KEY: usize = 50;

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

/// What a session stands for.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Session {
    /// The API key signed in with.
    pub key_id: KeyId,
    /// Its role at sign-in.
    pub role: KeyRole,
    /// When the session ends.
    pub expires: Instant,
}

/// The sessions of one server process.
#[derive(Debug, Default)]
pub struct Sessions {
    map: Mutex<HashMap<String, Session>>,
}

impl Sessions {
    /// An empty set.
    pub fn new() -> Self {
        Self::default()
    }

    fn lock(&self) -> std::sync::MutexGuard<'_, HashMap<String, Session>> {
        // A panic while holding the lock leaves a usable map (no invariant spans
        // several entries), so a poisoned lock is taken over.
        self.map
            .lock()
            .unwrap_or_else(std::sync::PoisonError::into_inner)
    }

    /// Starts a session for `key_id` and returns its id (32 hex digits).
    pub fn create(&self, key_id: KeyId, role: KeyRole) -> Result<String, getrandom::Error> {
        let mut bytes = [0u8; 16];
        getrandom::fill(&mut bytes)?;
        let id = hex::encode(bytes);
        let now = Instant::now();
        let mut map = self.lock();
        map.retain(|_, s| s.expires > now);
        // One key signing in again and again only pushes out its own oldest sessions,
        // so it cannot sign everybody else out by filling the table.
        let own: Vec<(&String, &Session)> =
            map.iter().filter(|(_, s)| s.key_id == key_id).collect();
        if own.len() >= MAX_SESSIONS_PER_KEY
            && let Some(oldest) = own
                .iter()
                .min_by_key(|(_, s)| s.expires)
                .map(|(k, _)| (*k).clone())
        {
            map.remove(&oldest);
        }
        if map.len() >= MAX_SESSIONS
            && let Some(oldest) = map
                .iter()
                .min_by_key(|(_, s)| s.expires)
                .map(|(k, _)| k.clone())
        {
            map.remove(&oldest);
        }
        map.insert(
            id.clone(),
            Session {
                key_id,
                role,
                expires: now + SESSION_TTL,
            },
        );
        Ok(id)
    }

    /// The live session with this id.
    pub fn get(&self, id: &str) -> Option<Session> {
        let mut map = self.lock();
        match map.get(id) {
            Some(s) if s.expires > Instant::now() => Some(s.clone()),
            Some(_) => {
                map.remove(id);
                None
            }
            None => None,
        }
    }

    /// Ends a session (signing out).
    pub fn remove(&self, id: &str) {
        self.lock().remove(id);
    }

    /// Sessions held (live or not yet purged).
    pub fn len(&self) -> usize {
        self.lock().len()
    }

    /// True when no session is held.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }
}

/// The session id in the request's `Cookie` headers, if it looks like one of ours.
pub fn session_id(headers: &HeaderMap) -> Option<String> {
    headers
        .get_all(header::COOKIE)
        .iter()
        .filter_map(|v| v.to_str().ok())
        .flat_map(|v| v.split(';'))
        .filter_map(|pair| pair.split_once('='))
        .find(|(name, _)| name.trim() == COOKIE)
        .map(|(_, value)| value.trim().trim_matches('"'))
        .filter(|v| v.len() == 32 && v.bytes().all(|b| b.is_ascii_hexdigit()))
        .map(str::to_owned)
}

/// The `Set-Cookie` value that starts a session.
pub fn set_cookie(id: &str, secure: bool) -> String {
    format!(
        "{COOKIE}={id}; Path=/; Max-Age={}; HttpOnly; SameSite=Strict{}",
        SESSION_TTL.as_secs(),
        if secure { "; Secure" } else { "" }
    )
}

/// The `Set-Cookie` value that removes the session cookie.
pub fn clear_cookie(secure: bool) -> String {
    format!(
        "{COOKIE}=; Path=/; Max-Age=0; HttpOnly; SameSite=Strict{}",
        if secure { "; Secure" } else { "" }
    )
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
    fn one_key_signing_in_repeatedly_pushes_out_only_its_own_sessions() {
        let sessions = Sessions::new();
        let other = sessions.create(2, KeyRole::Read).expect("random bytes");
        let first = sessions.create(1, KeyRole::Read).expect("random bytes");
        for _ in 0..MAX_SESSIONS_PER_KEY + 5 {
            sessions.create(1, KeyRole::Read).expect("random bytes");
        }
        assert!(
            sessions.get(&other).is_some(),
            "another key's session survives"
        );
        assert!(
            sessions.get(&first).is_none(),
            "key 1's oldest session was ended"
        );
        let live_for_1 = sessions.lock().values().filter(|s| s.key_id == 1).count();
        assert_eq!(live_for_1, MAX_SESSIONS_PER_KEY);
    }

    #[test]
    fn the_session_cookie_is_http_only_strict_and_secure_over_https() {
        let c = set_cookie("0123456789abcdef0123456789abcdef", false);
        assert_eq!(
            c,
            "dispar_session=0123456789abcdef0123456789abcdef; Path=/; Max-Age=43200; HttpOnly; SameSite=Strict"
        );
        assert!(set_cookie("x", true).ends_with("; Secure"));
        assert!(clear_cookie(false).contains("Max-Age=0"));
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
    fn sessions_are_found_by_id_and_end_on_sign_out() {
        let s = Sessions::new();
        let id = s.create(7, KeyRole::Read).unwrap();
        assert_eq!(id.len(), 32);
        assert_eq!(s.get(&id).map(|x| x.key_id), Some(7));
        let other = s.create(7, KeyRole::Read).unwrap();
        assert_ne!(id, other, "each sign-in gets a new random id");
        s.remove(&id);
        assert!(s.get(&id).is_none());
        assert!(s.get(&other).is_some());
    }

    #[test]
    fn the_session_id_is_read_from_among_other_cookies() {
        let h = headers(&[(
            "cookie",
            "theme=dark; dispar_session=0123456789abcdef0123456789ABCDEF; x=1",
        )]);
        assert_eq!(
            session_id(&h).as_deref(),
            Some("0123456789abcdef0123456789ABCDEF")
        );
        assert_eq!(
            session_id(&headers(&[("cookie", "dispar_session=short")])),
            None
        );
        assert_eq!(session_id(&headers(&[])), None);
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
