//! An engineer's choices over the automatic constructions: for a load step's time curve (the √t window, the
//! log-t windows, d0 / d100 / t50 / t90 set directly, the drainage) and for the e–log σ′ curve (the points of
//! the virgin line and of the unload–reload line, the point of greatest curvature or σ′p itself, σ′v0).
//!
//! Every field is optional: `None` keeps the automatic proposal. The reduction applies what is given and
//! says which values it took from the engineer; the caller keeps the proposal beside them by reducing once
//! without choices. Choices are checked against the data they apply to, and a choice that cannot apply
//! (a window outside the readings, fewer than two points, a point that is not on the branch) is refused
//! naming its field: nothing is reduced with it [ref: review-and-safety].

use serde::{Deserialize, Serialize};

use super::cv::Drainage;

/// Choices for one load step's time-curve constructions. Times in minutes since the load went on, gauge
/// readings in mm as the step's curve has them (compression positive).
#[derive(Clone, Copy, Debug, Default, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct StepChoices {
    /// The √t straight line is fitted to the readings between these two times.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub taylor_window_min: Option<[f64; 2]>,
    /// The log-t primary tangent is fitted to the readings between these two times.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub primary_window_min: Option<[f64; 2]>,
    /// The log-t secondary line is fitted to the readings between these two times.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub secondary_window_min: Option<[f64; 2]>,
    /// d0 (the corrected zero of primary consolidation), set directly, mm.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub d0_mm: Option<f64>,
    /// d100 (the end of primary consolidation), set directly, mm.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub d100_mm: Option<f64>,
    /// t50 for cv(log t), set directly, min.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub t50_min: Option<f64>,
    /// t90 for cv(√t), set directly, min.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub t90_min: Option<f64>,
    /// Drainage faces (double or single) for this step's drainage path.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub drainage: Option<Drainage>,
}

impl StepChoices {
    /// Whether nothing is chosen (the automatic proposal stands).
    pub fn is_empty(&self) -> bool {
        *self == StepChoices::default()
    }
}

/// Choices for a test's e–log σ′ constructions. Points are named by their effective stress, kPa, as applied
/// (to 0.1 % — a point is matched to the applied stress nearest it).
#[derive(Clone, Debug, Default, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct CompressionChoices {
    /// Cc is the line through exactly these loading-branch points (at least two).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub virgin_points_kpa: Option<Vec<f64>>,
    /// Cr is the line through exactly these points of the unload–reload cycle (at least two).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub unload_reload_points_kpa: Option<Vec<f64>>,
    /// Casagrande's construction is drawn from the point of greatest curvature at this stress, kPa (on the
    /// loading branch's smooth curve, within its stresses).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub max_curvature_kpa: Option<f64>,
    /// σ′p set directly, kPa (overrides the construction's value; the construction is still shown).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub sigma_p_kpa: Option<f64>,
    /// In-situ vertical effective stress σ′v0 for OCR, kPa.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub sigma_v0_kpa: Option<f64>,
}

impl CompressionChoices {
    /// Whether nothing is chosen (the automatic proposal stands).
    pub fn is_empty(&self) -> bool {
        *self == CompressionChoices::default()
    }
}

/// All of a test's choices: per load step (by its index in the test's list of steps) and for the curve.
#[derive(Clone, Debug, Default, PartialEq, Serialize)]
pub struct TestChoices {
    /// (step index, choices); at most one entry per step.
    pub steps: Vec<(usize, StepChoices)>,
    /// The e–log σ′ choices.
    pub compression: CompressionChoices,
}

impl TestChoices {
    /// The choices for step `index` (none chosen: the default).
    pub fn step(&self, index: usize) -> StepChoices {
        self.steps.iter().find(|(i, _)| *i == index).map(|(_, c)| *c).unwrap_or_default()
    }

    /// Whether nothing is chosen anywhere.
    pub fn is_empty(&self) -> bool {
        self.steps.iter().all(|(_, c)| c.is_empty()) && self.compression.is_empty()
    }
}
