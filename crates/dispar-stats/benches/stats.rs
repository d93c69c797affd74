//! Criterion benchmarks of the statistics the issue sets speed targets for.
//!
//! Run: `cargo bench -p dispar-stats -- --warm-up-time 1 --measurement-time 3`

// criterion_group! generates an undocumented public function.
#![allow(missing_docs)]

use std::hint::black_box;

use criterion::{Criterion, criterion_group, criterion_main};
use dispar_stats::analysis::{Options, analyze_rates};
use dispar_stats::exact::fisher;
use dispar_stats::montecarlo::{conditional_p, table_seed};
use dispar_stats::pairwise::{PairMethod, PairwiseOptions, pairwise};
use dispar_stats::standardise::indirect;
use dispar_stats::stratified::generalised_cmh;
use dispar_stats::table::Table;

/// A small deterministic generator (splitmix64) for synthetic groups.
struct Gen(u64);

impl Gen {
    fn next(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }
}

/// k groups of `inspected` units (+/- 20%) with rates around `rate` (+/- 50%).
fn groups(k: usize, inspected: u64, rate: f64, seed: u64) -> Vec<(u64, u64)> {
    let mut g = Gen(seed);
    (0..k)
        .map(|_| {
            let n = inspected * 8 / 10 + g.next() % (inspected * 4 / 10 + 1);
            let r = rate * (0.5 + (g.next() % 1000) as f64 / 1000.0);
            (n, ((n as f64) * r).round() as u64)
        })
        .collect()
}

fn omnibus_and_flags(c: &mut Criterion) {
    let data = groups(1000, 10_000, 0.02, 1);
    let opts = Options {
        pairwise: PairMethod::Off,
        ..Options::default()
    };
    // Warm the ANOM cache (computed once per (alpha, k) per process).
    let _ = analyze_rates(&data, &opts);
    c.bench_function("omnibus + flags, 1,000 groups", |b| {
        b.iter(|| analyze_rates(black_box(&data), &opts))
    });
}

fn all_pairs(c: &mut Criterion) {
    let mut group = c.benchmark_group("pairwise");
    group.sample_size(10);
    let dense = groups(1000, 10_000, 0.02, 2);
    group.bench_function(
        "all 499,500 pairs of 1,000 groups, Holm (chi-square pairs)",
        |b| b.iter(|| pairwise(black_box(&dense), &PairwiseOptions::default())),
    );
    let sparse = groups(1000, 300, 0.01, 3);
    group.bench_function(
        "all 499,500 pairs of 1,000 groups, Holm (sparse: mostly Fisher pairs)",
        |b| b.iter(|| pairwise(black_box(&sparse), &PairwiseOptions::default())),
    );
    group.finish();
}

fn fisher_large(c: &mut Criterion) {
    c.bench_function("Fisher 2x2, 100,000 per group, ~1% defective", |b| {
        b.iter(|| fisher(black_box(1000), 99_000, black_box(1050), 98_950))
    });
}

fn monte_carlo(c: &mut Criterion) {
    let mut group = c.benchmark_group("monte carlo");
    group.sample_size(10);
    let rows: Vec<Vec<u64>> = groups(10, 60, 0.05, 4)
        .into_iter()
        .map(|(n, x)| vec![x, n - x])
        .collect();
    let t = Table::from_rows(&rows).expect("valid table");
    let seed = table_seed(&t);
    group.bench_function("100,000 resamples of a 10x2 table", |b| {
        b.iter(|| conditional_p(black_box(&t), 100_000, seed))
    });
    group.finish();
}

fn product_mix(c: &mut Criterion) {
    // 200 groups x 5 products, the size of the product-mix report benchmark.
    let cells: Vec<Vec<(u64, u64)>> = (0..200u64)
        .map(|g| {
            (0..5u64)
                .map(|s| (5_000 + 37 * g + 11 * s, 60 + (g * 7 + s * 13) % 80))
                .collect()
        })
        .collect();
    c.bench_function("generalised_cmh_200x5", |b| {
        b.iter(|| generalised_cmh(black_box(&cells)))
    });
    c.bench_function("indirect standardisation, 200 groups x 5 products", |b| {
        b.iter(|| indirect(black_box(&cells), 0.95))
    });
}

criterion_group!(
    benches,
    omnibus_and_flags,
    all_pairs,
    fisher_large,
    monte_carlo,
    product_mix
);
criterion_main!(benches);
