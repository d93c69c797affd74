//! dispar-stats against reference values from outside the project: the JSON fixtures in
//! tests/fixtures/, written by tools/reference/generate.py with pinned numpy, scipy,
//! statsmodels and mpmath (versions in tools/reference/requirements.txt and in every
//! fixture file). Each case names the library or method its reference came from; every
//! failure message repeats it. Tolerances live in tests/common/tolerance.rs.

mod common;

use common::tolerance::{self as tol, EPS};
use common::{Checker, fixture};
use dispar_stats::StatsError;
use dispar_stats::adjust::{Adjustment, adjust};
use dispar_stats::analysis::{Method, Options, TestUsed, analyze};
use dispar_stats::anom::{AnomMethod, critical, critical_for_sizes, sidak};
use dispar_stats::chisq::{
    critical_value, degrees_of_freedom, likelihood_ratio, pearson, upper_tail, yates,
};
use dispar_stats::effect::{cramers_v, cramers_v_corrected};
use dispar_stats::exact::fisher;
use dispar_stats::interval::{newcombe_difference, wilson};
use dispar_stats::montecarlo::{conditional_p, table_seed};
use dispar_stats::overdispersion::spiegelhalter;
use dispar_stats::residuals::cells;
use dispar_stats::table::Table;
use dispar_stats::validity::cochran;
use serde::Deserialize;

const LN_10: f64 = std::f64::consts::LN_10;

// ---------------------------------------------------------------------------------------
// fixture shapes

#[derive(Debug, Deserialize)]
struct TailCase {
    name: String,
    x: f64,
    df: u64,
    p: f64,
    p_str: String,
    log10_p: f64,
    source: String,
}

#[derive(Debug, Deserialize)]
struct CriticalCase {
    name: String,
    alpha: f64,
    df: u64,
    critical: f64,
    source: String,
}

#[derive(Debug, Deserialize)]
struct Statistic {
    statistic: f64,
    #[serde(default)]
    sum_abs_dev: f64,
    p: f64,
    log10_p: f64,
    dlnp_dx: f64,
    source: String,
}

#[derive(Debug, Deserialize)]
struct ScipyTable {
    pearson: f64,
    pearson_p: f64,
    likelihood_ratio: f64,
    source: String,
}

#[derive(Debug, Deserialize)]
struct ValidityRef {
    min_expected: f64,
    cells_below_1: usize,
    cells_below_5: usize,
    holds: bool,
    source: String,
}

#[derive(Debug, Deserialize)]
struct CramerRef {
    v: f64,
    source: String,
    v_corrected: Option<f64>,
    v_corrected_source: Option<String>,
}

#[derive(Debug, Deserialize)]
struct YatesRef {
    statistic: f64,
    source: String,
}

#[derive(Debug, Deserialize)]
struct TableCase {
    name: String,
    counts: Vec<Vec<u64>>,
    kept_rows: Vec<usize>,
    kept_cols: Vec<usize>,
    dropped_rows: Vec<usize>,
    dropped_cols: Vec<usize>,
    testable: bool,
    n: Option<u64>,
    rows: Option<usize>,
    cols: Option<usize>,
    df: Option<u64>,
    expected: Option<Vec<f64>>,
    contribution: Option<Vec<f64>>,
    pearson_residual: Option<Vec<f64>>,
    adjusted_residual: Option<Vec<f64>>,
    adjusted_residual_source: Option<String>,
    pearson: Option<Statistic>,
    likelihood_ratio: Option<Statistic>,
    scipy: Option<ScipyTable>,
    validity: Option<ValidityRef>,
    cramers_v: Option<CramerRef>,
    yates: Option<YatesRef>,
}

#[derive(Debug, Deserialize)]
struct FisherScipy {
    p_two_sided: f64,
    p_less: f64,
    p_greater: f64,
    source: String,
}

#[derive(Debug, Deserialize)]
struct FisherCase {
    name: String,
    table: [u64; 4],
    p_two_sided: f64,
    log10_p: f64,
    p_less: f64,
    p_greater: f64,
    source: String,
    scipy: FisherScipy,
    #[serde(rename = "scipy_agrees_1e-9")]
    scipy_agrees: bool,
}

#[derive(Debug, Deserialize)]
struct LibInterval {
    lower: f64,
    upper: f64,
    source: String,
}

#[derive(Debug, Deserialize)]
struct WilsonCase {
    name: String,
    x: u64,
    n: u64,
    confidence: f64,
    lower: f64,
    upper: f64,
    source: String,
    statsmodels: LibInterval,
}

#[derive(Debug, Deserialize)]
struct NewcombeCase {
    name: String,
    x1: u64,
    n1: u64,
    x2: u64,
    n2: u64,
    confidence: f64,
    lower: f64,
    upper: f64,
    source: String,
    statsmodels: LibInterval,
}

#[derive(Debug, Deserialize)]
struct AdjustCase {
    name: String,
    p: Vec<f64>,
    holm: Vec<f64>,
    bonferroni: Vec<f64>,
    hochberg: Vec<f64>,
    benjamini_hochberg: Vec<f64>,
    source: String,
}

#[derive(Debug, Deserialize)]
struct AnomScipy {
    h: f64,
    h_accuracy: f64,
    source: String,
}

#[derive(Debug, Deserialize)]
struct AnomCase {
    name: String,
    alpha: f64,
    k: usize,
    h: f64,
    sidak_bound: f64,
    source: String,
    scipy: Option<AnomScipy>,
}

#[derive(Debug, Deserialize)]
struct AnomSizesCase {
    name: String,
    sizes: Vec<u64>,
    alpha: f64,
    h: f64,
    se_h: f64,
    source: String,
    h_formula: f64,
    h_formula_source: String,
    exceedance_at_formula: f64,
    se_exceedance: f64,
    quoted_h: Option<f64>,
}

#[derive(Debug, Deserialize)]
struct MonteCarloCase {
    name: String,
    counts: Vec<Vec<u64>>,
    pearson: f64,
    p_exact_pearson: f64,
    source: String,
}

#[derive(Debug, Deserialize)]
struct OverdispersionCase {
    name: String,
    z: Vec<f64>,
    winsor_fraction: f64,
    phi_count: f64,
    phi_count_source: String,
}

fn table_of(counts: &[Vec<u64>]) -> Table {
    Table::from_rows(counts).unwrap_or_else(|e| panic!("fixture table {counts:?} rejected: {e}"))
}

// ---------------------------------------------------------------------------------------
// chi-square distribution

#[test]
fn upper_tail_matches_mpmath_to_1e12_relative_down_to_the_far_tail() {
    let fx = fixture::<TailCase>("chisq_tail.json");
    let mut ck = Checker::new();
    for c in &fx.cases {
        let t = upper_tail(c.x, c.df).unwrap_or_else(|e| panic!("{}: {e}", c.name));
        let what =
            |q: &'static str| move || format!("{} {q} [{}; p = {}]", c.name, c.source, c.p_str);
        ck.close(what("p"), t.p, c.p, tol::TAIL_P_REL, tol::SUBNORMAL_ABS);
        ck.close(
            what("log10 p"),
            t.log10_p,
            c.log10_p,
            tol::LOG10_P_REL,
            tol::LOG10_P_ABS,
        );
        ck.ok(
            || format!("{}: log10_p not finite ({})", c.name, t.log10_p),
            t.log10_p.is_finite(),
        );
    }
    ck.finish("chi-square upper tail vs mpmath");
}

#[test]
fn far_tail_cases_named_in_the_issue_keep_a_finite_log10_p() {
    let fx = fixture::<TailCase>("chisq_tail.json");
    for (x, df) in [(1500.0, 1), (20000.0, 10)] {
        let c = fx
            .cases
            .iter()
            .find(|c| c.x == x && c.df == df)
            .unwrap_or_else(|| panic!("fixture lacks x = {x}, df = {df}"));
        let t = upper_tail(x, df).unwrap_or_else(|e| panic!("{}: {e}", c.name));
        assert!(t.log10_p.is_finite(), "{}: log10 p = {}", c.name, t.log10_p);
        assert!(
            tol::close(t.log10_p, c.log10_p, tol::LOG10_P_REL, tol::LOG10_P_ABS),
            "{}: log10 p {} vs {} [{}]",
            c.name,
            t.log10_p,
            c.log10_p,
            c.source
        );
    }
}

#[test]
fn critical_values_match_mpmath_roots_and_round_trip() {
    let fx = fixture::<CriticalCase>("chisq_critical.json");
    let mut ck = Checker::new();
    for c in &fx.cases {
        let x = critical_value(c.alpha, c.df).unwrap_or_else(|e| panic!("{}: {e}", c.name));
        ck.close(
            || format!("{} [{}]", c.name, c.source),
            x,
            c.critical,
            tol::CRITICAL_REL,
            0.0,
        );
        // Round trip: the tail at the reference root is alpha (mpmath says so to 1e-30).
        let back = upper_tail(c.critical, c.df).unwrap_or_else(|e| panic!("{}: {e}", c.name));
        ck.close(
            || format!("{}: upper_tail(critical) = alpha", c.name),
            back.p,
            c.alpha,
            tol::TAIL_P_REL,
            0.0,
        );
    }
    ck.finish("chi-square critical values vs mpmath");
}

// ---------------------------------------------------------------------------------------
// contingency tables

#[test]
fn reduction_drops_exactly_the_all_zero_rows_and_columns() {
    let fx = fixture::<TableCase>("tables.json");
    let mut ck = Checker::new();
    for c in &fx.cases {
        let red = table_of(&c.counts).reduce();
        let testable = red.testable().is_ok();
        ck.ok(
            || {
                format!(
                    "{}: testable {} vs reference {}",
                    c.name, testable, c.testable
                )
            },
            testable == c.testable,
        );
        if !c.testable {
            continue;
        }
        ck.ok(
            || {
                format!(
                    "{}: kept rows {:?} cols {:?}, dropped rows {:?} cols {:?}; reference {:?} {:?} {:?} {:?}",
                    c.name,
                    red.kept_rows,
                    red.kept_cols,
                    red.dropped_rows,
                    red.dropped_cols,
                    c.kept_rows,
                    c.kept_cols,
                    c.dropped_rows,
                    c.dropped_cols
                )
            },
            red.kept_rows == c.kept_rows
                && red.kept_cols == c.kept_cols
                && red.dropped_rows == c.dropped_rows
                && red.dropped_cols == c.dropped_cols,
        );
    }
    ck.finish("table reduction");
}

#[test]
fn untestable_tables_give_a_typed_error_naming_what_was_dropped() {
    let fx = fixture::<TableCase>("tables.json");
    let mut n = 0;
    for c in fx.cases.iter().filter(|c| !c.testable) {
        n += 1;
        match analyze(&table_of(&c.counts), &Options::default()) {
            Err(StatsError::NotTestable(nt)) => {
                assert_eq!(nt.dropped_rows, c.dropped_rows, "{}: dropped rows", c.name);
                assert_eq!(nt.dropped_cols, c.dropped_cols, "{}: dropped cols", c.name);
            }
            other => panic!("{}: expected NotTestable, got {other:?}", c.name),
        }
    }
    assert!(n >= 5, "too few untestable cases in the fixture");
}

#[test]
fn pearson_g2_yates_and_df_match_exact_and_mpmath_references() {
    let fx = fixture::<TableCase>("tables.json");
    let mut ck = Checker::new();
    for c in fx.cases.iter().filter(|c| c.testable) {
        let (Some(px), Some(gx), Some(df), Some(n)) = (&c.pearson, &c.likelihood_ratio, c.df, c.n)
        else {
            panic!("{}: testable case without statistics", c.name);
        };
        let t = table_of(&c.counts);
        let cells_n = c.rows.unwrap_or(0) * c.cols.unwrap_or(0);
        ck.ok(
            || format!("{}: df {} vs {}", c.name, degrees_of_freedom(&t), df),
            degrees_of_freedom(&t) == df,
        );

        let x2_tol = tol::x2_tolerance(px.statistic, px.sum_abs_dev);
        ck.close(
            || format!("{} Pearson X^2 [{}]", c.name, px.source),
            pearson(&t),
            px.statistic,
            0.0,
            x2_tol,
        );
        let g2_tol = tol::g2_tolerance(gx.statistic, n as f64, cells_n, px.sum_abs_dev);
        ck.close(
            || format!("{} G^2 [{}]", c.name, gx.source),
            likelihood_ratio(&t),
            gx.statistic,
            0.0,
            g2_tol,
        );

        // p at the exact statistic: mpmath, 1e-12.
        for (label, s) in [("X^2", px), ("G^2", gx)] {
            let tail = upper_tail(s.statistic, df).unwrap_or_else(|e| panic!("{}: {e}", c.name));
            ck.close(
                || {
                    format!(
                        "{} p of {label} at the reference statistic [{}]",
                        c.name, s.source
                    )
                },
                tail.p,
                s.p,
                tol::TAIL_P_REL,
                tol::SUBNORMAL_ABS,
            );
            ck.close(
                || format!("{} log10 p of {label} [{}]", c.name, s.source),
                tail.log10_p,
                s.log10_p,
                tol::LOG10_P_REL,
                tol::LOG10_P_ABS,
            );
        }

        // The whole analysis, forced to each asymptotic test: p from our own statistic, so
        // the statistic's tolerance is carried into p by d ln p / dx.
        for (method, s, stat_tol, used) in [
            (Method::Pearson, px, x2_tol, TestUsed::Pearson),
            (
                Method::LikelihoodRatio,
                gx,
                g2_tol,
                TestUsed::LikelihoodRatio,
            ),
        ] {
            let opts = Options {
                method,
                ..Options::default()
            };
            let a = analyze(&t, &opts).unwrap_or_else(|e| panic!("{}: {e}", c.name));
            ck.ok(
                || format!("{}: forced {method:?} ran {:?}", c.name, a.test),
                a.test == used,
            );
            ck.close(
                || format!("{} analyze({method:?}).statistic [{}]", c.name, s.source),
                a.statistic,
                s.statistic,
                0.0,
                stat_tol,
            );
            let p_rel = tol::p_rel_from_statistic(s.dlnp_dx, stat_tol);
            ck.close(
                || format!("{} analyze({method:?}).p [{}]", c.name, s.source),
                a.p,
                s.p,
                p_rel,
                tol::SUBNORMAL_ABS,
            );
            ck.close(
                || format!("{} analyze({method:?}).log10_p [{}]", c.name, s.source),
                a.log10_p,
                s.log10_p,
                tol::LOG10_P_REL,
                tol::LOG10_P_ABS + p_rel / LN_10,
            );
            ck.ok(|| format!("{}: df {} vs {df}", c.name, a.df), a.df == df);
        }

        if let Some(y) = &c.yates {
            // The reference is the Yates X^2 of the reduced table (a 2 x 3 with an empty
            // column is a 2 x 2).
            let reduced = t.reduce();
            match yates(&reduced.table) {
                Some(v) => ck.close(
                    || format!("{} Yates [{}]", c.name, y.source),
                    v,
                    y.statistic,
                    0.0,
                    tol::x2_tolerance(y.statistic, px.sum_abs_dev),
                ),
                None => ck.ok(
                    || format!("{}: yates() gave None for a 2 x 2", c.name),
                    false,
                ),
            }
        }
    }
    ck.finish("X^2, G^2, Yates, df and p vs exact/mpmath");
}

#[test]
fn statistics_agree_with_scipy_chi2_contingency() {
    let fx = fixture::<TableCase>("tables.json");
    let mut ck = Checker::new();
    for c in fx.cases.iter().filter(|c| c.testable) {
        let Some(s) = &c.scipy else { continue };
        let t = table_of(&c.counts);
        // Both sides are float64 computations of the same statistic, so each carries the
        // statistic's conditioning (see tolerance.rs); allow it twice.
        let (Some(px), Some(n)) = (&c.pearson, c.n) else {
            continue;
        };
        let cells_n = c.rows.unwrap_or(0) * c.cols.unwrap_or(0);
        ck.close(
            || format!("{} X^2 [{}]", c.name, s.source),
            pearson(&t),
            s.pearson,
            tol::SCIPY_REL,
            2.0 * tol::x2_tolerance(s.pearson, px.sum_abs_dev),
        );
        ck.close(
            || format!("{} G^2 [{}]", c.name, s.source),
            likelihood_ratio(&t),
            s.likelihood_ratio,
            tol::SCIPY_REL,
            2.0 * tol::g2_tolerance(s.likelihood_ratio, n as f64, cells_n, px.sum_abs_dev),
        );
        // scipy's p is 1 - cdf-free (chi2.sf) but underflows; compare where it is normal.
        if s.pearson_p > 1e-300 {
            let a = analyze(
                &t,
                &Options {
                    method: Method::Pearson,
                    ..Options::default()
                },
            )
            .unwrap_or_else(|e| panic!("{}: {e}", c.name));
            let dlnp = c.pearson.as_ref().map_or(0.0, |p| p.dlnp_dx);
            ck.close(
                || format!("{} p [{}]", c.name, s.source),
                a.p,
                s.pearson_p,
                tol::SCIPY_REL + dlnp.abs() * tol::SCIPY_REL * s.pearson,
                0.0,
            );
        }
    }
    ck.finish("X^2, G^2 and p vs scipy");
}

#[test]
fn cells_match_exact_expected_counts_and_mpmath_residuals() {
    let fx = fixture::<TableCase>("tables.json");
    let mut ck = Checker::new();
    for c in fx.cases.iter().filter(|c| c.testable) {
        let (Some(exp), Some(con), Some(pr), Some(ar), Some(n)) = (
            &c.expected,
            &c.contribution,
            &c.pearson_residual,
            &c.adjusted_residual,
            c.n,
        ) else {
            panic!("{}: missing cell references", c.name);
        };
        let src = c.adjusted_residual_source.as_deref().unwrap_or("?");
        let red = table_of(&c.counts).reduce();
        let t = red.testable().unwrap_or_else(|e| panic!("{}: {e}", c.name));
        let got = cells(t);
        ck.ok(
            || format!("{}: {} cells vs {}", c.name, got.len(), exp.len()),
            got.len() == exp.len(),
        );
        let cols = t.cols();
        let nf = n as f64;
        for (i, cell) in got.iter().enumerate().take(exp.len()) {
            let (r, k) = (i / cols, i % cols);
            let e = exp[i];
            let dev = pr[i].abs() * e.sqrt();
            ck.close(
                || format!("{} cell ({r},{k}) expected [exact rationals]", c.name),
                cell.expected,
                e,
                tol::EXPECTED_REL,
                0.0,
            );
            ck.close(
                || format!("{} cell ({r},{k}) contribution [exact rationals]", c.name),
                cell.contribution,
                con[i],
                0.0,
                tol::contribution_tolerance(con[i], dev, e),
            );
            ck.close(
                || format!("{} cell ({r},{k}) Pearson residual [{src}]", c.name),
                cell.pearson_residual,
                pr[i],
                0.0,
                tol::residual_tolerance(pr[i], e, e.sqrt()),
            );
            let row_share = t.row_totals()[r] as f64 / nf;
            let col_share = t.col_totals()[k] as f64 / nf;
            let s = (e * (1.0 - row_share) * (1.0 - col_share)).sqrt();
            let extra =
                2.0 * EPS * (1.0 / (1.0 - row_share) + 1.0 / (1.0 - col_share)) * ar[i].abs();
            ck.close(
                || format!("{} cell ({r},{k}) adjusted residual [{src}]", c.name),
                cell.adjusted_residual,
                ar[i],
                0.0,
                tol::residual_tolerance(ar[i], e, s) + extra,
            );
        }
        // X^2 is the sum of the contributions.
        let sum: f64 = got.iter().map(|c| c.contribution).sum();
        if let Some(px) = &c.pearson {
            ck.close(
                || format!("{}: sum of contributions = X^2", c.name),
                sum,
                px.statistic,
                0.0,
                tol::x2_tolerance(px.statistic, px.sum_abs_dev),
            );
        }
    }
    ck.finish("per-cell statistics vs exact/mpmath");
}

#[test]
fn cochran_validity_matches_exact_expected_counts() {
    let fx = fixture::<TableCase>("tables.json");
    let mut ck = Checker::new();
    for c in fx.cases.iter().filter(|c| c.testable) {
        let Some(v) = &c.validity else { continue };
        let got = cochran(&table_of(&c.counts));
        let what = |q: &'static str| move || format!("{} {q} [{}]", c.name, v.source);
        ck.close(
            what("min expected"),
            got.min_expected,
            v.min_expected,
            tol::EXPECTED_REL,
            0.0,
        );
        ck.ok(
            || {
                format!(
                    "{} cells below 1: {} vs {} [{}]",
                    c.name, got.cells_below_1, v.cells_below_1, v.source
                )
            },
            got.cells_below_1 == v.cells_below_1,
        );
        ck.ok(
            || {
                format!(
                    "{} cells below 5: {} vs {} [{}]",
                    c.name, got.cells_below_5, v.cells_below_5, v.source
                )
            },
            got.cells_below_5 == v.cells_below_5,
        );
        ck.ok(
            || {
                format!(
                    "{} holds: {} vs {} [{}]",
                    c.name, got.holds, v.holds, v.source
                )
            },
            got.holds == v.holds,
        );
    }
    ck.finish("Cochran's rule");
}

#[test]
fn cramers_v_matches_scipy_and_the_bergsma_correction() {
    let fx = fixture::<TableCase>("tables.json");
    let mut ck = Checker::new();
    for c in fx.cases.iter().filter(|c| c.testable) {
        let (Some(v), Some(px), Some(n), Some(r), Some(k)) =
            (&c.cramers_v, &c.pearson, c.n, c.rows, c.cols)
        else {
            continue;
        };
        let x2 = px.statistic;
        ck.close(
            || format!("{} Cramer's V [{}]", c.name, v.source),
            cramers_v(x2, n, r, k),
            v.v,
            tol::CRAMERS_V_REL,
            1e-15,
        );
        if let Some(vc) = v.v_corrected {
            let src = v.v_corrected_source.as_deref().unwrap_or("?");
            // V~^2 = phi2+ / den: compare squares, with the cancellation in
            // X^2/N - (r-1)(c-1)/(N-1) allowed for.
            let nf = n as f64;
            let (rf, kf) = (r as f64, k as f64);
            let den = (rf - 1.0 - (rf - 1.0).powi(2) / (nf - 1.0))
                .min(kf - 1.0 - (kf - 1.0).powi(2) / (nf - 1.0));
            let scale = (x2 / nf + (rf - 1.0) * (kf - 1.0) / (nf - 1.0)) / den;
            let got = cramers_v_corrected(x2, n, r, k);
            ck.close(
                || format!("{} bias-corrected V^2 [{src}]", c.name),
                got * got,
                vc * vc,
                1e-12,
                1e-12 * scale,
            );
        }
    }
    ck.finish("Cramer's V");
}

// ---------------------------------------------------------------------------------------
// Fisher

#[test]
fn fisher_exact_matches_exact_enumeration_and_scipy() {
    let fx = fixture::<FisherCase>("fisher.json");
    let mut ck = Checker::new();
    for c in &fx.cases {
        let [a, b, cc, d] = c.table;
        let n = a + b + cc + d;
        let got = fisher(a, b, cc, d);
        let rel = tol::fisher_rel(n);
        let what = |q: &'static str| move || format!("{} {q} [{}]", c.name, c.source);
        ck.close(
            what("two-sided p"),
            got.p_two_sided,
            c.p_two_sided,
            rel,
            tol::SUBNORMAL_ABS,
        );
        ck.close(
            what("p less"),
            got.p_less,
            c.p_less,
            rel,
            tol::SUBNORMAL_ABS,
        );
        ck.close(
            what("p greater"),
            got.p_greater,
            c.p_greater,
            rel,
            tol::SUBNORMAL_ABS,
        );
        ck.close(
            what("log10 p"),
            got.log10_p,
            c.log10_p,
            tol::LOG10_P_REL,
            tol::LOG10_P_ABS + rel / LN_10,
        );
        if c.scipy_agrees {
            let s = &c.scipy;
            let what = |q: &'static str| move || format!("{} {q} [{}]", c.name, s.source);
            ck.close(
                what("two-sided p"),
                got.p_two_sided,
                s.p_two_sided,
                tol::SCIPY_REL.max(rel),
                1e-300,
            );
            ck.close(
                what("p less"),
                got.p_less,
                s.p_less,
                tol::SCIPY_REL.max(rel),
                1e-300,
            );
            ck.close(
                what("p greater"),
                got.p_greater,
                s.p_greater,
                tol::SCIPY_REL.max(rel),
                1e-300,
            );
        }
    }
    ck.finish("Fisher's exact test");
}

// ---------------------------------------------------------------------------------------
// intervals

/// Both ends of `got` against a reference `(lower, upper, source, absolute tolerance)`.
fn check_interval(
    ck: &mut Checker,
    name: &str,
    got: dispar_stats::interval::Interval,
    (lower, upper, source, tolerance): (f64, f64, &str, f64),
) {
    ck.close(
        || format!("{name} lower [{source}]"),
        got.lower,
        lower,
        0.0,
        tolerance,
    );
    ck.close(
        || format!("{name} upper [{source}]"),
        got.upper,
        upper,
        0.0,
        tolerance,
    );
}

#[test]
fn wilson_intervals_match_the_closed_form_and_statsmodels() {
    let fx = fixture::<WilsonCase>("wilson.json");
    let mut ck = Checker::new();
    for c in &fx.cases {
        let ci = wilson(c.x, c.n, c.confidence).unwrap_or_else(|e| panic!("{}: {e}", c.name));
        let closed_form = (c.lower, c.upper, c.source.as_str(), tol::INTERVAL_ABS);
        check_interval(&mut ck, &c.name, ci, closed_form);
        let s = &c.statsmodels;
        let library = (
            s.lower,
            s.upper,
            s.source.as_str(),
            tol::INTERVAL_ABS_STATSMODELS,
        );
        check_interval(&mut ck, &c.name, ci, library);
    }
    ck.finish("Wilson intervals");
}

#[test]
fn newcombe_difference_intervals_match_the_closed_form_and_statsmodels() {
    let fx = fixture::<NewcombeCase>("newcombe.json");
    let mut ck = Checker::new();
    for c in &fx.cases {
        let ci = newcombe_difference(c.x1, c.n1, c.x2, c.n2, c.confidence)
            .unwrap_or_else(|e| panic!("{}: {e}", c.name));
        let closed_form = (c.lower, c.upper, c.source.as_str(), tol::INTERVAL_ABS);
        check_interval(&mut ck, &c.name, ci, closed_form);
        let s = &c.statsmodels;
        let library = (
            s.lower,
            s.upper,
            s.source.as_str(),
            tol::INTERVAL_ABS_STATSMODELS,
        );
        check_interval(&mut ck, &c.name, ci, library);
    }
    ck.finish("Newcombe difference intervals");
}

// ---------------------------------------------------------------------------------------
// multiple testing

#[test]
fn adjustments_match_statsmodels_multipletests() {
    let fx = fixture::<AdjustCase>("adjust.json");
    let mut ck = Checker::new();
    for c in &fx.cases {
        for (method, reference, label) in [
            (Adjustment::Holm, &c.holm, "holm"),
            (Adjustment::Bonferroni, &c.bonferroni, "bonferroni"),
            (Adjustment::Hochberg, &c.hochberg, "simes-hochberg"),
            (
                Adjustment::BenjaminiHochberg,
                &c.benjamini_hochberg,
                "fdr_bh",
            ),
        ] {
            let got = adjust(&c.p, method);
            ck.ok(
                || format!("{} {label}: {} values for {}", c.name, got.len(), c.p.len()),
                got.len() == reference.len(),
            );
            for (i, (g, r)) in got.iter().zip(reference).enumerate() {
                ck.close(
                    || format!("{} {label} [{i}] (raw {}) [{}]", c.name, c.p[i], c.source),
                    *g,
                    *r,
                    tol::ADJUST_REL,
                    1e-300,
                );
            }
        }
    }
    ck.finish("multiple-testing adjustments vs statsmodels");
}

// ---------------------------------------------------------------------------------------
// ANOM

#[test]
fn anom_critical_values_match_the_computed_box_probability_roots() {
    let fx = fixture::<AnomCase>("anom.json");
    let mut ck = Checker::new();
    for c in &fx.cases {
        let got = critical(c.alpha, c.k).unwrap_or_else(|e| panic!("{}: {e}", c.name));
        ck.ok(
            || {
                format!(
                    "{}: method {:?}, expected Exact (Sidak would be {})",
                    c.name, got.method, c.sidak_bound
                )
            },
            got.method == AnomMethod::Exact,
        );
        ck.close(
            || format!("{} h [{}]", c.name, c.source),
            got.h,
            c.h,
            0.0,
            tol::ANOM_H_ABS,
        );
        if let Some(s) = &c.scipy {
            ck.close(
                || format!("{} h [{}]", c.name, s.source),
                got.h,
                s.h,
                0.0,
                tol::ANOM_SCIPY_FLOOR + tol::ANOM_SCIPY_ACCURACIES * s.h_accuracy,
            );
        }
        ck.close(
            || format!("{} Sidak bound [scipy norm.isf]", c.name),
            sidak(c.alpha, c.k),
            c.sidak_bound,
            0.0,
            tol::SIDAK_ABS,
        );
        ck.ok(
            || {
                format!(
                    "{}: h {} above the Sidak bound {}",
                    c.name, got.h, c.sidak_bound
                )
            },
            got.h <= c.sidak_bound + tol::SIDAK_ABS,
        );
    }
    ck.finish("ANOM critical values");
}

#[test]
fn anom_critical_values_for_unequal_sizes_match_the_simulation() {
    let fx = fixture::<AnomSizesCase>("anom_sizes.json");
    let mut ck = Checker::new();
    for c in &fx.cases {
        let got =
            critical_for_sizes(c.alpha, &c.sizes).unwrap_or_else(|e| panic!("{}: {e}", c.name));
        ck.ok(
            || format!("{}: method {:?}, expected Exact", c.name, got.method),
            got.method == AnomMethod::Exact,
        );
        ck.close(
            || format!("{} h (simulated +- {:.5}) [{}]", c.name, c.se_h, c.source),
            got.h,
            c.h,
            0.0,
            tol::ANOM_SIM_SES * c.se_h,
        );
        ck.close(
            || format!("{} h [{}]", c.name, c.h_formula_source),
            got.h,
            c.h_formula,
            0.0,
            tol::ANOM_FORMULA_ABS,
        );
        // The simulation's own check of the formula: the fraction of draws beyond it is
        // alpha within its binomial error.
        ck.close(
            || {
                format!(
                    "{}: simulated exceedance at the formula's h [{}]",
                    c.name, c.source
                )
            },
            c.exceedance_at_formula,
            c.alpha,
            0.0,
            tol::ANOM_SIM_SES * c.se_exceedance,
        );
        if let Some(q) = c.quoted_h {
            // The issue quotes three decimals of its own 16-million-draw simulation.
            ck.close(
                || format!("{} h against the value quoted in issue 9", c.name),
                got.h,
                q,
                0.0,
                tol::ANOM_SIM_SES * c.se_h + 5e-4,
            );
        }
    }
    ck.finish("ANOM critical values for unequal sizes vs simulation");
}

// ---------------------------------------------------------------------------------------
// Monte Carlo

#[test]
fn monte_carlo_p_is_within_four_standard_errors_of_the_exact_conditional_p() {
    const B: u64 = 20_000;
    let fx = fixture::<MonteCarloCase>("montecarlo.json");
    let mut ck = Checker::new();
    for c in &fx.cases {
        let t = table_of(&c.counts);
        let mc = conditional_p(&t, B, table_seed(&t)).unwrap_or_else(|e| panic!("{}: {e}", c.name));
        let p = c.p_exact_pearson;
        let se = (p * (1.0 - p) / B as f64).sqrt();
        ck.close(
            || {
                format!(
                    "{} Monte Carlo p vs exact conditional p [{}]",
                    c.name, c.source
                )
            },
            mc.p,
            p,
            0.0,
            tol::MONTE_CARLO_SE * se + 1.0 / (B as f64 + 1.0),
        );
        ck.close(
            || format!("{} observed X^2 [exact rationals]", c.name),
            mc.statistic,
            c.pearson,
            1e-12,
            0.0,
        );
        ck.ok(
            || format!("{}: resamples {}", c.name, mc.resamples),
            mc.resamples == B,
        );
    }
    ck.finish("Monte Carlo conditional p vs exact enumeration");
}

// ---------------------------------------------------------------------------------------
// overdispersion

#[test]
fn spiegelhalter_phi_matches_count_winsorised_reference() {
    let fx = fixture::<OverdispersionCase>("overdispersion.json");
    let mut ck = Checker::new();
    for c in &fx.cases {
        let o =
            spiegelhalter(&c.z, c.winsor_fraction).unwrap_or_else(|e| panic!("{}: {e}", c.name));
        ck.close(
            || format!("{} phi [{}]", c.name, c.phi_count_source),
            o.phi,
            c.phi_count,
            tol::PHI_REL,
            0.0,
        );
    }
    ck.finish("Spiegelhalter overdispersion");
}
