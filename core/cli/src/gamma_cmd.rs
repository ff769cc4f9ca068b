//! `beamproof gamma REF EVAL`: a one-off gamma comparison of two files outside a campaign,
//! through the same gamma plugin a campaign uses. Prints the results and optionally writes the
//! gamma value of every reference point as CSV.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use beamproof_api::{
    AnalysisInput, CriteriaSet, CurveAxis, DatasetData, GammaCriterion, Normalisation, TestInfo,
    TestKind,
};
use beamproof_engine::campaign::{
    DicomPlacement, GAMMA_DOSE_PERCENT, GAMMA_DTA_MM, GAMMA_THRESHOLD_PERCENT, PatientPosition,
};
use beamproof_engine::diag::Diagnostic;
use beamproof_engine::readers::{read_dataset, read_file};

use crate::{EXIT_CANNOT_RUN, Failure, Io};

/// Options of the `gamma` command.
#[derive(clap::Args)]
pub struct GammaArgs {
    /// Reference distribution (for example the measurement)
    pub reference: PathBuf,
    /// Evaluated distribution, searched around each reference point (a grid or a curve)
    pub evaluated: PathBuf,
    /// Criterion DOSE%/DTAmm, repeatable (default 3%/2mm, AAPM TG-218)
    #[arg(long = "criteria", default_value = "3%/2mm")]
    pub criteria: Vec<String>,
    /// Local dose difference (percent of each reference dose) instead of global
    #[arg(long)]
    pub local: bool,
    /// Low-dose threshold, percent of the normalisation dose
    #[arg(long, default_value_t = 10.0)]
    pub threshold: f64,
    /// Write x,y,z,reference dose,gamma of every reference point to this CSV file
    #[arg(long)]
    pub map: Option<PathBuf>,
    /// Patient position of DICOM dose files
    #[arg(long = "patient-position", default_value = "HFS")]
    pub patient_position: String,
    /// Isocentre X,Y,Z in the DICOM file's patient coordinates, mm (needed with CSV data)
    #[arg(long)]
    pub isocentre: Option<String>,
    /// exact (linear interpolant), sampled (every DTA/10) or nodes (no interpolation)
    #[arg(long, default_value = "exact", value_parser = ["exact", "sampled", "nodes"])]
    pub method: String,
    /// Normalise both distributions to their own maximum
    #[arg(long)]
    pub relative: bool,
    /// With several criteria: every statistic for the first criterion and exact pass rates
    /// for the others (first-criterion), or every statistic for each (every-criterion, slower)
    #[arg(long, default_value = "first-criterion", value_parser = ["first-criterion", "every-criterion"])]
    pub statistics: String,
    /// Print the analysis as JSON, in the shape results.json records it, instead of text
    #[arg(long)]
    pub json: bool,
}

fn usage(msg: String, help: &str) -> Failure {
    Failure {
        text: format!("error: {msg}\n  = help: {help}"),
        code: EXIT_CANNOT_RUN,
    }
}

/// Parse `3%/2mm` (or `3/2`) into (dose percent, DTA mm), within the ranges a campaign
/// accepts.
pub fn parse_criterion(s: &str) -> Option<(f64, f64)> {
    let (d, t) = s.split_once('/')?;
    let d: f64 = d.trim().trim_end_matches('%').trim().parse().ok()?;
    let t: f64 = t.trim().trim_end_matches("mm").trim().parse().ok()?;
    let within = |v: f64, (lo, hi): (f64, f64)| v.is_finite() && (lo..=hi).contains(&v);
    (within(d, GAMMA_DOSE_PERCENT) && within(t, GAMMA_DTA_MM)).then_some((d, t))
}

pub fn run(io: &mut Io, a: GammaArgs) -> Result<u8, Failure> {
    let criteria: Vec<(f64, f64)> = a
        .criteria
        .iter()
        .map(|c| parse_criterion(c).ok_or_else(|| usage(format!("criterion `{c}` is not DOSE%/DTAmm within range"), &format!("write for example --criteria 3%/2mm (dose {} to {} %, distance {} to {} mm)", GAMMA_DOSE_PERCENT.0, GAMMA_DOSE_PERCENT.1, GAMMA_DTA_MM.0, GAMMA_DTA_MM.1))))
        .collect::<Result<_, _>>()?;
    let (lo, hi) = GAMMA_THRESHOLD_PERCENT;
    if !(lo..=hi).contains(&a.threshold) {
        return Err(usage(
            format!("threshold {} % is outside {lo}..{hi}", a.threshold),
            "give the low-dose threshold in percent of the normalisation dose, e.g. --threshold 10",
        ));
    }
    let position = PatientPosition::from_name(&a.patient_position).ok_or_else(|| {
        usage(
            format!("unknown patient position `{}`", a.patient_position),
            "one of HFS, HFP, FFS, FFP",
        )
    })?;
    let is_dicom = |p: &Path| p.extension().is_some_and(|e| e.eq_ignore_ascii_case("dcm"));
    let isocentre = match (
        &a.isocentre,
        is_dicom(&a.reference) && is_dicom(&a.evaluated),
    ) {
        (Some(s), _) => Some(beamproof_api::parse_xyz(s).ok_or_else(|| {
            usage(
                format!("isocentre `{s}` is not X,Y,Z"),
                "write three numbers in mm, e.g. --isocentre 10,-50,25",
            )
        })?),
        // Two DICOM grids share one coordinate system: any common placement compares them.
        (None, true) => Some([0.0; 3]),
        (None, false) if is_dicom(&a.reference) || is_dicom(&a.evaluated) => {
            return Err(usage(
                "a DICOM dose compared with CSV data needs the isocentre".into(),
                "add --isocentre X,Y,Z (the isocentre in the DICOM file's patient coordinates, mm) and --patient-position if not HFS",
            ));
        }
        (None, false) => None,
    };
    let placement = isocentre.map(|iso| DicomPlacement {
        patient_position: position,
        isocentre_mm: iso,
    });
    let read = |p: &Path| -> Result<beamproof_api::Dataset, Failure> {
        let pl = if is_dicom(p) {
            placement.as_ref()
        } else {
            None
        };
        let bytes = read_file(p).map_err(Failure::from)?;
        read_dataset(p, &bytes, &p.display().to_string(), pl)
            .map_err(|d: Diagnostic| Failure::from(d))
    };
    let reference = read(&a.reference)?;
    let evaluated = read(&a.evaluated)?;
    if reference.unit != evaluated.unit && !a.relative {
        return Err(usage(
            format!(
                "mismatched dose units: `{}` is in {}, `{}` in {}",
                reference.source,
                reference.unit.label(),
                evaluated.source,
                evaluated.unit.label()
            ),
            "compare absolute with absolute dose, or add --relative to normalise both to their maximum",
        ));
    }
    let kind = match &reference.data {
        DatasetData::Curve(c) if c.axis == CurveAxis::Depth => TestKind::DepthDose,
        DatasetData::Curve(_) => TestKind::Profile,
        DatasetData::Points(_) => TestKind::PointSet,
        DatasetData::Grid(g) if g.dimensions() == 3 => TestKind::Volume,
        DatasetData::Grid(_) => TestKind::Plane,
    };
    let gamma = criteria
        .iter()
        .map(|&(dose_percent, dta_mm)| GammaCriterion {
            threshold_percent: a.threshold,
            normalisation: if a.local {
                Normalisation::Local
            } else {
                Normalisation::Global
            },
            ..GammaCriterion::tg218(dose_percent, dta_mm)
        })
        .collect();
    let input = AnalysisInput {
        test: TestInfo {
            site: "one-off".into(),
            id: "gamma".into(),
            name: "gamma".into(),
            kind,
            machine: String::new(),
            beam: None,
        },
        params: BTreeMap::from([
            ("reference".to_string(), serde_json::json!("measured")),
            ("method".to_string(), serde_json::json!(a.method)),
            ("relative".to_string(), serde_json::json!(a.relative)),
            ("sample-step-dta".to_string(), serde_json::json!(0.1)),
            ("statistics".to_string(), serde_json::json!(a.statistics)),
        ]),
        criteria: CriteriaSet {
            name: "command line".into(),
            dose_difference_percent: None,
            gamma,
            metrics: BTreeMap::new(),
        },
        measured: Some(reference.clone()),
        calculated: Some(evaluated),
        mu: None,
        film: None,
    };
    let (output, per_point) = beamproof_plugin_gamma::analyse_with_points(&input).map_err(|e| {
        usage(
            format!("gamma could not be computed: {e}"),
            "check that the two files overlap and hold valid doses",
        )
    })?;
    if a.json {
        use beamproof_api::Analysis as _;
        let manifest = beamproof_plugin_gamma::Gamma.manifest();
        outln(
            io,
            &beamproof_engine::run::standalone_json(&manifest, &input.params, &output),
        );
        if let Some(path) = &a.map {
            write_map(path, &per_point)?;
        }
        return Ok(crate::exit_for(output.overall_status()));
    }
    outln(
        io,
        &format!(
            "reference {} ({}), evaluated {}",
            reference.source,
            reference.shape_name(),
            a.evaluated.display()
        ),
    );
    for t in &output.tables {
        outln(io, &format!("\n{}", t.title));
        outln(io, &t.columns.join(" | "));
        for r in &t.rows {
            outln(io, &r.join(" | "));
        }
    }
    outln(io, "");
    for n in &output.notes {
        outln(io, n);
    }
    outln(
        io,
        "levels: tolerance 95 % and action 90 % passing (AAPM TG-218 defaults)",
    );
    outln(
        io,
        "caution: results must be reviewed by a qualified medical physicist; beamproof is not a medical device.",
    );
    if let Some(path) = &a.map {
        write_map(path, &per_point)?;
        outln(io, &format!("gamma map written to {}", path.display()));
    }
    Ok(crate::exit_for(output.overall_status()))
}

fn outln(io: &mut Io, line: &str) {
    let _ = writeln!(io.out, "{line}");
}

/// Write `x,y,z,reference dose,gamma` for every reference point (first criterion; empty gamma
/// where the point was not evaluated), through a temporary file renamed into place; an existing
/// file is never replaced.
fn write_map(path: &Path, g: &beamproof_plugin_gamma::PointGammas) -> Result<(), Failure> {
    if path.exists() {
        return Err(usage(
            format!("{} already exists", path.display()),
            "choose another --map file; existing files are never replaced",
        ));
    }
    let mut text = String::from("x_mm,y_mm,z_mm,reference_dose,gamma\n");
    for (i, (d, v)) in g.reference_dose.iter().zip(&g.gamma).enumerate() {
        let p = g.points.at(i);
        let gamma = if v.is_nan() {
            String::new()
        } else {
            format!("{v:.4}")
        };
        text.push_str(&format!("{},{},{},{d},{gamma}\n", p[0], p[1], p[2]));
    }
    let tmp = path.with_extension("partial");
    let fail = |e: std::io::Error| {
        usage(
            format!("cannot write {}: {e}", path.display()),
            "check the folder exists and is writable",
        )
    };
    std::fs::write(&tmp, text).map_err(fail)?;
    std::fs::rename(&tmp, path).map_err(|e| {
        let _ = std::fs::remove_file(&tmp);
        fail(e)
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn criteria_take_the_campaign_ranges() {
        // The campaign decoder's ranges (engine::campaign::GAMMA_*), at and past each edge.
        assert_eq!(parse_criterion("3%/2mm"), Some((3.0, 2.0)));
        assert_eq!(parse_criterion("0.01/0.01"), Some((0.01, 0.01)));
        assert_eq!(parse_criterion("100%/100mm"), Some((100.0, 100.0)));
        assert_eq!(parse_criterion("0.001%/2mm"), None);
        assert_eq!(parse_criterion("3%/0.001mm"), None);
        assert_eq!(parse_criterion("3%/101mm"), None);
        assert_eq!(parse_criterion("NaN%/2mm"), None);
    }
}
