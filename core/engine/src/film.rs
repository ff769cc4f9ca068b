//! Film dosimetry in the engine: a test's film read and checked for a run (scans, calibration
//! source), and the files a run writes: the calibration file (JSON holding the fitted
//! calibration and the SHA-256 of its content, so that an edited file is refused when a later
//! campaign reuses it) and the measured plane derived from a film, in the project's data CSV
//! format (`docs/data-csv.md`).

use std::collections::BTreeMap;
use std::fmt::Write as _;

use beamproof_api::film::{
    CalibrationInput, CalibrationPiece, FilmCalibration, FilmMeasurement, RgbScan,
};
use beamproof_api::{DatasetData, DoseUnit, TestKind};
use serde::{Deserialize, Serialize};

use crate::campaign::{Campaign, InputSpec, Machine, Pos, TestSpec};
use crate::campaign_film::FilmSpec;
use crate::checksum::sha256_hex;
use crate::diag::Diagnostic;
use crate::input_store::InputStore;
use crate::prepare::input_bytes;
use crate::readers::film_scan;

/// Format tag of a calibration file.
pub const CALIBRATION_FORMAT: &str = "beamproof-film-calibration/1";

#[derive(Serialize, Deserialize)]
struct CalibrationFile {
    format: String,
    /// SHA-256 of the compact JSON of `calibration`.
    sha256: String,
    calibration: FilmCalibration,
}

fn content_hash(c: &FilmCalibration) -> String {
    sha256_hex(&serde_json::to_vec(c).unwrap_or_default())
}

/// The bytes of a calibration file (pretty JSON, final newline).
pub fn calibration_bytes(c: &FilmCalibration) -> Vec<u8> {
    let file = CalibrationFile {
        format: CALIBRATION_FORMAT.into(),
        sha256: content_hash(c),
        calibration: c.clone(),
    };
    let mut v = serde_json::to_vec_pretty(&file).unwrap_or_default();
    v.push(b'\n');
    v
}

/// Read a calibration file, refusing another format and any edit of its content.
pub fn read_calibration(bytes: &[u8]) -> Result<FilmCalibration, String> {
    let file: CalibrationFile = serde_json::from_slice(bytes).map_err(|e| {
        format!("not a beamproof film calibration file ({e}); give the `calibrations/ID.json` file of a run folder")
    })?;
    if file.format != CALIBRATION_FORMAT {
        return Err(format!(
            "calibration format `{}` is not `{CALIBRATION_FORMAT}`",
            file.format
        ));
    }
    if content_hash(&file.calibration) != file.sha256 {
        return Err(
            "the calibration's content does not match its checksum: the file was edited after the run that fitted it; use the run folder's original file".into(),
        );
    }
    Ok(file.calibration)
}

/// A derived measured dataset (a plane, or the point set of a plane's readable nodes) as data
/// CSV text. Positions in mm with three decimals, doses with six significant decimals.
pub fn dataset_csv(data: &DatasetData, unit: DoseUnit, description: &str) -> Option<String> {
    let unit = unit.label();
    match data {
        DatasetData::Grid(g) if g.dimensions() == 2 => {
            let (plane, cols, rows, offset) = match (g.x_mm.len(), g.y_mm.len(), g.z_mm.len()) {
                (_, _, 1) => ("xy", &g.x_mm, &g.y_mm, g.z_mm[0]),
                (_, 1, _) => ("xz", &g.x_mm, &g.z_mm, g.y_mm[0]),
                _ => ("yz", &g.y_mm, &g.z_mm, g.x_mm[0]),
            };
            let (c, r) = (&plane[..1], &plane[1..]);
            let mut s = format!(
                "# beamproof-data: 1\n# shape: plane\n# plane: {plane}\n# plane-offset: {offset:.3}\n# dose-unit: {unit}\n# position-unit: mm\n# description: {description}\n{r}\\{c}"
            );
            for v in cols {
                let _ = write!(s, ",{v:.3}");
            }
            s.push('\n');
            // Grid storage has its first non-singleton axis fastest in every plane orientation.
            for (j, v) in rows.iter().enumerate() {
                let _ = write!(s, "{v:.3}");
                for d in &g.dose[j * cols.len()..(j + 1) * cols.len()] {
                    let _ = write!(s, ",{d:.6}");
                }
                s.push('\n');
            }
            Some(s)
        }
        DatasetData::Points(p) => {
            let mut s = format!(
                "# beamproof-data: 1\n# shape: points\n# dose-unit: {unit}\n# position-unit: mm\n# description: {description}\nx,y,z,dose\n"
            );
            for i in 0..p.len() {
                let _ = writeln!(
                    s,
                    "{:.3},{:.3},{:.3},{:.6}",
                    p.x_mm[i], p.y_mm[i], p.z_mm[i], p.dose[i]
                );
            }
            Some(s)
        }
        _ => None,
    }
}

/// Where a measured film's calibration comes from.
#[derive(Debug, Clone, PartialEq)]
pub enum CalibrationSource {
    /// A calibration file written by an earlier run (already read and checked).
    File(Box<FilmCalibration>),
    /// The `film-calibration` test of this campaign with this id, run earlier in the same run.
    Test(String),
}

/// A measured film, ready but for a calibration fitted in the same run.
#[derive(Debug, Clone, PartialEq)]
pub struct MeasurementPlan {
    pub scan: RgbScan,
    pub lot: String,
    pub calibration: CalibrationSource,
    pub fiducials: Vec<beamproof_api::film::Fiducial>,
    pub plane: beamproof_api::film::FilmPlane,
    pub plane_offset_mm: f64,
    pub region_mm: [f64; 4],
    pub unexposed_region_px: Option<[usize; 4]>,
    pub lateral: Option<RgbScan>,
}

impl MeasurementPlan {
    /// The plugin's input with calibration `c`.
    pub fn with_calibration(&self, c: FilmCalibration) -> FilmMeasurement {
        FilmMeasurement {
            scan: self.scan.clone(),
            lot: self.lot.clone(),
            calibration: c,
            fiducials: self.fiducials.clone(),
            plane: self.plane,
            plane_offset_mm: self.plane_offset_mm,
            region_mm: self.region_mm,
            unexposed_region_px: self.unexposed_region_px,
            lateral: self.lateral.clone(),
        }
    }
}

/// What a film test does.
#[derive(Debug, Clone, PartialEq)]
pub enum FilmTask {
    Calibrate(Box<CalibrationInput>),
    Measure(Box<MeasurementPlan>),
}

/// A test's film, read and checked.
#[derive(Debug, Clone, PartialEq)]
pub struct PreparedFilm {
    pub task: FilmTask,
    /// (role, path relative to the campaign folder, SHA-256) of each file the film uses.
    pub files: Vec<(&'static str, String, String)>,
}

/// Read a scan named in the campaign and keep it as an input.
fn read_scan(
    campaign: &Campaign,
    machine: &Machine,
    spec: &InputSpec,
    pixel_mm: Option<f64>,
    files: &mut InputStore,
    diags: &mut Vec<Diagnostic>,
) -> Option<(RgbScan, String, String)> {
    let (rel, path, file) = input_bytes(campaign, machine, spec, files, diags)?;
    match film_scan::read(&path, &file.bytes, &rel, pixel_mm) {
        Ok(s) => Some((s, rel, file.sha256)),
        Err(d) => {
            diags.push(d);
            None
        }
    }
}

/// Check a region of pixels against a scan's size.
fn region_inside(region: [usize; 4], scan: &RgbScan) -> bool {
    region[2] < scan.width && region[3] < scan.height
}

/// Prepare a test's film for one machine. `calibration_lots` maps each `film-calibration` test
/// prepared so far for this machine to its film lot.
pub fn prepare_film(
    campaign: &Campaign,
    machine: &Machine,
    spec: &TestSpec,
    film: &FilmSpec,
    calibration_lots: &BTreeMap<String, String>,
    files: &mut InputStore,
    diags: &mut Vec<Diagnostic>,
) -> Option<PreparedFilm> {
    let at = |pos: Pos, msg: String| Diagnostic::at(&campaign.path, pos.line, pos.column, msg);
    let before = diags.len();
    let (scan, rel, sha) = read_scan(campaign, machine, &film.scan, film.pixel_mm, files, diags)?;
    let mut used = vec![("film scan", rel, sha.clone())];
    let size = format!("{} x {} pixel", scan.width, scan.height);
    let task = if spec.kind == TestKind::FilmCalibration {
        for p in &film.pieces {
            if !region_inside(p.region_px, &scan) {
                diags.push(
                    at(
                        p.pos,
                        format!(
                            "piece `{}`: `region-px` reaches beyond the {size} scan",
                            p.label
                        ),
                    )
                    .help("columns and rows count from 0 at the top-left pixel"),
                );
            }
        }
        FilmTask::Calibrate(Box::new(CalibrationInput {
            id: spec.id.clone(),
            lot: film.lot.clone(),
            scan,
            scan_sha256: sha,
            pieces: film
                .pieces
                .iter()
                .map(|p| CalibrationPiece {
                    label: p.label.clone(),
                    dose_gy: p.dose_gy,
                    region_px: p.region_px,
                })
                .collect(),
        }))
    } else {
        if let Some(u) = film.unexposed_px
            && !region_inside(u, &scan)
        {
            diags.push(
                at(
                    film.pos,
                    format!("`unexposed-px` reaches beyond the {size} scan"),
                )
                .help("columns and rows count from 0 at the top-left pixel"),
            );
        }
        let lateral = match &film.lateral_scan {
            Some(l) => {
                let (s, rel, sha) = read_scan(campaign, machine, l, film.pixel_mm, files, diags)?;
                used.push(("lateral-response scan", rel, sha));
                Some(s)
            }
            None => None,
        };
        let calibration = match (&film.calibration, &film.calibration_file) {
            (Some((id, pos)), _) => match calibration_lots.get(id) {
                Some(lot) if lot != &film.lot => {
                    diags.push(
                        at(*pos, format!("the film is from lot `{}` but calibration `{id}` is of lot `{lot}`", film.lot))
                            .help("a calibration holds for one film lot only: calibrate this lot, or correct `lot`"),
                    );
                    return None;
                }
                Some(_) => CalibrationSource::Test(id.clone()),
                None => {
                    diags.push(
                        at(*pos, format!("calibration `{id}` is not a film-calibration test run before this one for machine `{}`", machine.id))
                            .help("put the film-calibration test earlier in the campaign (and let it apply to this machine), or give `calibration-file`"),
                    );
                    return None;
                }
            },
            (None, Some(cf)) => {
                let (rel, _, file) = input_bytes(campaign, machine, cf, files, diags)?;
                let c = match read_calibration(&file.bytes) {
                    Ok(c) => c,
                    Err(e) => {
                        diags.push(at(cf.pos, format!("calibration file `{rel}`: {e}")));
                        return None;
                    }
                };
                if c.lot != film.lot {
                    diags.push(
                        at(cf.pos, format!("the film is from lot `{}` but calibration file `{rel}` is of lot `{}`", film.lot, c.lot))
                            .help("a calibration holds for one film lot only: calibrate this lot, or correct `lot`"),
                    );
                    return None;
                }
                used.push(("film calibration", rel, file.sha256));
                CalibrationSource::File(Box::new(c))
            }
            // The decoder requires one of the two.
            (None, None) => return None,
        };
        FilmTask::Measure(Box::new(MeasurementPlan {
            scan,
            lot: film.lot.clone(),
            calibration,
            fiducials: film.fiducials.clone(),
            plane: film.plane,
            plane_offset_mm: film.plane_offset_mm,
            region_mm: film.region_mm?,
            unexposed_region_px: film.unexposed_px,
            lateral,
        }))
    };
    (diags.len() == before).then_some(PreparedFilm { task, files: used })
}

#[cfg(test)]
mod tests {
    use super::*;
    use beamproof_api::film::{CalibrationPoint, ChannelResponse};
    use beamproof_api::{Grid, PointSet};

    fn calibration() -> FilmCalibration {
        // Values whose shortest decimal form needs all 17 digits: the file must give back the
        // very same numbers (the checksum covers them, and doses follow from them).
        let r = ChannelResponse {
            a: 0.1 + 0.2,
            b: 7.0 / 3.0,
            c: -std::f64::consts::PI,
        };
        FilmCalibration {
            id: "cal".into(),
            lot: "L1".into(),
            scan: "scan.tif".into(),
            scan_sha256: "00".into(),
            responses: [r, r, r],
            points: vec![CalibrationPoint {
                label: "p0".into(),
                dose_gy: 0.0,
                value: [0.7, 0.8, 0.9],
                spread: [0.001; 3],
                pixels: 100,
            }],
            dose_range_gy: [0.0, 4.0],
        }
    }

    #[test]
    fn a_calibration_file_reads_back_and_an_edit_is_refused() {
        let c = calibration();
        let bytes = calibration_bytes(&c);
        assert_eq!(read_calibration(&bytes), Ok(c));
        let text = String::from_utf8(bytes).expect("utf8");
        let edited = text.replace("\"lot\": \"L1\"", "\"lot\": \"L2\"");
        assert_ne!(edited, text);
        let e = read_calibration(edited.as_bytes()).expect_err("edited");
        assert!(e.contains("was edited"), "{e}");
        let e = read_calibration(b"{}").expect_err("not a calibration");
        assert!(e.contains("not a beamproof film calibration"), "{e}");
    }

    #[test]
    fn derived_planes_and_points_read_back_through_the_data_reader() {
        let g = Grid {
            x_mm: vec![-1.0, 0.0, 1.0],
            y_mm: vec![5.0],
            z_mm: vec![-2.0, 2.0],
            dose: vec![1.0, 2.0, 3.0, 4.0, 5.0, 6.5],
        };
        let text = dataset_csv(&DatasetData::Grid(g.clone()), DoseUnit::Gy, "film").expect("2D");
        let (unit, back) =
            crate::readers::csv_data::read(std::path::Path::new("d.csv"), &text).expect("reads");
        assert_eq!(unit, DoseUnit::Gy);
        assert_eq!(back, DatasetData::Grid(g));
        let p = PointSet {
            labels: vec![String::new(); 2],
            x_mm: vec![1.0, 2.0],
            y_mm: vec![0.0, 0.5],
            z_mm: vec![3.0, 3.0],
            dose: vec![0.25, 1.5],
        };
        let text = dataset_csv(&DatasetData::Points(p.clone()), DoseUnit::Gy, "film").expect("pts");
        let (_, back) =
            crate::readers::csv_data::read(std::path::Path::new("p.csv"), &text).expect("reads");
        assert_eq!(back, DatasetData::Points(p));
    }
}
