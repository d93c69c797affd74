//! dispar_stats::baseline against tests/fixtures/baseline.json, written by
//! tools/reference/baseline_fixtures.py from the published formulas (the quasi-binomial
//! Pearson dispersion of McCullagh & Nelder 1989, the prediction z, Fisher's exact test,
//! Šidák with Student's t, Katz et al. 1978, Wilson, Newcombe) with pinned numpy, scipy and
//! statsmodels: a few hundred generated series (stable, steps up and down, drifts,
//! one-period spikes, small volumes, baselines with earlier excursions, gaps, zero
//! baselines). Every case is compared field by field; tolerances are in
//! tests/common/tolerance.rs.

mod common;

use common::tolerance as tol;
use common::{Checker, fixture};
use dispar_stats::baseline::{BaselineOptions, Limit, Method, Reason, Verdict, compare};
use dispar_stats::interval::Interval;
use serde::Deserialize;
use serde_json::Value;

#[derive(Debug, Deserialize)]
struct LimitOpt {
    kind: String,
    family_alpha: Option<f64>,
    calls: Option<usize>,
}

#[derive(Debug, Deserialize)]
struct Expected {
    verdict: String,
    reason: Value,
    method: Option<String>,
    rate: Option<f64>,
    rate_ci: Option<[f64; 2]>,
    ratio: Option<f64>,
    ratio_ci: Option<[f64; 2]>,
    ratio_corrected: Option<bool>,
    difference: Option<f64>,
    difference_ci: Option<[f64; 2]>,
    z: Option<f64>,
    limit: f64,
    sigma_z: Option<f64>,
    dispersion: Option<f64>,
    used: Vec<usize>,
    left_out: Vec<usize>,
    with_units: usize,
}

#[derive(Debug, Deserialize)]
struct Case {
    name: String,
    baseline: Vec<(u64, u64)>,
    period: (u64, u64),
    limit: LimitOpt,
    min_periods: usize,
    confidence: f64,
    expected: Expected,
    source: String,
}

fn verdict_name(v: Verdict) -> &'static str {
    match v {
        Verdict::Worse => "worse",
        Verdict::Better => "better",
        Verdict::Usual => "usual",
        Verdict::Unknown => "unknown",
    }
}

fn reason_json(r: Reason) -> Value {
    match r {
        Reason::AboveLimit => "above_limit".into(),
        Reason::BelowLimit => "below_limit".into(),
        Reason::WithinLimit => "within_limit".into(),
        Reason::NoUnitsInPeriod => "no_units_in_period".into(),
        Reason::TooFewBaselinePeriods {
            with_units,
            minimum,
        } => {
            serde_json::json!({"too_few_baseline_periods": {"with_units": with_units, "minimum": minimum}})
        }
    }
}

fn interval(ck: &mut Checker, what: &str, got: Option<Interval>, want: Option<[f64; 2]>, abs: f64) {
    match (got, want) {
        (Some(g), Some([lo, hi])) => {
            ck.close(
                || format!("{what} lower"),
                g.lower,
                lo,
                tol::BASELINE_REL,
                abs,
            );
            ck.close(
                || format!("{what} upper"),
                g.upper,
                hi,
                tol::BASELINE_REL,
                abs,
            );
        }
        (None, None) => {}
        (g, w) => ck.ok(|| format!("{what}: got {g:?}, reference {w:?}"), false),
    }
}

fn option(ck: &mut Checker, what: &str, got: Option<f64>, want: Option<f64>, rel: f64, abs: f64) {
    match (got, want) {
        (Some(g), Some(w)) => ck.close(|| what.to_string(), g, w, rel, abs),
        (None, None) => {}
        (g, w) => ck.ok(|| format!("{what}: got {g:?}, reference {w:?}"), false),
    }
}

#[test]
fn baseline_comparisons_match_the_published_formulas() {
    let fx = fixture::<Case>("baseline.json");
    assert!(fx.cases.len() >= 300, "a few hundred series");
    let mut ck = Checker::new();
    for c in &fx.cases {
        let limit = match c.limit.kind.as_str() {
            "three_sigma" => Limit::ThreeSigma,
            _ => Limit::Sidak {
                family_alpha: c.limit.family_alpha.expect("family alpha"),
                calls: c.limit.calls.expect("calls"),
            },
        };
        let opts = BaselineOptions {
            limit,
            min_periods: c.min_periods,
            confidence: c.confidence,
        };
        let got =
            compare(c.period, &c.baseline, &opts).unwrap_or_else(|e| panic!("{}: {e}", c.name));
        let e = &c.expected;
        let at = |q: &str| format!("{}: {q} [{}]", c.name, c.source);
        ck.close(|| at("limit"), got.limit, e.limit, tol::BASELINE_REL, 0.0);
        // A verdict may differ only where z sits on the limit within the tolerance of z.
        let on_the_edge = match (got.z, e.z) {
            (Some(z), Some(_)) => (z.abs() - e.limit).abs() < tol::BASELINE_Z_EXACT_REL * e.limit,
            _ => false,
        };
        if !on_the_edge {
            ck.ok(
                || {
                    format!(
                        "{}: verdict {:?} vs {}",
                        at("verdict"),
                        got.verdict,
                        e.verdict
                    )
                },
                verdict_name(got.verdict) == e.verdict,
            );
            ck.ok(
                || format!("{}: {:?} vs {}", at("reason"), got.reason, e.reason),
                reason_json(got.reason) == e.reason,
            );
        }
        ck.ok(
            || format!("{}: {:?} vs {:?}", at("used"), got.used, e.used),
            got.used == e.used,
        );
        ck.ok(
            || format!("{}: {:?} vs {:?}", at("left_out"), got.left_out, e.left_out),
            got.left_out == e.left_out,
        );
        ck.ok(|| at("with_units"), got.with_units == e.with_units);
        let method = got.method.map(|m| match m {
            Method::Normal => "normal",
            Method::Exact => "exact",
        });
        ck.ok(
            || format!("{}: {method:?} vs {:?}", at("method"), e.method),
            method == e.method.as_deref(),
        );
        let z_rel = if method == Some("exact") {
            tol::BASELINE_Z_EXACT_REL
        } else {
            tol::BASELINE_REL
        };
        option(&mut ck, &at("z"), got.z, e.z, z_rel, tol::BASELINE_Z_ABS);
        option(
            &mut ck,
            &at("sigma_z"),
            got.sigma_z,
            e.sigma_z,
            tol::BASELINE_REL,
            0.0,
        );
        option(
            &mut ck,
            &at("dispersion"),
            got.dispersion,
            e.dispersion,
            tol::BASELINE_REL,
            0.0,
        );
        option(
            &mut ck,
            &at("rate"),
            got.rate,
            e.rate,
            tol::BASELINE_REL,
            0.0,
        );
        option(
            &mut ck,
            &at("ratio"),
            got.ratio,
            e.ratio,
            tol::BASELINE_REL,
            0.0,
        );
        option(
            &mut ck,
            &at("difference"),
            got.difference,
            e.difference,
            tol::BASELINE_REL,
            tol::BASELINE_DIFFERENCE_ABS,
        );
        interval(
            &mut ck,
            &at("rate_ci"),
            got.rate_ci,
            e.rate_ci,
            tol::INTERVAL_ABS_STATSMODELS,
        );
        interval(&mut ck, &at("ratio_ci"), got.ratio_ci, e.ratio_ci, 0.0);
        interval(
            &mut ck,
            &at("difference_ci"),
            got.difference_ci,
            e.difference_ci,
            tol::INTERVAL_ABS_STATSMODELS,
        );
        if let Some(corrected) = e.ratio_corrected {
            ck.ok(|| at("ratio_corrected"), got.ratio_corrected == corrected);
        }
    }
    ck.finish("baseline comparisons vs the published formulas");
}
