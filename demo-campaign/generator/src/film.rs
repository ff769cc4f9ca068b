//! Radiochromic film scans of the demo, for an invented film lot: 48-bit RGB TIFF images (the
//! `tiff` crate) made by a forward model. Dose becomes each channel's normalised scanner value
//! through a rational response X(D) = a + b / (D - c) (the form Micke, Lewis & Yu use; the
//! parameters are invented), a smooth thickness disturbance scales every channel's optical
//! density alike, the scanner may drift between scanning days, and each value carries 0.3 %
//! noise before it is stored as a 16-bit number.

use std::f64::consts::TAU;

use tiff::encoder::{Rational, TiffEncoder, colortype::RGB16};
use tiff::tags::ResolutionUnit;

use crate::Noise;

/// The invented film lot.
pub const LOT: &str = "FH-2611";
/// Scan resolution, dots per inch, and the pixel pitch it gives (mm).
pub const DPI: u32 = 72;
pub const PIXEL_MM: f64 = 25.4 / DPI as f64;
/// Invented responses (a, b, c) of the red, green and blue channels.
const RESPONSES: [(f64, f64, f64); 3] = [(0.08, 2.4, -3.6), (0.02, 4.8, -7.0), (-0.5, 18.0, -22.0)];
/// Doses of the ten calibration pieces, Gy.
pub const CALIBRATION_DOSES: [f64; 10] = [0.0, 0.2, 0.4, 0.7, 1.0, 1.4, 1.8, 2.2, 2.6, 3.0];
/// Normalised value where there is no film (the scanner's open glass), below saturation.
const NO_FILM: f64 = 0.95;
/// Calibration layout: pieces of this many pixels a side, with this gap and margin.
const PIECE: usize = 36;
const GAP: usize = 8;
/// Region of interest inside each piece: this many pixels trimmed from every side.
const TRIM: usize = 6;

/// A scan being made: width, height and interleaved 16-bit RGB values.
struct Image {
    width: usize,
    height: usize,
    data: Vec<u16>,
}

impl Image {
    fn new(width: usize, height: usize) -> Image {
        Image {
            width,
            height,
            data: vec![0; width * height * 3],
        }
    }

    /// Set pixel (column, row) from normalised values.
    fn set(&mut self, c: usize, r: usize, x: [f64; 3]) {
        let i = (r * self.width + c) * 3;
        for (slot, v) in self.data[i..i + 3].iter_mut().zip(x) {
            *slot = (v.clamp(0.0, 1.0) * 65535.0).round() as u16;
        }
    }

    fn tiff(&self) -> Result<Vec<u8>, String> {
        let mut out = std::io::Cursor::new(Vec::new());
        let mut enc = TiffEncoder::new(&mut out).map_err(|e| e.to_string())?;
        let mut img = enc
            .new_image::<RGB16>(self.width as u32, self.height as u32)
            .map_err(|e| e.to_string())?;
        img.resolution(ResolutionUnit::Inch, Rational { n: DPI, d: 1 });
        img.write_data(&self.data).map_err(|e| e.to_string())?;
        Ok(out.into_inner())
    }
}

/// Normalised values of film with dose `d`, thickness disturbance `delta` and scanner drift
/// `drift` (a factor on every value), with 0.3 % noise.
fn film_values(d: f64, delta: f64, drift: f64, noise: &mut Noise) -> [f64; 3] {
    RESPONSES.map(|(a, b, c)| {
        let x = a + b / (d - c);
        10f64.powf(delta * x.log10()) * drift * (1.0 + noise.normal(0.003))
    })
}

/// The calibration scan: ten pieces in two rows of five on the scanner glass, each pieces'
/// thickness slightly different. Returns the TIFF bytes and each piece's region of interest
/// (first column, first row, last column, last row).
pub fn calibration_scan(noise: &mut Noise) -> Result<(Vec<u8>, Vec<[usize; 4]>), String> {
    let (w, h) = (GAP + 5 * (PIECE + GAP), GAP + 2 * (PIECE + GAP));
    let mut img = Image::new(w, h);
    let mut regions = Vec::new();
    let corner = |i: usize| (GAP + (i % 5) * (PIECE + GAP), GAP + (i / 5) * (PIECE + GAP));
    for (i, _) in CALIBRATION_DOSES.iter().enumerate() {
        let (c0, r0) = corner(i);
        regions.push([
            c0 + TRIM,
            r0 + TRIM,
            c0 + PIECE - 1 - TRIM,
            r0 + PIECE - 1 - TRIM,
        ]);
    }
    for r in 0..h {
        for c in 0..w {
            let piece = (0..CALIBRATION_DOSES.len()).find(|&i| {
                let (c0, r0) = corner(i);
                (c0..c0 + PIECE).contains(&c) && (r0..r0 + PIECE).contains(&r)
            });
            let x = match piece {
                Some(i) => {
                    let delta = 1.0 + 0.004 * (1.7 * i as f64).sin();
                    film_values(CALIBRATION_DOSES[i], delta, 1.0, noise)
                }
                None => [NO_FILM * (1.0 + noise.normal(0.003)); 3],
            };
            img.set(c, r, x);
        }
    }
    Ok((img.tiff()?, regions))
}

/// How a measured film lay on the scanner: its plane origin at scan position `origin_mm`
/// (from the top-left pixel centre), turned by `angle_deg`; image rows run against the plane's
/// second axis (a film face up on the bed, scanned from below).
pub struct OnScanner {
    pub origin_mm: [f64; 2],
    pub angle_deg: f64,
}

impl OnScanner {
    /// Plane position (mm) of scan pixel (column, row).
    pub fn plane(&self, c: f64, r: f64) -> [f64; 2] {
        let (u, v) = (
            c * PIXEL_MM - self.origin_mm[0],
            -(r * PIXEL_MM - self.origin_mm[1]),
        );
        let (s, co) = self.angle_deg.to_radians().sin_cos();
        [co * u - s * v, s * u + co * v]
    }

    /// Scan pixel (column, row) of a plane position (mm).
    pub fn pixel(&self, p: [f64; 2]) -> [f64; 2] {
        let (s, co) = self.angle_deg.to_radians().sin_cos();
        let (u, v) = (co * p[0] + s * p[1], -s * p[0] + co * p[1]);
        [
            (u + self.origin_mm[0]) / PIXEL_MM,
            (-v + self.origin_mm[1]) / PIXEL_MM,
        ]
    }
}

/// A measured film's scan: the film (a square of side `2 half_mm` in its plane) exposed to
/// `dose(x, y)`, an unexposed strip of the same lot beside it (scan columns from
/// `strip[0]` to `strip[1]`, rows `strip[2]` to `strip[3]`), and open glass elsewhere.
pub struct FilmScan<'a> {
    pub width: usize,
    pub height: usize,
    pub place: &'a OnScanner,
    pub half_mm: f64,
    pub strip: [usize; 4],
    /// Scanner drift of the day, a factor on every value.
    pub drift: f64,
}

impl FilmScan<'_> {
    pub fn tiff(
        &self,
        dose: impl Fn(f64, f64) -> f64,
        noise: &mut Noise,
    ) -> Result<Vec<u8>, String> {
        let mut img = Image::new(self.width, self.height);
        let [s0, s1, s2, s3] = self.strip;
        for r in 0..self.height {
            for c in 0..self.width {
                let [x, y] = self.place.plane(c as f64, r as f64);
                // Thickness varies smoothly over the sheet by a few percent.
                let delta =
                    1.0 + 0.025 * (TAU * x / 70.0).sin() * (TAU * y / 90.0).cos() + 0.01 * y / 45.0;
                let v = if x.abs() <= self.half_mm && y.abs() <= self.half_mm {
                    film_values(dose(x, y), delta, self.drift, noise)
                } else if (s0..=s1).contains(&c) && (s2..=s3).contains(&r) {
                    film_values(0.0, 1.0, self.drift, noise)
                } else {
                    [NO_FILM * (1.0 + noise.normal(0.003)); 3]
                };
                img.set(c, r, v);
            }
        }
        img.tiff()
    }
}
