//! The `profile` analysis: lateral-profile metrics of the measured and the calculated scan and
//! their differences judged against the criteria set's metric levels. Combine it with the
//! `gamma` analysis in the same test for a 1D gamma.
//!
//! Metric ids for `metrics:` levels (differences are calculated minus measured): `field-size-mm`,
//! `centre-mm`, `penumbra-left-mm`, `penumbra-right-mm` (80/20), `flatness` and `symmetry`
//! (IEC 60976 forms, percentage points); for flattening-filter-free beams (Fogliata et al
//! 2012) `fff-field-size-mm`, `fff-penumbra-left-mm`, `fff-penumbra-right-mm`, `unflatness`
//! (percent of measured), `slope` (percent of measured) and `peak-mm`.

pub mod metrics;
pub mod regions;

use beamproof_api::{
    Analysis, AnalysisError, AnalysisInput, AnalysisOutput, Band, CurveAxis, DatasetData, Figure,
    ParamSpec, ParamType, PluginManifest, Reference, Series, SeriesStyle, Span, Status, TestKind,
};

use beamproof_curve_tools::{
    Comparison, Geometry, Region, at, compare_quantities, regional_output,
};
use metrics::{fff, profile};

/// Plugin id used in campaign files.
pub const NAME: &str = "profile";

/// Every id a criteria set's `metrics:` may give levels for, with the unit of the judged
/// difference (calculated minus measured; `pp` percentage points, `%` of the measured value
/// for ratios) and meaning. The analysis judges exactly these ids (checked when the
/// comparison is made, in debug builds).
pub const JUDGED: &[(&str, &str, &str)] = &[
    ("field-size-mm", "mm", "field size between the 50 % points"),
    (
        "centre-mm",
        "mm",
        "field centre, mid-point of the 50 % points",
    ),
    ("penumbra-left-mm", "mm", "penumbra 80/20, left"),
    ("penumbra-right-mm", "mm", "penumbra 80/20, right"),
    ("penumbra90-left-mm", "mm", "penumbra 90/10, left"),
    ("penumbra90-right-mm", "mm", "penumbra 90/10, right"),
    (
        "flatness",
        "pp",
        "flatness, IEC 100 Dmax/Dmin (flattened beams)",
    ),
    (
        "symmetry",
        "pp",
        "symmetry, IEC 100 max D(x)/D(-x) (flattened beams)",
    ),
    (
        "flatness-variation",
        "pp",
        "flatness, 100 (Dmax-Dmin)/(Dmax+Dmin) (flattened beams)",
    ),
    (
        "symmetry-point",
        "pp",
        "symmetry, 100 max |D(x)-D(-x)|/D(centre) (flattened beams)",
    ),
    (
        "symmetry-area",
        "pp",
        "symmetry, 100 (A_L - A_R)/(A_L + A_R) over the flattened region (flattened beams)",
    ),
    ("in-field-max", "pp", "maximum in the flattened region"),
    ("in-field-min", "pp", "minimum in the flattened region"),
    (
        "fff-field-size-mm",
        "mm",
        "FFF field size, renormalised (Fogliata et al 2012)",
    ),
    (
        "fff-penumbra-left-mm",
        "mm",
        "FFF penumbra 80/20 left, renormalised",
    ),
    (
        "fff-penumbra-right-mm",
        "mm",
        "FFF penumbra 80/20 right, renormalised",
    ),
    ("unflatness", "%", "FFF unflatness D(0)/D(80 % FS)"),
    ("slope", "%", "FFF slope between FS/6 and FS/3"),
    ("peak-mm", "mm", "FFF peak position"),
    ("fff-inflection-left-mm", "mm", "FFF left inflection point"),
    (
        "fff-inflection-right-mm",
        "mm",
        "FFF right inflection point",
    ),
    (
        "fff-renormalisation",
        "%",
        "FFF renormalisation factor bringing the inflection points to 50 %",
    ),
    ("unflatness-left", "%", "FFF unflatness D(0)/D(-0.4 FS)"),
    ("unflatness-right", "%", "FFF unflatness D(0)/D(+0.4 FS)"),
    ("slope-left", "%", "FFF slope between FS/6 and FS/3, left"),
    ("slope-right", "%", "FFF slope between FS/6 and FS/3, right"),
];

/// The profile analysis.
#[derive(Debug, Default, Clone, Copy)]
pub struct Profile;

use beamproof_curve_tools::Compared as Row;

/// A profile normalised for analysis, with where its edge search starts and what was done.
struct Prepared {
    axis: CurveAxis,
    positions: Vec<f64>,
    percent: Vec<f64>,
    origin: f64,
    note: Option<String>,
}

fn prepare(
    input: &AnalysisInput,
    role: &str,
    to_max: bool,
    smooth_half: usize,
) -> Result<Prepared, AnalysisError> {
    let ds = if role == "measured" {
        input.measured.as_ref()
    } else {
        input.calculated.as_ref()
    }
    .ok_or_else(|| AnalysisError::new(format!("profile needs `{role}` data")))?;
    let c = match &ds.data {
        DatasetData::Curve(c) if c.axis != CurveAxis::Depth => c,
        _ => {
            return Err(AnalysisError::new(format!(
                "`{}` must be a lateral profile (`# axis: x`, `y` or `diagonal`), it is a {}",
                ds.source,
                ds.shape_name()
            )));
        }
    };
    let (imax, max) = beamproof_curve_tools::argmax(&c.dose);
    if max.is_nan() || max <= 0.0 {
        return Err(AnalysisError::new(format!(
            "`{}` holds no positive dose",
            ds.source
        )));
    }
    let cax = at(&c.positions_mm, &c.dose, 0.0);
    // Normalise to the central axis when it lies inside the field, else to the maximum and
    // search the edges from the maximum (an off-axis field).
    let (norm, origin, note) = match cax {
        Some(v) if !to_max && v >= 0.5 * max => (v, 0.0, None),
        Some(v) if v >= 0.5 * max => (max, 0.0, None),
        _ => (
            max,
            c.positions_mm[imax],
            Some(format!(
                "`{}`: the central axis lies outside the field, so the profile is normalised to its maximum and the edges are searched from it.",
                ds.source
            )),
        ),
    };
    let mut percent: Vec<f64> = c.dose.iter().map(|d| 100.0 * d / norm).collect();
    if smooth_half > 0 {
        if !beamproof_curve_tools::uniformly_spaced(&c.positions_mm) {
            return Err(AnalysisError::new(format!(
                "`{}`: smoothing needs evenly spaced positions",
                ds.source
            )));
        }
        percent = beamproof_curve_tools::savitzky_golay(&percent, smooth_half);
    }
    Ok(Prepared {
        axis: c.axis,
        positions: c.positions_mm.clone(),
        percent,
        origin,
        note,
    })
}

impl Prepared {
    /// The same profile with positions shifted so that `centre` is at 0.
    fn centred(&self, centre: f64) -> Prepared {
        Prepared {
            axis: self.axis,
            positions: self.positions.iter().map(|x| x - centre).collect(),
            percent: self.percent.clone(),
            origin: self.origin - centre,
            note: self.note.clone(),
        }
    }
}

fn references(fff_beam: bool) -> Vec<Reference> {
    let mut r = vec![Reference {
        key: "IEC 60976".into(),
        citation: "IEC 60976. Medical electrical equipment - Medical electron accelerators - Functional performance characteristics. Geneva: International Electrotechnical Commission.".into(),
    }];
    if fff_beam {
        r.push(Reference {
            key: "Fogliata 2012".into(),
            citation: "Fogliata A, Garcia R, Knoos T, et al. Definition of parameters for quality assurance of flattening filter free (FFF) photon beams in radiation therapy. Med Phys. 2012;39(10):6455-6464.".into(),
        });
    }
    r
}

impl Analysis for Profile {
    fn manifest(&self) -> PluginManifest {
        PluginManifest {
            name: NAME.into(),
            version: env!("CARGO_PKG_VERSION").into(),
            description: "Profile metrics: field size, centre, 80/20 and 90/10 penumbrae, IEC flatness and symmetry; FFF parameters (Fogliata et al 2012) for flattening-filter-free beams; measured against calculated".into(),
            kinds: vec![TestKind::Profile],
            judged_metrics: Some(beamproof_curve_tools::judged_specs(
                JUDGED,
                TestKind::Profile,
            )),
            needs: Vec::new(),
            params: vec![
                ParamSpec {
                    name: "normalise".into(),
                    kind: ParamType::Choice { choices: vec!["central-axis".into(), "maximum".into()] },
                    default: Some("central-axis".into()),
                    unit: String::new(),
                    description: "Normalisation of both profiles before the metrics (the maximum is used when the central axis lies outside the field)".into(),
                },
                ParamSpec {
                    name: "smoothing-points".into(),
                    kind: ParamType::Integer { min: Some(0), max: Some(51) },
                    default: Some(0.into()),
                    unit: "samples".into(),
                    description: "Savitzky-Golay (quadratic) smoothing window applied to both profiles before the metrics; 0 is off, else odd".into(),
                },
                ParamSpec {
                    name: "in-field-window-mm".into(),
                    kind: ParamType::Number { min: Some(0.0), max: Some(50.0) },
                    default: Some(metrics::IN_FIELD_WINDOW_MM.into()),
                    unit: "mm".into(),
                    description: "Full width of the local quadratic fit (Savitzky and Golay 1964) inside the flattened region that flatness, symmetry and the in-field extremes are read from, so detector noise does not read as flatness; 0 reads the samples as they are. Edges and penumbrae always come from the samples".into(),
                },
                ParamSpec {
                    name: "centre-on-edges".into(),
                    kind: ParamType::Bool,
                    default: Some(false.into()),
                    unit: String::new(),
                    description: "Shift each profile so its 50 % centre is at 0 before the regional comparison and the difference curve".into(),
                },
                ParamSpec {
                    name: "regional-tolerances".into(),
                    kind: ParamType::Choice { choices: vec!["off".into(), "simple".into(), "complex".into(), "more-complex".into()] },
                    default: Some("off".into()),
                    unit: String::new(),
                    description: "Judge the regional comparison of Venselaar et al 2001 with the tolerances of this geometry class (off: shown, not judged)".into(),
                },
            ],
        }
    }

    fn analyse(&self, input: &AnalysisInput) -> Result<AnalysisOutput, AnalysisError> {
        let to_max = input.text("normalise")? == "maximum";
        let fff_beam = input.test.beam.as_ref().is_some_and(|b| b.fff);
        let smoothing = input
            .params
            .get("smoothing-points")
            .and_then(|v| v.as_i64())
            .unwrap_or(0);
        if smoothing != 0 && (smoothing < 3 || smoothing % 2 == 0) {
            return Err(AnalysisError::new(format!(
                "`smoothing-points` must be 0 (off) or an odd number of at least 3, not {smoothing}"
            )));
        }
        let smooth_half = (smoothing / 2) as usize;
        let m = prepare(input, "measured", to_max, smooth_half)?;
        let c = prepare(input, "calculated", to_max, smooth_half)?;
        let diagonal = m.axis == CurveAxis::Diagonal;
        let fail = |role: &str, e: metrics::ProfileError| {
            AnalysisError::new(format!("{role} profile: {}", e.0))
        };
        let window = input
            .number_opt("in-field-window-mm")
            .unwrap_or(metrics::IN_FIELD_WINDOW_MM);
        let a = profile(&m.positions, &m.percent, m.origin, diagonal, window)
            .map_err(|e| fail("measured", e))?;
        let b = profile(&c.positions, &c.percent, c.origin, diagonal, window)
            .map_err(|e| fail("calculated", e))?;
        let row = |id, label, unit, measured, calculated| Row {
            id,
            label,
            unit,
            measured,
            calculated,
            relative: false,
        };
        let mut rows = vec![
            row(
                "field-size-mm",
                "Field size (50 %)",
                "mm",
                a.field_size_mm,
                b.field_size_mm,
            ),
            row(
                "centre-mm",
                "Field centre (mid 50 % points)",
                "mm",
                a.centre_mm,
                b.centre_mm,
            ),
            row(
                "penumbra-left-mm",
                "Penumbra 80/20 left",
                "mm",
                a.penumbra80_20_left_mm,
                b.penumbra80_20_left_mm,
            ),
            row(
                "penumbra-right-mm",
                "Penumbra 80/20 right",
                "mm",
                a.penumbra80_20_right_mm,
                b.penumbra80_20_right_mm,
            ),
            row(
                "penumbra90-left-mm",
                "Penumbra 90/10 left",
                "mm",
                a.penumbra90_10_left_mm,
                b.penumbra90_10_left_mm,
            ),
            row(
                "penumbra90-right-mm",
                "Penumbra 90/10 right",
                "mm",
                a.penumbra90_10_right_mm,
                b.penumbra90_10_right_mm,
            ),
        ];
        if fff_beam {
            let fa = fff(&m.positions, &m.percent, m.origin).map_err(|e| fail("measured", e))?;
            let fb = fff(&c.positions, &c.percent, c.origin).map_err(|e| fail("calculated", e))?;
            rows.extend([
                row(
                    "fff-field-size-mm",
                    "FFF field size (renormalised)",
                    "mm",
                    fa.field_size_mm,
                    fb.field_size_mm,
                ),
                row(
                    "fff-penumbra-left-mm",
                    "FFF penumbra 80/20 left (renormalised)",
                    "mm",
                    fa.penumbra80_20_left_mm,
                    fb.penumbra80_20_left_mm,
                ),
                row(
                    "fff-penumbra-right-mm",
                    "FFF penumbra 80/20 right (renormalised)",
                    "mm",
                    fa.penumbra80_20_right_mm,
                    fb.penumbra80_20_right_mm,
                ),
                Row {
                    id: "unflatness",
                    label: "Unflatness D(0)/D(80 % FS)",
                    unit: "",
                    measured: fa.unflatness,
                    calculated: fb.unflatness,
                    relative: true,
                },
                Row {
                    id: "slope",
                    label: "Slope (FS/6 to FS/3)",
                    unit: "%/mm",
                    measured: fa.slope_percent_per_mm,
                    calculated: fb.slope_percent_per_mm,
                    relative: true,
                },
                row("peak-mm", "Peak position", "mm", fa.peak_mm, fb.peak_mm),
                row(
                    "fff-inflection-left-mm",
                    "Left inflection point",
                    "mm",
                    fa.left_inflection_mm,
                    fb.left_inflection_mm,
                ),
                row(
                    "fff-inflection-right-mm",
                    "Right inflection point",
                    "mm",
                    fa.right_inflection_mm,
                    fb.right_inflection_mm,
                ),
                Row {
                    id: "fff-renormalisation",
                    label: "Renormalisation factor (inflection points to 50 %)",
                    unit: "",
                    measured: fa.renormalisation,
                    calculated: fb.renormalisation,
                    relative: true,
                },
                Row {
                    id: "unflatness-left",
                    label: "Unflatness left D(0)/D(-0.4 FS)",
                    unit: "",
                    measured: fa.unflatness_left,
                    calculated: fb.unflatness_left,
                    relative: true,
                },
                Row {
                    id: "unflatness-right",
                    label: "Unflatness right D(0)/D(+0.4 FS)",
                    unit: "",
                    measured: fa.unflatness_right,
                    calculated: fb.unflatness_right,
                    relative: true,
                },
                Row {
                    id: "slope-left",
                    label: "Slope left (FS/6 to FS/3)",
                    unit: "%/mm",
                    measured: fa.slope_left_percent_per_mm,
                    calculated: fb.slope_left_percent_per_mm,
                    relative: true,
                },
                Row {
                    id: "slope-right",
                    label: "Slope right (FS/6 to FS/3)",
                    unit: "%/mm",
                    measured: fa.slope_right_percent_per_mm,
                    calculated: fb.slope_right_percent_per_mm,
                    relative: true,
                },
            ]);
        } else {
            rows.extend([
                row(
                    "flatness",
                    "Flatness, IEC 100 Dmax/Dmin",
                    "%",
                    a.flatness_iec,
                    b.flatness_iec,
                ),
                row(
                    "symmetry",
                    "Symmetry, IEC 100 max D(x)/D(-x)",
                    "%",
                    a.symmetry_iec,
                    b.symmetry_iec,
                ),
                row(
                    "flatness-variation",
                    "Flatness, 100 (Dmax-Dmin)/(Dmax+Dmin)",
                    "%",
                    a.flatness_variation,
                    b.flatness_variation,
                ),
                row(
                    "symmetry-point",
                    "Symmetry, 100 max |D(x)-D(-x)|/D(centre)",
                    "%",
                    a.symmetry_point,
                    b.symmetry_point,
                ),
                row(
                    "symmetry-area",
                    "Symmetry, 100 (A_L - A_R)/(A_L + A_R)",
                    "%",
                    a.symmetry_area,
                    b.symmetry_area,
                ),
            ]);
        }
        rows.extend([
            row(
                "in-field-max",
                "Maximum in the flattened region",
                "%",
                a.max_in_region,
                b.max_in_region,
            ),
            row(
                "in-field-min",
                "Minimum in the flattened region",
                "%",
                a.min_in_region,
                b.min_in_region,
            ),
        ]);
        // Optionally align the two field centres before the point-by-point comparisons.
        let centre_on_edges = input
            .params
            .get("centre-on-edges")
            .and_then(|v| v.as_bool())
            .unwrap_or(false);
        let (m, c) = if centre_on_edges {
            (m.centred(a.centre_mm), c.centred(b.centre_mm))
        } else {
            (m, c)
        };
        let regional = input.text("regional-tolerances")?;
        let geometry = Geometry::from_name(regional).unwrap_or(Geometry::Simple);
        let fringe =
            |p: &metrics::ProfileMetrics| 0.5 * (p.fringe50_90_left_mm + p.fringe50_90_right_mm);
        let regional_results = regions::compare(
            &m.positions,
            &m.percent,
            &c.positions,
            &c.percent,
            if centre_on_edges { 0.0 } else { b.centre_mm },
            [(a.field_size_mm, b.field_size_mm), (fringe(&a), fringe(&b))],
            geometry,
        );
        let mut notes = vec![format!(
            "Edges, penumbrae and the flattened region are taken about the field centre; the region excludes {:.1} mm from each 50 % edge of the measured profile (IEC 60976 table, central 80 % below 5 cm).",
            a.field_size_mm / 2.0 - a.region_half_mm
        )];
        notes.push(if window > 0.0 {
            format!("Flatness, symmetry and the in-field extremes are read from a local quadratic fit (Savitzky and Golay 1964) {window} mm wide, using only samples inside the flattened region, so detector noise does not read as flatness; edges and penumbrae come from the samples as measured.")
        } else {
            "Flatness, symmetry and the in-field extremes are read from the samples as measured (`in-field-window-mm: 0`).".to_string()
        });
        notes.extend(m.note.clone());
        notes.extend(c.note.clone());
        if fff_beam {
            notes.push("Flattening-filter-free beam: profiles renormalised so the inflection points (steepest gradient of a Savitzky-Golay smoothed profile over about 2 mm, quadratic vertex) sit at 50 % (Fogliata et al 2012).".into());
        }
        notes.push(if regional == "off" {
            "Regional comparison (Venselaar et al 2001) shown for information with the tolerances of simple geometry; set `regional-tolerances` to judge it.".to_string()
        } else {
            format!("Regional comparison judged with the `{regional}` tolerances of Venselaar et al 2001 on the confidence limit |mean| + 1.5 SD; region boundaries at 80 % and 20 % of the measured central-axis dose (common practice).")
        });
        let spans = vec![
            Span {
                label: "delta2".into(),
                from: a.left20_mm,
                to: a.left80_mm,
            },
            Span {
                label: "delta3".into(),
                from: a.left80_mm,
                to: a.right80_mm,
            },
            Span {
                label: "delta2".into(),
                from: a.right80_mm,
                to: a.right20_mm,
            },
        ];
        Ok(build_output(
            input,
            &rows,
            &m,
            &c,
            notes,
            fff_beam,
            &regional_results,
            regional != "off",
            &spans,
        ))
    }
}

#[allow(clippy::too_many_arguments)]
fn build_output(
    input: &AnalysisInput,
    rows: &[Row],
    m: &Prepared,
    c: &Prepared,
    mut notes: Vec<String>,
    fff_beam: bool,
    regional: &[Region],
    judge_regions: bool,
    spans: &[Span],
) -> AnalysisOutput {
    let Comparison {
        mut metrics,
        mut statuses,
        table,
        note: unjudged_note,
    } = compare_quantities("Profile metrics", rows, &input.criteria, JUDGED);
    let (regional_metrics, regional_table) = regional_output(regional, judge_regions);
    // The in-field tolerance (delta3) of the regional comparison as a band on the difference.
    let bands: Vec<Band> = regional
        .iter()
        .filter(|r| r.id == "delta3")
        .map(|r| Band {
            label: format!("delta3 tolerance +-{} %", r.tolerance),
            low: -r.tolerance,
            high: r.tolerance,
        })
        .collect();
    statuses.extend(regional_metrics.iter().filter_map(|m| m.status));
    metrics.extend(regional_metrics);
    let (dx, dd): (Vec<f64>, Vec<f64>) = m
        .positions
        .iter()
        .zip(&m.percent)
        .filter_map(|(&x, &v)| at(&c.positions, &c.percent, x).map(|w| (x, w - v)))
        .unzip();
    let figures = vec![
        Figure::Chart {
            title: "Profiles, normalised".into(),
            x_label: "Position (mm)".into(),
            y_label: "Dose (%)".into(),
            series: vec![
                Series {
                    name: "measured".into(),
                    style: SeriesStyle::Markers,
                    x: m.positions.clone(),
                    y: m.percent.clone(),
                },
                Series {
                    name: "calculated".into(),
                    style: SeriesStyle::Line,
                    x: c.positions.clone(),
                    y: c.percent.clone(),
                },
            ],
            bands: vec![],
            spans: spans.to_vec(),
        },
        Figure::Chart {
            title: "Calculated minus measured".into(),
            x_label: "Position (mm)".into(),
            y_label: "Difference (percentage points)".into(),
            series: vec![Series {
                name: "difference".into(),
                style: SeriesStyle::Line,
                x: dx,
                y: dd,
            }],
            bands,
            spans: spans.to_vec(),
        },
    ];
    notes.extend(unjudged_note);
    let mut refs = references(fff_beam);
    refs.push(Reference {
        key: "Venselaar 2001".into(),
        citation: "Venselaar J, Welleweerd H, Mijnheer B. Tolerances for the accuracy of photon beam dose calculations of treatment planning systems. Radiother Oncol. 2001;60(2):191-201.".into(),
    });
    AnalysisOutput {
        metrics,
        tables: vec![table, regional_table],
        figures,
        notes,
        references: refs,
        status: Some(Status::worst(statuses).unwrap_or(Status::Pass)),
        derived_measured: None,
        calibration: None,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use beamproof_api::Curve;

    fn linear_edge_profile(half: f64, shift: f64) -> Curve {
        // Plateau 100 % with linear edges 4 mm wide centred on +-half (test data).
        let x: Vec<f64> = (-120..=120).map(|i| f64::from(i) * 0.5).collect();
        let d = x.iter().map(|&u| {
            let e = (u - shift).abs() - half;
            (50.0 - 12.5 * e).clamp(2.0, 100.0)
        });
        Curve {
            axis: CurveAxis::X,
            positions_mm: x.clone(),
            dose: d.collect(),
        }
    }

    fn input(m: Curve, c: Curve, fff_beam: bool, levels: &[(&str, f64, f64)]) -> AnalysisInput {
        beamproof_curve_tools::curve_test_input(
            &Profile.manifest(),
            TestKind::Profile,
            fff_beam,
            levels,
            m,
            c,
        )
    }

    #[test]
    fn a_shifted_field_is_seen_in_the_centre_and_judged() {
        // Linear edges from 100 % to 0 over 8 mm centred on the edge: 50 % exactly at +-40 mm
        // (field size 80 mm), 80/20 penumbra 0.6 x 8 = 4.8 mm (geometry of a linear ramp).
        let out = Profile
            .analyse(&input(
                linear_edge_profile(40.0, 0.0),
                linear_edge_profile(40.0, 1.5),
                false,
                &[("centre-mm", 1.0, 2.0)],
            ))
            .expect("runs");
        let get = |id: &str| {
            out.metrics
                .iter()
                .find(|m| m.id == id)
                .map(|m| (m.value, m.status))
                .expect(id)
        };
        assert!((get("difference:centre-mm").0 - 1.5).abs() < 1e-9);
        assert_eq!(get("difference:centre-mm").1, Some(Status::Warn));
        assert!(get("difference:field-size-mm").0.abs() < 1e-9);
        let row = &out.tables[0].rows[2];
        assert_eq!(row[1], "4.80", "{row:?}");
        assert_eq!(out.status, Some(Status::Warn));
    }

    #[test]
    fn regional_tolerances_are_judged_only_when_asked() {
        // Calculated 1 mm wider per side: delta2 = 1 mm (linear edges), RW50 = 2 mm; with the
        // simple-geometry tolerances (2 mm, 2 mm; Venselaar et al 2001) both pass at the limit.
        let mut inp = input(
            linear_edge_profile(40.0, 0.0),
            linear_edge_profile(41.0, 0.0),
            false,
            &[],
        );
        let out = Profile.analyse(&inp).expect("runs");
        assert!(
            out.metrics
                .iter()
                .filter(|m| m.id.starts_with("regional:"))
                .all(|m| m.status.is_none())
        );
        inp.params
            .insert("regional-tolerances".into(), serde_json::json!("simple"));
        let out = Profile.analyse(&inp).expect("runs");
        let get = |id: &str| out.metrics.iter().find(|m| m.id == id).expect(id).clone();
        assert!((get("regional:delta2").value - 1.0).abs() < 1e-9);
        assert_eq!(get("regional:delta2").status, Some(Status::Pass));
        assert!((get("regional:rw50").value - 2.0).abs() < 1e-9);
        assert_eq!(get("regional:rw50").status, Some(Status::Pass));
        assert_eq!(out.tables[1].rows.len(), 5);
    }

    #[test]
    fn centring_aligns_the_edges_before_the_regional_comparison() {
        // Calculated shifted 1.5 mm: without centring the penumbra points are 1.5 mm apart
        // (linear edges); centred on their 50 % midpoints they coincide. The centre metric
        // still reports the 1.5 mm offset.
        let mut inp = input(
            linear_edge_profile(40.0, 0.0),
            linear_edge_profile(40.0, 1.5),
            false,
            &[],
        );
        let delta2 = |out: &AnalysisOutput| {
            out.metrics
                .iter()
                .find(|m| m.id == "regional:delta2")
                .map(|m| m.value)
                .expect("delta2")
        };
        let plain = Profile.analyse(&inp).expect("runs");
        inp.params
            .insert("centre-on-edges".into(), serde_json::json!(true));
        let centred = Profile.analyse(&inp).expect("runs");
        assert!(delta2(&plain) > 1.4, "{}", delta2(&plain));
        assert!(delta2(&centred) < 1e-9, "{}", delta2(&centred));
        let centre = centred
            .metrics
            .iter()
            .find(|m| m.id == "difference:centre-mm")
            .expect("centre")
            .value;
        assert!((centre - 1.5).abs() < 1e-9);
    }

    #[test]
    fn smoothing_window_must_be_odd() {
        let mut inp = input(
            linear_edge_profile(40.0, 0.0),
            linear_edge_profile(40.0, 0.0),
            false,
            &[],
        );
        inp.params
            .insert("smoothing-points".into(), serde_json::json!(4));
        let e = Profile.analyse(&inp).expect_err("even window");
        assert_eq!(
            e.message,
            "`smoothing-points` must be 0 (off) or an odd number of at least 3, not 4"
        );
        inp.params
            .insert("smoothing-points".into(), serde_json::json!(5));
        let out = Profile.analyse(&inp).expect("odd window");
        // Linear edges and plateau are polynomials piecewise; smoothing keeps the field size.
        let fs = out
            .metrics
            .iter()
            .find(|m| m.id == "difference:field-size-mm")
            .expect("fs")
            .value;
        assert!(fs.abs() < 1e-9);
    }

    #[test]
    fn a_profile_without_50_percent_names_the_side() {
        let mut m = linear_edge_profile(40.0, 0.0);
        m.positions_mm.truncate(150);
        m.dose.truncate(150);
        let e = Profile
            .analyse(&input(m, linear_edge_profile(40.0, 0.0), false, &[]))
            .expect_err("cut");
        assert_eq!(
            e.message,
            "measured profile: the profile never falls to 50 % on the right side"
        );
    }
}
