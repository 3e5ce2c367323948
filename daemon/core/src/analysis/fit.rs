//! Straight lines: ordinary least squares (hand-rolled [ref: least-squares]), evaluation and intersection.
//! It knows nothing of what the axes mean; callers say whether x is √t, log10 t, log10 σ′ or σ′.

use serde::Serialize;

/// y = intercept + slope·x, in the caller's axes.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Line {
    /// dy/dx.
    pub(crate) slope: f64,
    /// y at x = 0.
    pub(crate) intercept: f64,
}

impl Line {
    /// The line through (x, y) with the given slope.
    pub(crate) fn through(x: f64, y: f64, slope: f64) -> Line {
        Line { slope, intercept: y - slope * x }
    }

    /// y at x.
    pub fn at(&self, x: f64) -> f64 {
        self.intercept + self.slope * x
    }

    /// The point where two lines cross; `None` when they are (numerically) parallel.
    pub(crate) fn intersection(&self, other: &Line) -> Option<(f64, f64)> {
        let dslope = self.slope - other.slope;
        let scale = self.slope.abs().max(other.slope.abs());
        if dslope.is_nan() || dslope.abs() <= 1e-12 * scale {
            return None;
        }
        let x = (other.intercept - self.intercept) / dslope;
        let y = self.at(x);
        (x.is_finite() && y.is_finite()).then_some((x, y))
    }
}

/// Running sums for a least-squares line, shifted by the first point so large offsets (a gauge reading of
/// 12.345 mm) do not eat the precision of small changes.
#[derive(Debug, Clone, Copy, Default)]
pub(crate) struct LineAccumulator {
    n: usize,
    x0: f64,
    y0: f64,
    sx: f64,
    sy: f64,
    sxx: f64,
    sxy: f64,
}

impl LineAccumulator {
    /// An empty accumulator.
    pub(crate) fn new() -> Self {
        Self::default()
    }

    /// Adds one point.
    pub(crate) fn push(&mut self, x: f64, y: f64) {
        if self.n == 0 {
            self.x0 = x;
            self.y0 = y;
        }
        let dx = x - self.x0;
        let dy = y - self.y0;
        self.n += 1;
        self.sx += dx;
        self.sy += dy;
        self.sxx += dx * dx;
        self.sxy += dx * dy;
    }

    /// Points added so far.
    pub(crate) fn len(&self) -> usize {
        self.n
    }

    /// Leverage of a new abscissa on the fitted line, 1/n + (x − x̄)²/Sxx: the variance of the line's
    /// prediction at x in units of one point's variance (standard regression result [ref: least-squares]).
    pub(crate) fn leverage(&self, x: f64) -> f64 {
        if self.n < 2 {
            return f64::INFINITY;
        }
        let n = self.n as f64;
        let mean = self.sx / n;
        let sxx = self.sxx - self.sx * mean;
        let dx = x - self.x0 - mean;
        1.0 / n + if sxx > 0.0 { dx * dx / sxx } else { f64::INFINITY }
    }

    /// The least-squares line; `None` with fewer than two distinct abscissae.
    pub(crate) fn line(&self) -> Option<Line> {
        if self.n < 2 {
            return None;
        }
        let n = self.n as f64;
        let denominator = n * self.sxx - self.sx * self.sx;
        // Distinct abscissae give a positive spread; rounding can leave a hair above zero.
        if denominator.is_nan() || denominator <= 1e-24 * (n * self.sxx).max(f64::MIN_POSITIVE) {
            return None;
        }
        let slope = (n * self.sxy - self.sx * self.sy) / denominator;
        let mean_dx = self.sx / n;
        let mean_dy = self.sy / n;
        let intercept = self.y0 + mean_dy - slope * (self.x0 + mean_dx);
        (slope.is_finite() && intercept.is_finite()).then_some(Line { slope, intercept })
    }
}

/// Least-squares line through the points; `None` with fewer than two distinct abscissae.
pub(crate) fn fit_line(points: impl IntoIterator<Item = (f64, f64)>) -> Option<Line> {
    let mut acc = LineAccumulator::new();
    for (x, y) in points {
        acc.push(x, y);
    }
    acc.line()
}

/// Largest |y − line(x)| over the points (0 for none).
pub(crate) fn max_abs_residual(line: &Line, points: impl IntoIterator<Item = (f64, f64)>) -> f64 {
    points.into_iter().map(|(x, y)| (y - line.at(x)).abs()).fold(0.0, f64::max)
}

/// Residual sum of squares of the points about the line.
pub(crate) fn residual_sum_of_squares(line: &Line, points: impl IntoIterator<Item = (f64, f64)>) -> f64 {
    points.into_iter().map(|(x, y)| (y - line.at(x)).powi(2)).sum()
}

/// Grows a straight run over points `(x, y, tolerance)` in scan order: the first `seed` points start it,
/// then each next point joins while it lies within its tolerance of the line through the run so far —
/// the tolerance widened by √(1 + leverage), as a prediction interval is, so a line from a few early points
/// is not over-trusted far from them. One
/// stray point is forgiven (kept inside the run, left out of the sums) if the point after it is back on the
/// line; two in a row end the run (the residual rule of [ref: straight-run-rule, common practice], made robust to
/// single noisy readings).
/// Returns how many points the run spans from the start of the scan, and the sums of those fitted.
pub(crate) fn grow_straight_run(
    points: impl IntoIterator<Item = (f64, f64, f64)>,
    seed: usize,
) -> (usize, LineAccumulator) {
    let mut points = points.into_iter();
    let mut acc = LineAccumulator::new();
    for (x, y, _) in points.by_ref().take(seed) {
        acc.push(x, y);
    }
    let mut joined = acc.len();
    if joined < seed {
        return (joined, acc);
    }
    let mut stray = false;
    for (x, y, tolerance) in points {
        let Some(line) = acc.line() else { break };
        let residual = (y - line.at(x)).abs();
        let allowed = tolerance * (1.0 + acc.leverage(x)).sqrt();
        let off = residual.is_nan() || allowed.is_nan() || residual > allowed;
        match (off, stray) {
            (false, _) => {
                joined += usize::from(stray) + 1;
                stray = false;
                acc.push(x, y);
            }
            (true, false) => stray = true,
            (true, true) => break,
        }
    }
    (joined, acc)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn fit_recovers_an_exact_line_despite_a_large_offset() {
        // Computed: points exactly on y = 12.345 + 0.0021·x must give the line back to rounding.
        let line = fit_line((0..50).map(|k| (k as f64, 12.345 + 0.0021 * k as f64))).unwrap();
        assert!((line.slope - 0.0021).abs() < 1e-13);
        assert!((line.intercept - 12.345).abs() < 1e-12);
    }

    #[test]
    fn fit_matches_the_closed_form_for_three_points() {
        // Computed by hand: (0,1), (1,2), (2,4): slope = 1.5, intercept = 5/6.
        let line = fit_line([(0.0, 1.0), (1.0, 2.0), (2.0, 4.0)]).unwrap();
        assert!((line.slope - 1.5).abs() < 1e-14);
        assert!((line.intercept - 5.0 / 6.0).abs() < 1e-14);
        let rss = residual_sum_of_squares(&line, [(0.0, 1.0), (1.0, 2.0), (2.0, 4.0)]);
        assert!((rss - 1.0 / 6.0).abs() < 1e-14);
    }

    #[test]
    fn degenerate_fits_and_parallel_lines_give_none() {
        assert!(fit_line([]).is_none());
        assert!(fit_line([(1.0, 2.0)]).is_none());
        assert!(fit_line([(1.0, 2.0), (1.0, 3.0)]).is_none());
        let a = Line { slope: 2.0, intercept: 1.0 };
        assert!(a.intersection(&Line { slope: 2.0, intercept: 5.0 }).is_none());
        let (x, y) = a.intersection(&Line { slope: -1.0, intercept: 4.0 }).unwrap();
        assert!((x - 1.0).abs() < 1e-15 && (y - 3.0).abs() < 1e-15);
    }

    #[test]
    fn straight_run_forgives_one_stray_point_but_stops_at_a_bend() {
        // y = x for x = 0..10 with one spike at x = 4, then y bends away from x = 8 on.
        let points: Vec<(f64, f64, f64)> = (0..12)
            .map(|k| {
                let x = k as f64;
                let y = if k == 4 {
                    x + 0.5
                } else if k >= 8 {
                    x - 0.3 * (x - 7.0)
                } else {
                    x
                };
                (x, y, 0.1)
            })
            .collect();
        let (joined, acc) = grow_straight_run(points.iter().copied(), 3);
        assert_eq!(joined, 8, "x = 0…7 join, the spike at 4 forgiven, x = 8 and 9 both off the line");
        assert_eq!(acc.len(), 7, "the spike is spanned but not fitted");
        let line = acc.line().unwrap();
        assert!((line.slope - 1.0).abs() < 1e-12 && line.intercept.abs() < 1e-12);
        let (short, _) = grow_straight_run(points.iter().copied().take(2), 3);
        assert_eq!(short, 2);
    }
}
