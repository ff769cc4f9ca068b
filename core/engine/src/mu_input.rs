//! Preparing a monitor-unit check: the beam-data file, and the beams, either written in the
//! campaign or read from a DICOM RT Plan, with their geometry resolved at the calculation point
//! (depth, source-to-point distance, position in the beam's eye view) and the planning
//! system's dose there (from the campaign, per-beam RT Dose files, or the plan's beam dose).
//!
//! Plan geometry (IEC 61217, couch at 0): with gantry angle g the source sits at
//! SAD (sin g, 0, cos g) from the isocentre in fixed coordinates, so a point p (relative to the
//! isocentre) lies at SPD = SAD - p.u along the central axis, u = (sin g, 0, cos g), and at
//! depth SPD - SSD in a flat phantom. Its beam's-eye-view coordinates are the gantry
//! rotation, x_g = p_x cos g - p_z sin g, y_g = p_y, followed by the collimator rotation c,
//! x_b = x_g cos c + y_g sin c, y_b = -x_g sin c + y_g cos c, projected to the isocentre plane
//! by SAD / SPD.

use std::path::Path;

use beamproof_api::mu::{BeamData, Leaves, MuBeam, MuInput, MuSetup};
use beamproof_api::{BeamInfo, DatasetData};

use crate::campaign::{Campaign, InputSpec, Machine, MuSpec};
use crate::diag::Diagnostic;
use crate::input_store::{InputFile, InputStore};
use crate::prepare::input_at;
use crate::readers::rtplan::{Plan, PlanBeam, read_plan};
use crate::readers::{beam_data, read_dataset};

/// Tolerance for "the point is at the isocentre distance": SSD + depth within this of the SAD
/// makes a written beam isocentric when its setup is not stated (common practice, no source).
pub const ISOCENTRIC_WITHIN_CM: f64 = 0.5;

/// The inputs of a prepared MU check, with the files read (for the run folder).
#[derive(Debug, Clone, PartialEq)]
pub struct PreparedMu {
    pub input: MuInput,
    /// (role, relative path, sha256) of every file this test read.
    pub files: Vec<(&'static str, String, String)>,
}

/// Read one file of the `mu:` block through the store (once, whichever test names it).
fn file(
    campaign: &Campaign,
    machine: &Machine,
    spec: &InputSpec,
    extra: &[(&str, String)],
    what: &str,
    store: &mut InputStore,
    diags: &mut Vec<Diagnostic>,
) -> Option<(String, std::path::PathBuf, InputFile)> {
    let mut written = spec.path_for(&machine.id);
    for (k, v) in extra {
        written = written.replace(k, v);
    }
    input_at(campaign, machine, spec, &written, what, store, diags)
}

/// Prepare the `mu:` block of a test for one machine; problems go to `diags`.
pub fn prepare_mu(
    campaign: &Campaign,
    machine: &Machine,
    spec: &MuSpec,
    beam: Option<&BeamInfo>,
    files: &mut InputStore,
    diags: &mut Vec<Diagnostic>,
) -> Option<PreparedMu> {
    let mut read_files = Vec::new();
    let (rel, _, beam_data_file) = file(
        campaign,
        machine,
        &spec.beam_data,
        &[],
        "beam-data file",
        files,
        diags,
    )?;
    let loaded = match beam_data::read(files, &rel) {
        Ok(b) => b,
        Err(mut e) => {
            diags.append(&mut e);
            return None;
        }
    };
    let at = |m: String| {
        Diagnostic::at(
            &campaign.path,
            spec.beam_data.pos.line,
            spec.beam_data.pos.column,
            m,
        )
    };
    if loaded.data.machine != machine.id {
        diags.push(
            at(format!(
                "beam data `{rel}` were measured on machine `{}`, the test runs on `{}`",
                loaded.data.machine, machine.id
            ))
            .help("use `{machine}` in the beam-data path so each machine gets its own data"),
        );
        return None;
    }
    if let Some(b) = beam
        && loaded.data.beam != b.id
    {
        diags.push(
            at(format!(
                "beam data `{rel}` are for beam `{}`, the test's beam is `{}`",
                loaded.data.beam, b.id
            ))
            .help("point `beam-data` at the data of the test's beam"),
        );
        return None;
    }
    if let Some(b) = beam
        && ((b.energy - loaded.data.energy_mv).abs() > 1e-6 || b.fff != loaded.data.fff)
    {
        diags.push(
            at(format!(
                "beam data `{rel}` describe {} MV{}, the test's beam `{}` is {} MV{}",
                loaded.data.energy_mv,
                if loaded.data.fff { " FFF" } else { "" },
                b.id,
                b.energy,
                if b.fff { " FFF" } else { "" }
            ))
            .help("point `beam-data` at the data of the test's beam"),
        );
        return None;
    }
    read_files.push(("beam-data", rel.clone(), beam_data_file.sha256));
    for (t_rel, sha) in loaded.tables {
        read_files.push(("beam-data table", t_rel, sha));
    }
    let data = loaded.data;
    let (beams, plan_label) = match &spec.plan {
        None => (written_beams(spec, &data), None),
        Some(plan_spec) => {
            let (prel, ppath, plan_file) =
                file(campaign, machine, plan_spec, &[], "plan", files, diags)?;
            let plan = match read_plan(&ppath, &plan_file.bytes) {
                Ok(p) => p,
                Err(d) => {
                    diags.push(d);
                    return None;
                }
            };
            read_files.push(("plan", prel.clone(), plan_file.sha256));
            let mut beams = match plan_beams(&plan, &prel, spec.point_mm, &data) {
                Ok(b) => b,
                Err(m) => {
                    diags.push(
                        Diagnostic::at(
                            &campaign.path,
                            plan_spec.pos.line,
                            plan_spec.pos.column,
                            format!("plan `{prel}`: {m}"),
                        )
                        .help("check only static photon beams of the test's energy; dynamic and electron beams are outside this check"),
                    );
                    return None;
                }
            };
            if let Some(ds) = &spec.beam_doses {
                for (b, pb) in beams.iter_mut().zip(&plan.beams) {
                    let number = pb.number.to_string();
                    let (drel, dpath, dose_file) = file(
                        campaign,
                        machine,
                        ds,
                        &[("{beam}", number.clone())],
                        "beam dose",
                        files,
                        diags,
                    )?;
                    let dataset = match read_dataset(
                        &dpath,
                        &dose_file.bytes,
                        &drel,
                        ds.placement.as_ref(),
                    ) {
                        Ok(d) => d,
                        Err(d) => {
                            diags.push(d);
                            return None;
                        }
                    };
                    let DatasetData::Grid(g) = &dataset.data else {
                        diags.push(
                            Diagnostic::file(&dpath, "a beam dose must be a dose grid")
                                .help("give the planning system's RT Dose of this beam"),
                        );
                        return None;
                    };
                    let p = spec.point_mm;
                    match g.sample(p[0], p[1], p[2]) {
                        Some(v) => {
                            b.tps_dose_gy = Some(v);
                            b.tps_dose_source = drel.clone();
                        }
                        None => {
                            diags.push(
                                Diagnostic::file(
                                    &dpath,
                                    format!(
                                        "the calculation point ({}, {}, {}) mm lies outside the dose grid of beam {number}",
                                        p[0], p[1], p[2]
                                    ),
                                )
                                .help("move `point-mm` inside the calculated dose, or check the placement"),
                            );
                            return None;
                        }
                    }
                    read_files.push(("beam dose", drel.clone(), dose_file.sha256));
                }
            }
            (beams, Some(plan.label.clone()))
        }
    };
    Some(PreparedMu {
        input: MuInput {
            beam_data: data,
            beams,
            plan: plan_label,
        },
        files: read_files,
    })
}

fn written_beams(spec: &MuSpec, data: &BeamData) -> Vec<MuBeam> {
    spec.beams
        .iter()
        .map(|b| {
            let spd = b.ssd_cm + b.depth_cm;
            MuBeam {
                id: b.id.clone(),
                source: "campaign".into(),
                setup: b
                    .setup
                    .unwrap_or(if (spd - data.sad_cm).abs() <= ISOCENTRIC_WITHIN_CM {
                        MuSetup::Sad
                    } else {
                        MuSetup::Ssd
                    }),
                ssd_cm: b.ssd_cm,
                depth_cm: b.depth_cm,
                spd_cm: spd,
                off_axis_cm: b.off_axis_cm,
                jaws_cm: b.jaws_cm,
                leaves: None,
                wedge: b.wedge.clone(),
                tray: b.tray,
                mu: b.mu,
                tps_dose_gy: Some(b.tps_dose_gy),
                tps_dose_source: "campaign".into(),
            }
        })
        .collect()
}

/// The beams of a plan as MU-check beams at `point_mm` (IEC fixed, relative to the
/// isocentre). Refuses beams this check cannot calculate, naming them.
pub fn plan_beams(
    plan: &Plan,
    source: &str,
    point_mm: [f64; 3],
    data: &BeamData,
) -> Result<Vec<MuBeam>, String> {
    plan.beams
        .iter()
        .map(|b| plan_beam(b, source, point_mm, data))
        .collect()
}

fn plan_beam(
    b: &PlanBeam,
    source: &str,
    p_mm: [f64; 3],
    data: &BeamData,
) -> Result<MuBeam, String> {
    let sad_cm = data.sad_cm;
    let label = format!("{} {}", b.number, b.name);
    let refuse = |why: String| Err(format!("beam {label}: {why}"));
    if !b.radiation.eq_ignore_ascii_case("PHOTON") {
        return refuse(format!(
            "radiation {} is not supported (photon beams only)",
            b.radiation
        ));
    }
    if b.control_points > 2 {
        return refuse(format!(
            "{} control points: dynamic beams (IMRT, VMAT, dynamic wedges) are outside the TG-71 hand calculation",
            b.control_points
        ));
    }
    if (b.energy - data.energy_mv).abs() > 1e-6 {
        return refuse(format!(
            "nominal energy {} MV differs from the beam data {} ({} MV)",
            b.energy, data.source, data.energy_mv
        ));
    }
    if data.fff != b.fluence_mode_id.is_some() {
        return refuse(format!(
            "fluence mode {} does not match the beam data {} ({})",
            b.fluence_mode_id.as_deref().unwrap_or("standard"),
            data.source,
            if data.fff {
                "flattening-filter-free"
            } else {
                "flattened"
            }
        ));
    }
    let Some(ssd_mm) = b.ssd_mm else {
        return refuse("no Source to Surface Distance in the first control point".into());
    };
    if b.couch_deg.abs() > 1e-6 && p_mm.iter().any(|v| v.abs() > 1e-6) {
        return refuse(format!(
            "couch angle {} degrees with a point away from the isocentre is not supported",
            b.couch_deg
        ));
    }
    let leaves = if b.mlc_positions_mm.is_empty() {
        None
    } else {
        let n = b.mlc_boundaries_mm.len() - 1;
        Some(Leaves {
            boundaries: b.mlc_boundaries_mm.iter().map(|v| v / 10.0).collect(),
            bank_a: b.mlc_positions_mm[..n].iter().map(|v| v / 10.0).collect(),
            bank_b: b.mlc_positions_mm[n..].iter().map(|v| v / 10.0).collect(),
        })
    };
    // Jaws, or the leaves' extent where a jaw pair is absent (jawless designs).
    let jx = match (b.jaw_x_mm, &leaves) {
        (Some(j), _) => [j[0] / 10.0, j[1] / 10.0],
        (None, Some(l)) => [
            l.bank_a.iter().copied().fold(f64::INFINITY, f64::min),
            l.bank_b.iter().copied().fold(f64::NEG_INFINITY, f64::max),
        ],
        (None, None) => return refuse("no X jaws and no leaves in the first control point".into()),
    };
    let jy = match (b.jaw_y_mm, &leaves) {
        (Some(j), _) => [j[0] / 10.0, j[1] / 10.0],
        (None, Some(l)) => [l.boundaries[0], l.boundaries[l.boundaries.len() - 1]],
        (None, None) => return refuse("no Y jaws and no leaves in the first control point".into()),
    };
    if jx[1] <= jx[0] || jy[1] <= jy[0] {
        return refuse("the jaws are closed".into());
    }
    let (g, c) = (b.gantry_deg.to_radians(), b.collimator_deg.to_radians());
    let p = [p_mm[0] / 10.0, p_mm[1] / 10.0, p_mm[2] / 10.0];
    let along = p[0] * g.sin() + p[2] * g.cos();
    let spd = sad_cm - along;
    let ssd = ssd_mm / 10.0;
    let depth = spd - ssd;
    if depth <= 0.0 {
        return refuse(format!(
            "the point lies outside the phantom (depth {depth:.2} cm from SSD {ssd:.1} cm)"
        ));
    }
    let xg = p[0] * g.cos() - p[2] * g.sin();
    let yg = p[1];
    let (xb, yb) = (xg * c.cos() + yg * c.sin(), -xg * c.sin() + yg * c.cos());
    let scale = sad_cm / spd;
    Ok(MuBeam {
        id: label,
        source: source.to_string(),
        setup: if (spd - sad_cm).abs() <= ISOCENTRIC_WITHIN_CM {
            MuSetup::Sad
        } else {
            MuSetup::Ssd
        },
        ssd_cm: ssd,
        depth_cm: depth,
        spd_cm: spd,
        off_axis_cm: [xb * scale, yb * scale],
        jaws_cm: [jx[0], jx[1], jy[0], jy[1]],
        leaves,
        wedge: b.wedge_ids.first().cloned(),
        tray: false,
        mu: b.meterset_mu,
        tps_dose_gy: b.beam_dose_gy,
        tps_dose_source: if b.beam_dose_gy.is_some() {
            format!("beam dose of {source}")
        } else {
            String::new()
        },
    })
}

/// Read an RT Plan and a beam-data file outside a campaign (the `mu` command).
pub fn standalone(
    beam_data_path: &Path,
    plan_path: &Path,
    point_mm: [f64; 3],
) -> Result<MuInput, Vec<Diagnostic>> {
    let name = |p: &Path| {
        p.file_name()
            .map(|n| n.to_string_lossy().into_owned())
            .unwrap_or_default()
    };
    let folder = beam_data_path.parent().unwrap_or(Path::new(""));
    let mut store = InputStore::new(folder, crate::input_store::DEFAULT_MAX_INPUT_BYTES);
    let data = beam_data::read(&mut store, &name(beam_data_path))?.data;
    let plan_bytes = crate::readers::read_file(plan_path).map_err(|d| vec![d])?;
    let plan = read_plan(plan_path, &plan_bytes).map_err(|d| vec![d])?;
    let beams = plan_beams(&plan, &name(plan_path), point_mm, &data).map_err(|m| {
        vec![Diagnostic::file(plan_path, m).help(
            "check only static photon beams; dynamic and electron beams are outside this check",
        )]
    })?;
    Ok(MuInput {
        beam_data: data,
        beams,
        plan: Some(plan.label),
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use beamproof_api::mu::{Table1, Table2};

    fn data() -> BeamData {
        let t1 = Table1 {
            axis: vec![4.0, 40.0],
            values: vec![1.0, 1.0],
        };
        let t2 = Table2 {
            depth_cm: vec![1.5, 30.0],
            columns: vec![4.0, 40.0],
            values: vec![1.0; 4],
        };
        BeamData {
            source: "bd.yaml".into(),
            machine: "m".into(),
            beam: "6x".into(),
            energy_mv: 6.0,
            fff: false,
            sad_cm: 100.0,
            ssd0_cm: 100.0,
            pdd_ssd_cm: None,
            d0_cm: 1.5,
            field0_cm: 10.0,
            dose_per_mu_cgy: 1.0,
            pdd: None,
            tpr: Some(t2),
            sc: t1.clone(),
            sp: t1,
            oar: None,
            tray_factor: None,
            wedges: Vec::new(),
        }
    }

    fn beam() -> PlanBeam {
        PlanBeam {
            number: 7,
            name: "RPO".into(),
            machine: "LINAC".into(),
            radiation: "PHOTON".into(),
            energy: 6.0,
            fluence_mode_id: None,
            gantry_deg: 210.0,
            collimator_deg: 90.0,
            couch_deg: 0.0,
            isocentre_mm: [0.0; 3],
            ssd_mm: Some(880.0),
            jaw_x_mm: Some([-50.0, 30.0]),
            jaw_y_mm: Some([-40.0, 60.0]),
            mlc_boundaries_mm: Vec::new(),
            mlc_positions_mm: Vec::new(),
            meterset_mu: 99.0,
            beam_dose_gy: None,
            control_points: 2,
            wedge_ids: Vec::new(),
        }
    }

    fn refusal(b: PlanBeam) -> String {
        plan_beam(&b, "p.dcm", [0.0; 3], &data()).expect_err("refused")
    }

    #[test]
    fn beams_outside_the_hand_calculation_are_refused_by_name() {
        let mut b = beam();
        b.radiation = "ELECTRON".into();
        assert_eq!(
            refusal(b),
            "beam 7 RPO: radiation ELECTRON is not supported (photon beams only)"
        );
        let mut b = beam();
        b.control_points = 178;
        assert!(refusal(b).starts_with("beam 7 RPO: 178 control points: dynamic beams"));
        let mut b = beam();
        b.fluence_mode_id = Some("FFF".into());
        assert_eq!(
            refusal(b),
            "beam 7 RPO: fluence mode FFF does not match the beam data bd.yaml (flattened)"
        );
        let mut b = beam();
        b.ssd_mm = None;
        assert_eq!(
            refusal(b),
            "beam 7 RPO: no Source to Surface Distance in the first control point"
        );
    }

    #[test]
    fn a_static_beam_at_the_isocentre_is_isocentric_at_sad_minus_ssd() {
        // Point at the isocentre: SPD = SAD = 100 cm whatever the angles, depth 100 - 88 = 12 cm,
        // on the axis; jaws converted from mm to cm as written (geometry by hand).
        let m = plan_beam(&beam(), "p.dcm", [0.0; 3], &data()).expect("accepted");
        assert_eq!(m.setup, MuSetup::Sad);
        assert!((m.depth_cm - 12.0).abs() < 1e-12 && (m.spd_cm - 100.0).abs() < 1e-12);
        assert_eq!(m.jaws_cm, [-5.0, 3.0, -4.0, 6.0]);
        assert_eq!(m.off_axis_cm, [0.0, 0.0]);
        assert_eq!(m.mu, 99.0);
    }

    #[test]
    fn the_collimator_rotates_the_beams_eye_view() {
        // Gantry 0, collimator 90: the fixed-Y point (0, 30, 0) mm lies at x_b = y sin 90 =
        // +3 cm, y_b = y cos 90 = 0 in the beam's eye view (rotation by hand).
        let mut b = beam();
        b.gantry_deg = 0.0;
        b.collimator_deg = 90.0;
        let m = plan_beam(&b, "p.dcm", [0.0, 30.0, 0.0], &data()).expect("accepted");
        assert!(
            (m.off_axis_cm[0] - 3.0).abs() < 1e-12,
            "{:?}",
            m.off_axis_cm
        );
        assert!(m.off_axis_cm[1].abs() < 1e-12);
    }
}
