//! The plugin registry: the explicit list of built-in analyses plus dynamic plugins loaded from
//! plugin folders with libloading. Every call into a plugin is guarded so a panic becomes an
//! error of that test, never a crash of the run.

use std::panic::{AssertUnwindSafe, catch_unwind};
use std::path::{Path, PathBuf};

use beamproof_api::abi::{self, ABI_MAJOR, ABI_MINOR, ENTRY_SYMBOL, PluginDescriptor};
use beamproof_api::{Analysis, AnalysisInput, AnalysisOutput, PluginManifest};

use crate::diag::{Diagnostic, error_chain};

/// Every built-in analysis, in the order `beamproof plugins` lists them.
fn built_ins() -> Vec<Box<dyn Analysis>> {
    vec![
        Box::new(beamproof_plugin_point_dose::PointDose),
        Box::new(beamproof_plugin_gamma::Gamma),
        Box::new(beamproof_plugin_depth_dose::DepthDose),
        Box::new(beamproof_plugin_profile::Profile),
        Box::new(beamproof_plugin_mu_check::MuCheck),
        Box::new(beamproof_plugin_film::Film),
    ]
}

/// Where a plugin came from.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Origin {
    BuiltIn,
    /// A library loaded from `path`: exactly the bytes read there (`sha256` is theirs); the
    /// run folder keeps these bytes.
    Dynamic {
        path: PathBuf,
        sha256: String,
        bytes: std::sync::Arc<[u8]>,
    },
}

enum Imp {
    BuiltIn(Box<dyn Analysis>),
    /// Plugins stay loaded for the life of the process (the library is leaked on purpose):
    /// unloading Rust dynamic libraries is fragile and the descriptor must never dangle.
    Dynamic(&'static PluginDescriptor),
}

/// A usable plugin.
pub struct Plugin {
    pub manifest: PluginManifest,
    pub origin: Origin,
    imp: Imp,
}

impl Plugin {
    /// Run the analysis; a panic or protocol failure becomes an error message.
    pub fn analyse(&self, input: &AnalysisInput) -> Result<AnalysisOutput, String> {
        match &self.imp {
            Imp::BuiltIn(a) => match catch_unwind(AssertUnwindSafe(|| a.analyse(input))) {
                Ok(r) => r.map_err(|e| e.message),
                Err(p) => Err(format!("plugin panicked: {}", panic_message(p.as_ref()))),
            },
            // SAFETY: the descriptor was validated at load time and its library is never unloaded.
            Imp::Dynamic(desc) => {
                unsafe { abi::call_analyse(desc, input) }.map_err(|e| e.to_string())
            }
        }
    }
}

fn panic_message(p: &(dyn std::any::Any + Send)) -> String {
    p.downcast_ref::<&str>()
        .map(|s| s.to_string())
        .or_else(|| p.downcast_ref::<String>().cloned())
        .unwrap_or_else(|| "unknown panic".into())
}

/// All plugins available to a run.
pub struct Registry {
    plugins: Vec<Plugin>,
}

impl Registry {
    /// The built-in plugins only.
    pub fn built_in() -> Registry {
        Registry {
            plugins: built_ins()
                .into_iter()
                .map(|a| Plugin {
                    manifest: a.manifest(),
                    origin: Origin::BuiltIn,
                    imp: Imp::BuiltIn(a),
                })
                .collect(),
        }
    }

    /// Built-ins plus every dynamic plugin found directly inside `dirs` (files ending in the
    /// platform's library suffix, loaded in file-name order). All problems are returned together.
    pub fn with_dirs(dirs: &[PathBuf]) -> Result<Registry, Vec<Diagnostic>> {
        let mut reg = Registry::built_in();
        let mut diags = Vec::new();
        for dir in dirs {
            if !dir.is_dir() {
                diags.push(
                    Diagnostic::file(dir, "plugin folder does not exist")
                        .help("create it, or correct `plugin-dirs` / `--plugin-dir`"),
                );
                continue;
            }
            let mut files: Vec<PathBuf> = walkdir::WalkDir::new(dir)
                .max_depth(1)
                .sort_by_file_name()
                .into_iter()
                .filter_map(Result::ok)
                .filter(|e| e.file_type().is_file() || e.file_type().is_symlink())
                .map(|e| e.into_path())
                .filter(|p| p.to_string_lossy().ends_with(std::env::consts::DLL_SUFFIX))
                .collect();
            files.dedup();
            for file in files {
                match load(&file) {
                    Ok(p) => {
                        let same_library = |o: &Origin| match (o, &p.origin) {
                            (
                                Origin::Dynamic { sha256: a, .. },
                                Origin::Dynamic { sha256: b, .. },
                            ) => a == b,
                            _ => false,
                        };
                        if reg
                            .get(&p.manifest.name)
                            .is_some_and(|o| same_library(&o.origin))
                        {
                            // The same library twice (a run folder's copy beside the original
                            // folder): one is enough.
                            continue;
                        }
                        if let Some(other) = reg.get(&p.manifest.name) {
                            let from = match &other.origin {
                                Origin::BuiltIn => "a built-in plugin".to_string(),
                                Origin::Dynamic { path, .. } => path.display().to_string(),
                            };
                            diags.push(
                                Diagnostic::file(
                                    &file,
                                    format!(
                                        "plugin name `{}` is already taken by {from}",
                                        p.manifest.name
                                    ),
                                )
                                .help("rename the plugin or remove one of the two"),
                            );
                        } else {
                            reg.plugins.push(p);
                        }
                    }
                    Err(d) => diags.push(d),
                }
            }
        }
        if diags.is_empty() {
            Ok(reg)
        } else {
            Err(diags)
        }
    }

    pub fn get(&self, name: &str) -> Option<&Plugin> {
        self.plugins.iter().find(|p| p.manifest.name == name)
    }

    pub fn plugins(&self) -> &[Plugin] {
        &self.plugins
    }

    pub fn names(&self) -> impl Iterator<Item = &str> {
        self.plugins.iter().map(|p| p.manifest.name.as_str())
    }
}

/// Load one dynamic plugin and check its ABI before using anything else in it.
pub fn load(path: &Path) -> Result<Plugin, Diagnostic> {
    let fail = |msg: String, help: &str| Diagnostic::file(path, msg).help(help);
    let bytes: std::sync::Arc<[u8]> =
        crate::input_store::read_regular(path, crate::input_store::DEFAULT_MAX_INPUT_BYTES)
            .map_err(|e| fail(format!("cannot read plugin: {e}"), e.help()))?
            .into();
    let sha256 = crate::checksum::sha256_hex(&bytes);
    // The library is loaded from a private copy of the bytes just hashed, so the code that
    // runs is the code the run folder keeps, even if the file changes meanwhile.
    let lib = load_private_copy(path, &bytes).map_err(|e| {
        fail(
            format!("cannot load plugin: {e}"),
            "the file must be a beamproof plugin built for this platform",
        )
    })?;
    // SAFETY: the symbol's type is fixed by the ABI; a plugin without it is refused below.
    let entry = unsafe {
        lib.get::<unsafe extern "C" fn() -> *const PluginDescriptor>(ENTRY_SYMBOL)
    }
    .map_err(|e| {
        fail(
            format!(
                "not a beamproof plugin of ABI {ABI_MAJOR}: {}",
                error_chain(&e)
            ),
            &format!(
                "a plugin must export `{ENTRY_SYMBOL}`; build it with beamproof_api::export_plugin!"
            ),
        )
    })?;
    // SAFETY: calling the entry returns a pointer to a static descriptor.
    let ptr = unsafe { entry() };
    if ptr.is_null() {
        return Err(fail(
            "plugin returned no descriptor".into(),
            "rebuild the plugin with beamproof_api::export_plugin!",
        ));
    }
    // SAFETY: every ABI version starts with abi_major and abi_minor (u32); read them before
    // trusting the rest of the layout.
    let (major, minor) = unsafe { (*(ptr as *const u32), *(ptr as *const u32).add(1)) };
    if major != ABI_MAJOR {
        return Err(fail(
            format!(
                "plugin ABI {major}.{minor} is not supported; this beamproof reads ABI {ABI_MAJOR}.x (up to {ABI_MAJOR}.{ABI_MINOR})"
            ),
            &format!(
                "rebuild the plugin against the beamproof-api crate of this release (ABI {ABI_MAJOR}.{ABI_MINOR})"
            ),
        ));
    }
    // SAFETY: major version matches, so the version-1 prefix layout applies.
    let size = unsafe { *(ptr as *const u32).add(2) } as usize;
    if size < std::mem::size_of::<PluginDescriptor>() {
        return Err(fail(
            format!("plugin descriptor is {size} bytes, smaller than ABI {ABI_MAJOR} requires"),
            "rebuild the plugin",
        ));
    }
    // Leak the library: the descriptor and its functions must stay valid for the whole process.
    let lib: &'static libloading::Library = Box::leak(Box::new(lib));
    let _ = lib;
    // SAFETY: validated above; the library is never unloaded.
    let desc: &'static PluginDescriptor = unsafe { &*ptr };
    // SAFETY: the descriptor is valid and loaded.
    let manifest = unsafe { abi::call_manifest(desc) }
        .map_err(|e| fail(format!("plugin manifest: {e}"), "fix the plugin's manifest"))?;
    if manifest.name.is_empty()
        || !manifest
            .name
            .chars()
            .all(|c| c.is_ascii_lowercase() || c.is_ascii_digit() || c == '-')
    {
        return Err(fail(
            format!("plugin name `{}` is not kebab-case", manifest.name),
            "plugin names use lower-case letters, digits and `-`",
        ));
    }
    Ok(Plugin {
        manifest,
        origin: Origin::Dynamic {
            path: path.to_path_buf(),
            sha256,
            bytes,
        },
        imp: Imp::Dynamic(desc),
    })
}

/// Write `bytes` into a new owner-only folder, load the library from there and remove the copy
/// (the loaded image stays mapped).
fn load_private_copy(path: &Path, bytes: &[u8]) -> Result<libloading::Library, String> {
    use std::sync::atomic::{AtomicUsize, Ordering};
    static NEXT: AtomicUsize = AtomicUsize::new(0);
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| format!("plugin{}", std::env::consts::DLL_SUFFIX));
    let dir = loop {
        let n = NEXT.fetch_add(1, Ordering::Relaxed);
        let dir = std::env::temp_dir().join(format!("beamproof-plugin-{}-{n}", std::process::id()));
        let mut builder = std::fs::DirBuilder::new();
        #[cfg(unix)]
        std::os::unix::fs::DirBuilderExt::mode(&mut builder, 0o700);
        match builder.create(&dir) {
            Ok(()) => break dir,
            Err(e) if e.kind() == std::io::ErrorKind::AlreadyExists => continue,
            Err(e) => return Err(format!("cannot make a private copy: {e}")),
        }
    };
    let copy = dir.join(name);
    let written = std::fs::File::create_new(&copy).and_then(|mut f| {
        use std::io::Write as _;
        f.write_all(bytes)?;
        f.sync_all()
    });
    // SAFETY: loading a library runs its initialisers; plugins come only from folders the user
    // named, which is the trust decision of installing a plugin.
    let loaded = written
        .map_err(|e| format!("cannot make a private copy: {e}"))
        .and_then(|()| unsafe { libloading::Library::new(&copy) }.map_err(|e| error_chain(&e)));
    let _ = std::fs::remove_file(&copy);
    let _ = std::fs::remove_dir(&dir);
    loaded
}
