//! Calibration task: mean channel values of each calibration piece, a rational response fitted
//! per channel, the residuals judged, and the calibration handed back for the runner to store.

use beamproof_api::film::{CHANNELS, CalibrationInput, CalibrationPoint, FilmCalibration};
use beamproof_api::{
    AnalysisError, AnalysisOutput, CriteriaSet, Figure, Levels, Series, SeriesStyle, Span, Table,
    fixed,
};

use crate::fit::{fit_response, quality};
use crate::{judged, references, region_values};

/// Default levels of the largest dose residual of a channel's fit, in percent of the highest
/// calibration dose (common practice, no source): the calibration should read its own pieces
/// back within 2 %.
pub const FIT_LEVELS: Levels = Levels {
    tolerance: 2.0,
    action: 3.0,
};

/// Fit a calibration.
pub fn calibrate(
    c: &CalibrationInput,
    criteria: &CriteriaSet,
) -> Result<AnalysisOutput, AnalysisError> {
    crate::check_channels(&c.scan)?;
    if c.pieces.is_empty() {
        return Err(AnalysisError::new(
            "the calibration lists no pieces; add `pieces:` with a dose and a region each",
        ));
    }
    let mut points = Vec::new();
    for p in &c.pieces {
        let stats = region_values(&c.scan, p.region_px, None)
            .map_err(|e| AnalysisError::new(format!("piece `{}`: {e}", p.label)))?;
        points.push(CalibrationPoint {
            label: p.label.clone(),
            dose_gy: p.dose_gy,
            value: stats.mean,
            spread: stats.sd,
            pixels: stats.pixels,
        });
    }
    let doses: Vec<f64> = points.iter().map(|p| p.dose_gy).collect();
    let mut responses = Vec::new();
    let mut qualities = Vec::new();
    for (k, name) in CHANNELS.iter().enumerate() {
        let values: Vec<f64> = points.iter().map(|p| p.value[k]).collect();
        let r = fit_response(&doses, &values)
            .map_err(|e| AnalysisError::new(format!("{name} channel: {}", e.0)))?;
        qualities.push(quality(&r, &doses, &values));
        responses.push(r);
    }
    let responses: [_; 3] = [responses[0], responses[1], responses[2]];
    let levels = criteria
        .metrics
        .get("fit-max-residual-percent")
        .copied()
        .unwrap_or(FIT_LEVELS);
    let mut metrics = Vec::new();
    for (k, name) in CHANNELS.iter().enumerate() {
        metrics.push(judged(
            &format!("fit-max-residual-percent:{name}"),
            &format!(
                "Largest calibration residual, {name} channel, % of the highest calibration dose"
            ),
            qualities[k].max_percent_of_top,
            "%",
            levels,
        ));
    }
    for (k, name) in CHANNELS.iter().enumerate() {
        metrics.push(crate::info(
            &format!("fit-rms-gy:{name}"),
            &format!("RMS calibration residual, {name} channel"),
            qualities[k].rms_dose_gy,
            "Gy",
        ));
    }
    let d_min = doses.iter().copied().fold(f64::INFINITY, f64::min);
    let d_max = doses.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    let mut rows = Vec::new();
    for (i, p) in points.iter().enumerate() {
        let mut row = vec![p.label.clone(), fixed(p.dose_gy, 3)];
        for k in 0..3 {
            row.push(format!(
                "{} ± {}",
                fixed(p.value[k], 4),
                fixed(p.spread[k], 4)
            ));
        }
        for q in &qualities {
            let e = q.dose_residuals[i];
            row.push(if p.dose_gy > 0.05 * d_max {
                format!("{} ({} %)", fixed(e, 3), fixed(100.0 * e / p.dose_gy, 2))
            } else {
                fixed(e, 3)
            });
        }
        row.push(p.pixels.to_string());
        rows.push(row);
    }
    let parameter_rows = CHANNELS
        .iter()
        .zip(&responses)
        .zip(&qualities)
        .map(|((name, r), q)| {
            vec![
                (*name).to_string(),
                format!("{:.6}", r.a),
                format!("{:.6}", r.b),
                format!("{:.6}", r.c),
                fixed(q.rms_dose_gy, 4),
                fixed(q.max_percent_of_top, 2),
            ]
        })
        .collect();
    let mut notes = vec![
        format!(
            "Film lot {}; calibration scan `{}` (SHA-256 {}).",
            c.lot, c.scan.source, c.scan_sha256
        ),
        "Response per channel X(D) = a + b / (D - c), X the scanner value / 65535, fitted by least squares in X (c profiled, a and b linear). Residuals read each piece's mean value back through the fitted inverse.".into(),
        format!(
            "Calibrated range {} to {} Gy: film doses beyond it are flagged and excluded, never extrapolated.",
            fixed(d_min, 3),
            fixed(d_max, 3)
        ),
    ];
    if points.len() < 8 {
        notes.push(format!(
            "Only {} pieces: AAPM TG-235 recommends 8 to 12 from 0 to about 1.2 times the highest dose to be measured (value from memory).",
            points.len()
        ));
    }
    if !doses.contains(&0.0) {
        notes.push(
            "No unexposed (0 Gy) piece: films measured with this calibration cannot use the unexposed-film correction.".into(),
        );
    }
    let calibration = FilmCalibration {
        id: c.id.clone(),
        lot: c.lot.clone(),
        scan: c.scan.source.clone(),
        scan_sha256: c.scan_sha256.clone(),
        responses,
        points,
        dose_range_gy: [d_min, d_max],
    };
    Ok(AnalysisOutput {
        metrics,
        tables: vec![
            Table {
                title: "Calibration pieces: mean ± SD of the normalised value per channel, and the fitted dose minus the delivered dose (Gy)".into(),
                columns: [
                    "piece", "dose (Gy)", "red", "green", "blue", "red residual",
                    "green residual", "blue residual", "pixels",
                ]
                .map(String::from)
                .to_vec(),
                rows,
            },
            Table {
                title: "Fitted response X(D) = a + b / (D - c)".into(),
                columns: [
                    "channel",
                    "a",
                    "b",
                    "c (Gy)",
                    "RMS residual (Gy)",
                    "largest residual (% of top dose)",
                ]
                    .map(String::from)
                    .to_vec(),
                rows: parameter_rows,
            },
        ],
        figures: vec![calibration_chart(&calibration, None)],
        notes,
        references: references(false),
        status: None,
        derived_measured: None,
        calibration: Some(calibration),
    })
}

/// The calibration curves: each piece's mean value per channel (markers) and the fitted
/// responses (lines), with the dose range of a measured film marked when given.
pub fn calibration_chart(cal: &FilmCalibration, film_range: Option<(f64, f64)>) -> Figure {
    let [d_min, d_max] = cal.dose_range_gy;
    let dense: Vec<f64> = (0..=100)
        .map(|i| d_min + (d_max - d_min) * f64::from(i) / 100.0)
        .collect();
    let mut series = Vec::new();
    for (k, name) in CHANNELS.iter().enumerate() {
        series.push(Series {
            name: format!("{name}, pieces"),
            style: SeriesStyle::Markers,
            x: cal.points.iter().map(|p| p.dose_gy).collect(),
            y: cal.points.iter().map(|p| p.value[k]).collect(),
        });
        series.push(Series {
            name: format!("{name}, fitted"),
            style: SeriesStyle::Line,
            x: dense.clone(),
            y: dense.iter().map(|&d| cal.responses[k].value(d)).collect(),
        });
    }
    Figure::Chart {
        title: format!(
            "Calibration `{}` (lot {}): normalised scanner value against dose",
            cal.id, cal.lot
        ),
        x_label: "dose (Gy)".into(),
        y_label: "scanner value / 65535".into(),
        series,
        bands: Vec::new(),
        spans: film_range
            .map(|(lo, hi)| Span {
                label: "doses on this film".into(),
                from: lo,
                to: hi,
            })
            .into_iter()
            .collect(),
    }
}
