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

use std::collections::HashMap;
use std::f64::consts::{FRAC_1_SQRT_2, PI, SQRT_2};
use std::sync::{Mutex, OnceLock};

use crate::error::{StatsError, check_open_unit};
use crate::faddeeva::{Complex, faddeeva};
use crate::interval::normal_upper_quantile;

/// How h was obtained.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum AnomMethod {
    /// Computed from the exact distribution (numerical integration to ~1e-13).
    Exact,
    /// The Sidak bound (conservative: slightly larger than the exact h); used only when
    /// the exact computation did not converge.
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
    check_open_unit("alpha", alpha)?;
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
        solve(alpha, lower, sidak_h, hexagon)
    } else {
        solve(alpha, lower, sidak_h, |h| fourier(h, k))
    };
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

/// Solves P(h) = 1 - alpha on [lo, hi] by Newton steps safeguarded with bisection;
/// `prob` returns (P(h), dP/dh). Works with 1 - P to keep digits when alpha is small.
fn solve(alpha: f64, lo: f64, hi: f64, prob: impl Fn(f64) -> (f64, f64)) -> Option<f64> {
    let (mut lo, mut hi) = (lo, hi);
    let mut h = hi;
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

/// k = 3: 1 - P(standard bivariate normal in the regular hexagon of inradius h), and dP/dh.
fn hexagon(h: f64) -> (f64, f64) {
    let (nodes, weights) = gauss_legendre();
    let half = PI / 12.0; // the interval [0, pi/6] mapped from [-1, 1]
    let (mut q, mut dp) = (0.0, 0.0);
    for (&x, &w) in nodes.iter().zip(weights) {
        let t = half * (x + 1.0);
        let sec2 = 1.0 / (t.cos() * t.cos());
        let e = (-0.5 * h * h * sec2).exp();
        q += w * e;
        dp += w * h * sec2 * e;
    }
    let scale = 6.0 / PI * half;
    (scale * q, scale * dp)
}

/// k >= 4: 1 - P(max |Z_i| <= h) and dP/dh by the Fourier integral (module docs).
fn fourier(h: f64, k: usize) -> (f64, f64) {
    fourier_eps(h, k, 1e-14)
}

/// [`fourier`] with the truncation tolerance `eps` (relative to the whole integral).
fn fourier_eps(h: f64, k: usize, eps: f64) -> (f64, f64) {
    let kf = k as f64;
    let c = h * ((kf - 1.0) / kf).sqrt();
    let phi_c = (-0.5 * c * c).exp() / (2.0 * PI).sqrt();
    let g0 = erf_of(c);
    // Variance of the normal truncated to [-c, c]; sets the width of the central lobe.
    let var_t = (1.0 - 2.0 * c * phi_c / g0).max(1e-3);
    let sigma = 1.0 / (kf * var_t).sqrt();
    let e_c = (-0.5 * c * c).exp();
    let (nodes, weights) = gauss_legendre();
    let total_scale = (kf / (2.0 * PI)).sqrt() * 2.0;
    // Integral of g^k over [0, inf) is ~ sqrt(2 pi / k) / 2; stop when the rest is below
    // eps of that.
    let target = 0.5 * (2.0 * PI / kf).sqrt();
    let (mut sum, mut dsum) = (0.0f64, 0.0f64);
    let mut y = 0.0f64;
    let lobe = 8.0 * sigma;
    for _ in 0..2_000_000 {
        let width = if y < lobe {
            0.5 * sigma
        } else {
            (4.0 * PI / (kf * c)).min(2.0)
        };
        let (mut part, mut dpart) = (0.0, 0.0);
        for (&x, &w) in nodes.iter().zip(weights) {
            let t = y + 0.5 * width * (x + 1.0);
            let g = g_of(t, c, e_c);
            let gk1 = g.powi(k as i32 - 1);
            part += w * gk1 * g;
            dpart += w * kf * gk1 * 2.0 * phi_c * (c * t).cos();
        }
        sum += 0.5 * width * part;
        dsum += 0.5 * width * dpart;
        y += width;
        if y >= lobe {
            // Bound on |g(t)| for t >= y: exp(-t^2/2) + exp(-c^2/2) |w|, with
            // |w(z)| <= 1 / (sqrt(pi) Im z) and ~ 1/(sqrt(pi) |z|) for large |z|.
            let wbound = (1.1 * SQRT_2 / (PI.sqrt() * y)).min(1.0);
            let b = (-0.5 * y * y).exp() + e_c * wbound;
            let tail = b.powf(kf) * y;
            if tail < eps * target && (0.5 * width * part).abs() < eps * target {
                break;
            }
        }
    }
    let p = total_scale * sum;
    // dP/dh = dP/dc * dc/dh.
    let dp = total_scale * dsum * ((kf - 1.0) / kf).sqrt();
    (1.0 - p, dp)
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
        for h in [1.8, 2.5, 3.6] {
            let (qh, dh) = hexagon(h);
            let (qf, df) = fourier_eps(h, 3, 1e-12);
            assert_rel(qf, qh, 1e-10, &format!("1 - P at h = {h}"));
            assert_rel(df, dh, 1e-8, &format!("dP/dh at h = {h}"));
        }
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
    fn bad_arguments_are_errors() {
        assert!(critical(0.05, 1).is_err());
        assert!(critical(0.0, 5).is_err());
        assert!(critical(1.5, 5).is_err());
    }
}
