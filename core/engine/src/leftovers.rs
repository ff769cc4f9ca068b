//! Left-overs of interrupted writes: a run folder is assembled in `.NAME.partial-PID` beside
//! its target, an archive writes `.SHA.tmp-PID` objects and `ledger.tmp-PID` files, each
//! renamed into place when complete. A process killed half-way leaves them behind; the next
//! run or archive add removes those whose process no longer runs (a live process's are left
//! alone: it may still be writing).

use std::path::{Path, PathBuf};

/// Whether process `pid` may still run. Linux answers through `/proc`; elsewhere every process
/// is taken as running, so nothing is removed.
fn may_run(pid: u32) -> bool {
    if pid == std::process::id() {
        return true;
    }
    let proc_root = Path::new("/proc");
    if cfg!(target_os = "linux") && proc_root.join("self").exists() {
        proc_root.join(pid.to_string()).exists()
    } else {
        true
    }
}

/// The PID in a left-over's name: `.NAME.partial-PID`, `.NAME.tmp-PID` or `NAME.tmp-PID`.
pub fn leftover_pid(name: &str) -> Option<u32> {
    let (head, pid) = name.rsplit_once('-')?;
    let pid: u32 = pid.parse().ok()?;
    let partial = head.starts_with('.') && head.ends_with(".partial");
    let tmp = head.ends_with(".tmp");
    (partial || tmp).then_some(pid)
}

/// Remove the left-overs directly inside `dir` whose process no longer runs; returns what was
/// removed, and what could not be (with why).
pub fn sweep(dir: &Path) -> (Vec<PathBuf>, Vec<(PathBuf, String)>) {
    let mut removed = Vec::new();
    let mut failed = Vec::new();
    let Ok(entries) = std::fs::read_dir(dir) else {
        return (removed, failed);
    };
    let mut paths: Vec<PathBuf> = entries.filter_map(|e| e.ok().map(|e| e.path())).collect();
    paths.sort();
    for p in paths {
        let Some(pid) = p
            .file_name()
            .and_then(|n| n.to_str())
            .and_then(leftover_pid)
        else {
            continue;
        };
        if may_run(pid) {
            continue;
        }
        let meta = std::fs::symlink_metadata(&p);
        let result = match meta {
            Ok(m) if m.is_dir() => std::fs::remove_dir_all(&p),
            Ok(_) => std::fs::remove_file(&p),
            Err(e) => Err(e),
        };
        match result {
            Ok(()) => removed.push(p),
            Err(e) => failed.push((p, e.to_string())),
        }
    }
    (removed, failed)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn only_names_of_the_write_patterns_are_left_overs() {
        assert_eq!(leftover_pid(".run.partial-123"), Some(123));
        assert_eq!(
            leftover_pid(".ab12cd.tmp-77"),
            Some(77),
            "an archive object's temporary"
        );
        assert_eq!(leftover_pid("ledger.tmp-9"), Some(9));
        assert_eq!(leftover_pid("run.partial-123"), None, "not hidden");
        assert_eq!(leftover_pid(".run.partial-x"), None);
        assert_eq!(leftover_pid("results.json"), None);
        assert_eq!(leftover_pid("demo-6x-lin-a-2026-11-20"), None);
    }

    #[cfg(target_os = "linux")]
    #[test]
    fn a_dead_process_left_over_is_removed_a_live_one_kept() {
        let dir = std::env::temp_dir().join(format!("beamproof-leftovers-{}", std::process::id()));
        let _ = std::fs::remove_dir_all(&dir);
        std::fs::create_dir_all(&dir).expect("dir");
        // PIDs never exceed 4194304 on Linux (PID_MAX_LIMIT), so this process cannot run.
        let dead = dir.join(".run.partial-4194305");
        std::fs::create_dir_all(dead.join("inputs")).expect("dead");
        let live = dir.join(format!(".other.partial-{}", std::process::id()));
        std::fs::create_dir_all(&live).expect("live");
        let keep = dir.join("run");
        std::fs::create_dir_all(&keep).expect("keep");
        let (removed, failed) = sweep(&dir);
        assert_eq!(removed, vec![dead.clone()]);
        assert!(failed.is_empty());
        assert!(!dead.exists() && live.exists() && keep.exists());
        let _ = std::fs::remove_dir_all(&dir);
    }
}
