//! `dispar report`: the report of one period straight from a database file, without a
//! server, printed as text or JSON. Same parameters, same checks and the same code
//! path as `GET /v1/reports` (`dispar::reports`: the store's sums, then the builder),
//! so the JSON equals the API's body for the same data.
//!
//! Exit codes: 0 the report was printed (whatever its verdict, including "not
//! testable"); 2 an option is unusable (one line per problem on stderr, naming the
//! flag), including a site that is not registered; 1 the database cannot be read or
//! the output cannot be written.

use std::io::Write as _;
use std::process::ExitCode;

use dispar::reports::compute;
use dispar::reports::spec::{RawQuery, ReportSpec};
use dispar_store::StoreError;

use crate::DatabaseArgs;

/// Output format of `dispar report`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum Format {
    /// A readable layout for a terminal.
    Text,
    /// JSON, as `GET /v1/reports` answers.
    Json,
}

/// Arguments of `dispar report` (values are checked by the same rules as the API's
/// query parameters, so they are taken as text here).
#[derive(Debug, Clone, clap::Args)]
pub struct ReportArgs {
    #[command(flatten)]
    database: DatabaseArgs,
    /// The period: 2026-03-14, 2026-W11, 2026-03, 2026-Q1, 2026, or 2026-03-01..2026-03-20.
    #[arg(long)]
    period: String,
    /// What is compared: site (default), line (the lines of --site), all-lines.
    #[arg(long, value_name = "site|line|all-lines")]
    level: Option<String>,
    /// For --level line the site whose lines are compared; otherwise only this site.
    #[arg(long)]
    site: Option<String>,
    /// Only this product.
    #[arg(long)]
    product: Option<String>,
    /// Significance level, between 0 and 1 (default 0.05).
    #[arg(long)]
    alpha: Option<String>,
    /// Omnibus test: auto, pearson, g, exact.
    #[arg(long, value_name = "auto|pearson|g|exact")]
    method: Option<String>,
    /// Pairwise test: auto, pearson, pearson-yates, fisher.
    #[arg(long, value_name = "auto|pearson|pearson-yates|fisher")]
    pairwise: Option<String>,
    /// Adjustment of pairwise p-values: holm, bonferroni, hochberg, bh.
    #[arg(long, value_name = "holm|bonferroni|hochberg|bh")]
    adjust: Option<String>,
    /// Monte Carlo resamples for exact conditional p-values (100 to 1000000).
    #[arg(long, value_name = "N")]
    resamples: Option<String>,
    /// Smallest difference in rates that matters, in rate units (0.005 = half a point).
    #[arg(long, value_name = "RATE")]
    min_difference: Option<String>,
    /// Overdispersion: estimate (estimate phi and say so) or widen (also widen the
    /// flag rule's limit by sqrt(phi) when phi > 1).
    #[arg(long, value_name = "estimate|widen")]
    overdispersion: Option<String>,
    /// Use the data as they stood at this RFC 3339 instant (e.g. 2026-04-01T00:00:00Z).
    #[arg(long, value_name = "TIMESTAMP")]
    as_of: Option<String>,
    /// Output format.
    #[arg(long, value_enum, default_value_t = Format::Text)]
    format: Format,
}

/// Exit code for unusable options.
pub const EXIT_BAD_INPUT: u8 = 2;
/// Exit code when the database cannot be read or the output not written.
pub const EXIT_FAILURE: u8 = 1;

/// The flag named by a parameter (`min_difference` -> `--min-difference`).
fn flag(field: &str) -> String {
    format!("--{}", field.replace('_', "-"))
}

/// The file a SQLite URL or path names, when it is a local file.
fn sqlite_file(url: &str) -> Option<std::path::PathBuf> {
    let url = url.trim();
    let lower = url.to_ascii_lowercase();
    let path = if lower.starts_with("sqlite://") {
        &url["sqlite://".len()..]
    } else if lower.starts_with("sqlite:") {
        &url["sqlite:".len()..]
    } else if url.contains("://") {
        return None;
    } else {
        url
    };
    let path = path.split('?').next().unwrap_or(path);
    (!path.is_empty()).then(|| std::path::PathBuf::from(path))
}

/// Runs `dispar report` and returns the process exit code.
pub async fn run(args: &ReportArgs) -> ExitCode {
    match report(args).await {
        Ok(out) => {
            let mut stdout = std::io::stdout().lock();
            match stdout
                .write_all(out.as_bytes())
                .and_then(|()| stdout.flush())
            {
                Ok(()) => ExitCode::SUCCESS,
                Err(e) => {
                    eprintln!("dispar report: cannot write the output: {e}");
                    ExitCode::from(EXIT_FAILURE)
                }
            }
        }
        Err((code, message)) => {
            eprintln!("{message}");
            ExitCode::from(code)
        }
    }
}

/// Does the work of [`run`]: the text to print, or an exit code and the message.
async fn report(args: &ReportArgs) -> Result<String, (u8, String)> {
    let raw = RawQuery {
        period: Some(&args.period),
        from: None,
        to: None,
        level: args.level.as_deref(),
        site: args.site.as_deref(),
        product: args.product.as_deref(),
        alpha: args.alpha.as_deref(),
        method: args.method.as_deref(),
        pairwise: args.pairwise.as_deref(),
        adjust: args.adjust.as_deref(),
        resamples: args.resamples.as_deref(),
        min_difference: args.min_difference.as_deref(),
        overdispersion: args.overdispersion.as_deref(),
        as_of: args.as_of.as_deref(),
    };
    let (spec, period) = ReportSpec::parse_report(&raw).map_err(|errors| {
        let lines: Vec<String> = errors
            .iter()
            .map(|e| {
                let message = if e.field == "site" && e.reason == "required" {
                    "--level line compares the lines of one site; name it with --site"
                } else {
                    e.message.as_str()
                };
                format!("dispar report: {}: {message}", flag(&e.field))
            })
            .collect();
        (EXIT_BAD_INPUT, lines.join("\n"))
    })?;
    // A report reads an existing database; opening a mistyped path would create an
    // empty one and print a report of nothing.
    if let Some(file) = sqlite_file(&args.database.url)
        && !file.exists()
    {
        return Err((
            EXIT_FAILURE,
            format!(
                "dispar report: there is no database at {} (give --database or DATABASE_URL)",
                file.display()
            ),
        ));
    }
    let store = crate::open(&args.database)
        .await
        .map_err(|e| (EXIT_FAILURE, format!("dispar report: {e}")))?;
    let result = compute::report(store.as_ref(), &spec, period).await;
    store.close().await;
    let (report, _version) = result.map_err(|e| match e {
        StoreError::UnknownSite { site } => (
            EXIT_BAD_INPUT,
            format!("dispar report: --site: site {site} is not registered"),
        ),
        other => (
            EXIT_FAILURE,
            format!("dispar report: cannot read the counts: {other}"),
        ),
    })?;
    match args.format {
        Format::Text => Ok(report.to_text()),
        Format::Json => serde_json::to_string_pretty(&report)
            .map(|mut s| {
                s.push('\n');
                s
            })
            .map_err(|e| {
                (
                    EXIT_FAILURE,
                    format!("dispar report: cannot format the report as JSON: {e}"),
                )
            }),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn database_urls_name_their_file() {
        let f = |u: &str| sqlite_file(u).map(|p| p.display().to_string());
        assert_eq!(f("sqlite:dispar.db").as_deref(), Some("dispar.db"));
        assert_eq!(
            f("sqlite:///var/lib/d.db").as_deref(),
            Some("/var/lib/d.db")
        );
        assert_eq!(f("sqlite://d.db?mode=rwc").as_deref(), Some("d.db"));
        assert_eq!(f("plain.db").as_deref(), Some("plain.db"));
        assert_eq!(f("postgres://u@h/db"), None);
        assert_eq!(flag("min_difference"), "--min-difference");
    }
}
