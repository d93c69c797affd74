//! Computed reports kept in memory, keyed by (normalized request, data version).
//!
//! A write bumps the store's data version, so a request after it has a new key and
//! misses; entries of older versions are dropped as soon as a newer version is
//! stored. The cache is bounded by entries and by bytes (each entry's size is given
//! by whoever stores it), least recently used out first. One mutex guards it; every
//! operation is a hash lookup, except an eviction, which scans the (at most a few
//! hundred) entries. Values are cloned out, so they should be cheap to clone
//! (`Arc`s and `Bytes`).

use std::collections::HashMap;
use std::sync::Mutex;

/// Default bound on entries.
pub const DEFAULT_ENTRIES: usize = 256;
/// Default bound on the bytes of all entries together (128 MiB).
pub const DEFAULT_BYTES: usize = 128 * 1024 * 1024;

#[derive(Debug)]
struct Entry<V> {
    value: V,
    size: usize,
    version: u64,
    last_used: u64,
}

#[derive(Debug)]
struct Inner<V> {
    map: HashMap<String, Entry<V>>,
    bytes: usize,
    tick: u64,
    newest_version: u64,
}

impl<V> Default for Inner<V> {
    fn default() -> Self {
        Self {
            map: HashMap::new(),
            bytes: 0,
            tick: 0,
            newest_version: 0,
        }
    }
}

/// A bounded, least-recently-used cache of computed reports.
#[derive(Debug)]
pub struct ReportCache<V> {
    inner: Mutex<Inner<V>>,
    max_entries: usize,
    max_bytes: usize,
}

impl<V: Clone> Default for ReportCache<V> {
    fn default() -> Self {
        Self::new(DEFAULT_ENTRIES, DEFAULT_BYTES)
    }
}

fn full_key(key: &str, version: u64) -> String {
    format!("{version}|{key}")
}

impl<V: Clone> ReportCache<V> {
    /// A cache of at most `max_entries` entries and `max_bytes` bytes; an entry larger
    /// than a quarter of `max_bytes` is never kept.
    pub fn new(max_entries: usize, max_bytes: usize) -> Self {
        Self {
            inner: Mutex::new(Inner::default()),
            max_entries: max_entries.max(1),
            max_bytes,
        }
    }

    fn lock(&self) -> std::sync::MutexGuard<'_, Inner<V>> {
        // A panic while holding the lock leaves a consistent map (every mutation is
        // completed before anything that could panic), so a poisoned lock is usable.
        self.inner
            .lock()
            .unwrap_or_else(std::sync::PoisonError::into_inner)
    }

    /// The value stored for `key` at data `version`, marking it recently used.
    pub fn get(&self, key: &str, version: u64) -> Option<V> {
        let mut inner = self.lock();
        inner.tick += 1;
        let tick = inner.tick;
        let entry = inner.map.get_mut(&full_key(key, version))?;
        entry.last_used = tick;
        Some(entry.value.clone())
    }

    /// Stores `value`, counted as `size` bytes, for `key` at data `version`. Entries
    /// of versions older than the newest seen are dropped; then the least recently
    /// used go until both bounds hold.
    pub fn insert(&self, key: &str, version: u64, value: V, size: usize) {
        if size > self.max_bytes / 4 {
            return;
        }
        let mut inner = self.lock();
        if version < inner.newest_version {
            // Computed from data already superseded: nobody will ask for it again.
            return;
        }
        if version > inner.newest_version {
            inner.newest_version = version;
            inner.map.retain(|_, e| e.version >= version);
            inner.bytes = inner.map.values().map(|e| e.size).sum();
        }
        inner.tick += 1;
        let tick = inner.tick;
        if let Some(old) = inner.map.insert(
            full_key(key, version),
            Entry {
                value,
                size,
                version,
                last_used: tick,
            },
        ) {
            inner.bytes -= old.size;
        }
        inner.bytes += size;
        while inner.map.len() > self.max_entries || inner.bytes > self.max_bytes {
            let Some(oldest) = inner
                .map
                .iter()
                .min_by_key(|(_, e)| e.last_used)
                .map(|(k, _)| k.clone())
            else {
                break;
            };
            if let Some(e) = inner.map.remove(&oldest) {
                inner.bytes -= e.size;
            }
        }
    }

    /// Entries held (for tests and diagnostics).
    pub fn len(&self) -> usize {
        self.lock().map.len()
    }

    /// True when nothing is held.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn body(s: &str) -> String {
        s.to_owned()
    }

    /// Stores `value` counted by its length.
    fn put(c: &ReportCache<String>, key: &str, version: u64, value: String) {
        let size = value.len();
        c.insert(key, version, value, size);
    }

    #[test]
    fn a_body_is_found_only_at_its_version() {
        let c = ReportCache::<String>::default();
        put(&c, "a", 3, body("x"));
        assert_eq!(c.get("a", 3), Some(body("x")));
        assert!(c.get("a", 4).is_none());
        assert!(c.get("b", 3).is_none());
    }

    #[test]
    fn a_newer_version_drops_the_older_entries() {
        let c = ReportCache::<String>::default();
        put(&c, "a", 1, body("x"));
        put(&c, "b", 1, body("y"));
        put(&c, "a", 2, body("z"));
        assert_eq!(c.len(), 1);
        // A slow request finishing with data already superseded is not kept.
        put(&c, "b", 1, body("y"));
        assert_eq!(c.len(), 1);
    }

    #[test]
    fn the_least_recently_used_entry_goes_first() {
        let c = ReportCache::new(2, 1 << 20);
        put(&c, "a", 1, body("1"));
        put(&c, "b", 1, body("2"));
        assert!(c.get("a", 1).is_some());
        put(&c, "c", 1, body("3"));
        assert!(c.get("a", 1).is_some());
        assert!(c.get("b", 1).is_none());
        assert!(c.get("c", 1).is_some());
    }

    #[test]
    fn the_byte_bound_holds_and_huge_bodies_are_not_kept() {
        let c = ReportCache::new(100, 40);
        put(&c, "big", 1, body(&"x".repeat(11)));
        assert!(c.is_empty());
        for k in ["a", "b", "c", "d", "e"] {
            put(&c, k, 1, body(&"x".repeat(10)));
        }
        assert_eq!(c.len(), 4);
        assert!(c.get("a", 1).is_none());
    }
}
