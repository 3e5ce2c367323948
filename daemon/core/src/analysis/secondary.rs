//! Secondary compression index Cα from the straight secondary line of the log-t construction, on strain and
//! void-ratio bases [ref: secondary-compression], with the time window it was fitted over. It must not find the line
//! itself (that is `casagrande`).

use serde::Serialize;

use super::casagrande::SecondaryLine;
use super::flags::Flag;
use super::{AnalysisError, check_positive};

/// Cα of one increment.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct SecondaryCompression {
    /// Cα(ε) = Δε/Δlog10 t, ε over `height_mm` [ref: secondary-compression].
    pub c_alpha_strain: f64,
    /// Cα,e = Δe/Δlog10 t = Cα(ε)·(1 + e_p) [ref: secondary-compression]; needs Hs.
    pub(crate) c_alpha_void_ratio: Option<f64>,
    /// Slope of the secondary line, mm per log cycle.
    pub(crate) slope_mm_per_log_cycle: f64,
    /// The height the strain is taken over: the specimen height at the start of secondary compression
    /// (at d100 of the log-t construction) — so 1 + e_p = height/Hs [ref: secondary-compression, common practice].
    pub(crate) height_mm: f64,
    /// Fitted window start, min.
    pub(crate) t_start_min: f64,
    /// Fitted window end, min.
    pub(crate) t_end_min: f64,
}

/// Cα from a secondary line. `height_mm` is the specimen height at the start of secondary compression;
/// `solids_height_mm` (Hs) adds the void-ratio basis. The flag list gets `SecondarySlopeNegative` when the
/// line slopes towards swelling.
pub(crate) fn secondary_compression(
    line: &SecondaryLine,
    height_mm: f64,
    solids_height_mm: Option<f64>,
    flags: &mut Vec<Flag>,
) -> Result<SecondaryCompression, AnalysisError> {
    check_positive("height_mm", height_mm)?;
    if let Some(hs) = solids_height_mm {
        check_positive("solids_height_mm", hs)?;
    }
    let slope = line.line.slope;
    if slope < 0.0 {
        flags.push(Flag::SecondarySlopeNegative);
    }
    Ok(SecondaryCompression {
        c_alpha_strain: slope / height_mm,
        c_alpha_void_ratio: solids_height_mm.map(|hs| slope / hs),
        slope_mm_per_log_cycle: slope,
        height_mm,
        t_start_min: line.t_start_min,
        t_end_min: line.t_end_min,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::analysis::fit::Line;

    #[test]
    fn strain_and_void_ratio_bases_obey_the_textbook_relation() {
        // [ref: secondary-compression]: Cα(ε) = Cα,e/(1 + e_p). With H = 18 mm and Hs = 10 mm, 1 + e_p = 1.8.
        let line = SecondaryLine {
            first_node: 10,
            last_node: 20,
            t_start_min: 200.0,
            t_end_min: 1440.0,
            points: 11,
            line: Line { slope: 0.09, intercept: 1.0 },
        };
        let mut flags = Vec::new();
        let ca = secondary_compression(&line, 18.0, Some(10.0), &mut flags).unwrap();
        assert!((ca.c_alpha_strain - 0.005).abs() < 1e-15);
        let e_p = 18.0 / 10.0 - 1.0;
        assert!((ca.c_alpha_strain - ca.c_alpha_void_ratio.unwrap() / (1.0 + e_p)).abs() < 1e-15);
        assert!(flags.is_empty());
        // 0.005 lies in the NC-clay range 0.005–0.030 of Venkatramaiah Table 7.1 [ref: secondary-ranges].
        assert!((0.005..=0.030).contains(&ca.c_alpha_strain));
    }

    #[test]
    fn swelling_slope_is_flagged_and_bad_heights_refused() {
        let mut line = SecondaryLine {
            first_node: 0,
            last_node: 3,
            t_start_min: 1.0,
            t_end_min: 10.0,
            points: 4,
            line: Line { slope: -0.01, intercept: 0.0 },
        };
        let mut flags = Vec::new();
        secondary_compression(&line, 20.0, None, &mut flags).unwrap();
        assert_eq!(flags, vec![Flag::SecondarySlopeNegative]);
        line.line.slope = 0.01;
        assert!(secondary_compression(&line, 0.0, None, &mut flags).is_err());
        assert!(secondary_compression(&line, 20.0, Some(-1.0), &mut flags).is_err());
    }
}
