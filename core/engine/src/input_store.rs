//! The single input seam: every file a run depends on (the campaign's data, DICOM, scans, beam
//! data, calibration and template files) is read here, once, into memory; its SHA-256 is taken
//! from those bytes, every reader parses those same bytes, the report is rendered from them and
//! the run folder's copy under `inputs/` is written from them. Nothing is read from disk again.
//!
//! What may be read: regular files only, inside the campaign folder. A symbolic link is
//! resolved and must lead to a regular file inside the campaign folder; FIFOs, sockets, devices
//! and directories are refused with what was found (a FIFO is opened non-blocking, so it never
//! hangs); a file over the input limit is refused before it is read, and a file that grows
//! past the limit while it is read is refused too. Names that a manifest line cannot hold
//! unambiguously (control characters such as a newline, a backslash) are refused, shown
//! escaped.

use std::collections::BTreeMap;
use std::io::Read as _;
use std::path::{Path, PathBuf};
use std::sync::Arc;

use crate::checksum::sha256_hex;

/// Default largest input file, in bytes (1 GiB): far above a 256^3 32-bit dose grid (67 MB)
/// or an A4 film scan at 300 dpi (52 MB), far below the memory of a planning workstation.
pub const DEFAULT_MAX_INPUT_BYTES: u64 = 1 << 30;

/// An input file as read once: the bytes every reader parses and the run folder keeps.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct InputFile {
    /// Path relative to the campaign folder, `/`-separated.
    pub rel: String,
    pub bytes: Arc<[u8]>,
    pub sha256: String,
}

/// Why a file could not be read as an input.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum ReadError {
    NotFound,
    /// A symbolic link whose target does not exist.
    DanglingLink(String),
    IsDirectory,
    /// Not a regular file: what it is (`a FIFO (named pipe)`, `a socket`, ...).
    NotRegular(&'static str),
    /// A symbolic link that resolves outside the campaign folder.
    LinkOutside(String),
    /// The file's size in bytes (or at least this much, when it grew while read), and the limit.
    TooLarge {
        size: u64,
        limit: u64,
    },
    /// A name that cannot be written into the manifest unambiguously, shown escaped.
    BadName(String),
    Io(String),
}

impl std::fmt::Display for ReadError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            ReadError::NotFound => write!(f, "it does not exist"),
            ReadError::DanglingLink(t) => {
                write!(f, "it is a symbolic link to `{t}`, which does not exist")
            }
            ReadError::IsDirectory => write!(f, "it is a directory, not a file"),
            ReadError::NotRegular(what) => write!(f, "it is {what}, not a regular file"),
            ReadError::LinkOutside(t) => write!(
                f,
                "it is a symbolic link to `{t}`, outside the campaign folder"
            ),
            ReadError::TooLarge { size, limit } => write!(
                f,
                "it holds {size} bytes, over the input limit of {limit} bytes"
            ),
            ReadError::BadName(n) => write!(
                f,
                "its name \"{n}\" holds a control character or a backslash, which a checksum manifest cannot record unambiguously"
            ),
            ReadError::Io(e) => write!(f, "{e}"),
        }
    }
}

impl ReadError {
    /// What the user can do about it.
    pub fn help(&self) -> &'static str {
        match self {
            ReadError::NotFound | ReadError::DanglingLink(_) => {
                "check the path; it is relative to the campaign file"
            }
            ReadError::IsDirectory => "name a file inside the folder",
            ReadError::NotRegular(_) => {
                "copy the data into a regular file inside the campaign folder"
            }
            ReadError::LinkOutside(_) => {
                "copy the file into the campaign folder, so the run folder can keep exactly what was analysed"
            }
            ReadError::TooLarge { .. } => {
                "check that this is the intended file; a larger limit can be set with --max-input-mb"
            }
            ReadError::BadName(_) => "rename the file with printable characters and `/` only",
            ReadError::Io(_) => "check the file's permissions",
        }
    }
}

/// A name fit for a manifest line: printable, no backslash.
pub fn check_name(rel: &str) -> Result<(), ReadError> {
    if rel.chars().any(|c| c.is_control() || c == '\\') {
        Err(ReadError::BadName(rel.escape_debug().to_string()))
    } else {
        Ok(())
    }
}

/// Read one file whole, as a regular file of at most `limit` bytes. A symbolic link is
/// followed (the caller decides where it may lead); anything but a regular file is refused
/// without blocking.
pub fn read_regular(path: &Path, limit: u64) -> Result<Vec<u8>, ReadError> {
    match std::fs::symlink_metadata(path) {
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => return Err(ReadError::NotFound),
        Err(e) => return Err(ReadError::Io(e.to_string())),
        Ok(m) if m.file_type().is_symlink() && !path.exists() => {
            let target = std::fs::read_link(path)
                .map(|t| t.display().to_string())
                .unwrap_or_default();
            return Err(ReadError::DanglingLink(target));
        }
        Ok(_) => {}
    }
    let mut options = std::fs::OpenOptions::new();
    options.read(true);
    #[cfg(unix)]
    {
        use std::os::unix::fs::OpenOptionsExt as _;
        // A FIFO opened for reading would wait for a writer: open it non-blocking, then refuse
        // it from the handle's own metadata (no gap between the check and the read).
        options.custom_flags(libc::O_NONBLOCK);
    }
    let file = options.open(path).map_err(|e| match e.kind() {
        std::io::ErrorKind::NotFound => ReadError::NotFound,
        _ => ReadError::Io(e.to_string()),
    })?;
    let meta = file.metadata().map_err(|e| ReadError::Io(e.to_string()))?;
    let kind = meta.file_type();
    if kind.is_dir() {
        return Err(ReadError::IsDirectory);
    }
    if !kind.is_file() {
        return Err(ReadError::NotRegular(special_kind(&kind)));
    }
    if meta.len() > limit {
        return Err(ReadError::TooLarge {
            size: meta.len(),
            limit,
        });
    }
    let mut bytes = Vec::with_capacity(meta.len() as usize);
    file.take(limit.saturating_add(1))
        .read_to_end(&mut bytes)
        .map_err(|e| ReadError::Io(e.to_string()))?;
    if bytes.len() as u64 > limit {
        return Err(ReadError::TooLarge {
            size: bytes.len() as u64,
            limit,
        });
    }
    Ok(bytes)
}

fn special_kind(kind: &std::fs::FileType) -> &'static str {
    #[cfg(unix)]
    {
        use std::os::unix::fs::FileTypeExt as _;
        if kind.is_fifo() {
            return "a FIFO (named pipe)";
        }
        if kind.is_socket() {
            return "a socket";
        }
        if kind.is_char_device() {
            return "a character device";
        }
        if kind.is_block_device() {
            return "a block device";
        }
    }
    let _ = kind;
    "a special file"
}

/// Every input of one run, each read once from the campaign folder.
#[derive(Debug)]
pub struct InputStore {
    dir: PathBuf,
    /// The campaign folder with every link resolved, for the inside-the-folder rule.
    canonical: Option<PathBuf>,
    limit: u64,
    files: BTreeMap<String, InputFile>,
}

impl InputStore {
    /// A store reading from the campaign folder `dir`, refusing files over `limit` bytes.
    pub fn new(dir: &Path, limit: u64) -> InputStore {
        let base = if dir.as_os_str().is_empty() {
            Path::new(".")
        } else {
            dir
        };
        InputStore {
            dir: dir.to_path_buf(),
            canonical: std::fs::canonicalize(base).ok(),
            limit,
            files: BTreeMap::new(),
        }
    }

    /// Where a campaign-relative path lies on disk (for messages).
    pub fn path(&self, rel: &str) -> PathBuf {
        self.dir.join(rel)
    }

    /// The file at campaign-relative `rel` (clean, `/`-separated): read on first use, the
    /// same bytes on every later use.
    pub fn read(&mut self, rel: &str) -> Result<InputFile, ReadError> {
        if let Some(f) = self.files.get(rel) {
            return Ok(f.clone());
        }
        check_name(rel)?;
        let path = self.dir.join(rel);
        if std::fs::symlink_metadata(&path).is_ok() {
            self.check_inside(&path)?;
        }
        let bytes: Arc<[u8]> = read_regular(&path, self.limit)?.into();
        let file = InputFile {
            rel: rel.to_string(),
            sha256: sha256_hex(&bytes),
            bytes,
        };
        self.files.insert(rel.to_string(), file.clone());
        Ok(file)
    }

    /// A path, with every symbolic link on its way resolved, must lie inside the campaign
    /// folder.
    fn check_inside(&self, path: &Path) -> Result<(), ReadError> {
        let target = match std::fs::canonicalize(path) {
            Ok(t) => t,
            Err(_) => {
                let t = std::fs::read_link(path)
                    .map(|t| t.display().to_string())
                    .unwrap_or_else(|_| path.display().to_string());
                return Err(ReadError::DanglingLink(t));
            }
        };
        match &self.canonical {
            Some(root) if target.starts_with(root) => Ok(()),
            _ => Err(ReadError::LinkOutside(target.display().to_string())),
        }
    }

    /// Every file read, sorted by path.
    pub fn into_files(self) -> Vec<InputFile> {
        self.files.into_values().collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn folder(name: &str) -> PathBuf {
        let dir = std::env::temp_dir().join(format!(
            "beamproof-input-store-{name}-{}",
            std::process::id()
        ));
        let _ = std::fs::remove_dir_all(&dir);
        std::fs::create_dir_all(dir.join("campaign/data")).expect("dir");
        dir
    }

    #[test]
    fn a_file_is_read_once_and_later_reads_get_the_same_bytes() {
        let dir = folder("once");
        let c = dir.join("campaign");
        std::fs::write(c.join("data/a.csv"), b"first").expect("write");
        let mut store = InputStore::new(&c, 100);
        let a = store.read("data/a.csv").expect("read");
        std::fs::write(c.join("data/a.csv"), b"changed").expect("write");
        let b = store.read("data/a.csv").expect("read again");
        assert_eq!(&*b.bytes, b"first");
        assert_eq!(a, b);
        // SHA-256("first"), computed with Python's hashlib (general-purpose reference).
        assert_eq!(
            a.sha256,
            "a7937b64b8caa58f03721bb6bacf5c78cb235febe0e70b1b84cd99541461a08e"
        );
        std::fs::remove_file(c.join("data/a.csv")).expect("remove");
        assert_eq!(store.read("data/a.csv").expect("kept").bytes, a.bytes);
        let _ = std::fs::remove_dir_all(&dir);
    }

    #[test]
    fn special_files_missing_files_and_folders_are_named_as_such() {
        let dir = folder("special");
        let c = dir.join("campaign");
        let mut store = InputStore::new(&c, 100);
        assert_eq!(store.read("data/none.csv"), Err(ReadError::NotFound));
        assert_eq!(store.read("data"), Err(ReadError::IsDirectory));
        #[cfg(unix)]
        {
            let fifo = c.join("data/pipe.csv");
            let made = std::process::Command::new("mkfifo").arg(&fifo).status();
            if made.is_ok_and(|s| s.success()) {
                // Would block forever if opened for a blocking read.
                assert_eq!(
                    store.read("data/pipe.csv"),
                    Err(ReadError::NotRegular("a FIFO (named pipe)"))
                );
            }
            assert_eq!(
                read_regular(Path::new("/dev/zero"), 100),
                Err(ReadError::NotRegular("a character device"))
            );
        }
        let _ = std::fs::remove_dir_all(&dir);
    }

    #[test]
    fn a_file_over_the_limit_is_refused_before_it_is_read() {
        let dir = folder("limit");
        let c = dir.join("campaign");
        std::fs::write(c.join("data/big.csv"), vec![b'x'; 101]).expect("write");
        std::fs::write(c.join("data/fits.csv"), vec![b'x'; 100]).expect("write");
        let mut store = InputStore::new(&c, 100);
        assert_eq!(
            store.read("data/big.csv"),
            Err(ReadError::TooLarge {
                size: 101,
                limit: 100
            })
        );
        assert_eq!(store.read("data/fits.csv").expect("fits").bytes.len(), 100);
        let _ = std::fs::remove_dir_all(&dir);
    }

    #[cfg(unix)]
    #[test]
    fn links_must_stay_inside_the_campaign_folder() {
        let dir = folder("links");
        let c = dir.join("campaign");
        std::fs::write(dir.join("outside.csv"), b"outside").expect("write");
        std::fs::write(c.join("data/real.csv"), b"inside").expect("write");
        std::os::unix::fs::symlink("real.csv", c.join("data/inner.csv")).expect("link");
        std::os::unix::fs::symlink("../../outside.csv", c.join("data/outer.csv")).expect("link");
        std::os::unix::fs::symlink("gone.csv", c.join("data/dangling.csv")).expect("link");
        std::os::unix::fs::symlink(&dir, c.join("up")).expect("link");
        let mut store = InputStore::new(&c, 100);
        assert_eq!(
            &*store.read("data/inner.csv").expect("inside").bytes,
            b"inside"
        );
        assert!(matches!(
            store.read("data/outer.csv"),
            Err(ReadError::LinkOutside(_))
        ));
        assert!(matches!(
            store.read("up/outside.csv"),
            Err(ReadError::LinkOutside(_))
        ));
        assert_eq!(
            store.read("data/dangling.csv"),
            Err(ReadError::DanglingLink("gone.csv".into()))
        );
        let _ = std::fs::remove_dir_all(&dir);
    }

    #[test]
    fn names_a_manifest_cannot_hold_are_refused_escaped() {
        assert_eq!(
            check_name("data/a\nb.csv"),
            Err(ReadError::BadName("data/a\\nb.csv".into()))
        );
        assert!(check_name("data/a\\b.csv").is_err());
        assert!(check_name("data/a\u{7}.csv").is_err());
        assert!(check_name("data/dose é (1).csv").is_ok());
    }
}
