//! Sites and production lines.

use std::fmt;

use serde::{Deserialize, Serialize};

use crate::code::{LineCode, SiteCode};
use crate::error::{Collector, FieldError, ValidationError, reason};

/// Longest accepted display name, in characters.
pub const MAX_NAME_LEN: usize = 200;

/// Longest accepted time zone name, in characters.
pub const MAX_TIME_ZONE_LEN: usize = 64;

/// Checks a display name: surrounding white space is removed, then it must be 1 to
/// [`MAX_NAME_LEN`] characters with no control characters.
fn check_name(raw: &str, field: &str, what: &str) -> Result<String, FieldError> {
    let s = raw.trim();
    if s.is_empty() {
        return Err(FieldError::new(
            field,
            reason::EMPTY,
            format!("{what} name must not be empty"),
        ));
    }
    let len = s.chars().count();
    if len > MAX_NAME_LEN {
        return Err(FieldError::new(
            field,
            reason::TOO_LONG,
            format!("{what} name is {len} characters long; at most {MAX_NAME_LEN} are allowed"),
        ));
    }
    if let Some(ch) = s.chars().find(|c| c.is_control()) {
        return Err(FieldError::new(
            field,
            reason::INVALID_CHARACTER,
            format!("{what} name contains the control character {ch:?}"),
        ));
    }
    Ok(s.to_owned())
}

macro_rules! name_type {
    ($(#[$doc:meta])* $name:ident, $what:literal) => {
        $(#[$doc])*
        ///
        /// Surrounding white space is removed; then 1 to 200 characters (any script), no
        /// control characters.
        #[derive(Debug, Clone, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
        #[serde(try_from = "String", into = "String")]
        pub struct $name(String);

        impl $name {
            /// Checks `raw`, reporting a problem as a [`FieldError`] on `field`.
            pub fn parse_field(raw: &str, field: impl AsRef<str>) -> Result<Self, FieldError> {
                check_name(raw, field.as_ref(), $what).map(Self)
            }

            /// The name as text.
            pub fn as_str(&self) -> &str {
                &self.0
            }
        }

        impl TryFrom<String> for $name {
            type Error = FieldError;
            fn try_from(s: String) -> Result<Self, FieldError> {
                Self::parse_field(&s, "name")
            }
        }

        impl From<$name> for String {
            fn from(n: $name) -> String {
                n.0
            }
        }

        impl fmt::Display for $name {
            fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
                f.write_str(&self.0)
            }
        }
    };
}

name_type!(
    /// A site's display name (for example `Brno plant 2`).
    SiteName,
    "site"
);
name_type!(
    /// A line's display name.
    LineName,
    "line"
);

/// The IANA time-zone areas accepted as the first part of a [`TimeZoneName`].
pub const TIME_ZONE_AREAS: [&str; 11] = [
    "Africa",
    "America",
    "Antarctica",
    "Arctic",
    "Asia",
    "Atlantic",
    "Australia",
    "Europe",
    "Indian",
    "Pacific",
    "Etc",
];

/// An IANA time-zone name such as `Europe/Prague`, checked for shape only.
///
/// dispar keeps no time-zone database: production dates are the plant's local calendar
/// dates, so the zone is descriptive. The accepted shape is `UTC`, or `Area/Location`
/// with optional further `/Part`s, where `Area` is one of [`TIME_ZONE_AREAS`] and every
/// part is 1 to 30 characters from `A-Z a-z 0-9 _ - +` beginning with a letter; at
/// most 64 characters in all. So `America/Argentina/Buenos_Aires` and `Etc/GMT+5`
/// pass, while `Europe`, `Mars/Olympus`, `europe/prague` and `CET` are refused.
/// A well-shaped name that is not in the database (`Europe/Atlantis`) is accepted.
#[derive(Debug, Clone, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
#[serde(try_from = "String", into = "String")]
pub struct TimeZoneName(String);

impl TimeZoneName {
    /// Checks `s`, reporting a problem as a [`FieldError`] on `field`.
    pub fn parse_field(s: &str, field: impl Into<String>) -> Result<Self, FieldError> {
        let field = field.into();
        let bad = |message: String| FieldError::new(field.clone(), reason::INVALID_FORMAT, message);
        if s == "UTC" {
            return Ok(Self(s.to_owned()));
        }
        if s.chars().count() > MAX_TIME_ZONE_LEN {
            return Err(FieldError::new(
                field.clone(),
                reason::TOO_LONG,
                format!("time zone name is longer than {MAX_TIME_ZONE_LEN} characters"),
            ));
        }
        let parts: Vec<&str> = s.split('/').collect();
        if parts.len() < 2 {
            return Err(bad(format!(
                "time zone {s:?} is not an IANA name like \"Europe/Prague\" or \"UTC\""
            )));
        }
        if !TIME_ZONE_AREAS.contains(&parts[0]) {
            return Err(bad(format!(
                "time zone {s:?} does not start with an IANA area ({})",
                TIME_ZONE_AREAS.join(", ")
            )));
        }
        for part in &parts[1..] {
            let ok_len = (1..=30).contains(&part.len());
            let ok_start = part.chars().next().is_some_and(|c| c.is_ascii_alphabetic());
            let ok_chars = part
                .chars()
                .all(|c| c.is_ascii_alphanumeric() || matches!(c, '_' | '-' | '+'));
            if !(ok_len && ok_start && ok_chars) {
                return Err(bad(format!(
                    "time zone {s:?} has a malformed part {part:?}; parts use letters, digits, '_', '-', '+' and start with a letter"
                )));
            }
        }
        Ok(Self(s.to_owned()))
    }

    /// The name as text.
    pub fn as_str(&self) -> &str {
        &self.0
    }
}

impl TryFrom<String> for TimeZoneName {
    type Error = FieldError;
    fn try_from(s: String) -> Result<Self, FieldError> {
        Self::parse_field(&s, "time_zone")
    }
}

impl From<TimeZoneName> for String {
    fn from(t: TimeZoneName) -> String {
        t.0
    }
}

impl fmt::Display for TimeZoneName {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&self.0)
    }
}

/// A site: a plant with its own code, a display name and an optional time zone.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct Site {
    /// The plant's code.
    pub code: SiteCode,
    /// Display name.
    pub name: SiteName,
    /// IANA time zone of the plant, if given.
    pub time_zone: Option<TimeZoneName>,
}

/// The body of `PUT /v1/sites/{site}` as received: unchecked strings.
#[derive(Debug, Clone, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SiteInput {
    /// Display name (required).
    #[serde(default)]
    pub name: Option<String>,
    /// IANA time zone (optional).
    #[serde(default)]
    pub time_zone: Option<String>,
}

impl Site {
    /// Checks a site from its code (for example a URL path segment) and body, collecting
    /// every problem. Field paths: `site` (the code), `name`, `time_zone`.
    pub fn from_input(code: &str, input: SiteInput) -> Result<Site, ValidationError> {
        let mut c = Collector::new();
        let code = c.take(SiteCode::parse_field(code, "site"));
        let name = match input.name.as_deref() {
            Some(n) => c.take(SiteName::parse_field(n, "name")),
            None => {
                c.push(FieldError::new(
                    "name",
                    reason::REQUIRED,
                    "site name is required",
                ));
                None
            }
        };
        let time_zone = match input.time_zone.as_deref() {
            Some(tz) => c.take(TimeZoneName::parse_field(tz, "time_zone")).map(Some),
            None => Some(None),
        };
        match (code, name, time_zone) {
            (Some(code), Some(name), Some(time_zone)) if c.is_empty() => Ok(Site {
                code,
                name,
                time_zone,
            }),
            _ => Err(c.fail()),
        }
    }
}

/// A production line within a site.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct Line {
    /// The site the line belongs to.
    pub site: SiteCode,
    /// The line's code, unique within the site.
    pub code: LineCode,
    /// Display name, if given.
    pub name: Option<LineName>,
}

/// The body of `PUT /v1/sites/{site}/lines/{line}` as received.
#[derive(Debug, Clone, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct LineInput {
    /// Display name (optional).
    #[serde(default)]
    pub name: Option<String>,
}

impl Line {
    /// Checks a line from its site and line codes and body, collecting every problem.
    /// Field paths: `site`, `line`, `name`.
    pub fn from_input(site: &str, line: &str, input: LineInput) -> Result<Line, ValidationError> {
        let mut c = Collector::new();
        let site = c.take(SiteCode::parse_field(site, "site"));
        let code = c.take(LineCode::parse_field(line, "line"));
        let name = match input.name.as_deref() {
            Some(n) => c.take(LineName::parse_field(n, "name")).map(Some),
            None => Some(None),
        };
        match (site, code, name) {
            (Some(site), Some(code), Some(name)) if c.is_empty() => Ok(Line { site, code, name }),
            _ => Err(c.fail()),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn time_zone_names_are_checked_for_iana_shape() {
        for ok in [
            "UTC",
            "Europe/Prague",
            "America/Argentina/Buenos_Aires",
            "America/Port-au-Prince",
            "Etc/GMT+5",
            "Etc/UTC",
        ] {
            assert!(
                TimeZoneName::parse_field(ok, "tz").is_ok(),
                "{ok} should pass"
            );
        }
        for bad in [
            "",
            "CET",
            "Europe",
            "europe/prague",
            "Mars/Olympus",
            "Europe/",
            "Europe/Pra gue",
            "Europe//X",
            "Asia/1abc",
        ] {
            let e = TimeZoneName::parse_field(bad, "tz").unwrap_err();
            assert_eq!(e.reason, "invalid-format", "{bad:?}");
        }
    }

    #[test]
    fn a_site_input_reports_every_bad_field_at_once() {
        let input = SiteInput {
            name: Some("   ".into()),
            time_zone: Some("Nowhere".into()),
        };
        let e = Site::from_input("-S1", input).unwrap_err();
        let fields: Vec<_> = e
            .errors()
            .iter()
            .map(|f| (f.field.as_str(), f.reason))
            .collect();
        assert_eq!(
            fields,
            [
                ("site", "invalid-character"),
                ("name", "empty"),
                ("time_zone", "invalid-format")
            ]
        );
    }

    #[test]
    fn a_good_site_input_gives_a_site_with_a_trimmed_name() {
        let s = Site::from_input(
            "BRNO-2",
            SiteInput {
                name: Some(" Brno plant 2 ".into()),
                time_zone: Some("Europe/Prague".into()),
            },
        )
        .unwrap();
        assert_eq!(s.name.as_str(), "Brno plant 2");
        assert_eq!(s.time_zone.unwrap().as_str(), "Europe/Prague");
    }

    #[test]
    fn site_input_refuses_unknown_fields() {
        let r: Result<SiteInput, _> = serde_json::from_str(r#"{"name":"x","tz":"UTC"}"#);
        assert!(r.is_err());
    }

    #[test]
    fn a_line_without_a_name_is_fine() {
        let l = Line::from_input("S1", "L1", LineInput::default()).unwrap();
        assert_eq!(l.name, None);
        let e = Line::from_input("S 1", "", LineInput::default()).unwrap_err();
        assert_eq!(e.errors().len(), 2);
    }
}
