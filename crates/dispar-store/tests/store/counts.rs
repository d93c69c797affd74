use dispar_store::{RecordProblem, StoreError, WriteStatus};

use crate::helpers::{D1, fresh, key, rec, rec_full, registry, with_revision};

#[tokio::test]
async fn a_record_for_an_unknown_site_or_line_is_refused_naming_it() {
    let db = fresh().await;
    registry(db.store.as_ref(), 1, 1).await;
    let cases = [
        (
            rec("S9", "L1", D1, 10, 1),
            RecordProblem::UnknownSite { site: "S9".into() },
        ),
        (
            rec("S1", "L9", D1, 10, 1),
            RecordProblem::UnknownLine {
                site: "S1".into(),
                line: "L9".into(),
            },
        ),
    ];
    for (record, want) in cases {
        match db.store.put_record(&record, None).await {
            Err(StoreError::Rejected(errors)) => {
                assert_eq!(errors.len(), 1);
                assert_eq!(errors[0].problem, want);
            }
            other => panic!("expected {want:?}, got {other:?}"),
        }
    }
    assert_eq!(db.store.stats().await.expect("stats").revisions, 0);
}

#[tokio::test]
async fn revisions_in_order_are_accepted_and_out_of_order_ones_refused() {
    let db = fresh().await;
    registry(db.store.as_ref(), 1, 1).await;
    let s = &db.store;
    let put = |r: u64, defective: u64| with_revision(rec("S1", "L1", D1, 100, defective), r);

    assert_eq!(
        s.put_record(&put(1, 1), None).await.expect("r1").status,
        WriteStatus::Created
    );
    assert_eq!(
        s.put_record(&put(3, 3), None).await.expect("r3").status,
        WriteStatus::Corrected
    );
    // r2 arrives late with other counts: refused, naming r3.
    match s.put_record(&put(2, 2), None).await {
        Err(StoreError::Rejected(e)) => {
            assert!(
                matches!(
                    e[0].problem,
                    RecordProblem::Conflict {
                        current_revision: 3,
                        ..
                    }
                ),
                "{e:?}"
            );
        }
        other => panic!("expected conflict, got {other:?}"),
    }
    // The same revision with other counts is refused too.
    assert!(
        s.put_record(&put(3, 4), None).await.is_err(),
        "equal revision, other body"
    );
    // An older revision with the current counts is harmless.
    let same = s
        .put_record(&put(2, 3), None)
        .await
        .expect("old revision, same counts");
    assert_eq!(same.status, WriteStatus::Unchanged);
    assert_eq!(same.plant_revision, Some(3));
    // A newer revision with the same counts records the revision.
    assert_eq!(
        s.put_record(&put(4, 3), None).await.expect("r4").status,
        WriteStatus::Corrected
    );
    let history = s
        .record_history(&key("S1", "L1", None, D1))
        .await
        .expect("history");
    let revisions: Vec<Option<u64>> = history.iter().map(|h| h.record.revision).collect();
    assert_eq!(revisions, [Some(1), Some(3), Some(4)]);
}

#[tokio::test]
async fn an_identical_body_is_unchanged_and_writes_nothing() {
    let db = fresh().await;
    registry(db.store.as_ref(), 1, 1).await;
    let r = rec_full(
        "S1",
        "L1",
        Some("P1"),
        D1,
        100,
        7,
        &[("scratch", 5), ("dent", 3)],
        None,
    );
    let first = db.store.put_record(&r, None).await.expect("first");
    let version = db.store.data_version().await.expect("version");
    let again = db.store.put_record(&r, None).await.expect("again");
    assert_eq!(again.status, WriteStatus::Unchanged);
    assert_eq!(again.revision_id, first.revision_id);
    assert_eq!(db.store.stats().await.expect("stats").revisions, 1);
    assert_eq!(
        db.store.data_version().await.expect("version"),
        version,
        "nothing written"
    );

    // Other defect counts are a correction, even with equal totals.
    let other = rec_full(
        "S1",
        "L1",
        Some("P1"),
        D1,
        100,
        7,
        &[("scratch", 4), ("dent", 4)],
        None,
    );
    assert_eq!(
        db.store.put_record(&other, None).await.expect("fix").status,
        WriteStatus::Corrected
    );
    let current = db
        .store
        .get_record(&key("S1", "L1", Some("P1"), D1))
        .await
        .expect("get")
        .expect("exists");
    assert_eq!(current.record, other);
}

#[tokio::test]
async fn without_a_plant_revision_the_last_writer_wins() {
    let db = fresh().await;
    registry(db.store.as_ref(), 1, 1).await;
    db.store
        .put_record(&with_revision(rec("S1", "L1", D1, 100, 5), 7), None)
        .await
        .expect("with revision");
    let w = db
        .store
        .put_record(&rec("S1", "L1", D1, 100, 6), None)
        .await
        .expect("without");
    assert_eq!((w.status, w.plant_revision), (WriteStatus::Corrected, None));
    let same = db
        .store
        .put_record(&rec("S1", "L1", D1, 100, 6), None)
        .await
        .expect("same");
    assert_eq!(same.status, WriteStatus::Unchanged);
}

#[tokio::test]
async fn history_reads_back_every_revision_with_its_bookkeeping() {
    let db = fresh().await;
    registry(db.store.as_ref(), 1, 1).await;
    let k = db
        .store
        .create_key(dispar_store::KeyRole::Ingest, &[], None, b"h")
        .await
        .expect("key");
    let v1 = rec_full("S1", "L1", None, D1, 100, 5, &[("scratch", 2)], Some(1));
    let v2 = rec_full("S1", "L1", None, D1, 100, 6, &[], Some(2));
    db.store.put_record(&v1, Some(k)).await.expect("v1");
    db.store.put_record(&v2, None).await.expect("v2");
    let h = db
        .store
        .record_history(&key("S1", "L1", None, D1))
        .await
        .expect("history");
    assert_eq!(h.len(), 2);
    assert_eq!(h[0].record, v1);
    assert_eq!(h[1].record, v2);
    assert_eq!((h[0].api_key_id, h[1].api_key_id), (Some(k), None));
    assert!(h[0].revision_id < h[1].revision_id && h[0].recorded_at < h[1].recorded_at);
    assert!(
        db.store
            .record_history(&key("S1", "L1", None, crate::helpers::D2))
            .await
            .expect("empty")
            .is_empty()
    );
}

#[tokio::test]
async fn pagination_walks_every_record_once_in_key_order() {
    let db = fresh().await;
    registry(db.store.as_ref(), 2, 2).await;
    let mut all = Vec::new();
    for s in ["S1", "S2"] {
        for l in ["L1", "L2"] {
            for day in 0..5u8 {
                let d = D1.replace_day(D1.day() + day).expect("day");
                all.push(rec(s, l, d, 100, u64::from(day)));
                all.push(rec_full(s, l, Some("P1"), d, 50, 1, &[("x", 1)], None));
            }
        }
    }
    db.store.put_batch(&all, None, None).await.expect("batch");

    let filter = dispar_store::CountFilter::default();
    let mut seen = Vec::new();
    let mut cursor: Option<String> = None;
    loop {
        let page = db
            .store
            .list_counts(&filter, cursor.as_deref(), 7)
            .await
            .expect("page");
        assert!(page.records.len() <= 7);
        seen.extend(page.records.into_iter().map(|r| r.record));
        match page.next_cursor {
            Some(c) => cursor = Some(c),
            None => break,
        }
    }
    let mut want = all.clone();
    want.sort_by(|a, b| {
        (
            a.date(),
            a.site(),
            a.line(),
            a.product().map(|p| p.as_str()),
        )
            .cmp(&(
                b.date(),
                b.site(),
                b.line(),
                b.product().map(|p| p.as_str()),
            ))
    });
    assert_eq!(seen, want);

    // Filters.
    let only = dispar_store::CountFilter {
        site: Some(crate::helpers::site_code("S2")),
        line: Some(crate::helpers::line_code("L1")),
        from: Some(crate::helpers::D2),
        to: Some(crate::helpers::D3),
        product: None,
    };
    let page = db
        .store
        .list_counts(&only, None, 1000)
        .await
        .expect("filtered");
    assert_eq!(page.records.len(), 4);
    assert!(
        page.records
            .iter()
            .all(|r| r.record.site().as_str() == "S2" && r.record.line().as_str() == "L1")
    );
    // Paging under equality filters.
    for (site, line, want) in [("S2", None, 20), ("S1", Some("L2"), 10)] {
        let f = dispar_store::CountFilter {
            site: Some(crate::helpers::site_code(site)),
            line: line.map(crate::helpers::line_code),
            ..Default::default()
        };
        let mut got = Vec::new();
        let mut cursor: Option<String> = None;
        loop {
            let page = db
                .store
                .list_counts(&f, cursor.as_deref(), 3)
                .await
                .expect("page");
            got.extend(page.records.into_iter().map(|r| r.record));
            match page.next_cursor {
                Some(c) => cursor = Some(c),
                None => break,
            }
        }
        let expected: Vec<_> = seen
            .iter()
            .filter(|r| r.site().as_str() == site && line.is_none_or(|l| r.line().as_str() == l))
            .cloned()
            .collect();
        assert_eq!(got.len(), want, "{site} {line:?}");
        assert_eq!(got, expected, "{site} {line:?}");
    }
    assert!(matches!(
        db.store
            .list_counts(&filter, Some("not-a-cursor"), 10)
            .await,
        Err(StoreError::BadCursor)
    ));
}
