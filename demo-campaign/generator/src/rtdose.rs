//! The demo's calculated 3D dose as a DICOM RT Dose file (dicom-rs): 32-bit unsigned pixels with
//! a dose grid scaling, axial frames, Explicit VR Little Endian, fixed UIDs so the bytes never
//! change.

use dicom_core::value::PrimitiveValue;
use dicom_core::{DataElement, Tag, VR, dicom_value};
use dicom_dictionary_std::{tags, uids};
use dicom_object::InMemDicomObject;
use dicom_object::meta::FileMetaTableBuilder;

use crate::dose_iec;

/// A fixed UID under the UUID-derived root 2.25 (ISO/IEC 9834-8), from a name: the FNV-1a hash
/// of the name in decimal. Unique enough for invented demo data, and always the same.
pub fn uid(name: &str) -> String {
    let mut h: u64 = 0xcbf2_9ce4_8422_2325;
    for b in format!("beamproof-demo:{name}").bytes() {
        h ^= u64::from(b);
        h = h.wrapping_mul(0x0000_0100_0000_01b3);
    }
    format!("2.25.{h}")
}

fn ds_list(values: &[f64]) -> PrimitiveValue {
    let v: Vec<String> = values.iter().map(|x| format!("{x}")).collect();
    PrimitiveValue::Strs(v.into())
}

/// The open 10 x 10 cm field's dose on a 4 x 5 x 5 mm grid around the isocentre `iso` (DICOM
/// patient coordinates of an HFS phantom: IEC X = x, IEC Y = z, IEC Z = -y, relative to it).
pub fn open_field(iso: [f64; 3]) -> Result<Vec<u8>, String> {
    grid("open-6x-10x10.dcm", iso, dose_iec)
}

/// A dose grid of `dose(x, y, z)` (IEC 61217 mm from the isocentre, Gy) on the same 4 x 5 x 5
/// mm grid, as an RT Dose file whose UIDs derive from `name`.
pub fn grid(
    name: &str,
    iso: [f64; 3],
    dose: impl Fn(f64, f64, f64) -> f64,
) -> Result<Vec<u8>, String> {
    grid_on(name, iso, [(80.0, 4.0), (100.0, 5.0), (80.0, 5.0)], dose)
}

/// A dose grid on columns, rows and frames spanning +-extent around the isocentre with the
/// given spacing, each `(extent, spacing)` in mm along patient x, y and z.
pub fn grid_on(
    name: &str,
    iso: [f64; 3],
    axes: [(f64, f64); 3],
    dose: impl Fn(f64, f64, f64) -> f64,
) -> Result<Vec<u8>, String> {
    let axis = |a: usize| -> Vec<f64> {
        let (extent, step) = axes[a];
        crate::steps(-extent, extent, step)
            .iter()
            .map(|v| v + iso[a])
            .collect()
    };
    let (xs, ys, zs) = (axis(0), axis(1), axis(2));
    let scaling = 1e-6;
    let mut pixels = Vec::with_capacity(xs.len() * ys.len() * zs.len() * 4);
    for pz in &zs {
        for py in &ys {
            for px in &xs {
                let d = dose(px - iso[0], pz - iso[2], -(py - iso[1]));
                pixels.extend_from_slice(&((d / scaling).round() as u32).to_le_bytes());
            }
        }
    }
    let sop = uid(name);
    let s = |tag: Tag, vr: VR, v: &str| DataElement::new(tag, vr, PrimitiveValue::from(v));
    let obj = InMemDicomObject::from_element_iter([
        s(tags::SOP_CLASS_UID, VR::UI, uids::RT_DOSE_STORAGE),
        s(tags::SOP_INSTANCE_UID, VR::UI, &sop),
        s(tags::STUDY_INSTANCE_UID, VR::UI, &uid("study")),
        s(
            tags::SERIES_INSTANCE_UID,
            VR::UI,
            &uid("open-6x-10x10.dcm series"),
        ),
        s(
            tags::FRAME_OF_REFERENCE_UID,
            VR::UI,
            &uid("frame of reference"),
        ),
        s(tags::PATIENT_NAME, VR::PN, "Water^Phantom"),
        s(tags::PATIENT_ID, VR::LO, "DEMO-PHANTOM"),
        s(tags::MODALITY, VR::CS, "RTDOSE"),
        DataElement::new(tags::SAMPLES_PER_PIXEL, VR::US, PrimitiveValue::from(1u16)),
        s(tags::PHOTOMETRIC_INTERPRETATION, VR::CS, "MONOCHROME2"),
        DataElement::new(tags::ROWS, VR::US, PrimitiveValue::from(ys.len() as u16)),
        DataElement::new(tags::COLUMNS, VR::US, PrimitiveValue::from(xs.len() as u16)),
        s(tags::NUMBER_OF_FRAMES, VR::IS, &zs.len().to_string()),
        DataElement::new(
            tags::FRAME_INCREMENT_POINTER,
            VR::AT,
            dicom_value!(Tags, [tags::GRID_FRAME_OFFSET_VECTOR]),
        ),
        DataElement::new(
            tags::GRID_FRAME_OFFSET_VECTOR,
            VR::DS,
            ds_list(&zs.iter().map(|z| z - zs[0]).collect::<Vec<_>>()),
        ),
        DataElement::new(
            tags::IMAGE_POSITION_PATIENT,
            VR::DS,
            ds_list(&[xs[0], ys[0], zs[0]]),
        ),
        DataElement::new(
            tags::IMAGE_ORIENTATION_PATIENT,
            VR::DS,
            ds_list(&[1.0, 0.0, 0.0, 0.0, 1.0, 0.0]),
        ),
        DataElement::new(
            tags::PIXEL_SPACING,
            VR::DS,
            ds_list(&[axes[1].1, axes[0].1]),
        ),
        DataElement::new(tags::BITS_ALLOCATED, VR::US, PrimitiveValue::from(32u16)),
        DataElement::new(tags::BITS_STORED, VR::US, PrimitiveValue::from(32u16)),
        DataElement::new(tags::HIGH_BIT, VR::US, PrimitiveValue::from(31u16)),
        DataElement::new(
            tags::PIXEL_REPRESENTATION,
            VR::US,
            PrimitiveValue::from(0u16),
        ),
        s(tags::DOSE_UNITS, VR::CS, "GY"),
        s(tags::DOSE_TYPE, VR::CS, "PHYSICAL"),
        s(tags::DOSE_SUMMATION_TYPE, VR::CS, "PLAN"),
        DataElement::new(tags::DOSE_GRID_SCALING, VR::DS, ds_list(&[scaling])),
        DataElement::new(tags::PIXEL_DATA, VR::OW, PrimitiveValue::from(pixels)),
    ]);
    let file = obj
        .with_meta(
            FileMetaTableBuilder::new()
                .transfer_syntax(uids::EXPLICIT_VR_LITTLE_ENDIAN)
                .media_storage_sop_class_uid(uids::RT_DOSE_STORAGE)
                .media_storage_sop_instance_uid(&sop),
        )
        .map_err(|e| e.to_string())?;
    let mut bytes = Vec::new();
    file.write_all(&mut bytes).map_err(|e| e.to_string())?;
    Ok(bytes)
}
