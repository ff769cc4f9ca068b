//! The README's path for a newcomer, end to end in one test, with the same commands: run both
//! machines, compare them, make two keys, sign, verify, archive both runs and verify the
//! archive, and the one-off MU check. Every analysis of the demo must produce results; the
//! deliberate errors must fail; the companion machine must pass.

use crate::support::{arg, cli, demo_copy, keygen, results, root};

#[test]
fn the_readme_path_works_end_to_end() {
    let campaign = demo_copy("newcomer");
    let runs = campaign.parent().expect("dir").join("runs");
    let (a, b) = (runs.join("lin-a"), runs.join("lin-b"));
    let run = |m: &str, out: &std::path::Path| {
        cli(&["run", arg(&campaign), "--machine", m, "--out", arg(out)])
    };
    let o = run("lin-a", &a);
    assert_eq!(o.code, 1, "lin-a is NO-GO: {}{}", o.stdout, o.stderr);
    assert!(o.stdout.contains("  - standard-fields/output-6x: FAIL\n"));
    assert!(
        o.stdout
            .contains("  - irregular-fields/array-l-field-6x: FAIL\n")
    );
    assert!(
        o.stdout
            .contains(&format!("report: {}", a.join("report.pdf").display()))
    );
    let o = run("lin-b", &b);
    assert_eq!(o.code, 0, "lin-b is GO: {}{}", o.stdout, o.stderr);
    // Every analysis of every test produced results on both machines.
    for dir in [&a, &b] {
        let r = results(dir);
        for site in r["sites"].as_array().expect("sites") {
            for t in site["tests"].as_array().expect("tests") {
                for an in t["analyses"].as_array().expect("analyses") {
                    assert!(
                        an["error"].is_null() && !an["output"].is_null(),
                        "{} {}: {}",
                        dir.display(),
                        t["id"],
                        an["error"]
                    );
                }
            }
        }
    }
    let m = runs.join("match");
    let o = cli(&[
        "compare",
        arg(&a),
        arg(&b),
        "--out",
        arg(&m),
        "--date",
        "2026-11-20",
    ]);
    assert_eq!(o.code, 1, "NOT MATCHED: {}{}", o.stdout, o.stderr);
    assert_eq!(results(&m)["summary"]["verdict"], "NOT MATCHED");
    let physicist = keygen(
        &runs,
        "Demo Physicist",
        "medical physicist",
        "physicist.key",
    );
    let chief = keygen(&runs, "Demo Chief", "chief physicist", "chief.key");
    assert_eq!(cli(&["sign", arg(&b), "--key", arg(&physicist)]).code, 0);
    let o = cli(&[
        "sign",
        arg(&b),
        "--key",
        arg(&chief),
        "--statement",
        "Approved for clinical use.",
    ]);
    assert_eq!(o.code, 0, "{}", o.stderr);
    let o = cli(&["verify", arg(&b)]);
    assert_eq!(o.code, 0, "{}", o.stdout);
    assert_eq!(o.stdout.matches("; valid; ").count(), 2, "{}", o.stdout);
    let archive = runs.join("archive");
    for run in [&a, &b] {
        let o = cli(&["archive", "add", arg(run), "--archive", arg(&archive)]);
        assert_eq!(o.code, 0, "{}", o.stderr);
    }
    let o = cli(&["archive", "verify", arg(&archive)]);
    assert_eq!(o.code, 0, "{}", o.stdout);
    assert!(o.stdout.contains(": 2 entries and "), "{}", o.stdout);
    let fx = root().join("tests/fixtures");
    let o = cli(&[
        "mu",
        "--beam-data",
        arg(&fx.join("mu/beam-data.yaml")),
        "--plan",
        arg(&fx.join("rtplan/mu_plan.dcm")),
    ]);
    assert_eq!(o.code, 0, "{}", o.stderr);
    assert!(o.stdout.contains("all beams: "), "{}", o.stdout);
}
