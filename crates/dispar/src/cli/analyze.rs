//! `dispar analyze`: compare defect rates (or a table of counts) from a CSV file,
//! offline, and print the verdict as text or JSON.
//!
//! Input (RFC 4180 CSV, UTF-8, optional BOM, cells trimmed):
//! - default: header `group,inspected,defective` (any column order), one row per group;
//!   compares the groups' defect rates (a k x 2 table);
//! - `--table`: header `group,<outcome>,...`, rows of raw counts (an r x c table);
//!   tests whether the outcome mix differs between groups.
//!
//! Exit codes: 0 the analysis was printed (whatever its verdict, including "not
//! testable"); 2 the input or an option is unusable (unreadable file, bad CSV, negative
//! numbers, defective > inspected, ragged rows, non-numbers, duplicate group names,
//! empty file, missing header columns, alpha out of range; clap's own usage errors are
//! also 2), with one line per problem on stderr naming the line and field; 1 the output
//! could not be written.

use std::io::{Read, Write};
use std::path::{Path, PathBuf};
use std::process::ExitCode;

use dispar_core::report::{
    AdjustChoice, DispersionChoice, MethodChoice, PairwiseChoice, Parameters, analyze_rates,
    analyze_table, params::DEFAULT_RESAMPLES,
};
use dispar_core::tabular::{self, InputError, InputErrors, Row};

/// Output format of `dispar analyze`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum Format {
    /// A readable table for a terminal.
    Text,
    /// JSON for programs.
    Json,
}

/// Arguments of `dispar analyze`.
#[derive(Debug, Clone, clap::Args)]
pub struct AnalyzeArgs {
    /// CSV file to read; `-` reads standard input.
    #[arg(value_name = "FILE", default_value = "-")]
    pub file: PathBuf,
    /// Significance level, from 1e-12 up to (not including) 1.
    #[arg(long, default_value_t = 0.05)]
    pub alpha: f64,
    /// Omnibus test: auto (Pearson when Cochran's rule holds, else exact), pearson, g, exact.
    #[arg(long, default_value = "auto", value_name = "auto|pearson|g|exact")]
    pub method: MethodChoice,
    /// Pairwise test: auto (Pearson when valid for the pair, else Fisher), pearson,
    /// pearson-yates, fisher.
    #[arg(
        long,
        default_value = "auto",
        value_name = "auto|pearson|pearson-yates|fisher"
    )]
    pub pairwise: PairwiseChoice,
    /// Adjustment of pairwise p-values: holm, bonferroni, hochberg, bh (Benjamini-Hochberg).
    #[arg(
        long,
        default_value = "holm",
        value_name = "holm|bonferroni|hochberg|bh"
    )]
    pub adjust: AdjustChoice,
    /// Monte Carlo resamples for exact conditional p-values (100 to 1000000).
    #[arg(long, value_name = "N", default_value_t = DEFAULT_RESAMPLES)]
    pub resamples: u64,
    /// Output format.
    #[arg(long, value_enum, default_value_t = Format::Text)]
    pub format: Format,
    /// Read a table of raw counts (`group,<outcome>,...`) instead of rates.
    #[arg(long)]
    pub table: bool,
    /// Overdispersion: estimate (estimate phi, flag with the plain ANOM limit) or widen
    /// (also widen the flag rule's limit by sqrt(phi) when phi > 1).
    #[arg(long, default_value = "estimate", value_name = "estimate|widen")]
    pub overdispersion: DispersionChoice,
    /// Smallest difference in rates that matters, in rate units (0.005 = half a
    /// percentage point); a pair is beyond the minimum difference only when its whole
    /// interval lies beyond it.
    #[arg(long, value_name = "RATE")]
    pub min_difference: Option<f64>,
}

/// Exit code for unusable input or options.
pub const EXIT_BAD_INPUT: u8 = 2;
/// Exit code when the output cannot be written.
pub const EXIT_OUTPUT: u8 = 1;

/// Runs `dispar analyze` and returns the process exit code.
pub fn run(args: &AnalyzeArgs) -> ExitCode {
    match analyze(args) {
        Ok(out) => {
            let mut stdout = std::io::stdout().lock();
            match stdout
                .write_all(out.as_bytes())
                .and_then(|()| stdout.flush())
            {
                Ok(()) => ExitCode::SUCCESS,
                Err(e) => {
                    eprintln!("dispar analyze: cannot write the output: {e}");
                    ExitCode::from(EXIT_OUTPUT)
                }
            }
        }
        Err(message) => {
            eprintln!("{message}");
            ExitCode::from(EXIT_BAD_INPUT)
        }
    }
}

/// Does the work of [`run`]: the text to print, or the message for stderr.
pub fn analyze(args: &AnalyzeArgs) -> Result<String, String> {
    let mut params = Parameters::new(
        args.alpha,
        args.method,
        args.pairwise,
        args.adjust,
        args.resamples,
        args.min_difference,
    )
    .map_err(|e| {
        e.errors()
            .iter()
            .map(|f| {
                format!(
                    "dispar analyze: --{}: {}",
                    f.field.replace('_', "-"),
                    f.message
                )
            })
            .collect::<Vec<_>>()
            .join("\n")
    })?;
    params.overdispersion = args.overdispersion;
    let stdin = args.file.as_os_str() == "-";
    let shown = args.file.display().to_string();
    let name = if stdin { "<stdin>" } else { shown.as_str() };
    let bytes = read_input(&args.file, stdin)
        .map_err(|e| format!("dispar analyze: cannot read {name}: {e}"))?;
    let rows = read_rows(&bytes).map_err(|e| prefix_errors(name, &e))?;
    let json = args.format == Format::Json;
    if args.table {
        let table = tabular::parse_table(&rows).map_err(|e| prefix_errors(name, &e))?;
        let report = analyze_table(&params, &table);
        Ok(if json {
            to_json(&report)?
        } else {
            report.to_text()
        })
    } else {
        let groups = tabular::parse_rates(&rows).map_err(|e| prefix_errors(name, &e))?;
        let report = analyze_rates(&params, &groups);
        Ok(if json {
            to_json(&report)?
        } else {
            report.to_text()
        })
    }
}

fn to_json<T: serde::Serialize>(v: &T) -> Result<String, String> {
    serde_json::to_string_pretty(v)
        .map(|mut s| {
            s.push('\n');
            s
        })
        .map_err(|e| format!("dispar analyze: cannot format the result as JSON: {e}"))
}

fn prefix_errors(name: &str, e: &InputErrors) -> String {
    e.to_string()
        .lines()
        .map(|l| format!("{name}: {l}"))
        .collect::<Vec<_>>()
        .join("\n")
}

fn read_input(file: &Path, stdin: bool) -> std::io::Result<Vec<u8>> {
    let mut buf = Vec::new();
    if stdin {
        std::io::stdin().lock().read_to_end(&mut buf)?;
    } else {
        std::fs::File::open(file)?.read_to_end(&mut buf)?;
    }
    Ok(buf)
}

/// Splits CSV bytes into rows of trimmed cells with their 1-based line numbers.
/// Blank lines are skipped; rows may have any number of cells (the checks that
/// follow name ragged rows).
fn read_rows(bytes: &[u8]) -> Result<Vec<Row>, InputErrors> {
    let bytes = bytes.strip_prefix(b"\xEF\xBB\xBF").unwrap_or(bytes);
    let mut reader = csv::ReaderBuilder::new()
        .has_headers(false)
        .flexible(true)
        .trim(csv::Trim::All)
        .from_reader(bytes);
    let mut rows = Vec::new();
    let mut record = csv::StringRecord::new();
    loop {
        match reader.read_record(&mut record) {
            Ok(false) => break,
            Ok(true) => {
                let line = record.position().map_or(0, csv::Position::line);
                if record.len() == 1 && record.get(0).is_some_and(str::is_empty) {
                    continue;
                }
                rows.push((line, record.iter().map(str::to_owned).collect()));
            }
            Err(e) => {
                let line = e.position().map_or(0, csv::Position::line);
                let message = match e.kind() {
                    csv::ErrorKind::Utf8 { .. } => "the line is not valid UTF-8 text".to_owned(),
                    _ => format!("cannot read the CSV: {e}"),
                };
                return Err(InputError {
                    line,
                    field: None,
                    reason: "invalid-csv",
                    message,
                }
                .into());
            }
        }
    }
    Ok(rows)
}
