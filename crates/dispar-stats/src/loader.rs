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
        return ln_gamma(n + 1.0) - ((n + 0.5) * n.ln() - n + LN_SQRT_2PI);
    }
    stirling_series(n)
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
    fn dpois_matches_the_direct_formula_where_that_is_accurate() {
        for (a, y) in [(0.5, 0.3), (2.0, 3.0), (10.5, 9.0), (50.0, 70.0)] {
            let direct = a * f64::ln(y) - y - ln_gamma(a + 1.0);
            assert!((ln_dpois(a, y) - direct).abs() < 1e-13, "a {a} y {y}");
        }
    }
}
