//! Diagnostics: problems found in user input, each tied to a file and (when known) a line and
//! column, with a help line saying what to do. Many are collected and reported at once.

use std::fmt::Write as _;
use std::path::{Path, PathBuf};

/// One problem in user input.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Diagnostic {
    pub file: PathBuf,
    /// 1-based line; 0 when the problem concerns the file as a whole.
    pub line: usize,
    /// 1-based column; 0 when unknown.
    pub column: usize,
    pub message: String,
    pub help: Option<String>,
}

impl Diagnostic {
    /// A problem at a position in `file`.
    pub fn at(file: &Path, line: usize, column: usize, message: impl Into<String>) -> Self {
        Diagnostic {
            file: file.to_path_buf(),
            line,
            column,
            message: message.into(),
            help: None,
        }
    }

    /// A problem concerning a whole file.
    pub fn file(file: &Path, message: impl Into<String>) -> Self {
        Diagnostic::at(file, 0, 0, message)
    }

    /// Add the line that tells the user what to do.
    pub fn help(mut self, help: impl Into<String>) -> Self {
        self.help = Some(help.into());
        self
    }

    /// `file:line:col` (or just the file).
    pub fn location(&self) -> String {
        match (self.line, self.column) {
            (0, _) => self.file.display().to_string(),
            (l, 0) => format!("{}:{l}", self.file.display()),
            (l, c) => format!("{}:{l}:{c}", self.file.display()),
        }
    }

    /// Render like a compiler message: `error:` line, location pointer, the source line with a
    /// caret when the source text is given, and the help line.
    pub fn render(&self, source: Option<&str>) -> String {
        let mut out = format!("error: {}\n  --> {}\n", self.message, self.location());
        let mut gutter = 1;
        if let Some(text) = source.and_then(|s| s.lines().nth(self.line.checked_sub(1)?)) {
            let num = self.line.to_string();
            gutter = num.len();
            let pad = " ".repeat(gutter);
            let _ = write!(out, "{pad} |\n{num} | {text}\n", text = text.trim_end());
            if self.column > 0 {
                let _ = writeln!(out, "{pad} | {}^", " ".repeat(self.column - 1));
            }
        }
        if let Some(h) = &self.help {
            let _ = writeln!(out, "{} = help: {h}", " ".repeat(gutter));
        }
        out
    }
}

/// Render every diagnostic, reading each file's text once to show the offending line.
pub fn render_all(diags: &[Diagnostic]) -> String {
    let mut cache: Vec<(PathBuf, Option<String>)> = Vec::new();
    let mut out = String::new();
    for d in diags {
        if !cache.iter().any(|(p, _)| p == &d.file) {
            cache.push((d.file.clone(), std::fs::read_to_string(&d.file).ok()));
        }
        let text = cache
            .iter()
            .find(|(p, _)| p == &d.file)
            .and_then(|(_, t)| t.as_deref());
        out.push_str(&d.render(if d.line > 0 { text } else { None }));
        out.push('\n');
    }
    let n = diags.len();
    let _ = write!(
        out,
        "{n} problem{} found; nothing was run",
        if n == 1 { "" } else { "s" }
    );
    out
}

/// The nearest candidate to `word` by edit distance, when it is close enough to be a likely typo.
pub fn nearest<'a>(word: &str, candidates: impl IntoIterator<Item = &'a str>) -> Option<&'a str> {
    let candidates: Vec<&str> = candidates.into_iter().collect();
    candidates
        .iter()
        .map(|&c| (strsim::damerau_levenshtein(word, c), c))
        .filter(|&(d, c)| d <= (c.len().max(word.len()) / 3).max(1))
        .min()
        .map(|(_, c)| c)
        .or_else(|| {
            // A word that is a whole-part prefix of exactly one candidate, or the other way
            // round (`dose-difference` for `dose-difference-percent`).
            let part_prefix = |short: &str, long: &str| {
                short.len() >= 3
                    && long.len() > short.len()
                    && long.starts_with(short)
                    && long[short.len()..].starts_with('-')
            };
            let hits: Vec<&str> = candidates
                .iter()
                .copied()
                .filter(|c| part_prefix(word, c) || part_prefix(c, word))
                .collect();
            (hits.len() == 1).then(|| hits[0])
        })
}

/// Help text for an unknown word: the nearest candidate when one is close, else `otherwise()`.
pub fn did_you_mean<'a>(
    word: &str,
    candidates: impl IntoIterator<Item = &'a str>,
    otherwise: impl FnOnce() -> String,
) -> String {
    match nearest(word, candidates) {
        Some(n) => format!("did you mean `{n}`?"),
        None => otherwise(),
    }
}

/// An error and all its sources, joined with `: ` (libraries often hide the cause in `source()`).
pub fn error_chain(e: &dyn std::error::Error) -> String {
    let mut s = e.to_string();
    let mut cur = e.source();
    while let Some(c) = cur {
        s.push_str(": ");
        s.push_str(&c.to_string());
        cur = c.source();
    }
    s
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn suggests_close_keys_only() {
        let keys = ["title", "institution", "machines", "sites"];
        assert_eq!(nearest("titel", keys), Some("title"));
        assert_eq!(nearest("machine", keys), Some("machines"));
        assert_eq!(nearest("zzz", keys), None);
        // A key written without its last part, or with an extra one (common practice, no
        // source): suggested when exactly one candidate fits.
        let criteria = ["description", "dose-difference-percent", "gamma", "metrics"];
        assert_eq!(
            nearest("dose-difference", criteria),
            Some("dose-difference-percent")
        );
        assert_eq!(nearest("gamma-criteria", criteria), Some("gamma"));
        assert_eq!(
            nearest("penumbra", ["penumbra-left-mm", "penumbra-right-mm"]),
            None,
            "two candidates fit: no guess"
        );
    }

    #[test]
    fn renders_source_line_and_caret() {
        let d = Diagnostic::at(Path::new("c.yaml"), 2, 3, "unknown key `titel`")
            .help("did you mean `title`?");
        let got = d.render(Some("a: 1\n  titel: x\n"));
        assert_eq!(
            got,
            "error: unknown key `titel`\n  --> c.yaml:2:3\n  |\n2 |   titel: x\n  |   ^\n  = help: did you mean `title`?\n"
        );
    }
}
