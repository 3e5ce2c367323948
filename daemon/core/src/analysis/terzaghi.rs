//! Terzaghi's one-dimensional consolidation theory for a uniform initial excess pore pressure: average
//! degree of consolidation U(Tv) from the exact series, and its inverse. Dimensionless only — it must not
//! know about specimens, times or units; cv and drainage paths live in `cv`.

use std::f64::consts::{FRAC_PI_2, PI};

/// Published time factor for U = 50 %, used with t50 (Casagrande; Taylor 1948) [ref: terzaghi-time-factors].
pub(crate) const T50_PUBLISHED: f64 = 0.197;
/// Published time factor for U = 90 %, used with t90 (Taylor 1948) [ref: terzaghi-time-factors].
pub(crate) const T90_PUBLISHED: f64 = 0.848;

/// Below this time factor the short-time form U = 2·√(T/π) is exact to machine precision: the image terms
/// it leaves out are of order exp(−1/T) < 1e-21 [ref: terzaghi-series, computed].
const SHORT_TIME_LIMIT: f64 = 0.02;
/// The series term 2/M²·exp(−M²T) is dropped once it is below this (far under f64 resolution of U).
const TERM_CUTOFF: f64 = 1e-18;
/// Enough terms for T ≥ 0.02 (about 15 are used there); a guard, not a tuning knob.
const MAX_TERMS: usize = 200;

/// Average degree of consolidation U (0…1) at time factor `time_factor` = cv·t/Hdr².
///
/// U = 1 − Σ_{m≥0} (2/M²)·exp(−M²T), M = (π/2)(2m + 1) [ref: terzaghi-series, computed]; for T ≤ 0.02
/// the equivalent short-time form 2√(T/π). T ≤ 0 gives 0, NaN gives NaN.
pub fn degree_of_consolidation(time_factor: f64) -> f64 {
    if time_factor.is_nan() {
        return f64::NAN;
    }
    if time_factor <= 0.0 {
        return 0.0;
    }
    if time_factor <= SHORT_TIME_LIMIT {
        return 2.0 * (time_factor / PI).sqrt();
    }
    series_degree(time_factor)
}

/// The exact series itself (valid for any T > 0, slow to converge for small T).
fn series_degree(time_factor: f64) -> f64 {
    let mut sum = 0.0;
    for m in 0..MAX_TERMS {
        let big_m = FRAC_PI_2 * (2 * m + 1) as f64;
        let m2 = big_m * big_m;
        let term = 2.0 / m2 * (-m2 * time_factor).exp();
        sum += term;
        if term < TERM_CUTOFF {
            break;
        }
    }
    (1.0 - sum).clamp(0.0, 1.0)
}

/// Time factor T at which the average degree of consolidation reaches `degree` (0 ≤ U < 1), by bisection on
/// the exact series; `None` for U outside [0, 1) or NaN.
#[cfg(test)]
pub(crate) fn time_factor(degree: f64) -> Option<f64> {
    if !(0.0..1.0).contains(&degree) {
        return None;
    }
    // Inside the short-time range the inverse is closed-form.
    let short_limit_degree = 2.0 * (SHORT_TIME_LIMIT / PI).sqrt();
    if degree <= short_limit_degree {
        return Some(PI * degree * degree / 4.0);
    }
    let mut low = SHORT_TIME_LIMIT;
    let mut high = 1.0;
    while degree_of_consolidation(high) <= degree {
        high *= 2.0;
        if high > 1e4 {
            // U this close to 1 is not distinguishable from 1 in f64.
            return None;
        }
    }
    for _ in 0..200 {
        let mid = 0.5 * (low + high);
        if degree_of_consolidation(mid) < degree {
            low = mid;
        } else {
            high = mid;
        }
        if high - low <= 1e-15 * high {
            break;
        }
    }
    Some(0.5 * (low + high))
}

#[cfg(test)]
mod tests {
    use super::*;

    /// (U %, T exact (computed), T printed (Taylor 1948 and later texts, from memory)) [ref: terzaghi-time-factors].
    const TABLE: [(f64, f64, Option<f64>); 11] = [
        (10.0, 0.00785, Some(0.008)),
        (20.0, 0.03142, Some(0.031)),
        (30.0, 0.07069, Some(0.071)),
        (40.0, 0.12567, Some(0.126)),
        (50.0, 0.19673, Some(0.197)),
        (60.0, 0.28640, Some(0.287)),
        (70.0, 0.40285, Some(0.403)),
        (80.0, 0.56716, Some(0.567)),
        (90.0, 0.84809, Some(0.848)),
        (95.0, 1.12901, None),
        (99.0, 1.78129, None),
    ];

    #[test]
    fn inverse_matches_the_exact_column_of_the_reference_table() {
        // [ref: terzaghi-time-factors], column "T exact" (computed), printed to 5 decimals: agree to half a
        // unit in the last digit.
        for (u_percent, t_exact, _) in TABLE {
            let t = time_factor(u_percent / 100.0).unwrap();
            assert!((t - t_exact).abs() <= 0.5e-5 + 1e-9, "U = {u_percent} %: T = {t}, table {t_exact}");
        }
    }

    #[test]
    fn inverse_agrees_with_printed_textbook_time_factors() {
        // Printed T values [ref: terzaghi-time-factors, from memory] carry ±1 in their third decimal.
        for (u_percent, _, printed) in TABLE {
            if let Some(printed) = printed {
                let t = time_factor(u_percent / 100.0).unwrap();
                assert!((t - printed).abs() <= 1e-3, "U = {u_percent} %: T = {t}, printed {printed}");
            }
        }
    }

    #[test]
    fn published_t50_and_t90_round_from_the_exact_series() {
        // T50 = 0.197 and T90 = 0.848 as printed; exact 0.19673 and 0.84809 [ref: terzaghi-time-factors, computed].
        assert_eq!((time_factor(0.5).unwrap() * 1000.0).round() / 1000.0, T50_PUBLISHED);
        assert_eq!((time_factor(0.9).unwrap() * 1000.0).round() / 1000.0, T90_PUBLISHED);
    }

    #[test]
    fn forward_values_match_the_reference_check_values() {
        // Forward check values [ref: terzaghi-series, computed], printed to 5 decimals.
        let checks = [
            (0.05, 0.25231),
            (0.1, 0.35682),
            (0.2, 0.50409),
            (0.3, 0.61324),
            (0.5, 0.76395),
            (0.848, 0.89998),
            (1.0, 0.93126),
            (2.0, 0.99417),
        ];
        for (t, u) in checks {
            let got = degree_of_consolidation(t);
            assert!((got - u).abs() <= 0.5e-5 + 1e-9, "T = {t}: U = {got}, expected {u}");
        }
    }

    #[test]
    fn textbook_approximations_hold_to_their_stated_accuracy() {
        // T = (π/4)U² for U ≤ 60 % and T = 1.781 − 0.933·log10(100 − U%) above; accuracy of each against the
        // exact series [ref: terzaghi-approximations, computed]: −1.28 % at 60 %, ≤ 0.02 % for 70–99 %.
        for u_percent in [10.0, 20.0, 30.0, 40.0, 50.0, 60.0] {
            let exact = time_factor(u_percent / 100.0).unwrap();
            let approx = PI / 4.0 * (u_percent / 100.0_f64).powi(2);
            assert!(((approx - exact) / exact).abs() < 0.013, "U = {u_percent} %");
        }
        for u_percent in [70.0, 80.0, 90.0, 95.0, 99.0] {
            let exact = time_factor(u_percent / 100.0).unwrap();
            let approx = 1.781 - 0.933 * (100.0 - u_percent).log10();
            assert!(((approx - exact) / exact).abs() < 2.5e-4, "U = {u_percent} %");
        }
    }

    #[test]
    fn short_time_form_joins_the_series_seamlessly() {
        // Both forms are exact at T = 0.02 [ref: terzaghi-series, computed]: they must agree to rounding.
        let series = series_degree(SHORT_TIME_LIMIT);
        let short = 2.0 * (SHORT_TIME_LIMIT / PI).sqrt();
        assert!((series - short).abs() < 1e-12, "series {series} vs short form {short}");
        // Initial slope U/√T → 2/√π = 1.12838 [ref: terzaghi-series, computed].
        assert!((degree_of_consolidation(1e-6) / 1e-3 - std::f64::consts::FRAC_2_SQRT_PI).abs() < 1e-12);
    }

    #[test]
    fn degree_increases_monotonically_and_inverts() {
        let mut previous = 0.0;
        for k in 1..=400 {
            let t = 1e-5 * 1.05_f64.powi(k);
            let u = degree_of_consolidation(t);
            assert!(u > previous || u == 1.0, "not increasing at T = {t}");
            previous = u;
            if u < 0.999_999 {
                let back = time_factor(u).unwrap();
                assert!((back - t).abs() <= 1e-9 * t.max(1.0), "T = {t}: inverse gave {back}");
            }
        }
    }

    #[test]
    fn out_of_domain_inputs_give_edges_not_panics() {
        assert_eq!(degree_of_consolidation(-1.0), 0.0);
        assert_eq!(degree_of_consolidation(f64::INFINITY), 1.0);
        assert!(degree_of_consolidation(f64::NAN).is_nan());
        assert_eq!(time_factor(1.0), None);
        assert_eq!(time_factor(-0.1), None);
        assert_eq!(time_factor(f64::NAN), None);
        assert_eq!(time_factor(0.0), Some(0.0));
    }

    #[test]
    fn atkinson_example_15_2_time_factor_at_quarter_consolidation() {
        // Atkinson Ex 15.2 reads Tv = 0.05 at U = 0.25 (parabolic-isochrone chart); the exact series gives
        // 0.0491 [ref: parabolic-isochrone, computed], which rounds to the book's one significant figure.
        let t = time_factor(0.25).unwrap();
        assert!((t - 0.0491).abs() < 5e-5, "T = {t}");
        assert_eq!((t * 100.0).round() / 100.0, 0.05);
    }
}
