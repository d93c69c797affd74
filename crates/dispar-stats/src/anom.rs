//! The analysis-of-means (ANOM) critical value h(alpha, k) for k groups, balanced case,
//! infinite degrees of freedom (known binomial variance).
//!
//! h solves P(max_i |Z_i| <= h) = 1 - alpha where Z is standard k-variate normal with
//! equal correlations rho = -1/(k-1) (the correlation of the k group deviations from the
//! pooled mean). Such a Z is the scaled deviation from the mean of k independent normals,
//! Z_i = sqrt(k/(k-1)) (e_i - mean(e)), so the event is "every e_i lies within
//! c = h sqrt((k-1)/k) of the mean", and
//!
//!   P = sqrt(k / (2 pi)) * integral over y of g(y)^k,  g(y) = int_{-c}^{c} phi(u) cos(u y) du,
//!
//! the density at 0 of a sum of k normals truncated to [-c, c], by Fourier inversion,
//! divided by the N(0, k) density at 0. This is the real form of the complex-integration
//! identity of Soong & Hsu (1997, "Using complex integration to compute multivariate normal
//! probabilities", J. Comput. Graph. Stat. 6(4)). g is evaluated without cancellation as
//! g(y) = exp(-y^2/2) - Re[exp(-c^2/2 + i c y) w((y + i c)/sqrt 2)] with the Faddeeva
//! function w in the upper half-plane (Weideman 1994, "Computation of the complex error
//! function", SIAM J. Numer. Anal. 31(5)).
//!
//! Special cases: k = 2 is the two-sided normal quantile; k = 3 is the probability that a
//! standard bivariate normal falls in a regular hexagon of inradius h,
//! 1 - (6/pi) int_0^{pi/6} exp(-h^2 / (2 cos^2 t)) dt. If the computation ever fails to
//! converge, the Sidak bound Phi^-1(1 - (1 - (1-alpha)^(1/k))/2) is returned and marked
//! [`AnomMethod::SidakBound`]. Results are cached per (alpha, k).
//!
//! The Fourier integral gives P to about 1e-14 absolute, so 1 - P = alpha has
//! 1e-14 / alpha relative error: below [`FOURIER_MIN_ALPHA`] (1e-8, where that is 1e-6)
//! k >= 4 uses the Sidak bound, marked as such. There the bound is within 1e-6 of the
//! balanced h (6.3892818 against 6.3892817 for k = 6 at 1e-9) and it is conservative for
//! any sizes. The hexagon (k = 3) and the normal quantile (k = 2) compute 1 - P directly
//! and stay exact down to [`MIN_ALPHA`].
//!
//! # Unequal group sizes
//!
//! With group shares w_i = n_i / N the adjusted residuals have correlations
//! -sqrt(w_i w_j / ((1 - w_i)(1 - w_j))), not -1/(k-1), and [`critical_for_sizes`] computes h
//! for the actual shares. The same factorisation holds: with independent e_i ~ N(0, 1/w_i)
//! and their weighted mean m = sum w_j e_j (variance 1, independent of every e_i - m),
//! Z_i = (e_i - m) sqrt(w_i / (1 - w_i)) has exactly that correlation, and Fourier inversion
//! of the density of m at 0 gives
//!
//!   P(max |Z_i| <= h) = (1 / sqrt(2 pi)) integral over t of prod_i G(t sqrt(w_i); h sqrt(1 - w_i)),
//!
//! with G(y; c) the g above. For w_i = 1/k the substitution y = t / sqrt(k) gives back the
//! balanced formula, and the same code evaluates both (the balanced constant is this
//! integral with k equal factors). This generalisation of Soong & Hsu's product form was
//! derived for this crate and checked by simulation (tests/fixtures/anom_sizes.json,
//! written by tools/reference/anom_sizes.py). For k = 3 the residuals lie in a plane and
//! the event is a hexagon whose six edges are all at distance h from the centre, with the
//! angle between adjacent edge normals arccos|rho_ij| (the three angles sum to pi), so
//! 1 - P = (2/pi) sum_{i<j} int_0^{arccos|rho_ij|/2} exp(-h^2 / (2 cos^2 t)) dt,
//! the regular hexagon above when every |rho| = 1/2. Two groups always give the normal
//! quantile (the residuals are mirror images whatever the sizes).

use std::collections::HashMap;
use std::f64::consts::{FRAC_1_SQRT_2, PI, SQRT_2};
use std::sync::{Mutex, OnceLock};

use crate::error::{StatsError, check_open_unit};
use crate::faddeeva::{Complex, faddeeva};
use crate::interval::normal_upper_quantile;

/// The smallest alpha the critical values accept: below it h overflows (1e-300 gives
/// h of about 37).
pub const MIN_ALPHA: f64 = 1e-300;

/// Below this alpha, k >= 4 uses the Sidak bound (module docs).
pub const FOURIER_MIN_ALPHA: f64 = 1e-8;

fn check_alpha(alpha: f64) -> Result<(), StatsError> {
    check_open_unit("alpha", alpha)?;
    if alpha < MIN_ALPHA {
        return Err(StatsError::InvalidParameter {
            name: "alpha",
            value: alpha,
            requirement: "at least 1e-300",
        });
    }
    Ok(())
}

/// How h was obtained.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum AnomMethod {
    /// Computed from the exact distribution (numerical integration to ~1e-13).
    Exact,
    /// The Sidak bound (conservative: slightly larger than the exact h); used when alpha
    /// is below [`FOURIER_MIN_ALPHA`] with k >= 4, or if the exact computation did not
    /// converge.
    SidakBound,
}

/// The ANOM critical value and how it was obtained.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct AnomCritical {
    /// A group is flagged when |z| > h.
    pub h: f64,
    /// Exact, or the Sidak fallback.
    pub method: AnomMethod,
}

/// The ANOM critical value h(alpha, k) for k >= 2 groups (see the module docs).
///
/// ```
/// use dispar_stats::anom::{critical, AnomMethod};
/// // k = 2: the two groups' deviations are mirror images, so h is the normal quantile.
/// let two = critical(0.05, 2)?;
/// assert!((two.h - 1.959_963_984_540_054).abs() < 1e-12);
/// // Larger k: between the single-comparison quantile and the Sidak bound.
/// let ten = critical(0.05, 10)?;
/// assert_eq!(ten.method, AnomMethod::Exact);
/// assert!(ten.h > 1.96 && ten.h < 2.8);
/// # Ok::<(), dispar_stats::StatsError>(())
/// ```
pub fn critical(alpha: f64, k: usize) -> Result<AnomCritical, StatsError> {
    const CACHE_LIMIT: usize = 4096;
    check_alpha(alpha)?;
    if k < 2 {
        return Err(StatsError::InvalidParameter {
            name: "k (groups)",
            value: k as f64,
            requirement: "at least 2",
        });
    }
    static CACHE: OnceLock<Mutex<HashMap<(u64, usize), AnomCritical>>> = OnceLock::new();
    let cache = CACHE.get_or_init(|| Mutex::new(HashMap::new()));
    let key = (alpha.to_bits(), k);
    if let Ok(map) = cache.lock()
        && let Some(&hit) = map.get(&key)
    {
        return Ok(hit);
    }
    let result = compute(alpha, k);
    if let Ok(mut map) = cache.lock() {
        // Callers choose alpha freely; a bound keeps the cache from growing with every
        // new value (it is refilled from the common ones in milliseconds).
        if map.len() >= CACHE_LIMIT {
            map.clear();
        }
        map.insert(key, result);
    }
    Ok(result)
}

/// The Sidak bound Phi^-1(1 - (1 - (1 - alpha)^(1/k)) / 2).
pub fn sidak(alpha: f64, k: usize) -> f64 {
    let per_group = -((-alpha).ln_1p() / k as f64).exp_m1();
    normal_upper_quantile(0.5 * per_group)
}

/// The ANOM critical value for groups of the given sizes (units inspected), k =
/// `sizes.len()` >= 2, each size > 0 (see "Unequal group sizes" in the module docs).
///
/// Equal sizes give exactly [`critical`]`(alpha, k)`. Otherwise h is computed for the
/// groups' shares n_i / N rounded to 24 significant bits (about 7 digits; h moves by far
/// less than 1e-7 within a rounding step), which is also the cache key, so the same
/// size profile always gives the same h; the cache is bounded like [`critical`]'s.
///
/// ```
/// use dispar_stats::anom::{critical, critical_for_sizes, AnomMethod};
/// // Equal sizes: the balanced constant.
/// let equal = critical_for_sizes(0.05, &[400, 400, 400, 400])?;
/// assert_eq!(equal, critical(0.05, 4)?);
/// // Sizes 8,976 / 1,518 / 22,595 at alpha 0.01: h = 2.87956 (simulations give
/// // 2.879 and 2.8801 +- 0.0008), below the balanced 2.91349.
/// let h = critical_for_sizes(0.01, &[8_976, 1_518, 22_595])?;
/// assert_eq!(h.method, AnomMethod::Exact);
/// assert!((h.h - 2.879_56).abs() < 1e-5);
/// # Ok::<(), dispar_stats::StatsError>(())
/// ```
pub fn critical_for_sizes(alpha: f64, sizes: &[u64]) -> Result<AnomCritical, StatsError> {
    const CACHE_LIMIT: usize = 4096;
    // Bounds the memory of the keys too (a key holds one share per group).
    const CACHE_SHARES_LIMIT: usize = 1 << 20;
    check_alpha(alpha)?;
    let k = sizes.len();
    if k < 2 {
        return Err(StatsError::InvalidParameter {
            name: "k (groups)",
            value: k as f64,
            requirement: "at least 2",
        });
    }
    if sizes.contains(&0) {
        return Err(StatsError::InvalidParameter {
            name: "group size",
            value: 0.0,
            requirement: "at least 1",
        });
    }
    if sizes.iter().all(|&n| n == sizes[0]) || k == 2 {
        return critical(alpha, k);
    }
    let total: f64 = sizes.iter().map(|&n| n as f64).sum();
    let mut key: Vec<u64> = sizes
        .iter()
        .map(|&n| round_share((n as f64 / total).to_bits()))
        .collect();
    key.sort_unstable();
    type SizeCache = HashMap<(u64, Vec<u64>), AnomCritical>;
    static CACHE: OnceLock<Mutex<(SizeCache, usize)>> = OnceLock::new();
    let cache = CACHE.get_or_init(|| Mutex::new((HashMap::new(), 0)));
    let cache_key = (alpha.to_bits(), key);
    if let Ok(guard) = cache.lock()
        && let Some(&hit) = guard.0.get(&cache_key)
    {
        return Ok(hit);
    }
    let shares: Vec<f64> = cache_key.1.iter().map(|&b| f64::from_bits(b)).collect();
    let result = compute_weighted(alpha, &shares);
    if let Ok(mut guard) = cache.lock() {
        let (map, stored) = &mut *guard;
        if map.len() >= CACHE_LIMIT || *stored + k > CACHE_SHARES_LIMIT {
            map.clear();
            *stored = 0;
        }
        *stored += k;
        map.insert(cache_key, result);
    }
    Ok(result)
}

/// Rounds an f64 in (0, 1] to 24 significant bits (ties away from zero in the bits).
fn round_share(bits: u64) -> u64 {
    const DROP: u32 = 52 - 23;
    ((bits + (1u64 << (DROP - 1))) >> DROP) << DROP
}

fn compute(alpha: f64, k: usize) -> AnomCritical {
    let sidak_h = sidak(alpha, k);
    if k == 2 {
        return AnomCritical {
            h: normal_upper_quantile(0.5 * alpha),
            method: AnomMethod::Exact,
        };
    }
    let lower = normal_upper_quantile(0.5 * alpha);
    let solved = if k == 3 {
        let gaps = [PI / 3.0; 3];
        solve(alpha, lower, sidak_h, sidak_h, |h| hexagon(h, &gaps))
    } else if alpha < FOURIER_MIN_ALPHA {
        None
    } else {
        let factors = [Factor {
            share: 1.0 / k as f64,
            count: k as i32,
        }];
        solve(alpha, lower, sidak_h, sidak_h, |h| fourier(h, &factors))
    };
    finish(solved, sidak_h)
}

/// h for shares `w` (summing to about 1; k >= 3, not all equal).
fn compute_weighted(alpha: f64, w: &[f64]) -> AnomCritical {
    let k = w.len();
    let sum: f64 = w.iter().sum();
    let w: Vec<f64> = w.iter().map(|&x| x / sum).collect();
    let sidak_h = sidak(alpha, k);
    // Sidak's inequality holds for any correlations, so h lies below the bound.
    let lower = normal_upper_quantile(0.5 * alpha);
    // The balanced constant (cached) is close: Newton needs two or three steps from it.
    let start = critical(alpha, k).map_or(sidak_h, |c| c.h);
    let solved = if k == 3 {
        let rho = |i: usize, j: usize| (w[i] * w[j] / ((1.0 - w[i]) * (1.0 - w[j]))).sqrt();
        let gaps = [
            rho(0, 1).min(1.0).acos(),
            rho(0, 2).min(1.0).acos(),
            rho(1, 2).min(1.0).acos(),
        ];
        solve(alpha, lower, sidak_h, start, |h| hexagon(h, &gaps))
    } else if alpha < FOURIER_MIN_ALPHA {
        None
    } else {
        // Groups of equal share contribute one factor raised to their count.
        let mut factors: Vec<Factor> = Vec::new();
        let mut sorted = w.clone();
        sorted.sort_unstable_by(f64::total_cmp);
        for share in sorted {
            match factors.last_mut() {
                Some(f) if f.share == share => f.count += 1,
                _ => factors.push(Factor { share, count: 1 }),
            }
        }
        solve(alpha, lower, sidak_h, start, |h| fourier(h, &factors))
    };
    finish(solved, sidak_h)
}

fn finish(solved: Option<f64>, sidak_h: f64) -> AnomCritical {
    match solved {
        Some(h) => AnomCritical {
            h,
            method: AnomMethod::Exact,
        },
        None => AnomCritical {
            h: sidak_h,
            method: AnomMethod::SidakBound,
        },
    }
}

/// Solves P(h) = 1 - alpha on [lo, hi] by Newton steps from `start` (hi when outside),
/// safeguarded with bisection; `prob` returns (P(h), dP/dh). Works with 1 - P to keep digits when alpha is small.
fn solve(
    alpha: f64,
    lo: f64,
    hi: f64,
    start: f64,
    prob: impl Fn(f64) -> (f64, f64),
) -> Option<f64> {
    if !(lo.is_finite() && hi.is_finite()) {
        return None;
    }
    let (mut lo, mut hi) = (lo, hi);
    let mut h = if start > lo && start <= hi { start } else { hi };
    for _ in 0..60 {
        let (q, dp) = prob(h); // q = 1 - P(h)
        if !(q.is_finite() && dp.is_finite()) {
            return None;
        }
        let f = alpha - q; // increasing in h
        if f > 0.0 {
            hi = h;
        } else {
            lo = h;
        }
        let mut next = h - f / dp;
        if !(next > lo && next < hi) || dp <= 0.0 {
            next = 0.5 * (lo + hi);
        }
        if (next - h).abs() <= 1e-14 * h {
            return Some(next);
        }
        h = next;
        if hi - lo <= 1e-14 * h {
            return Some(h);
        }
    }
    None
}

/// k = 3: 1 - P(the residuals in the hexagon of inradius h whose adjacent edge normals are
/// `gaps` apart, each gap twice around), and dP/dh (module docs).
fn hexagon(h: f64, gaps: &[f64; 3]) -> (f64, f64) {
    let (nodes, weights) = gauss_legendre();
    let (mut q, mut dp) = (0.0, 0.0);
    for &gap in gaps {
        let half = 0.25 * gap; // [0, gap / 2] mapped from [-1, 1]
        let (mut qg, mut dg) = (0.0, 0.0);
        for (&x, &w) in nodes.iter().zip(weights) {
            let t = half * (x + 1.0);
            let sec2 = 1.0 / (t.cos() * t.cos());
            let e = (-0.5 * h * h * sec2).exp();
            qg += w * e;
            dg += w * h * sec2 * e;
        }
        q += half * qg;
        dp += half * dg;
    }
    (2.0 / PI * q, 2.0 / PI * dp)
}

/// `count` groups sharing one share w of the units.
#[derive(Debug, Clone, Copy)]
struct Factor {
    share: f64,
    count: i32,
}

/// k >= 4: 1 - P(max |Z_i| <= h) and dP/dh by the Fourier integral (module docs).
fn fourier(h: f64, factors: &[Factor]) -> (f64, f64) {
    fourier_eps(h, factors, 1e-14)
}

/// [`fourier`] with the truncation tolerance `eps` (relative to the whole integral).
/// Integrates over t >= 0 (the integrand is even) in panels of 24 Gauss-Legendre nodes:
/// half-sigma panels over the central lobe, then panels of about two periods of the
/// product's fastest oscillation, until a bound on the rest is below eps. NaN when the
/// bound is never met.
fn fourier_eps(h: f64, factors: &[Factor], eps: f64) -> (f64, f64) {
    struct Term {
        s: f64,
        c: f64,
        e_c: f64,
        dc_dh: f64,
        two_phi_c: f64,
        count: i32,
    }
    let terms: Vec<Term> = factors
        .iter()
        .map(|f| {
            let r = (1.0 - f.share).max(0.0).sqrt();
            let c = h * r;
            let e_c = (-0.5 * c * c).exp();
            Term {
                s: f.share.sqrt(),
                c,
                e_c,
                dc_dh: r,
                two_phi_c: 2.0 * e_c / (2.0 * PI).sqrt(),
                count: f.count,
            }
        })
        .collect();
    // Near t = 0 each factor is G(0) exp(-t^2 w var / 2), var the variance of the normal
    // truncated to [-c, c]: the central lobe has sigma 1 / sqrt(sum w var).
    let mut precision = 0.0;
    let mut frequency = 0.0;
    let mut s_max = 0.0f64;
    let mut single_max = 0.0f64;
    for t in &terms {
        let g0 = erf_of(t.c);
        let var_t = if g0 > 0.0 {
            (1.0 - t.c * t.two_phi_c / g0).max(1e-3 * t.c * t.c / 3.0)
        } else {
            0.0
        };
        precision += t.count as f64 * t.s * t.s * var_t;
        frequency += t.count as f64 * t.c * t.s;
        single_max = single_max.max(t.c * t.s);
        s_max = s_max.max(t.s);
    }
    let sigma = 1.0 / precision.max(1e-12).sqrt();
    let (nodes, weights) = gauss_legendre();
    let total_scale = 2.0 / (2.0 * PI).sqrt();
    // The integral over [0, inf) is about sqrt(2 pi) / 2; stop when the rest is below eps
    // of that.
    let target = 0.5 * (2.0 * PI).sqrt();
    let tail_width = (4.0 * PI / frequency.max(1e-12)).min(2.0 / s_max);
    // A width that rounds to nothing never reaches the end of the tail.
    if !(h.is_finite() && tail_width > 1e-9 && sigma.is_finite()) {
        return (f64::NAN, f64::NAN);
    }
    let (mut sum, mut dsum) = (0.0f64, 0.0f64);
    let mut t0 = 0.0f64;
    let lobe = 8.0 * sigma;
    let lobe_width = (2.0 * sigma).min(PI / single_max.max(1e-12));
    for _ in 0..2_000_000 {
        // Over the lobe the product is smooth at the scale of sigma and of the slowest
        // factor's period (its faster cross terms carry powers of exp(-c^2/2)).
        let width = if t0 < lobe { lobe_width } else { tail_width };
        let (mut part, mut dpart) = (0.0, 0.0);
        for (&x, &wt) in nodes.iter().zip(weights) {
            let t = t0 + 0.5 * width * (x + 1.0);
            // The product and its derivative in h, accumulated factor by factor.
            let (mut p, mut dp) = (1.0f64, 0.0f64);
            for term in &terms {
                let y = t * term.s;
                let g = g_of(y, term.c, term.e_c);
                let dg = term.two_phi_c * (term.c * y).cos() * term.dc_dh;
                let gm1 = g.powi(term.count - 1);
                let gm = gm1 * g;
                dp = dp * gm + p * term.count as f64 * gm1 * dg;
                p *= gm;
            }
            part += wt * p;
            dpart += wt * dp;
        }
        sum += 0.5 * width * part;
        dsum += 0.5 * width * dpart;
        t0 += width;
        if t0 >= lobe {
            // Bound on |G(y; c)| for y >= t s: exp(-y^2/2) + exp(-c^2/2) |w|, with
            // |w(z)| <= 1 / (sqrt(pi) Im z) and ~ 1/(sqrt(pi) |z|) for large |z|.
            let mut b = 1.0f64;
            for term in &terms {
                let y = t0 * term.s;
                let wbound = (1.1 * SQRT_2 / (PI.sqrt() * y)).min(1.0);
                b *= ((-0.5 * y * y).exp() + term.e_c * wbound)
                    .min(1.0)
                    .powi(term.count);
            }
            let tail = b * t0;
            if tail < eps * target && (0.5 * width * part).abs() < eps * target {
                let p = total_scale * sum;
                return (1.0 - p, total_scale * dsum);
            }
        }
    }
    (f64::NAN, f64::NAN)
}

/// erf(c / sqrt 2) = 2 Phi(c) - 1.
fn erf_of(c: f64) -> f64 {
    1.0 - statrs::function::erf::erfc(c * FRAC_1_SQRT_2)
}

/// g(y) = int_{-c}^{c} phi(u) cos(u y) du = exp(-y^2/2) - Re[exp(-c^2/2) e^{icy} w((y+ic)/sqrt 2)].
fn g_of(y: f64, c: f64, e_c: f64) -> f64 {
    let w = faddeeva(Complex {
        re: y * FRAC_1_SQRT_2,
        im: c * FRAC_1_SQRT_2,
    });
    let (s, co) = (c * y).sin_cos();
    let re = co * w.re - s * w.im;
    (-0.5 * y * y).exp() - e_c * re
}

/// 24-point Gauss-Legendre nodes and weights on [-1, 1], by Newton's method on the
/// Legendre polynomial (Golub & Welsch give the same nodes; any standard table agrees).
fn gauss_legendre() -> (&'static [f64], &'static [f64]) {
    const N: usize = 24;
    static GL: OnceLock<([f64; N], [f64; N])> = OnceLock::new();
    let (x, w) = GL.get_or_init(|| {
        let mut x = [0.0; N];
        let mut w = [0.0; N];
        for i in 0..N {
            let mut z = (PI * (i as f64 + 0.75) / (N as f64 + 0.5)).cos();
            let mut dp = 1.0;
            for _ in 0..100 {
                let (mut p0, mut p1) = (1.0, z);
                for j in 2..=N {
                    let jf = j as f64;
                    let p2 = ((2.0 * jf - 1.0) * z * p1 - (jf - 1.0) * p0) / jf;
                    p0 = p1;
                    p1 = p2;
                }
                dp = N as f64 * (z * p1 - p0) / (z * z - 1.0);
                let dz = p1 / dp;
                z -= dz;
                if dz.abs() < 1e-16 {
                    break;
                }
            }
            x[i] = z;
            w[i] = 2.0 / ((1.0 - z * z) * dp * dp);
        }
        (x, w)
    });
    (x, w)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::testutil::assert_rel;

    #[test]
    fn k3_by_hexagon_and_by_fourier_agree() {
        // Two independent formulas for the same probability; the Fourier tail for k = 3
        // decays only like 1/y^2, so it is truncated at 1e-12 here.
        let equal = [Factor {
            share: 1.0 / 3.0,
            count: 3,
        }];
        for h in [1.8, 2.5, 3.6] {
            let (qh, dh) = hexagon(h, &[PI / 3.0; 3]);
            let (qf, df) = fourier_eps(h, &equal, 1e-12);
            assert_rel(qf, qh, 1e-10, &format!("1 - P at h = {h}"));
            assert_rel(df, dh, 1e-8, &format!("dP/dh at h = {h}"));
        }
    }

    #[test]
    fn k3_with_unequal_sizes_by_hexagon_and_by_fourier_agree() {
        // The irregular hexagon and the weighted Fourier product are independent routes to
        // the same probability (the Fourier tail for k = 3 decays like 1/t^2: truncated at
        // 1e-10 to keep the test fast).
        for sizes in [
            [8_976.0, 1_518.0, 22_595.0],
            [10.0, 15.0, 75.0],
            [5.0, 30.0, 65.0],
        ] {
            let total: f64 = sizes.iter().sum();
            let w: Vec<f64> = sizes.iter().map(|n| n / total).collect();
            let rho = |i: usize, j: usize| (w[i] * w[j] / ((1.0 - w[i]) * (1.0 - w[j]))).sqrt();
            let gaps = [rho(0, 1).acos(), rho(0, 2).acos(), rho(1, 2).acos()];
            assert_rel(
                gaps.iter().sum::<f64>(),
                PI,
                1e-14,
                "the three gaps span pi",
            );
            let factors: Vec<Factor> = w.iter().map(|&share| Factor { share, count: 1 }).collect();
            for h in [2.0, 2.9] {
                let (qh, dh) = hexagon(h, &gaps);
                let (qf, df) = fourier_eps(h, &factors, 1e-10);
                assert_rel(qf, qh, 1e-8, &format!("{sizes:?}: 1 - P at h = {h}"));
                assert_rel(df, dh, 1e-6, &format!("{sizes:?}: dP/dh at h = {h}"));
            }
        }
    }

    #[test]
    fn equal_sizes_give_the_balanced_constant_and_near_equal_ones_are_close() {
        for k in [3usize, 4, 7] {
            let c = critical(0.05, k).expect("valid");
            assert_eq!(critical_for_sizes(0.05, &vec![250; k]).expect("valid"), c);
            // One group one unit larger: the weighted route, within 1e-6 of balanced.
            let mut sizes = vec![100_000u64; k];
            sizes[0] += 1;
            let near = critical_for_sizes(0.05, &sizes).expect("valid");
            assert_eq!(near.method, AnomMethod::Exact);
            assert!(
                (near.h - c.h).abs() < 1e-6,
                "k = {k}: {} vs {}",
                near.h,
                c.h
            );
        }
    }

    #[test]
    fn the_issue_size_profiles_give_the_simulated_constants() {
        // Issue 9: 16-million-draw simulations of the adjusted residuals' joint normal gave
        // 2.879 (sizes 8,976 / 1,518 / 22,595, alpha 0.01) and 2.041 (3,726 / 4,270 /
        // 16,602, alpha 0.10), against 2.913 and 2.052 for equal sizes.
        let a = critical_for_sizes(0.01, &[8_976, 1_518, 22_595]).expect("valid");
        assert!((a.h - 2.879).abs() < 2e-3, "{}", a.h);
        let b = critical_for_sizes(0.10, &[3_726, 4_270, 16_602]).expect("valid");
        assert!((b.h - 2.041).abs() < 2e-3, "{}", b.h);
        // Order does not matter.
        let c = critical_for_sizes(0.01, &[22_595, 8_976, 1_518]).expect("valid");
        assert_eq!(a, c);
    }

    #[test]
    fn many_unequal_groups_stay_between_the_bounds() {
        let sizes: Vec<u64> = (0..60u64).map(|i| 500 + 37 * i * i).collect();
        let got = critical_for_sizes(0.05, &sizes).expect("valid");
        assert_eq!(got.method, AnomMethod::Exact);
        let balanced = critical(0.05, 60).expect("valid").h;
        assert!(got.h < balanced && got.h > 1.96, "{} vs {balanced}", got.h);
        // Two groups: the normal quantile whatever the sizes.
        let two = critical_for_sizes(0.05, &[3, 3_000]).expect("valid");
        assert_rel(two.h, 1.959_963_984_540_054, 1e-12, "k = 2");
    }

    #[test]
    fn h_lies_between_the_normal_quantile_and_sidak_and_approaches_sidak() {
        let mut last_gap = f64::INFINITY;
        for k in [3usize, 4, 5, 10, 20, 50, 100, 1000] {
            let a = critical(0.05, k).expect("valid");
            assert_eq!(a.method, AnomMethod::Exact, "k = {k}");
            let s = sidak(0.05, k);
            assert!(
                a.h > 1.959_963_984_540_054 && a.h < s,
                "k = {k}: {} vs {s}",
                a.h
            );
            // Relative gap to the Sidak bound shrinks as k grows.
            let gap = (s - a.h) / s;
            assert!(gap < last_gap, "k = {k}: gap {gap} vs {last_gap}");
            last_gap = gap;
        }
    }

    #[test]
    fn h_matches_mpmath() {
        // h(alpha, k) from mpmath 1.3.0 at mp.dps = 30 (tools/reference/unit_values.py):
        // k = 3 by the hexagon integral, k = 5 by the Fourier identity with g from mpmath's
        // complex erf (independent of the Weideman w here); findroot to 1e-24.
        for &(alpha, k, h) in MPMATH_H {
            let got = critical(alpha, k).expect("valid");
            assert_rel(got.h, h, 1e-11, &format!("alpha {alpha} k {k}"));
        }
    }

    const MPMATH_H: &[(f64, usize, f64)] = &[
        (0.05, 3, 2.343_700_586_378_408_6),
        (0.01, 3, 2.913_494_337_832_624),
        (0.05, 5, 2.554_780_151_359_460_4),
    ];

    #[test]
    fn tiny_alphas_use_the_sidak_bound_from_four_groups_and_stay_finite() {
        // Found by schemathesis: alpha = 5e-324 gave h = inf and a Fourier integral that
        // never ended; 1e-15 gave h below the balanced constant, marked exact.
        let sizes = [1_000, 8_919, 32_676, 72_271, 128_704, 200_975];
        for alpha in [1e-9, 1e-15, 1e-30, 1e-100, MIN_ALPHA] {
            for k in [4, 6, 40] {
                let c = critical(alpha, k).expect("computable");
                assert_eq!(c.method, AnomMethod::SidakBound, "alpha {alpha} k {k}");
                assert_eq!(c.h, sidak(alpha, k));
            }
            let c = critical_for_sizes(alpha, &sizes).expect("computable");
            assert_eq!(c.method, AnomMethod::SidakBound);
            assert!(c.h.is_finite() && c.h > 6.0);
            // The hexagon computes 1 - P directly: exact at any alpha, below Sidak.
            let three = critical_for_sizes(alpha, &sizes[..3]).expect("computable");
            assert_eq!(three.method, AnomMethod::Exact);
            assert!(three.h < sidak(alpha, 3) + 1e-12, "alpha {alpha}");
        }
        // Across the switch the bound is within 1e-6 of the exact value just above it.
        let above = critical(1.000_001e-8, 6).expect("computable");
        let below = critical(0.999_999e-8, 6).expect("computable");
        assert_eq!(above.method, AnomMethod::Exact);
        assert!((above.h - below.h).abs() < 1e-6, "{above:?} {below:?}");
        assert!(critical(5e-324, 6).is_err());
        assert!(critical_for_sizes(1e-301, &sizes).is_err());
    }

    #[test]
    fn bad_arguments_are_errors() {
        assert!(critical(0.05, 1).is_err());
        assert!(critical(0.0, 5).is_err());
        assert!(critical(1.5, 5).is_err());
        assert!(critical_for_sizes(0.05, &[5]).is_err());
        assert!(critical_for_sizes(0.05, &[5, 0, 7]).is_err());
        assert!(critical_for_sizes(1.0, &[5, 6, 7]).is_err());
    }
}
