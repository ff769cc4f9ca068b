//! The film-scan reader against TIFF files written by numpy and tifffile
//! (`tests/fixtures/film/make_scans.py`): every pixel of the pattern the script wrote, the
//! resolution in inches and centimetres, and a clear refusal of what film dosimetry cannot use.

use std::path::PathBuf;

use beamproof_engine::readers::film_scan::read;

use crate::support::root;

fn fixture(name: &str) -> (PathBuf, Vec<u8>) {
    let p = root().join("tests/fixtures/film").join(name);
    let bytes = std::fs::read(&p).expect("fixture");
    (p, bytes)
}

/// The script's pattern: 1000 * channel + 100 * row + column + 1.
fn pattern(row: usize, col: usize, channel: usize) -> u16 {
    (1000 * channel + 100 * row + col + 1) as u16
}

fn check_pattern(scan: &beamproof_api::film::RgbScan) {
    assert_eq!((scan.width, scan.height), (5, 4));
    for r in 0..4 {
        for c in 0..5 {
            let i = r * 5 + c;
            assert_eq!(scan.red[i], pattern(r, c, 0), "red at row {r}, column {c}");
            assert_eq!(
                scan.green[i],
                pattern(r, c, 1),
                "green at row {r}, column {c}"
            );
            assert_eq!(
                scan.blue[i],
                pattern(r, c, 2),
                "blue at row {r}, column {c}"
            );
        }
    }
}

#[test]
fn a_48_bit_scan_reads_pixel_for_pixel_with_its_resolution() {
    // 72 dots per inch: 25.4 / 72 = 0.352778 mm per pixel (arithmetic).
    let (p, b) = fixture("rgb16-72dpi.tif");
    let scan = read(&p, &b, "scan.tif", None).expect("reads");
    check_pattern(&scan);
    assert!((scan.pixel_mm[0] - 25.4 / 72.0).abs() < 1e-12);
    assert!((scan.pixel_mm[1] - 25.4 / 72.0).abs() < 1e-12);
    assert_eq!(scan.source, "scan.tif");
    // 40 pixels per centimetre is 0.25 mm; deflate compression is lossless.
    let (p, b) = fixture("rgb16-40pcm-deflate.tif");
    let scan = read(&p, &b, "scan.tif", None).expect("reads");
    check_pattern(&scan);
    assert!((scan.pixel_mm[0] - 0.25).abs() < 1e-12);
}

#[test]
fn the_campaign_pitch_must_agree_with_the_file_and_is_needed_without_one() {
    let (p, b) = fixture("rgb16-72dpi.tif");
    let scan = read(&p, &b, "s", Some(0.3528)).expect("agrees within 1 %");
    assert_eq!(scan.pixel_mm, [0.3528, 0.3528]);
    let e = read(&p, &b, "s", Some(0.5))
        .expect_err("mismatch")
        .render(None);
    assert!(e.contains("mismatched resolution"), "{e}");
    let (p, b) = fixture("rgb16-nores.tif");
    let e = read(&p, &b, "s", None)
        .expect_err("no resolution")
        .render(None);
    assert!(e.contains("states no resolution"), "{e}");
    assert!(e.contains("pixel-mm"), "{e}");
    let scan = read(&p, &b, "s", Some(0.2)).expect("campaign pitch");
    check_pattern(&scan);
    assert_eq!(scan.pixel_mm, [0.2, 0.2]);
}

#[test]
fn images_film_dosimetry_cannot_use_are_refused_with_what_to_do() {
    for (name, says) in [
        ("rgb8.tif", "8 bits per channel"),
        ("gray16.tif", "not three-channel colour"),
        ("palette8.tif", "palette"),
        ("rgb16-planar.tif", "separate planes"),
    ] {
        let (p, b) = fixture(name);
        let e = read(&p, &b, "s", Some(0.3)).expect_err(name).render(None);
        assert!(e.contains(says), "{name}: {e}");
        assert!(e.contains(name), "{name}: the message names the file: {e}");
    }
    let e = read(
        std::path::Path::new("notes.tif"),
        b"not a tiff",
        "s",
        Some(0.3),
    )
    .expect_err("not a TIFF")
    .render(None);
    assert!(e.contains("not a readable TIFF"), "{e}");
}
