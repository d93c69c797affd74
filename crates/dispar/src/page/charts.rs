//! Server-side SVG charts: group rates with their intervals ([`rates_chart`]), the
//! funnel of rate against units inspected ([`funnel_chart`]), and the strip of
//! verdicts over periods ([`series_chart`]).
//!
//! The charts carry no inline styles (the page's Content-Security-Policy allows only
//! its own style sheet): colours come from classes styled by the page, and the few
//! presentation attributes SVG has (`stroke-dasharray`, `text-anchor`). Each chart is
//! sized by its `viewBox` and scales to the width of its container.

use std::fmt::Write as _;

use dispar_core::report::model::Flag;
use dispar_core::report::{Report, SeriesPoint};

use super::format::{coord, escape, fmt_count, fmt_p, fmt_pct};

/// Standard normal quantile for a two-sided 95% band, Phi^-1(0.975) (from memory;
/// checked against scipy.stats.norm.ppf(0.975) = 1.959963984540054).
pub const Z_95: f64 = 1.959_963_984_540_054;
/// Standard normal quantile for a two-sided 99.8% band, Phi^-1(0.999) (from memory;
/// checked against scipy.stats.norm.ppf(0.999) = 3.090232306167813).
pub const Z_998: f64 = 3.090_232_306_167_813;

/// Width of the coordinate system of the two report charts (shown side by side on a
/// laptop, so about their width in CSS pixels there: text keeps its size).
const WIDTH: f64 = 540.0;

/// Width of the series chart's coordinate system (full width of the page).
const SERIES_WIDTH: f64 = 900.0;

/// The class of a group's mark: `above`, `below` or `level`.
fn flag_class(flag: Option<Flag>) -> &'static str {
    match flag {
        Some(Flag::Above) => "above",
        Some(Flag::Below) => "below",
        None => "level",
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

/// Dot-and-whisker chart of each group's rate with its Wilson interval, against the
/// pooled rate (`svg#rates-chart`). `None` when there are no groups.
pub fn rates_chart(report: &Report) -> Option<String> {
    let groups = &report.groups;
    if groups.is_empty() {
        return None;
    }
    let pooled = report.totals.rate;
    let conf = confidence_words(report.parameters.alpha);
    let (left, right, top, row, bottom) = (112.0, 62.0, 34.0, 26.0, 40.0);
    let plot_w = WIDTH - left - right;
    let height = top + row * groups.len() as f64 + bottom;
    let max = groups
        .iter()
        .map(|g| g.rate_ci.upper.max(g.rate))
        .fold(pooled, f64::max)
        .max(1e-6);
    let (step, x_max) = linear_ticks(max * 1.04);
    let x = |v: f64| left + (v / x_max).clamp(0.0, 1.0) * plot_w;
    let plot_bottom = top + row * groups.len() as f64;

    let mut s = String::new();
    let _ = write!(
        s,
        r#"<svg id="rates-chart" class="chart" viewBox="0 0 {w} {h}" role="img" aria-labelledby="rates-chart-title rates-chart-desc" preserveAspectRatio="xMinYMin meet">"#,
        w = coord(WIDTH),
        h = coord(height),
    );
    let _ = write!(
        s,
        r#"<title id="rates-chart-title">Defect rate of each group with its {conf} Wilson interval</title><desc id="rates-chart-desc">One row per group: the dot is the rate, the whisker its {conf} interval; the dashed line is the pooled rate {pooled}. Red dots are flagged above the pooled rate, blue dots below.</desc>"#,
        pooled = fmt_pct(pooled),
    );
    // Grid and x axis.
    let mut v = 0.0;
    let mut guard = 0;
    while v <= x_max + step * 1e-9 && guard < 50 {
        let xv = x(v);
        let _ = write!(
            s,
            r#"<line class="grid" x1="{x}" y1="{t}" x2="{x}" y2="{b}"/><text class="tick" x="{x}" y="{ty}" text-anchor="middle">{label}</text>"#,
            x = coord(xv),
            t = coord(top - 6.0),
            b = coord(plot_bottom),
            ty = coord(plot_bottom + 16.0),
            label = tick_pct(v, step),
        );
        v += step;
        guard += 1;
    }
    let _ = write!(
        s,
        r#"<text class="axis-label" x="{x}" y="{y}" text-anchor="middle">defect rate ({conf} Wilson interval)</text>"#,
        x = coord(left + plot_w / 2.0),
        y = coord(plot_bottom + 34.0),
    );
    // Pooled rate.
    let px = x(pooled);
    let _ = write!(
        s,
        r#"<line class="pooled" x1="{x}" y1="{t}" x2="{x}" y2="{b}" stroke-dasharray="5 4"/><text class="pooled-label" x="{x}" y="{ly}" text-anchor="middle">pooled {rate}</text>"#,
        x = coord(px),
        t = coord(top - 8.0),
        b = coord(plot_bottom),
        ly = coord(top - 14.0),
        rate = fmt_pct(pooled),
    );
    for (i, g) in groups.iter().enumerate() {
        let cy = top + row * (i as f64 + 0.5);
        let class = flag_class(g.flag);
        let title = format!(
            "{}{}: {} ({} interval {} to {}), {} defective of {} inspected{}",
            g.code,
            g.name
                .as_deref()
                .map(|l| format!(" ({l})"))
                .unwrap_or_default(),
            fmt_pct(g.rate),
            conf,
            fmt_pct(g.rate_ci.lower),
            fmt_pct(g.rate_ci.upper),
            fmt_count(g.defective),
            fmt_count(g.inspected),
            match g.flag {
                Some(Flag::Above) => "; flagged above the pooled rate",
                Some(Flag::Below) => "; flagged below the pooled rate",
                None => "",
            }
        );
        let (x1, x2) = (x(g.rate_ci.lower), x(g.rate_ci.upper));
        let _ = write!(
            s,
            r#"<g class="group {class}" data-name="{name}"><title>{title}</title>"#,
            name = escape(&g.code),
            title = escape(&title),
        );
        if i % 2 == 0 {
            let _ = write!(
                s,
                r#"<rect class="band" x="0" y="{y}" width="{w}" height="{h}"/>"#,
                y = coord(cy - row / 2.0),
                w = coord(WIDTH),
                h = coord(row),
            );
        }
        let _ = write!(
            s,
            r#"<text class="row-label" x="{lx}" y="{ty}" text-anchor="end">{label}</text><line class="whisker" x1="{x1}" y1="{cy}" x2="{x2}" y2="{cy}"/><line class="whisker" x1="{x1}" y1="{c1}" x2="{x1}" y2="{c2}"/><line class="whisker" x1="{x2}" y1="{c1}" x2="{x2}" y2="{c2}"/><circle class="dot" cx="{dx}" cy="{cy}" r="4.5"/><text class="value" x="{vx}" y="{ty}">{rate}</text></g>"#,
            lx = coord(left - 10.0),
            ty = coord(cy + 4.0),
            label = escape(&shorten(&g.code, 15)),
            x1 = coord(x1),
            x2 = coord(x2),
            cy = coord(cy),
            c1 = coord(cy - 5.0),
            c2 = coord(cy + 5.0),
            dx = coord(x(g.rate)),
            vx = coord(WIDTH - right + 10.0),
            rate = fmt_pct(g.rate),
        );
    }
    s.push_str("</svg>");
    Some(s)
}

/// Control limits of the funnel at `n` units: pooled rate +- z sqrt(p(1-p)/n), times
/// `scale` (sqrt(phi) when overdispersion widened the flag limits, else 1).
///
/// The normal approximation to the binomial (Spiegelhalter 2005, "Funnel plots for
/// comparing institutional performance", Statistics in Medicine 24:1185-1202, section
/// 3.1); the page says the chart is a reading aid and the flags come from the
/// analysis-of-means limit.
pub fn funnel_limits(pooled: f64, n: f64, z: f64, scale: f64) -> (f64, f64) {
    let half = z * scale * (pooled * (1.0 - pooled) / n).sqrt();
    (pooled - half, pooled + half)
}

/// Funnel chart (`svg#funnel-chart`): each group's rate against its units inspected
/// (log scale), with 95% and 99.8% limits around the pooled rate, widened by sqrt(phi)
/// when the report's overdispersion note says it was applied. `None` when there is
/// nothing to draw (no groups, or a pooled rate of 0 or 1, where the limits collapse).
pub fn funnel_chart(report: &Report) -> Option<String> {
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
    let (left, right, top, bottom) = (56.0, 16.0, 30.0, 46.0);
    let height = 360.0;
    let plot_w = WIDTH - left - right;
    let plot_h = height - top - bottom;

    let n_min = groups.iter().map(|g| g.inspected).min().unwrap_or(1).max(1) as f64;
    let n_max = groups.iter().map(|g| g.inspected).max().unwrap_or(1).max(1) as f64;
    let lo_exp = (n_min / 1.6).log10().floor();
    let hi_exp = (n_max * 1.6).log10().ceil().max(lo_exp + 1.0);
    let (x_lo, x_hi) = (10f64.powf(lo_exp), 10f64.powf(hi_exp));
    let x = |n: f64| left + (n.max(x_lo).log10() - lo_exp) / (hi_exp - lo_exp) * plot_w;

    let max_rate = groups.iter().map(|g| g.rate).fold(pooled, f64::max);
    let upper_at_min = funnel_limits(pooled, n_min, Z_998, scale).1;
    let (step, y_max) = linear_ticks((max_rate.max(upper_at_min) * 1.08).min(1.0));
    let y = |r: f64| top + plot_h - (r / y_max).clamp(-0.05, 1.05) * plot_h;

    let mut s = String::new();
    let _ = write!(
        s,
        r#"<svg id="funnel-chart" class="chart" viewBox="0 0 {w} {h}" role="img" aria-labelledby="funnel-chart-title funnel-chart-desc" preserveAspectRatio="xMinYMin meet">"#,
        w = coord(WIDTH),
        h = coord(height),
    );
    let widened = if scale > 1.0 {
        format!(", widened by sqrt(phi) = {scale:.2} for overdispersion")
    } else {
        String::new()
    };
    let _ = write!(
        s,
        r#"<title id="funnel-chart-title">Funnel chart: defect rate against units inspected</title><desc id="funnel-chart-desc">Each dot is a group. The solid horizontal line is the pooled rate {pooled}; the dashed curves are its 95% limits and the solid curves its 99.8% limits for a group of that size{widened}. Units inspected are on a log scale.</desc>"#,
        pooled = fmt_pct(pooled),
    );
    let _ = write!(
        s,
        r#"<defs><clipPath id="funnel-clip"><rect x="{x}" y="{y}" width="{w}" height="{h}"/></clipPath></defs>"#,
        x = coord(left),
        y = coord(top),
        w = coord(plot_w),
        h = coord(plot_h),
    );
    // Horizontal grid (rates).
    let mut v = 0.0;
    let mut guard = 0;
    while v <= y_max + step * 1e-9 && guard < 50 {
        let yv = y(v);
        let _ = write!(
            s,
            r#"<line class="grid" x1="{l}" y1="{y}" x2="{r}" y2="{y}"/><text class="tick" x="{tx}" y="{ty}" text-anchor="end">{label}</text>"#,
            l = coord(left),
            r = coord(left + plot_w),
            y = coord(yv),
            tx = coord(left - 8.0),
            ty = coord(yv + 4.0),
            label = tick_pct(v, step),
        );
        v += step;
        guard += 1;
    }
    // Vertical grid (decades, with 2 and 5 between).
    let mut e = lo_exp;
    while e <= hi_exp + 1e-9 {
        for m in [1.0, 2.0, 5.0] {
            let n = m * 10f64.powf(e);
            if n < x_lo * 0.999 || n > x_hi * 1.001 {
                continue;
            }
            let xv = x(n);
            let major = m == 1.0;
            let _ = write!(
                s,
                r#"<line class="{cls}" x1="{x}" y1="{t}" x2="{x}" y2="{b}"/>"#,
                cls = if major { "grid" } else { "grid minor" },
                x = coord(xv),
                t = coord(top),
                b = coord(top + plot_h),
            );
            if major || hi_exp - lo_exp <= 2.0 {
                let anchor = if xv > WIDTH - right - 20.0 {
                    "end"
                } else {
                    "middle"
                };
                let _ = write!(
                    s,
                    r#"<text class="tick" x="{x}" y="{y}" text-anchor="{anchor}">{label}</text>"#,
                    x = coord(xv),
                    y = coord(top + plot_h + 16.0),
                    label = fmt_count(n.round() as u64),
                );
            }
        }
        e += 1.0;
    }
    let _ = write!(
        s,
        r#"<text class="axis-label" x="{x}" y="{y}" text-anchor="middle">units inspected (log scale)</text><text class="axis-label" x="14" y="{my}" text-anchor="middle" transform="rotate(-90 14 {my})">defect rate</text>"#,
        x = coord(left + plot_w / 2.0),
        y = coord(height - 8.0),
        my = coord(top + plot_h / 2.0),
    );
    // Limits.
    let steps = 96;
    let curve = |z: f64, upper: bool| -> String {
        let mut d = String::new();
        for i in 0..=steps {
            let t = f64::from(i) / f64::from(steps);
            let n = 10f64.powf(lo_exp + t * (hi_exp - lo_exp));
            let (lo, hi) = funnel_limits(pooled, n, z, scale);
            let r = if upper { hi.min(1.0) } else { lo };
            if r < 0.0 {
                continue;
            }
            let cmd = if d.is_empty() { 'M' } else { 'L' };
            let _ = write!(d, "{cmd}{},{} ", coord(x(n)), coord(y(r)));
        }
        d.trim_end().to_owned()
    };
    let _ = write!(s, r#"<g class="limits" clip-path="url(#funnel-clip)">"#);
    for (z, class, dash) in [
        (Z_95, "limit limit-95", r#" stroke-dasharray="6 4""#),
        (Z_998, "limit limit-998", ""),
    ] {
        for upper in [true, false] {
            let d = curve(z, upper);
            if !d.is_empty() {
                let _ = write!(s, r#"<path class="{class}" d="{d}"{dash}/>"#);
            }
        }
    }
    let _ = write!(
        s,
        r#"<line class="pooled-flat" x1="{l}" y1="{y}" x2="{r}" y2="{y}"/></g>"#,
        l = coord(left),
        r = coord(left + plot_w),
        y = coord(y(pooled)),
    );
    // Legend.
    let lx = left + 8.0;
    let _ = write!(
        s,
        r#"<g class="legend"><line class="pooled-flat" x1="{a}" y1="{ly}" x2="{b}" y2="{ly}"/><text x="{t1}" y="{ty}">pooled {pooled}</text><line class="limit limit-95" x1="{c}" y1="{ly}" x2="{d}" y2="{ly}" stroke-dasharray="6 4"/><text x="{t2}" y="{ty}">95% limits</text><line class="limit limit-998" x1="{e}" y1="{ly}" x2="{f}" y2="{ly}"/><text x="{t3}" y="{ty}">99.8% limits{wid}</text></g>"#,
        a = coord(lx),
        b = coord(lx + 22.0),
        t1 = coord(lx + 28.0),
        c = coord(lx + 128.0),
        d = coord(lx + 150.0),
        t2 = coord(lx + 156.0),
        e = coord(lx + 236.0),
        f = coord(lx + 258.0),
        t3 = coord(lx + 264.0),
        ly = coord(top - 14.0),
        ty = coord(top - 10.0),
        pooled = fmt_pct(pooled),
        wid = if scale > 1.0 {
            format!(" \u{00d7} {scale:.2}")
        } else {
            String::new()
        },
    );
    // Points, labelled; the label goes left of the dot near the right edge, and moves
    // up or down when it would overlap a label already placed.
    let mut placed: Vec<(f64, f64, f64)> = Vec::new(); // (x0, x1, baseline)
    for g in groups {
        let n = g.inspected.max(1) as f64;
        let (cx, cy) = (x(n), y(g.rate));
        let class = flag_class(g.flag);
        let title = format!(
            "{}: {} defective of {} inspected = {}",
            g.code,
            fmt_count(g.defective),
            fmt_count(g.inspected),
            fmt_pct(g.rate)
        );
        let label = shorten(&g.code, 16);
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
        let _ = write!(
            s,
            r#"<g class="group {class}" data-name="{name}"><title>{title}</title><circle class="dot" cx="{cx}" cy="{cy}" r="5"/><text class="point-label" x="{tx}" y="{ty}" text-anchor="{anchor}">{label}</text></g>"#,
            name = escape(&g.code),
            title = escape(&title),
            cx = coord(cx),
            cy = coord(cy),
            tx = coord(tx),
            ty = coord(ty),
            label = escape(&label),
        );
    }
    s.push_str("</svg>");
    Some(s)
}

/// The link of one period's report, for the series strip (already a page path).
pub type PeriodLink = String;

/// Strip of verdicts over periods (`svg#series-chart`): one column per period. The
/// top row is the verdict (red: the groups differ, green: no significant difference,
/// grey: not testable; the p-value in the tooltip); below it one row per group that
/// was flagged in some period, with a mark where it was flagged above (up triangle)
/// or below (down triangle) that period's pooled rate. Each column links to that
/// period's report (`links[i]`, same order as `points`).
pub fn series_chart(points: &[SeriesPoint], alpha: f64, links: &[PeriodLink]) -> String {
    // Groups that were flagged at least once, in order of first appearance by name.
    let mut names: Vec<&str> = points
        .iter()
        .flat_map(|p| p.flagged.iter().map(|f| f.code.as_str()))
        .collect();
    names.sort_unstable();
    names.dedup();
    let (left, right, top, verdict_h, row_h, bottom) = (96.0, 12.0, 8.0, 22.0, 20.0, 62.0);
    let rows_top = top + verdict_h + 10.0;
    let height = rows_top + row_h * names.len() as f64 + bottom;
    let plot_w = SERIES_WIDTH - left - right;
    let count = points.len().max(1) as f64;
    let slot = plot_w / count;
    let cell_w = (slot - 2.0).max(1.0);
    let mark = (row_h * 0.32).min(slot * 0.4).max(2.0);

    let mut s = String::new();
    let _ = write!(
        s,
        r#"<svg id="series-chart" class="chart series" viewBox="0 0 {w} {h}" role="img" aria-labelledby="series-chart-title series-chart-desc" preserveAspectRatio="xMinYMin meet"><title id="series-chart-title">Verdict and flagged groups per period</title><desc id="series-chart-desc">One column per period. Top row: red where the groups differ at alpha = {alpha}, green where they do not, grey where the period could not be tested. Below, one row per group flagged in any period: an up triangle where it was flagged above that period's pooled rate, a down triangle where below.</desc>"#,
        w = coord(SERIES_WIDTH),
        h = coord(height),
    );
    let _ = write!(
        s,
        r#"<text class="row-label" x="{x}" y="{y}" text-anchor="end">verdict</text>"#,
        x = coord(left - 8.0),
        y = coord(top + verdict_h / 2.0 + 4.0),
    );
    for (r, name) in names.iter().enumerate() {
        let cy = rows_top + row_h * (r as f64 + 0.5);
        let _ = write!(
            s,
            r#"<line class="grid" x1="{l}" y1="{y}" x2="{rr}" y2="{y}"/><text class="row-label" x="{x}" y="{ty}" text-anchor="end">{label}</text>"#,
            l = coord(left),
            rr = coord(left + plot_w),
            y = coord(cy),
            x = coord(left - 8.0),
            ty = coord(cy + 4.0),
            label = escape(&shorten(name, 12)),
        );
    }
    let label_every = (count / 26.0).ceil().max(1.0) as usize;
    let rows_bottom = rows_top + row_h * names.len() as f64;
    for (i, p) in points.iter().enumerate() {
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
                    .map(|f| format!("{} {}", f.code, f.flag.as_str()))
                    .collect::<Vec<_>>()
                    .join(", ")
            )
        };
        let (class, title) = match (p.significant, p.p_value) {
            (Some(true), Some(pv)) => (
                "differ",
                format!(
                    "{period}: the groups differ (p = {}); {flagged_words}",
                    fmt_p(pv)
                ),
            ),
            (Some(false), Some(pv)) => (
                "same",
                format!(
                    "{period}: no significant difference (p = {}); {flagged_words}",
                    fmt_p(pv)
                ),
            ),
            _ => ("untestable", format!("{period}: {}", p.verdict)),
        };
        let mut body = format!(
            r#"<title>{}</title><rect class="hit" x="{x}" y="{t}" width="{w}" height="{h}"/><rect class="cell" x="{x}" y="{t}" width="{w}" height="{vh}" rx="2"/>"#,
            escape(&title),
            x = coord(x0),
            t = coord(top),
            w = coord(cell_w),
            h = coord(rows_bottom - top),
            vh = coord(verdict_h),
        );
        for (r, name) in names.iter().enumerate() {
            let cy = rows_top + row_h * (r as f64 + 0.5);
            match p.flagged.iter().find(|f| f.code == *name).map(|f| f.flag) {
                Some(Flag::Above) => {
                    let _ = write!(
                        body,
                        r#"<path class="mark above" d="M{a},{b} L{c},{d} L{e},{d} Z"/>"#,
                        a = coord(cx),
                        b = coord(cy - mark),
                        c = coord(cx - mark),
                        d = coord(cy + mark * 0.8),
                        e = coord(cx + mark),
                    );
                }
                Some(Flag::Below) => {
                    let _ = write!(
                        body,
                        r#"<path class="mark below" d="M{a},{b} L{c},{d} L{e},{d} Z"/>"#,
                        a = coord(cx),
                        b = coord(cy + mark),
                        c = coord(cx - mark),
                        d = coord(cy - mark * 0.8),
                        e = coord(cx + mark),
                    );
                }
                None => {
                    let _ = write!(
                        body,
                        r#"<circle class="mark none" cx="{x}" cy="{y}" r="1.5"/>"#,
                        x = coord(cx),
                        y = coord(cy),
                    );
                }
            }
        }
        let label = if i % label_every == 0 {
            format!(
                r#"<text class="tick" x="{x}" y="{y}" text-anchor="end" transform="rotate(-45 {x} {y})">{t}</text>"#,
                x = coord(cx + 4.0),
                y = coord(rows_bottom + 14.0),
                t = escape(&period),
            )
        } else {
            String::new()
        };
        match links.get(i) {
            Some(href) => {
                let _ = write!(
                    s,
                    r#"<a href="{href}" class="period {class}" data-period="{pd}">{body}</a>{label}"#,
                    href = escape(href),
                    pd = escape(&period),
                );
            }
            None => {
                let _ = write!(
                    s,
                    r#"<g class="period {class}" data-period="{pd}">{body}</g>{label}"#,
                    pd = escape(&period),
                );
            }
        }
    }
    s.push_str("</svg>");
    s
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
    }

    #[test]
    fn tick_labels_have_the_decimals_their_step_needs() {
        assert_eq!(tick_pct(0.01, 0.005), "1.0%");
        assert_eq!(tick_pct(0.02, 0.01), "2%");
        assert_eq!(tick_pct(0.0025, 0.0025), "0.25%");
        assert_eq!(tick_pct(0.0, 0.0002), "0.00%");
    }

    #[test]
    fn funnel_limits_are_symmetric_and_widen_with_phi() {
        let (lo, hi) = funnel_limits(0.01, 10_000.0, Z_998, 1.0);
        let half = Z_998 * (0.01f64 * 0.99 / 10_000.0).sqrt();
        assert!((hi - 0.01 - half).abs() < 1e-15 && (0.01 - lo - half).abs() < 1e-15);
        let (_, hi2) = funnel_limits(0.01, 10_000.0, Z_998, 2.0);
        assert!((hi2 - 0.01 - 2.0 * half).abs() < 1e-15);
    }

    #[test]
    fn long_labels_are_shortened_with_an_ellipsis() {
        assert_eq!(shorten("KES", 5), "KES");
        assert_eq!(shorten("ABCDEFG", 5), "ABCD\u{2026}");
    }
}
