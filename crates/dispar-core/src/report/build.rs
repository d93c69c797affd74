//! The report builder: aggregated counts per group in, [`Report`] out. Pure: no I/O,
//! no clock; the same input always gives the same report (Monte Carlo p-values are
//! seeded from the table).

use std::collections::BTreeMap;

use dispar_stats::StatsError;
use dispar_stats::adjust::Adjustment;
use dispar_stats::analysis::{self, Analysis, Dispersion, Method, Options, RateAnalysis, TestUsed};
use dispar_stats::anom::AnomMethod;
use dispar_stats::interval::{Interval, wilson};
use dispar_stats::pairwise::{PairMethod, PairTest};
use dispar_stats::table::Table;
use dispar_stats::{NotTestable, NotTestableReason};

use super::baseline::{BaselineWindow, Baselines, baselines};
use super::gaps::DataGaps;
use super::mix::{Counts, fill_power, product_mix};
use super::model::{
    CategoryReport, CategoryTotal, CellRow, Ci, Excluded, Flag, FlagRule, Flagged, GroupRow,
    Margin, NotTestableNote, OverdispersionNote, PairRow, ParametersEcho, Report, SeriesPoint,
    TableAnalysis, TableReport, Test, Totals, ValidityNotes,
};
use super::params::{
    AdjustChoice, DispersionChoice, Filters, LevelKind, MethodChoice, PairwiseChoice, Parameters,
    StratifyChoice,
};
use crate::period::Period;
use crate::tabular::{CountTable, RateRow};

/// With more groups than this, pairwise follow-ups are skipped (19,900 pairs at 200
/// groups); the flagged contributors give the overview instead.
pub const MAX_PAIRWISE_GROUPS: usize = 200;

/// From this many units inspected (with Cramér's V below 0.1 and no minimum difference
/// given), a significant result carries a caution that small differences become
/// significant at large volumes.
pub const LARGE_VOLUME: u64 = 100_000;

/// Reason given for a group left out because it inspected nothing.
pub const NO_UNITS: &str = "no units inspected";

/// One group's aggregated counts over the period (a site, or a site's line).
#[derive(Debug, Clone, PartialEq, Eq, Default)]
pub struct GroupCounts {
    /// The group's code: a site code, `site/line`, or a name from a file.
    pub code: String,
    /// The site's or line's name, if any.
    pub name: Option<String>,
    /// Units inspected.
    pub inspected: u64,
    /// Units defective (`<= inspected`; a group breaking this is excluded).
    pub defective: u64,
    /// Defects counted per category code (may be empty).
    pub defects: BTreeMap<String, u64>,
    /// (inspected, defective) per product code (`None`: records without a product);
    /// empty when the products were not read. Adds up to the group's counts.
    pub products: BTreeMap<Option<String>, (u64, u64)>,
}

impl GroupCounts {
    /// A group from its counts by product, `(product, inspected, defective)`, its totals
    /// their sums (saturating). A product named twice is added up.
    pub fn of_products<'a>(
        code: &str,
        cells: impl IntoIterator<Item = (Option<&'a str>, u64, u64)>,
    ) -> Self {
        let mut g = GroupCounts {
            code: code.to_owned(),
            ..GroupCounts::default()
        };
        for (product, n, x) in cells {
            g.inspected = g.inspected.saturating_add(n);
            g.defective = g.defective.saturating_add(x);
            let cell = g
                .products
                .entry(product.map(str::to_owned))
                .or_insert((0, 0));
            *cell = (cell.0.saturating_add(n), cell.1.saturating_add(x));
        }
        g
    }
}

/// What a report is about, besides its groups.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct ReportRequest {
    /// The period (None for `dispar analyze`).
    pub period: Option<Period>,
    /// The level (None for `dispar analyze`).
    pub level: Option<LevelKind>,
    /// Filters applied to the data.
    pub filters: Filters,
    /// Statistical parameters.
    pub parameters: Parameters,
    /// The `as_of` timestamp the data were read at, echoed.
    pub as_of: Option<String>,
    /// A server's bound on the CPU time of this report: exact tests and pairwise
    /// follow-ups give up once it has passed (the report then says it could not be
    /// done). `None` (the CLI) never gives up.
    pub deadline: Option<std::time::Instant>,
    /// The earlier periods' counts, when `parameters.baseline` asks for baselines
    /// (`None`: the report has no baselines, as with `baseline=off`).
    pub baseline: Option<BaselineWindow>,
    /// The gaps in the lines' data over the period (`None`: not looked for, as for
    /// `dispar analyze`).
    pub gaps: Option<DataGaps>,
}

/// Sum that stops at `u64::MAX` instead of wrapping (release) or panicking (debug).
fn saturating_sum(values: impl Iterator<Item = u64>) -> u64 {
    values.fold(0, u64::saturating_add)
}

/// The fixed cautions every report carries.
pub const CAUTIONS: [&str; 4] = [
    "A statistically significant difference is evidence that the groups differ, not a root cause; find the cause before acting.",
    "No significant difference is not proof that the groups are equal: small samples can hide real differences.",
    "Every rate is shown with the units behind it and its interval; a rate from few units is uncertain.",
    "Containment and release decisions follow the site's quality procedures and the regulations that apply (for example for safety-critical products), not this report alone.",
];

fn options(p: &Parameters) -> Options {
    Options {
        alpha: p.alpha,
        method: match p.method {
            MethodChoice::Auto => Method::Auto,
            MethodChoice::Pearson => Method::Pearson,
            MethodChoice::G => Method::LikelihoodRatio,
            MethodChoice::Exact => Method::Exact,
        },
        pairwise: match p.pairwise {
            PairwiseChoice::Auto => PairMethod::Auto,
            PairwiseChoice::Pearson => PairMethod::Pearson,
            PairwiseChoice::PearsonYates => PairMethod::PearsonYates,
            PairwiseChoice::Fisher => PairMethod::Fisher,
        },
        adjust: match p.adjust {
            AdjustChoice::Holm => Adjustment::Holm,
            AdjustChoice::Bonferroni => Adjustment::Bonferroni,
            AdjustChoice::Hochberg => Adjustment::Hochberg,
            AdjustChoice::Bh => Adjustment::BenjaminiHochberg,
        },
        resamples: p.resamples,
        min_difference: p.min_difference,
        dispersion: match p.overdispersion {
            DispersionChoice::Estimate => Dispersion::Report,
            DispersionChoice::Widen => Dispersion::Widen,
        },
        ..Options::default()
    }
}

fn echo(p: &Parameters, as_of: Option<String>) -> ParametersEcho {
    ParametersEcho {
        alpha: p.alpha,
        method: p.method,
        pairwise: p.pairwise,
        adjust: p.adjust,
        resamples: p.resamples,
        min_difference: p.min_difference,
        overdispersion: p.overdispersion,
        as_of,
        baseline: p.baseline,
        stratify: p.stratify,
    }
}

fn ratio(num: u64, den: u64) -> f64 {
    if den == 0 {
        0.0
    } else {
        num as f64 / den as f64
    }
}

fn ci(i: Interval) -> Ci {
    Ci {
        lower: i.lower,
        upper: i.upper,
    }
}

/// Wilson interval, or the whole [0, 1] if it cannot be computed (n = 0, never here).
fn wilson_ci(x: u64, n: u64, alpha: f64) -> Ci {
    wilson(x, n, 1.0 - alpha).map_or(
        Ci {
            lower: 0.0,
            upper: 1.0,
        },
        ci,
    )
}

/// Formats a p-value for sentences.
fn p_words(p: f64, log10_p: f64) -> String {
    super::text::fmt_p(p, log10_p)
}

fn method_code(t: TestUsed) -> &'static str {
    match t {
        TestUsed::Pearson => "pearson",
        TestUsed::LikelihoodRatio => "g",
        TestUsed::FisherExact => "fisher",
        TestUsed::MonteCarlo => "monte-carlo",
    }
}

fn test_of(a: &Analysis, alpha: f64, between: &str, subject: &str) -> Test {
    let p = p_words(a.p, a.log10_p);
    let verdict = if a.reject {
        format!("Significant at α = {alpha}: the {subject} differ between the {between} (p = {p}).")
    } else {
        format!(
            "Not significant at α = {alpha}: the {subject} do not differ significantly between the {between} (p = {p}); this is not proof that they are equal."
        )
    };
    Test {
        method: method_code(a.test),
        method_reason: a.reason.clone(),
        statistic: a.statistic,
        df: a.df,
        p_value: a.p,
        log10_p: a.log10_p,
        p_std_error: a.monte_carlo.map(|m| m.std_error),
        resamples: a.monte_carlo.map(|m| m.resamples),
        critical_value: a.critical_value,
        significant: a.reject,
        verdict,
        cramers_v: a.cramers_v,
        cramers_v_corrected: a.cramers_v_corrected,
    }
}

fn validity_of(a: &Analysis) -> ValidityNotes {
    let v = a.validity;
    ValidityNotes {
        min_expected: v.min_expected,
        cells: v.cells,
        cells_below_1: v.cells_below_1,
        cells_below_5: v.cells_below_5,
        share_below_5: v.share_below_5,
        cochran_holds: v.holds,
        reason: a.reason.clone(),
    }
}

fn not_testable_words(e: &StatsError, between: &str, defective: u64, inspected: u64) -> String {
    match e {
        StatsError::NotTestable(NotTestable {
            reason: NotTestableReason::TooFewRows { usable },
            ..
        }) => format!(
            "only {usable} of the {between} {} counts; a comparison needs at least 2",
            if *usable == 1 { "has" } else { "have" }
        ),
        StatsError::NotTestable(NotTestable {
            reason: NotTestableReason::TooFewColumns { .. },
            ..
        }) => {
            if defective == 0 {
                format!(
                    "no defective units in any of the {between}: there is no difference to test"
                )
            } else if defective == inspected {
                format!(
                    "every inspected unit is defective in all the {between}: there is no difference to test"
                )
            } else {
                "only one outcome occurs: there is no difference to test".to_owned()
            }
        }
        other => format!("the analysis could not be done: {other}"),
    }
}

/// Builds the report of a rate comparison from per-group counts (the groups as they
/// come; the order is kept).
///
/// Groups with nothing inspected are listed in `excluded` ("no units inspected"), as is
/// any group with more defective than inspected units (which checked records cannot
/// produce). Fewer than two remaining groups, or no variation in outcome, gives
/// `test: null` with `not_testable.reason`; the per-group table is still filled.
pub fn build_report(request: &ReportRequest, groups: &[GroupCounts]) -> Report {
    build(request, groups, Follow::Pairwise)
}

/// One period's verdict for a series: the same omnibus test, flags and totals as
/// [`build_report`], without the pairwise follow-ups a summary does not show (they
/// are most of the work for many groups).
pub fn build_summary(request: &ReportRequest, groups: &[GroupCounts]) -> SeriesPoint {
    build(request, groups, Follow::OmnibusOnly).summary()
}

/// Whether the pairwise follow-ups are computed.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Follow {
    Pairwise,
    OmnibusOnly,
}

fn build(request: &ReportRequest, groups: &[GroupCounts], follow: Follow) -> Report {
    let params = &request.parameters;
    let alpha = params.alpha;
    let between = match request.level {
        Some(LevelKind::Site) => "sites",
        Some(LevelKind::Line | LevelKind::AllLines) => "lines",
        None => "groups",
    };
    let mut excluded = Vec::new();
    let mut used: Vec<&GroupCounts> = Vec::with_capacity(groups.len());
    for g in groups {
        if g.inspected == 0 {
            excluded.push(Excluded {
                code: g.code.clone(),
                name: g.name.clone(),
                reason: NO_UNITS.to_owned(),
            });
        } else if g.defective > g.inspected {
            excluded.push(Excluded {
                code: g.code.clone(),
                name: g.name.clone(),
                reason: format!(
                    "defective ({}) exceeds inspected ({})",
                    g.defective, g.inspected
                ),
            });
        } else {
            used.push(g);
        }
    }
    // Saturating: totals beyond u64 (absurd but postable over a long range) show as the
    // maximum while the statistics refuse the table with an overflow note, never wrap.
    let inspected = saturating_sum(used.iter().map(|g| g.inspected));
    let defective = saturating_sum(used.iter().map(|g| g.defective));
    let pooled = ratio(defective, inspected);
    let totals = Totals {
        group_count: used.len(),
        inspected,
        defective,
        rate: pooled,
    };

    let mut opts = options(params);
    opts.deadline = request.deadline;
    let mut cautions: Vec<String> = CAUTIONS.iter().map(|s| (*s).to_owned()).collect();
    if follow == Follow::OmnibusOnly {
        opts.pairwise = PairMethod::Off;
    }
    if used.len() > MAX_PAIRWISE_GROUPS {
        opts.pairwise = PairMethod::Off;
        cautions.push(format!(
            "Pairwise comparisons are not listed for more than {MAX_PAIRWISE_GROUPS} {between}; the flagged contributors show which ones stand out."
        ));
    }
    let base: Option<Baselines> = match (&request.baseline, params.baseline) {
        (Some(window), Some(_)) if request.period.is_some() => Some(baselines(window, &used)),
        _ => None,
    };
    // With a baseline, overdispersion=widen widens by the usual spread between the groups
    // over the baseline window, so a group's excursion in this period cannot widen its
    // own limit; the analysis then flags with the plain limit and the widening follows.
    let usual_phi = base
        .as_ref()
        .filter(|b| b.spread.periods > 0)
        .and_then(|b| b.spread.phi.map(|phi| (phi, b.spread.periods)))
        .filter(|_| params.overdispersion == DispersionChoice::Widen);
    if usual_phi.is_some() {
        opts.dispersion = Dispersion::Report;
    }
    let pairs: Vec<(u64, u64)> = used.iter().map(|g| (g.inspected, g.defective)).collect();
    let analysis = analysis::analyze_rates(&pairs, &opts);

    let mut report = Report {
        period: request.period,
        dates: request.period.map(|p| p.dates()),
        level: request.level,
        filters: request.filters.clone(),
        // The echo says `baseline: null` unless the baselines were computed.
        parameters: echo(
            &Parameters {
                baseline: params.baseline.filter(|_| base.is_some()),
                ..params.clone()
            },
            request.as_of.clone(),
        ),
        totals,
        test: None,
        validity: None,
        groups: Vec::new(),
        pairs: Vec::new(),
        flagged: Vec::new(),
        changes: Vec::new(),
        usual_spread: None,
        flag_rule: None,
        overdispersion: None,
        categories: categories(&used, &opts, between),
        product_mix: None,
        power: None,
        data_gaps: request.gaps.clone(),
        excluded,
        not_testable: None,
        cautions: Vec::new(),
    };
    let unit = super::baseline::unit_of(request.period.as_ref());
    match analysis {
        Ok(ra) => fill_from_analysis(
            &mut report,
            &used,
            &ra,
            alpha,
            (between, unit),
            usual_phi,
            &mut cautions,
        ),
        Err(e) => {
            report.not_testable = Some(NotTestableNote {
                reason: not_testable_words(&e, between, defective, inspected),
            });
            report.groups = used
                .iter()
                .map(|g| GroupRow {
                    code: g.code.clone(),
                    name: g.name.clone(),
                    inspected: g.inspected,
                    defective: g.defective,
                    rate: ratio(g.defective, g.inspected),
                    rate_ci: wilson_ci(g.defective, g.inspected, alpha),
                    expected: g.inspected as f64 * pooled,
                    contribution: None,
                    adjusted_residual: None,
                    flag: None,
                    share_of_statistic: None,
                    baseline: None,
                    detectable_difference: None,
                })
                .collect();
        }
    }
    if follow == Follow::Pairwise {
        let by_code: std::collections::HashMap<&str, (u64, u64)> = used
            .iter()
            .map(|g| (g.code.as_str(), (g.inspected, g.defective)))
            .collect();
        let pair_counts: Vec<(Counts, Counts)> = report
            .pairs
            .iter()
            .map(|p| {
                let find = |code: &str| by_code.get(code).copied().unwrap_or((0, 0));
                (find(&p.a), find(&p.b))
            })
            .collect();
        fill_power(&mut report, &pair_counts);
        if params.stratify == StratifyChoice::Product {
            report.product_mix = product_mix(&used, &report, alpha, between);
            if let Some(mix) = &report.product_mix {
                for d in mix.disagreements.iter().filter(|d| d.code.is_none()) {
                    cautions.push(d.note.clone());
                }
            }
        }
    }
    if let Some(gaps) = report.data_gaps.as_ref().filter(|g| !g.is_empty()) {
        cautions.push(format!(
            "Gaps in the data: {} The comparison covers only the days posted.",
            gaps.note
        ));
    }
    if let Some(b) = base {
        for (row, baseline) in report.groups.iter_mut().zip(b.rows) {
            row.baseline = Some(baseline);
        }
        report.changes = b.changes;
        report.usual_spread = Some(b.spread);
    }
    report.cautions = cautions;
    report
}

fn fill_from_analysis(
    report: &mut Report,
    used: &[&GroupCounts],
    ra: &RateAnalysis,
    alpha: f64,
    (between, unit): (&str, &str),
    usual_phi: Option<(f64, usize)>,
    cautions: &mut Vec<String>,
) {
    let a = &ra.test;
    // The flag limit: the analysis's, or widened by the usual spread (phi over the
    // baseline window) when overdispersion=widen has a baseline to draw it from.
    let limit = usual_phi.map_or(ra.limit, |(phi, _)| ra.anom.h * phi.max(1.0).sqrt());
    report.test = Some(test_of(a, alpha, between, "defect rates"));
    report.validity = Some(validity_of(a));
    report.groups = ra
        .groups
        .iter()
        .map(|s| {
            let g = used[s.index];
            GroupRow {
                code: g.code.clone(),
                name: g.name.clone(),
                inspected: s.inspected,
                defective: s.defective,
                rate: s.rate,
                rate_ci: ci(s.rate_ci),
                expected: s.expected,
                contribution: Some(s.contribution),
                adjusted_residual: Some(s.adjusted_residual),
                flag: if usual_phi.is_some() {
                    let r = s.adjusted_residual;
                    (r.abs() > limit).then_some(if r > 0.0 { Flag::Above } else { Flag::Below })
                } else {
                    s.flag.map(|f| match f {
                        analysis::Flag::Above => Flag::Above,
                        analysis::Flag::Below => Flag::Below,
                    })
                },
                share_of_statistic: Some(s.share_of_x2),
                baseline: None,
                detectable_difference: None,
            }
        })
        .collect();
    let mut flagged: Vec<Flagged> = report
        .groups
        .iter()
        .filter_map(|g| {
            Some(Flagged {
                code: g.code.clone(),
                name: g.name.clone(),
                flag: g.flag?,
                rate: g.rate,
                adjusted_residual: g.adjusted_residual?,
                share_of_statistic: g.share_of_statistic?,
            })
        })
        .collect();
    flagged.sort_by(|x, y| {
        y.share_of_statistic
            .total_cmp(&x.share_of_statistic)
            .then_with(|| x.code.cmp(&y.code))
    });
    report.flagged = flagged;
    report.pairs = ra
        .pairwise
        .iter()
        .map(|p| PairRow {
            a: used[p.a].code.clone(),
            b: used[p.b].code.clone(),
            method: match p.method {
                PairTest::Pearson => "pearson",
                PairTest::PearsonYates => "pearson-yates",
                PairTest::Fisher => "fisher",
            },
            difference: p.difference,
            difference_ci: ci(p.difference_ci),
            statistic: p.statistic,
            p_value: p.p,
            log10_p: p.log10_p,
            p_adjusted: p.p_adjusted,
            significant: p.reject,
            untestable: p.untestable.map(|u| u.reason().to_owned()),
            beyond_min_difference: p.practically_different,
            detectable_difference: None,
        })
        .collect();
    let o = ra.overdispersion;
    let widened = limit > ra.anom.h;
    let note = if let Some((phi, periods)) = usual_phi {
        let plural = if periods == 1 { "" } else { "s" };
        if widened {
            format!(
                "phi = {:.3} over {} {between} in this period; the flag rule's limit was widened by the usual spread between them, sqrt(phi) = {:.3} from phi = {phi:.3} over the {periods} earlier {unit}{plural} of the baseline, so a {}'s change in this period does not widen its own limit.",
                o.phi,
                o.k,
                phi.sqrt(),
                between.trim_end_matches('s'),
            )
        } else {
            format!(
                "phi = {:.3} over {} {between} in this period; over the {periods} earlier {unit}{plural} of the baseline they usually vary no more than binomial sampling explains (phi = {phi:.3}), so the flag rule's limit was not widened.",
                o.phi, o.k
            )
        }
    } else if !o.applied {
        format!(
            "phi = {:.3} over {} {between}: no more variation between them than binomial sampling explains.",
            o.phi, o.k
        )
    } else if widened {
        format!(
            "phi = {:.3} over {} {between}: they vary more than binomial sampling explains, so the flag rule's limit was widened by sqrt(phi) = {:.3}{}.",
            o.phi,
            o.k,
            o.scale,
            if report.parameters.baseline.is_some() {
                " (this period's own estimate: there is no baseline window to estimate the usual spread from)"
            } else {
                ""
            }
        )
    } else {
        format!(
            "phi = {:.3} over {} {between}: they vary more than binomial sampling explains; the flag rule's limit was not widened (overdispersion=widen would widen it by sqrt(phi) = {:.3}).",
            o.phi, o.k, o.scale
        )
    };
    report.flag_rule = Some(FlagRule {
        method: match ra.anom.method {
            AnomMethod::Exact => "exact",
            AnomMethod::SidakBound => "sidak-bound",
        },
        critical_value: ra.anom.h,
        limit,
    });
    report.overdispersion = Some(OverdispersionNote {
        phi: o.phi,
        present: o.applied,
        applied: widened,
        tau_squared: ra.tau_squared,
        note,
    });
    if let Some(mc) = a.monte_carlo {
        cautions.push(format!(
            "The p-value is a Monte Carlo estimate from {} random tables (standard error {:.4}); the same data always give the same value.",
            super::text::fmt_count(mc.resamples),
            mc.std_error
        ));
    }
    if a.reject
        && report.totals.inspected >= LARGE_VOLUME
        && a.cramers_v < 0.1
        && report.parameters.min_difference.is_none()
    {
        cautions.push(format!(
            "With {} units inspected, even small differences are statistically significant (Cramér's V = {:.3}); judge the rate differences and their intervals, or give a minimum difference of interest.",
            super::text::fmt_count(report.totals.inspected),
            a.cramers_v
        ));
    }
}

/// Group x category association, when any category count exists.
fn categories(used: &[&GroupCounts], opts: &Options, between: &str) -> Option<CategoryReport> {
    let mut totals: BTreeMap<&str, u64> = BTreeMap::new();
    for g in used {
        for (c, n) in &g.defects {
            let t = totals.entry(c.as_str()).or_insert(0);
            *t = t.saturating_add(*n);
        }
    }
    let all = saturating_sum(totals.values().copied());
    if all == 0 {
        return None;
    }
    let names: Vec<&str> = totals.keys().copied().collect();
    let rows: Vec<Vec<u64>> = used
        .iter()
        .map(|g| {
            names
                .iter()
                .map(|c| g.defects.get(*c).copied().unwrap_or(0))
                .collect()
        })
        .collect();
    let row_names: Vec<String> = used.iter().map(|g| g.code.clone()).collect();
    let col_names: Vec<String> = names.iter().map(|s| (*s).to_owned()).collect();
    let association = table_analysis(&row_names, &col_names, &rows, opts, between, "defect mixes");
    let mut cat_totals: Vec<CategoryTotal> = totals
        .iter()
        .map(|(c, n)| CategoryTotal {
            category: (*c).to_owned(),
            defects: *n,
            share: ratio(*n, all),
        })
        .collect();
    cat_totals.sort_by(|a, b| {
        b.defects
            .cmp(&a.defects)
            .then_with(|| a.category.cmp(&b.category))
    });
    Some(CategoryReport {
        totals: cat_totals,
        association,
    })
}

fn table_analysis(
    row_names: &[String],
    col_names: &[String],
    rows: &[Vec<u64>],
    opts: &Options,
    between: &str,
    subject: &str,
) -> TableAnalysis {
    let row_totals: Vec<u64> = rows
        .iter()
        .map(|r| saturating_sum(r.iter().copied()))
        .collect();
    let col_totals: Vec<u64> = (0..col_names.len())
        .map(|c| saturating_sum(rows.iter().map(|r| r.get(c).copied().unwrap_or(0))))
        .collect();
    let total = saturating_sum(row_totals.iter().copied());
    let margin = |names: &[String], totals: &[u64], keep: &[usize]| -> Vec<Margin> {
        keep.iter()
            .map(|&i| Margin {
                code: names[i].clone(),
                total: totals[i],
            })
            .collect()
    };
    let mut excluded = Vec::new();
    for (i, t) in row_totals.iter().enumerate() {
        if *t == 0 {
            excluded.push(Excluded {
                code: row_names[i].clone(),
                name: None,
                reason: "no counts in this row".to_owned(),
            });
        }
    }
    for (i, t) in col_totals.iter().enumerate() {
        if *t == 0 {
            excluded.push(Excluded {
                code: col_names[i].clone(),
                name: None,
                reason: "no counts in this column".to_owned(),
            });
        }
    }
    let kept_rows: Vec<usize> = (0..rows.len()).filter(|&i| row_totals[i] > 0).collect();
    let kept_cols: Vec<usize> = (0..col_names.len())
        .filter(|&i| col_totals[i] > 0)
        .collect();
    let result = Table::from_rows(rows).and_then(|t| analysis::analyze(&t, opts));
    match result {
        Ok(a) => {
            let ncols = a.kept_cols.len();
            let cells = a
                .cells
                .iter()
                .enumerate()
                .map(|(i, c)| {
                    let (r, k) = (a.kept_rows[i / ncols], a.kept_cols[i % ncols]);
                    CellRow {
                        row: row_names[r].clone(),
                        column: col_names[k].clone(),
                        observed: rows[r][k],
                        expected: c.expected,
                        contribution: c.contribution,
                        adjusted_residual: c.adjusted_residual,
                    }
                })
                .collect();
            TableAnalysis {
                rows: margin(row_names, &row_totals, &a.kept_rows),
                columns: margin(col_names, &col_totals, &a.kept_cols),
                total,
                test: Some(test_of(&a, opts.alpha, between, subject)),
                validity: Some(validity_of(&a)),
                cells,
                excluded,
                not_testable: None,
            }
        }
        Err(e) => {
            let reason = match &e {
                StatsError::NotTestable(NotTestable {
                    reason: NotTestableReason::TooFewRows { usable },
                    ..
                }) => format!("only {usable} row(s) have counts; a test needs at least 2"),
                StatsError::NotTestable(NotTestable {
                    reason: NotTestableReason::TooFewColumns { usable },
                    ..
                }) => format!("only {usable} column(s) have counts; a test needs at least 2"),
                StatsError::EmptyTable => "the table is empty".to_owned(),
                other => format!("the analysis could not be done: {other}"),
            };
            TableAnalysis {
                rows: margin(row_names, &row_totals, &kept_rows),
                columns: margin(col_names, &col_totals, &kept_cols),
                total,
                test: None,
                validity: None,
                cells: Vec::new(),
                excluded,
                not_testable: Some(NotTestableNote { reason }),
            }
        }
    }
}

/// `dispar analyze` on a rates file: every row is a group.
pub fn analyze_rates(params: &Parameters, rows: &[RateRow]) -> Report {
    let groups: Vec<GroupCounts> = rows
        .iter()
        .map(|r| GroupCounts {
            code: r.name.clone(),
            name: None,
            inspected: r.inspected,
            defective: r.defective,
            defects: BTreeMap::new(),
            products: BTreeMap::new(),
        })
        .collect();
    // A file of rates has no earlier periods.
    let request = ReportRequest {
        parameters: Parameters {
            baseline: None,
            ..params.clone()
        },
        ..ReportRequest::default()
    };
    build_report(&request, &groups)
}

/// `dispar analyze --table` on a table of counts.
pub fn analyze_table(params: &Parameters, table: &CountTable) -> TableReport {
    let opts = options(params);
    let t = table_analysis(
        &table.row_names,
        &table.col_names,
        &table.counts,
        &opts,
        "groups",
        "outcome mixes",
    );
    // The caution about rates and sample sizes (the third) is for rate reports.
    let mut cautions: Vec<String> = CAUTIONS
        .iter()
        .enumerate()
        .filter(|(i, _)| *i != 2)
        .map(|(_, s)| (*s).to_owned())
        .collect();
    if let Some(se) = t.test.as_ref().and_then(|x| x.p_std_error) {
        cautions.push(format!(
            "The p-value is a Monte Carlo estimate (standard error {se:.4}); the same table always gives the same value."
        ));
    }
    TableReport {
        parameters: echo(
            &Parameters {
                baseline: None,
                ..params.clone()
            },
            None,
        ),
        test: t.test.clone(),
        validity: t.validity.clone(),
        not_testable: t.not_testable.clone(),
        table: t,
        cautions,
    }
}
