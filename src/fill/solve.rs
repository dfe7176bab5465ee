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

use super::hierarchy::{Coarsest, Hierarchy, K_FINE, Level};
use super::kernels;
use super::{Cycle, FillError, FillParams, GroupResult, Levels, Progress, Start};

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
}

fn sweep<const C: usize>(level: &Level, colour: usize, u: &mut [f64], b: &[f64]) {
    let range = level.colours[colour].clone();
    if level.k == K_FINE {
        kernels::sweep::<{ K_FINE }, C>(level, range, u, b);
    } else {
        kernels::sweep::<{ super::hierarchy::K_COARSE }, C>(level, range, u, b);
    }
}

fn residual<const C: usize>(level: &Level, u: &[f64], b: &[f64], r: &mut [f64], partial: &mut [[f64; C]]) -> [f64; C] {
    if level.k == K_FINE {
        kernels::residual::<{ K_FINE }, C>(level, u, b, r, partial)
    } else {
        kernels::residual::<{ super::hierarchy::K_COARSE }, C>(level, u, b, r, partial)
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
        Self { h, params, work, partial, coarse_x }
    }

    fn smooth(&mut self, l: usize, sweeps: usize, reverse: bool) {
        let level = &self.h.levels[l];
        let LevelWork { u, b, .. } = &mut self.work[l];
        let colours = level.colours.len();
        for _ in 0..sweeps {
            for k in 0..colours {
                let colour = if reverse { colours - 1 - k } else { k };
                sweep::<C>(level, colour, u, b);
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
        residual::<C>(&self.h.levels[l], &fw.u, &fw.b, &mut fw.r, &mut self.partial);
        kernels::restrict::<C>(&self.h.levels[l + 1], &fw.r, &mut cw.b);
        cw.u.fill(0.0);
    }

    fn ascend(&mut self, l: usize) {
        let (fine, coarse) = self.work.split_at_mut(l + 1);
        kernels::prolong_add::<C>(&self.h.levels[l], &coarse[0].u, &mut fine[l].u);
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

    // Right-hand side: the known neighbours of every unknown.
    {
        let b = &mut cy.work[0].b;
        for (i, &p) in lv0.pos.iter().enumerate() {
            let p = p as usize;
            let (x, y) = (p % w, p / w);
            let nbrs = [
                (x > 0).then(|| p - 1),
                (x + 1 < w).then(|| p + 1),
                (y > 0).then(|| p - w),
                (y + 1 < hh).then(|| p + w),
            ];
            for q in nbrs.into_iter().flatten() {
                if h.mask[q] {
                    continue;
                }
                for c in 0..C {
                    let v = planes[c][q];
                    if !v.is_finite() {
                        return Err(FillError::NonFiniteRim { x: q % w, y: q / w });
                    }
                    b[i * C + c] += f64::from(v);
                }
            }
        }
    }
    let b_sq = kernels::norm_sq::<C>(&cy.work[0].b, lv0.n);
    let bnorm = b_sq.map(|s| if s > 0.0 { s.sqrt() } else { 1.0 });

    match start {
        Start::FullMultigrid => cy.full_multigrid(),
        Start::Warm => {
            let u = &mut cy.work[0].u;
            for (i, &p) in lv0.pos.iter().enumerate() {
                for c in 0..C {
                    let v = planes[c][p as usize];
                    u[i * C + c] = if v.is_finite() { f64::from(v) } else { 0.0 };
                }
            }
        }
    }
    let (reports, r_sq) = super::iterate(&mut cy, params, start, bnorm, progress)?;
    let mut values = std::mem::take(&mut cy.work[0].u);
    values.truncate(lv0.n * C);
    Ok(GroupResult { values, reports, r_sq: r_sq.to_vec(), b_sq: b_sq.to_vec(), scale: vec![1.0; C] })
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
        residual::<C>(lv0, u, b, r, &mut self.partial)
    }
    fn cycle(&mut self, kind: Cycle) {
        Levels::cycle(self, 0, kind);
    }
}

/// Writes a group's values into the planes.
pub(super) fn write_back(h: &Hierarchy, planes: &mut [&mut [f32]], first: usize, count: usize, values: &[f64]) {
    for (i, &p) in h.levels[0].pos.iter().enumerate() {
        for c in 0..count {
            #[allow(clippy::cast_possible_truncation)] // planes are f32 by design
            {
                planes[first + c][p as usize] = values[i * count + c] as f32;
            }
        }
    }
}
