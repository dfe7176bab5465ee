//! The `reweave` command: parses the command line and hands over to the library.

use std::process::ExitCode;

use clap::Parser;

fn main() -> ExitCode {
    let cli = reweave::cli::Cli::parse();
    // Ctrl-C (or a scheduler's SIGTERM): remove the files being written and stop. Outputs already
    // renamed into place are complete; `batch --skip-existing` does the rest on the next run.
    let handler = ctrlc::set_handler(|| {
        reweave::raster::remove_temporary_files();
        eprintln!("reweave: interrupted; no partial file was left, finished outputs are complete");
        std::process::exit(130);
    });
    if let Err(e) = handler {
        eprintln!("reweave: cannot catch Ctrl-C ({e}); an interrupt may leave a temporary file");
    }
    reweave::cli::run(cli)
}
