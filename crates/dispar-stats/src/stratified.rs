//! Comparisons of defect rates stratified by product: the Cochran-Mantel-Haenszel test and
//! the Mantel-Haenszel common odds ratio for two groups, the Breslow-Day test that the
//! odds ratio is the same in every stratum, and the generalised Cochran-Mantel-Haenszel
//! test for any number of groups. Each stratum (product) is compared within itself, so a
//! group is not blamed for making more of a product that fails everywhere.
//!
//! # Method
//!
//! A stratum of two groups is the 2 x 2 table [a, b, c, d]: group 1 defective a,
//! conforming b; group 2 defective c, conforming d; n = a + b + c + d, row totals
//! n1 = a + b, n2 = c + d, column totals m1 = a + c, m2 = b + d. Strata with n < 2
//! carry no information and are skipped.
//!
//! - **CMH statistic** (Mantel & Haenszel 1959, "Statistical aspects of the analysis of
//!   data from retrospective studies of disease", JNCI 22:719-748; Cochran 1954,
//!   Biometrics 10:417-451): (sum (a - n1 m1 / n))^2 / sum n1 n2 m1 m2 / (n^2 (n - 1)),
//!   chi-square on 1 df, without continuity correction.
//! - **Common odds ratio**: OR = sum (a d / n) / sum (b c / n) (Mantel & Haenszel 1959),
//!   the odds of a defective in group 1 against group 2. The variance of ln OR is that
//!   of Robins, Breslow & Greenland (1986), "Estimators of the Mantel-Haenszel variance
//!   consistent in both sparse data and large-strata limiting models", Biometrics
//!   42:311-323: with P = (a + d)/n, Q = (b + c)/n, R = a d / n, S = b c / n,
//!   Var = sum P R / (2 R+^2) + sum (P S + Q R) / (2 R+ S+) + sum Q S / (2 S+^2). The
//!   interval is exp(ln OR -+ z sqrt(Var)).
//! - **Breslow-Day** (Breslow & Day 1980, *Statistical Methods in Cancer Research, Vol. I:
//!   The Analysis of Case-Control Studies*, IARC Scientific Publications 32, section
//!   4.4): in each stratum with all four margins positive, the count A that gives the
//!   stratum the odds ratio OR with its margins fixed (the admissible root of a
//!   quadratic), and the statistic sum (a - A)^2 / Var(A), Var(A) = 1 / (1/A + 1/B +
//!   1/C + 1/D), on (strata - 1) df, without Tarone's (1985) adjustment.
//! - **Generalised CMH** (Landis, Heyman & Koch 1978, "Average partial association in
//!   three-way contingency tables: a review and discussion of alternative tests",
//!   International Statistical Review 46:237-254), the general-association statistic for
//!   k groups x {defective, conforming} x strata: d = sum_s (x_gs - n_gs D_s / N_s) over
//!   groups g, V = sum_s D_s C_s / (N_s^2 (N_s - 1)) (N_s diag(n_s) - n_s n_s^T), and
//!   Q = d^T V^- d on the rank of V. One group is left out as the reference (its
//!   deviation is minus the others' sum); V is solved by Cholesky. At k = 2 it is the CMH
//!   statistic above.
//!
//! ```
//! use dispar_stats::stratified::mantel_haenszel;
//! // The same odds ratio, 2, in both strata, [a, b, c, d] = [group 1 defective,
//! // conforming, group 2 defective, conforming].
//! let mh = mantel_haenszel(&[[20, 80, 10, 80], [2, 98, 1, 98]], 0.95)?;
//! assert!((mh.odds_ratio - 2.0).abs() < 1e-12);
//! let bd = mh.breslow_day.expect("two usable strata");
//! assert!(bd.statistic.abs() < 1e-20 && bd.df == 1);
//! # Ok::<(), dispar_stats::StatsError>(())
//! ```

use crate::chisq::upper_tail_unchecked;
use crate::error::{NotTestable, NotTestableReason, StatsError};
use crate::interval::{Interval, z_for_confidence};
use crate::standardise::stratum_totals;

/// One stratum of a two-group comparison: `[a, b, c, d]` = group 1 defective a and
/// conforming b, group 2 defective c and conforming d.
pub type Stratum = [u64; 4];

/// The Mantel-Haenszel analysis of two groups over strata (see the module docs).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct MantelHaenszel {
    /// The Mantel-Haenszel common odds ratio, group 1's odds of a defective over group
    /// 2's. 0 when no stratum has a d > 0, +infinity when none has b c > 0 (the CMH test
    /// is still valid then; the odds ratio is on the edge of its range).
    pub odds_ratio: f64,
    /// exp(ln OR -+ z se) at the requested confidence; [0, +infinity] when the odds
    /// ratio is 0 or infinite.
    pub odds_ratio_ci: Interval,
    /// Robins-Breslow-Greenland standard error of ln OR; +infinity when the odds ratio is
    /// 0 or infinite.
    pub log_odds_ratio_se: f64,
    /// The CMH chi-square on 1 df, without continuity correction.
    pub statistic: f64,
    /// Upper-tail p of `statistic`; may underflow to 0 (see `log10_p`).
    pub p_value: f64,
    /// log10 of `p_value`, finite where p underflows.
    pub log10_p: f64,
    /// Breslow-Day test of equal odds ratios across strata; `None` with fewer than two
    /// strata whose four margins are all positive, or when the odds ratio is 0 or
    /// infinite (every stratum then sits at the edge of its range and the test is 0/0).
    pub breslow_day: Option<Homogeneity>,
    /// Strata with at least 2 units (the others carry no information).
    pub strata_used: usize,
}

/// A chi-square test of homogeneity across strata.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Homogeneity {
    /// The chi-square statistic.
    pub statistic: f64,
    /// Its degrees of freedom.
    pub df: u64,
    /// Upper-tail p; may underflow to 0 (see `log10_p`).
    pub p_value: f64,
    /// log10 of `p_value`, finite where p underflows.
    pub log10_p: f64,
}

/// The generalised Cochran-Mantel-Haenszel test of k groups (see the module docs).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct GeneralisedCmh {
    /// Q = d^T V^- d.
    pub statistic: f64,
    /// The rank of V: `groups_used - 1` when every pair of used groups is linked through
    /// shared strata; each further set of groups that shares no stratum with the rest
    /// takes one more off (such sets are compared only within themselves).
    pub df: u64,
    /// Upper-tail chi-square p of `statistic` on `df`; may underflow to 0.
    pub p_value: f64,
    /// log10 of `p_value`, finite where p underflows.
    pub log10_p: f64,
    /// Strata that contribute: at least 2 units, from at least two groups, and both
    /// outcomes present.
    pub strata_used: usize,
    /// Groups with units in a contributing stratum (other groups are left out).
    pub groups_used: usize,
}

/// The Mantel-Haenszel odds ratio with its Robins-Breslow-Greenland interval, the CMH
/// test (1 df, no continuity correction) and the Breslow-Day test of two groups over
/// `strata`.
///
/// Errors: no strata ([`StatsError::EmptyTable`]); totals beyond u64
/// ([`StatsError::Overflow`]); confidence outside (0, 1); a comparison with nothing to
/// compare ([`StatsError::NotTestable`]): a group with no units (`TooFewRows`), no
/// defective or no conforming unit at all (`TooFewColumns`), or no stratum holding both
/// groups and both outcomes (`NoInformativeStratum`).
pub fn mantel_haenszel(strata: &[Stratum], confidence: f64) -> Result<MantelHaenszel, StatsError> {
    let z = z_for_confidence(confidence)?;
    if strata.is_empty() {
        return Err(StatsError::EmptyTable);
    }
    let mut units = [0u64; 2];
    let mut outcomes = [0u64; 2];
    let (mut r_sum, mut s_sum) = (0.0f64, 0.0f64);
    let (mut pr, mut ps_qr, mut qs) = (0.0f64, 0.0f64, 0.0f64);
    let (mut deviation, mut variance) = (0.0f64, 0.0f64);
    let mut strata_used = 0;
    for &[a, b, c, d] in strata {
        let n1 = a.checked_add(b).ok_or(StatsError::Overflow)?;
        let n2 = c.checked_add(d).ok_or(StatsError::Overflow)?;
        let n = n1.checked_add(n2).ok_or(StatsError::Overflow)?;
        let (m1, m2) = (a + c, b + d);
        for (total, add) in units.iter_mut().zip([n1, n2]) {
            *total = total.checked_add(add).ok_or(StatsError::Overflow)?;
        }
        for (total, add) in outcomes.iter_mut().zip([m1, m2]) {
            *total = total.checked_add(add).ok_or(StatsError::Overflow)?;
        }
        if n < 2 {
            continue;
        }
        strata_used += 1;
        let nf = n as f64;
        let r = a as f64 * (d as f64 / nf);
        let s = b as f64 * (c as f64 / nf);
        let p = (a + d) as f64 / nf;
        let q = (b + c) as f64 / nf;
        r_sum += r;
        s_sum += s;
        pr += p * r;
        ps_qr += p * s + q * r;
        qs += q * s;
        deviation += exact_deviation(a, n1, m1, n);
        variance += (n1 as f64 * (n2 as f64 / nf)) * (m1 as f64 * (m2 as f64 / nf)) / (nf - 1.0);
    }
    if variance <= 0.0 {
        return Err(untestable(&units, outcomes, strata.len()));
    }
    let statistic = deviation * (deviation / variance);
    let tail = upper_tail_unchecked(statistic, 1);
    // variance > 0 means some stratum has all four margins positive, and then a d + b c > 0,
    // so the odds ratio is never 0/0 here.
    let odds_ratio = r_sum / s_sum;
    let (log_odds_ratio_se, odds_ratio_ci) = if r_sum > 0.0 && s_sum > 0.0 {
        let var =
            pr / (2.0 * r_sum * r_sum) + ps_qr / (2.0 * r_sum * s_sum) + qs / (2.0 * s_sum * s_sum);
        let se = var.sqrt();
        let ln_or = odds_ratio.ln();
        (
            se,
            Interval {
                lower: (ln_or - z * se).exp(),
                upper: (ln_or + z * se).exp(),
            },
        )
    } else {
        (
            f64::INFINITY,
            Interval {
                lower: 0.0,
                upper: f64::INFINITY,
            },
        )
    };
    let breslow_day = if odds_ratio > 0.0 && odds_ratio.is_finite() {
        breslow_day(strata, odds_ratio)
    } else {
        None
    };
    Ok(MantelHaenszel {
        odds_ratio,
        odds_ratio_ci,
        log_odds_ratio_se,
        statistic,
        p_value: tail.p,
        log10_p: tail.log10_p,
        breslow_day,
        strata_used,
    })
}

/// a - n1 m1 / n, formed as (a n - n1 m1) / n in exact integer arithmetic so that huge
/// strata at their expected counts contribute exactly 0.
fn exact_deviation(a: u64, n1: u64, m1: u64, n: u64) -> f64 {
    let an = a as u128 * n as u128;
    let nm = n1 as u128 * m1 as u128;
    let nf = n as f64;
    if an >= nm {
        (an - nm) as f64 / nf
    } else {
        -((nm - an) as f64 / nf)
    }
}

/// The error for a stratified comparison whose variance is 0, with the most specific
/// reason: `units[g]` = units of group g, `outcomes` = (defective, conforming) in all.
fn untestable(units: &[u64], outcomes: [u64; 2], strata: usize) -> StatsError {
    let dropped_rows: Vec<usize> = (0..units.len()).filter(|&g| units[g] == 0).collect();
    let usable_rows = units.len() - dropped_rows.len();
    let usable_cols = outcomes.iter().filter(|&&o| o > 0).count();
    let reason = if usable_rows < 2 {
        NotTestableReason::TooFewRows {
            usable: usable_rows,
        }
    } else if usable_cols < 2 {
        NotTestableReason::TooFewColumns {
            usable: usable_cols,
        }
    } else {
        NotTestableReason::NoInformativeStratum { strata }
    };
    let dropped_cols = (0..2).filter(|&c| outcomes[c] == 0).collect();
    StatsError::NotTestable(NotTestable {
        reason,
        dropped_rows,
        dropped_cols,
    })
}

/// The Breslow-Day statistic at the common odds ratio `psi` (finite, > 0) over the strata
/// whose four margins are positive; `None` with fewer than two such strata.
fn breslow_day(strata: &[Stratum], psi: f64) -> Option<Homogeneity> {
    let mut statistic = 0.0;
    let mut used = 0u64;
    for &[a, b, c, d] in strata {
        let (n1, n2, m1, m2) = (a + b, c + d, a + c, b + d);
        if n1 == 0 || n2 == 0 || m1 == 0 || m2 == 0 {
            continue;
        }
        used += 1;
        let fitted = fitted_count(n1 as f64, n2 as f64, m1 as f64, psi);
        let (fb, fc) = (n1 as f64 - fitted, m1 as f64 - fitted);
        let fd = n2 as f64 - m1 as f64 + fitted;
        let var = 1.0 / (1.0 / fitted + 1.0 / fb + 1.0 / fc + 1.0 / fd);
        let dev = a as f64 - fitted;
        statistic += dev * dev / var;
    }
    if used < 2 {
        return None;
    }
    let df = used - 1;
    let tail = upper_tail_unchecked(statistic, df);
    Some(Homogeneity {
        statistic,
        df,
        p_value: tail.p,
        log10_p: tail.log10_p,
    })
}

/// The count A of the (1, 1) cell that gives a 2 x 2 table with margins n1, n2 (rows), m1
/// (first column) the odds ratio `psi`: the root of A (n2 - m1 + A) = psi (n1 - A)(m1 - A)
/// inside (max(0, m1 - n2), min(n1, m1)). All margins positive, psi finite and > 0.
fn fitted_count(n1: f64, n2: f64, m1: f64, psi: f64) -> f64 {
    let (lo, hi) = ((m1 - n2).max(0.0), n1.min(m1));
    // (1 - psi) A^2 + (n2 - m1 + psi (n1 + m1)) A - psi n1 m1 = 0.
    let qa = 1.0 - psi;
    let qb = n2 - m1 + psi * (n1 + m1);
    let qc = -psi * n1 * m1;
    // The root formula without cancellation: q = -(B + sign(B) sqrt(B^2 - 4AC)) / 2, and
    // the roots are C / q and q / A. The discriminant is positive on these margins.
    let disc = (qb * qb - 4.0 * qa * qc).max(0.0);
    let q = -0.5 * (qb + qb.signum() * disc.sqrt());
    let outside = |x: f64| {
        if x < lo {
            lo - x
        } else if x > hi {
            x - hi
        } else {
            0.0
        }
    };
    let mut root = qc / q;
    if qa != 0.0 {
        let other = q / qa;
        if outside(other) < outside(root) {
            root = other;
        }
    }
    root.clamp(lo, hi)
}

/// The generalised CMH test of general association between group and outcome, stratified:
/// `groups[g][s]` = (inspected, defective) of group g in stratum s, every group with the
/// same strata in the same order. Groups without units in a contributing stratum are left
/// out; df is the rank of the covariance of the deviations (see [`GeneralisedCmh::df`]).
/// Building V costs O(S k^2) and the Cholesky solve O(k^3 / 6): about a millisecond at
/// k = 200 groups.
///
/// Errors: as [`crate::standardise::indirect`] for the shape and counts, and
/// [`StatsError::NotTestable`] when fewer than two groups have units (`TooFewRows`), no
/// unit or every unit is defective (`TooFewColumns`), or no stratum has two groups and
/// both outcomes (`NoInformativeStratum`).
///
/// ```
/// use dispar_stats::stratified::generalised_cmh;
/// // Three sites, two products; site 2 is worse within each product.
/// let groups = vec![
///     vec![(200, 4), (100, 10)],
///     vec![(100, 2), (200, 20)],
///     vec![(150, 12), (150, 30)],
/// ];
/// let g = generalised_cmh(&groups)?;
/// assert_eq!((g.df, g.groups_used, g.strata_used), (2, 3, 2));
/// assert!(g.p_value < 0.01);
/// # Ok::<(), dispar_stats::StatsError>(())
/// ```
pub fn generalised_cmh(groups: &[Vec<(u64, u64)>]) -> Result<GeneralisedCmh, StatsError> {
    let (inspected, defective) = stratum_totals(groups)?;
    let k = groups.len();
    let strata = inspected.len();
    // A stratum contributes when two groups made the product and both outcomes occur.
    let informative: Vec<bool> = (0..strata)
        .map(|s| {
            let present = groups.iter().filter(|row| row[s].0 > 0).count();
            present >= 2 && defective[s] > 0 && defective[s] < inspected[s]
        })
        .collect();
    let strata_used = informative.iter().filter(|&&i| i).count();
    if strata_used == 0 {
        // The group totals cannot overflow: they are parts of the checked stratum totals.
        let units: Vec<u64> = groups
            .iter()
            .map(|row| row.iter().map(|&(n, _)| n).sum())
            .collect();
        let all_defective: u64 = defective.iter().sum();
        let all_units: u64 = inspected.iter().sum();
        return Err(untestable(
            &units,
            [all_defective, all_units - all_defective],
            strata,
        ));
    }

    // Groups linked through shared contributing strata form components; the covariance
    // is block-diagonal over them, each block of rank (size - 1).
    let mut links = Links::new(k);
    let mut used = vec![false; k];
    for s in (0..strata).filter(|&s| informative[s]) {
        let mut first = None;
        for (g, row) in groups.iter().enumerate() {
            if row[s].0 > 0 {
                used[g] = true;
                match first {
                    None => first = Some(g),
                    Some(f) => links.join(f, g),
                }
            }
        }
    }
    let groups_used = used.iter().filter(|&&u| u).count();
    // Position of each used group in its component's block; the last member of each
    // component is its reference and has no position.
    let mut members: Vec<Vec<usize>> = vec![Vec::new(); k];
    for g in (0..k).filter(|&g| used[g]) {
        members[links.root(g)].push(g);
    }
    let mut position: Vec<Option<(usize, usize)>> = vec![None; k];
    for (root, list) in members.iter().enumerate() {
        for (i, &g) in list.iter().enumerate().take(list.len().saturating_sub(1)) {
            position[g] = Some((root, i));
        }
    }
    let mut blocks: Vec<Block> = members
        .iter()
        .map(|list| Block::new(list.len().saturating_sub(1)))
        .collect();

    let mut present: Vec<(usize, u64, u64)> = Vec::with_capacity(k);
    for s in (0..strata).filter(|&s| informative[s]) {
        let (n, x) = (inspected[s], defective[s]);
        let nf = n as f64;
        let coef = (x as f64 / nf) * ((n - x) as f64 / nf) / (nf - 1.0);
        present.clear();
        present.extend(
            groups
                .iter()
                .enumerate()
                .filter(|(_, row)| row[s].0 > 0)
                .map(|(g, row)| (g, row[s].0, row[s].1)),
        );
        for &(g, ng, xg) in &present {
            let Some((root, i)) = position[g] else {
                continue;
            };
            let block = &mut blocks[root];
            block.deviation[i] += exact_deviation(xg, ng, x, n);
            let row = coef * ng as f64;
            for &(h, nh, _) in &present {
                if let Some((_, j)) = position[h] {
                    // N n_g delta_gh - n_g n_h, with N - n_g exact on the diagonal.
                    let entry = if g == h {
                        row * (n - ng) as f64
                    } else {
                        -row * nh as f64
                    };
                    block.add(i, j, entry);
                }
            }
        }
    }

    let (mut statistic, mut rank) = (0.0f64, 0u64);
    for block in &mut blocks {
        let (q, r) = block.solve();
        statistic += q;
        rank += r;
    }
    if rank == 0 {
        return Err(StatsError::NotTestable(NotTestable {
            reason: NotTestableReason::NoInformativeStratum { strata },
            dropped_rows: (0..k).filter(|&g| !used[g]).collect(),
            dropped_cols: Vec::new(),
        }));
    }
    let tail = upper_tail_unchecked(statistic, rank);
    Ok(GeneralisedCmh {
        statistic,
        df: rank,
        p_value: tail.p,
        log10_p: tail.log10_p,
        strata_used,
        groups_used,
    })
}

/// Union-find over group indices.
struct Links {
    parent: Vec<usize>,
}

impl Links {
    fn new(k: usize) -> Self {
        Self {
            parent: (0..k).collect(),
        }
    }

    fn root(&mut self, mut g: usize) -> usize {
        while self.parent[g] != g {
            self.parent[g] = self.parent[self.parent[g]];
            g = self.parent[g];
        }
        g
    }

    fn join(&mut self, a: usize, b: usize) {
        let (ra, rb) = (self.root(a), self.root(b));
        if ra != rb {
            self.parent[rb] = ra;
        }
    }
}

/// One component's deviations and covariance (row-major, full square).
struct Block {
    size: usize,
    deviation: Vec<f64>,
    covariance: Vec<f64>,
}

impl Block {
    fn new(size: usize) -> Self {
        Self {
            size,
            deviation: vec![0.0; size],
            covariance: vec![0.0; size * size],
        }
    }

    fn add(&mut self, i: usize, j: usize, value: f64) {
        self.covariance[i * self.size + j] += value;
    }

    /// d^T V^- d and the rank of V, by Cholesky in place. V is positive definite in exact
    /// arithmetic (its groups are linked and each has units in a contributing stratum);
    /// a pivot lost to rounding (below 1e-12 of its diagonal) marks a dimension as
    /// dependent and it is skipped, as a generalised inverse would.
    fn solve(&mut self) -> (f64, u64) {
        let m = self.size;
        let v = &mut self.covariance;
        let mut kept = vec![true; m];
        for j in 0..m {
            let diag = v[j * m + j];
            let mut pivot = diag;
            for p in 0..j {
                pivot -= v[j * m + p] * v[j * m + p];
            }
            // A NaN pivot (from a NaN entry) counts as lost too.
            let lost = pivot.is_nan() || pivot <= 1e-12 * diag.abs();
            if lost {
                kept[j] = false;
                for i in j..m {
                    v[i * m + j] = 0.0;
                }
                continue;
            }
            let l = pivot.sqrt();
            v[j * m + j] = l;
            for i in (j + 1)..m {
                let mut sum = v[i * m + j];
                for p in 0..j {
                    sum -= v[i * m + p] * v[j * m + p];
                }
                v[i * m + j] = sum / l;
            }
        }
        // Forward substitution L y = d; Q = |y|^2.
        let mut y = self.deviation.clone();
        let mut q = 0.0;
        for i in 0..m {
            if !kept[i] {
                y[i] = 0.0;
                continue;
            }
            let mut sum = y[i];
            for p in 0..i {
                sum -= v[i * m + p] * y[p];
            }
            y[i] = sum / v[i * m + i];
            q += y[i] * y[i];
        }
        (q, kept.iter().filter(|&&k| k).count() as u64)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::testutil::assert_rel;

    #[test]
    fn the_fitted_count_has_the_common_odds_ratio() {
        for &(n1, n2, m1, psi) in &[
            (10.0, 20.0, 5.0, 1.0),
            (100.0, 50.0, 120.0, 3.5),
            (7.0, 9.0, 8.0, 0.01),
            (1e6, 2e6, 3e4, 1.000_000_1),
        ] {
            let a = fitted_count(n1, n2, m1, psi);
            let or = a * (n2 - m1 + a) / ((n1 - a) * (m1 - a));
            assert_rel(or, psi, 1e-9, &format!("{n1} {n2} {m1} {psi}"));
        }
    }

    #[test]
    fn two_groups_give_the_two_by_two_statistic() {
        let strata: [Stratum; 3] = [[12, 88, 5, 95], [3, 47, 9, 141], [0, 10, 1, 9]];
        let mh = mantel_haenszel(&strata, 0.95).expect("valid");
        let groups: Vec<Vec<(u64, u64)>> = (0..2)
            .map(|g| {
                strata
                    .iter()
                    .map(|t| (t[2 * g] + t[2 * g + 1], t[2 * g]))
                    .collect()
            })
            .collect();
        let gc = generalised_cmh(&groups).expect("valid");
        assert_rel(gc.statistic, mh.statistic, 1e-12, "Q vs CMH");
        assert_eq!(gc.df, 1);
    }

    #[test]
    fn groups_sharing_no_stratum_are_compared_within_their_own_set() {
        // Groups 0, 1 make product 0; groups 2, 3 product 1: two separate 2-group
        // comparisons, 2 df, Q their sum.
        let groups = vec![
            vec![(100, 10), (0, 0)],
            vec![(100, 20), (0, 0)],
            vec![(0, 0), (50, 5)],
            vec![(0, 0), (50, 1)],
        ];
        let g = generalised_cmh(&groups).expect("valid");
        assert_eq!((g.df, g.groups_used), (2, 4));
        let one = mantel_haenszel(&[[10, 90, 20, 80]], 0.95).expect("valid");
        let two = mantel_haenszel(&[[5, 45, 1, 49]], 0.95).expect("valid");
        assert_rel(g.statistic, one.statistic + two.statistic, 1e-12, "sum");
    }

    #[test]
    fn nothing_to_compare_is_not_testable() {
        let reason = |e: StatsError| match e {
            StatsError::NotTestable(nt) => nt.reason,
            other => panic!("unexpected {other:?}"),
        };
        let e = mantel_haenszel(&[[0, 10, 0, 20], [0, 5, 0, 5]], 0.95).expect_err("no defective");
        assert_eq!(reason(e), NotTestableReason::TooFewColumns { usable: 1 });
        let e = mantel_haenszel(&[[1, 10, 0, 0]], 0.95).expect_err("one group");
        assert_eq!(reason(e), NotTestableReason::TooFewRows { usable: 1 });
        let e = mantel_haenszel(&[[1, 10, 0, 0], [0, 0, 2, 9]], 0.95).expect_err("apart");
        assert_eq!(
            reason(e),
            NotTestableReason::NoInformativeStratum { strata: 2 }
        );
        let e = generalised_cmh(&[vec![(5, 1), (0, 0)], vec![(0, 0), (5, 2)]]).expect_err("apart");
        assert_eq!(
            reason(e),
            NotTestableReason::NoInformativeStratum { strata: 2 }
        );
        assert_eq!(mantel_haenszel(&[], 0.95), Err(StatsError::EmptyTable));
    }

    #[test]
    fn an_odds_ratio_on_the_edge_is_infinite_not_nan() {
        // Only group 1 has defectives: S = 0.
        let mh = mantel_haenszel(&[[5, 95, 0, 100], [3, 47, 0, 50]], 0.95).expect("valid");
        assert!(mh.odds_ratio.is_infinite());
        assert!(mh.log_odds_ratio_se.is_infinite());
        assert_eq!(mh.breslow_day, None);
        assert!(mh.statistic > 0.0 && mh.p_value < 0.01);
    }
}
