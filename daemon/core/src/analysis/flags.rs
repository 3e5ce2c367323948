//! Quality flags that every analysis result carries: what was doubtful or undetermined, in words a
//! technician can act on. A flag never changes a number; it must not be used to carry results.

use std::fmt;

use serde::ser::SerializeStruct;

/// One quality remark on a result. `Display` gives the sentence shown on the dashboard; [`Flag::code`] a
/// stable machine name. Serialises as `{"code": …, "message": …}`.
#[derive(Debug, Clone, PartialEq)]
pub enum Flag {
    /// Too few readings after the load went on for any construction.
    TooFewReadings {
        /// Readings (binned nodes) with t > 0.
        got: usize,
        /// The least a construction needs.
        needed: usize,
    },
    /// The increment swells overall; the time-curve constructions here assume compression.
    NetSwelling,
    /// Primary compression under 50 gauge resolutions: the constructions cannot resolve it.
    SmallPrimary {
        /// d100 − d0.
        primary_mm: f64,
        /// The gauge resolution used.
        resolution_mm: f64,
    },
    /// A fit had fewer points than wanted; its result is shown but weak.
    FitWindowTooShort {
        /// Which fit.
        construction: &'static str,
        /// Points it had.
        points: usize,
        /// Points wanted.
        needed: usize,
    },
    /// The curve has not yet met Taylor's construction line.
    T90NotReached,
    /// No straight secondary branch on log t yet, so d100 (Casagrande) is undetermined.
    NoSecondaryBranch,
    /// The steepest log-t slope is at the last readings: the inflection may not have been passed.
    InflectionNotPassed,
    /// The curve does not reach d50 between its readings.
    T50NotFound,
    /// No 1:4 time pair lies inside the parabolic (√t-straight) start; the earliest pair was used.
    OffsetOutsideParabola {
        /// t1 of the pair used.
        t1_min: f64,
    },
    /// No time pair t1, 4·t1 inside the readings: Casagrande d0 undetermined.
    NoOffsetPair,
    /// The d100 intersection falls outside the readings or before the inflection.
    IntersectionOutsideData,
    /// Load increment ratio under 0.7 [ref: load-increment-ratio].
    LoadIncrementRatioLow {
        /// Δσ/σ before the increment.
        lir: f64,
    },
    /// The increment's stress range contains σ′p [ref: load-increment-ratio].
    SpansPreconsolidation {
        /// The σ′p estimate used.
        sigma_p_kpa: f64,
    },
    /// Taylor and Casagrande cv differ by more than a factor of 2.
    MethodsDisagree {
        /// cv Taylor / cv Casagrande.
        ratio: f64,
    },
    /// The secondary line slopes towards swelling (noise, or rebound): Cα is negative.
    SecondarySlopeNegative,
    /// Cα needs the specimen height (and Hs for the void-ratio basis), which was not given.
    HeightUnknown,
    /// The applied stress lies outside the calibrated range; no deflection is given (never extrapolated).
    DeflectionOutsideCalibration {
        /// The applied stress.
        stress_kpa: f64,
        /// Lowest calibrated stress on the branch used.
        min_kpa: f64,
        /// Highest calibrated stress on the branch used.
        max_kpa: f64,
    },
    /// The unloading branch was asked for but not calibrated; the loading branch was used.
    UnloadingBranchMissing,
    /// e0 from the dry mass and e0 back-calculated from the final water content differ by > 0.02.
    VoidRatioMismatch {
        /// e0 = (H0 − Hs)/Hs.
        e0_from_dry_mass: f64,
        /// e0 from wf·Gs and the height ratio.
        e0_from_final_water: f64,
    },
    /// Initial degree of saturation under 95 %: cv assumes a saturated specimen [ref: saturation-check].
    PartlySaturated {
        /// S0 as a fraction.
        saturation: f64,
    },
    /// Initial degree of saturation over 105 %: masses, dimensions or Gs are inconsistent.
    SaturationAboveOne {
        /// S0 as a fraction.
        saturation: f64,
    },
    /// Cc fitted to fewer than three points of the virgin branch.
    FewVirginPoints {
        /// Points used.
        points: usize,
    },
    /// Some virgin-line points are at or below σ′p, so Cc may be too flat.
    VirginPointsBelowPreconsolidation,
    /// No unload–reload cycle: Cr undetermined.
    NoUnloadReload,
    /// Too few points on the loading branch for a σ′p construction.
    PreconsolidationUndetermined {
        /// Which method.
        method: &'static str,
    },
    /// The σ′p construction lands outside the loading stresses it used; no σ′p is reported.
    PreconsolidationOutsideData {
        /// Which method.
        method: &'static str,
        /// Where it landed.
        sigma_p_kpa: f64,
    },
    /// No bend into a steeper (virgin) line: the curve never steepens before the virgin run (Casagrande), or
    /// no later line is steeper than the early one (work).
    PreconsolidationNoBend {
        /// Which method.
        method: &'static str,
    },
    /// The construction's lines do not meet (parallel to rounding).
    PreconsolidationNoIntersection {
        /// Which method.
        method: &'static str,
    },
    /// No run of the wanted length on the steep part of the loading branch lies on a straight line; Cc is
    /// from a shorter run.
    NoStraightVirginRun {
        /// Points wanted in the run.
        wanted: usize,
    },
    /// e does not fall along any run of loading points: no virgin line, Cc undetermined.
    NoVirginLine,
    /// No end-of-primary settlement for an increment; its end-of-increment value was used.
    EndOfPrimaryMissing {
        /// The increment's stress.
        stress_kpa: f64,
    },
    /// Temperature outside the viscosity table: cv not corrected to 20 °C.
    TemperatureOutsideTable {
        /// The temperature given.
        temperature_c: f64,
    },
    /// Taylor's √t straight part spans under 20 % of the primary: its cv is not trusted.
    StraightPartShort {
        /// Share of d100 − d0 the fitted straight part spans.
        share: f64,
    },
    /// A straight log-t tail, but none yet that starts after 1.5 × t100 and spans the least log cycles.
    SecondaryTooSoon {
        /// t100 where that tail met the inflection tangent, min.
        t100_min: f64,
        /// Where the secondary line may start, min.
        from_min: f64,
        /// How far the readings must reach for it, min.
        until_min: f64,
    },
    /// t90 is not above twice t50: the constructions are inconsistent (a Terzaghi curve has t90 = 4.3 × t50).
    T90NotAfterT50 {
        /// t90 by √t, min.
        t90_min: f64,
        /// The t50 compared, min.
        t50_min: f64,
        /// Whose t50: "log t" or "√t".
        t50_from: &'static str,
    },
    /// The √t and log-t d100 differ by more than the tolerance.
    EndsOfPrimaryApart {
        /// d100 by √t, mm.
        taylor_mm: f64,
        /// d100 by log t, mm.
        casagrande_mm: f64,
        /// The tolerance, mm.
        tolerance_mm: f64,
    },
    /// Neither construction's cv passed the checks: no cv is proposed for k.
    CvNotChosen {
        /// Why, in words.
        reason: String,
    },
}

impl Flag {
    /// A stable snake_case name for the flag, for programs.
    pub fn code(&self) -> &'static str {
        match self {
            Flag::TooFewReadings { .. } => "too_few_readings",
            Flag::NetSwelling => "net_swelling",
            Flag::SmallPrimary { .. } => "small_primary",
            Flag::FitWindowTooShort { .. } => "fit_window_too_short",
            Flag::T90NotReached => "t90_not_reached",
            Flag::NoSecondaryBranch => "no_secondary_branch",
            Flag::InflectionNotPassed => "inflection_not_passed",
            Flag::T50NotFound => "t50_not_found",
            Flag::OffsetOutsideParabola { .. } => "offset_outside_parabola",
            Flag::NoOffsetPair => "no_offset_pair",
            Flag::IntersectionOutsideData => "intersection_outside_data",
            Flag::LoadIncrementRatioLow { .. } => "lir_low",
            Flag::SpansPreconsolidation { .. } => "spans_preconsolidation",
            Flag::MethodsDisagree { .. } => "methods_disagree",
            Flag::SecondarySlopeNegative => "secondary_slope_negative",
            Flag::HeightUnknown => "height_unknown",
            Flag::DeflectionOutsideCalibration { .. } => "deflection_outside_calibration",
            Flag::UnloadingBranchMissing => "unloading_branch_missing",
            Flag::VoidRatioMismatch { .. } => "void_ratio_mismatch",
            Flag::PartlySaturated { .. } => "partly_saturated",
            Flag::SaturationAboveOne { .. } => "saturation_above_one",
            Flag::FewVirginPoints { .. } => "few_virgin_points",
            Flag::VirginPointsBelowPreconsolidation => "virgin_points_below_preconsolidation",
            Flag::NoUnloadReload => "no_unload_reload",
            Flag::PreconsolidationUndetermined { .. } => "preconsolidation_undetermined",
            Flag::PreconsolidationOutsideData { .. } => "preconsolidation_outside_data",
            Flag::PreconsolidationNoBend { .. } => "preconsolidation_no_bend",
            Flag::PreconsolidationNoIntersection { .. } => "preconsolidation_no_intersection",
            Flag::NoStraightVirginRun { .. } => "no_straight_virgin_run",
            Flag::NoVirginLine => "no_virgin_line",
            Flag::EndOfPrimaryMissing { .. } => "end_of_primary_missing",
            Flag::TemperatureOutsideTable { .. } => "temperature_outside_table",
            Flag::StraightPartShort { .. } => "straight_part_short",
            Flag::SecondaryTooSoon { .. } => "secondary_too_soon",
            Flag::T90NotAfterT50 { .. } => "t90_not_after_t50",
            Flag::EndsOfPrimaryApart { .. } => "ends_of_primary_apart",
            Flag::CvNotChosen { .. } => "cv_not_chosen",
        }
    }
}

impl fmt::Display for Flag {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Flag::TooFewReadings { got, needed } => {
                write!(f, "only {got} readings after the load went on; constructions need {needed}")
            }
            Flag::NetSwelling => f.write_str("net swelling: the time-curve constructions need compression"),
            Flag::SmallPrimary { primary_mm, resolution_mm } => write!(
                f,
                "primary compression {primary_mm:.4} mm is under 50 gauge resolutions ({resolution_mm:.4} mm): \
                 constructions unreliable"
            ),
            Flag::FitWindowTooShort { construction, points, needed } => {
                write!(f, "{construction}: fit window too short ({points} points, {needed} wanted)")
            }
            Flag::T90NotReached => f.write_str("curve has not met the Taylor construction line yet: t90 undetermined"),
            Flag::NoSecondaryBranch => f.write_str("no secondary branch yet: d100 undetermined"),
            Flag::InflectionNotPassed => {
                f.write_str("steepest log-time slope is at the last readings: inflection not yet passed")
            }
            Flag::T50NotFound => f.write_str("d50 not reached between readings: t50 undetermined"),
            Flag::OffsetOutsideParabola { t1_min } => {
                write!(
                    f,
                    "no 1:4 time pair inside the parabolic start; d0 from t1 = {} only, may be biased",
                    minutes(*t1_min)
                )
            }
            Flag::NoOffsetPair => f.write_str("no time pair t1, 4·t1 within the readings: log-time d0 undetermined"),
            Flag::IntersectionOutsideData => f.write_str("d100 intersection lies outside the readings"),
            Flag::LoadIncrementRatioLow { lir } => write!(f, "LIR {lir:.2} < 0.7: cv unreliable"),
            Flag::SpansPreconsolidation { sigma_p_kpa } => {
                write!(f, "the load step spans σ′p ≈ {sigma_p_kpa:.0} kPa: cv and end of primary unreliable")
            }
            Flag::MethodsDisagree { ratio } => {
                write!(f, "cv(√t) is {ratio:.2} × cv(log t): the methods disagree by more than a factor of 2")
            }
            Flag::SecondarySlopeNegative => f.write_str("secondary line slopes towards swelling: Cα negative"),
            Flag::HeightUnknown => f.write_str("specimen height not given: Cα undetermined"),
            Flag::DeflectionOutsideCalibration { stress_kpa, min_kpa, max_kpa } => write!(
                f,
                "stress {stress_kpa:.1} kPa outside the calibrated {min_kpa:.1}–{max_kpa:.1} kPa: \
                 deflection not extrapolated, no correction"
            ),
            Flag::UnloadingBranchMissing => {
                f.write_str("no unloading branch in the deflection calibration: loading branch used")
            }
            Flag::VoidRatioMismatch { e0_from_dry_mass, e0_from_final_water } => write!(
                f,
                "e0 from dry mass {e0_from_dry_mass:.3} and from final water content {e0_from_final_water:.3} \
                 differ by more than 0.02"
            ),
            Flag::PartlySaturated { saturation } => write!(
                f,
                "initial degree of saturation {:.0} % < 95 %: cv assumes a saturated specimen",
                saturation * 100.0
            ),
            Flag::SaturationAboveOne { saturation } => write!(
                f,
                "initial degree of saturation {:.0} % > 105 %: check masses, dimensions and Gs",
                saturation * 100.0
            ),
            Flag::FewVirginPoints { points } => write!(f, "Cc from only {points} points on the virgin branch"),
            Flag::VirginPointsBelowPreconsolidation => {
                f.write_str("virgin line uses points at or below σ′p: Cc may be too flat")
            }
            Flag::NoUnloadReload => f.write_str("no unload–reload cycle: Cr undetermined"),
            Flag::PreconsolidationUndetermined { method } => {
                write!(f, "σ′p ({method}): too few loading points, undetermined")
            }
            Flag::PreconsolidationOutsideData { method, sigma_p_kpa } => write!(
                f,
                "σ′p ({method}): the construction lands at {sigma_p_kpa:.1} kPa, outside the loading stresses it \
                 used: not reported (at most a bound)"
            ),
            Flag::PreconsolidationNoBend { method } => {
                write!(f, "σ′p ({method}): no bend into a steeper virgin line found, undetermined")
            }
            Flag::PreconsolidationNoIntersection { method } => {
                write!(f, "σ′p ({method}): the construction lines do not meet, undetermined")
            }
            Flag::NoStraightVirginRun { wanted } => write!(
                f,
                "no {wanted} consecutive loading points on the steep part lie on a straight line: Cc from fewer"
            ),
            Flag::NoVirginLine => {
                f.write_str("e does not fall along the loading points: no virgin line, Cc undetermined")
            }
            Flag::EndOfPrimaryMissing { stress_kpa } => {
                write!(f, "no end of primary at {stress_kpa:.1} kPa: the settlement at the end of the load step used")
            }
            Flag::TemperatureOutsideTable { temperature_c } => {
                write!(f, "temperature {temperature_c:.1} °C outside the viscosity table: cv not corrected to 20 °C")
            }
            Flag::StraightPartShort { share } => {
                write!(f, "the √t straight part spans only {:.0} % of the primary: cv(√t) not trusted", share * 100.0)
            }
            Flag::SecondaryTooSoon { t100_min, from_min, until_min } => write!(
                f,
                "the log-t tail is not yet clear of the primary (t100 ≈ {}): a secondary line must start after \
                 {} and run to {}",
                minutes(*t100_min),
                minutes(*from_min),
                minutes(*until_min)
            ),
            Flag::T90NotAfterT50 { t90_min, t50_min, t50_from } => write!(
                f,
                "t90 by √t ({}) is not above twice t50 by {t50_from} ({}); a Terzaghi curve has t90 = 4.3 × t50: \
                 a construction has failed",
                minutes(*t90_min),
                minutes(*t50_min)
            ),
            Flag::EndsOfPrimaryApart { taylor_mm, casagrande_mm, tolerance_mm } => write!(
                f,
                "d100 by √t ({taylor_mm:.3} mm) and by log t ({casagrande_mm:.3} mm) differ by {:.3} mm, more than \
                 {tolerance_mm:.3} mm",
                (taylor_mm - casagrande_mm).abs()
            ),
            Flag::CvNotChosen { reason } => write!(f, "no cv proposed for k: {reason}; review both constructions"),
        }
    }
}

/// A time in minutes, rounded for a sentence: "0.68 min", "12.4 min", "157 min".
fn minutes(t_min: f64) -> String {
    if t_min < 10.0 {
        format!("{t_min:.2} min")
    } else if t_min < 100.0 {
        format!("{t_min:.1} min")
    } else {
        format!("{t_min:.0} min")
    }
}

impl serde::Serialize for Flag {
    fn serialize<S: serde::Serializer>(&self, serializer: S) -> Result<S::Ok, S::Error> {
        let mut s = serializer.serialize_struct("Flag", 2)?;
        s.serialize_field("code", self.code())?;
        s.serialize_field("message", &self.to_string())?;
        s.end()
    }
}

/// Adds `flag` unless an equal one is already there.
pub(crate) fn push_unique(flags: &mut Vec<Flag>, flag: Flag) {
    if !flags.contains(&flag) {
        flags.push(flag);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn lir_flag_reads_as_the_rule_it_reports() {
        // Rule from ASTM D2435 Note 5 [ref: load-increment-ratio]: LIR < 0.7 may prevent evaluation of cv.
        let flag = Flag::LoadIncrementRatioLow { lir: 0.5 };
        assert_eq!(flag.to_string(), "LIR 0.50 < 0.7: cv unreliable");
        assert_eq!(flag.code(), "lir_low");
    }

    #[test]
    fn flag_serialises_with_code_and_message() {
        let json = serde_json::to_string(&Flag::NoSecondaryBranch).unwrap();
        assert_eq!(json, r#"{"code":"no_secondary_branch","message":"no secondary branch yet: d100 undetermined"}"#);
    }

    #[test]
    fn push_unique_keeps_one_of_each() {
        let mut flags = vec![Flag::NoSecondaryBranch];
        push_unique(&mut flags, Flag::NoSecondaryBranch);
        push_unique(&mut flags, Flag::T90NotReached);
        assert_eq!(flags, vec![Flag::NoSecondaryBranch, Flag::T90NotReached]);
    }
}
