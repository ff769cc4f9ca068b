//! Depth-dose metrics of one curve: d_max, surface dose, PDD at 5, 10 and 20 cm, PDD20,10,
//! TPR20,10 (IAEA TRS-398), %dd(10)x (AAPM TG-51), and for electron beams R90, R80, R50, the
//! practical range Rp, the reference depth and the mean energy at the surface.
//!
//! Depths are in mm; doses in percent of the curve maximum. All depth look-ups interpolate
//! linearly between samples.

use beamproof_curve_tools::Region;

/// Why a curve cannot give its metrics.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct CurveError(pub String);

/// Photon-beam metrics.
#[derive(Debug, Clone, PartialEq)]
pub struct PhotonMetrics {
    pub dmax_mm: f64,
    pub surface_percent: f64,
    pub pdd5: f64,
    pub pdd10: f64,
    pub pdd20: f64,
    /// PDD(20 cm) / PDD(10 cm).
    pub pdd20_10: f64,
    /// TRS-398: TPR20,10 = 1.2661 PDD20,10 - 0.0595 (10 x 10 cm at SSD 100 cm).
    pub tpr20_10: f64,
    /// TG-51 photon-component %dd(10)x without lead foil (see [`pdd10x_no_foil`]).
    pub pdd10x: f64,
}

/// Electron-beam metrics.
#[derive(Debug, Clone, PartialEq)]
pub struct ElectronMetrics {
    pub dmax_mm: f64,
    pub surface_percent: f64,
    pub r90_mm: f64,
    pub r80_mm: f64,
    pub r50_mm: f64,
    pub rp_mm: f64,
    /// TRS-398 / TG-51: d_ref = 0.6 R50 - 0.1 cm.
    pub dref_mm: f64,
    /// Mean energy at the surface, E0 = 2.33 R50 (R50 in cm), MeV.
    pub e0_mev: f64,
    /// Most probable energy at the surface from the practical range (ICRU Report 35, as in
    /// IAEA TRS-398): Ep,0 = 0.22 + 1.98 Rp + 0.0025 Rp^2 (Rp in cm), MeV.
    pub ep0_mev: f64,
}

/// Most probable energy at the surface (MeV) from the practical range `rp_cm` (ICRU Report 35,
/// as quoted in IAEA TRS-398).
pub fn ep0_from_rp(rp_cm: f64) -> f64 {
    0.22 + 1.98 * rp_cm + 0.0025 * rp_cm * rp_cm
}

/// TRS-398 (IAEA 2000, from Followill et al 1998): TPR20,10 = 1.2661 PDD20,10 - 0.0595.
pub fn tpr20_10_from_pdd(pdd20_10: f64) -> f64 {
    1.2661 * pdd20_10 - 0.0595
}

/// AAPM TG-51 (Almond et al 1999) without lead foil: %dd(10)x = %dd(10) for %dd(10) <= 75 %;
/// above, the interim relation %dd(10)x = 1.267 %dd(10) - 20.0 (valid to 89 %). Returns NaN
/// above 89 %, where the relation does not apply.
pub fn pdd10x_no_foil(pdd10: f64) -> f64 {
    if pdd10 <= 75.0 {
        pdd10
    } else if pdd10 <= 89.0 {
        1.267 * pdd10 - 20.0
    } else {
        f64::NAN
    }
}

/// AAPM TG-51: R50 (cm) from the depth of 50 % ionisation I50 (cm):
/// R50 = 1.029 I50 - 0.06 (2 <= I50 <= 10 cm), R50 = 1.059 I50 - 0.37 (I50 > 10 cm).
pub fn r50_from_i50_cm(i50: f64) -> f64 {
    if i50 <= 10.0 {
        1.029 * i50 - 0.06
    } else {
        1.059 * i50 - 0.37
    }
}

/// Check and normalise a curve: at least 5 points, depths strictly increasing (the reader
/// already sorted them), a maximum strictly inside the scan. Returns doses in percent of the
/// maximum sample.
pub fn normalise(depth_mm: &[f64], dose: &[f64]) -> Result<Vec<f64>, CurveError> {
    if depth_mm.len() < 5 {
        return Err(CurveError(format!(
            "a depth-dose curve needs at least 5 points, this one has {}",
            depth_mm.len()
        )));
    }
    if depth_mm.windows(2).any(|w| w[1] <= w[0]) {
        return Err(CurveError(
            "depths must increase strictly with no repeats".into(),
        ));
    }
    let (imax, max) = beamproof_curve_tools::argmax(dose);
    if max.is_nan() || max <= 0.0 {
        return Err(CurveError("the curve holds no positive dose".into()));
    }
    if imax + 1 == dose.len() {
        return Err(CurveError(
            "the maximum is at the deepest point: the scan does not reach past d_max".into(),
        ));
    }
    Ok(dose.iter().map(|d| 100.0 * d / max).collect())
}

/// Depth of maximum: vertex of the parabola through the highest sample and its neighbours
/// (the highest sample itself when it is the first point).
pub fn dmax(depth: &[f64], pct: &[f64]) -> f64 {
    let i = beamproof_curve_tools::argmax(pct).0;
    if i == 0 || i + 1 >= pct.len() {
        return depth[i];
    }
    let (x0, x1, x2) = (depth[i - 1], depth[i], depth[i + 1]);
    let (y0, y1, y2) = (pct[i - 1], pct[i], pct[i + 1]);
    // Vertex of the interpolating parabola (Lagrange form), valid for uneven spacing.
    let num = (x1 - x0).powi(2) * (y1 - y2) - (x1 - x2).powi(2) * (y1 - y0);
    let den = (x1 - x0) * (y1 - y2) - (x1 - x2) * (y1 - y0);
    if den.abs() < 1e-300 {
        x1
    } else {
        (x1 - 0.5 * num / den).clamp(x0, x2)
    }
}

/// Dose (percent) at a depth by linear interpolation; error outside the scan.
pub fn at_depth(depth: &[f64], pct: &[f64], z: f64) -> Result<f64, CurveError> {
    beamproof_curve_tools::at(depth, pct, z).ok_or_else(|| {
        CurveError(format!(
            "the scan ({:.1} to {:.1} mm) does not reach {z} mm",
            depth[0],
            depth[depth.len() - 1]
        ))
    })
}

/// Regional comparison after Venselaar et al 2001 on the central axis: the build-up region
/// (shallower than the measured d_max; delta2, as the depth distance to the calculated curve
/// at the same dose) and the region from d_max on (delta1, local dose deviation). Both curves
/// in percent of their maximum.
pub fn regions(
    mz: &[f64],
    mp: &[f64],
    cz: &[f64],
    cp: &[f64],
    geometry: beamproof_curve_tools::Geometry,
) -> Vec<Region> {
    let t = geometry.tolerances();
    let zmax = dmax(mz, mp);
    // The calculated build-up only: a build-up dose is looked for before the calculated d_max,
    // never in the fall-off at depth. Points whose dose the calculated build-up does not reach
    // (for example a surface dose below the calculated one) are left out of delta2.
    let c_end = cz.partition_point(|&z| z <= dmax(cz, cp)).min(cz.len());
    let (bz, bp) = (&cz[..c_end], &cp[..c_end]);
    let (mut d1, mut d2) = (Vec::new(), Vec::new());
    for (&z, &m) in mz.iter().zip(mp) {
        let Some(c) = beamproof_curve_tools::at(cz, cp, z) else {
            continue;
        };
        if z >= zmax {
            d1.push(100.0 * (c - m) / m);
        } else if let Some(p) = beamproof_curve_tools::nearest_crossing(bz, bp, m, z) {
            d2.push((p - z).abs());
        }
    }
    vec![
        Region::from_deviations(
            "delta1",
            "delta1 from d_max on (local dose)",
            "%",
            &d1,
            t.delta1_percent,
        ),
        Region::from_deviations(
            "delta2",
            "delta2 build-up (distance)",
            "mm",
            &d2,
            t.delta2_mm,
        ),
    ]
}

/// Depth beyond the maximum where the curve first falls to `level` percent (linear
/// interpolation); error when it never does.
pub fn depth_of_level(depth: &[f64], pct: &[f64], level: f64) -> Result<f64, CurveError> {
    let imax = beamproof_curve_tools::argmax(pct).0;
    for j in imax + 1..pct.len() {
        if pct[j] <= level {
            let (d0, d1) = (pct[j - 1], pct[j]);
            let t = if d0 == d1 {
                0.0
            } else {
                (d0 - level) / (d0 - d1)
            };
            return Ok(depth[j - 1] + t * (depth[j] - depth[j - 1]));
        }
    }
    Err(CurveError(format!(
        "the curve never falls to {level} % beyond its maximum"
    )))
}

/// Photon metrics of a curve in percent of its maximum.
pub fn photon(depth: &[f64], pct: &[f64]) -> Result<PhotonMetrics, CurveError> {
    let pdd10 = at_depth(depth, pct, 100.0)?;
    let pdd20 = at_depth(depth, pct, 200.0)?;
    let pdd20_10 = pdd20 / pdd10;
    Ok(PhotonMetrics {
        dmax_mm: dmax(depth, pct),
        surface_percent: pct[0],
        pdd5: at_depth(depth, pct, 50.0)?,
        pdd10,
        pdd20,
        pdd20_10,
        tpr20_10: tpr20_10_from_pdd(pdd20_10),
        pdd10x: pdd10x_no_foil(pdd10),
    })
}

/// Electron metrics. The practical range is where the tangent at the steepest point of the
/// fall-off meets the bremsstrahlung tail, taken as the mean of the deepest 10 % of samples
/// beyond R50 (at least one).
pub fn electron(depth: &[f64], pct: &[f64]) -> Result<ElectronMetrics, CurveError> {
    let r50 = depth_of_level(depth, pct, 50.0)?;
    let imax = beamproof_curve_tools::argmax(pct).0;
    // Steepest descent between consecutive samples beyond the maximum.
    let (mut best, mut slope) = (imax, 0.0);
    for j in imax..pct.len() - 1 {
        let s = (pct[j + 1] - pct[j]) / (depth[j + 1] - depth[j]);
        if s < slope {
            slope = s;
            best = j;
        }
    }
    if slope >= 0.0 {
        return Err(CurveError(
            "the curve has no fall-off beyond its maximum".into(),
        ));
    }
    let beyond: Vec<usize> = (0..pct.len()).filter(|&j| depth[j] > r50).collect();
    let n_tail = (beyond.len() / 10).max(1);
    let tail = beyond
        .iter()
        .rev()
        .take(n_tail)
        .map(|&j| pct[j])
        .sum::<f64>()
        / n_tail as f64;
    let (z0, d0) = (
        0.5 * (depth[best] + depth[best + 1]),
        0.5 * (pct[best] + pct[best + 1]),
    );
    let rp = z0 + (tail - d0) / slope;
    Ok(ElectronMetrics {
        dmax_mm: dmax(depth, pct),
        surface_percent: pct[0],
        r90_mm: depth_of_level(depth, pct, 90.0)?,
        r80_mm: depth_of_level(depth, pct, 80.0)?,
        r50_mm: r50,
        rp_mm: rp,
        dref_mm: 10.0 * (0.6 * r50 / 10.0 - 0.1),
        e0_mev: 2.33 * r50 / 10.0,
        ep0_mev: ep0_from_rp(rp / 10.0),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn most_probable_energy_from_the_practical_range() {
        // ICRU Report 35 relation as quoted in IAEA TRS-398 (value from memory), evaluated by
        // hand: Rp = 3.0 cm ->
        // 0.22 + 5.94 + 0.0225 = 6.1825 MeV.
        assert!((ep0_from_rp(3.0) - 6.1825).abs() < 1e-12);
    }

    fn close(a: f64, b: f64, tol: f64) -> bool {
        (a - b).abs() <= tol
    }

    #[test]
    fn trs398_tpr_from_pdd_ratio() {
        // IAEA TRS-398 relation TPR20,10 = 1.2661 PDD20,10 - 0.0595 (after Followill et al 1998;
        // value from memory), evaluated by hand: PDD10 = 66.8 %, PDD20 = 38.5 %
        // -> PDD20,10 = 0.57635 -> TPR20,10 = 0.67021.
        let r = 38.5 / 66.8;
        assert!(close(r, 0.57635, 5e-6));
        assert!(close(tpr20_10_from_pdd(r), 0.67021, 5e-6));
    }

    #[test]
    fn tg51_photon_component_without_foil() {
        // AAPM TG-51 (Almond et al 1999) interim relation, value from memory, by hand: 77.0 % -> 77.559 %; at or
        // below 75 % the value is unchanged.
        assert!(close(pdd10x_no_foil(77.0), 77.559, 1e-9));
        assert_eq!(pdd10x_no_foil(66.5), 66.5);
        assert!(pdd10x_no_foil(90.0).is_nan());
    }

    #[test]
    fn tg51_r50_and_trs398_electron_relations() {
        // AAPM TG-51 / IAEA TRS-398 relations (value from memory), evaluated by hand: I50 = 5.0 cm -> R50 = 5.085 cm, d_ref = 2.951 cm,
        // E0 = 11.848 MeV; I50 = 11.0 cm -> R50 = 11.279 cm.
        let r50 = r50_from_i50_cm(5.0);
        assert!(close(r50, 5.085, 1e-9));
        assert!(close(0.6 * r50 - 0.1, 2.951, 1e-9));
        assert!(close(2.33 * r50, 11.848, 5e-4));
        assert!(close(r50_from_i50_cm(11.0), 11.279, 1e-9));
    }

    #[test]
    fn linear_fall_off_gives_the_textbook_ranges() {
        // Algebra of a linear fall-off (Rp where the steepest tangent meets the tail): 100 % at 2 cm falling linearly to 0 at 6 cm, no tail:
        // R90 = 2.4, R80 = 2.8, R50 = 4.0, Rp = 6.0 cm.
        let depth: Vec<f64> = (0..=80).map(f64::from).collect();
        let pct: Vec<f64> = depth
            .iter()
            .map(|&z| {
                if z <= 20.0 {
                    90.0 + 0.5 * z
                } else {
                    (100.0 - 2.5 * (z - 20.0)).max(0.0)
                }
            })
            .collect();
        let e = electron(&depth, &pct).expect("metrics");
        assert!(close(e.r90_mm, 24.0, 1e-9), "{}", e.r90_mm);
        assert!(close(e.r80_mm, 28.0, 1e-9));
        assert!(close(e.r50_mm, 40.0, 1e-9));
        assert!(close(e.rp_mm, 60.0, 1e-9), "{}", e.rp_mm);
        assert!(close(e.e0_mev, 2.33 * 4.0, 1e-12));
    }

    #[test]
    fn regions_split_at_dmax() {
        // Calculated 1 % above measured beyond 20 mm (delta1 = 1 % exactly) and identical up to
        // it (delta2 = 0). The sampled peak is at 20 mm; the parabola through 19, 20 and 21 mm
        // puts d_max at 20.39 mm, so 0..20 mm (21 points) is build-up and 21..100 mm (80) beyond.
        let z: Vec<f64> = (0..=100).map(f64::from).collect();
        let m: Vec<f64> = z
            .iter()
            .map(|&x| {
                if x <= 20.0 {
                    50.0 + 2.5 * x
                } else {
                    100.0 - 0.3 * (x - 20.0)
                }
            })
            .collect();
        let c: Vec<f64> = z
            .iter()
            .zip(&m)
            .map(|(&x, &v)| if x > 20.0 { 1.01 * v } else { v })
            .collect();
        let r = regions(&z, &m, &z, &c, beamproof_curve_tools::Geometry::Simple);
        assert_eq!((r[0].n_points, r[1].n_points), (80, 21));
        assert!((r[0].mean - 1.0).abs() < 1e-9 && r[0].sd < 1e-9);
        assert!(r[1].confidence_limit.abs() < 1e-9);
        assert_eq!((r[0].tolerance, r[1].tolerance), (2.0, 2.0));
    }

    #[test]
    fn build_up_distances_stay_in_the_build_up() {
        // Measured surface dose 40 %, calculated 45 %: the calculated build-up never falls to
        // 40 %, so that point is left out rather than matched to the 40 % level deep in the
        // fall-off (more than 100 mm away).
        let z: Vec<f64> = (0..=200).map(f64::from).collect();
        let m: Vec<f64> = z
            .iter()
            .map(|&x| {
                if x <= 20.0 {
                    40.0 + 3.0 * x
                } else {
                    100.0 - 0.4 * (x - 20.0)
                }
            })
            .collect();
        let c: Vec<f64> = z
            .iter()
            .map(|&x| {
                if x <= 20.0 {
                    45.0 + 2.75 * x
                } else {
                    100.0 - 0.4 * (x - 20.0)
                }
            })
            .collect();
        let r = regions(&z, &m, &z, &c, beamproof_curve_tools::Geometry::Simple);
        assert!(r[1].n_points < 20, "{:?}", r[1]);
        assert!(r[1].confidence_limit < 3.0, "{:?}", r[1]);
    }

    #[test]
    fn dmax_is_the_parabola_vertex() {
        // Samples of 100 - (z - 14.3)^2 / 10 every 2 mm: the three-point parabola is the
        // function itself, so its vertex is 14.3 mm exactly (algebra).
        let depth: Vec<f64> = (0..20).map(|i| 2.0 * f64::from(i)).collect();
        let pct: Vec<f64> = depth
            .iter()
            .map(|z| 100.0 - (z - 14.3).powi(2) / 10.0)
            .collect();
        assert!(close(dmax(&depth, &pct), 14.3, 1e-9));
    }

    #[test]
    fn bad_curves_are_refused_with_a_reason() {
        let depth = [0.0, 10.0, 20.0, 30.0, 40.0];
        assert_eq!(
            normalise(&depth, &[10.0, 20.0, 30.0, 40.0, 50.0]),
            Err(CurveError(
                "the maximum is at the deepest point: the scan does not reach past d_max".into()
            ))
        );
        assert_eq!(
            normalise(&depth[..3], &[1.0, 2.0, 1.0]),
            Err(CurveError(
                "a depth-dose curve needs at least 5 points, this one has 3".into()
            ))
        );
        let pct = normalise(&depth, &[50.0, 100.0, 90.0, 80.0, 70.0]).expect("ok");
        assert_eq!(
            at_depth(&depth, &pct, 100.0),
            Err(CurveError(
                "the scan (0.0 to 40.0 mm) does not reach 100 mm".into()
            ))
        );
        assert_eq!(
            depth_of_level(&depth, &pct, 50.0),
            Err(CurveError(
                "the curve never falls to 50 % beyond its maximum".into()
            ))
        );
    }
}
