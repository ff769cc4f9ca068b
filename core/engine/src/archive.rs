//! The tamper-evident archive of run folders.
//!
//! Layout of an archive folder:
//! - `beamproof-archive`: the marker (`beamproof-archive: 1`);
//! - `objects/ab/abcdef...`: every archived file once, named by its SHA-256 (content-addressed);
//! - `ledger.jsonl`: one JSON line per archived run (sequence number, the SHA-256 of the
//!   previous line, run id, date added, the run's manifest digest and every file with its
//!   SHA-256 and size). The chain of previous-line digests makes any edit, deletion or
//!   reordering of lines detectable;
//! - `ledger.head`: the number of entries and the digest of the last line, so that a truncated
//!   ledger is detected too (an auditor may also record the head elsewhere).
//!
//! - `seals/NNNNNN-NAME.seal`: optional signed checkpoints of the head (`archive seal`).
//!
//! What it proves: every stored file is the one archived (content addresses), every entry is
//! a complete run that matches its own manifest and signatures, and no entry was edited,
//! reordered or removed from the middle (the chain). A chain alone cannot show that the newest
//! entries were removed and the head recomputed: a seal, signed by a trusted key, records
//! the head at a time, so `verify --trusted-keys` finds entries removed after it; entries
//! added after the latest seal are reported as unsealed. The archive does not prove when a
//! run was made (dates are what the signer and the adder stated) or that its measurements
//! were true: that is the signers' word.
//!
//! Adding writes every object and then the new ledger and head, each to a temporary file that
//! is flushed and renamed into place: a crash leaves the previous archive intact (at worst the
//! head lags one complete entry, which `verify` reports as an unconfirmed last add). Nothing in
//! the archive is ever overwritten: an object already present is checked, never rewritten.

use std::io::Write as _;
use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};

use crate::checksum::{MANIFEST, sha256_hex, verify_run};
use crate::signing::{SignatureCheck, verify_signatures};

const MARKER: &str = "beamproof-archive";
const MARKER_TEXT: &str = "beamproof-archive: 1\n";
const LEDGER: &str = "ledger.jsonl";
const HEAD: &str = "ledger.head";
const SEALS: &str = "seals";
const SEAL_HEADER: &str = "beamproof-archive-seal: 1";
const SEAL_KEYS: [&str; 7] = [
    "entries",
    "last",
    "date",
    "name",
    "role",
    "public-key",
    "signature",
];
const GENESIS: &str = "0000000000000000000000000000000000000000000000000000000000000000";

/// One archived file.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct ArchivedFile {
    pub path: String,
    pub sha256: String,
    pub size: u64,
}

/// One ledger line.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct Entry {
    pub seq: u64,
    /// SHA-256 of the previous ledger line (without its line break); zeros for the first.
    pub prev: String,
    /// Run id from the run's results (campaign, machine, run date).
    pub run: String,
    pub added: String,
    pub manifest_sha256: String,
    pub files: Vec<ArchivedFile>,
}

impl Entry {
    /// The id `archive show` and `export` take: `SEQ` or `RUN#SEQ`.
    pub fn id(&self) -> String {
        format!("{}#{}", self.run, self.seq)
    }
}

fn io_err(p: &Path) -> impl Fn(std::io::Error) -> String + '_ {
    move |e| format!("{}: {e}", p.display())
}

fn write_synced(path: &Path, bytes: &[u8]) -> Result<(), String> {
    let mut f = std::fs::File::create_new(path).map_err(io_err(path))?;
    f.write_all(bytes).map_err(io_err(path))?;
    f.sync_all().map_err(io_err(path))
}

/// Write `bytes` to `path` through a flushed temporary file and a rename.
fn replace_atomically(path: &Path, bytes: &[u8]) -> Result<(), String> {
    let tmp = path.with_extension(format!("tmp-{}", std::process::id()));
    let _ = std::fs::remove_file(&tmp);
    write_synced(&tmp, bytes)?;
    std::fs::rename(&tmp, path).map_err(io_err(path))?;
    if let Some(dir) = path.parent()
        && let Ok(d) = std::fs::File::open(dir)
    {
        let _ = d.sync_all();
    }
    Ok(())
}

/// The folders where an interrupted add may leave temporary files: the archive itself and
/// each object folder.
pub fn leftover_folders(archive: &Path) -> Vec<PathBuf> {
    if !archive.join(MARKER).is_file() {
        return Vec::new();
    }
    let mut out = vec![archive.to_path_buf()];
    if let Ok(entries) = std::fs::read_dir(archive.join("objects")) {
        let mut dirs: Vec<PathBuf> = entries
            .filter_map(|e| e.ok())
            .filter(|e| e.file_type().is_ok_and(|t| t.is_dir()))
            .map(|e| e.path())
            .collect();
        dirs.sort();
        out.extend(dirs);
    }
    out
}

fn object_path(archive: &Path, sha: &str) -> PathBuf {
    archive.join("objects").join(&sha[..2]).join(sha)
}

/// Open an archive folder, creating it when `create` and it is missing or empty.
fn open(archive: &Path, create: bool) -> Result<(), String> {
    let marker = archive.join(MARKER);
    if marker.is_file() {
        let text = std::fs::read_to_string(&marker).map_err(io_err(&marker))?;
        if text != MARKER_TEXT {
            return Err(format!(
                "{} is not a beamproof archive of a format this build reads",
                archive.display()
            ));
        }
        return Ok(());
    }
    let empty = match std::fs::read_dir(archive) {
        Ok(mut d) => d.next().is_none(),
        Err(_) => !archive.exists(),
    };
    if create && empty {
        std::fs::create_dir_all(archive.join("objects")).map_err(io_err(archive))?;
        write_synced(&marker, MARKER_TEXT.as_bytes())?;
        return Ok(());
    }
    Err(format!(
        "{} is not a beamproof archive (no `{MARKER}` file){}",
        archive.display(),
        if create { " and is not empty" } else { "" }
    ))
}

/// The ledger's lines, each with its entry when it parses.
fn ledger_lines(archive: &Path) -> Result<Vec<(String, Option<Entry>)>, String> {
    let p = archive.join(LEDGER);
    let text = match std::fs::read_to_string(&p) {
        Ok(t) => t,
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => String::new(),
        Err(e) => return Err(io_err(&p)(e)),
    };
    Ok(text
        .lines()
        .map(|l| (l.to_string(), serde_json::from_str::<Entry>(l).ok()))
        .collect())
}

/// One problem found by [`verify`], named for the auditor.
pub type Problem = String;

/// What `verify` found: the entries that are intact and the problems, plus notes.
#[derive(Debug, Clone, Default)]
pub struct Report {
    pub entries: usize,
    pub objects_checked: usize,
    pub problems: Vec<Problem>,
    pub notes: Vec<String>,
    /// Digest of the last ledger line (for an auditor to record elsewhere).
    pub head: String,
}

/// Re-hash every stored file and the whole chain, check every stored run against its own
/// manifest and every seal (against `trusted` keys when given); name everything that is
/// wrong.
pub fn verify(
    archive: &Path,
    trusted: Option<&[crate::signing::TrustedKey]>,
) -> Result<Report, String> {
    open(archive, false)?;
    let lines = ledger_lines(archive)?;
    let mut r = Report::default();
    let mut prev = GENESIS.to_string();
    let mut referenced = std::collections::BTreeSet::new();
    for (i, (line, entry)) in lines.iter().enumerate() {
        let n = i + 1;
        let Some(e) = entry else {
            r.problems.push(format!(
                "ledger line {n} is not a valid entry (edited or damaged)"
            ));
            prev = sha256_hex(line.as_bytes());
            continue;
        };
        if e.seq != n as u64 {
            r.problems.push(format!(
                "ledger line {n} holds entry {}: lines were deleted or reordered",
                e.seq
            ));
        }
        if e.prev != prev {
            r.problems.push(format!(
                "ledger line {n} (entry {}): the chain is broken; the line before it was edited, deleted or reordered",
                e.id()
            ));
        }
        prev = sha256_hex(line.as_bytes());
        let mut stored: std::collections::BTreeMap<&str, Vec<u8>> = Default::default();
        for f in &e.files {
            let p = object_path(archive, &f.sha256);
            referenced.insert(f.sha256.clone());
            if std::fs::symlink_metadata(&p).is_ok_and(|m| m.file_type().is_symlink()) {
                r.problems.push(format!(
                    "stored file {} of entry {} is a symbolic link (object {}); objects must be regular files",
                    f.path,
                    e.id(),
                    f.sha256
                ));
                continue;
            }
            match crate::input_store::read_regular(&p, crate::checksum::MAX_RUN_FILE_BYTES) {
                Ok(b) if sha256_hex(&b) == f.sha256 && b.len() as u64 == f.size => {
                    r.objects_checked += 1;
                    stored.insert(&f.path, b);
                }
                Ok(_) => r.problems.push(format!(
                    "stored file {} of entry {} changed (object {})",
                    f.path,
                    e.id(),
                    f.sha256
                )),
                Err(_) => r.problems.push(format!(
                    "stored file {} of entry {} is missing (object {})",
                    f.path,
                    e.id(),
                    f.sha256
                )),
            }
        }
        r.problems.extend(entry_against_its_manifest(e, &stored));
        if !e
            .files
            .iter()
            .any(|f| f.path == MANIFEST && f.sha256 == e.manifest_sha256)
        {
            r.problems.push(format!(
                "entry {} does not hold the manifest it names",
                e.id()
            ));
        }
        r.entries += 1;
    }
    r.head = prev.clone();
    let head_path = archive.join(HEAD);
    let head = std::fs::read_to_string(&head_path).unwrap_or_default();
    let (count, last) = parse_head(&head);
    match count {
        None if lines.is_empty() => {}
        None => r.problems.push(format!("{HEAD} is missing or unreadable")),
        Some(c) if c == lines.len() && last == prev => {}
        Some(c) if c + 1 == lines.len() && lines.len() >= 2 && last == sha256_hex(lines[lines.len() - 2].0.as_bytes()) => {
            r.notes.push(format!(
                "the last entry ({}) was added but its confirmation in {HEAD} was not written (an interrupted add); the entry itself is complete and checked",
                lines.len()
            ));
        }
        Some(c) if c > lines.len() => r.problems.push(format!(
            "the ledger was truncated: {HEAD} records {c} entries, the ledger holds {}",
            lines.len()
        )),
        Some(c) => r.problems.push(format!(
            "{HEAD} records {c} entries ending in {last}, which does not match the ledger ({} entries ending in {prev})",
            lines.len()
        )),
    }
    r.notes.extend(orphans(archive, &referenced));
    check_seals(archive, &lines, trusted, &mut r);
    Ok(r)
}

/// A stored run checked against its own manifest, as `verify` checks a run folder: every file
/// the manifest lists is stored with that checksum, every other stored file is a signature,
/// and every signature is valid for the manifest.
fn entry_against_its_manifest(
    e: &Entry,
    stored: &std::collections::BTreeMap<&str, Vec<u8>>,
) -> Vec<Problem> {
    let mut problems = Vec::new();
    let Some(manifest) = stored.get(MANIFEST) else {
        return problems; // already reported: the entry does not hold a readable manifest
    };
    let listed = match crate::checksum::parse_manifest(manifest) {
        Ok(l) => l,
        Err(why) => {
            return vec![format!(
                "entry {}: its stored manifest is unreadable ({why})",
                e.id()
            )];
        }
    };
    for (path, sha) in &listed {
        match e.files.iter().find(|f| &f.path == path) {
            Some(f) if &f.sha256 == sha => {}
            Some(_) => problems.push(format!(
                "entry {}: stored file {path} differs from the checksum in the run's own manifest",
                e.id()
            )),
            None => problems.push(format!(
                "entry {}: {path}, listed in the run's own manifest, is not stored",
                e.id()
            )),
        }
    }
    let sig_prefix = format!("{}/", crate::signing::SIGNATURES_DIR);
    for f in &e.files {
        if f.path != MANIFEST && !listed.contains_key(&f.path) && !f.path.starts_with(&sig_prefix) {
            problems.push(format!(
                "entry {}: stored file {} is neither in the run's manifest nor a signature",
                e.id(),
                f.path
            ));
        }
    }
    let sigs: Vec<(&str, &[u8])> = stored
        .iter()
        .filter(|(p, _)| p.starts_with(&sig_prefix))
        .map(|(p, b)| (*p, b.as_slice()))
        .collect();
    for (file, c) in verify_signatures(&sigs, manifest, None) {
        if let SignatureCheck::Invalid { reason } = c {
            problems.push(format!(
                "entry {}: signature {file} is invalid ({reason})",
                e.id()
            ));
        }
    }
    problems
}

/// Objects that no entry names: left by an interrupted add (objects are written before the
/// ledger) or put there by hand. Reported, never removed.
fn orphans(archive: &Path, referenced: &std::collections::BTreeSet<String>) -> Vec<String> {
    let mut out = Vec::new();
    for entry in walkdir::WalkDir::new(archive.join("objects"))
        .min_depth(2)
        .max_depth(2)
        .sort_by_file_name()
        .into_iter()
        .filter_map(Result::ok)
    {
        let name = entry.file_name().to_string_lossy();
        if !referenced.contains(name.as_ref()) && crate::leftovers::leftover_pid(&name).is_none() {
            out.push(format!(
                "objects/{}/{name} belongs to no entry (left by an interrupted add, or put there by hand); it proves nothing and may be removed",
                entry
                    .path()
                    .parent()
                    .and_then(|p| p.file_name())
                    .map(|n| n.to_string_lossy().into_owned())
                    .unwrap_or_default()
            ));
        }
    }
    out
}

/// The text a seal signs: every line before its `signature:` line.
fn seal_text(entries: &str, last: &str, date: &str, name: &str, role: &str, key: &str) -> String {
    format!(
        "{SEAL_HEADER}\nentries: {entries}\nlast: {last}\ndate: {date}\nname: {name}\nrole: {role}\npublic-key: {key}\n"
    )
}

/// Seal the archive's current head with `key`: a signed record of how many entries it holds
/// and the digest of the last one. Refused for an empty or damaged archive.
pub fn seal(
    archive: &Path,
    key: &crate::signing::KeyPair,
    date: &str,
) -> Result<(PathBuf, usize), String> {
    open(archive, false)?;
    let r = verify(archive, None)?;
    if !r.problems.is_empty() {
        return Err(format!(
            "the archive {} fails verification ({}); a damaged archive is not sealed",
            archive.display(),
            r.problems.join("; ")
        ));
    }
    if r.entries == 0 {
        return Err(format!("the archive {} is empty", archive.display()));
    }
    let text = seal_text(
        &r.entries.to_string(),
        &r.head,
        date,
        &key.name,
        &key.role,
        &key.public_hex(),
    );
    let dir = archive.join(SEALS);
    std::fs::create_dir_all(&dir).map_err(io_err(&dir))?;
    let path = dir.join(format!(
        "{:06}-{}.seal",
        r.entries,
        crate::signing::slug(&key.name)
    ));
    if path.exists() {
        return Err(format!(
            "{} already exists: {} has sealed this head already",
            path.display(),
            key.name
        ));
    }
    write_synced(
        &path,
        format!("{text}signature: {}\n", key.sign_hex(&text)).as_bytes(),
    )?;
    Ok((path, r.entries))
}

/// Check every seal against the ledger (and the trusted keys), and say how far the latest
/// valid seal reaches.
fn check_seals(
    archive: &Path,
    lines: &[(String, Option<Entry>)],
    trusted: Option<&[crate::signing::TrustedKey]>,
    r: &mut Report,
) {
    use crate::signing::printable;
    let mut files: Vec<PathBuf> = std::fs::read_dir(archive.join(SEALS))
        .map(|d| d.filter_map(|e| e.ok().map(|e| e.path())).collect())
        .unwrap_or_default();
    files.sort();
    let mut latest: Option<(usize, String)> = None;
    for p in files {
        let name = format!(
            "{SEALS}/{}",
            p.file_name()
                .map(|n| n.to_string_lossy())
                .unwrap_or_default()
        );
        let Ok(bytes) = crate::input_store::read_regular(&p, 1 << 20) else {
            r.problems
                .push(format!("seal {name} is unreadable or not a regular file"));
            continue;
        };
        let text = String::from_utf8_lossy(&bytes);
        let f = match crate::signing::read_fields(&text, SEAL_HEADER, &SEAL_KEYS) {
            Ok(f) => f,
            Err(why) => {
                r.problems.push(format!(
                    "seal {name} is not a beamproof seal: {}",
                    printable(&why)
                ));
                continue;
            }
        };
        let signed = seal_text(f[0], f[1], f[2], f[3], f[4], f[5]);
        if !crate::signing::verify_hex(f[5], &signed, f[6]) {
            r.problems.push(format!(
                "seal {name}: the signature does not match its content (altered or forged)"
            ));
            continue;
        }
        let Ok(n) = f[0].parse::<usize>() else {
            r.problems
                .push(format!("seal {name}: `entries` is not a number"));
            continue;
        };
        let who = format!("{} ({})", printable(f[3]), printable(f[4]));
        if let Some(keys) = trusted {
            match crate::signing::holder(keys, f[5], f[3], f[4]) {
                crate::signing::Holder::Unknown => {
                    r.problems.push(format!(
                        "seal {name} by {who} was made with a key that is not trusted"
                    ));
                    continue;
                }
                crate::signing::Holder::Differs(k) => {
                    r.problems.push(format!(
                        "seal {name} is signed as {who}, but the trusted key file {} records this key's holder as {} ({})",
                        k.file, k.name, k.role
                    ));
                    continue;
                }
                crate::signing::Holder::Matches => {}
            }
        }
        if n == 0 || n > lines.len() {
            r.problems.push(format!(
                "seal {name} by {who} records {n} entries, the ledger holds {}: entries were removed after it was sealed",
                lines.len()
            ));
            continue;
        }
        if sha256_hex(lines[n - 1].0.as_bytes()) != f[1] {
            r.problems.push(format!(
                "seal {name} by {who} does not match ledger line {n}: the ledger was rewritten after it was sealed"
            ));
            continue;
        }
        if latest.as_ref().is_none_or(|(m, _)| n >= *m) {
            latest = Some((
                n,
                format!(
                    "{who} on {}{}",
                    printable(f[2]),
                    match trusted {
                        Some(_) => ", trusted key",
                        None => ", key not checked (no --trusted-keys)",
                    }
                ),
            ));
        }
    }
    match latest {
        Some((n, by)) => {
            r.notes.push(format!("sealed through entry {n} by {by}"));
            if n < lines.len() {
                r.notes.push(format!(
                    "entries {} to {} were added after the latest seal and are not sealed",
                    n + 1,
                    lines.len()
                ));
            }
        }
        None if !lines.is_empty() => r.notes.push(
            "no valid seal: the chain shows that no entry was edited, reordered or removed from the middle, but not that the newest entries were removed with the head recomputed; seal the archive with `beamproof archive seal`".into(),
        ),
        None => {}
    }
}

fn parse_head(text: &str) -> (Option<usize>, String) {
    let mut count = None;
    let mut last = String::new();
    for l in text.lines() {
        if let Some(v) = l.strip_prefix("entries: ") {
            count = v.parse().ok();
        } else if let Some(v) = l.strip_prefix("last: ") {
            last = v.to_string();
        }
    }
    (count, last)
}

/// Copy a verified run folder into the archive. Returns the new entry.
pub fn add(archive: &Path, run: &Path, date: &str) -> Result<Entry, String> {
    // The run folder is read once, by its verification; everything archived is those bytes.
    let v = verify_run(run).map_err(|e| format!("{e} (is {} a run folder?)", run.display()))?;
    if !v.findings.is_empty() {
        return Err(format!(
            "{} fails verification ({}); it is not archived",
            run.display(),
            v.findings
                .iter()
                .map(ToString::to_string)
                .collect::<Vec<_>>()
                .join("; ")
        ));
    }
    for (file, c) in verify_signatures(&v.signatures(), &v.manifest, None) {
        if let SignatureCheck::Invalid { reason } = c {
            return Err(format!(
                "{}: signature {file} is invalid ({reason}); it is not archived",
                run.display()
            ));
        }
    }
    if let Some(u) = v.uncovered.iter().find(|u| !v.files.contains_key(*u)) {
        return Err(format!(
            "{}: {u} is a symbolic link or a special file; only regular files are archived",
            run.display()
        ));
    }
    if let Some(u) = v.planted().next() {
        return Err(format!(
            "{}: {u} is not covered by the manifest; only the run's own files and signatures are archived",
            run.display()
        ));
    }
    open(archive, true)?;
    let before = verify(archive, None)?;
    if !before.problems.is_empty() {
        return Err(format!(
            "the archive {} fails verification ({}); nothing is added to a damaged archive",
            archive.display(),
            before.problems.join("; ")
        ));
    }
    let results: serde_json::Value = v
        .files
        .get("results.json")
        .and_then(|b| serde_json::from_slice(b).ok())
        .unwrap_or_default();
    let run_id = results["run"]["id"]
        .as_str()
        .map(str::to_string)
        .unwrap_or_else(|| {
            run.file_name()
                .map(|n| n.to_string_lossy().into_owned())
                .unwrap_or_default()
        });
    let mut files = Vec::new();
    for (rel, bytes) in &v.files {
        let sha = sha256_hex(bytes);
        let obj = object_path(archive, &sha);
        if obj.exists() {
            let have = std::fs::read(&obj).map_err(io_err(&obj))?;
            if sha256_hex(&have) != sha {
                return Err(format!(
                    "archive object {} is damaged; run `beamproof archive verify`",
                    obj.display()
                ));
            }
        } else {
            let dir = obj.parent().unwrap_or(archive);
            std::fs::create_dir_all(dir).map_err(io_err(dir))?;
            let tmp = dir.join(format!(".{sha}.tmp-{}", std::process::id()));
            let _ = std::fs::remove_file(&tmp);
            write_synced(&tmp, bytes)?;
            std::fs::rename(&tmp, &obj).map_err(io_err(&obj))?;
        }
        files.push(ArchivedFile {
            path: rel.clone(),
            sha256: sha,
            size: bytes.len() as u64,
        });
    }
    files.sort_by(|a, b| a.path.cmp(&b.path));
    let lines = ledger_lines(archive)?;
    if let Some(same) = lines
        .iter()
        .filter_map(|(_, e)| e.as_ref())
        .find(|e| e.files == files)
    {
        return Err(format!(
            "this run is already archived as entry {} (identical files); nothing was added",
            same.id()
        ));
    }
    let prev = lines
        .last()
        .map_or_else(|| GENESIS.to_string(), |(l, _)| sha256_hex(l.as_bytes()));
    let entry = Entry {
        seq: lines.len() as u64 + 1,
        prev,
        run: run_id,
        added: date.to_string(),
        manifest_sha256: sha256_hex(&v.manifest),
        files,
    };
    let line = serde_json::to_string(&entry).map_err(|e| e.to_string())?;
    let mut ledger: String = lines.iter().map(|(l, _)| format!("{l}\n")).collect();
    ledger.push_str(&line);
    ledger.push('\n');
    replace_atomically(&archive.join(LEDGER), ledger.as_bytes())?;
    replace_atomically(
        &archive.join(HEAD),
        format!(
            "entries: {}\nlast: {}\n",
            entry.seq,
            sha256_hex(line.as_bytes())
        )
        .as_bytes(),
    )?;
    Ok(entry)
}

/// The verdict recorded in an entry's `results.json` (read from its object and checked
/// against the entry's checksum), or why there is none.
pub fn verdict(archive: &Path, e: &Entry) -> String {
    let Some(f) = e.files.iter().find(|f| f.path == "results.json") else {
        return "no results.json".into();
    };
    match std::fs::read(object_path(archive, &f.sha256)) {
        Ok(b) if sha256_hex(&b) == f.sha256 => {
            crate::run::verdict_in(&b).unwrap_or_else(|| "none recorded".into())
        }
        _ => "unknown (stored results damaged; run `beamproof archive verify`)".into(),
    }
}

/// Every entry of an archive (after checking it is one).
pub fn list(archive: &Path) -> Result<Vec<Entry>, String> {
    open(archive, false)?;
    Ok(ledger_lines(archive)?
        .into_iter()
        .filter_map(|(_, e)| e)
        .collect())
}

/// The entry named by `SEQ` or `RUN#SEQ` (or a run id archived once).
pub fn find(archive: &Path, id: &str) -> Result<Entry, String> {
    let entries = list(archive)?;
    let by_seq = |s: &str| {
        s.parse::<u64>()
            .ok()
            .and_then(|n| entries.iter().find(|e| e.seq == n))
    };
    let hit = by_seq(id)
        .or_else(|| {
            id.rsplit_once('#')
                .and_then(|(_, s)| by_seq(s))
                .filter(|e| e.id() == id)
        })
        .or_else(|| {
            let same: Vec<&Entry> = entries.iter().filter(|e| e.run == id).collect();
            (same.len() == 1).then(|| same[0])
        });
    hit.cloned().ok_or_else(|| {
        format!(
            "no archive entry `{id}`; entries: {}",
            entries.iter().map(Entry::id).collect::<Vec<_>>().join(", ")
        )
    })
}

/// Restore an entry's run folder at `dest` (which must not exist), byte for byte.
pub fn export(archive: &Path, id: &str, dest: &Path) -> Result<Entry, String> {
    let e = find(archive, id)?;
    if dest.exists() {
        return Err(format!(
            "{} already exists; exports never overwrite",
            dest.display()
        ));
    }
    let parent = dest
        .parent()
        .filter(|p| !p.as_os_str().is_empty())
        .unwrap_or(Path::new("."));
    std::fs::create_dir_all(parent).map_err(io_err(parent))?;
    let tmp = parent.join(format!(
        ".{}.partial-{}",
        dest.file_name()
            .map(|n| n.to_string_lossy().into_owned())
            .unwrap_or_default(),
        std::process::id()
    ));
    let _ = std::fs::remove_dir_all(&tmp);
    let result = (|| {
        for f in &e.files {
            let bytes = std::fs::read(object_path(archive, &f.sha256))
                .map_err(|err| format!("object of {} unreadable: {err}", f.path))?;
            if sha256_hex(&bytes) != f.sha256 {
                return Err(format!(
                    "stored file {} is damaged; run `beamproof archive verify`",
                    f.path
                ));
            }
            let target = tmp.join(&f.path);
            if let Some(d) = target.parent() {
                std::fs::create_dir_all(d).map_err(io_err(d))?;
            }
            write_synced(&target, &bytes)?;
        }
        std::fs::rename(&tmp, dest).map_err(io_err(dest))
    })();
    if result.is_err() {
        let _ = std::fs::remove_dir_all(&tmp);
    }
    result.map(|()| e)
}
