//! Forward model of an oedometer specimen on a loading frame: Terzaghi primary consolidation, secondary
//! compression and an e–log σ′ compression law, evaluated at a caller-given time `at_s`.
//! It must not do I/O, read a clock or add instrument noise (that belongs to `sensors`); it is written
//! independently of the daemon's analysis so the two can check each other.

use std::f64::consts::{LN_10, PI};

use serde::{Deserialize, Serialize};

/// Below this time factor the series is replaced by its short-time form 2·√(Tv/π), which is exact to
/// machine precision there (daemon/core/REFERENCES.md [ref: terzaghi-series, computed]).
const TV_SHORT_TIME: f64 = 1e-4;

/// Hard cap on series terms; 43 terms already give 1e-12 at Tv = 0.001 [ref: terzaghi-series, computed].
const MAX_SERIES_TERMS: usize = 100_000;

/// Time factor at which U = 50 % on the exact Terzaghi curve (computed by bisection of [`terzaghi_u`];
/// [ref: terzaghi-time-factors] gives 0.19673 computed, 0.197 printed).
pub const TV50: f64 = 0.196_730_739_5;

/// Time factor at which U = 90 % on the exact Terzaghi curve (computed; [ref: terzaghi-time-factors] gives
/// 0.84809 computed, 0.848 printed).
pub const TV90: f64 = 0.848_085_408;

/// Time factor this model calls the end of primary consolidation (t100): where the tangent at the inflection
/// of the ideal U–log Tv curve meets U = 100 %, i.e. where a Casagrande construction on an ideal curve puts
/// d100 (T ≈ 1.10 [ref: t100-t90-ratio, computed]; recomputed to more digits by a test below).
pub const TV100: f64 = 1.101_345_734;

/// Lowest void ratio the compression law may reach; a stress that would go below it is refused rather than
/// producing a specimen of negative height.
pub const MIN_VOID_RATIO: f64 = 0.05;

/// Density of water, g/mm³, for the dry mass of the solids (Hs = Ms/(Gs·ρw·A) [ref: height-of-solids]).
const WATER_DENSITY_G_PER_MM3: f64 = 1.0e-3;

/// Errors from building a specimen or driving the frame model with bad input.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ModelError {
    /// A specimen, soil or frame parameter is out of the range the model accepts.
    #[error("{field} = {value} is not allowed: expected {allowed}")]
    InvalidParameter {
        /// Parameter name as written in the struct.
        field: &'static str,
        /// Offending value.
        value: f64,
        /// What is accepted.
        allowed: &'static str,
    },
    /// A stress that is not finite or not above zero.
    #[error("stress {stress_kpa} kPa is not allowed: expected a finite stress above 0 kPa")]
    InvalidStress {
        /// Offending stress, kPa.
        stress_kpa: f64,
    },
    /// A time that is not finite.
    #[error("time {at_s} s is not allowed: expected a finite time")]
    InvalidTime {
        /// Offending time, s.
        at_s: f64,
    },
    /// A new increment must start after the previous one (or after the model was created).
    #[error("onset at {at_s} s is not allowed: expected a time after {previous_s} s")]
    OnsetNotAfterPrevious {
        /// Requested onset, s.
        at_s: f64,
        /// Previous onset (or creation time), s.
        previous_s: f64,
    },
    /// The stress would squeeze the specimen past the model's lowest void ratio.
    #[error("stress {stress_kpa} kPa is not allowed: the void ratio would fall to {void_ratio:.3}, below {limit}")]
    BeyondCompressionLimit {
        /// Requested stress, kPa.
        stress_kpa: f64,
        /// Void ratio the compression law would reach.
        void_ratio: f64,
        /// [`MIN_VOID_RATIO`].
        limit: f64,
    },
}

/// Average degree of consolidation U(Tv) for uniform initial excess pore pressure (Terzaghi), from the exact
/// series U = 1 − Σ_{m≥0} 2/M²·exp(−M²·Tv), M = π(2m+1)/2 [ref: terzaghi-series], summed until the terms fall
/// below 1e-17; 2·√(Tv/π) for Tv < 1e-4. Returns 0 for Tv ≤ 0 or NaN.
pub fn terzaghi_u(tv: f64) -> f64 {
    if tv.is_nan() || tv <= 0.0 {
        return 0.0;
    }
    if tv < TV_SHORT_TIME {
        return 2.0 * (tv / PI).sqrt();
    }
    let mut sum = 0.0;
    for m in 0..MAX_SERIES_TERMS {
        let big_m = PI * (2 * m + 1) as f64 / 2.0;
        let term = 2.0 / (big_m * big_m) * (-big_m * big_m * tv).exp();
        sum += term;
        if term < 1e-17 {
            break;
        }
    }
    (1.0 - sum).clamp(0.0, 1.0)
}

/// Inverse of [`terzaghi_u`]: the time factor at which the average degree of consolidation is `u`, by
/// bisection in log Tv [ref: terzaghi-series]. `None` unless 0 < u < 1.
pub fn terzaghi_tv(u: f64) -> Option<f64> {
    if u.is_nan() || u <= 0.0 || u >= 1.0 {
        return None;
    }
    let (mut lo, mut hi) = (1e-14_f64, 100.0_f64);
    if terzaghi_u(hi) < u {
        // u is closer to 1 than f64 can resolve on the curve.
        return None;
    }
    for _ in 0..200 {
        let mid = (lo * hi).sqrt();
        if terzaghi_u(mid) < u {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    Some((lo * hi).sqrt())
}

/// Soil properties that drive the forward model. Invented values for demos live in `scenario`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Soil {
    /// Short name of the soil, e.g. "soft estuarine clay".
    pub name: String,
    /// Compression index Cc: −Δe per log10 cycle of σ′ on the virgin branch [ref: compression-index].
    pub cc: f64,
    /// Recompression/swelling index Cr: −Δe per log10 cycle below the maximum past stress and on unloading.
    pub cr: f64,
    /// Preconsolidation stress σ′p of the specimen as received, kPa.
    pub sigma_p_kpa: f64,
    /// Void ratio at the gauge zero (under the seating load); seating compression itself is not modelled.
    pub e0: f64,
    /// Specific gravity of the solids Gs.
    pub gs: f64,
    /// Coefficient of consolidation on the virgin branch at σ′p, mm²/min.
    pub cv_mm2_per_min: f64,
    /// Exponent n of the power law cv(σ′) = cv·(σ′/σ′p)^−n above σ′p (0 keeps cv constant). A demo device:
    /// permeability falls faster than compressibility in many soft clays, so cv tends to drop with stress.
    pub cv_stress_exponent: f64,
    /// Factor (≥ 1) on cv for increments that stay on the Cr branch (recompression, unloading): mv is small
    /// there, so cv = k/(mv·γw) is larger (k = cv·mv·γw [ref: permeability]).
    pub cv_recompression_factor: f64,
    /// Secondary compression index on strain basis, Δε per log10 cycle of time after end of primary, on the
    /// virgin branch [ref: secondary-compression]. On the Cr branch the model uses c_alpha·Cr/Cc (Cα/Cc
    /// constant, Mesri & Castro 1987 [ref: secondary-ranges]); after unloading it uses none.
    pub c_alpha: f64,
    /// Fraction of each increment's end-of-primary settlement that occurs as the load goes on (immediate
    /// compression: bedding of stones and papers, small undrained strain); the rest is primary.
    pub immediate_fraction: f64,
}

impl Soil {
    /// Checks every parameter is finite and in a range the model can use.
    pub fn validate(&self) -> Result<(), ModelError> {
        check("cc", self.cc, self.cc > 0.0 && self.cc <= 5.0, "0 < cc ≤ 5")?;
        check("cr", self.cr, self.cr > 0.0 && self.cr <= self.cc, "0 < cr ≤ cc")?;
        check(
            "sigma_p_kpa",
            self.sigma_p_kpa,
            self.sigma_p_kpa > 0.0 && self.sigma_p_kpa <= 1.0e5,
            "0 < sigma_p_kpa ≤ 100000",
        )?;
        check("e0", self.e0, self.e0 > MIN_VOID_RATIO && self.e0 <= 15.0, "0.05 < e0 ≤ 15")?;
        check("gs", self.gs, self.gs >= 1.0 && self.gs <= 4.0, "1 ≤ gs ≤ 4")?;
        check(
            "cv_mm2_per_min",
            self.cv_mm2_per_min,
            self.cv_mm2_per_min > 0.0 && self.cv_mm2_per_min <= 1.0e5,
            "0 < cv_mm2_per_min ≤ 100000",
        )?;
        check(
            "cv_stress_exponent",
            self.cv_stress_exponent,
            (0.0..=2.0).contains(&self.cv_stress_exponent),
            "0 ≤ cv_stress_exponent ≤ 2",
        )?;
        check(
            "cv_recompression_factor",
            self.cv_recompression_factor,
            (1.0..=100.0).contains(&self.cv_recompression_factor),
            "1 ≤ cv_recompression_factor ≤ 100",
        )?;
        check("c_alpha", self.c_alpha, (0.0..=0.2).contains(&self.c_alpha), "0 ≤ c_alpha ≤ 0.2")?;
        check(
            "immediate_fraction",
            self.immediate_fraction,
            (0.0..=0.5).contains(&self.immediate_fraction),
            "0 ≤ immediate_fraction ≤ 0.5",
        )
    }

    /// cv (mm²/min) for an increment ending at `stress_kpa`; `virgin` when the increment reaches past the
    /// maximum past stress (see [`Soil::cv_stress_exponent`], [`Soil::cv_recompression_factor`]).
    pub fn cv_at_mm2_per_min(&self, stress_kpa: f64, virgin: bool) -> f64 {
        let ratio = (stress_kpa / self.sigma_p_kpa).max(1.0);
        let on_virgin = self.cv_mm2_per_min * ratio.powf(-self.cv_stress_exponent);
        if virgin { on_virgin } else { on_virgin * self.cv_recompression_factor }
    }
}

fn check(field: &'static str, value: f64, ok: bool, allowed: &'static str) -> Result<(), ModelError> {
    if value.is_finite() && ok { Ok(()) } else { Err(ModelError::InvalidParameter { field, value, allowed }) }
}

/// A trimmed specimen in a fixed ring.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Specimen {
    /// Laboratory specimen id (borehole, sample), e.g. "TR-BH01-U3".
    pub id: String,
    /// Depth of the sample below ground level, m.
    pub depth_m: f64,
    /// Soil description as logged.
    pub description: String,
    /// Soil properties.
    pub soil: Soil,
    /// Height at the gauge zero (under seating), mm; H0 of [ref: height-of-solids].
    pub height_mm: f64,
    /// Ring inside diameter, mm.
    pub diameter_mm: f64,
}

impl Specimen {
    /// Plan area of the specimen, mm².
    pub fn area_mm2(&self) -> f64 {
        PI * self.diameter_mm * self.diameter_mm / 4.0
    }

    /// Height of solids Hs = H0/(1 + e0), mm [ref: height-of-solids].
    pub fn height_of_solids_mm(&self) -> f64 {
        self.height_mm / (1.0 + self.soil.e0)
    }

    /// Dry mass of solids Ms = Hs·Gs·ρw·A, g [ref: height-of-solids], for the daemon's phase relations.
    pub fn dry_mass_g(&self) -> f64 {
        self.height_of_solids_mm() * self.soil.gs * WATER_DENSITY_G_PER_MM3 * self.area_mm2()
    }

    /// Checks the geometry and the soil. Only physical sense is checked here; the standards' specimen
    /// limits (D/H ≥ 2.5 and so on) are the daemon's to enforce.
    pub fn validate(&self) -> Result<(), ModelError> {
        check("height_mm", self.height_mm, self.height_mm > 0.0 && self.height_mm <= 1000.0, "0 < height_mm ≤ 1000")?;
        check(
            "diameter_mm",
            self.diameter_mm,
            self.diameter_mm > 0.0 && self.diameter_mm <= 1000.0,
            "0 < diameter_mm ≤ 1000",
        )?;
        check("depth_m", self.depth_m, self.depth_m >= 0.0, "depth_m ≥ 0")?;
        self.soil.validate()
    }
}

/// Elastic deflection of the frame, cell, stones and papers, seen by the gauge but not by the specimen:
/// y(σ′) = mm_per_log_cycle·log10(1 + σ′/reference_kpa), reversible (treated as immediate, subtracted by the
/// daemon from a calibration table [ref: apparatus-deflection]). The log form is a demo choice.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct ApparatusDeflection {
    /// Deflection per log10 cycle of (1 + σ′/reference_kpa), mm.
    pub mm_per_log_cycle: f64,
    /// Stress scale of the bedding-in, kPa.
    pub reference_kpa: f64,
}

impl ApparatusDeflection {
    /// No apparatus deflection.
    pub const NONE: Self = Self { mm_per_log_cycle: 0.0, reference_kpa: 1.0 };

    /// Deflection at `stress_kpa` relative to zero load, mm.
    pub fn deflection_mm(&self, stress_kpa: f64) -> f64 {
        self.mm_per_log_cycle * (1.0 + stress_kpa.max(0.0) / self.reference_kpa).log10()
    }
}

impl Default for ApparatusDeflection {
    /// 0.03 mm per cycle with a 25 kPa scale: about 0.05 mm at 1600 kPa, the order of a standard cell's
    /// deflection (from memory).
    fn default() -> Self {
        Self { mm_per_log_cycle: 0.03, reference_kpa: 25.0 }
    }
}

/// Options for a [`FrameModel`] beyond the specimen.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct FrameOptions {
    /// Time the load takes to go on, s: stress, immediate compression and apparatus deflection ramp
    /// linearly over it, so the displacement is continuous at each onset (0 makes them steps).
    pub load_ramp_s: f64,
    /// The frame's elastic deflection.
    pub apparatus: ApparatusDeflection,
}

impl Default for FrameOptions {
    /// A 1 s load ramp (a pneumatic or lever frame puts the load on in about a second, common practice) and
    /// the default apparatus deflection.
    fn default() -> Self {
        Self { load_ramp_s: 1.0, apparatus: ApparatusDeflection::default() }
    }
}

/// The truth about one load increment (or decrement), for tests and the demo's answer key. Times ending in
/// `_s` without "onset"/"eop" are elapsed from the onset.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct IncrementTruth {
    /// 0-based position in the loading history.
    pub index: usize,
    /// Time the load began to go on, s on the simulated timeline.
    pub onset_s: f64,
    /// Onset of the next increment, when one has been applied; this increment's secondary compression
    /// stops growing there.
    pub ends_s: Option<f64>,
    /// Target stress before this increment, kPa.
    pub from_kpa: f64,
    /// Target stress of this increment, kPa.
    pub to_kpa: f64,
    /// Maximum past stress before this increment, kPa.
    pub max_past_before_kpa: f64,
    /// The increment goes past the maximum past stress (part on the Cc branch).
    pub virgin: bool,
    /// Specimen height at the onset, mm (excludes apparatus deflection).
    pub height_at_onset_mm: f64,
    /// Void ratio at the onset, (H − Hs)/Hs, including any unfinished primary and past secondary.
    pub void_ratio_at_onset: f64,
    /// Void ratio change from the compression law over the increment, positive in compression.
    pub void_ratio_change: f64,
    /// Gauge-frame displacement (specimen + apparatus) at the onset, mm.
    pub displacement_at_onset_mm: f64,
    /// Immediate compression of the specimen, mm (negative on unloading).
    pub immediate_mm: f64,
    /// Primary consolidation settlement, mm (negative on unloading: swelling).
    pub primary_mm: f64,
    /// Change of apparatus deflection over the increment, mm.
    pub apparatus_mm: f64,
    /// Secondary compression index used for this increment, strain per log10 cycle.
    pub c_alpha: f64,
    /// Height the secondary strain is referred to (end-of-primary height), mm.
    pub secondary_height_mm: f64,
    /// Coefficient of consolidation of this increment, mm²/min.
    pub cv_mm2_per_min: f64,
    /// Drainage path Hdr, mm: half the specimen height at the onset (double drainage).
    pub drainage_path_mm: f64,
    /// Elapsed time to U = 50 %, s ([`TV50`]).
    pub t50_s: f64,
    /// Elapsed time to U = 90 %, s ([`TV90`]).
    pub t90_s: f64,
    /// Elapsed time to end of primary, s ([`TV100`]); secondary compression starts here.
    pub t100_s: f64,
    /// End of primary on the simulated timeline, s (onset_s + t100_s).
    pub eop_s: f64,
}

impl IncrementTruth {
    /// Time factor Tv at `at_s`; 0 before the onset.
    pub fn tv_at(&self, at_s: f64) -> f64 {
        let elapsed_s = at_s - self.onset_s;
        if elapsed_s.is_nan() || elapsed_s <= 0.0 {
            return 0.0;
        }
        self.cv_mm2_per_min / 60.0 * elapsed_s / (self.drainage_path_mm * self.drainage_path_mm)
    }

    /// Specimen settlement at the end of primary (immediate + primary), mm.
    pub fn eop_settlement_mm(&self) -> f64 {
        self.immediate_mm + self.primary_mm
    }

    fn parts_at(&self, at_s: f64, load_ramp_s: f64) -> DisplacementParts {
        let elapsed_s = at_s - self.onset_s;
        if elapsed_s.is_nan() || elapsed_s <= 0.0 {
            return DisplacementParts::default();
        }
        let secondary_elapsed_s = match self.ends_s {
            Some(ends_s) => elapsed_s.min(ends_s - self.onset_s),
            None => elapsed_s,
        };
        let secondary_mm = if secondary_elapsed_s > self.t100_s {
            // Strain-basis Cα on the post-EOP straight line, zero at t100 [ref: secondary-compression].
            self.c_alpha * self.secondary_height_mm * (secondary_elapsed_s / self.t100_s).log10()
        } else {
            0.0
        };
        DisplacementParts {
            immediate_mm: self.immediate_mm * ramp_fraction(elapsed_s, load_ramp_s),
            primary_mm: self.primary_mm * terzaghi_u(self.tv_at(at_s)),
            secondary_mm,
            apparatus_mm: 0.0,
        }
    }
}

fn ramp_fraction(elapsed_s: f64, load_ramp_s: f64) -> f64 {
    if elapsed_s <= 0.0 {
        0.0
    } else if load_ramp_s <= 0.0 {
        1.0
    } else {
        (elapsed_s / load_ramp_s).min(1.0)
    }
}

/// Settlement split into its parts, mm, compression positive, since the gauge zero.
#[derive(Debug, Clone, Copy, Default, PartialEq, Serialize, Deserialize)]
pub struct DisplacementParts {
    /// Immediate compression of all increments so far.
    pub immediate_mm: f64,
    /// Primary consolidation of all increments so far.
    pub primary_mm: f64,
    /// Secondary compression of all increments so far.
    pub secondary_mm: f64,
    /// Apparatus deflection relative to the seating load.
    pub apparatus_mm: f64,
}

impl DisplacementParts {
    /// Settlement of the specimen itself (no apparatus), mm.
    pub fn specimen_mm(&self) -> f64 {
        self.immediate_mm + self.primary_mm + self.secondary_mm
    }

    /// What an ideal gauge on the frame sees: specimen + apparatus, mm.
    pub fn total_mm(&self) -> f64 {
        self.specimen_mm() + self.apparatus_mm
    }
}

/// One frame with its specimen and loading history. Every query is a pure function of `at_s`; the gauge is
/// zeroed at creation, with the specimen in equilibrium under the seating load (displacement 0 then).
#[derive(Debug, Clone, PartialEq)]
pub struct FrameModel {
    specimen: Specimen,
    options: FrameOptions,
    seating_kpa: f64,
    created_at_s: f64,
    increments: Vec<IncrementTruth>,
    target_kpa: f64,
    max_past_kpa: f64,
    law_void_ratio: f64,
}

impl FrameModel {
    /// A frame holding `specimen` under `seating_kpa` from `at_s`, with default [`FrameOptions`].
    pub fn new(specimen: Specimen, seating_kpa: f64, at_s: f64) -> Result<Self, ModelError> {
        Self::with_options(specimen, seating_kpa, at_s, FrameOptions::default())
    }

    /// As [`FrameModel::new`] with explicit options.
    pub fn with_options(
        specimen: Specimen,
        seating_kpa: f64,
        at_s: f64,
        options: FrameOptions,
    ) -> Result<Self, ModelError> {
        specimen.validate()?;
        check_stress(seating_kpa)?;
        if !at_s.is_finite() {
            return Err(ModelError::InvalidTime { at_s });
        }
        check(
            "load_ramp_s",
            options.load_ramp_s,
            (0.0..=600.0).contains(&options.load_ramp_s),
            "0 ≤ load_ramp_s ≤ 600",
        )?;
        check(
            "apparatus.mm_per_log_cycle",
            options.apparatus.mm_per_log_cycle,
            (0.0..=5.0).contains(&options.apparatus.mm_per_log_cycle),
            "0 ≤ mm_per_log_cycle ≤ 5",
        )?;
        check(
            "apparatus.reference_kpa",
            options.apparatus.reference_kpa,
            options.apparatus.reference_kpa > 0.0,
            "reference_kpa > 0",
        )?;
        let max_past_kpa = specimen.soil.sigma_p_kpa.max(seating_kpa);
        let law_void_ratio = specimen.soil.e0;
        Ok(Self {
            specimen,
            options,
            seating_kpa,
            created_at_s: at_s,
            increments: Vec::new(),
            target_kpa: seating_kpa,
            max_past_kpa,
            law_void_ratio,
        })
    }

    /// Starts a new increment (or decrement) to `stress_kpa` with its onset at `at_s`. Earlier increments
    /// keep consolidating (superposition), so the curve stays continuous. A request for the stress already
    /// applied is a no-op.
    pub fn apply_stress(&mut self, stress_kpa: f64, at_s: f64) -> Result<(), ModelError> {
        check_stress(stress_kpa)?;
        if !at_s.is_finite() {
            return Err(ModelError::InvalidTime { at_s });
        }
        let previous_s = self.increments.last().map_or(self.created_at_s, |inc| inc.onset_s);
        let not_after = match self.increments.last() {
            Some(_) => at_s <= previous_s,
            None => at_s < previous_s,
        };
        if not_after {
            return Err(ModelError::OnsetNotAfterPrevious { at_s, previous_s });
        }
        if stress_kpa == self.target_kpa {
            return Ok(());
        }
        let soil = &self.specimen.soil;
        let from_kpa = self.target_kpa;
        let virgin = stress_kpa > self.max_past_kpa;
        let void_ratio_change = law_void_ratio_change(soil, from_kpa, stress_kpa, self.max_past_kpa);
        let void_ratio_after = self.law_void_ratio - void_ratio_change;
        if void_ratio_after < MIN_VOID_RATIO {
            return Err(ModelError::BeyondCompressionLimit {
                stress_kpa,
                void_ratio: void_ratio_after,
                limit: MIN_VOID_RATIO,
            });
        }

        let height_at_onset_mm = self.height_mm(at_s);
        let displacement_at_onset_mm = self.displacement_mm(at_s);
        let hs_mm = self.specimen.height_of_solids_mm();
        // ΔH = Δe·Hs [ref: void-ratio-step], split into immediate and primary.
        let eop_settlement_mm = void_ratio_change * hs_mm;
        let immediate_mm = soil.immediate_fraction * eop_settlement_mm;
        let primary_mm = eop_settlement_mm - immediate_mm;
        let c_alpha = if stress_kpa < from_kpa {
            0.0
        } else if virgin {
            soil.c_alpha
        } else {
            soil.c_alpha * soil.cr / soil.cc
        };
        let cv_mm2_per_min = soil.cv_at_mm2_per_min(stress_kpa, virgin);
        // Double drainage, Hdr = half the height at the onset: fixed for the increment so the time law is the
        // exact series (the daemon may take the height at 50 % or the mean instead [ref: drainage-path]).
        let drainage_path_mm = height_at_onset_mm / 2.0;
        let time_scale_s = drainage_path_mm * drainage_path_mm / (cv_mm2_per_min / 60.0);
        let t100_s = TV100 * time_scale_s;
        let apparatus = self.options.apparatus;

        if let Some(last) = self.increments.last_mut() {
            last.ends_s = Some(at_s);
        }
        self.increments.push(IncrementTruth {
            index: self.increments.len(),
            onset_s: at_s,
            ends_s: None,
            from_kpa,
            to_kpa: stress_kpa,
            max_past_before_kpa: self.max_past_kpa,
            virgin,
            height_at_onset_mm,
            void_ratio_at_onset: height_at_onset_mm / hs_mm - 1.0,
            void_ratio_change,
            displacement_at_onset_mm,
            immediate_mm,
            primary_mm,
            apparatus_mm: apparatus.deflection_mm(stress_kpa) - apparatus.deflection_mm(from_kpa),
            c_alpha,
            secondary_height_mm: height_at_onset_mm - eop_settlement_mm,
            cv_mm2_per_min,
            drainage_path_mm,
            t50_s: TV50 * time_scale_s,
            t90_s: TV90 * time_scale_s,
            t100_s,
            eop_s: at_s + t100_s,
        });
        self.target_kpa = stress_kpa;
        self.max_past_kpa = self.max_past_kpa.max(stress_kpa);
        self.law_void_ratio = void_ratio_after;
        Ok(())
    }

    /// Settlement split into parts at `at_s`, mm.
    pub fn parts(&self, at_s: f64) -> DisplacementParts {
        let mut parts = DisplacementParts::default();
        for inc in &self.increments {
            let p = inc.parts_at(at_s, self.options.load_ramp_s);
            parts.immediate_mm += p.immediate_mm;
            parts.primary_mm += p.primary_mm;
            parts.secondary_mm += p.secondary_mm;
        }
        let apparatus = self.options.apparatus;
        parts.apparatus_mm = apparatus.deflection_mm(self.stress_kpa(at_s)) - apparatus.deflection_mm(self.seating_kpa);
        parts
    }

    /// Noise-free displacement an ideal gauge on the frame reads at `at_s`, mm, compression positive, 0 at
    /// the gauge zero: specimen settlement plus apparatus deflection.
    pub fn displacement_mm(&self, at_s: f64) -> f64 {
        self.parts(at_s).total_mm()
    }

    /// Settlement of the specimen alone at `at_s`, mm.
    pub fn specimen_settlement_mm(&self, at_s: f64) -> f64 {
        self.parts(at_s).specimen_mm()
    }

    /// Apparatus deflection relative to the seating load at `at_s`, mm.
    pub fn apparatus_deflection_mm(&self, at_s: f64) -> f64 {
        self.parts(at_s).apparatus_mm
    }

    /// Specimen height at `at_s`, mm.
    pub fn height_mm(&self, at_s: f64) -> f64 {
        self.specimen.height_mm - self.specimen_settlement_mm(at_s)
    }

    /// Void ratio at `at_s`, e = (H − Hs)/Hs [ref: height-of-solids].
    pub fn void_ratio(&self, at_s: f64) -> f64 {
        self.height_mm(at_s) / self.specimen.height_of_solids_mm() - 1.0
    }

    /// Applied vertical stress at `at_s`, kPa (ramping over `load_ramp_s` after each onset).
    pub fn stress_kpa(&self, at_s: f64) -> f64 {
        self.seating_kpa
            + self
                .increments
                .iter()
                .map(|inc| (inc.to_kpa - inc.from_kpa) * ramp_fraction(at_s - inc.onset_s, self.options.load_ramp_s))
                .sum::<f64>()
    }

    /// Vertical load on the specimen at `at_s`, N (stress × area; 1 kPa = 1e-3 N/mm²).
    pub fn load_n(&self, at_s: f64) -> f64 {
        self.stress_kpa(at_s) * 1.0e-3 * self.area_mm2()
    }

    /// Plan area of the specimen, mm² (fixed ring).
    pub fn area_mm2(&self) -> f64 {
        self.specimen.area_mm2()
    }

    /// The increment now running (the latest applied), if any.
    pub fn current_increment(&self) -> Option<IncrementTruth> {
        self.increments.last().copied()
    }

    /// Every increment applied so far, oldest first.
    pub fn increments(&self) -> &[IncrementTruth] {
        &self.increments
    }

    /// The specimen on this frame.
    pub fn specimen(&self) -> &Specimen {
        &self.specimen
    }

    /// The frame's options.
    pub fn options(&self) -> &FrameOptions {
        &self.options
    }

    /// Seating stress, kPa.
    pub fn seating_kpa(&self) -> f64 {
        self.seating_kpa
    }

    /// Time the model was created (gauge zero), s.
    pub fn created_at_s(&self) -> f64 {
        self.created_at_s
    }

    /// Target stress of the latest increment (or the seating stress), kPa.
    pub fn target_stress_kpa(&self) -> f64 {
        self.target_kpa
    }

    /// Maximum past stress so far (σ′p grows when the specimen is loaded past it), kPa.
    pub fn max_past_stress_kpa(&self) -> f64 {
        self.max_past_kpa
    }
}

fn check_stress(stress_kpa: f64) -> Result<(), ModelError> {
    if stress_kpa.is_finite() && stress_kpa > 0.0 { Ok(()) } else { Err(ModelError::InvalidStress { stress_kpa }) }
}

/// Δe (positive in compression) from `from_kpa` to `to_kpa` on the e–log σ′ law: Cr up to the maximum past
/// stress, Cc beyond it, swelling with Cr on unloading [ref: compression-index].
fn law_void_ratio_change(soil: &Soil, from_kpa: f64, to_kpa: f64, max_past_kpa: f64) -> f64 {
    if to_kpa <= from_kpa {
        return -soil.cr * (from_kpa / to_kpa).log10();
    }
    if to_kpa <= max_past_kpa {
        soil.cr * (to_kpa / from_kpa).log10()
    } else if from_kpa >= max_past_kpa {
        soil.cc * (to_kpa / from_kpa).log10()
    } else {
        soil.cr * (max_past_kpa / from_kpa).log10() + soil.cc * (to_kpa / max_past_kpa).log10()
    }
}

/// Slope of the ideal U–log10 Tv curve at `tv`: dU/dlog10 Tv = ln10·Tv·dU/dTv, with dU/dTv = Σ 2·exp(−M²Tv).
/// Used to place [`TV100`]; kept public for tests of Casagrande constructions.
pub fn terzaghi_slope_per_log_cycle(tv: f64) -> f64 {
    if tv.is_nan() || tv <= 0.0 {
        return 0.0;
    }
    let mut sum = 0.0;
    for m in 0..MAX_SERIES_TERMS {
        let big_m = PI * (2 * m + 1) as f64 / 2.0;
        let term = 2.0 * (-big_m * big_m * tv).exp();
        sum += term;
        if term < 1e-17 * sum.max(1e-300) {
            break;
        }
    }
    LN_10 * tv * sum
}

#[cfg(test)]
mod tests {
    use super::*;

    fn test_soil() -> Soil {
        Soil {
            name: "test clay".into(),
            cc: 0.5,
            cr: 0.06,
            sigma_p_kpa: 80.0,
            e0: 1.3,
            gs: 2.7,
            cv_mm2_per_min: 2.0,
            cv_stress_exponent: 0.3,
            cv_recompression_factor: 2.5,
            c_alpha: 0.01,
            immediate_fraction: 0.05,
        }
    }

    fn test_specimen(soil: Soil) -> Specimen {
        Specimen {
            id: "T-1".into(),
            depth_m: 3.0,
            description: "test specimen".into(),
            soil,
            height_mm: 20.0,
            diameter_mm: 63.5,
        }
    }

    fn bare_options() -> FrameOptions {
        FrameOptions { load_ramp_s: 1.0, apparatus: ApparatusDeflection::NONE }
    }

    /// Time factor where the model's primary part of `inc` reaches fraction `u`, by bisection on time.
    fn model_tv_at_primary_fraction(model: &FrameModel, inc: &IncrementTruth, u: f64) -> f64 {
        let before = model.parts(inc.onset_s).primary_mm;
        let fraction = |t: f64| (model.parts(t).primary_mm - before) / inc.primary_mm;
        let (mut lo, mut hi) = (inc.onset_s, inc.onset_s + 10.0 * inc.t100_s);
        for _ in 0..200 {
            let mid = 0.5 * (lo + hi);
            if fraction(mid) < u {
                lo = mid;
            } else {
                hi = mid;
            }
        }
        inc.tv_at(0.5 * (lo + hi))
    }

    // Taylor (1948) as printed in textbook tables [ref: terzaghi-time-factors, from memory]; exact values computed.
    #[test]
    fn t50_and_t90_match_published_and_exact_values() {
        let t50 = terzaghi_tv(0.5).unwrap();
        let t90 = terzaghi_tv(0.9).unwrap();
        assert!((t50 - 0.197).abs() <= 0.0005, "T50 = {t50}");
        assert!((t90 - 0.848).abs() <= 0.0005, "T90 = {t90}");
        assert!((t50 - 0.19673).abs() < 5e-6, "T50 = {t50}");
        assert!((t90 - 0.84809).abs() < 5e-6, "T90 = {t90}");
        assert!((t50 - TV50).abs() < 1e-8);
        assert!((t90 - TV90).abs() < 1e-8);
    }

    // Check table [ref: terzaghi-time-factors]: exact T computed, printed T (Taylor 1948 via textbook tables).
    #[test]
    fn time_factors_match_the_check_table() {
        let table: [(f64, f64, Option<f64>); 11] = [
            (0.10, 0.00785, Some(0.008)),
            (0.20, 0.03142, Some(0.031)),
            (0.30, 0.07069, Some(0.071)),
            (0.40, 0.12567, Some(0.126)),
            (0.50, 0.19673, Some(0.197)),
            (0.60, 0.28640, Some(0.287)),
            (0.70, 0.40285, Some(0.403)),
            (0.80, 0.56716, Some(0.567)),
            (0.90, 0.84809, Some(0.848)),
            (0.95, 1.12901, None),
            (0.99, 1.78129, None),
        ];
        for (u, exact, printed) in table {
            let tv = terzaghi_tv(u).unwrap();
            assert!((tv - exact).abs() < 6e-6, "U = {u}: T = {tv}, table {exact}");
            // One unit of the last printed digit: the printed 60 % entry (0.287) is 0.0006 above exact.
            if let Some(printed) = printed {
                assert!((tv - printed).abs() <= 0.001, "U = {u}: T = {tv}, printed {printed}");
            }
        }
    }

    // Forward check values [ref: terzaghi-series, computed].
    #[test]
    fn degree_of_consolidation_matches_forward_check_values() {
        let table = [
            (0.05, 0.25231),
            (0.1, 0.35682),
            (0.2, 0.50409),
            (0.3, 0.61324),
            (0.5, 0.76395),
            (0.848, 0.89998),
            (1.0, 0.93126),
            (2.0, 0.99417),
        ];
        for (tv, u) in table {
            let got = terzaghi_u(tv);
            assert!((got - u).abs() < 5e-6, "U({tv}) = {got}, table {u}");
        }
    }

    // Initial slope U → (2/√π)·√T, exact to machine precision for T ≲ 0.02 [ref: terzaghi-series, computed].
    #[test]
    fn early_curve_follows_the_initial_slope() {
        // 2/√π = 1.12838 [ref: terzaghi-series].
        let k = std::f64::consts::FRAC_2_SQRT_PI;
        for tv in [1e-8, 1e-6, 5e-5, 1e-4, 2e-4, 1e-3, 5e-3, 0.01, 0.02] {
            let u = terzaghi_u(tv);
            assert!((u - k * tv.sqrt()).abs() < 1e-12, "Tv = {tv}: U = {u}");
        }
    }

    #[test]
    fn degree_of_consolidation_is_bounded_and_increasing() {
        assert_eq!(terzaghi_u(0.0), 0.0);
        assert_eq!(terzaghi_u(-1.0), 0.0);
        assert_eq!(terzaghi_u(f64::NAN), 0.0);
        assert_eq!(terzaghi_u(f64::INFINITY), 1.0);
        assert!(terzaghi_u(50.0) > 1.0 - 1e-15);
        let mut previous = 0.0;
        for i in 1..=4000 {
            let tv = 1e-6 * 1.005_f64.powi(i);
            let u = terzaghi_u(tv);
            assert!(u >= previous && u <= 1.0, "Tv = {tv}");
            previous = u;
        }
        assert_eq!(terzaghi_tv(0.0), None);
        assert_eq!(terzaghi_tv(1.0), None);
        assert_eq!(terzaghi_tv(f64::NAN), None);
    }

    // Inflection of U–log T at T = 0.404, U = 0.701, slope 0.687 per cycle; its tangent meets U = 1 at
    // T = 1.10 [ref: casagrande-log-time, computed]. Recomputed here by finite differences of terzaghi_u.
    #[test]
    fn end_of_primary_time_factor_is_where_the_inflection_tangent_meets_full_consolidation() {
        let slope_fd = |tv: f64| {
            let h = 1e-4;
            (terzaghi_u(tv * 10f64.powf(h)) - terzaghi_u(tv * 10f64.powf(-h))) / (2.0 * h)
        };
        // Maximise the slope per log cycle by golden-section search on log10 Tv.
        let (mut a, mut b) = (0.1_f64.log10(), 1.0_f64.log10());
        let g = (5.0_f64.sqrt() - 1.0) / 2.0;
        for _ in 0..100 {
            let c = b - g * (b - a);
            let d = a + g * (b - a);
            if slope_fd(10f64.powf(c)) > slope_fd(10f64.powf(d)) {
                b = d;
            } else {
                a = c;
            }
        }
        let tv_i = 10f64.powf(0.5 * (a + b));
        let slope = slope_fd(tv_i);
        let u_i = terzaghi_u(tv_i);
        assert!((tv_i - 0.404).abs() < 0.0005, "inflection at {tv_i}");
        assert!((u_i - 0.701).abs() < 0.0005);
        assert!((slope - 0.687).abs() < 0.0005);
        assert!((terzaghi_slope_per_log_cycle(tv_i) - slope).abs() < 1e-6);
        let tv100 = tv_i * 10f64.powf((1.0 - u_i) / slope);
        assert!((tv100 - 1.10).abs() < 0.005, "T100 = {tv100}");
        assert!((tv100 - TV100).abs() < 1e-5, "T100 = {tv100}");
        // t100 ≈ 1.30·t90 [ref: t100-t90-ratio, computed].
        assert!((TV100 / TV90 - 1.30).abs() < 0.005);
    }

    // Primary of a simulated increment reaches 50 % at 0.197·Hdr²/cv and 90 % at 0.848·Hdr²/cv (Taylor 1948
    // as printed in textbook tables [ref: terzaghi-time-factors]), on a first and on a later increment.
    #[test]
    fn simulated_primary_reaches_published_t50_and_t90() {
        let mut model = FrameModel::with_options(test_specimen(test_soil()), 6.25, 0.0, bare_options()).unwrap();
        model.apply_stress(50.0, 100.0).unwrap();
        let first = model.current_increment().unwrap();
        let later_s = first.onset_s + 30.0 * first.t100_s;
        model.apply_stress(200.0, later_s).unwrap();
        let second = model.current_increment().unwrap();
        for inc in [first, second] {
            let hdr = inc.drainage_path_mm;
            let cv_per_s = inc.cv_mm2_per_min / 60.0;
            let t50 = model_tv_at_primary_fraction(&model, &inc, 0.5);
            let t90 = model_tv_at_primary_fraction(&model, &inc, 0.9);
            assert!((t50 - 0.197).abs() <= 0.0005, "T50 = {t50}");
            assert!((t90 - 0.848).abs() <= 0.0005, "T90 = {t90}");
            assert!((inc.t50_s - 0.197 * hdr * hdr / cv_per_s).abs() <= 0.0005 / 0.197 * inc.t50_s);
            assert!((inc.t90_s - 0.848 * hdr * hdr / cv_per_s).abs() <= 0.0005 / 0.848 * inc.t90_s);
            assert!((inc.tv_at(inc.onset_s + inc.t50_s) - t50).abs() < 1e-6);
        }
        // Hdr is half the height at the onset (double drainage).
        assert!((second.drainage_path_mm - model.height_mm(second.onset_s) / 2.0).abs() < 1e-12);
        assert!(second.drainage_path_mm < first.drainage_path_mm);
    }

    // e–log σ′ law by hand: e = e0 − ΔH/Hs with Hs = H0/(1 + e0) [ref: void-ratio-step]; Cr below the
    // maximum past stress and on unloading/reloading, Cc on the virgin branch.
    #[test]
    fn void_ratios_follow_cr_then_cc_and_swell_with_cr() {
        let soil = Soil { c_alpha: 0.0, ..test_soil() };
        let (e0, cc, cr, sp) = (soil.e0, soil.cc, soil.cr, soil.sigma_p_kpa);
        let seat = 5.0;
        let mut model = FrameModel::with_options(test_specimen(soil), seat, 0.0, bare_options()).unwrap();
        let hs = 20.0 / (1.0 + e0);
        let log = f64::log10;
        let mut e_hand = e0;
        let steps: [(f64, f64); 6] = [
            (sp / 2.0, cr * log(sp / 2.0 / seat)),
            (2.0 * sp, cr * log(2.0) + cc * log(2.0)),
            (4.0 * sp, cc * log(2.0)),
            (sp, -cr * log(4.0)),
            (4.0 * sp, cr * log(4.0)),
            (8.0 * sp, cc * log(2.0)),
        ];
        let mut at_s = 10.0;
        for (stress, de) in steps {
            model.apply_stress(stress, at_s).unwrap();
            let inc = model.current_increment().unwrap();
            at_s += 25.0 * inc.t100_s;
            e_hand -= de;
            let dh = model.displacement_mm(at_s);
            let e_model = e0 - dh / hs;
            assert!((e_model - e_hand).abs() < 1e-9, "{stress} kPa: e = {e_model}, hand {e_hand}");
            assert!((model.void_ratio(at_s) - e_hand).abs() < 1e-9);
            assert!((inc.void_ratio_change - de).abs() < 1e-12);
        }
        assert_eq!(model.max_past_stress_kpa(), 8.0 * sp);
        // The reload to 4σ′p came back to the void ratio reached at 4σ′p before the unload.
        let incs = model.increments();
        let e_at = |i: usize| incs[i].void_ratio_at_onset;
        assert!((e_at(3) - e_at(5)).abs() < 1e-9);
        assert!(incs[2].virgin && !incs[3].virgin && !incs[4].virgin && incs[5].virgin);
    }

    fn superposed_history() -> FrameModel {
        let mut model = FrameModel::new(test_specimen(test_soil()), 6.25, 0.0).unwrap();
        model.apply_stress(25.0, 60.0).unwrap();
        let a = model.current_increment().unwrap();
        // Next increment halfway through the first one's primary, then one after a short secondary, then an
        // unload once primary is over (an unfinished loading primary would keep pushing the reading down
        // while the specimen swells, so the unload would not be monotone).
        model.apply_stress(50.0, a.onset_s + a.t50_s).unwrap();
        let b = model.current_increment().unwrap();
        model.apply_stress(200.0, b.onset_s + 2.0 * b.t100_s).unwrap();
        let c = model.current_increment().unwrap();
        model.apply_stress(50.0, c.onset_s + 12.0 * c.t100_s).unwrap();
        model
    }

    #[test]
    fn displacement_and_stress_are_continuous_at_each_onset() {
        let model = superposed_history();
        for inc in model.increments() {
            let eps = 1e-6;
            let before = model.displacement_mm(inc.onset_s - eps);
            let after = model.displacement_mm(inc.onset_s + eps);
            assert!((after - before).abs() < 1e-4, "onset {}: {before} → {after}", inc.onset_s);
            assert!((model.displacement_mm(inc.onset_s) - inc.displacement_at_onset_mm).abs() < 1e-12);
            let s_before = model.stress_kpa(inc.onset_s - eps);
            let s_after = model.stress_kpa(inc.onset_s + eps);
            assert!((s_after - s_before).abs() < 1e-3);
            // Also continuous at end of primary, where secondary begins.
            let d1 = model.displacement_mm(inc.eop_s - eps);
            let d2 = model.displacement_mm(inc.eop_s + eps);
            assert!((d2 - d1).abs() < 1e-6);
        }
        assert_eq!(model.displacement_mm(0.0), 0.0);
        assert!((model.stress_kpa(0.0) - 6.25).abs() < 1e-12);
    }

    #[test]
    fn settlement_increases_monotonically_during_loading_and_decreases_on_unloading() {
        let model = superposed_history();
        let incs = model.increments();
        for inc in incs {
            let end_s = inc.ends_s.unwrap_or(inc.onset_s + 30.0 * inc.t100_s);
            let loading = inc.to_kpa > inc.from_kpa;
            let mut previous = model.displacement_mm(inc.onset_s);
            let n = 3000;
            for i in 1..=n {
                // Log-spaced from 1 ms after the onset to the end of the increment.
                let frac = i as f64 / n as f64;
                let t = inc.onset_s + 1e-3 * ((end_s - inc.onset_s) / 1e-3).powf(frac);
                let d = model.displacement_mm(t);
                if loading {
                    assert!(d >= previous - 1e-12, "increment {} at {t}: {d} < {previous}", inc.index);
                } else {
                    assert!(d <= previous + 1e-12, "decrement {} at {t}: {d} > {previous}", inc.index);
                }
                previous = d;
            }
        }
        // The unload swells: the reading ends lower than at its onset.
        let last = incs.last().unwrap();
        assert!(model.displacement_mm(last.onset_s + 30.0 * last.t100_s) < last.displacement_at_onset_mm);
    }

    // Strain-basis Cα = Δε/Δlog10 t after end of primary [ref: secondary-compression].
    #[test]
    fn secondary_compression_gives_c_alpha_per_log_cycle_after_eop() {
        let mut model = FrameModel::with_options(test_specimen(test_soil()), 6.25, 0.0, bare_options()).unwrap();
        model.apply_stress(200.0, 10.0).unwrap();
        let inc = model.current_increment().unwrap();
        assert!(inc.virgin);
        assert_eq!(inc.c_alpha, 0.01);
        let t = |factor: f64| inc.onset_s + factor * inc.t100_s;
        let cycle_mm = model.displacement_mm(t(100.0)) - model.displacement_mm(t(10.0));
        let strain_per_cycle = cycle_mm / inc.secondary_height_mm;
        assert!((strain_per_cycle - 0.01).abs() < 1e-9, "{strain_per_cycle}");
        // Before EOP there is no secondary.
        assert_eq!(model.parts(t(0.99)).secondary_mm, 0.0);
        // The late straight line extrapolated back to t100 passes through d100 = immediate + primary, so a
        // Casagrande construction on this curve finds the truth.
        let line_at_t100 = model.displacement_mm(t(10.0)) - 0.01 * inc.secondary_height_mm;
        assert!((line_at_t100 - inc.eop_settlement_mm()).abs() < 1e-9);
        // Recompression uses Cα·Cr/Cc; swelling none.
        model.apply_stress(100.0, t(200.0)).unwrap();
        assert_eq!(model.current_increment().unwrap().c_alpha, 0.0);
        let at_s = model.current_increment().unwrap().eop_s * 2.0;
        model.apply_stress(150.0, at_s).unwrap();
        assert!((model.current_increment().unwrap().c_alpha - 0.01 * 0.06 / 0.5).abs() < 1e-15);
        // The frozen secondary of an ended increment no longer grows.
        let ended = model.increments()[0];
        let stop = ended.ends_s.unwrap();
        let p1 = ended.parts_at(stop, 1.0).secondary_mm;
        let p2 = ended.parts_at(stop * 10.0, 1.0).secondary_mm;
        assert_eq!(p1, p2);
    }

    #[test]
    fn apparatus_deflection_is_added_to_the_gauge_but_not_the_specimen() {
        let mut model = FrameModel::new(test_specimen(test_soil()), 6.25, 0.0).unwrap();
        model.apply_stress(800.0, 1.0).unwrap();
        let inc = model.current_increment().unwrap();
        let at_s = inc.onset_s + 50.0 * inc.t100_s;
        let expected = 0.03 * ((1.0 + 800.0 / 25.0_f64).log10() - (1.0 + 6.25 / 25.0_f64).log10());
        assert!((model.apparatus_deflection_mm(at_s) - expected).abs() < 1e-12);
        assert!((inc.apparatus_mm - expected).abs() < 1e-12);
        let gap = model.displacement_mm(at_s) - model.specimen_settlement_mm(at_s);
        assert!((gap - expected).abs() < 1e-12);
        assert!((model.height_mm(at_s) - (20.0 - model.specimen_settlement_mm(at_s))).abs() < 1e-12);
    }

    // 1 kPa = 1 kN/m² = 1e-3 N/mm² (SI definition); area of a 50 mm ring = π·25² mm².
    #[test]
    fn load_is_stress_times_area() {
        let specimen = Specimen { diameter_mm: 50.0, ..test_specimen(test_soil()) };
        let mut model = FrameModel::new(specimen, 6.25, 0.0).unwrap();
        model.apply_stress(100.0, 5.0).unwrap();
        assert!((model.area_mm2() - 1_963.495_408).abs() < 1e-5);
        assert!((model.load_n(10.0) - 196.349_540_8).abs() < 1e-6);
        // Halfway up the 1 s ramp.
        assert!((model.stress_kpa(5.5) - (6.25 + 0.5 * 93.75)).abs() < 1e-9);
        assert!((model.load_n(0.0) - 6.25e-3 * 1_963.495_408).abs() < 1e-6);
    }

    #[test]
    fn bad_input_is_refused_with_typed_errors() {
        let mut model = FrameModel::new(test_specimen(test_soil()), 6.25, 0.0).unwrap();
        assert_eq!(model.apply_stress(-5.0, 1.0), Err(ModelError::InvalidStress { stress_kpa: -5.0 }));
        assert!(matches!(model.apply_stress(f64::NAN, 1.0), Err(ModelError::InvalidStress { .. })));
        assert!(matches!(model.apply_stress(50.0, f64::INFINITY), Err(ModelError::InvalidTime { .. })));
        assert!(matches!(model.apply_stress(50.0, -1.0), Err(ModelError::OnsetNotAfterPrevious { .. })));
        model.apply_stress(50.0, 10.0).unwrap();
        assert_eq!(
            model.apply_stress(100.0, 10.0),
            Err(ModelError::OnsetNotAfterPrevious { at_s: 10.0, previous_s: 10.0 })
        );
        // The same stress again changes nothing.
        model.apply_stress(50.0, 20.0).unwrap();
        assert_eq!(model.increments().len(), 1);
        assert!(matches!(model.apply_stress(1.0e12, 30.0), Err(ModelError::BeyondCompressionLimit { .. })));
        assert_eq!(model.increments().len(), 1);

        let bad = Specimen { height_mm: 0.0, ..test_specimen(test_soil()) };
        let err = FrameModel::new(bad, 6.25, 0.0).unwrap_err();
        assert!(err.to_string().contains("height_mm"), "{err}");
        let bad_soil = Soil { cr: 0.9, ..test_soil() };
        assert!(matches!(
            FrameModel::new(test_specimen(bad_soil), 6.25, 0.0),
            Err(ModelError::InvalidParameter { field: "cr", .. })
        ));
        assert!(FrameModel::new(test_specimen(test_soil()), 0.0, 0.0).is_err());
    }

    #[test]
    fn cv_falls_with_stress_above_sigma_p_and_rises_on_the_cr_branch() {
        let soil = test_soil();
        assert_eq!(soil.cv_at_mm2_per_min(80.0, true), 2.0);
        assert_eq!(soil.cv_at_mm2_per_min(40.0, false), 5.0);
        let at_640 = soil.cv_at_mm2_per_min(640.0, true);
        assert!((at_640 - 2.0 * 8f64.powf(-0.3)).abs() < 1e-12);
    }

    // Hs = Ms/(Gs·ρw·A) [ref: height-of-solids], so Ms = Hs·Gs·ρw·A.
    #[test]
    fn dry_mass_inverts_the_height_of_solids_relation() {
        let specimen = test_specimen(test_soil());
        let ms_g = specimen.dry_mass_g();
        let hs_mm = ms_g / (2.7 * 1.0e-3 * specimen.area_mm2());
        assert!((hs_mm - 20.0 / 2.3).abs() < 1e-12);
    }
}
