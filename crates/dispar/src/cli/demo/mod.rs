//! The demo scenario behind `dispar demo`: an invented manufacturer's six months
//! of daily inspection counts, generated deterministically from a seed.
//!
//! `dispar demo generate --seed N --out DIR` calls [`generate()`] and
//! [`generate::DemoData::write_to`]; `dispar demo` loads the data of
//! [`DEFAULT_SEED`], which is byte-for-byte what is committed under `demo-data/`
//! (a test checks it).

pub mod generate;
pub mod run;

#[cfg(test)]
mod tests;

pub use generate::{DEFAULT_SEED, generate};

use clap::{Args, Subcommand};

use super::CliResult;

/// `dispar demo [--listen ADDR] [--database PATH]`, or `dispar demo generate ...`
/// (see `run.rs`).
#[derive(Debug, Args)]
#[command(args_conflicts_with_subcommands = true)]
pub struct DemoArgs {
    #[command(subcommand)]
    command: Option<DemoCommand>,
    #[command(flatten)]
    run: run::RunArgs,
}

#[derive(Debug, Subcommand)]
enum DemoCommand {
    /// Write the demo scenario's sites.csv, lines.csv and counts.csv (deterministic).
    Generate {
        /// Seed of the generator (the committed demo-data/ uses the default).
        #[arg(long, default_value_t = DEFAULT_SEED)]
        seed: u64,
        /// Directory to write to (created if missing; README.md is left alone).
        #[arg(long, default_value = "demo-data")]
        out: std::path::PathBuf,
    },
}

/// Runs `dispar demo` or `dispar demo generate`.
pub async fn run(args: DemoArgs) -> CliResult {
    match args {
        DemoArgs {
            command: Some(DemoCommand::Generate { seed, out }),
            ..
        } => write_csv(seed, &out),
        DemoArgs { command: None, run } => run::run(run).await,
    }
}

fn write_csv(seed: u64, out: &std::path::Path) -> CliResult {
    let data = generate(seed);
    data.write_to(out)
        .map_err(|e| format!("cannot write the demo data to {}: {e}", out.display()))?;
    eprintln!(
        "wrote {} records for {} sites to {}",
        data.records.len(),
        data.sites.len(),
        out.display()
    );
    Ok(())
}
