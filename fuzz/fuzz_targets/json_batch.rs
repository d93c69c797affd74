//! Any bytes as a JSON batch: read as `POST /v1/counts` reads it. It must answer records
//! or a problem, never panic; accepted records hold their invariants.
#![no_main]

use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    if let Ok(records) = dispar::counts::read_batch(data, false, 1_000) {
        assert!(!records.is_empty() && records.len() <= 1_000);
        for r in &records {
            assert!(r.counts.defective() <= r.counts.inspected());
        }
    }
});
