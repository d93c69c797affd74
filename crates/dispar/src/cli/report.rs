//! `dispar report`: the report of one period straight from a database file, without a
//! server, printed as text or JSON. The same parameter type, the same checks and the
//! same [`ReportService`] as `GET /v1/reports`, so the JSON equals the API's body for
//! the same data.
//!
//! Exit codes: 0 the report was printed (whatever its verdict, including "not
//! testable"); 2 an option is unusable (one line per problem on stderr, naming the
//! flag), including a site that is not registered; 1 the database cannot be read or
//! the output cannot be written.

use std::io::Write as _;
use std::process::ExitCode;

use dispar::reports::{ReportError, ReportParams, ReportService, ReportSpec};
use dispar_store::StoreError;

use super::DatabaseArgs;

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
    #[command(flatten)]
    params: ReportParams,
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
    let (spec, period) = ReportSpec::parse_report(&args.params).map_err(|errors| {
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
    let store = super::open(&args.database)
        .await
        .map_err(|e| (EXIT_FAILURE, format!("dispar report: {e}")))?;
    // No time limit: the person at the terminal decides how long to wait.
    let result = ReportService::new(store.clone(), None)
        .report(&spec, period)
        .await;
    store.close().await;
    let report = result
        .map_err(|e| match e {
            ReportError::Store(StoreError::UnknownSite { site }) => (
                EXIT_BAD_INPUT,
                format!("dispar report: --site: site {site} is not registered"),
            ),
            other => (
                EXIT_FAILURE,
                format!("dispar report: cannot read the counts: {other}"),
            ),
        })?
        .value;
    match args.format {
        Format::Text => Ok(report.to_text()),
        Format::Json => serde_json::to_string_pretty(report.as_ref())
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
