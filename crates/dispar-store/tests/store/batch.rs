use dispar_store::{BatchResult, RecordProblem, StoreError, WriteStatus};
use time::Duration;

use crate::helpers::{D1, D2, fresh, key, rec, rec_full, registry, with_revision};

#[tokio::test]
async fn a_batch_with_one_bad_row_writes_nothing_and_names_every_bad_row() {
    let db = fresh().await;
    registry(db.store.as_ref(), 1, 1).await;
    db.store
        .put_record(&with_revision(rec("S1", "L1", D1, 10, 1), 5), None)
        .await
        .expect("existing");
    let before = db.store.stats().await.expect("stats");
    let version = db.store.data_version().await.expect("version");

    let batch = vec![
        rec("S1", "L1", D2, 10, 1),
        rec("S1", "L7", D2, 10, 1),
        with_revision(rec("S1", "L1", D1, 10, 2), 4),
        rec("S8", "L1", D2, 10, 1),
    ];
    match db.store.put_batch(&batch, None, None).await {
        Err(StoreError::Rejected(errors)) => {
            let got: Vec<(usize, &RecordProblem)> =
                errors.iter().map(|e| (e.index, &e.problem)).collect();
            assert_eq!(
                got.len(),
                2,
                "registry problems are reported first: {got:?}"
            );
            assert_eq!(
                got[0],
                (
                    1,
                    &RecordProblem::UnknownLine {
                        site: "S1".into(),
                        line: "L7".into()
                    }
                )
            );
            assert_eq!(
                got[1],
                (3, &RecordProblem::UnknownSite { site: "S8".into() })
            );
        }
        other => panic!("expected a refusal, got {other:?}"),
    }
    // Only the conflict left: still all-or-nothing, with the index.
    let batch = vec![
        rec("S1", "L1", D2, 10, 1),
        with_revision(rec("S1", "L1", D1, 10, 2), 4),
    ];
    match db.store.put_batch(&batch, None, None).await {
        Err(StoreError::Rejected(errors)) => {
            assert_eq!(errors.len(), 1);
            assert_eq!(errors[0].index, 1);
            assert!(matches!(
                errors[0].problem,
                RecordProblem::Conflict {
                    current_revision: 5,
                    ..
                }
            ));
        }
        other => panic!("expected a conflict, got {other:?}"),
    }
    assert_eq!(
        db.store.stats().await.expect("stats"),
        before,
        "row counts unchanged"
    );
    assert_eq!(db.store.data_version().await.expect("version"), version);
    assert!(
        db.store
            .get_record(&key("S1", "L1", None, D2))
            .await
            .expect("get")
            .is_none()
    );
}

#[tokio::test]
async fn the_same_key_twice_in_a_batch_is_checked_against_the_earlier_row() {
    let db = fresh().await;
    registry(db.store.as_ref(), 1, 1).await;
    let batch = vec![
        with_revision(rec("S1", "L1", D1, 10, 1), 1),
        with_revision(rec("S1", "L1", D1, 10, 1), 1),
        with_revision(rec_full("S1", "L1", None, D1, 10, 2, &[("a", 2)], None), 2),
    ];
    let BatchResult::Written { outcome, .. } =
        db.store.put_batch(&batch, None, None).await.expect("batch")
    else {
        panic!("written");
    };
    let statuses: Vec<WriteStatus> = outcome.outcomes.iter().map(|o| o.status).collect();
    assert_eq!(
        statuses,
        [
            WriteStatus::Created,
            WriteStatus::Unchanged,
            WriteStatus::Corrected
        ]
    );
    assert_eq!(
        outcome.outcomes[1].revision_id,
        outcome.outcomes[0].revision_id
    );
    let current = db
        .store
        .get_record(&key("S1", "L1", None, D1))
        .await
        .expect("get")
        .expect("exists");
    assert_eq!(current.record, batch[2]);
    assert_eq!(current.revision_id, outcome.outcomes[2].revision_id);

    let late = vec![
        with_revision(rec("S1", "L1", D1, 10, 9), 2),
        with_revision(rec("S1", "L1", D1, 10, 9), 1),
    ];
    match db.store.put_batch(&late, None, None).await {
        Err(StoreError::Rejected(errors)) => {
            let idx: Vec<usize> = errors.iter().map(|e| e.index).collect();
            assert_eq!(idx, [0, 1]);
        }
        other => panic!("expected conflicts, got {other:?}"),
    }
}

#[tokio::test]
async fn large_batches_span_several_statements_and_corrections_replace_defects() {
    let db = fresh().await;
    registry(db.store.as_ref(), 3, 2).await;
    // 3 sites x 2 lines x 450 days = 2,700 records, each with 2 categories (5,400 defect rows).
    let mut records = Vec::new();
    for s in 1..=3 {
        for l in 1..=2 {
            for day in 0..450i64 {
                let d = D1 + Duration::days(day);
                records.push(rec_full(
                    &format!("S{s}"),
                    &format!("L{l}"),
                    None,
                    d,
                    1000,
                    10 + (day % 7) as u64,
                    &[("a", 3), ("b", (day % 5) as u64)],
                    None,
                ));
            }
        }
    }
    let BatchResult::Written { outcome, .. } = db
        .store
        .put_batch(&records, None, None)
        .await
        .expect("insert")
    else {
        panic!("written");
    };
    assert_eq!(outcome.created, records.len());
    let ids: Vec<i64> = outcome.outcomes.iter().map(|o| o.revision_id).collect();
    assert!(
        ids.windows(2).all(|w| w[1] == w[0] + 1),
        "ids follow input order"
    );

    // Correct every other record, dropping category b; the rest is unchanged.
    let fixed: Vec<_> = records
        .iter()
        .enumerate()
        .map(|(i, r)| {
            if i % 2 == 0 {
                rec_full(
                    r.site().as_str(),
                    r.line().as_str(),
                    None,
                    r.date(),
                    1000,
                    1,
                    &[("a", 1)],
                    None,
                )
            } else {
                r.clone()
            }
        })
        .collect();
    let BatchResult::Written { outcome, .. } =
        db.store.put_batch(&fixed, None, None).await.expect("fix")
    else {
        panic!("written");
    };
    assert_eq!((outcome.corrected, outcome.unchanged), (1350, 1350));
    let stats = db.store.stats().await.expect("stats");
    assert_eq!((stats.records, stats.revisions), (2700, 4050));

    let mut cursor = None;
    let mut seen = 0;
    loop {
        let page = db
            .store
            .list_counts(&Default::default(), cursor.as_deref(), 1000)
            .await
            .expect("page");
        for r in &page.records {
            let want = fixed
                .iter()
                .find(|f| f.key == r.record.key)
                .expect("record listed is one written");
            assert_eq!(&r.record, want);
        }
        seen += page.records.len();
        match page.next_cursor {
            Some(c) => cursor = Some(c),
            None => break,
        }
    }
    assert_eq!(seen, 2700);
}

#[tokio::test]
async fn an_empty_batch_is_accepted_and_changes_nothing() {
    let db = fresh().await;
    let version = db.store.data_version().await.expect("version");
    let result = db.store.put_batch(&[], None, None).await.expect("empty");
    assert!(
        matches!(result, BatchResult::Written { ref outcome, answer: None } if outcome.outcomes.is_empty())
    );
    assert_eq!(db.store.data_version().await.expect("version"), version);
}

#[tokio::test(flavor = "multi_thread", worker_threads = 4)]
async fn concurrent_writers_and_readers_all_succeed_in_some_order() {
    let db = fresh().await;
    registry(db.store.as_ref(), 4, 1).await;
    let mut tasks = Vec::new();
    for s in 1..=4 {
        let store = db.store.clone();
        tasks.push(tokio::spawn(async move {
            for day in 0..25i64 {
                let batch: Vec<_> = (0..20i64)
                    .map(|k| {
                        rec(
                            &format!("S{s}"),
                            "L1",
                            D1 + Duration::days(day * 20 + k),
                            100,
                            1,
                        )
                    })
                    .collect();
                store
                    .put_batch(&batch, None, None)
                    .await
                    .expect("concurrent batch");
            }
        }));
        let store = db.store.clone();
        tasks.push(tokio::spawn(async move {
            for _ in 0..25 {
                store.stats().await.expect("concurrent read");
            }
        }));
    }
    for t in tasks {
        t.await.expect("task");
    }
    let stats = db.store.stats().await.expect("stats");
    assert_eq!((stats.records, stats.revisions), (2000, 2000));
    let history = db
        .store
        .record_history(&key("S3", "L1", None, D1))
        .await
        .expect("history");
    assert_eq!(history.len(), 1);
}
