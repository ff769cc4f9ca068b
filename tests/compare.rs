//! Matching a second linac: `beamproof compare RUN_A RUN_B` re-analyses machine B's
//! measurements against machine A's with the campaign's own plugins and tight matching
//! criteria, and writes a checksummed matching run with a MATCHED / NOT MATCHED verdict.

use crate::support::{arg, cli, demo_copy, results, run_into_folder, scratch};

fn metric(r: &serde_json::Value, test: &str, id: &str) -> f64 {
    r["sites"]
        .as_array()
        .expect("sites")
        .iter()
        .flat_map(|s| s["tests"].as_array().expect("tests"))
        .find(|t| t["id"] == test)
        .and_then(|t| {
            t["analyses"]
                .as_array()
                .expect("analyses")
                .iter()
                .flat_map(|a| {
                    a["output"]["metrics"]
                        .as_array()
                        .cloned()
                        .unwrap_or_default()
                })
                .find(|m| m["id"] == id)
        })
        .and_then(|m| m["value"].as_f64())
        .unwrap_or_else(|| panic!("{test} {id}"))
}

/// The measured value of a row of a test's table (column "Measured").
fn measured(r: &serde_json::Value, test: &str, table: &str, row: &str) -> f64 {
    let t = r["sites"]
        .as_array()
        .expect("sites")
        .iter()
        .flat_map(|s| s["tests"].as_array().expect("tests"))
        .find(|t| t["id"] == test)
        .expect("test");
    let tab = t["analyses"]
        .as_array()
        .expect("analyses")
        .iter()
        .flat_map(|a| {
            a["output"]["tables"]
                .as_array()
                .cloned()
                .unwrap_or_default()
        })
        .find(|x| x["title"] == table)
        .unwrap_or_else(|| panic!("table {table}"));
    let col = tab["columns"]
        .as_array()
        .expect("cols")
        .iter()
        .position(|c| c == "Measured" || c == "Measured (Gy)")
        .expect("measured column");
    tab["rows"]
        .as_array()
        .expect("rows")
        .iter()
        .find(|x| x[0] == row)
        .and_then(|x| x[col].as_str())
        .and_then(|v| v.parse().ok())
        .unwrap_or_else(|| panic!("row {row}"))
}

#[test]
fn lin_b_against_lin_a_differences_are_b_minus_a_of_each_runs_own_measurement() {
    let (a, _) = run_into_folder(&demo_copy("cmp-a"), "lin-a");
    let (b, _) = run_into_folder(&demo_copy("cmp-b"), "lin-b");
    let out = scratch("cmp-out").join("match");
    let o = cli(&[
        "compare",
        arg(&a),
        arg(&b),
        "--out",
        arg(&out),
        "--date",
        "2026-11-25",
    ]);
    assert!(o.code <= 1, "{}{}", o.stdout, o.stderr);
    let (ra, rb, rm) = (results(&a), results(&b), results(&out));
    // PDD at 10 cm: each run's own measured value (Depth-dose metrics table, two decimals);
    // the matching run's difference is B minus A, in percentage points.
    let pa = measured(
        &ra,
        "pdd-6x-10x10",
        "Depth-dose metrics",
        "PDD at 10 cm (%)",
    );
    let pb = measured(
        &rb,
        "pdd-6x-10x10",
        "Depth-dose metrics",
        "PDD at 10 cm (%)",
    );
    let d = metric(&rm, "pdd-6x-10x10", "difference:pdd10");
    assert!((d - (pb - pa)).abs() < 0.011, "{d} vs {pb} - {pa}");
    // Two detector-array readings are compared point by point (the array test's own gamma
    // cannot search a point set): lin-a's 1.5 mm leaf-bank offset shows as large differences
    // at the field edge.
    let worst = metric(&rm, "array-l-field-6x", "max-abs-difference");
    assert!(worst > 5.0, "{worst}");
    // Depth doses are matched by 1D gamma as well, at the built-in 1 %/1 mm.
    let g = metric(&rm, "pdd-6x-10x10", "pass-rate:1%/1mm-global");
    assert!((0.0..=100.0).contains(&g));
    // Output: 100 (D_B - D_A) / D_A from the two runs' measured doses (4 decimals in Gy).
    let oa = measured(&ra, "output-6x", "Point doses", "ref");
    let ob = measured(&rb, "output-6x", "Point doses", "ref");
    let d = metric(&rm, "output-6x", "difference:ref");
    assert!((d - 100.0 * (ob - oa) / oa).abs() < 0.01, "{d}");
    // The verdict follows the matching criteria; the MU check is listed as not compared.
    let verdict = rm["summary"]["verdict"].as_str().expect("verdict");
    assert_eq!(
        verdict == "MATCHED",
        rm["summary"]["reasons"].as_array().expect("r").is_empty()
    );
    assert!(o.stdout.contains(&format!("verdict: {verdict} (advisory)")));
    let notes = rm["summary"]["notes"].to_string();
    assert!(
        notes.contains("monitor-units/mu-6x-hand: not compared"),
        "{notes}"
    );
    // Checksummed like any run, with both runs' results and manifests kept.
    let v = cli(&["verify", arg(&out)]);
    assert_eq!(v.code, 0, "{}", v.stdout);
    for f in [
        "inputs/a/results.json",
        "inputs/b/manifest.sha256",
        "inputs/b/campaign.yaml",
        "report.pdf",
    ] {
        assert!(out.join(f).is_file(), "{f}");
    }
}

#[test]
fn a_run_against_itself_matches_exactly() {
    // Identity: every difference is zero and every gamma is 0, so the pass rate is 100 %.
    let (a, _) = run_into_folder(&demo_copy("cmp-self"), "lin-b");
    let out = scratch("cmp-self-out").join("match");
    let o = cli(&[
        "compare",
        arg(&a),
        arg(&a),
        "--out",
        arg(&out),
        "--date",
        "2026-11-25",
    ]);
    assert_eq!(o.code, 0, "{}{}", o.stdout, o.stderr);
    let r = results(&out);
    assert_eq!(r["summary"]["verdict"], "MATCHED");
    assert_eq!(metric(&r, "pdd-6x-10x10", "difference:pdd10"), 0.0);
    assert_eq!(
        metric(&r, "film-6x-10x10", "pass-rate:1%/1mm-global"),
        100.0
    );
    assert_eq!(metric(&r, "film-6x-10x10", "gamma-max"), 0.0);
}

#[test]
fn different_campaign_versions_are_noted_and_damaged_runs_refused() {
    let (a, _) = run_into_folder(&demo_copy("cmp-v1"), "lin-a");
    let c2 = demo_copy("cmp-v2");
    let text = std::fs::read_to_string(&c2).expect("read");
    std::fs::write(
        &c2,
        text.replacen("bunkers 1 and 2", "bunkers 1 and 2 (revised)", 1),
    )
    .expect("w");
    let (b, _) = run_into_folder(&c2, "lin-b");
    let out = scratch("cmp-v-out").join("match");
    let o = cli(&[
        "compare",
        arg(&a),
        arg(&b),
        "--out",
        arg(&out),
        "--date",
        "2026-11-25",
    ]);
    assert!(o.code <= 1, "{}", o.stderr);
    assert!(
        o.stdout.contains(
            "note: the runs come from different versions of campaign `demo-6x` (SHA-256 "
        ),
        "{}",
        o.stdout
    );
    assert!(
        o.stdout.contains("; what differs: title (`6 MV beam model validation, bunkers 1 and 2` / `6 MV beam model validation, bunkers 1 and 2 (revised)`)\n"),
        "{}",
        o.stdout
    );
    std::fs::write(b.join("results.json"), "{}").expect("w");
    let o = cli(&[
        "compare",
        arg(&a),
        arg(&b),
        "--out",
        arg(&scratch("cmp-v-out2").join("m")),
    ]);
    assert_eq!(o.code, 2);
    assert!(
        o.stderr.contains(
            "the run folder fails verification (changed: results.json); it is not compared"
        ),
        "{}",
        o.stderr
    );
}
