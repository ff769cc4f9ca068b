//! Gamma against analytic cases (derived from the definition of Low et al
//! 1998: for a linear ramp of gradient g shifted by a and offset by c, gamma is the point-to-
//! line distance |c - g a| / sqrt(dD^2 + g^2 dd^2)), against a brute-force search, and for
//! its properties.

use super::*;
use beamproof_api::{Curve, CurveAxis, Grid};

/// The library's `compute` for a list of points.
fn compute(
    field: &Field,
    points: &[[f64; 3]],
    doses: &[f64],
    crits: &[Criterion],
    thresholds: &[f64],
    method: Method,
) -> Vec<f64> {
    super::compute(
        field,
        &Positions::List(points.to_vec()),
        doses,
        crits,
        thresholds,
        method,
        Values::Every,
    )
}

fn crit(dose_percent: f64, dta_mm: f64, norm: f64, local: bool) -> Criterion {
    Criterion {
        dose_fraction: dose_percent / 100.0,
        dta_mm,
        local,
        norm_dose: norm,
        max_search_mm: 3.0 * dta_mm,
    }
}

fn curve_field(xs: &[f64], f: impl Fn(f64) -> f64) -> Field {
    Field::from_curve(&Curve {
        axis: CurveAxis::X,
        positions_mm: xs.to_vec(),
        dose: xs.iter().map(|&x| f(x)).collect(),
    })
}

fn steps(from: f64, to: f64, step: f64) -> Vec<f64> {
    let n = ((to - from) / step).round() as usize;
    (0..=n).map(|i| from + i as f64 * step).collect()
}

/// Gamma at one reference point of a 1D evaluated field.
fn g1(field: &Field, x: f64, d_ref: f64, c: Criterion, method: Method) -> f64 {
    compute(field, &[[x, 0.0, 0.0]], &[d_ref], &[c], &[0.0], method)[0]
}

fn assert_close(got: f64, want: f64, tol: f64, what: &str) {
    assert!((got - want).abs() <= tol, "{what}: got {got}, want {want}");
}

#[test]
fn flat_fields_give_the_dose_difference_over_the_criterion() {
    // G1, G2: flat 100 against 102 and 104.5 at 3 %/3 mm global (norm 100): 2/3 and 1.5.
    let xs = steps(-50.0, 50.0, 1.0);
    assert_close(
        g1(
            &curve_field(&xs, |_| 102.0),
            0.0,
            100.0,
            crit(3.0, 3.0, 100.0, false),
            Method::Exact,
        ),
        2.0 / 3.0,
        1e-12,
        "G1",
    );
    assert_close(
        g1(
            &curve_field(&xs, |_| 104.5),
            0.0,
            100.0,
            crit(3.0, 3.0, 100.0, false),
            Method::Exact,
        ),
        1.5,
        1e-12,
        "G2",
    );
}

#[test]
fn shifted_ramps_match_the_point_to_line_distance() {
    // Shifted and offset ramps, values from the closed form above (derived from Low et al 1998):
    // (gradient, shift, offset, dose %, DTA, expected gamma).
    let cases = [
        (1.0, 3.0, 0.0, 3.0, 3.0, 1.0 / 2f64.sqrt()),
        (1.0, 2.0, 0.0, 3.0, 3.0, 2.0 / 18f64.sqrt()),
        (1.0, 3.0, 0.0, 3.0, 2.0, 3.0 / 13f64.sqrt()),
        (10.0, 3.0, 0.0, 3.0, 3.0, 30.0 / 909f64.sqrt()),
        (10.0, 2.0, 0.0, 3.0, 3.0, 20.0 / 909f64.sqrt()),
        (1.0, 2.0, 0.0, 2.0, 2.0, 2.0 / 8f64.sqrt()),
        (2.0, 4.0, 0.0, 3.0, 3.0, 8.0 / 45f64.sqrt()),
        (1.0, 3.0, 3.0, 3.0, 3.0, 0.0),
        (1.0, 3.0, -3.0, 3.0, 3.0, 6.0 / 18f64.sqrt()),
    ];
    let xs = steps(-40.0, 40.0, 1.0);
    for (g, a, c, dp, dta, want) in cases {
        let field = curve_field(&xs, |x| 500.0 + g * (x - a) + c);
        let got = g1(
            &field,
            0.0,
            500.0,
            crit(dp, dta, 100.0, false),
            Method::Exact,
        );
        assert_close(
            got,
            want,
            1e-9,
            &format!("ramp g={g} a={a} c={c} {dp}%/{dta}mm"),
        );
    }
}

#[test]
fn no_interpolation_misses_the_continuous_optimum() {
    // D1/D2: G3 on a 1 mm grid, nodes only: sqrt(5)/3 (nearest node 1 or 2 mm away);
    // the exact search finds 1/sqrt(2).
    let field = curve_field(&steps(-40.0, 40.0, 1.0), |x| 500.0 + (x - 3.0));
    assert_close(
        g1(
            &field,
            0.0,
            500.0,
            crit(3.0, 3.0, 100.0, false),
            Method::Nodes,
        ),
        5f64.sqrt() / 3.0,
        1e-12,
        "D1",
    );
    assert_close(
        g1(
            &field,
            0.0,
            500.0,
            crit(3.0, 3.0, 100.0, false),
            Method::Exact,
        ),
        1.0 / 2f64.sqrt(),
        1e-12,
        "D2",
    );
}

#[test]
fn sampled_search_hits_the_ramp_optimum_on_its_lattice() {
    // G3 with sampling every DTA/10 = 0.3 mm: the optimum at u* = 1.5 mm (closed form from Low et al 1998,
    // u* = g^2 a dd^2 / (dD^2 + g^2 dd^2)) is a lattice point, so the sampled search is exact.
    let field = curve_field(&steps(-40.0, 40.0, 1.0), |x| 500.0 + (x - 3.0));
    let c = crit(3.0, 3.0, 100.0, false);
    let got = g1(&field, 0.0, 500.0, c, Method::Sampled { step_mm: 0.3 });
    assert_close(got, 1.0 / 2f64.sqrt(), 1e-12, "G3 sampled");
    // With a step that misses the optimum (0.4 mm: nearest samples 1.2 and 1.6 mm) the sampled
    // value lies above the exact one: sqrt((1.6/3)^2 + (1.4/3)^2) = 0.70868.
    let got = g1(&field, 0.0, 500.0, c, Method::Sampled { step_mm: 0.4 });
    assert_close(
        got,
        ((1.6f64 / 3.0).powi(2) + (1.4f64 / 3.0).powi(2)).sqrt(),
        1e-12,
        "G3 sampled, 0.4 mm",
    );
}

#[test]
fn local_and_global_normalisation_differ_in_low_dose() {
    // L1/L2: reference 20, evaluated 21, 3 %/3 mm: global (norm 100) 1/3, local 1/0.6.
    let field = curve_field(&steps(-20.0, 20.0, 1.0), |_| 21.0);
    assert_close(
        g1(
            &field,
            0.0,
            20.0,
            crit(3.0, 3.0, 100.0, false),
            Method::Exact,
        ),
        1.0 / 3.0,
        1e-12,
        "L1",
    );
    assert_close(
        g1(
            &field,
            0.0,
            20.0,
            crit(3.0, 3.0, 100.0, true),
            Method::Exact,
        ),
        1.0 / 0.6,
        1e-12,
        "L2",
    );
}

#[test]
fn step_edge_pass_rate_and_gamma_values() {
    // P1: x = 0..99 mm, reference flat 100, evaluated 100 below 80 mm and 110 from 80 mm
    // (linear between 79 and 80), 3 %/2.5 mm global, TH 10 %: gamma at 80..83 mm is
    // 0.3972, 0.7943, 1.1915, 1.5886 with linear interpolation (0.4, 0.8, 1.2, 1.6 without);
    // pass rate 82.0 % in both modes.
    let xs = steps(0.0, 99.0, 1.0);
    let field = curve_field(&xs, |x| if x < 80.0 { 100.0 } else { 110.0 });
    let pts: Vec<[f64; 3]> = xs.iter().map(|&x| [x, 0.0, 0.0]).collect();
    let doses = vec![100.0; xs.len()];
    let c = crit(3.0, 2.5, 100.0, false);
    for (method, want) in [
        (Method::Exact, [0.3972, 0.7943, 1.1915, 1.5886]),
        (Method::Nodes, [0.4, 0.8, 1.2, 1.6]),
    ] {
        let g = compute(&field, &pts, &doses, &[c], &[10.0], method);
        for (j, w) in want.iter().enumerate() {
            assert_close(
                g[80 + j],
                *w,
                5e-5,
                &format!("{method:?} gamma at {} mm", 80 + j),
            );
        }
        let s = stats::summarise(g.iter().copied());
        assert_close(
            s.pass_rate_percent,
            82.0,
            1e-9,
            &format!("{method:?} pass rate"),
        );
    }
}

fn grid(xs: &[f64], ys: &[f64], zs: &[f64], mut f: impl FnMut(f64, f64, f64) -> f64) -> Grid {
    let mut dose = Vec::new();
    for &z in zs {
        for &y in ys {
            for &x in xs {
                dose.push(f(x, y, z));
            }
        }
    }
    Grid {
        x_mm: xs.to_vec(),
        y_mm: ys.to_vec(),
        z_mm: zs.to_vec(),
        dose,
    }
}

#[test]
fn shift_perpendicular_to_a_2d_ramp_is_ignored() {
    // G12: ramp along x (g = 1), evaluated shifted by (3, 4) mm: gamma 1/sqrt(2), the y shift
    // changes nothing.
    let xs = steps(-20.0, 20.0, 1.0);
    let g = grid(&xs, &xs, &[0.0], |x, _, _| 500.0 + (x - 3.0));
    let field = Field::from_grid(&g).expect("field");
    let got = compute(
        &field,
        &[[0.0, 4.0, 0.0]],
        &[500.0],
        &[crit(3.0, 3.0, 100.0, false)],
        &[0.0],
        Method::Exact,
    )[0];
    assert_close(got, 1.0 / 2f64.sqrt(), 1e-9, "G12");
}

#[test]
fn oblique_ramp_in_3d_is_exact() {
    // Ramp along n = (1, 2, 2)/3 with g = 1 /mm, shifted 3 mm along n: 1/sqrt(2) at
    // 3 %/3 mm (norm 100); simplicial interpolation reproduces a linear dose exactly, so the
    // exact search must find the analytic value on a 1 mm grid and on a coarse 2.5 mm grid.
    for step in [1.0, 2.5] {
        let xs = steps(-15.0, 15.0, step);
        let n = [1.0 / 3.0, 2.0 / 3.0, 2.0 / 3.0];
        let g = grid(&xs, &xs, &xs, |x, y, z| {
            500.0 + (n[0] * x + n[1] * y + n[2] * z - 3.0)
        });
        let field = Field::from_grid(&g).expect("field");
        for p in [[0.0, 0.0, 0.0], [1.3, -0.7, 2.2]] {
            let d_ref = 500.0 + n[0] * p[0] + n[1] * p[1] + n[2] * p[2];
            let got = compute(
                &field,
                &[p],
                &[d_ref],
                &[crit(3.0, 3.0, 100.0, false)],
                &[0.0],
                Method::Exact,
            )[0];
            assert_close(
                got,
                1.0 / 2f64.sqrt(),
                1e-9,
                &format!("3D ramp, step {step}, at {p:?}"),
            );
        }
    }
}

/// Deterministic pseudo-random numbers (64-bit LCG, Knuth MMIX constants), for test fields.
struct Lcg(u64);
impl Lcg {
    fn next(&mut self) -> f64 {
        self.0 = self
            .0
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        (self.0 >> 11) as f64 / (1u64 << 53) as f64
    }
}

/// A smooth field: a few Gaussian blobs with seeded centres.
fn blobs(seed: u64, dims: usize) -> impl Fn(f64, f64, f64) -> f64 {
    let mut r = Lcg(seed);
    let centres: Vec<[f64; 4]> = (0..4)
        .map(|_| {
            [
                r.next() * 16.0 - 8.0,
                r.next() * 16.0 - 8.0,
                if dims == 3 { r.next() * 8.0 - 4.0 } else { 0.0 },
                40.0 + 60.0 * r.next(),
            ]
        })
        .collect();
    move |x, y, z| {
        5.0 + centres
            .iter()
            .map(|c| {
                c[3] * (-((x - c[0]).powi(2) + (y - c[1]).powi(2) + (z - c[2]).powi(2)) / 30.0)
                    .exp()
            })
            .sum::<f64>()
    }
}

/// Gamma by exhaustive search: the exact distance to every simplex of every cell that reaches
/// within the search radius, with no ordering, bound or early termination.
fn exhaustive(field: &Field, p: [f64; 3], d_ref: f64, c: Criterion) -> f64 {
    let u = field.local(p).expect("inside");
    let k = field.k;
    let dd = c.delta_dose(d_ref);
    let mut best = f64::INFINITY;
    let n: Vec<usize> = (0..k).map(|a| field.axes[a].len() - 1).collect();
    let total: usize = n.iter().product();
    for flat in 0..total {
        let mut cell = [0usize; 3];
        let mut rest = flat;
        for a in 0..k {
            cell[a] = rest % n[a];
            rest /= n[a];
        }
        let d2: f64 = (0..k)
            .map(|a| {
                let (x0, x1) = (field.axes[a][cell[a]], field.axes[a][cell[a] + 1]);
                (x0 - u[a]).max(u[a] - x1).max(0.0).powi(2)
            })
            .sum();
        if d2.sqrt() > c.max_search_mm {
            continue;
        }
        for order in crate::field::kuhn_orders(k) {
            let mut w = [[0.0; 4]; 4];
            let mut node = cell;
            for j in 0..=k {
                if j > 0 {
                    node[order[j - 1]] += 1;
                }
                for a in 0..k {
                    w[j][a] = (field.axes[a][node[a]] - u[a]) / c.dta_mm;
                }
                w[j][k] = (field.node(&node) - d_ref) / dd;
            }
            best = best.min(crate::search::min_norm_sq(
                &w,
                &[0, 1, 2, 3][..k + 1],
                k + 1,
            ));
        }
    }
    best.sqrt()
}

/// Gamma by dense sampling of the same interpolant over the search disc or ball: it can only
/// find values at or above the exact minimum.
fn sampled(field: &Field, p: [f64; 3], d_ref: f64, c: Criterion, step: f64) -> f64 {
    let r = c.max_search_mm;
    let m = (r / step).ceil() as i64;
    let dd = c.delta_dose(d_ref);
    let k = field.k as i64;
    let range = |a: i64| if a < k { -m..=m } else { 0..=0 };
    let mut best = f64::INFINITY;
    for i in range(0) {
        for j in range(1) {
            for l in range(2) {
                let off = [i as f64 * step, j as f64 * step, l as f64 * step];
                let dist2 = off.iter().map(|o| o * o).sum::<f64>();
                if dist2 > r * r {
                    continue;
                }
                if let Some(u) = field.local([p[0] + off[0], p[1] + off[1], p[2] + off[2]]) {
                    best = best.min(
                        dist2 / (c.dta_mm * c.dta_mm)
                            + ((field.interpolate(&u) - d_ref) / dd).powi(2),
                    );
                }
            }
        }
    }
    best.sqrt()
}

#[test]
fn exact_search_agrees_with_exhaustive_search_in_2d_and_3d() {
    // The ordered, bounded search must return what an exhaustive search over every simplex
    // returns; dense sampling of the same interpolant can only find larger values.
    for dims in [2usize, 3] {
        let xs = steps(-10.0, 10.0, 2.0);
        let zs = if dims == 3 {
            steps(-4.0, 4.0, 2.0)
        } else {
            vec![0.0]
        };
        let f = blobs(7, dims);
        let eval = grid(&xs, &xs, &zs, |x, y, z| 1.02 * f(x - 0.7, y + 0.4, z));
        let field = Field::from_grid(&eval).expect("field");
        let mut r = Lcg(99);
        for c in [
            crit(3.0, 2.0, 100.0, false),
            crit(2.0, 2.0, 100.0, false),
            crit(3.0, 3.0, 100.0, true),
        ] {
            let (mut pass_exact, mut pass_ref) = (0usize, 0usize);
            let n = 40;
            for _ in 0..n {
                let p = [
                    r.next() * 16.0 - 8.0,
                    r.next() * 16.0 - 8.0,
                    if dims == 3 { r.next() * 6.0 - 3.0 } else { 0.0 },
                ];
                let d_ref = f(p[0], p[1], p[2]);
                let exact = compute(&field, &[p], &[d_ref], &[c], &[0.0], Method::Exact)[0];
                let reference = exhaustive(&field, p, d_ref, c);
                assert!(
                    (exact - reference).abs() <= 1e-9,
                    "{dims}D: search {exact} vs exhaustive {reference} at {p:?}"
                );
                if dims == 2 {
                    let s = sampled(&field, p, d_ref, c, 0.1);
                    assert!(
                        s >= exact - 1e-9,
                        "sampling beat the exact minimum at {p:?}: {s} < {exact}"
                    );
                }
                pass_exact += usize::from(exact <= 1.0);
                pass_ref += usize::from(reference <= 1.0);
            }
            assert_eq!(pass_exact, pass_ref, "{dims}D pass counts of {n}");
        }
    }
}

#[test]
fn tabulated_search_at_grid_nodes_agrees_with_exhaustive_search() {
    // Reference points on the nodes of the evaluated grid take the tabulated walk
    // (`star::search_node`): with edges where its table fits inside the grid, with face
    // solves and missing cells left out near the grid's faces. Both must return what an
    // exhaustive search over every simplex returns, on unequal spacings, for global and local
    // criteria, and where the search radius leaves the table (3 cells in 3D) so that the
    // general search continues from the walk's value. Rough noisy data put many minima on
    // faces and edges rather than inside simplices.
    for dims in [1usize, 2, 3] {
        let (xs, ys, zs) = match dims {
            1 => (steps(-70.0, 70.0, 0.7), vec![0.0], vec![0.0]),
            2 => (steps(-20.0, 20.0, 1.0), steps(-21.0, 21.0, 1.5), vec![0.0]),
            _ => (
                steps(-7.8, 7.8, 1.2),
                steps(-8.25, 8.25, 1.5),
                steps(-7.5, 7.5, 1.0),
            ),
        };
        let f = blobs(11, dims);
        let mut r = Lcg(5);
        let eval = grid(&xs, &ys, &zs, |x, y, z| {
            1.03 * f(x - 0.6, y + 0.3, z) + 6.0 * (r.next() - 0.5)
        });
        let field = Field::from_grid(&eval).expect("field");
        // In 3D a 1.6 mm DTA searches 4.8 mm, beyond the table's 3 cells of 1.5 mm.
        let dta = if dims == 3 { 1.6 } else { 2.0 };
        let crits = [crit(3.0, dta, 100.0, false), crit(2.0, 1.0, 100.0, true)];
        let table = crate::star::NodeTable::for_search(&field, 3.0 * dta).expect("evenly spaced");
        let mut points = Vec::new();
        let mut doses = Vec::new();
        let mut walked = Vec::new();
        for (iz, &z) in zs.iter().enumerate() {
            for (iy, &y) in ys.iter().enumerate() {
                for (ix, &x) in xs.iter().enumerate() {
                    let covered = table.covers(&field, &[ix, iy, iz]);
                    // Every node whose table fits, and a sample of the others (the
                    // exhaustive search is slow in the test profile).
                    if !covered && (ix + 3 * iy + 5 * iz) % 13 != 0 {
                        continue;
                    }
                    points.push([x, y, z]);
                    walked.push(covered);
                    // Up to 12 % off in places, and every fifth point above every evaluated
                    // dose, so that some gamma values are large.
                    let d = f(x, y, z) * (1.0 + 0.25 * (r.next() - 0.5).max(0.0));
                    doses.push(if points.len() % 5 == 0 {
                        1.5 * d + 20.0
                    } else {
                        d
                    });
                }
            }
        }
        let got = compute(&field, &points, &doses, &crits, &[0.0; 2], Method::Exact);
        let mut beyond_table = 0;
        for (i, (p, d)) in points.iter().zip(&doses).enumerate() {
            for (c, cr) in crits.iter().enumerate() {
                let want = exhaustive(&field, *p, *d, *cr);
                let g = got[i * crits.len() + c];
                assert!(
                    (g - want).abs() <= 1e-9 * (1.0 + want),
                    "{dims}D node {p:?}, criterion {c}: search {g} vs exhaustive {want}"
                );
                beyond_table +=
                    usize::from(walked[i] && g * cr.dta_mm > table.radius_mm() * (1.0 + 1e-9));
            }
        }
        let n_walked = walked.iter().filter(|&&w| w).count();
        assert!(n_walked >= 50, "{dims}D: only {n_walked} nodes walked");
        if dims == 3 {
            assert!(
                beyond_table > 0,
                "no walk handed over to the general search"
            );
        }
    }
}

#[test]
fn pass_only_criteria_pass_and_fail_where_the_exhaustive_minimum_does() {
    // With `Values::First` a sweep's criteria that are not searched with the first only
    // settle each point's pass or fail. At the nodes of noisy 2D and 3D grids of unequal
    // spacing (the walk inside the grid, near its faces, and in 3D handed over to the general
    // search beyond its table), every point must pass or fail as the exhaustive minimum does
    // (the exhaustive search above, from the definition of Low et al 1998), and the first
    // criterion's values must be the minima. A value within the DTA's distance decides a pass,
    // so the exhaustive search of a pass/fail criterion is cut there.
    for dims in [2usize, 3] {
        let (xs, ys, zs) = match dims {
            2 => (steps(-12.0, 12.0, 1.0), steps(-12.0, 12.0, 1.5), vec![0.0]),
            _ => (
                steps(-4.8, 4.8, 1.2),
                steps(-4.5, 4.5, 1.5),
                steps(-4.0, 4.0, 1.0),
            ),
        };
        let f = blobs(7, dims);
        let mut r = Lcg(3);
        let eval = grid(&xs, &ys, &zs, |x, y, z| {
            1.02 * f(x - 0.7, y, z) + 3.0 * (r.next() - 0.5)
        });
        let field = Field::from_grid(&eval).expect("field");
        let mut points = Vec::new();
        let mut doses = Vec::new();
        for &z in &zs {
            for &y in &ys {
                for &x in &xs {
                    // Every seventh point far above, so that every criterion fails somewhere.
                    let d = f(x, y, z) * (1.0 + 0.08 * (r.next() - 0.5));
                    doses.push(if points.len() % 7 == 0 {
                        1.25 * d + 6.0
                    } else {
                        d
                    });
                    points.push([x, y, z]);
                }
            }
        }
        // The first criterion, five proportional ones (one search) and one of its own.
        let crits = [
            crit(3.0, 2.0, 100.0, false),
            crit(5.0, 5.0, 100.0, false),
            crit(4.0, 4.0, 100.0, false),
            crit(3.0, 3.0, 100.0, false),
            crit(2.0, 2.0, 100.0, false),
            crit(1.0, 1.0, 100.0, false),
            crit(2.0, 1.0, 100.0, false),
        ];
        let th = [0.0; 7];
        assert_eq!(
            minima(&crits, &th, Method::Exact, Values::First),
            [true, false, false, false, false, false, false]
        );
        assert!(
            minima(&crits, &th, Method::Nodes, Values::First)
                .iter()
                .all(|&m| m)
        );
        let got = super::compute(
            &field,
            &Positions::List(points.clone()),
            &doses,
            &crits,
            &th,
            Method::Exact,
            Values::First,
        );
        let pass = |g: f64| g <= 1.0 + beamproof_api::LIMIT_SLACK;
        let mut seen = [[0usize; 2]; 7];
        for (i, (p, d)) in points.iter().zip(&doses).enumerate() {
            // In 3D every third point (the exhaustive search is slow in the test profile).
            if dims == 3 && i % 3 != 0 {
                continue;
            }
            for (c, cr) in crits.iter().enumerate() {
                let g = got[i * crits.len() + c];
                if c == 0 {
                    let want = exhaustive(&field, *p, *d, *cr);
                    assert!(
                        (g - want).abs() <= 1e-9 * (1.0 + want),
                        "{dims}D {p:?}: first criterion {g} vs exhaustive {want}"
                    );
                    continue;
                }
                let mut near = *cr;
                near.max_search_mm = cr.dta_mm * (1.0 + 1e-6);
                let want = exhaustive(&field, *p, *d, near);
                assert_eq!(
                    pass(g),
                    pass(want),
                    "{dims}D {p:?}, criterion {c}: value {g}, exhaustive within the DTA {want}"
                );
                seen[c][usize::from(pass(g))] += 1;
            }
        }
        // Each pass/fail criterion both passes and fails somewhere, or the check is idle.
        for (c, s) in seen.iter().enumerate().skip(1) {
            assert!(s[0] > 0 && s[1] > 0, "{dims}D criterion {c}: {s:?}");
        }
        if dims == 3 {
            // A fail of 5 %/5 mm is only certain 5 mm out, beyond the table: those walks
            // handed over to the general search.
            let table = crate::star::NodeTable::for_search(&field, 15.0).expect("evenly spaced");
            assert!(
                table.radius_mm() < 5.0,
                "table radius {}",
                table.radius_mm()
            );
        }
    }
}

#[test]
fn a_uniform_scaling_passes_pass_only_criteria_at_exactly_one() {
    // A uniform field scaled by 2 % (Low et al 1998: gamma = 2 / dD in a flat region): under
    // 2 %/2 mm and 2 %/1 mm gamma is 1 to rounding, a pass; under 1 %/1 mm it is 2, a fail;
    // under 4 %/4 mm 0.5. The pass/fail-only search must land on the same side of 1.
    let xs = steps(-8.0, 8.0, 1.0);
    let reference = grid(&xs, &xs, &xs, |_, _, _| 2.0);
    let eval = grid(&xs, &xs, &xs, |_, _, _| 2.04);
    let field = Field::from_grid(&eval).expect("field");
    let crits = [
        crit(3.0, 2.0, 2.0, false),
        crit(2.0, 2.0, 2.0, false),
        crit(1.0, 1.0, 2.0, false),
        crit(4.0, 4.0, 2.0, false),
        crit(2.0, 1.0, 2.0, false),
    ];
    let pts = Positions::Grid {
        x: xs.clone(),
        y: xs.clone(),
        z: xs.clone(),
    };
    let th = [0.0; 5];
    let got = super::compute(
        &field,
        &pts,
        &reference.dose,
        &crits,
        &th,
        Method::Exact,
        Values::First,
    );
    for (c, want_rate) in [(0, 100.0), (1, 100.0), (2, 0.0), (3, 100.0), (4, 100.0)] {
        let s = stats::summarise(got.iter().skip(c).step_by(crits.len()).copied());
        assert_eq!(s.n_evaluated, pts.len());
        assert_eq!(s.pass_rate_percent, want_rate, "criterion {c}");
    }
}

#[test]
fn identical_distributions_give_zero_everywhere() {
    let xs = steps(-10.0, 10.0, 2.0);
    let g = grid(&xs, &xs, &[0.0], blobs(3, 2));
    let field = Field::from_grid(&g).expect("field");
    let pts: Vec<[f64; 3]> = (0..g.dose.len())
        .map(|i| [g.x_mm[i % xs.len()], g.y_mm[i / xs.len()], 0.0])
        .collect();
    let out = compute(
        &field,
        &pts,
        &g.dose,
        &[crit(2.0, 2.0, 100.0, false)],
        &[0.0],
        Method::Exact,
    );
    assert!(out.iter().all(|&v| v == 0.0), "{out:?}");
}

#[test]
fn pass_rate_never_drops_as_criteria_loosen() {
    let xs = steps(-10.0, 10.0, 1.0);
    let f = blobs(11, 2);
    let reference = grid(&xs, &xs, &[0.0], &f);
    let eval = grid(&xs, &xs, &[0.0], |x, y, z| 1.03 * f(x - 1.5, y, z));
    let field = Field::from_grid(&eval).expect("field");
    let pts: Vec<[f64; 3]> = (0..reference.dose.len())
        .map(|i| [xs[i % xs.len()], xs[i / xs.len()], 0.0])
        .collect();
    let norm = reference.dose.iter().copied().fold(0.0, f64::max);
    // Ordered from strictest to loosest; each loosens dose, distance or both.
    let crits = [
        crit(1.0, 1.0, norm, false),
        crit(2.0, 1.0, norm, false),
        crit(2.0, 2.0, norm, false),
        crit(3.0, 2.0, norm, false),
        crit(3.0, 3.0, norm, false),
        crit(4.0, 4.0, norm, false),
    ];
    let th = vec![0.1 * norm; crits.len()];
    let out = compute(&field, &pts, &reference.dose, &crits, &th, Method::Exact);
    let rates: Vec<f64> = (0..crits.len())
        .map(|c| {
            stats::summarise(out.iter().skip(c).step_by(crits.len()).copied()).pass_rate_percent
        })
        .collect();
    assert!(rates.windows(2).all(|w| w[0] <= w[1]), "{rates:?}");
    assert!(
        rates[0] < rates[5],
        "the sweep should span different pass rates: {rates:?}"
    );
    // One search for six criteria equals six separate searches (proportional criteria, such
    // as 1 %/1 mm, 2 %/2 mm, 3 %/3 mm and 4 %/4 mm, are searched once and scaled: equal up to
    // rounding, the same minimiser in the homogeneous gamma metric).
    for (c, cr) in crits.iter().enumerate() {
        let single = compute(
            &field,
            &pts,
            &reference.dose,
            &[*cr],
            &th[..1],
            Method::Exact,
        );
        for i in 0..pts.len() {
            let (a, b) = (single[i], out[i * crits.len() + c]);
            assert!(
                (a - b).abs() <= 1e-12 * a.abs() || (a.is_nan() && b.is_nan()),
                "criterion {c} point {i}: {a} vs {b}"
            );
        }
    }
}

#[test]
fn proportional_criteria_share_one_search_and_fall_back_beyond_their_radius() {
    // 1 %/1 mm with a 1.5 mm search radius beside 4 %/4 mm with 12 mm: the same metric up to
    // a factor 4 (gamma is homogeneous in the two criteria), but points whose minimiser lies
    // beyond 1.5 mm need their own restricted search. A 3 mm shift and 8 % scaling puts many
    // minimisers there. Every value must equal the separate search (up to rounding).
    let xs = steps(-12.0, 12.0, 1.0);
    let f = blobs(11, 3);
    let reference = grid(&xs, &xs, &[0.0], &f);
    let eval = grid(&xs, &xs, &[0.0], |x, y, z| 1.08 * f(x - 3.0, y, z));
    let field = Field::from_grid(&eval).expect("field");
    let pts: Vec<[f64; 3]> = (0..reference.dose.len())
        .map(|i| [xs[i % xs.len()], xs[i / xs.len()], 0.0])
        .collect();
    let norm = reference.dose.iter().copied().fold(0.0, f64::max);
    let mut tight = crit(1.0, 1.0, norm, false);
    tight.max_search_mm = 1.5;
    let loose = crit(4.0, 4.0, norm, false);
    let th = vec![0.1 * norm; 2];
    for method in [Method::Exact, Method::Nodes] {
        let both = compute(&field, &pts, &reference.dose, &[tight, loose], &th, method);
        let mut fell_back = 0;
        for (c, cr) in [tight, loose].iter().enumerate() {
            let single = compute(&field, &pts, &reference.dose, &[*cr], &th[..1], method);
            for i in 0..pts.len() {
                let (a, b) = (single[i], both[i * 2 + c]);
                assert!(
                    (a - b).abs() <= 1e-12 * a.abs() || (a.is_nan() && b.is_nan()),
                    "{method:?} criterion {c} point {i}: {a} vs {b}"
                );
                if c == 0 && !a.is_nan() && both[i * 2 + 1] * 4.0 > 1.5 {
                    fell_back += 1;
                }
            }
        }
        assert!(
            fell_back > 10,
            "{method:?}: the fallback was exercised {fell_back} times"
        );
    }
}

mod plugin {
    use super::*;
    use beamproof_api::{
        CriteriaSet, Dataset, DatasetData, DoseUnit, GammaCriterion, PointSet, TestInfo,
    };
    use std::collections::BTreeMap;

    fn flat_grid(value: f64) -> Dataset {
        let xs = steps(-10.0, 10.0, 1.0);
        Dataset {
            source: format!("flat-{value}"),
            unit: DoseUnit::Gy,
            data: DatasetData::Grid(grid(&xs, &xs, &[0.0], |_, _, _| value)),
        }
    }

    fn input(
        measured: Dataset,
        calculated: Dataset,
        reference: &str,
        gamma: Vec<GammaCriterion>,
    ) -> AnalysisInput {
        AnalysisInput {
            test: TestInfo::standalone(TestKind::Plane),
            params: BTreeMap::from([
                ("reference".to_string(), serde_json::json!(reference)),
                ("method".to_string(), serde_json::json!("exact")),
                ("relative".to_string(), serde_json::json!(false)),
            ]),
            criteria: CriteriaSet {
                name: "c".into(),
                dose_difference_percent: None,
                gamma,
                metrics: BTreeMap::new(),
            },
            measured: Some(measured),
            calculated: Some(calculated),
            mu: None,
            film: None,
        }
    }

    fn tg218(dose_percent: f64, dta_mm: f64) -> GammaCriterion {
        GammaCriterion::tg218(dose_percent, dta_mm)
    }

    fn metric(out: &AnalysisOutput, id: &str) -> f64 {
        out.metrics
            .iter()
            .find(|m| m.id == id)
            .map(|m| m.value)
            .unwrap_or(f64::NAN)
    }

    #[test]
    fn a_sampled_search_too_fine_for_its_radius_is_refused_before_it_allocates() {
        // 3D, 3 %/3 mm, step 0.01 x DTA over the default 3 x DTA radius: 601^3 offsets, about
        // 2.2e8, over the 2e6 limit; the smallest step allowed is 2 R / (2e6^(1/3) - 1) =
        // 18 mm / 124.99 = 0.14401 mm = 0.048003 x DTA, rounded up to 0.049 (arithmetic from
        // the limit; at 0.049 the cube holds 123^3 = 1.86e6 offsets).
        let xs = steps(-4.0, 4.0, 1.0);
        let cube = |v: f64| Dataset {
            source: format!("cube-{v}"),
            unit: DoseUnit::Gy,
            data: DatasetData::Grid(grid(&xs, &xs, &xs, |_, _, _| v)),
        };
        let mut inp = input(cube(2.0), cube(2.0), "measured", vec![tg218(3.0, 3.0)]);
        inp.test = TestInfo::standalone(TestKind::Volume);
        inp.params
            .insert("method".into(), serde_json::json!("sampled"));
        inp.params
            .insert("sample-step-dta".into(), serde_json::json!(0.01));
        let e = Gamma.analyse(&inp).expect_err("refused");
        assert!(
            e.message.contains("would sample 217081801 offsets")
                && e.message
                    .contains("raise `sample-step-dta` to at least 0.049"),
            "{}",
            e.message
        );
        inp.params
            .insert("sample-step-dta".into(), serde_json::json!(0.049));
        assert!(Gamma.analyse(&inp).is_ok());
    }

    #[test]
    fn swapping_the_reference_changes_the_normalisation() {
        // Flat 2.00 Gy measured against 2.04 Gy calculated, 3 %/2 mm global to the reference
        // maximum: measured as reference, dD = 0.06 Gy and gamma = 0.04/0.06 = 2/3; calculated
        // as reference, dD = 0.0612 Gy and gamma = 0.04/0.0612 = 0.6536 (gamma is not symmetric).
        let out = Gamma
            .analyse(&input(
                flat_grid(2.0),
                flat_grid(2.04),
                "measured",
                vec![tg218(3.0, 2.0)],
            ))
            .expect("runs");
        assert!((metric(&out, "gamma-max") - 2.0 / 3.0).abs() < 1e-9);
        let out = Gamma
            .analyse(&input(
                flat_grid(2.0),
                flat_grid(2.04),
                "calculated",
                vec![tg218(3.0, 2.0)],
            ))
            .expect("runs");
        assert!((metric(&out, "gamma-max") - 0.04 / 0.0612).abs() < 1e-9);
        assert_eq!(out.status, Some(Status::Pass));
    }

    #[test]
    fn pass_rate_is_judged_against_tolerance_and_action() {
        // Flat 2.0 against 2.07: gamma = 0.07/0.06 = 1.17 everywhere, pass rate 0 %: FAIL.
        let out = Gamma
            .analyse(&input(
                flat_grid(2.0),
                flat_grid(2.07),
                "measured",
                vec![tg218(3.0, 2.0), tg218(4.0, 2.0)],
            ))
            .expect("runs");
        assert_eq!(metric(&out, "pass-rate:3%/2mm-global"), 0.0);
        assert_eq!(metric(&out, "pass-rate:4%/2mm-global"), 100.0);
        assert_eq!(out.status, Some(Status::Fail));
    }

    #[test]
    fn a_sweep_shows_every_statistic_only_when_asked() {
        // Flat 2.00 Gy against 2.07 Gy (Low et al 1998: gamma = 0.07 Gy / dD in a flat
        // field, dD a percentage of 2.00 Gy): 3 %/2 mm 1.17, 2 %/2 mm 1.75, 1 %/1 mm 3.5,
        // 4 %/4 mm 0.875. By default the criteria proportional to each other but not to the
        // first get exact pass rates and no other statistics; `every-criterion` gives them all.
        let crits = vec![
            tg218(3.0, 2.0),
            tg218(2.0, 2.0),
            tg218(1.0, 1.0),
            tg218(4.0, 4.0),
        ];
        let mut runs = Vec::new();
        for every in [false, true] {
            let mut inp = input(flat_grid(2.0), flat_grid(2.07), "measured", crits.clone());
            if every {
                inp.params
                    .insert("statistics".into(), serde_json::json!("every-criterion"));
            }
            runs.push(Gamma.analyse(&inp).expect("runs"));
        }
        let (first, every) = (&runs[0], &runs[1]);
        for (c, id, rate) in [
            (0, "pass-rate:3%/2mm-global", 0.0),
            (1, "pass-rate:2%/2mm-global", 0.0),
            (2, "pass-rate:1%/1mm-global", 0.0),
            (3, "pass-rate:4%/4mm-global", 100.0),
        ] {
            assert_eq!(metric(first, id), rate, "{id}");
            assert_eq!(metric(every, id), rate, "{id}");
            let row = &first.tables[0].rows[c];
            // Columns 4..9: mean, median, P95, P99, max.
            let shown = row[4..9].iter().all(|v| v != NOT_COMPUTED);
            assert_eq!(shown, c == 0, "row {c}: {row:?}");
        }
        assert_eq!(first.tables[0].rows[0][8], "1.17");
        assert_eq!(every.tables[0].rows[1][8], "1.75");
        assert_eq!(every.tables[0].rows[2][8], "3.50");
        assert!(
            first
                .notes
                .iter()
                .any(|n| n.contains("exact pass rates only"))
        );
        assert!(
            !every
                .notes
                .iter()
                .any(|n| n.contains("exact pass rates only"))
        );
    }

    #[test]
    fn bad_inputs_are_errors_not_silent_passes() {
        let no_gamma = Gamma
            .analyse(&input(flat_grid(2.0), flat_grid(2.0), "measured", vec![]))
            .expect_err("no criteria");
        assert_eq!(
            no_gamma.message,
            "criteria set `c` has no `gamma` criteria, which the gamma analysis needs"
        );
        let mut negative = flat_grid(2.0);
        if let DatasetData::Grid(g) = &mut negative.data {
            g.dose[5] = -0.1;
        }
        let e = Gamma
            .analyse(&input(
                negative,
                flat_grid(2.0),
                "measured",
                vec![tg218(3.0, 2.0)],
            ))
            .expect_err("negative");
        assert_eq!(
            e.message,
            "`flat-2` holds an invalid dose (-0.1) at value 6: doses must be finite and not negative"
        );
        let e = Gamma
            .analyse(&input(
                flat_grid(0.0),
                flat_grid(2.0),
                "measured",
                vec![tg218(3.0, 2.0)],
            ))
            .expect_err("zero");
        assert_eq!(
            e.message,
            "the normalisation dose is zero: the reference holds no positive dose"
        );
        let far = Dataset {
            source: "far.csv".into(),
            unit: DoseUnit::Gy,
            data: DatasetData::Points(PointSet {
                labels: vec![String::new()],
                x_mm: vec![50.0],
                y_mm: vec![0.0],
                z_mm: vec![0.0],
                dose: vec![2.0],
            }),
        };
        let e = Gamma
            .analyse(&input(
                far,
                flat_grid(2.0),
                "measured",
                vec![tg218(3.0, 2.0)],
            ))
            .expect_err("no overlap");
        assert_eq!(
            e.message,
            "no overlap: no reference point of `far.csv` lies inside the evaluated grid of `flat-2`"
        );
    }

    #[test]
    fn a_3d_reference_gets_three_slices_through_its_worst_point() {
        // Reference flat 2 Gy except one voxel at 2.2 Gy; evaluated flat 2 Gy: the worst gamma
        // is at that voxel (0.2/0.066 = 3.03 at 3 %/2 mm of the 2.2 Gy maximum), and each
        // slice passes through it.
        let xs = steps(-4.0, 4.0, 1.0);
        let zs = steps(-2.0, 2.0, 1.0);
        let mut r = grid(&xs, &xs, &zs, |_, _, _| 2.0);
        let hot = (3 * xs.len() + 6) * xs.len() + 2; // z index 3, y index 6, x index 2
        r.dose[hot] = 2.2;
        let reference = Dataset {
            source: "r".into(),
            unit: DoseUnit::Gy,
            data: DatasetData::Grid(r),
        };
        let evaluated = Dataset {
            source: "e".into(),
            unit: DoseUnit::Gy,
            data: DatasetData::Grid(grid(&xs, &xs, &zs, |_, _, _| 2.0)),
        };
        let out = Gamma
            .analyse(&input(
                reference,
                evaluated,
                "measured",
                vec![tg218(3.0, 2.0)],
            ))
            .expect("runs");
        let titles: Vec<&str> = out
            .figures
            .iter()
            .filter_map(|f| match f {
                Figure::Map { title, .. } => Some(title.as_str()),
                _ => None,
            })
            .collect();
        assert_eq!(
            titles,
            [
                "Gamma (3%/2mm global), XY plane through the worst point, Z = 1.0 mm",
                "Dose difference, evaluated - reference, in % of the normalisation dose, XY plane through the worst point, Z = 1.0 mm",
                "Gamma (3%/2mm global), XZ plane through the worst point, Y = 2.0 mm",
                "Dose difference, evaluated - reference, in % of the normalisation dose, XZ plane through the worst point, Y = 2.0 mm",
                "Gamma (3%/2mm global), YZ plane through the worst point, X = -2.0 mm",
                "Dose difference, evaluated - reference, in % of the normalisation dose, YZ plane through the worst point, X = -2.0 mm",
            ]
        );
        // The hot point's dose difference on each plane: evaluated 2.0 - reference 2.2 Gy in %
        // of the normalisation dose (the reference maximum, 2.2 Gy): -9.09 % (arithmetic);
        // everywhere else 0.
        let diffs: Vec<Vec<f64>> = out
            .figures
            .iter()
            .filter_map(|f| match f {
                Figure::Map {
                    quantity, values, ..
                } if quantity == "dose difference" => {
                    Some(values.iter().flatten().copied().collect())
                }
                _ => None,
            })
            .collect();
        assert_eq!(diffs.len(), 3);
        for d in diffs {
            let min = d.iter().copied().fold(f64::INFINITY, f64::min);
            assert!((min - 100.0 * (2.0 - 2.2) / 2.2).abs() < 1e-9, "{min}");
            assert_eq!(d.iter().filter(|v| v.abs() > 1e-12).count(), 1);
        }
    }

    #[test]
    fn normalisation_point_sets_the_global_dose_criterion() {
        // Reference points iso (1.0 Gy) and hot (2.0 Gy) against a flat 1.02 Gy grid, 3 %/2 mm:
        // normalised to the maximum (2.0 Gy) dD = 0.06 and gamma(iso) = 0.02/0.06 = 1/3;
        // normalised to `iso` dD = 0.03 and gamma(iso) = 2/3 (definition of global dD).
        let pts = Dataset {
            source: "chambers.csv".into(),
            unit: DoseUnit::Gy,
            data: DatasetData::Points(PointSet {
                labels: vec!["iso".into(), "hot".into()],
                x_mm: vec![0.0, 1.0],
                y_mm: vec![0.0; 2],
                z_mm: vec![0.0; 2],
                dose: vec![1.0, 2.0],
            }),
        };
        let mut inp = input(
            pts,
            flat_grid(1.02),
            "measured",
            vec![GammaCriterion {
                threshold_percent: 0.0,
                ..tg218(3.0, 2.0)
            }],
        );
        let (_, by_max) = analyse_with_points(&inp).expect("runs");
        assert!(
            (by_max.gamma[0] - 1.0 / 3.0).abs() < 1e-9,
            "{:?}",
            by_max.gamma
        );
        inp.params
            .insert("normalisation-point".into(), serde_json::json!("iso"));
        let (_, by_iso) = analyse_with_points(&inp).expect("runs");
        assert!(
            (by_iso.gamma[0] - 2.0 / 3.0).abs() < 1e-9,
            "{:?}",
            by_iso.gamma
        );
        inp.params
            .insert("normalisation-point".into(), serde_json::json!("nowhere"));
        let e = analyse_with_points(&inp).expect_err("unknown label");
        assert_eq!(
            e.message,
            "`chambers.csv` has no point labelled `nowhere` to normalise to"
        );
    }

    #[test]
    fn relative_comparison_at_a_point_removes_a_uniform_scaling() {
        // Flat 2.0 against flat 2.1 Gy: absolute gamma 0.1/0.06 = 1.67; relative to each
        // distribution's dose at (0, 0, 0) both are 100 % and gamma is 0.
        let mut inp = input(
            flat_grid(2.0),
            flat_grid(2.1),
            "measured",
            vec![tg218(3.0, 2.0)],
        );
        let (_, absolute) = analyse_with_points(&inp).expect("runs");
        assert!((absolute.gamma[0] - 0.1 / 0.06).abs() < 1e-9);
        inp.params
            .insert("relative".into(), serde_json::json!(true));
        inp.params
            .insert("normalisation-point".into(), serde_json::json!("0, 0, 0"));
        let (out, relative) = analyse_with_points(&inp).expect("runs");
        assert!(
            relative.gamma.iter().all(|&g| g.abs() < 1e-12),
            "{:?}",
            &relative.gamma[..3]
        );
        assert_eq!(out.status, Some(Status::Pass));
    }

    #[test]
    fn points_outside_the_grid_are_reported_not_counted() {
        let pts = Dataset {
            source: "array.csv".into(),
            unit: DoseUnit::Gy,
            data: DatasetData::Points(PointSet {
                labels: vec![String::new(); 3],
                x_mm: vec![0.0, 5.0, 30.0],
                y_mm: vec![0.0; 3],
                z_mm: vec![0.0; 3],
                dose: vec![2.0; 3],
            }),
        };
        let out = Gamma
            .analyse(&input(
                pts,
                flat_grid(2.0),
                "measured",
                vec![tg218(3.0, 2.0)],
            ))
            .expect("runs");
        assert_eq!(metric(&out, "points-evaluated"), 2.0);
        assert!(out.notes.iter().any(|n| n == "Reference points outside the evaluated grid, not evaluated (only the overlap is analysed): 1."), "{:?}", out.notes);
    }
}

#[test]
fn a_criterion_with_no_point_above_threshold_is_an_error_not_a_pass() {
    // Every reference dose below a 99 % threshold except none: nothing is evaluated.
    use beamproof_api::{CriteriaSet, Dataset, DatasetData, DoseUnit, GammaCriterion, TestInfo};
    let xs = steps(-5.0, 5.0, 1.0);
    let r = grid(&xs, &xs, &[0.0], |x, _, _| 1.0 + 0.01 * x);
    let e = grid(&xs, &xs, &[0.0], |_, _, _| 1.0);
    let input = AnalysisInput {
        test: TestInfo::standalone(TestKind::Plane),
        params: std::collections::BTreeMap::from([
            ("reference".to_string(), serde_json::json!("measured")),
            ("method".to_string(), serde_json::json!("exact")),
        ]),
        criteria: CriteriaSet {
            name: "c".into(),
            dose_difference_percent: None,
            gamma: vec![GammaCriterion {
                threshold_percent: 99.0,
                normalisation_dose_gy: Some(2.0),
                ..GammaCriterion::tg218(3.0, 2.0)
            }],
            metrics: std::collections::BTreeMap::new(),
        },
        measured: Some(Dataset {
            source: "r".into(),
            unit: DoseUnit::Gy,
            data: DatasetData::Grid(r),
        }),
        calculated: Some(Dataset {
            source: "e".into(),
            unit: DoseUnit::Gy,
            data: DatasetData::Grid(e),
        }),
        mu: None,
        film: None,
    };
    let out = Gamma.analyse(&input).expect("runs");
    assert_eq!(out.status, Some(Status::Error));
    assert!(out.metrics[0].value.is_nan());
    assert_eq!(out.tables[0].rows[0][3], "n/a");
    // The undefined value crosses JSON as null.
    let json = serde_json::to_string(&out).expect("json");
    let back: AnalysisOutput = serde_json::from_str(&json).expect("back");
    assert!(back.metrics[0].value.is_nan());
}
