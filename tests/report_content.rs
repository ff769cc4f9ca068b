//! What the physicist reads: text extracted from the PDF with a general-purpose PDF reader
//! (pdf-extract) holds the verdict, every test, the cautions on every page and the checksums;
//! user text with typst's special characters comes out literally; the HTML summary carries the
//! same content; the report's checksum file matches the PDF.

use crate::support::{demo_copy, results, run_into_folder};

/// The footer caution, as the template prints it on every page (the reader keeps line breaks,
/// so only the first sentence is matched).
const FOOTER: &str =
    "Results must be reviewed and signed by a qualified medical physicist before clinical use.";

fn pdf_pages(out: &std::path::Path) -> Vec<String> {
    let pdf = std::fs::read(out.join("report.pdf")).expect("report.pdf");
    pdf_extract::extract_text_from_mem_by_pages(&pdf).expect("the PDF reader reads the report")
}

#[test]
fn the_report_states_verdict_tests_cautions_and_checksums() {
    let campaign = demo_copy("content-lin-a");
    let (out, o) = run_into_folder(&campaign, "lin-a");
    assert_eq!(o.code, 1, "{}", o.stderr);
    let pages = pdf_pages(&out);
    assert!(pages.len() > 5, "{} pages", pages.len());
    for (i, p) in pages.iter().enumerate() {
        assert!(
            p.contains(FOOTER),
            "page {} lacks the caution footer",
            i + 1
        );
    }
    let text = pages.concat();
    assert!(text.contains("NO-GO"));
    assert!(
        text.contains("standard-fields/output-6x: FAIL"),
        "NO-GO reason"
    );
    for caution in beamproof_engine::run::CAUTIONS {
        assert!(text.contains(caution), "caution missing: {caution}");
    }
    // The MU checks' set gives no levels of its own; the TG-114 defaults the MU check applied
    // (AAPM TG-114, simple geometry: 1 % tolerance, 2 % action) are stated with the set, never
    // "informational".
    let mu_set = text
        .split("Criteria set mu-simple")
        .nth(1)
        .expect("the mu-simple set is listed");
    let mu_set = &mu_set[..mu_set.find("Criteria set").unwrap_or(mu_set.len())];
    assert!(
        mu_set.contains("default of `mu-check`")
            && mu_set.contains("1.00 %")
            && mu_set.contains("2.00 %"),
        "{mu_set}"
    );
    assert!(!mu_set.contains("informational"), "{mu_set}");
    let r = results(&out);
    for site in r["sites"].as_array().expect("sites") {
        for t in site["tests"].as_array().expect("tests") {
            let id = t["id"].as_str().expect("id");
            assert!(text.contains(&format!("test {id} ")), "test {id} missing");
        }
    }
    // Every checksum of the run folder's manifest except the report's own files (a document
    // cannot hold its own checksum) appears in the appendix.
    let manifest = std::fs::read_to_string(out.join("manifest.sha256")).expect("manifest");
    let mut checked = 0;
    for line in manifest.lines() {
        let (sum, file) = line.split_once("  ").expect("sha256sum format");
        if file.starts_with("report.") {
            continue;
        }
        assert!(
            text.contains(sum),
            "checksum of {file} missing from the report"
        );
        checked += 1;
    }
    // Every input file of the run and results.json: at least the campaign, the 6 MV and FFF
    // scans, the chamber files, the dose grid and the beam data.
    assert!(checked > 20, "only {checked} checksums checked");
    assert!(text.contains("templates/report.typ.hbs (built into beamproof"));
    // The sidecar holds the PDF's SHA-256 in sha256sum format.
    let pdf = std::fs::read(out.join("report.pdf")).expect("pdf");
    assert_eq!(
        std::fs::read_to_string(out.join("report.pdf.sha256")).expect("sidecar"),
        format!(
            "{}  report.pdf\n",
            beamproof_engine::checksum::sha256_hex(&pdf)
        )
    );
}

#[test]
fn typst_special_characters_in_user_text_come_out_literally() {
    // The campaign title carries every character that starts markup or code in typst.
    let title = r"Bunker #1 $5 *b* _u_ @ref <t> [a] \ end";
    let campaign = demo_copy("content-specials");
    let text = std::fs::read_to_string(&campaign).expect("read");
    std::fs::write(
        &campaign,
        text.replacen(
            "title: 6 MV beam model validation, bunkers 1 and 2",
            &format!("title: '{title}'"),
            1,
        ),
    )
    .expect("write");
    let (out, o) = run_into_folder(&campaign, "lin-b");
    assert_eq!(o.code, 0, "{}", o.stderr);
    let pages = pdf_pages(&out);
    assert!(pages[0].contains(title), "{}", pages[0]);
    let html = std::fs::read_to_string(out.join("report.html")).expect("html");
    assert!(
        html.contains("Bunker #1 $5 *b* _u_ @ref &lt;t&gt; [a] \\ end"),
        "HTML escapes < and >"
    );
}

#[test]
fn the_html_summary_is_self_contained_with_figures_and_cautions() {
    let campaign = demo_copy("content-html");
    let (out, o) = run_into_folder(&campaign, "lin-b");
    assert_eq!(o.code, 0, "{}", o.stderr);
    let html = std::fs::read_to_string(out.join("report.html")).expect("html");
    assert!(html.starts_with("<!DOCTYPE html>"));
    assert!(html.contains("<b>GO</b>"));
    for caution in beamproof_engine::run::CAUTIONS {
        assert!(html.contains(caution), "caution missing: {caution}");
    }
    // Figures are inline SVG; nothing is fetched from elsewhere.
    assert!(html.matches("<figure><svg").count() >= 5);
    assert!(!html.contains("src=\"http") && !html.contains("href=\"http"));
}
