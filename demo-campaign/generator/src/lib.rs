//! The demo campaign's data, generated from an analytic beam model written for this invented
//! scenario (not clinical data, not a real machine): a 6 MV-like depth dose with a linear
//! build-up to 15 mm and exponential fall-off beyond, times error-function field edges with
//! slight horns and a scatter tail. Measurements are the model with invented per-machine
//! deviations and seeded detector noise; the planning-system dose is the model itself,
//! written as data CSV files and a DICOM RT Dose grid (dicom-rs).
//!
//! Every number is fixed: the same generator writes the same bytes (a test checks the committed
//! files against a fresh generation).

use std::fmt::Write as _;
use std::path::{Path, PathBuf};

pub mod film;
mod rtdose;
mod rtplan;

/// Isocentre in the dose grid's DICOM patient coordinates, mm (HFS phantom).
pub const ISO: [f64; 3] = [10.0, -50.0, 25.0];
/// Dose at the isocentre, 10 cm deep, Gy.
pub const D_ISO: f64 = 2.0;

/// Relative depth dose: linear build-up from 45 % at the surface to the maximum at 15 mm, then
/// exponential attenuation (0.48 % per mm).
pub fn depth_factor(d_mm: f64) -> f64 {
    let build = if d_mm < 15.0 {
        (d_mm / 15.0).min(1.0) * 0.55 + 0.45
    } else {
        1.0
    };
    build * (-0.0048 * (d_mm - 15.0).max(0.0)).exp()
}

/// Error function (Abramowitz & Stegun 7.1.26, |error| < 1.5e-7): enough for invented data.
pub fn erf(x: f64) -> f64 {
    let t = 1.0 / (1.0 + 0.327_591_1 * x.abs());
    let y = 1.0
        - (((((1.061_405_429 * t - 1.453_152_027) * t) + 1.421_413_741) * t - 0.284_496_736) * t
            + 0.254_829_592)
            * t
            * (-x * x).exp();
    if x >= 0.0 { y } else { -y }
}

/// Open-field shape across one axis: error-function edges (sigma 3 mm) at +-`half`, slight
/// horns, and a 3 % scatter tail outside the field.
pub fn edge(u_mm: f64, half_mm: f64) -> f64 {
    let s = std::f64::consts::SQRT_2 * 3.0;
    let a = (half_mm - u_mm) / s;
    let b = (half_mm + u_mm) / s;
    0.97 * 0.25 * (1.0 + erf(a)) * (1.0 + erf(b)) * (1.0 + 0.0004 * u_mm * u_mm / 10.0) + 0.03
}

/// Dose at an IEC 61217 point (mm from the isocentre) of the 10 x 10 cm field entering from
/// above (gantry 0) with the isocentre 10 cm deep.
pub fn dose_iec(x: f64, y: f64, z: f64) -> f64 {
    let depth = 100.0 - z;
    D_ISO * depth_factor(depth) / depth_factor(100.0) * edge(x, 50.0) * edge(y, 50.0)
}

/// A second invented beam: 10 MV flattening-filter free. Deeper maximum (24 mm), a lower
/// surface dose and slower attenuation than the 6 MV beam, and a cone-shaped profile (dose
/// falling 0.18 % per mm from the axis) with sharper edges (sigma 2.5 mm).
pub fn depth_factor_fff(d_mm: f64) -> f64 {
    let build = if d_mm < 24.0 {
        (d_mm / 24.0).min(1.0) * 0.62 + 0.38
    } else {
        1.0
    };
    build * (-0.0040 * (d_mm - 24.0).max(0.0)).exp()
}

/// Relative depth dose of a square field of side `side_mm`: beyond the maximum, smaller fields
/// attenuate faster (less phantom scatter) by 0.06 % per mm per unit of ln(100 mm / side);
/// the 10 x 10 cm field is `depth_factor` or `depth_factor_fff` itself.
pub fn depth_factor_sized(d_mm: f64, side_mm: f64, fff: bool) -> f64 {
    let (base, dmax) = if fff {
        (depth_factor_fff(d_mm), 24.0)
    } else {
        (depth_factor(d_mm), 15.0)
    };
    let k = 0.0006 * (100.0 / side_mm).ln();
    base * (-k * (d_mm - dmax).max(0.0)).exp()
}

/// The flattening-filter-free shape across one axis.
pub fn edge_fff(u_mm: f64, half_mm: f64) -> f64 {
    let s = std::f64::consts::SQRT_2 * 2.5;
    let a = (half_mm - u_mm) / s;
    let b = (half_mm + u_mm) / s;
    0.975 * 0.25 * (1.0 + erf(a)) * (1.0 + erf(b)) * (1.0 - 0.0018 * u_mm.abs()) + 0.025
}

/// Relative crossplane profile at 10 cm depth of a square field of side `2 half` (mm) for
/// the 6 MV (`fff` false) or the 10 MV FFF beam, in percent of the central axis.
pub fn profile_percent(x: f64, half: f64, fff: bool) -> f64 {
    if fff {
        100.0 * edge_fff(x, half) / edge_fff(0.0, half)
    } else {
        100.0 * edge(x, half) / edge(0.0, half)
    }
}

/// Deterministic normal deviates (64-bit LCG, Box-Muller), seeded.
pub struct Noise(u64);

impl Noise {
    pub fn new(seed: u64) -> Noise {
        Noise(seed)
    }
    fn uniform(&mut self) -> f64 {
        self.0 = self
            .0
            .wrapping_mul(6_364_136_223_846_793_005)
            .wrapping_add(1_442_695_040_888_963_407);
        ((self.0 >> 11) as f64 + 0.5) / (1u64 << 53) as f64
    }
    /// A normal deviate with standard deviation `sd`.
    pub fn normal(&mut self, sd: f64) -> f64 {
        let (u, v) = (self.uniform(), self.uniform());
        sd * (-2.0 * u.ln()).sqrt() * (std::f64::consts::TAU * v).cos()
    }
}

/// Evenly spaced values from `from` to `to` inclusive.
fn steps(from: f64, to: f64, step: f64) -> Vec<f64> {
    let n = ((to - from) / step + 1e-9).floor() as usize;
    (0..=n).map(|i| from + i as f64 * step).collect()
}

type Point<'a> = (&'a str, f64, f64, f64, f64);

/// Dose of a shaped field at (x, y, z) with bank B moved by the last argument (mm).
type FieldDose = fn(f64, f64, f64, f64) -> f64;

/// A scan of the demo: file name, curve axis, positions, and the relative dose at a position
/// for a parameter (slab density, or field widening).
type Scan<'a> = (String, &'a str, Vec<f64>, Box<dyn Fn(f64, f64) -> f64>);

fn points_csv(rows: &[Point], unit: &str, note: &str) -> String {
    let mut s = format!(
        "# beamproof-data: 1\n# shape: points\n# dose-unit: {unit}\n# position-unit: mm\n# description: {note}\nlabel,x,y,z,dose\n"
    );
    for (label, x, y, z, d) in rows {
        let _ = writeln!(s, "{label},{x:.1},{y:.1},{z:.1},{d:.4}");
    }
    s
}

fn curve_csv(axis: &str, positions: &[f64], dose: impl Fn(f64) -> f64, note: &str) -> String {
    let mut s = format!(
        "# beamproof-data: 1\n# shape: curve\n# axis: {axis}\n# dose-unit: %\n# position-unit: mm\n# description: {note}\nposition,dose\n"
    );
    for &p in positions {
        let _ = writeln!(s, "{p:.1},{:.3}", dose(p));
    }
    s
}

fn plane_csv(axis: &[f64], dose: impl Fn(usize, usize) -> f64, note: &str) -> String {
    let mut s = format!(
        "# beamproof-data: 1\n# shape: plane\n# plane: xy\n# plane-offset: 0\n# dose-unit: Gy\n# position-unit: mm\n# description: {note}\ny\\x"
    );
    for x in axis {
        let _ = write!(s, ",{x:.1}");
    }
    s.push('\n');
    for (j, y) in axis.iter().enumerate() {
        let _ = write!(s, "{y:.1}");
        for i in 0..axis.len() {
            let _ = write!(s, ",{:.4}", dose(i, j));
        }
        s.push('\n');
    }
    s
}

/// Chamber points of the 10 x 10 cm field: central axis at three depths, two off axis.
const CAX_POINTS: [(&str, f64, f64, f64); 5] = [
    ("d50", 0.0, 0.0, 50.0),
    ("d100", 0.0, 0.0, 0.0),
    ("d150", 0.0, 0.0, -50.0),
    ("x-30", -30.0, 0.0, 0.0),
    ("x+30", 30.0, 0.0, 0.0),
];
/// Prostate plan, chamber in a body phantom: invented planning-system point doses (Gy).
const PROSTATE: [(&str, f64, f64, f64, f64); 3] = [
    ("iso", 0.0, 0.0, 0.0, 2.000),
    ("ptv-sup", 0.0, 25.0, 5.0, 1.962),
    ("rectum", 0.0, -5.0, -35.0, 1.105),
];

/// One machine's invented deviations from the model.
struct Machine {
    id: &'static str,
    /// Measured / calculated - 1 at each chamber point of the 10 x 10 field.
    cax: [f64; 5],
    /// Reference output error (lin-a's 2.1 % is the demo's deliberate failure).
    output: f64,
    prostate: [f64; 3],
    /// Film: shift along x (mm) and dose scale.
    film: (f64, f64),
    /// Profile half-width increase on each side, mm.
    widen: f64,
}

const MACHINES: [Machine; 2] = [
    Machine {
        id: "lin-a",
        cax: [0.004, -0.002, 0.006, -0.005, 0.003],
        output: 0.021,
        prostate: [0.006, -0.011, 0.018],
        film: (0.0, 1.000),
        widen: 0.0,
    },
    Machine {
        id: "lin-b",
        cax: [0.007, 0.004, 0.017, -0.003, 0.009],
        output: 0.008,
        prostate: [-0.004, 0.009, -0.015],
        film: (1.0, 1.010),
        widen: 0.6,
    },
];

fn write(dir: &Path, rel: &str, bytes: &[u8], out: &mut Vec<PathBuf>) -> Result<(), String> {
    let p = dir.join(rel);
    if let Some(parent) = p.parent() {
        std::fs::create_dir_all(parent).map_err(|e| format!("{}: {e}", parent.display()))?;
    }
    std::fs::write(&p, bytes).map_err(|e| format!("{}: {e}", p.display()))?;
    out.push(p);
    Ok(())
}

/// A calculated curve (`tps/NAME.csv`) and each machine's measured scan of it
/// (`MACHINE/NAME.csv`) with 0.2 % seeded noise drawn per machine in position order.
struct ScanSet<'a> {
    name: &'a str,
    axis: &'a str,
    positions: &'a [f64],
    /// Description of the calculated curve, and the prefix of the measured ones' (", machine"
    /// follows).
    notes: (&'a str, &'a str),
}

impl ScanSet<'_> {
    fn write(
        &self,
        dir: &Path,
        out: &mut Vec<PathBuf>,
        noise: &mut Noise,
        calc: impl Fn(f64) -> f64,
        measured: impl Fn(&Machine, f64) -> f64,
    ) -> Result<(), String> {
        let text = curve_csv(self.axis, self.positions, calc, self.notes.0);
        write(dir, &format!("tps/{}.csv", self.name), text.as_bytes(), out)?;
        for m in &MACHINES {
            let grain: Vec<f64> = self.positions.iter().map(|_| noise.normal(0.002)).collect();
            let values: Vec<f64> = self
                .positions
                .iter()
                .zip(&grain)
                .map(|(&p, g)| measured(m, p) * (1.0 + g))
                .collect();
            let text = curve_csv(
                self.axis,
                self.positions,
                |p| {
                    let i = self.positions.iter().position(|&q| q == p).unwrap_or(0);
                    values[i]
                },
                &format!("{}, {}", self.notes.1, m.id),
            );
            write(
                dir,
                &format!("{}/{}.csv", m.id, self.name),
                text.as_bytes(),
                out,
            )?;
        }
        Ok(())
    }
}

/// A scan set whose notes are the usual ones: "calculated NAME" and "water-tank scan NAME".
#[allow(clippy::too_many_arguments)]
fn tank_scan(
    dir: &Path,
    out: &mut Vec<PathBuf>,
    noise: &mut Noise,
    name: &str,
    axis: &str,
    positions: &[f64],
    calc: impl Fn(f64) -> f64,
    measured: impl Fn(&Machine, f64) -> f64,
) -> Result<(), String> {
    let (calc_note, meas_note) = (
        format!("calculated {name}"),
        format!("water-tank scan {name}"),
    );
    ScanSet {
        name,
        axis,
        positions,
        notes: (&calc_note, &meas_note),
    }
    .write(dir, out, noise, calc, measured)
}

/// A detector array's readings on a square grid of detector positions in the isocentre plane
/// (IEC z = 0), written as `MACHINE/NAME.csv` with labels `{label}001`, ... in row order (y
/// outer, x inner: the order in which `reading` is called, which fixes the noise sequence).
struct DetectorArray<'a> {
    name: &'a str,
    label: char,
    pitch: &'a [f64],
    /// Description; ", machine" follows.
    note: &'a str,
}

impl DetectorArray<'_> {
    fn write(
        &self,
        dir: &Path,
        m: &Machine,
        out: &mut Vec<PathBuf>,
        mut reading: impl FnMut(f64, f64) -> f64,
    ) -> Result<(), String> {
        let mut rows = Vec::new();
        for &y in self.pitch {
            for &x in self.pitch {
                rows.push((x, y, reading(x, y)));
            }
        }
        let labels: Vec<String> = (1..=rows.len())
            .map(|i| format!("{}{i:03}", self.label))
            .collect();
        let points: Vec<Point> = rows
            .iter()
            .zip(&labels)
            .map(|(&(x, y, d), l)| (l.as_str(), x, y, 0.0, d))
            .collect();
        write(
            dir,
            &format!("{}/{}.csv", m.id, self.name),
            points_csv(&points, "Gy", &format!("{}, {}", self.note, m.id)).as_bytes(),
            out,
        )
    }
}

/// Write every demo data file under `dir` (the campaign's `data/` folder); returns the paths.
pub fn generate(dir: &Path) -> Result<Vec<PathBuf>, String> {
    let mut out = Vec::new();
    write(
        dir,
        "tps/open-6x-10x10.dcm",
        &rtdose::open_field(ISO).map_err(|e| format!("RT Dose: {e}"))?,
        &mut out,
    )?;
    write(
        dir,
        "tps/output-6x.csv",
        points_csv(
            &[("ref", 0.0, 0.0, 0.0, 2.0)],
            "Gy",
            "planned dose at the reference point",
        )
        .as_bytes(),
        &mut out,
    )?;
    write(
        dir,
        "tps/prostate-points.csv",
        points_csv(&PROSTATE, "Gy", "planning-system point doses").as_bytes(),
        &mut out,
    )?;
    for m in &MACHINES {
        let rows: Vec<Point> = CAX_POINTS
            .iter()
            .zip(m.cax)
            .map(|(&(l, x, y, z), dev)| (l, x, y, z, dose_iec(x, y, z) * (1.0 + dev)))
            .collect();
        write(
            dir,
            &format!("{}/cax-6x-10x10.csv", m.id),
            points_csv(&rows, "Gy", &format!("ion chamber in water, {}", m.id)).as_bytes(),
            &mut out,
        )?;
        write(
            dir,
            &format!("{}/output-6x.csv", m.id),
            points_csv(
                &[("ref", 0.0, 0.0, 0.0, 200.0 * (1.0 + m.output))],
                "cGy",
                &format!("reference output, {}", m.id),
            )
            .as_bytes(),
            &mut out,
        )?;
        let rows: Vec<Point> = PROSTATE
            .iter()
            .zip(m.prostate)
            .map(|(&(l, x, y, z, d), dev)| (l, x, y, z, d * (1.0 + dev)))
            .collect();
        write(
            dir,
            &format!("{}/prostate-chamber.csv", m.id),
            points_csv(&rows, "Gy", &format!("chamber in body phantom, {}", m.id)).as_bytes(),
            &mut out,
        )?;
    }
    // Film-like plane at the isocentre (IEC z = 0), 2 mm pixels, 0.6 % seeded noise.
    let mut noise = Noise::new(20_261_120);
    let film_axis = steps(-70.0, 70.0, 2.0);
    for m in &MACHINES {
        let n = film_axis.len();
        let grain: Vec<f64> = (0..n * n).map(|_| noise.normal(0.006)).collect();
        let (shift, scale) = m.film;
        let text = plane_csv(
            &film_axis,
            |i, j| {
                scale * dose_iec(film_axis[i] - shift, film_axis[j], 0.0) * (1.0 + grain[j * n + i])
            },
            &format!("film plane, {}", m.id),
        );
        write(
            dir,
            &format!("{}/film-6x-10x10.csv", m.id),
            text.as_bytes(),
            &mut out,
        )?;
    }
    // Depth dose on the central axis in percent of the maximum; measured with 0.2 % noise.
    let depths = steps(0.0, 250.0, 2.0);
    let max = depths.iter().map(|&d| depth_factor(d)).fold(0.0, f64::max);
    let pdd = |d: f64| 100.0 * depth_factor(d) / max;
    ScanSet {
        name: "pdd-6x-10x10",
        axis: "depth",
        positions: &depths,
        notes: ("calculated depth dose", "water-tank depth dose"),
    }
    .write(dir, &mut out, &mut noise, pdd, |_, d| pdd(d))?;
    // Crossplane profile at 10 cm depth, 1 mm steps, percent of the central axis; lin-b's
    // field is wider on each side.
    let xs = steps(-90.0, 90.0, 1.0);
    let cax = dose_iec(0.0, 0.0, 0.0);
    ScanSet {
        name: "profile-6x-10x10-x",
        axis: "x",
        positions: &xs,
        notes: (
            "calculated crossplane profile",
            "water-tank crossplane profile",
        ),
    }
    .write(
        dir,
        &mut out,
        &mut noise,
        |x| 100.0 * dose_iec(x, 0.0, 0.0) / cax,
        |m, x| 100.0 * dose_iec(x / ((50.0 + m.widen) / 50.0), 0.0, 0.0) / cax,
    )?;
    // More scans, after the original ones so that their noise is unchanged: 6 MV crossplane
    // profiles of 5 x 5 and 20 x 20 cm fields, and the 10 MV FFF beam's depth dose and 10 x 10
    // profile. Measured scans carry 0.2 % noise; lin-b's fields are slightly wider.
    let fff_max = depths
        .iter()
        .map(|&d| depth_factor_fff(d))
        .fold(0.0, f64::max);
    let pdd_fff = |d: f64| 100.0 * depth_factor_fff(d) / fff_max;
    ScanSet {
        name: "pdd-10fff-10x10",
        axis: "depth",
        positions: &depths,
        notes: (
            "calculated depth dose, 10 MV FFF",
            "water-tank depth dose, 10 MV FFF",
        ),
    }
    .write(dir, &mut out, &mut noise, pdd_fff, |_, d| pdd_fff(d))?;
    let wide = steps(-160.0, 160.0, 1.0);
    for (name, half, fff, positions) in [
        ("6x-5x5", 25.0, false, &xs),
        ("6x-20x20", 100.0, false, &wide),
        ("10fff-10x10", 50.0, true, &xs),
    ] {
        let calc_note = format!("calculated crossplane profile {name}");
        let meas_note = format!("water-tank crossplane profile {name}");
        ScanSet {
            name: &format!("profile-{name}-x"),
            axis: "x",
            positions,
            notes: (&calc_note, &meas_note),
        }
        .write(
            dir,
            &mut out,
            &mut noise,
            |x| profile_percent(x, half, fff),
            |m, x| profile_percent(x / ((half + m.widen / 2.0) / half), half, fff),
        )?;
    }
    // Oblique incidence, a low-density slab and an asymmetric half-blocked field, for both
    // beams. The planning system's slab density is 0.32 where the (invented) truth is 0.30;
    // lin-b's asymmetric field edge sits 0.4 mm further out.
    for (beam, fff) in [("6x", false), ("10fff", true)] {
        let scans: [Scan; 3] = [
            (
                format!("oblique-{beam}-10x10-x"),
                "x",
                xs.clone(),
                Box::new(move |x, _| oblique_percent(x, fff)),
            ),
            (
                format!("slab-{beam}-10x10"),
                "depth",
                depths.clone(),
                Box::new(move |d, rho| slab_percent(d, rho, fff)),
            ),
            (
                format!("asym-{beam}-x0-x10-x"),
                "x",
                wide.clone(),
                Box::new(move |x, widen| {
                    100.0 * shape(x, 50.0 + widen / 2.0, 50.0 + widen / 2.0, fff)
                        / shape(50.0, 50.0, 50.0, fff)
                }),
            ),
        ];
        for (name, axis, positions, f) in &scans {
            let slab = name.starts_with("slab");
            let asym = name.starts_with("asym");
            tank_scan(
                dir,
                &mut out,
                &mut noise,
                name,
                axis,
                positions,
                |p| f(p, if slab { 0.32 } else { 0.0 }),
                |m, p| {
                    let param = if slab {
                        0.30
                    } else if asym && m.id == "lin-b" {
                        0.4
                    } else {
                        0.0
                    };
                    f(p, param)
                },
            )?;
        }
    }
    // A breast-tangent-like plane (12 x 16 cm with a wedged gradient along x) measured on
    // film against the calculated plane, 2 mm pixels: lin-a's film sits 0.5 mm off in x,
    // lin-b's reads 1.5 % high; both with 0.8 % film noise.
    let tangent = |x: f64, y: f64| D_ISO * edge(x, 60.0) * edge(y, 80.0) * (1.0 - 0.004 * x);
    let plane_axis = steps(-90.0, 90.0, 2.0);
    let n = plane_axis.len();
    write(
        dir,
        "tps/breast-tangent-plane.csv",
        plane_csv(
            &plane_axis,
            |i, j| tangent(plane_axis[i], plane_axis[j]),
            "calculated plane, breast tangent",
        )
        .as_bytes(),
        &mut out,
    )?;
    for (m, (shift, scale)) in MACHINES.iter().zip([(0.5, 1.0), (0.0, 1.015)]) {
        let grain: Vec<f64> = (0..n * n).map(|_| noise.normal(0.008)).collect();
        let text = plane_csv(
            &plane_axis,
            |i, j| scale * tangent(plane_axis[i] - shift, plane_axis[j]) * (1.0 + grain[j * n + i]),
            &format!("film plane, breast tangent, {}", m.id),
        );
        write(
            dir,
            &format!("{}/breast-tangent-film.csv", m.id),
            text.as_bytes(),
            &mut out,
        )?;
    }
    // The smallest and largest square fields, 2 x 2 and 30 x 30 cm, for both beams: depth dose
    // and crossplane profile at 10 cm.
    for (beam, fff) in [("6x", false), ("10fff", true)] {
        for (side, positions) in [(20.0, &xs), (300.0, &wide)] {
            sized_field_scans(dir, &mut out, &mut noise, (beam, fff), side, positions)?;
        }
    }
    // Crossplane profiles of the 10 x 10 cm field at 15, 50 and 200 mm depth for both beams:
    // the field widens with divergence (SSD 90 cm) and the 6 MV horns fade with depth.
    for (beam, fff) in [("6x", false), ("10fff", true)] {
        for depth in [15.0, 50.0, 200.0] {
            depth_profile_scan(dir, &mut out, &mut noise, (beam, fff), 100.0, depth, &xs)?;
        }
    }
    // The three-field 6 MV plan of the MU check: AP open 10 x 10, an L-shaped oblique field
    // (the upper half of the leaves closed to the axis) and a wedged PA field, on 1 cm leaves.
    let open = |half: f64| -> Vec<f64> {
        let a = (0..40).map(|i| {
            let y = -200.0 + 10.0 * f64::from(i) + 5.0;
            if y.abs() < half { -half } else { 0.0 }
        });
        let b = (0..40).map(|i| {
            let y = -200.0 + 10.0 * f64::from(i) + 5.0;
            if y.abs() < half { half } else { 0.0 }
        });
        a.chain(b).collect()
    };
    let mut l_shape = open(60.0);
    for i in 20..40 {
        let y = -200.0 + 10.0 * f64::from(i as u8) + 5.0;
        if y > 0.0 && y < 60.0 {
            l_shape[40 + i] = 0.0;
        }
    }
    let beams = [
        rtplan::PlanBeam {
            number: 1,
            name: "AP",
            gantry: 0.0,
            ssd_mm: 900.0,
            jaws_mm: [-50.0, 50.0, -50.0, 50.0],
            leaves_mm: open(50.0),
            wedge: None,
            mu: 150.0,
            dose_gy: PLAN_DOSES[0],
        },
        rtplan::PlanBeam {
            number: 2,
            name: "LAO L",
            gantry: 40.0,
            ssd_mm: 910.0,
            jaws_mm: [-60.0, 60.0, -60.0, 60.0],
            leaves_mm: l_shape,
            wedge: None,
            mu: 180.0,
            dose_gy: PLAN_DOSES[1],
        },
        rtplan::PlanBeam {
            number: 3,
            name: "PA W30",
            gantry: 180.0,
            ssd_mm: 895.0,
            jaws_mm: [-50.0, 50.0, -50.0, 50.0],
            leaves_mm: open(50.0),
            wedge: Some(("W30", 0.62)),
            mu: 250.0,
            dose_gy: PLAN_DOSES[2],
        },
    ];
    // An irregular (L-shaped) field measured with a detector array in the isocentre plane,
    // 10 mm detector pitch, against the calculated 3D dose, for both beams. lin-a's bank B is
    // off by a deliberate 1.5 mm; both arrays read with 0.5 % noise.
    let pitch = steps(-70.0, 70.0, 10.0);
    let fields: [(&str, FieldDose); 2] = [("6x", l_field), ("10fff", l_field_fff)];
    for (beam, field) in fields {
        let grid_name = format!("l-field-{beam}.dcm");
        write(
            dir,
            &format!("tps/{grid_name}"),
            &rtdose::grid(&grid_name, ISO, |x, y, z| field(x, y, z, 0.0))
                .map_err(|e| format!("RT Dose: {e}"))?,
            &mut out,
        )?;
        for (m, offset) in MACHINES.iter().zip([1.5, 0.0]) {
            let note = if beam == "6x" {
                "detector array, L-shaped field"
            } else {
                "detector array, L-shaped field, 10 MV FFF"
            };
            let name = format!("array-l-field-{beam}");
            let array = DetectorArray {
                name: &name,
                label: 'd',
                pitch: &pitch,
                note,
            };
            array.write(dir, m, &mut out, |x, y| {
                field(x, y, 0.0, offset) * (1.0 + noise.normal(0.005))
            })?;
        }
    }
    // A spine SBRT-like 3 x 3 cm 10 MV FFF field on a 2 mm dose grid, measured with a
    // detector array of 5 mm pitch: lin-a's array sits 0.5 mm off in y, lin-b reads 1 % high;
    // both with 0.5 % noise.
    let sbrt = |x: f64, y: f64, z: f64| {
        D_ISO * depth_factor_fff(100.0 - z) / depth_factor_fff(100.0)
            * shape(x, 0.0, 15.0, true)
            * shape(y, 0.0, 15.0, true)
    };
    write(
        dir,
        "tps/spine-sbrt-10fff.dcm",
        &rtdose::grid_on(
            "spine-sbrt-10fff.dcm",
            ISO,
            [(40.0, 2.0), (40.0, 2.0), (40.0, 2.0)],
            sbrt,
        )
        .map_err(|e| format!("RT Dose: {e}"))?,
        &mut out,
    )?;
    let fine = steps(-30.0, 30.0, 5.0);
    for (m, (shift, scale)) in MACHINES.iter().zip([(0.5, 1.0), (0.0, 1.01)]) {
        let array = DetectorArray {
            name: "array-spine-sbrt-10fff",
            label: 's',
            pitch: &fine,
            note: "detector array, spine SBRT field",
        };
        array.write(dir, m, &mut out, |x, y| {
            scale * sbrt(x, y - shift, 0.0) * (1.0 + noise.normal(0.005))
        })?;
    }
    clinical_sites(dir, &mut out, &mut noise)?;
    more_scans(dir, &mut out, &mut noise)?;
    film_scans(dir, &mut out)?;
    write(
        dir,
        "tps/plan-3field-6x.dcm",
        &rtplan::plan("DEMO 3F 6X", &beams).map_err(|e| format!("RT Plan: {e}"))?,
        &mut out,
    )?;
    Ok(out)
}

/// Lateral shape of either beam for a field from `centre - half` to `centre + half` (mm): the
/// horns (6 MV) or the cone (FFF) follow the distance from the beam axis, the edges the field.
pub fn shape(x: f64, centre: f64, half: f64, fff: bool) -> f64 {
    let edges = smooth_box(x, centre, half, if fff { 2.5 } else { 3.0 });
    if fff {
        0.975 * edges * (1.0 - 0.0018 * x.abs()) + 0.025
    } else {
        0.97 * edges * (1.0 + 0.0004 * x * x / 10.0) + 0.03
    }
}

fn depth_of(d: f64, fff: bool) -> f64 {
    if fff {
        depth_factor_fff(d)
    } else {
        depth_factor(d)
    }
}

/// Crossplane scan at 10 cm vertical depth of a 10 x 10 cm field at gantry 30 degrees, in
/// percent of the scan's value on the vertical through the isocentre: along the scan the
/// depth along the beam grows as x sin 30 and the off-axis distance is x cos 30.
pub fn oblique_percent(x: f64, fff: bool) -> f64 {
    let (s, c) = 30f64.to_radians().sin_cos();
    let f = |x: f64| depth_of(100.0 / c + x * s, fff) * shape(x * c, 0.0, 50.0, fff);
    100.0 * f(x) / f(0.0)
}

/// Depth dose of a 10 x 10 cm field through a 6 cm low-density slab (lung-like, 40 to 100 mm
/// deep) of relative electron density `rho`, in percent of the maximum: the radiological depth
/// replaces the depth (no interface effects: invented data for the demo).
pub fn slab_percent(d: f64, rho: f64, fff: bool) -> f64 {
    let radiological = |d: f64| d - (1.0 - rho) * (d - 40.0).clamp(0.0, 60.0);
    let max = (0..=125)
        .map(|i| depth_of(radiological(2.0 * f64::from(i)), fff))
        .fold(0.0, f64::max);
    100.0 * depth_of(radiological(d), fff) / max
}

/// Dose of an L-shaped 6 MV field (the 10 x 10 cm square without its upper-right quadrant,
/// as a multileaf collimator would shape it), entering from above with the isocentre 10 cm
/// deep; `bank_b_mm` moves the right-hand (bank B) leaf edges along +x.
pub fn l_field(x: f64, y: f64, z: f64, bank_b_mm: f64) -> f64 {
    let depth = 100.0 - z;
    let rect = |x0: f64, x1: f64, y0: f64, y1: f64| {
        let (cx, hx) = ((x0 + x1) / 2.0, (x1 - x0) / 2.0);
        let (cy, hy) = ((y0 + y1) / 2.0, (y1 - y0) / 2.0);
        edge(x - cx, hx) * edge(y - cy, hy)
    };
    let lower = rect(-50.0, 50.0 + bank_b_mm, -50.0, 0.0);
    let upper = rect(-50.0, bank_b_mm, 0.0, 50.0);
    D_ISO * depth_factor(depth) / depth_factor(100.0) * lower.max(upper)
}

/// The same L-shaped field with the 10 MV FFF beam (cone-shaped about the beam axis).
pub fn l_field_fff(x: f64, y: f64, z: f64, bank_b_mm: f64) -> f64 {
    let depth = 100.0 - z;
    let rect = |x0: f64, x1: f64, y0: f64, y1: f64| {
        shape(x, (x0 + x1) / 2.0, (x1 - x0) / 2.0, true)
            * shape(y, (y0 + y1) / 2.0, (y1 - y0) / 2.0, true)
    };
    let lower = rect(-50.0, 50.0 + bank_b_mm, -50.0, 0.0);
    let upper = rect(-50.0, bank_b_mm, 0.0, 50.0);
    D_ISO * depth_factor_fff(depth) / depth_factor_fff(100.0) * lower.max(upper)
}

/// The planning system's dose at the isocentre per beam of the three-field plan (invented:
/// within a percent of the independent check with the lin-a beam data).
const PLAN_DOSES: [f64; 3] = [1.2149, 1.4979, 1.2220];

/// A box from `centre - half` to `centre + half` (mm) with error-function edges of standard
/// deviation `sigma` (mm): 1 well inside, 0 well outside, 0.5 on the edge.
pub fn smooth_box(u: f64, centre: f64, half: f64, sigma: f64) -> f64 {
    let s = std::f64::consts::SQRT_2 * sigma;
    let u = u - centre;
    0.25 * (1.0 + erf((half - u) / s)) * (1.0 + erf((half + u) / s))
}

/// A head-and-neck-like 6 MV field, isocentre 10 cm deep: 12 x 14 cm open, with a 2 cm wide
/// strip (x from -10 to 10 mm, y from -70 to -5 mm) brought down to 35 % of the open dose,
/// as leaf segments sparing a spinal-cord-like structure would leave it.
pub fn head_neck(x: f64, y: f64, z: f64) -> f64 {
    let depth = 100.0 - z;
    let open = shape(x, 0.0, 60.0, false) * shape(y, 0.0, 70.0, false);
    let spared = 1.0 - 0.65 * smooth_box(x, 0.0, 10.0, 3.0) * smooth_box(y, -37.5, 32.5, 3.0);
    D_ISO * depth_factor(depth) / depth_factor(100.0) * open * spared
}

/// Brain metastases treated from one isocentre: centre x, centre y, half side (mm) and
/// relative weight of each small square 6 MV field.
const METASTASES: [(f64, f64, f64, f64); 3] = [
    (-25.0, 20.0, 10.0, 1.00),
    (20.0, 15.0, 8.0, 0.95),
    (5.0, -30.0, 12.0, 1.05),
];

/// Dose of the three brain-metastasis fields (isocentre 10 cm deep) with each field edge moved
/// outwards by `widen_mm`; edges of 2.5 mm standard deviation and a 2 % background.
pub fn brain_mets(x: f64, y: f64, z: f64, widen_mm: f64) -> f64 {
    let depth = 100.0 - z;
    let fields: f64 = METASTASES
        .iter()
        .map(|&(cx, cy, half, w)| {
            w * smooth_box(x, cx, half + widen_mm, 2.5) * smooth_box(y, cy, half + widen_mm, 2.5)
        })
        .sum();
    D_ISO * depth_factor(depth) / depth_factor(100.0) * (0.97 * fields + 0.02)
}

/// A lung stereotactic-like 6 MV 5 x 5 cm field, isocentre 10 cm deep in a 3 cm unit-density
/// tumour (85 to 115 mm deep) inside lung of density 0.25 (40 to 85 and 115 to 160 mm):
/// radiological depth along the axis, and field edges of standard deviation `sigma_mm`, wider
/// than in water because secondary electrons travel further in lung. Normalised to `D_ISO` at
/// the isocentre.
pub fn lung_sbrt(x: f64, y: f64, z: f64, sigma_mm: f64) -> f64 {
    let radiological =
        |d: f64| d - 0.75 * ((d - 40.0).clamp(0.0, 45.0) + (d - 115.0).clamp(0.0, 45.0));
    let depth = 100.0 - z;
    let lateral = |u: f64| 0.97 * smooth_box(u, 0.0, 25.0, sigma_mm) + 0.03;
    let centre = 0.97 * smooth_box(0.0, 0.0, 25.0, sigma_mm) + 0.03;
    D_ISO * depth_factor(radiological(depth)) / depth_factor(radiological(100.0))
        * lateral(x)
        * lateral(y)
        / (centre * centre)
}

/// The clinical-like sites added after the first ones (their noise follows the spine array's):
/// a head-and-neck film plane and brain-metastasis and lung arrays, each against a calculated
/// 3D dose grid.
fn clinical_sites(dir: &Path, out: &mut Vec<PathBuf>, noise: &mut Noise) -> Result<(), String> {
    // Head and neck: film (2 mm pixels, 0.8 % noise) against a 2.5 mm grid; lin-a's film sits
    // 0.4 mm off in y, lin-b reads 0.8 % high.
    write(
        dir,
        "tps/head-neck-6x.dcm",
        &rtdose::grid_on(
            "head-neck-6x.dcm",
            ISO,
            [(80.0, 2.5), (20.0, 2.5), (80.0, 2.5)],
            head_neck,
        )
        .map_err(|e| format!("RT Dose: {e}"))?,
        out,
    )?;
    let film_axis = steps(-76.0, 76.0, 2.0);
    let n = film_axis.len();
    for (m, (shift, scale)) in MACHINES.iter().zip([(0.4, 1.0), (0.0, 1.008)]) {
        let grain: Vec<f64> = (0..n * n).map(|_| noise.normal(0.008)).collect();
        let text = plane_csv(
            &film_axis,
            |i, j| {
                scale
                    * head_neck(film_axis[i], film_axis[j] - shift, 0.0)
                    * (1.0 + grain[j * n + i])
            },
            &format!("film plane, head and neck, {}", m.id),
        );
        write(
            dir,
            &format!("{}/head-neck-film.csv", m.id),
            text.as_bytes(),
            out,
        )?;
    }
    // Brain metastases: a detector array of 5 mm pitch against a 2 mm grid; lin-b's small
    // fields are 0.3 mm wider on each side (its wider leaf-defined edges), lin-a's array reads
    // 0.6 % low; 0.5 % noise.
    write(
        dir,
        "tps/brain-mets-6x.dcm",
        &rtdose::grid_on(
            "brain-mets-6x.dcm",
            ISO,
            [(50.0, 2.0), (20.0, 2.0), (50.0, 2.0)],
            |x, y, z| brain_mets(x, y, z, 0.0),
        )
        .map_err(|e| format!("RT Dose: {e}"))?,
        out,
    )?;
    let pitch = steps(-45.0, 45.0, 5.0);
    for (m, (widen, scale)) in MACHINES.iter().zip([(0.0, 0.994), (0.3, 1.0)]) {
        let array = DetectorArray {
            name: "array-brain-mets-6x",
            label: 'b',
            pitch: &pitch,
            note: "detector array, brain metastases",
        };
        array.write(dir, m, out, |x, y| {
            scale * brain_mets(x, y, 0.0, widen) * (1.0 + noise.normal(0.005))
        })?;
    }
    // Lung: the planning system's field edges in lung (standard deviation 4.8 mm) are sharper
    // than the measured ones (5.4 mm) on both machines; lin-b reads 0.5 % high; a 5 mm pitch
    // array against a 2 mm grid with 0.5 % noise.
    write(
        dir,
        "tps/lung-sbrt-6x.dcm",
        &rtdose::grid_on(
            "lung-sbrt-6x.dcm",
            ISO,
            [(50.0, 2.0), (20.0, 2.0), (50.0, 2.0)],
            |x, y, z| lung_sbrt(x, y, z, 4.8),
        )
        .map_err(|e| format!("RT Dose: {e}"))?,
        out,
    )?;
    let pitch = steps(-40.0, 40.0, 5.0);
    for (m, scale) in MACHINES.iter().zip([1.0, 1.005]) {
        let array = DetectorArray {
            name: "array-lung-sbrt-6x",
            label: 'l',
            pitch: &pitch,
            note: "detector array, lung stereotactic field",
        };
        array.write(dir, m, out, |x, y| {
            scale * lung_sbrt(x, y, 0.0, 5.4) * (1.0 + noise.normal(0.005))
        })?;
    }
    Ok(())
}

/// The depth dose of a square field of side `side` (mm), `pdd-BEAM-SIZE`, in percent of its
/// maximum.
fn pdd_scan(
    dir: &Path,
    out: &mut Vec<PathBuf>,
    noise: &mut Noise,
    (beam, fff): (&str, bool),
    side: f64,
) -> Result<(), String> {
    let depths = steps(0.0, 250.0, 2.0);
    let max = depths
        .iter()
        .map(|&d| depth_factor_sized(d, side, fff))
        .fold(0.0, f64::max);
    let pdd = |d: f64| 100.0 * depth_factor_sized(d, side, fff) / max;
    let name = format!("pdd-{beam}-{:.0}x{:.0}", side / 10.0, side / 10.0);
    tank_scan(dir, out, noise, &name, "depth", &depths, pdd, |_, d| pdd(d))
}

/// A square field's depth dose (`pdd-BEAM-SIZE`) and crossplane profile at 10 cm depth
/// (`profile-BEAM-SIZE-x`); lin-b's field is `widen` mm wider on each side.
fn sized_field_scans(
    dir: &Path,
    out: &mut Vec<PathBuf>,
    noise: &mut Noise,
    (beam, fff): (&str, bool),
    side: f64,
    positions: &[f64],
) -> Result<(), String> {
    pdd_scan(dir, out, noise, (beam, fff), side)?;
    let size = format!("{:.0}x{:.0}", side / 10.0, side / 10.0);
    let half = side / 2.0;
    tank_scan(
        dir,
        out,
        noise,
        &format!("profile-{beam}-{size}-x"),
        "x",
        positions,
        |x| profile_percent(x, half, fff),
        |m, x| profile_percent(x / ((half + m.widen) / half), half, fff),
    )
}

/// Crossplane profile of a square field of side `side` (mm, at the isocentre) at `depth` mm
/// in percent of the central axis, SSD 90 cm: the field widens with divergence, the 6 MV
/// horns fade with depth; `widen` moves each edge outwards (mm).
pub fn depth_profile(x: f64, side: f64, depth: f64, widen: f64, fff: bool) -> f64 {
    let half = side / 2.0 * (900.0 + depth) / 1000.0;
    let horn = 1.3 - 0.003 * depth;
    let h = half + widen;
    if fff {
        100.0 * shape(x, 0.0, h, true) / shape(0.0, 0.0, h, true)
    } else {
        let s = |x: f64| {
            let e = shape(x, 0.0, h, false);
            // Rescale the horn term of `shape` by the depth factor.
            (e - 0.03) / (1.0 + 0.0004 * x * x / 10.0) * (1.0 + horn * 0.0004 * x * x / 10.0) + 0.03
        };
        100.0 * s(x) / s(0.0)
    }
}

/// The scan set `profile-BEAM-SIZE-x-dDEPTH` of `depth_profile`; lin-b's edges sit `widen`
/// further out.
fn depth_profile_scan(
    dir: &Path,
    out: &mut Vec<PathBuf>,
    noise: &mut Noise,
    (beam, fff): (&str, bool),
    side: f64,
    depth: f64,
    positions: &[f64],
) -> Result<(), String> {
    let name = format!(
        "profile-{beam}-{:.0}x{:.0}-x-d{depth:.0}",
        side / 10.0,
        side / 10.0
    );
    tank_scan(
        dir,
        out,
        noise,
        &name,
        "x",
        positions,
        |x| depth_profile(x, side, depth, 0.0, fff),
        |m, x| depth_profile(x, side, depth, m.widen, fff),
    )
}

/// Scans added after the clinical sites (their noise follows): the 5 x 5 cm depth doses, the
/// 10 MV FFF 5 x 5 cm profile, and profiles of the 2, 5 and 30 cm fields at 50 and 200 mm.
fn more_scans(dir: &Path, out: &mut Vec<PathBuf>, noise: &mut Noise) -> Result<(), String> {
    let xs = steps(-90.0, 90.0, 1.0);
    let wide = steps(-220.0, 220.0, 1.0);
    for (beam, fff) in [("6x", false), ("10fff", true)] {
        pdd_scan(dir, out, noise, (beam, fff), 50.0)?;
        for side in [20.0, 50.0, 300.0] {
            let positions = if side > 100.0 { &wide } else { &xs };
            for depth in [50.0, 200.0] {
                depth_profile_scan(dir, out, noise, (beam, fff), side, depth, positions)?;
            }
        }
    }
    tank_scan(
        dir,
        out,
        noise,
        "profile-10fff-5x5-x",
        "x",
        &xs,
        |x| profile_percent(x, 25.0, true),
        |m, x| profile_percent(x / ((25.0 + m.widen) / 25.0), 25.0, true),
    )
}

/// Radiochromic film of the brain-metastasis plan, scanned, and the calibration scan of its
/// lot (noise of their own, so that the other files keep theirs). Both machines' films lay in
/// the same scanner template, 0.8 degrees off square; lin-b's scanning day reads 0.8 % bright
/// (scanner drift, removed by the unexposed strip on each scan); the doses follow the arrays'
/// machine deviations (lin-a 0.6 % low, lin-b's fields 0.3 mm wider on each side).
fn film_scans(dir: &Path, out: &mut Vec<PathBuf>) -> Result<(), String> {
    let mut noise = Noise::new(20_261_126);
    let (calibration, _) = film::calibration_scan(&mut noise)?;
    write(dir, "film/calibration-fh2611.tif", &calibration, out)?;
    let place = film::OnScanner {
        origin_mm: [52.0, 50.0],
        angle_deg: 0.8,
    };
    let scan = |drift: f64| film::FilmScan {
        width: 335,
        height: 284,
        place: &place,
        half_mm: 45.0,
        strip: [295, 318, 40, 240],
        drift,
    };
    for (m, ((widen, scale), drift)) in MACHINES
        .iter()
        .zip([(0.0, 0.994), (0.3, 1.0)].into_iter().zip([1.0, 1.008]))
    {
        let tiff = scan(drift).tiff(|x, y| scale * brain_mets(x, y, 0.0, widen), &mut noise)?;
        write(dir, &format!("{}/film-brain-mets.tif", m.id), &tiff, out)?;
    }
    Ok(())
}
