//! The analysis trait every plugin implements, what it declares about itself, and the input the
//! runner hands it (test description, validated parameters, criteria, datasets).

use std::collections::BTreeMap;

use serde::{Deserialize, Serialize};

use crate::data::Dataset;
use crate::outcome::AnalysisOutput;

/// The kinds of test a campaign can hold.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum TestKind {
    DepthDose,
    Profile,
    Plane,
    Volume,
    PointSet,
    PointDose,
    MuCheck,
    FilmCalibration,
}

impl TestKind {
    /// Every kind, in the order documented for the campaign file.
    pub const ALL: [TestKind; 8] = [
        TestKind::DepthDose,
        TestKind::Profile,
        TestKind::Plane,
        TestKind::Volume,
        TestKind::PointSet,
        TestKind::PointDose,
        TestKind::MuCheck,
        TestKind::FilmCalibration,
    ];

    /// The kebab-case name used in campaign files.
    pub fn name(self) -> &'static str {
        match self {
            TestKind::DepthDose => "depth-dose",
            TestKind::Profile => "profile",
            TestKind::Plane => "plane",
            TestKind::Volume => "volume",
            TestKind::PointSet => "point-set",
            TestKind::PointDose => "point-dose",
            TestKind::MuCheck => "mu-check",
            TestKind::FilmCalibration => "film-calibration",
        }
    }

    /// Parse a campaign-file name.
    pub fn from_name(name: &str) -> Option<TestKind> {
        TestKind::ALL.into_iter().find(|k| k.name() == name)
    }
}

/// Type of a plugin parameter, with its admissible range.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "type", rename_all = "kebab-case")]
pub enum ParamType {
    Number {
        min: Option<f64>,
        max: Option<f64>,
    },
    Integer {
        min: Option<i64>,
        max: Option<i64>,
    },
    Bool,
    Choice {
        choices: Vec<String>,
    },
    Text,
    /// A point of the test: `x,y,z` in mm, or the label of a point of the test's measured or
    /// calculated point set, which `check` looks up (ABI 1.3).
    PointRef,
}

/// One parameter a plugin accepts in a test's `params:` block.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ParamSpec {
    /// kebab-case key.
    pub name: String,
    pub kind: ParamType,
    /// Default as JSON; `None` means the parameter is optional with no default.
    pub default: Option<serde_json::Value>,
    /// Unit of a number, e.g. "mm"; empty when none.
    pub unit: String,
    pub description: String,
}

/// A metric id a plugin judges against a criteria set's `metrics:` levels.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct MetricSpec {
    /// The key a criteria set's `metrics:` block uses.
    pub id: String,
    /// The test kinds for which the plugin judges it.
    pub kinds: Vec<TestKind>,
    /// Unit of the levels (the judged difference's unit; `%` for ratios judged relatively).
    pub unit: String,
    pub description: String,
}

impl MetricSpec {
    pub fn new(id: &str, kinds: &[TestKind], unit: &str, description: &str) -> MetricSpec {
        MetricSpec {
            id: id.into(),
            kinds: kinds.to_vec(),
            unit: unit.into(),
            description: description.into(),
        }
    }
}

/// What a plugin says about itself before it is used.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PluginManifest {
    /// Stable kebab-case id used in campaign files.
    pub name: String,
    /// Semantic version of the plugin.
    pub version: String,
    pub description: String,
    /// Test kinds the plugin can analyse.
    pub kinds: Vec<TestKind>,
    pub params: Vec<ParamSpec>,
    /// Every metric id the plugin judges against a criteria set's `metrics:` levels (ABI 1.3);
    /// `None` from a plugin built before it was declared, whose ids cannot be checked.
    #[serde(default)]
    pub judged_metrics: Option<Vec<MetricSpec>>,
    /// What the plugin cannot analyse without in a test's criteria set (ABI 1.3), so that
    /// `check` finds a set that would judge nothing before anything runs.
    #[serde(default)]
    pub needs: Vec<CriteriaNeed>,
}

/// A part of a criteria set a plugin cannot do without.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum CriteriaNeed {
    /// At least one `gamma` criterion.
    Gamma,
    /// `dose-difference-percent` levels.
    DoseDifference,
}

impl CriteriaNeed {
    /// The campaign key that provides it.
    pub fn key(self) -> &'static str {
        match self {
            CriteriaNeed::Gamma => "gamma",
            CriteriaNeed::DoseDifference => "dose-difference-percent",
        }
    }

    /// Whether `set` provides it.
    pub fn met_by(self, set: &CriteriaSet) -> bool {
        match self {
            CriteriaNeed::Gamma => !set.gamma.is_empty(),
            CriteriaNeed::DoseDifference => set.dose_difference_percent.is_some(),
        }
    }
}

/// Whether dose differences are relative to one value for all points or to each reference point.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Normalisation {
    Global,
    Local,
}

/// One gamma criterion of a criteria set (Low et al 1998; defaults from AAPM TG-218).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct GammaCriterion {
    pub dose_percent: f64,
    pub dta_mm: f64,
    /// Reference points below this percentage of the normalisation dose are not evaluated.
    pub threshold_percent: f64,
    pub normalisation: Normalisation,
    /// Global normalisation dose in Gy; `None` means the maximum of the reference.
    pub normalisation_dose_gy: Option<f64>,
    /// Pass rate (%) at or above which the test passes.
    pub tolerance_pass_percent: f64,
    /// Pass rate (%) below which the test fails.
    pub action_pass_percent: f64,
}

impl GammaCriterion {
    /// `dose_percent` %/`dta_mm` mm with the AAPM TG-218 defaults (Miften et al 2018): global
    /// to the reference maximum, 10 % threshold, tolerance 95 % and action 90 % passing.
    pub fn tg218(dose_percent: f64, dta_mm: f64) -> GammaCriterion {
        GammaCriterion {
            dose_percent,
            dta_mm,
            threshold_percent: 10.0,
            normalisation: Normalisation::Global,
            normalisation_dose_gy: None,
            tolerance_pass_percent: 95.0,
            action_pass_percent: 90.0,
        }
    }
}

/// Tolerance and action level for a magnitude-type quantity.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Levels {
    pub tolerance: f64,
    pub action: f64,
}

/// A named set of criteria from the campaign file.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CriteriaSet {
    pub name: String,
    /// Point dose difference levels, in percent.
    pub dose_difference_percent: Option<Levels>,
    pub gamma: Vec<GammaCriterion>,
    /// Levels for named metrics (plugin-defined metric ids), in the metric's unit.
    pub metrics: BTreeMap<String, Levels>,
}

/// The beam a test was delivered with, from the campaign's machine description.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct BeamInfo {
    pub id: String,
    pub modality: String,
    pub energy: f64,
    pub fff: bool,
}

/// Identity of the test being analysed.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct TestInfo {
    pub site: String,
    pub id: String,
    pub name: String,
    pub kind: TestKind,
    pub machine: String,
    pub beam: Option<BeamInfo>,
}

impl TestInfo {
    /// A test of `kind` outside any campaign: site, id, name and machine are the placeholders
    /// `s`, `t`, `t` and `m`, no beam (for analyses run on their own, such as unit tests).
    pub fn standalone(kind: TestKind) -> TestInfo {
        TestInfo {
            site: "s".into(),
            id: "t".into(),
            name: "t".into(),
            kind,
            machine: "m".into(),
            beam: None,
        }
    }
}

/// Everything an analysis receives. Parameters have been validated against the plugin's
/// [`ParamSpec`]s and completed with defaults.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct AnalysisInput {
    pub test: TestInfo,
    pub params: BTreeMap<String, serde_json::Value>,
    pub criteria: CriteriaSet,
    pub measured: Option<Dataset>,
    pub calculated: Option<Dataset>,
    /// Beam data and beams of a monitor-unit check test (`mu-check` kind only). Added in ABI
    /// 1.1; absent in older inputs.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub mu: Option<crate::mu::MuInput>,
    /// The scanned film, its calibration and placement (`film` analyses). Added in ABI 1.2.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub film: Option<crate::film::FilmInput>,
}

impl AnalysisInput {
    /// A number parameter (validated by the runner, so a missing one is a plugin bug reported
    /// as an error, never a panic).
    pub fn number(&self, name: &str) -> Result<f64, AnalysisError> {
        self.params
            .get(name)
            .and_then(serde_json::Value::as_f64)
            .ok_or_else(|| AnalysisError::new(format!("parameter `{name}` is missing")))
    }

    /// An optional number parameter.
    pub fn number_opt(&self, name: &str) -> Option<f64> {
        self.params.get(name).and_then(serde_json::Value::as_f64)
    }

    /// A text or choice parameter.
    pub fn text(&self, name: &str) -> Result<&str, AnalysisError> {
        self.params
            .get(name)
            .and_then(serde_json::Value::as_str)
            .ok_or_else(|| AnalysisError::new(format!("parameter `{name}` is missing")))
    }
}

/// Why an analysis could not produce a result. The runner records it as status `error`.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct AnalysisError {
    pub message: String,
}

impl AnalysisError {
    pub fn new(message: impl Into<String>) -> Self {
        AnalysisError {
            message: message.into(),
        }
    }
}

impl std::fmt::Display for AnalysisError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(&self.message)
    }
}

impl std::error::Error for AnalysisError {}

/// An analysis plugin. Implementations must be pure: the same input gives the same output,
/// with no clock, randomness or file access, so that runs are reproducible.
pub trait Analysis: Send + Sync {
    /// Name, version, accepted kinds and parameters.
    fn manifest(&self) -> PluginManifest;

    /// Analyse one test.
    fn analyse(&self, input: &AnalysisInput) -> Result<AnalysisOutput, AnalysisError>;
}
