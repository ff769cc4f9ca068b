//! What an analysis returns: metrics with status, tables, figures described as data, notes and
//! the published references its method follows.

use serde::{Deserialize, Serialize};

/// Text of a number with fixed decimals for tables: never `-0.00` (a negative zero reads as a
/// sign error) and `n/a` for an undefined value.
pub fn fixed(value: f64, digits: usize) -> String {
    if !value.is_finite() {
        return "n/a".into();
    }
    let s = format!("{value:.digits$}");
    if s.starts_with('-') && s[1..].chars().all(|c| c == '0' || c == '.') {
        s[1..].to_string()
    } else {
        s
    }
}

/// Decimals a value of `unit` is shown with: the report's one rule per unit (doses in Gy to
/// 0.001 Gy, percentages and percentage points to 0.01, distances to 0.01 mm, energies to
/// 0.01 MeV, gradients to 0.001 %/mm, counts whole, pure ratios to 0.0001). Results keep
/// every value at full precision; this is only how it is printed.
pub fn decimals_for(unit: &str) -> usize {
    match unit {
        "Gy" => 3,
        "cGy" => 1,
        "mGy" | "points" | "samples" => 0,
        "%" | "pp" | "mm" | "MeV" | "deg" => 2,
        "%/mm" | "cGy/MU" => 3,
        "" => 4,
        _ => 3,
    }
}

/// `value` with the decimals of its unit ([`decimals_for`]).
pub fn fixed_for(value: f64, unit: &str) -> String {
    fixed(value, decimals_for(unit))
}

/// Absolute slack applied when a value is compared with a limit: far below any clinically
/// meaningful difference, far above the rounding error of decimal inputs.
pub const LIMIT_SLACK: f64 = 1e-9;

/// Verdict of one metric, one analysis or one test. Ordered from best to worst, so the status of
/// a group is the maximum of its members.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Status {
    /// Within tolerance.
    Pass,
    /// Past tolerance but within the action level.
    Warn,
    /// Past the action level.
    Fail,
    /// The analysis could not be carried out.
    Error,
}

impl Status {
    /// Upper-case word used in tables and reports.
    pub fn word(self) -> &'static str {
        match self {
            Status::Pass => "PASS",
            Status::Warn => "WARN",
            Status::Fail => "FAIL",
            Status::Error => "ERROR",
        }
    }

    /// Status of a deviation whose magnitude is compared with a tolerance and an action level
    /// (both magnitudes, tolerance <= action). Equality counts as within: `|d| <= tol` passes,
    /// up to [`LIMIT_SLACK`] so that values equal to a limit on paper (2.04 Gy against 2.00 Gy
    /// is 2 %) do not fail through binary rounding. A NaN deviation is an error.
    pub fn from_deviation(deviation: f64, tolerance: f64, action: f64) -> Status {
        let d = deviation.abs();
        if d.is_nan() {
            Status::Error
        } else if d <= tolerance + LIMIT_SLACK {
            Status::Pass
        } else if d <= action + LIMIT_SLACK {
            Status::Warn
        } else {
            Status::Fail
        }
    }

    /// Status of a quantity that must stay at or above a floor, such as a gamma pass rate:
    /// pass at or above `tolerance`, warn at or above `action`, fail below (tolerance >= action).
    pub fn from_floor(value: f64, tolerance: f64, action: f64) -> Status {
        if value.is_nan() {
            Status::Error
        } else if value >= tolerance - LIMIT_SLACK {
            Status::Pass
        } else if value >= action - LIMIT_SLACK {
            Status::Warn
        } else {
            Status::Fail
        }
    }

    /// Worst status of a collection; `None` for an empty one.
    pub fn worst<I: IntoIterator<Item = Status>>(statuses: I) -> Option<Status> {
        statuses.into_iter().max()
    }
}

/// The limits a metric was judged against, as printed beside it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Limits {
    /// How the limits apply, e.g. "|value| <= limit" or "value >= limit".
    pub rule: String,
    pub tolerance: f64,
    pub action: f64,
}

/// JSON has no NaN: a value that is not a finite number is written as `null` and read back
/// as NaN, so an undefined metric (for example a pass rate over no point) survives the trip.
mod finite_or_null {
    use serde::{Deserialize, Deserializer, Serializer};

    pub fn serialize<S: Serializer>(v: &f64, s: S) -> Result<S::Ok, S::Error> {
        if v.is_finite() {
            s.serialize_f64(*v)
        } else {
            s.serialize_none()
        }
    }

    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<f64, D::Error> {
        Ok(Option::<f64>::deserialize(d)?.unwrap_or(f64::NAN))
    }
}

/// An optional number; a value that is not finite is written as `null`.
mod optional_finite {
    use serde::{Deserialize, Deserializer, Serializer};

    pub fn serialize<S: Serializer>(v: &Option<f64>, s: S) -> Result<S::Ok, S::Error> {
        match v {
            Some(x) if x.is_finite() => s.serialize_f64(*x),
            _ => s.serialize_none(),
        }
    }

    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<Option<f64>, D::Error> {
        Option::<f64>::deserialize(d)
    }
}

/// One named number with its unit, the limits it was judged against and its status.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, Default)]
pub struct Metric {
    /// Stable machine name (kebab-case), e.g. `max-abs-difference`.
    pub id: String,
    /// Human label.
    pub label: String,
    /// NaN when undefined (serialised as `null`).
    #[serde(with = "finite_or_null")]
    pub value: f64,
    /// Unit text, e.g. "%", "mm", "Gy"; empty for a pure number.
    pub unit: String,
    /// Present when the metric was judged; informational metrics have none.
    pub limits: Option<Limits>,
    pub status: Option<Status>,
    /// For a comparison: the measured (or reference) and the calculated (or evaluated) value
    /// the metric compares, at full precision in `compared_unit`, so results can be used as
    /// numbers and not only read from the tables (ABI 1.3; absent otherwise).
    #[serde(
        default,
        skip_serializing_if = "Option::is_none",
        with = "optional_finite"
    )]
    pub measured: Option<f64>,
    #[serde(
        default,
        skip_serializing_if = "Option::is_none",
        with = "optional_finite"
    )]
    pub calculated: Option<f64>,
    #[serde(default, skip_serializing_if = "String::is_empty")]
    pub compared_unit: String,
}

/// A table of text cells; numbers are formatted by the analysis, which knows their precision.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Table {
    pub title: String,
    pub columns: Vec<String>,
    pub rows: Vec<Vec<String>>,
}

/// How a series is drawn.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum SeriesStyle {
    Line,
    Markers,
}

/// A named (x, y) series.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Series {
    pub name: String,
    pub style: SeriesStyle,
    pub x: Vec<f64>,
    pub y: Vec<f64>,
}

/// A horizontal band drawn behind a chart, e.g. a tolerance band.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Band {
    pub label: String,
    pub low: f64,
    pub high: f64,
}

/// A range along the x axis of a chart, shaded and labelled.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Span {
    pub label: String,
    pub from: f64,
    pub to: f64,
}

/// Figures are described as data; the report decides how to draw them.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "figure", rename_all = "kebab-case")]
pub enum Figure {
    /// Line or marker chart.
    Chart {
        title: String,
        x_label: String,
        y_label: String,
        series: Vec<Series>,
        bands: Vec<Band>,
        /// Shaded ranges along the x axis, e.g. the regions of a regional comparison.
        #[serde(default)]
        spans: Vec<Span>,
    },
    /// Histogram with `edges.len() == counts.len() + 1`.
    Histogram {
        title: String,
        x_label: String,
        edges: Vec<f64>,
        counts: Vec<u64>,
    },
    /// A 2D map on a rectilinear grid; `values[iy * x_mm.len() + ix]`, `None` where undefined
    /// (JSON has no NaN).
    Map {
        title: String,
        quantity: String,
        unit: String,
        x_label: String,
        y_label: String,
        x_mm: Vec<f64>,
        y_mm: Vec<f64>,
        values: Vec<Option<f64>>,
    },
}

/// A published source the analysis follows, cited in the report's bibliography.
#[derive(Debug, Clone, PartialEq, Eq, PartialOrd, Ord, Serialize, Deserialize)]
pub struct Reference {
    /// Short key, e.g. "TG-218".
    pub key: String,
    /// Full citation.
    pub citation: String,
}

/// The complete result of one analysis of one test.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, Default)]
pub struct AnalysisOutput {
    pub metrics: Vec<Metric>,
    pub tables: Vec<Table>,
    pub figures: Vec<Figure>,
    /// Remarks for the reader, e.g. points skipped and why.
    pub notes: Vec<String>,
    pub references: Vec<Reference>,
    /// Overall status; when `None` the runner takes the worst metric status (pass if none judged).
    pub status: Option<Status>,
    /// A measured distribution derived from the test's raw measurement (a film's dose plane):
    /// the runner hands it to the test's later analyses as their measured data and keeps it in
    /// the run folder. Added in ABI 1.2.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub derived_measured: Option<crate::Dataset>,
    /// A fitted film calibration: the runner stores it as a checksummed file of the run for
    /// later films of the same lot. Added in ABI 1.2.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub calibration: Option<crate::film::FilmCalibration>,
}

impl AnalysisOutput {
    /// The status to record: the explicit one, else the worst judged metric, else pass.
    pub fn overall_status(&self) -> Status {
        self.status
            .or_else(|| Status::worst(self.metrics.iter().filter_map(|m| m.status)))
            .unwrap_or(Status::Pass)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn one_print_rule_per_unit() {
        // The report's rule (common practice, no source): doses to 0.001 Gy, percentages and
        // distances to 0.01, counts whole, ratios to 0.0001; never "-0.000".
        assert_eq!(fixed_for(2.01349, "Gy"), "2.013");
        assert_eq!(fixed_for(-0.0004, "Gy"), "0.000");
        assert_eq!(fixed_for(1.2345, "%"), "1.23");
        assert_eq!(fixed_for(0.005, "mm"), "0.01");
        assert_eq!(fixed_for(1234.0, "points"), "1234");
        assert_eq!(fixed_for(0.670214, ""), "0.6702");
    }

    #[test]
    fn deviation_levels_include_their_boundary() {
        // Convention (common practice, no source): a value exactly at a limit is within it.
        assert_eq!(Status::from_deviation(2.0, 2.0, 3.0), Status::Pass);
        assert_eq!(Status::from_deviation(-2.5, 2.0, 3.0), Status::Warn);
        assert_eq!(Status::from_deviation(3.0001, 2.0, 3.0), Status::Fail);
        assert_eq!(Status::from_deviation(f64::NAN, 2.0, 3.0), Status::Error);
    }

    #[test]
    fn floor_levels_follow_pass_rate_convention() {
        // TG-218 (Miften et al 2018): tolerance 95 %, action 90 % passing.
        assert_eq!(Status::from_floor(95.0, 95.0, 90.0), Status::Pass);
        assert_eq!(Status::from_floor(92.0, 95.0, 90.0), Status::Warn);
        assert_eq!(Status::from_floor(89.9, 95.0, 90.0), Status::Fail);
    }

    #[test]
    fn fixed_never_prints_negative_zero() {
        assert_eq!(fixed(-0.0004, 2), "0.00");
        assert_eq!(fixed(-0.006, 2), "-0.01");
        assert_eq!(fixed(f64::NAN, 2), "n/a");
    }

    #[test]
    fn undefined_metric_values_survive_json() {
        let m = Metric {
            id: "m".into(),
            label: "m".into(),
            value: f64::NAN,
            unit: String::new(),
            limits: None,
            status: None,
            ..Default::default()
        };
        let json = serde_json::to_string(&m).expect("serialise");
        assert!(json.contains("\"value\":null"), "{json}");
        let back: Metric = serde_json::from_str(&json).expect("deserialise");
        assert!(back.value.is_nan());
    }

    #[test]
    fn overall_status_is_worst_metric() {
        let m = |s| Metric {
            id: "m".into(),
            label: "m".into(),
            value: 0.0,
            unit: String::new(),
            limits: None,
            status: s,
            ..Default::default()
        };
        let out = AnalysisOutput {
            metrics: vec![m(Some(Status::Pass)), m(None), m(Some(Status::Warn))],
            ..Default::default()
        };
        assert_eq!(out.overall_status(), Status::Warn);
        assert_eq!(AnalysisOutput::default().overall_status(), Status::Pass);
    }
}
