//! Checking the CSV input of `dispar analyze`, after a CSV reader has split it into
//! cells: group rates (`group,inspected,defective`) or a raw table of counts
//! (`group,<outcome>,...`). No CSV parsing happens here; the caller gives each row's
//! 1-based line number and its cells.
//!
//! Rules, each failure naming the line and, where it applies, the field:
//! - the first row is the header; an input without one is an error;
//! - rates: columns `group`, `inspected`, `defective` (any order, names compared
//!   without case), and no others;
//! - table: the first column holds the group names (any header), then one or more
//!   outcome columns with distinct, non-empty names;
//! - every row has as many cells as the header; group names are non-empty, at most
//!   200 characters and distinct; counts are whole numbers in 0..=10^12; a rate row's
//!   `defective` is at most its `inspected`;
//! - at most [`MAX_GROUPS`] groups; at least one group row.

use std::collections::HashMap;
use std::fmt;

use crate::error::reason;
use crate::record::{MAX_COUNT, RawNumber};

/// Most groups (rows) accepted in one input.
pub const MAX_GROUPS: usize = 10_000;
/// Longest accepted group name, in characters.
pub const MAX_GROUP_NAME_LEN: usize = 200;
/// Most errors kept; later ones are counted but not listed.
pub const MAX_ERRORS: usize = 50;

/// One problem in the input, located by line (1-based) and, when it concerns one
/// cell, the column name.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct InputError {
    /// 1-based line number in the file.
    pub line: u64,
    /// Column name (as in the header) when the problem is in one cell.
    pub field: Option<String>,
    /// Machine-readable reason (see [`crate::error::reason`]; also `missing-column`,
    /// `unknown-column`, `ragged-row`, `no-header`, `no-rows`, `too-many-groups`).
    pub reason: &'static str,
    /// Plain words.
    pub message: String,
}

impl InputError {
    fn new(
        line: u64,
        field: Option<&str>,
        reason: &'static str,
        message: impl Into<String>,
    ) -> Self {
        Self {
            line,
            field: field.map(str::to_owned),
            reason,
            message: message.into(),
        }
    }
}

impl fmt::Display for InputError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match &self.field {
            Some(field) => write!(f, "line {}, field {field:?}: {}", self.line, self.message),
            None => write!(f, "line {}: {}", self.line, self.message),
        }
    }
}

/// Every problem found (up to [`MAX_ERRORS`] listed), one per line in `Display`.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub struct InputErrors {
    /// The problems, in file order.
    pub errors: Vec<InputError>,
    /// How many more were found but not listed.
    pub more: usize,
}

impl fmt::Display for InputErrors {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        for (i, e) in self.errors.iter().enumerate() {
            if i > 0 {
                f.write_str("\n")?;
            }
            write!(f, "{e}")?;
        }
        if self.more > 0 {
            write!(f, "\n... and {} more problems", self.more)?;
        }
        Ok(())
    }
}

impl From<InputError> for InputErrors {
    fn from(e: InputError) -> Self {
        Self {
            errors: vec![e],
            more: 0,
        }
    }
}

#[derive(Default)]
struct Errors {
    list: Vec<InputError>,
    more: usize,
}

impl Errors {
    fn push(&mut self, e: InputError) {
        if self.list.len() < MAX_ERRORS {
            self.list.push(e);
        } else {
            self.more += 1;
        }
    }
    fn finish<T>(mut self, v: T) -> Result<T, InputErrors> {
        self.list.sort_by_key(|e| e.line);
        if self.list.is_empty() {
            Ok(v)
        } else {
            Err(InputErrors {
                errors: self.list,
                more: self.more,
            })
        }
    }
}

/// One row of a rates input.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct RateRow {
    /// Group name.
    pub name: String,
    /// Units inspected.
    pub inspected: u64,
    /// Units defective (`<= inspected`).
    pub defective: u64,
}

/// A raw table of counts: row (group) names, column (outcome) names, counts row-major.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct CountTable {
    /// Group names, one per row.
    pub row_names: Vec<String>,
    /// Outcome names, one per column.
    pub col_names: Vec<String>,
    /// `counts[r][c]`.
    pub counts: Vec<Vec<u64>>,
}

/// A row as given by the CSV reader: its 1-based line number and its cells.
pub type Row = (u64, Vec<String>);

fn header(rows: &[Row]) -> Result<&Row, InputErrors> {
    rows.first().ok_or_else(|| {
        InputError::new(
            1,
            None,
            "no-header",
            "the input is empty; the first line must be a header",
        )
        .into()
    })
}

fn check_shape(rows: &[Row], width: usize, errors: &mut Errors) {
    if rows.len() <= 1 {
        let line = rows.first().map_or(1, |r| r.0 + 1);
        errors.push(InputError::new(
            line,
            None,
            "no-rows",
            "there are no group rows after the header",
        ));
    }
    if rows.len() - usize::from(!rows.is_empty()) > MAX_GROUPS {
        errors.push(InputError::new(
            rows.get(MAX_GROUPS + 1).map_or(0, |r| r.0),
            None,
            "too-many-groups",
            format!("more than {MAX_GROUPS} groups"),
        ));
    }
    for (line, cells) in rows.iter().skip(1) {
        if cells.len() != width {
            errors.push(InputError::new(
                *line,
                None,
                "ragged-row",
                format!(
                    "the row has {} fields but the header has {width}",
                    cells.len()
                ),
            ));
        }
    }
}

fn check_name(
    line: u64,
    field: &str,
    name: &str,
    seen: &mut HashMap<String, u64>,
    errors: &mut Errors,
) {
    let name = name.trim();
    if name.is_empty() {
        errors.push(InputError::new(
            line,
            Some(field),
            reason::EMPTY,
            "the group name is empty",
        ));
    } else if name.chars().count() > MAX_GROUP_NAME_LEN {
        errors.push(InputError::new(
            line,
            Some(field),
            reason::TOO_LONG,
            format!("the group name is longer than {MAX_GROUP_NAME_LEN} characters"),
        ));
    } else if let Some(first) = seen.insert(name.to_owned(), line) {
        seen.insert(name.to_owned(), first);
        errors.push(InputError::new(
            line,
            Some(field),
            reason::DUPLICATE,
            format!("group {name:?} already appears on line {first}"),
        ));
    }
}

fn count(line: u64, field: &str, cell: &str, errors: &mut Errors) -> Option<u64> {
    match RawNumber::Text(cell.to_owned()).to_count(field, MAX_COUNT) {
        Ok(n) => Some(n),
        Err(e) => {
            let message = match e.reason {
                reason::REQUIRED => "the count is missing".to_owned(),
                reason::NEGATIVE => {
                    format!("{:?} is negative; counts must be 0 or more", cell.trim())
                }
                _ => e.message,
            };
            errors.push(InputError::new(line, Some(field), e.reason, message));
            None
        }
    }
}

/// Checks a rates input (`group,inspected,defective`).
pub fn parse_rates(rows: &[Row]) -> Result<Vec<RateRow>, InputErrors> {
    let (hline, head) = header(rows)?;
    let mut errors = Errors::default();
    let names: Vec<String> = head.iter().map(|h| h.trim().to_ascii_lowercase()).collect();
    let find = |want: &str| names.iter().position(|h| h == want);
    let (g, i, d) = (find("group"), find("inspected"), find("defective"));
    for (want, at) in [("group", g), ("inspected", i), ("defective", d)] {
        if at.is_none() {
            errors.push(InputError::new(
                *hline,
                None,
                "missing-column",
                format!(
                    "the header has no {want:?} column; expected group,inspected,defective (use --table for a table of raw counts)"
                ),
            ));
        }
    }
    let mut seen_cols = HashMap::new();
    for (pos, h) in names.iter().enumerate() {
        if !matches!(h.as_str(), "group" | "inspected" | "defective") {
            errors.push(InputError::new(
                *hline,
                Some(&head[pos]),
                "unknown-column",
                "unexpected column; a rates file has exactly group,inspected,defective (use --table for a table of raw counts)",
            ));
        } else if seen_cols.insert(h.clone(), pos).is_some() {
            errors.push(InputError::new(
                *hline,
                Some(&head[pos]),
                reason::DUPLICATE,
                "the column appears twice",
            ));
        }
    }
    let (Some(g), Some(i), Some(d)) = (g, i, d) else {
        return errors.finish(Vec::new());
    };
    check_shape(rows, head.len(), &mut errors);
    let mut seen = HashMap::new();
    let mut out = Vec::with_capacity(rows.len().saturating_sub(1));
    for (line, cells) in rows.iter().skip(1) {
        if cells.len() != head.len() {
            continue;
        }
        let line = *line;
        check_name(line, "group", &cells[g], &mut seen, &mut errors);
        let ins = count(line, "inspected", &cells[i], &mut errors);
        let def = count(line, "defective", &cells[d], &mut errors);
        if let (Some(ins), Some(def)) = (ins, def) {
            if def > ins {
                errors.push(InputError::new(
                    line,
                    Some("defective"),
                    reason::EXCEEDS_INSPECTED,
                    format!("defective ({def}) exceeds inspected ({ins})"),
                ));
            }
            out.push(RateRow {
                name: cells[g].trim().to_owned(),
                inspected: ins,
                defective: def,
            });
        }
    }
    errors.finish(out)
}

/// Checks a table input (`group,<outcome>,...`).
pub fn parse_table(rows: &[Row]) -> Result<CountTable, InputErrors> {
    let (hline, head) = header(rows)?;
    let mut errors = Errors::default();
    if head.len() < 2 {
        errors.push(InputError::new(
            *hline,
            None,
            "missing-column",
            "the header needs a group column and at least one outcome column",
        ));
        return errors.finish(empty_table());
    }
    let mut seen_cols: HashMap<String, usize> = HashMap::new();
    let col_names: Vec<String> = head[1..].iter().map(|h| h.trim().to_owned()).collect();
    for (pos, name) in col_names.iter().enumerate() {
        if name.is_empty() {
            errors.push(InputError::new(
                *hline,
                None,
                reason::EMPTY,
                format!("column {} has no name", pos + 2),
            ));
        } else if seen_cols.insert(name.clone(), pos).is_some() {
            errors.push(InputError::new(
                *hline,
                Some(name),
                reason::DUPLICATE,
                "the column appears twice",
            ));
        }
    }
    check_shape(rows, head.len(), &mut errors);
    let group_field = head[0].trim().to_owned();
    let mut seen = HashMap::new();
    let mut table = empty_table();
    table.col_names.clone_from(&col_names);
    for (line, cells) in rows.iter().skip(1) {
        if cells.len() != head.len() {
            continue;
        }
        check_name(*line, &group_field, &cells[0], &mut seen, &mut errors);
        let counts: Vec<Option<u64>> = cells[1..]
            .iter()
            .zip(&col_names)
            .map(|(cell, col)| count(*line, col, cell, &mut errors))
            .collect();
        table.row_names.push(cells[0].trim().to_owned());
        table
            .counts
            .push(counts.into_iter().map(|c| c.unwrap_or(0)).collect());
    }
    errors.finish(table)
}

fn empty_table() -> CountTable {
    CountTable {
        row_names: Vec::new(),
        col_names: Vec::new(),
        counts: Vec::new(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn rows(text: &str) -> Vec<Row> {
        text.lines()
            .enumerate()
            .filter(|(_, l)| !l.is_empty())
            .map(|(i, l)| (i as u64 + 1, l.split(',').map(str::to_owned).collect()))
            .collect()
    }

    fn problems(
        r: Result<impl fmt::Debug, InputErrors>,
    ) -> Vec<(u64, Option<String>, &'static str)> {
        r.expect_err("should fail")
            .errors
            .into_iter()
            .map(|e| (e.line, e.field, e.reason))
            .collect()
    }

    #[test]
    fn a_good_rates_file_parses_in_any_column_order() {
        let r = parse_rates(&rows("Defective,group,inspected\n36,A,300\n46,B,300\n")).unwrap();
        assert_eq!(
            r[1],
            RateRow {
                name: "B".into(),
                inspected: 300,
                defective: 46
            }
        );
    }

    #[test]
    fn every_bad_rates_row_is_named_by_line_and_field() {
        let text = "group,inspected,defective\nA,300,-1\nB,10,11\nA,5,1\nC,x,1\nD,5\n,5,1\n";
        let p = problems(parse_rates(&rows(text)));
        let f = |s: &str| Some(s.to_owned());
        assert_eq!(
            p,
            [
                (2, f("defective"), "negative"),
                (3, f("defective"), "exceeds-inspected"),
                (4, f("group"), "duplicate"),
                (5, f("inspected"), "not-a-number"),
                (6, None, "ragged-row"),
                (7, f("group"), "empty"),
            ]
        );
    }

    #[test]
    fn a_rates_header_needs_its_three_columns() {
        let p = problems(parse_rates(&rows("group,pass,fail\nA,1,2\n")));
        assert_eq!(p[0], (1, None, "missing-column"));
        assert!(p.iter().any(|e| e.2 == "unknown-column"));
        assert_eq!(problems(parse_rates(&[])), [(1, None, "no-header")]);
        assert_eq!(
            problems(parse_rates(&rows("group,inspected,defective\n"))),
            [(2, None, "no-rows")]
        );
    }

    #[test]
    fn a_table_keeps_its_outcome_names_and_counts() {
        let t = parse_table(&rows("site,scratch,dent,other\nS1,3,4,0\nS2,1,0,9\n")).unwrap();
        assert_eq!(t.col_names, ["scratch", "dent", "other"]);
        assert_eq!(t.row_names, ["S1", "S2"]);
        assert_eq!(t.counts, [vec![3, 4, 0], vec![1, 0, 9]]);
        let p = problems(parse_table(&rows("site,a,a\nS1,1.5,2\nS1,1,2\n")));
        let f = |s: &str| Some(s.to_owned());
        assert_eq!(
            p,
            [
                (1, f("a"), "duplicate"),
                (2, f("a"), "not-an-integer"),
                (3, f("site"), "duplicate")
            ]
        );
        assert_eq!(
            problems(parse_table(&rows("group\nA\n")))[0].2,
            "missing-column"
        );
    }
}
