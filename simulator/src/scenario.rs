//! The demo and test scenario: an invented ground investigation with a catalogue of specimens, and the
//! automatic loading schedule the simulator's stand-in technician follows on each frame.
//! It must not do I/O or read a clock; every soil value here is invented for demos and tests (chosen to be
//! plausible), never a design value.

use crate::physics::{FrameModel, IncrementTruth, ModelError, Soil, Specimen};

/// The invented site every demo specimen comes from.
pub const SITE_NAME: &str = "Tarnwick Reach relief road, ground investigation GI-417 (fictitious)";

/// Seating stress, kPa: half the first increment, so the first step is a doubling too (≈ 5 kPa seating, from
/// memory, and ≈ 12 kPa first load: daemon/core/REFERENCES.md [ref: load-sequence]).
pub const SEATING_KPA: f64 = 6.25;

/// Default stress sequence, kPa: doubling (LIR = 1) to 800, an unload–reload loop of two quartering
/// decrements (LIR = −0.75) and two reloads past σ′p of every catalogue soil, then on to 1600
/// [ref: load-sequence].
pub const DEFAULT_STEPS_KPA: [f64; 12] =
    [12.5, 25.0, 50.0, 100.0, 200.0, 400.0, 800.0, 200.0, 50.0, 200.0, 800.0, 1600.0];

/// Time a frame sits under the seating load before its first increment, s.
pub const SEATING_HOLD_S: f64 = 300.0;

/// Extra seating time per frame index, s, so frames are at different stages; cycles every
/// [`STAGGER_CYCLE`] frames.
pub const FRAME_STAGGER_S: f64 = 900.0;

/// Number of frames after which the start stagger repeats.
pub const STAGGER_CYCLE: usize = 8;

/// Errors from building a schedule with bad values.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ScheduleError {
    /// No steps.
    #[error("a schedule needs at least one stress step")]
    NoSteps,
    /// A step stress that is not finite and above zero.
    #[error("step {index} stress {stress_kpa} kPa is not allowed: expected a finite stress above 0 kPa")]
    InvalidStep {
        /// 0-based step.
        index: usize,
        /// Offending stress.
        stress_kpa: f64,
    },
    /// A hold-rule value out of range.
    #[error("{field} = {value} is not allowed: expected {allowed}")]
    InvalidHold {
        /// Field name.
        field: &'static str,
        /// Offending value.
        value: f64,
        /// What is accepted.
        allowed: &'static str,
    },
    /// The start time is not finite.
    #[error("start time {start_at_s} s is not allowed: expected a finite time")]
    InvalidStart {
        /// Offending time.
        start_at_s: f64,
    },
}

/// The invented specimens of [`SITE_NAME`]. Cc, Cr, σ′p, e0, Gs and cv are plausible for the soil types
/// (from memory); Cα sits in the ranges of Venkatramaiah Table 7.1 with Cα·(1+e0)/Cc ≈ 0.035–0.055 (Cα/Cc
/// roughly constant, Mesri & Castro 1987) [ref: secondary-ranges].
pub fn catalogue() -> Vec<Specimen> {
    vec![
        specimen(
            "TR-BH01-U3",
            4.5,
            "Soft grey estuarine CLAY, slightly organic, with shell fragments",
            soil("soft estuarine clay", 0.50, 0.065, 45.0, 1.45, 2.68, 1.5, 0.30, 2.5, 0.008, 0.04),
            20.0,
            75.0,
        ),
        specimen(
            "TR-BH02-U6",
            9.0,
            "Firm brown-grey silty CLAY",
            soil("silty clay", 0.24, 0.035, 140.0, 0.82, 2.70, 4.0, 0.20, 2.0, 0.005, 0.05),
            19.0,
            50.0,
        ),
        specimen(
            "TR-BH03-U2",
            2.5,
            "Soft dark brown organic silty CLAY with plant remains",
            soil("organic clay", 0.95, 0.12, 35.0, 2.40, 2.45, 0.6, 0.35, 3.0, 0.015, 0.06),
            20.0,
            63.5,
        ),
        specimen(
            "TR-BH04-U9",
            14.0,
            "Stiff fissured brown overconsolidated CLAY",
            soil("stiff overconsolidated clay", 0.28, 0.04, 650.0, 0.62, 2.74, 6.0, 0.15, 2.0, 0.007, 0.03),
            20.0,
            50.0,
        ),
        specimen(
            "TR-BH02-U4",
            6.0,
            "Laminated grey clayey SILT",
            soil("clayey silt", 0.30, 0.045, 90.0, 0.95, 2.69, 10.0, 0.20, 2.0, 0.0055, 0.08),
            25.0,
            76.0,
        ),
        specimen(
            "TR-BH05-U5",
            7.5,
            "Soft sensitive grey marine CLAY",
            soil("sensitive marine clay", 0.75, 0.06, 110.0, 1.70, 2.72, 0.9, 0.45, 3.0, 0.011, 0.02),
            22.0,
            63.5,
        ),
        specimen(
            "TR-BH01-U7",
            11.0,
            "Soft to firm alluvial CLAY with sand partings",
            soil("alluvial clay", 0.42, 0.05, 70.0, 1.10, 2.67, 2.5, 0.25, 2.5, 0.008, 0.05),
            20.0,
            70.0,
        ),
    ]
}

#[allow(clippy::too_many_arguments)]
fn soil(
    name: &str,
    cc: f64,
    cr: f64,
    sigma_p_kpa: f64,
    e0: f64,
    gs: f64,
    cv_mm2_per_min: f64,
    cv_stress_exponent: f64,
    cv_recompression_factor: f64,
    c_alpha: f64,
    immediate_fraction: f64,
) -> Soil {
    Soil {
        name: name.to_owned(),
        cc,
        cr,
        sigma_p_kpa,
        e0,
        gs,
        cv_mm2_per_min,
        cv_stress_exponent,
        cv_recompression_factor,
        c_alpha,
        immediate_fraction,
    }
}

fn specimen(id: &str, depth_m: f64, description: &str, soil: Soil, height_mm: f64, diameter_mm: f64) -> Specimen {
    Specimen { id: id.to_owned(), depth_m, description: description.to_owned(), soil, height_mm, diameter_mm }
}

/// The catalogue specimen for frame `index`, cycling through the catalogue.
pub fn specimen_for_frame(index: usize) -> Specimen {
    let mut all = catalogue();
    let i = index % all.len();
    all.swap_remove(i)
}

/// A frame model and its schedule for demo frame `index`, created (gauge zeroed under seating) at `at_s`.
pub fn demo_frame(index: usize, at_s: f64) -> Result<(FrameModel, AutoSchedule), ModelError> {
    let model = FrameModel::new(specimen_for_frame(index), SEATING_KPA, at_s)?;
    Ok((model, AutoSchedule::for_frame(index, at_s)))
}

/// When the schedule moves on: after end of primary plus some secondary, and never before a minimum hold.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct HoldRule {
    /// Log10 cycles of time to wait past the truth's t100 (hold = t100·10^cycles). 0.5 leaves room for a
    /// detector that wants a straight secondary branch over ≥ 0.3 cycle [ref: eop-detection, common practice].
    pub secondary_log_cycles: f64,
    /// Shortest hold of any increment, s.
    pub min_hold_s: f64,
}

impl Default for HoldRule {
    /// Half a log cycle past t100, at least 10 minutes.
    fn default() -> Self {
        Self { secondary_log_cycles: 0.5, min_hold_s: 600.0 }
    }
}

impl HoldRule {
    /// Hold of `increment` from its onset, s: max(min_hold_s, t100·10^secondary_log_cycles).
    pub fn hold_s(&self, increment: &IncrementTruth) -> f64 {
        self.min_hold_s.max(increment.t100_s * 10f64.powf(self.secondary_log_cycles))
    }
}

/// The simulator's stand-in technician (or an automatic frame's controller): applies the next stress of a
/// fixed list once the running increment has held long enough. It only proposes stresses to the simulated
/// frame; it is not the daemon and commands no real frame.
#[derive(Debug, Clone, PartialEq)]
pub struct AutoSchedule {
    steps_kpa: Vec<f64>,
    next_step: usize,
    start_at_s: f64,
    hold: HoldRule,
}

impl AutoSchedule {
    /// The default steps and hold rule, first increment at `start_at_s`.
    pub fn new(start_at_s: f64) -> Self {
        Self { steps_kpa: DEFAULT_STEPS_KPA.to_vec(), next_step: 0, start_at_s, hold: HoldRule::default() }
    }

    /// A schedule with its own steps and hold rule.
    pub fn with_steps(steps_kpa: Vec<f64>, start_at_s: f64, hold: HoldRule) -> Result<Self, ScheduleError> {
        if steps_kpa.is_empty() {
            return Err(ScheduleError::NoSteps);
        }
        if let Some((index, &stress_kpa)) = steps_kpa.iter().enumerate().find(|(_, s)| !(s.is_finite() && **s > 0.0)) {
            return Err(ScheduleError::InvalidStep { index, stress_kpa });
        }
        if !start_at_s.is_finite() {
            return Err(ScheduleError::InvalidStart { start_at_s });
        }
        let cycles = hold.secondary_log_cycles;
        if !(cycles.is_finite() && (0.0..=3.0).contains(&cycles)) {
            return Err(ScheduleError::InvalidHold {
                field: "secondary_log_cycles",
                value: cycles,
                allowed: "0 ≤ secondary_log_cycles ≤ 3",
            });
        }
        if !(hold.min_hold_s.is_finite() && hold.min_hold_s >= 0.0) {
            return Err(ScheduleError::InvalidHold {
                field: "min_hold_s",
                value: hold.min_hold_s,
                allowed: "a finite min_hold_s ≥ 0",
            });
        }
        Ok(Self { steps_kpa, next_step: 0, start_at_s, hold })
    }

    /// The default schedule for frame `index` of a frame set created at `created_at_s`: frame k sits
    /// [`SEATING_HOLD_S`] + (k mod [`STAGGER_CYCLE`])·[`FRAME_STAGGER_S`] under seating first, so a demo
    /// shows frames in different states.
    pub fn for_frame(index: usize, created_at_s: f64) -> Self {
        let stagger = (index % STAGGER_CYCLE) as f64 * FRAME_STAGGER_S;
        Self::new(created_at_s + SEATING_HOLD_S + stagger)
    }

    /// When the next step is due on the simulated timeline, s; `None` once every step has been given.
    pub fn due_at_s(&self, model: &FrameModel) -> Option<f64> {
        if self.next_step >= self.steps_kpa.len() {
            return None;
        }
        if self.next_step == 0 {
            return Some(self.start_at_s);
        }
        Some(match model.current_increment() {
            Some(inc) => (inc.onset_s + self.hold.hold_s(&inc)).max(self.start_at_s),
            None => self.start_at_s,
        })
    }

    /// The stress to apply now, if a step is due at `at_s`. A returned step counts as given: the caller
    /// applies it with [`FrameModel::apply_stress`] at `at_s`.
    pub fn next_action(&mut self, model: &FrameModel, at_s: f64) -> Option<f64> {
        let due_s = self.due_at_s(model)?;
        if at_s < due_s {
            return None;
        }
        let stress_kpa = self.steps_kpa[self.next_step];
        self.next_step += 1;
        Some(stress_kpa)
    }

    /// Gives the next step now, whatever its due time (a technician who follows the daemon's `ready`
    /// rather than the hold rule); `None` once every step has been given.
    pub fn take_next(&mut self) -> Option<f64> {
        let stress_kpa = *self.steps_kpa.get(self.next_step)?;
        self.next_step += 1;
        Some(stress_kpa)
    }

    /// The stress steps, kPa.
    pub fn steps_kpa(&self) -> &[f64] {
        &self.steps_kpa
    }

    /// Index of the next step to give (= number given so far).
    pub fn next_step(&self) -> usize {
        self.next_step
    }

    /// Time of the first increment, s.
    pub fn start_at_s(&self) -> f64 {
        self.start_at_s
    }

    /// The hold rule.
    pub fn hold(&self) -> HoldRule {
        self.hold
    }

    /// Every step has been given.
    pub fn is_finished(&self) -> bool {
        self.next_step >= self.steps_kpa.len()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Runs `schedule` on `model` with polls every `poll_s` until it finishes; returns each action's time.
    fn run_to_end(model: &mut FrameModel, schedule: &mut AutoSchedule, poll_s: f64) -> Vec<f64> {
        let mut at_s = model.created_at_s();
        let mut actions = Vec::new();
        while !schedule.is_finished() {
            at_s += poll_s;
            if let Some(stress) = schedule.next_action(model, at_s) {
                model.apply_stress(stress, at_s).unwrap();
                actions.push(at_s);
            }
            assert!(at_s < 1.0e8, "schedule never finished");
        }
        actions
    }

    // LIR = Δσ/σ0 = 1, i.e. doubling [ref: load-sequence], [ref: load-increment-ratio].
    #[test]
    fn default_schedule_doubles_from_the_seating_load() {
        let steps = AutoSchedule::new(0.0).steps_kpa().to_vec();
        let mut previous = SEATING_KPA;
        for &s in steps.iter().take_while(|&&s| s > 0.0) {
            if s < previous {
                break;
            }
            let lir = (s - previous) / previous;
            assert!((lir - 1.0).abs() < 1e-12, "{previous} → {s}: LIR {lir}");
            previous = s;
        }
        assert_eq!(previous, 800.0);
        assert_eq!(*steps.last().unwrap(), 1600.0);
    }

    // Unload–reload after σ′p, unloading over at least two decrements [ref: load-sequence].
    #[test]
    fn default_schedule_has_an_unload_reload_loop_past_every_sigma_p() {
        let steps = DEFAULT_STEPS_KPA;
        let first_drop = steps.windows(2).position(|w| w[1] < w[0]).unwrap();
        let peak = steps[first_drop];
        let decrements = steps[first_drop..].windows(2).take_while(|w| w[1] < w[0]).count();
        assert!(decrements >= 2, "{decrements} decrements");
        let trough = first_drop + decrements;
        // Reloaded back to the peak and then beyond it.
        let back = steps[trough..].iter().position(|&s| s >= peak).unwrap() + trough;
        assert!(steps[trough..back].windows(2).all(|w| w[1] > w[0]));
        assert!(steps[back..].iter().any(|&s| s > peak));
        for sp in catalogue().iter().map(|s| s.soil.sigma_p_kpa) {
            assert!(peak > sp, "unload from {peak} kPa is not past σ′p = {sp} kPa");
        }
        // Quartering decrements, LIR = −0.75 [ref: load-sequence].
        for w in steps[first_drop..=trough].windows(2) {
            assert!(((w[1] - w[0]) / w[0] + 0.75).abs() < 1e-12);
        }
    }

    #[test]
    fn schedule_advances_only_after_the_truths_t100_and_the_hold() {
        for index in 0..catalogue().len() {
            let (mut model, mut schedule) = demo_frame(index, 0.0).unwrap();
            let hold = schedule.hold();
            let actions = run_to_end(&mut model, &mut schedule, 5.0);
            assert_eq!(actions.len(), DEFAULT_STEPS_KPA.len());
            let incs = model.increments();
            assert_eq!(incs.len(), DEFAULT_STEPS_KPA.len());
            assert!((incs[0].onset_s - schedule.start_at_s()).abs() <= 5.0);
            for pair in incs.windows(2) {
                let (done, next) = (pair[0], pair[1]);
                let waited = next.onset_s - done.onset_s;
                assert!(waited >= done.t100_s, "frame {index}: advanced before t100");
                assert!(waited >= hold.hold_s(&done));
                assert!(waited >= hold.min_hold_s);
                // ... and no later than one poll after it was due.
                assert!(waited < hold.hold_s(&done) + 5.0 + 1e-9);
            }
            assert_eq!(schedule.next_action(&model, 1.0e9), None);
            assert_eq!(schedule.due_at_s(&model), None);
            let stresses: Vec<f64> = incs.iter().map(|i| i.to_kpa).collect();
            assert_eq!(stresses, DEFAULT_STEPS_KPA.to_vec());
        }
    }

    #[test]
    fn schedule_waits_while_the_increment_is_still_in_primary() {
        let (mut model, mut schedule) = demo_frame(0, 0.0).unwrap();
        let start = schedule.start_at_s();
        assert_eq!(schedule.next_action(&model, start - 1.0), None);
        let s = schedule.next_action(&model, start).unwrap();
        model.apply_stress(s, start).unwrap();
        let inc = model.current_increment().unwrap();
        assert_eq!(schedule.next_action(&model, inc.eop_s - 1.0), None);
        assert_eq!(schedule.next_action(&model, inc.eop_s + 1.0), None);
        let due = schedule.due_at_s(&model).unwrap();
        assert!(due > inc.eop_s);
        assert_eq!(schedule.next_action(&model, due), Some(25.0));
    }

    #[test]
    fn demo_frames_start_staggered_and_are_at_different_stages() {
        let frames: Vec<_> = (0..6).map(|i| demo_frame(i, 0.0).unwrap()).collect();
        let starts: Vec<f64> = frames.iter().map(|(_, s)| s.start_at_s()).collect();
        assert!(starts.windows(2).all(|w| w[1] > w[0]));
        // Two simulated hours in, the frames have not all given the same number of steps.
        let mut counts = Vec::new();
        for (mut model, mut schedule) in frames {
            let mut at_s = 0.0;
            while at_s < 7200.0 {
                at_s += 5.0;
                if let Some(s) = schedule.next_action(&model, at_s) {
                    model.apply_stress(s, at_s).unwrap();
                }
            }
            counts.push(schedule.next_step());
        }
        counts.sort_unstable();
        counts.dedup();
        assert!(counts.len() >= 3, "steps given: {counts:?}");
    }

    #[test]
    fn specimen_for_frame_cycles_through_the_catalogue() {
        let n = catalogue().len();
        assert!(n >= 6);
        for i in 0..n {
            assert_eq!(specimen_for_frame(i), specimen_for_frame(i + n));
            assert_eq!(specimen_for_frame(i), catalogue()[i]);
        }
        let mut ids: Vec<String> = catalogue().into_iter().map(|s| s.id).collect();
        ids.sort();
        ids.dedup();
        assert_eq!(ids.len(), n);
    }

    #[test]
    fn catalogue_specimens_are_plausible() {
        for s in catalogue() {
            let soil = &s.soil;
            s.validate().unwrap();
            // Heights and diameters asked for the demo; D/H ≥ 2.5 and D ≥ 50 mm [ref: specimen-dimensions].
            assert!((19.0..=25.0).contains(&s.height_mm), "{}", s.id);
            assert!((50.0..=76.0).contains(&s.diameter_mm), "{}", s.id);
            assert!(s.diameter_mm / s.height_mm >= 2.5, "{}", s.id);
            // Cr/Cc between 1/20 and 1/4 (common practice).
            let ratio = soil.cr / soil.cc;
            assert!((0.05..=0.25).contains(&ratio), "{}: Cr/Cc {ratio}", s.id);
            // Cα on the virgin branch within NC clay range 0.005–0.030 [ref: secondary-ranges], and
            // the recompression value cr/cc·Cα no higher than the OC range top 0.0015 for the stiff clay.
            assert!((0.005..=0.030).contains(&soil.c_alpha), "{}", s.id);
            let c_alpha_e_over_cc = soil.c_alpha * (1.0 + soil.e0) / soil.cc;
            assert!((0.03..=0.06).contains(&c_alpha_e_over_cc), "{}: {c_alpha_e_over_cc}", s.id);
            assert!((0.02..=0.08).contains(&soil.immediate_fraction));
            assert!((2.4..=2.8).contains(&soil.gs), "{}", s.id);
            // The whole schedule keeps the void ratio physical and the settlement inside a 25 mm gauge.
            let mut model = FrameModel::new(s.clone(), SEATING_KPA, 0.0).unwrap();
            let mut schedule = AutoSchedule::new(SEATING_HOLD_S);
            let actions = run_to_end(&mut model, &mut schedule, 30.0);
            let last = model.current_increment().unwrap();
            let end_s = *actions.last().unwrap() + 3.0 * last.t100_s;
            let e_end = model.void_ratio(end_s);
            assert!(e_end > 0.3, "{}: e = {e_end}", s.id);
            assert!(model.displacement_mm(end_s) < 0.55 * s.height_mm, "{}", s.id);
        }
        let stiff = catalogue().into_iter().find(|s| s.soil.sigma_p_kpa > 400.0).unwrap();
        let c_alpha_oc = stiff.soil.c_alpha * stiff.soil.cr / stiff.soil.cc;
        // OC clays 0.0005–0.0015 [ref: secondary-ranges].
        assert!((0.0005..=0.0015).contains(&c_alpha_oc), "{c_alpha_oc}");
    }

    #[test]
    fn bad_schedules_are_refused() {
        let hold = HoldRule::default();
        assert_eq!(AutoSchedule::with_steps(vec![], 0.0, hold), Err(ScheduleError::NoSteps));
        assert_eq!(
            AutoSchedule::with_steps(vec![10.0, -1.0], 0.0, hold),
            Err(ScheduleError::InvalidStep { index: 1, stress_kpa: -1.0 })
        );
        let bad_hold = HoldRule { secondary_log_cycles: -0.1, ..hold };
        assert!(AutoSchedule::with_steps(vec![10.0], 0.0, bad_hold).is_err());
        assert!(AutoSchedule::with_steps(vec![10.0], f64::NAN, hold).is_err());
        assert!(AutoSchedule::with_steps(vec![10.0, 20.0], 0.0, hold).is_ok());
    }
}
