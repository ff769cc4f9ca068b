//! Summary statistics of gamma values: pass rate, mean, median, percentiles, histogram.

/// Statistics over the evaluated points of one criterion.
#[derive(Debug, Clone, PartialEq)]
pub struct Summary {
    pub n_evaluated: usize,
    pub n_passed: usize,
    /// Percentage of evaluated points with gamma <= 1 (NaN when none was evaluated).
    pub pass_rate_percent: f64,
    pub mean: f64,
    pub median: f64,
    pub p95: f64,
    pub p99: f64,
    pub max: f64,
}

/// Percentile by linear interpolation between closest ranks (the definition numpy uses by
/// default, `method="linear"`): position p/100 * (n - 1) in the sorted values.
pub fn percentile(sorted: &[f64], p: f64) -> f64 {
    if sorted.is_empty() {
        return f64::NAN;
    }
    let pos = p / 100.0 * (sorted.len() - 1) as f64;
    let lo = pos.floor() as usize;
    let hi = pos.ceil() as usize;
    sorted[lo] + (sorted[hi] - sorted[lo]) * (pos - lo as f64)
}

/// Summarise gamma values (NaN entries are points not evaluated and are skipped). A point
/// passes when gamma <= 1 (Low et al 1998), with the slack of `beamproof_api::LIMIT_SLACK`.
pub fn summarise(gammas: impl Iterator<Item = f64>) -> Summary {
    let mut v: Vec<f64> = gammas.filter(|g| !g.is_nan()).collect();
    v.sort_by(f64::total_cmp);
    let n = v.len();
    let passed = v
        .iter()
        .filter(|&&g| g <= 1.0 + beamproof_api::LIMIT_SLACK)
        .count();
    Summary {
        n_evaluated: n,
        n_passed: passed,
        pass_rate_percent: if n == 0 {
            f64::NAN
        } else {
            100.0 * passed as f64 / n as f64
        },
        mean: if n == 0 {
            f64::NAN
        } else {
            v.iter().sum::<f64>() / n as f64
        },
        median: percentile(&v, 50.0),
        p95: percentile(&v, 95.0),
        p99: percentile(&v, 99.0),
        max: v.last().copied().unwrap_or(f64::NAN),
    }
}

/// Histogram of gamma with bins of 0.1 from 0 to 2 and one last bin for everything above 2.
pub fn histogram(gammas: impl Iterator<Item = f64>) -> (Vec<f64>, Vec<u64>) {
    let edges: Vec<f64> = (0..=21).map(|i| f64::from(i) * 0.1).collect();
    let mut counts = vec![0u64; 21];
    for g in gammas.filter(|g| !g.is_nan()) {
        let bin = ((g / 0.1).floor() as usize).min(20);
        counts[bin] += 1;
    }
    (edges, counts)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn percentiles_match_numpy_linear() {
        // numpy.percentile([1, 2, 3, 4], [50, 95, 99]) = [2.5, 3.85, 3.97] (linear method).
        let v = [1.0, 2.0, 3.0, 4.0];
        assert!((percentile(&v, 50.0) - 2.5).abs() < 1e-12);
        assert!((percentile(&v, 95.0) - 3.85).abs() < 1e-12);
        assert!((percentile(&v, 99.0) - 3.97).abs() < 1e-12);
    }

    #[test]
    fn pass_rate_skips_points_not_evaluated() {
        let s = summarise([0.5, 1.0, 1.5, f64::NAN].into_iter());
        assert_eq!((s.n_evaluated, s.n_passed), (3, 2));
        assert!((s.pass_rate_percent - 200.0 / 3.0).abs() < 1e-12);
        assert!(summarise(std::iter::empty()).pass_rate_percent.is_nan());
    }
}
