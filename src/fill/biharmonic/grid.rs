//! Grid storage of the biharmonic hierarchy, for masks whose unknowns fill a good share of their
//! bounding box (wide holes, dropout).
//!
//! Every level is a grid over its points' bounding box with two empty cells around it (the reach
//! of the 5×5 stencils); cells that are not points hold zero in every vector. So a stencil reads
//! its neighbours at fixed offsets instead of through index lists, interpolation leaves out
//! missing parents by reading their zeros, and restriction gathers from the children's cells.
//! Rows of the operator are stored once per kind: on the finest level one per image-edge class,
//! on coarse levels one shared row for every point whose Galerkin row sees only interior points
//! of the finer level (most of a wide hole) and one of its own for the rest.

use std::ops::Range;

use rayon::prelude::*;

use super::{
    COARSE, COARSE_SWEEPS, COARSEST_MAX, COARSEST_SWEEPS, Coarsest, DENSE_MAX, FINE, FINE_SWEEPS, Layout, LevelWork,
    MIN_REDUCTION, Real, SECOND_VISITS, SHALLOW_SWEEPS, Shared, banded, bands, dense_coarsest, dot_run, fine_row,
    has_square_in, krylov_weights, square_index,
};

/// Empty cells around the points' bounding box.
const PAD: i64 = 2;

/// Interpolation weight of a coordinate: 1 on a coarse line, ½ between two.
fn weight(v: i64) -> f64 {
    if v.rem_euclid(2) == 0 { 1.0 } else { 0.5 }
}

/// The coarse coordinates a fine coordinate interpolates from.
fn parents(v: i64) -> ([i64; 2], usize) {
    if v.rem_euclid(2) == 0 { ([v / 2, v / 2], 1) } else { ([(v - 1).div_euclid(2), (v + 1).div_euclid(2)], 2) }
}

#[derive(Debug)]
struct Level {
    /// Level coordinates of cell 0, cells per grid row.
    x0: i64,
    y0: i64,
    stride: usize,
    /// The points' bounding box (level coordinates, inclusive).
    bbox: (i64, i64, i64, i64),
    /// Point index + 1 of every cell, 0 where the cell is not a point.
    index: Vec<u32>,
    /// Row-major runs of points: first cell, end cell, first point (the layout's spans). Once
    /// the rows are set, a run is either all interior points (`interior`) or all others.
    runs: Vec<(usize, usize, usize)>,
    interior: Vec<bool>,
    /// Ranges of `runs` a sweep relaxes in parallel: bands of rows, then the two-row seams
    /// between them.
    bands: Vec<Range<usize>>,
    seams: Vec<Range<usize>>,
    layout: Layout,
    n: usize,
    /// Stencil offsets in level coordinates (centre first) and in cells.
    offsets: &'static [(i64, i64)],
    cell_off: Vec<isize>,
    /// Each point's row in the coefficient tables (row 0 the interior row).
    row: Vec<u32>,
    /// The rows in `f64` (the finest level's for `B` itself, every level's while coarser ones
    /// are built) and in `f32` (the preconditioner's).
    c64: Coefs<f64>,
    c32: Coefs<f32>,
    /// Whether the K-cycle's products on this level are summed in `f64`: a level visited twice
    /// whose points contain a square of [`WIDE`] cells a side.
    wide: bool,
}

/// A level's operator rows in one precision.
#[derive(Debug, Default)]
struct Coefs<T> {
    /// `offsets.len()` coefficients a row, centre first.
    table: Vec<T>,
    inv_diag: Vec<T>,
    /// The shared row as (coefficient, cell offset) terms.
    shared_terms: Vec<(T, isize)>,
    /// For forward and backward sweeps: the slots of the nearer and farther same-row neighbours
    /// relaxed before a point, and the shared row's other off-diagonal terms.
    recurrence: [Recurrence<T>; 2],
    /// The forward recurrence's terms on cells before the point (the rows above): all a forward
    /// sweep from zero reads, the cells after the point being still zero.
    behind: Vec<(T, isize)>,
}

/// Slots of the nearer and farther neighbours relaxed before a point, and the other terms.
type Recurrence<T> = (usize, usize, Vec<(T, isize)>);

impl<T: Real> Coefs<T> {
    fn new(table: Vec<T>, offsets: &[(i64, i64)], cell_off: &[isize]) -> Self {
        let k = offsets.len();
        let inv_diag = table.chunks_exact(k).map(|r| T::of(1.0 / r[0].get())).collect();
        let shared_terms: Vec<(T, isize)> = table[..k].iter().copied().zip(cell_off.iter().copied()).collect();
        let slot = |o: (i64, i64)| offsets.iter().position(|&q| q == o).expect("same-row neighbours");
        // Terms whose coefficient is zero are left out: the corners of every coarse level's
        // shared row and the diagonal neighbours of the first one's (8 of 24 there).
        let recurrence = [((-1, 0), (-2, 0)), ((1, 0), (2, 0))].map(|(near, far)| {
            let (near, far) = (slot(near), slot(far));
            let terms: Vec<(T, isize)> = (1..k)
                .filter(|&t| t != near && t != far && shared_terms[t].0 != T::default())
                .map(|t| shared_terms[t])
                .collect();
            (near, far, terms)
        });
        let behind: Vec<(T, isize)> = recurrence[0].2.iter().copied().filter(|&(_, o)| o < 0).collect();
        let shared_terms = shared_terms.into_iter().filter(|t| t.0 != T::default()).collect();
        Self { table, inv_diag, shared_terms, recurrence, behind }
    }
}

/// The precisions the level kernels run in.
trait LevelReal: Real {
    fn coefs(level: &Level) -> &Coefs<Self>;
}

impl LevelReal for f64 {
    fn coefs(level: &Level) -> &Coefs<f64> {
        &level.c64
    }
}

impl LevelReal for f32 {
    fn coefs(level: &Level) -> &Coefs<f32> {
        &level.c32
    }
}

impl Level {
    /// A level whose points are the `runs` (`y`, `x` from, `x` to exclusive), row-major, on a grid
    /// that covers `bbox` (inclusive) with [`PAD`] empty cells around.
    #[allow(clippy::cast_possible_truncation, clippy::cast_possible_wrap, clippy::cast_sign_loss)]
    fn new(
        runs_xy: impl IntoIterator<Item = (i64, i64, i64)>,
        bbox: (i64, i64, i64, i64),
        offsets: &'static [(i64, i64)],
    ) -> Self {
        let (x0, y0) = (bbox.0 - PAD, bbox.1 - PAD);
        let stride = (bbox.2 - bbox.0 + 1 + 2 * PAD) as usize;
        let rows = (bbox.3 - bbox.1 + 1 + 2 * PAD) as usize;
        let mut runs = Vec::new();
        let mut n = 0usize;
        let mut points = (i64::MAX, i64::MAX, i64::MIN, i64::MIN);
        for (y, a, b) in runs_xy {
            let s = (y - y0) as usize * stride + (a - x0) as usize;
            let len = (b - a) as usize;
            runs.push((s, s + len, n));
            n += len;
            points = (points.0.min(a), points.1.min(y), points.2.max(b - 1), points.3.max(y));
        }
        // Zeroed allocations are mapped lazily: cells never written cost no memory.
        let mut index = vec![0; stride * rows];
        for &(s, e, first) in &runs {
            for (k, cell) in index[s..e].iter_mut().enumerate() {
                *cell = crate::mask::index_u32(first + k + 1);
            }
        }
        let cell_off = offsets.iter().map(|&(dx, dy)| dy as isize * stride as isize + dx as isize).collect();
        let layout = Layout::new(runs.iter().map(|&(s, e, _)| (s, e)).collect());
        let (bands, seams) = run_bands(&runs, stride, rows);
        Self {
            x0,
            y0,
            stride,
            bbox: points,
            index,
            interior: vec![false; runs.len()],
            runs,
            bands,
            seams,
            layout,
            n,
            offsets,
            cell_off,
            row: Vec::new(),
            c64: Coefs::default(),
            c32: Coefs::default(),
            wide: false,
        }
    }

    fn k(&self) -> usize {
        self.offsets.len()
    }

    /// The cell of level coordinates `(x, y)`, if on the grid.
    #[allow(clippy::cast_possible_truncation, clippy::cast_possible_wrap, clippy::cast_sign_loss)]
    fn cell(&self, x: i64, y: i64) -> Option<usize> {
        let (cx, cy) = (x - self.x0, y - self.y0);
        (cx >= 0 && cy >= 0 && (cx as usize) < self.stride && (cy as usize) < self.index.len() / self.stride)
            .then(|| cy as usize * self.stride + cx as usize)
    }

    /// The point at `(x, y)`.
    fn point(&self, x: i64, y: i64) -> Option<usize> {
        self.cell(x, y).and_then(|c| self.index[c].checked_sub(1)).map(|p| p as usize)
    }

    /// Level coordinates of cell `c`.
    #[allow(clippy::cast_possible_wrap)]
    fn at(&self, c: usize) -> (i64, i64) {
        (self.x0 + (c % self.stride) as i64, self.y0 + (c / self.stride) as i64)
    }

    fn row_of(&self, p: usize) -> &[f64] {
        let k = self.k();
        let r = self.row[p] as usize;
        &self.c64.table[r * k..(r + 1) * k]
    }

    #[allow(clippy::cast_possible_truncation)]
    fn set_rows(&mut self, row: Vec<u32>, table: Vec<f64>) {
        self.c32 = Coefs::new(table.iter().map(|&v| v as f32).collect(), self.offsets, &self.cell_off);
        self.c64 = Coefs::new(table, self.offsets, &self.cell_off);
        // Split the runs where points change between interior and other (on the finest level
        // only near the image edge: most masks need no split, and the runs stay as they are).
        let uniform = |&(s, e, p0): &(usize, usize, usize)| {
            let first = row[p0] == 0;
            row[p0..p0 + e - s].iter().all(|&r| (r == 0) == first)
        };
        if self.runs.iter().all(uniform) {
            self.interior = self.runs.iter().map(|&(_, _, p0)| row[p0] == 0).collect();
            self.row = row;
            return;
        }
        let mut runs = Vec::with_capacity(self.runs.len());
        let mut interior = Vec::with_capacity(self.runs.len());
        for &(s, e, p0) in &self.runs {
            let mut a = s;
            while a < e {
                let inner = row[p0 + a - s] == 0;
                let len = row[p0 + a - s..p0 + e - s].iter().take_while(|&&r| (r == 0) == inner).count();
                runs.push((a, a + len, p0 + a - s));
                interior.push(inner);
                a += len;
            }
        }
        self.layout = Layout::new(runs.iter().map(|&(s, e, _)| (s, e)).collect());
        (self.bands, self.seams) = run_bands(&runs, self.stride, self.index.len() / self.stride);
        self.runs = runs;
        self.interior = interior;
        self.row = row;
    }

    /// `out = b − A·u` (or `A·u` without `b`) at the points.
    fn residual<T: LevelReal>(&self, u: &[T], b: Option<&[T]>, out: &mut [T]) {
        self.residual_sums(u, b, out, |_, _| [0.0; 0]);
    }

    /// As [`Level::residual`], and `N` sums of `sums(first slot, span of out)` over the layout's
    /// spans (a fixed order, as [`Layout::sums`]), each taken while its span of `out` is in
    /// cache: a dot product with the result costs no pass of its own.
    fn residual_sums<T: LevelReal, const N: usize>(
        &self,
        u: &[T],
        b: Option<&[T]>,
        out: &mut [T],
        sums: impl Fn(usize, &[T]) -> [f64; N] + Sync,
    ) -> [f64; N] {
        match self.k() {
            13 => self.residual_k::<T, 13, N>(u, b, out, sums),
            _ => self.residual_k::<T, 25, N>(u, b, out, sums),
        }
    }

    fn residual_k<T: LevelReal, const K: usize, const N: usize>(
        &self,
        u: &[T],
        b: Option<&[T]>,
        out: &mut [T],
        sums: impl Fn(usize, &[T]) -> [f64; N] + Sync,
    ) -> [f64; N] {
        let off: &[isize; K] = self.cell_off.as_slice().try_into().expect("stencil size");
        let coefs = T::coefs(self);
        let all = &coefs.shared_terms;
        self.layout.sums_mut(out, |span, s, out| {
            let p0 = self.runs[span].2;
            if self.interior[span] && out.len() > SHORT_RUN {
                // The shared row, vectorised over the run.
                for (q, seg) in out.chunks_mut(CHUNK).enumerate() {
                    let (k, n) = (q * CHUNK, seg.len());
                    match b {
                        Some(b) => seg.copy_from_slice(&b[s + k..s + k + n]),
                        None => seg.fill(T::default()),
                    }
                    subtract_terms(seg, |o| &u[(s + k).wrapping_add_signed(o)..][..n], all);
                    if b.is_none() {
                        seg.iter_mut().for_each(|v| *v = -*v);
                    }
                }
            } else {
                for (j, o) in out.iter_mut().enumerate() {
                    let (c, r) = (s + j, self.row[p0 + j] as usize);
                    let a: &[T; K] = coefs.table[r * K..(r + 1) * K].try_into().expect("row");
                    let au = a[0] * u[c] + off_diagonal(a, |i| u[i], c, off);
                    *o = b.map_or(au, |b| b[c] - au);
                }
            }
            sums(s, out)
        })
    }

    /// `out = A·u` for `u` in `f32`, and `N` sums of `sums(first slot, span of out)` as
    /// [`Level::residual_sums`]. On a wide level ([`Level::wide`]) every row is summed in `f64`
    /// (where the product of two `f32` values is exact) and rounded once.
    fn product_sums<const N: usize>(
        &self,
        u: &[f32],
        out: &mut [f32],
        sums: impl Fn(usize, &[f32]) -> [f64; N] + Sync,
    ) -> [f64; N] {
        match (self.wide, self.k()) {
            (false, _) => self.residual_sums(u, None, out, sums),
            (true, 13) => self.wide_product_k::<13, N>(u, out, sums),
            (true, _) => self.wide_product_k::<25, N>(u, out, sums),
        }
    }

    fn wide_product_k<const K: usize, const N: usize>(
        &self,
        u: &[f32],
        out: &mut [f32],
        sums: impl Fn(usize, &[f32]) -> [f64; N] + Sync,
    ) -> [f64; N] {
        let off: &[isize; K] = self.cell_off.as_slice().try_into().expect("stencil size");
        let coefs = &self.c32;
        self.layout.sums_mut(out, |span, s, out| {
            let p0 = self.runs[span].2;
            if self.interior[span] && out.len() > SHORT_RUN {
                let mut acc = [0f64; CHUNK];
                for (q, seg) in out.chunks_mut(CHUNK).enumerate() {
                    let (k, n) = (q * CHUNK, seg.len());
                    let acc = &mut acc[..n];
                    acc.fill(0.0);
                    subtract_terms(acc, |o| &u[(s + k).wrapping_add_signed(o)..][..n], &coefs.shared_terms);
                    for (o, &v) in seg.iter_mut().zip(acc.iter()) {
                        #[allow(clippy::cast_possible_truncation)]
                        {
                            *o = -v as f32;
                        }
                    }
                }
            } else {
                // Short runs and rows of their own (dropout is mostly these): point by point, in
                // four partial sums.
                // The finest level keeps its rows in `f64`; coarse ones have them in `f32` only.
                let wide = &self.c64.table;
                for (j, o) in out.iter_mut().enumerate() {
                    let (c, r) = (s + j, self.row[p0 + j] as usize);
                    let a: [f64; K] = if wide.is_empty() {
                        std::array::from_fn(|t| f64::from(coefs.table[r * K + t]))
                    } else {
                        wide[r * K..(r + 1) * K].try_into().expect("row")
                    };
                    #[allow(clippy::cast_possible_truncation)]
                    {
                        *o = (a[0] * f64::from(u[c]) + off_diagonal(&a, |i| f64::from(u[i]), c, off)) as f32;
                    }
                }
            }
            sums(s, out)
        })
    }

    /// One lexicographic Gauss-Seidel sweep, forward or backward: the bands in parallel, then
    /// the seams between them (backward: the other way round, so the pair is symmetric).
    fn sweep<T: LevelReal>(&self, u: &mut [T], b: &[T], backward: bool) {
        self.sweep_with(u, b, backward, false);
    }

    /// A forward sweep of a `u` that is zero at every point: the same values as [`Level::sweep`],
    /// but in the bands, where every cell after a point is still zero when it is relaxed, the
    /// stretches of interior points sum only the terms of the rows above (4 of the 10 summed
    /// at once on level 0, 10 of 22 on coarse levels). The seams are relaxed after the band below
    /// them, so they sum every term.
    fn sweep_from_zero<T: LevelReal>(&self, u: &mut [T], b: &[T]) {
        self.sweep_with(u, b, false, true);
    }

    fn sweep_with<T: LevelReal>(&self, u: &mut [T], b: &[T], backward: bool, from_zero: bool) {
        let shared = Shared(u.as_mut_ptr(), u.len());
        banded(&self.bands, &self.seams, backward, |runs, seam| {
            let ahead_zero = from_zero && !seam;
            // SAFETY: the parts of one phase are at least three grid rows apart, beyond the
            // stencils' reach of two, so no task reads or writes a row another task writes.
            unsafe {
                match self.k() {
                    13 => self.sweep_runs::<T, 13>(shared, b, runs, backward, ahead_zero),
                    _ => self.sweep_runs::<T, 25>(shared, b, runs, backward, ahead_zero),
                }
            }
        });
    }

    /// Relaxes the points of `runs` (indices) in order (or in reverse). On a run of interior points
    /// every term but the two same-row neighbours already visited is known before the stretch is
    /// relaxed, so those terms are summed over it at once (vectorised) and only a two-term
    /// recurrence runs point by point. `ahead_zero` (forward only): every cell after a point in
    /// the sweep's order is zero, so those terms are left out of the stretches' sums.
    ///
    /// # Safety
    /// `u` is valid for the level's grid, and no other thread accesses the rows of `runs` or
    /// writes the rows within two of them.
    unsafe fn sweep_runs<T: LevelReal, const K: usize>(
        &self,
        u: Shared<T>,
        b: &[T],
        runs: Range<usize>,
        backward: bool,
        ahead_zero: bool,
    ) {
        debug_assert!(!(backward && ahead_zero), "a zero start is swept forward");
        let off: &[isize; K] = self.cell_off.as_slice().try_into().expect("stencil size");
        let coefs = T::coefs(self);
        let (near, far, terms) = &coefs.recurrence[usize::from(backward)];
        let terms = if ahead_zero { &coefs.behind } else { terms };
        let (near, far) = (*near, *far);
        let inv = coefs.inv_diag[0];
        let (a_near, a_far) = (coefs.table[near] * inv, coefs.table[far] * inv);
        // SAFETY (all accesses below): cells of this task's rows and their stencil neighbours,
        // inside the grid because points are at least two cells from its edge.
        let relax = |c: usize, p: usize| {
            let r = self.row[p] as usize;
            let a: &[T; K] = coefs.table[r * K..(r + 1) * K].try_into().expect("row");
            let v = (b[c] - off_diagonal(a, |i| unsafe { u.get(i) }, c, off)) * coefs.inv_diag[r];
            unsafe { u.set(c, v) };
        };
        let mut rest = [T::default(); CHUNK];
        // Relaxes the interior points `c0..c0 + len` in the sweep's direction.
        let mut interior = |c0: usize, len: usize| {
            // Local copies: the writes through `u` could otherwise alias the captured values, which
            // would then be reloaded for every point.
            let (u, inv, a_near, a_far) = (u, inv, a_near, a_far);
            let chunks = len.div_ceil(CHUNK);
            for q in 0..chunks {
                let k = if backward { chunks - 1 - q } else { q };
                let (a, z) = (c0 + k * CHUNK, (c0 + (k + 1) * CHUNK).min(c0 + len));
                let rest = &mut rest[..z - a];
                rest.copy_from_slice(&b[a..z]);
                subtract_terms(rest, |o| unsafe { u.slice(a.wrapping_add_signed(o), z - a) }, terms);
                if backward {
                    let (mut n1, mut n2) = unsafe { (u.get(z), u.get(z + 1)) };
                    for (c, r) in (a..z).zip(rest.iter()).rev() {
                        let v = (*r * inv - a_far * n2) - a_near * n1;
                        unsafe { u.set(c, v) };
                        (n2, n1) = (n1, v);
                    }
                } else {
                    let (mut n1, mut n2) = unsafe { (u.get(a - 1), u.get(a - 2)) };
                    for (c, r) in (a..z).zip(rest.iter()) {
                        let v = (*r * inv - a_far * n2) - a_near * n1;
                        unsafe { u.set(c, v) };
                        (n2, n1) = (n1, v);
                    }
                }
            }
        };
        let mut run = |k: usize| {
            let (s, e, p0) = self.runs[k];
            if self.interior[k] && e - s > SHORT_RUN {
                interior(s, e - s);
            } else if backward {
                for c in (s..e).rev() {
                    relax(c, p0 + c - s);
                }
            } else {
                for c in s..e {
                    relax(c, p0 + c - s);
                }
            }
        };
        if backward {
            runs.rev().for_each(&mut run);
        } else {
            runs.for_each(&mut run);
        }
    }
}

/// A coarse level whose points contain a square this many cells a side sums the products of its
/// K-cycle's corrections with the operator in `f64` ([`Level::product_sums`]). The corrections
/// are smooth there, and the rows of `A·c` cancel to a fraction of their terms that shrinks as
/// the square's side to the fourth power, so in `f32` their rounding swamps the sums `c·A·c` the
/// cycle weighs its two visits by. Measured on the frame (one hole all but two pixels wide):
/// at 4096², level 1 (2046 cells wide) in `f32` took 7 iterations to 1e-6 (the residual standing
/// at 1.4e-6 for one), in `f64` 5 as with the whole preconditioner in `f64`; at 2048², level 1
/// (1022 wide) and at 4096², level 2 (1022 wide) in `f32` lost nothing.
const WIDE: usize = 1024;

/// Points summed at once on a stretch of interior points.
const CHUNK: usize = 64;
/// Runs of interior points at most this long are relaxed (and their residuals summed) point by
/// point: summing their terms a stretch at a time costs more than it saves on short runs.
/// Measured at 1024² against no such limit: dropout solve 0.19 → 0.16 s, blob 0.066 → 0.053 s;
/// limits of 2 and 8 gained less.
const SHORT_RUN: usize = 4;

/// `acc[j] −= Σ a·u_o[j]` over the `(a, o)` terms, where `slice(o)` is `u` shifted by `o` cells,
/// four terms a pass (fewer loads and stores of `acc`), summed in the precision of `acc`.
fn subtract_terms<'a, A: Real, U: Real>(acc: &mut [A], slice: impl Fn(isize) -> &'a [U], terms: &[(U, isize)]) {
    // The identity when `A` is `U`.
    let wide = |v: U| A::of(v.get());
    let mut quads = terms.chunks_exact(4);
    for quad in &mut quads {
        let ((a1, o1), (a2, o2), (a3, o3), (a4, o4)) = (quad[0], quad[1], quad[2], quad[3]);
        let (a1, a2, a3, a4) = (wide(a1), wide(a2), wide(a3), wide(a4));
        let (u1, u2, u3, u4) = (slice(o1), slice(o2), slice(o3), slice(o4));
        for ((((x, p), q), r), t) in acc.iter_mut().zip(u1).zip(u2).zip(u3).zip(u4) {
            *x -= (a1 * wide(*p) + a2 * wide(*q)) + (a3 * wide(*r) + a4 * wide(*t));
        }
    }
    for &(a, o) in quads.remainder() {
        let a = wide(a);
        for (x, p) in acc.iter_mut().zip(slice(o)) {
            *x -= a * wide(*p);
        }
    }
}

/// `Σ a_t·u(c + off_t)` over the neighbours, in four partial sums.
#[inline]
fn off_diagonal<T: Real, const K: usize>(a: &[T; K], u: impl Fn(usize) -> T, c: usize, off: &[isize; K]) -> T {
    let at = |t: usize| a[t] * u(c.wrapping_add_signed(off[t]));
    let (mut s0, mut s1, mut s2, mut s3) = (T::default(), T::default(), T::default(), T::default());
    let mut t = 1;
    while t + 3 < K {
        s0 += at(t);
        s1 += at(t + 1);
        s2 += at(t + 2);
        s3 += at(t + 3);
        t += 4;
    }
    while t < K {
        s0 += at(t);
        t += 1;
    }
    (s0 + s1) + (s2 + s3)
}

/// [`bands`] of `runs`, row-major on a grid of `rows` rows of `stride` cells.
fn run_bands(runs: &[(usize, usize, usize)], stride: usize, rows: usize) -> (Vec<Range<usize>>, Vec<Range<usize>>) {
    bands(rows, |row| runs.partition_point(|&(s, _, _)| s < row * stride), runs.len())
}

/// The finest level of a `w × h` image's mask given by its row runs.
#[allow(clippy::cast_possible_truncation, clippy::cast_possible_wrap)]
fn finest(runs: &[Vec<(u32, u32)>], w: usize, h: usize) -> Level {
    let runs_xy = || {
        runs.iter()
            .enumerate()
            .flat_map(|(y, row)| row.iter().map(move |&(a, b)| (y as i64, i64::from(a), i64::from(b))))
    };
    let bbox = runs_xy().fold((i64::MAX, i64::MAX, i64::MIN, i64::MIN), |b, (y, a, e)| {
        (b.0.min(a), b.1.min(y), b.2.max(e - 1), b.3.max(y))
    });
    let mut level = Level::new(runs_xy(), bbox, &FINE);
    let (w, h) = (w as i64, h as i64);
    // One row per image-edge class (distances to the four edges, capped at 2); the interior
    // class is row 0.
    let clamp = |v: i64| v.min(2) as usize;
    let mut class_of = [u32::MAX; 81];
    class_of[80] = 0;
    let mut table: Vec<f64> = {
        let square = fine_row(2, 2, 5, 5);
        FINE.iter().map(|&o| square[square_index(o)]).collect()
    };
    let mut row = Vec::with_capacity(level.n);
    for (y, a, b) in runs_xy() {
        let yk = 9 * clamp(y) + 27 * clamp(h - 1 - y);
        for x in a..b {
            let key = clamp(x) + 3 * clamp(w - 1 - x) + yk;
            if class_of[key] == u32::MAX {
                class_of[key] = (table.len() / FINE.len()) as u32;
                let square = fine_row(x, y, w, h);
                table.extend(FINE.iter().map(|&o| square[square_index(o)]));
            }
            row.push(class_of[key]);
        }
    }
    level.set_rows(row, table);
    level
}

/// The level below `fine`: its points with both coordinates even, Galerkin rows `Pᵀ·A·P`.
fn coarsen(fine: &Level) -> Level {
    let mut runs_xy = Vec::new();
    for &(s, e, _) in &fine.runs {
        let ((a, y), b) = (fine.at(s), fine.at(e - 1).0 + 1);
        if y.rem_euclid(2) != 0 {
            continue;
        }
        let (ca, cb) = ((a + 1).div_euclid(2), (b - 1).div_euclid(2) + 1);
        if ca < cb {
            runs_xy.push((y.div_euclid(2), ca, cb));
        }
    }
    // Cover every parent of a fine point, not just the coarse points.
    let fb = fine.bbox;
    let bbox = (fb.0.div_euclid(2), fb.1.div_euclid(2), fb.2.div_euclid(2) + 1, fb.3.div_euclid(2) + 1);
    let mut coarse = Level::new(runs_xy, bbox, &COARSE);
    // Per fine cell: the interior points in a row to the right of it (itself included) within
    // its run, up to 255; zero off the points.
    let mut interior_right = vec![0u8; fine.index.len()];
    fine.layout.for_each_mut(&mut interior_right, |run, _, out| {
        let p0 = fine.runs[run].2;
        let mut count = 0u8;
        for (k, o) in out.iter_mut().enumerate().rev() {
            count = if fine.row[p0 + k] == 0 { count.saturating_add(1) } else { 0 };
            *o = count;
        }
    });
    // A coarse point whose 9×9 fine neighbourhood is all interior points has the shared row.
    // Which points share row 0, run by run: along a run the neighbourhoods' left ends are two
    // cells apart in each of the nine fine rows.
    let is_shared: Vec<bool> = coarse
        .runs
        .par_iter()
        .flat_map_iter(|&(s, e, _)| {
            let ((x, y), n) = (coarse.at(s), e - s);
            let mut shared = vec![true; n];
            #[allow(clippy::cast_possible_wrap)]
            for dy in -4..=4 {
                // The points whose neighbourhood starts left of the fine grid have none of their own.
                let on_grid = (0..n).find(|&j| fine.cell(2 * (x + j as i64) - 4, 2 * y + dy).is_some());
                let Some(j0) = on_grid else {
                    shared.fill(false);
                    break;
                };
                let first = fine.cell(2 * (x + j0 as i64) - 4, 2 * y + dy).expect("found");
                shared[..j0].fill(false);
                for (j, v) in shared[j0..].iter_mut().enumerate() {
                    *v &= interior_right[first + 2 * j] >= 9;
                }
            }
            shared
        })
        .collect();
    // The points with rows of their own (point index, cell), in order; their rows are computed
    // straight into the table, row 0 being the shared one.
    let own: Vec<(usize, usize)> = coarse
        .runs
        .iter()
        .flat_map(|&(s, e, p0)| (s..e).map(move |c| (p0 + c - s, c)))
        .filter(|&(p, _)| !is_shared[p])
        .collect();
    // The cell of a point with the shared row, whose row is row 0.
    let shared_cell = is_shared.iter().position(|&b| b).map(|p| {
        let run = coarse.runs.partition_point(|&(_, _, p0)| p0 <= p) - 1;
        let (s, _, p0) = coarse.runs[run];
        s + p - p0
    });
    let cells: Vec<usize> = own.iter().map(|&(_, c)| c).chain(shared_cell).collect();
    let plan = Galerkin::new(fine, &coarse, &cells);
    let k = COARSE.len();
    let mut table = vec![0f64; k * (own.len() + 1)];
    let (first, rest) = table.split_at_mut(k);
    let put = |out: &mut [f64], c: usize| {
        let square = plan.row(fine, &coarse, c);
        for (v, &o) in out.iter_mut().zip(&COARSE) {
            *v = square[square_index(o)];
        }
    };
    rest.par_chunks_mut(k).zip(&own).with_min_len(256).for_each(|(out, &(_, c))| put(out, c));
    match shared_cell {
        Some(c) => put(first, c),
        // No point uses row 0; a unit diagonal keeps its inverse finite.
        None => first[0] = 1.0,
    }
    let mut row = vec![0u32; coarse.n];
    for (r, &(p, _)) in own.iter().enumerate() {
        row[p] = crate::mask::index_u32(r + 1);
    }
    coarse.set_rows(row, table);
    coarse
}

/// How a coarse point's Galerkin row is summed, as cell offsets: the same for every point of a
/// level, because the weights and parents of a fine cell depend only on the parities of its
/// coordinates, and every coarse point sits on even ones.
struct Galerkin {
    /// Per child: its fine cell offset from the point's, its weight, and its terms.
    children: Vec<(isize, f64, Vec<GalerkinTerm>)>,
    /// Per fine cell: bit `j` set when the cell is a point and its `j`-th parent (in the order of
    /// [`GalerkinTerm::parents`]) is a coarse point, at the cells the planned rows read. A fine
    /// point is the neighbour of a child of some fifty coarse points; its parents are looked up
    /// once.
    parents: Vec<u8>,
}

/// One fine neighbour `g` of a child: the child's row slot, `g`'s fine cell offset from the
/// point's, its weight, and its coarse parents' places on the point's 5×5 square.
struct GalerkinTerm {
    slot: usize,
    cell: isize,
    weight: f64,
    /// Unused places repeat the first (their bits are never set).
    parents: [usize; 4],
}

impl Galerkin {
    /// The plan for the rows of the coarse points at `cells`.
    #[allow(clippy::cast_possible_wrap)]
    fn new(fine: &Level, coarse: &Level, cells: &[usize]) -> Self {
        let fs = fine.stride as isize;
        let mut children = Vec::with_capacity(9);
        for dy in -1..=1i64 {
            for dx in -1..=1i64 {
                let terms = fine
                    .offsets
                    .iter()
                    .enumerate()
                    .map(|(slot, &(ox, oy))| {
                        let (gx, gy) = (dx + ox, dy + oy);
                        let ((px, nx), (py, ny)) = (parents(gx), parents(gy));
                        let mut parents = [square_index((px[0], py[0])); 4];
                        let mut count = 0;
                        for &qy in &py[..ny] {
                            for &qx in &px[..nx] {
                                parents[count] = square_index((qx, qy));
                                count += 1;
                            }
                        }
                        let cell = gy as isize * fs + gx as isize;
                        GalerkinTerm { slot, cell, weight: weight(gx) * weight(gy), parents }
                    })
                    .collect();
                children.push((dy as isize * fs + dx as isize, weight(dx) * weight(dy), terms));
            }
        }
        let bits_at = |c: usize| {
            let (gx, gy) = fine.at(c);
            let ((px, nx), (py, ny)) = (parents(gx), parents(gy));
            let (mut bits, mut j) = (0u8, 0);
            for &qy in &py[..ny] {
                for &qx in &px[..nx] {
                    if coarse.point(qx, qy).is_some() {
                        bits |= 1 << j;
                    }
                    j += 1;
                }
            }
            bits
        };
        let mut bits = vec![0u8; fine.index.len()];
        // A row reads the cells within three of its point's fine cell (a child's neighbours). When
        // those squares cover fewer cells than the level has points (wide holes, whose shared
        // interior needs one row), only they are filled in.
        if cells.len() * 49 < fine.n {
            for &c in cells {
                let (x, y) = coarse.at(c);
                for dy in -3..=3 {
                    for dx in -3..=3 {
                        if let Some(cell) = fine.cell(2 * x + dx, 2 * y + dy)
                            && fine.index[cell] > 0
                        {
                            bits[cell] = bits_at(cell);
                        }
                    }
                }
            }
        } else {
            fine.layout.for_each_mut(&mut bits, |_, s, out| {
                for (k, o) in out.iter_mut().enumerate() {
                    *o = bits_at(s + k);
                }
            });
        }
        Self { children, parents: bits }
    }

    /// Row of `Pᵀ·A·P` at coarse cell `c` on the 5×5 square: `Σ w_f·a_fg·w_g` over the fine
    /// children `f` of the point, their neighbours `g` and the parents of `g` that are points.
    fn row(&self, fine: &Level, coarse: &Level, c: usize) -> [f64; 25] {
        let (x, y) = coarse.at(c);
        let centre = fine.cell(2 * x, 2 * y).expect("a coarse point is a fine point");
        let mut row = [0f64; 25];
        // Cells read are within two of a fine point or parents of one: inside both padded grids.
        for (off, wf, terms) in &self.children {
            let Some(f) = fine.index[centre.wrapping_add_signed(*off)].checked_sub(1) else { continue };
            let a = fine.row_of(f as usize);
            // Without branches: which neighbours are points and which parents are coarse points
            // follows the mask, which (random dropout) the branch predictor cannot.
            for t in terms {
                let bits = usize::from(self.parents[centre.wrapping_add_signed(t.cell)]);
                let v = wf * a[t.slot] * t.weight;
                let [k0, k1, k2, k3] = t.parents;
                row[k0] += v * f64::from(u8::from(bits & 1 != 0));
                row[k1] += v * f64::from(u8::from(bits & 2 != 0));
                row[k2] += v * f64::from(u8::from(bits & 4 != 0));
                row[k3] += v * f64::from(u8::from(bits & 8 != 0));
            }
        }
        row
    }
}

/// Row `(x, y)` of `Pᵀ·A·P` on the 5×5 square: `Σ w_f·a_fg·w_g` over the fine children `f` of
/// the point, their neighbours `g` and the parents of `g` (the definition, point by point; the
/// setup uses [`Galerkin`]).
#[cfg(test)]
fn galerkin_row(fine: &Level, coarse: &Level, x: i64, y: i64) -> [f64; 25] {
    let mut row = [0f64; 25];
    for dy in -1..=1 {
        for dx in -1..=1 {
            let (fx, fy) = (2 * x + dx, 2 * y + dy);
            let Some(f) = fine.point(fx, fy) else { continue };
            let wf = weight(fx) * weight(fy);
            for (&a, &(ox, oy)) in fine.row_of(f).iter().zip(fine.offsets) {
                let (gx, gy) = (fx + ox, fy + oy);
                if a == 0.0 || fine.point(gx, gy).is_none() {
                    continue;
                }
                let wg = wf * a * weight(gx) * weight(gy);
                let ((px, nx), (py, ny)) = (parents(gx), parents(gy));
                for &qy in &py[..ny] {
                    for &qx in &px[..nx] {
                        if coarse.point(qx, qy).is_some() {
                            row[square_index((qx - x, qy - y))] += wg;
                        }
                    }
                }
            }
        }
    }
    row
}

/// The levels of one mask, finest first.
#[derive(Debug)]
pub(super) struct Levels {
    levels: Vec<Level>,
    coarsest: Coarsest,
}

impl Levels {
    /// `shallow`: the finest level alone, preconditioned by sweeps ([`super::SHALLOW_SQUARE`]).
    pub(super) fn new(runs: &[Vec<(u32, u32)>], w: usize, h: usize, shallow: bool) -> Self {
        let mut levels = vec![finest(runs, w, h)];
        if shallow {
            return Self { levels, coarsest: Coarsest::Relax(SHALLOW_SWEEPS) };
        }
        while let Some(fine) = levels.last() {
            if fine.n <= COARSEST_MAX {
                break;
            }
            let coarse = coarsen(fine);
            #[allow(clippy::cast_precision_loss)]
            if coarse.n == 0 || coarse.n as f64 > MIN_REDUCTION * fine.n as f64 {
                break;
            }
            levels.push(coarse);
        }
        let coarsest = match levels.last() {
            Some(last) if last.n <= DENSE_MAX => dense_coarsest(last.n, |i, add| {
                let c = last.runs.partition_point(|&(_, _, p0)| p0 <= i) - 1;
                let (s, _, p0) = last.runs[c];
                let cell = s + i - p0;
                for (&a, &o) in last.row_of(i).iter().zip(&last.cell_off) {
                    let j = last.index[cell.wrapping_add_signed(o)];
                    if j > 0 {
                        add(j as usize - 1, a);
                    }
                }
            }),
            _ => Coarsest::Relax(COARSEST_SWEEPS),
        };
        // Coarse levels run in `f32` only; their `f64` rows served to build the next level.
        for level in levels.iter_mut().skip(1) {
            level.c64 = Coefs::default();
        }
        // Only the levels visited twice take products for the K-cycle; a level within a wide one
        // is wider than it, so the search stops at the first narrow one.
        for level in levels.iter_mut().skip(1).take(SECOND_VISITS) {
            let stride = level.stride;
            let runs = level.runs.iter().map(|&(s, e, _)| (s / stride, s % stride, s % stride + e - s));
            level.wide = has_square_in(runs, stride, WIDE);
            if !level.wide {
                break;
            }
        }
        Self { levels, coarsest }
    }

    pub(super) fn depth(&self) -> usize {
        self.levels.len()
    }

    /// Bytes held by the levels.
    pub(super) fn memory_bytes(&self) -> usize {
        use std::mem::size_of_val;
        self.levels
            .iter()
            .map(|l| {
                size_of_val(l.index.as_slice())
                    + size_of_val(l.runs.as_slice())
                    + size_of_val(l.row.as_slice())
                    + size_of_val(l.c64.table.as_slice())
                    + size_of_val(l.c32.table.as_slice())
            })
            .sum()
    }

    /// The finest level's vector length.
    pub(super) fn finest_len(&self) -> usize {
        self.levels[0].index.len()
    }

    /// Where the finest level's vectors hold its points, in point order.
    pub(super) fn finest_layout(&self) -> &Layout {
        &self.levels[0].layout
    }

    /// The first point of the finest level's run (layout span) `k`.
    pub(super) fn finest_run_first(&self, k: usize) -> usize {
        self.levels[0].runs[k].2
    }

    /// `out = b − B·u` on the finest level, and `out·out`.
    pub(super) fn residual(&self, u: &[f64], b: &[f64], out: &mut [f64]) -> f64 {
        self.levels[0].residual_sums(u, Some(b), out, |_, o| [dot_run(o, o)])[0]
    }

    /// `out = B·u` on the finest level for a `u` in `f32`, each row summed in `f64` and rounded
    /// once (the finest rows are small integers, exact in `f32`), and `u·out`.
    pub(super) fn apply_dot_narrow(&self, u: &[f32], out: &mut [f32]) -> f64 {
        self.levels[0].wide_product_k::<13, 1>(u, out, |s, o| [dot_run(&u[s..s + o.len()], o)])[0]
    }

    /// Whether the finest level is the only one.
    pub(super) fn is_shallow(&self) -> bool {
        self.levels.len() == 1
    }

    /// One Gauss-Seidel sweep of the finest level in `f64`.
    pub(super) fn sweep_finest(&self, u: &mut [f64], b: &[f64], backward: bool) {
        self.levels[0].sweep(u, b, backward);
    }

    pub(super) fn work(&self) -> Vec<LevelWork<f32>> {
        let last = self.levels.len() - 1;
        self.levels
            .iter()
            .enumerate()
            .map(|(l, level)| LevelWork::new(level.index.len(), if l == last { level.n } else { 0 }))
            .collect()
    }

    /// One K-cycle from level `l` with a zero start: `u ≈ A⁻¹·b`.
    pub(super) fn cycle(&self, l: usize, work: &mut [LevelWork<f32>]) {
        let level = &self.levels[l];
        let w = &mut work[l];
        level.layout.fill_zero(&mut w.u);
        if l + 1 == self.levels.len() {
            match &self.coarsest {
                Coarsest::Dense(ch) => {
                    for &(s, e, p0) in &level.runs {
                        for (d, &b) in w.dense[p0..p0 + e - s].iter_mut().zip(&w.b[s..e]) {
                            *d = f64::from(b);
                        }
                    }
                    ch.solve_in_place(&mut w.dense);
                    for &(s, e, p0) in &level.runs {
                        for (u, &d) in w.u[s..e].iter_mut().zip(&w.dense[p0..p0 + e - s]) {
                            #[allow(clippy::cast_possible_truncation)]
                            {
                                *u = d as f32;
                            }
                        }
                    }
                }
                Coarsest::Relax(pairs) => {
                    for k in 0..*pairs {
                        if k == 0 {
                            level.sweep_from_zero(&mut w.u, &w.b);
                        } else {
                            level.sweep(&mut w.u, &w.b, false);
                        }
                        level.sweep(&mut w.u, &w.b, true);
                    }
                }
            }
            return;
        }
        let sweeps = if l == 0 { FINE_SWEEPS } else { COARSE_SWEEPS };
        level.sweep_from_zero(&mut w.u, &w.b);
        for _ in 1..sweeps {
            level.sweep(&mut w.u, &w.b, false);
        }
        level.residual(&w.u, Some(&w.b), &mut w.r);
        let (head, tail) = work.split_at_mut(l + 1);
        restrict(level, &head[l].r, &self.levels[l + 1], &mut tail[0].b);
        self.cycle(l + 1, work);
        if l + 2 < self.levels.len() && l < SECOND_VISITS {
            self.second_visit(l + 1, work);
        }
        let (head, tail) = work.split_at_mut(l + 1);
        let w = &mut head[l];
        interpolate(&self.levels[l + 1], &tail[0].u, level, &mut w.u);
        for _ in 0..sweeps {
            level.sweep(&mut w.u, &w.b, true);
        }
    }
}

impl Levels {
    /// Visits coarse level `l` again after [`Levels::cycle`] left `c₁` in its `u`, and combines
    /// the two corrections ([`krylov_weights`]). Overwrites the level's `b` and `r`.
    fn second_visit(&self, l: usize, work: &mut [LevelWork<f32>]) {
        let level = &self.levels[l];
        let w = &mut work[l];
        std::mem::swap(&mut w.u, &mut w.keep);
        let (c1, b) = (&w.keep, &w.b);
        let [rho1, alpha1] = level.product_sums(c1, &mut w.r, |s, ac1| {
            let e = s + ac1.len();
            [dot_run(&c1[s..e], ac1), dot_run(&c1[s..e], &b[s..e])]
        });
        if !(rho1 > 0.0 && rho1.is_finite()) {
            std::mem::swap(&mut w.u, &mut w.keep);
            return;
        }
        #[allow(clippy::cast_possible_truncation)]
        level.layout.add_scaled(-(alpha1 / rho1) as f32, &w.r, &mut w.b);
        self.cycle(l, work);
        let w = &mut work[l];
        let (c1, c2, b) = (&w.keep, &w.u, &w.b);
        let [gamma, beta, alpha2] = level.product_sums(c2, &mut w.r, |s, ac2| {
            let e = s + ac2.len();
            [dot_run(&c1[s..e], ac2), dot_run(&c2[s..e], ac2), dot_run(&c2[s..e], &b[s..e])]
        });
        let (k1, k2) = krylov_weights(rho1, alpha1, gamma, beta, alpha2);
        #[allow(clippy::cast_possible_truncation)]
        let (k1, k2) = (k1 as f32, k2 as f32);
        let c1 = &w.keep;
        level.layout.for_each_mut(&mut w.u, |_, s, u| {
            for (u, c1) in u.iter_mut().zip(&c1[s..]) {
                *u = k1 * *c1 + k2 * *u;
            }
        });
    }
}

/// `b = Pᵀ·r`: every coarse point gathers its fine children's residuals.
fn restrict(fine: &Level, r: &[f32], coarse: &Level, b: &mut [f32]) {
    #[allow(clippy::cast_possible_wrap)]
    let stride = fine.stride as isize;
    coarse.layout.for_each_mut(b, |_, s, out| {
        let (x, y) = coarse.at(s);
        let centre = fine.cell(2 * x, 2 * y).expect("a coarse point is a fine point");
        for (j, o) in out.iter_mut().enumerate() {
            let c = centre + 2 * j;
            let at = |d: isize| r[c.wrapping_add_signed(d)];
            let edges = at(-1) + at(1) + at(-stride) + at(stride);
            let corners = at(-stride - 1) + at(-stride + 1) + at(stride - 1) + at(stride + 1);
            *o = r[c] + 0.5 * edges + 0.25 * corners;
        }
    });
}

/// `u += P·e`: every fine point adds its parents' corrections, bilinearly.
fn interpolate(coarse: &Level, e: &[f32], fine: &Level, u: &mut [f32]) {
    let stride = coarse.stride;
    fine.layout.for_each_mut(u, |_, s, out| {
        let (x0, y) = fine.at(s);
        let odd_y = y.rem_euclid(2) == 1;
        let wy = if odd_y { 0.5f32 } else { 1.0 };
        for (j, o) in out.iter_mut().enumerate() {
            #[allow(clippy::cast_possible_wrap)]
            let x = x0 + j as i64;
            let c = coarse.cell(x.div_euclid(2), y.div_euclid(2)).expect("parents lie on the coarse grid");
            let odd_x = x.rem_euclid(2) == 1;
            let mut v = e[c];
            if odd_x {
                v += e[c + 1];
            }
            if odd_y {
                v += e[c + stride];
                if odd_x {
                    v += e[c + stride + 1];
                }
            }
            *o += if odd_x { 0.5 * wy } else { wy } * v;
        }
    });
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn galerkin_rows_by_offsets_match_the_definition() {
        // A wide hole with a ragged rim, a hole touching the image edge and scattered pixels:
        // points of every kind on the first two coarse levels.
        let (w, h) = (96usize, 80usize);
        let mut runs = vec![Vec::new(); h];
        for (y, row) in runs.iter_mut().enumerate() {
            let mut x = 0;
            while x < w {
                let inside = |x: usize| {
                    let (dx, dy) = (x as f64 - 40.0, y as f64 - 36.0);
                    dx * dx + dy * dy < 28.0f64.powi(2) + 40.0 * ((x * 7 + y * 3) % 5) as f64
                        || (x < 9 && y > 50)
                        || (x * 31 + y * 17).is_multiple_of(13)
                };
                if inside(x) {
                    let a = x;
                    while x < w && inside(x) {
                        x += 1;
                    }
                    row.push((a as u32, x as u32));
                } else {
                    x += 1;
                }
            }
        }
        // Built level by level: `Levels::new` drops the coarse levels' `f64` rows.
        let l0 = finest(&runs, w, h);
        let l1 = coarsen(&l0);
        let l2 = coarsen(&l1);
        let mut checked = 0;
        for (fine, coarse) in [(&l0, &l1), (&l1, &l2)] {
            let all: Vec<usize> = coarse.runs.iter().flat_map(|&(s, e, _)| s..e).collect();
            // The plan for every point, and one for a few (which looks up parents near those only).
            let few: Vec<usize> = all.iter().copied().step_by(97).collect();
            assert!(few.len() * 49 < fine.n && all.len() * 49 >= fine.n, "both ways of finding parents");
            for cells in [&all, &few] {
                let plan = Galerkin::new(fine, coarse, cells);
                for &c in cells {
                    let (x, y) = coarse.at(c);
                    let (fast, slow) = (plan.row(fine, coarse, c), galerkin_row(fine, coarse, x, y));
                    for k in 0..25 {
                        assert!((fast[k] - slow[k]).abs() <= 1e-12 * slow[k].abs().max(1.0), "({x}, {y}) entry {k}");
                    }
                    checked += 1;
                }
            }
        }
        assert!(checked > 500, "{checked} rows");
    }

    #[test]
    fn a_wide_level_sums_its_products_exactly_where_f32_sums_lose_them() {
        // A square hole 56 pixels a side; its first coarse level has interior runs.
        let (w, h) = (64usize, 64usize);
        let runs: Vec<Vec<(u32, u32)>> =
            (0..h).map(|y| if (4..60).contains(&y) { vec![(4, 60)] } else { Vec::new() }).collect();
        let mut level = coarsen(&finest(&runs, w, h));
        // An affine function with a large offset, exact in `f32`. `B` takes every affine function
        // to zero (Δ² of one is zero and the 13-point stencil is exact on it: textbook
        // mathematics), and bilinear interpolation reproduces it, so a Galerkin row whose reach
        // holds points only gives zero: exactly, when the exact products are summed exactly.
        let mut u = vec![0f32; level.index.len()];
        for &(s, e, _) in &level.runs {
            for (c, v) in u.iter_mut().enumerate().take(e).skip(s) {
                let (x, y) = level.at(c);
                #[allow(clippy::cast_precision_loss)]
                {
                    *v = (4_000_000 + 7 * x + 3 * y) as f32;
                }
            }
        }
        let interior: Vec<usize> = (0..level.runs.len())
            .filter(|&k| level.interior[k])
            .flat_map(|k| level.runs[k].0..level.runs[k].1)
            .collect();
        assert!(interior.len() > 100, "{} interior points", interior.len());
        let mut out = vec![0f32; u.len()];
        let mut worst = |level: &Level| {
            level.product_sums(&u, &mut out, |_, _| [0.0; 0]);
            interior.iter().map(|&c| out[c].abs()).fold(0f32, f32::max)
        };
        assert!(worst(&level) > 0.0, "summed in f32 the rows do not cancel exactly");
        level.wide = true;
        assert_eq!(worst(&level), 0.0, "summed in f64 they do");
    }

    #[test]
    fn a_sweep_from_zero_gives_the_full_sweeps_values() {
        // A square hole 208 pixels a side touching no edge: level 0 has four bands and level 1
        // two, so both the bands (which leave the later cells out) and the seams (which must not)
        // are swept.
        let (w, h) = (216usize, 216usize);
        let runs: Vec<Vec<(u32, u32)>> =
            (0..h).map(|y| if (4..212).contains(&y) { vec![(4, 212)] } else { Vec::new() }).collect();
        let l0 = finest(&runs, w, h);
        let l1 = coarsen(&l0);
        for (l, level) in [&l0, &l1].into_iter().enumerate() {
            assert!(!level.seams.is_empty(), "level {l} has seams");
            let mut b = vec![0f32; level.index.len()];
            for &(s, e, _) in &level.runs {
                for (c, v) in b.iter_mut().enumerate().take(e).skip(s) {
                    #[allow(clippy::cast_precision_loss)]
                    {
                        *v = ((c * 7919) % 1000) as f32 / 1000.0 - 0.5;
                    }
                }
            }
            let (mut full, mut zero) = (vec![0f32; b.len()], vec![0f32; b.len()]);
            level.sweep(&mut full, &b, false);
            level.sweep_from_zero(&mut zero, &b);
            let scale = full.iter().fold(0f32, |m, v| m.max(v.abs()));
            let worst = full.iter().zip(&zero).fold(0f32, |m, (a, z)| m.max((a - z).abs()));
            assert!(scale > 0.0 && worst <= 1e-5 * scale, "level {l}: differs by {worst} of {scale}");
        }
    }
}
