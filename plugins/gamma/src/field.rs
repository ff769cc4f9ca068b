//! The evaluated dose distribution as a rectilinear grid with one to three active axes, with
//! the piecewise-linear (simplicial) interpolation of Ju et al (Med Phys 2008;35:879-887):
//! every cell is split into k! simplices by the Kuhn triangulation (one simplex per ordering of
//! the k axes), which conforms across neighbouring cells, so the interpolant is continuous and
//! linear inside each simplex.

use beamproof_api::{Curve, Grid, SINGLETON_AXIS_TOLERANCE_MM};

/// Largest number of active axes.
pub const MAX_DIMS: usize = 3;

/// A rectilinear grid restricted to its active (longer than one) axes.
#[derive(Debug, Clone)]
pub struct Field {
    /// Number of active axes (1 to 3).
    pub k: usize,
    /// Coordinates of each active axis, strictly increasing, mm.
    pub axes: [Vec<f64>; MAX_DIMS],
    /// IEC axis (0 = X, 1 = Y, 2 = Z) of each active axis.
    pub iec_axis: [usize; MAX_DIMS],
    /// Coordinate of each IEC axis that is not active (a plane's offset), for point checks.
    pub fixed: [Option<f64>; 3],
    /// Node doses, first active axis fastest.
    pub dose: Vec<f64>,
    strides: [usize; MAX_DIMS],
    /// Reciprocal spacing of each active axis when its nodes are evenly spaced (to 1e-9
    /// relative), so a cell is found by one division instead of a binary search.
    even: [Option<f64>; MAX_DIMS],
}

impl Field {
    /// A field from a grid; `None` when the grid has no active axis.
    pub fn from_grid(g: &Grid) -> Option<Field> {
        let all = [&g.x_mm, &g.y_mm, &g.z_mm];
        let mut axes: [Vec<f64>; MAX_DIMS] = Default::default();
        let mut iec_axis = [0; MAX_DIMS];
        let mut fixed = [None; 3];
        let mut k = 0;
        for (i, a) in all.iter().enumerate() {
            if a.len() > 1 {
                axes[k] = a.to_vec();
                iec_axis[k] = i;
                k += 1;
            } else {
                fixed[i] = a.first().copied();
            }
        }
        // The grid stores x fastest, then y, then z; dropping singleton axes keeps that order.
        (k > 0).then(|| Field::new(k, axes, iec_axis, fixed, g.dose.clone()))
    }

    /// A one-axis field from a curve (its own axis is the active one; IEC axis 0 by convention).
    pub fn from_curve(c: &Curve) -> Field {
        let axes = [c.positions_mm.clone(), Vec::new(), Vec::new()];
        Field::new(
            1,
            axes,
            [0, 1, 2],
            [None, Some(0.0), Some(0.0)],
            c.dose.clone(),
        )
    }

    fn new(
        k: usize,
        axes: [Vec<f64>; MAX_DIMS],
        iec_axis: [usize; MAX_DIMS],
        fixed: [Option<f64>; 3],
        dose: Vec<f64>,
    ) -> Field {
        let mut strides = [0; MAX_DIMS];
        let mut s = 1;
        for a in 0..k {
            strides[a] = s;
            s *= axes[a].len();
        }
        let mut even = [None; MAX_DIMS];
        for a in 0..k {
            let ax = &axes[a];
            let n = ax.len();
            let h = (ax[n - 1] - ax[0]) / (n - 1) as f64;
            if h > 0.0
                && ax
                    .iter()
                    .enumerate()
                    .all(|(i, &x)| (x - (ax[0] + i as f64 * h)).abs() <= 1e-9 * h)
            {
                even[a] = Some(1.0 / h);
            }
        }
        Field {
            k,
            axes,
            iec_axis,
            fixed,
            dose,
            strides,
            even,
        }
    }

    /// Spacing of active axis `a` when its nodes are evenly spaced, mm.
    pub fn even_spacing(&self, a: usize) -> Option<f64> {
        self.even[a].map(|inv| 1.0 / inv)
    }

    /// Flat index step of each active axis in `dose`.
    pub fn strides(&self) -> [usize; MAX_DIMS] {
        self.strides
    }

    /// Local node indices of `u` when it lies on a node (to 1e-9 of the spacing) and every
    /// active axis is evenly spaced.
    #[inline]
    pub fn node_at(&self, u: &[f64; MAX_DIMS]) -> Option<[usize; MAX_DIMS]> {
        let mut idx = [0usize; MAX_DIMS];
        for a in 0..self.k {
            let inv = self.even[a]?;
            let ax = &self.axes[a];
            let t = (u[a] - ax[0]) * inv;
            let i = t.round();
            if !(i >= 0.0 && i < ax.len() as f64) || (t - i).abs() > 1e-9 {
                return None;
            }
            idx[a] = i as usize;
        }
        Some(idx)
    }

    /// Node dose at local node indices.
    #[inline]
    pub fn node(&self, idx: &[usize; MAX_DIMS]) -> f64 {
        let mut flat = 0;
        for a in 0..self.k {
            flat += idx[a] * self.strides[a];
        }
        self.dose[flat]
    }

    /// Local coordinates of an IEC point, or `None` when it lies off a plane or outside the grid.
    pub fn local(&self, pos: [f64; 3]) -> Option<[f64; MAX_DIMS]> {
        for (i, f) in self.fixed.iter().enumerate() {
            if let Some(c) = f
                && (pos[i] - c).abs() > SINGLETON_AXIS_TOLERANCE_MM
            {
                return None;
            }
        }
        let mut u = [0.0; MAX_DIMS];
        for a in 0..self.k {
            let v = pos[self.iec_axis[a]];
            let ax = &self.axes[a];
            if !(v >= ax[0] && v <= ax[ax.len() - 1]) {
                return None;
            }
            u[a] = v;
        }
        Some(u)
    }

    /// Index of the cell containing `v` along active axis `a` (the last cell for the last node).
    #[inline]
    pub fn cell_of(&self, a: usize, v: f64) -> usize {
        let ax = &self.axes[a];
        let last = ax.len() - 2;
        if let Some(inv) = self.even[a] {
            // The estimate may be one off by rounding; step to the cell whose lower node is
            // the last one at or below `v`, as the binary search below defines it.
            let t = (v - ax[0]) * inv;
            if t.is_finite() {
                let mut i = (t.max(0.0) as usize).min(last);
                if i > 0 && ax[i] > v {
                    i -= 1;
                } else if i < last && ax[i + 1] <= v {
                    i += 1;
                }
                return i;
            }
        }
        ax.partition_point(|&c| c <= v).clamp(1, ax.len() - 1) - 1
    }

    /// The cell containing `u` and the fractional position inside it along each active axis.
    #[inline]
    fn locate(&self, u: &[f64; MAX_DIMS]) -> ([usize; MAX_DIMS], [f64; MAX_DIMS]) {
        let mut cell = [0; MAX_DIMS];
        let mut frac = [0.0; MAX_DIMS];
        for a in 0..self.k {
            let c = self.cell_of(a, u[a]);
            let ax = &self.axes[a];
            cell[a] = c;
            frac[a] = ((u[a] - ax[c]) / (ax[c + 1] - ax[c])).clamp(0.0, 1.0);
        }
        (cell, frac)
    }

    /// Dose at local coordinates `u` inside the grid by simplicial interpolation.
    /// The simplicial interpolant at `u` and its gradient (dose per mm along each active axis)
    /// in the simplex that contains `u`; `u` must lie inside the grid.
    pub fn interpolate_with_gradient(&self, u: &[f64; MAX_DIMS]) -> (f64, [f64; MAX_DIMS]) {
        let (cell, frac) = self.locate(u);
        let mut order = [0, 1, 2];
        order[..self.k].sort_by(|&p, &q| frac[q].total_cmp(&frac[p]));
        let mut idx = cell;
        let mut prev = self.node(&idx);
        let mut d = prev;
        let mut grad = [0.0; MAX_DIMS];
        for &a in order.iter().take(self.k) {
            idx[a] += 1;
            let next = self.node(&idx);
            let step = next - prev;
            d += step * frac[a];
            grad[a] = step / (self.axes[a][cell[a] + 1] - self.axes[a][cell[a]]);
            prev = next;
        }
        (d, grad)
    }

    pub fn interpolate(&self, u: &[f64; MAX_DIMS]) -> f64 {
        let (cell, frac) = self.locate(u);
        // The containing simplex orders the axes by decreasing fraction; its barycentric
        // weights are the successive differences of the sorted fractions.
        let mut order = [0, 1, 2];
        order[..self.k].sort_by(|&p, &q| frac[q].total_cmp(&frac[p]));
        let mut idx = cell;
        let mut d = self.node(&idx) * (1.0 - frac[order[0]]);
        for j in 0..self.k {
            idx[order[j]] += 1;
            let next = if j + 1 < self.k {
                frac[order[j + 1]]
            } else {
                0.0
            };
            d += self.node(&idx) * (frac[order[j]] - next);
        }
        d
    }

    /// Dose at local coordinates `u` inside the grid by multilinear (bi- or trilinear)
    /// interpolation between the 2^k corners of the containing cell.
    pub fn multilinear(&self, u: &[f64; MAX_DIMS]) -> f64 {
        let (cell, frac) = self.locate(u);
        let mut d = 0.0;
        for bits in 0..(1usize << self.k) {
            let mut idx = cell;
            let mut w = 1.0;
            for a in 0..self.k {
                if (bits >> a) & 1 == 1 {
                    idx[a] += 1;
                    w *= frac[a];
                } else {
                    w *= 1.0 - frac[a];
                }
            }
            if w != 0.0 {
                d += w * self.node(&idx);
            }
        }
        d
    }

    /// True when local coordinates `u` lie inside the grid.
    pub fn contains(&self, u: &[f64; MAX_DIMS]) -> bool {
        (0..self.k).all(|a| u[a] >= self.axes[a][0] && u[a] <= self.axes[a][self.axes[a].len() - 1])
    }

    /// Largest spacing between neighbouring nodes over all active axes, mm.
    pub fn max_spacing(&self) -> f64 {
        (0..self.k)
            .flat_map(|a| self.axes[a].windows(2).map(|w| w[1] - w[0]))
            .fold(0.0, f64::max)
    }
}

/// The k! orderings of the active axes, each defining one simplex of a cell.
pub fn kuhn_orders(k: usize) -> &'static [[usize; MAX_DIMS]] {
    const ONE: [[usize; 3]; 1] = [[0, 1, 2]];
    const TWO: [[usize; 3]; 2] = [[0, 1, 2], [1, 0, 2]];
    const THREE: [[usize; 3]; 6] = [
        [0, 1, 2],
        [0, 2, 1],
        [1, 0, 2],
        [1, 2, 0],
        [2, 0, 1],
        [2, 1, 0],
    ];
    match k {
        1 => &ONE,
        2 => &TWO,
        _ => &THREE,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn plane() -> Field {
        // Dose = 1 + 2x + 3y on a non-uniform 3 x 3 grid: linear functions are reproduced
        // exactly by any simplicial interpolation (analytic property).
        let xs = [0.0, 1.0, 3.0];
        let ys = [-1.0, 0.0, 2.0];
        let mut dose = Vec::new();
        for y in ys {
            for x in xs {
                dose.push(1.0 + 2.0 * x + 3.0 * y);
            }
        }
        Field::from_grid(&Grid {
            x_mm: xs.to_vec(),
            y_mm: ys.to_vec(),
            z_mm: vec![5.0],
            dose,
        })
        .expect("field")
    }

    #[test]
    fn evenly_spaced_cell_lookup_agrees_with_the_binary_search() {
        // Two independent definitions of the containing cell (division with correction, and
        // the partition point of the sorted axis), on an axis with a non-representable step.
        let xs: Vec<f64> = (0..50).map(|i| -12.3 + 0.1 * i as f64).collect();
        let f = Field::from_grid(&Grid {
            x_mm: xs.clone(),
            y_mm: vec![0.0],
            z_mm: vec![0.0],
            dose: vec![1.0; xs.len()],
        })
        .expect("field");
        assert!(f.even[0].is_some());
        let binary = |v: f64| xs.partition_point(|&c| c <= v).clamp(1, xs.len() - 1) - 1;
        let mut probes: Vec<f64> = xs.clone();
        probes.extend(xs.iter().map(|x| x + 1e-13));
        probes.extend(xs.iter().map(|x| x - 1e-13));
        probes.extend((0..1000).map(|i| -13.0 + 0.0063 * i as f64));
        for v in probes {
            assert_eq!(f.cell_of(0, v), binary(v), "at {v}");
        }
    }

    #[test]
    fn linear_dose_is_interpolated_exactly() {
        let f = plane();
        assert_eq!(f.k, 2);
        for (x, y) in [(0.5, -0.5), (2.9, 1.9), (3.0, 2.0), (0.0, -1.0), (1.7, 0.1)] {
            let got = f.interpolate(&[x, y, 0.0]);
            assert!(
                (got - (1.0 + 2.0 * x + 3.0 * y)).abs() < 1e-12,
                "{x},{y}: {got}"
            );
        }
    }

    #[test]
    fn multilinear_interpolation_reproduces_bilinear_functions() {
        // Bilinear interpolation is exact for f = a + bx + cy + dxy on each cell (definition).
        let xs = [0.0, 1.0, 3.0];
        let ys = [-1.0, 0.0, 2.0];
        let f = |x: f64, y: f64| 1.0 + 2.0 * x + 3.0 * y + 0.5 * x * y;
        let mut dose = Vec::new();
        for y in ys {
            for x in xs {
                dose.push(f(x, y));
            }
        }
        let field = Field::from_grid(&Grid {
            x_mm: xs.to_vec(),
            y_mm: ys.to_vec(),
            z_mm: vec![0.0],
            dose,
        })
        .expect("field");
        for (x, y) in [(0.5, -0.5), (2.2, 1.1), (3.0, 2.0)] {
            assert!((field.multilinear(&[x, y, 0.0]) - f(x, y)).abs() < 1e-12);
        }
    }

    #[test]
    fn points_off_the_plane_or_outside_are_not_local() {
        let f = plane();
        assert!(f.local([1.0, 0.0, 5.0]).is_some());
        assert!(f.local([1.0, 0.0, 5.5]).is_none());
        assert!(f.local([3.1, 0.0, 5.0]).is_none());
    }
}
