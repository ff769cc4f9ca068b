//! The `mu-check` analysis: for every beam of a monitor-unit check test, the dose per MU at the
//! calculation point from the measured beam data (AAPM TG-71), the dose those MU deliver
//! compared with the planning system's dose at the point, judged against action levels after
//! AAPM TG-114, with every factor in a table a physicist can follow line by line.
//!
//! Difference: `100 (D_independent - D_TPS) / D_TPS` with `D_independent = MU_TPS x dose per
//! MU`; the independent MU for the TPS dose, `D_TPS / dose per MU`, is shown beside it.

use beamproof_api::mu::{self, MuBeam, MuSetup};
use beamproof_api::{
    Analysis, AnalysisError, AnalysisInput, AnalysisOutput, Levels, Limits, Metric, ParamSpec,
    ParamType, PluginManifest, Reference, Status, Table, TestKind,
};

use crate::beam::{BeamData, BeamGeometry, Setup, calculate, calculate_clarkson};
use crate::clarkson::Aperture;
use crate::formalism::{MuResult, equivalent_square};
use crate::tables::{Table1D, Table2D, TableError};

/// Plugin id used in campaign files.
pub const NAME: &str = "mu-check";

/// The monitor-unit check.
#[derive(Debug, Default, Clone, Copy)]
pub struct MuCheck;

/// Default levels by geometry when the criteria set gives no `dose-difference-percent`: the
/// action levels follow AAPM TG-114 (Stern et al 2011: about 2 % for simple geometry, 3 % for
/// extensive shaping or large off-axis distances, up to 5 % when the planning system corrects
/// for heterogeneity and this check does not; values from memory, check against the report);
/// the tolerance one step below is common practice, no source.
pub fn default_levels(geometry: &str) -> Levels {
    match geometry {
        "off-axis" => Levels {
            tolerance: 2.0,
            action: 3.0,
        },
        "heterogeneous" => Levels {
            tolerance: 3.0,
            action: 5.0,
        },
        _ => Levels {
            tolerance: 1.0,
            action: 2.0,
        },
    }
}

fn references(clarkson: bool) -> Vec<Reference> {
    let mut r = vec![
        Reference {
            key: "TG-71".into(),
            citation: "Gibbons JP, Antolak JA, Followill DS, et al. Monitor unit calculations for external photon and electron beams: report of the AAPM Therapy Physics Committee Task Group No. 71. Med Phys. 2014;41(3):031501.".into(),
        },
        Reference {
            key: "TG-114".into(),
            citation: "Stern RL, Heaton R, Fraser MW, et al. Verification of monitor unit calculations for non-IMRT clinical radiotherapy: report of AAPM Task Group 114. Med Phys. 2011;38(1):504-530.".into(),
        },
        Reference {
            key: "Sterling 1964".into(),
            citation: "Sterling TD, Perry H, Katz L. Automation of radiation treatment planning IV. Derivation of a mathematical expression for the per cent depth dose surface of cobalt 60 beams and visualisation of multiple field dose distributions. Br J Radiol. 1964;37:544-550.".into(),
        },
    ];
    if clarkson {
        r.push(Reference {
            key: "Clarkson 1941".into(),
            citation: "Clarkson JR. A note on depth doses in fields of irregular shape. Br J Radiol. 1941;14:265-268.".into(),
        });
    }
    r
}

fn table_error(beam: &str) -> impl Fn(TableError) -> String + '_ {
    move |e| format!("beam {beam}: {}", e.0)
}

/// The plugin's tables from the engine's beam data (validated again here).
pub fn beam_data(d: &mu::BeamData) -> Result<BeamData, TableError> {
    let two = |name: &str, t: &mu::Table2, log: bool| {
        Table2D::new(
            name,
            t.depth_cm.clone(),
            t.columns.clone(),
            t.values.clone(),
        )
        .map(|t| if log { t.log_linear_in_depth() } else { t })
    };
    Ok(BeamData {
        d0_prime_cgy_per_mu: d.dose_per_mu_cgy,
        d0_cm: d.d0_cm,
        ssd0_cm: d.ssd0_cm,
        sad_cm: d.sad_cm,
        pdd_ssd_cm: d.pdd_ssd_cm.unwrap_or(d.ssd0_cm),
        sc: Table1D::new("Sc", d.sc.axis.clone(), d.sc.values.clone())?,
        sp: Table1D::new("Sp", d.sp.axis.clone(), d.sp.values.clone())?,
        pdd: d.pdd.as_ref().map(|t| two("PDD", t, true)).transpose()?,
        tpr: d.tpr.as_ref().map(|t| two("TPR", t, true)).transpose()?,
        oar: d.oar.as_ref().map(|t| two("OAR", t, false)).transpose()?,
    })
}

/// How the scatter of a beam was found.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Scatter {
    EquivalentSquare,
    Clarkson,
}

/// One beam's check.
#[derive(Debug, Clone, PartialEq)]
pub struct BeamCheck {
    pub id: String,
    pub scatter: Scatter,
    pub result: MuResult,
    /// Dose the TPS MU deliver by the independent calculation, Gy.
    pub independent_gy: f64,
    /// The planning system's dose at the point, Gy.
    pub tps_gy: f64,
    /// MU the independent calculation needs for the TPS dose.
    pub independent_mu: f64,
    pub difference_percent: f64,
}

/// Check one beam: dose per MU from the beam data, compared with the TPS dose.
pub fn check_beam(
    data: &BeamData,
    raw: &mu::BeamData,
    b: &MuBeam,
    scatter: &str,
    sectors: usize,
) -> Result<BeamCheck, String> {
    let tps_gy = b.tps_dose_gy.ok_or_else(|| {
        format!(
            "beam {}: no planning-system dose at the point; give `tps-dose-gy` or per-beam RT Dose files",
            b.id
        )
    })?;
    if !(tps_gy > 0.0 && tps_gy.is_finite()) {
        return Err(format!(
            "beam {}: the planning-system dose at the point is {tps_gy} Gy; it must be positive",
            b.id
        ));
    }
    let (result, method) = calculate_beam(data, raw, b, scatter, sectors, tps_gy * 100.0)?;
    let independent_gy = b.mu * result.dose_per_mu_cgy / 100.0;
    Ok(BeamCheck {
        id: b.id.clone(),
        scatter: method,
        independent_mu: result.mu,
        difference_percent: 100.0 * (independent_gy - tps_gy) / tps_gy,
        independent_gy,
        tps_gy,
        result,
    })
}

/// The TG-71 calculation of one beam for a dose `dose_cgy` at the point: the factors, the
/// dose per MU and the MU, and how the scatter was found.
pub fn calculate_beam(
    data: &BeamData,
    raw: &mu::BeamData,
    b: &MuBeam,
    scatter: &str,
    sectors: usize,
    dose_cgy: f64,
) -> Result<(MuResult, Scatter), String> {
    let wedge = match &b.wedge {
        None => 1.0,
        Some(w) => raw
            .wedges
            .iter()
            .find(|x| &x.id == w)
            .map(|x| x.factor)
            .ok_or_else(|| {
                format!(
                    "beam {}: wedge `{w}` has no factor in the beam data {}",
                    b.id, raw.source
                )
            })?,
    };
    let tray = match (b.tray, raw.tray_factor) {
        (false, _) => 1.0,
        (true, Some(t)) => t,
        (true, None) => {
            return Err(format!(
                "beam {}: the beam uses a tray but the beam data {} hold no tray factor",
                b.id, raw.source
            ));
        }
    };
    let [x1, x2, y1, y2] = b.jaws_cm;
    let geometry = BeamGeometry {
        field_cm: (x2 - x1, y2 - y1),
        depth_cm: b.depth_cm,
        setup: match b.setup {
            MuSetup::Ssd => Setup::Ssd { ssd_cm: b.ssd_cm },
            MuSetup::Sad => Setup::Sad { spd_cm: b.spd_cm },
        },
        off_axis_cm: b.off_axis_cm[0].hypot(b.off_axis_cm[1]),
        dose_cgy,
        wedge,
        tray,
    };
    let use_clarkson = match scatter {
        "clarkson" => true,
        "equivalent-square" => false,
        _ => b.leaves.is_some(),
    };
    Ok(if use_clarkson {
        let aperture = Aperture::new(b.jaws_cm, b.leaves.as_ref());
        if aperture.rects.is_empty() {
            return Err(format!("beam {}: the aperture is closed", b.id));
        }
        let (r, _) = calculate_clarkson(
            data,
            &geometry,
            b.spd_cm,
            &aperture,
            (b.off_axis_cm[0], b.off_axis_cm[1]),
            sectors,
        )
        .map_err(table_error(&b.id))?;
        (r, Scatter::Clarkson)
    } else {
        (
            calculate(data, &geometry).map_err(table_error(&b.id))?,
            Scatter::EquivalentSquare,
        )
    })
}

fn f2(v: f64) -> String {
    beamproof_api::fixed(v, 2)
}

impl Analysis for MuCheck {
    fn manifest(&self) -> PluginManifest {
        PluginManifest {
            name: NAME.into(),
            version: env!("CARGO_PKG_VERSION").into(),
            description: "Independent monitor-unit check (AAPM TG-71): dose per MU at the point from measured beam data, compared with the planning system's dose for its MU; Clarkson integration for MLC-shaped apertures".into(),
            kinds: vec![TestKind::MuCheck],
            // Judged against the criteria set's gamma criteria or dose-difference levels,
            // never against `metrics:` levels.
            judged_metrics: Some(Vec::new()),
            needs: Vec::new(),
            params: vec![
                ParamSpec {
                    name: "geometry".into(),
                    kind: ParamType::Choice { choices: vec!["simple".into(), "off-axis".into(), "heterogeneous".into()] },
                    default: Some("simple".into()),
                    unit: String::new(),
                    description: "Geometry class that picks the default levels after AAPM TG-114 when the criteria set gives no dose-difference levels".into(),
                },
                ParamSpec {
                    name: "scatter".into(),
                    kind: ParamType::Choice { choices: vec!["auto".into(), "equivalent-square".into(), "clarkson".into()] },
                    default: Some("auto".into()),
                    unit: String::new(),
                    description: "auto: Clarkson integration for beams with leaves, equivalent square of the jaws otherwise".into(),
                },
                ParamSpec {
                    name: "sectors".into(),
                    kind: ParamType::Integer { min: Some(8), max: Some(360) },
                    default: Some(36.into()),
                    unit: String::new(),
                    description: "Number of Clarkson sectors (36 = 10 degrees each)".into(),
                },
            ],
        }
    }

    fn analyse(&self, input: &AnalysisInput) -> Result<AnalysisOutput, AnalysisError> {
        let mi = input.mu.as_ref().ok_or_else(|| {
            AnalysisError::new("the test carries no beam data or beams (a mu-check test needs `mu:` in the campaign)")
        })?;
        let geometry = input
            .params
            .get("geometry")
            .and_then(|v| v.as_str())
            .unwrap_or("simple");
        let scatter = input
            .params
            .get("scatter")
            .and_then(|v| v.as_str())
            .unwrap_or("auto");
        let sectors = input
            .params
            .get("sectors")
            .and_then(|v| v.as_u64())
            .unwrap_or(36) as usize;
        let (levels, levels_source) = match input.criteria.dose_difference_percent {
            Some(l) => (l, format!("criteria set `{}`", input.criteria.name)),
            None => (
                default_levels(geometry),
                format!("default for {geometry} geometry after AAPM TG-114"),
            ),
        };
        let data = beam_data(&mi.beam_data).map_err(|e| {
            AnalysisError::new(format!("beam data {}: {}", mi.beam_data.source, e.0))
        })?;
        if mi.beams.is_empty() {
            return Err(AnalysisError::new("the test has no beams to check"));
        }
        let mut checks = Vec::new();
        for b in &mi.beams {
            checks.push(
                check_beam(&data, &mi.beam_data, b, scatter, sectors)
                    .map_err(AnalysisError::new)?,
            );
        }
        let limits = |rule: &str| Limits {
            rule: rule.into(),
            tolerance: levels.tolerance,
            action: levels.action,
        };
        let mut metrics = Vec::new();
        for c in &checks {
            let status =
                Status::from_deviation(c.difference_percent, levels.tolerance, levels.action);
            metrics.push(Metric {
                id: format!("difference-{}", c.id.to_ascii_lowercase().replace(' ', "-")),
                label: format!("Dose difference, beam {}", c.id),
                value: c.difference_percent,
                unit: "%".into(),
                limits: Some(limits("|value| <= limit")),
                status: Some(status),
                // The independent dose plays the reference, the planning system's the
                // evaluated value.
                measured: Some(c.independent_gy),
                calculated: Some(c.tps_gy),
                compared_unit: "Gy".into(),
            });
        }
        if checks.len() > 1 {
            let tps: f64 = mi.beams.iter().filter_map(|b| b.tps_dose_gy).sum();
            let ind: f64 = checks.iter().map(|c| c.independent_gy).sum();
            let d = 100.0 * (ind - tps) / tps;
            metrics.push(Metric {
                id: "difference-total".into(),
                label: "Dose difference, all beams together".into(),
                value: d,
                unit: "%".into(),
                limits: Some(limits("|value| <= limit")),
                status: Some(Status::from_deviation(d, levels.tolerance, levels.action)),
                measured: Some(ind),
                calculated: Some(tps),
                compared_unit: "Gy".into(),
            });
        }
        let mut tables = vec![Table {
            title: match &mi.plan {
                Some(p) => format!("Monitor units, plan {p}"),
                None => "Monitor units".into(),
            },
            columns: [
                "Beam",
                "Setup",
                "Jaws (cm)",
                "Depth (cm)",
                "SPD (cm)",
                "Off axis (cm)",
                "Scatter",
                "TPS MU",
                "Independent MU",
                "TPS dose (Gy)",
                "Independent dose (Gy)",
                "Difference (%)",
            ]
            .map(String::from)
            .to_vec(),
            rows: mi
                .beams
                .iter()
                .zip(&checks)
                .map(|(b, c)| {
                    let [x1, x2, y1, y2] = b.jaws_cm;
                    vec![
                        b.id.clone(),
                        match b.setup {
                            MuSetup::Ssd => format!("SSD {}", f2(b.ssd_cm)),
                            MuSetup::Sad => "isocentric".into(),
                        },
                        format!("{} x {}", f2(x2 - x1), f2(y2 - y1)),
                        f2(b.depth_cm),
                        f2(b.spd_cm),
                        format!("{}, {}", f2(b.off_axis_cm[0]), f2(b.off_axis_cm[1])),
                        match c.scatter {
                            Scatter::Clarkson => "Clarkson".into(),
                            Scatter::EquivalentSquare => {
                                format!("eq. square {}", f2(equivalent_square(x2 - x1, y2 - y1)))
                            }
                        },
                        beamproof_api::fixed(b.mu, 1),
                        beamproof_api::fixed(c.independent_mu, 1),
                        beamproof_api::fixed(b.tps_dose_gy.unwrap_or(f64::NAN), 4),
                        beamproof_api::fixed(c.independent_gy, 4),
                        f2(c.difference_percent),
                    ]
                })
                .collect(),
        }];
        for (b, c) in mi.beams.iter().zip(&checks) {
            let mut rows: Vec<Vec<String>> = c
                .result
                .factors
                .iter()
                .map(|f| {
                    vec![
                        f.symbol.to_string(),
                        f.description.clone(),
                        beamproof_api::fixed(f.value, 4),
                    ]
                })
                .collect();
            rows.push(vec![
                "D/MU".into(),
                "dose per MU at the point, product of the factors (cGy/MU)".into(),
                beamproof_api::fixed(c.result.dose_per_mu_cgy, 4),
            ]);
            rows.push(vec![
                "MU".into(),
                "D / (D/MU): independent MU for the TPS dose".into(),
                beamproof_api::fixed(c.independent_mu, 2),
            ]);
            tables.push(Table {
                title: format!("Calculation, beam {} ({})", b.id, b.source),
                columns: vec!["Symbol".into(), "Factor".into(), "Value".into()],
                rows,
            });
        }
        let clarkson = checks.iter().any(|c| c.scatter == Scatter::Clarkson);
        let mut notes = vec![
            format!(
                "Difference = 100 (independent - TPS) / TPS dose at the point for the TPS MU; levels: {levels_source} (tolerance {} %, action {} %).",
                f2(levels.tolerance),
                f2(levels.action)
            ),
            format!(
                "Beam data {}: D0' {} cGy/MU at depth {} cm, SSD {} cm, field {} cm; water-equivalent flat phantom, no heterogeneity correction; PDD and TPR interpolated log-linearly in depth, linearly in field size; no extrapolation beyond the tables.",
                mi.beam_data.source,
                beamproof_api::fixed(mi.beam_data.dose_per_mu_cgy, 4),
                f2(mi.beam_data.d0_cm),
                f2(mi.beam_data.ssd0_cm),
                f2(mi.beam_data.field0_cm)
            ),
        ];
        if clarkson {
            notes.push(format!(
                "Clarkson: {sectors} sectors, scatter-phantom ratios from TPR and Sp with equal-area circles, zero-field values extrapolated from the two smallest fields; Sc at the jaw field; TPR formalism with the inverse square to the point."
            ));
        }
        Ok(AnalysisOutput {
            metrics,
            tables,
            figures: Vec::new(),
            notes,
            references: references(clarkson),
            status: None,
            derived_measured: None,
            calibration: None,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use beamproof_api::mu::{Leaves, Table1, Table2, WedgeFactor};
    use beamproof_api::{CriteriaSet, TestInfo};
    use std::collections::BTreeMap;

    /// Beam data holding the factors of the TG-71 SAD hand calculation (formalism tests) at
    /// 12 x 12 cm and 10 cm, other entries invented around them (test data).
    fn raw() -> mu::BeamData {
        mu::BeamData {
            source: "beam-data/test.yaml".into(),
            machine: "m".into(),
            beam: "6x".into(),
            energy_mv: 6.0,
            fff: false,
            sad_cm: 100.0,
            ssd0_cm: 100.0,
            pdd_ssd_cm: None,
            d0_cm: 1.5,
            field0_cm: 10.0,
            dose_per_mu_cgy: 1.0,
            pdd: Some(Table2 {
                depth_cm: vec![1.5, 10.0, 20.0],
                columns: vec![2.0, 5.0, 12.0, 20.0, 40.0],
                values: vec![
                    100.0, 100.0, 100.0, 100.0, 100.0, 58.0, 62.0, 67.5, 69.0, 70.5, 30.0, 34.0,
                    39.5, 41.0, 43.0,
                ],
            }),
            tpr: Some(Table2 {
                depth_cm: vec![1.5, 10.0, 20.0],
                columns: vec![2.0, 5.0, 12.0, 20.0, 40.0],
                values: vec![
                    1.0, 1.0, 1.0, 1.0, 1.0, 0.730, 0.760, 0.800, 0.815, 0.830, 0.480, 0.520,
                    0.560, 0.580, 0.600,
                ],
            }),
            sc: Table1 {
                axis: vec![2.0, 5.0, 12.0, 20.0, 40.0],
                values: vec![0.93, 0.970, 1.010, 1.030, 1.050],
            },
            sp: Table1 {
                axis: vec![2.0, 5.0, 12.0, 20.0, 40.0],
                values: vec![0.95, 0.980, 1.008, 1.020, 1.035],
            },
            oar: Some(Table2 {
                depth_cm: vec![1.5, 10.0, 20.0],
                columns: vec![0.0, 5.0, 10.0],
                values: vec![1.0, 1.01, 1.02, 1.0, 1.02, 1.03, 1.0, 1.02, 1.03],
            }),
            tray_factor: None,
            wedges: vec![WedgeFactor {
                id: "W30".into(),
                factor: 0.6,
            }],
        }
    }

    fn beam(id: &str, jaws: [f64; 4], mu: f64, tps: f64) -> MuBeam {
        MuBeam {
            id: id.into(),
            source: "campaign".into(),
            setup: MuSetup::Sad,
            ssd_cm: 90.0,
            depth_cm: 10.0,
            spd_cm: 100.0,
            off_axis_cm: [0.0, 0.0],
            jaws_cm: jaws,
            leaves: None,
            wedge: None,
            tray: false,
            mu,
            tps_dose_gy: Some(tps),
            tps_dose_source: "campaign".into(),
        }
    }

    fn input(beams: Vec<MuBeam>, scatter: &str) -> AnalysisInput {
        let mut params = BTreeMap::new();
        params.insert("scatter".into(), scatter.into());
        params.insert("sectors".into(), 72.into());
        AnalysisInput {
            test: TestInfo {
                site: "s".into(),
                id: "mu".into(),
                name: "mu".into(),
                kind: TestKind::MuCheck,
                machine: "m".into(),
                beam: None,
            },
            params,
            criteria: CriteriaSet {
                name: "c".into(),
                dose_difference_percent: None,
                gamma: Vec::new(),
                metrics: BTreeMap::new(),
            },
            measured: None,
            calculated: None,
            mu: Some(mu::MuInput {
                beam_data: raw(),
                beams,
                plan: None,
            }),
            film: None,
        }
    }

    #[test]
    fn isocentric_beam_by_hand() {
        // Hand calculation (TG-71 SAD form, Gibbons et al 2014; the factors of the formalism's
        // SAD hand calculation): D/MU = 1.000 x Sc 1.010
        // x Sp 1.008 x TPR 0.800 x ISF (101.5/100)^2 = 0.839081 cGy/MU. 240 MU deliver
        // 2.013795 Gy against a TPS dose of 2.000 Gy: +0.690 %, within the simple-geometry
        // tolerance of 1 % (default levels). Independent MU for 2 Gy: 238.36.
        let out = MuCheck
            .analyse(&input(
                vec![beam("1 AP", [-6.0, 6.0, -6.0, 6.0], 240.0, 2.0)],
                "auto",
            ))
            .expect("analysed");
        let m = &out.metrics[0];
        assert!((m.value - 0.689741).abs() < 1e-5, "{}", m.value);
        assert_eq!(m.status, Some(Status::Pass));
        let row = &out.tables[0].rows[0];
        assert_eq!(row[8], "238.4");
        assert_eq!(row[10], "2.0138");
        assert_eq!(out.tables[1].rows.last().expect("row")[2], "238.36");
    }

    #[test]
    fn ssd_beam_and_wedge_by_hand() {
        // SSD 100 cm, 12 x 12, depth 10 (TG-71 SSD form): PDD(10, 12) 67.5 % at the surface field
        // 12 cm; Sp at the field at d0 12 x 101.5/100 = 12.18 cm: 1.008 + 0.18/8 x 0.012 =
        // 1.00827; ISF ((100 + 1.5)/(100 + 1.5))^2 = 1; WF 0.6 (beam data).
        // D/MU = 1.010 x 1.00827 x 0.675 x 0.6 = 0.412433 cGy/MU. 485 MU -> 2.000299 Gy;
        // TPS 2.050 Gy -> -2.4244 %: beyond the 2 % action level of simple geometry (fail).
        let mut b = beam("2 wedged", [-6.0, 6.0, -6.0, 6.0], 485.0, 2.05);
        b.setup = MuSetup::Ssd;
        b.ssd_cm = 100.0;
        b.spd_cm = 110.0;
        b.wedge = Some("W30".into());
        let out = MuCheck.analyse(&input(vec![b], "auto")).expect("analysed");
        let sp = 1.008 + 0.18 / 8.0 * 0.012;
        let dpm = 1.010 * sp * 0.675 * 0.6;
        let expected = 100.0 * (485.0 * dpm / 100.0 - 2.05) / 2.05;
        assert!((out.metrics[0].value - expected).abs() < 1e-9);
        assert!((expected + 2.4244).abs() < 1e-4, "{expected}");
        assert_eq!(out.metrics[0].status, Some(Status::Fail));
    }

    #[test]
    fn off_axis_rectangle_uses_the_equivalent_square_and_the_off_axis_ratio() {
        // 8 x 24 cm (equivalent square 12 cm, Sterling et al 1964), point 5 cm off axis at
        // 10 cm: the M1 factors times OAR(10, 5) = 1.02 (table): D/MU = 0.839081 x 1.02 =
        // 0.855863; 234 MU -> 2.002720 Gy against 2.000 Gy: +0.136 %.
        let mut b = beam("3 lateral", [-4.0, 4.0, -12.0, 12.0], 234.0, 2.0);
        b.off_axis_cm = [3.0, 4.0];
        let out = MuCheck.analyse(&input(vec![b], "auto")).expect("analysed");
        let dpm = 1.010 * 1.008 * 0.800 * 1.030225 * 1.02;
        let expected = 100.0 * (234.0 * dpm / 100.0 - 2.0) / 2.0;
        assert!(
            (out.metrics[0].value - expected).abs() < 1e-9,
            "{}",
            out.metrics[0].value
        );
    }

    #[test]
    fn an_l_shaped_mlc_field_by_clarkson_lies_between_its_parts() {
        // 12 x 12 jaws, leaves closing the upper-right 6 x 6 quadrant, point at the centre of
        // the lower-left quadrant: Clarkson's scatter must lie below the open 12 x 12 field's
        // and above that of the 6 x 6 square around the point (hand reasoning: the L holds
        // the square and is held by the open field; scatter grows with the open area).
        let mut b = beam("4 L", [-6.0, 6.0, -6.0, 6.0], 240.0, 2.0);
        b.off_axis_cm = [-3.0, -3.0];
        b.leaves = Some(Leaves {
            boundaries: (0..=12).map(|i| -6.0 + i as f64).collect(),
            bank_a: vec![-6.0; 12],
            bank_b: (0..12).map(|i| if i >= 6 { 0.0 } else { 6.0 }).collect(),
        });
        let data = beam_data(&raw()).expect("valid");
        let l = check_beam(&data, &raw(), &b, "auto", 72).expect("checked");
        assert_eq!(l.scatter, Scatter::Clarkson);
        let mut open = b.clone();
        open.leaves = None;
        let full = check_beam(&data, &raw(), &open, "clarkson", 72).expect("checked");
        assert!(l.result.dose_per_mu_cgy < full.result.dose_per_mu_cgy);
        // The 6 x 6 square centred on the point lies inside the L.
        let mut small = open.clone();
        small.jaws_cm = [-6.0, 0.0, -6.0, 0.0];
        let small = check_beam(&data, &raw(), &small, "clarkson", 72).expect("checked");
        assert!(
            l.result.factors[6].value > small.result.factors[6].value,
            "[Sp TPR] of the L above the 6 x 6 square's"
        );
        let out = MuCheck.analyse(&input(vec![b], "auto")).expect("analysed");
        assert!(out.references.iter().any(|r| r.key == "Clarkson 1941"));
        assert!(out.tables[1].rows.iter().any(|r| r[0] == "[Sp TPR]"));
    }

    #[test]
    fn missing_data_name_the_beam() {
        let mut b = beam("5 tray", [-6.0, 6.0, -6.0, 6.0], 240.0, 2.0);
        b.tray = true;
        assert_eq!(
            MuCheck.analyse(&input(vec![b], "auto")).map(|_| ()),
            Err(AnalysisError::new(
                "beam 5 tray: the beam uses a tray but the beam data beam-data/test.yaml hold no tray factor"
            ))
        );
        let b = beam("6 big", [-25.0, 25.0, -25.0, 25.0], 240.0, 2.0);
        let e = MuCheck
            .analyse(&input(vec![b], "auto"))
            .expect_err("outside");
        assert!(
            e.to_string()
                .starts_with("beam 6 big: Sc field size 50 cm is outside the table (2 to 40 cm)"),
            "{e}"
        );
    }
}
