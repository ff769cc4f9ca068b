//! The `film` plugin: radiochromic film dosimetry. A `film-calibration` test fits the rational
//! response of each colour channel to calibration pieces of one film lot; a `plane` test with a
//! scanned film turns the scan into a dose plane (red channel, or the multichannel method of
//! Micke, Lewis & Yu, Med Phys 2011), placed in IEC 61217 coordinates from fiducial marks, and
//! hands the plane to the test's later analyses (gamma) as the measured distribution.

mod calibrate;
pub mod dose;
pub mod fit;
mod measure;
pub mod placement;
#[cfg(test)]
mod tests;

use beamproof_api::film::{CHANNELS, FilmInput, RgbScan};
use beamproof_api::{
    Analysis, AnalysisError, AnalysisInput, AnalysisOutput, Levels, Limits, Metric, MetricSpec,
    ParamSpec, ParamType, PluginManifest, Reference, Status, TestKind,
};

pub use calibrate::FIT_LEVELS;
pub use measure::{FIDUCIAL_LEVELS, OUTSIDE_LEVELS, RANGE_MARGIN};

/// Plugin id used in campaign files.
pub const NAME: &str = "film";

/// The film dosimetry plugin.
#[derive(Debug, Default, Clone, Copy)]
pub struct Film;

impl Analysis for Film {
    fn manifest(&self) -> PluginManifest {
        PluginManifest {
            name: NAME.into(),
            version: env!("CARGO_PKG_VERSION").into(),
            description: "Radiochromic film dosimetry: rational calibration per colour channel, red-channel or multichannel dose (Micke et al 2011), placement from fiducial marks; the dose plane feeds the test's later analyses".into(),
            kinds: vec![TestKind::FilmCalibration, TestKind::Plane],
            judged_metrics: Some(vec![
                MetricSpec::new(
                    "fit-max-residual-percent",
                    &[TestKind::FilmCalibration],
                    "%",
                    "largest calibration residual of each channel, percent of the highest calibration dose",
                ),
                MetricSpec::new(
                    "fiducial-rms-mm",
                    &[TestKind::Plane],
                    "mm",
                    "fiducial residual after placement (root mean square)",
                ),
                MetricSpec::new(
                    "pixels-outside-calibration-percent",
                    &[TestKind::Plane],
                    "%",
                    "pixels with a dose beyond the calibrated range (excluded)",
                ),
                MetricSpec::new(
                    "pixels-unreadable-percent",
                    &[TestKind::Plane],
                    "%",
                    "pixels saturated or whose channels cannot agree (excluded)",
                ),
            ]),
            needs: Vec::new(),
            params: vec![
                ParamSpec {
                    name: "method".into(),
                    kind: ParamType::Choice {
                        choices: vec!["multichannel".into(), "red".into()],
                    },
                    default: Some("multichannel".into()),
                    unit: String::new(),
                    description: "multichannel: dose separated from a disturbance common to the three channels (Micke et al 2011); red: the red channel alone".into(),
                },
                ParamSpec {
                    name: "spacing-mm".into(),
                    kind: ParamType::Number {
                        min: Some(0.2),
                        max: Some(10.0),
                    },
                    default: Some(1.0.into()),
                    unit: "mm".into(),
                    description: "Spacing of the dose plane; each node is the mean of the pixel doses interpolated at points spread evenly over its cell".into(),
                },
            ],
        }
    }

    fn analyse(&self, input: &AnalysisInput) -> Result<AnalysisOutput, AnalysisError> {
        match &input.film {
            Some(FilmInput::Calibrate(c)) => calibrate::calibrate(c, &input.criteria),
            Some(FilmInput::Measure(m)) => {
                let multichannel = input.text("method")? == "multichannel";
                let spacing = input.number("spacing-mm")?;
                measure::measure(m, multichannel, spacing, &input.criteria)
            }
            None => Err(AnalysisError::new(
                "the test carries no film (a film analysis needs a `film:` block in the campaign)",
            )),
        }
    }
}

/// Published methods the plugin follows: for a measured film (placement) or a calibration
/// (the fit).
fn references(measurement: bool) -> Vec<Reference> {
    let mut r = vec![
        Reference {
            key: "Micke 2011".into(),
            citation: "Micke A, Lewis DF, Yu X. Multichannel film dosimetry with nonuniformity correction. Med Phys. 2011;38(5):2523-2534.".into(),
        },
        Reference {
            key: "TG-235".into(),
            citation: "Niroomand-Rad A, Chiu-Tsao ST, Grams MP, et al. Report of AAPM Task Group 235 Radiochromic Film Dosimetry: an update to TG-55. Med Phys. 2020;47(12):5986-6025.".into(),
        },
    ];
    if measurement {
        r.push(Reference {
            key: "Umeyama 1991".into(),
            citation: "Umeyama S. Least-squares estimation of transformation parameters between two point patterns. IEEE Trans Pattern Anal Mach Intell. 1991;13(4):376-380.".into(),
        });
    } else {
        r.push(Reference {
            key: "Golub 1973".into(),
            citation: "Golub GH, Pereyra V. The differentiation of pseudo-inverses and nonlinear least squares problems whose variables separate. SIAM J Numer Anal. 1973;10(2):413-432.".into(),
        });
    }
    r
}

/// A metric judged against levels (magnitude).
fn judged(id: &str, label: &str, value: f64, unit: &str, levels: Levels) -> Metric {
    Metric {
        id: id.into(),
        label: label.into(),
        value,
        unit: unit.into(),
        limits: Some(Limits {
            rule: "|value| <= limit".into(),
            tolerance: levels.tolerance,
            action: levels.action,
        }),
        status: Some(Status::from_deviation(
            value,
            levels.tolerance,
            levels.action,
        )),
        ..Default::default()
    }
}

/// A metric reported without levels.
fn info(id: &str, label: &str, value: f64, unit: &str) -> Metric {
    Metric {
        id: id.into(),
        label: label.into(),
        value,
        unit: unit.into(),
        limits: None,
        status: None,
        ..Default::default()
    }
}

/// Refuse a scan with a channel that holds a single value (an empty or missing channel: a grey
/// image saved as colour, or a failed scan).
fn check_channels(scan: &RgbScan) -> Result<(), AnalysisError> {
    for (name, ch) in CHANNELS.iter().zip(scan.channels()) {
        let first = ch.first().copied().unwrap_or(0);
        if ch.iter().all(|&v| v == first) {
            return Err(AnalysisError::new(format!(
                "`{}`: the {name} channel holds the single value {first} everywhere; scan the film in 48-bit colour, transmission mode",
                scan.source
            )));
        }
    }
    Ok(())
}

/// Mean and standard deviation of the normalised values in a pixel region.
struct RegionStats {
    mean: [f64; 3],
    sd: [f64; 3],
    pixels: usize,
}

/// Largest share of saturated pixels (value 0 or 65535 in any channel) a region may hold.
const SATURATED_LIMIT: f64 = 0.01;

/// Statistics of region `[c0, r0, c1, r1]` (inclusive) of a scan, each value multiplied by
/// `factors` when given. Refuses regions outside the image, empty or upside-down regions and
/// regions with more than 1 % saturated pixels.
fn region_values(
    scan: &RgbScan,
    region: [usize; 4],
    factors: Option<[f64; 3]>,
) -> Result<RegionStats, String> {
    let [c0, r0, c1, r1] = region;
    if c0 > c1 || r0 > r1 {
        return Err(format!(
            "region [{c0}, {r0}, {c1}, {r1}] is empty: write [first column, first row, last column, last row]"
        ));
    }
    if c1 >= scan.width || r1 >= scan.height {
        return Err(format!(
            "region [{c0}, {r0}, {c1}, {r1}] reaches beyond the {} x {} pixel scan",
            scan.width, scan.height
        ));
    }
    let f = factors.unwrap_or([1.0; 3]);
    let mut sum = [0.0; 3];
    let mut sq = [0.0; 3];
    let (mut n, mut saturated) = (0usize, 0usize);
    let channels = scan.channels();
    for r in r0..=r1 {
        for c in c0..=c1 {
            let i = r * scan.width + c;
            let raw = [channels[0][i], channels[1][i], channels[2][i]];
            if raw.iter().any(|&v| v == 0 || v == u16::MAX) {
                saturated += 1;
                continue;
            }
            for k in 0..3 {
                let x = f64::from(raw[k]) / 65535.0 * f[k];
                sum[k] += x;
                sq[k] += x * x;
            }
            n += 1;
        }
    }
    let total = (c1 - c0 + 1) * (r1 - r0 + 1);
    if saturated as f64 > SATURATED_LIMIT * total as f64 || n == 0 {
        return Err(format!(
            "{saturated} of {total} pixels are saturated (0 or 65535 in a channel); rescan without clipping"
        ));
    }
    let nf = n as f64;
    let mean = [0, 1, 2].map(|k| sum[k] / nf);
    let sd = [0, 1, 2].map(|k| {
        if n > 1 {
            ((sq[k] - nf * mean[k] * mean[k]) / (nf - 1.0))
                .max(0.0)
                .sqrt()
        } else {
            0.0
        }
    });
    Ok(RegionStats {
        mean,
        sd,
        pixels: n,
    })
}
