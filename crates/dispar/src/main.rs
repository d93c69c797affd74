//! The `dispar` command: `serve`, `migrate`, `keys`, `analyze`, `report`, `demo`
//! (serve the demo scenario) and `demo generate`.
//!
//! Every subcommand that touches data takes `--database URL` (env `DATABASE_URL`,
//! default `sqlite:dispar.db` in the working directory; the file is created and
//! migrated when missing).

use std::io::Write as _;
use std::net::SocketAddr;
use std::process::ExitCode;
use std::time::Duration;

mod cli;

use clap::{Args, Parser, Subcommand};
use dispar::telemetry::{self, LogFormat};
use dispar::{AppState, Limits};

use crate::cli::{CliResult, DatabaseArgs, analyze, demo, keys, open, redact_url, report};

/// dispar: daily inspection counts in, defect-rate comparisons out.
#[derive(Debug, Parser)]
#[command(name = "dispar", version, about)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

/// One variant per subcommand; each has its own argument struct.
#[derive(Debug, Subcommand)]
enum Command {
    /// Run the HTTP API.
    Serve(ServeArgs),
    /// Create or upgrade the database schema, then exit.
    Migrate(DatabaseArgs),
    /// Create, list and revoke API keys.
    #[command(subcommand)]
    Keys(keys::KeysCommand),
    /// Compare defect rates (or a table of counts) from a CSV file, offline.
    Analyze(analyze::AnalyzeArgs),
    /// The report of one period from a database file, without a server (text or JSON).
    Report(Box<report::ReportArgs>),
    /// The invented demo scenario: `dispar demo` serves it on a fresh database with keys
    /// and examples; `dispar demo generate` writes its CSV files.
    Demo(demo::DemoArgs),
}

#[derive(Debug, Args)]
struct ServeArgs {
    /// Address to listen on (port 0 picks a free port; the chosen address is printed
    /// on standard output as `listening on http://ADDR`).
    #[arg(long, env = "DISPAR_LISTEN", default_value = "127.0.0.1:8080")]
    listen: SocketAddr,
    #[command(flatten)]
    database: DatabaseArgs,
    /// Log format on standard error.
    #[arg(long, env = "DISPAR_LOG_FORMAT", value_enum, default_value_t = LogFormat::Text)]
    log_format: LogFormat,
    /// Largest accepted request body in bytes (413 above it).
    #[arg(long, env = "DISPAR_MAX_BODY_BYTES", default_value_t = Limits::default().max_body_bytes)]
    max_body_bytes: usize,
    /// Longest a request may take, e.g. `30s`, `500ms` (503 after it).
    #[arg(long, env = "DISPAR_REQUEST_TIMEOUT", default_value = "30s", value_parser = parse_duration)]
    request_timeout: Duration,
    /// Most API requests handled at once; more wait for a slot.
    #[arg(long, env = "DISPAR_MAX_CONCURRENCY", default_value_t = Limits::default().max_concurrency,
          value_parser = parse_positive)]
    max_concurrency: usize,
    /// Most records in one batch (1 to 100,000).
    #[arg(long, env = "DISPAR_MAX_BATCH_RECORDS", default_value_t = Limits::default().max_batch_records,
          value_parser = parse_batch_limit)]
    max_batch_records: usize,
    /// How long a batch answer can be replayed with its `Idempotency-Key`, e.g. `7d`,
    /// `24h`; older answers are purged hourly.
    #[arg(long, env = "DISPAR_IDEMPOTENCY_RETENTION", default_value = "7d", value_parser = parse_duration)]
    idempotency_retention: Duration,
    /// How long a client may take to send a request's headers, and an idle connection
    /// may wait for its next request, e.g. `10s`; the connection is closed after it.
    #[arg(long, env = "DISPAR_HEADER_TIMEOUT", default_value = "10s", value_parser = parse_duration)]
    header_timeout: Duration,
    /// Most open client connections; more wait to be accepted until one closes.
    #[arg(long, env = "DISPAR_MAX_CONNECTIONS", default_value_t = Limits::default().max_connections,
          value_parser = parse_positive)]
    max_connections: usize,
    /// Requests a second per API key, with a burst of twice that; more get 429 with
    /// `Retry-After`. 0 turns the limit off.
    #[arg(long, env = "DISPAR_RATE_LIMIT", default_value_t = Limits::default().rate_limit)]
    rate_limit: u32,
}

/// A batch limit: 1 to [`dispar::counts::MAX_BATCH_RECORDS`].
fn parse_batch_limit(s: &str) -> Result<usize, String> {
    match parse_positive(s)? {
        n if n <= dispar::counts::MAX_BATCH_RECORDS => Ok(n),
        _ => Err(format!(
            "{s:?} is above the most a batch may hold ({})",
            dispar::counts::MAX_BATCH_RECORDS
        )),
    }
}

/// A whole number of at least 1.
fn parse_positive(s: &str) -> Result<usize, String> {
    match s.trim().parse::<usize>() {
        Ok(n) if n >= 1 => Ok(n),
        _ => Err(format!("{s:?} is not a whole number of at least 1")),
    }
}

/// `250ms`, `30s`, `2m`, or a bare number of seconds.
fn parse_duration(s: &str) -> Result<Duration, String> {
    let s = s.trim();
    let (number, unit) = match s.find(|c: char| !c.is_ascii_digit()) {
        Some(i) => (&s[..i], &s[i..]),
        None => (s, "s"),
    };
    let n: u64 = number
        .parse()
        .map_err(|_| format!("{s:?} is not a duration like 500ms, 30s, 2m, 24h or 7d"))?;
    let d = match unit {
        "ms" => Duration::from_millis(n),
        "s" => Duration::from_secs(n),
        "m" => Duration::from_secs(n.saturating_mul(60)),
        "h" => Duration::from_secs(n.saturating_mul(3600)),
        "d" => Duration::from_secs(n.saturating_mul(86_400)),
        _ => {
            return Err(format!(
                "{s:?} is not a duration like 500ms, 30s, 2m, 24h or 7d"
            ));
        }
    };
    if d.is_zero() {
        return Err("the duration must be above zero".to_owned());
    }
    Ok(d)
}

#[tokio::main]
async fn main() -> ExitCode {
    let cli = Cli::parse();
    let result = match cli.command {
        Command::Serve(args) => serve(args).await,
        Command::Migrate(db) => migrate(&db).await,
        Command::Keys(cmd) => keys::run(cmd).await,
        Command::Analyze(args) => return analyze::run(&args),
        Command::Report(args) => return report::run(&args).await,
        Command::Demo(args) => demo::run(args).await,
    };
    match result {
        Ok(()) => ExitCode::SUCCESS,
        Err(message) => {
            eprintln!("error: {message}");
            ExitCode::FAILURE
        }
    }
}

async fn serve(args: ServeArgs) -> CliResult {
    telemetry::init(args.log_format);
    let limits = Limits {
        max_body_bytes: args.max_body_bytes,
        request_timeout: args.request_timeout,
        max_concurrency: args.max_concurrency,
        max_batch_records: args.max_batch_records,
        idempotency_retention: args.idempotency_retention,
        header_timeout: args.header_timeout,
        max_connections: args.max_connections,
        rate_limit: args.rate_limit,
    };
    tracing::info!(database = %redact_url(&args.database.url), ?limits, "starting");
    let store = open(&args.database).await?;
    let listener = tokio::net::TcpListener::bind(args.listen)
        .await
        .map_err(|e| format!("cannot listen on {}: {e}", args.listen))?;
    let addr = listener
        .local_addr()
        .map_err(|e| format!("cannot read the bound address: {e}"))?;
    // The one line on standard output: scripts and tests read the address from it.
    println!("listening on http://{addr}");
    let _ = std::io::stdout().flush();
    tracing::info!(%addr, "listening");
    let state = AppState::new(store, limits);
    dispar::serve(listener, state, dispar::shutdown_signal())
        .await
        .map_err(|e| format!("server error: {e}"))
}

async fn migrate(db: &DatabaseArgs) -> CliResult {
    let store = open(db).await?;
    store.close().await;
    eprintln!("database {} is migrated", redact_url(&db.url));
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn durations_read_with_units() {
        assert_eq!(parse_duration("250ms"), Ok(Duration::from_millis(250)));
        assert_eq!(parse_duration("30s"), Ok(Duration::from_secs(30)));
        assert_eq!(parse_duration("2m"), Ok(Duration::from_secs(120)));
        assert_eq!(parse_duration("7"), Ok(Duration::from_secs(7)));
        assert!(parse_duration("0s").is_err());
        assert_eq!(parse_duration("24h"), Ok(Duration::from_secs(86_400)));
        assert_eq!(parse_duration("7d"), Ok(Duration::from_secs(604_800)));
        assert!(parse_duration("1w").is_err());
        assert!(parse_duration("").is_err());
    }

    #[test]
    fn the_command_line_is_well_formed() {
        use clap::CommandFactory as _;
        Cli::command().debug_assert();
    }
}
