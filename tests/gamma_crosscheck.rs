//! The gamma plugin against fixtures computed with numpy by brute force
//! (tests/fixtures/gamma/make_gamma_fixture.py): a 1D profile with the exact search (numpy
//! samples the same linear interpolant every 0.001 mm) and a 2D plane on a different grid with
//! the node-only search (numpy: minimum over evaluated nodes within 3 x DTA).

use std::collections::BTreeMap;
use std::path::Path;

use beamproof_api::{
    AnalysisInput, AnalysisOutput, CriteriaSet, GammaCriterion, TestInfo, TestKind,
};
use beamproof_engine::readers::read_dataset;

use crate::support::root;

fn fixture(name: &str) -> std::path::PathBuf {
    root().join("tests/fixtures/gamma").join(name)
}

/// The gamma analysis of two fixture files for the criteria (dose %, DTA mm), global, 10 %
/// threshold, with the plugin's default statistics.
fn run(
    reference: &Path,
    evaluated: &Path,
    criteria: &[(f64, f64)],
    method: &str,
    step_dta: f64,
) -> (AnalysisOutput, beamproof_plugin_gamma::PointGammas) {
    let read = |p: &Path| {
        read_dataset(
            p,
            &std::fs::read(p).expect("fixture"),
            &p.display().to_string(),
            None,
        )
        .unwrap_or_else(|d| panic!("{}", d.render(None)))
    };
    let input = AnalysisInput {
        test: TestInfo::standalone(TestKind::Plane),
        params: BTreeMap::from([
            ("reference".to_string(), serde_json::json!("measured")),
            ("method".to_string(), serde_json::json!(method)),
            ("relative".to_string(), serde_json::json!(false)),
            ("sample-step-dta".to_string(), serde_json::json!(step_dta)),
        ]),
        criteria: CriteriaSet {
            name: "c".into(),
            dose_difference_percent: None,
            gamma: criteria
                .iter()
                .map(|&(d, t)| GammaCriterion::tg218(d, t))
                .collect(),
            metrics: BTreeMap::new(),
        },
        measured: Some(read(reference)),
        calculated: Some(read(evaluated)),
        mu: None,
        film: None,
    };
    beamproof_plugin_gamma::analyse_with_points(&input).expect("gamma runs")
}

/// The numpy cases of `case` in expected.json.
fn expected(case: &str) -> Vec<serde_json::Value> {
    let all: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(fixture("expected.json")).expect("expected"))
            .expect("json");
    all[case].as_array().expect("cases").clone()
}

fn compare(
    case: &str,
    reference: &str,
    evaluated: &str,
    method: &str,
    step_dta: f64,
    per_point_tol: f64,
) {
    for c in expected(case) {
        let (dp, dta) = (
            c["dose_percent"].as_f64().expect("dose"),
            c["dta_mm"].as_f64().expect("dta"),
        );
        let (_, got) = run(
            &fixture(reference),
            &fixture(evaluated),
            &[(dp, dta)],
            method,
            step_dta,
        );
        let want = c["gamma"].as_array().expect("gamma");
        assert_eq!(got.gamma.len(), want.len(), "{case} point count");
        let (mut n, mut passed) = (0usize, 0usize);
        for (i, (g, w)) in got.gamma.iter().zip(want).enumerate() {
            match w.as_f64() {
                None => assert!(
                    g.is_nan(),
                    "{case} {dp}%/{dta}mm point {i}: evaluated below the threshold ({g})"
                ),
                Some(w) => {
                    assert!(
                        (g - w).abs() <= per_point_tol,
                        "{case} {dp}%/{dta}mm point {i}: {g} vs numpy {w}"
                    );
                    n += 1;
                    passed += usize::from(*g <= 1.0);
                }
            }
        }
        let rate = 100.0 * passed as f64 / n as f64;
        let want_rate = c["pass_rate_percent"].as_f64().expect("rate");
        assert!(
            (rate - want_rate).abs() <= 0.1,
            "{case} {dp}%/{dta}mm pass rate {rate} vs numpy {want_rate}"
        );
    }
}

#[test]
fn profile_exact_search_matches_numpy_dense_sampling() {
    // numpy samples every 0.001 mm, so its values lie at most a sampling error above the exact
    // minimum: agreement within 0.01 per point (issue criterion) and 0.1 pp in pass rate.
    compare(
        "profile",
        "profile_reference.csv",
        "profile_evaluated.csv",
        "exact",
        0.1,
        0.01,
    );
}

#[test]
fn profile_sampled_search_matches_numpy_at_the_same_step() {
    // The sampled method on a 0.001 mm lattice (0.0005 x DTA for the 2 mm criteria; 0.0005 mm
    // for 1 mm) samples the same linear interpolant as numpy.
    compare(
        "profile",
        "profile_reference.csv",
        "profile_evaluated.csv",
        "sampled",
        0.0005,
        0.01,
    );
}

#[test]
fn plane_node_search_matches_numpy_on_another_grid() {
    // Both take the minimum over the same evaluated nodes: agreement to rounding.
    compare(
        "plane_nodes",
        "plane_reference.csv",
        "plane_evaluated.csv",
        "nodes",
        0.1,
        1e-9,
    );
}

#[test]
fn one_sweep_gives_the_numpy_pass_rates_of_every_criterion() {
    // All criteria of the profile case in one analysis with the default statistics: the first
    // (3 %/2 mm) searched to its minima, 2 %/2 mm and 1 %/1 mm (one proportional search) only
    // to each point's pass or fail. Every pass rate must be numpy's (within 0.1 pp, less than
    // one of the 109 points), and only the first criterion's statistics are shown.
    let cases = expected("profile");
    let criteria: Vec<(f64, f64)> = cases
        .iter()
        .map(|c| {
            (
                c["dose_percent"].as_f64().expect("dose"),
                c["dta_mm"].as_f64().expect("dta"),
            )
        })
        .collect();
    let (out, _) = run(
        &fixture("profile_reference.csv"),
        &fixture("profile_evaluated.csv"),
        &criteria,
        "exact",
        0.1,
    );
    for (c, &(dp, dta)) in cases.iter().zip(&criteria) {
        let id = format!("pass-rate:{dp}%/{dta}mm-global");
        let got = out
            .metrics
            .iter()
            .find(|m| m.id == id)
            .unwrap_or_else(|| panic!("no metric {id}"))
            .value;
        let want = c["pass_rate_percent"].as_f64().expect("rate");
        assert!((got - want).abs() <= 0.1, "{id}: {got} vs numpy {want}");
    }
    let shown: Vec<bool> = out.tables[0].rows.iter().map(|r| r[8] != "—").collect();
    assert_eq!(shown, [true, false, false]);
}
