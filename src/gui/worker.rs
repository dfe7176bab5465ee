//! Background work for the window: loading, filling and saving run on named threads that report
//! through a channel and ask for a repaint, so the window never blocks. A fill can be cancelled.

use std::path::PathBuf;
use std::sync::Arc;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::mpsc::{Receiver, Sender, channel};

use crate::fill::{FillParams, FillReport, Solver, Start};
use crate::mask::Mask;
use crate::raster::{self, Raster};

/// What a worker reports.
pub enum Message {
    /// An image read, with its display stretch and the tiles of its picture made off the UI thread.
    Loaded {
        path: PathBuf,
        raster: Box<Raster>,
        mask: Option<Mask>,
        /// The file's no-data value and how many pixels held it (or NaN); they are in `mask`.
        nodata: Option<f64>,
        missing: usize,
        stretch: super::canvas::Stretch,
        tiles: Vec<egui::ColorImage>,
    },
    Progress {
        cycle: usize,
        max_cycles: usize,
        residual: f64,
    },
    Filled {
        planes: Vec<Vec<f32>>,
        report: FillReport,
        mask: Mask,
    },
    /// A re-fill of the holes near an edit: the planes with those holes filled, the rectangle
    /// `(x0, y0, x1, y1)` where pixels may have changed, and the report of the holes re-filled
    /// (`None` when the edit left no hole to fill nearby).
    FilledNear {
        planes: Vec<Vec<f32>>,
        report: Option<FillReport>,
        mask: Mask,
        changed: (usize, usize, usize, usize),
    },
    /// A fill that failed or was cancelled hands its (unchanged) planes back.
    FillFailed {
        planes: Vec<Vec<f32>>,
        error: String,
    },
    Saved {
        path: PathBuf,
        notes: Vec<String>,
    },
    MaskSaved(Result<PathBuf, String>),
    /// What a report needs that takes time: the input's hash, the saved result's hash (if it is
    /// saved) and the hole count of the filled mask.
    ReportInputs {
        path: PathBuf,
        image: Result<crate::report::FileRecord, String>,
        output: Option<crate::report::FileRecord>,
        holes: crate::mask::HoleStats,
    },
    Detected {
        mask: Mask,
        method: crate::cli::DetectMethod,
    },
    Failed(String),
}

/// A fill's progress callback: sends each cycle's progress, asks for a repaint, and says whether
/// to go on (false once Cancel was pressed).
fn reporter<'a>(
    tx: &'a Sender<Message>,
    repaint: &'a (dyn Fn() + Send + Sync),
    cancel: &'a AtomicBool,
) -> impl FnMut(&crate::fill::Progress) -> bool + Send + 'a {
    let tx = tx.clone();
    move |p| {
        let _ = tx.send(Message::Progress { cycle: p.cycle, max_cycles: p.max_cycles, residual: p.residual });
        repaint();
        !cancel.load(Ordering::Relaxed)
    }
}

/// A running job.
pub struct Worker {
    pub what: &'static str,
    pub receiver: Receiver<Message>,
    cancel: Arc<AtomicBool>,
}

impl Worker {
    /// Asks the job to stop (fills stop at the next cycle; nothing is changed).
    pub fn cancel(&self) {
        self.cancel.store(true, Ordering::Relaxed);
    }

    fn spawn(
        what: &'static str,
        repaint: impl Fn() + Send + 'static,
        job: impl FnOnce(&Sender<Message>, &AtomicBool) + Send + 'static,
    ) -> Self {
        let (tx, rx) = channel();
        let cancel = Arc::new(AtomicBool::new(false));
        let flag = Arc::clone(&cancel);
        let spawned = std::thread::Builder::new().name(format!("reweave-{what}")).spawn(move || {
            job(&tx, &flag);
            repaint();
        });
        if let Err(e) = spawned {
            let (tx, rx2) = channel();
            let _ = tx.send(Message::Failed(format!("could not start the {what} thread: {e}")));
            return Self { what, receiver: rx2, cancel };
        }
        Self { what, receiver: rx, cancel }
    }

    /// Loads an image (and optionally a mask of its size).
    pub fn load(path: PathBuf, mask_path: Option<PathBuf>, repaint: impl Fn() + Send + 'static) -> Self {
        Self::spawn("load", repaint, move |tx, _| {
            let msg = match raster::load(&path) {
                Ok(r) => match mask_path.map(|m| raster::load_mask(&m, r.width, r.height)).transpose() {
                    Ok(mask) => {
                        // No-data and NaN samples are damage too: they join the mask from the start.
                        let nodata = r.metadata.nodata.as_deref().and_then(raster::nodata::parse_nodata);
                        let missing = raster::nodata::missing_samples(&r, nodata);
                        let mask = if missing.is_empty() {
                            mask
                        } else {
                            let mut m = mask.unwrap_or_else(|| Mask::new(r.width, r.height));
                            for (a, &b) in m.bits_mut().iter_mut().zip(missing.bits()) {
                                *a |= b;
                            }
                            Some(m)
                        };
                        let missing = missing.count();
                        let stretch = super::canvas::Stretch::of(&r);
                        let (planes, layout) = (&r.planes, r.layout);
                        let tiles = super::canvas::tile_images(r.width, r.height, super::canvas::IMAGE_TILE, &|i| {
                            super::canvas::colour(planes, layout, stretch, i)
                        });
                        Message::Loaded { path, raster: Box::new(r), mask, nodata, missing, stretch, tiles }
                    }
                    Err(e) => Message::Failed(e.to_string()),
                },
                Err(e) => Message::Failed(e.to_string()),
            };
            let _ = tx.send(msg);
        })
    }

    /// Re-fills the holes of `mask` near the rectangle `region` (see [`crate::fill::fill_near`]),
    /// moving filled samples off the no-data value `nodata` of a `format` image if there is one.
    pub fn fill_near(
        mut planes: Vec<Vec<f32>>,
        mask: Mask,
        region: (usize, usize, usize, usize),
        params: FillParams,
        nodata: Option<(f64, crate::raster::SampleFormat)>,
        repaint: impl Fn() + Send + Sync + 'static,
    ) -> Self {
        let repaint = Arc::new(repaint);
        let ping = Arc::clone(&repaint);
        Self::spawn(
            "fill",
            move || repaint(),
            move |tx, cancel| {
                let result = crate::fill::fill_near(&planes, &mask, region, &params, &mut reporter(tx, &*ping, cancel));
                let msg = match result {
                    Ok(None) => Message::FilledNear { planes, report: None, mask, changed: region },
                    Ok(Some(mut local)) => {
                        if let Some((v, format)) = nodata {
                            raster::nodata::keep_off_nodata(&mut local.planes, format, &local.mask, v);
                        }
                        local.write_back(&mut planes, mask.width());
                        let (a, b) = (local.bbox(), region);
                        let changed = (a.0.min(b.0), a.1.min(b.1), a.2.max(b.2), a.3.max(b.3));
                        Message::FilledNear { planes, report: Some(local.report), mask, changed }
                    }
                    Err(e) => Message::FillFailed { planes, error: e.to_string() },
                };
                let _ = tx.send(msg);
            },
        )
    }

    /// Fills `planes` under `mask`.
    pub fn fill(
        mut planes: Vec<Vec<f32>>,
        mask: Mask,
        params: FillParams,
        start: Start,
        repaint: impl Fn() + Send + Sync + 'static,
    ) -> Self {
        let repaint = Arc::new(repaint);
        let ping = Arc::clone(&repaint);
        Self::spawn(
            "fill",
            move || repaint(),
            move |tx, cancel| {
                let solver = match Solver::for_method(&mask, params.method) {
                    Ok(s) => s,
                    Err(e) => {
                        let _ = tx.send(Message::FillFailed { planes, error: e.to_string() });
                        return;
                    }
                };
                let mut views: Vec<&mut [f32]> = planes.iter_mut().map(Vec::as_mut_slice).collect();
                let result = solver.solve(&mut views, &params, start, &mut reporter(tx, &*ping, cancel));
                drop(views);
                let msg = match result {
                    Ok(report) => Message::Filled { planes, report, mask },
                    Err(e) => Message::FillFailed { planes, error: e.to_string() },
                };
                let _ = tx.send(msg);
            },
        )
    }

    /// Looks for damage in `raster` with `method`.
    pub fn detect(raster: Raster, method: crate::cli::DetectMethod, repaint: impl Fn() + Send + 'static) -> Self {
        Self::spawn("search", repaint, move |tx, _| {
            let msg = match crate::cli::detect_one(method, &raster, &crate::cli::DetectOptions::default()) {
                Ok(mask) => Message::Detected { mask, method },
                Err(e) => Message::Failed(format!("{e:#}")),
            };
            let _ = tx.send(msg);
        })
    }

    /// Saves a raster (result) to `path`.
    /// Writes the mask as a PNG.
    pub fn save_mask(mask: Mask, path: PathBuf, repaint: impl Fn() + Send + 'static) -> Self {
        Self::spawn("save mask", repaint, move |tx, _| {
            let _ =
                tx.send(Message::MaskSaved(raster::save_mask(&mask, &path).map(|()| path).map_err(|e| e.to_string())));
        })
    }

    /// Gathers the slow parts of a report to be written to `path`: hashes `image` and, if given,
    /// the saved result `output`, and counts the holes of `filled`.
    pub fn report_inputs(
        path: PathBuf,
        image: PathBuf,
        output: Option<PathBuf>,
        filled: std::sync::Arc<Mask>,
        repaint: impl Fn() + Send + 'static,
    ) -> Self {
        Self::spawn("report", repaint, move |tx, _| {
            let image =
                crate::report::FileRecord::of(&image).map_err(|e| format!("cannot read {}: {e}", image.display()));
            let output = output.and_then(|o| crate::report::FileRecord::of(&o).ok());
            let holes = filled.hole_stats();
            let _ = tx.send(Message::ReportInputs { path, image, output, holes });
        })
    }

    pub fn save(raster: Raster, path: PathBuf, repaint: impl Fn() + Send + 'static) -> Self {
        Self::spawn("save", repaint, move |tx, _| {
            let msg = match raster::save_noting(&raster, &path) {
                Ok(notes) => Message::Saved { path, notes },
                Err(e) => Message::Failed(e.to_string()),
            };
            let _ = tx.send(msg);
        })
    }
}
