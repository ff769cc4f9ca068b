//! beamproof-report: turns a run's `results.json` into the commissioning report PDF. A
//! handlebars template (built in, or from a campaign's template folder) renders typst source
//! with every value escaped for typst markup; typst compiles it in-process with bundled fonts.
//! The output depends only on the results and the template: same input, same PDF bytes.

mod plot;
mod typeset;
mod view;

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

pub use view::fixed;

/// File name of the main template inside a template folder.
pub const TEMPLATE_FILE: &str = "report.typ.hbs";
/// The built-in template, from the repository's `templates/` folder.
pub const BUILT_IN_TEMPLATE: &str = include_str!("../../../templates/report.typ.hbs");

/// Why a report could not be made.
#[derive(Debug, thiserror::Error)]
pub enum ReportError {
    #[error("results are not readable by the report: {0}")]
    Results(String),
    #[error("cannot read template {path}: {message}")]
    TemplateRead { path: PathBuf, message: String },
    #[error("template {path}:{line}:{column}: {message}")]
    Template {
        path: String,
        line: usize,
        column: usize,
        message: String,
    },
    #[error(
        "typeset error in the source generated from template {template}, line {line}: {message} (in `{source_line}`)"
    )]
    Typeset {
        template: String,
        line: usize,
        message: String,
        source_line: String,
    },
    #[error("invalid run date `{0}`: expected YYYY-MM-DD")]
    Date(String),
}

/// Escape text for typst markup: every ASCII punctuation character gets a backslash, so no
/// user text can start markup or code (`\` followed by any character is that character).
pub fn escape_markup(s: &str) -> String {
    let mut out = String::with_capacity(s.len() * 2);
    for c in s.chars() {
        if c.is_ascii_punctuation() {
            out.push('\\');
        }
        if c == '\n' || c == '\r' {
            out.push(' ');
        } else {
            out.push(c);
        }
    }
    out
}

/// File name of the HTML summary template inside a template folder (optional there).
pub const SUMMARY_FILE: &str = "summary.html.hbs";
/// The built-in HTML summary template.
pub const BUILT_IN_SUMMARY: &str = include_str!("../../../templates/summary.html.hbs");

/// A campaign's report template folder as the engine read it, once: the path of each file
/// inside the folder and its bytes. The report never reads template files from disk, so the
/// report is made from exactly the bytes the run checksummed.
#[derive(Debug, Clone, Copy)]
pub struct TemplateFolder<'a> {
    /// How messages name the folder (for example its path on disk).
    pub name: &'a str,
    pub files: &'a BTreeMap<String, &'a [u8]>,
}

/// The template text and the name errors refer to: the folder's own file, else the built-in
/// one (the report template is required in a folder; the HTML summary template is optional).
fn template(
    dir: Option<TemplateFolder<'_>>,
    file: &str,
    built_in: &str,
    required: bool,
) -> Result<(String, String), ReportError> {
    let built = || (built_in.to_string(), format!("templates/{file} (built in)"));
    match dir {
        None => Ok(built()),
        Some(d) => {
            let path = Path::new(d.name).join(file);
            let Some(bytes) = d.files.get(file) else {
                if !required {
                    return Ok(built());
                }
                return Err(ReportError::TemplateRead {
                    path,
                    message: "the folder has no such file".into(),
                });
            };
            let text =
                String::from_utf8(bytes.to_vec()).map_err(|e| ReportError::TemplateRead {
                    path: path.clone(),
                    message: format!("not UTF-8 text: {e}"),
                })?;
            Ok((text, path.display().to_string()))
        }
    }
}

fn report_template(dir: Option<TemplateFolder<'_>>) -> Result<(String, String), ReportError> {
    template(dir, TEMPLATE_FILE, BUILT_IN_TEMPLATE, true)
}

/// The report's data and the SVG of each figure.
fn prepare(results_json: &[u8]) -> Result<(view::View, Vec<String>), ReportError> {
    let results: view::Results =
        serde_json::from_slice(results_json).map_err(|e| ReportError::Results(e.to_string()))?;
    Ok(view::View::from_results(results, sha256_hex(results_json)))
}

fn render_view(
    data: &view::View,
    (text, name): (String, String),
    escape: fn(&str) -> String,
) -> Result<String, ReportError> {
    let mut hb = handlebars::Handlebars::new();
    hb.set_strict_mode(true);
    hb.register_escape_fn(escape);
    hb.register_template_string("report", &text).map_err(|e| {
        let (line, column) = e.pos().unwrap_or((0, 0));
        ReportError::Template {
            path: name.clone(),
            line,
            column,
            message: e.reason().to_string(),
        }
    })?;
    hb.render("report", data)
        .map_err(|e| ReportError::Template {
            path: name.clone(),
            line: e.line_no.unwrap_or(0),
            column: e.column_no.unwrap_or(0),
            message: e.reason().to_string(),
        })
}

/// Render the typst source for a run (exposed for tests and for template authors).
pub fn render_source(
    results_json: &[u8],
    templates: Option<TemplateFolder<'_>>,
) -> Result<String, ReportError> {
    render_view(
        &prepare(results_json)?.0,
        report_template(templates)?,
        escape_markup,
    )
}

/// Render the self-contained HTML summary of a run (same data as the PDF, HTML-escaped,
/// figures as inline SVG).
pub fn render_html(
    results_json: &[u8],
    templates: Option<TemplateFolder<'_>>,
) -> Result<String, ReportError> {
    render_view(
        &prepare(results_json)?.0,
        template(templates, SUMMARY_FILE, BUILT_IN_SUMMARY, false)?,
        handlebars::html_escape,
    )
}

/// Render the report PDF for a run. Figures are drawn to SVG and offered to typst as the
/// files `/fig/<n>.svg`.
pub fn render_pdf(
    results_json: &[u8],
    templates: Option<TemplateFolder<'_>>,
) -> Result<Vec<u8>, ReportError> {
    let (data, svgs) = prepare(results_json)?;
    let template = report_template(templates)?;
    let template_name = template.1.clone();
    let source = render_view(&data, template, escape_markup)?;
    let mut files: Vec<(String, Vec<u8>)> = match templates {
        Some(dir) => dir
            .files
            .iter()
            .map(|(name, bytes)| (name.clone(), bytes.to_vec()))
            .collect(),
        None => Vec::new(),
    };
    files.extend(
        svgs.into_iter()
            .enumerate()
            .map(|(n, svg)| (format!("fig/{n}.svg"), svg.into_bytes())),
    );
    // The PDF's metadata from the view the results were already read into.
    let ymd = parse_date(&data.run_date).ok_or_else(|| ReportError::Date(data.run_date.clone()))?;
    let ident = format!("beamproof:{}:{}", data.campaign_sha256, data.machine_id);
    typeset::compile_pdf(source, ymd, &ident, files).map_err(|problems| {
        let p = problems
            .into_iter()
            .next()
            .unwrap_or(typeset::TypstProblem {
                line: 0,
                message: "unknown error".into(),
                source_line: String::new(),
            });
        ReportError::Typeset {
            template: template_name,
            line: p.line,
            message: p.message,
            source_line: p.source_line.trim().to_string(),
        }
    })
}

/// Lower-case hex SHA-256.
pub fn sha256_hex(bytes: &[u8]) -> String {
    use sha2::Digest;
    sha2::Sha256::digest(bytes)
        .iter()
        .map(|b| format!("{b:02x}"))
        .collect()
}

fn parse_date(s: &str) -> Option<(i32, u8, u8)> {
    let mut it = s.split('-');
    let y = it.next()?.parse().ok()?;
    let m = it.next()?.parse().ok()?;
    let d = it.next()?.parse().ok()?;
    it.next().is_none().then_some((y, m, d))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn markup_escape_neutralises_typst_syntax() {
        // Every ASCII punctuation mark is escaped (typst markup reference: `\` escapes).
        assert_eq!(
            escape_markup("#panic(\"x\") *b* $m$"),
            "\\#panic\\(\\\"x\\\"\\) \\*b\\* \\$m\\$"
        );
        assert_eq!(escape_markup("a\nb"), "a b");
    }
}
