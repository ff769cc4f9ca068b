//! SHA-256 checksums and the run manifest (`manifest.sha256`, in the two-space format that
//! `sha256sum -c` also reads), and its verification.

use std::path::{Path, PathBuf};

use sha2::{Digest, Sha256};

/// Name of the manifest file inside a run folder.
pub const MANIFEST: &str = "manifest.sha256";

/// Lower-case hex SHA-256 of `bytes`.
pub fn sha256_hex(bytes: &[u8]) -> String {
    Sha256::digest(bytes)
        .iter()
        .map(|b| format!("{b:02x}"))
        .collect()
}

/// Manifest text for (relative path, bytes) pairs, sorted by path, `/` as separator.
pub fn manifest_text(entries: &[(String, &[u8])]) -> String {
    let mut lines: Vec<(String, String)> = entries
        .iter()
        .map(|(p, b)| (p.clone(), sha256_hex(b)))
        .collect();
    lines.sort();
    lines.iter().map(|(p, h)| format!("{h}  {p}\n")).collect()
}

/// One problem found by [`verify_run`].
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Finding {
    /// The file's checksum differs from the manifest.
    Changed(String),
    /// A file the manifest lists is missing.
    Missing(String),
    /// A file the manifest lists is a symbolic link or a special file: what it is.
    NotRegular(String, String),
    /// A manifest line cannot be read.
    BadLine(usize, String),
}

impl std::fmt::Display for Finding {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Finding::Changed(p) => write!(f, "changed: {p}"),
            Finding::Missing(p) => write!(f, "missing: {p}"),
            Finding::NotRegular(p, what) => write!(f, "not a regular file: {p} ({what})"),
            Finding::BadLine(n, l) => write!(
                f,
                "manifest line {n} is malformed: {}",
                crate::signing::printable(l)
            ),
        }
    }
}

/// Outcome of verifying a run folder, with every regular file's bytes as read for it (once):
/// whatever a caller does next with the folder (sign, archive, compare) uses these bytes.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Verification {
    /// Files whose checksum matched.
    pub ok: Vec<String>,
    pub findings: Vec<Finding>,
    /// Entries present in the folder but not covered by the manifest (for example signatures),
    /// links and special files included.
    pub uncovered: Vec<String>,
    /// The manifest's bytes.
    pub manifest: Vec<u8>,
    /// Every regular file of the folder by its `/`-separated path, as read.
    pub files: std::collections::BTreeMap<String, Vec<u8>>,
}

impl Verification {
    /// Whether every listed file matches and nothing but signatures lies outside the manifest.
    pub fn is_intact(&self) -> bool {
        self.findings.is_empty() && self.planted().next().is_none()
    }

    /// Entries outside the manifest other than signature files (`signatures/*.sig`, regular
    /// files): planted files, links, anything else put under `signatures/`.
    pub fn planted(&self) -> impl Iterator<Item = &String> {
        let sig_prefix = format!("{}/", crate::signing::SIGNATURES_DIR);
        self.uncovered.iter().filter(move |u| {
            !(u.starts_with(&sig_prefix) && u.ends_with(".sig") && self.files.contains_key(*u))
        })
    }

    /// The signature files (`signatures/*.sig`) with their bytes.
    pub fn signatures(&self) -> Vec<(&str, &[u8])> {
        let sig_prefix = format!("{}/", crate::signing::SIGNATURES_DIR);
        self.files
            .iter()
            .filter(|(p, _)| p.starts_with(&sig_prefix) && p.ends_with(".sig"))
            .map(|(p, b)| (p.as_str(), b.as_slice()))
            .collect()
    }
}

/// The manifest's entries (path to lower-case SHA-256); an error names the first malformed
/// line.
pub fn parse_manifest(bytes: &[u8]) -> Result<std::collections::BTreeMap<String, String>, String> {
    let text =
        std::str::from_utf8(bytes).map_err(|_| "the manifest is not UTF-8 text".to_string())?;
    let mut out = std::collections::BTreeMap::new();
    for (i, line) in text.lines().enumerate() {
        let (hash, rel) =
            manifest_line(line).ok_or_else(|| format!("manifest line {} is malformed", i + 1))?;
        out.insert(rel.to_string(), hash);
    }
    Ok(out)
}

/// One manifest line, `SHA256  PATH`: the checksum in lower case and a path that stays inside
/// the run folder; `None` for anything else.
fn manifest_line(line: &str) -> Option<(String, &str)> {
    let (hash, rel) = line.split_once("  ")?;
    (hash.len() == 64 && hash.chars().all(|c| c.is_ascii_hexdigit()) && safe_relative(rel))
        .then(|| (hash.to_ascii_lowercase(), rel))
}

/// Largest single file of a run folder read for verification (4 GiB).
pub const MAX_RUN_FILE_BYTES: u64 = 4 << 30;

/// Read every file of a run folder once and check the manifest against those bytes. Errors
/// only when the manifest itself is unreadable.
pub fn verify_run(dir: &Path) -> Result<Verification, String> {
    let mut files = std::collections::BTreeMap::new();
    let mut special = std::collections::BTreeMap::new();
    for entry in walkdir::WalkDir::new(dir).sort_by_file_name() {
        let entry = entry.map_err(|e| format!("cannot read {}: {e}", dir.display()))?;
        let kind = entry.file_type();
        if kind.is_dir() {
            continue;
        }
        let rel = relative_slash(dir, entry.path());
        if kind.is_symlink() {
            special.insert(rel, "a symbolic link".to_string());
            continue;
        }
        match crate::input_store::read_regular(entry.path(), MAX_RUN_FILE_BYTES) {
            Ok(bytes) => {
                files.insert(rel, bytes);
            }
            Err(e) => {
                special.insert(rel, e.to_string());
            }
        }
    }
    let manifest_path = dir.join(MANIFEST);
    let manifest = files.get(MANIFEST).cloned().ok_or_else(|| {
        format!(
            "cannot read {}: {}",
            manifest_path.display(),
            special
                .get(MANIFEST)
                .map_or("it does not exist", String::as_str)
        )
    })?;
    let text = String::from_utf8_lossy(&manifest).into_owned();
    let mut v = Verification {
        ok: Vec::new(),
        findings: Vec::new(),
        uncovered: Vec::new(),
        manifest,
        files: std::collections::BTreeMap::new(),
    };
    let mut listed = std::collections::BTreeSet::new();
    for (i, line) in text.lines().enumerate() {
        let Some((hash, rel)) = manifest_line(line) else {
            v.findings.push(Finding::BadLine(i + 1, line.to_string()));
            continue;
        };
        listed.insert(rel.to_string());
        match (files.get(rel), special.get(rel)) {
            (Some(bytes), _) if sha256_hex(bytes) == hash => v.ok.push(rel.to_string()),
            (Some(_), _) => v.findings.push(Finding::Changed(rel.to_string())),
            (None, Some(what)) => v
                .findings
                .push(Finding::NotRegular(rel.to_string(), what.clone())),
            (None, None) => v.findings.push(Finding::Missing(rel.to_string())),
        }
    }
    v.uncovered = files
        .keys()
        .chain(special.keys())
        .filter(|r| r.as_str() != MANIFEST && !listed.contains(*r))
        .cloned()
        .collect();
    v.uncovered.sort();
    v.files = files;
    Ok(v)
}

/// A manifest path must stay inside the run folder.
fn safe_relative(rel: &str) -> bool {
    !rel.is_empty() && !rel.starts_with('/') && !rel.split('/').any(|c| c == ".." || c.is_empty())
}

/// `path` relative to `base` with `/` separators.
pub fn relative_slash(base: &Path, path: &Path) -> String {
    let rel: PathBuf = path.strip_prefix(base).unwrap_or(path).to_path_buf();
    rel.components()
        .map(|c| c.as_os_str().to_string_lossy().into_owned())
        .collect::<Vec<_>>()
        .join("/")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sha256_matches_the_fips_test_vector() {
        // FIPS 180-2, Appendix B.1: SHA-256("abc").
        assert_eq!(
            sha256_hex(b"abc"),
            "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
        );
    }

    #[test]
    fn manifest_is_sorted_and_in_sha256sum_format() {
        let text = manifest_text(&[("b.txt".into(), b"abc"), ("a.txt".into(), b"")]);
        // SHA-256 of the empty string: FIPS 180-2 / NIST example values.
        assert_eq!(
            text,
            "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855  a.txt\nba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad  b.txt\n"
        );
    }

    #[test]
    fn manifest_paths_cannot_escape() {
        assert!(safe_relative("inputs/data/a.csv"));
        assert!(!safe_relative("../x"));
        assert!(!safe_relative("/etc/passwd"));
    }
}
