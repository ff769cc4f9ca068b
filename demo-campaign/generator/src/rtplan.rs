//! The demo's three-field 6 MV plan as a DICOM RT Plan (dicom-rs): static beams with jaws and
//! leaves in the first control point, a wedge on one beam, and a fraction group with each
//! beam's meterset and its dose at the isocentre (the planning system's values for the MU
//! check). Fixed UIDs, so the bytes never change.

use dicom_core::value::{DataSetSequence, PrimitiveValue};
use dicom_core::{DataElement, Tag, VR};
use dicom_dictionary_std::{tags, uids};
use dicom_object::InMemDicomObject;
use dicom_object::meta::FileMetaTableBuilder;

use crate::rtdose::uid;

/// One beam of the plan.
pub struct PlanBeam {
    pub number: i32,
    pub name: &'static str,
    pub gantry: f64,
    pub ssd_mm: f64,
    /// X1, X2, Y1, Y2 at the isocentre, mm.
    pub jaws_mm: [f64; 4],
    /// Bank A then bank B leaf positions (40 pairs of 10 mm leaves from -200 to 200 mm).
    pub leaves_mm: Vec<f64>,
    pub wedge: Option<(&'static str, f64)>,
    pub mu: f64,
    /// Dose at the isocentre from this beam according to the (invented) planning system, Gy.
    pub dose_gy: f64,
}

fn s(tag: Tag, vr: VR, v: &str) -> DataElement<InMemDicomObject> {
    DataElement::new(tag, vr, PrimitiveValue::from(v))
}

fn ds(tag: Tag, values: &[f64]) -> DataElement<InMemDicomObject> {
    let v: Vec<String> = values.iter().map(|x| format!("{x}")).collect();
    DataElement::new(tag, VR::DS, PrimitiveValue::Strs(v.into()))
}

fn is(tag: Tag, v: i32) -> DataElement<InMemDicomObject> {
    s(tag, VR::IS, &v.to_string())
}

fn seq(tag: Tag, items: Vec<InMemDicomObject>) -> DataElement<InMemDicomObject> {
    DataElement::new(tag, VR::SQ, DataSetSequence::from(items))
}

fn device(kind: &str, pairs: i32, boundaries: Option<Vec<f64>>) -> InMemDicomObject {
    let mut els = vec![
        s(tags::RT_BEAM_LIMITING_DEVICE_TYPE, VR::CS, kind),
        is(tags::NUMBER_OF_LEAF_JAW_PAIRS, pairs),
    ];
    if let Some(b) = boundaries {
        els.push(ds(tags::LEAF_POSITION_BOUNDARIES, &b));
    }
    InMemDicomObject::from_element_iter(els)
}

fn position(kind: &str, p: &[f64]) -> InMemDicomObject {
    InMemDicomObject::from_element_iter([
        s(tags::RT_BEAM_LIMITING_DEVICE_TYPE, VR::CS, kind),
        ds(tags::LEAF_JAW_POSITIONS, p),
    ])
}

fn beam(b: &PlanBeam) -> InMemDicomObject {
    let boundaries: Vec<f64> = (0..=40).map(|i| -200.0 + 10.0 * f64::from(i)).collect();
    let cp0 = InMemDicomObject::from_element_iter([
        is(tags::CONTROL_POINT_INDEX, 0),
        ds(tags::NOMINAL_BEAM_ENERGY, &[6.0]),
        ds(tags::GANTRY_ANGLE, &[b.gantry]),
        s(tags::GANTRY_ROTATION_DIRECTION, VR::CS, "NONE"),
        ds(tags::BEAM_LIMITING_DEVICE_ANGLE, &[0.0]),
        ds(tags::PATIENT_SUPPORT_ANGLE, &[0.0]),
        ds(tags::ISOCENTER_POSITION, &[0.0, 0.0, 0.0]),
        ds(tags::SOURCE_TO_SURFACE_DISTANCE, &[b.ssd_mm]),
        ds(tags::CUMULATIVE_METERSET_WEIGHT, &[0.0]),
        seq(
            tags::BEAM_LIMITING_DEVICE_POSITION_SEQUENCE,
            vec![
                position("ASYMX", &b.jaws_mm[..2]),
                position("ASYMY", &b.jaws_mm[2..]),
                position("MLCX", &b.leaves_mm),
            ],
        ),
    ]);
    let cp1 = InMemDicomObject::from_element_iter([
        is(tags::CONTROL_POINT_INDEX, 1),
        ds(tags::CUMULATIVE_METERSET_WEIGHT, &[1.0]),
    ]);
    let fluence = InMemDicomObject::from_element_iter([s(tags::FLUENCE_MODE, VR::CS, "STANDARD")]);
    let mut els = vec![
        is(tags::BEAM_NUMBER, b.number),
        s(tags::BEAM_NAME, VR::LO, b.name),
        s(tags::TREATMENT_MACHINE_NAME, VR::SH, "DEMO-LINAC"),
        s(tags::PRIMARY_DOSIMETER_UNIT, VR::CS, "MU"),
        ds(tags::SOURCE_AXIS_DISTANCE, &[1000.0]),
        s(tags::BEAM_TYPE, VR::CS, "STATIC"),
        s(tags::RADIATION_TYPE, VR::CS, "PHOTON"),
        seq(tags::PRIMARY_FLUENCE_MODE_SEQUENCE, vec![fluence]),
        seq(
            tags::BEAM_LIMITING_DEVICE_SEQUENCE,
            vec![
                device("ASYMX", 1, None),
                device("ASYMY", 1, None),
                device("MLCX", 40, Some(boundaries)),
            ],
        ),
        is(tags::NUMBER_OF_WEDGES, i32::from(b.wedge.is_some())),
        is(tags::NUMBER_OF_CONTROL_POINTS, 2),
        ds(tags::FINAL_CUMULATIVE_METERSET_WEIGHT, &[1.0]),
        seq(tags::CONTROL_POINT_SEQUENCE, vec![cp0, cp1]),
    ];
    if let Some((id, factor)) = b.wedge {
        els.push(seq(
            tags::WEDGE_SEQUENCE,
            vec![InMemDicomObject::from_element_iter([
                is(tags::WEDGE_NUMBER, 1),
                s(tags::WEDGE_TYPE, VR::CS, "STANDARD"),
                s(tags::WEDGE_ID, VR::SH, id),
                is(tags::WEDGE_ANGLE, 30),
                ds(tags::WEDGE_FACTOR, &[factor]),
                ds(tags::WEDGE_ORIENTATION, &[0.0]),
            ])],
        ));
    }
    InMemDicomObject::from_element_iter(els)
}

/// The plan file's bytes.
pub fn plan(label: &str, beams: &[PlanBeam]) -> Result<Vec<u8>, String> {
    let sop = uid(&format!("{label} plan"));
    let refs: Vec<InMemDicomObject> = beams
        .iter()
        .map(|b| {
            InMemDicomObject::from_element_iter([
                is(tags::REFERENCED_BEAM_NUMBER, b.number),
                ds(tags::BEAM_METERSET, &[b.mu]),
                ds(tags::BEAM_DOSE, &[b.dose_gy]),
            ])
        })
        .collect();
    let n = i32::try_from(beams.len()).unwrap_or(0);
    let group = InMemDicomObject::from_element_iter([
        is(tags::FRACTION_GROUP_NUMBER, 1),
        is(tags::NUMBER_OF_FRACTIONS_PLANNED, 1),
        is(tags::NUMBER_OF_BEAMS, n),
        seq(tags::REFERENCED_BEAM_SEQUENCE, refs),
    ]);
    let obj = InMemDicomObject::from_element_iter([
        s(tags::SOP_CLASS_UID, VR::UI, uids::RT_PLAN_STORAGE),
        s(tags::SOP_INSTANCE_UID, VR::UI, &sop),
        s(tags::STUDY_INSTANCE_UID, VR::UI, &uid("study")),
        s(
            tags::SERIES_INSTANCE_UID,
            VR::UI,
            &uid(&format!("{label} series")),
        ),
        s(
            tags::FRAME_OF_REFERENCE_UID,
            VR::UI,
            &uid("frame of reference"),
        ),
        s(tags::PATIENT_NAME, VR::PN, "Water^Phantom"),
        s(tags::PATIENT_ID, VR::LO, "DEMO-PHANTOM"),
        s(tags::MODALITY, VR::CS, "RTPLAN"),
        s(tags::RT_PLAN_LABEL, VR::SH, label),
        s(tags::RT_PLAN_GEOMETRY, VR::CS, "PATIENT"),
        seq(tags::FRACTION_GROUP_SEQUENCE, vec![group]),
        seq(tags::BEAM_SEQUENCE, beams.iter().map(beam).collect()),
    ]);
    let file = obj
        .with_meta(
            FileMetaTableBuilder::new()
                .transfer_syntax(uids::EXPLICIT_VR_LITTLE_ENDIAN)
                .media_storage_sop_class_uid(uids::RT_PLAN_STORAGE)
                .media_storage_sop_instance_uid(&sop),
        )
        .map_err(|e| e.to_string())?;
    let mut bytes = Vec::new();
    file.write_all(&mut bytes).map_err(|e| e.to_string())?;
    Ok(bytes)
}
