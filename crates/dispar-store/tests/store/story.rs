//! The backend-agnostic story: one plant's life through the store API. Any backend
//! must pass it unchanged.

use std::sync::Arc;

use dispar_store::{
    AggregateQuery, BatchResult, CountFilter, Idempotency, KeyRole, Level, RecordProblem, Store,
    StoreError, StoredAnswer, Upserted, WriteStatus,
};

use crate::helpers::{D1, D2, D3, fresh, key, line, rec, rec_full, site, site_code, with_revision};

/// Runs the story against any store.
pub async fn story(store: Arc<dyn Store>) {
    store.ping().await.expect("ping");
    let v0 = store.data_version().await.expect("version");

    // Registry.
    assert_eq!(
        store.upsert_site(&site("S1", "Brno")).await.expect("site"),
        Upserted::Created
    );
    assert_eq!(
        store.upsert_site(&site("S1", "Brno")).await.expect("site"),
        Upserted::Unchanged
    );
    assert_eq!(
        store
            .upsert_site(&site("S1", "Brno 1"))
            .await
            .expect("site"),
        Upserted::Updated
    );
    store.upsert_site(&site("S2", "Porto")).await.expect("site");
    for (s, l) in [("S1", "L1"), ("S1", "L2"), ("S2", "L1")] {
        assert_eq!(
            store.upsert_line(&line(s, l)).await.expect("line"),
            Upserted::Created
        );
    }
    let s1 = store.get_site(&site_code("S1")).await.expect("get site");
    assert_eq!(s1.site.name.as_str(), "Brno 1");
    assert_eq!(s1.lines.len(), 2);
    let v1 = store.data_version().await.expect("version");
    assert!(v1 > v0, "registry changes move the data version");

    // A plant key.
    let key_id = store
        .create_key(
            KeyRole::Ingest,
            &[site_code("S1")],
            Some("plant S1"),
            b"hash-1",
        )
        .await
        .expect("create key");

    // One record, then its correction, then a replay of the correction.
    let first = store
        .put_record(
            &with_revision(rec("S1", "L1", D1, 1000, 10), 1),
            Some(key_id),
        )
        .await
        .expect("first write");
    assert_eq!(first.status, WriteStatus::Created);
    let fix = store
        .put_record(
            &with_revision(rec("S1", "L1", D1, 1000, 12), 2),
            Some(key_id),
        )
        .await
        .expect("correction");
    assert_eq!(fix.status, WriteStatus::Corrected);
    assert!(fix.revision_id > first.revision_id);
    let again = store
        .put_record(
            &with_revision(rec("S1", "L1", D1, 1000, 12), 2),
            Some(key_id),
        )
        .await
        .expect("replay");
    assert_eq!(again.status, WriteStatus::Unchanged);
    assert_eq!(again.revision_id, fix.revision_id);

    // A late, older revision is refused naming the current one.
    let late = store
        .put_record(
            &with_revision(rec("S1", "L1", D1, 1000, 10), 1),
            Some(key_id),
        )
        .await;
    match late {
        Err(StoreError::Rejected(errors)) => {
            assert_eq!(errors.len(), 1);
            assert_eq!(errors[0].index, 0);
            assert!(
                matches!(errors[0].problem, RecordProblem::Conflict { current_revision: 2, revision_id } if revision_id == fix.revision_id),
                "{:?}",
                errors[0]
            );
        }
        other => panic!("expected a conflict, got {other:?}"),
    }

    // A batch with an idempotency key, replayed.
    let batch = vec![
        rec("S1", "L2", D1, 500, 5),
        rec_full(
            "S2",
            "L1",
            Some("P1"),
            D1,
            800,
            40,
            &[("scratch", 30), ("dent", 15)],
            None,
        ),
        rec("S1", "L1", D2, 900, 9),
    ];
    let render = |o: &dispar_store::BatchOutcome| StoredAnswer {
        status: 200,
        body: format!("{{\"created\":{}}}", o.created).into_bytes(),
    };
    let idem = || Idempotency {
        key: "batch-1",
        body_sha256: [7; 32],
        render: &render,
    };
    let written = store
        .put_batch(&batch, Some(key_id), Some(idem()))
        .await
        .expect("batch");
    let BatchResult::Written { outcome, answer } = written else {
        panic!("first post must write");
    };
    assert_eq!(
        (outcome.created, outcome.corrected, outcome.unchanged),
        (3, 0, 0)
    );
    assert_eq!(
        answer.as_ref().map(|a| a.body.as_slice()),
        Some(&b"{\"created\":3}"[..])
    );
    let replay = store
        .put_batch(&batch, Some(key_id), Some(idem()))
        .await
        .expect("replay");
    assert_eq!(
        replay,
        BatchResult::Replayed(answer.clone().expect("answer"))
    );

    // History and listing.
    let history = store
        .record_history(&key("S1", "L1", None, D1))
        .await
        .expect("history");
    assert_eq!(history.len(), 2);
    assert_eq!(history[0].record.defective(), 10);
    assert_eq!(history[1].record.defective(), 12);
    assert_eq!(history[1].record.revision, Some(2));
    assert_eq!(history[1].api_key_id, Some(key_id));
    assert!(history[0].recorded_at < history[1].recorded_at);
    let page = store
        .list_counts(&CountFilter::default(), None, 3)
        .await
        .expect("page 1");
    assert_eq!(page.records.len(), 3);
    let cursor = page.next_cursor.expect("a second page");
    let page2 = store
        .list_counts(&CountFilter::default(), Some(&cursor), 3)
        .await
        .expect("page 2");
    assert_eq!(page2.records.len(), 1);
    assert_eq!(page2.next_cursor, None);

    // Reports: now, and as of before the correction.
    let q = |level, as_of| AggregateQuery {
        from: D1,
        to: D3,
        level,
        site: None,
        product: None,
        as_of,
        by_product: false,
    };
    let now = store
        .aggregate(&q(Level::Site, None))
        .await
        .expect("aggregate");
    let totals: Vec<(&str, u64, u64)> = now
        .groups
        .iter()
        .map(|g| (g.site.as_str(), g.inspected, g.defective))
        .collect();
    assert_eq!(totals, vec![("S1", 2400, 26), ("S2", 800, 40)]);
    assert_eq!(now.groups[1].defects.len(), 2);
    let before = store
        .aggregate(&q(Level::Site, Some(history[0].recorded_at)))
        .await
        .expect("as of");
    assert_eq!(
        before.groups[0].defective, 10,
        "as_of before the correction sees the old value"
    );
    assert_eq!(before.groups[1].inspected, 0, "the batch came later");

    let v2 = store.data_version().await.expect("version");
    assert!(v2 > v1);
    assert_eq!(now.data_version, v2);

    // Keys.
    let found = store.find_key(key_id).await.expect("find").expect("exists");
    assert_eq!(found.role, KeyRole::Ingest);
    assert_eq!(found.sites, vec![site_code("S1")]);
    store.revoke_key(key_id).await.expect("revoke");
    assert!(
        store
            .find_key(key_id)
            .await
            .expect("find")
            .expect("exists")
            .is_revoked()
    );

    let stats = store.stats().await.expect("stats");
    assert_eq!(
        (
            stats.sites,
            stats.lines,
            stats.revisions,
            stats.records,
            stats.keys
        ),
        (2, 3, 5, 4, 1)
    );
    store.close().await;
}

#[tokio::test]
async fn the_story_holds() {
    let db = fresh().await;
    story(db.store.clone()).await;
}
