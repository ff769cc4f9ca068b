//! Film dosimetry through the runner: the demo's calibration and film tests, the files they
//! leave in the run folder, reusing a calibration file in a later campaign (and refusing an
//! edited one), matching two machines' films, and campaign mistakes.

use std::path::Path;

use crate::support::{arg, cli, demo_copy, relative, results, run_into_folder};

/// The demo's film-calibration test, as a site of a campaign.
const CALIBRATION_SITE: &str = r#"  - id: film-dosimetry
    name: Film dosimetry
    tests:
      - id: film-calibration-fh2611
        name: calibration
        kind: film-calibration
        criteria: plans
        film:
          scan: data/film/calibration-fh2611.tif
          lot: FH-2611
          pieces:
            - {label: p00, dose-gy: 0.0, region-px: [14, 14, 37, 37]}
            - {label: p01, dose-gy: 0.2, region-px: [58, 14, 81, 37]}
            - {label: p02, dose-gy: 0.4, region-px: [102, 14, 125, 37]}
            - {label: p03, dose-gy: 0.7, region-px: [146, 14, 169, 37]}
            - {label: p04, dose-gy: 1.0, region-px: [190, 14, 213, 37]}
            - {label: p05, dose-gy: 1.4, region-px: [14, 58, 37, 81]}
            - {label: p06, dose-gy: 1.8, region-px: [58, 58, 81, 81]}
            - {label: p07, dose-gy: 2.2, region-px: [102, 58, 125, 81]}
            - {label: p08, dose-gy: 2.6, region-px: [146, 58, 169, 81]}
            - {label: p09, dose-gy: 3.0, region-px: [190, 58, 213, 81]}
        analyses: [film]
"#;

/// A small campaign beside the demo's data (both machines) that reads the brain-metastasis
/// film with the calibration `calibration` (a `film:` key and its value), after the sites in
/// `before` (empty, or [`CALIBRATION_SITE`]).
fn film_campaign(dir: &Path, calibration: &str, lot: &str) -> std::path::PathBuf {
    film_campaign_after(dir, "", calibration, lot)
}

fn film_campaign_after(
    dir: &Path,
    before: &str,
    calibration: &str,
    lot: &str,
) -> std::path::PathBuf {
    let text = format!(
        r#"beamproof-campaign: 1
id: film-only
title: Film reread with a stored calibration
institution: Fernhollow Radiotherapy Centre (invented)
date: 2026-11-27
tps: {{name: Example planning system, version: "12.1", beam-model: 6X}}
machines:
  - id: lin-a
    beams: [{{id: 6x, modality: photon, energy: 6}}]
  - id: lin-b
    beams: [{{id: 6x, modality: photon, energy: 6}}]
criteria:
  plans:
    gamma: [{{dose-percent: 3, dta-mm: 2}}, {{dose-percent: 2, dta-mm: 1}}]
sites:
{before}  - id: brain
    name: Brain
    tests:
      - id: film-brain
        name: brain film
        kind: plane
        beam: 6x
        film:
          scan: data/{{machine}}/film-brain-mets.tif
          lot: {lot}
          {calibration}
          fiducials:
            - {{label: A, pixel: [32.4, 253.5], position-mm: [-40, -40]}}
            - {{label: B, pixel: [259.2, 256.7], position-mm: [40, -40]}}
            - {{label: C, pixel: [262.4, 29.9], position-mm: [40, 40]}}
            - {{label: D, pixel: [35.6, 26.8], position-mm: [-40, 40]}}
          region-mm: [-42, 42, -44, 42]
          unexposed-px: [298, 50, 315, 230]
        calculated:
          file: data/tps/brain-mets-6x.dcm
          patient-position: HFS
          isocentre-mm: [10.0, -50.0, 25.0]
        criteria: plans
        analyses: [film, gamma]
"#
    );
    let p = dir.join("film-only.yaml");
    std::fs::write(&p, text).expect("write campaign");
    p
}

fn test_record<'a>(r: &'a serde_json::Value, id: &str) -> &'a serde_json::Value {
    r["sites"]
        .as_array()
        .expect("sites")
        .iter()
        .flat_map(|s| s["tests"].as_array().expect("tests"))
        .find(|t| t["id"] == id)
        .unwrap_or_else(|| panic!("no test {id}"))
}

#[test]
fn the_demo_film_is_calibrated_read_placed_and_gamma_compared() {
    let demo = demo_copy("film-demo");
    let dir = demo.parent().expect("dir");
    let campaign = film_campaign_after(
        dir,
        CALIBRATION_SITE,
        "calibration: film-calibration-fh2611",
        "FH-2611",
    );
    let (out, o) = run_into_folder(&campaign, "lin-b");
    assert_eq!(o.code, 0, "{}{}", o.stdout, o.stderr);
    let r = results(&out);
    let cal = test_record(&r, "film-calibration-fh2611");
    assert_eq!(cal["status"], "pass");
    assert_eq!(
        cal["products"][0]["file"],
        "calibrations/film-calibration-fh2611.json"
    );
    let film = test_record(&r, "film-brain");
    assert_eq!(film["status"], "pass");
    assert_eq!(film["analyses"][0]["plugin"], "film");
    assert_eq!(film["analyses"][1]["plugin"], "gamma");
    assert_eq!(film["products"][0]["file"], "derived/film-brain.csv");
    // The gamma analysis ran on the film's plane: 2D, about 2000 points above the threshold.
    let points = film["analyses"][1]["output"]["metrics"]
        .as_array()
        .expect("metrics")
        .iter()
        .find(|m| m["id"] == "points-evaluated")
        .and_then(|m| m["value"].as_f64())
        .expect("points");
    assert!(points > 1500.0, "{points}");
    // The scan, the calibration file and the dose plane are in the run folder and its
    // manifest, and the folder verifies.
    let manifest = std::fs::read_to_string(out.join("manifest.sha256")).expect("manifest");
    for f in [
        "inputs/data/lin-b/film-brain-mets.tif",
        "inputs/data/film/calibration-fh2611.tif",
        "calibrations/film-calibration-fh2611.json",
        "derived/film-brain.csv",
    ] {
        assert!(
            manifest.contains(&format!("  {f}\n")),
            "{f} not in the manifest"
        );
    }
    let v = cli(&["verify", arg(&out)]);
    assert_eq!(v.code, 0, "{}{}", v.stdout, v.stderr);
    // The dose plane reads back as a data CSV plane in Gy with the film's maximum (the
    // invented plan's 2 Gy, 0.97 x 1.05 + 0.02 of it at the largest target: about 2.08 Gy).
    let text = std::fs::read_to_string(out.join("derived/film-brain.csv")).expect("csv");
    assert!(text.starts_with("# beamproof-data: 1\n# shape: plane\n# plane: xy\n"));
    let max = text
        .lines()
        .filter(|l| !l.starts_with('#') && !l.starts_with("y\\x"))
        .flat_map(|l| l.split(',').skip(1))
        .filter_map(|v| v.parse::<f64>().ok())
        .fold(0.0, f64::max);
    assert!((max - 2.08).abs() < 0.06, "{max}");
}

#[test]
fn a_stored_calibration_is_reused_and_an_edited_one_refused() {
    let demo = demo_copy("film-reuse");
    let dir = demo.parent().expect("dir").to_path_buf();
    let campaign = film_campaign_after(
        &dir,
        CALIBRATION_SITE,
        "calibration: film-calibration-fh2611",
        "FH-2611",
    );
    let (out, o) = run_into_folder(&campaign, "lin-a");
    assert_eq!(o.code, 0, "{}{}", o.stdout, o.stderr);
    let stored = dir.join("calibration-fh2611.json");
    std::fs::copy(
        out.join("calibrations/film-calibration-fh2611.json"),
        &stored,
    )
    .expect("copy calibration");
    let c = film_campaign(&dir, "calibration-file: calibration-fh2611.json", "FH-2611");
    let run = dir.join("reuse-run");
    let o = cli(&["run", arg(&c), "--machine", "lin-a", "--out", arg(&run)]);
    assert_eq!(o.code, 0, "{}{}", o.stdout, o.stderr);
    let r = results(&run);
    let t = test_record(&r, "film-brain");
    assert_eq!(t["status"], "pass");
    let roles: Vec<&str> = t["inputs"]
        .as_array()
        .expect("inputs")
        .iter()
        .filter_map(|i| i["role"].as_str())
        .collect();
    assert!(roles.contains(&"film calibration"), "{roles:?}");
    // Another lot is refused before anything runs.
    let c = film_campaign(&dir, "calibration-file: calibration-fh2611.json", "FH-9999");
    let o = cli(&["check", arg(&c), "--machine", "lin-a"]);
    assert_eq!(o.code, 2);
    assert!(
        o.stderr
            .contains("the film is from lot `FH-9999` but calibration file `calibration-fh2611.json` is of lot `FH-2611`"),
        "{}",
        o.stderr
    );
    // An edited calibration is refused.
    let text = std::fs::read_to_string(&stored).expect("read");
    let edited = text.replacen("\"dose_gy\": 3.0", "\"dose_gy\": 3.1", 1);
    assert_ne!(edited, text);
    std::fs::write(&stored, edited).expect("write");
    let c = film_campaign(&dir, "calibration-file: calibration-fh2611.json", "FH-2611");
    let o = cli(&["check", arg(&c), "--machine", "lin-a"]);
    assert_eq!(o.code, 2);
    assert!(
        o.stderr.contains("was edited after the run that fitted it"),
        "{}",
        o.stderr
    );
}

#[test]
fn the_two_machines_films_are_matched_through_their_dose_planes() {
    let demo = demo_copy("film-match");
    let dir = demo.parent().expect("dir");
    let c = film_campaign_after(
        dir,
        CALIBRATION_SITE,
        "calibration: film-calibration-fh2611",
        "FH-2611",
    );
    let (run_a, run_b) = (dir.join("run-a"), dir.join("run-b"));
    for (m, out) in [("lin-a", &run_a), ("lin-b", &run_b)] {
        let o = cli(&["run", arg(&c), "--machine", m, "--out", arg(out)]);
        assert_eq!(o.code, 0, "{}{}", o.stdout, o.stderr);
    }
    let out = dir.join("match");
    let o = cli(&["compare", arg(&run_a), arg(&run_b), "--out", arg(&out)]);
    // The two films agree at 1 %/1 mm on more than 95 % of the plane (lin-a reads 0.6 % low,
    // lin-b's fields are 0.3 mm wider: the demo's invented deviations).
    assert_eq!(o.code, 0, "{}{}", o.stdout, o.stderr);
    let r = results(&out);
    assert_eq!(r["summary"]["verdict"], "MATCHED");
    let t = test_record(&r, "film-brain");
    assert_eq!(t["analyses"][0]["plugin"], "gamma");
    assert_ne!(t["analyses"][0]["status"], "error");
    assert!(
        r["summary"]["notes"]
            .as_array()
            .expect("notes")
            .iter()
            .any(|n| n
                .as_str()
                .is_some_and(|s| s.contains("film-calibration-fh2611: not compared"))),
        "{}",
        r["summary"]["notes"]
    );
}

#[test]
fn film_mistakes_in_the_campaign_are_named() {
    let campaign = demo_copy("film-mistakes");
    let data = campaign.parent().expect("dir");
    // A calibration that is not a film-calibration test run before this one.
    let c = film_campaign(data, "calibration: nowhere", "FH-2611");
    let o = cli(&["check", arg(&c), "--machine", "lin-a"]);
    assert_eq!(o.code, 2);
    assert!(
        relative(&o.stderr, data).contains(
            "calibration `nowhere` is not a film-calibration test run before this one for machine `lin-a`"
        ),
        "{}",
        o.stderr
    );
    // Both calibration sources, and too few fiducials.
    let c = film_campaign(
        data,
        "calibration: x\n          calibration-file: y.json",
        "FH-2611",
    );
    let text = std::fs::read_to_string(&c).expect("read").replace(
        "            - {label: C, pixel: [262.4, 29.9], position-mm: [40, 40]}\n            - {label: D, pixel: [35.6, 26.8], position-mm: [-40, 40]}\n",
        "",
    );
    std::fs::write(&c, text).expect("write");
    let o = cli(&["check", arg(&c), "--machine", "lin-a"]);
    assert_eq!(o.code, 2);
    assert!(
        o.stderr
            .contains("a measured film needs exactly one of `calibration` and `calibration-file`"),
        "{}",
        o.stderr
    );
    assert!(
        o.stderr
            .contains("2 fiducial marks; at least three are needed"),
        "{}",
        o.stderr
    );
    // A film block in a point-dose test, and measured data beside a film.
    let c = film_campaign(data, "calibration: x", "FH-2611");
    let text = std::fs::read_to_string(&c)
        .expect("read")
        .replace("kind: plane", "kind: point-dose");
    std::fs::write(&c, text).expect("write");
    let o = cli(&["check", arg(&c), "--machine", "lin-a"]);
    assert!(
        o.stderr
            .contains("`film` belongs to plane and film-calibration tests, not to kind point-dose"),
        "{}",
        o.stderr
    );
    let c = film_campaign(data, "calibration: x", "FH-2611");
    let text = std::fs::read_to_string(&c).expect("read").replace(
        "        calculated:\n",
        "        measured: data/lin-a/film-6x-10x10.csv\n        calculated:\n",
    );
    std::fs::write(&c, text).expect("write");
    let o = cli(&["check", arg(&c), "--machine", "lin-a"]);
    assert!(
        o.stderr
            .contains("a test with a `film:` block takes its measured plane from the film"),
        "{}",
        o.stderr
    );
}
