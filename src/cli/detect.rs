//! `reweave detect`: find the damage and write it as a mask; also used by `batch --detect`.

use std::path::PathBuf;

use anyhow::{Result, bail};
use clap::{Args, ValueEnum};

use super::UsageError;
use super::job::parse_nodata;
use crate::detect::{self, OutlierParams, ScratchParams, Stack};
use crate::mask::Mask;
use crate::raster::{self, Raster};

/// How to find damaged pixels.
#[derive(Clone, Copy, Debug, PartialEq, Eq, ValueEnum)]
pub enum Method {
    /// Single pixels far from their local median and sharper than the optics allow (hot, dead,
    /// cosmic-ray-like); stars and fine lines are spared.
    Outliers,
    /// From several frames of one sensor: pixels extreme in a share of them, or stuck.
    Stack,
    /// Columns and rows whose median departs from their neighbours' (bad columns).
    Lines,
    /// Thin bright or dark structures at least --min-length long (scanned film and prints).
    Scratches,
    /// Pixels within --tolerance of --value (stamps, annotations, grid lines).
    Value,
    /// No-data (--value, else the file's GDAL_NODATA) and NaN/infinite samples.
    Nodata,
    /// Transparent pixels (alpha 0).
    Alpha,
}

/// Options of the detectors (each method uses the ones it names).
#[derive(Clone, Debug, Args)]
pub struct DetectOptions {
    /// Threshold in robust standard deviations (outliers, stack, lines, scratches).
    #[arg(short = 'k', long, default_value_t = 5.0, value_name = "SIGMAS")]
    pub k: f64,
    /// Sharpness limit of outliers: higher spares more real point sources.
    #[arg(long, default_value_t = 2.0, value_name = "RATIO")]
    pub sharpness: f64,
    /// Share of frames in which a pixel must be extreme (stack).
    #[arg(long, default_value_t = 0.5, value_name = "SHARE")]
    pub share: f64,
    /// Width of the scratch detector's element, wider than the widest scratch (pixels).
    #[arg(long, default_value_t = 7, value_name = "PIXELS")]
    pub element: usize,
    /// Shortest scratch kept (pixels).
    #[arg(long, default_value_t = 15, value_name = "PIXELS")]
    pub min_length: usize,
    /// The value or colour to find, in the image's units: one number or one per channel
    /// (e.g. 255,0,0); "nan" allowed.
    #[arg(long, value_name = "V[,V...]", allow_hyphen_values = true)]
    pub value: Option<String>,
    /// How far from --value a sample may be.
    #[arg(long = "within", default_value_t = 0.0, value_name = "UNITS")]
    pub within: f64,
    /// Only pixels connected to this one (value): X,Y.
    #[arg(long, value_name = "X,Y")]
    pub seed: Option<String>,
    /// Add a halo of N pixels around what was found.
    #[arg(long, default_value_t = 0, value_name = "N")]
    pub grow: usize,
    /// Drop found regions smaller than this many pixels.
    #[arg(long, value_name = "PIXELS")]
    pub min_size: Option<usize>,
    /// Drop found regions larger than this many pixels.
    #[arg(long, value_name = "PIXELS")]
    pub max_size: Option<usize>,
}

impl Default for DetectOptions {
    /// The command line's defaults.
    fn default() -> Self {
        Self {
            k: 5.0,
            sharpness: 2.0,
            share: 0.5,
            element: 7,
            min_length: 15,
            value: None,
            within: 0.0,
            seed: None,
            grow: 0,
            min_size: None,
            max_size: None,
        }
    }
}

/// Find damaged pixels and write them as a mask (PNG, white = damaged).
///
/// For every method but stack, several inputs (of one size) are each searched and the results
/// combined.
#[derive(Debug, Args)]
#[command(after_help = "Examples:\n  \
reweave detect frame.tif --by outliers -o hotpix.png\n  \
reweave detect darks/*.tif --by stack --share 0.5 -o badpix.png\n  \
reweave detect frame.tif --by lines -o columns.png\n  \
reweave detect scan.png --by scratches --grow 1 -o scratches.png\n  \
reweave detect map.png --by value --value 200,30,30 --within 25 --seed 120,48 -o stamp.png")]
pub struct DetectArgs {
    /// Images to search.
    #[arg(required = true)]
    pub inputs: Vec<PathBuf>,
    /// Detection method.
    #[arg(long, value_enum)]
    pub by: Method,
    /// The mask to write (PNG).
    #[arg(short, long, value_name = "MASK.png")]
    pub output: PathBuf,
    #[command(flatten)]
    pub options: DetectOptions,
}

/// Checks the options a method needs, before any file is read.
pub(crate) fn check(method: Method, o: &DetectOptions) -> Result<()> {
    let usage = |m: String| -> anyhow::Error { UsageError(m).into() };
    if method == Method::Value && o.value.is_none() {
        return Err(usage("--by value needs --value V (one number, or one per channel)".to_owned()));
    }
    if let Some(v) = &o.value
        && parse_values(v).is_none()
    {
        return Err(usage(format!("--value takes numbers separated by commas (got '{v}')")));
    }
    if let Some(s) = &o.seed
        && parse_seed(s).is_none()
    {
        return Err(usage(format!("--seed takes X,Y (got '{s}')")));
    }
    if o.k.is_nan() || o.k <= 0.0 || !(0.0..=1.0).contains(&o.share) {
        return Err(usage("-k must be positive and --share between 0 and 1".to_owned()));
    }
    Ok(())
}

fn parse_values(text: &str) -> Option<Vec<f64>> {
    text.split(',').map(parse_nodata).collect()
}

fn parse_seed(text: &str) -> Option<(usize, usize)> {
    let (x, y) = text.split_once(',')?;
    Some((x.trim().parse().ok()?, y.trim().parse().ok()?))
}

/// Runs a single-image method on one raster.
pub fn detect_one(method: Method, image: &Raster, o: &DetectOptions) -> Result<Mask> {
    let (w, h) = (image.width, image.height);
    let mut mask = match method {
        Method::Outliers => detect::outliers(
            &image.planes,
            w,
            h,
            &OutlierParams { k: o.k, sharpness: o.sharpness, ..OutlierParams::default() },
        ),
        Method::Lines => detect::lines(&image.planes, w, h, o.k),
        Method::Scratches => detect::scratches(
            &image.planes,
            w,
            h,
            &ScratchParams { element: o.element.max(3), k: o.k, min_length: o.min_length },
        ),
        Method::Value => {
            let values = o.value.as_deref().and_then(parse_values).unwrap_or_default();
            detect::by_value(&image.planes, w, h, &values, o.within, o.seed.as_deref().and_then(parse_seed))
        }
        Method::Nodata => {
            let nodata = o
                .value
                .as_deref()
                .and_then(parse_nodata)
                .or_else(|| image.metadata.nodata.as_deref().and_then(parse_nodata));
            let bits = (0..w * h)
                .map(|i| {
                    image.planes.iter().any(|p| {
                        let v = p[i];
                        !v.is_finite() || nodata.is_some_and(|d| !d.is_nan() && f64::from(v) == d)
                    })
                })
                .collect();
            Mask::from_bits(w, h, bits)
        }
        Method::Alpha => match image.transparent_mask() {
            Some(m) => m,
            None => bail!("the image has no alpha channel"),
        },
        Method::Stack => bail!("the stack method needs several frames; use `reweave detect FRAMES... --by stack`"),
    };
    finish(&mut mask, o);
    Ok(mask)
}

fn finish(mask: &mut Mask, o: &DetectOptions) {
    detect::keep_sizes(mask, o.min_size, o.max_size);
    detect::grow(mask, o.grow);
}

pub(super) fn run(args: &DetectArgs) -> Result<()> {
    check(args.by, &args.options)?;
    if raster::FileFormat::from_extension(&args.output) != Some(raster::FileFormat::Png) {
        return Err(UsageError(format!("the mask '{}' must be a .png file", args.output.display())).into());
    }
    let mut total: Option<Mask> = None;
    let mut stack: Option<Stack> = None;
    for input in &args.inputs {
        let image = raster::load(input)?;
        if let Some(t) = &total
            && (t.width(), t.height()) != (image.width, image.height)
        {
            bail!(
                "'{}' is {}×{} but the first input is {}×{}; detect on images of one size",
                input.display(),
                image.width,
                image.height,
                t.width(),
                t.height()
            );
        }
        if args.by == Method::Stack {
            let s = stack.get_or_insert_with(|| Stack::new(image.width, image.height, args.options.k));
            s.add(&image.planes[0]);
            total.get_or_insert_with(|| Mask::new(image.width, image.height));
            continue;
        }
        let found =
            detect_one(args.by, &image, &args.options).map_err(|e| anyhow::anyhow!("'{}': {e}", input.display()))?;
        match &mut total {
            Some(t) => {
                for (a, b) in t.bits_mut().iter_mut().zip(found.bits()) {
                    *a |= *b;
                }
            }
            None => total = Some(found),
        }
    }
    let mask = match (stack, total) {
        (Some(s), _) => {
            let mut m = s.finish(args.options.share);
            finish(&mut m, &args.options);
            m
        }
        (None, Some(t)) => t,
        (None, None) => bail!("no input"),
    };
    if args.by == Method::Stack && args.inputs.len() < 2 {
        eprintln!("warning: a stack of one frame finds only extreme pixels; give several frames");
    }
    let stats = mask.hole_stats();
    raster::save_mask(&mask, &args.output)?;
    let count = mask.count();
    #[allow(clippy::cast_precision_loss)]
    let share = 100.0 * count as f64 / (mask.width() * mask.height()).max(1) as f64;
    println!(
        "marked {count} pixels ({share:.3}%) in {} region{} (largest {}) -> '{}'",
        stats.holes,
        if stats.holes == 1 { "" } else { "s" },
        stats.largest,
        args.output.display()
    );
    Ok(())
}
