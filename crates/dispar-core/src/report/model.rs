//! The report as data: every field serializes to the JSON that `GET /v1/reports` and
//! `dispar analyze --format json` print. Field names shared with `dispar analyze` are
//! the same in both.
//!
//! Names follow the glossary in the project's DEVELOPERS.md: a group is identified by
//! `code` and shown by `name`; pairs refer to codes; string values are kebab-case.
//!
//! Floating-point fields are finite by construction; they serialize through
//! [`num`]/[`opt_num`], which check that in debug builds (a non-finite value would
//! otherwise turn silently into JSON `null`).

use serde::{Serialize, Serializer};

use crate::period::{DateRange, Period};

pub use super::gaps::DataGaps;
pub use super::mix::{PowerNote, ProductMix};
use super::params::{
    AdjustChoice, DispersionChoice, Filters, LevelKind, MethodChoice, PairwiseChoice,
    StratifyChoice,
};

/// Serializes a finite `f64`; a non-finite value is a bug (debug builds panic).
pub fn num<S: Serializer>(x: &f64, s: S) -> Result<S::Ok, S::Error> {
    debug_assert!(x.is_finite(), "non-finite number in a report: {x}");
    s.serialize_f64(*x)
}

/// Serializes an optional finite `f64` (`None` as `null`).
pub fn opt_num<S: Serializer>(x: &Option<f64>, s: S) -> Result<S::Ok, S::Error> {
    match x {
        Some(v) => num(v, s),
        None => s.serialize_none(),
    }
}

/// A two-sided interval.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Ci {
    /// Lower bound.
    #[serde(serialize_with = "num")]
    pub lower: f64,
    /// Upper bound.
    #[serde(serialize_with = "num")]
    pub upper: f64,
}

/// Direction of a flagged group relative to the pooled rate.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum Flag {
    /// Rate significantly above the pooled rate.
    Above,
    /// Rate significantly below the pooled rate.
    Below,
}

impl Flag {
    /// `above` or `below`.
    pub fn as_str(&self) -> &'static str {
        match self {
            Flag::Above => "above",
            Flag::Below => "below",
        }
    }
}

/// The omnibus test that ran.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Test {
    /// `pearson`, `g`, `fisher` or `monte-carlo`.
    pub method: &'static str,
    /// Why this method (plain words).
    pub method_reason: String,
    /// The test statistic: G^2 for `g`, otherwise Pearson's X^2 (for the exact methods
    /// it is shown for reference and orders the tables of the Monte Carlo test).
    #[serde(serialize_with = "num")]
    pub statistic: f64,
    /// Degrees of freedom, (rows - 1)(columns - 1) of the table tested.
    pub df: u64,
    /// The p-value.
    #[serde(serialize_with = "num")]
    pub p_value: f64,
    /// log10 of the p-value; finite even where `p_value` underflows to 0.
    #[serde(serialize_with = "num")]
    pub log10_p: f64,
    /// Monte Carlo standard error of `p_value` (only for `monte-carlo`).
    #[serde(skip_serializing_if = "Option::is_none", serialize_with = "opt_num")]
    pub p_std_error: Option<f64>,
    /// Monte Carlo resamples drawn (only for `monte-carlo`).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub resamples: Option<u64>,
    /// Chi-square critical value for alpha on `df` degrees of freedom.
    #[serde(serialize_with = "num")]
    pub critical_value: f64,
    /// True when `p_value < alpha`: significant at alpha.
    pub significant: bool,
    /// The verdict in plain words ("Significant at α = 0.05: ...").
    pub verdict: String,
    /// Cramér's V.
    #[serde(serialize_with = "num")]
    pub cramers_v: f64,
    /// Bias-corrected Cramér's V (Bergsma 2013).
    #[serde(serialize_with = "num")]
    pub cramers_v_corrected: f64,
}

/// Cochran's rule on the table tested, and why the method was chosen.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ValidityNotes {
    /// Smallest expected count.
    #[serde(serialize_with = "num")]
    pub min_expected: f64,
    /// Cells in the table tested.
    pub cells: usize,
    /// Cells with an expected count below 1.
    pub cells_below_1: usize,
    /// Cells with an expected count below 5.
    pub cells_below_5: usize,
    /// Share of cells with an expected count below 5, in [0, 1].
    #[serde(serialize_with = "num")]
    pub share_below_5: f64,
    /// True when Cochran's rule holds (no expected count below 1, at most 20% below 5).
    pub cochran_holds: bool,
    /// Why the method was chosen, in plain words.
    pub reason: String,
}

/// One compared group.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct GroupRow {
    /// The group's identifier: a site code, `site/line`, or a name from the input file.
    pub code: String,
    /// The site's or line's name, or null when it has none.
    pub name: Option<String>,
    /// Units inspected.
    pub inspected: u64,
    /// Units defective.
    pub defective: u64,
    /// defective / inspected.
    #[serde(serialize_with = "num")]
    pub rate: f64,
    /// Wilson score interval of the rate at confidence 1 - alpha.
    pub rate_ci: Ci,
    /// Expected defective units under equal rates.
    #[serde(serialize_with = "num")]
    pub expected: f64,
    /// Contribution of the group's two cells (defective and conforming) to X^2
    /// (null when there is no test).
    #[serde(serialize_with = "opt_num")]
    pub contribution: Option<f64>,
    /// Adjusted standardized residual of the defective cell, the ANOM z-score (null
    /// when there is no test).
    #[serde(serialize_with = "opt_num")]
    pub adjusted_residual: Option<f64>,
    /// `above`/`below` when |adjusted residual| exceeds the flag rule's limit, else null.
    pub flag: Option<Flag>,
    /// `contribution` / X^2, in [0, 1] (null when there is no test).
    #[serde(serialize_with = "opt_num")]
    pub share_of_statistic: Option<f64>,
    /// The group's period against its own baseline (null with `baseline=off`).
    pub baseline: Option<Baseline>,
    /// The smallest rise above the pooled rate that comparing this group with the rest
    /// would detect with 80% power at alpha (rate units); null when no rise could be.
    #[serde(serialize_with = "opt_num")]
    pub detectable_difference: Option<f64>,
}

/// A group's verdict against its own baseline.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum BaselineVerdict {
    /// The period's rate is beyond the limit above the group's usual rate.
    Worse,
    /// The period's rate is beyond the limit below the group's usual rate.
    Better,
    /// Within the limit around the group's usual rate.
    Usual,
    /// Too few baseline periods with units, or no units in the period.
    Unknown,
}

impl BaselineVerdict {
    /// `worse`, `better`, `usual` or `unknown`.
    pub fn as_str(&self) -> &'static str {
        match self {
            BaselineVerdict::Worse => "worse",
            BaselineVerdict::Better => "better",
            BaselineVerdict::Usual => "usual",
            BaselineVerdict::Unknown => "unknown",
        }
    }

    /// True for `worse` and `better`: the group changed.
    pub fn is_change(&self) -> bool {
        matches!(self, BaselineVerdict::Worse | BaselineVerdict::Better)
    }
}

/// A group's period against its own baseline (the same group's earlier periods of the
/// same kind).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Baseline {
    /// The verdict.
    pub verdict: BaselineVerdict,
    /// The verdict's reason in words.
    pub reason: String,
    /// `normal` (Laney-adjusted z against the limit) or `exact` (small counts).
    pub method: &'static str,
    /// Pooled baseline rate (null when the baseline has no units).
    #[serde(serialize_with = "opt_num")]
    pub rate: Option<f64>,
    /// Wilson interval of the baseline rate.
    pub rate_ci: Option<Ci>,
    /// Period rate / baseline rate.
    #[serde(serialize_with = "opt_num")]
    pub ratio: Option<f64>,
    /// Interval of the ratio.
    pub ratio_ci: Option<Ci>,
    /// Period rate - baseline rate.
    #[serde(serialize_with = "opt_num")]
    pub difference: Option<f64>,
    /// Interval of the difference.
    pub difference_ci: Option<Ci>,
    /// The z-score with the between-period variation folded in.
    #[serde(serialize_with = "opt_num")]
    pub z: Option<f64>,
    /// The limit |z| was compared with.
    #[serde(serialize_with = "num")]
    pub limit: f64,
    /// The between-period variation factor folded in (>= 1).
    #[serde(serialize_with = "opt_num")]
    pub dispersion: Option<f64>,
    /// Baseline periods used.
    pub periods: usize,
    /// Labels of baseline periods left out as excursions (e.g. `2026-W09`).
    pub left_out: Vec<String>,
}

/// One group's change: its verdict against its baseline is `worse` or `better`.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Change {
    /// The group's code.
    pub code: String,
    /// The group's name, or null.
    pub name: Option<String>,
    /// `worse` or `better`.
    pub verdict: BaselineVerdict,
    /// The period's rate.
    #[serde(serialize_with = "num")]
    pub rate: f64,
    /// The group's usual (baseline) rate.
    #[serde(serialize_with = "num")]
    pub baseline_rate: f64,
    /// The z-score against the baseline.
    #[serde(serialize_with = "num")]
    pub z: f64,
}

/// The usual spread between the groups, estimated over the baseline window.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct UsualSpread {
    /// Baseline periods the spread was estimated over.
    pub periods: usize,
    /// Multiplicative overdispersion over the baseline window (null when it cannot be
    /// estimated).
    #[serde(serialize_with = "opt_num")]
    pub phi: Option<f64>,
    /// Each group's standing over the baseline window.
    pub groups: Vec<Standing>,
}

/// How often a group stood above or below the pooled rate over the baseline window.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct Standing {
    /// The group's code.
    pub code: String,
    /// Baseline periods in which it was flagged above the pooled rate.
    pub above: usize,
    /// Baseline periods in which it was flagged below the pooled rate.
    pub below: usize,
    /// Baseline periods in which it had units.
    pub periods: usize,
}

/// One pairwise follow-up.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PairRow {
    /// First group's code.
    pub a: String,
    /// Second group's code.
    pub b: String,
    /// `pearson`, `pearson-yates` or `fisher`.
    pub method: &'static str,
    /// rate(a) - rate(b).
    #[serde(serialize_with = "num")]
    pub difference: f64,
    /// Newcombe hybrid score interval of the difference at confidence 1 - alpha.
    pub difference_ci: Ci,
    /// The chi-square statistic of the pair (absent for Fisher's test).
    #[serde(skip_serializing_if = "Option::is_none", serialize_with = "opt_num")]
    pub statistic: Option<f64>,
    /// Raw p-value (null for an untestable pair).
    #[serde(serialize_with = "opt_num")]
    pub p_value: Option<f64>,
    /// log10 of the raw p-value (null for an untestable pair).
    #[serde(serialize_with = "opt_num")]
    pub log10_p: Option<f64>,
    /// Adjusted p-value, over the testable pairs only (null for an untestable pair).
    #[serde(serialize_with = "opt_num")]
    pub p_adjusted: Option<f64>,
    /// True when `p_adjusted < alpha`: significant at alpha (false when untestable).
    pub significant: bool,
    /// Why the pair is no test (neither group has a defective unit, or neither a
    /// conforming one), or null.
    pub untestable: Option<String>,
    /// With a minimum difference of interest: true when the whole interval of the
    /// difference lies beyond it (|difference| surely larger); absent otherwise.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub beyond_min_difference: Option<bool>,
    /// The smallest difference between the two rates this pair's volumes would detect
    /// with 80% power at alpha (a rise above the pair's pooled rate, rate units); null
    /// when none could be.
    #[serde(serialize_with = "opt_num")]
    pub detectable_difference: Option<f64>,
}

/// A flagged contributor.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Flagged {
    /// The group's code.
    pub code: String,
    /// The group's name, or null.
    pub name: Option<String>,
    /// Above or below the pooled rate.
    pub flag: Flag,
    /// The group's rate.
    #[serde(serialize_with = "num")]
    pub rate: f64,
    /// Its adjusted residual.
    #[serde(serialize_with = "num")]
    pub adjusted_residual: f64,
    /// Its share of X^2.
    #[serde(serialize_with = "num")]
    pub share_of_statistic: f64,
}

/// The flag rule: a group is flagged when |adjusted residual| exceeds `limit`.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct FlagRule {
    /// How the ANOM critical value was obtained: `exact`, or `sidak-bound`
    /// (conservative fallback).
    pub method: &'static str,
    /// The ANOM critical value h(alpha, k) before any widening.
    #[serde(serialize_with = "num")]
    pub critical_value: f64,
    /// The limit |adjusted residual| was compared with: `critical_value`, times
    /// sqrt(phi) when overdispersion widened it.
    #[serde(serialize_with = "num")]
    pub limit: f64,
}

/// Overdispersion between the groups.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct OverdispersionNote {
    /// Spiegelhalter's multiplicative overdispersion factor (1 = binomial variation).
    #[serde(serialize_with = "num")]
    pub phi: f64,
    /// True when phi > 1: the groups vary more than binomial sampling explains.
    pub present: bool,
    /// True when phi was used to widen the flag rule's limit (limit x sqrt(phi));
    /// only with `overdispersion=widen` and phi > 1.
    pub applied: bool,
    /// Additive between-group variance of the rates (Spiegelhalter 2005), 0 when none.
    #[serde(serialize_with = "num")]
    pub tau_squared: f64,
    /// Plain words.
    pub note: String,
}

/// A group (or, in a table of counts, a row or column) left out of the comparison.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct Excluded {
    /// The group's code (or the row's or column's).
    pub code: String,
    /// The group's name, or null.
    pub name: Option<String>,
    /// Why (for example `no units inspected`).
    pub reason: String,
}

/// Why there is no omnibus test.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct NotTestableNote {
    /// Plain words.
    pub reason: String,
}

/// One cell of an analysed r x c table.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct CellRow {
    /// Row (group) code.
    pub row: String,
    /// Column (outcome or category) code.
    pub column: String,
    /// Observed count.
    pub observed: u64,
    /// Expected count under independence.
    #[serde(serialize_with = "num")]
    pub expected: f64,
    /// Contribution to X^2.
    #[serde(serialize_with = "num")]
    pub contribution: f64,
    /// Adjusted standardized residual.
    #[serde(serialize_with = "num")]
    pub adjusted_residual: f64,
}

/// A margin (row or column) of an analysed table.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct Margin {
    /// The row's or column's code.
    pub code: String,
    /// Total count.
    pub total: u64,
}

/// The test of an r x c table of counts (rows = groups, columns = outcomes).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TableAnalysis {
    /// Rows kept, with totals.
    pub rows: Vec<Margin>,
    /// Columns kept, with totals.
    pub columns: Vec<Margin>,
    /// Total count.
    pub total: u64,
    /// The test, or null when not testable.
    pub test: Option<Test>,
    /// Cochran's rule, or null when not testable.
    pub validity: Option<ValidityNotes>,
    /// Every cell of the kept table, row-major.
    pub cells: Vec<CellRow>,
    /// Rows or columns left out (all zero).
    pub excluded: Vec<Excluded>,
    /// Why there is no test, when there is none.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub not_testable: Option<NotTestableNote>,
}

/// Defect counts of one category over the compared groups.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct CategoryTotal {
    /// Category code.
    pub category: String,
    /// Defects counted.
    pub defects: u64,
    /// Share of all counted defects, in [0, 1].
    #[serde(serialize_with = "num")]
    pub share: f64,
}

/// The defect-category part of a report.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct CategoryReport {
    /// Totals per category, largest first.
    pub totals: Vec<CategoryTotal>,
    /// Group x category association test (do groups differ in their defect mix?).
    pub association: TableAnalysis,
}

/// Sums over the compared groups.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Totals {
    /// Number of groups compared (excluded ones not counted).
    pub group_count: usize,
    /// Units inspected.
    pub inspected: u64,
    /// Units defective.
    pub defective: u64,
    /// Pooled rate (0 when nothing was inspected).
    #[serde(serialize_with = "num")]
    pub rate: f64,
}

/// The parameters echoed back.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ParametersEcho {
    /// Significance level.
    #[serde(serialize_with = "num")]
    pub alpha: f64,
    /// Omnibus method asked for.
    pub method: MethodChoice,
    /// Pairwise method asked for.
    pub pairwise: PairwiseChoice,
    /// Adjustment asked for.
    pub adjust: AdjustChoice,
    /// Monte Carlo resamples.
    pub resamples: u64,
    /// Minimum difference of interest.
    #[serde(serialize_with = "opt_num")]
    pub min_difference: Option<f64>,
    /// Whether overdispersion widens flag limits.
    pub overdispersion: DispersionChoice,
    /// The `as_of` time the data were read at, echoed as given.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub as_of: Option<String>,
    /// Earlier periods in each group's baseline, or null with `baseline=off`.
    pub baseline: Option<usize>,
    /// Whether the product-mix comparison was asked for (`product`) or not (`none`).
    pub stratify: StratifyChoice,
}

/// A rate comparison report (`GET /v1/reports`, `dispar report`, `dispar analyze`).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Report {
    /// The period (absent for `dispar analyze`).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub period: Option<Period>,
    /// The period's inclusive dates.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub dates: Option<DateRange>,
    /// What is compared (absent for `dispar analyze`).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub level: Option<LevelKind>,
    /// Filters applied.
    #[serde(skip_serializing_if = "Filters::is_empty")]
    pub filters: Filters,
    /// Statistical parameters.
    pub parameters: ParametersEcho,
    /// Sums over compared groups.
    pub totals: Totals,
    /// Omnibus test of equal rates, or null when not testable.
    pub test: Option<Test>,
    /// Cochran's rule and the reason for the method, or null when not testable.
    pub validity: Option<ValidityNotes>,
    /// Per-group table (groups with units inspected), in input order.
    pub groups: Vec<GroupRow>,
    /// Pairwise comparisons (empty when not testable).
    pub pairs: Vec<PairRow>,
    /// Flagged contributors, largest share of X^2 first.
    pub flagged: Vec<Flagged>,
    /// Groups worse or better than their own baseline, largest |z| first.
    pub changes: Vec<Change>,
    /// The usual spread between the groups over the baseline window, or null (no
    /// baseline).
    pub usual_spread: Option<UsualSpread>,
    /// The flag rule, or null when not testable.
    pub flag_rule: Option<FlagRule>,
    /// Overdispersion between the groups, or null when not testable.
    pub overdispersion: Option<OverdispersionNote>,
    /// Defect-category totals and association test, when category counts exist.
    pub categories: Option<CategoryReport>,
    /// The comparison adjusted for product mix, when the records carry products and
    /// `stratify=product` (null otherwise).
    pub product_mix: Option<ProductMix>,
    /// What differences these volumes could detect, and whether "no difference" means
    /// anything (null when not testable).
    pub power: Option<PowerNote>,
    /// Lines that stopped posting, days missing, implausible days (null when the
    /// report was not given the lines' days, as for `dispar analyze`).
    pub data_gaps: Option<DataGaps>,
    /// Groups left out, with the reason.
    pub excluded: Vec<Excluded>,
    /// Why there is no test, when there is none.
    pub not_testable: Option<NotTestableNote>,
    /// How to read the report.
    pub cautions: Vec<String>,
}

/// A raw-table report (`dispar analyze --table`).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TableReport {
    /// Statistical parameters.
    pub parameters: ParametersEcho,
    /// Omnibus test of independence (or null), same fields as [`Report::test`].
    pub test: Option<Test>,
    /// Cochran's rule (or null).
    pub validity: Option<ValidityNotes>,
    /// The table analysed.
    pub table: TableAnalysis,
    /// Why there is no test, when there is none.
    pub not_testable: Option<NotTestableNote>,
    /// How to read the report.
    pub cautions: Vec<String>,
}

/// One period's verdict in a series (`GET /v1/reports/series`).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SeriesPoint {
    /// The period.
    pub period: Option<Period>,
    /// Its inclusive dates.
    pub dates: Option<DateRange>,
    /// Units inspected over the compared groups.
    pub inspected: u64,
    /// Units defective over the compared groups.
    pub defective: u64,
    /// Number of groups compared.
    pub group_count: usize,
    /// Method code of the test, or null when not testable.
    pub method: Option<&'static str>,
    /// p-value, or null.
    #[serde(serialize_with = "opt_num")]
    pub p_value: Option<f64>,
    /// log10 of the p-value, or null.
    #[serde(serialize_with = "opt_num")]
    pub log10_p: Option<f64>,
    /// Whether the difference is significant at alpha, or null when not testable.
    pub significant: Option<bool>,
    /// The verdict in words, or the reason it is not testable.
    pub verdict: String,
    /// Flagged groups, largest share of X^2 first.
    pub flagged: Vec<Flagged>,
    /// Groups worse or better than their own baseline, largest |z| first.
    pub changes: Vec<Change>,
}

impl Report {
    /// The summary of this report used in a series.
    pub fn summary(&self) -> SeriesPoint {
        SeriesPoint {
            period: self.period,
            dates: self.dates,
            inspected: self.totals.inspected,
            defective: self.totals.defective,
            group_count: self.totals.group_count,
            method: self.test.as_ref().map(|t| t.method),
            p_value: self.test.as_ref().map(|t| t.p_value),
            log10_p: self.test.as_ref().map(|t| t.log10_p),
            significant: self.test.as_ref().map(|t| t.significant),
            verdict: match (&self.test, &self.not_testable) {
                (Some(t), _) => t.verdict.clone(),
                (None, Some(n)) => format!("Not testable: {}", n.reason),
                (None, None) => String::new(),
            },
            flagged: self.flagged.clone(),
            changes: self.changes.clone(),
        }
    }
}
