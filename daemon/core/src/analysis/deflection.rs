//! Apparatus-deflection correction [ref: apparatus-deflection]: the frame+cell+stones deflection measured with a
//! metal dummy disc, per loading and unloading branch, interpolated at the applied stress on the right
//! branch. Never extrapolated: outside the calibrated range the answer is "no correction" plus a flag. It
//! must not decide which branch a test is on or apply corrections to stored readings itself.

use serde::Serialize;

use super::AnalysisError;
use super::flags::Flag;
use super::interp::Pchip;

/// Which way the stress last moved.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub(crate) enum LoadBranch {
    /// Stress rising (first loading and reloading: one table [ref: apparatus-deflection, common practice]).
    Loading,
    /// Stress falling.
    Unloading,
}

/// One calibration branch: stress (kPa, strictly increasing) → deflection (mm, compression positive).
#[derive(Debug, Clone)]
struct Branch {
    min_kpa: f64,
    max_kpa: f64,
    curve: Pchip,
}

impl Branch {
    fn new(what: &'static str, points: &[(f64, f64)]) -> Result<Self, AnalysisError> {
        if points.len() < 2 {
            return Err(AnalysisError::TooFewPoints { what, needed: 2, got: points.len() });
        }
        for (index, &(stress, deflection)) in points.iter().enumerate() {
            if !stress.is_finite() || !deflection.is_finite() {
                return Err(AnalysisError::NonFinite { index, field: what });
            }
            if stress < 0.0 {
                return Err(AnalysisError::InvalidParameter { name: what, value: stress, allowed: "stress ≥ 0 kPa" });
            }
        }
        let (stress, deflection): (Vec<f64>, Vec<f64>) = points.iter().copied().unzip();
        let curve = Pchip::new(stress, deflection).map_err(|e| match e {
            AnalysisError::NotIncreasing { index, value, .. } => AnalysisError::NotIncreasing { what, index, value },
            other => other,
        })?;
        Ok(Branch { min_kpa: points[0].0, max_kpa: points[points.len() - 1].0, curve })
    }
}

/// A frame's deflection calibration.
#[derive(Debug, Clone)]
pub struct DeflectionCalibration {
    loading: Branch,
    unloading: Option<Branch>,
}

/// The deflection at one stress, or why there is none.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub(crate) struct Deflection {
    /// Apparatus deflection y, mm; `None` outside the calibrated range.
    pub(crate) deflection_mm: Option<f64>,
    /// The branch actually used.
    pub(crate) branch: LoadBranch,
    /// `DeflectionOutsideCalibration`, `UnloadingBranchMissing`.
    pub(crate) flags: Vec<Flag>,
}

impl DeflectionCalibration {
    /// A calibration from `(stress_kpa, deflection_mm)` pairs per branch, stress strictly increasing; the
    /// unloading branch may be empty. Interpolation is monotone cubic (PCHIP), so a measured table is never
    /// overshot between its points.
    pub fn new(loading: &[(f64, f64)], unloading: &[(f64, f64)]) -> Result<Self, AnalysisError> {
        let loading = Branch::new("deflection loading branch", loading)?;
        let unloading =
            if unloading.is_empty() { None } else { Some(Branch::new("deflection unloading branch", unloading)?) };
        Ok(DeflectionCalibration { loading, unloading })
    }

    /// Deflection y at `stress_kpa` on `branch` [ref: apparatus-deflection, common practice]. Falls back on
    /// the loading branch (flagged) when no unloading branch was calibrated.
    pub(crate) fn deflection_at(&self, stress_kpa: f64, branch: LoadBranch) -> Deflection {
        let mut flags = Vec::new();
        let (table, used) = match (branch, &self.unloading) {
            (LoadBranch::Unloading, Some(u)) => (u, LoadBranch::Unloading),
            (LoadBranch::Unloading, None) => {
                flags.push(Flag::UnloadingBranchMissing);
                (&self.loading, LoadBranch::Loading)
            }
            (LoadBranch::Loading, _) => (&self.loading, LoadBranch::Loading),
        };
        let inside = stress_kpa >= table.min_kpa && stress_kpa <= table.max_kpa;
        if !inside {
            flags.push(Flag::DeflectionOutsideCalibration {
                stress_kpa,
                min_kpa: table.min_kpa,
                max_kpa: table.max_kpa,
            });
        }
        Deflection { deflection_mm: inside.then(|| table.curve.eval(stress_kpa)), branch: used, flags }
    }
}

/// Corrected compression: ΔH_corr = ΔH_meas − y [ref: apparatus-deflection].
pub(crate) fn corrected_mm(measured_mm: f64, deflection_mm: f64) -> f64 {
    measured_mm - deflection_mm
}

#[cfg(test)]
mod tests {
    use super::*;

    // Invented calibration for the demo frame (not a published table): deflection grows with load and
    // recovers only partly on unloading, as a dummy-disc calibration does [ref: apparatus-deflection, common practice].
    const LOADING: [(f64, f64); 6] =
        [(5.0, 0.0), (25.0, 0.012), (50.0, 0.020), (100.0, 0.031), (200.0, 0.045), (400.0, 0.062)];
    const UNLOADING: [(f64, f64); 4] = [(25.0, 0.030), (100.0, 0.042), (200.0, 0.052), (400.0, 0.062)];

    #[test]
    fn calibrated_stresses_return_their_own_deflection() {
        let cal = DeflectionCalibration::new(&LOADING, &UNLOADING).unwrap();
        for (stress, y) in LOADING {
            assert_eq!(cal.deflection_at(stress, LoadBranch::Loading).deflection_mm, Some(y));
        }
        for (stress, y) in UNLOADING {
            assert_eq!(cal.deflection_at(stress, LoadBranch::Unloading).deflection_mm, Some(y));
        }
    }

    #[test]
    fn the_branch_decides_the_value_between_points() {
        let cal = DeflectionCalibration::new(&LOADING, &UNLOADING).unwrap();
        let up = cal.deflection_at(150.0, LoadBranch::Loading).deflection_mm.unwrap();
        let down = cal.deflection_at(150.0, LoadBranch::Unloading).deflection_mm.unwrap();
        // Between the bracketing table values (monotone interpolation never overshoots) …
        assert!(up > 0.031 && up < 0.045 && down > 0.042 && down < 0.052);
        // … and the unloading branch, with its unrecovered deflection, lies above the loading one.
        assert!(down > up);
        assert_eq!(corrected_mm(0.5, up), 0.5 - up);
    }

    #[test]
    fn stresses_outside_the_table_are_flagged_never_extrapolated() {
        let cal = DeflectionCalibration::new(&LOADING, &UNLOADING).unwrap();
        let above = cal.deflection_at(800.0, LoadBranch::Loading);
        assert_eq!(above.deflection_mm, None);
        assert!(matches!(above.flags[..], [Flag::DeflectionOutsideCalibration { max_kpa: 400.0, .. }]));
        let below = cal.deflection_at(10.0, LoadBranch::Unloading);
        assert_eq!(below.deflection_mm, None);
        assert!(matches!(below.flags[..], [Flag::DeflectionOutsideCalibration { min_kpa: 25.0, .. }]));
        assert_eq!(cal.deflection_at(f64::NAN, LoadBranch::Loading).deflection_mm, None);
    }

    #[test]
    fn missing_unloading_branch_falls_back_on_loading_with_a_flag() {
        let cal = DeflectionCalibration::new(&LOADING, &[]).unwrap();
        let d = cal.deflection_at(100.0, LoadBranch::Unloading);
        assert_eq!((d.deflection_mm, d.branch), (Some(0.031), LoadBranch::Loading));
        assert_eq!(d.flags, vec![Flag::UnloadingBranchMissing]);
    }

    #[test]
    fn bad_tables_are_refused() {
        assert!(DeflectionCalibration::new(&[(5.0, 0.0)], &[]).is_err());
        let err = DeflectionCalibration::new(&[(5.0, 0.0), (5.0, 0.01)], &[]).unwrap_err();
        assert!(matches!(err, AnalysisError::NotIncreasing { what: "deflection loading branch", index: 1, .. }));
        assert!(DeflectionCalibration::new(&[(5.0, f64::NAN), (10.0, 0.01)], &[]).is_err());
        assert!(DeflectionCalibration::new(&LOADING, &[(-5.0, 0.0), (10.0, 0.01)]).is_err());
    }
}

#[cfg(test)]
mod properties {
    use super::*;
    use proptest::prelude::*;

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(5000))]

        #[test]
        fn any_table_and_stress_give_a_value_a_flag_or_a_typed_error(
            loading in prop::collection::vec((any::<f64>(), any::<f64>()), 0..8),
            unloading in prop::collection::vec((any::<f64>(), any::<f64>()), 0..8),
            stress in any::<f64>(), unload in any::<bool>(),
        ) {
            if let Ok(cal) = DeflectionCalibration::new(&loading, &unloading) {
                let branch = if unload { LoadBranch::Unloading } else { LoadBranch::Loading };
                let d = cal.deflection_at(stress, branch);
                prop_assert!(d.deflection_mm.is_some() || !d.flags.is_empty());
            }
        }
    }
}
