//! Evidence integrity: a run folder holds exactly the bytes that were analysed and rendered.
//! Every input is read once at prepare; files changed, replaced or deleted afterwards must not
//! reach the results, the report or the copies under `inputs/`, and links, special files and
//! names a manifest cannot hold are refused the same way at every stage.

use std::path::{Path, PathBuf};

use beamproof_engine::campaign::Campaign;
use beamproof_engine::input_store::DEFAULT_MAX_INPUT_BYTES;
use beamproof_engine::prepare::{Prepared, choose_machine, prepare};
use beamproof_engine::registry::Registry;

use crate::support::{arg, cli, demo_copy, relative, root};

/// The demo campaign with its own report template folder (a copy of the built-in template).
fn demo_with_templates(name: &str) -> PathBuf {
    let campaign = demo_copy(name);
    let dir = campaign.parent().expect("folder").join("my-templates");
    std::fs::create_dir_all(&dir).expect("mkdir");
    std::fs::copy(
        root().join("templates/report.typ.hbs"),
        dir.join("report.typ.hbs"),
    )
    .expect("copy template");
    let text = std::fs::read_to_string(&campaign).expect("campaign");
    let text = text.replacen(
        "date: 2026-11-20\n",
        "date: 2026-11-20\nreport: {templates: my-templates}\n",
        1,
    );
    std::fs::write(&campaign, text).expect("write campaign");
    campaign
}

/// What the CLI's run does after prepare: analyses, results, report and HTML rendered from
/// the prepared template bytes, and the run folder written from the prepared input bytes.
fn finish(campaign: &Campaign, prepared: &Prepared, registry: &Registry, out: &Path) {
    let date = campaign.date.clone().expect("date");
    let record = beamproof_engine::run::run(campaign, prepared, registry, &date, |_, _, _| {});
    let json = record.to_json();
    let (dir, files) = prepared.template_files().expect("templates");
    let name = campaign.dir.join(dir).display().to_string();
    let t = beamproof_report::TemplateFolder {
        name: &name,
        files: &files,
    };
    let pdf = beamproof_report::render_pdf(&json, Some(t)).expect("pdf");
    let html = beamproof_report::render_html(&json, Some(t)).expect("html");
    let sum = format!(
        "{}  report.pdf\n",
        beamproof_engine::checksum::sha256_hex(&pdf)
    );
    let mut products: Vec<(&str, &[u8])> = vec![
        ("results.json", &json),
        ("report.pdf", &pdf),
        ("report.pdf.sha256", sum.as_bytes()),
        ("report.html", html.as_bytes()),
    ];
    products.extend(
        record
            .product_files
            .iter()
            .map(|(f, b)| (f.as_str(), b.as_slice())),
    );
    beamproof_engine::output::write_run_folder(out, campaign, prepared, &products).expect("write");
}

fn files_under(dir: &Path) -> Vec<(String, Vec<u8>)> {
    let mut out: Vec<(String, Vec<u8>)> = walkdir::WalkDir::new(dir)
        .sort_by_file_name()
        .into_iter()
        .filter_map(Result::ok)
        .filter(|e| e.file_type().is_file())
        .map(|e| {
            (
                beamproof_engine::checksum::relative_slash(dir, e.path()),
                std::fs::read(e.path()).expect("read"),
            )
        })
        .collect();
    out.sort();
    out
}

#[test]
fn inputs_changed_replaced_or_deleted_after_prepare_reach_nothing() {
    let campaign_path = demo_with_templates("evidence-after-prepare");
    let folder = campaign_path.parent().expect("folder").to_path_buf();
    // The reference: an ordinary run of the untouched campaign.
    let reference = folder.join("reference");
    let o = cli(&[
        "run",
        arg(&campaign_path),
        "--machine",
        "lin-a",
        "--out",
        arg(&reference),
    ]);
    assert_eq!(o.code, 1, "the demo's lin-a run is NO-GO: {}", o.stderr);

    let campaign = Campaign::load(&campaign_path).expect("campaign");
    let registry = Registry::built_in();
    let machine = choose_machine(&campaign, Some("lin-a")).expect("machine");
    let prepared =
        prepare(&campaign, &registry, machine, DEFAULT_MAX_INPUT_BYTES).expect("prepared");
    assert!(prepared.inputs.len() > 50, "the demo reads many inputs");
    // Now every input changes under the run: a third deleted, a third overwritten with other
    // text, a third replaced by another input's bytes; the template prints a false verdict.
    for (n, f) in prepared.inputs.iter().enumerate() {
        let path = campaign.resolve(&f.rel);
        match n % 3 {
            0 => std::fs::remove_file(&path).expect("delete"),
            1 => std::fs::write(&path, b"# changed after prepare\n").expect("overwrite"),
            _ => {
                let other = &prepared.inputs[(n + 1) % prepared.inputs.len()];
                std::fs::write(&path, &*other.bytes).expect("replace");
            }
        }
    }
    std::fs::write(
        folder.join("my-templates/report.typ.hbs"),
        "= GO: every test passed\n",
    )
    .expect("tamper template");

    let out = folder.join("after");
    finish(&campaign, &prepared, &registry, &out);
    let got = files_under(&out);
    let want = files_under(&reference);
    let names = |v: &[(String, Vec<u8>)]| v.iter().map(|f| f.0.clone()).collect::<Vec<_>>();
    assert_eq!(names(&got), names(&want));
    for ((name, a), (_, b)) in got.iter().zip(&want) {
        assert!(
            a == b,
            "{name} differs from the untouched run: the run read a file after prepare"
        );
    }
    // The copies under inputs/ are the bytes that were hashed: re-running from them gives
    // byte-identical results and report.
    let rerun = folder.join("rerun");
    let o = cli(&[
        "run",
        arg(&out.join("inputs/campaign.yaml")),
        "--machine",
        "lin-a",
        "--out",
        arg(&rerun),
    ]);
    assert_eq!(o.code, 1, "{}", o.stderr);
    for f in [
        "results.json",
        "report.pdf",
        "report.html",
        "manifest.sha256",
    ] {
        assert!(
            std::fs::read(out.join(f)).expect("out")
                == std::fs::read(rerun.join(f)).expect("rerun"),
            "{f} of the re-run from inputs/ differs"
        );
    }
}

/// No reader, preparation or runner module opens files itself: only the input store does.
#[test]
fn only_the_input_store_opens_input_files() {
    let src = root().join("core/engine/src");
    let mut offenders = Vec::new();
    for e in walkdir::WalkDir::new(&src)
        .into_iter()
        .filter_map(Result::ok)
    {
        let rel = beamproof_engine::checksum::relative_slash(&src, e.path());
        let in_scope = rel.starts_with("readers/")
            || [
                "prepare.rs",
                "mu_input.rs",
                "film.rs",
                "run.rs",
                "campaign_film.rs",
            ]
            .contains(&rel.as_str());
        if !in_scope || !rel.ends_with(".rs") {
            continue;
        }
        let text = std::fs::read_to_string(e.path()).expect("source");
        // Unit tests at the bottom of a module may write scratch files.
        let code = text.split("#[cfg(test)]").next().unwrap_or_default();
        for needle in [
            "std::fs::read",
            "File::open",
            "open_file(",
            "read_to_string(",
        ] {
            if code.contains(needle) {
                offenders.push(format!("{rel}: {needle}"));
            }
        }
    }
    assert!(
        offenders.is_empty(),
        "files opened outside the input store: {offenders:?}"
    );
}

#[cfg(unix)]
#[test]
fn a_template_linked_outside_the_campaign_folder_is_refused_at_check_and_run() {
    let campaign_path = demo_with_templates("evidence-template-link");
    let folder = campaign_path.parent().expect("folder").to_path_buf();
    let outside = folder.with_file_name("evidence-template-link-outside");
    let _ = std::fs::remove_dir_all(&outside);
    std::fs::create_dir_all(&outside).expect("mkdir");
    std::fs::write(outside.join("report.typ.hbs"), "= GO\n").expect("write");
    let main = folder.join("my-templates/report.typ.hbs");
    std::fs::remove_file(&main).expect("remove");
    std::os::unix::fs::symlink(outside.join("report.typ.hbs"), &main).expect("link");
    let out = folder.join("r");
    let check = cli(&["check", arg(&campaign_path), "--machine", "lin-a"]);
    let run = cli(&[
        "run",
        arg(&campaign_path),
        "--machine",
        "lin-a",
        "--out",
        arg(&out),
    ]);
    for (cmd, o) in [("check", check), ("run", run)] {
        assert_eq!(o.code, 2, "{cmd}: {}", o.stdout);
        let err = relative(&o.stderr, &folder);
        assert!(
            err.contains(
                "template file `my-templates/report.typ.hbs` cannot be read: it is a symbolic link to"
            ) && err.contains("outside the campaign folder"),
            "{cmd}: {err}"
        );
    }
    assert!(!out.exists());
}

#[cfg(unix)]
#[test]
fn special_files_folders_and_unrecordable_names_are_refused_with_what_was_found() {
    let campaign_path = demo_copy("evidence-special-files");
    let folder = campaign_path.parent().expect("folder").to_path_buf();
    let text = std::fs::read_to_string(&campaign_path).expect("campaign");
    // Three measured files of lin-a, each turned into something that is not a regular file.
    let fifo = "data/lin-a/pdd-6x-10x10.csv";
    let dir = "data/lin-a/pdd-6x-5x5.csv";
    std::fs::remove_file(folder.join(fifo)).expect("rm");
    let made = std::process::Command::new("mkfifo")
        .arg(folder.join(fifo))
        .status()
        .expect("mkfifo");
    assert!(made.success());
    std::fs::remove_file(folder.join(dir)).expect("rm");
    std::fs::create_dir(folder.join(dir)).expect("mkdir");
    // A name holding a newline cannot be written into a manifest line unambiguously.
    let text = text.replacen(
        "calculated: data/tps/pdd-6x-2x2.csv",
        "calculated: \"data/tps/pdd-6x-2x2\\n.csv\"",
        1,
    );
    std::fs::write(&campaign_path, text).expect("write");
    let o = cli(&["check", arg(&campaign_path), "--machine", "lin-a"]);
    assert_eq!(o.code, 2);
    let err = relative(&o.stderr, &folder);
    assert!(
        err.contains(&format!("`{fifo}` (for machine `lin-a`) cannot be read: it is a FIFO (named pipe), not a regular file")),
        "{err}"
    );
    assert!(
        err.contains(&format!(
            "`{dir}` (for machine `lin-a`) cannot be read: it is a directory, not a file"
        )),
        "{err}"
    );
    assert!(err.contains("pdd-6x-2x2\\n.csv"), "{err}");
    assert!(err.contains("control character or a backslash"), "{err}");
}

#[test]
fn an_input_over_the_limit_is_refused_before_it_is_read() {
    let campaign_path = demo_copy("evidence-input-limit");
    // A measured depth dose padded past 1 MiB with comment lines.
    let file = campaign_path.with_file_name("data/lin-a/pdd-6x-10x10.csv");
    let mut bytes = vec![b'#'; 1 << 20];
    bytes.push(b'\n');
    bytes.extend(std::fs::read(&file).expect("read"));
    let size = bytes.len();
    std::fs::write(&file, bytes).expect("write");
    let o = cli(&[
        "check",
        arg(&campaign_path),
        "--machine",
        "lin-a",
        "--max-input-mb",
        "1",
    ]);
    assert_eq!(o.code, 2, "{}", o.stdout);
    assert!(
        o.stderr.contains(&format!(
            "pdd-6x-10x10.csv` (for machine `lin-a`) cannot be read: it holds {size} bytes, over the input limit of 1048576 bytes"
        ))
            && o.stderr.contains("--max-input-mb"),
        "{}",
        o.stderr
    );
}

#[cfg(target_os = "linux")]
#[test]
fn left_overs_of_a_killed_run_and_archive_add_are_removed_by_the_next_one() {
    let campaign_path = demo_copy("evidence-leftovers");
    let folder = campaign_path.parent().expect("folder").to_path_buf();
    // PIDs never exceed 4194304 on Linux (PID_MAX_LIMIT), so no process of that number runs.
    let dead = folder.join(".run.partial-4194305");
    std::fs::create_dir_all(dead.join("inputs")).expect("mkdir");
    std::fs::write(dead.join("results.json"), "{").expect("write");
    let (run, o) = crate::support::run_into_folder(&campaign_path, "lin-b");
    assert_eq!(o.code, 0, "{}", o.stderr);
    assert!(!dead.exists());
    assert!(
        relative(&o.stdout, &folder)
            .contains("removed .run.partial-4194305, left by an interrupted earlier write"),
        "{}",
        o.stdout
    );
    let archive = folder.join("archive");
    let add = |dir: &Path| cli(&["archive", "add", arg(dir), "--archive", arg(&archive)]);
    assert_eq!(add(&run).code, 0);
    let object = walkdir::WalkDir::new(archive.join("objects"))
        .min_depth(1)
        .max_depth(1)
        .into_iter()
        .filter_map(Result::ok)
        .next()
        .expect("an object folder")
        .into_path();
    let tmp = object.join(".0123abcd.tmp-4194305");
    std::fs::write(&tmp, "half an object").expect("write");
    std::fs::write(archive.join("ledger.tmp-4194305"), "half a ledger").expect("write");
    let (again, _) = {
        let c = folder.join("second/campaign.yaml");
        crate::support::copy_tree(&root().join("demo-campaign"), &folder.join("second"));
        crate::support::run_into_folder(&c, "lin-a")
    };
    let o = add(&again);
    assert_eq!(o.code, 0, "{}", o.stderr);
    assert!(!tmp.exists() && !archive.join("ledger.tmp-4194305").exists());
    assert_eq!(cli(&["archive", "verify", arg(&archive)]).code, 0);
}
