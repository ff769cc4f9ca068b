//! Matching a second linac: two run folders of the same campaign compared test by test, machine
//! B's measurements against machine A's.
//!
//! Each test present in both runs becomes a matching test whose "measured" data are A's
//! measurements and whose "calculated" data are B's, analysed by the same plugins the campaign
//! uses (profile and depth-dose metrics, whose differences are then B minus A; gamma with A as
//! the reference; point doses as percent of A) against a matching criteria set: one of the
//! campaign's (`--criteria`) or the built-in tight default below. The result is a run record
//! (so it is reported, checksummed and archived like any run) with the verdict MATCHED or
//! NOT MATCHED.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use beamproof_api::{CriteriaSet, GammaCriterion, Levels, TestKind};

use crate::campaign::Campaign;
use crate::checksum::{sha256_hex, verify_run};
use crate::diag::Diagnostic;
use crate::prepare::{InputFile, Prepared, PreparedInput, PreparedTest, prepare};
use crate::readers::read_dataset;
use crate::registry::Registry;
use crate::run::{DERIVED_DIR, RunRecord, run};

/// Verdicts of a matching run.
pub const MATCHED: &str = "MATCHED";
pub const NOT_MATCHED: &str = "NOT MATCHED";

/// Plugins whose comparison of two measurements means something.
const MATCHING_PLUGINS: &[&str] = &["point-dose", "gamma", "profile", "depth-dose"];

/// The built-in matching criteria. Tight levels for two machines meant to be interchangeable:
/// 1 %/1 mm gamma (10 % threshold, global, 95 % tolerance, 90 % action pass rate), 1 % point
/// doses, 1 mm field size and penumbra, 1 % (point) flatness, symmetry and depth-dose values.
/// Common practice for beam matching, no single published source (the gamma form follows
/// Low et al 1998 and the pass rates TG-218).
pub fn default_matching_criteria() -> CriteriaSet {
    let l = |t: f64, a: f64| Levels {
        tolerance: t,
        action: a,
    };
    let mut metrics = BTreeMap::new();
    for (id, t, a) in [
        ("field-size-mm", 1.0, 2.0),
        ("centre-mm", 1.0, 2.0),
        ("penumbra-left-mm", 1.0, 2.0),
        ("penumbra-right-mm", 1.0, 2.0),
        ("flatness", 1.0, 2.0),
        ("symmetry", 1.0, 2.0),
        ("unflatness", 1.0, 2.0),
        ("fff-field-size-mm", 1.0, 2.0),
        ("dmax-mm", 2.0, 3.0),
        ("pdd10", 1.0, 2.0),
        ("pdd20-10", 1.0, 2.0),
        ("tpr20-10", 1.0, 2.0),
    ] {
        metrics.insert(id.to_string(), l(t, a));
    }
    CriteriaSet {
        name: "matching (built-in)".into(),
        dose_difference_percent: Some(l(1.0, 2.0)),
        gamma: vec![GammaCriterion::tg218(1.0, 1.0)],
        metrics,
    }
}

/// One side of the comparison.
struct Side {
    dir: PathBuf,
    campaign: Campaign,
    prepared: Prepared,
    results: serde_json::Value,
    /// The bytes of `results.json` and `manifest.sha256` as read (and checked) once.
    results_bytes: Vec<u8>,
    manifest_bytes: Vec<u8>,
    /// Film tests' derived dose planes (`derived/ID.csv`), as read and checked once.
    derived: BTreeMap<String, Vec<u8>>,
}

fn load(dir: &Path, registry: &Registry) -> Result<Side, Vec<Diagnostic>> {
    let refuse = |m: String, help: &str| vec![Diagnostic::file(dir, m).help(help)];
    let v = verify_run(dir).map_err(|e| refuse(e, "give a run folder made by `beamproof run`"))?;
    if !v.findings.is_empty() {
        return Err(refuse(
            format!(
                "the run folder fails verification ({}); it is not compared",
                v.findings
                    .iter()
                    .map(ToString::to_string)
                    .collect::<Vec<_>>()
                    .join("; ")
            ),
            "restore the run folder from its archive (`beamproof archive export`)",
        ));
    }
    if let Some(u) = v.planted().next() {
        return Err(refuse(
            format!(
                "`{u}` lies in the run folder but is not covered by its manifest; it is not compared"
            ),
            "restore the run folder from its archive (`beamproof archive export`)",
        ));
    }
    // The campaign and inputs are read again by prepare; each must be the very bytes the
    // verification read (and so the manifest lists), so what is compared is what was
    // verified even if the folder changes meanwhile.
    let checked = |rel: &str, bytes: &[u8]| -> Result<(), Vec<Diagnostic>> {
        match v.files.get(rel) {
            Some(b) if b.as_slice() == bytes && v.ok.iter().any(|o| o == rel) => Ok(()),
            _ => Err(refuse(
                format!(
                    "`{rel}` changed after the run folder was verified, or is not in its manifest"
                ),
                "compare run folders that nothing is writing to",
            )),
        }
    };
    let verified = |rel: &str| -> Result<Vec<u8>, Vec<Diagnostic>> {
        match v.files.get(rel) {
            Some(b) if v.ok.iter().any(|o| o == rel) => Ok(b.clone()),
            _ => Err(refuse(
                format!("`{rel}` is not in the run folder's manifest"),
                "give a run folder made by `beamproof run`",
            )),
        }
    };
    let results_bytes = verified("results.json")?;
    let manifest_bytes = v.manifest.clone();
    let results: serde_json::Value = serde_json::from_slice(&results_bytes)
        .map_err(|_| refuse("results.json is unreadable".into(), "give a run folder"))?;
    let file = results["campaign"]["file"]
        .as_str()
        .unwrap_or("inputs/campaign.yaml");
    let campaign = Campaign::load(&dir.join(file))?;
    checked(file, &campaign.bytes)?;
    let machine_id = results["machine"]["id"].as_str().unwrap_or_default();
    let machine = campaign
        .machine(machine_id)
        .ok_or_else(|| {
            refuse(
                format!("machine `{machine_id}` is not in the run's campaign"),
                "give a run folder",
            )
        })?
        .clone();
    let prepared = prepare(
        &campaign,
        registry,
        &machine,
        crate::input_store::DEFAULT_MAX_INPUT_BYTES,
    )?;
    for f in &prepared.inputs {
        checked(&format!("{}/{}", crate::run::INPUTS_DIR, f.rel), &f.bytes)?;
    }
    let mut derived = BTreeMap::new();
    for t in prepared.tests.iter().filter(|t| t.film.is_some()) {
        let rel = format!("{DERIVED_DIR}/{}.csv", t.spec.id);
        if v.files.contains_key(&rel) {
            derived.insert(rel.clone(), verified(&rel)?);
        }
    }
    Ok(Side {
        dir: dir.to_path_buf(),
        campaign,
        prepared,
        results,
        results_bytes,
        manifest_bytes,
        derived,
    })
}

/// A prepared comparison, ready for [`crate::run::run`] and the run folder.
pub struct Comparison {
    pub record: RunRecord,
    /// The matching tests; its inputs are both measurements of every compared test and both
    /// runs' results and manifest (and B's campaign), under `a/` and `b/`.
    pub prepared: Prepared,
    /// Machine A's campaign (its copy is the matching run's campaign file).
    pub campaign: Campaign,
}

fn renamed(side: &str, i: &PreparedInput) -> PreparedInput {
    PreparedInput {
        rel: format!("{side}/{}", i.rel),
        sha256: i.sha256.clone(),
        dataset: i.dataset.clone(),
    }
}

/// Compare run B against run A. `criteria` names one of A's campaign criteria sets (default
/// the built-in matching set). Warnings (different campaigns or versions) come back as notes
/// in the record's summary warnings.
/// A run's measurement of a test and the bytes of its file: the input file, or for a film the
/// dose plane the run derived from it (`derived/ID.csv` in the run folder).
fn measured(side: &Side, t: &PreparedTest) -> Option<(PreparedInput, Vec<u8>)> {
    if t.film.is_some() {
        let rel = format!("{DERIVED_DIR}/{}.csv", t.spec.id);
        let bytes = side.derived.get(&rel)?.clone();
        let dataset = read_dataset(&side.dir.join(&rel), &bytes, &rel, None).ok()?;
        return Some((
            PreparedInput {
                sha256: sha256_hex(&bytes),
                rel,
                dataset,
            },
            bytes,
        ));
    }
    let m = t.measured.clone()?;
    let bytes = side
        .prepared
        .inputs
        .iter()
        .find(|f| f.rel == m.rel)?
        .bytes
        .to_vec();
    Some((m, bytes))
}

pub fn compare(
    dir_a: &Path,
    dir_b: &Path,
    criteria: Option<&str>,
    registry: &Registry,
    date: &str,
) -> Result<Comparison, Vec<Diagnostic>> {
    let a = load(dir_a, registry)?;
    let b = load(dir_b, registry)?;
    let criteria = match criteria {
        None => default_matching_criteria(),
        Some(name) => a.campaign.criteria_set(name).cloned().ok_or_else(|| {
            vec![
                Diagnostic::file(
                    &a.campaign.path,
                    format!("criteria set `{name}` is not defined in the campaign"),
                )
                .help(format!(
                    "defined: {}; or leave out --criteria for the built-in matching criteria",
                    a.campaign
                        .criteria
                        .iter()
                        .map(|c| c.name.as_str())
                        .collect::<Vec<_>>()
                        .join(", ")
                )),
            ]
        })?,
    };
    let mut notes = vec![format!(
        "In this matching run the plugins' \"measured\" data are machine A's ({}) measurements and their \"calculated\" data machine B's ({}): every difference reads B minus A, and gamma uses A as the reference.",
        a.prepared.machine.id, b.prepared.machine.id
    )];
    let (ca, cb) = (
        a.results["campaign"]["sha256"].as_str().unwrap_or_default(),
        b.results["campaign"]["sha256"].as_str().unwrap_or_default(),
    );
    if a.campaign.id != b.campaign.id {
        notes.push(format!(
            "the runs come from different campaigns: `{}` and `{}`",
            a.campaign.id, b.campaign.id
        ));
    } else if ca != cb {
        notes.push(format!(
            "the runs come from different versions of campaign `{}` (SHA-256 {} and {}); what differs: {}",
            a.campaign.id,
            &ca[..ca.len().min(12)],
            &cb[..cb.len().min(12)],
            differences(&a.campaign, &b.campaign)
        ));
    }
    let key = |t: &PreparedTest| format!("{}/{}", t.site_id, t.spec.id);
    let b_tests: BTreeMap<String, &PreparedTest> =
        b.prepared.tests.iter().map(|t| (key(t), t)).collect();
    let a_keys: Vec<String> = a.prepared.tests.iter().map(key).collect();
    let only_a: Vec<&String> = a_keys
        .iter()
        .filter(|k| !b_tests.contains_key(*k))
        .collect();
    let only_b: Vec<&String> = b_tests.keys().filter(|k| !a_keys.contains(k)).collect();
    if !only_a.is_empty() {
        notes.push(format!(
            "tests only in run A ({}): {}",
            a.prepared.machine.id,
            only_a
                .iter()
                .map(|s| s.as_str())
                .collect::<Vec<_>>()
                .join(", ")
        ));
    }
    if !only_b.is_empty() {
        notes.push(format!(
            "tests only in run B ({}): {}",
            b.prepared.machine.id,
            only_b
                .iter()
                .map(|s| s.as_str())
                .collect::<Vec<_>>()
                .join(", ")
        ));
    }
    let mut files: BTreeMap<String, InputFile> = BTreeMap::new();
    let mut add_file = |rel: String, bytes: Vec<u8>| {
        files.entry(rel.clone()).or_insert_with(|| InputFile {
            sha256: sha256_hex(&bytes),
            rel,
            bytes: bytes.into(),
        });
    };
    for (side, s) in [("a", &a), ("b", &b)] {
        add_file(format!("{side}/results.json"), s.results_bytes.clone());
        add_file(format!("{side}/manifest.sha256"), s.manifest_bytes.clone());
    }
    add_file("b/campaign.yaml".into(), b.campaign.bytes.clone());
    let mut tests = Vec::new();
    for ta in &a.prepared.tests {
        let Some(tb) = b_tests.get(&key(ta)) else {
            continue;
        };
        let not_compared = |why: &str| format!("{}: not compared ({why})", key(ta));
        if ta.spec.kind == TestKind::MuCheck {
            notes.push(not_compared("an MU check compares each machine with the planning system, not the machines with each other"));
            continue;
        }
        if ta.spec.kind == TestKind::FilmCalibration {
            notes.push(not_compared(
                "a film calibration describes a film lot, not a machine",
            ));
            continue;
        }
        let (Some((ma, bytes_a)), Some((mb, bytes_b))) = (measured(&a, ta), measured(&b, tb))
        else {
            notes.push(not_compared("a run has no measurement"));
            continue;
        };
        let (ma, mb) = (&ma, &mb);
        if ma.dataset.unit != mb.dataset.unit {
            notes.push(not_compared("the measurements have different dose units"));
            continue;
        }
        let mut analyses: Vec<_> = ta
            .analyses
            .iter()
            .filter(|x| MATCHING_PLUGINS.contains(&x.plugin.as_str()))
            .filter(|x| {
                // Gamma needs a grid or a curve to search; two point sets cannot be gamma-compared.
                x.plugin != "gamma"
                    || !matches!(mb.dataset.data, beamproof_api::DatasetData::Points(_))
            })
            .cloned()
            .collect();
        // Profiles and depth doses are always matched by 1D gamma too; two detector-array
        // readings are compared point by point.
        let with_defaults = |name: &str| {
            registry
                .plugins()
                .iter()
                .find(|p| p.manifest.name == name)
                .map(|g| crate::prepare::PreparedAnalysis {
                    plugin: name.into(),
                    params: g
                        .manifest
                        .params
                        .iter()
                        .filter_map(|p| Some((p.name.clone(), p.default.clone()?)))
                        .collect(),
                })
        };
        if matches!(ta.spec.kind, TestKind::Profile | TestKind::DepthDose)
            && !analyses.iter().any(|x| x.plugin == "gamma")
        {
            analyses.extend(with_defaults("gamma"));
        }
        if matches!(mb.dataset.data, beamproof_api::DatasetData::Points(_))
            && !analyses.iter().any(|x| x.plugin == "point-dose")
        {
            analyses.extend(with_defaults("point-dose"));
        }
        if analyses.is_empty() {
            notes.push(not_compared(
                "none of its analyses compares two measurements",
            ));
            continue;
        }
        add_file(format!("a/{}", ma.rel), bytes_a);
        add_file(format!("b/{}", mb.rel), bytes_b);
        let mut spec = ta.spec.clone();
        spec.name = format!(
            "{}: {} against {}",
            ta.spec.name, b.prepared.machine.id, a.prepared.machine.id
        );
        tests.push(PreparedTest {
            site_id: ta.site_id.clone(),
            site_name: ta.site_name.clone(),
            spec,
            beam: ta.beam.clone(),
            criteria: criteria.clone(),
            measured: Some(renamed("a", ma)),
            calculated: Some(renamed("b", mb)),
            analyses,
            mu: None,
            film: None,
        });
    }
    if tests.is_empty() {
        return Err(vec![Diagnostic::file(dir_b, "no test of the two runs can be compared").help(
            "compare two runs of the same campaign with profiles, depth doses, planes or point doses",
        )]);
    }
    let mut machine = a.prepared.machine.clone();
    machine.description = format!(
        "{} ({}) matched against {} ({})",
        b.prepared.machine.id,
        b.prepared.machine.description,
        a.prepared.machine.id,
        a.prepared.machine.description
    );
    let mut prepared = Prepared {
        machine: machine.clone(),
        tests,
        inputs: Vec::new(),
        templates: a.prepared.templates.clone(),
    };
    let mut record = run(&a.campaign, &prepared, registry, date, |_, _, _| {});
    let name = |d: &Path| {
        d.file_name()
            .map(|n| n.to_string_lossy().into_owned())
            .unwrap_or_default()
    };
    record.machine.id = format!("{}-vs-{}", b.prepared.machine.id, a.prepared.machine.id);
    record.campaign.title = format!(
        "Matching {} against {}: {}",
        b.prepared.machine.id, a.prepared.machine.id, a.campaign.title
    );
    record.run.id = format!(
        "{}-match-{}-{}-{date}",
        a.campaign.id, b.prepared.machine.id, a.prepared.machine.id
    );
    record.run.reproduce = format!(
        "beamproof compare {} {}{} --date {date}   (from the folder holding both runs)",
        name(&a.dir),
        name(&b.dir),
        criteria_arg(&criteria)
    );
    record.summary.verdict = if record.summary.reasons.is_empty() {
        MATCHED
    } else {
        NOT_MATCHED
    };
    record.summary.notes = notes;
    prepared.inputs = files.into_values().collect();
    // The template folder's files belong to the matching run too.
    prepared.inputs.extend(
        a.prepared
            .inputs
            .iter()
            .filter(|f| {
                a.prepared
                    .templates
                    .as_ref()
                    .is_some_and(|t| f.rel.starts_with(&format!("{t}/")))
            })
            .cloned(),
    );
    Ok(Comparison {
        record,
        prepared,
        campaign: a.campaign,
    })
}

fn criteria_arg(c: &CriteriaSet) -> String {
    if c.name == default_matching_criteria().name {
        String::new()
    } else {
        format!(" --criteria {}", c.name)
    }
}

/// What differs between two versions of a campaign, in words.
fn differences(a: &Campaign, b: &Campaign) -> String {
    let mut d = Vec::new();
    if a.title != b.title {
        d.push(format!("title (`{}` / `{}`)", a.title, b.title));
    }
    if a.institution != b.institution {
        d.push("institution".to_string());
    }
    if a.tps != b.tps {
        d.push(format!(
            "planning system (`{} {} {}` / `{} {} {}`)",
            a.tps.name,
            a.tps.version,
            a.tps.beam_model,
            b.tps.name,
            b.tps.version,
            b.tps.beam_model
        ));
    }
    for ca in &a.criteria {
        match b.criteria_set(&ca.name) {
            Some(cb) if cb == ca => {}
            Some(_) => d.push(format!("criteria set `{}`", ca.name)),
            None => d.push(format!("criteria set `{}` only in A", ca.name)),
        }
    }
    // Test definitions, ignoring where in the file they sit.
    let shape = |t: &crate::campaign::TestSpec| {
        format!(
            "{:?}|{:?}|{:?}|{:?}|{}|{:?}",
            t.kind,
            t.beam.as_ref().map(|b| &b.0),
            t.measured.as_ref().map(|m| (&m.template, &m.placement)),
            t.calculated.as_ref().map(|m| (&m.template, &m.placement)),
            t.criteria.0,
            t.analyses
                .iter()
                .map(|x| (
                    &x.plugin,
                    x.params.iter().map(|p| (&p.0, &p.1)).collect::<Vec<_>>()
                ))
                .collect::<Vec<_>>()
        )
    };
    for sa in &a.sites {
        for ta in &sa.tests {
            let tb = b
                .sites
                .iter()
                .flat_map(|s| &s.tests)
                .find(|t| t.id == ta.id);
            if let Some(tb) = tb
                && shape(ta) != shape(tb)
            {
                d.push(format!("test `{}`", ta.id));
            }
        }
    }
    if d.is_empty() {
        "comments or layout only".into()
    } else {
        d.join(", ")
    }
}
