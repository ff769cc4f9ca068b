//! beamproof-report: turns a run's `results.json` into the commissioning report PDF. A
//! handlebars template (built in, or from a campaign's template folder) renders typst source
//! with every value escaped for typst markup; typst compiles it in-process with bundled fonts.
//! The output depends only on the results and the template: same input, same PDF bytes.

mod plot;
mod typeset;
mod view;

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

/// The template text and the name errors refer to.
fn template(dir: Option<&Path>) -> Result<(String, String), ReportError> {
    match dir {
        None => Ok((
            BUILT_IN_TEMPLATE.to_string(),
            format!("templates/{TEMPLATE_FILE} (built in)"),
        )),
        Some(d) => {
            let path = d.join(TEMPLATE_FILE);
            let text = std::fs::read_to_string(&path).map_err(|e| ReportError::TemplateRead {
                path: path.clone(),
                message: e.to_string(),
            })?;
            Ok((text, path.display().to_string()))
        }
    }
}

/// The report's data and the SVG of each figure.
fn prepare(results_json: &[u8]) -> Result<(view::View, Vec<String>), ReportError> {
    let results: view::Results =
        serde_json::from_slice(results_json).map_err(|e| ReportError::Results(e.to_string()))?;
    Ok(view::View::from_results(results))
}

fn render_view(data: &view::View, templates: Option<&Path>) -> Result<String, ReportError> {
    let (text, name) = template(templates)?;
    let mut hb = handlebars::Handlebars::new();
    hb.set_strict_mode(true);
    hb.register_escape_fn(escape_markup);
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
pub fn render_source(results_json: &[u8], templates: Option<&Path>) -> Result<String, ReportError> {
    render_view(&prepare(results_json)?.0, templates)
}

/// Render the report PDF for a run. Figures are drawn to SVG and offered to typst as the
/// files `/fig/<n>.svg`.
pub fn render_pdf(results_json: &[u8], templates: Option<&Path>) -> Result<Vec<u8>, ReportError> {
    let (data, svgs) = prepare(results_json)?;
    let source = render_view(&data, templates)?;
    let files: Vec<(String, Vec<u8>)> = svgs
        .into_iter()
        .enumerate()
        .map(|(n, svg)| (format!("fig/{n}.svg"), svg.into_bytes()))
        .collect();
    let results: serde_json::Value =
        serde_json::from_slice(results_json).map_err(|e| ReportError::Results(e.to_string()))?;
    let date = results["run"]["date"]
        .as_str()
        .unwrap_or_default()
        .to_string();
    let ymd = parse_date(&date).ok_or(ReportError::Date(date))?;
    let ident = format!(
        "beamproof:{}:{}",
        results["campaign"]["sha256"].as_str().unwrap_or_default(),
        results["machine"]["id"].as_str().unwrap_or_default()
    );
    let template_name = template(templates)?.1;
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
