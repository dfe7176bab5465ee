//! The multigrid cycle and the outer iteration.
//!
//! A cycle on level `l`: `pre_smooth` Gauss-Seidel sweeps (colours in order), the residual,
//! its restriction `Pᵀ·r` as the right-hand side of level `l+1` with a zero start, a cycle there,
//! the interpolated correction added back, and `post_smooth` sweeps (colours in reverse order, so
//! a cycle with equal sweep counts is a symmetric operator). The coarsest level is solved exactly
//! by a dense Cholesky factorisation. The iteration starts with full multigrid (the right-hand
//! side restricted to every level, solved on the coarsest, interpolated and cycled on the way up)
//! unless a warm start is asked for, and runs in `f64` so the relative residual can go far below
//! the `f32` rounding of the values.

use std::convert::Infallible;
use std::ops::Range;

use rayon::prelude::*;

use super::hierarchy::{Coarsest, Hierarchy, K_FINE, Level};
use super::kernels;
use super::{Cycle, FillError, FillParams, GroupResult, Levels, Progress, Start};

/// Image rows per task in the passes that read or write the image planes.
const BAND_ROWS: usize = 32;

/// A band of image rows and the level-0 unknowns in it: an index range of each colour.
struct Band {
    rows: Range<usize>,
    colours: [Range<usize>; 2],
}

/// Cuts the image into bands of [`BAND_ROWS`] rows, for passes over level 0 in pixel order.
fn pixel_bands(lv0: &Level, w: usize, h: usize) -> Vec<Band> {
    let cut = |colour: &Range<usize>, y: usize| {
        colour.start + lv0.pos[colour.clone()].partition_point(|&p| (p as usize) < y * w)
    };
    (0..h)
        .step_by(BAND_ROWS)
        .map(|y| {
            let rows = y..(y + BAND_ROWS).min(h);
            let colours = [0, 1].map(|c| cut(&lv0.colours[c], rows.start)..cut(&lv0.colours[c], rows.end));
            Band { rows, colours }
        })
        .collect()
}

impl Band {
    /// Calls `f(i, colour, k)` for the unknowns `i` of the band in pixel order, where `k` is the
    /// index of `i` in the band's slice of that colour (see [`Band::split`]). Level 0 keeps its
    /// unknowns by colour; merging the colours visits each image row once instead of twice.
    fn for_each<E>(&self, pos: &[u32], mut f: impl FnMut(usize, usize, usize) -> Result<(), E>) -> Result<(), E> {
        let [red, black] = &self.colours;
        let (mut a, mut b) = (red.start, black.start);
        while a < red.end || b < black.end {
            if b == black.end || (a < red.end && pos[a] < pos[b]) {
                f(a, 0, a - red.start)?;
                a += 1;
            } else {
                f(b, 1, b - black.start)?;
                b += 1;
            }
        }
        Ok(())
    }

    /// Splits a level-0 vector with `c` entries per unknown (without its ghost) into each band's
    /// slices of the two colours.
    fn split<'v, T>(bands: &[Band], v: &'v mut [T], c: usize) -> Vec<[&'v mut [T]; 2]> {
        let reds = bands.last().map_or(0, |b| b.colours[0].end);
        let (mut red, mut black) = v.split_at_mut(reds * c);
        bands
            .iter()
            .map(|band| {
                let (r, rest) = std::mem::take(&mut red).split_at_mut(band.colours[0].len() * c);
                red = rest;
                let (k, rest) = std::mem::take(&mut black).split_at_mut(band.colours[1].len() * c);
                black = rest;
                [r, k]
            })
            .collect()
    }
}

/// Per-level vectors for `C` channels: solution (or correction), right-hand side and residual,
/// each `(n + 1) · C` long (the last point is the ghost).
struct LevelWork {
    u: Vec<f64>,
    b: Vec<f64>,
    r: Vec<f64>,
}

/// The cycle's state. All scratch is allocated here, once; the cycle itself allocates nothing.
struct Cycler<'a, const C: usize> {
    h: &'a Hierarchy,
    params: &'a FillParams,
    work: Vec<LevelWork>,
    /// Partial sums of the residual norm.
    partial: Vec<[f64; C]>,
    /// One channel of the coarsest level, for the dense solve.
    coarse_x: Vec<f64>,
    /// Per level, the colour the last pass swept, while no other pass has changed the iterate
    /// since: its residual is zero up to rounding, so residuals skip it.
    relaxed_last: Vec<Option<usize>>,
}

fn sweep<const C: usize>(level: &Level, colour: usize, u: &mut [f64], b: &[f64]) {
    let range = level.colours[colour].clone();
    if level.k == K_FINE {
        kernels::sweep::<{ K_FINE }, C>(level, range, u, b);
    } else {
        kernels::sweep::<{ super::hierarchy::K_COARSE }, C>(level, range, u, b);
    }
}

/// The residual of `level`, skipping the colour `relaxed` (see [`kernels::residual`]).
fn residual<const C: usize>(
    level: &Level,
    u: &[f64],
    b: &[f64],
    r: &mut [f64],
    partial: &mut [[f64; C]],
    relaxed: Option<usize>,
) -> [f64; C] {
    let relaxed = relaxed.map_or(0..0, |c| level.colours[c].clone());
    if level.k == K_FINE {
        kernels::residual::<{ K_FINE }, C>(level, u, b, r, partial, relaxed)
    } else {
        kernels::residual::<{ super::hierarchy::K_COARSE }, C>(level, u, b, r, partial, relaxed)
    }
}

impl<'a, const C: usize> Cycler<'a, C> {
    fn new(h: &'a Hierarchy, params: &'a FillParams) -> Self {
        let work = h
            .levels
            .iter()
            .map(|l| {
                let len = (l.n + 1) * C;
                LevelWork { u: vec![0.0; len], b: vec![0.0; len], r: vec![0.0; len] }
            })
            .collect();
        let partial = vec![[0f64; C]; kernels::partials_len(h.levels[0].n)];
        let coarse_x = vec![0f64; h.levels.last().map_or(0, |l| l.n)];
        let relaxed_last = vec![None; h.levels.len()];
        Self { h, params, work, partial, coarse_x, relaxed_last }
    }

    fn smooth(&mut self, l: usize, sweeps: usize, reverse: bool) {
        let level = &self.h.levels[l];
        let LevelWork { u, b, .. } = &mut self.work[l];
        let colours = level.colours.len();
        for _ in 0..sweeps {
            for k in 0..colours {
                let colour = if reverse { colours - 1 - k } else { k };
                sweep::<C>(level, colour, u, b);
                self.relaxed_last[l] = Some(colour);
            }
        }
    }

    fn coarsest(&mut self, l: usize) {
        match &self.h.coarsest {
            Coarsest::Dense(ch) => {
                let LevelWork { u, b, .. } = &mut self.work[l];
                let x = &mut self.coarse_x;
                for c in 0..C {
                    for (i, xi) in x.iter_mut().enumerate() {
                        *xi = b[i * C + c];
                    }
                    ch.solve_in_place(x);
                    for (i, xi) in x.iter().enumerate() {
                        u[i * C + c] = *xi;
                    }
                }
                self.relaxed_last[l] = None;
            }
            Coarsest::Relax(sweeps) => {
                let sweeps = *sweeps;
                self.smooth(l, sweeps, false);
                self.smooth(l, sweeps, true);
            }
        }
    }

    /// Restricts the residual of level `l` to the right-hand side of level `l+1` and zeroes the
    /// correction there.
    fn descend(&mut self, l: usize) {
        let (fine, coarse) = self.work.split_at_mut(l + 1);
        let (fw, cw) = (&mut fine[l], &mut coarse[0]);
        residual::<C>(&self.h.levels[l], &fw.u, &fw.b, &mut fw.r, &mut self.partial, self.relaxed_last[l]);
        kernels::restrict::<C>(&self.h.levels[l + 1], &fw.r, &mut cw.b);
        cw.u.fill(0.0);
        self.relaxed_last[l + 1] = None;
    }

    fn ascend(&mut self, l: usize) {
        let (fine, coarse) = self.work.split_at_mut(l + 1);
        kernels::prolong_add::<C>(&self.h.levels[l], &coarse[0].u, &mut fine[l].u);
        self.relaxed_last[l] = None;
    }

    /// Full multigrid from the right-hand side of level 0.
    fn full_multigrid(&mut self) {
        let depth = self.h.levels.len();
        for l in 0..depth - 1 {
            let (fine, coarse) = self.work.split_at_mut(l + 1);
            kernels::restrict::<C>(&self.h.levels[l + 1], &fine[l].b, &mut coarse[0].b);
        }
        self.coarsest(depth - 1);
        for l in (0..depth - 1).rev() {
            self.work[l].u.fill(0.0);
            self.ascend(l);
            self.cycle(l, self.params.cycle);
        }
    }
}

/// Solves one group of `C` planes over the hierarchy's unknowns.
pub(super) fn solve_group<const C: usize>(
    h: &Hierarchy,
    planes: &[&mut [f32]],
    params: &FillParams,
    start: Start,
    progress: &mut (dyn FnMut(&Progress) -> bool + Send),
) -> Result<GroupResult, FillError> {
    let mut cy = Cycler::<C>::new(h, params);
    let lv0 = &h.levels[0];
    let (w, hh) = (h.width, h.height);

    // Right-hand side: the known neighbours of every unknown (the in-image neighbours that are not
    // unknowns, whose stencil slots hold the ghost).
    let ghost = lv0.n;
    let bands = pixel_bands(lv0, w, hh);
    let warm = start == Start::Warm;
    let gather = |band: &Band, b: [&mut [f64]; 2], u: [&mut [f64]; 2]| -> Result<(), FillError> {
        let (mut b, mut u) = (b, u);
        band.for_each(&lv0.pos, |i, colour, k| {
            let (b, u) = (&mut *b[colour], &mut *u[colour]);
            let p = lv0.pos[i] as usize;
            let (x, y) = (p % w, p / w);
            // Slots: left, right, up, down (see the hierarchy's level 0).
            let sides =
                [(x > 0, p.wrapping_sub(1)), (x + 1 < w, p + 1), (y > 0, p.wrapping_sub(w)), (y + 1 < hh, p + w)];
            // Summed here and stored once: the vector is fresh, and reading its pages before
            // writing them would fault each page twice.
            let mut sum = [0f64; C];
            for (t, (inside, q)) in sides.into_iter().enumerate() {
                if !inside || lv0.nbr[i * K_FINE + t] as usize != ghost {
                    continue;
                }
                for (c, sc) in sum.iter_mut().enumerate() {
                    let v = planes[c][q];
                    if !v.is_finite() {
                        return Err(FillError::NonFiniteRim { x: q % w, y: q / w });
                    }
                    *sc += f64::from(v);
                }
            }
            b[k * C..(k + 1) * C].copy_from_slice(&sum);
            if warm {
                for c in 0..C {
                    let v = planes[c][p];
                    u[k * C + c] = if v.is_finite() { f64::from(v) } else { 0.0 };
                }
            }
            Ok(())
        })
    };
    let LevelWork { u, b, .. } = &mut cy.work[0];
    let checks: Vec<Result<(), FillError>> = Band::split(&bands, &mut b[..lv0.n * C], C)
        .into_par_iter()
        .zip(Band::split(&bands, &mut u[..lv0.n * C], C))
        .zip(&bands)
        .map(|((b, u), band)| gather(band, b, u))
        .collect();
    checks.into_iter().collect::<Result<(), FillError>>()?;
    let b_sq = kernels::norm_sq::<C>(&cy.work[0].b, lv0.n);
    let bnorm = b_sq.map(|s| if s > 0.0 { s.sqrt() } else { 1.0 });

    if start == Start::FullMultigrid {
        cy.full_multigrid();
    }
    let (reports, r_sq) = super::iterate(&mut cy, params, start, bnorm, progress)?;
    let mut values = std::mem::take(&mut cy.work[0].u);
    values.truncate(lv0.n * C);
    Ok(GroupResult {
        values,
        rounded: Vec::new(),
        reports,
        r_sq: r_sq.to_vec(),
        b_sq: b_sq.to_vec(),
        scale: vec![1.0; C],
    })
}

impl<const C: usize> Levels for Cycler<'_, C> {
    fn is_coarsest(&self, l: usize) -> bool {
        l + 1 == self.h.levels.len()
    }
    fn pre_smooth(&mut self, l: usize) {
        self.smooth(l, self.params.pre_smooth, false);
    }
    fn post_smooth(&mut self, l: usize) {
        self.smooth(l, self.params.post_smooth, true);
    }
    fn descend(&mut self, l: usize) {
        Cycler::descend(self, l);
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
        let lv0 = &self.h.levels[0];
        let LevelWork { u, b, r } = &mut self.work[0];
        residual::<C>(lv0, u, b, r, &mut self.partial, self.relaxed_last[0])
    }
    fn cycle(&mut self, kind: Cycle) {
        Levels::cycle(self, 0, kind);
    }
}

/// Writes a group's values into the planes.
pub(super) fn write_back(h: &Hierarchy, planes: &mut [&mut [f32]], first: usize, count: usize, values: &[f64]) {
    let lv0 = &h.levels[0];
    let w = h.width;
    let bands = pixel_bands(lv0, w, h.height);
    for (c, plane) in planes[first..first + count].iter_mut().enumerate() {
        plane.par_chunks_mut(BAND_ROWS * w).zip(&bands).for_each(|(rows, band)| {
            let offset = band.rows.start * w;
            let Ok(()) = band.for_each::<Infallible>(&lv0.pos, |i, _, _| {
                #[allow(clippy::cast_possible_truncation)] // planes are f32 by design
                {
                    rows[lv0.pos[i] as usize - offset] = values[i * count + c] as f32;
                }
                Ok(())
            });
        });
    }
}
