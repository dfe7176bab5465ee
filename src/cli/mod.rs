//! The command line: `reweave fill`, `reweave bench`, `reweave samples`.
//!
//! Arguments are parsed by clap into raw flags, checked into a plan that can run, and run. Errors
//! reach `main` once: usage errors exit with 2, failed jobs with 1, and every message says which
//! file and what to do.

mod batch;
mod bench;
mod detect;
mod fill;
mod job;
mod samples;

use std::path::PathBuf;
use std::process::ExitCode;

use clap::{Parser, Subcommand};

pub use batch::BatchArgs;
pub use bench::BenchArgs;
pub use detect::{DetectArgs, DetectOptions, Method as DetectMethod, detect_one};
pub use fill::FillArgs;
pub use samples::SamplesArgs;

/// A usage error: the arguments cannot work, whatever the files hold. Exit code 2.
#[derive(Debug, thiserror::Error)]
#[error("{0}")]
pub struct UsageError(pub String);

/// reweave repairs damaged pixels in raster images: mark the damage with a mask, and each masked
/// pixel is replaced by the smooth (harmonic) continuation of the known pixels around it.
#[derive(Debug, Parser)]
#[command(
    name = "reweave",
    version,
    about = "Repair damaged pixels by solving Laplace's equation over them",
    long_about = "Repair damaged pixels in raster images (scans, detector frames, elevation grids).\n\n\
Mark the damage with a mask; reweave replaces only the masked pixels with the smoothest \
values that meet the known pixels around them (the solution of Laplace's equation), keeps \
every other sample bit for bit, and writes the result at the input's bit depth.\n\n\
Filled values are estimates, not measurements.",
    after_help = "Examples:\n  \
reweave open scan.png --mask damage.png\n  \
reweave fill scan.png --mask damage.png -o repaired.png --report repaired.json\n  \
reweave batch frames/ --mask badpix.png -o fixed/ --jobs 2\n  \
reweave detect frame.tif --by outliers -o hotpix.png\n  \
reweave bench --size 1024 --case frame\n  \
reweave samples --out sample-images"
)]
pub struct Cli {
    /// Without a command, the window opens.
    #[command(subcommand)]
    pub command: Option<Command>,
}

/// Open the window on an image.
#[derive(Debug, clap::Args)]
pub struct OpenArgs {
    /// The image to open.
    pub file: PathBuf,
    /// A mask of the image's size to load with it.
    #[arg(short, long, value_name = "MASK")]
    pub mask: Option<PathBuf>,
}

#[derive(Debug, Subcommand)]
pub enum Command {
    /// Open the window on an image (and its mask).
    Open(OpenArgs),
    /// Fill the masked pixels of an image and save the result.
    Fill(FillArgs),
    /// Repair many files with one mask, their no-data and/or detected damage, in parallel.
    Batch(BatchArgs),
    /// Find damaged pixels (hot and dead pixels, bad columns, scratches, a value) and write a mask.
    Detect(DetectArgs),
    /// Time the solver on the standard synthetic cases and print one JSON line per run.
    Bench(BenchArgs),
    /// Write the bundled demo images and masks (an invented scenario) into a folder.
    Samples(SamplesArgs),
}

/// Runs the parsed command line and maps the outcome to an exit code.
#[must_use]
pub fn run(cli: Cli) -> ExitCode {
    let result = match cli.command {
        None => crate::gui::run(None, None),
        Some(Command::Open(args)) => crate::gui::run(Some(args.file), args.mask),
        Some(Command::Fill(args)) => fill::run(&args),
        Some(Command::Batch(args)) => batch::run(&args),
        Some(Command::Detect(args)) => detect::run(&args),
        Some(Command::Bench(args)) => bench::run(&args),
        Some(Command::Samples(args)) => samples::run(&args),
    };
    match result {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("reweave: error: {e:#}");
            if e.downcast_ref::<UsageError>().is_some() { ExitCode::from(2) } else { ExitCode::FAILURE }
        }
    }
}

/// Same file, whether or not both exist yet (compared after resolving what can be resolved).
#[must_use]
pub fn same_file(a: &std::path::Path, b: &std::path::Path) -> bool {
    let resolve = |p: &std::path::Path| -> PathBuf {
        if let Ok(c) = p.canonicalize() {
            return c;
        }
        let parent = p.parent().filter(|d| !d.as_os_str().is_empty()).unwrap_or_else(|| std::path::Path::new("."));
        match (parent.canonicalize(), p.file_name()) {
            (Ok(d), Some(name)) => d.join(name),
            _ => p.to_owned(),
        }
    };
    resolve(a) == resolve(b)
}
