//! `reweave batch`: the same repair over many files, in parallel, one failure not stopping the rest.

use std::path::{Path, PathBuf};
use std::sync::Mutex;
use std::sync::atomic::{AtomicUsize, Ordering};
use std::time::Instant;

use anyhow::Result;
use clap::Args;
use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};

use super::UsageError;
use super::job::{Job, MaskFile, Outcome, parse_nodata};
use crate::fill::FillParams;
use crate::raster::{self, FileFormat};

/// Repair many files with one mask (a fixed bad-pixel map) and/or their own no-data, writing
/// each result under the same name into OUTDIR.
///
/// Files are processed in parallel, at most --jobs at a time (and so in memory). A file that
/// fails is reported and the rest go on; the exit code is 1 if any failed. Results are written
/// atomically, so after an interruption a re-run with --skip-existing finishes the rest.
#[derive(Debug, Args)]
#[command(after_help = "Examples:\n  \
reweave batch frames/*.tif --mask badpix.png -o fixed/ --report-dir fixed/reports\n  \
reweave batch tiles/ --nodata -32768 -o filled/ --skip-existing\n  \
reweave batch frames/ --detect outliers -o fixed/\n\n\
On a cluster, give each array task its own slice of the same sorted list (Slurm):\n  \
reweave batch archive/*.tif --mask badpix.png -o fixed/ --shard $((SLURM_ARRAY_TASK_ID+1))/$SLURM_ARRAY_TASK_COUNT")]
pub struct BatchArgs {
    /// Image files, or folders whose PNG, TIFF and JPEG files are taken (not recursively).
    #[arg(required = true)]
    pub inputs: Vec<PathBuf>,

    /// Folder for the results (created if missing); each keeps its input's file name.
    #[arg(short, long, value_name = "OUTDIR")]
    pub output: PathBuf,

    /// One mask for every file (a pixel is filled where its luma is 128 or more).
    #[arg(short, long, value_name = "MASK")]
    pub mask: Option<PathBuf>,

    /// Also fill each file's transparent pixels.
    #[arg(long)]
    pub mask_from_alpha: bool,

    /// Also fill pixels holding this value ("nan" allowed); else each TIFF's declared no-data.
    #[arg(long, value_name = "VALUE", allow_hyphen_values = true)]
    pub nodata: Option<String>,

    /// Also fill what this detector finds in each file (see `reweave detect --help`).
    #[arg(long, value_enum, value_name = "METHOD")]
    pub detect: Option<super::detect::Method>,

    #[command(flatten)]
    pub detect_options: super::detect::DetectOptions,

    /// Leave holes larger than this many pixels unfilled.
    #[arg(long, value_name = "PIXELS")]
    pub max_hole: Option<usize>,

    /// Files processed at the same time.
    #[arg(short, long, default_value_t = 2, value_name = "N")]
    pub jobs: usize,

    /// Take only slice I of N of the sorted input list (1 ≤ I ≤ N): file k goes to slice k mod N.
    #[arg(long, value_name = "I/N")]
    pub shard: Option<String>,

    /// Leave files whose result already exists (results are written atomically, so an existing
    /// one is complete).
    #[arg(long)]
    pub skip_existing: bool,

    /// Write one JSON report per file here (named after the file).
    #[arg(long, value_name = "DIR")]
    pub report_dir: Option<PathBuf>,

    #[command(flatten)]
    pub how: super::fill::MethodOptions,

    /// Largest image accepted, in megapixels.
    #[arg(long, default_value_t = 1024, value_name = "MP")]
    pub max_megapixels: u64,

    /// Largest decoded image accepted, in gigabytes of memory.
    #[arg(long, default_value_t = 8, value_name = "GB")]
    pub max_gigabytes: u64,

    /// No progress bar, no warnings; only the summary and errors.
    #[arg(short, long)]
    pub quiet: bool,
}

/// The files named by the inputs, sorted, without duplicates.
fn expand(inputs: &[PathBuf]) -> Result<Vec<PathBuf>> {
    let mut files = Vec::new();
    for p in inputs {
        if p.is_dir() {
            let entries =
                std::fs::read_dir(p).map_err(|e| UsageError(format!("cannot list '{}': {e}", p.display())))?;
            for e in entries.flatten() {
                let path = e.path();
                if path.is_file() && FileFormat::from_extension(&path).is_some() {
                    files.push(path);
                }
            }
        } else {
            files.push(p.clone());
        }
    }
    files.sort();
    files.dedup();
    Ok(files)
}

/// Parses `I/N`.
fn parse_shard(text: &str) -> Option<(usize, usize)> {
    let (i, n) = text.split_once('/')?;
    let (i, n) = (i.trim().parse().ok()?, n.trim().parse().ok()?);
    (1..=n).contains(&i).then_some((i, n))
}

/// The slice `i` of `n` (1-based) of a sorted list.
#[must_use]
pub fn shard<T: Clone>(items: &[T], i: usize, n: usize) -> Vec<T> {
    items.iter().enumerate().filter(|(k, _)| k % n == i - 1).map(|(_, t)| t.clone()).collect()
}

enum Done {
    Filled(Outcome),
    Skipped,
    Failed(String),
}

pub(super) fn run(args: &BatchArgs) -> Result<()> {
    // Options first: a refused combination must not leave an output folder behind.
    let params: FillParams = args.how.params()?;
    let usage = |m: String| -> anyhow::Error { UsageError(m).into() };
    let mut files = expand(&args.inputs)?;
    if let Some(text) = &args.shard {
        let (i, n) =
            parse_shard(text).ok_or_else(|| usage(format!("--shard takes I/N with 1 ≤ I ≤ N (got '{text}')")))?;
        files = shard(&files, i, n);
    }
    if let Some(m) = args.detect {
        if m == super::detect::Method::Stack {
            return Err(usage("--detect stack needs all frames at once: run `reweave detect FRAMES... --by stack -o badpix.png`, then batch --mask badpix.png".to_owned()));
        }
        super::detect::check(m, &args.detect_options)?;
    }
    if args.jobs == 0 {
        return Err(usage("--jobs must be at least 1".to_owned()));
    }
    let nodata = match &args.nodata {
        Some(t) => Some((
            parse_nodata(t).ok_or_else(|| usage(format!("--nodata takes a number or \"nan\" (got '{t}')")))?,
            t.clone(),
        )),
        None => None,
    };
    // Outputs: same file name in OUTDIR; two inputs with one name would overwrite each other.
    let mut outputs: Vec<PathBuf> = Vec::with_capacity(files.len());
    for f in &files {
        let name = f.file_name().ok_or_else(|| usage(format!("'{}' has no file name", f.display())))?;
        let out = args.output.join(name);
        if FileFormat::from_extension(&out).is_none() {
            return Err(usage(format!("'{}' has no .png, .tif or .jpg extension", f.display())));
        }
        if super::same_file(&out, f) {
            return Err(usage(format!("the result of '{}' would overwrite it; choose another -o folder", f.display())));
        }
        outputs.push(out);
    }
    let mut names: Vec<&PathBuf> = outputs.iter().collect();
    names.sort();
    if let Some(w) = names.windows(2).find(|w| w[0] == w[1]) {
        return Err(usage(format!("two inputs would both be written to '{}'; rename one", w[0].display())));
    }
    std::fs::create_dir_all(&args.output)
        .map_err(|e| anyhow::anyhow!("cannot create the output folder '{}': {e}", args.output.display()))?;
    if let Some(d) = &args.report_dir {
        std::fs::create_dir_all(d)
            .map_err(|e| anyhow::anyhow!("cannot create the report folder '{}': {e}", d.display()))?;
    }
    let mask = match &args.mask {
        Some(p) => Some(MaskFile::load(p)?),
        None => None,
    };
    let limits = raster::Limits {
        max_pixels: args.max_megapixels.saturating_mul(1_000_000),
        max_bytes: args.max_gigabytes.saturating_mul(1 << 30),
    };

    let bar = if args.quiet {
        ProgressBar::hidden()
    } else {
        ProgressBar::with_draw_target(Some(files.len() as u64), ProgressDrawTarget::stderr())
    };
    bar.set_style(
        ProgressStyle::with_template("{bar:30} {pos}/{len} files  {per_sec}  ETA {eta}  {wide_msg}")
            .unwrap_or_else(|_| ProgressStyle::default_bar()),
    );
    // Messages go above the bar on a terminal, straight to stderr otherwise.
    let say = |s: String| {
        if args.quiet && !s.starts_with("error") {
            return;
        }
        if bar.is_hidden() {
            eprintln!("{s}");
        } else {
            bar.println(s);
        }
    };
    let started = Instant::now();
    let next = AtomicUsize::new(0);
    let results: Mutex<Vec<(usize, Done)>> = Mutex::new(Vec::with_capacity(files.len()));
    std::thread::scope(|scope| {
        for worker in 0..args.jobs.min(files.len().max(1)) {
            let (next, results, files, outputs, bar, say, mask, params, nodata) =
                (&next, &results, &files, &outputs, &bar, &say, mask.as_ref(), &params, &nodata);
            let spawned =
                std::thread::Builder::new().name(format!("reweave-batch-{worker}")).spawn_scoped(scope, move || {
                    loop {
                        let k = next.fetch_add(1, Ordering::Relaxed);
                        let Some(input) = files.get(k) else { break };
                        let output = &outputs[k];
                        let done = if args.skip_existing && output.exists() {
                            Done::Skipped
                        } else {
                            let report = args.report_dir.as_ref().map(|d| report_path(d, input));
                            let job = Job {
                                input,
                                output,
                                mask,
                                mask_from_alpha: args.mask_from_alpha,
                                nodata: nodata.clone(),
                                max_hole: args.max_hole,
                                mask_out: None,
                                report: report.as_deref(),
                                params,
                                limits,
                                detect: args.detect.map(|m| (m, &args.detect_options)),
                                distance_map: None,
                                scientific: args.how.scientific,
                            };
                            match job.run(say) {
                                Ok(o) => Done::Filled(o),
                                Err(e) => {
                                    say(format!("error: {e:#}"));
                                    Done::Failed(format!("{e:#}"))
                                }
                            }
                        };
                        if let Ok(mut r) = results.lock() {
                            r.push((k, done));
                        }
                        bar.inc(1);
                    }
                });
            if let Err(e) = spawned {
                say(format!("error: could not start worker {worker}: {e}"));
            }
        }
    });
    bar.finish_and_clear();
    let seconds = started.elapsed().as_secs_f64();
    let mut results = results.into_inner().unwrap_or_default();
    results.sort_by_key(|(k, _)| *k);

    let (mut filled, mut skipped, mut pixels) = (0usize, 0usize, 0usize);
    let (mut load_seconds, mut fill_seconds, mut save_seconds) = (0f64, 0f64, 0f64);
    let mut failed = Vec::new();
    for (k, done) in &results {
        match done {
            Done::Filled(o) => {
                filled += 1;
                pixels += o.filled;
                fill_seconds += o.fill.setup_seconds + o.fill.solve_seconds;
                load_seconds += o.load_seconds;
                save_seconds += o.save_seconds;
            }
            Done::Skipped => skipped += 1,
            Done::Failed(msg) => failed.push((files[*k].clone(), msg.clone())),
        }
    }
    let lost = files.len() - results.len();
    #[allow(clippy::cast_precision_loss)] // counts for display
    let rate = (filled + failed.len()) as f64 / seconds.max(1e-9);
    println!("files      {}", files.len());
    println!("repaired   {filled}");
    println!("skipped    {skipped}");
    println!("failed     {}", failed.len() + lost);
    println!("pixels     {pixels} filled");
    println!("time       {seconds:.2} s, {rate:.2} files/s with {} jobs", args.jobs);
    let busy = (load_seconds + fill_seconds + save_seconds).max(1e-9);
    println!(
        "work       read {load_seconds:.2} s ({:.0}%), fill {fill_seconds:.2} s ({:.0}%), write {save_seconds:.2} s ({:.0}%)",
        100.0 * load_seconds / busy,
        100.0 * fill_seconds / busy,
        100.0 * save_seconds / busy
    );
    if failed.is_empty() && lost == 0 {
        return Ok(());
    }
    println!("failed files:");
    for (path, msg) in &failed {
        println!("  {}: {msg}", path.display());
    }
    Err(anyhow::anyhow!("{} of {} files failed (listed above)", failed.len() + lost, files.len()))
}

fn report_path(dir: &Path, input: &Path) -> PathBuf {
    let name = input.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
    dir.join(format!("{name}.json"))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn shards_cover_every_item_once() {
        let items: Vec<usize> = (0..50).collect();
        let mut all: Vec<usize> = (1..=3).flat_map(|i| shard(&items, i, 3)).collect();
        all.sort_unstable();
        assert_eq!(all, items);
        assert_eq!(parse_shard("2/3"), Some((2, 3)));
        assert_eq!(parse_shard("0/3"), None);
        assert_eq!(parse_shard("4/3"), None);
    }
}
