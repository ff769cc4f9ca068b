//! Report speed on the demo campaign (a bench binary, not a test).
//!
//! Run: `cargo bench -p beamproof-cli --bench report`. Runs the demo campaign for machine lin-a
//! once into a temporary folder, then renders its PDF report and HTML summary from the
//! results five times each and prints the best and the first (cold) time. Target (issue):
//! the demo campaign's report in at most 5 s on the 2-core project machine, release build.

use std::ffi::OsString;
use std::path::PathBuf;
use std::time::Instant;

fn main() {
    let root = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("../..");
    let out = std::env::temp_dir().join(format!("beamproof-report-bench-{}", std::process::id()));
    let args: Vec<OsString> = [
        "beamproof",
        "run",
        root.join("demo-campaign/campaign.yaml")
            .to_str()
            .expect("utf-8 path"),
        "--machine",
        "lin-a",
        "--out",
        out.to_str().expect("utf-8 path"),
    ]
    .iter()
    .map(OsString::from)
    .collect();
    let (mut o, mut e) = (Vec::new(), Vec::new());
    let t = Instant::now();
    let code = beamproof_cli::main_with(
        args,
        &mut beamproof_cli::Io {
            out: &mut o,
            err: &mut e,
            progress: false,
        },
    );
    let whole = t.elapsed();
    assert!(
        code <= 1,
        "demo run failed: {}",
        String::from_utf8_lossy(&e)
    );
    let json = std::fs::read(out.join("results.json")).expect("results.json");
    let _ = std::fs::remove_dir_all(&out);
    println!(
        "demo run lin-a (analyses, report, HTML, run folder): {:.3} s",
        whole.as_secs_f64()
    );
    for (name, f) in [
        (
            "report.pdf",
            (&|j: &[u8]| beamproof_report::render_pdf(j, None).map(|p| p.len()))
                as &dyn Fn(&[u8]) -> Result<usize, beamproof_report::ReportError>,
        ),
        ("report.html", &|j: &[u8]| {
            beamproof_report::render_html(j, None).map(|h| h.len())
        }),
    ] {
        let mut times = Vec::new();
        let mut size = 0;
        for _ in 0..5 {
            let t = Instant::now();
            size = f(&json).expect("render");
            times.push(t.elapsed().as_secs_f64());
        }
        let best = times.iter().copied().fold(f64::INFINITY, f64::min);
        println!(
            "{name:>12}: best {:.3} s, first {:.3} s ({} bytes, {} results bytes)",
            best,
            times[0],
            size,
            json.len()
        );
    }
}
