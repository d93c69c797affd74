//! Every tolerance the reference and published-value tests use, in one place, with the
//! reason for its size. Where a value is computed from a statistic that itself carries
//! rounding error (a p-value from X^2 of a big table), the tolerance is propagated
//! through the derivative recorded in the fixture rather than widened by hand.

/// f64 machine epsilon (2^-52).
pub const EPS: f64 = f64::EPSILON;

/// Chi-square upper tail p at an exactly given x against mpmath (50 digits): relative.
/// Issue #2 asks for 1e-12 where the reference is exact.
pub const TAIL_P_REL: f64 = 1e-12;

/// Below f64's normal range p is subnormal and holds fewer digits; this absolute slack
/// (about 2,000 units of the smallest subnormal) only matters for p < ~1e-308.
pub const SUBNORMAL_ABS: f64 = 1e-320;

/// log10 p against mpmath: absolute part (1e-12 relative in p is 4.3e-13 in log10 p).
pub const LOG10_P_ABS: f64 = 1e-12;

/// log10 p against mpmath: relative part, for the far tail where |log10 p| is in the
/// thousands (p underflows, so log10 p is the only carrier of the answer).
pub const LOG10_P_REL: f64 = 1e-12;

/// Chi-square critical value against an mpmath root: relative. The inverse of a tail
/// that is good to 1e-12 (the critical value is refined by Newton's method on ln Q).
pub const CRITICAL_REL: f64 = 1e-12;

/// Pearson X^2 of a table against exact rational arithmetic: relative part (summation
/// over at most a few hundred cells costs < 1e-13).
pub const STATISTIC_REL: f64 = 1e-12;

/// Pearson X^2: absolute part per unit of sum |O - E|. E = R C / N carries ~3 roundings,
/// so each (O - E)^2 / E is off by up to ~6 u |O - E| (u = EPS / 2); 8 EPS covers it.
/// This is the irreducible conditioning of X^2 for huge, nearly independent tables.
pub const X2_PER_ABS_DEV: f64 = 8.0 * EPS;

/// G^2 = 2 sum O ln(O/E): O / E is off by ~4 u, so each term by ~4 u O; with the factor 2
/// that is 4 EPS N; 8 EPS N covers it, plus a summation term per cell and |O - E|.
pub const G2_PER_N: f64 = 8.0 * EPS;

/// Expected counts R C / N against exact rationals: relative (three roundings).
pub const EXPECTED_REL: f64 = 1e-14;

/// Residuals and contributions: relative part (the absolute part comes from the
/// rounding of E, see `residual_tolerance`).
pub const RESIDUAL_REL: f64 = 1e-12;

/// Against scipy (float64 library code, itself rounding like we do): relative.
pub const SCIPY_REL: f64 = 1e-9;

/// Fisher's exact test: relative floor.
pub const FISHER_REL_FLOOR: f64 = 1e-12;

/// Fisher's exact test in log space: ln P(table) is a difference of ln-factorials of size
/// ~ln N!, each rounded to ~EPS relative, so P carries ~EPS ln N! relative error. 4 EPS
/// ln N! (2e-9 at N = 200,000; 1e-12 at N = 8) is what any log-space method has to meet.
pub const FISHER_PER_LN_FACTORIAL: f64 = 4.0 * EPS;

/// Wilson and Newcombe interval ends against the mpmath closed form: absolute.
pub const INTERVAL_ABS: f64 = 1e-12;

/// Interval ends against statsmodels (float64): absolute.
pub const INTERVAL_ABS_STATSMODELS: f64 = 1e-11;

/// Multiple-testing adjustments against statsmodels: relative. The operations are one
/// multiplication or division per value and a running max/min, so results agree to a few
/// units of EPS (statsmodels divides by i/m where one may multiply by m/i).
pub const ADJUST_REL: f64 = 1e-13;

/// ANOM critical value h against the piecewise-Chebyshev convolution reference (accurate
/// to ~1e-12 in h; two independent methods agree to ~1e-14 in probability): absolute.
pub const ANOM_H_ABS: f64 = 1e-10;

/// ANOM h against the root of scipy's multivariate_normal.cdf: its covariance is singular
/// (rho = -1/(k-1)), and its quasi-Monte Carlo error (~1e-4 in probability at the
/// generator's maxpts) is recorded per case as `h_accuracy`; allow this many of those.
pub const ANOM_SCIPY_ACCURACIES: f64 = 4.0;

/// ANOM h for unequal sizes against a simulation of the residuals' joint normal
/// (tools/reference/anom_sizes.py): the simulated quantile is off by its standard error
/// `se_h` (recorded per case, 3e-4 to 1.5e-3); four of them make a false alarm over the
/// 13 cases unlikely (two-sided 6e-5 each) while a real error of a few 1e-3 still fails.
pub const ANOM_SIM_SES: f64 = 4.0;

/// ANOM h for unequal sizes against the same integral solved with scipy's Faddeeva
/// function and adaptive quadrature (tools/reference/anom_sizes.py `h_formula`): QUADPACK
/// at 1e-13 and brentq at xtol 1e-13 leave ~1e-11 in h; the equal-size case agrees with
/// the balanced constant to 1e-13. Absolute.
pub const ANOM_FORMULA_ABS: f64 = 1e-9;

/// Baseline comparison against the Python reference (tools/reference/baseline_fixtures.py):
/// the same arithmetic in float64 (sums of integers exact, a handful of divisions, square
/// roots and logs; X² adds up at most a few dozen terms), and the t limit from statrs'
/// incomplete beta polished by Newton against scipy's t.isf (within 1e-12, tested in src/baseline.rs): relative.
pub const BASELINE_REL: f64 = 1e-11;

/// z near 0 (a period at its baseline rate) has no relative accuracy to speak of: an
/// absolute floor of a few hundred EPS.
pub const BASELINE_Z_ABS: f64 = 1e-12;

/// z on the exact path: Phi^-1 of Fisher's p, which dispar-stats computes in log space
/// (FISHER_PER_LN_FACTORIAL: ~1e-9 relative in p at the largest N here) and scipy by
/// summing the hypergeometric pmf; dz = dp / (p z) ~ 1e-9 / z relative. Also the width
/// of the band around the limit inside which the two verdicts may differ.
pub const BASELINE_Z_EXACT_REL: f64 = 1e-8;

/// The difference p - pbar cancels when the rates are close: absolute floor.
pub const BASELINE_DIFFERENCE_ABS: f64 = 1e-15;

/// Floor for the scipy comparison (k = 2 is exact in scipy too).
pub const ANOM_SCIPY_FLOOR: f64 = 1e-6;

/// The Sidak bound against scipy's normal quantile: absolute.
pub const SIDAK_ABS: f64 = 1e-12;

/// Cramer's V against scipy: relative (V from our exact X^2; scipy's from its own X^2).
pub const CRAMERS_V_REL: f64 = 1e-9;

/// Spiegelhalter phi: relative (a mean of squares).
pub const PHI_REL: f64 = 1e-13;

/// Monte Carlo p against the exact conditional p: this many standard errors (plus the
/// 1 / (B + 1) bias of (1 + b) / (1 + B)).
pub const MONTE_CARLO_SE: f64 = 4.0;

/// The relative tolerance for a p-value computed from a statistic whose own absolute
/// tolerance is `stat_abs`: d ln p / dx (from the fixture) carries it into p.
pub fn p_rel_from_statistic(dlnp_dx: f64, stat_abs: f64) -> f64 {
    TAIL_P_REL + dlnp_dx.abs() * stat_abs
}

/// Absolute tolerance on Pearson's X^2 of a table.
pub fn x2_tolerance(x2: f64, sum_abs_dev: f64) -> f64 {
    STATISTIC_REL * x2 + X2_PER_ABS_DEV * sum_abs_dev
}

/// Absolute tolerance on G^2 of a table with `cells` cells and total `n`.
pub fn g2_tolerance(g2: f64, n: f64, cells: usize, sum_abs_dev: f64) -> f64 {
    STATISTIC_REL * g2 + G2_PER_N * n + (cells as f64 + 8.0) * EPS * sum_abs_dev
}

/// Absolute tolerance on one cell's contribution (O - E)^2 / E with |O - E| = `dev`: the
/// first-order term of `x2_tolerance`, plus the square of E's own rounding (~(4 EPS E)^2 / E)
/// that remains when O = E exactly.
pub fn contribution_tolerance(contribution: f64, dev: f64, expected: f64) -> f64 {
    STATISTIC_REL * contribution + X2_PER_ABS_DEV * dev + (4.0 * EPS).powi(2) * expected
}

/// Absolute tolerance on a residual r = (O - E) / s: the rounding of E (~3 u E) over s,
/// plus `RESIDUAL_REL` of r.
pub fn residual_tolerance(r: f64, expected: f64, s: f64) -> f64 {
    RESIDUAL_REL * r.abs() + 4.0 * EPS * expected / s
}

/// Relative tolerance of Fisher's exact p for a table of `n` units.
pub fn fisher_rel(n: u64) -> f64 {
    FISHER_REL_FLOOR.max(FISHER_PER_LN_FACTORIAL * statrs::function::factorial::ln_factorial(n))
}

/// Whether `actual` is within `rel` of `expected` (relative), or within `abs` absolutely.
pub fn close(actual: f64, expected: f64, rel: f64, abs: f64) -> bool {
    if actual == expected {
        return true;
    }
    let diff = (actual - expected).abs();
    diff.is_finite() && (diff <= abs || diff <= rel * expected.abs())
}

/// A published figure printed with `decimals` decimals: the true value is within half a
/// unit of the last printed digit (plus a hair for the decimal-to-binary conversion).
pub fn printed(decimals: i32) -> f64 {
    0.5 * 10f64.powi(-decimals) * (1.0 + 1e-9)
}

// --- trend (Cochran-Armitage) and power (tests/trend_power.rs) ---

/// Cochran-Armitage z, slope, departure against the mpmath formulas: relative part (a few
/// dozen operations per point, summed over at most 60 points).
pub const TREND_REL: f64 = 1e-12;

/// Cochran-Armitage: absolute error per unit of the series' rounding scale (computed in
/// the test from its inputs: sum (n p̄ + |d - n p̄|) |t - t̄| over the sd for z). Each
/// d - n p̄ carries ~2 roundings of n p̄ and one of the difference; 8 EPS covers them. At
/// 1e9 units a period this is the 1e-12-ish absolute error of z no float64 method avoids.
pub const TREND_ROUNDING: f64 = 8.0 * EPS;

/// Two-sided Student's t p against mpmath's incomplete beta: relative. statrs 0.19.1's
/// `beta_reg` (continued fraction) at the z_w and df of the fixtures.
pub const STUDENT_P_REL: f64 = 1e-12;

/// R's prop.trend.test X-squared, a sum of squares from `lm` (QR in float64), against z²:
/// relative, and absolute relative to the total X² (the fit's rounding scale). Measured
/// on the fixture: 1.2e-14 of the total X², and R's p within 5.3e-12 of mpmath's; 1e-10
/// leaves room for R linked to another BLAS, and still fails any convention error
/// (the hypergeometric one differs by 1/N, 3e-3 at N = 300).
pub const R_LM_REL: f64 = 1e-10;

/// numpy polyfit's slope (float64 least squares through lstsq): relative, and absolute
/// in units of the slope's standard error (measured: 2e-13 of it).
pub const NUMPY_POLYFIT_REL: f64 = 1e-10;

/// Power rule: c, h, the detectable rise and the units needed against mpmath: relative
/// (c is a Newton root polished to a few EPS; h, the rise and the units are a handful of
/// correctly rounded functions of it).
pub const POWER_REL: f64 = 1e-13;

/// statsmodels NormalIndPower.solve_power for the effect size stops its brentq at its own
/// tolerance: measured up to 2.4e-6 absolute in h over the fixture's cases (1.6% of the
/// smallest h); the generator asserts 5e-6. Absolute.
pub const STATSMODELS_POWER_EFFECT_ABS: f64 = 5e-6;

/// statsmodels solve_power for nobs1: measured up to 1.3e-7 relative; the generator
/// asserts 1e-6. Relative.
pub const STATSMODELS_POWER_UNITS_REL: f64 = 1e-6;

// --- product mix: indirect standardisation and stratified tests (tests/mix.rs) ---

/// Expected counts E = sum n_s x_s / N_s against exact rationals: relative (each term
/// two roundings, summed over at most a few strata; measured 2.5e-16).
pub const MIX_EXPECTED_REL: f64 = 1e-14;

/// Garwood interval ends against mpmath roots: relative. The ends are chi-square critical
/// values (Newton on ln Q to ~1e-15, so ~1e-13 in Q at worst) divided by E; measured
/// 7e-15.
pub const GARWOOD_REL: f64 = 1e-12;

/// The exact Poisson p against mpmath: relative part for an exactly given mean (the
/// incomplete gamma in log space, as `TAIL_P_REL`; measured 5e-15 at small |O - E|).
pub const POISSON_P_REL: f64 = 1e-12;

/// The exact Poisson p: its mean E is itself rounded (`MIX_EXPECTED_REL`), and
/// d ln p / dE is about (O - E) / E in the tail, so ln p moves by about |O - E| times E's
/// relative error.
pub fn poisson_p_rel(observed: u64, expected: f64) -> f64 {
    POISSON_P_REL + (observed as f64 - expected).abs() * MIX_EXPECTED_REL
}

/// Ratio funnel limits against the mpmath interpolation: relative. The interpolation
/// weight (F(r) - p) / P(X = r) divides a difference of tail values (each good to
/// ~1e-14 at the fixtures' E) by the point probability, which is never far below p;
/// measured 4e-16.
pub const RATIO_FUNNEL_REL: f64 = 1e-13;

/// Mantel-Haenszel odds ratio, its RBG standard error and its interval against exact
/// rationals and mpmath: relative (sums of a few roundings per stratum; the interval
/// adds an exp of ln OR -+ z se); measured 7e-16.
pub const MH_REL: f64 = 1e-13;

/// CMH statistic D^2 / V, D the sum of the strata's deviations a - n1 m1 / n (each exact
/// up to its final division and conversion, 2 roundings, 4 EPS with the summation) and V
/// a sum of positive terms (relative `STATISTIC_REL`): absolute.
pub fn cmh_tolerance(statistic: f64, deviation: f64, sum_abs_dev: f64, variance: f64) -> f64 {
    STATISTIC_REL * statistic + 2.0 * deviation.abs() * 4.0 * EPS * sum_abs_dev / variance
}

/// Breslow-Day statistic against mpmath roots: relative, and absolute. The fitted count A
/// solves a quadratic whose coefficients reach n1 m1 (1e12 at 1e6 units): A carries
/// ~1e-16 relative error of those, which (a - A)^2 / Var turns into an absolute error
/// of the statistic of order 1e-12 when a stratum sits near its fit. Measured: 2.6e-14
/// relative, 4e-12 absolute (statistic 161 at 1e6 units a cell).
pub const BRESLOW_DAY_REL: f64 = 1e-12;

/// Breslow-Day: absolute part (see `BRESLOW_DAY_REL`).
pub const BRESLOW_DAY_ABS: f64 = 1e-11;

/// Generalised CMH Q = d^T V^-1 d against a 50-digit solve: relative. The Cholesky solve
/// loses about log10 cond(V) digits; V of the fixtures' random tables are well
/// conditioned (group sizes within a factor 1e3). Measured below 1e-15.
pub const GCMH_REL: f64 = 1e-12;

/// Against R and statsmodels (float64 library code): relative, as `SCIPY_REL`.
pub const LIBRARY_REL: f64 = 1e-9;

/// A p-value a library computes as 1 - cdf (statsmodels' `test_null_odds`): the
/// subtraction leaves a few EPS of absolute error, whatever p is.
pub const ONE_MINUS_CDF_ABS: f64 = 4.0 * EPS;
