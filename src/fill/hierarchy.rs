//! The multigrid level hierarchy of one mask.
//!
//! Level 0 holds the masked pixels themselves with the 5-point operator of the fill: for an
//! unknown pixel `p`, `deg(p)·u_p − Σ u_q` over its in-image neighbours `q`, where a known
//! neighbour moves to the right-hand side and a neighbour outside the image is left out (natural
//! boundary). Each coarser level takes the points of the finer level whose coordinates are both
//! even (so a coarse point always sits on a fine unknown, and the prolongation has full column
//! rank), interpolates bilinearly to the finer unknowns (a coarse point that does not exist, for
//! example because the pixel under it is known, contributes zero: that is the Dirichlet
//! condition), and gets the Galerkin operator `Pᵀ·A·P`. The Galerkin operator keeps the exact
//! position of the Dirichlet boundary on every level, which is what makes the cycle converge on
//! any mask (thin scratches, isolated pixels, frames, random dropout); see DEVELOPERS.md.
//!
//! Every level stores its points compactly, so memory and work follow the unknowns, not the
//! pixels. Points are ordered by colour (2 colours on level 0, 4 on coarse levels, whose 9-point
//! stencils need them) so that a Gauss-Seidel sweep over one colour is a contiguous, parallel loop.

use std::ops::Range;

use rayon::prelude::*;

use super::dense::Cholesky;

/// Stencil slots of level 0 (the 5-point operator without its centre).
pub(crate) const K_FINE: usize = 4;
/// Stencil slots of coarse levels (the 9-point Galerkin operator without its centre).
pub(crate) const K_COARSE: usize = 8;
/// Interpolation parents per point.
pub(crate) const PARENTS: usize = 4;
/// Children per coarse point (its 3×3 neighbourhood on the finer level).
pub(crate) const CHILDREN: usize = 9;

/// Stop coarsening once a level has at most this many points; it is then solved directly.
const COARSEST_MAX: usize = 256;
/// A coarse level must have at most this share of the finer level's points to be worth making.
const MIN_REDUCTION: f64 = 0.7;
/// Largest coarsest level that is factored densely; above it, the coarsest level is relaxed.
const DENSE_MAX: usize = 1500;

/// One level of the hierarchy.
#[derive(Debug)]
pub(crate) struct Level {
    /// Grid width and height of this level.
    pub w: usize,
    pub h: usize,
    /// Number of points (unknowns); index `n` is the ghost point whose value is always zero.
    pub n: usize,
    /// Stencil slots per point (`K_FINE` or `K_COARSE`).
    pub k: usize,
    /// `y * w + x` of every point on this level's grid.
    pub pos: Vec<u32>,
    /// Index ranges of the colours, in sweep order.
    pub colours: Vec<Range<usize>>,
    /// Neighbour indices, `k` per point; unused slots point at the ghost.
    pub nbr: Vec<u32>,
    /// Off-diagonal operator entries matching `nbr` (zero for the ghost). Empty on level 0, whose
    /// entries are all −1 (see [`Level::coef_at`]).
    pub coef: Vec<f32>,
    pub diag: Vec<f64>,
    pub inv_diag: Vec<f64>,
    /// Interpolation from the next coarser level: `PARENTS` coarse indices and weights per
    /// point (empty on the coarsest level; unused slots point at the coarse ghost).
    pub parents: Vec<u32>,
    pub pweights: Vec<f32>,
    /// Restriction from the next finer level: `CHILDREN` fine indices and weights per point
    /// (empty on level 0; unused slots point at the fine ghost).
    pub children: Vec<u32>,
    pub cweights: Vec<f32>,
}

impl Level {
    /// The off-diagonal entry in stencil slot `t` of point `i` (zero for an unused slot).
    pub(crate) fn coef_at(&self, i: usize, t: usize) -> f32 {
        if self.k == K_FINE {
            if self.nbr[i * K_FINE + t] as usize == self.n { 0.0 } else { -1.0 }
        } else {
            self.coef[i * self.k + t]
        }
    }
}

/// How the coarsest level is solved.
#[derive(Debug)]
pub(crate) enum Coarsest {
    Dense(Cholesky),
    /// Symmetric Gauss-Seidel sweeps (used only when coarsening stalled on a level that is
    /// well conditioned, such as scattered single pixels).
    Relax(usize),
}

/// The multigrid hierarchy of one mask: everything the solver needs that does not depend on the
/// image values. Build it once per mask; it serves any number of images and channels.
#[derive(Debug)]
pub struct Hierarchy {
    pub(crate) width: usize,
    pub(crate) height: usize,
    pub(crate) levels: Vec<Level>,
    pub(crate) coarsest: Coarsest,
}

impl Hierarchy {
    /// Builds the hierarchy of `mask`. Returns `None` when the mask is empty.
    #[cfg(test)]
    pub(crate) fn build(mask: &crate::mask::Mask) -> Option<Self> {
        Self::from_runs(mask.width(), mask.height(), &crate::mask::row_runs(mask))
    }

    /// [`Hierarchy::build`] for the mask whose unknowns are `runs` (`[a, b)` per row) in a
    /// `w × h` image.
    pub(crate) fn from_runs(w: usize, h: usize, runs: &[Vec<(u32, u32)>]) -> Option<Self> {
        let fine = fine_level(w, h, runs);
        if fine.n == 0 {
            return None;
        }
        let mut levels = vec![fine];
        loop {
            let last = levels.last_mut()?;
            if last.n <= COARSEST_MAX || (last.w <= 2 && last.h <= 2) {
                break;
            }
            let (coarse, parents, pweights) = coarsen(last);
            #[allow(clippy::cast_precision_loss)] // point counts are far below 2^52
            let enough = coarse.n > 0 && (coarse.n as f64) <= MIN_REDUCTION * last.n as f64;
            if !enough {
                break;
            }
            last.parents = parents;
            last.pweights = pweights;
            levels.push(coarse);
        }
        let last = levels.last()?;
        let coarsest = if last.n <= DENSE_MAX {
            Cholesky::factor(last.n, dense_matrix(last)).map_or(Coarsest::Relax(8), Coarsest::Dense)
        } else {
            Coarsest::Relax(8)
        };
        Some(Self { width: w, height: h, levels, coarsest })
    }

    /// Number of unknowns (masked pixels).
    #[must_use]
    pub fn unknowns(&self) -> usize {
        self.levels[0].n
    }

    /// Number of multigrid levels.
    #[must_use]
    pub fn depth(&self) -> usize {
        self.levels.len()
    }

    /// Points per level, finest first.
    #[must_use]
    pub fn level_sizes(&self) -> Vec<usize> {
        self.levels.iter().map(|l| l.n).collect()
    }

    /// Bytes held by the hierarchy (not counting the per-image workspace).
    #[must_use]
    pub fn memory_bytes(&self) -> usize {
        let mut total = 0;
        for l in &self.levels {
            total += l.pos.len() * 4
                + l.nbr.len() * 4
                + l.coef.len() * 4
                + l.diag.len() * 8
                + l.inv_diag.len() * 8
                + l.parents.len() * 4
                + l.pweights.len() * 4
                + l.children.len() * 4
                + l.cweights.len() * 4;
        }
        if let Coarsest::Dense(_) = &self.coarsest {
            let n = self.levels.last().map_or(0, |l| l.n);
            total += n * n * 8;
        }
        total
    }
}

/// Finds a level's point index from its grid position: one bit per grid cell saying whether a
/// point is there, the number of points before every word of bits (row-major), and the points in
/// row-major order. A lookup is a bit test and a population count; building one is linear in the
/// points plus a pass over `w·h/64` words, with no sorting.
struct PosIndex {
    w: usize,
    words: usize,
    bits: Vec<u64>,
    before: Vec<u32>,
    ids: Vec<u32>,
}

impl PosIndex {
    fn new(w: usize, h: usize, pos: &[u32]) -> Self {
        let words = w.div_ceil(64);
        let mut bits = vec![0u64; words * h];
        for &p in pos {
            let (x, y) = (p as usize % w, p as usize / w);
            bits[y * words + x / 64] |= 1 << (x % 64);
        }
        let mut before = Vec::with_capacity(bits.len());
        let mut count = 0u32;
        for &word in &bits {
            before.push(count);
            count += word.count_ones();
        }
        let mut index = Self { w, words, bits, before, ids: vec![0; pos.len()] };
        for (i, &p) in pos.iter().enumerate() {
            let rank = index.rank(p as usize % w, p as usize / w);
            index.ids[rank] = to_u32(i);
        }
        index
    }

    /// The row-major rank of the cell `(x, y)` among the points.
    fn rank(&self, x: usize, y: usize) -> usize {
        let k = y * self.words + x / 64;
        let below = (1u64 << (x % 64)) - 1;
        self.before[k] as usize + (self.bits[k] & below).count_ones() as usize
    }

    /// The index of the point at `(x, y)`, if there is one (the caller keeps `(x, y)` in the grid).
    fn get(&self, x: usize, y: usize) -> Option<u32> {
        debug_assert!(x < self.w);
        let k = y * self.words + x / 64;
        (self.bits[k] >> (x % 64) & 1 == 1).then(|| self.ids[self.rank(x, y)])
    }
}

fn to_u32(i: usize) -> u32 {
    u32::try_from(i).expect("index fits in u32 (image size is limited on load)")
}

/// Level 0: the masked pixels, 2 colours (red-black), 5-point operator.
fn fine_level(w: usize, h: usize, runs: &[Vec<(u32, u32)>]) -> Level {
    let mut pos = Vec::with_capacity(runs.iter().flatten().map(|&(a, b)| (b - a) as usize).sum());
    let mut colours = Vec::with_capacity(2);
    for colour in 0..2 {
        let start = pos.len();
        for (y, row) in runs.iter().enumerate() {
            for &(a, b) in row {
                let (a, b) = (a as usize, b as usize);
                // The first x >= a with (x + y) % 2 == colour.
                let first = a + (a + y + colour) % 2;
                pos.extend((first..b).step_by(2).map(|x| to_u32(y * w + x)));
            }
        }
        colours.push(start..pos.len());
    }
    let n = pos.len();
    let index = PosIndex::new(w, h, &pos);
    let ghost = to_u32(n);
    let mut nbr = vec![ghost; n * K_FINE];
    let mut diag = vec![0f64; n];
    nbr.par_chunks_mut(K_FINE).zip(diag.par_iter_mut()).zip(pos.par_iter()).for_each(|((nb, d), &p)| {
        let p = p as usize;
        let (x, y) = (p % w, p / w);
        let mut deg = 0u32;
        let candidates =
            [(x > 0).then(|| p - 1), (x + 1 < w).then(|| p + 1), (y > 0).then(|| p - w), (y + 1 < h).then(|| p + w)];
        for (slot, q) in candidates.into_iter().enumerate() {
            if let Some(q) = q {
                deg += 1;
                nb[slot] = index.get(q % w, q / w).unwrap_or(ghost);
            }
        }
        *d = f64::from(deg);
    });
    let inv_diag = diag.iter().map(|&d| if d > 0.0 { 1.0 / d } else { 0.0 }).collect();
    Level {
        w,
        h,
        n,
        k: K_FINE,
        pos,
        colours,
        nbr,
        coef: Vec::new(),
        diag,
        inv_diag,
        parents: Vec::new(),
        pweights: Vec::new(),
        children: Vec::new(),
        cweights: Vec::new(),
    }
}

/// The off-diagonal entry of `level`'s operator coupling point `i` to the point at offset
/// `(dx, dy)` (zero when there is none).
fn coupling(level: &Level, i: usize, dx: isize, dy: isize) -> f64 {
    let slot = if level.k == K_FINE {
        match (dx, dy) {
            (-1, 0) => 0,
            (1, 0) => 1,
            (0, -1) => 2,
            (0, 1) => 3,
            _ => return 0.0,
        }
    } else {
        #[allow(clippy::cast_sign_loss)] // offsets are within -1..=1
        let s = ((dy + 1) * 3 + (dx + 1)) as usize;
        if s > 4 { s - 1 } else { s }
    };
    f64::from(level.coef_at(i, slot))
}

/// Builds the next coarser level of `fine`, and the interpolation rows of `fine` to it.
///
/// The interpolation is operator-dependent (collapsed-stencil weights, as in Dendy's black-box
/// multigrid): a fine point between two coarse points takes from each the share its own stencil
/// gives that side, after lumping the couplings along the other axis. Next to a known pixel the
/// coupling is zero, so the Dirichlet condition is exact, and its distance is kept on every level
/// through the Galerkin operator; at the image edge the weights carry the correction out to the
/// edge (natural boundary). Geometric bilinear weights instead move the boundary by up to half a
/// coarse cell per level and slow the cycle down to about 0.3–0.6 per cycle on square holes.
fn coarsen(fine: &Level) -> (Level, Vec<u32>, Vec<f32>) {
    let (wf, hf) = (fine.w, fine.h);
    let (wc, hc) = (wf.div_ceil(2), hf.div_ceil(2));
    let findex = PosIndex::new(wf, hf, &fine.pos);

    // Coarse points: fine points with both coordinates even; ordered by 4 colours, then row-major.
    // They all belong to the fine level's first colour (x + y even on level 0, x and y even on
    // coarse levels), which is row-major already, so sorting them into colours is stable bucketing.
    let mut buckets: [Vec<u32>; 4] = Default::default();
    for &p in &fine.pos[fine.colours[0].clone()] {
        let p = p as usize;
        let (x, y) = (p % wf, p / wf);
        if x % 2 == 0 && y % 2 == 0 {
            let (xc, yc) = (x / 2, y / 2);
            buckets[(xc & 1) | ((yc & 1) << 1)].push(to_u32(yc * wc + xc));
        }
    }
    let nc = buckets.iter().map(Vec::len).sum();
    let mut colours = Vec::with_capacity(4);
    let mut pos: Vec<u32> = Vec::with_capacity(nc);
    for bucket in &buckets {
        colours.push(pos.len()..pos.len() + bucket.len());
        pos.extend_from_slice(bucket);
    }
    let cindex = PosIndex::new(wc, hc, &pos);
    let coarse_at =
        |xc: usize, yc: usize| -> Option<u32> { if xc < wc && yc < hc { cindex.get(xc, yc) } else { None } };

    // Interpolation rows, first of the points on coarse lines (injection and edge points) ...
    let cghost = to_u32(nc);
    let mut parents = vec![cghost; fine.n * PARENTS];
    let mut pweights = vec![0f32; fine.n * PARENTS];
    let clean = |w: f64| -> f32 {
        #[allow(clippy::cast_possible_truncation)] // weights are stored in f32
        if w.is_finite() { w.clamp(0.0, 1.0) as f32 } else { 0.0 }
    };
    parents.par_chunks_mut(PARENTS).zip(pweights.par_chunks_mut(PARENTS)).enumerate().for_each(|(i, (pa, pw))| {
        let p = fine.pos[i] as usize;
        let (x, y) = (p % wf, p / wf);
        let c = |dx, dy| coupling(fine, i, dx, dy);
        let mut put = |slot: usize, target: Option<u32>, w: f64| {
            if let Some(t) = target {
                pa[slot] = t;
                pw[slot] = clean(w);
            }
        };
        match (x % 2, y % 2) {
            (0, 0) => put(0, coarse_at(x / 2, y / 2), 1.0),
            (1, 0) => {
                let den = fine.diag[i] + c(0, -1) + c(0, 1);
                if den > 0.0 {
                    put(0, coarse_at(x / 2, y / 2), -(c(-1, -1) + c(-1, 0) + c(-1, 1)) / den);
                    put(1, coarse_at(x / 2 + 1, y / 2), -(c(1, -1) + c(1, 0) + c(1, 1)) / den);
                }
            }
            (0, 1) => {
                let den = fine.diag[i] + c(-1, 0) + c(1, 0);
                if den > 0.0 {
                    put(0, coarse_at(x / 2, y / 2), -(c(-1, -1) + c(0, -1) + c(1, -1)) / den);
                    put(1, coarse_at(x / 2, y / 2 + 1), -(c(-1, 1) + c(0, 1) + c(1, 1)) / den);
                }
            }
            _ => {}
        }
    });
    // ... then of the points at cell centres, from their neighbours' rows.
    let centre_rows: Vec<(usize, [u32; PARENTS], [f32; PARENTS])> = (0..fine.n)
        .into_par_iter()
        .filter_map(|i| {
            let p = fine.pos[i] as usize;
            let (x, y) = (p % wf, p / wf);
            if x % 2 == 0 || y % 2 == 0 {
                return None;
            }
            // Slots: the four coarse corners (x∓1, y∓1) in the order NW, NE, SW, SE.
            let corners = [(x / 2, y / 2), (x / 2 + 1, y / 2), (x / 2, y / 2 + 1), (x / 2 + 1, y / 2 + 1)];
            let ids = corners.map(|(xc, yc)| coarse_at(xc, yc).unwrap_or(cghost));
            let mut acc = [0f64; PARENTS];
            let d = fine.diag[i];
            for dy in -1isize..=1 {
                for dx in -1isize..=1 {
                    let a = coupling(fine, i, dx, dy);
                    if a == 0.0 || (dx, dy) == (0, 0) {
                        continue;
                    }
                    let share = -a / d;
                    let (gx, gy) = (x.wrapping_add_signed(dx), y.wrapping_add_signed(dy));
                    if dx != 0 && dy != 0 {
                        let slot = usize::from(dx > 0) + 2 * usize::from(dy > 0);
                        acc[slot] += share;
                    } else if gx < wf && gy < hf {
                        let Some(g) = findex.get(gx, gy) else {
                            continue;
                        };
                        let g = g as usize;
                        for t in 0..PARENTS {
                            let j = parents[g * PARENTS + t];
                            if j == cghost {
                                continue;
                            }
                            if let Some(slot) = ids.iter().position(|&id| id == j) {
                                acc[slot] += share * f64::from(pweights[g * PARENTS + t]);
                            }
                        }
                    }
                }
            }
            let mut pa = [cghost; PARENTS];
            let mut pw = [0f32; PARENTS];
            for slot in 0..PARENTS {
                if ids[slot] != cghost {
                    pa[slot] = ids[slot];
                    pw[slot] = clean(acc[slot]);
                }
            }
            Some((i, pa, pw))
        })
        .collect();
    for (i, pa, pw) in centre_rows {
        parents[i * PARENTS..(i + 1) * PARENTS].copy_from_slice(&pa);
        pweights[i * PARENTS..(i + 1) * PARENTS].copy_from_slice(&pw);
    }

    // Restriction rows: the transpose of the interpolation, gathered per coarse point.
    let fghost = to_u32(fine.n);
    let mut children = vec![fghost; nc * CHILDREN];
    let mut cweights = vec![0f32; nc * CHILDREN];
    children.par_chunks_mut(CHILDREN).zip(cweights.par_chunks_mut(CHILDREN)).enumerate().for_each(|(ic, (ch, cw))| {
        let p = pos[ic] as usize;
        let (xc, yc) = (p % wc, p / wc);
        for dy in 0..3 {
            for dx in 0..3 {
                let (Some(x), Some(y)) = ((2 * xc + dx).checked_sub(1), (2 * yc + dy).checked_sub(1)) else {
                    continue;
                };
                if x >= wf || y >= hf {
                    continue;
                }
                let Some(f) = findex.get(x, y) else {
                    continue;
                };
                let fi = f as usize;
                let me = to_u32(ic);
                if let Some(t) = (0..PARENTS).find(|&t| parents[fi * PARENTS + t] == me) {
                    ch[dy * 3 + dx] = f;
                    cw[dy * 3 + dx] = pweights[fi * PARENTS + t];
                }
            }
        }
    });
    drop(findex);
    drop(cindex);

    // Galerkin operator Pᵀ·A·P, one coarse row at a time (a gather, so it runs in parallel).
    let kf = fine.k;
    let cxy: Vec<(i32, i32)> = pos
        .iter()
        .map(|&p| {
            let p = p as usize;
            #[allow(clippy::cast_possible_truncation, clippy::cast_possible_wrap)] // grid sides fit in i32
            ((p % wc) as i32, (p / wc) as i32)
        })
        .collect();
    let rows: Vec<([u32; K_COARSE], [f32; K_COARSE], f64)> = (0..nc)
        .into_par_iter()
        .map(|i| {
            let (xi, yi) = cxy[i];
            let mut acc = [0f64; 9];
            let mut col = [cghost; 9];
            for s in 0..CHILDREN {
                let f = children[i * CHILDREN + s] as usize;
                if f == fine.n {
                    continue;
                }
                let pfi = f64::from(cweights[i * CHILDREN + s]);
                let mut add = |g: usize, a: f64| {
                    let pa = &parents[g * PARENTS..(g + 1) * PARENTS];
                    let pw = &pweights[g * PARENTS..(g + 1) * PARENTS];
                    for (&j, &w) in pa.iter().zip(pw) {
                        if j == cghost {
                            continue;
                        }
                        let (xj, yj) = cxy[j as usize];
                        #[allow(clippy::cast_sign_loss)] // |xj - xi|, |yj - yi| <= 1
                        let slot = ((yj - yi + 1) * 3 + (xj - xi + 1)) as usize;
                        acc[slot] += pfi * a * f64::from(w);
                        col[slot] = j;
                    }
                };
                add(f, fine.diag[f]);
                for t in 0..kf {
                    let g = fine.nbr[f * kf + t] as usize;
                    if g != fine.n {
                        add(g, f64::from(fine.coef_at(f, t)));
                    }
                }
            }
            let mut nb = [cghost; K_COARSE];
            let mut co = [0f32; K_COARSE];
            for (slot, s) in (0..9).filter(|&s| s != 4).enumerate() {
                if col[s] != cghost && acc[s] != 0.0 {
                    nb[slot] = col[s];
                    #[allow(clippy::cast_possible_truncation)] // coarse stencils are stored in f32
                    {
                        co[slot] = acc[s] as f32;
                    }
                }
            }
            (nb, co, acc[4])
        })
        .collect();
    let mut nbr = Vec::with_capacity(nc * K_COARSE);
    let mut coef = Vec::with_capacity(nc * K_COARSE);
    let mut diag = Vec::with_capacity(nc);
    for (nb, co, d) in rows {
        nbr.extend_from_slice(&nb);
        coef.extend_from_slice(&co);
        diag.push(d);
    }
    let inv_diag = diag.iter().map(|&d| if d > 0.0 { 1.0 / d } else { 0.0 }).collect();
    let coarse = Level {
        w: wc,
        h: hc,
        n: nc,
        k: K_COARSE,
        pos,
        colours,
        nbr,
        coef,
        diag,
        inv_diag,
        parents: Vec::new(),
        pweights: Vec::new(),
        children,
        cweights,
    };
    (coarse, parents, pweights)
}

/// The operator of `level` as a dense row-major matrix (for the coarsest level only).
fn dense_matrix(level: &Level) -> Vec<f64> {
    let n = level.n;
    let mut a = vec![0f64; n * n];
    for i in 0..n {
        a[i * n + i] = level.diag[i];
        for t in 0..level.k {
            let j = level.nbr[i * level.k + t] as usize;
            if j != n {
                a[i * n + j] += f64::from(level.coef_at(i, t));
            }
        }
    }
    // Symmetrise: the f32 rounding of the two triangles may differ in the last bit.
    for i in 0..n {
        for j in 0..i {
            let s = 0.5 * (a[i * n + j] + a[j * n + i]);
            a[i * n + j] = s;
            a[j * n + i] = s;
        }
    }
    a
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::mask::Mask;

    #[test]
    fn interpolation_reproduces_constants_away_from_known_pixels() {
        // With no known pixel nearby (natural boundary only, known pixels far away), every fine
        // point's interpolation weights sum to one, so constants pass between levels exactly.
        let mask = Mask::from_fn(37, 30, |x, y| x + y > 2);
        let h = Hierarchy::build(&mask).expect("non-empty mask");
        let fine = &h.levels[0];
        for i in 0..fine.n {
            let p = fine.pos[i] as usize;
            let (x, y) = (p % fine.w, p / fine.w);
            if x + y < 8 {
                continue;
            }
            let total: f32 = fine.pweights[i * PARENTS..(i + 1) * PARENTS].iter().sum();
            assert!((total - 1.0).abs() < 1e-6, "weights at ({x},{y}) sum to {total}");
        }
    }

    #[test]
    fn galerkin_operator_of_an_open_square_is_symmetric_and_positive() {
        let mask = Mask::from_fn(90, 77, |x, y| (3..87).contains(&x) && (2..70).contains(&y));
        let h = Hierarchy::build(&mask).expect("non-empty mask");
        assert!(h.depth() >= 3);
        for level in &h.levels[1..] {
            for i in 0..level.n {
                assert!(level.diag[i] > 0.0);
                for t in 0..level.k {
                    let j = level.nbr[i * level.k + t] as usize;
                    if j == level.n {
                        continue;
                    }
                    let back =
                        (0..level.k).find(|&s| level.nbr[j * level.k + s] as usize == i).map(|s| level.coef_at(j, s));
                    let fwd = level.coef_at(i, t);
                    let back = back.expect("coarse operator has a symmetric pattern");
                    assert!((fwd - back).abs() <= 1e-6 * fwd.abs(), "A[i,j]={fwd} A[j,i]={back}");
                }
            }
        }
    }

    #[test]
    fn colours_of_a_level_are_never_neighbours() {
        let mask = Mask::from_fn(30, 30, |x, y| (x * 7 + y * 3) % 5 != 0);
        let h = Hierarchy::build(&mask).expect("non-empty mask");
        for level in &h.levels {
            let mut colour = vec![usize::MAX; level.n + 1];
            for (c, r) in level.colours.iter().enumerate() {
                for i in r.clone() {
                    colour[i] = c;
                }
            }
            for i in 0..level.n {
                for t in 0..level.k {
                    let j = level.nbr[i * level.k + t] as usize;
                    assert!(j == level.n || colour[j] != colour[i]);
                }
            }
        }
    }
}
