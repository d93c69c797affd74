//! The Cochran-Armitage trend test (dispar_stats::trend) and the power rule
//! (dispar_stats::power) against reference values from outside the project: the JSON
//! fixtures tests/fixtures/trend.json and power.json, written by
//! tools/reference/trend_power_fixtures.py from the formulas in mpmath (50 digits), with
//! R's `prop.trend.test`, statsmodels, numpy and scipy alongside. Each case names its
//! sources; every failure message repeats them. Tolerances live in tests/common/tolerance.rs.

mod common;

use common::tolerance as tol;
use common::{Checker, fixture};
use dispar_stats::power::PowerRule;
use dispar_stats::trend::{Trend, cochran_armitage};
use serde::Deserialize;

const LN_10: f64 = std::f64::consts::LN_10;

#[derive(Debug, Deserialize)]
struct TrendCase {
    name: String,
    points: Vec<(u64, u64)>,
    scores: Option<Vec<f64>>,
    periods: usize,
    slope: f64,
    z: f64,
    p: f64,
    log10_p: f64,
    dlnp_dz: f64,
    departure: f64,
    departure_p: f64,
    departure_dlnp_dx: f64,
    dispersion: f64,
    z_widened: f64,
    p_widened: f64,
    dlnp_widened_dz: f64,
    source: String,
    r_x_squared: f64,
    r_p: f64,
    r_source: String,
    sm_z_hypergeometric: f64,
    sm_source: String,
    np_slope: f64,
    np_source: String,
    scipy_departure_p: f64,
    scipy_p_widened: Option<f64>,
    scipy_source: String,
}

/// The absolute rounding error float64 arithmetic cannot avoid in z and in the departure
/// of a series, from its inputs and the reference slope (see `TREND_ROUNDING`).
struct Conditioning {
    z_abs: f64,
    departure_abs: f64,
    /// sqrt(p̄ q̄ / Sxx) = slope / z, the slope's standard error.
    slope_se: f64,
}

fn conditioning(case: &TrendCase) -> Conditioning {
    let scores: Vec<f64> = match &case.scores {
        Some(s) => s.clone(),
        None => (0..case.points.len()).map(|i| i as f64).collect(),
    };
    let kept: Vec<(f64, f64, f64)> = case
        .points
        .iter()
        .zip(&scores)
        .filter(|((n, _), _)| *n > 0)
        .map(|(&(n, d), &t)| (n as f64, d as f64, t))
        .collect();
    let big_n: f64 = kept.iter().map(|p| p.0).sum();
    let p_bar = kept.iter().map(|p| p.1).sum::<f64>() / big_n;
    let pq = p_bar * (1.0 - p_bar);
    let t_bar = kept.iter().map(|p| p.0 * p.2).sum::<f64>() / big_n;
    let sxx: f64 = kept.iter().map(|p| p.0 * (p.2 - t_bar).powi(2)).sum();
    let sd = (pq * sxx).sqrt();
    // Each d - n p̄ carries the rounding of n p̄ (and of p̄): a few units of n p̄.
    let t_scale: f64 = kept
        .iter()
        .map(|&(n, d, t)| (n * p_bar + (d - n * p_bar).abs()) * (t - t_bar).abs())
        .sum();
    // Each residual r carries an error e of a few roundings of n p̄, d - n p̄ and
    // n b (t - t̄); r² / (n p̄ q̄) then carries 2 |r| e + e² (the square alone remains on
    // a series exactly on its line, where r = 0).
    let departure_abs: f64 = kept
        .iter()
        .map(|&(n, d, t)| {
            let fit = n * case.slope * (t - t_bar);
            let r = d - n * p_bar - fit;
            let e = tol::TREND_ROUNDING * (n * p_bar + (d - n * p_bar).abs() + fit.abs());
            (2.0 * r.abs() * e + e * e) / (n * pq)
        })
        .sum();
    Conditioning {
        z_abs: tol::TREND_ROUNDING * t_scale / sd,
        departure_abs,
        slope_se: (pq / sxx).sqrt(),
    }
}

fn check_trend(c: &mut Checker, case: &TrendCase, got: &Trend) {
    let cond = conditioning(case);
    let what = |q: &str, src: &str| format!("{} / {q} [{src}]", case.name);
    let src = case.source.as_str();
    c.ok(
        || format!("{}: periods {} vs {}", case.name, got.periods, case.periods),
        got.periods == case.periods,
    );
    c.close(
        || what("z", src),
        got.statistic,
        case.z,
        tol::TREND_REL,
        cond.z_abs,
    );
    // slope = z sqrt(p̄ q̄ / Sxx): the same error as z, in units of the slope's se.
    let slope_abs = cond.z_abs * cond.slope_se;
    c.close(
        || what("slope", src),
        got.slope,
        case.slope,
        tol::TREND_REL,
        slope_abs,
    );
    let p_rel = tol::TAIL_P_REL + case.dlnp_dz.abs() * cond.z_abs;
    c.close(
        || what("p", src),
        got.p_value,
        case.p,
        p_rel,
        tol::SUBNORMAL_ABS,
    );
    let l10_abs = tol::LOG10_P_ABS + case.dlnp_dz.abs() * cond.z_abs / LN_10;
    c.close(
        || what("log10 p", src),
        got.log10_p,
        case.log10_p,
        tol::LOG10_P_REL,
        l10_abs,
    );
    c.close(
        || what("departure", src),
        got.departure,
        case.departure,
        tol::TREND_REL,
        cond.departure_abs,
    );
    let df = (case.periods - 2) as f64;
    c.close(
        || what("dispersion", src),
        got.dispersion,
        case.dispersion,
        tol::TREND_REL,
        cond.departure_abs / df,
    );
    let dep_p_rel = tol::TAIL_P_REL + case.departure_dlnp_dx.abs() * cond.departure_abs;
    c.close(
        || what("departure p", src),
        got.departure_p,
        case.departure_p,
        dep_p_rel,
        tol::SUBNORMAL_ABS,
    );
    // z_w = z / sqrt(phi): relative errors of z and of half of phi's.
    let phi = case.dispersion.max(1.0);
    let zw_abs = cond.z_abs / phi.sqrt()
        + if case.dispersion > 1.0 {
            0.5 * case.z_widened.abs() * cond.departure_abs / case.departure
        } else {
            0.0
        };
    c.close(
        || what("z widened", src),
        got.z_widened,
        case.z_widened,
        tol::TREND_REL,
        zw_abs,
    );
    let pw_rel = tol::STUDENT_P_REL + case.dlnp_widened_dz.abs() * zw_abs;
    c.close(
        || what("p widened", src),
        got.p_widened,
        case.p_widened,
        pw_rel,
        tol::SUBNORMAL_ABS,
    );

    // The libraries alongside, each to its own float64 accuracy.
    let z2 = got.statistic * got.statistic;
    // R's X-squared is a sum of squares of a weighted lm fit: absolute error relative to
    // the total weighted sum of squares, X² = z² + departure.
    c.close(
        || what("z^2 vs X-squared", &case.r_source),
        z2,
        case.r_x_squared,
        tol::R_LM_REL,
        tol::R_LM_REL * (z2 + got.departure),
    );
    c.close(
        || what("p vs R", &case.r_source),
        got.p_value,
        case.r_p,
        tol::R_LM_REL * (1.0 + 0.5 * case.dlnp_dz.abs() * case.z.abs()),
        tol::SUBNORMAL_ABS,
    );
    let n: f64 = case.points.iter().map(|p| p.0 as f64).sum();
    c.close(
        || what("hypergeometric z", &case.sm_source),
        got.statistic * ((n - 1.0) / n).sqrt(),
        case.sm_z_hypergeometric,
        tol::SCIPY_REL,
        cond.z_abs + tol::SCIPY_REL,
    );
    c.close(
        || what("slope", &case.np_source),
        got.slope,
        case.np_slope,
        tol::NUMPY_POLYFIT_REL,
        slope_abs + tol::NUMPY_POLYFIT_REL * cond.slope_se,
    );
    c.close(
        || what("departure p", &case.scipy_source),
        got.departure_p,
        case.scipy_departure_p,
        dep_p_rel + tol::SCIPY_REL,
        tol::SUBNORMAL_ABS,
    );
    if let Some(pw) = case.scipy_p_widened {
        c.close(
            || what("p widened", &case.scipy_source),
            got.p_widened,
            pw,
            pw_rel + tol::SCIPY_REL,
            tol::SUBNORMAL_ABS,
        );
    }
}

#[test]
fn cochran_armitage_matches_the_formulas_r_statsmodels_numpy_and_scipy() {
    let fx = fixture::<TrendCase>("trend.json");
    let mut c = Checker::new();
    for case in &fx.cases {
        match cochran_armitage(&case.points, case.scores.as_deref()) {
            Ok(got) => check_trend(&mut c, case, &got),
            Err(e) => c.ok(|| format!("{}: unexpected error {e}", case.name), false),
        }
    }
    assert!(fx.cases.len() >= 40, "{} cases", fx.cases.len());
    c.finish("trend");
}

#[test]
fn cochran_armitage_matches_agresti_s_malformation_example() {
    // Agresti (2002), Categorical Data Analysis, 2nd ed., Wiley: infant malformation by
    // the mother's alcohol consumption (drinks a day 0, <1, 1-2, 3-5, >=6), the
    // linear-by-linear statistic M² = (N - 1) r² = z² (N - 1) / N: 6.57 with scores
    // 0, 0.5, 1.5, 4, 7 and 1.83 with scores 1..5, P = 0.01 for the first (all values
    // recalled from memory, printed to 2 decimals).
    let points = [(17114, 48), (14502, 38), (793, 5), (127, 1), (38, 1)];
    let n = 32574.0_f64;
    let hyper = |t: &Trend| t.statistic.powi(2) * (n - 1.0) / n;
    let dose = cochran_armitage(&points, Some(&[0.0, 0.5, 1.5, 4.0, 7.0])).expect("valid");
    let even = cochran_armitage(&points, Some(&[1.0, 2.0, 3.0, 4.0, 5.0])).expect("valid");
    let mut c = Checker::new();
    let src = "Agresti (2002) CDA 2nd ed., recalled from memory";
    c.close(
        || format!("M^2, dose scores [{src}]"),
        hyper(&dose),
        6.57,
        0.0,
        tol::printed(2),
    );
    c.close(
        || format!("M^2, scores 1..5 [{src}]"),
        hyper(&even),
        1.83,
        0.0,
        tol::printed(2),
    );
    c.close(
        || format!("P, dose scores [{src}]"),
        dose.p_value,
        0.01,
        0.0,
        tol::printed(2),
    );
    c.ok(|| "rising with dose".into(), dose.statistic > 0.0);
    c.finish("trend, Agresti's example");
}

#[derive(Debug, Deserialize)]
struct PowerCase {
    name: String,
    alpha: f64,
    power: f64,
    c: f64,
    n1: f64,
    n2: f64,
    h: f64,
    p0: f64,
    rise: Option<f64>,
    difference: f64,
    units: f64,
    source: String,
    sm_h: f64,
    sm_units: f64,
    sm_source: String,
}

#[test]
fn the_power_rule_matches_mpmath_and_statsmodels() {
    let fx = fixture::<PowerCase>("power.json");
    let mut c = Checker::new();
    for case in &fx.cases {
        let what = |q: &str, src: &str| format!("{} / {q} [{src}]", case.name);
        let rule = match PowerRule::new(case.alpha, case.power) {
            Ok(r) => r,
            Err(e) => {
                c.ok(|| format!("{}: unexpected error {e}", case.name), false);
                continue;
            }
        };
        let src = case.source.as_str();
        c.close(
            || what("c", src),
            rule.multiple(),
            case.c,
            tol::POWER_REL,
            0.0,
        );
        let h = rule.detectable_effect(case.n1, case.n2);
        c.close(|| what("h", src), h, case.h, tol::POWER_REL, 0.0);
        c.close(
            || what("h", &case.sm_source),
            h,
            case.sm_h,
            0.0,
            tol::STATSMODELS_POWER_EFFECT_ABS,
        );
        let rise = rule.detectable_difference(case.p0, case.n1, case.n2);
        match (rise, case.rise) {
            (Some(got), Some(want)) => {
                c.close(|| what("rise", src), got, want, tol::POWER_REL, 0.0)
            }
            (got, want) => c.ok(
                || format!("{}: rise {got:?}, reference {want:?} [{src}]", case.name),
                got.is_none() && want.is_none(),
            ),
        }
        match rule.units_needed(case.p0, case.difference) {
            Ok(units) => {
                c.close(
                    || what("units", src),
                    units,
                    case.units,
                    tol::POWER_REL,
                    0.0,
                );
                c.close(
                    || what("units", &case.sm_source),
                    units,
                    case.sm_units,
                    tol::STATSMODELS_POWER_UNITS_REL,
                    0.0,
                );
            }
            Err(e) => c.ok(
                || format!("{}: units: unexpected error {e}", case.name),
                false,
            ),
        }
    }
    assert!(fx.cases.len() >= 40, "{} cases", fx.cases.len());
    c.finish("power");
}
