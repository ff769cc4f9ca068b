//! Where the film lay: the similarity transform (rotation, uniform scale, translation, and a
//! mirror when the image rows run against the plane's second axis) that carries scan positions
//! (mm from the top-left pixel centre, columns then rows) onto the plane's coordinates, fitted
//! to fiducial marks in the least-squares sense (the closed form of Umeyama, IEEE PAMI 1991,
//! in two dimensions).

/// A fitted placement: `plane = scale * R(angle) * M * scan + shift`, where `M` mirrors the row
/// axis when `mirrored`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Placement {
    pub angle_rad: f64,
    pub scale: f64,
    pub mirrored: bool,
    pub shift_mm: [f64; 2],
    /// Root mean square distance between the mapped and the given fiducial positions, mm.
    pub rms_residual_mm: f64,
    /// Largest such distance, mm.
    pub max_residual_mm: f64,
}

impl Placement {
    /// Plane position (mm) of a scan position (mm).
    pub fn to_plane(&self, p: [f64; 2]) -> [f64; 2] {
        let (s, c) = self.angle_rad.sin_cos();
        let (u, v) = (p[0], if self.mirrored { -p[1] } else { p[1] });
        [
            self.scale * (c * u - s * v) + self.shift_mm[0],
            self.scale * (s * u + c * v) + self.shift_mm[1],
        ]
    }

    /// Scan position (mm) of a plane position (mm).
    pub fn to_scan(&self, q: [f64; 2]) -> [f64; 2] {
        let (s, c) = self.angle_rad.sin_cos();
        let (x, y) = (
            (q[0] - self.shift_mm[0]) / self.scale,
            (q[1] - self.shift_mm[1]) / self.scale,
        );
        let (u, v) = (c * x + s * y, -s * x + c * y);
        [u, if self.mirrored { -v } else { v }]
    }
}

/// Why the fiducials cannot place the film.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct PlacementError(pub String);

/// Rotation, scale and shift taking `from` onto `to` with no mirror, and the residual sum of
/// squares.
fn proper(from: &[[f64; 2]], to: &[[f64; 2]]) -> (f64, f64, [f64; 2], f64) {
    let n = from.len() as f64;
    let mean = |v: &[[f64; 2]]| {
        let s = v.iter().fold([0.0, 0.0], |a, p| [a[0] + p[0], a[1] + p[1]]);
        [s[0] / n, s[1] / n]
    };
    let (mp, mq) = (mean(from), mean(to));
    let (mut a, mut b, mut pp) = (0.0, 0.0, 0.0);
    for (p, q) in from.iter().zip(to) {
        let (px, py) = (p[0] - mp[0], p[1] - mp[1]);
        let (qx, qy) = (q[0] - mq[0], q[1] - mq[1]);
        a += px * qx + py * qy;
        b += px * qy - py * qx;
        pp += px * px + py * py;
    }
    let angle = b.atan2(a);
    let scale = (a * a + b * b).sqrt() / pp;
    let (s, c) = angle.sin_cos();
    let shift = [
        mq[0] - scale * (c * mp[0] - s * mp[1]),
        mq[1] - scale * (s * mp[0] + c * mp[1]),
    ];
    let sse = from
        .iter()
        .zip(to)
        .map(|(p, q)| {
            let x = scale * (c * p[0] - s * p[1]) + shift[0];
            let y = scale * (s * p[0] + c * p[1]) + shift[1];
            (x - q[0]).powi(2) + (y - q[1]).powi(2)
        })
        .sum();
    (angle, scale, shift, sse)
}

/// Fit the placement from fiducials: scan positions (mm) and plane positions (mm). Needs three
/// marks not on one line (two fix a similarity but cannot tell a mirrored film, and leave no
/// residual to check).
pub fn fit(scan_mm: &[[f64; 2]], plane_mm: &[[f64; 2]]) -> Result<Placement, PlacementError> {
    if scan_mm.len() != plane_mm.len() || scan_mm.len() < 3 {
        return Err(PlacementError(format!(
            "{} fiducial marks; give at least three, not on one line, so that rotation, scale, mirror and a residual can be found",
            scan_mm.len().min(plane_mm.len())
        )));
    }
    // Collinearity: the smaller spread of the plane positions must not vanish.
    let n = plane_mm.len() as f64;
    let m = plane_mm
        .iter()
        .fold([0.0, 0.0], |a, p| [a[0] + p[0] / n, a[1] + p[1] / n]);
    let (mut sxx, mut syy, mut sxy) = (0.0, 0.0, 0.0);
    for p in plane_mm {
        let (x, y) = (p[0] - m[0], p[1] - m[1]);
        sxx += x * x;
        syy += y * y;
        sxy += x * y;
    }
    let tr = sxx + syy;
    let det = sxx * syy - sxy * sxy;
    let small = tr / 2.0 - ((tr * tr / 4.0) - det).max(0.0).sqrt();
    if small < 1e-6 * tr.max(1e-12) || small < 1.0 {
        return Err(PlacementError(
            "the fiducial marks lie on one line (or within 1 mm of one); place them so that they span the film in both directions".into(),
        ));
    }
    let mirrored_scan: Vec<[f64; 2]> = scan_mm.iter().map(|p| [p[0], -p[1]]).collect();
    let straight = proper(scan_mm, plane_mm);
    let mirrored = proper(&mirrored_scan, plane_mm);
    let (is_mirrored, (angle, scale, shift, _)) = if mirrored.3 < straight.3 {
        (true, mirrored)
    } else {
        (false, straight)
    };
    let mut placement = Placement {
        angle_rad: angle,
        scale,
        mirrored: is_mirrored,
        shift_mm: shift,
        rms_residual_mm: 0.0,
        max_residual_mm: 0.0,
    };
    let residuals: Vec<f64> = scan_mm
        .iter()
        .zip(plane_mm)
        .map(|(p, q)| {
            let r = placement.to_plane(*p);
            ((r[0] - q[0]).powi(2) + (r[1] - q[1]).powi(2)).sqrt()
        })
        .collect();
    placement.rms_residual_mm =
        (residuals.iter().map(|r| r * r).sum::<f64>() / residuals.len() as f64).sqrt();
    placement.max_residual_mm = residuals.iter().copied().fold(0.0, f64::max);
    Ok(placement)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn marks() -> Vec<[f64; 2]> {
        vec![
            [-60.0, -60.0],
            [60.0, -60.0],
            [60.0, 60.0],
            [-60.0, 60.0],
            [0.0, 75.0],
        ]
    }

    #[test]
    fn recovers_a_known_rotation_offset_and_mirror() {
        // Scan positions made from plane positions by the inverse of a known placement (2.5
        // degrees, 1.002 scale, shift, mirrored rows as a scanner image has them): the fit must
        // return that placement with zero residual (analytic: exact data).
        let truth = Placement {
            angle_rad: 2.5f64.to_radians(),
            scale: 1.002,
            mirrored: true,
            shift_mm: [-101.5, 87.25],
            rms_residual_mm: 0.0,
            max_residual_mm: 0.0,
        };
        let plane = marks();
        let scan: Vec<[f64; 2]> = plane.iter().map(|q| truth.to_scan(*q)).collect();
        let fit = fit(&scan, &plane).expect("fits");
        assert!(fit.mirrored);
        assert!((fit.angle_rad - truth.angle_rad).abs() < 1e-12, "{fit:?}");
        assert!((fit.scale - truth.scale).abs() < 1e-12);
        assert!((fit.shift_mm[0] - truth.shift_mm[0]).abs() < 1e-9);
        assert!((fit.shift_mm[1] - truth.shift_mm[1]).abs() < 1e-9);
        assert!(fit.rms_residual_mm < 1e-9);
        // Round trip.
        let p = [12.0, -7.5];
        let back = fit.to_scan(fit.to_plane(p));
        assert!((back[0] - p[0]).abs() < 1e-9 && (back[1] - p[1]).abs() < 1e-9);
    }

    #[test]
    fn a_misplaced_mark_shows_in_the_residual() {
        // One mark 2 mm off: the least-squares residual spreads it (rms > 0.5 mm), and the
        // largest residual points at it (analytic expectation for five marks).
        let truth = Placement {
            angle_rad: -1.0f64.to_radians(),
            scale: 1.0,
            mirrored: false,
            shift_mm: [3.0, -4.0],
            rms_residual_mm: 0.0,
            max_residual_mm: 0.0,
        };
        let plane = marks();
        let mut scan: Vec<[f64; 2]> = plane.iter().map(|q| truth.to_scan(*q)).collect();
        scan[4][0] += 2.0;
        let fit = fit(&scan, &plane).expect("fits");
        assert!(!fit.mirrored);
        assert!(
            fit.rms_residual_mm > 0.5 && fit.max_residual_mm > 1.2,
            "{fit:?}"
        );
    }

    #[test]
    fn too_few_or_collinear_marks_are_refused() {
        let e = fit(&[[0.0, 0.0], [1.0, 0.0]], &[[0.0, 0.0], [1.0, 0.0]]).expect_err("two");
        assert!(e.0.contains("at least three"), "{}", e.0);
        let line = [[0.0, 0.0], [10.0, 0.0], [20.0, 0.0]];
        let e = fit(&line, &line).expect_err("collinear");
        assert!(e.0.contains("one line"), "{}", e.0);
    }
}
