//! The hub across a restart: what the store holds is replayed so nothing decided live is missed.

use std::sync::Arc;

use super::{Hub, WatchParams};
use crate::clock::{Clock, ManualClock};
use crate::lab::{Lab, SpecimenRecord};
use crate::store::{self, ChannelKind, Reading, TestState, Writer, WriterPolicy};

const T0: i64 = 1_790_000_000_000_000;
const S: i64 = 1_000_000;
/// π·63.5²/4, mm².
const AREA_MM2: f64 = 3166.92;

/// A daemon that stops (as after `kill -9`) between the load going on and the watch seeing the step:
/// the readings of the step are stored, the increment is still `armed` in the store. The restart must
/// find the onset from those readings, not leave the frame armed forever.
#[test]
fn an_increment_armed_when_the_daemon_stopped_finds_its_onset_from_the_stored_readings() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("lab.sqlite");
    let conn = store::open(&path).unwrap();
    let key = store::frame_key(&conn, "F1", "Frame 1", T0).unwrap();
    let writer_thread = Writer::spawn(conn, WriterPolicy::default(), |_| {});
    let writer = writer_thread.writer();
    let clock = Arc::new(ManualClock::new(T0));
    let reader = store::reader(&path).unwrap();
    let lab = Lab::resume(&reader, vec![key], writer.clone(), T0).unwrap();
    let hub = Hub::resume(&reader, lab.clone(), writer.clone(), clock.clone(), vec![AREA_MM2], WatchParams::default())
        .unwrap();
    let specimen = SpecimenRecord {
        specimen: "GI-417-T1".into(),
        description: "demo".into(),
        height_mm: 20.0,
        diameter_mm: 63.5,
        dry_mass_g: None,
        specific_gravity: None,
    };
    hub.start_test(0, specimen, 6.25, None).unwrap();
    // Seating for ten minutes at 6.25 kPa, then 50 kPa is armed at +600 s and goes on at +630 s.
    let seating_kn = 6.25 * AREA_MM2 * 1e-6;
    let loaded_kn = 50.0 * AREA_MM2 * 1e-6;
    let put = |at_us: i64, d: f64, l: f64| {
        for (channel, value) in [(ChannelKind::Displacement, d), (ChannelKind::Load, l)] {
            writer.reading(Reading { frame_key: key, channel, at_us, raw: value, value }).unwrap();
        }
    };
    for i in 0..60 {
        put(T0 + i * 10 * S, 1.000, seating_kn);
    }
    clock.advance_us(600 * S);
    hub.arm(0, 50.0, None).unwrap();
    for i in 0..30 {
        let t = T0 + 630 * S + i * 5 * S;
        put(t + 5 * S, 1.05 + 0.01 * f64::from(i as i32), loaded_kn);
    }
    // Only the store saw those readings (the watch never did): the daemon stopped here.
    writer.sync().unwrap();
    assert_eq!(lab.snapshot()[0].as_ref().unwrap().state, TestState::Armed);
    drop(hub);

    clock.advance_us(300 * S);
    let reader = store::reader(&path).unwrap();
    let lab = Lab::resume(&reader, vec![key], writer.clone(), clock.now_us()).unwrap();
    let _hub =
        Hub::resume(&reader, lab.clone(), writer.clone(), clock, vec![AREA_MM2], WatchParams::default()).unwrap();
    writer.sync().unwrap();
    let test = lab.snapshot()[0].clone().unwrap();
    assert_eq!(test.state, TestState::Primary, "{test:?}");
    let onset = test.onset_us.expect("an onset");
    // The step lies between the last seating reading (+590 s) and the first loaded one (+635 s).
    assert!((T0 + 590 * S..=T0 + 635 * S).contains(&onset), "onset {} s", (onset - T0) / S);
    let reader = store::reader(&path).unwrap();
    let stored = store::read::increments(&reader, test.test_id).unwrap();
    assert_eq!(stored[0].seq, 1);
    assert_eq!(stored[0].onset_us, Some(onset), "the onset is stored, as live");
}
