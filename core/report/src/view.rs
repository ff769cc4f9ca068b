//! The report's view of a run: built from `results.json` alone (the report never runs an
//! analysis), with every number formatted here, because typst has no fixed-decimal formatting.

use beamproof_api::{CriteriaSet, Figure, Normalisation, fixed_for};
use serde::{Deserialize, Serialize};

use crate::plot;

/// The subset of `results.json` the report reads.
#[derive(Debug, Deserialize)]
pub struct Results {
    pub software: Software,
    pub campaign: CampaignIn,
    pub machine: MachineIn,
    pub run: RunIn,
    pub plugins: Vec<PluginIn>,
    pub criteria: Vec<CriteriaSet>,
    pub sites: Vec<SiteIn>,
    pub summary: SummaryIn,
    pub references: Vec<ReferenceIn>,
    pub cautions: Vec<String>,
    pub report: ReportIn,
}

#[derive(Debug, Deserialize)]
pub struct ReportIn {
    pub template: String,
    pub files: Vec<FileIn>,
}

#[derive(Debug, Deserialize, Serialize, Clone)]
pub struct FileIn {
    pub file: String,
    pub sha256: String,
}

#[derive(Debug, Deserialize)]
pub struct Software {
    pub version: String,
}

#[derive(Debug, Deserialize)]
pub struct CampaignIn {
    pub id: String,
    pub title: String,
    pub institution: String,
    pub file: String,
    pub sha256: String,
    pub tps: TpsIn,
}

#[derive(Debug, Deserialize)]
pub struct TpsIn {
    pub name: String,
    pub version: String,
    pub beam_model: String,
}

#[derive(Debug, Deserialize)]
pub struct MachineIn {
    pub id: String,
    pub description: String,
    pub beams: Vec<BeamIn>,
}

#[derive(Debug, Deserialize)]
pub struct BeamIn {
    pub id: String,
    pub modality: String,
    pub energy: f64,
    pub fff: bool,
}

#[derive(Debug, Deserialize)]
pub struct RunIn {
    pub id: String,
    pub date: String,
    pub reproduce: String,
}

#[derive(Debug, Deserialize)]
pub struct PluginIn {
    pub name: String,
    pub version: String,
    pub description: String,
    pub origin: String,
}

#[derive(Debug, Deserialize)]
pub struct SiteIn {
    pub id: String,
    pub name: String,
    pub tests: Vec<TestIn>,
}

#[derive(Debug, Deserialize)]
pub struct TestIn {
    pub id: String,
    pub name: String,
    pub kind: String,
    pub beam: Option<String>,
    pub criteria: String,
    pub status: String,
    pub inputs: Vec<InputIn>,
    pub analyses: Vec<AnalysisIn>,
    /// Files the analyses produced (film calibrations, film dose planes).
    #[serde(default)]
    pub products: Vec<InputIn>,
}

#[derive(Debug, Deserialize)]
pub struct InputIn {
    pub file: String,
    pub sha256: String,
}

#[derive(Debug, Deserialize)]
pub struct AnalysisIn {
    pub plugin: String,
    pub version: String,
    pub params: serde_json::Map<String, serde_json::Value>,
    pub status: String,
    pub error: Option<String>,
    pub output: Option<OutputIn>,
}

#[derive(Debug, Deserialize)]
pub struct OutputIn {
    pub metrics: Vec<MetricIn>,
    pub tables: Vec<TableIn>,
    #[serde(default)]
    pub figures: Vec<Figure>,
    pub notes: Vec<String>,
}

#[derive(Debug, Deserialize)]
pub struct MetricIn {
    pub label: String,
    /// `null` in the results when undefined.
    pub value: Option<f64>,
    pub unit: String,
    pub limits: Option<LimitsIn>,
    pub status: Option<String>,
}

#[derive(Debug, Deserialize)]
pub struct LimitsIn {
    pub tolerance: f64,
    pub action: f64,
}

#[derive(Debug, Deserialize, Serialize, Clone)]
pub struct TableIn {
    pub title: String,
    pub columns: Vec<String>,
    pub rows: Vec<Vec<String>>,
}

#[derive(Debug, Deserialize)]
pub struct SummaryIn {
    pub tests: usize,
    pub pass: usize,
    pub warn: usize,
    pub fail: usize,
    pub error: usize,
    pub verdict: String,
    pub reasons: Vec<String>,
    pub warnings: Vec<String>,
    #[serde(default)]
    pub notes: Vec<String>,
}

#[derive(Debug, Deserialize, Serialize, Clone)]
pub struct ReferenceIn {
    pub key: String,
    pub citation: String,
}

/// What the template sees. Every value is text, already formatted.
#[derive(Debug, Serialize)]
pub struct View {
    pub title: String,
    pub institution: String,
    pub campaign_id: String,
    pub campaign_sha256: String,
    pub machine_id: String,
    pub machine_description: String,
    pub run_id: String,
    pub beams: Vec<String>,
    pub tps: String,
    pub beam_model: String,
    pub run_date: String,
    pub software_version: String,
    pub plugins: Vec<PluginView>,
    /// The plugins that analysed at least one test, with the tests they analysed.
    pub methods: Vec<MethodView>,
    pub criteria: Vec<CriteriaView>,
    /// SHA-256 of every input, the campaign file, the templates and the results file.
    pub manifest: Vec<FileIn>,
    pub results_sha256: String,
    pub template: String,
    pub go: bool,
    pub verdict: String,
    /// What the verdict requires, said in words on the verdict page.
    pub verdict_rule: String,
    /// What kind of report this is, for the title page.
    pub report_kind: String,
    /// Remarks on the run as a whole (a matching run's differences and tests not compared).
    pub notes: Vec<String>,
    pub counts: Vec<Count>,
    pub n_tests: usize,
    pub reasons: Vec<String>,
    pub warnings: Vec<String>,
    pub summary_rows: Vec<SummaryRow>,
    pub sites: Vec<SiteView>,
    pub references: Vec<ReferenceIn>,
    pub cautions: Vec<String>,
    pub reproduce: String,
}

#[derive(Debug, Serialize)]
pub struct Count {
    pub label: String,
    pub n: usize,
}

#[derive(Debug, Serialize)]
pub struct PluginView {
    pub name: String,
    pub version: String,
    pub origin: String,
}

#[derive(Debug, Serialize)]
pub struct MethodView {
    pub plugin: String,
    pub version: String,
    pub description: String,
    pub tests: Vec<String>,
}

#[derive(Debug, Serialize)]
pub struct CriteriaView {
    pub name: String,
    pub rows: Vec<CriterionRow>,
}

#[derive(Debug, Serialize)]
pub struct CriterionRow {
    pub quantity: String,
    pub detail: String,
    pub tolerance: String,
    pub action: String,
}

#[derive(Debug, Serialize)]
pub struct SummaryRow {
    pub site: String,
    pub test: String,
    pub kind: String,
    pub beam: String,
    pub status: String,
}

#[derive(Debug, Serialize)]
pub struct SiteView {
    pub name: String,
    pub id: String,
    pub tests: Vec<TestView>,
}

#[derive(Debug, Serialize)]
pub struct TestView {
    pub id: String,
    pub name: String,
    pub kind: String,
    pub beam: String,
    pub criteria: String,
    pub status: String,
    pub analyses: Vec<AnalysisView>,
}

#[derive(Debug, Serialize)]
pub struct AnalysisView {
    pub plugin: String,
    pub version: String,
    /// `name = value` pairs of the parameters the analysis ran with.
    pub params: String,
    pub status: String,
    pub error: Option<String>,
    pub metrics: Vec<MetricView>,
    pub tables: Vec<TableIn>,
    pub figures: Vec<FigureView>,
    pub notes: Vec<String>,
}

/// A figure as the template sees it: its number (the picture is `/fig/<n>.svg`), its kind
/// (chart, histogram or map), its title, and why it could not be drawn, if so.
#[derive(Debug, Serialize)]
pub struct FigureView {
    pub n: usize,
    pub kind: String,
    pub title: String,
    pub error: Option<String>,
    /// The drawing itself, for the HTML summary (inline SVG made by plotters, which escapes
    /// the text it writes).
    pub svg: String,
}

#[derive(Debug, Serialize)]
pub struct MetricView {
    pub label: String,
    pub value: String,
    pub tolerance: String,
    pub action: String,
    pub status: String,
}

/// Upper-case status word as printed.
fn word(status: &str) -> String {
    status.to_ascii_uppercase()
}

/// Fixed-decimal text of a number, never `-0.00` (a negative zero reads as a sign error).
pub fn fixed(v: f64, digits: usize) -> String {
    let s = format!("{v:.digits$}");
    if s.trim_start_matches('-')
        .chars()
        .all(|c| c == '0' || c == '.')
    {
        s.trim_start_matches('-').to_string()
    } else {
        s
    }
}

fn with_unit(v: String, unit: &str) -> String {
    if unit.is_empty() {
        v
    } else {
        format!("{v} {unit}")
    }
}

impl View {
    /// The view of a run and the SVG of each figure, numbered from 0 in document order (a
    /// figure that could not be drawn has an empty SVG and an error in its view).
    pub fn from_results(r: Results, results_sha256: String) -> (View, Vec<String>) {
        let mut svgs = Vec::new();
        let methods = methods(&r);
        let manifest = manifest(&r);
        let s = &r.summary;
        let view = View {
            run_id: r.run.id.clone(),
            methods,
            criteria: r
                .criteria
                .iter()
                .map(|c| criteria_view(c, &r.sites))
                .collect(),
            manifest,
            results_sha256,
            template: r.report.template.clone(),
            title: r.campaign.title,
            institution: r.campaign.institution,
            campaign_id: r.campaign.id,
            campaign_sha256: r.campaign.sha256,
            machine_id: r.machine.id,
            machine_description: r.machine.description,
            beams: r
                .machine
                .beams
                .iter()
                .map(|b| {
                    let unit = if b.modality == "electron" {
                        "MeV"
                    } else {
                        "MV"
                    };
                    let fff = if b.fff {
                        ", flattening-filter-free"
                    } else {
                        ""
                    };
                    format!(
                        "{} ({} {} {}{fff})",
                        b.id,
                        fixed(b.energy, 0),
                        unit,
                        b.modality
                    )
                })
                .collect(),
            tps: format!("{} {}", r.campaign.tps.name, r.campaign.tps.version),
            beam_model: r.campaign.tps.beam_model,
            run_date: r.run.date,
            software_version: r.software.version,
            plugins: r
                .plugins
                .into_iter()
                .map(|p| PluginView {
                    name: p.name,
                    version: p.version,
                    origin: p.origin,
                })
                .collect(),
            go: s.verdict == "GO" || s.verdict == "MATCHED",
            verdict: s.verdict.clone(),
            verdict_rule: match s.verdict.as_str() {
                "GO" => "No test failed or could not be analysed.".into(),
                "MATCHED" => "No compared test failed or could not be compared.".into(),
                "NOT MATCHED" => "MATCHED requires that no compared test failed and none could not be compared. Reasons:".into(),
                _ => "GO requires that no test failed and none could not be analysed. Reasons:".into(),
            },
            notes: s.notes.clone(),
            report_kind: if s.verdict.contains("MATCHED") {
                "MACHINE MATCHING REPORT".into()
            } else {
                "COMMISSIONING REPORT".into()
            },
            counts: [
                ("PASS", s.pass),
                ("WARN", s.warn),
                ("FAIL", s.fail),
                ("ERROR", s.error),
            ]
            .into_iter()
            .map(|(label, n)| Count {
                label: label.into(),
                n,
            })
            .collect(),
            n_tests: s.tests,
            reasons: s.reasons.clone(),
            warnings: s.warnings.clone(),
            summary_rows: r
                .sites
                .iter()
                .flat_map(|site| {
                    site.tests.iter().map(move |t| SummaryRow {
                        site: site.name.clone(),
                        test: t.name.clone(),
                        kind: t.kind.clone(),
                        beam: t.beam.clone().unwrap_or_default(),
                        status: word(&t.status),
                    })
                })
                .collect(),
            sites: r
                .sites
                .into_iter()
                .map(|site| SiteView {
                    name: site.name,
                    id: site.id,
                    tests: site
                        .tests
                        .into_iter()
                        .map(|t| test_view(t, &mut svgs))
                        .collect(),
                })
                .collect(),
            references: r.references,
            cautions: r.cautions,
            reproduce: r.run.reproduce,
        };
        (view, svgs)
    }
}

fn methods(r: &Results) -> Vec<MethodView> {
    r.plugins
        .iter()
        .filter_map(|p| {
            let tests: Vec<String> = r
                .sites
                .iter()
                .flat_map(|s| &s.tests)
                .filter(|t| t.analyses.iter().any(|a| a.plugin == p.name))
                .map(|t| t.id.clone())
                .collect();
            (!tests.is_empty()).then(|| MethodView {
                plugin: p.name.clone(),
                version: p.version.clone(),
                description: p.description.clone(),
                tests,
            })
        })
        .collect()
}

/// Every file the run depends on or its analyses produced, once, in path order: the campaign
/// file, the test inputs, the templates and the analyses' files (film calibrations and dose
/// planes); the results file's own checksum is shown beside this list.
fn manifest(r: &Results) -> Vec<FileIn> {
    let mut files = std::collections::BTreeMap::new();
    files.insert(r.campaign.file.clone(), r.campaign.sha256.clone());
    for t in r.sites.iter().flat_map(|s| &s.tests) {
        for i in t.inputs.iter().chain(&t.products) {
            files.insert(i.file.clone(), i.sha256.clone());
        }
    }
    for f in &r.report.files {
        files.insert(f.file.clone(), f.sha256.clone());
    }
    files
        .into_iter()
        .map(|(file, sha256)| FileIn { file, sha256 })
        .collect()
}

/// A criteria set's levels, then the levels the analyses of its tests applied on their own
/// (defaults such as the MU check's TG-114 levels, or the film checks'), so that the report
/// states every level that was applied, not only the set's.
fn criteria_view(c: &CriteriaSet, sites: &[SiteIn]) -> CriteriaView {
    let mut rows = own_criteria_rows(c);
    let mut own: Vec<(f64, f64)> = Vec::new();
    own.extend(c.dose_difference_percent.map(|l| (l.tolerance, l.action)));
    own.extend(
        c.gamma
            .iter()
            .map(|g| (g.tolerance_pass_percent, g.action_pass_percent)),
    );
    own.extend(c.metrics.values().map(|l| (l.tolerance, l.action)));
    let is_own = |t: f64, a: f64| own.iter().any(|&(ot, oa)| ot == t && oa == a);
    // (plugin, unit, tolerance, action) -> (first metric label, how many metrics)
    type Key = (String, String, f64, f64);
    let mut defaults: Vec<(Key, (String, usize))> = Vec::new();
    for t in sites
        .iter()
        .flat_map(|s| &s.tests)
        .filter(|t| t.criteria == c.name)
    {
        for a in &t.analyses {
            for m in a.output.iter().flat_map(|o| &o.metrics) {
                let Some(l) = &m.limits else { continue };
                if is_own(l.tolerance, l.action) {
                    continue;
                }
                let key = (a.plugin.clone(), m.unit.clone(), l.tolerance, l.action);
                match defaults.iter_mut().find(|(k, _)| *k == key) {
                    Some((_, (_, n))) => *n += 1,
                    None => defaults.push((key, (m.label.clone(), 1))),
                }
            }
        }
    }
    for ((plugin, unit, tolerance, action), (label, n)) in defaults {
        let unit = if unit.is_empty() {
            String::new()
        } else {
            format!(" {unit}")
        };
        rows.push(CriterionRow {
            quantity: format!("default of `{plugin}`"),
            detail: if n > 1 {
                format!("{label} and {} more", n - 1)
            } else {
                label
            },
            tolerance: format!("{}{unit}", fixed(tolerance, 2)),
            action: format!("{}{unit}", fixed(action, 2)),
        });
    }
    CriteriaView {
        name: c.name.clone(),
        rows,
    }
}

/// The levels a criteria set gives itself.
fn own_criteria_rows(c: &CriteriaSet) -> Vec<CriterionRow> {
    let mut rows = Vec::new();
    if let Some(l) = &c.dose_difference_percent {
        rows.push(CriterionRow {
            quantity: "Point dose difference".into(),
            detail: "|calculated - measured| / measured".into(),
            tolerance: format!("{} %", fixed(l.tolerance, 2)),
            action: format!("{} %", fixed(l.action, 2)),
        });
    }
    for g in &c.gamma {
        let norm = match (g.normalisation, g.normalisation_dose_gy) {
            (Normalisation::Local, _) => "local".to_string(),
            (Normalisation::Global, Some(d)) => format!("global, to {} Gy", fixed(d, 3)),
            (Normalisation::Global, None) => "global, to the reference maximum".to_string(),
        };
        rows.push(CriterionRow {
            quantity: "Gamma pass rate".into(),
            detail: format!(
                "{} %/{} mm, {norm}, threshold {} %",
                fixed(g.dose_percent, 1),
                fixed(g.dta_mm, 1),
                fixed(g.threshold_percent, 1)
            ),
            tolerance: format!("at least {} %", fixed(g.tolerance_pass_percent, 1)),
            action: format!("at least {} %", fixed(g.action_pass_percent, 1)),
        });
    }
    for (id, l) in &c.metrics {
        rows.push(CriterionRow {
            quantity: id.clone(),
            detail: "metric deviation".into(),
            tolerance: fixed(l.tolerance, 2),
            action: fixed(l.action, 2),
        });
    }
    rows
}

fn params_text(p: &serde_json::Map<String, serde_json::Value>) -> String {
    p.iter()
        .map(|(k, v)| match v {
            serde_json::Value::String(s) => format!("{k} = {s}"),
            other => format!("{k} = {other}"),
        })
        .collect::<Vec<_>>()
        .join(", ")
}

fn figure_view(f: &Figure, svgs: &mut Vec<String>) -> FigureView {
    let (svg, error) = match plot::draw(f) {
        Ok(svg) => (svg, None),
        Err(e) => (String::new(), Some(e)),
    };
    svgs.push(svg.clone());
    FigureView {
        n: svgs.len() - 1,
        kind: plot::kind(f).into(),
        title: plot::title(f).into(),
        error,
        svg,
    }
}

fn test_view(t: TestIn, svgs: &mut Vec<String>) -> TestView {
    TestView {
        id: t.id,
        name: t.name,
        kind: t.kind,
        beam: t.beam.unwrap_or_default(),
        criteria: t.criteria,
        status: word(&t.status),
        analyses: t
            .analyses
            .into_iter()
            .map(|a| {
                let (metrics, tables, figures, notes) = match a.output {
                    Some(o) => (
                        o.metrics
                            .into_iter()
                            .map(|m| MetricView {
                                // One rule per unit (beamproof_api::decimals_for).
                                value: match m.value {
                                    Some(v) => with_unit(fixed_for(v, &m.unit), &m.unit),
                                    None => "undefined".into(),
                                },
                                tolerance: m
                                    .limits
                                    .as_ref()
                                    .map(|l| with_unit(fixed_for(l.tolerance, &m.unit), &m.unit))
                                    .unwrap_or_default(),
                                action: m
                                    .limits
                                    .as_ref()
                                    .map(|l| with_unit(fixed_for(l.action, &m.unit), &m.unit))
                                    .unwrap_or_default(),
                                status: m
                                    .status
                                    .as_deref()
                                    .map(word)
                                    .unwrap_or_else(|| "info".into()),
                                label: m.label,
                            })
                            .collect(),
                        o.tables,
                        o.figures.iter().map(|f| figure_view(f, svgs)).collect(),
                        o.notes,
                    ),
                    None => (Vec::new(), Vec::new(), Vec::new(), Vec::new()),
                };
                AnalysisView {
                    params: params_text(&a.params),
                    plugin: a.plugin,
                    version: a.version,
                    status: word(&a.status),
                    error: a.error,
                    metrics,
                    tables,
                    figures,
                    notes,
                }
            })
            .collect(),
    }
}

#[cfg(test)]
mod tests {
    use super::fixed;

    #[test]
    fn fixed_formatting_drops_negative_zero() {
        assert_eq!(fixed(-0.0001, 2), "0.00");
        assert_eq!(fixed(-1.005, 1), "-1.0");
        assert_eq!(fixed(2.0, 2), "2.00");
    }
}
