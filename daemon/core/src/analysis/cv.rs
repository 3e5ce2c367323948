//! Coefficient of consolidation from a construction's t50 or t90: drainage path, cv = T·Hdr²/t, unit
//! conversions, and the optional correction of cv to 20 °C by the viscosity of water. It must not run a
//! construction itself; it only turns times and heights into cv.

use serde::Serialize;

use super::interp::Pchip;
use super::{AnalysisError, check_positive};

/// cv [m²/yr] = cv [mm²/min] × this: 1e-6 m²/mm² × 525 960 min per 365.25-day year [ref: cv-units, computed].
pub(crate) const M2_PER_YEAR_PER_MM2_PER_MIN: f64 = 0.52596;
/// cv [cm²/s] = cv [mm²/min] × this [ref: cv-units, computed].
#[cfg(test)]
pub(crate) const CM2_PER_S_PER_MM2_PER_MIN: f64 = 0.01 / 60.0;
/// cv [m²/s] = cv [mm²/min] × this [ref: cv-units, computed].
pub(crate) const M2_PER_S_PER_MM2_PER_MIN: f64 = 1e-6 / 60.0;

/// Which faces of the specimen drain.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, serde::Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Drainage {
    /// Top and bottom: Hdr = H/2 (the usual oedometer set-up).
    Double,
    /// One face: Hdr = H.
    Single,
}

impl Drainage {
    /// Longest drainage path for a specimen of height `height_mm` [ref: drainage-path].
    pub(crate) fn path_mm(self, height_mm: f64) -> f64 {
        match self {
            Drainage::Double => 0.5 * height_mm,
            Drainage::Single => height_mm,
        }
    }
}

/// Which specimen height stands for "the height during the increment" [ref: drainage-path].
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub(crate) enum HeightBasis {
    /// The height at 50 % consolidation, H0 − ΔH(d50), each method at its own d50 — ASTM D2435 practice
    /// [ref: drainage-path, from memory]. The default.
    AtHalfConsolidation,
}

/// Where the drainage path comes from.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
#[serde(rename_all = "snake_case")]
pub(crate) enum DrainagePath {
    /// Given directly, mm (e.g. `--drainage-path-mm` on the command line).
    Fixed {
        /// The drainage path.
        path_mm: f64,
    },
    /// From the specimen height during the increment; needs [`SpecimenState`].
    FromHeight {
        /// Drainage faces.
        drainage: Drainage,
        /// Which height.
        basis: HeightBasis,
    },
}

/// Ties gauge readings to specimen height: the specimen was `height_mm` high when the (apparatus-corrected)
/// gauge read `at_reading_mm`, so H = height_mm − (d − at_reading_mm), compression positive
/// [ref: drainage-path, common practice].
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub(crate) struct SpecimenState {
    /// Specimen height, mm.
    pub(crate) height_mm: f64,
    /// The reading at which it had that height, mm.
    pub(crate) at_reading_mm: f64,
}

impl SpecimenState {
    /// Specimen height when the gauge reads `reading_mm`.
    pub(crate) fn height_at_mm(&self, reading_mm: f64) -> f64 {
        self.height_mm - (reading_mm - self.at_reading_mm)
    }
}

/// Which construction a cv comes from.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub(crate) enum Method {
    /// √t, from t90.
    Taylor,
    /// log t, from t50.
    Casagrande,
}

impl Method {
    /// The API's name: `"taylor"` or `"casagrande"`.
    pub(crate) fn name(self) -> &'static str {
        match self {
            Method::Taylor => "taylor",
            Method::Casagrande => "casagrande",
        }
    }
}

/// One cv with everything that went into it.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct CvEstimate {
    /// The construction.
    pub(crate) method: Method,
    /// cv, mm²/min, at the test temperature.
    pub cv_mm2_per_min: f64,
    /// The same in m²/yr.
    pub(crate) cv_m2_per_year: f64,
    /// Time factor used (0.848 with t90, 0.197 with t50).
    pub(crate) time_factor: f64,
    /// t90 or t50, min.
    pub(crate) time_min: f64,
    /// Drainage path Hdr, mm.
    pub(crate) drainage_path_mm: f64,
    /// Specimen height Hdr came from, mm (`None` for a fixed path).
    pub(crate) height_mm: Option<f64>,
    /// cv corrected to 20 °C by the viscosity ratio, mm²/min, when a temperature was given.
    pub(crate) cv_20c_mm2_per_min: Option<f64>,
}

/// cv = T·Hdr²/t [ref: cv-formula]: mm²/min from a time factor, a drainage path in mm and a time in min.
pub(crate) fn cv_mm2_per_min(time_factor: f64, drainage_path_mm: f64, time_min: f64) -> Result<f64, AnalysisError> {
    check_positive("time_factor", time_factor)?;
    check_positive("drainage_path_mm", drainage_path_mm)?;
    check_positive("time_min", time_min)?;
    Ok(time_factor * drainage_path_mm * drainage_path_mm / time_min)
}

/// mm²/min → m²/yr.
pub(crate) fn to_m2_per_year(cv_mm2_per_min: f64) -> f64 {
    cv_mm2_per_min * M2_PER_YEAR_PER_MM2_PER_MIN
}

/// m²/yr → mm²/min.
#[cfg(test)]
pub(crate) fn from_m2_per_year(cv_m2_per_year: f64) -> f64 {
    cv_m2_per_year / M2_PER_YEAR_PER_MM2_PER_MIN
}

/// mm²/min → cm²/s.
#[cfg(test)]
pub(crate) fn to_cm2_per_s(cv_mm2_per_min: f64) -> f64 {
    cv_mm2_per_min * CM2_PER_S_PER_MM2_PER_MIN
}

/// mm²/min → m²/s.
#[cfg(test)]
pub(crate) fn to_m2_per_s(cv_mm2_per_min: f64) -> f64 {
    cv_mm2_per_min * M2_PER_S_PER_MM2_PER_MIN
}

/// Dynamic viscosity of liquid water at 0.101325 MPa, (°C, mPa·s), every 2 °C: the IAPWS 2008 formulation
/// (Huber et al. 2009, J. Phys. Chem. Ref. Data 38, 101 [ref: viscosity-correction, from memory]) evaluated
/// with the `iapws` Python package 1.5.5, a general-purpose reference library.
const WATER_VISCOSITY_MPA_S: [(f64, f64); 31] = [
    (0.0, 1.791756),
    (2.0, 1.673515),
    (4.0, 1.567292),
    (6.0, 1.471477),
    (8.0, 1.384724),
    (10.0, 1.305900),
    (12.0, 1.234043),
    (14.0, 1.168337),
    (16.0, 1.108081),
    (18.0, 1.052674),
    (20.0, 1.001596),
    (22.0, 0.954396),
    (24.0, 0.910682),
    (26.0, 0.870109),
    (28.0, 0.832378),
    (30.0, 0.797222),
    (32.0, 0.764407),
    (34.0, 0.733725),
    (36.0, 0.704992),
    (38.0, 0.678042),
    (40.0, 0.652729),
    (42.0, 0.628919),
    (44.0, 0.606496),
    (46.0, 0.585350),
    (48.0, 0.565386),
    (50.0, 0.546516),
    (52.0, 0.528661),
    (54.0, 0.511748),
    (56.0, 0.495712),
    (58.0, 0.480493),
    (60.0, 0.466035),
];

/// Viscosity of water at `temperature_c` (0–60 °C), mPa·s, by monotone interpolation of the table above;
/// `None` outside it.
pub(crate) fn water_viscosity_mpa_s(temperature_c: f64) -> Option<f64> {
    let (low, high) = (WATER_VISCOSITY_MPA_S[0].0, WATER_VISCOSITY_MPA_S[WATER_VISCOSITY_MPA_S.len() - 1].0);
    if !(low..=high).contains(&temperature_c) {
        return None;
    }
    let (t, mu): (Vec<f64>, Vec<f64>) = WATER_VISCOSITY_MPA_S.iter().copied().unzip();
    Pchip::new(t, mu).ok().map(|p| p.eval(temperature_c))
}

/// μ(T)/μ(20 °C): cv,20 = cv,T · μT/μ20 [ref: viscosity-correction, from memory]. `None` outside 0–60 °C.
pub(crate) fn viscosity_ratio_to_20c(temperature_c: f64) -> Option<f64> {
    Some(water_viscosity_mpa_s(temperature_c)? / water_viscosity_mpa_s(20.0)?)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn unit_factors_match_the_reference_conversions() {
        // [ref: cv-units, computed]: cv[m²/yr] = cv[mm²/min] × 0.52596; cv[cm²/s] = cv[mm²/min] × 1.6667e-4.
        assert!((to_m2_per_year(1.0) - 1e-6 * 60.0 * 24.0 * 365.25).abs() < 1e-12);
        assert!((to_cm2_per_s(1.0) - 1.6667e-4).abs() < 1e-8);
        assert!((from_m2_per_year(to_m2_per_year(3.7)) - 3.7).abs() < 1e-12);
        assert!((to_m2_per_s(60.0) - 1e-6).abs() < 1e-18);
    }

    #[test]
    fn bs_style_constants_follow_from_the_time_factors() {
        // [ref: cv-units, computed]: with H̄ the full height in mm, double drainage and t in min,
        // cv[m²/yr] = 0.1115·H̄²/t90 and 0.0259·H̄²/t50 (printed 0.112 and 0.026 in BS 1377-5, from memory).
        let height = 20.0;
        let t90 = cv_mm2_per_min(0.848, Drainage::Double.path_mm(height), 1.0).unwrap();
        assert!((to_m2_per_year(t90) / (height * height) - 0.1115).abs() < 5e-5);
        let t50 = cv_mm2_per_min(0.197, Drainage::Double.path_mm(height), 1.0).unwrap();
        assert!((to_m2_per_year(t50) / (height * height) - 0.0259).abs() < 5e-5);
        assert_eq!(Drainage::Single.path_mm(height), 20.0);
    }

    #[test]
    fn cv_refuses_non_positive_inputs() {
        assert!(cv_mm2_per_min(0.848, 10.0, 0.0).is_err());
        assert!(cv_mm2_per_min(0.848, f64::NAN, 1.0).is_err());
        assert!(cv_mm2_per_min(-0.848, 10.0, 1.0).is_err());
    }

    #[test]
    fn viscosity_between_table_points_matches_iapws() {
        // IAPWS 2008 formulation via the `iapws` Python package 1.5.5 at 0.101325 MPa, at temperatures
        // between the table's 2 °C steps; monotone cubic interpolation must hold them to 0.02 %.
        for (t, mu) in [
            (17.3, 1.0715492450485533),
            (23.7, 0.9170306765021271),
            (4.4, 1.547342590655182),
            (31.1, 0.7788977236335509),
        ] {
            let got = water_viscosity_mpa_s(t).unwrap();
            assert!(((got - mu) / mu).abs() < 2e-4, "{t} °C: {got} vs {mu}");
        }
        assert_eq!(viscosity_ratio_to_20c(20.0), Some(1.0));
        // Warmer water is less viscous, so cv measured warm is corrected down.
        assert!(viscosity_ratio_to_20c(25.0).unwrap() < 1.0);
        assert_eq!(viscosity_ratio_to_20c(80.0), None);
        assert_eq!(viscosity_ratio_to_20c(f64::NAN), None);
    }

    #[test]
    fn specimen_height_follows_the_gauge() {
        let state = SpecimenState { height_mm: 19.0, at_reading_mm: 1.0 };
        assert_eq!(state.height_at_mm(1.5), 18.5);
    }
}
