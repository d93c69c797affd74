//! The pages' own state, held in the `AppState`: the default week of the last
//! look-up (page sessions are in the store, so every instance knows them).

use std::sync::Mutex;

use dispar_core::period::Period;
use time::Date;

/// What the pages keep between requests.
#[derive(Debug)]
pub struct PageState {
    /// (data version, today, default week) of the last look-up.
    default_week: Mutex<Option<(u64, Date, Period)>>,
}

impl Default for PageState {
    fn default() -> Self {
        Self::new()
    }
}

impl PageState {
    /// Nothing looked up yet.
    pub fn new() -> Self {
        Self {
            default_week: Mutex::new(None),
        }
    }

    /// The default week found at data `version` on `day`, if that was the last
    /// look-up.
    pub fn default_week(&self, version: u64, day: Date) -> Option<Period> {
        match *self.default_week.lock().ok()? {
            Some((v, d, p)) if v == version && d == day => Some(p),
            _ => None,
        }
    }

    /// Remembers the default week found at data `version` on `day`.
    pub fn remember_default_week(&self, version: u64, day: Date, week: Period) {
        if let Ok(mut cache) = self.default_week.lock() {
            *cache = Some((version, day, week));
        }
    }
}
