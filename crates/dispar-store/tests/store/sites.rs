use dispar_core::site::TimeZoneName;
use dispar_store::{StoreError, Upserted};

use crate::helpers::{fresh, line, site, site_code};

#[tokio::test]
async fn sites_and_lines_are_created_updated_and_listed_in_code_order() {
    let db = fresh().await;
    let s = &db.store;
    let mut zoned = site("S2", "Porto");
    zoned.time_zone = Some(TimeZoneName::parse_field("Europe/Lisbon", "time_zone").expect("tz"));
    assert_eq!(s.upsert_site(&zoned).await.expect("S2"), Upserted::Created);
    assert_eq!(
        s.upsert_site(&site("S1", "Brno")).await.expect("S1"),
        Upserted::Created
    );
    assert_eq!(
        s.upsert_line(&line("S1", "L2")).await.expect("L2"),
        Upserted::Created
    );
    assert_eq!(
        s.upsert_line(&line("S1", "L1")).await.expect("L1"),
        Upserted::Created
    );
    assert_eq!(
        s.upsert_line(&line("S1", "L1")).await.expect("L1 again"),
        Upserted::Unchanged
    );
    let mut renamed = line("S1", "L1");
    renamed.name = None;
    assert_eq!(
        s.upsert_line(&renamed).await.expect("L1 renamed"),
        Upserted::Updated
    );

    let sites = s.list_sites().await.expect("list");
    let codes: Vec<&str> = sites.iter().map(|x| x.code.as_str()).collect();
    assert_eq!(codes, ["S1", "S2"]);
    assert_eq!(sites[1], zoned, "time zone kept");

    let s1 = s.get_site(&site_code("S1")).await.expect("get");
    let lines: Vec<&str> = s1.lines.iter().map(|l| l.code.as_str()).collect();
    assert_eq!(lines, ["L1", "L2"]);
    assert_eq!(s1.lines[0].name, None);
}

#[tokio::test]
async fn an_unknown_site_is_not_found_and_cannot_get_lines() {
    let db = fresh().await;
    match db.store.get_site(&site_code("NOPE")).await {
        Err(StoreError::NotFound { what: "site", key }) => assert_eq!(key, "NOPE"),
        other => panic!("expected NotFound, got {other:?}"),
    }
    match db.store.upsert_line(&line("NOPE", "L1")).await {
        Err(StoreError::UnknownSite { site }) => assert_eq!(site, "NOPE"),
        other => panic!("expected UnknownSite, got {other:?}"),
    }
    assert_eq!(db.store.stats().await.expect("stats").lines, 0);
}
