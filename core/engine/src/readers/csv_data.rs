//! Reader for the beamproof data CSV: 1D curves, point sets and 2D planes, with units and the
//! coordinate axes stated in a header. The format is specified in `docs/data-csv.md`.
//!
//! Every position is converted to mm and every absolute dose to Gy, so analyses see one unit
//! system. Coordinates are IEC 61217 fixed (X lateral, Y towards the gantry, Z up).

use std::path::Path;

use beamproof_api::{Curve, CurveAxis, DatasetData, DoseUnit, Grid, PointSet};

use crate::diag::{Diagnostic, did_you_mean};

/// Format version this build reads.
pub const DATA_FORMAT_VERSION: &str = "1";
pub const HEADER_KEYS: &[&str] = &[
    "beamproof-data",
    "shape",
    "dose-unit",
    "position-unit",
    "axis",
    "plane",
    "plane-offset",
    "description",
];

/// Parsed `# key: value` header.
#[derive(Default)]
struct Header {
    entries: Vec<(String, String, usize)>,
}

impl Header {
    fn get(&self, key: &str) -> Option<(&str, usize)> {
        self.entries
            .iter()
            .find(|(k, _, _)| k == key)
            .map(|(_, v, l)| (v.as_str(), *l))
    }
}

/// Most lines a data CSV may hold: a plane of 1000 x 1000 points, or a scan of a million
/// samples, is well inside; a larger file is refused before it is parsed, because its figures
/// and results would take many times its size in memory.
pub const MAX_LINES: usize = 2_000_000;

/// Read a data CSV file.
pub fn read(path: &Path, text: &str) -> Result<(DoseUnit, DatasetData), Diagnostic> {
    let err = |line: usize, msg: String, help: &str| Diagnostic::at(path, line, 0, msg).help(help);
    let lines = text.bytes().filter(|b| *b == b'\n').count() + 1;
    if lines > MAX_LINES {
        return Err(Diagnostic::file(
            path,
            format!("the file holds {lines} lines, more than the {MAX_LINES} a data CSV may hold"),
        )
        .help("give the scan or plane at a coarser step (a million points is already far finer than any criterion needs)"));
    }
    let mut header = Header::default();
    let mut first_data_line = None;
    for (i, line) in text.lines().enumerate() {
        let n = i + 1;
        let t = line.trim();
        if t.is_empty() || t.starts_with("##") {
            continue;
        }
        let Some(rest) = t.strip_prefix('#') else {
            first_data_line = Some(n);
            break;
        };
        let Some((k, v)) = rest.split_once(':') else {
            return Err(err(
                n,
                format!("header line `{t}` is not `# key: value`"),
                "write header lines as `# key: value`; free comments start with `##`",
            ));
        };
        let k = k.trim().to_string();
        if !HEADER_KEYS.contains(&k.as_str()) {
            let help = did_you_mean(&k, HEADER_KEYS.iter().copied(), || {
                format!("header keys: {}", HEADER_KEYS.join(", "))
            });
            return Err(err(n, format!("unknown header key `{k}`"), &help));
        }
        if header.get(&k).is_some() {
            return Err(err(
                n,
                format!("header key `{k}` is given twice"),
                "keep one",
            ));
        }
        header.entries.push((k, v.trim().to_string(), n));
    }
    let need = |key: &str, help: &str| {
        header.get(key).ok_or_else(|| {
            Diagnostic::file(path, format!("the header has no `# {key}:` line")).help(help)
        })
    };
    let (version, vl) = need(
        "beamproof-data",
        "start the file with `# beamproof-data: 1`",
    )?;
    if version != DATA_FORMAT_VERSION {
        return Err(err(
            vl,
            format!("data format version `{version}` is not supported"),
            "this build reads `# beamproof-data: 1`",
        ));
    }
    let (unit_text, ul) = need("dose-unit", "add `# dose-unit: Gy` (or cGy, mGy, %)")?;
    let (unit, dose_scale) = match unit_text {
        "Gy" => (DoseUnit::Gy, 1.0),
        "cGy" => (DoseUnit::Gy, 0.01),
        "mGy" => (DoseUnit::Gy, 0.001),
        "%" => (DoseUnit::Percent, 1.0),
        other => {
            return Err(err(
                ul,
                format!("unknown dose unit `{other}`"),
                "write Gy, cGy, mGy or %",
            ));
        }
    };
    let (pos_text, pl) = need("position-unit", "add `# position-unit: mm` (or cm)")?;
    let pos_scale = match pos_text {
        "mm" => 1.0,
        "cm" => 10.0,
        other => {
            return Err(err(
                pl,
                format!("unknown position unit `{other}`"),
                "write mm or cm",
            ));
        }
    };
    let (shape, sl) = need("shape", "add `# shape: curve` (or points, plane)")?;
    let start = first_data_line.ok_or_else(|| {
        Diagnostic::file(path, "the file has a header but no data")
            .help("add the column header line and the data rows")
    })?;
    let rows = records(path, text, start)?;
    let data = match shape {
        "curve" => {
            let (axis_text, al) = need("axis", "add `# axis: x` (or y, diagonal, depth)")?;
            let axis = match axis_text {
                "x" => CurveAxis::X,
                "y" => CurveAxis::Y,
                "diagonal" => CurveAxis::Diagonal,
                "depth" => CurveAxis::Depth,
                other => {
                    return Err(err(
                        al,
                        format!("unknown curve axis `{other}`"),
                        "write x, y, diagonal or depth",
                    ));
                }
            };
            curve(path, &rows, axis, pos_scale, dose_scale)?
        }
        "points" => points(path, &rows, pos_scale, dose_scale)?,
        "plane" => {
            let (plane_text, ll) = need(
                "plane",
                "add `# plane: xy` (or xz, yz): columns along the first axis, rows along the second",
            )?;
            let offset = match header.get("plane-offset") {
                Some((v, l)) => number(path, l, "plane-offset", v)? * pos_scale,
                None => 0.0,
            };
            plane(path, &rows, plane_text, ll, offset, pos_scale, dose_scale)?
        }
        other => {
            return Err(err(
                sl,
                format!("unknown shape `{other}`"),
                "write curve, points or plane",
            ));
        }
    };
    Ok((unit, data))
}

/// Data rows with their 1-based line numbers, the first row being the column header.
fn records(path: &Path, text: &str, start: usize) -> Result<Vec<(usize, Vec<String>)>, Diagnostic> {
    let body: String = text
        .lines()
        .skip(start - 1)
        .map(|l| format!("{l}\n"))
        .collect();
    let mut reader = csv::ReaderBuilder::new()
        .has_headers(false)
        .comment(Some(b'#'))
        .flexible(true)
        .trim(csv::Trim::All)
        .from_reader(body.as_bytes());
    let mut out = Vec::new();
    for rec in reader.records() {
        let rec = rec.map_err(|e| {
            let line = e.position().map_or(0, |p| p.line() as usize + start - 1);
            Diagnostic::at(path, line, 0, format!("malformed CSV: {e}"))
                .help("check quoting and separators (comma-separated)")
        })?;
        let line = rec.position().map_or(0, |p| p.line() as usize + start - 1);
        if rec.iter().all(str::is_empty) {
            continue;
        }
        out.push((line, rec.iter().map(str::to_string).collect()));
    }
    Ok(out)
}

fn number(path: &Path, line: usize, column: &str, text: &str) -> Result<f64, Diagnostic> {
    text.trim()
        .parse::<f64>()
        .ok()
        .filter(|v| v.is_finite())
        .ok_or_else(|| {
            Diagnostic::at(
                path,
                line,
                0,
                format!("`{text}` in column `{column}` is not a number"),
            )
            .help("write a plain decimal number such as 1.25 (dot as decimal separator)")
        })
}

fn expect_columns(
    path: &Path,
    rows: &[(usize, Vec<String>)],
    want: &[&[&str]],
) -> Result<usize, Diagnostic> {
    let (line, cols) = rows.first().ok_or_else(|| {
        Diagnostic::file(path, "no column header line").help("add the column names")
    })?;
    let names: Vec<&str> = cols.iter().map(String::as_str).collect();
    want.iter()
        .position(|w| *w == names.as_slice())
        .ok_or_else(|| {
            let options: Vec<String> = want.iter().map(|w| w.join(",")).collect();
            Diagnostic::at(
                path,
                *line,
                0,
                format!("unexpected columns `{}`", names.join(",")),
            )
            .help(format!(
                "the column header must be {}",
                options.join(" or ")
            ))
        })
}

/// Check the row width and parse the numeric cells from `first` on.
fn numeric_row(
    path: &Path,
    line: usize,
    cells: &[String],
    names: &[&str],
    first: usize,
) -> Result<Vec<f64>, Diagnostic> {
    if cells.len() != names.len() {
        return Err(Diagnostic::at(
            path,
            line,
            0,
            format!(
                "row has {} values, the header has {}",
                cells.len(),
                names.len()
            ),
        )
        .help("every row needs one value per column"));
    }
    cells[first..]
        .iter()
        .zip(&names[first..])
        .map(|(c, n)| number(path, line, n, c))
        .collect()
}

/// Put coordinates in increasing order; a scan in decreasing order is reversed. Returns the
/// permutation applied, or an error naming the first line that breaks monotonicity.
fn increasing(
    path: &Path,
    coords: &[f64],
    lines: &[usize],
    what: &str,
) -> Result<Vec<usize>, Diagnostic> {
    let mut idx: Vec<usize> = (0..coords.len()).collect();
    if coords.len() >= 2 && coords[1] < coords[0] {
        idx.reverse();
    }
    for w in idx.windows(2) {
        if coords[w[1]] <= coords[w[0]] {
            return Err(Diagnostic::at(
                path,
                lines[w[1]],
                0,
                format!(
                    "{what} {} does not continue the monotonic order",
                    coords[w[1]]
                ),
            )
            .help("positions must strictly increase (or strictly decrease) with no repeats"));
        }
    }
    Ok(idx)
}

fn curve(
    path: &Path,
    rows: &[(usize, Vec<String>)],
    axis: CurveAxis,
    ps: f64,
    ds: f64,
) -> Result<DatasetData, Diagnostic> {
    let names = ["position", "dose"];
    expect_columns(path, rows, &[&names])?;
    let (mut pos, mut dose, mut lines) = (Vec::new(), Vec::new(), Vec::new());
    for (line, cells) in &rows[1..] {
        let v = numeric_row(path, *line, cells, &names, 0)?;
        pos.push(v[0] * ps);
        dose.push(v[1] * ds);
        lines.push(*line);
    }
    if pos.len() < 2 {
        return Err(
            Diagnostic::file(path, "a curve needs at least 2 points").help("add the scan data")
        );
    }
    let order = increasing(path, &pos, &lines, "position")?;
    Ok(DatasetData::Curve(Curve {
        axis,
        positions_mm: order.iter().map(|&i| pos[i]).collect(),
        dose: order.iter().map(|&i| dose[i]).collect(),
    }))
}

fn points(
    path: &Path,
    rows: &[(usize, Vec<String>)],
    ps: f64,
    ds: f64,
) -> Result<DatasetData, Diagnostic> {
    let with_label: [&str; 5] = ["label", "x", "y", "z", "dose"];
    let without: [&str; 4] = ["x", "y", "z", "dose"];
    let labelled = expect_columns(path, rows, &[&with_label, &without])? == 0;
    let names: &[&str] = if labelled { &with_label } else { &without };
    let first = usize::from(labelled);
    let mut set = PointSet {
        labels: Vec::new(),
        x_mm: Vec::new(),
        y_mm: Vec::new(),
        z_mm: Vec::new(),
        dose: Vec::new(),
    };
    for (line, cells) in &rows[1..] {
        let v = numeric_row(path, *line, cells, names, first)?;
        let label = if labelled {
            cells[0].clone()
        } else {
            String::new()
        };
        if labelled && !label.is_empty() && set.labels.contains(&label) {
            return Err(Diagnostic::at(
                path,
                *line,
                0,
                format!("point label `{label}` is used twice"),
            )
            .help("give each point its own label"));
        }
        set.labels.push(label);
        set.x_mm.push(v[0] * ps);
        set.y_mm.push(v[1] * ps);
        set.z_mm.push(v[2] * ps);
        set.dose.push(v[3] * ds);
    }
    if set.is_empty() {
        return Err(
            Diagnostic::file(path, "the point set has no points").help("add one row per point")
        );
    }
    Ok(DatasetData::Points(set))
}

fn plane(
    path: &Path,
    rows: &[(usize, Vec<String>)],
    plane: &str,
    plane_line: usize,
    offset: f64,
    ps: f64,
    ds: f64,
) -> Result<DatasetData, Diagnostic> {
    let (col_axis, row_axis) = match plane {
        "xy" => ('x', 'y'),
        "xz" => ('x', 'z'),
        "yz" => ('y', 'z'),
        other => {
            return Err(
                Diagnostic::at(path, plane_line, 0, format!("unknown plane `{other}`")).help(
                    "write xy, xz or yz (columns along the first axis, rows along the second)",
                ),
            );
        }
    };
    let (hline, head) = &rows[0];
    let corner = format!("{row_axis}\\{col_axis}");
    if head.first().map(String::as_str) != Some(corner.as_str()) || head.len() < 3 {
        return Err(Diagnostic::at(
            path,
            *hline,
            0,
            "the first row must be the corner cell then the column coordinates",
        )
        .help(format!(
            "start the row with `{corner}` followed by at least two {col_axis} positions"
        )));
    }
    let head_names: Vec<&str> = std::iter::repeat_n(col_axis_name(col_axis), head.len()).collect();
    let cols: Vec<f64> = numeric_row(path, *hline, head, &head_names, 1)?
        .iter()
        .map(|v| v * ps)
        .collect();
    let col_order = increasing(path, &cols, &vec![*hline; cols.len()], "column coordinate")?;
    let (mut row_coords, mut lines, mut values) = (Vec::new(), Vec::new(), Vec::new());
    let names: Vec<&str> = std::iter::once(col_axis_name(row_axis))
        .chain(std::iter::repeat_n("dose", cols.len()))
        .collect();
    for (line, cells) in &rows[1..] {
        let v = numeric_row(path, *line, cells, &names, 0)?;
        row_coords.push(v[0] * ps);
        lines.push(*line);
        values.push(v[1..].iter().map(|d| d * ds).collect::<Vec<f64>>());
    }
    if row_coords.len() < 2 {
        return Err(
            Diagnostic::file(path, "a plane needs at least 2 rows").help("add the dose rows")
        );
    }
    let row_order = increasing(path, &row_coords, &lines, "row coordinate")?;
    let c: Vec<f64> = col_order.iter().map(|&i| cols[i]).collect();
    let r: Vec<f64> = row_order.iter().map(|&i| row_coords[i]).collect();
    let mut dose = Vec::with_capacity(c.len() * r.len());
    for &ri in &row_order {
        for &ci in &col_order {
            dose.push(values[ri][ci]);
        }
    }
    // Store as a grid with a singleton third axis; x is the fastest index of a Grid, so when the
    // columns run along y or z the values are already in (row, column) order for that layout.
    let grid = match plane {
        "xy" => Grid {
            x_mm: c,
            y_mm: r,
            z_mm: vec![offset],
            dose,
        },
        "xz" => Grid {
            x_mm: c,
            y_mm: vec![offset],
            z_mm: r,
            dose,
        },
        _ => Grid {
            x_mm: vec![offset],
            y_mm: c,
            z_mm: r,
            dose,
        },
    };
    Ok(DatasetData::Grid(grid))
}

fn col_axis_name(axis: char) -> &'static str {
    match axis {
        'x' => "x",
        'y' => "y",
        _ => "z",
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn read_str(text: &str) -> Result<(DoseUnit, DatasetData), Diagnostic> {
        read(Path::new("d.csv"), text)
    }

    #[test]
    fn curve_in_cm_and_cgy_is_converted_and_sorted() {
        let text = "# beamproof-data: 1\n# shape: curve\n# axis: depth\n# dose-unit: cGy\n# position-unit: cm\nposition,dose\n2.0,50\n1.0,100\n0.5,80\n";
        let (unit, data) = read_str(text).expect("valid");
        assert_eq!(unit, DoseUnit::Gy);
        let DatasetData::Curve(c) = data else {
            panic!("curve")
        };
        assert_eq!(c.positions_mm, vec![5.0, 10.0, 20.0]);
        assert_eq!(c.dose, vec![0.8, 1.0, 0.5]);
    }

    #[test]
    fn a_file_of_more_lines_than_the_limit_is_refused_before_parsing() {
        let head = "# beamproof-data: 1\n# shape: curve\n# axis: x\n# dose-unit: %\n# position-unit: mm\nposition,dose\n";
        let body: String = (0..MAX_LINES).map(|i| format!("{i},1\n")).collect();
        let e = read_str(&format!("{head}{body}")).expect_err("refused");
        assert_eq!(
            e.message,
            format!(
                "the file holds {} lines, more than the {MAX_LINES} a data CSV may hold",
                MAX_LINES + 7
            )
        );
        let body: String = (0..MAX_LINES - 7).map(|i| format!("{i},1\n")).collect();
        assert!(read_str(&format!("{head}{body}")).is_ok());
    }

    #[test]
    fn non_monotonic_curve_names_the_line() {
        let text = "# beamproof-data: 1\n# shape: curve\n# axis: x\n# dose-unit: %\n# position-unit: mm\nposition,dose\n0,1\n1,1\n0.5,1\n";
        let e = read_str(text).expect_err("not monotonic");
        assert_eq!(e.line, 9);
    }

    #[test]
    fn bad_number_names_line_and_column() {
        let text = "# beamproof-data: 1\n# shape: points\n# dose-unit: Gy\n# position-unit: mm\nlabel,x,y,z,dose\np1,0,0,0,2.0\np2,1,0,0,2.O1\n";
        let e = read_str(text).expect_err("bad number");
        assert_eq!(e.line, 7);
        assert_eq!(e.message, "`2.O1` in column `dose` is not a number");
    }

    #[test]
    fn plane_xz_maps_rows_to_z() {
        let text = "# beamproof-data: 1\n# shape: plane\n# plane: xz\n# plane-offset: 1.5\n# dose-unit: Gy\n# position-unit: mm\nz\\x,-1,0,1\n2,1,2,3\n-2,4,5,6\n";
        let (_, data) = read_str(text).expect("valid");
        let DatasetData::Grid(g) = data else {
            panic!("grid")
        };
        assert_eq!(g.x_mm, vec![-1.0, 0.0, 1.0]);
        assert_eq!(g.y_mm, vec![1.5]);
        assert_eq!(g.z_mm, vec![-2.0, 2.0]);
        // Row z = -2 came last in the file and is first after sorting.
        assert_eq!(g.dose, vec![4.0, 5.0, 6.0, 1.0, 2.0, 3.0]);
        // Bilinear midpoint: (5.5 at z = -2 + 2.5 at z = 2) / 2.
        assert_eq!(g.sample(0.5, 1.5, 0.0), Some(4.0));
    }

    #[test]
    fn unknown_header_key_gets_a_suggestion() {
        let e = read_str("# beamproof-data: 1\n# dose-units: Gy\n").expect_err("typo");
        assert_eq!(
            (e.line, e.help.as_deref()),
            (2, Some("did you mean `dose-unit`?"))
        );
    }
}
