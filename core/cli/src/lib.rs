//! The `beamproof` command as a library: argument parsing, error rendering and exit codes.
//! Glue only; the work is done by beamproof-engine (campaign, inputs, analyses) and
//! beamproof-report (PDF). `main.rs` calls [`main_with`] with the process's streams; tests call
//! it with buffers.
//!
//! Exit codes: 0 success (run: verdict GO), 1 run finished with NO-GO (a test failed or could
//! not be analysed), 2 could not run (bad input or usage), 3 verification found changed or
//! missing files.

use std::ffi::OsString;
use std::io::Write;
use std::path::{Path, PathBuf};

use beamproof_engine::campaign::{Campaign, Machine};
use beamproof_engine::checksum::verify_run;
use beamproof_engine::diag::{Diagnostic, render_all};
use beamproof_engine::prepare::{Prepared, choose_machine, prepare};
use beamproof_engine::registry::{Origin, Registry};
use beamproof_engine::run::{CAUTIONS, FileRecord, run};
use beamproof_engine::signing;
use clap::{Parser, Subcommand};

mod gamma_cmd;
mod mu_cmd;

/// Success; for `run`, the verdict is GO.
pub const EXIT_GO: u8 = 0;
/// `run` finished and the verdict is NO-GO.
pub const EXIT_NO_GO: u8 = 1;
/// Bad input or usage: nothing was run or written.
pub const EXIT_CANNOT_RUN: u8 = 2;
/// `verify` found changed or missing files.
pub const EXIT_VERIFY_FAILED: u8 = 3;

const AFTER_HELP: &str = "\
Exit codes: 0 success (GO), 1 ran with failures or errors (NO-GO), 2 could not run, 3 verification failed.

Cautions: results must be reviewed and signed by a qualified medical physicist before clinical use.
beamproof is not a medical device. Local regulations and licensed practice prevail.";

#[derive(Parser)]
#[command(name = "beamproof", version, about = "Commissioning and beam-model validation campaigns for radiotherapy linacs, with checksummed PDF reports", after_help = AFTER_HELP)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Check a campaign file and read every input, without running any analysis
    Check {
        campaign: PathBuf,
        /// Check only this machine (default: every machine of the campaign)
        #[arg(long)]
        machine: Option<String>,
        /// The run date `run` will be given with --date, when the campaign states none
        #[arg(long)]
        date: Option<String>,
        #[command(flatten)]
        inputs: InputArgs,
    },
    /// Run a campaign for one machine and write a run folder with results, report and manifest
    Run {
        campaign: PathBuf,
        /// Machine to run (needed when the campaign describes several)
        #[arg(long)]
        machine: Option<String>,
        /// Run folder to create (default: runs/CAMPAIGN-MACHINE-DATE); never overwritten
        #[arg(long)]
        out: Option<PathBuf>,
        /// Run date YYYY-MM-DD recorded in the results (default: the campaign's `date`)
        #[arg(long)]
        date: Option<String>,
        #[command(flatten)]
        inputs: InputArgs,
    },
    /// Re-compute every checksum of a run folder's manifest and check its signatures
    Verify {
        run_dir: PathBuf,
        /// Folder of trusted public keys (`*.pub`); signatures by other keys are reported as such
        #[arg(long = "trusted-keys")]
        trusted_keys: Option<PathBuf>,
    },
    /// Make an Ed25519 key pair for signing runs (the secret file is owner-only)
    Keygen {
        /// The signer's name, as it will appear on signatures
        #[arg(long)]
        name: String,
        /// The signer's role, e.g. "medical physicist" or "chief physicist"
        #[arg(long)]
        role: String,
        /// Key file to create (the public key goes to KEYFILE.pub); never overwritten
        #[arg(long)]
        out: PathBuf,
    },
    /// Match a second machine: compare run B's measurements against run A's, test by test
    Compare {
        run_a: PathBuf,
        run_b: PathBuf,
        /// Matching criteria set of the campaign (default: the built-in 1 %/1 mm set)
        #[arg(long)]
        criteria: Option<String>,
        /// Matching-run folder to create (default: runs/CAMPAIGN-match-B-A-DATE); never overwritten
        #[arg(long)]
        out: Option<PathBuf>,
        /// Date recorded YYYY-MM-DD (default: today, UTC)
        #[arg(long)]
        date: Option<String>,
    },
    /// The tamper-evident archive of run folders
    #[command(subcommand)]
    Archive(ArchiveCommand),
    /// Sign a run folder: a detached signature of its manifest, added under signatures/
    Sign {
        run_dir: PathBuf,
        /// Key file made by `beamproof keygen`
        #[arg(long)]
        key: PathBuf,
        /// What the signer states
        #[arg(
            long,
            default_value = "I have reviewed this commissioning run and its report."
        )]
        statement: String,
        /// Signing date YYYY-MM-DD (default: today, UTC)
        #[arg(long)]
        date: Option<String>,
        /// The run's verdict, typed to sign a run that is not GO (or MATCHED): the signature
        /// records that the signer saw it, e.g. `--acknowledge-verdict NO-GO`
        #[arg(long = "acknowledge-verdict")]
        acknowledge_verdict: Option<String>,
    },
    /// Gamma comparison of two files outside a campaign (DICOM RT Dose or data CSV)
    Gamma(gamma_cmd::GammaArgs),
    /// Independent MU check of a DICOM RT Plan from beam data, printed line by line
    Mu(mu_cmd::MuArgs),
    /// List the built-in plugins and those found in plugin folders
    Plugins {
        /// Also load the plugin folders named by this campaign
        #[arg(long)]
        campaign: Option<PathBuf>,
        /// Folder of dynamic plugins (repeatable)
        #[arg(long = "plugin-dir")]
        plugin_dirs: Vec<PathBuf>,
    },
}

/// Where plugins come from and how large an input may be, for the commands that read a campaign.
#[derive(clap::Args)]
struct InputArgs {
    /// Extra folder of dynamic plugins (repeatable)
    #[arg(long = "plugin-dir")]
    plugin_dirs: Vec<PathBuf>,
    /// Largest input file read, in MiB; a larger file is refused before it is read
    #[arg(long = "max-input-mb", default_value_t = DEFAULT_MAX_INPUT_MB, value_parser = clap::value_parser!(u64).range(1..=1_048_576))]
    max_input_mb: u64,
}

impl InputArgs {
    fn max_input_bytes(&self) -> u64 {
        self.max_input_mb << 20
    }
}

/// Default of `--max-input-mb` (the engine's default input limit, 1 GiB).
const DEFAULT_MAX_INPUT_MB: u64 = beamproof_engine::input_store::DEFAULT_MAX_INPUT_BYTES >> 20;

#[derive(Subcommand)]
enum ArchiveCommand {
    /// Copy a verified run folder into the archive (created when missing or empty)
    Add {
        run_dir: PathBuf,
        #[arg(long)]
        archive: PathBuf,
        /// Date recorded for the entry YYYY-MM-DD (default: today, UTC)
        #[arg(long)]
        date: Option<String>,
    },
    /// Re-hash every stored file and the whole ledger chain, check every stored run against its
    /// own manifest and every seal, naming what is wrong
    Verify {
        archive: PathBuf,
        /// Folder of trusted public keys (`*.pub`): seals must be made by them
        #[arg(long = "trusted-keys")]
        trusted_keys: Option<PathBuf>,
    },
    /// Sign the archive's current head (how many entries it holds and the last one's digest), so
    /// that removing the newest entries later is detected
    Seal {
        #[arg(long)]
        archive: PathBuf,
        /// Key file made by `beamproof keygen`
        #[arg(long)]
        key: PathBuf,
        /// Sealing date YYYY-MM-DD (default: today, UTC)
        #[arg(long)]
        date: Option<String>,
    },
    /// List the archived runs
    List {
        #[arg(long)]
        archive: PathBuf,
    },
    /// Show one entry: its files, checksums and signatures
    Show {
        id: String,
        #[arg(long)]
        archive: PathBuf,
    },
    /// Restore an entry's run folder byte for byte into DEST (which must not exist)
    Export {
        id: String,
        dest: PathBuf,
        #[arg(long)]
        archive: PathBuf,
    },
}

/// Write a line to the command's standard output; a closed pipe is not an error worth a panic.
macro_rules! outln {
    ($io:expr, $($arg:tt)*) => {{ let _ = writeln!($io.out, $($arg)*); }};
}

/// A failure already rendered for the terminal, with its exit code.
pub(crate) struct Failure {
    pub(crate) text: String,
    pub(crate) code: u8,
}

impl From<Vec<Diagnostic>> for Failure {
    fn from(d: Vec<Diagnostic>) -> Self {
        Failure {
            text: render_all(&d),
            code: EXIT_CANNOT_RUN,
        }
    }
}

impl From<Diagnostic> for Failure {
    fn from(d: Diagnostic) -> Self {
        vec![d].into()
    }
}

/// Output streams and whether stderr is a terminal (for the progress bar).
pub struct Io<'a> {
    pub out: &'a mut dyn Write,
    pub err: &'a mut dyn Write,
    pub progress: bool,
}

/// Run the command line `args` (including the program name) and return the exit code.
pub fn main_with(args: impl IntoIterator<Item = OsString>, io: &mut Io) -> u8 {
    let cli = match Cli::try_parse_from(args) {
        Ok(c) => c,
        Err(e) => {
            let _ = write!(io.err, "{}", e.render());
            return if e.use_stderr() {
                EXIT_CANNOT_RUN
            } else {
                EXIT_GO
            };
        }
    };
    let result = match cli.command {
        Command::Check {
            campaign,
            machine,
            date,
            inputs,
        } => check(io, &campaign, machine.as_deref(), date, &inputs),
        Command::Run {
            campaign,
            machine,
            out,
            date,
            inputs,
        } => run_campaign(io, &campaign, machine.as_deref(), out, date, &inputs),
        Command::Verify {
            run_dir,
            trusted_keys,
        } => verify(io, &run_dir, trusted_keys.as_deref()),
        Command::Keygen { name, role, out } => keygen(io, &name, &role, &out),
        Command::Archive(a) => archive_cmd(io, a),
        Command::Compare {
            run_a,
            run_b,
            criteria,
            out,
            date,
        } => compare(io, &run_a, &run_b, criteria.as_deref(), out, date),
        Command::Sign {
            run_dir,
            key,
            statement,
            date,
            acknowledge_verdict,
        } => sign(
            io,
            &run_dir,
            &key,
            &statement,
            date,
            acknowledge_verdict.as_deref(),
        ),
        Command::Gamma(args) => gamma_cmd::run(io, args),
        Command::Mu(args) => mu_cmd::run(io, args),
        Command::Plugins {
            campaign,
            plugin_dirs,
        } => plugins(io, campaign.as_deref(), &plugin_dirs),
    };
    match result {
        Ok(code) => code,
        Err(f) => {
            let _ = writeln!(io.err, "{}", f.text);
            f.code
        }
    }
}

/// Exit code of a one-off analysis: 1 when anything failed, else 0.
pub(crate) fn exit_for(worst: beamproof_api::Status) -> u8 {
    if worst >= beamproof_api::Status::Fail {
        EXIT_NO_GO
    } else {
        EXIT_GO
    }
}

/// Which machines a command prepares.
enum Machines<'a> {
    All,
    One(Option<&'a str>),
}

/// Load the campaign, the plugins and every input for the chosen machines, collecting every
/// problem of every stage before giving up, so the user sees them all at once.
fn gather(
    campaign: &Path,
    machines: Machines,
    inputs: &InputArgs,
) -> Result<(Campaign, Registry, Vec<Prepared>), Failure> {
    let extra_dirs = &inputs.plugin_dirs;
    let (c, mut diags) = Campaign::load_partial(campaign);
    let Some(c) = c else {
        return Err(diags.into());
    };
    let mut dirs: Vec<PathBuf> = c.plugin_dirs.iter().map(|(p, _)| c.dir.join(p)).collect();
    dirs.extend(extra_dirs.iter().cloned());
    let registry = Registry::with_dirs(&dirs).unwrap_or_else(|d| {
        diags.extend(d);
        Registry::built_in()
    });
    diags.extend(beamproof_engine::prepare::check_criteria_use(&c, &registry));
    let chosen: Vec<Machine> = match machines {
        Machines::All => c.machines.clone(),
        Machines::One(id) => match choose_machine(&c, id) {
            Ok(m) => vec![m.clone()],
            Err(d) if diags.is_empty() => return Err(d.into()),
            Err(_) => Vec::new(),
        },
    };
    let mut prepared = Vec::new();
    for m in &chosen {
        match prepare(&c, &registry, m, inputs.max_input_bytes()) {
            Ok(p) => prepared.push(p),
            Err(ds) => {
                for d in ds {
                    if !diags.contains(&d) {
                        diags.push(d);
                    }
                }
            }
        }
    }
    if diags.is_empty() {
        Ok((c, registry, prepared))
    } else {
        Err(diags.into())
    }
}

fn check(
    io: &mut Io,
    campaign: &Path,
    machine: Option<&str>,
    date: Option<String>,
    inputs: &InputArgs,
) -> Result<u8, Failure> {
    let which = if machine.is_some() {
        Machines::One(machine)
    } else {
        Machines::All
    };
    let (c, registry, prepared) = gather(campaign, which, inputs)?;
    // `run` needs a run date: the same rule here, so that a campaign `check` passes runs.
    let date = run_date(campaign, date.or_else(|| c.date.clone()))?;
    // A campaign's own report template is compiled too, on results without tests, so that its
    // mistakes show now and not at the end of a run.
    if let Some(p) = prepared.first().filter(|p| p.templates.is_some()) {
        let empty = Prepared {
            tests: Vec::new(),
            ..p.clone()
        };
        let record = beamproof_engine::run::run(&c, &empty, &registry, &date, |_, _, _| {});
        render_reports(&c, &empty, &record.to_json())?;
    }
    let n_tests: usize = prepared.iter().map(|p| p.tests.len()).sum();
    let ids: Vec<&str> = prepared.iter().map(|p| p.machine.id.as_str()).collect();
    outln!(
        io,
        "{}: ok ({n_tests} test runs over machines {}; every input read)",
        campaign.display(),
        ids.join(", ")
    );
    Ok(EXIT_GO)
}

fn run_campaign(
    io: &mut Io,
    campaign: &Path,
    machine: Option<&str>,
    out: Option<PathBuf>,
    date: Option<String>,
    inputs: &InputArgs,
) -> Result<u8, Failure> {
    let (c, registry, mut prepared) = gather(campaign, Machines::One(machine), inputs)?;
    let Some(prepared) = prepared.pop() else {
        return Err(Diagnostic::file(campaign, "no machine to run").into());
    };
    let m = prepared.machine.clone();
    let date = run_date(campaign, date.or_else(|| c.date.clone()))?;
    let out =
        out.unwrap_or_else(|| PathBuf::from("runs").join(format!("{}-{}-{date}", c.id, m.id)));
    if out.exists() {
        return Err(Failure {
            text: format!(
                "error: run folder {} already exists; runs are never overwritten\n  = help: choose another folder with --out",
                out.display()
            ),
            code: EXIT_CANNOT_RUN,
        });
    }
    let bar = if io.progress {
        indicatif::ProgressBar::new(prepared.tests.len() as u64)
    } else {
        indicatif::ProgressBar::hidden()
    };
    let record = run(&c, &prepared, &registry, &date, |done, _, id| {
        bar.set_position(done as u64);
        bar.set_message(id.to_string());
    });
    bar.finish_and_clear();
    let mut record = record;
    if prepared.templates.is_none() {
        record.report.files.push(FileRecord {
            file: format!(
                "templates/{} (built into beamproof {})",
                beamproof_report::TEMPLATE_FILE,
                env!("CARGO_PKG_VERSION")
            ),
            sha256: beamproof_engine::checksum::sha256_hex(
                beamproof_report::BUILT_IN_TEMPLATE.as_bytes(),
            ),
        });
    }
    let pdf = write_run(
        io,
        &out,
        &c,
        &prepared,
        &record.to_json(),
        &record.product_files,
    )?;
    print_folder(io, "run folder", &out, &pdf);
    print_summary(io, &format!("machine {}", m.id), "tests", &record.summary);
    Ok(if record.is_go() { EXIT_GO } else { EXIT_NO_GO })
}

/// The run date: `--date`, else the campaign's `date:`; a valid ISO date is required.
fn run_date(campaign: &Path, date: Option<String>) -> Result<String, Failure> {
    match date {
        Some(d) if beamproof_engine::campaign::valid_iso_date(&d) => Ok(d),
        Some(d) => Err(
            Diagnostic::file(campaign, format!("run date `{d}` is not a valid date"))
                .help("write --date YYYY-MM-DD")
                .into(),
        ),
        None => Err(Diagnostic::file(
            campaign,
            "no run date: the results record the date the measurements were analysed",
        )
        .help("add `date: YYYY-MM-DD` to the campaign or pass --date YYYY-MM-DD")
        .into()),
    }
}

/// The counts, verdict, reasons and notes of a run, then the cautions.
fn print_summary(io: &mut Io, heading: &str, counted: &str, s: &beamproof_engine::run::Summary) {
    outln!(
        io,
        "{heading} · {} {counted}: {} pass, {} warn, {} fail, {} error",
        s.tests,
        s.pass,
        s.warn,
        s.fail,
        s.error
    );
    outln!(io, "verdict: {} (advisory)", s.verdict);
    for r in &s.reasons {
        outln!(io, "  - {r}");
    }
    for n in &s.notes {
        outln!(io, "note: {n}");
    }
    outln!(io, "");
    for caution in CAUTIONS {
        outln!(io, "caution: {caution}");
    }
}

fn verify(io: &mut Io, run_dir: &Path, trusted_dir: Option<&Path>) -> Result<u8, Failure> {
    let v = verify_run(run_dir).map_err(|e| Failure {
        text: format!("error: {e}\n  = help: give a run folder made by `beamproof run`"),
        code: EXIT_CANNOT_RUN,
    })?;
    let trusted = match trusted_dir {
        Some(d) => Some(signing::trusted_keys(d).map_err(|e| Failure {
            text: format!(
                "error: {e}\n  = help: give a folder of `*.pub` files made by `beamproof keygen`"
            ),
            code: EXIT_CANNOT_RUN,
        })?),
        None => None,
    };
    for f in &v.findings {
        outln!(io, "{f}");
    }
    for u in v.planted() {
        outln!(io, "not covered by the manifest: {}", signing::printable(u));
    }
    let files_ok = v.is_intact();
    if files_ok {
        outln!(
            io,
            "{}: all {} files match the manifest",
            run_dir.display(),
            v.ok.len()
        );
    } else {
        outln!(
            io,
            "{}: {} problem(s); {} files match",
            run_dir.display(),
            v.findings.len() + v.planted().count(),
            v.ok.len()
        );
    }
    let verdict = v
        .files
        .get("results.json")
        .filter(|_| v.ok.iter().any(|o| o == "results.json"))
        .and_then(|b| beamproof_engine::run::verdict_in(b));
    outln!(
        io,
        "run verdict: {}",
        verdict
            .as_deref()
            .unwrap_or("unknown (results.json missing or changed)")
    );
    let checks = signing::verify_signatures(&v.signatures(), &v.manifest, trusted.as_deref());
    let mut sig_ok = true;
    for (file, c) in &checks {
        let file = signing::printable(file);
        match c {
            signing::SignatureCheck::Valid {
                statement: s,
                trusted,
            } => {
                if let Some(seen) = &s.verdict
                    && Some(seen) != verdict.as_ref()
                {
                    sig_ok = false;
                    outln!(
                        io,
                        "INVALID signature {file}: it states the verdict {}, the run's is {}",
                        signing::printable(seen),
                        verdict.as_deref().unwrap_or("unknown")
                    );
                    continue;
                }
                if *trusted == Some(false) {
                    sig_ok = false;
                }
                let key = match trusted {
                    Some(true) => "trusted key",
                    Some(false) => "UNKNOWN key (not in the trusted keys)",
                    None => "key not checked (no --trusted-keys)",
                };
                let seen = match &s.verdict {
                    Some(v) => format!("; saw verdict {}", signing::printable(v)),
                    None => String::new(),
                };
                outln!(
                    io,
                    "signed: {} ({}) on {}: \"{}\" [{file}; valid; {key}{seen}]",
                    signing::printable(&s.name),
                    signing::printable(&s.role),
                    signing::printable(&s.date),
                    signing::printable(&s.statement)
                );
            }
            signing::SignatureCheck::Invalid { reason } => {
                sig_ok = false;
                outln!(io, "INVALID signature {file}: {reason}");
            }
        }
    }
    if checks.is_empty() {
        outln!(io, "no signatures");
    }
    Ok(if files_ok && sig_ok {
        EXIT_GO
    } else {
        EXIT_VERIFY_FAILED
    })
}

/// Remove the left-overs of interrupted writes in `dir` whose process no longer runs, saying
/// what was removed and what could not be (with the command that removes it).
fn sweep_leftovers(io: &mut Io, dir: &Path) {
    let (removed, failed) = beamproof_engine::leftovers::sweep(dir);
    for p in removed {
        outln!(
            io,
            "removed {}, left by an interrupted earlier write",
            p.display()
        );
    }
    for (p, e) in failed {
        outln!(
            io,
            "note: {} was left by an interrupted earlier write and cannot be removed ({e}); remove it with `rm -r {}`",
            p.display(),
            p.display()
        );
    }
}

/// Where a run was written, and its report's checksum.
fn print_folder(io: &mut Io, label: &str, out: &Path, pdf: &[u8]) {
    outln!(io, "{label}: {}", out.display());
    outln!(
        io,
        "report: {} (SHA-256 {})",
        out.join("report.pdf").display(),
        beamproof_engine::checksum::sha256_hex(pdf)
    );
}

fn cannot_run(what: &str, e: String, help: &str) -> Failure {
    Failure {
        text: format!("error: {what}{e}\n  = help: {help}"),
        code: EXIT_CANNOT_RUN,
    }
}

/// The report and the HTML summary of `json`, with the campaign's templates when it has them.
fn render_reports(
    campaign: &Campaign,
    prepared: &Prepared,
    json: &[u8],
) -> Result<(Vec<u8>, String), Failure> {
    let template_help = "fix the template, or remove `report: templates:` to use the built-in one";
    let folder = prepared.template_files();
    let name = folder
        .as_ref()
        .map(|(dir, _)| campaign.dir.join(dir).display().to_string());
    let templates = match (&folder, &name) {
        (Some((_, files)), Some(name)) => Some(beamproof_report::TemplateFolder { name, files }),
        _ => None,
    };
    let pdf = beamproof_report::render_pdf(json, templates).map_err(|e| {
        cannot_run(
            "the report could not be made: ",
            e.to_string(),
            template_help,
        )
    })?;
    let html = beamproof_report::render_html(json, templates).map_err(|e| {
        cannot_run(
            "the HTML summary could not be made: ",
            e.to_string(),
            template_help,
        )
    })?;
    Ok((pdf, html))
}

/// Render the report and the HTML summary from the results and write the run folder (results,
/// report, its checksum, HTML, inputs, manifest) atomically; returns the report's bytes.
fn write_run(
    io: &mut Io,
    out: &Path,
    campaign: &Campaign,
    prepared: &Prepared,
    json: &[u8],
    analysis_files: &[(String, Vec<u8>)],
) -> Result<Vec<u8>, Failure> {
    let parent = out
        .parent()
        .filter(|p| !p.as_os_str().is_empty())
        .unwrap_or(Path::new("."));
    sweep_leftovers(io, parent);
    let (pdf, html) = render_reports(campaign, prepared, json)?;
    let pdf_sum = format!(
        "{}  report.pdf\n",
        beamproof_engine::checksum::sha256_hex(&pdf)
    );
    let mut products: Vec<(&str, &[u8])> = vec![
        ("results.json", json),
        ("report.pdf", &pdf),
        ("report.pdf.sha256", pdf_sum.as_bytes()),
        ("report.html", html.as_bytes()),
    ];
    products.extend(
        analysis_files
            .iter()
            .map(|(f, b)| (f.as_str(), b.as_slice())),
    );
    beamproof_engine::output::write_run_folder(out, campaign, prepared, &products).map_err(
        |e| {
            cannot_run(
                "",
                e.to_string(),
                "choose another folder with --out, or check free space and permissions",
            )
        },
    )?;
    Ok(pdf)
}

fn compare(
    io: &mut Io,
    run_a: &Path,
    run_b: &Path,
    criteria: Option<&str>,
    out: Option<PathBuf>,
    date: Option<String>,
) -> Result<u8, Failure> {
    let fail = |e: String, help: &str| Failure {
        text: format!("error: {e}\n  = help: {help}"),
        code: EXIT_CANNOT_RUN,
    };
    let date = date.unwrap_or_else(signing::today_utc);
    if !beamproof_engine::campaign::valid_iso_date(&date) {
        return Err(fail(
            format!("date `{date}` is not a valid date"),
            "write --date YYYY-MM-DD",
        ));
    }
    let registry = Registry::with_dirs(&[])?;
    let c = beamproof_engine::compare::compare(run_a, run_b, criteria, &registry, &date)?;
    let out = out.unwrap_or_else(|| PathBuf::from("runs").join(&c.record.run.id));
    if out.exists() {
        return Err(fail(
            format!(
                "{} already exists; runs are never overwritten",
                out.display()
            ),
            "choose another folder with --out",
        ));
    }
    let pdf = write_run(
        io,
        &out,
        &c.campaign,
        &c.prepared,
        &c.record.to_json(),
        &c.record.product_files,
    )?;
    let s = &c.record.summary;
    print_folder(io, "matching run folder", &out, &pdf);
    print_summary(io, &c.record.machine.description, "tests compared", s);
    Ok(if s.verdict == beamproof_engine::compare::MATCHED {
        EXIT_GO
    } else {
        EXIT_NO_GO
    })
}

fn archive_cmd(io: &mut Io, a: ArchiveCommand) -> Result<u8, Failure> {
    use beamproof_engine::archive;
    let fail = |e: String, help: &str| Failure {
        text: format!("error: {e}\n  = help: {help}"),
        code: EXIT_CANNOT_RUN,
    };
    match a {
        ArchiveCommand::Add {
            run_dir,
            archive: dir,
            date,
        } => {
            let date = date.unwrap_or_else(signing::today_utc);
            if !beamproof_engine::campaign::valid_iso_date(&date) {
                return Err(fail(
                    format!("date `{date}` is not a valid date"),
                    "write --date YYYY-MM-DD",
                ));
            }
            for d in archive::leftover_folders(&dir) {
                sweep_leftovers(io, &d);
            }
            let e = archive::add(&dir, &run_dir, &date).map_err(|e| {
                fail(
                    e,
                    "archive only intact run folders into a beamproof archive folder (or an empty one)",
                )
            })?;
            outln!(
                io,
                "archived {} as entry {} ({} files) in {}",
                run_dir.display(),
                e.id(),
                e.files.len(),
                dir.display()
            );
            Ok(EXIT_GO)
        }
        ArchiveCommand::Verify {
            archive: dir,
            trusted_keys,
        } => {
            let trusted = match trusted_keys {
                Some(d) => Some(signing::trusted_keys(&d).map_err(|e| {
                    fail(
                        e,
                        "give a folder of `*.pub` files made by `beamproof keygen`",
                    )
                })?),
                None => None,
            };
            let r = archive::verify(&dir, trusted.as_deref())
                .map_err(|e| fail(e, "give the folder `beamproof archive add` created"))?;
            for p in &r.problems {
                outln!(io, "{p}");
            }
            for n in &r.notes {
                outln!(io, "note: {n}");
            }
            if r.problems.is_empty() {
                outln!(
                    io,
                    "{}: {} entries and {} stored files verified; ledger head {}",
                    dir.display(),
                    r.entries,
                    r.objects_checked,
                    r.head
                );
                Ok(EXIT_GO)
            } else {
                outln!(
                    io,
                    "{}: {} problem(s) found",
                    dir.display(),
                    r.problems.len()
                );
                Ok(EXIT_VERIFY_FAILED)
            }
        }
        ArchiveCommand::Seal {
            archive: dir,
            key,
            date,
        } => {
            let k = signing::read_key(&key)
                .map_err(|e| fail(e, "give the key file made by `beamproof keygen`"))?;
            let date = date.unwrap_or_else(signing::today_utc);
            if !beamproof_engine::campaign::valid_iso_date(&date) {
                return Err(fail(
                    format!("date `{date}` is not a valid date"),
                    "write --date YYYY-MM-DD",
                ));
            }
            let (path, n) = archive::seal(&dir, &k, &date)
                .map_err(|e| fail(e, "seal an intact, non-empty archive"))?;
            outln!(
                io,
                "sealed {} through entry {n} by {} ({}) on {date}: {}",
                dir.display(),
                k.name,
                k.role,
                path.display()
            );
            Ok(EXIT_GO)
        }
        ArchiveCommand::List { archive: dir } => {
            let entries = archive::list(&dir)
                .map_err(|e| fail(e, "give the folder `beamproof archive add` created"))?;
            for e in &entries {
                let sigs = e
                    .files
                    .iter()
                    .filter(|f| f.path.starts_with(signing::SIGNATURES_DIR))
                    .count();
                outln!(
                    io,
                    "{:>4}  {}  added {}  verdict {}  {} files, {} signature(s)  manifest {}",
                    e.seq,
                    e.run,
                    e.added,
                    archive::verdict(&dir, e),
                    e.files.len(),
                    sigs,
                    &e.manifest_sha256[..16]
                );
            }
            if entries.is_empty() {
                outln!(io, "the archive is empty");
            }
            Ok(EXIT_GO)
        }
        ArchiveCommand::Show { id, archive: dir } => {
            let e = archive::find(&dir, &id)
                .map_err(|e| fail(e, "give an entry number or RUN#NUMBER from `archive list`"))?;
            outln!(io, "entry {} (run {}), added {}", e.seq, e.run, e.added);
            outln!(io, "verdict {}", archive::verdict(&dir, &e));
            outln!(io, "manifest sha256 {}", e.manifest_sha256);
            outln!(io, "previous ledger line sha256 {}", e.prev);
            for f in &e.files {
                outln!(io, "{}  {:>10}  {}", f.sha256, f.size, f.path);
            }
            Ok(EXIT_GO)
        }
        ArchiveCommand::Export {
            id,
            dest,
            archive: dir,
        } => {
            let e = archive::export(&dir, &id, &dest)
                .map_err(|e| fail(e, "choose a new destination folder"))?;
            let v =
                verify_run(&dest).map_err(|e| fail(e, "the exported folder has no manifest"))?;
            outln!(
                io,
                "exported entry {} to {}: {} files, manifest {}",
                e.id(),
                dest.display(),
                e.files.len(),
                if v.findings.is_empty() {
                    "verified"
                } else {
                    "FAILS verification"
                }
            );
            Ok(if v.findings.is_empty() {
                EXIT_GO
            } else {
                EXIT_VERIFY_FAILED
            })
        }
    }
}

fn keygen(io: &mut Io, name: &str, role: &str, out: &Path) -> Result<u8, Failure> {
    let fail = |e: String, help: &str| Failure {
        text: format!("error: {e}\n  = help: {help}"),
        code: EXIT_CANNOT_RUN,
    };
    let k =
        signing::generate(name, role).map_err(|e| fail(e, "give a one-line --name and --role"))?;
    let public = signing::write_keys(out, &k)
        .map_err(|e| fail(e, "choose another --out; keep the existing key safe"))?;
    outln!(
        io,
        "key pair for {} ({}) written: secret {} (owner-only; never share it), public {}",
        k.name,
        k.role,
        out.display(),
        public.display()
    );
    outln!(io, "public key: {}", k.public_hex());
    Ok(EXIT_GO)
}

fn sign(
    io: &mut Io,
    run_dir: &Path,
    key: &Path,
    statement: &str,
    date: Option<String>,
    acknowledge: Option<&str>,
) -> Result<u8, Failure> {
    let fail = |e: String, help: &str| Failure {
        text: format!("error: {e}\n  = help: {help}"),
        code: EXIT_CANNOT_RUN,
    };
    let k = signing::read_key(key)
        .map_err(|e| fail(e, "give the key file made by `beamproof keygen`"))?;
    let date = date.unwrap_or_else(signing::today_utc);
    if !beamproof_engine::campaign::valid_iso_date(&date) {
        return Err(fail(
            format!("signing date `{date}` is not a valid date"),
            "write --date YYYY-MM-DD",
        ));
    }
    // Only a run whose files all match its manifest, with nothing planted beside them, can be
    // signed; the manifest and verdict signed are the bytes that verification read.
    let v =
        verify_run(run_dir).map_err(|e| fail(e, "give a run folder made by `beamproof run`"))?;
    if !v.is_intact() {
        let mut problems: Vec<String> = v.findings.iter().map(ToString::to_string).collect();
        problems.extend(
            v.planted()
                .map(|u| format!("not covered by the manifest: {}", signing::printable(u))),
        );
        return Err(fail(
            format!(
                "{} fails verification ({}); it cannot be signed",
                run_dir.display(),
                problems.join("; ")
            ),
            "run `beamproof verify` and restore the run folder from its archive",
        ));
    }
    let verdict = v
        .files
        .get("results.json")
        .and_then(|b| beamproof_engine::run::verdict_in(b))
        .ok_or_else(|| {
            fail(
                "the run's results.json records no verdict".into(),
                "give a run folder made by `beamproof run` or `beamproof compare`",
            )
        })?;
    let clean = beamproof_engine::run::CLEAN_VERDICTS.contains(&verdict.as_str());
    match acknowledge {
        Some(a) if a != verdict => {
            return Err(fail(
                format!(
                    "--acknowledge-verdict {} does not match the run's verdict {verdict}",
                    signing::printable(a)
                ),
                &format!("read the report; to sign it, pass --acknowledge-verdict \"{verdict}\""),
            ));
        }
        None if !clean => {
            return Err(fail(
                format!(
                    "the run's verdict is {verdict}; signing it needs an explicit acknowledgement"
                ),
                &format!(
                    "read the report's failures first; to sign anyway, pass --acknowledge-verdict \"{verdict}\" (the signature records it)"
                ),
            ));
        }
        _ => {}
    }
    let path = signing::sign_run(run_dir, &v.manifest, &verdict, &k, &date, statement)
        .map_err(|e| fail(e, "check the run folder and the statement"))?;
    outln!(
        io,
        "signed by {} ({}) on {}, run verdict {verdict}: {}",
        k.name,
        k.role,
        date,
        path.display()
    );
    Ok(EXIT_GO)
}

fn plugins(io: &mut Io, campaign: Option<&Path>, plugin_dirs: &[PathBuf]) -> Result<u8, Failure> {
    let registry = match campaign {
        Some(c) => {
            let inputs = InputArgs {
                plugin_dirs: plugin_dirs.to_vec(),
                max_input_mb: DEFAULT_MAX_INPUT_MB,
            };
            gather(c, Machines::All, &inputs)?.1
        }
        None => Registry::with_dirs(plugin_dirs)?,
    };
    for p in registry.plugins() {
        let origin = match &p.origin {
            Origin::BuiltIn => "built-in".to_string(),
            Origin::Dynamic { path, .. } => path.display().to_string(),
        };
        let kinds: Vec<&str> = p.manifest.kinds.iter().map(|k| k.name()).collect();
        outln!(
            io,
            "{} {}  [{}]  {}",
            p.manifest.name,
            p.manifest.version,
            kinds.join(", "),
            origin
        );
        outln!(io, "    {}", p.manifest.description);
        for param in &p.manifest.params {
            let default = param
                .default
                .as_ref()
                .map(|d| format!(" (default {d})"))
                .unwrap_or_default();
            outln!(io, "    - {}{}: {}", param.name, default, param.description);
        }
        match &p.manifest.judged_metrics {
            Some(ms) if !ms.is_empty() => {
                let ids: Vec<&str> = ms.iter().map(|m| m.id.as_str()).collect();
                outln!(io, "    judges `metrics:` ids: {}", ids.join(", "));
            }
            Some(_) => {}
            None => outln!(
                io,
                "    declares no judged metric ids (built before ABI 1.3): its `metrics:` ids are not checked"
            ),
        }
        for need in &p.manifest.needs {
            outln!(io, "    needs `{}` in its criteria set", need.key());
        }
    }
    Ok(EXIT_GO)
}
