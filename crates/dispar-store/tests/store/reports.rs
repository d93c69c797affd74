use dispar_store::{AggregateQuery, GroupTotals, Level, StoreError};
use time::Date;

use crate::helpers::{D1, D2, D3, fresh, key, rec, rec_full, registry, site_code};

fn query(level: Level, from: Date, to: Date) -> AggregateQuery {
    AggregateQuery {
        from,
        to,
        level,
        site: None,
        product: None,
        as_of: None,
        by_product: false,
    }
}

fn summary(groups: &[GroupTotals]) -> Vec<(String, Option<String>, u64, u64)> {
    groups
        .iter()
        .map(|g| {
            (
                g.site.to_string(),
                g.line.as_ref().map(ToString::to_string),
                g.inspected,
                g.defective,
            )
        })
        .collect()
}

fn s(
    site: &str,
    line: Option<&str>,
    inspected: u64,
    defective: u64,
) -> (String, Option<String>, u64, u64) {
    (
        site.to_owned(),
        line.map(str::to_owned),
        inspected,
        defective,
    )
}

/// S1 {L1, L2}, S2 {L1, L2}, S3 {L1, L2}; S3 has no data.
async fn seeded() -> crate::helpers::TestDb {
    let db = fresh().await;
    registry(db.store.as_ref(), 3, 2).await;
    let batch = vec![
        rec_full(
            "S1",
            "L1",
            None,
            D1,
            100,
            10,
            &[("scratch", 6), ("dent", 5)],
            None,
        ),
        rec_full("S1", "L1", Some("P1"), D1, 50, 1, &[("scratch", 1)], None),
        rec("S1", "L2", D2, 200, 4),
        rec("S2", "L1", D1, 300, 3),
        rec_full("S2", "L2", Some("P1"), D3, 400, 8, &[("dent", 8)], None),
        // outside the range below
        rec("S2", "L2", D3 + time::Duration::days(1), 999, 99),
    ];
    db.store.put_batch(&batch, None, None).await.expect("seed");
    db
}

#[tokio::test]
async fn sums_by_site_list_every_registered_site_including_empty_ones() {
    let db = seeded().await;
    let a = db
        .store
        .aggregate(&query(Level::Site, D1, D3))
        .await
        .expect("aggregate");
    assert_eq!(
        summary(&a.groups),
        [
            s("S1", None, 350, 15),
            s("S2", None, 700, 11),
            s("S3", None, 0, 0)
        ]
    );
    let cats: Vec<(&str, u64)> = a.groups[0]
        .defects
        .iter()
        .map(|(c, n)| (c.as_str(), *n))
        .collect();
    assert_eq!(cats, [("dent", 5), ("scratch", 7)]);
    assert!(a.groups[2].defects.is_empty());
    assert_eq!(
        a.data_version,
        db.store.data_version().await.expect("version")
    );
}

#[tokio::test]
async fn sums_by_line_of_one_site_and_by_all_lines() {
    let db = seeded().await;
    let a = db
        .store
        .aggregate(&query(
            Level::Line {
                site: site_code("S1"),
            },
            D1,
            D3,
        ))
        .await
        .expect("lines of S1");
    assert_eq!(
        summary(&a.groups),
        [s("S1", Some("L1"), 150, 11), s("S1", Some("L2"), 200, 4)]
    );

    let a = db
        .store
        .aggregate(&query(Level::AllLines, D1, D3))
        .await
        .expect("all lines");
    assert_eq!(
        summary(&a.groups),
        [
            s("S1", Some("L1"), 150, 11),
            s("S1", Some("L2"), 200, 4),
            s("S2", Some("L1"), 300, 3),
            s("S2", Some("L2"), 400, 8),
            s("S3", Some("L1"), 0, 0),
            s("S3", Some("L2"), 0, 0),
        ]
    );
    let mut q = query(Level::AllLines, D1, D1);
    q.site = Some(site_code("S2"));
    let a = db.store.aggregate(&q).await.expect("all lines of S2 on D1");
    assert_eq!(
        summary(&a.groups),
        [s("S2", Some("L1"), 300, 3), s("S2", Some("L2"), 0, 0)]
    );
}

#[tokio::test]
async fn the_product_filter_keeps_only_that_product() {
    let db = seeded().await;
    let mut q = query(Level::Site, D1, D3);
    q.product = Some(dispar_core::code::ProductCode::parse("P1").expect("product"));
    let a = db.store.aggregate(&q).await.expect("aggregate");
    assert_eq!(
        summary(&a.groups),
        [
            s("S1", None, 50, 1),
            s("S2", None, 400, 8),
            s("S3", None, 0, 0)
        ]
    );
    assert_eq!(a.groups[1].defects.len(), 1);
}

/// (site, line, product, inspected, defective): one cell of a group's split by product.
type SplitCell = (String, Option<String>, Option<String>, u64, u64);

fn split(groups: &[GroupTotals]) -> Vec<SplitCell> {
    groups
        .iter()
        .flat_map(|g| {
            g.products.iter().map(|(p, (i, d))| {
                (
                    g.site.to_string(),
                    g.line.as_ref().map(ToString::to_string),
                    p.as_ref().map(ToString::to_string),
                    *i,
                    *d,
                )
            })
        })
        .collect()
}

#[tokio::test]
async fn the_split_by_product_adds_up_to_each_group_from_days_months_and_history() {
    let db = seeded().await;
    let p1 = Some("P1".to_owned());
    let s1 = || "S1".to_owned();
    let s2 = || "S2".to_owned();
    let days = AggregateQuery {
        by_product: true,
        ..query(Level::Site, D1, D3)
    };
    let month = AggregateQuery {
        from: time::macros::date!(2026 - 03 - 01),
        to: time::macros::date!(2026 - 03 - 31),
        ..days.clone()
    };
    let history = AggregateQuery {
        as_of: Some(time::OffsetDateTime::now_utc()),
        ..days.clone()
    };
    let want_days = vec![
        (s1(), None, None, 300, 14),
        (s1(), None, p1.clone(), 50, 1),
        (s2(), None, None, 300, 3),
        (s2(), None, p1.clone(), 400, 8),
    ];
    let mut want_month = want_days.clone();
    want_month[2] = (s2(), None, None, 1299, 102);
    for (q, want) in [
        (&days, &want_days),
        (&month, &want_month),
        (&history, &want_days),
    ] {
        let a = db.store.aggregate(q).await.expect("aggregate");
        assert_eq!(split(&a.groups), *want, "{q:?}");
        for g in &a.groups {
            let (i, d) = g
                .products
                .values()
                .fold((0, 0), |(i, d), (a, b)| (i + a, d + b));
            assert_eq!((i, d), (g.inspected, g.defective), "{q:?}: {}", g.site);
        }
    }
    // At the line level too; without by_product the split stays empty.
    let lines = AggregateQuery {
        by_product: true,
        ..query(Level::AllLines, D1, D3)
    };
    let a = db.store.aggregate(&lines).await.expect("aggregate");
    assert!(split(&a.groups).contains(&(s1(), Some("L1".to_owned()), p1, 50, 1)));
    let plain = db
        .store
        .aggregate(&query(Level::Site, D1, D3))
        .await
        .expect("aggregate");
    assert!(plain.groups.iter().all(|g| g.products.is_empty()));
}

#[tokio::test]
async fn an_unknown_site_in_the_query_is_refused() {
    let db = seeded().await;
    let r = db
        .store
        .aggregate(&query(
            Level::Line {
                site: site_code("S9"),
            },
            D1,
            D3,
        ))
        .await;
    assert!(
        matches!(r, Err(StoreError::UnknownSite { ref site }) if site == "S9"),
        "{r:?}"
    );
    let mut q = query(Level::Site, D1, D3);
    q.site = Some(site_code("S9"));
    assert!(matches!(
        db.store.aggregate(&q).await,
        Err(StoreError::UnknownSite { .. })
    ));
}

#[tokio::test]
async fn as_of_before_a_correction_gives_the_old_sums() {
    let db = seeded().await;
    let before = db
        .store
        .aggregate(&query(Level::AllLines, D1, D3))
        .await
        .expect("before");
    let h = db
        .store
        .record_history(&key("S1", "L1", None, D1))
        .await
        .expect("history");
    let published_at = h[0].recorded_at;

    // The correction: fewer defects and another category mix; and a new record.
    db.store
        .put_record(
            &rec_full("S1", "L1", None, D1, 100, 4, &[("scratch", 4)], None),
            None,
        )
        .await
        .expect("correction");
    db.store
        .put_record(&rec("S3", "L1", D2, 80, 8), None)
        .await
        .expect("new");
    let after = db
        .store
        .aggregate(&query(Level::AllLines, D1, D3))
        .await
        .expect("after");
    assert_eq!(after.groups[0].defective, 5);
    assert!(
        after.data_version > before.data_version,
        "writes move the data version"
    );

    let mut q = query(Level::AllLines, D1, D3);
    q.as_of = Some(published_at);
    let then = db.store.aggregate(&q).await.expect("as of");
    assert_eq!(summary(&then.groups), summary(&before.groups));
    assert_eq!(then.groups[0].defects, before.groups[0].defects);

    // At every level, as_of now equals the current data.
    for level in [
        Level::Site,
        Level::AllLines,
        Level::Line {
            site: site_code("S2"),
        },
    ] {
        let mut q = query(level, D1, D3);
        let current = db.store.aggregate(&q).await.expect("current");
        q.as_of = Some(time::OffsetDateTime::now_utc());
        let as_of_now = db.store.aggregate(&q).await.expect("as of now");
        assert_eq!(current.groups, as_of_now.groups);
    }
    // Before anything was written, every group is empty.
    let mut q = query(Level::Site, D1, D3);
    q.as_of = Some(published_at - time::Duration::seconds(1));
    let empty = db.store.aggregate(&q).await.expect("as of the past");
    assert!(
        empty
            .groups
            .iter()
            .all(|g| g.inspected == 0 && g.defects.is_empty())
    );
}

#[tokio::test]
async fn monthly_sums_stay_equal_to_the_daily_data_through_corrections() {
    use time::macros::date;
    let db = fresh().await;
    registry(db.store.as_ref(), 2, 2).await;
    let day = |m: u8, d: u8| {
        Date::from_calendar_date(2026, time::Month::try_from(m).expect("month"), d).expect("date")
    };
    let mut batch = Vec::new();
    for m in 1..=4u8 {
        for d in [1u8, 10, 28] {
            for (site, line) in [("S1", "L1"), ("S1", "L2"), ("S2", "L1")] {
                let n = u64::from(m) * 100 + u64::from(d);
                batch.push(rec_full(
                    site,
                    line,
                    None,
                    day(m, d),
                    n,
                    n / 10,
                    &[("a", n % 7), ("b", 1)],
                    None,
                ));
                batch.push(rec_full(site, line, Some("P1"), day(m, d), n, 2, &[], None));
            }
        }
    }
    db.store.put_batch(&batch, None, None).await.expect("load");
    // Corrections: other counts, a category dropped, a category added, a key twice.
    let fixes = vec![
        rec_full("S1", "L1", None, day(2, 10), 5, 5, &[("c", 9)], None),
        rec_full("S1", "L1", None, day(2, 10), 6, 1, &[("a", 1)], None),
        rec_full(
            "S2",
            "L1",
            Some("P1"),
            day(3, 28),
            1000,
            3,
            &[("b", 4)],
            None,
        ),
        rec("S1", "L2", day(1, 1), 0, 0),
        rec("S2", "L2", day(4, 30), 70, 7),
    ];
    db.store.put_batch(&fixes, None, None).await.expect("fixes");
    db.store
        .put_record(
            &rec_full("S1", "L1", None, day(2, 10), 6, 1, &[("a", 1)], None),
            None,
        )
        .await
        .expect("unchanged");

    let ranges = [
        (date!(2026 - 01 - 01), date!(2026 - 04 - 30)),
        (date!(2026 - 02 - 01), date!(2026 - 02 - 28)),
        (date!(2026 - 01 - 10), date!(2026 - 03 - 28)),
        (date!(2026 - 01 - 02), date!(2026 - 02 - 27)),
    ];
    for (from, to) in ranges {
        for level in [
            Level::Site,
            Level::AllLines,
            Level::Line {
                site: site_code("S1"),
            },
        ] {
            for product in [None, Some("P1")] {
                let mut q = query(level.clone(), from, to);
                q.product =
                    product.map(|p| dispar_core::code::ProductCode::parse(p).expect("product"));
                let current = db.store.aggregate(&q).await.expect("current");
                q.as_of = Some(time::OffsetDateTime::now_utc());
                let history = db.store.aggregate(&q).await.expect("history");
                assert_eq!(
                    current.groups, history.groups,
                    "{from}..{to} {level:?} {product:?}"
                );
            }
        }
    }
    let feb = db
        .store
        .aggregate(&query(
            Level::Site,
            date!(2026 - 02 - 01),
            date!(2026 - 02 - 28),
        ))
        .await
        .expect("february");
    let c: Vec<(&str, u64)> = feb.groups[0]
        .defects
        .iter()
        .map(|(c, n)| (c.as_str(), *n))
        .collect();
    // S1 in February: L1 (1st: a=201%7=5,b=1; 10th: a=1; 28th: a=228%7=4,b=1), L2 (1st, 10th, 28th: a=5,0,4; b=1 each).
    // a: 5 + 1 + 4 + 5 + 0 + 4 = 19; b: five records still carry b = 1.
    assert_eq!(c, [("a", 19), ("b", 5)]);
}

/// Every day of 2026-01..03 for S1, S2 (lines L1, L2); S3 has none. Counts vary by day so
/// a bucket summed over the wrong days shows.
async fn three_months() -> crate::helpers::TestDb {
    let db = fresh().await;
    registry(db.store.as_ref(), 3, 2).await;
    let start = time::macros::date!(2026 - 01 - 01);
    let mut batch = Vec::new();
    for d in 0..90u64 {
        let day = start + time::Duration::days(d as i64);
        for (s, site) in ["S1", "S2"].iter().enumerate() {
            for (l, line) in ["L1", "L2"].iter().enumerate() {
                let inspected = 100 + d * 3 + 17 * s as u64 + 5 * l as u64;
                batch.push(rec(site, line, day, inspected, (d * 7 + s as u64) % 11));
            }
        }
    }
    db.store.put_batch(&batch, None, None).await.expect("seed");
    db
}

/// Bucket i of `aggregate_buckets` equals `aggregate` over bucket i clipped to the query's
/// range (defects aside: the buckets do not read them).
async fn buckets_match_one_aggregate_each(
    db: &crate::helpers::TestDb,
    q: &AggregateQuery,
    buckets: &[(Date, Date)],
) {
    let b = db
        .store
        .aggregate_buckets(q, buckets)
        .await
        .expect("buckets");
    assert_eq!(b.buckets.len(), buckets.len());
    for (got, &(lo, hi)) in b.buckets.iter().zip(buckets) {
        let mut one = q.clone();
        one.from = lo.max(q.from);
        one.to = hi.min(q.to);
        let want = if one.from <= one.to {
            summary(&db.store.aggregate(&one).await.expect("aggregate").groups)
        } else {
            summary(
                &got.iter()
                    .map(|g| GroupTotals {
                        inspected: 0,
                        defective: 0,
                        ..g.clone()
                    })
                    .collect::<Vec<_>>(),
            )
        };
        assert_eq!(summary(got), want, "bucket {lo}..{hi} of {q:?}");
        assert!(got.iter().all(|g| g.defects.is_empty()));
    }
}

#[tokio::test]
async fn buckets_sum_like_one_aggregate_per_bucket_from_days_months_and_history() {
    use time::macros::date;
    let db = three_months().await;
    let days: Vec<(Date, Date)> = (0..10)
        .map(|i| {
            let d = date!(2026 - 02 - 20) + time::Duration::days(i);
            (d, d)
        })
        .collect();
    // ISO weeks 2026-W02..W09, and two overlapping ranges (a day in both counts in both).
    let weeks: Vec<(Date, Date)> = (0..8)
        .map(|i| {
            let monday = date!(2026 - 01 - 05) + time::Duration::weeks(i);
            (monday, monday + time::Duration::days(6))
        })
        .chain([
            (date!(2026 - 01 - 10), date!(2026 - 01 - 20)),
            (date!(2026 - 01 - 15), date!(2026 - 01 - 25)),
        ])
        .collect();
    // Whole months: read from the monthly sums.
    let months = vec![
        (date!(2026 - 01 - 01), date!(2026 - 01 - 31)),
        (date!(2026 - 02 - 01), date!(2026 - 02 - 28)),
        (date!(2026 - 03 - 01), date!(2026 - 03 - 31)),
    ];
    let all = query(
        Level::AllLines,
        date!(2026 - 01 - 01),
        date!(2026 - 03 - 31),
    );
    for level in [
        Level::Site,
        Level::AllLines,
        Level::Line {
            site: site_code("S2"),
        },
    ] {
        let q = AggregateQuery {
            level,
            ..all.clone()
        };
        for buckets in [&days, &weeks, &months] {
            buckets_match_one_aggregate_each(&db, &q, buckets).await;
        }
    }
    // The query's range clips the buckets: days outside it count in none.
    let narrow = query(Level::Site, date!(2026 - 01 - 14), date!(2026 - 02 - 10));
    buckets_match_one_aggregate_each(&db, &narrow, &weeks).await;
    buckets_match_one_aggregate_each(&db, &narrow, &months).await;
    // A bucket wholly outside the range is all zeros, the registered groups still listed.
    let outside = [(date!(2025 - 12 - 01), date!(2025 - 12 - 31))];
    let b = db
        .store
        .aggregate_buckets(&narrow, &outside)
        .await
        .expect("outside");
    assert_eq!(b.buckets[0].len(), 3);
    assert!(
        b.buckets[0]
            .iter()
            .all(|g| g.inspected == 0 && g.defective == 0)
    );

    // History: after a correction, as_of before it gives the old sums in every bucket.
    let published_at = db
        .store
        .record_history(&key("S1", "L1", None, date!(2026 - 01 - 12)))
        .await
        .expect("history")[0]
        .recorded_at;
    let before = db
        .store
        .aggregate_buckets(&all, &weeks)
        .await
        .expect("before");
    db.store
        .put_record(&rec("S1", "L1", date!(2026 - 01 - 12), 5_000, 400), None)
        .await
        .expect("correction");
    let after = db
        .store
        .aggregate_buckets(&all, &weeks)
        .await
        .expect("after");
    assert_ne!(summary(&after.buckets[1]), summary(&before.buckets[1]));
    assert!(after.data_version > before.data_version);
    let mut then = all.clone();
    then.as_of = Some(published_at);
    let old = db
        .store
        .aggregate_buckets(&then, &weeks)
        .await
        .expect("as of");
    for (o, b) in old.buckets.iter().zip(&before.buckets) {
        assert_eq!(summary(o), summary(b));
    }
    // As of now the history gives the current sums, day and month buckets alike.
    let mut now = all.clone();
    now.as_of = Some(time::OffsetDateTime::now_utc());
    for buckets in [&days, &weeks, &months] {
        buckets_match_one_aggregate_each(&db, &now, buckets).await;
        let current = db
            .store
            .aggregate_buckets(&all, buckets)
            .await
            .expect("current");
        let history = db
            .store
            .aggregate_buckets(&now, buckets)
            .await
            .expect("history");
        assert_eq!(current.buckets, history.buckets);
    }
}

#[tokio::test]
async fn scoped_versions_rise_only_for_the_days_and_sites_written() {
    use dispar_store::VersionScope;
    use time::macros::date;
    let db = seeded().await; // S1..S3 with L1, L2; counts on D1..D3 (2026-03-02..04)
    let scope = |from: Date, to: Date, site: Option<&str>| VersionScope {
        from,
        to,
        site: site.map(site_code),
    };
    let v = |s: VersionScope| {
        let store = db.store.clone();
        async move { store.scoped_version(&s).await.expect("scoped version") }
    };
    let march = scope(date!(2026 - 03 - 01), date!(2026 - 03 - 31), None);
    let april = scope(date!(2026 - 04 - 01), date!(2026 - 04 - 30), None);
    let s1_march = scope(date!(2026 - 03 - 01), date!(2026 - 03 - 31), Some("S1"));
    let s3_march = scope(date!(2026 - 03 - 01), date!(2026 - 03 - 31), Some("S3"));
    let d2_only = scope(D2, D2, None);
    let before = [
        v(march.clone()).await,
        v(april.clone()).await,
        v(s1_march.clone()).await,
        v(s3_march.clone()).await,
        v(d2_only.clone()).await,
    ];
    let global = db.store.data_version().await.expect("version");
    assert!(
        before.iter().all(|&x| x <= global),
        "{before:?} <= {global}"
    );

    // A correction of S1 L1 on D1.
    db.store
        .put_record(&rec("S1", "L1", D1, 100, 9), None)
        .await
        .expect("correction");
    let after = db.store.data_version().await.expect("version");
    assert!(after > global);
    assert_eq!(v(march.clone()).await, after, "March holds the day written");
    assert_eq!(v(s1_march.clone()).await, after, "so does S1's March");
    assert_eq!(v(april.clone()).await, before[1], "April does not");
    assert_eq!(v(s3_march.clone()).await, before[3], "S3's March does not");
    assert_eq!(v(d2_only.clone()).await, before[4], "another day does not");

    // An unchanged write moves nothing.
    db.store
        .put_record(&rec("S1", "L1", D1, 100, 9), None)
        .await
        .expect("unchanged");
    assert_eq!(db.store.data_version().await.expect("version"), after);
    assert_eq!(v(march.clone()).await, after);

    // A batch over two sites and days raises each of them, once.
    db.store
        .put_batch(
            &[rec("S3", "L1", D2, 10, 1), rec("S2", "L2", D2, 10, 1)],
            None,
            None,
        )
        .await
        .expect("batch");
    let batch = db.store.data_version().await.expect("version");
    assert_eq!(v(s3_march.clone()).await, batch);
    assert_eq!(v(d2_only.clone()).await, batch);
    assert_eq!(v(s1_march.clone()).await, after, "S1 was not in the batch");

    // A registry change raises every scope, April's too.
    db.store
        .upsert_site(&crate::helpers::site("S9", "Site nine"))
        .await
        .expect("new site");
    let registry = db.store.data_version().await.expect("version");
    for s in [march, april, s1_march, s3_march, d2_only] {
        assert_eq!(v(s).await, registry);
    }
}

#[tokio::test]
async fn line_days_are_the_one_day_buckets_with_data_now_and_as_of() {
    use time::macros::date;
    let db = three_months().await;
    let from = date!(2026 - 02 - 20);
    let to = date!(2026 - 03 - 05);
    let days: Vec<(Date, Date)> =
        std::iter::successors(Some(from), |d| d.next_day().filter(|n| *n <= to))
            .map(|d| (d, d))
            .collect();
    for as_of in [None, Some(time::OffsetDateTime::now_utc())] {
        // The level is ignored: line-days are always per line.
        let q = AggregateQuery {
            as_of,
            ..query(Level::Site, from, to)
        };
        let got = db.store.line_days(&q).await.expect("line days");
        let buckets = db
            .store
            .aggregate_buckets(
                &AggregateQuery {
                    level: Level::AllLines,
                    ..q.clone()
                },
                &days,
            )
            .await
            .expect("buckets");
        let want: Vec<(Date, String, String, u64, u64)> = days
            .iter()
            .zip(&buckets.buckets)
            .flat_map(|(&(d, _), groups)| {
                groups.iter().filter(|g| g.inspected > 0).map(move |g| {
                    (
                        d,
                        g.site.to_string(),
                        g.line.as_ref().map(ToString::to_string).unwrap_or_default(),
                        g.inspected,
                        g.defective,
                    )
                })
            })
            .collect();
        let got: Vec<(Date, String, String, u64, u64)> = got
            .days
            .iter()
            .map(|d| {
                (
                    d.date,
                    d.site.to_string(),
                    d.line.to_string(),
                    d.inspected,
                    d.defective,
                )
            })
            .collect();
        assert!(!want.is_empty());
        assert_eq!(got, want, "as_of {as_of:?}");
    }
}
