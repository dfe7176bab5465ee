//! The `reweave` command: parses the command line and hands over to the library.

use std::process::ExitCode;

use clap::Parser;

fn main() -> ExitCode {
    reweave::cli::run(reweave::cli::Cli::parse())
}
