//! The `film:` block of a campaign test: a calibration scan with its pieces (kind
//! `film-calibration`), or a measured film with its calibration and fiducial marks (kind
//! `plane`). Format in `docs/campaign.md`.

use beamproof_api::TestKind;
use beamproof_api::film::{Fiducial, FilmPlane};

use crate::campaign::{Decoder, InputSpec, Pos};
use crate::yaml::Node;

/// Keys of a test's `film:` block.
pub const FILM_KEYS: &[&str] = &[
    "scan",
    "lot",
    "pixel-mm",
    "pieces",
    "calibration",
    "calibration-file",
    "fiducials",
    "plane",
    "plane-offset-mm",
    "region-mm",
    "unexposed-px",
    "lateral-scan",
];
/// Keys of a calibration piece.
pub const PIECE_KEYS: &[&str] = &["label", "dose-gy", "region-px"];
/// Keys of a fiducial mark.
pub const FIDUCIAL_KEYS: &[&str] = &["label", "pixel", "position-mm"];
/// Keys that only a measured film takes: those of [`FILM_KEYS`] after `pieces`.
const MEASURE_ONLY: &[&str] = FILM_KEYS.split_at(4).1;

/// A calibration piece as written.
#[derive(Debug, Clone, PartialEq)]
pub struct PieceSpec {
    pub label: String,
    pub dose_gy: f64,
    pub region_px: [usize; 4],
    pub pos: Pos,
}

/// A test's `film:` block.
#[derive(Debug, Clone, PartialEq)]
pub struct FilmSpec {
    /// The scan, possibly holding `{machine}`.
    pub scan: InputSpec,
    pub lot: String,
    /// Pixel pitch, mm, when the campaign states it (else the file's resolution).
    pub pixel_mm: Option<f64>,
    /// Calibration pieces (`film-calibration` tests).
    pub pieces: Vec<PieceSpec>,
    /// The `film-calibration` test whose calibration this film uses.
    pub calibration: Option<(String, Pos)>,
    /// Or a calibration file written by an earlier run.
    pub calibration_file: Option<InputSpec>,
    pub fiducials: Vec<Fiducial>,
    pub plane: FilmPlane,
    pub plane_offset_mm: f64,
    pub region_mm: Option<[f64; 4]>,
    pub unexposed_px: Option<[usize; 4]>,
    pub lateral_scan: Option<InputSpec>,
    pub pos: Pos,
}

impl Decoder<'_> {
    /// Four whole pixel indices.
    fn pixel_region(&mut self, n: &Node, what: &str) -> Option<[usize; 4]> {
        let v = self.numbers::<4>(
            n,
            what,
            0.0,
            1e6,
            "pixels",
            "write `[first column, first row, last column, last row]`, counted from 0 at the top-left pixel",
        )?;
        if v.iter().any(|x| x.fract() != 0.0) {
            self.report(
                n,
                format!("{what} must hold whole pixel numbers"),
                "write pixel indices without decimals",
            );
            return None;
        }
        if v[0] > v[2] || v[1] > v[3] {
            self.report(
                n,
                format!("{what} is empty: the last column or row comes before the first"),
                "write `[first column, first row, last column, last row]`",
            );
            return None;
        }
        Some(v.map(|x| x as usize))
    }

    fn piece(&mut self, n: &Node) -> Option<PieceSpec> {
        let f = self.fields(n, "a calibration piece", PIECE_KEYS)?;
        let label = self.req_string(&f, "label", "add `label:` naming the piece");
        let dose = self.req_number(&f, "dose-gy", 0.0, 100.0, "Gy");
        let region = self
            .required(
                &f,
                "region-px",
                "add `region-px: [first column, first row, last column, last row]`",
            )
            .and_then(|r| self.pixel_region(r, "`region-px`"));
        Some(PieceSpec {
            label: label?,
            dose_gy: dose?,
            region_px: region?,
            pos: Pos::of(n),
        })
    }

    fn fiducial(&mut self, n: &Node) -> Option<Fiducial> {
        let f = self.fields(n, "a fiducial mark", FIDUCIAL_KEYS)?;
        let label = self.req_string(&f, "label", "add `label:` naming the mark");
        let pixel = self
            .required(
                &f,
                "pixel",
                "add `pixel: [column, row]`, the mark's centre on the scan",
            )
            .and_then(|p| {
                self.numbers::<2>(
                    p,
                    "`pixel`",
                    -1.0,
                    1e6,
                    "pixels",
                    "write `[column, row]` from 0 at the top-left pixel centre; fractions allowed",
                )
            });
        let position = self
            .required(
                &f,
                "position-mm",
                "add `position-mm: [a, b]`, where the mark lay in the film plane",
            )
            .and_then(|p| {
                self.numbers::<2>(
                    p,
                    "`position-mm`",
                    -1000.0,
                    1000.0,
                    "mm",
                    "write `[first axis, second axis]` of the film plane in IEC 61217 mm",
                )
            });
        Some(Fiducial {
            label: label?,
            pixel: pixel?,
            position_mm: position?,
        })
    }

    /// Decode a `film:` block of a test of `kind`.
    pub(crate) fn film(&mut self, n: &Node, kind: Option<TestKind>) -> Option<FilmSpec> {
        let f = self.fields(n, "`film`", FILM_KEYS)?;
        let scan = self
            .required(
                &f,
                "scan",
                "add `scan:` with the TIFF file of the scanned film",
            )
            .and_then(|s| self.input(s, "`scan`"));
        let lot = self.req_string(
            &f,
            "lot",
            "add `lot:` with the film lot number printed on the box",
        );
        let pixel_mm = f
            .get("pixel-mm")
            .and_then(|p| self.number(p, "`pixel-mm`", 0.01, 5.0, "mm"));
        let mut pieces = Vec::new();
        if let Some(p) = f.get("pieces")
            && let Some(items) = self.list(p, "`pieces`")
        {
            for item in items {
                if let Some(piece) = self.piece(item) {
                    pieces.push(piece);
                }
            }
        }
        let calibration = f
            .get("calibration")
            .and_then(|c| Some((self.string(c, "`calibration`")?, Pos::of(c))));
        let calibration_file = match f.get("calibration-file") {
            Some(c) => Some(self.input(c, "`calibration-file`")?),
            None => None,
        };
        let mut fiducials = Vec::new();
        if let Some(p) = f.get("fiducials")
            && let Some(items) = self.list(p, "`fiducials`")
        {
            for item in items {
                if let Some(m) = self.fiducial(item) {
                    fiducials.push(m);
                }
            }
        }
        let plane = match f.get("plane") {
            Some(p) => match self.string(p, "`plane`")?.as_str() {
                "xy" => FilmPlane::Xy,
                "xz" => FilmPlane::Xz,
                "yz" => FilmPlane::Yz,
                other => {
                    self.report(
                        p,
                        format!("unknown film plane `{other}`"),
                        "one of: xy, xz, yz (IEC 61217 axes of the film's columns and rows)",
                    );
                    return None;
                }
            },
            None => FilmPlane::Xy,
        };
        let plane_offset_mm = f
            .get("plane-offset-mm")
            .map(|p| self.number(p, "`plane-offset-mm`", -1000.0, 1000.0, "mm"))
            .unwrap_or(Some(0.0));
        let region_mm = match f.get("region-mm") {
            Some(r) => {
                let v = self.numbers::<4>(
                    r,
                    "`region-mm`",
                    -1000.0,
                    1000.0,
                    "mm",
                    "write `[first-axis min, first-axis max, second-axis min, second-axis max]`",
                )?;
                if v[0] >= v[1] || v[2] >= v[3] {
                    self.report(
                        r,
                        "`region-mm` is empty: each maximum must exceed its minimum",
                        "write `[first-axis min, first-axis max, second-axis min, second-axis max]`",
                    );
                    return None;
                }
                Some(v)
            }
            None => None,
        };
        let unexposed_px = match f.get("unexposed-px") {
            Some(r) => Some(self.pixel_region(r, "`unexposed-px`")?),
            None => None,
        };
        let lateral_scan = match f.get("lateral-scan") {
            Some(c) => Some(self.input(c, "`lateral-scan`")?),
            None => None,
        };
        match kind {
            Some(TestKind::FilmCalibration) => {
                if pieces.is_empty() && f.get("pieces").is_none() {
                    self.report(
                        n,
                        "a film-calibration test needs `pieces:`",
                        "list each calibration piece with `label`, `dose-gy` and `region-px`",
                    );
                }
                for key in MEASURE_ONLY {
                    if let Some(k) = f.get(key) {
                        self.report(
                            k,
                            format!("`{key}` belongs to measured films, not to a calibration"),
                            "remove it, or make this a `plane` test",
                        );
                    }
                }
            }
            Some(TestKind::Plane) => {
                if let Some(p) = f.get("pieces") {
                    self.report(
                        p,
                        "`pieces` belongs to film-calibration tests",
                        "move the pieces to a test of kind `film-calibration`",
                    );
                }
                if calibration.is_some() == f.get("calibration-file").is_some() {
                    self.report(
                        n,
                        "a measured film needs exactly one of `calibration` and `calibration-file`",
                        "name the film-calibration test of its lot, or a calibration file written by an earlier run (`calibrations/ID.json` in its run folder)",
                    );
                }
                if f.get("fiducials").is_none() {
                    self.report(
                        n,
                        "a measured film needs `fiducials:`",
                        "list at least three marks with `label`, `pixel` and `position-mm`",
                    );
                } else if fiducials.len() < 3 {
                    self.report(
                        n,
                        format!("{} fiducial marks; at least three are needed", fiducials.len()),
                        "mark three or more points, not on one line, on the film before it is irradiated",
                    );
                }
                if f.get("region-mm").is_none() {
                    self.report(
                        n,
                        "a measured film needs `region-mm:`",
                        "give the part of the plane to analyse: `[first-axis min, max, second-axis min, max]` in mm",
                    );
                }
            }
            _ => {}
        }
        Some(FilmSpec {
            scan: scan?,
            lot: lot?,
            pixel_mm,
            pieces,
            calibration,
            calibration_file,
            fiducials,
            plane,
            plane_offset_mm: plane_offset_mm?,
            region_mm,
            unexposed_px,
            lateral_scan,
            pos: Pos::of(n),
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn only_the_measured_film_keys_are_refused_in_a_calibration() {
        // The keys shared by both kinds of film test come first in FILM_KEYS (format rule of
        // docs/campaign.md, no outside source).
        assert_eq!(MEASURE_ONLY.first(), Some(&"calibration"));
        for shared in ["scan", "lot", "pixel-mm", "pieces"] {
            assert!(!MEASURE_ONLY.contains(&shared), "{shared}");
        }
        assert_eq!(MEASURE_ONLY.len() + 4, FILM_KEYS.len());
    }
}
