//! Report parameters as callers give them (query strings, CLI flags) and their checks.

use std::fmt;
use std::str::FromStr;

use serde::{Serialize, Serializer};

use crate::code::{ProductCode, SiteCode};
use crate::error::{Collector, FieldError, ValidationError};

/// Reason for a parameter outside its accepted range.
const OUT_OF_RANGE: &str = "out-of-range";
/// Reason for a parameter value that is not one of the accepted words.
const UNKNOWN_VALUE: &str = "unknown-value";

macro_rules! word_enum {
    ($(#[$doc:meta])* $name:ident, $what:literal, { $($(#[$vdoc:meta])* $variant:ident => $word:literal),+ $(,)? }) => {
        $(#[$doc])*
        #[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Default)]
        pub enum $name {
            $($(#[$vdoc])* $variant),+
        }

        impl $name {
            /// Every accepted word, in order.
            pub const WORDS: &'static [&'static str] = &[$($word),+];

            /// The word for this value.
            pub fn as_str(&self) -> &'static str {
                match self {
                    $($name::$variant => $word),+
                }
            }

            /// Parses `s`, reporting a problem as a [`FieldError`] on `field`.
            pub fn parse_field(s: &str, field: &str) -> Result<Self, FieldError> {
                s.parse().map_err(|e: UnknownWord| FieldError::new(field, UNKNOWN_VALUE, e.to_string()))
            }
        }

        impl FromStr for $name {
            type Err = UnknownWord;
            fn from_str(s: &str) -> Result<Self, UnknownWord> {
                match s {
                    $($word => Ok($name::$variant),)+
                    _ => Err(UnknownWord {
                        what: $what,
                        given: s.to_owned(),
                        accepted: Self::WORDS,
                    }),
                }
            }
        }

        impl fmt::Display for $name {
            fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
                f.write_str(self.as_str())
            }
        }

        impl Serialize for $name {
            fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
                s.serialize_str(self.as_str())
            }
        }
    };
}

/// A word that is not one of the accepted values of a parameter.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("{given:?} is not a {what}; use one of: {}", accepted.join(", "))]
pub struct UnknownWord {
    /// What the parameter is.
    pub what: &'static str,
    /// What was given.
    pub given: String,
    /// The accepted words.
    pub accepted: &'static [&'static str],
}

word_enum!(
    /// The omnibus test asked for (`--method`, `method=`).
    MethodChoice, "method", {
        /// Pearson's X^2 when Cochran's rule holds, else an exact conditional test.
        #[default]
        Auto => "auto",
        /// Pearson's X^2 with its asymptotic p-value.
        Pearson => "pearson",
        /// The likelihood-ratio G^2 with its asymptotic p-value.
        G => "g",
        /// The exact conditional test (Fisher for 2 x 2, Monte Carlo otherwise).
        Exact => "exact",
    }
);

word_enum!(
    /// The test for each pair of groups (`--pairwise`, `pairwise=`).
    PairwiseChoice, "pairwise method", {
        /// Pearson's X^2 when Cochran's rule holds for the pair, else Fisher's exact test.
        #[default]
        Auto => "auto",
        /// Pearson's X^2.
        Pearson => "pearson",
        /// Pearson's X^2 with Yates' continuity correction.
        PearsonYates => "pearson-yates",
        /// Fisher's exact test.
        Fisher => "fisher",
    }
);

word_enum!(
    /// The multiple-comparison adjustment of pairwise p-values (`--adjust`, `adjust=`).
    AdjustChoice, "p-value adjustment", {
        /// Holm's step-down method (controls the family-wise error rate).
        #[default]
        Holm => "holm",
        /// Bonferroni's method.
        Bonferroni => "bonferroni",
        /// Hochberg's step-up method.
        Hochberg => "hochberg",
        /// Benjamini-Hochberg (controls the false discovery rate).
        Bh => "bh",
    }
);

word_enum!(
    /// What overdispersion does to flag limits (`--overdispersion`, `overdispersion=`).
    DispersionChoice, "overdispersion handling", {
        /// Estimate phi and say so; flag with the plain ANOM limit.
        #[default]
        Estimate => "estimate",
        /// Also widen the flag limit by sqrt(phi) when phi > 1 (Spiegelhalter 2005).
        Widen => "widen",
    }
);

word_enum!(
    /// Whether a report adds the comparison adjusted for product mix (`--stratify`,
    /// `stratify=`). Not `adjust`, which already names the adjustment of pairwise
    /// p-values.
    StratifyChoice, "product-mix choice", {
        /// Add `product_mix` when the groups' records carry products.
        #[default]
        Product => "product",
        /// Crude rates only.
        Crude => "none",
    }
);

word_enum!(
    /// What kind of groups a report compares (`level=`).
    LevelKind, "level", {
        /// Sites (lines of a site pooled).
        #[default]
        Site => "site",
        /// The lines of one site.
        Line => "line",
        /// Every line of every site.
        AllLines => "all-lines",
    }
);

/// Default significance level.
pub const DEFAULT_ALPHA: f64 = 0.05;
/// Default number of Monte Carlo resamples for exact conditional p-values.
pub const DEFAULT_RESAMPLES: u64 = 10_000;
/// Fewest Monte Carlo resamples accepted.
pub const MIN_RESAMPLES: u64 = 100;
/// Most Monte Carlo resamples accepted.
pub const MAX_RESAMPLES: u64 = 1_000_000;

/// The level of a report: which groups are compared.
#[derive(Debug, Clone, PartialEq, Eq, Hash)]
pub enum Level {
    /// Compare sites.
    Site,
    /// Compare the lines of one site.
    Line {
        /// The site whose lines are compared.
        site: SiteCode,
    },
    /// Compare every line across sites.
    AllLines,
}

impl Level {
    /// The kind of level.
    pub fn kind(&self) -> LevelKind {
        match self {
            Level::Site => LevelKind::Site,
            Level::Line { .. } => LevelKind::Line,
            Level::AllLines => LevelKind::AllLines,
        }
    }

    /// Builds a level from `level=` and `site=` (field names as given), requiring
    /// `site` for `line`.
    pub fn from_query(level: Option<&str>, site: Option<&SiteCode>) -> Result<Self, FieldError> {
        let kind = match level {
            Some(l) => LevelKind::parse_field(l, "level")?,
            None => LevelKind::Site,
        };
        match (kind, site) {
            (LevelKind::Site, _) => Ok(Level::Site),
            (LevelKind::AllLines, _) => Ok(Level::AllLines),
            (LevelKind::Line, Some(site)) => Ok(Level::Line { site: site.clone() }),
            (LevelKind::Line, None) => Err(FieldError::new(
                "site",
                crate::error::reason::REQUIRED,
                "level=line compares the lines of one site; give it with site=",
            )),
        }
    }
}

/// The statistical choices of a report or analysis, checked.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Parameters {
    /// Significance level, in [1e-12, 1).
    pub alpha: f64,
    /// Omnibus test.
    pub method: MethodChoice,
    /// Pairwise test.
    pub pairwise: PairwiseChoice,
    /// Adjustment of pairwise p-values.
    pub adjust: AdjustChoice,
    /// Monte Carlo resamples for exact conditional p-values.
    pub resamples: u64,
    /// Smallest difference in rates that matters (in rate units, e.g. 0.005 = half a
    /// percentage point), if the caller gave one.
    pub min_difference: Option<f64>,
    /// Whether overdispersion widens flag limits.
    pub overdispersion: DispersionChoice,
    /// Earlier periods of the same kind in each group's baseline (`baseline=N`), or
    /// `None` for `baseline=off`.
    pub baseline: Option<usize>,
    /// Whether the product-mix comparison is added when products exist.
    pub stratify: StratifyChoice,
}

/// Earlier periods in a baseline unless the caller says otherwise.
pub const DEFAULT_BASELINE: usize = 8;
/// Fewest earlier periods a caller may ask for (a moving range needs two).
pub const MIN_BASELINE: usize = 2;
/// Most earlier periods a caller may ask for (a year of weeks).
pub const MAX_BASELINE: usize = 52;

/// Parses `baseline=`: `off`, or a whole number of periods in
/// [`MIN_BASELINE`]..=[`MAX_BASELINE`]; problems name the field `baseline`.
pub fn parse_baseline(s: &str) -> Result<Option<usize>, FieldError> {
    if s == "off" {
        return Ok(None);
    }
    let n = s
        .parse::<usize>()
        .ok()
        .filter(|_| s.bytes().all(|b| b.is_ascii_digit()))
        .ok_or_else(|| {
            FieldError::new(
                "baseline",
                crate::error::reason::NOT_A_NUMBER,
                format!(
                    "baseline must be off or a whole number of earlier periods ({MIN_BASELINE} to {MAX_BASELINE})"
                ),
            )
        })?;
    if (MIN_BASELINE..=MAX_BASELINE).contains(&n) {
        Ok(Some(n))
    } else {
        Err(FieldError::new(
            "baseline",
            OUT_OF_RANGE,
            format!(
                "baseline must be {MIN_BASELINE} to {MAX_BASELINE} earlier periods, or off, got {n}"
            ),
        ))
    }
}

impl Default for Parameters {
    fn default() -> Self {
        Self {
            alpha: DEFAULT_ALPHA,
            method: MethodChoice::Auto,
            pairwise: PairwiseChoice::Auto,
            adjust: AdjustChoice::Holm,
            resamples: DEFAULT_RESAMPLES,
            min_difference: None,
            overdispersion: DispersionChoice::Estimate,
            baseline: Some(DEFAULT_BASELINE),
            stratify: StratifyChoice::Product,
        }
    }
}

/// The names of the statistical parameters, as query parameters and (with `-` for
/// `_`) command-line flags; [`Parameters::from_text`] reads each by its name.
pub const PARAMETER_NAMES: [&str; 9] = [
    "alpha",
    "method",
    "pairwise",
    "adjust",
    "resamples",
    "min_difference",
    "overdispersion",
    "baseline",
    "stratify",
];

/// The smallest `alpha` a report accepts. Below it the intervals' confidence 1 - alpha
/// rounds towards 1 in f64 (at 1.1e-16 it is exactly 1) and the limits ask for tail
/// probabilities finer than the p-values are computed to (about 1e-12 relative).
pub const MIN_ALPHA: f64 = 1e-12;

impl Parameters {
    /// Checks typed values: alpha in [1e-12, 1) ([`MIN_ALPHA`]), resamples in 100..=1,000,000,
    /// min_difference finite in [0, 1). Errors name the fields `alpha`, `resamples`,
    /// `min_difference`.
    pub fn new(
        alpha: f64,
        method: MethodChoice,
        pairwise: PairwiseChoice,
        adjust: AdjustChoice,
        resamples: u64,
        min_difference: Option<f64>,
    ) -> Result<Self, ValidationError> {
        let mut c = Collector::new();
        if !(MIN_ALPHA..1.0).contains(&alpha) {
            c.push(FieldError::new(
                "alpha",
                OUT_OF_RANGE,
                format!("alpha must be from 1e-12 up to (not including) 1, got {alpha}"),
            ));
        }
        if !(MIN_RESAMPLES..=MAX_RESAMPLES).contains(&resamples) {
            c.push(FieldError::new(
                "resamples",
                OUT_OF_RANGE,
                format!("resamples must be {MIN_RESAMPLES} to {MAX_RESAMPLES}, got {resamples}"),
            ));
        }
        if let Some(d) = min_difference
            && !(d.is_finite() && (0.0..1.0).contains(&d))
        {
            c.push(FieldError::new(
                "min_difference",
                OUT_OF_RANGE,
                format!("min_difference is a difference of rates, from 0 up to (not including) 1, got {d}"),
            ));
        }
        if c.is_empty() {
            Ok(Self {
                alpha,
                method,
                pairwise,
                adjust,
                resamples,
                min_difference,
                overdispersion: DispersionChoice::Estimate,
                baseline: Some(DEFAULT_BASELINE),
                stratify: StratifyChoice::Product,
            })
        } else {
            Err(c.fail())
        }
    }

    /// Parses and checks the parameters as text, exactly (no trimming, no leading
    /// `+`, finite numbers only), collecting every problem under the parameter's
    /// name. `text(name)` is the value given for the parameter `name` (one of
    /// [`PARAMETER_NAMES`]), `None` when it was not given (it takes its default).
    pub fn from_text<'a>(text: impl Fn(&str) -> Option<&'a str>) -> Result<Self, ValidationError> {
        let mut c = Collector::new();
        let d = Parameters::default();
        let number = |c: &mut Collector, s: Option<&str>, field: &str, default: f64| -> f64 {
            match s.map(|s| {
                s.parse::<f64>()
                    .ok()
                    .filter(|x| x.is_finite() && !s.starts_with('+'))
                    .ok_or(())
            }) {
                None => default,
                Some(Ok(x)) => x,
                Some(Err(_)) => {
                    c.push(FieldError::new(
                        field,
                        crate::error::reason::NOT_A_NUMBER,
                        format!("{field} must be a number"),
                    ));
                    default
                }
            }
        };
        let alpha = number(&mut c, text("alpha"), "alpha", d.alpha);
        let min_difference =
            text("min_difference").map(|s| number(&mut c, Some(s), "min_difference", 0.0));
        let resamples = match text("resamples").map(|s| {
            s.parse::<u64>()
                .ok()
                .filter(|_| s.bytes().all(|b| b.is_ascii_digit()))
                .ok_or(())
        }) {
            None => d.resamples,
            Some(Ok(n)) => n,
            Some(Err(_)) => {
                c.push(FieldError::new(
                    "resamples",
                    crate::error::reason::NOT_A_NUMBER,
                    "resamples must be a whole number",
                ));
                d.resamples
            }
        };
        let method = text("method").map_or(Some(d.method), |s| {
            c.take(MethodChoice::parse_field(s, "method"))
        });
        let pairwise = text("pairwise").map_or(Some(d.pairwise), |s| {
            c.take(PairwiseChoice::parse_field(s, "pairwise"))
        });
        let adjust = text("adjust").map_or(Some(d.adjust), |s| {
            c.take(AdjustChoice::parse_field(s, "adjust"))
        });
        let dispersion = text("overdispersion").map_or(Some(d.overdispersion), |s| {
            c.take(DispersionChoice::parse_field(s, "overdispersion"))
        });
        let baseline = text("baseline").map_or(Some(d.baseline), |s| c.take(parse_baseline(s)));
        let stratify = text("stratify").map_or(Some(d.stratify), |s| {
            c.take(StratifyChoice::parse_field(s, "stratify"))
        });
        match (method, pairwise, adjust, dispersion, baseline, stratify) {
            (Some(m), Some(p), Some(a), Some(o), Some(b), Some(st)) => {
                match Parameters::new(alpha, m, p, a, resamples, min_difference) {
                    Ok(v) if c.is_empty() => Ok(Parameters {
                        overdispersion: o,
                        baseline: b,
                        stratify: st,
                        ..v
                    }),
                    Ok(_) => Err(c.fail()),
                    Err(e) => {
                        c.extend(e);
                        Err(c.fail())
                    }
                }
            }
            _ => {
                if let Err(e) = Parameters::new(
                    alpha,
                    d.method,
                    d.pairwise,
                    d.adjust,
                    resamples,
                    min_difference,
                ) {
                    c.extend(e);
                }
                Err(c.fail())
            }
        }
    }
}

/// Filters applied to the counts before grouping, echoed in the report.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize)]
pub struct Filters {
    /// Only this site (for `level=site` or `all-lines`; for `level=line` it is the site).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub site: Option<SiteCode>,
    /// Only this product.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub product: Option<ProductCode>,
}

impl Filters {
    /// True when no filter is set.
    pub fn is_empty(&self) -> bool {
        self.site.is_none() && self.product.is_none()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parameter_words_round_trip_and_unknown_words_list_the_choices() {
        for w in MethodChoice::WORDS {
            assert_eq!(w.parse::<MethodChoice>().unwrap().as_str(), *w);
        }
        assert_eq!(
            "pearson-yates".parse::<PairwiseChoice>(),
            Ok(PairwiseChoice::PearsonYates)
        );
        assert_eq!("bh".parse::<AdjustChoice>(), Ok(AdjustChoice::Bh));
        let e = "holms".parse::<AdjustChoice>().unwrap_err().to_string();
        assert_eq!(
            e,
            "\"holms\" is not a p-value adjustment; use one of: holm, bonferroni, hochberg, bh"
        );
    }

    #[test]
    fn parameters_as_text_are_checked_together() {
        let p = Parameters::from_text(|_| None).unwrap();
        assert_eq!(p, Parameters::default());
        let given = [
            ("alpha", "1.5"),
            ("method", "chi"),
            ("resamples", "ten"),
            ("min_difference", "-0.1"),
        ];
        let text = |name: &str| given.iter().find(|(n, _)| *n == name).map(|(_, v)| *v);
        let e = Parameters::from_text(text).unwrap_err();
        let mut fields: Vec<&str> = e.errors().iter().map(|f| f.field.as_str()).collect();
        fields.sort_unstable();
        assert_eq!(fields, ["alpha", "method", "min_difference", "resamples"]);
    }

    #[test]
    fn alpha_runs_from_1e_12_up_to_1() {
        let with = |a: f64| {
            Parameters::new(
                a,
                MethodChoice::Auto,
                PairwiseChoice::Auto,
                AdjustChoice::Holm,
                Parameters::default().resamples,
                None,
            )
        };
        assert!(with(MIN_ALPHA).is_ok());
        assert!(with(0.999).is_ok());
        // 5e-324 is the value schemathesis sent: it made the ANOM limit infinite.
        for bad in [9.9e-13, 5e-324, 0.0, 1.0, f64::NAN] {
            let e = with(bad).unwrap_err();
            assert_eq!(e.errors()[0].field, "alpha", "{bad}");
        }
    }

    #[test]
    fn level_line_needs_a_site() {
        assert_eq!(Level::from_query(None, None), Ok(Level::Site));
        assert_eq!(
            Level::from_query(Some("line"), None).unwrap_err().field,
            "site"
        );
        let s = SiteCode::parse("S1").unwrap();
        assert_eq!(
            Level::from_query(Some("line"), Some(&s)),
            Ok(Level::Line { site: s })
        );
        assert_eq!(
            Level::from_query(Some("lines"), None).unwrap_err().reason,
            "unknown-value"
        );
    }
}
