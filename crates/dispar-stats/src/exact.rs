//! Fisher's exact test for a 2 x 2 table, in log space.
//!
//! The table [[a, b], [c, d]] has fixed margins; under independence `a` is hypergeometric.
//! Probabilities are computed with Loader's saddle-point method (Loader 2000, "Fast and
//! accurate computation of binomial probabilities"): ln P is accurate to about 1e-14
//! absolute for any N that fits in f64, so nothing overflows and far-tail p-values keep
//! their digits. Tails are summed outward from a starting cell with the recurrence
//! P(x+1)/P(x) = (R1 - x)(C1 - x) / ((x + 1)(R2 - C1 + x + 1)), stopping once the terms
//! are negligible, so the work grows with the spread of the distribution (about
//! sqrt(N)), not with N.

use crate::loader::ln_dbinom;

/// The p-values of Fisher's exact test.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Fisher {
    /// Two-sided p: the sum of P(table) over all tables with the observed margins whose
    /// probability is at most P(observed) (1 + 1e-7) (the usual relative tolerance for
    /// ties, as in R's fisher.test and scipy).
    pub p_two_sided: f64,
    /// log10 of `p_two_sided`; finite even when it underflows.
    pub log10_p: f64,
    /// One-sided P(A <= a): evidence that row 1 has *fewer* in column 1 than independence.
    pub p_less: f64,
    /// One-sided P(A >= a): evidence that row 1 has *more* in column 1.
    pub p_greater: f64,
}

/// Relative tolerance for "as or less probable than the observed table".
const TIE_TOLERANCE: f64 = 1e-7;

/// Fisher's exact test of the 2 x 2 table [[a, b], [c, d]].
///
/// A table with a zero margin has only one possible configuration and gives p = 1.
///
/// ```
/// use dispar_stats::exact::fisher;
/// // Fisher's tea-tasting table (Fisher 1935, The Design of Experiments, section 2):
/// // two-sided p = 34/70 = 0.4857.
/// let f = fisher(3, 1, 1, 3);
/// assert!((f.p_two_sided - 34.0 / 70.0).abs() < 1e-14);
/// assert!((f.p_greater - 17.0 / 70.0).abs() < 1e-14);
/// ```
pub fn fisher(a: u64, b: u64, c: u64, d: u64) -> Fisher {
    let h = Hyper::new(a + b, c + d, a + c);
    let one = Fisher {
        p_two_sided: 1.0,
        log10_p: 0.0,
        p_less: 1.0,
        p_greater: 1.0,
    };
    if h.lo == h.hi {
        return one;
    }
    let m = h.mode();
    match by_walk(&h, a, m) {
        Some(f) => f,
        None => log_space(&h, a, m),
    }
}

/// Fisher's test with every probability from Loader's ln P: accurate however small p is.
fn log_space(h: &Hyper, a: u64, m: u64) -> Fisher {
    // One-sided tails; the side beyond the mode is summed directly, the other as a
    // complement of a sum that is at most about one half (so no digits are lost).
    let p_less = if a <= m {
        h.pmf(a) * h.sum_down(a)
    } else if a >= h.hi {
        1.0
    } else {
        1.0 - h.pmf(a + 1) * h.sum_up(a + 1)
    };
    let p_greater = if a >= m {
        h.pmf(a) * h.sum_up(a)
    } else if a <= h.lo {
        1.0
    } else {
        1.0 - h.pmf(a - 1) * h.sum_down(a - 1)
    };

    let ln_obs = h.ln_pmf(a);
    let ln_thr = ln_obs + TIE_TOLERANCE.ln_1p();
    let ln_p = if h.ln_pmf(m) <= ln_thr {
        0.0
    } else {
        // ln P is non-decreasing on [lo, m] and non-increasing on [m, hi].
        let left = if h.ln_pmf(h.lo) <= ln_thr {
            // Largest x in [lo, m) with ln P(x) <= threshold.
            let start = if a < m { a } else { h.lo };
            let xl = last_true(start, m - 1, |x| h.ln_pmf(x) <= ln_thr);
            Some(h.ln_pmf(xl) + h.sum_down(xl).ln())
        } else {
            None
        };
        let right = if h.ln_pmf(h.hi) <= ln_thr {
            let end = if a > m { a } else { h.hi };
            let xr = first_true(m + 1, end, |x| h.ln_pmf(x) <= ln_thr);
            Some(h.ln_pmf(xr) + h.sum_up(xr).ln())
        } else {
            None
        };
        match (left, right) {
            (Some(l), Some(r)) => {
                let top = l.max(r);
                top + ((l - top).exp() + (r - top).exp()).ln()
            }
            (Some(l), None) => l,
            (None, Some(r)) => r,
            // Unreachable: the observed cell itself satisfies the threshold.
            (None, None) => ln_obs,
        }
        .min(0.0)
    };
    Fisher {
        p_two_sided: ln_p.exp(),
        log10_p: ln_p / std::f64::consts::LN_10,
        p_less: p_less.clamp(0.0, 1.0),
        p_greater: p_greater.clamp(0.0, 1.0),
    }
}

/// The fast path: every non-negligible term relative to the mode's, by the recurrence
/// alone (no logarithms). Used when all three p-values are at least `WALK_MIN_P`, where the
/// terms dropped as negligible cannot matter (they are below 1e-17 of the total, so at most
/// 1e-12 of any p it returns); otherwise `None` and the log-space path runs.
fn by_walk(h: &Hyper, a: u64, m: u64) -> Option<Fisher> {
    const WALK_MIN_P: f64 = 1e-5;
    // Pass 1: the total mass and the observed term, both relative to P(mode).
    let mut total = 1.0f64;
    let mut t_obs = if a == m { 1.0 } else { -1.0 };
    let (mut x, mut t) = (m, 1.0f64);
    while x > h.lo {
        t *= h.ratio_down(x);
        x -= 1;
        total += t;
        if x == a {
            t_obs = t;
        }
        if t < NEGLIGIBLE * total {
            break;
        }
    }
    let left_end = x;
    let (mut x, mut t) = (m, 1.0f64);
    while x < h.hi {
        t *= h.ratio_up(x);
        x += 1;
        total += t;
        if x == a {
            t_obs = t;
        }
        if t < NEGLIGIBLE * total {
            break;
        }
    }
    let right_end = x;
    if t_obs < 0.0 {
        return None;
    }
    // Pass 2: the same terms again, sorted into the three sums.
    let thr = t_obs * (1.0 + TIE_TOLERANCE);
    let (mut two, mut less, mut greater) = (0.0f64, 0.0f64, 0.0f64);
    let mut add = |x: u64, t: f64| {
        if t <= thr {
            two += t;
        }
        if x <= a {
            less += t;
        }
        if x >= a {
            greater += t;
        }
    };
    add(m, 1.0);
    let (mut x, mut t) = (m, 1.0f64);
    while x > left_end {
        t *= h.ratio_down(x);
        x -= 1;
        add(x, t);
    }
    let (mut x, mut t) = (m, 1.0f64);
    while x < right_end {
        t *= h.ratio_up(x);
        x += 1;
        add(x, t);
    }
    let (two, less, greater) = (
        (two / total).min(1.0),
        (less / total).min(1.0),
        (greater / total).min(1.0),
    );
    if two.min(less).min(greater) < WALK_MIN_P {
        return None;
    }
    Some(Fisher {
        p_two_sided: two,
        log10_p: two.log10(),
        p_less: less,
        p_greater: greater,
    })
}

/// Largest x in [lo, hi] with `pred(x)`, given pred is true at lo and monotone (true then
/// false).
fn last_true(mut lo: u64, mut hi: u64, pred: impl Fn(u64) -> bool) -> u64 {
    if pred(hi) {
        return hi;
    }
    // Invariant: pred(lo), !pred(hi).
    while hi - lo > 1 {
        let mid = lo + (hi - lo) / 2;
        if pred(mid) {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    lo
}

/// Smallest x in [lo, hi] with `pred(x)`, given pred is true at hi and monotone (false then
/// true).
fn first_true(mut lo: u64, mut hi: u64, pred: impl Fn(u64) -> bool) -> u64 {
    if pred(lo) {
        return lo;
    }
    // Invariant: !pred(lo), pred(hi).
    while hi - lo > 1 {
        let mid = lo + (hi - lo) / 2;
        if pred(mid) {
            hi = mid;
        } else {
            lo = mid;
        }
    }
    hi
}

/// The hypergeometric law of the top-left cell of a 2 x 2 table with margins R1, R2, C1.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Hyper {
    r1: u64,
    r2: u64,
    c1: u64,
    n: u64,
    /// Smallest possible value of the cell.
    pub(crate) lo: u64,
    /// Largest possible value.
    pub(crate) hi: u64,
    p: f64,
    q: f64,
}

/// Terms below this fraction of the running sum end a tail sum.
const NEGLIGIBLE: f64 = 1e-18;

impl Hyper {
    /// Drawing `c1` units from `r1` marked and `r2` unmarked ones.
    pub(crate) fn new(r1: u64, r2: u64, c1: u64) -> Hyper {
        let n = r1 + r2;
        let lo = c1.saturating_sub(r2);
        let hi = r1.min(c1);
        let (p, q) = if n == 0 {
            (0.0, 1.0)
        } else {
            (c1 as f64 / n as f64, (n - c1) as f64 / n as f64)
        };
        Hyper {
            r1,
            r2,
            c1,
            n,
            lo,
            hi,
            p,
            q,
        }
    }

    /// A most probable value, floor((R1 + 1)(C1 + 1) / (N + 2)), within the support.
    pub(crate) fn mode(&self) -> u64 {
        let m = (self.r1 as u128 + 1) * (self.c1 as u128 + 1) / (self.n as u128 + 2);
        (m as u64).clamp(self.lo, self.hi)
    }

    /// ln P(X = x) (negative infinity outside the support).
    pub(crate) fn ln_pmf(&self, x: u64) -> f64 {
        if x < self.lo || x > self.hi {
            return f64::NEG_INFINITY;
        }
        if self.lo == self.hi {
            return 0.0;
        }
        ln_dbinom(x, self.r1, self.p, self.q) + ln_dbinom(self.c1 - x, self.r2, self.p, self.q)
            - ln_dbinom(self.c1, self.n, self.p, self.q)
    }

    /// P(X = x).
    pub(crate) fn pmf(&self, x: u64) -> f64 {
        self.ln_pmf(x).exp()
    }

    /// P(X = x + 1) / P(X = x), for lo <= x < hi.
    pub(crate) fn ratio_up(&self, x: u64) -> f64 {
        ((self.r1 - x) as f64 * (self.c1 - x) as f64)
            / ((x + 1) as f64 * (self.r2 + x + 1 - self.c1) as f64)
    }

    /// P(X = x - 1) / P(X = x), for lo < x <= hi.
    pub(crate) fn ratio_down(&self, x: u64) -> f64 {
        (x as f64 * (self.r2 + x - self.c1) as f64)
            / ((self.r1 - x + 1) as f64 * (self.c1 - x + 1) as f64)
    }

    /// sum_{x <= x0} P(x) / P(x0), for x0 at or left of the mode (terms decrease leftward).
    pub(crate) fn sum_down(&self, x0: u64) -> f64 {
        let (mut x, mut term, mut sum) = (x0, 1.0f64, 1.0f64);
        while x > self.lo {
            term *= self.ratio_down(x);
            x -= 1;
            sum += term;
            if term < NEGLIGIBLE * sum {
                break;
            }
        }
        sum
    }

    /// sum_{x >= x0} P(x) / P(x0), for x0 at or right of the mode.
    pub(crate) fn sum_up(&self, x0: u64) -> f64 {
        let (mut x, mut term, mut sum) = (x0, 1.0f64, 1.0f64);
        while x < self.hi {
            term *= self.ratio_up(x);
            x += 1;
            sum += term;
            if term < NEGLIGIBLE * sum {
                break;
            }
        }
        sum
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::testutil::assert_rel;

    /// Exact hypergeometric probabilities by the definition, for small tables.
    fn brute(a: u64, b: u64, c: u64, d: u64) -> (f64, f64, f64) {
        let (r1, r2, c1) = (a + b, c + d, a + c);
        let h = Hyper::new(r1, r2, c1);
        let binom = |n: u64, k: u64| -> f64 {
            (0..k).fold(1.0, |acc, i| acc * (n - i) as f64 / (i + 1) as f64)
        };
        let total = binom(r1 + r2, c1);
        let pr = |x: u64| binom(r1, x) * binom(r2, c1 - x) / total;
        let obs = pr(a);
        let (mut two, mut less, mut greater) = (0.0, 0.0, 0.0);
        for x in h.lo..=h.hi {
            let px = pr(x);
            if px <= obs * (1.0 + 1e-7) {
                two += px;
            }
            if x <= a {
                less += px;
            }
            if x >= a {
                greater += px;
            }
        }
        (two.min(1.0), less, greater)
    }

    #[test]
    fn small_tables_agree_with_the_definition() {
        let tables: &[[u64; 4]] = &[
            [3, 1, 1, 3],
            [1, 9, 11, 3],
            [0, 5, 5, 0],
            [10, 0, 0, 10],
            [2, 7, 8, 2],
            [5, 5, 5, 5],
            [0, 0, 3, 4],
            [1, 2, 0, 0],
            [12, 5, 3, 20],
            [0, 30, 1, 29],
        ];
        for t in tables {
            let f = fisher(t[0], t[1], t[2], t[3]);
            let (two, less, greater) = brute(t[0], t[1], t[2], t[3]);
            assert_rel(f.p_two_sided, two, 1e-12, &format!("{t:?} two-sided"));
            assert_rel(f.p_less, less, 1e-12, &format!("{t:?} less"));
            assert_rel(f.p_greater, greater, 1e-12, &format!("{t:?} greater"));
            assert_rel(f.log10_p, two.log10(), 1e-12, &format!("{t:?} log10"));
        }
    }

    #[test]
    fn tea_tasting_and_large_tables_match_mpmath() {
        // Exact sums of hypergeometric terms with mpmath 1.3.0 (mp.dps = 60): two-sided
        // with the 1 + 1e-7 tie rule.
        for &(t, want, want_log10) in MPMATH_FISHER {
            let f = fisher(t[0], t[1], t[2], t[3]);
            assert_rel(f.log10_p, want_log10, 1e-12, &format!("{t:?} log10"));
            if want > 0.0 {
                assert_rel(f.p_two_sided, want, 1e-11, &format!("{t:?}"));
            }
        }
    }

    // From tools/reference/unit_values.py (mpmath 1.3.0, loggamma, mp.dps = 60).
    const MPMATH_FISHER: &[([u64; 4], f64, f64)] = &[
        (
            [3, 1, 1, 3],
            0.485_714_285_714_285_7,
            -0.313_619_122_972_001_7,
        ),
        (
            [100, 900, 200, 800],
            4.146_230_622_436_390_6e-10,
            -9.382_346_545_159_193,
        ),
        (
            [0, 500, 500, 0],
            7.399_507_995_628_054e-300,
            -299.130_797_156_199_8,
        ),
        (
            [1000, 99000, 1050, 98950],
            0.276_671_796_250_005,
            -0.558_035_110_310_745_5,
        ),
        (
            [1000, 99000, 1300, 98700],
            3.400_961_377_207_788_5e-10,
            -9.468_398_300_075_739,
        ),
        (
            [10, 20000, 60, 19950],
            7.761_324_335_523_416e-10,
            -9.110_064_167_590_086,
        ),
        (
            [0, 3000, 400, 2600],
            4.961_686_039_455_849e-127,
            -126.304_370_720_040_78,
        ),
    ];

    #[test]
    fn the_walk_and_the_log_space_path_agree() {
        for t in [
            [3u64, 1, 1, 3],
            [12, 5, 3, 20],
            [1000, 99000, 1050, 98950],
            [2, 298, 5, 290],
        ] {
            let h = Hyper::new(t[0] + t[1], t[2] + t[3], t[0] + t[2]);
            let fast = by_walk(&h, t[0], h.mode()).expect("p large enough for the walk");
            // The log-space path, forced by hiding the fast path's answer.
            let slow = log_space(&h, t[0], h.mode());
            assert_rel(
                fast.p_two_sided,
                slow.p_two_sided,
                1e-12,
                &format!("{t:?} two"),
            );
            assert_rel(fast.p_less, slow.p_less, 1e-12, &format!("{t:?} less"));
            assert_rel(
                fast.p_greater,
                slow.p_greater,
                1e-12,
                &format!("{t:?} greater"),
            );
        }
    }

    #[test]
    fn the_pmf_sums_to_one_for_large_margins() {
        let h = Hyper::new(100_000, 100_000, 2_000);
        let m = h.mode();
        let total = h.pmf(m) * (h.sum_down(m) + h.sum_up(m) - 1.0);
        assert_rel(total, 1.0, 1e-12, "sum of pmf");
    }

    #[test]
    fn degenerate_margins_give_one() {
        assert_eq!(fisher(0, 0, 0, 0).p_two_sided, 1.0);
        assert_eq!(fisher(0, 5, 0, 7).p_two_sided, 1.0);
        assert_eq!(fisher(4, 0, 0, 0).p_less, 1.0);
    }
}
