//! Dose of one film pixel from its normalised channel values: the red channel alone, or the
//! multichannel method of Micke, Lewis & Yu (Med Phys 2011).
//!
//! The multichannel model: the optical density OD_k = -log10 X_k that each channel k reads is
//! the density of the dose, scaled by a disturbance Δ common to all channels (the active layer's
//! thickness, scanner response), OD_k = Δ · OD_k(D). For each pixel Δ is chosen so that the
//! channels agree best, minimising Ω(Δ) = Σ_{i<j} (D_i(Δ) - D_j(Δ))² with
//! D_k(Δ) = X_k⁻¹(10^(-OD_k / Δ)); the dose is the mean of the channel doses at that Δ. The
//! minimisation linearises D_k in Δ (as Micke et al do) and repeats the step until it settles.

use beamproof_api::film::ChannelResponse;

/// Largest and smallest disturbance accepted: a pixel whose channels agree only beyond ±20 %
/// is not film the calibration describes (a mark, dust, a scratch).
pub const DISTURBANCE_RANGE: (f64, f64) = (0.8, 1.25);

/// Result of the multichannel method for one pixel.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Multichannel {
    /// Mean of the channel doses at the optimal disturbance, Gy.
    pub dose: f64,
    /// The disturbance Δ (1 = the calibration film).
    pub disturbance: f64,
    /// Root mean square of the channel doses about their mean at Δ, Gy.
    pub spread: f64,
}

/// Dose of channel `r` at observed optical density `od` and disturbance `delta`, with the
/// derivative of that dose with respect to `delta`.
fn channel(r: &ChannelResponse, od: f64, delta: f64) -> (f64, f64) {
    let x = 10f64.powf(-od / delta);
    let t = x - r.a;
    let d = r.dose(x);
    // dD/dX = -b / (X - a)^2 and dX/dΔ = X ln10 OD / Δ².
    let slope = -r.b / (t * t) * x * std::f64::consts::LN_10 * od / (delta * delta);
    (d, slope)
}

/// The multichannel dose of a pixel with normalised values `x` (red, green, blue). `None` when
/// a value is not in (0, 1) or no disturbance within [`DISTURBANCE_RANGE`] gives every channel
/// a dose.
pub fn multichannel(x: [f64; 3], responses: &[ChannelResponse; 3]) -> Option<Multichannel> {
    if x.iter().any(|&v| !(v > 0.0 && v < 1.0)) {
        return None;
    }
    let od = x.map(|v| -v.log10());
    let mut delta: f64 = 1.0;
    for _ in 0..30 {
        let mut doses = [0.0; 3];
        let mut slopes = [0.0; 3];
        for k in 0..3 {
            (doses[k], slopes[k]) = channel(&responses[k], od[k], delta);
        }
        if doses.iter().chain(&slopes).any(|v| !v.is_finite()) {
            return None;
        }
        // Gauss-Newton step on Ω: the pairwise differences are linear in the step.
        let (mut num, mut den) = (0.0, 0.0);
        for (i, j) in [(0, 1), (0, 2), (1, 2)] {
            let (r, s) = (doses[i] - doses[j], slopes[i] - slopes[j]);
            num += r * s;
            den += s * s;
        }
        if den <= 0.0 {
            return None;
        }
        let step = -num / den;
        delta = (delta + step).clamp(DISTURBANCE_RANGE.0, DISTURBANCE_RANGE.1);
        if step.abs() < 1e-10 {
            break;
        }
    }
    if delta <= DISTURBANCE_RANGE.0 || delta >= DISTURBANCE_RANGE.1 {
        return None;
    }
    let doses = [0, 1, 2].map(|k| channel(&responses[k], od[k], delta).0);
    if doses.iter().any(|d| !d.is_finite()) {
        return None;
    }
    let mean = doses.iter().sum::<f64>() / 3.0;
    let spread = (doses.iter().map(|d| (d - mean).powi(2)).sum::<f64>() / 3.0).sqrt();
    Some(Multichannel {
        dose: mean,
        disturbance: delta,
        spread,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::tests::RESPONSES;

    /// Forward model of the method's own assumption: OD_k = Δ · OD_k(D).
    fn observe(d: f64, delta: f64) -> [f64; 3] {
        [0, 1, 2].map(|k| 10f64.powf(delta * RESPONSES[k].value(d).log10()))
    }

    #[test]
    fn undisturbed_pixels_read_their_dose() {
        for d in [0.0, 0.3, 1.0, 2.0, 4.0] {
            let m = multichannel(observe(d, 1.0), &RESPONSES).expect("inside");
            assert!((m.dose - d).abs() < 1e-9, "{d}: {m:?}");
            assert!((m.disturbance - 1.0).abs() < 1e-9);
            assert!(m.spread < 1e-9);
        }
    }

    #[test]
    fn a_thickness_disturbance_is_removed() {
        // A 4 % thicker or 3 % thinner active layer scales every channel's optical density
        // (the model of Micke et al 2011): the method returns the dose and the disturbance,
        // while the red channel alone is off by several percent (analytic: the inverse of the
        // forward model).
        for d in [0.5, 1.0, 2.0, 3.0] {
            for delta in [1.04, 0.97] {
                let x = observe(d, delta);
                let m = multichannel(x, &RESPONSES).expect("inside");
                assert!((m.dose / d - 1.0).abs() < 1e-6, "{d} {delta}: {m:?}");
                assert!((m.disturbance - delta).abs() < 1e-6, "{m:?}");
                let red = RESPONSES[0].dose(x[0]);
                assert!((red / d - 1.0).abs() > 0.03, "{d} {delta}: red {red}");
            }
        }
    }

    #[test]
    fn values_outside_the_open_interval_give_none() {
        assert_eq!(multichannel([0.0, 0.5, 0.5], &RESPONSES), None);
        assert_eq!(multichannel([1.0, 0.5, 0.5], &RESPONSES), None);
        assert_eq!(multichannel([f64::NAN, 0.5, 0.5], &RESPONSES), None);
    }
}
