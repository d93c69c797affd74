//! The dispar domain: sites, lines, count records, periods, validation and the report
//! builder.
//!
//! - [`code`]: the short codes plants choose (site, line, product, defect category);
//! - [`site`]: sites and lines with names and time zones;
//! - [`record`]: daily count records and their raw (serde) input forms;
//! - [`date`]: production dates;
//! - [`period`]: report periods (ISO 8601 day, week, month, quarter, year, range);
//! - [`report`]: the report builder, its JSON model and text layout;
//! - [`tabular`]: checking the CSV cells of `dispar analyze` input;
//! - [`error`]: field-level validation errors.
//!
//! Constructors parse raw input into typed values or return a
//! [`error::ValidationError`] listing every bad field.

#![cfg_attr(test, allow(clippy::unwrap_used))]

pub mod code;
pub mod date;
pub mod error;
pub mod period;
pub mod record;
pub mod report;
pub mod site;
pub mod tabular;
