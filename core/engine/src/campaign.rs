//! The campaign file: its model, and the decoder that checks structure and local rules while
//! collecting every problem with its position. Cross-references that need the plugin registry
//! or the input files are checked in `check.rs`.
//!
//! The accepted keys of every mapping are listed in the `*_KEYS` constants below; the JSON
//! Schema in `docs/campaign.schema.json` is tested against them so the two cannot drift.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use beamproof_api::{CriteriaSet, GammaCriterion, Levels, Normalisation, TestKind};

use crate::diag::{Diagnostic, did_you_mean};
use crate::yaml::{Node, Value, parse, parse_yaml_float};

/// The campaign format version this build reads.
pub const FORMAT_VERSION: i64 = 1;

pub const CAMPAIGN_KEYS: &[&str] = &[
    "beamproof-campaign",
    "id",
    "title",
    "institution",
    "date",
    "tps",
    "machines",
    "plugin-dirs",
    "criteria",
    "sites",
    "report",
];
pub const TPS_KEYS: &[&str] = &["name", "version", "beam-model"];
pub const MACHINE_KEYS: &[&str] = &["id", "description", "beams"];
pub const BEAM_KEYS: &[&str] = &["id", "modality", "energy", "fff"];
pub const CRITERIA_KEYS: &[&str] = &["description", "dose-difference-percent", "gamma", "metrics"];
pub const LEVELS_KEYS: &[&str] = &["tolerance", "action"];
pub const GAMMA_KEYS: &[&str] = &[
    "dose-percent",
    "dta-mm",
    "threshold-percent",
    "normalisation",
    "normalisation-dose-gy",
    "tolerance-pass-percent",
    "action-pass-percent",
];
pub const SITE_KEYS: &[&str] = &["id", "name", "tests"];
pub const TEST_KEYS: &[&str] = &[
    "id",
    "name",
    "kind",
    "beam",
    "machines",
    "measured",
    "calculated",
    "criteria",
    "analyses",
    "mu",
    "film",
];
/// Keys of a monitor-unit check test's `mu:` block.
pub const MU_KEYS: &[&str] = &["beam-data", "beams", "plan", "point-mm", "beam-doses"];
/// Keys of a beam written in a `mu:` block.
pub const MU_BEAM_KEYS: &[&str] = &[
    "id",
    "field-cm",
    "jaws-cm",
    "ssd-cm",
    "depth-cm",
    "setup",
    "off-axis-cm",
    "mu",
    "tps-dose-gy",
    "wedge",
    "tray",
];
pub const INPUT_KEYS: &[&str] = &["file", "patient-position", "isocentre-mm"];
pub const ANALYSIS_KEYS: &[&str] = &["plugin", "params"];
pub const REPORT_KEYS: &[&str] = &["templates"];

/// Where a value came from in the campaign file.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub struct Pos {
    pub line: usize,
    pub column: usize,
}

impl Pos {
    pub(crate) fn of(n: &Node) -> Pos {
        Pos {
            line: n.line,
            column: n.column,
        }
    }
}

/// A checked campaign.
#[derive(Debug, Clone)]
pub struct Campaign {
    /// The campaign file as given.
    pub path: PathBuf,
    /// Folder that relative paths are resolved against.
    pub dir: PathBuf,
    /// Exact bytes of the file (hashed into the manifest and copied into the run folder).
    pub bytes: Vec<u8>,
    pub id: String,
    pub title: String,
    pub institution: String,
    /// ISO date `YYYY-MM-DD`, when the campaign states one.
    pub date: Option<String>,
    pub tps: Tps,
    pub machines: Vec<Machine>,
    pub plugin_dirs: Vec<(PathBuf, Pos)>,
    pub criteria: Vec<CriteriaSet>,
    /// Where each criteria set and each of its `metrics:` ids is written, by set name.
    pub criteria_places: BTreeMap<String, CriteriaPlaces>,
    pub sites: Vec<Site>,
    /// Template folder replacing the built-in templates, resolved against `dir`.
    pub templates: Option<(PathBuf, Pos)>,
}

/// Where a criteria set and its metric ids are written in the campaign file.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct CriteriaPlaces {
    pub set: Pos,
    /// Each `metrics:` id with its place, in file order.
    pub metrics: Vec<(String, Pos)>,
}

/// The places of every criteria set and metric id under a `criteria:` node.
fn criteria_places(n: &Node) -> BTreeMap<String, CriteriaPlaces> {
    let Value::Map(sets) = &n.value else {
        return BTreeMap::new();
    };
    sets.iter()
        .filter_map(|(k, v)| {
            let metrics = match &v.value {
                Value::Map(fields) => fields
                    .iter()
                    .find(|(fk, _)| fk.scalar() == Some("metrics"))
                    .map(|(_, m)| match &m.value {
                        Value::Map(ids) => ids
                            .iter()
                            .filter_map(|(id, _)| Some((id.scalar()?.to_string(), Pos::of(id))))
                            .collect(),
                        _ => Vec::new(),
                    })
                    .unwrap_or_default(),
                _ => Vec::new(),
            };
            Some((
                k.scalar()?.to_string(),
                CriteriaPlaces {
                    set: Pos::of(k),
                    metrics,
                },
            ))
        })
        .collect()
}

#[derive(Debug, Clone, PartialEq, Default)]
pub struct Tps {
    pub name: String,
    pub version: String,
    pub beam_model: String,
}

#[derive(Debug, Clone, PartialEq)]
pub struct Machine {
    pub id: String,
    pub description: String,
    pub beams: Vec<Beam>,
    pub pos: Pos,
}

#[derive(Debug, Clone, PartialEq)]
pub struct Beam {
    pub id: String,
    /// `photon` or `electron`.
    pub modality: String,
    /// Nominal energy: MV for photons, MeV for electrons.
    pub energy: f64,
    pub fff: bool,
}

#[derive(Debug, Clone, PartialEq)]
pub struct Site {
    pub id: String,
    pub name: String,
    pub tests: Vec<TestSpec>,
}

/// Patient position of the dose grid's DICOM coordinates (DICOM Patient Position values).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum PatientPosition {
    Hfs,
    Hfp,
    Ffs,
    Ffp,
}

impl PatientPosition {
    pub const NAMES: [&'static str; 4] = ["HFS", "HFP", "FFS", "FFP"];

    /// Parse a DICOM Patient Position code.
    pub fn from_name(s: &str) -> Option<Self> {
        match s {
            "HFS" => Some(Self::Hfs),
            "HFP" => Some(Self::Hfp),
            "FFS" => Some(Self::Ffs),
            "FFP" => Some(Self::Ffp),
            _ => None,
        }
    }
}

/// Where a DICOM dose grid sits relative to the machine: needed to express it in IEC 61217.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct DicomPlacement {
    pub patient_position: PatientPosition,
    /// Isocentre in the DICOM patient coordinates of the dose file, mm.
    pub isocentre_mm: [f64; 3],
}

/// One measured or calculated input of a test.
#[derive(Debug, Clone, PartialEq)]
pub struct InputSpec {
    /// Path as written, possibly holding `{machine}`.
    pub template: String,
    pub placement: Option<DicomPlacement>,
    pub pos: Pos,
}

impl InputSpec {
    /// The path for a machine, as written (relative to the campaign folder when relative).
    pub fn path_for(&self, machine: &str) -> String {
        self.template.replace("{machine}", machine)
    }
}

/// The `mu:` block of a monitor-unit check test.
#[derive(Debug, Clone, PartialEq)]
pub struct MuSpec {
    /// Beam-data file, possibly holding `{machine}`.
    pub beam_data: InputSpec,
    /// Beams written in the campaign (empty when a plan is given).
    pub beams: Vec<MuBeamSpec>,
    /// DICOM RT Plan, possibly holding `{machine}`.
    pub plan: Option<InputSpec>,
    /// Calculation point for plan beams: IEC 61217 fixed coordinates relative to the
    /// isocentre, mm (default the isocentre).
    pub point_mm: [f64; 3],
    /// Per-beam DICOM RT Dose files of the plan, holding `{beam}` (the beam number) and
    /// possibly `{machine}`, sampled at the point for the TPS dose.
    pub beam_doses: Option<InputSpec>,
    pub pos: Pos,
}

/// A beam written in a campaign's `mu:` block.
#[derive(Debug, Clone, PartialEq)]
pub struct MuBeamSpec {
    pub id: String,
    /// Jaws X1, X2, Y1, Y2 at the isocentre plane, cm.
    pub jaws_cm: [f64; 4],
    pub ssd_cm: f64,
    pub depth_cm: f64,
    /// `None`: isocentric when SSD + depth is the SAD, else SSD.
    pub setup: Option<beamproof_api::mu::MuSetup>,
    pub off_axis_cm: [f64; 2],
    pub mu: f64,
    pub tps_dose_gy: f64,
    pub wedge: Option<String>,
    pub tray: bool,
    pub pos: Pos,
}

/// One analysis of a test with its raw parameters (validated against the plugin later).
#[derive(Debug, Clone, PartialEq)]
pub struct AnalysisSpec {
    pub plugin: String,
    pub params: Vec<(String, serde_json::Value, Pos)>,
    pub pos: Pos,
}

#[derive(Debug, Clone, PartialEq)]
pub struct TestSpec {
    pub id: String,
    pub name: String,
    pub kind: TestKind,
    pub beam: Option<(String, Pos)>,
    /// Machines the test applies to; `None` means every machine.
    pub machines: Option<Vec<(String, Pos)>>,
    pub measured: Option<InputSpec>,
    pub calculated: Option<InputSpec>,
    pub criteria: (String, Pos),
    pub analyses: Vec<AnalysisSpec>,
    /// Beam data and beams of a `mu-check` test.
    pub mu: Option<MuSpec>,
    /// The scanned film of a `film-calibration` or `plane` test.
    pub film: Option<crate::campaign_film::FilmSpec>,
    pub pos: Pos,
}

impl TestSpec {
    /// Whether this test is run for `machine`.
    pub fn applies_to(&self, machine: &str) -> bool {
        self.machines
            .as_ref()
            .is_none_or(|ms| ms.iter().any(|(m, _)| m == machine))
    }
}

/// Accepted ranges of a gamma criterion, in campaigns and the one-off `gamma` command alike:
/// dose difference (%), distance to agreement (mm) and low-dose threshold (%).
pub const GAMMA_DOSE_PERCENT: (f64, f64) = (0.01, 100.0);
pub const GAMMA_DTA_MM: (f64, f64) = (0.01, 100.0);
pub const GAMMA_THRESHOLD_PERCENT: (f64, f64) = (0.0, 99.0);

/// Largest campaign file read (16 MiB): a campaign of thousands of tests is a few hundred KB.
pub const MAX_CAMPAIGN_BYTES: u64 = 16 << 20;

impl Campaign {
    /// Read and decode a campaign file, reporting every structural problem at once.
    pub fn load(path: &Path) -> Result<Campaign, Vec<Diagnostic>> {
        match Campaign::load_partial(path) {
            (Some(c), d) if d.is_empty() => Ok(c),
            (_, d) => Err(d),
        }
    }

    /// Read and decode as much as possible: the campaign without the parts that have problems,
    /// and every problem. `None` when the file cannot be read or is not valid YAML. Used to go
    /// on checking references and input files, so that all problems are reported in one pass.
    pub fn load_partial(path: &Path) -> (Option<Campaign>, Vec<Diagnostic>) {
        match Campaign::decode(path) {
            Ok(pair) => pair,
            Err(d) => (None, d),
        }
    }

    fn decode(path: &Path) -> Result<(Option<Campaign>, Vec<Diagnostic>), Vec<Diagnostic>> {
        let bytes = crate::input_store::read_regular(path, MAX_CAMPAIGN_BYTES).map_err(|e| {
            let help = match e {
                crate::input_store::ReadError::NotFound => {
                    "check the path; it is relative to the current folder"
                }
                _ => e.help(),
            };
            vec![Diagnostic::file(path, format!("cannot read the campaign file: {e}")).help(help)]
        })?;
        let text = std::str::from_utf8(&bytes).map_err(|e| {
            vec![
                Diagnostic::file(path, format!("the campaign file is not UTF-8 text: {e}"))
                    .help("save the file as UTF-8"),
            ]
        })?;
        let root = parse(text, path)?;
        let mut d = Decoder {
            file: path,
            diags: Vec::new(),
        };
        let campaign = d.campaign(&root, path, &bytes);
        Ok((campaign, d.diags))
    }

    pub fn machine(&self, id: &str) -> Option<&Machine> {
        self.machines.iter().find(|m| m.id == id)
    }

    pub fn criteria_set(&self, name: &str) -> Option<&CriteriaSet> {
        self.criteria.iter().find(|c| c.name == name)
    }

    /// Resolve a campaign-relative path.
    pub fn resolve(&self, p: &str) -> PathBuf {
        self.dir.join(p)
    }
}

/// Walks the YAML tree; every helper records problems and returns `None` instead of stopping.
/// Also used by the other YAML formats of the engine (beam data).
pub(crate) struct Decoder<'f> {
    pub(crate) file: &'f Path,
    pub(crate) diags: Vec<Diagnostic>,
}

/// The entries of one mapping, after its keys were checked.
pub(crate) struct Fields<'a> {
    pub(crate) node: &'a Node,
    entries: &'a [(Node, Node)],
    what: &'static str,
}

impl<'a> Fields<'a> {
    pub(crate) fn get(&self, key: &str) -> Option<&'a Node> {
        self.entries
            .iter()
            .find(|(k, _)| k.scalar() == Some(key))
            .map(|(_, v)| v)
            .filter(|v| !v.is_null())
    }
}

impl<'f> Decoder<'f> {
    pub(crate) fn new(file: &'f Path) -> Decoder<'f> {
        Decoder {
            file,
            diags: Vec::new(),
        }
    }

    pub(crate) fn report(&mut self, n: &Node, message: impl Into<String>, help: impl Into<String>) {
        self.diags
            .push(Diagnostic::at(self.file, n.line, n.column, message).help(help));
    }

    /// Check that `n` is a mapping with only `allowed` keys; unknown keys get a suggestion.
    pub(crate) fn fields<'a>(
        &mut self,
        n: &'a Node,
        what: &'static str,
        allowed: &[&str],
    ) -> Option<Fields<'a>> {
        let Value::Map(entries) = &n.value else {
            self.report(
                n,
                format!(
                    "{what} must be a mapping of `key: value` lines, found {}",
                    n.describe()
                ),
                format!("accepted keys: {}", allowed.join(", ")),
            );
            return None;
        };
        for (k, _) in entries {
            let key = k.scalar().unwrap_or_default();
            if !allowed.contains(&key) {
                let help = did_you_mean(key, allowed.iter().copied(), || {
                    format!("accepted keys: {}", allowed.join(", "))
                });
                self.report(k, format!("unknown key `{key}` in {what}"), help);
            }
        }
        Some(Fields {
            node: n,
            entries,
            what,
        })
    }

    pub(crate) fn required<'a>(
        &mut self,
        f: &Fields<'a>,
        key: &str,
        help: &str,
    ) -> Option<&'a Node> {
        let v = f.get(key);
        if v.is_none() {
            self.report(
                f.node,
                format!("{} is missing the required key `{key}`", f.what),
                help.to_string(),
            );
        }
        v
    }

    pub(crate) fn string(&mut self, n: &Node, what: &str) -> Option<String> {
        match &n.value {
            Value::Scalar { text, .. } if !n.is_null() => Some(text.clone()),
            _ => {
                self.report(
                    n,
                    format!("{what} must be text, found {}", n.describe()),
                    "write a single value on the same line",
                );
                None
            }
        }
    }

    pub(crate) fn req_string(&mut self, f: &Fields, key: &str, help: &str) -> Option<String> {
        let n = self.required(f, key, help)?;
        self.string(n, &format!("`{key}`"))
    }

    pub(crate) fn opt_string(&mut self, f: &Fields, key: &str) -> Option<String> {
        let n = f.get(key)?;
        self.string(n, &format!("`{key}`"))
    }

    /// An identifier: lower-case letters, digits, `-`, `_` and `.`, starting with a letter or digit.
    fn ident(&mut self, f: &Fields, key: &str, help: &str) -> Option<String> {
        let n = self.required(f, key, help)?;
        let s = self.string(n, &format!("`{key}`"))?;
        let ok = s
            .chars()
            .next()
            .is_some_and(|c| c.is_ascii_lowercase() || c.is_ascii_digit())
            && s.chars()
                .all(|c| c.is_ascii_lowercase() || c.is_ascii_digit() || "-_.".contains(c));
        if !ok {
            self.report(
                n,
                format!("`{key}` `{s}` is not a valid identifier"),
                "use lower-case letters, digits, `-`, `_` or `.`, starting with a letter or digit (for example `lin-a`)",
            );
            return None;
        }
        Some(s)
    }

    pub(crate) fn number(
        &mut self,
        n: &Node,
        what: &str,
        min: f64,
        max: f64,
        unit: &str,
    ) -> Option<f64> {
        let v = match &n.value {
            Value::Scalar { text, plain: true } => parse_yaml_float(text),
            _ => None,
        };
        let Some(v) = v else {
            self.report(
                n,
                format!("{what} must be a number, found {}", show(n)),
                format!("write a plain number{}", unit_hint(unit)),
            );
            return None;
        };
        if v < min || v > max {
            self.report(
                n,
                format!("{what} is {v}{}, outside {min}..{max}", unit_hint(unit)),
                "correct the value",
            );
            return None;
        }
        Some(v)
    }

    pub(crate) fn opt_number(
        &mut self,
        f: &Fields,
        key: &str,
        min: f64,
        max: f64,
        unit: &str,
    ) -> Option<f64> {
        let n = f.get(key)?;
        self.number(n, &format!("`{key}`"), min, max, unit)
    }

    pub(crate) fn req_number(
        &mut self,
        f: &Fields,
        key: &str,
        min: f64,
        max: f64,
        unit: &str,
    ) -> Option<f64> {
        let n = self.required(
            f,
            key,
            &format!("add `{key}:` with a number{}", unit_hint(unit)),
        )?;
        self.number(n, &format!("`{key}`"), min, max, unit)
    }

    pub(crate) fn opt_bool(&mut self, f: &Fields, key: &str) -> Option<bool> {
        let n = f.get(key)?;
        match n.scalar() {
            Some("true") if matches!(n.value, Value::Scalar { plain: true, .. }) => Some(true),
            Some("false") if matches!(n.value, Value::Scalar { plain: true, .. }) => Some(false),
            _ => {
                self.report(
                    n,
                    format!("`{key}` must be true or false, found {}", show(n)),
                    "write `true` or `false`",
                );
                None
            }
        }
    }

    /// Decode every item of a list, reporting and dropping an item whose id an earlier one
    /// already has (`message` holds `{}` for the id).
    fn unique<T>(
        &mut self,
        items: &[Node],
        mut decode: impl FnMut(&mut Self, &Node) -> Option<T>,
        id: impl Fn(&T) -> &String,
        message: &str,
        help: &str,
    ) -> Vec<T> {
        let mut out: Vec<T> = Vec::new();
        for item in items {
            let Some(v) = decode(self, item) else {
                continue;
            };
            if out.iter().any(|o| id(o) == id(&v)) {
                self.report(item, message.replacen("{}", id(&v), 1), help);
            } else {
                out.push(v);
            }
        }
        out
    }

    pub(crate) fn list<'a>(&mut self, n: &'a Node, what: &str) -> Option<&'a [Node]> {
        match &n.value {
            Value::Seq(items) => Some(items),
            _ => {
                self.report(
                    n,
                    format!("{what} must be a list, found {}", n.describe()),
                    "write one `- item` per line",
                );
                None
            }
        }
    }

    fn campaign(&mut self, root: &Node, path: &Path, bytes: &[u8]) -> Option<Campaign> {
        let f = self.fields(root, "the campaign", CAMPAIGN_KEYS)?;
        if let Some(n) = self.required(
            &f,
            "beamproof-campaign",
            "add `beamproof-campaign: 1` as the first line (the format version)",
        ) && let Some(v) = self.number(n, "`beamproof-campaign`", 0.0, 1e6, "")
            && v != FORMAT_VERSION as f64
        {
            self.report(
                n,
                format!("campaign format version {v} is not supported; this build reads version {FORMAT_VERSION}"),
                "use a beamproof release that reads this version, or convert the file",
            );
        }
        let id = self.ident(
            &f,
            "id",
            "add `id:` with a short identifier for the campaign, e.g. `tps-2026`",
        );
        let title = self.req_string(&f, "title", "add `title:` with the campaign's title");
        let institution = self.req_string(
            &f,
            "institution",
            "add `institution:` with the clinic's name",
        );
        let date = f.get("date").and_then(|n| {
            let s = self.string(n, "`date`")?;
            if valid_iso_date(&s) {
                Some(s)
            } else {
                self.report(
                    n,
                    format!("`date` `{s}` is not a valid date"),
                    "write the date as YYYY-MM-DD, e.g. 2026-11-20",
                );
                None
            }
        });
        let tps = self
            .required(
                &f,
                "tps",
                "add a `tps:` mapping with `name`, `version` and `beam-model`",
            )
            .and_then(|n| self.tps(n));
        let machines = self
            .required(
                &f,
                "machines",
                "add a `machines:` list with at least one machine",
            )
            .and_then(|n| self.machines(n));
        let plugin_dirs = match f.get("plugin-dirs") {
            Some(n) => self.list(n, "`plugin-dirs`").map(|items| {
                items
                    .iter()
                    .filter_map(|i| {
                        Some((
                            PathBuf::from(self.string(i, "a plugin folder")?),
                            Pos::of(i),
                        ))
                    })
                    .collect()
            }),
            None => Some(Vec::new()),
        };
        let criteria_node = self.required(
            &f,
            "criteria",
            "add a `criteria:` mapping with at least one named criteria set",
        );
        let criteria = criteria_node.and_then(|n| self.criteria(n));
        // Tests are checked against every criteria name written, so that a set with an error
        // of its own does not also make each test that uses it fail.
        let criteria_names: Vec<String> = match criteria_node.map(|n| &n.value) {
            Some(Value::Map(entries)) => entries
                .iter()
                .filter_map(|(k, _)| k.scalar().map(str::to_string))
                .collect(),
            _ => Vec::new(),
        };
        let sites = self
            .required(
                &f,
                "sites",
                "add a `sites:` list with at least one site holding tests",
            )
            .and_then(|n| self.sites(n, &criteria_names));
        let templates = match f.get("report") {
            Some(n) => self.fields(n, "`report`", REPORT_KEYS).and_then(|r| {
                let t = r.get("templates")?;
                Some((PathBuf::from(self.string(t, "`templates`")?), Pos::of(t)))
            }),
            None => None,
        };
        let dir = path
            .parent()
            .map(Path::to_path_buf)
            .filter(|p| !p.as_os_str().is_empty())
            .unwrap_or_else(|| PathBuf::from("."));
        Some(Campaign {
            path: path.to_path_buf(),
            dir,
            bytes: bytes.to_vec(),
            id: id.unwrap_or_default(),
            title: title.unwrap_or_default(),
            institution: institution.unwrap_or_default(),
            date,
            tps: tps.unwrap_or_default(),
            machines: machines.unwrap_or_default(),
            plugin_dirs: plugin_dirs.unwrap_or_default(),
            criteria: criteria.unwrap_or_default(),
            criteria_places: criteria_node.map(criteria_places).unwrap_or_default(),
            sites: sites.unwrap_or_default(),
            templates,
        })
    }

    fn tps(&mut self, n: &Node) -> Option<Tps> {
        let f = self.fields(n, "`tps`", TPS_KEYS)?;
        let name = self.req_string(&f, "name", "add `name:` with the planning system's name");
        let version = self.req_string(
            &f,
            "version",
            "add `version:` with the planning system's version",
        );
        let beam_model = self.req_string(
            &f,
            "beam-model",
            "add `beam-model:` naming the beam model being validated",
        );
        Some(Tps {
            name: name?,
            version: version?,
            beam_model: beam_model?,
        })
    }

    fn machines(&mut self, n: &Node) -> Option<Vec<Machine>> {
        let items = self.list(n, "`machines`")?;
        if items.is_empty() {
            self.report(n, "`machines` is empty", "describe at least one machine");
            return None;
        }
        Some(self.unique(
            items,
            Self::machine,
            |m| &m.id,
            "machine id `{}` is used twice",
            "give each machine its own id",
        ))
    }

    fn machine(&mut self, n: &Node) -> Option<Machine> {
        let f = self.fields(n, "a machine", MACHINE_KEYS)?;
        let id = self.ident(
            &f,
            "id",
            "add `id:` with the machine's identifier, e.g. `lin-a`",
        );
        let description = self.opt_string(&f, "description").unwrap_or_default();
        let beams_node = self.required(&f, "beams", "add `beams:` listing the machine's beams");
        let beams = beams_node.and_then(|b| {
            let items = self.list(b, "`beams`")?;
            Some(self.unique(
                items,
                Self::beam,
                |b| &b.id,
                "beam id `{}` is used twice",
                "give each beam of a machine its own id",
            ))
        });
        Some(Machine {
            id: id?,
            description,
            beams: beams.unwrap_or_default(),
            pos: Pos::of(n),
        })
    }

    fn beam(&mut self, n: &Node) -> Option<Beam> {
        let f = self.fields(n, "a beam", BEAM_KEYS)?;
        let id = self.ident(&f, "id", "add `id:` with the beam's identifier, e.g. `6x`");
        let modality = self.req_string(
            &f,
            "modality",
            "add `modality: photon` or `modality: electron`",
        );
        let modality = modality.and_then(|m| {
            if m == "photon" || m == "electron" {
                Some(m)
            } else {
                let node = f.get("modality")?;
                self.report(
                    node,
                    format!("unknown modality `{m}`"),
                    "write `photon` or `electron`",
                );
                None
            }
        });
        let energy = self.req_number(&f, "energy", 0.1, 50.0, "MV for photons, MeV for electrons");
        let fff = self.opt_bool(&f, "fff").unwrap_or(false);
        Some(Beam {
            id: id?,
            modality: modality?,
            energy: energy?,
            fff,
        })
    }

    fn criteria(&mut self, n: &Node) -> Option<Vec<CriteriaSet>> {
        let Value::Map(entries) = &n.value else {
            self.report(
                n,
                format!(
                    "`criteria` must be a mapping of named criteria sets, found {}",
                    n.describe()
                ),
                "write `criteria:` then one `name:` block per criteria set",
            );
            return None;
        };
        if entries.is_empty() {
            self.report(n, "`criteria` is empty", "define at least one criteria set");
            return None;
        }
        Some(
            entries
                .iter()
                .filter_map(|(k, v)| self.criteria_set(k.scalar().unwrap_or_default(), v))
                .collect(),
        )
    }

    fn levels(&mut self, n: &Node, what: &'static str, unit: &str) -> Option<Levels> {
        let f = self.fields(n, what, LEVELS_KEYS)?;
        let tolerance = self.req_number(&f, "tolerance", 0.0, 1e6, unit);
        let action = self.req_number(&f, "action", 0.0, 1e6, unit);
        let (tolerance, action) = (tolerance?, action?);
        if tolerance > action {
            self.report(
                n,
                format!("tolerance {tolerance} is larger than action level {action}"),
                "the action level must be at least the tolerance",
            );
            return None;
        }
        Some(Levels { tolerance, action })
    }

    fn criteria_set(&mut self, name: &str, n: &Node) -> Option<CriteriaSet> {
        let f = self.fields(n, "a criteria set", CRITERIA_KEYS)?;
        let _ = self.opt_string(&f, "description");
        let dose_difference_percent = match f.get("dose-difference-percent") {
            Some(d) => Some(self.levels(d, "`dose-difference-percent`", "%")?),
            None => None,
        };
        let gamma = match f.get("gamma") {
            Some(g) => {
                let items = self.list(g, "`gamma`")?;
                let all: Vec<_> = items.iter().map(|i| self.gamma(i)).collect();
                all.into_iter().collect::<Option<Vec<_>>>()?
            }
            None => Vec::new(),
        };
        let mut metrics = BTreeMap::new();
        if let Some(m) = f.get("metrics") {
            let Value::Map(entries) = &m.value else {
                self.report(
                    m,
                    "`metrics` must be a mapping of metric id to levels",
                    "write `metric-id: {tolerance: 1, action: 2}`",
                );
                return None;
            };
            for (k, v) in entries {
                let levels = self.levels(v, "metric levels", "");
                metrics.insert(k.scalar().unwrap_or_default().to_string(), levels?);
            }
        }
        Some(CriteriaSet {
            name: name.to_string(),
            dose_difference_percent,
            gamma,
            metrics,
        })
    }

    fn gamma(&mut self, n: &Node) -> Option<GammaCriterion> {
        let f = self.fields(n, "a gamma criterion", GAMMA_KEYS)?;
        let (lo, hi) = GAMMA_DOSE_PERCENT;
        let dose_percent = self.req_number(&f, "dose-percent", lo, hi, "%");
        let (lo, hi) = GAMMA_DTA_MM;
        let dta_mm = self.req_number(&f, "dta-mm", lo, hi, "mm");
        // Defaults follow AAPM TG-218 (Miften et al 2018): 10 % threshold, global, 95 % / 90 %
        // (only the defaults of this criterion are used).
        let tg218 = GammaCriterion::tg218(0.0, 0.0);
        let threshold_percent = self
            .opt_number(
                &f,
                "threshold-percent",
                GAMMA_THRESHOLD_PERCENT.0,
                GAMMA_THRESHOLD_PERCENT.1,
                "%",
            )
            .unwrap_or(tg218.threshold_percent);
        let normalisation = match f.get("normalisation") {
            Some(nn) => match nn.scalar() {
                Some("global") => Normalisation::Global,
                Some("local") => Normalisation::Local,
                _ => {
                    self.report(
                        nn,
                        format!("unknown normalisation {}", show(nn)),
                        "write `global` or `local`",
                    );
                    return None;
                }
            },
            None => tg218.normalisation,
        };
        let normalisation_dose_gy = self.opt_number(&f, "normalisation-dose-gy", 1e-6, 1e4, "Gy");
        let tolerance_pass_percent = self
            .opt_number(&f, "tolerance-pass-percent", 0.0, 100.0, "%")
            .unwrap_or(tg218.tolerance_pass_percent);
        let action_pass_percent = self
            .opt_number(&f, "action-pass-percent", 0.0, 100.0, "%")
            .unwrap_or(tg218.action_pass_percent);
        if action_pass_percent > tolerance_pass_percent {
            self.report(n, format!("action pass rate {action_pass_percent} % is above tolerance pass rate {tolerance_pass_percent} %"), "the action pass rate must not exceed the tolerance pass rate");
            return None;
        }
        Some(GammaCriterion {
            dose_percent: dose_percent?,
            dta_mm: dta_mm?,
            threshold_percent,
            normalisation,
            normalisation_dose_gy,
            tolerance_pass_percent,
            action_pass_percent,
        })
    }

    fn sites(&mut self, n: &Node, criteria: &[String]) -> Option<Vec<Site>> {
        let items = self.list(n, "`sites`")?;
        if items.is_empty() {
            self.report(n, "`sites` is empty", "add at least one site with tests");
            return None;
        }
        Some(self.unique(
            items,
            |d, item| d.site(item, criteria),
            |s| &s.id,
            "site id `{}` is used twice",
            "give each site its own id",
        ))
    }

    fn site(&mut self, n: &Node, criteria: &[String]) -> Option<Site> {
        let f = self.fields(n, "a site", SITE_KEYS)?;
        let id = self.ident(
            &f,
            "id",
            "add `id:` with the site's identifier, e.g. `standard-fields`",
        );
        let name = self.req_string(&f, "name", "add `name:` with the site's title");
        let tests = self
            .required(&f, "tests", "add `tests:` listing the site's tests")
            .and_then(|t| {
                let items = self.list(t, "`tests`")?;
                Some(self.unique(
                    items,
                    |d, item| d.test(item, criteria),
                    |t| &t.id,
                    "test id `{}` is used twice in this site",
                    "give each test of a site its own id",
                ))
            });
        Some(Site {
            id: id?,
            name: name?,
            tests: tests.unwrap_or_default(),
        })
    }

    fn test(&mut self, n: &Node, criteria: &[String]) -> Option<TestSpec> {
        let f = self.fields(n, "a test", TEST_KEYS)?;
        let id = self.ident(&f, "id", "add `id:` with the test's identifier");
        let name = self.req_string(
            &f,
            "name",
            "add `name:` with a short description of the test",
        );
        let kind = self.required(&f, "kind", "add `kind:`").and_then(|k| {
            let s = self.string(k, "`kind`")?;
            let kind = TestKind::from_name(&s);
            if kind.is_none() {
                let names: Vec<&str> = TestKind::ALL.iter().map(|k| k.name()).collect();
                let help = did_you_mean(&s, names.iter().copied(), || {
                    format!("one of: {}", names.join(", "))
                });
                self.report(k, format!("unknown test kind `{s}`"), help);
            }
            kind
        });
        let beam = f
            .get("beam")
            .and_then(|b| Some((self.string(b, "`beam`")?, Pos::of(b))));
        let machines = match f.get("machines") {
            Some(m) => Some(
                self.list(m, "`machines`")?
                    .iter()
                    .filter_map(|i| Some((self.string(i, "a machine id")?, Pos::of(i))))
                    .collect(),
            ),
            None => None,
        };
        let measured = match f.get("measured") {
            Some(m) => Some(self.input(m, "`measured`")?),
            None => None,
        };
        let calculated = match f.get("calculated") {
            Some(m) => Some(self.input(m, "`calculated`")?),
            None => None,
        };
        let criteria_ref = self
            .required(
                &f,
                "criteria",
                "add `criteria:` naming one of the campaign's criteria sets",
            )
            .and_then(|c| {
                let s = self.string(c, "`criteria`")?;
                if !criteria.contains(&s) {
                    let help = did_you_mean(&s, criteria.iter().map(String::as_str), || {
                        format!("defined criteria sets: {}", criteria.join(", "))
                    });
                    self.report(c, format!("criteria set `{s}` is not defined"), help);
                    return None;
                }
                Some((s, Pos::of(c)))
            });
        let analyses = self
            .required(
                &f,
                "analyses",
                "add `analyses:` listing the plugins to run, e.g. `analyses: [point-dose]`",
            )
            .and_then(|a| {
                let items = self.list(a, "`analyses`")?;
                if items.is_empty() {
                    self.report(
                        a,
                        "`analyses` is empty",
                        "name at least one analysis plugin",
                    );
                    return None;
                }
                items
                    .iter()
                    .map(|i| self.analysis(i))
                    .collect::<Vec<_>>()
                    .into_iter()
                    .collect::<Option<Vec<_>>>()
            });
        let mu = match f.get("mu") {
            Some(m) => Some(self.mu(m)?),
            None => None,
        };
        match (kind, &mu) {
            (Some(TestKind::MuCheck), None) => self.report(
                n,
                "a mu-check test needs a `mu:` block",
                "add `mu:` with `beam-data:` and either `beams:` or `plan:` (docs/campaign.md)",
            ),
            (Some(k), Some(_)) if k != TestKind::MuCheck => {
                if let Some(m) = f.get("mu") {
                    self.report(
                        m,
                        format!("`mu` belongs to mu-check tests, not to kind {}", k.name()),
                        "remove the `mu:` block or set `kind: mu-check`",
                    );
                }
            }
            _ => {}
        }
        let film = match f.get("film") {
            Some(m) => Some(self.film(m, kind)?),
            None => None,
        };
        self.film_rules(&f, kind, film.is_some());
        Some(TestSpec {
            id: id?,
            name: name?,
            kind: kind?,
            beam,
            machines,
            measured,
            calculated,
            criteria: criteria_ref?,
            analyses: analyses?,
            mu,
            film,
            pos: Pos::of(n),
        })
    }

    /// Which kinds take a `film:` block, and what it replaces.
    fn film_rules(&mut self, f: &Fields, kind: Option<TestKind>, has_film: bool) {
        match (kind, has_film) {
            (Some(TestKind::FilmCalibration), false) => self.report(
                f.node,
                "a film-calibration test needs a `film:` block",
                "add `film:` with `scan`, `lot` and `pieces` (docs/campaign.md)",
            ),
            (Some(TestKind::FilmCalibration), true) => {
                for key in ["measured", "calculated"] {
                    if let Some(k) = f.get(key) {
                        self.report(
                            k,
                            format!("a film-calibration test takes no `{key}` data"),
                            "remove it: the calibration pieces are the whole input",
                        );
                    }
                }
            }
            (Some(TestKind::Plane), true) => {
                if let Some(k) = f.get("measured") {
                    self.report(
                        k,
                        "a test with a `film:` block takes its measured plane from the film",
                        "remove `measured:`, or remove `film:` to give a dose plane file",
                    );
                }
            }
            (Some(k), true) => {
                if let Some(m) = f.get("film") {
                    self.report(
                        m,
                        format!(
                            "`film` belongs to plane and film-calibration tests, not to kind {}",
                            k.name()
                        ),
                        "remove the `film:` block or change the test's kind",
                    );
                }
            }
            _ => {}
        }
    }

    /// A list of exactly `n` numbers in `min..max`.
    pub(crate) fn numbers<const N: usize>(
        &mut self,
        node: &Node,
        what: &str,
        min: f64,
        max: f64,
        unit: &str,
        help: &str,
    ) -> Option<[f64; N]> {
        let items = self.list(node, what)?;
        if items.len() != N {
            self.report(
                node,
                format!("{what} needs {N} numbers, found {}", items.len()),
                help.to_string(),
            );
            return None;
        }
        let v: Vec<f64> = items
            .iter()
            .filter_map(|x| self.number(x, what, min, max, unit))
            .collect();
        v.try_into().ok()
    }

    fn mu(&mut self, n: &Node) -> Option<MuSpec> {
        let f = self.fields(n, "`mu`", MU_KEYS)?;
        let beam_data = self
            .required(
                &f,
                "beam-data",
                "add `beam-data:` with the machine's beam-data file (docs/beam-data.md)",
            )
            .and_then(|b| self.input(b, "`beam-data`"));
        let plan = match f.get("plan") {
            Some(p) => Some(self.input(p, "`plan`")?),
            None => None,
        };
        let beam_doses = match f.get("beam-doses") {
            Some(p) => Some(self.input(p, "`beam-doses`")?),
            None => None,
        };
        let point_mm = match f.get("point-mm") {
            Some(p) => self.numbers::<3>(
                p,
                "`point-mm`",
                -1000.0,
                1000.0,
                "mm",
                "write `[x, y, z]`: IEC 61217 fixed coordinates relative to the isocentre, mm",
            )?,
            None => [0.0; 3],
        };
        let mut beams = Vec::new();
        if let Some(b) = f.get("beams")
            && let Some(items) = self.list(b, "`beams`")
        {
            for item in items {
                if let Some(beam) = self.mu_beam(item) {
                    beams.push(beam);
                }
            }
        }
        if f.get("beams").is_some() == plan.is_some() {
            self.report(
                n,
                "`mu` needs exactly one of `beams` and `plan`",
                "write the beams in the campaign, or name a DICOM RT Plan",
            );
            return None;
        }
        if let (Some(d), None) = (&beam_doses, &plan) {
            self.diags.push(
                Diagnostic::at(
                    self.file,
                    d.pos.line,
                    d.pos.column,
                    "`beam-doses` only applies to plan beams",
                )
                .help("give `tps-dose-gy` for each written beam"),
            );
        }
        Some(MuSpec {
            beam_data: beam_data?,
            beams,
            plan,
            point_mm,
            beam_doses,
            pos: Pos::of(n),
        })
    }

    fn mu_beam(&mut self, n: &Node) -> Option<MuBeamSpec> {
        let f = self.fields(n, "a beam of `mu`", MU_BEAM_KEYS)?;
        let id = self.req_string(&f, "id", "add `id:` naming the beam");
        let field = f.get("field-cm").and_then(|x| {
            self.numbers::<2>(
                x,
                "`field-cm`",
                0.1,
                60.0,
                "cm",
                "write `[X, Y]`: the symmetric jaw field at the isocentre, cm",
            )
        });
        let jaws = f.get("jaws-cm").and_then(|x| {
            self.numbers::<4>(
                x,
                "`jaws-cm`",
                -40.0,
                40.0,
                "cm",
                "write `[X1, X2, Y1, Y2]` at the isocentre, cm (X1 and Y1 negative on the negative side)",
            )
        });
        let jaws_cm = match (field, jaws, f.get("field-cm"), f.get("jaws-cm")) {
            (Some([w, h]), None, _, None) => Some([-w / 2.0, w / 2.0, -h / 2.0, h / 2.0]),
            (None, Some(j), None, _) => {
                if j[1] <= j[0] || j[3] <= j[2] {
                    self.report(
                        n,
                        "`jaws-cm` must open: X1 < X2 and Y1 < Y2",
                        "write `[X1, X2, Y1, Y2]` in increasing order per axis",
                    );
                    None
                } else {
                    Some(j)
                }
            }
            (_, _, Some(_), Some(_)) => {
                self.report(
                    n,
                    "a beam gives both `field-cm` and `jaws-cm`",
                    "keep one: `field-cm` for a symmetric field, `jaws-cm` for an asymmetric one",
                );
                None
            }
            (None, None, None, None) => {
                self.report(
                    n,
                    "a beam of `mu` needs `field-cm` or `jaws-cm`",
                    "add `field-cm: [X, Y]` (cm at the isocentre)",
                );
                None
            }
            _ => None,
        };
        let ssd_cm = self.req_number(&f, "ssd-cm", 50.0, 200.0, "cm");
        let depth_cm = self.req_number(&f, "depth-cm", 0.0, 50.0, "cm");
        let setup = f.get("setup").and_then(|x| {
            let s = self.string(x, "`setup`")?;
            match s.as_str() {
                "ssd" => Some(beamproof_api::mu::MuSetup::Ssd),
                "sad" => Some(beamproof_api::mu::MuSetup::Sad),
                _ => {
                    self.report(x, format!("unknown setup `{s}`"), "one of: ssd, sad");
                    None
                }
            }
        });
        let off_axis_cm = match f.get("off-axis-cm") {
            Some(x) => self.numbers::<2>(
                x,
                "`off-axis-cm`",
                -40.0,
                40.0,
                "cm",
                "write `[x, y]`: the point in the beam's eye view at the isocentre plane, cm",
            )?,
            None => [0.0, 0.0],
        };
        let mu = self.req_number(&f, "mu", 0.1, 1e5, "MU");
        let tps = self.req_number(&f, "tps-dose-gy", 1e-4, 100.0, "Gy");
        let wedge = self.opt_string(&f, "wedge");
        let tray = self.opt_bool(&f, "tray").unwrap_or(false);
        Some(MuBeamSpec {
            id: id?,
            jaws_cm: jaws_cm?,
            ssd_cm: ssd_cm?,
            depth_cm: depth_cm?,
            setup,
            off_axis_cm,
            mu: mu?,
            tps_dose_gy: tps?,
            wedge,
            tray,
            pos: Pos::of(n),
        })
    }

    pub(crate) fn input(&mut self, n: &Node, what: &'static str) -> Option<InputSpec> {
        if let Value::Scalar { .. } = n.value {
            let template = self.string(n, what)?;
            return Some(InputSpec {
                template,
                placement: None,
                pos: Pos::of(n),
            });
        }
        let f = self.fields(n, what, INPUT_KEYS)?;
        let file = self.required(&f, "file", "add `file:` with the path of the data file");
        let template = file.and_then(|x| self.string(x, "`file`"));
        let pp = f.get("patient-position").and_then(|p| {
            let s = self.string(p, "`patient-position`")?;
            let v = PatientPosition::from_name(&s);
            if v.is_none() {
                self.report(
                    p,
                    format!("unknown patient position `{s}`"),
                    format!("one of: {}", PatientPosition::NAMES.join(", ")),
                );
            }
            v
        });
        let iso = f.get("isocentre-mm").and_then(|i| {
            let items = self.list(i, "`isocentre-mm`")?;
            if items.len() != 3 {
                self.report(
                    i,
                    format!("`isocentre-mm` needs 3 numbers, found {}", items.len()),
                    "write `[x, y, z]` in the DICOM patient coordinates of the dose file, mm",
                );
                return None;
            }
            let v: Vec<f64> = items
                .iter()
                .filter_map(|x| self.number(x, "an isocentre coordinate", -1e5, 1e5, "mm"))
                .collect();
            (v.len() == 3).then(|| [v[0], v[1], v[2]])
        });
        let placement = match (f.get("patient-position"), f.get("isocentre-mm")) {
            (None, None) => None,
            (Some(_), Some(_)) => Some(DicomPlacement {
                patient_position: pp?,
                isocentre_mm: iso?,
            }),
            _ => {
                self.report(
                    n,
                    format!("{what} gives only one of `patient-position` and `isocentre-mm`"),
                    "a DICOM dose grid needs both to be placed in IEC 61217 coordinates",
                );
                return None;
            }
        };
        Some(InputSpec {
            template: template?,
            placement,
            pos: Pos::of(file.unwrap_or(n)),
        })
    }

    fn analysis(&mut self, n: &Node) -> Option<AnalysisSpec> {
        if let Value::Scalar { .. } = n.value {
            return Some(AnalysisSpec {
                plugin: self.string(n, "an analysis")?,
                params: Vec::new(),
                pos: Pos::of(n),
            });
        }
        let f = self.fields(n, "an analysis", ANALYSIS_KEYS)?;
        let plugin = self.req_string(
            &f,
            "plugin",
            "add `plugin:` with the analysis plugin's name",
        );
        let params = match f.get("params") {
            Some(p) => match &p.value {
                Value::Map(entries) => entries
                    .iter()
                    .map(|(k, v)| {
                        (
                            k.scalar().unwrap_or_default().to_string(),
                            v.to_json(),
                            Pos::of(k),
                        )
                    })
                    .collect(),
                _ => {
                    self.report(
                        p,
                        "`params` must be a mapping",
                        "write `params: {name: value}`",
                    );
                    return None;
                }
            },
            None => Vec::new(),
        };
        Some(AnalysisSpec {
            plugin: plugin?,
            params,
            pos: Pos::of(n),
        })
    }
}

pub(crate) fn show(n: &Node) -> String {
    match n.scalar() {
        Some(s) if !n.is_null() => format!("`{s}`"),
        _ => n.describe().to_string(),
    }
}

fn unit_hint(unit: &str) -> String {
    if unit.is_empty() {
        String::new()
    } else {
        format!(" ({unit})")
    }
}

/// True for a real calendar date written `YYYY-MM-DD` (Gregorian leap-year rule).
pub fn valid_iso_date(s: &str) -> bool {
    let b = s.as_bytes();
    if b.len() != 10 || b[4] != b'-' || b[7] != b'-' {
        return false;
    }
    let num = |r: std::ops::Range<usize>| s.get(r).and_then(|t| t.parse::<u32>().ok());
    let (Some(y), Some(m), Some(d)) = (num(0..4), num(5..7), num(8..10)) else {
        return false;
    };
    let leap = (y % 4 == 0 && y % 100 != 0) || y % 400 == 0;
    let days = match m {
        1 | 3 | 5 | 7 | 8 | 10 | 12 => 31,
        4 | 6 | 9 | 11 => 30,
        2 if leap => 29,
        2 => 28,
        _ => return false,
    };
    (1900..=9999).contains(&y) && d >= 1 && d <= days
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn dates_follow_the_gregorian_calendar() {
        // Gregorian rule (ISO 8601): 2000 is a leap year, 1900 and 2100 are not.
        assert!(valid_iso_date("2026-11-20"));
        assert!(valid_iso_date("2000-02-29"));
        assert!(!valid_iso_date("2100-02-29"));
        assert!(!valid_iso_date("2026-13-01"));
        assert!(!valid_iso_date("2026-1-01"));
    }

    #[test]
    fn duplicate_ids_are_reported_once_each_at_the_second_use() {
        // Convention (common practice, no source): ids identify machines, beams, sites and
        // tests, so a repeated id is an error at its second occurrence.
        let dir = std::env::temp_dir().join(format!("beamproof-dup-{}", std::process::id()));
        std::fs::create_dir_all(&dir).expect("dir");
        let path = dir.join("campaign.yaml");
        let test = |id: &str| {
            format!(
                "      - {{id: {id}, name: t, kind: point-dose, measured: m.csv, calculated: c.csv, criteria: c, analyses: [point-dose]}}\n"
            )
        };
        let text = format!(
            "beamproof-campaign: 1\nid: dup\ntitle: t\ninstitution: i\ntps: {{name: n, version: '1', beam-model: b}}\nmachines:\n  - id: m1\n    beams:\n      - {{id: b1, modality: photon, energy: 6}}\n      - {{id: b1, modality: photon, energy: 10}}\n  - id: m1\n    beams: [{{id: b2, modality: photon, energy: 6}}]\ncriteria:\n  c: {{dose-difference-percent: {{tolerance: 1, action: 2}}}}\nsites:\n  - id: s\n    name: s\n    tests:\n{}{}  - id: s\n    name: s2\n    tests:\n{}",
            test("t1"),
            test("t1"),
            test("t2")
        );
        std::fs::write(&path, text).expect("write");
        let (c, diags) = Campaign::load_partial(&path);
        let _ = std::fs::remove_dir_all(&dir);
        let found: Vec<(usize, &str)> =
            diags.iter().map(|d| (d.line, d.message.as_str())).collect();
        assert_eq!(
            found,
            [
                (10, "beam id `b1` is used twice"),
                (11, "machine id `m1` is used twice"),
                (20, "test id `t1` is used twice in this site"),
                (21, "site id `s` is used twice"),
            ]
        );
        let c = c.expect("decoded");
        assert_eq!(c.machines.len(), 1);
        assert_eq!(c.machines[0].beams.len(), 1);
        assert_eq!(c.sites.len(), 1);
        assert_eq!(c.sites[0].tests.len(), 1);
    }
}
