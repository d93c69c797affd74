use dispar_store::{KeyRole, NewPageSession};
use time::{Duration, OffsetDateTime};

use crate::helpers::fresh;

fn session(n: u8, key_id: i64, created_at: OffsetDateTime) -> NewPageSession {
    NewPageSession {
        id_hash: [n; 32],
        key_id,
        created_at,
        expires_at: created_at + Duration::hours(12),
    }
}

#[tokio::test]
async fn page_sessions_are_found_until_they_expire_and_end_when_deleted() {
    let db = fresh().await;
    let s = &db.store;
    let key = s
        .create_key(KeyRole::Read, &[], None, &[1; 32])
        .await
        .expect("key");
    let t0 = OffsetDateTime::now_utc();
    s.create_page_session(&session(1, key, t0), 50)
        .await
        .expect("create");
    let found = s
        .find_page_session(&[1; 32], t0 + Duration::hours(1))
        .await
        .expect("find")
        .expect("live");
    assert_eq!(found.key_id, key);
    assert_eq!(found.expires_at - found.created_at, Duration::hours(12));
    assert_eq!(
        s.find_page_session(&[1; 32], t0 + Duration::hours(12))
            .await
            .expect("find"),
        None,
        "not live at its expiry"
    );
    assert_eq!(
        s.find_page_session(&[2; 32], t0).await.expect("find"),
        None,
        "unknown id"
    );
    assert!(s.delete_page_session(&[1; 32]).await.expect("delete"));
    assert!(!s.delete_page_session(&[1; 32]).await.expect("delete again"));
    assert_eq!(s.find_page_session(&[1; 32], t0).await.expect("find"), None);
}

#[tokio::test]
async fn signing_in_beyond_the_limit_ends_only_that_keys_oldest_sessions() {
    let db = fresh().await;
    let s = &db.store;
    let one = s
        .create_key(KeyRole::Read, &[], None, &[1; 32])
        .await
        .expect("key");
    let two = s
        .create_key(KeyRole::Admin, &[], None, &[2; 32])
        .await
        .expect("key");
    let t0 = OffsetDateTime::now_utc();
    s.create_page_session(&session(100, two, t0), 3)
        .await
        .expect("other key");
    for n in 1..=5u8 {
        s.create_page_session(&session(n, one, t0 + Duration::seconds(i64::from(n))), 3)
            .await
            .expect("create");
    }
    let now = t0 + Duration::minutes(1);
    let mut live = Vec::new();
    for n in 1..=5u8 {
        if s.find_page_session(&[n; 32], now)
            .await
            .expect("find")
            .is_some()
        {
            live.push(n);
        }
    }
    assert_eq!(live, vec![3, 4, 5], "the three newest of key {one}");
    assert!(
        s.find_page_session(&[100; 32], now)
            .await
            .expect("find")
            .is_some(),
        "another key's session survives"
    );
}

#[tokio::test]
async fn expired_sessions_are_purged_when_a_session_starts() {
    let db = fresh().await;
    let s = &db.store;
    let key = s
        .create_key(KeyRole::Read, &[], None, &[1; 32])
        .await
        .expect("key");
    let t0 = OffsetDateTime::now_utc() - Duration::days(2);
    s.create_page_session(&session(1, key, t0), 50)
        .await
        .expect("old");
    s.create_page_session(&session(2, key, t0 + Duration::days(2)), 50)
        .await
        .expect("new");
    let rows = db.scalar("SELECT COUNT(*) FROM page_sessions").await;
    assert_eq!(rows, 1, "the expired session was deleted");
}
