//! One frame's live watch: the increment lifecycle (armed → primary → ready), the onset t0 found from the
//! data, the end-of-primary detector, the load check and gauge re-seats. Pure: samples and operator
//! actions in, notes out; no clock (times come with the samples), no I/O.

use std::collections::VecDeque;

use serde::Serialize;

use crate::analysis::{
    Flag, IncrementParams, IncrementReduction, ReductionRules, SpecimenState, TimeCurve, reduce_curve,
};

/// Time factor of U = 100 % by the Casagrande construction on the ideal curve, over T90: t100 ≈ 1.30·t90
/// (1.10 / 0.848) [ref: t100-t90-ratio, computed].
const T100_OVER_T90: f64 = 1.101_345_7 / 0.848_085_4;

/// How end of primary is decided.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
#[serde(rename_all = "kebab-case", tag = "rule")]
pub enum EopRule {
    /// ASTM D2435 method B style: from the constructions (see [`WatchParams`]).
    Constructions,
    /// Method A style: every increment lasts this long (e.g. 24 h).
    FixedDuration {
        /// Hold, s.
        hold_s: u64,
    },
}

/// Settings of the watch.
#[derive(Clone, Debug, PartialEq)]
pub struct WatchParams {
    /// How end of primary is decided.
    pub rule: EopRule,
    /// The time-curve reduction's choices, shared with the reduction of stored load steps.
    pub reduction: ReductionRules,
    /// The secondary line the ready rule waits for, sooner than the one a step's reduction fits its d100 to.
    pub ready_line: ReadyLine,
    /// Consecutive evaluations that must agree before `ready` is declared (hysteresis; it never flaps back).
    pub confirmations: u8,
    /// Load check tolerance as a fraction of the expected force (ASTM D4546 §7.1: ±0.5 %) [ref: load-check].
    pub load_tolerance: f64,
    /// Smallest load difference the cell can resolve, kN (the tolerance never goes below it).
    pub load_floor_kn: f64,
    /// Readings averaged for the load check.
    pub load_window: usize,
    /// How far back the onset is searched from the moment the operator armed or reported the load.
    pub onset_lookback_us: i64,
    /// A gauge jump at least this large (and 3× any step of the increment so far) is a re-seat, mm.
    pub reseat_min_mm: f64,
    /// No increment is declared ready before this long, s: the standard reading schedules run through
    /// 15 min at least [ref: reading-schedule, from memory], and a very small, fast increment is where the
    /// constructions are least sure.
    pub min_hold_s: u64,
    /// Without an end of primary from the constructions, the increment is declared ready (with a flag for
    /// review) after this long, s — the 24 h of D2435 method A [ref: test-methods].
    pub fallback_hold_s: u64,
}

impl Default for WatchParams {
    fn default() -> Self {
        WatchParams {
            rule: EopRule::Constructions,
            reduction: ReductionRules::default(),
            ready_line: ReadyLine::default(),
            confirmations: 2,
            load_tolerance: 0.005,
            load_floor_kn: 0.001,
            load_window: 8,
            onset_lookback_us: 30 * 60 * 1_000_000,
            reseat_min_mm: 0.5,
            fallback_hold_s: 86_400,
            min_hold_s: 900,
        }
    }
}

/// The secondary line that shows primary consolidation has ended, for the ready rule. A step's reduction
/// fits its d100 to a line from 1.5·t100 over 0.3 log cycle (≥ 3·t100), where the primary's tail no longer
/// steepens it [ref: casagrande-log-time, computed]; to say the load step is over, a straight tail flatter than
/// the rule's share of the tangent from 1.25·t100 over 0.2 log cycle suffices: by its end (≥ 1.98·t100,
/// T ≥ 2.18 on the ideal curve) U ≥ 99.7 % [ref: terzaghi-series, computed]. While the step runs, the board's
/// live reduction uses this line; the stored step's reduction refits with the stricter one.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct ReadyLine {
    /// The line starts no earlier than this × its t100.
    pub from_t100: f64,
    /// It spans at least this many log cycles.
    pub decades: f64,
}

impl Default for ReadyLine {
    fn default() -> Self {
        ReadyLine { from_t100: 1.25, decades: 0.2 }
    }
}

/// The frame's phase of the lifecycle (`offline` is decided from reading age elsewhere).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Phase {
    /// No test.
    Idle,
    /// A test under its seating load, no increment yet.
    Seating,
    /// The next stress is entered; waiting for the load to go on.
    Armed,
    /// An increment runs; end of primary not yet found.
    Primary,
    /// End of primary found: ready for the next load.
    Ready,
}

/// How the onset was found.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum OnsetSource {
    /// The load-cell step.
    LoadStep,
    /// The first sharp deformation (no load cell).
    Deformation,
}

/// What the watch tells the daemon (each becomes a journal event; some change stored state).
#[derive(Clone, Debug, PartialEq)]
pub enum Finding {
    /// The increment's load went on at `onset_us`.
    Onset {
        /// Increment number.
        seq: i64,
        /// t0, UTC µs.
        onset_us: i64,
        /// How it was found.
        source: OnsetSource,
    },
    /// End of primary established.
    Ready {
        /// Increment number.
        seq: i64,
        /// When, UTC µs.
        at_us: i64,
        /// Why, for the journal.
        how: String,
    },
    /// The load cell disagrees with the expected force beyond the tolerance.
    LoadOff {
        /// Mean measured load, kN.
        measured_kn: f64,
        /// Expected, kN.
        expected_kn: f64,
    },
    /// The load is back within the tolerance.
    LoadBack,
    /// A gauge jump that looks like a re-seat; nothing is reduced across it until confirmed.
    ReseatProposed {
        /// When, UTC µs.
        at_us: i64,
        /// The jump, mm.
        jump_mm: f64,
    },
    /// A load change while no increment was armed.
    UnarmedLoadChange {
        /// When, UTC µs.
        at_us: i64,
        /// From, kN.
        from_kn: f64,
        /// To, kN.
        to_kn: f64,
    },
}

#[derive(Clone, Copy, Debug)]
struct Sample {
    at_us: i64,
    displacement_mm: Option<f64>,
    load_kn: Option<f64>,
}

/// A proposed re-seat waiting for the operator.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct Reseat {
    /// When the jump came, UTC µs.
    pub(crate) at_us: i64,
    /// The jump, mm (negative: the reading went back).
    pub(crate) jump_mm: f64,
}

/// The running increment.
#[derive(Clone, Debug)]
struct RunningStep {
    seq: i64,
    stress_kpa: f64,
    onset_us: i64,
    curve: TimeCurve,
    params: IncrementParams,
    last_d: Option<(i64, f64)>,
    samples: usize,
    max_step_mm: f64,
    offset_mm: f64,
    pending: Option<Reseat>,
    held: Vec<Sample>,
    votes: u8,
    result: Option<IncrementReduction>,
    loads: VecDeque<f64>,
    load_off: bool,
    swelling: bool,
    ready_us: Option<i64>,
}

/// What the screens show of the watch.
#[derive(Clone, Debug, Default, PartialEq, Serialize)]
pub struct WatchStatus {
    /// Increment number.
    pub seq: Option<i64>,
    /// Its target stress, kPa.
    pub(crate) stress_kpa: Option<f64>,
    /// t0, UTC µs.
    pub onset_us: Option<i64>,
    /// t50 (log-time construction), min.
    pub t50_min: Option<f64>,
    /// t90 (√t construction), min.
    pub t90_min: Option<f64>,
    /// t100 (log-time construction), min.
    pub t100_min: Option<f64>,
    /// d100, mm (gauge reading).
    pub d100_mm: Option<f64>,
    /// cv by Taylor, mm²/min.
    pub(crate) cv_taylor_mm2_per_min: Option<f64>,
    /// cv by Casagrande, mm²/min.
    pub(crate) cv_casagrande_mm2_per_min: Option<f64>,
    /// When the frame is expected to be ready, UTC µs.
    pub ready_eta_us: Option<i64>,
    /// When it became ready, UTC µs.
    pub ready_us: Option<i64>,
    /// A re-seat waiting for confirmation.
    pub pending_reseat: Option<Reseat>,
    /// The load check is failing.
    pub load_off: bool,
    /// Quality flags of the latest construction.
    pub(crate) flags: Vec<String>,
}

/// Why an operator action was refused.
#[derive(Clone, Debug, PartialEq, thiserror::Error)]
pub enum WatchError {
    /// Not in a state that allows it.
    #[error("frame is {0}; {1}")]
    State(&'static str, &'static str),
    /// A value outside what is allowed.
    #[error("{field}: {message}")]
    Value {
        /// The field.
        field: &'static str,
        /// What is allowed.
        message: String,
    },
}

/// The specimen facts the watch needs.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct SpecimenSize {
    /// Ring area, mm².
    pub area_mm2: f64,
    /// Initial height, mm.
    pub height_mm: f64,
}

/// One frame's watch.
#[derive(Clone, Debug)]
pub struct FrameWatch {
    phase: Phase,
    params: WatchParams,
    specimen: Option<SpecimenSize>,
    /// Gauge reading at the test's zero (first reading under seating), mm.
    zero_mm: Option<f64>,
    armed: Option<(f64, i64)>,
    seq: i64,
    stress_kpa: f64,
    live: Option<RunningStep>,
    history: VecDeque<Sample>,
    /// The settled load level, kN.
    level_kn: Option<f64>,
    /// When the last load reading came, µs.
    last_load_us: Option<i64>,
    /// Recent changes of the load level, oldest first.
    changes: VecDeque<LevelChange>,
    /// Onset of the latest increment, µs (the search for the next one starts after it).
    last_onset_us: i64,
}

/// A change of the settled load level between two readings.
#[derive(Clone, Copy, Debug, PartialEq)]
struct LevelChange {
    /// The last reading at the old level, µs: t0 when this change is an increment's load.
    before_us: i64,
    /// The first reading at the new level, µs.
    at_us: i64,
    /// Old level, kN.
    from_kn: f64,
    /// New level, kN.
    to_kn: f64,
}

/// Where the ready rule's secondary line is taken to start, over the best t100 estimate known before the line
/// is seen. The rule's line may start from 1.25·t100 ([`ReadyLine`]); measured on the demo's frames, whose
/// primary is exact Terzaghi consolidation with creep, ready then comes at a median 1.82 of the true t100,
/// which a start of 1.15 times the estimate predicts (1.15 × 10^0.2 = 1.82) [computed:
/// `tests/bench/accuracy.sh 10` — with 1.6 every ETA was about 40 % of the elapsed time late].
const SECONDARY_START_OVER_T100: f64 = 1.15;

/// When the ready rule of [`FrameWatch::evaluate`] will first hold, minutes from the onset — the board's
/// ETA: the secondary line must begin after Taylor's t100 and span the rule's log cycles, and t must be
/// past both constructions' t100 (with their 5 % margins) and the shortest hold. Before a secondary line
/// is seen, its start is taken at [`SECONDARY_START_OVER_T100`] times the best t100 known so far.
fn ready_eta_min(r: &IncrementReduction, params: &WatchParams) -> Option<f64> {
    let taylor_t100 = r.taylor.t90_min.map(|t90| T100_OVER_T90 * t90);
    let casagrande_t100 = r.casagrande.t100_min;
    let t100 = casagrande_t100.or(taylor_t100)?;
    let start = match r.casagrande.secondary.as_ref() {
        Some(s) if taylor_t100.is_none_or(|t| s.t_start_min >= t) => s.t_start_min,
        _ => SECONDARY_START_OVER_T100 * t100.max(taylor_t100.unwrap_or(0.0)),
    };
    let secondary_done = start * 10f64.powf(params.ready_line.decades);
    let past = 1.05 * casagrande_t100.unwrap_or(0.0).max(taylor_t100.unwrap_or(0.0));
    Some(secondary_done.max(past).max(params.min_hold_s as f64 / 60.0))
}

impl FrameWatch {
    /// A frame with no test.
    pub fn new(params: WatchParams) -> Self {
        FrameWatch {
            phase: Phase::Idle,
            params,
            specimen: None,
            zero_mm: None,
            armed: None,
            seq: 0,
            stress_kpa: 0.0,
            live: None,
            history: VecDeque::new(),
            level_kn: None,
            last_load_us: None,
            changes: VecDeque::new(),
            last_onset_us: i64::MIN,
        }
    }

    /// The phase.
    pub fn phase(&self) -> Phase {
        self.phase
    }

    /// A test starts under its seating load.
    pub fn start_test(&mut self, specimen: SpecimenSize, seating_kpa: f64) {
        self.phase = Phase::Seating;
        self.specimen = Some(specimen);
        self.zero_mm = self.history.back().and_then(|s| s.displacement_mm);
        self.seq = 0;
        self.stress_kpa = seating_kpa;
        self.live = None;
        self.armed = None;
    }

    /// The test finished.
    pub fn finish_test(&mut self) {
        let mut fresh = FrameWatch::new(self.params.clone());
        fresh.history = std::mem::take(&mut self.history);
        fresh.level_kn = self.level_kn;
        fresh.last_load_us = self.last_load_us;
        *self = fresh;
    }

    /// Restores a watch after a restart: the test, its increment (armed, or running from `onset_us`) and
    /// the readings since the onset (`readings`: at_us, displacement, load).
    #[allow(clippy::too_many_arguments)]
    pub fn resume(
        &mut self,
        specimen: SpecimenSize,
        zero_mm: Option<f64>,
        seq: i64,
        stress_kpa: f64,
        from_kpa: f64,
        armed_us: Option<i64>,
        onset_us: Option<i64>,
        ready_us: Option<i64>,
        readings: &[(i64, Option<f64>, Option<f64>)],
    ) -> Vec<Finding> {
        self.specimen = Some(specimen);
        self.zero_mm = zero_mm;
        self.phase = Phase::Seating;
        self.seq = seq - 1;
        self.stress_kpa = from_kpa;
        let mut notes = Vec::new();
        match (armed_us, onset_us) {
            (_, Some(onset)) => {
                self.begin(seq, stress_kpa, onset, readings.iter().find(|r| r.0 <= onset).and_then(|r| r.1));
                for &(at_us, d, l) in readings.iter().filter(|r| r.0 > onset) {
                    notes.extend(self.sample(at_us, d, l));
                }
                if let Some(at) = ready_us {
                    self.phase = Phase::Ready;
                    if let Some(live) = self.live.as_mut() {
                        live.ready_us = Some(at);
                    }
                }
            }
            (Some(armed), None) => {
                // The load may have gone on while the daemon was down, or just before it stopped: replay
                // the readings since the look-back so the step is found as it would have been live.
                self.phase = Phase::Armed;
                self.armed = Some((stress_kpa, armed));
                for &(at_us, d, l) in readings {
                    notes.extend(self.sample(at_us, d, l));
                }
            }
            (None, None) => {}
        }
        // Only what a replay can find that the store does not know yet: the onset, and end of primary.
        // Everything else it met was journalled the first time.
        notes.retain(|n| match n {
            Finding::Onset { .. } => true,
            Finding::Ready { .. } => ready_us.is_none(),
            _ => false,
        });
        notes
    }

    /// The operator enters the next stress. Allowed under seating, in primary (cutting an increment short)
    /// or ready.
    pub fn arm(&mut self, stress_kpa: f64, now_us: i64) -> Result<Vec<Finding>, WatchError> {
        if let Err(refused) = crate::quantity::check_stress(stress_kpa, None) {
            return Err(WatchError::Value { field: "stress_kpa", message: refused.to_string() });
        }
        match self.phase {
            Phase::Idle => return Err(WatchError::State("idle", "start a test first")),
            Phase::Armed => return Err(WatchError::State("armed", "a load step is already armed")),
            _ => {}
        }
        if (stress_kpa - self.stress_kpa).abs() < 1e-9 {
            return Err(WatchError::Value {
                field: "stress_kpa",
                message: format!("{stress_kpa} kPa is the stress already on the specimen"),
            });
        }
        self.phase = Phase::Armed;
        self.armed = Some((stress_kpa, now_us));
        // The load may already be on (the operator reports late): look back for the step.
        Ok(self.find_onset().into_iter().collect())
    }

    /// The operator withdraws the armed stress before its load went on (a slip): the watch goes back to
    /// what it was doing — the running increment (primary or ready), or seating before the first.
    pub fn withdraw(&mut self) -> Result<(), WatchError> {
        self.may_withdraw()?;
        self.armed = None;
        self.phase = match &self.live {
            Some(live) if live.ready_us.is_some() => Phase::Ready,
            Some(_) => Phase::Primary,
            None => Phase::Seating,
        };
        Ok(())
    }

    /// Whether [`FrameWatch::withdraw`] would be allowed now, and why not.
    pub fn may_withdraw(&self) -> Result<(), WatchError> {
        if self.phase != Phase::Armed {
            let now = match self.phase {
                Phase::Idle => "idle",
                Phase::Seating => "seating",
                Phase::Armed => "armed",
                Phase::Primary => "in primary",
                Phase::Ready => "ready",
            };
            return Err(WatchError::State(now, "only an armed step whose load has not gone on can be withdrawn"));
        }
        Ok(())
    }

    /// The expected force on the specimen for a stress, kN (kPa × mm² × 1e-6).
    pub(crate) fn expected_kn(&self, stress_kpa: f64) -> Option<f64> {
        self.specimen.map(|s| stress_kpa * s.area_mm2 * 1e-6)
    }

    /// One poll's readings.
    pub fn sample(&mut self, at_us: i64, displacement_mm: Option<f64>, load_kn: Option<f64>) -> Vec<Finding> {
        let mut notes = Vec::new();
        // Readings never go back in time here: a clock stepped back must not reorder a curve.
        if self.history.back().is_some_and(|s| at_us <= s.at_us) {
            return notes;
        }
        let sample = Sample { at_us, displacement_mm, load_kn };
        self.history.push_back(sample);
        while self.history.len() > 4096 {
            self.history.pop_front();
        }
        if self.zero_mm.is_none() && self.phase == Phase::Seating {
            self.zero_mm = displacement_mm;
        }
        if let Some(load) = load_kn {
            notes.extend(self.track_level(at_us, load));
        }
        match self.phase {
            Phase::Armed => notes.extend(self.find_onset()),
            Phase::Primary | Phase::Ready => notes.extend(self.feed(sample)),
            _ => {}
        }
        notes
    }

    /// Follows the settled load level; a reading off it by more than 3 % (and 3 N) starts a new level.
    fn track_level(&mut self, at_us: i64, load: f64) -> Option<Finding> {
        let before_us = self.last_load_us.replace(at_us);
        let level = self.level_kn.get_or_insert(load);
        let threshold = (0.03 * level.abs()).max(0.003);
        if (load - *level).abs() <= threshold {
            *level += 0.2 * (load - *level);
            return None;
        }
        let change = LevelChange { before_us: before_us.unwrap_or(at_us), at_us, from_kn: *level, to_kn: load };
        *level = load;
        self.changes.push_back(change);
        while self.changes.len() > 32 {
            self.changes.pop_front();
        }
        let settling = self.live.as_ref().is_some_and(|l| at_us - l.onset_us <= 60_000_000);
        (self.phase != Phase::Armed && self.phase != Phase::Idle && !settling).then_some(Finding::UnarmedLoadChange {
            at_us,
            from_kn: change.from_kn,
            to_kn: load,
        })
    }

    /// Looks for the step of the armed load in the recent history (so a late report still finds it);
    /// starts the increment when found. With a load cell: the first level change since the previous onset
    /// (and within the look-back) once the load stands near the expected force; t0 is the last reading at
    /// the old level, so the true onset lies within one poll period after it. Without one: the first jump
    /// of the gauge well above its resolution.
    fn find_onset(&mut self) -> Option<Finding> {
        let (stress_kpa, armed_us) = self.armed?;
        let since = (armed_us - self.params.onset_lookback_us).max(self.last_onset_us.saturating_add(60_000_000));
        let has_load = self.history.iter().rev().take(8).any(|s| s.load_kn.is_some());
        let (onset_us, source) = if has_load {
            let level = self.level_kn?;
            let expected = self.expected_kn(stress_kpa).unwrap_or(level);
            // The step moves the load towards the expected force by a good part of the way (weights may
            // go on in stages): a small change in another direction or size (the tail of the previous
            // load's ramp caught mid-way by a poll gap, found on the soak) is not it. Without such a
            // change (a cell whose zero is far off), the first change is taken, as before.
            let before = self.expected_kn(self.stress_kpa).unwrap_or(level);
            let toward = |c: &&LevelChange| {
                let (step, moved) = (expected - before, c.to_kn - c.from_kn);
                moved * step > 0.0 && moved.abs() >= 0.1 * step.abs()
            };
            let mut candidates = self.changes.iter().filter(|c| c.before_us >= since);
            let change = *candidates.clone().find(toward).or_else(|| candidates.next())?;
            // Weights may go on in stages: wait until the load stands near the expected force.
            let step = (expected - change.from_kn).abs().max(0.003);
            if (level - expected).abs() > 0.3 * step {
                return None;
            }
            // The load went on between the last reading at the old level and the first at the new one:
            // take the middle, so t0 is within half a poll period of the truth either way.
            (change.before_us + (change.at_us - change.before_us) / 2, OnsetSource::LoadStep)
        } else {
            let jump = (20.0 * self.params.reduction.gauge_resolution_mm).max(0.01);
            let ds: Vec<(i64, f64)> = self
                .history
                .iter()
                .filter(|s| s.at_us >= since)
                .filter_map(|s| s.displacement_mm.map(|d| (s.at_us, d)))
                .collect();
            let hit = ds.windows(2).position(|w| (w[1].1 - w[0].1).abs() > jump)?;
            (ds[hit].0, OnsetSource::Deformation)
        };
        let d_onset = self
            .history
            .iter()
            .rev()
            .find(|s| s.at_us <= onset_us && s.displacement_mm.is_some())
            .and_then(|s| s.displacement_mm);
        let seq = self.seq + 1;
        self.begin(seq, stress_kpa, onset_us, d_onset);
        let after: Vec<Sample> = self.history.iter().filter(|s| s.at_us > onset_us).copied().collect();
        for s in after {
            let _ = self.feed(s);
        }
        Some(Finding::Onset { seq, onset_us, source })
    }

    fn begin(&mut self, seq: i64, stress_kpa: f64, onset_us: i64, d_onset: Option<f64>) {
        let height_mm = match (self.specimen, self.zero_mm, d_onset) {
            (Some(s), Some(zero), Some(d)) => s.height_mm - (d - zero),
            (Some(s), _, _) => s.height_mm,
            _ => 20.0,
        };
        let from_kpa = self.stress_kpa;
        let specimen = SpecimenState { height_mm, at_reading_mm: d_onset.unwrap_or(0.0) };
        let mut params = self.params.reduction.increment_params(specimen, from_kpa, stress_kpa, None);
        params.casagrande.secondary_from_t100 = self.params.ready_line.from_t100;
        params.casagrande.secondary_min_decades = self.params.ready_line.decades;
        let mut curve = TimeCurve::new(params.bins_per_decade).expect("default bins are valid");
        if let Some(d) = d_onset {
            let _ = curve.push(0.0, d);
        }
        self.live = Some(RunningStep {
            seq,
            stress_kpa,
            onset_us,
            curve,
            params,
            last_d: d_onset.map(|d| (onset_us, d)),
            samples: 0,
            max_step_mm: 0.0,
            offset_mm: 0.0,
            pending: None,
            held: Vec::new(),
            votes: 0,
            result: None,
            loads: VecDeque::new(),
            load_off: false,
            swelling: stress_kpa < from_kpa,
            ready_us: None,
        });
        self.seq = seq;
        self.stress_kpa = stress_kpa;
        self.armed = None;
        self.last_onset_us = onset_us;
        self.phase = Phase::Primary;
    }

    fn feed(&mut self, s: Sample) -> Vec<Finding> {
        let mut notes = Vec::new();
        let expected = self.live.as_ref().and_then(|l| self.expected_kn(l.stress_kpa));
        let params = self.params.clone();
        let Some(live) = self.live.as_mut() else { return notes };
        if s.at_us <= live.onset_us {
            return notes;
        }
        let t_min = (s.at_us - live.onset_us) as f64 / 60e6;
        // Load check (after the first minute, when the hanger has settled).
        if let (Some(load), Some(expected)) = (s.load_kn, expected) {
            live.loads.push_back(load);
            while live.loads.len() > params.load_window {
                live.loads.pop_front();
            }
            if t_min > 1.0 && live.loads.len() == params.load_window {
                let mean = live.loads.iter().sum::<f64>() / live.loads.len() as f64;
                let tolerance = (params.load_tolerance * expected.abs()).max(params.load_floor_kn);
                let off = (mean - expected).abs();
                if !live.load_off && off > tolerance {
                    live.load_off = true;
                    notes.push(Finding::LoadOff { measured_kn: mean, expected_kn: expected });
                } else if live.load_off && off < 0.8 * tolerance {
                    live.load_off = false;
                    notes.push(Finding::LoadBack);
                }
            }
        }
        let Some(d) = s.displacement_mm else { return notes };
        live.samples += 1;
        if let Some((_, prev)) = live.last_d {
            let step = d - prev;
            let load_steady = live.loads.len() < 2
                || (live.loads[live.loads.len() - 1] - live.loads[live.loads.len() - 2]).abs() < 0.01;
            if live.pending.is_none()
                && live.samples > 3
                && load_steady
                && step.abs() > params.reseat_min_mm.max(3.0 * live.max_step_mm)
            {
                live.pending = Some(Reseat { at_us: s.at_us, jump_mm: step });
                notes.push(Finding::ReseatProposed { at_us: s.at_us, jump_mm: step });
            } else if live.samples > 3 && live.pending.is_none() {
                live.max_step_mm = live.max_step_mm.max(step.abs());
            }
        }
        live.last_d = Some((s.at_us, d));
        if live.pending.is_some() {
            // Nothing is reduced across an unconfirmed jump.
            live.held.push(s);
            return notes;
        }
        let _ = live.curve.push(t_min, d + live.offset_mm);
        if self.phase == Phase::Primary {
            notes.extend(self.evaluate(s.at_us, d));
        }
        notes
    }

    fn evaluate(&mut self, at_us: i64, d_raw: f64) -> Option<Finding> {
        let params = self.params.clone();
        let live = self.live.as_mut()?;
        let t_min = (at_us - live.onset_us) as f64 / 60e6;
        let d = d_raw + live.offset_mm;
        if let EopRule::FixedDuration { hold_s } = params.rule {
            if at_us - live.onset_us >= hold_s as i64 * 1_000_000 {
                return self.declare_ready(at_us, format!("fixed duration of {:.1} h reached", hold_s as f64 / 3600.0));
            }
            live.result = reduce_curve(&live.curve, &live.params).ok();
            return None;
        }
        if live.curve.nodes().len() < 6 {
            return None;
        }
        let result = reduce_curve(&live.curve, &live.params).ok()?;
        let small = result.flags.iter().any(|f| matches!(f, Flag::SmallPrimary { .. }));
        let levelled = live.swelling || small;
        // The last 0.3 log cycle of time moved the gauge by under 10 % of its movement since the first
        // reading after t0, and at least 10 min have passed [our rule; on the ideal curve it holds from
        // about 1.4·t100, C].
        let settled = {
            let nodes = live.curve.nodes();
            let total = nodes.first().map_or(0.0, |n| (d - n.d_mm).abs());
            let earlier = t_min / 10f64.powf(0.3);
            let then = nodes.iter().rev().find(|n| n.t_min <= earlier).map(|n| n.d_mm);
            t_min > 10.0 && total > 0.0 && then.is_some_and(|v| (d - v).abs() < 0.1 * total)
        };
        let ok = if levelled {
            // Rebound, or a primary too small for the constructions: ready once movement has levelled off.
            settled
        } else {
            let c = &result.casagrande;
            // The secondary line must lie after the end of primary by Taylor's estimate (1.30·t90), so a
            // slow primary tail of a small increment is not taken for it.
            let taylor_t100 = result.taylor.t90_min.map(|t90| T100_OVER_T90 * t90);
            let secondary = c.secondary.as_ref().is_some_and(|s| {
                s.points >= 3
                    && (s.t_end_min / s.t_start_min).log10() >= params.ready_line.decades - 1e-9
                    && taylor_t100.is_some_and(|t100| s.t_start_min >= t100)
            });
            // With the same 5 % margin on the log-time t100.
            let past_casagrande = c.t100_min.is_some_and(|t100| t_min >= 1.05 * t100);
            // Taylor: the reading has reached its d100, and t is past its t100 estimate (1.30·t90 on the
            // ideal curve [ref: t100-t90-ratio, computed]) with a 5 % margin for the construction's bias and noise.
            let past_taylor = result.taylor.d100_mm.is_some_and(|d100| d >= d100)
                && result.taylor.t90_min.is_some_and(|t90| t_min >= 1.05 * T100_OVER_T90 * t90);
            // A √t straight part fitted on too few early readings (sparse polls, a gap after the load
            // step) can put t90 far too early, and with it both checks above: then movement must also
            // have levelled off (found on the soak, where ready came at 0.44–0.9·t100 without this).
            let taylor_weak = result
                .flags
                .iter()
                .any(|f| matches!(f, Flag::FitWindowTooShort { construction: "√t straight part", .. }));
            secondary && past_casagrande && past_taylor && (!taylor_weak || settled)
        };
        live.result = Some(result);
        if !ok && at_us - live.onset_us >= params.fallback_hold_s as i64 * 1_000_000 {
            let hours = params.fallback_hold_s as f64 / 3600.0;
            return self.declare_ready(
                at_us,
                format!("{hours:.0} h elapsed without an end of primary from the constructions: review the time curve"),
            );
        }
        let ok = ok && at_us - live.onset_us >= params.min_hold_s as i64 * 1_000_000;
        live.votes = if ok { live.votes + 1 } else { 0 };
        if live.votes >= params.confirmations {
            let how = if live.swelling {
                "rebound has levelled off (unloading)".to_string()
            } else if levelled {
                "movement has levelled off (primary too small for the constructions)".to_string()
            } else {
                "secondary line over ≥ 0.3 log cycle; t ≥ t100 by both constructions"
                    .replace("0.3", &format!("{}", params.ready_line.decades))
            };
            return self.declare_ready(at_us, how);
        }
        None
    }

    fn declare_ready(&mut self, at_us: i64, how: String) -> Option<Finding> {
        let live = self.live.as_mut()?;
        live.ready_us = Some(at_us);
        self.phase = Phase::Ready;
        Some(Finding::Ready { seq: live.seq, at_us, how })
    }

    /// The operator answers a proposed re-seat: `accept` stitches the readings across the jump (offset);
    /// otherwise the jump is taken as real and the held readings are used as they are.
    pub fn resolve_reseat(&mut self, accept: bool) -> Result<Vec<Finding>, WatchError> {
        let live = self.live.as_mut().ok_or(WatchError::State("without a load step", "no re-seat to confirm"))?;
        let pending =
            live.pending.take().ok_or(WatchError::State("without a pending re-seat", "nothing to confirm"))?;
        if accept {
            live.offset_mm -= pending.jump_mm;
        }
        let held = std::mem::take(&mut live.held);
        let mut notes = Vec::new();
        for s in held {
            let Some(live) = self.live.as_mut() else { break };
            let t_min = (s.at_us - live.onset_us) as f64 / 60e6;
            if let Some(d) = s.displacement_mm {
                let _ = live.curve.push(t_min, d + live.offset_mm);
                if self.phase == Phase::Primary {
                    notes.extend(self.evaluate(s.at_us, d));
                }
            }
        }
        Ok(notes)
    }

    /// What the screens show; `now_us` for nothing but the ETA's base.
    pub fn status(&self) -> WatchStatus {
        let Some(live) = &self.live else {
            return WatchStatus { stress_kpa: self.armed.map(|a| a.0), ..Default::default() };
        };
        let r = live.result.as_ref();
        let t90 = r.and_then(|r| r.taylor.t90_min);
        let ready_eta_us = match (self.params.rule, live.ready_us) {
            (_, Some(at)) => Some(at),
            (EopRule::FixedDuration { hold_s }, None) => Some(live.onset_us + hold_s as i64 * 1_000_000),
            (EopRule::Constructions, None) => {
                r.and_then(|r| ready_eta_min(r, &self.params)).map(|t| live.onset_us + (t * 60e6) as i64)
            }
        };
        WatchStatus {
            seq: Some(live.seq),
            stress_kpa: Some(live.stress_kpa),
            onset_us: Some(live.onset_us),
            t50_min: r.and_then(|r| r.casagrande.t50_min),
            t90_min: t90,
            t100_min: r.and_then(|r| r.casagrande.t100_min),
            d100_mm: r.and_then(|r| r.end_of_primary.as_ref().map(|e| e.d100_mm)),
            cv_taylor_mm2_per_min: r.and_then(|r| r.cv_taylor.as_ref().map(|c| c.cv_mm2_per_min)),
            cv_casagrande_mm2_per_min: r.and_then(|r| r.cv_casagrande.as_ref().map(|c| c.cv_mm2_per_min)),
            ready_eta_us,
            ready_us: live.ready_us,
            pending_reseat: live.pending,
            load_off: live.load_off,
            flags: r.map(|r| r.flags.iter().map(|f| f.to_string()).collect()).unwrap_or_default(),
        }
    }

    /// The latest full reduction of the running increment (for the dashboard's constructions).
    pub fn reduction(&self) -> Option<&IncrementReduction> {
        self.live.as_ref()?.result.as_ref()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_clock_stepped_back_never_reorders_the_curve() {
        let mut watch = FrameWatch::new(WatchParams::default());
        watch.sample(10_000_000, Some(1.0), Some(0.02));
        let notes = watch.sample(5_000_000, Some(9.0), Some(9.0));
        assert!(notes.is_empty());
        assert_eq!(watch.history.len(), 1, "the earlier-stamped reading is not taken");
    }

    #[test]
    fn a_withdrawn_arm_goes_back_to_seating_and_only_an_armed_step_can_be_withdrawn() {
        let mut watch = FrameWatch::new(WatchParams::default());
        assert!(matches!(watch.withdraw(), Err(WatchError::State("idle", _))));
        watch.start_test(SpecimenSize { area_mm2: 3166.9, height_mm: 20.0 }, 5.0);
        assert!(matches!(watch.withdraw(), Err(WatchError::State("seating", _))));
        watch.arm(50.0, 1_000_000).unwrap();
        assert_eq!(watch.phase(), Phase::Armed);
        watch.withdraw().unwrap();
        assert_eq!((watch.phase(), watch.armed), (Phase::Seating, None));
        assert!(watch.arm(50.0, 2_000_000).is_ok(), "the same stress can be armed again");
    }

    #[test]
    fn arming_below_the_stress_resolution_is_refused_in_the_shared_words() {
        let mut watch = FrameWatch::new(WatchParams::default());
        watch.start_test(SpecimenSize { area_mm2: 3166.9, height_mm: 20.0 }, 5.0);
        let Err(WatchError::Value { field, message }) = watch.arm(1e-300, 0) else { panic!("1e-300 kPa armed") };
        assert_eq!(field, "stress_kpa");
        assert!(message.contains("allowed from 0.1 kPa"), "{message}");
        assert_eq!(watch.phase(), Phase::Seating);
    }
}
