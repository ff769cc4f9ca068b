//! The tamper-evident archive: add, list, show, export byte for byte, and detection of every
//! kind of tampering the auditor must see named (a flipped byte in a stored file, a deleted,
//! swapped or truncated ledger line, a replaced signature), plus bad input.

use std::path::{Path, PathBuf};

use crate::support::{Outcome, arg, cli, demo_copy, keygen, run_into_folder, scratch};

/// Three runs archived in order: lin-a, lin-b, then lin-b again with a signature.
fn archive_of_three(name: &str) -> (PathBuf, Vec<PathBuf>) {
    let (a, _) = run_into_folder(&demo_copy(&format!("{name}-a")), "lin-a");
    let (b, _) = run_into_folder(&demo_copy(&format!("{name}-b")), "lin-b");
    let dir = scratch(name).join("archive");
    for run in [&a, &b] {
        let o = cli(&[
            "archive",
            "add",
            arg(run),
            "--archive",
            arg(&dir),
            "--date",
            "2026-11-23",
        ]);
        assert_eq!(o.code, 0, "{}", o.stderr);
    }
    let key = keygen(
        &scratch(&format!("{name}-keys")),
        "Ada Example",
        "medical physicist",
        "k.key",
    );
    assert_eq!(
        cli(&["sign", arg(&b), "--key", arg(&key), "--date", "2026-11-24"]).code,
        0
    );
    let o = cli(&[
        "archive",
        "add",
        arg(&b),
        "--archive",
        arg(&dir),
        "--date",
        "2026-11-24",
    ]);
    assert_eq!(o.code, 0, "{}", o.stderr);
    (dir, vec![a, b])
}

fn verify(dir: &Path) -> Outcome {
    cli(&["archive", "verify", arg(dir)])
}

fn ledger(dir: &Path) -> Vec<String> {
    std::fs::read_to_string(dir.join("ledger.jsonl"))
        .expect("ledger")
        .lines()
        .map(str::to_string)
        .collect()
}

fn write_ledger(dir: &Path, lines: &[String]) {
    let text: String = lines.iter().map(|l| format!("{l}\n")).collect();
    std::fs::write(dir.join("ledger.jsonl"), text).expect("write");
}

fn object(dir: &Path, line: &str, path: &str) -> PathBuf {
    let e: serde_json::Value = serde_json::from_str(line).expect("entry");
    let sha = e["files"]
        .as_array()
        .expect("files")
        .iter()
        .find(|f| f["path"] == path)
        .and_then(|f| f["sha256"].as_str())
        .expect("file in entry")
        .to_string();
    dir.join("objects").join(&sha[..2]).join(sha)
}

#[test]
fn runs_are_archived_listed_and_exported_byte_for_byte() {
    let (dir, runs) = archive_of_three("arch-ok");
    let o = verify(&dir);
    assert_eq!(o.code, 0, "{}", o.stdout);
    assert!(o.stdout.contains(": 3 entries and "), "{}", o.stdout);
    let o = cli(&["archive", "list", "--archive", arg(&dir)]);
    let lines: Vec<&str> = o.stdout.lines().collect();
    assert_eq!(lines.len(), 3);
    assert!(
        lines[0].contains("demo-6x-lin-a-2026-11-20  added 2026-11-23  verdict NO-GO  "),
        "{}",
        lines[0]
    );
    // The third entry is the signed lin-b run: every file of its folder, signature included.
    let files = walkdir::WalkDir::new(&runs[1])
        .into_iter()
        .filter_map(Result::ok)
        .filter(|e| e.file_type().is_file())
        .count();
    assert!(
        lines[2].contains(&format!(
            "demo-6x-lin-b-2026-11-20  added 2026-11-24  verdict GO  {files} files, 1 signature(s)"
        )),
        "{}",
        lines[2]
    );
    // Adding the same run again is refused; the ledger is unchanged.
    let before = ledger(&dir);
    let o = cli(&["archive", "add", arg(&runs[1]), "--archive", arg(&dir)]);
    assert_eq!(o.code, 2);
    assert!(
        o.stderr
            .contains("this run is already archived as entry demo-6x-lin-b-2026-11-20#3"),
        "{}",
        o.stderr
    );
    assert_eq!(ledger(&dir), before);
    // Export restores the signed run folder byte for byte.
    let dest = scratch("arch-ok-export").join("restored");
    let o = cli(&["archive", "export", "3", arg(&dest), "--archive", arg(&dir)]);
    assert_eq!(o.code, 0, "{}{}", o.stdout, o.stderr);
    let mut n = 0;
    for entry in walkdir::WalkDir::new(&runs[1])
        .into_iter()
        .filter_map(Result::ok)
    {
        if entry.file_type().is_file() {
            let rel = entry.path().strip_prefix(&runs[1]).expect("prefix");
            assert_eq!(
                std::fs::read(entry.path()).expect("a"),
                std::fs::read(dest.join(rel)).expect("exported"),
                "{}",
                rel.display()
            );
            n += 1;
        }
    }
    assert_eq!(n, files);
    // Export never overwrites.
    let o = cli(&["archive", "export", "3", arg(&dest), "--archive", arg(&dir)]);
    assert_eq!(o.code, 2);
}

#[test]
fn a_flipped_byte_in_a_stored_file_is_named() {
    let (dir, _) = archive_of_three("arch-flip");
    let obj = object(&dir, &ledger(&dir)[0], "report.pdf");
    let mut b = std::fs::read(&obj).expect("object");
    let i = b.len() / 2;
    b[i] ^= 1;
    std::fs::write(&obj, b).expect("write");
    let o = verify(&dir);
    assert_eq!(o.code, 3);
    assert!(
        o.stdout.starts_with(
            "stored file report.pdf of entry demo-6x-lin-a-2026-11-20#1 changed (object "
        ),
        "{}",
        o.stdout
    );
}

#[test]
fn deleted_swapped_and_truncated_ledger_lines_are_named() {
    let (dir, _) = archive_of_three("arch-ledger");
    let original = ledger(&dir);
    // Deleting the first line.
    write_ledger(&dir, &original[1..]);
    let o = verify(&dir);
    assert_eq!(o.code, 3);
    assert!(
        o.stdout
            .contains("ledger line 1 holds entry 2: lines were deleted or reordered\n"),
        "{}",
        o.stdout
    );
    assert!(
        o.stdout
            .contains("ledger line 1 (entry demo-6x-lin-b-2026-11-20#2): the chain is broken"),
        "{}",
        o.stdout
    );
    // Swapping lines 2 and 3.
    write_ledger(
        &dir,
        &[
            original[0].clone(),
            original[2].clone(),
            original[1].clone(),
        ],
    );
    let o = verify(&dir);
    assert_eq!(o.code, 3);
    assert!(
        o.stdout
            .contains("ledger line 2 holds entry 3: lines were deleted or reordered\n"),
        "{}",
        o.stdout
    );
    // Truncating the last line.
    write_ledger(&dir, &original[..2]);
    let o = verify(&dir);
    assert_eq!(o.code, 3);
    assert!(
        o.stdout.contains(
            "the ledger was truncated: ledger.head records 3 entries, the ledger holds 2\n"
        ),
        "{}",
        o.stdout
    );
    // Editing a line (the date of entry 1): the next line's chain breaks.
    let mut edited = original.clone();
    edited[0] = edited[0].replace("2026-11-23", "2026-11-01");
    write_ledger(&dir, &edited);
    let o = verify(&dir);
    assert_eq!(o.code, 3);
    assert!(o.stdout.starts_with("ledger line 2 (entry demo-6x-lin-b-2026-11-20#2): the chain is broken; the line before it was edited, deleted or reordered\n"), "{}", o.stdout);
    write_ledger(&dir, &original);
    assert_eq!(verify(&dir).code, 0);
}

#[test]
fn a_replaced_signature_is_named() {
    let (dir, _) = archive_of_three("arch-sig");
    let lines = ledger(&dir);
    let sig = object(&dir, &lines[2], "signatures/01-ada-example.sig");
    let text = std::fs::read_to_string(&sig).expect("sig");
    std::fs::write(&sig, text.replace("Ada Example", "Eve Forger")).expect("write");
    let o = verify(&dir);
    assert_eq!(o.code, 3);
    assert!(
        o.stdout.starts_with(
            "stored file signatures/01-ada-example.sig of entry demo-6x-lin-b-2026-11-20#3 changed"
        ),
        "{}",
        o.stdout
    );
}

#[test]
fn an_interrupted_add_leaves_a_valid_archive() {
    // A crash after the new ledger was renamed into place but before the head was: the head
    // still names the previous line. The archive stays valid and the lag is reported.
    let (dir, _) = archive_of_three("arch-crash");
    let lines = ledger(&dir);
    let prev = beamproof_engine::checksum::sha256_hex(lines[1].as_bytes());
    std::fs::write(
        dir.join("ledger.head"),
        format!("entries: 2\nlast: {prev}\n"),
    )
    .expect("w");
    let o = verify(&dir);
    assert_eq!(o.code, 0, "{}", o.stdout);
    assert!(
        o.stdout.starts_with(
            "note: the last entry (3) was added but its confirmation in ledger.head was not written"
        ),
        "{}",
        o.stdout
    );
}

#[test]
fn folders_that_are_not_archives_and_damaged_runs_are_refused() {
    let dir = scratch("arch-not");
    std::fs::write(dir.join("notes.txt"), "hello").expect("w");
    let o = verify(&dir);
    assert_eq!(o.code, 2);
    assert!(
        o.stderr.starts_with(&format!(
            "error: {} is not a beamproof archive (no `beamproof-archive` file)\n",
            dir.display()
        )),
        "{}",
        o.stderr
    );
    let (run, _) = run_into_folder(&demo_copy("arch-damaged"), "lin-b");
    let o = cli(&["archive", "add", arg(&run), "--archive", arg(&dir)]);
    assert_eq!(o.code, 2);
    assert!(
        o.stderr
            .contains("is not a beamproof archive (no `beamproof-archive` file) and is not empty"),
        "{}",
        o.stderr
    );
    std::fs::write(run.join("report.html"), "changed").expect("w");
    let fresh = scratch("arch-damaged-archive").join("a");
    let o = cli(&["archive", "add", arg(&run), "--archive", arg(&fresh)]);
    assert_eq!(o.code, 2);
    assert!(
        o.stderr
            .contains("fails verification (changed: report.html); it is not archived"),
        "{}",
        o.stderr
    );
    assert!(!fresh.exists(), "nothing is created for a refused run");
}

#[cfg(unix)]
#[test]
fn a_run_folder_holding_a_symbolic_link_is_refused_not_partly_archived() {
    let (run, _) = run_into_folder(&demo_copy("arch-link"), "lin-b");
    let dir = scratch("arch-link-archive").join("archive");
    std::os::unix::fs::symlink("../results.json", run.join("signatures-link")).expect("link");
    let o = cli(&["archive", "add", arg(&run), "--archive", arg(&dir)]);
    assert_eq!(o.code, 2, "{}", o.stdout);
    assert!(
        o.stderr.contains(
            "signatures-link is a symbolic link or a special file; only regular files are archived"
        ),
        "{}",
        o.stderr
    );
    assert!(!dir.join("ledger.jsonl").exists());
}

/// Rewrite the ledger with every chain digest and the head recomputed, as someone with write
/// access to the archive could: only what the entries themselves prove is left to catch it.
fn rewrite_ledger_consistently(dir: &Path, entries: &[serde_json::Value]) {
    use beamproof_engine::checksum::sha256_hex;
    let mut prev = "0".repeat(64);
    let mut lines = Vec::new();
    for e in entries {
        let mut e = e.clone();
        e["prev"] = serde_json::Value::String(prev.clone());
        let line = serde_json::to_string(&e).expect("json");
        prev = sha256_hex(line.as_bytes());
        lines.push(line);
    }
    write_ledger(dir, &lines);
    std::fs::write(
        dir.join("ledger.head"),
        format!("entries: {}\nlast: {prev}\n", lines.len()),
    )
    .expect("head");
}

#[test]
fn stored_runs_are_checked_against_their_own_manifests_orphans_and_linked_objects_named() {
    let (dir, _) = archive_of_three("arch-own-manifest");
    let original = ledger(&dir);
    let mut entries: Vec<serde_json::Value> = original
        .iter()
        .map(|l| serde_json::from_str(l).expect("entry"))
        .collect();
    // Entry 2's results.json swapped for entry 1's (an object that exists), the chain and head
    // recomputed: the ledger is consistent, the run is not.
    let sha_of = |e: &serde_json::Value, path: &str| {
        e["files"]
            .as_array()
            .expect("files")
            .iter()
            .find(|f| f["path"] == path)
            .cloned()
            .expect("file")
    };
    let other = sha_of(&entries[0], "results.json");
    for f in entries[1]["files"].as_array_mut().expect("files") {
        if f["path"] == "results.json" {
            *f = other.clone();
        }
    }
    rewrite_ledger_consistently(&dir, &entries);
    let o = verify(&dir);
    assert_eq!(o.code, 3, "{}", o.stdout);
    assert!(
        o.stdout.contains("entry demo-6x-lin-b-2026-11-20#2: stored file results.json differs from the checksum in the run's own manifest"),
        "{}",
        o.stdout
    );
    write_ledger(&dir, &original);
    rewrite_ledger_consistently(
        &dir,
        &original
            .iter()
            .map(|l| serde_json::from_str(l).expect("entry"))
            .collect::<Vec<_>>(),
    );
    assert_eq!(verify(&dir).code, 0);
    // An object no entry names is reported as a note, not a failure.
    let stray = dir.join("objects/00").join("0".repeat(64));
    std::fs::create_dir_all(stray.parent().expect("dir")).expect("mkdir");
    std::fs::write(&stray, "stray").expect("write");
    let o = verify(&dir);
    assert_eq!(o.code, 0, "{}", o.stdout);
    assert!(
        o.stdout.contains(&format!(
            "note: objects/00/{} belongs to no entry",
            "0".repeat(64)
        )),
        "{}",
        o.stdout
    );
    // An object replaced by a symbolic link to an identical copy is refused.
    #[cfg(unix)]
    {
        let obj = object(&dir, &original[0], "report.pdf");
        let copy = dir.with_file_name("report-copy.pdf");
        std::fs::copy(&obj, &copy).expect("copy");
        std::fs::remove_file(&obj).expect("rm");
        std::os::unix::fs::symlink(&copy, &obj).expect("link");
        let o = verify(&dir);
        assert_eq!(o.code, 3, "{}", o.stdout);
        assert!(
            o.stdout.contains(
                "stored file report.pdf of entry demo-6x-lin-a-2026-11-20#1 is a symbolic link"
            ),
            "{}",
            o.stdout
        );
    }
}

#[test]
fn a_seal_exposes_newest_entries_removed_with_a_recomputed_head() {
    let (dir, _) = archive_of_three("arch-seal");
    let keys = scratch("arch-seal-keys");
    let chief = keygen(&keys, "Bo Chief", "chief physicist", "bo.key");
    let trusted = scratch("arch-seal-trusted");
    std::fs::copy(keys.join("bo.key.pub"), trusted.join("bo.pub")).expect("copy");
    let verify_trusted = || {
        cli(&[
            "archive",
            "verify",
            arg(&dir),
            "--trusted-keys",
            arg(&trusted),
        ])
    };
    // Unsealed: the limit of what the chain proves is said.
    let o = verify_trusted();
    assert_eq!(o.code, 0, "{}", o.stdout);
    assert!(o.stdout.contains("note: no valid seal"), "{}", o.stdout);
    // A seal records the head as it is now: 3 entries.
    let o = cli(&[
        "archive",
        "seal",
        "--archive",
        arg(&dir),
        "--key",
        arg(&chief),
        "--date",
        "2026-11-25",
    ]);
    assert_eq!(o.code, 0, "{}", o.stderr);
    let o = verify_trusted();
    assert_eq!(o.code, 0, "{}", o.stdout);
    assert!(
        o.stdout.contains(
            "note: sealed through entry 3 by Bo Chief (chief physicist) on 2026-11-25, trusted key"
        ),
        "{}",
        o.stdout
    );
    // The newest entry removed and the head recomputed: the chain alone is consistent, the
    // seal is not.
    let entries: Vec<serde_json::Value> = ledger(&dir)
        .iter()
        .map(|l| serde_json::from_str(l).expect("entry"))
        .collect();
    let original = ledger(&dir);
    let head = std::fs::read(dir.join("ledger.head")).expect("head");
    rewrite_ledger_consistently(&dir, &entries[..2]);
    let o = verify_trusted();
    assert_eq!(o.code, 3, "{}", o.stdout);
    assert!(
        o.stdout.contains(
            "records 3 entries, the ledger holds 2: entries were removed after it was sealed"
        ),
        "{}",
        o.stdout
    );
    write_ledger(&dir, &original);
    std::fs::write(dir.join("ledger.head"), head).expect("restore head");
    assert_eq!(verify_trusted().code, 0);
    // A seal by a key that is not trusted fails a trusted check.
    let stranger = keygen(&keys, "Cy Stranger", "physicist", "cy.key");
    let o = cli(&[
        "archive",
        "seal",
        "--archive",
        arg(&dir),
        "--key",
        arg(&stranger),
    ]);
    assert_eq!(o.code, 0, "{}", o.stderr);
    let o = verify_trusted();
    assert_eq!(o.code, 3, "{}", o.stdout);
    assert!(
        o.stdout
            .contains("by Cy Stranger (physicist) was made with a key that is not trusted"),
        "{}",
        o.stdout
    );
    // An edited seal is invalid.
    let seal = dir.join("seals/000003-bo-chief.seal");
    let text = std::fs::read_to_string(&seal).expect("seal");
    std::fs::write(&seal, text.replace("entries: 3", "entries: 2")).expect("edit");
    let o = cli(&["archive", "verify", arg(&dir)]);
    assert_eq!(o.code, 3, "{}", o.stdout);
    assert!(
        o.stdout
            .contains("seal seals/000003-bo-chief.seal: the signature does not match its content"),
        "{}",
        o.stdout
    );
}
