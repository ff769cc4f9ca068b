//! The report's view of a run: built from `results.json` alone (the report never runs an
//! analysis), with every number formatted here, because typst has no fixed-decimal formatting.

use beamproof_api::Figure;
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
    pub sites: Vec<SiteIn>,
    pub summary: SummaryIn,
    pub references: Vec<ReferenceIn>,
    pub cautions: Vec<String>,
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
    pub date: String,
    pub reproduce: String,
}

#[derive(Debug, Deserialize)]
pub struct PluginIn {
    pub name: String,
    pub version: String,
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
    pub analyses: Vec<AnalysisIn>,
}

#[derive(Debug, Deserialize)]
pub struct AnalysisIn {
    pub plugin: String,
    pub version: String,
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
    pub beams: Vec<String>,
    pub tps: String,
    pub beam_model: String,
    pub run_date: String,
    pub software_version: String,
    pub plugins: Vec<PluginView>,
    pub go: bool,
    pub verdict: String,
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
    pub fn from_results(r: Results) -> (View, Vec<String>) {
        let mut svgs = Vec::new();
        let s = &r.summary;
        let view = View {
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
            go: s.verdict == "GO",
            verdict: s.verdict.clone(),
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

fn figure_view(f: &Figure, svgs: &mut Vec<String>) -> FigureView {
    let (svg, error) = match plot::draw(f) {
        Ok(svg) => (svg, None),
        Err(e) => (String::new(), Some(e)),
    };
    svgs.push(svg);
    FigureView {
        n: svgs.len() - 1,
        kind: plot::kind(f).into(),
        title: plot::title(f).into(),
        error,
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
                                // Counts are whole numbers; everything else gets two decimals.
                                value: match m.value {
                                    Some(v) => with_unit(
                                        fixed(v, if m.unit == "points" { 0 } else { 2 }),
                                        &m.unit,
                                    ),
                                    None => "undefined".into(),
                                },
                                tolerance: m
                                    .limits
                                    .as_ref()
                                    .map(|l| with_unit(fixed(l.tolerance, 2), &m.unit))
                                    .unwrap_or_default(),
                                action: m
                                    .limits
                                    .as_ref()
                                    .map(|l| with_unit(fixed(l.action, 2), &m.unit))
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
