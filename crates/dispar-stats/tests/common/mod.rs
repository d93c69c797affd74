//! Shared helpers of the integration tests: fixture loading and a checker that collects
//! every mismatch (case, quantity, source, values) before failing, so one run reports
//! all disagreeing cases at once.

// Each test binary uses a different part of this module.
#![allow(dead_code)]

pub mod tolerance;

use std::fmt::Write as _;
use std::path::PathBuf;

use serde::Deserialize;
use serde::de::DeserializeOwned;

/// A fixture file written by tools/reference/generate.py.
#[derive(Debug, Deserialize)]
pub struct Fixture<T> {
    /// Library versions the file was generated with.
    pub versions: serde_json::Value,
    /// The cases.
    pub cases: Vec<T>,
}

/// Loads `tests/fixtures/<name>`.
pub fn fixture<T: DeserializeOwned>(name: &str) -> Fixture<T> {
    let path = PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("tests")
        .join("fixtures")
        .join(name);
    let text = std::fs::read_to_string(&path)
        .unwrap_or_else(|e| panic!("cannot read {}: {e}", path.display()));
    serde_json::from_str(&text).unwrap_or_else(|e| panic!("cannot parse {}: {e}", path.display()))
}

/// Collects failed comparisons; `finish` panics with all of them.
#[derive(Debug, Default)]
pub struct Checker {
    checked: usize,
    failures: Vec<String>,
}

impl Checker {
    /// A new, empty checker.
    pub fn new() -> Checker {
        Checker::default()
    }

    /// Records a comparison of `actual` with `expected` within `rel` (relative) or `abs`
    /// (absolute); `what` names the case, the quantity and the reference's source.
    pub fn close(
        &mut self,
        what: impl FnOnce() -> String,
        actual: f64,
        expected: f64,
        rel: f64,
        abs: f64,
    ) {
        self.checked += 1;
        if !tolerance::close(actual, expected, rel, abs) {
            let diff = (actual - expected).abs();
            let rel_diff = if expected != 0.0 {
                diff / expected.abs()
            } else {
                f64::INFINITY
            };
            self.failures.push(format!(
                "{}: got {actual:e}, reference {expected:e} (|diff| {diff:.3e}, rel {rel_diff:.3e}; allowed rel {rel:.1e} or abs {abs:.1e})",
                what()
            ));
        }
    }

    /// Records a condition that must hold.
    pub fn ok(&mut self, what: impl FnOnce() -> String, condition: bool) {
        self.checked += 1;
        if !condition {
            self.failures.push(what());
        }
    }

    /// Number of comparisons made so far.
    pub fn checked(&self) -> usize {
        self.checked
    }

    /// Panics listing every failure, if any.
    pub fn finish(self, topic: &str) {
        if self.failures.is_empty() {
            assert!(self.checked > 0, "{topic}: nothing was checked");
            return;
        }
        // Optionally keep the full list (the panic message shows the first 60).
        if let Some(dir) = std::env::var_os("DISPAR_REFERENCE_FAILURES") {
            let file = PathBuf::from(dir)
                .join(format!("{}.txt", topic.replace([' ', '/', '\'', ','], "_")));
            let _ = std::fs::write(file, self.failures.join("\n"));
        }
        let mut msg = format!(
            "{topic}: {} of {} comparisons failed:\n",
            self.failures.len(),
            self.checked
        );
        for f in self.failures.iter().take(60) {
            let _ = writeln!(msg, "  - {f}");
        }
        if self.failures.len() > 60 {
            let _ = writeln!(msg, "  ... and {} more", self.failures.len() - 60);
        }
        panic!("{msg}");
    }
}
