//! One rule per stated quantity, shared by the HTTP API, the config check, the file importer, the live
//! watch and the reduction, so that what one accepts the others accept too and every refusal reads the same.
//!
//! A load step's stress is at least [`STRESS_RESOLUTION_KPA`], the resolution stresses are stated and shown
//! to (a smaller value is a typing slip, and on a log σ′ axis it would sit decades away from the rest), at
//! most [`MAX_STRESS_KPA`], and on a frame at most what the frame can put on the specimen: its load cell's
//! range over the ring area, and on a dead-weight frame the largest hanger load through the lever.

/// Stresses are stated to 0.1 kPa; a load step's stress is at least this, kPa.
pub const STRESS_RESOLUTION_KPA: f64 = 0.1;
/// The largest stress any load step may state, kPa (a generous bound for laboratory oedometers, common
/// practice: frames reach a few MPa, high-pressure cells tens of MPa).
pub const MAX_STRESS_KPA: f64 = 100_000.0;
/// The largest mass a hanger takes, kg.
pub const MAX_HANGER_KG: f64 = 2_000.0;
/// Standard gravity gn = 9.80665 m/s² (3rd CGPM, 1901), for hanger masses.
pub const STANDARD_GRAVITY_M_PER_S2: f64 = 9.806_65;
/// The allowed stresses in words, for messages.
pub const STRESS_ALLOWED: &str = "from 0.1 kPa (the resolution stresses are stated to) up to 100000 kPa";

/// The stress a hanger mass gives: m·gn·lever ratio / area; N/mm² = MPa, so ×1000 for kPa.
pub fn hanger_stress_kpa(mass_kg: f64, lever_ratio: f64, ring_area_mm2: f64) -> f64 {
    mass_kg * STANDARD_GRAVITY_M_PER_S2 * lever_ratio / ring_area_mm2 * 1000.0
}

/// The largest stress a frame can put on its specimen, and what sets it.
#[derive(Clone, Debug, PartialEq)]
pub struct FrameCapacity {
    /// kPa.
    pub kpa: f64,
    /// What sets it, in words ("the load cell's range 20 kN over the ring's 3167 mm²").
    pub from: String,
}

impl FrameCapacity {
    /// The capacity of a frame with ring area `ring_area_mm2`: the lower of its load cell's upper range
    /// (kN) over the area and, on a dead-weight frame, [`MAX_HANGER_KG`] through `lever_ratio`; `None`
    /// when neither is known.
    pub fn of(ring_area_mm2: f64, load_cell_max_kn: Option<f64>, lever_ratio: Option<f64>) -> Option<FrameCapacity> {
        if !(ring_area_mm2.is_finite() && ring_area_mm2 > 0.0) {
            return None;
        }
        let cell = load_cell_max_kn.filter(|kn| kn.is_finite() && *kn > 0.0).map(|kn| FrameCapacity {
            kpa: kn * 1e6 / ring_area_mm2,
            from: format!("the load cell's range {kn} kN over the ring's {ring_area_mm2:.0} mm²"),
        });
        let hanger = lever_ratio.filter(|r| r.is_finite() && *r > 0.0).map(|r| FrameCapacity {
            kpa: hanger_stress_kpa(MAX_HANGER_KG, r, ring_area_mm2),
            from: format!(
                "{MAX_HANGER_KG} kg on the hanger through the lever ratio {r} over the ring's {ring_area_mm2:.0} mm²"
            ),
        });
        match (cell, hanger) {
            (Some(a), Some(b)) => Some(if a.kpa <= b.kpa { a } else { b }),
            (a, b) => a.or(b),
        }
    }
}

/// A stress refused by [`check_stress`]: the value and what is allowed, in words.
#[derive(Clone, Debug, PartialEq, thiserror::Error)]
#[error("{value} kPa is not allowed: allowed {allowed}")]
pub struct StressRefused {
    /// The value given.
    pub value: f64,
    /// What is allowed.
    pub allowed: String,
}

/// Whether `kpa` is a load step's stress anywhere (the frame aside).
pub fn stress_in_range(kpa: f64) -> bool {
    kpa.is_finite() && (STRESS_RESOLUTION_KPA..=MAX_STRESS_KPA).contains(&kpa)
}

/// Checks a load step's stress, and against `capacity` when the frame's is known.
pub fn check_stress(kpa: f64, capacity: Option<&FrameCapacity>) -> Result<f64, StressRefused> {
    if !stress_in_range(kpa) {
        return Err(StressRefused { value: kpa, allowed: STRESS_ALLOWED.to_string() });
    }
    match capacity {
        Some(c) if kpa > c.kpa => Err(StressRefused {
            value: kpa,
            allowed: format!("from 0.1 kPa up to this frame's capacity of {:.0} kPa ({})", c.kpa, c.from),
        }),
        _ => Ok(kpa),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A 63.5 mm ring (common practice: 2.5 in rings): π·63.5²/4 = 3166.9 mm² (computed).
    const RING_MM2: f64 = std::f64::consts::PI * 63.5 * 63.5 / 4.0;

    #[test]
    fn a_stress_below_the_resolution_or_past_the_bound_is_refused_with_what_is_allowed() {
        for bad in [1e-300, 0.0, 0.05, -10.0, 100_000.5, f64::NAN, f64::INFINITY] {
            let refused = check_stress(bad, None).unwrap_err();
            assert!(refused.to_string().contains("allowed from 0.1 kPa"), "{refused}");
        }
        for good in [0.1, 12.5, 3200.0, 100_000.0] {
            assert_eq!(check_stress(good, None), Ok(good));
        }
    }

    #[test]
    fn a_frame_s_capacity_is_its_load_cell_range_over_the_ring_area() {
        // 20 kN over 3166.9 mm² = 6315.3 kPa (computed: 20e3 N / 3166.9e-6 m²).
        let capacity = FrameCapacity::of(RING_MM2, Some(20.0), None).unwrap();
        assert!((capacity.kpa - 6315.3).abs() < 0.1, "{capacity:?}");
        assert!(check_stress(6300.0, Some(&capacity)).is_ok());
        let refused = check_stress(6400.0, Some(&capacity)).unwrap_err();
        assert!(refused.allowed.contains("capacity of 6315 kPa") && refused.allowed.contains("20 kN"), "{refused}");
    }

    #[test]
    fn a_dead_weight_frame_is_held_to_the_lower_of_its_hanger_and_its_load_cell() {
        // 2000 kg × 9.80665 m/s² × 10 / 3166.92 mm² = 61 931.7 kPa (computed).
        let hanger = FrameCapacity::of(RING_MM2, None, Some(10.0)).unwrap();
        assert!((hanger.kpa - 61_931.7).abs() < 0.1, "{hanger:?}");
        assert!(hanger.from.contains("lever ratio 10"));
        let both = FrameCapacity::of(RING_MM2, Some(20.0), Some(10.0)).unwrap();
        assert!(both.from.contains("load cell"), "the cell's 6315 kPa is the lower: {both:?}");
        assert_eq!(FrameCapacity::of(RING_MM2, None, None), None);
    }
}
