//! The gamma search for one reference point, for several criteria at once.
//!
//! Gamma (Low, Harms, Mutic & Purdy, Med Phys 1998;25:656-661) is the smallest generalised
//! distance from the reference point (r, D_r) to the evaluated distribution in normalised
//! space-dose coordinates: Gamma = sqrt(|r_e - r|^2 / dd^2 + (D_e(r_e) - D_r)^2 / dD^2).
//!
//! `Method::Exact` treats the evaluated distribution as its simplicial linear interpolant and
//! computes the exact distance to each simplex (Ju et al, Med Phys 2008;35:879-887), so the
//! result has no sampling error. The search starts from the bound given by the evaluated dose
//! at the point itself (distance zero), visits cells in order of increasing distance and stops
//! once distance alone reaches the best value found, as in Wendling et al (Med Phys
//! 2007;34:1647-1654); a cell is also skipped when its dose range cannot beat the best value.
//! `Method::Nodes` uses the grid nodes only (no interpolation), for comparison with the
//! resolution rule of Low & Dempsey (Med Phys 2003;30:2455-2464).

use crate::field::{Field, MAX_DIMS, kuhn_orders};
use crate::star::{NodeTable, PointCriteria, search_node};

/// How the evaluated distribution is searched.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Method {
    /// Exact distance to the simplicial interpolant.
    Exact,
    /// Grid nodes only.
    Nodes,
    /// Multilinear interpolation sampled on a lattice of the given step (mm) around the
    /// point, visited in order of increasing distance (Wendling et al 2007).
    Sampled { step_mm: f64 },
}

/// Lattice offsets within a radius, sorted by distance: the visiting order of the sampled
/// search, built once per computation.
#[derive(Debug, Clone, Default)]
pub struct Offsets {
    /// (distance in mm, offset along each active axis).
    pub list: Vec<(f64, [f64; MAX_DIMS])>,
}

/// Most lattice offsets the sampled search tabulates (the cube around a point): bounds its
/// table to 64 MB and its work per point.
pub const MAX_SAMPLED_OFFSETS: usize = 2_000_000;

impl Offsets {
    /// Every lattice point of spacing `step` along the first `k` axes within `radius`.
    pub fn new(k: usize, step: f64, radius: f64) -> Offsets {
        let m = (radius / step).floor() as i64;
        let span = |a: usize| if a < k { -m..=m } else { 0..=0 };
        let mut list = Vec::new();
        for i in span(0) {
            for j in span(1) {
                for l in span(2) {
                    let o = [i as f64 * step, j as f64 * step, l as f64 * step];
                    let d = (o[0] * o[0] + o[1] * o[1] + o[2] * o[2]).sqrt();
                    if d <= radius * (1.0 + 1e-12) {
                        list.push((d, o));
                    }
                }
            }
        }
        list.sort_by(|p, q| {
            p.0.total_cmp(&q.0)
                .then(p.1.partial_cmp(&q.1).unwrap_or(std::cmp::Ordering::Equal))
        });
        Offsets { list }
    }
}

/// Gamma by the sampled search: multilinear dose at lattice offsets in order of distance,
/// stopping once distance alone reaches the best value of every criterion.
pub fn gamma_sampled(
    field: &Field,
    crits: &[Criterion],
    offsets: &Offsets,
    pos: [f64; 3],
    d_ref: f64,
    out: &mut [f64],
) -> bool {
    let Some(u) = field.local(pos) else {
        return false;
    };
    let nc = crits.len();
    for o in out.iter_mut().take(nc) {
        *o = f64::INFINITY;
    }
    for &(d, off) in &offsets.list {
        if (0..nc).all(|c| d / crits[c].dta_mm >= out[c]) {
            break;
        }
        let mut q = u;
        for a in 0..field.k {
            q[a] += off[a];
        }
        if !field.contains(&q) {
            continue;
        }
        let diff = field.multilinear(&q) - d_ref;
        for (c, cr) in crits.iter().enumerate() {
            if d > cr.max_search_mm * (1.0 + 1e-12) {
                continue;
            }
            let dd = cr.delta_dose(d_ref);
            let g = ((d / cr.dta_mm).powi(2) + (diff / dd).powi(2)).sqrt();
            if g < out[c] {
                out[c] = g;
            }
        }
    }
    true
}

/// One criterion in absolute terms.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Criterion {
    /// Dose criterion as a fraction (0.03 for 3 %).
    pub dose_fraction: f64,
    pub dta_mm: f64,
    /// Local: the dose criterion is a fraction of each reference dose; global: of `norm_dose`.
    pub local: bool,
    /// Global normalisation dose (dose units of the data).
    pub norm_dose: f64,
    /// Search radius, mm: every cell that reaches within this distance is searched whole.
    /// Gamma values above `max_search_mm / dta_mm` are therefore upper bounds of the
    /// unrestricted gamma; values below it are exact.
    pub max_search_mm: f64,
}

impl Criterion {
    /// The dose criterion for a reference dose.
    #[inline]
    pub fn delta_dose(&self, d_ref: f64) -> f64 {
        if self.local {
            self.dose_fraction * d_ref
        } else {
            self.dose_fraction * self.norm_dose
        }
    }
}

/// Reusable per-thread memory for the search (no allocation per point).
#[derive(Default)]
pub struct Scratch {
    cells: Vec<(f64, [usize; MAX_DIMS])>,
}

/// How a point is searched: the method and, for the exact method on an evenly spaced grid,
/// the table of simplices around a node (built once per computation).
#[derive(Debug, Clone, Copy)]
pub struct Plan<'a> {
    pub method: Method,
    pub table: Option<&'a NodeTable>,
    /// Per criterion, the pass/fail marks of `star::PointCriteria::marks` (empty: the minimum
    /// is wanted). Only the tabulated walk stops early for them; every other search returns
    /// minima, which settle every mark too.
    pub marks: &'a [&'a [f64]],
}

/// Compute gamma of one reference point for every criterion into `out`. Returns false when the
/// point lies outside the evaluated grid (not evaluated). The caller guarantees a positive dose
/// criterion (`delta_dose(d_ref) > 0`) for each criterion.
pub fn gamma_at(
    field: &Field,
    crits: &[Criterion],
    plan: Plan,
    pos: [f64; 3],
    d_ref: f64,
    scratch: &mut Scratch,
    out: &mut [f64],
) -> bool {
    // One copy of the search per dimension, so that every loop over the axes has a constant
    // length and unrolls.
    match field.k {
        1 => gamma_at_k::<1>(field, crits, plan, pos, d_ref, scratch, out),
        2 => gamma_at_k::<2>(field, crits, plan, pos, d_ref, scratch, out),
        _ => gamma_at_k::<3>(field, crits, plan, pos, d_ref, scratch, out),
    }
}

fn gamma_at_k<const K: usize>(
    field: &Field,
    crits: &[Criterion],
    plan: Plan,
    pos: [f64; 3],
    d_ref: f64,
    scratch: &mut Scratch,
    out: &mut [f64],
) -> bool {
    let Some(u) = field.local(pos) else {
        return false;
    };
    let Plan {
        method,
        table,
        marks,
    } = plan;
    let k = K;
    let nc = crits.len();
    let mut dd = [0.0; 16];
    let mut dt = [0.0; 16];
    for (c, cr) in crits.iter().enumerate().take(16) {
        dd[c] = cr.delta_dose(d_ref);
        dt[c] = cr.dta_mm;
    }
    // A tight upper bound keeps the search radius small. Interpolating methods: the evaluated
    // dose at the point itself, then a few Gauss-Newton steps on the interpolant. Nodes only:
    // the 3^k nodes around the nearest one.
    if method == Method::Nodes {
        for o in out.iter_mut().take(nc) {
            *o = f64::INFINITY;
        }
        let mut first = [0usize; MAX_DIMS];
        let mut count = [1usize; MAX_DIMS];
        for a in 0..k {
            let ax = &field.axes[a];
            let cell = field.cell_of(a, u[a]);
            let nearest = if u[a] - ax[cell] <= ax[cell + 1] - u[a] {
                cell
            } else {
                cell + 1
            };
            first[a] = nearest.saturating_sub(1);
            count[a] = (nearest + 2).min(ax.len()) - first[a];
        }
        for i0 in 0..count[0] {
            for i1 in 0..count[1] {
                for i2 in 0..count[2] {
                    let n = [first[0] + i0, first[1] + i1, first[2] + i2];
                    let mut s2 = 0.0;
                    for a in 0..k {
                        let x = field.axes[a][n[a]] - u[a];
                        s2 += x * x;
                    }
                    let dn = field.node(&n) - d_ref;
                    for c in 0..nc {
                        if s2 <= crits[c].max_search_mm * crits[c].max_search_mm {
                            let g2 = s2 / (dt[c] * dt[c]) + dn * dn / (dd[c] * dd[c]);
                            if g2 < out[c] * out[c] {
                                out[c] = g2.sqrt();
                            }
                        }
                    }
                }
            }
        }
    } else {
        // A point on a node of an evenly spaced grid: the tabulated search, finished unless a
        // search radius leaves the table; then its values seed the general search.
        let mut seeded = false;
        if method == Method::Exact
            && let Some(t) = table
            && let Some(node) = field.node_at(&u)
        {
            let pc = PointCriteria {
                crits,
                dd: &dd[..nc],
                dt: &dt[..nc],
                marks,
            };
            if search_node::<K>(field, t, &pc, node, d_ref, out) {
                return true;
            }
            seeded = true;
        }
        let d0 = field.interpolate(&u);
        for c in 0..nc {
            let start = if seeded { out[c] } else { f64::INFINITY };
            out[c] = start.min((d0 - d_ref).abs() / dd[c]).min(descend(
                field,
                &u,
                d_ref,
                dd[c],
                dt[c],
                crits[c].max_search_mm,
            ));
        }
    }
    let mut radius: f64 = 0.0;
    for c in 0..nc {
        radius = radius.max((out[c] * dt[c]).min(crits[c].max_search_mm));
    }
    if radius <= 0.0 && method != Method::Nodes {
        return true;
    }
    // Cells whose box lies within the radius, sorted by their distance from the point.
    let mut lo = [0usize; MAX_DIMS];
    let mut hi = [0usize; MAX_DIMS];
    // A cell that only touches the search radius at a node counts, so widen by a rounding margin.
    let reach = radius * (1.0 + 1e-12) + 1e-12;
    for a in 0..k {
        lo[a] = field.cell_of(a, u[a] - reach);
        hi[a] = field.cell_of(a, u[a] + reach);
    }
    scratch.cells.clear();
    let mut idx = lo;
    loop {
        let mut d2 = 0.0;
        for a in 0..k {
            let ax = &field.axes[a];
            let (x0, x1) = (ax[idx[a]], ax[idx[a] + 1]);
            let g = if u[a] < x0 {
                x0 - u[a]
            } else if u[a] > x1 {
                u[a] - x1
            } else {
                0.0
            };
            d2 += g * g;
        }
        if d2 <= radius * radius * (1.0 + 1e-12) {
            scratch.cells.push((d2, idx));
        }
        // Next cell index (odometer).
        let mut a = 0;
        loop {
            if a == k {
                break;
            }
            if idx[a] < hi[a] {
                idx[a] += 1;
                break;
            }
            idx[a] = lo[a];
            a += 1;
        }
        if a == k {
            break;
        }
    }
    scratch.cells.sort_unstable_by(|p, q| p.0.total_cmp(&q.0));

    let corners = 1usize << k;
    for &(d2, cell) in &scratch.cells {
        let d = d2.sqrt();
        if (0..nc).all(|c| d2 / (dt[c] * dt[c]) >= out[c] * out[c]) {
            break;
        }
        // Corner doses and the cell's dose range.
        let mut cd = [0.0; 8];
        let (mut dmin, mut dmax) = (f64::INFINITY, f64::NEG_INFINITY);
        for (bits, slot) in cd.iter_mut().enumerate().take(corners) {
            let mut n = cell;
            for (a, na) in n.iter_mut().enumerate().take(k) {
                *na += (bits >> a) & 1;
            }
            *slot = field.node(&n);
            dmin = dmin.min(*slot);
            dmax = dmax.max(*slot);
        }
        let dose_gap = if d_ref < dmin {
            dmin - d_ref
        } else if d_ref > dmax {
            d_ref - dmax
        } else {
            0.0
        };
        match method {
            Method::Nodes => {
                for (bits, &dn) in cd.iter().enumerate().take(corners) {
                    let mut s2 = 0.0;
                    for a in 0..k {
                        let x = field.axes[a][cell[a] + ((bits >> a) & 1)] - u[a];
                        s2 += x * x;
                    }
                    for c in 0..nc {
                        if s2.sqrt() > crits[c].max_search_mm * (1.0 + 1e-12) {
                            continue;
                        }
                        let g =
                            (s2 / (dt[c] * dt[c]) + (dn - d_ref).powi(2) / (dd[c] * dd[c])).sqrt();
                        if g < out[c] {
                            out[c] = g;
                        }
                    }
                }
            }
            Method::Exact | Method::Sampled { .. } => {
                // Cell geometry shared by every simplex and criterion: origin, spacing, and the
                // point's fractional coordinates (outside 0..1 when the point is outside).
                let mut h = [0.0; MAX_DIMS];
                let mut fu = [0.0; MAX_DIMS];
                for a in 0..k {
                    let x0 = field.axes[a][cell[a]];
                    h[a] = field.axes[a][cell[a] + 1] - x0;
                    fu[a] = (u[a] - x0) / h[a];
                }
                // Cell bound: with p the cell's point nearest to u, every x of the cell has
                // |x - u|^2 >= d^2 + |x - p|^2 (projection onto a convex set). Along the
                // segment from p to x the dose changes by gradient components that are edge
                // slopes of the cell, and x_a - p_a keeps one sign on every axis where u lies
                // outside the cell's span (the cell is on one side of the point). So D(x) can
                // move towards d_ref by at most lambda |x - p|, lambda the norm over the axes of
                // the largest edge slope in the helpful direction (either direction where u
                // lies within the span). The minimum over r = |x - p| of
                // r^2/dt^2 + (|D(p) - d_ref| - lambda r)^2/dd^2 is the plane formula below.
                let mut pf = [0.0; MAX_DIMS];
                for a in 0..k {
                    pf[a] = fu[a].clamp(0.0, 1.0);
                }
                let mut po = [0, 1, 2];
                po[..k].sort_unstable_by(|&p, &q| pf[q].total_cmp(&pf[p]));
                let mut bits = 0usize;
                let mut dp = cd[0] * (1.0 - pf[po[0]]);
                for j in 0..k {
                    bits |= 1 << po[j];
                    let next = if j + 1 < k { pf[po[j + 1]] } else { 0.0 };
                    dp += cd[bits] * (pf[po[j]] - next);
                }
                let delta_p = dp - d_ref;
                // Helpful direction: towards lower dose when the cell's nearest point is above
                // the reference dose, towards higher dose when below.
                let want = if delta_p > 0.0 { -1.0 } else { 1.0 };
                let mut lambda2 = 0.0;
                for a in 0..k {
                    // Sign of x_a - p_a over the cell: +1 above the point, -1 below, 0 both.
                    let side = if fu[a] <= 0.0 {
                        1.0
                    } else if fu[a] >= 1.0 {
                        -1.0
                    } else {
                        0.0
                    };
                    let mut slope: f64 = 0.0;
                    for b in 0..corners {
                        if b & (1 << a) == 0 {
                            let e = cd[b | (1 << a)] - cd[b];
                            let rate = if side == 0.0 {
                                e.abs()
                            } else {
                                (want * side * e).max(0.0)
                            };
                            slope = slope.max(rate);
                        }
                    }
                    lambda2 += (slope / h[a]) * (slope / h[a]);
                }
                let mut cell_lb2 = [0.0; 16];
                let mut any = false;
                for c in 0..nc {
                    cell_lb2[c] = d2 / (dt[c] * dt[c])
                        + delta_p * delta_p / (dd[c] * dd[c] + lambda2 * dt[c] * dt[c]);
                    any |= cell_lb2[c] < out[c] * out[c];
                }
                if !any {
                    continue;
                }
                for order in kuhn_orders(k) {
                    // The simplex's linear function: dose at the origin plus one step per axis
                    // in Kuhn order; its gradient (dose per mm) and its value at the point.
                    let mut g = [0.0; MAX_DIMS];
                    let mut bits = 0usize;
                    let mut lin_u = cd[0];
                    let mut g_sq = 0.0;
                    let (mut smin, mut smax) = (cd[0], cd[0]);
                    for j in 0..k {
                        let a = order[j];
                        let step = cd[bits | (1 << a)] - cd[bits];
                        bits |= 1 << a;
                        smin = smin.min(cd[bits]);
                        smax = smax.max(cd[bits]);
                        g[a] = step / h[a];
                        g_sq += g[a] * g[a];
                        lin_u += step * fu[a];
                    }
                    let delta = lin_u - d_ref;
                    // The simplex's own dose range bounds it more tightly than the cell's.
                    let simplex_gap = if d_ref < smin {
                        smin - d_ref
                    } else if d_ref > smax {
                        d_ref - smax
                    } else {
                        0.0
                    };
                    for c in 0..nc {
                        if d > crits[c].max_search_mm * (1.0 + 1e-12) {
                            continue;
                        }
                        let lb2 = (d2 / (dt[c] * dt[c])
                            + (simplex_gap.max(dose_gap) / dd[c]).powi(2))
                        .max(cell_lb2[c]);
                        let best2 = out[c] * out[c];
                        if lb2 >= best2 {
                            continue;
                        }
                        // Distance to the simplex's hyperplane in normalised space: a lower
                        // bound of the distance to the simplex, and equal to it when the foot
                        // of the perpendicular lies inside the simplex.
                        let denom = dd[c] * dd[c] + dt[c] * dt[c] * g_sq;
                        let plane2 = delta * delta / denom;
                        if plane2 >= best2 {
                            continue;
                        }
                        let shift = dt[c] * dt[c] * delta / denom;
                        let mut f = [0.0; MAX_DIMS];
                        for a in 0..k {
                            f[a] = fu[a] - shift * g[a] / h[a];
                        }
                        let inside = f[order[0]] <= 1.0
                            && (1..k).all(|j| f[order[j - 1]] >= f[order[j]])
                            && f[order[k - 1]] >= 0.0;
                        if !inside {
                            // Pythagoras in the hyperplane: the distance to the simplex is the
                            // plane distance plus the in-plane distance from the foot, which is
                            // at least the spatial distance from the foot to the simplex (over
                            // dt). That spatial distance is at least the distance to the cell
                            // box and to each violated Kuhn ordering half-space.
                            let mut box2 = 0.0;
                            for a in 0..k {
                                let e = if f[a] < 0.0 {
                                    -f[a]
                                } else if f[a] > 1.0 {
                                    f[a] - 1.0
                                } else {
                                    0.0
                                } * h[a];
                                box2 += e * e;
                            }
                            let mut s2 = box2;
                            for j in 1..k {
                                let (p, q) = (order[j - 1], order[j]);
                                let v = f[q] - f[p];
                                if v > 0.0 {
                                    let hs2 = v * v / (1.0 / (h[p] * h[p]) + 1.0 / (h[q] * h[q]));
                                    s2 = s2.max(hs2);
                                }
                            }
                            if plane2 + s2 / (dt[c] * dt[c]) >= best2 {
                                continue;
                            }
                        }
                        let g2 = if inside {
                            plane2
                        } else {
                            let mut w = [[0.0; 4]; 4];
                            let mut vb = 0usize;
                            for (j, wj) in w.iter_mut().enumerate().take(k + 1) {
                                if j > 0 {
                                    vb |= 1 << order[j - 1];
                                }
                                for a in 0..k {
                                    let x = field.axes[a][cell[a] + ((vb >> a) & 1)];
                                    wj[a] = (x - u[a]) / dt[c];
                                }
                                wj[k] = (cd[vb] - d_ref) / dd[c];
                            }
                            // Barycentric coordinates of the foot in Kuhn order: 1 - f0,
                            // f0 - f1, ..., f(k-1); the minimum lies on a face opposite a
                            // vertex with a negative coordinate.
                            let mut bary = [0.0; 4];
                            bary[0] = 1.0 - f[order[0]];
                            for j in 1..k {
                                bary[j] = f[order[j - 1]] - f[order[j]];
                            }
                            bary[k] = f[order[k - 1]];
                            face_minimum(&w, &bary, k)
                        };
                        if g2 < best2 {
                            out[c] = g2.max(0.0).sqrt();
                        }
                    }
                }
            }
        }
    }
    true
}

/// An achievable gamma near the point, found by Gauss-Newton steps on the interpolant: from the
/// surface point above `x`, move to the foot of the perpendicular on its tangent plane, keep the
/// best value seen. It is an upper bound of gamma (every value is attained by the interpolant),
/// usually close to it, so the exact search that follows has a small radius.
fn descend(field: &Field, u: &[f64; MAX_DIMS], d_ref: f64, dd: f64, dt: f64, max_mm: f64) -> f64 {
    const STEPS: usize = 3;
    let k = field.k;
    let mut x = *u;
    let mut best2 = f64::INFINITY;
    for _ in 0..STEPS {
        let (dx, g) = field.interpolate_with_gradient(&x);
        // Tangent plane at x, written around u: D(y) ~ delta + g.(y - u) + d_ref.
        let mut delta = dx - d_ref;
        let mut g_sq = 0.0;
        for a in 0..k {
            delta += g[a] * (u[a] - x[a]);
            g_sq += g[a] * g[a];
        }
        let shift = dt * dt * delta / (dd * dd + dt * dt * g_sq);
        let mut s2 = 0.0;
        for a in 0..k {
            let ax = &field.axes[a];
            x[a] = (u[a] - shift * g[a]).clamp(ax[0], ax[ax.len() - 1]);
            s2 += (x[a] - u[a]) * (x[a] - u[a]);
        }
        if s2 > max_mm * max_mm {
            break;
        }
        let dv = field.interpolate(&x) - d_ref;
        let g2 = s2 / (dt * dt) + dv * dv / (dd * dd);
        if g2 < best2 {
            best2 = g2;
        } else {
            break;
        }
    }
    best2.sqrt()
}

/// Squared distance from the origin to a simplex with vertices `w[0..=k]` in `k + 1`
/// dimensions (normalised space and dose), when the foot of the perpendicular onto its
/// hyperplane has barycentric coordinates `bary` with at least one negative: the minimum of a
/// convex quadratic over the simplex then lies on a face opposite a vertex with a negative
/// coordinate.
#[inline]
pub fn face_minimum(w: &[[f64; 4]; 4], bary: &[f64; 4], k: usize) -> f64 {
    let mut m = f64::INFINITY;
    for drop in 0..=k {
        if bary[drop] < 0.0 {
            m = m.min(face_sq(w, drop, k));
        }
    }
    m
}

/// Squared distance from the origin to the face of the simplex `w[0..=k]` opposite vertex
/// `drop`, in `k + 1` dimensions.
#[inline]
pub fn face_sq(w: &[[f64; 4]; 4], drop: usize, k: usize) -> f64 {
    let mut face = [[0.0; 4]; 3];
    let mut t = 0;
    for v in 0..=k {
        if v != drop {
            face[t] = w[v];
            t += 1;
        }
    }
    match t {
        3 => triangle_sq(&face[0], &face[1], &face[2], k + 1),
        2 => segment_sq(&face[0], &face[1], k + 1),
        _ => dot(&face[0], &face[0], k + 1),
    }
}

#[inline]
fn dot(a: &[f64; 4], b: &[f64; 4], m: usize) -> f64 {
    (0..m).map(|i| a[i] * b[i]).sum()
}

/// Squared distance from the origin to the segment [a, b] in `m` dimensions.
#[inline]
pub fn segment_sq(a: &[f64; 4], b: &[f64; 4], m: usize) -> f64 {
    let mut ab = [0.0; 4];
    for i in 0..m {
        ab[i] = b[i] - a[i];
    }
    let len2 = dot(&ab, &ab, m);
    let t = if len2 > 0.0 {
        (-dot(a, &ab, m) / len2).clamp(0.0, 1.0)
    } else {
        0.0
    };
    let mut p = [0.0; 4];
    for i in 0..m {
        p[i] = a[i] + t * ab[i];
    }
    dot(&p, &p, m)
}

/// Squared distance from the origin to the triangle (a, b, c) in `m` dimensions, by the
/// Voronoi-region tests of Ericson (Real-Time Collision Detection, 2005, section 5.1.5), which
/// use dot products only and so hold in any dimension.
#[inline]
pub fn triangle_sq(a: &[f64; 4], b: &[f64; 4], c: &[f64; 4], m: usize) -> f64 {
    let (mut ab, mut ac, mut ap) = ([0.0; 4], [0.0; 4], [0.0; 4]);
    for i in 0..m {
        ab[i] = b[i] - a[i];
        ac[i] = c[i] - a[i];
        ap[i] = -a[i];
    }
    let point = |u: f64, v: f64| {
        // a + u ab + v ac
        let mut p = [0.0; 4];
        for i in 0..m {
            p[i] = a[i] + u * ab[i] + v * ac[i];
        }
        dot(&p, &p, m)
    };
    let d1 = dot(&ab, &ap, m);
    let d2 = dot(&ac, &ap, m);
    if d1 <= 0.0 && d2 <= 0.0 {
        return dot(a, a, m);
    }
    let mut bp = [0.0; 4];
    for i in 0..m {
        bp[i] = -b[i];
    }
    let d3 = dot(&ab, &bp, m);
    let d4 = dot(&ac, &bp, m);
    if d3 >= 0.0 && d4 <= d3 {
        return dot(b, b, m);
    }
    let vc = d1 * d4 - d3 * d2;
    if vc <= 0.0 && d1 >= 0.0 && d3 <= 0.0 {
        return point(d1 / (d1 - d3), 0.0);
    }
    let mut cp = [0.0; 4];
    for i in 0..m {
        cp[i] = -c[i];
    }
    let d5 = dot(&ab, &cp, m);
    let d6 = dot(&ac, &cp, m);
    if d6 >= 0.0 && d5 <= d6 {
        return dot(c, c, m);
    }
    let vb = d5 * d2 - d1 * d6;
    if vb <= 0.0 && d2 >= 0.0 && d6 <= 0.0 {
        return point(0.0, d2 / (d2 - d6));
    }
    let va = d3 * d6 - d5 * d4;
    if va <= 0.0 && (d4 - d3) >= 0.0 && (d5 - d6) >= 0.0 {
        let t = (d4 - d3) / ((d4 - d3) + (d5 - d6));
        return point(1.0 - t, t);
    }
    let denom = 1.0 / (va + vb + vc);
    point(vb * denom, vc * denom)
}

/// Squared distance from the origin to the convex hull of the points `w[set]` (at most 4 points
/// in at most 4 dimensions). Solves the normal equations on the affine hull; when a barycentric
/// coordinate is negative the minimum lies on a face opposite one of those vertices (a convex
/// quadratic's constrained minimum activates at least one violated constraint), so recurse.
pub fn min_norm_sq(w: &[[f64; 4]; 4], set: &[usize], m: usize) -> f64 {
    let n = set.len();
    let v0 = &w[set[0]];
    if n == 1 {
        return dot(v0, v0, m);
    }
    // e_i = w_i - v0; minimise |v0 + sum l_i e_i|^2 : G l = -E^T v0.
    let mut e = [[0.0; 4]; 3];
    for i in 1..n {
        for j in 0..m {
            e[i - 1][j] = w[set[i]][j] - v0[j];
        }
    }
    let s = n - 1;
    let mut g = [[0.0; 4]; 3];
    for i in 0..s {
        for j in 0..s {
            g[i][j] = dot(&e[i], &e[j], m);
        }
        g[i][s] = -dot(&e[i], v0, m);
    }
    let lambda = solve(&mut g, s);
    let feasible = lambda.and_then(|l| {
        let sum: f64 = l[..s].iter().sum();
        (l[..s].iter().all(|&x| x >= -1e-12) && sum <= 1.0 + 1e-12).then_some(l)
    });
    if let Some(l) = feasible {
        let mut p = *v0;
        for i in 0..s {
            for j in 0..m {
                p[j] += l[i] * e[i][j];
            }
        }
        return dot(&p, &p, m);
    }
    // Faces opposite the vertices whose barycentric coordinate is negative (all faces when the
    // system is degenerate).
    let bary: Option<[f64; 4]> = lambda.map(|l| {
        let mut b = [0.0; 4];
        b[0] = 1.0 - l[..s].iter().sum::<f64>();
        b[1..=s].copy_from_slice(&l[..s]);
        b
    });
    let mut best = f64::INFINITY;
    for drop in 0..n {
        if bary.is_some_and(|b| b[drop] >= 0.0) {
            continue;
        }
        let mut sub = [0usize; 4];
        let mut t = 0;
        for (i, &v) in set.iter().enumerate() {
            if i != drop {
                sub[t] = v;
                t += 1;
            }
        }
        best = best.min(min_norm_sq(w, &sub[..t], m));
    }
    best
}

/// Solve the s x s system in the augmented matrix `g` (last column the right-hand side) by
/// Gaussian elimination with partial pivoting; `None` when (nearly) singular.
fn solve(g: &mut [[f64; 4]; 3], s: usize) -> Option<[f64; 3]> {
    let scale = (0..s)
        .map(|i| g[i][i].abs())
        .fold(0.0, f64::max)
        .max(1e-300);
    for col in 0..s {
        let piv = (col..s).max_by(|&a, &b| g[a][col].abs().total_cmp(&g[b][col].abs()))?;
        if g[piv][col].abs() <= 1e-12 * scale {
            return None;
        }
        g.swap(col, piv);
        for row in col + 1..s {
            let f = g[row][col] / g[col][col];
            for j in col..=s {
                g[row][j] -= f * g[col][j];
            }
        }
    }
    let mut x = [0.0; 3];
    for row in (0..s).rev() {
        let mut v = g[row][s];
        for j in row + 1..s {
            v -= g[row][j] * x[j];
        }
        x[row] = v / g[row][row];
    }
    Some(x)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn specialised_face_distances_match_the_general_solver() {
        // Two independent algorithms (Ericson's region tests, normal equations with recursion)
        // on seeded random triangles and segments in 3 and 4 dimensions.
        let mut state = 12345u64;
        let mut next = || {
            state = state
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            (state >> 11) as f64 / (1u64 << 53) as f64 * 4.0 - 2.0
        };
        for m in [3, 4] {
            for _ in 0..2000 {
                let mut w = [[0.0; 4]; 4];
                for v in w.iter_mut().take(3) {
                    for x in v.iter_mut().take(m) {
                        *x = next();
                    }
                }
                let t = triangle_sq(&w[0], &w[1], &w[2], m);
                let g = min_norm_sq(&w, &[0, 1, 2], m);
                assert!((t - g).abs() <= 1e-9 * (1.0 + g), "triangle {t} vs {g}");
                let s = segment_sq(&w[0], &w[1], m);
                let g = min_norm_sq(&w, &[0, 1], m);
                assert!((s - g).abs() <= 1e-9 * (1.0 + g), "segment {s} vs {g}");
            }
        }
    }

    #[test]
    fn distance_to_a_segment_and_a_triangle() {
        // Point-to-segment and point-to-triangle distances from elementary geometry.
        let mut w = [[0.0; 4]; 4];
        w[0] = [1.0, -1.0, 0.0, 0.0];
        w[1] = [1.0, 1.0, 0.0, 0.0];
        assert!((min_norm_sq(&w, &[0, 1], 2) - 1.0).abs() < 1e-15);
        w[0] = [2.0, 1.0, 0.0, 0.0];
        w[1] = [3.0, 1.0, 0.0, 0.0];
        assert!(
            (min_norm_sq(&w, &[0, 1], 2) - 5.0).abs() < 1e-15,
            "nearest is the end point (2, 1)"
        );
        // Triangle in the plane z = 2 containing the projection of the origin.
        w[0] = [-1.0, -1.0, 2.0, 0.0];
        w[1] = [3.0, -1.0, 2.0, 0.0];
        w[2] = [-1.0, 3.0, 2.0, 0.0];
        assert!((min_norm_sq(&w, &[0, 1, 2], 3) - 4.0).abs() < 1e-12);
        // Same triangle shifted so the nearest point is the vertex (1, 1, 2): 1 + 1 + 4 = 6.
        w[0] = [1.0, 1.0, 2.0, 0.0];
        w[1] = [5.0, 1.0, 2.0, 0.0];
        w[2] = [1.0, 5.0, 2.0, 0.0];
        assert!((min_norm_sq(&w, &[0, 1, 2], 3) - 6.0).abs() < 1e-12);
    }
}
