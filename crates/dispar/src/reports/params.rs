//! The parameters of a report as given, unchecked: one type for the query string of
//! `GET /v1/reports` and `GET /v1/reports/series` (serde), the GET forms of the pages
//! (serde, after the page's own tidying) and the flags of `dispar report` (clap).
//!
//! Every value is kept as text: the checks of `ReportSpec` read it
//! exactly (no trimming, no leading `+`, finite numbers only) and name each problem
//! by its parameter, whatever the value came from.

use serde::Deserialize;

/// The parameters of `GET /v1/reports`, in the order serde's messages list them.
pub const REPORT_PARAMETERS: &[&str] = &[
    "period",
    "level",
    "site",
    "product",
    "alpha",
    "method",
    "pairwise",
    "adjust",
    "resamples",
    "min_difference",
    "overdispersion",
    "baseline",
    "stratify",
    "as_of",
];

/// The parameters of `GET /v1/reports/series`.
pub const SERIES_PARAMETERS: &[&str] = &[
    "from",
    "to",
    "level",
    "site",
    "product",
    "alpha",
    "method",
    "pairwise",
    "adjust",
    "resamples",
    "min_difference",
    "overdispersion",
    "baseline",
    "stratify",
    "as_of",
];

/// A report or series request as given. Unknown names are not refused here: the
/// endpoints refuse the names they do not take, the pages ignore them.
///
/// On the command line (`dispar report`), `--period` is required and `from` and `to`
/// are not flags.
#[derive(Debug, Clone, Default, PartialEq, Eq, Deserialize, clap::Args)]
pub struct ReportParams {
    /// The period: 2026-03-14, 2026-W11, 2026-03, 2026-Q1, 2026, or 2026-03-01..2026-03-20.
    #[arg(long, required = true)]
    pub period: Option<String>,
    /// The first period of a series.
    #[arg(skip)]
    pub from: Option<String>,
    /// The last period of a series (of the same kind as `from`).
    #[arg(skip)]
    pub to: Option<String>,
    /// What is compared: site (default), line (the lines of --site), all-lines.
    #[arg(long, value_name = "site|line|all-lines")]
    pub level: Option<String>,
    /// For --level line the site whose lines are compared; otherwise only this site.
    #[arg(long)]
    pub site: Option<String>,
    /// Only this product.
    #[arg(long)]
    pub product: Option<String>,
    /// Significance level, from 1e-12 up to (not including) 1 (default 0.05).
    #[arg(long)]
    pub alpha: Option<String>,
    /// Omnibus test: auto, pearson, g, exact.
    #[arg(long, value_name = "auto|pearson|g|exact")]
    pub method: Option<String>,
    /// Pairwise test: auto, pearson, pearson-yates, fisher.
    #[arg(long, value_name = "auto|pearson|pearson-yates|fisher")]
    pub pairwise: Option<String>,
    /// Adjustment of pairwise p-values: holm, bonferroni, hochberg, bh.
    #[arg(long, value_name = "holm|bonferroni|hochberg|bh")]
    pub adjust: Option<String>,
    /// Monte Carlo resamples for exact conditional p-values (100 to 1000000).
    #[arg(long, value_name = "N")]
    pub resamples: Option<String>,
    /// Smallest difference in rates that matters, in rate units (0.005 = half a point).
    #[arg(long, value_name = "RATE")]
    pub min_difference: Option<String>,
    /// Overdispersion: estimate (estimate phi and say so) or widen (also widen the
    /// flag rule's limit by sqrt(phi) when phi > 1).
    #[arg(long, value_name = "estimate|widen")]
    pub overdispersion: Option<String>,
    /// Earlier periods of the same kind each group is compared with (2 to 52, default
    /// 8; a day uses the group's earlier days with production), or off.
    #[arg(long, value_name = "N|off")]
    pub baseline: Option<String>,
    /// Product mix: product (default; add the comparison adjusted for product mix when
    /// the records carry products) or none (crude rates only).
    #[arg(long, value_name = "product|none")]
    pub stratify: Option<String>,
    /// Use the data as they stood at this RFC 3339 instant (e.g. 2026-04-01T00:00:00Z).
    #[arg(long, value_name = "TIMESTAMP")]
    pub as_of: Option<String>,
}

impl ReportParams {
    /// The value of the parameter `name`, if given (`None` for a name this type does
    /// not hold).
    pub fn get(&self, name: &str) -> Option<&str> {
        // Destructured so that a new field cannot be forgotten here.
        let ReportParams {
            period,
            from,
            to,
            level,
            site,
            product,
            alpha,
            method,
            pairwise,
            adjust,
            resamples,
            min_difference,
            overdispersion,
            baseline,
            stratify,
            as_of,
        } = self;
        let value = match name {
            "period" => period,
            "from" => from,
            "to" => to,
            "level" => level,
            "site" => site,
            "product" => product,
            "alpha" => alpha,
            "method" => method,
            "pairwise" => pairwise,
            "adjust" => adjust,
            "resamples" => resamples,
            "min_difference" => min_difference,
            "overdispersion" => overdispersion,
            "baseline" => baseline,
            "stratify" => stratify,
            "as_of" => as_of,
            _ => return None,
        };
        value.as_deref()
    }

    /// Reads `pairs` (name, value) as a query string holding them; a repeated name
    /// is an error (`duplicate field`), an unknown one is ignored.
    pub fn from_pairs<I>(pairs: I) -> Result<Self, serde_urlencoded::de::Error>
    where
        I: IntoIterator<Item = (String, String)>,
    {
        let query = form_urlencoded::Serializer::new(String::new())
            .extend_pairs(pairs)
            .finish();
        serde_urlencoded::from_str(&query)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_endpoint_parameter_is_a_field_read_by_its_name() {
        for name in REPORT_PARAMETERS.iter().chain(SERIES_PARAMETERS) {
            let p = ReportParams::from_pairs([((*name).to_owned(), "x".to_owned())]).unwrap();
            assert_eq!(p.get(name), Some("x"), "{name}");
            let others = REPORT_PARAMETERS
                .iter()
                .chain(SERIES_PARAMETERS)
                .filter(|n| *n != name)
                .filter_map(|n| p.get(n));
            assert_eq!(others.count(), 0, "{name} set only itself");
        }
        assert_eq!(ReportParams::default().get("colour"), None);
    }

    #[test]
    fn the_parameters_of_a_report_and_of_a_series_differ_only_in_their_periods() {
        let shared = |list: &[&'static str]| -> Vec<&'static str> {
            list.iter()
                .copied()
                .filter(|n| !matches!(*n, "period" | "from" | "to"))
                .collect()
        };
        assert_eq!(shared(REPORT_PARAMETERS), shared(SERIES_PARAMETERS));
        for name in dispar_core::report::params::PARAMETER_NAMES {
            assert!(REPORT_PARAMETERS.contains(&name), "{name}");
        }
    }

    #[test]
    fn values_are_kept_exactly_as_given() {
        let p = ReportParams::from_pairs([
            ("alpha".to_owned(), " 0.05".to_owned()),
            ("colour".to_owned(), "red".to_owned()),
        ])
        .unwrap();
        assert_eq!(p.alpha.as_deref(), Some(" 0.05"));
        let e = ReportParams::from_pairs([
            ("alpha".to_owned(), "0.05".to_owned()),
            ("alpha".to_owned(), "0.01".to_owned()),
        ])
        .unwrap_err();
        assert_eq!(e.to_string(), "duplicate field `alpha`");
    }
}
