//! `beamproof gamma REF EVAL`: the one-off comparison outside a campaign.

use std::path::{Path, PathBuf};

use crate::support::{cli, relative, root, scratch};

fn flat_curve(dir: &Path, name: &str, dose: f64) -> PathBuf {
    let mut text = String::from(
        "# beamproof-data: 1\n# shape: curve\n# axis: x\n# dose-unit: %\n# position-unit: mm\nposition,dose\n",
    );
    for x in -40..=40 {
        text.push_str(&format!("{x},{dose}\n"));
    }
    let path = dir.join(name);
    std::fs::write(&path, text).expect("write");
    path
}

#[test]
fn flat_curves_give_the_dose_difference_over_the_criterion() {
    // Flat 100 % against flat 102 % at 3 %/2 mm global (normalised to the reference maximum,
    // 100 %): gamma = 2/3 at every point (Low et al 1998, flat region: dose difference / dD).
    let dir = scratch("gamma-cmd-flat");
    let r = flat_curve(&dir, "r.csv", 100.0);
    let e = flat_curve(&dir, "e.csv", 102.0);
    let map = dir.join("map.csv");
    let o = cli(&[
        "gamma",
        r.to_str().expect("utf8"),
        e.to_str().expect("utf8"),
        "--map",
        map.to_str().expect("utf8"),
    ]);
    assert_eq!(o.code, 0, "{}", o.stderr);
    assert!(
        o.stdout.contains(
            "\n3%/2mm global | 10 | 81 | 100.0 | 0.67 | 0.67 | 0.67 | 0.67 | 0.67 | PASS\n"
        ),
        "{}",
        o.stdout
    );
    let text = std::fs::read_to_string(&map).expect("map");
    assert_eq!(
        text.lines().next(),
        Some("x_mm,y_mm,z_mm,reference_dose,gamma")
    );
    assert_eq!(text.lines().nth(1), Some("-40,0,0,100,0.6667"));
    assert_eq!(text.lines().count(), 82);
    // The map is never replaced.
    let again = cli(&[
        "gamma",
        r.to_str().expect("utf8"),
        e.to_str().expect("utf8"),
        "--map",
        map.to_str().expect("utf8"),
    ]);
    assert_eq!(again.code, 2);
    assert!(again.stderr.ends_with("already exists\n  = help: choose another --map file; existing files are never replaced\n"), "{}", again.stderr);
}

#[test]
fn several_criteria_give_pass_rates_and_every_statistic_when_asked() {
    // Flat 100 % against 102 %: gamma = 2 / dD (Low et al 1998, flat region), so 3 %/2 mm
    // gives 0.67, 1 %/1 mm 2.00 and 4 %/4 mm 0.50. By default the criteria after the first
    // (here one proportional pair, searched apart from 3 %/2 mm) get exact pass rates only.
    let dir = scratch("gamma-cmd-sweep");
    let r = flat_curve(&dir, "r.csv", 100.0);
    let e = flat_curve(&dir, "e.csv", 102.0);
    let args = |extra: &[&'static str]| {
        let mut v = vec![
            "gamma".to_string(),
            r.to_str().expect("utf8").to_string(),
            e.to_str().expect("utf8").to_string(),
        ];
        for c in ["3%/2mm", "1%/1mm", "4%/4mm"] {
            v.push("--criteria".into());
            v.push(c.into());
        }
        v.extend(extra.iter().map(|s| s.to_string()));
        v
    };
    let run = |a: Vec<String>| {
        let a: Vec<&str> = a.iter().map(String::as_str).collect();
        cli(&a)
    };
    let o = run(args(&[]));
    assert_eq!(o.code, 1, "{}", o.stderr);
    for row in [
        "\n3%/2mm global | 10 | 81 | 100.0 | 0.67 | 0.67 | 0.67 | 0.67 | 0.67 | PASS\n",
        "\n1%/1mm global | 10 | 81 | 0.0 | — | — | — | — | — | FAIL\n",
        "\n4%/4mm global | 10 | 81 | 100.0 | — | — | — | — | — | PASS\n",
    ] {
        assert!(o.stdout.contains(row), "{row}: {}", o.stdout);
    }
    let o = run(args(&["--statistics", "every-criterion"]));
    assert_eq!(o.code, 1, "{}", o.stderr);
    for row in [
        "\n1%/1mm global | 10 | 81 | 0.0 | 2.00 | 2.00 | 2.00 | 2.00 | 2.00 | FAIL\n",
        "\n4%/4mm global | 10 | 81 | 100.0 | 0.50 | 0.50 | 0.50 | 0.50 | 0.50 | PASS\n",
    ] {
        assert!(o.stdout.contains(row), "{row}: {}", o.stdout);
    }
}

#[test]
fn a_failing_comparison_exits_with_one() {
    // Flat 104.5 % against 100 %: gamma = 4.5/3 = 1.5 everywhere, no point passes.
    let dir = scratch("gamma-cmd-fail");
    let r = flat_curve(&dir, "r.csv", 100.0);
    let e = flat_curve(&dir, "e.csv", 104.5);
    let o = cli(&[
        "gamma",
        r.to_str().expect("utf8"),
        e.to_str().expect("utf8"),
        "--criteria",
        "3%/3mm",
    ]);
    assert_eq!(o.code, 1);
    assert!(
        o.stdout.contains(
            "\n3%/3mm global | 10 | 81 | 0.0 | 1.50 | 1.50 | 1.50 | 1.50 | 1.50 | FAIL\n"
        ),
        "{}",
        o.stdout
    );
}

#[test]
fn identical_dicom_grids_agree_everywhere() {
    let f = root().join("tests/fixtures/rtdose/grid3d_implicit.dcm");
    let o = cli(&[
        "gamma",
        f.to_str().expect("utf8"),
        f.to_str().expect("utf8"),
        "--criteria",
        "2%/2mm",
        "--local",
    ]);
    assert_eq!(o.code, 0, "{}", o.stderr);
    assert!(o.stdout.contains("2%/2mm local | 10 | "), "{}", o.stdout);
    assert!(
        o.stdout
            .contains(" | 100.0 | 0.00 | 0.00 | 0.00 | 0.00 | 0.00 | PASS\n"),
        "{}",
        o.stdout
    );
}

#[test]
fn dicom_against_csv_needs_the_isocentre() {
    let dir = scratch("gamma-cmd-iso");
    let r = flat_curve(&dir, "r.csv", 100.0);
    let f = root().join("tests/fixtures/rtdose/grid3d_implicit.dcm");
    let o = cli(&[
        "gamma",
        r.to_str().expect("utf8"),
        f.to_str().expect("utf8"),
    ]);
    assert_eq!(o.code, 2);
    assert_eq!(
        relative(&o.stderr, &dir),
        "error: a DICOM dose compared with CSV data needs the isocentre\n  = help: add --isocentre X,Y,Z (the isocentre in the DICOM file's patient coordinates, mm) and --patient-position if not HFS\n"
    );
}

#[test]
fn the_json_output_carries_the_numbers_of_the_text() {
    // Flat 100 % against flat 102 % at 3 %/2 mm global: gamma = 2/3 everywhere (Low et al
    // 1998, flat region: dose difference over the dose criterion), all 81 points pass.
    let dir = scratch("gamma-cmd-json");
    let r = flat_curve(&dir, "r.csv", 100.0);
    let e = flat_curve(&dir, "e.csv", 102.0);
    let o = cli(&[
        "gamma",
        r.to_str().expect("utf8"),
        e.to_str().expect("utf8"),
        "--json",
    ]);
    assert_eq!(o.code, 0, "{}", o.stderr);
    let doc: serde_json::Value = serde_json::from_str(&o.stdout).expect("JSON");
    let a = &doc["analysis"];
    assert_eq!(a["plugin"], "gamma");
    assert_eq!(a["status"], "pass");
    let metric = |id: &str| {
        a["output"]["metrics"]
            .as_array()
            .expect("metrics")
            .iter()
            .find(|m| m["id"] == id)
            .and_then(|m| m["value"].as_f64())
            .unwrap_or_else(|| panic!("{id} missing"))
    };
    assert_eq!(metric("pass-rate:3%/2mm-global"), 100.0);
    assert!((metric("gamma-max") - 2.0 / 3.0).abs() < 1e-12);
    assert!(
        doc["cautions"]
            .as_array()
            .is_some_and(|c| c.len() == beamproof_engine::run::CAUTIONS.len())
    );
}
