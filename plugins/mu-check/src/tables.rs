//! Beam-data tables: 1D (a factor against field size) and 2D (PDD or TPR against depth and
//! equivalent square field), validated on construction and interpolated linearly, or
//! bilinearly. A value outside a table's axes is an error, never an extrapolation.

/// Why a table cannot be built or read.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct TableError(pub String);

fn check_axis(name: &str, axis: &[f64]) -> Result<(), TableError> {
    if axis.len() < 2 {
        return Err(TableError(format!(
            "the {name} axis needs at least 2 values, it has {}",
            axis.len()
        )));
    }
    if let Some(w) = axis
        .windows(2)
        .find(|w| w[1].partial_cmp(&w[0]) != Some(std::cmp::Ordering::Greater))
    {
        return Err(TableError(format!(
            "the {name} axis must increase strictly: {} is followed by {}",
            w[0], w[1]
        )));
    }
    Ok(())
}

fn check_values(name: &str, values: &[f64]) -> Result<(), TableError> {
    if let Some(v) = values.iter().find(|v| !v.is_finite() || **v <= 0.0) {
        return Err(TableError(format!(
            "{name} holds an invalid value {v}: every entry must be a positive number (no gaps)"
        )));
    }
    Ok(())
}

/// Locate `v` on an axis: lower index and fraction; error outside.
fn locate(name: &str, axis: &[f64], v: f64, unit: &str) -> Result<(usize, f64), TableError> {
    let (lo, hi) = (axis[0], axis[axis.len() - 1]);
    if !(v >= lo && v <= hi) {
        return Err(TableError(format!(
            "{name} {v} {unit} is outside the table ({lo} to {hi} {unit}); extend the measured data rather than extrapolate"
        )));
    }
    let j = axis.partition_point(|&a| a <= v).clamp(1, axis.len() - 1);
    Ok((j - 1, (v - axis[j - 1]) / (axis[j] - axis[j - 1])))
}

/// A factor against equivalent square field side (cm), e.g. Sc or Sp.
#[derive(Debug, Clone, PartialEq)]
pub struct Table1D {
    pub name: String,
    pub field_cm: Vec<f64>,
    pub values: Vec<f64>,
}

impl Table1D {
    pub fn new(name: &str, field_cm: Vec<f64>, values: Vec<f64>) -> Result<Table1D, TableError> {
        check_axis(&format!("{name} field-size"), &field_cm)?;
        if values.len() != field_cm.len() {
            return Err(TableError(format!(
                "{name} has {} values for {} field sizes",
                values.len(),
                field_cm.len()
            )));
        }
        check_values(name, &values)?;
        Ok(Table1D {
            name: name.into(),
            field_cm,
            values,
        })
    }

    /// Linear interpolation at a field side (cm).
    pub fn at(&self, field_cm: f64) -> Result<f64, TableError> {
        let (i, t) = locate(
            &format!("{} field size", self.name),
            &self.field_cm,
            field_cm,
            "cm",
        )?;
        Ok(self.values[i] + t * (self.values[i + 1] - self.values[i]))
    }
}

/// A quantity against depth (cm, rows) and equivalent square field side (cm, columns).
#[derive(Debug, Clone, PartialEq)]
pub struct Table2D {
    pub name: String,
    pub depth_cm: Vec<f64>,
    pub field_cm: Vec<f64>,
    /// Row-major: `values[row * field_cm.len() + column]`.
    pub values: Vec<f64>,
    /// Interpolate the logarithm linearly along depth (PDD and TPR fall nearly exponentially
    /// with depth beyond the build-up, so log-linear interpolation between measured depths
    /// follows the curve more closely); field sizes are always linear.
    pub log_depth: bool,
}

impl Table2D {
    pub fn new(
        name: &str,
        depth_cm: Vec<f64>,
        field_cm: Vec<f64>,
        values: Vec<f64>,
    ) -> Result<Table2D, TableError> {
        check_axis(&format!("{name} depth"), &depth_cm)?;
        check_axis(&format!("{name} field-size"), &field_cm)?;
        if values.len() != depth_cm.len() * field_cm.len() {
            return Err(TableError(format!(
                "{name} has {} values for {} depths x {} field sizes",
                values.len(),
                depth_cm.len(),
                field_cm.len()
            )));
        }
        check_values(name, &values)?;
        Ok(Table2D {
            name: name.into(),
            depth_cm,
            field_cm,
            values,
            log_depth: false,
        })
    }

    /// The same table interpolated log-linearly along depth.
    pub fn log_linear_in_depth(mut self) -> Table2D {
        self.log_depth = true;
        self
    }

    /// Bilinear interpolation at (depth, field side), both in cm.
    pub fn at(&self, depth_cm: f64, field_cm: f64) -> Result<f64, TableError> {
        let (i, u) = locate(
            &format!("{} depth", self.name),
            &self.depth_cm,
            depth_cm,
            "cm",
        )?;
        let (j, t) = locate(
            &format!("{} field size", self.name),
            &self.field_cm,
            field_cm,
            "cm",
        )?;
        let n = self.field_cm.len();
        let v = |r: usize, c: usize| self.values[r * n + c];
        let top = v(i, j) + t * (v(i, j + 1) - v(i, j));
        let bottom = v(i + 1, j) + t * (v(i + 1, j + 1) - v(i + 1, j));
        if self.log_depth {
            // Values are validated positive, so the logarithms exist.
            Ok((top.ln() + u * (bottom.ln() - top.ln())).exp())
        } else {
            Ok(top + u * (bottom - top))
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn bilinear_interpolation_is_exact_for_bilinear_data() {
        // f = 1 + 0.1 d + 0.01 s + 0.001 d s is reproduced exactly by bilinear interpolation
        // (definition of bilinear interpolation).
        let depth = vec![1.0, 5.0, 10.0];
        let field = vec![4.0, 10.0, 20.0];
        let f = |d: f64, s: f64| 1.0 + 0.1 * d + 0.01 * s + 0.001 * d * s;
        let values = depth
            .iter()
            .flat_map(|&d| field.iter().map(move |&s| f(d, s)))
            .collect();
        let t = Table2D::new("TPR", depth, field, values).expect("valid");
        for (d, s) in [(3.0, 7.0), (10.0, 20.0), (1.0, 4.0), (7.5, 12.0)] {
            assert!((t.at(d, s).expect("inside") - f(d, s)).abs() < 1e-12);
        }
    }

    #[test]
    fn log_linear_depth_interpolation_is_exact_for_exponential_attenuation() {
        // TPR = exp(-mu (d - d0)) is reproduced exactly by log-linear interpolation in depth
        // (analytic), while linear interpolation overestimates between nodes (convexity).
        let depth = vec![5.0, 15.0, 25.0];
        let field = vec![5.0, 20.0];
        let f = |d: f64| (-0.05 * (d - 10.0)).exp();
        let values = depth.iter().flat_map(|&d| [f(d), f(d)]).collect();
        let lin = Table2D::new("TPR", depth, field, values).expect("valid");
        let log = lin.clone().log_linear_in_depth();
        let at = |t: &Table2D| t.at(10.0, 10.0).expect("inside");
        assert!((at(&log) - 1.0).abs() < 1e-12);
        assert!(at(&lin) > 1.0 + 1e-3);
    }

    #[test]
    fn tables_refuse_bad_axes_gaps_and_extrapolation() {
        assert_eq!(
            Table1D::new("Sc", vec![4.0, 10.0, 10.0], vec![1.0, 1.0, 1.0]),
            Err(TableError(
                "the Sc field-size axis must increase strictly: 10 is followed by 10".into()
            ))
        );
        assert_eq!(
            Table1D::new("Sc", vec![4.0, 10.0], vec![0.97, f64::NAN]),
            Err(TableError(
                "Sc holds an invalid value NaN: every entry must be a positive number (no gaps)"
                    .into()
            ))
        );
        let sc = Table1D::new("Sc", vec![4.0, 10.0, 40.0], vec![0.96, 1.0, 1.05]).expect("valid");
        assert_eq!(
            sc.at(2.0),
            Err(TableError("Sc field size 2 cm is outside the table (4 to 40 cm); extend the measured data rather than extrapolate".into()))
        );
        assert!((sc.at(7.0).expect("inside") - 0.98).abs() < 1e-12);
    }
}
