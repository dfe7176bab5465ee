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

pub mod biharmonic;
mod dense;
mod direct;
pub mod grain;
mod grid;
pub mod guided;
mod hierarchy;
mod kernels;
mod lanes;
mod solve;
mod sparse;

use std::time::Instant;

use rayon::prelude::*;

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
    /// The biharmonic equation with two rings of known pixels: continues slopes across the rim.
    Biharmonic,
    /// Poisson's equation guided by the texture of a source region elsewhere in the image.
    Guided,
}

impl FillMethod {
    /// The name used in reports and on the command line.
    #[must_use]
    pub fn name(self) -> &'static str {
        match self {
            Self::Harmonic => "harmonic",
            Self::Biharmonic => "biharmonic",
            Self::Guided => "guided",
        }
    }

    /// Whether the method invents texture (copied from elsewhere), which is not data.
    #[must_use]
    pub fn invents_texture(self) -> bool {
        self == Self::Guided
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
    /// Full multigrid: solve the coarsest level, interpolate and cycle on the way up. The
    /// biharmonic fill starts from the harmonic fill of its unknowns instead.
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
    /// Guided fill: source offsets the user chose for some holes (the others are placed
    /// automatically).
    pub chosen_sources: Vec<guided::ChosenSource>,
    /// Add grain with this seed after the fill (see [`grain`]).
    pub grain: Option<u64>,
}

impl Default for FillParams {
    fn default() -> Self {
        Self {
            method: FillMethod::Harmonic,
            tolerance: 1e-6,
            max_cycles: 100,
            cycle: Cycle::V,
            pre_smooth: 1,
            post_smooth: 3,
            threads: 0,
            chosen_sources: Vec::new(),
            grain: None,
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
    /// Guided fill: where each hole's texture came from.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub placements: Vec<guided::Placement>,
    /// The grain added, if any.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub grain: Option<grain::GrainRecord>,
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
    #[error("this solver was built for the {} fill, not the {} fill", built.name(), asked.name())]
    WrongMethod { built: FillMethod, asked: FillMethod },
    #[error("the image is {width}×{height}, more pixels than the solver can index (2³² − 1); fill it in tiles")]
    TooLarge { width: usize, height: usize },
}

/// How a [`Solver`] stores its multigrid levels.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub enum Structure {
    /// Small and thin holes solved directly (by factorisation), grids for the holes that fill
    /// much of their bounding box, index lists for the rest.
    #[default]
    Auto,
    /// Index lists for every hole: memory and work follow the unknowns on any mask.
    Compact,
    /// One grid over the bounding box of all unknowns (falls back to index lists for a mask
    /// that does not coarsen on a grid). Mostly for tests and benchmarks.
    Grid,
}

/// A hole (or set of holes) this size or larger may get a grid.
const GRID_MIN_UNKNOWNS: usize = 4096;
/// ... when its unknowns are at least this share of its bounding box (with margin).
const GRID_MIN_DENSITY: f64 = 0.3;

/// One independently solved part of a mask.
#[derive(Debug)]
enum Part {
    Compact(Hierarchy),
    Grid(grid::Grid),
    /// Holes solved exactly, without a hierarchy.
    Direct(direct::Holes),
    /// Holes factored once.
    Factored(sparse::Factored),
}

impl Part {
    fn memory_bytes(&self) -> usize {
        match self {
            Self::Compact(h) => h.memory_bytes(),
            Self::Grid(g) => g.memory_bytes(),
            Self::Direct(d) => d.memory_bytes(),
            Self::Factored(f) => f.memory_bytes(),
        }
    }

    fn unknowns(&self) -> usize {
        match self {
            Self::Compact(h) => h.unknowns(),
            Self::Grid(g) => g.unknowns(),
            Self::Direct(d) => d.unknowns(),
            Self::Factored(f) => f.unknowns(),
        }
    }
}

/// The solution of one channel group of one part, held until every part has succeeded.
pub(crate) struct GroupResult {
    /// The part's iterate, `C` channels interleaved (over the unknowns of a compact or factored
    /// part, over the box of a grid part).
    pub values: Vec<f64>,
    /// A direct part's solution, already rounded to the planes' `f32` (half the memory of
    /// `values` while every part waits to be written).
    pub rounded: Vec<f32>,
    pub reports: Vec<ChannelReport>,
    /// Squared norms of the final residual and of the right-hand side, per channel.
    pub r_sq: Vec<f64>,
    pub b_sq: Vec<f64>,
    /// The factor each channel's values were multiplied by while solving (a power of two).
    pub scale: Vec<f64>,
}

/// What an exact solve of some holes found: the squared norms of the residual and of the
/// right-hand side per channel.
pub(crate) type Sums<const C: usize> = ([f64; C], [f64; C]);

/// Adds to `r_sq` the squares of unknown `i`'s residual `b_i − degree·x_i + Σ x_j` over its
/// unknown neighbours `j` (`u32::MAX` for none); `b` and `x` hold `C` values per unknown.
pub(crate) fn add_residual_sq<const C: usize>(
    r_sq: &mut [f64; C],
    b: &[f64],
    x: &[f64],
    i: usize,
    degree: f64,
    neighbours: [u32; 4],
) {
    let mut r = [0f64; C];
    for c in 0..C {
        r[c] = b[i * C + c] - degree * x[i * C + c];
    }
    for j in neighbours {
        if j != u32::MAX {
            for c in 0..C {
                r[c] += x[j as usize * C + c];
            }
        }
    }
    for c in 0..C {
        r_sq[c] += r[c] * r[c];
    }
}

/// `v` cut into consecutive slices of the given lengths (their sum must not exceed `v.len()`).
pub(crate) fn split_lengths<T>(mut v: &mut [T], lengths: impl IntoIterator<Item = usize>) -> Vec<&mut [T]> {
    lengths
        .into_iter()
        .map(|len| {
            let (head, tail) = std::mem::take(&mut v).split_at_mut(len);
            v = tail;
            head
        })
        .collect()
}

/// The unknowns of the holes `chosen` (increasing hole ids), as pixel indices `y·width + x`,
/// hole after hole, each in row order; `start[i]..start[i + 1]` are hole `chosen[i]`'s.
pub(crate) fn hole_pixels(
    runs: &[Vec<(u32, u32)>],
    hole_of: &[u32],
    width: usize,
    sizes: &[usize],
    chosen: &[u32],
) -> (Vec<u32>, Vec<u32>) {
    let mut at = vec![u32::MAX; sizes.len()];
    let mut start = Vec::with_capacity(chosen.len() + 1);
    start.push(0u32);
    for &k in chosen {
        let end = start[start.len() - 1];
        at[k as usize] = end;
        start.push(end + u32::try_from(sizes[k as usize]).expect("unknowns fit in u32"));
    }
    let mut pixels = vec![0u32; start[start.len() - 1] as usize];
    let mut run = 0;
    for (y, row) in runs.iter().enumerate() {
        let row_start = u32::try_from(y * width).expect("pixel index fits in u32");
        for &(a, b) in row {
            let k = hole_of[run] as usize;
            run += 1;
            if at[k] != u32::MAX {
                for x in a..b {
                    pixels[at[k] as usize] = row_start + x;
                    at[k] += 1;
                }
            }
        }
    }
    (pixels, start)
}

/// A hole's box `(x_min, y_min, x_max, y_max)`, inclusive; `u32` because dropout-like masks have a
/// hole per few pixels.
pub(crate) type HoleBox = (u32, u32, u32, u32);

/// Each hole's unknowns and box, from the row runs and each run's
/// hole (in row order).
pub(crate) fn hole_extents(runs: &[Vec<(u32, u32)>], hole_of: &[u32], holes: usize) -> (Vec<usize>, Vec<HoleBox>) {
    let mut sizes = vec![0usize; holes];
    let mut boxes: Vec<HoleBox> = vec![(u32::MAX, u32::MAX, 0, 0); holes];
    let mut run = 0;
    for (y, row) in runs.iter().enumerate() {
        let y = u32::try_from(y).expect("row fits in u32");
        for &(a, b) in row {
            let hole = hole_of[run] as usize;
            run += 1;
            sizes[hole] += (b - a) as usize;
            let bx = &mut boxes[hole];
            *bx = (bx.0.min(a), bx.1.min(y), bx.2.max(b - 1), bx.3.max(y));
        }
    }
    (sizes, boxes)
}

/// The result of a group solved exactly (no cycles; the history is the solution's residual), from
/// its values and the sums of its tasks in order (the first error wins).
pub(crate) fn solved_exactly<const C: usize>(
    (values, rounded): (Vec<f64>, Vec<f32>),
    sums: Vec<Result<Sums<C>, FillError>>,
) -> Result<GroupResult, FillError> {
    let (mut r_sq, mut b_sq) = (vec![0f64; C], vec![0f64; C]);
    for s in sums {
        let (r, b) = s?;
        for c in 0..C {
            r_sq[c] += r[c];
            b_sq[c] += b[c];
        }
    }
    let reports = (0..C)
        .map(|c| {
            let rel = r_sq[c].sqrt() / if b_sq[c] > 0.0 { b_sq[c].sqrt() } else { 1.0 };
            ChannelReport { relative_residual: rel, cycles: 0, history: vec![rel] }
        })
        .collect();
    Ok(GroupResult { values, rounded, reports, r_sq, b_sq, scale: vec![1.0; C] })
}

/// The operations of one multigrid level that a cycle is made of, for either storage.
pub(crate) trait Levels {
    /// Whether level `l` is the coarsest, solved directly.
    fn is_coarsest(&self, l: usize) -> bool;
    fn pre_smooth(&mut self, l: usize);
    fn post_smooth(&mut self, l: usize);
    /// Restricts the residual of level `l` to the right-hand side of level `l + 1`.
    fn descend(&mut self, l: usize);
    /// Adds the interpolated correction of level `l + 1` to level `l`.
    fn ascend(&mut self, l: usize);
    fn coarsest(&mut self, l: usize);
    /// [`Levels::pre_smooth`] then [`Levels::descend`] (a storage may do both in one pass).
    fn pre_smooth_and_descend(&mut self, l: usize) {
        self.pre_smooth(l);
        self.descend(l);
    }
    /// [`Levels::ascend`] then [`Levels::post_smooth`] (a storage may do both in one pass).
    fn ascend_and_post_smooth(&mut self, l: usize) {
        self.ascend(l);
        self.post_smooth(l);
    }

    /// One cycle from level `l`: pre-smoothing, the coarse-grid correction (one visit to the
    /// next level for V, two for W, an F- then a V-cycle for F) and post-smoothing.
    fn cycle(&mut self, l: usize, kind: Cycle) {
        if self.is_coarsest(l) {
            self.coarsest(l);
            return;
        }
        self.pre_smooth_and_descend(l);
        match kind {
            Cycle::V => self.cycle(l + 1, Cycle::V),
            Cycle::W => {
                self.cycle(l + 1, Cycle::W);
                self.cycle(l + 1, Cycle::W);
            }
            Cycle::F => {
                self.cycle(l + 1, Cycle::F);
                self.cycle(l + 1, Cycle::V);
            }
        }
        self.ascend_and_post_smooth(l);
    }
}

/// What the outer iteration needs of a storage's multigrid state.
pub(crate) trait Iteration<const C: usize> {
    /// `‖b − A·u‖²` of the current iterate, per channel.
    fn residual_sq(&mut self) -> [f64; C];
    /// One cycle from the finest level.
    fn cycle(&mut self, kind: Cycle);
}

/// Cycles until every channel's relative residual is at most the tolerance (after the start,
/// which counts as one cycle when it is full multigrid), reporting progress after each check.
/// Returns the channels' records and the final squared residuals.
pub(crate) fn iterate<const C: usize>(
    state: &mut impl Iteration<C>,
    params: &FillParams,
    start: Start,
    bnorm: [f64; C],
    progress: &mut (dyn FnMut(&Progress) -> bool + Send),
) -> Result<(Vec<ChannelReport>, [f64; C]), FillError> {
    let mut cycles = usize::from(start == Start::FullMultigrid);
    let mut reports: Vec<ChannelReport> = (0..C).map(|_| ChannelReport::default()).collect();
    let mut done = [false; C];
    loop {
        let sq = state.residual_sq();
        let mut worst = 0f64;
        for c in 0..C {
            let rel = sq[c].sqrt() / bnorm[c];
            reports[c].relative_residual = rel;
            reports[c].history.push(rel);
            if !done[c] && rel <= params.tolerance {
                done[c] = true;
                reports[c].cycles = cycles;
            }
            worst = worst.max(rel);
        }
        if done.iter().all(|&d| d) {
            return Ok((reports, sq));
        }
        if !worst.is_finite() || cycles >= params.max_cycles {
            return Err(FillError::NoConvergence { residual: worst, cycles });
        }
        let report =
            Progress { cycle: cycles, max_cycles: params.max_cycles, residual: worst, tolerance: params.tolerance };
        if !progress(&report) {
            return Err(FillError::Cancelled);
        }
        state.cycle(params.cycle);
        cycles += 1;
    }
}

/// The bounding box of `(x, y)` pixels, grown by one pixel within the image.
fn margin_box(
    (x_min, y_min, x_max, y_max): (usize, usize, usize, usize),
    width: usize,
    height: usize,
) -> (usize, usize, usize, usize) {
    let (x0, y0) = (x_min.saturating_sub(1), y_min.saturating_sub(1));
    let (x1, y1) = ((x_max + 1).min(width - 1), (y_max + 1).min(height - 1));
    (x0, y0, x1 - x0 + 1, y1 - y0 + 1)
}

#[allow(clippy::cast_precision_loss)] // pixel counts are far below 2^52
fn dense_enough(unknowns: usize, (_, _, w, h): (usize, usize, usize, usize)) -> bool {
    unknowns >= GRID_MIN_UNKNOWNS && unknowns as f64 >= GRID_MIN_DENSITY * (w * h) as f64
}

/// Splits `mask` into parts: holes solved directly where that is cheap (small or thin holes),
/// grids where the unknowns are dense in their box, index lists for the rest.
fn plan(mut runs: Vec<Vec<(u32, u32)>>, (width, height): (usize, usize), structure: Structure) -> Vec<Part> {
    let extent = |runs: &[Vec<(u32, u32)>]| {
        let mut count = 0usize;
        let mut bbox = (usize::MAX, usize::MAX, 0, 0);
        for (y, row) in runs.iter().enumerate() {
            if let (Some(first), Some(last)) = (row.first(), row.last()) {
                count += row.iter().map(|&(a, b)| (b - a) as usize).sum::<usize>();
                bbox = (bbox.0.min(first.0 as usize), bbox.1.min(y), bbox.2.max(last.1 as usize - 1), bbox.3.max(y));
            }
        }
        (count, bbox)
    };
    let (mut count, mut bbox) = extent(&runs);
    if count == 0 {
        return Vec::new();
    }
    let compact = |runs: &[Vec<(u32, u32)>]| Hierarchy::from_runs(width, height, runs).map(Part::Compact);
    let one_grid = |runs: &[Vec<(u32, u32)>], whole| {
        grid::Grid::build(whole, (width, height), |y, f| {
            for &(a, b) in &runs[y] {
                f(a as usize, b as usize);
            }
        })
        .map(Part::Grid)
    };
    match structure {
        Structure::Compact => return compact(&runs).into_iter().collect(),
        Structure::Grid => {
            return one_grid(&runs, margin_box(bbox, width, height)).or_else(|| compact(&runs)).into_iter().collect();
        }
        Structure::Auto => {}
    }
    let (mut hole_of, holes) = crate::mask::run_holes(&runs);
    let (mut sizes, boxes) = hole_extents(&runs, &hole_of, holes);
    // Small and thin holes first: they need no hierarchy. The rest of the mask goes on.
    let mut parts = Vec::new();
    let (direct, taken) = direct::plan((width, height), &runs, &hole_of, &sizes, &boxes);
    if let Some(direct) = direct {
        count -= direct.unknowns();
        parts.push(Part::Direct(direct));
        if count == 0 {
            return parts;
        }
        (runs, hole_of) = runs_of(&runs, &hole_of, |hole| !taken[hole]);
        for (size, _) in sizes.iter_mut().zip(&taken).filter(|(_, t)| **t) {
            *size = 0;
        }
        bbox = extent(&runs).1;
    }
    let whole = margin_box(bbox, width, height);
    if dense_enough(count, whole)
        && let Some(part) = one_grid(&runs, whole)
    {
        parts.push(part);
        return parts;
    }
    // Hole by hole: each dense, large hole gets its own grid (holes never touch, so their boxes
    // may overlap); the others are factored where that is cheap, the rest share one compact
    // hierarchy.
    let mut row_start = Vec::with_capacity(height + 1);
    row_start.push(0usize);
    for row in &runs {
        row_start.push(row_start[row_start.len() - 1] + row.len());
    }
    let hole_runs = |hole: usize, y: usize, f: &mut dyn FnMut(usize, usize)| {
        for (k, &(a, b)) in runs[y].iter().enumerate() {
            if hole_of[row_start[y] + k] as usize == hole {
                f(a as usize, b as usize);
            }
        }
    };
    // Dense holes' grids are built side by side (small holes keep one core busy only briefly).
    let dense: Vec<(usize, (usize, usize, usize, usize))> = (0..holes)
        .map(|hole| {
            let (x0, y0, x1, y1) = boxes[hole];
            (hole, margin_box((x0 as usize, y0 as usize, x1 as usize, y1 as usize), width, height))
        })
        .filter(|&(hole, bx)| sizes[hole] > 0 && dense_enough(sizes[hole], bx))
        .collect();
    let grids: Vec<Option<grid::Grid>> = dense
        .par_iter()
        .map(|&(hole, bx)| grid::Grid::build(bx, (width, height), |y, f| hole_runs(hole, y, f)))
        .collect();
    // Holes given a part of their own.
    let mut elsewhere = vec![false; holes];
    let mut left = count;
    for (&(hole, _), g) in dense.iter().zip(grids) {
        if let Some(g) = g {
            parts.push(Part::Grid(g));
            elsewhere[hole] = true;
            left -= sizes[hole];
        }
    }
    if left > 0 {
        // The holes left: factored once where that is cheap (thin networks), else one compact
        // hierarchy for all of them.
        let tried: Vec<u32> = (0..holes)
            .filter(|&k| sizes[k] > 0 && !elsewhere[k] && sizes[k] <= sparse::MAX_UNKNOWNS)
            .map(|k| u32::try_from(k).expect("holes fit in u32"))
            .collect();
        let (pixels, start) = hole_pixels(&runs, &hole_of, width, &sizes, &tried);
        let factors: Vec<Option<sparse::Factor>> = start
            .par_windows(2)
            .map(|w| sparse::factor(width, height, &pixels[w[0] as usize..w[1] as usize]))
            .collect();
        drop(pixels);
        let mut factored = Vec::new();
        for (&k, f) in tried.iter().zip(factors) {
            let k = k as usize;
            if let Some(f) = f {
                elsewhere[k] = true;
                left -= sizes[k];
                factored.push(f);
            }
        }
        if !factored.is_empty() {
            parts.push(Part::Factored(sparse::Factored::new(width, height, factored)));
        }
        if left == 0 {
            return parts;
        }
        let (rest, _) = runs_of(&runs, &hole_of, |hole| !elsewhere[hole]);
        parts.extend(compact(&rest));
    }
    parts
}

/// The runs of the holes that `keep` accepts, row by row, and the hole of each (in row order).
fn runs_of(
    runs: &[Vec<(u32, u32)>],
    hole_of: &[u32],
    keep: impl Fn(usize) -> bool,
) -> (Vec<Vec<(u32, u32)>>, Vec<u32>) {
    let mut kept_holes = Vec::with_capacity(hole_of.len());
    let mut run = 0;
    let kept = runs
        .iter()
        .map(|row| {
            let start = run;
            run += row.len();
            row.iter()
                .zip(&hole_of[start..run])
                .filter(|&(_, &hole)| keep(hole as usize))
                .map(|(&r, &hole)| {
                    kept_holes.push(hole);
                    r
                })
                .collect()
        })
        .collect();
    (kept, kept_holes)
}

/// A mask kept one bit per pixel, row-major.
#[derive(Debug)]
pub(crate) struct PackedMask {
    width: usize,
    height: usize,
    bits: Vec<u64>,
}

impl PackedMask {
    /// The mask whose rows hold the unknowns `runs` (see [`crate::mask::row_runs`]): each run's
    /// bits are set a word at a time, so the cost follows the runs, not the pixels.
    fn from_runs(width: usize, height: usize, runs: &[Vec<(u32, u32)>]) -> Self {
        let mut bits = vec![0u64; (width * height).div_ceil(64)];
        // Bands of 64 rows (a whole number of words) are packed side by side.
        let band = 64;
        bits.par_chunks_mut(band * width / 64).enumerate().for_each(|(k, words)| {
            let base = k * band * width;
            for (y, row) in runs.iter().enumerate().skip(k * band).take(band) {
                for &(a, b) in row {
                    let (mut p, end) = (y * width + a as usize - base, y * width + b as usize - base);
                    while p < end {
                        let (word, bit) = (p / 64, p % 64);
                        let n = (end - p).min(64 - bit);
                        words[word] |= (u64::MAX >> (64 - n)) << bit;
                        p += n;
                    }
                }
            }
        });
        Self { width, height, bits }
    }

    /// Whether pixel `p` (`y·width + x`) is masked.
    #[inline]
    pub(crate) fn get(&self, p: usize) -> bool {
        self.bits[p / 64] >> (p % 64) & 1 == 1
    }

    /// Pixels `p..p + 64` as bits (bit `i` for pixel `p + i`), zeros past the image.
    #[inline]
    pub(crate) fn window(&self, p: usize) -> u64 {
        let (i, s) = (p / 64, p % 64);
        let low = self.bits.get(i).copied().unwrap_or(0) >> s;
        if s == 0 { low } else { low | self.bits.get(i + 1).copied().unwrap_or(0) << (64 - s) }
    }

    pub(crate) fn height(&self) -> usize {
        self.height
    }

    fn unpack(&self) -> Mask {
        let n = self.width * self.height;
        let bits = (0..n).into_par_iter().map(|p| self.get(p)).collect();
        Mask::from_bits(self.width, self.height, bits)
    }
}

/// A mask's solver: the multigrid hierarchy, built once and reused for any number of images of
/// that size (a bad-pixel map applied to many frames) or re-solves after an edit.
#[derive(Debug)]
pub struct Solver {
    method: FillMethod,
    parts: Vec<Part>,
    /// The biharmonic hierarchy (biharmonic method only).
    biharmonic: Option<biharmonic::Hierarchy>,
    /// The mask, one bit per pixel (guided fill, the biharmonic solve and grain need the holes
    /// themselves; a full copy would cost a byte per pixel and the time to fault it in).
    mask: PackedMask,
    /// Masked pixels.
    unknowns: usize,
    width: usize,
    height: usize,
    setup_seconds: f64,
}

impl Solver {
    /// Builds the hierarchy of `mask`.
    ///
    /// # Errors
    /// [`FillError::NoKnownPixels`] when every pixel is masked, [`FillError::TooLarge`] for an
    /// image of 2³² pixels or more.
    pub fn new(mask: &Mask) -> Result<Self, FillError> {
        Self::with_structure(mask, Structure::Auto)
    }

    /// Builds the hierarchy of `mask` with the given storage (results agree to the tolerance
    /// whichever is used).
    ///
    /// # Errors
    /// [`FillError::NoKnownPixels`] when every pixel is masked, [`FillError::TooLarge`] for an
    /// image of 2³² pixels or more.
    pub fn with_structure(mask: &Mask, structure: Structure) -> Result<Self, FillError> {
        Self::build(mask, FillMethod::Harmonic, structure)
    }

    /// Builds what `method` needs for `mask`: the harmonic hierarchy, the biharmonic one, or
    /// (guided fill, which places its sources per image) nothing but the mask.
    ///
    /// # Errors
    /// [`FillError::NoKnownPixels`] when every pixel is masked, [`FillError::TooLarge`] for an
    /// image of 2³² pixels or more.
    pub fn for_method(mask: &Mask, method: FillMethod) -> Result<Self, FillError> {
        Self::build(mask, method, Structure::Auto)
    }

    /// [`Solver::for_method`] with the given storage for the harmonic and biharmonic
    /// hierarchies (results agree to the tolerance whichever is used).
    ///
    /// # Errors
    /// [`FillError::NoKnownPixels`] when every pixel is masked, [`FillError::TooLarge`] for an
    /// image of 2³² pixels or more.
    pub fn for_method_with(mask: &Mask, method: FillMethod, structure: Structure) -> Result<Self, FillError> {
        Self::build(mask, method, structure)
    }

    fn build(mask: &Mask, method: FillMethod, structure: Structure) -> Result<Self, FillError> {
        let t0 = Instant::now();
        let (width, height) = (mask.width(), mask.height());
        if u32::try_from(width * height).is_err() {
            return Err(FillError::TooLarge { width, height });
        }
        let runs = crate::mask::row_runs(mask);
        let unknowns: usize = runs.iter().flatten().map(|&(a, b)| (b - a) as usize).sum();
        if unknowns > 0 && unknowns == width * height {
            return Err(FillError::NoKnownPixels);
        }
        let packed = PackedMask::from_runs(width, height, &runs);
        let (parts, biharmonic) = match method {
            FillMethod::Harmonic => (plan(runs, (width, height), structure), None),
            FillMethod::Biharmonic => (Vec::new(), Some(biharmonic::Hierarchy::with_structure(mask, structure)?)),
            FillMethod::Guided => (Vec::new(), None),
        };
        Ok(Self {
            method,
            parts,
            biharmonic,
            mask: packed,
            unknowns,
            width,
            height,
            setup_seconds: t0.elapsed().as_secs_f64(),
        })
    }

    /// The method this solver was built for.
    #[must_use]
    pub fn method(&self) -> FillMethod {
        self.method
    }

    /// Number of unknowns (masked pixels).
    #[must_use]
    pub fn unknowns(&self) -> usize {
        self.unknowns
    }

    /// Multigrid levels of the deepest part (0 for an empty mask).
    #[must_use]
    pub fn depth(&self) -> usize {
        if let Some(b) = &self.biharmonic {
            return b.depth();
        }
        self.parts
            .iter()
            .map(|p| match p {
                Part::Compact(h) => h.depth(),
                Part::Grid(g) => g.depth(),
                Part::Direct(_) | Part::Factored(_) => 1,
            })
            .max()
            .unwrap_or(0)
    }

    /// Points per level of each multigrid part, finest first, and whether the part is a grid
    /// (holes solved directly have no levels and are left out).
    #[must_use]
    pub fn level_sizes(&self) -> Vec<(bool, Vec<usize>)> {
        self.parts
            .iter()
            .filter_map(|p| match p {
                Part::Compact(h) => Some((false, h.level_sizes())),
                Part::Grid(g) => Some((true, g.level_sizes())),
                Part::Direct(_) | Part::Factored(_) => None,
            })
            .collect()
    }

    /// How the hierarchy is stored, in a few words: "2 grid, 1 compact" (harmonic parts, with
    /// ", direct" when some holes are solved directly), "grid" or "compact" (biharmonic; "direct"
    /// when every unknown is in a factored component, ", direct" after the storage when some
    /// are), "a cut per hole" (guided).
    #[must_use]
    pub fn storage(&self) -> String {
        match (self.method, &self.biharmonic) {
            (FillMethod::Guided, _) => "a cut per hole".to_owned(),
            (_, Some(b)) => match (b.factored_unknowns(), b.unknowns()) {
                (f, n) if f == n && n > 0 => "direct".to_owned(),
                (f, _) => {
                    format!("{}{}", if b.is_grid() { "grid" } else { "compact" }, if f > 0 { ", direct" } else { "" })
                }
            },
            _ => {
                let count = |f: fn(&Part) -> bool| self.parts.iter().filter(|p| f(p)).count();
                let grids = count(|p| matches!(p, Part::Grid(_)));
                let compact = count(|p| matches!(p, Part::Compact(_)));
                let direct =
                    if count(|p| matches!(p, Part::Direct(_) | Part::Factored(_))) > 0 { ", direct" } else { "" };
                format!("{grids} grid, {compact} compact{direct}")
            }
        }
    }

    /// Bytes held by the hierarchy (not counting the per-image workspace).
    #[must_use]
    pub fn memory_bytes(&self) -> usize {
        if let Some(b) = &self.biharmonic {
            return b.memory_bytes();
        }
        self.parts.iter().map(Part::memory_bytes).sum()
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
        if params.method != self.method {
            return Err(FillError::WrongMethod { built: self.method, asked: params.method });
        }
        let t0 = Instant::now();
        let mut report = match self.method {
            FillMethod::Guided => {
                in_pool(params.threads, || guided::fill(planes, &self.mask.unpack(), params, progress))?
            }
            method => {
                let mut report = FillReport {
                    method,
                    unknowns: self.unknowns(),
                    levels: self.depth(),
                    channels: vec![ChannelReport::default(); planes.len()],
                    setup_seconds: self.setup_seconds,
                    ..FillReport::default()
                };
                if let Some(b) = &self.biharmonic {
                    report.channels = in_pool(params.threads, || b.solve(planes, &self.mask, params, start, progress))?;
                } else if !self.parts.is_empty() {
                    report.channels =
                        in_pool(params.threads, || solve_parts(&self.parts, planes, params, start, progress))?;
                }
                report.solve_seconds = t0.elapsed().as_secs_f64();
                report
            }
        };
        if let Some(seed) = params.grain {
            report.grain = Some(grain::add(planes, &self.mask.unpack(), seed));
        }
        Ok(report)
    }
}

/// Solves every one of the harmonic `parts`, up to four channels per pass, and writes the planes
/// only when all succeeded (so an error or a cancel leaves them unchanged).
fn solve_parts(
    parts: &[Part],
    planes: &mut [&mut [f32]],
    params: &FillParams,
    start: Start,
    progress: &mut (dyn FnMut(&Progress) -> bool + Send),
) -> Result<Vec<ChannelReport>, FillError> {
    let channels = planes.len();
    let mut pending = Vec::new();
    let mut r_sq = vec![0f64; channels];
    let mut b_sq = vec![0f64; channels];
    let mut reports = vec![ChannelReport::default(); channels];
    // The history shown is the largest multigrid part's (a direct solve has one entry).
    let largest = (0..parts.len())
        .max_by_key(|&k| (!matches!(parts[k], Part::Direct(_) | Part::Factored(_)), parts[k].unknowns()))
        .unwrap_or(0);
    // Parts are solved side by side (small holes' passes are too short to keep both cores
    // busy on their own); each part's result does not depend on which thread ran it.
    let progress = std::sync::Mutex::new(progress);
    let report = |p: &Progress| (progress.lock().unwrap_or_else(std::sync::PoisonError::into_inner))(p);
    let results: Vec<Result<Vec<(usize, GroupResult)>, FillError>> = parts
        .par_iter()
        .map(|part| {
            let mut out = Vec::new();
            for first in (0..channels).step_by(4) {
                let group = &planes[first..channels.min(first + 4)];
                let progress = &mut |p: &Progress| report(p);
                let result = match part {
                    Part::Compact(h) => match group.len() {
                        1 => solve::solve_group::<1>(h, group, params, start, progress)?,
                        2 => solve::solve_group::<2>(h, group, params, start, progress)?,
                        3 => solve::solve_group::<3>(h, group, params, start, progress)?,
                        _ => solve::solve_group::<4>(h, group, params, start, progress)?,
                    },
                    Part::Grid(g) => match group.len() {
                        1 => grid::solve_group::<1>(g, group, params, start, progress)?,
                        2 => grid::solve_group::<2>(g, group, params, start, progress)?,
                        3 => grid::solve_group::<3>(g, group, params, start, progress)?,
                        _ => grid::solve_group::<4>(g, group, params, start, progress)?,
                    },
                    Part::Direct(d) => match group.len() {
                        1 => direct::solve_group::<1>(d, group)?,
                        2 => direct::solve_group::<2>(d, group)?,
                        3 => direct::solve_group::<3>(d, group)?,
                        _ => direct::solve_group::<4>(d, group)?,
                    },
                    Part::Factored(f) => match group.len() {
                        1 => sparse::solve_group::<1>(f, group)?,
                        2 => sparse::solve_group::<2>(f, group)?,
                        3 => sparse::solve_group::<3>(f, group)?,
                        _ => sparse::solve_group::<4>(f, group)?,
                    },
                };
                out.push((first, result));
            }
            Ok(out)
        })
        .collect();
    for (k, results) in results.into_iter().enumerate() {
        for (first, result) in results? {
            for (c, rep) in result.reports.iter().enumerate() {
                r_sq[first + c] += result.r_sq[c];
                b_sq[first + c] += result.b_sq[c];
                let out = &mut reports[first + c];
                out.cycles = out.cycles.max(rep.cycles);
                if k == largest {
                    out.history.clone_from(&rep.history);
                }
            }
            pending.push((k, first, result));
        }
    }
    for (c, out) in reports.iter_mut().enumerate() {
        let bnorm = if b_sq[c] > 0.0 { b_sq[c].sqrt() } else { 1.0 };
        out.relative_residual = r_sq[c].sqrt() / bnorm;
    }
    for (k, first, result) in pending {
        match &parts[k] {
            Part::Compact(h) => solve::write_back(h, planes, first, result.scale.len(), &result.values),
            Part::Grid(g) => grid::write_back(g, planes, first, &result),
            Part::Direct(d) => direct::write_back(d, planes, first, result.scale.len(), &result.rounded),
            Part::Factored(f) => sparse::write_back(f, planes, first, result.scale.len(), &result.values),
        }
    }
    Ok(reports)
}

/// Runs `run` on a pool of `threads` workers (0: rayon's global pool, all cores).
fn in_pool<T: Send>(threads: usize, run: impl FnOnce() -> T + Send) -> T {
    if threads == 0 {
        return run();
    }
    match rayon::ThreadPoolBuilder::new().num_threads(threads).build() {
        Ok(pool) => pool.install(run),
        Err(_) => run(),
    }
}

/// Fills the masked samples of `planes` (row-major, the mask's size each) from the known ones.
///
/// # Errors
/// See [`FillError`]; on error the planes are unchanged.
pub fn fill(planes: &mut [&mut [f32]], mask: &Mask, params: &FillParams) -> Result<FillReport, FillError> {
    let solver = Solver::for_method(mask, params.method)?;
    solver.solve(planes, params, Start::FullMultigrid, &mut |_| true)
}

/// The holes next to an edit, cut out of the image with a one-pixel rim and filled on their own:
/// what [`fill_near`] returns. The rest of the image is untouched, so a re-fill after a brush
/// stroke costs what the holes it touched cost, not what the image costs.
#[derive(Clone, Debug)]
pub struct LocalFill {
    /// Top-left corner of the cut in the image.
    pub x0: usize,
    pub y0: usize,
    /// The re-filled holes, in the cut's coordinates.
    pub mask: Mask,
    /// The cut of every plane, filled.
    pub planes: Vec<Vec<f32>>,
    pub report: FillReport,
}

impl LocalFill {
    /// The cut as `(x0, y0, x1, y1)`, ends exclusive, in image coordinates.
    #[must_use]
    pub fn bbox(&self) -> (usize, usize, usize, usize) {
        (self.x0, self.y0, self.x0 + self.mask.width(), self.y0 + self.mask.height())
    }

    /// Copies the filled pixels into full planes of an image `width` pixels wide.
    pub fn write_back(&self, planes: &mut [Vec<f32>], width: usize) {
        let cw = self.mask.width();
        for (full, cut) in planes.iter_mut().zip(&self.planes) {
            for (i, _) in self.mask.bits().iter().enumerate().filter(|(_, m)| **m) {
                full[(self.y0 + i / cw) * width + self.x0 + i % cw] = cut[i];
            }
        }
    }
}

/// Re-fills only the holes of `mask` that touch the rectangle `region` (`x0, y0, x1, y1`, ends
/// exclusive) or its one-pixel rim, warm-started from the values `planes` hold there. Holes never
/// touch each other, so the others are unaffected by an edit inside `region` and keep their
/// values. Returns `None` when no hole is near the region.
///
/// # Errors
/// See [`FillError`]; `planes` are only read.
pub fn fill_near(
    planes: &[Vec<f32>],
    mask: &Mask,
    region: (usize, usize, usize, usize),
    params: &FillParams,
    progress: &mut (dyn FnMut(&Progress) -> bool + Send),
) -> Result<Option<LocalFill>, FillError> {
    let (w, h) = (mask.width(), mask.height());
    for p in planes {
        if p.len() != w * h {
            return Err(FillError::PlaneLength { width: w, height: h, len: p.len() });
        }
    }
    let bits = mask.bits();
    let (rx0, ry0) = (region.0.saturating_sub(1), region.1.saturating_sub(1));
    let (rx1, ry1) = ((region.2 + 1).min(w), (region.3 + 1).min(h));
    // Flood-fill the holes from the masked pixels of the region; `seen` is a bit per pixel, so
    // only the pages the holes touch are ever written.
    let mut seen = vec![0u64; (w * h).div_ceil(64)];
    let mut pixels: Vec<usize> = Vec::new();
    let mut stack = Vec::new();
    for y in ry0..ry1 {
        for x in rx0..rx1 {
            let p = y * w + x;
            if !bits[p] || seen[p / 64] >> (p % 64) & 1 == 1 {
                continue;
            }
            seen[p / 64] |= 1 << (p % 64);
            stack.push(p);
            while let Some(q) = stack.pop() {
                pixels.push(q);
                let (qx, qy) = (q % w, q / w);
                let neighbours = [
                    (qx > 0).then(|| q - 1),
                    (qx + 1 < w).then(|| q + 1),
                    (qy > 0).then(|| q - w),
                    (qy + 1 < h).then(|| q + w),
                ];
                for n in neighbours.into_iter().flatten() {
                    if bits[n] && seen[n / 64] >> (n % 64) & 1 == 0 {
                        seen[n / 64] |= 1 << (n % 64);
                        stack.push(n);
                    }
                }
            }
        }
    }
    drop(seen);
    if pixels.is_empty() {
        return Ok(None);
    }
    let (mut x_min, mut y_min, mut x_max, mut y_max) = (usize::MAX, usize::MAX, 0, 0);
    for &p in &pixels {
        let (x, y) = (p % w, p / w);
        (x_min, y_min, x_max, y_max) = (x_min.min(x), y_min.min(y), x_max.max(x), y_max.max(y));
    }
    let (x0, y0, cw, ch) = margin_box((x_min, y_min, x_max, y_max), w, h);
    let mut cut_mask = Mask::new(cw, ch);
    for &p in &pixels {
        cut_mask.set(p % w - x0, p / w - y0, true);
    }
    let mut cut: Vec<Vec<f32>> = planes
        .iter()
        .map(|plane| (y0..y0 + ch).flat_map(|y| plane[y * w + x0..y * w + x0 + cw].iter().copied()).collect())
        .collect();
    let solver = Solver::new(&cut_mask)?;
    let mut views: Vec<&mut [f32]> = cut.iter_mut().map(Vec::as_mut_slice).collect();
    let report = solver.solve(&mut views, params, Start::Warm, progress)?;
    Ok(Some(LocalFill { x0, y0, mask: cut_mask, planes: cut, report }))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_packed_mask_unpacks_to_the_same_pixels() {
        // Sizes that end mid-word, span several words per row, and several bands of rows.
        for (w, h) in [(1, 1), (7, 3), (64, 2), (65, 5), (130, 9), (3, 200), (65, 130)] {
            let mask = Mask::from_fn(w, h, |x, y| (x * 7 + y * 13) % 5 < 2);
            assert_eq!(
                PackedMask::from_runs(w, h, &crate::mask::row_runs(&mask)).unpack().bits(),
                mask.bits(),
                "{w}×{h}"
            );
        }
    }
}
