//! The numerical core: fills the masked pixels of a set of planes with the discrete harmonic
//! interpolant of the known pixels around them.
//!
//! For every masked pixel `p` the fill solves the 5-point Laplace equation
//! `deg(p)·u_p − Σ_{q ~ p} u_q = 0`, where known neighbours supply Dirichlet values and neighbours
//! outside the image are left out (natural boundary). The solution never leaves the range of the
//! values around each hole (maximum principle), and reproduces exactly every function that is
//! discrete-harmonic (affine functions, x²−y², xy, …); see DEVELOPERS.md.
//!
//! This module knows nothing of files, codecs or windows: planes of `f32` and a [`Mask`] go in,
//! the planes come back with only their masked samples changed, plus a [`FillReport`].
//!
//! ```
//! use reweave::fill::{fill, FillParams};
//! use reweave::mask::Mask;
//!
//! // A 5×5 ramp with its centre pixel damaged.
//! let mut plane: Vec<f32> = (0..25).map(|i| (i % 5) as f32).collect();
//! plane[12] = 99.0;
//! let mask = Mask::from_fn(5, 5, |x, y| (x, y) == (2, 2));
//! let report = fill(&mut [&mut plane[..]], &mask, &FillParams::default()).unwrap();
//! assert!((plane[12] - 2.0).abs() < 1e-5);
//! assert!(report.channels[0].relative_residual <= 1e-6);
//! ```

mod dense;
mod hierarchy;
mod kernels;
mod solve;

use std::time::Instant;

use serde::{Deserialize, Serialize};
use thiserror::Error;

pub use hierarchy::Hierarchy;

use crate::mask::Mask;

/// The equation solved over the holes.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum FillMethod {
    /// Laplace's equation: the smoothest fill that meets the rim values.
    #[default]
    Harmonic,
}

impl FillMethod {
    /// The name used in reports and on the command line.
    #[must_use]
    pub fn name(self) -> &'static str {
        match self {
            Self::Harmonic => "harmonic",
        }
    }
}

/// The shape of one multigrid cycle.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
pub enum Cycle {
    /// One visit to each coarser level.
    #[default]
    V,
    /// An F-cycle: between a V- and a W-cycle in cost and strength.
    F,
    /// Two visits to each coarser level.
    W,
}

/// Where the iteration starts.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub enum Start {
    /// Full multigrid: solve the coarsest level, interpolate and cycle on the way up.
    #[default]
    FullMultigrid,
    /// Start from the values the planes already hold at the masked pixels (non-finite values
    /// start at zero). Use it to re-fill after a small mask edit from the previous result.
    Warm,
}

/// Parameters of a fill.
#[derive(Clone, Debug, PartialEq)]
pub struct FillParams {
    pub method: FillMethod,
    /// Stop when `‖b − A·u‖₂ / ‖b‖₂ ≤ tolerance` in every channel.
    pub tolerance: f64,
    /// Give up with [`FillError::NoConvergence`] after this many cycles.
    pub max_cycles: usize,
    pub cycle: Cycle,
    /// Gauss-Seidel sweeps before and after the coarse-grid correction.
    pub pre_smooth: usize,
    pub post_smooth: usize,
    /// Worker threads; 0 uses rayon's global pool (all cores). Results do not depend on it.
    pub threads: usize,
}

impl Default for FillParams {
    fn default() -> Self {
        Self {
            method: FillMethod::Harmonic,
            tolerance: 1e-6,
            max_cycles: 100,
            cycle: Cycle::V,
            pre_smooth: 2,
            post_smooth: 2,
            threads: 0,
        }
    }
}

/// Convergence record of one channel.
#[derive(Clone, Debug, Default, PartialEq, Serialize, Deserialize)]
pub struct ChannelReport {
    /// `‖b − A·u‖₂ / ‖b‖₂` of the final iterate (before rounding to the output type); when
    /// `b = 0` the absolute residual.
    pub relative_residual: f64,
    /// Cycles until this channel reached the tolerance (the full-multigrid start counts as one).
    pub cycles: usize,
    /// Relative residual after the start and after every cycle.
    pub history: Vec<f64>,
}

/// What a fill did.
#[derive(Clone, Debug, Default, PartialEq, Serialize, Deserialize)]
pub struct FillReport {
    pub method: FillMethod,
    pub unknowns: usize,
    /// Multigrid levels used (0 for an empty mask).
    pub levels: usize,
    pub channels: Vec<ChannelReport>,
    pub setup_seconds: f64,
    pub solve_seconds: f64,
}

/// Progress of a running fill, passed to the progress callback after every cycle.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Progress {
    pub cycle: usize,
    pub max_cycles: usize,
    /// The largest relative residual over the channels.
    pub residual: f64,
    pub tolerance: f64,
}

/// Why a fill failed.
#[derive(Debug, Error, PartialEq)]
pub enum FillError {
    #[error("every pixel is masked, so there is no known pixel to fill from")]
    NoKnownPixels,
    #[error("the mask is {mask_width}×{mask_height} but the image is {width}×{height}")]
    SizeMismatch { width: usize, height: usize, mask_width: usize, mask_height: usize },
    #[error("a plane holds {len} samples, but a {width}×{height} image needs {}", width * height)]
    PlaneLength { width: usize, height: usize, len: usize },
    #[error("the known pixel at ({x}, {y}) next to a hole is not a finite number; mask it too")]
    NonFiniteRim { x: usize, y: usize },
    #[error("no convergence after {cycles} cycles: relative residual {residual:.3e}")]
    NoConvergence { residual: f64, cycles: usize },
    #[error("the fill was cancelled")]
    Cancelled,
}

/// A mask's solver: the multigrid hierarchy, built once and reused for any number of images of
/// that size (a bad-pixel map applied to many frames) or re-solves after an edit.
#[derive(Debug)]
pub struct Solver {
    hierarchy: Option<Hierarchy>,
    width: usize,
    height: usize,
    setup_seconds: f64,
}

impl Solver {
    /// Builds the hierarchy of `mask`.
    ///
    /// # Errors
    /// [`FillError::NoKnownPixels`] when every pixel is masked.
    pub fn new(mask: &Mask) -> Result<Self, FillError> {
        let t0 = Instant::now();
        let (width, height) = (mask.width(), mask.height());
        let count = mask.count();
        if count > 0 && count == width * height {
            return Err(FillError::NoKnownPixels);
        }
        let hierarchy = Hierarchy::build(mask);
        Ok(Self { hierarchy, width, height, setup_seconds: t0.elapsed().as_secs_f64() })
    }

    /// The hierarchy, or `None` for an empty mask.
    #[must_use]
    pub fn hierarchy(&self) -> Option<&Hierarchy> {
        self.hierarchy.as_ref()
    }

    /// Seconds spent building the hierarchy.
    #[must_use]
    pub fn setup_seconds(&self) -> f64 {
        self.setup_seconds
    }

    /// Fills the masked samples of every plane (row-major, `width × height` each).
    ///
    /// `progress` is called after every cycle; returning `false` cancels the fill, leaving the
    /// planes unchanged.
    ///
    /// # Errors
    /// See [`FillError`]; on error the planes are unchanged.
    pub fn solve(
        &self,
        planes: &mut [&mut [f32]],
        params: &FillParams,
        start: Start,
        progress: &mut (dyn FnMut(&Progress) -> bool + Send),
    ) -> Result<FillReport, FillError> {
        for p in planes.iter() {
            if p.len() != self.width * self.height {
                return Err(FillError::PlaneLength { width: self.width, height: self.height, len: p.len() });
            }
        }
        let t0 = Instant::now();
        let mut report = FillReport {
            method: params.method,
            unknowns: 0,
            levels: 0,
            channels: vec![ChannelReport::default(); planes.len()],
            setup_seconds: self.setup_seconds,
            solve_seconds: 0.0,
        };
        let Some(h) = &self.hierarchy else {
            return Ok(report);
        };
        report.unknowns = h.unknowns();
        report.levels = h.depth();
        let mut run = || solve::solve_planes(h, planes, params, start, progress);
        let channels = if params.threads == 0 {
            run()?
        } else {
            match rayon::ThreadPoolBuilder::new().num_threads(params.threads).build() {
                Ok(pool) => pool.install(run)?,
                Err(_) => run()?,
            }
        };
        report.channels = channels;
        report.solve_seconds = t0.elapsed().as_secs_f64();
        Ok(report)
    }
}

/// Fills the masked samples of `planes` (row-major, the mask's size each) from the known ones.
///
/// # Errors
/// See [`FillError`]; on error the planes are unchanged.
pub fn fill(planes: &mut [&mut [f32]], mask: &Mask, params: &FillParams) -> Result<FillReport, FillError> {
    let solver = Solver::new(mask)?;
    solver.solve(planes, params, Start::FullMultigrid, &mut |_| true)
}
