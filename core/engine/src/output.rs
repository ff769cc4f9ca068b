//! Writing a run folder: every file goes into a hidden temporary folder beside the target,
//! is flushed to disk, and the folder is renamed into place at the end. A failed run leaves no
//! partial folder, and an existing run folder is never overwritten.
//!
//! Layout: `inputs/` (the campaign file and every input at its campaign-relative path, so the
//! folder re-runs on its own), the products the caller passes (`results.json`, `report.pdf`,
//! `report.pdf.sha256`, `report.html`), and `manifest.sha256` over all of them.

use std::io::Write as _;
use std::path::{Path, PathBuf};

use crate::campaign::Campaign;
use crate::checksum::{MANIFEST, manifest_text};
use crate::prepare::Prepared;
use crate::run::INPUTS_DIR;

/// Why a run folder could not be written.
#[derive(Debug, thiserror::Error)]
pub enum OutputError {
    #[error("run folder {0} already exists; runs are never overwritten")]
    Exists(PathBuf),
    #[error("cannot write {path}: {source}")]
    Io {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error("input `{0}` has the same name as the campaign file")]
    NameClash(String),
}

fn io(path: &Path) -> impl FnOnce(std::io::Error) -> OutputError + '_ {
    move |source| OutputError::Io {
        path: path.to_path_buf(),
        source,
    }
}

/// Write the run folder `out` atomically.
pub fn write_run_folder(
    out: &Path,
    campaign: &Campaign,
    prepared: &Prepared,
    products: &[(&str, &[u8])],
) -> Result<(), OutputError> {
    if out.exists() {
        return Err(OutputError::Exists(out.to_path_buf()));
    }
    let campaign_name = campaign
        .path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| "campaign.yaml".into());
    if prepared.inputs.iter().any(|i| i.rel == campaign_name) {
        return Err(OutputError::NameClash(campaign_name));
    }
    let parent = out
        .parent()
        .filter(|p| !p.as_os_str().is_empty())
        .unwrap_or(Path::new("."));
    std::fs::create_dir_all(parent).map_err(io(parent))?;
    let name = out
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| "run".into());
    let tmp = parent.join(format!(".{name}.partial-{}", std::process::id()));
    if tmp.exists() {
        std::fs::remove_dir_all(&tmp).map_err(io(&tmp))?;
    }
    let result = fill(&tmp, &campaign_name, campaign, prepared, products).and_then(|()| {
        if out.exists() {
            return Err(OutputError::Exists(out.to_path_buf()));
        }
        std::fs::rename(&tmp, out).map_err(io(out))
    });
    if result.is_err() {
        let _ = std::fs::remove_dir_all(&tmp);
    }
    result
}

fn fill(
    tmp: &Path,
    campaign_name: &str,
    campaign: &Campaign,
    prepared: &Prepared,
    products: &[(&str, &[u8])],
) -> Result<(), OutputError> {
    let mut files: Vec<(String, &[u8])> =
        vec![(format!("{INPUTS_DIR}/{campaign_name}"), &campaign.bytes)];
    files.extend(
        prepared
            .inputs
            .iter()
            .map(|i| (format!("{INPUTS_DIR}/{}", i.rel), &*i.bytes)),
    );
    files.extend(
        products
            .iter()
            .map(|(name, bytes)| (name.to_string(), *bytes)),
    );
    for (rel, bytes) in &files {
        write_synced(&tmp.join(rel), bytes)?;
    }
    write_synced(&tmp.join(MANIFEST), manifest_text(&files).as_bytes())
}

/// Create parent folders, write and flush to disk.
fn write_synced(path: &Path, bytes: &[u8]) -> Result<(), OutputError> {
    if let Some(p) = path.parent() {
        std::fs::create_dir_all(p).map_err(io(p))?;
    }
    let mut f = std::fs::File::create_new(path).map_err(io(path))?;
    f.write_all(bytes).map_err(io(path))?;
    f.sync_all().map_err(io(path))
}
