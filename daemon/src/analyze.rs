//! `oedolog analyze`: the core's file reductions (`oedolog_core::offline`) with the files read from disk.
//! The reductions themselves do no I/O; this is the one place that reads their files.

use std::path::Path;

use oedolog_core::offline::{self, IncrementReport, OfflineError, TestReport};

fn read(path: &Path) -> std::io::Result<String> {
    std::fs::read_to_string(path)
}

/// `oedolog analyze increment FILE.csv --drainage-path-mm H`.
pub fn increment(path: &Path, drainage_path_mm: f64) -> Result<IncrementReport, OfflineError> {
    offline::analyze_increment(path, drainage_path_mm, &mut read)
}

/// A time-curve CSV (`time_min,displacement_mm`), read and checked as `analyze increment` reads it.
pub fn time_curve(path: &Path) -> Result<Vec<(f64, f64)>, OfflineError> {
    offline::read_readings(path, &mut read)
}

/// `oedolog analyze test FILE.toml`.
pub fn test(path: &Path) -> Result<TestReport, OfflineError> {
    offline::analyze_test(path, &mut read)
}
