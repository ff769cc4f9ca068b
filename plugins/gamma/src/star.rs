//! The exact search for reference points that sit on a node of an evenly spaced evaluated grid,
//! the usual case when both distributions share one grid.
//!
//! Around every node of such a grid the simplices of the Kuhn triangulation (Ju et al, Med Phys
//! 2008;35:879-887) have the same shape: their distance from the node, the node's barycentric
//! coordinates and the gradients of the barycentric coordinates do not depend on the node. They
//! are tabulated once, sorted by distance from the node, in blocks of eight simplices, so that
//! the per-point work is a walk along the table with the bounds of the general search
//! (`search::gamma_at`) evaluated eight simplices at a time: it stops once distance alone
//! reaches the best value found (Wendling et al, Med Phys 2007;34:1647-1654), and a simplex
//! needs an exact distance only when neither its dose range nor its hyperplane rules it out.
//!
//! Every simplex of every cell whose box lies within the table's radius is in the table, so a
//! point whose search radius stays inside it is finished exactly as the general search would
//! finish it; otherwise the general search continues from the value found.

use crate::field::{Field, MAX_DIMS, kuhn_orders};
use crate::search::{Criterion, face_sq, min_norm_sq};

/// Simplices per block (the width the arithmetic is written for).
const LANES: usize = 24;
/// Vertices of a simplex in the largest dimension.
const MAX_VERTS: usize = MAX_DIMS + 1;

/// Simplices around a node, one per lane, in structure-of-arrays form: what the walk reads
/// for every simplex it passes.
#[derive(Debug, Clone)]
struct Block {
    /// Squared distance from the node to the simplex, mm^2 (rounded down a little).
    ds2: [f64; LANES],
    /// Squared distance from the node to the simplex's cell, mm^2: a criterion's search
    /// radius takes in every simplex of a cell that reaches within it, as the general search.
    cd2: [f64; LANES],
    /// Flat offset of each vertex's dose from the node's, vertices in Kuhn order (each one
    /// step along one axis from the previous).
    off: [[isize; LANES]; MAX_VERTS],
    /// Offset of the cell's lower corner from the node along each axis, in nodes.
    cell: [[i32; LANES]; MAX_DIMS],
    /// The node's barycentric coordinates (negative when the node lies outside the simplex).
    beta: [[f64; LANES]; MAX_VERTS],
    /// 1/h^2 of the axis of each step, mm^-2: step j changes the dose by e_j = v_(j+1) - v_j,
    /// so the gradient along that axis is e_j / h.
    ih2: [[f64; LANES]; MAX_DIMS],
    /// Reciprocal length of each barycentric coordinate's gradient, mm: a point whose
    /// coordinate b is negative lies at least -b times this from the simplex.
    inv: [[f64; LANES]; MAX_VERTS],
    /// Lanes holding a simplex (the last block is padded).
    used: usize,
}

/// One simplex while the table is built.
struct Entry {
    ds2: f64,
    cd2: f64,
    cell: [i64; MAX_DIMS],
    order: usize,
    off: [isize; MAX_VERTS],
    beta: [f64; MAX_VERTS],
    ih2: [f64; MAX_DIMS],
    inv: [f64; MAX_VERTS],
    pos: [[f64; MAX_DIMS]; MAX_VERTS],
}

/// The simplices around a node of an evenly spaced grid, sorted by distance from the node.
#[derive(Debug, Clone)]
pub struct NodeTable {
    blocks: Vec<Block>,
    /// Vertex positions relative to the node (mm) of each lane of each block, for the exact
    /// distances that only a few simplices need.
    pos: Vec<[[f64; MAX_DIMS]; MAX_VERTS]>,
    /// Every simplex of every cell whose box lies within this distance of the node, mm.
    radius_mm: f64,
    /// Smallest and largest cell offset in the table along each axis.
    reach: [(i64, i64); MAX_DIMS],
}

impl NodeTable {
    /// The table for `field` up to `radius_mm`; `None` unless every active axis is evenly
    /// spaced.
    pub fn new(field: &Field, radius_mm: f64) -> Option<NodeTable> {
        let k = field.k;
        let mut h = [1.0; MAX_DIMS];
        let mut m = [0i64; MAX_DIMS];
        for a in 0..k {
            h[a] = field.even_spacing(a)?;
            m[a] = (radius_mm / h[a]).ceil() as i64;
        }
        let strides = field.strides();
        let r2 = radius_mm * radius_mm * (1.0 + 1e-12);
        let mut entries = Vec::new();
        let span = |a: usize| if a < k { -(m[a] + 1)..=m[a] } else { 0..=0 };
        for c2 in span(2) {
            for c1 in span(1) {
                for c0 in span(0) {
                    let cell = [c0, c1, c2];
                    let mut cd2 = 0.0;
                    for a in 0..k {
                        let gap = if cell[a] >= 0 {
                            cell[a] as f64
                        } else {
                            (-(cell[a] + 1)) as f64
                        } * h[a];
                        cd2 += gap * gap;
                    }
                    if cd2 > r2 {
                        continue;
                    }
                    for (oi, order) in kuhn_orders(k).iter().enumerate() {
                        entries.push(entry(k, h, &strides, cell, cd2, oi, order));
                    }
                }
            }
        }
        entries.sort_by(|p, q| {
            p.ds2
                .total_cmp(&q.ds2)
                .then(p.cd2.total_cmp(&q.cd2))
                .then(p.cell.cmp(&q.cell))
                .then(p.order.cmp(&q.order))
        });
        let mut reach = [(0i64, 0i64); MAX_DIMS];
        for e in &entries {
            for a in 0..k {
                reach[a].0 = reach[a].0.min(e.cell[a]);
                reach[a].1 = reach[a].1.max(e.cell[a]);
            }
        }
        let blocks = entries.chunks(LANES).map(block).collect();
        let mut pos = vec![[[0.0; MAX_DIMS]; MAX_VERTS]; entries.len().div_ceil(LANES) * LANES];
        for (p, e) in pos.iter_mut().zip(&entries) {
            *p = e.pos;
        }
        Some(NodeTable {
            blocks,
            pos,
            radius_mm,
            reach,
        })
    }

    /// The table for a search up to `max_search_mm`, limited to a few cells in 3D (the walk
    /// rarely goes further; a point that does continues with the general search) so that the
    /// table stays small.
    pub fn for_search(field: &Field, max_search_mm: f64) -> Option<NodeTable> {
        let cells = match field.k {
            1 => 64.0,
            2 => 12.0,
            _ => 3.0,
        };
        NodeTable::new(field, max_search_mm.min(cells * field.max_spacing()))
    }

    /// Radius of the table, mm.
    pub fn radius_mm(&self) -> f64 {
        self.radius_mm
    }
}

/// The tabulated form of one simplex: cell `cell` (lower corner offset from the node), Kuhn
/// order `order` (vertices from the lower corner stepping along `order[0]`, then `order[1]`...).
fn entry(
    k: usize,
    h: [f64; MAX_DIMS],
    strides: &[usize; MAX_DIMS],
    cell: [i64; MAX_DIMS],
    cd2: f64,
    oi: usize,
    order: &[usize; MAX_DIMS],
) -> Entry {
    let mut off = [0isize; MAX_VERTS];
    let mut pos = [[0.0; MAX_DIMS]; MAX_VERTS];
    let mut bits = [0i64; MAX_DIMS];
    for j in 0..=k {
        if j > 0 {
            bits[order[j - 1]] = 1;
        }
        for a in 0..k {
            let n = cell[a] + bits[a];
            pos[j][a] = n as f64 * h[a];
            off[j] += n as isize * strides[a] as isize;
        }
    }
    // Fractional coordinates f_a = x_a / h_a - cell_a; barycentric coordinates of the Kuhn
    // simplex: b_0 = 1 - f_o0, b_j = f_o(j-1) - f_oj, b_k = f_o(k-1). At the node, f_a = -cell_a.
    let o = order;
    let mut beta = [0.0; MAX_VERTS];
    let mut ih2 = [0.0; MAX_DIMS];
    let mut inv = [0.0; MAX_VERTS];
    beta[0] = 1.0 + cell[o[0]] as f64;
    for j in 1..k {
        beta[j] = cell[o[j]] as f64 - cell[o[j - 1]] as f64;
    }
    beta[k] = -(cell[o[k - 1]] as f64);
    for j in 0..k {
        ih2[j] = 1.0 / (h[o[j]] * h[o[j]]);
    }
    // |grad b_0| = 1/h_o0, |grad b_j| = sqrt(1/h_o(j-1)^2 + 1/h_oj^2), |grad b_k| = 1/h_o(k-1).
    inv[0] = h[o[0]];
    for j in 1..k {
        inv[j] = 1.0 / (ih2[j - 1] + ih2[j]).sqrt();
    }
    inv[k] = h[o[k - 1]];
    let mut w = [[0.0; 4]; 4];
    for j in 0..=k {
        w[j][..k].copy_from_slice(&pos[j][..k]);
    }
    let set: Vec<usize> = (0..=k).collect();
    // Rounded down so that rounding can never stop the walk before a simplex that counts.
    let ds2 = (min_norm_sq(&w, &set, k) * (1.0 - 1e-9) - 1e-12 * h[0] * h[0]).max(0.0);
    Entry {
        ds2,
        cd2,
        cell,
        order: oi,
        off,
        beta,
        ih2,
        inv,
        pos,
    }
}

fn block(entries: &[Entry]) -> Block {
    let mut b = Block {
        ds2: [f64::INFINITY; LANES],
        cd2: [f64::INFINITY; LANES],
        off: [[0; LANES]; MAX_VERTS],
        cell: [[0; LANES]; MAX_DIMS],
        beta: [[0.0; LANES]; MAX_VERTS],
        ih2: [[0.0; LANES]; MAX_DIMS],
        inv: [[0.0; LANES]; MAX_VERTS],
        used: entries.len(),
    };
    for (l, e) in entries.iter().enumerate() {
        b.ds2[l] = e.ds2;
        b.cd2[l] = e.cd2;
        for a in 0..MAX_DIMS {
            // Table offsets are a few cells, far inside i32.
            b.cell[a][l] = e.cell[a] as i32;
            b.ih2[a][l] = e.ih2[a];
        }
        for j in 0..MAX_VERTS {
            b.off[j][l] = e.off[j];
            b.beta[j][l] = e.beta[j];
            b.inv[j][l] = e.inv[j];
        }
    }
    b
}

/// Per-criterion constants of one reference point.
pub struct PointCriteria<'a> {
    pub crits: &'a [Criterion],
    /// Dose criterion of each criterion at this point (dose units).
    pub dd: &'a [f64],
    /// Distance criterion of each criterion, mm.
    pub dt: &'a [f64],
}

/// Gamma at the node with local indices `node` for every criterion into `out`. Returns true
/// when the values are final; false when some criterion's search radius leaves the table, in
/// which case `out` holds attained values (upper bounds) to continue from.
pub fn search_node<const K: usize>(
    field: &Field,
    table: &NodeTable,
    pc: &PointCriteria,
    node: [usize; MAX_DIMS],
    d_ref: f64,
    out: &mut [f64],
) -> bool {
    counters::count(counters::POINTS);
    let nc = pc.crits.len();
    let strides = field.strides();
    let mut flat = 0usize;
    for a in 0..K {
        flat += node[a] * strides[a];
    }
    let dose = &field.dose;
    let v_node = dose[flat];
    let mut dd2 = [0.0; 16];
    let mut dt2 = [0.0; 16];
    let mut max2 = [0.0; 16];
    for c in 0..nc {
        dd2[c] = pc.dd[c] * pc.dd[c];
        dt2[c] = pc.dt[c] * pc.dt[c];
        let r = pc.crits[c].max_search_mm * (1.0 + 1e-12);
        max2[c] = r * r;
        // The node itself: distance zero.
        out[c] = (v_node - d_ref).abs() / pc.dd[c];
    }
    // Cells beyond the grid's edge are left out when the table reaches past it.
    let mut last = [0i64; MAX_DIMS];
    let mut edge = false;
    for a in 0..K {
        let n = node[a] as i64;
        last[a] = field.axes[a].len() as i64 - 2;
        edge |= n + table.reach[a].0 < 0 || n + table.reach[a].1 > last[a];
    }
    for (bi, blk) in table.blocks.iter().enumerate() {
        // Sorted by distance: stop once distance alone reaches every criterion's best value.
        if (0..nc).all(|c| blk.ds2[0] >= out[c] * out[c] * dt2[c]) {
            return true;
        }
        counters::count(counters::BLOCKS);
        let mut valid = [true; LANES];
        for (l, v) in valid.iter_mut().enumerate() {
            *v = l < blk.used;
        }
        if edge {
            for l in 0..blk.used {
                for a in 0..K {
                    let ci = node[a] as i64 + blk.cell[a][l] as i64;
                    if ci < 0 || ci > last[a] {
                        valid[l] = false;
                    }
                }
            }
        }
        // Vertex doses (a lane out of use reads the node's own dose, never used).
        let mut v = [[0.0; LANES]; MAX_VERTS];
        for j in 0..=K {
            for l in 0..LANES {
                let o = if valid[l] { blk.off[j][l] } else { 0 };
                v[j][l] = dose[flat.wrapping_add_signed(o)];
            }
        }
        // Each simplex's linear dose: its value at the node (minus d_ref), its steps along the
        // Kuhn path (e_j; gradient e_j / h along step j's axis), squared gradient, dose range.
        // Loops run over the lanes innermost, without branches, so that they compile to vector
        // instructions.
        let mut delta = [-d_ref; LANES];
        let mut lo = v[0];
        let mut hi = v[0];
        for j in 0..=K {
            for l in 0..LANES {
                delta[l] += blk.beta[j][l] * v[j][l];
                lo[l] = lesser(lo[l], v[j][l]);
                hi[l] = greater(hi[l], v[j][l]);
            }
        }
        // s_j = e_j / h^2: the barycentric coordinates change along the dose gradient g at
        // g.grad(b_0) = -s_0, g.grad(b_j) = s_(j-1) - s_j, g.grad(b_k) = s_(k-1).
        let mut sj = [[0.0; LANES]; MAX_DIMS];
        let mut g_sq = [0.0; LANES];
        let mut gap = [0.0; LANES];
        for j in 0..K {
            for l in 0..LANES {
                let e = v[j + 1][l] - v[j][l];
                sj[j][l] = e * blk.ih2[j][l];
                g_sq[l] += e * sj[j][l];
            }
        }
        for l in 0..LANES {
            gap[l] = greater(greater(lo[l] - d_ref, d_ref - hi[l]), 0.0);
        }
        for c in 0..nc {
            // Phase one: the hyperplane distance, the barycentric coordinates of its foot, the
            // lower bounds, and the value of every simplex whose foot lies inside it (exact).
            let (dd2c, dt2c) = (dd2[c], dt2[c]);
            let mut plane2 = [0.0; LANES];
            let mut den = [0.0; LANES];
            let mut shift = [0.0; LANES];
            for l in 0..LANES {
                den[l] = dd2c + dt2c * g_sq[l];
                plane2[l] = delta[l] * delta[l] / den[l];
                shift[l] = dt2c * delta[l] / den[l];
            }
            // Largest violation of a barycentric coordinate, and the spatial distance it
            // implies (the foot lies at least that far from the simplex).
            let mut neg = [0.0; LANES];
            let mut sl = [0.0; LANES];
            for j in 0..=K {
                for l in 0..LANES {
                    let b = blk.beta[j][l] - shift[l] * bary_rate::<K>(&sj, j, l);
                    neg[l] = greater(neg[l], -b);
                    sl[l] = greater(sl[l], -b * blk.inv[j][l]);
                }
            }
            // Lanes out of use or beyond this criterion's search radius count as infinitely far.
            let mut lb2 = [0.0; LANES];
            let mut exact = [0.0; LANES];
            for l in 0..LANES {
                let far = if valid[l] && blk.cd2[l] <= max2[c] {
                    0.0
                } else {
                    f64::INFINITY
                };
                // Pythagoras in the hyperplane: the in-plane distance from the foot to the
                // simplex is at least the spatial one over dt.
                lb2[l] = far
                    + greater(
                        blk.ds2[l] / dt2c + gap[l] * gap[l] / dd2c,
                        plane2[l] + sl[l] * sl[l] / dt2c,
                    );
                exact[l] = far
                    + if neg[l] > 0.0 {
                        f64::INFINITY
                    } else {
                        plane2[l]
                    };
            }
            let mut best_in = f64::INFINITY;
            for &e in &exact {
                best_in = lesser(best_in, e);
            }
            if best_in < out[c] * out[c] {
                out[c] = best_in.max(0.0).sqrt();
            }
            // Phase two: simplices whose foot lies outside and whose bounds do not rule them out
            // need the distance to their faces.
            for l in 0..LANES {
                let best2 = out[c] * out[c];
                if exact[l] < f64::INFINITY || lb2[l] >= best2 {
                    continue;
                }
                // Phase two in the simplex's hyperplane. Moving from the foot y by z costs
                // z^T Q z in normalised space, Q = I/dt^2 + g g^T/dd^2; reaching the hull of
                // the face opposite a vertex with coordinate b_j < 0 costs at least
                // b_j^2 / M_jj, with M = grad(b)^T Q^-1 grad(b) and, by Sherman-Morrison,
                // Q^-1 = dt^2 (I - dt^2 g g^T / den). That is the distance to the face's hull,
                // exact when the nearest point of the hull lies inside the face (all other
                // coordinates b_i - b_j M_ij / M_jj non-negative); otherwise the face itself
                // is solved. The simplex's minimum lies on a face with a violated coordinate.
                let mut bary = [0.0; 4];
                let mut rate = [0.0; 4];
                let mut m_diag = [0.0; 4];
                let mut lb: f64 = 0.0;
                for j in 0..=K {
                    rate[j] = bary_rate::<K>(&sj, j, l);
                    bary[j] = blk.beta[j][l] - shift[l] * rate[j];
                    m_diag[j] = dt2c * (gram::<K>(blk, l, j, j) - dt2c * rate[j] * rate[j] / den[l]);
                    if bary[j] < 0.0 {
                        lb = lb.max(bary[j] * bary[j] / m_diag[j]);
                    }
                }
                if plane2[l] + lb >= best2 {
                    continue;
                }
                let mut m = best2;
                let mut w: Option<[[f64; 4]; 4]> = None;
                for j in 0..=K {
                    if bary[j] >= 0.0 {
                        continue;
                    }
                    let hull = plane2[l] + bary[j] * bary[j] / m_diag[j];
                    if hull >= m {
                        continue;
                    }
                    let mut on_face = true;
                    for i in 0..=K {
                        if i != j {
                            let m_ij = dt2c
                                * (gram::<K>(blk, l, i, j) - dt2c * rate[i] * rate[j] / den[l]);
                            on_face &= bary[i] - bary[j] * m_ij / m_diag[j] >= 0.0;
                        }
                    }
                    let value = if on_face {
                        hull
                    } else {
                        counters::count(counters::FACES);
                        let w = w.get_or_insert_with(|| {
                            let pos = &table.pos[bi * LANES + l];
                            let mut w = [[0.0; 4]; 4];
                            for (i, wi) in w.iter_mut().enumerate().take(K + 1) {
                                for a in 0..K {
                                    wi[a] = pos[i][a] / pc.dt[c];
                                }
                                wi[K] = (v[i][l] - d_ref) / pc.dd[c];
                            }
                            w
                        });
                        face_sq(w, j, K)
                    };
                    m = m.min(value);
                }
                if m < best2 {
                    counters::count(counters::IMPROVED);
                    out[c] = m.max(0.0).sqrt();
                }
            }
        }
    }
    // The table is used up: final only if no criterion's radius reaches beyond it.
    let done = (0..nc).all(|c| {
        (out[c] * pc.dt[c]).min(pc.crits[c].max_search_mm) <= table.radius_mm * (1.0 - 1e-12)
    });
    if !done {
        counters::count(counters::LEFT);
    }
    done
}

/// Search counters per point for the benchmark (feature `counters`): how far the walk goes
/// and how much of it needs exact work. Compiled out otherwise.
pub mod counters {
    #[cfg(feature = "counters")]
    use std::sync::atomic::{AtomicU64, Ordering};

    /// Points searched with the table.
    pub const POINTS: usize = 0;
    /// Blocks of eight simplices examined.
    pub const BLOCKS: usize = 1;
    /// Distances to faces computed.
    pub const FACES: usize = 2;
    /// Values improved by a face distance.
    pub const IMPROVED: usize = 3;
    /// Points whose search radius left the table.
    pub const LEFT: usize = 4;
    const NAMES: [&str; 5] = ["points", "blocks", "faces", "improved", "left table"];

    #[cfg(feature = "counters")]
    static COUNTS: [AtomicU64; 5] = [const { AtomicU64::new(0) }; 5];

    /// Count one event.
    #[inline(always)]
    pub fn count(_which: usize) {
        #[cfg(feature = "counters")]
        COUNTS[_which].fetch_add(1, Ordering::Relaxed);
    }

    /// Start counting afresh.
    pub fn reset() {
        #[cfg(feature = "counters")]
        for c in &COUNTS {
            c.store(0, Ordering::Relaxed);
        }
    }

    /// The counts per point so far, one line, or `None` without the feature.
    pub fn summary() -> Option<String> {
        #[cfg(feature = "counters")]
        {
            let v: Vec<u64> = COUNTS.iter().map(|c| c.load(Ordering::Relaxed)).collect();
            let n = v[POINTS].max(1) as f64;
            let parts: Vec<String> = (1..v.len())
                .map(|i| format!("{} {:.3}", NAMES[i], v[i] as f64 / n))
                .collect();
            return Some(format!(
                "{} points; per point: {}",
                v[POINTS],
                parts.join(", ")
            ));
        }
        #[allow(unreachable_code)]
        {
            let _ = NAMES;
            None
        }
    }
}

/// Rate of change of barycentric coordinate `j` along the dose gradient, from the scaled
/// steps `s_j = e_j / h^2` of lane `l`.
#[inline(always)]
fn bary_rate<const K: usize>(sj: &[[f64; LANES]; MAX_DIMS], j: usize, l: usize) -> f64 {
    if j == 0 {
        -sj[0][l]
    } else if j == K {
        sj[K - 1][l]
    } else {
        sj[j - 1][l] - sj[j][l]
    }
}

/// grad(b_i) . grad(b_j) for the barycentric coordinates of lane `l`'s Kuhn simplex: each
/// coordinate's gradient has components +-1/h along one or two axes, and neighbouring
/// coordinates share the axis of the step between them.
#[inline(always)]
fn gram<const K: usize>(blk: &Block, l: usize, i: usize, j: usize) -> f64 {
    if i == j {
        1.0 / (blk.inv[j][l] * blk.inv[j][l])
    } else if i + 1 == j || j + 1 == i {
        -blk.ih2[i.min(j)][l]
    } else {
        0.0
    }
}

/// The smaller of two numbers that are not NaN (a form that compiles to one vector instruction).
#[inline(always)]
fn lesser(a: f64, b: f64) -> f64 {
    if a < b { a } else { b }
}

/// The larger of two numbers that are not NaN.
#[inline(always)]
fn greater(a: f64, b: f64) -> f64 {
    if a > b { a } else { b }
}
