//! The `depth-dose` analysis: beam-quality and depth-dose metrics of the measured and the
//! calculated central-axis curve, and their differences judged against the criteria set's
//! metric levels. Combine it with the `gamma` analysis in the same test for a 1D gamma.
//!
//! Metric ids for `metrics:` levels: [`JUDGED`] (differences are calculated minus measured).

pub mod metrics;

use beamproof_api::{
    Analysis, AnalysisError, AnalysisInput, AnalysisOutput, Band, Curve, CurveAxis, DatasetData,
    Figure, ParamSpec, ParamType, PluginManifest, Reference, Series, SeriesStyle, Span, Status,
    TestKind,
};

use beamproof_curve_tools::{Comparison, Geometry, compare_quantities, regional_output};
use metrics::{at_depth, electron, normalise, photon};

/// Every id a criteria set's `metrics:` may give levels for, with the unit of the judged
/// difference (calculated minus measured; `pp` percentage points, `%` of the measured value
/// for ratios) and meaning. The analysis judges exactly these ids (checked when the
/// comparison is made, in debug builds).
pub const JUDGED: &[(&str, &str, &str)] = &[
    ("dmax-mm", "mm", "depth of maximum dose"),
    (
        "surface",
        "pp",
        "surface dose (first point), percent of maximum",
    ),
    ("pdd5", "pp", "PDD at 5 cm (photons)"),
    ("pdd10", "pp", "PDD at 10 cm (photons)"),
    ("pdd20", "pp", "PDD at 20 cm (photons)"),
    ("pdd20-10", "%", "PDD20,10 (photons)"),
    ("tpr20-10", "%", "TPR20,10 from PDD20,10 (photons)"),
    ("pdd10x", "pp", "%dd(10)x of TG-51 (photons)"),
    ("r90-mm", "mm", "R90 (electrons)"),
    ("r80-mm", "mm", "R80 (electrons)"),
    ("r50-mm", "mm", "R50 (electrons)"),
    ("rp-mm", "mm", "practical range Rp (electrons)"),
    ("e0-mev", "MeV", "mean energy at the surface E0 (electrons)"),
    (
        "dref-mm",
        "mm",
        "reference depth d_ref = 0.6 R50 - 0.1 cm (electrons)",
    ),
    (
        "ep0-mev",
        "MeV",
        "most probable energy at the surface Ep,0 from Rp (electrons)",
    ),
];

/// Plugin id used in campaign files.
pub const NAME: &str = "depth-dose";

/// The depth-dose analysis.
#[derive(Debug, Default, Clone, Copy)]
pub struct DepthDose;

use beamproof_curve_tools::Compared as Row;

fn references(electrons: bool) -> Vec<Reference> {
    let mut r = vec![Reference {
        key: "TRS-398".into(),
        citation: "IAEA. Absorbed Dose Determination in External Beam Radiotherapy: An International Code of Practice for Dosimetry Based on Standards of Absorbed Dose to Water. Technical Reports Series No. 398. Vienna: IAEA; 2000.".into(),
    }];
    if !electrons {
        r.push(Reference {
            key: "TG-51".into(),
            citation: "Almond PR, Biggs PJ, Coursey BM, et al. AAPM's TG-51 protocol for clinical reference dosimetry of high-energy photon and electron beams. Med Phys. 1999;26(9):1847-1870.".into(),
        });
    }
    r
}

fn curve<'a>(input: &'a AnalysisInput, role: &str) -> Result<&'a Curve, AnalysisError> {
    let ds = match role {
        "measured" => input.measured.as_ref(),
        _ => input.calculated.as_ref(),
    }
    .ok_or_else(|| AnalysisError::new(format!("depth-dose needs `{role}` data")))?;
    match &ds.data {
        DatasetData::Curve(c) if c.axis == CurveAxis::Depth => Ok(c),
        _ => Err(AnalysisError::new(format!(
            "`{}` must be a depth curve (`# axis: depth`), it is a {}",
            ds.source,
            ds.shape_name()
        ))),
    }
}

impl Analysis for DepthDose {
    fn manifest(&self) -> PluginManifest {
        PluginManifest {
            name: NAME.into(),
            version: env!("CARGO_PKG_VERSION").into(),
            description: "Depth-dose and beam-quality metrics (d_max, PDD, PDD20,10, TPR20,10, %dd(10)x; electron R90, R80, R50, Rp, E0), measured against calculated".into(),
            kinds: vec![TestKind::DepthDose],
            judged_metrics: Some(beamproof_curve_tools::judged_specs(
                JUDGED,
                TestKind::DepthDose,
            )),
            needs: Vec::new(),
            params: vec![
                ParamSpec {
                    name: "modality".into(),
                    kind: ParamType::Choice { choices: vec!["beam".into(), "photon".into(), "electron".into()] },
                    default: Some("beam".into()),
                    unit: String::new(),
                    description: "Which metrics apply: from the test's beam (default), or stated".into(),
                },
                ParamSpec {
                    name: "regional-tolerances".into(),
                    kind: ParamType::Choice { choices: vec!["off".into(), "simple".into(), "complex".into(), "more-complex".into()] },
                    default: Some("off".into()),
                    unit: String::new(),
                    description: "Judge the photon regional comparison of Venselaar et al 2001 (build-up, beyond d_max) with this geometry class (off: shown, not judged)".into(),
                },
            ],
        }
    }

    fn analyse(&self, input: &AnalysisInput) -> Result<AnalysisOutput, AnalysisError> {
        let electrons = match input.text("modality")? {
            "photon" => false,
            "electron" => true,
            _ => match &input.test.beam {
                Some(b) => b.modality == "electron",
                None => {
                    return Err(AnalysisError::new(
                        "the test names no beam: add `beam:` to the test or set the `modality` parameter",
                    ));
                }
            },
        };
        let (m, c) = (curve(input, "measured")?, curve(input, "calculated")?);
        let fail = |role: &str, e: metrics::CurveError| {
            AnalysisError::new(format!("{role} curve: {}", e.0))
        };
        let mp = normalise(&m.positions_mm, &m.dose).map_err(|e| fail("measured", e))?;
        let cp = normalise(&c.positions_mm, &c.dose).map_err(|e| fail("calculated", e))?;
        let row = |id, label, unit, measured, calculated, relative| Row {
            id,
            label,
            unit,
            measured,
            calculated,
            relative,
        };
        // Depth of maximum and surface dose, the same for both modalities.
        let common = |dmax: (f64, f64), surface: (f64, f64)| {
            vec![
                row("dmax-mm", "Depth of maximum", "mm", dmax.0, dmax.1, false),
                row(
                    "surface",
                    "Surface dose (first point)",
                    "%",
                    surface.0,
                    surface.1,
                    false,
                ),
            ]
        };
        let rows: Vec<Row> = if electrons {
            let a = electron(&m.positions_mm, &mp).map_err(|e| fail("measured", e))?;
            let b = electron(&c.positions_mm, &cp).map_err(|e| fail("calculated", e))?;
            let mut rows = common(
                (a.dmax_mm, b.dmax_mm),
                (a.surface_percent, b.surface_percent),
            );
            rows.extend([
                row("r90-mm", "R90", "mm", a.r90_mm, b.r90_mm, false),
                row("r80-mm", "R80", "mm", a.r80_mm, b.r80_mm, false),
                row("r50-mm", "R50", "mm", a.r50_mm, b.r50_mm, false),
                row("rp-mm", "Practical range Rp", "mm", a.rp_mm, b.rp_mm, false),
                row(
                    "e0-mev",
                    "Mean energy at the surface E0 = 2.33 R50",
                    "MeV",
                    a.e0_mev,
                    b.e0_mev,
                    false,
                ),
                row(
                    "ep0-mev",
                    "Most probable energy at the surface Ep,0 = 0.22 + 1.98 Rp + 0.0025 Rp^2",
                    "MeV",
                    a.ep0_mev,
                    b.ep0_mev,
                    false,
                ),
                row(
                    "dref-mm",
                    "Reference depth d_ref = 0.6 R50 - 0.1 cm",
                    "mm",
                    a.dref_mm,
                    b.dref_mm,
                    false,
                ),
            ]);
            rows
        } else {
            let a = photon(&m.positions_mm, &mp).map_err(|e| fail("measured", e))?;
            let b = photon(&c.positions_mm, &cp).map_err(|e| fail("calculated", e))?;
            let mut rows = common(
                (a.dmax_mm, b.dmax_mm),
                (a.surface_percent, b.surface_percent),
            );
            rows.extend([
                row("pdd5", "PDD at 5 cm", "%", a.pdd5, b.pdd5, false),
                row("pdd10", "PDD at 10 cm", "%", a.pdd10, b.pdd10, false),
                row("pdd20", "PDD at 20 cm", "%", a.pdd20, b.pdd20, false),
                row("pdd20-10", "PDD20,10", "", a.pdd20_10, b.pdd20_10, true),
                row(
                    "tpr20-10",
                    "TPR20,10 = 1.2661 PDD20,10 - 0.0595",
                    "",
                    a.tpr20_10,
                    b.tpr20_10,
                    true,
                ),
                row(
                    "pdd10x",
                    "%dd(10)x, TG-51 without lead foil",
                    "%",
                    a.pdd10x,
                    b.pdd10x,
                    false,
                ),
            ]);
            rows
        };
        let regional = input.text("regional-tolerances")?;
        let regions = if electrons {
            Vec::new()
        } else {
            let geometry = Geometry::from_name(regional).unwrap_or(Geometry::Simple);
            metrics::regions(&m.positions_mm, &mp, &c.positions_mm, &cp, geometry)
        };
        let mut out = build_output(input, &rows, m, &mp, c, &cp, electrons);
        if !regions.is_empty() {
            let judge = regional != "off";
            let (rm, table) = regional_output(&regions, judge);
            // The delta1 tolerance as a band on the difference curve (percentage points of the
            // maximum approximate the local deviation near the maximum).
            if let (Some(d1), Some(Figure::Chart { bands, .. })) = (
                regions.iter().find(|r| r.id == "delta1"),
                out.figures.get_mut(1),
            ) {
                bands.push(Band {
                    label: format!("delta1 tolerance +-{} %", d1.tolerance),
                    low: -d1.tolerance,
                    high: d1.tolerance,
                });
            }
            let worst = Status::worst(rm.iter().filter_map(|m| m.status));
            out.status = Status::worst(out.status.into_iter().chain(worst));
            out.metrics.extend(rm);
            out.tables.push(table);
            out.notes.push(if judge {
                format!("Regional comparison judged with the `{regional}` tolerances of Venselaar et al 2001 on |mean| + 1.5 SD; build-up shallower than the measured d_max.")
            } else {
                "Regional comparison (Venselaar et al 2001) shown for information with the simple-geometry tolerances; set `regional-tolerances` to judge it.".to_string()
            });
            out.references.push(Reference {
                key: "Venselaar 2001".into(),
                citation: "Venselaar J, Welleweerd H, Mijnheer B. Tolerances for the accuracy of photon beam dose calculations of treatment planning systems. Radiother Oncol. 2001;60(2):191-201.".into(),
            });
        }
        Ok(out)
    }
}

fn build_output(
    input: &AnalysisInput,
    rows: &[Row],
    m: &Curve,
    mp: &[f64],
    c: &Curve,
    cp: &[f64],
    electrons: bool,
) -> AnalysisOutput {
    let Comparison {
        metrics,
        statuses,
        table,
        note: unjudged_note,
    } = compare_quantities("Depth-dose metrics", rows, &input.criteria, JUDGED);
    // Difference curve at the measured depths the calculated scan covers.
    let (dz, dd): (Vec<f64>, Vec<f64>) = m
        .positions_mm
        .iter()
        .zip(mp)
        .filter_map(|(&z, &v)| at_depth(&c.positions_mm, cp, z).ok().map(|w| (z, w - v)))
        .unzip();
    // Region shading for photons: build-up before the measured d_max, then beyond.
    let spans = match (electrons, m.positions_mm.first(), m.positions_mm.last()) {
        (false, Some(&first), Some(&last)) => vec![
            Span {
                label: "delta2 build-up".into(),
                from: first,
                to: rows[0].measured,
            },
            Span {
                label: "delta1".into(),
                from: rows[0].measured,
                to: last,
            },
        ],
        _ => Vec::new(),
    };
    let figures = vec![
        Figure::Chart {
            title: "Depth dose, normalised to each maximum".into(),
            x_label: "Depth (mm)".into(),
            y_label: "Dose (%)".into(),
            series: vec![
                Series {
                    name: "measured".into(),
                    style: SeriesStyle::Markers,
                    x: m.positions_mm.clone(),
                    y: mp.to_vec(),
                },
                Series {
                    name: "calculated".into(),
                    style: SeriesStyle::Line,
                    x: c.positions_mm.clone(),
                    y: cp.to_vec(),
                },
            ],
            bands: vec![],
            spans: spans.clone(),
        },
        Figure::Chart {
            title: "Calculated minus measured".into(),
            x_label: "Depth (mm)".into(),
            y_label: "Difference (percentage points)".into(),
            series: vec![Series {
                name: "difference".into(),
                style: SeriesStyle::Line,
                x: dz,
                y: dd,
            }],
            bands: vec![],
            spans: spans.clone(),
        },
    ];
    let mut notes = vec!["Both curves are normalised to their own maximum; differences are calculated minus measured.".to_string()];
    if !electrons {
        notes.push("TPR20,10 from PDD20,10 assumes a 10 x 10 cm field at SSD 100 cm (TRS-398); %dd(10)x without lead foil is the TG-51 photon component only below about 10 MV, and flattening-filter-free beams need the foil (TG-51 addendum).".into());
    } else {
        notes.push("R50 is read from the curve as given; for an ionisation curve convert I50 to R50 first (TG-51: R50 = 1.029 I50 - 0.06 cm).".into());
    }
    notes.extend(unjudged_note);
    AnalysisOutput {
        metrics,
        tables: vec![table],
        figures,
        notes,
        references: references(electrons),
        status: Some(Status::worst(statuses).unwrap_or(Status::Pass)),
        derived_measured: None,
        calibration: None,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn pdd(shift_mm: f64) -> Curve {
        // Invented smooth photon-like curve (test data): build-up to 15 mm, then attenuation.
        let z: Vec<f64> = (0..=150).map(|i| 2.0 * f64::from(i)).collect();
        let d = z.iter().map(|&x| {
            let x = x - shift_mm;
            let b = if x < 15.0 {
                0.45 + 0.55 * (x.max(0.0) / 15.0)
            } else {
                1.0
            };
            b * (-0.0048 * (x - 15.0).max(0.0)).exp()
        });
        Curve {
            axis: CurveAxis::Depth,
            positions_mm: z.clone(),
            dose: d.collect(),
        }
    }

    /// The metric `id` of an output.
    fn metric<'a>(out: &'a AnalysisOutput, id: &str) -> &'a beamproof_api::Metric {
        out.metrics
            .iter()
            .find(|m| m.id == id)
            .unwrap_or_else(|| panic!("{id} missing"))
    }

    fn input(m: Curve, c: Curve, levels: &[(&str, f64, f64)]) -> AnalysisInput {
        beamproof_curve_tools::curve_test_input(
            &DepthDose.manifest(),
            TestKind::DepthDose,
            false,
            levels,
            m,
            c,
        )
    }

    /// Invented electron-like depth dose (test data): a rise to 100 % at 20 mm, a linear fall
    /// to 5 % at 60 mm, a bremsstrahlung tail after.
    fn electron_pdd(shift_mm: f64) -> Curve {
        let z: Vec<f64> = (0..=100).map(f64::from).collect();
        let d = z.iter().map(|&x| {
            let x = x - shift_mm;
            if x < 20.0 {
                0.8 + 0.2 * x.max(0.0) / 20.0
            } else if x < 60.0 {
                1.0 - 0.95 * (x - 20.0) / 40.0
            } else {
                0.05 - 0.0001 * (x - 60.0)
            }
        });
        Curve {
            axis: CurveAxis::Depth,
            positions_mm: z.clone(),
            dose: d.collect(),
        }
    }

    #[test]
    fn electron_ranges_are_judged_under_their_declared_ids() {
        // A calculated curve 2 mm deeper moves R50 by 2 mm (the linear fall: R50 at
        // 20 + 40 x 0.5 / 0.95 mm), judged against 1 / 1.5 mm levels: FAIL.
        let mut inp = input(
            electron_pdd(0.0),
            electron_pdd(2.0),
            &[("r50-mm", 1.0, 1.5), ("e0-mev", 0.1, 0.2)],
        );
        inp.params
            .insert("modality".into(), serde_json::json!("electron"));
        let out = DepthDose.analyse(&inp).expect("runs");
        let r50 = metric(&out, "difference:r50-mm");
        assert!((r50.value - 2.0).abs() < 1e-6, "{}", r50.value);
        assert_eq!(r50.status, Some(Status::Fail));
        // E0 = 2.33 R50 (IAEA TRS-398): 2 mm deeper is 0.466 MeV more.
        let e0 = metric(&out, "difference:e0-mev");
        assert!((e0.value - 0.466).abs() < 1e-6, "{}", e0.value);
        // d_ref = 0.6 R50 - 0.1 cm (TRS-398, TG-51): 0.6 x 2 mm = 1.2 mm deeper.
        let dref = metric(&out, "difference:dref-mm");
        assert!((dref.value - 1.2).abs() < 1e-6, "{}", dref.value);
        // Ep,0 = 0.22 + 1.98 Rp + 0.0025 Rp^2 (ICRU 35): a 2 mm deeper Rp adds
        // 1.98 x 0.2 + 0.0025 ((Rp + 0.2)^2 - Rp^2) MeV, at least 0.396.
        let ep0 = metric(&out, "difference:ep0-mev");
        assert!(ep0.value > 0.396 && ep0.value < 0.41, "{}", ep0.value);
    }

    #[test]
    fn identical_curves_agree_and_a_deeper_curve_is_judged() {
        let out = DepthDose
            .analyse(&input(
                pdd(0.0),
                pdd(0.0),
                &[("pdd10", 1.0, 2.0), ("dmax-mm", 2.0, 3.0)],
            ))
            .expect("runs");
        assert!(
            out.metrics.iter().all(|m| m.value.abs() < 1e-12),
            "identical curves"
        );
        assert_eq!(out.status, Some(Status::Pass));
        // Calculated 4 mm deeper everywhere: d_max moves by 4 mm (action 3 -> FAIL).
        let out = DepthDose
            .analyse(&input(pdd(0.0), pdd(4.0), &[("dmax-mm", 2.0, 3.0)]))
            .expect("runs");
        let dmax = metric(&out, "difference:dmax-mm");
        assert!((dmax.value - 4.0).abs() < 0.2, "{}", dmax.value);
        assert_eq!(out.status, Some(Status::Fail));
    }

    #[test]
    fn a_scan_stopping_before_20_cm_is_an_error_naming_the_curve() {
        let mut short = pdd(0.0);
        short.positions_mm.truncate(80);
        short.dose.truncate(80);
        let e = DepthDose
            .analyse(&input(short, pdd(0.0), &[]))
            .expect_err("short");
        assert_eq!(
            e.message,
            "measured curve: the scan (0.0 to 158.0 mm) does not reach 200 mm"
        );
    }
}
