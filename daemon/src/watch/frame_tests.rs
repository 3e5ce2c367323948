//! The watch against the simulator's forward model (an independent implementation: exact Terzaghi series
//! plus secondary compression, simulator/src/physics.rs), under a manual timeline with gauge noise and
//! quantisation, as the daemon would poll it.

use oedolog_sim::device::SimFrame;

use oedolog_core::watch::*;

/// Steady poll period of the simulated logging, s; fast period and window after a load change.
const STEADY_S: f64 = 30.0;
const FAST_S: f64 = 2.0;
const FAST_WINDOW_S: f64 = 900.0;

struct Outcome {
    /// Ready time over the truth's t100, for increments made ready by the constructions.
    ready_over_t100: Vec<f64>,
    /// The same for increments that fell back to the elapsed-time rule.
    fallback_over_t100: Vec<f64>,
    onset_errors_s: Vec<f64>,
}

/// Runs frame `index` of the demo scenario through a loading schedule; returns, per increment, when
/// `ready` came relative to the truth's t100 and how far the found onset was from the true one.
fn run(index: usize, seed: u64, params: WatchParams, stresses: &[f64]) -> Outcome {
    let mut frame = SimFrame::demo(index, 0.0, false, seed).unwrap();
    let specimen = frame.model().specimen().clone();
    let mut watch = FrameWatch::new(params);
    let mut t = 0.0;
    let poll = |watch: &mut FrameWatch, frame: &mut SimFrame, t: f64| {
        let s = frame.sample(t);
        watch.sample((t * 1e6) as i64, Some(s.displacement_mm), Some(s.load_n / 1000.0))
    };
    poll(&mut watch, &mut frame, t);
    watch.start_test(SpecimenSize { area_mm2: specimen.area_mm2(), height_mm: specimen.height_mm }, 6.25);
    let mut out = Outcome { ready_over_t100: vec![], fallback_over_t100: vec![], onset_errors_s: vec![] };
    let mut dice = seed.wrapping_mul(0x9E37_79B9_7F4A_7C15) | 1;
    let mut roll = move |n: f64| {
        dice ^= dice << 13;
        dice ^= dice >> 7;
        dice ^= dice << 17;
        (dice % 10_000) as f64 / 10_000.0 * n
    };
    while t < 600.0 {
        t += STEADY_S;
        poll(&mut watch, &mut frame, t);
    }
    for &stress in stresses {
        // The operator arms, then the load goes on a little later, between two steady polls.
        assert!(watch.arm(stress, (t * 1e6) as i64).unwrap().is_empty(), "no step yet");
        let onset_true = t + 5.0 + roll(STEADY_S - 6.0);
        frame.apply_stress(stress, onset_true).unwrap();
        let truth = frame.model().current_increment().unwrap();
        let mut fast_until = f64::NEG_INFINITY;
        let mut onset_found = None;
        let mut fell_back = false;
        let ready_at = loop {
            t += if t < fast_until { FAST_S } else { STEADY_S };
            for note in poll(&mut watch, &mut frame, t) {
                match note {
                    Finding::Onset { onset_us, .. } => {
                        onset_found = Some(onset_us as f64 / 1e6);
                        fast_until = t + FAST_WINDOW_S;
                    }
                    Finding::Ready { at_us, how, .. } => {
                        fell_back = how.contains("elapsed");
                        eprintln!(
                            "frame {index} {stress:>6} kPa: ready at {:.2}·t100 (t100 {:.0} s, primary {:.3} mm): {how}",
                            (at_us as f64 / 1e6 - truth.onset_s) / truth.t100_s,
                            truth.t100_s,
                            truth.primary_mm
                        );
                        assert!(onset_found.is_some(), "ready before onset");
                        assert_eq!(watch.phase(), Phase::Ready);
                    }
                    _ => {}
                }
            }
            if let Some(at) = watch.status().ready_us.filter(|_| watch.phase() == Phase::Ready) {
                break at as f64 / 1e6;
            }
            assert!(
                t - truth.onset_s < 30.0 * truth.t100_s + 86_400.0,
                "frame {index} {stress} kPa: never ready; truth t100 {:.0} s; status {:?}",
                truth.t100_s,
                watch.status()
            );
        };
        let found = onset_found.expect("onset found");
        out.onset_errors_s.push(found - truth.onset_s);
        let ratio = (ready_at - truth.onset_s) / truth.t100_s;
        if fell_back {
            out.fallback_over_t100.push(ratio)
        } else {
            out.ready_over_t100.push(ratio)
        }
        // Never flaps back: more readings keep it ready.
        for _ in 0..5 {
            t += STEADY_S;
            poll(&mut watch, &mut frame, t);
            assert_eq!(watch.phase(), Phase::Ready);
        }
    }
    out
}

fn summary(values: &[f64]) -> String {
    let mut v = values.to_vec();
    v.sort_by(f64::total_cmp);
    format!("n={} min={:.3} median={:.3} max={:.3}", v.len(), v[0], v[v.len() / 2], v[v.len() - 1])
}

#[test]
fn ready_never_comes_before_the_true_t100_and_onset_is_within_one_poll() {
    let stresses = [12.5, 25.0, 50.0, 100.0, 200.0, 400.0];
    let (mut ratios, mut fallbacks, mut onsets) = (Vec::new(), Vec::new(), Vec::new());
    for index in 0..4 {
        let outcome = run(index, 11 + index as u64, WatchParams::default(), &stresses);
        ratios.extend(outcome.ready_over_t100);
        fallbacks.extend(outcome.fallback_over_t100);
        onsets.extend(outcome.onset_errors_s);
    }
    eprintln!("ready / t100 (ready line from 1.25·t100 over ≥ 0.2 log cycle): {}", summary(&ratios));
    eprintln!("increments that fell back to the 24 h rule: {} of {}", fallbacks.len(), fallbacks.len() + ratios.len());
    assert!(fallbacks.len() * 4 <= ratios.len(), "too many increments without an end of primary");
    assert!(fallbacks.iter().all(|r| *r >= 1.0));
    eprintln!("onset error, s: {}", summary(&onsets));
    // The truth's t100 is where the Casagrande tangent meets U = 100 % on the ideal curve (Tv = 1.10,
    // daemon/core/REFERENCES.md [ref: t100-t90-ratio, computed]); secondary compression starts there in the
    // simulator. The ready line starts at 1.25·its t100 and spans 0.2 log cycle, so ready needs
    // t ≥ 1.25·10^0.2·t100 ≈ 1.98·t100 of data.
    assert!(ratios.iter().all(|r| *r >= 1.0), "ready before t100: {}", summary(&ratios));
    // The target: median ready ≤ 2.5·t100; none later than 5·t100.
    let mut sorted = ratios.clone();
    sorted.sort_by(f64::total_cmp);
    assert!(sorted[sorted.len() / 2] <= 2.5, "median ready over 2.5·t100: {}", summary(&ratios));
    assert!(ratios.iter().all(|r| *r <= 5.0), "ready far too late: {}", summary(&ratios));
    // t0 is the middle of the poll interval in which the load changed: within half a period of the truth.
    assert!(onsets.iter().all(|e| e.abs() <= STEADY_S / 2.0), "{}", summary(&onsets));
}

#[test]
fn a_shorter_secondary_window_brings_ready_earlier_but_never_before_t100() {
    let params =
        WatchParams { ready_line: ReadyLine { decades: 0.15, ..ReadyLine::default() }, ..WatchParams::default() };
    let (mut ratios, mut all) = (Vec::new(), Vec::new());
    for index in 0..4 {
        let outcome = run(index, 31 + index as u64, params.clone(), &[12.5, 25.0, 50.0, 100.0, 200.0]);
        all.extend(outcome.fallback_over_t100.iter().chain(&outcome.ready_over_t100).copied());
        ratios.extend(outcome.ready_over_t100);
    }
    eprintln!("ready / t100 (ready line ≥ 0.15 log cycle): {}", summary(&ratios));
    assert!(all.iter().all(|r| *r >= 1.0), "never before t100: {}", summary(&all));
    let mut sorted = ratios.clone();
    sorted.sort_by(f64::total_cmp);
    assert!(sorted[sorted.len() / 2] <= summary_median_limit(), "{}", summary(&ratios));
}

#[test]
fn fixed_duration_rule_declares_ready_at_the_hold() {
    let params = WatchParams { rule: EopRule::FixedDuration { hold_s: 3600 }, ..WatchParams::default() };
    let mut watch = FrameWatch::new(params);
    watch.sample(0, Some(1.0), Some(0.02));
    watch.start_test(SpecimenSize { area_mm2: 3000.0, height_mm: 20.0 }, 6.25);
    watch.arm(12.5, 1_000_000).unwrap();
    let notes = watch.sample(2_000_000, Some(1.05), Some(0.0375));
    assert!(matches!(notes[..], [Finding::Onset { onset_us: 1_000_000, .. }]), "{notes:?}");
    let mut ready = None;
    for k in 1..=80 {
        let at = 2_000_000 + k * 60_000_000;
        for note in watch.sample(at, Some(1.1), Some(0.0375)) {
            if let Finding::Ready { at_us, .. } = note {
                ready = Some(at_us);
            }
        }
    }
    assert_eq!(ready, Some(2_000_000 + 60 * 60_000_000), "the first reading at or past onset + 1 h");
}

#[test]
fn an_operator_who_reports_late_still_gets_the_true_onset() {
    let mut watch = FrameWatch::new(WatchParams::default());
    watch.sample(0, Some(1.0), Some(0.02));
    watch.start_test(SpecimenSize { area_mm2: 3000.0, height_mm: 20.0 }, 6.25);
    // Load goes on between 10 s and 11 s; the operator arms at 300 s.
    for k in 1..=300 {
        let load = if k > 10 { 0.0375 } else { 0.01875 };
        let d = if k > 10 { 1.0 + 0.01 * ((k - 10) as f64).sqrt() } else { 1.0 };
        watch.sample(k * 1_000_000, Some(d), Some(load));
    }
    let notes = watch.arm(12.5, 301_000_000).unwrap();
    assert_eq!(notes, vec![Finding::Onset { seq: 1, onset_us: 10_500_000, source: OnsetSource::LoadStep }]);
    assert_eq!(watch.phase(), Phase::Primary);
}

#[test]
fn a_gauge_reseat_is_proposed_and_nothing_is_reduced_across_it_until_confirmed() {
    let mut frame = SimFrame::demo(0, 0.0, false, 5).unwrap();
    let specimen = frame.model().specimen().clone();
    let mut watch = FrameWatch::new(WatchParams::default());
    let mut t = 0.0;
    let s = frame.sample(t);
    watch.sample(0, Some(s.displacement_mm), Some(s.load_n / 1000.0));
    watch.start_test(SpecimenSize { area_mm2: specimen.area_mm2(), height_mm: specimen.height_mm }, 6.25);
    watch.arm(200.0, 1_000_000).unwrap();
    frame.apply_stress(200.0, 5.0).unwrap();
    let mut proposed = None;
    while t < 4.0 * 3600.0 {
        t += 10.0;
        if (t - 1800.0).abs() < 1e-9 {
            // The technician resets the gauge: its reading jumps back to 0.2 mm.
            frame.reseat_gauge(0.2, t).unwrap();
        }
        let s = frame.sample(t);
        for note in watch.sample((t * 1e6) as i64, Some(s.displacement_mm), Some(s.load_n / 1000.0)) {
            if let Finding::ReseatProposed { jump_mm, .. } = note {
                proposed = Some(jump_mm);
            }
        }
    }
    let jump = proposed.expect("the jump was proposed as a re-seat");
    assert!(jump < -0.5, "{jump}");
    assert!(watch.status().pending_reseat.is_some());
    assert_ne!(watch.phase(), Phase::Ready, "no end of primary found across an unconfirmed jump");
    watch.resolve_reseat(true).unwrap();
    assert!(watch.status().pending_reseat.is_none());
    // Stitched: the corrected curve continues where it was, so the latest reading is back near the
    // settlement the specimen has, not near the re-seated gauge's 1 mm.
    // The held readings are replayed through the watch, which stops reducing once it finds ready, so the
    // last node is compared with the specimen at that node's own time.
    assert!(watch.phase() == Phase::Primary || watch.phase() == Phase::Ready);
    let onset_s = watch.status().onset_us.unwrap() as f64 / 1e6;
    let latest = watch.reduction().and_then(|r| r.nodes.last().copied()).unwrap();
    assert!(latest.t_min * 60.0 > 1800.0, "the last node is after the re-seat: {latest:?}");
    let truth_mm = frame.model().displacement_mm(onset_s + latest.t_min * 60.0) + 1.0;
    assert!((latest.d_mm - truth_mm).abs() < 0.02, "stitched {} vs true {truth_mm}", latest.d_mm);
}

#[test]
fn operator_actions_outside_their_states_are_refused() {
    let mut watch = FrameWatch::new(WatchParams::default());
    assert!(matches!(watch.arm(50.0, 0), Err(WatchError::State("idle", _))));
    watch.start_test(SpecimenSize { area_mm2: 3000.0, height_mm: 20.0 }, 6.25);
    assert!(matches!(watch.arm(f64::NAN, 0), Err(WatchError::Value { field: "stress_kpa", .. })));
    assert!(matches!(watch.arm(6.25, 0), Err(WatchError::Value { .. })), "the stress already on");
    watch.arm(12.5, 0).unwrap();
    assert!(matches!(watch.arm(25.0, 0), Err(WatchError::State("armed", _))));
    assert!(watch.resolve_reseat(true).is_err());
}

/// The median ready time a 0.15-cycle window should beat: 2.5·t100 (measured 2.26; the 0.3-cycle default
/// gives about 2.6).
fn summary_median_limit() -> f64 {
    2.5
}
