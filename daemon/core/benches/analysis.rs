//! Benchmarks of the time-curve reduction: a full increment of 100 000 readings (target ≤ 5 ms), and the
//! constructions alone on an already-thinned curve (what the live watcher pays per update). Synthetic data
//! only; it must not touch the store, the clock or a frame.

use divan::{Bencher, black_box};
use oedolog_core::analysis::{IncrementParams, TimeCurve, degree_of_consolidation, reduce_curve, reduce_increment};

fn main() {
    divan::main();
}

/// 100 000 readings log-spaced from 1 s to 24 h of an increment with cv = 1 mm²/min, Hdr = 10 mm, 1 mm of
/// primary and 0.05 mm per log cycle of secondary, read to 0.001 mm with ±0.5 µm of uniform noise.
fn synthetic_increment(count: usize) -> Vec<(f64, f64)> {
    let (first, last) = (1.0 / 60.0, 1440.0f64);
    let ratio = (last / first).ln() / (count - 1) as f64;
    let mut state = 0x2545_F491_4F6C_DD1Du64;
    (0..count)
        .map(|k| {
            let t = first * (ratio * k as f64).exp();
            state = state.wrapping_mul(6_364_136_223_846_793_005).wrapping_add(1_442_695_040_888_963_407);
            let noise = ((state >> 11) as f64 / (1u64 << 53) as f64 - 0.5) * 0.001;
            let secondary = if t > 110.0 { 0.05 * (t / 110.0).log10() } else { 0.0 };
            let d = 2.52 + degree_of_consolidation(t / 100.0) + secondary + noise;
            (t, (d * 1000.0).round() / 1000.0)
        })
        .collect()
}

#[divan::bench]
fn reduce_100k_readings(bencher: Bencher<'_, '_>) {
    let readings = synthetic_increment(100_000);
    let params = IncrementParams::with_drainage_path_mm(10.0);
    assert!(reduce_increment(&readings, &params).unwrap().cv_casagrande.is_some());
    bencher.bench(|| reduce_increment(black_box(&readings), black_box(&params)).unwrap());
}

#[divan::bench]
fn constructions_on_thinned_curve(bencher: Bencher<'_, '_>) {
    let readings = synthetic_increment(100_000);
    let params = IncrementParams::with_drainage_path_mm(10.0);
    let curve = TimeCurve::from_readings(&readings, params.bins_per_decade).unwrap();
    bencher.bench(|| reduce_curve(black_box(&curve), black_box(&params)).unwrap());
}
