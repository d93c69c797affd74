//! Daily count records: what a plant posts for one line, day and (optional) product.
//!
//! The raw input types ([`CountRecordInput`], [`CountsInput`]) derive
//! serde with `deny_unknown_fields` so a server can deserialize request bodies into
//! them; checking them gives a typed [`CountRecord`] or a [`ValidationError`] naming
//! every bad field. Limits: counts at most [`MAX_COUNT`] (10^12), at most
//! [`MAX_CATEGORIES`] (64) defect categories per record, production dates within
//! 2000-01-01 ..= 2100-12-31, revision at most `i64::MAX` (it must fit a SQL BIGINT).

use std::collections::{BTreeMap, HashMap};
use std::fmt;

use serde::de::{self, Visitor};
use serde::{Deserialize, Deserializer, Serialize, Serializer};
use time::Date;

use crate::code::{CategoryCode, LineCode, ProductCode, SiteCode};
use crate::date::{check_range, format_date, parse_date_field};
use crate::error::{Collector, FieldError, ValidationError, pointer_segment, reason};

/// Largest accepted count of units or defects in one record (10^12).
pub const MAX_COUNT: u64 = 1_000_000_000_000;

/// Most defects of one category per unit inspected. A unit may carry several defects
/// of one kind (marks, voids), so a category may exceed `defective`, but not without
/// bound: 10^12 defects on a 10-unit record is a unit or typing error, refused as
/// `too-many-defects` rather than stored.
pub const MAX_DEFECTS_PER_UNIT: u64 = 100;
/// Most defect categories accepted in one record.
pub const MAX_CATEGORIES: usize = 64;
/// Largest accepted revision number (`i64::MAX`, so it fits a SQL BIGINT).
pub const MAX_REVISION: u64 = i64::MAX as u64;

/// A number as received, before checking: JSON integers, JSON floats or text (for
/// example a CSV cell). Checking turns it into a `u64` or a field error with reason
/// `not-a-number`, `not-an-integer`, `negative` or `too-large`.
#[derive(Debug, Clone, PartialEq)]
pub enum RawNumber {
    /// A JSON integer that fits `i64`.
    Int(i64),
    /// A JSON integer above `i64::MAX`.
    UInt(u64),
    /// A JSON number with a fraction or exponent.
    Float(f64),
    /// Text: a CSV cell (digits, spaces around them allowed).
    Text(String),
    /// A JSON string where a number belongs: read only when it is digits and nothing
    /// else (site systems that quote every value send `"8216"`).
    Quoted(String),
}

impl From<u64> for RawNumber {
    fn from(n: u64) -> Self {
        RawNumber::UInt(n)
    }
}

impl From<i64> for RawNumber {
    fn from(n: i64) -> Self {
        RawNumber::Int(n)
    }
}

impl From<&str> for RawNumber {
    fn from(s: &str) -> Self {
        RawNumber::Text(s.to_owned())
    }
}

impl Serialize for RawNumber {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        match self {
            RawNumber::Int(n) => s.serialize_i64(*n),
            RawNumber::UInt(n) => s.serialize_u64(*n),
            RawNumber::Float(x) => s.serialize_f64(*x),
            RawNumber::Text(t) | RawNumber::Quoted(t) => s.serialize_str(t),
        }
    }
}

impl<'de> Deserialize<'de> for RawNumber {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct V;
        impl Visitor<'_> for V {
            type Value = RawNumber;
            fn expecting(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
                f.write_str("a whole number")
            }
            fn visit_i64<E: de::Error>(self, v: i64) -> Result<RawNumber, E> {
                Ok(RawNumber::Int(v))
            }
            fn visit_u64<E: de::Error>(self, v: u64) -> Result<RawNumber, E> {
                Ok(i64::try_from(v).map_or(RawNumber::UInt(v), RawNumber::Int))
            }
            fn visit_f64<E: de::Error>(self, v: f64) -> Result<RawNumber, E> {
                Ok(RawNumber::Float(v))
            }
            fn visit_str<E: de::Error>(self, v: &str) -> Result<RawNumber, E> {
                Ok(RawNumber::Quoted(v.to_owned()))
            }
        }
        d.deserialize_any(V)
    }
}

impl RawNumber {
    /// Checks this number as a count in `0 ..= max`, reporting problems on `field`.
    pub fn to_count(&self, field: &str, max: u64) -> Result<u64, FieldError> {
        let n: Result<u64, FieldError> = match self {
            RawNumber::Int(n) if *n < 0 => Err(negative(field)),
            RawNumber::Int(n) => Ok(n.unsigned_abs()),
            RawNumber::UInt(n) => Ok(*n),
            RawNumber::Float(x) => float_count(*x, field),
            RawNumber::Text(t) => text_count(t, field),
            RawNumber::Quoted(t) if !t.is_empty() && t.bytes().all(|b| b.is_ascii_digit()) => {
                text_count(t, field)
            }
            RawNumber::Quoted(t) => Err(FieldError::new(
                field,
                reason::NOT_A_NUMBER,
                format!("{t:?} is not a count: a quoted count is digits only, like \"8216\""),
            )),
        };
        let n = n?;
        if n > max {
            return Err(FieldError::new(
                field,
                reason::TOO_LARGE,
                format!("{n} is above the maximum of {max}"),
            ));
        }
        Ok(n)
    }
}

fn negative(field: &str) -> FieldError {
    FieldError::new(field, reason::NEGATIVE, "must not be negative")
}

fn float_count(x: f64, field: &str) -> Result<u64, FieldError> {
    if !x.is_finite() || x.fract() != 0.0 {
        return Err(FieldError::new(
            field,
            reason::NOT_AN_INTEGER,
            format!("{x} is not a whole number"),
        ));
    }
    if x < 0.0 {
        return Err(negative(field));
    }
    // Integral floats up to 2^53 are exact; larger ones are above MAX_COUNT anyway.
    if x > 9_007_199_254_740_992.0 {
        return Err(FieldError::new(
            field,
            reason::TOO_LARGE,
            format!("{x} is too large"),
        ));
    }
    #[allow(clippy::cast_possible_truncation, clippy::cast_sign_loss)]
    Ok(x as u64)
}

fn text_count(t: &str, field: &str) -> Result<u64, FieldError> {
    let s = t.trim();
    if s.is_empty() {
        return Err(FieldError::new(
            field,
            reason::REQUIRED,
            "a number is required here",
        ));
    }
    let (neg, body) = match s.strip_prefix('-') {
        Some(rest) => (true, rest),
        None => (false, s),
    };
    if !body.is_empty() && body.bytes().all(|b| b.is_ascii_digit()) {
        if neg {
            return if body.bytes().all(|b| b == b'0') {
                Ok(0)
            } else {
                Err(negative(field))
            };
        }
        return body
            .parse::<u64>()
            .map_err(|_| FieldError::new(field, reason::TOO_LARGE, format!("{s} is too large")));
    }
    // A cell is a whole number in digits: "1e2" or "100.0" is not how a count is
    // written, and reading it as 100 would hide a column mix-up.
    let looks_numeric = s.parse::<f64>().is_ok_and(f64::is_finite);
    Err(if looks_numeric {
        FieldError::new(
            field,
            reason::NOT_AN_INTEGER,
            format!("{s:?} is not a whole number written in digits"),
        )
    } else {
        FieldError::new(
            field,
            reason::NOT_A_NUMBER,
            format!("{s:?} is not a number"),
        )
    })
}

/// The natural key of a count record: site, line, optional product, production date.
#[derive(Debug, Clone, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub struct RecordKey {
    site: SiteCode,
    line: LineCode,
    product: Option<ProductCode>,
    date: Date,
}

impl RecordKey {
    /// A key from typed parts; the date must lie in 2000-01-01 ..= 2100-12-31
    /// (otherwise a field error on `date`).
    pub fn new(
        site: SiteCode,
        line: LineCode,
        product: Option<ProductCode>,
        date: Date,
    ) -> Result<Self, FieldError> {
        let date = check_range(date, "date")?;
        Ok(Self {
            site,
            line,
            product,
            date,
        })
    }
    /// The site.
    pub fn site(&self) -> &SiteCode {
        &self.site
    }
    /// The line.
    pub fn line(&self) -> &LineCode {
        &self.line
    }
    /// The product, if the record is per product.
    pub fn product(&self) -> Option<&ProductCode> {
        self.product.as_ref()
    }
    /// The production date (the plant's local calendar date).
    pub fn date(&self) -> Date {
        self.date
    }
}

impl fmt::Display for RecordKey {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}/{}/{}", self.site, self.line, format_date(self.date))?;
        if let Some(p) = &self.product {
            write!(f, "?product={p}")?;
        }
        Ok(())
    }
}

/// The counts of one record: `defective <= inspected <= 10^12`, at most 64 categories,
/// each category count at most 10^12. Category counts are counts of defects (one unit
/// can have several), so their sum may exceed `defective`.
#[derive(Debug, Clone, PartialEq, Eq, Hash, Default, Serialize)]
pub struct Counts {
    inspected: u64,
    defective: u64,
    defects: BTreeMap<CategoryCode, u64>,
}

impl Counts {
    /// Checks typed counts, collecting every problem (fields `inspected`, `defective`,
    /// `defects`, `defects/<category>`).
    pub fn new(
        inspected: u64,
        defective: u64,
        defects: BTreeMap<CategoryCode, u64>,
    ) -> Result<Self, ValidationError> {
        let mut c = Collector::new();
        check_counts(&mut c, Some(inspected), Some(defective), &defects);
        if c.is_empty() {
            Ok(Self {
                inspected,
                defective,
                defects,
            })
        } else {
            Err(c.fail())
        }
    }
    /// Units inspected.
    pub fn inspected(&self) -> u64 {
        self.inspected
    }
    /// Units found defective (`<= inspected`).
    pub fn defective(&self) -> u64 {
        self.defective
    }
    /// Defect counts by category (possibly empty).
    pub fn defects(&self) -> &BTreeMap<CategoryCode, u64> {
        &self.defects
    }
}

fn check_counts(
    c: &mut Collector,
    inspected: Option<u64>,
    defective: Option<u64>,
    defects: &BTreeMap<CategoryCode, u64>,
) {
    for (name, v) in [("inspected", inspected), ("defective", defective)] {
        if let Some(v) = v
            && v > MAX_COUNT
        {
            c.push(FieldError::new(
                name,
                reason::TOO_LARGE,
                format!("{v} is above the maximum of {MAX_COUNT}"),
            ));
        }
    }
    if let (Some(i), Some(d)) = (inspected, defective)
        && d > i
    {
        c.push(FieldError::new(
            "defective",
            reason::EXCEEDS_INSPECTED,
            format!("defective ({d}) exceeds inspected ({i})"),
        ));
    }
    if defects.len() > MAX_CATEGORIES {
        c.push(FieldError::new(
            "defects",
            reason::TOO_MANY_CATEGORIES,
            format!(
                "{} defect categories; at most {MAX_CATEGORIES} are allowed",
                defects.len()
            ),
        ));
    }
    for (cat, &n) in defects {
        let field = format!("defects/{}", pointer_segment(cat.as_str()));
        if n > MAX_COUNT {
            c.push(FieldError::new(
                field,
                reason::TOO_LARGE,
                format!("{n} is above the maximum of {MAX_COUNT}"),
            ));
        } else if let Some(i) = inspected
            && n > i.saturating_mul(MAX_DEFECTS_PER_UNIT)
        {
            c.push(FieldError::new(
                field,
                reason::TOO_MANY_DEFECTS,
                format!(
                    "{n} defects of one category on {i} inspected units; at most \
                     {MAX_DEFECTS_PER_UNIT} per unit are accepted"
                ),
            ));
        }
    }
}

/// One checked count record.
#[derive(Debug, Clone, PartialEq, Eq, Hash)]
pub struct CountRecord {
    /// Natural key.
    pub key: RecordKey,
    /// The counts.
    pub counts: Counts,
    /// Revision number from the plant system, if it sent one.
    pub revision: Option<u64>,
}

impl CountRecord {
    /// The site.
    pub fn site(&self) -> &SiteCode {
        &self.key.site
    }
    /// The line.
    pub fn line(&self) -> &LineCode {
        &self.key.line
    }
    /// The production date.
    pub fn date(&self) -> Date {
        self.key.date
    }
    /// The product, if any.
    pub fn product(&self) -> Option<&ProductCode> {
        self.key.product.as_ref()
    }
    /// Units inspected.
    pub fn inspected(&self) -> u64 {
        self.counts.inspected
    }
    /// Units defective.
    pub fn defective(&self) -> u64 {
        self.counts.defective
    }
    /// Defect counts by category.
    pub fn defects(&self) -> &BTreeMap<CategoryCode, u64> {
        &self.counts.defects
    }

    /// Checks a record whose key comes from a URL (`PUT
    /// /v1/sites/{site}/lines/{line}/days/{date}?product=P`) and whose counts come from
    /// the body. Field paths: `site`, `line`, `date`, `product`, `inspected`,
    /// `defective`, `defects`, `defects/<category>`, `revision`.
    pub fn from_parts(
        site: &str,
        line: &str,
        date: &str,
        product: Option<&str>,
        body: CountsInput,
    ) -> Result<Self, ValidationError> {
        let mut c = Collector::new();
        let key = check_key(&mut c, Some(site), Some(line), Some(date), product);
        let (counts, revision) = check_body(&mut c, &body);
        match (key, counts, revision) {
            (Some(key), Some(counts), Some(revision)) if c.is_empty() => Ok(Self {
                key,
                counts,
                revision,
            }),
            _ => Err(c.fail()),
        }
    }
}

fn check_key(
    c: &mut Collector,
    site: Option<&str>,
    line: Option<&str>,
    date: Option<&str>,
    product: Option<&str>,
) -> Option<RecordKey> {
    let required =
        |field: &str| FieldError::new(field, reason::REQUIRED, format!("{field} is required"));
    let site = match site {
        Some(s) => c.take(SiteCode::parse_field(s, "site")),
        None => c.take(Err(required("site"))),
    };
    let line = match line {
        Some(s) => c.take(LineCode::parse_field(s, "line")),
        None => c.take(Err(required("line"))),
    };
    let date = match date {
        Some(s) => c.take(parse_date_field(s, "date")),
        None => c.take(Err(required("date"))),
    };
    let product = match product {
        Some(p) => c.take(ProductCode::parse_field(p, "product")).map(Some),
        None => Some(None),
    };
    Some(RecordKey {
        site: site?,
        line: line?,
        product: product?,
        date: date?,
    })
}

fn check_body(c: &mut Collector, body: &CountsInput) -> (Option<Counts>, Option<Option<u64>>) {
    let count = |c: &mut Collector, v: &Option<RawNumber>, field: &str| match v {
        Some(n) => c.take(n.to_count(field, MAX_COUNT)),
        None => {
            c.push(FieldError::new(
                field,
                reason::REQUIRED,
                format!("{field} is required"),
            ));
            None
        }
    };
    let inspected = count(c, &body.inspected, "inspected");
    let defective = count(c, &body.defective, "defective");
    let mut defects = BTreeMap::new();
    let mut defects_ok = true;
    if let Some(raw) = &body.defects {
        for (cat, n) in raw {
            let field = format!("defects/{}", pointer_segment(cat));
            let code = c.take(CategoryCode::parse_field(cat, field.clone()));
            let n = c.take(n.to_count(&field, MAX_COUNT));
            match (code, n) {
                (Some(code), Some(n)) => {
                    defects.insert(code, n);
                }
                _ => defects_ok = false,
            }
        }
    }
    let before = c.is_empty();
    check_counts(c, inspected, defective, &defects);
    let counts_ok = before && c.is_empty() && defects_ok;
    let revision = match &body.revision {
        Some(r) => c.take(r.to_count("revision", MAX_REVISION)).map(Some),
        None => Some(None),
    };
    let counts = match (inspected, defective) {
        (Some(inspected), Some(defective)) if counts_ok => Some(Counts {
            inspected,
            defective,
            defects,
        }),
        _ => None,
    };
    (counts, revision)
}

/// `defects` as a map whose keys are unique: JSON allows a key twice and serde keeps the
/// last, which would store one count of a category silently in place of another.
fn unique_categories<'de, D: Deserializer<'de>>(
    d: D,
) -> Result<Option<BTreeMap<String, RawNumber>>, D::Error> {
    struct V;
    impl<'de> Visitor<'de> for V {
        type Value = Option<BTreeMap<String, RawNumber>>;
        fn expecting(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
            f.write_str("an object of defect counts by category")
        }
        fn visit_none<E: de::Error>(self) -> Result<Self::Value, E> {
            Ok(None)
        }
        fn visit_unit<E: de::Error>(self) -> Result<Self::Value, E> {
            Ok(None)
        }
        fn visit_some<D2: Deserializer<'de>>(self, d: D2) -> Result<Self::Value, D2::Error> {
            d.deserialize_map(self)
        }
        fn visit_map<M: de::MapAccess<'de>>(self, mut m: M) -> Result<Self::Value, M::Error> {
            let mut out = BTreeMap::new();
            while let Some(key) = m.next_key::<String>()? {
                if out.contains_key(&key) {
                    return Err(de::Error::custom(format!("duplicate category `{key}`")));
                }
                let value: RawNumber = m.next_value()?;
                out.insert(key, value);
            }
            Ok(Some(out))
        }
    }
    d.deserialize_option(V)
}

/// The counts part of a record as received (the body of the `PUT` on a record's key).
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct CountsInput {
    /// Units inspected (required).
    #[serde(default)]
    pub inspected: Option<RawNumber>,
    /// Units defective (required, `<= inspected`).
    #[serde(default)]
    pub defective: Option<RawNumber>,
    /// Defect counts by category code (optional; a category named twice is refused).
    #[serde(default, deserialize_with = "unique_categories")]
    pub defects: Option<BTreeMap<String, RawNumber>>,
    /// Revision number from the plant system (optional).
    #[serde(default)]
    pub revision: Option<RawNumber>,
}

/// One record of a batch as received: key and counts together.
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct CountRecordInput {
    /// Site code (required).
    #[serde(default)]
    pub site: Option<String>,
    /// Line code (required).
    #[serde(default)]
    pub line: Option<String>,
    /// Production date `YYYY-MM-DD` (required).
    #[serde(default)]
    pub date: Option<String>,
    /// Product code (optional).
    #[serde(default)]
    pub product: Option<String>,
    /// Units inspected (required).
    #[serde(default)]
    pub inspected: Option<RawNumber>,
    /// Units defective (required).
    #[serde(default)]
    pub defective: Option<RawNumber>,
    /// Defect counts by category code (optional; a category named twice is refused).
    #[serde(default, deserialize_with = "unique_categories")]
    pub defects: Option<BTreeMap<String, RawNumber>>,
    /// Revision number from the plant system (optional).
    #[serde(default)]
    pub revision: Option<RawNumber>,
}

impl TryFrom<CountRecordInput> for CountRecord {
    type Error = ValidationError;

    /// Checks one record, collecting every problem; field paths as in
    /// [`CountRecord::from_parts`], without a prefix.
    fn try_from(input: CountRecordInput) -> Result<Self, ValidationError> {
        let mut c = Collector::new();
        let key = check_key(
            &mut c,
            input.site.as_deref(),
            input.line.as_deref(),
            input.date.as_deref(),
            input.product.as_deref(),
        );
        let body = CountsInput {
            inspected: input.inspected,
            defective: input.defective,
            defects: input.defects,
            revision: input.revision,
        };
        let (counts, revision) = check_body(&mut c, &body);
        match (key, counts, revision) {
            (Some(key), Some(counts), Some(revision)) if c.is_empty() => Ok(Self {
                key,
                counts,
                revision,
            }),
            _ => Err(c.fail()),
        }
    }
}

/// Checks every record of a batch; field paths are prefixed with `/records/<i>`
/// (0-based, as in a JSON pointer) and every error of every record is reported.
/// Two records with the same natural key in one batch are refused (reason
/// `duplicate`, on the later one), because which of them should win is ambiguous.
pub fn check_batch(records: Vec<CountRecordInput>) -> Result<Vec<CountRecord>, ValidationError> {
    check_rows(records, |i| format!("/records/{i}"))
}

/// Like [`check_batch`], with the prefix of each row chosen by the caller (for
/// example `/rows/2` for line 2 of a CSV file).
pub fn check_rows(
    records: Vec<CountRecordInput>,
    prefix: impl Fn(usize) -> String,
) -> Result<Vec<CountRecord>, ValidationError> {
    let mut c = Collector::new();
    let mut out = Vec::with_capacity(records.len());
    let mut seen: HashMap<RecordKey, usize> = HashMap::with_capacity(records.len());
    for (i, raw) in records.into_iter().enumerate() {
        match CountRecord::try_from(raw) {
            Ok(r) => {
                if let Some(first) = seen.insert(r.key.clone(), i) {
                    c.push(FieldError::new(
                        prefix(i),
                        reason::DUPLICATE,
                        format!(
                            "record {} repeats the site, line, product and date of {}",
                            prefix(i),
                            prefix(first)
                        ),
                    ));
                }
                out.push(r);
            }
            Err(e) => c.extend(e.prefixed(&prefix(i))),
        }
    }
    if c.is_empty() { Ok(out) } else { Err(c.fail()) }
}

#[cfg(test)]
mod tests {
    use super::*;
    use time::macros::date;

    fn parse(json: &str) -> Result<CountRecord, ValidationError> {
        let input: CountRecordInput = serde_json::from_str(json).expect("deserializes");
        CountRecord::try_from(input)
    }

    fn reasons(e: &ValidationError) -> Vec<(&str, &str)> {
        e.errors()
            .iter()
            .map(|f| (f.field.as_str(), f.reason))
            .collect()
    }

    #[test]
    fn a_good_record_parses_with_categories_summing_above_defective() {
        let r = parse(
            r#"{"site":"S1","line":"L1","date":"2026-03-14","product":"P-7",
                "inspected":500,"defective":3,"defects":{"scratch":2,"dent":4},"revision":7}"#,
        )
        .unwrap();
        assert_eq!(r.site().as_str(), "S1");
        assert_eq!(r.date(), date!(2026 - 03 - 14));
        assert_eq!(r.product().map(ProductCode::as_str), Some("P-7"));
        assert_eq!((r.inspected(), r.defective()), (500, 3));
        assert_eq!(r.defects().values().sum::<u64>(), 6);
        assert_eq!(r.revision, Some(7));
    }

    #[test]
    fn every_bad_field_is_reported_not_only_the_first() {
        let e = parse(
            r#"{"site":"S 1","date":"2026-02-30","inspected":-5,"defective":"x",
                "defects":{"bad cat":1,"ok":2.5},"revision":-1}"#,
        )
        .unwrap_err();
        assert_eq!(
            reasons(&e),
            [
                ("site", "invalid-character"),
                ("line", "required"),
                ("date", "invalid-date"),
                ("inspected", "negative"),
                ("defective", "not-a-number"),
                ("defects/bad cat", "invalid-character"),
                ("defects/ok", "not-an-integer"),
                ("revision", "negative"),
            ]
        );
    }

    #[test]
    fn defective_above_inspected_is_refused() {
        let e =
            parse(r#"{"site":"S1","line":"L1","date":"2026-03-14","inspected":10,"defective":11}"#)
                .unwrap_err();
        assert_eq!(reasons(&e), [("defective", "exceeds-inspected")]);
    }

    #[test]
    fn caps_on_counts_categories_and_dates_hold() {
        let e = parse(
            r#"{"site":"S1","line":"L1","date":"1999-12-31","inspected":1000000000001,"defective":0}"#,
        )
        .unwrap_err();
        assert_eq!(
            reasons(&e),
            [("date", "date-out-of-range"), ("inspected", "too-large")]
        );

        let many: BTreeMap<String, RawNumber> = (0..65)
            .map(|i| (format!("c{i}"), RawNumber::Int(1)))
            .collect();
        let input = CountRecordInput {
            site: Some("S1".into()),
            line: Some("L1".into()),
            date: Some("2026-01-01".into()),
            inspected: Some(10u64.into()),
            defective: Some(1u64.into()),
            defects: Some(many),
            ..Default::default()
        };
        let e = CountRecord::try_from(input).unwrap_err();
        assert_eq!(reasons(&e), [("defects", "too-many-categories")]);
    }

    #[test]
    fn cells_are_digits_and_json_counts_are_whole_numbers() {
        let n = |s: &str| RawNumber::from(s).to_count("n", MAX_COUNT);
        assert_eq!(n(" 42 "), Ok(42));
        assert_eq!(n("-0"), Ok(0));
        // The contract: a CSV cell is digits (spaces around a cell are ignored, as for
        // every cell); a JSON count is a JSON number whose value is whole (JSON Schema's
        // `integer`, so 12.0 and 1.2e1 are 12), or a JSON string of digits only.
        assert_eq!(n("1e3").unwrap_err().reason, "not-an-integer");
        assert_eq!(n("100.0").unwrap_err().reason, "not-an-integer");
        assert_eq!(RawNumber::Float(12.0).to_count("n", MAX_COUNT), Ok(12));
        let json = |t: &str| {
            serde_json::from_str::<RawNumber>(t)
                .unwrap()
                .to_count("n", MAX_COUNT)
        };
        assert_eq!(json("1e2"), Ok(100));
        assert_eq!(json("100.0"), Ok(100));
        assert_eq!(json("100.5").unwrap_err().reason, "not-an-integer");
        assert_eq!(json(r#""8216""#), Ok(8216));
        assert_eq!(json(r#""-5""#).unwrap_err().reason, "not-a-number");
        assert_eq!(json(r#""""#).unwrap_err().reason, "not-a-number");
        assert_eq!(json(r#"" 100 ""#).unwrap_err().reason, "not-a-number");
        assert_eq!(json(r#""1e2""#).unwrap_err().reason, "not-a-number");
        assert_eq!(n("-3").unwrap_err().reason, "negative");
        assert_eq!(n("").unwrap_err().reason, "required");
        assert_eq!(n("12abc").unwrap_err().reason, "not-a-number");
        assert_eq!(n("NaN").unwrap_err().reason, "not-a-number");
        assert_eq!(
            n("99999999999999999999999").unwrap_err().reason,
            "too-large"
        );
    }

    #[test]
    fn unknown_fields_are_refused_by_deserialization() {
        let r: Result<CountRecordInput, _> = serde_json::from_str(r#"{"site":"S1","inspectd":3}"#);
        assert!(r.is_err());
        let r: Result<CountsInput, _> = serde_json::from_str(r#"{"inspected":true}"#);
        assert!(r.is_err(), "a boolean is not a number");
    }

    #[test]
    fn a_batch_names_the_record_of_each_error_and_refuses_duplicate_keys() {
        let records: Vec<CountRecordInput> = serde_json::from_str(
            r#"[
              {"site":"S1","line":"L1","date":"2026-03-14","inspected":10,"defective":1},
              {"site":"S1","line":"L1","date":"2026-03-14","inspected":10,"defective":20},
              {"site":"S1","line":"L1","date":"2026-03-14","inspected":12,"defective":2}
            ]"#,
        )
        .unwrap();
        let e = check_batch(records).unwrap_err();
        assert_eq!(
            reasons(&e),
            [
                ("/records/1/defective", "exceeds-inspected"),
                ("/records/2", "duplicate")
            ]
        );
    }

    #[test]
    fn a_put_body_combines_with_its_path_key() {
        let body: CountsInput =
            serde_json::from_str(r#"{"inspected":100,"defective":2,"defects":{"a/b":1}}"#).unwrap();
        let e = CountRecord::from_parts("S1", "L1", "2026-03-14", None, body).unwrap_err();
        assert_eq!(reasons(&e), [("defects/a~1b", "invalid-character")]);
        let body: CountsInput = serde_json::from_str(r#"{"inspected":100,"defective":2}"#).unwrap();
        let r = CountRecord::from_parts("S1", "L1", "2026-03-14", Some("P1"), body).unwrap();
        assert_eq!(r.key.to_string(), "S1/L1/2026-03-14?product=P1");
    }
}
