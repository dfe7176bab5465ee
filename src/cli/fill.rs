//! `reweave fill`: one image, one mask, one result.

use std::path::{Path, PathBuf};
use std::time::Instant;

use anyhow::{Context, Result, bail};
use clap::{Args, ValueEnum};

use super::{UsageError, same_file};
use crate::fill::{Cycle, FillError, FillMethod, FillParams, Solver, Start};
use crate::mask::Mask;
use crate::raster::{self, FileFormat, Raster, SampleFormat};
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
reweave fill dem.tif -o dem-filled.tif --max-hole 5000 --mask-out filled-pixels.png\n  \
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
    /// `--nodata`, parsed.
    nodata: Option<f64>,
}

/// Parses a no-data value: a number, or "nan" (any case), as GDAL writes them.
pub(crate) fn parse_nodata(text: &str) -> Option<f64> {
    let t = text.trim().trim_end_matches('\0').trim();
    if t.eq_ignore_ascii_case("nan") || t.eq_ignore_ascii_case("-nan") {
        return Some(f64::NAN);
    }
    t.parse::<f64>().ok()
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
    Ok(Plan { args, output, params, nodata })
}

/// Pixels to fill because a sample holds the no-data value or is not a finite number.
fn missing_samples(image: &Raster, nodata: Option<f64>) -> Mask {
    let n = image.width * image.height;
    let mut bits = vec![false; n];
    for plane in &image.planes {
        for (b, &v) in bits.iter_mut().zip(plane) {
            let hit = !v.is_finite() || nodata.is_some_and(|d| if d.is_nan() { v.is_nan() } else { f64::from(v) == d });
            *b |= hit;
        }
    }
    Mask::from_bits(image.width, image.height, bits)
}

/// Moves filled samples that would be stored as the no-data value one step off it, so the output
/// holds no false no-data pixels. Returns how many were moved.
fn keep_off_nodata(image: &mut Raster, mask: &Mask, nodata: f64) -> usize {
    if nodata.is_nan() {
        return 0; // a fill is never NaN
    }
    let fmt = image.sample_format;
    let mut moved = 0;
    for plane in &mut image.planes {
        for (v, &m) in plane.iter_mut().zip(mask.bits()) {
            if !m || f64::from(fmt.quantize(*v)) != nodata {
                continue;
            }
            let q = fmt.quantize(*v);
            *v = if fmt == SampleFormat::F32 {
                let up = f32::from_bits(q.to_bits() + 1);
                if up.is_finite() { up } else { f32::from_bits(q.to_bits() - 1) }
            } else if fmt.quantize(q + 1.0) != q && (*v >= q || fmt.quantize(q - 1.0) == q) {
                q + 1.0
            } else {
                q - 1.0
            };
            moved += 1;
        }
    }
    moved
}

pub(super) fn run(args: &FillArgs) -> Result<()> {
    let plan = plan(args)?;
    let Plan { args, output, params, nodata: given_nodata } = &plan;
    let say = |s: String| {
        if !args.quiet {
            eprintln!("{s}");
        }
    };

    let t_load = Instant::now();
    let limits =
        raster::Limits { max_pixels: args.max_megapixels.saturating_mul(1_000_000), ..raster::Limits::default() };
    let mut image = raster::load_with_limits(&args.input, limits)?;
    for w in &image.metadata.warnings {
        say(format!("warning: {w}"));
    }
    let mut mask = match &args.mask {
        Some(m) => raster::load_mask(m, image.width, image.height)?,
        None => Mask::new(image.width, image.height),
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
    // No-data: --nodata, else the value the file declares.
    let (nodata, nodata_text) = match (*given_nodata, &image.metadata.nodata) {
        (Some(v), _) => (Some(v), args.nodata.clone()),
        (None, Some(declared)) => match parse_nodata(declared) {
            Some(v) => (Some(v), Some(declared.clone())),
            None => {
                say(format!(
                    "warning: '{}' declares no-data as '{declared}', which is not a number; ignored",
                    args.input.display()
                ));
                (None, None)
            }
        },
        (None, None) => (None, None),
    };
    let missing = missing_samples(&image, nodata);
    let nodata_pixels = missing.count();
    for (m, a) in mask.bits_mut().iter_mut().zip(missing.bits()) {
        *m |= *a;
    }
    if args.mask.is_none() && !args.mask_from_alpha && nodata.is_none() && nodata_pixels == 0 {
        bail!(
            "nothing marks pixels to fill in '{}': give --mask MASK.png, --mask-from-alpha or --nodata VALUE",
            args.input.display()
        );
    }
    let skipped = match args.max_hole {
        Some(limit) => mask.drop_holes_larger_than(limit),
        None => Vec::new(),
    };
    if !skipped.is_empty() {
        say(format!(
            "leaving {} hole{} larger than {} pixels unfilled",
            skipped.len(),
            if skipped.len() == 1 { "" } else { "s" },
            args.max_hole.unwrap_or(0)
        ));
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
    if mask.is_empty() {
        say(format!("the mask marks no pixel of '{}'; copying the image unchanged", args.input.display()));
    }
    let fill_report = solver
        .solve(&mut image.planes_mut(), params, Start::FullMultigrid, &mut |_| true)
        .with_context(|| format!("filling '{}'", args.input.display()))?;
    if let Some(v) = nodata {
        let moved = keep_off_nodata(&mut image, &mask, v);
        if moved > 0 {
            say(format!("moved {moved} filled samples one step off the no-data value {v}"));
        }
    }

    let t_save = Instant::now();
    if !out_format.is_lossless() {
        say(format!(
            "warning: JPEG is lossy, so pixels outside the mask of '{}' will not stay exactly as they were; write .png or .tif to keep them",
            output.display()
        ));
    }
    let notes = if mask.is_empty() && out_format == image.file_format && !same_file(output, &args.input) {
        raster::write_atomic(output, |w| {
            let mut f = std::fs::File::open(&args.input).map_err(|e| e.to_string())?;
            std::io::copy(&mut f, w).map(|_| ()).map_err(|e| e.to_string())
        })?;
        Vec::new()
    } else {
        raster::save_noting(&image, output)?
    };
    for n in &notes {
        say(format!("note: {n}"));
    }
    if let Some(mask_out) = &args.mask_out {
        raster::save_mask(&mask, mask_out)?;
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
        report.nodata = nodata_text;
        report.nodata_pixels = nodata_pixels;
        report.skipped_pixels = skipped.iter().map(|h| h.pixels).sum();
        report.skipped_holes = skipped.into_iter().take(crate::report::HOLE_LIST_MAX).collect();
        report.notes = notes;
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
