//! Instruments of a simulated frame: displacement gauge, load cell and temperature sensor, which add offset,
//! noise, quantisation, travel limits and sensor faults (stuck reading) to the physics' truth.
//! It must not model the specimen, read a clock or own a random-number generator: callers pass one, so a
//! seeded run is reproducible.

use std::f64::consts::PI;

use rand::Rng;
use serde::{Deserialize, Serialize};

/// Largest averaging count the device accepts (its "averaging" holding register).
pub const MAX_AVERAGING: u16 = 64;

/// Seconds in a day, the period of the room-temperature cycle.
const DAY_S: f64 = 86_400.0;

/// Errors from configuring an instrument with bad values.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum SensorError {
    /// Averaging count outside 1..=64.
    #[error("averaging count {count} is not allowed: expected 1..=64")]
    InvalidAveraging {
        /// Offending count.
        count: u16,
    },
    /// An instrument parameter out of range.
    #[error("{field} = {value} is not allowed: expected {allowed}")]
    InvalidParameter {
        /// Parameter name.
        field: &'static str,
        /// Offending value.
        value: f64,
        /// What is accepted.
        allowed: &'static str,
    },
}

fn check(field: &'static str, value: f64, ok: bool, allowed: &'static str) -> Result<(), SensorError> {
    if value.is_finite() && ok { Ok(()) } else { Err(SensorError::InvalidParameter { field, value, allowed }) }
}

/// One draw from the standard normal distribution by the Box–Muller transform, from the caller's rng.
pub fn standard_normal<R: Rng + ?Sized>(rng: &mut R) -> f64 {
    // 1 − u lies in (0, 1], so the logarithm is finite.
    let u1 = 1.0 - rng.random::<f64>();
    let u2 = rng.random::<f64>();
    (-2.0 * u1.ln()).sqrt() * (2.0 * PI * u2).cos()
}

/// Rounds `value` to the nearest multiple of `resolution` (no rounding when resolution is 0).
fn quantise(value: f64, resolution: f64) -> f64 {
    if resolution > 0.0 { (value / resolution).round() * resolution } else { value }
}

/// Number of samples the device averages per reading; noise falls by √n (independent samples).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct Averaging(u16);

impl Averaging {
    /// A count in 1..=[`MAX_AVERAGING`].
    pub fn new(count: u16) -> Result<Self, SensorError> {
        if (1..=MAX_AVERAGING).contains(&count) {
            Ok(Self(count))
        } else {
            Err(SensorError::InvalidAveraging { count })
        }
    }

    /// The count.
    pub fn count(self) -> u16 {
        self.0
    }

    /// Factor on the single-sample noise standard deviation, 1/√n.
    pub fn noise_factor(self) -> f64 {
        1.0 / f64::from(self.0).sqrt()
    }
}

impl Default for Averaging {
    /// No averaging (n = 1).
    fn default() -> Self {
        Self(1)
    }
}

/// One displacement-gauge reading.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct GaugeReading {
    /// Reading, mm, from 0 (start of travel) to the travel; grows as the specimen compresses.
    pub reading_mm: f64,
    /// The plunger is pinned at an end of its travel; the reading no longer follows the specimen.
    pub out_of_travel: bool,
}

/// Displacement gauge (dial or transducer): reading = truth + offset + noise, quantised, pinned at the ends
/// of its travel.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Gauge {
    resolution_mm: f64,
    noise_sd_mm: f64,
    travel_mm: f64,
    offset_mm: f64,
    averaging: Averaging,
    stuck: bool,
    last: Option<GaugeReading>,
}

impl Gauge {
    /// A gauge with the given resolution, single-sample noise, travel and offset (the reading at true
    /// displacement 0).
    pub fn new(resolution_mm: f64, noise_sd_mm: f64, travel_mm: f64, offset_mm: f64) -> Result<Self, SensorError> {
        check("resolution_mm", resolution_mm, (0.0..=1.0).contains(&resolution_mm), "0 ≤ resolution_mm ≤ 1")?;
        check("noise_sd_mm", noise_sd_mm, (0.0..=1.0).contains(&noise_sd_mm), "0 ≤ noise_sd_mm ≤ 1")?;
        check("travel_mm", travel_mm, travel_mm > 0.0 && travel_mm <= 1000.0, "0 < travel_mm ≤ 1000")?;
        check("offset_mm", offset_mm, (0.0..=travel_mm).contains(&offset_mm), "0 ≤ offset_mm ≤ travel_mm")?;
        Ok(Self {
            resolution_mm,
            noise_sd_mm,
            travel_mm,
            offset_mm,
            averaging: Averaging::default(),
            stuck: false,
            last: None,
        })
    }

    /// A typical displacement transducer: 0.001 mm resolution, 0.8 µm noise per sample, 25 mm travel, set
    /// 1 mm into its travel so the specimen may swell (invented demo values of a plausible order).
    pub fn standard() -> Self {
        Self {
            resolution_mm: 0.001,
            noise_sd_mm: 0.0008,
            travel_mm: 25.0,
            offset_mm: 1.0,
            averaging: Averaging::default(),
            stuck: false,
            last: None,
        }
    }

    /// Reads the gauge for a true displacement (compression positive, from the physics). A stuck gauge
    /// returns its last reading whatever the truth.
    pub fn read<R: Rng + ?Sized>(&mut self, true_displacement_mm: f64, rng: &mut R) -> GaugeReading {
        if self.stuck
            && let Some(last) = self.last
        {
            return last;
        }
        let position_mm = true_displacement_mm + self.offset_mm;
        let reading = if position_mm.is_nan() || position_mm < 0.0 {
            GaugeReading { reading_mm: 0.0, out_of_travel: true }
        } else if position_mm > self.travel_mm {
            GaugeReading { reading_mm: self.travel_mm, out_of_travel: true }
        } else {
            let noise_mm = self.noise_sd_mm * self.averaging.noise_factor() * standard_normal(rng);
            GaugeReading {
                reading_mm: quantise(position_mm + noise_mm, self.resolution_mm).clamp(0.0, self.travel_mm),
                out_of_travel: false,
            }
        };
        self.last = Some(reading);
        reading
    }

    /// Re-seats the gauge as a technician does when it runs out of travel: the offset changes so that the
    /// present true displacement reads `reading_after_mm` (near the start of travel). Returns the jump in
    /// offset, mm (negative when the reading moves back).
    pub fn reseat(&mut self, true_displacement_mm: f64, reading_after_mm: f64) -> Result<f64, SensorError> {
        check(
            "reading_after_mm",
            reading_after_mm,
            (0.0..=self.travel_mm).contains(&reading_after_mm),
            "0 ≤ reading_after_mm ≤ travel_mm",
        )?;
        check("true_displacement_mm", true_displacement_mm, true, "a finite displacement")?;
        let new_offset_mm = reading_after_mm - true_displacement_mm;
        let jump_mm = new_offset_mm - self.offset_mm;
        self.offset_mm = new_offset_mm;
        Ok(jump_mm)
    }

    /// Sets or clears the stuck fault.
    pub fn set_stuck(&mut self, stuck: bool) {
        self.stuck = stuck;
    }

    /// Whether the stuck fault is on.
    pub fn is_stuck(&self) -> bool {
        self.stuck
    }

    /// Sets the averaging count (1..=64).
    pub fn set_averaging(&mut self, count: u16) -> Result<(), SensorError> {
        self.averaging = Averaging::new(count)?;
        Ok(())
    }

    /// The averaging count.
    pub fn averaging(&self) -> u16 {
        self.averaging.count()
    }

    /// Resolution, mm.
    pub fn resolution_mm(&self) -> f64 {
        self.resolution_mm
    }

    /// Single-sample noise standard deviation, mm.
    pub fn noise_sd_mm(&self) -> f64 {
        self.noise_sd_mm
    }

    /// Travel, mm.
    pub fn travel_mm(&self) -> f64 {
        self.travel_mm
    }

    /// Offset: the reading at true displacement 0, mm (may be negative after a re-seat).
    pub fn offset_mm(&self) -> f64 {
        self.offset_mm
    }

    /// The last reading returned, if any.
    pub fn last_reading(&self) -> Option<GaugeReading> {
        self.last
    }
}

/// One load-cell reading.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct LoadCellReading {
    /// Load, N, compression positive.
    pub load_n: f64,
    /// The load is beyond the cell's capacity; the reading is pinned at ± capacity.
    pub over_range: bool,
}

/// Load cell: reading = truth + zero offset + noise, quantised, pinned at ± capacity.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LoadCell {
    capacity_n: f64,
    resolution_n: f64,
    noise_sd_n: f64,
    offset_n: f64,
    averaging: Averaging,
    stuck: bool,
    last: Option<LoadCellReading>,
}

impl LoadCell {
    /// A load cell with the given capacity, resolution, single-sample noise and zero offset.
    pub fn new(capacity_n: f64, resolution_n: f64, noise_sd_n: f64, offset_n: f64) -> Result<Self, SensorError> {
        check("capacity_n", capacity_n, capacity_n > 0.0 && capacity_n <= 1.0e7, "0 < capacity_n ≤ 1e7")?;
        check(
            "resolution_n",
            resolution_n,
            resolution_n >= 0.0 && resolution_n <= capacity_n,
            "0 ≤ resolution_n ≤ capacity_n",
        )?;
        check("noise_sd_n", noise_sd_n, noise_sd_n >= 0.0 && noise_sd_n <= capacity_n, "0 ≤ noise_sd_n ≤ capacity_n")?;
        check("offset_n", offset_n, offset_n.abs() <= capacity_n, "|offset_n| ≤ capacity_n")?;
        Ok(Self {
            capacity_n,
            resolution_n,
            noise_sd_n,
            offset_n,
            averaging: Averaging::default(),
            stuck: false,
            last: None,
        })
    }

    /// A 10 kN cell read to 0.1 N with 0.4 N noise per sample: 1600 kPa on a 76 mm ring is about 7.3 kN
    /// (invented demo values of a plausible order).
    pub fn standard() -> Self {
        Self {
            capacity_n: 10_000.0,
            resolution_n: 0.1,
            noise_sd_n: 0.4,
            offset_n: 0.0,
            averaging: Averaging::default(),
            stuck: false,
            last: None,
        }
    }

    /// Reads the cell for a true load. A stuck cell returns its last reading whatever the truth.
    pub fn read<R: Rng + ?Sized>(&mut self, true_load_n: f64, rng: &mut R) -> LoadCellReading {
        if self.stuck
            && let Some(last) = self.last
        {
            return last;
        }
        let load_n = true_load_n + self.offset_n;
        let reading = if load_n.is_nan() || load_n.abs() > self.capacity_n {
            LoadCellReading { load_n: if load_n < 0.0 { -self.capacity_n } else { self.capacity_n }, over_range: true }
        } else {
            let noise_n = self.noise_sd_n * self.averaging.noise_factor() * standard_normal(rng);
            LoadCellReading {
                load_n: quantise(load_n + noise_n, self.resolution_n).clamp(-self.capacity_n, self.capacity_n),
                over_range: false,
            }
        };
        self.last = Some(reading);
        reading
    }

    /// Sets or clears the stuck fault.
    pub fn set_stuck(&mut self, stuck: bool) {
        self.stuck = stuck;
    }

    /// Whether the stuck fault is on.
    pub fn is_stuck(&self) -> bool {
        self.stuck
    }

    /// Sets the averaging count (1..=64).
    pub fn set_averaging(&mut self, count: u16) -> Result<(), SensorError> {
        self.averaging = Averaging::new(count)?;
        Ok(())
    }

    /// The averaging count.
    pub fn averaging(&self) -> u16 {
        self.averaging.count()
    }

    /// Capacity, N.
    pub fn capacity_n(&self) -> f64 {
        self.capacity_n
    }

    /// Resolution, N.
    pub fn resolution_n(&self) -> f64 {
        self.resolution_n
    }

    /// Single-sample noise standard deviation, N.
    pub fn noise_sd_n(&self) -> f64 {
        self.noise_sd_n
    }

    /// The last reading returned, if any.
    pub fn last_reading(&self) -> Option<LoadCellReading> {
        self.last
    }
}

/// Room/cell temperature: a daily sinusoid plus a tiny pseudo-noise, both fixed by `at_s` and `seed`, so a
/// reading is reproducible without an rng.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct TemperatureSensor {
    /// Daily mean, °C.
    pub mean_c: f64,
    /// Half the daily swing, °C.
    pub daily_amplitude_c: f64,
    /// Time of the daily maximum within the day, s (on the simulated timeline, taken modulo a day).
    pub warmest_at_s: f64,
    /// Noise standard deviation, °C.
    pub noise_sd_c: f64,
    /// Resolution, °C.
    pub resolution_c: f64,
    /// Seed of the pseudo-noise, so frames differ.
    pub seed: u64,
}

impl Default for TemperatureSensor {
    /// 20 °C ± 0.6 °C, warmest at 15:00, 0.02 °C noise, read to 0.01 °C: a controlled laboratory well inside
    /// the ±4 °C band of daemon/core/REFERENCES.md [ref: temperature-band] (invented demo values).
    fn default() -> Self {
        Self {
            mean_c: 20.0,
            daily_amplitude_c: 0.6,
            warmest_at_s: 15.0 * 3600.0,
            noise_sd_c: 0.02,
            resolution_c: 0.01,
            seed: 0,
        }
    }
}

impl TemperatureSensor {
    /// The noise-free temperature at `at_s`, °C.
    pub fn true_c(&self, at_s: f64) -> f64 {
        self.mean_c + self.daily_amplitude_c * (2.0 * PI * (at_s - self.warmest_at_s) / DAY_S).cos()
    }

    /// The reading at `at_s`, °C: truth plus pseudo-noise fixed by (`at_s`, `seed`), quantised.
    pub fn read_c(&self, at_s: f64) -> f64 {
        let a = splitmix64(at_s.to_bits() ^ self.seed);
        let b = splitmix64(a);
        let u1 = 1.0 - unit_interval(a);
        let u2 = unit_interval(b);
        let z = (-2.0 * u1.ln()).sqrt() * (2.0 * PI * u2).cos();
        quantise(self.true_c(at_s) + self.noise_sd_c * z, self.resolution_c)
    }
}

/// SplitMix64 finaliser (Steele, Lea & Flood 2014): a well-mixed 64-bit hash for the pseudo-noise.
fn splitmix64(x: u64) -> u64 {
    let mut z = x.wrapping_add(0x9E37_79B9_7F4A_7C15);
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

/// Top 53 bits as a number in [0, 1).
fn unit_interval(x: u64) -> f64 {
    (x >> 11) as f64 / (1u64 << 53) as f64
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::SeedableRng;
    use rand::rngs::StdRng;

    fn mean_and_sd(values: &[f64]) -> (f64, f64) {
        let n = values.len() as f64;
        let mean = values.iter().sum::<f64>() / n;
        let var = values.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (n - 1.0);
        (mean, var.sqrt())
    }

    // Standard normal: mean 0, sd 1, P(|z| > 1.96) = 0.05 (standard normal table, any statistics handbook).
    #[test]
    fn box_muller_draws_are_standard_normal() {
        let mut rng = StdRng::seed_from_u64(7);
        let draws: Vec<f64> = (0..200_000).map(|_| standard_normal(&mut rng)).collect();
        let (mean, sd) = mean_and_sd(&draws);
        assert!(mean.abs() < 0.01, "mean {mean}");
        assert!((sd - 1.0).abs() < 0.01, "sd {sd}");
        let tail = draws.iter().filter(|z| z.abs() > 1.96).count() as f64 / draws.len() as f64;
        assert!((tail - 0.05).abs() < 0.003, "tail {tail}");
        assert!(draws.iter().all(|z| z.is_finite()));
    }

    #[test]
    fn gauge_readings_are_quantised_to_the_resolution() {
        let mut gauge = Gauge::new(0.002, 0.003, 12.0, 0.5).unwrap();
        let mut rng = StdRng::seed_from_u64(1);
        for i in 0..1000 {
            let r = gauge.read(f64::from(i) * 0.00731, &mut rng);
            let steps = r.reading_mm / 0.002;
            assert!((steps - steps.round()).abs() < 1e-6, "{}", r.reading_mm);
            assert!(!r.out_of_travel);
        }
    }

    #[test]
    fn gauge_noise_has_the_configured_sd_and_averaging_divides_it_by_root_n() {
        let mut gauge = Gauge::new(0.0, 0.004, 25.0, 1.0).unwrap();
        let mut rng = StdRng::seed_from_u64(2);
        let single: Vec<f64> = (0..40_000).map(|_| gauge.read(3.0, &mut rng).reading_mm).collect();
        gauge.set_averaging(16).unwrap();
        assert_eq!(gauge.averaging(), 16);
        let averaged: Vec<f64> = (0..40_000).map(|_| gauge.read(3.0, &mut rng).reading_mm).collect();
        let (m1, sd1) = mean_and_sd(&single);
        let (m16, sd16) = mean_and_sd(&averaged);
        assert!((m1 - 4.0).abs() < 1e-4 && (m16 - 4.0).abs() < 1e-4);
        assert!((sd1 - 0.004).abs() < 0.0001, "sd {sd1}");
        assert!((sd1 / sd16 - 4.0).abs() < 0.15, "ratio {}", sd1 / sd16);
        assert_eq!(gauge.set_averaging(0), Err(SensorError::InvalidAveraging { count: 0 }));
        assert_eq!(gauge.set_averaging(65), Err(SensorError::InvalidAveraging { count: 65 }));
        assert_eq!(gauge.averaging(), 16);
    }

    #[test]
    fn gauge_pins_at_the_ends_of_travel_and_a_reseat_brings_it_back() {
        let mut gauge = Gauge::new(0.001, 0.0008, 12.0, 1.0).unwrap();
        let mut rng = StdRng::seed_from_u64(3);
        let r = gauge.read(11.5, &mut rng);
        assert_eq!(r, GaugeReading { reading_mm: 12.0, out_of_travel: true });
        let r = gauge.read(-1.5, &mut rng);
        assert_eq!(r.reading_mm, 0.0);
        assert!(r.out_of_travel);
        let jump = gauge.reseat(11.5, 1.0).unwrap();
        assert!((jump - (-11.5)).abs() < 1e-12);
        let r = gauge.read(11.5, &mut rng);
        assert!(!r.out_of_travel);
        assert!((r.reading_mm - 1.0).abs() < 0.005, "{}", r.reading_mm);
        // Compression after the re-seat keeps counting from the new position.
        let r = gauge.read(12.5, &mut rng);
        assert!((r.reading_mm - 2.0).abs() < 0.005);
        assert!(gauge.reseat(0.0, 13.0).is_err());
        assert!(Gauge::new(0.001, 0.001, 10.0, 11.0).is_err());
    }

    #[test]
    fn stuck_gauge_and_load_cell_freeze_at_their_last_reading() {
        let mut rng = StdRng::seed_from_u64(4);
        let mut gauge = Gauge::standard();
        let before = gauge.read(2.0, &mut rng);
        gauge.set_stuck(true);
        assert!(gauge.is_stuck());
        for truth in [2.5, 3.0, 7.0] {
            assert_eq!(gauge.read(truth, &mut rng), before);
        }
        gauge.set_stuck(false);
        assert!((gauge.read(7.0, &mut rng).reading_mm - 8.0).abs() < 0.005);

        let mut cell = LoadCell::standard();
        let before = cell.read(1000.0, &mut rng);
        cell.set_stuck(true);
        assert_eq!(cell.read(4000.0, &mut rng), before);
        cell.set_stuck(false);
        assert!((cell.read(4000.0, &mut rng).load_n - 4000.0).abs() < 3.0);
    }

    #[test]
    fn load_cell_adds_quantised_noise_and_flags_over_range() {
        let mut cell = LoadCell::new(5000.0, 0.5, 2.0, 1.5).unwrap();
        let mut rng = StdRng::seed_from_u64(5);
        let loads: Vec<f64> = (0..40_000).map(|_| cell.read(1234.0, &mut rng).load_n).collect();
        let (mean, sd) = mean_and_sd(&loads);
        assert!((mean - 1235.5).abs() < 0.05, "mean {mean}");
        assert!((sd - 2.0).abs() < 0.06, "sd {sd}");
        assert!(loads.iter().all(|l| ((l / 0.5) - (l / 0.5).round()).abs() < 1e-6));
        cell.set_averaging(64).unwrap();
        let averaged: Vec<f64> = (0..40_000).map(|_| cell.read(1234.0, &mut rng).load_n).collect();
        let (_, sd64) = mean_and_sd(&averaged);
        // 2/√64 = 0.25 N, slightly widened by the 0.5 N quantisation (variance + q²/12).
        let expected = (0.25f64.powi(2) + 0.5f64.powi(2) / 12.0).sqrt();
        assert!((sd64 - expected).abs() < 0.02, "sd {sd64}, expected {expected}");
        let r = cell.read(6000.0, &mut rng);
        assert_eq!(r.load_n, 5000.0);
        assert!(r.over_range);
        assert!(LoadCell::new(-1.0, 0.1, 0.1, 0.0).is_err());
    }

    #[test]
    fn temperature_is_a_reproducible_daily_cycle_around_twenty_degrees() {
        let sensor = TemperatureSensor::default();
        let warmest = sensor.warmest_at_s;
        assert!((sensor.true_c(warmest) - 20.6).abs() < 1e-12);
        assert!((sensor.true_c(warmest + DAY_S / 2.0) - 19.4).abs() < 1e-12);
        assert!((sensor.true_c(1234.5) - sensor.true_c(1234.5 + DAY_S)).abs() < 1e-9);
        let readings: Vec<f64> = (0..1440).map(|m| sensor.read_c(f64::from(m) * 60.0)).collect();
        let (mean, _) = mean_and_sd(&readings);
        assert!((mean - 20.0).abs() < 0.01, "daily mean {mean}");
        for m in 0..1440 {
            let at_s = f64::from(m) * 60.0;
            assert_eq!(sensor.read_c(at_s), sensor.read_c(at_s));
            assert!((sensor.read_c(at_s) - sensor.true_c(at_s)).abs() < 0.1);
        }
        let other = TemperatureSensor { seed: 99, ..sensor };
        let differ = (0..100).filter(|&m| other.read_c(f64::from(m)) != sensor.read_c(f64::from(m))).count();
        assert!(differ > 50);
    }

    #[test]
    fn same_seed_gives_the_same_readings() {
        let run = |seed| {
            let mut rng = StdRng::seed_from_u64(seed);
            let mut gauge = Gauge::standard();
            (0..100).map(|i| gauge.read(f64::from(i) * 0.01, &mut rng).reading_mm).collect::<Vec<_>>()
        };
        assert_eq!(run(11), run(11));
        assert_ne!(run(11), run(12));
    }
}
