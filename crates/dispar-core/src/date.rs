//! Calendar dates as dispar accepts them: `YYYY-MM-DD`, from 2000-01-01 to 2100-12-31.

use time::macros::date;
use time::{Date, Month};

use crate::error::{FieldError, reason};

/// Earliest accepted production date.
pub const MIN_DATE: Date = date!(2000 - 01 - 01);
/// Latest accepted production date.
pub const MAX_DATE: Date = date!(2100 - 12 - 31);

/// Parses exactly `YYYY-MM-DD` (ISO 8601 calendar date, extended format) into a real
/// calendar day, without the range check. `None` when the shape or the day is wrong.
pub fn parse_iso_date(s: &str) -> Option<Date> {
    let b = s.as_bytes();
    if b.len() != 10 || b[4] != b'-' || b[7] != b'-' {
        return None;
    }
    let year = digits(&b[0..4])?;
    let month = digits(&b[5..7])?;
    let day = digits(&b[8..10])?;
    let month = Month::try_from(u8::try_from(month).ok()?).ok()?;
    Date::from_calendar_date(i32::try_from(year).ok()?, month, u8::try_from(day).ok()?).ok()
}

/// Reads an unsigned decimal made only of ASCII digits.
pub(crate) fn digits(b: &[u8]) -> Option<u32> {
    if b.is_empty() || b.len() > 9 || !b.iter().all(u8::is_ascii_digit) {
        return None;
    }
    Some(b.iter().fold(0u32, |n, d| n * 10 + u32::from(d - b'0')))
}

/// Formats a date as `YYYY-MM-DD`.
pub fn format_date(d: Date) -> String {
    format!("{:04}-{:02}-{:02}", d.year(), u8::from(d.month()), d.day())
}

/// Checks that `d` lies within [`MIN_DATE`] ..= [`MAX_DATE`].
pub fn check_range(d: Date, field: &str) -> Result<Date, FieldError> {
    if d < MIN_DATE || d > MAX_DATE {
        Err(FieldError::new(
            field,
            reason::DATE_OUT_OF_RANGE,
            format!(
                "date {} is outside 2000-01-01 ..= 2100-12-31",
                format_date(d)
            ),
        ))
    } else {
        Ok(d)
    }
}

/// Parses a production date: `YYYY-MM-DD`, a real day, within the accepted range.
pub fn parse_date_field(s: &str, field: &str) -> Result<Date, FieldError> {
    let d = parse_iso_date(s).ok_or_else(|| {
        FieldError::new(
            field,
            reason::INVALID_DATE,
            format!("{s:?} is not a calendar date in the form YYYY-MM-DD"),
        )
    })?;
    check_range(d, field)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn dates_parse_only_in_the_strict_iso_form() {
        assert_eq!(parse_iso_date("2026-03-14"), Some(date!(2026 - 03 - 14)));
        assert_eq!(parse_iso_date("2024-02-29"), Some(date!(2024 - 02 - 29)));
        for bad in [
            "2026-3-14",
            "2026-03-14T00:00",
            "20260314",
            "2025-02-29",
            "2026-13-01",
            "2026-00-10",
            "+026-03-14",
            "2026-03-1a",
        ] {
            assert_eq!(parse_iso_date(bad), None, "{bad}");
        }
    }

    #[test]
    fn dates_outside_the_accepted_range_are_refused() {
        assert_eq!(
            parse_date_field("1999-12-31", "date").unwrap_err().reason,
            "date-out-of-range"
        );
        assert_eq!(
            parse_date_field("2101-01-01", "date").unwrap_err().reason,
            "date-out-of-range"
        );
        assert!(parse_date_field("2000-01-01", "date").is_ok());
        assert!(parse_date_field("2100-12-31", "date").is_ok());
        assert_eq!(format_date(date!(2026 - 03 - 04)), "2026-03-04");
    }
}
