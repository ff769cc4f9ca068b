//! Gamma speed on synthetic dose distributions (a bench binary, not a test).
//!
//! Run: `cargo bench -p beamproof-plugin-gamma --bench gamma` (all cases) or add a case name:
//! `cargo bench -p beamproof-plugin-gamma --bench gamma -- 3d-128`. Cases: 1d-1000, 2d-400,
//! 3d-128, 3d-128-1mm (1 %/1 mm alone), 3d-128-sweep (five criteria), 3d-128-six (the six of
//! the issue text), both as a campaign runs them (every statistic for the first criterion,
//! exact pass rates for the others), 3d-128-sweep-all and 3d-128-six-all (every statistic for
//! every criterion), 3d-256. Each prints wall time (best of the repeats), pass rate and points
//! evaluated; the 1 %/1 mm, sweep and six-criterion cases also the ratio of their best time
//! to that of 3 %/2 mm alone, timed just before each of their runs; with `--features counters`,
//! also the search's counts per point. Reference: an
//! open field with error-function edges and depth attenuation on a 1 mm grid, covering 70 % of
//! the grid; evaluated: the same shifted by 1 mm, scaled by 2 % and with 0.5 % Gaussian noise
//! (seeded). Criteria 3 %/2 mm global, 10 % threshold.

use std::time::Instant;

use beamproof_api::Grid;
use beamproof_plugin_gamma::field::Field;
use beamproof_plugin_gamma::search::{Criterion, Method};
use beamproof_plugin_gamma::star::counters;
use beamproof_plugin_gamma::{Positions, Values, compute, stats};

/// Deterministic normal deviates (64-bit LCG + Box-Muller), seeded.
struct Noise(u64);
impl Noise {
    fn uniform(&mut self) -> f64 {
        self.0 = self
            .0
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        ((self.0 >> 11) as f64 + 0.5) / (1u64 << 53) as f64
    }
    fn normal(&mut self) -> f64 {
        let (u, v) = (self.uniform(), self.uniform());
        (-2.0 * u.ln()).sqrt() * (2.0 * std::f64::consts::PI * v).cos()
    }
}

fn erf(x: f64) -> f64 {
    // Abramowitz & Stegun 7.1.26 (|error| < 1.5e-7), enough for a synthetic field.
    let t = 1.0 / (1.0 + 0.3275911 * x.abs());
    let y = 1.0
        - (((((1.061405429 * t - 1.453152027) * t) + 1.421413741) * t - 0.284496736) * t
            + 0.254829592)
            * t
            * (-x * x).exp();
    if x >= 0.0 { y } else { -y }
}

/// Open-field profile of half-width `half` (mm): error-function edges, 3 % scatter tail.
fn profile(u: f64, half: f64) -> f64 {
    let s = 3.0 * std::f64::consts::SQRT_2;
    0.5 * (erf((half - u) / s) + erf((half + u) / s)) * 0.97 + 0.03
}

/// Dose of a field covering 70 % of the grid along x and y, attenuated along -z.
fn dose(x: f64, y: f64, z: f64, half: [f64; 2], depth0: f64) -> f64 {
    let depth = depth0 - z;
    2.0 * (-0.005 * depth.max(0.0)).exp() * profile(x, half[0]) * profile(y, half[1])
}

fn axis(n: usize) -> Vec<f64> {
    (0..n).map(|i| i as f64 - (n as f64 - 1.0) / 2.0).collect()
}

fn volumes(dims: [usize; 3]) -> (Grid, Grid) {
    let (xs, ys, zs) = (
        axis(dims[0]),
        axis(dims[1]),
        if dims[2] > 1 {
            axis(dims[2])
        } else {
            vec![0.0]
        },
    );
    let half = [0.35 * dims[0] as f64, 0.35 * dims[1].max(2) as f64];
    let depth0 = zs[zs.len() - 1];
    let mut noise = Noise(2026);
    let (mut r, mut e) = (Vec::new(), Vec::new());
    for &z in &zs {
        for &y in &ys {
            for &x in &xs {
                r.push(dose(x, y, z, half, depth0));
                e.push(
                    (1.02 * dose(x - 1.0, y, z, half, depth0) + 0.005 * 2.0 * noise.normal())
                        .max(0.0),
                );
            }
        }
    }
    (
        Grid {
            x_mm: xs.clone(),
            y_mm: ys.clone(),
            z_mm: zs.clone(),
            dose: r,
        },
        Grid {
            x_mm: xs,
            y_mm: ys,
            z_mm: zs,
            dose: e,
        },
    )
}

/// Global criteria (dose %, DTA mm) normalised to `norm`, search radius three DTAs.
fn criteria(list: &[(f64, f64)], norm: f64) -> Vec<Criterion> {
    list.iter()
        .map(|&(d, t)| Criterion {
            dose_fraction: d / 100.0,
            dta_mm: t,
            local: false,
            norm_dose: norm,
            max_search_mm: 3.0 * t,
        })
        .collect()
}

/// One case; with `baseline`, each repeat also times those criteria just before, and the
/// ratio of the two best times is printed (the machine's drift then cancels).
fn run(
    name: &str,
    dims: [usize; 3],
    crit_list: &[(f64, f64)],
    repeats: usize,
    baseline: Option<&[(f64, f64)]>,
    values: Values,
) {
    let (reference, evaluated) = volumes(dims);
    let field = Field::from_grid(&evaluated).expect("field");
    let norm = reference.dose.iter().copied().fold(0.0, f64::max);
    let crits = criteria(crit_list, norm);
    let base = baseline.map(|b| criteria(b, norm));
    let thresholds = vec![0.1 * norm; crits.len()];
    let points = Positions::Grid {
        x: reference.x_mm.clone(),
        y: reference.y_mm.clone(),
        z: reference.z_mm.clone(),
    };
    let timed = |crits: &[Criterion]| {
        let t = Instant::now();
        let out = compute(
            &field,
            &points,
            &reference.dose,
            crits,
            &thresholds[..crits.len()],
            Method::Exact,
            values,
        );
        (out, t.elapsed().as_secs_f64())
    };
    let mut best = f64::INFINITY;
    let mut best_base = f64::INFINITY;
    let mut out = Vec::new();
    for _ in 0..repeats {
        if let Some(b) = &base {
            best_base = best_base.min(timed(b).1);
        }
        counters::reset();
        let (o, t) = timed(&crits);
        out = o;
        best = best.min(t);
    }
    let s = stats::summarise(out.iter().step_by(crits.len()).copied());
    println!(
        "{name:>14}: {:>9.3} ms  ({} points, {} evaluated, pass {:.2} % at {}%/{}mm, {} criteria, {} threads)",
        best * 1e3,
        points.len(),
        s.n_evaluated,
        s.pass_rate_percent,
        crit_list[0].0,
        crit_list[0].1,
        crits.len(),
        rayon::current_num_threads()
    );
    if let Some(b) = baseline {
        println!(
            "{:>14}  {:.2} times {}%/{}mm ({:.3} ms), interleaved, best of {repeats} each",
            "",
            best / best_base,
            b[0].0,
            b[0].1,
            best_base * 1e3
        );
    }
    if let Some(line) = counters::summary() {
        println!("{:>14}  {line}", "");
    }
}

/// Name, grid size, criteria (dose %, DTA mm), repeats and the criteria timed alongside for a
/// ratio, of one benchmark case.
type Case<'a> = (
    &'a str,
    [usize; 3],
    &'a [(f64, f64)],
    usize,
    Option<&'a [(f64, f64)]>,
    Values,
);

fn main() {
    let filter: Vec<String> = std::env::args()
        .skip(1)
        .filter(|a| !a.starts_with('-'))
        .collect();
    // A case name selects that case; any other word every case whose name contains it.
    let names = [
        "1d-1000",
        "2d-400",
        "3d-128",
        "3d-128-sweep",
        "3d-128-six",
        "3d-128-sweep-all",
        "3d-128-six-all",
        "3d-256",
    ];
    let want = |n: &str| {
        filter.is_empty()
            || filter.iter().any(|f| {
                if names.contains(&f.as_str()) {
                    n == f
                } else {
                    n.contains(f.as_str())
                }
            })
    };
    let single = [(3.0, 2.0)];
    let tight = [(1.0, 1.0)];
    let sweep = [(3.0, 2.0), (4.0, 4.0), (3.0, 3.0), (2.0, 2.0), (1.0, 1.0)];
    // The sweep of the issue text: 4 %/4 mm, 3 %/3 mm, 3 %/2 mm, 2 %/2 mm, 2 %/1 mm, 1 %/1 mm.
    let sweep6 = [
        (3.0, 2.0),
        (4.0, 4.0),
        (3.0, 3.0),
        (2.0, 2.0),
        (2.0, 1.0),
        (1.0, 1.0),
    ];
    // The cases with several criteria, and 1 %/1 mm alone, also time 3 %/2 mm alone,
    // interleaved with them, so that their ratio does not depend on the machine's drift.
    let (first, every) = (Values::First, Values::Every);
    let cases: [Case; 9] = [
        ("1d-1000", [1000, 1, 1], &single, 50, None, first),
        ("2d-400", [400, 400, 1], &single, 5, None, first),
        ("3d-128", [128, 128, 128], &single, 3, None, first),
        (
            "3d-128-1mm",
            [128, 128, 128],
            &tight,
            5,
            Some(&single),
            first,
        ),
        (
            "3d-128-sweep",
            [128, 128, 128],
            &sweep,
            5,
            Some(&single),
            first,
        ),
        (
            "3d-128-six",
            [128, 128, 128],
            &sweep6,
            5,
            Some(&single),
            first,
        ),
        (
            "3d-128-sweep-all",
            [128, 128, 128],
            &sweep,
            5,
            Some(&single),
            every,
        ),
        (
            "3d-128-six-all",
            [128, 128, 128],
            &sweep6,
            5,
            Some(&single),
            every,
        ),
        ("3d-256", [256, 256, 256], &single, 2, None, first),
    ];
    for (name, dims, crits, repeats, baseline, values) in cases {
        if want(name) {
            run(name, dims, crits, repeats, baseline, values);
        }
    }
}
