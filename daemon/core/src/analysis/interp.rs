//! Monotone piecewise-cubic Hermite interpolation (PCHIP): Fritsch & Carlson (1980), SIAM J. Numer. Anal.
//! 17(2) 238–246, with the weighted-harmonic-mean node slopes of Fritsch & Butland (1984) and the
//! shape-preserving end slopes used by SciPy's `PchipInterpolator` (from memory). It never overshoots the
//! data, so constructions read intersections on the curve, not on chords [ref: curve-interpolation]. It
//! must not smooth or extrapolate: outside the nodes it holds the end values.

use super::AnalysisError;
use super::fit::Line;

/// A PCHIP interpolant through strictly increasing nodes.
#[derive(Debug, Clone)]
pub(crate) struct Pchip {
    x: Vec<f64>,
    y: Vec<f64>,
    slope: Vec<f64>,
}

/// Sign as −1, 0 or 1 (0 for zero), as the shape rules compare signs.
fn sign(v: f64) -> i8 {
    if v > 0.0 {
        1
    } else if v < 0.0 {
        -1
    } else {
        0
    }
}

/// End slope by the three-point formula, kept shape-preserving (SciPy's `_edge_case` rule
/// [ref: curve-interpolation, from memory]).
fn end_slope(h0: f64, h1: f64, delta0: f64, delta1: f64) -> f64 {
    let d = ((2.0 * h0 + h1) * delta0 - h0 * delta1) / (h0 + h1);
    if sign(d) != sign(delta0) {
        0.0
    } else if sign(delta0) != sign(delta1) && d.abs() > 3.0 * delta0.abs() {
        3.0 * delta0
    } else {
        d
    }
}

impl Pchip {
    /// Builds the interpolant. Needs ≥ 2 nodes, finite values, strictly increasing `x`.
    pub(crate) fn new(x: Vec<f64>, y: Vec<f64>) -> Result<Self, AnalysisError> {
        if x.len() != y.len() || x.len() < 2 {
            return Err(AnalysisError::TooFewPoints {
                what: "interpolation nodes",
                needed: 2,
                got: x.len().min(y.len()),
            });
        }
        for (index, (&xi, &yi)) in x.iter().zip(&y).enumerate() {
            if !xi.is_finite() || !yi.is_finite() {
                return Err(AnalysisError::NonFinite { index, field: "interpolation node" });
            }
            if index > 0 && xi <= x[index - 1] {
                return Err(AnalysisError::NotIncreasing { what: "interpolation nodes", index, value: xi });
            }
        }
        let n = x.len();
        let h: Vec<f64> = x.windows(2).map(|w| w[1] - w[0]).collect();
        let delta: Vec<f64> = (0..n - 1).map(|k| (y[k + 1] - y[k]) / h[k]).collect();
        let mut slope = vec![0.0; n];
        if n == 2 {
            slope[0] = delta[0];
            slope[1] = delta[0];
        } else {
            for k in 1..n - 1 {
                let (dl, dr) = (delta[k - 1], delta[k]);
                if sign(dl) != sign(dr) || dl == 0.0 || dr == 0.0 {
                    slope[k] = 0.0;
                } else {
                    let w1 = 2.0 * h[k] + h[k - 1];
                    let w2 = h[k] + 2.0 * h[k - 1];
                    slope[k] = (w1 + w2) / (w1 / dl + w2 / dr);
                }
            }
            slope[0] = end_slope(h[0], h[1], delta[0], delta[1]);
            slope[n - 1] = end_slope(h[n - 2], h[n - 3], delta[n - 2], delta[n - 3]);
        }
        Ok(Pchip { x, y, slope })
    }

    /// Interval index k with x[k] ≤ x ≤ x[k+1], clamped to the ends.
    fn segment(&self, x: f64) -> usize {
        let k = self.x.partition_point(|&xi| xi <= x);
        k.saturating_sub(1).min(self.x.len() - 2)
    }

    /// Coefficients of dy/dx = a·s² + b·s + c on interval k, s = (x − x_k)/h ∈ [0, 1].
    fn derivative_quadratic(&self, k: usize) -> (f64, f64, f64) {
        let h = self.x[k + 1] - self.x[k];
        let delta = (self.y[k + 1] - self.y[k]) / h;
        let (m0, m1) = (self.slope[k], self.slope[k + 1]);
        (-6.0 * delta + 3.0 * m0 + 3.0 * m1, 6.0 * delta - 4.0 * m0 - 2.0 * m1, m0)
    }

    fn local(&self, x: f64) -> (usize, f64, f64) {
        let x = x.clamp(self.x[0], self.x[self.x.len() - 1]);
        let k = self.segment(x);
        let h = self.x[k + 1] - self.x[k];
        (k, (x - self.x[k]) / h, h)
    }

    /// The interpolated value; outside the nodes, the end value.
    pub(crate) fn eval(&self, x: f64) -> f64 {
        let (k, s, h) = self.local(x);
        let s2 = s * s;
        let s3 = s2 * s;
        let h00 = 2.0 * s3 - 3.0 * s2 + 1.0;
        let h10 = s3 - 2.0 * s2 + s;
        let h01 = -2.0 * s3 + 3.0 * s2;
        let h11 = s3 - s2;
        h00 * self.y[k] + h10 * h * self.slope[k] + h01 * self.y[k + 1] + h11 * h * self.slope[k + 1]
    }

    /// dy/dx (inside the nodes; clamped like `eval`).
    pub(crate) fn derivative(&self, x: f64) -> f64 {
        let (k, s, _) = self.local(x);
        let (a, b, c) = self.derivative_quadratic(k);
        (a * s + b) * s + c
    }

    /// Number of intervals.
    pub(crate) fn intervals(&self) -> usize {
        self.x.len() - 1
    }

    /// (x, dy/dx, d²y/dx²) at fraction `s` ∈ [0, 1] of interval `k`, using that interval's cubic even at its
    /// ends, so both one-sided second derivatives at a node can be read.
    pub(crate) fn local_derivatives(&self, k: usize, s: f64) -> (f64, f64, f64) {
        let k = k.min(self.x.len() - 2);
        let h = self.x[k + 1] - self.x[k];
        let (a, b, c) = self.derivative_quadratic(k);
        (self.x[k] + s * h, (a * s + b) * s + c, (2.0 * a * s + b) / h)
    }

    /// The steepest point of the curve: (x, dy/dx) at the global maximum of the derivative, found
    /// analytically on each interval (the derivative is a quadratic there).
    pub(crate) fn max_slope(&self) -> (f64, f64) {
        let mut best = (self.x[0], self.slope[0]);
        for k in 0..self.x.len() - 1 {
            let h = self.x[k + 1] - self.x[k];
            let (a, b, c) = self.derivative_quadratic(k);
            let mut candidates = [(0.0, c), (1.0, a + b + c), (f64::NAN, f64::NAN)];
            if a < 0.0 {
                let s = -b / (2.0 * a);
                if s > 0.0 && s < 1.0 {
                    candidates[2] = (s, (a * s + b) * s + c);
                }
            }
            for (s, slope) in candidates {
                if slope > best.1 {
                    best = (self.x[k] + s * h, slope);
                }
            }
        }
        best
    }

    /// First x ≥ `from_x` where the curve crosses `line`: where y − line changes from its sign at `from_x`
    /// (or touches it). `None` when it never does within the nodes. Exact up to bisection precision: each
    /// interval is split at the curve's tangency points so every piece is monotone in y − line.
    pub(crate) fn first_crossing(&self, line: &Line, from_x: f64) -> Option<f64> {
        let last = self.x.len() - 1;
        if from_x.is_nan() || from_x > self.x[last] {
            return None;
        }
        let from_x = from_x.max(self.x[0]);
        let g = |x: f64| self.eval(x) - line.at(x);
        let g0 = g(from_x);
        if !g0.is_finite() {
            return None;
        }
        if g0 == 0.0 {
            return Some(from_x);
        }
        let positive = g0 > 0.0;
        let crossed = |v: f64| if positive { v <= 0.0 } else { v >= 0.0 };
        let mut start = from_x;
        for k in self.segment(from_x)..last {
            let (lo, hi) = (self.x[k], self.x[k + 1]);
            let h = hi - lo;
            // Tangency points: dy/dx = line slope, a quadratic in s.
            let (a, b, c) = self.derivative_quadratic(k);
            let mut breaks = [start, f64::NAN, f64::NAN, hi];
            let roots = quadratic_roots(a, b, c - line.slope);
            for (slot, root) in breaks[1..3].iter_mut().zip(roots) {
                let x = lo + root * h;
                if x > start && x < hi {
                    *slot = x;
                }
            }
            // Missing roots are NaN, which `total_cmp` sorts last.
            breaks.sort_by(f64::total_cmp);
            let finite = breaks.iter().take_while(|v| v.is_finite()).count();
            for pair in breaks[..finite].windows(2) {
                let (mut left, mut right) = (pair[0], pair[1]);
                if !crossed(g(right)) {
                    continue;
                }
                for _ in 0..200 {
                    let mid = 0.5 * (left + right);
                    if mid <= left || mid >= right {
                        break;
                    }
                    if crossed(g(mid)) {
                        right = mid;
                    } else {
                        left = mid;
                    }
                }
                return Some(right);
            }
            start = hi;
        }
        None
    }
}

/// Real roots of a·s² + b·s + c in any order (NaN for a missing root).
fn quadratic_roots(a: f64, b: f64, c: f64) -> [f64; 2] {
    let scale = a.abs().max(b.abs()).max(c.abs());
    if scale == 0.0 || !scale.is_finite() {
        return [f64::NAN; 2];
    }
    if a.abs() <= 1e-14 * scale {
        return if b != 0.0 { [-c / b, f64::NAN] } else { [f64::NAN; 2] };
    }
    let disc = b * b - 4.0 * a * c;
    if disc < 0.0 {
        return [f64::NAN; 2];
    }
    // Numerically stable form.
    let q = -0.5 * (b + b.signum() * disc.sqrt());
    if q == 0.0 {
        return [0.0, f64::NAN];
    }
    [q / a, c / q]
}

#[cfg(test)]
mod tests {
    use super::*;

    // Values from SciPy 1.17.1 `scipy.interpolate.PchipInterpolator` (a general-purpose reference library),
    // evaluated on the node sets below.
    const MONOTONE_X: [f64; 7] = [0.0, 1.0, 2.5, 3.0, 4.5, 6.0, 8.0];
    const MONOTONE_Y: [f64; 7] = [0.0, 0.8, 1.1, 1.15, 1.6, 1.62, 1.9];
    const MONOTONE_AT: [(f64, f64, f64); 6] = [
        // (x, value, derivative)
        (0.3, 0.30467999999999995, 0.9708000000000001),
        (1.7, 0.9793855750487331, 0.19218713450292416),
        (2.9, 1.1379595141700405, 0.10493927125506033),
        (3.3, 1.2221590834697214, 0.3251587561374794),
        (5.0, 1.608256022403687, 0.009969012837538743),
        (7.1, 1.7283274928856003, 0.16016447543160678),
    ];
    const WAVY_X: [f64; 6] = [0.0, 1.0, 2.0, 3.0, 4.0, 5.0];
    const WAVY_Y: [f64; 6] = [0.0, 2.0, 1.0, 3.0, 3.0, 0.0];
    const WAVY_AT: [(f64, f64, f64); 5] =
        [(0.5, 1.4375, 2.125), (1.5, 1.5, -1.5), (2.25, 1.3125, 2.25), (3.5, 3.0, 0.0), (4.8, 0.888, -4.32)];

    #[test]
    fn values_and_slopes_match_scipy_pchip() {
        let p = Pchip::new(MONOTONE_X.to_vec(), MONOTONE_Y.to_vec()).unwrap();
        for (x, value, slope) in MONOTONE_AT {
            assert!((p.eval(x) - value).abs() < 1e-12, "value at {x}");
            assert!((p.derivative(x) - slope).abs() < 1e-12, "slope at {x}");
        }
        let q = Pchip::new(WAVY_X.to_vec(), WAVY_Y.to_vec()).unwrap();
        for (x, value, slope) in WAVY_AT {
            assert!((q.eval(x) - value).abs() < 1e-12, "value at {x}");
            assert!((q.derivative(x) - slope).abs() < 1e-12, "slope at {x}");
        }
    }

    #[test]
    fn monotone_data_give_a_monotone_curve_without_overshoot() {
        // Fritsch & Carlson 1980 [ref: curve-interpolation, from memory]: monotone data, monotone interpolant.
        let p = Pchip::new(MONOTONE_X.to_vec(), MONOTONE_Y.to_vec()).unwrap();
        let mut previous = f64::NEG_INFINITY;
        for k in 0..=800 {
            let v = p.eval(8.0 * k as f64 / 800.0);
            assert!(v >= previous - 1e-15 && v <= 1.9 + 1e-15);
            previous = v;
        }
    }

    #[test]
    fn max_slope_is_the_analytic_maximum() {
        let p = Pchip::new(MONOTONE_X.to_vec(), MONOTONE_Y.to_vec()).unwrap();
        let (x_best, slope_best) = p.max_slope();
        let sampled = (0..=80_000).map(|k| p.derivative(8.0 * k as f64 / 80_000.0)).fold(f64::MIN, f64::max);
        assert!(slope_best >= sampled - 1e-12 && slope_best <= sampled + 1e-6);
        assert!((p.derivative(x_best) - slope_best).abs() < 1e-12);
    }

    #[test]
    fn first_crossing_finds_the_first_of_several() {
        // The wavy curve crosses y = 1.5 going up near x ≈ 0.4, down in (1, 2), up again in (2, 3).
        let q = Pchip::new(WAVY_X.to_vec(), WAVY_Y.to_vec()).unwrap();
        let level = Line { slope: 0.0, intercept: 1.5 };
        let first = q.first_crossing(&level, 0.0).unwrap();
        assert!((q.eval(first) - 1.5).abs() < 1e-12 && first < 1.0);
        let second = q.first_crossing(&level, 1.0).unwrap();
        assert!((q.eval(second) - 1.5).abs() < 1e-12 && second > 1.0 && second < 2.0);
        // Per WAVY_AT the curve passes 1.5 exactly at x = 1.5: the downward crossing is there.
        assert!((second - 1.5).abs() < 1e-12);
        assert!(q.first_crossing(&Line { slope: 0.0, intercept: 10.0 }, 0.0).is_none());
    }

    #[test]
    fn bad_nodes_are_refused_with_typed_errors() {
        assert!(matches!(Pchip::new(vec![1.0], vec![1.0]), Err(AnalysisError::TooFewPoints { .. })));
        assert!(matches!(
            Pchip::new(vec![0.0, 1.0, 1.0], vec![0.0, 1.0, 2.0]),
            Err(AnalysisError::NotIncreasing { index: 2, .. })
        ));
        assert!(matches!(Pchip::new(vec![0.0, f64::NAN], vec![0.0, 1.0]), Err(AnalysisError::NonFinite { .. })));
    }
}
