//! The printable report of one test, server-rendered at `/tests/{id}/report` in the lab's display units:
//! specimen and method, the load-step table, every step's time curves with both constructions, the e–log σ′
//! path with its constructions and table, the parameters with the points used, the cautions and the
//! review lines. Read-only; print CSS for A4 and US Letter, no scripts, nothing external.

use std::fmt::Write;

use axum::Router;
use axum::extract::{Path, State};
use axum::http::header;
use axum::response::{Html, IntoResponse};
use axum::routing::get;

use super::lab_book::test_id;
use super::overview::{escape, minute_text};
use super::queries::TestSummary;
use super::words;
use super::{ApiError, AppState};
use oedolog_core::analysis::{CompressionReduction, IncrementReduction};
use oedolog_core::units::DisplayUnits;

fn num(x: Option<f64>, digits: usize) -> String {
    x.filter(|v| v.is_finite()).map_or("—".to_string(), |v| format!("{v:.digits$}"))
}

/// `x` to `digits` significant figures: plain decimals from 0.001 to 100 000, else `1.23×10⁻⁸` — never an
/// `e-` that a table could wrap.
fn sig(x: Option<f64>, digits: usize) -> String {
    let Some(v) = x.filter(|v| v.is_finite()) else { return "—".to_string() };
    if v == 0.0 {
        return "0".to_string();
    }
    let magnitude = v.abs().log10().floor() as i32;
    if (-3..5).contains(&magnitude) {
        let decimals = (digits as i32 - 1 - magnitude).max(0) as usize;
        return format!("{v:.decimals$}");
    }
    let mantissa = v / 10f64.powi(magnitude);
    let superscript: String = magnitude
        .to_string()
        .chars()
        .map(|c| match c {
            '-' => '⁻',
            d => ['⁰', '¹', '²', '³', '⁴', '⁵', '⁶', '⁷', '⁸', '⁹'][d.to_digit(10).unwrap_or(0) as usize],
        })
        .collect();
    format!("{mantissa:.prec$}×10{superscript}", prec = digits.saturating_sub(1))
}

/// `sig` without the trailing zeros of a round value: a nominal stress reads "50 kPa", not "50.00 kPa".
fn sig_trimmed(x: Option<f64>, digits: usize) -> String {
    let text = sig(x, digits);
    if text.contains('.') && !text.contains('×') {
        text.trim_end_matches('0').trim_end_matches('.').to_string()
    } else {
        text
    }
}

/// The round tick spacing (1, 2 or 5 × 10ⁿ) nearest above `rough`, so √t ticks fall on numbers a reader can use.
fn round_step(rough: f64) -> f64 {
    let decade = 10f64.powf(rough.max(1e-9).log10().floor());
    [1.0, 2.0, 5.0, 10.0].into_iter().map(|m| m * decade).find(|s| *s >= rough * 0.999).unwrap_or(10.0 * decade)
}

/// A gauge length in the lab's unit to the usual resolution: 0.001 mm, 0.0001 in (common practice).
fn length(mm: Option<f64>, u: &DisplayUnits) -> String {
    let decimals = if u.length.name == "in" { 4 } else { 3 };
    num(mm.map(|v| u.length.show(v)), decimals)
}

/// One plot box: the data ranges and where they are drawn, y increasing downwards when `down`.
struct PlotBox {
    id: String,
    x: (f64, f64),
    y: (f64, f64),
    size: (f64, f64),
    margin: (f64, f64, f64, f64), // left, right, top, bottom
    down: bool,
}

impl PlotBox {
    fn sx(&self, x: f64) -> f64 {
        let (l, r, _, _) = self.margin;
        l + (x - self.x.0) / (self.x.1 - self.x.0) * (self.size.0 - l - r)
    }

    fn sy(&self, y: f64) -> f64 {
        let (_, _, t, b) = self.margin;
        let f = (y - self.y.0) / (self.y.1 - self.y.0);
        t + if self.down { f } else { 1.0 - f } * (self.size.1 - t - b)
    }

    /// The SVG's start: the box, and a clip path so lines stop at its edges.
    fn open(&self, class: &str, label: &str) -> String {
        let (w, h) = self.size;
        let (l, r, t, b) = self.margin;
        format!(
            "<svg class=\"{class}\" viewBox=\"0 0 {w} {h}\" role=\"img\" aria-label=\"{}\" xmlns=\"http://www.w3.org/2000/svg\">\
<defs><clipPath id=\"{id}\"><rect x=\"{l}\" y=\"{t}\" width=\"{}\" height=\"{}\"/></clipPath></defs>\
<rect x=\"{l}\" y=\"{t}\" width=\"{}\" height=\"{}\" fill=\"none\" stroke=\"#888\"/>",
            escape(label),
            w - l - r,
            h - t - b,
            w - l - r,
            h - t - b,
            id = self.id
        )
    }

    /// `f` drawn across the box (sampled, so a line in another variable draws right), clipped.
    fn curve(&self, f: impl Fn(f64) -> f64, colour: &str, dash: &str) -> String {
        let points: Vec<String> = (0..=40)
            .map(|i| {
                let x = self.x.0 + (self.x.1 - self.x.0) * f64::from(i) / 40.0;
                format!("{:.1},{:.1}", self.sx(x), self.sy(f(x)))
            })
            .collect();
        format!(
            "<polyline points=\"{}\" fill=\"none\" stroke=\"{colour}\" stroke-width=\"1.1\" stroke-dasharray=\"{dash}\" clip-path=\"url(#{})\"/>",
            points.join(" "),
            self.id
        )
    }

    /// A horizontal mark at `y`, labelled at the right.
    fn level(&self, y: f64, label: &str, font: f64) -> String {
        let (_, r, _, _) = self.margin;
        let py = self.sy(y);
        format!(
            "<line x1=\"{:.1}\" y1=\"{py:.1}\" x2=\"{:.1}\" y2=\"{py:.1}\" stroke=\"#1f6f43\" stroke-dasharray=\"2 3\"/><text x=\"{:.1}\" y=\"{:.1}\" font-size=\"{font}\" fill=\"#1f6f43\" text-anchor=\"end\">{label}</text>",
            self.margin.0,
            self.size.0 - r,
            self.size.0 - r - 2.0,
            py - 2.0
        )
    }

    /// A vertical mark at `x`, labelled at the top.
    fn at(&self, x: f64, label: &str, font: f64) -> String {
        let (_, _, t, b) = self.margin;
        let px = self.sx(x.clamp(self.x.0, self.x.1));
        format!(
            "<line x1=\"{px:.1}\" y1=\"{t}\" x2=\"{px:.1}\" y2=\"{}\" stroke=\"#1f6f43\" stroke-dasharray=\"2 3\"/><text x=\"{:.1}\" y=\"{}\" font-size=\"{font}\" fill=\"#1f6f43\">{label}</text>",
            self.size.1 - b,
            px + 2.0,
            t + font + 1.0
        )
    }

    /// The data as a line with a dot per point.
    fn data(&self, pts: &[(f64, f64)], dots: bool) -> String {
        let path: Vec<String> = pts.iter().map(|&(x, y)| format!("{:.1},{:.1}", self.sx(x), self.sy(y))).collect();
        let mut out = format!(
            "<polyline points=\"{}\" fill=\"none\" stroke=\"#2b5d8a\" stroke-width=\"1.4\" clip-path=\"url(#{})\"/>",
            path.join(" "),
            self.id
        );
        if dots {
            for &(x, y) in pts {
                let _ = write!(
                    out,
                    "<circle cx=\"{:.1}\" cy=\"{:.1}\" r=\"2.6\" fill=\"#2b5d8a\"/>",
                    self.sx(x),
                    self.sy(y)
                );
            }
        }
        out
    }

    /// Value labels at the box's left edge for the two ends of `y`, at `digits` decimals.
    fn y_ends(&self, lo: f64, hi: f64, digits: usize, font: f64) -> String {
        let mut out = String::new();
        for (k, y) in [lo, hi].into_iter().enumerate() {
            let _ = write!(
                out,
                "<text x=\"{:.1}\" y=\"{:.1}\" font-size=\"{font}\" text-anchor=\"end\">{y:.digits$}</text>",
                self.margin.0 - 3.0,
                self.sy(y) + if (k == 0) == self.down { font * 0.8 } else { 0.0 }
            );
        }
        out
    }

    /// A caption under the box.
    fn caption(&self, text: &str, font: f64) -> String {
        let (l, r, _, _) = self.margin;
        format!(
            "<text x=\"{:.1}\" y=\"{:.1}\" font-size=\"{font}\" text-anchor=\"middle\">{}</text>",
            (l + self.size.0 - r) / 2.0,
            self.size.1 - 4.0,
            escape(text)
        )
    }
}

/// Vertical grid lines at each decade from `x_lo` to `x_hi` (log10 values) of `plot`, labelled below with
/// the decade's value in `font` px.
fn decade_grid(svg: &mut String, plot: &PlotBox, font: f64) {
    let (_, _, t, b) = plot.margin;
    let mut decade = plot.x.0;
    while decade <= plot.x.1 + 1e-9 {
        let x = plot.sx(decade);
        let _ = write!(
            svg,
            "<line x1=\"{x:.1}\" y1=\"{t}\" x2=\"{x:.1}\" y2=\"{}\" stroke=\"#ddd\"/><text x=\"{x:.1}\" y=\"{:.1}\" font-size=\"{font}\" text-anchor=\"{}\">{}</text>",
            plot.size.1 - b,
            plot.size.1 - b + font * 1.25,
            // The last decade's label ends at the frame, inside the picture.
            if decade >= plot.x.1 - 1e-9 { "end" } else { "middle" },
            sig(Some(10f64.powf(decade)), 2)
        );
        decade += 1.0;
    }
}

/// The range of `values` padded by 8 % (at least `min_pad`).
fn padded(values: impl Iterator<Item = f64>, min_pad: f64) -> (f64, f64) {
    let (lo, hi) =
        values.filter(|v| v.is_finite()).fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| (a.min(v), b.max(v)));
    let pad = ((hi - lo) * 0.08).max(min_pad);
    (lo - pad, hi + pad)
}

/// One load step's two time curves side by side, in the lab's length unit: against log time with
/// Casagrande's construction (tangents, d0, d50, d100, t50, t100), and against √time with Taylor's (the
/// straight early part, the line at its `factor`× √t, d0, d90, t90), each as small as a page holds three
/// pairs of.
pub(crate) fn time_curve_svg(seq: i64, stress: &str, r: &IncrementReduction, u: &DisplayUnits) -> String {
    let l = u.length.per_stored;
    let digits = if u.length.name == "in" { 4 } else { 3 };
    let (w, h, margin) = (300.0, 190.0, (48.0, 8.0, 8.0, 30.0));
    let c = &r.casagrande;
    let logs: Vec<(f64, f64)> =
        r.nodes.iter().filter(|n| n.t_min > 0.0).map(|n| (n.t_min.log10(), n.d_mm * l)).collect();
    if logs.len() < 2 {
        return String::new();
    }
    let x_lo = logs.iter().map(|p| p.0).fold(f64::INFINITY, f64::min).floor();
    let x_hi = logs.iter().map(|p| p.0).fold(f64::NEG_INFINITY, f64::max).ceil().max(x_lo + 1.0);
    let marks = [c.d0_mm, c.d50_mm, c.d100_mm];
    let y = padded(logs.iter().map(|p| p.1).chain(marks.iter().flatten().map(|d| d * l)), 0.002 * l);
    let plot = PlotBox { id: format!("log-{seq}"), x: (x_lo, x_hi), y, size: (w, h), margin, down: true };
    let mut svg = plot.open("step-plot", &format!("load step {seq}: gauge reading against log time"));
    decade_grid(&mut svg, &plot, 9.0);
    svg += &plot.y_ends(y.0 + (y.1 - y.0) * 0.074, y.1 - (y.1 - y.0) * 0.074, digits, 9.0);
    for line in [c.inflection.as_ref().map(|i| i.line), c.secondary.as_ref().map(|s| s.line)].into_iter().flatten() {
        svg += &plot.curve(|x| line.at(x) * l, "#b5651d", "5 3");
    }
    for (label, value) in [("d0", c.d0_mm), ("d50", c.d50_mm), ("d100", c.d100_mm)] {
        if let Some(d) = value {
            svg += &plot.level(d * l, label, 9.0);
        }
    }
    for (label, value) in [("t50", c.t50_min), ("t100", c.t100_min)] {
        if let Some(t) = value.filter(|t| *t > 0.0) {
            svg += &plot.at(t.log10(), label, 9.0);
        }
    }
    svg += &plot.data(&logs, false);
    svg += &plot.caption(&format!("minutes (log) · gauge {}, down = compression", u.length.name), 9.0);
    svg += "</svg>";

    // √t: Taylor's construction lives early; the plot runs to 2.5·√t90 (or 2.5× the straight part's end).
    let ta = &r.taylor;
    let roots: Vec<(f64, f64)> =
        r.nodes.iter().filter(|n| n.t_min >= 0.0).map(|n| (n.t_min.sqrt(), n.d_mm * l)).collect();
    let whole = roots.iter().map(|p| p.0).fold(0.0, f64::max);
    let focus = ta.t90_min.map(|t| 2.5 * t.sqrt()).or(ta.straight.as_ref().map(|s| 2.5 * s.t_end_min().sqrt()));
    let x_max = focus.filter(|f| *f < whole).unwrap_or(whole).max(1e-3);
    let shown: Vec<(f64, f64)> = roots.iter().copied().filter(|p| p.0 <= x_max).collect();
    let y =
        padded(shown.iter().map(|p| p.1).chain([ta.d0_mm, ta.d90_mm].into_iter().flatten().map(|d| d * l)), 0.002 * l);
    let plot = PlotBox { id: format!("root-{seq}"), x: (0.0, x_max), y, size: (w, h), margin, down: true };
    let mut sq = plot.open("step-plot", &format!("load step {seq}: gauge reading against square root of time"));
    let step = round_step(x_max / 5.0);
    for k in 1..=((x_max / step + 1e-9).floor() as u32) {
        let x = step * f64::from(k);
        let _ = write!(
            sq,
            "<line x1=\"{x:.1}\" y1=\"{top}\" x2=\"{x:.1}\" y2=\"{bottom}\" stroke=\"#eee\"/><text x=\"{x:.1}\" y=\"{:.1}\" font-size=\"9\" text-anchor=\"middle\">{}</text>",
            h - margin.3 + 11.0,
            sig_trimmed(Some(x), 3),
            x = plot.sx(x),
            top = margin.2,
            bottom = h - margin.3,
        );
    }
    sq += &plot.y_ends(y.0 + (y.1 - y.0) * 0.074, y.1 - (y.1 - y.0) * 0.074, digits, 9.0);
    if let Some(fit) = &ta.straight {
        let line = fit.line;
        sq += &plot.curve(|x| line.at(x) * l, "#b5651d", "5 3");
    }
    if let Some(line) = ta.construction_line {
        sq += &plot.curve(|x| line.at(x) * l, "#b5651d", "1.5 2.5");
        let at = x_max * 0.62;
        let _ = write!(
            sq,
            "<text x=\"{:.1}\" y=\"{:.1}\" font-size=\"9\" fill=\"#b5651d\">×{:.2}</text>",
            plot.sx(at) + 3.0,
            plot.sy(line.at(at) * l).clamp(margin.2 + 9.0, h - margin.3 - 2.0),
            ta.factor()
        );
    }
    for (label, value) in [("d0", ta.d0_mm), ("d90", ta.d90_mm)] {
        if let Some(d) = value {
            sq += &plot.level(d * l, label, 9.0);
        }
    }
    if let Some(t) = ta.t90_min.filter(|t| *t > 0.0) {
        sq += &plot.at(t.sqrt(), "t90", 9.0);
    }
    sq += &plot.data(&shown, false);
    sq += &plot.caption(&format!("√minutes · gauge {}", u.length.name), 9.0);
    sq += "</svg>";
    format!(
        "<figure class=\"step\" data-seq=\"{seq}\"><figcaption>Load step {seq} · {stress} — t50 {} min (log t) · t90 {} min (√t)</figcaption><div class=\"pair\">{svg}{sq}</div></figure>",
        sig(c.t50_min, 3),
        sig(ta.t90_min, 3)
    )
}

/// The e–log σ′ curve as an SVG drawn here, σ′ in the lab's unit: the points joined in test order, the
/// points Cc and Cr were fitted to marked, their lines, and Casagrande's σ′p construction (the horizontal,
/// tangent and bisector through the point of greatest curvature, meeting the virgin line at σ′p).
pub(crate) fn e_log_svg(c: &CompressionReduction, u: &DisplayUnits) -> String {
    // x is log10 of σ′ in the lab's unit; the fitted lines are in log10 kPa.
    let shift = u.stress.per_stored.log10();
    let in_kpa = |x: f64| x - shift;
    let pts: Vec<(f64, f64)> =
        c.points.iter().filter(|p| p.stress_kpa > 0.0).map(|p| (p.stress_kpa.log10() + shift, p.e)).collect();
    if pts.is_empty() {
        return String::new();
    }
    let x_lo = pts.iter().map(|p| p.0).fold(f64::INFINITY, f64::min).floor();
    let x_hi = pts.iter().map(|p| p.0).fold(f64::NEG_INFINITY, f64::max).ceil().max(x_lo + 1.0);
    let y = padded(pts.iter().map(|p| p.1).chain([c.e0]), 0.01);
    let plot = PlotBox {
        id: "e-log".into(),
        x: (x_lo, x_hi),
        y,
        size: (640.0, 360.0),
        margin: (60.0, 20.0, 20.0, 44.0),
        down: false,
    };
    let mut svg = plot.open("plot", "void ratio against effective stress, log scale");
    decade_grid(&mut svg, &plot, 11.0);
    for k in 0..=4 {
        let e = y.0 + (y.1 - y.0) * f64::from(k) / 4.0;
        let _ = write!(
            svg,
            "<text x=\"{}\" y=\"{:.1}\" font-size=\"11\" text-anchor=\"end\">{e:.3}</text>",
            plot.margin.0 - 6.0,
            plot.sy(e) + 4.0
        );
    }
    for (index, colour, name) in [(&c.cc, "#b5651d", "Cc"), (&c.cr, "#65568a", "Cr")] {
        if let Some(fit) = index {
            let line = fit.line();
            svg += &plot.curve(|x| line.at(in_kpa(x)), colour, "6 3");
            for &i in fit.points() {
                if let Some(p) = c.points.get(i).filter(|p| p.stress_kpa > 0.0) {
                    let (px, py) = (plot.sx(p.stress_kpa.log10() + shift), plot.sy(p.e));
                    let _ = write!(
                        svg,
                        "<rect x=\"{:.1}\" y=\"{:.1}\" width=\"9\" height=\"9\" fill=\"none\" stroke=\"{colour}\" stroke-width=\"1.5\"><title>{name} point</title></rect>",
                        px - 4.5,
                        py - 4.5
                    );
                }
            }
        }
    }
    if let Some(p) = &c.sigma_p_casagrande
        && p.sigma_p_kpa > 0.0
    {
        let (m_kpa, m_e) = p.max_curvature();
        let [tangent, bisector, virgin] = p.lines();
        let m = m_kpa.log10() + shift;
        let sp = p.sigma_p_kpa.log10() + shift;
        let segment = |line: oedolog_core::analysis::Line, from: f64, to: f64| {
            format!(
                "<line x1=\"{:.1}\" y1=\"{:.1}\" x2=\"{:.1}\" y2=\"{:.1}\" stroke=\"#1f6f43\" stroke-dasharray=\"2 3\" clip-path=\"url(#e-log)\"/>",
                plot.sx(from),
                plot.sy(line.at(in_kpa(from))),
                plot.sx(to),
                plot.sy(line.at(in_kpa(to)))
            )
        };
        let _ = write!(
            svg,
            "<line x1=\"{:.1}\" y1=\"{y:.1}\" x2=\"{:.1}\" y2=\"{y:.1}\" stroke=\"#1f6f43\" stroke-dasharray=\"2 3\" clip-path=\"url(#e-log)\"/>",
            plot.sx(m),
            plot.sx(m.max(sp) + 0.4),
            y = plot.sy(m_e)
        );
        svg += &segment(tangent, m - 0.4, m + 0.4);
        svg += &segment(bisector, m, sp.max(m) + 0.1);
        let _ = write!(
            svg,
            "<circle cx=\"{:.1}\" cy=\"{:.1}\" r=\"3.5\" fill=\"#1f6f43\"><title>point of greatest curvature</title></circle><circle cx=\"{:.1}\" cy=\"{:.1}\" r=\"3.5\" fill=\"#9b2c2c\"/>",
            plot.sx(m),
            plot.sy(m_e),
            plot.sx(sp),
            plot.sy(virgin.at(p.sigma_p_kpa.log10()))
        );
        let x = plot.sx(sp.clamp(x_lo, x_hi));
        let _ = write!(
            svg,
            "<line x1=\"{x:.1}\" y1=\"{}\" x2=\"{x:.1}\" y2=\"{}\" stroke=\"#9b2c2c\" stroke-dasharray=\"4 3\"/><text x=\"{:.1}\" y=\"{}\" font-size=\"11\" fill=\"#9b2c2c\">σ′p</text>",
            plot.margin.2,
            plot.size.1 - plot.margin.3,
            x + 3.0,
            plot.margin.2 + 12.0
        );
    }
    svg += &plot.data(&pts, true);
    let _ = write!(
        svg,
        "<text x=\"{}\" y=\"{}\" font-size=\"12\" text-anchor=\"middle\">effective vertical stress σ′, {} (log scale)</text><text x=\"14\" y=\"{}\" font-size=\"12\" transform=\"rotate(-90 14 {})\" text-anchor=\"middle\">void ratio e</text></svg>",
        (plot.margin.0 + 640.0 - plot.margin.1) / 2.0,
        360.0 - 8.0,
        u.stress.name,
        180.0,
        180.0
    );
    svg
}

/// The report of test `r`, printed at `now_us`, in the lab's units `u`; `simulated` is the clock's speed
/// when time was simulated (the demo), which the report then states at its top and beside every date.
pub(crate) fn render(r: &TestSummary, now_us: i64, simulated: Option<f64>, u: &DisplayUnits) -> String {
    let t = &r.test;
    let stress = |kpa: Option<f64>, digits: usize| sig(kpa.map(|v| u.stress.show(v)), digits);
    let stress_text = |kpa: f64| format!("{} {}", sig_trimmed(Some(u.stress.show(kpa)), 4), u.stress.name);
    let sim_mark = if simulated.is_some() { " (simulated)" } else { "" };
    let mut html = String::new();
    let _ = write!(
        html,
        "<!doctype html><html lang=\"en\"><head><meta charset=\"utf-8\"><meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\
<title>Test {} — {}</title><style>\
body{{font-family:system-ui,sans-serif;margin:1.5rem;color:#1d2a30;max-width:1100px}}table{{border-collapse:collapse;margin:.5rem 0 1rem}}\
td,th{{padding:.25rem .45rem;border:1px solid #c9c4b7;text-align:right;font-variant-numeric:tabular-nums}}th{{background:#efece4}}\
td{{white-space:nowrap}}table.facts th{{text-align:left}}@media (min-width:40rem),print{{table.facts th{{white-space:nowrap}}}}\
@media screen and (max-width:40rem){{body{{margin:.8rem}}table.steps-table,table.e-table{{display:block;overflow-x:auto}}}}td.l,th.l{{text-align:left;white-space:normal}}table.steps-table td.l{{min-width:14em}}\
.steps{{display:grid;grid-template-columns:repeat(auto-fill,minmax(520px,1fr));gap:.6rem}}figure.step{{margin:0;break-inside:avoid}}\
figure.step figcaption{{font-size:.85rem;font-weight:600}}.pair{{display:grid;grid-template-columns:1fr 1fr;gap:.3rem}}.step-plot{{width:100%}}\
@page{{size:auto;margin:14mm 12mm}}.sim{{border:1px solid #e0c860;background:#fff3c4;padding:.4rem .7rem}}.plot{{max-width:640px;width:100%}}\
.approved{{border:2px solid #1f6f43;background:#eef7f0;padding:.4rem .7rem}}.unreviewed{{border:1px dashed #8a6d1f;padding:.4rem .7rem}}\
tr.adjusted td:first-child{{font-weight:700}}.caution{{border:1px solid #c9a13b;background:#fff8e0;padding:.5rem .8rem}}.sign td{{height:2.2rem;min-width:12rem;text-align:left}}.units{{font-size:.9rem}}\
@media print{{body{{margin:0;font-size:9.5pt;max-width:none}}.noprint{{display:none}}h2{{break-after:avoid}}table{{break-inside:auto}}tr,figure{{break-inside:avoid}}\
table.steps-table{{width:100%;font-size:8pt}}table.steps-table td,th{{white-space:normal}}table.steps-table td.l{{min-width:8em}}td,th{{padding:.15rem .25rem}}.steps{{grid-template-columns:1fr}}.plot{{max-width:150mm}}}}\
</style></head><body>",
        t.id,
        escape(&t.specimen)
    );
    let _ = write!(
        html,
        "<h1>Consolidation test {} — specimen {}</h1><p class=\"noprint\"><a href=\"/api/tests/{}/increments.csv\">load steps (CSV)</a> · <a href=\"/api/tests/{}/compression.csv\">e–σ′ table (CSV)</a></p>",
        t.id,
        escape(&t.specimen),
        t.id,
        t.id
    );
    if let Some(speed) = simulated {
        let _ = write!(
            html,
            "<p class=\"sim\"><strong>Simulated test.</strong> The frames were emulated and the clock ran {speed}× faster than real time: \
dates and durations below are simulated, not the lab's.</p>"
        );
    }
    let _ = write!(
        html,
        "<p class=\"units\">Units: {}. Stored and computed in kPa, mm, mm²/min and m/s; converted for this report with the factors of NIST SP 811 (2008), Appendix B.9.</p>",
        u.sentence()
    );
    html += &review_block(r, sim_mark, &stress_text, u);
    html += "<h2>Specimen and method</h2><table class=\"facts\">";
    let mut row = |k: &str, v: String| {
        let _ = write!(html, "<tr><th class=\"l\">{k}</th><td class=\"l\">{v}</td></tr>");
    };
    row("Frame", escape(&t.frame));
    row("Description", escape(&t.description));
    row("Initial height H0", format!("{} {}", length(Some(t.height_mm), u), u.length.name));
    row("Ring diameter", format!("{} {}", length(Some(t.diameter_mm), u), u.length.name));
    row("Dry mass", t.dry_mass_g.map_or("—".into(), |m| format!("{m:.2} g")));
    row("Specific gravity Gs", num(t.specific_gravity, 3));
    row("Initial water content", t.initial_water_content.map_or("—".into(), |w| format!("{:.1} %", w * 100.0)));
    row("Final water content", t.final_water_content.map_or("—".into(), |w| format!("{:.1} %", w * 100.0)));
    row("Seating stress", t.seating_kpa.map_or("—".into(), stress_text));
    if let Some(p) = &r.phase {
        row("Height of solids Hs", format!("{} {}", length(Some(p.solids_height_mm), u), u.length.name));
        row("Initial void ratio e0", format!("{:.3}", p.e0));
        row("Dry density", format!("{:.3} Mg/m³", p.dry_density_mg_per_m3));
    }
    // Method B as ASTM D2435 describes it [ref: test-methods]: readings on every load step, the next load
    // proposed at end of primary; the curve's basis follows from whether the steps had time curves.
    let curves = r.increments.iter().any(|i| i.curve.is_some());
    row(
        "Method",
        if curves {
            "Method B (ASTM D2435): time–deformation readings on every load step; each next load proposed at the end of primary consolidation found by the time-curve constructions. The e–log σ′ curve uses the height at end of primary (a step without one uses its end-of-step height, and says so)."
        } else {
            "Method A basis (ASTM D2435): the e–log σ′ curve uses the height at the end of each load step; no step has a time curve."
        }
        .to_string(),
    );
    row(
        "Deflection correction",
        if r.apparatus_corrected {
            "Settlements are corrected for apparatus deflection with the frame's calibration (deflection at the stress less that at the seating stress).".to_string()
        } else {
            "None: settlements are gauge readings from the test's zero; the frame has no calibration covering every stress.".to_string()
        },
    );
    // To the minute, as a person writes it ("2026-12-03 11:52 UTC"), not the API's microseconds.
    row("Started", escape(&minute_text(&t.started_at)) + sim_mark);
    row("Finished", t.finished_at.as_deref().map_or("running".into(), |f| escape(&minute_text(f)) + sim_mark));
    html += "</table>";

    let lu = u.length.name;
    let _ = write!(
        html,
        "<h2>Load steps</h2><table class=\"steps-table\"><tr><th>Step</th><th>σ′ {}</th><th>settlement {lu}</th><th>at end of primary {lu}</th>\
<th>t50 min</th><th>t90 min</th><th>cv(√t) {cv}</th><th>cv(log t) {cv}</th><th>cv proposed {cv}</th>\
<th>Cα(ε)</th><th class=\"l\">remarks</th></tr>",
        u.stress.name,
        cv = u.cv.name
    );
    let cv = |x: Option<f64>| sig(x.map(|v| u.cv.show(v)), 3);
    for i in &r.increments {
        let proposed = match (i.cv_mm2_per_min, i.cv_method) {
            (Some(value), Some(method)) => format!("{} ({})", cv(Some(value)), method_words(method)),
            _ => "none".to_string(),
        };
        let _ = write!(
            html,
            "<tr data-seq=\"{}\"{}><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td class=\"l\">{}</td></tr>",
            i.row.seq,
            if i.row.void.is_some() {
                " class=\"void\""
            } else if !i.adjusted.is_empty() {
                " class=\"adjusted\""
            } else {
                ""
            },
            if i.adjusted.is_empty() { i.row.seq.to_string() } else { format!("{} ✎", i.row.seq) },
            stress(Some(i.row.stress_kpa), 4),
            length(i.settlement_mm, u),
            length(i.settlement_eop_mm, u),
            sig(i.t50_min, 3),
            sig(i.t90_min, 3),
            cv(i.cv_taylor_mm2_per_min),
            cv(i.cv_casagrande_mm2_per_min),
            proposed,
            sig(i.c_alpha_strain, 3),
            escape(&match &i.row.void {
                Some(v) => {
                    let by = v.by.as_deref().map_or(String::new(), |b| format!(" by {b}"));
                    let mut words =
                        vec![format!("VOID{by} ({}): {}; left out of the reduction", minute_text(&v.at), v.reason)];
                    words.extend(i.flag_messages.iter().cloned());
                    words.join("; ")
                }
                None => {
                    let mut words: Vec<String> = Vec::new();
                    if let Some(v) = i.revision.as_ref().filter(|_| !i.adjusted.is_empty()) {
                        let fields: Vec<&str> = i.adjusted.iter().map(|f| words::choice(f)).collect();
                        words.push(format!("adjusted by {} ({}): {}", v.by, fields.join(", "), v.reason));
                    }
                    words.extend(i.flag_messages.iter().cloned());
                    words.join("; ")
                }
            })
        );
    }
    html += "</table>";
    // Every load step's time curves with both constructions, small enough for several a page.
    let plots: Vec<String> = r
        .increments
        .iter()
        .filter(|i| i.row.void.is_none())
        .filter_map(|i| i.curve.as_ref().map(|c| time_curve_svg(i.row.seq, &stress_text(i.row.stress_kpa), c, u)))
        .filter(|svg| !svg.is_empty())
        .collect();
    if !plots.is_empty() {
        html += "<h2>Time curves of the load steps</h2><p class=\"units\">Left: against log time, Casagrande's construction (tangents dashed; d0, d50, d100, t50, t100 dotted). \
Right: against √time, Taylor's construction (the straight early part dashed, the line at 1.15× its √t dotted, meeting the curve at t90).</p><div class=\"steps\">";
        html += &plots.join("");
        html += "</div>";
    }
    // Which construction each step's cv comes from, and why: the engineer's first question.
    let reasons: Vec<String> = r
        .increments
        .iter()
        .filter_map(|i| i.cv_reason.as_ref().map(|why| format!("<li>Step {}: {}</li>", i.row.seq, escape(why))))
        .collect();
    if !reasons.is_empty() {
        html += "<h3>cv proposed per step</h3><ul class=\"reasons\">";
        html += &reasons.concat();
        html += "</ul>";
    }

    html += "<h2>Void ratio and effective stress</h2>";
    match &r.compression {
        None => {
            let _ = write!(
                html,
                "<p>No e–log σ′ curve yet: {}.</p>",
                escape(r.compression_unavailable.as_deref().unwrap_or("no data"))
            );
        }
        Some(c) => {
            html += &e_log_svg(c, u);
            html += "<p class=\"units\">Points joined in test order; squares mark the points Cc (brown) and Cr (violet) were fitted to; \
Casagrande's construction for σ′p dotted in green.</p>";
            let _ = write!(
                html,
                "<table class=\"e-table\"><tr><th>Step</th><th>σ′ {}</th><th class=\"l\">branch</th><th>e</th><th>strain</th><th>mv {}</th><th>k {}</th></tr>",
                u.stress.name,
                u.mv().name,
                u.k.name
            );
            let counted: Vec<i64> = r.increments.iter().filter(|i| i.row.void.is_none()).map(|i| i.row.seq).collect();
            for (k, p) in c.points.iter().enumerate() {
                let branch =
                    serde_json::to_value(p.branch).ok().and_then(|v| v.as_str().map(String::from)).unwrap_or_default();
                let _ = write!(
                    html,
                    "<tr><td>{}</td><td>{}</td><td class=\"l\">{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
                    counted.get(k).map_or("—".to_string(), |s| s.to_string()),
                    stress(Some(p.stress_kpa), 4),
                    escape(&branch),
                    num(Some(p.e), 4),
                    num(Some(p.strain), 4),
                    sig(p.mv_per_kpa.map(|mv| u.mv().show(mv)), 3),
                    sig(p.k_m_per_s.map(|k| u.k.show(k)), 3)
                );
            }
            // The points each line was fitted to, by stress, so the reader can check them on the plot.
            let used = |fit: Option<&oedolog_core::analysis::IndexLine>| {
                fit.map_or(String::new(), |f| {
                    let at: Vec<String> = f
                        .points()
                        .iter()
                        .filter_map(|&i| c.points.get(i))
                        .map(|p| stress(Some(p.stress_kpa), 4))
                        .collect();
                    format!(" Points used: σ′ = {} {}.", at.join(", "), u.stress.name)
                })
            };
            html += "</table><h2>Parameters</h2><table>";
            let mut row = |k: &str, v: String, how: String| {
                let _ = write!(html, "<tr><th class=\"l\">{k}</th><td>{v}</td><td class=\"l\">{how}</td></tr>");
            };
            row("e0", num(Some(c.e0), 3), "from H0 and the height of solids Hs = Ms/(Gs·ρw·A)".into());
            let adjusted = |field: &str| r.review.compression_adjusted.contains(&field);
            let by = r.review.compression_revision.as_ref().map_or(String::new(), |v| escape(&v.by));
            let proposal = r.review.compression_proposal.as_ref();
            row(
                "Cc",
                num(c.cc.as_ref().map(|l| l.index), 3),
                if adjusted("virgin_points_kpa") {
                    format!(
                        "adjusted by {by}: the line through the loading points the engineer chose (proposal {}).",
                        num(proposal.and_then(|p| p.cc), 3)
                    )
                } else {
                    "slope of the steepest straight run of consecutive loading points past the break (virgin line)."
                        .to_string()
                } + &used(c.cc.as_ref()),
            );
            row(
                "Cr",
                num(c.cr.as_ref().map(|l| l.index), 3),
                if adjusted("unload_reload_points_kpa") {
                    format!(
                        "adjusted by {by}: the line through the unload–reload points the engineer chose (proposal {}).",
                        num(proposal.and_then(|p| p.cr), 3)
                    )
                } else {
                    "slope of the unload–reload branch.".to_string()
                } + &used(c.cr.as_ref()),
            );
            if let Some(chosen) = c.sigma_p_chosen_kpa {
                row(
                    "σ′p",
                    stress_text(chosen),
                    format!("set by the engineer ({by}); the constructions' values follow"),
                );
            }
            row(
                "σ′p",
                c.sigma_p_casagrande.as_ref().map_or("—".into(), |p| stress_text(p.sigma_p_kpa)),
                c.sigma_p_casagrande.as_ref().map_or(
                    "Casagrande's construction (greatest curvature, bisector, virgin line)".to_string(),
                    |p| {
                        format!(
                            "Casagrande's construction: greatest curvature at σ′ = {}, e = {:.3}; the bisector meets the virgin line here",
                            stress_text(p.max_curvature().0),
                            p.max_curvature().1
                        )
                    },
                ),
            );
            row(
                "σ′p",
                c.sigma_p_work.as_ref().map_or("—".into(), |p| stress_text(p.sigma_p_kpa)),
                "strain-energy (work) method, first loading branch".into(),
            );
            html += "</table>";
            if !c.flags.is_empty() {
                html += "<p>Remarks: ";
                html += &c.flags.iter().map(|f| escape(&f.to_string())).collect::<Vec<_>>().join("; ");
                html += "</p>";
            }
        }
    }
    let _ = write!(
        html,
        "<div class=\"caution\"><p><strong>Cautions.</strong> These results are proposals for a qualified engineer to review before they are used in design. \
Follow the governing standard and local codes. oedolog never changes a load on a dead-weight frame: every load is put on by a person.</p></div>\
<h2>Review</h2><table class=\"sign\"><tr><th class=\"l\">Tested by</th><td></td><th class=\"l\">Date</th><td></td></tr>\
<tr><th class=\"l\">Checked by</th><td>{checked_by}</td><th class=\"l\">Date</th><td>{checked_at}</td></tr></table>\
<p><small>Printed from oedolog {} at {}{sim_mark}.</small></p></body></html>",
        env!("CARGO_PKG_VERSION"),
        super::overview::minute(now_us),
        checked_by = r.review.approval.as_ref().map_or(String::new(), |a| escape(&a.by)),
        checked_at = r.review.approval.as_ref().map_or(String::new(), |a| format!("{}{sim_mark}", minute_text(&a.at))),
    );
    html
}

/// Where the review stands, at the top of the report: approved (by whom, when, what it covers), or not, and
/// every adjustment in force with the proposal beside it.
fn review_block(r: &TestSummary, sim_mark: &str, stress_text: &dyn Fn(f64) -> String, u: &DisplayUnits) -> String {
    let review = &r.review;
    let mut html = String::new();
    match &review.approval {
        Some(a) => {
            let steps = a.frozen["load_steps"].as_array().map_or(0, Vec::len);
            let _ = write!(
                html,
                "<div class=\"approved\" data-approved-by=\"{by}\"><p><strong>Reviewed and approved by {by} on {at}{sim_mark}</strong> ({steps} load step{s}, {n} adjustment{ns}).{note}</p></div>",
                by = escape(&a.by),
                at = minute_text(&a.at),
                s = if steps == 1 { "" } else { "s" },
                n = a.revisions.as_array().map_or(0, Vec::len),
                ns = if a.revisions.as_array().map_or(0, Vec::len) == 1 { "" } else { "s" },
                note = if a.note.is_empty() { String::new() } else { format!(" Note: {}", escape(&a.note)) },
            );
        }
        None => {
            let withdrawn = review.approvals.last().filter(|a| a.withdrawn_at.is_some());
            let why = match withdrawn {
                Some(a) => format!(
                    "The approval by {} on {}{sim_mark} was withdrawn by revision {} on {}{sim_mark}: the values below are not approved.",
                    escape(&a.by),
                    minute_text(&a.at),
                    a.withdrawn_by_revision.unwrap_or_default(),
                    a.withdrawn_at.as_deref().map(minute_text).unwrap_or_default()
                ),
                None => "Not yet reviewed by an engineer: the values below are the automatic proposals.".to_string(),
            };
            let _ = write!(html, "<p class=\"unreviewed\">{why}</p>");
        }
    }
    let in_force: Vec<_> = review.revisions.iter().filter(|v| v.in_force).collect();
    if in_force.is_empty() {
        return html;
    }
    html += "<h2>Adjustments by the engineer</h2><table class=\"adjustments\"><tr><th>Scope</th><th class=\"l\">What was set</th><th class=\"l\">Proposal → adjusted</th><th class=\"l\">By, when</th><th class=\"l\">Why</th></tr>";
    let cv = |x: Option<f64>| sig(x.map(|v| u.cv.show(v)), 3);
    for v in in_force {
        let (scope, fields, change) = match v.seq {
            Some(seq) => {
                let step = r.increments.iter().find(|i| i.row.seq == seq);
                let fields: Vec<&str> =
                    step.map(|s| s.adjusted.iter().map(|f| words::choice(f)).collect()).unwrap_or_default();
                let change = match (step, step.and_then(|s| s.proposal.as_ref())) {
                    (Some(s), Some(p)) => format!(
                        "t50 {} → {} min; t90 {} → {} min; cv {} → {} {}",
                        sig(p.t50_min, 3),
                        sig(s.t50_min, 3),
                        sig(p.t90_min, 3),
                        sig(s.t90_min, 3),
                        cv(p.cv_mm2_per_min),
                        cv(s.cv_mm2_per_min),
                        u.cv.name
                    ),
                    _ => "—".to_string(),
                };
                (format!("Load step {seq}"), fields, change)
            }
            None => {
                let fields = review.compression_adjusted.iter().map(|f| words::choice(f)).collect();
                let now = super::queries::CurveValues::of(r.compression.as_ref());
                let change = match &review.compression_proposal {
                    Some(p) => format!(
                        "Cc {} → {}; Cr {} → {}; σ′p {} → {}",
                        num(p.cc, 3),
                        num(now.cc, 3),
                        num(p.cr, 3),
                        num(now.cr, 3),
                        p.sigma_p_casagrande_kpa.map_or("—".into(), stress_text),
                        now.sigma_p_chosen_kpa.or(now.sigma_p_casagrande_kpa).map_or("—".into(), stress_text)
                    ),
                    None => "—".to_string(),
                };
                ("e–log σ′ curve".to_string(), fields, change)
            }
        };
        let _ = write!(
            html,
            "<tr data-revision=\"{}\"><td>{scope}</td><td class=\"l\">{}</td><td class=\"l\">{change}</td><td class=\"l\">{}, {}{sim_mark}</td><td class=\"l\">{}</td></tr>",
            v.id,
            escape(&fields.join(", ")),
            escape(&v.by),
            minute_text(&v.at),
            escape(&v.reason)
        );
    }
    html += "</table>";
    html
}

async fn report(State(state): State<AppState>, Path(id): Path<String>) -> Result<impl IntoResponse, ApiError> {
    let id = test_id(&id)?;
    let now = state.clock.now_us();
    let reduced = state.reduce_test(id).await?;
    let simulated = state.clock.is_simulated().then(|| state.clock.speed());
    Ok(([(header::CACHE_CONTROL, "no-store")], Html(render(&reduced, now, simulated, &state.display))))
}

pub(super) fn router() -> Router<AppState> {
    Router::new().route("/tests/{id}/report", get(report))
}

/// A construction's name for a reader: "√t" or "log t".
fn method_words(method: &str) -> &'static str {
    match method {
        "taylor" => "√t",
        "casagrande" => "log t",
        _ => "?",
    }
}
