//! Example of a third-party plugin built as a dynamic library (`cdylib`) and loaded by the
//! runner at run time through the C ABI of `beamproof_api::abi`.
//!
//! The analysis is deliberately small but real: the ratio of mean calculated to mean measured
//! dose over a point set (a quick "overall scaling" check), judged against the criteria set's
//! `mean-dose-ratio` metric levels as a deviation of the ratio from 1 in percent.
//!
//! Build: `cargo build -p beamproof-plugin-example-dynamic`, then point `--plugin-dir` at the
//! folder holding `libbeamproof_plugin_example_dynamic.so` (`.dylib` on macOS, `.dll` on Windows).

use beamproof_api::{
    Analysis, AnalysisError, AnalysisInput, AnalysisOutput, DatasetData, Levels, Limits, Metric,
    MetricSpec, ParamSpec, ParamType, PluginManifest, Status, TestKind,
};

/// The example analysis.
pub struct MeanDoseRatio;

impl Analysis for MeanDoseRatio {
    fn manifest(&self) -> PluginManifest {
        PluginManifest {
            name: "mean-dose-ratio".into(),
            version: env!("CARGO_PKG_VERSION").into(),
            description:
                "Example dynamic plugin: mean calculated over mean measured dose of a point set"
                    .into(),
            kinds: vec![TestKind::PointDose, TestKind::PointSet],
            judged_metrics: Some(vec![MetricSpec::new(
                "mean-dose-ratio",
                &[TestKind::PointDose, TestKind::PointSet],
                "%",
                "mean calculated over mean measured dose, deviation from 1",
            )]),
            needs: Vec::new(),
            params: vec![ParamSpec {
                name: "fail-on-purpose".into(),
                kind: ParamType::Bool,
                default: Some(false.into()),
                unit: String::new(),
                description:
                    "Panic inside the plugin, to show that the host survives and records an error"
                        .into(),
            }],
        }
    }

    fn analyse(&self, input: &AnalysisInput) -> Result<AnalysisOutput, AnalysisError> {
        if input
            .params
            .get("fail-on-purpose")
            .and_then(|v| v.as_bool())
            == Some(true)
        {
            panic!("failing on purpose, as the test asked");
        }
        let mean = |d: Option<&beamproof_api::Dataset>| -> Result<f64, AnalysisError> {
            match d.map(|d| &d.data) {
                Some(DatasetData::Points(p)) if !p.is_empty() => {
                    Ok(p.dose.iter().sum::<f64>() / p.len() as f64)
                }
                _ => Err(AnalysisError::new(
                    "mean-dose-ratio needs measured and calculated point sets",
                )),
            }
        };
        let ratio = mean(input.calculated.as_ref())? / mean(input.measured.as_ref())?;
        let deviation_percent = 100.0 * (ratio - 1.0);
        let levels = input
            .criteria
            .metrics
            .get("mean-dose-ratio")
            .copied()
            .unwrap_or(Levels {
                tolerance: 2.0,
                action: 3.0,
            });
        Ok(AnalysisOutput {
            metrics: vec![Metric {
                id: "mean-dose-ratio".into(),
                label: "Mean calculated / mean measured, deviation from 1".into(),
                value: deviation_percent,
                unit: "%".into(),
                limits: Some(Limits {
                    rule: "|value| <= limit".into(),
                    tolerance: levels.tolerance,
                    action: levels.action,
                }),
                status: Some(Status::from_deviation(
                    deviation_percent,
                    levels.tolerance,
                    levels.action,
                )),
                ..Default::default()
            }],
            notes: vec![format!("Ratio of means: {ratio:.5}.")],
            ..Default::default()
        })
    }
}

#[cfg(not(feature = "wrong-abi"))]
beamproof_api::export_plugin!(MeanDoseRatio);

/// A descriptor that claims a future ABI major version, built only with the `wrong-abi`
/// feature so the host's version handshake can be tested against a real library.
#[cfg(feature = "wrong-abi")]
mod wrong_abi {
    use beamproof_api::abi::{BpBuf, BpStr, PluginDescriptor};

    unsafe extern "C" fn manifest(_out: *mut BpBuf) -> i32 {
        1
    }
    unsafe extern "C" fn analyse(_i: BpStr, _s: *const f64, _n: usize, _out: *mut BpBuf) -> i32 {
        1
    }
    static DESCRIPTOR: PluginDescriptor = {
        let mut d = PluginDescriptor::new(manifest, analyse);
        d.abi_major = 999;
        d
    };

    /// Entry point with the current symbol name but a wrong version inside.
    #[unsafe(no_mangle)]
    pub extern "C" fn beamproof_plugin_entry_v1() -> *const PluginDescriptor {
        &DESCRIPTOR
    }
}
