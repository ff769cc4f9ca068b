//! Least-squares fit of the rational film response X(D) = a + b / (D - c) to calibration points
//! (the function used by Lewis and by Micke, Lewis & Yu, Med Phys 2011).
//!
//! For a fixed asymptote position `c` the model is linear in `a` and `b`, so the fit profiles
//! the residual over `c` alone (variable projection, Golub & Pereyra 1973): a coarse scan of
//! `c = D_min - s` over log-spaced `s`, then golden-section refinement around the best scan
//! point. Deterministic, no starting guess, and `c` always stays below the lowest dose, so the
//! fitted response is monotone and invertible over the calibrated range.

use beamproof_api::film::ChannelResponse;

/// Quality of one channel's fit.
#[derive(Debug, Clone, PartialEq)]
pub struct FitQuality {
    /// Residual of each point in normalised scanner value, fitted minus measured.
    pub value_residuals: Vec<f64>,
    /// Each point's dose read back through the fitted inverse, minus its delivered dose (Gy).
    pub dose_residuals: Vec<f64>,
    /// Root mean square of the dose residuals, Gy.
    pub rms_dose_gy: f64,
    /// Largest dose residual in percent of the highest calibration dose (a global measure:
    /// relative residuals of near-zero doses say little).
    pub max_percent_of_top: f64,
}

/// Why a calibration cannot be fitted.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct FitError(pub String);

/// Number of log-spaced steps of the coarse scan over `s = D_min - c`.
const SCAN_STEPS: usize = 240;

/// Linear least squares of `values` on `1 / (doses - c)`: (a, b, residual sum of squares).
fn linear_part(doses: &[f64], values: &[f64], c: f64) -> (f64, f64, f64) {
    let n = doses.len() as f64;
    let u: Vec<f64> = doses.iter().map(|d| 1.0 / (d - c)).collect();
    let mu = u.iter().sum::<f64>() / n;
    let mx = values.iter().sum::<f64>() / n;
    let (mut suu, mut sux) = (0.0, 0.0);
    for (ui, xi) in u.iter().zip(values) {
        suu += (ui - mu) * (ui - mu);
        sux += (ui - mu) * (xi - mx);
    }
    let b = if suu > 0.0 { sux / suu } else { 0.0 };
    let a = mx - b * mu;
    let sse = u
        .iter()
        .zip(values)
        .map(|(ui, xi)| (a + b * ui - xi).powi(2))
        .sum();
    (a, b, sse)
}

/// Fit one channel. `doses` in Gy (at least four distinct values), `values` the normalised
/// scanner values (0 to 1), which must fall as dose rises.
pub fn fit_response(doses: &[f64], values: &[f64]) -> Result<ChannelResponse, FitError> {
    if doses.len() != values.len() {
        return Err(FitError("doses and values differ in number".into()));
    }
    let mut distinct: Vec<f64> = doses.to_vec();
    distinct.sort_by(f64::total_cmp);
    distinct.dedup();
    if distinct.len() < 4 {
        return Err(FitError(format!(
            "{} distinct calibration doses; the rational response has three parameters and needs at least four (AAPM TG-235 recommends 8 to 12 pieces from 0 to 1.2 times the highest dose measured)",
            distinct.len()
        )));
    }
    if doses.iter().chain(values).any(|v| !v.is_finite()) || doses.iter().any(|&d| d < 0.0) {
        return Err(FitError(
            "a calibration dose or value is not a finite, non-negative number".into(),
        ));
    }
    // Values must fall with dose: a rising channel is an inverted (negative) or reflective scan.
    let mut order: Vec<usize> = (0..doses.len()).collect();
    order.sort_by(|&i, &j| doses[i].total_cmp(&doses[j]));
    let (lo, hi) = (order[0], order[order.len() - 1]);
    if values[hi] >= values[lo] {
        return Err(FitError(format!(
            "the scanner value does not fall with dose ({:.4} at {} Gy, {:.4} at {} Gy): scan the film in transmission mode and check the image is not inverted",
            values[lo], doses[lo], values[hi], doses[hi]
        )));
    }
    let d_min = distinct[0];
    let range = distinct[distinct.len() - 1] - d_min;
    let sse_at = |ln_s: f64| linear_part(doses, values, d_min - ln_s.exp()).2;
    // Coarse scan of ln s from 1e-3 to 1e3 times the dose range.
    let (lo_ln, hi_ln) = ((1e-3 * range).ln(), (1e3 * range).ln());
    let step = (hi_ln - lo_ln) / SCAN_STEPS as f64;
    let mut best = (0, f64::INFINITY);
    for k in 0..=SCAN_STEPS {
        let sse = sse_at(lo_ln + k as f64 * step);
        if sse < best.1 {
            best = (k, sse);
        }
    }
    // Golden-section search on the bracket around the best scan point.
    let (mut a, mut b) = (
        lo_ln + best.0.saturating_sub(1) as f64 * step,
        lo_ln + (best.0 + 1).min(SCAN_STEPS) as f64 * step,
    );
    let g = (5f64.sqrt() - 1.0) / 2.0;
    let (mut x1, mut x2) = (b - g * (b - a), a + g * (b - a));
    let (mut f1, mut f2) = (sse_at(x1), sse_at(x2));
    for _ in 0..100 {
        if f1 < f2 {
            b = x2;
            x2 = x1;
            f2 = f1;
            x1 = b - g * (b - a);
            f1 = sse_at(x1);
        } else {
            a = x1;
            x1 = x2;
            f1 = f2;
            x2 = a + g * (b - a);
            f2 = sse_at(x2);
        }
        if b - a < 1e-12 {
            break;
        }
    }
    let c = d_min - ((a + b) / 2.0).exp();
    let (ra, rb, _) = linear_part(doses, values, c);
    if rb <= 0.0 {
        return Err(FitError(
            "the fitted response does not fall with dose; check the calibration doses and regions"
                .into(),
        ));
    }
    Ok(ChannelResponse { a: ra, b: rb, c })
}

/// Residuals of a fitted response at its calibration points.
pub fn quality(r: &ChannelResponse, doses: &[f64], values: &[f64]) -> FitQuality {
    let value_residuals: Vec<f64> = doses
        .iter()
        .zip(values)
        .map(|(&d, &x)| r.value(d) - x)
        .collect();
    let dose_residuals: Vec<f64> = doses
        .iter()
        .zip(values)
        .map(|(&d, &x)| r.dose(x) - d)
        .collect();
    let rms_dose_gy =
        (dose_residuals.iter().map(|e| e * e).sum::<f64>() / dose_residuals.len() as f64).sqrt();
    let d_max = doses.iter().copied().fold(0.0, f64::max);
    let max_percent_of_top = dose_residuals
        .iter()
        .map(|e| 100.0 * e.abs() / d_max)
        .fold(0.0, f64::max);
    FitQuality {
        value_residuals,
        dose_residuals,
        rms_dose_gy,
        max_percent_of_top,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Doses of a calibration set as TG-235 suggests (value from memory): 0 to about 1.2 times
    /// the highest dose, more pieces at low dose.
    const DOSES: [f64; 10] = [0.0, 0.25, 0.5, 0.75, 1.0, 1.5, 2.0, 3.0, 4.0, 5.0];

    #[test]
    fn recovers_known_parameters_from_exact_points() {
        // Synthetic points on X(D) = a + b / (D - c) with the invented red, green and blue
        // parameters of the tests: the fit must return them.
        for truth in crate::tests::RESPONSES {
            let values: Vec<f64> = DOSES.iter().map(|&d| truth.value(d)).collect();
            let fit = fit_response(&DOSES, &values).expect("fits");
            assert!(
                (fit.a - truth.a).abs() < 1e-6 * truth.b,
                "{fit:?} {truth:?}"
            );
            assert!((fit.b / truth.b - 1.0).abs() < 1e-5, "{fit:?} {truth:?}");
            assert!((fit.c / truth.c - 1.0).abs() < 1e-5, "{fit:?} {truth:?}");
            let q = quality(&fit, &DOSES, &values);
            assert!(q.rms_dose_gy < 1e-6, "{q:?}");
        }
    }

    #[test]
    fn noisy_points_give_small_dose_residuals() {
        // 0.2 % noise on the values (deterministic pattern): the fitted curve reads the
        // calibration doses back within 2 % above 0.5 Gy (common practice for film, no source).
        let truth = crate::tests::RESPONSES[0];
        let wiggle = [1.0, -1.0, 0.5, -0.5, 1.0, 0.0, -1.0, 0.5, -0.5, 1.0];
        let values: Vec<f64> = DOSES
            .iter()
            .zip(wiggle)
            .map(|(&d, w)| truth.value(d) * (1.0 + 0.002 * w))
            .collect();
        let fit = fit_response(&DOSES, &values).expect("fits");
        let q = quality(&fit, &DOSES, &values);
        for (d, e) in DOSES.iter().zip(&q.dose_residuals) {
            if *d >= 0.5 {
                assert!((e / d).abs() < 0.02, "{d} Gy: {e}");
            }
        }
        // The fitted curve stays close to the truth between the points.
        for d in [0.6, 1.2, 2.5, 4.5] {
            assert!((fit.dose(truth.value(d)) / d - 1.0).abs() < 0.02, "{d}");
        }
    }

    #[test]
    fn too_few_or_rising_points_are_refused() {
        let e = fit_response(&[0.0, 1.0, 2.0], &[0.8, 0.6, 0.5]).expect_err("three points");
        assert!(e.0.contains("at least four"), "{}", e.0);
        let e = fit_response(&[0.0, 1.0, 2.0, 3.0], &[0.4, 0.5, 0.6, 0.7]).expect_err("rising");
        assert!(e.0.contains("does not fall with dose"), "{}", e.0);
        let e =
            fit_response(&[0.0, 1.0, 2.0, f64::NAN], &[0.8, 0.6, 0.5, 0.4]).expect_err("NaN dose");
        assert!(e.0.contains("finite"), "{}", e.0);
    }
}
