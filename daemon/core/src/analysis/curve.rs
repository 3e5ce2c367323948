//! An increment's time curve, thinned into log-time bins so constructions cost the same for 13 hand
//! readings or 100 000 logged ones. Bins are anchored at fixed edges 10^(k/B) min, so appending readings
//! only ever changes the last bin or adds new ones (the live watcher pushes readings as they arrive). It must
//! not interpret the curve: that is `taylor` and `casagrande`.

use serde::Serialize;

use super::AnalysisError;

/// Default bin density: 40 per decade of time keeps ≈ 250 nodes over a 24 h increment, finer than any
/// standard reading schedule (≈ 3 per decade [ref: reading-schedule]).
pub(crate) const DEFAULT_BINS_PER_DECADE: f64 = 40.0;
/// Larger times are not readings of a laboratory increment (≈ 1900 years).
pub(crate) const MAX_TIME_MIN: f64 = 1e9;
/// Larger displacements are not readings of a laboratory specimen.
pub(crate) const MAX_DISPLACEMENT_MM: f64 = 1e6;
/// A reading this close (relative) to the bin's mean time stays in that bin even past its edge, so node
/// times always differ enough for √t and log t to keep them apart.
const SAME_TIME_RELATIVE: f64 = 1e-9;
/// Straight-line tests accept residuals under 2 gauge resolutions [ref: straight-run-rule, common practice] …
pub(crate) const RESOLUTION_MULTIPLE: f64 = 2.0;
/// … or under 3 standard errors of a node where the readings are noisier than that [ref: straight-run-rule].
pub(crate) const NOISE_MULTIPLE: f64 = 3.0;
/// Pooled degrees of freedom needed before a noise estimate is trusted.
const MIN_NOISE_DOF: usize = 10;

/// One node of the thinned curve: the mean of the readings in one log-time bin.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct CurveNode {
    /// Mean time of the bin's readings, minutes since the load went on.
    pub t_min: f64,
    /// Mean displacement of the bin's readings, mm, compression positive.
    pub d_mm: f64,
    /// How many readings the node stands for.
    pub(crate) readings: usize,
    /// 0-based position of its first reading in the input.
    pub(crate) first_reading: usize,
}

/// Running sums of one bin, shifted by its first reading.
#[derive(Debug, Clone, Copy)]
struct Bin {
    first_reading: usize,
    n: usize,
    t_first: f64,
    d_first: f64,
    st: f64,
    sd: f64,
    stt: f64,
    std: f64,
    sdd: f64,
}

impl Bin {
    fn new(first_reading: usize, t: f64, d: f64) -> Self {
        Bin { first_reading, n: 1, t_first: t, d_first: d, st: 0.0, sd: 0.0, stt: 0.0, std: 0.0, sdd: 0.0 }
    }

    fn push(&mut self, t: f64, d: f64) {
        let dt = t - self.t_first;
        let dd = d - self.d_first;
        self.n += 1;
        self.st += dt;
        self.sd += dd;
        self.stt += dt * dt;
        self.std += dt * dd;
        self.sdd += dd * dd;
    }

    fn node(&self) -> CurveNode {
        let n = self.n as f64;
        CurveNode {
            t_min: self.t_first + self.st / n,
            d_mm: self.d_first + self.sd / n,
            readings: self.n,
            first_reading: self.first_reading,
        }
    }

    /// Residual sum of squares about a straight line through the bin's readings, and its degrees of
    /// freedom; the line removes the curve's own trend across the bin.
    fn residual(&self) -> (f64, usize) {
        if self.n < 3 {
            return (0.0, 0);
        }
        let n = self.n as f64;
        let sxx = self.stt - self.st * self.st / n;
        let sxy = self.std - self.st * self.sd / n;
        let syy = self.sdd - self.sd * self.sd / n;
        if sxx > 0.0 { ((syy - sxy * sxy / sxx).max(0.0), self.n - 2) } else { (syy.max(0.0), self.n - 1) }
    }
}

/// The thinned time curve of one increment, built reading by reading.
#[derive(Debug, Clone)]
pub struct TimeCurve {
    bins_per_decade: f64,
    zero_sum_mm: f64,
    zero_count: usize,
    bins: Vec<Bin>,
    upper_edge_min: f64,
    last_t_min: f64,
    count: usize,
}

impl TimeCurve {
    /// An empty curve with `bins_per_decade` log-time bins per decade (1…1000).
    pub(crate) fn new(bins_per_decade: f64) -> Result<Self, AnalysisError> {
        super::check_range("bins_per_decade", bins_per_decade, 1.0, 1000.0, "1 to 1000")?;
        Ok(TimeCurve {
            bins_per_decade,
            zero_sum_mm: 0.0,
            zero_count: 0,
            bins: Vec::new(),
            upper_edge_min: f64::NEG_INFINITY,
            last_t_min: f64::NEG_INFINITY,
            count: 0,
        })
    }

    /// A curve from readings `(t_min, d_mm)` sorted by time, compression positive.
    pub fn from_readings(readings: &[(f64, f64)], bins_per_decade: f64) -> Result<Self, AnalysisError> {
        let mut curve = TimeCurve::new(bins_per_decade)?;
        curve.extend(readings)?;
        Ok(curve)
    }

    /// Appends readings in time order; stops at the first bad one (earlier ones stay in).
    pub(crate) fn extend(&mut self, readings: &[(f64, f64)]) -> Result<(), AnalysisError> {
        for &(t, d) in readings {
            self.push(t, d)?;
        }
        Ok(())
    }

    /// Appends one reading. Refuses NaN, negative or decreasing time, and absurd magnitudes; a refused
    /// reading leaves the curve as it was.
    pub(crate) fn push(&mut self, t_min: f64, d_mm: f64) -> Result<(), AnalysisError> {
        let index = self.count;
        if !t_min.is_finite() {
            return Err(AnalysisError::NonFinite { index, field: "time_min" });
        }
        if !d_mm.is_finite() {
            return Err(AnalysisError::NonFinite { index, field: "displacement_mm" });
        }
        if t_min < 0.0 {
            return Err(AnalysisError::NegativeTime { index, time_min: t_min });
        }
        if t_min > MAX_TIME_MIN {
            return Err(AnalysisError::OutOfRange { index, field: "time_min", value: t_min, limit: MAX_TIME_MIN });
        }
        if d_mm.abs() > MAX_DISPLACEMENT_MM {
            return Err(AnalysisError::OutOfRange {
                index,
                field: "displacement_mm",
                value: d_mm,
                limit: MAX_DISPLACEMENT_MM,
            });
        }
        if t_min < self.last_t_min {
            return Err(AnalysisError::Unsorted { index, time_min: t_min, previous_min: self.last_t_min });
        }
        self.count += 1;
        self.last_t_min = t_min;
        if t_min == 0.0 {
            // The reading at the moment the load went on: kept apart, never a curve node (√0, log 0).
            self.zero_sum_mm += d_mm;
            self.zero_count += 1;
            return Ok(());
        }
        match self.bins.last_mut() {
            Some(bin) if t_min < self.upper_edge_min || t_min <= bin_mean_time(bin) * (1.0 + SAME_TIME_RELATIVE) => {
                bin.push(t_min, d_mm);
            }
            _ => {
                self.upper_edge_min = self.upper_edge_for(t_min);
                self.bins.push(Bin::new(index, t_min, d_mm));
            }
        }
        Ok(())
    }

    /// Upper edge 10^((k+1)/B) of the anchored bin holding t.
    fn upper_edge_for(&self, t_min: f64) -> f64 {
        let b = self.bins_per_decade;
        let mut k = (t_min.log10() * b).floor();
        let mut edge = 10f64.powf((k + 1.0) / b);
        // Rounding in log10 can put the edge a hair under t.
        while edge <= t_min {
            k += 1.0;
            edge = 10f64.powf((k + 1.0) / b);
        }
        edge
    }

    /// Readings accepted so far.
    pub(crate) fn reading_count(&self) -> usize {
        self.count
    }

    /// Mean of the readings taken at t = 0, if any.
    pub(crate) fn zero_reading_mm(&self) -> Option<f64> {
        (self.zero_count > 0).then(|| self.zero_sum_mm / self.zero_count as f64)
    }

    /// The nodes (t > 0), one per occupied bin, in time order.
    pub(crate) fn nodes(&self) -> Vec<CurveNode> {
        self.bins.iter().map(Bin::node).collect()
    }

    /// Nodes plus the per-node straight-line tolerances the constructions use.
    pub(crate) fn prepare(&self, gauge_resolution_mm: f64) -> Result<PreparedCurve, AnalysisError> {
        super::check_positive("gauge_resolution_mm", gauge_resolution_mm)?;
        let nodes = self.nodes();
        let mut running_noise_mm = Vec::with_capacity(nodes.len());
        let (mut rss, mut dof) = (0.0, 0usize);
        for bin in &self.bins {
            let (r, f) = bin.residual();
            rss += r;
            dof += f;
            running_noise_mm.push((dof >= MIN_NOISE_DOF).then(|| (rss / dof as f64).sqrt()));
        }
        let noise_mm = running_noise_mm.last().copied().flatten();
        Ok(PreparedCurve {
            sqrt_t: nodes.iter().map(|n| n.t_min.sqrt()).collect(),
            log_t: nodes.iter().map(|n| n.t_min.log10()).collect(),
            nodes,
            zero_reading_mm: self.zero_reading_mm(),
            reading_count: self.count,
            noise_mm,
            gauge_resolution_mm,
            running_noise_mm,
        })
    }
}

/// The bin's mean time. A new bin starts only past the previous node's mean by a relative
/// `SAME_TIME_RELATIVE`, so node times (and their √t and log t) always differ.
fn bin_mean_time(bin: &Bin) -> f64 {
    bin.t_first + bin.st / bin.n as f64
}

/// A curve ready for the constructions: nodes in √t and log10 t, and how far a node may stray from a
/// straight line before it counts as off it.
#[derive(Debug, Clone)]
pub(crate) struct PreparedCurve {
    /// Nodes with t > 0, in time order.
    pub(crate) nodes: Vec<CurveNode>,
    /// Mean reading at t = 0, if any.
    pub(crate) zero_reading_mm: Option<f64>,
    /// Readings behind the nodes (including those at t = 0).
    pub(crate) reading_count: usize,
    /// Reading noise (standard deviation, mm) pooled from the scatter inside bins; `None` while too few
    /// bins hold three or more readings.
    pub(crate) noise_mm: Option<f64>,
    /// Gauge resolution the tolerances start from.
    pub(crate) gauge_resolution_mm: f64,
    running_noise_mm: Vec<Option<f64>>,
    pub(crate) sqrt_t: Vec<f64>,
    pub(crate) log_t: Vec<f64>,
}

impl PreparedCurve {
    fn tolerance_with(&self, index: usize, noise_mm: Option<f64>) -> f64 {
        let floor = RESOLUTION_MULTIPLE * self.gauge_resolution_mm;
        match noise_mm {
            Some(sigma) => floor.max(NOISE_MULTIPLE * sigma / (self.nodes[index].readings as f64).sqrt()),
            None => floor,
        }
    }

    /// Tolerance of node `index` using only the noise seen up to that node, so a forward scan never
    /// depends on later readings.
    pub(crate) fn tolerance_causal_mm(&self, index: usize) -> f64 {
        self.tolerance_with(index, self.running_noise_mm[index])
    }

    /// Tolerance of node `index` using the noise of the whole curve.
    pub(crate) fn tolerance_mm(&self, index: usize) -> f64 {
        self.tolerance_with(index, self.noise_mm)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sparse_schedule_keeps_one_node_per_reading() {
        // Hand schedule [ref: reading-schedule]: readings a factor ≥ 1.8 apart never share a 40/decade bin.
        let times = [0.25, 0.5, 1.0, 2.0, 4.0, 8.0, 15.0, 30.0, 60.0, 120.0, 240.0, 480.0, 1440.0];
        let readings: Vec<(f64, f64)> = std::iter::once((0.0, 0.0)).chain(times.iter().map(|&t| (t, t))).collect();
        let curve = TimeCurve::from_readings(&readings, DEFAULT_BINS_PER_DECADE).unwrap();
        let nodes = curve.nodes();
        assert_eq!(nodes.len(), times.len());
        assert_eq!(curve.zero_reading_mm(), Some(0.0));
        for (node, &t) in nodes.iter().zip(&times) {
            assert_eq!((node.t_min, node.d_mm, node.readings), (t, t, 1));
        }
        assert_eq!(nodes[3].first_reading, 4);
    }

    #[test]
    fn dense_readings_are_averaged_within_anchored_bins() {
        // 1 reading per second for a day: 86 400 readings become at most 40 nodes per decade.
        let readings: Vec<(f64, f64)> = (1..=86_400).map(|s| (s as f64 / 60.0, 1.0)).collect();
        let curve = TimeCurve::from_readings(&readings, 40.0).unwrap();
        let nodes = curve.nodes();
        let decades = (1440.0f64 / (1.0 / 60.0)).log10();
        assert!(nodes.len() as f64 <= 40.0 * decades + 2.0, "{} nodes", nodes.len());
        assert_eq!(nodes.iter().map(|n| n.readings).sum::<usize>(), 86_400);
        assert!(nodes.windows(2).all(|w| w[1].t_min > w[0].t_min));
    }

    #[test]
    fn noise_estimate_recovers_the_scatter_inside_bins() {
        // Computed: a sloping line plus a ±σ square wave has within-bin standard deviation σ once the trend is
        // removed; the pooled estimate must find it.
        let sigma = 0.002;
        let readings: Vec<(f64, f64)> = (1..=20_000)
            .map(|k| {
                let t = k as f64 * 0.05;
                (t, 0.01 * t + if k % 2 == 0 { sigma } else { -sigma })
            })
            .collect();
        let prepared = TimeCurve::from_readings(&readings, 40.0).unwrap().prepare(0.001).unwrap();
        let noise = prepared.noise_mm.unwrap();
        assert!((noise - sigma).abs() < 0.05 * sigma, "noise {noise}");
    }

    #[test]
    fn bad_readings_are_refused_and_leave_the_curve_unchanged() {
        let mut curve = TimeCurve::new(40.0).unwrap();
        curve.push(1.0, 0.1).unwrap();
        assert!(matches!(curve.push(0.5, 0.1), Err(AnalysisError::Unsorted { index: 1, .. })));
        assert!(matches!(curve.push(f64::NAN, 0.1), Err(AnalysisError::NonFinite { field: "time_min", .. })));
        assert!(matches!(curve.push(2.0, f64::INFINITY), Err(AnalysisError::NonFinite { .. })));
        assert!(matches!(curve.push(-1.0, 0.0), Err(AnalysisError::NegativeTime { .. })));
        assert!(matches!(curve.push(2.0, 1e300), Err(AnalysisError::OutOfRange { .. })));
        assert_eq!(curve.reading_count(), 1);
        assert!(TimeCurve::new(0.0).is_err());
        assert!(TimeCurve::new(f64::NAN).is_err());
    }

    #[test]
    fn readings_a_hair_apart_never_make_coincident_nodes() {
        // Two readings straddling a bin edge by one ulp stay in one node.
        let edge = 10f64.powf(1.0 / 40.0);
        let readings = [(edge.next_down(), 1.0), (edge, 2.0), (2.0, 3.0)];
        let nodes = TimeCurve::from_readings(&readings, 40.0).unwrap().nodes();
        assert!(nodes.windows(2).all(|w| w[1].t_min.sqrt() > w[0].t_min.sqrt()));
    }
}
