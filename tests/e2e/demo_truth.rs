//! The demo against its own answer key (a short version of `tests/bench/accuracy.sh`): `oedolog demo
//! --truth FILE` runs four simulated frames fast; the simulator's forward model (exact Terzaghi primary,
//! an independent implementation: simulator/src/physics.rs) writes the truth of every load step it applies;
//! the daemon's reductions of the steps that reached `ready` are compared with it.

use std::collections::HashMap;
use std::process::Command;
use std::time::{Duration, Instant};

use oedolog_tests::{ChildGuard, temp_dir, workspace_binary};
use serde_json::Value;

use crate::api::http;

fn stamp_us(text: &str) -> i64 {
    chrono_free_rfc3339_us(text).unwrap_or_else(|| panic!("not an RFC 3339 stamp: {text}"))
}

/// `YYYY-MM-DDTHH:MM:SS[.ffffff]Z` to µs since the epoch (the daemon writes UTC with a `Z`).
fn chrono_free_rfc3339_us(text: &str) -> Option<i64> {
    let (date, time) = text.strip_suffix('Z')?.split_once('T')?;
    let mut d = date.split('-').map(|p| p.parse::<i64>());
    let (y, m, day) = (d.next()?.ok()?, d.next()?.ok()?, d.next()?.ok()?);
    let (hms, frac) = time.split_once('.').unwrap_or((time, "0"));
    let mut t = hms.split(':').map(|p| p.parse::<i64>());
    let (h, min, s) = (t.next()?.ok()?, t.next()?.ok()?, t.next()?.ok()?);
    let micros: i64 = format!("{frac:0<6}")[..6].parse().ok()?;
    // Days from the civil date (Howard Hinnant's algorithm, public domain).
    let (y2, m2) = if m <= 2 { (y - 1, m + 9) } else { (y, m - 3) };
    let era = y2.div_euclid(400);
    let yoe = y2 - era * 400;
    let doy = (153 * m2 + 2) / 5 + day - 1;
    let doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
    let days = era * 146_097 + doe - 719_468;
    Some(((days * 86_400 + h * 3600 + min * 60 + s) * 1_000_000) + micros)
}

#[test]
fn rfc3339_stamps_read_back_to_the_epoch_microsecond() {
    // 2024-05-01T08:00:00Z = 1 714 550 400 s (as `date -u -d 2024-05-01T08:00:00Z +%s` prints).
    assert_eq!(chrono_free_rfc3339_us("2024-05-01T08:00:00Z"), Some(1_714_550_400_000_000));
    assert_eq!(chrono_free_rfc3339_us("1970-01-01T00:00:00.000001Z"), Some(1));
    assert_eq!(chrono_free_rfc3339_us("2024-02-29T23:59:59.5Z"), Some(1_709_251_199_500_000));
}

/// The demo's clock speed here: simulated seconds per real second.
const SPEED: f64 = 3000.0;

fn median(mut v: Vec<f64>) -> f64 {
    v.sort_by(f64::total_cmp);
    v[v.len() / 2]
}

#[test]
fn the_demo_reductions_agree_with_the_simulators_answer_key() {
    let dir = temp_dir();
    let truth_path = dir.path().join("truth.jsonl");
    let mut command = Command::new(workspace_binary("oedolog"));
    command
        .args(["demo", "--frames", "4", "--speed", &SPEED.to_string(), "--listen", "127.0.0.1:0", "--db"])
        .arg(dir.path().join("demo.sqlite"))
        .arg("--truth")
        .arg(&truth_path);
    let (demo, line) = ChildGuard::spawn_ready("oedolog demo", command, "dashboard at http://").unwrap();
    let addr = line.trim_start_matches("dashboard at http://").trim_end_matches('/').parse().unwrap();
    let get = |path: &str| -> Value {
        let (status, _, body) = http(addr, "GET", path, None, None).unwrap();
        assert_eq!(status, 200, "GET {path}: {body}");
        serde_json::from_str(&body).unwrap()
    };

    // Until enough load steps have reached ready (each frame does several an hour of simulated time).
    let deadline = Instant::now() + Duration::from_secs(120);
    let steps = loop {
        let frames = get("/api/frames");
        let mut ready = Vec::new();
        for f in frames.as_array().unwrap() {
            let Some(test) = f["test"]["test_id"].as_i64() else { continue };
            let reduced = get(&format!("/api/tests/{test}/compression"));
            for inc in reduced["increments"].as_array().unwrap() {
                if inc["ready_at"].is_string() {
                    ready.push((f["id"].as_str().unwrap().to_string(), inc.clone()));
                }
            }
        }
        if ready.len() >= 16 || Instant::now() > deadline {
            break ready;
        }
        std::thread::sleep(Duration::from_millis(500));
    };
    assert!(steps.len() >= 12, "only {} load steps reached ready in time:\n{}", steps.len(), demo.output_log());

    // The answer key: one line per load step applied, the pinned keys.
    let text = std::fs::read_to_string(&truth_path).unwrap();
    let mut truth: HashMap<(String, i64), Value> = HashMap::new();
    for line in text.lines() {
        let r: Value = serde_json::from_str(line).unwrap_or_else(|e| panic!("{e}: {line}"));
        for key in ["frame", "seq", "stress_kpa", "onset_at", "cv_mm2_per_min", "t50_min", "t90_min", "t100_min"] {
            assert!(!r[key].is_null(), "{key} missing in {line}");
        }
        truth.insert((r["frame"].as_str().unwrap().to_string(), r["seq"].as_i64().unwrap()), r);
    }

    let (mut ratios, mut cv_errors, mut t0_errors) = (Vec::new(), Vec::new(), Vec::new());
    for (frame, inc) in &steps {
        let seq = inc["seq"].as_i64().unwrap();
        let t = truth.get(&(frame.clone(), seq)).unwrap_or_else(|| panic!("{frame} step {seq} is not in the key"));
        assert_eq!(t["stress_kpa"], inc["stress_kpa"], "{frame} step {seq}: the key and the store agree on the stress");
        let onset = stamp_us(t["onset_at"].as_str().unwrap());
        let found = stamp_us(inc["onset_at"].as_str().unwrap());
        t0_errors.push(((found - onset) as f64 / 1e6, format!("{frame} step {seq}")));
        let ready = stamp_us(inc["ready_at"].as_str().unwrap());
        let t100_us = t["t100_min"].as_f64().unwrap() * 6e7;
        ratios.push((ready - onset) as f64 / t100_us);
        if let Some(cv) = inc["cv_mm2_per_min"].as_f64() {
            cv_errors.push((cv / t["cv_mm2_per_min"].as_f64().unwrap() - 1.0).abs());
        }
    }
    // The daemon finds t0 from the load-cell step within a poll or two of the simulator's onset. At 3000× a
    // poll is a few real milliseconds, so a busy machine that delays one by a quarter of a real second moves t0
    // by 750 simulated seconds; clean-clone runs saw single steps off by −170 s, +435 s and +1030 s (F4 step 2
    // each late time: open, see the closing note). Held: the median within 60 s, at most one step beyond 750 s,
    // none beyond an hour (a step found at the wrong load change is hours off).
    let t0_median = median(t0_errors.iter().map(|e| e.0.abs()).collect());
    let late: Vec<&(f64, String)> = t0_errors.iter().filter(|e| e.0.abs() > 0.25 * SPEED).collect();
    assert!(t0_median < 60.0, "median |t0 error| {t0_median:.0} s: {t0_errors:?}");
    assert!(late.len() <= 1, "t0 off by more than 750 s on {late:?}");
    assert!(t0_errors.iter().all(|e| e.0.abs() < 3600.0), "t0 an hour off: {t0_errors:?}");
    let min_ratio = ratios.iter().copied().fold(f64::INFINITY, f64::min);
    // `ready` never before the end of primary (the simulator's t100).
    assert!(min_ratio >= 1.0, "ready at {min_ratio:.2}·t100 on some load step: {ratios:?}");
    assert!(cv_errors.len() * 2 >= steps.len(), "cv on only {} of {} load steps", cv_errors.len(), steps.len());
    let cv_median = median(cv_errors.clone());
    // Loose here (a short run, 4 frames); tests/bench/accuracy.sh holds the figures.
    assert!(cv_median <= 0.25, "median |cv error| {cv_median:.3} over {} load steps: {cv_errors:?}", cv_errors.len());
    eprintln!(
        "demo vs answer key: {} load steps; |t0 error| median {t0_median:.0} s, beyond 750 s: {late:?}; ready/t100 min {min_ratio:.2}, median {:.2}; |cv error| median {cv_median:.3}",
        steps.len(),
        median(ratios.clone())
    );
}
