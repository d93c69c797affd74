//! `dispar analyze` as a process: a good file in each mode, and every kind of bad file
//! (exit code 2, a message naming the line and field on stderr).
//!
//! Reference values: the NIST/SEMATECH e-Handbook of Statistical Methods, section
//! 7.4.6 ("Comparing multiple proportions"), five lots of 300 units with 36, 46, 42, 63
//! and 38 nonconforming: X^2 = 12.13 on 4 degrees of freedom, rejected at 0.05 (critical
//! value 9.488, e-Handbook table 1.3.6.7.4). The exact X^2 is 464 (1/45 + 1/255) =
//! 12.130719 (sum of squared deviations 81 + 1 + 9 + 324 + 49 = 464 over expected 45
//! defective and 255 conforming per lot), and for 4 degrees of freedom the upper tail is
//! exactly exp(-x/2) (1 + x/2) (Abramowitz & Stegun 26.4.21, even df), 0.0164052.

#![allow(clippy::unwrap_used)] // tests: a panic is the failure report

use std::io::Write;
use std::process::{Command, Output, Stdio};

use dispar_system_tests::{Value, dispar_bin};

const NIST_LOTS: &str =
    "group,inspected,defective\nlot1,300,36\nlot2,300,46\nlot3,300,42\nlot4,300,63\nlot5,300,38\n";

/// Runs `dispar analyze ARGS` with `stdin` as standard input.
fn analyze(args: &[&str], stdin: &str) -> Output {
    let mut child = Command::new(dispar_bin())
        .arg("analyze")
        .args(args)
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("dispar runs");
    let mut input = child.stdin.take().expect("piped stdin");
    input.write_all(stdin.as_bytes()).expect("stdin written");
    drop(input);
    child.wait_with_output().expect("dispar finishes")
}

/// Writes `content` to a fresh file and runs `dispar analyze FILE ARGS`.
fn analyze_file(content: &[u8], args: &[&str]) -> Output {
    let dir = tempfile::tempdir().expect("temporary directory");
    let path = dir.path().join("input.csv");
    std::fs::write(&path, content).expect("file written");
    let mut all = vec![path.to_str().expect("utf-8 path")];
    all.extend(args);
    analyze(&all, "")
}

fn json_of(out: &Output) -> Value {
    assert!(
        out.status.success(),
        "exit {:?}, stderr: {}",
        out.status.code(),
        String::from_utf8_lossy(&out.stderr)
    );
    serde_json::from_slice(&out.stdout).expect("JSON on stdout")
}

fn close(actual: &Value, expected: f64, tolerance: f64, what: &str) {
    let a = actual
        .as_f64()
        .unwrap_or_else(|| panic!("{what} is not a number: {actual}"));
    assert!(
        (a - expected).abs() <= tolerance,
        "{what}: got {a}, expected {expected} +/- {tolerance}"
    );
}

#[test]
fn the_nist_five_lot_example_is_rejected_with_lot_4_flagged_above() {
    let v = json_of(&analyze(&["--format", "json"], NIST_LOTS));
    let t = &v["test"];
    assert_eq!(t["method"], "pearson", "{t}");
    close(&t["statistic"], 12.130_718_954_248_366, 1e-9, "X^2");
    assert_eq!(t["df"], 4);
    close(&t["p_value"], 0.016_405_221_988_903_654, 1e-12, "p");
    close(
        &t["log10_p"],
        0.016_405_221_988_903_654_f64.log10(),
        1e-10,
        "log10 p",
    );
    close(
        &t["critical_value"],
        9.488,
        5e-4,
        "critical value (NIST table 1.3.6.7.4)",
    );
    assert_eq!(t["significant"], true);
    assert!(t["cramers_v"].is_number());
    assert!(v["validity"]["min_expected"].is_number());
    assert!(v["validity"]["share_below_5"].is_number());
    assert!(v["validity"]["reason"].is_string());

    let groups = v["groups"].as_array().expect("groups");
    assert_eq!(groups.len(), 5);
    let lot4 = &groups[3];
    assert_eq!(lot4["code"], "lot4");
    assert_eq!(lot4["name"], Value::Null, "a file's groups have no names");
    assert_eq!(lot4["inspected"], 300);
    assert_eq!(lot4["defective"], 63);
    close(&lot4["rate"], 0.21, 1e-15, "rate of lot 4");
    close(&lot4["expected"], 45.0, 1e-12, "expected defective");
    // 324/45 + 324/255: both cells of the lot.
    close(
        &lot4["contribution"],
        324.0 / 45.0 + 324.0 / 255.0,
        1e-12,
        "contribution",
    );
    // Haberman: 18 / sqrt(45 (1 - 300/1500) (1 - 225/1500)).
    close(
        &lot4["adjusted_residual"],
        18.0 / (45.0_f64 * 0.8 * 0.85).sqrt(),
        1e-12,
        "adjusted residual",
    );
    assert_eq!(lot4["flag"], "above");
    let ci = &lot4["rate_ci"];
    assert!(
        ci["lower"].as_f64().unwrap() < 0.21 && ci["upper"].as_f64().unwrap() > 0.21,
        "{ci}"
    );
    for g in &groups[..3] {
        assert_eq!(g["flag"], Value::Null, "{g}");
    }

    let pairs = v["pairs"].as_array().expect("pairs");
    assert_eq!(pairs.len(), 10, "5 lots give 10 pairs");
    for p in pairs {
        for field in [
            "a",
            "b",
            "method",
            "difference",
            "difference_ci",
            "p_value",
            "p_adjusted",
            "significant",
        ] {
            assert!(!p[field].is_null(), "pair lacks {field}: {p}");
        }
        assert!(
            p["p_adjusted"].as_f64().unwrap() >= p["p_value"].as_f64().unwrap(),
            "{p}"
        );
    }
    assert_eq!(v["flagged"][0]["code"], "lot4");
    assert!(v["cautions"].as_array().is_some_and(|c| !c.is_empty()));
}

#[test]
fn a_file_argument_and_the_text_format_work() {
    let out = analyze_file(NIST_LOTS.as_bytes(), &[]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let text = String::from_utf8(out.stdout).expect("utf-8 text");
    assert!(
        text.contains("Verdict: Significant at α = 0.05: "),
        "{text}"
    );
    assert!(text.contains("lot4"), "{text}");
    assert!(text.contains("Cramér's V"), "{text}");
}

#[test]
fn a_table_of_raw_counts_is_tested_for_association() {
    // Fisher's tea-tasting table [[3,1],[1,3]]: Cochran's rule fails (expected 2), so
    // the exact test runs; two-sided p = 0.4857 (Fisher 1935, The Design of Experiments).
    let out = analyze(
        &["--table", "--format", "json"],
        "guess,milk first,tea first\nmilk first,3,1\ntea first,1,3\n",
    );
    let v = json_of(&out);
    assert_eq!(v["test"]["method"], "fisher", "{v}");
    close(
        &v["test"]["p_value"],
        17.0 / 35.0,
        1e-12,
        "Fisher two-sided p",
    );
    assert_eq!(v["test"]["significant"], false);
    assert_eq!(v["table"]["cells"].as_array().map(Vec::len), Some(4));
}

#[test]
fn a_single_group_is_not_testable_and_a_group_without_units_is_excluded() {
    let v = json_of(&analyze(
        &["--format", "json"],
        "group,inspected,defective\nA,100,3\nB,0,0\n",
    ));
    assert_eq!(v["test"], Value::Null);
    assert!(v["not_testable"]["reason"].is_string(), "{v}");
    assert_eq!(v["excluded"][0]["code"], "B");
    assert_eq!(v["excluded"][0]["reason"], "no units inspected");
}

/// Every kind of bad input: exit code 2 and a message naming the line (and field).
#[test]
fn bad_input_exits_2_naming_the_line_and_field() {
    let cases: [(&str, &[&str], &str, &[&str]); 11] = [
        (
            "negative number",
            &[],
            "group,inspected,defective\nA,100,-1\n",
            &["line 2", "defective", "negative"],
        ),
        (
            "defective > inspected",
            &[],
            "group,inspected,defective\nA,10,11\n",
            &["line 2", "defective", "exceeds inspected"],
        ),
        (
            "ragged row",
            &[],
            "group,inspected,defective\nA,10,1\nB,10\n",
            &["line 3", "2 fields", "header has 3"],
        ),
        (
            "not a number",
            &[],
            "group,inspected,defective\nA,ten,1\n",
            &["line 2", "inspected", "not a number"],
        ),
        (
            "fraction",
            &[],
            "group,inspected,defective\nA,10.5,1\n",
            &["line 2", "inspected", "whole number"],
        ),
        (
            "duplicate group",
            &[],
            "group,inspected,defective\nA,10,1\nB,10,1\nA,5,1\n",
            &["line 4", "group", "line 2"],
        ),
        ("empty file", &[], "", &["line 1", "empty"]),
        (
            "header only",
            &[],
            "group,inspected,defective\n",
            &["line 2", "no group rows"],
        ),
        (
            "missing column",
            &[],
            "group,inspected\nA,10\n",
            &["line 1", "defective"],
        ),
        (
            "table with a negative",
            &["--table"],
            "group,a,b\nA,1,-2\n",
            &["line 2", "\"b\"", "negative"],
        ),
        (
            "table with a duplicate outcome",
            &["--table"],
            "group,a,a\nA,1,2\n",
            &["line 1", "\"a\"", "twice"],
        ),
    ];
    for (what, args, input, needles) in cases {
        let out = analyze(args, input);
        let stderr = String::from_utf8_lossy(&out.stderr);
        assert_eq!(
            out.status.code(),
            Some(2),
            "{what}: exit code; stderr: {stderr}"
        );
        assert!(out.stdout.is_empty(), "{what}: nothing on stdout");
        for n in needles {
            assert!(
                stderr.contains(n),
                "{what}: stderr should mention {n:?}: {stderr}"
            );
        }
    }
}

#[test]
fn invalid_utf8_a_missing_file_and_bad_options_exit_2() {
    let out = analyze_file(b"group,inspected,defective\nA\xff,10,1\n", &[]);
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("line 2"));

    let out = analyze(&["/nonexistent/dir/none.csv"], "");
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("cannot read"));

    for args in [
        &["--alpha", "1.5"][..],
        &["--method", "chi"],
        &["--resamples", "5"],
        &["--min-difference", "-1"],
    ] {
        let out = analyze(args, NIST_LOTS);
        assert_eq!(
            out.status.code(),
            Some(2),
            "{args:?}: {}",
            String::from_utf8_lossy(&out.stderr)
        );
    }
}

/// The five NIST lots as (defective, conforming) cells, for statistics computed here by
/// their definitions.
const NIST_CELLS: [(f64, f64); 5] = [
    (36.0, 264.0),
    (46.0, 254.0),
    (42.0, 258.0),
    (63.0, 237.0),
    (38.0, 262.0),
];

fn pairs_of(v: &Value) -> Vec<Value> {
    v["pairs"].as_array().expect("pairs").clone()
}

fn f(v: &Value) -> f64 {
    v.as_f64().unwrap_or_else(|| panic!("not a number: {v}"))
}

#[test]
fn effect_size_and_validity_follow_their_definitions() {
    // Cramer's V = sqrt(X^2 / (N (min(r, c) - 1))) (Cramer 1946, Mathematical Methods of
    // Statistics, 21.9) with the NIST 7.4.6 X^2 = 464 (1/45 + 1/255) and N = 1500; every
    // expected count is 45 (defective) or 255 (conforming), so Cochran's rule holds.
    let v = json_of(&analyze(&["--format", "json"], NIST_LOTS));
    let x2: f64 = 464.0 * (1.0 / 45.0 + 1.0 / 255.0);
    close(
        &v["test"]["cramers_v"],
        (x2 / 1500.0).sqrt(),
        1e-12,
        "Cramer's V",
    );
    close(
        &v["validity"]["min_expected"],
        45.0,
        1e-12,
        "smallest expected count",
    );
    close(&v["validity"]["share_below_5"], 0.0, 0.0, "share below 5");
    assert_eq!(v["validity"]["cochran_holds"], true, "{}", v["validity"]);

    // Pairwise differences are the rate differences; the default adjustment is Holm
    // (Holm 1979, Scand. J. Statist. 6:65-70): step-down max of (m - i) p_(i), capped at 1.
    let pairs = pairs_of(&v);
    let lot14 = pairs
        .iter()
        .find(|p| p["a"] == "lot1" && p["b"] == "lot4")
        .expect("pair lot1-lot4");
    close(
        &lot14["difference"],
        0.12 - 0.21,
        1e-12,
        "difference lot1 - lot4",
    );
    let ci = &lot14["difference_ci"];
    assert!(f(&ci["lower"]) < -0.09 && f(&ci["upper"]) > -0.09, "{ci}");
    let raw: Vec<f64> = pairs.iter().map(|p| f(&p["p_value"])).collect();
    let mut order: Vec<usize> = (0..raw.len()).collect();
    order.sort_by(|&i, &j| raw[i].total_cmp(&raw[j]));
    let m = raw.len() as f64;
    let mut running: f64 = 0.0;
    for (rank, &i) in order.iter().enumerate() {
        running = running.max(((m - rank as f64) * raw[i]).min(1.0));
        close(&pairs[i]["p_adjusted"], running, 1e-12, "Holm-adjusted p");
    }
}

#[test]
fn the_method_pairwise_and_adjust_options_are_honoured() {
    // --method g: G^2 = 2 sum O ln(O / E) by its definition (Agresti, Categorical Data
    // Analysis, 2nd ed., section 1.5.5 / 3.2; section numbers from memory), E = 45 and 255.
    let v = json_of(&analyze(&["--format", "json", "--method", "g"], NIST_LOTS));
    assert_eq!(v["test"]["method"], "g", "{}", v["test"]);
    let g2: f64 = NIST_CELLS
        .iter()
        .map(|&(d, c)| 2.0 * (d * (d / 45.0).ln() + c * (c / 255.0).ln()))
        .sum();
    close(&v["test"]["statistic"], g2, 1e-9, "G^2");

    // --adjust bonferroni: min(1, m p) with m = 10 pairs (Bonferroni; definition).
    let v = json_of(&analyze(
        &["--format", "json", "--adjust", "bonferroni"],
        NIST_LOTS,
    ));
    for p in pairs_of(&v) {
        let raw = f(&p["p_value"]);
        close(&p["p_adjusted"], (10.0 * raw).min(1.0), 1e-12, "Bonferroni");
    }

    // --adjust bh: step-up min over j >= i of m p_(j) / j (Benjamini & Hochberg 1995,
    // JRSS B 57:289-300).
    let v = json_of(&analyze(&["--format", "json", "--adjust", "bh"], NIST_LOTS));
    let pairs = pairs_of(&v);
    let raw: Vec<f64> = pairs.iter().map(|p| f(&p["p_value"])).collect();
    let m = raw.len();
    for (i, p) in pairs.iter().enumerate() {
        let expected = raw
            .iter()
            .filter(|&&q| q >= raw[i])
            .map(|&q| {
                let rank = raw.iter().filter(|&&r| r <= q).count();
                q * m as f64 / rank as f64
            })
            .fold(1.0_f64, f64::min);
        close(&p["p_adjusted"], expected, 1e-12, "Benjamini-Hochberg");
    }

    // --pairwise pearson-yates: X^2 = N (|ad - bc| - N/2)^2 / (R1 R2 C1 C2) (Yates 1934;
    // definition) for every pair, named as such.
    let v = json_of(&analyze(
        &["--format", "json", "--pairwise", "pearson-yates"],
        NIST_LOTS,
    ));
    let index = |name: &Value| -> usize {
        let s = name.as_str().expect("group name");
        s.trim_start_matches("lot").parse::<usize>().expect("lotN") - 1
    };
    for p in pairs_of(&v) {
        assert_eq!(p["method"], "pearson-yates", "{p}");
        let (a, b) = (NIST_CELLS[index(&p["a"])], NIST_CELLS[index(&p["b"])]);
        let n = a.0 + a.1 + b.0 + b.1;
        let det = (a.0 * b.1 - a.1 * b.0).abs();
        let yates = n * (det - n / 2.0).max(0.0).powi(2)
            / ((a.0 + a.1) * (b.0 + b.1) * (a.0 + b.0) * (a.1 + b.1));
        close(&p["statistic"], yates, 1e-9, "Yates X^2");
    }

    // --pairwise fisher: every pair by the exact test (its p-values are checked against
    // exact enumeration in crates/dispar-stats/tests/reference.rs).
    let v = json_of(&analyze(
        &["--format", "json", "--pairwise", "fisher"],
        NIST_LOTS,
    ));
    for p in pairs_of(&v) {
        assert_eq!(p["method"], "fisher", "{p}");
        let raw = f(&p["p_value"]);
        assert!(raw > 0.0 && raw <= 1.0, "{p}");
    }
}

#[test]
fn a_monte_carlo_p_is_reproducible_and_reports_its_resamples_and_error() {
    // --method exact on a 5 x 2 table: the Monte Carlo conditional p = (1 + b) / (1 + B)
    // with standard error sqrt(p (1 - p) / B) (Patefield 1981, Applied Statistics 30:91-97
    // for the sampler; the estimator as in Davison & Hinkley 1997, section 4.2.1, from
    // memory). Counts this large make the asymptotic p (0.0164052, see the module docs)
    // a reference within a few standard errors.
    let args = [
        "--format",
        "json",
        "--method",
        "exact",
        "--resamples",
        "2000",
    ];
    let first = json_of(&analyze(&args, NIST_LOTS));
    let second = json_of(&analyze(&args, NIST_LOTS));
    let t = &first["test"];
    assert_eq!(t["method"], "monte-carlo", "{t}");
    assert_eq!(t["resamples"], 2000, "{t}");
    assert_eq!(
        t["p_value"], second["test"]["p_value"],
        "same table, same p"
    );
    let p = f(&t["p_value"]);
    let b = p * 2001.0 - 1.0;
    assert!(
        (b - b.round()).abs() < 1e-9,
        "p = (1 + b) / (1 + B): b = {b}"
    );
    let se = (p * (1.0 - p) / 2000.0).sqrt();
    close(&t["p_std_error"], se, 1e-12, "standard error");
    assert!(
        (p - 0.016_405_221_988_903_654).abs() <= 4.0 * se + 1.0 / 2001.0,
        "Monte Carlo p {p} far from the asymptotic 0.0164052 (se {se})"
    );
}
