//! Time for the daemon: UTC microseconds from a clock passed in as a value.
//!
//! Stored instants are UTC µs. `run` stamps with a [`SteadyClock`]: UTC anchored once to the wall clock,
//! then advanced by a monotonic source, so a stepped system clock (NTP, a person, an RTC wrong after a
//! power cut) never sends stamps back or bends an increment's elapsed time; a step is only reported. A
//! scaled clock for the demo (a multi-day test in minutes, shared with the in-process simulator); an
//! anchored scaled clock for `run --simulated-clock` (soak tests: fast, and continuous across restarts); a
//! manual clock for tests. Scheduling waits use tokio's monotonic timer, divided by the clock's speed —
//! never the wall clock. Nothing here reads local time: DST is a matter of display only.

use std::sync::Arc;
use std::sync::atomic::{AtomicI64, Ordering};
use std::time::{Duration, Instant};

use crate::store::{Event, EventKind, Reader, StoreError, Writer, read};

/// A wall clock and the steady clock may differ by this much before it counts as a step (NTP slews by
/// far less; a person or an RTC steps by far more).
pub const STEP_THRESHOLD: Duration = Duration::from_secs(2);

/// How often `run` compares the wall clock with the steady clock.
pub const WALL_CHECK_PERIOD: Duration = Duration::from_secs(5);

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

    /// Wall clock minus this clock, s, for a clock that follows a wall clock (the steady clock); `None`
    /// for the others.
    fn wall_offset_s(&self) -> Option<f64> {
        None
    }

    /// Compares the wall clock with this clock and returns a step not reported before (once per step);
    /// `None` when nothing moved or this clock does not follow a wall clock.
    fn check_wall(&self) -> Option<ClockStep> {
        None
    }

    /// If this clock reads at or before `floor_us`, moves it on to read just after it and returns true.
    /// Only a clock anchored to the wall can be moved; the others return false and stay as they are.
    fn resume_after(&self, floor_us: i64) -> bool {
        let _ = floor_us;
        false
    }
}

/// A source of elapsed time that never goes back (the steady clock's second source).
pub trait Monotonic: Send + Sync {
    /// µs since an arbitrary origin; never decreases.
    fn elapsed_us(&self) -> i64;
}

/// The operating system's monotonic clock (`Instant`; on Linux CLOCK_MONOTONIC, which NTP may slew
/// but nothing steps; it does not count time the machine spends suspended).
#[derive(Debug, Clone, Copy)]
pub struct SystemMonotonic {
    origin: Instant,
}

impl Default for SystemMonotonic {
    fn default() -> Self {
        SystemMonotonic { origin: Instant::now() }
    }
}

impl Monotonic for SystemMonotonic {
    fn elapsed_us(&self) -> i64 {
        i64::try_from(self.origin.elapsed().as_micros()).unwrap_or(i64::MAX)
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

/// `SPEED@ORIGIN_US` of `oedolog run --simulated-clock`: a clock running `speed` times faster than real time
/// since the UTC instant `origin_us` (where it reads the wall time).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct SimulatedClockSpec {
    /// Clock seconds per real second, 0 < speed ≤ [`MAX_SIMULATED_SPEED`].
    pub speed: f64,
    /// The anchor, µs since 1970-01-01 UTC.
    pub origin_us: i64,
}

/// The fastest simulated clock `run` accepts (the demo's bound too).
pub const MAX_SIMULATED_SPEED: f64 = 100_000.0;

impl std::str::FromStr for SimulatedClockSpec {
    type Err = String;

    fn from_str(text: &str) -> Result<Self, Self::Err> {
        const ALLOWED: &str = "allowed SPEED@ORIGIN_US, e.g. 1500@1764626251000000: 0 < SPEED ≤ 100000 clock seconds per \
                               real second, ORIGIN_US a UTC instant in whole µs since 1970";
        let (speed, origin) = text.split_once('@').ok_or_else(|| format!("`{text}` has no `@` ({ALLOWED})"))?;
        let speed = speed
            .trim()
            .parse::<f64>()
            .ok()
            .filter(|s| s.is_finite() && *s > 0.0 && *s <= MAX_SIMULATED_SPEED)
            .ok_or_else(|| format!("speed `{speed}` is not allowed ({ALLOWED})"))?;
        let origin_us =
            origin.trim().parse::<i64>().map_err(|_| format!("origin `{origin}` is not whole µs ({ALLOWED})"))?;
        Ok(SimulatedClockSpec { speed, origin_us })
    }
}

/// A fast clock anchored to a fixed UTC instant rather than to its own start: it reads
/// `origin + speed × (wall − origin)`, so every process given the same anchor reads the same time and a
/// daemon restarted on it goes on where it stopped (soak tests, demos against an external simulator).
/// It follows the wall clock scaled, so a stepped system clock bends it; it never reads earlier than it has.
pub struct AnchoredScaledClock {
    wall: Arc<dyn Clock>,
    spec: SimulatedClockSpec,
    /// The latest reading given out, µs: a wall clock that went back is held at it.
    latest_us: AtomicI64,
}

impl AnchoredScaledClock {
    /// A clock on `spec` over the wall clock `wall`.
    pub fn new(spec: SimulatedClockSpec, wall: Arc<dyn Clock>) -> Self {
        AnchoredScaledClock { wall, spec, latest_us: AtomicI64::new(i64::MIN) }
    }

    /// A clock on `spec` over the operating system's UTC clock (what `run --simulated-clock` stamps with).
    pub fn system(spec: SimulatedClockSpec) -> Self {
        AnchoredScaledClock::new(spec, Arc::new(SystemClock))
    }
}

impl std::fmt::Debug for AnchoredScaledClock {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("AnchoredScaledClock").field("spec", &self.spec).field("now", &rfc3339(self.now_us())).finish()
    }
}

impl Clock for AnchoredScaledClock {
    fn now_us(&self) -> i64 {
        let SimulatedClockSpec { speed, origin_us } = self.spec;
        let scaled = (self.wall.now_us().saturating_sub(origin_us) as f64 * speed) as i64;
        let now = origin_us.saturating_add(scaled);
        now.max(self.latest_us.fetch_max(now, Ordering::SeqCst))
    }

    fn speed(&self) -> f64 {
        self.spec.speed
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

impl Monotonic for ManualClock {
    fn elapsed_us(&self) -> i64 {
        self.now_us()
    }
}

/// UTC anchored once to a wall clock, then advanced by a monotonic source: stamps never go back, and the
/// time between two stamps is the time that passed, whatever is done to the wall clock meanwhile. The
/// wall clock is only compared with it ([`Clock::check_wall`]); a restart adopts the wall time again.
pub struct SteadyClock {
    wall: Arc<dyn Clock>,
    monotonic: Arc<dyn Monotonic>,
    /// UTC µs at the monotonic source's origin: now = base + elapsed. It only ever grows.
    base_us: AtomicI64,
    /// The largest monotonic reading seen (a source that went back is held at it).
    elapsed_us: AtomicI64,
    /// Wall minus steady when last reported (0 at the anchor), µs.
    reported_offset_us: AtomicI64,
}

impl SteadyClock {
    /// A clock reading `wall` now, advanced from here on by `monotonic`.
    pub fn new(wall: Arc<dyn Clock>, monotonic: Arc<dyn Monotonic>) -> Self {
        let elapsed = monotonic.elapsed_us();
        let base = wall.now_us() - elapsed;
        SteadyClock {
            wall,
            monotonic,
            base_us: AtomicI64::new(base),
            elapsed_us: AtomicI64::new(elapsed),
            reported_offset_us: AtomicI64::new(0),
        }
    }

    /// The operating system's UTC clock, advanced by its monotonic clock (what `oedolog run` stamps with).
    pub fn system() -> Self {
        SteadyClock::new(Arc::new(SystemClock), Arc::new(SystemMonotonic::default()))
    }

    /// Wall clock minus this clock, µs (positive: the wall clock is ahead of the stamps).
    pub fn wall_offset_us(&self) -> i64 {
        let steady = self.now_us();
        self.wall.now_us() - steady
    }
}

impl std::fmt::Debug for SteadyClock {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("SteadyClock")
            .field("now", &rfc3339(self.now_us()))
            .field("wall_offset_us", &self.wall_offset_us())
            .finish()
    }
}

impl Clock for SteadyClock {
    fn now_us(&self) -> i64 {
        let elapsed = self.monotonic.elapsed_us();
        let elapsed = elapsed.max(self.elapsed_us.fetch_max(elapsed, Ordering::SeqCst));
        self.base_us.load(Ordering::SeqCst) + elapsed
    }

    fn wall_offset_s(&self) -> Option<f64> {
        Some(self.wall_offset_us() as f64 / 1e6)
    }

    fn check_wall(&self) -> Option<ClockStep> {
        let at_us = self.now_us();
        let wall_us = self.wall.now_us();
        let offset_us = wall_us - at_us;
        let reported = self.reported_offset_us.load(Ordering::SeqCst);
        let step_us = offset_us - reported;
        if step_us.unsigned_abs() <= STEP_THRESHOLD.as_micros() as u64 {
            return None;
        }
        // Two checks at once report the step once.
        self.reported_offset_us.compare_exchange(reported, offset_us, Ordering::SeqCst, Ordering::SeqCst).ok()?;
        Some(ClockStep { at_us, wall_us, step_us, offset_us })
    }

    fn resume_after(&self, floor_us: i64) -> bool {
        let now = self.now_us();
        if now > floor_us {
            return false;
        }
        self.base_us.fetch_add(floor_us + 1 - now, Ordering::SeqCst);
        // The gap is journalled as clock-behind; it is not a step of its own.
        self.reported_offset_us.store(self.wall_offset_us(), Ordering::SeqCst);
        true
    }
}

/// The wall clock moved against the steady clock by more than [`STEP_THRESHOLD`] since the last report.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct ClockStep {
    /// When it was seen, on the steady clock, UTC µs.
    pub at_us: i64,
    /// What the wall clock read then, UTC µs.
    pub wall_us: i64,
    /// The step, µs (positive: the wall clock jumped forward).
    pub step_us: i64,
    /// Wall minus steady after the step, µs.
    pub offset_us: i64,
}

impl ClockStep {
    /// The `clock-step` journal entry.
    pub fn event(&self) -> Event {
        let (step_s, offset_s) = (self.step_us as f64 / 1e6, self.offset_us as f64 / 1e6);
        Event {
            at_us: self.at_us,
            frame_key: None,
            kind: EventKind::ClockStep,
            message: format!(
                "the system clock stepped {step_s:+.3} s (it now reads {offset_s:+.3} s from the readings' clock, {}); \
                 stamps keep following the steady clock, so running increments need nothing. If the step was a \
                 correction, restart oedolog between increments to adopt the new time",
                rfc3339(self.wall_us)
            ),
            actor: None,
            data: Some(serde_json::json!({ "step_s": step_s, "offset_s": offset_s, "wall": rfc3339(self.wall_us) })),
        }
    }
}

/// At start-up the clock read at or before the newest stored instant and was moved on to just after it.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct ClockBehind {
    /// What the clock read, UTC µs.
    pub read_us: i64,
    /// The newest stored reading or event, UTC µs.
    pub newest_us: i64,
    /// What the clock reads now, UTC µs (just after `newest_us`).
    pub resumed_us: i64,
}

impl ClockBehind {
    /// How far the clock was behind, µs.
    pub fn gap_us(&self) -> i64 {
        self.newest_us - self.read_us
    }

    /// The `clock-behind` journal entry.
    pub fn event(&self) -> Event {
        let gap_s = self.gap_us() as f64 / 1e6;
        Event {
            at_us: self.resumed_us,
            frame_key: None,
            kind: EventKind::ClockBehind,
            message: format!(
                "the system clock read {}, {gap_s:.3} s before the newest stored instant {}: stamps continue \
                 from just after it, so readings stay in order; elapsed time across this restart is short by the \
                 time the daemon was down. Check the system time and NTP (an RTC that lost time in a power cut?)",
                rfc3339(self.read_us),
                rfc3339(self.newest_us)
            ),
            actor: None,
            data: Some(
                serde_json::json!({ "gap_s": gap_s, "clock": rfc3339(self.read_us), "newest": rfc3339(self.newest_us) }),
            ),
        }
    }
}

/// The start-up guard: if `clock` reads at or before the newest stored reading or event (the wall clock
/// went back across a restart), moves it on to just after that instant, so the running increment's
/// readings stay in order. Cheap: each (frame, channel)'s newest reading is one step down the primary
/// key, and events are indexed by time.
pub fn resume_after_store(conn: &Reader, clock: &dyn Clock) -> Result<Option<ClockBehind>, StoreError> {
    let Some(newest_us) = read::newest_instant(conn)? else { return Ok(None) };
    let read_us = clock.now_us();
    if read_us > newest_us || !clock.resume_after(newest_us) {
        return Ok(None);
    }
    Ok(Some(ClockBehind { read_us, newest_us, resumed_us: clock.now_us() }))
}

/// Compares the wall clock with `clock` every `period` and journals each step (and logs it); ends when
/// the writer has stopped.
pub async fn journal_wall_steps(clock: Arc<dyn Clock>, writer: Writer, period: Duration) {
    let mut tick = tokio::time::interval(period);
    tick.set_missed_tick_behavior(tokio::time::MissedTickBehavior::Delay);
    loop {
        tick.tick().await;
        let Some(step) = clock.check_wall() else { continue };
        let event = step.event();
        tracing::warn!("{}", event.message);
        if writer.event(event).is_err() {
            return;
        }
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
    use crate::store::{self, ChannelKind};

    /// 2025-10-26T00:00:00Z, an arbitrary start for the manual wall clock.
    const T0_US: i64 = 1_761_436_800_000_000;
    const HOUR_US: i64 = 3_600_000_000;

    /// A steady clock over a manual wall clock and a manual monotonic source.
    fn steady() -> (SteadyClock, Arc<ManualClock>, Arc<ManualClock>) {
        let wall = Arc::new(ManualClock::new(T0_US));
        let monotonic = Arc::new(ManualClock::new(42));
        (SteadyClock::new(wall.clone(), monotonic.clone()), wall, monotonic)
    }

    /// Both sources move on by `us`, as real time does.
    fn pass(wall: &ManualClock, monotonic: &ManualClock, us: i64) {
        wall.advance_us(us);
        monotonic.advance_us(us);
    }

    #[test]
    fn scaled_clock_runs_faster_and_scales_waits() {
        let clock = ScaledClock::new(1_000_000, 600.0);
        assert!(clock.is_simulated());
        assert_eq!(clock.real_wait(Duration::from_secs(60), Duration::from_millis(20)), Duration::from_millis(100));
        assert_eq!(clock.real_wait(Duration::from_secs(1), Duration::from_millis(20)), Duration::from_millis(20));
        assert!(clock.now_us() >= 1_000_000);
    }

    #[test]
    fn anchored_clocks_on_one_anchor_read_the_same_time_so_a_restart_goes_on_where_it_stopped() {
        let wall = Arc::new(ManualClock::new(T0_US + 10_000_000));
        let spec = SimulatedClockSpec { speed: 1500.0, origin_us: T0_US };
        let first = AnchoredScaledClock::new(spec, wall.clone());
        // 10 s of real time since the anchor is 15 000 s of clock time.
        assert_eq!(first.now_us(), T0_US + 15_000_000_000);
        wall.advance_us(2_000_000);
        let before_restart = first.now_us();
        // A second process (the daemon restarted) given the same anchor reads the same instant.
        let restarted = AnchoredScaledClock::new(spec, wall.clone());
        assert_eq!(restarted.now_us(), before_restart);
        assert_eq!(restarted.now_us(), T0_US + 18_000_000_000);
        wall.advance_us(1_000);
        assert_eq!(restarted.now_us() - before_restart, 1_500_000, "1 ms of real time is 1.5 s of clock time");
    }

    #[test]
    fn an_anchored_clock_is_simulated_scales_waits_and_never_goes_back() {
        let wall = Arc::new(ManualClock::new(T0_US));
        let clock =
            AnchoredScaledClock::new(SimulatedClockSpec { speed: 600.0, origin_us: T0_US - 1_000_000 }, wall.clone());
        assert!(clock.is_simulated());
        assert_eq!(clock.speed(), 600.0);
        assert_eq!(clock.real_wait(Duration::from_secs(60), Duration::from_millis(20)), Duration::from_millis(100));
        assert_eq!(
            (clock.wall_offset_s(), clock.check_wall(), clock.resume_after(T0_US + HOUR_US)),
            (None, None, false)
        );
        let now = clock.now_us();
        assert_eq!(now, T0_US - 1_000_000 + 600_000_000);
        wall.advance_us(-HOUR_US);
        assert_eq!(clock.now_us(), now, "a wall clock stepped back holds the reading");
        wall.advance_us(HOUR_US + 10);
        assert_eq!(clock.now_us(), now + 6_000);
    }

    #[test]
    fn a_simulated_clock_spec_parses_speed_at_origin_and_refuses_anything_else_naming_the_part() {
        let spec: SimulatedClockSpec = "1500@1764626251000000".parse().unwrap();
        assert_eq!(spec, SimulatedClockSpec { speed: 1500.0, origin_us: 1_764_626_251_000_000 });
        assert_eq!("2.5@-7".parse::<SimulatedClockSpec>().unwrap(), SimulatedClockSpec { speed: 2.5, origin_us: -7 });
        for (text, names) in [
            ("1500", "no `@`"),
            ("0@1", "speed `0`"),
            ("-3@1", "speed `-3`"),
            ("inf@1", "speed `inf`"),
            ("100001@1", "speed `100001`"),
            ("fast@1", "speed `fast`"),
            ("10@1.5", "origin `1.5`"),
            ("10@", "origin ``"),
        ] {
            let error = text.parse::<SimulatedClockSpec>().unwrap_err();
            assert!(error.contains(names) && error.contains("0 < SPEED ≤ 100000"), "{text}: {error}");
        }
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

    #[test]
    fn steady_clock_reads_the_wall_at_the_anchor_then_only_elapsed_time() {
        let (clock, wall, monotonic) = steady();
        assert_eq!(clock.now_us(), T0_US);
        assert!(!clock.is_simulated());
        pass(&wall, &monotonic, 10_000_000);
        assert_eq!(clock.now_us(), T0_US + 10_000_000);
        let mut last = clock.now_us();
        for step in [HOUR_US, -HOUR_US, -HOUR_US, HOUR_US / 2, -3 * 86_400_000_000] {
            wall.advance_us(step);
            pass(&wall, &monotonic, 1_000_000);
            let now = clock.now_us();
            assert_eq!(now - last, 1_000_000, "after a wall step of {step} µs the stamp moved by the time that passed");
            last = now;
        }
        assert_eq!(clock.now_us(), T0_US + 15_000_000);
    }

    #[test]
    fn a_wall_step_is_reported_once_with_its_size_and_small_drift_is_not() {
        let (clock, wall, monotonic) = steady();
        assert_eq!(clock.check_wall(), None);
        pass(&wall, &monotonic, 5_000_000);
        wall.advance_us(HOUR_US);
        let step = clock.check_wall().expect("a step of 1 h");
        assert_eq!(
            step,
            ClockStep {
                at_us: T0_US + 5_000_000,
                wall_us: T0_US + 5_000_000 + HOUR_US,
                step_us: HOUR_US,
                offset_us: HOUR_US
            }
        );
        pass(&wall, &monotonic, 5_000_000);
        assert_eq!(clock.check_wall(), None, "the same step is reported once");
        assert_eq!(clock.wall_offset_s(), Some(3600.0));
        // Back by 1 h: a second step, and the offset is 0 again.
        wall.advance_us(-HOUR_US);
        let back = clock.check_wall().expect("a step of −1 h");
        assert_eq!((back.step_us, back.offset_us), (-HOUR_US, 0));
        // Drift adds up: 1.5 s is under the threshold, 2.5 s in all is a step of 2.5 s.
        wall.advance_us(1_500_000);
        assert_eq!(clock.check_wall(), None);
        wall.advance_us(1_000_000);
        assert_eq!(clock.check_wall().map(|s| s.step_us), Some(2_500_000));
        let event = back.event();
        assert_eq!(event.kind, EventKind::ClockStep);
        assert!(event.message.contains("-3600.000 s") && event.message.contains("restart"), "{}", event.message);
        assert_eq!(event.data.unwrap()["step_s"], -3600.0);
    }

    #[test]
    fn resume_after_moves_the_steady_clock_forward_only_and_is_not_a_step() {
        let (clock, wall, monotonic) = steady();
        let floor = T0_US + 2 * HOUR_US;
        assert!(clock.resume_after(floor));
        assert_eq!(clock.now_us(), floor + 1);
        assert!(!clock.resume_after(floor), "already after it");
        assert!(!clock.resume_after(T0_US), "never back");
        assert_eq!(clock.now_us(), floor + 1);
        assert_eq!(clock.check_wall(), None, "the gap was journalled as clock-behind, not as a step");
        assert_eq!(clock.wall_offset_us(), -2 * HOUR_US - 1);
        pass(&wall, &monotonic, 7_000_000);
        assert_eq!(clock.now_us(), floor + 1 + 7_000_000);
        // NTP later corrects the wall clock by the 2 h it had lost: that is reported.
        wall.advance_us(2 * HOUR_US);
        assert_eq!(clock.check_wall().map(|s| s.step_us), Some(2 * HOUR_US));
    }

    #[test]
    fn a_monotonic_source_that_goes_back_is_held_so_stamps_never_do() {
        let (clock, _wall, monotonic) = steady();
        monotonic.advance_us(1_000);
        let before = clock.now_us();
        monotonic.advance_us(-500);
        assert_eq!(clock.now_us(), before);
        monotonic.advance_us(600);
        assert_eq!(clock.now_us(), before + 100);
    }

    #[test]
    fn clocks_without_a_wall_report_no_offset_and_cannot_be_moved() {
        let manual = ManualClock::new(T0_US);
        assert_eq!((manual.wall_offset_s(), manual.check_wall(), manual.resume_after(T0_US + 1)), (None, None, false));
        assert_eq!(manual.now_us(), T0_US);
        let scaled = ScaledClock::new(T0_US, 300.0);
        assert!(!scaled.resume_after(T0_US + HOUR_US));
        assert!(scaled.now_us() < T0_US + HOUR_US);
    }

    #[test]
    fn the_system_steady_clock_reads_utc_seconds_since_the_epoch() {
        // UNIX time from std, independent of chrono: the two agree to well under a second.
        let clock = SteadyClock::system();
        let std_us = std::time::SystemTime::now().duration_since(std::time::UNIX_EPOCH).unwrap().as_micros() as i64;
        assert!((clock.now_us() - std_us).abs() < 1_000_000, "{} vs {std_us}", clock.now_us());
        assert!(clock.wall_offset_s().unwrap().abs() < 1.0);
    }

    /// A store with one frame whose readings and events are stamped up to `newest_us`.
    fn store_with_readings_until(path: &std::path::Path, newest_us: i64) {
        let conn = store::open(path).unwrap();
        let key = store::frame_key(&conn, "F1", "frame 1", newest_us - HOUR_US).unwrap();
        let thread = Writer::spawn(conn, store::WriterPolicy::default(), |_| {});
        let writer = thread.writer();
        for k in 0..60 {
            let at_us = newest_us - HOUR_US + k * 60_000_000 + 60_000_000;
            let value = 1.0 + 0.001 * k as f64;
            writer
                .reading(store::Reading {
                    frame_key: key,
                    channel: ChannelKind::Displacement,
                    at_us,
                    raw: value,
                    value,
                })
                .unwrap();
        }
        writer
            .event(Event {
                at_us: newest_us - 30_000_000,
                frame_key: None,
                kind: EventKind::DaemonStop,
                message: "power cut".into(),
                actor: None,
                data: None,
            })
            .unwrap();
        writer.sync().unwrap();
        thread.close();
    }

    fn events(path: &std::path::Path) -> Vec<(i64, EventKind, Option<serde_json::Value>)> {
        let conn = store::reader(path).unwrap();
        store::testing::journal(&conn).into_iter().map(|e| (e.at_us, e.kind, e.data)).collect()
    }

    #[test]
    fn the_start_up_guard_moves_a_clock_behind_the_store_to_just_after_it() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("lab.sqlite");
        let newest_us = T0_US + 3 * HOUR_US;
        store_with_readings_until(&path, newest_us);
        let conn = store::open(&path).unwrap();
        let (clock, _wall, _) = steady();
        let behind = resume_after_store(&conn, &clock).unwrap().expect("the clock is 3 h behind");
        assert_eq!(behind, ClockBehind { read_us: T0_US, newest_us, resumed_us: newest_us + 1 });
        assert_eq!(behind.gap_us(), 3 * HOUR_US);
        assert_eq!(clock.now_us(), newest_us + 1);
        assert_eq!(resume_after_store(&conn, &clock).unwrap(), None, "now after the store");
        // A clock already ahead of the store is left as it is.
        let ahead = SteadyClock::new(Arc::new(ManualClock::new(newest_us + 1_000)), Arc::new(ManualClock::new(0)));
        assert_eq!(resume_after_store(&conn, &ahead).unwrap(), None);
        assert_eq!(ahead.now_us(), newest_us + 1_000);
        // An empty store asks nothing of the clock.
        let empty = store::open(&dir.path().join("empty.sqlite")).unwrap();
        assert_eq!(resume_after_store(&empty, &clock).unwrap(), None);
        let event = behind.event();
        assert_eq!((event.kind, event.at_us), (EventKind::ClockBehind, newest_us + 1));
        assert!(event.message.contains("10800.000 s") && event.message.contains("NTP"), "{}", event.message);
    }

    #[tokio::test]
    async fn service_start_with_a_clock_behind_journals_clock_behind_and_stamps_after_the_store() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("lab.sqlite");
        let newest_us = T0_US + 3 * HOUR_US;
        store_with_readings_until(&path, newest_us);
        // No frames (the demo purpose allows that): only the start-up path runs.
        let text = format!("[store]\npath = \"{}\"\n[http]\nlisten = \"127.0.0.1:0\"\n", path.display());
        let config = crate::config::Config::parse(&text, crate::config::Purpose::Demo).unwrap();
        let (clock, wall, monotonic) = steady();
        let clock = Arc::new(clock);
        let running = crate::service::start(&config, clock.clone(), crate::service::Options::default()).await.unwrap();
        pass(&wall, &monotonic, 1_000_000);
        running.stop("test over");
        let journal: Vec<_> = events(&path)
            .into_iter()
            .filter(|e| {
                [EventKind::DaemonStart, EventKind::DaemonStop, EventKind::ClockBehind, EventKind::ClockStep]
                    .contains(&e.1)
            })
            .collect();
        let kinds: Vec<&str> = journal.iter().map(|e| e.1.name()).collect();
        assert_eq!(kinds, ["daemon-stop", "daemon-start", "clock-behind", "daemon-stop"], "no clock-step either");
        assert!(journal[1..].iter().all(|e| e.0 > newest_us), "everything after the restart stamped after the store");
        assert!(journal.windows(2).all(|w| w[0].0 <= w[1].0), "in order: {journal:?}");
        let data = journal[2].2.as_ref().unwrap();
        assert_eq!(data["gap_s"], 10_800.0);
        assert_eq!(journal[3].0, newest_us + 1 + 1_000_000, "the stop is one second of steady time later");
    }

    /// A steady clock that counts how often it was checked.
    struct Counted(SteadyClock, std::sync::atomic::AtomicUsize);

    impl Clock for Counted {
        fn now_us(&self) -> i64 {
            self.0.now_us()
        }

        fn check_wall(&self) -> Option<ClockStep> {
            self.1.fetch_add(1, Ordering::SeqCst);
            self.0.check_wall()
        }
    }

    /// Polls `done` until it holds, at most 10 s.
    async fn until(what: &str, mut done: impl FnMut() -> bool) {
        let deadline = Instant::now() + Duration::from_secs(10);
        while !done() {
            assert!(Instant::now() < deadline, "timed out waiting for {what}");
            tokio::time::sleep(Duration::from_millis(2)).await;
        }
    }

    #[tokio::test]
    async fn a_wall_step_is_journalled_once_as_clock_step() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("lab.sqlite");
        let thread = Writer::spawn(store::open(&path).unwrap(), store::WriterPolicy::default(), |_| {});
        let (steady, wall, _) = steady();
        let clock = Arc::new(Counted(steady, Default::default()));
        let task = tokio::spawn(journal_wall_steps(clock.clone(), thread.writer(), Duration::from_millis(2)));
        wall.advance_us(-HOUR_US);
        let steps = || {
            thread.writer().sync().unwrap();
            events(&path).into_iter().filter(|e| e.1 == EventKind::ClockStep).collect::<Vec<_>>()
        };
        until("a clock-step entry", || !steps().is_empty()).await;
        // Ten more checks of the unchanged wall clock add nothing.
        let checked = clock.1.load(Ordering::SeqCst);
        until("ten more checks", || clock.1.load(Ordering::SeqCst) >= checked + 10).await;
        task.abort();
        let steps = steps();
        assert_eq!(steps.len(), 1, "{steps:?}");
        let data = steps[0].2.as_ref().unwrap();
        assert_eq!(data["step_s"], -3600.0);
        assert_eq!(steps[0].0, T0_US, "stamped on the steady clock");
        thread.close();
    }
}
