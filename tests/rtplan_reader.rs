//! The RT Plan reader against fixtures written and read back by pydicom
//! (tests/fixtures/rtplan/make_fixtures.py).

use beamproof_engine::diag::Diagnostic;
use beamproof_engine::readers::rtplan::Plan;

use crate::support::root;

/// The reader on a file's bytes, as the input store hands them over.
fn read_plan(path: &std::path::Path) -> Result<Plan, Diagnostic> {
    let bytes = std::fs::read(path).expect("fixture");
    beamproof_engine::readers::rtplan::read_plan(path, &bytes)
}

#[test]
fn two_beams_match_pydicom() {
    let dir = root().join("tests/fixtures/rtplan");
    let expected: serde_json::Value = serde_json::from_str(
        &std::fs::read_to_string(dir.join("two_beams.expected.json")).expect("expected"),
    )
    .expect("json");
    let plan =
        read_plan(&dir.join("two_beams.dcm")).unwrap_or_else(|d| panic!("{}", d.render(None)));
    assert_eq!(plan.label, expected["label"].as_str().expect("label"));
    let want = expected["beams"].as_array().expect("beams");
    assert_eq!(plan.beams.len(), want.len());
    let floats = |v: &serde_json::Value| -> Vec<f64> {
        v.as_array()
            .expect("array")
            .iter()
            .filter_map(|x| x.as_f64())
            .collect()
    };
    for (b, w) in plan.beams.iter().zip(want) {
        assert_eq!(b.number, w["number"].as_i64().expect("number"));
        assert_eq!(b.name, w["name"].as_str().expect("name"));
        assert_eq!(b.radiation, w["radiation"].as_str().expect("radiation"));
        assert_eq!(b.energy, w["energy"].as_f64().expect("energy"));
        assert_eq!(b.fluence_mode_id.as_deref(), w["fluence_id"].as_str());
        assert_eq!(
            (b.gantry_deg, b.collimator_deg, b.couch_deg),
            (
                w["gantry"].as_f64().expect("g"),
                w["collimator"].as_f64().expect("c"),
                w["couch"].as_f64().expect("t")
            )
        );
        assert_eq!(b.isocentre_mm.to_vec(), floats(&w["isocentre"]));
        assert_eq!(b.ssd_mm, w["ssd"].as_f64());
        assert_eq!(b.jaw_x_mm.map(|j| j.to_vec()), Some(floats(&w["jaw_x"])));
        assert_eq!(b.jaw_y_mm.map(|j| j.to_vec()), Some(floats(&w["jaw_y"])));
        assert_eq!(b.mlc_positions_mm, floats(&w["mlc"]));
        assert_eq!(b.mlc_boundaries_mm, floats(&w["boundaries"]));
        assert_eq!(b.meterset_mu, w["meterset"].as_f64().expect("meterset"));
        assert_eq!(b.beam_dose_gy, w["beam_dose"].as_f64());
    }
}

#[test]
fn a_plan_without_fraction_group_is_refused() {
    let path = root().join("tests/fixtures/rtplan/no_fraction_group.dcm");
    let e = read_plan(&path).expect_err("no fraction group");
    assert_eq!(
        e.message,
        "the plan has no fraction group, so no beam metersets"
    );
    assert_eq!(
        e.help.as_deref(),
        Some("export the plan with its fraction group (Fraction Group Sequence)")
    );
}

#[test]
fn an_rt_dose_is_not_a_plan() {
    let e = read_plan(&root().join("tests/fixtures/rtdose/grid3d_explicit.dcm")).expect_err("dose");
    assert_eq!(
        e.message,
        "not an RT Plan: SOP Class UID 1.2.840.10008.5.1.4.1.1.481.2"
    );
}
