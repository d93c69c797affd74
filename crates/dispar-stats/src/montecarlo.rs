//! Monte Carlo conditional p-value for an r x c table: random tables with the observed
//! margins by Patefield's algorithm, Pearson X^2 as the statistic.
//!
//! Patefield (1981), "Algorithm AS 159: An efficient method of generating random R x C
//! tables with given row and column totals", Applied Statistics 30(1). Cells are filled
//! row by row; each cell is hypergeometric given what remains of its row and of the
//! columns to its right, and is drawn by inversion that starts at the mode and walks
//! outward (the most probable values first), so a draw costs a few steps.
//!
//! p = (1 + b) / (1 + B) (Davison & Hinkley 1997, Bootstrap Methods, eq. 4.11; never 0),
//! with b the resampled tables whose X^2 is at least the observed X^2 (1 - 1e-7), and
//! standard error sqrt(p (1 - p) / B). The random stream is ChaCha8 seeded from a
//! SHA-256 of the table ([`table_seed`]); resamples are drawn in fixed chunks, chunk j on
//! ChaCha stream j, so the answer does not depend on the number of threads.

use rand_chacha::ChaCha8Rng;
use rand_core::{RngCore, SeedableRng};
use sha2::{Digest, Sha256};
use statrs::function::factorial::ln_factorial;

use crate::chisq::deviation;
use crate::error::StatsError;
use crate::exact::Hyper;
use crate::table::Table;

/// A Monte Carlo conditional p-value and its precision.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct MonteCarlo {
    /// Observed Pearson X^2.
    pub statistic: f64,
    /// (1 + b) / (1 + B).
    pub p: f64,
    /// sqrt(p (1 - p) / B).
    pub std_error: f64,
    /// B, the number of random tables.
    pub resamples: u64,
    /// b, random tables with X^2 >= observed X^2 (1 - 1e-7).
    pub at_least_as_extreme: u64,
    /// The seed of the random stream.
    pub seed: u64,
}

/// Relative tolerance below the observed statistic that still counts as "as extreme".
const TIE_TOLERANCE: f64 = 1e-7;
/// Resamples per chunk (one ChaCha stream per chunk).
const CHUNK: u64 = 1024;
/// Largest N for which ln k! is tabulated (8 MiB); above, ln P comes from Loader's method.
const LN_FACT_TABLE_MAX: u64 = 1 << 20;

/// The seed for a table's Monte Carlo stream: the first 8 bytes (little-endian) of the
/// SHA-256 of a domain tag, the sorted row totals, the sorted column totals and the sorted
/// counts of the table with its all-zero rows and columns dropped. These do not change when
/// rows or columns are permuted, so neither does the seed.
///
/// ```
/// use dispar_stats::{montecarlo::table_seed, table::Table};
/// let a = Table::from_rows(&[vec![1, 2], vec![3, 4], vec![0, 0]])?;
/// let b = Table::from_rows(&[vec![4, 3], vec![2, 1]])?;
/// assert_eq!(table_seed(&a), table_seed(&b));
/// # Ok::<(), dispar_stats::StatsError>(())
/// ```
pub fn table_seed(table: &Table) -> u64 {
    let reduced = table.reduce().table;
    let sorted = |v: &[u64]| {
        let mut v = v.to_vec();
        v.sort_unstable();
        v
    };
    let mut h = Sha256::new();
    h.update(b"dispar-stats/montecarlo/v2");
    for part in [
        sorted(reduced.row_totals()),
        sorted(reduced.col_totals()),
        sorted(reduced.counts()),
    ] {
        h.update((part.len() as u64).to_le_bytes());
        for x in part {
            h.update(x.to_le_bytes());
        }
    }
    let digest = h.finalize();
    let mut first = [0u8; 8];
    first.copy_from_slice(&digest[..8]);
    u64::from_le_bytes(first)
}

/// Draws random tables with fixed margins (Patefield's algorithm).
#[derive(Debug, Clone)]
pub struct PatefieldSampler {
    row_totals: Vec<u64>,
    col_totals: Vec<u64>,
    total: u64,
    ln_fact: Vec<f64>,
}

impl PatefieldSampler {
    /// A sampler for tables with these margins; they must add up to the same N and there
    /// must be at least one row and one column.
    pub fn new(row_totals: &[u64], col_totals: &[u64]) -> Result<PatefieldSampler, StatsError> {
        if row_totals.is_empty() || col_totals.is_empty() {
            return Err(StatsError::EmptyTable);
        }
        let sum = |v: &[u64]| {
            v.iter()
                .try_fold(0u64, |acc, &x| acc.checked_add(x))
                .ok_or(StatsError::Overflow)
        };
        let (row_sum, col_sum) = (sum(row_totals)?, sum(col_totals)?);
        if row_sum != col_sum {
            return Err(StatsError::MarginsDisagree { row_sum, col_sum });
        }
        let ln_fact = if row_sum <= LN_FACT_TABLE_MAX {
            (0..=row_sum).map(ln_factorial).collect()
        } else {
            Vec::new()
        };
        Ok(PatefieldSampler {
            row_totals: row_totals.to_vec(),
            col_totals: col_totals.to_vec(),
            total: row_sum,
            ln_fact,
        })
    }

    /// Fills `out` (row-major, rows x cols) with one random table with the margins.
    pub fn sample<R: RngCore + ?Sized>(
        &self,
        rng: &mut R,
        out: &mut [u64],
    ) -> Result<(), StatsError> {
        let (r, c) = (self.row_totals.len(), self.col_totals.len());
        if out.len() != r * c {
            return Err(StatsError::ShapeMismatch {
                rows: r,
                cols: c,
                expected: r * c,
                len: out.len(),
            });
        }
        let mut remaining_cols = self.col_totals.clone();
        self.fill(rng, out, &mut remaining_cols);
        Ok(())
    }

    /// The sampling loop; `cols` is scratch of length c.
    fn fill<R: RngCore + ?Sized>(&self, rng: &mut R, out: &mut [u64], cols: &mut [u64]) {
        let (r, c) = (self.row_totals.len(), self.col_totals.len());
        cols.copy_from_slice(&self.col_totals);
        let mut rows_left = self.total;
        for l in 0..r - 1 {
            let mut need = self.row_totals[l];
            let mut pop = rows_left;
            rows_left -= need;
            let row = &mut out[l * c..(l + 1) * c];
            for m in 0..c - 1 {
                let marked = cols[m];
                let x = self.hypergeometric(rng, pop, marked, need);
                row[m] = x;
                need -= x;
                cols[m] -= x;
                pop -= marked;
            }
            row[c - 1] = need;
            cols[c - 1] -= need;
        }
        out[(r - 1) * c..].copy_from_slice(cols);
    }

    /// ln C(n, k).
    fn ln_choose(&self, n: u64, k: u64) -> f64 {
        let f = &self.ln_fact;
        f[n as usize] - f[k as usize] - f[(n - k) as usize]
    }

    /// A draw of the marked units among `draws` taken from `pop` units of which `marked`
    /// are marked, by inversion from the mode outward.
    fn hypergeometric<R: RngCore + ?Sized>(
        &self,
        rng: &mut R,
        pop: u64,
        marked: u64,
        draws: u64,
    ) -> u64 {
        let h = Hyper::new(marked, pop - marked, draws);
        if h.lo == h.hi {
            return h.lo;
        }
        let mode = h.mode();
        let p_mode = if self.ln_fact.is_empty() {
            h.pmf(mode)
        } else {
            (self.ln_choose(marked, mode) + self.ln_choose(pop - marked, draws - mode)
                - self.ln_choose(pop, draws))
            .exp()
        };
        let u = uniform(rng);
        let mut cum = p_mode;
        if u <= cum {
            return mode;
        }
        let (mut up, mut down) = (mode, mode);
        let mut next_up = if up < h.hi {
            p_mode * h.ratio_up(up)
        } else {
            -1.0
        };
        let mut next_down = if down > h.lo {
            p_mode * h.ratio_down(down)
        } else {
            -1.0
        };
        loop {
            if next_up < 0.0 && next_down < 0.0 {
                // Rounding left u just above the total; the last value taken stands.
                return if up > mode { up } else { down };
            }
            if next_up >= next_down {
                up += 1;
                cum += next_up;
                if u <= cum {
                    return up;
                }
                next_up = if up < h.hi {
                    next_up * h.ratio_up(up)
                } else {
                    -1.0
                };
            } else {
                down -= 1;
                cum += next_down;
                if u <= cum {
                    return down;
                }
                next_down = if down > h.lo {
                    next_down * h.ratio_down(down)
                } else {
                    -1.0
                };
            }
        }
    }
}

/// A uniform draw in [0, 1) with 53 random bits.
fn uniform<R: RngCore + ?Sized>(rng: &mut R) -> f64 {
    (rng.next_u64() >> 11) as f64 * (1.0 / (1u64 << 53) as f64)
}

/// One random table with the given margins into `out` (row-major); builds a
/// [`PatefieldSampler`] each call, so prefer the sampler for repeated draws.
pub fn patefield<R: RngCore + ?Sized>(
    rng: &mut R,
    row_totals: &[u64],
    col_totals: &[u64],
    out: &mut [u64],
) -> Result<(), StatsError> {
    PatefieldSampler::new(row_totals, col_totals)?.sample(rng, out)
}

/// Pearson X^2 of counts against precomputed expected counts and their inverses.
fn x2_of(counts: &[u64], expected: &[f64], inv_expected: &[f64]) -> f64 {
    counts
        .iter()
        .zip(expected.iter().zip(inv_expected))
        .map(|(&o, (&e, &ie))| {
            let d = o as f64 - e;
            d * d * ie
        })
        .sum()
}

/// The Monte Carlo conditional p-value of Pearson's X^2 for `table` with `resamples`
/// random tables from the stream `seed` (use [`table_seed`] for a reproducible answer).
///
/// All-zero rows and columns are dropped first; fewer than 2 usable rows or columns is
/// [`StatsError::NotTestable`]. `resamples` must be at least 1.
///
/// ```
/// use dispar_stats::{montecarlo::{conditional_p, table_seed}, table::Table};
/// let t = Table::from_rows(&[vec![3, 0], vec![1, 4], vec![0, 5]])?;
/// let mc = conditional_p(&t, 2_000, table_seed(&t))?;
/// assert_eq!(mc, conditional_p(&t, 2_000, table_seed(&t))?); // reproducible
/// assert!(mc.p > 0.0 && mc.p <= 1.0);
/// # Ok::<(), dispar_stats::StatsError>(())
/// ```
pub fn conditional_p(table: &Table, resamples: u64, seed: u64) -> Result<MonteCarlo, StatsError> {
    conditional_p_until(table, resamples, seed, None)
}

/// [`conditional_p`] that gives up with [`StatsError::DeadlineExceeded`] once
/// `deadline` has passed (checked between chunks of resamples), so a server can bound
/// the CPU time of one request. With `None` it is exactly [`conditional_p`].
pub fn conditional_p_until(
    table: &Table,
    resamples: u64,
    seed: u64,
    deadline: Option<std::time::Instant>,
) -> Result<MonteCarlo, StatsError> {
    if resamples == 0 {
        return Err(StatsError::InvalidParameter {
            name: "resamples",
            value: 0.0,
            requirement: "at least 1",
        });
    }
    let reduced = table.reduce();
    let t = reduced.testable()?;
    // The observed X^2: the cell contributions summed in sorted order, so the value is
    // bit-for-bit the same for any order of rows and columns.
    let mut contributions: Vec<f64> = Vec::with_capacity(t.rows() * t.cols());
    for (i, &rt) in t.row_totals().iter().enumerate() {
        for (&o, &ct) in t.row(i).iter().zip(t.col_totals()) {
            let (d, e) = deviation(o, rt, ct, t.total());
            contributions.push(d * d / e);
        }
    }
    contributions.sort_unstable_by(f64::total_cmp);
    let observed: f64 = contributions.iter().sum();
    let threshold = observed * (1.0 - TIE_TOLERANCE);
    // The null distribution depends only on the margins: simulate with them sorted, so the
    // answer does not depend on the order of rows or columns either.
    let mut row_totals = t.row_totals().to_vec();
    let mut col_totals = t.col_totals().to_vec();
    row_totals.sort_unstable_by(|x, y| y.cmp(x));
    col_totals.sort_unstable_by(|x, y| y.cmp(x));
    let (r, c) = (row_totals.len(), col_totals.len());
    let n = t.total() as f64;
    let mut expected = Vec::with_capacity(r * c);
    for &rt in &row_totals {
        for &ct in &col_totals {
            expected.push(rt as f64 * ct as f64 / n);
        }
    }
    let inv_expected: Vec<f64> = expected.iter().map(|&e| 1.0 / e).collect();
    let sampler = PatefieldSampler::new(&row_totals, &col_totals)?;

    let chunks = resamples.div_ceil(CHUNK);
    let late = std::sync::atomic::AtomicBool::new(false);
    let run_chunks = |first: u64, step: u64| -> u64 {
        let mut out = vec![0u64; r * c];
        let mut cols = vec![0u64; c];
        let mut hits = 0u64;
        let mut j = first;
        while j < chunks {
            if late.load(std::sync::atomic::Ordering::Relaxed)
                || deadline.is_some_and(|d| std::time::Instant::now() >= d)
            {
                late.store(true, std::sync::atomic::Ordering::Relaxed);
                return hits;
            }
            let mut rng = ChaCha8Rng::seed_from_u64(seed);
            rng.set_stream(j);
            let n = CHUNK.min(resamples - j * CHUNK);
            for i in 0..n {
                // Tables of huge counts take milliseconds each: look at the clock
                // within a chunk too (every 16 tables costs nothing measurable).
                if i % 16 == 15 && deadline.is_some_and(|d| std::time::Instant::now() >= d) {
                    late.store(true, std::sync::atomic::Ordering::Relaxed);
                    return hits;
                }
                sampler.fill(&mut rng, &mut out, &mut cols);
                if x2_of(&out, &expected, &inv_expected) >= threshold {
                    hits += 1;
                }
            }
            j += step;
        }
        hits
    };
    let work = resamples.saturating_mul((r * c) as u64);
    let threads = if work < 2_000_000 || chunks < 2 {
        1
    } else {
        std::thread::available_parallelism()
            .map(|n| n.get() as u64)
            .unwrap_or(1)
            .min(chunks)
    };
    let hits = if threads <= 1 {
        run_chunks(0, 1)
    } else {
        std::thread::scope(|s| {
            let handles: Vec<_> = (0..threads)
                .map(|t| {
                    let run = &run_chunks;
                    s.spawn(move || run(t, threads))
                })
                .collect();
            handles
                .into_iter()
                .map(|h| h.join().unwrap_or_else(|e| std::panic::resume_unwind(e)))
                .sum::<u64>()
        })
    };
    if late.load(std::sync::atomic::Ordering::Relaxed) {
        return Err(StatsError::DeadlineExceeded);
    }
    let p = (1 + hits) as f64 / (1 + resamples) as f64;
    Ok(MonteCarlo {
        statistic: observed,
        p,
        std_error: (p * (1.0 - p) / resamples as f64).sqrt(),
        resamples,
        at_least_as_extreme: hits,
        seed,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_passed_deadline_abandons_the_simulation() {
        let t = Table::from_rows(&[vec![3, 1, 0], vec![1, 3, 2], vec![0, 2, 4]]).expect("valid");
        let past = std::time::Instant::now();
        assert_eq!(
            conditional_p_until(&t, 10_000, 1, Some(past)),
            Err(StatsError::DeadlineExceeded)
        );
        let later = std::time::Instant::now() + std::time::Duration::from_secs(3600);
        assert_eq!(
            conditional_p_until(&t, 10_000, 1, Some(later)),
            conditional_p(&t, 10_000, 1),
            "a deadline that is not reached changes nothing"
        );
    }

    #[test]
    fn sampled_tables_keep_the_margins() {
        let rows = [5u64, 0, 12, 7];
        let cols = [10u64, 3, 11];
        let s = PatefieldSampler::new(&rows, &cols).expect("valid");
        let mut rng = ChaCha8Rng::seed_from_u64(7);
        let mut out = vec![0u64; 12];
        for _ in 0..500 {
            s.sample(&mut rng, &mut out).expect("shape");
            for (i, &rt) in rows.iter().enumerate() {
                assert_eq!(out[i * 3..i * 3 + 3].iter().sum::<u64>(), rt);
            }
            for (j, &ct) in cols.iter().enumerate() {
                assert_eq!((0..4).map(|i| out[i * 3 + j]).sum::<u64>(), ct);
            }
        }
    }

    #[test]
    fn a_cell_follows_its_hypergeometric_law() {
        // The top-left cell of a random 2 x 2 table is hypergeometric; compare the
        // frequencies of 200,000 draws with the exact probabilities (chi-square goodness of
        // fit would be the formal check; here every frequency must be within 5 standard
        // errors).
        let s = PatefieldSampler::new(&[6, 9], &[7, 8]).expect("valid");
        let h = Hyper::new(6, 9, 7);
        let mut rng = ChaCha8Rng::seed_from_u64(11);
        let mut out = [0u64; 4];
        let mut freq = [0u64; 7];
        let draws = 200_000u64;
        for _ in 0..draws {
            s.sample(&mut rng, &mut out).expect("shape");
            freq[out[0] as usize] += 1;
        }
        for (x, &f) in freq.iter().enumerate() {
            let p = h.pmf(x as u64);
            let se = (p * (1.0 - p) / draws as f64).sqrt();
            let got = f as f64 / draws as f64;
            assert!((got - p).abs() <= 5.0 * se + 1e-12, "x = {x}: {got} vs {p}");
        }
    }

    #[test]
    fn the_same_table_gives_the_same_p_and_thread_count_does_not_matter() {
        let t =
            Table::from_rows(&[vec![2, 8], vec![0, 10], vec![5, 5], vec![1, 9]]).expect("valid");
        let seed = table_seed(&t);
        let a = conditional_p(&t, 600_000, seed).expect("testable"); // threaded
        let b = conditional_p(&t, 600_000, seed).expect("testable");
        assert_eq!(a, b);
        assert_eq!(a.resamples, 600_000);
        assert!((a.p - (1 + a.at_least_as_extreme) as f64 / 600_001.0).abs() < 1e-15);
    }

    #[test]
    fn permuting_rows_and_columns_changes_nothing() {
        let t = Table::from_rows(&[vec![9, 5, 13, 1, 14], vec![14, 1, 14, 5, 5]]).expect("valid");
        let p = Table::from_rows(&[vec![5, 5, 14, 14, 1], vec![1, 14, 13, 9, 5]]).expect("valid");
        assert_eq!(table_seed(&t), table_seed(&p));
        let a = conditional_p(&t, 3_000, table_seed(&t)).expect("testable");
        let b = conditional_p(&p, 3_000, table_seed(&p)).expect("testable");
        assert_eq!(a, b);
    }

    #[test]
    fn monte_carlo_p_agrees_with_fisher_on_a_2x2() {
        // For a 2 x 2 table, tables with X^2 >= observed are exactly those with
        // P <= P(observed), so the conditional p estimates Fisher's two-sided p.
        let t = Table::from_rows(&[vec![1, 9], vec![11, 3]]).expect("valid");
        let mc = conditional_p(&t, 200_000, table_seed(&t)).expect("testable");
        let f = crate::exact::fisher(1, 9, 11, 3);
        assert!(
            (mc.p - f.p_two_sided).abs() < 5.0 * mc.std_error,
            "{} vs {}",
            mc.p,
            f.p_two_sided
        );
    }

    #[test]
    fn bad_input_is_typed() {
        let t = Table::from_rows(&[vec![1, 2], vec![3, 4]]).expect("valid");
        assert!(conditional_p(&t, 0, 1).is_err());
        let one_row = Table::from_rows(&[vec![1, 2], vec![0, 0]]).expect("valid");
        assert!(matches!(
            conditional_p(&one_row, 10, 1),
            Err(StatsError::NotTestable(_))
        ));
        assert!(matches!(
            PatefieldSampler::new(&[1, 2], &[4]),
            Err(StatsError::MarginsDisagree { .. })
        ));
    }
}
