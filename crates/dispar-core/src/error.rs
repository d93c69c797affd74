//! Field-level validation errors shared by every constructor in this crate.
//!
//! A [`ValidationError`] lists every [`FieldError`] found in one input, not only the
//! first, so an API can report all problems of a request or batch row at once.

use std::fmt;

use serde::Serialize;

/// Machine-readable reason codes used in [`FieldError::reason`].
///
/// They are stable strings (kebab-case) meant for clients; the wording for people is
/// in [`FieldError::message`].
pub mod reason {
    /// A required field is missing.
    pub const REQUIRED: &str = "required";
    /// The value is empty.
    pub const EMPTY: &str = "empty";
    /// The value is longer than allowed.
    pub const TOO_LONG: &str = "too-long";
    /// The value contains a character outside the allowed set.
    pub const INVALID_CHARACTER: &str = "invalid-character";
    /// The value does not have the required shape (for example a time zone name).
    pub const INVALID_FORMAT: &str = "invalid-format";
    /// A date that is not `YYYY-MM-DD` or not a real calendar day.
    pub const INVALID_DATE: &str = "invalid-date";
    /// A date outside the accepted range (2000-01-01 ..= 2100-12-31).
    pub const DATE_OUT_OF_RANGE: &str = "date-out-of-range";
    /// A count below zero.
    pub const NEGATIVE: &str = "negative";
    /// A number above the accepted maximum.
    pub const TOO_LARGE: &str = "too-large";
    /// Defective units exceed inspected units.
    pub const EXCEEDS_INSPECTED: &str = "exceeds-inspected";
    /// More defect categories than allowed in one record.
    pub const TOO_MANY_CATEGORIES: &str = "too-many-categories";
    /// The same key appears twice.
    pub const DUPLICATE: &str = "duplicate";
    /// A value that is not a number where a number is required.
    pub const NOT_A_NUMBER: &str = "not-a-number";
    /// A number with a fraction where a whole number is required.
    pub const NOT_AN_INTEGER: &str = "not-an-integer";
    /// More defects of one category than [`crate::record::MAX_DEFECTS_PER_UNIT`] per
    /// unit inspected.
    pub const TOO_MANY_DEFECTS: &str = "too-many-defects";
}

/// One problem with one field of an input.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct FieldError {
    /// Where the problem is: a `/`-separated path relative to the input, such as
    /// `defective` or `defects/scrap`; callers prefix it (see [`FieldError::prefixed`])
    /// to get a JSON-pointer such as `/records/3/defective`.
    pub field: String,
    /// Machine-readable reason, one of the constants in [`reason`] (or a caller's own).
    pub reason: &'static str,
    /// Plain words for a person.
    pub message: String,
}

impl FieldError {
    /// Builds a field error.
    pub fn new(field: impl Into<String>, reason: &'static str, message: impl Into<String>) -> Self {
        Self {
            field: field.into(),
            reason,
            message: message.into(),
        }
    }

    /// Returns the error with `prefix` put in front of its field path, joined by `/`.
    ///
    /// ```
    /// use dispar_core::error::{FieldError, reason};
    /// let e = FieldError::new("defective", reason::EXCEEDS_INSPECTED, "too many");
    /// assert_eq!(e.prefixed("/records/3").field, "/records/3/defective");
    /// ```
    #[must_use]
    pub fn prefixed(mut self, prefix: &str) -> Self {
        self.field = join_path(prefix, &self.field);
        self
    }
}

impl fmt::Display for FieldError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}: {} ({})", self.field, self.message, self.reason)
    }
}

/// Joins two path parts with exactly one `/` between them.
pub(crate) fn join_path(prefix: &str, field: &str) -> String {
    let prefix = prefix.trim_end_matches('/');
    let field = field.trim_start_matches('/');
    match (prefix.is_empty(), field.is_empty()) {
        (true, _) => field.to_owned(),
        (false, true) => prefix.to_owned(),
        (false, false) => format!("{prefix}/{field}"),
    }
}

/// Escapes one JSON-pointer path segment (RFC 6901: `~` as `~0`, `/` as `~1`).
pub fn pointer_segment(segment: &str) -> String {
    segment.replace('~', "~0").replace('/', "~1")
}

/// Every field problem found in one input. Never empty when returned as an error.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, thiserror::Error)]
#[serde(transparent)]
pub struct ValidationError {
    errors: Vec<FieldError>,
}

impl fmt::Display for ValidationError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let n = self.errors.len();
        write!(f, "{n} invalid field{}", if n == 1 { "" } else { "s" })?;
        for (i, e) in self.errors.iter().enumerate() {
            f.write_str(if i == 0 { ": " } else { "; " })?;
            write!(f, "{}: {}", e.field, e.message)?;
        }
        Ok(())
    }
}

impl ValidationError {
    /// The field errors, in the order they were found.
    pub fn errors(&self) -> &[FieldError] {
        &self.errors
    }

    /// Takes the field errors out.
    pub fn into_errors(self) -> Vec<FieldError> {
        self.errors
    }

    /// Returns the error with `prefix` put in front of every field path.
    #[must_use]
    pub fn prefixed(self, prefix: &str) -> Self {
        Self {
            errors: self
                .errors
                .into_iter()
                .map(|e| e.prefixed(prefix))
                .collect(),
        }
    }
}

impl From<FieldError> for ValidationError {
    fn from(e: FieldError) -> Self {
        Self { errors: vec![e] }
    }
}

/// Collects field errors while an input is checked field by field.
#[derive(Debug, Default)]
pub struct Collector {
    errors: Vec<FieldError>,
}

impl Collector {
    /// An empty collector.
    pub fn new() -> Self {
        Self::default()
    }

    /// Records one error.
    pub fn push(&mut self, e: FieldError) {
        self.errors.push(e);
    }

    /// Records every error of `e`.
    pub fn extend(&mut self, e: ValidationError) {
        self.errors.extend(e.errors);
    }

    /// Keeps the value of `r`, or records its error and gives `None`.
    pub fn take<T>(&mut self, r: Result<T, FieldError>) -> Option<T> {
        match r {
            Ok(v) => Some(v),
            Err(e) => {
                self.errors.push(e);
                None
            }
        }
    }

    /// True when nothing was recorded.
    pub fn is_empty(&self) -> bool {
        self.errors.is_empty()
    }

    /// The recorded errors as a [`ValidationError`].
    ///
    /// Used on the failure path of a constructor; if nothing was recorded (a bug in
    /// the caller), the error holds one generic entry rather than being empty.
    pub fn fail(self) -> ValidationError {
        if self.errors.is_empty() {
            ValidationError::from(FieldError::new("", "invalid", "the input is invalid"))
        } else {
            ValidationError {
                errors: self.errors,
            }
        }
    }
}
