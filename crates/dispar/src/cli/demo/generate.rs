//! The demo scenario and its deterministic generator.
//!
//! Quillmere Closures, an invented maker of plastic caps, dispensing closures and
//! pump assemblies, runs six plants. [`generate`] turns a seed into six months of
//! daily inspection counts (2026-01-05 .. 2026-06-28, Monday to Friday, minus each
//! plant's holidays) for every line, and [`DemoData::write_to`] writes them as
//! `sites.csv`, `lines.csv` and `counts.csv` (the batch CSV format of `POST /v1/counts`).
//!
//! Planted on purpose (the verdicts are checked by the tests in `demo/tests.rs` and
//! described in `demo-data/README.md`):
//! - KES (Kestelmoor) drifts worse in ISO weeks 2026-W14 .. W18, mostly `seal-leak`;
//! - MRQ line L2 spikes on 2026-02-24 .. 26, mostly `short-shot`;
//! - SEM (Semmerau) makes tens of units a day, so its line-level tables need exact tests;
//! - MRQ makes mostly the hard product (`DSP`, dispensing closures, about 1.9 times the
//!   defect rate of `CAP`, plain screw caps), so its crude rate runs well above the pooled
//!   rate while its rate standardised for the product mix is close to it.
//!
//! Products: six lines record one row per product and day (MRQ's four lines, TLG L2 and
//! ODW L2, see [`PRODUCT_LINES`]); the other lines record one row a day without a product.
//! A product line's day is drawn whole first, exactly as for a line without products,
//! and then split into its product rows by a second stream, so every (site, line, date)
//! keeps the totals it would have without products and every story told from the totals
//! still holds. Units are split by the day's product share, defective units by a binomial
//! draw weighted by the products' relative rates, and the defects of each category by
//! drawing the day's defective units without replacement, so a product row carries only
//! defects of its own defective units (at most one second defect each) and the product
//! rows add up exactly to the day's.
//!
//! Determinism: one ChaCha8 stream per line (seed from the caller, stream from the
//! line's position) for the day's counts, another per product line for the split, and
//! only `+ - * /` and `sqrt` on `f64` (no `exp`, `ln`, `powi`, whose last bits may differ
//! between platforms), so a seed gives the same bytes on every machine. The samplers are
//! written here rather than taken from `rand_distr`, which does not promise value
//! stability across its versions.

use std::fmt::Write as _;
use std::path::Path;

use rand_chacha::ChaCha8Rng;
use rand_core::{RngCore, SeedableRng};
use time::macros::date;
use time::{Date, Weekday};

/// The seed whose output is committed under `demo-data/` and described in its README.
pub const DEFAULT_SEED: u64 = 7;

/// Defect category codes, in the order of the `defect:<category>` CSV columns.
pub const CATEGORIES: [&str; 5] = [
    "flash",
    "short-shot",
    "seal-leak",
    "thread-damage",
    "surface-mark",
];

const SHORT_SHOT: usize = 1;
const SEAL_LEAK: usize = 2;

/// First production date of the scenario (a Monday, 2026-W02).
pub const FIRST_DAY: Date = date!(2026 - 01 - 05);
/// Last calendar date of the scenario (a Sunday, 2026-W26).
pub const LAST_DAY: Date = date!(2026 - 06 - 28);

/// A plant of the demo manufacturer.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct DemoSite {
    /// Short site code, as the plant writes it.
    pub code: &'static str,
    /// Plant name (an invented town).
    pub name: &'static str,
    /// IANA time zone of the plant.
    pub time_zone: &'static str,
}

/// A production line within a demo plant.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct DemoLine {
    /// Site code the line belongs to.
    pub site: &'static str,
    /// Line code within the site.
    pub line: &'static str,
    /// Human-readable line name.
    pub name: &'static str,
}

/// A product of the demo manufacturer, as recorded in the `product` column.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct DemoProduct {
    /// Product code.
    pub code: &'static str,
    /// What it is.
    pub name: &'static str,
    /// Its defect rate relative to [`PRODUCTS`]`[0]` on the same line and day.
    pub relative_rate: f64,
}

/// The products, easy one first: a plain screw cap, and a dispensing closure (hinge,
/// valve or trigger: more parts, more ways to fail).
pub const PRODUCTS: [DemoProduct; 2] = [
    DemoProduct {
        code: "CAP",
        name: "Screw cap",
        relative_rate: 1.0,
    },
    DemoProduct {
        code: "DSP",
        name: "Dispensing closure",
        relative_rate: 1.9,
    },
];

/// A line that records its counts per product: (site, line, mean share of its units
/// that are [`PRODUCTS`]`[1]`, the hard product; the rest are `PRODUCTS[0]`).
pub const PRODUCT_LINES: [(&str, &str, f64); 6] = [
    ("MRQ", "L1", 0.85),
    ("MRQ", "L2", 0.85),
    ("MRQ", "L3", 0.85),
    ("MRQ", "L4", 0.85),
    ("ODW", "L2", 0.35),
    ("TLG", "L2", 0.35),
];

/// Day-to-day spread of a product line's hard-product share (absolute, before clamping
/// to [`SHARE_BOUNDS`]): orders move the mix a little from day to day.
const SHARE_SPREAD: f64 = 0.04;
/// The hard product's share of a day stays within these bounds, so each product row has
/// units.
const SHARE_BOUNDS: (f64, f64) = (0.05, 0.95);

/// One day's counts for one line, or for one product of a line (one row of `counts.csv`).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct DemoRecord {
    /// Site code.
    pub site: &'static str,
    /// Line code.
    pub line: &'static str,
    /// Production date (the plant's local calendar date).
    pub date: Date,
    /// Product code, on the lines of [`PRODUCT_LINES`]; `None` elsewhere.
    pub product: Option<&'static str>,
    /// Units inspected.
    pub inspected: u64,
    /// Units found defective (at most `inspected`).
    pub defective: u64,
    /// Defects found, by category, in the order of [`CATEGORIES`]. These count
    /// defects, not units: a unit may carry two, so the sum may exceed `defective`.
    pub defects: [u64; CATEGORIES.len()],
}

/// The whole generated scenario.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct DemoData {
    /// The seed it was generated from.
    pub seed: u64,
    /// Plants, in code order.
    pub sites: Vec<DemoSite>,
    /// Lines, in (site, line) order.
    pub lines: Vec<DemoLine>,
    /// Daily records, in (date, site, line, product) order (no product first).
    pub records: Vec<DemoRecord>,
}

impl DemoData {
    /// `sites.csv`: header `site,name,time_zone`, one row per plant.
    pub fn sites_csv(&self) -> String {
        let mut out = String::from("site,name,time_zone\n");
        for s in &self.sites {
            push_row(&mut out, &[s.code, s.name, s.time_zone]);
        }
        out
    }

    /// `lines.csv`: header `site,line,name`, one row per line.
    pub fn lines_csv(&self) -> String {
        let mut out = String::from("site,line,name\n");
        for l in &self.lines {
            push_row(&mut out, &[l.site, l.line, l.name]);
        }
        out
    }

    /// `counts.csv` in the batch format of `POST /v1/counts`:
    /// `site,line,date,inspected,defective,product,defect:<category>...` (LF line ends;
    /// an empty `product` for the lines without products).
    pub fn counts_csv(&self) -> String {
        let mut out = String::with_capacity(64 * (self.records.len() + 1));
        // `product` after the counts, not beside the key: readers that take the first
        // five columns by position (site, line, date, inspected, defective) keep working.
        out.push_str("site,line,date,inspected,defective,product");
        for c in CATEGORIES {
            out.push_str(",defect:");
            out.push_str(c);
        }
        out.push('\n');
        for r in &self.records {
            // Writing to a String cannot fail.
            let _ = write!(
                out,
                "{},{},{},{},{},{}",
                r.site,
                r.line,
                iso_date(r.date),
                r.inspected,
                r.defective,
                r.product.unwrap_or("")
            );
            for d in r.defects {
                let _ = write!(out, ",{d}");
            }
            out.push('\n');
        }
        out
    }

    /// Writes `sites.csv`, `lines.csv` and `counts.csv` into `dir` (created if missing).
    /// The scenario README beside them is written by hand and left alone.
    pub fn write_to(&self, dir: &Path) -> std::io::Result<()> {
        std::fs::create_dir_all(dir)?;
        std::fs::write(dir.join("sites.csv"), self.sites_csv())?;
        std::fs::write(dir.join("lines.csv"), self.lines_csv())?;
        std::fs::write(dir.join("counts.csv"), self.counts_csv())?;
        Ok(())
    }
}

/// `YYYY-MM-DD` without going through a fallible formatter.
fn iso_date(d: Date) -> String {
    format!("{:04}-{:02}-{:02}", d.year(), u8::from(d.month()), d.day())
}

/// Appends one CSV row, quoting fields per RFC 4180 when they need it.
fn push_row(out: &mut String, fields: &[&str]) {
    for (i, f) in fields.iter().enumerate() {
        if i > 0 {
            out.push(',');
        }
        if f.contains([',', '"', '\n', '\r']) {
            out.push('"');
            out.push_str(&f.replace('"', "\"\""));
            out.push('"');
        } else {
            out.push_str(f);
        }
    }
    out.push('\n');
}

// ---------------------------------------------------------------------------
// The scenario
// ---------------------------------------------------------------------------

struct SitePlan {
    code: &'static str,
    name: &'static str,
    time_zone: &'static str,
    /// Long-run share of units found defective at this plant.
    base_rate: f64,
    /// Share of first defects by category (sums to 1).
    shares: [f64; CATEGORIES.len()],
    /// Days without production besides Saturdays and Sundays.
    holidays: &'static [Date],
    lines: &'static [LinePlan],
}

struct LinePlan {
    code: &'static str,
    name: &'static str,
    /// Typical units inspected on a full day.
    daily_units: f64,
    /// Relative day-to-day spread of the volume.
    volume_spread: f64,
    /// The line's rate relative to its plant's base rate.
    rate_factor: f64,
}

/// Relative day-to-day spread of each line's defect rate beyond the binomial
/// (mild extra-binomial variation: the rate is multiplied by 1 + 0.12 z).
const DAILY_RATE_SPREAD: f64 = 0.12;
/// Chance that a defective unit carries a second defect.
const SECOND_DEFECT: f64 = 0.10;
/// Chance of a short day (changeover, maintenance) at 40-70% of the volume.
const SHORT_DAY: f64 = 0.04;

/// The plant that drifts: (ISO week of 2026, rate multiplier); excess mostly `seal-leak`.
const DRIFT_SITE: &str = "KES";
const DRIFT_WEEKS: [(u8, f64); 5] = [(14, 1.25), (15, 2.2), (16, 2.9), (17, 3.2), (18, 2.6)];
/// Share of the drift's excess defective units whose first defect is `seal-leak`.
const DRIFT_FOCUS: f64 = 0.85;

/// The line that spikes: (date, rate multiplier); excess mostly `short-shot`.
const SPIKE_SITE: &str = "MRQ";
const SPIKE_LINE: &str = "L2";
const SPIKE_DAYS: [(Date, f64); 3] = [
    (date!(2026 - 02 - 24), 4.5),
    (date!(2026 - 02 - 25), 7.0),
    (date!(2026 - 02 - 26), 5.0),
];
const SPIKE_FOCUS: f64 = 0.9;

const EU_SHARED: [Date; 2] = [date!(2026 - 04 - 06), date!(2026 - 05 - 01)];

const PLANTS: [SitePlan; 6] = [
    SitePlan {
        code: "KES",
        name: "Kestelmoor",
        time_zone: "Europe/London",
        base_rate: 0.0070,
        shares: [0.30, 0.18, 0.17, 0.20, 0.15],
        holidays: &[
            date!(2026 - 04 - 03),
            date!(2026 - 04 - 06),
            date!(2026 - 05 - 04),
            date!(2026 - 05 - 25),
        ],
        lines: &[
            LinePlan {
                code: "L1",
                name: "Flip-top press 1",
                daily_units: 9000.0,
                volume_spread: 0.07,
                rate_factor: 1.0,
            },
            LinePlan {
                code: "L2",
                name: "Flip-top press 2",
                daily_units: 8500.0,
                volume_spread: 0.07,
                rate_factor: 0.92,
            },
            LinePlan {
                code: "L3",
                name: "Lotion pump assembly",
                daily_units: 4200.0,
                volume_spread: 0.09,
                rate_factor: 1.15,
            },
        ],
    },
    SitePlan {
        code: "MRQ",
        name: "Marquenne",
        time_zone: "Europe/Paris",
        base_rate: 0.0120,
        shares: [0.28, 0.22, 0.14, 0.21, 0.15],
        holidays: &[
            EU_SHARED[0],
            EU_SHARED[1],
            date!(2026 - 05 - 08),
            date!(2026 - 05 - 14),
            date!(2026 - 05 - 25),
        ],
        lines: &[
            LinePlan {
                code: "L1",
                name: "Sport cap press",
                daily_units: 5200.0,
                volume_spread: 0.08,
                rate_factor: 1.05,
            },
            LinePlan {
                code: "L2",
                name: "Disc-top press",
                daily_units: 4800.0,
                volume_spread: 0.08,
                rate_factor: 0.95,
            },
            LinePlan {
                code: "L3",
                name: "Trigger sprayer assembly",
                daily_units: 3900.0,
                volume_spread: 0.08,
                rate_factor: 1.1,
            },
            LinePlan {
                code: "L4",
                name: "Spout press",
                daily_units: 2600.0,
                volume_spread: 0.10,
                rate_factor: 0.9,
            },
        ],
    },
    SitePlan {
        code: "ODW",
        name: "Oderwyn",
        time_zone: "Europe/Berlin",
        base_rate: 0.0090,
        shares: [0.32, 0.17, 0.15, 0.20, 0.16],
        holidays: &[
            date!(2026 - 04 - 03),
            EU_SHARED[0],
            EU_SHARED[1],
            date!(2026 - 05 - 14),
            date!(2026 - 05 - 25),
        ],
        lines: &[
            LinePlan {
                code: "L1",
                name: "Screw cap press hall 1",
                daily_units: 14000.0,
                volume_spread: 0.06,
                rate_factor: 0.95,
            },
            LinePlan {
                code: "L2",
                name: "Screw cap press hall 2",
                daily_units: 12500.0,
                volume_spread: 0.06,
                rate_factor: 1.0,
            },
            LinePlan {
                code: "L3",
                name: "Valve insert assembly",
                daily_units: 6000.0,
                volume_spread: 0.08,
                rate_factor: 1.12,
            },
        ],
    },
    SitePlan {
        code: "SEM",
        name: "Semmerau",
        time_zone: "Europe/Vienna",
        base_rate: 0.0160,
        shares: [0.15, 0.15, 0.20, 0.20, 0.30],
        holidays: &[
            date!(2026 - 01 - 06),
            EU_SHARED[0],
            EU_SHARED[1],
            date!(2026 - 05 - 14),
            date!(2026 - 05 - 25),
            date!(2026 - 06 - 04),
        ],
        lines: &[
            LinePlan {
                code: "L1",
                name: "Sample closure bench",
                daily_units: 42.0,
                volume_spread: 0.20,
                rate_factor: 1.0,
            },
            LinePlan {
                code: "L2",
                name: "Pilot dispenser bench",
                daily_units: 26.0,
                volume_spread: 0.25,
                rate_factor: 1.1,
            },
        ],
    },
    SitePlan {
        code: "TLG",
        name: "Tallowgate",
        time_zone: "America/Chicago",
        base_rate: 0.0100,
        shares: [0.30, 0.20, 0.15, 0.19, 0.16],
        holidays: &[date!(2026 - 01 - 19), date!(2026 - 05 - 25)],
        lines: &[
            LinePlan {
                code: "L1",
                name: "High-cavity cap press A",
                daily_units: 26000.0,
                volume_spread: 0.05,
                rate_factor: 1.0,
            },
            LinePlan {
                code: "L2",
                name: "High-cavity cap press B",
                daily_units: 22000.0,
                volume_spread: 0.05,
                rate_factor: 0.95,
            },
            LinePlan {
                code: "L3",
                name: "Tamper band press",
                daily_units: 18000.0,
                volume_spread: 0.06,
                rate_factor: 1.06,
            },
        ],
    },
    SitePlan {
        code: "VAL",
        name: "Valtrona",
        time_zone: "Europe/Rome",
        base_rate: 0.0150,
        shares: [0.26, 0.20, 0.16, 0.22, 0.16],
        holidays: &[
            date!(2026 - 01 - 06),
            EU_SHARED[0],
            EU_SHARED[1],
            date!(2026 - 06 - 02),
        ],
        lines: &[
            LinePlan {
                code: "L1",
                name: "Dropper tip press",
                daily_units: 900.0,
                volume_spread: 0.10,
                rate_factor: 1.0,
            },
            LinePlan {
                code: "L2",
                name: "Child-resistant cap assembly",
                daily_units: 650.0,
                volume_spread: 0.12,
                rate_factor: 1.05,
            },
        ],
    },
];

/// Generates the scenario for `seed`. Pure and deterministic: the same seed gives
/// the same data (and the same CSV bytes) on every run and every platform.
pub fn generate(seed: u64) -> DemoData {
    let mut sites = Vec::with_capacity(PLANTS.len());
    let mut lines = Vec::new();
    let mut records = Vec::new();
    for (site_index, plant) in PLANTS.iter().enumerate() {
        sites.push(DemoSite {
            code: plant.code,
            name: plant.name,
            time_zone: plant.time_zone,
        });
        for (line_index, line) in plant.lines.iter().enumerate() {
            lines.push(DemoLine {
                site: plant.code,
                line: line.code,
                name: line.name,
            });
            // One stream per line: changing one line's plan leaves the others alone.
            let stream = (site_index as u64) << 8 | line_index as u64;
            let mut sampler = Sampler::new(seed, stream);
            let share = PRODUCT_LINES
                .iter()
                .find(|(s, l, _)| *s == plant.code && *l == line.code)
                .map(|p| p.2);
            // The split has its own stream, so the day's draws are the same bytes as
            // they would be on a line without products.
            let mut splitter = Sampler::new(seed, SPLIT_STREAM | stream);
            let mut day = FIRST_DAY;
            while day <= LAST_DAY {
                if is_production_day(plant, day) {
                    let drawn = simulate_day(&mut sampler, plant, line, day);
                    match share {
                        Some(share) => {
                            records.extend(split_by_product(&mut splitter, &drawn, share));
                        }
                        None => records.push(drawn.record),
                    }
                }
                match day.next_day() {
                    Some(next) => day = next,
                    None => break,
                }
            }
        }
    }
    sites.sort_by(|a, b| a.code.cmp(b.code));
    lines.sort_by(|a, b| (a.site, a.line).cmp(&(b.site, b.line)));
    records.sort_by(|a, b| {
        (a.date, a.site, a.line, a.product).cmp(&(b.date, b.site, b.line, b.product))
    });
    DemoData {
        seed,
        sites,
        lines,
        records,
    }
}

fn is_production_day(plant: &SitePlan, day: Date) -> bool {
    !matches!(day.weekday(), Weekday::Saturday | Weekday::Sunday) && !plant.holidays.contains(&day)
}

/// Added to a line's stream number for its product split (line streams are below 2^16).
const SPLIT_STREAM: u64 = 1 << 32;

/// A line's day as drawn, with its first and second defects apart, so the split can
/// hand each product only defects its own defective units can carry.
struct DayDraw {
    record: DemoRecord,
    first: [u64; CATEGORIES.len()],
    second: [u64; CATEGORIES.len()],
}

fn simulate_day(s: &mut Sampler, plant: &SitePlan, line: &LinePlan, day: Date) -> DayDraw {
    // Volume: the line's typical day, a little lower on Mondays, with a spread,
    // and now and then a short day.
    let mut units = line.daily_units;
    if day.weekday() == Weekday::Monday {
        units *= 0.94;
    }
    units *= (1.0 + line.volume_spread * s.normal()).max(0.3);
    if s.uniform() < SHORT_DAY {
        units *= 0.4 + 0.3 * s.uniform();
    }
    let inspected = (units + 0.5).floor().max(3.0) as u64;

    // Rate: plant base x line factor x mild daily noise; then the planted events.
    let base = plant.base_rate * line.rate_factor;
    let noisy = base * (1.0 + DAILY_RATE_SPREAD * s.normal()).max(0.4);
    let (multiplier, focus) = excursion(plant.code, line.code, day);
    let rate = (noisy * multiplier).min(0.5);
    let defective = s.binomial(inspected, rate);

    // First defect of each defective unit: the plant's usual mix for the baseline
    // part, the event's category for most of the excess.
    let mut probs = plant.shares;
    if let Some((category, share)) = focus {
        let excess = 1.0 - 1.0 / multiplier;
        for p in &mut probs {
            *p *= 1.0 - excess * share;
        }
        probs[category] += excess * share;
    }
    let first = s.multinomial(defective, &probs);
    // Some defective units carry a second defect, in the plant's usual mix.
    let second_count = s.binomial(defective, SECOND_DEFECT);
    let second = s.multinomial(second_count, &plant.shares);
    let mut defects = first;
    for (d, extra) in defects.iter_mut().zip(second) {
        *d += extra;
    }

    DayDraw {
        record: DemoRecord {
            site: plant.code,
            line: line.code,
            date: day,
            product: None,
            inspected,
            defective,
            defects,
        },
        first,
        second,
    }
}

/// Splits a drawn day into one row per product (in [`PRODUCTS`] order), `hard_share`
/// being the line's mean share of `PRODUCTS[1]`. The rows add up exactly to the day.
fn split_by_product(s: &mut Sampler, day: &DayDraw, hard_share: f64) -> [DemoRecord; 2] {
    let n = day.record.inspected;
    let share = (hard_share + SHARE_SPREAD * s.normal()).clamp(SHARE_BOUNDS.0, SHARE_BOUNDS.1);
    // At least one unit of each product (every generated day has 3 units or more).
    let n_hard = ((n as f64 * share + 0.5).floor() as u64).clamp(1, n.saturating_sub(1));
    let n_easy = n - n_hard;

    // Each defective unit is the hard product's with the probability its units' share
    // of the expected defectives gives, within what each product's units allow.
    let d = day.record.defective;
    let hard_weight = n_hard as f64 * PRODUCTS[1].relative_rate;
    let easy_weight = n_easy as f64 * PRODUCTS[0].relative_rate;
    let d_hard = s
        .binomial(d, hard_weight / (hard_weight + easy_weight))
        .min(n_hard)
        .max(d.saturating_sub(n_easy));

    // The hard product's defective units are d_hard of the day's d, drawn without
    // replacement: their first defects, how many of them carry a second, and its category.
    let first_hard = s.without_replacement(&day.first, d_hard);
    let second_total: u64 = day.second.iter().sum();
    let [second_count_hard, _] = s.without_replacement(&[second_total, d - second_total], d_hard);
    let second_hard = s.without_replacement(&day.second, second_count_hard);

    let mut hard_defects = [0; CATEGORIES.len()];
    let mut easy_defects = [0; CATEGORIES.len()];
    for k in 0..CATEGORIES.len() {
        hard_defects[k] = first_hard[k] + second_hard[k];
        easy_defects[k] = day.record.defects[k] - hard_defects[k];
    }
    let row = |product: &DemoProduct, inspected, defective, defects| DemoRecord {
        product: Some(product.code),
        inspected,
        defective,
        defects,
        ..day.record.clone()
    };
    [
        row(&PRODUCTS[0], n_easy, d - d_hard, easy_defects),
        row(&PRODUCTS[1], n_hard, d_hard, hard_defects),
    ]
}

/// The planted drift or spike on this line and day: (rate multiplier, and the
/// category that takes most of the excess with its share).
fn excursion(site: &str, line: &str, day: Date) -> (f64, Option<(usize, f64)>) {
    if site == DRIFT_SITE {
        for (week, m) in DRIFT_WEEKS {
            if day.iso_week() == week && day.year() == 2026 {
                return (m, Some((SEAL_LEAK, DRIFT_FOCUS)));
            }
        }
    }
    if site == SPIKE_SITE && line == SPIKE_LINE {
        for (d, m) in SPIKE_DAYS {
            if d == day {
                return (m, Some((SHORT_SHOT, SPIKE_FOCUS)));
            }
        }
    }
    (1.0, None)
}

// ---------------------------------------------------------------------------
// Samplers (portable: only + - * / and sqrt on f64)
// ---------------------------------------------------------------------------

struct Sampler {
    rng: ChaCha8Rng,
}

impl Sampler {
    /// The ChaCha8 stream `stream` of `seed`.
    fn new(seed: u64, stream: u64) -> Self {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        rng.set_stream(stream);
        Sampler { rng }
    }

    /// Index in [0, n) for n > 0, from a uniform (n is far below 2^53 here, so every
    /// index is reachable and the bias is negligible).
    fn below(&mut self, n: u64) -> u64 {
        ((self.uniform() * n as f64) as u64).min(n.saturating_sub(1))
    }

    /// Multivariate hypergeometric: how many of each kind among `draws` items taken
    /// without replacement from `pool` (`pool[k]` items of kind k), one item at a time.
    /// `draws` beyond the pool's size take the whole pool.
    fn without_replacement<const K: usize>(&mut self, pool: &[u64; K], draws: u64) -> [u64; K] {
        let mut left = *pool;
        let mut out = [0; K];
        let mut total: u64 = pool.iter().sum();
        for _ in 0..draws.min(total) {
            let mut pick = self.below(total);
            for (kind, count) in left.iter_mut().enumerate() {
                if pick < *count {
                    *count -= 1;
                    out[kind] += 1;
                    break;
                }
                pick -= *count;
            }
            total -= 1;
        }
        out
    }

    /// Uniform on [0, 1) with 53 random bits.
    fn uniform(&mut self) -> f64 {
        (self.rng.next_u64() >> 11) as f64 * (1.0 / (1u64 << 53) as f64)
    }

    /// Approximately standard normal: the sum of twelve uniforms minus six
    /// (mean 0, variance 1, tails cut at +-6; ample for demo noise).
    fn normal(&mut self) -> f64 {
        let mut sum = 0.0;
        for _ in 0..12 {
            sum += self.uniform();
        }
        sum - 6.0
    }

    /// Binomial(n, p): exact inversion when n p (1 - p) < 25, otherwise the normal
    /// approximation rounded to the nearest integer (the continuity correction)
    /// and clamped to [0, n].
    fn binomial(&mut self, n: u64, p: f64) -> u64 {
        if n == 0 || p.is_nan() || p <= 0.0 {
            return 0;
        }
        if p >= 1.0 {
            return n;
        }
        if p > 0.5 {
            return n - self.binomial(n, 1.0 - p);
        }
        let q = 1.0 - p;
        let nf = n as f64;
        let variance = nf * p * q;
        if variance >= 25.0 {
            let x = (nf * p + variance.sqrt() * self.normal() + 0.5).floor();
            return x.clamp(0.0, nf) as u64;
        }
        // Inversion: walk the pmf from 0 (P(0) = q^n stays far above underflow
        // here because n p < 50).
        let u = self.uniform();
        let mut pmf = pow_u64(q, n);
        let mut cumulative = pmf;
        let ratio = p / q;
        let mut k = 0;
        while u >= cumulative && k < n {
            pmf *= (n - k) as f64 / (k + 1) as f64 * ratio;
            k += 1;
            cumulative += pmf;
        }
        k
    }

    /// Multinomial(n, probs) by successive conditional binomials.
    fn multinomial<const K: usize>(&mut self, n: u64, probs: &[f64; K]) -> [u64; K] {
        let mut out = [0; K];
        let mut left = n;
        let mut mass: f64 = probs.iter().sum();
        for (i, &p) in probs.iter().enumerate() {
            if left == 0 {
                break;
            }
            if i + 1 == K || mass <= p {
                out[i] = left;
                break;
            }
            let x = self.binomial(left, p / mass);
            out[i] = x;
            left -= x;
            mass -= p;
        }
        out
    }
}

/// x^n by repeated squaring (bit-for-bit the same everywhere, unlike `powi`).
fn pow_u64(mut x: f64, mut n: u64) -> f64 {
    let mut acc = 1.0;
    while n > 0 {
        if n & 1 == 1 {
            acc *= x;
        }
        x *= x;
        n >>= 1;
    }
    acc
}
