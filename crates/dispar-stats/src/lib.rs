//! Statistics on contingency tables of counts: do groups (sites, lines) differ in their
//! outcome rates, which ones, and by how much. Pure Rust, no I/O, deterministic.
//!
//! # Module map (the public API)
//!
//! | module | what | main items |
//! |---|---|---|
//! | [`table`] | r x c table of `u64` counts, margins, expected counts, dropping all-zero rows/columns | [`table::Table`] (`new`, `from_rows`, `from_rates`, `reduce`), [`table::Reduced`] |
//! | [`chisq`] | Pearson X^2, G^2, Yates (2 x 2), df; chi-square upper tail with a `log10_p` that never underflows; critical values | `upper_tail(x, df) -> Tail {p, log10_p}`, `critical_value(alpha, df)`, `pearson`, `likelihood_ratio`, `yates`, `degrees_of_freedom` |
//! | [`validity`] | Cochran's rule | `cochran(&Table) -> Validity` |
//! | [`exact`] | Fisher's exact test for 2 x 2, log space, any N | `fisher(a, b, c, d) -> Fisher {p_two_sided, log10_p, p_less, p_greater}` |
//! | [`montecarlo`] | Monte Carlo conditional p (Patefield's random tables), seeded from the table | `conditional_p(&Table, resamples, seed) -> MonteCarlo`, `table_seed`, `PatefieldSampler`, `patefield` |
//! | [`residuals`] | per-cell expected, contribution, Pearson and adjusted (Haberman) residuals | `cells(&Table) -> Vec<Cell>` |
//! | [`effect`] | Cramer's V and the bias-corrected V | `cramers_v`, `cramers_v_corrected` |
//! | [`interval`] | Wilson score interval; Newcombe's hybrid score interval for p1 - p2 | `Interval`, `wilson(x, n, confidence)`, `newcombe_difference(x1, n1, x2, n2, confidence)` |
//! | [`funnel`] | funnel-plot limits for a rate against sample size, with their normal quantile | `Funnel::new(pooled, coverage, scale)`, `Funnel::at(n) -> Interval` |
//! | [`adjust`] | Holm, Bonferroni, Hochberg, Benjamini-Hochberg | `adjust(&[f64], Adjustment) -> Vec<f64>` |
//! | [`anom`] | analysis-of-means critical value h, computed exactly for equal or unequal group sizes (Sidak fallback) | `critical(alpha, k) -> AnomCritical {h, method}`, `critical_for_sizes(alpha, &sizes)`, `sidak` |
//! | [`overdispersion`] | Spiegelhalter's multiplicative factor from winsorised z-scores; additive tau^2 | `spiegelhalter(z, fraction) -> Overdispersion`, `tau_squared` |
//! | [`pairwise`] | all pairs of groups as 2 x 2 tables, adjusted p over the testable pairs, rate difference with Newcombe CI | `pairwise(&[(inspected, defective)], &PairwiseOptions) -> Vec<Pair>`, `Untestable` |
//! | [`baseline`] | a group's period against its own baseline: quasi-binomial dispersion of the baseline periods, prediction z, Student's t limit at a Šidák level (or three sigma), earlier excursions left out, exact for small counts, verdict | `compare((inspected, defective), &baseline, &BaselineOptions) -> Comparison {verdict, reason, method, rate, z, limit, ..}`, `Limit`, `Verdict`, `Reason`, `Method` |
//! | [`spread`] | the usual spread between groups over the baseline periods (Spiegelhalter's phi from the pooled z-scores) and each group's above/below record | `usual_spread(&periods, groups, winsor_fraction) -> UsualSpread {overdispersion, periods, groups}` |
//! | [`standardise`] | indirect standardisation by product: each group's observed against expected defectives from the pooled product rates, exact Poisson interval on O/E, funnel limits on O/E | `indirect(&groups, confidence) -> Vec<Standardised>`, `poisson_ratio_interval`, `RatioFunnel` |
//! | [`stratified`] | Cochran-Mantel-Haenszel stratified by product: common odds ratio with the Robins-Breslow-Greenland interval and Breslow-Day homogeneity (2 groups), generalised CMH (k groups) | `mantel_haenszel(&[Stratum], confidence) -> MantelHaenszel`, `generalised_cmh(&groups) -> GeneralisedCmh`, `Stratum` |
//! | [`trend`] | Cochran-Armitage test for trend in proportions across ordered periods (binomial variance convention), slope per period, widened by the departure from a line | `cochran_armitage(&[(inspected, defective)], scores) -> Trend` |
//! | [`power`] | power of the two-group comparison of rates (Cohen's h, both tails): smallest detectable rise, units needed | `PowerRule::new(alpha, power)`, `detectable_difference`, `units_needed` |
//! | [`analysis`] | the whole analysis with method choice and reasons | `analyze(&Table, &Options) -> Analysis`, `analyze_rates(&[(inspected, defective)], &Options) -> RateAnalysis` |
//!
//! Errors are one enum, [`StatsError`]; a table on which no test is possible is
//! `Err(StatsError::NotTestable(`[`NotTestable`]`))`, carrying the typed reason and the
//! dropped rows and columns — never a NaN and never a silent switch to another test.
//!
//! ```
//! use dispar_stats::analysis::{analyze_rates, Flag, Options, TestUsed};
//! // (inspected, defective) per site.
//! let report = analyze_rates(&[(300, 36), (300, 46), (300, 42), (300, 63), (300, 38)],
//!                            &Options::default())?;
//! assert_eq!(report.test.test, TestUsed::Pearson);
//! assert!(report.test.reject);
//! let flagged: Vec<usize> = report.groups.iter()
//!     .filter(|g| g.flag == Some(Flag::Above)).map(|g| g.index).collect();
//! assert_eq!(flagged, vec![3]);
//! # Ok::<(), dispar_stats::StatsError>(())
//! ```
//!
//! # Numerical sources
//!
//! Chi-square upper tails as ln Q(df/2, x/2) from Loader's (2000) saddle-point prefactor and
//! the continued fraction (statrs 0.19.1's `sf` drifts to ~5e-12 at large df, its `erfc` to
//! ~4e-11; statrs still supplies ln Gamma and the start of critical values); Fisher and
//! Patefield with Loader's binomial terms; the ANOM constant by Fourier inversion (Soong &
//! Hsu 1997) with Weideman's (1994) Faddeeva function. Each module names its references;
//! tests name the source of every value.

pub mod adjust;
pub mod analysis;
pub mod anom;
pub mod baseline;
pub mod chisq;
pub mod effect;
mod error;
pub mod exact;
mod faddeeva;
pub mod funnel;
pub mod interval;
mod loader;
pub mod montecarlo;
pub mod overdispersion;
pub mod pairwise;
pub mod power;
pub mod residuals;
pub mod spread;
pub mod standardise;
pub mod stratified;
pub mod table;
#[cfg(test)]
mod testutil;
pub mod trend;
pub mod validity;

pub use error::{NotTestable, NotTestableReason, StatsError};
