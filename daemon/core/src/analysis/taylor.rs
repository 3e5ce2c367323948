//! Taylor's square-root-of-time construction (Taylor 1942, 1948 [ref: taylor-root-time]): straight early
//! part → corrected zero d0, a line with abscissae `factor` × larger →
//! t90 and d90 where it meets the curve, d100 = d0 + (d90 − d0)/0.9. It only reads the curve; cv from t90
//! is the caller's (it needs the drainage path). An engineer's choices (a √t window, d0, d100, t90) replace
//! what they name and the construction proceeds from them; checking them against the data is the caller's.

use serde::Serialize;

use super::curve::PreparedCurve;
use super::fit::{Line, fit_line, grow_straight_run};
use super::flags::{Flag, push_unique};
use super::interp::Pchip;
use super::review::StepChoices;
use super::{AnalysisError, check_range};

/// The straight part may start anywhere in the first this share of the rise from the first node to its own
/// end: late enough to pass the immediate compression and the first noisy readings, early enough that the
/// line is the early part's (the √T-linear range ends at U ≈ 0.6 [ref: terzaghi-approximations]).
const START_SHARE: f64 = 0.5;
/// A run this share of the longest one's rise is as good: the earliest such start is taken.
const NEAR_LONGEST: f64 = 0.7;
/// At most this many starts are tried (the thinned curve has about 40 nodes per log cycle).
const MAX_STARTS: usize = 80;
/// Constructions need at least this many nodes after the load went on.
pub(crate) const MIN_NODES: usize = 4;
/// A straight fit through fewer points than this is flagged as weak.
const WEAK_FIT_POINTS: usize = 4;
/// Primary compression under this many gauge resolutions is flagged: on synthetic curves quantised to the
/// resolution, 30 resolutions of primary let the log-t tail pass for a straight line and biased cv by +25 %,
/// 100 resolutions by +2 % (tests in `casagrande`) [ref: gauge-resolution, computed].
pub(crate) const SMALL_PRIMARY_RESOLUTIONS: f64 = 50.0;

/// Choices of the √t construction.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub(crate) struct TaylorParams {
    /// Abscissa ratio of the construction line, OC = 1.15·OB [ref: taylor-root-time]. The exact-theory value
    /// is 1.1546, and 1.15 biases cv by +1.5 % [ref: taylor-root-time, computed]; exposed so a lab can choose.
    pub(crate) factor: f64,
    /// The straight fit stops before nodes beyond this degree of consolidation, the end of the √T-linear
    /// range (U ≲ 60 % [ref: terzaghi-approximations, computed]).
    pub(crate) max_fit_degree: f64,
    /// Fewest nodes in the straight fit (they seed it).
    pub(crate) min_fit_points: usize,
    /// Nodes before this time (min) are left out of the straight fit, e.g. to skip bedding on load-on.
    pub(crate) fit_from_min: f64,
}

impl Default for TaylorParams {
    fn default() -> Self {
        TaylorParams { factor: 1.15, max_fit_degree: 0.6, min_fit_points: 3, fit_from_min: 0.0 }
    }
}

impl TaylorParams {
    /// Refuses parameters outside their sensible ranges.
    pub(crate) fn check(&self) -> Result<(), AnalysisError> {
        check_range("taylor.factor", self.factor, 1.0, 2.0, "1.0 to 2.0 (standard 1.15)")?;
        check_range("taylor.max_fit_degree", self.max_fit_degree, 0.1, 0.9, "0.1 to 0.9 (standard 0.6)")?;
        check_range("taylor.min_fit_points", self.min_fit_points as f64, 3.0, 1000.0, "3 to 1000")?;
        check_range("taylor.fit_from_min", self.fit_from_min, 0.0, 1e6, "0 to 1e6 min")?;
        Ok(())
    }
}

/// The straight early part and its line, d = intercept + slope·√t (intercept = d0).
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct StraightFit {
    /// First node in the fit (index into the curve's nodes).
    pub(crate) first_node: usize,
    /// Last node in the fit.
    pub(crate) last_node: usize,
    /// Time of the first node.
    pub(crate) t_start_min: f64,
    /// Time of the last node.
    pub(crate) t_end_min: f64,
    /// Nodes fitted (a single stray node inside the span is left out).
    pub(crate) points: usize,
    /// The line, in (√t in √min, d in mm).
    pub line: Line,
    /// True when the U ≤ `max_fit_degree` limit, not the residual rule, ended the fit.
    pub(crate) capped_by_degree: bool,
}

/// Result of the √t construction. Values that cannot be determined are `None`, with a flag saying why.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TaylorResult {
    /// The factor used.
    pub(crate) factor: f64,
    /// The straight early part.
    pub straight: Option<StraightFit>,
    /// Corrected zero, mm.
    pub d0_mm: Option<f64>,
    /// The construction line through d0 with slope/`factor`, in (√t, d).
    pub construction_line: Option<Line>,
    /// Where the construction line meets the curve.
    pub t90_min: Option<f64>,
    /// Reading at t90.
    pub d90_mm: Option<f64>,
    /// d0 + (d90 − d0)/0.9.
    pub d100_mm: Option<f64>,
    /// (d0 + d100)/2.
    pub d50_mm: Option<f64>,
    /// Time the curve reaches d50.
    pub t50_min: Option<f64>,
    /// Quality remarks.
    pub(crate) flags: Vec<Flag>,
}

impl StraightFit {
    /// Time of the last node in the straight part, min.
    pub fn t_end_min(&self) -> f64 {
        self.t_end_min
    }
}

impl TaylorResult {
    /// The factor of the construction line's √t over the straight part's (1.15 for U = 90 %).
    pub fn factor(&self) -> f64 {
        self.factor
    }

    pub(crate) fn empty(factor: f64) -> Self {
        TaylorResult {
            factor,
            straight: None,
            d0_mm: None,
            construction_line: None,
            t90_min: None,
            d90_mm: None,
            d100_mm: None,
            d50_mm: None,
            t50_min: None,
            flags: Vec::new(),
        }
    }
}

/// Runs the √t construction on a prepared curve. `Err` only for parameters out of range.
#[cfg(test)]
pub(crate) fn taylor(curve: &PreparedCurve, params: &TaylorParams) -> Result<TaylorResult, AnalysisError> {
    taylor_with(curve, params, &StepChoices::default())
}

/// The nodes `first..=last` of the curve whose times lie in `[a, b]` min (`None` when none do).
pub(crate) fn nodes_in_window(curve: &PreparedCurve, [a, b]: [f64; 2]) -> Option<(usize, usize)> {
    let first = curve.nodes.partition_point(|n| n.t_min < a);
    let end = curve.nodes.partition_point(|n| n.t_min <= b);
    (end > first).then(|| (first, end - 1))
}

/// [`taylor`] with an engineer's choices: `taylor_window_min` fits the straight line to exactly the nodes in
/// it (least squares, no residual rule, no U ≤ 60 % cap); `d0_mm` is the corrected zero the construction line
/// starts from; `d100_mm` replaces d0 + (d90 − d0)/0.9; `t90_min` replaces where the line meets the curve.
/// d50 and t50 follow from the d0 and d100 used. The choices must have been checked against the curve.
pub(crate) fn taylor_with(
    curve: &PreparedCurve,
    params: &TaylorParams,
    choices: &StepChoices,
) -> Result<TaylorResult, AnalysisError> {
    params.check()?;
    let mut result = TaylorResult::empty(params.factor);
    let nodes = &curve.nodes;
    let first = nodes.iter().position(|n| n.t_min > params.fit_from_min).unwrap_or(nodes.len());
    let available = nodes.len() - first;
    if nodes.len() < MIN_NODES || available < params.min_fit_points {
        result.flags.push(Flag::TooFewReadings { got: available, needed: MIN_NODES.max(params.min_fit_points) });
        return Ok(result);
    }
    let d: Vec<f64> = nodes.iter().map(|n| n.d_mm).collect();
    let Ok(pchip) = Pchip::new(curve.sqrt_t.clone(), d) else {
        result.flags.push(Flag::TooFewReadings { got: nodes.len(), needed: MIN_NODES });
        return Ok(result);
    };

    if let Some(window) = choices.taylor_window_min {
        // The engineer's window: exactly its nodes, however they lie.
        if let Some((first, last)) = nodes_in_window(curve, window) {
            let acc = (first..=last).map(|j| (curve.sqrt_t[j], nodes[j].d_mm));
            let fitted = fit_line(acc).map(|line| (line, last + 1 - first));
            construct_from(curve, &pchip, params, choices, first, last, fitted, false, &mut result);
        }
        apply_t90(choices, &mut result);
        return Ok(result);
    }
    // Pass 1: the residual rule alone, from the start that gives the longest straight part.
    let first = straight_start(curve, first, params.min_fit_points);
    let mut last = straight_end(curve, first, nodes.len() - 1, params.min_fit_points);
    construct(curve, &pchip, params, choices, first, last, false, &mut result);
    // Pass 2: cut nodes beyond U = max_fit_degree, judged by pass 1's d0 and d100.
    if let (Some(d0), Some(d100)) = (result.d0_mm, result.d100_mm) {
        let cap = d0 + params.max_fit_degree * (d100 - d0);
        if nodes[first..=last].iter().any(|n| n.d_mm > cap) {
            let below = (first..=last).rev().find(|&j| nodes[j].d_mm <= cap).unwrap_or(first);
            let shortest = first + params.min_fit_points - 1;
            result = TaylorResult::empty(params.factor);
            if below < shortest {
                result.flags.push(Flag::FitWindowTooShort {
                    construction: "√t straight part",
                    points: below + 1 - first,
                    needed: params.min_fit_points,
                });
            }
            last = straight_end(curve, first, below.max(shortest), params.min_fit_points);
            construct(curve, &pchip, params, choices, first, last, true, &mut result);
        }
    }
    apply_t90(choices, &mut result);
    Ok(result)
}

/// A t90 set directly replaces the construction's (its d90 and d100 stay the construction's).
fn apply_t90(choices: &StepChoices, result: &mut TaylorResult) {
    if let Some(t90) = choices.t90_min {
        result.t90_min = Some(t90);
    }
}

/// Where the straight part starts. Of the first [`MAX_STARTS`] nodes from `first`, a start counts when its
/// straight run (residual rule) grows past its seed and the start lies within the first [`START_SHARE`] of the
/// rise from `first` to the run's end; the earliest start whose run rises at least [`NEAR_LONGEST`] of the
/// longest run's rise is taken. A jump of immediate compression, bedding on load-on or a noisy first reading
/// lies off the √t line, and a run seeded on them ends within a few nodes, so the search passes them; among
/// runs of about the same length the earliest is the early part's [ref: taylor-root-time]
/// [ref: straight-run-rule, common practice].
fn straight_start(curve: &PreparedCurve, first: usize, seed: usize) -> usize {
    let nodes = &curve.nodes;
    let n = nodes.len();
    let runs: Vec<(usize, f64)> = (first..(n + 1).saturating_sub(seed).min(first + MAX_STARTS))
        .filter_map(|j| {
            let end = straight_end(curve, j, n - 1, seed);
            let lead = nodes[j].d_mm - nodes[first].d_mm;
            let grown = end + 1 > j + seed;
            (grown && lead <= START_SHARE * (nodes[end].d_mm - nodes[first].d_mm))
                .then(|| (j, nodes[end].d_mm - nodes[j].d_mm))
        })
        .collect();
    let longest = runs.iter().map(|r| r.1).fold(f64::NEG_INFINITY, f64::max);
    runs.iter().find(|r| r.1 >= NEAR_LONGEST * longest).map_or(first, |r| r.0)
}

/// Last node of the straight run that starts at `first`, scanning no further than `limit`.
fn straight_end(curve: &PreparedCurve, first: usize, limit: usize, seed: usize) -> usize {
    let points = (first..=limit).map(|j| (curve.sqrt_t[j], curve.nodes[j].d_mm, curve.tolerance_causal_mm(j)));
    let (joined, _) = grow_straight_run(points, seed);
    first + joined.max(1) - 1
}

/// The construction on the straight run `first..=last` (residual rule over it).
#[allow(clippy::too_many_arguments)]
fn construct(
    curve: &PreparedCurve,
    pchip: &Pchip,
    params: &TaylorParams,
    choices: &StepChoices,
    first: usize,
    last: usize,
    capped_by_degree: bool,
    result: &mut TaylorResult,
) {
    let nodes = &curve.nodes;
    let points = (first..=last).map(|j| (curve.sqrt_t[j], nodes[j].d_mm, curve.tolerance_causal_mm(j)));
    let (_, acc) = grow_straight_run(points, params.min_fit_points);
    let fitted = acc.line().map(|line| (line, acc.len()));
    if fitted.is_none() {
        push_unique(
            &mut result.flags,
            Flag::FitWindowTooShort { construction: "√t straight part", points: acc.len(), needed: 2 },
        );
    }
    construct_from(curve, pchip, params, choices, first, last, fitted, capped_by_degree, result);
}

/// The construction from the straight line fitted over `first..=last` (`fitted`: the line and how many
/// nodes it was fitted to; `None` when no line could be fitted), with the d0 and d100 an engineer set.
#[allow(clippy::too_many_arguments)]
fn construct_from(
    curve: &PreparedCurve,
    pchip: &Pchip,
    params: &TaylorParams,
    choices: &StepChoices,
    first: usize,
    last: usize,
    fitted: Option<(Line, usize)>,
    capped_by_degree: bool,
    result: &mut TaylorResult,
) {
    let nodes = &curve.nodes;
    let Some((line, points)) = fitted else {
        result.d0_mm = choices.d0_mm;
        finish(curve, pchip, None, choices.d100_mm, result);
        return;
    };
    if points < WEAK_FIT_POINTS {
        push_unique(
            &mut result.flags,
            Flag::FitWindowTooShort { construction: "√t straight part", points, needed: WEAK_FIT_POINTS },
        );
    }
    result.straight = Some(StraightFit {
        first_node: first,
        last_node: last,
        t_start_min: nodes[first].t_min,
        t_end_min: nodes[last].t_min,
        points,
        line,
        capped_by_degree,
    });
    // The corrected zero is the straight line's intercept, or where the engineer put it.
    let d0 = choices.d0_mm.unwrap_or(line.intercept);
    result.d0_mm = Some(d0);
    if line.slope <= 0.0 {
        push_unique(&mut result.flags, Flag::NetSwelling);
        finish(curve, pchip, Some(line), choices.d100_mm, result);
        return;
    }
    let construction_line = Line { slope: line.slope / params.factor, intercept: d0 };
    result.construction_line = Some(construction_line);

    // The data lie above the construction line at the end of the straight part; t90 is where they fall to it.
    let from = curve.sqrt_t[last];
    let above = pchip.eval(from) > construction_line.at(from);
    let Some(x90) = pchip.first_crossing(&construction_line, from).filter(|_| above) else {
        push_unique(&mut result.flags, Flag::T90NotReached);
        finish(curve, pchip, Some(line), choices.d100_mm, result);
        return;
    };
    let d90 = pchip.eval(x90);
    result.t90_min = Some(x90 * x90);
    result.d90_mm = Some(d90);
    finish(curve, pchip, Some(line), Some(choices.d100_mm.unwrap_or(d0 + (d90 - d0) / 0.9)), result);
}

/// d100, then d50 = (d0 + d100)/2 and t50 where the curve reaches it; before the first node the curve is
/// the straight part `line` itself.
fn finish(curve: &PreparedCurve, pchip: &Pchip, line: Option<Line>, d100: Option<f64>, result: &mut TaylorResult) {
    let nodes = &curve.nodes;
    let (Some(d0), Some(d100)) = (result.d0_mm, d100) else { return };
    let d50 = 0.5 * (d0 + d100);
    result.d100_mm = Some(d100);
    result.d50_mm = Some(d50);
    let small = SMALL_PRIMARY_RESOLUTIONS * curve.gauge_resolution_mm;
    if d100 - d0 < small {
        push_unique(
            &mut result.flags,
            Flag::SmallPrimary { primary_mm: d100 - d0, resolution_mm: curve.gauge_resolution_mm },
        );
    }
    // t50 on the curve; before the first node the curve is the straight part itself.
    let x50 = if nodes[0].d_mm >= d50 {
        line.filter(|l| l.slope > 0.0).map(|l| (d50 - l.intercept) / l.slope).filter(|x| *x >= 0.0)
    } else {
        pchip.first_crossing(&Line { slope: 0.0, intercept: d50 }, curve.sqrt_t[0])
    };
    match x50 {
        Some(x) => result.t50_min = Some(x * x),
        None => push_unique(&mut result.flags, Flag::T50NotFound),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::analysis::curve::TimeCurve;
    use crate::analysis::synthetic::{HAND_SCHEDULE_MIN, Model, dense_schedule, relative, sample};
    use crate::analysis::terzaghi::degree_of_consolidation;

    fn run(readings: &[(f64, f64)], params: &TaylorParams) -> TaylorResult {
        let curve = TimeCurve::from_readings(readings, 40.0).unwrap().prepare(0.001).unwrap();
        taylor(&curve, params).unwrap()
    }

    // Synthetic curves [ref: synthetic-checks, computed]: exact Terzaghi series (`terzaghi`) for Hdr = 10 mm,
    // 0.02 mm immediate compression, 1 mm primary, 0.05 mm per log cycle of secondary from T = 1.10.

    #[test]
    fn bedding_in_the_first_readings_is_passed_over_by_the_straight_part() {
        // Seating on load-on: 0.15 mm (15 % of the primary) that settles with a 0.1 min time constant, on top
        // of the exact curve, logged every 6 s for 15 min then every 30 s (the demo's schedule). In √t the first
        // readings climb steeply then join the Terzaghi line offset by the bedding: a straight part seeded on
        // them ends within a few readings and t90 comes out far too early. Started past them, the line is the
        // Terzaghi line shifted by the bedding, so t90 keeps the construction's bias (−1.5 % [ref:
        // taylor-root-time, computed]) plus the thinning's: tolerance ±5 %, t90 > 4 × t50, d0 within 2 % of
        // the primary of the exact d0 plus the bedding.
        for cv in [0.5, 1.0, 2.0] {
            let m = Model { cv_mm2_per_min: cv, ..Model::typical() };
            let times = crate::analysis::synthetic::poll_schedule(0.1, 15.0, 0.5, 8.0 * m.time_at(1.1));
            let bedding = |t: f64| if t > 0.0 { 0.15 * (1.0 - (-t / 0.1).exp()) } else { 0.0 };
            let readings: Vec<(f64, f64)> =
                sample(&m, &times, 0.001, 0.0, 0).into_iter().map(|(t, d)| (t, d + bedding(t))).collect();
            let r = run(&readings, &TaylorParams::default());
            let t90_error = relative(r.t90_min.unwrap(), m.t90_min());
            assert!(t90_error.abs() < 0.05, "cv {cv}: t90 error {t90_error}, straight {:?}", r.straight);
            assert!(r.t90_min.unwrap() > 4.0 * r.t50_min.unwrap(), "cv {cv}: t90 {:?} t50 {:?}", r.t90_min, r.t50_min);
            assert!(r.straight.unwrap().t_start_min > 0.25, "cv {cv}: the straight part starts on the bedding");
            assert!(m.of_primary(r.d0_mm.unwrap(), m.d0_mm() + 0.15).abs() < 0.02, "cv {cv}: d0 {:?}", r.d0_mm);
        }
    }

    #[test]
    fn dense_noise_free_curves_recover_d0_t90_and_d100_within_the_construction_bias() {
        // With the published 1.15 the line meets the ideal curve at T = 0.8354, i.e. t90 −1.50 % and
        // d90 at U = 0.897, d100 −0.33 % of primary [ref: taylor-root-time, computed]. The fitted straight
        // part ends near U = 55 %, where the exact curve has bent by ~0.1 % of primary, so its slope is a
        // little low and the intersection a little later (measured −1.1 %). Tolerances: t90 in [−2.0 %,
        // −0.5 %]; d0 within 0.05 % and d100 within 0.5 % of primary.
        for cv in [0.5, 1.0, 2.0, 4.0] {
            let m = Model { cv_mm2_per_min: cv, ..Model::typical() };
            let r = run(&sample(&m, &dense_schedule(), 0.0, 0.0, 0), &TaylorParams::default());
            let t90_error = relative(r.t90_min.unwrap(), m.t90_min());
            assert!((-0.020..=-0.005).contains(&t90_error), "cv {cv}: t90 error {t90_error}");
            assert!(m.of_primary(r.d0_mm.unwrap(), m.d0_mm()).abs() < 0.0005, "cv {cv}: d0 {:?}", r.d0_mm);
            assert!(m.of_primary(r.d100_mm.unwrap(), m.d100_mm()).abs() < 0.005, "cv {cv}: d100 {:?}", r.d100_mm);
            let t50_error = relative(r.t50_min.unwrap(), m.t50_min());
            assert!(t50_error.abs() < 0.01, "cv {cv}: t50 error {t50_error}");
            // The straight part stays within the √T-linear range, U ≤ 60 % [ref: terzaghi-approximations].
            let s = r.straight.unwrap();
            let u_end = degree_of_consolidation(m.cv_mm2_per_min * s.t_end_min / 100.0);
            assert!(u_end <= 0.6 && s.points >= 20, "cv {cv}: straight part to U = {u_end}, {} points", s.points);
            assert!(r.flags.is_empty(), "cv {cv}: {:?}", r.flags);
        }
    }

    #[test]
    fn exact_theory_factor_removes_the_published_factors_bias() {
        // [ref: taylor-root-time, computed]: the exact factor is 1.1546; with 1.15 the line meets at
        // T = 0.8354 instead of 0.8481, so t90(1.15)/t90(1.1546) = 0.985.
        let m = Model::typical();
        let readings = sample(&m, &dense_schedule(), 0.0, 0.0, 0);
        let published = run(&readings, &TaylorParams::default());
        let exact = run(&readings, &TaylorParams { factor: 1.1546, ..TaylorParams::default() });
        let ratio = published.t90_min.unwrap() / exact.t90_min.unwrap();
        assert!((ratio - 0.8354 / 0.8481).abs() < 0.002, "ratio {ratio}");
        let exact_error = relative(exact.t90_min.unwrap(), m.t90_min());
        assert!(exact_error.abs() < 0.006, "t90 error with the exact factor {exact_error}");
        assert_eq!(exact.factor, 1.1546);
    }

    #[test]
    fn sparse_hand_schedule_recovers_t90_within_the_pchip_bias() {
        // Hand schedule ¼ … 1440 min [ref: reading-schedule], gauge quantised to 0.001 mm with 0.5 µm noise,
        // six cv values × 20 noise seeds. PCHIP on a sparse schedule gave t90 −2.5 % in a trial
        // [ref: curve-interpolation, computed]; here −0.1 … −2.7 % noise-free and down to −4.3 % with noise
        // (the construction line is read between readings an octave apart). Tolerances: t90 in [−6 %, +2 %];
        // d0 within 0.3 % and d100 within 2.5 % of primary (measured 0.14 % and 1.4 %).
        for cv in [0.7, 1.0, 1.5, 2.0, 3.0, 4.0] {
            let m = Model { cv_mm2_per_min: cv, ..Model::typical() };
            for seed in 0..20 {
                let r = run(&sample(&m, &HAND_SCHEDULE_MIN, 0.001, 0.0005, seed), &TaylorParams::default());
                let t90_error = relative(r.t90_min.unwrap(), m.t90_min());
                assert!((-0.06..=0.02).contains(&t90_error), "cv {cv} seed {seed}: t90 error {t90_error}");
                assert!(m.of_primary(r.d0_mm.unwrap(), m.d0_mm()).abs() < 0.003, "cv {cv} seed {seed}");
                assert!(m.of_primary(r.d100_mm.unwrap(), m.d100_mm()).abs() < 0.025, "cv {cv} seed {seed}");
            }
        }
    }

    #[test]
    fn small_primary_straight_part_is_cut_at_sixty_percent() {
        // 0.1 mm of primary read to 0.001 mm: the curve's bend at U = 60–70 % is under 2 gauge resolutions,
        // so the residual rule alone runs on; the U ≤ 60 % limit must end the fit [ref: taylor-root-time].
        let m = Model { primary_mm: 0.1, secondary_mm_per_log_cycle: 0.005, ..Model::typical() };
        let r = run(&sample(&m, &dense_schedule(), 0.001, 0.0, 0), &TaylorParams::default());
        let s = r.straight.unwrap();
        assert!(s.capped_by_degree);
        let (d0, d100) = (r.d0_mm.unwrap(), r.d100_mm.unwrap());
        let u_end = (s.line.at(s.t_end_min.sqrt()) - d0) / (d100 - d0);
        assert!(u_end <= 0.6 + 0.02, "fit runs to U = {u_end}");
        assert!((-0.03..=0.0).contains(&relative(r.t90_min.unwrap(), m.t90_min())));
    }

    #[test]
    fn curve_still_in_primary_reports_t90_not_reached() {
        // Readings only up to T = 0.5 (U = 76 %): the 1.15 line is not met yet.
        let m = Model::typical();
        let times: Vec<f64> = dense_schedule().into_iter().filter(|&t| t <= m.time_at(0.5)).collect();
        let r = run(&sample(&m, &times, 0.001, 0.0, 0), &TaylorParams::default());
        assert!(r.d0_mm.is_some() && r.construction_line.is_some());
        assert_eq!((r.t90_min, r.d100_mm, r.t50_min), (None, None, None));
        assert!(r.flags.contains(&Flag::T90NotReached));
        assert!(*times.last().unwrap() < m.t90_min());
    }

    #[test]
    fn too_few_readings_give_a_flag_not_an_error() {
        let r = run(&[(0.0, 0.0), (1.0, 0.1), (4.0, 0.2)], &TaylorParams::default());
        assert_eq!(r.d0_mm, None);
        assert!(matches!(r.flags[..], [Flag::TooFewReadings { got: 2, .. }]));
    }

    #[test]
    fn parameters_out_of_range_are_refused_by_name() {
        let curve = TimeCurve::from_readings(&[(1.0, 0.1)], 40.0).unwrap().prepare(0.001).unwrap();
        let err = taylor(&curve, &TaylorParams { factor: 0.5, ..TaylorParams::default() }).unwrap_err();
        assert!(matches!(err, AnalysisError::InvalidParameter { name: "taylor.factor", .. }));
        let err = taylor(&curve, &TaylorParams { max_fit_degree: f64::NAN, ..TaylorParams::default() }).unwrap_err();
        assert!(matches!(err, AnalysisError::InvalidParameter { name: "taylor.max_fit_degree", .. }));
    }
}
