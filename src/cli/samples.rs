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
    /// Instead, write this many 16-bit survey frames of one sensor and its bad-pixel map
    /// (badpix.png), for trying and timing `reweave batch`.
    #[arg(long, value_name = "N")]
    pub frames: Option<usize>,
    /// Side of the frames in pixels (with --frames).
    #[arg(long, default_value_t = 2048, value_name = "PIXELS")]
    pub size: usize,
}

pub(super) fn run(args: &SamplesArgs) -> Result<()> {
    let written = match args.frames {
        Some(n) => crate::synth::samples::write_frames(&args.out, n, args.size.max(16))?,
        None => crate::synth::samples::write_all(&args.out)?,
    };
    for p in written {
        println!("{}", p.display());
    }
    Ok(())
}
