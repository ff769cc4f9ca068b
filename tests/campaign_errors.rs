//! Bad input: each gives a clear message naming the place and what to do, exit code 2, no
//! panic and no output folder. Messages are compared whole.

use std::path::Path;

use crate::support::{cli, error_campaign_copy, relative, root, scratch};

/// Run `check` and `run` on a campaign; both must fail the same way and `run` must write nothing.
fn fails(campaign: &Path) -> String {
    let dir = campaign.parent().expect("dir");
    let c = cli(&["check", campaign.to_str().expect("utf8")]);
    assert_eq!(c.code, 2, "check should fail: {}", c.stdout);
    let out = dir.join("run-out");
    let r = cli(&[
        "run",
        campaign.to_str().expect("utf8"),
        "--machine",
        "lin-a",
        "--out",
        out.to_str().expect("utf8"),
    ]);
    assert_eq!(r.code, 2, "run should fail: {}", r.stdout);
    assert!(!out.exists(), "a failed run left an output folder");
    let leftovers: Vec<_> = std::fs::read_dir(dir)
        .expect("dir")
        .filter_map(Result::ok)
        .filter(|e| e.file_name().to_string_lossy().contains(".partial-"))
        .collect();
    assert!(leftovers.is_empty(), "a failed run left a partial folder");
    relative(&c.stderr, dir)
}

fn edit(path: &Path, from: &str, to: &str) {
    let text = std::fs::read_to_string(path).expect("read");
    assert!(text.contains(from), "{from:?} not in {}", path.display());
    std::fs::write(path, text.replacen(from, to, 1)).expect("write");
}

#[test]
fn malformed_yaml_points_at_the_syntax_error() {
    let dir = scratch("err-yaml");
    let c = dir.join("campaign.yaml");
    std::fs::write(
        &c,
        "beamproof-campaign: 1\nid: x\nmachines: [lin-a, {id: b\ntitle: y\n",
    )
    .expect("write");
    let msg = fails(&c);
    assert_eq!(
        msg,
        "error: YAML syntax error: while parsing a flow mapping, did not find expected ',' or '}'\n  --> campaign.yaml:4:6\n  |\n4 | title: y\n  |      ^\n  = help: fix the YAML syntax at this place (indentation, a missing `:` or an unclosed quote are common causes)\n\n1 problem found; nothing was run\n"
    );
}

#[test]
fn every_structural_reference_and_file_problem_is_reported_at_once() {
    let campaign = error_campaign_copy("err-many");
    edit(&campaign, "title: 6 MV", "titel: 6 MV");
    edit(
        &campaign,
        "energy: 10, fff: true}\n  - id: lin-b",
        "energy: ten, fff: true}\n  - id: lin-b",
    );
    edit(
        &campaign,
        "measured: data/{machine}/output-6x.csv",
        "measured: data/{machine}/output-6x-typo.csv",
    );
    edit(
        &campaign,
        "calculated: data/tps/prostate-points.csv",
        "calculated: data/tps/missing.csv",
    );
    edit(
        &campaign,
        "analyses: [point-dose]\n      - id: output-6x",
        "analyses: [point-dos]\n      - id: output-6x",
    );
    let msg = fails(&campaign);
    assert_eq!(
        msg,
        "error: unknown key `titel` in the campaign\n  --> campaign.yaml:6:1\n  |\n6 | titel: 6 MV beam model validation, bunkers 1 and 2\n  | ^\n  = help: did you mean `title`?\n\nerror: the campaign is missing the required key `title`\n  --> campaign.yaml:4:1\n  |\n4 | beamproof-campaign: 1\n  | ^\n  = help: add `title:` with the campaign's title\n\nerror: `energy` must be a number, found `ten`\n  --> campaign.yaml:20:47\n   |\n20 |       - {id: 10fff, modality: photon, energy: ten, fff: true}\n   |                                               ^\n   = help: write a plain number (MV for photons, MeV for electrons)\n\nerror: no analysis plugin named `point-dos`\n  --> campaign.yaml:59:20\n   |\n59 |         analyses: [point-dos]\n   |                    ^\n   = help: did you mean `point-dose`?\n\nerror: input file `data/lin-a/output-6x-typo.csv` (for machine `lin-a`) cannot be read: it does not exist\n  --> campaign.yaml:64:19\n   |\n64 |         measured: data/{machine}/output-6x-typo.csv\n   |                   ^\n   = help: expected at data/lin-a/output-6x-typo.csv\n\nerror: input file `data/tps/missing.csv` cannot be read: it does not exist\n  --> campaign.yaml:95:21\n   |\n95 |         calculated: data/tps/missing.csv\n   |                     ^\n   = help: expected at data/tps/missing.csv\n\nerror: input file `data/lin-b/output-6x-typo.csv` (for machine `lin-b`) cannot be read: it does not exist\n  --> campaign.yaml:64:19\n   |\n64 |         measured: data/{machine}/output-6x-typo.csv\n   |                   ^\n   = help: expected at data/lin-b/output-6x-typo.csv\n\n7 problems found; nothing was run\n"
    );
}

#[test]
fn csv_with_a_bad_number_names_file_and_line() {
    let campaign = error_campaign_copy("err-csv");
    edit(
        &campaign.with_file_name("data/lin-a/prostate-chamber.csv"),
        "rectum,0.0,-5.0,-35.0",
        "rectum,0.0,-5.O,-35.0",
    );
    let msg = fails(&campaign);
    assert_eq!(
        msg,
        "error: `-5.O` in column `y` is not a number\n  --> data/lin-a/prostate-chamber.csv:9\n  |\n9 | rectum,0.0,-5.O,-35.0,1.1249\n  = help: write a plain decimal number such as 1.25 (dot as decimal separator)\n\n1 problem found; nothing was run\n"
    );
}

#[test]
fn dicom_that_is_not_rt_dose_is_refused() {
    let campaign = error_campaign_copy("err-not-rtdose");
    std::fs::copy(
        root().join("tests/fixtures/rtdose/ct_image.dcm"),
        campaign.with_file_name("data/tps/open-6x-10x10.dcm"),
    )
    .expect("copy");
    let msg = fails(&campaign);
    assert_eq!(
        msg,
        "error: not an RT Dose object: SOP Class UID 1.2.840.10008.5.1.4.1.1.2, modality CT\n  --> data/tps/open-6x-10x10.dcm\n  = help: give the RT Dose file exported by the planning system (SOP Class 1.2.840.10008.5.1.4.1.1.481.2)\n\n1 problem found; nothing was run\n"
    );
}

#[test]
fn truncated_dicom_is_refused() {
    let campaign = error_campaign_copy("err-truncated");
    let path = campaign.with_file_name("data/tps/open-6x-10x10.dcm");
    let bytes = std::fs::read(&path).expect("read");
    std::fs::write(&path, &bytes[..bytes.len() / 2]).expect("write");
    let msg = fails(&campaign);
    assert_eq!(
        msg,
        // The declared length checked against the bytes that follow, before decoding (DICOM
        // PS3.5 7.1: the Pixel Data element's 4-byte length; byte offsets from the file start).
        "error: damaged or truncated DICOM: data element (7FE0,0010) at byte 890 declares 221892 bytes, but only 110495 follow\n  --> data/tps/open-6x-10x10.dcm\n  = help: the file is damaged or truncated; copy or export it again\n\n1 problem found; nothing was run\n"
    );
}

#[test]
fn mismatched_units_are_named() {
    let campaign = error_campaign_copy("err-units");
    edit(
        &campaign.with_file_name("data/tps/output-6x.csv"),
        "# dose-unit: Gy",
        "# dose-unit: %",
    );
    let msg = fails(&campaign);
    assert_eq!(
        msg,
        "error: mismatched dose units: measured `data/lin-a/output-6x.csv` is in Gy, calculated `data/tps/output-6x.csv` in %\n  --> campaign.yaml:60:9\n   |\n60 |       - id: output-6x\n   |         ^\n   = help: give both as absolute dose (Gy, cGy or mGy) or both as relative dose (%)\n\nerror: mismatched dose units: measured `data/lin-b/output-6x.csv` is in Gy, calculated `data/tps/output-6x.csv` in %\n  --> campaign.yaml:60:9\n   |\n60 |       - id: output-6x\n   |         ^\n   = help: give both as absolute dose (Gy, cGy or mGy) or both as relative dose (%)\n\n2 problems found; nothing was run\n"
    );
}

#[test]
fn unknown_machine_gets_a_suggestion() {
    let campaign = error_campaign_copy("err-machine");
    let o = cli(&[
        "run",
        campaign.to_str().expect("utf8"),
        "--machine",
        "lin-c",
    ]);
    assert_eq!(o.code, 2);
    assert_eq!(
        relative(&o.stderr, campaign.parent().expect("dir")),
        "error: machine `lin-c` is not described in the campaign\n  --> campaign.yaml\n  = help: did you mean `lin-a`? the campaign describes: lin-a, lin-b\n\n1 problem found; nothing was run\n"
    );
}

/// The place (line, column) of the first `needle` in the campaign file, 1-based.
fn place(campaign: &Path, needle: &str) -> (usize, usize) {
    let text = std::fs::read_to_string(campaign).expect("read");
    let at = text.find(needle).expect("needle");
    let line = text[..at].matches('\n').count() + 1;
    let column = at - text[..at].rfind('\n').map_or(0, |i| i + 1) + 1;
    (line, column)
}

#[test]
fn a_mistyped_metric_id_is_refused_before_it_can_leave_a_metric_unjudged() {
    // A criteria-set metric id that no analysis judges would be silently informational: a
    // 4 mm field-size error would then pass. Check and run refuse it with a suggestion.
    let campaign = crate::support::demo_copy("err-metric-typo");
    edit(
        &campaign,
        "      field-size-mm: {tolerance: 1, action: 2}\n",
        "      feild-size-mm: {tolerance: 1, action: 2}\n",
    );
    let (line, column) = place(&campaign, "feild-size-mm");
    let msg = fails(&campaign);
    assert!(
        msg.contains(&format!(
            "error: criteria set `small-fields` gives levels for metric `feild-size-mm`, which no analysis of its tests judges\n  --> campaign.yaml:{line}:{column}\n"
        )) && msg.contains("= help: did you mean `field-size-mm`?"),
        "{msg}"
    );
    // An id no analysis of the set's tests judges at all gets the list of those that are.
    let campaign = crate::support::demo_copy("err-metric-unknown");
    edit(
        &campaign,
        "      field-size-mm: {tolerance: 1, action: 2}\n",
        "      field-width: {tolerance: 1, action: 2}\n",
    );
    let msg = fails(&campaign);
    assert!(
        msg.contains("gives levels for metric `field-width`, which no analysis of its tests judges")
            && msg.contains("= help: metric ids the analyses of the tests using `small-fields` judge: centre-mm, dmax-mm, dref-mm, e0-mev, "),
        "{msg}"
    );
}

#[test]
fn a_criteria_set_lacking_what_an_analysis_judges_by_is_found_at_check() {
    let campaign = crate::support::demo_copy("err-set-lacks");
    edit(
        &campaign,
        "        criteria: chamber-in-water\n",
        "        criteria: array-plans\n",
    );
    let (line, column) = place(&campaign, "criteria: array-plans\n");
    let msg = fails(&campaign);
    assert!(
        msg.contains(&format!(
            "which has no `dose-difference-percent`; analysis `point-dose` judges by it\n  --> campaign.yaml:{line}:{}\n",
            column + "criteria: ".len()
        )),
        "{msg}"
    );
}

#[test]
fn a_campaign_without_a_date_fails_check_as_it_fails_run() {
    let campaign = crate::support::demo_copy("err-no-date");
    edit(&campaign, "date: 2026-11-20\n", "");
    let msg = fails(&campaign);
    assert!(
        msg.contains("error: no run date: the results record the date the measurements were analysed\n  --> campaign.yaml\n  = help: add `date: YYYY-MM-DD` to the campaign or pass --date YYYY-MM-DD"),
        "{msg}"
    );
    let o = cli(&[
        "check",
        campaign.to_str().expect("utf8"),
        "--machine",
        "lin-a",
        "--date",
        "2026-11-20",
    ]);
    assert_eq!(o.code, 0, "{}", o.stderr);
}

#[test]
fn a_point_label_that_matches_nothing_is_found_at_check() {
    let campaign = crate::support::demo_copy("err-point-label");
    // The brain-metastasis array labels its detectors b001, b002, ...
    let test = "        measured: data/{machine}/array-brain-mets-6x.csv\n        calculated:\n          file: data/tps/brain-mets-6x.dcm\n          patient-position: HFS\n          isocentre-mm: [10.0, -50.0, 25.0]\n        criteria: array-plans\n        analyses: [gamma]\n";
    edit(
        &campaign,
        test,
        &test.replace(
            "analyses: [gamma]",
            "analyses:\n          - plugin: gamma\n            params: {relative: true, normalisation-point: b0001}",
        ),
    );
    let (line, column) = place(&campaign, "normalisation-point: b0001");
    let msg = fails(&campaign);
    assert!(
        msg.contains(&format!(
            "error: `normalisation-point` of `gamma` names point `b0001`, which no point of data/lin-a/array-brain-mets-6x.csv carries\n  --> campaign.yaml:{line}:{column}\n"
        )) && msg.contains("= help: did you mean `b001`?"),
        "{msg}"
    );
    // A malformed coordinate triple is refused as a parameter.
    let campaign = crate::support::demo_copy("err-point-xyz");
    edit(
        &campaign,
        test,
        &test.replace(
            "analyses: [gamma]",
            "analyses:\n          - plugin: gamma\n            params: {relative: true, normalisation-point: '1,2'}",
        ),
    );
    let msg = fails(&campaign);
    assert!(
        msg.contains("parameter `normalisation-point` of `gamma` must be `x,y,z` (three numbers, mm) or a point label without commas, found \"1,2\""),
        "{msg}"
    );
}
