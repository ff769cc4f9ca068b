//! The JSON Schema shipped for editors must accept exactly the keys the checker accepts.

use std::collections::BTreeSet;

use beamproof_engine::campaign as c;

use crate::support::root;

fn keys(schema: &serde_json::Value, pointer: &str) -> BTreeSet<String> {
    schema
        .pointer(pointer)
        .and_then(|p| p.as_object())
        .unwrap_or_else(|| panic!("schema has no {pointer}"))
        .keys()
        .cloned()
        .collect()
}

fn set(list: &[&str]) -> BTreeSet<String> {
    list.iter().map(|s| s.to_string()).collect()
}

#[test]
fn schema_keys_match_the_checker() {
    let text =
        std::fs::read_to_string(root().join("docs/campaign.schema.json")).expect("schema file");
    let schema: serde_json::Value = serde_json::from_str(&text).expect("schema is JSON");
    let pairs: [(&str, &[&str]); 16] = [
        ("/properties", c::CAMPAIGN_KEYS),
        ("/$defs/tps/properties", c::TPS_KEYS),
        ("/$defs/machine/properties", c::MACHINE_KEYS),
        ("/$defs/beam/properties", c::BEAM_KEYS),
        ("/$defs/levels/properties", c::LEVELS_KEYS),
        ("/$defs/criteria-set/properties", c::CRITERIA_KEYS),
        ("/$defs/gamma/properties", c::GAMMA_KEYS),
        ("/$defs/site/properties", c::SITE_KEYS),
        ("/$defs/test/properties", c::TEST_KEYS),
        ("/$defs/input/oneOf/1/properties", c::INPUT_KEYS),
        ("/$defs/analysis/oneOf/1/properties", c::ANALYSIS_KEYS),
        ("/$defs/mu/properties", c::MU_KEYS),
        ("/$defs/mu-beam/properties", c::MU_BEAM_KEYS),
        (
            "/$defs/film/properties",
            beamproof_engine::campaign_film::FILM_KEYS,
        ),
        (
            "/$defs/film-piece/properties",
            beamproof_engine::campaign_film::PIECE_KEYS,
        ),
        (
            "/$defs/film-fiducial/properties",
            beamproof_engine::campaign_film::FIDUCIAL_KEYS,
        ),
    ];
    for (pointer, list) in pairs {
        assert_eq!(
            keys(&schema, pointer),
            set(list),
            "schema {pointer} differs from the checker"
        );
    }
    assert_eq!(
        keys(&schema, "/$defs/report/properties"),
        set(c::REPORT_KEYS)
    );
    let kinds: Vec<&str> = schema
        .pointer("/$defs/test/properties/kind/enum")
        .and_then(|v| v.as_array())
        .expect("kind enum")
        .iter()
        .filter_map(|v| v.as_str())
        .collect();
    let ours: Vec<&str> = beamproof_api::TestKind::ALL
        .iter()
        .map(|k| k.name())
        .collect();
    assert_eq!(kinds, ours);
}

/// The metric-id table of docs/campaign.md, made from the built-in plugins' manifests.
fn judged_metrics_table() -> String {
    let registry = beamproof_engine::registry::Registry::built_in();
    let mut out = String::from(
        "| plugin | test kinds | metric id | unit of the levels | judges |\n| --- | --- | --- | --- | --- |\n",
    );
    for p in registry.plugins() {
        for m in p.manifest.judged_metrics.iter().flatten() {
            let kinds: Vec<&str> = m.kinds.iter().map(|k| k.name()).collect();
            out.push_str(&format!(
                "| `{}` | {} | `{}` | {} | {} |\n",
                p.manifest.name,
                kinds.join(", "),
                m.id,
                m.unit,
                m.description
            ));
        }
    }
    out
}

const TABLE_START: &str = "<!-- judged metrics: generated from the plugins' manifests -->\n";
const TABLE_END: &str = "<!-- end of judged metrics -->\n";

/// docs/campaign.md lists exactly the metric ids the built-in plugins declare; with
/// `BEAMPROOF_BLESS=1` the test rewrites the table instead.
#[test]
fn the_guide_lists_the_metric_ids_the_plugins_judge() {
    let path = root().join("docs/campaign.md");
    let text = std::fs::read_to_string(&path).expect("guide");
    let start = text.find(TABLE_START).expect("table start marker") + TABLE_START.len();
    let end = text.find(TABLE_END).expect("table end marker");
    let want = judged_metrics_table();
    if std::env::var_os("BEAMPROOF_BLESS").is_some() {
        std::fs::write(&path, format!("{}{want}{}", &text[..start], &text[end..]))
            .expect("write guide");
        return;
    }
    assert_eq!(
        &text[start..end],
        want,
        "docs/campaign.md's metric table is stale: run the tests with BEAMPROOF_BLESS=1"
    );
}

/// The schema offers editors exactly the metric ids the built-in plugins declare.
#[test]
fn the_schema_offers_the_metric_ids_the_plugins_judge() {
    let text =
        std::fs::read_to_string(root().join("docs/campaign.schema.json")).expect("schema file");
    let schema: serde_json::Value = serde_json::from_str(&text).expect("schema is JSON");
    let offered: BTreeSet<String> = schema
        .pointer("/$defs/criteria-set/properties/metrics/propertyNames/enum")
        .and_then(|v| v.as_array())
        .expect("metric id enum")
        .iter()
        .filter_map(|v| v.as_str().map(str::to_string))
        .collect();
    let declared: BTreeSet<String> = beamproof_engine::registry::Registry::built_in()
        .plugins()
        .iter()
        .flat_map(|p| p.manifest.judged_metrics.iter().flatten())
        .map(|m| m.id.clone())
        .collect();
    assert_eq!(offered, declared);
}

/// The published results schema (docs/results.schema.json) accepts the demo's results, run and
/// matching run, and refuses results whose numbers are not numbers.
#[test]
fn the_results_schema_describes_the_demo_results() {
    let schema: serde_json::Value = serde_json::from_str(
        &std::fs::read_to_string(root().join("docs/results.schema.json")).expect("schema"),
    )
    .expect("schema is JSON");
    let validator = jsonschema::validator_for(&schema).expect("a valid JSON Schema");
    let errors = |v: &serde_json::Value| -> Vec<String> {
        validator
            .iter_errors(v)
            .take(5)
            .map(|e| format!("{} at {}", e, e.instance_path()))
            .collect()
    };
    let campaign_a = crate::support::demo_copy("results-schema-a");
    let (run_a, o) = crate::support::run_into_folder(&campaign_a, "lin-a");
    assert_eq!(o.code, 1, "{}", o.stderr);
    let campaign_b = crate::support::demo_copy("results-schema-b");
    let (run_b, o) = crate::support::run_into_folder(&campaign_b, "lin-b");
    assert_eq!(o.code, 0, "{}", o.stderr);
    let matching = crate::support::scratch("results-schema-match").join("match");
    let o = crate::support::cli(&[
        "compare",
        crate::support::arg(&run_a),
        crate::support::arg(&run_b),
        "--date",
        "2026-11-20",
        "--out",
        crate::support::arg(&matching),
    ]);
    assert!(o.code <= 1, "{}", o.stderr);
    for dir in [&run_a, &run_b, &matching] {
        let r = crate::support::results(dir);
        assert_eq!(errors(&r), Vec::<String>::new(), "{}", dir.display());
    }
    // A metric value written as text, and an unknown verdict, are refused.
    let mut bad = crate::support::results(&run_a);
    bad["sites"][0]["tests"][0]["analyses"][0]["output"]["metrics"][0]["value"] =
        serde_json::json!("1.5");
    assert!(!errors(&bad).is_empty());
    let mut bad = crate::support::results(&run_a);
    bad["summary"]["verdict"] = serde_json::json!("PROBABLY FINE");
    assert!(!errors(&bad).is_empty());
}
