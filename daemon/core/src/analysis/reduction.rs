//! The one reduction of a whole test: specimen, load steps, their time curves, the apparatus deflection
//! table and the e–log σ′ curve with its parameters. The HTTP read model, the printed report, the CSV
//! exports and `oedolog analyze test` all reduce a test through [`reduce_test`], so one rule each decides
//! the height of solids, the drainage path, the cv behind k and the basis of the curve; the live watch takes
//! its time-curve parameters from the same [`ReductionRules`].
//!
//! It must not read readings from anywhere: the caller brings each load step's time curve as numbers.

use serde::Serialize;

use super::AnalysisError;
use super::compression::reduce_compression_with;
use super::compression::{CompressionInput, CompressionParams, CompressionPoint, CompressionReduction, CurveBasis};
use super::cv::{CvEstimate, Drainage, Method, SpecimenState};
use super::deflection::{DeflectionCalibration, LoadBranch, corrected_mm};
use super::flags::Flag;
use super::increment::{IncrementParams, IncrementReduction, reduce_increment};
use super::phase::{FinalWaterCheck, PhaseRelations, SpecimenMeasurements, final_water_check, phase_relations};
use super::review::{CompressionChoices, TestChoices};

/// The choices every reduction of a load step's time curve shares, live or stored.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct ReductionRules {
    /// Gauge resolution, mm; straight-line tolerances start at twice this.
    pub gauge_resolution_mm: f64,
    /// The Casagrande secondary line must span at least this many log cycles [ref: casagrande-log-time].
    pub min_secondary_decades: f64,
    /// It starts no earlier than this × its t100: 1.5, where the primary's tail no longer steepens it by
    /// more than 2 % of the primary in d100 [ref: casagrande-log-time, computed].
    pub secondary_from_t100: f64,
    /// The secondary line may be at most this fraction of the inflection tangent's slope. Soft soils with a
    /// large Cα relative to the primary of a step need more than the ideal curve's 0.49
    /// [ref: secondary-compression, computed]; collinearity over the window keeps a curving primary tail out.
    pub max_secondary_slope_ratio: f64,
    /// Drainage faces of the specimen (double: top and bottom porous stones) [ref: drainage-path].
    pub drainage: Drainage,
    /// The e–log σ′ construction choices (the basis is decided per test, see [`reduce_test_with`]).
    pub compression: CompressionParams,
}

impl Default for ReductionRules {
    fn default() -> Self {
        ReductionRules {
            gauge_resolution_mm: 0.001,
            min_secondary_decades: 0.3,
            secondary_from_t100: 1.5,
            max_secondary_slope_ratio: 0.6,
            drainage: Drainage::Double,
            compression: CompressionParams::default(),
        }
    }
}

impl ReductionRules {
    /// The parameters of one load step's time-curve reduction: the drainage path from the specimen height at
    /// 50 % consolidation, tied to the gauge by `specimen` (the height at a known reading) [ref: drainage-path];
    /// Hs for Cα on the void-ratio basis when known; the load increment ratio from the stress before.
    pub(crate) fn increment_params(
        &self,
        specimen: SpecimenState,
        previous_kpa: f64,
        stress_kpa: f64,
        solids_height_mm: Option<f64>,
    ) -> IncrementParams {
        let mut params = IncrementParams::with_specimen(specimen.height_mm, specimen.at_reading_mm, self.drainage);
        params.gauge_resolution_mm = self.gauge_resolution_mm;
        params.casagrande.secondary_min_decades = self.min_secondary_decades;
        params.casagrande.secondary_from_t100 = self.secondary_from_t100;
        params.casagrande.max_secondary_slope_ratio = self.max_secondary_slope_ratio;
        params.solids_height_mm = solids_height_mm;
        params.load_increment_ratio = super::compression::load_increment_ratio(previous_kpa, stress_kpa);
        params
    }
}

/// The cv a load step's k is computed with: the one the step's checks trust (`IncrementReduction::cv_choice`:
/// log t where its secondary line fixes the end of primary and it holds, else √t where it holds); none when
/// neither holds [ref: permeability] [ref: cv-consistency].
pub(crate) fn cv_behind_k(reduction: &IncrementReduction) -> Option<CvEstimate> {
    match reduction.cv_choice.method? {
        Method::Casagrande => reduction.cv_casagrande,
        Method::Taylor => reduction.cv_taylor,
    }
}

/// The specimen as measured before (and after) the test.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct TestSpecimen {
    /// Ring diameter, mm.
    pub diameter_mm: f64,
    /// Initial height H0, mm (under the seating stress).
    pub height_mm: f64,
    /// Oven-dry mass, g; with Gs it gives Hs and the void ratios.
    pub dry_mass_g: Option<f64>,
    /// Specific gravity of the solids Gs.
    pub specific_gravity: Option<f64>,
    /// Initial water content, a fraction.
    pub initial_water_content: Option<f64>,
    /// Water content at the end of the test, a fraction, for the cross-check of e0.
    pub final_water_content: Option<f64>,
    /// Stress under which H0 was zeroed, kPa.
    pub seating_stress_kpa: f64,
    /// In-situ vertical effective stress σ′v0, kPa, for OCR.
    pub sigma_v0_kpa: Option<f64>,
}

/// One load step as recorded.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct StepInput<'a> {
    /// An operator marked the step void: it is kept in the list and left out of the reduction (no
    /// time-curve construction, no point on the compression curve, not the stress before the next step).
    pub void: bool,
    /// Effective vertical stress of the step, kPa.
    pub stress_kpa: f64,
    /// Cumulative compression from the test's zero at the end of the step, as the gauge measured it
    /// (before any apparatus correction), mm; `None` while the step has no readings.
    pub settlement_mm: Option<f64>,
    /// The step's time curve `(t_min, gauge_mm)` from its onset, compression positive; its last reading is
    /// the end of the step, where `settlement_mm` was taken.
    pub readings: Option<&'a [(f64, f64)]>,
}

/// A whole test as the reduction needs it.
#[derive(Clone, Copy, Debug)]
pub struct TestInput<'a> {
    /// The specimen.
    pub specimen: TestSpecimen,
    /// The load steps in the order applied.
    pub steps: &'a [StepInput<'a>],
    /// The frame's apparatus deflection table, when it has one.
    pub deflection: Option<&'a DeflectionCalibration>,
    /// The shared reduction choices.
    pub rules: &'a ReductionRules,
    /// An engineer's choices over the constructions; `None`: the automatic proposal throughout.
    pub choices: Option<&'a TestChoices>,
}

impl TestInput<'_> {
    /// The stress before step `index`: the previous step's, or the seating stress.
    pub(crate) fn previous_kpa(&self, index: usize) -> f64 {
        self.steps[..index].iter().rev().find(|s| !s.void).map_or(self.specimen.seating_stress_kpa, |s| s.stress_kpa)
    }

    /// The phase relations, when the dry mass and Gs are known (`Some(Err)` when they are refused).
    pub(crate) fn phase(&self) -> Option<Result<PhaseRelations, AnalysisError>> {
        let s = &self.specimen;
        let (dry_mass_g, specific_gravity) = (s.dry_mass_g?, s.specific_gravity?);
        let mut measurements = SpecimenMeasurements::new(s.diameter_mm, s.height_mm, dry_mass_g, specific_gravity);
        measurements.initial_water_content = s.initial_water_content;
        Some(phase_relations(&measurements))
    }

    /// The apparatus deflection to take off step `index`'s settlement: y on the branch its stress is on,
    /// less y at the seating stress (the zero reading already had that in it) [ref: apparatus-deflection].
    /// With the flags of each lookup (the second list for the seating stress).
    fn deflection(&self, index: usize) -> Option<(Option<f64>, Vec<Flag>, Vec<Flag>)> {
        let calibration = self.deflection?;
        let stress_kpa = self.steps[index].stress_kpa;
        let branch = if stress_kpa < self.previous_kpa(index) && index > 0 {
            LoadBranch::Unloading
        } else {
            LoadBranch::Loading
        };
        let at = calibration.deflection_at(stress_kpa, branch);
        let zero = calibration.deflection_at(self.specimen.seating_stress_kpa, LoadBranch::Loading);
        Some((at.deflection_mm.zip(zero.deflection_mm).map(|(y, y0)| y - y0), at.flags, zero.flags))
    }

    /// The time-curve parameters of step `index` (`None` without readings): the gauge tied to the height
    /// H0 − settlement at the step's last reading, settlement apparatus-corrected where the table covers it.
    pub(crate) fn step_params(&self, index: usize, solids_height_mm: Option<f64>) -> Option<IncrementParams> {
        let step = &self.steps[index];
        let (_, last_mm) = *step.readings?.last()?;
        let settlement = self.corrected_settlement(index).unwrap_or(0.0);
        let specimen = SpecimenState { height_mm: self.specimen.height_mm - settlement, at_reading_mm: last_mm };
        let params = self.rules.increment_params(specimen, self.previous_kpa(index), step.stress_kpa, solids_height_mm);
        Some(match self.choices {
            Some(choices) => params.with_choices(choices.step(index)),
            None => params,
        })
    }

    fn corrected_settlement(&self, index: usize) -> Option<f64> {
        let measured = self.steps[index].settlement_mm?;
        Some(match self.deflection(index) {
            Some((Some(y), _, _)) => corrected_mm(measured, y),
            _ => measured,
        })
    }
}

/// One load step reduced.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct StepReduction {
    /// σ′, kPa.
    pub(crate) stress_kpa: f64,
    /// The stress before it, kPa.
    pub(crate) previous_kpa: f64,
    /// Cumulative compression at the end of the step, corrected for apparatus deflection where the table
    /// covers both its stress and the seating stress, mm.
    pub settlement_mm: Option<f64>,
    /// The same as the gauge measured it, mm.
    pub settlement_measured_mm: Option<f64>,
    /// Apparatus deflection taken off, mm.
    pub apparatus_deflection_mm: Option<f64>,
    /// Cumulative compression at the end of primary (d100), corrected as `settlement_mm`, mm.
    pub settlement_eop_mm: Option<f64>,
    /// The time-curve reduction; `None` without readings.
    pub curve: Option<IncrementReduction>,
    /// Why the time curve could not be reduced, when it was refused.
    #[serde(skip)]
    pub curve_refused: Option<AnalysisError>,
    /// The cv behind k: that of the construction that gave the end of primary (log t where a secondary line
    /// was found, else √t); none without an end of primary.
    pub cv_for_k: Option<CvEstimate>,
    /// Remarks of the deflection lookup at the step's stress.
    pub deflection_flags: Vec<Flag>,
    /// Remarks of the deflection lookup at the seating stress.
    pub seating_deflection_flags: Vec<Flag>,
    /// An operator marked the step void: nothing of it was reduced.
    pub void: bool,
}

impl StepReduction {
    /// A void step: its stress, and nothing reduced.
    fn void(stress_kpa: f64, previous_kpa: f64) -> StepReduction {
        StepReduction {
            stress_kpa,
            previous_kpa,
            settlement_mm: None,
            settlement_measured_mm: None,
            apparatus_deflection_mm: None,
            settlement_eop_mm: None,
            curve: None,
            curve_refused: None,
            cv_for_k: None,
            deflection_flags: Vec::new(),
            seating_deflection_flags: Vec::new(),
            void: true,
        }
    }
}

/// Why a test has no e–log σ′ curve.
#[derive(Clone, Debug, PartialEq, thiserror::Error)]
pub enum CurveUnavailable {
    /// The void ratios need Hs.
    #[error("the e–log σ′ curve needs the dry mass and the specific gravity of the specimen")]
    NeedsSolids,
    /// The phase relations refused the specimen.
    #[error("{0}")]
    Specimen(AnalysisError),
    /// No step has a settlement yet.
    #[error("no load step has readings after its onset yet")]
    NoSettlements,
    /// The e–log σ′ reduction refused its input.
    #[error("{0}")]
    Refused(AnalysisError),
}

/// A whole test reduced.
#[derive(Clone, Debug, PartialEq)]
pub struct TestReduction {
    /// Phase relations: `None` without dry mass and Gs.
    pub phase: Option<Result<PhaseRelations, AnalysisError>>,
    /// Every load step, in order.
    pub steps: Vec<StepReduction>,
    /// For each point of the compression curve, the step it comes from (steps without a settlement are
    /// not on the curve).
    pub(crate) curve_steps: Vec<usize>,
    /// End of primary where any step has a time curve (a Method B curve), else end of step (Method A)
    /// [ref: test-methods].
    pub(crate) basis: CurveBasis,
    /// The e–log σ′ reduction.
    pub compression: Result<CompressionReduction, CurveUnavailable>,
    /// Whether every step with a settlement was corrected for apparatus deflection.
    pub apparatus_corrected: bool,
    /// The cross-check of e0 from the final water content, when given.
    pub(crate) final_water: Option<Result<FinalWaterCheck, AnalysisError>>,
}

/// Reduces a test, each time curve with [`reduce_increment`].
pub(crate) fn reduce_test(input: &TestInput<'_>) -> TestReduction {
    reduce_test_with(input, |_, readings, params| reduce_increment(readings, params))
}

/// Reduces a test, each time curve by `reduce(index, readings, params)`: a caller that keeps finished steps'
/// reductions (the HTTP read model) returns them from there. `reduce` must give what [`reduce_increment`] gives
/// for the same readings and parameters.
pub fn reduce_test_with(
    input: &TestInput<'_>,
    mut reduce: impl FnMut(usize, &[(f64, f64)], &IncrementParams) -> Result<IncrementReduction, AnalysisError>,
) -> TestReduction {
    let phase = input.phase();
    let solids_height_mm = phase.as_ref().and_then(|p| p.as_ref().ok()).map(|p| p.solids_height_mm);
    let mut apparatus_corrected = input.deflection.is_some();
    let mut steps = Vec::with_capacity(input.steps.len());
    for (index, step) in input.steps.iter().enumerate() {
        if step.void {
            steps.push(StepReduction::void(step.stress_kpa, input.previous_kpa(index)));
            continue;
        }
        let (deflection_mm, deflection_flags, seating_deflection_flags) =
            input.deflection(index).unwrap_or((None, Vec::new(), Vec::new()));
        apparatus_corrected &= deflection_mm.is_some() || step.settlement_mm.is_none();
        let corrected = |m: f64| deflection_mm.map_or(m, |y| corrected_mm(m, y));
        let settlement_mm = step.settlement_mm.map(corrected);
        let (mut curve, mut curve_refused) = (None, None);
        if let (Some(readings), Some(params)) = (step.readings, input.step_params(index, solids_height_mm)) {
            match reduce(index, readings, &params) {
                Ok(r) => curve = Some(r),
                Err(e) => curve_refused = Some(e),
            }
        }
        // d100 on the same gauge as the step's last reading: settlement − (last reading − d100).
        let last_mm = step.readings.and_then(|r| r.last()).map(|r| r.1);
        let settlement_eop_mm = match (settlement_mm, last_mm, curve.as_ref().and_then(|c| c.end_of_primary)) {
            (Some(s), Some(last), Some(eop)) => Some(s - (last - eop.d100_mm)),
            _ => None,
        };
        steps.push(StepReduction {
            stress_kpa: step.stress_kpa,
            previous_kpa: input.previous_kpa(index),
            settlement_mm,
            settlement_measured_mm: step.settlement_mm,
            apparatus_deflection_mm: deflection_mm,
            settlement_eop_mm,
            cv_for_k: curve.as_ref().and_then(cv_behind_k),
            curve,
            curve_refused,
            deflection_flags,
            seating_deflection_flags,
            void: false,
        });
    }
    let any_curve = steps.iter().any(|s| s.curve.is_some());
    let basis = if any_curve { CurveBasis::EndOfPrimary } else { CurveBasis::EndOfIncrement };
    let curve_steps: Vec<usize> = (0..steps.len()).filter(|&i| steps[i].settlement_mm.is_some()).collect();
    let points: Vec<CompressionPoint> = curve_steps
        .iter()
        .map(|&i| CompressionPoint {
            stress_kpa: steps[i].stress_kpa,
            settlement_mm: steps[i].settlement_mm.unwrap_or(0.0),
            settlement_eop_mm: steps[i].settlement_eop_mm,
            cv_mm2_per_min: steps[i].cv_for_k.map(|c| c.cv_mm2_per_min),
        })
        .collect();
    let compression = match &phase {
        None => Err(CurveUnavailable::NeedsSolids),
        Some(Err(e)) => Err(CurveUnavailable::Specimen(e.clone())),
        Some(Ok(_)) if points.is_empty() => Err(CurveUnavailable::NoSettlements),
        Some(Ok(p)) => {
            let compression_input = CompressionInput {
                initial_height_mm: input.specimen.height_mm,
                solids_height_mm: p.solids_height_mm,
                seating_stress_kpa: input.specimen.seating_stress_kpa,
                points: &points,
            };
            let params =
                CompressionParams { basis, sigma_v0_kpa: input.specimen.sigma_v0_kpa, ..input.rules.compression };
            let none = CompressionChoices::default();
            let choices = input.choices.map_or(&none, |c| &c.compression);
            reduce_compression_with(&compression_input, &params, choices).map_err(CurveUnavailable::Refused)
        }
    };
    let final_water = match (&phase, input.specimen.final_water_content, curve_steps.last()) {
        (Some(Ok(p)), Some(wf), Some(&last)) => {
            let final_height_mm = input.specimen.height_mm - steps[last].settlement_mm.unwrap_or(0.0);
            Some(final_water_check(p, final_height_mm, wf))
        }
        _ => None,
    };
    TestReduction { phase, steps, curve_steps, basis, compression, apparatus_corrected, final_water }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::analysis::terzaghi::degree_of_consolidation;

    /// An exact Terzaghi curve of `final_mm` over a step with `t90_min`, from gauge reading `start_mm`.
    fn curve(start_mm: f64, final_mm: f64, t90_min: f64) -> Vec<(f64, f64)> {
        let tv_per_min = 0.848 / t90_min;
        (0..=120)
            .map(|k| {
                let t = if k == 0 { 0.0 } else { 10f64.powf(-1.0 + k as f64 * 0.04) };
                let u = degree_of_consolidation(tv_per_min * t);
                (t, start_mm + final_mm * u + 0.002 * (1.0 + t).log10() * (t > t90_min) as u8 as f64)
            })
            .collect()
    }

    fn specimen() -> TestSpecimen {
        TestSpecimen {
            diameter_mm: 75.0,
            height_mm: 20.0,
            dry_mass_g: Some(130.0),
            specific_gravity: Some(2.70),
            initial_water_content: None,
            final_water_content: None,
            seating_stress_kpa: 5.0,
            sigma_v0_kpa: None,
        }
    }

    #[test]
    fn a_cached_reduction_gives_the_same_test_as_a_fresh_one() {
        let a = curve(0.0, 0.10, 5.0);
        let b = curve(0.10, 0.30, 8.0);
        let steps = [
            StepInput { void: false, stress_kpa: 25.0, settlement_mm: Some(0.10), readings: Some(&a) },
            StepInput { void: false, stress_kpa: 50.0, settlement_mm: Some(0.40), readings: Some(&b) },
            StepInput { void: false, stress_kpa: 100.0, settlement_mm: None, readings: None },
        ];
        let rules = ReductionRules::default();
        let input = TestInput { specimen: specimen(), steps: &steps, deflection: None, rules: &rules, choices: None };
        let fresh = reduce_test(&input);
        let mut calls = Vec::new();
        let hooked = reduce_test_with(&input, |i, r, p| {
            calls.push(i);
            reduce_increment(r, p)
        });
        assert_eq!(fresh, hooked);
        assert_eq!(calls, vec![0, 1], "a step without readings is not reduced");
        assert_eq!(fresh.curve_steps, vec![0, 1]);
        assert_eq!(fresh.basis, CurveBasis::EndOfPrimary);
        assert!(fresh.compression.is_ok());
    }

    #[test]
    fn the_gauge_is_tied_to_the_height_at_the_last_reading() {
        let a = curve(3.0, 0.20, 5.0);
        let steps = [StepInput { void: false, stress_kpa: 25.0, settlement_mm: Some(0.20), readings: Some(&a) }];
        let rules = ReductionRules::default();
        let input = TestInput { specimen: specimen(), steps: &steps, deflection: None, rules: &rules, choices: None };
        let params = input.step_params(0, None).unwrap();
        let s = params.specimen.unwrap();
        assert!((s.height_mm - 19.8).abs() < 1e-12 && (s.at_reading_mm - a[a.len() - 1].1).abs() < 1e-12);
        // At the onset the gauge read 3.0: the specimen was higher by what the gauge moved since.
        assert!((s.height_at_mm(3.0) - (19.8 + (a[a.len() - 1].1 - 3.0))).abs() < 1e-12);
        assert_eq!(params.load_increment_ratio, Some(4.0), "(25 − 5)/5 from the seating stress");
    }

    #[test]
    fn without_dry_mass_the_steps_reduce_but_the_curve_says_why_it_is_missing() {
        let a = curve(0.0, 0.10, 5.0);
        let steps = [StepInput { void: false, stress_kpa: 25.0, settlement_mm: Some(0.10), readings: Some(&a) }];
        let rules = ReductionRules::default();
        let input = TestInput {
            specimen: TestSpecimen { dry_mass_g: None, ..specimen() },
            steps: &steps,
            deflection: None,
            rules: &rules,
            choices: None,
        };
        let r = reduce_test(&input);
        assert!(r.steps[0].curve.is_some());
        assert_eq!(r.compression, Err(CurveUnavailable::NeedsSolids));
    }

    #[test]
    fn a_void_step_is_listed_but_reduced_for_nothing_and_the_next_step_follows_the_one_before() {
        let a = curve(0.0, 0.10, 5.0);
        let slip = curve(0.10, 0.05, 5.0);
        let b = curve(0.15, 0.30, 5.0);
        let steps = [
            StepInput { void: false, stress_kpa: 25.0, settlement_mm: Some(0.10), readings: Some(&a) },
            StepInput { void: true, stress_kpa: 0.2, settlement_mm: Some(0.15), readings: Some(&slip) },
            StepInput { void: false, stress_kpa: 100.0, settlement_mm: Some(0.45), readings: Some(&b) },
        ];
        let rules = ReductionRules::default();
        let input = TestInput { specimen: specimen(), steps: &steps, deflection: None, rules: &rules, choices: None };
        assert_eq!(input.previous_kpa(2), 25.0, "the step after a void one follows the last that counts");
        assert_eq!(input.step_params(2, None).unwrap().load_increment_ratio, Some(3.0), "(100 − 25)/25");
        let r = reduce_test(&input);
        assert_eq!(r.steps.len(), 3, "the void step stays in the list");
        assert!(r.steps[1].void && r.steps[1].curve.is_none() && r.steps[1].settlement_mm.is_none());
        assert_eq!(r.steps[2].previous_kpa, 25.0);
        assert_eq!(r.curve_steps, [0, 2]);
        let stresses: Vec<f64> = r.compression.unwrap().points.iter().map(|p| p.stress_kpa).collect();
        assert!(!stresses.contains(&0.2), "{stresses:?}");
    }
}
