//! Structured multigrid for dense holes: the same discretisation, coarsening rule, interpolation
//! and Galerkin operators as the compact hierarchy ([`super::hierarchy`]), stored on rectangular
//! grids over the bounding box of the unknowns.
//!
//! The compact hierarchy keeps index lists per point, which lets cost follow the unknowns on
//! sparse masks (scratches, dead pixels) but costs 16–36 bytes of indices per point and pass. When
//! the unknowns fill a good share of their bounding box (large holes, a frame, random dropout) a
//! grid is cheaper by far:
//!
//! - level 0 is the `f64` iterate over the box (known pixels hold their values, so the 5-point
//!   stencil needs no right-hand side) and one bit per pixel saying which pixels are unknown;
//! - coarse levels hold `f32` corrections and right-hand sides on padded grids, and one stencil id
//!   per point: 0 for no point, 1 for the level's interior stencil (the Galerkin operator far
//!   from any known pixel, which is the same everywhere), or an index into a table of the stencils
//!   computed near known pixels and the image edge;
//! - interpolation and restriction weights are computed on the fly: bilinear where every parent is
//!   an interior point, operator-dependent (collapsed stencils) elsewhere;
//! - the level-0 residual is computed row by row inside the restriction and never stored, and all
//!   red-black sweeps of a smoothing run as one wavefront (the black cells of row `y − 1` right
//!   after the red cells of row `y`, the next sweep a row behind), so a smoothing reads and writes
//!   the iterate about once;
//! - each coarse level keeps its rows' runs of interior points, along which sweeps, residuals and
//!   interpolation use the one interior stencil and bilinear weights without per-point lookups.
//!
//! Gauss-Seidel within one colour is order-independent and partial sums are added in a fixed
//! order, so results do not depend on the number of threads.

#![allow(clippy::cast_possible_truncation, clippy::cast_possible_wrap, clippy::cast_sign_loss)]
// Grid coordinates are far below 2^31 (images are limited on load), so casts between `usize`
// and `isize` are exact, and `f64 → f32` is the storage precision of the coarse levels.

use rayon::prelude::*;

use super::dense::Cholesky;
use super::lanes::Rgb;
use super::{Cycle, FillError, FillParams, GroupResult, Levels, Progress, Start};

/// Stop coarsening once a level has at most this many points; it is then solved directly (a
/// dense factor of 64 points takes 16 KB, of 256 points 0.5 MB: an eighth of a 1024² frame).
const COARSEST_MAX: usize = 64;
/// Largest coarsest level that is factored densely; above it, the coarsest level is relaxed.
const DENSE_MAX: usize = 1500;
/// A coarse level must have at most this share of the finer level's points to be worth making.
const MIN_REDUCTION: f64 = 0.7;
/// Rows per parallel task for the passes over coarse levels and the norms.
const ROWS: usize = 16;
/// Coarse levels with at most this many points are worked on by one task: waking the other
/// threads for each pass over them would cost more than the pass.
const SMALL_LEVEL: usize = 1 << 13;
/// Stencil id of "no point here".
const NONE: u8 = 0;
/// Stencil id of the level's interior stencil.
const INTERIOR: u8 = 1;
/// Padded cells per segment of a row whose own stencils are numbered together (from 2, so the
/// ids fit a byte).
const SEGMENT: usize = 64;

/// The interpolation column of an interior point: bilinear.
const BILINEAR: [f32; 9] = [0.25, 0.5, 0.25, 0.5, 1.0, 0.5, 0.25, 0.5, 0.25];

/// The stencil slot of offset `(dx, dy)`: row-major over the 3×3 neighbourhood, centre 4.
const fn slot(dx: isize, dy: isize) -> usize {
    ((dy + 1) * 3 + (dx + 1)) as usize
}

/// A raw pointer shared by tasks that write disjoint elements (see each use).
#[derive(Clone, Copy)]
struct Shared<T>(*mut T);
// SAFETY: every use writes elements no other task reads or writes during that pass.
unsafe impl<T> Send for Shared<T> {}
// SAFETY: as above.
unsafe impl<T> Sync for Shared<T> {}
impl<T> Shared<T> {
    fn get(self) -> *mut T {
        self.0
    }
}

/// Which pixels of the box are unknowns: one bit per pixel, rows padded to whole words.
#[derive(Debug)]
pub(crate) struct Members {
    w: usize,
    h: usize,
    words: usize,
    bits: Vec<u64>,
}

impl Members {
    fn new(w: usize, h: usize) -> Self {
        let words = w.div_ceil(64);
        Self { w, h, words, bits: vec![0; words * h] }
    }

    fn get(&self, x: isize, y: isize) -> bool {
        if x < 0 || y < 0 || x >= self.w as isize || y >= self.h as isize {
            return false;
        }
        let (x, y) = (x as usize, y as usize);
        self.bits[y * self.words + x / 64] >> (x % 64) & 1 == 1
    }

    /// Like [`Members::for_row`], but in spans: `span(first, end)` stands for the cells `first,
    /// first + step, … < end` (step 2 for one colour, else 1). A word whose cells are all members
    /// is one span; other members come one by one as `span(x, x + 1)`.
    #[inline]
    fn for_row_spans(&self, y: usize, colour: Option<usize>, mut span: impl FnMut(usize, usize)) {
        let pattern = colour_pattern(y, colour);
        for (wi, &word) in self.bits[y * self.words..(y + 1) * self.words].iter().enumerate() {
            let mut m = word & pattern;
            if m == pattern {
                span(wi * 64 + pattern.trailing_zeros() as usize, wi * 64 + 64);
                continue;
            }
            while m != 0 {
                let x = wi * 64 + m.trailing_zeros() as usize;
                span(x, x + 1);
                m &= m - 1;
            }
        }
    }

    /// Calls `f(x)` for every member `x` of row `y` with `a <= x < b`.
    #[inline]
    fn for_range(&self, y: usize, a: usize, b: usize, mut f: impl FnMut(usize)) {
        if a >= b {
            return;
        }
        let (first, last) = (a / 64, (b - 1) / 64);
        let row = &self.bits[y * self.words + first..=y * self.words + last];
        for (k, &word) in row.iter().enumerate() {
            let wi = first + k;
            let mut m = word;
            if wi == first {
                m &= !0 << (a % 64);
            }
            if wi == last && !b.is_multiple_of(64) {
                m &= (1 << (b % 64)) - 1;
            }
            while m != 0 {
                f(wi * 64 + m.trailing_zeros() as usize);
                m &= m - 1;
            }
        }
    }

    /// Calls `f(x)` for every member of row `y`, of one colour (`(x + y) % 2 == colour`) or all.
    #[inline]
    fn for_row(&self, y: usize, colour: Option<usize>, mut f: impl FnMut(usize)) {
        let pattern = colour_pattern(y, colour);
        for (wi, &word) in self.bits[y * self.words..(y + 1) * self.words].iter().enumerate() {
            let mut m = word & pattern;
            while m != 0 {
                f(wi * 64 + m.trailing_zeros() as usize);
                m &= m - 1;
            }
        }
    }
}

/// The bits of a row word that hold cells of `colour` (`(x + y) % 2 == colour`), or all cells.
/// Words start at even `x`, so the pattern is the same for every word of a row.
fn colour_pattern(y: usize, colour: Option<usize>) -> u64 {
    const EVEN: u64 = 0x5555_5555_5555_5555;
    match colour {
        Some(c) if (c + y).is_multiple_of(2) => EVEN,
        Some(_) => !EVEN,
        None => !0,
    }
}

/// One coarse level: a padded grid (one ring of absent points) of stencil ids.
#[derive(Debug)]
pub(crate) struct Coarse {
    w: usize,
    h: usize,
    /// Padded row length, `w + 2`.
    pw: usize,
    /// Stencil id per padded point: [`NONE`], [`INTERIOR`], or `2 + k` for the `k`-th stencil of
    /// its own in its row's [`SEGMENT`] of cells (see [`Coarse::stencil_index`]). Numbered per
    /// segment so a byte suffices: at `u32` the ids were a quarter of the image's f32 size, the
    /// largest item of a wide hole's hierarchy.
    id: Vec<u8>,
    /// Where each segment's own stencils start in `table`, less 2: `segs` per padded row.
    seg_base: Vec<u32>,
    segs: usize,
    /// Stencils (9 entries, row-major 3×3, centre = diagonal); `table[0]` is all zero and
    /// `table[1]` the interior stencil.
    table: Vec<[f32; 9]>,
    /// Interpolation columns by id: the weight of the point in the rows of the 3×3 fine points
    /// around it (bilinear for the interior id).
    pcol: Vec<[f32; 9]>,
    /// Number of points.
    n: usize,
    /// Runs of interior points along each row.
    runs: Runs,
    /// Runs where a row and the next one are both interior points.
    pair_runs: Runs,
}

/// Runs `[a, b)` of columns per row, in increasing order.
#[derive(Debug, Default)]
struct Runs {
    spans: Vec<(u32, u32)>,
    /// `spans[at[y]..at[y + 1]]` are row `y`'s runs.
    at: Vec<u32>,
}

impl Runs {
    /// The runs of `inside(x, y)` over `w` columns of `h` rows.
    fn of(w: usize, h: usize, inside: impl Fn(usize, usize) -> bool + Sync) -> Self {
        let rows: Vec<Vec<(u32, u32)>> = (0..h)
            .into_par_iter()
            .map(|y| {
                let mut spans = Vec::new();
                let mut start = None;
                for x in 0..=w {
                    let here = x < w && inside(x, y);
                    match (here, start) {
                        (true, None) => start = Some(x),
                        (false, Some(a)) => {
                            spans.push((a as u32, x as u32));
                            start = None;
                        }
                        _ => {}
                    }
                }
                spans
            })
            .collect();
        let mut r = Self { spans: Vec::new(), at: vec![0] };
        for row in rows {
            r.spans.extend(row);
            r.at.push(r.spans.len() as u32);
        }
        r
    }

    fn row(&self, y: usize) -> &[(u32, u32)] {
        &self.spans[self.at[y] as usize..self.at[y + 1] as usize]
    }

    fn bytes(&self) -> usize {
        self.spans.len() * 8 + self.at.len() * 4
    }
}

/// Calls `f(a, b, true)` for each run and `f(a, b, false)` for the columns `a..b` of `0..w`
/// between them, left to right.
#[inline]
fn split_row(runs: &[(u32, u32)], w: usize, mut f: impl FnMut(usize, usize, bool)) {
    let mut next = 0;
    for &(a, b) in runs {
        let (a, b) = (a as usize, b as usize);
        if a > next {
            f(next, a, false);
        }
        f(a, b, true);
        next = b;
    }
    if next < w {
        f(next, w, false);
    }
}

impl Coarse {
    fn at(&self, x: usize, y: usize) -> usize {
        (y + 1) * self.pw + x + 1
    }

    fn padded_len(&self) -> usize {
        self.pw * (self.h + 2)
    }

    /// The index into `table` and `pcol` of padded cell `i`, in padded row `i / pw`.
    #[inline]
    fn stencil_index(&self, i: usize) -> usize {
        self.stencil_index_in_row(i, i / self.pw)
    }

    /// [`Coarse::stencil_index`] of padded cell `i` of padded row `row`.
    #[inline]
    fn stencil_index_in_row(&self, i: usize, row: usize) -> usize {
        debug_assert_eq!(i / self.pw, row);
        let id = self.id[i];
        if id <= INTERIOR {
            usize::from(id)
        } else {
            self.seg_base[row * self.segs + (i - row * self.pw) / SEGMENT] as usize + usize::from(id)
        }
    }

    /// Offsets of the 9 stencil slots in the padded grid.
    fn offsets(&self) -> [isize; 9] {
        let pw = self.pw as isize;
        [-pw - 1, -pw, -pw + 1, -1, 0, 1, pw - 1, pw, pw + 1]
    }
}

/// How the coarsest level is solved.
#[derive(Debug)]
enum Coarsest {
    /// Cholesky factor of the level's operator over its points (padded indices).
    Dense { points: Vec<usize>, chol: Cholesky },
    /// Symmetric Gauss-Seidel sweeps.
    Relax(usize),
}

/// The structured hierarchy of one part of a mask.
#[derive(Debug)]
pub(crate) struct Grid {
    /// The box in image coordinates (it includes a one-pixel margin where the image allows).
    x0: usize,
    y0: usize,
    w: usize,
    h: usize,
    img_w: usize,
    img_h: usize,
    members: Members,
    n: usize,
    levels: Vec<Coarse>,
    coarsest: Coarsest,
}

/// The view of a fine level that building the next coarser one needs.
trait FineView: Sync {
    fn dims(&self) -> (usize, usize);
    /// Whether a point exists at `(x, y)` (false outside the grid).
    fn active(&self, x: isize, y: isize) -> bool;
    /// The operator row of the point at `(x, y)`; couplings to absent points are zero.
    fn stencil(&self, x: usize, y: usize) -> [f64; 9];
    /// Row `y`'s points that have the level's interior stencil (and so every neighbour present),
    /// as bits: bit `x % 64` of word `x / 64`, into `out` (zero past the row's end).
    fn interior_bits(&self, y: usize, out: &mut [u64]);
}

/// Sets bits `a..b` of the bit row `row`.
fn set_bits(row: &mut [u64], a: usize, b: usize) {
    let mut x = a;
    while x < b {
        let (word, bit) = (x / 64, x % 64);
        let end = (b - word * 64).min(64);
        let ones = if end - bit == 64 { !0 } else { ((1u64 << (end - bit)) - 1) << bit };
        row[word] |= ones;
        x = word * 64 + end;
    }
}

/// Bit `x` of the returned word is bit `64·i + x + d` of the bit row `b` (zero beyond its ends),
/// for `|d| < 64`.
#[inline]
fn shifted(b: &[u64], i: usize, d: isize) -> u64 {
    let at = |k: usize| b.get(k).copied().unwrap_or(0);
    match d {
        0 => b[i],
        d if d > 0 => (b[i] >> d) | if i + 1 < b.len() { at(i + 1) << (64 - d) } else { 0 },
        d => (b[i] << -d) | if i > 0 { at(i - 1) >> (64 + d) } else { 0 },
    }
}

/// Level 0 seen through its membership bits and the image edge.
struct Level0<'a> {
    g: &'a Grid,
}

impl FineView for Level0<'_> {
    fn dims(&self) -> (usize, usize) {
        (self.g.w, self.g.h)
    }
    fn active(&self, x: isize, y: isize) -> bool {
        self.g.members.get(x, y)
    }
    fn stencil(&self, x: usize, y: usize) -> [f64; 9] {
        let g = self.g;
        let (xi, yi) = (x as isize, y as isize);
        let (gx, gy) = (g.x0 + x, g.y0 + y);
        let mut s = [0f64; 9];
        let mut deg = 0.0;
        for (dx, dy, inside) in [(-1, 0, gx > 0), (1, 0, gx + 1 < g.img_w), (0, -1, gy > 0), (0, 1, gy + 1 < g.img_h)] {
            if inside {
                deg += 1.0;
                if g.members.get(xi + dx, yi + dy) {
                    s[slot(dx, dy)] = -1.0;
                }
            }
        }
        s[4] = deg;
        s
    }
    fn interior_bits(&self, y: usize, out: &mut [u64]) {
        // A member whose four neighbours are members (bits past the row's end are zero, and rows
        // outside the box have no members).
        let m = &self.g.members;
        let row = |y: usize| &m.bits[y * m.words..(y + 1) * m.words];
        let here = row(y);
        for (i, o) in out.iter_mut().enumerate() {
            let up = if y > 0 { row(y - 1)[i] } else { 0 };
            let down = if y + 1 < m.h { row(y + 1)[i] } else { 0 };
            *o = here[i] & shifted(here, i, -1) & shifted(here, i, 1) & up & down;
        }
    }
}

impl FineView for Coarse {
    fn dims(&self) -> (usize, usize) {
        (self.w, self.h)
    }
    fn active(&self, x: isize, y: isize) -> bool {
        x >= 0
            && y >= 0
            && (x as usize) < self.w
            && (y as usize) < self.h
            && self.id[self.at(x as usize, y as usize)] != NONE
    }
    fn stencil(&self, x: usize, y: usize) -> [f64; 9] {
        self.table[self.stencil_index_in_row(self.at(x, y), y + 1)].map(f64::from)
    }
    fn interior_bits(&self, y: usize, out: &mut [u64]) {
        out.fill(0);
        for x in 0..self.w {
            if self.id[self.at(x, y)] == INTERIOR {
                out[x / 64] |= 1 << (x % 64);
            }
        }
    }
}

/// An unbounded level where every point has the same stencil.
struct Uniform([f64; 9]);

impl FineView for Uniform {
    fn dims(&self) -> (usize, usize) {
        (64, 64)
    }
    fn active(&self, x: isize, y: isize) -> bool {
        (0..64).contains(&x) && (0..64).contains(&y)
    }
    fn stencil(&self, _: usize, _: usize) -> [f64; 9] {
        self.0
    }
    fn interior_bits(&self, _: usize, out: &mut [u64]) {
        out.fill(!0);
    }
}

/// One row of the interpolation: up to four coarse parents (coarse coordinates) and weights.
#[derive(Clone, Copy, Default)]
struct PRow {
    n: usize,
    at: [(isize, isize); 4],
    w: [f64; 4],
}

impl PRow {
    fn push(&mut self, at: (isize, isize), w: f64) {
        self.at[self.n] = at;
        self.w[self.n] = if w.is_finite() { w.clamp(0.0, 1.0) } else { 0.0 };
        self.n += 1;
    }

    fn weight_of(&self, c: (isize, isize)) -> f64 {
        (0..self.n).find(|&k| self.at[k] == c).map_or(0.0, |k| self.w[k])
    }
}

/// The interpolation row of the fine point `(x, y)`, which must be present: operator-dependent
/// weights exactly as in [`super::hierarchy`] (see `coarsen` there).
fn prow<F: FineView>(f: &F, x: usize, y: usize) -> PRow {
    let (xi, yi) = (x as isize, y as isize);
    let mut r = PRow::default();
    match (x % 2, y % 2) {
        (0, 0) => r.push((xi / 2, yi / 2), 1.0),
        (1, 0) => {
            let s = f.stencil(x, y);
            let den = s[4] + s[1] + s[7];
            if den > 0.0 {
                if f.active(xi - 1, yi) {
                    r.push(((xi - 1) / 2, yi / 2), -(s[0] + s[3] + s[6]) / den);
                }
                if f.active(xi + 1, yi) {
                    r.push(((xi + 1) / 2, yi / 2), -(s[2] + s[5] + s[8]) / den);
                }
            }
        }
        (0, 1) => {
            let s = f.stencil(x, y);
            let den = s[4] + s[3] + s[5];
            if den > 0.0 {
                if f.active(xi, yi - 1) {
                    r.push((xi / 2, (yi - 1) / 2), -(s[0] + s[1] + s[2]) / den);
                }
                if f.active(xi, yi + 1) {
                    r.push((xi / 2, (yi + 1) / 2), -(s[6] + s[7] + s[8]) / den);
                }
            }
        }
        _ => {
            let s = f.stencil(x, y);
            let d = s[4];
            let corners = [(xi - 1, yi - 1), (xi + 1, yi - 1), (xi - 1, yi + 1), (xi + 1, yi + 1)];
            let coarse = corners.map(|(cx, cy)| (cx / 2, cy / 2));
            let mut acc = [0f64; 4];
            for dy in -1isize..=1 {
                for dx in -1isize..=1 {
                    let a = s[slot(dx, dy)];
                    if a == 0.0 || (dx, dy) == (0, 0) {
                        continue;
                    }
                    let share = -a / d;
                    if dx != 0 && dy != 0 {
                        acc[usize::from(dx > 0) + 2 * usize::from(dy > 0)] += share;
                    } else if f.active(xi + dx, yi + dy) {
                        let pg = prow(f, (xi + dx) as usize, (yi + dy) as usize);
                        for k in 0..pg.n {
                            if let Some(c) = coarse.iter().position(|&c| c == pg.at[k]) {
                                acc[c] += share * pg.w[k];
                            }
                        }
                    }
                }
            }
            if d > 0.0 {
                for c in 0..4 {
                    if f.active(corners[c].0, corners[c].1) {
                        r.push(coarse[c], acc[c]);
                    }
                }
            }
        }
    }
    r
}

/// The Galerkin row `(Pᵀ·A·P)` of the coarse point `(cx, cy)` as a 3×3 stencil, and its
/// interpolation column: the weights of `(cx, cy)` in the rows of the fine points around
/// `(2cx, 2cy)`, in the same 3×3 layout.
fn galerkin<F: FineView>(f: &F, cx: usize, cy: usize) -> ([f64; 9], [f64; 9]) {
    let (wf, hf) = f.dims();
    let (fx0, fy0) = (2 * cx as isize, 2 * cy as isize);
    // Interpolation rows of the fine points within two of (2cx, 2cy).
    let mut rows = [[None::<PRow>; 5]; 5];
    for (oy, row) in rows.iter_mut().enumerate() {
        for (ox, r) in row.iter_mut().enumerate() {
            let (x, y) = (fx0 + ox as isize - 2, fy0 + oy as isize - 2);
            if f.active(x, y) {
                *r = Some(prow(f, x as usize, y as usize));
            }
        }
    }
    let me = (cx as isize, cy as isize);
    let mut acc = [0f64; 9];
    let mut column = [0f64; 9];
    for fy in -1isize..=1 {
        for fx in -1isize..=1 {
            let Some(pr) = rows[(fy + 2) as usize][(fx + 2) as usize] else { continue };
            let pf = pr.weight_of(me);
            column[slot(fx, fy)] = pf;
            if pf == 0.0 {
                continue;
            }
            let (x, y) = (fx0 + fx, fy0 + fy);
            debug_assert!((x as usize) < wf && (y as usize) < hf);
            let s = f.stencil(x as usize, y as usize);
            for dy in -1isize..=1 {
                for dx in -1isize..=1 {
                    let a = s[slot(dx, dy)];
                    if a == 0.0 {
                        continue;
                    }
                    let Some(pg) = rows[(fy + dy + 2) as usize][(fx + dx + 2) as usize] else { continue };
                    for k in 0..pg.n {
                        let (ox, oy) = (pg.at[k].0 - me.0, pg.at[k].1 - me.1);
                        if ox.abs() <= 1 && oy.abs() <= 1 {
                            acc[slot(ox, oy)] += pf * a * pg.w[k];
                        }
                    }
                }
            }
        }
    }
    (acc, column)
}

/// The next coarser level of `f`, whose interior stencil is `interior`.
fn coarsen<F: FineView>(f: &F, interior: [f32; 9]) -> Coarse {
    let (wf, hf) = f.dims();
    let (wc, hc) = (wf.div_ceil(2), hf.div_ceil(2));
    let pw = wc + 2;
    // A coarse point has the interior stencil when every fine point within three of it (in both
    // directions) is an interior point: first erode each fine row's interior bits horizontally ...
    let words = wf.div_ceil(64);
    let mut eroded = vec![0u64; words * hf];
    eroded.par_chunks_mut(words).enumerate().for_each(|(y, out)| {
        let mut inner = vec![0u64; words];
        f.interior_bits(y, &mut inner);
        for (i, o) in out.iter_mut().enumerate() {
            *o = (-3..=3).fold(!0, |acc, d| acc & shifted(&inner, i, d));
        }
    });
    // ... then check the seven rows around each coarse row. Ids go straight into the padded
    // grid; each segment's own stencils are numbered from 2 (a stencil equal to the previous one
    // of its segment, as along a straight edge, shares its id).
    type Own = (Vec<([f32; 9], [f32; 9])>, Vec<u32>);
    let segs = pw.div_ceil(SEGMENT);
    let mut id = vec![NONE; pw * (hc + 2)];
    let rows: Vec<(Own, usize)> = id[pw..(hc + 1) * pw]
        .par_chunks_mut(pw)
        .enumerate()
        .map(|(cy, ids)| {
            // The row's own stencils, and where each segment's begin among them.
            let (mut own, mut starts) = (Vec::new(), vec![0u32; segs]);
            let mut n = 0;
            let fy = 2 * cy;
            let column: Vec<u64> = if fy >= 3 && fy + 3 < hf {
                (0..words).map(|i| (fy - 3..=fy + 3).fold(!0, |acc, y| acc & eroded[y * words + i])).collect()
            } else {
                vec![0; words]
            };
            for (cx, id) in ids[1..=wc].iter_mut().enumerate() {
                let seg = (cx + 1) / SEGMENT;
                if (cx + 1) % SEGMENT == 0 || cx == 0 {
                    starts[seg] = own.len() as u32;
                }
                if !f.active(2 * cx as isize, fy as isize) {
                    continue;
                }
                n += 1;
                if column[2 * cx / 64] >> (2 * cx % 64) & 1 == 1 {
                    *id = INTERIOR;
                    continue;
                }
                let (s, p) = galerkin(f, cx, cy);
                let entry = (s.map(|v| v as f32), p.map(|v| v as f32));
                if own.len() == starts[seg] as usize || own.last() != Some(&entry) {
                    own.push(entry);
                }
                // At most SEGMENT stencils a segment: the id stays below 2 + SEGMENT.
                *id = INTERIOR + (own.len() - starts[seg] as usize) as u8;
            }
            ((own, starts), n)
        })
        .collect();
    drop(eroded);
    let mut table = vec![[0f32; 9], interior];
    let mut pcol = vec![[0f32; 9], BILINEAR];
    let mut seg_base = vec![0u32; segs * (hc + 2)];
    let mut n = 0;
    for (cy, ((own, starts), count)) in rows.into_iter().enumerate() {
        // Id 2 is a segment's first stencil.
        for (base, start) in seg_base[(cy + 1) * segs..(cy + 2) * segs].iter_mut().zip(starts) {
            *base = u32::try_from(table.len() - 2).expect("stencils fit in u32") + start;
        }
        n += count;
        for (st, col) in own {
            table.push(st);
            pcol.push(col);
        }
    }
    let mut c = Coarse {
        w: wc,
        h: hc,
        pw,
        id,
        seg_base,
        segs,
        table,
        pcol,
        n,
        runs: Runs::default(),
        pair_runs: Runs::default(),
    };
    c.runs = Runs::of(wc, hc, |x, y| c.id[c.at(x, y)] == INTERIOR);
    c.pair_runs =
        Runs::of(wc, hc, |x, y| y + 1 < hc && c.id[c.at(x, y)] == INTERIOR && c.id[c.at(x, y + 1)] == INTERIOR);
    c
}

impl Grid {
    /// Builds the hierarchy over the box `(x0, y0, w, h)` of a `img_w × img_h` image, whose
    /// unknowns are given row by row: `runs(y, f)` calls `f(a, b)` for each run of unknowns
    /// `a..b` of image row `y` (image coordinates). The box must contain
    /// a one-pixel margin around the unknowns wherever the image allows. Returns `None` if the
    /// unknowns do not coarsen (the compact hierarchy then takes them).
    pub(crate) fn build(
        (x0, y0, w, h): (usize, usize, usize, usize),
        (img_w, img_h): (usize, usize),
        runs: impl Fn(usize, &mut dyn FnMut(usize, usize)) + Sync,
    ) -> Option<Self> {
        let mut members = Members::new(w, h);
        let words = members.words;
        let counts: Vec<usize> = members
            .bits
            .par_chunks_mut(words)
            .enumerate()
            .map(|(y, row)| {
                let mut count = 0;
                runs(y0 + y, &mut |a, b| {
                    debug_assert!(a >= x0 && b <= x0 + w);
                    set_bits(row, a - x0, b - x0);
                    count += b - a;
                });
                count
            })
            .collect();
        let n = counts.iter().sum();
        let mut g = Self { x0, y0, w, h, img_w, img_h, members, n, levels: Vec::new(), coarsest: Coarsest::Relax(8) };
        let mut interior = [0.0, -1.0, 0.0, -1.0, 4.0, -1.0, 0.0, -1.0, 0.0];
        let mut fine_n = n;
        loop {
            let next_interior = galerkin(&Uniform(interior), 16, 16).0;
            let next_f32 = next_interior.map(|v| v as f32);
            let coarse = match g.levels.last() {
                None => coarsen(&Level0 { g: &g }, next_f32),
                Some(last) => coarsen(last, next_f32),
            };
            if coarse.n == 0 || coarse.n as f64 > MIN_REDUCTION * fine_n as f64 {
                break;
            }
            interior = next_f32.map(f64::from);
            fine_n = coarse.n;
            let (cw, ch) = (coarse.w, coarse.h);
            g.levels.push(coarse);
            if fine_n <= COARSEST_MAX || (cw <= 2 && ch <= 2) {
                break;
            }
        }
        let last = g.levels.last()?;
        g.coarsest =
            if last.n <= DENSE_MAX { dense_coarsest(last).unwrap_or(Coarsest::Relax(8)) } else { Coarsest::Relax(8) };
        Some(g)
    }

    /// Number of unknowns.
    pub(crate) fn unknowns(&self) -> usize {
        self.n
    }

    /// Multigrid levels, the finest included.
    pub(crate) fn depth(&self) -> usize {
        self.levels.len() + 1
    }

    /// Points per level, finest first.
    pub(crate) fn level_sizes(&self) -> Vec<usize> {
        std::iter::once(self.n).chain(self.levels.iter().map(|l| l.n)).collect()
    }

    /// Bytes held by the hierarchy (not counting the per-image workspace).
    pub(crate) fn memory_bytes(&self) -> usize {
        let mut total = self.members.bits.len() * 8;
        for l in &self.levels {
            total += l.id.len() + l.seg_base.len() * 4 + l.table.len() * 72 + l.runs.bytes() + l.pair_runs.bytes();
        }
        if let Coarsest::Dense { points, .. } = &self.coarsest {
            total += points.len() * (8 + (points.len() + 1) * 4);
        }
        total
    }
}

fn dense_coarsest(level: &Coarse) -> Option<Coarsest> {
    let mut points = Vec::with_capacity(level.n);
    let mut index = vec![usize::MAX; level.padded_len()];
    for y in 0..level.h {
        for x in 0..level.w {
            let i = level.at(x, y);
            if level.id[i] != NONE {
                index[i] = points.len();
                points.push(i);
            }
        }
    }
    let n = points.len();
    let off = level.offsets();
    let mut a = vec![0f64; n * n];
    for (r, &i) in points.iter().enumerate() {
        let s = &level.table[level.stencil_index(i)];
        for k in 0..9 {
            let j = (i as isize + off[k]) as usize;
            if index[j] != usize::MAX {
                a[r * n + index[j]] += f64::from(s[k]);
            }
        }
    }
    for i in 0..n {
        for j in 0..i {
            let s = 0.5 * (a[i * n + j] + a[j * n + i]);
            a[i * n + j] = s;
            a[j * n + i] = s;
        }
    }
    Cholesky::factor(n, a).map(|chol| Coarsest::Dense { points, chol })
}

/// Per-image vectors for `C` interleaved channels.
#[derive(Clone)]
struct Work<const C: usize> {
    /// Level 0: the iterate over the box (known pixels hold their values).
    u: Vec<f64>,
    /// Coarse levels: corrections and right-hand sides, padded.
    e: Vec<Vec<f32>>,
    rhs: Vec<Vec<f32>>,
    coarse_x: Vec<f64>,
    /// Per level: three fine residual rows for each task of [`Cycler::descend`].
    scratch: Vec<Vec<f64>>,
    /// Level 0's squared residual norm per row.
    row_sq: Vec<[f64; C]>,
    /// One padded coarse row per band of the coarse sweeps.
    row_buf: Vec<f32>,
}

struct Cycler<'a, const C: usize> {
    g: &'a Grid,
    params: &'a FillParams,
    work: Work<C>,
    /// Rows per band of the level-0 wavefront sweep.
    band: usize,
    /// Threads of the pool the cycles run in.
    threads: usize,
    /// The colour of the level-0 cells relaxed last, if nothing changed level 0 since: those
    /// cells are the Gauss-Seidel update of the others, so their residuals are zero.
    relaxed_last: Option<usize>,
    /// Level 0's squared residual norm, when the last smoothing summed it and nothing changed
    /// level 0 since.
    norm: Option<[f64; C]>,
    /// Vector kernels for three channels, where the processor has them.
    rgb: Option<Rgb>,
}

// ---------------------------------------------------------------------------------------------
// Level 0 kernels.

impl<const C: usize> Cycler<'_, C> {
    /// Updates the unknowns of one colour in row `y` of level 0.
    ///
    /// # Safety
    /// `u` points at the level-0 iterate; no other task writes row `y`'s cells of this colour or
    /// reads them, and no task writes the other colour's cells in rows `y − 1..=y + 1`.
    unsafe fn relax_row0(&self, u: Shared<f64>, y: usize, colour: usize) {
        let g = self.g;
        let (w, h) = (g.w, g.h);
        let u = u.get();
        let inner_row = y > 0 && y + 1 < h;
        let update = |x: usize| {
            let i = y * w + x;
            if inner_row && x > 0 && x + 1 < w {
                for c in 0..C {
                    // SAFETY: (x, y) is strictly inside the box, so all four neighbours are in it.
                    unsafe {
                        let s = *u.add((i - 1) * C + c)
                            + *u.add((i + 1) * C + c)
                            + *u.add((i - w) * C + c)
                            + *u.add((i + w) * C + c);
                        *u.add(i * C + c) = 0.25 * s;
                    }
                }
            } else {
                // On the box edge, which for an unknown is the image edge: natural boundary.
                debug_assert!(x > 0 || g.x0 == 0);
                debug_assert!(y > 0 || g.y0 == 0);
                let nb = [
                    (x > 0).then(|| i - 1),
                    (x + 1 < w).then(|| i + 1),
                    (y > 0).then(|| i - w),
                    (y + 1 < h).then(|| i + w),
                ];
                let mut s = [0f64; C];
                let mut deg = 0.0;
                for j in nb.into_iter().flatten() {
                    deg += 1.0;
                    for (c, sc) in s.iter_mut().enumerate() {
                        // SAFETY: j is inside the box.
                        *sc += unsafe { *u.add(j * C + c) };
                    }
                }
                for (c, sc) in s.iter().enumerate() {
                    // SAFETY: i is this task's cell.
                    unsafe { *u.add(i * C + c) = sc / deg };
                }
            }
        };
        g.members.for_row_spans(y, Some(colour), |first, end| {
            if inner_row && first > 0 && end < w {
                // SAFETY: every cell of the run is strictly inside the box.
                unsafe {
                    let row = u.add(y * w * C);
                    let wc = w * C;
                    if C == 3
                        && let Some(rgb) = self.rgb
                    {
                        rgb.relax(row, wc, first, end);
                        return;
                    }
                    let mut x = first;
                    while x < end {
                        let p = row.add(x * C);
                        for c in 0..C {
                            let s = *p.sub(C).add(c) + *p.add(c + C) + *p.sub(wc).add(c) + *p.add(wc + c);
                            *p.add(c) = 0.25 * s;
                        }
                        x += 2;
                    }
                }
            } else {
                (first..end.min(w)).step_by(2).for_each(update);
            }
        });
    }

    /// `sweeps` red-black sweeps of level 0 (`reverse`: black first) as one wavefront, less the
    /// first half-sweep when `skip_first`. With `correct`, the wavefront first adds the
    /// interpolated correction of level 1 to each row (the work of [`Cycler::ascend`]); with
    /// `norm` and at least one half-sweep, it ends by summing each row's squared residual, kept
    /// for [`Cycler::residual_norm0`]. Each pass over level 0 costs a trip through memory once
    /// the iterate outgrows the cache (a 2048² RGB iterate is 100 MB), and the wavefront makes
    /// all of them one.
    fn sweeps0(&mut self, sweeps: usize, reverse: bool, skip_first: bool, correct: bool, norm: bool) {
        let skip = usize::from(skip_first);
        let relax = (2 * sweeps).saturating_sub(skip);
        let norm = norm && relax > 0;
        let first = usize::from(correct);
        let phases = first + relax + usize::from(norm);
        // The colour of the last half-sweep, whose residuals are zero.
        let last = (usize::from(reverse) + relax + skip + 1) % 2;
        let ec = if correct { std::mem::take(&mut self.work.e[0]) } else { Vec::new() };
        let mut row_sq = std::mem::take(&mut self.work.row_sq);
        let sq = Shared(row_sq.as_mut_ptr());
        let u = Shared(self.work.u.as_mut_ptr());
        let this = &*self;
        let wc = this.g.w * C;
        wavefront(this.g.h, this.band.max(2 * phases), phases, |y, phase| {
            // SAFETY (all three): `wavefront` runs phase p of a row only between phases p − 1
            // and p + 1 of its neighbour rows, never two tasks on neighbouring rows in one phase,
            // and red-black cells of one colour are never neighbours.
            if phase < first {
                this.correct_row0(&ec, y, unsafe { std::slice::from_raw_parts_mut(u.get().add(y * wc), wc) });
            } else if phase < first + relax {
                let colour = (usize::from(reverse) + phase - first + skip) % 2;
                unsafe { this.relax_row0(u, y, colour) };
            } else {
                // Rows y − 1..=y + 1 are done with; `sq` has one entry per row.
                unsafe { *sq.get().add(y) = this.residual_sq_row0(this.rows_around(u, y), y, Some(1 - last)) };
            }
        });
        if correct {
            self.work.e[0] = ec;
        }
        self.norm = norm.then(|| sum(&row_sq));
        self.work.row_sq = row_sq;
        if relax > 0 {
            self.relaxed_last = Some(last);
        } else if correct {
            self.relaxed_last = None;
        }
    }

    /// The residual `b − A·u` of level 0 at the unknown `(x, y)`, from `rows`, the iterate's rows
    /// `y − 1..=y + 1` (from row 0 when `y` is 0; see [`Cycler::rows_around`]).
    #[inline]
    fn res0(&self, rows: &[f64], x: usize, y: usize) -> [f64; C] {
        let (w, h) = (self.g.w, self.g.h);
        let u = rows;
        let i = y.min(1) * w + x;
        let mut out = [0f64; C];
        if y > 0 && y + 1 < h && x > 0 && x + 1 < w {
            for (c, o) in out.iter_mut().enumerate() {
                *o = u[(i - 1) * C + c] + u[(i + 1) * C + c] + u[(i - w) * C + c] + u[(i + w) * C + c]
                    - 4.0 * u[i * C + c];
            }
        } else {
            let nb = [
                (x > 0).then(|| i - 1),
                (x + 1 < w).then(|| i + 1),
                (y > 0).then(|| i - w),
                (y + 1 < h).then(|| i + w),
            ];
            let mut deg = 0.0;
            for j in nb.into_iter().flatten() {
                deg += 1.0;
                for (c, o) in out.iter_mut().enumerate() {
                    *o += u[j * C + c];
                }
            }
            for (c, o) in out.iter_mut().enumerate() {
                *o -= deg * u[i * C + c];
            }
        }
        out
    }

    /// The iterate's rows `y − 1..=y + 1` (those that exist) as one slice.
    ///
    /// # Safety
    /// `u` points at the level-0 iterate and no task writes those rows while the slice lives.
    unsafe fn rows_around<'a>(&self, u: Shared<f64>, y: usize) -> &'a [f64] {
        let wc = self.g.w * C;
        let (a, b) = (y.saturating_sub(1), (y + 2).min(self.g.h));
        // SAFETY: the rows are inside the iterate; the caller's contract covers the writes.
        unsafe { std::slice::from_raw_parts(u.get().add(a * wc), (b - a) * wc) }
    }

    /// Calls `f(first, step, r)` with the level-0 residuals `r` of the unknowns `first, first +
    /// step, …` of row `y` (`C` per point), in spans of at most 64 points; `rows` holds the
    /// iterate's rows `y − 1..=y + 1` ([`Cycler::rows_around`]). Right after a half-sweep of one
    /// colour the residuals of that colour are zero up to rounding (each cell was just set to the
    /// mean of its neighbours), and only the other colour's are computed (`colour` given, `step`
    /// 2).
    #[inline]
    fn residual_spans0(&self, rows: &[f64], y: usize, colour: Option<usize>, mut f: impl FnMut(usize, usize, &[f64])) {
        let (w, h) = (self.g.w, self.g.h);
        let u = rows;
        let inner_row = y > 0 && y + 1 < h;
        let step = if colour.is_some() { 2 } else { 1 };
        let mut buf = [0f64; 64 * 4];
        self.g.members.for_row_spans(y, colour, |first, end| {
            let n = (end - first).div_ceil(step);
            let out = &mut buf[..n * C];
            if inner_row && first > 0 && end < w {
                let wc = w * C;
                let mid = &u[wc + (first - 1) * C..wc + (end + 1) * C];
                let up = &u[first * C..end * C];
                let down = &u[2 * wc + first * C..2 * wc + end * C];
                if step == 1 {
                    for (k, o) in out.iter_mut().enumerate() {
                        *o = mid[k] + mid[k + 2 * C] + up[k] + down[k] - 4.0 * mid[k + C];
                    }
                } else if C == 3
                    && let Some(rgb) = self.rgb
                {
                    rgb.residual_every_other(mid, up, down, out);
                } else {
                    for (j, o) in out.chunks_exact_mut(C).enumerate() {
                        let k = 2 * j * C;
                        for (c, o) in o.iter_mut().enumerate() {
                            *o = mid[k + c] + mid[k + 2 * C + c] + up[k + c] + down[k + c] - 4.0 * mid[k + C + c];
                        }
                    }
                }
            } else {
                for (k, x) in (first..end).step_by(step).enumerate() {
                    out[k * C..k * C + C].copy_from_slice(&self.res0(rows, x, y));
                }
            }
            f(first, step, out);
        });
    }

    /// The residual of level 0 along row `y` (zero off the unknowns), into `out` (`w · C` long).
    fn residual_row0(&self, y: usize, out: &mut [f64]) {
        out.fill(0.0);
        // SAFETY: nothing writes the iterate while a residual is computed (`&self`).
        let rows = unsafe { self.rows_around(Shared(self.work.u.as_ptr().cast_mut()), y) };
        self.residual_spans0(rows, y, self.relaxed_last.map(|c| 1 - c), |first, step, r| {
            if step == 1 {
                out[first * C..first * C + r.len()].copy_from_slice(r);
            } else {
                for (k, p) in r.chunks_exact(C).enumerate() {
                    let x = first + 2 * k;
                    out[x * C..x * C + C].copy_from_slice(p);
                }
            }
        });
    }

    /// `‖b − A·u‖²` of row `y` per channel on level 0 (`rows` and `colour` as for
    /// [`Cycler::residual_spans0`]).
    fn residual_sq_row0(&self, rows: &[f64], y: usize, colour: Option<usize>) -> [f64; C] {
        let mut s = [0f64; C];
        self.residual_spans0(rows, y, colour, |_, _, r| {
            for p in r.chunks_exact(C) {
                for c in 0..C {
                    s[c] += p[c] * p[c];
                }
            }
        });
        s
    }

    /// `‖b − A·u‖²` per channel on level 0: the rows' sums added in row order, so the result
    /// does not depend on the threads, nor on whether the last smoothing summed them
    /// ([`Cycler::sweeps0`]).
    fn residual_norm0(&mut self) -> [f64; C] {
        if let Some(norm) = self.norm.take() {
            return norm;
        }
        let mut row_sq = std::mem::take(&mut self.work.row_sq);
        let colour = self.relaxed_last.map(|c| 1 - c);
        let this = &*self;
        let u = Shared(this.work.u.as_ptr().cast_mut());
        row_sq.par_chunks_mut(ROWS).enumerate().for_each(|(t, sums)| {
            for (k, s) in sums.iter_mut().enumerate() {
                let y = t * ROWS + k;
                // SAFETY: nothing writes the iterate meanwhile (`this` borrows the cycler).
                *s = this.residual_sq_row0(unsafe { this.rows_around(u, y) }, y, colour);
            }
        });
        let total = sum(&row_sq);
        self.work.row_sq = row_sq;
        total
    }

    /// Restricts the residual of level `l` to the right-hand side of level `l + 1`, zeroing its
    /// correction. With `sweep` (level 0 only), a half-sweep of that colour is run first, row by
    /// row just before the residual needs it, so level 0 is passed over once for both (a
    /// half-sweep of one colour reads only the other, so its rows may go in any order).
    fn descend(&mut self, l: usize, sweep: Option<usize>) {
        debug_assert!(l == 0 || sweep.is_none());
        let coarse = &self.g.levels[l];
        let mut rhs = std::mem::take(&mut self.work.rhs[l]);
        let mut scratch = std::mem::take(&mut self.work.scratch[l]);
        if let Some(colour) = sweep {
            self.relaxed_last = Some(colour);
            self.norm = None;
        }
        {
            let u = Shared(self.work.u.as_mut_ptr());
            let this = &*self;
            let cw = coarse.pw * C;
            let (fw, fh) = this.fine_dims(l);
            // Coarse rows in tasks; each task keeps the three fine residual rows it needs.
            let per_task = restrict_rows(coarse, this.threads);
            let tasks = (coarse.h + 2).div_ceil(per_task);
            // With a sweep, task t sweeps the fine rows `own(t)`; the residual rows of its coarse
            // rows also read its neighbours' nearest rows, swept first, before any residual.
            let start = |t: usize| {
                if t == 0 {
                    0
                } else if t >= tasks {
                    fh
                } else {
                    (2 * (t * per_task - 1)).min(fh)
                }
            };
            let own = |t: usize| start(t)..start(t + 1);
            let edges = |t: usize| {
                let r = own(t);
                [r.start, r.end.saturating_sub(2).max(r.start), r.end.saturating_sub(1).max(r.start)]
            };
            // SAFETY (both): a row is swept by one task only, and while the sweep of one colour
            // writes it, nothing reads that colour's cells of the row: its own task computes the
            // residuals that read it only after, and the other tasks read only the edge rows,
            // swept before they start.
            if let Some(colour) = sweep {
                (0..tasks).into_par_iter().for_each(|t| {
                    let e = edges(t);
                    for (k, &y) in e.iter().enumerate() {
                        if y < own(t).end && !e[..k].contains(&y) {
                            unsafe { this.relax_row0(u, y, colour) };
                        }
                    }
                });
            }
            rhs.par_chunks_mut(cw * per_task).zip(scratch.par_chunks_mut(3 * fw * C)).enumerate().for_each(
                |(t, (chunk, buf))| {
                    // The next of this task's rows left to sweep, and where they end.
                    let (mut next, inner_end) = (own(t).start + 1, edges(t)[1]);
                    let mut swept_to = |y: usize| {
                        if let Some(colour) = sweep {
                            while next < inner_end && next <= y {
                                unsafe { this.relax_row0(u, next, colour) };
                                next += 1;
                            }
                        }
                    };
                    let (r0, rest) = buf.split_at_mut(fw * C);
                    let (r1, r2) = rest.split_at_mut(fw * C);
                    let mut rows = [r0, r1, r2];
                    let mut have = [usize::MAX; 3];
                    for (k, out) in chunk.chunks_mut(cw).enumerate() {
                        out.fill(0.0);
                        let py = t * per_task + k;
                        if py == 0 || py > coarse.h {
                            continue;
                        }
                        let cy = py - 1;
                        for (r, fy) in (2 * cy as isize - 1..=2 * cy as isize + 1).enumerate() {
                            if fy < 0 || fy as usize >= fh {
                                have[r] = usize::MAX;
                                continue;
                            }
                            let fy = fy as usize;
                            if have[r] == fy {
                                continue;
                            }
                            // Reuse the row computed as the bottom row of the previous coarse row.
                            if r == 0 && have[2] == fy {
                                rows.swap(0, 2);
                                have.swap(0, 2);
                                continue;
                            }
                            swept_to(fy + 1);
                            this.residual_row(l, fy, rows[r]);
                            have[r] = fy;
                        }
                        this.restrict_row(l, cy, &rows, &have, out);
                    }
                    swept_to(fh);
                },
            );
        }
        self.work.rhs[l] = rhs;
        self.work.scratch[l] = scratch;
        self.work.e[l].fill(0.0);
    }

    fn fine_dims(&self, l: usize) -> (usize, usize) {
        if l == 0 { (self.g.w, self.g.h) } else { (self.g.levels[l - 1].w, self.g.levels[l - 1].h) }
    }

    /// The residual of level `l` along row `y`, unpadded, into `out`.
    fn residual_row(&self, l: usize, y: usize, out: &mut [f64]) {
        if l == 0 {
            self.residual_row0(y, out);
            return;
        }
        let lv = &self.g.levels[l - 1];
        let (e, rhs) = (&self.work.e[l - 1], &self.work.rhs[l - 1]);
        let off = lv.offsets();
        let s = lv.table[INTERIOR as usize].map(f64::from);
        let pwc = lv.pw * C;
        split_row(lv.runs.row(y), lv.w, |a, b, run| {
            if !run {
                for x in a..b {
                    let i = lv.at(x, y);
                    let id = lv.stencil_index_in_row(i, y + 1);
                    if id == 0 {
                        out[x * C..x * C + C].fill(0.0);
                        continue;
                    }
                    let st = &lv.table[id];
                    for c in 0..C {
                        let mut r = f64::from(rhs[i * C + c]);
                        for k in 0..9 {
                            r -= f64::from(st[k]) * f64::from(e[(i as isize + off[k]) as usize * C + c]);
                        }
                        out[x * C + c] = r;
                    }
                }
            } else {
                // Interior points: the same stencil everywhere, summed along the run.
                let (i0, n) = (lv.at(a, y) * C, (b - a) * C);
                let up = &e[i0 - pwc - C..i0 - pwc + n + C];
                let mid = &e[i0 - C..i0 + n + C];
                let down = &e[i0 + pwc - C..i0 + pwc + n + C];
                let r = &rhs[i0..i0 + n];
                for (k, o) in out[a * C..b * C].iter_mut().enumerate() {
                    let f = |v: &[f32], j: usize| f64::from(v[j]);
                    *o = f(r, k)
                        - s[0] * f(up, k)
                        - s[1] * f(up, k + C)
                        - s[2] * f(up, k + 2 * C)
                        - s[3] * f(mid, k)
                        - s[4] * f(mid, k + C)
                        - s[5] * f(mid, k + 2 * C)
                        - s[6] * f(down, k)
                        - s[7] * f(down, k + C)
                        - s[8] * f(down, k + 2 * C);
                }
            }
        });
    }

    /// One row of `Pᵀ·r`: the right-hand side of coarse row `cy` of level `l + 1` from the fine
    /// residual rows `2cy − 1`, `2cy`, `2cy + 1` (`have[k]` is the row held in `rows[k]`).
    fn restrict_row(&self, l: usize, cy: usize, rows: &[&mut [f64]; 3], have: &[usize; 3], out: &mut [f32]) {
        let coarse = &self.g.levels[l];
        let (fw, _) = self.fine_dims(l);
        split_row(coarse.runs.row(cy), coarse.w, |first, end, run| {
            if run
                && C == 3
                && let Some(rgb) = self.rgb
            {
                // A run of interior points: fine cells 2·first − 1 ..= 2·end − 1 of each row.
                let fine = |r: usize| &rows[r][(2 * first - 1) * C..2 * end * C];
                rgb.full_weighting(fine(0), fine(1), fine(2), &mut out[(first + 1) * C..(end + 1) * C]);
                return;
            }
            for cx in first..end {
                self.restrict_point(cx, coarse, cy, fw, rows, have, out);
            }
        });
    }

    /// The restriction's value at coarse point `(cx, cy)` of `coarse` (see
    /// [`Cycler::restrict_row`]).
    #[inline]
    #[allow(clippy::too_many_arguments)]
    fn restrict_point(
        &self,
        cx: usize,
        coarse: &Coarse,
        cy: usize,
        fw: usize,
        rows: &[&mut [f64]; 3],
        have: &[usize; 3],
        out: &mut [f32],
    ) {
        let pi = coarse.at(cx, cy);
        let id = coarse.id[pi];
        if id == NONE {
            return;
        }
        let mut acc = [0f64; C];
        if id == INTERIOR {
            // Full weighting; an interior point has all nine fine neighbours.
            let x = 2 * cx * C;
            let (a, b, d) = (&rows[0][x - C..x + 2 * C], &rows[1][x - C..x + 2 * C], &rows[2][x - C..x + 2 * C]);
            for c in 0..C {
                acc[c] = 0.25 * (a[c] + a[2 * C + c] + d[c] + d[2 * C + c])
                    + 0.5 * (a[C + c] + d[C + c] + b[c] + b[2 * C + c])
                    + b[C + c];
            }
        } else {
            let col = &coarse.pcol[coarse.stencil_index_in_row(pi, cy + 1)];
            for r in 0..3 {
                if have[r] == usize::MAX {
                    continue;
                }
                for fx in (2 * cx).saturating_sub(1)..(2 * cx + 2).min(fw) {
                    let wgt = f64::from(col[r * 3 + fx + 1 - 2 * cx]);
                    if wgt != 0.0 {
                        for c in 0..C {
                            acc[c] += wgt * rows[r][fx * C + c];
                        }
                    }
                }
            }
        }
        for c in 0..C {
            out[(cx + 1) * C + c] = acc[c] as f32;
        }
    }

    /// The interpolated correction of coarse level `l + 1` at the point `(x, y)` of level `l`,
    /// from the parents' interpolation columns (bilinear for interior parents; runs of those are
    /// interpolated directly by [`Cycler::interpolate_row`]).
    #[inline]
    fn interpolate(&self, l: usize, ec: &[f32], x: usize, y: usize) -> [f64; C] {
        let coarse = &self.g.levels[l];
        let pw = coarse.pw;
        // Padded index of the parent (x/2, y/2); the padding keeps one right and one down in
        // bounds at the grid's last row and column.
        let i = coarse.at(x / 2, y / 2);
        let mut out = [0f64; C];
        // Each parent's column holds its weight here, at the slot of this point's offset
        // from the parent: (x, y) − 2·parent.
        let (ox, oy) = (x % 2, y % 2);
        for (dy, dx) in [(0, 0), (0, 1), (1, 0), (1, 1)] {
            if (dx == 1 && ox == 0) || (dy == 1 && oy == 0) {
                continue;
            }
            let j = i + dy * pw + dx;
            let k = (1 + oy - 2 * dy) * 3 + (1 + ox - 2 * dx);
            let wgt = f64::from(coarse.pcol[coarse.stencil_index_in_row(j, y / 2 + 1 + dy)][k]);
            if wgt != 0.0 {
                for (c, o) in out.iter_mut().enumerate() {
                    *o += wgt * f64::from(ec[j * C + c]);
                }
            }
        }
        out
    }

    /// Adds the interpolated correction of level `l + 1` to level `l`.
    fn ascend(&mut self, l: usize) {
        let ec = std::mem::take(&mut self.work.e[l]);
        let (fw, fh) = self.fine_dims(l);
        if l == 0 {
            self.relaxed_last = None;
            self.norm = None;
            let mut u = std::mem::take(&mut self.work.u);
            let this = &*self;
            u.par_chunks_mut(fw * C * ROWS).enumerate().for_each(|(t, rows)| {
                for (k, row) in rows.chunks_mut(fw * C).enumerate() {
                    this.correct_row0(&ec, t * ROWS + k, row);
                }
            });
            self.work.u = u;
        } else {
            let mut ef = std::mem::take(&mut self.work.e[l - 1]);
            let this = &*self;
            let pw = this.g.levels[l - 1].pw;
            // Padded rows 1..=fh hold the fine grid.
            let per_task = task_rows(&this.g.levels[l - 1]);
            ef[pw * C..(fh + 1) * pw * C].par_chunks_mut(pw * C * per_task).enumerate().for_each(|(t, rows)| {
                for (k, row) in rows.chunks_mut(pw * C).enumerate() {
                    let y = t * per_task + k;
                    let add = |row: &mut [f32], x: usize, v: [f64; C]| {
                        for c in 0..C {
                            let p = &mut row[x * C + c];
                            *p = (f64::from(*p) + v[c]) as f32;
                        }
                    };
                    this.interpolate_row(l, &ec, y, fw, &mut row[C..], add, |_, _, _| false);
                }
            });
            self.work.e[l - 1] = ef;
        }
        self.work.e[l] = ec;
    }

    /// Adds the interpolated correction `ec` of level 1 to row `y` of level 0 (`row`).
    fn correct_row0(&self, ec: &[f32], y: usize, row: &mut [f64]) {
        let add = |row: &mut [f64], x: usize, v: [f64; C]| {
            for c in 0..C {
                row[x * C + c] += v[c];
            }
        };
        let pw = self.g.levels[0].pw;
        let run = |row: &mut [f64], a: usize, b: usize| {
            if C == 3
                && let Some(rgb) = self.rgb
            {
                let parents = |i: usize| &ec[i * C..(i + b - a) * C];
                let i = self.g.levels[0].at(a, y / 2);
                let below = (y % 2 == 1).then(|| parents(i + pw));
                rgb.interpolate_run(parents(i), below, &mut row[2 * a * C..(2 * b - 1) * C]);
                return true;
            }
            false
        };
        self.interpolate_row(0, ec, y, self.g.w, row, add, run);
    }

    /// Adds the interpolated correction `ec` of `levels[l]` to row `y` of the finer level (`fw`
    /// points, starting at `row[0]`) through `add(row, x, value)`: bilinear along runs whose
    /// parents are all interior points, [`Cycler::interpolate`] at the other points of the row.
    /// `run(row, a, b)` may add the correction along the run of parents `a..b` itself (fine
    /// points `2a..=2b − 2`) and return true.
    #[inline]
    #[allow(clippy::too_many_arguments)]
    fn interpolate_row<T>(
        &self,
        l: usize,
        ec: &[f32],
        y: usize,
        fw: usize,
        row: &mut [T],
        add: impl Fn(&mut [T], usize, [f64; C]),
        run: impl Fn(&mut [T], usize, usize) -> bool,
    ) {
        let coarse = &self.g.levels[l];
        let (cy, odd_row) = (y / 2, y % 2 == 1);
        let runs = if odd_row { coarse.pair_runs.row(cy) } else { coarse.runs.row(cy) };
        let pw = coarse.pw;
        // The parents' values, averaged down the column on odd rows.
        let column = |i: usize| -> [f64; C] {
            std::array::from_fn(|c| {
                if odd_row {
                    0.5 * (f64::from(ec[i * C + c]) + f64::from(ec[(i + pw) * C + c]))
                } else {
                    f64::from(ec[i * C + c])
                }
            })
        };
        let mut next = 0;
        let gap = |row: &mut [T], a: usize, b: usize| {
            let mut one = |x: usize| {
                let v = self.interpolate(l, ec, x, y);
                add(row, x, v);
            };
            if l == 0 {
                self.g.members.for_range(y, a, b, &mut one);
            } else {
                let fine = &self.g.levels[l - 1];
                (a..b).filter(|&x| fine.id[fine.at(x, y)] != NONE).for_each(one);
            }
        };
        for &(a, b) in runs {
            // Fine points 2a ..= 2b − 2 have only interior parents.
            let (lo, hi) = (2 * a as usize, 2 * b as usize - 1);
            gap(row, next, lo);
            next = hi;
            if run(row, a as usize, b as usize) {
                continue;
            }
            let mut left = column(coarse.at(a as usize, cy));
            for cx in a as usize..b as usize {
                add(row, 2 * cx, left);
                if 2 * cx + 1 < hi {
                    let right = column(coarse.at(cx + 1, cy));
                    add(row, 2 * cx + 1, std::array::from_fn(|c| 0.5 * (left[c] + right[c])));
                    left = right;
                }
            }
        }
        gap(row, next, fw);
    }

    // -----------------------------------------------------------------------------------------
    // Coarse levels.

    /// `sweeps` 4-colour Gauss-Seidel sweeps of coarse level `l` (index into `levels`): colours
    /// (even x, even y), (odd, even), (even, odd), (odd, odd), or the reverse. Rows of one parity
    /// never couple to each other, so each row takes its two colours in turn, and the rows run as
    /// a wavefront (even rows first, or odd rows first in reverse).
    fn sweeps_coarse(&mut self, l: usize, sweeps: usize, reverse: bool) {
        let e = Shared(self.work.e[l].as_mut_ptr());
        let buf = Shared(self.work.row_buf.as_mut_ptr());
        let this = &*self;
        let lv = &this.g.levels[l];
        let phases = 2 * sweeps;
        // Fewer, larger bands than `coarse_band` leave the row buffers enough room.
        let band = coarse_band(this.band, l, lv).max(2 * phases);
        debug_assert!(lv.h.div_ceil(band) * lv.pw * C <= this.work.row_buf.len());
        wavefront(lv.h, band, phases, |y, phase| {
            let parity = (usize::from(reverse) + phase) % 2;
            if y % 2 == parity {
                // SAFETY: a row's points couple to their own row and the two rows of the other
                // parity; `wavefront` never runs a row while a neighbour row of the other phase
                // is being written, and rows of one parity never touch. A band's rows are run by
                // one task at a time, which alone uses the band's stretch of `buf`.
                unsafe {
                    let buf = std::slice::from_raw_parts_mut(buf.get().add(y / band * lv.pw * C), lv.pw * C);
                    this.relax_coarse_row(l, e, y, usize::from(reverse), buf);
                }
            }
        });
    }

    /// Gauss-Seidel on row `y` of coarse level `l`: the points with `x % 2 == x_first`, then the
    /// others. On runs of interior points the terms from the rows above and below (which this
    /// row's updates do not change) are summed for the whole run first, into `buf`.
    ///
    /// # Safety
    /// No other task writes row `y` or its neighbour rows, or reads row `y`, meanwhile.
    unsafe fn relax_coarse_row(&self, l: usize, e: Shared<f32>, y: usize, x_first: usize, buf: &mut [f32]) {
        let lv = &self.g.levels[l];
        let rhs = &self.work.rhs[l];
        let off = lv.offsets().map(|o| o * C as isize);
        let s = lv.table[INTERIOR as usize];
        let inv_interior = 1.0 / s[4];
        let e = e.get();
        let runs = lv.runs.row(y);
        let pwc = lv.pw * C;
        for &(a, b) in runs {
            let (a, b) = (a as usize, b as usize);
            let (i0, n) = (lv.at(a, y) * C, (b - a) * C);
            // SAFETY: rows y − 1 and y + 1 are not written meanwhile (see the contract); the
            // padded ring keeps the runs' neighbours in bounds.
            let (up, down) = unsafe {
                (
                    std::slice::from_raw_parts(e.add(i0 - pwc - C), n + 2 * C),
                    std::slice::from_raw_parts(e.add(i0 + pwc - C), n + 2 * C),
                )
            };
            let r = &rhs[i0..i0 + n];
            let t = &mut buf[a * C..b * C];
            for k in 0..n {
                t[k] = r[k]
                    - s[0] * up[k]
                    - s[1] * up[k + C]
                    - s[2] * up[k + 2 * C]
                    - s[6] * down[k]
                    - s[7] * down[k + C]
                    - s[8] * down[k + 2 * C];
            }
        }
        for start in [x_first, 1 - x_first] {
            let first_of = |a: usize| a + (a + 2 - start) % 2;
            split_row(runs, lv.w, |a, b, run| {
                if run {
                    if C == 3
                        && let Some(rgb) = self.rgb
                    {
                        let x = first_of(a);
                        if x < b {
                            // SAFETY: as below; the run's points and their row neighbours are
                            // inside the padded level, its terms inside `buf`.
                            unsafe {
                                rgb.relax_same_row(
                                    e.add(lv.at(x, y) * C),
                                    buf[x * C..].as_ptr(),
                                    b - x,
                                    s[3],
                                    s[5],
                                    inv_interior,
                                );
                            }
                        }
                        return;
                    }
                    for x in (first_of(a)..b).step_by(2) {
                        let i = lv.at(x, y) * C;
                        for c in 0..C {
                            // SAFETY: the padded ring keeps every neighbour index in bounds; see
                            // the function's contract for the exclusivity.
                            unsafe {
                                let p = e.add(i + c);
                                *p = (buf[x * C + c] - s[3] * *p.sub(C) - s[5] * *p.add(C)) * inv_interior;
                            }
                        }
                    }
                } else {
                    for x in (first_of(a)..b).step_by(2) {
                        let i = lv.at(x, y);
                        let id = lv.id[i];
                        if id == NONE {
                            continue;
                        }
                        let st = &lv.table[lv.stencil_index_in_row(i, y + 1)];
                        let inv = 1.0 / st[4];
                        for c in 0..C {
                            // SAFETY: the padded ring keeps every neighbour index in bounds; see
                            // the function's contract for the exclusivity.
                            unsafe {
                                let p = e.add(i * C + c);
                                let mut r = rhs[i * C + c];
                                for k in [0, 1, 2, 3, 5, 6, 7, 8] {
                                    r -= st[k] * *p.offset(off[k]);
                                }
                                *p = r * inv;
                            }
                        }
                    }
                }
            });
        }
    }

    fn smooth(&mut self, l: usize, sweeps: usize, reverse: bool) {
        if l == 0 {
            self.sweeps0(sweeps, reverse, false, false, false);
        } else {
            self.sweeps_coarse(l - 1, sweeps, reverse);
        }
    }

    fn coarsest(&mut self, l: usize) {
        match &self.g.coarsest {
            Coarsest::Dense { points, chol } => {
                let (e, rhs) = (&mut self.work.e[l - 1], &self.work.rhs[l - 1]);
                let x = &mut self.work.coarse_x;
                for c in 0..C {
                    for (k, &i) in points.iter().enumerate() {
                        x[k] = f64::from(rhs[i * C + c]);
                    }
                    chol.solve_in_place(x);
                    for (k, &i) in points.iter().enumerate() {
                        e[i * C + c] = x[k] as f32;
                    }
                }
            }
            Coarsest::Relax(sweeps) => {
                let sweeps = *sweeps;
                self.smooth(l, sweeps, false);
                self.smooth(l, sweeps, true);
            }
        }
    }

    /// Full multigrid from the zero start on level 0.
    fn full_multigrid(&mut self) {
        let depth = self.g.levels.len();
        for l in 0..depth {
            self.descend(l, None);
        }
        self.coarsest(depth);
        for l in (1..depth).rev() {
            self.work.e[l - 1].fill(0.0);
            self.ascend(l);
            self.cycle(l, self.params.cycle);
        }
        self.ascend(0);
        self.cycle(0, self.params.cycle);
    }
}

/// Rows per band of the sweeps of coarse level `l` (index into `levels`), from level 0's `band`.
fn coarse_band(band: usize, l: usize, level: &Coarse) -> usize {
    if level.n <= SMALL_LEVEL { level.h.max(1) } else { band.div_ceil(2 << l).max(8) }
}

/// Rows per task of the passes over `level` (its padded rows for one task).
fn task_rows(level: &Coarse) -> usize {
    if level.n <= SMALL_LEVEL { level.h + 2 } else { ROWS }
}

/// Tasks per thread of the restriction to a coarse level.
const RESTRICT_TASKS_PER_THREAD: usize = 2;

/// Coarse rows per task of the restriction to `level` on `threads` threads. Each task keeps
/// three fine residual rows of scratch, so the tasks are a few per thread rather than a few
/// rows each (with 16-row tasks the scratch of a 2048² frame took 4 MB, a quarter of the image);
/// the result does not depend on the split, every coarse row being computed on its own.
fn restrict_rows(level: &Coarse, threads: usize) -> usize {
    task_rows(level).max((level.h + 2).div_ceil(RESTRICT_TASKS_PER_THREAD * threads))
}

/// Runs `phases` Gauss-Seidel half-sweeps over rows `0..h` as one wavefront: `relax(y, p)` for
/// every row `y` and phase `p`, where phase `p` of row `y` runs after phase `p − 1` and before
/// phase `p + 1` of rows `y − 1..=y + 1`, and rows in one phase do not read each other's updates.
///
/// The rows are cut into bands of `band` rows (at least `2·phases` when there are several). Each
/// band first runs the trapezoid that needs no other band — phase `q` on its rows `y0 + q..y1 −
/// q`, trailing phase `q − 1` by one row, so all phases pass over the band's memory once while a
/// few rows are in cache — side by side with the other bands. Then the seams between bands take
/// their remaining phases, `q` on rows `y0 − q..y0 + q` around each band start `y0`; seams two
/// bands apart run side by side, so a band is worked on by one task at a time.
fn wavefront(h: usize, band: usize, phases: usize, relax: impl Fn(usize, usize) + Sync) {
    if phases == 0 || h == 0 {
        return;
    }
    let band = band.max(1);
    let bands = h.div_ceil(band);
    assert!(bands == 1 || band >= 2 * phases, "bands of {band} rows are too thin for {phases} phases");
    (0..bands).into_par_iter().for_each(|b| {
        let (y0, y1) = (b * band, ((b + 1) * band).min(h));
        let lo = |q: usize| if b == 0 { 0 } else { y0 + q };
        let hi = |q: usize| if b + 1 == bands { y1 } else { y1 - q };
        for step in y0..y1 + phases {
            for q in 0..phases.min(step + 1) {
                let y = step - q;
                if y >= lo(q) && y < hi(q) {
                    relax(y, q);
                }
            }
        }
    });
    for parity in 0..2 {
        (1..bands).into_par_iter().filter(|b| b % 2 == parity).for_each(|b| {
            let y0 = b * band;
            for q in 1..phases {
                for y in y0 - q..(y0 + q).min(h) {
                    relax(y, q);
                }
            }
        });
    }
}

impl<const C: usize> Levels for Cycler<'_, C> {
    fn is_coarsest(&self, l: usize) -> bool {
        l == self.g.levels.len()
    }
    fn pre_smooth(&mut self, l: usize) {
        if l == 0 && self.relaxed_last == Some(0) && self.params.pre_smooth > 0 {
            // The last post-smoothing sweep ended with the red cells, and nothing changed since:
            // a red half-sweep now would recompute the same values, so start with black.
            self.sweeps0(self.params.pre_smooth, false, true, false, false);
        } else {
            self.smooth(l, self.params.pre_smooth, false);
        }
    }
    fn post_smooth(&mut self, l: usize) {
        self.smooth(l, self.params.post_smooth, true);
    }
    fn ascend_and_post_smooth(&mut self, l: usize) {
        if l == 0 {
            // One pass over level 0 for the correction, the sweeps and the next residual norm.
            self.sweeps0(self.params.post_smooth, true, false, true, true);
        } else {
            self.ascend(l);
            self.post_smooth(l);
        }
    }
    fn descend(&mut self, l: usize) {
        Cycler::descend(self, l, None);
    }
    fn pre_smooth_and_descend(&mut self, l: usize) {
        if l == 0 && self.relaxed_last == Some(0) && self.params.pre_smooth == 1 {
            // The one black half-sweep (see `pre_smooth`) runs inside the restriction.
            Cycler::descend(self, 0, Some(1));
        } else {
            self.pre_smooth(l);
            Cycler::descend(self, l, None);
        }
    }
    fn ascend(&mut self, l: usize) {
        Cycler::ascend(self, l);
    }
    fn coarsest(&mut self, l: usize) {
        Cycler::coarsest(self, l);
    }
}

impl<const C: usize> super::Iteration<C> for Cycler<'_, C> {
    fn residual_sq(&mut self) -> [f64; C] {
        self.residual_norm0()
    }
    fn cycle(&mut self, kind: Cycle) {
        Levels::cycle(self, 0, kind);
    }
}

fn sum<const C: usize>(parts: &[[f64; C]]) -> [f64; C] {
    let mut s = [0f64; C];
    for p in parts {
        for c in 0..C {
            s[c] += p[c];
        }
    }
    s
}

/// Solves one group of `C` planes over the grid's unknowns.
pub(crate) fn solve_group<const C: usize>(
    g: &Grid,
    planes: &[&mut [f32]],
    params: &FillParams,
    start: Start,
    progress: &mut (dyn FnMut(&Progress) -> bool + Send),
) -> Result<GroupResult, FillError> {
    let (mut cy, scale, b_sq) = prepare::<C>(g, planes, params, start)?;
    let bnorm = b_sq.map(|s| if s > 0.0 { s.sqrt() } else { 1.0 });
    if start == Start::FullMultigrid {
        cy.full_multigrid();
    }
    let (reports, r_sq) = super::iterate(&mut cy, params, start, bnorm, progress)?;
    // Norms in the planes' own units, so parts with different scales add up correctly.
    let unscale = |v: [f64; C]| (0..C).map(|c| v[c] / (scale[c] * scale[c])).collect();
    Ok(GroupResult {
        values: cy.work.u,
        rounded: Vec::new(),
        reports,
        r_sq: unscale(r_sq),
        b_sq: unscale(b_sq),
        scale: scale.to_vec(),
    })
}

/// The cycler of one group of planes with its level-0 iterate set up (known pixels scaled, the
/// unknowns zero or, for a warm start, the planes' values), each channel's scale, and `‖b‖²`.
fn prepare<'a, const C: usize>(
    g: &'a Grid,
    planes: &[&mut [f32]],
    params: &'a FillParams,
    start: Start,
) -> Result<(Cycler<'a, C>, [f64; C], [f64; C]), FillError> {
    let (w, h) = (g.w, g.h);
    // Level 0: known pixels of the box take their values; unknowns start at zero (full
    // multigrid) or at the planes' values (warm start). The right-hand side's norm is the norm
    // of the known neighbours' sums.
    // Work with each channel scaled by a power of two that brings its known values near 1, so the
    // f32 coarse levels neither underflow (subnormal data) nor overflow; the scaling is exact.
    let maxima: Vec<[f64; C]> = (0..h)
        .into_par_iter()
        .map(|y| {
            let mut m = [0f64; C];
            let row = (g.y0 + y) * g.img_w + g.x0;
            for x in 0..w {
                if !g.members.get(x as isize, y as isize) {
                    for c in 0..C {
                        let v = f64::from(planes[c][row + x]).abs();
                        if v.is_finite() {
                            m[c] = m[c].max(v);
                        }
                    }
                }
            }
            m
        })
        .collect();
    let scale: [f64; C] = std::array::from_fn(|c| {
        let m = maxima.iter().fold(0f64, |a, r| a.max(r[c]));
        if m > 0.0 { 2f64.powi(-(m.log2().floor() as i32)) } else { 1.0 }
    });
    let mut u = vec![0f64; w * h * C];
    let bad: Vec<Option<(usize, usize)>> = u
        .par_chunks_mut(w * C)
        .enumerate()
        .map(|(y, row)| {
            let gy = g.y0 + y;
            let bits = &g.members.bits[y * g.members.words..(y + 1) * g.members.words];
            for x in 0..w {
                let p = gy * g.img_w + g.x0 + x;
                let member = bits[x / 64] >> (x % 64) & 1 == 1;
                for c in 0..C {
                    let v = planes[c][p];
                    if member {
                        row[x * C + c] =
                            if start == Start::Warm && v.is_finite() { f64::from(v) * scale[c] } else { 0.0 };
                    } else if v.is_finite() {
                        row[x * C + c] = f64::from(v) * scale[c];
                    } else {
                        let (xi, yi) = (x as isize, y as isize);
                        let m = &g.members;
                        if m.get(xi - 1, yi) || m.get(xi + 1, yi) || m.get(xi, yi - 1) || m.get(xi, yi + 1) {
                            return Some((g.x0 + x, gy));
                        }
                    }
                }
            }
            None
        })
        .collect();
    if let Some(&Some((x, y))) = bad.iter().find(|b| b.is_some()) {
        return Err(FillError::NonFiniteRim { x, y });
    }
    // Fresh zeroed vectors, not a clone: copying would read every page of `e` before its first
    // write, and each page would fault twice.
    let zeroed = || -> Vec<Vec<f32>> { g.levels.iter().map(|l| vec![0f32; l.padded_len() * C]).collect() };
    let (e, rhs) = (zeroed(), zeroed());
    let coarse_x = vec![0f64; if let Coarsest::Dense { points, .. } = &g.coarsest { points.len() } else { 0 }];
    let threads = rayon::current_num_threads().max(1);
    let band = h.div_ceil(threads).max(8);
    let scratch = (0..g.levels.len())
        .map(|l| {
            let fw = if l == 0 { w } else { g.levels[l - 1].w };
            let tasks = (g.levels[l].h + 2).div_ceil(restrict_rows(&g.levels[l], threads));
            vec![0f64; tasks * 3 * fw * C]
        })
        .collect();
    let row_sq = vec![[0f64; C]; h];
    let row_buf = vec![
        0f32;
        g.levels
            .iter()
            .enumerate()
            .map(|(l, lv)| lv.h.div_ceil(coarse_band(band, l, lv)) * lv.pw * C)
            .max()
            .unwrap_or(0)
    ];
    let cy = Cycler {
        g,
        params,
        work: Work { u, e, rhs, coarse_x, scratch, row_sq, row_buf },
        band,
        threads,
        relaxed_last: None,
        norm: None,
        rgb: Rgb::detect(),
    };

    // ‖b‖: the known neighbours of every unknown, summed. Members whose four neighbours are all
    // members have none, so only the others are visited.
    let b_sq = {
        let parts: Vec<[f64; C]> = (0..h.div_ceil(ROWS))
            .into_par_iter()
            .map(|t| {
                let mut s = [0f64; C];
                let u = &cy.work.u;
                let m = &g.members;
                let mut inner = vec![0u64; m.words];
                for y in t * ROWS..((t + 1) * ROWS).min(h) {
                    Level0 { g }.interior_bits(y, &mut inner);
                    for (i, (&word, &inside)) in m.bits[y * m.words..(y + 1) * m.words].iter().zip(&inner).enumerate() {
                        let mut rim = word & !inside;
                        while rim != 0 {
                            let x = i * 64 + rim.trailing_zeros() as usize;
                            rim &= rim - 1;
                            let (xi, yi) = (x as isize, y as isize);
                            let mut b = [0f64; C];
                            for (dx, dy) in [(-1isize, 0isize), (1, 0), (0, -1), (0, 1)] {
                                let (nx, ny) = (xi + dx, yi + dy);
                                if nx < 0 || ny < 0 || nx as usize >= w || ny as usize >= h || m.get(nx, ny) {
                                    continue;
                                }
                                let j = ny as usize * w + nx as usize;
                                for c in 0..C {
                                    b[c] += u[j * C + c];
                                }
                            }
                            for c in 0..C {
                                s[c] += b[c] * b[c];
                            }
                        }
                    }
                }
                s
            })
            .collect();
        sum(&parts)
    };
    Ok((cy, scale, b_sq))
}

/// Writes a group's values (the level-0 iterate over the box) into the planes: one pass over the
/// iterate, each row's channels together (a pass per channel read a 2048² RGB iterate, 100 MB,
/// three times).
pub(crate) fn write_back(g: &Grid, planes: &mut [&mut [f32]], first: usize, result: &GroupResult) {
    let count = result.scale.len();
    assert!(g.x0 + g.w <= g.img_w, "the box lies in the image");
    let planes: Vec<Shared<f32>> = planes[first..first + count]
        .iter_mut()
        .map(|p| {
            assert!(p.len() >= (g.y0 + g.h) * g.img_w, "the box lies in the image");
            Shared(p.as_mut_ptr())
        })
        .collect();
    result.values.par_chunks(g.w * count).take(g.h).enumerate().for_each(|(y, values)| {
        let at = (g.y0 + y) * g.img_w + g.x0;
        g.members.for_row(y, None, |x| {
            for (c, plane) in planes.iter().enumerate() {
                // SAFETY: the sample is in the plane (asserted; x < g.w and the box lies in the
                // image), and row y of every plane is written by this task only.
                unsafe { *plane.get().add(at + x) = (values[x * count + c] / result.scale[c]) as f32 };
            }
        });
    });
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::fill::hierarchy::Hierarchy;
    use crate::mask::Mask;

    #[test]
    fn wavefront_runs_every_phase_of_every_row_once_in_dependency_order() {
        use std::sync::Mutex;
        use std::sync::atomic::{AtomicUsize, Ordering};
        let pool = rayon::ThreadPoolBuilder::new().num_threads(3).build().expect("pool");
        // Several bands with a short last band, one band, and bands exactly 2·phases thick.
        for (h, band, phases) in [(50, 12, 6), (50, 50, 6), (7, 7, 4), (48, 8, 4), (33, 16, 2), (40, 10, 3)] {
            let clock = AtomicUsize::new(0);
            let times = Mutex::new(vec![Vec::new(); h * phases]);
            pool.install(|| {
                wavefront(h, band, phases, |y, p| {
                    let start = clock.fetch_add(1, Ordering::SeqCst);
                    let end = clock.fetch_add(1, Ordering::SeqCst);
                    times.lock().expect("lock")[y * phases + p].push((start, end));
                });
            });
            let times = times.into_inner().expect("lock");
            for y in 0..h {
                for p in 0..phases {
                    let at = &times[y * phases + p];
                    assert_eq!(at.len(), 1, "row {y} phase {p} ran {} times (h {h}, band {band})", at.len());
                }
            }
            let span = |y: usize, p: usize| times[y * phases + p][0];
            for y in 0..h {
                for p in 1..phases {
                    for ny in y.saturating_sub(1)..(y + 2).min(h) {
                        // Phase p of row y starts after phase p − 1 of its neighbours (and itself)
                        // has ended; over all rows this also keeps phase p + 1 of the neighbours
                        // from starting before phase p of row y has ended.
                        assert!(span(ny, p - 1).1 < span(y, p).0, "row {y} phase {p} before row {ny} phase {}", p - 1);
                    }
                }
            }
        }
    }

    fn grid_of(mask: &Mask) -> Grid {
        let (w, h) = (mask.width(), mask.height());
        let bits = mask.bits();
        let (mut x_min, mut y_min) = (usize::MAX, usize::MAX);
        let (mut x_max, mut y_max) = (0, 0);
        for (p, _) in bits.iter().enumerate().filter(|(_, b)| **b) {
            let (x, y) = (p % w, p / w);
            (x_min, y_min, x_max, y_max) = (x_min.min(x), y_min.min(y), x_max.max(x), y_max.max(y));
        }
        // These tests put the first unknowns at 0 or 1, so the box starts at the origin and the
        // grid's coarse points are the compact hierarchy's (both take even coordinates).
        assert!(x_min <= 1 && y_min <= 1);
        let bx = (0, 0, (x_max + 2).min(w), (y_max + 2).min(h));
        Grid::build(bx, (w, h), |y, f| {
            for x in 0..w {
                if bits[y * w + x] {
                    f(x, x + 1);
                }
            }
        })
        .expect("mask coarsens")
    }

    /// The grid's coarse operators (interior ids, tabled stencils) equal the compact hierarchy's,
    /// level by level: the two storages implement one discretisation.
    fn check_same_operators(mask: &Mask) {
        let grid = grid_of(mask);
        let compact = Hierarchy::build(mask).expect("non-empty mask");
        let levels = grid.levels.len().min(compact.levels.len() - 1);
        assert!(levels >= 2, "too few levels to compare");
        for k in 0..levels {
            let (g, c) = (&grid.levels[k], &compact.levels[k + 1]);
            assert_eq!(g.n, c.n, "level {}: point count", k + 1);
            for i in 0..c.n {
                let p = c.pos[i] as usize;
                let (x, y) = (p % c.w, p / c.w);
                let s = &g.table[g.stencil_index(g.at(x, y))];
                assert!((f64::from(s[4]) - c.diag[i]).abs() <= 1e-5 * c.diag[i], "level {} diag at ({x},{y})", k + 1);
                for t in 0..c.k {
                    let j = c.nbr[i * c.k + t] as usize;
                    if j == c.n {
                        continue;
                    }
                    let q = c.pos[j] as usize;
                    let (dx, dy) = ((q % c.w) as isize - x as isize, (q / c.w) as isize - y as isize);
                    let want = c.coef_at(i, t);
                    let got = s[slot(dx, dy)];
                    assert!(
                        (got - want).abs() <= 1e-5 * want.abs().max(1e-3),
                        "level {} at ({x},{y}) offset ({dx},{dy}): grid {got}, compact {want}",
                        k + 1
                    );
                }
            }
        }
    }

    #[test]
    fn coarse_operators_match_the_compact_hierarchy_on_a_disk() {
        let mask = Mask::from_fn(140, 120, |x, y| {
            let (dx, dy) = (x as f64 - 60.0, y as f64 - 58.0);
            (x >= 1 && y >= 1 && x < 12) || dx * dx + dy * dy < 55.0 * 55.0
        });
        check_same_operators(&mask);
    }

    #[test]
    fn coarse_operators_match_the_compact_hierarchy_where_holes_meet_the_image_edge() {
        // An L touching the left and bottom edges (natural boundary) plus scattered pixels.
        let mask = Mask::from_fn(97, 83, |x, y| x < 30 || y > 60 || (x * 7 + y * 13) % 11 == 0);
        check_same_operators(&mask);
    }

    #[test]
    fn coarse_operators_match_the_compact_hierarchy_on_random_dropout() {
        let mut rng = crate::synth::Rng::new(7);
        let mask = Mask::from_fn(90, 90, |x, y| (x, y) == (1, 1) || rng.uniform() < 0.6);
        check_same_operators(&mask);
    }

    #[test]
    fn coarse_operators_match_the_compact_hierarchy_across_row_segments() {
        // Coarse rows of 150 and 75 points: stencil ids are numbered per segment of 64 cells, and
        // nearly every point of dropout has a stencil of its own.
        let mut rng = crate::synth::Rng::new(11);
        let mask = Mask::from_fn(300, 40, |x, y| (x, y) == (1, 1) || rng.uniform() < 0.6);
        let grid = grid_of(&mask);
        let level = &grid.levels[0];
        assert!(level.segs >= 3, "{} segments", level.segs);
        let own = (0..level.w).filter(|&x| level.id[level.at(x, 7)] > INTERIOR).count();
        assert!(own > SEGMENT, "{own} points of row 7 with a stencil of their own");
        check_same_operators(&mask);
    }

    #[test]
    fn interior_points_get_the_interior_id_and_others_a_computed_stencil() {
        let mask = Mask::from_fn(200, 200, |x, y| (1..199).contains(&x) && (1..199).contains(&y));
        let grid = grid_of(&mask);
        let level = &grid.levels[0];
        let interior = (0..level.h)
            .flat_map(|y| (0..level.w).map(move |x| (x, y)))
            .filter(|&(x, y)| level.id[level.at(x, y)] == INTERIOR)
            .count();
        // Coarse points at least 3 fine pixels inside the hole's edge are interior.
        assert!(interior > 90 * 90, "{interior} interior points");
        assert!(level.table.len() > 2, "boundary points need their own stencils");
    }

    /// A frame, a disk and seeded dropout crossed by dead columns and rows, for the level-0
    /// kernels' tests (each mask has an unknown at (1, 1), see [`grid_of`]).
    fn level0_masks(seed: u64) -> [Mask; 3] {
        let mut rng = crate::synth::Rng::new(seed);
        [
            Mask::from_fn(150, 131, |x, y| (1..149).contains(&x) && (1..129).contains(&y)),
            Mask::from_fn(140, 120, |x, y| (x, y) == (1, 1) || (x as f64 - 70.0).hypot(y as f64 - 60.0) < 50.0),
            Mask::from_fn(120, 97, |x, y| (x, y) == (1, 1) || x % 17 == 3 || y % 13 == 2 || rng.uniform() < 0.55),
        ]
    }

    /// The passes that do several steps over level 0 at once (the black half-sweep inside the
    /// restriction; the correction, the sweeps and the residual norm in one wavefront) give the
    /// same iterate, right-hand sides and norm bit for bit as the steps one after another, on
    /// several bands and with the edge rows of the restriction's tasks inside holes.
    #[test]
    fn fused_passes_over_level_zero_equal_the_steps_one_by_one() {
        let masks = level0_masks(5);
        let params = FillParams::default();
        let pool = rayon::ThreadPoolBuilder::new().num_threads(2).build().expect("pool");
        for mask in &masks {
            let g = grid_of(mask);
            let (w, h) = (mask.width(), mask.height());
            let mut planes: Vec<Vec<f32>> = (0..3)
                .map(|c| (0..w * h).map(|p| ((p % w) as f32 * 0.37 + (p / w) as f32 * 0.11 + c as f32).sin()).collect())
                .collect();
            let views: Vec<&mut [f32]> = planes.iter_mut().map(|p| p.as_mut_slice()).collect();
            pool.install(|| {
                let (mut fused, ..) = prepare::<3>(&g, &views, &params, Start::FullMultigrid).expect("prepare");
                // Small bands, so the wavefront has seams.
                fused.band = 8;
                fused.full_multigrid();
                let mut apart = Cycler { work: fused.work.clone(), norm: None, ..fused };
                for _ in 0..2 {
                    Levels::cycle(&mut fused, 0, Cycle::V);
                    apart.pre_smooth(0);
                    Cycler::descend(&mut apart, 0, None);
                    Levels::cycle(&mut apart, 1, Cycle::V);
                    apart.ascend(0);
                    apart.post_smooth(0);
                    assert!(fused.norm.is_some(), "the post-smoothing summed the norm");
                    assert!(fused.work.u.iter().zip(&apart.work.u).all(|(a, b)| a.to_bits() == b.to_bits()));
                    assert!(fused.work.rhs.iter().zip(&apart.work.rhs).all(|(a, b)| a == b));
                    assert_eq!(fused.relaxed_last, apart.relaxed_last);
                    let (n_fused, n_apart) = (fused.residual_norm0(), apart.residual_norm0());
                    assert_eq!(n_fused.map(f64::to_bits), n_apart.map(f64::to_bits));
                    assert!(n_fused.iter().all(|&n| n > 0.0));
                }
            });
        }
    }

    /// With three channels the cycle runs on vector kernels where the processor has them
    /// ([`Rgb`]): full multigrid and two cycles give the same iterate, right-hand sides and
    /// residual norm bit for bit as the scalar kernels.
    #[test]
    fn three_channel_vector_kernels_equal_the_scalar_ones_bit_for_bit() {
        if Rgb::detect().is_none() {
            eprintln!("no vector kernels on this processor; nothing to compare");
            return;
        }
        let masks = level0_masks(9);
        let params = FillParams::default();
        for mask in &masks {
            let g = grid_of(mask);
            let (w, h) = (mask.width(), mask.height());
            let mut planes: Vec<Vec<f32>> = (0..3)
                .map(|c| (0..w * h).map(|p| ((p % w) as f32 * 0.29 - (p / w) as f32 * 0.13 * c as f32).cos()).collect())
                .collect();
            let views: Vec<&mut [f32]> = planes.iter_mut().map(|p| p.as_mut_slice()).collect();
            let (mut vector, ..) = prepare::<3>(&g, &views, &params, Start::FullMultigrid).expect("prepare");
            let (mut scalar, ..) = prepare::<3>(&g, &views, &params, Start::FullMultigrid).expect("prepare");
            scalar.rgb = None;
            for state in [&mut vector, &mut scalar] {
                state.full_multigrid();
                Levels::cycle(state, 0, Cycle::V);
                Levels::cycle(state, 0, Cycle::V);
            }
            assert!(vector.work.u.iter().zip(&scalar.work.u).all(|(a, b)| a.to_bits() == b.to_bits()));
            assert!(vector.work.rhs.iter().zip(&scalar.work.rhs).all(|(a, b)| a == b));
            assert!(vector.work.e.iter().zip(&scalar.work.e).all(|(a, b)| a == b));
            let (nv, ns) = (vector.residual_norm0(), scalar.residual_norm0());
            assert_eq!(nv.map(f64::to_bits), ns.map(f64::to_bits));
        }
    }
}
