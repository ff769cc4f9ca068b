//! A campaign may bring its own report template; a broken one is reported with its file and
//! line, and nothing is written.

use std::path::PathBuf;

use crate::support::{demo_copy, relative, run_into_folder};

/// A demo copy whose campaign names the template folder `folder`, holding `files`.
fn campaign_with_templates(name: &str, folder: &str, files: &[(&str, &str)]) -> PathBuf {
    let campaign = demo_copy(name);
    let dir = campaign.parent().expect("dir").join(folder);
    std::fs::create_dir_all(&dir).expect("mkdir");
    for (file, text) in files {
        std::fs::write(dir.join(file), text).expect("write");
    }
    let text = std::fs::read_to_string(&campaign).expect("read");
    std::fs::write(
        &campaign,
        text.replacen(
            "criteria:\n",
            &format!("report: {{templates: {folder}}}\ncriteria:\n"),
            1,
        ),
    )
    .expect("write");
    campaign
}

fn with_template(name: &str, template: &str) -> (PathBuf, crate::support::Outcome) {
    let campaign = campaign_with_templates(name, "my-templates", &[("report.typ.hbs", template)]);
    let (out, o) = run_into_folder(&campaign, "lin-b");
    assert!(!out.exists() || o.code == 0, "a failed run left its folder");
    (campaign.parent().expect("dir").to_path_buf(), o)
}

#[test]
fn a_custom_template_is_used_and_kept_with_the_run() {
    let (dir, o) = with_template("tpl-ok", "= {{title}}\nVerdict: {{verdict}}\n");
    assert_eq!(o.code, 0, "{}", o.stderr);
    assert!(
        std::fs::read(dir.join("run/report.pdf"))
            .expect("pdf")
            .starts_with(b"%PDF-")
    );
    // The template folder is an input of the run: copied, checksummed, named in the results.
    let kept = dir.join("run/inputs/my-templates/report.typ.hbs");
    assert_eq!(
        std::fs::read_to_string(kept).expect("template copied into the run folder"),
        "= {{title}}\nVerdict: {{verdict}}\n"
    );
    let r = crate::support::results(&dir.join("run"));
    assert_eq!(r["report"]["template"], "my-templates");
    assert_eq!(
        r["report"]["files"][0]["file"],
        "inputs/my-templates/report.typ.hbs"
    );
    let manifest = std::fs::read_to_string(dir.join("run/manifest.sha256")).expect("manifest");
    assert!(manifest.contains("  inputs/my-templates/report.typ.hbs\n"));
}

#[test]
fn a_custom_template_can_use_its_own_images() {
    let campaign = campaign_with_templates(
        "tpl-logo",
        "my-templates",
        &[
            (
                "logo.svg",
                "<svg xmlns=\"http://www.w3.org/2000/svg\" width=\"20\" height=\"10\"><rect width=\"20\" height=\"10\" fill=\"#336699\"/></svg>",
            ),
            (
                "report.typ.hbs",
                "#image(\"logo.svg\", width: 2cm)\n= {{title}}\n",
            ),
        ],
    );
    let (out, o) = run_into_folder(&campaign, "lin-b");
    assert_eq!(o.code, 0, "{}", o.stderr);
    assert!(out.join("inputs/my-templates/logo.svg").is_file());
}

#[test]
fn a_template_folder_without_the_report_template_is_refused() {
    let campaign = campaign_with_templates("tpl-missing", "empty-templates", &[]);
    let dir = campaign.parent().expect("dir").to_path_buf();
    let (out, o) = run_into_folder(&campaign, "lin-b");
    assert_eq!(o.code, 2);
    assert!(!out.exists());
    assert!(
        relative(&o.stderr, &dir).starts_with(
            "error: template folder `empty-templates` has no report.typ.hbs\n  --> campaign.yaml:"
        ),
        "{}",
        o.stderr
    );
}

#[test]
fn engine_and_report_agree_on_the_template_file_name() {
    assert_eq!(
        beamproof_engine::prepare::TEMPLATE_MAIN,
        beamproof_report::TEMPLATE_FILE
    );
}

#[test]
fn a_handlebars_error_names_the_template_line() {
    let (dir, o) = with_template("tpl-hbs", "= {{title}}\n\n{{#each sites}}\n{{name}}\n");
    assert_eq!(o.code, 2);
    assert_eq!(
        relative(&o.stderr, &dir),
        "error: the report could not be made: template my-templates/report.typ.hbs:5:1: invalid handlebars syntax: expected escape, expression, html_expression, decorator_expression, partial_expression, invert_tag, invert_chain_tag, helper_block_start, helper_block_end, decorator_block_start, partial_block_start, raw_block_start, hbs_comment, or hbs_comment_compact\n  = help: fix the template, or remove `report: templates:` to use the built-in one\n"
    );
}

#[test]
fn a_typst_error_names_the_generated_line() {
    let (dir, o) = with_template("tpl-typst", "= {{title}}\n#let x = (\n");
    assert_eq!(o.code, 2);
    assert_eq!(
        relative(&o.stderr, &dir),
        "error: the report could not be made: typeset error in the source generated from template my-templates/report.typ.hbs, line 2: unclosed delimiter (in `#let x = (`)\n  = help: fix the template, or remove `report: templates:` to use the built-in one\n"
    );
}

#[test]
fn check_compiles_the_campaign_template_before_any_run() {
    // The same two mistakes as above, found by `check` with the same messages.
    for (name, template, message) in [
        (
            "tpl-check-hbs",
            "= {{title}}\n\n{{#each sites}}\n{{name}}\n",
            "template my-templates/report.typ.hbs:5:1: invalid handlebars syntax",
        ),
        (
            "tpl-check-typst",
            "= {{title}}\n#let x = (\n",
            "typeset error in the source generated from template my-templates/report.typ.hbs, line 2: unclosed delimiter",
        ),
    ] {
        let campaign =
            campaign_with_templates(name, "my-templates", &[("report.typ.hbs", template)]);
        let o = crate::support::cli(&["check", crate::support::arg(&campaign)]);
        assert_eq!(o.code, 2, "{name}: {}", o.stdout);
        let dir = campaign.parent().expect("dir");
        assert!(
            relative(&o.stderr, dir)
                .starts_with(&format!("error: the report could not be made: {message}")),
            "{name}: {}",
            o.stderr
        );
    }
    // A good template passes.
    let campaign = campaign_with_templates(
        "tpl-check-ok",
        "my-templates",
        &[("report.typ.hbs", "= {{title}}\nVerdict: {{verdict}}\n")],
    );
    let o = crate::support::cli(&["check", crate::support::arg(&campaign)]);
    assert_eq!(o.code, 0, "{}", o.stderr);
}
