//! Index-list storage of the biharmonic hierarchy, for masks whose unknowns are a small share of
//! their bounding box (scratches, scattered pixels): points sorted row-major with their
//! neighbours' indices, so work and memory follow the unknowns however they are spread.

use std::ops::Range;

use rayon::prelude::*;

use super::{
    COARSE, COARSE_SWEEPS, COARSEST_MAX, COARSEST_SWEEPS, Coarsest, DENSE_MAX, FINE, FINE_SWEEPS, LevelWork,
    MIN_REDUCTION, NONE, Real, SECOND_VISITS, SHALLOW_SWEEPS, Shared, banded, bands, dense_coarsest, dot_run, fine_row,
    krylov_weights, square_index,
};

/// One level: points sorted row-major, their neighbours and operator rows, and the transfer to
/// the next coarser level.
#[derive(Debug)]
pub(super) struct Level {
    pub(super) n: usize,
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
    /// Ranges of points a sweep relaxes in parallel (bands of rows), then the seams between them.
    bands: Vec<Range<usize>>,
    seams: Vec<Range<usize>>,
}

impl Level {
    fn row(&self, i: usize) -> &[f64] {
        let r = if self.class.is_empty() { i } else { usize::from(self.class[i]) };
        &self.rows[r * self.k..(r + 1) * self.k]
    }

    /// `out = A·u` for the points' rows, summed in `f64` and rounded once to `out`'s precision.
    pub(super) fn apply<U: Real, O: Real>(&self, u: &[U], out: &mut [O]) {
        out.par_iter_mut().enumerate().with_min_len(4096).for_each(|(i, o)| {
            *o = O::of(self.row(i)[0] * u[i].get() + self.off_diagonal(i, |q| u[q].get()));
        });
    }

    /// `Σ a_ij·u_j` over the neighbours of point `i`, in four partial sums (a single running
    /// sum made the sweep wait on each multiply-add in turn).
    #[inline]
    fn off_diagonal(&self, i: usize, u: impl Fn(usize) -> f64) -> f64 {
        let row = self.row(i);
        let nb = &self.nbr[i * self.k..(i + 1) * self.k];
        let term = |t: usize| {
            let q = nb[t];
            if q == NONE { 0.0 } else { row[t] * u(q as usize) }
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

    /// One lexicographic Gauss-Seidel sweep, forward or backward: the bands in parallel, then
    /// the seams between them (backward: the other way round, so the pair is symmetric).
    fn sweep(&self, u: &mut [f64], b: &[f64], backward: bool) {
        let shared = Shared(u.as_mut_ptr(), u.len());
        banded(&self.bands, &self.seams, backward, |points, _| {
            let relax = |i: usize| {
                // SAFETY: the parts of one phase are at least three rows apart, beyond the
                // stencils' reach of two, so no task reads or writes a point another task
                // writes; indices are points of this level.
                let v = (b[i] - self.off_diagonal(i, |q| unsafe { shared.get(q) })) / self.row(i)[0];
                unsafe { shared.set(i, v) };
            };
            if backward {
                points.rev().for_each(relax);
            } else {
                points.for_each(relax);
            }
        });
    }
}

/// A level with fewer points is swept by one thread.
const PARALLEL_POINTS: usize = 8192;

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

    /// [`bands`] of the points; one band for a level too small to share out.
    fn bands(&self) -> (Vec<Range<usize>>, Vec<Range<usize>>) {
        if self.len() < PARALLEL_POINTS {
            return (std::iter::once(0..self.len()).collect(), Vec::new());
        }
        let rows = self.row_start.len() - 1;
        bands(rows, |row| self.row_start[row.min(rows)], self.len())
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

/// The levels of one mask, finest first.
#[derive(Debug)]
pub(super) struct Levels {
    pub(super) levels: Vec<Level>,
    coarsest: Coarsest,
}

impl Levels {
    /// Bytes held by the levels.
    pub(super) fn memory_bytes(&self) -> usize {
        use std::mem::size_of_val;
        self.levels
            .iter()
            .map(|l| {
                size_of_val(l.nbr.as_slice())
                    + size_of_val(l.rows.as_slice())
                    + size_of_val(l.class.as_slice())
                    + size_of_val(l.parents.as_slice())
                    + size_of_val(l.pweight.as_slice())
            })
            .sum()
    }

    /// The hierarchy of the unknowns at `pos` (row-major) in a `w × h` image.
    #[allow(clippy::cast_possible_truncation, clippy::cast_possible_wrap)]
    /// `shallow`: the finest level alone, preconditioned by sweeps ([`super::SHALLOW_SQUARE`]).
    pub(super) fn new(pos: Vec<(u32, u32)>, w: usize, h: usize, shallow: bool) -> Self {
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
        let mut levels = vec![Level {
            n: points.len(),
            k: FINE.len(),
            nbr,
            rows,
            class,
            parents: Vec::new(),
            pweight: Vec::new(),
            bands: Vec::new(),
            seams: Vec::new(),
        }];
        (levels[0].bands, levels[0].seams) = points.bands();
        if shallow {
            return Self { levels, coarsest: Coarsest::Relax(SHALLOW_SWEEPS) };
        }
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
                bands: Vec::new(),
                seams: Vec::new(),
            });
            if let Some(level) = levels.last_mut() {
                (level.bands, level.seams) = coarse.bands();
            }
            points = coarse;
            lh = lh.div_ceil(2);
        }
        let coarsest = match levels.last() {
            Some(last) if last.n <= DENSE_MAX => dense_coarsest(last.n, |i, add| {
                let row = last.row(i);
                for (&j, &v) in last.nbr[i * last.k..(i + 1) * last.k].iter().zip(row) {
                    if j != NONE {
                        add(j as usize, v);
                    }
                }
            }),
            _ => Coarsest::Relax(COARSEST_SWEEPS),
        };
        Self { levels, coarsest }
    }

    /// Whether the finest level is the only one.
    pub(super) fn is_shallow(&self) -> bool {
        self.levels.len() == 1
    }

    /// One Gauss-Seidel sweep of the finest level.
    pub(super) fn sweep_finest(&self, u: &mut [f64], b: &[f64], backward: bool) {
        self.levels[0].sweep(u, b, backward);
    }

    /// One K-cycle from level `l` with a zero start: `u ≈ A⁻¹·b`.
    pub(super) fn cycle(&self, l: usize, work: &mut [LevelWork<f64>]) {
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
                Coarsest::Relax(pairs) => {
                    for _ in 0..*pairs {
                        level.sweep(&mut w.u, &w.b, false);
                        level.sweep(&mut w.u, &w.b, true);
                    }
                }
            }
            return;
        }
        let sweeps = if l == 0 { FINE_SWEEPS } else { COARSE_SWEEPS };
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
        self.cycle(l + 1, work);
        if l + 2 < self.levels.len() && l < SECOND_VISITS {
            self.second_visit(l + 1, work);
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

    /// Visits coarse level `l` again after [`Levels::cycle`] left `c₁` in its `u`, and combines
    /// the two corrections ([`krylov_weights`]). Overwrites the level's `b` and `r`.
    fn second_visit(&self, l: usize, work: &mut [LevelWork<f64>]) {
        let level = &self.levels[l];
        let w = &mut work[l];
        std::mem::swap(&mut w.u, &mut w.keep);
        level.apply(&w.keep, &mut w.r);
        let (rho1, alpha1) = (dot_run(&w.keep, &w.r), dot_run(&w.keep, &w.b));
        if !(rho1 > 0.0 && rho1.is_finite()) {
            std::mem::swap(&mut w.u, &mut w.keep);
            return;
        }
        let k = alpha1 / rho1;
        for (b, ac1) in w.b.iter_mut().zip(&w.r) {
            *b -= k * ac1;
        }
        self.cycle(l, work);
        let w = &mut work[l];
        level.apply(&w.u, &mut w.r);
        let (gamma, beta, alpha2) = (dot_run(&w.keep, &w.r), dot_run(&w.u, &w.r), dot_run(&w.u, &w.b));
        let (k1, k2) = krylov_weights(rho1, alpha1, gamma, beta, alpha2);
        for (u, c1) in w.u.iter_mut().zip(&w.keep) {
            *u = k1 * c1 + k2 * *u;
        }
    }
}
