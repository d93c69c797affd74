//! Terminal layout of reports (UTF-8 text), shared by `dispar analyze` and
//! `dispar report`.
//!
//! Section headings carry the names of the JSON keys they show (glossary in the
//! project's DEVELOPERS.md): "Verdict" (`test.verdict`), "Flag rule" (`flag_rule`),
//! "Overdispersion", "Flagged contributors" (`flagged`), "Pairwise comparisons"
//! (`pairs`), "Product mix" (`product_mix`), "Power" (`power`), "Data gaps"
//! (`data_gaps`), "Excluded" and "Cautions".

use std::fmt::Write as _;

use super::model::{
    BaselineVerdict, CategoryReport, Ci, DataGaps, Excluded, GroupRow, PairRow, ParametersEcho,
    ProductMix, Report, TableAnalysis, TableReport, Test, ValidityNotes,
};
use super::params::LevelKind;

/// Pairs listed in full in text; with more, only those with a significant adjusted
/// p-value are listed (the JSON always has every pair).
pub const TEXT_MAX_PAIRS: usize = 30;

/// A whole number with thousands separators: `664,474` (for sentences people read;
/// tables of counts meant for machines keep plain digits).
pub fn fmt_count(n: u64) -> String {
    let digits = n.to_string();
    let mut out = String::with_capacity(digits.len() + digits.len() / 3);
    for (i, c) in digits.chars().enumerate() {
        if i > 0 && (digits.len() - i).is_multiple_of(3) {
            out.push(',');
        }
        out.push(c);
    }
    out
}

/// A p-value for people: 4 decimals, scientific below 0.0001, and the power of ten
/// when it underflows to 0.
pub fn fmt_p(p: f64, log10_p: f64) -> String {
    if p >= 0.0001 {
        format!("{p:.4}")
    } else if p > 0.0 {
        format!("{p:.2e}")
    } else {
        format!("10^{log10_p:.1}")
    }
}

/// A rate as a percentage: two decimals, four below 0.1% (so that rates in the
/// parts-per-million range stay visible).
pub fn fmt_rate(r: f64) -> String {
    let pct = r * 100.0;
    if pct != 0.0 && pct.abs() < 0.1 {
        format!("{pct:.4}%")
    } else {
        format!("{pct:.2}%")
    }
}

fn fmt_ci(ci: &Ci) -> String {
    format!("[{}, {}]", fmt_rate(ci.lower), fmt_rate(ci.upper))
}

fn fmt_diff(d: f64) -> String {
    format!("{:+.3} pp", d * 100.0)
}

fn fmt_diff_ci(ci: &Ci) -> String {
    format!("[{:+.3}, {:+.3}]", ci.lower * 100.0, ci.upper * 100.0)
}

/// Lays out rows of cells in columns: the first column left-aligned, the others
/// right-aligned, two spaces apart.
fn table(out: &mut String, header: &[&str], rows: &[Vec<String>]) {
    let cols = header.len();
    let mut width: Vec<usize> = header.iter().map(|h| h.chars().count()).collect();
    for r in rows {
        for (i, c) in r.iter().enumerate().take(cols) {
            width[i] = width[i].max(c.chars().count());
        }
    }
    let line = |out: &mut String, cells: &mut dyn Iterator<Item = &str>| {
        let mut s = String::new();
        for (i, c) in cells.enumerate() {
            let pad = width[i].saturating_sub(c.chars().count());
            if i == 0 {
                s.push_str(c);
                s.push_str(&" ".repeat(pad));
            } else {
                s.push_str("  ");
                s.push_str(&" ".repeat(pad));
                s.push_str(c);
            }
        }
        out.push_str(s.trim_end());
        out.push('\n');
    };
    line(out, &mut header.iter().copied());
    let rule: Vec<String> = width.iter().map(|w| "-".repeat(*w)).collect();
    line(out, &mut rule.iter().map(String::as_str));
    for r in rows {
        line(out, &mut r.iter().map(String::as_str));
    }
}

fn params_line(out: &mut String, p: &ParametersEcho) {
    let _ = write!(
        out,
        "alpha {}, method {}, pairwise {}, adjust {}, overdispersion {}",
        p.alpha, p.method, p.pairwise, p.adjust, p.overdispersion
    );
    if let Some(d) = p.min_difference {
        let _ = write!(out, ", min_difference {:.2} pp", d * 100.0);
    }
    if let Some(n) = p.baseline {
        let _ = write!(out, ", baseline {n}");
    }
    if p.stratify != super::params::StratifyChoice::Product {
        let _ = write!(out, ", stratify {}", p.stratify);
    }
    if let Some(a) = &p.as_of {
        let _ = write!(out, ", data as of {a}");
    }
    out.push('\n');
}

fn test_lines(out: &mut String, t: &Test, v: Option<&ValidityNotes>, alpha: f64) {
    let _ = writeln!(out, "Verdict: {}", t.verdict);
    let name = match t.method {
        "g" => "G^2",
        _ => "X^2",
    };
    let _ = write!(
        out,
        "Test: {} ({name} = {:.4}, df {}, p = {}",
        method_words(t.method),
        t.statistic,
        t.df,
        fmt_p(t.p_value, t.log10_p)
    );
    if let Some(se) = t.p_std_error {
        let _ = write!(
            out,
            " +/- {se:.4} over {} resamples",
            t.resamples.unwrap_or(0)
        );
    }
    let _ = writeln!(
        out,
        "; critical value {:.4} at α = {alpha}; Cramér's V {:.4}, corrected {:.4})",
        t.critical_value, t.cramers_v, t.cramers_v_corrected
    );
    if v.is_some() {
        let _ = writeln!(out, "Method: {}", t.method_reason);
    }
}

/// Plain words for a method code.
pub fn method_words(m: &str) -> &'static str {
    match m {
        "pearson" => "Pearson chi-square",
        "pearson-yates" => "Pearson chi-square with Yates' correction",
        "g" => "likelihood-ratio G-test",
        "fisher" => "Fisher's exact test",
        "monte-carlo" => "Monte Carlo exact conditional test",
        _ => "test",
    }
}

/// A group's code, with its name in brackets when it has one that differs.
fn labelled(code: &str, name: Option<&str>) -> String {
    match name {
        Some(n) if n != code => format!("{code} ({n})"),
        _ => code.to_owned(),
    }
}

fn group_rows(groups: &[GroupRow]) -> Vec<Vec<String>> {
    groups
        .iter()
        .map(|g| {
            vec![
                labelled(&g.code, g.name.as_deref()),
                g.inspected.to_string(),
                g.defective.to_string(),
                fmt_rate(g.rate),
                fmt_ci(&g.rate_ci),
                format!("{:.2}", g.expected),
                g.adjusted_residual
                    .map_or(String::new(), |r| format!("{r:+.2}")),
                g.flag.map_or(String::new(), |f| f.as_str().to_owned()),
                g.share_of_statistic
                    .map_or(String::new(), |x| format!("{:.1}%", x * 100.0)),
            ]
        })
        .collect()
}

fn pair_rows(pairs: &[&PairRow], with_practical: bool) -> Vec<Vec<String>> {
    pairs
        .iter()
        .map(|p| {
            let mut row = vec![
                format!("{} - {}", p.a, p.b),
                p.method.to_owned(),
                fmt_diff(p.difference),
                fmt_diff_ci(&p.difference_ci),
                match (p.p_value, p.log10_p) {
                    (Some(v), Some(l)) => fmt_p(v, l),
                    _ => "untestable".to_owned(),
                },
                p.p_adjusted
                    .map_or_else(String::new, |a| fmt_p(a, a.max(f64::MIN_POSITIVE).log10())),
                if p.significant { "yes" } else { "no" }.to_owned(),
            ];
            if with_practical {
                row.push(match p.beyond_min_difference {
                    Some(true) => "yes".to_owned(),
                    Some(false) => "no".to_owned(),
                    None => String::new(),
                });
            }
            row
        })
        .collect()
}

fn analysis_lines(out: &mut String, t: &TableAnalysis, alpha: f64) {
    match (&t.test, &t.not_testable) {
        (Some(test), _) => test_lines(out, test, t.validity.as_ref(), alpha),
        (None, Some(nt)) => {
            let _ = writeln!(out, "Not testable: {}", nt.reason);
        }
        (None, None) => {}
    }
    let mut header: Vec<&str> = vec![""];
    header.extend(t.columns.iter().map(|c| c.code.as_str()));
    header.push("total");
    let ncols = t.columns.len();
    let rows: Vec<Vec<String>> = t
        .rows
        .iter()
        .enumerate()
        .map(|(r, m)| {
            let mut row = vec![m.code.clone()];
            for c in 0..ncols {
                row.push(t.cells.get(r * ncols + c).map_or(String::new(), |cell| {
                    format!("{} ({:+.1})", cell.observed, cell.adjusted_residual)
                }));
            }
            row.push(m.total.to_string());
            row
        })
        .collect();
    out.push_str("Counts (adjusted residual):\n");
    table(out, &header, &rows);
    excluded_lines(out, &t.excluded);
}

fn excluded_lines(out: &mut String, excluded: &[Excluded]) {
    if excluded.is_empty() {
        return;
    }
    out.push_str("\nExcluded:\n");
    for e in excluded {
        let _ = writeln!(
            out,
            "- {}: {}",
            labelled(&e.code, e.name.as_deref()),
            e.reason
        );
    }
}

fn categories_lines(out: &mut String, c: &CategoryReport, alpha: f64) {
    out.push_str("\nDefect categories (do the groups differ in their defect mix?)\n");
    let rows: Vec<Vec<String>> = c
        .totals
        .iter()
        .map(|t| {
            vec![
                t.category.clone(),
                t.defects.to_string(),
                format!("{:.1}%", t.share * 100.0),
            ]
        })
        .collect();
    table(out, &["category", "defects", "share"], &rows);
    analysis_lines(out, &c.association, alpha);
}

/// Each group against its own baseline, changes first.
fn baseline_lines(out: &mut String, r: &Report) {
    let rows: Vec<Vec<String>> = r
        .groups
        .iter()
        .filter_map(|g| {
            let b = g.baseline.as_ref()?;
            Some(vec![
                labelled(&g.code, g.name.as_deref()),
                b.verdict.as_str().to_owned(),
                fmt_rate(g.rate),
                b.rate.map_or_else(String::new, fmt_rate),
                b.ratio.map_or_else(String::new, |x| format!("{x:.2}")),
                b.z.map_or_else(String::new, |z| format!("{z:+.2}")),
                format!("{:.2}", b.limit),
                b.periods.to_string(),
                b.reason.clone(),
            ])
        })
        .collect();
    if rows.is_empty() {
        return;
    }
    out.push_str("Against each group's own baseline:\n");
    table(
        out,
        &[
            "group", "verdict", "rate", "usual", "ratio", "z", "limit", "periods", "reason",
        ],
        &rows,
    );
    out.push('\n');
}

fn cautions_lines(out: &mut String, cautions: &[String]) {
    out.push_str("\nCautions:\n");
    for c in cautions {
        let _ = writeln!(out, "- {c}");
    }
}

/// "site" or "line" for the groups of a report.
fn group_word(level: Option<LevelKind>) -> (&'static str, &'static str) {
    match level {
        Some(LevelKind::Site) => ("site", "sites"),
        Some(LevelKind::Line | LevelKind::AllLines) => ("line", "lines"),
        None => ("group", "groups"),
    }
}

impl Report {
    /// The report's verdict in words, leading with what changed: the groups worse or
    /// better than their own usual, then the persistent differences between the
    /// groups, then the binomial test's verdict with the volume caveat where it
    /// applies. E.g. "KES worse than its usual (2.02% against about 0.71%); the other
    /// sites as usual. The sites also differ as they usually do: ... Significant at
    /// α = 0.05: ...".
    pub fn headline(&self) -> String {
        let (one, many) = group_word(self.level);
        let unit = super::baseline::unit_of(self.period.as_ref());
        let mut parts: Vec<String> = Vec::new();
        let with_baseline: Vec<&GroupRow> = self
            .groups
            .iter()
            .filter(|g| g.baseline.is_some())
            .collect();
        if !with_baseline.is_empty() {
            let mut s = if self.changes.is_empty() {
                format!("No {one} is worse or better than its usual")
            } else {
                self.changes
                    .iter()
                    .map(|c| {
                        format!(
                            "{} {} than its usual ({} against about {})",
                            c.code,
                            c.verdict.as_str(),
                            fmt_rate(c.rate),
                            fmt_rate(c.baseline_rate)
                        )
                    })
                    .collect::<Vec<_>>()
                    .join("; ")
            };
            let unknown = with_baseline
                .iter()
                .filter(|g| {
                    g.baseline
                        .as_ref()
                        .is_some_and(|b| b.verdict == BaselineVerdict::Unknown)
                })
                .count();
            let usual = with_baseline
                .iter()
                .filter(|g| {
                    g.baseline
                        .as_ref()
                        .is_some_and(|b| b.verdict == BaselineVerdict::Usual)
                })
                .count();
            if !self.changes.is_empty() && usual > 0 {
                s.push_str(&format!("; the other {many} as usual"));
            }
            if unknown > 0 {
                s.push_str(&format!(
                    " ({unknown} {} without enough earlier {unit}s to tell)",
                    if unknown == 1 { one } else { many }
                ));
            }
            s.push('.');
            parts.push(s);
        }
        if let Some(spread) = &self.usual_spread {
            let persistent = super::baseline::persistent_words(spread, unit);
            let differ = self.test.as_ref().is_some_and(|t| t.significant);
            let usually = spread.phi.is_some_and(|phi| phi > 1.0);
            if differ && usually {
                let mut s = format!("The {many} also differ as they usually do");
                if !persistent.is_empty() {
                    s.push_str(&format!(": {}", persistent.join("; ")));
                }
                s.push('.');
                parts.push(s);
            } else if !persistent.is_empty() {
                parts.push(format!(
                    "Persistent differences: {}.",
                    persistent.join("; ")
                ));
            }
        }
        match (&self.test, &self.not_testable) {
            (Some(t), _) => {
                parts.push(t.verdict.clone());
                if let Some(c) = self
                    .cautions
                    .iter()
                    .find(|c| c.contains("even small differences are statistically significant"))
                {
                    parts.push(c.clone());
                }
            }
            (None, Some(n)) => parts.push(format!("Not testable: {}.", n.reason)),
            (None, None) => {}
        }
        parts.join(" ")
    }

    /// The report as readable text for a terminal.
    pub fn to_text(&self) -> String {
        let mut out = String::new();
        let what = match self.level {
            Some(LevelKind::Site) => "site",
            Some(LevelKind::Line) => "line",
            Some(LevelKind::AllLines) => "line, all sites",
            None => "group",
        };
        let _ = write!(out, "Defect rates by {what}");
        if let Some(site) = &self.filters.site {
            let _ = write!(out, ", site {site}");
        }
        if let Some(product) = &self.filters.product {
            let _ = write!(out, ", product {product}");
        }
        if let (Some(p), Some(d)) = (&self.period, &self.dates) {
            let _ = write!(
                out,
                ", {p} ({} .. {})",
                crate::date::format_date(d.first()),
                crate::date::format_date(d.last())
            );
        }
        out.push('\n');
        params_line(&mut out, &self.parameters);
        out.push('\n');
        let alpha = self.parameters.alpha;
        let _ = writeln!(out, "{}\n", self.headline());
        baseline_lines(&mut out, self);
        match (&self.test, &self.not_testable) {
            (Some(t), _) => test_lines(&mut out, t, self.validity.as_ref(), alpha),
            (None, Some(nt)) => {
                let _ = writeln!(out, "Not testable: {}", nt.reason);
            }
            (None, None) => {}
        }
        if let Some(g) = self.data_gaps.as_ref().filter(|g| !g.is_empty()) {
            let _ = writeln!(out, "Data gaps: {}", g.note);
        }
        if let Some(p) = &self.power {
            let _ = writeln!(out, "Power: {}", p.note);
        }
        if let Some(mix) = &self.product_mix {
            for d in mix.disagreements.iter().filter(|d| d.code.is_none()) {
                let _ = writeln!(out, "Product mix: {}", d.note);
            }
        }
        if !self.groups.is_empty() {
            out.push('\n');
            let conf = format!("{:.0}% CI", (1.0 - alpha) * 100.0);
            let mut rows = group_rows(&self.groups);
            rows.push(vec![
                "total".to_owned(),
                self.totals.inspected.to_string(),
                self.totals.defective.to_string(),
                fmt_rate(self.totals.rate),
            ]);
            table(
                &mut out,
                &[
                    "group",
                    "inspected",
                    "defective",
                    "rate",
                    &conf,
                    "expected",
                    "adj.res",
                    "flag",
                    "share X^2",
                ],
                &rows,
            );
        }
        if let Some(r) = &self.flag_rule {
            let widened = self.overdispersion.as_ref().is_some_and(|o| o.applied);
            let _ = writeln!(
                out,
                "\nFlag rule: flagged when |adjusted residual| > {:.3} (ANOM critical value {:.3}, {}{})",
                r.limit,
                r.critical_value,
                r.method,
                if widened {
                    ", widened by sqrt(phi)"
                } else {
                    ""
                }
            );
        }
        if let Some(o) = &self.overdispersion {
            let _ = writeln!(out, "Overdispersion: {}", o.note);
        }
        if !self.flagged.is_empty() {
            out.push_str("\nFlagged contributors:\n");
            for f in &self.flagged {
                let _ = writeln!(
                    out,
                    "- {}: {} the pooled rate ({}, adjusted residual {:+.2}, {:.1}% of X^2)",
                    labelled(&f.code, f.name.as_deref()),
                    f.flag.as_str(),
                    fmt_rate(f.rate),
                    f.adjusted_residual,
                    f.share_of_statistic * 100.0
                );
            }
        } else if self.test.is_some() {
            out.push_str("\nFlagged contributors: none.\n");
        }
        if !self.pairs.is_empty() {
            let shown: Vec<&PairRow> = if self.pairs.len() > TEXT_MAX_PAIRS {
                self.pairs.iter().filter(|p| p.significant).collect()
            } else {
                self.pairs.iter().collect()
            };
            let n = self.pairs.len();
            let _ = writeln!(
                out,
                "\nPairwise comparisons ({n} {}, p adjusted by {}){}",
                if n == 1 { "pair" } else { "pairs" },
                self.parameters.adjust,
                if shown.len() < n {
                    format!(
                        "; the {} significant ones shown (all are in the JSON)",
                        shown.len()
                    )
                } else {
                    String::new()
                }
            );
            let practical = self.parameters.min_difference;
            let mut header = vec![
                "pair",
                "method",
                "difference",
                "CI (pp)",
                "p",
                "p adjusted",
                "significant",
            ];
            if let Some(d) = practical {
                header.push("beyond min difference");
                let _ = writeln!(
                    out,
                    "beyond min difference: the whole interval lies beyond the minimum difference of interest ({:.2} pp)",
                    d * 100.0
                );
            }
            if !shown.is_empty() {
                table(&mut out, &header, &pair_rows(&shown, practical.is_some()));
            }
        }
        if let Some(mix) = &self.product_mix {
            product_mix_lines(&mut out, mix, alpha);
        }
        if let Some(g) = self.data_gaps.as_ref().filter(|g| !g.is_empty()) {
            data_gaps_lines(&mut out, g);
        }
        if let Some(c) = &self.categories {
            categories_lines(&mut out, c, alpha);
        }
        excluded_lines(&mut out, &self.excluded);
        cautions_lines(&mut out, &self.cautions);
        out
    }
}

fn product_label(p: &Option<String>) -> String {
    p.clone()
        .unwrap_or_else(|| format!("({})", super::mix::NO_PRODUCT))
}

fn product_mix_lines(out: &mut String, mix: &ProductMix, alpha: f64) {
    out.push_str("\nProduct mix (each group against the pooled rate of each product)\n");
    match (&mix.test, &mix.not_testable) {
        (Some(t), _) => {
            let _ = writeln!(out, "Verdict: {}", t.verdict);
            let _ = writeln!(
                out,
                "Test: {} = {:.3}, df = {}, p = {}, {} products used",
                if t.method == "cmh" {
                    "Cochran-Mantel-Haenszel X^2"
                } else {
                    "generalised Cochran-Mantel-Haenszel X^2"
                },
                t.statistic,
                t.df,
                fmt_p(t.p_value, t.log10_p),
                t.products_used
            );
        }
        (None, Some(n)) => {
            let _ = writeln!(out, "Not testable: {}", n.reason);
        }
        (None, None) => {}
    }
    if let Some(or) = &mix.common_odds_ratio {
        let end = |x: Option<f64>| x.map_or_else(|| "inf".to_owned(), |x| format!("{x:.3}"));
        let _ = write!(
            out,
            "Common odds ratio {} against {}: {:.3} ({:.0}% CI {} to {})",
            or.a,
            or.b,
            or.odds_ratio,
            (1.0 - alpha) * 100.0,
            end(or.odds_ratio_ci.lower),
            end(or.odds_ratio_ci.upper)
        );
        if let Some(b) = &or.breslow_day {
            let _ = write!(
                out,
                "; Breslow-Day X^2 = {:.3}, df = {}, p = {:.4}{}",
                b.statistic,
                b.df,
                b.p_value,
                if b.significant {
                    " (the odds ratio differs between products)"
                } else {
                    ""
                }
            );
        }
        out.push('\n');
    }
    for d in &mix.disagreements {
        let _ = writeln!(out, "- {}", d.note);
    }
    let rows: Vec<Vec<String>> = mix
        .groups
        .iter()
        .map(|g| {
            let ends = |c: &Option<Ci>| {
                c.as_ref()
                    .map_or_else(String::new, |c| format!("{:.3}-{:.3}", c.lower, c.upper))
            };
            vec![
                g.code.clone(),
                g.observed.to_string(),
                format!("{:.1}", g.expected),
                g.ratio.map_or_else(String::new, |r| format!("{r:.3}")),
                ends(&g.ratio_ci),
                ends(&g.limits),
                g.flag.map_or("", |f| f.as_str()).to_owned(),
            ]
        })
        .collect();
    let conf = format!("{:.0}% CI", (1.0 - alpha) * 100.0);
    table(
        out,
        &[
            "group", "observed", "expected", "O/E", &conf, "limits", "flag",
        ],
        &rows,
    );
    let _ = writeln!(
        out,
        "limits: funnel limits on O/E covering {:.2}% of equal groups each (alpha shared over the groups)",
        mix.funnel_coverage * 100.0
    );
    out.push_str("\nBy product:\n");
    let mut rows = Vec::new();
    for g in &mix.groups {
        for p in &g.products {
            rows.push(vec![
                g.code.clone(),
                product_label(&p.product),
                p.inspected.to_string(),
                p.defective.to_string(),
                fmt_rate(p.rate),
            ]);
        }
    }
    for p in &mix.products {
        rows.push(vec![
            "all".to_owned(),
            product_label(&p.product),
            p.inspected.to_string(),
            p.defective.to_string(),
            fmt_rate(p.rate),
        ]);
    }
    table(
        out,
        &["group", "product", "inspected", "defective", "rate"],
        &rows,
    );
}

fn data_gaps_lines(out: &mut String, g: &DataGaps) {
    out.push_str("\nData gaps:\n");
    for s in &g.stopped {
        let _ = writeln!(
            out,
            "- {} stopped posting: last posted {}, {} usual production days without data",
            s.line,
            s.last_posted
                .map_or_else(|| "not in the window".to_owned(), crate::date::format_date),
            s.usual_days_without_data
        );
    }
    for m in &g.missing_days {
        let days: Vec<String> = m
            .dates
            .iter()
            .map(|d| crate::date::format_date(*d))
            .collect();
        let _ = writeln!(out, "- {} missing days: {}", m.line, days.join(", "));
    }
    for s in &g.site_days_off {
        let days: Vec<String> = s
            .dates
            .iter()
            .map(|d| crate::date::format_date(*d))
            .collect();
        let _ = writeln!(
            out,
            "- site {} posted nothing on: {}",
            s.site,
            days.join(", ")
        );
    }
    for d in &g.implausible {
        let _ = writeln!(
            out,
            "- {} on {}: {} of {} defective ({}){}",
            d.line,
            crate::date::format_date(d.date),
            d.defective,
            d.inspected,
            fmt_rate(d.rate),
            d.usual_rate
                .map_or_else(String::new, |u| format!(", usually {}", fmt_rate(u)))
        );
    }
}

impl TableReport {
    /// The report as readable text for a terminal.
    pub fn to_text(&self) -> String {
        let mut out = String::from("Association of groups and outcomes (table of counts)\n");
        params_line(&mut out, &self.parameters);
        out.push('\n');
        analysis_lines(&mut out, &self.table, self.parameters.alpha);
        cautions_lines(&mut out, &self.cautions);
        out
    }
}
