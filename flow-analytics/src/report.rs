//! A self-contained HTML report of a [`Comparison`]: one file, inline SVG
//! and CSS, no scripts and no network fetches.
//!
//! Sections: the verdict and its evidence first, the caution, drop rate
//! over time by reason with the window shaded, before/during/after bars per
//! value with their 95% intervals, small time series of the top values,
//! the full table, the inputs and thresholds, and the method with its
//! sources. Reasons are told apart by colour (the Okabe–Ito palette, Okabe
//! & Ito 2008, "Color Universal Design"), line dash, marker shape and a
//! text label, so the charts read in grey print and without colour vision;
//! periods by fill pattern and label.

use crate::compare::{pct, Class, Comparison, Period, ValueResult};

/// Colours per reason (Okabe–Ito), paired with dashes and markers.
const COLOURS: [&str; 8] = [
    "#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#000000", "#999999",
];
const DASHES: [&str; 8] = ["", "7 3", "2 2", "9 3 2 3", "1 3", "12 4", "4 2 1 2", "3 5"];
const MARKERS: [Marker; 8] = [
    Marker::Circle,
    Marker::Square,
    Marker::Triangle,
    Marker::Diamond,
    Marker::Cross,
    Marker::Plus,
    Marker::Circle,
    Marker::Square,
];

/// Most values given small time series and bars.
const TOP_VALUES: usize = 8;

#[derive(Clone, Copy)]
enum Marker {
    Circle,
    Square,
    Triangle,
    Diamond,
    Cross,
    Plus,
}

/// Escapes text for HTML element content and attribute values.
pub fn escape(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for ch in text.chars() {
        match ch {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            other => out.push(other),
        }
    }
    out
}

fn pick<T: Copy>(list: &[T], i: usize, fallback: T) -> T {
    list.get(i % list.len().max(1)).copied().unwrap_or(fallback)
}

fn marker_svg(marker: Marker, x: f64, y: f64, colour: &str) -> String {
    let r = 3.5;
    match marker {
        Marker::Circle => format!(r#"<circle cx="{x:.1}" cy="{y:.1}" r="{r}" fill="{colour}"/>"#),
        Marker::Square => format!(
            r#"<rect x="{:.1}" y="{:.1}" width="{}" height="{}" fill="{colour}"/>"#,
            x - r,
            y - r,
            2.0 * r,
            2.0 * r
        ),
        Marker::Triangle => format!(
            r#"<polygon points="{:.1},{:.1} {:.1},{:.1} {:.1},{:.1}" fill="{colour}"/>"#,
            x,
            y - r,
            x - r,
            y + r,
            x + r,
            y + r
        ),
        Marker::Diamond => format!(
            r#"<polygon points="{:.1},{:.1} {:.1},{:.1} {:.1},{:.1} {:.1},{:.1}" fill="{colour}"/>"#,
            x,
            y - r,
            x + r,
            y,
            x,
            y + r,
            x - r,
            y
        ),
        Marker::Cross => format!(
            r#"<path d="M{:.1},{:.1}L{:.1},{:.1}M{:.1},{:.1}L{:.1},{:.1}" stroke="{colour}" stroke-width="2"/>"#,
            x - r,
            y - r,
            x + r,
            y + r,
            x - r,
            y + r,
            x + r,
            y - r
        ),
        Marker::Plus => format!(
            r#"<path d="M{:.1},{:.1}L{:.1},{:.1}M{:.1},{:.1}L{:.1},{:.1}" stroke="{colour}" stroke-width="2"/>"#,
            x - r,
            y,
            x + r,
            y,
            x,
            y - r,
            x,
            y + r
        ),
    }
}

fn clock(ms: i64) -> String {
    chrono::DateTime::<chrono::Utc>::from_timestamp_millis(ms)
        .map(|t| t.format("%H:%M").to_string())
        .unwrap_or_default()
}

fn parse_ms(text: &str) -> Option<i64> {
    chrono::DateTime::parse_from_rfc3339(text).ok().map(|t| t.timestamp_millis())
}

/// Maps time to x within a plot.
struct TimeAxis {
    first: i64,
    last_end: i64,
    x0: f64,
    width: f64,
}

impl TimeAxis {
    fn new(result: &Comparison, x0: f64, width: f64) -> Self {
        let first = result.buckets.first().copied().unwrap_or(0);
        let every = i64::try_from(result.thresholds.every_seconds).unwrap_or(60) * 1000;
        let last_end = result.buckets.last().map_or(first + every, |b| b + every);
        TimeAxis { first, last_end, x0, width }
    }

    fn x(&self, ms: i64) -> f64 {
        let span = (self.last_end - self.first).max(1) as f64;
        self.x0 + (ms - self.first) as f64 / span * self.width
    }

    /// Bucket midpoint x.
    fn mid(&self, start: i64, every_ms: i64) -> f64 {
        self.x(start + every_ms / 2)
    }
}

fn window_ms(result: &Comparison) -> (i64, i64) {
    (
        parse_ms(&result.window.start).unwrap_or(0),
        parse_ms(&result.window.end).unwrap_or(0),
    )
}

fn every_ms(result: &Comparison) -> i64 {
    i64::try_from(result.thresholds.every_seconds).unwrap_or(60) * 1000
}

/// Rounds a maximum up to a readable axis top (1, 2, 5 × 10ⁿ).
fn nice_top(max: f64) -> f64 {
    if max <= 0.0 || !max.is_finite() {
        return 0.01;
    }
    let exp = max.log10().floor();
    let base = 10f64.powf(exp);
    for step in [1.0, 2.0, 5.0, 10.0] {
        if max <= step * base {
            return step * base;
        }
    }
    10.0 * base
}

/// The SVG pattern definitions shared by the charts.
const DEFS: &str = r##"<svg width="0" height="0" style="position:absolute" aria-hidden="true"><defs>
<pattern id="p-window" width="8" height="8" patternUnits="userSpaceOnUse" patternTransform="rotate(45)"><rect width="8" height="8" fill="#f3efe4"/><line x1="0" y1="0" x2="0" y2="8" stroke="#d9cfb0" stroke-width="3"/></pattern>
<pattern id="p-during" width="6" height="6" patternUnits="userSpaceOnUse" patternTransform="rotate(45)"><rect width="6" height="6" fill="#E69F00"/><line x1="0" y1="0" x2="0" y2="6" stroke="#7a5200" stroke-width="2"/></pattern>
<pattern id="p-after" width="6" height="6" patternUnits="userSpaceOnUse"><rect width="6" height="6" fill="#56B4E9"/><circle cx="3" cy="3" r="1.4" fill="#0b3d5c"/></pattern>
</defs></svg>"##;

fn window_rect(axis: &TimeAxis, result: &Comparison, top: f64, height: f64, label: bool) -> String {
    let (ws, we) = window_ms(result);
    let (x1, x2) = (axis.x(ws), axis.x(we));
    let mut s = format!(
        r##"<rect class="window" x="{x1:.1}" y="{top:.1}" width="{:.1}" height="{height:.1}" fill="url(#p-window)" stroke="#b8a77a" stroke-dasharray="3 2"><title>maintenance window {} – {}</title></rect>"##,
        (x2 - x1).max(0.0),
        escape(&result.window.start),
        escape(&result.window.end)
    );
    if label {
        s.push_str(&format!(
            r#"<text x="{:.1}" y="{:.1}" class="wlabel" text-anchor="middle">maintenance window</text>"#,
            (x1 + x2) / 2.0,
            top + height - 6.0
        ));
    }
    s
}

fn reason_chart(result: &Comparison) -> String {
    let (w, h) = (1000.0, 340.0);
    let (left, right, top, bottom) = (64.0, 150.0, 20.0, 40.0);
    let pw = w - left - right;
    let ph = h - top - bottom;
    let axis = TimeAxis::new(result, left, pw);
    let every = every_ms(result);
    let max = result
        .reasons
        .iter()
        .flat_map(|r| r.rate.iter().flatten())
        .fold(0.0f64, |a, b| a.max(*b));
    let ymax = nice_top(max);
    let y = |v: f64| top + ph - (v / ymax).min(1.0) * ph;
    let mut s = format!(
        r#"<svg id="chart-reasons" class="chart" viewBox="0 0 {w} {h}" role="img" aria-labelledby="chart-reasons-title"><title id="chart-reasons-title">Estimated drop rate over time by reason (share of all packets), window shaded</title>"#
    );
    s.push_str(&window_rect(&axis, result, top, ph, true));
    // Axes and grid.
    for i in 0..=4 {
        let v = ymax * f64::from(i) / 4.0;
        let yy = y(v);
        s.push_str(&format!(
            r##"<line x1="{left}" x2="{:.1}" y1="{yy:.1}" y2="{yy:.1}" stroke="#ddd"/><text x="{:.1}" y="{:.1}" class="tick" text-anchor="end">{}</text>"##,
            left + pw,
            left - 6.0,
            yy + 4.0,
            escape(&pct(Some(v)))
        ));
    }
    let n = result.buckets.len().max(1);
    let step = (n / 6).max(1);
    for b in result.buckets.iter().step_by(step) {
        let xx = axis.x(*b);
        s.push_str(&format!(
            r##"<line x1="{xx:.1}" x2="{xx:.1}" y1="{:.1}" y2="{:.1}" stroke="#999"/><text x="{xx:.1}" y="{:.1}" class="tick" text-anchor="middle">{}</text>"##,
            top + ph,
            top + ph + 5.0,
            top + ph + 18.0,
            clock(*b)
        ));
    }
    s.push_str(&format!(
        r##"<line x1="{left}" x2="{left}" y1="{top}" y2="{:.1}" stroke="#333"/><line x1="{left}" x2="{:.1}" y1="{:.1}" y2="{:.1}" stroke="#333"/><text x="{:.1}" y="{:.1}" class="tick" text-anchor="middle">time (UTC), {} s buckets</text>"##,
        top + ph,
        left + pw,
        top + ph,
        top + ph,
        left + pw / 2.0,
        h - 6.0,
        result.thresholds.every_seconds
    ));
    // Reasons, largest first.
    let mut order: Vec<usize> = (0..result.reasons.len()).collect();
    order.sort_by_key(|&i| {
        std::cmp::Reverse(
            result
                .reasons
                .get(i)
                .map_or(0, |r| r.dropped_packets.iter().sum::<u64>()),
        )
    });
    let mut label_ys: Vec<f64> = Vec::new();
    for (rank, &i) in order.iter().enumerate() {
        let Some(reason) = result.reasons.get(i) else { continue };
        let colour = pick(&COLOURS, rank, "#000");
        let dash = pick(&DASHES, rank, "");
        let marker = pick(&MARKERS, rank, Marker::Circle);
        let points: Vec<(f64, f64, f64)> = result
            .buckets
            .iter()
            .zip(&reason.rate)
            .map(|(b, r)| {
                let v = r.unwrap_or(0.0);
                (axis.mid(*b, every), y(v), v)
            })
            .collect();
        let path = points
            .iter()
            .map(|(x, yy, _)| format!("{x:.1},{yy:.1}"))
            .collect::<Vec<_>>()
            .join(" ");
        s.push_str(&format!(
            r#"<g class="reason" data-reason="{}"><title>{}</title><polyline points="{path}" fill="none" stroke="{colour}" stroke-width="2" stroke-dasharray="{dash}"/>"#,
            escape(&reason.reason),
            escape(&reason.reason)
        ));
        for (x, yy, v) in &points {
            if *v > 0.0 {
                s.push_str(&marker_svg(marker, *x, *yy, colour));
            }
        }
        // Label at the highest point, nudged apart from earlier labels.
        if let Some((px, py, _)) = points.iter().copied().max_by(|a, b| a.2.total_cmp(&b.2)) {
            let mut ly = py - 6.0;
            while label_ys.iter().any(|o| (o - ly).abs() < 12.0) {
                ly -= 12.0;
            }
            let ly = ly.max(top + 10.0);
            label_ys.push(ly);
            // Near the right edge the label goes to the left of the point.
            let (lx, anchor) = if px > left + pw - 90.0 { (px - 6.0, "end") } else { (px + 5.0, "start") };
            s.push_str(&format!(
                r#"<text x="{lx:.1}" y="{ly:.1}" class="rlabel" fill="{colour}" text-anchor="{anchor}">{}</text>"#,
                escape(&reason.reason)
            ));
        }
        s.push_str("</g>");
    }
    // Legend on the right.
    for (rank, &i) in order.iter().enumerate() {
        let Some(reason) = result.reasons.get(i) else { continue };
        let colour = pick(&COLOURS, rank, "#000");
        let dash = pick(&DASHES, rank, "");
        let marker = pick(&MARKERS, rank, Marker::Circle);
        let ly = top + 10.0 + rank as f64 * 20.0;
        let lx = left + pw + 14.0;
        s.push_str(&format!(
            r#"<g class="legend"><line x1="{lx:.1}" x2="{:.1}" y1="{ly:.1}" y2="{ly:.1}" stroke="{colour}" stroke-width="2" stroke-dasharray="{dash}"/>{}<text x="{:.1}" y="{:.1}" class="tick">{}</text></g>"#,
            lx + 30.0,
            marker_svg(marker, lx + 15.0, ly, colour),
            lx + 36.0,
            ly + 4.0,
            escape(&reason.reason)
        ));
    }
    if result.reasons.is_empty() {
        s.push_str(&format!(
            r#"<text x="{:.1}" y="{:.1}" text-anchor="middle">no drops in the data</text>"#,
            left + pw / 2.0,
            top + ph / 2.0
        ));
    }
    s.push_str("</svg>");
    s
}

fn shown_values(result: &Comparison) -> Vec<&ValueResult> {
    result.values.iter().take(TOP_VALUES).collect()
}

fn class_badge(class: Class) -> String {
    let symbol = match class {
        Class::Persistent => "▲",
        Class::New => "●",
        Class::Transient => "↺",
        Class::Unaffected => "–",
    };
    format!(
        r#"<span class="badge c-{0}">{symbol} {0}</span>"#,
        class.name()
    )
}

fn period_bars(result: &Comparison) -> String {
    let values = shown_values(result);
    let row_h = 16.0;
    let group_h = row_h * 3.0 + 22.0;
    let (left, w) = (70.0, 1000.0);
    let pw = w - left - 230.0;
    let h = 10.0 + group_h * values.len() as f64;
    let max = values
        .iter()
        .flat_map(|v| [&v.before, &v.during, &v.after])
        .filter_map(|p| p.ratio_high)
        .fold(0.0f64, f64::max);
    let top = nice_top(max);
    let x = |v: f64| left + (v / top).min(1.0) * pw;
    let mut s = format!(
        r#"<svg id="chart-periods" class="chart" viewBox="0 0 {w} {h:.0}" role="img" aria-labelledby="chart-periods-title"><title id="chart-periods-title">Drop ratio before, during and after the window per value, with 95% Wilson intervals</title>"#
    );
    for (gi, v) in values.iter().enumerate() {
        let gy = 10.0 + gi as f64 * group_h;
        s.push_str(&format!(
            r#"<g class="value-bars"><text x="0" y="{:.1}" class="vlabel">{} ({})</text>"#,
            gy + 12.0,
            escape(&v.label),
            v.class.name()
        ));
        let rows: [(&str, &Period, &str); 3] = [
            ("before", &v.before, "#bbbbbb"),
            ("during", &v.during, "url(#p-during)"),
            ("after", &v.after, "url(#p-after)"),
        ];
        for (ri, (name, p, fill)) in rows.iter().enumerate() {
            let yy = gy + 18.0 + ri as f64 * row_h;
            let ratio = p.drop_ratio.unwrap_or(0.0);
            s.push_str(&format!(
                r##"<text x="{:.1}" y="{:.1}" class="tick" text-anchor="end">{name}</text><rect class="bar bar-{name}" x="{left}" y="{yy:.1}" width="{:.1}" height="{:.1}" fill="{fill}" stroke="#333" stroke-width="0.6"><title>{name}: {}</title></rect>"##,
                left - 6.0,
                yy + row_h - 5.0,
                (x(ratio) - left).max(0.5),
                row_h - 4.0,
                escape(&pct(p.drop_ratio))
            ));
            if let (Some(lo), Some(hi)) = (p.ratio_low, p.ratio_high) {
                let cy = yy + (row_h - 4.0) / 2.0;
                s.push_str(&format!(
                    r##"<path d="M{:.1},{cy:.1}H{:.1}M{:.1},{:.1}V{:.1}M{:.1},{:.1}V{:.1}" stroke="#000" stroke-width="1"/>"##,
                    x(lo),
                    x(hi),
                    x(lo),
                    cy - 4.0,
                    cy + 4.0,
                    x(hi),
                    cy - 4.0,
                    cy + 4.0
                ));
            }
            let text = match p.drop_ratio {
                Some(_) => format!("{} [{}–{}]", pct(p.drop_ratio), pct(p.ratio_low), pct(p.ratio_high)),
                None => "no traffic".to_string(),
            };
            s.push_str(&format!(
                r#"<text x="{:.1}" y="{:.1}" class="tick">{}</text>"#,
                x(p.ratio_high.unwrap_or(ratio)) + 6.0,
                yy + row_h - 5.0,
                escape(&text)
            ));
        }
        s.push_str("</g>");
    }
    s.push_str("</svg>");
    s
}

fn sparkline(result: &Comparison, v: &ValueResult) -> String {
    let (w, h) = (300.0, 80.0);
    let (left, top, ph) = (4.0, 6.0, 56.0);
    let pw = w - 8.0;
    let axis = TimeAxis::new(result, left, pw);
    let every = every_ms(result);
    let max = v
        .series
        .iter()
        .filter_map(|p| p.ratio)
        .fold(v.band_high, f64::max);
    let ymax = nice_top(max);
    let y = |r: f64| top + ph - (r / ymax).min(1.0) * ph;
    let mut s = format!(
        r#"<svg class="spark" viewBox="0 0 {w} {h}" role="img"><title>{} drop ratio per bucket (axis top {})</title>"#,
        escape(&v.label),
        escape(&pct(Some(ymax)))
    );
    s.push_str(&window_rect(&axis, result, top, ph, false));
    let band = y(v.band_high);
    s.push_str(&format!(
        r##"<line x1="{left}" x2="{:.1}" y1="{band:.1}" y2="{band:.1}" stroke="#555" stroke-dasharray="2 2"><title>baseline band upper edge {}</title></line>"##,
        left + pw,
        escape(&pct(Some(v.band_high)))
    ));
    let path = v
        .series
        .iter()
        .map(|p| format!("{:.1},{:.1}", axis.mid(p.start_ms, every), y(p.ratio.unwrap_or(0.0))))
        .collect::<Vec<_>>()
        .join(" ");
    s.push_str(&format!(
        r##"<polyline points="{path}" fill="none" stroke="#0072B2" stroke-width="1.5"/>"##
    ));
    if let Some(o) = v.onset.as_deref().and_then(parse_ms) {
        let xx = axis.x(o);
        s.push_str(&format!(
            r##"<polygon points="{xx:.1},{:.1} {:.1},{:.1} {:.1},{:.1}" fill="#D55E00"><title>onset</title></polygon><text x="{:.1}" y="{:.1}" class="tiny">onset</text>"##,
            top + ph + 2.0,
            xx - 4.0,
            top + ph + 9.0,
            xx + 4.0,
            top + ph + 9.0,
            xx + 5.0,
            top + ph + 14.0
        ));
    }
    if let Some(c) = v.converged_at.as_deref().and_then(parse_ms) {
        let xx = axis.x(c);
        s.push_str(&format!(
            r##"<circle cx="{xx:.1}" cy="{:.1}" r="4" fill="#009E73"><title>back within band</title></circle><text x="{:.1}" y="{:.1}" class="tiny">settled</text>"##,
            top + ph + 5.0,
            xx + 5.0,
            top + ph + 14.0
        ));
    }
    s.push_str(&format!(
        r#"<text x="{:.1}" y="{:.1}" class="tiny" text-anchor="end">{} – {}</text></svg>"#,
        w - 4.0,
        top + 8.0,
        clock(axis.first),
        clock(axis.last_end)
    ));
    s
}

fn value_cards(result: &Comparison) -> String {
    let mut s = String::from(r#"<div class="cards">"#);
    for v in shown_values(result) {
        let timing = match (v.onset.as_deref(), v.convergence_seconds) {
            (Some(o), Some(c)) => format!("above baseline from {} UTC; settled after {c:.0} s", o.get(11..19).unwrap_or(o)),
            (Some(o), None) => format!("above baseline from {} UTC; not settled", o.get(11..19).unwrap_or(o)),
            _ => "no onset".to_string(),
        };
        s.push_str(&format!(
            r#"<figure class="card c-{}"><figcaption><strong>{}</strong> {}<br><span class="small">top reason: {} · {}</span></figcaption>{}</figure>"#,
            v.class.name(),
            escape(&v.label),
            class_badge(v.class),
            escape(v.top_reason.as_deref().unwrap_or("–")),
            escape(&timing),
            sparkline(result, v)
        ));
    }
    s.push_str("</div>");
    s
}

fn value_table(result: &Comparison) -> String {
    let mut s = format!(
        "<table class=\"values\"><thead><tr><th>class</th><th>{}</th><th>top reason</th><th>before</th><th>during</th><th>after</th><th>est. dropped packets (during + after)</th><th>onset</th><th>settled after</th></tr></thead><tbody>",
        escape(&result.dimensions.join(" · "))
    );
    let cell = |p: &Period| match p.drop_ratio {
        Some(_) => format!("{} <span class=\"small\">[{}–{}]</span>", pct(p.drop_ratio), pct(p.ratio_low), pct(p.ratio_high)),
        None => "no traffic".to_string(),
    };
    for v in &result.values {
        s.push_str(&format!(
            "<tr class=\"c-{}\"><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td class=\"num\">{}</td><td>{}</td><td>{}</td></tr>",
            v.class.name(),
            class_badge(v.class),
            escape(&v.label),
            escape(v.top_reason.as_deref().unwrap_or("–")),
            cell(&v.before),
            cell(&v.during),
            cell(&v.after),
            crate::render::thousands(v.during.dropped_packets.saturating_add(v.after.dropped_packets)),
            escape(v.onset.as_deref().and_then(|o| o.get(11..19)).unwrap_or("–")),
            v.convergence_seconds.map_or("–".to_string(), |c| format!("{c:.0} s")),
        ));
    }
    s.push_str("</tbody></table>");
    s
}

const CSS: &str = r#"
:root { --ink:#1b1b1b; --muted:#555; --line:#ccc; }
* { box-sizing: border-box; }
body { font: 15px/1.45 system-ui, -apple-system, "Segoe UI", Roboto, sans-serif; color: var(--ink); margin: 0 auto; max-width: 1100px; padding: 18px 24px 40px; }
h1 { font-size: 1.5em; margin: 0 0 4px; } h2 { font-size: 1.15em; margin: 26px 0 8px; border-bottom: 1px solid var(--line); padding-bottom: 3px; }
.sub, .small { color: var(--muted); font-size: .88em; }
.verdict { border: 3px solid #333; border-left-width: 12px; padding: 10px 16px; margin: 14px 0; background: #fafafa; }
.verdict .headline { font-size: 1.25em; font-weight: 700; margin: 4px 0 8px; }
.v-still-dropping { border-color: #D55E00; } .v-new-drops { border-color: #CC79A7; } .v-recovered { border-color: #009E73; } .v-no-change { border-color: #0072B2; }
.verdict li { margin: 3px 0; }
.caution { border: 1px dashed #777; background: #fffbea; padding: 8px 14px; margin: 12px 0; }
svg.chart { width: 100%; height: auto; display: block; }
.tick { font-size: 11px; fill: #333; } .tiny { font-size: 9px; fill: #333; } .rlabel { font-size: 12px; font-weight: 600; }
.wlabel { font-size: 11px; fill: #6b5a2a; font-style: italic; } .vlabel { font-size: 12px; font-weight: 600; }
.cards { display: grid; grid-template-columns: repeat(auto-fill, minmax(320px, 1fr)); gap: 12px; }
.card { margin: 0; border: 1px solid var(--line); padding: 8px; break-inside: avoid; }
.card svg.spark { width: 100%; height: auto; display: block; margin-top: 4px; }
.badge { display: inline-block; font-size: .8em; padding: 0 6px; border: 1px solid #333; border-radius: 3px; white-space: nowrap; }
.c-persistent .badge, .badge.c-persistent { background: #fbe3d6; } .badge.c-new { background: #f5e1ee; } .badge.c-transient { background: #dcf1e9; } .badge.c-unaffected { background: #eee; }
table.values { border-collapse: collapse; width: 100%; font-size: .86em; }
table.values th, table.values td { border-bottom: 1px solid #e2e2e2; padding: 3px 6px; text-align: left; vertical-align: top; }
td.num { text-align: right; font-variant-numeric: tabular-nums; }
dl.settings { display: grid; grid-template-columns: max-content 1fr; gap: 2px 14px; } dl.settings dt { font-weight: 600; } dl.settings dd { margin: 0; }
.key { display: inline-block; width: 28px; height: 12px; border: 1px solid #333; vertical-align: middle; }
@media print {
  body { max-width: none; padding: 0; font-size: 10.5pt; }
  * { -webkit-print-color-adjust: exact; print-color-adjust: exact; }
  section, figure, table, .verdict { break-inside: avoid; }
  .cards { grid-template-columns: repeat(2, 1fr); }
}
"#;

/// The report as one self-contained HTML page (UTF-8). `inputs` are the
/// inputs as the user gave them, listed in the report.
pub fn html(result: &Comparison, inputs: &[String]) -> String {
    let t = &result.thresholds;
    let mut s = String::with_capacity(64 * 1024);
    s.push_str("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">");
    s.push_str("<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">");
    s.push_str(&format!(
        "<title>flowsift compare: {}</title><style>{CSS}</style></head><body>",
        escape(result.verdict.name())
    ));
    s.push_str(DEFS);
    s.push_str(&format!(
        "<header><h1>Drops around the maintenance window</h1><p class=\"sub\">Window {} to {} (UTC, end exclusive) · per {} · flowsift compare</p></header>",
        escape(&result.window.start),
        escape(&result.window.end),
        escape(&result.dimensions.join(", "))
    ));
    // Verdict first.
    s.push_str(&format!(
        "<section id=\"verdict\" class=\"verdict v-{}\" aria-label=\"verdict\"><div class=\"small\">Verdict</div><p class=\"headline\" id=\"verdict-text\">{}</p><p class=\"small\">{}</p><ul id=\"evidence\">",
        escape(result.verdict.name()),
        escape(&result.headline),
        escape(
            &result
                .counts
                .iter()
                .map(|(k, v)| format!("{k}: {v}"))
                .collect::<Vec<_>>()
                .join(" · ")
        )
    ));
    for line in &result.evidence {
        s.push_str(&format!("<li>{}</li>", escape(line)));
    }
    s.push_str("</ul></section>");
    s.push_str(&format!(
        "<aside class=\"caution\" id=\"caution\" role=\"note\"><strong>Caution.</strong> {}</aside>",
        escape(&result.caution)
    ));
    s.push_str("<section id=\"rates\"><h2>Drop rate over time by reason</h2><p class=\"small\">Estimated dropped packets of each reason as a share of all packets, per bucket. The hatched band is the maintenance window. Reasons differ by colour, line dash, marker shape and label.</p>");
    s.push_str(&reason_chart(result));
    s.push_str("</section>");
    s.push_str(&format!(
        "<section id=\"periods\"><h2>Before, during and after, per value</h2><p class=\"small\">Top {} values. Bars: <span class=\"key\" style=\"background:#bbb\"></span> before (baseline), <svg width=\"28\" height=\"12\" class=\"key\"><rect width=\"28\" height=\"12\" fill=\"url(#p-during)\"/></svg> during (hatched), <svg width=\"28\" height=\"12\" class=\"key\"><rect width=\"28\" height=\"12\" fill=\"url(#p-after)\"/></svg> after (dotted); whiskers are 95% Wilson intervals.</p>",
        TOP_VALUES.min(result.values.len())
    ));
    s.push_str(&period_bars(result));
    s.push_str("</section>");
    s.push_str("<section id=\"top-values\"><h2>Top values over time</h2><p class=\"small\">Drop ratio per bucket; hatched: window; dashed line: upper edge of the baseline band; triangle: onset; circle: back within the band for the stable run.</p>");
    s.push_str(&value_cards(result));
    s.push_str("</section>");
    s.push_str("<section id=\"all-values\"><h2>All values</h2>");
    s.push_str(&value_table(result));
    s.push_str("</section>");
    s.push_str("<section id=\"settings\"><h2>Inputs and thresholds</h2><dl class=\"settings\">");
    let mut item = |k: &str, v: String| s.push_str(&format!("<dt>{}</dt><dd>{}</dd>", escape(k), escape(&v)));
    item("inputs", inputs.join(", "));
    item("dimensions", result.dimensions.join(", "));
    item("window", format!("{} to {}", result.window.start, result.window.end));
    item("before (baseline)", format!("{} to {} ({} s)", result.before.start, result.before.end, t.baseline_seconds));
    item("after", format!("{} to {}", result.after.start, result.after.end));
    item("bucket width", format!("{} s", t.every_seconds));
    item("stable buckets", t.stable_buckets.to_string());
    item("alpha", format!("{} per one-sided test", t.alpha));
    item("min increase", format!("{:.2} percentage points", t.min_increase * 100.0));
    s.push_str("</dl></section>");
    s.push_str(&format!(
        "<section id=\"method\"><h2>Method</h2><p>{}</p><p class=\"small\">Classes: unaffected (no significant rise), transient (rose during the window and returned within the baseline band for the stable run), persistent (still significantly above baseline after the window), new (rose only after the window).</p></section>",
        escape(&result.method)
    ));
    s.push_str(&format!(
        "<footer><p class=\"caution\">{}</p></footer></body></html>\n",
        escape(&result.caution)
    ));
    s
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn escapes_markup() {
        assert_eq!(escape("<a href=\"x\">&'"), "&lt;a href=&quot;x&quot;&gt;&amp;&#39;");
    }

    #[test]
    fn nice_tops() {
        assert!((nice_top(0.034) - 0.05).abs() < 1e-12);
        assert!((nice_top(0.2) - 0.2).abs() < 1e-12);
        assert!((nice_top(0.0) - 0.01).abs() < 1e-12);
    }
}
