//! The alarm engine's conditions, each raised once, held inside its hysteresis, and cleared.

use std::time::Duration;

use super::*;

const S: i64 = 1_000_000;
const T0: i64 = 1_800_000_000 * S;

fn frame() -> FrameInput {
    FrameInput {
        id: "F1".into(),
        testing: true,
        last_reading_us: Some(T0),
        stale_after: Duration::from_secs(300),
        displacement_mm: Some(5.0),
        travel_mm: Some(0.0..25.0),
        load_kn: Some(3.1),
        temperature_c: Some(20.0),
        load_off: false,
        refused_values: 0,
    }
}

/// The (code, raised?) pairs of a set of transitions.
fn codes(t: &[Transition]) -> Vec<(Code, bool)> {
    t.iter()
        .map(|t| match t {
            Transition::Raise { code, .. } => (*code, true),
            Transition::Clear { code, .. } => (*code, false),
        })
        .collect()
}

fn engine() -> AlarmEngine {
    AlarmEngine::new(AlarmRules::default(), T0, [])
}

#[test]
fn a_running_frame_without_readings_goes_stale_once_and_clears_on_the_next_reading() {
    let mut e = engine();
    let mut f = frame();
    assert!(e.evaluate(T0 + 299 * S, std::slice::from_ref(&f), &[]).is_empty());
    let t = e.evaluate(T0 + 301 * S, std::slice::from_ref(&f), &[]);
    assert_eq!(codes(&t), [(Code::Stale, true)]);
    let Transition::Raise { message, .. } = &t[0] else { panic!() };
    assert!(message.contains("no valid reading for 301 s"), "{message}");
    assert!(e.evaluate(T0 + 400 * S, std::slice::from_ref(&f), &[]).is_empty(), "raised once, not every look");
    f.last_reading_us = Some(T0 + 405 * S);
    assert_eq!(codes(&e.evaluate(T0 + 406 * S, &[f], &[])), [(Code::Stale, false)]);
    // An idle frame (no test) is never stale: an unused frame without a gauge is not news.
    let mut idle = frame();
    idle.testing = false;
    assert!(engine().evaluate(T0 + 10_000 * S, &[idle], &[]).is_empty());
}

#[test]
fn a_restart_gives_acquisition_its_stale_time_before_judging() {
    // No reading since the start at T0 (the daemon has just come up): not stale until the limit passes.
    let mut e = engine();
    let mut f = frame();
    f.last_reading_us = None;
    assert!(e.evaluate(T0 + 10 * S, std::slice::from_ref(&f), &[]).is_empty());
    assert_eq!(codes(&e.evaluate(T0 + 301 * S, &[f], &[])), [(Code::Stale, true)]);
}

#[test]
fn the_gauge_near_an_end_of_its_travel_raises_and_clears_only_well_clear_of_it() {
    // 25 mm travel × 0.02 = 0.5 mm margin; clears beyond 1.0 mm.
    let mut e = engine();
    let mut f = frame();
    let mut at = |e: &mut AlarmEngine, d: f64, n: i64| {
        f.displacement_mm = Some(d);
        f.last_reading_us = Some(T0 + n * S);
        codes(&e.evaluate(T0 + n * S, std::slice::from_ref(&f), &[]))
    };
    assert!(at(&mut e, 24.4, 1).is_empty(), "0.6 mm of room");
    assert_eq!(at(&mut e, 24.55, 2), [(Code::GaugeTravel, true)]);
    assert!(at(&mut e, 24.2, 3).is_empty(), "0.8 mm: inside the hysteresis, still raised");
    assert_eq!(at(&mut e, 23.9, 4), [(Code::GaugeTravel, false)]);
    // The start of the travel counts too (a swelling specimen pushing the plunger out).
    assert_eq!(at(&mut e, 0.3, 5), [(Code::GaugeTravel, true)]);
}

#[test]
fn refused_values_raise_out_of_range_until_none_came_for_the_hold_time() {
    let mut e = engine();
    let mut f = frame();
    let mut at = |e: &mut AlarmEngine, refused: u64, n: i64| {
        f.refused_values = refused;
        f.last_reading_us = Some(T0 + n * S);
        codes(&e.evaluate(T0 + n * S, std::slice::from_ref(&f), &[]))
    };
    assert!(at(&mut e, 0, 5).is_empty());
    assert_eq!(at(&mut e, 3, 10), [(Code::OutOfRange, true)]);
    assert!(at(&mut e, 7, 40).is_empty(), "still refusing");
    assert!(at(&mut e, 7, 99).is_empty(), "59 s without a refusal: held");
    assert_eq!(at(&mut e, 7, 101), [(Code::OutOfRange, false)]);
}

#[test]
fn every_channel_frozen_for_the_stuck_time_raises_stuck() {
    let mut e = engine();
    let mut f = frame();
    for n in 0..=30 {
        f.last_reading_us = Some(T0 + n * 60 * S);
        let t = e.evaluate(T0 + n * 60 * S, std::slice::from_ref(&f), &[]);
        if n < 30 {
            assert!(t.is_empty(), "minute {n}");
        } else {
            assert_eq!(codes(&t), [(Code::Stuck, true)], "30 min frozen");
        }
    }
    // One channel moves by one count: not stuck.
    f.displacement_mm = Some(5.001);
    assert_eq!(codes(&e.evaluate(T0 + 1_900 * S, &[f], &[])), [(Code::Stuck, false)]);
}

#[test]
fn load_drift_follows_the_watchs_load_check_while_a_test_runs() {
    let mut e = engine();
    let mut f = frame();
    f.load_off = true;
    assert_eq!(codes(&e.evaluate(T0 + S, std::slice::from_ref(&f), &[])), [(Code::LoadDrift, true)]);
    f.load_off = false;
    assert_eq!(codes(&e.evaluate(T0 + 2 * S, &[f], &[])), [(Code::LoadDrift, false)]);
}

#[test]
fn temperature_outside_its_band_raises_and_clears_a_tenth_of_the_band_inside() {
    // Band 16…24 °C: clears only within 16.8…23.2 °C.
    let mut e = engine();
    let mut f = frame();
    let mut at = |e: &mut AlarmEngine, t: f64, n: i64| {
        f.temperature_c = Some(t);
        f.displacement_mm = Some(5.0 + n as f64 * 0.001);
        codes(&e.evaluate(T0 + n * S, std::slice::from_ref(&f), &[]))
    };
    assert_eq!(at(&mut e, 24.3, 1), [(Code::Temperature, true)]);
    assert!(at(&mut e, 23.5, 2).is_empty(), "back in the band but not clear of its edge");
    assert_eq!(at(&mut e, 22.0, 3), [(Code::Temperature, false)]);
    // Without a temperature channel nothing is judged.
    let mut none = frame();
    none.temperature_c = None;
    assert!(engine().evaluate(T0 + S, &[none], &[]).is_empty());
}

#[test]
fn a_bus_whose_failure_share_passes_the_threshold_raises_and_clears_at_half_of_it() {
    let mut e = engine();
    let bus = |requests, errors| BusInput { id: "line-1".into(), requests, errors };
    assert!(e.evaluate(T0, &[], &[bus(0, 0)]).is_empty());
    assert!(e.evaluate(T0 + 10 * S, &[], &[bus(8, 8)]).is_empty(), "under 10 requests: not judged");
    let t = e.evaluate(T0 + 20 * S, &[], &[bus(40, 12)]);
    assert_eq!(codes(&t), [(Code::BusErrors, true)], "12 of 40 = 30 % > 20 %");
    let Transition::Raise { subject, message, .. } = &t[0] else { panic!() };
    assert_eq!(subject, &Subject::Bus("line-1".into()));
    assert!(message.contains("12 of 40 requests failed"), "{message}");
    // Five minutes of clean traffic later the window holds few failures.
    assert!(e.evaluate(T0 + 200 * S, &[], &[bus(100, 15)]).is_empty(), "15 %: inside the hysteresis");
    assert_eq!(codes(&e.evaluate(T0 + 400 * S, &[], &[bus(1_000, 15)])), [(Code::BusErrors, false)]);
}

#[test]
fn alarms_open_from_an_earlier_run_are_not_raised_again_and_clear_when_the_condition_is_gone() {
    let open = [(Subject::Frame(0), Code::LoadDrift), (Subject::Frame(0), Code::Temperature)];
    let mut e = AlarmEngine::new(AlarmRules::default(), T0, open);
    let mut f = frame();
    f.load_off = true;
    // Load still off: nothing new; temperature fine: cleared.
    assert_eq!(codes(&e.evaluate(T0 + S, &[f], &[])), [(Code::Temperature, false)]);
    assert!(e.is_open(&Subject::Frame(0), Code::LoadDrift));
}

#[test]
fn an_outlet_behind_the_store_raises_publish_lag_once_naming_the_broker_and_clears_when_caught_up() {
    let mut e = engine();
    let mut o = OutletInput {
        id: "mqtt://broker.lab:1883 lab-a".into(),
        name: "MQTT broker mqtt://broker.lab:1883 (lab lab-a)".into(),
        behind: false,
        lag_s: 4.0,
        limit_s: 300.0,
    };
    assert!(e.evaluate_outlets(T0, std::slice::from_ref(&o)).is_empty(), "not behind: nothing to say");
    (o.behind, o.lag_s) = (true, 312.0);
    let t = e.evaluate_outlets(T0 + 10 * S, std::slice::from_ref(&o));
    assert_eq!(codes(&t), [(Code::PublishLag, true)]);
    let Transition::Raise { subject, message, data, .. } = &t[0] else { panic!() };
    assert_eq!(subject, &Subject::Outlet("mqtt://broker.lab:1883 lab-a".into()));
    assert!(message.contains("mqtt://broker.lab:1883 (lab lab-a) fell behind the store by more than its limit of 300 s (312.0 s when raised)"), "{message}");
    assert_eq!(data["limit_s"], 300.0);
    o.lag_s = 900.0;
    assert!(e.evaluate_outlets(T0 + 20 * S, std::slice::from_ref(&o)).is_empty(), "raised once, not every look");
    (o.behind, o.lag_s) = (false, 1.0);
    let t = e.evaluate_outlets(T0 + 30 * S, std::slice::from_ref(&o));
    assert_eq!(codes(&t), [(Code::PublishLag, false)]);
    assert_eq!(Code::from_name("publish-lag"), Some(Code::PublishLag));
    // An alarm open from an earlier run is not raised again.
    let mut again = AlarmEngine::new(AlarmRules::default(), T0, [(Subject::Outlet(o.id.clone()), Code::PublishLag)]);
    o.behind = true;
    assert!(again.evaluate_outlets(T0 + S, &[o]).is_empty());
}
