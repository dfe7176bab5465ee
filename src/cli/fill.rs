//! `reweave fill`: one image, one mask, one result.

use std::path::PathBuf;

use anyhow::Result;
use clap::{Args, ValueEnum};

use super::job::{Job, MaskFile, parse_nodata};
use super::{UsageError, same_file};
use crate::fill::{Cycle, FillMethod, FillParams};
use crate::raster::{self, FileFormat};

#[derive(Clone, Copy, Debug, PartialEq, Eq, ValueEnum)]
pub enum MethodArg {
    /// Laplace's equation: the smoothest fill meeting the rim; never leaves the rim's range.
    Harmonic,
    /// The biharmonic equation from two rings of known pixels: continues slopes across the rim
    /// (terrain, smooth gradients); may overshoot the rim's range.
    Biharmonic,
    /// Texture from a matching region elsewhere in the image, colours from the rim (photographs).
    /// Copies detail that was not measured here.
    Guided,
}

/// How to fill, shared by `fill` and `batch`.
#[derive(Debug, Args)]
pub struct MethodOptions {
    /// Fill method.
    #[arg(long, value_enum, default_value = "harmonic")]
    pub method: MethodArg,

    /// Add noise matched to each hole's surroundings (robust σ of the rim's high-pass residual),
    /// from this seed; recorded in the report. Off by default.
    #[arg(long, value_name = "SEED")]
    pub grain: Option<u64>,

    /// Scientific data: refuse fills that invent texture (--method guided, --grain), so every
    /// filled value is a smooth interpolation of measured ones.
    #[arg(long)]
    pub scientific: bool,

    /// Stop when the relative residual ‖b − Au‖/‖b‖ of every channel is at most this.
    #[arg(long, default_value_t = 1e-6, value_name = "REL")]
    pub tolerance: f64,

    /// Give up after this many multigrid cycles (iterations for the biharmonic fill).
    #[arg(long, default_value_t = 100, value_name = "N")]
    pub max_cycles: usize,
}

impl MethodOptions {
    pub(crate) fn method_of(m: MethodArg) -> FillMethod {
        match m {
            MethodArg::Harmonic => FillMethod::Harmonic,
            MethodArg::Biharmonic => FillMethod::Biharmonic,
            MethodArg::Guided => FillMethod::Guided,
        }
    }

    /// The fill parameters, or a usage error for a combination the scientific profile refuses.
    pub(crate) fn params(&self) -> Result<FillParams> {
        let usage = |m: String| -> anyhow::Error { UsageError(m).into() };
        if self.scientific && self.method == MethodArg::Guided {
            return Err(usage(
                "--scientific refuses --method guided: it copies texture from elsewhere in the image, which is not data; use harmonic or biharmonic".to_owned(),
            ));
        }
        if self.scientific && self.grain.is_some() {
            return Err(usage(
                "--scientific refuses --grain: added noise is invented, not measured; leave --grain out".to_owned(),
            ));
        }
        if !(self.tolerance > 0.0 && self.tolerance < 1.0) {
            return Err(usage(format!("--tolerance must be between 0 and 1 (got {})", self.tolerance)));
        }
        Ok(FillParams {
            method: Self::method_of(self.method),
            tolerance: self.tolerance,
            max_cycles: self.max_cycles,
            grain: self.grain,
            ..FillParams::default()
        })
    }
}

#[derive(Clone, Copy, Debug, PartialEq, Eq, ValueEnum)]
pub enum CycleArg {
    V,
    F,
    W,
}

/// Fill the masked pixels of INPUT and write the result.
///
/// Every sample outside the mask is written back exactly as it was read (PNG and TIFF); the
/// output has the input's bit depth, channels and colour profile. The output is written to a
/// temporary file and renamed into place, so it is never left half-written.
#[derive(Debug, Args)]
#[command(after_help = "Examples:\n  \
reweave fill scan.png --mask damage.png -o repaired.png\n  \
reweave fill frame.tif --mask badpix.png -o frame-fixed.tif --report frame-fixed.json\n  \
reweave fill logo.png --mask-from-alpha -o logo-filled.png\n  \
reweave fill dem.tif -o dem-filled.tif --max-hole 5000 --mask-out filled-pixels.png\n  \
reweave fill scan.tif --mask damage.png --in-place\n  \
reweave fill print.png --mask tear.png -o print-fixed.png --method guided --grain 7\n  \
reweave fill dem.tif --nodata -9999 -o dem-filled.tif --method biharmonic --scientific")]
pub struct FillArgs {
    /// The image to repair (PNG, TIFF or JPEG; gray, gray+alpha, RGB or RGBA; 8 or 16 bits,
    /// TIFF also signed 16-bit and 32-bit float).
    pub input: PathBuf,

    /// Mask image of the same size: a pixel is filled where the mask's luma is 128 or more.
    #[arg(short, long, value_name = "MASK")]
    pub mask: Option<PathBuf>,

    /// Also fill the pixels whose alpha is 0 (the input must have an alpha channel).
    #[arg(long)]
    pub mask_from_alpha: bool,

    /// Also fill the pixels holding this value (a number, or "nan"). Without it, the no-data value
    /// a TIFF declares (GDAL_NODATA tag) is used. NaN and infinite samples are always filled.
    #[arg(long, value_name = "VALUE", allow_hyphen_values = true)]
    pub nodata: Option<String>,

    /// Leave holes larger than this many pixels unfilled (they are listed in the report).
    #[arg(long, value_name = "PIXELS")]
    pub max_hole: Option<usize>,

    /// Write the exact mask that was filled (every source combined) as a PNG.
    #[arg(long, value_name = "FILE.png")]
    pub mask_out: Option<PathBuf>,

    /// Where to write the result; its extension picks the format (.png, .tif, .tiff, .jpg).
    #[arg(short, long, value_name = "FILE")]
    pub output: Option<PathBuf>,

    /// Allow writing the result over INPUT (then --output may be left out).
    #[arg(long)]
    pub in_place: bool,

    /// Write a JSON report: inputs and their SHA-256, mask counts, residual per channel, timings.
    #[arg(long, value_name = "FILE.json")]
    pub report: Option<PathBuf>,

    /// Write each pixel's distance to the nearest known pixel (0 outside the mask) as a 32-bit
    /// float TIFF: how far each filled value is from real data.
    #[arg(long, value_name = "FILE.tif")]
    pub distance_map: Option<PathBuf>,

    #[command(flatten)]
    pub how: MethodOptions,

    /// Multigrid cycle shape (harmonic fill; the biharmonic fill always uses its own K-cycles).
    #[arg(long, value_enum, default_value = "v")]
    pub cycle: CycleArg,

    /// Worker threads (0: all cores). Results are the same for any number.
    #[arg(long, default_value_t = 0, value_name = "N")]
    pub threads: usize,

    /// Largest image accepted, in megapixels (protects against corrupt headers).
    #[arg(long, default_value_t = 1024, value_name = "MP")]
    pub max_megapixels: u64,

    /// Largest decoded image accepted, in gigabytes of memory.
    #[arg(long, default_value_t = 8, value_name = "GB")]
    pub max_gigabytes: u64,

    /// Print nothing but errors.
    #[arg(short, long)]
    pub quiet: bool,
}

/// The checked plan of a fill.
struct Plan<'a> {
    args: &'a FillArgs,
    output: PathBuf,
    params: FillParams,
    /// `--nodata`, parsed.
    nodata: Option<f64>,
}

fn plan(args: &FillArgs) -> Result<Plan<'_>> {
    let usage = |m: String| -> anyhow::Error { UsageError(m).into() };
    let output = match (&args.output, args.in_place) {
        (Some(o), _) => o.clone(),
        (None, true) => args.input.clone(),
        (None, false) => {
            return Err(usage("give the output file with -o FILE (or --in-place to overwrite the input)".to_owned()));
        }
    };
    if FileFormat::from_extension(&output).is_none() {
        return Err(usage(format!(
            "cannot tell the output format from the extension of '{}'; use .png, .tif or .jpg",
            output.display()
        )));
    }
    if same_file(&output, &args.input) && !args.in_place {
        return Err(usage(format!(
            "refusing to write over the input '{}'; choose another -o, or pass --in-place",
            args.input.display()
        )));
    }
    if let Some(m) = &args.mask
        && same_file(&output, m)
    {
        return Err(usage(format!("refusing to write the result over the mask '{}'", m.display())));
    }
    if let Some(r) = &args.report
        && (same_file(r, &args.input) || same_file(r, &output) || args.mask.as_ref().is_some_and(|m| same_file(r, m)))
    {
        return Err(usage(format!("the report '{}' would overwrite an image; choose another name", r.display())));
    }
    let nodata = match &args.nodata {
        Some(text) => Some(
            parse_nodata(text).ok_or_else(|| usage(format!("--nodata takes a number or \"nan\" (got '{text}')")))?,
        ),
        None => None,
    };
    for extra in [&args.mask_out].into_iter().flatten() {
        if same_file(extra, &args.input) || same_file(extra, &output) {
            return Err(usage(format!("'{}' would overwrite an image; choose another name", extra.display())));
        }
    }
    let params = FillParams {
        cycle: match args.cycle {
            CycleArg::V => Cycle::V,
            CycleArg::F => Cycle::F,
            CycleArg::W => Cycle::W,
        },
        threads: args.threads,
        ..args.how.params()?
    };
    Ok(Plan { args, output, params, nodata })
}

pub(super) fn run(args: &FillArgs) -> Result<()> {
    let plan = plan(args)?;
    let Plan { args, output, params, nodata } = &plan;
    let say = |s: String| {
        if !args.quiet {
            eprintln!("{s}");
        }
    };
    let mask = match &args.mask {
        Some(path) => Some(MaskFile::load(path)?),
        None => None,
    };
    let job = Job {
        input: &args.input,
        output,
        mask: mask.as_ref(),
        mask_from_alpha: args.mask_from_alpha,
        nodata: nodata.map(|v| (v, args.nodata.clone().unwrap_or_default())),
        max_hole: args.max_hole,
        mask_out: args.mask_out.as_deref(),
        report: args.report.as_deref(),
        params,
        limits: raster::Limits {
            max_pixels: args.max_megapixels.saturating_mul(1_000_000),
            max_bytes: args.max_gigabytes.saturating_mul(1 << 30),
        },
        detect: None,
        distance_map: args.distance_map.as_deref(),
        scientific: args.how.scientific,
    };
    let outcome = job.run(&say)?;
    if outcome.filled > 0 {
        say(outcome.summary(&args.input, output));
    }
    Ok(())
}
