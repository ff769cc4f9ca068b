//! Dose data handed to analyses: 1D curves, scattered point sets and rectilinear grids,
//! all in IEC 61217 fixed coordinates (mm) with dose in one stated unit.

use serde::{Deserialize, Serialize};

/// Unit of the dose values of a dataset. Absolute units are converted to gray by the readers,
/// so analyses only ever see `Gy` or `Percent`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum DoseUnit {
    /// Absolute dose in gray.
    Gy,
    /// Relative dose in percent of some normalisation the file states.
    Percent,
}

impl DoseUnit {
    /// Short label for tables and error messages.
    pub fn label(self) -> &'static str {
        match self {
            DoseUnit::Gy => "Gy",
            DoseUnit::Percent => "%",
        }
    }
}

/// Direction along which a 1D curve is sampled.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum CurveAxis {
    /// IEC 61217 fixed X (crossplane for gantry and collimator at 0).
    X,
    /// IEC 61217 fixed Y (inplane, positive towards the gantry).
    Y,
    /// Along the diagonal of the field; position is signed distance from the central axis.
    Diagonal,
    /// Depth below the phantom surface along the beam axis (0 = surface).
    Depth,
}

/// A 1D scan: positions in mm (strictly increasing) and dose at each position.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Curve {
    pub axis: CurveAxis,
    pub positions_mm: Vec<f64>,
    pub dose: Vec<f64>,
}

/// Scattered measurement points, for example ion-chamber readings or the detectors of an array.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PointSet {
    /// Optional label per point (empty string when the file gives none).
    pub labels: Vec<String>,
    /// IEC 61217 fixed coordinates of each point, mm.
    pub x_mm: Vec<f64>,
    pub y_mm: Vec<f64>,
    pub z_mm: Vec<f64>,
    pub dose: Vec<f64>,
}

impl PointSet {
    /// Number of points.
    pub fn len(&self) -> usize {
        self.dose.len()
    }

    /// True when the set holds no point.
    pub fn is_empty(&self) -> bool {
        self.dose.is_empty()
    }
}

/// A rectilinear dose grid in IEC 61217 fixed coordinates. A plane is a grid with one axis of
/// length one; a volume has all three axes longer than one.
///
/// Values are stored with x fastest: `dose[(iz * ny + iy) * nx + ix]`.
/// Each coordinate vector is strictly increasing.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Grid {
    pub x_mm: Vec<f64>,
    pub y_mm: Vec<f64>,
    pub z_mm: Vec<f64>,
    pub dose: Vec<f64>,
}

/// Distance (mm) within which a point counts as lying on a singleton axis of a grid.
pub const SINGLETON_AXIS_TOLERANCE_MM: f64 = 0.01;

impl Grid {
    /// Number of grid axes longer than one (0 to 3).
    pub fn dimensions(&self) -> usize {
        [&self.x_mm, &self.y_mm, &self.z_mm]
            .iter()
            .filter(|a| a.len() > 1)
            .count()
    }

    /// Dose at node (ix, iy, iz).
    pub fn at(&self, ix: usize, iy: usize, iz: usize) -> f64 {
        let (nx, ny) = (self.x_mm.len(), self.y_mm.len());
        self.dose[(iz * ny + iy) * nx + ix]
    }

    /// Largest dose value of the grid (None for an empty grid).
    pub fn max_dose(&self) -> Option<f64> {
        self.dose.iter().copied().reduce(f64::max)
    }

    /// Dose at an arbitrary point by trilinear interpolation between the eight surrounding nodes.
    ///
    /// Along an axis of length one the point must lie within
    /// [`SINGLETON_AXIS_TOLERANCE_MM`] of its coordinate. Returns `None` outside the grid;
    /// points exactly on the boundary are inside. Linear interpolation is exact for dose that
    /// varies linearly along each axis (the property the unit tests check).
    pub fn sample(&self, x: f64, y: f64, z: f64) -> Option<f64> {
        let (ix, fx) = bracket(&self.x_mm, x)?;
        let (iy, fy) = bracket(&self.y_mm, y)?;
        let (iz, fz) = bracket(&self.z_mm, z)?;
        let step = |i: usize, n: usize| if n > 1 { i + 1 } else { i };
        let (ix1, iy1, iz1) = (
            step(ix, self.x_mm.len()),
            step(iy, self.y_mm.len()),
            step(iz, self.z_mm.len()),
        );
        let lerp = |a: f64, b: f64, t: f64| a + (b - a) * t;
        let c00 = lerp(self.at(ix, iy, iz), self.at(ix1, iy, iz), fx);
        let c10 = lerp(self.at(ix, iy1, iz), self.at(ix1, iy1, iz), fx);
        let c01 = lerp(self.at(ix, iy, iz1), self.at(ix1, iy, iz1), fx);
        let c11 = lerp(self.at(ix, iy1, iz1), self.at(ix1, iy1, iz1), fx);
        Some(lerp(lerp(c00, c10, fy), lerp(c01, c11, fy), fz))
    }
}

/// Locate `v` on an increasing axis: the lower node index and the fraction towards the next node.
fn bracket(axis: &[f64], v: f64) -> Option<(usize, f64)> {
    match axis {
        [] => None,
        [only] => ((v - only).abs() <= SINGLETON_AXIS_TOLERANCE_MM).then_some((0, 0.0)),
        [first, .., last] => {
            if !(v >= *first && v <= *last) {
                return None;
            }
            // partition_point gives the first node strictly greater than v.
            let upper = axis.partition_point(|&a| a <= v).min(axis.len() - 1);
            let lower = upper - 1;
            let span = axis[upper] - axis[lower];
            Some((lower, ((v - axis[lower]) / span).clamp(0.0, 1.0)))
        }
    }
}

/// The shape of data a test supplies to an analysis.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "shape", rename_all = "kebab-case")]
pub enum DatasetData {
    Curve(Curve),
    Points(PointSet),
    Grid(Grid),
}

/// One measured or calculated distribution with its unit and where it came from.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Dataset {
    /// Path of the source file as written in the campaign (after `{machine}` substitution).
    pub source: String,
    pub unit: DoseUnit,
    pub data: DatasetData,
}

impl Dataset {
    /// Human name of the data shape, for messages.
    pub fn shape_name(&self) -> &'static str {
        match &self.data {
            DatasetData::Curve(_) => "curve",
            DatasetData::Points(_) => "point set",
            DatasetData::Grid(g) => match g.dimensions() {
                3 => "3D grid",
                2 => "2D grid",
                _ => "grid",
            },
        }
    }
}

/// A point written `x,y,z`: three finite numbers (mm), spaces allowed around each; `None`
/// otherwise. The one parser of campaign parameters and command-line options that name a
/// point.
pub fn parse_xyz(s: &str) -> Option<[f64; 3]> {
    let v: Vec<f64> = s
        .split(',')
        .map(|p| p.trim().parse::<f64>().ok().filter(|x| x.is_finite()))
        .collect::<Option<_>>()?;
    (v.len() == 3).then(|| [v[0], v[1], v[2]])
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn points_are_three_finite_numbers() {
        // Common practice, no source: the campaign's and the command line's `x,y,z`.
        assert_eq!(parse_xyz(" 1, -2.5 ,3e1"), Some([1.0, -2.5, 30.0]));
        assert_eq!(parse_xyz("1,2"), None);
        assert_eq!(parse_xyz("1,2,3,4"), None);
        assert_eq!(parse_xyz("1,NaN,3"), None);
        assert_eq!(parse_xyz("b001"), None);
    }

    fn ramp_grid() -> Grid {
        // dose = 2x + 3y - z + 10 : trilinear interpolation reproduces any function that is
        // linear along each axis exactly (analytic property, no source needed beyond algebra).
        let x_mm = vec![-2.0, 0.0, 2.0, 4.0];
        let y_mm = vec![0.0, 1.0, 3.0];
        let z_mm = vec![-1.0, 1.0];
        let mut dose = Vec::new();
        for &z in &z_mm {
            for &y in &y_mm {
                for &x in &x_mm {
                    dose.push(2.0 * x + 3.0 * y - z + 10.0);
                }
            }
        }
        Grid {
            x_mm,
            y_mm,
            z_mm,
            dose,
        }
    }

    #[test]
    fn trilinear_sampling_is_exact_for_linear_dose() {
        let g = ramp_grid();
        for &(x, y, z) in &[
            (0.3, 0.5, 0.0),
            (-2.0, 0.0, -1.0),
            (4.0, 3.0, 1.0),
            (1.7, 2.2, 0.4),
        ] {
            let got = g.sample(x, y, z).expect("inside");
            let want = 2.0 * x + 3.0 * y - z + 10.0;
            assert!((got - want).abs() < 1e-12, "{got} vs {want} at {x},{y},{z}");
        }
    }

    #[test]
    fn sampling_outside_the_grid_gives_none() {
        let g = ramp_grid();
        assert_eq!(g.sample(4.01, 0.0, 0.0), None);
        assert_eq!(g.sample(0.0, -0.1, 0.0), None);
    }

    #[test]
    fn singleton_axis_needs_the_point_on_the_plane() {
        let g = Grid {
            x_mm: vec![0.0, 10.0],
            y_mm: vec![5.0],
            z_mm: vec![0.0, 10.0],
            dose: vec![1.0, 2.0, 3.0, 4.0],
        };
        assert_eq!(g.dimensions(), 2);
        assert_eq!(g.sample(5.0, 5.0, 5.0), Some(2.5));
        assert_eq!(g.sample(5.0, 5.5, 5.0), None);
    }
}
