//! The units a lab reads results in. Storage, the API and the reduction stay SI (kPa, mm, mm²/min, m/s);
//! these convert for display only, each factor exact or from NIST Special Publication 811 (2008),
//! Appendix B.9, as cited beside it.

use serde::Serialize;

/// A displayed unit: its name and what one stored (SI) unit is in it.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct DisplayUnit {
    /// As printed after a value: "kPa", "tsf".
    pub name: &'static str,
    /// Value shown = stored value × `per_stored`.
    pub per_stored: f64,
}

/// 1 lbf/ft² = 47.880 26 Pa (NIST SP 811, B.9: pound-force per square foot, 4.788 026 E+01 Pa).
const PA_PER_PSF: f64 = 47.880_26;
/// 1 short ton-force (2000 lbf) per ft² = 2000 × 47.880 26 Pa = 95.760 52 kPa (NIST SP 811, B.9, ton-force
/// (2000 lbf) per square foot, 9.576 052 E+04 Pa).
const KPA_PER_TSF: f64 = 2000.0 * PA_PER_PSF / 1000.0;
/// 1 in = 25.4 mm exactly (international inch, 1959).
const MM_PER_IN: f64 = 25.4;
/// 1 ft² = 0.092 903 04 m² exactly (from the international foot, 0.3048 m).
const M2_PER_FT2: f64 = 0.3048 * 0.3048;
/// Minutes in a year of 365.25 days (the Julian year, NIST SP 811 B.9: year, 365.25 d).
const MIN_PER_YEAR: f64 = 365.25 * 24.0 * 60.0;

/// Stresses, stored in kPa.
pub const STRESS_UNITS: [DisplayUnit; 3] = [
    DisplayUnit { name: "kPa", per_stored: 1.0 },
    DisplayUnit { name: "tsf", per_stored: 1.0 / KPA_PER_TSF },
    DisplayUnit { name: "psf", per_stored: 1000.0 / PA_PER_PSF },
];
/// Lengths (gauge readings, heights, settlements), stored in mm.
pub const LENGTH_UNITS: [DisplayUnit; 2] =
    [DisplayUnit { name: "mm", per_stored: 1.0 }, DisplayUnit { name: "in", per_stored: 1.0 / MM_PER_IN }];
/// Coefficients of consolidation, stored in mm²/min.
pub const CV_UNITS: [DisplayUnit; 3] = [
    DisplayUnit { name: "mm²/min", per_stored: 1.0 },
    DisplayUnit { name: "m²/year", per_stored: 1e-6 * MIN_PER_YEAR },
    DisplayUnit { name: "ft²/day", per_stored: 1e-6 * 1440.0 / M2_PER_FT2 },
];
/// Hydraulic conductivity, stored in m/s.
pub const K_UNITS: [DisplayUnit; 2] =
    [DisplayUnit { name: "m/s", per_stored: 1.0 }, DisplayUnit { name: "cm/s", per_stored: 100.0 }];

impl DisplayUnit {
    /// A stored (SI) value in this unit.
    pub fn show(&self, stored: f64) -> f64 {
        stored * self.per_stored
    }

    /// The unit for a CSV column name: "kpa", "in", "mm2_per_min", "m2_per_year", "cm_per_s", "per_tsf".
    pub fn slug(&self) -> String {
        match self.name.strip_prefix("1/") {
            Some(per) => format!("per_{}", per.to_ascii_lowercase()),
            None => self.name.to_ascii_lowercase().replace('²', "2").replace('/', "_per_"),
        }
    }
}

/// Every unit a lab may choose, by quantity: what `/healthz` offers the dashboard's switch.
#[derive(Clone, Copy, Debug, Serialize)]
pub struct DisplayOptions {
    /// Stress units.
    pub stress: &'static [DisplayUnit],
    /// Length units.
    pub length: &'static [DisplayUnit],
    /// cv units.
    pub cv: &'static [DisplayUnit],
    /// k units.
    pub k: &'static [DisplayUnit],
}

/// The lists above, for `/healthz`.
pub const OPTIONS: DisplayOptions =
    DisplayOptions { stress: &STRESS_UNITS, length: &LENGTH_UNITS, cv: &CV_UNITS, k: &K_UNITS };

/// The units a lab shows its results in (`[display]` in the config).
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct DisplayUnits {
    /// Stress.
    pub stress: DisplayUnit,
    /// Length.
    pub length: DisplayUnit,
    /// cv.
    pub cv: DisplayUnit,
    /// k.
    pub k: DisplayUnit,
}

impl Default for DisplayUnits {
    /// SI: kPa, mm, mm²/min, m/s.
    fn default() -> Self {
        DisplayUnits { stress: STRESS_UNITS[0], length: LENGTH_UNITS[0], cv: CV_UNITS[0], k: K_UNITS[0] }
    }
}

impl DisplayUnits {
    /// True for the stored units themselves (kPa, mm, mm²/min, m/s).
    pub fn is_si(&self) -> bool {
        *self == DisplayUnits::default()
    }

    /// The unit of mv, a compressibility (1/stress), stored per kPa: m²/MN beside kPa (as the trade writes it,
    /// `common practice`), else one over the stress unit ("1/tsf", "1/psf").
    pub fn mv(&self) -> DisplayUnit {
        match self.stress.name {
            "tsf" => DisplayUnit { name: "1/tsf", per_stored: KPA_PER_TSF },
            "psf" => DisplayUnit { name: "1/psf", per_stored: PA_PER_PSF / 1000.0 },
            _ => DisplayUnit { name: "m²/MN", per_stored: 1000.0 },
        }
    }

    /// One line for a reader: "stress in tsf, lengths in in, cv in ft²/day, k in cm/s, mv in 1/tsf".
    pub fn sentence(&self) -> String {
        format!(
            "stress in {}, lengths in {}, cv in {}, k in {}, mv in {}",
            self.stress.name,
            self.length.name,
            self.cv.name,
            self.k.name,
            self.mv().name
        )
    }
}

/// The unit named `name` among `units` (ASCII spellings accepted: `mm2/min`, `m2/year`, `ft2/day`).
pub fn find_unit(units: &[DisplayUnit], name: &str) -> Option<DisplayUnit> {
    let wanted = name.trim().replace('2', "²");
    units.iter().copied().find(|u| u.name.eq_ignore_ascii_case(&wanted) || u.name == name.trim())
}

/// The names of `units`, for messages: "kPa, tsf, psf".
pub fn names(units: &[DisplayUnit]) -> String {
    units.iter().map(|u| u.name).collect::<Vec<_>>().join(", ")
}

#[cfg(test)]
mod tests {
    use super::*;

    fn close(a: f64, b: f64, rel: f64) -> bool {
        ((a - b) / b).abs() <= rel
    }

    #[test]
    fn the_factors_are_those_of_nist_sp_811() {
        // NIST SP 811 B.9: 1 psf = 47.880 26 Pa, so 1 kPa = 20.885 43 psf (computed).
        assert!(close(STRESS_UNITS[2].per_stored, 20.885_43, 1e-6));
        // 1 tsf (short) = 95.760 52 kPa, so 100 kPa = 1.044 27 tsf (computed).
        assert!(close(100.0 * STRESS_UNITS[1].per_stored, 1.044_27, 1e-5));
        // 1 in = 25.4 mm exactly.
        assert!(close(25.4 * LENGTH_UNITS[1].per_stored, 1.0, 1e-15));
        // 1 mm²/min = 0.525 96 m²/year (365.25 d) and 0.015 500 0 ft²/day (computed: 1440e-6 / 0.092 903 04).
        assert!(close(CV_UNITS[1].per_stored, 0.525_96, 1e-6));
        assert!(close(CV_UNITS[2].per_stored, 0.015_500_03, 1e-6));
        assert_eq!(K_UNITS[1].per_stored, 100.0);
    }

    #[test]
    fn mv_goes_with_the_stress_unit_and_slugs_name_columns() {
        // mv per tsf = mv per kPa × 95.760 52 kPa/tsf; per psf = mv per kPa × 0.047 880 26 (NIST SP 811 B.9).
        let tsf = DisplayUnits { stress: STRESS_UNITS[1], ..DisplayUnits::default() };
        assert!(close(tsf.mv().show(1e-3), 0.095_760_52, 1e-9));
        let psf = DisplayUnits { stress: STRESS_UNITS[2], ..DisplayUnits::default() };
        assert!(close(psf.mv().show(1e-3), 4.788_026e-5, 1e-9));
        // 1e-3 per kPa is 1 m²/MN (1 MN/m² = 1000 kPa).
        assert!(close(DisplayUnits::default().mv().show(1e-3), 1.0, 1e-12));
        assert_eq!(CV_UNITS[1].slug(), "m2_per_year");
        assert_eq!(K_UNITS[1].slug(), "cm_per_s");
        assert_eq!(STRESS_UNITS[0].slug(), "kpa");
        assert_eq!(tsf.mv().slug(), "per_tsf");
        assert!(DisplayUnits::default().is_si() && !tsf.is_si());
    }

    #[test]
    fn units_are_found_by_their_names_and_ascii_spellings() {
        assert_eq!(find_unit(&CV_UNITS, "m2/year").map(|u| u.name), Some("m²/year"));
        assert_eq!(find_unit(&STRESS_UNITS, "TSF").map(|u| u.name), Some("tsf"));
        assert_eq!(find_unit(&LENGTH_UNITS, "mm").map(|u| u.name), Some("mm"));
        assert_eq!(find_unit(&STRESS_UNITS, "MPa"), None);
        assert_eq!(names(&STRESS_UNITS), "kPa, tsf, psf");
    }
}
