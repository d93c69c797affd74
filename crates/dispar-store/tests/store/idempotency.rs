use dispar_store::{BatchOutcome, BatchResult, Idempotency, StoreError, StoredAnswer};

use crate::helpers::{D1, D2, fresh, rec, registry};

fn render(o: &BatchOutcome) -> StoredAnswer {
    StoredAnswer {
        status: 201,
        body: format!("created={}", o.created).into_bytes(),
    }
}

#[tokio::test]
async fn the_same_key_and_body_replay_the_stored_answer_and_write_nothing() {
    let db = fresh().await;
    registry(db.store.as_ref(), 1, 1).await;
    let key_id = db
        .store
        .create_key(dispar_store::KeyRole::Ingest, &[], None, b"h")
        .await
        .expect("key");
    let batch = vec![rec("S1", "L1", D1, 10, 1)];
    let idem = || Idempotency {
        key: "k-1",
        body_sha256: [1; 32],
        render: &render,
    };
    assert_eq!(
        db.store
            .find_idempotent(Some(key_id), "k-1", &[1; 32])
            .await
            .expect("lookup"),
        None
    );
    let BatchResult::Written { answer, .. } = db
        .store
        .put_batch(&batch, Some(key_id), Some(idem()))
        .await
        .expect("first")
    else {
        panic!("written");
    };
    let answer = answer.expect("an answer is stored");
    assert_eq!(
        answer,
        StoredAnswer {
            status: 201,
            body: b"created=1".to_vec()
        }
    );

    // A later change to the same record, then the replay: the stored answer, not a new write.
    db.store
        .put_record(&rec("S1", "L1", D1, 10, 2), None)
        .await
        .expect("change");
    let stats = db.store.stats().await.expect("stats");
    let replay = db
        .store
        .put_batch(&batch, Some(key_id), Some(idem()))
        .await
        .expect("replay");
    assert_eq!(replay, BatchResult::Replayed(answer.clone()));
    assert_eq!(db.store.stats().await.expect("stats"), stats);
    assert_eq!(
        db.store
            .find_idempotent(Some(key_id), "k-1", &[1; 32])
            .await
            .expect("lookup"),
        Some(answer)
    );
}

#[tokio::test]
async fn the_same_key_with_another_body_is_refused() {
    let db = fresh().await;
    registry(db.store.as_ref(), 1, 1).await;
    let idem = |hash: u8| Idempotency {
        key: "k-1",
        body_sha256: [hash; 32],
        render: &render,
    };
    db.store
        .put_batch(&[rec("S1", "L1", D1, 10, 1)], Some(3), Some(idem(1)))
        .await
        .expect("first");
    let stats = db.store.stats().await.expect("stats");
    let other = db
        .store
        .put_batch(&[rec("S1", "L1", D2, 10, 1)], Some(3), Some(idem(2)))
        .await;
    assert!(
        matches!(other, Err(StoreError::IdempotencyMismatch)),
        "{other:?}"
    );
    assert!(matches!(
        db.store.find_idempotent(Some(3), "k-1", &[2; 32]).await,
        Err(StoreError::IdempotencyMismatch)
    ));
    assert_eq!(db.store.stats().await.expect("stats"), stats);

    // Keys are scoped to the API key: another key may use the same text.
    let BatchResult::Written { .. } = db
        .store
        .put_batch(&[rec("S1", "L1", D2, 10, 1)], Some(4), Some(idem(2)))
        .await
        .expect("other api key")
    else {
        panic!("written");
    };
}

#[tokio::test]
async fn a_refused_batch_stores_no_answer_so_a_fixed_retry_goes_through() {
    let db = fresh().await;
    registry(db.store.as_ref(), 1, 1).await;
    let idem = |hash: u8| Idempotency {
        key: "k-1",
        body_sha256: [hash; 32],
        render: &render,
    };
    assert!(
        db.store
            .put_batch(&[rec("S9", "L1", D1, 10, 1)], Some(1), Some(idem(1)))
            .await
            .is_err()
    );
    assert_eq!(
        db.store
            .find_idempotent(Some(1), "k-1", &[1; 32])
            .await
            .expect("lookup"),
        None
    );
    assert!(matches!(
        db.store
            .put_batch(&[rec("S1", "L1", D1, 10, 1)], Some(1), Some(idem(2)))
            .await,
        Ok(BatchResult::Written { .. })
    ));
    let purged = db
        .store
        .purge_idempotency(time::OffsetDateTime::now_utc() + time::Duration::seconds(1))
        .await
        .expect("purge");
    assert_eq!(purged, 1);
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn two_racing_posts_with_one_key_give_one_write_and_one_replay() {
    let db = fresh().await;
    registry(db.store.as_ref(), 1, 1).await;
    let batch = vec![rec("S1", "L1", D1, 10, 1), rec("S1", "L1", D2, 10, 1)];
    let mut tasks = Vec::new();
    for _ in 0..2 {
        let store = db.store.clone();
        let batch = batch.clone();
        tasks.push(tokio::spawn(async move {
            let idem = Idempotency {
                key: "race",
                body_sha256: [5; 32],
                render: &render,
            };
            store
                .put_batch(&batch, Some(1), Some(idem))
                .await
                .expect("post")
        }));
    }
    let mut written = 0;
    let mut replayed = 0;
    for t in tasks {
        match t.await.expect("task") {
            BatchResult::Written { .. } => written += 1,
            BatchResult::Replayed(a) => {
                assert_eq!(a.body, b"created=2");
                replayed += 1;
            }
        }
    }
    assert_eq!((written, replayed), (1, 1));
    assert_eq!(db.store.stats().await.expect("stats").revisions, 2);
}
