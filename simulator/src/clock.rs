//! The simulator's time: seconds on a simulated timeline, from a clock the caller supplies.
//!
//! Physics and schedules never read the system clock; they take `at_s` from a [`Clock`]. The scaled
//! clock lets a multi-day test play in minutes; the manual clock lets tests step time exactly.

use std::sync::Mutex;
use std::time::Instant;

/// A source of simulated time, in seconds since the simulation's origin.
pub trait Clock: Send + Sync {
    /// The current simulated time, s.
    fn now_s(&self) -> f64;
}

/// Simulated seconds = `speed` × real seconds since creation (monotonic), plus a starting offset.
#[derive(Debug)]
pub struct ScaledClock {
    origin: Instant,
    speed: f64,
    start_s: f64,
}

impl ScaledClock {
    /// A clock running `speed` times faster than real time, reading `start_s` now. `speed` must be
    /// finite and positive; anything else is taken as 1.
    pub fn new(speed: f64, start_s: f64) -> Self {
        let speed = if speed.is_finite() && speed > 0.0 { speed } else { 1.0 };
        ScaledClock { origin: Instant::now(), speed, start_s }
    }

    /// Simulated seconds per real second.
    pub fn speed(&self) -> f64 {
        self.speed
    }
}

impl Clock for ScaledClock {
    fn now_s(&self) -> f64 {
        self.start_s + self.origin.elapsed().as_secs_f64() * self.speed
    }
}

/// A clock that moves only when told to (tests).
#[derive(Debug, Default)]
pub struct ManualClock {
    now_s: Mutex<f64>,
}

impl ManualClock {
    /// A manual clock reading `start_s`.
    pub fn new(start_s: f64) -> Self {
        ManualClock { now_s: Mutex::new(start_s) }
    }

    /// Moves the clock forward (or back, for clock-step tests) by `delta_s`.
    pub fn advance(&self, delta_s: f64) {
        *self.now_s.lock().unwrap_or_else(|e| e.into_inner()) += delta_s;
    }

    /// Sets the clock to `at_s`.
    pub fn set(&self, at_s: f64) {
        *self.now_s.lock().unwrap_or_else(|e| e.into_inner()) = at_s;
    }
}

impl Clock for ManualClock {
    fn now_s(&self) -> f64 {
        *self.now_s.lock().unwrap_or_else(|e| e.into_inner())
    }
}
