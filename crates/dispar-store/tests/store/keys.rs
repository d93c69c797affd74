use dispar_store::{KeyRole, StoreError};

use crate::helpers::{fresh, site_code};

#[tokio::test]
async fn keys_are_created_found_listed_and_revoked() {
    let db = fresh().await;
    let s = &db.store;
    let ingest = s
        .create_key(
            KeyRole::Ingest,
            &[site_code("S2"), site_code("S1"), site_code("S2")],
            Some("plants"),
            &[1, 2, 3],
        )
        .await
        .expect("ingest key");
    let admin = s
        .create_key(KeyRole::Admin, &[], None, &[9; 32])
        .await
        .expect("admin key");
    assert!(admin > ingest);

    let k = s.find_key(ingest).await.expect("find").expect("exists");
    assert_eq!(k.role, KeyRole::Ingest);
    assert_eq!(
        k.sites,
        vec![site_code("S1"), site_code("S2")],
        "sites deduplicated and ordered"
    );
    assert_eq!(k.label.as_deref(), Some("plants"));
    assert_eq!(k.secret_hash, vec![1, 2, 3]);
    assert!(!k.is_revoked());
    assert!(
        !format!("{k:?}").contains("[1, 2, 3]"),
        "Debug must not show the hash"
    );
    assert_eq!(s.find_key(999).await.expect("find"), None);

    s.revoke_key(ingest).await.expect("revoke");
    let revoked_at = s
        .find_key(ingest)
        .await
        .expect("find")
        .expect("exists")
        .revoked_at
        .expect("revoked");
    s.revoke_key(ingest).await.expect("revoking again is fine");
    assert_eq!(
        s.find_key(ingest)
            .await
            .expect("find")
            .expect("exists")
            .revoked_at,
        Some(revoked_at),
        "the first revocation time is kept"
    );
    assert!(matches!(
        s.revoke_key(999).await,
        Err(StoreError::NotFound {
            what: "api key",
            ..
        })
    ));

    let all = s.list_keys().await.expect("list");
    let summary: Vec<(i64, KeyRole, bool, usize)> = all
        .iter()
        .map(|k| (k.id, k.role, k.is_revoked(), k.sites.len()))
        .collect();
    assert_eq!(
        summary,
        vec![
            (ingest, KeyRole::Ingest, true, 2),
            (admin, KeyRole::Admin, false, 0)
        ]
    );
}

#[test]
fn roles_read_and_print_as_their_names() {
    for role in [KeyRole::Ingest, KeyRole::Read, KeyRole::Admin] {
        assert_eq!(role.as_str().parse::<KeyRole>(), Ok(role));
    }
    assert!("root".parse::<KeyRole>().is_err());
}
