//! Short identifiers chosen by the plants: site, line, product and defect-category codes.
//!
//! # The code rule
//!
//! A code is 1 to [`MAX_CODE_LEN`] (32) ASCII characters from `A-Z a-z 0-9 _ . -`, and
//! its first character is a letter or digit. Codes are case-sensitive (`S1` and `s1`
//! are different sites) and are kept exactly as given. The first-character rule keeps
//! codes safe as URL path segments (no `.` or `..`) and as command-line arguments (no
//! leading `-`); the character set keeps them safe in CSV headers, file names and
//! JSON pointers without escaping.

use std::fmt;
use std::str::FromStr;

use serde::{Deserialize, Serialize};

use crate::error::{FieldError, reason};

/// Longest accepted code, in characters.
pub const MAX_CODE_LEN: usize = 32;

/// Why a string is not a valid code.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum CodeError {
    /// The string is empty.
    #[error("must not be empty")]
    Empty,
    /// The string is longer than [`MAX_CODE_LEN`].
    #[error("is {len} characters long; at most {MAX_CODE_LEN} are allowed")]
    TooLong {
        /// Length of the given string, in characters.
        len: usize,
    },
    /// A character outside `A-Z a-z 0-9 _ . -`, or a first character that is not a
    /// letter or digit.
    #[error(
        "has {found:?} at position {position}; use letters, digits, '_', '.' or '-', starting with a letter or digit"
    )]
    InvalidCharacter {
        /// The offending character.
        found: char,
        /// Its 1-based position.
        position: usize,
    },
}

impl CodeError {
    /// The machine-readable reason code (see [`crate::error::reason`]).
    pub fn reason(&self) -> &'static str {
        match self {
            CodeError::Empty => reason::EMPTY,
            CodeError::TooLong { .. } => reason::TOO_LONG,
            CodeError::InvalidCharacter { .. } => reason::INVALID_CHARACTER,
        }
    }

    /// This error as a [`FieldError`] on `field`, the message naming what kind of
    /// code it is.
    pub fn at(&self, field: impl Into<String>, what: &str) -> FieldError {
        FieldError::new(field, self.reason(), format!("{what} code {self}"))
    }
}

/// Checks the code rule (see the module docs).
pub fn check_code(s: &str) -> Result<(), CodeError> {
    if s.is_empty() {
        return Err(CodeError::Empty);
    }
    let len = s.chars().count();
    if len > MAX_CODE_LEN {
        return Err(CodeError::TooLong { len });
    }
    for (i, ch) in s.chars().enumerate() {
        let ok = if i == 0 {
            ch.is_ascii_alphanumeric()
        } else {
            ch.is_ascii_alphanumeric() || matches!(ch, '_' | '.' | '-')
        };
        if !ok {
            return Err(CodeError::InvalidCharacter {
                found: ch,
                position: i + 1,
            });
        }
    }
    Ok(())
}

macro_rules! code_type {
    ($(#[$doc:meta])* $name:ident, $what:literal) => {
        $(#[$doc])*
        ///
        /// Follows the code rule of [the module](crate::code). Serializes as a plain
        /// string; deserializing checks the rule.
        #[derive(Debug, Clone, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
        #[serde(try_from = "String", into = "String")]
        pub struct $name(String);

        impl $name {
            /// What this kind of code is called in messages.
            pub const WHAT: &'static str = $what;

            /// Checks `s` against the code rule.
            pub fn parse(s: &str) -> Result<Self, CodeError> {
                check_code(s)?;
                Ok(Self(s.to_owned()))
            }

            /// Checks `s`, reporting a problem as a [`FieldError`] on `field`.
            pub fn parse_field(s: &str, field: impl Into<String>) -> Result<Self, FieldError> {
                Self::parse(s).map_err(|e| e.at(field, Self::WHAT))
            }

            /// The code as text.
            pub fn as_str(&self) -> &str {
                &self.0
            }
        }

        impl TryFrom<String> for $name {
            type Error = CodeError;
            fn try_from(s: String) -> Result<Self, CodeError> {
                check_code(&s)?;
                Ok(Self(s))
            }
        }

        impl TryFrom<&str> for $name {
            type Error = CodeError;
            fn try_from(s: &str) -> Result<Self, CodeError> {
                Self::parse(s)
            }
        }

        impl FromStr for $name {
            type Err = CodeError;
            fn from_str(s: &str) -> Result<Self, CodeError> {
                Self::parse(s)
            }
        }

        impl From<$name> for String {
            fn from(c: $name) -> String {
                c.0
            }
        }

        impl AsRef<str> for $name {
            fn as_ref(&self) -> &str {
                &self.0
            }
        }

        impl std::borrow::Borrow<str> for $name {
            fn borrow(&self) -> &str {
                &self.0
            }
        }

        impl fmt::Display for $name {
            fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
                f.write_str(&self.0)
            }
        }
    };
}

code_type!(
    /// A site's code, the plant's own short identifier (for example `BRNO-2`).
    SiteCode,
    "site"
);
code_type!(
    /// A production line's code, unique within its site.
    LineCode,
    "line"
);
code_type!(
    /// A product code (optional part of a count record's key).
    ProductCode,
    "product"
);
code_type!(
    /// A defect category code (for example `scratch`).
    CategoryCode,
    "category"
);

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn codes_follow_the_documented_rule() {
        let good = ["S1", "a", "BRNO-2", "line_3.b", "0", &"x".repeat(32)];
        for s in good {
            assert!(SiteCode::parse(s).is_ok(), "{s:?} should be a valid code");
        }
        let cases: [(&str, CodeError); 6] = [
            ("", CodeError::Empty),
            (&"x".repeat(33), CodeError::TooLong { len: 33 }),
            (
                "-x",
                CodeError::InvalidCharacter {
                    found: '-',
                    position: 1,
                },
            ),
            (
                "..",
                CodeError::InvalidCharacter {
                    found: '.',
                    position: 1,
                },
            ),
            (
                "a b",
                CodeError::InvalidCharacter {
                    found: ' ',
                    position: 2,
                },
            ),
            (
                "café",
                CodeError::InvalidCharacter {
                    found: 'é',
                    position: 4,
                },
            ),
        ];
        for (s, want) in cases {
            assert_eq!(LineCode::parse(s), Err(want), "{s:?}");
        }
    }

    #[test]
    fn a_bad_code_becomes_a_field_error_naming_the_kind() {
        let e = SiteCode::parse_field("a/b", "site").unwrap_err();
        assert_eq!(e.field, "site");
        assert_eq!(e.reason, "invalid-character");
        assert!(e.message.starts_with("site code has '/'"), "{}", e.message);
    }

    #[test]
    fn codes_serialize_as_strings_and_deserialize_with_the_rule() {
        let c = CategoryCode::parse("scratch").unwrap();
        assert_eq!(serde_json::to_string(&c).unwrap(), "\"scratch\"");
        let back: CategoryCode = serde_json::from_str("\"scratch\"").unwrap();
        assert_eq!(back, c);
        assert!(serde_json::from_str::<CategoryCode>("\"no way\"").is_err());
    }
}
