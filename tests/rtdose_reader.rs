//! The RT Dose reader against fixtures written and read back by pydicom, an independent
//! general-purpose DICOM library (tests/fixtures/rtdose/make_fixtures.py).

use std::path::PathBuf;

use beamproof_engine::diag::Diagnostic;
use beamproof_engine::readers::rtdose::RawDoseGrid;

use crate::support::root;

/// The reader on a file's bytes, as the input store hands them over.
fn read_raw(path: &std::path::Path) -> Result<RawDoseGrid, Diagnostic> {
    let bytes = std::fs::read(path).expect("fixture");
    beamproof_engine::readers::rtdose::read_raw(path, &bytes)
}

fn fixture(name: &str) -> PathBuf {
    root().join("tests/fixtures/rtdose").join(name)
}

fn close(a: f64, b: f64, rel: f64) -> bool {
    (a - b).abs() <= rel * a.abs().max(b.abs()).max(1e-12)
}

fn check_against_pydicom(name: &str) {
    let expected: serde_json::Value = serde_json::from_str(
        &std::fs::read_to_string(fixture(&format!("{name}.expected.json"))).expect("expected json"),
    )
    .expect("json");
    let grid = read_raw(&fixture(&format!("{name}.dcm")))
        .unwrap_or_else(|d| panic!("{name}: {}", d.render(None)));
    let floats = |key: &str| -> Vec<f64> {
        expected[key]
            .as_array()
            .expect(key)
            .iter()
            .filter_map(|v| v.as_f64())
            .collect()
    };
    // Geometry as pydicom reads it: DICOM PS3.3 C.7.6.2 / C.8.8.3.
    assert_eq!(grid.x, floats("x"), "{name} x");
    assert_eq!(grid.y, floats("y"), "{name} y");
    assert_eq!(grid.z, floats("z"), "{name} z");
    let (cols, rows) = (grid.x.len(), grid.y.len());
    let sum: f64 = grid.dose_gy.iter().sum();
    let max = grid.dose_gy.iter().copied().fold(f64::MIN, f64::max);
    // pydicom: pixel_array * DoseGridScaling; summation order differs, hence 1e-12 relative.
    assert!(
        close(sum, expected["dose_sum"].as_f64().expect("sum"), 1e-12),
        "{name} sum {sum}"
    );
    assert!(
        close(max, expected["dose_max"].as_f64().expect("max"), 1e-15),
        "{name} max {max}"
    );
    for s in expected["samples"].as_array().expect("samples") {
        let (k, j, i) = (
            s["frame"].as_u64().expect("k") as usize,
            s["row"].as_u64().expect("j") as usize,
            s["column"].as_u64().expect("i") as usize,
        );
        let got = grid.dose_gy[(k * rows + j) * cols + i];
        assert!(
            close(got, s["dose"].as_f64().expect("dose"), 1e-15),
            "{name} voxel ({k},{j},{i}) {got}"
        );
    }
}

#[test]
fn explicit_vr_32_bit_with_decreasing_absolute_frame_offsets() {
    check_against_pydicom("grid3d_explicit");
}

#[test]
fn implicit_vr_32_bit_with_relative_frame_offsets() {
    check_against_pydicom("grid3d_implicit");
}

#[test]
fn single_frame_16_bit_plane() {
    check_against_pydicom("plane2d_16bit");
}

#[test]
fn a_ct_image_is_refused_by_name() {
    let e = read_raw(&fixture("ct_image.dcm")).expect_err("not RT Dose");
    assert_eq!(
        e.message,
        "not an RT Dose object: SOP Class UID 1.2.840.10008.5.1.4.1.1.2, modality CT"
    );
}

#[test]
fn a_non_axial_grid_is_refused() {
    let e = read_raw(&fixture("sagittal_refused.dcm")).expect_err("sagittal");
    assert_eq!(
        e.message,
        "non-axial Image Orientation (Patient) [0.0, 1.0, 0.0, 0.0, 0.0, -1.0]"
    );
    assert_eq!(
        e.help.as_deref(),
        Some(
            "only axial dose grids (1\\0\\0\\0\\1\\0) are supported; export the dose on an axial grid"
        )
    );
}

#[test]
fn a_compressed_transfer_syntax_is_refused() {
    // Deflated Explicit VR Little Endian, UID from DICOM PS3.6 Annex A.
    let e = read_raw(&fixture("deflated_refused.dcm")).expect_err("deflated");
    assert_eq!(
        e.message,
        "unsupported transfer syntax 1.2.840.10008.1.2.1.99"
    );
}

#[test]
fn a_text_file_named_dcm_is_not_dicom() {
    let path = crate::support::scratch("not-dicom").join("dose.dcm");
    std::fs::write(&path, "label,x,y,z,dose\n").expect("write");
    let e = read_raw(&path).expect_err("text");
    assert_eq!(
        e.message,
        "not a DICOM file (no `DICM` marker after the 128-byte preamble)"
    );
}
