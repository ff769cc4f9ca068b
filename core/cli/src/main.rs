//! Entry point of the `beamproof` binary; everything else is in the library.

use std::io::IsTerminal as _;
use std::process::ExitCode;

fn main() -> ExitCode {
    let (mut out, mut err) = (std::io::stdout().lock(), std::io::stderr());
    let progress = err.is_terminal();
    let mut io = beamproof_cli::Io {
        out: &mut out,
        err: &mut err,
        progress,
    };
    ExitCode::from(beamproof_cli::main_with(std::env::args_os(), &mut io))
}
