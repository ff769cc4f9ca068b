//! Helpers shared by the integration tests: paths, scratch folders and running the CLI
//! in-process with captured output.

use std::ffi::OsString;
use std::path::{Path, PathBuf};

/// Repository root.
pub fn root() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .parent()
        .map(Path::to_path_buf)
        .unwrap_or_default()
}

/// A fresh, empty folder for one test under `target/test-scratch/`.
pub fn scratch(name: &str) -> PathBuf {
    let dir = root().join("target").join("test-scratch").join(name);
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).expect("create scratch folder");
    dir
}

/// Copy a folder tree.
pub fn copy_tree(from: &Path, to: &Path) {
    for entry in std::fs::read_dir(from).expect("read dir") {
        let entry = entry.expect("entry");
        let target = to.join(entry.file_name());
        if entry.file_type().expect("type").is_dir() {
            std::fs::create_dir_all(&target).expect("mkdir");
            copy_tree(&entry.path(), &target);
        } else {
            std::fs::copy(entry.path(), &target).expect("copy");
        }
    }
}

/// A copy of the demo campaign in a scratch folder; returns the campaign file's path.
pub fn demo_copy(name: &str) -> PathBuf {
    let dir = scratch(name);
    copy_tree(&root().join("demo-campaign"), &dir);
    dir.join("campaign.yaml")
}

/// The demo's data with the frozen campaign `tests/fixtures/error-campaign.yaml`, whose line
/// numbers the bad-input tests quote.
pub fn error_campaign_copy(name: &str) -> PathBuf {
    let campaign = demo_copy(name);
    std::fs::copy(root().join("tests/fixtures/error-campaign.yaml"), &campaign)
        .expect("copy fixture campaign");
    campaign
}

/// What one CLI invocation produced.
pub struct Outcome {
    pub code: u8,
    pub stdout: String,
    pub stderr: String,
}

/// Run `beamproof ARGS` in-process.
pub fn cli(args: &[&str]) -> Outcome {
    let mut out = Vec::new();
    let mut err = Vec::new();
    let argv: Vec<OsString> = std::iter::once("beamproof")
        .chain(args.iter().copied())
        .map(OsString::from)
        .collect();
    let code = {
        let mut io = beamproof_cli::Io {
            out: &mut out,
            err: &mut err,
            progress: false,
        };
        beamproof_cli::main_with(argv, &mut io)
    };
    Outcome {
        code,
        stdout: String::from_utf8_lossy(&out).into_owned(),
        stderr: String::from_utf8_lossy(&err).into_owned(),
    }
}

/// Replace a folder prefix in text, so messages can be compared whole.
pub fn relative(text: &str, dir: &Path) -> String {
    text.replace(&format!("{}/", dir.display()), "")
}

/// Run `beamproof run CAMPAIGN --machine MACHINE --out <campaign folder>/run`; returns the
/// run folder and what the command printed.
pub fn run_into_folder(campaign: &Path, machine: &str) -> (PathBuf, Outcome) {
    let out = campaign.with_file_name("run");
    let o = cli(&[
        "run",
        campaign.to_str().expect("utf8"),
        "--machine",
        machine,
        "--out",
        out.to_str().expect("utf8"),
    ]);
    (out, o)
}

/// The `results.json` of a run folder.
pub fn results(out: &Path) -> serde_json::Value {
    serde_json::from_slice(&std::fs::read(out.join("results.json")).expect("results.json"))
        .expect("json")
}

/// A path as the `&str` argument of a command line.
pub fn arg(p: &Path) -> &str {
    p.to_str().expect("utf-8 path")
}

/// `beamproof keygen` into `dir/file`; returns the key file.
pub fn keygen(dir: &Path, name: &str, role: &str, file: &str) -> PathBuf {
    let key = dir.join(file);
    let o = cli(&["keygen", "--name", name, "--role", role, "--out", arg(&key)]);
    assert_eq!(o.code, 0, "{}", o.stderr);
    key
}
