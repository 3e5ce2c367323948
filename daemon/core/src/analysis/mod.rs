//! Reduction of incremental-loading oedometer tests: phase relations, Terzaghi theory, the Taylor and
//! Casagrande time-curve constructions, cv, Cα and the e–log σ′ curve with its parameters.
//!
//! Pure: numbers in, numbers out. Nothing here reads a clock, a database, a configuration file or does any
//! I/O; every construction choice comes in as a parameter and goes out in the result, with quality flags and
//! the points and lines used, so the dashboard can draw the construction and an engineer can review it.
//! Results are proposals for a qualified engineer to check [ref: review-and-safety], never commands to a frame.
//!
//! Conventions: time in minutes since the load went on, displacement in mm with compression positive,
//! stress in kPa. Method facts cite `daemon/core/REFERENCES.md` by anchor, `[ref: <anchor>, <mark>]`, the
//! mark being read, computed, from memory or common practice.

pub(crate) mod casagrande;
pub(crate) mod compression;
pub(crate) mod consistency;
pub(crate) mod curve;
pub(crate) mod cv;
pub(crate) mod deflection;
pub(crate) mod fit;
pub(crate) mod flags;
pub(crate) mod increment;
pub(crate) mod interp;
pub(crate) mod phase;
pub(crate) mod reduction;
pub(crate) mod review;
pub(crate) mod secondary;
pub(crate) mod taylor;
pub(crate) mod terzaghi;

#[cfg(test)]
mod synthetic;

// What other crates name, and the types they reach through it (fields they read, results they match on).
pub use casagrande::{CasagrandeResult, InflectionTangent, OffsetPair, SecondaryLine};
pub use compression::{
    Branch, CasagrandePreconsolidation, CompressionParams, CompressionReduction, IndexLine, StatePoint,
    WorkPreconsolidation,
};
pub use consistency::CvChoice;
pub use curve::{CurveNode, TimeCurve};
pub use cv::{CvEstimate, Drainage};
pub use deflection::DeflectionCalibration;
pub use fit::Line;
pub use flags::Flag;
pub use increment::{IncrementParams, IncrementReduction, reduce_curve, reduce_increment};
pub use phase::PhaseRelations;
pub use reduction::{
    CurveUnavailable, ReductionRules, StepInput, StepReduction, TestInput, TestReduction, TestSpecimen,
    reduce_test_with,
};
pub use review::{CompressionChoices, StepChoices, TestChoices};
pub use secondary::SecondaryCompression;
pub use taylor::{StraightFit, TaylorResult};
pub use terzaghi::degree_of_consolidation;

pub(crate) use cv::SpecimenState;
pub(crate) use phase::{SpecimenMeasurements, phase_relations};
pub(crate) use reduction::reduce_test;

/// Why an analysis could not even start: bad input or a parameter outside what is allowed.
/// A construction that runs but cannot find something returns `None` values and a [`Flag`] instead.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum AnalysisError {
    /// No readings at all.
    #[error("no readings")]
    NoReadings,
    /// A reading's time or displacement is NaN or infinite.
    #[error("reading {index}: {field} is not a finite number")]
    NonFinite {
        /// 0-based position of the reading.
        index: usize,
        /// `time_min` or `displacement_mm`.
        field: &'static str,
    },
    /// Time before the load went on.
    #[error("reading {index}: time {time_min} min is negative (time counts from the load going on)")]
    NegativeTime {
        /// 0-based position of the reading.
        index: usize,
        /// The offending time.
        time_min: f64,
    },
    /// Readings out of time order.
    #[error("reading {index}: time {time_min} min is earlier than the reading before it ({previous_min} min)")]
    Unsorted {
        /// 0-based position of the reading.
        index: usize,
        /// The offending time.
        time_min: f64,
        /// The time of the reading before it.
        previous_min: f64,
    },
    /// A value too large to be a reading of a laboratory specimen.
    #[error("reading {index}: {field} = {value} is outside ±{limit}")]
    OutOfRange {
        /// 0-based position of the reading.
        index: usize,
        /// `time_min` or `displacement_mm`.
        field: &'static str,
        /// The offending value.
        value: f64,
        /// The largest magnitude allowed.
        limit: f64,
    },
    /// A parameter outside its allowed range.
    #[error("{name} = {value}: allowed {allowed}")]
    InvalidParameter {
        /// The parameter's name, as in the struct field.
        name: &'static str,
        /// The offending value.
        value: f64,
        /// What is allowed.
        allowed: &'static str,
    },
    /// A parameter that the chosen options need was not given.
    #[error("{name} is needed {reason}")]
    MissingParameter {
        /// The parameter's name.
        name: &'static str,
        /// Why it is needed.
        reason: &'static str,
    },
    /// A table or series with too few entries.
    #[error("{what}: needs at least {needed} points, got {got}")]
    TooFewPoints {
        /// What the points are for.
        what: &'static str,
        /// How many are needed.
        needed: usize,
        /// How many were given.
        got: usize,
    },
    /// A table whose abscissae do not increase strictly.
    #[error("{what}: point {index} ({value}) does not increase on the one before it")]
    NotIncreasing {
        /// Which table.
        what: &'static str,
        /// 0-based position of the entry.
        index: usize,
        /// The offending abscissa.
        value: f64,
    },
}

/// Checks that a parameter is finite and within `[low, high]`.
pub(crate) fn check_range(
    name: &'static str,
    value: f64,
    low: f64,
    high: f64,
    allowed: &'static str,
) -> Result<f64, AnalysisError> {
    if value.is_finite() && value >= low && value <= high {
        Ok(value)
    } else {
        Err(AnalysisError::InvalidParameter { name, value, allowed })
    }
}

/// Checks that a parameter is finite and strictly positive.
pub(crate) fn check_positive(name: &'static str, value: f64) -> Result<f64, AnalysisError> {
    if value.is_finite() && value > 0.0 {
        Ok(value)
    } else {
        Err(AnalysisError::InvalidParameter { name, value, allowed: "a finite number > 0" })
    }
}
