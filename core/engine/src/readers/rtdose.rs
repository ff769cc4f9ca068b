//! Reader for DICOM RT Dose (2D and 3D, multi-frame) with dicom-rs, converting the grid from
//! DICOM patient coordinates to IEC 61217 fixed coordinates relative to the isocentre.
//!
//! Geometry (DICOM PS3.3 C.7.6.2 and C.8.8.3): for an axial grid (Image Orientation (Patient)
//! = 1\0\0\0\1\0) the voxel centre of column i, row j, frame k is
//! `(IPP.x + i * dcol, IPP.y + j * drow, IPP.z + GFOV[k] - GFOV[0])`, where Pixel Spacing is
//! `[drow, dcol]`; the offset form holds for both Grid Frame Offset Vector conventions.
//! Dose = stored value x Dose Grid Scaling.

use std::borrow::Cow;
use std::path::Path;

use beamproof_api::{DatasetData, DoseUnit, Grid};
use dicom_core::{Tag, VR};
use dicom_dictionary_std::tags;
use dicom_object::{DefaultDicomObject, InMemDicomObject};

use crate::campaign::{DicomPlacement, PatientPosition};
use crate::diag::{Diagnostic, error_chain};

/// SOP Class UID of RT Dose Storage.
pub const RT_DOSE_STORAGE: &str = "1.2.840.10008.5.1.4.1.1.481.2";
/// Transfer syntaxes with native (unencapsulated) little-endian pixel data.
const SUPPORTED_SYNTAXES: [(&str, &str); 2] = [
    ("1.2.840.10008.1.2", "Implicit VR Little Endian"),
    ("1.2.840.10008.1.2.1", "Explicit VR Little Endian"),
];

/// Geometry and values of an RT Dose grid in DICOM patient coordinates (mm, Gy), before
/// placement. Exposed so tests can compare it with an independent reader.
#[derive(Debug, Clone, PartialEq)]
pub struct RawDoseGrid {
    /// Column centres along patient x.
    pub x: Vec<f64>,
    /// Row centres along patient y.
    pub y: Vec<f64>,
    /// Frame centres along patient z, in frame order (may decrease).
    pub z: Vec<f64>,
    /// Dose in Gy, frame-major then row then column, as stored.
    pub dose_gy: Vec<f64>,
}

/// Parse the bytes of a DICOM Part 10 file (preamble, `DICM`, file meta group, data set):
/// the object and its file meta's transfer syntax UID and SOP class UID. `path` only names the
/// file in messages; nothing is read from disk.
pub(crate) fn parse_part10(
    path: &Path,
    bytes: &[u8],
    what: &str,
) -> Result<(DefaultDicomObject, String, String), Diagnostic> {
    let fail = |msg: String, help: &str| Diagnostic::file(path, msg).help(help);
    let not_dicom = || {
        fail(
            "not a DICOM file (no `DICM` marker after the 128-byte preamble)".into(),
            &format!("give a DICOM Part 10 file as exported by the planning system ({what})"),
        )
    };
    let rest = bytes
        .get(128..)
        .filter(|rest| rest.starts_with(b"DICM"))
        .ok_or_else(not_dicom)?;
    // Every declared length must fit the file before a decoder allocates it.
    let damaged = |e: String| {
        fail(
            format!("damaged or truncated DICOM: {e}"),
            "the file is damaged or truncated; copy or export it again",
        )
    };
    let ts = super::dicom_lengths::meta_transfer_syntax(&rest[4..])
        .map_err(damaged)?
        .ok_or_else(not_dicom)?;
    let Some(encoding) = super::dicom_lengths::Encoding::of(&ts) else {
        return Err(fail(
            format!("transfer syntax {ts} (deflated) is not supported"),
            "export the file uncompressed (Implicit or Explicit VR Little Endian)",
        ));
    };
    super::dicom_lengths::check(&rest[4..], encoding).map_err(damaged)?;
    let meta = dicom_object::meta::FileMetaTable::from_reader(rest).map_err(|_| not_dicom())?;
    let sop_class = meta
        .media_storage_sop_class_uid
        .trim_end_matches('\0')
        .to_string();
    let obj = dicom_object::OpenFileOptions::new()
        .read_preamble(dicom_object::file::ReadPreamble::Never)
        .from_reader(rest)
        .map_err(|e| {
            fail(
                format!("cannot read as DICOM: {}", error_chain(&e)),
                "the file is damaged or truncated; copy or export it again",
            )
        })?;
    Ok((obj, ts, sop_class))
}

/// Read an RT Dose file, from its bytes, into its raw grid.
pub fn read_raw(path: &Path, bytes: &[u8]) -> Result<RawDoseGrid, Diagnostic> {
    let fail = |msg: String, help: &str| Diagnostic::file(path, msg).help(help);
    // The transfer syntax is checked from the file meta group first, so an unsupported syntax
    // gets a clear message instead of a decoder error.
    let rest = bytes
        .get(132..)
        .filter(|_| bytes[128..].starts_with(b"DICM"));
    if let Some(Ok(Some(ts))) = rest.map(super::dicom_lengths::meta_transfer_syntax)
        && !SUPPORTED_SYNTAXES.iter().any(|(uid, _)| *uid == ts)
    {
        return Err(fail(
            format!("unsupported transfer syntax {ts}"),
            "export the dose uncompressed as Implicit or Explicit VR Little Endian",
        ));
    }
    let (obj, _, sop_class) = parse_part10(path, bytes, "RT Dose")?;
    if sop_class != RT_DOSE_STORAGE {
        let modality = text(&obj, tags::MODALITY).unwrap_or_else(|| "unknown".into());
        return Err(fail(
            format!("not an RT Dose object: SOP Class UID {sop_class}, modality {modality}"),
            "give the RT Dose file exported by the planning system (SOP Class 1.2.840.10008.5.1.4.1.1.481.2)",
        ));
    }
    let need_f64s = |tag: Tag, name: &str, n: usize| -> Result<Vec<f64>, Diagnostic> {
        let v = floats(&obj, tag).ok_or_else(|| {
            fail(
                format!("missing or unreadable {name}"),
                "the RT Dose file is incomplete; re-export it",
            )
        })?;
        if v.len() != n {
            return Err(fail(
                format!("{name} has {} values, expected {n}", v.len()),
                "the RT Dose file is malformed; re-export it",
            ));
        }
        Ok(v)
    };
    let need_int = |tag: Tag, name: &str| -> Result<i64, Diagnostic> {
        int(&obj, tag).ok_or_else(|| {
            fail(
                format!("missing or unreadable {name}"),
                "the RT Dose file is incomplete; re-export it",
            )
        })
    };
    let rows = need_int(tags::ROWS, "Rows")?;
    let cols = need_int(tags::COLUMNS, "Columns")?;
    let frames = int(&obj, tags::NUMBER_OF_FRAMES).unwrap_or(1);
    if rows < 1 || cols < 1 || frames < 1 {
        return Err(fail(
            format!("empty grid: {rows} rows, {cols} columns, {frames} frames"),
            "re-export the dose grid",
        ));
    }
    let (rows, cols, frames) = (rows as usize, cols as usize, frames as usize);
    let bits = need_int(tags::BITS_ALLOCATED, "Bits Allocated")?;
    let signed = int(&obj, tags::PIXEL_REPRESENTATION).unwrap_or(0) == 1;
    if int(&obj, tags::SAMPLES_PER_PIXEL).unwrap_or(1) != 1 {
        return Err(fail(
            "dose must have one sample per pixel".into(),
            "re-export the dose grid",
        ));
    }
    let units = text(&obj, tags::DOSE_UNITS).unwrap_or_default();
    if units != "GY" {
        return Err(fail(
            format!("Dose Units is `{units}`; only absolute dose (GY) is supported"),
            "export the dose in Gy from the planning system",
        ));
    }
    let ipp = need_f64s(tags::IMAGE_POSITION_PATIENT, "Image Position (Patient)", 3)?;
    let iop = need_f64s(
        tags::IMAGE_ORIENTATION_PATIENT,
        "Image Orientation (Patient)",
        6,
    )?;
    let axial = [1.0, 0.0, 0.0, 0.0, 1.0, 0.0];
    if iop.iter().zip(axial).any(|(a, b)| (a - b).abs() > 1e-4) {
        return Err(fail(
            format!("non-axial Image Orientation (Patient) {iop:?}"),
            "only axial dose grids (1\\0\\0\\0\\1\\0) are supported; export the dose on an axial grid",
        ));
    }
    let spacing = need_f64s(tags::PIXEL_SPACING, "Pixel Spacing", 2)?;
    if spacing.iter().any(|s| *s <= 0.0) {
        return Err(fail(
            format!("Pixel Spacing {spacing:?} is not positive"),
            "re-export the dose grid",
        ));
    }
    let gfov = if frames > 1 {
        need_f64s(
            tags::GRID_FRAME_OFFSET_VECTOR,
            "Grid Frame Offset Vector",
            frames,
        )?
    } else {
        vec![0.0]
    };
    let scaling = floats(&obj, tags::DOSE_GRID_SCALING)
        .and_then(|v| v.first().copied())
        .ok_or_else(|| {
            fail(
                "missing Dose Grid Scaling".into(),
                "the RT Dose file is incomplete; re-export it",
            )
        })?;
    let pixel_el = obj.element(tags::PIXEL_DATA).map_err(|_| {
        fail(
            "no Pixel Data".into(),
            "the RT Dose file holds no dose grid; re-export it",
        )
    })?;
    let bytes = pixel_el.to_bytes().map_err(|_| {
        fail(
            "Pixel Data is encapsulated or unreadable".into(),
            "export uncompressed dose",
        )
    })?;
    let n = rows * cols * frames;
    let width = match bits {
        16 => 2,
        32 => 4,
        other => {
            return Err(fail(
                format!("Bits Allocated {other} is not supported"),
                "RT Dose uses 16 or 32 bits",
            ));
        }
    };
    if bytes.len() < n * width {
        return Err(fail(
            format!(
                "Pixel Data holds {} bytes, {} expected for {rows} x {cols} x {frames} values",
                bytes.len(),
                n * width
            ),
            "the file is truncated; copy or export it again",
        ));
    }
    let dose_gy = bytes[..n * width]
        .chunks_exact(width)
        .map(|b| {
            let raw = match (width, signed) {
                (2, false) => f64::from(u16::from_le_bytes([b[0], b[1]])),
                (2, true) => f64::from(i16::from_le_bytes([b[0], b[1]])),
                (_, false) => f64::from(u32::from_le_bytes([b[0], b[1], b[2], b[3]])),
                (_, true) => f64::from(i32::from_le_bytes([b[0], b[1], b[2], b[3]])),
            };
            raw * scaling
        })
        .collect();
    Ok(RawDoseGrid {
        x: (0..cols).map(|i| ipp[0] + i as f64 * spacing[1]).collect(),
        y: (0..rows).map(|j| ipp[1] + j as f64 * spacing[0]).collect(),
        z: gfov.iter().map(|o| ipp[2] + o - gfov[0]).collect(),
        dose_gy,
    })
}

/// Which DICOM patient axis (0 = x, 1 = y, 2 = z) and sign give IEC 61217 fixed X, Y and Z.
///
/// Derived from the axis definitions: DICOM patient coordinates are LPS (+x patient left,
/// +y posterior, +z head); IEC 61217 fixed has +X to the right of an observer facing the gantry,
/// +Y towards the gantry, +Z up (IEC 61217). Head first supine: the patient's left is on
/// the observer's right, the head points to the gantry and anterior is up.
pub fn iec_axes(position: PatientPosition) -> [(usize, f64); 3] {
    match position {
        PatientPosition::Hfs => [(0, 1.0), (2, 1.0), (1, -1.0)],
        PatientPosition::Hfp => [(0, -1.0), (2, 1.0), (1, 1.0)],
        PatientPosition::Ffs => [(0, -1.0), (2, -1.0), (1, -1.0)],
        PatientPosition::Ffp => [(0, 1.0), (2, -1.0), (1, 1.0)],
    }
}

/// Place a raw grid in IEC 61217 fixed coordinates relative to the isocentre.
pub fn place(
    path: &Path,
    raw: &RawDoseGrid,
    placement: &DicomPlacement,
) -> Result<Grid, Diagnostic> {
    let dicom_axes = [&raw.x, &raw.y, &raw.z];
    // For each IEC axis: sorted (coordinate, source index) pairs.
    let mut iec: Vec<Vec<(f64, usize)>> = Vec::with_capacity(3);
    let mut source_axis = [0usize; 3];
    for (a, (d, sign)) in iec_axes(placement.patient_position).into_iter().enumerate() {
        source_axis[a] = d;
        let mut v: Vec<(f64, usize)> = dicom_axes[d]
            .iter()
            .enumerate()
            .map(|(i, c)| (sign * (c - placement.isocentre_mm[d]), i))
            .collect();
        v.sort_by(|p, q| p.0.total_cmp(&q.0));
        if v.windows(2).any(|w| w[1].0 - w[0].0 < 1e-6) {
            return Err(Diagnostic::file(
                path,
                "two dose planes share one position (Grid Frame Offset Vector repeats a value)",
            )
            .help("re-export the dose grid"));
        }
        iec.push(v);
    }
    let (nc, nr) = (raw.x.len(), raw.y.len());
    let mut dose = Vec::with_capacity(raw.dose_gy.len());
    let mut src = [0usize; 3];
    for &(_, kz) in &iec[2] {
        for &(_, jy) in &iec[1] {
            for &(_, ix) in &iec[0] {
                src[source_axis[0]] = ix;
                src[source_axis[1]] = jy;
                src[source_axis[2]] = kz;
                dose.push(raw.dose_gy[(src[2] * nr + src[1]) * nc + src[0]]);
            }
        }
    }
    let coords = |a: usize| iec[a].iter().map(|p| p.0).collect();
    Ok(Grid {
        x_mm: coords(0),
        y_mm: coords(1),
        z_mm: coords(2),
        dose,
    })
}

/// Read an RT Dose file from its bytes and place it in IEC 61217 coordinates.
pub fn read(
    path: &Path,
    bytes: &[u8],
    placement: Option<&DicomPlacement>,
) -> Result<(DoseUnit, DatasetData), Diagnostic> {
    let placement = placement.ok_or_else(|| {
        Diagnostic::file(path, "a DICOM dose grid needs its placement")
            .help("write the input as `{file: ..., patient-position: HFS, isocentre-mm: [x, y, z]}` with the isocentre in the dose file's DICOM coordinates")
    })?;
    let raw = read_raw(path, bytes)?;
    Ok((
        DoseUnit::Gy,
        DatasetData::Grid(place(path, &raw, placement)?),
    ))
}

/// Element value as text; elements with VR UN are decoded from their raw bytes (dicom-rs
/// otherwise returns the bytes as numbers).
fn text(obj: &InMemDicomObject, tag: Tag) -> Option<String> {
    let el = obj.element_opt(tag).ok()??;
    let s: Cow<str> = if el.vr() == VR::UN {
        Cow::Owned(String::from_utf8_lossy(&el.to_bytes().ok()?).into_owned())
    } else {
        el.to_str().ok()?
    };
    Some(
        s.trim_matches(|c: char| c == '\0' || c.is_whitespace())
            .to_string(),
    )
}

fn floats(obj: &InMemDicomObject, tag: Tag) -> Option<Vec<f64>> {
    let el = obj.element_opt(tag).ok()??;
    if el.vr() == VR::UN {
        return text(obj, tag)?
            .split('\\')
            .map(|p| p.trim().parse::<f64>().ok())
            .collect();
    }
    el.to_multi_float64().ok()
}

fn int(obj: &InMemDicomObject, tag: Tag) -> Option<i64> {
    let el = obj.element_opt(tag).ok()??;
    if el.vr() == VR::UN && !matches!(el.to_bytes().ok()?.len(), 2 | 4) {
        return text(obj, tag)?.parse().ok();
    }
    el.to_int::<i64>().ok()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn raw() -> RawDoseGrid {
        // 2 columns, 3 rows, 2 frames with a decreasing frame offset vector; dose = index.
        RawDoseGrid {
            x: vec![-5.0, 5.0],
            y: vec![10.0, 12.0, 14.0],
            z: vec![100.0, 97.0],
            dose_gy: (0..12).map(f64::from).collect(),
        }
    }

    #[test]
    fn head_first_supine_maps_lps_to_iec() {
        let p = DicomPlacement {
            patient_position: PatientPosition::Hfs,
            isocentre_mm: [0.0, 12.0, 97.0],
        };
        let g = place(Path::new("d.dcm"), &raw(), &p).expect("placed");
        assert_eq!(g.x_mm, vec![-5.0, 5.0]);
        // IEC Y = patient z - iso z, sorted: frames 97 (k=1) then 100 (k=0).
        assert_eq!(g.y_mm, vec![0.0, 3.0]);
        // IEC Z = -(patient y - iso y): rows 14, 12, 10 give -2, 0, 2.
        assert_eq!(g.z_mm, vec![-2.0, 0.0, 2.0]);
        // Voxel at IEC (5, 3, 2) is column 1, frame 0, row 0: stored index 1.
        assert_eq!(g.sample(5.0, 3.0, 2.0), Some(1.0));
        // IEC (-5, 0, -2) is column 0, frame 1, row 2: index (1*3 + 2)*2 + 0 = 10.
        assert_eq!(g.sample(-5.0, 0.0, -2.0), Some(10.0));
    }

    #[test]
    fn feet_first_prone_flips_y_and_keeps_x() {
        let p = DicomPlacement {
            patient_position: PatientPosition::Ffp,
            isocentre_mm: [0.0, 12.0, 97.0],
        };
        let g = place(Path::new("d.dcm"), &raw(), &p).expect("placed");
        assert_eq!(g.y_mm, vec![-3.0, 0.0]);
        // IEC (5, -3, -2): column 1, patient z 100 (frame 0), patient y 10 (row 0) -> index 1.
        assert_eq!(g.sample(5.0, -3.0, -2.0), Some(1.0));
    }
}
