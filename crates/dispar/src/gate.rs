//! What every keyed request passes before its handler, kept in memory per instance:
//!
//! - **The key cache.** A key looked up in the store is kept for [`KEY_CACHE_TTL`]
//!   (2 s), so a dashboard polling many times a second costs one key read every two
//!   seconds instead of one per request. The secret is still checked against the
//!   stored hash on every request. A revocation (`dispar keys revoke`, from any process
//!   or instance) therefore takes effect within 2 s. Unknown key ids are not cached:
//!   a key created a moment ago works at once.
//! - **The rate limit per key** ([`Limits::rate_limit`]): a token bucket per key id,
//!   refilled at the configured rate with a burst of twice that. A request finding the
//!   bucket empty is answered 429 `rate-limited` with `Retry-After` (whole seconds until
//!   a token is back). Off when the rate is 0.
//!
//! Both are bounded: past [`MAX_TRACKED_KEYS`] entries the oldest half is dropped.

use std::collections::HashMap;
use std::sync::Mutex;
use std::time::{Duration, Instant};

use dispar_store::{ApiKey, KeyId};

use crate::state::Limits;

/// How long a key read from the store is trusted without reading it again.
pub const KEY_CACHE_TTL: Duration = Duration::from_secs(2);

/// Most keys tracked by the cache and by the rate limiter each.
pub const MAX_TRACKED_KEYS: usize = 10_000;

/// The key cache and the per-key buckets of one instance.
#[derive(Debug, Default)]
pub struct Gate {
    keys: Mutex<HashMap<KeyId, (ApiKey, Instant)>>,
    buckets: Mutex<HashMap<KeyId, Bucket>>,
}

#[derive(Debug, Clone, Copy)]
struct Bucket {
    tokens: f64,
    at: Instant,
}

/// Drops the older half of `map` (by the instant `age` gives) when it is full.
fn bound<V>(map: &mut HashMap<KeyId, V>, age: impl Fn(&V) -> Instant) {
    if map.len() < MAX_TRACKED_KEYS {
        return;
    }
    let mut ages: Vec<Instant> = map.values().map(&age).collect();
    ages.sort_unstable();
    let cut = ages[ages.len() / 2];
    map.retain(|_, v| age(v) > cut);
}

impl Gate {
    /// The cached key `id`, if it was read less than [`KEY_CACHE_TTL`] ago.
    pub fn cached_key(&self, id: KeyId) -> Option<ApiKey> {
        let keys = self.keys.lock().ok()?;
        let (key, at) = keys.get(&id)?;
        (at.elapsed() < KEY_CACHE_TTL).then(|| key.clone())
    }

    /// Remembers a key just read from the store.
    pub fn remember_key(&self, key: &ApiKey) {
        if let Ok(mut keys) = self.keys.lock() {
            bound(&mut keys, |(_, at)| *at);
            keys.insert(key.id, (key.clone(), Instant::now()));
        }
    }

    /// Takes one token of key `id`'s bucket: `Ok` when there was one, else the wait
    /// until there is one. Always `Ok` when the limit is off.
    pub fn admit(&self, id: KeyId, limits: &Limits) -> Result<(), Duration> {
        self.admit_at(id, limits, Instant::now())
    }

    fn admit_at(&self, id: KeyId, limits: &Limits, now: Instant) -> Result<(), Duration> {
        if limits.rate_limit == 0 {
            return Ok(());
        }
        let rate = f64::from(limits.rate_limit);
        let burst = 2.0 * rate;
        let Ok(mut buckets) = self.buckets.lock() else {
            return Ok(());
        };
        if !buckets.contains_key(&id) {
            bound(&mut buckets, |b| b.at);
        }
        let b = buckets.entry(id).or_insert(Bucket {
            tokens: burst,
            at: now,
        });
        let refill = now.saturating_duration_since(b.at).as_secs_f64() * rate;
        b.tokens = (b.tokens + refill).min(burst);
        b.at = now;
        if b.tokens >= 1.0 {
            b.tokens -= 1.0;
            Ok(())
        } else {
            Err(Duration::from_secs_f64((1.0 - b.tokens) / rate))
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn limits(rate: u32) -> Limits {
        Limits {
            rate_limit: rate,
            ..Limits::default()
        }
    }

    #[test]
    fn a_bucket_allows_a_burst_of_twice_the_rate_then_the_rate() {
        let gate = Gate::default();
        let l = limits(10);
        let t0 = Instant::now();
        for i in 0..20 {
            assert!(gate.admit_at(7, &l, t0).is_ok(), "request {i} of the burst");
        }
        let wait = gate.admit_at(7, &l, t0).unwrap_err();
        assert!((wait.as_secs_f64() - 0.1).abs() < 1e-9, "{wait:?}");
        // Other keys have their own bucket.
        assert!(gate.admit_at(8, &l, t0).is_ok());
        // 0.25 s later: 2.5 tokens back, so two requests pass and the third waits.
        let t1 = t0 + Duration::from_millis(250);
        assert!(gate.admit_at(7, &l, t1).is_ok());
        assert!(gate.admit_at(7, &l, t1).is_ok());
        assert!(gate.admit_at(7, &l, t1).is_err());
        // Off: never refused.
        let off = limits(0);
        for _ in 0..1000 {
            assert!(gate.admit_at(7, &off, t0).is_ok());
        }
    }

    #[test]
    fn the_tables_stay_bounded() {
        let gate = Gate::default();
        let l = limits(1);
        let t0 = Instant::now();
        for id in 0..(MAX_TRACKED_KEYS as i64 + 10) {
            let _ = gate.admit_at(id, &l, t0 + Duration::from_micros(id.unsigned_abs()));
        }
        let n = gate.buckets.lock().unwrap().len();
        assert!(n <= MAX_TRACKED_KEYS, "{n}");
    }
}
