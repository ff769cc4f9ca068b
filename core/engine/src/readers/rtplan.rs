//! Reader for DICOM RT Plan with dicom-rs: per beam the number, name, machine, radiation type,
//! nominal energy and fluence mode, the first control point's gantry, collimator and couch
//! angles, isocentre, source-to-surface distance, jaw and MLC positions with the leaf
//! boundaries, and the beam meterset (and beam dose) of the first fraction group (DICOM PS3.3
//! C.8.8.13 and C.8.8.14). Positions in mm, angles in degrees, as stored.

use std::path::Path;

use dicom_core::Tag;
use dicom_dictionary_std::tags;
use dicom_object::InMemDicomObject;

use crate::diag::Diagnostic;

/// SOP Class UID of RT Plan Storage.
pub const RT_PLAN_STORAGE: &str = "1.2.840.10008.5.1.4.1.1.481.5";

/// One beam of a plan.
#[derive(Debug, Clone, PartialEq)]
pub struct PlanBeam {
    pub number: i64,
    pub name: String,
    pub machine: String,
    /// PHOTON, ELECTRON, ...
    pub radiation: String,
    /// Nominal energy, MV or MeV.
    pub energy: f64,
    /// Fluence Mode ID of a NON_STANDARD fluence (for example a flattening-filter-free mode).
    pub fluence_mode_id: Option<String>,
    pub gantry_deg: f64,
    pub collimator_deg: f64,
    pub couch_deg: f64,
    pub isocentre_mm: [f64; 3],
    pub ssd_mm: Option<f64>,
    /// Jaw positions [x1, x2] and [y1, y2], mm at the isocentre plane.
    pub jaw_x_mm: Option<[f64; 2]>,
    pub jaw_y_mm: Option<[f64; 2]>,
    /// Leaf boundaries (n + 1 values) and positions (bank A then bank B, 2n values).
    pub mlc_boundaries_mm: Vec<f64>,
    pub mlc_positions_mm: Vec<f64>,
    pub meterset_mu: f64,
    pub beam_dose_gy: Option<f64>,
    /// Number of control points (2 for a static beam).
    pub control_points: usize,
    /// Wedge IDs of the Wedge Sequence (physical or motorised wedges).
    pub wedge_ids: Vec<String>,
}

/// A plan's label and beams.
#[derive(Debug, Clone, PartialEq)]
pub struct Plan {
    pub label: String,
    pub beams: Vec<PlanBeam>,
}

fn text(obj: &InMemDicomObject, tag: Tag) -> Option<String> {
    let s = obj.element_opt(tag).ok()??.to_str().ok()?;
    Some(
        s.trim_matches(|c: char| c == '\0' || c.is_whitespace())
            .to_string(),
    )
}

fn floats(obj: &InMemDicomObject, tag: Tag) -> Option<Vec<f64>> {
    obj.element_opt(tag).ok()??.to_multi_float64().ok()
}

fn float(obj: &InMemDicomObject, tag: Tag) -> Option<f64> {
    floats(obj, tag)?.first().copied()
}

fn items(obj: &InMemDicomObject, tag: Tag) -> &[InMemDicomObject] {
    obj.element_opt(tag)
        .ok()
        .flatten()
        .and_then(|e| e.items())
        .unwrap_or(&[])
}

/// Read an RT Plan from the bytes of file `path` (named in messages, not read); problems name
/// the file and the beam.
pub fn read_plan(path: &Path, bytes: &[u8]) -> Result<Plan, Diagnostic> {
    let fail = |msg: String, help: &str| Diagnostic::file(path, msg).help(help);
    let (obj, _, sop) = crate::readers::rtdose::parse_part10(path, bytes, "RT Plan")?;
    if sop != RT_PLAN_STORAGE {
        return Err(fail(
            format!("not an RT Plan: SOP Class UID {sop}"),
            "give the RT Plan file (SOP Class 1.2.840.10008.5.1.4.1.1.481.5)",
        ));
    }
    let groups = items(&obj, tags::FRACTION_GROUP_SEQUENCE);
    let Some(group) = groups.first() else {
        return Err(fail(
            "the plan has no fraction group, so no beam metersets".into(),
            "export the plan with its fraction group (Fraction Group Sequence)",
        ));
    };
    let refs = items(group, tags::REFERENCED_BEAM_SEQUENCE);
    let mut beams = Vec::new();
    for b in items(&obj, tags::BEAM_SEQUENCE) {
        let number = b
            .element_opt(tags::BEAM_NUMBER)
            .ok()
            .flatten()
            .and_then(|e| e.to_int::<i64>().ok())
            .ok_or_else(|| fail("a beam has no Beam Number".into(), "re-export the plan"))?;
        let name = text(b, tags::BEAM_NAME).unwrap_or_default();
        let beam_fail = |what: &str| {
            fail(
                format!("beam {number} ({name}): {what}"),
                "re-export the plan with complete beam data",
            )
        };
        let r = refs.iter().find(|r| {
            r.element_opt(tags::REFERENCED_BEAM_NUMBER)
                .ok()
                .flatten()
                .and_then(|e| e.to_int::<i64>().ok())
                == Some(number)
        });
        let meterset = r
            .and_then(|r| float(r, tags::BEAM_METERSET))
            .ok_or_else(|| beam_fail("no Beam Meterset in the fraction group"))?;
        let cp = items(b, tags::CONTROL_POINT_SEQUENCE)
            .first()
            .ok_or_else(|| beam_fail("no control points"))?;
        let mut jaw_x = None;
        let mut jaw_y = None;
        let mut mlc = Vec::new();
        for d in items(cp, tags::BEAM_LIMITING_DEVICE_POSITION_SEQUENCE) {
            let p = floats(d, tags::LEAF_JAW_POSITIONS).unwrap_or_default();
            match (
                text(d, tags::RT_BEAM_LIMITING_DEVICE_TYPE).as_deref(),
                p.len(),
            ) {
                (Some("X" | "ASYMX"), 2) => jaw_x = Some([p[0], p[1]]),
                (Some("Y" | "ASYMY"), 2) => jaw_y = Some([p[0], p[1]]),
                (Some("MLCX" | "MLCY"), _) => mlc = p,
                _ => {}
            }
        }
        let boundaries = items(b, tags::BEAM_LIMITING_DEVICE_SEQUENCE)
            .iter()
            .find(|d| {
                matches!(
                    text(d, tags::RT_BEAM_LIMITING_DEVICE_TYPE).as_deref(),
                    Some("MLCX" | "MLCY")
                )
            })
            .and_then(|d| floats(d, tags::LEAF_POSITION_BOUNDARIES))
            .unwrap_or_default();
        if !mlc.is_empty() && mlc.len() + 2 != 2 * boundaries.len() {
            return Err(beam_fail(&format!(
                "{} leaf positions do not fit {} leaf boundaries",
                mlc.len(),
                boundaries.len()
            )));
        }
        let iso = floats(cp, tags::ISOCENTER_POSITION)
            .filter(|v| v.len() == 3)
            .ok_or_else(|| beam_fail("no isocentre in the first control point"))?;
        let fluence = items(b, tags::PRIMARY_FLUENCE_MODE_SEQUENCE).first();
        beams.push(PlanBeam {
            number,
            name: name.clone(),
            machine: text(b, tags::TREATMENT_MACHINE_NAME).unwrap_or_default(),
            radiation: text(b, tags::RADIATION_TYPE).unwrap_or_default(),
            energy: float(cp, tags::NOMINAL_BEAM_ENERGY)
                .ok_or_else(|| beam_fail("no Nominal Beam Energy in the first control point"))?,
            fluence_mode_id: fluence
                .filter(|f| text(f, tags::FLUENCE_MODE).as_deref() == Some("NON_STANDARD"))
                .and_then(|f| text(f, tags::FLUENCE_MODE_ID)),
            gantry_deg: float(cp, tags::GANTRY_ANGLE).unwrap_or(0.0),
            collimator_deg: float(cp, tags::BEAM_LIMITING_DEVICE_ANGLE).unwrap_or(0.0),
            couch_deg: float(cp, tags::PATIENT_SUPPORT_ANGLE).unwrap_or(0.0),
            isocentre_mm: [iso[0], iso[1], iso[2]],
            ssd_mm: float(cp, tags::SOURCE_TO_SURFACE_DISTANCE),
            jaw_x_mm: jaw_x,
            jaw_y_mm: jaw_y,
            mlc_boundaries_mm: boundaries,
            mlc_positions_mm: mlc,
            meterset_mu: meterset,
            beam_dose_gy: r.and_then(|r| float(r, tags::BEAM_DOSE)),
            control_points: items(b, tags::CONTROL_POINT_SEQUENCE).len(),
            wedge_ids: items(b, tags::WEDGE_SEQUENCE)
                .iter()
                .map(|w| text(w, tags::WEDGE_ID).unwrap_or_default())
                .collect(),
        });
    }
    if beams.is_empty() {
        return Err(fail(
            "the plan holds no beams".into(),
            "export a plan with its Beam Sequence",
        ));
    }
    Ok(Plan {
        label: text(&obj, tags::RT_PLAN_LABEL).unwrap_or_default(),
        beams,
    })
}
