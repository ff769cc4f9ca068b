//! The `gamma` analysis: gamma index (Low et al 1998) between a reference and an evaluated
//! dose distribution, for curves, planes, volumes and point sets against grids, for every gamma
//! criterion of the test's criteria set in one search.
//!
//! Conventions (each stated in the result's notes):
//! - the reference is the measured distribution unless `reference: calculated`;
//! - global dose criteria are a percentage of `normalisation-dose-gy` when the criterion gives
//!   one, otherwise of the reference maximum; local criteria of each reference point's dose;
//! - reference points below the threshold (percent of the normalisation dose) are not
//!   evaluated, nor are points outside the evaluated grid (only the overlap is analysed);
//! - a point passes when gamma <= 1; pass rates are judged against the criterion's tolerance
//!   and action pass rates (AAPM TG-218, Miften et al 2018, defaults 95 % and 90 %).

// The numeric kernels index several parallel fixed-size arrays by axis; index loops read
// closer to the formulas than zipped iterators there.
#![allow(clippy::needless_range_loop)]

pub mod field;
pub mod search;
pub mod star;
pub mod stats;

use beamproof_api::{
    Analysis, AnalysisError, AnalysisInput, AnalysisOutput, Dataset, DatasetData, DoseUnit, Figure,
    GammaCriterion, Limits, Metric, Normalisation, ParamSpec, ParamType, PluginManifest, Reference,
    Status, Table, TestKind,
};
use rayon::prelude::*;

use field::Field;
use search::{Criterion, Method, Offsets, Plan, Scratch, gamma_at, gamma_sampled};
use star::NodeTable;

/// Plugin id used in campaign files.
pub const NAME: &str = "gamma";
/// Most criteria one search evaluates together.
pub const MAX_CRITERIA: usize = 16;

/// Positions of the reference points (IEC mm): a list, or the nodes of a grid enumerated on
/// the fly (x fastest), so a large reference grid needs no point list in memory.
#[derive(Debug, Clone, PartialEq)]
pub enum Positions {
    List(Vec<[f64; 3]>),
    Grid {
        x: Vec<f64>,
        y: Vec<f64>,
        z: Vec<f64>,
    },
}

impl Positions {
    /// Number of points.
    pub fn len(&self) -> usize {
        match self {
            Positions::List(l) => l.len(),
            Positions::Grid { x, y, z } => x.len() * y.len() * z.len(),
        }
    }

    /// True when there is no point.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// Position of point `i`.
    #[inline]
    pub fn at(&self, i: usize) -> [f64; 3] {
        match self {
            Positions::List(l) => l[i],
            Positions::Grid { x, y, z } => {
                let (nx, ny) = (x.len(), y.len());
                [x[i % nx], y[(i / nx) % ny], z[i / (nx * ny)]]
            }
        }
    }
}

/// Criteria that differ only by a common scale of dose and distance (3 %/3 mm, 2 %/2 mm,
/// 1 %/1 mm, ...) share their minimiser: scaling both criteria by lambda divides every
/// generalised distance by lambda, so the search runs once per group and each member's gamma
/// is the searched one times dt_searched / dt_member. Members must also share the
/// normalisation, its dose and the threshold.
struct Groups {
    /// For each criterion: the criterion searched for it (itself when it leads its group).
    searched: Vec<usize>,
    /// The criteria that are searched, in order.
    leaders: Vec<usize>,
}

fn groups(crits: &[Criterion], thresholds: &[f64]) -> Groups {
    let same = |a: &Criterion, b: &Criterion, ta: f64, tb: f64| {
        let ratio = |c: &Criterion| c.dose_fraction / c.dta_mm;
        a.local == b.local
            && (a.local || a.norm_dose == b.norm_dose)
            && ta == tb
            && (ratio(a) - ratio(b)).abs() <= 1e-12 * ratio(a).abs()
    };
    let mut searched = vec![usize::MAX; crits.len()];
    let mut leaders = Vec::new();
    for c in 0..crits.len() {
        if searched[c] != usize::MAX {
            continue;
        }
        let members: Vec<usize> = (c..crits.len())
            .filter(|&m| {
                searched[m] == usize::MAX
                    && same(&crits[c], &crits[m], thresholds[c], thresholds[m])
            })
            .collect();
        // The member with the largest search radius is searched: its value is exact for the
        // most points.
        let lead = members
            .iter()
            .copied()
            .max_by(|&p, &q| {
                crits[p]
                    .max_search_mm
                    .total_cmp(&crits[q].max_search_mm)
                    .then(q.cmp(&p))
            })
            .unwrap_or(c);
        for m in members {
            searched[m] = lead;
        }
        leaders.push(lead);
    }
    Groups { searched, leaders }
}

/// Which criteria need their gamma values rather than only each point's pass or fail.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Values {
    /// Every criterion's gamma values are minima (every statistic can be taken).
    Every,
    /// The first criterion's values, and those of criteria searched with it (see `Groups`),
    /// are minima; for the others the search only settles each point's pass or fail, and
    /// their values lie on the same side of 1 as the minima: their pass rates are exact,
    /// their other statistics are not computed.
    First,
}

/// For each criterion, the pass/fail marks its search stops at (see
/// `star::PointCriteria::marks`); empty for a criterion searched to its minimum. Only a group
/// leader not searched with the first criterion gets marks, under `Values::First` with the
/// exact method (the only one that stops early), and only when each member's search radius
/// reaches its DTA (so that a pass lies within it).
fn pass_marks(crits: &[Criterion], g: &Groups, values: Values, method: Method) -> Vec<Vec<f64>> {
    let mut marks = vec![Vec::new(); crits.len()];
    if values == Values::Every || method != Method::Exact || crits.is_empty() {
        return marks;
    }
    let first = g.searched[0];
    for &lead in &g.leaders {
        let members: Vec<usize> = (0..crits.len())
            .filter(|&m| g.searched[m] == lead)
            .collect();
        if lead == first
            || members
                .iter()
                .any(|&m| crits[m].max_search_mm < crits[m].dta_mm)
        {
            continue;
        }
        // Member m passes when gamma_lead * dta_lead / dta_m <= 1 + LIMIT_SLACK. A mark a
        // hair below that (relative 1e-12) leaves a value that rounds onto it unsettled, so
        // that the walk goes on past it (see `star::settle`).
        let mut m: Vec<f64> = members
            .iter()
            .map(|&m| {
                let t = (1.0 + beamproof_api::LIMIT_SLACK) * crits[m].dta_mm / crits[lead].dta_mm;
                t * t * (1.0 - 1e-12)
            })
            .collect();
        m.sort_by(|a, b| b.total_cmp(a));
        m.dedup();
        marks[lead] = m;
    }
    marks
}

/// For each criterion, whether `compute` returns minima for it (see `Values`).
pub fn minima(
    crits: &[Criterion],
    thresholds: &[f64],
    method: Method,
    values: Values,
) -> Vec<bool> {
    let g = groups(crits, thresholds);
    let marks = pass_marks(crits, &g, values, method);
    (0..crits.len())
        .map(|c| marks[g.searched[c]].is_empty())
        .collect()
}

/// Gamma of every reference point for every criterion, row-major (`gammas[i * n + c]`).
/// NaN where a point is not evaluated: outside the evaluated grid, below `thresholds[c]`, or
/// with zero dose under a local criterion. Runs in parallel over points. Proportional criteria
/// are searched once (see `Groups`); a member whose minimiser lies beyond its own search
/// radius is searched on its own, so the values equal separate searches. With
/// `Values::First`, criteria not searched with the first stop at pass or fail (see `Values`;
/// `minima` tells which).
pub fn compute(
    field: &Field,
    points: &Positions,
    doses: &[f64],
    crits: &[Criterion],
    thresholds: &[f64],
    method: Method,
    values: Values,
) -> Vec<f64> {
    let n = crits.len();
    let mut out = vec![f64::NAN; points.len() * n];
    let offsets = match method {
        Method::Sampled { step_mm } => Offsets::new(
            field.k,
            step_mm,
            crits.iter().map(|c| c.max_search_mm).fold(0.0, f64::max),
        ),
        _ => Offsets::default(),
    };
    let table = match method {
        Method::Exact => NodeTable::for_search(
            field,
            crits.iter().map(|c| c.max_search_mm).fold(0.0, f64::max),
        ),
        _ => None,
    };
    let g = groups(crits, thresholds);
    let marks = pass_marks(crits, &g, values, method);
    let search = |list: &[Criterion],
                  list_marks: &[&[f64]],
                  i: usize,
                  scratch: &mut Scratch,
                  buf: &mut [f64]| match method {
        Method::Sampled { .. } => gamma_sampled(field, list, &offsets, points.at(i), doses[i], buf),
        _ => gamma_at(
            field,
            list,
            Plan {
                method,
                table: table.as_ref(),
                marks: list_marks,
            },
            points.at(i),
            doses[i],
            scratch,
            buf,
        ),
    };
    out.par_chunks_mut(n.max(1)).enumerate().for_each_init(
        || {
            (
                Scratch::default(),
                Vec::<Criterion>::with_capacity(n),
                Vec::<usize>::with_capacity(n),
                Vec::<&[f64]>::with_capacity(n),
                [0.0; MAX_CRITERIA],
            )
        },
        |(scratch, active, which, active_marks, buf), (i, row)| {
            active.clear();
            which.clear();
            active_marks.clear();
            for &c in &g.leaders {
                if doses[i] >= thresholds[c] && crits[c].delta_dose(doses[i]) > 0.0 {
                    active.push(crits[c]);
                    which.push(c);
                    active_marks.push(&marks[c]);
                }
            }
            if active.is_empty() {
                return;
            }
            if !search(active, active_marks, i, scratch, &mut buf[..active.len()]) {
                return;
            }
            for (j, &lead) in which.iter().enumerate() {
                row[lead] = buf[j];
            }
            for c in 0..n {
                let lead = g.searched[c];
                if lead == c || row[lead].is_nan() {
                    continue;
                }
                let (l, m) = (&crits[lead], &crits[c]);
                // The minimiser lies at distance gamma_lead * dta_lead; within the member's
                // radius the member's value is the scaled one, else search it alone. A
                // member of a pass/fail group (whose radius reaches its DTA) fails there
                // either way: its scaled value exceeds 1, as its own search's would.
                if row[lead] * l.dta_mm <= m.max_search_mm * (1.0 + 1e-12)
                    || !marks[lead].is_empty()
                {
                    row[c] = row[lead] * l.dta_mm / m.dta_mm;
                } else {
                    let mut one = [0.0];
                    if search(&[*m], &[&[]], i, scratch, &mut one) {
                        row[c] = one[0];
                    }
                }
            }
        },
    );
    out
}

/// The gamma analysis plugin.
#[derive(Debug, Default, Clone, Copy)]
pub struct Gamma;

fn references(method: Method) -> Vec<Reference> {
    let mut r = vec![
        Reference { key: "Low 1998".into(), citation: "Low DA, Harms WB, Mutic S, Purdy JA. A technique for the quantitative evaluation of dose distributions. Med Phys. 1998;25(5):656-661.".into() },
        Reference { key: "TG-218".into(), citation: "Miften M, Olch A, Mihailidis D, et al. Tolerance limits and methodologies for IMRT measurement-based verification QA: recommendations of AAPM Task Group No. 218. Med Phys. 2018;45(4):e53-e83.".into() },
        Reference { key: "Wendling 2007".into(), citation: "Wendling M, Zijp LJ, McDermott LN, et al. A fast algorithm for gamma evaluation in 3D. Med Phys. 2007;34(5):1647-1654.".into() },
    ];
    match method {
        Method::Exact => r.push(Reference { key: "Ju 2008".into(), citation: "Ju T, Simpson T, Deasy JO, Low DA. Geometric interpretation of the gamma dose distribution comparison technique: interpolation-free calculation. Med Phys. 2008;35(3):879-887.".into() }),
        Method::Nodes => r.push(Reference { key: "Low 2003".into(), citation: "Low DA, Dempsey JF. Evaluation of the gamma dose distribution comparison method. Med Phys. 2003;30(9):2455-2464.".into() }),
        Method::Sampled { .. } => {}
    }
    r
}

impl Analysis for Gamma {
    fn manifest(&self) -> PluginManifest {
        PluginManifest {
            name: NAME.into(),
            version: env!("CARGO_PKG_VERSION").into(),
            description: "Gamma index for every gamma criterion of the criteria set, with exact (interpolation-free) simplex search".into(),
            kinds: vec![TestKind::DepthDose, TestKind::Profile, TestKind::Plane, TestKind::Volume, TestKind::PointSet],
            // Judged against the criteria set's gamma criteria or dose-difference levels,
            // never against `metrics:` levels.
            judged_metrics: Some(Vec::new()),
            needs: vec![beamproof_api::CriteriaNeed::Gamma],
            params: vec![
                ParamSpec {
                    name: "reference".into(),
                    kind: ParamType::Choice { choices: vec!["measured".into(), "calculated".into()] },
                    default: Some("measured".into()),
                    unit: String::new(),
                    description: "Which distribution is the reference (gamma is not symmetric); the other is searched".into(),
                },
                ParamSpec {
                    name: "method".into(),
                    kind: ParamType::Choice { choices: vec!["exact".into(), "sampled".into(), "nodes".into()] },
                    default: Some("exact".into()),
                    unit: String::new(),
                    description: "exact: distance to the linear interpolant (Ju et al 2008); sampled: multilinear interpolation sampled every sample-step-dta x DTA (Wendling et al 2007); nodes: grid nodes only, no interpolation".into(),
                },
                ParamSpec {
                    name: "normalisation-point".into(),
                    kind: ParamType::PointRef,
                    default: None,
                    unit: String::new(),
                    description: "Global normalisation at a point: `x,y,z` in mm, or the label of a reference point; with `relative`, both distributions are normalised to their dose there".into(),
                },
                ParamSpec {
                    name: "sample-step-dta".into(),
                    kind: ParamType::Number { min: Some(0.01), max: Some(1.0) },
                    default: Some(0.1.into()),
                    unit: "x DTA".into(),
                    description: "Sampling step of the sampled method, as a fraction of the smallest DTA of the criteria".into(),
                },
                ParamSpec {
                    name: "max-search-mm".into(),
                    kind: ParamType::Number { min: Some(0.1), max: Some(100.0) },
                    default: None,
                    unit: "mm".into(),
                    description: "Largest search distance (default 3 x DTA of each criterion); larger gamma values are upper bounds".into(),
                },
                ParamSpec {
                    name: "statistics".into(),
                    kind: ParamType::Choice { choices: vec!["first-criterion".into(), "every-criterion".into()] },
                    default: Some("first-criterion".into()),
                    unit: String::new(),
                    description: "With the exact method, first-criterion: every statistic for the first criterion (and criteria proportional to it), exact pass rates for the others, whose search stops once each point's pass or fail is certain; every-criterion: every statistic for every criterion (each search runs to its minimum; slower)".into(),
                },
                ParamSpec {
                    name: "relative".into(),
                    kind: ParamType::Bool,
                    default: Some(false.into()),
                    unit: String::new(),
                    description: "Normalise each distribution to its own maximum (100 %) before comparing, instead of absolute dose".into(),
                },
            ],
        }
    }

    fn analyse(&self, input: &AnalysisInput) -> Result<AnalysisOutput, AnalysisError> {
        analyse_with_points(input).map(|(out, _)| out)
    }
}

/// Gamma of every reference point for the first criterion (NaN where not evaluated).
#[derive(Debug, Clone, PartialEq)]
pub struct PointGammas {
    pub points: Positions,
    pub reference_dose: Vec<f64>,
    pub gamma: Vec<f64>,
}

/// The analysis, also returning the per-point gamma values (for maps written to files).
pub fn analyse_with_points(
    input: &AnalysisInput,
) -> Result<(AnalysisOutput, PointGammas), AnalysisError> {
    let spec = &input.criteria.gamma;
    if spec.is_empty() {
        return Err(AnalysisError::new(format!(
            "criteria set `{}` has no `gamma` criteria, which the gamma analysis needs",
            input.criteria.name
        )));
    }
    if spec.len() > MAX_CRITERIA {
        return Err(AnalysisError::new(format!(
            "at most {MAX_CRITERIA} gamma criteria per set, `{}` has {}",
            input.criteria.name,
            spec.len()
        )));
    }
    let measured = input
        .measured
        .as_ref()
        .ok_or_else(|| AnalysisError::new("gamma needs `measured` data"))?;
    let calculated = input
        .calculated
        .as_ref()
        .ok_or_else(|| AnalysisError::new("gamma needs `calculated` data"))?;
    let calculated_is_reference = input.text("reference")? == "calculated";
    let (reference, evaluated) = if calculated_is_reference {
        (calculated, measured)
    } else {
        (measured, calculated)
    };
    let method = match input.text("method")? {
        "nodes" => Method::Nodes,
        "sampled" => {
            let min_dta = spec.iter().map(|g| g.dta_mm).fold(f64::INFINITY, f64::min);
            Method::Sampled {
                step_mm: input.number("sample-step-dta")? * min_dta,
            }
        }
        _ => Method::Exact,
    };
    let relative = input
        .params
        .get("relative")
        .and_then(serde_json::Value::as_bool)
        .unwrap_or(false);
    let (points, mut ref_dose) = reference_points(reference);
    let mut field = evaluated_field(evaluated, reference)?;
    check_doses(&reference.source, &ref_dose)?;
    check_doses(&evaluated.source, &field.dose)?;
    // The normalisation point, when given: the dose of each distribution there.
    let norm_point = match input
        .params
        .get("normalisation-point")
        .and_then(serde_json::Value::as_str)
    {
        Some(spec) => Some(normalisation_point(
            spec, reference, &points, &ref_dose, &field,
        )?),
        None => None,
    };
    if relative {
        let (ref_norm, eval_norm) = match norm_point {
            Some(p) => (p.reference, p.evaluated),
            None => (
                ref_dose.iter().copied().fold(0.0, f64::max),
                field.dose.iter().copied().fold(0.0, f64::max),
            ),
        };
        if ref_norm <= 0.0 || eval_norm <= 0.0 {
            return Err(AnalysisError::new(
                "a distribution has no positive dose to normalise to",
            ));
        }
        ref_dose.iter_mut().for_each(|d| *d *= 100.0 / ref_norm);
        field.dose.iter_mut().for_each(|d| *d *= 100.0 / eval_norm);
    }
    let unit = if relative {
        DoseUnit::Percent
    } else {
        reference.unit
    };
    let ref_max = ref_dose.iter().copied().fold(0.0, f64::max);
    let mut crits = Vec::new();
    let mut thresholds = Vec::new();
    for g in spec {
        let norm = match (g.normalisation_dose_gy, norm_point) {
            (Some(_), Some(_)) => {
                return Err(AnalysisError::new(
                    "both `normalisation-dose-gy` and `normalisation-point` are given; keep one",
                ));
            }
            (Some(_), None) if unit != DoseUnit::Gy => {
                return Err(AnalysisError::new(
                    "`normalisation-dose-gy` needs absolute dose in Gy; remove it or set `relative: false`",
                ));
            }
            (Some(d), None) => d,
            (None, Some(_)) if relative => 100.0,
            (None, Some(p)) => p.reference,
            (None, None) => ref_max,
        };
        if norm <= 0.0 {
            return Err(AnalysisError::new(
                "the normalisation dose is zero: the reference holds no positive dose",
            ));
        }
        let max_search = input.number_opt("max-search-mm").unwrap_or(3.0 * g.dta_mm);
        crits.push(Criterion {
            dose_fraction: g.dose_percent / 100.0,
            dta_mm: g.dta_mm,
            local: g.normalisation == Normalisation::Local,
            norm_dose: norm,
            max_search_mm: max_search,
        });
        thresholds.push(g.threshold_percent / 100.0 * norm);
    }
    let n_outside = (0..points.len())
        .filter(|&i| field.local(points.at(i)).is_none())
        .count();
    if n_outside == points.len() {
        return Err(AnalysisError::new(format!(
            "no overlap: no reference point of `{}` lies inside the evaluated grid of `{}`",
            reference.source, evaluated.source
        )));
    }
    if let Method::Sampled { step_mm } = method {
        let radius = crits.iter().map(|c| c.max_search_mm).fold(0.0, f64::max);
        let per_axis = 2.0 * (radius / step_mm).floor() + 1.0;
        let offsets = per_axis.powi(field.k as i32);
        if offsets > search::MAX_SAMPLED_OFFSETS as f64 {
            let least = 2.0 * radius
                / ((search::MAX_SAMPLED_OFFSETS as f64).powf(1.0 / field.k as f64) - 1.0);
            let min_dta = crits.iter().map(|c| c.dta_mm).fold(f64::INFINITY, f64::min);
            return Err(AnalysisError::new(format!(
                "the sampled search would sample {offsets:.0} offsets around every point (a {step_mm} mm step over a {radius} mm radius in {}D), more than the {} allowed; raise `sample-step-dta` to at least {:.3}, or use `method: exact`, which has no sampling error",
                field.k,
                search::MAX_SAMPLED_OFFSETS,
                (least / min_dta * 1000.0).ceil() / 1000.0
            )));
        }
    }
    let values = if input
        .params
        .get("statistics")
        .and_then(serde_json::Value::as_str)
        == Some("every-criterion")
    {
        Values::Every
    } else {
        Values::First
    };
    let gammas = compute(
        &field,
        &points,
        &ref_dose,
        &crits,
        &thresholds,
        method,
        values,
    );
    let out = build_output(&BuildInput {
        spec,
        crits: &crits,
        minima: &minima(&crits, &thresholds, method, values),
        gammas: &gammas,
        points: &points,
        ref_dose: &ref_dose,
        field: &field,
        method,
        n_outside,
        unit,
        calculated_is_reference,
    });
    let n = crits.len();
    let gamma = gammas.iter().step_by(n).copied().collect();
    Ok((
        out,
        PointGammas {
            points,
            reference_dose: ref_dose,
            gamma,
        },
    ))
}

/// Doses of both distributions at the normalisation point.
#[derive(Debug, Clone, Copy)]
struct NormPoint {
    reference: f64,
    evaluated: f64,
}

/// Find the normalisation point: a label of the reference point set, or `x,y,z` in mm (a
/// reference point within 0.5 mm, or the reference grid interpolated there).
fn normalisation_point(
    spec: &str,
    reference: &Dataset,
    points: &Positions,
    ref_dose: &[f64],
    field: &Field,
) -> Result<NormPoint, AnalysisError> {
    let (pos, d_ref) = match (beamproof_api::parse_xyz(spec), &reference.data) {
        (Some(pos), data) => {
            let d = match data {
                DatasetData::Grid(g) => {
                    Field::from_grid(g).and_then(|f| f.local(pos).map(|u| f.interpolate(&u)))
                }
                _ => (0..points.len())
                    .find(|&i| {
                        let p = points.at(i);
                        ((p[0] - pos[0]).powi(2)
                            + (p[1] - pos[1]).powi(2)
                            + (p[2] - pos[2]).powi(2))
                        .sqrt()
                            <= 0.5
                    })
                    .map(|i| ref_dose[i]),
            };
            (
                pos,
                d.ok_or_else(|| {
                    AnalysisError::new(format!(
                        "normalisation point {spec} lies outside the reference `{}`",
                        reference.source
                    ))
                })?,
            )
        }
        (_, DatasetData::Points(p)) => {
            let i = p.labels.iter().position(|l| l == spec).ok_or_else(|| {
                AnalysisError::new(format!(
                    "`{}` has no point labelled `{spec}` to normalise to",
                    reference.source
                ))
            })?;
            ([p.x_mm[i], p.y_mm[i], p.z_mm[i]], ref_dose[i])
        }
        _ => {
            return Err(AnalysisError::new(format!(
                "normalisation point `{spec}` must be `x,y,z` in mm, or a point label of a point set"
            )));
        }
    };
    let d_eval = field
        .local(pos)
        .map(|u| field.interpolate(&u))
        .ok_or_else(|| {
            AnalysisError::new(format!(
                "normalisation point {spec} lies outside the evaluated grid"
            ))
        })?;
    if d_ref <= 0.0 {
        return Err(AnalysisError::new(format!(
            "the reference dose at normalisation point {spec} is zero"
        )));
    }
    Ok(NormPoint {
        reference: d_ref,
        evaluated: d_eval,
    })
}

/// Reference point positions and doses.
fn reference_points(ds: &Dataset) -> (Positions, Vec<f64>) {
    match &ds.data {
        DatasetData::Points(p) => (
            Positions::List(
                (0..p.len())
                    .map(|i| [p.x_mm[i], p.y_mm[i], p.z_mm[i]])
                    .collect(),
            ),
            p.dose.clone(),
        ),
        DatasetData::Curve(c) => (
            Positions::List(c.positions_mm.iter().map(|&x| [x, 0.0, 0.0]).collect()),
            c.dose.clone(),
        ),
        DatasetData::Grid(g) => (
            Positions::Grid {
                x: g.x_mm.clone(),
                y: g.y_mm.clone(),
                z: g.z_mm.clone(),
            },
            g.dose.clone(),
        ),
    }
}

fn evaluated_field(ds: &Dataset, reference: &Dataset) -> Result<Field, AnalysisError> {
    match (&ds.data, &reference.data) {
        (DatasetData::Grid(g), DatasetData::Grid(_) | DatasetData::Points(_)) => {
            Field::from_grid(g).ok_or_else(|| {
                AnalysisError::new(format!("`{}` is a single point, not a grid", ds.source))
            })
        }
        (DatasetData::Curve(c), DatasetData::Curve(r)) if c.axis == r.axis => {
            Ok(Field::from_curve(c))
        }
        (DatasetData::Curve(c), DatasetData::Curve(r)) => Err(AnalysisError::new(format!(
            "curves along different axes: `{}` is along {:?}, `{}` along {:?}",
            ds.source, c.axis, reference.source, r.axis
        ))),
        (DatasetData::Points(_), _) => Err(AnalysisError::new(format!(
            "`{}` is a point set and cannot be searched; make the point set the reference",
            ds.source
        ))),
        _ => Err(AnalysisError::new(format!(
            "cannot compare a {} (`{}`) with a {} (`{}`); compare curves with curves, and points, planes or volumes with a grid",
            reference.shape_name(),
            reference.source,
            ds.shape_name(),
            ds.source
        ))),
    }
}

fn check_doses(source: &str, dose: &[f64]) -> Result<(), AnalysisError> {
    if let Some(i) = dose.iter().position(|d| !d.is_finite() || *d < 0.0) {
        return Err(AnalysisError::new(format!(
            "`{source}` holds an invalid dose ({}) at value {}: doses must be finite and not negative",
            dose[i],
            i + 1
        )));
    }
    Ok(())
}

struct BuildInput<'a> {
    spec: &'a [GammaCriterion],
    crits: &'a [Criterion],
    /// Per criterion, whether its gamma values are minima (else only pass/fail is exact).
    minima: &'a [bool],
    gammas: &'a [f64],
    points: &'a Positions,
    ref_dose: &'a [f64],
    field: &'a Field,
    method: Method,
    n_outside: usize,
    unit: DoseUnit,
    calculated_is_reference: bool,
}

fn label(g: &GammaCriterion) -> String {
    let n = if g.normalisation == Normalisation::Local {
        "local"
    } else {
        "global"
    };
    format!("{}%/{}mm {n}", trim(g.dose_percent), trim(g.dta_mm))
}

/// Fixed decimals, or `n/a` for an undefined value (no point evaluated).
fn num(v: f64, digits: usize) -> String {
    if v.is_finite() {
        format!("{v:.digits$}")
    } else {
        "n/a".into()
    }
}

fn trim(v: f64) -> String {
    let s = format!("{v:.2}");
    s.trim_end_matches('0').trim_end_matches('.').to_string()
}

/// Table entry of a statistic that is not computed (see `Values::First`).
const NOT_COMPUTED: &str = "—";

fn build_output(b: &BuildInput) -> AnalysisOutput {
    let n = b.crits.len();
    let column = |c: usize| b.gammas.iter().skip(c).step_by(n).copied();
    let mut metrics = Vec::new();
    let mut rows = Vec::new();
    let mut statuses = Vec::new();
    for (c, g) in b.spec.iter().enumerate() {
        let s = stats::summarise(column(c));
        let status = if s.n_evaluated == 0 {
            Status::Error
        } else {
            Status::from_floor(
                s.pass_rate_percent,
                g.tolerance_pass_percent,
                g.action_pass_percent,
            )
        };
        statuses.push(status);
        metrics.push(Metric {
            id: format!("pass-rate:{}", label(g).replace(' ', "-")),
            label: format!("Gamma pass rate {}", label(g)),
            value: s.pass_rate_percent,
            unit: "%".into(),
            limits: Some(Limits {
                rule: "value >= limit".into(),
                tolerance: g.tolerance_pass_percent,
                action: g.action_pass_percent,
            }),
            status: Some(status),
            ..Default::default()
        });
        // Statistics of values that are only upper bounds are not shown.
        let stat = |v: f64| {
            if b.minima[c] {
                num(v, 2)
            } else {
                NOT_COMPUTED.to_string()
            }
        };
        rows.push(vec![
            label(g),
            format!("{}", trim(g.threshold_percent)),
            s.n_evaluated.to_string(),
            num(s.pass_rate_percent, 1),
            stat(s.mean),
            stat(s.median),
            stat(s.p95),
            stat(s.p99),
            stat(s.max),
            status.word().to_string(),
        ]);
    }
    let primary = stats::summarise(column(0));
    for (id, lbl, v) in [
        ("gamma-mean", "Mean gamma", primary.mean),
        ("gamma-median", "Median gamma", primary.median),
        ("gamma-p95", "95th percentile gamma", primary.p95),
        ("gamma-p99", "99th percentile gamma", primary.p99),
        ("gamma-max", "Maximum gamma", primary.max),
    ] {
        metrics.push(Metric {
            id: id.into(),
            label: format!("{lbl} ({})", label(&b.spec[0])),
            value: v,
            unit: String::new(),
            limits: None,
            status: None,
            ..Default::default()
        });
    }
    metrics.push(Metric {
        id: "points-evaluated".into(),
        label: format!("Points evaluated ({})", label(&b.spec[0])),
        value: primary.n_evaluated as f64,
        unit: "points".into(),
        limits: None,
        status: None,
        ..Default::default()
    });
    let mut tables = vec![Table {
        title: "Gamma by criterion".into(),
        columns: [
            "Criterion",
            "Threshold (%)",
            "Points",
            "Pass rate (%)",
            "Mean",
            "Median",
            "P95",
            "P99",
            "Max",
            "Status",
        ]
        .map(String::from)
        .to_vec(),
        rows,
    }];
    // Worst failing points of the first criterion.
    let mut worst: Vec<usize> = (0..b.points.len())
        .filter(|&i| b.gammas[i * n] > 1.0 + beamproof_api::LIMIT_SLACK)
        .collect();
    worst.sort_by(|&p, &q| b.gammas[q * n].total_cmp(&b.gammas[p * n]).then(p.cmp(&q)));
    worst.truncate(10);
    let unit = b.unit.label();
    if !worst.is_empty() {
        tables.push(Table {
            title: format!("Worst failing points ({})", label(&b.spec[0])),
            columns: vec![
                "X (mm)".into(),
                "Y (mm)".into(),
                "Z (mm)".into(),
                format!("Reference ({unit})"),
                format!("Evaluated here ({unit})"),
                "Gamma".into(),
            ],
            rows: worst
                .iter()
                .map(|&i| {
                    let p = b.points.at(i);
                    let here = b.field.local(p).map(|u| b.field.interpolate(&u));
                    vec![
                        format!("{:.1}", p[0]),
                        format!("{:.1}", p[1]),
                        format!("{:.1}", p[2]),
                        format!("{:.4}", b.ref_dose[i]),
                        here.map_or("n/a".into(), |d| format!("{d:.4}")),
                        format!("{:.2}", b.gammas[i * n]),
                    ]
                })
                .collect(),
        });
    }
    let (edges, counts) = stats::histogram(column(0));
    let mut figures = vec![Figure::Histogram {
        title: format!("Gamma histogram ({})", label(&b.spec[0])),
        x_label: "Gamma".into(),
        edges,
        counts,
    }];
    if let Positions::Grid { x, y, z } = b.points {
        let active = [x, y, z].iter().filter(|a| a.len() > 1).count();
        match active {
            2 => figures.extend(maps(b, [x, y, z])),
            3 => figures.extend(worst_slices(b, [x, y, z])),
            _ => {}
        }
    }
    let mut notes = vec![
        format!(
            "Reference: the {} distribution; the {} distribution is searched.",
            if b.calculated_is_reference { "calculated" } else { "measured" },
            if b.calculated_is_reference { "measured" } else { "calculated" }
        ),
        match b.method {
            Method::Exact => "Search: exact distance to the linear (simplicial) interpolant of the evaluated grid (Ju et al 2008), with distance-ordered early termination (Wendling et al 2007).".to_string(),
            Method::Nodes => "Search: evaluated grid nodes only, no interpolation.".to_string(),
            Method::Sampled { step_mm } => format!(
                "Search: multilinear interpolation of the evaluated grid sampled every {} mm around each point, in order of distance (Wendling et al 2007); sampling can only overestimate gamma, most in steep gradients.",
                trim(step_mm)
            ),
        },
        format!("Global dose criteria are relative to {} {}.", trim_dose(b.crits[0].norm_dose), unit),
    ];
    if b.minima.iter().any(|&m| !m) {
        notes.push(format!("Criteria marked {NOT_COMPUTED} in the table: exact pass rates only; their search stops once each point's pass or fail is certain, so their other statistics are not computed (parameter `statistics: every-criterion` computes them)."));
    }
    if b.n_outside > 0 {
        notes.push(format!("Reference points outside the evaluated grid, not evaluated (only the overlap is analysed): {}.", b.n_outside));
    }
    let spacing = b.field.max_spacing();
    if b.method == Method::Nodes && b.crits.iter().any(|c| spacing > c.dta_mm / 3.0) {
        notes.push(format!(
            "Caution: the evaluated grid spacing ({spacing:.2} mm) exceeds one third of the DTA without interpolation; gamma is overestimated (Low & Dempsey 2003). Use `method: exact`."
        ));
    }
    AnalysisOutput {
        metrics,
        tables,
        figures,
        notes,
        references: references(b.method),
        status: Status::worst(statuses),
        derived_measured: None,
        calibration: None,
    }
}

fn trim_dose(v: f64) -> String {
    format!("{v:.4}")
        .trim_end_matches('0')
        .trim_end_matches('.')
        .to_string()
}

/// Gamma and dose-difference maps on a 2D reference grid.
fn maps(b: &BuildInput, [gx, gy, gz]: [&Vec<f64>; 3]) -> Vec<Figure> {
    let n = b.crits.len();
    let axes = [("X", gx), ("Y", gy), ("Z", gz)];
    let active: Vec<&(&str, &Vec<f64>)> = axes.iter().filter(|(_, a)| a.len() > 1).collect();
    let [(xn, xs), (yn, ys)] = [active[0], active[1]].map(|p| (p.0, p.1));
    let gamma: Vec<Option<f64>> = (0..b.points.len())
        .map(|i| Some(b.gammas[i * n]).filter(|v| !v.is_nan()))
        .collect();
    let norm = b.crits[0].norm_dose;
    let diff: Vec<Option<f64>> = (0..b.points.len())
        .map(|i| {
            b.field
                .local(b.points.at(i))
                .map(|u| 100.0 * (b.field.interpolate(&u) - b.ref_dose[i]) / norm)
        })
        .collect();
    vec![
        Figure::Map {
            title: format!("Gamma map ({})", label(&b.spec[0])),
            quantity: "gamma".into(),
            unit: String::new(),
            x_label: format!("{xn} (mm)"),
            y_label: format!("{yn} (mm)"),
            x_mm: xs.clone(),
            y_mm: ys.clone(),
            values: gamma,
        },
        Figure::Map {
            title: "Dose difference, evaluated - reference, in % of the normalisation dose".into(),
            quantity: "dose difference".into(),
            unit: "%".into(),
            x_label: format!("{xn} (mm)"),
            y_label: format!("{yn} (mm)"),
            x_mm: xs.clone(),
            y_mm: ys.clone(),
            values: diff,
        },
    ]
}

/// A plane through a 3D reference grid: name, where it cuts, axis names and coordinates, and
/// the indices of the reference points on it, row by row.
type Slice<'a> = (&'a str, String, [&'a str; 2], [&'a Vec<f64>; 2], Vec<usize>);

/// Gamma and dose-difference maps on the three orthogonal planes of a 3D reference grid
/// through its worst point (the largest gamma of the first criterion).
fn worst_slices(b: &BuildInput, [gx, gy, gz]: [&Vec<f64>; 3]) -> Vec<Figure> {
    let n = b.crits.len();
    let (nx, ny, nz) = (gx.len(), gy.len(), gz.len());
    let Some(worst) = (0..b.points.len())
        .filter(|&i| !b.gammas[i * n].is_nan())
        .max_by(|&p, &q| b.gammas[p * n].total_cmp(&b.gammas[q * n]).then(q.cmp(&p)))
    else {
        return Vec::new();
    };
    let (wx, wy, wz) = (worst % nx, (worst / nx) % ny, worst / (nx * ny));
    let index = |ix: usize, iy: usize, iz: usize| (iz * ny + iy) * nx + ix;
    let gamma = |i: usize| Some(b.gammas[i * n]).filter(|v| !v.is_nan());
    let norm = b.crits[0].norm_dose;
    let diff = |i: usize| {
        b.field
            .local(b.points.at(i))
            .map(|u| 100.0 * (b.field.interpolate(&u) - b.ref_dose[i]) / norm)
    };
    let planes: [Slice; 3] = [
        (
            "XY",
            format!("Z = {:.1} mm", gz[wz]),
            ["X", "Y"],
            [gx, gy],
            (0..ny)
                .flat_map(|iy| (0..nx).map(move |ix| index(ix, iy, wz)))
                .collect(),
        ),
        (
            "XZ",
            format!("Y = {:.1} mm", gy[wy]),
            ["X", "Z"],
            [gx, gz],
            (0..nz)
                .flat_map(|iz| (0..nx).map(move |ix| index(ix, wy, iz)))
                .collect(),
        ),
        (
            "YZ",
            format!("X = {:.1} mm", gx[wx]),
            ["Y", "Z"],
            [gy, gz],
            (0..nz)
                .flat_map(|iz| (0..ny).map(move |iy| index(wx, iy, iz)))
                .collect(),
        ),
    ];
    let mut figures = Vec::new();
    for (plane, at, [xn, yn], [xs, ys], points) in planes {
        let map =
            |title: String, quantity: &str, unit: &str, values: Vec<Option<f64>>| Figure::Map {
                title,
                quantity: quantity.into(),
                unit: unit.into(),
                x_label: format!("{xn} (mm)"),
                y_label: format!("{yn} (mm)"),
                x_mm: xs.clone(),
                y_mm: ys.clone(),
                values,
            };
        figures.push(map(
            format!(
                "Gamma ({}), {plane} plane through the worst point, {at}",
                label(&b.spec[0])
            ),
            "gamma",
            "",
            points.iter().map(|&i| gamma(i)).collect(),
        ));
        figures.push(map(
            format!(
                "Dose difference, evaluated - reference, in % of the normalisation dose, {plane} plane through the worst point, {at}"
            ),
            "dose difference",
            "%",
            points.iter().map(|&i| diff(i)).collect(),
        ));
    }
    figures
}

#[cfg(test)]
mod tests;
