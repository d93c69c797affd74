//! Fairer comparisons of one period: the comparison adjusted for product mix
//! (`product_mix`) and what the period's volumes could detect (`power`).
//!
//! # Product mix
//!
//! A site that makes more of a product that fails more often has a higher crude rate
//! without doing anything worse. When the groups' records carry products, the report
//! adds, beside the crude comparison:
//!
//! - **indirect standardisation**: each group's expected defectives from the pooled
//!   rate of each product over the period (all compared groups), the ratio O/E with
//!   Garwood's exact Poisson interval, and a flag when O/E lies outside the funnel
//!   limits at the group's expected count. The funnel covers (1 - alpha)^(1/k) of the
//!   ratios of k groups whose true ratio is 1 (Šidák), so that with no real differences
//!   the chance of any false flag is alpha, as for the crude flag rule;
//! - **Cochran-Mantel-Haenszel, stratified by product**: with two groups, the common
//!   odds ratio with its Robins-Breslow-Greenland interval and the Breslow-Day test of
//!   equal odds ratios across products; with more, the generalised CMH statistic;
//! - a sentence for each place where the crude and adjusted verdicts disagree, naming
//!   the product behind it.
//!
//! Records without a product form their own stratum ("no product"), so no unit is
//! dropped. The pooled product rates are the period's own: an adjusted comparison says
//! whether the groups differ *within* products, not whether a product is good.
//!
//! # Power
//!
//! For the period's volumes, the smallest rise above the pooled rate each group against
//! the rest, and each pair, would detect with 80% power at alpha (Cohen's h, two-sided;
//! see `dispar_stats::power`). A "not significant" verdict is called uninformative when
//! even the best-placed group could not detect `min_difference` (or, without it, a
//! doubling of the pooled rate): the data cannot tell equal from different.

use std::collections::BTreeMap;

use serde::Serialize;

use dispar_stats::StatsError;
use dispar_stats::power::PowerRule;
use dispar_stats::standardise::{RatioFunnel, indirect};
use dispar_stats::stratified::{Stratum, generalised_cmh, mantel_haenszel};
use dispar_stats::{NotTestable, NotTestableReason};

use super::build::GroupCounts;
use super::model::{Ci, Flag, NotTestableNote, Report, num, opt_num};
use super::text::{fmt_p, fmt_rate};

/// (inspected, defective) of one group.
pub type Counts = (u64, u64);

/// The power the detectable differences are computed for.
pub const POWER: f64 = 0.8;

/// With more groups than this the stratified test is not computed (its k x k variance
/// is solved in O(k^3): about 40 ms at 500 groups, seconds beyond a few thousand); O/E
/// and its flags still are.
pub const MAX_STRATIFIED_GROUPS: usize = 500;

/// The words for records without a product.
pub const NO_PRODUCT: &str = "no product";

/// The comparison adjusted for product mix (`product_mix`).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ProductMix {
    /// Every product of the period over the compared groups, with its pooled rate: the
    /// rates the expected counts come from.
    pub products: Vec<ProductRate>,
    /// Per group: observed against expected defectives, O/E, its funnel limits and
    /// flag, and the group's own table by product. In the order of `groups`.
    pub groups: Vec<MixGroup>,
    /// The stratified test of equal rates within products, or null when not testable.
    pub test: Option<StratifiedTest>,
    /// With two groups: the common odds ratio across products, or null.
    pub common_odds_ratio: Option<CommonOddsRatio>,
    /// The share of ratios of k equal groups the funnel limits cover, (1 - alpha)^(1/k).
    #[serde(serialize_with = "num")]
    pub funnel_coverage: f64,
    /// Where the crude and adjusted verdicts disagree, in words (empty when they agree).
    pub disagreements: Vec<Disagreement>,
    /// Why there is no stratified test, when there is none.
    pub not_testable: Option<NotTestableNote>,
}

/// One product's pooled counts over the compared groups.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ProductRate {
    /// The product's code, or null for records without one.
    pub product: Option<String>,
    /// Units inspected.
    pub inspected: u64,
    /// Units defective.
    pub defective: u64,
    /// defective / inspected.
    #[serde(serialize_with = "num")]
    pub rate: f64,
}

/// One group, adjusted for its product mix.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct MixGroup {
    /// The group's code.
    pub code: String,
    /// Defectives observed.
    pub observed: u64,
    /// Defectives expected from the pooled product rates and the group's units of each.
    #[serde(serialize_with = "num")]
    pub expected: f64,
    /// observed / expected (null when nothing was expected).
    #[serde(serialize_with = "opt_num")]
    pub ratio: Option<f64>,
    /// Exact Poisson interval of the ratio at confidence 1 - alpha (null with `ratio`).
    pub ratio_ci: Option<Ci>,
    /// The funnel limits of the ratio at this expected count (null with `ratio`).
    pub limits: Option<Ci>,
    /// `above` / `below` when the ratio lies outside its limits, else null.
    pub flag: Option<Flag>,
    /// The group's own counts by product (products it made).
    pub products: Vec<ProductRate>,
}

/// The Cochran-Mantel-Haenszel test stratified by product.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct StratifiedTest {
    /// `cmh` (two groups) or `generalised-cmh` (more).
    pub method: &'static str,
    /// The chi-square statistic.
    #[serde(serialize_with = "num")]
    pub statistic: f64,
    /// Its degrees of freedom.
    pub df: u64,
    /// Upper-tail p (may be 0 by underflow; see `log10_p`).
    #[serde(serialize_with = "num")]
    pub p_value: f64,
    /// log10 of the p-value.
    #[serde(serialize_with = "num")]
    pub log10_p: f64,
    /// True when `p_value < alpha`.
    pub significant: bool,
    /// Products that carry information (made by two groups, both outcomes present).
    pub products_used: usize,
    /// The outcome in a sentence.
    pub verdict: String,
}

/// The common odds ratio of two groups across products.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct CommonOddsRatio {
    /// The first group's code (its odds of a defective are the numerator).
    pub a: String,
    /// The second group's code.
    pub b: String,
    /// The Mantel-Haenszel common odds ratio.
    #[serde(serialize_with = "num")]
    pub odds_ratio: f64,
    /// Robins-Breslow-Greenland interval at confidence 1 - alpha (upper may be
    /// infinite, shown as null).
    pub odds_ratio_ci: OpenCi,
    /// The Breslow-Day test that the odds ratio is the same for every product, or null
    /// with fewer than two usable products.
    pub breslow_day: Option<BreslowDay>,
}

/// An interval whose ends may be unbounded (null).
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct OpenCi {
    /// Lower end.
    #[serde(serialize_with = "opt_num")]
    pub lower: Option<f64>,
    /// Upper end (null: unbounded).
    #[serde(serialize_with = "opt_num")]
    pub upper: Option<f64>,
}

/// The Breslow-Day test of equal odds ratios across products.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct BreslowDay {
    /// The chi-square statistic.
    #[serde(serialize_with = "num")]
    pub statistic: f64,
    /// Degrees of freedom (usable products - 1).
    pub df: u64,
    /// Upper-tail p.
    #[serde(serialize_with = "num")]
    pub p_value: f64,
    /// True when `p_value < alpha`: the odds ratio differs between products, so one
    /// common ratio summarises them poorly.
    pub significant: bool,
}

/// A place where the crude and the adjusted verdicts disagree.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Disagreement {
    /// The group concerned, or null for the test of all groups.
    pub code: Option<String>,
    /// What differs, in words.
    pub note: String,
}

/// What the period's volumes could detect (`power`).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PowerNote {
    /// The power the differences are computed for (0.8).
    #[serde(serialize_with = "num")]
    pub power: f64,
    /// The smallest detectable rise of any group against the rest (the largest group's;
    /// rate units), null when none could be detected.
    #[serde(serialize_with = "opt_num")]
    pub detectable_difference: Option<f64>,
    /// The median over the groups of their detectable rise against the rest.
    #[serde(serialize_with = "opt_num")]
    pub median_detectable_difference: Option<f64>,
    /// With `min_difference`: units needed in each of two groups to detect a rise of
    /// `min_difference` above the pooled rate; null otherwise.
    pub units_needed: Option<u64>,
    /// True when the test found no significant difference and these volumes could not
    /// have detected `min_difference` (or, without it, a doubling of the pooled rate).
    pub uninformative: bool,
    /// The above in a sentence.
    pub note: String,
}

fn ratio(num: u64, den: u64) -> f64 {
    if den == 0 {
        0.0
    } else {
        num as f64 / den as f64
    }
}

/// The product label in sentences.
fn product_words(p: &Option<String>) -> &str {
    p.as_deref().unwrap_or(NO_PRODUCT)
}

/// Whether any group's records carry a product.
pub fn has_products(used: &[&GroupCounts]) -> bool {
    used.iter().any(|g| g.products.keys().any(Option::is_some))
}

/// Words for a stratified analysis that cannot be done.
fn not_testable_words(e: &StatsError, between: &str) -> String {
    match e {
        StatsError::NotTestable(NotTestable {
            reason: NotTestableReason::NoInformativeStratum { .. },
            ..
        }) => format!(
            "no product is made by two of the {between} with both outcomes: within products there is nothing to compare"
        ),
        StatsError::NotTestable(NotTestable {
            reason: NotTestableReason::TooFewColumns { .. },
            ..
        }) => "only one outcome occurs: there is no difference to test".to_owned(),
        StatsError::NotTestable(NotTestable {
            reason: NotTestableReason::TooFewRows { .. },
            ..
        }) => format!("fewer than two of the {between} have counts"),
        other => format!("the adjusted analysis could not be done: {other}"),
    }
}

/// The product-mix comparison of `used` (the groups the crude report compares, in its
/// order); `report` holds the crude verdict and flags it is compared with. `None` when
/// no group's records carry a product.
pub fn product_mix(
    used: &[&GroupCounts],
    report: &Report,
    alpha: f64,
    between: &str,
) -> Option<ProductMix> {
    if !has_products(used) {
        return None;
    }
    let keys: Vec<Option<String>> = {
        let mut all: BTreeMap<&Option<String>, ()> = BTreeMap::new();
        for g in used {
            for k in g.products.keys() {
                all.insert(k, ());
            }
        }
        all.into_keys().cloned().collect()
    };
    // Each group's units by product; what a group's products do not cover (records the
    // split could not place, which the store never gives) goes to "no product".
    let cells: Vec<Vec<(u64, u64)>> = used
        .iter()
        .map(|g| {
            keys.iter()
                .map(|k| g.products.get(k).copied().unwrap_or((0, 0)))
                .collect()
        })
        .collect();
    let products: Vec<ProductRate> = keys
        .iter()
        .enumerate()
        .map(|(s, k)| {
            let (n, x) = cells.iter().fold((0u64, 0u64), |(n, x), row| {
                (n.saturating_add(row[s].0), x.saturating_add(row[s].1))
            });
            ProductRate {
                product: k.clone(),
                inspected: n,
                defective: x,
                rate: ratio(x, n),
            }
        })
        .collect();
    let k = used.len().max(1);
    let coverage = (1.0 - alpha).powf(1.0 / k as f64);
    let funnel = RatioFunnel::new(coverage).ok();
    let standardised = indirect(&cells, 1.0 - alpha).ok();
    let groups: Vec<MixGroup> = used
        .iter()
        .enumerate()
        .map(|(i, g)| {
            let st = standardised.as_ref().and_then(|v| v.get(i));
            let expected = st.map_or(0.0, |s| s.expected);
            let ratio_value = st.and_then(|s| s.ratio);
            // Finite whenever something is expected, which a ratio implies.
            let limits = ratio_value
                .and(funnel)
                .map(|f| f.at(expected))
                .filter(|l| l.upper.is_finite())
                .map(|l| Ci {
                    lower: l.lower,
                    upper: l.upper,
                });
            let flag = match (ratio_value, limits) {
                (Some(r), Some(l)) if r > l.upper => Some(Flag::Above),
                (Some(r), Some(l)) if r < l.lower => Some(Flag::Below),
                _ => None,
            };
            MixGroup {
                code: g.code.clone(),
                observed: st.map_or(g.defective, |s| s.observed),
                expected,
                ratio: ratio_value,
                ratio_ci: st.and_then(|s| s.ratio_ci).map(|c| Ci {
                    lower: c.lower,
                    upper: c.upper,
                }),
                limits,
                flag,
                products: keys
                    .iter()
                    .zip(&cells[i])
                    .filter(|(_, (n, _))| *n > 0)
                    .map(|(p, &(n, x))| ProductRate {
                        product: p.clone(),
                        inspected: n,
                        defective: x,
                        rate: ratio(x, n),
                    })
                    .collect(),
            }
        })
        .collect();

    let (test, common_odds_ratio, not_testable) = stratified_test(used, &cells, alpha, between);
    let mut mix = ProductMix {
        products,
        groups,
        test,
        common_odds_ratio,
        funnel_coverage: coverage,
        disagreements: Vec::new(),
        not_testable,
    };
    mix.disagreements = disagreements(&mix, report, between);
    Some(mix)
}

type Stratified = (
    Option<StratifiedTest>,
    Option<CommonOddsRatio>,
    Option<NotTestableNote>,
);

fn stratified_test(
    used: &[&GroupCounts],
    cells: &[Vec<(u64, u64)>],
    alpha: f64,
    between: &str,
) -> Stratified {
    let verdict = |significant: bool, p: f64, log10_p: f64| {
        let p = fmt_p(p, log10_p);
        if significant {
            format!(
                "Significant at α = {alpha} within products: the defect rates differ between the {between} even when each is compared product by product (p = {p})."
            )
        } else {
            format!(
                "Not significant at α = {alpha} within products: product by product the {between} do not differ significantly (p = {p}); this is not proof that they are equal."
            )
        }
    };
    let refused = |e: StatsError| {
        (
            None,
            None,
            Some(NotTestableNote {
                reason: not_testable_words(&e, between),
            }),
        )
    };
    if cells.len() > MAX_STRATIFIED_GROUPS {
        return (
            None,
            None,
            Some(NotTestableNote {
                reason: format!(
                    "with more than {MAX_STRATIFIED_GROUPS} {between} the stratified test is not computed; the observed against expected ratios and their flags are"
                ),
            }),
        );
    }
    if let [a, b] = cells {
        let strata: Vec<Stratum> = a
            .iter()
            .zip(b)
            .map(|(&(n1, x1), &(n2, x2))| [x1, n1 - x1.min(n1), x2, n2 - x2.min(n2)])
            .collect();
        return match mantel_haenszel(&strata, 1.0 - alpha) {
            Ok(mh) => {
                let significant = mh.p_value < alpha;
                let bound = |x: f64| x.is_finite().then_some(x);
                (
                    Some(StratifiedTest {
                        method: "cmh",
                        statistic: mh.statistic,
                        df: 1,
                        p_value: mh.p_value,
                        log10_p: mh.log10_p,
                        significant,
                        products_used: mh.strata_used,
                        verdict: verdict(significant, mh.p_value, mh.log10_p),
                    }),
                    bound(mh.odds_ratio).map(|or| CommonOddsRatio {
                        a: used[0].code.clone(),
                        b: used[1].code.clone(),
                        odds_ratio: or,
                        odds_ratio_ci: OpenCi {
                            lower: bound(mh.odds_ratio_ci.lower),
                            upper: bound(mh.odds_ratio_ci.upper),
                        },
                        breslow_day: mh.breslow_day.map(|h| BreslowDay {
                            statistic: h.statistic,
                            df: h.df,
                            p_value: h.p_value,
                            significant: h.p_value < alpha,
                        }),
                    }),
                    None,
                )
            }
            Err(e) => refused(e),
        };
    }
    match generalised_cmh(cells) {
        Ok(g) => {
            let significant = g.p_value < alpha;
            (
                Some(StratifiedTest {
                    method: "generalised-cmh",
                    statistic: g.statistic,
                    df: g.df,
                    p_value: g.p_value,
                    log10_p: g.log10_p,
                    significant,
                    products_used: g.strata_used,
                    verdict: verdict(significant, g.p_value, g.log10_p),
                }),
                None,
                None,
            )
        }
        Err(e) => refused(e),
    }
}

/// The product that most explains why `g` looks worse (or better) than the pooled rate:
/// among products whose pooled rate is on that side of the overall pooled rate, the one
/// the group makes the largest extra share of.
fn product_behind(mix: &ProductMix, g: &MixGroup, worse: bool) -> Option<String> {
    let total: u64 = mix.products.iter().map(|p| p.inspected).sum();
    let defective: u64 = mix.products.iter().map(|p| p.defective).sum();
    let pooled = ratio(defective, total);
    let own: u64 = g.products.iter().map(|p| p.inspected).sum();
    mix.products
        .iter()
        .filter(|p| {
            if worse {
                p.rate > pooled
            } else {
                p.rate < pooled
            }
        })
        .filter_map(|p| {
            let mine = ratio(mine_of(g, &p.product), own);
            let overall = ratio(p.inspected, total);
            (mine > overall).then_some((mine - overall, mine, overall, p))
        })
        .max_by(|x, y| x.0.total_cmp(&y.0))
        .map(|(_, mine, overall, p)| {
            format!(
                "{} ({} of its units against {} overall; {} defective pooled)",
                product_words(&p.product),
                fmt_share(mine),
                fmt_share(overall),
                fmt_rate(p.rate)
            )
        })
}

fn mine_of(g: &MixGroup, product: &Option<String>) -> u64 {
    g.products
        .iter()
        .find(|q| &q.product == product)
        .map_or(0, |q| q.inspected)
}

fn fmt_share(x: f64) -> String {
    format!("{:.0}%", 100.0 * x)
}

fn disagreements(mix: &ProductMix, report: &Report, between: &str) -> Vec<Disagreement> {
    let mut out = Vec::new();
    if let (Some(crude), Some(adjusted)) = (&report.test, &mix.test)
        && crude.significant != adjusted.significant
    {
        let crude_p = fmt_p(crude.p_value, crude.log10_p);
        let adjusted_p = fmt_p(adjusted.p_value, adjusted.log10_p);
        let note = if crude.significant {
            format!(
                "The crude rates differ between the {between} (p = {crude_p}) but not within products (p = {adjusted_p}): the difference comes from which products each makes, not from how well they make them."
            )
        } else {
            format!(
                "The crude rates do not differ significantly between the {between} (p = {crude_p}), but within products they do (p = {adjusted_p}): the product mix hides a difference."
            )
        };
        out.push(Disagreement { code: None, note });
    }
    for (row, g) in report.groups.iter().zip(&mix.groups) {
        if row.code != g.code || row.flag == g.flag || report.test.is_none() {
            continue;
        }
        let oe = g.ratio.map_or_else(String::new, |r| format!("{r:.2}"));
        let crude_words = |f: Option<Flag>| match f {
            Some(Flag::Above) => "above the pooled rate",
            Some(Flag::Below) => "below the pooled rate",
            None => "not flagged",
        };
        let note = match (row.flag, g.flag) {
            (Some(Flag::Above), None) | (Some(Flag::Above), Some(Flag::Below)) => {
                let behind = product_behind(mix, g, true)
                    .map_or_else(String::new, |p| format!(" because it makes more of {p}"));
                format!(
                    "{} looks worse than the pooled rate ({}) only{behind}: for its product mix it has {} its expected defectives (O/E {oe}), {}.",
                    row.code,
                    fmt_rate(row.rate),
                    if g.ratio.unwrap_or(1.0) < 1.0 {
                        "fewer than"
                    } else {
                        "about"
                    },
                    match g.flag {
                        Some(Flag::Below) => "below its funnel limits",
                        _ => "within its funnel limits",
                    }
                )
            }
            (Some(Flag::Below), None) | (Some(Flag::Below), Some(Flag::Above)) => {
                let behind = product_behind(mix, g, false)
                    .map_or_else(String::new, |p| format!(" because it makes more of {p}"));
                format!(
                    "{} looks better than the pooled rate ({}) only{behind}: for its product mix it is {} (O/E {oe}).",
                    row.code,
                    fmt_rate(row.rate),
                    match g.flag {
                        Some(Flag::Above) => "worse than expected, above its funnel limits",
                        _ => "as expected, within its funnel limits",
                    }
                )
            }
            (None, Some(Flag::Above)) => format!(
                "{} is worse than expected for its product mix (O/E {oe}, above its funnel limits) though its crude rate ({}) is {}.",
                row.code,
                fmt_rate(row.rate),
                crude_words(row.flag)
            ),
            (None, Some(Flag::Below)) => format!(
                "{} is better than expected for its product mix (O/E {oe}, below its funnel limits) though its crude rate ({}) is {}.",
                row.code,
                fmt_rate(row.rate),
                crude_words(row.flag)
            ),
            _ => continue,
        };
        out.push(Disagreement {
            code: Some(row.code.clone()),
            note,
        });
    }
    out
}

/// Fills each group's and pair's `detectable_difference` and the report's `power`, and
/// says in the verdict when "not significant" is uninformative. Needs the crude test.
pub fn fill_power(report: &mut Report, pair_counts: &[(Counts, Counts)]) {
    let alpha = report.parameters.alpha;
    let Ok(rule) = PowerRule::new(alpha, POWER) else {
        return;
    };
    let Some(test) = report.test.as_mut() else {
        return;
    };
    let total = report.totals.inspected as f64;
    let pooled = report.totals.rate;
    for g in &mut report.groups {
        let n = g.inspected as f64;
        g.detectable_difference = rule.detectable_difference(pooled, n, total - n);
    }
    for (pair, &((na, xa), (nb, xb))) in report.pairs.iter_mut().zip(pair_counts) {
        let p0 = ratio(xa.saturating_add(xb), na.saturating_add(nb));
        pair.detectable_difference = rule.detectable_difference(p0, na as f64, nb as f64);
    }
    let mut detectable: Vec<f64> = report
        .groups
        .iter()
        .filter_map(|g| g.detectable_difference)
        .collect();
    detectable.sort_by(f64::total_cmp);
    let best = detectable.first().copied();
    let median = (!detectable.is_empty()).then(|| {
        let m = detectable.len() / 2;
        if detectable.len() % 2 == 1 {
            detectable[m]
        } else {
            0.5 * (detectable[m - 1] + detectable[m])
        }
    });
    let min_difference = report.parameters.min_difference.filter(|d| *d > 0.0);
    let units_needed = min_difference
        .and_then(|d| rule.units_needed(pooled, d).ok())
        .filter(|u| u.is_finite())
        .map(|u| u.ceil() as u64);
    // What a useful comparison must be able to see: the caller's minimum difference, or
    // else a doubling of the pooled rate.
    let wanted = min_difference.unwrap_or(pooled);
    let uninformative = !test.significant && best.is_none_or(|b| b > wanted);
    let pct = |x: f64| fmt_rate(x);
    let mut note = match (best, median) {
        (Some(b), Some(m)) if (m - b).abs() <= 0.005 * b => format!(
            "With these volumes a group against the rest would detect a rise of {} above the pooled rate {} with {:.0}% power at α = {alpha}.",
            pct(b),
            pct(pooled),
            100.0 * POWER
        ),
        (Some(b), Some(m)) => format!(
            "With these volumes a group against the rest would detect a rise of {} (the largest group) to {} (the median group) above the pooled rate {} with {:.0}% power at α = {alpha}.",
            pct(b),
            pct(m),
            pct(pooled),
            100.0 * POWER
        ),
        _ => "With these volumes no rise above the pooled rate could be detected.".to_owned(),
    };
    if let (Some(d), Some(u)) = (min_difference, units_needed) {
        note.push_str(&format!(
            " A rise of {} needs about {} units in each of two groups.",
            pct(d),
            super::text::fmt_count(u)
        ));
    }
    if uninformative {
        let what = min_difference.map_or_else(
            || format!("a doubling of the pooled rate ({})", pct(pooled)),
            |d| format!("the minimum difference of interest ({})", pct(d)),
        );
        let sentence = format!(
            " These volumes could not detect {what}, so this verdict is uninformative: collect more units before concluding the {} are alike.",
            report.level.map_or("groups", |l| match l {
                super::params::LevelKind::Site => "sites",
                _ => "lines",
            })
        );
        note.push_str(&sentence);
        test.verdict.push_str(&sentence);
    }
    report.power = Some(PowerNote {
        power: POWER,
        detectable_difference: best,
        median_detectable_difference: median,
        units_needed,
        uninformative,
        note,
    });
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::report::build::{ReportRequest, build_report};
    use crate::report::params::{LevelKind, Parameters, StratifyChoice};

    /// A group from (product, inspected, defective) cells.
    fn group(code: &str, cells: &[(Option<&str>, u64, u64)]) -> GroupCounts {
        GroupCounts::of_products(code, cells.iter().copied())
    }

    fn request(stratify: StratifyChoice) -> ReportRequest {
        ReportRequest {
            level: Some(LevelKind::Site),
            parameters: Parameters {
                baseline: None,
                stratify,
                ..Parameters::default()
            },
            ..ReportRequest::default()
        }
    }

    /// Invented Simpson's-paradox case: both sites make each product at exactly its
    /// pooled rate (EASY 1%, HARD 4%), but A makes mostly HARD. Crude: A far above B;
    /// within products: no difference at all.
    fn simpson() -> Vec<GroupCounts> {
        vec![
            group("A", &[(Some("EASY"), 1000, 10), (Some("HARD"), 9000, 360)]),
            group("B", &[(Some("EASY"), 9000, 90), (Some("HARD"), 1000, 40)]),
        ]
    }

    #[test]
    fn a_difference_that_comes_from_the_product_mix_is_said_in_words() {
        let r = build_report(&request(StratifyChoice::Product), &simpson());
        let crude = r.test.as_ref().expect("crude test");
        assert!(crude.significant);
        let mix = r.product_mix.as_ref().expect("products present");
        let t = mix.test.as_ref().expect("stratified test");
        assert_eq!(t.method, "cmh");
        // Each product's 2 x 2 table has equal rates, so the CMH statistic is exactly 0
        // and the common odds ratio exactly 1.
        assert!(t.statistic.abs() < 1e-9, "{}", t.statistic);
        assert!(!t.significant);
        let or = mix.common_odds_ratio.as_ref().expect("two groups");
        assert!((or.odds_ratio - 1.0).abs() < 1e-12);
        assert!(or.breslow_day.as_ref().is_some_and(|b| !b.significant));
        // O/E is 1 for both: observed equals expected from the product rates.
        for g in &mix.groups {
            assert!((g.ratio.expect("expected > 0") - 1.0).abs() < 1e-12);
            assert_eq!(g.flag, None);
        }
        assert!((mix.groups[0].expected - 370.0).abs() < 1e-9);
        let overall = mix
            .disagreements
            .iter()
            .find(|d| d.code.is_none())
            .expect("test-level disagreement");
        assert!(
            overall.note.contains("which products each makes"),
            "{}",
            overall.note
        );
        let a = mix
            .disagreements
            .iter()
            .find(|d| d.code.as_deref() == Some("A"))
            .expect("A's crude flag is not an adjusted one");
        assert!(
            a.note.contains("only because it makes more of HARD"),
            "{}",
            a.note
        );
        assert!(r.cautions.iter().any(|c| c == &overall.note));
        // The per-product table behind it.
        assert_eq!(mix.products.len(), 2);
        assert_eq!(mix.groups[0].products.len(), 2);
        assert!((mix.products[1].rate - 0.04).abs() < 1e-15);
    }

    #[test]
    fn a_difference_hidden_by_the_mix_is_found_within_products() {
        // A is worse than B within each product (2% vs 1%, 6% vs 3%) but makes mostly
        // the easy product, so its crude rate is about B's.
        let groups = vec![
            group("A", &[(Some("EASY"), 9000, 180), (Some("HARD"), 1000, 60)]),
            group("B", &[(Some("EASY"), 3000, 30), (Some("HARD"), 7000, 210)]),
        ];
        let r = build_report(&request(StratifyChoice::Product), &groups);
        assert!(!r.test.as_ref().expect("crude").significant);
        let mix = r.product_mix.as_ref().expect("mix");
        let t = mix.test.as_ref().expect("test");
        assert!(t.significant && t.p_value < 1e-6, "{t:?}");
        let or = mix.common_odds_ratio.as_ref().expect("or");
        assert!(or.odds_ratio > 1.8 && or.odds_ratio < 2.2, "{or:?}");
        assert!(
            mix.disagreements
                .iter()
                .any(|d| d.code.is_none() && d.note.contains("the product mix hides a difference"))
        );
        assert_eq!(mix.groups[0].flag, Some(Flag::Above));
    }

    #[test]
    fn many_groups_use_the_generalised_test_and_no_products_no_section() {
        let mut groups = simpson();
        groups.push(group(
            "C",
            &[
                (Some("EASY"), 5000, 50),
                (Some("HARD"), 5000, 200),
                (None, 100, 3),
            ],
        ));
        let r = build_report(&request(StratifyChoice::Product), &groups);
        let mix = r.product_mix.as_ref().expect("mix");
        let t = mix.test.as_ref().expect("test");
        assert_eq!(t.method, "generalised-cmh");
        assert_eq!(t.df, 2);
        assert!(mix.common_odds_ratio.is_none());
        assert_eq!(mix.products[0].product, None);
        assert!((mix.funnel_coverage - 0.95f64.powf(1.0 / 3.0)).abs() < 1e-15);
        let off = build_report(&request(StratifyChoice::Crude), &groups);
        assert!(off.product_mix.is_none());
        assert_eq!(off.parameters.stratify, StratifyChoice::Crude);
        let plain: Vec<GroupCounts> = groups
            .iter()
            .map(|g| GroupCounts {
                products: BTreeMap::new(),
                ..g.clone()
            })
            .collect();
        assert!(
            build_report(&request(StratifyChoice::Product), &plain)
                .product_mix
                .is_none()
        );
    }

    #[test]
    fn products_made_by_one_group_only_leave_nothing_to_compare_within() {
        let groups = vec![
            group("A", &[(Some("EASY"), 1000, 10)]),
            group("B", &[(Some("HARD"), 1000, 40)]),
        ];
        let r = build_report(&request(StratifyChoice::Product), &groups);
        let mix = r.product_mix.as_ref().expect("mix");
        assert!(mix.test.is_none());
        let why = &mix.not_testable.as_ref().expect("reason").reason;
        assert!(why.contains("nothing to compare"), "{why}");
    }

    #[test]
    fn few_units_make_no_difference_an_uninformative_verdict() {
        let few = vec![group("A", &[(None, 40, 1)]), group("B", &[(None, 40, 2)])];
        let r = build_report(&request(StratifyChoice::Crude), &few);
        let p = r.power.as_ref().expect("power");
        assert!(p.uninformative);
        let t = r.test.as_ref().expect("test");
        assert!(
            !t.significant && t.verdict.contains("uninformative"),
            "{}",
            t.verdict
        );
        // The rule's own numbers: group A against B, at the pooled rate 3/80.
        let rule = PowerRule::new(0.05, POWER).expect("rule");
        let want = rule.detectable_difference(3.0 / 80.0, 40.0, 40.0);
        assert_eq!(r.groups[0].detectable_difference, want);
        assert_eq!(r.pairs[0].detectable_difference, want);
        assert_eq!(p.detectable_difference, want);

        let many = vec![
            group("A", &[(None, 40_000, 1000)]),
            group("B", &[(None, 40_000, 1010)]),
        ];
        let r = build_report(
            &ReportRequest {
                parameters: Parameters {
                    min_difference: Some(0.005),
                    baseline: None,
                    ..Parameters::default()
                },
                ..request(StratifyChoice::Crude)
            },
            &many,
        );
        let p = r.power.as_ref().expect("power");
        assert!(!r.test.as_ref().expect("test").significant);
        assert!(!p.uninformative, "{p:?}");
        assert!(p.detectable_difference.expect("some") < 0.005);
        let need = rule
            .units_needed(2010.0 / 80_000.0, 0.005)
            .expect("valid")
            .ceil() as u64;
        assert_eq!(p.units_needed, Some(need));
    }
}
