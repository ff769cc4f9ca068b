//! Input of the independent monitor-unit check: the measured beam data of one machine and beam
//! (read by the engine from a beam-data file) and the beams to check (written in the campaign
//! or read from a DICOM RT Plan), with their geometry already resolved to what the TG-71
//! formalism needs. Lengths are in cm here, as in the formalism and the beam-data tables.

use serde::{Deserialize, Serialize};

/// A factor against one axis (e.g. Sc or Sp against equivalent square field side, cm).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Table1 {
    pub axis: Vec<f64>,
    pub values: Vec<f64>,
}

/// A quantity against depth (rows, cm) and a second axis (columns, cm): PDD or TPR against
/// equivalent square field side, or the off-axis ratio against off-axis distance.
/// Row-major: `values[row * columns.len() + column]`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Table2 {
    pub depth_cm: Vec<f64>,
    pub columns: Vec<f64>,
    pub values: Vec<f64>,
}

/// A named wedge and its factor.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct WedgeFactor {
    pub id: String,
    pub factor: f64,
}

/// Measured beam data of one machine and beam (one energy and fluence mode).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct BeamData {
    /// The beam-data file, relative to the campaign folder.
    pub source: String,
    pub machine: String,
    pub beam: String,
    /// Nominal energy, MV, and whether the beam is flattening-filter free (checked against the
    /// plan's beams).
    pub energy_mv: f64,
    pub fff: bool,
    /// Source-axis distance, cm.
    pub sad_cm: f64,
    /// Normalisation conditions: SSD0 and depth d0 (cm), field side (cm), and the dose per MU
    /// there, D0' (cGy/MU).
    pub ssd0_cm: f64,
    pub d0_cm: f64,
    pub field0_cm: f64,
    pub dose_per_mu_cgy: f64,
    /// PDD in percent against depth and field side at the surface, measured at SSD
    /// `pdd_ssd_cm` (SSD0 when `None`); converted to a treatment SSD by the Mayneord F factor.
    pub pdd: Option<Table2>,
    #[serde(default)]
    pub pdd_ssd_cm: Option<f64>,
    /// TPR (normalised at d0) against depth and field side at the depth.
    pub tpr: Option<Table2>,
    /// Collimator scatter against collimator field side at the isocentre.
    pub sc: Table1,
    /// Phantom scatter against field side at the depth, normalised at the reference field.
    pub sp: Table1,
    /// Off-axis ratio against depth and off-axis distance at the isocentre plane.
    pub oar: Option<Table2>,
    /// Tray factor; `None` when the machine has no tray (e.g. a jawless or FFF-only design).
    pub tray_factor: Option<f64>,
    pub wedges: Vec<WedgeFactor>,
}

/// The leaves of a multileaf collimator at the isocentre plane, cm: leaf pair `i` spans
/// `boundaries[i]..boundaries[i + 1]` along Y and is open from `bank_a[i]` to `bank_b[i]`
/// along X.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Leaves {
    pub boundaries: Vec<f64>,
    pub bank_a: Vec<f64>,
    pub bank_b: Vec<f64>,
}

/// How the formalism treats a beam.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum MuSetup {
    /// Fixed source-to-surface distance: PDD formalism.
    Ssd,
    /// Isocentric: TPR formalism.
    Sad,
}

/// One beam to check, geometry resolved at the calculation point.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct MuBeam {
    /// Beam label (campaign id, or plan beam number and name).
    pub id: String,
    /// Where the beam came from: `campaign` or the plan file.
    pub source: String,
    pub setup: MuSetup,
    /// Source-to-surface distance along the central axis, cm.
    pub ssd_cm: f64,
    /// Depth of the calculation point along the beam (flat water phantom), cm.
    pub depth_cm: f64,
    /// Source-to-point distance along the central axis, cm.
    pub spd_cm: f64,
    /// Position of the point in the beam's eye view, projected to the isocentre plane, cm.
    pub off_axis_cm: [f64; 2],
    /// Jaw positions X1, X2, Y1, Y2 at the isocentre plane, cm (X1 and Y1 negative when on
    /// the negative side).
    pub jaws_cm: [f64; 4],
    pub leaves: Option<Leaves>,
    pub wedge: Option<String>,
    pub tray: bool,
    /// Monitor units planned by the TPS.
    pub mu: f64,
    /// Dose at the point from this beam according to the TPS, Gy.
    pub tps_dose_gy: Option<f64>,
    /// Where the TPS dose came from (campaign or a sampled RT Dose file).
    pub tps_dose_source: String,
}

/// Everything a monitor-unit check test hands to its analysis.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct MuInput {
    pub beam_data: BeamData,
    pub beams: Vec<MuBeam>,
    /// The plan label when the beams came from an RT Plan.
    pub plan: Option<String>,
}
