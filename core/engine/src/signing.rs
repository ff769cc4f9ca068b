//! Sign-off of a run folder with Ed25519 (RFC 8032, ed25519-dalek): key pairs, detached
//! signatures of the run's manifest digest (which covers the report and every input), and
//! their verification against the current manifest and an optional folder of trusted keys.
//!
//! Files are line-oriented text, `key: value` per line, in a fixed order:
//! - key pair (`beamproof-signing-key: 1`, name, role, public-key, secret-key), written with
//!   owner-only permissions; its public half `*.pub` (the same without the secret);
//! - signature (`beamproof-signature: 2`, manifest-sha256, verdict, name, role, date,
//!   statement, public-key, signature). The signature covers the exact bytes of every line
//!   before the `signature:` line, so nothing in the file can change without breaking it. The
//!   verdict line records the run's verdict as the signer saw it. Version 1 signatures (no
//!   verdict line) still verify.
//!
//! A trusted public key file records its holder's name and role; what `verify` trusts is that
//! record, so a signature whose stated name or role differs from the record of its key is
//! invalid. Names, roles and statements are one line of printable text.
//!
//! Signatures live in `signatures/` inside the run folder, outside the manifest (they are added
//! after it); signing never changes an existing file.

use std::path::{Path, PathBuf};

use ed25519_dalek::{Signature, Signer, SigningKey, VerifyingKey};

use crate::checksum::sha256_hex;

/// Folder of a run that holds its signatures.
pub const SIGNATURES_DIR: &str = "signatures";
const KEY_HEADER: &str = "beamproof-signing-key: 1";
const PUB_HEADER: &str = "beamproof-public-key: 1";
const SIG_HEADER_V1: &str = "beamproof-signature: 1";
const SIG_HEADER: &str = "beamproof-signature: 2";
/// The lines of a signature after its header, in order.
const SIG_KEYS: [&str; 8] = [
    "manifest-sha256",
    "verdict",
    "name",
    "role",
    "date",
    "statement",
    "public-key",
    "signature",
];

fn hex(bytes: &[u8]) -> String {
    bytes.iter().map(|b| format!("{b:02x}")).collect()
}

fn unhex<const N: usize>(s: &str) -> Option<[u8; N]> {
    if s.len() != 2 * N || !s.is_ascii() {
        return None;
    }
    let mut out = [0u8; N];
    for (i, o) in out.iter_mut().enumerate() {
        *o = u8::from_str_radix(&s[2 * i..2 * i + 2], 16).ok()?;
    }
    Some(out)
}

/// One-line text for a field: trimmed, printable (no line break, tab or other control
/// character, which could forge lines or terminal output).
fn one_line(what: &str, s: &str) -> Result<String, String> {
    let t = s.trim();
    if t.is_empty() {
        return Err(format!("the {what} is empty"));
    }
    if t.contains(['\n', '\r']) {
        return Err(format!("the {what} must be one line"));
    }
    if t.chars().any(char::is_control) {
        return Err(format!(
            "the {what} \"{}\" holds a control character; write printable text only",
            t.escape_debug()
        ));
    }
    Ok(t.to_string())
}

/// Text from a file shown on a terminal: control characters escaped, never printed raw.
pub fn printable(s: &str) -> String {
    if s.chars().any(char::is_control) {
        s.escape_debug().to_string()
    } else {
        s.to_string()
    }
}

/// Parse `key: value` lines in the given order after a header line.
fn fields<'a>(text: &'a str, header: &str, keys: &[&str]) -> Result<Vec<&'a str>, String> {
    let mut lines = text.lines();
    if lines.next() != Some(header) {
        return Err(format!("the first line is not `{header}`"));
    }
    let mut out = Vec::new();
    for key in keys {
        let line = lines
            .next()
            .ok_or_else(|| format!("the line `{key}:` is missing"))?;
        let v = line
            .strip_prefix(key)
            .and_then(|r| r.strip_prefix(": "))
            .ok_or_else(|| format!("expected `{key}: ...`, found `{line}`"))?;
        out.push(v);
    }
    if let Some(extra) = lines.next() {
        return Err(format!("unexpected line `{extra}`"));
    }
    Ok(out)
}

/// A signer's key pair as read from its file.
pub struct KeyPair {
    pub name: String,
    pub role: String,
    key: SigningKey,
}

impl KeyPair {
    pub fn public_hex(&self) -> String {
        hex(self.key.verifying_key().as_bytes())
    }

    /// The Ed25519 signature of `text`'s bytes, in hex.
    pub fn sign_hex(&self, text: &str) -> String {
        hex(&self.key.sign(text.as_bytes()).to_bytes())
    }
}

/// Whether `signature_hex` is a valid Ed25519 signature of `text` by `public_hex` (strict
/// verification, RFC 8032).
pub fn verify_hex(public_hex: &str, text: &str, signature_hex: &str) -> bool {
    let (Some(pk), Some(sig)) = (unhex::<32>(public_hex), unhex::<64>(signature_hex)) else {
        return false;
    };
    VerifyingKey::from_bytes(&pk).is_ok_and(|vk| {
        vk.verify_strict(text.as_bytes(), &Signature::from_bytes(&sig))
            .is_ok()
    })
}

/// The lines of a `key: value` file after its header, in the given order (for other signed
/// records, such as archive seals).
pub fn read_fields<'a>(text: &'a str, header: &str, keys: &[&str]) -> Result<Vec<&'a str>, String> {
    fields(text, header, keys)
}

/// A file-name-safe form of a signer's name.
pub fn slug(name: &str) -> String {
    let s: String = name
        .chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() {
                c.to_ascii_lowercase()
            } else {
                '-'
            }
        })
        .collect();
    s.trim_matches('-').to_string()
}

/// Make a key pair from 32 secret bytes (random for `keygen`, fixed in tests).
pub fn key_pair(name: &str, role: &str, secret: [u8; 32]) -> Result<KeyPair, String> {
    Ok(KeyPair {
        name: one_line("name", name)?,
        role: one_line("role", role)?,
        key: SigningKey::from_bytes(&secret),
    })
}

/// A new key pair from the operating system's random source.
pub fn generate(name: &str, role: &str) -> Result<KeyPair, String> {
    let mut secret = [0u8; 32];
    getrandom::fill(&mut secret).map_err(|e| format!("no random source: {e}"))?;
    key_pair(name, role, secret)
}

/// Text of the key file (secret included) and of the public key file.
pub fn key_files(k: &KeyPair) -> (String, String) {
    let public = format!(
        "{PUB_HEADER}\nname: {}\nrole: {}\npublic-key: {}\n",
        k.name,
        k.role,
        k.public_hex()
    );
    let secret = format!(
        "{KEY_HEADER}\nname: {}\nrole: {}\npublic-key: {}\nsecret-key: {}\n",
        k.name,
        k.role,
        k.public_hex(),
        hex(k.key.as_bytes())
    );
    (secret, public)
}

/// Write the key file (owner-only permissions, never over an existing file) and `FILE.pub`.
pub fn write_keys(path: &Path, k: &KeyPair) -> Result<PathBuf, String> {
    let (secret, public) = key_files(k);
    let pub_path = PathBuf::from(format!("{}.pub", path.display()));
    for p in [path, pub_path.as_path()] {
        if p.exists() {
            return Err(format!(
                "{} already exists; key files are never overwritten",
                p.display()
            ));
        }
    }
    write_new(path, secret.as_bytes(), true)?;
    write_new(&pub_path, public.as_bytes(), false)?;
    Ok(pub_path)
}

fn write_new(path: &Path, bytes: &[u8], private: bool) -> Result<(), String> {
    use std::io::Write as _;
    let mut o = std::fs::OpenOptions::new();
    o.write(true).create_new(true);
    #[cfg(unix)]
    {
        use std::os::unix::fs::OpenOptionsExt as _;
        o.mode(if private { 0o600 } else { 0o644 });
    }
    #[cfg(not(unix))]
    let _ = private;
    let mut f = o
        .open(path)
        .map_err(|e| format!("cannot create {}: {e}", path.display()))?;
    f.write_all(bytes)
        .and_then(|()| f.sync_all())
        .map_err(|e| format!("cannot write {}: {e}", path.display()))
}

/// Read a key file; a corrupt or mismatched file is an error saying what is wrong.
pub fn read_key(path: &Path) -> Result<KeyPair, String> {
    let text = std::fs::read_to_string(path)
        .map_err(|e| format!("cannot read key file {}: {e}", path.display()))?;
    let bad = |why: String| {
        format!(
            "{} is not a valid beamproof key file: {why}",
            path.display()
        )
    };
    let f = fields(
        &text,
        KEY_HEADER,
        &["name", "role", "public-key", "secret-key"],
    )
    .map_err(bad)?;
    let secret =
        unhex::<32>(f[3]).ok_or_else(|| bad("the secret key is not 64 hex digits".into()))?;
    let k = key_pair(f[0], f[1], secret).map_err(bad)?;
    if k.public_hex() != f[2] {
        return Err(bad(
            "its public key does not belong to its secret key (the file was altered)".into(),
        ));
    }
    Ok(k)
}

/// A trusted public key and the identity its file records.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct TrustedKey {
    pub name: String,
    pub role: String,
    pub public_key: String,
    /// The `*.pub` file it came from, for messages.
    pub file: String,
}

/// How a signed name and role stand against the trusted keys.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Holder<'a> {
    /// The key is not among the trusted keys.
    Unknown,
    /// Trusted, and the record names this holder.
    Matches,
    /// Trusted, but its record names another holder.
    Differs(&'a TrustedKey),
}

/// Whether `public_key` is trusted and its record names `name` in `role`.
pub fn holder<'a>(keys: &'a [TrustedKey], public_key: &str, name: &str, role: &str) -> Holder<'a> {
    match keys.iter().find(|k| k.public_key == public_key) {
        None => Holder::Unknown,
        Some(k) if k.name != name || k.role != role => Holder::Differs(k),
        Some(_) => Holder::Matches,
    }
}

/// The public keys in a folder of trusted keys (`*.pub`), with their holders. The same key
/// recorded twice with different holders is refused: the record would be ambiguous.
pub fn trusted_keys(dir: &Path) -> Result<Vec<TrustedKey>, String> {
    let mut out: Vec<TrustedKey> = Vec::new();
    let entries =
        std::fs::read_dir(dir).map_err(|e| format!("cannot read {}: {e}", dir.display()))?;
    let mut paths: Vec<PathBuf> = entries.filter_map(|e| e.ok().map(|e| e.path())).collect();
    paths.sort();
    for p in paths {
        if p.extension().and_then(|e| e.to_str()) != Some("pub") {
            continue;
        }
        let bytes = crate::input_store::read_regular(&p, 1 << 20)
            .map_err(|e| format!("cannot read {}: {e}", p.display()))?;
        let text = String::from_utf8_lossy(&bytes);
        let bad = |why: String| format!("{} is not a beamproof public key: {why}", p.display());
        let f = fields(&text, PUB_HEADER, &["name", "role", "public-key"]).map_err(bad)?;
        let name = one_line("name", f[0]).map_err(bad)?;
        let role = one_line("role", f[1]).map_err(bad)?;
        if unhex::<32>(f[2]).is_none() {
            return Err(bad("the public key is not 64 hex digits".into()));
        }
        let file = p
            .file_name()
            .map(|n| n.to_string_lossy().into_owned())
            .unwrap_or_default();
        if let Some(other) = out
            .iter()
            .find(|k| k.public_key == f[2] && (k.name != name || k.role != role))
        {
            return Err(format!(
                "{} and {} record one key for two holders ({} ({}) and {name} ({role})); keep the right one",
                other.file, file, other.name, other.role
            ));
        }
        out.push(TrustedKey {
            name,
            role,
            public_key: f[2].to_string(),
            file,
        });
    }
    Ok(out)
}

/// What a signature says, before its signature line.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Statement {
    pub manifest_sha256: String,
    /// The run's verdict as the signer saw it (absent in version 1 signatures).
    pub verdict: Option<String>,
    pub name: String,
    pub role: String,
    pub date: String,
    pub statement: String,
    pub public_key: String,
}

fn signed_text(s: &Statement) -> String {
    match &s.verdict {
        Some(v) => format!(
            "{SIG_HEADER}\nmanifest-sha256: {}\nverdict: {v}\nname: {}\nrole: {}\ndate: {}\nstatement: {}\npublic-key: {}\n",
            s.manifest_sha256, s.name, s.role, s.date, s.statement, s.public_key
        ),
        None => format!(
            "{SIG_HEADER_V1}\nmanifest-sha256: {}\nname: {}\nrole: {}\ndate: {}\nstatement: {}\npublic-key: {}\n",
            s.manifest_sha256, s.name, s.role, s.date, s.statement, s.public_key
        ),
    }
}

/// Sign the manifest whose bytes are `manifest` (read once by the caller, who verified the run
/// folder against them) of a run whose verdict is `verdict`: writes `signatures/NN-NAME.sig`
/// and returns its path.
pub fn sign_run(
    run: &Path,
    manifest: &[u8],
    verdict: &str,
    key: &KeyPair,
    date: &str,
    statement: &str,
) -> Result<PathBuf, String> {
    let s = Statement {
        manifest_sha256: sha256_hex(manifest),
        verdict: Some(one_line("verdict", verdict)?),
        name: key.name.clone(),
        role: key.role.clone(),
        date: one_line("date", date)?,
        statement: one_line("statement", statement)?,
        public_key: key.public_hex(),
    };
    let text = signed_text(&s);
    let sig = key.key.sign(text.as_bytes());
    let dir = run.join(SIGNATURES_DIR);
    std::fs::create_dir_all(&dir).map_err(|e| format!("cannot create {}: {e}", dir.display()))?;
    let n = existing_signatures(run).len() + 1;
    let path = dir.join(format!("{n:02}-{}.sig", slug(&key.name)));
    write_new(
        &path,
        format!("{text}signature: {}\n", hex(&sig.to_bytes())).as_bytes(),
        false,
    )?;
    Ok(path)
}

fn existing_signatures(run: &Path) -> Vec<PathBuf> {
    let mut v: Vec<PathBuf> = std::fs::read_dir(run.join(SIGNATURES_DIR))
        .map(|d| {
            d.filter_map(|e| e.ok().map(|e| e.path()))
                .filter(|p| p.extension().and_then(|e| e.to_str()) == Some("sig"))
                .collect()
        })
        .unwrap_or_default();
    v.sort();
    v
}

/// The verdict on one signature file.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum SignatureCheck {
    /// Valid for the current manifest; `trusted` when its key is in the trusted folder (or
    /// `None` when no trusted folder was given).
    Valid {
        statement: Statement,
        trusted: Option<bool>,
    },
    /// Why the file does not prove what it claims.
    Invalid { reason: String },
}

/// Check signature files (path in the run folder, bytes as read once by the run's
/// verification) against the manifest whose bytes are `manifest` and the trusted keys, when
/// given.
pub fn verify_signatures(
    signatures: &[(&str, &[u8])],
    manifest: &[u8],
    trusted: Option<&[TrustedKey]>,
) -> Vec<(String, SignatureCheck)> {
    let manifest_sha = sha256_hex(manifest);
    signatures
        .iter()
        .map(|(name, bytes)| (name.to_string(), check_one(bytes, &manifest_sha, trusted)))
        .collect()
}

fn check_one(bytes: &[u8], manifest_sha: &str, trusted: Option<&[TrustedKey]>) -> SignatureCheck {
    let invalid = |reason: String| SignatureCheck::Invalid { reason };
    let text = String::from_utf8_lossy(bytes);
    let v1 = text.starts_with(&format!("{SIG_HEADER_V1}\n"));
    // Version 2 added the verdict line; version 1 has every other line.
    let keys: Vec<&str> = SIG_KEYS
        .iter()
        .copied()
        .filter(|k| !v1 || *k != "verdict")
        .collect();
    let f = match fields(&text, if v1 { SIG_HEADER_V1 } else { SIG_HEADER }, &keys) {
        Ok(f) => f,
        Err(why) => return invalid(format!("not a beamproof signature: {}", printable(&why))),
    };
    // The fields without the verdict: manifest, name, role, date, statement, key, signature.
    let (verdict, f): (Option<String>, Vec<&str>) = if v1 {
        (None, f)
    } else {
        (
            Some(f[1].to_string()),
            std::iter::once(f[0])
                .chain(f[2..].iter().copied())
                .collect(),
        )
    };
    let s = Statement {
        manifest_sha256: f[0].into(),
        verdict,
        name: f[1].into(),
        role: f[2].into(),
        date: f[3].into(),
        statement: f[4].into(),
        public_key: f[5].into(),
    };
    let (Some(pk), Some(sig)) = (unhex::<32>(f[5]), unhex::<64>(f[6])) else {
        return invalid("the public key or the signature is not valid hex".into());
    };
    let Ok(vk) = VerifyingKey::from_bytes(&pk) else {
        return invalid("the public key is not an Ed25519 key".into());
    };
    if vk
        .verify_strict(signed_text(&s).as_bytes(), &Signature::from_bytes(&sig))
        .is_err()
    {
        return invalid(
            "the signature does not match its content (the file was altered or forged)".into(),
        );
    }
    if s.manifest_sha256 != manifest_sha {
        return invalid(format!(
            "it signs manifest {}, the run's manifest is now {manifest_sha}",
            printable(&s.manifest_sha256)
        ));
    }
    let trusted = match trusted.map(|keys| holder(keys, &s.public_key, &s.name, &s.role)) {
        None => None,
        Some(Holder::Unknown) => Some(false),
        Some(Holder::Differs(k)) => {
            return invalid(format!(
                "it is signed as {} ({}), but the trusted key file {} records this key's holder as {} ({})",
                printable(&s.name),
                printable(&s.role),
                k.file,
                k.name,
                k.role
            ));
        }
        Some(Holder::Matches) => Some(true),
    };
    SignatureCheck::Valid {
        statement: s,
        trusted,
    }
}

/// Today's date (UTC) as YYYY-MM-DD from the system clock: the date a signature is made.
pub fn today_utc() -> String {
    let secs = std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map(|d| d.as_secs())
        .unwrap_or(0);
    civil_date((secs / 86_400) as i64)
}

/// Gregorian date of a day count since 1970-01-01 (H. Hinnant's days-to-civil algorithm).
pub fn civil_date(days: i64) -> String {
    let z = days + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z - era * 146_097;
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = doy - (153 * mp + 2) / 5 + 1;
    let m = if mp < 10 { mp + 3 } else { mp - 9 };
    let y = yoe + era * 400 + i64::from(m <= 2);
    format!("{y:04}-{m:02}-{d:02}")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn rfc8032_test_vector_1() {
        // RFC 8032 section 7.1, TEST 1 (empty message); values from memory of the RFC.
        let secret =
            unhex::<32>("9d61b19deffd5a60ba844af492ec2cc44449c5697b326919703bac031cae7f60")
                .expect("hex");
        let k = key_pair("a", "b", secret).expect("key");
        assert_eq!(
            k.public_hex(),
            "d75a980182b10ab7d54bfed3c964073a0ee172f3daa62325af021a68f707511a"
        );
        assert_eq!(
            hex(&k.key.sign(b"").to_bytes()),
            "e5564300c360ac729086e2cc806e828a84877f1eb8e5d974d873e065224901555fb8821590a33bacc61e39701cf9b46bd25bf5f0595bbe24655141438e7a100b"
        );
    }

    #[test]
    fn version_1_signatures_without_a_verdict_still_verify() {
        let k = key_pair("Ada Example", "medical physicist", [7; 32]).expect("key");
        let s = Statement {
            manifest_sha256: "ab".repeat(32),
            verdict: None,
            name: k.name.clone(),
            role: k.role.clone(),
            date: "2026-11-21".into(),
            statement: "Reviewed.".into(),
            public_key: k.public_hex(),
        };
        let text = signed_text(&s);
        assert!(text.starts_with("beamproof-signature: 1\nmanifest-sha256: "));
        let file = format!(
            "{text}signature: {}\n",
            hex(&k.key.sign(text.as_bytes()).to_bytes())
        );
        assert_eq!(
            check_one(file.as_bytes(), &"ab".repeat(32), None),
            SignatureCheck::Valid {
                statement: s,
                trusted: None
            }
        );
    }

    #[test]
    fn civil_dates_follow_the_gregorian_calendar() {
        // Day counts since 1970-01-01 (Unix time / 86400) from Python's datetime (general-purpose
        // reference): leap days of 2000 (divisible by 400) and 2024, and the non-leap 2100,
        // whose 28 February is followed by 1 March.
        assert_eq!(civil_date(0), "1970-01-01");
        assert_eq!(civil_date(11_016), "2000-02-29");
        assert_eq!(civil_date(19_782), "2024-02-29");
        assert_eq!(civil_date(20_789), "2026-12-02");
        assert_eq!(civil_date(47_540), "2100-02-28");
        assert_eq!(civil_date(47_541), "2100-03-01");
    }
}
