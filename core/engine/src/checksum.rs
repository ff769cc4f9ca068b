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
    /// A manifest line cannot be read.
    BadLine(usize, String),
}

impl std::fmt::Display for Finding {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Finding::Changed(p) => write!(f, "changed: {p}"),
            Finding::Missing(p) => write!(f, "missing: {p}"),
            Finding::BadLine(n, l) => write!(f, "manifest line {n} is malformed: {l}"),
        }
    }
}

/// Outcome of verifying a run folder.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Verification {
    /// Files whose checksum matched.
    pub ok: Vec<String>,
    pub findings: Vec<Finding>,
    /// Files present in the folder but not covered by the manifest (for example signatures).
    pub uncovered: Vec<String>,
}

/// The manifest's entries (path to SHA-256); an error names the first malformed line.
pub fn parse_manifest(bytes: &[u8]) -> Result<std::collections::BTreeMap<String, String>, String> {
    let text =
        std::str::from_utf8(bytes).map_err(|_| "the manifest is not UTF-8 text".to_string())?;
    let mut out = std::collections::BTreeMap::new();
    for (i, line) in text.lines().enumerate() {
        match line.split_once("  ") {
            Some((hash, rel))
                if hash.len() == 64
                    && hash.chars().all(|c| c.is_ascii_hexdigit())
                    && safe_relative(rel) =>
            {
                out.insert(rel.to_string(), hash.to_ascii_lowercase());
            }
            _ => return Err(format!("manifest line {} is malformed", i + 1)),
        }
    }
    Ok(out)
}

/// Read and parse the manifest of run folder `dir`.
pub fn read_manifest(dir: &Path) -> Result<std::collections::BTreeMap<String, String>, String> {
    let path = dir.join(MANIFEST);
    let bytes =
        crate::input_store::read_regular(&path, crate::input_store::DEFAULT_MAX_INPUT_BYTES)
            .map_err(|e| format!("cannot read {}: {e}", path.display()))?;
    parse_manifest(&bytes)
}

/// Re-hash every file the manifest lists. Errors only when the manifest itself is unreadable.
pub fn verify_run(dir: &Path) -> Result<Verification, String> {
    let manifest_path = dir.join(MANIFEST);
    let text = std::fs::read_to_string(&manifest_path)
        .map_err(|e| format!("cannot read {}: {e}", manifest_path.display()))?;
    let mut v = Verification {
        ok: Vec::new(),
        findings: Vec::new(),
        uncovered: Vec::new(),
    };
    let mut listed = Vec::new();
    for (i, line) in text.lines().enumerate() {
        let Some((hash, rel)) = line.split_once("  ") else {
            v.findings.push(Finding::BadLine(i + 1, line.to_string()));
            continue;
        };
        if hash.len() != 64 || !hash.chars().all(|c| c.is_ascii_hexdigit()) || !safe_relative(rel) {
            v.findings.push(Finding::BadLine(i + 1, line.to_string()));
            continue;
        }
        listed.push(rel.to_string());
        match std::fs::read(dir.join(rel)) {
            Ok(bytes) if sha256_hex(&bytes) == hash => v.ok.push(rel.to_string()),
            Ok(_) => v.findings.push(Finding::Changed(rel.to_string())),
            Err(_) => v.findings.push(Finding::Missing(rel.to_string())),
        }
    }
    for entry in walkdir::WalkDir::new(dir)
        .sort_by_file_name()
        .into_iter()
        .filter_map(Result::ok)
    {
        if !entry.file_type().is_file() {
            continue;
        }
        let rel = relative_slash(dir, entry.path());
        if rel != MANIFEST && !listed.contains(&rel) {
            v.uncovered.push(rel);
        }
    }
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
