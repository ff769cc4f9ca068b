//! Measurement task: a scanned film to a dose plane in IEC 61217 coordinates.
//!
//! 1. The scan's values are normalised (value / 65535) and, when asked, corrected for scanner
//!    drift (unexposed film on the scan scaled to the calibration's zero-dose piece) and for the
//!    scanner's lateral response (a uniformly exposed film scanned across the bed).
//! 2. The fiducial marks fix rotation, scale, mirror and shift of the film in its plane.
//! 3. Each pixel whose centre falls within the region becomes a dose (red channel or
//!    multichannel); pixels that are saturated, whose channels cannot agree, or whose dose lies
//!    beyond the calibrated range are excluded and counted, never extrapolated.
//! 4. Each node of the output plane is the mean of the pixel doses interpolated bilinearly at
//!    points set symmetrically over its cell (no bias in a dose gradient).

use beamproof_api::film::{FilmMeasurement, FilmPlane, RgbScan};
use beamproof_api::{
    AnalysisError, AnalysisOutput, CriteriaSet, Dataset, DatasetData, DoseUnit, Figure, Grid,
    Levels, PointSet, Table, fixed,
};
use rayon::prelude::*;

use crate::dose::multichannel;
use crate::placement::{self, Placement};
use crate::{check_channels, info, judged, references, region_values};

/// Default levels of the fiducial residual (root mean square, mm; common practice, no source):
/// the marks should agree with the fitted placement within half a millimetre.
pub const FIDUCIAL_LEVELS: Levels = Levels {
    tolerance: 0.5,
    action: 1.0,
};

/// Default levels of the share of excluded pixels, percent (common practice, no source): any
/// excluded pixel is flagged, more than 1 % fails.
pub const OUTSIDE_LEVELS: Levels = Levels {
    tolerance: 0.0,
    action: 1.0,
};

/// Margin around the calibrated dose range, as a fraction of its top dose, within which a
/// pixel's dose is accepted (scanner noise on unexposed film reads slightly below zero; such
/// doses are set to zero).
pub const RANGE_MARGIN: f64 = 0.02;

/// Largest disagreement between the fiducials' scale and the scan's pixel pitch.
const SCALE_LIMIT: f64 = 0.02;

/// Why a pixel gave no dose.
#[derive(Clone, Copy, PartialEq, Eq)]
enum Pixel {
    Dose,
    Unreadable,
    OutsideRange,
}

#[derive(Clone, Copy)]
struct PixelDose {
    kind: Pixel,
    dose: f64,
    disturbance: f64,
    spread: f64,
}

/// Correction factors per column and channel from a uniformly exposed film.
fn lateral_factors(l: &RgbScan, film: &RgbScan) -> Result<Vec<[f64; 3]>, AnalysisError> {
    if l.width != film.width || (l.pixel_mm[0] / film.pixel_mm[0] - 1.0).abs() > 0.01 {
        return Err(AnalysisError::new(format!(
            "lateral-response scan `{}` is {} pixels wide at {} mm, the film `{}` {} pixels at {} mm: scan both with the same width and resolution",
            l.source, l.width, l.pixel_mm[0], film.source, film.width, film.pixel_mm[0]
        )));
    }
    check_channels(l)?;
    let channels = l.channels();
    let mut means = Vec::with_capacity(l.width);
    for c in 0..l.width {
        let (mut s, mut n) = ([0.0; 3], 0usize);
        for r in 0..l.height {
            let i = r * l.width + c;
            let raw = [channels[0][i], channels[1][i], channels[2][i]];
            if raw.iter().any(|&v| v == 0 || v == u16::MAX) {
                continue;
            }
            for k in 0..3 {
                s[k] += f64::from(raw[k]) / 65535.0;
            }
            n += 1;
        }
        if n == 0 {
            return Err(AnalysisError::new(format!(
                "lateral-response scan `{}`: column {c} is saturated from top to bottom",
                l.source
            )));
        }
        means.push(s.map(|v| v / n as f64));
    }
    let w = l.width;
    let (a, b) = (w * 9 / 20, (w * 11 / 20).max(w * 9 / 20 + 1).min(w));
    let mut centre = [0.0; 3];
    for m in &means[a..b] {
        for k in 0..3 {
            centre[k] += m[k] / (b - a) as f64;
        }
    }
    let factors: Vec<[f64; 3]> = means
        .iter()
        .map(|m| [0, 1, 2].map(|k| centre[k] / m[k]))
        .collect();
    if let Some((c, f)) = factors
        .iter()
        .enumerate()
        .find(|(_, f)| f.iter().any(|&v| !(0.8..=1.25).contains(&v)))
    {
        return Err(AnalysisError::new(format!(
            "lateral-response scan `{}`: column {c} differs from the centre by more than 20 % (factors {:.3}, {:.3}, {:.3}); is the film uniformly exposed and does it cover the scanned width?",
            l.source, f[0], f[1], f[2]
        )));
    }
    Ok(factors)
}

/// Names of the plane's axes.
fn axis_names(plane: FilmPlane) -> [&'static str; 2] {
    match plane {
        FilmPlane::Xy => ["x", "y"],
        FilmPlane::Xz => ["x", "z"],
        FilmPlane::Yz => ["y", "z"],
    }
}

fn axis(from: f64, to: f64, step: f64) -> Vec<f64> {
    let n = ((to - from) / step + 1e-9).floor() as usize;
    (0..=n).map(|i| from + i as f64 * step).collect()
}

/// Scale factors per channel from unexposed film on this scan against the calibration's
/// zero-dose piece (scanner drift between the calibration scan and this one); 1 without it.
fn unexposed_factors(
    m: &FilmMeasurement,
    notes: &mut Vec<String>,
) -> Result<[f64; 3], AnalysisError> {
    let Some(region) = m.unexposed_region_px else {
        return Ok([1.0; 3]);
    };
    let cal = &m.calibration;
    let zero = cal.points.iter().find(|p| p.dose_gy == 0.0).ok_or_else(|| {
        AnalysisError::new(format!(
            "the unexposed-film correction needs a 0 Gy piece in calibration `{}`; add one or remove `unexposed-px`",
            cal.id
        ))
    })?;
    let stats = region_values(&m.scan, region, None)
        .map_err(|e| AnalysisError::new(format!("unexposed region: {e}")))?;
    let factors = [0, 1, 2].map(|k| zero.value[k] / stats.mean[k]);
    if factors.iter().any(|f| !(0.9..=1.1).contains(f)) {
        return Err(AnalysisError::new(format!(
            "the unexposed film reads more than 10 % away from the calibration's unexposed piece (factors {:.3}, {:.3}, {:.3}): another scanner setting or film lot?",
            factors[0], factors[1], factors[2]
        )));
    }
    notes.push(format!(
        "Unexposed-film correction: values scaled by {:.4} (red), {:.4} (green), {:.4} (blue) so that the unexposed region matches the calibration's 0 Gy piece.",
        factors[0], factors[1], factors[2]
    ));
    Ok(factors)
}

/// The film's placement from its fiducials; a scale beyond [`SCALE_LIMIT`] from the scan's
/// pixel pitch is refused as a mismatched resolution.
fn place_film(m: &FilmMeasurement) -> Result<Placement, AnalysisError> {
    let [px, py] = m.scan.pixel_mm;
    let from: Vec<[f64; 2]> = m
        .fiducials
        .iter()
        .map(|f| [f.pixel[0] * px, f.pixel[1] * py])
        .collect();
    let to: Vec<[f64; 2]> = m.fiducials.iter().map(|f| f.position_mm).collect();
    let place = placement::fit(&from, &to).map_err(|e| AnalysisError::new(e.0))?;
    if (place.scale - 1.0).abs() > SCALE_LIMIT {
        return Err(AnalysisError::new(format!(
            "mismatched resolution: the fiducials are {:.1} % {} apart than the scan's pixel pitch ({} x {} mm) says; check the scan resolution (`pixel-mm`) and the fiducial positions",
            100.0 * (place.scale - 1.0).abs(),
            if place.scale > 1.0 {
                "further"
            } else {
                "closer"
            },
            px,
            py
        )));
    }
    Ok(place)
}

/// The dose of every scan pixel in the bounding box of a plane region: columns `c0..` and rows
/// `r0..`, `width` x `height`, row by row.
struct PixelImage {
    c0: usize,
    r0: usize,
    width: usize,
    height: usize,
    pixel_mm: [f64; 2],
    pixels: Vec<PixelDose>,
}

impl PixelImage {
    /// Pixel doses of the scan's pixels that may fall within `bounds` (plane mm: first-axis
    /// minimum and maximum, second-axis minimum and maximum), after the channel `factors` and
    /// the lateral correction; saturated pixels, pixels whose channels cannot agree and doses
    /// beyond the calibrated range (plus [`RANGE_MARGIN`]) are marked, never extrapolated.
    fn new(
        m: &FilmMeasurement,
        place: &Placement,
        [a0, a1, b0, b1]: [f64; 4],
        factors: [f64; 3],
        lateral: Option<&[[f64; 3]]>,
        use_multichannel: bool,
    ) -> PixelImage {
        let scan = &m.scan;
        let [px, py] = scan.pixel_mm;
        let corners = [[a0, b0], [a1, b0], [a0, b1], [a1, b1]].map(|q| place.to_scan(q));
        let lo = |k: usize, pitch: f64, n: usize| {
            let v = corners.iter().map(|c| c[k]).fold(f64::INFINITY, f64::min) / pitch;
            (v.floor().max(0.0) as usize).min(n.saturating_sub(1))
        };
        let hi = |k: usize, pitch: f64, n: usize| {
            let v = corners
                .iter()
                .map(|c| c[k])
                .fold(f64::NEG_INFINITY, f64::max)
                / pitch;
            (v.ceil().max(0.0) as usize).min(n.saturating_sub(1))
        };
        let (c0, c1) = (lo(0, px, scan.width), hi(0, px, scan.width));
        let (r0, r1) = (lo(1, py, scan.height), hi(1, py, scan.height));
        let responses = m.calibration.responses;
        let [d_lo, d_hi] = m.calibration.dose_range_gy;
        let margin = RANGE_MARGIN * d_hi;
        let channels = scan.channels();
        let pixels: Vec<PixelDose> = (r0..=r1)
            .into_par_iter()
            .flat_map_iter(|r| {
                (c0..=c1).map(move |c| {
                    let i = r * scan.width + c;
                    let raw = [channels[0][i], channels[1][i], channels[2][i]];
                    let unreadable = PixelDose {
                        kind: Pixel::Unreadable,
                        dose: f64::NAN,
                        disturbance: f64::NAN,
                        spread: f64::NAN,
                    };
                    if raw.iter().any(|&v| v == 0 || v == u16::MAX) {
                        return unreadable;
                    }
                    let lat = lateral.map_or([1.0; 3], |l| l[c]);
                    let x = [0, 1, 2].map(|k| f64::from(raw[k]) / 65535.0 * factors[k] * lat[k]);
                    let (dose, disturbance, spread) = if use_multichannel {
                        match multichannel(x, &responses) {
                            Some(mc) => (mc.dose, mc.disturbance, mc.spread),
                            None => return unreadable,
                        }
                    } else {
                        (responses[0].dose(x[0]), 1.0, 0.0)
                    };
                    if !dose.is_finite() || dose < d_lo - margin || dose > d_hi + margin {
                        return PixelDose {
                            kind: Pixel::OutsideRange,
                            ..unreadable
                        };
                    }
                    PixelDose {
                        kind: Pixel::Dose,
                        dose: dose.max(0.0),
                        disturbance,
                        spread,
                    }
                })
            })
            .collect();
        PixelImage {
            c0,
            r0,
            width: c1 - c0 + 1,
            height: r1 - r0 + 1,
            pixel_mm: scan.pixel_mm,
            pixels,
        }
    }

    /// Dose, disturbance and channel spread interpolated bilinearly at plane position `q`:
    /// `None` outside the image, `Some(None)` when a neighbouring pixel has no dose.
    fn sample(&self, place: &Placement, q: [f64; 2]) -> Option<Option<[f64; 3]>> {
        let (width, height) = (self.width, self.height);
        let p = place.to_scan(q);
        let fc = p[0] / self.pixel_mm[0] - self.c0 as f64;
        let fr = p[1] / self.pixel_mm[1] - self.r0 as f64;
        if width < 2 || height < 2 || !(fc >= 0.0 && fr >= 0.0) {
            return None;
        }
        if fc > (width - 1) as f64 || fr > (height - 1) as f64 {
            return None;
        }
        let (i, j) = ((fc as usize).min(width - 2), (fr as usize).min(height - 2));
        let (t, u) = (fc - i as f64, fr - j as f64);
        let px = &self.pixels;
        let corners = [
            (&px[j * width + i], (1.0 - t) * (1.0 - u)),
            (&px[j * width + i + 1], t * (1.0 - u)),
            (&px[(j + 1) * width + i], (1.0 - t) * u),
            (&px[(j + 1) * width + i + 1], t * u),
        ];
        if corners.iter().any(|(p, _)| p.kind != Pixel::Dose) {
            return Some(None);
        }
        let mut v = [0.0; 3];
        for (p, w) in corners {
            v[0] += w * p.dose;
            v[1] += w * p.disturbance;
            v[2] += w * p.spread;
        }
        Some(Some(v))
    }
}

/// Turn a measured film into a dose plane.
pub fn measure(
    m: &FilmMeasurement,
    use_multichannel: bool,
    spacing: f64,
    criteria: &CriteriaSet,
) -> Result<AnalysisOutput, AnalysisError> {
    let cal = &m.calibration;
    if m.lot != cal.lot {
        return Err(AnalysisError::new(format!(
            "the film is from lot `{}` but calibration `{}` was made for lot `{}`: calibrate this lot, or name the calibration of lot `{}`",
            m.lot, cal.id, cal.lot, m.lot
        )));
    }
    let scan = &m.scan;
    check_channels(scan)?;
    let mut notes = Vec::new();
    let factors = unexposed_factors(m, &mut notes)?;
    let lateral = match &m.lateral {
        Some(l) => {
            let f = lateral_factors(l, scan)?;
            let worst = f
                .iter()
                .flat_map(|v| v.iter())
                .map(|v| (v - 1.0).abs())
                .fold(0.0, f64::max);
            notes.push(format!(
                "Scanner lateral-response correction from `{}`: one factor per column and channel (largest {:.2} %), applied at every dose (first order).",
                l.source,
                100.0 * worst
            ));
            Some(f)
        }
        None => None,
    };
    let [px, py] = scan.pixel_mm;
    let place = place_film(m)?;
    // Output nodes.
    let [a0, a1, b0, b1] = m.region_mm;
    let (ua, ub) = (axis(a0, a1, spacing), axis(b0, b1, spacing));
    if ua.len() < 2 || ub.len() < 2 {
        return Err(AnalysisError::new(format!(
            "region-mm [{a0}, {a1}, {b0}, {b1}] holds fewer than two nodes per axis at {spacing} mm spacing"
        )));
    }
    let (na, nb) = (ua.len(), ub.len());
    let h = spacing / 2.0;
    let image = PixelImage::new(
        m,
        &place,
        [a0 - h, a1 + h, b0 - h, b1 + h],
        factors,
        lateral.as_deref(),
        use_multichannel,
    );
    let (c0, r0, width) = (image.c0, image.r0, image.width);
    let pixels = &image.pixels;
    // Share of excluded pixels among the pixels within the region (for the metrics).
    let nodes = na * nb;
    let (mut n_in, mut n_outside, mut n_unreadable) = (0usize, 0usize, 0usize);
    for (k, p) in pixels.iter().enumerate() {
        let (r, c) = (r0 + k / width, c0 + k % width);
        let q = place.to_plane([c as f64 * px, r as f64 * py]);
        if q[0] < a0 - h || q[0] > a1 + h || q[1] < b0 - h || q[1] > b1 + h {
            continue;
        }
        n_in += 1;
        match p.kind {
            Pixel::Dose => {}
            Pixel::OutsideRange => n_outside += 1,
            Pixel::Unreadable => n_unreadable += 1,
        }
    }
    // Each node is the mean of the pixel doses interpolated bilinearly at `per` x `per` points
    // set symmetrically over the node's cell: their centroid is the node itself, so a dose
    // gradient adds no bias, and the points average about as many pixels as the cell holds.
    let per = ((spacing / px.min(py)).round() as usize).max(1);
    let offsets: Vec<f64> = (0..per)
        .map(|k| ((k as f64 + 0.5) / per as f64 - 0.5) * spacing)
        .collect();
    let node_values: Vec<Result<Option<[f64; 3]>, usize>> = (0..nodes)
        .into_par_iter()
        .map(|n| {
            let (i, j) = (n % na, n / na);
            let (mut sum, mut count) = ([0.0; 3], 0usize);
            for dy in &offsets {
                for dx in &offsets {
                    match image.sample(&place, [ua[i] + dx, ub[j] + dy]) {
                        None => return Err(n),
                        Some(Some(v)) => {
                            for k in 0..3 {
                                sum[k] += v[k];
                            }
                            count += 1;
                        }
                        Some(None) => {}
                    }
                }
            }
            Ok((count > 0).then(|| sum.map(|s| s / count as f64)))
        })
        .collect();
    if let Some(Err(node)) = node_values.iter().find(|v| v.is_err()) {
        return Err(AnalysisError::new(format!(
            "region-mm reaches beyond the scanned film near ({}, {}) mm; shrink `region-mm` to the film",
            fixed(ua[node % na], 1),
            fixed(ub[node / na], 1)
        )));
    }
    let node_values: Vec<Option<[f64; 3]>> = node_values.into_iter().flatten().collect();
    let dose: Vec<Option<f64>> = node_values.iter().map(|v| v.map(|v| v[0])).collect();
    let disturbance: Vec<Option<f64>> = node_values.iter().map(|v| v.map(|v| v[1])).collect();
    let disturbance_percent: Vec<Option<f64>> = disturbance
        .iter()
        .map(|d| d.map(|v| 100.0 * (v - 1.0)))
        .collect();
    let excluded_nodes = dose.iter().filter(|d| d.is_none()).count();
    let names = axis_names(m.plane);
    let position = |i: usize, j: usize| -> [f64; 3] {
        let (a, b, o) = (ua[i], ub[j], m.plane_offset_mm);
        match m.plane {
            FilmPlane::Xy => [a, b, o],
            FilmPlane::Xz => [a, o, b],
            FilmPlane::Yz => [o, a, b],
        }
    };
    let data = if excluded_nodes == 0 {
        let values: Vec<f64> = dose.iter().map(|d| d.unwrap_or(0.0)).collect();
        let single = vec![m.plane_offset_mm];
        let (x_mm, y_mm, z_mm) = match m.plane {
            FilmPlane::Xy => (ua.clone(), ub.clone(), single),
            FilmPlane::Xz => (ua.clone(), single, ub.clone()),
            FilmPlane::Yz => (single, ua.clone(), ub.clone()),
        };
        DatasetData::Grid(Grid {
            x_mm,
            y_mm,
            z_mm,
            dose: values,
        })
    } else {
        notes.push(format!(
            "{excluded_nodes} of {nodes} plane nodes hold no readable pixel and are left out: the film is handed on as a point set of the {} other nodes.",
            nodes - excluded_nodes
        ));
        let mut set = PointSet {
            labels: Vec::new(),
            x_mm: Vec::new(),
            y_mm: Vec::new(),
            z_mm: Vec::new(),
            dose: Vec::new(),
        };
        for j in 0..nb {
            for i in 0..na {
                if let Some(d) = dose[j * na + i] {
                    let p = position(i, j);
                    set.labels.push(String::new());
                    set.x_mm.push(p[0]);
                    set.y_mm.push(p[1]);
                    set.z_mm.push(p[2]);
                    set.dose.push(d);
                }
            }
        }
        DatasetData::Points(set)
    };
    let share = |n: usize| 100.0 * n as f64 / n_in.max(1) as f64;
    let level = |key: &str, default: Levels| criteria.metrics.get(key).copied().unwrap_or(default);
    let mut metrics = vec![
        judged(
            "fiducial-rms-mm",
            "Fiducial residual (root mean square)",
            place.rms_residual_mm,
            "mm",
            level("fiducial-rms-mm", FIDUCIAL_LEVELS),
        ),
        judged(
            "pixels-outside-calibration-percent",
            "Pixels with a dose beyond the calibrated range (excluded)",
            share(n_outside),
            "%",
            level("pixels-outside-calibration-percent", OUTSIDE_LEVELS),
        ),
        judged(
            "pixels-unreadable-percent",
            "Pixels saturated or whose channels cannot agree (excluded)",
            share(n_unreadable),
            "%",
            level("pixels-unreadable-percent", OUTSIDE_LEVELS),
        ),
        info(
            "dose-max-gy",
            "Highest node dose",
            dose.iter().flatten().copied().fold(0.0, f64::max),
            "Gy",
        ),
        info(
            "rotation-deg",
            "Film rotation in its plane",
            place.angle_rad.to_degrees(),
            "deg",
        ),
        info(
            "scale",
            "Fiducial scale / scan pixel pitch",
            place.scale,
            "",
        ),
    ];
    let d_max = dose.iter().flatten().copied().fold(0.0, f64::max);
    if use_multichannel {
        let (mut s, mut n) = (0.0, 0usize);
        for v in node_values.iter().flatten() {
            if v[0] > 0.2 * d_max {
                s += 100.0 * v[2] / v[0];
                n += 1;
            }
        }
        let dist: Vec<f64> = disturbance.iter().flatten().copied().collect();
        let mean = dist.iter().sum::<f64>() / dist.len().max(1) as f64;
        let sd = (dist.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / dist.len().max(1) as f64)
            .sqrt();
        metrics.push(info(
            "channel-spread-percent",
            "Channel dose spread after the disturbance is removed (mean, nodes above 20 % of the maximum)",
            if n > 0 { s / n as f64 } else { f64::NAN },
            "%",
        ));
        metrics.push(info(
            "disturbance-mean",
            "Disturbance (1 = calibration film), mean",
            mean,
            "",
        ));
        metrics.push(info(
            "disturbance-sd",
            "Disturbance, standard deviation over the plane",
            sd,
            "",
        ));
    }
    let fiducial_rows = m
        .fiducials
        .iter()
        .map(|f| {
            let q = place.to_plane([f.pixel[0] * px, f.pixel[1] * py]);
            let r = ((q[0] - f.position_mm[0]).powi(2) + (q[1] - f.position_mm[1]).powi(2)).sqrt();
            vec![
                f.label.clone(),
                format!("{}, {}", fixed(f.pixel[0], 1), fixed(f.pixel[1], 1)),
                format!(
                    "{}, {}",
                    fixed(f.position_mm[0], 2),
                    fixed(f.position_mm[1], 2)
                ),
                format!("{}, {}", fixed(q[0], 2), fixed(q[1], 2)),
                fixed(r, 2),
            ]
        })
        .collect();
    notes.insert(
        0,
        if use_multichannel {
            "Dose by the multichannel method (Micke et al 2011): per pixel, the disturbance common to the three channels' optical densities is chosen so that the channel doses agree best, and the dose is their mean.".to_string()
        } else {
            "Dose from the red channel alone, through the calibration's inverse response.".to_string()
        },
    );
    notes.push(format!(
        "Calibration `{}` (lot {}, {} to {} Gy); doses more than {} % of the top dose beyond that range are excluded, never extrapolated; doses below zero within that margin are set to zero.",
        cal.id,
        cal.lot,
        fixed(cal.dose_range_gy[0], 2),
        fixed(cal.dose_range_gy[1], 2),
        fixed(100.0 * RANGE_MARGIN, 0)
    ));
    notes.push(format!(
        "Placement: {} fiducial marks, rotation {} deg, {}; each plane node ({spacing} mm) is the mean of the pixel doses interpolated at {} points spread evenly over its cell (about {} pixels).",
        m.fiducials.len(),
        fixed(place.angle_rad.to_degrees(), 2),
        if place.mirrored {
            "image rows running against the plane's second axis"
        } else {
            "image rows running along the plane's second axis"
        },
        per * per,
        fixed(n_in as f64 / nodes as f64, 1)
    ));
    let d_min = dose.iter().flatten().copied().fold(f64::INFINITY, f64::min);
    let mut figures = vec![Figure::Map {
        title: "Film dose".into(),
        quantity: "dose".into(),
        unit: "Gy".into(),
        x_label: format!("IEC {} (mm)", names[0]),
        y_label: format!("IEC {} (mm)", names[1]),
        x_mm: ua.clone(),
        y_mm: ub.clone(),
        values: dose,
    }];
    figures.push(crate::calibrate::calibration_chart(
        cal,
        (d_min <= d_max).then_some((d_min, d_max)),
    ));
    if use_multichannel {
        figures.push(Figure::Map {
            title: "Disturbance removed by the multichannel method: optical density relative to the calibration film, minus 1".into(),
            quantity: "disturbance".into(),
            unit: "%".into(),
            x_label: format!("IEC {} (mm)", names[0]),
            y_label: format!("IEC {} (mm)", names[1]),
            x_mm: ua,
            y_mm: ub,
            values: disturbance_percent,
        });
    }
    Ok(AnalysisOutput {
        metrics,
        tables: vec![Table {
            title: format!(
                "Fiducial marks: scan pixel, given position, fitted position in the {}{}-plane, residual (mm)",
                names[0], names[1]
            ),
            columns: [
                "mark",
                "pixel",
                "given (mm)",
                "fitted (mm)",
                "residual (mm)",
            ]
            .map(String::from)
            .to_vec(),
            rows: fiducial_rows,
        }],
        figures,
        notes,
        references: references(true),
        status: None,
        derived_measured: Some(Dataset {
            source: scan.source.clone(),
            unit: DoseUnit::Gy,
            data,
        }),
        calibration: None,
    })
}
