//! Offline reduction of files logged by hand or on other equipment: one increment's time curve (CSV,
//! `oedolog analyze increment`) or a whole test (TOML, `oedolog analyze test`), reduced by `analysis` and
//! given back as one JSON object or an aligned table. It must not do any construction itself (that is
//! `analysis`), touch the store or a frame, or panic on a bad file: every problem names its file and its
//! line and column or field. Results are proposals for a qualified engineer to review [ref: review-and-safety].

use std::fmt::Write as _;
use std::ops::Range;
use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};
use toml::Spanned;

use crate::analysis::compression::{Branch, CurveBasis, StatePoint};
use crate::analysis::curve::{MAX_DISPLACEMENT_MM, MAX_TIME_MIN};
use crate::analysis::cv::{Drainage, Method};
use crate::analysis::secondary::secondary_compression;
use crate::analysis::{
    AnalysisError, CompressionChoices, CurveUnavailable, Flag, IncrementParams, IncrementReduction, ReductionRules,
    SpecimenMeasurements, StepChoices, StepInput, StepReduction, TestChoices, TestInput, TestSpecimen, phase_relations,
    reduce_increment, reduce_test,
};
use crate::diagnostics::{at_prefix, field_at, line_column};
use crate::quantity::{MAX_STRESS_KPA, STRESS_ALLOWED, STRESS_RESOLUTION_KPA};

/// The one header a time-curve CSV may have: minutes since the load went on, compression positive in mm.
#[cfg(test)]
const CSV_HEADER: &str = "time_min,displacement_mm";
/// Largest drainage path `analyze increment` accepts, mm (a 2 m specimen is no oedometer specimen).
pub(crate) const MAX_DRAINAGE_PATH_MM: f64 = 1000.0;

// ---------------------------------------------------------------------------------------------------------
// Errors

/// What is wrong with a time-curve CSV, without where (see [`CsvError`]).
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub(crate) enum CsvProblem {
    /// Nothing in the file, not even the header.
    #[error("the file is empty; its first line must be the header `time_min,displacement_mm`")]
    Empty,
    /// The first line is not the header.
    #[error("the header must be exactly `time_min,displacement_mm`, found `{found}`")]
    WrongHeader {
        /// The first line as written.
        found: String,
    },
    /// A reading line without exactly two comma-separated fields.
    #[error("expected 2 fields (time_min,displacement_mm), found {found}")]
    FieldCount {
        /// Fields on the line.
        found: usize,
    },
    /// A field with nothing in it.
    #[error("{column} is empty")]
    EmptyField {
        /// `time_min` or `displacement_mm`.
        column: &'static str,
    },
    /// A field that is not a decimal number.
    #[error("{column} `{text}` is not a number")]
    NotANumber {
        /// `time_min` or `displacement_mm`.
        column: &'static str,
        /// The field as written.
        text: String,
    },
    /// NaN or infinity.
    #[error("{column} `{text}` is not a finite number")]
    NotFinite {
        /// `time_min` or `displacement_mm`.
        column: &'static str,
        /// The field as written.
        text: String,
    },
    /// A time before the load went on.
    #[error("time_min {time_min} is negative (times count in minutes from the load going on)")]
    NegativeTime {
        /// The time.
        time_min: f64,
    },
    /// A time earlier than the line before it.
    #[error("time_min {time_min} is earlier than {previous_min} on line {previous_line}: times must not decrease")]
    Unsorted {
        /// The time.
        time_min: f64,
        /// The time of the reading before it.
        previous_min: f64,
        /// The line of the reading before it.
        previous_line: usize,
    },
    /// A value too large to be a reading of a laboratory increment.
    #[error("{column} {value} is outside ±{limit}")]
    OutOfRange {
        /// `time_min` or `displacement_mm`.
        column: &'static str,
        /// The value.
        value: f64,
        /// The largest magnitude allowed.
        limit: f64,
    },
    /// A header and nothing after it.
    #[error("no readings after the header")]
    NoReadings,
}

/// A problem in a time-curve CSV and the 1-based line it is on (`None`: the file as a whole).
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("{}{problem}", at_line(*.line))]
pub struct CsvError {
    /// 1-based line, counting the header as line 1.
    pub(crate) line: Option<usize>,
    /// What is wrong.
    pub(crate) problem: CsvProblem,
}

fn at_line(line: Option<usize>) -> String {
    line.map(|l| format!("line {l}: ")).unwrap_or_default()
}

/// Why a file could not be reduced. `Display` starts with the file, then the line and column or field.
#[derive(Debug, thiserror::Error)]
pub enum OfflineError {
    /// The file could not be read.
    #[error("{}: cannot read the file: {error}", .path.display())]
    Read {
        /// The file.
        path: PathBuf,
        /// What the system said.
        error: std::io::Error,
    },
    /// A bad time-curve CSV.
    #[error("{}: {error}", .path.display())]
    Csv {
        /// The file.
        path: PathBuf,
        /// Where and what.
        error: CsvError,
    },
    /// A test file that is not the TOML the command reads (syntax, unknown or missing field, wrong type).
    #[error("{}: {}{field}: {message}", .path.display(), at_prefix(*.at))]
    Toml {
        /// The file.
        path: PathBuf,
        /// 1-based line and column, when the parser gave a place.
        at: Option<(usize, usize)>,
        /// The field as a path, e.g. `increment[3].stress_kpa`.
        field: String,
        /// What the parser said.
        message: String,
    },
    /// A test-file value outside what the reduction allows.
    #[error("{}: {}{field}: {message}", .path.display(), at_prefix(*.at))]
    Field {
        /// The file.
        path: PathBuf,
        /// 1-based line and column of the value, when it is in the file.
        at: Option<(usize, usize)>,
        /// The field as a path, e.g. `increment[3].stress_kpa`.
        field: String,
        /// What is wrong and what is allowed.
        message: String,
    },
    /// An increment's time curve (`readings = "…"`) could not be used.
    #[error("{}: {}{field}: {problem}", .path.display(), at_prefix(*.at))]
    Readings {
        /// The test file.
        path: PathBuf,
        /// Line and column of the `readings` value.
        at: Option<(usize, usize)>,
        /// `increment[i].readings`.
        field: String,
        /// The problem with the CSV (it names the CSV and its line).
        problem: Box<OfflineError>,
    },
    /// `--drainage-path-mm` outside what is allowed.
    #[error("--drainage-path-mm {value}: allowed a drainage path above 0 and up to 1000 mm")]
    DrainagePath {
        /// The value given.
        value: f64,
    },
    /// The analysis refused its input (a check here should have caught it first).
    #[error("{}: {error}", .path.display())]
    Analysis {
        /// The file.
        path: PathBuf,
        /// What the analysis said.
        error: AnalysisError,
    },
}

// ---------------------------------------------------------------------------------------------------------
// The time-curve CSV

/// Parses a time-curve CSV: the header `time_min,displacement_mm`, then one such reading a line.
/// Spaces around fields, a UTF-8 byte-order mark, CRLF line ends and blank lines are allowed; times must not
/// decrease, be negative or be anything but finite decimal numbers.
pub(crate) fn parse_readings(text: &str) -> Result<Vec<(f64, f64)>, CsvError> {
    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    let mut lines = text.lines().enumerate().map(|(i, l)| (i + 1, l.trim()));
    let err = |line: usize, problem: CsvProblem| CsvError { line: Some(line), problem };
    let header = lines.by_ref().find(|(_, l)| !l.is_empty());
    match header {
        None => return Err(CsvError { line: None, problem: CsvProblem::Empty }),
        Some((n, l)) => {
            let names: Vec<&str> = l.split(',').map(str::trim).collect();
            if names != ["time_min", "displacement_mm"] {
                return Err(err(n, CsvProblem::WrongHeader { found: l.to_string() }));
            }
        }
    }
    let mut readings = Vec::new();
    let mut previous: Option<(f64, usize)> = None;
    for (n, l) in lines {
        if l.is_empty() {
            continue;
        }
        let fields: Vec<&str> = l.split(',').map(str::trim).collect();
        if fields.len() != 2 {
            return Err(err(n, CsvProblem::FieldCount { found: fields.len() }));
        }
        let t = number(fields[0], "time_min", MAX_TIME_MIN).map_err(|p| err(n, p))?;
        let d = number(fields[1], "displacement_mm", MAX_DISPLACEMENT_MM).map_err(|p| err(n, p))?;
        if t < 0.0 {
            return Err(err(n, CsvProblem::NegativeTime { time_min: t }));
        }
        if let Some((previous_min, previous_line)) = previous
            && t < previous_min
        {
            return Err(err(n, CsvProblem::Unsorted { time_min: t, previous_min, previous_line }));
        }
        previous = Some((t, n));
        readings.push((t, d));
    }
    if readings.is_empty() {
        return Err(CsvError { line: None, problem: CsvProblem::NoReadings });
    }
    Ok(readings)
}

fn number(text: &str, column: &'static str, limit: f64) -> Result<f64, CsvProblem> {
    if text.is_empty() {
        return Err(CsvProblem::EmptyField { column });
    }
    let value: f64 = text.parse().map_err(|_| CsvProblem::NotANumber { column, text: text.to_string() })?;
    if !value.is_finite() {
        return Err(CsvProblem::NotFinite { column, text: text.to_string() });
    }
    if value.abs() > limit {
        return Err(CsvProblem::OutOfRange { column, value, limit });
    }
    Ok(value)
}

/// How the caller reads a file named in a command or a test file (the core does no I/O of its own; the
/// daemon passes `std::fs::read_to_string`).
pub type ReadFile<'a> = &'a mut dyn FnMut(&Path) -> std::io::Result<String>;

fn read_text(path: &Path, read: ReadFile<'_>) -> Result<String, OfflineError> {
    read(path).map_err(|error| OfflineError::Read { path: path.to_path_buf(), error })
}

/// Reads (with `read`) and parses a time-curve CSV file.
pub fn read_readings(path: &Path, read: ReadFile<'_>) -> Result<Vec<(f64, f64)>, OfflineError> {
    parse_readings(&read_text(path, read)?).map_err(|error| OfflineError::Csv { path: path.to_path_buf(), error })
}

// ---------------------------------------------------------------------------------------------------------
// Remarks

/// A quality remark as printed: a stable code and the sentence.
#[derive(Debug, Clone, PartialEq, Eq)]
struct Remark {
    code: &'static str,
    message: String,
}

impl From<&Flag> for Remark {
    fn from(flag: &Flag) -> Self {
        Remark { code: flag.code(), message: flag.to_string() }
    }
}

fn split_remarks(remarks: &[Remark]) -> (Vec<String>, Vec<&'static str>) {
    (remarks.iter().map(|r| r.message.clone()).collect(), remarks.iter().map(|r| r.code).collect())
}

// ---------------------------------------------------------------------------------------------------------
// analyze increment

/// The √t construction as reported.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub(crate) struct TaylorSummary {
    /// Corrected zero, mm.
    pub(crate) d0_mm: Option<f64>,
    /// Reading at t90, mm.
    pub(crate) d90_mm: Option<f64>,
    /// d0 + (d90 − d0)/0.9, mm.
    pub(crate) d100_mm: Option<f64>,
    /// (d0 + d100)/2, mm.
    pub(crate) d50_mm: Option<f64>,
    /// Time the curve reaches d50, min.
    pub(crate) t50_min: Option<f64>,
    /// Where the construction line meets the curve, min.
    pub(crate) t90_min: Option<f64>,
    /// cv = 0.848·Hdr²/t90, mm²/min [ref: cv-formula].
    pub(crate) cv_mm2_per_min: Option<f64>,
    /// The same in m²/yr.
    pub(crate) cv_m2_per_year: Option<f64>,
    /// Time window of the straight early part, min.
    pub(crate) fit_window_min: Option<[f64; 2]>,
    /// Abscissa ratio of the construction line (1.15) [ref: taylor-root-time].
    pub(crate) factor: f64,
}

/// The log-t construction as reported.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub(crate) struct CasagrandeSummary {
    /// Corrected zero by the 1:4 offset, mm.
    pub(crate) d0_mm: Option<f64>,
    /// Where the inflection tangent meets the secondary line, mm.
    pub(crate) d100_mm: Option<f64>,
    /// (d0 + d100)/2, mm.
    pub(crate) d50_mm: Option<f64>,
    /// Time the curve reaches d50, min.
    pub(crate) t50_min: Option<f64>,
    /// Time at d100, min.
    pub(crate) t100_min: Option<f64>,
    /// cv = 0.197·Hdr²/t50, mm²/min [ref: cv-formula].
    pub(crate) cv_mm2_per_min: Option<f64>,
    /// The same in m²/yr.
    pub(crate) cv_m2_per_year: Option<f64>,
    /// 1:4 time pairs averaged for d0.
    pub(crate) offset_pairs: usize,
    /// Time of the steepest point (inflection), min.
    pub(crate) inflection_t_min: Option<f64>,
    /// Time window of the secondary line, min.
    pub(crate) secondary_window_min: Option<[f64; 2]>,
}

/// `analyze increment`: one time curve reduced. The first keys are the command's contract; the rest are
/// extras. Top-level d0, d50, d100 and t50 all come from one construction, named in `primary_from`: log t
/// (Casagrande) when it found d100, else √t (Taylor); t90 is always Taylor's.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct IncrementReport {
    /// Corrected zero of the construction in `primary_from`, mm.
    pub(crate) d0_mm: Option<f64>,
    /// d50 of that construction, mm.
    pub(crate) d50_mm: Option<f64>,
    /// End of primary consolidation of that construction, mm.
    pub(crate) d100_mm: Option<f64>,
    /// t50 of that construction, min.
    pub(crate) t50_min: Option<f64>,
    /// t90 by the √t construction, min.
    pub(crate) t90_min: Option<f64>,
    /// cv by √t, mm²/min.
    pub(crate) cv_taylor_mm2_per_min: Option<f64>,
    /// cv by log t, mm²/min.
    pub(crate) cv_casagrande_mm2_per_min: Option<f64>,
    /// Cα(ε): strain per log cycle of time on the secondary line, strain over `c_alpha_height_mm`.
    pub(crate) c_alpha: Option<f64>,
    /// Every quality remark, as sentences.
    pub(crate) flags: Vec<String>,
    /// The remarks' stable codes, in the same order.
    pub(crate) flag_codes: Vec<&'static str>,
    /// `casagrande` or `taylor`: where the top-level d0, d50, d100, t50 come from (`None`: neither found d100).
    pub(crate) primary_from: Option<&'static str>,
    /// The drainage path given, mm.
    pub(crate) drainage_path_mm: f64,
    /// Height Cα's strain is taken over: 2 × the drainage path (double drainage assumed), mm.
    pub(crate) c_alpha_height_mm: f64,
    /// Slope of the secondary line, mm per log cycle (height-free).
    pub(crate) secondary_slope_mm_per_log_cycle: Option<f64>,
    /// Readings in the file.
    pub(crate) reading_count: usize,
    /// Log-time nodes the constructions ran on.
    pub(crate) node_count: usize,
    /// Reading noise estimated from the scatter inside bins, mm.
    pub(crate) noise_mm: Option<f64>,
    /// The √t construction.
    pub(crate) taylor: TaylorSummary,
    /// The log-t construction.
    pub(crate) casagrande: CasagrandeSummary,
    /// The file reduced.
    pub(crate) file: String,
}

fn method_name(method: Method) -> &'static str {
    match method {
        Method::Taylor => "taylor",
        Method::Casagrande => "casagrande",
    }
}

impl IncrementReport {
    fn new(path: &Path, drainage_path_mm: f64, c_alpha_height_mm: f64, r: &IncrementReduction) -> Self {
        let (t, c) = (&r.taylor, &r.casagrande);
        let taylor = TaylorSummary {
            d0_mm: t.d0_mm,
            d90_mm: t.d90_mm,
            d100_mm: t.d100_mm,
            d50_mm: t.d50_mm,
            t50_min: t.t50_min,
            t90_min: t.t90_min,
            cv_mm2_per_min: r.cv_taylor.map(|e| e.cv_mm2_per_min),
            cv_m2_per_year: r.cv_taylor.map(|e| e.cv_m2_per_year),
            fit_window_min: t.straight.map(|s| [s.t_start_min, s.t_end_min]),
            factor: t.factor,
        };
        let casagrande = CasagrandeSummary {
            d0_mm: c.d0_mm,
            d100_mm: c.d100_mm,
            d50_mm: c.d50_mm,
            t50_min: c.t50_min,
            t100_min: c.t100_min,
            cv_mm2_per_min: r.cv_casagrande.map(|e| e.cv_mm2_per_min),
            cv_m2_per_year: r.cv_casagrande.map(|e| e.cv_m2_per_year),
            offset_pairs: c.offset_pairs.len(),
            inflection_t_min: c.inflection.map(|i| i.t_min),
            secondary_window_min: c.secondary.map(|s| [s.t_start_min, s.t_end_min]),
        };
        // One construction for d0, d50, d100, t50, so d50 = (d0 + d100)/2 holds in what is printed.
        let primary_from = r.end_of_primary.map(|e| method_name(e.method));
        let (d0_mm, d50_mm, d100_mm, t50_min) = match primary_from {
            Some("casagrande") => (c.d0_mm, c.d50_mm, c.d100_mm, c.t50_min),
            Some(_) => (t.d0_mm, t.d50_mm, t.d100_mm, t.t50_min),
            None => (t.d0_mm.or(c.d0_mm), None, None, None),
        };
        let mut remarks: Vec<Remark> = r.flags.iter().map(Remark::from).collect();
        let mut report = IncrementReport {
            d0_mm,
            d50_mm,
            d100_mm,
            t50_min,
            t90_min: t.t90_min,
            cv_taylor_mm2_per_min: taylor.cv_mm2_per_min,
            cv_casagrande_mm2_per_min: casagrande.cv_mm2_per_min,
            c_alpha: r.secondary.map(|s| s.c_alpha_strain),
            flags: Vec::new(),
            flag_codes: Vec::new(),
            primary_from,
            drainage_path_mm,
            c_alpha_height_mm,
            secondary_slope_mm_per_log_cycle: r.secondary.map(|s| s.slope_mm_per_log_cycle),
            reading_count: r.reading_count,
            node_count: r.nodes.len(),
            noise_mm: r.noise_mm,
            taylor,
            casagrande,
            file: path.display().to_string(),
        };
        // The contract: a value that cannot be determined is null *with a flag*. The constructions flag
        // every case they know; this only guards against a silent null.
        let missing = report.undetermined();
        if !missing.is_empty() && remarks.is_empty() {
            remarks.push(Remark { code: "undetermined", message: format!("undetermined: {}", missing.join(", ")) });
        }
        (report.flags, report.flag_codes) = split_remarks(&remarks);
        report
    }

    /// The contract keys that are null.
    fn undetermined(&self) -> Vec<&'static str> {
        [
            ("d0_mm", self.d0_mm),
            ("d50_mm", self.d50_mm),
            ("d100_mm", self.d100_mm),
            ("t50_min", self.t50_min),
            ("t90_min", self.t90_min),
            ("cv_taylor_mm2_per_min", self.cv_taylor_mm2_per_min),
            ("cv_casagrande_mm2_per_min", self.cv_casagrande_mm2_per_min),
            ("c_alpha", self.c_alpha),
        ]
        .into_iter()
        .filter_map(|(name, value)| value.is_none().then_some(name))
        .collect()
    }

    /// One JSON object on one line.
    pub fn to_json(&self) -> String {
        to_json(self)
    }

    /// A readable table with units.
    pub fn to_table(&self) -> String {
        let mut out = String::new();
        let (t, c) = (&self.taylor, &self.casagrande);
        let _ = writeln!(out, "Increment time curve: {}", self.file);
        let _ = writeln!(
            out,
            "{} readings ({} log-time nodes), drainage path Hdr = {} mm",
            self.reading_count,
            self.node_count,
            fixed(Some(self.drainage_path_mm), 3)
        );
        let _ = writeln!(out);
        let _ = writeln!(out, "{:<16}{:<10}{:>16}{:>20}", "", "unit", "√t (Taylor)", "log t (Casagrande)");
        let rows: [(&str, &str, String, String); 11] = [
            ("d0", "mm", fixed(t.d0_mm, 4), fixed(c.d0_mm, 4)),
            ("d50", "mm", fixed(t.d50_mm, 4), fixed(c.d50_mm, 4)),
            ("d90", "mm", fixed(t.d90_mm, 4), dash()),
            ("d100", "mm", fixed(t.d100_mm, 4), fixed(c.d100_mm, 4)),
            ("t50", "min", significant(t.t50_min, 4), significant(c.t50_min, 4)),
            ("t90", "min", significant(t.t90_min, 4), dash()),
            ("t100", "min", dash(), significant(c.t100_min, 4)),
            ("cv", "mm²/min", significant(t.cv_mm2_per_min, 4), significant(c.cv_mm2_per_min, 4)),
            ("cv", "m²/yr", significant(t.cv_m2_per_year, 4), significant(c.cv_m2_per_year, 4)),
            ("straight part", "min", window(t.fit_window_min), dash()),
            ("secondary line", "min", dash(), window(c.secondary_window_min)),
        ];
        for (name, unit, a, b) in rows {
            let _ = writeln!(out, "{name:<16}{unit:<10}{a:>16}{b:>20}");
        }
        let _ = writeln!(out);
        let _ = match self.primary_from {
            Some(m) => writeln!(
                out,
                "reported: d0, d50, d100, t50 from {}; t90 from √t (Taylor)",
                if m == "casagrande" { "log t (Casagrande)" } else { "√t (Taylor), as log t found no d100" }
            ),
            None => writeln!(out, "reported: no end of primary from either construction"),
        };
        let _ = writeln!(
            out,
            "Cα = {} strain per log cycle (secondary slope {} mm per log cycle over H = {} mm = 2 × Hdr)",
            significant(self.c_alpha, 4),
            significant(self.secondary_slope_mm_per_log_cycle, 4),
            fixed(Some(self.c_alpha_height_mm), 3)
        );
        write_flags(&mut out, &self.flags);
        out
    }
}

/// `oedolog analyze increment FILE.csv --drainage-path-mm H`: reduces one time curve with the drainage
/// path given. Cα is strain over 2·H (double drainage, the usual oedometer set-up)
/// [ref: drainage-path, common practice].
pub fn analyze_increment(
    path: &Path,
    drainage_path_mm: f64,
    read: ReadFile<'_>,
) -> Result<IncrementReport, OfflineError> {
    if !(drainage_path_mm.is_finite() && drainage_path_mm > 0.0 && drainage_path_mm <= MAX_DRAINAGE_PATH_MM) {
        return Err(OfflineError::DrainagePath { value: drainage_path_mm });
    }
    let readings = read_readings(path, read)?;
    let analysis = |error| OfflineError::Analysis { path: path.to_path_buf(), error };
    let params = IncrementParams::with_drainage_path_mm(drainage_path_mm);
    let mut reduction = reduce_increment(&readings, &params).map_err(analysis)?;
    // The command is given a drainage path, not a height, so the reduction left Cα out (`HeightUnknown`);
    // take the strain over 2·Hdr instead, as documented.
    let height_mm = 2.0 * drainage_path_mm;
    if let Some(line) = reduction.casagrande.secondary {
        reduction.flags.retain(|f| *f != Flag::HeightUnknown);
        reduction.secondary =
            Some(secondary_compression(&line, height_mm, None, &mut reduction.flags).map_err(analysis)?);
    }
    Ok(IncrementReport::new(path, drainage_path_mm, height_mm, &reduction))
}

// ---------------------------------------------------------------------------------------------------------
// The test file

/// A test file as written (`analyze test`). Every table refuses unknown fields.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct TestFile {
    /// `[specimen]`
    pub(crate) specimen: SpecimenEntry,
    /// `[[increment]]`, in the order applied.
    #[serde(default, rename = "increment")]
    pub(crate) increments: Vec<IncrementEntry>,
    /// `[review]`: an engineer's choices over the e–log σ′ constructions.
    pub(crate) review: Option<ReviewEntry>,
}

/// `[review]`: the e–log σ′ choices (`CompressionChoices`), each replacing what the construction proposes.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct ReviewEntry {
    /// Cc is the line through exactly these loading points, kPa.
    pub(crate) virgin_points_kpa: Option<Spanned<Vec<f64>>>,
    /// Cr is the line through exactly these unload–reload points, kPa.
    pub(crate) unload_reload_points_kpa: Option<Spanned<Vec<f64>>>,
    /// Casagrande's σ′p construction starts from the point of greatest curvature at this stress, kPa.
    pub(crate) max_curvature_kpa: Option<Spanned<f64>>,
    /// σ′p set directly, kPa.
    pub(crate) sigma_p_kpa: Option<Spanned<f64>>,
    /// σ′v0 for OCR, kPa.
    pub(crate) sigma_v0_kpa: Option<Spanned<f64>>,
}

impl ReviewEntry {
    /// Where the value of the field `name` is written.
    fn span(&self, name: &str) -> Option<Range<usize>> {
        match name {
            "virgin_points_kpa" => self.virgin_points_kpa.as_ref().map(Spanned::span),
            "unload_reload_points_kpa" => self.unload_reload_points_kpa.as_ref().map(Spanned::span),
            "max_curvature_kpa" => self.max_curvature_kpa.as_ref().map(Spanned::span),
            "sigma_p_kpa" => self.sigma_p_kpa.as_ref().map(Spanned::span),
            "sigma_v0_kpa" => self.sigma_v0_kpa.as_ref().map(Spanned::span),
            _ => None,
        }
    }

    fn choices(&self) -> CompressionChoices {
        let points = |v: &Option<Spanned<Vec<f64>>>| v.as_ref().map(|v| v.get_ref().clone());
        let value = |v: &Option<Spanned<f64>>| v.as_ref().map(|v| *v.get_ref());
        CompressionChoices {
            virgin_points_kpa: points(&self.virgin_points_kpa),
            unload_reload_points_kpa: points(&self.unload_reload_points_kpa),
            max_curvature_kpa: value(&self.max_curvature_kpa),
            sigma_p_kpa: value(&self.sigma_p_kpa),
            sigma_v0_kpa: value(&self.sigma_v0_kpa),
        }
    }
}

/// `[specimen]`: what was measured before and after the test.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct SpecimenEntry {
    /// Ring diameter, mm.
    pub(crate) diameter_mm: Spanned<f64>,
    /// Initial height H0, mm.
    pub(crate) height_mm: Spanned<f64>,
    /// Oven-dry mass of the specimen, g.
    pub(crate) dry_mass_g: Spanned<f64>,
    /// Specific gravity of the solids Gs.
    pub(crate) specific_gravity: Spanned<f64>,
    /// Initial water content (fraction), e.g. from trimmings.
    pub(crate) initial_water_content: Option<Spanned<f64>>,
    /// Water content at the end of the test (fraction), for the cross-check of e.
    pub(crate) final_water_content: Option<Spanned<f64>>,
    /// In-situ vertical effective stress σ′v0, kPa, for OCR.
    pub(crate) sigma_v0_kpa: Option<Spanned<f64>>,
    /// Stress under which `height_mm` was measured, kPa (default 0).
    pub(crate) seating_stress_kpa: Option<Spanned<f64>>,
}

/// `[[increment]]`: one load increment (or decrement).
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct IncrementEntry {
    /// Effective vertical stress of the increment, kPa.
    pub(crate) stress_kpa: Spanned<f64>,
    /// Cumulative compression from the initial height at the end of the increment, apparatus-corrected, mm.
    pub(crate) settlement_mm: Spanned<f64>,
    /// A time-curve CSV for the increment, relative to the test file.
    pub(crate) readings: Option<Spanned<String>>,
    /// An engineer's choice: the √t straight line through the readings between these two times, min.
    pub(crate) taylor_window_min: Option<Spanned<Vec<f64>>>,
    /// The log-t inflection tangent through the readings between these two times, min.
    pub(crate) primary_window_min: Option<Spanned<Vec<f64>>>,
    /// The log-t secondary line through the readings between these two times, min.
    pub(crate) secondary_window_min: Option<Spanned<Vec<f64>>>,
    /// d0 set directly, mm, on the time curve's gauge.
    pub(crate) d0_mm: Option<Spanned<f64>>,
    /// d100 set directly, mm, on the time curve's gauge.
    pub(crate) d100_mm: Option<Spanned<f64>>,
    /// t50 set directly, min.
    pub(crate) t50_min: Option<Spanned<f64>>,
    /// t90 set directly, min.
    pub(crate) t90_min: Option<Spanned<f64>>,
    /// `double` (Hdr = H/2, the default) or `single` (Hdr = H) drainage for this increment.
    pub(crate) drainage: Option<Spanned<Drainage>>,
}

impl IncrementEntry {
    /// Where the value of the choice `name` is written.
    fn span(&self, name: &str) -> Option<Range<usize>> {
        let window = |w: &Option<Spanned<Vec<f64>>>| w.as_ref().map(Spanned::span);
        let value = |v: &Option<Spanned<f64>>| v.as_ref().map(Spanned::span);
        match name {
            "taylor_window_min" => window(&self.taylor_window_min),
            "primary_window_min" => window(&self.primary_window_min),
            "secondary_window_min" => window(&self.secondary_window_min),
            "d0_mm" => value(&self.d0_mm),
            "d100_mm" => value(&self.d100_mm),
            "t50_min" => value(&self.t50_min),
            "t90_min" => value(&self.t90_min),
            "drainage" => self.drainage.as_ref().map(Spanned::span),
            _ => None,
        }
    }
}

/// One increment of `analyze test`.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub(crate) struct ReportStep {
    /// σ′, kPa.
    pub(crate) stress_kpa: f64,
    /// e on the curve's basis: end of primary where a time curve gives it, else end of increment.
    pub(crate) e: f64,
    /// mv = av/(1 + e before), 1/kPa = m²/kN [ref: av-mv].
    pub(crate) mv_per_kpa: Option<f64>,
    /// cv by √t, mm²/min (time curve only).
    pub(crate) cv_taylor_mm2_per_min: Option<f64>,
    /// cv by log t, mm²/min (time curve only).
    pub(crate) cv_casagrande_mm2_per_min: Option<f64>,
    /// `loading`, `unloading` or `reloading`.
    pub(crate) branch: &'static str,
    /// Settlement at the end of the increment, as given, mm.
    pub(crate) settlement_mm: f64,
    /// Settlement at the end of primary, from the time curve, mm.
    pub(crate) settlement_eop_mm: Option<f64>,
    /// Which construction gave the end of primary.
    pub(crate) eop_from: Option<&'static str>,
    /// e at the end of the increment.
    pub(crate) e_end: f64,
    /// e at the end of primary.
    pub(crate) e_eop: Option<f64>,
    /// av = −Δe/Δσ′, 1/kPa.
    pub(crate) av_per_kpa: Option<f64>,
    /// LIR = Δσ′/σ′ before.
    pub(crate) load_increment_ratio: Option<f64>,
    /// k = cv·mv·γw, m/s, with the log-t cv where found, else the √t cv.
    pub(crate) k_m_per_s: Option<f64>,
    /// t50 by log t, min.
    pub(crate) t50_min: Option<f64>,
    /// t90 by √t, min.
    pub(crate) t90_min: Option<f64>,
    /// Drainage path of the √t cv: half the specimen height at its d50, mm.
    pub(crate) drainage_path_taylor_mm: Option<f64>,
    /// Drainage path of the log-t cv: half the specimen height at its d50, mm.
    pub(crate) drainage_path_casagrande_mm: Option<f64>,
    /// Cα(ε), strain per log cycle, over the height at the start of secondary compression.
    pub(crate) c_alpha: Option<f64>,
    /// Cα on the void-ratio basis, Δe per log cycle.
    pub(crate) c_alpha_void_ratio: Option<f64>,
    /// The time-curve file, as written in the test file.
    pub(crate) readings: Option<String>,
    /// Remarks on this increment and its time curve.
    pub(crate) flags: Vec<String>,
    /// Their codes.
    pub(crate) flag_codes: Vec<&'static str>,
    /// The file's choices this increment's values were taken from, by key (`taylor_window_min`, `d100_mm`, …).
    pub(crate) adjusted: Vec<&'static str>,
}

/// `analyze test`: the e–log σ′ reduction of a whole test. The first keys are the command's contract.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TestReport {
    /// Height of solids Hs = Ms/(Gs·ρw·A), mm [ref: height-of-solids].
    pub(crate) hs_mm: f64,
    /// e0 = (H0 − Hs)/Hs.
    pub(crate) e0: f64,
    /// Each increment, in the order applied.
    pub(crate) increments: Vec<ReportStep>,
    /// Cc on the virgin branch: the steepest straight run of consecutive loading points past the break, or
    /// the line through `[review] virgin_points_kpa`.
    pub(crate) cc: Option<f64>,
    /// Whether Cc is the line through the engineer's points.
    pub(crate) cc_adjusted: bool,
    /// Cr on the first unload–reload cycle (or through `[review] unload_reload_points_kpa`); null without
    /// unloading.
    pub(crate) cr: Option<f64>,
    /// Whether Cr is the line through the engineer's points.
    pub(crate) cr_adjusted: bool,
    /// σ′p, kPa: `[review] sigma_p_kpa` when given, else Casagrande's construction (from the engineer's
    /// point of greatest curvature when `[review] max_curvature_kpa` is given).
    pub(crate) sigma_p_kpa: Option<f64>,
    /// Whether σ′p was set or its construction started by the engineer.
    pub(crate) sigma_p_adjusted: bool,
    /// σ′p by the strain-energy (work) method, kPa [ref: preconsolidation-work].
    pub(crate) sigma_p_work_kpa: Option<f64>,
    /// Test-level remarks (each increment's are in its own `flags`).
    pub(crate) flags: Vec<String>,
    /// Their codes.
    pub(crate) flag_codes: Vec<&'static str>,
    /// `end_of_primary` (where time curves give it) or `end_of_increment` (no time curves at all).
    pub(crate) curve_basis: &'static str,
    /// Stresses of the points Cc was fitted to, kPa.
    pub(crate) cc_stresses_kpa: Vec<f64>,
    /// Stresses of the points Cr was fitted to, kPa.
    pub(crate) cr_stresses_kpa: Vec<f64>,
    /// CR = Cc/(1 + e0).
    pub(crate) compression_ratio: Option<f64>,
    /// OCR = σ′p/σ′v0, with the σ′p of `sigma_p_kpa`.
    pub(crate) ocr: Option<f64>,
    /// σ′p by Casagrande's construction, kPa, beside an engineer's σ′p.
    pub(crate) sigma_p_casagrande_kpa: Option<f64>,
    /// The `[review]` keys the e–log σ′ values were taken from.
    pub(crate) adjusted: Vec<&'static str>,
    /// OCR from the work σ′p.
    pub(crate) ocr_work: Option<f64>,
    /// Stress at the point of maximum curvature of Casagrande's construction, kPa.
    pub(crate) max_curvature_stress_kpa: Option<f64>,
    /// Plotting ratio of Casagrande's construction: Δe per log cycle drawn equal.
    pub(crate) e_per_log_cycle: Option<f64>,
    /// Ring area, mm².
    pub(crate) area_mm2: f64,
    /// H0, mm.
    pub(crate) initial_height_mm: f64,
    /// Seating stress, kPa.
    pub(crate) seating_stress_kpa: f64,
    /// Initial water content (fraction), when given.
    pub(crate) initial_water_content: Option<f64>,
    /// S0 = w0·Gs/e0.
    pub(crate) initial_saturation: Option<f64>,
    /// e0 back-calculated from the final water content and final height, when given.
    pub(crate) e0_from_final_water: Option<f64>,
    /// The file reduced.
    pub(crate) file: String,
}

struct Checker<'a> {
    source: &'a str,
    path: &'a Path,
}

impl Checker<'_> {
    fn at(&self, span: Range<usize>) -> Option<(usize, usize)> {
        Some(line_column(self.source, span.start))
    }

    /// A problem with increment `i`'s time curve, placed at its `readings` value.
    fn readings(&self, i: usize, readings: &Spanned<String>, problem: OfflineError) -> OfflineError {
        OfflineError::Readings {
            path: self.path.to_path_buf(),
            at: self.at(readings.span()),
            field: format!("increment[{i}].readings"),
            problem: Box::new(problem),
        }
    }

    fn field(&self, span: Option<Range<usize>>, field: impl Into<String>, message: impl Into<String>) -> OfflineError {
        OfflineError::Field {
            path: self.path.to_path_buf(),
            at: span.and_then(|s| self.at(s)),
            field: field.into(),
            message: message.into(),
        }
    }

    /// A value finite and within `[low, high]`.
    fn range(
        &self,
        value: &Spanned<f64>,
        field: &str,
        low: f64,
        high: f64,
        allowed: &str,
    ) -> Result<f64, OfflineError> {
        let v = *value.get_ref();
        if v.is_finite() && v >= low && v <= high {
            Ok(v)
        } else {
            Err(self.field(Some(value.span()), field, format!("{v} is not allowed (allowed {allowed})")))
        }
    }
}

/// `oedolog analyze test FILE.toml`: reads (with `read`) the test file and each increment's time curve and
/// reduces the test with the core's one reduction of a test ([`reduce_test_with`](crate::analysis::reduce_test_with)).
pub fn analyze_test(path: &Path, read: ReadFile<'_>) -> Result<TestReport, OfflineError> {
    let source = read_text(path, &mut *read)?;
    analyze_test_source(&source, path, read)
}

/// As [`analyze_test`], with the file's text already read; `readings` paths are relative to `path`'s folder.
pub(crate) fn analyze_test_source(source: &str, path: &Path, read: ReadFile<'_>) -> Result<TestReport, OfflineError> {
    let file: TestFile = toml::from_str(source).map_err(|error| OfflineError::Toml {
        path: path.to_path_buf(),
        at: error.span().map(|s| line_column(source, s.start)),
        field: error.span().map_or_else(|| "file".into(), |s| field_at(source, s.start)),
        message: error.message().trim().to_string(),
    })?;
    let check = Checker { source, path };
    let specimen = check_specimen(&check, &file)?;
    let (curves, values) = read_steps(&check, &file, &specimen, read)?;
    let choices = file_choices(&check, &file)?;
    let reduced = reduce_file_test(&specimen, &values, &curves, &choices);
    report(&check, &file, &specimen, &reduced)
}

/// The engineer's choices written in the file: each increment's, and the `[review]` table's. Their values are
/// checked against the data by the reduction, which names the field refused.
fn file_choices(check: &Checker<'_>, file: &TestFile) -> Result<TestChoices, OfflineError> {
    let mut steps = Vec::new();
    for (i, inc) in file.increments.iter().enumerate() {
        let window = |w: &Option<Spanned<Vec<f64>>>, name: &str| match w {
            None => Ok(None),
            Some(w) => match w.get_ref()[..] {
                [a, b] => Ok(Some([a, b])),
                ref other => Err(check.field(
                    Some(w.span()),
                    format!("increment[{i}].{name}"),
                    format!("{} values given (allowed two times in min, [start, end])", other.len()),
                )),
            },
        };
        let value = |v: &Option<Spanned<f64>>| v.as_ref().map(|v| *v.get_ref());
        let choices = StepChoices {
            taylor_window_min: window(&inc.taylor_window_min, "taylor_window_min")?,
            primary_window_min: window(&inc.primary_window_min, "primary_window_min")?,
            secondary_window_min: window(&inc.secondary_window_min, "secondary_window_min")?,
            d0_mm: value(&inc.d0_mm),
            d100_mm: value(&inc.d100_mm),
            t50_min: value(&inc.t50_min),
            t90_min: value(&inc.t90_min),
            drainage: inc.drainage.as_ref().map(|d| *d.get_ref()),
        };
        if choices.is_empty() {
            continue;
        }
        if inc.readings.is_none() {
            let name = ["taylor_window_min", "primary_window_min", "secondary_window_min", "d0_mm", "d100_mm"]
                .into_iter()
                .chain(["t50_min", "t90_min", "drainage"])
                .find(|n| inc.span(n).is_some())
                .unwrap_or("readings");
            return Err(check.field(
                inc.span(name),
                format!("increment[{i}].{name}"),
                "a choice over the time-curve constructions needs the increment's time curve (readings = \"…\")",
            ));
        }
        steps.push((i, choices));
    }
    let compression = file.review.as_ref().map(ReviewEntry::choices).unwrap_or_default();
    Ok(TestChoices { steps, compression })
}

/// The field an analysis refusal names, and what it says about the value.
fn refused_field(error: &AnalysisError) -> Option<(&'static str, String)> {
    match error {
        AnalysisError::InvalidParameter { name, value, allowed } if value.is_nan() => {
            Some((*name, format!("not allowed (allowed {allowed})")))
        }
        AnalysisError::InvalidParameter { name, value, allowed } => {
            Some((*name, format!("{value} is not allowed (allowed {allowed})")))
        }
        AnalysisError::TooFewPoints { what, needed, got } => {
            Some((*what, format!("{got} points inside; needs at least {needed}")))
        }
        _ => None,
    }
}

/// The `[specimen]` table checked, with its phase relations.
struct CheckedSpecimen {
    measurements: SpecimenMeasurements,
    phase: crate::analysis::PhaseRelations,
    seating_stress_kpa: f64,
    sigma_v0_kpa: Option<f64>,
    final_water_content: Option<f64>,
}

impl CheckedSpecimen {
    /// Settlements must keep e above 0: from −H0 up to below H0 − Hs, in words for messages.
    fn settlement_allowed(&self) -> String {
        let (h0, hs) = (self.phase.height_mm, self.phase.solids_height_mm);
        format!("−H0 = {} mm up to below H0 − Hs = {} mm (e stays above 0)", fmt_g(-h0), fmt_g(h0 - hs))
    }

    fn settlement_ok(&self, settlement_mm: f64) -> bool {
        let (h0, hs) = (self.phase.height_mm, self.phase.solids_height_mm);
        settlement_mm.is_finite() && settlement_mm >= -h0 && settlement_mm < h0 - hs
    }
}

fn check_specimen(check: &Checker<'_>, file: &TestFile) -> Result<CheckedSpecimen, OfflineError> {
    let path = check.path;
    let s = &file.specimen;
    // Phase relations; the analysis names the measurement it refuses, here given its place in the file.
    let mut measurements = SpecimenMeasurements::new(
        *s.diameter_mm.get_ref(),
        *s.height_mm.get_ref(),
        *s.dry_mass_g.get_ref(),
        *s.specific_gravity.get_ref(),
    );
    measurements.initial_water_content = s.initial_water_content.as_ref().map(|w| *w.get_ref());
    let phase = phase_relations(&measurements).map_err(|error| match error {
        AnalysisError::InvalidParameter { name, value, allowed } => {
            let span = match name {
                "diameter_mm" => Some(s.diameter_mm.span()),
                "height_mm" => Some(s.height_mm.span()),
                "dry_mass_g" => Some(s.dry_mass_g.span()),
                "specific_gravity" => Some(s.specific_gravity.span()),
                "initial_water_content" => s.initial_water_content.as_ref().map(|w| w.span()),
                _ => None,
            };
            check.field(span, format!("specimen.{name}"), format!("{value} is not allowed (allowed {allowed})"))
        }
        error => OfflineError::Analysis { path: path.to_path_buf(), error },
    })?;
    let seating_stress_kpa = match &s.seating_stress_kpa {
        Some(v) => check.range(v, "specimen.seating_stress_kpa", 0.0, MAX_STRESS_KPA, "0 to 100000 kPa")?,
        None => 0.0,
    };
    let sigma_v0_kpa = match &s.sigma_v0_kpa {
        Some(v) => {
            Some(check.range(v, "specimen.sigma_v0_kpa", STRESS_RESOLUTION_KPA, MAX_STRESS_KPA, STRESS_ALLOWED)?)
        }
        None => None,
    };
    let final_water_content = match &s.final_water_content {
        Some(v) => Some(check.range(v, "specimen.final_water_content", 0.0, 20.0, "0 to 20, a fraction")?),
        None => None,
    };
    Ok(CheckedSpecimen { measurements, phase, seating_stress_kpa, sigma_v0_kpa, final_water_content })
}

/// Each increment's time curve.
type Curves = Vec<Option<Vec<(f64, f64)>>>;

/// Each increment's checked stress and settlement, and its time curve read (with `read`) and parsed.
fn read_steps(
    check: &Checker<'_>,
    file: &TestFile,
    specimen: &CheckedSpecimen,
    read: ReadFile<'_>,
) -> Result<(Curves, Vec<(f64, f64)>), OfflineError> {
    if file.increments.is_empty() {
        return Err(check.field(None, "increment", "no [[increment]] tables: at least one is needed"));
    }
    let base = check.path.parent().unwrap_or(Path::new(""));
    let mut curves: Curves = Vec::with_capacity(file.increments.len());
    let mut values = Vec::with_capacity(file.increments.len());
    for (i, inc) in file.increments.iter().enumerate() {
        let stress = check.range(
            &inc.stress_kpa,
            &format!("increment[{i}].stress_kpa"),
            STRESS_RESOLUTION_KPA,
            MAX_STRESS_KPA,
            STRESS_ALLOWED,
        )?;
        let settlement = *inc.settlement_mm.get_ref();
        if !specimen.settlement_ok(settlement) {
            return Err(check.field(
                Some(inc.settlement_mm.span()),
                format!("increment[{i}].settlement_mm"),
                format!("{settlement} is not allowed (allowed {})", specimen.settlement_allowed()),
            ));
        }
        values.push((stress, settlement));
        curves.push(match &inc.readings {
            None => None,
            Some(readings) => {
                if readings.get_ref().trim().is_empty() {
                    return Err(check.field(
                        Some(readings.span()),
                        format!("increment[{i}].readings"),
                        "empty path (give the CSV file, relative to this file)",
                    ));
                }
                let csv_path = base.join(readings.get_ref());
                Some(read_readings(&csv_path, &mut *read).map_err(|problem| check.readings(i, readings, problem))?)
            }
        });
    }
    Ok((curves, values))
}

/// The core's one reduction of a test, on the file's steps. The file gives settlements already corrected
/// for apparatus deflection: no table here.
fn reduce_file_test(
    specimen: &CheckedSpecimen,
    values: &[(f64, f64)],
    curves: &[Option<Vec<(f64, f64)>>],
    choices: &TestChoices,
) -> crate::analysis::TestReduction {
    let (measurements, h0) = (&specimen.measurements, specimen.phase.height_mm);
    let steps: Vec<StepInput<'_>> = values
        .iter()
        .zip(curves)
        .map(|(&(stress_kpa, settlement_mm), curve)| StepInput {
            void: false,
            stress_kpa,
            settlement_mm: Some(settlement_mm),
            readings: curve.as_deref(),
        })
        .collect();
    let input_specimen = TestSpecimen {
        diameter_mm: measurements.diameter_mm,
        height_mm: h0,
        dry_mass_g: Some(measurements.dry_mass_g),
        specific_gravity: Some(measurements.specific_gravity),
        initial_water_content: measurements.initial_water_content,
        final_water_content: specimen.final_water_content,
        seating_stress_kpa: specimen.seating_stress_kpa,
        sigma_v0_kpa: specimen.sigma_v0_kpa,
    };
    let rules = ReductionRules::default();
    let choices = (!choices.is_empty()).then_some(choices);
    reduce_test(&TestInput { specimen: input_specimen, steps: &steps, deflection: None, rules: &rules, choices })
}

/// The command's report from the reduction, each refusal placed in the file.
fn report(
    check: &Checker<'_>,
    file: &TestFile,
    specimen: &CheckedSpecimen,
    reduced: &crate::analysis::TestReduction,
) -> Result<TestReport, OfflineError> {
    let path = check.path;
    let s = &file.specimen;
    let (phase, h0, hs) = (&specimen.phase, specimen.phase.height_mm, specimen.phase.solids_height_mm);
    let base = path.parent().unwrap_or(Path::new(""));

    for (i, (step, inc)) in reduced.steps.iter().zip(&file.increments).enumerate() {
        let Some(readings) = &inc.readings else { continue };
        let csv_path = base.join(readings.get_ref());
        if let Some(error) = &step.curve_refused {
            // A refused choice is placed at its key in this increment's table.
            if let Some((name, message)) = refused_field(error)
                && let Some(span) = inc.span(name)
            {
                return Err(check.field(Some(span), format!("increment[{i}].{name}"), message));
            }
            let problem = OfflineError::Analysis { path: csv_path, error: error.clone() };
            return Err(check.readings(i, readings, problem));
        }
        if let Some(eop) = step.settlement_eop_mm
            && !specimen.settlement_ok(eop)
        {
            let problem = OfflineError::Field {
                path: csv_path,
                at: None,
                field: "end of primary".into(),
                message: format!("settlement at d100 {eop} mm is outside {}", specimen.settlement_allowed()),
            };
            return Err(check.readings(i, readings, problem));
        }
    }
    let compression = match &reduced.compression {
        Ok(c) => c,
        Err(CurveUnavailable::Refused(error))
            if let Some((name, message)) = refused_field(error)
                && let Some(span) = file.review.as_ref().and_then(|r| r.span(name)) =>
        {
            return Err(check.field(Some(span), format!("review.{name}"), message));
        }
        Err(CurveUnavailable::Refused(error) | CurveUnavailable::Specimen(error)) => {
            return Err(OfflineError::Analysis { path: path.to_path_buf(), error: error.clone() });
        }
        Err(other) => {
            return Err(check.field(None, "increment", other.to_string()));
        }
    };

    let mut remarks: Vec<Remark> = phase.flags.iter().map(Remark::from).collect();
    let mut e0_from_final_water = None;
    if let Some(fw) = &reduced.final_water {
        let fw = fw.as_ref().map_err(|error| {
            let span = s.final_water_content.as_ref().map(|w| w.span());
            check.field(span, "specimen.final_water_content", error.to_string())
        })?;
        e0_from_final_water = Some(fw.e0_from_final_water);
        remarks.extend(fw.flags.iter().map(Remark::from));
    }
    remarks.extend(compression.flags.iter().map(Remark::from));
    let any_curve = reduced.basis == CurveBasis::EndOfPrimary;
    if !any_curve {
        remarks.push(Remark {
            code: "end_of_increment_curve",
            message: "no time curves: e is at the end of each increment (a Method A curve), not at end of primary"
                .into(),
        });
    }

    // Every increment of the file has a settlement, so each is a point of the curve, in order.
    let increments = compression
        .points
        .iter()
        .zip(&reduced.steps)
        .zip(&file.increments)
        .map(|((state, step), entry)| increment_row(state, step, entry))
        .collect();
    let stresses = |indices: &[usize]| indices.iter().map(|&i| compression.points[i].stress_kpa).collect::<Vec<f64>>();
    let casagrande = compression.sigma_p_casagrande.as_ref();
    let adjusted = |name: &str| compression.adjusted.contains(&name);
    let (flags, flag_codes) = split_remarks(&remarks);
    Ok(TestReport {
        hs_mm: hs,
        e0: compression.e0,
        increments,
        cc: compression.cc.as_ref().map(|l| l.index),
        cc_adjusted: adjusted("virgin_points_kpa"),
        cr: compression.cr.as_ref().map(|l| l.index),
        cr_adjusted: adjusted("unload_reload_points_kpa"),
        sigma_p_kpa: compression.sigma_p_chosen_kpa.or(casagrande.map(|c| c.sigma_p_kpa)),
        sigma_p_adjusted: adjusted("sigma_p_kpa") || adjusted("max_curvature_kpa"),
        sigma_p_work_kpa: compression.sigma_p_work.as_ref().map(|w| w.sigma_p_kpa),
        flags,
        flag_codes,
        curve_basis: if any_curve { "end_of_primary" } else { "end_of_increment" },
        cc_stresses_kpa: compression.cc.as_ref().map(|l| stresses(&l.points)).unwrap_or_default(),
        cr_stresses_kpa: compression.cr.as_ref().map(|l| stresses(&l.points)).unwrap_or_default(),
        compression_ratio: compression.compression_ratio,
        ocr: compression.ocr_chosen.or(compression.ocr_casagrande),
        sigma_p_casagrande_kpa: casagrande.map(|c| c.sigma_p_kpa),
        adjusted: compression.adjusted.clone(),
        ocr_work: compression.ocr_work,
        max_curvature_stress_kpa: casagrande.map(|c| c.max_curvature_stress_kpa),
        e_per_log_cycle: casagrande.map(|c| c.e_per_log_cycle),
        area_mm2: phase.area_mm2,
        initial_height_mm: h0,
        seating_stress_kpa: specimen.seating_stress_kpa,
        initial_water_content: phase.initial_water_content,
        initial_saturation: phase.initial_saturation,
        e0_from_final_water,
        file: path.display().to_string(),
    })
}

fn increment_row(state: &StatePoint, step: &StepReduction, entry: &IncrementEntry) -> ReportStep {
    let curve = step.curve.as_ref();
    let mut remarks: Vec<Remark> = state.flags.iter().map(Remark::from).collect();
    if let Some(c) = curve {
        for remark in c.flags.iter().map(Remark::from) {
            if !remarks.contains(&remark) {
                remarks.push(remark);
            }
        }
    }
    let (flags, flag_codes) = split_remarks(&remarks);
    ReportStep {
        stress_kpa: state.stress_kpa,
        e: state.e,
        mv_per_kpa: state.mv_per_kpa,
        cv_taylor_mm2_per_min: curve.and_then(|c| c.cv_taylor).map(|e| e.cv_mm2_per_min),
        cv_casagrande_mm2_per_min: curve.and_then(|c| c.cv_casagrande).map(|e| e.cv_mm2_per_min),
        branch: match state.branch {
            Branch::Loading => "loading",
            Branch::Unloading => "unloading",
            Branch::Reloading => "reloading",
        },
        settlement_mm: step.settlement_mm.unwrap_or(0.0),
        settlement_eop_mm: step.settlement_eop_mm,
        eop_from: curve.and_then(|c| c.end_of_primary).map(|e| method_name(e.method)),
        e_end: state.e_end,
        e_eop: state.e_eop,
        av_per_kpa: state.av_per_kpa,
        load_increment_ratio: state.load_increment_ratio,
        k_m_per_s: state.k_m_per_s,
        t50_min: curve.and_then(|c| c.casagrande.t50_min),
        t90_min: curve.and_then(|c| c.taylor.t90_min),
        drainage_path_taylor_mm: curve.and_then(|c| c.cv_taylor).map(|e| e.drainage_path_mm),
        drainage_path_casagrande_mm: curve.and_then(|c| c.cv_casagrande).map(|e| e.drainage_path_mm),
        c_alpha: curve.and_then(|c| c.secondary).map(|s| s.c_alpha_strain),
        c_alpha_void_ratio: curve.and_then(|c| c.secondary).and_then(|s| s.c_alpha_void_ratio),
        readings: entry.readings.as_ref().map(|r| r.get_ref().clone()),
        flags,
        flag_codes,
        adjusted: curve.map(|c| c.adjusted.clone()).unwrap_or_default(),
    }
}

impl TestReport {
    /// One JSON object on one line.
    pub fn to_json(&self) -> String {
        to_json(self)
    }

    /// A readable table with units.
    pub fn to_table(&self) -> String {
        let mut out = String::new();
        let _ = writeln!(out, "Test: {}", self.file);
        let _ = writeln!(
            out,
            "specimen: A = {} mm², H0 = {} mm, Hs = {} mm, e0 = {}, seating {} kPa",
            fixed(Some(self.area_mm2), 1),
            fixed(Some(self.initial_height_mm), 3),
            fixed(Some(self.hs_mm), 4),
            fixed(Some(self.e0), 4),
            fmt_g(self.seating_stress_kpa)
        );
        let _ = writeln!(
            out,
            "e is at {}",
            if self.curve_basis == "end_of_primary" {
                "end of primary where a time curve gives it, else at the end of the increment"
            } else {
                "the end of each increment (no time curves)"
            }
        );
        let _ = writeln!(out);
        let _ = writeln!(
            out,
            "{:>3}  {:>9}  {:<10}{:>12}{:>10}{:>9}{:>12}{:>13}{:>13}{:>11}",
            "#", "σ′ kPa", "branch", "settl. mm", "EOP mm", "e", "mv m²/kN", "cv √t", "cv log t", "Cα"
        );
        let _ = writeln!(
            out,
            "{:>3}  {:>9}  {:<10}{:>12}{:>10}{:>9}{:>12}{:>13}{:>13}{:>11}",
            "", "", "", "", "", "", "", "mm²/min", "mm²/min", ""
        );
        for (i, r) in self.increments.iter().enumerate() {
            let _ = writeln!(
                out,
                "{:>3}  {:>9}  {:<10}{:>12}{:>10}{:>9}{:>12}{:>13}{:>13}{:>11}",
                i,
                significant(Some(r.stress_kpa), 4),
                r.branch,
                fixed(Some(r.settlement_mm), 4),
                fixed(r.settlement_eop_mm, 4),
                fixed(Some(r.e), 4),
                significant(r.mv_per_kpa, 3),
                significant(r.cv_taylor_mm2_per_min, 4),
                significant(r.cv_casagrande_mm2_per_min, 4),
                significant(r.c_alpha, 3),
            );
        }
        let _ = writeln!(out);
        let through = |what: &str, s: &[f64]| {
            if s.is_empty() {
                String::new()
            } else {
                format!(" ({what} through {} kPa)", s.iter().map(|&v| fmt_g(v)).collect::<Vec<_>>().join(", "))
            }
        };
        let mark = |adjusted: bool| if adjusted { " (adjusted)" } else { "" };
        let _ = writeln!(
            out,
            "Cc = {}{}{}, CR = Cc/(1 + e0) = {}",
            fixed(self.cc, 4),
            mark(self.cc_adjusted),
            through("virgin line", &self.cc_stresses_kpa),
            fixed(self.compression_ratio, 4)
        );
        let _ = writeln!(
            out,
            "Cr = {}{}{}",
            fixed(self.cr, 4),
            mark(self.cr_adjusted),
            through("unload–reload", &self.cr_stresses_kpa)
        );
        if self.adjusted.contains(&"sigma_p_kpa") {
            let _ = writeln!(out, "σ′p = {} kPa (adjusted)", significant(self.sigma_p_kpa, 4));
        }
        let _ = writeln!(
            out,
            "σ′p = {} kPa (Casagrande{}; maximum curvature at {} kPa, {} e per log cycle drawn), {} kPa (strain energy)",
            significant(self.sigma_p_casagrande_kpa, 4),
            if self.adjusted.contains(&"max_curvature_kpa") { ", adjusted" } else { "" },
            significant(self.max_curvature_stress_kpa, 4),
            significant(self.e_per_log_cycle, 3),
            significant(self.sigma_p_work_kpa, 4)
        );
        if self.ocr.is_some() || self.ocr_work.is_some() {
            let _ =
                writeln!(out, "OCR = {} (Casagrande), {} (strain energy)", fixed(self.ocr, 2), fixed(self.ocr_work, 2));
        }
        if !self.adjusted.is_empty() {
            let _ = writeln!(out, "adjusted by the engineer's [review]: {}", self.adjusted.join(", "));
        }
        for (i, r) in self.increments.iter().enumerate().filter(|(_, r)| !r.adjusted.is_empty()) {
            let _ = writeln!(
                out,
                "increment[{i}] ({} kPa): time-curve values from the file's choices (adjusted: {})",
                fmt_g(r.stress_kpa),
                r.adjusted.join(", ")
            );
        }
        let mut lines: Vec<String> = self.flags.iter().map(|f| format!("test: {f}")).collect();
        for (i, r) in self.increments.iter().enumerate() {
            lines.extend(r.flags.iter().map(|f| format!("increment[{i}] ({} kPa): {f}", fmt_g(r.stress_kpa))));
        }
        write_flags(&mut out, &lines);
        out
    }
}

// ---------------------------------------------------------------------------------------------------------
// Output helpers

fn to_json<T: Serialize>(value: &T) -> String {
    // Plain structs of numbers and strings always serialise; non-finite numbers become null.
    serde_json::to_string(value).unwrap_or_else(|error| format!("{{\"error\":\"{error}\"}}"))
}

fn dash() -> String {
    "—".into()
}

fn fixed(value: Option<f64>, decimals: usize) -> String {
    value.map_or_else(dash, |v| format!("{v:.decimals$}"))
}

/// `digits` significant figures, in scientific notation outside 1e-3 … 1e6.
fn significant(value: Option<f64>, digits: usize) -> String {
    let Some(v) = value else { return dash() };
    if v == 0.0 {
        return "0".into();
    }
    let magnitude = v.abs().log10().floor();
    if !(-3.0..6.0).contains(&magnitude) {
        return format!("{v:.prec$e}", prec = digits.saturating_sub(1));
    }
    let decimals = (digits as f64 - 1.0 - magnitude).max(0.0) as usize;
    format!("{v:.decimals$}")
}

/// A number as short as it reads exactly (stresses, limits).
fn fmt_g(value: f64) -> String {
    format!("{value}")
}

fn window(w: Option<[f64; 2]>) -> String {
    w.map_or_else(dash, |[a, b]| format!("{}–{}", significant(Some(a), 3), significant(Some(b), 3)))
}

fn write_flags(out: &mut String, flags: &[String]) {
    if flags.is_empty() {
        let _ = writeln!(out, "\nflags: none");
        return;
    }
    let _ = writeln!(out, "\nflags:");
    for f in flags {
        let _ = writeln!(out, "  - {f}");
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // The tests read real files from a temporary folder, as the daemon's `analyze` does.
    fn read(path: &Path) -> std::io::Result<String> {
        std::fs::read_to_string(path)
    }

    fn analyze_increment(path: &Path, drainage_path_mm: f64) -> Result<IncrementReport, OfflineError> {
        super::analyze_increment(path, drainage_path_mm, &mut read)
    }

    fn analyze_test_source(source: &str, path: &Path) -> Result<TestReport, OfflineError> {
        super::analyze_test_source(source, path, &mut read)
    }
    use crate::analysis::terzaghi::degree_of_consolidation;
    use proptest::prelude::*;

    /// A time curve from the exact Terzaghi series (`terzaghi`) plus a straight secondary branch from
    /// T = 1.10 [ref: synthetic-checks, computed]: cv 1.5 mm²/min, Hdr 9.5 mm, 0.03 mm immediate, 1.2 mm
    /// primary, 0.04 mm per log cycle of secondary.
    fn curve_mm(t_min: f64) -> f64 {
        let (cv, hdr) = (1.5, 9.5);
        if t_min <= 0.0 {
            return 0.0;
        }
        let onset = 1.10 * hdr * hdr / cv;
        let secondary = if t_min > onset { 0.04 * (t_min / onset).log10() } else { 0.0 };
        0.03 + 1.2 * degree_of_consolidation(cv * t_min / (hdr * hdr)) + secondary
    }

    fn csv(times: &[f64], d: impl Fn(f64) -> f64) -> String {
        let mut text = format!("{CSV_HEADER}\n");
        for &t in times {
            let _ = writeln!(text, "{t},{}", d(t));
        }
        text
    }

    fn dense_times() -> Vec<f64> {
        let n = 2000;
        std::iter::once(0.0)
            .chain((0..n).map(|k| 0.01 * (k as f64 * (1440.0f64 / 0.01).ln() / (n - 1) as f64).exp()))
            .collect()
    }

    fn write(dir: &Path, name: &str, text: &str) -> PathBuf {
        let path = dir.join(name);
        std::fs::write(&path, text).unwrap();
        path
    }

    #[test]
    fn csv_with_bom_crlf_spaces_and_blank_lines_parses() {
        let text = "\u{feff}time_min, displacement_mm\r\n0,0\r\n\r\n 0.25 , 0.012\r\n1e0,-0.5\r\n0x,1";
        let err = parse_readings(text).unwrap_err();
        assert_eq!(err.to_string(), "line 6: time_min `0x` is not a number");
        let readings = parse_readings(&text[..text.len() - 5]).unwrap();
        assert_eq!(readings, vec![(0.0, 0.0), (0.25, 0.012), (1.0, -0.5)]);
    }

    #[test]
    fn csv_problems_name_their_line_and_column() {
        let h = CSV_HEADER;
        let cases: [(String, &str); 12] = [
            (String::new(), "the file is empty"),
            (
                "time,displacement_mm\n0,0\n".into(),
                "line 1: the header must be exactly `time_min,displacement_mm`, found `time,displacement_mm`",
            ),
            ("displacement_mm,time_min\n0,0\n".into(), "line 1: the header must be exactly"),
            (format!("{h}\n"), "no readings after the header"),
            (format!("{h}\n0,0\n1,0.1,3\n"), "line 3: expected 2 fields (time_min,displacement_mm), found 3"),
            (format!("{h}\n0,0\n1\n"), "line 3: expected 2 fields"),
            (format!("{h}\n0,0\n,0.1\n"), "line 3: time_min is empty"),
            (format!("{h}\n0,0\n1,abc\n"), "line 3: displacement_mm `abc` is not a number"),
            (format!("{h}\n0,0\nNaN,0.1\n"), "line 3: time_min `NaN` is not a finite number"),
            (format!("{h}\n0,0\n1,inf\n"), "line 3: displacement_mm `inf` is not a finite number"),
            (format!("{h}\n-1,0\n"), "line 2: time_min -1 is negative"),
            (format!("{h}\n0,0\n4,0.2\n\n2,0.3\n"), "line 5: time_min 2 is earlier than 4 on line 3"),
        ];
        for (text, want) in cases {
            let err = parse_readings(&text).unwrap_err().to_string();
            assert!(err.contains(want), "{text:?}: got `{err}`, want `{want}`");
        }
        let err = parse_readings(&format!("{h}\n2e9,0\n")).unwrap_err();
        assert!(matches!(err.problem, CsvProblem::OutOfRange { column: "time_min", .. }) && err.line == Some(2));
    }

    #[test]
    fn increment_reports_log_time_end_of_primary_and_cv_near_the_series() {
        // Dense noise-free curve (computed): log-t cv within 1 % (PCHIP in log t −0.9 % on t50
        // [ref: curve-interpolation]), √t cv +0.5 … +2 % (the 1.15 factor biases it +1.5 % [ref: taylor-root-time]).
        let dir = tempfile::tempdir().unwrap();
        let path = write(dir.path(), "dense.csv", &csv(&dense_times(), curve_mm));
        let r = analyze_increment(&path, 9.5).unwrap();
        assert_eq!(r.primary_from, Some("casagrande"));
        assert_eq!((r.d0_mm, r.d100_mm, r.t50_min), (r.casagrande.d0_mm, r.casagrande.d100_mm, r.casagrande.t50_min));
        let (d0, d100) = (r.d0_mm.unwrap(), r.d100_mm.unwrap());
        assert!((r.d50_mm.unwrap() - 0.5 * (d0 + d100)).abs() < 1e-12);
        assert_eq!(r.t90_min, r.taylor.t90_min);
        let taylor = r.cv_taylor_mm2_per_min.unwrap() / 1.5 - 1.0;
        let casagrande = r.cv_casagrande_mm2_per_min.unwrap() / 1.5 - 1.0;
        assert!((0.005..0.02).contains(&taylor), "√t cv error {taylor}");
        assert!(casagrande.abs() < 0.01, "log-t cv error {casagrande}");
        // Cα is the secondary slope over 2·Hdr, exactly as documented.
        assert_eq!(r.c_alpha_height_mm, 19.0);
        assert!((r.c_alpha.unwrap() - r.secondary_slope_mm_per_log_cycle.unwrap() / 19.0).abs() < 1e-15);
        assert!(!r.flag_codes.contains(&"height_unknown"), "{:?}", r.flags);
        let json: serde_json::Value = serde_json::from_str(&r.to_json()).unwrap();
        for key in [
            "d0_mm",
            "d50_mm",
            "d100_mm",
            "t50_min",
            "t90_min",
            "cv_taylor_mm2_per_min",
            "cv_casagrande_mm2_per_min",
            "c_alpha",
        ] {
            assert!(json[key].is_f64(), "{key}: {}", json[key]);
        }
        assert!(json["flags"].is_array());
        let table = r.to_table();
        assert!(
            table.contains("mm²/min") && table.contains("log t (Casagrande)") && table.contains("2 × Hdr"),
            "{table}"
        );
    }

    #[test]
    fn every_undetermined_value_is_null_with_a_flag() {
        let dir = tempfile::tempdir().unwrap();
        // The first 10 minutes only: no t90, no secondary branch.
        let times: Vec<f64> = dense_times().into_iter().filter(|&t| t <= 10.0).collect();
        let short = analyze_increment(&write(dir.path(), "short.csv", &csv(&times, curve_mm)), 9.5).unwrap();
        assert!(short.t90_min.is_none() && short.c_alpha.is_none() && short.cv_casagrande_mm2_per_min.is_none());
        assert!(short.flag_codes.contains(&"t90_not_reached"), "{:?}", short.flags);
        assert!(short.flag_codes.contains(&"no_secondary_branch"), "{:?}", short.flags);
        // Three readings: nothing at all.
        let few = analyze_increment(&write(dir.path(), "few.csv", &csv(&[0.0, 1.0, 2.0, 4.0], curve_mm)), 9.5).unwrap();
        assert!(!few.undetermined().is_empty() && !few.flags.is_empty(), "{few:?}");
        assert_eq!(few.primary_from, None);
        // A swelling curve.
        let swell =
            analyze_increment(&write(dir.path(), "swell.csv", &csv(&dense_times(), |t| -curve_mm(t))), 9.5).unwrap();
        assert!(swell.flag_codes.contains(&"net_swelling") && swell.d100_mm.is_none());
    }

    #[test]
    fn drainage_path_outside_the_allowed_range_is_refused() {
        for bad in [0.0, -1.0, f64::NAN, f64::INFINITY, 2000.0] {
            let err = analyze_increment(Path::new("unused.csv"), bad).unwrap_err();
            assert!(err.to_string().starts_with("--drainage-path-mm"), "{err}");
        }
        let err = analyze_increment(Path::new("/nonexistent/x.csv"), 9.5).unwrap_err();
        assert!(err.to_string().contains("/nonexistent/x.csv: cannot read the file"), "{err}");
    }

    const SPECIMEN: &str =
        "[specimen]\ndiameter_mm = 75\nheight_mm = 19.0\ndry_mass_g = 110\nspecific_gravity = 2.68\n";

    fn test_text(increments: &[(f64, f64, Option<&str>)]) -> String {
        let mut text = SPECIMEN.to_string();
        for (stress, settlement, readings) in increments {
            let _ = write!(text, "\n[[increment]]\nstress_kpa = {stress}\nsettlement_mm = {settlement}\n");
            if let Some(r) = readings {
                let _ = writeln!(text, "readings = \"{r}\"");
            }
        }
        text
    }

    #[test]
    fn test_file_problems_name_the_line_column_and_field() {
        let dir = tempfile::tempdir().unwrap();
        write(dir.path(), "bad.csv", "time_min,displacement_mm\n0,0\n1,abc\n");
        let good = test_text(&[(25.0, 0.1, None), (50.0, 0.3, None)]);
        let cases: Vec<(String, &str)> = vec![
            (good.replace("height_mm = 19.0", "height_mm = 19.0.0"), "line 3, column"),
            (good.replace("dry_mass_g", "dry_mas_g"), "specimen.dry_mas_g: unknown field `dry_mas_g`"),
            (good.replace("specific_gravity = 2.68\n", ""), "missing field `specific_gravity`"),
            (good.replace("stress_kpa = 50", "stress_kpa = \"fifty\""), "line 12, column 14: increment[1].stress_kpa"),
            (
                good.replace("stress_kpa = 50", "stress_kpa = -50"),
                "line 12, column 14: increment[1].stress_kpa: -50 is not allowed",
            ),
            (
                good.replace("2.68", "7.5"),
                "line 5, column 20: specimen.specific_gravity: 7.5 is not allowed (allowed 1.0 to 6.0)",
            ),
            (good.replace("dry_mass_g = 110", "dry_mass_g = 400"), "specimen.dry_mass_g: 400 is not allowed"),
            (
                good.replace("settlement_mm = 0.3", "settlement_mm = 12"),
                "line 13, column 17: increment[1].settlement_mm: 12 is not allowed",
            ),
            (SPECIMEN.into(), "increment: no [[increment]] tables"),
            (format!("{good}sigma_v0_kpa = 0\n"), "increment[1].sigma_v0_kpa: unknown field"),
            (test_text(&[(25.0, 0.1, Some("missing.csv"))]), "increment[0].readings: "),
            (test_text(&[(25.0, 0.1, Some("bad.csv"))]), "line 10, column 12: increment[0].readings: "),
        ];
        for (text, want) in &cases {
            let err = analyze_test_source(text, &dir.path().join("t.toml")).unwrap_err().to_string();
            assert!(err.contains(want), "got `{err}`, want `{want}` in\n{text}");
        }
        let err = analyze_test_source(&cases[10].0, &dir.path().join("t.toml")).unwrap_err().to_string();
        assert!(err.contains("missing.csv: cannot read the file"), "{err}");
        let err = analyze_test_source(&cases[11].0, &dir.path().join("t.toml")).unwrap_err().to_string();
        assert!(err.contains("bad.csv: line 3: displacement_mm `abc` is not a number"), "{err}");
    }

    #[test]
    fn field_paths_count_increment_tables_from_zero() {
        let text = "[specimen]\nheight_mm = 1\n\n[[increment]]\nstress_kpa = 1\n[[increment]]\n  stress_kpa = 2\n";
        assert_eq!(field_at(text, text.find("1\n").unwrap()), "specimen.height_mm");
        assert_eq!(field_at(text, text.rfind("stress_kpa").unwrap()), "increment[1].stress_kpa");
        assert_eq!(field_at(text, text.find("[[increment]]").unwrap()), "increment[0]");
        assert_eq!(field_at(text, 0), "specimen");
        assert_eq!(line_column(text, text.rfind("stress_kpa").unwrap()), (7, 3));
    }

    #[test]
    fn a_time_curve_puts_the_increment_at_end_of_primary_with_double_drainage() {
        // 0.5 mm at 25 kPa before; the curve adds its own compression on top, so the end of increment is
        // 0.5 mm + the last reading. The gauge is tied to the height there (H0 − settlement).
        let dir = tempfile::tempdir().unwrap();
        write(dir.path(), "c.csv", &csv(&dense_times(), curve_mm));
        let last = curve_mm(1440.0);
        let settlement = 0.5 + last;
        let text = test_text(&[(25.0, 0.5, None), (50.0, settlement, Some("c.csv")), (100.0, settlement + 1.0, None)]);
        let r = analyze_test_source(&text, &dir.path().join("t.toml")).unwrap();
        assert_eq!(r.curve_basis, "end_of_primary");
        let inc = &r.increments[1];
        let curve = analyze_increment(&dir.path().join("c.csv"), 9.5).unwrap();
        let d100 = curve.casagrande.d100_mm.unwrap();
        assert_eq!(inc.eop_from, Some("casagrande"));
        assert!((inc.settlement_eop_mm.unwrap() - (settlement - (last - d100))).abs() < 1e-12);
        assert!((inc.e - (r.e0 - inc.settlement_eop_mm.unwrap() / r.hs_mm)).abs() < 1e-12);
        assert!((inc.e_end - (r.e0 - settlement / r.hs_mm)).abs() < 1e-12);
        // Hdr = half the height at log-t d50: H0 − settlement + (last − d50).
        let h50 = 19.0 - settlement + (last - curve.casagrande.d50_mm.unwrap());
        assert!((inc.drainage_path_casagrande_mm.unwrap() - h50 / 2.0).abs() < 1e-9);
        let cv = 0.197 * (h50 / 2.0).powi(2) / inc.t50_min.unwrap();
        assert!((inc.cv_casagrande_mm2_per_min.unwrap() - cv).abs() < 1e-9);
        assert!(inc.cv_taylor_mm2_per_min.is_some() && inc.c_alpha.is_some() && inc.k_m_per_s.is_some());
        // Increments without a curve use their end and say so.
        assert!(r.increments[0].flag_codes.contains(&"end_of_primary_missing"));
        assert!(r.increments[0].cv_taylor_mm2_per_min.is_none());
        let table = r.to_table();
        assert!(table.contains("increment[0] (25 kPa): no end of primary"), "{table}");
    }

    #[test]
    fn integers_are_accepted_and_a_file_without_curves_is_an_end_of_increment_curve() {
        let dir = tempfile::tempdir().unwrap();
        let text = test_text(&[(25.0, 0.1, None), (50.0, 0.3, None)]).replace("0.3", "1");
        let r = analyze_test_source(&text, &dir.path().join("t.toml")).unwrap();
        assert_eq!(r.curve_basis, "end_of_increment");
        assert!(r.flag_codes.contains(&"end_of_increment_curve"), "{:?}", r.flags);
        assert!(r.increments.iter().all(|i| i.flags.is_empty()));
        assert_eq!(r.increments[1].settlement_mm, 1.0);
        let json: serde_json::Value = serde_json::from_str(&r.to_json()).unwrap();
        for key in ["hs_mm", "e0", "increments", "cc", "cr", "sigma_p_kpa", "sigma_p_work_kpa", "flags"] {
            assert!(json.get(key).is_some(), "{key}");
        }
        assert!(json["cr"].is_null() && json["sigma_p_kpa"].is_null());
    }

    #[test]
    fn choices_in_the_file_are_applied_and_named_and_bad_ones_refused_at_their_key() {
        let dir = tempfile::tempdir().unwrap();
        write(dir.path(), "c.csv", &csv(&dense_times(), curve_mm));
        let settlement = 0.5 + curve_mm(1440.0);
        // The increment with the curve is the last table, so keys appended to the file are its own.
        let base = test_text(&[(25.0, 0.5, None), (50.0, settlement, Some("c.csv"))]);
        let path = dir.path().join("t.toml");
        let reduce = |extra: &str| analyze_test_source(&format!("{base}{extra}"), &path);
        let automatic = reduce("").unwrap();
        assert!(automatic.increments[1].adjusted.is_empty() && !automatic.cc_adjusted);
        // t90 set directly and single drainage: cv = 0.848·Hdr²/t90 [ref: cv-formula] with Hdr the whole
        // height at d50 instead of half of it [ref: drainage-path] (computed).
        let r = reduce("t90_min = 100\ndrainage = \"single\"\n").unwrap();
        let (inc, auto) = (&r.increments[1], &automatic.increments[1]);
        assert_eq!(inc.adjusted, vec!["t90_min", "drainage"]);
        assert_eq!(inc.t90_min, Some(100.0));
        let hdr = inc.drainage_path_taylor_mm.unwrap();
        assert!((hdr - 2.0 * auto.drainage_path_taylor_mm.unwrap()).abs() < 1e-12);
        assert!((inc.cv_taylor_mm2_per_min.unwrap() - 0.848 * hdr * hdr / 100.0).abs() < 1e-9);
        let table = r.to_table();
        assert!(
            table.contains(
                "increment[1] (50 kPa): time-curve values from the file's choices (adjusted: t90_min, drainage)"
            ),
            "{table}"
        );
        // Each bad choice names the file, its line and column and its key.
        let line_of = |text: &str, key: &str| text[..text.rfind(key).unwrap()].lines().count() + 1;
        for (extra, key, want) in [
            (
                "taylor_window_min = [30, 10]\n",
                "taylor_window_min",
                "increment[1].taylor_window_min: 10 is not allowed",
            ),
            ("primary_window_min = [1, 2, 3]\n", "primary_window_min", "3 values given"),
            ("secondary_window_min = [2000, 3000]\n", "secondary_window_min", "0 points inside; needs at least 2"),
            ("d100_mm = 50\n", "d100_mm", "increment[1].d100_mm: 50 is not allowed"),
            ("t50_min = -2\n", "t50_min", "increment[1].t50_min: -2 is not allowed"),
            ("drainage = \"triple\"\n", "drainage", "increment[1].drainage: unknown variant `triple`"),
        ] {
            let text = format!("{base}{extra}");
            let err = analyze_test_source(&text, &path).unwrap_err().to_string();
            let line = line_of(&text, key);
            assert!(err.contains(&format!("t.toml: line {line}, column")) && err.contains(want), "{err}");
        }
        // A choice on an increment without a time curve.
        let text = format!("{}d0_mm = 0.1\n", test_text(&[(25.0, 0.5, None)]));
        let err = analyze_test_source(&text, &path).unwrap_err().to_string();
        let line = line_of(&text, "d0_mm");
        assert!(err.contains(&format!("line {line}, column 9: increment[0].d0_mm: a choice")), "{err}");
        // [review]: a point the test never applied, and an unknown key.
        let err = reduce("\n[review]\nvirgin_points_kpa = [25, 150]\n").unwrap_err().to_string();
        assert!(err.contains("review.virgin_points_kpa: 150 is not allowed"), "{err}");
        let err = reduce("\n[review]\ncc_points = [25, 50]\n").unwrap_err().to_string();
        assert!(err.contains("review.cc_points: unknown field `cc_points`"), "{err}");
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(2000))]

        #[test]
        fn any_csv_text_gives_readings_or_a_located_error(
            lines in prop::collection::vec(
                prop_oneof![
                    Just("time_min,displacement_mm".to_string()),
                    "[0-9]{1,3}(\\.[0-9]{1,2})?,-?[0-9]{1,2}(\\.[0-9]{1,3})?",
                    "[ -~]{0,12}",
                    Just("NaN,1".to_string()),
                    Just(String::new()),
                ],
                0..12,
            ),
        ) {
            let text = lines.join("\n");
            match parse_readings(&text) {
                Ok(readings) => prop_assert!(readings.windows(2).all(|w| w[0].0 <= w[1].0)),
                Err(e) => prop_assert!(e.line.is_some_and(|l| l <= lines.len()) || e.line.is_none()),
            }
        }

        #[test]
        fn any_test_text_gives_a_report_or_an_error_never_a_panic(text in "[ -~\n]{0,200}") {
            let source = format!("{SPECIMEN}{text}");
            let _ = analyze_test_source(&source, Path::new("/nonexistent/t.toml"));
        }
    }
}
