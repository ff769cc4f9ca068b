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
