//! Published check values, each with its source beside it. A value is checked only to the
//! precision the source prints (`tolerance::printed`). Where a figure was recalled rather
//! than read from the source at the time of writing, it says "from memory", and names the
//! reference library run that confirmed it (tools/reference/requirements.txt versions).

mod common;

use common::tolerance::printed;
use dispar_stats::analysis::{Method, Options, TestUsed, analyze, analyze_rates};
use dispar_stats::chisq::{critical_value, likelihood_ratio, pearson};
use dispar_stats::exact::fisher;
use dispar_stats::interval::{newcombe_difference, wilson};
use dispar_stats::residuals::cells;
use dispar_stats::table::Table;

fn within(actual: f64, published: f64, decimals: i32) -> bool {
    (actual - published).abs() <= printed(decimals)
}

#[test]
fn chi_square_critical_values_match_the_nist_sematech_table() {
    // NIST/SEMATECH e-Handbook of Statistical Methods, section 1.3.6.7.4, "Critical Values
    // of the Chi-Square Distribution": upper-tail critical values, probability of
    // exceeding 0.10, 0.05, 0.025, 0.01, 0.001; printed with 3 decimals. (Transcribed from
    // memory; every entry confirmed to round from scipy 1.17.1 chi2.isf.)
    let alphas = [0.10, 0.05, 0.025, 0.01, 0.001];
    let table: &[(u64, [f64; 5])] = &[
        (1, [2.706, 3.841, 5.024, 6.635, 10.828]),
        (2, [4.605, 5.991, 7.378, 9.210, 13.816]),
        (3, [6.251, 7.815, 9.348, 11.345, 16.266]),
        (4, [7.779, 9.488, 11.143, 13.277, 18.467]),
        (5, [9.236, 11.070, 12.833, 15.086, 20.515]),
        (10, [15.987, 18.307, 20.483, 23.209, 29.588]),
        (20, [28.412, 31.410, 34.170, 37.566, 45.315]),
        (30, [40.256, 43.773, 46.979, 50.892, 59.703]),
        (50, [63.167, 67.505, 71.420, 76.154, 86.661]),
        (100, [118.498, 124.342, 129.561, 135.807, 149.449]),
    ];
    for &(df, values) in table {
        for (alpha, published) in alphas.iter().zip(values) {
            let x = critical_value(*alpha, df).expect("valid alpha and df");
            assert!(
                within(x, published, 3),
                "NIST 1.3.6.7.4: df {df}, alpha {alpha}: got {x}, table {published}"
            );
        }
    }
    // The same table's lower-tail columns (probability of exceeding 0.90 .. 0.99).
    for (df, upper_prob, published) in [
        (5, 0.95, 1.145),
        (10, 0.90, 4.865),
        (10, 0.95, 3.940),
        (10, 0.99, 2.558),
        (20, 0.90, 12.443),
        (100, 0.95, 77.929),
        (100, 0.99, 70.065),
    ] {
        let x = critical_value(upper_prob, df).expect("valid");
        assert!(
            within(x, published, 3),
            "NIST 1.3.6.7.4 lower tail: df {df}, P(X > x) = {upper_prob}: got {x}, table {published}"
        );
    }
}

#[test]
fn nist_five_lot_proportions_example_is_rejected_at_five_percent() {
    // NIST/SEMATECH e-Handbook, section 7.4.6 (comparing several proportions): five lots of
    // 300 units with 36, 46, 42, 63, 38 nonconforming; X^2 = 12.13 on 4 df against the 0.05
    // critical value 9.488, so equal proportions are rejected.
    let groups = [(300, 36), (300, 46), (300, 42), (300, 63), (300, 38)];
    let t = Table::from_rates(&groups).expect("valid counts");
    let a = analyze(&t, &Options::default()).expect("testable");
    assert_eq!(
        a.test,
        TestUsed::Pearson,
        "Cochran's rule holds, so the asymptotic test runs"
    );
    assert_eq!(a.df, 4, "NIST 7.4.6: 4 degrees of freedom");
    assert!(
        within(a.statistic, 12.13, 2),
        "NIST 7.4.6: X^2 = 12.13, got {}",
        a.statistic
    );
    assert!(
        within(a.critical_value, 9.488, 3),
        "NIST 7.4.6: critical value 9.488, got {}",
        a.critical_value
    );
    assert!(
        a.reject,
        "NIST 7.4.6: the hypothesis of equal proportions is rejected at 0.05"
    );
    let r = analyze_rates(&groups, &Options::default()).expect("testable");
    assert!(r.test.reject, "the rate analysis agrees");
}

#[test]
fn fisher_tea_tasting_two_sided_p_is_0_4857() {
    // Fisher (1935), The Design of Experiments, section 2 (the lady tasting tea): of 8 cups
    // 4 had milk first; 3 of them identified correctly: [[3, 1], [1, 3]]. P(observed) =
    // 16/70, one-sided p = 17/70 = 0.2429, two-sided 34/70 = 0.4857 (as in Agresti, Categorical
    // Data Analysis, section 3.5). From memory; scipy 1.17.1 fisher_exact gives 0.485714.
    let f = fisher(3, 1, 1, 3);
    assert!(
        within(f.p_two_sided, 0.4857, 4),
        "two-sided p {}",
        f.p_two_sided
    );
    assert!(
        within(f.p_greater, 0.2429, 4),
        "one-sided p {}",
        f.p_greater
    );
}

#[test]
fn agresti_party_identification_by_gender() {
    // Agresti, An Introduction to Categorical Data Analysis (2nd ed., 2007), section 2.4
    // (party identification by gender, General Social Survey): rows female, male; columns Democrat,
    // Independent, Republican. X^2 = 30.1, G^2 = 30.0 on 2 df; adjusted (standardized)
    // residuals for females 4.50, 0.70, -5.32 and the negatives for males.
    // From memory; confirmed with scipy 1.17.1 chi2_contingency (30.070, 30.017) and
    // statsmodels 0.15.0 Table.standardized_resids (4.502, 0.699, -5.316).
    let t = Table::from_rows(&[vec![762, 327, 468], vec![484, 239, 477]]).expect("valid");
    assert!(within(pearson(&t), 30.1, 1), "X^2 {}", pearson(&t));
    assert!(
        within(likelihood_ratio(&t), 30.0, 1),
        "G^2 {}",
        likelihood_ratio(&t)
    );
    let a = analyze(&t, &Options::default()).expect("testable");
    assert_eq!(a.df, 2);
    let published = [4.50, 0.70, -5.32, -4.50, -0.70, 5.32];
    for (i, (cell, p)) in cells(&t).iter().zip(published).enumerate() {
        assert!(
            within(cell.adjusted_residual, p, 2),
            "Agresti (2007) section 2.4, cell {i}: adjusted residual {} vs {p}",
            cell.adjusted_residual
        );
    }
}

#[test]
fn agresti_aspirin_and_myocardial_infarction() {
    // Agresti, Categorical Data Analysis (2nd ed., 2002), the Physicians' Health Study table
    // (chapters 2-3): placebo 189 MI / 10,845 none; aspirin 104 / 10,933. X^2 = 25.01, G^2 = 25.37
    // on 1 df. From memory; confirmed with scipy 1.17.1 (25.014, 25.372).
    let t = Table::from_rows(&[vec![189, 10845], vec![104, 10933]]).expect("valid");
    assert!(within(pearson(&t), 25.01, 2), "X^2 {}", pearson(&t));
    assert!(
        within(likelihood_ratio(&t), 25.37, 2),
        "G^2 {}",
        likelihood_ratio(&t)
    );
    let g = analyze(
        &t,
        &Options {
            method: Method::LikelihoodRatio,
            ..Options::default()
        },
    )
    .expect("testable");
    assert!(within(g.statistic, 25.37, 2));
}

#[test]
fn newcombe_wilson_intervals_for_single_proportions() {
    // Newcombe (1998a), "Two-sided confidence intervals for the single proportion:
    // comparison of seven methods", Statistics in Medicine 17:857-872, worked examples, Wilson
    // score method without continuity correction, 95%. From memory; each confirmed with
    // statsmodels 0.15.0 proportion_confint(method="wilson").
    for (x, n, lo, hi) in [
        (81, 263, 0.2553, 0.3662),
        (15, 148, 0.0624, 0.1605),
        (0, 20, 0.0, 0.1611),
        (1, 29, 0.0061, 0.1718),
    ] {
        let ci = wilson(x, n, 0.95).expect("valid");
        assert!(
            within(ci.lower, lo, 4) && within(ci.upper, hi, 4),
            "Newcombe 1998a {x}/{n}: got {:.5} to {:.5}, published {lo} to {hi}",
            ci.lower,
            ci.upper
        );
    }
}

#[test]
fn newcombe_hybrid_score_difference_intervals() {
    // Newcombe (1998b), "Interval estimation for the difference between independent
    // proportions: comparison of eleven methods", Statistics in Medicine 17:873-890,
    // Table II, method 10 (score interval from Wilson limits), 95%, for p1 - p2, examples
    // (a)-(h). From memory; each confirmed with statsmodels 0.15.0
    // confint_proportions_2indep(method="newcomb", compare="diff").
    for (label, x1, n1, x2, n2, lo, hi) in [
        ("a", 56, 70, 48, 80, 0.0524, 0.3339),
        ("b", 9, 10, 3, 10, 0.1705, 0.8090),
        ("c", 6, 7, 2, 7, 0.0582, 0.8062),
        ("d", 5, 56, 0, 29, -0.0381, 0.1926),
        ("e", 0, 10, 0, 20, -0.1611, 0.2775),
        ("f", 0, 10, 0, 10, -0.2775, 0.2775),
        ("g", 10, 10, 0, 20, 0.6791, 1.0),
        ("h", 10, 10, 0, 10, 0.6075, 1.0),
    ] {
        let ci = newcombe_difference(x1, n1, x2, n2, 0.95).expect("valid");
        assert!(
            within(ci.lower, lo, 4) && within(ci.upper, hi, 4),
            "Newcombe 1998b example ({label}) {x1}/{n1} - {x2}/{n2}: got {:.5} to {:.5}, published {lo} to {hi}",
            ci.lower,
            ci.upper
        );
    }
}

#[test]
fn nist_proportion_control_chart_limits_around_a_baseline_rate() {
    // NIST/SEMATECH e-Handbook of Statistical Methods, section 6.3.3.2, "Proportions
    // Control Charts": 30 wafers of 50 chips, p̄ = 0.2313, three-sigma limits
    // UCL = 0.4102 and LCL = 0.0524 (printed with 4 decimals). The values are from
    // memory; they agree with the formula p̄ -/+ 3 sqrt(p̄(1 - p̄)/50) at p̄ = 347/1500 =
    // 0.23133 (0.41025 and 0.05242), which is what is checked here, and with the
    // handbook's rounding. The baseline below is constructed (not the handbook's wafer
    // data): 30 periods of 50 with 347 defectives in all and too little variation to raise
    // phi above 1. `compare` adds p̄'s own error (the prediction form, 1/50 + 1/1500), which
    // widens the chart's limits by sqrt(1 + 50/1500) = 1.0165, to 0.4131 and 0.0495: the
    // four periods below sit outside both versions or inside both, so the three-sigma
    // verdicts are the chart's.
    use dispar_stats::baseline::{BaselineOptions, Limit, Verdict, compare};
    let mut baseline: Vec<(u64, u64)> = (0..30).map(|j| (50, 11 + (j % 2))).collect();
    baseline[0].1 += 2; // 15 x 11 + 15 x 12 = 345, plus 2
    assert_eq!(baseline.iter().map(|b| b.1).sum::<u64>(), 347);
    let opts = BaselineOptions {
        limit: Limit::ThreeSigma,
        ..BaselineOptions::default()
    };
    let p_bar = 347.0 / 1500.0;
    let half = 3.0 * (p_bar * (1.0 - p_bar) / 50.0f64).sqrt();
    assert!(within(p_bar, 0.2313, 4));
    assert!(within(p_bar + half, 0.4102, 4), "UCL {}", p_bar + half);
    assert!(within(p_bar - half, 0.0524, 4), "LCL {}", p_bar - half);
    for (d, verdict) in [
        (21, Verdict::Worse), // 0.42 > 0.4102
        (20, Verdict::Usual), // 0.40
        (3, Verdict::Usual),  // 0.06
        (2, Verdict::Better), // 0.04 < 0.0524
    ] {
        let c = compare((50, d), &baseline, &opts).expect("valid");
        assert_eq!(c.dispersion, Some(1.0));
        assert!(c.left_out.is_empty());
        assert_eq!(c.verdict, verdict, "{d} of 50: z = {:?}", c.z);
        assert!((c.rate.expect("rate") - p_bar).abs() < 1e-15);
    }
}
