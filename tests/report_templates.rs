//! A campaign may bring its own report template; a broken one is reported with its file and
//! line, and nothing is written.

use crate::support::{demo_copy, relative, run_into_folder};

fn with_template(name: &str, template: &str) -> (std::path::PathBuf, crate::support::Outcome) {
    let campaign = demo_copy(name);
    let dir = campaign.parent().expect("dir").to_path_buf();
    std::fs::create_dir_all(dir.join("my-templates")).expect("mkdir");
    std::fs::write(dir.join("my-templates/report.typ.hbs"), template).expect("write");
    let text = std::fs::read_to_string(&campaign).expect("read");
    std::fs::write(
        &campaign,
        text.replacen(
            "criteria:\n",
            "report: {templates: my-templates}\ncriteria:\n",
            1,
        ),
    )
    .expect("write");
    let (out, o) = run_into_folder(&campaign, "lin-b");
    assert!(!out.exists() || o.code == 0, "a failed run left its folder");
    (dir, o)
}

#[test]
fn a_custom_template_is_used() {
    let (dir, o) = with_template("tpl-ok", "= {{title}}\nVerdict: {{verdict}}\n");
    assert_eq!(o.code, 0, "{}", o.stderr);
    assert!(
        std::fs::read(dir.join("run/report.pdf"))
            .expect("pdf")
            .starts_with(b"%PDF-")
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
