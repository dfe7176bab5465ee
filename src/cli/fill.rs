//! `reweave fill`: one image, one mask, one result.

use std::path::{Path, PathBuf};
use std::time::Instant;

use anyhow::{Context, Result, bail};
use clap::{Args, ValueEnum};

use super::{UsageError, same_file};
use crate::fill::{Cycle, FillError, FillMethod, FillParams, Solver, Start};
use crate::raster::{self, FileFormat};
use crate::report::{FileRecord, Inputs, Report};

#[derive(Clone, Copy, Debug, PartialEq, Eq, ValueEnum)]
pub enum MethodArg {
    /// Laplace's equation: the smoothest fill meeting the rim (the only method so far).
    Harmonic,
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
reweave fill scan.tif --mask damage.png --in-place")]
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

    /// Where to write the result; its extension picks the format (.png, .tif, .tiff, .jpg).
    #[arg(short, long, value_name = "FILE")]
    pub output: Option<PathBuf>,

    /// Allow writing the result over INPUT (then --output may be left out).
    #[arg(long)]
    pub in_place: bool,

    /// Write a JSON report: inputs and their SHA-256, mask counts, residual per channel, timings.
    #[arg(long, value_name = "FILE.json")]
    pub report: Option<PathBuf>,

    /// Fill method.
    #[arg(long, value_enum, default_value = "harmonic")]
    pub method: MethodArg,

    /// Stop when the relative residual ‖b − Au‖/‖b‖ of every channel is at most this.
    #[arg(long, default_value_t = 1e-6, value_name = "REL")]
    pub tolerance: f64,

    /// Give up after this many multigrid cycles.
    #[arg(long, default_value_t = 100, value_name = "N")]
    pub max_cycles: usize,

    /// Multigrid cycle shape.
    #[arg(long, value_enum, default_value = "v")]
    pub cycle: CycleArg,

    /// Worker threads (0: all cores). Results are the same for any number.
    #[arg(long, default_value_t = 0, value_name = "N")]
    pub threads: usize,

    /// Largest image accepted, in megapixels (protects against corrupt headers).
    #[arg(long, default_value_t = 1024, value_name = "MP")]
    pub max_megapixels: u64,

    /// Print nothing but errors.
    #[arg(short, long)]
    pub quiet: bool,
}

/// The checked plan of a fill.
struct Plan<'a> {
    args: &'a FillArgs,
    output: PathBuf,
    params: FillParams,
}

fn plan(args: &FillArgs) -> Result<Plan<'_>> {
    let usage = |m: String| -> anyhow::Error { UsageError(m).into() };
    if args.mask.is_none() && !args.mask_from_alpha {
        return Err(usage("say which pixels to fill: give --mask MASK.png or --mask-from-alpha".to_owned()));
    }
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
    if !(args.tolerance > 0.0 && args.tolerance < 1.0) {
        return Err(usage(format!("--tolerance must be between 0 and 1 (got {})", args.tolerance)));
    }
    let params = FillParams {
        method: match args.method {
            MethodArg::Harmonic => FillMethod::Harmonic,
        },
        tolerance: args.tolerance,
        max_cycles: args.max_cycles,
        cycle: match args.cycle {
            CycleArg::V => Cycle::V,
            CycleArg::F => Cycle::F,
            CycleArg::W => Cycle::W,
        },
        threads: args.threads,
        ..FillParams::default()
    };
    Ok(Plan { args, output, params })
}

pub(super) fn run(args: &FillArgs) -> Result<()> {
    let plan = plan(args)?;
    let Plan { args, output, params } = &plan;
    let say = |s: String| {
        if !args.quiet {
            eprintln!("{s}");
        }
    };

    let t_load = Instant::now();
    let limits =
        raster::Limits { max_pixels: args.max_megapixels.saturating_mul(1_000_000), ..raster::Limits::default() };
    let mut image = raster::load_with_limits(&args.input, limits)?;
    let mut mask = match &args.mask {
        Some(m) => raster::load_mask(m, image.width, image.height)?,
        None => crate::mask::Mask::new(image.width, image.height),
    };
    if args.mask_from_alpha {
        let Some(alpha) = image.transparent_mask() else {
            bail!(
                "'{}' has no alpha channel, so --mask-from-alpha marks nothing; give --mask instead",
                args.input.display()
            );
        };
        for (m, a) in mask.bits_mut().iter_mut().zip(alpha.bits()) {
            *m |= *a;
        }
    }
    let load_seconds = t_load.elapsed().as_secs_f64();
    let holes = mask.hole_stats();

    let out_format = FileFormat::from_extension(output).unwrap_or(FileFormat::Png);
    let solver = Solver::new(&mask).map_err(|e| match e {
        FillError::NoKnownPixels => anyhow::anyhow!(
            "the mask marks every pixel of '{}', so there is no known pixel to fill from; mask only the damage",
            args.input.display()
        ),
        other => other.into(),
    })?;
    let fill_report = if mask.is_empty() {
        say(format!("the mask marks no pixel of '{}'; copying the image unchanged", args.input.display()));
        solver.solve(&mut image.planes_mut(), params, Start::FullMultigrid, &mut |_| true)?
    } else {
        solver
            .solve(&mut image.planes_mut(), params, Start::FullMultigrid, &mut |_| true)
            .with_context(|| format!("filling '{}'", args.input.display()))?
    };

    let t_save = Instant::now();
    if !out_format.is_lossless() {
        say(format!(
            "warning: JPEG is lossy, so pixels outside the mask of '{}' will not stay exactly as they were; write .png or .tif to keep them",
            output.display()
        ));
    }
    if mask.is_empty() && out_format == image.file_format && !same_file(output, &args.input) {
        raster::write_atomic(output, |w| {
            let mut f = std::fs::File::open(&args.input).map_err(|e| e.to_string())?;
            std::io::copy(&mut f, w).map(|_| ()).map_err(|e| e.to_string())
        })?;
    } else {
        raster::save(&image, output)?;
    }
    let save_seconds = t_save.elapsed().as_secs_f64();

    if let Some(report_path) = &args.report {
        let inputs = Inputs {
            image: FileRecord::of(&args.input).with_context(|| format!("hashing '{}'", args.input.display()))?,
            mask: match &args.mask {
                Some(m) => Some(FileRecord::of(m).with_context(|| format!("hashing '{}'", m.display()))?),
                None => None,
            },
            mask_from_alpha: args.mask_from_alpha,
        };
        let mut report = Report::new(inputs, &image, &mask, &holes, &fill_report, params.tolerance);
        report.output = Some(FileRecord::of(output).with_context(|| format!("hashing '{}'", output.display()))?);
        report.seconds.load = load_seconds;
        report.seconds.save = save_seconds;
        let json = report.to_json();
        raster::write_atomic(report_path, |w| {
            use std::io::Write;
            w.write_all(json.as_bytes()).and_then(|()| w.write_all(b"\n")).map_err(|e| e.to_string())
        })?;
    }

    if !mask.is_empty() {
        let worst = fill_report.channels.iter().map(|c| c.relative_residual).fold(0.0, f64::max);
        let cycles = fill_report.channels.iter().map(|c| c.cycles).max().unwrap_or(0);
        say(format!(
            "filled {} pixels in {} hole{} (largest {}) of '{}' -> '{}': residual {:.1e} after {} cycle{}, {:.3} s",
            mask.count(),
            holes.holes,
            if holes.holes == 1 { "" } else { "s" },
            holes.largest,
            display_name(&args.input),
            display_name(output),
            worst,
            cycles,
            if cycles == 1 { "" } else { "s" },
            fill_report.setup_seconds + fill_report.solve_seconds,
        ));
    }
    Ok(())
}

fn display_name(p: &Path) -> String {
    p.display().to_string()
}
