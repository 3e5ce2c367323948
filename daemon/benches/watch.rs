//! The live update: what the watch costs per poll while an increment runs — every reading binned into
//! the time curve and both constructions re-run. A 24 h increment polled every second (86 400 polls),
//! from the simulator's forward model. Run: `cargo bench -p oedolog --bench watch`.

use std::time::Instant;

use oedolog::watch::{FrameWatch, SpecimenSize, WatchParams};
use oedolog_sim::device::SimFrame;

fn main() {
    let mut frame = SimFrame::demo(0, 0.0, false, 7).expect("demo frame");
    let specimen = frame.model().specimen().clone();
    // Readings first, so the timing is the watch alone.
    frame.apply_stress(50.0, 1.0).expect("load");
    let samples: Vec<(i64, f64, f64)> = (0..=86_400)
        .map(|k| {
            let t = f64::from(k);
            let s = frame.sample(t);
            ((t * 1e6) as i64, s.displacement_mm, s.load_n / 1000.0)
        })
        .collect();
    let mut watch = FrameWatch::new(WatchParams::default());
    watch.sample(samples[0].0, Some(samples[0].1), Some(samples[0].2));
    watch.start_test(SpecimenSize { area_mm2: specimen.area_mm2(), height_mm: specimen.height_mm }, 6.25);
    watch.arm(50.0, 500_000).expect("arm");
    let started = Instant::now();
    let mut primary = None;
    for (k, &(at, d, l)) in samples[1..].iter().enumerate() {
        watch.sample(at, Some(d), Some(l));
        if primary.is_none() && watch.phase() == oedolog::watch::Phase::Ready {
            primary = Some((k + 1, started.elapsed()));
        }
    }
    let elapsed = started.elapsed();
    let per = elapsed.as_secs_f64() / (samples.len() - 1) as f64;
    println!("polls: {}", samples.len() - 1);
    println!(
        "watch live update: {:.1} µs per poll amortised over the day ({:.2} s in all)",
        per * 1e6,
        elapsed.as_secs_f64()
    );
    if let Some((polls, took)) = primary {
        // While primary runs every poll re-runs both constructions: the worst case.
        println!(
            "  while in primary ({polls} polls until ready): {:.1} µs per poll",
            took.as_secs_f64() / polls as f64 * 1e6
        );
    }
    println!("phase at the end: {:?}; status: {:?}", watch.phase(), watch.status().t90_min);
}
