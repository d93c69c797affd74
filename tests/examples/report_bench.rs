//! Report benchmark (not a test): 200 sites x 3 lines x 365 days of counts in a fresh
//! SQLite file behind the release `dispar` server, then the latency of a month's
//! site-level report (`GET /v1/reports?period=2025-06`): cache misses, cache hits and
//! 304s; and, in the same run, the same report pieces computed by
//! `tools/reference/report_bench.py` (pandas, scipy, statsmodels) from the same data.
//!
//! ```text
//! cargo run --release -p dispar-system-tests --example report_bench -- \
//!     [--out DIR] [--python /tmp/venv-ref/bin/python] [--misses 30] [--hits 200] [--series 5] \
//!     [--analyze]   (PostgreSQL: ANALYZE after the load, as autovacuum soon would)
//!     [--products N] [--mix-only] [--from 2025-01-01] [--to 2025-12-31]
//! ```
//!
//! `--python` names an interpreter with `tools/reference/requirements.txt` installed (the
//! virtual environment of `tools/reference/README.md`); without it the Python side is
//! skipped.
//!
//! Built with `--release`, the harness builds and runs the release server (or the
//! binary in `DISPAR_BIN`). The data (deterministic, splitmix64): sites S001..S200,
//! lines L1..L3, every day of 2025, 800..1200 units a line and day, a site rate of
//! 1% to 3% (three sites at twice their rate), lines at 0.9, 1.0, 1.1 times it, three
//! defect categories. They are written to `DIR/counts.csv` (the `POST /v1/counts` CSV
//! layout, which the Python script reads too) and posted as CSV batches of 10,000 rows.
//!
//! Timing is client-side (`reqwest`, keep-alive, body read to the end), with the
//! server's own split of a miss from its `Server-Timing` header. A miss is the request
//! after a write (a site renamed: it changes the data version of what every report reads,
//! as new data in the month would, and no count), so it is computed again: sums, statistics, JSON; a hit repeats
//! the request; a 304 sends its `If-None-Match`. The Python time is measured by the script itself
//! (`time.perf_counter`) and printed next to ours.
//!
//! `--products N` (default 0: records without a product, as above) splits each record
//! into N, products P1..PN: the line and day's units shared out by the site's own mix of
//! products (each site a different one), product k at (0.6 + 0.3 k) times the base rate,
//! scaled so that an even mix keeps the base rate, so the totals stay those of the data
//! above while sites differ in their mix, which is what the report's `product_mix`
//! adjusts for. `--mix-only` measures only what that costs: the month's miss with
//! `stratify=product` (products read, the mix computed) against `stratify=none` (crude
//! rates only), alternating, against the same server and data, without the hits, the
//! series, the command line and the Python side. `--from`/`--to` narrow the dates
//! generated (the month reads its 8 months of baseline and 56 days of gap history
//! before it, so 2024-10-01..2025-06-30 gives the same report as the whole year).

#![allow(clippy::unwrap_used, clippy::print_stderr)] // a benchmark driver: panics report failures

use std::fmt::Write as _;
use std::path::PathBuf;
use std::process::Command;
use std::time::{Duration, Instant};

use dispar_system_tests::{Body, Server, Value};

const SITES: usize = 200;
const LINES: usize = 3;
const YEAR: i32 = 2025;
const MONTH: &str = "2025-06";
const CATEGORIES: [&str; 3] = ["scratch", "dent", "short-shot"];
const BATCH: usize = 10_000;

struct Options {
    out: Option<PathBuf>,
    python: Option<String>,
    misses: usize,
    hits: usize,
    series: usize,
    analyze: bool,
    products: usize,
    mix_only: bool,
    from: time::Date,
    to: time::Date,
}

fn date_arg(value: &str, name: &str) -> time::Date {
    let format = time::macros::format_description!("[year]-[month]-[day]");
    time::Date::parse(value, format).unwrap_or_else(|e| panic!("{name} YYYY-MM-DD: {e}"))
}

fn options() -> Options {
    let mut o = Options {
        out: None,
        python: None,
        misses: 30,
        hits: 200,
        series: 5,
        analyze: false,
        products: 0,
        mix_only: false,
        from: time::Date::from_calendar_date(YEAR, time::Month::January, 1).unwrap(),
        to: time::Date::from_calendar_date(YEAR, time::Month::December, 31).unwrap(),
    };
    let args: Vec<String> = std::env::args().skip(1).collect();
    let mut i = 0;
    while i < args.len() {
        let value = args.get(i + 1).cloned().unwrap_or_default();
        match args[i].as_str() {
            "--analyze" => o.analyze = true,
            "--mix-only" => o.mix_only = true,
            _ => {}
        }
        if matches!(args[i].as_str(), "--analyze" | "--mix-only") {
            i += 1;
            continue;
        }
        match args[i].as_str() {
            "--out" => o.out = Some(PathBuf::from(value)),
            "--python" => o.python = Some(value),
            "--misses" => o.misses = value.parse().expect("--misses N"),
            "--hits" => o.hits = value.parse().expect("--hits N"),
            "--series" => o.series = value.parse().expect("--series N"),
            "--products" => o.products = value.parse().expect("--products N"),
            "--from" => o.from = date_arg(&value, "--from"),
            "--to" => o.to = date_arg(&value, "--to"),
            other => panic!("unknown argument {other}"),
        }
        i += 2;
    }
    o
}

/// splitmix64 (Steele, Lea and Flood 2014): small, fast, deterministic.
struct SplitMix(u64);

impl SplitMix {
    fn next(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }

    /// Uniform in [0, 1).
    fn unit(&mut self) -> f64 {
        (self.next() >> 11) as f64 / (1u64 << 53) as f64
    }
}

/// The CSV header and one row per site, line and day from `o.from` to `o.to` (the
/// whole of [`YEAR`] by default), or `o.products` rows, one a product, with `--products`.
fn generate(o: &Options) -> (String, Vec<String>) {
    let product_column = if o.products > 0 { "product," } else { "" };
    let header = format!(
        "site,line,{product_column}date,inspected,defective,{}",
        CATEGORIES.map(|c| format!("defect:{c}")).join(",")
    );
    let mut g = SplitMix(20_250_601);
    let site_rate: Vec<f64> = (0..SITES)
        .map(|i| {
            let base = 0.01 + 0.02 * g.unit();
            if [16, 41, 132].contains(&i) {
                2.0 * base
            } else {
                base
            }
        })
        .collect();
    // Its own stream, so that the data without products stay those of earlier runs.
    let mut m = SplitMix(20_250_612);
    let factor: Vec<f64> = (1..=o.products).map(|k| 0.6 + 0.3 * k as f64).collect();
    let mean = factor.iter().sum::<f64>() / o.products.max(1) as f64;
    let factor: Vec<f64> = factor.iter().map(|f| f / mean).collect();
    // Squared uniforms give lopsided mixes (one site mostly P5, another mostly P1),
    // the floor keeps every product made everywhere.
    let mix: Vec<Vec<f64>> = (0..SITES)
        .map(|_| {
            let w: Vec<f64> = (0..o.products).map(|_| 0.05 + m.unit().powi(2)).collect();
            let sum: f64 = w.iter().sum();
            w.iter().map(|x| x / sum).collect()
        })
        .collect();
    let days = (o.to - o.from).whole_days() + 1;
    assert!(days > 0, "--to before --from");
    let mut rows = Vec::with_capacity(SITES * LINES * days as usize * o.products.max(1));
    for day in 0..days {
        let date = o.from + time::Duration::days(day);
        for (s, rate) in site_rate.iter().enumerate() {
            for l in 0..LINES {
                let n = 800 + g.next() % 401;
                let r = rate * [0.9, 1.0, 1.1][l] * (0.7 + 0.6 * g.unit());
                let site = format!("S{:03},L{}", s + 1, l + 1);
                let mut push = |product: &str, n: u64, r: f64, g: &mut SplitMix| {
                    let x = ((n as f64) * r).round() as u64;
                    let scratch = x / 2;
                    let dent = (x * 3) / 10;
                    let short = x - scratch - dent + g.next() % 2;
                    rows.push(format!(
                        "{site},{product}{date},{n},{x},{scratch},{dent},{short}"
                    ));
                };
                if o.products == 0 {
                    push("", n, r, &mut g);
                    continue;
                }
                let mut left = n;
                for (k, (share, f)) in mix[s].iter().zip(&factor).enumerate() {
                    // Floors for all but the last, which takes the rest: the products
                    // add up to the line's units exactly.
                    let nk = if k + 1 == o.products {
                        left
                    } else {
                        ((n as f64) * share).floor() as u64
                    };
                    left -= nk;
                    push(&format!("P{},", k + 1), nk, r * f, &mut g);
                }
            }
        }
    }
    (header, rows)
}

/// Corrects a December record of S001 (never in the measured month) to counts it has
/// not had before (`i` distinct per call), so the data version changes.
fn bump(s: &Server, i: usize) {
    // A new name for one site changes the registry, which every report reads, without
    // changing a count (so the comparison with the script still holds).
    let r = s.as_admin(
        "PUT",
        "/v1/sites/S001",
        Body::Json(dispar_system_tests::json!({"name": format!("Plant S001 ({i})")})),
    );
    assert!(r.status == 200 || r.status == 201, "{}", r.text);
}

/// `name;dur=1.5, other;dur=2` -> a lookup of `dur` by name (0 when absent).
fn parse_timing(header: &str) -> impl Fn(&str) -> f64 + '_ {
    move |name: &str| {
        header
            .split(',')
            .map(str::trim)
            .find_map(|m| {
                let (n, rest) = m.split_once(';')?;
                (n == name).then(|| rest.strip_prefix("dur="))?
            })
            .and_then(|d| d.parse().ok())
            .unwrap_or(0.0)
    }
}

fn stats(mut v: Vec<Duration>) -> (f64, f64, f64, f64) {
    v.sort();
    let ms = |d: Duration| d.as_secs_f64() * 1e3;
    let pick = |q: f64| ms(v[((v.len() - 1) as f64 * q).round() as usize]);
    (ms(v[0]), pick(0.5), pick(0.95), ms(v[v.len() - 1]))
}

/// The 1, 5 and 15 minute load averages: on a shared 2-core machine they say how much
/// of a timing is other people's work.
fn load_average() -> String {
    std::fs::read_to_string("/proc/loadavg")
        .map(|l| l.split_whitespace().take(3).collect::<Vec<_>>().join(" "))
        .unwrap_or_else(|_| "unknown".to_owned())
}

/// `--mix-only`: the month's miss with the product mix against the same report with
/// crude rates only, alternating (the order too, so neither always runs on the cache
/// lines the other left warm), against one server and one data set.
fn mix_only(s: &Server, o: &Options, records: usize, csv_bytes: usize, ingest: Duration) {
    let read = s.key("read", &[]);
    let base = format!("/v1/reports?period={MONTH}&level=site");
    let variants = [
        (
            "`stratify=product` (products read, mix computed)",
            format!("{base}&stratify=product"),
        ),
        (
            "`stratify=none` (crude rates only)",
            format!("{base}&stratify=none"),
        ),
    ];
    let load_before = load_average();
    let mut client = [Vec::new(), Vec::new()];
    let mut server = [
        [Vec::new(), Vec::new(), Vec::new()],
        [Vec::new(), Vec::new(), Vec::new()],
    ];
    let mut bodies = [0, 0];
    let mut mix: Option<Value> = None;
    for i in 0..=o.misses {
        let order = if i % 2 == 0 { [0, 1] } else { [1, 0] };
        for v in order {
            bump(s, 10_000 + 2 * i + v);
            let t = Instant::now();
            let r = s.request("GET", &variants[v].1, Some(&read), Body::None);
            let elapsed = t.elapsed();
            assert_eq!(r.status, 200, "{}", r.text);
            let header = r.header("server-timing").unwrap_or("");
            assert!(header.starts_with("db;dur="), "a miss: {header:?}");
            if i == 0 {
                // Page cache and the ANOM constant for 200 groups, as in main: not counted.
                let report: Value = r.json();
                let present = !report["product_mix"].is_null();
                assert_eq!(
                    present,
                    v == 0 && o.products > 0,
                    "product_mix only with stratify=product and products in the data"
                );
                if v == 0 {
                    mix = Some(report["product_mix"].clone());
                }
                continue;
            }
            client[v].push(elapsed);
            let timing = parse_timing(header);
            for (k, name) in ["db", "stats", "json"].iter().enumerate() {
                server[v][k].push(Duration::from_secs_f64(timing(name) / 1e3));
            }
            bodies[v] = r.text.len();
        }
    }
    let load_after = load_average();
    let mix = mix.expect("the first stratified report");
    let days = (o.to - o.from).whole_days() + 1;
    println!(
        "## Product mix: the report miss with and without products ({SITES} sites x {LINES} lines x {} products x {days} days, {} to {}, month {MONTH}, level=site)",
        o.products, o.from, o.to
    );
    println!();
    let test = &mix["test"];
    println!(
        "Data: {records} records ({} MB CSV); product_mix: {} products, {} groups, test {} statistic {:.1}, df {}, log10 p = {:.1}; {} disagreements of crude and adjusted verdicts.",
        csv_bytes / 1_000_000,
        mix["products"].as_array().map_or(0, Vec::len),
        mix["groups"].as_array().map_or(0, Vec::len),
        test["method"],
        test["statistic"].as_f64().unwrap_or(f64::NAN),
        test["df"],
        test["log10_p"].as_f64().unwrap_or(f64::NAN),
        mix["disagreements"].as_array().map_or(0, Vec::len),
    );
    println!();
    println!(
        "Ingest: {records} records in {:.0} s ({:.0} records/s). Load average (1, 5, 15 min): {load_before} before the misses, {load_after} after; {} cores.",
        ingest.as_secs_f64(),
        records as f64 / ingest.as_secs_f64(),
        std::thread::available_parallelism().map_or(0, |n| n.get())
    );
    println!();
    println!(
        "| cache miss | n | min ms | median ms | p95 ms | max ms | server db / stats / json ms (medians) | body MB |"
    );
    println!("|---|---|---|---|---|---|---|---|");
    let mut medians = [0.0; 2];
    let mut p95s = [0.0; 2];
    for v in 0..2 {
        let (mn, md, p95, mx) = stats(client[v].clone());
        medians[v] = md;
        p95s[v] = p95;
        let [db, st, js] = server[v].clone();
        println!(
            "| {} | {} | {mn:.1} | {md:.1} | {p95:.1} | {mx:.1} | {:.1} / {:.1} / {:.1} | {:.2} |",
            variants[v].0,
            client[v].len(),
            stats(db).1,
            stats(st).1,
            stats(js).1,
            bodies[v] as f64 / 1e6
        );
    }
    println!();
    let ratio = medians[0] / medians[1];
    println!(
        "Ratio with / without products: {ratio:.2}x (medians), {:.2}x (p95s); target < 2x: {}.",
        p95s[0] / p95s[1],
        if ratio < 2.0 { "met" } else { "NOT met" }
    );
}

fn main() {
    let o = options();
    eprintln!("load average at start: {}", load_average());
    let tempdir = tempfile::tempdir().unwrap();
    let dir = o.out.clone().unwrap_or_else(|| tempdir.path().to_owned());
    std::fs::create_dir_all(&dir).unwrap();
    let _ = std::fs::remove_file(dir.join("dispar.db"));
    let _ = std::fs::remove_file(dir.join("dispar.db-wal"));
    let _ = std::fs::remove_file(dir.join("dispar.db-shm"));

    let (header, rows) = generate(&o);
    let csv_path = dir.join("counts.csv");
    let mut csv = String::with_capacity(rows.len() * 48);
    writeln!(csv, "{header}").unwrap();
    for r in &rows {
        writeln!(csv, "{r}").unwrap();
    }
    std::fs::write(&csv_path, &csv).unwrap();
    eprintln!("wrote {} rows to {}", rows.len(), csv_path.display());

    let s = Server::start_in(&dir, &["--max-body-bytes", "67108864"]);
    let started = Instant::now();
    for i in 1..=SITES {
        s.site(&format!("S{i:03}"), &["L1", "L2", "L3"]);
    }
    let registry = started.elapsed();
    let started = Instant::now();
    for (b, chunk) in rows.chunks(BATCH).enumerate() {
        let body = format!("{header}\n{}\n", chunk.join("\n"));
        let r = s.as_admin("POST", "/v1/counts", Body::Csv(body));
        assert!(r.status == 200 || r.status == 201, "{}", r.text);
        if b % 20 == 19 {
            // With products a load takes minutes: show that it moves and how fast.
            eprintln!(
                "  {} records in {:.0} s",
                (b + 1) * BATCH,
                started.elapsed().as_secs_f64()
            );
        }
    }
    let ingest = started.elapsed();
    eprintln!(
        "registered {SITES} sites x {LINES} lines in {:.1} s; ingested {} records in {:.1} s",
        registry.as_secs_f64(),
        rows.len(),
        ingest.as_secs_f64()
    );

    if o.analyze && s.database.starts_with("postgres") {
        // A freshly loaded PostgreSQL database has no planner statistics until
        // autovacuum analyzes it (within a minute or so of the load); `--analyze` measures
        // that settled state at once.
        let out = std::process::Command::new("psql")
            .args([s.database.as_str(), "-qAtc", "ANALYZE"])
            .output()
            .expect("psql runs");
        assert!(out.status.success(), "ANALYZE: {:?}", out);
    }
    if o.mix_only {
        mix_only(&s, &o, rows.len(), csv.len(), ingest);
        return;
    }
    let read = s.key("read", &[]);
    let path = format!("/v1/reports?period={MONTH}&level=site");
    let path_off = format!("{path}&baseline=off");
    // Misses: before each, a site is renamed, which changes the data version of what
    // every report reads (as new data in the month would), so the same request is
    // computed again (checked with Server-Timing). A write outside what a report reads
    // would leave it cached. With and without
    // baselines alternate, so both see the same machine state.
    let mut misses = Vec::new();
    let mut misses_off = Vec::new();
    let mut server = [Vec::new(), Vec::new(), Vec::new()];
    let mut report: Option<Value> = None;
    let mut body_bytes = 0;
    for i in 0..=o.misses {
        bump(&s, 2 * i);
        let t = Instant::now();
        let r = s.request("GET", &path, Some(&read), Body::None);
        let elapsed = t.elapsed();
        assert_eq!(r.status, 200, "{}", r.text);
        assert!(
            r.header("server-timing")
                .unwrap_or("")
                .starts_with("db;dur="),
            "a miss: {:?}",
            r.header("server-timing")
        );
        bump(&s, 2 * i + 1);
        let t = Instant::now();
        let off = s.request("GET", &path_off, Some(&read), Body::None);
        let elapsed_off = t.elapsed();
        assert_eq!(off.status, 200, "{}", off.text);
        if i == 0 {
            // The first request after start also fills SQLite's page cache and the
            // ANOM constant for (alpha, 200 groups): not counted.
            continue;
        }
        misses.push(elapsed);
        misses_off.push(elapsed_off);
        let timing = parse_timing(r.header("server-timing").unwrap_or(""));
        for (k, name) in ["db", "stats", "json"].iter().enumerate() {
            server[k].push(Duration::from_secs_f64(timing(name) / 1e3));
        }
        body_bytes = r.text.len();
        if report.is_none() {
            report = Some(r.json());
        }
    }
    let report = report.unwrap();
    // Hits: the same request again and again.
    let mut hits = Vec::new();
    let mut tag = String::new();
    for _ in 0..o.hits {
        let t = Instant::now();
        let r = s.request("GET", &path, Some(&read), Body::None);
        hits.push(t.elapsed());
        assert_eq!(r.status, 200);
        tag = r.header("etag").unwrap().to_owned();
    }
    let mut not_modified = Vec::new();
    for _ in 0..o.hits {
        let t = Instant::now();
        let r = s.request_with(
            "GET",
            &path,
            Some(&read),
            Body::None,
            &[("if-none-match", &tag)],
        );
        not_modified.push(t.elapsed());
        assert_eq!(r.status, 304);
    }
    // The same report from the command line (a new process: open, migrate check, read).
    let t = Instant::now();
    let cli = s.cli(&["report", "--period", MONTH, "--format", "json"]);
    let cli_time = t.elapsed();
    assert!(
        cli.status.success(),
        "{}",
        String::from_utf8_lossy(&cli.stderr)
    );
    let cli_report: Value = serde_json::from_slice(&cli.stdout).unwrap();
    assert_eq!(cli_report["test"], report["test"]);

    // A year of weekly verdicts (52 periods x 200 sites), computed: after a bump each,
    // with baselines (the default, 8 earlier weeks) and without, alternating.
    let series_path = "/v1/reports/series?from=2025-W01&to=2025-W52&level=site";
    let series_off_path = format!("{series_path}&baseline=off");
    let mut series = Vec::new();
    let mut series_off = Vec::new();
    let mut changes = 0;
    for i in 0..=o.series {
        for (j, (p, into)) in [
            (series_path, &mut series),
            (&series_off_path, &mut series_off),
        ]
        .into_iter()
        .enumerate()
        {
            bump(&s, 1000 + 2 * i + j);
            let t = Instant::now();
            let r = s.request("GET", p, Some(&read), Body::None);
            let elapsed = t.elapsed();
            assert_eq!(r.status, 200, "{}", r.text);
            if i > 0 {
                into.push(elapsed);
            }
            if j == 0 {
                let v: Value = r.json();
                changes = v["points"].as_array().map_or(0, |ps| {
                    ps.iter()
                        .map(|p| p["changes"].as_array().map_or(0, Vec::len))
                        .sum()
                });
            }
            eprintln!("series {p}: {}", r.header("server-timing").unwrap_or(""));
        }
    }

    let metric = s.request("GET", "/metrics", None, Body::None).text;
    let server_side: Vec<&str> = metric
        .lines()
        .filter(|l| l.starts_with("dispar_report_cache_total"))
        .collect();

    let (mn, md, p95, mx) = stats(misses.clone());
    let (hmn, hmd, hp95, hmx) = stats(hits);
    let (nmn, nmd, np95, nmx) = stats(not_modified);
    let t = &report["test"];
    println!(
        "## Report latency: {SITES} sites x {LINES} lines x {} days{}, month {MONTH}, level=site",
        (o.to - o.from).whole_days() + 1,
        if o.products > 0 {
            format!(" x {} products", o.products)
        } else {
            String::new()
        }
    );
    println!();
    println!(
        "Data: {} records ({} MB CSV); report: {} groups, {} pairs, {} flagged, body {:.1} MB; test {} X^2 = {:.3}, df {}, log10 p = {:.2}",
        rows.len(),
        csv.len() / 1_000_000,
        report["groups"].as_array().unwrap().len(),
        report["pairs"].as_array().unwrap().len(),
        report["flagged"].as_array().unwrap().len(),
        body_bytes as f64 / 1e6,
        t["method"],
        t["statistic"].as_f64().unwrap(),
        t["df"],
        t["log10_p"].as_f64().unwrap(),
    );
    println!();
    println!("| request | n | min ms | median ms | p95 ms | max ms |");
    println!("|---|---|---|---|---|---|");
    println!(
        "| cache miss | {} | {mn:.1} | {md:.1} | {p95:.1} | {mx:.1} |",
        o.misses
    );
    println!(
        "| cache hit | {} | {hmn:.2} | {hmd:.2} | {hp95:.2} | {hmx:.2} |",
        o.hits
    );
    println!(
        "| 304 (If-None-Match) | {} | {nmn:.2} | {nmd:.2} | {np95:.2} | {nmx:.2} |",
        o.hits
    );
    println!(
        "| `dispar report --format json` (new process) | 1 | | {:.1} | | |",
        cli_time.as_secs_f64() * 1e3
    );
    let (omn, omd, op95, omx) = stats(misses_off);
    println!(
        "| cache miss, `baseline=off` | {} | {omn:.1} | {omd:.1} | {op95:.1} | {omx:.1} |",
        o.misses
    );
    let (smn, smd, sp95, smx) = stats(series);
    println!(
        "| series 2025-W01..2025-W52, level=site (miss) | {} | {smn:.0} | {smd:.0} | {sp95:.0} | {smx:.0} |",
        o.series
    );
    let (fmn, fmd, fp95, fmx) = stats(series_off);
    println!(
        "| the same series, `baseline=off` (miss) | {} | {fmn:.0} | {fmd:.0} | {fp95:.0} | {fmx:.0} |",
        o.series
    );
    println!();
    println!(
        "Baselines cost: single report {:.2}x, series {:.2}x the same request with `baseline=off` (medians); the series called {changes} changes in 52 x {SITES} site-weeks.",
        md / omd,
        smd / fmd
    );
    println!();
    let [db, st, js] = server;
    println!(
        "Server side of a miss (`Server-Timing`, medians): db {:.1} ms, stats {:.1} ms, json {:.1} ms; the rest of the client-side time is HTTP and reading the {:.1} MB body.",
        stats(db).1,
        stats(st).1,
        stats(js).1,
        body_bytes as f64 / 1e6
    );
    println!();
    println!("Server counters: {}", server_side.join(", "));

    if let Some(python) = &o.python {
        let script = concat!(
            env!("CARGO_MANIFEST_DIR"),
            "/../tools/reference/report_bench.py"
        );
        let out = Command::new(python)
            .arg(script)
            .arg(&csv_path)
            .args(["--month", MONTH])
            .output()
            .expect("python runs");
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        let py: Value = serde_json::from_slice(&out.stdout).unwrap();
        let compute = py["seconds"]["compute"].as_f64().unwrap();
        let total = py["seconds"]["total"].as_f64().unwrap();
        println!();
        println!("## The same pieces in Python ({})", py["versions"]);
        println!();
        println!("| step | seconds |");
        println!("|---|---|");
        for (k, v) in py["seconds"].as_object().unwrap() {
            println!("| {k} | {:.3} |", v.as_f64().unwrap());
        }
        println!();
        let miss_median = md / 1e3;
        println!(
            "dispar cache miss (median, end to end over HTTP incl. SQL sums) vs the script: {:.0}x faster than its compute step (data already in memory), {:.0}x faster than its total (incl. reading the CSV).",
            compute / miss_median,
            total / miss_median
        );
        let x2 = py["chi2"]["statistic"].as_f64().unwrap();
        let ours = t["statistic"].as_f64().unwrap();
        println!(
            "Agreement: X^2 {ours:.6} (dispar) vs {x2:.6} (scipy), rel. diff {:.1e}; pairs rejected after Holm: {} (dispar) vs {} (statsmodels)",
            (ours - x2).abs() / x2,
            report["pairs"]
                .as_array()
                .unwrap()
                .iter()
                .filter(|p| p["significant"] == true)
                .count(),
            py["pairwise"]["rejected"]
        );
    }
}
