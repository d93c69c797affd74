//! Text forms of dates and instants as stored.
//!
//! Instants are RFC 3339 UTC with exactly six fractional digits
//! (`2026-03-14T08:15:00.123456Z`): fixed width, so text order is time order and
//! `recorded_at <= ?` can compare text.

use time::format_description::FormatItem;
use time::macros::format_description;
use time::{Date, Duration, OffsetDateTime, PrimitiveDateTime, UtcOffset};

use crate::error::StoreError;

const INSTANT: &[FormatItem<'static>] =
    format_description!("[year]-[month]-[day]T[hour]:[minute]:[second].[subsecond digits:6]Z");

/// Truncates to whole microseconds, in UTC.
pub(crate) fn to_micros(t: OffsetDateTime) -> OffsetDateTime {
    let t = t.to_offset(UtcOffset::UTC);
    let nanos = t.nanosecond();
    t.replace_nanosecond(nanos - nanos % 1000).unwrap_or(t)
}

/// Formats an instant (truncated to microseconds, converted to UTC).
pub(crate) fn format_instant(t: OffsetDateTime) -> Result<String, StoreError> {
    to_micros(t)
        .format(INSTANT)
        .map_err(|e| StoreError::Internal(Box::new(e)))
}

/// Parses an instant written by [`format_instant`].
pub(crate) fn parse_instant(s: &str) -> Result<OffsetDateTime, StoreError> {
    PrimitiveDateTime::parse(s, INSTANT)
        .map(PrimitiveDateTime::assume_utc)
        .map_err(|e| StoreError::internal(format!("stored instant {s:?} is unreadable: {e}")))
}

/// The next commit time: now, but strictly after `last` so that `recorded_at` grows
/// with the revision id even if the clock steps back.
pub(crate) fn next_instant(last: Option<OffsetDateTime>) -> OffsetDateTime {
    let now = to_micros(OffsetDateTime::now_utc());
    match last {
        Some(last) if now <= last => last + Duration::microseconds(1),
        _ => now,
    }
}

/// Formats a production date as `YYYY-MM-DD`.
pub(crate) fn format_date(d: Date) -> String {
    dispar_core::date::format_date(d)
}

/// Formats the month of a date as `YYYY-MM` (the key of the monthly sums).
pub(crate) fn format_month(d: Date) -> String {
    format!("{:04}-{:02}", d.year(), u8::from(d.month()))
}

/// Parses a stored production date.
pub(crate) fn parse_date(s: &str) -> Result<Date, StoreError> {
    dispar_core::date::parse_iso_date(s)
        .ok_or_else(|| StoreError::internal(format!("stored date {s:?} is unreadable")))
}

#[cfg(test)]
mod tests {
    use super::*;
    use time::macros::datetime;

    #[test]
    fn instants_are_fixed_width_utc_microseconds_and_round_trip() {
        let t = datetime!(2026-03-14 09:15:00.123456789 +01:00);
        let s = format_instant(t).expect("format");
        assert_eq!(s, "2026-03-14T08:15:00.123456Z");
        assert_eq!(
            parse_instant(&s).expect("parse"),
            datetime!(2026-03-14 08:15:00.123456 UTC)
        );
        assert_eq!(
            format_instant(datetime!(2026-03-14 08:15:00 UTC)).expect("format"),
            "2026-03-14T08:15:00.000000Z"
        );
    }

    #[test]
    fn the_next_instant_is_strictly_after_the_last_one() {
        let future = OffsetDateTime::now_utc() + Duration::hours(1);
        let last = to_micros(future);
        assert_eq!(next_instant(Some(last)), last + Duration::microseconds(1));
        assert!(next_instant(None) <= to_micros(OffsetDateTime::now_utc()));
    }
}
