//! The write rules every backend shares, as pure functions over a batch.
//!
//! A backend writes a batch in four steps, the middle two of which live here:
//!
//! 1. [`Batch::new`] turns the records into storage form (64-bit signed integers,
//!    "no product" as the empty string), refusing numbers that do not fit, and lists
//!    the batch's distinct natural keys;
//! 2. the backend checks the registry ([`Batch::sites`], [`Batch::lines`],
//!    [`Batch::unregistered`]) and loads the current value of every key in
//!    [`Batch::key_rows`] (in that order, `None` where there is none);
//! 3. [`plan_batch`] decides every record in input order against the state the
//!    earlier ones left (the revision rules of the crate docs) and returns either
//!    every refusal or a [`Plan`]: the revisions to insert, the final current value
//!    of every changed key, the changes to the monthly sums, and the outcome;
//! 4. the backend writes the plan with multi-row statements and commits.
//!
//! Nothing here touches a database, so the rules are tested without one.

use std::collections::{BTreeMap, HashMap};

use dispar_core::record::CountRecord;
use time::Date;

use crate::counts::{BatchOutcome, WriteOutcome, WriteStatus};
use crate::error::{RecordError, RecordProblem, StoreError};

/// A natural key in storage form.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub(crate) struct Key<'a> {
    pub(crate) site: &'a str,
    pub(crate) line: &'a str,
    pub(crate) date: Date,
    /// `""` when the record has no product, so the key has no NULL in it.
    pub(crate) product: &'a str,
}

/// One input record in storage form.
#[derive(Debug, Clone, PartialEq, Eq)]
pub(crate) struct Row<'a> {
    /// Position in the input, so a backend can keep per-row data beside the batch.
    pub(crate) index: usize,
    pub(crate) key: Key<'a>,
    pub(crate) inspected: i64,
    pub(crate) defective: i64,
    /// Never negative (it came from a `u64`).
    pub(crate) plant_revision: Option<i64>,
    /// Sorted by category in byte order (the `BTreeMap` order of the record).
    pub(crate) defects: Vec<(&'a str, i64)>,
}

/// A batch of records in storage form, with its distinct natural keys.
#[derive(Debug)]
pub(crate) struct Batch<'a> {
    rows: Vec<Row<'a>>,
    /// For every distinct key, in order of first appearance, its first row.
    keys: Vec<usize>,
    /// For every row, the index of its key in `keys`.
    row_key: Vec<usize>,
}

fn to_i64(v: u64, field: impl FnOnce() -> String) -> Result<i64, RecordProblem> {
    i64::try_from(v).map_err(|_| RecordProblem::OutOfRange { field: field() })
}

fn row_of(index: usize, record: &CountRecord) -> Result<Row<'_>, RecordProblem> {
    let defects = record
        .defects()
        .iter()
        .map(|(c, &n)| Ok((c.as_str(), to_i64(n, || format!("defects/{c}"))?)))
        .collect::<Result<Vec<_>, RecordProblem>>()?;
    Ok(Row {
        index,
        key: Key {
            site: record.site().as_str(),
            line: record.line().as_str(),
            date: record.date(),
            product: record.product().map_or("", |p| p.as_str()),
        },
        inspected: to_i64(record.inspected(), || "inspected".to_owned())?,
        defective: to_i64(record.defective(), || "defective".to_owned())?,
        plant_revision: record
            .revision
            .map(|r| to_i64(r, || "revision".to_owned()))
            .transpose()?,
        defects,
    })
}

impl<'a> Batch<'a> {
    /// Converts the records, refusing (all at once, in input order) those with a
    /// number beyond `i64::MAX`.
    pub(crate) fn new(records: &'a [CountRecord]) -> Result<Self, Vec<RecordError>> {
        let mut errors = Vec::new();
        let mut rows = Vec::with_capacity(records.len());
        for (index, record) in records.iter().enumerate() {
            match row_of(index, record) {
                Ok(row) => rows.push(row),
                Err(problem) => errors.push(RecordError { index, problem }),
            }
        }
        if !errors.is_empty() {
            return Err(errors);
        }
        let mut ids: HashMap<Key<'a>, usize> = HashMap::with_capacity(rows.len());
        let mut keys = Vec::new();
        let row_key = rows
            .iter()
            .map(|row| {
                *ids.entry(row.key).or_insert_with(|| {
                    keys.push(row.index);
                    keys.len() - 1
                })
            })
            .collect();
        Ok(Self {
            rows,
            keys,
            row_key,
        })
    }

    /// The rows, in input order (`rows()[i].index == i`).
    pub(crate) fn rows(&self) -> &[Row<'a>] {
        &self.rows
    }

    /// For every distinct natural key, in order of first appearance, the first row
    /// that has it. The current values given to [`plan_batch`] follow this order.
    pub(crate) fn key_rows(&self) -> impl Iterator<Item = &Row<'a>> {
        self.keys.iter().filter_map(|&i| self.rows.get(i))
    }

    /// The distinct site codes, sorted.
    pub(crate) fn sites(&self) -> Vec<&'a str> {
        let mut sites: Vec<&str> = self.rows.iter().map(|r| r.key.site).collect();
        sites.sort_unstable();
        sites.dedup();
        sites
    }

    /// The distinct (site, line) pairs, sorted.
    pub(crate) fn lines(&self) -> Vec<(&'a str, &'a str)> {
        let mut lines: Vec<(&str, &str)> =
            self.rows.iter().map(|r| (r.key.site, r.key.line)).collect();
        lines.sort_unstable();
        lines.dedup();
        lines
    }

    /// Refuses, in input order, every record whose site is not registered or, at a
    /// registered site, whose line is not.
    pub(crate) fn unregistered(
        &self,
        site_known: impl Fn(&str) -> bool,
        line_known: impl Fn(&str, &str) -> bool,
    ) -> Vec<RecordError> {
        let mut errors = Vec::new();
        for row in &self.rows {
            let Key { site, line, .. } = row.key;
            let problem = if !site_known(site) {
                RecordProblem::UnknownSite {
                    site: site.to_owned(),
                }
            } else if !line_known(site, line) {
                RecordProblem::UnknownLine {
                    site: site.to_owned(),
                    line: line.to_owned(),
                }
            } else {
                continue;
            };
            errors.push(RecordError {
                index: row.index,
                problem,
            });
        }
        errors
    }
}

/// The current value of a natural key as stored before the batch.
#[derive(Debug, Clone, PartialEq, Eq)]
pub(crate) struct Current {
    revision_id: i64,
    inspected: i64,
    defective: i64,
    /// Never negative (checked by [`Current::new`]).
    plant_revision: Option<i64>,
    defects: Vec<(String, i64)>,
}

impl Current {
    /// A stored current value without defect counts (add them with
    /// [`Current::add_defect`]). A negative plant revision means the database was
    /// written by something else than this crate: an internal error.
    pub(crate) fn new(
        revision_id: i64,
        inspected: i64,
        defective: i64,
        plant_revision: Option<i64>,
    ) -> Result<Self, StoreError> {
        if let Some(r) = plant_revision.filter(|r| *r < 0) {
            return Err(StoreError::internal(format!(
                "stored plant revision {r} is negative"
            )));
        }
        Ok(Self {
            revision_id,
            inspected,
            defective,
            plant_revision,
            defects: Vec::new(),
        })
    }

    /// Adds one stored defect count, in any order.
    pub(crate) fn add_defect(&mut self, category: String, count: i64) {
        self.defects.push((category, count));
    }
}

/// Fills the stored current values of a chunk of keys, from `(i, revision_id,
/// inspected, defective, plant_revision)` rows and `(i, category, count)` rows, where
/// `i` is the key's place in [`Batch::key_rows`].
pub(crate) fn fill_current(
    current: &mut [Option<Current>],
    found: Vec<(i64, i64, i64, i64, Option<i64>)>,
    defects: Vec<(i64, String, i64)>,
) -> Result<(), StoreError> {
    for (i, revision_id, inspected, defective, plant_revision) in found {
        let slot = usize::try_from(i)
            .ok()
            .and_then(|i| current.get_mut(i))
            .ok_or_else(|| StoreError::internal("lookup returned an unknown key index"))?;
        *slot = Some(Current::new(
            revision_id,
            inspected,
            defective,
            plant_revision,
        )?);
    }
    for (i, category, count) in defects {
        if let Some(Some(c)) = usize::try_from(i).ok().and_then(|i| current.get_mut(i)) {
            c.add_defect(category, count);
        }
    }
    Ok(())
}

/// A revision to insert: the values of `row` under a new id.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) struct NewRevision<'a> {
    pub(crate) id: i64,
    pub(crate) row: &'a Row<'a>,
}

/// The current value a changed key has after the batch: the values of `row`
/// (the last row written for the key) under revision `revision_id`.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) struct NewCurrent<'a> {
    pub(crate) revision_id: i64,
    pub(crate) row: &'a Row<'a>,
    /// The key had stored defect counts before the batch, which the new ones replace
    /// (a backend that keeps them in their own rows deletes the old rows first).
    pub(crate) replaces_defects: bool,
}

/// A group of the monthly sums.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub(crate) struct MonthKey<'a> {
    /// The first day of the month.
    pub(crate) month: Date,
    pub(crate) site: &'a str,
    pub(crate) line: &'a str,
    pub(crate) product: &'a str,
}

/// What to add to a group's monthly totals (never both zero).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) struct MonthTotalChange<'a> {
    pub(crate) key: MonthKey<'a>,
    pub(crate) inspected: i64,
    pub(crate) defective: i64,
}

/// What to add to one category of a group's monthly defect counts (never zero).
#[derive(Debug, Clone, PartialEq, Eq)]
pub(crate) struct MonthDefectChange<'a> {
    pub(crate) key: MonthKey<'a>,
    pub(crate) category: String,
    pub(crate) count: i64,
}

/// Everything an accepted batch writes, and what it tells the client.
#[derive(Debug, Clone, PartialEq, Eq)]
pub(crate) struct Plan<'a> {
    /// One outcome per record, in input order, with the counts per status.
    pub(crate) outcome: BatchOutcome,
    /// The revisions to append, in id order (ids are consecutive from the first id
    /// given to [`plan_batch`]). Empty when every record is unchanged.
    pub(crate) revisions: Vec<NewRevision<'a>>,
    /// The final value of every key the batch changes, in the order of [`Batch::key_rows`].
    pub(crate) current: Vec<NewCurrent<'a>>,
    /// Changes of the monthly totals, sorted by group; groups whose change is zero
    /// are left out.
    pub(crate) month_totals: Vec<MonthTotalChange<'a>>,
    /// Changes of the monthly defect counts, sorted by group and category; zero
    /// changes are left out.
    pub(crate) month_defects: Vec<MonthDefectChange<'a>>,
}

impl Plan<'_> {
    /// The (site, date) pairs whose records the plan creates or corrects, each once,
    /// sorted: what the scoped data versions are raised for.
    pub(crate) fn touched_days(&self) -> Vec<(&str, time::Date)> {
        let mut days: Vec<(&str, time::Date)> = self
            .revisions
            .iter()
            .map(|r| (r.row.key.site, r.row.key.date))
            .collect();
        days.sort_unstable();
        days.dedup();
        days
    }
}

/// The value of a key while the batch is being planned.
#[derive(Clone, Copy)]
enum Now<'c, 'a> {
    Stored(&'c Current),
    Planned { revision_id: i64, row: &'a Row<'a> },
}

impl Now<'_, '_> {
    fn revision_id(self) -> i64 {
        match self {
            Now::Stored(c) => c.revision_id,
            Now::Planned { revision_id, .. } => revision_id,
        }
    }

    fn plant_revision(self) -> Option<i64> {
        match self {
            Now::Stored(c) => c.plant_revision,
            Now::Planned { row, .. } => row.plant_revision,
        }
    }

    fn holds_counts_of(self, row: &Row<'_>) -> bool {
        match self {
            Now::Stored(c) => {
                c.inspected == row.inspected
                    && c.defective == row.defective
                    && c.defects.len() == row.defects.len()
                    && c.defects
                        .iter()
                        .zip(&row.defects)
                        .all(|((a, n), (b, m))| a == b && n == m)
            }
            Now::Planned { row: earlier, .. } => {
                earlier.inspected == row.inspected
                    && earlier.defective == row.defective
                    && earlier.defects == row.defects
            }
        }
    }
}

enum Decision<'c, 'a> {
    Write(WriteStatus),
    /// The key already holds this value.
    Unchanged(Now<'c, 'a>),
}

/// The revision rules (see the crate docs) for one record against its key's value.
fn decide<'c, 'a>(
    now: Option<Now<'c, 'a>>,
    row: &Row<'_>,
) -> Result<Decision<'c, 'a>, RecordProblem> {
    let Some(now) = now else {
        return Ok(Decision::Write(WriteStatus::Created));
    };
    let same = now.holds_counts_of(row);
    match (row.plant_revision, now.plant_revision()) {
        (Some(new), Some(cur)) if new <= cur => {
            if same {
                Ok(Decision::Unchanged(now))
            } else {
                Err(RecordProblem::Conflict {
                    current_revision: cur.unsigned_abs(),
                    revision_id: now.revision_id(),
                })
            }
        }
        (new, cur) if same && (new.is_none() || new == cur) => Ok(Decision::Unchanged(now)),
        _ => Ok(Decision::Write(WriteStatus::Corrected)),
    }
}

/// Decides every record of `batch` in input order, each against the value its key
/// has after the records before it (so a key may appear several times), and plans
/// the writes.
///
/// `current[k]` is the stored value of the `k`-th key of [`Batch::key_rows`] (`None`, or a missing
/// entry, where there is none). New revisions get the ids `first_revision_id`,
/// `first_revision_id + 1`, ... in input order; a refusal that names the current
/// revision of a key written earlier in the same batch names such an id. Any
/// refusal refuses the batch: the errors list every refused record in input order.
pub(crate) fn plan_batch<'a>(
    batch: &'a Batch<'a>,
    mut current: Vec<Option<Current>>,
    first_revision_id: i64,
) -> Result<Plan<'a>, Vec<RecordError>> {
    // The comparison with a row's defects is pairwise in category order.
    for c in current.iter_mut().flatten() {
        c.defects.sort_unstable();
    }
    current.resize_with(batch.keys.len(), || None);
    // The last revision planned for each key, if any.
    let mut planned: Vec<Option<(i64, &'a Row<'a>)>> = vec![None; batch.keys.len()];
    let mut errors = Vec::new();
    let mut outcome = BatchOutcome {
        outcomes: Vec::with_capacity(batch.rows.len()),
        ..BatchOutcome::default()
    };
    let mut revisions: Vec<NewRevision<'a>> = Vec::new();
    let mut next_id = first_revision_id;

    for (row, &k) in batch.rows.iter().zip(&batch.row_key) {
        // `row_key` holds indexes into `keys`, and both vectors have one entry per key.
        let now = match planned[k] {
            Some((revision_id, row)) => Some(Now::Planned { revision_id, row }),
            None => current[k].as_ref().map(Now::Stored),
        };
        match decide(now, row) {
            Err(problem) => errors.push(RecordError {
                index: row.index,
                problem,
            }),
            Ok(Decision::Unchanged(now)) => outcome.push(WriteOutcome {
                revision_id: now.revision_id(),
                plant_revision: now.plant_revision().map(i64::unsigned_abs),
                status: WriteStatus::Unchanged,
            }),
            Ok(Decision::Write(status)) => {
                let id = next_id;
                next_id += 1;
                revisions.push(NewRevision { id, row });
                outcome.push(WriteOutcome {
                    revision_id: id,
                    plant_revision: row.plant_revision.map(i64::unsigned_abs),
                    status,
                });
                planned[k] = Some((id, row));
            }
        }
    }
    if !errors.is_empty() {
        return Err(errors);
    }

    let mut new_current = Vec::new();
    let mut totals: BTreeMap<MonthKey<'a>, (i64, i64)> = BTreeMap::new();
    let mut defects: BTreeMap<(MonthKey<'a>, String), i64> = BTreeMap::new();
    for (before, last) in current.iter().zip(&planned) {
        let Some((revision_id, row)) = *last else {
            continue;
        };
        new_current.push(NewCurrent {
            revision_id,
            row,
            replaces_defects: before.as_ref().is_some_and(|c| !c.defects.is_empty()),
        });

        let group = MonthKey {
            month: row.key.date.replace_day(1).unwrap_or(row.key.date),
            site: row.key.site,
            line: row.key.line,
            product: row.key.product,
        };
        let (mut di, mut dd) = (row.inspected, row.defective);
        for (c, n) in &row.defects {
            *defects.entry((group, (*c).to_owned())).or_default() += n;
        }
        if let Some(before) = before {
            di -= before.inspected;
            dd -= before.defective;
            for (c, n) in &before.defects {
                *defects.entry((group, c.clone())).or_default() -= n;
            }
        }
        let t = totals.entry(group).or_default();
        t.0 += di;
        t.1 += dd;
    }

    Ok(Plan {
        outcome,
        revisions,
        current: new_current,
        month_totals: totals
            .into_iter()
            .filter(|(_, d)| *d != (0, 0))
            .map(|(key, (inspected, defective))| MonthTotalChange {
                key,
                inspected,
                defective,
            })
            .collect(),
        month_defects: defects
            .into_iter()
            .filter(|(_, n)| *n != 0)
            .map(|((key, category), count)| MonthDefectChange {
                key,
                category,
                count,
            })
            .collect(),
    })
}

#[cfg(test)]
mod tests {
    use std::collections::BTreeMap;

    use dispar_core::code::{CategoryCode, LineCode, ProductCode, SiteCode};
    use dispar_core::record::{Counts, RecordKey};
    use time::macros::date;

    use super::*;

    const D1: Date = date!(2026 - 03 - 02);
    const D2: Date = date!(2026 - 03 - 03);
    const APRIL: Date = date!(2026 - 04 - 01);
    /// The first id the tests hand out, far from any stored id below.
    const FIRST: i64 = 100;

    fn rec(
        site: &str,
        d: Date,
        inspected: u64,
        defective: u64,
        defects: &[(&str, u64)],
        revision: Option<u64>,
    ) -> CountRecord {
        let defects: BTreeMap<CategoryCode, u64> = defects
            .iter()
            .map(|(c, n)| (CategoryCode::parse(c).expect("category"), *n))
            .collect();
        CountRecord {
            key: RecordKey::new(
                SiteCode::parse(site).expect("site"),
                LineCode::parse("L1").expect("line"),
                None,
                d,
            )
            .expect("key"),
            counts: Counts::new(inspected, defective, defects).expect("counts"),
            revision,
        }
    }

    fn stored(
        revision_id: i64,
        inspected: i64,
        defective: i64,
        defects: &[(&str, i64)],
        plant_revision: Option<i64>,
    ) -> Current {
        let mut c =
            Current::new(revision_id, inspected, defective, plant_revision).expect("current");
        for (cat, n) in defects {
            c.add_defect((*cat).to_owned(), *n);
        }
        c
    }

    fn statuses(plan: &Plan<'_>) -> Vec<WriteStatus> {
        plan.outcome.outcomes.iter().map(|o| o.status).collect()
    }

    fn month(site: &str) -> MonthKey<'_> {
        MonthKey {
            month: date!(2026 - 03 - 01),
            site,
            line: "L1",
            product: "",
        }
    }

    enum Want {
        Status(WriteStatus),
        Conflict { current_revision: u64 },
    }

    /// (inspected, defective, defects)
    type Values = (u64, u64, &'static [(&'static str, u64)]);
    /// (case, stored value and plant revision, incoming value and plant revision, want)
    type Case = (
        &'static str,
        Option<(Values, Option<i64>)>,
        (Values, Option<u64>),
        Want,
    );

    #[test]
    fn one_record_against_a_stored_value_follows_the_revision_rules() {
        use WriteStatus::{Corrected, Created, Unchanged};
        let counts: Values = (10, 1, &[("a", 1)]);
        let other: Values = (10, 2, &[("a", 2)]);
        let cases: [Case; 12] = [
            ("a new key", None, (counts, None), Want::Status(Created)),
            (
                "a new key with a plant revision",
                None,
                (counts, Some(3)),
                Want::Status(Created),
            ),
            (
                "the same counts again",
                Some((counts, None)),
                (counts, None),
                Want::Status(Unchanged),
            ),
            (
                "the same counts and revision again",
                Some((counts, Some(3))),
                (counts, Some(3)),
                Want::Status(Unchanged),
            ),
            (
                "the same counts, no revision, over a revision",
                Some((counts, Some(3))),
                (counts, None),
                Want::Status(Unchanged),
            ),
            (
                "the same counts under an older revision",
                Some((counts, Some(3))),
                (counts, Some(2)),
                Want::Status(Unchanged),
            ),
            (
                "the same counts under a newer revision",
                Some((counts, Some(3))),
                (counts, Some(4)),
                Want::Status(Corrected),
            ),
            (
                "the same counts now carrying a revision",
                Some((counts, None)),
                (counts, Some(1)),
                Want::Status(Corrected),
            ),
            (
                "other counts without revision (last writer wins)",
                Some((counts, Some(3))),
                (other, None),
                Want::Status(Corrected),
            ),
            (
                "other counts under a newer revision",
                Some((counts, Some(3))),
                (other, Some(4)),
                Want::Status(Corrected),
            ),
            (
                "other counts under the same revision",
                Some((counts, Some(3))),
                (other, Some(3)),
                Want::Conflict {
                    current_revision: 3,
                },
            ),
            (
                "other counts under an older revision",
                Some((counts, Some(3))),
                (other, Some(1)),
                Want::Conflict {
                    current_revision: 3,
                },
            ),
        ];
        for (case, before, ((i, d, defects), revision), want) in cases {
            let records = [rec("S1", D1, i, d, defects, revision)];
            let batch = Batch::new(&records).expect("batch");
            let current = before.map(|((i, d, defects), r)| {
                let defects: Vec<(&str, i64)> =
                    defects.iter().map(|(c, n)| (*c, *n as i64)).collect();
                stored(7, i as i64, d as i64, &defects, r)
            });
            let result = plan_batch(&batch, vec![current], FIRST);
            match want {
                Want::Status(status) => {
                    let plan = result.unwrap_or_else(|e| panic!("{case}: refused {e:?}"));
                    let written = status != Unchanged;
                    assert_eq!(statuses(&plan), [status], "{case}");
                    let o = plan.outcome.outcomes[0];
                    assert_eq!(o.revision_id, if written { FIRST } else { 7 }, "{case}");
                    let current_plant = before.and_then(|(_, r)| r).map(i64::unsigned_abs);
                    let want_plant = if written { revision } else { current_plant };
                    assert_eq!(o.plant_revision, want_plant, "{case}");
                    assert_eq!(plan.revisions.len(), usize::from(written), "{case}");
                    assert_eq!(plan.current.len(), usize::from(written), "{case}");
                    if !written {
                        assert!(plan.month_totals.is_empty(), "{case}");
                        assert!(plan.month_defects.is_empty(), "{case}");
                    }
                }
                Want::Conflict { current_revision } => {
                    let errors = result.err().unwrap_or_else(|| panic!("{case}: accepted"));
                    assert_eq!(
                        errors,
                        [RecordError {
                            index: 0,
                            problem: RecordProblem::Conflict {
                                current_revision,
                                revision_id: 7
                            }
                        }],
                        "{case}"
                    );
                }
            }
        }
    }

    #[test]
    fn a_new_key_plans_one_revision_its_current_value_and_its_month() {
        let records = [rec(
            "S1",
            D1,
            10,
            3,
            &[("dent", 1), ("scratch", 2)],
            Some(1),
        )];
        let batch = Batch::new(&records).expect("batch");
        let plan = plan_batch(&batch, vec![None], FIRST).expect("plan");
        let row = &batch.rows()[0];
        assert_eq!(plan.revisions, [NewRevision { id: FIRST, row }]);
        assert_eq!(
            plan.current,
            [NewCurrent {
                revision_id: FIRST,
                row,
                replaces_defects: false
            }]
        );
        assert_eq!(
            plan.month_totals,
            [MonthTotalChange {
                key: month("S1"),
                inspected: 10,
                defective: 3
            }]
        );
        let defects: Vec<(&str, i64)> = plan
            .month_defects
            .iter()
            .map(|d| (d.category.as_str(), d.count))
            .collect();
        assert_eq!(defects, [("dent", 1), ("scratch", 2)]);
    }

    #[test]
    fn a_correction_replaces_stored_defects_and_adds_only_the_difference_to_the_month() {
        // Stored: 10 inspected, 3 defective, dent 1 + scratch 2. New: 12, 3, scratch 3.
        let records = [rec("S1", D1, 12, 3, &[("scratch", 3)], None)];
        let batch = Batch::new(&records).expect("batch");
        let before = stored(7, 10, 3, &[("scratch", 2), ("dent", 1)], None);
        let plan = plan_batch(&batch, vec![Some(before)], FIRST).expect("plan");
        assert_eq!(statuses(&plan), [WriteStatus::Corrected]);
        assert!(plan.current[0].replaces_defects);
        assert_eq!(
            plan.month_totals,
            [MonthTotalChange {
                key: month("S1"),
                inspected: 2,
                defective: 0
            }]
        );
        let defects: Vec<(&str, i64)> = plan
            .month_defects
            .iter()
            .map(|d| (d.category.as_str(), d.count))
            .collect();
        assert_eq!(defects, [("dent", -1), ("scratch", 1)]);
    }

    #[test]
    fn month_changes_that_cancel_out_are_left_out() {
        // Same totals, defects moved from one category to another.
        let records = [rec("S1", D1, 10, 2, &[("dent", 2)], None)];
        let batch = Batch::new(&records).expect("batch");
        let before = stored(7, 10, 2, &[("scratch", 2)], None);
        let plan = plan_batch(&batch, vec![Some(before)], FIRST).expect("plan");
        assert!(plan.month_totals.is_empty(), "{:?}", plan.month_totals);
        assert_eq!(plan.month_defects.len(), 2);
        // A correction without defects over a value without defects deletes nothing.
        let records = [rec("S1", D1, 11, 2, &[], None)];
        let batch = Batch::new(&records).expect("batch");
        let plan =
            plan_batch(&batch, vec![Some(stored(7, 10, 2, &[], None))], FIRST).expect("plan");
        assert!(!plan.current[0].replaces_defects);
        assert!(plan.month_defects.is_empty());
    }

    #[test]
    fn stored_defects_compare_by_category_whatever_order_they_were_loaded_in() {
        let records = [rec("S1", D1, 10, 3, &[("dent", 1), ("scratch", 2)], None)];
        let batch = Batch::new(&records).expect("batch");
        let before = stored(7, 10, 3, &[("scratch", 2), ("dent", 1)], None);
        let plan = plan_batch(&batch, vec![Some(before)], FIRST).expect("plan");
        assert_eq!(statuses(&plan), [WriteStatus::Unchanged]);
    }

    #[test]
    fn a_key_repeated_in_a_batch_is_decided_against_the_rows_before_it() {
        let records = [
            rec("S1", D1, 10, 1, &[], Some(1)),
            rec("S1", D1, 10, 1, &[], Some(1)),
            rec("S1", D1, 10, 2, &[("a", 2)], Some(2)),
        ];
        let batch = Batch::new(&records).expect("batch");
        assert_eq!(batch.key_rows().count(), 1);
        let plan = plan_batch(&batch, vec![None], FIRST).expect("plan");
        assert_eq!(
            statuses(&plan),
            [
                WriteStatus::Created,
                WriteStatus::Unchanged,
                WriteStatus::Corrected
            ]
        );
        let ids: Vec<i64> = plan
            .outcome
            .outcomes
            .iter()
            .map(|o| o.revision_id)
            .collect();
        assert_eq!(ids, [FIRST, FIRST, FIRST + 1]);
        let revision_rows: Vec<usize> = plan.revisions.iter().map(|r| r.row.index).collect();
        assert_eq!(revision_rows, [0, 2]);
        // One current value: the last row, under the last id.
        assert_eq!(plan.current.len(), 1);
        assert_eq!(plan.current[0].row.index, 2);
        assert_eq!(plan.current[0].revision_id, FIRST + 1);
        // The month gets the final value once, not each row.
        assert_eq!(
            plan.month_totals,
            [MonthTotalChange {
                key: month("S1"),
                inspected: 10,
                defective: 2
            }]
        );
    }

    #[test]
    fn an_older_revision_after_a_newer_one_in_the_same_batch_is_refused() {
        let records = [
            rec("S1", D1, 10, 1, &[], Some(5)),
            rec("S1", D1, 10, 2, &[], Some(3)),
        ];
        let batch = Batch::new(&records).expect("batch");
        let errors = plan_batch(&batch, vec![None], FIRST).expect_err("refused");
        assert_eq!(
            errors,
            [RecordError {
                index: 1,
                problem: RecordProblem::Conflict {
                    current_revision: 5,
                    revision_id: FIRST
                }
            }]
        );
    }

    #[test]
    fn every_refusal_is_listed_in_input_order_and_nothing_is_planned() {
        let records = [
            rec("S1", D1, 10, 9, &[], Some(2)),
            rec("S2", D1, 10, 1, &[], None),
            rec("S1", D1, 10, 8, &[], Some(1)),
        ];
        let batch = Batch::new(&records).expect("batch");
        let current = vec![Some(stored(7, 10, 1, &[], Some(2))), None];
        let errors = plan_batch(&batch, current, FIRST).expect_err("refused");
        let indexes: Vec<usize> = errors.iter().map(|e| e.index).collect();
        assert_eq!(indexes, [0, 2]);
    }

    #[test]
    fn the_outcome_counts_each_status() {
        let records = [
            rec("S1", D1, 10, 1, &[], None), // stored, same: unchanged
            rec("S1", D2, 10, 1, &[], None), // new: created
            rec("S2", D1, 10, 2, &[], None), // stored, other counts: corrected
            rec("S3", D1, 10, 1, &[], None), // new: created
            rec("S3", D1, 10, 1, &[], None), // as the row before: unchanged
        ];
        let batch = Batch::new(&records).expect("batch");
        let current = vec![
            Some(stored(1, 10, 1, &[], None)),
            None,
            Some(stored(2, 10, 1, &[], None)),
            None,
        ];
        let plan = plan_batch(&batch, current, FIRST).expect("plan");
        let o = &plan.outcome;
        assert_eq!((o.created, o.corrected, o.unchanged), (2, 1, 2));
        assert_eq!(o.outcomes.len(), 5);
        let ids: Vec<i64> = o.outcomes.iter().map(|o| o.revision_id).collect();
        assert_eq!(ids, [1, FIRST, FIRST + 1, FIRST + 2, FIRST + 2]);
        assert_eq!(plan.revisions.len(), 3);
        assert_eq!(plan.current.len(), 3);
    }

    #[test]
    fn months_group_keys_by_month_site_line_and_product() {
        let records = [
            rec("S1", D1, 10, 1, &[], None),
            rec("S1", D2, 20, 2, &[], None),
            rec("S1", APRIL, 5, 0, &[], None),
            rec("S2", D1, 7, 1, &[], None),
        ];
        let batch = Batch::new(&records).expect("batch");
        let plan = plan_batch(&batch, vec![None; 4], FIRST).expect("plan");
        let got: Vec<(Date, &str, i64, i64)> = plan
            .month_totals
            .iter()
            .map(|t| (t.key.month, t.key.site, t.inspected, t.defective))
            .collect();
        assert_eq!(
            got,
            [
                (date!(2026 - 03 - 01), "S1", 30, 3),
                (date!(2026 - 03 - 01), "S2", 7, 1),
                (APRIL, "S1", 5, 0),
            ]
        );
    }

    #[test]
    fn numbers_beyond_i64_are_refused_for_every_record_at_once() {
        let records = [
            rec("S1", D1, 10, 1, &[], Some(u64::MAX)),
            rec("S1", D2, 10, 1, &[], Some(1)),
            rec("S2", D1, 10, 1, &[], Some(i64::MAX as u64 + 1)),
        ];
        let errors = Batch::new(&records).expect_err("refused");
        let out_of_range = RecordProblem::OutOfRange {
            field: "revision".to_owned(),
        };
        assert_eq!(
            errors,
            [
                RecordError {
                    index: 0,
                    problem: out_of_range.clone()
                },
                RecordError {
                    index: 2,
                    problem: out_of_range
                },
            ]
        );
        let largest = [rec("S1", D1, 10, 1, &[], Some(i64::MAX as u64))];
        assert!(Batch::new(&largest).is_ok());
    }

    #[test]
    fn a_batch_lists_its_distinct_keys_sites_and_lines() {
        let mut with_product = rec("S1", D1, 10, 1, &[], None);
        with_product.key = RecordKey::new(
            SiteCode::parse("S1").expect("site"),
            LineCode::parse("L1").expect("line"),
            Some(ProductCode::parse("P1").expect("product")),
            D1,
        )
        .expect("key");
        let records = [
            rec("S2", D1, 10, 1, &[], None),
            rec("S1", D1, 10, 1, &[], None),
            rec("S2", D1, 10, 2, &[], None),
            with_product,
        ];
        let batch = Batch::new(&records).expect("batch");
        let first_rows: Vec<usize> = batch.key_rows().map(|r| r.index).collect();
        assert_eq!(first_rows, [0, 1, 3]);
        assert_eq!(batch.rows()[1].key.product, "");
        assert_eq!(batch.rows()[3].key.product, "P1");
        assert_eq!(batch.sites(), ["S1", "S2"]);
        assert_eq!(batch.lines(), [("S1", "L1"), ("S2", "L1")]);
    }

    #[test]
    fn an_unknown_site_is_reported_before_its_line() {
        let records = [
            rec("S1", D1, 10, 1, &[], None),
            rec("S9", D1, 10, 1, &[], None),
            rec("S2", D1, 10, 1, &[], None),
        ];
        let batch = Batch::new(&records).expect("batch");
        let errors = batch.unregistered(|s| s != "S9", |s, _| s == "S1");
        assert_eq!(
            errors,
            [
                RecordError {
                    index: 1,
                    problem: RecordProblem::UnknownSite {
                        site: "S9".to_owned()
                    }
                },
                RecordError {
                    index: 2,
                    problem: RecordProblem::UnknownLine {
                        site: "S2".to_owned(),
                        line: "L1".to_owned()
                    }
                },
            ]
        );
        assert!(batch.unregistered(|_| true, |_, _| true).is_empty());
    }

    #[test]
    fn a_negative_stored_plant_revision_is_an_internal_error() {
        assert!(matches!(
            Current::new(1, 10, 1, Some(-1)),
            Err(StoreError::Internal(_))
        ));
        assert!(Current::new(1, 10, 1, Some(0)).is_ok());
    }
}
