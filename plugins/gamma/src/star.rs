//! The exact search for reference points that sit on a node of an evenly spaced evaluated grid,
//! the usual case when both distributions share one grid.
//!
//! Around every node of such a grid the simplices of the Kuhn triangulation (Ju et al, Med Phys
//! 2008;35:879-887) and their edges have the same shape: their distance from the node, the
//! node's barycentric coordinates and the gradients of the barycentric coordinates do not
//! depend on the node. They are tabulated once, sorted by distance from the node, in blocks of
//! four (one AVX2 vector of doubles), so that the per-point work is a walk along the table with
//! bounds evaluated four simplices at a time: it stops once distance alone reaches the best
//! value found (Wendling et al, Med Phys 2007;34:1647-1654), and a simplex is looked at on its
//! own only when neither its dose range nor its hyperplane rules it out.
//!
//! Every simplex of every cell whose box lies within the table's radius is in the table, so a
//! point whose search radius stays inside it is finished exactly as the general search would
//! finish it; otherwise the general search continues from the value found.

use crate::field::{Field, MAX_DIMS, kuhn_orders};
use std::collections::BTreeMap;

use crate::search::{Criterion, face_sq, min_norm_sq, segment_sq};

/// Simplices per block (the width the arithmetic is written for).
const LANES: usize = 4;
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
    off: [[i32; LANES]; MAX_VERTS],
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
    /// Squared length of each barycentric coordinate's gradient, mm^-2.
    gjj: [[f64; LANES]; MAX_VERTS],
    /// `beta` times `inv`, mm.
    beta_inv: [[f64; LANES]; MAX_VERTS],
    /// The largest `cd2` of the block (infinite with a padding lane): a criterion whose
    /// squared radius reaches it takes every lane.
    max_cd2: f64,
}

/// One step of the walk: a block of edges or of simplices, and its nearest distance (mm^2).
#[derive(Debug, Clone, Copy)]
struct Step {
    ds2: f64,
    edges: bool,
    block: u32,
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
    /// Vertex positions relative to the node, in nodes.
    nodes: [[i64; MAX_DIMS]; MAX_VERTS],
}

/// One edge while the table is built.
struct Edge {
    ds2: f64,
    cd2: f64,
    nodes: ([i64; MAX_DIMS], [i64; MAX_DIMS]),
    off: [isize; 2],
    pos: [[f64; MAX_DIMS]; 2],
}

/// Edges around a node, one per lane, in structure-of-arrays form.
#[derive(Debug, Clone)]
struct EdgeBlock {
    /// Squared distance from the node to the edge, mm^2 (rounded down a little).
    ds2: [f64; LANES],
    /// Squared distance from the node to the nearest cell the edge belongs to, mm^2.
    cd2: [f64; LANES],
    /// Flat offsets of the two end nodes' doses from the node's.
    off: [[i32; LANES]; 2],
    /// Spatial products of the end positions p and q relative to the node, mm^2: p.p,
    /// p.(q - p) and (q - p).(q - p). With them a criterion's segment distance needs no
    /// coordinates.
    pp: [f64; LANES],
    pu: [f64; LANES],
    uu: [f64; LANES],
    /// The largest `cd2` of the block (infinite with a padding lane).
    max_cd2: f64,
}

/// The simplices around a node of an evenly spaced grid, sorted by distance from the node.
#[derive(Debug, Clone)]
pub struct NodeTable {
    /// The walk: blocks of edges and of simplices in one order of distance (an edge block
    /// before a simplex block at equal distance: its exact values are cheap and tighten the
    /// simplices' bounds).
    steps: Vec<Step>,
    blocks: Vec<Block>,
    /// Vertex positions relative to the node (mm) of each lane of each block, for the face
    /// distances that the walk near the grid's faces needs.
    pos: Vec<[[f64; MAX_DIMS]; MAX_VERTS]>,
    /// The edges of those simplices (each once), sorted by distance from the node.
    edges: Vec<EdgeBlock>,
    /// Every simplex of every cell whose box lies within this distance of the node, mm.
    radius_mm: f64,
    /// Smallest and largest cell offset in the table along each axis.
    reach: [(i64, i64); MAX_DIMS],
    /// Smallest and largest flat offset of a vertex from the node.
    span: (isize, isize),
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
        let blocks: Vec<Block> = entries.chunks(LANES).map(block).collect();
        // Every edge of every simplex, once, with the nearest of the cells it belongs to.
        let mut edge_cells: BTreeMap<([i64; MAX_DIMS], [i64; MAX_DIMS]), f64> = BTreeMap::new();
        for e in &entries {
            for i in 0..=k {
                for j in i + 1..=k {
                    let key = (e.nodes[i], e.nodes[j]);
                    let cd2 = edge_cells.entry(key).or_insert(e.cd2);
                    *cd2 = cd2.min(e.cd2);
                }
            }
        }
        let mut edge_list: Vec<Edge> = edge_cells
            .into_iter()
            .map(|((n0, n1), cd2)| {
                let mut pos = [[0.0; MAX_DIMS]; 2];
                let mut off = [0isize; 2];
                let mut w = [[0.0; 4]; 4];
                for (e, n) in [n0, n1].iter().enumerate() {
                    for a in 0..k {
                        pos[e][a] = n[a] as f64 * h[a];
                        off[e] += n[a] as isize * strides[a] as isize;
                        w[e][a] = pos[e][a];
                    }
                }
                let ds2 = segment_sq(&w[0], &w[1], k);
                Edge {
                    ds2: rounded_down(ds2, h[0]),
                    cd2,
                    nodes: (n0, n1),
                    off,
                    pos,
                }
            })
            .collect();
        edge_list.sort_by(|p, q| {
            p.ds2
                .total_cmp(&q.ds2)
                .then(p.cd2.total_cmp(&q.cd2))
                .then(p.nodes.cmp(&q.nodes))
        });
        let edges: Vec<EdgeBlock> = edge_list.chunks(LANES).map(edge_block).collect();
        let offsets = entries.iter().flat_map(|e| e.off[..=k].to_vec());
        let span = offsets.fold((0, 0), |(lo, hi), o| (o.min(lo), o.max(hi)));
        // Offsets are stored in 32 bits (a smaller table); a grid too large for that takes the
        // general search.
        if i32::try_from(span.0).is_err() || i32::try_from(span.1).is_err() {
            return None;
        }
        let mut steps: Vec<Step> = (0..blocks.len())
            .map(|i| (false, i, &blocks[i].ds2[0]))
            .chain((0..edges.len()).map(|i| (true, i, &edges[i].ds2[0])))
            .map(|(edges, i, &ds2)| Step {
                ds2,
                edges,
                block: i as u32,
            })
            .collect();
        steps.sort_by(|p, q| {
            p.ds2
                .total_cmp(&q.ds2)
                .then(q.edges.cmp(&p.edges))
                .then(p.block.cmp(&q.block))
        });
        let mut pos = vec![[[0.0; MAX_DIMS]; MAX_VERTS]; blocks.len() * LANES];
        for (p, e) in pos.iter_mut().zip(&entries) {
            for j in 0..=k {
                for a in 0..k {
                    p[j][a] = e.nodes[j][a] as f64 * h[a];
                }
            }
        }
        Some(NodeTable {
            steps,
            blocks,
            pos,
            edges,
            radius_mm,
            reach,
            span,
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

    /// True when every cell of the table lies inside the grid seen from the node with local
    /// indices `node`, so that the walk applies there.
    pub fn covers(&self, field: &Field, node: &[usize; MAX_DIMS]) -> bool {
        (0..field.k).all(|a| {
            let n = node[a] as i64;
            let last = field.axes[a].len() as i64 - 2;
            n + self.reach[a].0 >= 0 && n + self.reach[a].1 <= last
        })
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
    let mut nodes = [[0i64; MAX_DIMS]; MAX_VERTS];
    let mut bits = [0i64; MAX_DIMS];
    for j in 0..=k {
        if j > 0 {
            bits[order[j - 1]] = 1;
        }
        for a in 0..k {
            let n = cell[a] + bits[a];
            nodes[j][a] = n;
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
    let ds2 = rounded_down(min_norm_sq(&w, &set, k), h[0]);
    Entry {
        ds2,
        cd2,
        cell,
        order: oi,
        off,
        beta,
        ih2,
        inv,
        nodes,
    }
}

/// A squared distance rounded down, so that rounding can never stop the walk before a simplex
/// or edge that counts.
fn rounded_down(d2: f64, h: f64) -> f64 {
    (d2 * (1.0 - 1e-9) - 1e-12 * h * h).max(0.0)
}

fn edge_block(edges: &[Edge]) -> EdgeBlock {
    let mut b = EdgeBlock {
        ds2: [f64::INFINITY; LANES],
        cd2: [f64::INFINITY; LANES],
        off: [[0; LANES]; 2],
        pp: [0.0; LANES],
        pu: [0.0; LANES],
        // A padding lane: a unit segment, so that no division by zero arises (never used).
        uu: [1.0; LANES],
        max_cd2: f64::INFINITY,
    };
    for (l, e) in edges.iter().enumerate() {
        b.ds2[l] = e.ds2;
        b.cd2[l] = e.cd2;
        for end in 0..2 {
            b.off[end][l] = e.off[end] as i32;
        }
        let [p, q] = e.pos;
        let (mut pp, mut pu, mut uu) = (0.0, 0.0, 0.0);
        for a in 0..MAX_DIMS {
            let u = q[a] - p[a];
            pp += p[a] * p[a];
            pu += p[a] * u;
            uu += u * u;
        }
        (b.pp[l], b.pu[l], b.uu[l]) = (pp, pu, uu);
    }
    b.max_cd2 = b.cd2.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    b
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
        gjj: [[0.0; LANES]; MAX_VERTS],
        beta_inv: [[0.0; LANES]; MAX_VERTS],
        max_cd2: f64::INFINITY,
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
            b.off[j][l] = e.off[j] as i32;
            b.beta[j][l] = e.beta[j];
            b.inv[j][l] = e.inv[j];
            b.gjj[j][l] = 1.0 / (e.inv[j] * e.inv[j]);
            b.beta_inv[j][l] = e.beta[j] * e.inv[j];
        }
    }
    b.max_cd2 = b.cd2.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    b
}

/// Per-criterion constants of one reference point.
pub struct PointCriteria<'a> {
    pub crits: &'a [Criterion],
    /// Dose criterion of each criterion at this point (dose units).
    pub dd: &'a [f64],
    /// Distance criterion of each criterion, mm.
    pub dt: &'a [f64],
    /// For each criterion, empty when its minimum is wanted; otherwise the squared gamma
    /// values (in this criterion's units) at which a point's pass or fail changes for some
    /// member of its group, largest first: the walk then only settles on which side of each
    /// mark the minimum lies, and the value it returns lies on that side of every mark (see
    /// `settle`).
    pub marks: &'a [&'a [f64]],
}

/// Gamma at the node with local indices `node` for every criterion into `out`: true when the
/// values are final, false when some criterion's search radius leaves the table, in which case
/// `out` holds attained values (upper bounds) to continue from.
///
/// The minimum over the interpolant lies inside a simplex, inside one of its faces, or on an
/// edge (end nodes included). The walk takes edges and simplices in one order of distance:
/// every edge's exact distance (cheap), every simplex whose foot lies inside it (its
/// hyperplane distance), and every face whose nearest hull point lies inside it (its hull
/// distance); a face whose nearest hull point lies outside has its minimum on its edges, which
/// the walk covers, so no face needs solving.
pub fn search_node<const K: usize>(
    field: &Field,
    table: &NodeTable,
    pc: &PointCriteria,
    node: [usize; MAX_DIMS],
    d_ref: f64,
    out: &mut [f64],
) -> bool {
    // Near the grid's faces some cells of the table do not exist; there the walk leaves them
    // out lane by lane, takes no edges (an edge's nearest cell may be missing) and solves a
    // face exactly where its hull's nearest point lies outside it.
    let inside = table.covers(field, &node);
    let at = NodePoint {
        field,
        table,
        pc,
        node,
        d_ref,
    };
    #[cfg(target_arch = "x86_64")]
    if std::arch::is_x86_feature_detected!("avx2") {
        // SAFETY: the processor supports AVX2, checked on the line above.
        return unsafe {
            if inside {
                walk_avx2::<K, true>(&at, out)
            } else {
                walk_avx2::<K, false>(&at, out)
            }
        };
    }
    if inside {
        walk::<K, true>(&at, out)
    } else {
        walk::<K, false>(&at, out)
    }
}

/// One reference point of the walk: the evaluated field, the table, the criteria, the node's
/// local indices and the reference dose.
struct NodePoint<'a> {
    field: &'a Field,
    table: &'a NodeTable,
    pc: &'a PointCriteria<'a>,
    node: [usize; MAX_DIMS],
    d_ref: f64,
}

/// `walk` compiled for processors with AVX2 (four lanes per vector instruction). The
/// arithmetic is the same as the baseline's, operation for operation (Rust never contracts a
/// multiply and an add into a fused one), so the results are identical to the last bit.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
fn walk_avx2<const K: usize, const INSIDE: bool>(at: &NodePoint, out: &mut [f64]) -> bool {
    walk::<K, INSIDE>(at, out)
}

/// The walk itself (see `search_node`); `INSIDE` when every cell of the table lies inside the
/// grid.
#[inline(always)]
fn walk<const K: usize, const INSIDE: bool>(at: &NodePoint, out: &mut [f64]) -> bool {
    let NodePoint {
        field,
        table,
        pc,
        node,
        d_ref,
    } = *at;
    counters::count(counters::POINTS);
    let nc = pc.crits.len();
    let strides = field.strides();
    let mut flat = 0usize;
    for a in 0..K {
        flat += node[a] * strides[a];
    }
    // The doses the table reaches from this node, indexed from the node's own at `flat`: a
    // window when all lie inside the grid, else the whole grid (lanes of missing cells read
    // a clamped index, never used).
    let (dose, flat) = if INSIDE {
        let first = flat.wrapping_add_signed(table.span.0);
        (
            &field.dose[first..=flat.wrapping_add_signed(table.span.1)],
            flat - first,
        )
    } else {
        (&field.dose[..], flat)
    };
    let mut bounds = Bounds::default();
    for a in 0..K {
        bounds.node[a] = node[a] as i32;
        bounds.last[a] = field.axes[a].len() as i32 - 2;
    }
    let mut k = Constants::default();
    // Squared best values; square roots once at the end.
    let mut best2 = [0.0; 16];
    for c in 0..nc {
        k.dd2[c] = pc.dd[c] * pc.dd[c];
        k.dt2[c] = pc.dt[c] * pc.dt[c];
        k.idd[c] = 1.0 / pc.dd[c];
        k.idt[c] = 1.0 / pc.dt[c];
        let r = pc.crits[c].max_search_mm * (1.0 + 1e-12);
        k.max2[c] = r * r;
        // The node itself: distance zero.
        let g = (dose[flat] - d_ref) / pc.dd[c];
        best2[c] = g * g;
    }
    // Criteria of which only pass or fail is wanted (see `settle`): their position in their
    // marks, and those whose every mark is settled.
    let mut decide = 0u32;
    let mut next_mark = [0usize; 16];
    let mut settled = 0u32;
    for c in 0..nc {
        decide |= u32::from(!pc.marks[c].is_empty()) << c;
    }
    // Edges and simplices in one order of distance; an edge before a simplex at equal distance
    // (its exact value is cheap and tightens the simplices' bounds).
    for step in &table.steps {
        if decide != 0 {
            for c in criteria(decide & !settled) {
                match settle(pc.marks[c], &mut next_mark[c], best2[c]) {
                    Some(b) => best2[c] = b,
                    None => settled |= 1 << c,
                }
            }
        }
        // A criterion is done once distance alone reaches its best value (or every mark is
        // settled); the walk once every criterion is.
        let mut live = 0u32;
        for c in 0..nc {
            live |= u32::from(step.ds2 < best2[c] * k.dt2[c]) << c;
        }
        live &= !settled;
        if live == 0 {
            finish(&best2, out);
            return true;
        }
        counters::count(counters::BLOCKS);
        let i = step.block as usize;
        if step.edges {
            if INSIDE {
                edge_block_search(&table.edges[i], dose, flat, d_ref, live, &k, &mut best2);
            }
        } else {
            let at = Placement {
                dose,
                flat,
                d_ref,
                bounds: &bounds,
                pos: &table.pos[i * LANES..(i + 1) * LANES],
            };
            simplex_block_search::<K, INSIDE>(&table.blocks[i], &at, live, &k, &mut best2);
        }
    }
    // The table is used up: final only if no criterion's radius reaches beyond it.
    finish(&best2, out);
    let done = (0..nc).all(|c| {
        (out[c] * pc.dt[c]).min(pc.crits[c].max_search_mm) <= table.radius_mm * (1.0 - 1e-12)
    });
    if !done {
        counters::count(counters::LEFT);
    }
    done
}

/// The working best value of a criterion with pass/fail `marks` (squared gamma, largest
/// first), given its best squared value so far: marks at or above it are settled (a value on
/// their pass side was found); the largest one below it is the next to settle, so the value
/// is lowered to a hair above that mark (relative 1e-9, far beyond rounding). Every bound and
/// the walk's end then use it: a simplex matters only if it could pass that mark. Once the
/// walk is through, either a value at or below the mark was found or none exists, and the
/// value left lies on the same side of every mark as the minimum. `None` once every mark is
/// settled; `next` remembers the position in `marks`, as the value only falls.
#[inline(always)]
fn settle(marks: &[f64], next: &mut usize, best2: f64) -> Option<f64> {
    while *next < marks.len() && marks[*next] >= best2 {
        *next += 1;
    }
    marks.get(*next).map(|&m| best2.min(m * (1.0 + 1e-9)))
}

/// Gamma values from their squares.
#[inline(always)]
fn finish(best2: &[f64; 16], out: &mut [f64]) {
    for (o, b) in out.iter_mut().zip(best2) {
        *o = b.max(0.0).sqrt();
    }
}

/// The node's place in the grid, for leaving out cells beyond the grid's faces.
#[derive(Default)]
struct Bounds {
    node: [i32; MAX_DIMS],
    /// Index of the last cell along each axis.
    last: [i32; MAX_DIMS],
}

/// Where a block is evaluated: the doses around the node, the reference dose, the grid's
/// bounds, and the vertex positions of the block's simplices (for face solves).
struct Placement<'a> {
    dose: &'a [f64],
    flat: usize,
    d_ref: f64,
    bounds: &'a Bounds,
    pos: &'a [[[f64; MAX_DIMS]; MAX_VERTS]],
}

/// Per-criterion constants of one point: squared criteria, reciprocals, squared radii.
#[derive(Default)]
struct Constants {
    dd2: [f64; 16],
    dt2: [f64; 16],
    idd: [f64; 16],
    idt: [f64; 16],
    max2: [f64; 16],
}

/// Exact distances to a block of edges: the segment between the end nodes in normalised
/// space, nearest point clamped to the segment. With p the first end and u the step to the
/// second (space over dt, dose over dd), the squared distance of p + t u from the origin is
/// p.p + 2 t p.u + t^2 u.u, its spatial parts tabulated.
#[inline(always)]
fn edge_block_search(
    blk: &EdgeBlock,
    dose: &[f64],
    flat: usize,
    d_ref: f64,
    live: u32,
    k: &Constants,
    best2: &mut [f64; 16],
) {
    // Dose of the first end and the dose step to the second.
    let mut v = [0.0; LANES];
    let mut e = [0.0; LANES];
    for l in 0..LANES {
        v[l] = at::<true>(dose, flat, blk.off[0][l]) - d_ref;
        e[l] = at::<true>(dose, flat, blk.off[1][l]) - d_ref - v[l];
    }
    let mut ve = [0.0; LANES];
    let mut ee = [0.0; LANES];
    let mut vv = [0.0; LANES];
    for l in 0..LANES {
        ve[l] = v[l] * e[l];
        ee[l] = e[l] * e[l];
        vv[l] = v[l] * v[l];
    }
    for c in criteria(live) {
        let (idt2, idd2) = (k.idt[c] * k.idt[c], k.idd[c] * k.idd[c]);
        let mut d2 = [0.0; LANES];
        for l in 0..LANES {
            let pu = blk.pu[l] * idt2 + ve[l] * idd2;
            let uu = blk.uu[l] * idt2 + ee[l] * idd2;
            let t = greater(lesser(-pu / uu, 1.0), 0.0);
            let pp = blk.pp[l] * idt2 + vv[l] * idd2;
            // Never below zero, whatever the rounding.
            d2[l] = greater(pp + t * (2.0 * pu + t * uu), 0.0);
        }
        if k.max2[c] < blk.max_cd2 {
            for l in 0..LANES {
                if blk.cd2[l] > k.max2[c] {
                    d2[l] = f64::INFINITY;
                }
            }
        }
        let mut best = f64::INFINITY;
        for &d in &d2 {
            best = lesser(best, d);
        }
        if best < best2[c] {
            best2[c] = best;
        }
    }
}

/// A block of simplices: the hyperplane distance of those whose foot lies inside, and the hull
/// distance of faces whose nearest hull point lies inside them.
#[inline(always)]
fn simplex_block_search<const K: usize, const INSIDE: bool>(
    blk: &Block,
    place: &Placement,
    live: u32,
    k: &Constants,
    best2: &mut [f64; 16],
) {
    let (dose, flat, d_ref) = (place.dose, place.flat, place.d_ref);
    // Vertex doses (a padding lane reads the node's own dose, never used).
    let mut v = [[0.0; LANES]; MAX_VERTS];
    for j in 0..=K {
        for l in 0..LANES {
            v[j][l] = at::<INSIDE>(dose, flat, blk.off[j][l]);
        }
    }
    // Lanes whose cell lies beyond the grid's faces count as infinitely far.
    let mut missing = [0.0; LANES];
    if !INSIDE {
        for l in 0..LANES {
            for a in 0..K {
                let n = place.bounds.node[a] + blk.cell[a][l];
                if n < 0 || n > place.bounds.last[a] {
                    missing[l] = f64::INFINITY;
                }
            }
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
    for j in 0..K {
        for l in 0..LANES {
            let e = v[j + 1][l] - v[j][l];
            sj[j][l] = e * blk.ih2[j][l];
            g_sq[l] += e * sj[j][l];
        }
    }
    let mut gap2 = [0.0; LANES];
    for l in 0..LANES {
        let gap = greater(greater(lo[l] - d_ref, d_ref - hi[l]), 0.0);
        gap2[l] = gap * gap;
    }
    // The rate of each barycentric coordinate along the gradient, and that rate times the
    // coordinate's reciprocal gradient length (the same for every criterion).
    let mut rate = [[0.0; LANES]; MAX_VERTS];
    let mut rate_inv = [[0.0; LANES]; MAX_VERTS];
    for j in 0..=K {
        for l in 0..LANES {
            rate[j][l] = bary_rate::<K>(&sj, j, l);
            rate_inv[j][l] = rate[j][l] * blk.inv[j][l];
        }
    }
    for c in criteria(live) {
        // Phase one: the hyperplane distance, the barycentric coordinates of its foot, the
        // lower bounds, and the value of every simplex whose foot lies inside it (exact).
        let (dd2c, dt2c) = (k.dd2[c], k.dt2[c]);
        let mut plane2 = [0.0; LANES];
        let mut inv_den = [0.0; LANES];
        let mut shift = [0.0; LANES];
        let (idd2, idt2) = (k.idd[c] * k.idd[c], k.idt[c] * k.idt[c]);
        for l in 0..LANES {
            inv_den[l] = 1.0 / (dd2c + dt2c * g_sq[l]);
            plane2[l] = delta[l] * delta[l] * inv_den[l];
            shift[l] = dt2c * delta[l] * inv_den[l];
        }
        // The spatial distance implied by the largest violation of a barycentric coordinate
        // b_j = beta_j - shift rate_j (the foot lies at least that far from the simplex);
        // positive exactly when the foot lies outside.
        let mut sl = [0.0; LANES];
        for j in 0..=K {
            for l in 0..LANES {
                sl[l] = greater(sl[l], shift[l] * rate_inv[j][l] - blk.beta_inv[j][l]);
            }
        }
        // Padding lanes and simplices beyond this criterion's search radius count as
        // infinitely far.
        let mut far = missing;
        if k.max2[c] < blk.max_cd2 {
            for l in 0..LANES {
                if blk.cd2[l] > k.max2[c] {
                    far[l] = f64::INFINITY;
                }
            }
        }
        let mut lb2 = [0.0; LANES];
        let mut exact = [0.0; LANES];
        for l in 0..LANES {
            // Pythagoras in the hyperplane: the in-plane distance from the foot to the simplex
            // is at least the spatial one over dt.
            lb2[l] = far[l]
                + greater(
                    blk.ds2[l] * idt2 + gap2[l] * idd2,
                    plane2[l] + sl[l] * sl[l] * idt2,
                );
            exact[l] = far[l]
                + if sl[l] > 0.0 {
                    f64::INFINITY
                } else {
                    plane2[l]
                };
        }
        let mut best_in = f64::INFINITY;
        for &e in &exact {
            best_in = lesser(best_in, e);
        }
        if best_in < best2[c] {
            best2[c] = best_in;
        }
        // Phase two, faces, in the simplex's hyperplane. Moving from the foot y by z costs
        // z^T Q z in normalised space, Q = I/dt^2 + g g^T/dd^2; reaching the hull of the face
        // opposite a vertex with coordinate b_j < 0 costs b_j^2 / M_jj at least, with
        // M = grad(b)^T Q^-1 grad(b) and, by Sherman-Morrison, Q^-1 = dt^2 (I - dt^2 g g^T /
        // den). That is the distance to the face's hull; when the hull's nearest point lies
        // inside the face (every other coordinate b_i - b_j M_ij / M_jj non-negative) it is the
        // face's minimum, otherwise the face's minimum lies on its edges.
        let bound = best2[c];
        let mut open = 0u32;
        for l in 0..LANES {
            open |= u32::from((exact[l] == f64::INFINITY) & (lb2[l] < bound)) << l;
        }
        while open != 0 {
            let l = open.trailing_zeros() as usize;
            open &= open - 1;
            let best = best2[c];
            if lb2[l] >= best {
                continue;
            }
            counters::count(counters::OPEN);
            let mut bary = [0.0; MAX_VERTS];
            let mut rate_l = [0.0; MAX_VERTS];
            for j in 0..=K {
                rate_l[j] = rate[j][l];
                bary[j] = blk.beta[j][l] - shift[l] * rate_l[j];
            }
            let lane = OpenLane {
                l,
                bary: &bary,
                rate: &rate_l,
                dt2c,
                inv_den: inv_den[l],
                plane2: plane2[l],
            };
            let (mut m, faces) = face_values::<K, INSIDE>(blk, &lane, best);
            if !INSIDE {
                // No edges in the walk near the grid's faces: a violated face whose hull's
                // nearest point lies outside it, and whose hull is nearer than the best value,
                // is solved exactly.
                for j in 0..=K {
                    if bary[j] < 0.0 && !faces.on_face[j] && faces.hull[j] < m {
                        let pos = &place.pos[l];
                        let mut w = [[0.0; 4]; 4];
                        for (i, wi) in w.iter_mut().enumerate().take(K + 1) {
                            for a in 0..K {
                                wi[a] = pos[i][a] * k.idt[c];
                            }
                            wi[K] = (v[i][l] - d_ref) * k.idd[c];
                        }
                        m = m.min(face_sq(&w, j, K));
                    }
                }
            }
            if m < best {
                counters::count(counters::IMPROVED);
                best2[c] = m;
            }
        }
    }
}

/// One open simplex of a block for one criterion: its lane, the barycentric coordinates of its
/// foot and their rates along the gradient, dt^2, 1/den and the hyperplane distance.
struct OpenLane<'a> {
    l: usize,
    bary: &'a [f64; MAX_VERTS],
    rate: &'a [f64; MAX_VERTS],
    dt2c: f64,
    inv_den: f64,
    plane2: f64,
}

/// Each face's hull distance plane2 + b_j^2 / M_jj, and whether the hull's nearest point lies
/// inside the face (b_j < 0 and b_i - b_j M_ij / M_jj >= 0 for every other i).
struct Faces {
    hull: [f64; MAX_VERTS],
    on_face: [bool; MAX_VERTS],
}

/// The smaller of `best` and the face values of an open simplex (foot outside it), computed for
/// every face at once without branches: a face counts when the hull's nearest point lies inside
/// it, at its hull distance (see `simplex_block_search`). Inside the grid the edges cover every
/// other face; near the grid's faces (`!INSIDE`) the caller solves those from the returned
/// `Faces`, which the walk inside the grid leaves unfilled. Should
/// rounding leave every coordinate non-negative, the foot lies on the simplex and `plane2` is
/// its value.
#[inline(always)]
fn face_values<const K: usize, const INSIDE: bool>(
    blk: &Block,
    lane: &OpenLane,
    best: f64,
) -> (f64, Faces) {
    let OpenLane {
        l,
        bary,
        rate,
        dt2c,
        inv_den,
        plane2,
    } = *lane;
    let q = dt2c * inv_den;
    let mut ratio = [0.0; MAX_VERTS];
    let mut hull = [0.0; MAX_VERTS];
    // Filled only for the walk near the grid's faces, which needs them.
    let mut f = Faces {
        hull: [f64::INFINITY; MAX_VERTS],
        on_face: [false; MAX_VERTS],
    };
    let mut outside = false;
    for j in 0..=K {
        let m_jj = dt2c * (gram::<K>(blk, l, j, j) - q * rate[j] * rate[j]);
        let inv_m = 1.0 / m_jj;
        ratio[j] = bary[j] * inv_m;
        hull[j] = plane2 + bary[j] * ratio[j];
        outside |= bary[j] < 0.0;
    }
    let mut m = if outside { best } else { lesser(best, plane2) };
    for j in 0..=K {
        if bary[j] < 0.0 && hull[j] < best {
            counters::count(counters::HULLS);
        }
        let mut on_face = bary[j] < 0.0;
        for i in 0..=K {
            if i != j {
                let m_ij = dt2c * (gram::<K>(blk, l, i, j) - q * rate[i] * rate[j]);
                on_face &= bary[i] - ratio[j] * m_ij >= 0.0;
            }
        }
        if on_face {
            counters::count(counters::FACES);
            m = lesser(m, hull[j]);
        }
        if !INSIDE {
            f.hull[j] = hull[j];
            f.on_face[j] = on_face;
        }
    }
    (m, f)
}

/// Search counters per point for the benchmark (feature `counters`): how far the walk goes
/// and how much of it needs exact work. Compiled out otherwise.
pub mod counters {
    #[cfg(feature = "counters")]
    use std::sync::atomic::{AtomicU64, Ordering};

    /// Points searched with the table.
    pub const POINTS: usize = 0;
    /// Blocks of four edges or simplices examined.
    pub const BLOCKS: usize = 1;
    /// Distances to faces computed.
    pub const FACES: usize = 2;
    /// Values improved by a face distance.
    pub const IMPROVED: usize = 3;
    /// Points whose search radius left the table.
    pub const LEFT: usize = 4;
    /// Simplices whose faces needed a look after the vector bounds.
    pub const OPEN: usize = 5;
    /// Face hulls nearer than the best value (their faces are then checked).
    pub const HULLS: usize = 6;
    const NAMES: [&str; 7] = [
        "points",
        "blocks",
        "faces",
        "improved",
        "left table",
        "open",
        "hulls",
    ];

    #[cfg(feature = "counters")]
    static COUNTS: [AtomicU64; 7] = [const { AtomicU64::new(0) }; 7];

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

/// The dose at offset `off` from index `flat` of `window`. `INSIDE`: `window` holds exactly
/// the doses the table reaches from `flat` (`NodeTable::span`), so every table offset lies in
/// it and the access needs no check. Otherwise the index is clamped (a lane of a missing cell
/// reads some dose, never used), which needs no branch either.
#[inline(always)]
fn at<const INSIDE: bool>(window: &[f64], flat: usize, off: i32) -> f64 {
    let i = flat.wrapping_add_signed(off as isize);
    if INSIDE {
        debug_assert!(i < window.len());
        // SAFETY: the walk inside the grid cuts `window` to the table's span around `flat`
        // (see `walk`), and every vertex and edge offset of the table lies within that span
        // by construction (`NodeTable::new`), so `i < window.len()`.
        unsafe { *window.get_unchecked(i) }
    } else {
        window[i.min(window.len() - 1)]
    }
}

/// The criteria whose bits are set in `live`, in order.
#[inline(always)]
fn criteria(mut live: u32) -> impl Iterator<Item = usize> {
    std::iter::from_fn(move || {
        (live != 0).then(|| {
            let c = live.trailing_zeros() as usize;
            live &= live - 1;
            c
        })
    })
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
        blk.gjj[j][l]
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

#[cfg(test)]
mod tests {
    use super::*;
    use beamproof_api::Grid;

    #[cfg(target_arch = "x86_64")]
    #[test]
    fn vector_build_gives_the_baseline_bits() {
        // The AVX2 copy of the walk must reproduce the baseline copy to the last bit
        // (determinism across processors), on rough data with three criteria.
        if !std::arch::is_x86_feature_detected!("avx2") {
            eprintln!("no AVX2 on this processor: one build only, nothing to compare");
            return;
        }
        let n = 12usize;
        let axis: Vec<f64> = (0..n).map(|i| i as f64 * 1.25).collect();
        let mut state = 77u64;
        let mut next = || {
            state = state
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            (state >> 11) as f64 / (1u64 << 53) as f64
        };
        let dose: Vec<f64> = (0..n * n * n).map(|_| 50.0 + 20.0 * next()).collect();
        let field = Field::from_grid(&Grid {
            x_mm: axis.clone(),
            y_mm: axis.clone(),
            z_mm: axis,
            dose,
        })
        .expect("field");
        let crits = [
            Criterion {
                dose_fraction: 0.03,
                dta_mm: 2.0,
                local: false,
                norm_dose: 70.0,
                max_search_mm: 6.0,
            },
            Criterion {
                dose_fraction: 0.02,
                dta_mm: 1.0,
                local: true,
                norm_dose: 70.0,
                max_search_mm: 3.0,
            },
            Criterion {
                dose_fraction: 0.01,
                dta_mm: 1.0,
                local: false,
                norm_dose: 70.0,
                max_search_mm: 3.0,
            },
        ];
        let table = NodeTable::for_search(&field, 6.0).expect("table");
        let mut compared = 0;
        for i in 0..n {
            for j in 0..n {
                for l in 0..n {
                    let node = [i, j, l];
                    let inside = table.covers(&field, &node);
                    let d_ref = 45.0 + 30.0 * next();
                    let dd: Vec<f64> = crits.iter().map(|c| c.delta_dose(d_ref)).collect();
                    let dt: Vec<f64> = crits.iter().map(|c| c.dta_mm).collect();
                    let pc = PointCriteria {
                        crits: &crits,
                        dd: &dd,
                        dt: &dt,
                        // The third only settles pass/fail marks (see `settle`).
                        marks: &[&[], &[], &[4.0, 1.0, 0.25]],
                    };
                    let (mut a, mut b) = ([0.0; 3], [0.0; 3]);
                    let point = NodePoint {
                        field: &field,
                        table: &table,
                        pc: &pc,
                        node,
                        d_ref,
                    };
                    // SAFETY (both blocks): AVX2 support was checked at the start of the test.
                    let (done_a, done_b) = if inside {
                        (walk::<3, true>(&point, &mut a), unsafe {
                            walk_avx2::<3, true>(&point, &mut b)
                        })
                    } else {
                        (walk::<3, false>(&point, &mut a), unsafe {
                            walk_avx2::<3, false>(&point, &mut b)
                        })
                    };
                    assert_eq!(done_a, done_b);
                    for c in 0..3 {
                        assert_eq!(
                            a[c].to_bits(),
                            b[c].to_bits(),
                            "node {node:?}, criterion {c}"
                        );
                    }
                    compared += 1;
                }
            }
        }
        assert_eq!(
            compared,
            n * n * n,
            "every node compared, inside and near the faces"
        );
    }
}
