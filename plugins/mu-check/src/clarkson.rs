//! Scatter of an irregular field by Clarkson sector integration (Clarkson, Br J Radiol
//! 1941;14:265), for MLC-shaped apertures.
//!
//! Data needed: the TPR table (depth x square field side at the depth) and the phantom scatter
//! Sp (square field side). From them the scatter-phantom ratio of a circular field of radius
//! R is derived, the TPR analogue of Khan's scatter-maximum ratio:
//!
//!   SPR(d, R) = TPR(d, s) Sp(s) / Sp(0) - TPR(d, 0),   s = R sqrt(pi)  (equal-area square),
//!
//! with TPR(d, 0) and Sp(0), the zero-field values, extrapolated linearly from the two smallest
//! tabulated fields. For radii below the smallest tabulated field SPR is interpolated linearly
//! to SPR(d, 0) = 0; radii above the largest are an error (no extrapolation).
//!
//! The field around the point is divided into N equal sectors; along each sector's central
//! ray the parts inside the aperture, [a_j, b_j], contribute SPR(b_j) - SPR(a_j) (a blocked
//! stretch of the ray removes the scatter of that annulus). The mean over sectors replaces
//! SPR of an equivalent field:
//!
//!   [Sp TPR](d, aperture) = Sp(0) (P TPR(d, 0) + mean SPR),   P = 1 inside the aperture, else 0.
//!
//! For a circular field centred on the point this returns TPR(d, s) Sp(s) exactly; for a
//! square it differs from the table value by the circle-square equivalence (a few tenths of a
//! percent, tested).

use beamproof_api::mu::Leaves;

use crate::tables::{Table1D, Table2D, TableError};

/// An aperture at the isocentre plane: the union of axis-aligned rectangles (cm), one per open
/// leaf pair, or the jaw rectangle when there are no leaves.
#[derive(Debug, Clone, PartialEq)]
pub struct Aperture {
    /// `[x0, x1, y0, y1]` with x0 < x1 and y0 < y1.
    pub rects: Vec<[f64; 4]>,
}

impl Aperture {
    /// The jaw opening `[x1, x2, y1, y2]` intersected with the leaf openings.
    pub fn new(jaws: [f64; 4], leaves: Option<&Leaves>) -> Aperture {
        let [jx0, jx1, jy0, jy1] = jaws;
        let mut rects = Vec::new();
        match leaves {
            None => rects.push(jaws),
            Some(l) => {
                for i in 0..l.bank_a.len().min(l.boundaries.len().saturating_sub(1)) {
                    let (y0, y1) = (l.boundaries[i].max(jy0), l.boundaries[i + 1].min(jy1));
                    let (x0, x1) = (l.bank_a[i].max(jx0), l.bank_b[i].min(jx1));
                    if x1 > x0 && y1 > y0 {
                        rects.push([x0, x1, y0, y1]);
                    }
                }
            }
        }
        rects.retain(|r| r[1] > r[0] && r[3] > r[2]);
        Aperture { rects }
    }

    /// Area, cm^2 (the rectangles do not overlap: leaf pairs occupy separate rows).
    pub fn area(&self) -> f64 {
        self.rects
            .iter()
            .map(|r| (r[1] - r[0]) * (r[3] - r[2]))
            .sum()
    }

    pub fn contains(&self, x: f64, y: f64) -> bool {
        self.rects
            .iter()
            .any(|r| x >= r[0] && x <= r[1] && y >= r[2] && y <= r[3])
    }

    /// The stretches `[t0, t1]` (t >= 0) of the ray p + t (cos a, sin a) inside the aperture,
    /// merged and sorted.
    pub fn ray(&self, p: (f64, f64), angle: f64) -> Vec<(f64, f64)> {
        let (dx, dy) = (angle.cos(), angle.sin());
        let mut spans: Vec<(f64, f64)> = Vec::new();
        for r in &self.rects {
            // Slab intersection of the ray with the rectangle.
            let (mut t0, mut t1) = (0.0_f64, f64::INFINITY);
            let mut empty = false;
            for (o, d, lo, hi) in [(p.0, dx, r[0], r[1]), (p.1, dy, r[2], r[3])] {
                if d.abs() < 1e-12 {
                    if o < lo || o > hi {
                        empty = true;
                    }
                } else {
                    let (a, b) = ((lo - o) / d, (hi - o) / d);
                    t0 = t0.max(a.min(b));
                    t1 = t1.min(a.max(b));
                }
            }
            if !empty && t1 > t0 {
                spans.push((t0, t1));
            }
        }
        spans.sort_by(|a, b| a.0.total_cmp(&b.0));
        let mut merged: Vec<(f64, f64)> = Vec::new();
        for s in spans {
            match merged.last_mut() {
                // Touching rectangles (adjacent leaf rows) join into one stretch.
                Some(last) if s.0 <= last.1 + 1e-9 => last.1 = last.1.max(s.1),
                _ => merged.push(s),
            }
        }
        merged
    }
}

/// The result of a sector integration, with what a physicist needs to follow it.
#[derive(Debug, Clone, PartialEq)]
pub struct Clarkson {
    /// [Sp TPR] of the aperture at the point.
    pub sp_tpr: f64,
    pub sectors: usize,
    pub tpr_zero: f64,
    pub sp_zero: f64,
    pub mean_spr: f64,
    /// Whether the point itself is open (primary dose reaches it).
    pub primary: bool,
    /// Mean sector radius to the first edge at the depth of the point, cm.
    pub mean_radius_cm: f64,
}

/// Linear extrapolation to zero field from the two smallest fields.
fn to_zero(x0: f64, v0: f64, x1: f64, v1: f64) -> f64 {
    v0 - x0 * (v1 - v0) / (x1 - x0)
}

/// Scatter data prepared for one depth.
struct Spr<'a> {
    tpr: &'a Table2D,
    sp: &'a Table1D,
    depth: f64,
    tpr0: f64,
    sp0: f64,
    s_min: f64,
    s_max: f64,
}

impl Spr<'_> {
    /// SPR(d, R) for a circle of radius `r` cm at the depth.
    fn at(&self, r: f64) -> Result<f64, TableError> {
        let s = r * std::f64::consts::PI.sqrt();
        if s > self.s_max * (1.0 + 1e-9) {
            return Err(TableError(format!(
                "a Clarkson sector reaches {r:.1} cm from the point (equivalent field {s:.1} cm), beyond the largest tabulated field {} cm; extend the measured data rather than extrapolate",
                self.s_max
            )));
        }
        let exact = |s: f64| -> Result<f64, TableError> {
            Ok(self.tpr.at(self.depth, s)? * self.sp.at(s)? / self.sp0 - self.tpr0)
        };
        if s >= self.s_min {
            exact(s)
        } else {
            Ok(exact(self.s_min)? * s / self.s_min)
        }
    }
}

/// Clarkson integration at a point `p` (cm, at the isocentre plane) of an aperture, at
/// `depth_cm`, with the aperture's radii scaled from the isocentre plane to the depth by
/// `scale` (= source-to-point distance / SAD).
pub fn integrate(
    tpr: &Table2D,
    sp: &Table1D,
    aperture: &Aperture,
    p: (f64, f64),
    depth_cm: f64,
    scale: f64,
    sectors: usize,
) -> Result<Clarkson, TableError> {
    let fields = &tpr.field_cm;
    let (f0, f1) = (fields[0].max(sp.field_cm[0]), fields[1].max(sp.field_cm[1]));
    let tpr0 = to_zero(f0, tpr.at(depth_cm, f0)?, f1, tpr.at(depth_cm, f1)?);
    let sp0 = to_zero(f0, sp.at(f0)?, f1, sp.at(f1)?);
    if !(tpr0 > 0.0 && sp0 > 0.0) {
        return Err(TableError(format!(
            "zero-field TPR ({tpr0:.3}) or Sp ({sp0:.3}) extrapolated from the smallest fields is not positive; measure smaller fields"
        )));
    }
    let spr = Spr {
        tpr,
        sp,
        depth: depth_cm,
        tpr0,
        sp0,
        s_min: f0,
        s_max: fields[fields.len() - 1].min(sp.field_cm[sp.field_cm.len() - 1]),
    };
    let n = sectors.max(4);
    let mut sum = 0.0;
    let mut radius_sum = 0.0;
    for k in 0..n {
        let angle = (k as f64 + 0.5) * std::f64::consts::TAU / n as f64;
        let spans = aperture.ray(p, angle);
        let mut sector = 0.0;
        for &(a, b) in &spans {
            sector += spr.at(b * scale)? - if a > 0.0 { spr.at(a * scale)? } else { 0.0 };
        }
        radius_sum += spans
            .first()
            .filter(|s| s.0 <= 1e-9)
            .map_or(0.0, |s| s.1 * scale);
        sum += sector;
    }
    let mean_spr = sum / n as f64;
    let primary = aperture.contains(p.0, p.1);
    Ok(Clarkson {
        sp_tpr: sp0 * (if primary { tpr0 } else { 0.0 } + mean_spr),
        sectors: n,
        tpr_zero: tpr0,
        sp_zero: sp0,
        mean_spr,
        primary,
        mean_radius_cm: radius_sum / n as f64,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A smooth, physically shaped TPR and Sp (test data): TPR falls exponentially with depth
    /// beyond d0 = 10 cm and rises with field; Sp rises with field, 1 at 10 cm.
    fn tables() -> (Table2D, Table1D) {
        let depths = vec![5.0, 10.0, 15.0, 20.0];
        let fields = vec![2.0, 4.0, 6.0, 10.0, 15.0, 20.0, 30.0, 40.0];
        let tpr_f = |d: f64, s: f64| {
            let mu = 0.055 - 0.012 * (1.0 - (-s / 8.0).exp());
            (-mu * (d - 10.0)).exp() * (0.93 + 0.07 * (1.0 - (-s / 6.0).exp()))
                / (0.93 + 0.07 * (1.0 - (-10.0_f64 / 6.0).exp()))
        };
        let sp_f = |s: f64| {
            (0.90 + 0.12 * (1.0 - (-s / 7.0).exp()))
                / (0.90 + 0.12 * (1.0 - (-10.0_f64 / 7.0).exp()))
        };
        let values = depths
            .iter()
            .flat_map(|&d| fields.iter().map(move |&s| tpr_f(d, s)))
            .collect();
        (
            Table2D::new("TPR", depths, fields.clone(), values).expect("valid"),
            Table1D::new(
                "Sp",
                fields.clone(),
                fields.iter().map(|&s| sp_f(s)).collect(),
            )
            .expect("valid"),
        )
    }

    #[test]
    fn a_circle_centred_on_the_point_returns_the_table_value() {
        // By construction of SPR (Khan, The Physics of Radiation Therapy, irregular fields):
        // every sector of a circle of radius R sees SPR(R), so [Sp TPR] = TPR(d, s) Sp(s) for
        // the equal-area square s = R sqrt(pi). A 72-gon of leaves approximates the circle:
        // 1 mm leaves, each open to the circle's chord.
        let (tpr, sp) = tables();
        let r = 10.0 / std::f64::consts::PI.sqrt();
        let n = 400;
        let h = 2.0 * r / n as f64;
        let boundaries: Vec<f64> = (0..=n).map(|i| -r + i as f64 * h).collect();
        let half: Vec<f64> = (0..n)
            .map(|i| {
                let y = -r + (i as f64 + 0.5) * h;
                (r * r - y * y).max(0.0).sqrt()
            })
            .collect();
        let leaves = Leaves {
            boundaries,
            bank_a: half.iter().map(|x| -x).collect(),
            bank_b: half.clone(),
        };
        let ap = Aperture::new([-20.0, 20.0, -20.0, 20.0], Some(&leaves));
        let c = integrate(&tpr, &sp, &ap, (0.0, 0.0), 15.0, 1.0, 72).expect("inside");
        let table = tpr.at(15.0, 10.0).expect("t") * sp.at(10.0).expect("s");
        assert!(
            (c.sp_tpr / table - 1.0).abs() < 1e-3,
            "{} vs {table}",
            c.sp_tpr
        );
    }

    #[test]
    fn a_square_agrees_with_its_table_value_within_the_circle_square_equivalence() {
        // Hand check for a 10 x 10 cm square at the isocentre, depth 15 cm: the table gives
        // TPR(15, 10) Sp(10); Clarkson over 36 sectors (Clarkson 1941) with equal-area circles
        // must agree within 0.5 % (the square-circle equivalence, Day & Aird BJR Suppl. 25,
        // is approximate; value from memory).
        let (tpr, sp) = tables();
        let ap = Aperture::new([-5.0, 5.0, -5.0, 5.0], None);
        let c = integrate(&tpr, &sp, &ap, (0.0, 0.0), 15.0, 1.0, 36).expect("inside");
        let table = tpr.at(15.0, 10.0).expect("t") * sp.at(10.0).expect("s");
        assert!(
            (c.sp_tpr / table - 1.0).abs() < 0.005,
            "{} vs {table}",
            c.sp_tpr
        );
        assert!(c.primary);
        // Radius of a square of half side a seen from its centre along angle t (analytic):
        // a / max(|cos t|, |sin t|); the 36 sector midpoints average it. (Its continuous mean,
        // (4/pi) a ln(tan 3pi/8) = 1.1222 a, is the known equivalent-circle radius 0.561 s.)
        let expected: f64 = (0..36)
            .map(|k| {
                let t = (k as f64 + 0.5) * std::f64::consts::TAU / 36.0;
                5.0 / t.cos().abs().max(t.sin().abs())
            })
            .sum::<f64>()
            / 36.0;
        assert!(
            (c.mean_radius_cm - expected).abs() < 1e-9,
            "{}",
            c.mean_radius_cm
        );
        assert!((expected / (1.1222 * 5.0) - 1.0).abs() < 0.005);
    }

    #[test]
    fn an_l_shaped_field_has_less_scatter_than_its_bounding_square() {
        // L shape: the 10 x 10 square minus its upper-right 5 x 5 quadrant, made of leaves.
        // Hand reasoning: the removed quadrant's sectors (a quarter of the circle) lose the
        // scatter between their edge and the square's edge, so [Sp TPR] lies between the
        // 5 x 5 and the 10 x 10 table values, and removing a quarter of the area removes
        // roughly a quarter of the scatter beyond the 5 cm square.
        let (tpr, sp) = tables();
        let boundaries: Vec<f64> = (0..=20).map(|i| -5.0 + 0.5 * i as f64).collect();
        let bank_b: Vec<f64> = (0..20).map(|i| if i >= 10 { 0.0 } else { 5.0 }).collect();
        let leaves = Leaves {
            boundaries,
            bank_a: vec![-5.0; 20],
            bank_b,
        };
        let ap = Aperture::new([-5.0, 5.0, -5.0, 5.0], Some(&leaves));
        assert!((ap.area() - 75.0).abs() < 1e-9);
        // The point at (-2.5, -2.5), the centre of the open lower-left quadrant.
        let c = integrate(&tpr, &sp, &ap, (-2.5, -2.5), 10.0, 1.0, 72).expect("inside");
        let full = integrate(
            &tpr,
            &sp,
            &Aperture::new([-5.0, 5.0, -5.0, 5.0], None),
            (-2.5, -2.5),
            10.0,
            1.0,
            72,
        )
        .expect("inside");
        let small = tpr.at(10.0, 5.0).expect("t") * sp.at(5.0).expect("s");
        assert!(c.sp_tpr < full.sp_tpr && c.sp_tpr > small, "{c:?}");
        // The diagonal ray from the point ends at the notch corner (0, 0), 2.5 sqrt(2) =
        // 3.54 cm away, and does not re-enter (the notch extends to the field's corner).
        let spans = ap.ray((-2.5, -2.5), std::f64::consts::FRAC_PI_4);
        assert_eq!(spans.len(), 1);
        assert!((spans[0].1 - 2.5 * 2f64.sqrt()).abs() < 1e-9, "{spans:?}");
    }

    #[test]
    fn a_ray_that_leaves_and_re_enters_counts_both_stretches() {
        // Two 2 cm wide strips with a 2 cm gap, the point in the first: the ray along +x is
        // inside on [0, 1] and [3, 5] (geometry by hand).
        let leaves = Leaves {
            boundaries: vec![-1.0, 1.0],
            bank_a: vec![-1.0],
            bank_b: vec![5.0],
        };
        let mut ap = Aperture::new([-1.0, 5.0, -1.0, 1.0], Some(&leaves));
        ap.rects = vec![[-1.0, 1.0, -1.0, 1.0], [3.0, 5.0, -1.0, 1.0]];
        let spans = ap.ray((0.0, 0.0), 0.0);
        assert_eq!(spans, vec![(0.0, 1.0), (3.0, 5.0)]);
        assert!(!ap.contains(2.0, 0.0));
    }

    #[test]
    fn a_sector_beyond_the_tables_is_an_error() {
        let (tpr, sp) = tables();
        let ap = Aperture::new([-30.0, 30.0, -30.0, 30.0], None);
        let e = integrate(&tpr, &sp, &ap, (0.0, 0.0), 10.0, 1.0, 36).expect_err("too large");
        assert!(
            e.0.contains("beyond the largest tabulated field 40 cm"),
            "{}",
            e.0
        );
    }
}
