//! Input of radiochromic film dosimetry: a scanned film (16 bits per colour channel, read by the
//! engine from a TIFF file), the calibration of its film lot, and where the film lay (fiducial
//! marks). The `film` plugin turns a scan into a dose plane; the runner then hands that plane to
//! the test's later analyses (gamma) as the measured distribution. Added in ABI 1.2.

use serde::{Deserialize, Serialize};

/// A scanned film: one 16-bit value per colour channel and pixel, rows from the top of the
/// image, `index = row * width + column`. Larger values mean more light transmitted (less dose).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct RgbScan {
    /// The scan file as written in the campaign (after `{machine}` substitution).
    pub source: String,
    pub width: usize,
    pub height: usize,
    /// Pixel pitch along columns and rows, mm (from the file's resolution or the campaign).
    pub pixel_mm: [f64; 2],
    pub red: Vec<u16>,
    pub green: Vec<u16>,
    pub blue: Vec<u16>,
}

impl RgbScan {
    /// The three channels in the order red, green, blue.
    pub fn channels(&self) -> [&[u16]; 3] {
        [&self.red, &self.green, &self.blue]
    }
}

/// Names of the colour channels, in the order of every `[_; 3]` of this module.
pub const CHANNELS: [&str; 3] = ["red", "green", "blue"];

/// The rational response of one colour channel, X(D) = a + b / (D - c), where X is the scanner
/// value divided by 65535 (Lewis; Micke, Lewis & Yu, Med Phys 2011). Its inverse is
/// D = c + b / (X - a); X falls with dose when b > 0 and c < 0.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct ChannelResponse {
    pub a: f64,
    pub b: f64,
    pub c: f64,
}

impl ChannelResponse {
    /// Normalised scanner value at dose `d` (Gy).
    pub fn value(&self, d: f64) -> f64 {
        self.a + self.b / (d - self.c)
    }

    /// Dose (Gy) at normalised scanner value `x`; NaN where the response has no inverse
    /// (at or beyond its asymptote `a`).
    pub fn dose(&self, x: f64) -> f64 {
        let t = x - self.a;
        if t * self.b <= 0.0 {
            f64::NAN
        } else {
            self.c + self.b / t
        }
    }
}

/// One calibration piece: its delivered dose and the mean normalised value of each channel in
/// its region of interest.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CalibrationPoint {
    /// Label of the piece (from the campaign).
    pub label: String,
    pub dose_gy: f64,
    pub value: [f64; 3],
    /// Standard deviation of the normalised values within the region, per channel.
    pub spread: [f64; 3],
    /// Pixels averaged.
    pub pixels: usize,
}

/// A fitted film calibration, stored as a checksummed file so that later films of the same lot
/// reuse it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FilmCalibration {
    /// Identifier of the calibration (the campaign test id that fitted it).
    pub id: String,
    /// Film lot the pieces were cut from; a film of another lot is refused.
    pub lot: String,
    /// The calibration scan it was fitted from and that file's SHA-256.
    pub scan: String,
    pub scan_sha256: String,
    pub responses: [ChannelResponse; 3],
    pub points: Vec<CalibrationPoint>,
    /// Lowest and highest calibrated dose, Gy: doses outside are flagged, never extrapolated.
    pub dose_range_gy: [f64; 2],
}

/// A fiducial mark: where it is on the scan (pixel column and row, pixel centres at integers)
/// and where it lay in the IEC 61217 film plane (mm).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Fiducial {
    pub label: String,
    pub pixel: [f64; 2],
    pub position_mm: [f64; 2],
}

/// Which IEC 61217 plane the film lay in, and its offset along the third axis (mm).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum FilmPlane {
    /// Transverse to the beam at gantry 0: the film's axes are IEC x and y.
    Xy,
    /// Coronal in the IEC sense: x and z.
    Xz,
    /// Sagittal: y and z.
    Yz,
}

/// One calibration piece on a calibration scan: its label, delivered dose and region of
/// interest in pixels (first column, first row, last column, last row, inclusive).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CalibrationPiece {
    pub label: String,
    pub dose_gy: f64,
    pub region_px: [usize; 4],
}

/// A calibration to fit: the scan of the calibration pieces of one film lot.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CalibrationInput {
    /// Identifier of the calibration (the campaign test id).
    pub id: String,
    pub lot: String,
    pub scan: RgbScan,
    pub scan_sha256: String,
    pub pieces: Vec<CalibrationPiece>,
}

/// What a film test asks of the `film` plugin: fit a calibration, or turn a measured film into
/// a dose plane.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "task", rename_all = "kebab-case")]
pub enum FilmInput {
    Calibrate(Box<CalibrationInput>),
    Measure(Box<FilmMeasurement>),
}

/// A measured film with the calibration of its lot and its placement.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FilmMeasurement {
    pub scan: RgbScan,
    /// Lot of the measured film (checked against the calibration's).
    pub lot: String,
    pub calibration: FilmCalibration,
    pub fiducials: Vec<Fiducial>,
    pub plane: FilmPlane,
    pub plane_offset_mm: f64,
    /// Region of the plane to keep, mm: first-axis minimum and maximum, then second-axis.
    pub region_mm: [f64; 4],
    /// Region of unexposed film on this scan (pixels, as [`CalibrationPiece::region_px`]): its
    /// mean values are scaled, channel by channel, to the calibration's zero-dose piece, which
    /// corrects scanner drift between the calibration scan and this one.
    pub unexposed_region_px: Option<[usize; 4]>,
    /// A scan of a uniformly exposed film across the scanner bed, for the lateral-response
    /// correction: each column's mean value, relative to the mean of the central tenth of the
    /// columns, divides the film's values in that column (first order: one factor per column
    /// and channel, at every dose).
    pub lateral: Option<RgbScan>,
}
