//! One repair, as `fill` and `batch` both run it: load, assemble the mask (mask file, alpha,
//! no-data, NaN), leave holes over the size limit, fill, keep off the no-data value, save
//! atomically, write the mask and the report.

use std::path::{Path, PathBuf};
use std::sync::OnceLock;
use std::time::Instant;

use anyhow::{Context, Result, bail};

use super::same_file;
use crate::fill::{FillError, FillMethod, FillParams, FillReport, Solver, Start};
use crate::mask::{Hole, HoleStats, Mask};
pub(crate) use crate::raster::nodata::parse_nodata;
use crate::raster::nodata::{keep_off_nodata, missing_samples};
use crate::raster::{self, FileFormat, RasterError};
use crate::report::{DEEP_HOLE_PX, FileRecord, HOLE_LIST_MAX, Inputs, Report};

/// A mask file read once and shared by every job, with its hash and (once built) its solver.
pub(crate) struct MaskFile {
    pub path: PathBuf,
    pub mask: Mask,
    pub record: FileRecord,
    solver: OnceLock<std::result::Result<Solver, FillError>>,
}

impl MaskFile {
    pub fn load(path: &Path) -> Result<Self> {
        let r = raster::load(path)?;
        let record = FileRecord::of(path).with_context(|| format!("hashing '{}'", path.display()))?;
        Ok(Self { path: path.to_owned(), mask: raster::mask_from_raster(&r), record, solver: OnceLock::new() })
    }

    /// The solver of this mask alone, built on first use.
    fn solver(&self, method: FillMethod) -> &std::result::Result<Solver, FillError> {
        self.solver.get_or_init(|| Solver::for_method(&self.mask, method))
    }
}

/// Everything one repair needs.
pub(crate) struct Job<'a> {
    pub input: &'a Path,
    pub output: &'a Path,
    pub mask: Option<&'a MaskFile>,
    pub mask_from_alpha: bool,
    /// The no-data value given on the command line, and its text.
    pub nodata: Option<(f64, String)>,
    pub max_hole: Option<usize>,
    pub mask_out: Option<&'a Path>,
    pub report: Option<&'a Path>,
    pub params: &'a FillParams,
    pub limits: raster::Limits,
    /// Damage found in each image by a detector, added to the mask.
    pub detect: Option<(super::detect::Method, &'a super::detect::DetectOptions)>,
    /// Write each pixel's distance to the nearest known pixel as a 32-bit float TIFF.
    pub distance_map: Option<&'a Path>,
    /// The scientific profile was asked for (recorded in the report).
    pub scientific: bool,
}

/// What a repair did.
pub(crate) struct Outcome {
    pub filled: usize,
    pub holes: HoleStats,
    pub fill: FillReport,
    /// Reading and decoding, mask assembly and detection included.
    pub load_seconds: f64,
    /// Encoding and writing the result, mask and report.
    pub save_seconds: f64,
}

impl Outcome {
    pub fn summary(&self, input: &Path, output: &Path) -> String {
        let worst = self.fill.channels.iter().map(|c| c.relative_residual).fold(0.0, f64::max);
        let cycles = self.fill.channels.iter().map(|c| c.cycles).max().unwrap_or(0);
        // Every hole solved by factorisation takes no cycle.
        let how = match cycles {
            0 => "(solved directly)".to_owned(),
            1 => "after 1 cycle".to_owned(),
            n => format!("after {n} cycles"),
        };
        format!(
            "filled {} pixels in {} hole{} (largest {}) of '{}' -> '{}': residual {:.1e} {}, {:.3} s",
            self.filled,
            self.holes.holes,
            if self.holes.holes == 1 { "" } else { "s" },
            self.holes.largest,
            input.display(),
            output.display(),
            worst,
            how,
            self.fill.setup_seconds + self.fill.solve_seconds,
        )
    }
}

impl Job<'_> {
    /// Runs the repair. `say` receives warnings and notes.
    pub fn run(&self, say: &(dyn Fn(String) + Sync)) -> Result<Outcome> {
        let input = self.input;
        let t_load = Instant::now();
        let mut image = raster::load_with_limits(input, self.limits)?;
        for w in &image.metadata.warnings {
            say(format!("warning: {w}"));
        }
        let mut mask = match self.mask {
            Some(m) => {
                if (m.mask.width(), m.mask.height()) != (image.width, image.height) {
                    return Err(RasterError::MaskSize {
                        path: m.path.clone(),
                        width: image.width,
                        height: image.height,
                        mask_width: m.mask.width(),
                        mask_height: m.mask.height(),
                    }
                    .into());
                }
                m.mask.clone()
            }
            None => Mask::new(image.width, image.height),
        };
        let mut own_mask = false;
        if self.mask_from_alpha {
            let Some(alpha) = image.transparent_mask() else {
                bail!(
                    "'{}' has no alpha channel, so --mask-from-alpha marks nothing; give --mask instead",
                    input.display()
                );
            };
            own_mask |= merge(&mut mask, &alpha);
        }
        let mut detected = 0;
        if let Some((method, options)) = self.detect {
            let found = super::detect::detect_one(method, &image, options)
                .map_err(|e| anyhow::anyhow!("detecting in '{}': {e}", input.display()))?;
            detected = found.count();
            own_mask |= merge(&mut mask, &found);
        }
        // No-data: the value given, else the value the file declares.
        let (nodata, nodata_text) = match (&self.nodata, &image.metadata.nodata) {
            (Some((v, text)), _) => (Some(*v), Some(text.clone())),
            (None, Some(declared)) => match parse_nodata(declared) {
                Some(v) => (Some(v), Some(declared.clone())),
                None => {
                    say(format!(
                        "warning: '{}' declares no-data as '{declared}', which is not a number; ignored",
                        input.display()
                    ));
                    (None, None)
                }
            },
            (None, None) => (None, None),
        };
        let missing = missing_samples(&image, nodata);
        let nodata_pixels = missing.count();
        own_mask |= merge(&mut mask, &missing);
        if self.mask.is_none()
            && !self.mask_from_alpha
            && self.detect.is_none()
            && nodata.is_none()
            && nodata_pixels == 0
        {
            bail!(
                "nothing marks pixels to fill in '{}': give --mask MASK.png, --mask-from-alpha or --nodata VALUE",
                input.display()
            );
        }
        let skipped: Vec<Hole> = self.max_hole.map(|limit| mask.drop_holes_larger_than(limit)).unwrap_or_default();
        own_mask |= !skipped.is_empty();
        if !skipped.is_empty() {
            say(format!(
                "leaving {} hole{} of '{}' larger than {} pixels unfilled",
                skipped.len(),
                if skipped.len() == 1 { "" } else { "s" },
                input.display(),
                self.max_hole.unwrap_or(0)
            ));
        }
        let load_seconds = t_load.elapsed().as_secs_f64();
        let holes = mask.hole_stats();

        let no_known = || {
            anyhow::anyhow!(
                "the mask marks every pixel of '{}', so there is no known pixel to fill from; mask only the damage",
                input.display()
            )
        };
        let built;
        let solver = match (self.mask, own_mask) {
            (Some(m), false) => match m.solver(self.params.method) {
                Ok(s) => s,
                Err(FillError::NoKnownPixels) => return Err(no_known()),
                Err(e) => return Err(anyhow::anyhow!("{e}")),
            },
            _ => {
                built = Solver::for_method(&mask, self.params.method).map_err(|e| match e {
                    FillError::NoKnownPixels => no_known(),
                    other => other.into(),
                })?;
                &built
            }
        };
        if mask.is_empty() {
            say(format!("the mask marks no pixel of '{}'; copying the image unchanged", input.display()));
        }
        let fill = solver
            .solve(&mut image.planes_mut(), self.params, Start::FullMultigrid, &mut |_| true)
            .with_context(|| format!("filling '{}'", input.display()))?;
        if let Some(v) = nodata {
            let moved = keep_off_nodata(&mut image.planes, image.sample_format, &mask, v);
            if moved > 0 {
                say(format!(
                    "moved {moved} filled samples of '{}' one step off the no-data value {v}",
                    input.display()
                ));
            }
        }

        // How far the fill reaches from known pixels: deep holes are only interpolated.
        let (deep, distance) = if mask.is_empty() {
            (Vec::new(), None)
        } else {
            let distance = crate::mask::distance::distance_to_known(&mask);
            (crate::mask::distance::holes_deeper_than(&mask, &distance, DEEP_HOLE_PX), Some(distance))
        };
        let deep_warning = crate::report::deep_hole_warning(&deep, self.params.method, self.scientific);
        if let Some(w) = &deep_warning {
            say(format!("warning: '{}': {w}", input.display()));
        }

        let t_save = Instant::now();
        let out_format = FileFormat::from_extension(self.output).unwrap_or(FileFormat::Png);
        if !out_format.is_lossless() {
            say(format!(
                "warning: JPEG is lossy, so pixels outside the mask of '{}' will not stay exactly as they were; write .png or .tif to keep them",
                self.output.display()
            ));
        }
        let notes = if mask.is_empty() && out_format == image.file_format && !same_file(self.output, input) {
            raster::write_atomic(self.output, |w| {
                let mut f = std::fs::File::open(input).map_err(|e| e.to_string())?;
                std::io::copy(&mut f, w).map(|_| ()).map_err(|e| e.to_string())
            })?;
            Vec::new()
        } else {
            raster::save_noting(&image, self.output)?
        };
        for n in &notes {
            say(format!("note: {n}"));
        }
        if let Some(mask_out) = self.mask_out {
            raster::save_mask(&mask, mask_out)?;
        }
        if let Some(path) = self.distance_map {
            let mut map =
                raster::Raster::new(image.width, image.height, raster::Layout::Gray, raster::SampleFormat::F32);
            if let Some(d) = distance {
                map.planes[0] = d;
            }
            raster::save(&map, path)?;
        }
        let save_seconds = t_save.elapsed().as_secs_f64();

        if let Some(report_path) = self.report {
            let inputs = Inputs {
                image: FileRecord::of(input).with_context(|| format!("hashing '{}'", input.display()))?,
                mask: self.mask.map(|m| m.record.clone()),
                mask_from_alpha: self.mask_from_alpha,
            };
            let mut report = Report::new(inputs, &image, &mask, &holes, &fill, self.params.tolerance);
            report.output =
                Some(FileRecord::of(self.output).with_context(|| format!("hashing '{}'", self.output.display()))?);
            report.nodata = nodata_text;
            report.nodata_pixels = nodata_pixels;
            report.detected_pixels = detected;
            report.detector = self.detect.map(|(m, _)| format!("{m:?}").to_lowercase());
            report.skipped_pixels = skipped.iter().map(|h| h.pixels).sum();
            report.skipped_holes = skipped.iter().take(HOLE_LIST_MAX).copied().collect();
            report.deep_holes = deep.iter().take(HOLE_LIST_MAX).copied().collect();
            report.deep_hole_warning = deep_warning;
            report.notes = notes;
            report.scientific = self.scientific;
            report.seconds.load = load_seconds;
            report.seconds.save = save_seconds;
            let json = report.to_json();
            raster::write_atomic(report_path, |w| {
                use std::io::Write;
                w.write_all(json.as_bytes()).and_then(|()| w.write_all(b"\n")).map_err(|e| e.to_string())
            })?;
        }
        Ok(Outcome { filled: mask.count(), holes, fill, load_seconds, save_seconds: t_save.elapsed().as_secs_f64() })
    }
}

/// Adds `extra` to `mask`; true if it added any pixel.
fn merge(mask: &mut Mask, extra: &Mask) -> bool {
    let mut added = false;
    for (m, &e) in mask.bits_mut().iter_mut().zip(extra.bits()) {
        added |= e && !*m;
        *m |= e;
    }
    added
}
