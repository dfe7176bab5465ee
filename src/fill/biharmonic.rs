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
//! The solver is conjugate gradients preconditioned by one symmetric multigrid W-cycle: coarse
//! points are the fine points with both coordinates even, interpolation is bilinear with missing
//! parents left out (the Dirichlet condition), coarse operators are Galerkin `Pᵀ·B·P` (5×5
//! stencils on every coarser level), lexicographic Gauss-Seidel runs forward before and backward
//! after the correction, and the coarsest level is factored densely. Work and memory follow the
//! unknowns.

use std::time::Instant;

use rayon::prelude::*;

use super::dense::Cholesky;
use super::{ChannelReport, Cycle, FillError, FillParams, Progress, Start};
use crate::mask::Mask;

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
/// The preconditioner's cycle. With V-cycles the iterations grew about 1.45× per doubling of a
/// wide hole (17, 26, 38, 53 on squares of 128² to 1024²); W-cycles keep them nearly flat (11,
/// 12, 14, 16) for about 1.5× the work per iteration; F-cycles fell between (11, 15, 19, 23).
const CYCLE: Cycle = Cycle::W;
/// Gauss-Seidel sweeps before and after the correction on coarse levels.
const COARSE_SWEEPS: usize = 1;
/// Symmetric Gauss-Seidel sweep pairs that stand in for a direct solve on a large coarsest level.
const COARSEST_SWEEPS: usize = 40;

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

#[allow(clippy::cast_sign_loss)]
fn square_index((dx, dy): (i64, i64)) -> usize {
    ((dy + 2) * 5 + dx + 2) as usize
}

/// One level: points sorted row-major, their neighbours and operator rows, and the transfer to
/// the next coarser level.
#[derive(Debug)]
struct Level {
    n: usize,
    /// Stencil slots per point (13 on level 0, 25 above).
    k: usize,
    nbr: Vec<u32>,
    /// Operator rows, `k` entries each, slot 0 the diagonal: one per point on coarse levels, one
    /// per image-edge class on level 0 (`class` picks it).
    rows: Vec<f64>,
    class: Vec<u8>,
    /// Up to four parents on the next coarser level and their common weight (empty on the
    /// coarsest level).
    parents: Vec<[u32; 4]>,
    pweight: Vec<f64>,
}

impl Level {
    fn row(&self, i: usize) -> &[f64] {
        let r = if self.class.is_empty() { i } else { usize::from(self.class[i]) };
        &self.rows[r * self.k..(r + 1) * self.k]
    }

    /// `y` where the result lands, `A·u` for the points' rows.
    fn apply(&self, u: &[f64], out: &mut [f64]) {
        out.par_iter_mut().enumerate().with_min_len(4096).for_each(|(i, o)| {
            *o = self.row(i)[0] * u[i] + self.off_diagonal(i, u);
        });
    }

    /// `Σ a_ij·u_j` over the neighbours of point `i`, in four partial sums (a single running
    /// sum made the sweep wait on each multiply-add in turn).
    #[inline]
    fn off_diagonal(&self, i: usize, u: &[f64]) -> f64 {
        let row = self.row(i);
        let nb = &self.nbr[i * self.k..(i + 1) * self.k];
        let term = |t: usize| {
            let q = nb[t];
            if q == NONE { 0.0 } else { row[t] * u[q as usize] }
        };
        let (mut a0, mut a1, mut a2, mut a3) = (0f64, 0f64, 0f64, 0f64);
        let mut t = 1;
        while t + 3 < self.k {
            a0 += term(t);
            a1 += term(t + 1);
            a2 += term(t + 2);
            a3 += term(t + 3);
            t += 4;
        }
        while t < self.k {
            a0 += term(t);
            t += 1;
        }
        (a0 + a1) + (a2 + a3)
    }

    fn relax(&self, i: usize, u: &mut [f64], b: &[f64]) {
        u[i] = (b[i] - self.off_diagonal(i, u)) / self.row(i)[0];
    }

    fn sweep(&self, u: &mut [f64], b: &[f64], backward: bool) {
        if backward {
            for i in (0..self.n).rev() {
                self.relax(i, u, b);
            }
        } else {
            for i in 0..self.n {
                self.relax(i, u, b);
            }
        }
    }
}

/// Points of a level in row-major order with a per-row index, for lookups by position.
struct Points {
    xs: Vec<u32>,
    ys: Vec<u32>,
    row_start: Vec<usize>,
}

impl Points {
    fn new(pos: Vec<(u32, u32)>, h: usize) -> Self {
        let mut row_start = vec![0usize; h + 1];
        for &(_, y) in &pos {
            row_start[y as usize + 1] += 1;
        }
        for y in 0..h {
            row_start[y + 1] += row_start[y];
        }
        Self { xs: pos.iter().map(|p| p.0).collect(), ys: pos.iter().map(|p| p.1).collect(), row_start }
    }

    fn len(&self) -> usize {
        self.xs.len()
    }

    #[allow(clippy::cast_possible_truncation, clippy::cast_sign_loss)]
    fn find(&self, x: i64, y: i64) -> u32 {
        if x < 0 || y < 0 || y as usize + 1 >= self.row_start.len() {
            return NONE;
        }
        let (a, b) = (self.row_start[y as usize], self.row_start[y as usize + 1]);
        match self.xs[a..b].binary_search(&(x as u32)) {
            Ok(k) => crate::mask::index_u32(a + k),
            Err(_) => NONE,
        }
    }

    fn at(&self, i: usize) -> (i64, i64) {
        (i64::from(self.xs[i]), i64::from(self.ys[i]))
    }
}

fn neighbours(points: &Points, offsets: &[(i64, i64)]) -> Vec<u32> {
    (0..points.len())
        .into_par_iter()
        .flat_map_iter(|i| {
            let (x, y) = points.at(i);
            offsets.iter().map(move |&(dx, dy)| points.find(x + dx, y + dy))
        })
        .collect()
}

/// The coarsest level's solver.
#[derive(Debug)]
enum Coarsest {
    Dense(Cholesky),
    Relax,
}

/// The biharmonic multigrid hierarchy of one mask.
#[derive(Debug)]
pub struct Hierarchy {
    width: usize,
    height: usize,
    /// `y·width + x` of every unknown, row-major.
    pixels: Vec<u32>,
    levels: Vec<Level>,
    coarsest: Coarsest,
    setup_seconds: f64,
}

#[allow(clippy::cast_possible_truncation, clippy::cast_possible_wrap, clippy::cast_sign_loss)]
fn coarsen(fine: &Level, points: &Points, h: usize) -> (Points, Vec<[u32; 4]>, Vec<f64>) {
    let pos: Vec<(u32, u32)> = (0..points.len())
        .filter(|&i| points.xs[i].is_multiple_of(2) && points.ys[i].is_multiple_of(2))
        .map(|i| (points.xs[i] / 2, points.ys[i] / 2))
        .collect();
    let coarse = Points::new(pos, h.div_ceil(2));
    let (parents, weights): (Vec<[u32; 4]>, Vec<f64>) = (0..fine.n)
        .into_par_iter()
        .map(|i| {
            let (x, y) = points.at(i);
            let xs: &[i64] = if x % 2 == 0 { &[x / 2, x / 2] } else { &[(x - 1) / 2, (x + 1) / 2] };
            let ys: &[i64] = if y % 2 == 0 { &[y / 2, y / 2] } else { &[(y - 1) / 2, (y + 1) / 2] };
            let nominal = (if x % 2 == 0 { 1.0 } else { 2.0 }) * (if y % 2 == 0 { 1.0 } else { 2.0 });
            let mut p = [NONE; 4];
            let mut k = 0;
            for (j, &py) in ys.iter().enumerate() {
                if j == 1 && y % 2 == 0 {
                    break;
                }
                for (m, &px) in xs.iter().enumerate() {
                    if m == 1 && x % 2 == 0 {
                        break;
                    }
                    p[k] = coarse.find(px, py);
                    k += 1;
                }
            }
            (p, 1.0 / nominal)
        })
        .unzip();
    (coarse, parents, weights)
}

/// The Galerkin operator `Pᵀ·A·P` on the coarse points, one 5×5 row each.
#[allow(clippy::cast_possible_wrap)]
fn galerkin(fine: &Level, fine_points: &Points, coarse: &Points, parents: &[[u32; 4]], weights: &[f64]) -> Vec<f64> {
    (0..coarse.len())
        .into_par_iter()
        .flat_map_iter(|c| {
            let (cx, cy) = coarse.at(c);
            let mut row = [0f64; 25];
            for dy in -1..=1 {
                for dx in -1..=1 {
                    let f = fine_points.find(2 * cx + dx, 2 * cy + dy);
                    if f == NONE {
                        continue;
                    }
                    let f = f as usize;
                    if !parents[f].contains(&crate::mask::index_u32(c)) {
                        continue;
                    }
                    let wf = weights[f];
                    let frow = fine.row(f);
                    for (&g, &a) in fine.nbr[f * fine.k..(f + 1) * fine.k].iter().zip(frow) {
                        if g == NONE || a == 0.0 {
                            continue;
                        }
                        let g = g as usize;
                        for &p in &parents[g] {
                            if p != NONE {
                                let (px, py) = coarse.at(p as usize);
                                row[square_index((px - cx, py - cy))] += wf * a * weights[g];
                            }
                        }
                    }
                }
            }
            COARSE.iter().map(move |&o| row[square_index(o)]).collect::<Vec<_>>()
        })
        .collect()
}

impl Hierarchy {
    /// Builds the hierarchy of `mask`.
    ///
    /// # Errors
    /// [`FillError::NoKnownPixels`] when every pixel is masked.
    #[allow(clippy::cast_possible_truncation, clippy::cast_possible_wrap, clippy::cast_sign_loss)]
    pub fn new(mask: &Mask) -> Result<Self, FillError> {
        let t0 = Instant::now();
        let (w, h) = (mask.width(), mask.height());
        let pixels: Vec<u32> =
            mask.bits().iter().enumerate().filter(|(_, b)| **b).map(|(i, _)| crate::mask::index_u32(i)).collect();
        if !pixels.is_empty() && pixels.len() == w * h {
            return Err(FillError::NoKnownPixels);
        }
        let pos: Vec<(u32, u32)> = pixels.iter().map(|&p| (p % w as u32, p / w as u32)).collect();
        let mut points = Points::new(pos, h);
        // Level 0: one row per image-edge class (distances to the four edges, capped at 2).
        let clamp = |v: i64| v.min(2) as usize;
        let mut class_of = [u8::MAX; 81];
        let mut rows = Vec::new();
        let mut class = Vec::with_capacity(points.len());
        for i in 0..points.len() {
            let (x, y) = points.at(i);
            let key = clamp(x) + 3 * clamp(w as i64 - 1 - x) + 9 * clamp(y) + 27 * clamp(h as i64 - 1 - y);
            if class_of[key] == u8::MAX {
                class_of[key] = (rows.len() / FINE.len()) as u8;
                let square = fine_row(x, y, w as i64, h as i64);
                rows.extend(FINE.iter().map(|&o| square[square_index(o)]));
            }
            class.push(class_of[key]);
        }
        let nbr = neighbours(&points, &FINE);
        let mut levels =
            vec![Level { n: points.len(), k: FINE.len(), nbr, rows, class, parents: Vec::new(), pweight: Vec::new() }];
        let mut lh = h;
        while let Some(fine) = levels.last_mut() {
            if fine.n <= COARSEST_MAX {
                break;
            }
            let (coarse, parents, weights) = coarsen(fine, &points, lh);
            #[allow(clippy::cast_precision_loss)]
            if coarse.len() == 0 || coarse.len() as f64 > MIN_REDUCTION * fine.n as f64 {
                break;
            }
            let rows = galerkin(fine, &points, &coarse, &parents, &weights);
            fine.parents = parents;
            fine.pweight = weights;
            let nbr = neighbours(&coarse, &COARSE);
            levels.push(Level {
                n: coarse.len(),
                k: COARSE.len(),
                nbr,
                rows,
                class: Vec::new(),
                parents: Vec::new(),
                pweight: Vec::new(),
            });
            points = coarse;
            lh = lh.div_ceil(2);
        }
        let coarsest = match levels.last() {
            Some(last) if last.n <= DENSE_MAX => {
                let n = last.n;
                let mut a = vec![0f64; n * n];
                for i in 0..n {
                    let row = last.row(i);
                    a[i * n + i] += row[0];
                    for (&j, &v) in last.nbr[i * last.k..(i + 1) * last.k].iter().zip(row).skip(1) {
                        if j != NONE {
                            a[i * n + j as usize] += v;
                        }
                    }
                }
                // Symmetrise against rounding in the Galerkin sums.
                for i in 0..n {
                    for j in 0..i {
                        let m = 0.5 * (a[i * n + j] + a[j * n + i]);
                        a[i * n + j] = m;
                        a[j * n + i] = m;
                    }
                }
                Cholesky::factor(n, a).map_or(Coarsest::Relax, Coarsest::Dense)
            }
            _ => Coarsest::Relax,
        };
        Ok(Self { width: w, height: h, pixels, levels, coarsest, setup_seconds: t0.elapsed().as_secs_f64() })
    }

    /// Number of unknowns.
    #[must_use]
    pub fn unknowns(&self) -> usize {
        self.pixels.len()
    }

    /// Number of levels.
    #[must_use]
    pub fn depth(&self) -> usize {
        if self.pixels.is_empty() { 0 } else { self.levels.len() }
    }

    /// Seconds spent building the hierarchy.
    #[must_use]
    pub fn setup_seconds(&self) -> f64 {
        self.setup_seconds
    }

    /// The right-hand side of one plane: `−Σ B_pr·f_r` over the known pixels `r` of each row.
    #[allow(clippy::cast_possible_wrap, clippy::cast_sign_loss)]
    fn rhs(&self, plane: &[f32], mask: &[bool]) -> Result<Vec<f64>, FillError> {
        let (w, h) = (self.width as i64, self.height as i64);
        let level = &self.levels[0];
        self.pixels
            .par_iter()
            .enumerate()
            .map(|(i, &p)| {
                let (x, y) = (i64::from(p) % w, i64::from(p) / w);
                let row = level.row(i);
                let mut s = 0f64;
                for (t, &(dx, dy)) in FINE.iter().enumerate().skip(1) {
                    let (ax, ay) = (x + dx, y + dy);
                    if ax < 0 || ay < 0 || ax >= w || ay >= h || row[t] == 0.0 {
                        continue;
                    }
                    let q = (ay * w + ax) as usize;
                    if mask[q] {
                        continue;
                    }
                    let v = plane[q];
                    if !v.is_finite() {
                        return Err(FillError::NonFiniteRim { x: ax as usize, y: ay as usize });
                    }
                    s -= row[t] * f64::from(v);
                }
                Ok(s)
            })
            .collect()
    }

    /// Fills the unknowns of every plane; on error the planes are unchanged.
    pub(crate) fn solve(
        &self,
        planes: &mut [&mut [f32]],
        mask: &Mask,
        params: &FillParams,
        start: Start,
        progress: &mut (dyn FnMut(&Progress) -> bool + Send),
    ) -> Result<Vec<ChannelReport>, FillError> {
        if self.pixels.is_empty() {
            return Ok(vec![ChannelReport::default(); planes.len()]);
        }
        let rhs: Vec<Vec<f64>> = planes.iter().map(|p| self.rhs(p, mask.bits())).collect::<Result<_, _>>()?;
        let starts: Vec<Vec<f64>> = planes
            .iter()
            .map(|p| {
                self.pixels
                    .iter()
                    .map(|&q| {
                        let v = f64::from(p[q as usize]);
                        if start == Start::Warm && v.is_finite() { v } else { 0.0 }
                    })
                    .collect()
            })
            .collect();
        let mut states: Vec<Pcg> = rhs.into_iter().zip(starts).map(|(b, x)| Pcg::new(self, b, x)).collect();
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
            states.par_iter_mut().zip(&done).filter(|(_, d)| !**d).for_each(|(s, _)| s.step(self, params));
            iteration += 1;
        }
        // The recurrence's residual drifts from the true one; report the true one.
        for (c, s) in states.iter_mut().enumerate() {
            let rel = s.true_relative(self);
            reports[c].relative_residual = rel;
            if let Some(last) = reports[c].history.last_mut() {
                *last = rel;
            }
        }
        for (plane, s) in planes.iter_mut().zip(&states) {
            for (&p, &v) in self.pixels.iter().zip(&s.x) {
                #[allow(clippy::cast_possible_truncation)]
                {
                    plane[p as usize] = v as f32;
                }
            }
        }
        Ok(reports)
    }

    /// One symmetric cycle (`kind`) from level `l` with a zero start: `u ≈ A⁻¹·b`.
    fn vcycle(&self, l: usize, work: &mut [LevelWork], params: &FillParams, kind: Cycle) {
        let level = &self.levels[l];
        let (head, tail) = work.split_at_mut(l + 1);
        let w = &mut head[l];
        w.u.fill(0.0);
        if l + 1 == self.levels.len() {
            match &self.coarsest {
                Coarsest::Dense(ch) => {
                    w.u.copy_from_slice(&w.b);
                    ch.solve_in_place(&mut w.u);
                }
                Coarsest::Relax => {
                    for _ in 0..COARSEST_SWEEPS {
                        level.sweep(&mut w.u, &w.b, false);
                        level.sweep(&mut w.u, &w.b, true);
                    }
                }
            }
            return;
        }
        let sweeps = if l == 0 { params.pre_smooth.max(1) } else { COARSE_SWEEPS };
        for _ in 0..sweeps {
            level.sweep(&mut w.u, &w.b, false);
        }
        level.apply(&w.u, &mut w.r);
        let next = &mut tail[0];
        next.b.fill(0.0);
        for i in 0..level.n {
            let r = w.b[i] - w.r[i];
            for &p in &level.parents[i] {
                if p != NONE {
                    next.b[p as usize] += level.pweight[i] * r;
                }
            }
        }
        let (first, second) = match kind {
            Cycle::V => (Cycle::V, None),
            Cycle::W => (Cycle::W, Some(Cycle::W)),
            Cycle::F => (Cycle::F, Some(Cycle::V)),
        };
        self.vcycle(l + 1, work, params, first);
        if let Some(second) = second
            && l + 2 < self.levels.len()
        {
            // A second visit, on what the first left of the coarse residual.
            let coarse = &self.levels[l + 1];
            let next = &mut work[l + 1];
            next.keep.copy_from_slice(&next.u);
            coarse.apply(&next.u, &mut next.r);
            for (b, ax) in next.b.iter_mut().zip(&next.r) {
                *b -= ax;
            }
            self.vcycle(l + 1, work, params, second);
            let next = &mut work[l + 1];
            for (u, k) in next.u.iter_mut().zip(&next.keep) {
                *u += k;
            }
        }
        let (head, tail) = work.split_at_mut(l + 1);
        let (w, next) = (&mut head[l], &tail[0]);
        for i in 0..level.n {
            let mut e = 0.0;
            for &p in &level.parents[i] {
                if p != NONE {
                    e += next.u[p as usize];
                }
            }
            w.u[i] += level.pweight[i] * e;
        }
        for _ in 0..sweeps {
            level.sweep(&mut w.u, &w.b, true);
        }
    }
}

/// Scratch of one level for the preconditioner.
struct LevelWork {
    u: Vec<f64>,
    b: Vec<f64>,
    r: Vec<f64>,
    /// The first visit's correction during the second visit of a W-cycle.
    keep: Vec<f64>,
}

/// The state of preconditioned conjugate gradients for one channel.
struct Pcg {
    b: Vec<f64>,
    bnorm: f64,
    x: Vec<f64>,
    r: Vec<f64>,
    p: Vec<f64>,
    q: Vec<f64>,
    rz: f64,
    work: Vec<LevelWork>,
    started: bool,
}

fn dot(a: &[f64], b: &[f64]) -> f64 {
    a.par_iter().zip(b).with_min_len(8192).map(|(x, y)| x * y).sum()
}

impl Pcg {
    fn new(hier: &Hierarchy, b: Vec<f64>, x: Vec<f64>) -> Self {
        let n = b.len();
        let work = hier
            .levels
            .iter()
            .map(|l| LevelWork { u: vec![0.0; l.n], b: vec![0.0; l.n], r: vec![0.0; l.n], keep: vec![0.0; l.n] })
            .collect();
        let mut q = vec![0.0; n];
        hier.levels[0].apply(&x, &mut q);
        let r: Vec<f64> = b.iter().zip(&q).map(|(b, ax)| b - ax).collect();
        let bnorm = dot(&b, &b).sqrt();
        Self { b, bnorm, x, r, p: vec![0.0; n], q, rz: 0.0, work, started: false }
    }

    fn relative(&self) -> f64 {
        let rn = dot(&self.r, &self.r).sqrt();
        if self.bnorm > 0.0 { rn / self.bnorm } else { rn }
    }

    fn true_relative(&mut self, hier: &Hierarchy) -> f64 {
        hier.levels[0].apply(&self.x, &mut self.q);
        let rn: f64 = self.b.iter().zip(&self.q).map(|(b, ax)| (b - ax) * (b - ax)).sum::<f64>().sqrt();
        if self.bnorm > 0.0 { rn / self.bnorm } else { rn }
    }

    /// One preconditioned conjugate-gradient step.
    fn step(&mut self, hier: &Hierarchy, params: &FillParams) {
        self.work[0].b.copy_from_slice(&self.r);
        hier.vcycle(0, &mut self.work, params, CYCLE);
        let z = &self.work[0].u;
        let rz = dot(&self.r, z);
        if self.started && self.rz != 0.0 {
            let beta = rz / self.rz;
            self.p.par_iter_mut().zip(z).for_each(|(p, z)| *p = z + beta * *p);
        } else {
            self.p.copy_from_slice(z);
            self.started = true;
        }
        self.rz = rz;
        hier.levels[0].apply(&self.p, &mut self.q);
        let pq = dot(&self.p, &self.q);
        if pq <= 0.0 || !pq.is_finite() {
            return;
        }
        let alpha = rz / pq;
        self.x.par_iter_mut().zip(&self.p).for_each(|(x, p)| *x += alpha * p);
        self.r.par_iter_mut().zip(&self.q).for_each(|(r, q)| *r -= alpha * q);
    }
}
