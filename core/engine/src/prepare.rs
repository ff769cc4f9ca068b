//! Turning a decoded campaign into a runnable plan for one machine: cross-references (beams,
//! machines, plugins, parameters), input paths, and every input file read and checked. All
//! problems of all tests are collected and returned together; nothing is analysed here.

use std::collections::BTreeMap;
use std::path::Path;

use beamproof_api::{
    BeamInfo, CriteriaSet, Dataset, DatasetData, ParamType, PluginManifest, TestKind,
};

use crate::campaign::{AnalysisSpec, Campaign, InputSpec, Machine, Pos, TestSpec};
use crate::diag::{Diagnostic, did_you_mean, nearest};
pub use crate::input_store::InputFile;
use crate::input_store::{InputStore, ReadError};
use crate::readers::read_dataset;
use crate::registry::Registry;

/// A dataset ready for analysis, with the file it came from.
#[derive(Debug, Clone, PartialEq)]
pub struct PreparedInput {
    pub rel: String,
    pub sha256: String,
    pub dataset: Dataset,
}

/// One analysis with validated parameters (defaults filled in).
#[derive(Debug, Clone, PartialEq)]
pub struct PreparedAnalysis {
    pub plugin: String,
    pub params: BTreeMap<String, serde_json::Value>,
}

/// One test, ready to run.
#[derive(Debug, Clone, PartialEq)]
pub struct PreparedTest {
    pub site_id: String,
    pub site_name: String,
    pub spec: TestSpec,
    pub beam: Option<BeamInfo>,
    pub criteria: CriteriaSet,
    pub measured: Option<PreparedInput>,
    pub calculated: Option<PreparedInput>,
    pub analyses: Vec<PreparedAnalysis>,
    /// Beam data and beams of a monitor-unit check.
    pub mu: Option<crate::mu_input::PreparedMu>,
    /// The scanned film of a film calibration or a film plane.
    pub film: Option<crate::film::PreparedFilm>,
}

/// Everything a run of one machine needs.
#[derive(Debug, Clone)]
pub struct Prepared {
    pub machine: Machine,
    pub tests: Vec<PreparedTest>,
    /// Every input file once, sorted by path (the campaign's report template files too).
    pub inputs: Vec<InputFile>,
    /// The campaign's report template folder, relative to the campaign folder, when it has one.
    pub templates: Option<String>,
}

impl Prepared {
    /// The campaign's report template folder as read once (campaign-relative folder; each
    /// file's path inside the folder and its bytes), for the renderer.
    pub fn template_files(&self) -> Option<(&str, BTreeMap<String, &[u8]>)> {
        let dir = self.templates.as_deref()?;
        let prefix = format!("{dir}/");
        let files = self
            .inputs
            .iter()
            .filter_map(|f| Some((f.rel.strip_prefix(&prefix)?.to_string(), &*f.bytes)))
            .collect();
        Some((dir, files))
    }
}

/// Check what each criteria set says against what the analyses of the tests using it judge,
/// machine by machine alike: a `metrics:` id that no analysis of those tests judges (a typo
/// would otherwise leave a metric unjudged and the verdict too kind) and a set that lacks what
/// an analysis of a test cannot do without. Plugins that declare no judged metrics (built
/// before ABI 1.3) leave their sets' ids unchecked.
pub fn check_criteria_use(campaign: &Campaign, registry: &Registry) -> Vec<Diagnostic> {
    let mut diags = Vec::new();
    // For each set: the ids judged by the analyses of its tests (None once one is unknown).
    let mut judged: BTreeMap<&str, Option<Vec<String>>> = BTreeMap::new();
    for spec in campaign.sites.iter().flat_map(|s| &s.tests) {
        let Some(set) = campaign.criteria_set(&spec.criteria.0) else {
            continue;
        };
        let entry = judged.entry(set.name.as_str()).or_insert(Some(Vec::new()));
        for a in &spec.analyses {
            let Some(plugin) = registry.get(&a.plugin) else {
                continue; // reported where the analyses are checked
            };
            match (&plugin.manifest.judged_metrics, entry.as_mut()) {
                (Some(ms), Some(ids)) => ids.extend(
                    ms.iter()
                        .filter(|m| m.kinds.contains(&spec.kind))
                        .map(|m| m.id.clone()),
                ),
                _ => *entry = None,
            }
            for need in &plugin.manifest.needs {
                if !need.met_by(set) {
                    let pos = spec.criteria.1;
                    diags.push(
                        Diagnostic::at(
                            &campaign.path,
                            pos.line,
                            pos.column,
                            format!(
                                "test `{}` is judged by criteria set `{}`, which has no `{}`; analysis `{}` judges by it",
                                spec.id,
                                set.name,
                                need.key(),
                                plugin.manifest.name
                            ),
                        )
                        .help(format!(
                            "add `{}` to criteria set `{}`, or give the test a criteria set that has it",
                            need.key(),
                            set.name
                        )),
                    );
                }
            }
        }
    }
    for (name, places) in &campaign.criteria_places {
        let Some(Some(ids)) = judged.get(name.as_str()) else {
            continue; // a set no test uses, or one whose plugins do not declare their ids
        };
        for (id, pos) in &places.metrics {
            if ids.iter().any(|j| j == id) {
                continue;
            }
            let mut valid: Vec<&str> = ids.iter().map(String::as_str).collect();
            valid.sort_unstable();
            valid.dedup();
            let help = did_you_mean(id, valid.iter().copied(), || {
                if valid.is_empty() {
                    format!(
                        "the analyses of the tests using `{name}` judge no metric ids; remove `{id}`"
                    )
                } else {
                    format!(
                        "metric ids the analyses of the tests using `{name}` judge: {}",
                        valid.join(", ")
                    )
                }
            });
            diags.push(
                Diagnostic::at(
                    &campaign.path,
                    pos.line,
                    pos.column,
                    format!(
                        "criteria set `{name}` gives levels for metric `{id}`, which no analysis of its tests judges"
                    ),
                )
                .help(help),
            );
        }
    }
    diags
}

/// Which machine to run: the one named, or the only one.
pub fn choose_machine<'c>(
    campaign: &'c Campaign,
    requested: Option<&str>,
) -> Result<&'c Machine, Diagnostic> {
    let ids: Vec<&str> = campaign.machines.iter().map(|m| m.id.as_str()).collect();
    match requested {
        Some(id) => campaign.machine(id).ok_or_else(|| {
            let help = match nearest(id, ids.iter().copied()) {
                Some(n) => format!(
                    "did you mean `{n}`? the campaign describes: {}",
                    ids.join(", ")
                ),
                None => format!("the campaign describes: {}", ids.join(", ")),
            };
            Diagnostic::file(
                &campaign.path,
                format!("machine `{id}` is not described in the campaign"),
            )
            .help(help)
        }),
        None if campaign.machines.len() == 1 => Ok(&campaign.machines[0]),
        None => Err(Diagnostic::file(
            &campaign.path,
            "the campaign describes several machines; choose one",
        )
        .help(format!("add `--machine ID`, one of: {}", ids.join(", ")))),
    }
}

/// Check and read everything for `machine`, each input file once and at most `max_input_bytes`
/// long. Returns every problem found.
pub fn prepare(
    campaign: &Campaign,
    registry: &Registry,
    machine: &Machine,
    max_input_bytes: u64,
) -> Result<Prepared, Vec<Diagnostic>> {
    let mut diags = Vec::new();
    let mut tests = Vec::new();
    let mut files = InputStore::new(&campaign.dir, max_input_bytes);
    // Film-calibration tests met so far for this machine, with their film lot.
    let mut calibration_lots: BTreeMap<String, String> = BTreeMap::new();
    let at = |pos: Pos, msg: String| Diagnostic::at(&campaign.path, pos.line, pos.column, msg);
    for site in &campaign.sites {
        for spec in &site.tests {
            if let Some(ms) = &spec.machines {
                for (m, pos) in ms {
                    if campaign.machine(m).is_none() {
                        diags.push(
                            at(
                                *pos,
                                format!(
                                    "test `{}` names machine `{m}`, which is not described",
                                    spec.id
                                ),
                            )
                            .help(format!(
                                "machines: {}",
                                campaign
                                    .machines
                                    .iter()
                                    .map(|m| m.id.as_str())
                                    .collect::<Vec<_>>()
                                    .join(", ")
                            )),
                        );
                    }
                }
            }
            if !spec.applies_to(&machine.id) {
                continue;
            }
            let before = diags.len();
            let beam = beam_info(campaign, machine, spec, &mut diags);
            let analyses = analyses(campaign, registry, spec, &mut diags);
            let measured = input(
                campaign,
                machine,
                spec.measured.as_ref(),
                &mut files,
                &mut diags,
            );
            let calculated = input(
                campaign,
                machine,
                spec.calculated.as_ref(),
                &mut files,
                &mut diags,
            );
            let mu = spec.mu.as_ref().and_then(|m| {
                crate::mu_input::prepare_mu(
                    campaign,
                    machine,
                    m,
                    beam.as_ref(),
                    &mut files,
                    &mut diags,
                )
            });
            let film = spec.film.as_ref().and_then(|f| {
                crate::film::prepare_film(
                    campaign,
                    machine,
                    spec,
                    f,
                    &calibration_lots,
                    &mut files,
                    &mut diags,
                )
            });
            if let (TestKind::FilmCalibration, Some(f)) = (spec.kind, &spec.film) {
                calibration_lots.insert(spec.id.clone(), f.lot.clone());
            }
            if diags.len() == before {
                if let Err(d) = check_shapes(campaign, spec, measured.as_ref(), calculated.as_ref())
                {
                    diags.push(d);
                    continue;
                }
                let refs = check_point_refs(
                    campaign,
                    registry,
                    spec,
                    &[measured.as_ref(), calculated.as_ref()],
                );
                if !refs.is_empty() {
                    diags.extend(refs);
                    continue;
                }
                // The decoder has checked that the criteria set exists.
                let Some(criteria) = campaign.criteria_set(&spec.criteria.0).cloned() else {
                    continue;
                };
                tests.push(PreparedTest {
                    site_id: site.id.clone(),
                    site_name: site.name.clone(),
                    spec: spec.clone(),
                    beam,
                    criteria,
                    measured,
                    calculated,
                    analyses,
                    mu,
                    film,
                });
            }
        }
    }
    if tests.is_empty() && diags.is_empty() {
        diags.push(
            Diagnostic::file(
                &campaign.path,
                format!("no test applies to machine `{}`", machine.id),
            )
            .help("check the tests' `machines:` lists"),
        );
    }
    let templates = template_folder(campaign, &mut files, &mut diags);
    if diags.is_empty() {
        Ok(Prepared {
            machine: machine.clone(),
            tests,
            inputs: files.into_files(),
            templates,
        })
    } else {
        Err(diags)
    }
}

fn beam_info(
    campaign: &Campaign,
    machine: &Machine,
    spec: &TestSpec,
    diags: &mut Vec<Diagnostic>,
) -> Option<BeamInfo> {
    let (id, pos) = spec.beam.as_ref()?;
    match machine.beams.iter().find(|b| &b.id == id) {
        Some(b) => Some(BeamInfo {
            id: b.id.clone(),
            modality: b.modality.clone(),
            energy: b.energy,
            fff: b.fff,
        }),
        None => {
            let ids: Vec<&str> = machine.beams.iter().map(|b| b.id.as_str()).collect();
            let help = did_you_mean(id, ids.iter().copied(), || {
                format!("beams of `{}`: {}", machine.id, ids.join(", "))
            });
            diags.push(
                Diagnostic::at(
                    &campaign.path,
                    pos.line,
                    pos.column,
                    format!("machine `{}` has no beam `{id}`", machine.id),
                )
                .help(help),
            );
            None
        }
    }
}

fn analyses(
    campaign: &Campaign,
    registry: &Registry,
    spec: &TestSpec,
    diags: &mut Vec<Diagnostic>,
) -> Vec<PreparedAnalysis> {
    let mut out = Vec::new();
    for a in &spec.analyses {
        let at = |msg: String| Diagnostic::at(&campaign.path, a.pos.line, a.pos.column, msg);
        let Some(plugin) = registry.get(&a.plugin) else {
            let names: Vec<&str> = registry.names().collect();
            let help = did_you_mean(&a.plugin, names.iter().copied(), || {
                format!(
                    "installed analyses: {}; a dynamic plugin's folder goes in `plugin-dirs` or `--plugin-dir`",
                    names.join(", ")
                )
            });
            diags.push(at(format!("no analysis plugin named `{}`", a.plugin)).help(help));
            continue;
        };
        if !plugin.manifest.kinds.contains(&spec.kind) {
            let kinds: Vec<&str> = plugin.manifest.kinds.iter().map(|k| k.name()).collect();
            diags.push(
                at(format!(
                    "plugin `{}` does not analyse `{}` tests",
                    a.plugin,
                    spec.kind.name()
                ))
                .help(format!("it accepts: {}", kinds.join(", "))),
            );
            continue;
        }
        match validate_params(&campaign.path, a, &plugin.manifest) {
            Ok(params) => out.push(PreparedAnalysis {
                plugin: a.plugin.clone(),
                params,
            }),
            Err(mut d) => diags.append(&mut d),
        }
    }
    out
}

/// Check a test's parameters against the plugin's declared parameters and fill in defaults.
pub fn validate_params(
    file: &Path,
    a: &AnalysisSpec,
    manifest: &PluginManifest,
) -> Result<BTreeMap<String, serde_json::Value>, Vec<Diagnostic>> {
    let mut diags = Vec::new();
    let mut out = BTreeMap::new();
    for (name, value, pos) in &a.params {
        let at = |msg: String| Diagnostic::at(file, pos.line, pos.column, msg);
        let Some(spec) = manifest.params.iter().find(|p| &p.name == name) else {
            let names: Vec<&str> = manifest.params.iter().map(|p| p.name.as_str()).collect();
            let help = did_you_mean(name, names.iter().copied(), || {
                if names.is_empty() {
                    format!("`{}` takes no parameters", manifest.name)
                } else {
                    format!("parameters of `{}`: {}", manifest.name, names.join(", "))
                }
            });
            diags.push(
                at(format!(
                    "unknown parameter `{name}` for plugin `{}`",
                    manifest.name
                ))
                .help(help),
            );
            continue;
        };
        let problem = match (&spec.kind, value) {
            (ParamType::Number { min, max }, serde_json::Value::Number(n)) => {
                let v = n.as_f64().unwrap_or(f64::NAN);
                range_problem(v, *min, *max)
            }
            (ParamType::Integer { min, max }, serde_json::Value::Number(n)) if n.is_i64() => {
                let v = n.as_i64().unwrap_or(0);
                range_problem(v as f64, min.map(|m| m as f64), max.map(|m| m as f64))
            }
            (ParamType::Bool, serde_json::Value::Bool(_))
            | (ParamType::Text, serde_json::Value::String(_)) => None,
            (ParamType::PointRef, serde_json::Value::String(s)) => point_ref_problem(s),
            (ParamType::Choice { choices }, serde_json::Value::String(s))
                if choices.contains(s) =>
            {
                None
            }
            (ParamType::Choice { choices }, _) => {
                Some(format!("must be one of: {}", choices.join(", ")))
            }
            (kind, _) => Some(format!("must be {}", kind_word(kind))),
        };
        match problem {
            Some(p) => diags.push(
                at(format!(
                    "parameter `{name}` of `{}` {p}, found {value}",
                    manifest.name
                ))
                .help(spec.description.clone()),
            ),
            None => {
                out.insert(name.clone(), value.clone());
            }
        }
    }
    for spec in &manifest.params {
        if let (false, Some(d)) = (out.contains_key(&spec.name), &spec.default) {
            out.insert(spec.name.clone(), d.clone());
        }
    }
    if diags.is_empty() {
        Ok(out)
    } else {
        Err(diags)
    }
}

/// What a point reference must be: three finite numbers `x,y,z` when it holds a comma, else a
/// label (looked up once the test's data are read, see [`check_point_refs`]).
fn point_ref_problem(s: &str) -> Option<String> {
    if !s.contains(',') {
        return s
            .trim()
            .is_empty()
            .then(|| "must name a point label or give `x,y,z` in mm".to_string());
    }
    beamproof_api::parse_xyz(s)
        .is_none()
        .then(|| "must be `x,y,z` (three numbers, mm) or a point label without commas".into())
}

/// Every point-reference parameter that names a label must name a point of the test's
/// measured or calculated point set (a label that matches nothing would otherwise only fail
/// when the analysis runs).
fn check_point_refs(
    campaign: &Campaign,
    registry: &Registry,
    spec: &TestSpec,
    data: &[Option<&PreparedInput>],
) -> Vec<Diagnostic> {
    let mut diags = Vec::new();
    let sets: Vec<(&str, &beamproof_api::PointSet)> = data
        .iter()
        .flatten()
        .filter_map(|i| match &i.dataset.data {
            DatasetData::Points(p) => Some((i.rel.as_str(), p)),
            _ => None,
        })
        .collect();
    for a in &spec.analyses {
        let Some(plugin) = registry.get(&a.plugin) else {
            continue;
        };
        for (name, value, pos) in &a.params {
            let is_ref = plugin
                .manifest
                .params
                .iter()
                .any(|p| &p.name == name && p.kind == ParamType::PointRef);
            let Some(label) = value.as_str().filter(|s| is_ref && !s.contains(',')) else {
                continue;
            };
            let label = label.trim();
            if sets
                .iter()
                .any(|(_, p)| p.labels.iter().any(|l| l == label))
            {
                continue;
            }
            let at = |m: String| Diagnostic::at(&campaign.path, pos.line, pos.column, m);
            let d = match sets.as_slice() {
                [] => at(format!(
                    "`{name}` of `{}` names point `{label}`, but test `{}` has no point set to find it in",
                    a.plugin, spec.id
                ))
                .help("give the point as `x,y,z` in mm"),
                _ => {
                    let labels: Vec<&str> = sets
                        .iter()
                        .flat_map(|(_, p)| p.labels.iter().map(String::as_str))
                        .filter(|l| !l.is_empty())
                        .collect();
                    let files: Vec<&str> = sets.iter().map(|(f, _)| *f).collect();
                    at(format!(
                        "`{name}` of `{}` names point `{label}`, which no point of {} carries",
                        a.plugin,
                        files.join(" or ")
                    ))
                    .help(did_you_mean(label, labels.iter().copied(), || {
                        format!("labels there: {}", labels.join(", "))
                    }))
                }
            };
            diags.push(d);
        }
    }
    diags
}

fn range_problem(v: f64, min: Option<f64>, max: Option<f64>) -> Option<String> {
    match (min, max) {
        (Some(lo), _) if v < lo => Some(format!("must be at least {lo}")),
        (_, Some(hi)) if v > hi => Some(format!("must be at most {hi}")),
        _ => None,
    }
}

fn kind_word(kind: &ParamType) -> &'static str {
    match kind {
        ParamType::Number { .. } => "a number",
        ParamType::Integer { .. } => "a whole number",
        ParamType::Bool => "true or false",
        ParamType::Choice { .. } => "one of the listed words",
        ParamType::Text => "text",
        ParamType::PointRef => "`x,y,z` in mm or a point label",
    }
}

/// Input paths must be relative and stay inside the campaign folder, so that a run folder can
/// hold a copy of every input at the same relative place.
pub(crate) fn clean_relative(p: &str) -> Option<String> {
    let path = Path::new(p);
    if path.is_absolute() || p.contains('\\') {
        return None;
    }
    let mut parts = Vec::new();
    for c in path.components() {
        match c {
            std::path::Component::Normal(s) => parts.push(s.to_str()?.to_string()),
            std::path::Component::CurDir => {}
            _ => return None,
        }
    }
    (!parts.is_empty()).then(|| parts.join("/"))
}

/// Read an input file named in the campaign through the store: its path relative to the
/// campaign folder, its full path (for messages) and the file as read once.
pub(crate) fn input_bytes(
    campaign: &Campaign,
    machine: &Machine,
    spec: &InputSpec,
    store: &mut InputStore,
    diags: &mut Vec<Diagnostic>,
) -> Option<(String, std::path::PathBuf, InputFile)> {
    let written = spec.path_for(&machine.id);
    input_at(
        campaign,
        machine,
        spec,
        &written,
        "input file",
        store,
        diags,
    )
}

/// Read the campaign-relative file `written` (named by `spec`) through the store; a problem
/// is reported at `spec`'s place and called `what`.
pub(crate) fn input_at(
    campaign: &Campaign,
    machine: &Machine,
    spec: &InputSpec,
    written: &str,
    what: &str,
    store: &mut InputStore,
    diags: &mut Vec<Diagnostic>,
) -> Option<(String, std::path::PathBuf, InputFile)> {
    let at = |msg: String| Diagnostic::at(&campaign.path, spec.pos.line, spec.pos.column, msg);
    if let Err(e) = crate::input_store::check_name(written) {
        diags.push(
            at(format!(
                "{what} `{}` cannot be used: {e}",
                written.escape_debug()
            ))
            .help(e.help()),
        );
        return None;
    }
    let Some(rel) = clean_relative(written) else {
        diags.push(at(format!("{what} path `{written}` leaves the campaign folder"))
            .help("give paths relative to the campaign file, without `..`, so the run folder can keep a copy of every input"));
        return None;
    };
    let path = campaign.resolve(&rel);
    match store.read(&rel) {
        Ok(f) => Some((rel, path, f)),
        Err(e) => {
            let for_machine = if spec.template.contains("{machine}") {
                format!(" (for machine `{}`)", machine.id)
            } else {
                String::new()
            };
            diags.push(
                at(format!("{what} `{rel}`{for_machine} cannot be read: {e}")).help(match e {
                    ReadError::NotFound => format!("expected at {}", path.display()),
                    _ => format!("{} ({})", e.help(), path.display()),
                }),
            );
            None
        }
    }
}

fn input(
    campaign: &Campaign,
    machine: &Machine,
    spec: Option<&InputSpec>,
    files: &mut InputStore,
    diags: &mut Vec<Diagnostic>,
) -> Option<PreparedInput> {
    let spec = spec?;
    let (rel, path, file) = input_bytes(campaign, machine, spec, files, diags)?;
    match read_dataset(&path, &file.bytes, &rel, spec.placement.as_ref()) {
        Ok(dataset) => Some(PreparedInput {
            rel,
            sha256: file.sha256,
            dataset,
        }),
        Err(d) => {
            diags.push(d);
            None
        }
    }
}

/// File name of the main template in a report template folder (the report crate reads it).
pub const TEMPLATE_MAIN: &str = "report.typ.hbs";

/// The campaign's report template folder: every file in it becomes an input (read once through
/// the store, copied into the run folder and checksummed), and the report is rendered from
/// those bytes, so a run records exactly which templates made its report. Links and special
/// files in the folder meet the same rules as every other input.
fn template_folder(
    campaign: &Campaign,
    files: &mut InputStore,
    diags: &mut Vec<Diagnostic>,
) -> Option<String> {
    let (written, pos) = campaign.templates.as_ref()?;
    let at = |msg: String| Diagnostic::at(&campaign.path, pos.line, pos.column, msg);
    let text = written.to_string_lossy();
    let Some(rel) = clean_relative(&text) else {
        diags.push(
            at(format!("template folder `{text}` leaves the campaign folder"))
                .help("keep the template folder beside the campaign file, so the run folder can keep a copy"),
        );
        return None;
    };
    let dir = campaign.resolve(&rel);
    if !dir.is_dir() {
        diags.push(
            at(format!("template folder `{rel}` is not a folder")).help(format!(
                "expected a folder at {} holding {TEMPLATE_MAIN}",
                dir.display()
            )),
        );
        return None;
    }
    let before = diags.len();
    let mut main_found = false;
    for entry in walkdir::WalkDir::new(&dir).sort_by_file_name() {
        let entry = match entry {
            Ok(e) => e,
            Err(e) => {
                diags.push(at(format!("template folder `{rel}` cannot be read: {e}")));
                return None;
            }
        };
        if entry.file_type().is_dir() {
            continue;
        }
        let Some(inner) = entry
            .path()
            .strip_prefix(&dir)
            .ok()
            .and_then(|p| p.to_str())
            .map(|p| p.replace(std::path::MAIN_SEPARATOR, "/"))
        else {
            diags.push(
                at(format!(
                    "template file name `{}` is not UTF-8 text",
                    entry.path().display()
                ))
                .help("rename the file with UTF-8 characters"),
            );
            continue;
        };
        let file_rel = format!("{rel}/{inner}");
        match files.read(&file_rel) {
            Ok(_) => main_found |= inner == TEMPLATE_MAIN,
            Err(e) => diags.push(
                at(format!(
                    "template file `{}` cannot be read: {e}",
                    file_rel.escape_debug()
                ))
                .help(e.help()),
            ),
        }
    }
    if !main_found && diags.len() == before {
        diags.push(
            at(format!("template folder `{rel}` has no {TEMPLATE_MAIN}")).help(format!(
                "expected {}; copy templates/{TEMPLATE_MAIN} from beamproof as a starting point",
                dir.join(TEMPLATE_MAIN).display()
            )),
        );
    }
    (diags.len() == before).then_some(rel)
}

/// The data shapes each test kind takes, checked before any analysis runs.
fn check_shapes(
    campaign: &Campaign,
    spec: &TestSpec,
    measured: Option<&PreparedInput>,
    calculated: Option<&PreparedInput>,
) -> Result<(), Diagnostic> {
    let at = |msg: String, help: &str| {
        Diagnostic::at(&campaign.path, spec.pos.line, spec.pos.column, msg).help(help)
    };
    type ShapeOk = fn(&DatasetData) -> bool;
    let depth: ShapeOk =
        |d| matches!(d, DatasetData::Curve(c) if c.axis == beamproof_api::CurveAxis::Depth);
    let lateral: ShapeOk =
        |d| matches!(d, DatasetData::Curve(c) if c.axis != beamproof_api::CurveAxis::Depth);
    let points: ShapeOk = |d| matches!(d, DatasetData::Points(_));
    let grid: ShapeOk = |d| matches!(d, DatasetData::Grid(_));
    let plane: ShapeOk = |d| matches!(d, DatasetData::Grid(g) if g.dimensions() == 2);
    let volume: ShapeOk = |d| matches!(d, DatasetData::Grid(g) if g.dimensions() == 3);
    let points_or_grid: ShapeOk = |d| matches!(d, DatasetData::Points(_) | DatasetData::Grid(_));
    let (want_m, want_c, words): (Option<ShapeOk>, Option<ShapeOk>, &str) = match spec.kind {
        TestKind::DepthDose => (
            Some(depth),
            Some(depth),
            "measured and calculated depth curves (`# axis: depth`)",
        ),
        TestKind::Profile => (
            Some(lateral),
            Some(lateral),
            "measured and calculated profiles (`# axis: x`, `y` or `diagonal`)",
        ),
        TestKind::Plane if spec.film.is_some() => (
            None,
            Some(grid),
            "a calculated plane or volume for the film",
        ),
        TestKind::Plane => (
            Some(plane),
            Some(grid),
            "a measured 2D plane and a calculated plane or volume",
        ),
        TestKind::Volume => (
            Some(volume),
            Some(volume),
            "measured and calculated 3D grids",
        ),
        TestKind::PointSet => (
            Some(points),
            Some(grid),
            "measured points and a calculated dose grid",
        ),
        TestKind::PointDose => (
            Some(points),
            Some(points_or_grid),
            "measured points and calculated points or a dose grid",
        ),
        TestKind::MuCheck | TestKind::FilmCalibration => (None, None, ""),
    };
    for (role, want, got) in [
        ("measured", want_m, measured),
        ("calculated", want_c, calculated),
    ] {
        let Some(ok) = want else { continue };
        match got {
            None => {
                return Err(at(
                    format!("a `{}` test needs `{role}` data", spec.kind.name()),
                    &format!("give {words}"),
                ));
            }
            Some(inp) if !ok(&inp.dataset.data) => {
                return Err(at(
                    format!(
                        "`{role}` file `{}` holds a {}, which does not fit a `{}` test",
                        inp.rel,
                        inp.dataset.shape_name(),
                        spec.kind.name()
                    ),
                    &format!("a `{}` test takes {words}", spec.kind.name()),
                ));
            }
            Some(_) => {}
        }
    }
    if let (Some(m), Some(c)) = (measured, calculated)
        && m.dataset.unit != c.dataset.unit
    {
        return Err(at(
            format!(
                "mismatched dose units: measured `{}` is in {}, calculated `{}` in {}",
                m.rel,
                m.dataset.unit.label(),
                c.rel,
                c.dataset.unit.label()
            ),
            "give both as absolute dose (Gy, cGy or mGy) or both as relative dose (%)",
        ));
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn input_paths_stay_inside_the_campaign_folder() {
        assert_eq!(
            clean_relative("./data/lin-a/p.csv").as_deref(),
            Some("data/lin-a/p.csv")
        );
        assert_eq!(clean_relative("../secret.csv"), None);
        assert_eq!(clean_relative("/abs/p.csv"), None);
        assert_eq!(clean_relative("data/../../x"), None);
    }
}
