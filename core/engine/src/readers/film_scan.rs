//! Reader for scanned films: TIFF images with three 16-bit colour channels (48-bit RGB), read
//! with the `tiff` crate. Anything else (8-bit colour, grey, palette, alpha, floating point) is
//! refused with what to do, because film dosimetry needs the full 16-bit transmission signal of
//! every channel.

use std::path::Path;

use beamproof_api::film::RgbScan;
use tiff::ColorType;
use tiff::decoder::{Decoder, DecodingResult, Limits};
use tiff::tags::Tag;

use crate::diag::Diagnostic;

/// Largest scan accepted, in pixels (an A4 sheet at 300 dpi is about 8.7 million).
pub const MAX_PIXELS: usize = 40_000_000;

/// How a scanner saves a film, as the refusals tell it.
const SCAN_HELP: &str = "scan the film in transmission mode as 48-bit colour (16 bits per channel) with every colour correction off, and save it as an uncompressed or losslessly compressed TIFF";

/// Read a scan from the bytes of file `path`. `source` is the path as the campaign names it; `pixel_mm` is the campaign's
/// pixel pitch, which must agree with the file's resolution when the file states one (and is
/// needed when it does not).
pub fn read(
    path: &Path,
    bytes: &[u8],
    source: &str,
    pixel_mm: Option<f64>,
) -> Result<RgbScan, Diagnostic> {
    let err = |msg: String, help: &str| Diagnostic::file(path, msg).help(help);
    let mut limits = Limits::default();
    limits.decoding_buffer_size = MAX_PIXELS * 6;
    let mut dec = Decoder::new(std::io::Cursor::new(bytes))
        .map_err(|e| err(format!("not a readable TIFF image: {e}"), SCAN_HELP))?
        .with_limits(limits);
    let colour = dec
        .colortype()
        .map_err(|e| err(format!("cannot read the colour type: {e}"), SCAN_HELP))?;
    match colour {
        ColorType::RGB(16) => {}
        ColorType::RGB(bits) => {
            return Err(err(
                format!("the scan has {bits} bits per channel; film dosimetry needs 16"),
                SCAN_HELP,
            ));
        }
        ColorType::Palette(_) => {
            return Err(err(
                "the scan is a palette (indexed colour) image".into(),
                SCAN_HELP,
            ));
        }
        other => {
            return Err(err(
                format!("the scan is a {other:?} image, not three-channel colour"),
                SCAN_HELP,
            ));
        }
    }
    let (w, h) = dec
        .dimensions()
        .map_err(|e| err(format!("cannot read the image size: {e}"), SCAN_HELP))?;
    let (w, h) = (w as usize, h as usize);
    if w < 2 || h < 2 || w.saturating_mul(h) > MAX_PIXELS {
        return Err(err(
            format!("the scan is {w} x {h} pixels; beamproof reads 2 x 2 to {MAX_PIXELS} pixels"),
            "crop the scan to the film, or scan at a lower resolution (72 to 150 dpi is usual)",
        ));
    }
    let planar = dec
        .find_tag_unsigned::<u16>(Tag::PlanarConfiguration)
        .ok()
        .flatten()
        .unwrap_or(1);
    if planar != 1 {
        return Err(err(
            "the scan stores its channels as separate planes".into(),
            "save the TIFF with interleaved (chunky) pixels",
        ));
    }
    let file_pitch = resolution_mm(&mut dec);
    let pixel = match (file_pitch, pixel_mm) {
        (Some(f), Some(c)) => {
            for (axis, v) in ["horizontal", "vertical"].iter().zip(f) {
                if (v / c - 1.0).abs() > 0.01 {
                    return Err(err(
                        format!(
                            "mismatched resolution: the file says {v:.4} mm per pixel ({axis}), the campaign's `pixel-mm` says {c}"
                        ),
                        "remove `pixel-mm` to use the file's resolution, or correct it",
                    ));
                }
            }
            [c, c]
        }
        (Some(f), None) => f,
        (None, Some(c)) => [c, c],
        (None, None) => {
            return Err(err(
                "the scan states no resolution".into(),
                "give the pixel pitch as `pixel-mm:` in the test's `film:` block (25.4 / dpi)",
            ));
        }
    };
    let data = dec
        .read_image()
        .map_err(|e| err(format!("cannot decode the image: {e}"), SCAN_HELP))?;
    let DecodingResult::U16(values) = data else {
        return Err(err(
            "the image samples are not 16-bit unsigned integers".into(),
            SCAN_HELP,
        ));
    };
    if values.len() != w * h * 3 {
        return Err(err(
            format!(
                "the image holds {} samples, {w} x {h} x 3 expected",
                values.len()
            ),
            SCAN_HELP,
        ));
    }
    let mut scan = RgbScan {
        source: source.to_string(),
        width: w,
        height: h,
        pixel_mm: pixel,
        red: Vec::with_capacity(w * h),
        green: Vec::with_capacity(w * h),
        blue: Vec::with_capacity(w * h),
    };
    for px in values.chunks_exact(3) {
        scan.red.push(px[0]);
        scan.green.push(px[1]);
        scan.blue.push(px[2]);
    }
    Ok(scan)
}

/// The file's pixel pitch (horizontal, vertical) in mm, when it states a resolution in inches
/// or centimetres.
fn resolution_mm<R: std::io::Read + std::io::Seek>(dec: &mut Decoder<R>) -> Option<[f64; 2]> {
    let unit = dec
        .find_tag_unsigned::<u16>(Tag::ResolutionUnit)
        .ok()
        .flatten()
        .unwrap_or(2);
    let per = match unit {
        2 => 25.4,
        3 => 10.0,
        _ => return None,
    };
    let mut get = |tag: Tag| -> Option<f64> {
        match dec.find_tag(tag).ok()?? {
            tiff::decoder::ifd::Value::Rational(n, d) if n > 0 && d > 0 => {
                Some(f64::from(n) / f64::from(d))
            }
            _ => None,
        }
    };
    let x = get(Tag::XResolution)?;
    let y = get(Tag::YResolution).unwrap_or(x);
    Some([per / x, per / y])
}
