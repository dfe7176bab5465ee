//! `reweave samples`: writes the bundled demo data.

use std::path::PathBuf;

use anyhow::Result;
use clap::Args;

/// Write the demo images and their masks, drawn by reweave's own generator (an invented harbour
/// postcard, survey-camera frame and island elevation grid), into a folder.
#[derive(Debug, Args)]
pub struct SamplesArgs {
    /// Folder to write into (created if missing).
    #[arg(long, default_value = "sample-images")]
    pub out: PathBuf,
}

pub(super) fn run(args: &SamplesArgs) -> Result<()> {
    for p in crate::synth::samples::write_all(&args.out)? {
        println!("{}", p.display());
    }
    Ok(())
}
