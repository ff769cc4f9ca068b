//! Running a prepared campaign: every analysis of every test, in campaign order. A failing or
//! broken analysis is recorded as an error of its test and never stops the campaign. The result
//! is the run record written as `results.json`.

use std::collections::BTreeMap;

use beamproof_api::film::{FilmCalibration, FilmInput};
use beamproof_api::{AnalysisInput, AnalysisOutput, CriteriaSet, Reference, Status, TestInfo};
use serde::Serialize;

use crate::campaign::{Campaign, Tps};
use crate::film::{CalibrationSource, FilmTask};
use crate::prepare::{Prepared, PreparedTest};
use crate::registry::{Origin, Registry};

/// Format tag of `results.json`.
pub const RESULTS_FORMAT: &str = "beamproof-results/1";

/// The cautions printed by the CLI and in every report.
pub const CAUTIONS: [&str; 3] = [
    "Results must be reviewed and signed by a qualified medical physicist before any clinical use.",
    "beamproof is not a medical device and is not certified for clinical use; it supports, and never replaces, professional judgement.",
    "Local regulations, institutional policy and licensed professional practice prevail over anything this report states.",
];

#[derive(Debug, Clone, Serialize)]
pub struct RunRecord {
    pub format: &'static str,
    pub software: Software,
    pub campaign: CampaignRecord,
    pub machine: MachineRecord,
    pub run: RunInfo,
    pub plugins: Vec<PluginRecord>,
    pub criteria: Vec<CriteriaSet>,
    pub sites: Vec<SiteRecord>,
    pub summary: Summary,
    pub references: Vec<Reference>,
    pub cautions: Vec<&'static str>,
    pub report: ReportRecord,
    /// Files the analyses produced (film calibrations, film dose planes), by path inside the
    /// run folder; written beside `results.json` and covered by the manifest.
    #[serde(skip)]
    pub product_files: Vec<(String, Vec<u8>)>,
}

/// The templates that make the report: the campaign's own folder, or the built-in template
/// (whose checksum the caller adds, as the engine does not hold the template text).
#[derive(Debug, Clone, Serialize)]
pub struct ReportRecord {
    /// `built-in`, or the template folder relative to the campaign folder.
    pub template: String,
    pub files: Vec<FileRecord>,
}

/// A file and its SHA-256.
#[derive(Debug, Clone, Serialize)]
pub struct FileRecord {
    pub file: String,
    pub sha256: String,
}

#[derive(Debug, Clone, Serialize)]
pub struct Software {
    pub name: &'static str,
    pub version: &'static str,
}

#[derive(Debug, Clone, Serialize)]
pub struct CampaignRecord {
    pub id: String,
    pub title: String,
    pub institution: String,
    /// Path of the campaign copy inside the run folder.
    pub file: String,
    pub sha256: String,
    pub tps: TpsRecord,
}

#[derive(Debug, Clone, Serialize)]
pub struct TpsRecord {
    pub name: String,
    pub version: String,
    pub beam_model: String,
}

#[derive(Debug, Clone, Serialize)]
pub struct MachineRecord {
    pub id: String,
    pub description: String,
    pub beams: Vec<BeamRecord>,
}

#[derive(Debug, Clone, Serialize)]
pub struct BeamRecord {
    pub id: String,
    pub modality: String,
    pub energy: f64,
    pub fff: bool,
}

#[derive(Debug, Clone, Serialize)]
pub struct RunInfo {
    /// Run identifier: campaign, machine and run date (the default run folder name).
    pub id: String,
    /// The run date (an input: `--date` or the campaign), never the wall clock.
    pub date: String,
    /// Command that reproduces the run from inside the run folder.
    pub reproduce: String,
}

#[derive(Debug, Clone, Serialize)]
pub struct PluginRecord {
    pub name: String,
    pub version: String,
    /// What the plugin does, from its manifest (the report's method section).
    pub description: String,
    /// `built-in` or `dynamic`.
    pub origin: &'static str,
    /// A dynamic plugin's library as copied into the run folder, and its checksum.
    pub file: Option<String>,
    pub sha256: Option<String>,
}

#[derive(Debug, Clone, Serialize)]
pub struct SiteRecord {
    pub id: String,
    pub name: String,
    pub tests: Vec<TestRecord>,
}

#[derive(Debug, Clone, Serialize)]
pub struct InputRecord {
    pub role: &'static str,
    /// Path inside the run folder.
    pub file: String,
    pub sha256: String,
    /// Unit and shape as read.
    pub unit: String,
    pub shape: String,
}

#[derive(Debug, Clone, Serialize)]
pub struct TestRecord {
    pub id: String,
    pub name: String,
    pub kind: String,
    pub beam: Option<String>,
    pub criteria: String,
    pub status: Status,
    pub inputs: Vec<InputRecord>,
    pub analyses: Vec<AnalysisRecord>,
    /// Files the test's analyses produced (a film calibration, a film's dose plane).
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub products: Vec<ProductRecord>,
}

/// A file an analysis produced, kept in the run folder.
#[derive(Debug, Clone, Serialize)]
pub struct ProductRecord {
    /// What it is: `film calibration` or `film dose plane`.
    pub role: &'static str,
    /// Path inside the run folder.
    pub file: String,
    pub sha256: String,
}

/// Folder of a run holding film calibrations, one `ID.json` per calibration test.
pub const CALIBRATIONS_DIR: &str = "calibrations";
/// Folder of a run holding measured data derived from raw measurements (film dose planes).
pub const DERIVED_DIR: &str = "derived";
/// Folder of a run holding a copy of every dynamic plugin library that was loaded.
pub const PLUGINS_DIR: &str = "plugins";

#[derive(Debug, Clone, Serialize)]
pub struct AnalysisRecord {
    pub plugin: String,
    pub version: String,
    pub params: BTreeMap<String, serde_json::Value>,
    pub status: Status,
    /// Why the analysis could not run (status `error`).
    pub error: Option<String>,
    pub output: Option<AnalysisOutput>,
}

#[derive(Debug, Clone, Serialize)]
pub struct Summary {
    pub tests: usize,
    pub pass: usize,
    pub warn: usize,
    pub fail: usize,
    pub error: usize,
    /// `GO` only when no test failed or errored.
    pub verdict: &'static str,
    /// Tests that failed or errored, as `site/test: status`.
    pub reasons: Vec<String>,
    /// Tests with warnings.
    pub warnings: Vec<String>,
    /// Remarks on the run as a whole (for a matching run: differences between the two runs
    /// and tests not compared).
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub notes: Vec<String>,
}

impl RunRecord {
    /// Pretty JSON with a final newline; field order is fixed by the structs and maps are
    /// sorted, so the same run gives the same bytes.
    pub fn to_json(&self) -> Vec<u8> {
        let mut v = serde_json::to_vec_pretty(self)
            .unwrap_or_else(|e| format!("{{\"error\": \"{e}\"}}").into_bytes());
        v.push(b'\n');
        v
    }

    /// True when the verdict is GO.
    pub fn is_go(&self) -> bool {
        self.summary.verdict == "GO"
    }
}

/// Inside the run folder, inputs and the campaign copy live under this folder.
pub const INPUTS_DIR: &str = "inputs";

/// Run every prepared test. `progress` is called after each test with (done, total, test id).
pub fn run(
    campaign: &Campaign,
    prepared: &Prepared,
    registry: &Registry,
    date: &str,
    mut progress: impl FnMut(usize, usize, &str),
) -> RunRecord {
    let total = prepared.tests.len();
    let mut sites: Vec<SiteRecord> = Vec::new();
    let mut calibrations: BTreeMap<String, FilmCalibration> = BTreeMap::new();
    let mut product_files = Vec::new();
    for (i, t) in prepared.tests.iter().enumerate() {
        let (record, files) = run_test(t, &prepared.machine.id, registry, &mut calibrations);
        product_files.extend(files);
        match sites.last_mut() {
            Some(s) if s.id == t.site_id => s.tests.push(record),
            _ => sites.push(SiteRecord {
                id: t.site_id.clone(),
                name: t.site_name.clone(),
                tests: vec![record],
            }),
        }
        progress(i + 1, total, &t.spec.id);
    }
    let campaign_name = campaign
        .path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| "campaign.yaml".into());
    let summary = summarise(&sites);
    let mut references: Vec<Reference> = sites
        .iter()
        .flat_map(|s| &s.tests)
        .flat_map(|t| &t.analyses)
        .filter_map(|a| a.output.as_ref())
        .flat_map(|o| o.references.iter().cloned())
        .collect();
    references.sort();
    references.dedup();
    // Every dynamic plugin library goes into the run folder beside the results, so that the
    // evidence holds the very code that analysed (its checksum is in the plugin list too).
    let mut dynamic_dir = None;
    for p in registry.plugins() {
        if let Origin::Dynamic { path, bytes, .. } = &p.origin
            && let Some(name) = path.file_name()
        {
            product_files.push((
                format!("{PLUGINS_DIR}/{}", name.to_string_lossy()),
                bytes.to_vec(),
            ));
            dynamic_dir = Some(PLUGINS_DIR);
        }
    }
    let Tps {
        name,
        version,
        beam_model,
    } = campaign.tps.clone();
    RunRecord {
        format: RESULTS_FORMAT,
        software: Software {
            name: "beamproof",
            version: env!("CARGO_PKG_VERSION"),
        },
        campaign: CampaignRecord {
            id: campaign.id.clone(),
            title: campaign.title.clone(),
            institution: campaign.institution.clone(),
            file: format!("{INPUTS_DIR}/{campaign_name}"),
            sha256: crate::checksum::sha256_hex(&campaign.bytes),
            tps: TpsRecord {
                name,
                version,
                beam_model,
            },
        },
        machine: MachineRecord {
            id: prepared.machine.id.clone(),
            description: prepared.machine.description.clone(),
            beams: prepared
                .machine
                .beams
                .iter()
                .map(|b| BeamRecord {
                    id: b.id.clone(),
                    modality: b.modality.clone(),
                    energy: b.energy,
                    fff: b.fff,
                })
                .collect(),
        },
        run: RunInfo {
            id: format!("{}-{}-{date}", campaign.id, prepared.machine.id),
            date: date.to_string(),
            reproduce: format!(
                "beamproof run {INPUTS_DIR}/{campaign_name} --machine {m} --date {date}{plugins} --out ../rerun-{m}-{date}",
                m = prepared.machine.id,
                plugins = dynamic_dir
                    .map(|d| format!(" --plugin-dir {d}"))
                    .unwrap_or_default()
            ),
        },
        plugins: registry
            .plugins()
            .iter()
            .map(|p| PluginRecord {
                name: p.manifest.name.clone(),
                version: p.manifest.version.clone(),
                description: p.manifest.description.clone(),
                origin: match p.origin {
                    Origin::BuiltIn => "built-in",
                    Origin::Dynamic { .. } => "dynamic",
                },
                file: match &p.origin {
                    Origin::Dynamic { path, .. } => path
                        .file_name()
                        .map(|n| format!("{PLUGINS_DIR}/{}", n.to_string_lossy())),
                    Origin::BuiltIn => None,
                },
                sha256: match &p.origin {
                    Origin::Dynamic { sha256, .. } => Some(sha256.clone()),
                    Origin::BuiltIn => None,
                },
            })
            .collect(),
        criteria: campaign.criteria.clone(),
        sites,
        summary,
        references,
        cautions: CAUTIONS.to_vec(),
        report: ReportRecord {
            template: prepared
                .templates
                .clone()
                .unwrap_or_else(|| "built-in".into()),
            files: match &prepared.templates {
                Some(dir) => prepared
                    .inputs
                    .iter()
                    .filter(|f| f.rel.starts_with(&format!("{dir}/")))
                    .map(|f| FileRecord {
                        file: format!("{INPUTS_DIR}/{}", f.rel),
                        sha256: f.sha256.clone(),
                    })
                    .collect(),
                None => Vec::new(),
            },
        },
        product_files,
    }
}

/// The film input of a test: a calibration to fit, or a measured film with its calibration
/// (from a file, or from a calibration test run earlier in this run).
fn film_input(
    t: &PreparedTest,
    calibrations: &BTreeMap<String, FilmCalibration>,
) -> Result<Option<FilmInput>, String> {
    let Some(f) = &t.film else { return Ok(None) };
    Ok(Some(match &f.task {
        FilmTask::Calibrate(c) => FilmInput::Calibrate(c.clone()),
        FilmTask::Measure(m) => {
            let c = match &m.calibration {
                CalibrationSource::File(c) => (**c).clone(),
                CalibrationSource::Test(id) => calibrations.get(id).cloned().ok_or_else(|| {
                    format!("calibration test `{id}` produced no calibration (see its errors); this film cannot be read without it")
                })?,
            };
            FilmInput::Measure(Box::new(m.with_calibration(c)))
        }
    }))
}

/// Run one test's analyses in order. A measured distribution an analysis derives (a film's
/// dose plane) becomes the measured data of the analyses after it; a calibration it fits is
/// kept for later tests. Returns the record and the files the analyses produced.
fn run_test(
    t: &PreparedTest,
    machine: &str,
    registry: &Registry,
    calibrations: &mut BTreeMap<String, FilmCalibration>,
) -> (TestRecord, Vec<(String, Vec<u8>)>) {
    let film = film_input(t, calibrations);
    let mut input = AnalysisInput {
        test: TestInfo {
            site: t.site_id.clone(),
            id: t.spec.id.clone(),
            name: t.spec.name.clone(),
            kind: t.spec.kind,
            machine: machine.to_string(),
            beam: t.beam.clone(),
        },
        params: BTreeMap::new(),
        criteria: t.criteria.clone(),
        measured: t.measured.as_ref().map(|m| m.dataset.clone()),
        calculated: t.calculated.as_ref().map(|c| c.dataset.clone()),
        mu: t.mu.as_ref().map(|m| m.input.clone()),
        film: film.as_ref().ok().cloned().flatten(),
    };
    let mut products = Vec::new();
    let mut files = Vec::new();
    let mut analyses = Vec::new();
    for a in &t.analyses {
        let plugin = registry.get(&a.plugin);
        let version = plugin
            .map(|p| p.manifest.version.clone())
            .unwrap_or_default();
        let result = match (plugin, &film) {
            (_, Err(e)) if a.plugin == beamproof_plugin_film::NAME => Err(e.clone()),
            (Some(_), _) if t.film.is_some() && input.measured.is_none() && a.plugin != beamproof_plugin_film::NAME => Err(
                "no measured plane: the film analysis before this one did not produce one (see its error), or the test lists no `film` analysis first".to_string(),
            ),
            (Some(p), _) => p.analyse(&AnalysisInput {
                params: a.params.clone(),
                ..input.clone()
            }),
            (None, _) => Err(format!("plugin `{}` is not loaded", a.plugin)),
        };
        let record = match result {
            Ok(mut output) => {
                if let Some(derived) = output.derived_measured.take() {
                    let file = format!("{DERIVED_DIR}/{}.csv", t.spec.id);
                    let text = crate::film::dataset_csv(
                        &derived.data,
                        derived.unit,
                        &format!(
                            "measured dose derived by {} from {}",
                            a.plugin, derived.source
                        ),
                    );
                    if let Some(text) = text {
                        let bytes = text.into_bytes();
                        products.push(ProductRecord {
                            role: "film dose plane",
                            file: file.clone(),
                            sha256: crate::checksum::sha256_hex(&bytes),
                        });
                        files.push((file, bytes));
                    }
                    input.measured = Some(derived);
                }
                if let Some(c) = output.calibration.take() {
                    let file = format!("{CALIBRATIONS_DIR}/{}.json", t.spec.id);
                    let bytes = crate::film::calibration_bytes(&c);
                    products.push(ProductRecord {
                        role: "film calibration",
                        file: file.clone(),
                        sha256: crate::checksum::sha256_hex(&bytes),
                    });
                    files.push((file, bytes));
                    calibrations.insert(t.spec.id.clone(), c);
                }
                AnalysisRecord {
                    plugin: a.plugin.clone(),
                    version,
                    params: a.params.clone(),
                    status: output.overall_status(),
                    error: None,
                    output: Some(output),
                }
            }
            Err(e) => AnalysisRecord {
                plugin: a.plugin.clone(),
                version,
                params: a.params.clone(),
                status: Status::Error,
                error: Some(e),
                output: None,
            },
        };
        analyses.push(record);
    }
    let mut inputs: Vec<InputRecord> = [("measured", &t.measured), ("calculated", &t.calculated)]
        .into_iter()
        .filter_map(|(role, i)| {
            let i = i.as_ref()?;
            Some(InputRecord {
                role,
                file: format!("{INPUTS_DIR}/{}", i.rel),
                sha256: i.sha256.clone(),
                unit: i.dataset.unit.label().to_string(),
                shape: i.dataset.shape_name().to_string(),
            })
        })
        .collect();
    let extra =
        t.mu.iter()
            .flat_map(|m| m.files.iter())
            .chain(t.film.iter().flat_map(|f| f.files.iter()));
    inputs.extend(extra.map(|(role, rel, sha)| InputRecord {
        role,
        file: format!("{INPUTS_DIR}/{rel}"),
        sha256: sha.clone(),
        unit: String::new(),
        shape: String::new(),
    }));
    let record = TestRecord {
        id: t.spec.id.clone(),
        name: t.spec.name.clone(),
        kind: t.spec.kind.name().to_string(),
        beam: t.beam.as_ref().map(|b| b.id.clone()),
        criteria: t.criteria.name.clone(),
        status: Status::worst(analyses.iter().map(|a| a.status)).unwrap_or(Status::Error),
        inputs,
        analyses,
        products,
    };
    (record, files)
}

fn summarise(sites: &[SiteRecord]) -> Summary {
    let all: Vec<(&SiteRecord, &TestRecord)> = sites
        .iter()
        .flat_map(|s| s.tests.iter().map(move |t| (s, t)))
        .collect();
    let count = |st: Status| all.iter().filter(|(_, t)| t.status == st).count();
    let label = |s: &SiteRecord, t: &TestRecord| format!("{}/{}: {}", s.id, t.id, t.status.word());
    let reasons: Vec<String> = all
        .iter()
        .filter(|(_, t)| t.status >= Status::Fail)
        .map(|(s, t)| label(s, t))
        .collect();
    let warnings: Vec<String> = all
        .iter()
        .filter(|(_, t)| t.status == Status::Warn)
        .map(|(s, t)| label(s, t))
        .collect();
    Summary {
        tests: all.len(),
        pass: count(Status::Pass),
        warn: count(Status::Warn),
        fail: count(Status::Fail),
        error: count(Status::Error),
        verdict: if reasons.is_empty() { "GO" } else { "NO-GO" },
        reasons,
        warnings,
        notes: Vec::new(),
    }
}

/// The verdict a run's `results.json` bytes record (`GO`, `NO-GO`, `MATCHED`, `NOT MATCHED`),
/// printable; `None` when the results hold none.
pub fn verdict_in(results_json: &[u8]) -> Option<String> {
    let v: serde_json::Value = serde_json::from_slice(results_json).ok()?;
    let verdict = v["summary"]["verdict"].as_str()?;
    Some(crate::signing::printable(verdict))
}

/// Verdicts a signature needs no acknowledgement for.
pub const CLEAN_VERDICTS: [&str; 2] = ["GO", "MATCHED"];

/// The JSON document a one-off command (`gamma`, `mu`) prints with `--json`: the analysis in
/// the shape `results.json` records it (plugin, version, params, status, error, output), and
/// the cautions.
pub fn standalone_json(
    manifest: &beamproof_api::PluginManifest,
    params: &BTreeMap<String, serde_json::Value>,
    output: &AnalysisOutput,
) -> String {
    #[derive(Serialize)]
    struct Doc<'a> {
        analysis: AnalysisRecord,
        cautions: &'a [&'a str],
    }
    let doc = Doc {
        analysis: AnalysisRecord {
            plugin: manifest.name.clone(),
            version: manifest.version.clone(),
            params: params.clone(),
            status: output.overall_status(),
            error: None,
            output: Some(output.clone()),
        },
        cautions: &CAUTIONS,
    };
    serde_json::to_string_pretty(&doc).unwrap_or_else(|e| format!("{{\"error\": \"{e}\"}}"))
}
