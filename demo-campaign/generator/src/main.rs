//! `cargo run -p beamproof-demo-gen [-- DIR]`: write the demo campaign's data files into DIR
//! (default: `demo-campaign/data` of the repository). Deterministic: the same build writes the
//! same bytes, which the tests check against the committed files.

fn main() -> std::process::ExitCode {
    let dir = std::env::args_os()
        .nth(1)
        .map(std::path::PathBuf::from)
        .unwrap_or_else(|| {
            std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
                .join("..")
                .join("data")
        });
    match beamproof_demo_gen::generate(&dir) {
        Ok(files) => {
            println!(
                "{} demo data files written to {}",
                files.len(),
                dir.display()
            );
            std::process::ExitCode::SUCCESS
        }
        Err(e) => {
            eprintln!("error: {e}");
            std::process::ExitCode::from(2)
        }
    }
}
