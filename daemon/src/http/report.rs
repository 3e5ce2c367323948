//! The printable report of one test, server-rendered at `/tests/{id}/report`: specimen data, the increment
//! table, the e–log σ′ table and an inline SVG of e against log σ′, the parameters (cv, Cα, mv, k, Cc, Cr,
//! σ′p with the method of each) and the cautions. Read-only; print CSS, no scripts, nothing external.

use std::fmt::Write;

use axum::Router;
use axum::extract::{Path, State};
use axum::http::header;
use axum::response::{Html, IntoResponse};
use axum::routing::get;

use super::lab_book::test_id;
use super::overview::{escape, minute_text};
use super::queries::TestSummary;
use super::{ApiError, AppState};
use oedolog_core::analysis::{CompressionReduction, IncrementReduction};

fn num(x: Option<f64>, digits: usize) -> String {
    x.filter(|v| v.is_finite()).map_or("—".to_string(), |v| format!("{v:.digits$}"))
}

fn sci(x: Option<f64>) -> String {
    x.filter(|v| v.is_finite()).map_or("—".to_string(), |v| format!("{v:.3e}"))
}

/// Vertical grid lines at each decade from `x_lo` to `x_hi` (log10 values), between `ys`, labelled below
/// with the decade's value in `font` px.
fn decade_grid(svg: &mut String, x_lo: f64, x_hi: f64, sx: impl Fn(f64) -> f64, ys: (f64, f64), font: f64) {
    let mut decade = x_lo;
    while decade <= x_hi + 1e-9 {
        let x = sx(decade);
        let _ = write!(
            svg,
            "<line x1=\"{x:.1}\" y1=\"{}\" x2=\"{x:.1}\" y2=\"{}\" stroke=\"#ddd\"/><text x=\"{x:.1}\" y=\"{:.1}\" font-size=\"{font}\" text-anchor=\"middle\">{}</text>",
            ys.0,
            ys.1,
            ys.1 + font * 1.25,
            10f64.powf(decade)
        );
        decade += 1.0;
    }
}

/// One load step's time curve as a small SVG: the binned readings against log time, with Casagrande's d0,
/// d50 and d100 and its t50 and t100, so each step's construction can be checked on paper.
pub(crate) fn time_curve_svg(seq: i64, stress_kpa: f64, r: &IncrementReduction) -> String {
    let pts: Vec<(f64, f64)> = r.nodes.iter().filter(|n| n.t_min > 0.0).map(|n| (n.t_min.log10(), n.d_mm)).collect();
    if pts.len() < 2 {
        return String::new();
    }
    let c = &r.casagrande;
    let (w, h, left, right, top, bottom) = (300.0, 190.0, 46.0, 8.0, 20.0, 30.0);
    let x_lo = pts.iter().map(|p| p.0).fold(f64::INFINITY, f64::min).floor();
    let x_hi = pts.iter().map(|p| p.0).fold(f64::NEG_INFINITY, f64::max).ceil().max(x_lo + 1.0);
    let marks = [c.d0_mm, c.d50_mm, c.d100_mm];
    let d_lo = pts.iter().map(|p| p.1).chain(marks.iter().flatten().copied()).fold(f64::INFINITY, f64::min);
    let d_hi = pts.iter().map(|p| p.1).chain(marks.iter().flatten().copied()).fold(f64::NEG_INFINITY, f64::max);
    let pad = ((d_hi - d_lo) * 0.08).max(0.002);
    let (y_lo, y_hi) = (d_lo - pad, d_hi + pad);
    let sx = |x: f64| left + (x.clamp(x_lo, x_hi) - x_lo) / (x_hi - x_lo) * (w - left - right);
    // Compression downwards, as the gauge moves.
    let sy = |y: f64| top + (y - y_lo) / (y_hi - y_lo) * (h - top - bottom);
    let mut svg = format!(
        "<svg class=\"step-plot\" viewBox=\"0 0 {w} {h}\" role=\"img\" aria-label=\"load step {seq}: gauge reading against log time\" xmlns=\"http://www.w3.org/2000/svg\">\
<text x=\"{left}\" y=\"13\" font-size=\"11\" font-weight=\"600\">Step {seq} · {stress_kpa:.1} kPa</text>\
<rect x=\"{left}\" y=\"{top}\" width=\"{}\" height=\"{}\" fill=\"none\" stroke=\"#888\"/>",
        w - left - right,
        h - top - bottom
    );
    decade_grid(&mut svg, x_lo, x_hi, sx, (top, h - bottom), 9.0);
    for (k, y) in [y_lo + pad, y_hi - pad].into_iter().enumerate() {
        let _ = write!(
            svg,
            "<text x=\"{}\" y=\"{:.1}\" font-size=\"9\" text-anchor=\"end\">{y:.3}</text>",
            left - 3.0,
            sy(y) + if k == 0 { 8.0 } else { 0.0 }
        );
    }
    for (label, value) in [("d0", c.d0_mm), ("d50", c.d50_mm), ("d100", c.d100_mm)] {
        if let Some(d) = value {
            let y = sy(d);
            let _ = write!(
                svg,
                "<line x1=\"{left}\" y1=\"{y:.1}\" x2=\"{}\" y2=\"{y:.1}\" stroke=\"#1f6f43\" stroke-dasharray=\"2 3\"/><text x=\"{}\" y=\"{:.1}\" font-size=\"9\" fill=\"#1f6f43\" text-anchor=\"end\">{label}</text>",
                w - right,
                w - right - 2.0,
                y - 2.0
            );
        }
    }
    for (label, value) in [("t50", c.t50_min), ("t100", c.t100_min)] {
        if let Some(t) = value.filter(|t| *t > 0.0) {
            let x = sx(t.log10());
            let _ = write!(
                svg,
                "<line x1=\"{x:.1}\" y1=\"{top}\" x2=\"{x:.1}\" y2=\"{}\" stroke=\"#1f6f43\" stroke-dasharray=\"2 3\"/><text x=\"{:.1}\" y=\"{}\" font-size=\"9\" fill=\"#1f6f43\">{label}</text>",
                h - bottom,
                x + 2.0,
                top + 10.0
            );
        }
    }
    let path: Vec<String> = pts.iter().map(|&(x, y)| format!("{:.1},{:.1}", sx(x), sy(y))).collect();
    let _ = write!(
        svg,
        "<polyline points=\"{}\" fill=\"none\" stroke=\"#2b5d8a\" stroke-width=\"1.4\"/><text x=\"{}\" y=\"{}\" font-size=\"9\" text-anchor=\"middle\">minutes (log) · gauge mm, down = compression</text></svg>",
        path.join(" "),
        (left + w - right) / 2.0,
        h - 4.0
    );
    svg
}

/// The e–log σ′ curve as an SVG drawn here: points joined in order, decades on the x axis.
pub(crate) fn e_log_svg(c: &CompressionReduction) -> String {
    let pts: Vec<(f64, f64)> =
        c.points.iter().filter(|p| p.stress_kpa > 0.0).map(|p| (p.stress_kpa.log10(), p.e)).collect();
    if pts.is_empty() {
        return String::new();
    }
    let (w, h, left, right, top, bottom) = (640.0, 360.0, 60.0, 20.0, 20.0, 44.0);
    let x_lo = pts.iter().map(|p| p.0).fold(f64::INFINITY, f64::min).floor();
    let x_hi = pts.iter().map(|p| p.0).fold(f64::NEG_INFINITY, f64::max).ceil().max(x_lo + 1.0);
    let e_lo = pts.iter().map(|p| p.1).fold(c.e0, f64::min);
    let e_hi = pts.iter().map(|p| p.1).fold(c.e0, f64::max);
    let pad = ((e_hi - e_lo) * 0.08).max(0.01);
    let (y_lo, y_hi) = (e_lo - pad, e_hi + pad);
    let sx = |x: f64| left + (x - x_lo) / (x_hi - x_lo) * (w - left - right);
    let sy = |y: f64| top + (y_hi - y) / (y_hi - y_lo) * (h - top - bottom);
    let mut svg = format!(
        "<svg class=\"plot\" viewBox=\"0 0 {w} {h}\" role=\"img\" aria-label=\"void ratio against effective stress, log scale\" xmlns=\"http://www.w3.org/2000/svg\">"
    );
    let _ = write!(
        svg,
        "<rect x=\"{left}\" y=\"{top}\" width=\"{}\" height=\"{}\" fill=\"none\" stroke=\"#888\"/>",
        w - left - right,
        h - top - bottom
    );
    decade_grid(&mut svg, x_lo, x_hi, sx, (top, h - bottom), 11.0);
    for k in 0..=4 {
        let e = y_lo + (y_hi - y_lo) * f64::from(k) / 4.0;
        let _ = write!(
            svg,
            "<text x=\"{}\" y=\"{:.1}\" font-size=\"11\" text-anchor=\"end\">{e:.3}</text>",
            left - 6.0,
            sy(e) + 4.0
        );
    }
    let path: Vec<String> = pts.iter().map(|&(x, y)| format!("{:.1},{:.1}", sx(x), sy(y))).collect();
    let _ =
        write!(svg, "<polyline points=\"{}\" fill=\"none\" stroke=\"#2b5d8a\" stroke-width=\"1.6\"/>", path.join(" "));
    for &(x, y) in &pts {
        let _ = write!(svg, "<circle cx=\"{:.1}\" cy=\"{:.1}\" r=\"3\" fill=\"#2b5d8a\"/>", sx(x), sy(y));
    }
    if let Some(p) = &c.sigma_p_casagrande
        && p.sigma_p_kpa > 0.0
    {
        let x = sx(p.sigma_p_kpa.log10().clamp(x_lo, x_hi));
        let _ = write!(
            svg,
            "<line x1=\"{x:.1}\" y1=\"{top}\" x2=\"{x:.1}\" y2=\"{}\" stroke=\"#9b2c2c\" stroke-dasharray=\"4 3\"/><text x=\"{:.1}\" y=\"{}\" font-size=\"11\" fill=\"#9b2c2c\">σ′p</text>",
            h - bottom,
            x + 3.0,
            top + 12.0
        );
    }
    let _ = write!(
        svg,
        "<text x=\"{}\" y=\"{}\" font-size=\"12\" text-anchor=\"middle\">effective vertical stress σ′, kPa (log scale)</text><text x=\"14\" y=\"{}\" font-size=\"12\" transform=\"rotate(-90 14 {})\" text-anchor=\"middle\">void ratio e</text></svg>",
        (left + w - right) / 2.0,
        h - 8.0,
        h / 2.0,
        h / 2.0
    );
    svg
}

/// The report of test `r`, printed at `now_us`; `simulated` is the clock's speed when time was simulated (the
/// demo), which the report then states at its top.
pub(crate) fn render(r: &TestSummary, now_us: i64, simulated: Option<f64>) -> String {
    let t = &r.test;
    let mut html = String::new();
    let _ = write!(
        html,
        "<!doctype html><html lang=\"en\"><head><meta charset=\"utf-8\"><meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\
<title>Test {} — {}</title><style>\
body{{font-family:system-ui,sans-serif;margin:1.5rem;color:#1d2a30}}table{{border-collapse:collapse;margin:.5rem 0 1rem}}\
td,th{{padding:.25rem .5rem;border:1px solid #c9c4b7;text-align:right;font-variant-numeric:tabular-nums}}th{{background:#efece4}}\
td{{white-space:nowrap}}td.l,th.l{{text-align:left;white-space:normal}}.steps{{display:grid;grid-template-columns:repeat(auto-fill,minmax(260px,1fr));gap:.5rem}}.step-plot{{width:100%;break-inside:avoid}}\
@page{{size:auto;margin:14mm 12mm}}.sim{{border:1px solid #e0c860;background:#fff3c4;padding:.4rem .7rem}}.plot{{max-width:640px;width:100%}}.caution{{border:1px solid #c9a13b;background:#fff8e0;padding:.5rem .8rem}}\
@media print{{body{{margin:0;font-size:10pt}}.noprint{{display:none}}h2{{page-break-after:avoid}}table{{page-break-inside:avoid}}}}\
</style></head><body>",
        t.id,
        escape(&t.specimen)
    );
    let _ = write!(
        html,
        "<h1>Consolidation test {} — specimen {}</h1><p class=\"noprint\"><a href=\"/api/tests/{}/increments.csv\">increments.csv</a> · <a href=\"/api/tests/{}/compression.csv\">e–σ′ table.csv</a></p>",
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
    html += "<h2>Specimen</h2><table>";
    let mut row = |k: &str, v: String| {
        let _ = write!(html, "<tr><th class=\"l\">{k}</th><td class=\"l\">{v}</td></tr>");
    };
    row("Frame", escape(&t.frame));
    row("Description", escape(&t.description));
    row("Initial height H0", format!("{:.3} mm", t.height_mm));
    row("Ring diameter", format!("{:.2} mm", t.diameter_mm));
    row("Dry mass", t.dry_mass_g.map_or("—".into(), |m| format!("{m:.2} g")));
    row("Specific gravity Gs", num(t.specific_gravity, 3));
    row("Initial water content", t.initial_water_content.map_or("—".into(), |w| format!("{:.1} %", w * 100.0)));
    row("Final water content", t.final_water_content.map_or("—".into(), |w| format!("{:.1} %", w * 100.0)));
    row("Seating stress", t.seating_kpa.map_or("—".into(), |s| format!("{s:.1} kPa")));
    if let Some(p) = &r.phase {
        row("Height of solids Hs", format!("{:.3} mm", p.solids_height_mm));
        row("Initial void ratio e0", format!("{:.3}", p.e0));
        row("Dry density", format!("{:.3} Mg/m³", p.dry_density_mg_per_m3));
    }
    // To the minute, as a person writes it ("2026-12-03 11:52 UTC"), not the API's microseconds.
    row("Started", escape(&minute_text(&t.started_at)));
    row("Finished", t.finished_at.as_deref().map_or("running".into(), |f| escape(&minute_text(f))));
    html += "</table>";

    html += "<h2>Load steps</h2><table><tr><th>Step</th><th>σ′ kPa</th><th>settlement mm</th><th>at end of primary mm</th>\
<th>t50 min</th><th>t90 min</th><th>cv(√t) mm²/min</th><th>cv(log t) mm²/min</th><th>cv proposed mm²/min</th>\
<th>Cα(ε)</th><th class=\"l\">remarks</th></tr>";
    for i in &r.increments {
        let proposed = match (i.cv_mm2_per_min, i.cv_method) {
            (Some(cv), Some(method)) => format!("{} ({})", num(Some(cv), 3), method_words(method)),
            _ => "none".to_string(),
        };
        let _ = write!(
            html,
            "<tr><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td class=\"l\">{}</td></tr>",
            i.row.seq,
            num(Some(i.row.stress_kpa), 1),
            num(i.settlement_mm, 3),
            num(i.settlement_eop_mm, 3),
            num(i.t50_min, 2),
            num(i.t90_min, 2),
            num(i.cv_taylor_mm2_per_min, 3),
            num(i.cv_casagrande_mm2_per_min, 3),
            proposed,
            sci(i.c_alpha_strain),
            escape(&match &i.row.void {
                Some(v) => {
                    let by = v.by.as_deref().map_or(String::new(), |b| format!(" by {b}"));
                    let mut words = vec![format!("VOID{by} ({}): {}; left out of the reduction", v.at, v.reason)];
                    words.extend(i.flag_messages.iter().cloned());
                    words.join("; ")
                }
                None => i.flag_messages.join("; "),
            })
        );
    }
    html += "</table>";
    // Every load step's time curve with its log-time construction, small enough for two or three a row.
    let plots: Vec<String> = r
        .increments
        .iter()
        .filter(|i| i.row.void.is_none())
        .filter_map(|i| i.curve.as_ref().map(|c| time_curve_svg(i.row.seq, i.row.stress_kpa, c)))
        .filter(|svg| !svg.is_empty())
        .collect();
    if !plots.is_empty() {
        html += "<h2>Time curves of the load steps</h2><div class=\"steps\">";
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
            html += &e_log_svg(c);
            html += "<table><tr><th>σ′ kPa</th><th class=\"l\">branch</th><th>e</th><th>strain</th><th>mv m²/MN</th><th>k m/s</th></tr>";
            for p in &c.points {
                let branch =
                    serde_json::to_value(p.branch).ok().and_then(|v| v.as_str().map(String::from)).unwrap_or_default();
                let _ = write!(
                    html,
                    "<tr><td>{}</td><td class=\"l\">{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
                    num(Some(p.stress_kpa), 1),
                    escape(&branch),
                    num(Some(p.e), 4),
                    num(Some(p.strain), 4),
                    num(p.mv_per_kpa.map(|mv| mv * 1000.0), 3),
                    sci(p.k_m_per_s)
                );
            }
            html += "</table><h2>Parameters</h2><table>";
            let mut row = |k: &str, v: String, how: &str| {
                let _ = write!(html, "<tr><th class=\"l\">{k}</th><td>{v}</td><td class=\"l\">{how}</td></tr>");
            };
            row("e0", num(Some(c.e0), 3), "from H0 and the height of solids Hs = Ms/(Gs·ρw·A)");
            row(
                "Cc",
                num(c.cc.as_ref().map(|l| l.index), 3),
                "slope of the steepest straight run of consecutive loading points past the break (virgin line)",
            );
            row("Cr", num(c.cr.as_ref().map(|l| l.index), 3), "slope of the unload–reload branch");
            row(
                "σ′p",
                c.sigma_p_casagrande.as_ref().map_or("—".into(), |p| format!("{:.0} kPa", p.sigma_p_kpa)),
                "Casagrande's construction (maximum curvature, bisector, virgin line)",
            );
            row(
                "σ′p",
                c.sigma_p_work.as_ref().map_or("—".into(), |p| format!("{:.0} kPa", p.sigma_p_kpa)),
                "strain-energy (work) method",
            );
            html += "</table>";
            if !c.flags.is_empty() {
                html += "<p>Remarks: ";
                html += &c.flags.iter().map(|f| escape(&f.to_string())).collect::<Vec<_>>().join("; ");
                html += "</p>";
            }
        }
    }
    if r.apparatus_corrected {
        html += "<p>Settlements are corrected for apparatus deflection with the frame's calibration (deflection at the stress less that at the seating stress).</p>";
    } else {
        html += "<p>Settlements are gauge readings from the test's zero, not (or not all) corrected for apparatus deflection: the frame has no calibration covering every stress.</p>";
    }
    let _ = write!(
        html,
        "<div class=\"caution\"><p><strong>Cautions.</strong> These results are proposals for a qualified engineer to review. \
Follow the governing standard and local codes. oedolog never changes a load on a dead-weight frame: every load is put on by a person.</p></div>\
<p><small>Printed from oedolog {} at {}.</small></p></body></html>",
        env!("CARGO_PKG_VERSION"),
        super::overview::minute(now_us)
    );
    html
}

async fn report(State(state): State<AppState>, Path(id): Path<String>) -> Result<impl IntoResponse, ApiError> {
    let id = test_id(&id)?;
    let now = state.clock.now_us();
    let reduced = state.reduce_test(id).await?;
    let simulated = state.clock.is_simulated().then(|| state.clock.speed());
    Ok(([(header::CACHE_CONTROL, "no-store")], Html(render(&reduced, now, simulated))))
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
