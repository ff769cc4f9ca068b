//! Dynamic plugins: the example cdylib is built with cargo, loaded through the C ABI and run;
//! a panic inside it becomes a test error; a library claiming another ABI version is refused.

use std::path::{Path, PathBuf};
use std::sync::OnceLock;

use beamproof_engine::registry::Registry;

use crate::support::{cli, demo_copy, relative, results, root, run_into_folder};

/// Build the example plugin (normal and wrong-ABI variants) once; return their folders.
fn plugin_dirs() -> &'static (PathBuf, PathBuf) {
    static DIRS: OnceLock<(PathBuf, PathBuf)> = OnceLock::new();
    DIRS.get_or_init(|| {
        let target = root().join("target").join("plugin-tests");
        let lib = format!(
            "{}beamproof_plugin_example_dynamic{}",
            std::env::consts::DLL_PREFIX,
            std::env::consts::DLL_SUFFIX
        );
        let build = |features: &[&str], dest: &str| -> PathBuf {
            let cargo = std::env::var("CARGO").unwrap_or_else(|_| "cargo".into());
            let mut cmd = std::process::Command::new(cargo);
            cmd.current_dir(root())
                .args([
                    "build",
                    "-q",
                    "-p",
                    "beamproof-plugin-example-dynamic",
                    "--target-dir",
                ])
                .arg(&target);
            for f in features {
                cmd.args(["--features", f]);
            }
            let status = cmd.status().expect("run cargo");
            assert!(status.success(), "building the example plugin failed");
            let dir = target.join(dest);
            let _ = std::fs::remove_dir_all(&dir);
            std::fs::create_dir_all(&dir).expect("mkdir");
            std::fs::copy(target.join("debug").join(&lib), dir.join(&lib)).expect("copy plugin");
            dir
        };
        let good = build(&[], "good");
        let wrong = build(&["wrong-abi"], "wrong-abi");
        (good, wrong)
    })
}

#[test]
fn the_example_plugin_loads_and_declares_itself() {
    let (good, _) = plugin_dirs();
    let reg = Registry::with_dirs(std::slice::from_ref(good))
        .unwrap_or_else(|d| panic!("{}", d[0].render(None)));
    let p = reg.get("mean-dose-ratio").expect("loaded");
    assert_eq!(p.manifest.version, env!("CARGO_PKG_VERSION"));
    assert!(reg.get("point-dose").is_some(), "built-ins stay available");
}

/// The demo's pelvis site in a run's results.
fn pelvis(r: &serde_json::Value) -> &serde_json::Value {
    r["sites"]
        .as_array()
        .and_then(|s| s.iter().find(|s| s["id"] == "pelvis"))
        .expect("pelvis site")
}

fn campaign_with(name: &str, analyses: &str, plugin_dir: &Path) -> PathBuf {
    let campaign = demo_copy(name);
    let text = std::fs::read_to_string(&campaign).expect("read");
    let text = text.replacen(
        "          - plugin: point-dose\n            params: {difference-relative-to: reference-dose, reference-dose-gy: 2.0}",
        analyses,
        1,
    );
    let text = text.replacen(
        "criteria:\n",
        &format!("plugin-dirs: [{}]\ncriteria:\n", plugin_dir.display()),
        1,
    );
    std::fs::write(&campaign, text).expect("write");
    campaign
}

#[test]
fn a_dynamic_analysis_runs_beside_the_built_in_one() {
    let (good, _) = plugin_dirs();
    let campaign = campaign_with(
        "dyn-run",
        "          - point-dose\n          - mean-dose-ratio",
        good,
    );
    let (out, o) = run_into_folder(&campaign, "lin-b");
    assert_eq!(o.code, 0, "{}{}", o.stdout, o.stderr);
    let r = results(&out);
    let a = &pelvis(&r)["tests"][0]["analyses"][1];
    assert_eq!(a["plugin"], "mean-dose-ratio");
    // Mean of lin-b prostate readings over mean of planned doses (demo data): computed here
    // from the same CSV values the plugin received.
    let measured = [
        2.000 * (1.0 - 0.004),
        1.962 * (1.0 + 0.009),
        1.105 * (1.0 - 0.015),
    ];
    let planned = [2.000, 1.962, 1.105];
    let rounded: Vec<f64> = measured
        .iter()
        .map(|v| (v * 1e4_f64).round() / 1e4)
        .collect();
    let expected = 100.0 * (planned.iter().sum::<f64>() / rounded.iter().sum::<f64>() - 1.0);
    let got = a["output"]["metrics"][0]["value"].as_f64().expect("value");
    assert!((got - expected).abs() < 1e-9, "{got} vs {expected}");
    let plugins = r["plugins"].as_array().expect("plugins");
    let dynamic = plugins
        .iter()
        .find(|p| p["name"] == "mean-dose-ratio" && p["origin"] == "dynamic")
        .expect("the dynamic plugin is listed");
    // The library is kept in the run folder under its checksum, and the rerun command loads it
    // from there.
    let file = dynamic["file"].as_str().expect("file");
    assert!(file.starts_with("plugins/"), "{file}");
    let bytes = std::fs::read(out.join(file)).expect("library copied into the run folder");
    let sha = beamproof_engine::checksum::sha256_hex(&bytes);
    assert_eq!(dynamic["sha256"], sha.as_str());
    let manifest = std::fs::read_to_string(out.join("manifest.sha256")).expect("manifest");
    assert!(manifest.contains(&format!("{sha}  {file}\n")), "{manifest}");
    assert!(
        r["run"]["reproduce"]
            .as_str()
            .is_some_and(|c| c.contains(" --plugin-dir plugins ")),
        "{}",
        r["run"]["reproduce"]
    );
    // The rerun command, from inside the run folder, gives the same results (the copy and the
    // original library are the same file, loaded once).
    let rerun = out.with_file_name("rerun");
    let o = crate::support::cli(&[
        "run",
        crate::support::arg(&out.join("inputs/campaign.yaml")),
        "--machine",
        "lin-b",
        "--date",
        r["run"]["date"].as_str().expect("date"),
        "--plugin-dir",
        crate::support::arg(&out.join("plugins")),
        "--out",
        crate::support::arg(&rerun),
    ]);
    assert_eq!(o.code, 0, "{}{}", o.stdout, o.stderr);
    let again = results(&rerun);
    assert_eq!(again["sites"], r["sites"]);
}

#[test]
fn a_panic_inside_a_plugin_becomes_an_error_of_that_test_only() {
    let (good, _) = plugin_dirs();
    let campaign = campaign_with(
        "dyn-panic",
        "          - plugin: mean-dose-ratio\n            params: {fail-on-purpose: true}",
        good,
    );
    let (out, o) = run_into_folder(&campaign, "lin-b");
    assert_eq!(o.code, 1, "{}", o.stderr);
    assert!(
        o.stdout.contains("  - pelvis/prostate-chamber: ERROR\n"),
        "{}",
        o.stdout
    );
    let r = results(&out);
    assert_eq!(
        pelvis(&r)["tests"][0]["analyses"][0]["error"],
        "plugin panicked: failing on purpose, as the test asked"
    );
    assert_eq!(
        r["sites"][0]["tests"][0]["status"], "warn",
        "the other tests still ran"
    );
}

#[test]
fn a_plugin_built_for_another_abi_is_refused_clearly() {
    let (_, wrong) = plugin_dirs();
    let campaign = demo_copy("dyn-wrong-abi");
    let o = cli(&[
        "check",
        campaign.to_str().expect("utf8"),
        "--plugin-dir",
        wrong.to_str().expect("utf8"),
    ]);
    assert_eq!(o.code, 2);
    assert_eq!(
        relative(&o.stderr, wrong),
        format!(
            "error: plugin ABI 999.{m} is not supported; this beamproof reads ABI 1.x (up to 1.{m})\n  --> libbeamproof_plugin_example_dynamic.so\n  = help: rebuild the plugin against the beamproof-api crate of this release (ABI 1.{m})\n\n1 problem found; nothing was run\n",
            m = beamproof_api::abi::ABI_MINOR
        )
    );
}

#[test]
fn a_library_without_the_entry_symbol_is_refused_clearly() {
    // Any shared library that is not a plugin will do: the proc-macro library cargo built for
    // the example plugin's dependencies is one on every platform.
    plugin_dirs();
    let deps = root().join("target/plugin-tests/debug/deps");
    let other = std::fs::read_dir(&deps)
        .expect("deps")
        .filter_map(Result::ok)
        .map(|e| e.path())
        .find(|p| {
            let n = p
                .file_name()
                .map(|n| n.to_string_lossy().into_owned())
                .unwrap_or_default();
            n.contains("serde_derive") && n.ends_with(std::env::consts::DLL_SUFFIX)
        })
        .expect("a proc-macro library in the plugin build");
    let dir = crate::support::scratch("dyn-no-symbol");
    std::fs::copy(
        &other,
        dir.join(format!(
            "{}not_a_plugin{}",
            std::env::consts::DLL_PREFIX,
            std::env::consts::DLL_SUFFIX
        )),
    )
    .expect("copy");
    let err = match Registry::with_dirs(std::slice::from_ref(&dir)) {
        Ok(_) => panic!("a library without the entry symbol was accepted"),
        Err(d) => d,
    };
    assert_eq!(err.len(), 1);
    assert!(
        err[0]
            .message
            .starts_with("not a beamproof plugin of ABI 1: "),
        "{}",
        err[0].message
    );
    assert!(
        err[0].message.contains("beamproof_plugin_entry_v1"),
        "the loader's reason names the symbol: {}",
        err[0].message
    );
    assert_eq!(
        err[0].help.as_deref(),
        Some(
            "a plugin must export `beamproof_plugin_entry_v1`; build it with beamproof_api::export_plugin!"
        )
    );
}
