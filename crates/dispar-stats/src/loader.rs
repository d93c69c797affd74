//! Loader's saddle-point building blocks: the Stirling remainder and the deviance term.
//!
//! Loader (2000), "Fast and accurate computation of binomial probabilities" (technical
//! report; the method behind R's dbinom/dpois): ln P of binomial and Poisson terms without
//! the cancellation of ln-factorial differences, accurate to ~1e-15 absolute for any n.

use statrs::function::factorial::ln_factorial;
use statrs::function::gamma::ln_gamma;

/// ln of the binomial probability C(n, x) p^x q^(n-x), q = 1 - p given separately, by
/// Loader's saddle-point expansion (Loader 2000; the form R's dbinom uses).
pub(crate) fn ln_dbinom(x: u64, n: u64, p: f64, q: f64) -> f64 {
    if n == 0 {
        return if x == 0 { 0.0 } else { f64::NEG_INFINITY };
    }
    let nf = n as f64;
    if x == 0 {
        return if p < 0.1 {
            -bd0(nf, nf * q) - nf * p
        } else {
            nf * q.ln()
        };
    }
    if x == n {
        return if q < 0.1 {
            -bd0(nf, nf * p) - nf * q
        } else {
            nf * p.ln()
        };
    }
    let xf = x as f64;
    let yf = (n - x) as f64;
    let lc = stirlerr(n) - stirlerr(x) - stirlerr(n - x) - bd0(xf, nf * p) - bd0(yf, nf * q);
    let lf = (2.0 * std::f64::consts::PI).ln() + xf.ln() + (-xf / nf).ln_1p();
    lc - 0.5 * lf
}

/// The error of Stirling's formula, ln(n!) - ((n + 1/2) ln n - n + ln sqrt(2 pi)).
fn stirlerr(n: u64) -> f64 {
    if n <= 15 {
        let nf = n as f64;
        return ln_factorial(n) - ((nf + 0.5) * nf.ln() - nf + LN_SQRT_2PI);
    }
    stirling_series(n as f64)
}

/// [`stirlerr`] for a real argument n > 0.
pub(crate) fn stirlerr_real(n: f64) -> f64 {
    if n <= 15.0 {
        // Half-integers (a = df/2 of the chi-square) come from a table made once.
        let twice = 2.0 * n;
        if twice.fract() == 0.0 && twice >= 1.0 {
            return half_integer_table()[twice as usize - 1];
        }
        return stirlerr_direct(n);
    }
    stirling_series(n)
}

/// ln Gamma(n + 1) - ((n + 1/2) ln n - n + ln sqrt(2 pi)), for small n.
fn stirlerr_direct(n: f64) -> f64 {
    let twice = 2.0 * n;
    let ln_fact = if n.fract() == 0.0 {
        ln_factorial(n as u64)
    } else if twice.fract() == 0.0 {
        // Gamma(k + 3/2) = (2k+2)! sqrt(pi) / (4^(k+1) (k+1)!), exact factorials for small k.
        let k = (n - 0.5) as u64;
        ln_factorial(2 * k + 2) + 0.5 * std::f64::consts::PI.ln()
            - (k + 1) as f64 * 4f64.ln()
            - ln_factorial(k + 1)
    } else {
        ln_gamma(n + 1.0)
    };
    ln_fact - ((n + 0.5) * n.ln() - n + LN_SQRT_2PI)
}

/// stirlerr(m / 2) for m = 1..=30.
fn half_integer_table() -> &'static [f64; 30] {
    static TABLE: std::sync::OnceLock<[f64; 30]> = std::sync::OnceLock::new();
    TABLE.get_or_init(|| {
        let mut t = [0.0; 30];
        for (i, v) in t.iter_mut().enumerate() {
            *v = stirlerr_direct((i + 1) as f64 / 2.0);
        }
        t
    })
}

/// ln sqrt(2 pi).
const LN_SQRT_2PI: f64 = 0.918_938_533_204_672_8;

/// The Stirling series for stirlerr(n), n > 15.
fn stirling_series(nf: f64) -> f64 {
    // Stirling's series, coefficients B_2k / (2k (2k - 1)).
    const S0: f64 = 1.0 / 12.0;
    const S1: f64 = 1.0 / 360.0;
    const S2: f64 = 1.0 / 1260.0;
    const S3: f64 = 1.0 / 1680.0;
    const S4: f64 = 1.0 / 1188.0;
    let nn = nf * nf;
    if nf > 500.0 {
        (S0 - S1 / nn) / nf
    } else if nf > 80.0 {
        (S0 - (S1 - S2 / nn) / nn) / nf
    } else if nf > 35.0 {
        (S0 - (S1 - (S2 - S3 / nn) / nn) / nn) / nf
    } else {
        (S0 - (S1 - (S2 - (S3 - S4 / nn) / nn) / nn) / nn) / nf
    }
}

/// The deviance term x ln(x / m) + m - x, computed without cancellation when x is near m.
pub(crate) fn bd0(x: f64, m: f64) -> f64 {
    if (x - m).abs() < 0.1 * (x + m) {
        let mut v = (x - m) / (x + m);
        let mut s = (x - m) * v;
        let mut ej = 2.0 * x * v;
        v *= v;
        for j in 1..1000 {
            ej *= v;
            let s1 = s + ej / (2 * j + 1) as f64;
            if s1 == s {
                return s1;
            }
            s = s1;
        }
        s
    } else {
        x * (x / m).ln() + m - x
    }
}

/// ln of the Poisson-type term y^a e^(-y) / Gamma(a + 1) for real a > 0, y > 0, by
/// Loader's form -bd0(a, y) - ln sqrt(2 pi a) - stirlerr(a).
pub(crate) fn ln_dpois(a: f64, y: f64) -> f64 {
    -bd0(a, y) - 0.5 * (2.0 * std::f64::consts::PI * a).ln() - stirlerr_real(a)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn stirlerr_matches_its_definition() {
        // The direct difference is only exact enough for small n (ln Gamma(n + 1) grows).
        for n in [1u64, 5, 15, 16, 25, 40] {
            let nf = n as f64;
            let direct = ln_gamma(nf + 1.0) - ((nf + 0.5) * nf.ln() - nf + LN_SQRT_2PI);
            assert!((stirlerr(n) - direct).abs() < 1e-13, "n = {n}");
            assert!((stirlerr_real(nf) - direct).abs() < 1e-13, "n = {n}");
        }
    }

    #[test]
    fn half_integer_stirlerr_rebuilds_ln_gamma() {
        // ln Gamma(n + 1), mpmath 1.3.0 loggamma at mp.dps = 30 (statrs' ln_gamma is off by
        // up to 4e-14 here, which is why half-integers use exact factorials).
        for (n, lg) in [
            (0.5, -0.120_782_237_635_245_22),
            (5.5, 5.662_562_059_857_142),
            (10.5, 16.292_000_476_567_241),
            (14.5, 26.536_914_491_115_614),
        ] {
            let big = (n + 0.5) * f64::ln(n);
            let rebuilt = stirlerr_real(n) + big - n + LN_SQRT_2PI;
            // The rebuild itself rounds at the scale of its largest term.
            let tol = 4.0 * f64::EPSILON * (1.0 + big + n);
            assert!((rebuilt - lg).abs() < tol, "n = {n}: {rebuilt} vs {lg}");
        }
    }

    #[test]
    fn dpois_matches_the_direct_formula_where_that_is_accurate() {
        for (a, y) in [(0.5, 0.3), (2.0, 3.0), (10.5, 9.0), (50.0, 70.0)] {
            let direct = a * f64::ln(y) - y - ln_gamma(a + 1.0);
            assert!((ln_dpois(a, y) - direct).abs() < 1e-13, "a {a} y {y}");
        }
    }
}
