//! Test support: synthetic time curves from the exact Terzaghi series of `terzaghi` plus a straight
//! secondary branch [ref: synthetic-checks], sampled on standard schedules with gauge quantisation and noise.
//! Computed checks; it must not be used outside tests.

use super::increment::{IncrementParams, IncrementReduction, reduce_increment};
use super::terzaghi::{degree_of_consolidation, time_factor};

/// A specimen's forward model for one increment.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Model {
    /// Coefficient of consolidation, mm²/min.
    pub cv_mm2_per_min: f64,
    /// Drainage path Hdr, mm.
    pub drainage_path_mm: f64,
    /// Reading at the moment the load goes on (t = 0).
    pub start_mm: f64,
    /// Immediate compression (bedding, trapped air) at t = 0⁺: the gap between the t = 0 reading and d0.
    pub immediate_mm: f64,
    /// Primary consolidation settlement.
    pub primary_mm: f64,
    /// Secondary compression, mm per log cycle of time after the onset.
    pub secondary_mm_per_log_cycle: f64,
    /// Time factor at which secondary compression starts.
    pub secondary_onset_time_factor: f64,
}

impl Model {
    /// A 20 mm specimen, double drainage (Hdr = 10 mm), cv = 1 mm²/min (≈ 0.53 m²/yr): t90 = 84.8 min,
    /// 1 mm of primary, Cα(ε) ≈ 0.0025 (0.05 mm per log cycle over 20 mm) from T = 1.10 — where the ideal
    /// tangent at the inflection meets U = 1 [ref: t100-t90-ratio, computed], so the log-t construction's
    /// continuous answer is d100 = d0 + primary exactly.
    pub(crate) fn typical() -> Model {
        Model {
            cv_mm2_per_min: 1.0,
            drainage_path_mm: 10.0,
            start_mm: 2.5,
            immediate_mm: 0.02,
            primary_mm: 1.0,
            secondary_mm_per_log_cycle: 0.05,
            secondary_onset_time_factor: 1.10,
        }
    }

    pub(crate) fn time_at(&self, time_factor: f64) -> f64 {
        time_factor * self.drainage_path_mm * self.drainage_path_mm / self.cv_mm2_per_min
    }

    /// True corrected zero.
    pub(crate) fn d0_mm(&self) -> f64 {
        self.start_mm + self.immediate_mm
    }

    /// True end of primary.
    pub(crate) fn d100_mm(&self) -> f64 {
        self.d0_mm() + self.primary_mm
    }

    /// Exact t90 of the series.
    pub(crate) fn t90_min(&self) -> f64 {
        self.time_at(time_factor(0.9).unwrap())
    }

    /// Exact t50 of the series.
    pub(crate) fn t50_min(&self) -> f64 {
        self.time_at(time_factor(0.5).unwrap())
    }

    /// Error of a displacement as a fraction of the primary compression.
    pub(crate) fn of_primary(&self, got_mm: f64, want_mm: f64) -> f64 {
        (got_mm - want_mm) / self.primary_mm
    }

    pub(crate) fn displacement_mm(&self, t_min: f64) -> f64 {
        if t_min <= 0.0 {
            return self.start_mm;
        }
        let tv = self.cv_mm2_per_min * t_min / (self.drainage_path_mm * self.drainage_path_mm);
        let onset = self.time_at(self.secondary_onset_time_factor);
        let secondary = if t_min > onset { self.secondary_mm_per_log_cycle * (t_min / onset).log10() } else { 0.0 };
        self.d0_mm() + self.primary_mm * degree_of_consolidation(tv) + secondary
    }
}

/// Hand schedule, min: ¼ … 1440 plus the reading at t = 0 [ref: reading-schedule, common practice].
pub(crate) const HAND_SCHEDULE_MIN: [f64; 14] =
    [0.0, 0.25, 0.5, 1.0, 2.0, 4.0, 8.0, 15.0, 30.0, 60.0, 120.0, 240.0, 480.0, 1440.0];

/// `count` times log-spaced from `first_min` to `last_min`, with a reading at t = 0 first.
pub(crate) fn log_schedule(count: usize, first_min: f64, last_min: f64) -> Vec<f64> {
    let ratio = (last_min / first_min).ln() / (count - 1) as f64;
    std::iter::once(0.0).chain((0..count).map(|k| first_min * (ratio * k as f64).exp())).collect()
}

/// Small deterministic generator (xorshift64*), so the tests need no random-number crate.
pub(crate) struct Noise(u64);

impl Noise {
    pub(crate) fn new(seed: u64) -> Self {
        Noise(seed.wrapping_mul(0x9E37_79B9_7F4A_7C15) | 1)
    }

    fn next_unit(&mut self) -> f64 {
        self.0 ^= self.0 >> 12;
        self.0 ^= self.0 << 25;
        self.0 ^= self.0 >> 27;
        let bits = self.0.wrapping_mul(0x2545_F491_4F6C_DD1D) >> 11;
        (bits as f64 + 0.5) / (1u64 << 53) as f64
    }

    /// Standard normal deviate (Box–Muller).
    pub(crate) fn gaussian(&mut self) -> f64 {
        let (u1, u2) = (self.next_unit(), self.next_unit());
        (-2.0 * u1.ln()).sqrt() * (std::f64::consts::TAU * u2).cos()
    }
}

/// Readings of the model at `times`: Gaussian noise of `noise_mm`, then rounding to the gauge's
/// `quantum_mm` (0 for none).
pub(crate) fn sample(model: &Model, times: &[f64], quantum_mm: f64, noise_mm: f64, seed: u64) -> Vec<(f64, f64)> {
    let mut noise = Noise::new(seed);
    times
        .iter()
        .map(|&t| {
            let mut d = model.displacement_mm(t) + noise_mm * noise.gaussian();
            if quantum_mm > 0.0 {
                d = (d / quantum_mm).round() * quantum_mm;
            }
            (t, d)
        })
        .collect()
}

/// Dense log-spaced logging: 2000 readings from 0.01 min to 24 h.
pub(crate) fn dense_schedule() -> Vec<f64> {
    log_schedule(2000, 0.01, 1440.0)
}

/// Relative error.
pub(crate) fn relative(got: f64, want: f64) -> f64 {
    (got - want) / want
}

/// Reduces sampled readings of the model with the drainage path given and default parameters.
pub(crate) fn reduce(model: &Model, times: &[f64], quantum_mm: f64, noise_mm: f64, seed: u64) -> IncrementReduction {
    let readings = sample(model, times, quantum_mm, noise_mm, seed);
    reduce_increment(&readings, &IncrementParams::with_drainage_path_mm(model.drainage_path_mm)).unwrap()
}

/// A logger's schedule: a reading every `fast_min` for the first `fast_until_min` after the load goes on,
/// then every `steady_min` until `end_min`, with the reading at t = 0 first (the daemon's demo polls
/// 5–6 s for 15 min, then 30 s).
pub(crate) fn poll_schedule(fast_min: f64, fast_until_min: f64, steady_min: f64, end_min: f64) -> Vec<f64> {
    let mut times = vec![0.0];
    let mut t = fast_min;
    while t <= end_min {
        times.push(t);
        t += if t < fast_until_min { fast_min } else { steady_min };
    }
    times
}
