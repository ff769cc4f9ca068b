//! Point-dose comparison: measured dose at points (ion chamber, diode, detector) against the
//! calculated dose at the same points, as a percentage difference judged against the criteria
//! set's tolerance and action levels.
//!
//! Difference (Venselaar, Welleweerd & Mijnheer, Radiother Oncol 2001, 60:191-201):
//! `delta = 100 * (D_calc - D_meas) / D_ref` with `D_ref = D_meas` (local, the default) or a
//! stated reference dose (global). A positive difference means the planning system calculates
//! more dose than was measured.
//!
//! The calculated dose comes either from a grid (trilinear interpolation at each point) or from
//! a second point set (matched by label, or by position within `match-distance-mm` when the
//! points carry no labels).

use beamproof_api::{
    Analysis, AnalysisError, AnalysisInput, AnalysisOutput, Band, DatasetData, DoseUnit, Figure,
    Levels, Limits, Metric, ParamSpec, ParamType, PluginManifest, PointSet, Reference, Series,
    SeriesStyle, Status, Table, TestKind,
};

/// Plugin id used in campaign files.
pub const NAME: &str = "point-dose";

/// The point-dose analysis.
#[derive(Debug, Default, Clone, Copy)]
pub struct PointDose;

/// One compared point.
#[derive(Debug, Clone, PartialEq)]
pub struct PointComparison {
    pub label: String,
    pub position_mm: [f64; 3],
    pub measured_gy: f64,
    /// `None` when the point lies outside the calculated grid or has no partner.
    pub calculated_gy: Option<f64>,
    pub difference_percent: Option<f64>,
    pub status: Status,
}

fn reference() -> Reference {
    Reference {
        key: "Venselaar 2001".into(),
        citation: "Venselaar J, Welleweerd H, Mijnheer B. Tolerances for the accuracy of photon beam dose calculations of treatment planning systems. Radiother Oncol. 2001;60(2):191-201.".into(),
    }
}

impl Analysis for PointDose {
    fn manifest(&self) -> PluginManifest {
        PluginManifest {
            name: NAME.into(),
            version: env!("CARGO_PKG_VERSION").into(),
            description: "Measured against calculated dose at points, in percent of the measured (local) or a reference dose".into(),
            kinds: vec![TestKind::PointDose, TestKind::PointSet],
            // Judged against the criteria set's gamma criteria or dose-difference levels,
            // never against `metrics:` levels.
            judged_metrics: Some(Vec::new()),
            needs: vec![beamproof_api::CriteriaNeed::DoseDifference],
            params: vec![
                ParamSpec {
                    name: "difference-relative-to".into(),
                    kind: ParamType::Choice { choices: vec!["measured".into(), "reference-dose".into()] },
                    default: Some("measured".into()),
                    unit: String::new(),
                    description: "Denominator of the percentage difference: each point's measured dose, or `reference-dose-gy`".into(),
                },
                ParamSpec {
                    name: "reference-dose-gy".into(),
                    kind: ParamType::Number { min: Some(1e-6), max: None },
                    default: None,
                    unit: "Gy".into(),
                    description: "Reference dose for global differences (needed when difference-relative-to is reference-dose)".into(),
                },
                ParamSpec {
                    name: "match-distance-mm".into(),
                    kind: ParamType::Number { min: Some(0.0), max: Some(50.0) },
                    default: Some(1.0.into()),
                    unit: "mm".into(),
                    description: "Largest distance at which an unlabelled calculated point matches a measured one".into(),
                },
            ],
        }
    }

    fn analyse(&self, input: &AnalysisInput) -> Result<AnalysisOutput, AnalysisError> {
        let levels = input.criteria.dose_difference_percent.ok_or_else(|| {
            AnalysisError::new(format!(
                "criteria set `{}` has no `dose-difference-percent` levels, which point-dose needs",
                input.criteria.name
            ))
        })?;
        let measured = input
            .measured
            .as_ref()
            .ok_or_else(|| AnalysisError::new("point-dose needs a `measured` point set"))?;
        let calculated = input
            .calculated
            .as_ref()
            .ok_or_else(|| AnalysisError::new("point-dose needs a `calculated` dose"))?;
        for ds in [measured, calculated] {
            if ds.unit != DoseUnit::Gy {
                return Err(AnalysisError::new(format!(
                    "`{}` holds relative dose (%); point-dose compares absolute dose in Gy",
                    ds.source
                )));
            }
        }
        let DatasetData::Points(points) = &measured.data else {
            return Err(AnalysisError::new(format!(
                "measured data must be a point set, `{}` is a {}",
                measured.source,
                measured.shape_name()
            )));
        };
        let reference_dose = match input.text("difference-relative-to")? {
            "measured" => None,
            _ => Some(input.number_opt("reference-dose-gy").ok_or_else(|| {
                AnalysisError::new(
                    "`difference-relative-to: reference-dose` needs `reference-dose-gy`",
                )
            })?),
        };
        let calc = calculated_doses(points, &calculated.data, input.number("match-distance-mm")?)?;
        let rows = compare(points, &calc, reference_dose, levels);
        Ok(build_output(&rows, reference_dose, levels))
    }
}

/// Calculated dose at each measured point (None where it cannot be determined).
fn calculated_doses(
    points: &PointSet,
    calculated: &DatasetData,
    match_mm: f64,
) -> Result<Vec<Option<f64>>, AnalysisError> {
    let n = points.len();
    match calculated {
        DatasetData::Grid(g) => Ok((0..n)
            .map(|i| g.sample(points.x_mm[i], points.y_mm[i], points.z_mm[i]))
            .collect()),
        DatasetData::Points(c) => {
            let labelled = points.labels.iter().all(|l| !l.is_empty())
                && c.labels.iter().all(|l| !l.is_empty());
            Ok((0..n)
                .map(|i| {
                    if labelled {
                        c.labels
                            .iter()
                            .position(|l| *l == points.labels[i])
                            .map(|j| c.dose[j])
                    } else {
                        let d2 = |j: usize| {
                            (c.x_mm[j] - points.x_mm[i]).powi(2)
                                + (c.y_mm[j] - points.y_mm[i]).powi(2)
                                + (c.z_mm[j] - points.z_mm[i]).powi(2)
                        };
                        (0..c.len())
                            .min_by(|&a, &b| d2(a).total_cmp(&d2(b)))
                            .filter(|&j| d2(j).sqrt() <= match_mm)
                            .map(|j| c.dose[j])
                    }
                })
                .collect())
        }
        DatasetData::Curve(_) => Err(AnalysisError::new(
            "calculated data must be a dose grid or a point set, not a curve",
        )),
    }
}

/// Compare each point; a point without calculated dose, or with zero reference dose, is an error.
pub fn compare(
    points: &PointSet,
    calculated: &[Option<f64>],
    reference_dose: Option<f64>,
    levels: Levels,
) -> Vec<PointComparison> {
    (0..points.len())
        .map(|i| {
            let measured = points.dose[i];
            let denominator = reference_dose.unwrap_or(measured);
            let difference = calculated[i]
                .filter(|_| denominator > 0.0)
                .map(|c| 100.0 * (c - measured) / denominator);
            PointComparison {
                label: if points.labels[i].is_empty() {
                    format!("#{}", i + 1)
                } else {
                    points.labels[i].clone()
                },
                position_mm: [points.x_mm[i], points.y_mm[i], points.z_mm[i]],
                measured_gy: measured,
                calculated_gy: calculated[i],
                difference_percent: difference,
                status: difference.map_or(Status::Error, |d| {
                    Status::from_deviation(d, levels.tolerance, levels.action)
                }),
            }
        })
        .collect()
}

fn build_output(
    rows: &[PointComparison],
    reference_dose: Option<f64>,
    levels: Levels,
) -> AnalysisOutput {
    let limits = Limits {
        rule: "|difference| <= limit".into(),
        tolerance: levels.tolerance,
        action: levels.action,
    };
    let mut metrics: Vec<Metric> = rows
        .iter()
        .filter_map(|r| {
            Some(Metric {
                id: format!("difference:{}", r.label),
                label: format!("Dose difference at {}", r.label),
                value: r.difference_percent?,
                unit: "%".into(),
                limits: Some(limits.clone()),
                status: Some(r.status),
                measured: Some(r.measured_gy),
                calculated: r.calculated_gy,
                compared_unit: "Gy".into(),
            })
        })
        .collect();
    let diffs: Vec<f64> = rows.iter().filter_map(|r| r.difference_percent).collect();
    if !diffs.is_empty() {
        let max_abs = diffs.iter().fold(0.0_f64, |m, d| m.max(d.abs()));
        let mean = diffs.iter().sum::<f64>() / diffs.len() as f64;
        metrics.push(Metric {
            id: "max-abs-difference".into(),
            label: "Largest |difference|".into(),
            value: max_abs,
            unit: "%".into(),
            limits: None,
            status: None,
            ..Default::default()
        });
        metrics.push(Metric {
            id: "mean-difference".into(),
            label: "Mean difference".into(),
            value: mean,
            unit: "%".into(),
            limits: None,
            status: None,
            ..Default::default()
        });
    }
    let mut notes = vec![match reference_dose {
        None => "Difference = 100 x (calculated - measured) / measured at each point (local)."
            .to_string(),
        Some(r) => {
            format!("Difference = 100 x (calculated - measured) / {r} Gy (global reference dose).")
        }
    }];
    let missing: Vec<&str> = rows
        .iter()
        .filter(|r| r.difference_percent.is_none())
        .map(|r| r.label.as_str())
        .collect();
    if !missing.is_empty() {
        notes.push(format!(
            "No difference could be formed at {} (outside the calculated grid, no matching calculated point, or zero reference dose): the analysis is marked as error.",
            missing.join(", ")
        ));
    }
    let fmt = |v: Option<f64>, digits: usize| {
        v.map_or_else(|| "n/a".to_string(), |v| format!("{v:.digits$}"))
    };
    let table = Table {
        title: "Point doses".into(),
        columns: [
            "Point",
            "X (mm)",
            "Y (mm)",
            "Z (mm)",
            "Measured (Gy)",
            "Calculated (Gy)",
            "Difference (%)",
            "Status",
        ]
        .map(String::from)
        .to_vec(),
        rows: rows
            .iter()
            .map(|r| {
                vec![
                    r.label.clone(),
                    format!("{:.1}", r.position_mm[0]),
                    format!("{:.1}", r.position_mm[1]),
                    format!("{:.1}", r.position_mm[2]),
                    format!("{:.4}", r.measured_gy),
                    fmt(r.calculated_gy, 4),
                    fmt(r.difference_percent, 2),
                    r.status.word().to_string(),
                ]
            })
            .collect(),
    };
    let (xs, ys): (Vec<f64>, Vec<f64>) = rows
        .iter()
        .enumerate()
        .filter_map(|(i, r)| Some(((i + 1) as f64, r.difference_percent?)))
        .unzip();
    let figure = Figure::Chart {
        title: "Dose difference per point".into(),
        x_label: "Point number".into(),
        y_label: "Difference (%)".into(),
        series: vec![Series {
            name: "calculated - measured".into(),
            style: SeriesStyle::Markers,
            x: xs,
            y: ys,
        }],
        bands: vec![
            Band {
                label: "action".into(),
                low: -levels.action,
                high: levels.action,
            },
            Band {
                label: "tolerance".into(),
                low: -levels.tolerance,
                high: levels.tolerance,
            },
        ],
        spans: vec![],
    };
    AnalysisOutput {
        metrics,
        tables: vec![table],
        figures: vec![figure],
        notes,
        references: vec![reference()],
        status: Status::worst(rows.iter().map(|r| r.status)),
        derived_measured: None,
        calibration: None,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use beamproof_api::{CriteriaSet, Dataset, Grid, TestInfo};
    use std::collections::BTreeMap;

    fn input(
        measured: PointSet,
        calculated: DatasetData,
        params: &[(&str, serde_json::Value)],
    ) -> AnalysisInput {
        let mut p: BTreeMap<String, serde_json::Value> = BTreeMap::from([
            ("difference-relative-to".to_string(), "measured".into()),
            ("match-distance-mm".to_string(), 1.0.into()),
        ]);
        for (k, v) in params {
            p.insert(k.to_string(), v.clone());
        }
        AnalysisInput {
            test: TestInfo::standalone(TestKind::PointDose),
            params: p,
            criteria: CriteriaSet {
                name: "c".into(),
                dose_difference_percent: Some(Levels {
                    tolerance: 2.0,
                    action: 3.0,
                }),
                gamma: vec![],
                metrics: BTreeMap::new(),
            },
            measured: Some(Dataset {
                source: "m.csv".into(),
                unit: DoseUnit::Gy,
                data: DatasetData::Points(measured),
            }),
            calculated: Some(Dataset {
                source: "c".into(),
                unit: DoseUnit::Gy,
                data: calculated,
            }),
            mu: None,
            film: None,
        }
    }

    fn pts(labels: &[&str], xs: &[f64], dose: &[f64]) -> PointSet {
        PointSet {
            labels: labels.iter().map(|s| s.to_string()).collect(),
            x_mm: xs.to_vec(),
            y_mm: vec![0.0; xs.len()],
            z_mm: vec![0.0; xs.len()],
            dose: dose.to_vec(),
        }
    }

    #[test]
    fn local_difference_follows_the_venselaar_definition() {
        // delta = 100 (Dc - Dm) / Dm (Venselaar et al 2001): 2.04 vs 2.00 Gy -> +2.0 %, a pass
        // at the 2 % boundary; 1.95 vs 2.00 -> -2.5 % warn; 2.08 vs 2.00 -> +4 % fail.
        let m = pts(&["a", "b", "c"], &[0.0, 1.0, 2.0], &[2.0, 2.0, 2.0]);
        let c = pts(&["c", "a", "b"], &[2.0, 0.0, 1.0], &[2.08, 2.04, 1.95]);
        let out = PointDose
            .analyse(&input(m, DatasetData::Points(c), &[]))
            .expect("runs");
        let d: Vec<(String, f64, Option<Status>)> = out
            .metrics
            .iter()
            .take(3)
            .map(|m| (m.id.clone(), m.value, m.status))
            .collect();
        assert_eq!(d[0].0, "difference:a");
        assert!((d[0].1 - 2.0).abs() < 1e-9 && d[0].2 == Some(Status::Pass));
        assert!((d[1].1 + 2.5).abs() < 1e-9 && d[1].2 == Some(Status::Warn));
        assert!((d[2].1 - 4.0).abs() < 1e-9 && d[2].2 == Some(Status::Fail));
        assert_eq!(out.status, Some(Status::Fail));
    }

    #[test]
    fn global_difference_uses_the_reference_dose() {
        // 1.0 Gy measured, 1.03 calculated, reference 2 Gy: 100 * 0.03 / 2 = 1.5 % (arithmetic).
        let m = pts(&["p"], &[0.0], &[1.0]);
        let c = pts(&["p"], &[0.0], &[1.03]);
        let out = PointDose
            .analyse(&input(
                m,
                DatasetData::Points(c),
                &[
                    ("difference-relative-to", "reference-dose".into()),
                    ("reference-dose-gy", 2.0.into()),
                ],
            ))
            .expect("runs");
        assert!((out.metrics[0].value - 1.5).abs() < 1e-9);
        assert_eq!(out.status, Some(Status::Pass));
    }

    #[test]
    fn grid_is_sampled_by_interpolation_and_outside_points_are_errors() {
        // Linear dose 1 + 0.01 x along x: at x = 5 mm the interpolated dose is exactly 1.05 Gy.
        let grid = Grid {
            x_mm: vec![0.0, 10.0],
            y_mm: vec![0.0],
            z_mm: vec![0.0],
            dose: vec![1.0, 1.1],
        };
        let m = pts(&["in", "out"], &[5.0, 20.0], &[1.05, 1.0]);
        let out = PointDose
            .analyse(&input(m, DatasetData::Grid(grid), &[]))
            .expect("runs");
        assert!(out.metrics[0].value.abs() < 1e-9);
        assert_eq!(out.status, Some(Status::Error));
        assert!(out.notes.iter().any(|n| n.contains("out")));
    }

    #[test]
    fn unlabelled_points_match_by_position() {
        let m = pts(&["", ""], &[0.0, 10.0], &[1.0, 1.0]);
        let c = pts(&["", ""], &[10.4, 0.3], &[1.01, 0.99]);
        let out = PointDose
            .analyse(&input(m, DatasetData::Points(c), &[]))
            .expect("runs");
        assert!(
            (out.metrics[0].value + 1.0).abs() < 1e-9,
            "{:?}",
            out.metrics[0]
        );
        assert!((out.metrics[1].value - 1.0).abs() < 1e-9);
    }

    #[test]
    fn relative_dose_is_refused() {
        let m = pts(&["p"], &[0.0], &[100.0]);
        let mut inp = input(m.clone(), DatasetData::Points(m), &[]);
        if let Some(c) = inp.calculated.as_mut() {
            c.unit = DoseUnit::Percent;
        }
        let e = PointDose.analyse(&inp).expect_err("relative");
        assert!(e.message.contains("absolute dose"), "{e}");
    }
}
