//! Biharmonic fill: `Δ²u = 0` over the holes, with values from the two rings of known pixels
//! around them.
//!
//! The discrete operator is `B = Mᵀ·M`, where `M` is the 5-point Laplacian `L` of the whole image
//! (natural boundary: a pixel's degree counts its in-image neighbours only) restricted to the
//! columns of the unknowns. For an unknown `p` away from the image edge, row `p` of `B` is the
//! 13-point stencil `20·u₀ − 8·(axis ±1) + 2·(diagonals) + 1·(axis ±2)`, which is exactly `L∘L`
//! (Abramowitz & Stegun 1964, §25.3); near the edge the missing second ring drops out of `L`
//! itself, which is the natural condition there. `B` is symmetric positive definite whenever the
//! image has a known pixel (`M·u = 0` makes `u` a Neumann-harmonic function that vanishes at a
//! known pixel, so `u = 0`), and the fill is the minimiser of `Σ (L·u)²` over the image with the
//! known pixels fixed: the smoothest surface in the sense of curvature, which continues slopes
//! across the rim instead of putting a kink there as the harmonic fill does.
//!
//! The solver is flexible conjugate gradients preconditioned by one multigrid K-cycle: coarse
//! points are the fine points with both coordinates even, interpolation is bilinear with missing
//! parents left out (the Dirichlet condition), coarse operators are Galerkin `Pᵀ·B·P` (5×5
//! stencils on every coarser level), lexicographic Gauss-Seidel runs forward before and backward
//! after the correction, each of the first `SECOND_VISITS` coarse levels is visited
//! twice with the two corrections combined by one step of conjugate gradients (Notay &
//! Vassilevski 2008, "Recursive Krylov-based multigrid cycles"), and the coarsest level is
//! factored densely. The iteration starts from the harmonic fill (`START_TOLERANCE`). Unknowns
//! with no 8×8 square among them (random dropout) get no coarse levels: their iterate is relaxed
//! by Gauss-Seidel while that converges fast, then conjugate gradients go on with sweeps as the
//! preconditioner (`SHALLOW_SQUARE`, `RELAX_SLOW`). Work and memory follow the unknowns.

use std::ops::Range;
use std::time::Instant;

use rayon::prelude::*;

use super::dense::Cholesky;
use super::{ChannelReport, FillError, FillParams, PackedMask, Progress, Start, Structure};
use crate::mask::Mask;

mod compact;
mod grid;
mod thin;

const NONE: u32 = u32::MAX;
/// Stencil offsets of level 0, centre first.
const FINE: [(i64, i64); 13] =
    [(0, 0), (-1, 0), (1, 0), (0, -1), (0, 1), (-1, -1), (1, -1), (-1, 1), (1, 1), (-2, 0), (2, 0), (0, -2), (0, 2)];
/// Stencil offsets of coarse levels (the 5×5 square), centre first.
const COARSE: [(i64, i64); 25] = {
    let mut o = [(0i64, 0i64); 25];
    let mut k = 1;
    let mut dy = -2;
    while dy <= 2 {
        let mut dx = -2;
        while dx <= 2 {
            if dx != 0 || dy != 0 {
                o[k] = (dx, dy);
                k += 1;
            }
            dx += 1;
        }
        dy += 1;
    }
    o
};
/// Stop coarsening at this many points and factor the level.
const COARSEST_MAX: usize = 400;
/// Largest level factored densely when coarsening stalls; above it the level is relaxed.
const DENSE_MAX: usize = 1200;
/// A coarse level must have at most this share of the finer level's points.
const MIN_REDUCTION: f64 = 0.7;
/// Combines the two visits of a coarse level in a K-cycle: with `c₁` the first visit's result for
/// the right-hand side `b`, `c₂` the second's for `b − (α₁/ρ₁)·A·c₁`, and `ρ₁ = c₁·A·c₁`,
/// `α₁ = c₁·b`, `γ = c₁·A·c₂`, `β = c₂·A·c₂`, `α₂ = c₂·(b − (α₁/ρ₁)·A·c₁)`, the correction is
/// `k₁·c₁ + k₂·c₂`, the minimiser of the energy error over the two (Notay & Vassilevski 2008,
/// Algorithm 3.1 with two inner iterations). `A` symmetric gives `γ = c₂·A·c₁` from `A·c₂`, so
/// `A·c₁` need not be kept through the second visit.
///
/// Measured on squares of 128² to 1024²: V-cycles needed 17, 26, 38, 53 iterations, W-cycles
/// 11, 14, 15, 17, F-cycles 11, 15, 19, 23; the K-cycle 9, 9, 9, 9 for about 1.2× a W-cycle's work.
/// Even an exact coarse solve took 9 to 11, and stronger smoothing (Chebyshev, up to 16 steps)
/// one fewer: the bilinear coarse space decides, and the K-cycle comes close to its limit.
fn krylov_weights(rho1: f64, alpha1: f64, gamma: f64, beta: f64, alpha2: f64) -> (f64, f64) {
    let k1 = alpha1 / rho1;
    let rho2 = beta - gamma * gamma / rho1;
    if rho2 > 0.0 && rho2.is_finite() { (k1 - gamma * alpha2 / (rho1 * rho2), alpha2 / rho2) } else { (k1, 0.0) }
}

/// The relative residual to which the harmonic fill that starts the iteration is solved. The
/// criterion `‖b − B·u‖ ≤ tol·‖b‖` weighs the rim's values themselves, not only their
/// curvature, so a start that already meets the rim's level (the harmonic fill) begins about
/// three orders of magnitude down and saves more than it costs. Measured at 1024² (harmonic
/// cycles + biharmonic iterations, total against a zero start): 1e-1 one cycle + 6–7 iterations,
/// 1e-2 two + 5 (square 0.58 → 0.39 s, frame 0.53 → 0.39 s, blob 0.16 → 0.11 s, dropout
/// 1.12 → 0.62 s with 2 iterations instead of 7), 1e-3 three + 4–5, no faster.
const START_TOLERANCE: f64 = 1e-2;

/// Coarse levels below the first this many are visited once per visit of the level above (a
/// V-cycle from there down): the K-cycle's second visits double the visits at every level, so the
/// deep, small levels cost mostly fixed overhead. Measured at 1024² (5 iterations either way):
/// second visits on levels 1–3 only against all, frame solve 0.30 → 0.27 s, blob 0.106 → 0.092 s,
/// dropout 0.40 → 0.36 s. A rule by size (one visit below 4096 points) turned small holes into
/// V-cycles: a 120² hole needed 20 iterations from zero instead of 9.
const SECOND_VISITS: usize = 3;

/// Gauss-Seidel sweeps before and after the correction on the finest level (the harmonic
/// fill's `FillParams::pre_smooth`/`post_smooth` do not apply: this smoother stays symmetric
/// for conjugate gradients). Measured on the 2048² frame and blob: one before and one after took
/// one iteration more and was slower; one and two, two and one 6 iterations on both (5 and 4
/// with two and two); one and three, three and one 5 on both, and slower.
const FINE_SWEEPS: usize = 2;
/// Gauss-Seidel sweeps before and after the correction on coarse levels.
const COARSE_SWEEPS: usize = 1;
// A K-cycle visit begins with one sweep from zero (`grid::Level::sweep_from_zero`).
const _: () = assert!(FINE_SWEEPS >= 1 && COARSE_SWEEPS >= 1);
/// Symmetric Gauss-Seidel sweep pairs that stand in for a direct solve on a large coarsest level.
const COARSEST_SWEEPS: usize = 40;

/// Unknowns with no `SHALLOW_SQUARE × SHALLOW_SQUARE` square of unknowns among them get no coarse
/// levels: every unknown then has a known pixel within `SHALLOW_SQUARE / 2` pixels each way, the
/// operator is well conditioned without them (its smallest eigenvalue is bounded by the holes'
/// width, not the image's size), and their construction would cost more than the iterations they
/// save. Random dropout is such a mask.
const SHALLOW_SQUARE: usize = 8;
/// Sweep pairs that precondition a level without coarser ones.
const SHALLOW_SWEEPS: usize = 2;

/// Whether the unknowns, given by their row runs, contain a `k × k` square.
fn has_square(runs: &[Vec<(u32, u32)>], width: usize, k: usize) -> bool {
    let runs = runs.iter().enumerate().flat_map(|(y, row)| row.iter().map(move |&(a, b)| (y, a as usize, b as usize)));
    has_square_in(runs, width, k)
}

/// Whether the points, given by their runs `(row, from, to exclusive)` in row-major order on a
/// grid `width` wide, contain a `k × k` square.
fn has_square_in(runs: impl IntoIterator<Item = (usize, usize, usize)>, width: usize, k: usize) -> bool {
    // Per column: the last row seen unknown there and how many rows up to it were unknown.
    let mut column = vec![(usize::MAX, 0usize); width];
    for (y, a, b) in runs {
        let mut wide = 0;
        for c in &mut column[a..b] {
            // Without branches on the counts, which random masks make unpredictable.
            let tall = c.1 * usize::from(c.0.wrapping_add(1) == y) + 1;
            *c = (y, tall);
            wide = (wide + 1) * usize::from(tall >= k);
            if wide >= k {
                return true;
            }
        }
    }
    false
}

/// The row of `B` at pixel `(x, y)` of a `w × h` image, on the 5×5 square (index
/// `(dy + 2)·5 + dx + 2`).
#[allow(clippy::cast_possible_wrap, clippy::cast_precision_loss)]
fn fine_row(x: i64, y: i64, w: i64, h: i64) -> [f64; 25] {
    let inside = |x: i64, y: i64| x >= 0 && y >= 0 && x < w && y < h;
    let deg =
        |x: i64, y: i64| [(-1, 0), (1, 0), (0, -1), (0, 1)].iter().filter(|(a, b)| inside(x + a, y + b)).count() as f64;
    let mut row = [0f64; 25];
    for (qx, qy) in [(0, 0), (-1, 0), (1, 0), (0, -1), (0, 1)] {
        let (ax, ay) = (x + qx, y + qy);
        if !inside(ax, ay) {
            continue;
        }
        let lqp = if (qx, qy) == (0, 0) { deg(ax, ay) } else { -1.0 };
        row[((qy + 2) * 5 + qx + 2) as usize] += lqp * deg(ax, ay);
        for (sx, sy) in [(-1, 0), (1, 0), (0, -1), (0, 1)] {
            if inside(ax + sx, ay + sy) {
                row[((qy + sy + 2) * 5 + qx + sx + 2) as usize] -= lqp;
            }
        }
    }
    row
}

/// Whether `(x, y)` is within two pixels of the edge of a `w × h` image, where the row of `B` is
/// not the 13-point stencil.
fn near_edge(x: i64, y: i64, w: i64, h: i64) -> bool {
    x < 2 || y < 2 || x >= w - 2 || y >= h - 2
}

/// The row of `B` at `(x, y)` of a `w × h` image: `interior` (the row away from the edge) or the
/// row's own near the edge.
fn row_square(x: i64, y: i64, w: i64, h: i64, interior: &[f64; 25]) -> [f64; 25] {
    if near_edge(x, y, w, h) { fine_row(x, y, w, h) } else { *interior }
}

/// For up to 64 unknowns `pixels` of an image `width` wide, the bit set of those whose 13-point
/// stencil reaches no known pixel (their right-hand side is zero), a word at a time: when they
/// are consecutive pixels of one row at least two rows from the top and bottom, twelve shifted
/// windows of the mask are and-ed; otherwise none is set. Left and right, a window wraps into
/// the next or previous row, so near those edges it tests a superset of the row's in-image
/// neighbours, and a bit set still means none of them is known.
fn surrounded(mask: &PackedMask, width: usize, pixels: &[u32]) -> u64 {
    let (Some(&first), Some(&last)) = (pixels.first(), pixels.last()) else { return 0 };
    let (p, n) = (first as usize, pixels.len());
    let y = p / width;
    if last as usize != p + n - 1 || y < 2 || y + 2 >= mask.height() || (p + n - 1) / width != y {
        return 0;
    }
    let at = |dx: isize, dy: isize| mask.window(p.wrapping_add_signed(dy * width as isize + dx));
    let row = at(-2, 0) & at(-1, 0) & at(1, 0) & at(2, 0);
    let near = at(-1, -1) & at(0, -1) & at(1, -1) & at(-1, 1) & at(0, 1) & at(1, 1);
    let keep = if n == 64 { u64::MAX } else { (1u64 << n) - 1 };
    row & near & at(0, -2) & at(0, 2) & keep
}

/// The right-hand side of the unknown at `(x, y)` whose row is `square`: `−Σ B_pr·f_r` over the
/// known pixels `r` the row reaches (`mask`: the image's unknowns, `w` pixels a row).
#[allow(clippy::cast_possible_wrap, clippy::cast_sign_loss, clippy::cast_possible_truncation)]
fn rhs_at(x: i64, y: i64, square: &[f64; 25], w: i64, plane: &[f32], mask: &PackedMask) -> Result<f64, FillError> {
    let h = (plane.len() as i64) / w;
    let mut s = 0f64;
    for &(dx, dy) in &FINE[1..] {
        let (ax, ay) = (x + dx, y + dy);
        let a = square[square_index((dx, dy))];
        if ax < 0 || ay < 0 || ax >= w || ay >= h || a == 0.0 {
            continue;
        }
        let q = (ay * w + ax) as usize;
        if mask.get(q) {
            continue;
        }
        let v = plane[q];
        if !v.is_finite() {
            return Err(FillError::NonFiniteRim { x: ax as usize, y: ay as usize });
        }
        s -= a * f64::from(v);
    }
    Ok(s)
}

#[allow(clippy::cast_sign_loss)]
fn square_index((dx, dy): (i64, i64)) -> usize {
    ((dy + 2) * 5 + dx + 2) as usize
}

/// The coarsest level's solver.
#[derive(Debug)]
enum Coarsest {
    Dense(Cholesky),
    /// This many pairs of Gauss-Seidel sweeps, forward then backward (symmetric, as conjugate
    /// gradients need).
    Relax(usize),
}

/// Factors the coarsest level, whose row `i` `row(i, add)` reports as `add(j, a_ij)` calls
/// (repeats are summed); falls back to relaxation if rounding left it indefinite.
fn dense_coarsest(n: usize, row: impl Fn(usize, &mut dyn FnMut(usize, f64))) -> Coarsest {
    let mut a = vec![0f64; n * n];
    for i in 0..n {
        row(i, &mut |j, v| a[i * n + j] += v);
    }
    // Symmetrise against rounding in the Galerkin sums.
    for i in 0..n {
        for j in 0..i {
            let m = 0.5 * (a[i * n + j] + a[j * n + i]);
            a[i * n + j] = m;
            a[j * n + i] = m;
        }
    }
    Cholesky::factor(n, a).map_or(Coarsest::Relax(COARSEST_SWEEPS), Coarsest::Dense)
}

/// A floating-point type the level kernels run in: `f64` for the conjugate-gradient iteration,
/// `f32` for the grid preconditioner (half the memory traffic; its rounding is far below what a
/// preconditioner needs to be good).
trait Real:
    Copy
    + Default
    + Send
    + Sync
    + PartialEq
    + std::fmt::Debug
    + std::ops::Add<Output = Self>
    + std::ops::Sub<Output = Self>
    + std::ops::Mul<Output = Self>
    + std::ops::Neg<Output = Self>
    + std::ops::AddAssign
    + std::ops::SubAssign
    + 'static
{
    fn of(v: f64) -> Self;
    fn get(self) -> f64;
}

impl Real for f64 {
    fn of(v: f64) -> Self {
        v
    }
    fn get(self) -> f64 {
        self
    }
}

impl Real for f32 {
    #[allow(clippy::cast_possible_truncation)]
    fn of(v: f64) -> Self {
        v as f32
    }
    fn get(self) -> f64 {
        f64::from(self)
    }
}

/// Rows a band has at least.
const BAND_ROWS: usize = 48;
/// Bands a sweep has at most (a fixed split, so results do not depend on the thread count).
const MAX_BANDS: usize = 8;
/// Rows between bands: the stencils reach two rows.
const SEAM_ROWS: usize = 2;

/// Splits a level's points (or runs), row-major over `rows` rows, into bands of rows that a
/// Gauss-Seidel sweep may relax in parallel, and the two-row seams between them, which it relaxes
/// after the bands (before them going backward). Points of different bands are at least three
/// rows apart, beyond the stencils' reach, so this is an exact Gauss-Seidel sweep in a fixed
/// order. `first(row)` is the index of the first item at or after `row`; `total` the item count.
fn bands(rows: usize, first: impl Fn(usize) -> usize, total: usize) -> (Vec<Range<usize>>, Vec<Range<usize>>) {
    let count = (rows / BAND_ROWS).clamp(1, MAX_BANDS);
    let mut bands = Vec::with_capacity(count);
    let mut seams = Vec::with_capacity(count - 1);
    let mut start = 0;
    for k in 1..=count {
        let cut = k * rows / count;
        if k == count {
            bands.push(first(start)..total);
        } else {
            bands.push(first(start)..first(cut));
            seams.push(first(cut)..first(cut + SEAM_ROWS));
            start = cut + SEAM_ROWS;
        }
    }
    (bands, seams)
}

/// A level's vector shared by the tasks of one sweep phase, which touch disjoint rows.
#[derive(Clone, Copy)]
struct Shared<T>(*mut T, usize);
// SAFETY: the sweeps' tasks of a phase never touch a row another task writes (see `bands`).
unsafe impl<T> Send for Shared<T> {}
// SAFETY: as above.
unsafe impl<T> Sync for Shared<T> {}

impl<T: Copy> Shared<T> {
    /// # Safety
    /// `c` is in bounds and no other thread writes it.
    unsafe fn get(self, c: usize) -> T {
        debug_assert!(c < self.1);
        // SAFETY: the caller's contract.
        unsafe { *self.0.add(c) }
    }

    /// # Safety
    /// `c` is in bounds and no other thread reads or writes it.
    unsafe fn set(self, c: usize, v: T) {
        debug_assert!(c < self.1);
        // SAFETY: the caller's contract.
        unsafe { *self.0.add(c) = v };
    }

    /// # Safety
    /// `c..c + n` is in bounds and nothing else reads or writes it while the slice lives.
    #[allow(clippy::mut_from_ref)]
    unsafe fn slice_mut<'a>(self, c: usize, n: usize) -> &'a mut [T] {
        debug_assert!(c + n <= self.1);
        // SAFETY: the caller's contract.
        unsafe { std::slice::from_raw_parts_mut(self.0.add(c), n) }
    }

    /// # Safety
    /// `c..c + n` is in bounds and nothing writes it while the slice lives.
    unsafe fn slice<'a>(self, c: usize, n: usize) -> &'a [T] {
        debug_assert!(c + n <= self.1);
        // SAFETY: the caller's contract.
        unsafe { std::slice::from_raw_parts(self.0.add(c), n) }
    }
}

/// Runs `task` on every band in parallel, then on every seam (backward: the seams first): the
/// order of a Gauss-Seidel sweep split by [`bands`]. The task is told whether its part is a seam.
fn banded(bands: &[Range<usize>], seams: &[Range<usize>], backward: bool, task: impl Fn(Range<usize>, bool) + Sync) {
    let phase = |parts: &[Range<usize>], seam: bool| {
        if parts.len() > 1 {
            parts.par_iter().for_each(|r| task(r.clone(), seam));
        } else {
            parts.iter().for_each(|r| task(r.clone(), seam));
        }
    };
    if backward {
        phase(seams, true);
        phase(bands, false);
    } else {
        phase(bands, false);
        phase(seams, true);
    }
}

/// Points per group of a parallel loop.
const GROUP_POINTS: usize = 16 * 1024;

/// Where a level's vectors hold points: ascending, disjoint spans of slots, grouped for parallel
/// loops. Slots outside the spans are never read as points and stay zero.
#[derive(Debug)]
struct Layout {
    spans: Vec<(usize, usize)>,
    /// Consecutive ranges of `spans` of about [`GROUP_POINTS`] points each.
    groups: Vec<std::ops::Range<usize>>,
}

impl Layout {
    fn new(spans: Vec<(usize, usize)>) -> Self {
        let mut groups = Vec::new();
        let (mut first, mut points) = (0, 0);
        for (k, &(s, e)) in spans.iter().enumerate() {
            points += e - s;
            if points >= GROUP_POINTS {
                groups.push(first..k + 1);
                (first, points) = (k + 1, 0);
            }
        }
        if first < spans.len() {
            groups.push(first..spans.len());
        }
        Self { spans, groups }
    }

    /// Calls `f(span, first slot, end slot)` for every span, groups in parallel; for loops that
    /// write elsewhere than the level's vectors.
    fn for_each_span(&self, f: impl Fn(usize, usize, usize) + Sync) {
        self.span_groups(&self.groups, &f);
    }

    fn span_groups(&self, groups: &[Range<usize>], f: &(impl Fn(usize, usize, usize) + Sync)) {
        match groups {
            [] => {}
            [g] => g.clone().for_each(|k| f(k, self.spans[k].0, self.spans[k].1)),
            _ => {
                let (left, right) = groups.split_at(groups.len() / 2);
                rayon::join(|| self.span_groups(left, f), || self.span_groups(right, f));
            }
        }
    }

    /// `n` points stored contiguously.
    fn contiguous(n: usize) -> Self {
        Self::new((0..n).step_by(GROUP_POINTS).map(|s| (s, (s + GROUP_POINTS).min(n))).collect())
    }

    /// Calls `f(span, first slot, the span's slots of v)` for every span, groups in parallel.
    fn for_each_mut<T: Send>(&self, v: &mut [T], f: impl Fn(usize, usize, &mut [T]) + Sync) {
        self.sum_mut(v, |k, s, t| {
            f(k, s, t);
            0.0
        });
    }

    /// As [`Layout::for_each_mut`], adding up what `f` returns in a fixed order (the same
    /// result on any thread count).
    fn sum_mut<T: Send>(&self, v: &mut [T], f: impl Fn(usize, usize, &mut [T]) -> f64 + Sync) -> f64 {
        self.sums_mut(v, |k, s, t| [f(k, s, t)])[0]
    }

    /// As [`Layout::sum_mut`] for `K` sums at once. The groups are halved recursively with
    /// `rayon::join`, so a call allocates nothing (it runs inside every cycle).
    fn sums_mut<T: Send, const K: usize>(
        &self,
        v: &mut [T],
        f: impl Fn(usize, usize, &mut [T]) -> [f64; K] + Sync,
    ) -> [f64; K] {
        self.sum_groups(&self.groups, v, 0, &f)
    }

    /// [`Layout::sums_mut`] over `groups`, whose slots start at `base` in `v`.
    fn sum_groups<T: Send, const K: usize>(
        &self,
        groups: &[Range<usize>],
        v: &mut [T],
        base: usize,
        f: &(impl Fn(usize, usize, &mut [T]) -> [f64; K] + Sync),
    ) -> [f64; K] {
        let add = |x: [f64; K], y: [f64; K]| std::array::from_fn(|i| x[i] + y[i]);
        match groups {
            [] => [0.0; K],
            [g] => g.clone().fold([0.0; K], |acc, k| {
                let (s, e) = self.spans[k];
                add(acc, f(k, s, &mut v[s - base..e - base]))
            }),
            _ => {
                let (left, right) = groups.split_at(groups.len() / 2);
                let cut = self.spans[right[0].start].0;
                let (a, b) = v.split_at_mut(cut - base);
                let (x, y) = rayon::join(|| self.sum_groups(left, a, base, f), || self.sum_groups(right, b, cut, f));
                add(x, y)
            }
        }
    }

    /// `K` sums of `f(first slot, end slot)` over the spans, in a fixed order (the same result on
    /// any thread count); for reading vectors.
    fn sums<const K: usize>(&self, f: impl Fn(usize, usize) -> [f64; K] + Sync) -> [f64; K] {
        self.read_groups(&self.groups, &f)
    }

    fn read_groups<const K: usize>(
        &self,
        groups: &[Range<usize>],
        f: &(impl Fn(usize, usize) -> [f64; K] + Sync),
    ) -> [f64; K] {
        let add = |x: [f64; K], y: [f64; K]| std::array::from_fn(|i| x[i] + y[i]);
        match groups {
            [] => [0.0; K],
            [g] => self.spans[g.clone()].iter().fold([0.0; K], |acc, &(s, e)| add(acc, f(s, e))),
            _ => {
                let (left, right) = groups.split_at(groups.len() / 2);
                let (x, y) = rayon::join(|| self.read_groups(left, f), || self.read_groups(right, f));
                add(x, y)
            }
        }
    }

    fn fill_zero<T: Real>(&self, v: &mut [T]) {
        self.for_each_mut(v, |_, _, t| t.fill(T::default()));
    }

    /// `to += a·from` over the points.
    fn add_scaled<T: Real>(&self, a: T, from: &[T], to: &mut [T]) {
        self.for_each_mut(to, |_, s, t| {
            for (t, f) in t.iter_mut().zip(&from[s..]) {
                *t += a * *f;
            }
        });
    }
}

/// `Σ a·b` in four partial sums, in `f64`.
fn dot_run<A: Real, B: Real>(a: &[A], b: &[B]) -> f64 {
    let mut s = [0f64; 4];
    let (ac, bc) = (a.chunks_exact(4), b.chunks_exact(4));
    let tail: f64 = ac.remainder().iter().zip(bc.remainder()).map(|(x, y)| x.get() * y.get()).sum();
    for (x, y) in ac.zip(bc) {
        for k in 0..4 {
            s[k] += x[k].get() * y[k].get();
        }
    }
    (s[0] + s[1]) + (s[2] + s[3]) + tail
}

/// Scratch of one level for the preconditioner.
struct LevelWork<T> {
    u: Vec<T>,
    b: Vec<T>,
    r: Vec<T>,
    /// The first visit's correction during the second visit of a K-cycle.
    keep: Vec<T>,
    /// The points in order, for the coarsest level's dense solve (grid storage).
    dense: Vec<f64>,
}

impl<T: Real> LevelWork<T> {
    /// Scratch for a level in vectors of `len` slots, `dense` of them solved by the coarsest
    /// level's factor.
    fn new(len: usize, dense: usize) -> Self {
        // Zeroed pages are mapped lazily: a grid's cells far from the points are never touched
        // and cost no memory.
        let zeros = || vec![T::default(); len];
        Self { u: zeros(), b: zeros(), r: zeros(), keep: zeros(), dense: vec![0.0; dense] }
    }
}

/// One channel's preconditioner scratch.
enum Work {
    Compact(Vec<LevelWork<f64>>),
    Grid(Vec<LevelWork<f32>>),
}

/// How the hierarchy stores its levels.
#[derive(Debug)]
enum Storage {
    Compact(compact::Levels),
    Grid(grid::Levels),
}

/// Unknowns per bounding-box cell from which a mask gets grid storage. Vectors are allocated
/// zeroed and touched only near the points, so memory pages far from the holes stay unused.
const GRID_MIN_DENSITY: f64 = 0.1;

/// The biharmonic multigrid hierarchy of one mask.
#[derive(Debug)]
pub struct Hierarchy {
    width: usize,
    height: usize,
    /// `y·width + x` of every unknown, row-major.
    pixels: Vec<u32>,
    /// Length of the finest level's vectors.
    len: usize,
    /// Where the finest level's vectors hold the unknowns, in their order; `None` for grid
    /// storage, whose finest level has it.
    layout: Option<Layout>,
    storage: Storage,
    /// Thin components solved by a factorisation instead (none for an explicit storage).
    thin: thin::Thin,
    /// The harmonic fill of the multigrid's unknowns, whose result starts the iteration (see
    /// [`START_TOLERANCE`]).
    start: Vec<super::Part>,
    setup_seconds: f64,
}

impl Hierarchy {
    /// Builds the hierarchy of `mask`, on a grid when its unknowns fill enough of their bounding
    /// box, else in index lists.
    ///
    /// # Errors
    /// [`FillError::NoKnownPixels`] when every pixel is masked.
    pub fn new(mask: &Mask) -> Result<Self, FillError> {
        Self::with_structure(mask, Structure::Auto)
    }

    /// Builds the hierarchy of `mask` with the given storage (`Auto` chooses by density; results
    /// agree to the tolerance whichever is used).
    ///
    /// # Errors
    /// [`FillError::NoKnownPixels`] when every pixel is masked.
    #[allow(clippy::cast_possible_truncation)]
    pub fn with_structure(mask: &Mask, structure: Structure) -> Result<Self, FillError> {
        let t0 = Instant::now();
        let (w, h) = (mask.width(), mask.height());
        let mut runs = crate::mask::row_runs(mask);
        // Sized first: growing it copied and faulted in about twice its final size.
        let count = runs.iter().flatten().map(|&(a, b)| (b - a) as usize).sum();
        let mut pixels = Vec::with_capacity(count);
        for (y, row) in runs.iter().enumerate() {
            for &(a, b) in row {
                pixels.extend((a..b).map(|x| crate::mask::index_u32(y * w + x as usize)));
            }
        }
        if !pixels.is_empty() && pixels.len() == w * h {
            return Err(FillError::NoKnownPixels);
        }
        // Thin components are factored; the multigrid takes the rest.
        let thin = if structure == Structure::Auto && !pixels.is_empty() {
            let (thin, taken) = thin::Thin::plan(w, h, &runs, &pixels);
            if thin.unknowns() > 0 {
                // Only the rows that lost unknowns get new runs (random dropout leaves a few
                // hundred isolated pixels to the factorisation out of half a million).
                let mut changed = vec![false; h];
                for (&p, _) in pixels.iter().zip(&taken).filter(|(_, t)| **t) {
                    changed[p as usize / w] = true;
                }
                let mut k = 0;
                pixels.retain(|_| {
                    k += 1;
                    !taken[k - 1]
                });
                for (y, row) in runs.iter_mut().enumerate().filter(|(y, _)| changed[*y]) {
                    let (a, b) = (
                        pixels.partition_point(|&p| (p as usize) < y * w),
                        pixels.partition_point(|&p| (p as usize) < (y + 1) * w),
                    );
                    row.clear();
                    for &p in &pixels[a..b] {
                        let x = p - (y * w) as u32;
                        match row.last_mut() {
                            Some(run) if run.1 == x => run.1 = x + 1,
                            _ => row.push((x, x + 1)),
                        }
                    }
                }
            }
            thin
        } else {
            thin::Thin::default()
        };
        let mut bbox = (usize::MAX, usize::MAX, 0, 0);
        for (y, row) in runs.iter().enumerate() {
            for &(a, b) in row {
                bbox = (bbox.0.min(a as usize), bbox.1.min(y), bbox.2.max(b as usize - 1), bbox.3.max(y));
            }
        }
        #[allow(clippy::cast_precision_loss)]
        let grid = match structure {
            Structure::Compact => false,
            Structure::Grid => true,
            Structure::Auto => {
                !pixels.is_empty()
                    && pixels.len() as f64 >= GRID_MIN_DENSITY * ((bbox.2 - bbox.0 + 5) * (bbox.3 - bbox.1 + 5)) as f64
            }
        };
        let shallow = !has_square(&runs, w, SHALLOW_SQUARE);
        let levels = || {
            if grid && !pixels.is_empty() {
                let levels = grid::Levels::new(&runs, w, h, shallow);
                let len = levels.finest_len();
                (Storage::Grid(levels), len, None)
            } else {
                let pos: Vec<(u32, u32)> = pixels.iter().map(|&p| (p % w as u32, p / w as u32)).collect();
                let n = pos.len();
                (Storage::Compact(compact::Levels::new(pos, w, h, shallow)), n, Some(Layout::contiguous(n)))
            }
        };
        // The harmonic fill's holes of these unknowns are holes of the whole mask: a 4-neighbour of
        // an unknown is within the 13-point reach, so it is either an unknown here or known. Its
        // plan is made side by side with the levels, whose construction is partly sequential (on
        // random dropout at 1024² both take about 20 ms).
        let start = || if pixels.is_empty() { Vec::new() } else { super::plan(runs.clone(), (w, h), structure) };
        let ((storage, len, layout), start) = rayon::join(levels, start);
        Ok(Self {
            width: w,
            height: h,
            pixels,
            len,
            layout,
            storage,
            thin,
            start,
            setup_seconds: t0.elapsed().as_secs_f64(),
        })
    }

    /// Number of unknowns.
    #[must_use]
    pub fn unknowns(&self) -> usize {
        self.pixels.len() + self.thin.unknowns()
    }

    /// Unknowns solved by a factorisation rather than the multigrid.
    #[must_use]
    pub fn factored_unknowns(&self) -> usize {
        self.thin.unknowns()
    }

    /// Number of levels.
    #[must_use]
    pub fn depth(&self) -> usize {
        if self.pixels.is_empty() {
            return 0;
        }
        match &self.storage {
            Storage::Compact(c) => c.levels.len(),
            Storage::Grid(g) => g.depth(),
        }
    }

    /// Bytes held by the hierarchy (not counting the per-image workspace).
    #[must_use]
    pub fn memory_bytes(&self) -> usize {
        let own = std::mem::size_of_val(self.pixels.as_slice())
            + self.thin.memory_bytes()
            + self.start.iter().map(super::Part::memory_bytes).sum::<usize>();
        own + match &self.storage {
            Storage::Compact(c) => c.memory_bytes(),
            Storage::Grid(g) => g.memory_bytes(),
        }
    }

    /// Whether the levels are stored on grids.
    #[must_use]
    pub fn is_grid(&self) -> bool {
        matches!(self.storage, Storage::Grid(_))
    }

    /// Seconds spent building the hierarchy.
    #[must_use]
    pub fn setup_seconds(&self) -> f64 {
        self.setup_seconds
    }

    /// Where the finest level's vectors hold the unknowns.
    fn layout(&self) -> &Layout {
        match (&self.layout, &self.storage) {
            (Some(layout), _) => layout,
            (None, Storage::Grid(g)) => g.finest_layout(),
            (None, Storage::Compact(_)) => unreachable!("compact storage has its own layout"),
        }
    }

    /// The first unknown of the finest layout's span `k` (the unknowns are numbered span after
    /// span).
    fn first(&self, k: usize) -> usize {
        match &self.storage {
            Storage::Grid(g) => g.finest_run_first(k),
            Storage::Compact(_) => self.layout().spans[k].0,
        }
    }

    /// A fresh zeroed vector over the finest level's slots, to be written at every unknown. Its
    /// pages are mapped on first touch, so slots no unknown owns cost no memory.
    fn zeros<T: Clone + Default>(&self) -> Vec<T> {
        vec![T::default(); self.len]
    }

    /// Whether the hierarchy has no coarse levels (see [`SHALLOW_SQUARE`]).
    fn is_shallow(&self) -> bool {
        match &self.storage {
            Storage::Compact(c) => c.is_shallow(),
            Storage::Grid(g) => g.is_shallow(),
        }
    }

    /// A forward and a backward Gauss-Seidel sweep of `B·x = b` on the finest level.
    fn relax_pair(&self, x: &mut [f64], b: &[f64]) {
        for backward in [false, true] {
            match &self.storage {
                Storage::Compact(c) => c.sweep_finest(x, b, backward),
                Storage::Grid(g) => g.sweep_finest(x, b, backward),
            }
        }
    }

    /// `out = b − B·u` on the finest level, and `out·out` (in the same pass).
    fn residual(&self, u: &[f64], b: &[f64], out: &mut [f64]) -> f64 {
        match &self.storage {
            Storage::Compact(c) => {
                c.levels[0].apply(u, out);
                self.layout().sum_mut(out, |_, s, out| {
                    out.iter_mut().zip(&b[s..]).for_each(|(o, b)| *o = b - *o);
                    dot_run(out, out)
                })
            }
            Storage::Grid(g) => g.residual(u, b, out),
        }
    }

    /// `out = B·u` on the finest level for `u` in `f32`, each row summed in `f64` and rounded
    /// once, and `u·out` (in the grid storage's pass over `out`).
    fn apply_dot_narrow(&self, u: &[f32], out: &mut [f32]) -> f64 {
        match &self.storage {
            Storage::Compact(c) => {
                c.levels[0].apply(u, out);
                self.layout().sums(|s, e| [dot_run(&u[s..e], &out[s..e])])[0]
            }
            Storage::Grid(g) => g.apply_dot_narrow(u, out),
        }
    }

    /// Scratch for one channel's preconditioner.
    fn work(&self) -> Work {
        match &self.storage {
            Storage::Compact(c) => Work::Compact(c.levels.iter().map(|l| LevelWork::new(l.n, 0)).collect()),
            Storage::Grid(g) => Work::Grid(g.work()),
        }
    }

    /// Runs one cycle on the right-hand side already in `work` (see [`update_residual`]).
    fn precondition(&self, work: &mut Work) {
        match (&self.storage, work) {
            (Storage::Compact(c), Work::Compact(w)) => c.cycle(0, w),
            (Storage::Grid(g), Work::Grid(w)) => g.cycle(0, w),
            _ => unreachable!("scratch made by this hierarchy"),
        }
    }

    /// The right-hand side of one plane, `−Σ B_pr·f_r` over the known pixels `r` of each row, and
    /// its squared norm.
    #[allow(clippy::cast_possible_wrap, clippy::cast_sign_loss)]
    fn rhs(&self, plane: &[f32], mask: &PackedMask) -> Result<(Vec<f64>, f64), FillError> {
        let (w, h) = (self.width as i64, self.height as i64);
        let interior = fine_row(2, 2, 5, 5);
        // Away from the image edge every row is the 13-point stencil: its terms at fixed offsets.
        let terms: [(f64, isize); 12] = std::array::from_fn(|t| {
            let (dx, dy) = FINE[t + 1];
            (interior[square_index((dx, dy))], (dy * w + dx) as isize)
        });
        // The right-hand side of the unknown `p` at `(x, y)`.
        let point = |p: u32, x: i64, y: i64| -> Result<f64, FillError> {
            if near_edge(x, y, w, h) {
                return rhs_at(x, y, &row_square(x, y, w, h, &interior), w, plane, mask);
            }
            // Without a branch on the mask bit, which random dropout makes unpredictable: an
            // unknown's value is cleared bit by bit, so it adds zero whatever it holds (the
            // compiler turns the clearing into a jump unless the bit passes through `black_box`).
            // A non-finite known value is looked for only when one was summed.
            let (mut s, mut finite) = (0f64, true);
            for &(a, o) in &terms {
                let q = (p as usize).wrapping_add_signed(o);
                let bits = plane[q].to_bits() & std::hint::black_box(u32::from(mask.get(q)).wrapping_sub(1));
                finite &= bits & 0x7fff_ffff < 0x7f80_0000;
                s -= a * f64::from(f32::from_bits(bits));
            }
            if finite { Ok(s) } else { rhs_at(x, y, &interior, w, plane, mask) }
        };
        // Zeros are not written; a page never written is read as the shared zero page.
        let mut b = self.zeros();
        let layout = self.layout();
        let [bad, norm_sq] = layout.sums_mut(&mut b, |k, _, out| {
            let p0 = self.first(k);
            let (mut bad, mut norm_sq, n) = (0.0, 0.0, out.len());
            // The position of the last unknown visited: the next one is mostly its right-hand
            // neighbour, found without a division.
            let (mut last, mut x, mut y) = (u32::MAX, 0, 0);
            for (out, pixels) in out.chunks_mut(64).zip(self.pixels[p0..p0 + n].chunks(64)) {
                // Inside a wide hole a row reaches no known pixel: its mask bits decide, and the
                // image is not read.
                let inside = surrounded(mask, self.width, pixels);
                for (j, (o, &p)) in out.iter_mut().zip(pixels).enumerate() {
                    if inside >> j & 1 == 1 {
                        continue;
                    }
                    (x, y) = if p == last.wrapping_add(1) && x + 1 < w {
                        (x + 1, y)
                    } else {
                        (i64::from(p % self.width as u32), i64::from(p) / w)
                    };
                    last = p;
                    match point(p, x, y) {
                        Ok(v) if v != 0.0 => {
                            *o = v;
                            norm_sq += v * v;
                        }
                        Ok(_) => {}
                        Err(_) => bad += 1.0,
                    }
                }
            }
            [bad, norm_sq]
        });
        if bad > 0.0 {
            // The first unknown in pixel order whose row reaches a non-finite known value.
            for &p in &self.pixels {
                point(p, i64::from(p % self.width as u32), i64::from(p) / w)?;
            }
        }
        Ok((b, norm_sq))
    }

    /// The starting iterates, one per plane over the finest level's slots: the harmonic fill of
    /// the multigrid's unknowns to [`START_TOLERANCE`] (`harmonic`, when there is one and it
    /// succeeds), the planes' values (a warm start), or zeros. The planes come back unchanged. The
    /// harmonic fill is made in the planes; meanwhile each iterate keeps the values it overwrote
    /// (their `f32` bits, so a not-a-number comes back bit for bit), and one pass then swaps the
    /// two: no copy of its own, which would be fresh memory for the kernel to map and zero.
    fn starts(&self, planes: &mut [&mut [f32]], params: &FillParams, harmonic: bool) -> Vec<Vec<f64>> {
        let layout = self.layout();
        let mut xs: Vec<Vec<f64>> = planes.iter().map(|_| self.zeros()).collect();
        // `x = f(plane value)` at every unknown.
        let read = |x: &mut [f64], plane: &[f32], f: &(dyn Fn(f32) -> f64 + Sync)| {
            layout.for_each_mut(x, |k, _, out| {
                for (o, &q) in out.iter_mut().zip(&self.pixels[self.first(k)..]) {
                    *o = f(plane[q as usize]);
                }
            });
        };
        let finite = |v: f32| if v.is_finite() { f64::from(v) } else { 0.0 };
        if !harmonic || self.start.is_empty() {
            for (x, plane) in xs.iter_mut().zip(planes.iter()) {
                if harmonic {
                    // Written before it is read (see `Pcg::new`).
                    layout.fill_zero(x);
                } else {
                    read(x, plane, &finite);
                }
            }
            return xs;
        }
        let bits = |v: f32| f64::from_bits(u64::from(v.to_bits()));
        for (x, plane) in xs.iter_mut().zip(planes.iter()) {
            read(x, plane, &bits);
        }
        let params = FillParams {
            method: super::FillMethod::Harmonic,
            tolerance: START_TOLERANCE,
            grain: None,
            ..params.clone()
        };
        let filled = super::solve_parts(&self.start, planes, &params, Start::FullMultigrid, &mut |_| true).is_ok();
        for (x, plane) in xs.iter_mut().zip(planes.iter_mut()) {
            let plane = Shared(plane.as_mut_ptr(), plane.len());
            layout.for_each_mut(x, |k, _, out| {
                for (o, &q) in out.iter_mut().zip(&self.pixels[self.first(k)..]) {
                    // SAFETY: every unknown is one pixel of the plane, visited by its span's task.
                    unsafe {
                        let start = plane.get(q as usize);
                        #[allow(clippy::cast_possible_truncation)]
                        plane.set(q as usize, f32::from_bits(o.to_bits() as u32));
                        // Without the fill (it failed and left the planes as they were, or
                        // partly written) the iteration starts from zero.
                        *o = if filled { finite(start) } else { 0.0 };
                    }
                }
            });
        }
        xs
    }

    /// Fills the unknowns of every plane; on error the planes are unchanged.
    pub(crate) fn solve(
        &self,
        planes: &mut [&mut [f32]],
        mask: &PackedMask,
        params: &FillParams,
        start: Start,
        progress: &mut (dyn FnMut(&Progress) -> bool + Send),
    ) -> Result<Vec<ChannelReport>, FillError> {
        // The factored components first: cheap, and a bad rim value stops everything before any
        // plane is written.
        let thin: Vec<thin::Solved> = planes.iter().map(|p| self.thin.solve(p, mask)).collect::<Result<_, _>>()?;
        let combined = |rn_sq: f64, bn_sq: f64, t: &thin::Solved| {
            let (r, b) = (rn_sq + t.r_sq, bn_sq + t.b_sq);
            if b > 0.0 { (r / b).sqrt() } else { r.sqrt() }
        };
        if self.pixels.is_empty() {
            for (plane, t) in planes.iter_mut().zip(&thin) {
                self.thin.write(plane, t);
            }
            return Ok(thin
                .iter()
                .map(|t| {
                    let rel = combined(0.0, 0.0, t);
                    ChannelReport { relative_residual: rel, cycles: 0, history: vec![rel] }
                })
                .collect());
        }
        let rhs: Vec<(Vec<f64>, f64)> = planes.iter().map(|p| self.rhs(p, mask)).collect::<Result<_, _>>()?;
        let starts = self.starts(planes, params, start != Start::Warm);
        let relax = self.is_shallow();
        let mut states: Vec<Pcg> =
            rhs.into_iter().zip(starts).map(|((b, b_sq), x)| Pcg::new(self, b, b_sq, x, relax)).collect();
        let mut reports = vec![ChannelReport::default(); planes.len()];
        let mut done = vec![false; planes.len()];
        let mut iteration = 0;
        loop {
            let mut worst = 0f64;
            for (c, s) in states.iter().enumerate() {
                let rel = s.relative();
                reports[c].relative_residual = rel;
                reports[c].history.push(rel);
                if !done[c] && rel <= params.tolerance {
                    done[c] = true;
                    reports[c].cycles = iteration;
                }
                worst = worst.max(rel);
            }
            if done.iter().all(|&d| d) {
                break;
            }
            if !worst.is_finite() || iteration >= params.max_cycles {
                return Err(FillError::NoConvergence { residual: worst, cycles: iteration });
            }
            let report = Progress {
                cycle: iteration,
                max_cycles: params.max_cycles,
                residual: worst,
                tolerance: params.tolerance,
            };
            if !progress(&report) {
                return Err(FillError::Cancelled);
            }
            states.par_iter_mut().zip(&done).filter(|(_, d)| !**d).for_each(|(s, _)| s.step(self, params.tolerance));
            iteration += 1;
        }
        // The recurrence's residual drifts from the true one; report the true one, together with
        // the factored components'.
        for (c, s) in states.iter_mut().enumerate() {
            s.finish(self);
            let own = s.true_relative(self);
            let bn = if s.bnorm > 0.0 { s.bnorm } else { 1.0 };
            let rel = combined((own * bn).powi(2), s.bnorm * s.bnorm, &thin[c]);
            reports[c].relative_residual = rel;
            if let Some(last) = reports[c].history.last_mut() {
                *last = rel;
            }
        }
        for ((plane, s), t) in planes.iter_mut().zip(&states).zip(&thin) {
            self.thin.write(plane, t);
            let layout = self.layout();
            let out = Shared(plane.as_mut_ptr(), plane.len());
            layout.for_each_span(|k, a, e| {
                for (&p, &v) in self.pixels[self.first(k)..].iter().zip(&s.x[a..e]) {
                    // SAFETY: every unknown is one pixel of the plane, written by its span's task.
                    #[allow(clippy::cast_possible_truncation)]
                    unsafe {
                        out.set(p as usize, v as f32);
                    };
                }
            });
        }
        Ok(reports)
    }
}

/// The state of one channel's iteration: symmetric Gauss-Seidel on the iterate while it converges
/// fast (a hierarchy without coarse levels, see [`SHALLOW_SQUARE`]), then preconditioned
/// conjugate gradients.
struct Pcg {
    b: Vec<f64>,
    bnorm: f64,
    /// The iterate, one step behind during conjugate gradients: the last step's `α·p` is added
    /// with the next direction (one pass fewer); [`Pcg::finish`] adds it at the end.
    x: Vec<f64>,
    /// The residual `b − A·x` while relaxing; conjugate gradients take it as theirs (`Cg::r`), and
    /// [`Pcg::true_relative`] takes it back.
    res: Vec<f64>,
    /// The squared norm of the residual, kept up to date.
    rr: f64,
    /// Conjugate gradients' own state, from the first step that needs it.
    cg: Option<Cg>,
}

/// The vectors and scalars of conjugate gradients. The iterate and the residual are `f64`; the
/// direction `p` and `A·p` are `f32`, with `A·p` summed in `f64` from the stored `p` and rounded
/// once. The iteration stays consistent (`x` moves by exactly `α·p` and `r` by `α` times the
/// product of that `p`, to within its one rounding), and those two passes and the step's update
/// move half the bytes: the vectors are mostly fresh memory, which the kernel must map and zero.
struct Cg {
    r: Vec<f64>,
    p: Vec<f32>,
    /// `A·p` of the last step.
    q: Vec<f32>,
    rz: f64,
    /// The preconditioner's scratch; its finest right-hand side holds `r` between steps, and its
    /// finest correction is the preconditioned residual `z` (no vector of its own).
    work: Work,
    started: bool,
    /// The last step length, not yet applied to `x`.
    alpha: f64,
}

/// A relaxation round (a forward and a backward sweep) that leaves more than this share of the
/// residual ends the relaxation unless two more such rounds would reach the tolerance: conjugate
/// gradients take over. A round costs about a third of a conjugate-gradient step, whose vectors
/// would be fresh memory besides (dropout 1024², solve: four rounds and a step 0.161 s, six rounds
/// 0.139 s, least of 18). Measured on 50% dropout at 2048² from the harmonic start: the rounds
/// leave 0.27, 0.50, 0.59, 0.65, … of the residual (the smooth error's modes remain).
const RELAX_SLOW: f64 = 0.6;

impl Pcg {
    /// The state at `x` for the right-hand side `b` of squared norm `b_sq`; `relax`: begin by
    /// relaxing.
    fn new(hier: &Hierarchy, b: Vec<f64>, b_sq: f64, x: Vec<f64>, relax: bool) -> Self {
        let mut res = hier.zeros();
        let rr = hier.residual(&x, &b, &mut res);
        let bnorm = b_sq.sqrt();
        let mut state = Self { b, bnorm, x, res, rr, cg: None };
        if !relax {
            state.start_cg(hier);
        }
        state
    }

    /// Begins conjugate gradients from the residual in `res`.
    fn start_cg(&mut self, hier: &Hierarchy) {
        let mut r = std::mem::take(&mut self.res);
        let mut work = hier.work();
        let layout = hier.layout();
        self.rr = match &mut work {
            Work::Compact(w) => residual_to_rhs(layout, &mut r, &mut w[0].b, |_, _| {}),
            Work::Grid(w) => residual_to_rhs(layout, &mut r, &mut w[0].b, |_, _| {}),
        };
        // `p` is read before it is written; zeros written now map its pages once, where a read of
        // fresh zeroed memory maps the shared zero page, and the write after it copies the page
        // and flushes the other threads' address caches.
        let mut p = hier.zeros();
        layout.fill_zero(&mut p);
        let q = hier.zeros();
        self.cg = Some(Cg { r, p, q, rz: 0.0, work, started: false, alpha: 0.0 });
    }

    fn relative(&self) -> f64 {
        let rn = self.rr.sqrt();
        if self.bnorm > 0.0 { rn / self.bnorm } else { rn }
    }

    /// Adds the last step to `x`.
    fn finish(&mut self, hier: &Hierarchy) {
        if let Some(cg) = &mut self.cg
            && cg.alpha != 0.0
        {
            let p = &cg.p;
            let alpha = cg.alpha;
            hier.layout().for_each_mut(&mut self.x, |_, s, x| {
                x.iter_mut().zip(&p[s..]).for_each(|(x, p)| *x += alpha * f64::from(*p));
            });
            cg.alpha = 0.0;
        }
    }

    /// The relative residual of `x` (after [`Pcg::finish`]), computed afresh; ends conjugate
    /// gradients.
    fn true_relative(&mut self, hier: &Hierarchy) -> f64 {
        if let Some(cg) = self.cg.take() {
            self.res = cg.r;
        }
        let rn = hier.residual(&self.x, &self.b, &mut self.res).sqrt();
        if self.bnorm > 0.0 { rn / self.bnorm } else { rn }
    }

    /// One step: a relaxation round, or one of conjugate gradients (see [`Cg::step`]).
    fn step(&mut self, hier: &Hierarchy, tolerance: f64) {
        if self.cg.is_none() {
            let before = self.relative();
            hier.relax_pair(&mut self.x, &self.b);
            self.rr = hier.residual(&self.x, &self.b, &mut self.res);
            let after = self.relative();
            let rate = if before > 0.0 { after / before } else { 0.0 };
            if after > tolerance && rate > RELAX_SLOW && after * rate * rate > tolerance {
                self.start_cg(hier);
            }
            return;
        }
        let Some(cg) = &mut self.cg else { return };
        self.rr = cg.step(hier, &mut self.x).unwrap_or(self.rr);
    }
}

impl Cg {
    /// One step of flexible conjugate gradients: the K-cycle is not a fixed linear map, so the
    /// new direction is made conjugate to the last one explicitly, `β = −(z·A·p)/(p·A·p)`
    /// (Notay 2000, "Flexible conjugate gradients"); with a fixed symmetric preconditioner this is
    /// the usual `β = (r·z)/(r₋₁·z₋₁)`. Four passes over the vectors besides the cycle: the two
    /// products of `z`, the new direction (with the last step added to `x`), `A·p` with `p·A·p`,
    /// and the new residual (copied to the cycle's right-hand side). Returns the new `r·r`, or
    /// `None` if the direction has no positive curvature (the iteration then stalls and reports).
    fn step(&mut self, hier: &Hierarchy, x: &mut [f64]) -> Option<f64> {
        let layout = hier.layout();
        hier.precondition(&mut self.work);
        // `q` still holds `A·p` of the last step.
        let (r, q) = (&self.r, &self.q);
        let [rz, qz] = match &self.work {
            Work::Compact(w) => products(layout, r, q, &w[0].u),
            Work::Grid(w) => products(layout, r, q, &w[0].u),
        };
        let beta = if self.started && self.rz != 0.0 {
            // `p·A·p = r₋₁·z₋₁ / α`.
            -self.alpha * qz / self.rz
        } else {
            0.0
        };
        self.started = true;
        match &self.work {
            Work::Compact(w) => advance(layout, self.alpha, beta, &w[0].u, &mut self.p, x),
            Work::Grid(w) => advance(layout, self.alpha, beta, &w[0].u, &mut self.p, x),
        }
        self.alpha = 0.0;
        self.rz = rz;
        let pq = hier.apply_dot_narrow(&self.p, &mut self.q);
        if pq <= 0.0 || !pq.is_finite() {
            return None;
        }
        let alpha = rz / pq;
        self.alpha = alpha;
        Some(match &mut self.work {
            Work::Compact(w) => update_residual(layout, alpha, &self.q, &mut self.r, &mut w[0].b),
            Work::Grid(w) => update_residual(layout, alpha, &self.q, &mut self.r, &mut w[0].b),
        })
    }
}

/// `r −= α·q`, copied into the preconditioner's right-hand side `to`; returns `r·r`.
fn update_residual<T: Real>(layout: &Layout, alpha: f64, q: &[f32], r: &mut [f64], to: &mut [T]) -> f64 {
    residual_to_rhs(layout, r, to, |s, r| {
        for (r, q) in r.iter_mut().zip(&q[s..]) {
            *r -= alpha * f64::from(*q);
        }
    })
}

/// `update(first slot, span of r)` on every span of the residual `r`, then the span copied into
/// the preconditioner's right-hand side `to` while in cache; returns `r·r`.
fn residual_to_rhs<T: Real>(
    layout: &Layout,
    r: &mut [f64],
    to: &mut [T],
    update: impl Fn(usize, &mut [f64]) + Sync,
) -> f64 {
    let to = Shared(to.as_mut_ptr(), to.len());
    layout.sum_mut(r, |_, s, r| {
        // SAFETY: the spans are disjoint and each is visited by one task.
        let to = unsafe { to.slice_mut(s, r.len()) };
        update(s, r);
        for (r, t) in r.iter().zip(to.iter_mut()) {
            *t = T::of(*r);
        }
        dot_run(r, r)
    })
}

/// `[r·z, q·z]` for the preconditioned residual `z`.
fn products<T: Real>(layout: &Layout, r: &[f64], q: &[f32], z: &[T]) -> [f64; 2] {
    layout.sums(|s, e| [dot_run(&r[s..e], &z[s..e]), dot_run(&q[s..e], &z[s..e])])
}

/// `x += α·p`, then `p = z + β·p` (rounded to `f32`).
fn advance<T: Real>(layout: &Layout, alpha: f64, beta: f64, z: &[T], p: &mut [f32], x: &mut [f64]) {
    let x = Shared(x.as_mut_ptr(), x.len());
    layout.for_each_mut(p, |_, s, p| {
        // SAFETY: the spans are disjoint and each is visited by one task.
        let x = unsafe { x.slice_mut(s, p.len()) };
        for ((p, x), z) in p.iter_mut().zip(x.iter_mut()).zip(&z[s..]) {
            let old = f64::from(*p);
            *x += alpha * old;
            *p = f32::of(z.get() + beta * old);
        }
    });
}

#[cfg(test)]
mod tests {
    use super::*;

    fn runs_of(w: usize, h: usize, unknown: impl Fn(usize, usize) -> bool) -> Vec<Vec<(u32, u32)>> {
        let bits: Vec<bool> = (0..w * h).map(|i| unknown(i % w, i / w)).collect();
        crate::mask::row_runs(&Mask::from_bits(w, h, bits))
    }

    #[test]
    fn surrounded_unknowns_are_those_whose_stencil_reaches_no_known_pixel() {
        let (w, h) = (150, 40);
        let mut rng = crate::synth::Rng::new(5);
        let mask = Mask::from_fn(w, h, |_, _| rng.uniform() < 0.93);
        let packed = PackedMask::from_runs(w, h, &crate::mask::row_runs(&mask));
        let known_near = |x: usize, y: usize| {
            FINE[1..].iter().any(|&(dx, dy)| {
                let (a, b) = (x as i64 + dx, y as i64 + dy);
                a >= 0 && b >= 0 && (a as usize) < w && (b as usize) < h && !mask.get(a as usize, b as usize)
            })
        };
        let (mut inner, mut set) = (0, 0);
        for y in 0..h {
            // Chunks of a row's pixels from every start, masked or not, the way a run is cut.
            for start in [0, 1, 2, 37, 86] {
                let pixels: Vec<u32> = (start..(start + 64).min(w)).map(|x| (y * w + x) as u32).collect();
                let bits = surrounded(&packed, w, &pixels);
                for (j, &p) in pixels.iter().enumerate() {
                    let x = p as usize % w;
                    let none = !known_near(x, y);
                    if bits >> j & 1 == 1 {
                        set += 1;
                        assert!(none, "({x}, {y}) marked but its stencil reaches a known pixel");
                    } else if (2..h - 2).contains(&y) && (2..w - 2).contains(&x) {
                        inner += 1;
                        assert!(!none, "({x}, {y}) not marked though its stencil reaches none");
                    }
                }
            }
        }
        assert!(set > 100 && inner > 100, "both kinds seen: {set} marked, {inner} not");
        // Not consecutive: nothing is marked.
        assert_eq!(surrounded(&packed, w, &[(10 * w + 20) as u32, (10 * w + 22) as u32]), 0);
    }

    #[test]
    fn squares_of_unknowns_are_found_wherever_they_sit() {
        let (w, h) = (40, 30);
        // An 8×8 square made of runs that start and end elsewhere in each row.
        let square = runs_of(w, h, |x, y| (10..18).contains(&y) && ((5..12).contains(&x) || (12..30).contains(&x)));
        assert!(has_square(&square, w, 8));
        assert!(!has_square(&square, w, 9), "only eight rows tall");
        // A strip seven wide and as long as the image, and an L of arms seven wide and four tall,
        // have none.
        let strip = runs_of(w, h, |x, _| (3..10).contains(&x));
        assert!(!has_square(&strip, w, 8));
        assert!(has_square(&strip, w, 7));
        let ell =
            runs_of(w, h, |x, y| ((20..27).contains(&x) && y < 12) || ((20..40).contains(&x) && (12..16).contains(&y)));
        assert!(!has_square(&ell, w, 8), "an arm seven wide and one four tall");
        assert!(has_square(&ell, w, 7));
        // Rows that are unknown at the same columns but not consecutively do not count.
        let comb = runs_of(w, h, |x, y| y % 2 == 0 && x < 20);
        assert!(!has_square(&comb, w, 2));
    }
}
