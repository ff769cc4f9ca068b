//! Regional comparison of a calculated with a measured profile after Venselaar, Welleweerd &
//! Mijnheer (Radiother Oncol 2001;60:191-201): each region has its own kind of deviation and
//! tolerance, applied to the confidence limit |mean| + 1.5 SD over the region's points.
//!
//! Regions are found on the measured profile (percent of the central axis) from its gradient and
//! dose: a gradient of at least [`HIGH_GRADIENT`] %/mm is the penumbra (delta2, distance to the
//! calculated profile at the same dose level on the same side); elsewhere above 20 % is the
//! field (delta3, local dose deviation) and at or below 20 % the low-dose region outside
//! (delta4, deviation in percent of the central-axis dose). The gradient and dose boundaries are
//! common practice, no source; the tolerances are the paper's table. The radiological width
//! (RW50) and beam fringe (delta50-90) compare single widths.

use beamproof_curve_tools::{Geometry, Region, at, nearest_crossing};

/// Gradient (percent of the central-axis dose per mm) from which a point is in the penumbra.
pub const HIGH_GRADIENT: f64 = 2.0;

/// Compare a calculated profile with the measured one region by region. Both in percent of
/// their central-axis dose; `widths` are (measured, calculated) field sizes and 50-90 % fringe
/// widths (left + right averaged), mm; `c_centre` is the calculated field centre, so a
/// penumbra point is matched on its own side of the field only.
pub fn compare(
    mx: &[f64],
    md: &[f64],
    cx: &[f64],
    cd: &[f64],
    c_centre: f64,
    widths: [(f64, f64); 2],
    geometry: Geometry,
) -> Vec<Region> {
    let t = geometry.tolerances();
    let split = cx.partition_point(|&x| x < c_centre);
    let (mut d2, mut d3, mut d4) = (Vec::new(), Vec::new(), Vec::new());
    for (i, (&x, &m)) in mx.iter().zip(md).enumerate() {
        let Some(c) = at(cx, cd, x) else { continue };
        let (lo, hi) = (i.saturating_sub(1), (i + 1).min(mx.len() - 1));
        let gradient = if hi > lo {
            (md[hi] - md[lo]) / (mx[hi] - mx[lo])
        } else {
            0.0
        };
        if gradient.abs() < HIGH_GRADIENT && m > 20.0 {
            d3.push(100.0 * (c - m) / m);
        } else if gradient.abs() >= HIGH_GRADIENT {
            let (sx, sd) = if x < c_centre {
                (&cx[..split], &cd[..split])
            } else {
                (&cx[split..], &cd[split..])
            };
            if let Some(p) = nearest_crossing(sx, sd, m, x) {
                d2.push((p - x).abs());
            }
        } else {
            d4.push(c - m);
        }
    }
    vec![
        Region::from_deviations(
            "delta2",
            "delta2 penumbra, high gradient (distance)",
            "mm",
            &d2,
            t.delta2_mm,
        ),
        Region::from_deviations(
            "delta3",
            "delta3 in field, low gradient (local dose)",
            "%",
            &d3,
            t.delta3_percent,
        ),
        Region::from_deviations(
            "delta4",
            "delta4 outside, <= 20 %, low gradient (of CAX dose)",
            "%",
            &d4,
            t.delta4_percent,
        ),
        Region::single(
            "rw50",
            "RW50 radiological width",
            widths[0].0,
            widths[0].1,
            t.rw50_mm,
        ),
        Region::single(
            "delta50-90",
            "delta50-90 beam fringe",
            widths[1].0,
            widths[1].1,
            t.fringe_mm,
        ),
    ]
}

#[cfg(test)]
mod tests {
    use super::*;

    fn ramp_profile(half: f64, scale: f64) -> (Vec<f64>, Vec<f64>) {
        // 100 % plateau with 8 mm linear edges to a 5 % tail (test data); `scale` multiplies
        // every dose.
        let x: Vec<f64> = (-160..=160).map(|i| f64::from(i) * 0.5).collect();
        let d = x
            .iter()
            .map(|&u| scale * (50.0 - 12.5 * (u.abs() - half)).clamp(5.0, 100.0))
            .collect();
        (x, d)
    }

    #[test]
    fn a_uniform_two_percent_excess_shows_in_delta3_only() {
        // Calculated = 1.02 x measured: in field the local deviation is exactly +2 % with no
        // spread (confidence limit 2 %); in the 5 % tail the excess is 0.1 % of the CAX dose.
        let (mx, md) = ramp_profile(40.0, 1.0);
        let (cx, cd) = ramp_profile(40.0, 1.02);
        let r = compare(
            &mx,
            &md,
            &cx,
            &cd,
            0.0,
            [(80.0, 80.0), (3.2, 3.2)],
            Geometry::Simple,
        );
        let d3 = &r[1];
        assert!(
            (d3.mean - 2.0).abs() < 1e-9
                && d3.sd < 1e-9
                && (d3.confidence_limit - 2.0).abs() < 1e-9
        );
        assert_eq!(d3.tolerance, 3.0);
        assert!(
            r[2].mean >= 0.1 - 1e-9 && r[2].mean <= 0.4 + 1e-9,
            "{:?}",
            r[2]
        );
        assert_eq!(r[3].confidence_limit, 0.0);
    }

    #[test]
    fn a_shifted_edge_shows_as_distance_in_delta2() {
        // Calculated field 1 mm wider on each side: every penumbra point finds the same dose
        // 1 mm further out (linear edges), so delta2 = 1 mm with no spread.
        let (mx, md) = ramp_profile(40.0, 1.0);
        let (cx, cd) = ramp_profile(41.0, 1.0);
        let r = compare(
            &mx,
            &md,
            &cx,
            &cd,
            0.0,
            [(80.0, 82.0), (3.2, 3.2)],
            Geometry::Complex,
        );
        assert!(
            (r[0].mean - 1.0).abs() < 1e-9 && r[0].sd < 1e-9,
            "{:?}",
            r[0]
        );
        assert_eq!(r[0].tolerance, 3.0);
        assert_eq!(r[3].mean, 2.0);
    }
}
