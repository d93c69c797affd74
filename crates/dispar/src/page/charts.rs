//! Server-side SVG charts: group rates with their intervals ([`RatesChart`]), the
//! funnel of rate against units inspected ([`FunnelChart`]), the test's reference
//! distribution ([`ReferenceChart`]), and the strip of verdicts over periods
//! ([`SeriesChart`]).
//!
//! Each chart is a model (plain geometry and words, computed from the report by its
//! `of` function) and its markup (the `Render` impl, through maud, which escapes every
//! name and label). The charts carry no inline styles (the page's
//! Content-Security-Policy allows only its own style sheet): colours come from classes
//! styled by the page, and the few presentation attributes SVG has
//! (`stroke-dasharray`, `text-anchor`). Colour never carries a meaning alone: flagged
//! groups also get ▲ or ▼, and the verdict cells differ in fill and outline. Each
//! chart is sized by its `viewBox` and scales to the width of its container.

use dispar_core::report::model::Flag;
use dispar_core::report::{Report, SeriesPoint};
use dispar_stats::funnel::Funnel;
use maud::{Markup, Render, html};

use super::format::{coord, fmt_count, fmt_num, fmt_pct, p_equals};

/// Coverage of the funnel's inner limits (two-sided).
pub const INNER_COVERAGE: f64 = 0.95;
/// Coverage of the funnel's outer limits (two-sided).
pub const OUTER_COVERAGE: f64 = 0.998;

/// Width of the coordinate system of the two report charts (shown side by side on a
/// laptop, so about their width in CSS pixels there: text keeps its size).
const WIDTH: f64 = 540.0;

/// Width of the series chart's coordinate system (full width of the page).
const SERIES_WIDTH: f64 = 900.0;

/// The mark of an upward flag, in the table, the charts and the series alike.
pub const UP: &str = "\u{25b2}";
/// The mark of a downward flag.
pub const DOWN: &str = "\u{25bc}";
/// The mark of a change against a group's own usual (worse or better, said in words),
/// a different shape from the flags' triangles; the series chart draws it as a ring.
pub const CHANGE: &str = "\u{25c9}";

/// A coordinate as SVG wants it (two decimals at most, no exponent).
#[derive(Debug, Clone, Copy, PartialEq)]
struct C(f64);

impl Render for C {
    fn render_to(&self, buffer: &mut String) {
        buffer.push_str(&coord(self.0));
    }
}

/// The class of a group's mark: `above`, `below` or `level`.
pub fn flag_class(flag: Option<Flag>) -> &'static str {
    match flag {
        Some(Flag::Above) => "above",
        Some(Flag::Below) => "below",
        None => "level",
    }
}

/// ▲, ▼ or nothing.
pub fn flag_mark(flag: Option<Flag>) -> &'static str {
    match flag {
        Some(Flag::Above) => UP,
        Some(Flag::Below) => DOWN,
        None => "",
    }
}

/// A "nice" step (1, 2, 2.5 or 5 times a power of ten) giving about `ticks` ticks
/// over `span`.
fn nice_step(span: f64, ticks: f64) -> f64 {
    if !(span.is_finite() && span > 0.0) {
        return 1.0;
    }
    let raw = span / ticks;
    let power = 10f64.powf(raw.log10().floor());
    let fraction = raw / power;
    let nice = if fraction <= 1.0 {
        1.0
    } else if fraction <= 2.0 {
        2.0
    } else if fraction <= 2.5 {
        2.5
    } else if fraction <= 5.0 {
        5.0
    } else {
        10.0
    };
    nice * power
}

/// Ticks from 0 to at least `max`: `(step, top)`.
fn linear_ticks(max: f64) -> (f64, f64) {
    let step = nice_step(max, 5.0);
    let top = (max / step).ceil().max(1.0) * step;
    (step, top)
}

/// The tick values 0, step, 2 step, ... up to `top` (at most 50).
fn tick_values(step: f64, top: f64) -> Vec<f64> {
    (0..50)
        .map(|i| f64::from(i) * step)
        .take_while(|v| *v <= top + step * 1e-9)
        .collect()
}

/// Percentage tick label with just enough decimals for `step`.
fn tick_pct(value: f64, step: f64) -> String {
    let pct_step = step * 100.0;
    let decimals = (0..=6)
        .find(|&d| {
            let scaled = pct_step * 10f64.powi(d);
            (scaled - scaled.round()).abs() < 1e-6 * scaled.max(1.0)
        })
        .unwrap_or(6);
    let decimals = usize::try_from(decimals).unwrap_or(6);
    format!("{:.decimals$}%", value * 100.0)
}

/// Shortens a label to `max` characters with an ellipsis.
fn shorten(s: &str, max: usize) -> String {
    if s.chars().count() <= max {
        s.to_owned()
    } else {
        let mut out: String = s.chars().take(max.saturating_sub(1)).collect();
        out.push('\u{2026}');
        out
    }
}

/// The confidence of the report's intervals, as words: `95%`.
pub fn confidence_words(alpha: f64) -> String {
    let c = (1.0 - alpha) * 100.0;
    if (c - c.round()).abs() < 1e-9 {
        format!("{c:.0}%")
    } else {
        format!("{c:.1}%")
    }
}

// ---- rates ---------------------------------------------------------------------------

/// Dot-and-whisker chart of each group's rate with its Wilson interval, against the
/// pooled rate (`svg#rates-chart`).
#[derive(Debug, Clone, PartialEq)]
pub struct RatesChart {
    height: f64,
    conf: String,
    pooled: String,
    pooled_x: f64,
    top: f64,
    plot_bottom: f64,
    axis_x: f64,
    ticks: Vec<(f64, String)>,
    rows: Vec<RateRow>,
}

#[derive(Debug, Clone, PartialEq)]
struct RateRow {
    code: String,
    label: String,
    title: String,
    class: &'static str,
    band: bool,
    cy: f64,
    x1: f64,
    x2: f64,
    dot: f64,
    value: String,
}

const RATES_LEFT: f64 = 112.0;
const RATES_RIGHT: f64 = 62.0;
const RATES_ROW: f64 = 26.0;

impl RatesChart {
    /// The chart of `report`; `None` when there are no groups.
    pub fn of(report: &Report) -> Option<Self> {
        let groups = &report.groups;
        if groups.is_empty() {
            return None;
        }
        let pooled = report.totals.rate;
        let conf = confidence_words(report.parameters.alpha);
        let (left, top, row, bottom) = (RATES_LEFT, 34.0, RATES_ROW, 40.0);
        let plot_w = WIDTH - left - RATES_RIGHT;
        let plot_bottom = top + row * groups.len() as f64;
        let max = groups
            .iter()
            .map(|g| g.rate_ci.upper.max(g.rate))
            .fold(pooled, f64::max)
            .max(1e-6);
        let (step, x_max) = linear_ticks(max * 1.04);
        let x = |v: f64| left + (v / x_max).clamp(0.0, 1.0) * plot_w;
        let rows = groups
            .iter()
            .enumerate()
            .map(|(i, g)| {
                let mark = flag_mark(g.flag);
                RateRow {
                    code: g.code.clone(),
                    label: shorten(&g.code, 15),
                    title: format!(
                        "{}{}: {} ({conf} interval {} to {}), {} defective of {} inspected{}",
                        g.code,
                        g.name
                            .as_deref()
                            .map(|l| format!(" ({l})"))
                            .unwrap_or_default(),
                        fmt_pct(g.rate),
                        fmt_pct(g.rate_ci.lower),
                        fmt_pct(g.rate_ci.upper),
                        fmt_count(g.defective),
                        fmt_count(g.inspected),
                        match g.flag {
                            Some(Flag::Above) => "; flagged above the pooled rate",
                            Some(Flag::Below) => "; flagged below the pooled rate",
                            None => "",
                        }
                    ),
                    class: flag_class(g.flag),
                    band: i % 2 == 0,
                    cy: top + row * (i as f64 + 0.5),
                    x1: x(g.rate_ci.lower),
                    x2: x(g.rate_ci.upper),
                    dot: x(g.rate),
                    value: if mark.is_empty() {
                        fmt_pct(g.rate)
                    } else {
                        format!("{} {mark}", fmt_pct(g.rate))
                    },
                }
            })
            .collect();
        Some(Self {
            height: plot_bottom + bottom,
            pooled: fmt_pct(pooled),
            pooled_x: x(pooled),
            top,
            plot_bottom,
            axis_x: left + plot_w / 2.0,
            ticks: tick_values(step, x_max)
                .into_iter()
                .map(|v| (x(v), tick_pct(v, step)))
                .collect(),
            rows,
            conf,
        })
    }
}

impl Render for RatesChart {
    fn render(&self) -> Markup {
        let (top, bottom) = (self.top, self.plot_bottom);
        html! {
            svg #rates-chart .chart viewBox={ "0 0 " (C(WIDTH)) " " (C(self.height)) } role="img"
                aria-labelledby="rates-chart-title rates-chart-desc" preserveAspectRatio="xMinYMin meet" {
                title #rates-chart-title { "Defect rate of each group with its " (self.conf) " Wilson interval" }
                desc #rates-chart-desc {
                    "One row per group: the dot is the rate, the whisker its " (self.conf)
                    " interval; the dashed line is the pooled rate " (self.pooled)
                    ". Groups flagged above the pooled rate are marked " (UP) " (orange), below " (DOWN) " (blue)."
                }
                @for (x, label) in &self.ticks {
                    line .grid x1=(C(*x)) y1=(C(top - 6.0)) x2=(C(*x)) y2=(C(bottom)) {}
                    text .tick x=(C(*x)) y=(C(bottom + 16.0)) text-anchor="middle" { (label) }
                }
                text .axis-label x=(C(self.axis_x)) y=(C(bottom + 34.0)) text-anchor="middle" {
                    "defect rate (" (self.conf) " Wilson interval)"
                }
                line .pooled x1=(C(self.pooled_x)) y1=(C(top - 8.0)) x2=(C(self.pooled_x)) y2=(C(bottom)) stroke-dasharray="5 4" {}
                text .pooled-label x=(C(self.pooled_x)) y=(C(top - 14.0)) text-anchor="middle" { "pooled " (self.pooled) }
                @for r in &self.rows {
                    g class={ "group " (r.class) } data-name=(r.code) {
                        title { (r.title) }
                        @if r.band {
                            rect .band x="0" y=(C(r.cy - RATES_ROW / 2.0)) width=(C(WIDTH)) height=(C(RATES_ROW)) {}
                        }
                        text .row-label x=(C(RATES_LEFT - 10.0)) y=(C(r.cy + 4.0)) text-anchor="end" { (r.label) }
                        line .whisker x1=(C(r.x1)) y1=(C(r.cy)) x2=(C(r.x2)) y2=(C(r.cy)) {}
                        line .whisker x1=(C(r.x1)) y1=(C(r.cy - 5.0)) x2=(C(r.x1)) y2=(C(r.cy + 5.0)) {}
                        line .whisker x1=(C(r.x2)) y1=(C(r.cy - 5.0)) x2=(C(r.x2)) y2=(C(r.cy + 5.0)) {}
                        circle .dot cx=(C(r.dot)) cy=(C(r.cy)) r="4.5" {}
                        text .value x=(C(WIDTH - RATES_RIGHT + 10.0)) y=(C(r.cy + 4.0)) { (r.value) }
                    }
                }
            }
        }
    }
}

// ---- funnel --------------------------------------------------------------------------

/// Funnel chart (`svg#funnel-chart`): each group's rate against its units inspected
/// (log scale), with 95% and 99.8% limits around the pooled rate
/// ([`dispar_stats::funnel`]), widened by sqrt(phi) when the report's overdispersion
/// note says it was applied.
#[derive(Debug, Clone, PartialEq)]
pub struct FunnelChart {
    pooled: String,
    /// `× 1.23` after the outer limits' legend when widened.
    scale_words: Option<String>,
    plot: (f64, f64, f64, f64),
    y_ticks: Vec<(f64, String)>,
    x_grid: Vec<XGrid>,
    limits: Vec<LimitCurve>,
    pooled_y: f64,
    points: Vec<FunnelPoint>,
}

#[derive(Debug, Clone, PartialEq)]
struct XGrid {
    x: f64,
    major: bool,
    label: Option<(String, &'static str)>,
}

#[derive(Debug, Clone, PartialEq)]
struct LimitCurve {
    class: &'static str,
    dashed: bool,
    d: String,
}

#[derive(Debug, Clone, PartialEq)]
struct FunnelPoint {
    code: String,
    class: &'static str,
    title: String,
    cx: f64,
    cy: f64,
    tx: f64,
    ty: f64,
    anchor: &'static str,
    label: String,
}

const FUNNEL_HEIGHT: f64 = 360.0;
const FUNNEL_LEFT: f64 = 56.0;
const FUNNEL_RIGHT: f64 = 16.0;
const FUNNEL_TOP: f64 = 30.0;
const FUNNEL_BOTTOM: f64 = 46.0;

impl FunnelChart {
    /// The chart of `report`; `None` when there is nothing to draw (no groups, or a
    /// pooled rate of 0 or 1, where the limits collapse).
    pub fn of(report: &Report) -> Option<Self> {
        let groups = &report.groups;
        let pooled = report.totals.rate;
        if groups.is_empty() || !(pooled > 0.0 && pooled < 1.0) {
            return None;
        }
        let scale = report
            .overdispersion
            .as_ref()
            .filter(|o| o.applied && o.phi > 1.0)
            .map_or(1.0, |o| o.phi.sqrt());
        let inner = Funnel::new(pooled, INNER_COVERAGE, scale).ok()?;
        let outer = Funnel::new(pooled, OUTER_COVERAGE, scale).ok()?;
        let (left, top) = (FUNNEL_LEFT, FUNNEL_TOP);
        let plot_w = WIDTH - left - FUNNEL_RIGHT;
        let plot_h = FUNNEL_HEIGHT - top - FUNNEL_BOTTOM;

        let n_min = groups.iter().map(|g| g.inspected).min().unwrap_or(1).max(1) as f64;
        let n_max = groups.iter().map(|g| g.inspected).max().unwrap_or(1).max(1) as f64;
        let lo_exp = (n_min / 1.6).log10().floor();
        let hi_exp = (n_max * 1.6).log10().ceil().max(lo_exp + 1.0);
        let (x_lo, x_hi) = (10f64.powf(lo_exp), 10f64.powf(hi_exp));
        let x = |n: f64| left + (n.max(x_lo).log10() - lo_exp) / (hi_exp - lo_exp) * plot_w;

        let max_rate = groups.iter().map(|g| g.rate).fold(pooled, f64::max);
        let upper_at_min = outer.at(n_min).upper;
        let (step, y_max) = linear_ticks((max_rate.max(upper_at_min) * 1.08).min(1.0));
        let y = |r: f64| top + plot_h - (r / y_max).clamp(-0.05, 1.05) * plot_h;

        // Decades, with 2 and 5 between; labelled at each decade (and at 2 and 5 when
        // the axis spans at most two decades).
        let mut x_grid = Vec::new();
        let mut e = lo_exp;
        while e <= hi_exp + 1e-9 {
            for m in [1.0, 2.0, 5.0] {
                let n = m * 10f64.powf(e);
                if n < x_lo * 0.999 || n > x_hi * 1.001 {
                    continue;
                }
                let xv = x(n);
                let major = m == 1.0;
                let anchor = if xv > WIDTH - FUNNEL_RIGHT - 20.0 {
                    "end"
                } else {
                    "middle"
                };
                x_grid.push(XGrid {
                    x: xv,
                    major,
                    label: (major || hi_exp - lo_exp <= 2.0)
                        .then(|| (fmt_count(n.round() as u64), anchor)),
                });
            }
            e += 1.0;
        }

        let steps = 96;
        let curve = |f: &Funnel, upper: bool| -> String {
            let mut d: Vec<String> = Vec::new();
            for i in 0..=steps {
                let t = f64::from(i) / f64::from(steps);
                let n = 10f64.powf(lo_exp + t * (hi_exp - lo_exp));
                let band = f.at(n);
                let r = if upper {
                    band.upper.min(1.0)
                } else {
                    band.lower
                };
                if r < 0.0 {
                    continue;
                }
                let cmd = if d.is_empty() { 'M' } else { 'L' };
                d.push(format!("{cmd}{},{}", coord(x(n)), coord(y(r))));
            }
            d.join(" ")
        };
        let mut limits = Vec::new();
        for (f, class, dashed) in [
            (&inner, "limit limit-95", true),
            (&outer, "limit limit-998", false),
        ] {
            for upper in [true, false] {
                let d = curve(f, upper);
                if !d.is_empty() {
                    limits.push(LimitCurve { class, dashed, d });
                }
            }
        }

        // Points, labelled; the label goes left of the dot near the right edge, and
        // moves up or down when it would overlap a label already placed.
        let mut placed: Vec<(f64, f64, f64)> = Vec::new(); // (x0, x1, baseline)
        let mut points = Vec::new();
        for g in groups {
            let n = g.inspected.max(1) as f64;
            let (cx, cy) = (x(n), y(g.rate));
            let mark = flag_mark(g.flag);
            let short = shorten(&g.code, 16);
            let label = if mark.is_empty() {
                short
            } else {
                format!("{short} {mark}")
            };
            let label_w = label.chars().count() as f64 * 7.0;
            let (tx, anchor) = if cx > left + plot_w - 90.0 {
                (cx - 8.0, "end")
            } else {
                (cx + 8.0, "start")
            };
            let (x0, x1) = if anchor == "end" {
                (tx - label_w, tx)
            } else {
                (tx, tx + label_w)
            };
            let clashes = |baseline: f64| {
                placed
                    .iter()
                    .any(|&(a, b, y0)| (baseline - y0).abs() < 12.0 && x0 < b && a < x1)
            };
            let ty = [-7.0, 15.0, -19.0, 27.0, -31.0, 39.0]
                .iter()
                .map(|dy| cy + dy)
                .find(|&baseline| !clashes(baseline))
                .unwrap_or(cy - 7.0);
            placed.push((x0, x1, ty));
            points.push(FunnelPoint {
                code: g.code.clone(),
                class: flag_class(g.flag),
                title: format!(
                    "{}: {} defective of {} inspected = {}",
                    g.code,
                    fmt_count(g.defective),
                    fmt_count(g.inspected),
                    fmt_pct(g.rate)
                ),
                cx,
                cy,
                tx,
                ty,
                anchor,
                label,
            });
        }
        Some(Self {
            pooled: fmt_pct(pooled),
            scale_words: (scale > 1.0).then(|| format!("\u{00d7} {scale:.2}")),
            plot: (left, top, plot_w, plot_h),
            y_ticks: tick_values(step, y_max)
                .into_iter()
                .map(|v| (y(v), tick_pct(v, step)))
                .collect(),
            x_grid,
            limits,
            pooled_y: y(pooled),
            points,
        })
    }
}

impl Render for FunnelChart {
    fn render(&self) -> Markup {
        let (left, top, plot_w, plot_h) = self.plot;
        let lx = left + 8.0;
        let (ly, ty) = (top - 14.0, top - 10.0);
        html! {
            svg #funnel-chart .chart viewBox={ "0 0 " (C(WIDTH)) " " (C(FUNNEL_HEIGHT)) } role="img"
                aria-labelledby="funnel-chart-title funnel-chart-desc" preserveAspectRatio="xMinYMin meet" {
                title #funnel-chart-title { "Funnel chart: defect rate against units inspected" }
                desc #funnel-chart-desc {
                    "Each dot is a group. The solid horizontal line is the pooled rate " (self.pooled)
                    "; the dashed curves are its 95% limits and the solid curves its 99.8% limits for a group of that size"
                    @if let Some(s) = &self.scale_words { ", widened " (s) " for overdispersion" }
                    ". Units inspected are on a log scale. Flagged groups are marked " (UP) " (above) or " (DOWN) " (below)."
                }
                defs {
                    clipPath #funnel-clip {
                        rect x=(C(left)) y=(C(top)) width=(C(plot_w)) height=(C(plot_h)) {}
                    }
                }
                @for (yv, label) in &self.y_ticks {
                    line .grid x1=(C(left)) y1=(C(*yv)) x2=(C(left + plot_w)) y2=(C(*yv)) {}
                    text .tick x=(C(left - 8.0)) y=(C(yv + 4.0)) text-anchor="end" { (label) }
                }
                @for g in &self.x_grid {
                    line .grid .minor[!g.major] x1=(C(g.x)) y1=(C(top)) x2=(C(g.x)) y2=(C(top + plot_h)) {}
                    @if let Some((label, anchor)) = &g.label {
                        text .tick x=(C(g.x)) y=(C(top + plot_h + 16.0)) text-anchor=(anchor) { (label) }
                    }
                }
                text .axis-label x=(C(left + plot_w / 2.0)) y=(C(FUNNEL_HEIGHT - 8.0)) text-anchor="middle" {
                    "units inspected (log scale)"
                }
                text .axis-label x="14" y=(C(top + plot_h / 2.0)) text-anchor="middle"
                    transform={ "rotate(-90 14 " (C(top + plot_h / 2.0)) ")" } { "defect rate" }
                g .limits clip-path="url(#funnel-clip)" {
                    @for l in &self.limits {
                        path class=(l.class) d=(l.d) stroke-dasharray=[l.dashed.then_some("6 4")] {}
                    }
                    line .pooled-flat x1=(C(left)) y1=(C(self.pooled_y)) x2=(C(left + plot_w)) y2=(C(self.pooled_y)) {}
                }
                g .legend {
                    line .pooled-flat x1=(C(lx)) y1=(C(ly)) x2=(C(lx + 22.0)) y2=(C(ly)) {}
                    text x=(C(lx + 28.0)) y=(C(ty)) { "pooled " (self.pooled) }
                    line .limit .limit-95 x1=(C(lx + 128.0)) y1=(C(ly)) x2=(C(lx + 150.0)) y2=(C(ly)) stroke-dasharray="6 4" {}
                    text x=(C(lx + 156.0)) y=(C(ty)) { "95% limits" }
                    line .limit .limit-998 x1=(C(lx + 236.0)) y1=(C(ly)) x2=(C(lx + 258.0)) y2=(C(ly)) {}
                    text x=(C(lx + 264.0)) y=(C(ty)) {
                        "99.8% limits"
                        @if let Some(s) = &self.scale_words { " " (s) }
                    }
                }
                @for p in &self.points {
                    g class={ "group " (p.class) } data-name=(p.code) {
                        title { (p.title) }
                        circle .dot cx=(C(p.cx)) cy=(C(p.cy)) r="5" {}
                        text .point-label x=(C(p.tx)) y=(C(p.ty)) text-anchor=(p.anchor) { (p.label) }
                    }
                }
            }
        }
    }
}

// ---- reference distribution ---------------------------------------------------------

/// The test's reference distribution (`svg#reference-chart`), for readers who check
/// the arithmetic: the chi-square density on the report's df, the upper tail beyond the
/// critical value shaded, the critical value (dashed) and the statistic (solid) marked.
/// When the statistic is more than [`FAR_OUT`] times the critical value a linear axis
/// would squash the curve into its left edge, so the horizontal axis turns to a log
/// scale, and the chart says so in words.
#[derive(Debug, Clone, PartialEq)]
pub struct ReferenceChart {
    /// The horizontal axis is on a log scale.
    pub log_scale: bool,
    stat_name: &'static str,
    df: String,
    statistic: String,
    critical: String,
    alpha: String,
    /// Words on the method when the p-value does not come from this curve.
    exact_words: Option<String>,
    /// "X² = 1,234 is 130 times the critical value" for the log scale.
    far_words: Option<String>,
    curve: String,
    tail: String,
    plot: (f64, f64, f64, f64),
    x_ticks: Vec<(f64, String)>,
    stat_x: f64,
    crit_x: f64,
    stat_anchor: &'static str,
    crit_label: (f64, &'static str),
}

/// Beyond this many times the critical value the statistic is drawn on a log axis.
pub const FAR_OUT: f64 = 3.0;

const REF_WIDTH: f64 = 720.0;
const REF_HEIGHT: f64 = 264.0;
const REF_LEFT: f64 = 24.0;
const REF_RIGHT: f64 = 24.0;
const REF_TOP: f64 = 64.0;
const REF_BOTTOM: f64 = 44.0;
const REF_SAMPLES: u32 = 240;

/// `text-anchor` for a label at `x` that should stay inside `[lo, hi]`.
fn anchor_within(x: f64, lo: f64, hi: f64) -> &'static str {
    if x < lo + 60.0 {
        "start"
    } else if x > hi - 60.0 {
        "end"
    } else {
        "middle"
    }
}

/// Where the critical value's label goes: on the side of its line away from the
/// statistic's line (which would cross it), unless there is no room there. Returns
/// the label's x and its `text-anchor`.
fn beside(crit_x: f64, stat_x: f64, label_w: f64, lo: f64, hi: f64) -> (f64, &'static str) {
    let left_room = crit_x - 4.0 - label_w >= lo;
    let right_room = crit_x + 4.0 + label_w <= hi;
    let go_left = if stat_x >= crit_x {
        left_room || !right_room
    } else {
        !right_room && left_room
    };
    if go_left {
        (crit_x - 4.0, "end")
    } else {
        (crit_x + 4.0, "start")
    }
}

impl ReferenceChart {
    /// The chart of the report's test; `None` without a test or with a statistic, df or
    /// critical value that cannot be drawn.
    pub fn of(report: &Report) -> Option<Self> {
        let t = report.test.as_ref()?;
        let (stat, crit, df) = (t.statistic, t.critical_value, t.df);
        if df == 0 || !(stat.is_finite() && stat >= 0.0 && crit.is_finite() && crit > 0.0) {
            return None;
        }
        let dff = df as f64;
        let spread = (2.0 * dff).sqrt();
        // The bulk of the density (mean df, sd sqrt(2 df)) and the critical value with
        // room to its right for the tail.
        let bulk = (dff + 4.0 * spread).max(crit * 1.35);
        let log_scale = stat > FAR_OUT * crit && stat > bulk;
        let (left, top) = (REF_LEFT, REF_TOP);
        let plot_w = REF_WIDTH - left - REF_RIGHT;
        let plot_h = REF_HEIGHT - top - REF_BOTTOM;

        // Horizontal scale: value -> position, and the samples of the curve.
        let (lo, hi) = if log_scale {
            let lo = (dff - 4.0 * spread).max(0.02 * dff).max(0.01);
            (
                10f64.powf(lo.log10().floor()),
                10f64.powf((stat * 1.3).log10().ceil()),
            )
        } else {
            (0.0, bulk.max(stat * 1.08))
        };
        let to_unit = |v: f64| {
            if log_scale {
                (v.max(lo).log10() - lo.log10()) / (hi.log10() - lo.log10())
            } else {
                v / hi
            }
        };
        let x = |v: f64| left + to_unit(v).clamp(0.0, 1.0) * plot_w;
        let at = |u: f64| {
            if log_scale {
                10f64.powf(lo.log10() + u * (hi.log10() - lo.log10()))
            } else {
                u * hi
            }
        };
        let samples: Vec<(f64, f64)> = (0..=REF_SAMPLES)
            .map(|i| at(f64::from(i) / f64::from(REF_SAMPLES)))
            .filter_map(|v| {
                dispar_stats::chisq::density(v, df)
                    .ok()
                    .filter(|d| d.is_finite())
                    .map(|d| (v, d))
            })
            .collect();
        // On 1 df the density is infinite at 0: its peak is cut at the height it has
        // 2% into the axis, which keeps the tail visible.
        let y_max = samples
            .iter()
            .filter(|(v, _)| df > 2 || to_unit(*v) >= 0.02)
            .map(|&(_, d)| d)
            .fold(0.0, f64::max);
        if y_max <= 0.0 {
            return None;
        }
        let y = |d: f64| top + plot_h - (d / y_max).min(1.04) * plot_h;
        let base = top + plot_h;
        let path = |points: &[(f64, f64)]| -> String {
            points
                .iter()
                .enumerate()
                .map(|(i, &(v, d))| {
                    format!(
                        "{}{},{}",
                        if i == 0 { 'M' } else { 'L' },
                        coord(x(v)),
                        coord(y(d))
                    )
                })
                .collect::<Vec<_>>()
                .join(" ")
        };
        let curve = path(&samples);
        let mut tail_points: Vec<(f64, f64)> = Vec::new();
        if let Ok(d) = dispar_stats::chisq::density(crit, df) {
            tail_points.push((crit, d));
        }
        tail_points.extend(samples.iter().copied().filter(|&(v, _)| v > crit));
        let tail = if tail_points.is_empty() {
            String::new()
        } else {
            let first = x(tail_points[0].0);
            let last = x(tail_points[tail_points.len() - 1].0);
            format!(
                "M{},{} {} L{},{} Z",
                coord(first),
                coord(base),
                path(&tail_points).replacen('M', "L", 1),
                coord(last),
                coord(base)
            )
        };

        let x_ticks = if log_scale {
            let mut ticks = Vec::new();
            let mut e = lo.log10().round();
            while e <= hi.log10().round() + 1e-9 {
                let v = 10f64.powf(e);
                let label = if v >= 1.0 {
                    fmt_count(v.round() as u64)
                } else {
                    fmt_num(v, usize::try_from((-e).round() as i64).unwrap_or(2))
                };
                ticks.push((x(v), label));
                e += 1.0;
            }
            ticks
        } else {
            let (step, top_tick) = linear_ticks(hi);
            let decimals = if step >= 1.0 { 0 } else { 2 };
            tick_values(step, top_tick)
                .into_iter()
                .filter(|v| *v <= hi * (1.0 + 1e-9))
                .map(|v| (x(v), fmt_num(v, decimals)))
                .collect()
        };
        let stat_name = if t.method == "g" {
            "G\u{00b2}"
        } else {
            "X\u{00b2}"
        };
        let statistic = fmt_num(stat, 2);
        let (stat_x, crit_x) = (x(stat), x(crit));
        let right = left + plot_w;
        let critical = fmt_num(crit, 2);
        let alpha = report.parameters.alpha.to_string();
        // About 6.2 units a character at the label's 11px.
        let crit_w = 6.2 * (critical.chars().count() + alpha.chars().count() + 21) as f64;
        Some(Self {
            log_scale,
            stat_name,
            df: fmt_count(df),
            critical,
            alpha,
            exact_words: matches!(t.method, "fisher" | "monte-carlo").then(|| {
                format!(
                    "The p-value of this report comes from {}, not from this curve; the curve is the large-sample reference.",
                    dispar_core::report::text::method_words(t.method)
                )
            }),
            far_words: log_scale.then(|| {
                format!(
                    "{stat_name} = {statistic} is {} times the critical value",
                    fmt_num(stat / crit, 0)
                )
            }),
            statistic,
            curve,
            tail,
            plot: (left, top, plot_w, plot_h),
            x_ticks,
            stat_anchor: anchor_within(stat_x, left, right),
            crit_label: beside(crit_x, stat_x, crit_w, left, right),
            stat_x,
            crit_x,
        })
    }
}

impl Render for ReferenceChart {
    fn render(&self) -> Markup {
        let (left, top, plot_w, plot_h) = self.plot;
        let base = top + plot_h;
        let n = self.stat_name;
        html! {
            svg #reference-chart .chart .reference viewBox={ "0 0 " (C(REF_WIDTH)) " " (C(REF_HEIGHT)) } role="img"
                aria-labelledby="reference-chart-title reference-chart-desc" preserveAspectRatio="xMinYMin meet" {
                title #reference-chart-title { "Chi-square distribution on " (self.df) " df, with the statistic and the critical value" }
                desc #reference-chart-desc {
                    "The curve is the chi-square density on " (self.df) " degrees of freedom, the distribution of "
                    (n) " when the groups do not differ. The shaded upper tail beyond the critical value " (self.critical)
                    " (dashed line) holds \u{03b1} = " (self.alpha) " of it. The solid line is this report's statistic, "
                    (n) " = " (self.statistic) "."
                    @if let Some(w) = &self.far_words {
                        " " (w) ", so the horizontal axis is on a log scale."
                    }
                    @if let Some(w) = &self.exact_words { " " (w) }
                }
                defs {
                    clipPath #reference-clip {
                        rect x=(C(left)) y=(C(top - 4.0)) width=(C(plot_w)) height=(C(plot_h + 4.0)) {}
                    }
                }
                @for (x, label) in &self.x_ticks {
                    line .grid x1=(C(*x)) y1=(C(top)) x2=(C(*x)) y2=(C(base)) {}
                    text .tick x=(C(*x)) y=(C(base + 16.0)) text-anchor="middle" { (label) }
                }
                line .axis x1=(C(left)) y1=(C(base)) x2=(C(left + plot_w)) y2=(C(base)) {}
                text .axis-label x=(C(left + plot_w / 2.0)) y=(C(REF_HEIGHT - 8.0)) text-anchor="middle" {
                    (n) " on " (self.df) " df"
                    @if self.log_scale { " (log scale)" }
                }
                g clip-path="url(#reference-clip)" {
                    @if !self.tail.is_empty() { path .tail d=(self.tail) {} }
                    path .density d=(self.curve) {}
                }
                line .critical x1=(C(self.crit_x)) y1=(C(top - 12.0)) x2=(C(self.crit_x)) y2=(C(base)) stroke-dasharray="5 4" {}
                text .critical-label x=(C(self.crit_label.0)) y=(C(top - 16.0)) text-anchor=(self.crit_label.1) {
                    "critical value " (self.critical) " (\u{03b1} = " (self.alpha) ")"
                }
                line .statistic x1=(C(self.stat_x)) y1=(C(top - 30.0)) x2=(C(self.stat_x)) y2=(C(base)) {}
                text .statistic-label x=(C(self.stat_x)) y=(C(top - 34.0)) text-anchor=(self.stat_anchor) {
                    (n) " = " (self.statistic)
                }
                @if let Some(w) = &self.far_words {
                    text .scale-note x=(C(left)) y="14" text-anchor="start" {
                        "log scale: " (w)
                    }
                }
            }
        }
    }
}

// ---- series --------------------------------------------------------------------------

/// The verdict of one period, as the series chart and table show it.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Verdict {
    /// Significant at alpha.
    Significant,
    /// Not significant at alpha.
    NotSignificant,
    /// No test was possible.
    NotTestable,
}

impl Verdict {
    /// Of a series point's `reject`.
    pub fn of(reject: Option<bool>) -> Self {
        match reject {
            Some(true) => Verdict::Significant,
            Some(false) => Verdict::NotSignificant,
            None => Verdict::NotTestable,
        }
    }

    /// The class of its marks and tags.
    pub fn class(self) -> &'static str {
        match self {
            Verdict::Significant => "significant",
            Verdict::NotSignificant => "not-significant",
            Verdict::NotTestable => "untestable",
        }
    }

    /// In words.
    pub fn words(self) -> &'static str {
        match self {
            Verdict::Significant => "significant",
            Verdict::NotSignificant => "not significant",
            Verdict::NotTestable => "not testable",
        }
    }
}

/// Strip of verdicts over periods (`svg#series-chart`): one column per period. The
/// top row is the verdict (filled: significant; outlined: not significant; dashed
/// grey: not testable; the p-value in the tooltip); below it one row per group that
/// was flagged or changed in some period, with ▲ where it was flagged above or ▼ below
/// that period's pooled rate, and a ring around the mark where the group changed
/// against its own usual (solid: worse, dashed: better; shape and dash, not colour
/// alone). Each column links to that period's report.
#[derive(Debug, Clone, PartialEq)]
pub struct SeriesChart {
    height: f64,
    alpha: String,
    rows: Vec<(f64, String)>,
    rows_bottom: f64,
    columns: Vec<SeriesColumn>,
}

#[derive(Debug, Clone, PartialEq)]
struct SeriesColumn {
    period: String,
    verdict: Verdict,
    title: String,
    href: Option<String>,
    x0: f64,
    cell_w: f64,
    marks: Vec<SeriesMark>,
    /// Rings around the marks of the groups that changed against their own usual:
    /// (cx, cy, r, code, `worse` or `better`).
    rings: Vec<(f64, f64, f64, String, &'static str)>,
    tick: Option<(f64, f64)>,
}

#[derive(Debug, Clone, PartialEq)]
enum SeriesMark {
    Above(String),
    Below(String),
    None(f64, f64),
}

const SERIES_LEFT: f64 = 96.0;
const SERIES_TOP: f64 = 8.0;
const SERIES_VERDICT_H: f64 = 22.0;

impl SeriesChart {
    /// The strip of `points`; `links[i]` is the report page of `points[i]`.
    pub fn of(points: &[SeriesPoint], alpha: f64, links: &[String]) -> Self {
        // Groups that were flagged or changed at least once, in order of code.
        let mut names: Vec<&str> = points
            .iter()
            .flat_map(|p| {
                p.flagged
                    .iter()
                    .map(|f| f.code.as_str())
                    .chain(p.changes.iter().map(|c| c.code.as_str()))
            })
            .collect();
        names.sort_unstable();
        names.dedup();
        let (left, right, top, verdict_h, row_h, bottom) =
            (SERIES_LEFT, 12.0, SERIES_TOP, SERIES_VERDICT_H, 20.0, 62.0);
        let rows_top = top + verdict_h + 10.0;
        let rows_bottom = rows_top + row_h * names.len() as f64;
        let plot_w = SERIES_WIDTH - left - right;
        let count = points.len().max(1) as f64;
        let slot = plot_w / count;
        let cell_w = (slot - 2.0).max(1.0);
        let mark = (row_h * 0.32).min(slot * 0.4).max(2.0);
        let label_every = (count / 26.0).ceil().max(1.0) as usize;
        let row_y = |r: usize| rows_top + row_h * (r as f64 + 0.5);
        let triangle = |cx: f64, tip: f64, base: f64| {
            format!(
                "M{},{} L{},{} L{},{} Z",
                coord(cx),
                coord(tip),
                coord(cx - mark),
                coord(base),
                coord(cx + mark),
                coord(base)
            )
        };
        let columns = points
            .iter()
            .enumerate()
            .map(|(i, p)| {
                let x0 = left + slot * i as f64 + 1.0;
                let cx = x0 + cell_w / 2.0;
                let period = p.period.map(|x| x.to_string()).unwrap_or_default();
                let flagged_words = if p.flagged.is_empty() {
                    "no group flagged".to_owned()
                } else {
                    format!(
                        "flagged: {}",
                        p.flagged
                            .iter()
                            .map(|f| format!("{} {}", f.code, flag_mark(Some(f.flag))))
                            .collect::<Vec<_>>()
                            .join(", ")
                    )
                };
                let verdict = Verdict::of(p.significant);
                let changed_words = if p.changes.is_empty() {
                    String::new()
                } else {
                    format!(
                        "; changed: {}",
                        p.changes
                            .iter()
                            .map(|c| format!("{} {} {}", c.code, CHANGE, c.verdict.as_str()))
                            .collect::<Vec<_>>()
                            .join(", ")
                    )
                };
                let title = match (verdict, p.p_value) {
                    (Verdict::NotTestable, _) | (_, None) => {
                        format!("{period}: {}{changed_words}", p.verdict)
                    }
                    (v, Some(pv)) => format!(
                        "{period}: {} at \u{03b1} = {alpha} ({}); {flagged_words}{changed_words}",
                        v.words(),
                        p_equals(pv)
                    ),
                };
                let rings = names
                    .iter()
                    .enumerate()
                    .filter_map(|(r, name)| {
                        let c = p.changes.iter().find(|c| c.code == *name)?;
                        Some((
                            cx,
                            row_y(r),
                            (mark * 1.9).min(slot * 0.48).max(3.0),
                            c.code.clone(),
                            c.verdict.as_str(),
                        ))
                    })
                    .collect();
                let marks = names
                    .iter()
                    .enumerate()
                    .map(|(r, name)| {
                        let cy = row_y(r);
                        match p.flagged.iter().find(|f| f.code == *name).map(|f| f.flag) {
                            Some(Flag::Above) => {
                                SeriesMark::Above(triangle(cx, cy - mark, cy + mark * 0.8))
                            }
                            Some(Flag::Below) => {
                                SeriesMark::Below(triangle(cx, cy + mark, cy - mark * 0.8))
                            }
                            None => SeriesMark::None(cx, cy),
                        }
                    })
                    .collect();
                SeriesColumn {
                    period,
                    verdict,
                    title,
                    href: links.get(i).cloned(),
                    x0,
                    cell_w,
                    marks,
                    rings,
                    tick: (i % label_every == 0).then_some((cx + 4.0, rows_bottom + 14.0)),
                }
            })
            .collect();
        Self {
            height: rows_bottom + bottom,
            alpha: alpha.to_string(),
            rows: names
                .iter()
                .enumerate()
                .map(|(r, name)| (row_y(r), shorten(name, 12)))
                .collect(),
            rows_bottom,
            columns,
        }
    }
}

impl SeriesColumn {
    fn body(&self, rows_bottom: f64) -> Markup {
        let top = SERIES_TOP;
        html! {
            title { (self.title) }
            rect .hit x=(C(self.x0)) y=(C(top)) width=(C(self.cell_w)) height=(C(rows_bottom - top)) {}
            rect .cell x=(C(self.x0)) y=(C(top)) width=(C(self.cell_w)) height=(C(SERIES_VERDICT_H)) rx="2" {}
            @for m in &self.marks {
                @match m {
                    SeriesMark::Above(d) => { path .mark .above d=(d) {} }
                    SeriesMark::Below(d) => { path .mark .below d=(d) {} }
                    SeriesMark::None(x, y) => { circle .mark .none cx=(C(*x)) cy=(C(*y)) r="1.5" {} }
                }
            }
            @for (x, y, r, code, verdict) in &self.rings {
                circle class={ "ring " (verdict) } data-name=(code) cx=(C(*x)) cy=(C(*y)) r=(C(*r))
                    stroke-dasharray=[(*verdict == "better").then_some("3 2")] {}
            }
        }
    }
}

impl Render for SeriesChart {
    fn render(&self) -> Markup {
        let left = SERIES_LEFT;
        let plot_right = SERIES_WIDTH - 12.0;
        html! {
            svg #series-chart .chart .series viewBox={ "0 0 " (C(SERIES_WIDTH)) " " (C(self.height)) } role="img"
                aria-labelledby="series-chart-title series-chart-desc" preserveAspectRatio="xMinYMin meet" {
                title #series-chart-title { "Verdict, flagged groups and changes per period" }
                desc #series-chart-desc {
                    "One column per period. Top row: a filled cell where the difference between the groups is significant at \u{03b1} = "
                    (self.alpha) ", an outlined cell where it is not significant, a dashed grey cell where the period could not be tested. Below, one row per group flagged or changed in any period: "
                    (UP) " where it was flagged above that period's pooled rate, " (DOWN) " where below; a ring (" (CHANGE)
                    ") around a group's mark where it changed against its own usual: a solid ring worse, a dashed ring better."
                }
                text .row-label x=(C(left - 8.0)) y=(C(SERIES_TOP + SERIES_VERDICT_H / 2.0 + 4.0)) text-anchor="end" { "verdict" }
                @for (cy, label) in &self.rows {
                    line .grid x1=(C(left)) y1=(C(*cy)) x2=(C(plot_right)) y2=(C(*cy)) {}
                    text .row-label x=(C(left - 8.0)) y=(C(cy + 4.0)) text-anchor="end" { (label) }
                }
                @for c in &self.columns {
                    @match &c.href {
                        Some(href) => {
                            a href=(href) class={ "period " (c.verdict.class()) } data-period=(c.period) { (c.body(self.rows_bottom)) }
                        }
                        None => {
                            g class={ "period " (c.verdict.class()) } data-period=(c.period) { (c.body(self.rows_bottom)) }
                        }
                    }
                    @if let Some((x, y)) = c.tick {
                        text .tick x=(C(x)) y=(C(y)) text-anchor="end" transform={ "rotate(-45 " (C(x)) " " (C(y)) ")" } { (c.period) }
                    }
                }
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn nice_steps_are_one_two_or_five_times_a_power_of_ten() {
        assert!((nice_step(0.025, 5.0) - 0.005).abs() < 1e-12);
        assert!((nice_step(10.0, 5.0) - 2.0).abs() < 1e-12);
        assert!((nice_step(0.012, 5.0) - 0.0025).abs() < 1e-12);
        let (step, top) = linear_ticks(0.0231);
        assert!((step - 0.005).abs() < 1e-12 && (top - 0.025).abs() < 1e-12);
        assert_eq!(tick_values(0.005, 0.025).len(), 6);
    }

    #[test]
    fn tick_labels_have_the_decimals_their_step_needs() {
        assert_eq!(tick_pct(0.01, 0.005), "1.0%");
        assert_eq!(tick_pct(0.02, 0.01), "2%");
        assert_eq!(tick_pct(0.0025, 0.0025), "0.25%");
        assert_eq!(tick_pct(0.0, 0.0002), "0.00%");
    }

    #[test]
    fn long_labels_are_shortened_with_an_ellipsis() {
        assert_eq!(shorten("KES", 5), "KES");
        assert_eq!(shorten("ABCDEFG", 5), "ABCD\u{2026}");
    }

    #[test]
    fn coordinates_render_without_exponents() {
        assert_eq!(C(1e-9).render().into_string(), "0");
        assert_eq!(C(12.345).render().into_string(), "12.35");
    }
}
