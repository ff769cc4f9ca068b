//! The beam-data file of the monitor-unit check (format documented in `docs/beam-data.md`): a
//! YAML header with the reference conditions, naming CSV tables beside it (PDD, TPR, Sc, Sp or
//! Scp, off-axis ratios), plus optional tray and wedge factors. Every problem of the header
//! and of every table is reported at once with its file, line and column.

use std::path::Path;

use beamproof_api::mu::{BeamData, Table1, Table2, WedgeFactor};

use crate::campaign::Decoder;
use crate::diag::Diagnostic;
use crate::input_store::InputStore;
use crate::yaml::{Node, parse, parse_yaml_float};

/// Format version this build reads.
pub const BEAM_DATA_VERSION: u32 = 1;
/// Keys of the beam-data file.
pub const BEAM_DATA_KEYS: &[&str] = &[
    "beamproof-beam-data",
    "machine",
    "beam",
    "energy-mv",
    "fff",
    "description",
    "sad-cm",
    "pdd-ssd-cm",
    "normalisation",
    "tables",
    "tray-factor",
    "wedges",
];
pub const NORMALISATION_KEYS: &[&str] = &["ssd-cm", "depth-cm", "field-cm", "dose-per-mu-cgy"];
pub const TABLE_KEYS: &[&str] = &["pdd", "tpr", "sc", "sp", "scp", "oar"];
pub const WEDGE_KEYS: &[&str] = &["id", "factor"];

/// A beam-data file read: the data and every table file (path relative to the campaign folder,
/// SHA-256 of the bytes read), all of them kept by the input store for the run folder.
#[derive(Debug, Clone)]
pub struct BeamDataFiles {
    pub data: BeamData,
    pub tables: Vec<(String, String)>,
}

/// What one table holds: its header's first cell and the plausible value range (the unit
/// check: a PDD written as fractions, or a TPR in percent, is caught here).
struct Kind {
    key: &'static str,
    corner: &'static str,
    min: f64,
    max: f64,
    unit_help: &'static str,
}

const PDD: Kind = Kind {
    key: "pdd",
    corner: "depth_cm/field_cm",
    min: 1.0,
    max: 110.0,
    unit_help: "PDD is in percent of the dose at the normalisation depth (100 at d0)",
};
const TPR: Kind = Kind {
    key: "tpr",
    corner: "depth_cm/field_cm",
    min: 0.01,
    max: 2.0,
    unit_help: "TPR is a ratio, 1.000 at the normalisation depth",
};
const OAR: Kind = Kind {
    key: "oar",
    corner: "depth_cm/off_axis_cm",
    min: 0.01,
    max: 2.0,
    unit_help: "the off-axis ratio is 1.000 on the central axis",
};
const SCATTER: Kind = Kind {
    key: "sc",
    corner: "field_cm",
    min: 0.3,
    max: 2.0,
    unit_help: "scatter factors are ratios, 1.000 at the reference field",
};

/// Read a beam-data file through the input store; `rel` is its path relative to the store's
/// folder (table paths are relative to the beam-data file and must stay inside that folder).
pub fn read(store: &mut InputStore, rel: &str) -> Result<BeamDataFiles, Vec<Diagnostic>> {
    let path = &store.path(rel);
    let file = store.read(rel).map_err(|e| {
        vec![Diagnostic::file(path, format!("cannot read the beam-data file: {e}")).help(e.help())]
    })?;
    let bytes = file.bytes;
    let text = std::str::from_utf8(&bytes).map_err(|e| {
        vec![
            Diagnostic::file(path, format!("the beam-data file is not UTF-8 text: {e}"))
                .help("save the file as UTF-8"),
        ]
    })?;
    let root = parse(text, path)?;
    let mut d = Decoder::new(path);
    let header = decode(&mut d, &root);
    let mut diags = std::mem::take(&mut d.diags);
    let Some(h) = header else {
        return Err(diags);
    };
    let base = rel.rsplit_once('/').map_or("", |(dir, _)| dir);
    let mut tables = Vec::new();
    let mut load = |entry: &Option<(String, Node)>,
                    kind: &Kind,
                    diags: &mut Vec<Diagnostic>|
     -> Option<Loaded> {
        let (written, node) = entry.as_ref()?;
        let at = |m: String| Diagnostic::at(path, node.line, node.column, m);
        let Some(table_rel) = join_relative(base, written) else {
            diags.push(at(format!("table path `{written}` leaves the campaign folder")).help(
                "give the table's path relative to the beam-data file, inside the campaign folder",
            ));
            return None;
        };
        let table_path = store.path(&table_rel);
        let file = match store.read(&table_rel) {
            Ok(f) => f,
            Err(e) => {
                diags.push(
                    at(format!(
                        "{} table `{written}` cannot be read: {e}",
                        kind.key
                    ))
                    .help(format!(
                        "{}; expected at {}",
                        e.help(),
                        table_path.display()
                    )),
                );
                return None;
            }
        };
        let loaded = parse_table(&table_path, &file.bytes, kind);
        tables.push((table_rel, file.sha256));
        match loaded {
            Ok(t) => Some(t),
            Err(mut e) => {
                diags.append(&mut e);
                None
            }
        }
    };
    let pdd = load(&h.pdd, &PDD, &mut diags).map(Loaded::two);
    let tpr = load(&h.tpr, &TPR, &mut diags).map(Loaded::two);
    let oar = load(&h.oar, &OAR, &mut diags).map(Loaded::two);
    let sc = load(&h.sc, &SCATTER, &mut diags).map(Loaded::one);
    let sp = load(&h.sp, &SCATTER, &mut diags).map(Loaded::one);
    let scp = load(&h.scp, &SCATTER, &mut diags).map(Loaded::one);
    let sp = match (sp, scp, &sc) {
        (Some(sp), _, _) => Some(sp),
        // Scp = Sc Sp at the same field side (Khan), so Sp = Scp / Sc on the Scp table's fields.
        (None, Some(scp), Some(sc)) => match sp_from_scp(&scp, sc) {
            Ok(t) => Some(t),
            Err(m) => {
                diags.push(
                    Diagnostic::file(path, m)
                        .help("give Sc at every field size of the Scp table, or give Sp directly"),
                );
                None
            }
        },
        _ => None,
    };
    if !diags.is_empty() {
        return Err(diags);
    }
    match (sc, sp) {
        (Some(sc), Some(sp)) => Ok(BeamDataFiles {
            data: BeamData {
                source: rel.to_string(),
                machine: h.machine,
                beam: h.beam,
                energy_mv: h.energy_mv,
                fff: h.fff,
                sad_cm: h.sad_cm,
                ssd0_cm: h.ssd0_cm,
                pdd_ssd_cm: h.pdd_ssd_cm,
                d0_cm: h.d0_cm,
                field0_cm: h.field0_cm,
                dose_per_mu_cgy: h.dose_per_mu_cgy,
                pdd,
                tpr,
                sc,
                sp,
                oar,
                tray_factor: h.tray_factor,
                wedges: h.wedges,
            },
            tables,
        }),
        _ => Err(vec![
            Diagnostic::file(path, "the beam data hold no Sc or no Sp")
                .help("add `sc:` and `sp:` (or `scp:`) tables under `tables:`"),
        ]),
    }
}

/// The header after decoding, table paths still unread.
struct Header {
    machine: String,
    beam: String,
    energy_mv: f64,
    fff: bool,
    sad_cm: f64,
    ssd0_cm: f64,
    pdd_ssd_cm: Option<f64>,
    d0_cm: f64,
    field0_cm: f64,
    dose_per_mu_cgy: f64,
    pdd: Option<(String, Node)>,
    tpr: Option<(String, Node)>,
    sc: Option<(String, Node)>,
    sp: Option<(String, Node)>,
    scp: Option<(String, Node)>,
    oar: Option<(String, Node)>,
    tray_factor: Option<f64>,
    wedges: Vec<WedgeFactor>,
}

fn decode(d: &mut Decoder, root: &Node) -> Option<Header> {
    let f = d.fields(root, "the beam-data file", BEAM_DATA_KEYS)?;
    if let Some(n) = d.required(
        &f,
        "beamproof-beam-data",
        "add `beamproof-beam-data: 1` as the first line (the format version)",
    ) && let Some(v) = d.number(n, "`beamproof-beam-data`", 0.0, 1e6, "")
        && v != f64::from(BEAM_DATA_VERSION)
    {
        d.report(
            n,
            format!("beam-data format version {v} is not supported; this build reads version {BEAM_DATA_VERSION}"),
            "use a beamproof release that reads this version, or convert the file",
        );
    }
    let machine = d.req_string(
        &f,
        "machine",
        "name the machine these data were measured on",
    );
    let beam = d.req_string(&f, "beam", "name the beam (the campaign's beam id)");
    let energy_mv = d.req_number(&f, "energy-mv", 1.0, 50.0, "MV");
    let fff = d.opt_bool(&f, "fff").unwrap_or(false);
    let _ = d.opt_string(&f, "description");
    let sad_cm = d.req_number(&f, "sad-cm", 50.0, 200.0, "cm");
    let pdd_ssd_cm = d.opt_number(&f, "pdd-ssd-cm", 50.0, 200.0, "cm");
    let norm = d
        .required(
            &f,
            "normalisation",
            "add `normalisation:` with ssd-cm, depth-cm, field-cm and dose-per-mu-cgy",
        )
        .and_then(|n| d.fields(n, "`normalisation`", NORMALISATION_KEYS));
    let (ssd0, d0, field0, dpm) = match &norm {
        Some(n) => (
            d.req_number(n, "ssd-cm", 50.0, 200.0, "cm"),
            d.req_number(n, "depth-cm", 0.0, 40.0, "cm"),
            d.req_number(n, "field-cm", 0.5, 50.0, "cm"),
            d.req_number(n, "dose-per-mu-cgy", 0.1, 5.0, "cGy/MU"),
        ),
        None => (None, None, None, None),
    };
    let tables = d
        .required(
            &f,
            "tables",
            "add `tables:` naming the CSV files (sc, sp or scp, and pdd and/or tpr)",
        )
        .and_then(|n| d.fields(n, "`tables`", TABLE_KEYS));
    let mut path_of = |key: &str| -> Option<(String, Node)> {
        let t = tables.as_ref()?;
        let n = t.get(key)?;
        let s = d.string(n, &format!("`{key}`"))?;
        Some((s, n.clone()))
    };
    let (pdd, tpr, sc, sp, scp, oar) = (
        path_of("pdd"),
        path_of("tpr"),
        path_of("sc"),
        path_of("sp"),
        path_of("scp"),
        path_of("oar"),
    );
    if let Some(t) = &tables {
        if pdd.is_none() && tpr.is_none() {
            d.report(
                t.node,
                "`tables` names neither a `pdd` nor a `tpr` table",
                "add `pdd:` for SSD setups and `tpr:` for isocentric setups",
            );
        }
        if sc.is_none() {
            d.report(t.node, "`tables` has no `sc` table", "add `sc: FILE.csv`");
        }
        if sp.is_some() == scp.is_some() {
            d.report(
                t.node,
                "`tables` needs exactly one of `sp` and `scp`",
                "give the phantom scatter Sp, or the total scatter Scp (then Sp = Scp / Sc)",
            );
        }
    }
    let tray_factor = d.opt_number(&f, "tray-factor", 0.5, 1.0, "");
    let mut wedges = Vec::new();
    if let Some(n) = f.get("wedges")
        && let Some(items) = d.list(n, "`wedges`")
    {
        for item in items {
            if let Some(w) = d.fields(item, "a wedge", WEDGE_KEYS) {
                let id = d.req_string(&w, "id", "name the wedge as the plan or campaign does");
                let factor = d.req_number(&w, "factor", 0.1, 1.0, "");
                if let (Some(id), Some(factor)) = (id, factor) {
                    wedges.push(WedgeFactor { id, factor });
                }
            }
        }
    }
    Some(Header {
        machine: machine?,
        beam: beam?,
        energy_mv: energy_mv?,
        fff,
        sad_cm: sad_cm?,
        ssd0_cm: ssd0?,
        pdd_ssd_cm,
        d0_cm: d0?,
        field0_cm: field0?,
        dose_per_mu_cgy: dpm?,
        pdd,
        tpr,
        sc,
        sp,
        scp,
        oar,
        tray_factor,
        wedges,
    })
}

/// `base/written` as a clean relative path, or `None` when it would leave the campaign folder.
fn join_relative(base: &str, written: &str) -> Option<String> {
    let mut parts: Vec<&str> = base.split('/').filter(|p| !p.is_empty()).collect();
    if written.starts_with('/') || written.contains('\\') {
        return None;
    }
    for p in written.split('/') {
        match p {
            "" | "." => {}
            ".." => {
                parts.pop()?;
            }
            other => parts.push(other),
        }
    }
    (!parts.is_empty()).then(|| parts.join("/"))
}

enum Loaded {
    One(Table1),
    Two(Table2),
}

impl Loaded {
    fn one(self) -> Table1 {
        match self {
            Loaded::One(t) => t,
            Loaded::Two(t) => Table1 {
                axis: t.columns,
                values: t.values,
            },
        }
    }
    fn two(self) -> Table2 {
        match self {
            Loaded::Two(t) => t,
            Loaded::One(t) => Table2 {
                depth_cm: vec![0.0],
                columns: t.axis,
                values: t.values,
            },
        }
    }
}

/// Parse one CSV table. 1D tables: header `field_cm,NAME`, then `field,value` rows. 2D tables:
/// header `depth_cm/field_cm` (or `depth_cm/off_axis_cm`) followed by the column axis, then
/// one row per depth. `#` starts a comment line. Axes must increase strictly; every cell must
/// hold a number in the table's plausible range.
fn parse_table(path: &Path, bytes: &[u8], kind: &Kind) -> Result<Loaded, Vec<Diagnostic>> {
    let mut diags = Vec::new();
    let at = |line: u64, msg: String| Diagnostic::at(path, line as usize, 1, msg);
    let mut reader = csv::ReaderBuilder::new()
        .has_headers(false)
        .comment(Some(b'#'))
        .flexible(true)
        .trim(csv::Trim::All)
        .from_reader(bytes);
    let mut rows: Vec<(u64, Vec<String>)> = Vec::new();
    for rec in reader.records() {
        match rec {
            Ok(r) => rows.push((
                r.position().map_or(0, |p| p.line()),
                r.iter().map(str::to_string).collect(),
            )),
            Err(e) => {
                return Err(vec![
                    Diagnostic::file(path, format!("not a readable CSV table: {e}"))
                        .help("write comma-separated values, one row per line"),
                ]);
            }
        }
    }
    let Some((hline, header)) = rows.first().cloned() else {
        return Err(vec![Diagnostic::file(path, "the table is empty").help(
            format!(
                "start with a header row whose first cell is `{}`",
                kind.corner
            ),
        )]);
    };
    let corner = header.first().map(String::as_str).unwrap_or_default();
    let one_d = kind.corner == "field_cm";
    if corner != kind.corner {
        diags.push(
            at(
                hline,
                format!(
                    "the header starts with `{corner}`, expected `{}`",
                    kind.corner
                ),
            )
            .help(if one_d {
                "write `field_cm,<factor>` as the header: field sides in cm, then the factor"
                    .to_string()
            } else {
                format!(
                    "write `{}` then the column values in cm, e.g. `{},4,10,20`",
                    kind.corner, kind.corner
                )
            }),
        );
        return Err(diags);
    }
    let num = |s: &str| parse_yaml_float(s).filter(|v| v.is_finite());
    let check_axis = |axis: &[(u64, f64)], what: &str, diags: &mut Vec<Diagnostic>| {
        for w in axis.windows(2) {
            if w[1].1 <= w[0].1 {
                diags.push(
                    at(
                        w[1].0,
                        format!(
                            "the {what} axis must increase strictly: {} is followed by {}",
                            w[0].1, w[1].1
                        ),
                    )
                    .help("sort the rows or columns, and remove duplicates"),
                );
            }
        }
        if axis.len() < 2 {
            diags.push(
                Diagnostic::file(path, format!("the {what} axis needs at least 2 values"))
                    .help("a table is interpolated between measured values; give two or more"),
            );
        }
    };
    let check_value = |line: u64, v: f64, diags: &mut Vec<Diagnostic>| {
        if !(v >= kind.min && v <= kind.max) {
            diags.push(
                at(
                    line,
                    format!(
                        "value {v} is outside the plausible range {} to {} of this table",
                        kind.min, kind.max
                    ),
                )
                .help(kind.unit_help),
            );
        }
    };
    if one_d {
        if header.len() != 2 {
            diags.push(
                at(
                    hline,
                    format!(
                        "a factor table has 2 columns, the header has {}",
                        header.len()
                    ),
                )
                .help("write `field_cm,<factor>`"),
            );
            return Err(diags);
        }
        let mut axis = Vec::new();
        let mut values = Vec::new();
        for (line, r) in &rows[1..] {
            match (
                r.len(),
                r.first().and_then(|s| num(s)),
                r.get(1).and_then(|s| num(s)),
            ) {
                (2, Some(x), Some(v)) => {
                    check_value(*line, v, &mut diags);
                    axis.push((*line, x));
                    values.push(v);
                }
                _ => diags.push(
                    at(
                        *line,
                        format!("expected two numbers, found `{}`", r.join(",")),
                    )
                    .help("write `field side in cm,factor`; no gaps"),
                ),
            }
        }
        check_axis(&axis, "field-size", &mut diags);
        if diags.is_empty() {
            return Ok(Loaded::One(Table1 {
                axis: axis.into_iter().map(|a| a.1).collect(),
                values,
            }));
        }
        return Err(diags);
    }
    let mut columns = Vec::new();
    for c in &header[1..] {
        match num(c) {
            Some(v) => columns.push((hline, v)),
            None => diags.push(
                at(hline, format!("column heading `{c}` is not a number (cm)"))
                    .help("the header holds the column axis values in cm"),
            ),
        }
    }
    check_axis(&columns, "column", &mut diags);
    let mut depths = Vec::new();
    let mut values = Vec::new();
    for (line, r) in &rows[1..] {
        if r.len() != header.len() {
            diags.push(
                at(
                    *line,
                    format!("row has {} cells, the header has {}", r.len(), header.len()),
                )
                .help("every row holds the depth then one value per column; no gaps"),
            );
            continue;
        }
        match num(&r[0]) {
            Some(dep) => depths.push((*line, dep)),
            None => {
                diags.push(
                    at(*line, format!("depth `{}` is not a number (cm)", r[0]))
                        .help("the first cell of each row is the depth in cm"),
                );
                continue;
            }
        }
        for c in &r[1..] {
            match num(c) {
                Some(v) => {
                    check_value(*line, v, &mut diags);
                    values.push(v);
                }
                None => {
                    diags.push(
                        at(*line, format!("cell `{c}` is not a number"))
                            .help("fill every cell; the tables have no gaps"),
                    );
                    values.push(f64::NAN);
                }
            }
        }
    }
    check_axis(&depths, "depth", &mut diags);
    if diags.is_empty() {
        Ok(Loaded::Two(Table2 {
            depth_cm: depths.into_iter().map(|a| a.1).collect(),
            columns: columns.into_iter().map(|a| a.1).collect(),
            values,
        }))
    } else {
        Err(diags)
    }
}

/// Sp = Scp / Sc at the Scp table's field sides, Sc interpolated linearly; an Scp field size
/// outside the Sc table is an error.
fn sp_from_scp(scp: &Table1, sc: &Table1) -> Result<Table1, String> {
    let mut values = Vec::new();
    for (&x, &v) in scp.axis.iter().zip(&scp.values) {
        let (lo, hi) = (sc.axis[0], sc.axis[sc.axis.len() - 1]);
        if !(x >= lo && x <= hi) {
            return Err(format!(
                "Scp field size {x} cm is outside the Sc table ({lo} to {hi} cm)"
            ));
        }
        let j = sc
            .axis
            .partition_point(|&a| a <= x)
            .clamp(1, sc.axis.len() - 1);
        let t = (x - sc.axis[j - 1]) / (sc.axis[j] - sc.axis[j - 1]);
        let s = sc.values[j - 1] + t * (sc.values[j] - sc.values[j - 1]);
        values.push(v / s);
    }
    Ok(Table1 {
        axis: scp.axis.clone(),
        values,
    })
}
