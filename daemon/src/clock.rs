//! Time for the daemon: UTC microseconds from a clock passed in as a value.
//!
//! Stored instants are UTC µs. The system clock for `run`; a scaled clock for the demo (a multi-day test
//! in minutes, shared with the in-process simulator); a manual clock for tests. Scheduling waits use
//! tokio's monotonic timer, divided by the clock's speed — never the wall clock.

use std::sync::atomic::{AtomicI64, Ordering};
use std::time::{Duration, Instant};

/// A source of UTC time.
pub trait Clock: Send + Sync {
    /// Now, µs since 1970-01-01 UTC.
    fn now_us(&self) -> i64;

    /// Clock seconds per real second (1 except for the demo).
    fn speed(&self) -> f64 {
        1.0
    }

    /// Whether this clock runs faster than real time (the dashboard must then say so).
    fn is_simulated(&self) -> bool {
        self.speed() != 1.0
    }

    /// The real wait for a period measured on this clock; on a fast (simulated) clock never under
    /// `floor`, so a demo at high speed does not poll flat out.
    fn real_wait(&self, period: Duration, floor: Duration) -> Duration {
        let wait = period.div_f64(self.speed());
        if self.speed() > 1.0 { wait.max(floor) } else { wait }
    }
}

/// The operating system's UTC clock.
#[derive(Debug, Default, Clone, Copy)]
pub struct SystemClock;

impl Clock for SystemClock {
    fn now_us(&self) -> i64 {
        chrono::Utc::now().timestamp_micros()
    }
}

/// Starts at a UTC instant and runs `speed` times faster than real time (monotonic underneath).
#[derive(Debug)]
pub struct ScaledClock {
    origin: Instant,
    start_us: i64,
    speed: f64,
}

impl ScaledClock {
    /// A clock reading `start_us` now and running at `speed` (finite, > 0; otherwise 1).
    pub fn new(start_us: i64, speed: f64) -> Self {
        let speed = if speed.is_finite() && speed > 0.0 { speed } else { 1.0 };
        ScaledClock { origin: Instant::now(), start_us, speed }
    }

    /// The instant the clock started at, µs.
    pub fn start_us(&self) -> i64 {
        self.start_us
    }
}

impl Clock for ScaledClock {
    fn now_us(&self) -> i64 {
        self.start_us + (self.origin.elapsed().as_secs_f64() * self.speed * 1e6) as i64
    }

    fn speed(&self) -> f64 {
        self.speed
    }
}

/// A clock that moves only when told (tests; clock-step cases).
#[derive(Debug, Default)]
pub struct ManualClock {
    now_us: AtomicI64,
}

impl ManualClock {
    /// Reads `start_us` until moved.
    pub fn new(start_us: i64) -> Self {
        ManualClock { now_us: AtomicI64::new(start_us) }
    }

    /// Moves by `delta_us` (negative for a step back).
    pub fn advance_us(&self, delta_us: i64) {
        self.now_us.fetch_add(delta_us, Ordering::SeqCst);
    }
}

impl Clock for ManualClock {
    fn now_us(&self) -> i64 {
        self.now_us.load(Ordering::SeqCst)
    }
}

/// RFC 3339 text of a UTC µs instant, e.g. `2026-12-01T21:57:31.123456Z`.
pub fn rfc3339(at_us: i64) -> String {
    chrono::DateTime::<chrono::Utc>::from_timestamp_micros(at_us)
        .map(|t| t.to_rfc3339_opts(chrono::SecondsFormat::Micros, true))
        .unwrap_or_default()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn scaled_clock_runs_faster_and_scales_waits() {
        let clock = ScaledClock::new(1_000_000, 600.0);
        assert!(clock.is_simulated());
        assert_eq!(clock.real_wait(Duration::from_secs(60), Duration::from_millis(20)), Duration::from_millis(100));
        assert_eq!(clock.real_wait(Duration::from_secs(1), Duration::from_millis(20)), Duration::from_millis(20));
        assert!(clock.now_us() >= 1_000_000);
    }

    #[test]
    fn rfc3339_is_utc_with_microseconds() {
        assert_eq!(rfc3339(0), "1970-01-01T00:00:00.000000Z");
        assert_eq!(rfc3339(1_764_626_251_123_456), "2025-12-01T21:57:31.123456Z");
        let manual = ManualClock::new(5);
        manual.advance_us(-10);
        assert_eq!(manual.now_us(), -5);
        assert!(!manual.is_simulated());
    }
}
