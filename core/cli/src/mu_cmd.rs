//! `beamproof mu --beam-data FILE --plan RTPLAN [--point x,y,z]`: the independent MU check of
//! one plan outside a campaign, printed line by line, through the same calculation a campaign's
//! `mu-check` test uses.

use std::io::Write as _;
use std::path::PathBuf;

use beamproof_api::Status;
use beamproof_api::mu::MuSetup;
use beamproof_plugin_mu_check::{beam_data, calculate_beam, default_levels};

use crate::{EXIT_CANNOT_RUN, Failure, Io};

/// Options of the `mu` command.
#[derive(clap::Args)]
pub struct MuArgs {
    /// Beam-data file of the machine and beam (docs/beam-data.md)
    #[arg(long = "beam-data")]
    pub beam_data: PathBuf,
    /// DICOM RT Plan with static photon beams
    #[arg(long)]
    pub plan: PathBuf,
    /// Calculation point x,y,z in mm, IEC 61217 fixed coordinates relative to the isocentre
    #[arg(long, default_value = "0,0,0")]
    pub point: String,
    /// Geometry class for the default action levels after AAPM TG-114
    #[arg(long, default_value = "simple", value_parser = ["simple", "off-axis", "heterogeneous"])]
    pub geometry: String,
    /// Scatter: Clarkson for beams with leaves (auto), or force one method
    #[arg(long, default_value = "auto", value_parser = ["auto", "equivalent-square", "clarkson"])]
    pub scatter: String,
    /// Number of Clarkson sectors
    #[arg(long, default_value_t = 36, value_parser = clap::value_parser!(u32).range(8..=360))]
    pub sectors: u32,
    /// Print the analysis as JSON, in the shape results.json records an MU check, instead of
    /// the calculation line by line
    #[arg(long)]
    pub json: bool,
}

/// The MU check through the plugin a campaign uses, printed as JSON.
fn run_json(io: &mut Io, a: &MuArgs, input: beamproof_api::mu::MuInput) -> Result<u8, Failure> {
    use beamproof_api::Analysis as _;
    let params = std::collections::BTreeMap::from([
        ("geometry".to_string(), serde_json::json!(a.geometry)),
        ("scatter".to_string(), serde_json::json!(a.scatter)),
        ("sectors".to_string(), serde_json::json!(a.sectors)),
    ]);
    let analysis_input = beamproof_api::AnalysisInput {
        test: beamproof_api::TestInfo::standalone(beamproof_api::TestKind::MuCheck),
        params: params.clone(),
        criteria: beamproof_api::CriteriaSet {
            name: "command line (TG-114 defaults of the geometry)".into(),
            dose_difference_percent: None,
            gamma: Vec::new(),
            metrics: Default::default(),
        },
        measured: None,
        calculated: None,
        mu: Some(input),
        film: None,
    };
    let plugin = beamproof_plugin_mu_check::MuCheck;
    let output = plugin
        .analyse(&analysis_input)
        .map_err(|e| usage(e.message, "check the plan against the beam data"))?;
    let _ = writeln!(
        io.out,
        "{}",
        beamproof_engine::run::standalone_json(&plugin.manifest(), &params, &output)
    );
    Ok(crate::exit_for(output.overall_status()))
}

fn usage(msg: String, help: &str) -> Failure {
    Failure {
        text: format!("error: {msg}\n  = help: {help}"),
        code: EXIT_CANNOT_RUN,
    }
}

fn f(v: f64, d: usize) -> String {
    beamproof_api::fixed(v, d)
}

pub fn run(io: &mut Io, a: MuArgs) -> Result<u8, Failure> {
    let point = beamproof_api::parse_xyz(&a.point).ok_or_else(|| {
        usage(
            format!("`--point {}` is not three numbers", a.point),
            "write --point x,y,z in mm relative to the isocentre, e.g. --point 0,0,-20",
        )
    })?;
    let input = beamproof_engine::mu_input::standalone(&a.beam_data, &a.plan, point)?;
    if a.json {
        return run_json(io, &a, input);
    }
    let raw = &input.beam_data;
    let data = beam_data(raw).map_err(|e| {
        usage(
            format!("beam data {}: {}", a.beam_data.display(), e.0),
            "correct the beam-data tables",
        )
    })?;
    let levels = default_levels(&a.geometry);
    let w = &mut io.out;
    let _ = writeln!(
        w,
        "plan {} ({}), beam data {} (machine {}, beam {}, {} MV{})",
        input.plan.as_deref().unwrap_or(""),
        a.plan.display(),
        a.beam_data.display(),
        raw.machine,
        raw.beam,
        f(raw.energy_mv, 0),
        if raw.fff { " FFF" } else { "" }
    );
    let _ = writeln!(
        w,
        "point ({}, {}, {}) mm from the isocentre (IEC 61217 fixed); {} geometry: tolerance {} %, action {} % (AAPM TG-114 defaults)",
        f(point[0], 1),
        f(point[1], 1),
        f(point[2], 1),
        a.geometry,
        f(levels.tolerance, 1),
        f(levels.action, 1)
    );
    let mut worst = Status::Pass;
    let (mut tps_total, mut ind_total, mut all_tps) = (0.0, 0.0, true);
    for b in &input.beams {
        let dose_cgy = b.tps_dose_gy.map_or(100.0, |d| d * 100.0);
        let (r, scatter) = calculate_beam(&data, raw, b, &a.scatter, a.sectors as usize, dose_cgy)
            .map_err(|m| usage(m, "check the beam against the beam data's table ranges"))?;
        let [x1, x2, y1, y2] = b.jaws_cm;
        let _ = writeln!(w);
        let _ = writeln!(
            w,
            "beam {}: {}, SSD {} cm, depth {} cm, SPD {} cm, off axis ({}, {}) cm, jaws {} x {} cm, {}",
            b.id,
            match b.setup {
                MuSetup::Ssd => "SSD setup",
                MuSetup::Sad => "isocentric",
            },
            f(b.ssd_cm, 2),
            f(b.depth_cm, 2),
            f(b.spd_cm, 2),
            f(b.off_axis_cm[0], 2),
            f(b.off_axis_cm[1], 2),
            f(x2 - x1, 2),
            f(y2 - y1, 2),
            match scatter {
                beamproof_plugin_mu_check::Scatter::Clarkson => "leaves, Clarkson scatter",
                beamproof_plugin_mu_check::Scatter::EquivalentSquare => "equivalent square",
            }
        );
        for factor in r.factors.iter().skip(1) {
            let _ = writeln!(
                w,
                "  {:<9} {:<52} {:>10}",
                factor.symbol,
                factor.description,
                f(factor.value, 4)
            );
        }
        let _ = writeln!(
            w,
            "  {:<9} {:<52} {:>10}",
            "D/MU",
            "dose per MU at the point (cGy/MU)",
            f(r.dose_per_mu_cgy, 4)
        );
        let independent = b.mu * r.dose_per_mu_cgy / 100.0;
        ind_total += independent;
        match b.tps_dose_gy {
            Some(tps) => {
                tps_total += tps;
                let diff = 100.0 * (independent - tps) / tps;
                let s = Status::from_deviation(diff, levels.tolerance, levels.action);
                worst = worst.max(s);
                let _ = writeln!(
                    w,
                    "  {} MU planned: {} Gy independent, {} Gy planning system ({}): {}{} % {}; independent MU for {} Gy: {}",
                    f(b.mu, 1),
                    f(independent, 4),
                    f(tps, 4),
                    b.tps_dose_source,
                    if diff >= 0.0 { "+" } else { "" },
                    f(diff, 2),
                    format!("{s:?}").to_ascii_uppercase(),
                    f(tps, 4),
                    f(r.mu, 1)
                );
            }
            None => {
                all_tps = false;
                let _ = writeln!(
                    w,
                    "  {} MU planned: {} Gy independent; the plan holds no beam dose to compare with",
                    f(b.mu, 1),
                    f(independent, 4)
                );
            }
        }
    }
    let _ = writeln!(w);
    if all_tps && input.beams.len() > 1 {
        let diff = 100.0 * (ind_total - tps_total) / tps_total;
        let s = Status::from_deviation(diff, levels.tolerance, levels.action);
        worst = worst.max(s);
        let _ = writeln!(
            w,
            "all beams: {} Gy independent, {} Gy planning system: {}{} % {}",
            f(ind_total, 4),
            f(tps_total, 4),
            if diff >= 0.0 { "+" } else { "" },
            f(diff, 2),
            format!("{s:?}").to_ascii_uppercase()
        );
    }
    for c in beamproof_engine::run::CAUTIONS {
        let _ = writeln!(w, "caution: {c}");
    }
    Ok(crate::exit_for(worst))
}
