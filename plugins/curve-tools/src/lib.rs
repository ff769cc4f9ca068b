//! Helpers shared by the beam-data plugins (profile, depth-dose): linear interpolation on a
//! sampled curve, level crossings, and the regional tolerances of Venselaar, Welleweerd &
//! Mijnheer (Radiother Oncol 2001;60:191-201) with their confidence-limit statistic.

use beamproof_api::{
    AnalysisInput, BeamInfo, CriteriaSet, Curve, Dataset, DatasetData, DoseUnit, Levels, Limits,
    Metric, MetricSpec, PluginManifest, Status, Table, TestInfo, TestKind, fixed,
};

/// Test support for the curve plugins: an input comparing two relative curves for a 6 MV
/// photon beam (flattening-filter-free when `fff`), with the plugin's default parameters and
/// the given metric levels (id, tolerance, action).
pub fn curve_test_input(
    manifest: &PluginManifest,
    kind: TestKind,
    fff: bool,
    levels: &[(&str, f64, f64)],
    measured: Curve,
    calculated: Curve,
) -> AnalysisInput {
    let dataset = |source: &str, curve: Curve| Dataset {
        source: source.into(),
        unit: DoseUnit::Percent,
        data: DatasetData::Curve(curve),
    };
    AnalysisInput {
        test: TestInfo {
            site: "s".into(),
            id: "t".into(),
            name: "t".into(),
            kind,
            machine: "m".into(),
            beam: Some(BeamInfo {
                id: "6x".into(),
                modality: "photon".into(),
                energy: 6.0,
                fff,
            }),
        },
        params: manifest
            .params
            .iter()
            .filter_map(|p| Some((p.name.clone(), p.default.clone()?)))
            .collect(),
        criteria: CriteriaSet {
            name: "c".into(),
            dose_difference_percent: None,
            gamma: vec![],
            metrics: levels
                .iter()
                .map(|(k, t, a)| {
                    (
                        k.to_string(),
                        Levels {
                            tolerance: *t,
                            action: *a,
                        },
                    )
                })
                .collect(),
        },
        measured: Some(dataset("m.csv", measured)),
        calculated: Some(dataset("c.csv", calculated)),
        mu: None,
        film: None,
    }
}

/// Index and value of the largest sample (the first one on ties; `(0, f64::MIN)` when empty).
pub fn argmax(v: &[f64]) -> (usize, f64) {
    v.iter().copied().enumerate().fold(
        (0, f64::MIN),
        |(bi, bv), (i, x)| if x > bv { (i, x) } else { (bi, bv) },
    )
}

/// One quantity measured and calculated.
#[derive(Debug, Clone, PartialEq)]
pub struct Compared {
    /// Metric id for `metrics:` levels in the criteria set.
    pub id: &'static str,
    pub label: &'static str,
    pub unit: &'static str,
    pub measured: f64,
    pub calculated: f64,
    /// Difference in percent of the measured value (else in the quantity's unit).
    pub relative: bool,
}

impl Compared {
    /// Calculated minus measured.
    pub fn difference(&self) -> f64 {
        if self.relative {
            100.0 * (self.calculated - self.measured) / self.measured
        } else {
            self.calculated - self.measured
        }
    }

    /// Unit of the difference: percent of the measured value for ratios, percentage points for
    /// percentages, else the quantity's unit.
    pub fn difference_unit(&self) -> &'static str {
        match (self.relative, self.unit) {
            (true, _) => "%",
            (false, "%") => "pp",
            (false, u) => u,
        }
    }
}

/// A plugin's judged-metric declaration (id, unit of the levels, meaning) as manifest entries
/// for test kind `kind`.
pub fn judged_specs(judged: &[(&str, &str, &str)], kind: TestKind) -> Vec<MetricSpec> {
    judged
        .iter()
        .map(|(id, unit, what)| MetricSpec::new(id, &[kind], unit, what))
        .collect()
}

/// Metrics, statuses, table and a note for compared quantities.
pub struct Comparison {
    /// `difference:<id>` metrics, judged where the criteria set has levels for the id.
    pub metrics: Vec<Metric>,
    pub statuses: Vec<Status>,
    pub table: Table,
    /// Names the ids without levels, when there are any.
    pub note: Option<String>,
}

/// Judge each difference against the criteria set's levels for its id (informational when it
/// has none) and lay the quantities out in a table. `judged` is the plugin's declaration of
/// the ids it judges, with their difference units (its manifest's `judged_metrics`): every row
/// must be declared there, checked in debug builds so the tests keep the declaration true.
pub fn compare_quantities(
    title: &str,
    rows: &[Compared],
    criteria: &CriteriaSet,
    judged: &[(&str, &str, &str)],
) -> Comparison {
    for r in rows {
        debug_assert!(
            judged
                .iter()
                .any(|(id, unit, _)| *id == r.id && *unit == r.difference_unit()),
            "metric `{}` (difference in {}) is not declared in the plugin's judged metrics",
            r.id,
            r.difference_unit()
        );
    }
    let mut metrics = Vec::new();
    let mut statuses = Vec::new();
    for r in rows {
        let diff = r.difference();
        let levels = criteria.metrics.get(r.id);
        let status = levels.map(|l| Status::from_deviation(diff, l.tolerance, l.action));
        statuses.extend(status);
        metrics.push(Metric {
            id: format!("difference:{}", r.id),
            label: format!("{} difference", r.label),
            value: diff,
            unit: r.difference_unit().into(),
            limits: levels.map(|l| Limits {
                rule: "|difference| <= limit".into(),
                tolerance: l.tolerance,
                action: l.action,
            }),
            status,
            measured: Some(r.measured),
            calculated: Some(r.calculated),
            compared_unit: r.unit.into(),
        });
    }
    let table = Table {
        title: title.into(),
        columns: ["Metric", "Measured", "Calculated", "Difference", "Status"]
            .map(String::from)
            .to_vec(),
        rows: rows
            .iter()
            .zip(&metrics)
            .map(|(r, m)| {
                let d = if r.unit.is_empty() { 4 } else { 2 };
                let unit = if r.unit.is_empty() {
                    String::new()
                } else {
                    format!(" ({})", r.unit)
                };
                vec![
                    format!("{}{unit}", r.label),
                    fixed(r.measured, d),
                    fixed(r.calculated, d),
                    format!("{} {}", fixed(m.value, 2), m.unit),
                    m.status
                        .map_or("info".to_string(), |s| s.word().to_string()),
                ]
            })
            .collect(),
    };
    let unjudged: Vec<&str> = rows
        .iter()
        .filter(|r| !criteria.metrics.contains_key(r.id))
        .map(|r| r.id)
        .collect();
    let note = (!unjudged.is_empty()).then(|| {
        format!(
            "Informational (no levels in criteria set `{}`): {}.",
            criteria.name,
            unjudged.join(", ")
        )
    });
    Comparison {
        metrics,
        statuses,
        table,
        note,
    }
}

/// One region of a regional comparison (Venselaar et al 2001).
#[derive(Debug, Clone, PartialEq)]
pub struct Region {
    pub id: &'static str,
    pub label: &'static str,
    pub unit: &'static str,
    pub n_points: usize,
    pub mean: f64,
    pub sd: f64,
    /// |mean| + 1.5 SD, the value judged against the tolerance.
    pub confidence_limit: f64,
    pub tolerance: f64,
}

impl Region {
    /// A region from its deviations.
    pub fn from_deviations(
        id: &'static str,
        label: &'static str,
        unit: &'static str,
        v: &[f64],
        tolerance: f64,
    ) -> Region {
        let (mean, sd, confidence_limit) = confidence(v);
        Region {
            id,
            label,
            unit,
            n_points: v.len(),
            mean,
            sd,
            confidence_limit,
            tolerance,
        }
    }

    /// A region made of one width difference (calculated minus measured).
    pub fn single(
        id: &'static str,
        label: &'static str,
        measured: f64,
        calculated: f64,
        tolerance: f64,
    ) -> Region {
        let d = calculated - measured;
        Region {
            id,
            label,
            unit: "mm",
            n_points: 1,
            mean: d,
            sd: 0.0,
            confidence_limit: d.abs(),
            tolerance,
        }
    }
}

/// Metrics (`regional:<id>`) and a table for regions; judged (tolerance as the action level)
/// only when `judge` is true, otherwise informational.
pub fn regional_output(regions: &[Region], judge: bool) -> (Vec<Metric>, Table) {
    let metrics: Vec<Metric> = regions
        .iter()
        .map(|r| {
            let status = (judge && r.n_points > 0)
                .then(|| Status::from_deviation(r.confidence_limit, r.tolerance, r.tolerance));
            Metric {
                id: format!("regional:{}", r.id),
                label: format!("{}, confidence limit", r.label),
                value: r.confidence_limit,
                unit: r.unit.into(),
                limits: judge.then(|| Limits {
                    rule: "|mean| + 1.5 SD <= tolerance".into(),
                    tolerance: r.tolerance,
                    action: r.tolerance,
                }),
                status,
                ..Default::default()
            }
        })
        .collect();
    let table = Table {
        title: "Regional comparison (Venselaar et al 2001)".into(),
        columns: [
            "Region",
            "Points",
            "Mean",
            "SD",
            "|mean| + 1.5 SD",
            "Tolerance",
            "Status",
        ]
        .map(String::from)
        .to_vec(),
        rows: regions
            .iter()
            .zip(&metrics)
            .map(|(r, m)| {
                vec![
                    r.label.to_string(),
                    r.n_points.to_string(),
                    format!("{} {}", fixed(r.mean, 2), r.unit),
                    format!("{} {}", fixed(r.sd, 2), r.unit),
                    format!("{} {}", fixed(r.confidence_limit, 2), r.unit),
                    format!("{} {}", fixed(r.tolerance, 1), r.unit),
                    m.status
                        .map_or("info".to_string(), |s| s.word().to_string()),
                ]
            })
            .collect(),
    };
    (metrics, table)
}

/// Value at `v` by linear interpolation of increasing samples `x`; `None` outside the scan.
pub fn at(x: &[f64], d: &[f64], v: f64) -> Option<f64> {
    if x.is_empty() || v < x[0] || v > x[x.len() - 1] {
        return None;
    }
    if x.len() == 1 {
        return Some(d[0]);
    }
    let j = x.partition_point(|&p| p <= v).clamp(1, x.len() - 1);
    let t = (v - x[j - 1]) / (x[j] - x[j - 1]);
    Some(d[j - 1] + t * (d[j] - d[j - 1]))
}

/// Position where the curve crosses `level` nearest to `near`, interpolated; `None` when it
/// never does.
pub fn nearest_crossing(x: &[f64], d: &[f64], level: f64, near: f64) -> Option<f64> {
    let mut best: Option<f64> = None;
    for j in 1..x.len() {
        let (a, b) = (d[j - 1], d[j]);
        if (a - level) * (b - level) <= 0.0 && a != b {
            let p = x[j - 1] + (level - a) / (b - a) * (x[j] - x[j - 1]);
            if best.is_none_or(|q| (p - near).abs() < (q - near).abs()) {
                best = Some(p);
            }
        }
    }
    best
}

/// Savitzky-Golay smoothing (quadratic, window `2 half + 1` samples) of uniformly spaced data
/// (Savitzky & Golay, Anal Chem 1964;36:1627-1639): weights
/// `c_i = (3(3m^2 + 3m - 1) - 15 i^2) / ((2m - 1)(2m + 1)(2m + 3))`, i = -m..m. Polynomials up
/// to degree 3 pass unchanged. The first and last `half` samples are left as they are.
pub fn savitzky_golay(d: &[f64], half: usize) -> Vec<f64> {
    if half == 0 || d.len() < 2 * half + 1 {
        return d.to_vec();
    }
    let m = half as f64;
    let norm = (2.0 * m - 1.0) * (2.0 * m + 1.0) * (2.0 * m + 3.0);
    let w: Vec<f64> = (-(half as i64)..=half as i64)
        .map(|i| (3.0 * (3.0 * m * m + 3.0 * m - 1.0) - 15.0 * (i * i) as f64) / norm)
        .collect();
    let mut out = d.to_vec();
    for (j, o) in out.iter_mut().enumerate().take(d.len() - half).skip(half) {
        *o = w
            .iter()
            .enumerate()
            .map(|(k, wk)| wk * d[j + k - half])
            .sum();
    }
    out
}

/// True when the positions are evenly spaced within 1 % of the mean step.
pub fn uniformly_spaced(x: &[f64]) -> bool {
    if x.len() < 3 {
        return true;
    }
    let step = (x[x.len() - 1] - x[0]) / (x.len() - 1) as f64;
    x.windows(2)
        .all(|p| ((p[1] - p[0]) - step).abs() <= 0.01 * step.abs())
}

/// Geometry classes of the Venselaar et al 2001 tolerance table.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Geometry {
    Simple,
    Complex,
    MoreComplex,
}

/// Tolerances of one geometry class (Venselaar, Welleweerd & Mijnheer 2001, Radiother Oncol 60:191, their table of tolerances).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Tolerances {
    /// delta1: central axis beyond build-up, local dose deviation, %.
    pub delta1_percent: f64,
    /// delta2: build-up and penumbra, as distance, mm.
    pub delta2_mm: f64,
    /// delta3: off-axis in field, local dose deviation, %.
    pub delta3_percent: f64,
    /// delta4: outside the field, % of the central-axis dose.
    pub delta4_percent: f64,
    /// Radiological width (50-50 %), mm.
    pub rw50_mm: f64,
    /// Beam fringe (50-90 %), mm.
    pub fringe_mm: f64,
}

impl Geometry {
    /// Parse `simple`, `complex` or `more-complex`.
    pub fn from_name(s: &str) -> Option<Geometry> {
        match s {
            "simple" => Some(Geometry::Simple),
            "complex" => Some(Geometry::Complex),
            "more-complex" => Some(Geometry::MoreComplex),
            _ => None,
        }
    }

    pub fn tolerances(self) -> Tolerances {
        let (d1, d2, d3, d4, rw, fr) = match self {
            Geometry::Simple => (2.0, 2.0, 3.0, 3.0, 2.0, 2.0),
            Geometry::Complex => (3.0, 3.0, 3.0, 4.0, 2.0, 3.0),
            Geometry::MoreComplex => (4.0, 3.0, 4.0, 5.0, 2.0, 3.0),
        };
        Tolerances {
            delta1_percent: d1,
            delta2_mm: d2,
            delta3_percent: d3,
            delta4_percent: d4,
            rw50_mm: rw,
            fringe_mm: fr,
        }
    }
}

/// Mean, sample standard deviation and confidence limit |mean| + 1.5 SD of deviations
/// (Venselaar et al 2001; the 1.5 factor: value from memory). NaN for an
/// empty set; SD 0 for one value.
pub fn confidence(v: &[f64]) -> (f64, f64, f64) {
    if v.is_empty() {
        return (f64::NAN, f64::NAN, f64::NAN);
    }
    let n = v.len() as f64;
    let mean = v.iter().sum::<f64>() / n;
    let sd = if v.len() > 1 {
        (v.iter().map(|d| (d - mean).powi(2)).sum::<f64>() / (n - 1.0)).sqrt()
    } else {
        0.0
    };
    (mean, sd, mean.abs() + 1.5 * sd)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn confidence_limit_uses_the_sample_standard_deviation() {
        // Values 1, 2, 3: mean 2, sample SD 1 (n - 1 denominator), limit 2 + 1.5 = 3.5.
        assert_eq!(confidence(&[1.0, 2.0, 3.0]), (2.0, 1.0, 3.5));
        assert!(confidence(&[]).2.is_nan());
    }

    #[test]
    fn crossings_and_interpolation() {
        let x = [0.0, 1.0, 2.0, 3.0];
        let d = [0.0, 10.0, 10.0, 0.0];
        assert_eq!(at(&x, &d, 0.5), Some(5.0));
        assert_eq!(at(&x, &d, 3.5), None);
        assert_eq!(nearest_crossing(&x, &d, 5.0, 2.9), Some(2.5));
        assert_eq!(nearest_crossing(&x, &d, 5.0, 0.1), Some(0.5));
        assert_eq!(nearest_crossing(&x, &d, 20.0, 0.0), None);
    }

    #[test]
    fn savitzky_golay_five_point_weights_and_polynomials() {
        // Savitzky & Golay 1964, quadratic 5-point smoothing: (-3, 12, 17, 12, -3) / 35.
        let impulse = [0.0, 0.0, 0.0, 0.0, 1.0, 0.0, 0.0, 0.0, 0.0];
        let s = savitzky_golay(&impulse, 2);
        let want = [
            0.0,
            0.0,
            -3.0 / 35.0,
            12.0 / 35.0,
            17.0 / 35.0,
            12.0 / 35.0,
            -3.0 / 35.0,
            0.0,
            0.0,
        ];
        for (a, b) in s.iter().zip(want) {
            assert!((a - b).abs() < 1e-15, "{s:?}");
        }
        // A cubic passes unchanged (the quadratic smoother is exact to degree 3).
        let x: Vec<f64> = (0..30).map(f64::from).collect();
        let cubic: Vec<f64> = x
            .iter()
            .map(|v| 1.0 + 0.5 * v - 0.02 * v * v + 0.001 * v * v * v)
            .collect();
        let sm = savitzky_golay(&cubic, 3);
        assert!(sm.iter().zip(&cubic).all(|(a, b)| (a - b).abs() < 1e-9));
        assert!(uniformly_spaced(&x) && !uniformly_spaced(&[0.0, 1.0, 3.0]));
    }

    #[test]
    fn tolerance_table() {
        // Venselaar et al 2001, their table of tolerances: simple geometry 2 %, 2 mm, 3 %, 3 %.
        let t = Geometry::Simple.tolerances();
        assert_eq!(
            (
                t.delta1_percent,
                t.delta2_mm,
                t.delta3_percent,
                t.delta4_percent
            ),
            (2.0, 2.0, 3.0, 3.0)
        );
        assert_eq!(
            Geometry::from_name("more-complex").map(|g| g.tolerances().delta1_percent),
            Some(4.0)
        );
    }
}
