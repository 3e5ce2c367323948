//! One test, two ways in: a test file reduced by `oedolog analyze test` (the command's own function) and
//! the same load steps stored through the lab book and the writer, then read through the API. Both must
//! give the same e, mv, k, cv, Cc, Cr and σ′p — one reduction of a test, one rule for Hs, the drainage
//! path, the cv behind k and the basis of the curve.
//!
//! The curves are exact Terzaghi primary consolidation (closed form, see `degree_of_consolidation` in the
//! parent module) plus a creep tail; the numbers are invented for this check.

use std::fmt::Write as _;

use super::*;

/// (σ′ kPa, primary settlement of the step mm, cv mm²/min): loading, an unload–reload cycle, loading on.
const STEPS: [(f64, f64, f64); 8] = [
    (25.0, 0.08, 4.0),
    (50.0, 0.12, 3.0),
    (100.0, 0.30, 2.0),
    (200.0, 0.70, 1.2),
    (100.0, -0.06, 6.0),
    (200.0, 0.07, 5.0),
    (400.0, 0.80, 1.0),
    (800.0, 0.85, 0.9),
];
/// Gauge reading at the test's zero, mm.
const ZERO_MM: f64 = 3.0;
/// Creep per log cycle of time after primary, as a share of the step's primary.
const CREEP: f64 = 0.04;

/// Whole seconds from 0 to a day, about log-spaced: times in minutes that survive µs stamps bit for bit.
fn seconds() -> Vec<i64> {
    let mut s: Vec<i64> = (0..=90).map(|k| (6.0 * 10f64.powf(k as f64 * 4.158 / 90.0)).round() as i64).collect();
    s.insert(0, 0);
    s.dedup();
    s
}

/// Each step's gauge readings `(t_min, mm)`, the first at the previous step's last reading.
fn curves() -> Vec<Vec<(f64, f64)>> {
    let mut gauge = ZERO_MM;
    let mut out = Vec::new();
    for &(_, primary, cv) in &STEPS {
        // H ≈ 19 mm, double drainage: Hdr ≈ 9.5 mm.
        let hdr2 = 9.5f64 * 9.5;
        let start = gauge;
        let curve: Vec<(f64, f64)> = seconds()
            .into_iter()
            .map(|s| {
                let t = s as f64 / 60.0;
                let tv = cv * t / hdr2;
                let creep = if tv > 1.0 { CREEP * primary * (tv / 1.0).log10() } else { 0.0 };
                (t, start + primary * degree_of_consolidation(tv) + creep)
            })
            .collect();
        gauge = curve[curve.len() - 1].1;
        out.push(curve);
    }
    out
}

/// Both null, or both numbers within 1e-9 of each other (relative).
fn same(what: &str, a: &Value, b: &Value) {
    if a.is_null() && b.is_null() {
        return;
    }
    close(what, a, b);
}

/// Both numbers, within 1e-9 of each other (relative).
fn close(what: &str, a: &Value, b: &Value) {
    let (Some(x), Some(y)) = (a.as_f64(), b.as_f64()) else {
        panic!("{what}: both must be numbers, got {a} and {b}");
    };
    assert!((x - y).abs() <= 1e-9 * x.abs().max(y.abs()).max(1e-30), "{what}: analyze {x} vs API {y}");
}

#[tokio::test]
async fn a_test_file_and_the_same_steps_stored_give_identical_parameters() {
    let b = bench(false);
    let curves = curves();

    // The test file: settlements cumulative from the zero, each step's time curve beside it.
    let dir = b.dir.path();
    let mut file = String::from(
        "[specimen]\ndiameter_mm = 63.5\nheight_mm = 20.0\ndry_mass_g = 95.0\nspecific_gravity = 2.70\n\
         initial_water_content = 0.42\nseating_stress_kpa = 5.0\n",
    );
    for (i, (curve, &(stress, _, _))) in curves.iter().zip(&STEPS).enumerate() {
        let mut csv = String::from("time_min,displacement_mm\n");
        for (t, d) in curve {
            writeln!(csv, "{t:?},{d:?}").unwrap();
        }
        std::fs::write(dir.join(format!("step{i}.csv")), csv).unwrap();
        let settlement = curve[curve.len() - 1].1 - ZERO_MM;
        write!(
            file,
            "\n[[increment]]\nstress_kpa = {stress:?}\nsettlement_mm = {settlement:?}\nreadings = \"step{i}.csv\"\n"
        )
        .unwrap();
    }
    let path = dir.join("test.toml");
    std::fs::write(&path, &file).unwrap();
    let report = serde_json::to_value(crate::analyze::test(&path).unwrap()).unwrap();

    // The same steps stored as the daemon stores them: the test started through the API, each load step
    // armed in the lab book, its t0 recorded at the previous step's last reading, every reading written.
    let (status, started) = call(&b.state, "POST", "/api/frames/F1/tests", Some(specimen())).await;
    assert_eq!(status, StatusCode::CREATED, "{started}");
    let test_id = started["test"]["test_id"].as_i64().unwrap();
    let key = b.state.lab.key(0);
    let displacement = |at_us: i64, value: f64| Reading {
        frame_key: key,
        channel: ChannelKind::Displacement,
        at_us,
        raw: value,
        value,
    };
    b.state.writer.reading(displacement(START_US + 1_000_000, ZERO_MM)).unwrap();
    let mut onset_us = START_US + 600_000_000;
    for (curve, &(stress, _, _)) in curves.iter().zip(&STEPS) {
        b.state.lab.arm(0, stress, onset_us - 1_000_000, None).unwrap();
        b.state.lab.set_onset(0, onset_us, OnsetSource::LoadStep, "t0 (test)".into()).unwrap();
        for &(t, d) in curve {
            b.state.writer.reading(displacement(onset_us + (t * 6e7).round() as i64, d)).unwrap();
        }
        onset_us += (curve[curve.len() - 1].0 * 6e7).round() as i64;
    }
    settle(&b);
    b.clock.advance_us(onset_us - START_US);
    let (status, api) = call(&b.state, "GET", &format!("/api/tests/{test_id}/compression"), None).await;
    assert_eq!(status, StatusCode::OK, "{api}");
    let compression = &api["compression"];
    assert!(compression.is_object(), "{}", api["compression_unavailable"]);

    for i in 0..STEPS.len() {
        let (file_row, point, summary) = (&report["increments"][i], &compression["points"][i], &api["increments"][i]);
        close(&format!("step {i} e"), &file_row["e"], &point["e"]);
        if i > 0 {
            close(&format!("step {i} mv"), &file_row["mv_per_kpa"], &point["mv_per_kpa"]);
        }
        // Either way in, a value is there or not alike (a swelling step may have no √t line).
        same(&format!("step {i} cv(√t)"), &file_row["cv_taylor_mm2_per_min"], &summary["cv_taylor_mm2_per_min"]);
        same(
            &format!("step {i} cv(log t)"),
            &file_row["cv_casagrande_mm2_per_min"],
            &summary["cv_casagrande_mm2_per_min"],
        );
        same(&format!("step {i} k"), &file_row["k_m_per_s"], &point["k_m_per_s"]);
    }
    // The loading steps are plain Terzaghi curves: each has both cv and a k.
    for (i, &(stress, _, _)) in STEPS.iter().enumerate() {
        if compression["points"][i]["branch"] == "loading" {
            let summary = &api["increments"][i];
            assert!(summary["cv_taylor_mm2_per_min"].is_number(), "{stress} kPa: cv(√t) {summary}");
            assert!(compression["points"][i]["k_m_per_s"].is_number(), "{stress} kPa: k");
        }
    }
    close("Cc", &report["cc"], &compression["cc"]["index"]);
    close("Cr", &report["cr"], &compression["cr"]["index"]);
    close("σ′p (Casagrande)", &report["sigma_p_kpa"], &compression["sigma_p_casagrande"]["sigma_p_kpa"]);
    close("σ′p (work)", &report["sigma_p_work_kpa"], &compression["sigma_p_work"]["sigma_p_kpa"]);
    close("Hs", &report["hs_mm"], &api["phase"]["solids_height_mm"]);
}
