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
