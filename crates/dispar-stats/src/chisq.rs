//! Chi-square statistics on a table (Pearson X^2, likelihood-ratio G^2, Yates) and the
//! chi-square distribution's upper tail and critical values.
//!
//! Upper tails are computed directly as ln Q(df/2, x/2), the regularized upper incomplete
//! gamma function, never as 1 - cdf: Loader's saddle-point prefactor times the continued
//! fraction (Numerical Recipes 3rd ed., section 6.2) in log space, so `log10_p` stays
//! finite where p underflows. Measured against mpmath this is good to ~1e-14 relative at
//! every df; statrs 0.19.1's `ChiSquared::sf` is good to ~1e-13 at small df but drifts to
//! ~5e-12 at df ~ 5000 and is noisy at ~1e-11 at df 10,000, and its `erfc` (the df = 1
//! shortcut) only to ~4e-11 — so statrs supplies only the starting point of critical
//! values (`inverse_cdf`) and ln Gamma.

use statrs::distribution::{ChiSquared, ContinuousCDF};
use statrs::function::gamma::ln_gamma;

use crate::error::{StatsError, check_open_unit};
use crate::faddeeva::{Complex, faddeeva};
use crate::loader::ln_dpois;
use crate::table::Table;

/// An upper-tail probability and its base-10 logarithm.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Tail {
    /// P(X >= x); may underflow to 0 in the far tail.
    pub p: f64,
    /// log10 of the tail probability; finite even where `p` underflows.
    pub log10_p: f64,
}

/// Upper tail P(X^2_df >= x) of the chi-square distribution with `df` degrees of freedom.
///
/// `x <= 0` gives p = 1. Errors when `df` is 0 or `x` is not finite.
///
/// ```
/// use dispar_stats::chisq::upper_tail;
/// // 3.841459 is the 0.05 critical value on 1 df (NIST/SEMATECH e-Handbook 1.3.6.7.4).
/// let t = upper_tail(3.841459, 1)?;
/// assert!((t.p - 0.05).abs() < 1e-7);
/// // Far past f64's range p underflows, log10_p does not.
/// let far = upper_tail(20000.0, 10)?;
/// assert_eq!(far.p, 0.0);
/// assert!((far.log10_p - (-4328.3249)).abs() < 1e-4); // mpmath 1.3.0
/// # Ok::<(), dispar_stats::StatsError>(())
/// ```
pub fn upper_tail(x: f64, df: u64) -> Result<Tail, StatsError> {
    check(x, "chi-square statistic", df)?;
    Ok(upper_tail_unchecked(x, df))
}

/// Refuses `df` 0 and a non-finite `x` (named `x_name` in the error).
fn check(x: f64, x_name: &'static str, df: u64) -> Result<(), StatsError> {
    if df == 0 {
        return Err(StatsError::InvalidParameter {
            name: "df",
            value: 0.0,
            requirement: "at least 1",
        });
    }
    if !x.is_finite() {
        return Err(StatsError::InvalidParameter {
            name: x_name,
            value: x,
            requirement: "finite",
        });
    }
    Ok(())
}

/// Density of the chi-square distribution with `df` degrees of freedom at `x` (0 for
/// `x < 0`; at `x = 0` infinite for 1 df, 1/2 for 2 df, 0 beyond). For df >= 3 it is
/// (1/2) times Loader's Poisson-type term with a = df/2 - 1 and y = x/2, which avoids
/// the cancellation of the direct formula at large df. Errors when `df` is 0 or `x` is
/// not finite.
///
/// ```
/// use dispar_stats::chisq::density;
/// // scipy 1.17.1: chi2.pdf(9.487729, 4) = 0.020647529951540528
/// assert!((density(9.487729, 4)? - 0.020647529951540528).abs() < 1e-15);
/// # Ok::<(), dispar_stats::StatsError>(())
/// ```
pub fn density(x: f64, df: u64) -> Result<f64, StatsError> {
    check(x, "x", df)?;
    Ok(match df {
        _ if x < 0.0 => 0.0,
        1 if x == 0.0 => f64::INFINITY,
        // (2 pi x)^(-1/2) e^(-x/2)
        1 => (-0.5 * x).exp() / (2.0 * std::f64::consts::PI * x).sqrt(),
        2 => 0.5 * (-0.5 * x).exp(),
        _ if x == 0.0 => 0.0,
        _ => 0.5 * ln_dpois(0.5 * df as f64 - 1.0, 0.5 * x).exp(),
    })
}

/// [`upper_tail`] for a finite `x` and `df >= 1` (callers inside the crate guarantee both).
pub(crate) fn upper_tail_unchecked(x: f64, df: u64) -> Tail {
    if x <= 0.0 {
        return Tail {
            p: 1.0,
            log10_p: 0.0,
        };
    }
    let ln_q = if df == 1 {
        ln_upper_tail_1df(0.5 * x)
    } else {
        ln_upper_gamma_regularized(0.5 * df as f64, 0.5 * x)
    };
    Tail {
        p: ln_q.exp(),
        log10_p: ln_q / std::f64::consts::LN_10,
    }
}

/// ln Q(a, y), the log of the regularized upper incomplete gamma function, for a > 0 and
/// y > 0. The factor y^a e^-y / Gamma(a + 1) comes from Loader's saddle-point form (no
/// cancellation between y, a ln y and ln Gamma(a + 1), which costs statrs ~1e-12 at
/// df ~ 5000); then for y > a + 1 the continued fraction of Q (Numerical Recipes 3rd ed.
/// eq. 6.2.7, modified Lentz) in log space, so ln Q never underflows, and otherwise the
/// series of P (eq. 6.2.5) with Q = 1 - P (P is at most ~0.92 there, so no digits are lost).
pub(crate) fn ln_upper_gamma_regularized(a: f64, y: f64) -> f64 {
    let ln_d = ln_dpois(a, y);
    if y > a + 1.0 {
        const TINY: f64 = 1e-300;
        let mut b = y + 1.0 - a;
        let mut c = 1.0 / TINY;
        let mut d = 1.0 / b;
        let mut h = d;
        for i in 1..100_000 {
            let i = i as f64;
            let an = -i * (i - a);
            b += 2.0;
            d = an * d + b;
            if d.abs() < TINY {
                d = TINY;
            }
            c = b + an / c;
            if c.abs() < TINY {
                c = TINY;
            }
            d = 1.0 / d;
            let delta = d * c;
            h *= delta;
            if (delta - 1.0).abs() < 1e-16 {
                break;
            }
        }
        // Q = e^-y y^a / Gamma(a) * h = a * D * h.
        ln_d + a.ln() + h.ln()
    } else {
        let (mut term, mut sum) = (1.0f64, 1.0f64);
        let mut n = 1.0;
        while n < 1e6 {
            term *= y / (a + n);
            sum += term;
            if term < 1e-17 * sum {
                break;
            }
            n += 1.0;
        }
        let p = (ln_d.exp() * sum).min(1.0);
        (-p).ln_1p()
    }
}

/// ln Q(1/2, y) = ln erfc(sqrt y) = -y + ln w(i sqrt y), with Weideman's w: a fixed-cost
/// rational function, several times faster than the continued fraction near y ~ 1, which
/// matters for the half-million 1-df tails of the pairwise follow-ups.
fn ln_upper_tail_1df(y: f64) -> f64 {
    let w = faddeeva(Complex {
        re: 0.0,
        im: y.sqrt(),
    });
    -y + w.re.ln()
}

/// ln of the upper tail of chi-square(df) at x, accurate in the far tail.
fn ln_upper_tail(x: f64, df: u64) -> f64 {
    upper_tail_unchecked(x, df).log10_p * std::f64::consts::LN_10
}

/// The critical value x with P(X^2_df >= x) = alpha: the inverse of the upper tail.
///
/// Starts from statrs' inverse cdf (or the Wilson–Hilferty approximation for tiny alpha)
/// and refines with Newton steps on ln P(X >= x), so that
/// `upper_tail(critical_value(a, df), df).p == a` to about 1e-13 relative.
///
/// ```
/// use dispar_stats::chisq::{critical_value, upper_tail};
/// // NIST/SEMATECH e-Handbook 1.3.6.7.4: upper 0.05 critical value on 4 df is 9.488.
/// let x = critical_value(0.05, 4)?;
/// assert!((x - 9.488).abs() < 5e-4);
/// assert!((upper_tail(x, 4)?.p - 0.05).abs() < 1e-14);
/// # Ok::<(), dispar_stats::StatsError>(())
/// ```
pub fn critical_value(alpha: f64, df: u64) -> Result<f64, StatsError> {
    check_open_unit("alpha", alpha)?;
    if df == 0 {
        return Err(StatsError::InvalidParameter {
            name: "df",
            value: 0.0,
            requirement: "at least 1",
        });
    }
    let k = df as f64;
    let dist = ChiSquared::new(k).map_err(|_| StatsError::InvalidParameter {
        name: "df",
        value: k,
        requirement: "a valid chi-square degrees of freedom",
    })?;
    let mut x = if alpha > 1e-10 {
        dist.inverse_cdf(1.0 - alpha)
    } else {
        // Wilson–Hilferty: X ~ k (1 - 2/(9k) + z sqrt(2/(9k)))^3.
        let z = crate::interval::normal_upper_quantile(alpha);
        let v = 2.0 / (9.0 * k);
        (k * (1.0 - v + z * v.sqrt()).powi(3)).max(k)
    };
    if !(x.is_finite() && x > 0.0) {
        x = k;
    }
    let target = alpha.ln();
    let ln_norm = 0.5 * k * std::f64::consts::LN_2 + ln_gamma(0.5 * k);
    // Newton stops when it no longer improves, keeping the best x seen.
    let (mut best_x, mut best_miss) = (x, f64::INFINITY);
    for _ in 0..40 {
        let ln_q = ln_upper_tail(x, df);
        let miss = ln_q - target;
        if miss.abs() >= best_miss {
            break;
        }
        best_x = x;
        best_miss = miss.abs();
        if best_miss <= 1e-15 {
            break;
        }
        // d/dx ln Q = -f(x)/Q(x), f the density.
        let ln_f = (0.5 * k - 1.0) * x.ln() - 0.5 * x - ln_norm;
        let slope = -(ln_f - ln_q).exp();
        let mut step = miss / slope;
        if !step.is_finite() {
            break;
        }
        // Keep x positive.
        while x - step <= 0.0 {
            step *= 0.5;
        }
        x -= step;
        if step.abs() <= 2.0 * f64::EPSILON * x {
            break;
        }
    }
    Ok(best_x)
}

/// Pearson's X^2 = sum (O - E)^2 / E over the cells with E > 0 (cells in all-zero rows or
/// columns have O = E = 0 and are skipped).
///
/// ```
/// use dispar_stats::{chisq::pearson, table::Table};
/// // NIST/SEMATECH e-Handbook 7.4.6: five lots of 300, 36/46/42/63/38 defective, X^2 = 12.13.
/// let t = Table::from_rates(&[(300, 36), (300, 46), (300, 42), (300, 63), (300, 38)])?;
/// assert!((pearson(&t) - 12.13).abs() < 0.005);
/// # Ok::<(), dispar_stats::StatsError>(())
/// ```
pub fn pearson(table: &Table) -> f64 {
    if table.is_2x2() {
        let c = table.counts();
        return pearson_2x2(c[0], c[1], c[2], c[3]);
    }
    let n = table.total();
    let mut x2 = 0.0;
    for (r, &rt) in table.row_totals().iter().enumerate() {
        for (&o, &ct) in table.row(r).iter().zip(table.col_totals()) {
            if rt > 0 && ct > 0 {
                let (d, e) = deviation(o, rt, ct, n);
                x2 += d * d / e;
            }
        }
    }
    x2
}

/// O - E and E for a cell with count `o`, row total `r`, column total `c`, grand total `n`
/// (n > 0). O - E = (O N - R C) / N is formed in exact integer arithmetic, so a cell whose
/// count equals its expected count gives exactly 0.
pub(crate) fn deviation(o: u64, r: u64, c: u64, n: u64) -> (f64, f64) {
    let on = o as u128 * n as u128;
    let rc = r as u128 * c as u128;
    let nf = n as f64;
    let d = if on >= rc {
        (on - rc) as f64 / nf
    } else {
        -((rc - on) as f64 / nf)
    };
    (d, rc as f64 / nf)
}

/// Likelihood-ratio G^2 = 2 sum O ln(O / E), with 0 ln 0 = 0; never negative.
pub fn likelihood_ratio(table: &Table) -> f64 {
    let mut g2 = 0.0;
    for r in 0..table.rows() {
        for c in 0..table.cols() {
            let o = table.get(r, c);
            if o > 0 {
                let o = o as f64;
                g2 += o * (o / table.expected(r, c)).ln();
            }
        }
    }
    (2.0 * g2).max(0.0)
}

/// Yates-corrected X^2 for a 2 x 2 table, `None` for any other shape.
///
/// Convention (the same as scipy's `chi2_contingency(correction=True)`): each |O - E| is
/// reduced by 0.5 but not below 0, which for a 2 x 2 gives
/// `N (max(0, |ad - bc| - N/2))^2 / (R1 R2 C1 C2)`. A table with a zero margin gives 0.
pub fn yates(table: &Table) -> Option<f64> {
    if !table.is_2x2() {
        return None;
    }
    let c = table.counts();
    Some(yates_2x2(c[0], c[1], c[2], c[3]))
}

/// |ad - bc| exactly (as f64) and the product of the margins as f64.
fn cross_and_margins(a: u64, b: u64, c: u64, d: u64) -> (f64, f64, f64) {
    let ad = a as u128 * d as u128;
    let bc = b as u128 * c as u128;
    let cross = ad.abs_diff(bc) as f64;
    let n = (a + b + c + d) as f64;
    let margins = (a + b) as f64 * (c + d) as f64 * (a + c) as f64 * (b + d) as f64;
    (cross, n, margins)
}

/// Pearson X^2 of the 2 x 2 table [[a, b], [c, d]]: N (ad - bc)^2 / (R1 R2 C1 C2); 0 when a
/// margin is 0.
pub(crate) fn pearson_2x2(a: u64, b: u64, c: u64, d: u64) -> f64 {
    let (cross, n, margins) = cross_and_margins(a, b, c, d);
    if margins == 0.0 {
        return 0.0;
    }
    // Divide before multiplying to keep N (ad-bc)^2 from overflowing for huge counts.
    (cross / margins.sqrt()) * (cross / margins.sqrt()) * n
}

/// Yates-corrected X^2 of [[a, b], [c, d]] (see [`yates`]).
pub(crate) fn yates_2x2(a: u64, b: u64, c: u64, d: u64) -> f64 {
    let (cross, n, margins) = cross_and_margins(a, b, c, d);
    if margins == 0.0 {
        return 0.0;
    }
    let corrected = (cross - 0.5 * n).max(0.0);
    (corrected / margins.sqrt()) * (corrected / margins.sqrt()) * n
}

/// Degrees of freedom (r' - 1)(c' - 1) over the rows and columns with a non-zero total.
pub fn degrees_of_freedom(table: &Table) -> u64 {
    let r = table.nonzero_rows() as u64;
    let c = table.nonzero_cols() as u64;
    r.saturating_sub(1) * c.saturating_sub(1)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::testutil::assert_rel;

    #[test]
    fn the_density_matches_scipy() {
        // scipy 1.17.1, scipy.stats.chi2.pdf(x, df).
        let cases: &[(u64, f64, f64)] = &[
            (1, 0.5, 0.43939128946772243),
            (1, 3.841459, 0.029819457736093617),
            (2, 1.0, 0.30326532985631666),
            (4, 9.487729, 0.020647529951540528),
            (5, 2.0, 0.1383691658068649),
            (10, 18.307, 0.015480784533096712),
            (30, 25.0, 0.04859827011828983),
            (100, 124.342, 0.00631171956071736),
            (599, 650.0, 0.0037999860669678366),
            (4, 200.0, 1.8600379880104054e-42),
        ];
        for &(df, x, want) in cases {
            let got = density(x, df).expect("valid");
            // Loader's terms are good to a few ulps; 1e-13 leaves room for the exp.
            assert_rel(got, want, 1e-13, &format!("chi2.pdf({x}, {df})"));
        }
        assert_eq!(density(-1.0, 3).expect("valid"), 0.0);
        assert_eq!(density(0.0, 2).expect("valid"), 0.5);
        assert_eq!(density(0.0, 3).expect("valid"), 0.0);
        assert!(density(1.0, 0).is_err() && density(f64::NAN, 3).is_err());
    }

    #[test]
    fn critical_values_match_the_nist_handbook_table() {
        // NIST/SEMATECH e-Handbook of Statistical Methods, section 1.3.6.7.4, "Critical
        // Values of the Chi-Square Distribution", upper-tail columns (3 decimals printed).
        let cases: &[(u64, f64, f64)] = &[
            (1, 0.10, 2.706),
            (1, 0.05, 3.841),
            (1, 0.01, 6.635),
            (1, 0.001, 10.828),
            (2, 0.05, 5.991),
            (4, 0.05, 9.488),
            (5, 0.01, 15.086),
            (10, 0.05, 18.307),
            (20, 0.05, 31.410),
            (30, 0.01, 50.892),
            (100, 0.05, 124.342),
        ];
        for &(df, alpha, table) in cases {
            let x = critical_value(alpha, df).expect("valid");
            assert!(
                (x - table).abs() <= 5.1e-4,
                "df {df} alpha {alpha}: {x} vs handbook {table}"
            );
        }
    }

    #[test]
    fn upper_tail_of_the_critical_value_returns_alpha() {
        // Where ln Q is steep (large df, far tail), one ulp of x moves Q by ~1e-13, so the
        // round trip is held to 1e-12.
        for df in [1u64, 2, 3, 4, 7, 10, 30, 100, 999, 10_000] {
            let tol = 1e-12;
            for alpha in [0.5, 0.1, 0.05, 0.01, 1e-3, 1e-6, 1e-12, 1e-30, 1e-100] {
                let x = critical_value(alpha, df).expect("valid");
                let p = upper_tail(x, df).expect("valid").p;
                assert_rel(p, alpha, tol, &format!("df {df} alpha {alpha}"));
            }
        }
    }

    #[test]
    fn log10_p_stays_finite_where_p_underflows() {
        // Reference: mpmath 1.3.0, log10(gammainc(df/2, x/2, inf, regularized=True)),
        // computed with mp.dps = 50 (the expressions are beside the constants).
        let a = upper_tail(1500.0, 1).expect("valid");
        assert!(a.log10_p.is_finite());
        assert_rel(a.log10_p, MP_1500_1, 1e-13, "1500, 1");
        let b = upper_tail(20000.0, 10).expect("valid");
        assert_eq!(b.p, 0.0);
        assert_rel(b.log10_p, MP_20000_10, 1e-13, "20000, 10");
    }

    // mpmath 1.3.0, mp.dps = 50:
    //   mp.log10(mp.gammainc(mpf(1)/2, 750, mp.inf, regularized=True))
    //   mp.log10(mp.gammainc(5, 10000, mp.inf, regularized=True))
    const MP_1500_1: f64 = -327.407_256_044_166_5;
    const MP_20000_10: f64 = -4_328.324_856_539_066;

    #[test]
    fn one_df_tails_match_mpmath_erfc() {
        // mpmath 1.3.0, mp.dps = 40: erfc(sqrt(y)) and its natural log, y = X^2 / 2.
        let cases: &[(f64, f64, f64)] = &[
            (1e-6, 0.998_871_621_209_030_8, -0.001_129_015_889_621_354_8),
            (0.01, 0.887_537_083_981_715, -0.119_304_973_737_395_6),
            (0.5, 0.317_310_507_862_914_1, -1.147_874_464_449_318_2),
            (1.0, 0.157_299_207_050_285_13, -1.849_605_509_933_248_2),
            (1.5, 0.083_264_516_663_550_4, -2.485_732_790_986_08),
            (2.0, 0.045_500_263_896_358_41, -3.090_037_153_122_086_6),
            (10.0, 7.744_216_431_044_084e-6, -11.768_564_260_156_875),
            (50.0, 1.523_970_604_832_105e-23, -52.538_137_969_952_53),
            (200.0, 5.507_248_237_212_467e-89, -203.224_008_190_537_3),
            (700.0, 2.101_014_516_264_217_5e-306, -703.848_618_125_122_3),
            (1500.0, 0.0, -1_504.229_308_192_481),
        ];
        for &(y, q, ln_q) in cases {
            let t = upper_tail(2.0 * y, 1).expect("valid");
            if q > 0.0 {
                assert_rel(t.p, q, 1e-13, &format!("p at y = {y}"));
            }
            // ln p near 0 is ill-conditioned relative to itself: allow 1e-15 absolute too.
            let got = t.log10_p * std::f64::consts::LN_10;
            assert!(
                (got - ln_q).abs() <= 1e-13 * ln_q.abs() + 1e-15,
                "ln p at y = {y}: {got} vs {ln_q}"
            );
        }
    }

    #[test]
    fn tails_agree_with_statrs_where_statrs_is_accurate() {
        // statrs 0.19.1 ChiSquared::sf, measured at ~1e-13 relative for small df.
        use statrs::distribution::ContinuousCDF;
        for df in [1u64, 2, 3, 5, 10, 30, 100] {
            let d = ChiSquared::new(df as f64).expect("valid");
            for x in [0.01, 0.5, 1.0, 2.5, 7.0, 15.0, 40.0, 120.0, 400.0] {
                let ours = upper_tail(x, df).expect("valid").p;
                assert_rel(ours, d.sf(x), 2e-12, &format!("x {x} df {df}"));
            }
        }
    }

    #[test]
    fn pearson_g2_and_yates_on_a_2x2() {
        // Hand computation: [[10, 20], [30, 40]], N = 100, ad - bc = -200,
        // X^2 = 100 * 200^2 / (30 * 70 * 40 * 60) = 0.793650793650...,
        // Yates: 100 * (200 - 50)^2 / 5_040_000 = 0.446428571428...
        let t = Table::from_rows(&[vec![10, 20], vec![30, 40]]).expect("valid");
        assert_rel(pearson(&t), 4_000_000.0 / 5_040_000.0, 1e-14, "X^2");
        assert_rel(
            yates(&t).expect("2x2"),
            2_250_000.0 / 5_040_000.0,
            1e-14,
            "Yates",
        );
        // G^2 by the definition, term by term (E = 12, 18, 28, 42).
        let g2 = 2.0
            * (10.0 * (10.0f64 / 12.0).ln()
                + 20.0 * (20.0f64 / 18.0).ln()
                + 30.0 * (30.0f64 / 28.0).ln()
                + 40.0 * (40.0f64 / 42.0).ln());
        assert_rel(likelihood_ratio(&t), g2, 1e-13, "G^2");
        assert_eq!(degrees_of_freedom(&t), 1);
    }

    #[test]
    fn yates_correction_never_exceeds_the_deviation() {
        // |ad - bc| = 1 < N/2: the corrected statistic is 0, not negative or inflated.
        let t = Table::from_rows(&[vec![5, 5], vec![5, 6]]).expect("valid");
        assert_eq!(yates(&t), Some(0.0));
        let t3 = Table::from_rows(&[vec![1, 2, 3], vec![4, 5, 6]]).expect("valid");
        assert_eq!(yates(&t3), None);
    }

    #[test]
    fn zero_rows_contribute_nothing() {
        let t = Table::from_rows(&[vec![10, 20], vec![0, 0], vec![30, 40]]).expect("valid");
        let r = t.reduce();
        assert_rel(pearson(&t), pearson(&r.table), 1e-15, "X^2");
        assert_rel(
            likelihood_ratio(&t),
            likelihood_ratio(&r.table),
            1e-15,
            "G^2",
        );
        assert_eq!(degrees_of_freedom(&t), 1);
    }

    #[test]
    fn bad_arguments_are_errors() {
        assert!(upper_tail(1.0, 0).is_err());
        assert!(upper_tail(f64::NAN, 1).is_err());
        assert!(critical_value(0.0, 1).is_err());
        assert!(critical_value(1.0, 1).is_err());
        assert!(critical_value(0.05, 0).is_err());
        assert_eq!(upper_tail(-1.0, 3).expect("valid").p, 1.0);
    }
}
