//! Phase relations of the specimen [ref: height-of-solids]: ring area, height of solids Hs = Ms/(Gs·ρw·A), initial
//! void ratio, densities, initial water content and degree of saturation, and the final-water-content
//! cross-check of e. Numbers only; it must not know which test or frame they belong to.

use std::f64::consts::PI;

use serde::Serialize;

use super::flags::Flag;
use super::{AnalysisError, check_positive, check_range};

/// e from the dry mass and e back-calculated from the final water content may differ by this much before
/// the check is flagged [ref: final-water-check, common practice].
pub(crate) const VOID_RATIO_DISCREPANCY_LIMIT: f64 = 0.02;
/// Degree of saturation below this flags cv: time-curve theory assumes saturation [ref: saturation-check]
/// (95 %, common practice).
const PARTLY_SATURATED_BELOW: f64 = 0.95;
/// Degree of saturation above this means inconsistent masses, dimensions or Gs
/// [ref: saturation-check, common practice].
const OVERSATURATED_ABOVE: f64 = 1.05;

/// What was measured on the specimen before the test.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub(crate) struct SpecimenMeasurements {
    /// Ring (specimen) diameter, mm.
    pub(crate) diameter_mm: f64,
    /// Initial height H0, mm.
    pub(crate) height_mm: f64,
    /// Dry mass Ms, g (after oven-drying at the end of the test).
    pub(crate) dry_mass_g: f64,
    /// Specific gravity of the solids Gs, measured or assumed.
    pub(crate) specific_gravity: f64,
    /// Initial mass of the specimen, g; gives w0 = (M0 − Ms)/Ms.
    pub(crate) initial_mass_g: Option<f64>,
    /// Initial water content from trimmings (fraction); used when `initial_mass_g` is absent.
    pub(crate) initial_water_content: Option<f64>,
    /// Density of water ρw, g/cm³ (Mg/m³); 1.0 by common practice [ref: height-of-solids].
    pub(crate) water_density_g_per_cm3: f64,
}

impl SpecimenMeasurements {
    /// Measurements with ρw = 1.0 g/cm³ and no initial water content.
    pub(crate) fn new(diameter_mm: f64, height_mm: f64, dry_mass_g: f64, specific_gravity: f64) -> Self {
        SpecimenMeasurements {
            diameter_mm,
            height_mm,
            dry_mass_g,
            specific_gravity,
            initial_mass_g: None,
            initial_water_content: None,
            water_density_g_per_cm3: 1.0,
        }
    }
}

/// The specimen's initial state.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PhaseRelations {
    /// Plan area A = π·D²/4, mm².
    pub(crate) area_mm2: f64,
    /// Initial height H0, mm.
    pub(crate) height_mm: f64,
    /// Height of solids Hs = Ms/(Gs·ρw·A), mm [ref: height-of-solids].
    pub solids_height_mm: f64,
    /// e0 = (H0 − Hs)/Hs [ref: height-of-solids].
    pub e0: f64,
    /// Specific gravity used.
    pub(crate) specific_gravity: f64,
    /// Dry density Ms/(A·H0), Mg/m³.
    pub dry_density_mg_per_m3: f64,
    /// Bulk density M0/(A·H0), Mg/m³, when the initial mass is given.
    pub(crate) bulk_density_mg_per_m3: Option<f64>,
    /// Initial water content w0 (fraction).
    pub(crate) initial_water_content: Option<f64>,
    /// S0 = w0·Gs/e0 (Sr = w·Gs/e) [ref: saturation-check, common practice].
    pub(crate) initial_saturation: Option<f64>,
    /// Quality remarks.
    pub(crate) flags: Vec<Flag>,
}

impl PhaseRelations {
    /// Void ratio when the specimen is `height_mm` high: e = (H − Hs)/Hs [ref: height-of-solids].
    pub(crate) fn void_ratio_at(&self, height_mm: f64) -> f64 {
        (height_mm - self.solids_height_mm) / self.solids_height_mm
    }
}

/// Computes the initial phase relations. `Err` names the first measurement out of range.
pub(crate) fn phase_relations(m: &SpecimenMeasurements) -> Result<PhaseRelations, AnalysisError> {
    check_range("diameter_mm", m.diameter_mm, 1.0, 1000.0, "1 to 1000 mm")?;
    check_range("height_mm", m.height_mm, 0.5, 1000.0, "0.5 to 1000 mm")?;
    check_positive("dry_mass_g", m.dry_mass_g)?;
    check_range("specific_gravity", m.specific_gravity, 1.0, 6.0, "1.0 to 6.0")?;
    check_range("water_density_g_per_cm3", m.water_density_g_per_cm3, 0.9, 1.1, "0.9 to 1.1 g/cm³")?;
    let area_mm2 = PI * m.diameter_mm * m.diameter_mm / 4.0;
    let water_density_g_per_mm3 = m.water_density_g_per_cm3 * 1e-3;
    let solids_height_mm = m.dry_mass_g / (m.specific_gravity * water_density_g_per_mm3 * area_mm2);
    if solids_height_mm >= m.height_mm {
        return Err(AnalysisError::InvalidParameter {
            name: "dry_mass_g",
            value: m.dry_mass_g,
            allowed: "a mass whose height of solids is below the specimen height (e0 > 0)",
        });
    }
    let e0 = (m.height_mm - solids_height_mm) / solids_height_mm;
    let volume_cm3 = area_mm2 * m.height_mm * 1e-3;
    let mut w0 = m.initial_water_content;
    let mut bulk = None;
    if let Some(mass) = m.initial_mass_g {
        check_range("initial_mass_g", mass, m.dry_mass_g, 1e6, "at least the dry mass")?;
        w0 = Some((mass - m.dry_mass_g) / m.dry_mass_g);
        bulk = Some(mass / volume_cm3);
    } else if let Some(w) = w0 {
        check_range("initial_water_content", w, 0.0, 20.0, "0 to 20 (a fraction)")?;
    }
    let saturation = w0.map(|w| w * m.specific_gravity / e0);
    let mut flags = Vec::new();
    if let Some(s) = saturation {
        if s < PARTLY_SATURATED_BELOW {
            flags.push(Flag::PartlySaturated { saturation: s });
        } else if s > OVERSATURATED_ABOVE {
            flags.push(Flag::SaturationAboveOne { saturation: s });
        }
    }
    Ok(PhaseRelations {
        area_mm2,
        height_mm: m.height_mm,
        solids_height_mm,
        e0,
        specific_gravity: m.specific_gravity,
        dry_density_mg_per_m3: m.dry_mass_g / volume_cm3,
        bulk_density_mg_per_m3: bulk,
        initial_water_content: w0,
        initial_saturation: saturation,
        flags,
    })
}

/// Cross-check of e from the final water content of the (saturated) specimen.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub(crate) struct FinalWaterCheck {
    /// e at the end from the dry mass: (Hf − Hs)/Hs.
    pub(crate) e_final_from_dry_mass: f64,
    /// e at the end from the water content, saturated: ef = wf·Gs [ref: final-water-check, common practice].
    pub(crate) e_final_from_water: f64,
    /// e0 back-calculated from ef: 1 + e0 = (1 + ef)·H0/Hf (v/h constant) [ref: final-water-check, common practice].
    pub(crate) e0_from_final_water: f64,
    /// e0 (dry mass) − e0 (final water).
    pub(crate) discrepancy: f64,
    /// `VoidRatioMismatch` when |discrepancy| > 0.02.
    pub(crate) flags: Vec<Flag>,
}

/// Compares e0 from the dry mass with e0 back-calculated from the final water content and the final height
/// `final_height_mm` (both apparatus-corrected), as BS 1377 Form 5A computes e0 both ways [ref: final-water-check].
pub(crate) fn final_water_check(
    phase: &PhaseRelations,
    final_height_mm: f64,
    final_water_content: f64,
) -> Result<FinalWaterCheck, AnalysisError> {
    check_range("final_height_mm", final_height_mm, 1e-3, phase.height_mm * 2.0, "0 to twice the initial height")?;
    check_range("final_water_content", final_water_content, 0.0, 20.0, "0 to 20 (a fraction)")?;
    let e_final_from_water = final_water_content * phase.specific_gravity;
    let e0_from_final_water = (1.0 + e_final_from_water) * phase.height_mm / final_height_mm - 1.0;
    let discrepancy = phase.e0 - e0_from_final_water;
    let mut flags = Vec::new();
    if discrepancy.abs() > VOID_RATIO_DISCREPANCY_LIMIT {
        flags.push(Flag::VoidRatioMismatch { e0_from_dry_mass: phase.e0, e0_from_final_water });
    }
    Ok(FinalWaterCheck {
        e_final_from_dry_mass: phase.void_ratio_at(final_height_mm),
        e_final_from_water,
        e0_from_final_water,
        discrepancy,
        flags,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn solids_height_and_void_ratio_follow_the_textbook_formulae() {
        // Hs = Ms/(Gs·ρw·A), e0 = (H0 − Hs)/Hs [ref: height-of-solids]. Computed by hand: D = 75 mm gives
        // A = 4417.86 mm²; Ms = 120 g, Gs = 2.70 → Hs = 120/(2.70·0.001·4417.86) = 10.06016 mm; H0 = 20 mm →
        // e0 = 0.98804.
        let mut m = SpecimenMeasurements::new(75.0, 20.0, 120.0, 2.70);
        m.initial_mass_g = Some(163.0);
        let p = phase_relations(&m).unwrap();
        assert!((p.area_mm2 - 4417.8647).abs() < 1e-3);
        assert!((p.solids_height_mm - 10.06016).abs() < 1e-4);
        assert!((p.e0 - 0.98804).abs() < 1e-4);
        // w0 = 43/120 = 0.35833; S0 = w0·Gs/e0 = 0.97921 [ref: saturation-check, common practice].
        assert!((p.initial_water_content.unwrap() - 0.358333).abs() < 1e-6);
        assert!((p.initial_saturation.unwrap() - 0.97921).abs() < 1e-4);
        assert!(p.flags.is_empty());
        // ρd = Ms/V: V = 88.357 cm³ → 1.35812 Mg/m³.
        assert!((p.dry_density_mg_per_m3 - 1.35812).abs() < 1e-4);
    }

    #[test]
    fn unsaturated_and_inconsistent_specimens_are_flagged() {
        let mut m = SpecimenMeasurements::new(75.0, 20.0, 120.0, 2.70);
        m.initial_water_content = Some(0.25);
        let p = phase_relations(&m).unwrap();
        assert!(matches!(p.flags[..], [Flag::PartlySaturated { .. }]));
        m.initial_water_content = Some(0.45);
        let p = phase_relations(&m).unwrap();
        assert!(matches!(p.flags[..], [Flag::SaturationAboveOne { .. }]));
    }

    #[test]
    fn final_water_content_check_flags_only_discrepancies_over_0_02() {
        // Computed: Hs = 10.06016 mm. A specimen ending at Hf = 17 mm has e_f = 0.68983 by dry mass; a saturated
        // end water content of e_f/Gs = 0.25549 reproduces e0 exactly.
        let p = phase_relations(&SpecimenMeasurements::new(75.0, 20.0, 120.0, 2.70)).unwrap();
        let e_f = p.void_ratio_at(17.0);
        let consistent = final_water_check(&p, 17.0, e_f / 2.70).unwrap();
        assert!(consistent.discrepancy.abs() < 1e-12 && consistent.flags.is_empty());
        // 0.005 more water content → ef + 0.0135 → e0 + 0.0159: still within 0.02.
        let close = final_water_check(&p, 17.0, e_f / 2.70 + 0.005).unwrap();
        assert!((close.discrepancy + 0.0135 * 20.0 / 17.0).abs() < 1e-9 && close.flags.is_empty());
        // 0.01 more → e0 + 0.0318: flagged.
        let off = final_water_check(&p, 17.0, e_f / 2.70 + 0.01).unwrap();
        assert!(matches!(off.flags[..], [Flag::VoidRatioMismatch { .. }]));
    }

    #[test]
    fn impossible_specimens_are_refused_by_name() {
        let err = phase_relations(&SpecimenMeasurements::new(75.0, 20.0, 500.0, 2.70)).unwrap_err();
        assert!(matches!(err, AnalysisError::InvalidParameter { name: "dry_mass_g", .. }));
        let err = phase_relations(&SpecimenMeasurements::new(f64::NAN, 20.0, 100.0, 2.70)).unwrap_err();
        assert!(matches!(err, AnalysisError::InvalidParameter { name: "diameter_mm", .. }));
    }
}

#[cfg(test)]
mod properties {
    use super::*;
    use proptest::prelude::*;

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(5000))]

        #[test]
        fn any_measurements_give_relations_or_a_typed_error(
            d in any::<f64>(), h in any::<f64>(), ms in any::<f64>(), gs in any::<f64>(),
            m0 in prop::option::of(any::<f64>()), w0 in prop::option::of(any::<f64>()),
            hf in any::<f64>(), wf in any::<f64>(),
        ) {
            let m = SpecimenMeasurements { initial_mass_g: m0, initial_water_content: w0, ..SpecimenMeasurements::new(d, h, ms, gs) };
            if let Ok(p) = phase_relations(&m) {
                prop_assert!(p.e0 > 0.0 && p.solids_height_mm > 0.0);
                let _ = final_water_check(&p, hf, wf);
            }
        }
    }
}
