//! The CSV form of `POST /v1/counts` (RFC 4180, `Content-Type: text/csv`).
//!
//! The first line is a header naming the columns, in any order: `site`, `line`,
//! `date`, `inspected`, `defective` (required), `product`, `revision` (optional), and
//! one `defect:<category>` column per defect category. Fields may be quoted (`"..."`,
//! with `""` for a quote inside, and line breaks inside quotes); lines may end in
//! CRLF or LF; a UTF-8 byte-order mark is skipped. An empty `product`, `revision` or
//! `defect:<category>` cell means "not given" (an empty defect cell records nothing for
//! that category; `0` records zero). Unknown or repeated columns are refused.
//!
//! Errors name the file line where the record starts (the header is line 1) and the
//! column, so a plant engineer can open the file at that line.

use dispar_core::error::FieldError;
use dispar_core::record::{CountRecordInput, RawNumber};

use crate::error::{ApiError, ErrorItem, ProblemKind};

/// The records of a CSV body and the file line each starts on.
#[derive(Debug)]
pub struct Parsed {
    /// The records, unchecked.
    pub records: Vec<CountRecordInput>,
    /// `lines[i]` is the file line where record `i` starts.
    pub lines: Vec<u64>,
}

#[derive(Debug, Clone, PartialEq, Eq)]
enum Column {
    Site,
    Line,
    Date,
    Product,
    Inspected,
    Defective,
    Revision,
    Defect(String),
}

const REQUIRED: [(&str, Column); 5] = [
    ("site", Column::Site),
    ("line", Column::Line),
    ("date", Column::Date),
    ("inspected", Column::Inspected),
    ("defective", Column::Defective),
];

/// The CSV column that holds a record's field (`defects/scratch` is
/// `defect:scratch`).
pub fn column_of(field: &str) -> String {
    match field.strip_prefix("defects/") {
        Some(cat) => format!("defect:{}", cat.replace("~1", "/").replace("~0", "~")),
        None if field == "defects" => "defect:*".to_owned(),
        None => field.to_owned(),
    }
}

/// A core field error whose path starts with the record's file line (as produced by
/// `check_rows` with the line as prefix) as a CSV error item.
pub fn item_from_field_error(e: FieldError) -> ErrorItem {
    let (line, field) = match e.field.split_once('/') {
        Some((line, field)) => (line, Some(field)),
        None => (e.field.as_str(), None),
    };
    let line = line.parse::<u64>().unwrap_or(0);
    ErrorItem::csv(line, field.map(column_of), e.reason, e.message)
}

fn malformed(line: u64, reason: &'static str, message: String) -> ApiError {
    ApiError::new(
        ProblemKind::MalformedBody,
        "The request body is not a valid CSV file.",
    )
    .with_error(ErrorItem::csv(line, None, reason, message))
}

/// File line numbers from byte offsets. The csv crate's own line counter is one
/// short for records after a CRLF (it records the position before the LF), so lines
/// are counted here: 1 + the number of LFs before the record's first byte.
struct LineCounter<'a> {
    bytes: &'a [u8],
    at: usize,
    line: u64,
}

impl<'a> LineCounter<'a> {
    fn new(bytes: &'a [u8]) -> Self {
        Self {
            bytes,
            at: 0,
            line: 1,
        }
    }

    /// The line of the byte at `offset`; offsets must not decrease between calls.
    fn line_of(&mut self, offset: u64) -> u64 {
        let mut offset = usize::try_from(offset)
            .unwrap_or(usize::MAX)
            .min(self.bytes.len());
        // A record position may point at the LF of the CRLF that ended the last record.
        if self.bytes.get(offset) == Some(&b'\n') {
            offset += 1;
        }
        if offset > self.at {
            let lfs = self.bytes[self.at..offset]
                .iter()
                .filter(|&&b| b == b'\n')
                .count();
            self.line += lfs as u64;
            self.at = offset;
        }
        self.line
    }
}

fn read_error(e: &csv::Error, lines: &mut LineCounter<'_>) -> ApiError {
    let line = e.position().map_or(0, |p| lines.line_of(p.byte()));
    match e.kind() {
        csv::ErrorKind::Utf8 { .. } => malformed(
            line,
            "invalid-utf8",
            "the line is not valid UTF-8".to_owned(),
        ),
        csv::ErrorKind::UnequalLengths {
            expected_len, len, ..
        } => malformed(
            line,
            "wrong-field-count",
            format!("the line has {len} fields; the header has {expected_len}"),
        ),
        _ => malformed(
            line,
            "unreadable",
            format!("the CSV could not be read: {e}"),
        ),
    }
}

/// Reads the header line into columns, refusing unknown, repeated and missing ones.
fn columns(header: &csv::StringRecord) -> Result<Vec<Column>, ApiError> {
    let mut out = Vec::with_capacity(header.len());
    let mut errors = Vec::new();
    for name in header {
        let column = match name {
            "site" => Some(Column::Site),
            "line" => Some(Column::Line),
            "date" => Some(Column::Date),
            "product" => Some(Column::Product),
            "inspected" => Some(Column::Inspected),
            "defective" => Some(Column::Defective),
            "revision" => Some(Column::Revision),
            other => match other.strip_prefix("defect:") {
                Some(cat) if !cat.is_empty() => Some(Column::Defect(cat.to_owned())),
                _ => None,
            },
        };
        match column {
            Some(c) if out.contains(&c) => errors.push(ErrorItem::csv(
                1,
                Some(name.to_owned()),
                "duplicate",
                format!("column {name:?} appears more than once"),
            )),
            Some(c) => out.push(c),
            None => {
                errors.push(ErrorItem::csv(
                    1,
                    Some(name.to_owned()),
                    "unknown-column",
                    format!(
                        "{name:?} is not a column here; use site, line, date, product, inspected, defective, revision and defect:<category>"
                    ),
                ));
                // Keep positions aligned; the request fails anyway.
                out.push(Column::Defect(String::new()));
            }
        }
    }
    for (name, c) in REQUIRED {
        if !out.contains(&c) {
            errors.push(ErrorItem::csv(
                1,
                Some(name.to_owned()),
                "required",
                format!("the header has no {name:?} column"),
            ));
        }
    }
    if errors.is_empty() {
        Ok(out)
    } else {
        Err(ApiError::validation(
            "The CSV header is invalid; nothing was written.",
            errors,
        ))
    }
}

/// Parses a CSV batch of at most `max` records.
pub fn parse(bytes: &[u8], max: usize) -> Result<Parsed, ApiError> {
    let bytes = bytes.strip_prefix(b"\xEF\xBB\xBF").unwrap_or(bytes);
    let mut reader = csv::ReaderBuilder::new()
        .has_headers(false)
        .flexible(false)
        .from_reader(bytes);
    let mut counter = LineCounter::new(bytes);
    let mut record = csv::StringRecord::new();
    let has_header = reader
        .read_record(&mut record)
        .map_err(|e| read_error(&e, &mut counter))?;
    if !has_header {
        return Err(ApiError::validation(
            "The CSV body is empty; send a header line and at least one record.",
            vec![ErrorItem::csv(
                1,
                None,
                "empty",
                "the file has no header line",
            )],
        ));
    }
    let columns = columns(&record)?;
    let mut records = Vec::new();
    let mut lines = Vec::new();
    loop {
        match reader.read_record(&mut record) {
            Ok(false) => break,
            Ok(true) => {}
            Err(e) => return Err(read_error(&e, &mut counter)),
        }
        let line = record.position().map_or(0, |p| counter.line_of(p.byte()));
        if records.len() == max {
            return Err(ApiError::validation(
                format!(
                    "The batch holds more than {max} records; at most {max} are accepted per request."
                ),
                vec![ErrorItem::csv(
                    line,
                    None,
                    "too-many",
                    format!("record on line {line} is beyond the limit of {max}"),
                )],
            ));
        }
        records.push(row(&columns, &record));
        lines.push(line);
    }
    if records.is_empty() {
        return Err(ApiError::validation(
            "The CSV body has a header but no records.",
            vec![ErrorItem::csv(
                2,
                None,
                "empty",
                "the batch holds no records",
            )],
        ));
    }
    Ok(Parsed { records, lines })
}

fn row(columns: &[Column], record: &csv::StringRecord) -> CountRecordInput {
    let mut input = CountRecordInput::default();
    let optional = |cell: &str| (!cell.is_empty()).then(|| cell.to_owned());
    for (column, cell) in columns.iter().zip(record.iter()) {
        match column {
            Column::Site => input.site = Some(cell.to_owned()),
            Column::Line => input.line = Some(cell.to_owned()),
            Column::Date => input.date = Some(cell.to_owned()),
            Column::Product => input.product = optional(cell),
            Column::Inspected => input.inspected = Some(RawNumber::Text(cell.to_owned())),
            Column::Defective => input.defective = Some(RawNumber::Text(cell.to_owned())),
            Column::Revision => input.revision = optional(cell).map(RawNumber::Text),
            Column::Defect(cat) => {
                if !cell.is_empty() {
                    input
                        .defects
                        .get_or_insert_with(Default::default)
                        .insert(cat.clone(), RawNumber::Text(cell.to_owned()));
                }
            }
        }
    }
    input
}

#[cfg(test)]
mod tests {
    use super::*;

    fn ok(csv: &str) -> Parsed {
        match parse(csv.as_bytes(), 100) {
            Ok(p) => p,
            Err(e) => panic!("{csv:?} should parse: {e}"),
        }
    }

    #[test]
    fn quoted_fields_crlf_and_line_numbers_are_read() {
        let p = ok(
            "\u{feff}site,line,date,inspected,defective,product,defect:scratch\r\n\
             S1,L1,2026-03-02,100,3,\"P,1\",2\r\n\
             \"S1\",\"L\"\"2\",2026-03-02,\"1\r\n0\",1,,\r\n\
             S1,L3,2026-03-02,5,0,,0\r\n",
        );
        assert_eq!(p.lines, vec![2, 3, 5]);
        assert_eq!(p.records[0].product.as_deref(), Some("P,1"));
        assert_eq!(p.records[1].line.as_deref(), Some("L\"2"));
        assert_eq!(
            p.records[1].inspected,
            Some(RawNumber::Text("1\r\n0".into()))
        );
        assert!(p.records[1].product.is_none());
        assert!(p.records[1].defects.is_none());
        assert_eq!(
            p.records[2].defects.as_ref().and_then(|d| d.get("scratch")),
            Some(&RawNumber::Text("0".into()))
        );
    }

    #[test]
    fn header_problems_are_named_by_column() {
        let e = parse(
            b"site,line,date,inspected,colour,site\nS1,L1,2026-01-01,1,x,S1\n",
            10,
        )
        .expect_err("bad header");
        assert_eq!(e.status().as_u16(), 422);
        let reasons: Vec<(&str, Option<&str>)> = e
            .errors()
            .iter()
            .map(|i| (i.reason.as_ref(), i.column.as_deref()))
            .collect();
        assert_eq!(
            reasons,
            vec![
                ("unknown-column", Some("colour")),
                ("duplicate", Some("site")),
                ("required", Some("defective"))
            ]
        );
    }

    #[test]
    fn a_row_with_the_wrong_number_of_fields_is_400_naming_its_line() {
        let e = parse(
            b"site,line,date,inspected,defective\nS1,L1,2026-01-01,1,0\nS1,L1\n",
            10,
        )
        .expect_err("ragged");
        assert_eq!(e.status().as_u16(), 400);
        assert_eq!(e.errors()[0].line, Some(3));
        assert_eq!(e.errors()[0].reason, "wrong-field-count");
    }

    #[test]
    fn too_many_records_and_empty_files_are_refused() {
        let e = parse(
            b"site,line,date,inspected,defective\nS,L,2026-01-01,1,0\nS,L,2026-01-02,1,0\n",
            1,
        )
        .expect_err("too many");
        assert_eq!(e.errors()[0].line, Some(3));
        assert!(parse(b"", 1).is_err());
        assert!(parse(b"site,line,date,inspected,defective\r\n", 1).is_err());
    }

    #[test]
    fn columns_of_fields() {
        assert_eq!(column_of("defects/seal-leak"), "defect:seal-leak");
        assert_eq!(column_of("defective"), "defective");
        let item = item_from_field_error(FieldError::new("7/defects/x", "too-large", "m"));
        assert_eq!(item.line, Some(7));
        assert_eq!(item.column.as_deref(), Some("defect:x"));
    }
}
