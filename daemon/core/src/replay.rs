//! A recorded time curve run through the live watch at its own timestamps (`oedolog replay`): what the
//! board would have said as the readings came in — the ETA of `ready` as it evolved, and when `ready`
//! would have come and why. A lab checks the ready rule on its past tests with it. Pure: the readings come
//! in as numbers (minutes since the load went on, gauge mm), the timeline goes out.

use serde::Serialize;

use crate::watch::{Finding, FrameWatch, SpecimenSize, WatchParams};

/// What the replay needs besides the readings.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct ReplaySettings {
    /// Specimen height at the onset, mm (the drainage path comes from it).
    pub height_mm: f64,
    /// Stress before the load step, kPa (for the load increment ratio).
    pub from_kpa: f64,
    /// Stress of the load step, kPa.
    pub stress_kpa: f64,
    /// Poll period, s: the readings the daemon would have taken (the latest reading at or before each
    /// poll); `None` takes every reading of the file.
    pub poll_s: Option<f64>,
}

/// One line of the timeline.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct TimelineEntry {
    /// Minutes since the load went on.
    pub t_min: f64,
    /// `onset`, `eta`, `ready` or `end`.
    pub what: &'static str,
    /// The ETA of `ready` then, minutes since the onset (for `eta`).
    pub eta_min: Option<f64>,
    /// What a person reads.
    pub message: String,
}

/// The replay's outcome.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Replay {
    /// Readings fed to the watch.
    pub readings_used: usize,
    /// When `ready` came, minutes since the onset, if it did.
    pub ready_min: Option<f64>,
    /// Why.
    pub ready_why: Option<String>,
    /// The timeline, in time order.
    pub timeline: Vec<TimelineEntry>,
    /// t50, t90 and t100 at the end (log t, √t, log t), minutes.
    pub t50_min: Option<f64>,
    /// t90 by √t at the end, minutes.
    pub t90_min: Option<f64>,
    /// t100 by log t at the end, minutes.
    pub t100_min: Option<f64>,
}

/// A newly shown ETA is printed when it moves by more than this share from the last one printed.
const ETA_STEP: f64 = 0.1;

/// The readings the daemon would have taken at a poll period of `poll_s`: the latest reading at or before
/// each poll instant, each once (the first reading, at the onset, always).
fn polled(readings: &[(f64, f64)], poll_s: Option<f64>) -> Vec<(f64, f64)> {
    let (Some(poll_s), Some(last)) = (poll_s, readings.last()) else { return readings.to_vec() };
    let poll_min = poll_s / 60.0;
    let mut out: Vec<(f64, f64)> = Vec::new();
    let mut j = 0;
    let mut k = 0u64;
    loop {
        let at = k as f64 * poll_min;
        if at > last.0 + 1e-12 {
            break;
        }
        while j + 1 < readings.len() && readings[j + 1].0 <= at + 1e-12 {
            j += 1;
        }
        if readings[j].0 <= at + 1e-12 && out.last() != Some(&readings[j]) {
            out.push(readings[j]);
        }
        k += 1;
    }
    out
}

/// Runs `readings` (minutes since the load went on, gauge mm, in time order) through a fresh live watch.
pub fn replay(readings: &[(f64, f64)], settings: &ReplaySettings, params: WatchParams) -> Replay {
    let used = polled(readings, settings.poll_s);
    let mut watch = FrameWatch::new(params);
    let zero = used.first().map(|r| r.1);
    let specimen = SpecimenSize { area_mm2: 1.0, height_mm: settings.height_mm };
    let at = |t_min: f64| (t_min * 60e6).round() as i64;
    watch.resume(specimen, zero, 1, settings.stress_kpa, settings.from_kpa, None, Some(0), None, &[(0, zero, None)]);
    let mut timeline = vec![TimelineEntry {
        t_min: 0.0,
        what: "onset",
        eta_min: None,
        message: format!("load step {} → {} kPa goes on (t0 of the file)", settings.from_kpa, settings.stress_kpa),
    }];
    let (mut shown_eta, mut ready_min, mut ready_why) = (None::<f64>, None, None);
    for &(t, d) in used.iter().filter(|r| r.0 > 0.0) {
        for finding in watch.sample(at(t), Some(d), None) {
            if let Finding::Ready { how, .. } = finding {
                ready_min = Some(t);
                timeline.push(TimelineEntry {
                    t_min: t,
                    what: "ready",
                    eta_min: None,
                    message: format!("ready: {how}"),
                });
                ready_why = Some(how);
            }
        }
        if ready_min.is_some() {
            break;
        }
        let eta = watch.status().ready_eta_us.map(|us| us as f64 / 60e6);
        if let Some(eta) = eta
            && shown_eta.is_none_or(|s| (eta / s - 1.0).abs() > ETA_STEP)
        {
            shown_eta = Some(eta);
            timeline.push(TimelineEntry {
                t_min: t,
                what: "eta",
                eta_min: Some(eta),
                message: format!("ETA of ready: {} min", round3(eta)),
            });
        }
    }
    let status = watch.status();
    let last = used.last().map_or(0.0, |r| r.0);
    if ready_min.is_none() {
        timeline.push(TimelineEntry {
            t_min: last,
            what: "end",
            eta_min: None,
            message: "the readings end before ready".into(),
        });
    }
    Replay {
        readings_used: used.len(),
        ready_min,
        ready_why,
        timeline,
        t50_min: status.t50_min,
        t90_min: status.t90_min,
        t100_min: status.t100_min,
    }
}

/// Three significant figures, for messages.
fn round3(v: f64) -> String {
    if v == 0.0 || !v.is_finite() {
        return format!("{v}");
    }
    let digits = (2 - v.abs().log10().floor() as i32).max(0) as usize;
    format!("{v:.digits$}")
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::analysis::degree_of_consolidation;

    /// An exact Terzaghi primary (the core's series) of 0.5 mm with t90 = 20 min, then creep of 2 % of the
    /// primary per log cycle after t100 (synthetic), read every 6 s for a day.
    fn curve() -> Vec<(f64, f64)> {
        let tv_per_min = 0.848 / 20.0;
        (0..=14_400)
            .map(|k| {
                let t = k as f64 * 0.1;
                let creep = if t > 26.0 { 0.01 * (t / 26.0).log10() } else { 0.0 };
                (t, 2.0 + 0.5 * degree_of_consolidation(tv_per_min * t) + creep)
            })
            .collect()
    }

    fn settings(poll_s: Option<f64>) -> ReplaySettings {
        ReplaySettings { height_mm: 20.0, from_kpa: 50.0, stress_kpa: 100.0, poll_s }
    }

    #[test]
    fn ready_comes_after_the_true_t100_and_the_timeline_reads_in_time_order() {
        // t100 of the ideal curve ≈ 1.30·t90 = 26 min [ref: t100-t90-ratio, computed].
        let r = replay(&curve(), &settings(None), WatchParams::default());
        let ready = r.ready_min.expect("a clean curve reaches ready within a day");
        assert!(ready > 26.0, "ready at {ready} min, before t100");
        assert!(r.timeline.windows(2).all(|w| w[0].t_min <= w[1].t_min));
        assert_eq!(r.timeline.first().map(|e| e.what), Some("onset"));
        assert_eq!(r.timeline.last().map(|e| e.what), Some("ready"));
        assert!(r.timeline.iter().any(|e| e.what == "eta"), "the ETA is shown before ready");
        let t90 = r.t90_min.unwrap();
        assert!((t90 / 20.0 - 1.0).abs() < 0.1, "t90 {t90} min against 20 min");
    }

    #[test]
    fn a_poll_period_keeps_the_latest_reading_at_each_poll() {
        let readings: Vec<(f64, f64)> = (0..=60).map(|k| (k as f64 * 0.1, k as f64)).collect();
        let used = polled(&readings, Some(60.0));
        assert_eq!(used.iter().map(|r| r.1).collect::<Vec<_>>(), vec![0.0, 10.0, 20.0, 30.0, 40.0, 50.0, 60.0]);
        assert_eq!(polled(&readings, None).len(), readings.len());
    }

    #[test]
    fn a_curve_that_ends_early_says_so() {
        let short: Vec<(f64, f64)> = curve().into_iter().take_while(|r| r.0 <= 15.0).collect();
        let r = replay(&short, &settings(Some(30.0)), WatchParams::default());
        assert_eq!(r.ready_min, None);
        assert_eq!(r.timeline.last().map(|e| e.what), Some("end"));
    }
}
