//! Thin holes of any shape solved exactly by a sparse Cholesky factorisation made once per mask.
//!
//! The envelope method of [`super::direct`] needs a hole that is thin across its lines; a network
//! of crossing scratches or a dead row crossing dead columns is thin everywhere but wide in every
//! line. Ordered by minimum degree (eliminate next the unknown with the fewest uneliminated
//! neighbours; Tinney & Walker 1967, George & Liu 1981, ch. 5) the factor of such a hole has only
//! a few entries per unknown: along a strip the elimination front stays as wide as the strip, and
//! a crossing adds a small clique. The ordering is an explicit elimination graph that carries the
//! values of the matrix left to eliminate, so each elimination makes a column of the factor as it
//! is ordered; [`factor`] gives up (the hole goes to multigrid) as soon as the factor would cost
//! more than [`MAX_WORK_PER_UNKNOWN`] multiply-adds per unknown. A large hole is split by rows
//! into bands eliminated side by side, their separating rows last.
//!
//! Solving an image is then one forward and one backward substitution per hole, all channels
//! together: the cheapest fill for a mask applied to many images and for re-fills in the window.

use std::ops::Range;

use rayon::prelude::*;

use super::{FillError, GroupResult, Sums};
use crate::mask::index_u32;

/// Largest multiply-add count of a factorisation, per unknown, before the hole is left to
/// multigrid (a multigrid solve costs about 100–200 per unknown).
const MAX_WORK_PER_UNKNOWN: usize = 150;
/// Largest neighbour set an elimination may create before the hole is left to multigrid. The
/// work bound decides in practice (the crossings of scratches at 4096 make a few fronts of about
/// 50, harmless among 300 k unknowns); this only caps a single elimination's cost.
const MAX_FRONT: usize = 256;
/// An unknown whose horizontal and vertical runs through the hole are both longer than this is
/// thick: elimination fronts there grow about as wide, and the ordering's cost with them.
const THICK: u32 = 8;
/// Largest share of thick unknowns in a hole that is tried (crossings of thin strokes are thick
/// but few; a ring or a stroke 12 pixels wide is thick everywhere and goes to multigrid at once).
pub(crate) const MAX_THICK_SHARE: f64 = 1.0 / 64.0;
/// Largest hole tried.
pub(crate) const MAX_UNKNOWNS: usize = 1 << 21;
/// No neighbour.
pub(crate) const NONE: u32 = u32::MAX;

/// The Cholesky factor `L·Lᵀ` of a sparse symmetric positive definite matrix with its rows and
/// columns in minimum-degree order.
#[derive(Debug)]
pub(crate) struct SparseCholesky {
    /// The matrix's index of the unknown eliminated `k`-th.
    order: Vec<u32>,
    /// The factor's columns in parts, one after the other, their rows as elimination positions.
    /// When there are several, every part but the last (the separators) has entries only in its
    /// own rows and the last part's.
    parts: Vec<Columns>,
    /// Part `p` holds the columns `bounds[p]..bounds[p + 1]`.
    bounds: Vec<u32>,
}

/// Columns of a Cholesky factor, made by eliminating some unknowns of a [`Graph`]: unknown
/// `order[k]` (the matrix's index) has `1 / L_kk = inv_diag[k]` and below the diagonal the rows
/// `row[col[k]..col[k + 1]]` (the matrix's indices, elimination positions once the whole order is
/// known; in no particular order) with the values `val[..]`.
#[derive(Debug, Default)]
struct Columns {
    order: Vec<u32>,
    inv_diag: Vec<f64>,
    col: Vec<u32>,
    row: Vec<u32>,
    val: Vec<f64>,
    /// Multiply-adds spent.
    work: usize,
}

/// One hole's factor `A = L·Lᵀ` in elimination order.
#[derive(Debug)]
pub(crate) struct Factor {
    /// The pixel `y·width + x` of each unknown, in elimination order.
    pixel: Vec<u32>,
    /// The four neighbours (left, right, up, down) of each unknown as elimination positions, or
    /// [`NONE`] where that neighbour is known or outside the image.
    nbr: Vec<[u32; 4]>,
    chol: SparseCholesky,
}

/// The holes of a mask factored once.
#[derive(Debug)]
pub(crate) struct Factored {
    width: usize,
    height: usize,
    holes: Vec<Factor>,
}

/// Orders and factors the hole whose unknowns are `pixels` (increasing pixel indices, as
/// `hole_pixels` gives them) in a `width × height` image. `None` when its factor would cost too
/// much (see the module documentation).
pub(crate) fn factor(width: usize, height: usize, pixels: &[u32]) -> Option<Factor> {
    debug_assert!(pixels.windows(2).all(|w| w[0] < w[1]), "pixels increase");
    let m = pixels.len();
    let nbr0 = hole_neighbours(width, height, pixels);
    let share = thick_share(&nbr0);
    if share > MAX_THICK_SHARE {
        return None;
    }
    let diag = hole_diagonal(width, height, pixels);
    let limit = MAX_WORK_PER_UNKNOWN * m;
    let whole = || {
        let mut at = Vec::with_capacity(m + 1);
        at.push(0u32);
        let mut adj = Vec::with_capacity(4 * m);
        for n in &nbr0 {
            adj.extend(n.iter().copied().filter(|&j| j != NONE));
            at.push(u32::try_from(adj.len()).expect("couplings fit in u32"));
        }
        SparseCholesky::new::<INLINE>(&at, &adj, &vec![-1f64; adj.len()], &diag, limit)
    };
    let chol = if m >= BANDED_MIN {
        let entries = |i: usize| nbr0[i].into_iter().filter(|&j| j != NONE).map(|j| (j, -1.0));
        // A separating row crowded with unknowns coupled through both bands can make fronts the
        // whole ordering would not: then it is tried whole.
        factor_in_bands::<INLINE, _>(|i| pixels[i] as usize / width, entries, &diag, 1, limit, BANDS).or_else(whole)?
    } else {
        whole()?
    };
    Some(Factor { pixel: chol.in_order(pixels), nbr: chol.renumber(&nbr0), chol })
}

/// The 4-neighbours (left, right, up, down) of a hole's unknowns `pixels` (increasing pixel
/// indices) as indices into `pixels`, [`NONE`] where the neighbour is known or outside the image.
fn hole_neighbours(width: usize, height: usize, pixels: &[u32]) -> Vec<[u32; 4]> {
    let m = pixels.len();
    let mut nbr = vec![[NONE; 4]; m];
    // In chunks side by side; the pixels increase, so within a chunk the searches for the
    // neighbours above and below move forward only.
    nbr.par_chunks_mut(CHUNK).enumerate().for_each(|(c, out)| {
        let first = c * CHUNK;
        let p0 = pixels[first] as usize;
        let mut up_at = pixels.partition_point(|&q| (q as usize) + width < p0);
        let mut down_at = first + 1;
        for (i, n) in (first..).zip(out) {
            let p = pixels[i] as usize;
            let (x, y) = (p % width, p / width);
            if x > 0 && i > 0 && pixels[i - 1] as usize == p - 1 {
                n[0] = index_u32(i - 1);
            }
            if x + 1 < width && i + 1 < m && pixels[i + 1] as usize == p + 1 {
                n[1] = index_u32(i + 1);
            }
            if y > 0 {
                while up_at < i && (pixels[up_at] as usize) < p - width {
                    up_at += 1;
                }
                if pixels[up_at] as usize == p - width {
                    n[2] = index_u32(up_at);
                }
            }
            if y + 1 < height {
                down_at = down_at.max(i + 1);
                while down_at < m && (pixels[down_at] as usize) < p + width {
                    down_at += 1;
                }
                if down_at < m && pixels[down_at] as usize == p + width {
                    n[3] = index_u32(down_at);
                }
            }
        }
    });
    nbr
}

/// The 5-point matrix's diagonal for a hole's unknowns: each one's count of in-image neighbours.
fn hole_diagonal(width: usize, height: usize, pixels: &[u32]) -> Vec<f64> {
    pixels
        .par_iter()
        .with_min_len(CHUNK)
        .map(|&p| {
            let (x, y) = (p as usize % width, p as usize / width);
            f64::from(u8::from(x > 0) + u8::from(x + 1 < width) + u8::from(y > 0) + u8::from(y + 1 < height))
        })
        .collect()
}

/// Unknowns per chunk of the passes over a hole's unknowns that run side by side (fixed, so that
/// the right-hand side's and residual's sums do not depend on the number of threads).
pub(crate) const CHUNK: usize = 1 << 14;
/// Holes with at least this many unknowns are factored in bands side by side.
pub(crate) const BANDED_MIN: usize = 1 << 15;
/// Bands of a hole factored in bands: one per core here (four gave the same time on two cores;
/// the separators' fronts grow with their count).
pub(crate) const BANDS: usize = 2;

/// [`SparseCholesky::new`] for the symmetric matrix of a hole whose unknown `i` lies on image row
/// `row(i)` (not decreasing with `i`) and has the diagonal `diag[i]` and the off-diagonal
/// `entries(i)`, coupling it to unknowns at most `reach` rows away; the work split by rows: the
/// unknowns of a few strips of `reach` rows that separate the hole into bands are eliminated
/// last; each band is eliminated on its own, side by side with the others, and leaves its
/// updates to the separators' rows; these, with the bands' updates summed in band order, are
/// eliminated last (one level of nested dissection; George, "Nested dissection of a regular
/// finite element mesh", 1973). The result does not depend on the number of threads.
pub(crate) fn factor_in_bands<const K: usize, I: Iterator<Item = (u32, f64)>>(
    row: impl Fn(usize) -> usize + Sync,
    entries: impl Fn(usize) -> I + Sync,
    diag: &[f64],
    reach: usize,
    limit: usize,
    bands: usize,
) -> Option<SparseCholesky> {
    let m = diag.len();
    // The first unknown at or below image row `y` (rows do not decrease).
    let first_at = |y: usize| {
        let (mut lo, mut hi) = (0, m);
        while lo < hi {
            let mid = usize::midpoint(lo, hi);
            if row(mid) < y { lo = mid + 1 } else { hi = mid }
        }
        lo
    };
    // The separators: `reach` rows from the row of every `bands`-th share of the unknowns, as
    // ranges of them.
    let mut seps: Vec<Range<usize>> = Vec::new();
    for k in 1..bands {
        let y = row(k * m / bands);
        let a = first_at(y);
        if seps.last().is_none_or(|s| s.end <= a) {
            seps.push(a..first_at(y + reach));
        }
    }
    let sep_unknowns: Vec<u32> = seps.iter().flat_map(|s| s.clone().map(index_u32)).collect();
    let mut sep_of = vec![NONE; m];
    for (k, &i) in sep_unknowns.iter().enumerate() {
        sep_of[i as usize] = index_u32(k);
    }
    // Band b lies between separators b − 1 and b.
    let band = |b: usize| {
        let start = if b == 0 { 0 } else { seps[b - 1].end };
        let end = seps.get(b).map_or(m, |s| s.start);
        let above = if b == 0 { 0..0 } else { seps[b - 1].clone() };
        let below = seps.get(b).cloned().unwrap_or(0..0);
        (start..end, above, below)
    };
    type Left = Vec<(u32, f64, Vec<(u32, f64)>)>;
    let bands: Vec<Option<(Columns, Left)>> = (0..=seps.len())
        .into_par_iter()
        .map(|b| {
            let (inner, above, below) = band(b);
            // The band's unknowns first, then its separators' (never linked: they stay).
            let global: Vec<u32> = inner.clone().chain(above.clone()).chain(below.clone()).map(index_u32).collect();
            let n = inner.len();
            let local = |j: u32| {
                let j = j as usize;
                index_u32(if inner.contains(&j) {
                    j - inner.start
                } else if above.contains(&j) {
                    n + j - above.start
                } else {
                    debug_assert!(below.contains(&j), "a band's neighbours are in it or its separators");
                    n + above.len() + j - below.start
                })
            };
            let mut g = Graph::<K>::new(global.len());
            for i in inner.clone() {
                g.add_row(diag[i], entries(i).map(|(j, a)| (local(j), a)));
                g.link(i - inner.start);
            }
            for &s in &global[n..] {
                let toward_band = entries(s as usize).filter(|&(j, _)| inner.contains(&(j as usize)));
                g.add_row(0.0, toward_band.map(|(j, a)| (local(j), a)));
            }
            let columns = g.eliminate(Some(&global), limit)?;
            // What the band left on its separators' rows.
            let left = (n..global.len())
                .map(|v| {
                    let (list, values) = g.list(v);
                    let entries = list.iter().map(|&t| global[t as usize]).zip(values.iter().copied()).collect();
                    (global[v], g.nodes[v].diag, entries)
                })
                .collect();
            Some((columns, left))
        })
        .collect();
    let mut g = Graph::<K>::new(sep_unknowns.len());
    for &s in &sep_unknowns {
        let s = s as usize;
        let among_separators = entries(s).filter(|&(j, _)| sep_of[j as usize] != NONE);
        g.add_row(diag[s], among_separators.map(|(j, a)| (sep_of[j as usize], a)));
    }
    let mut parts = Vec::with_capacity(bands.len() + 1);
    for b in bands {
        let (columns, left) = b?;
        for (s, d, entries) in left {
            let k = sep_of[s as usize] as usize;
            g.nodes[k].diag += d;
            for (t, x) in entries {
                g.add(k, sep_of[t as usize], x);
            }
        }
        parts.push(columns);
    }
    for k in 0..sep_unknowns.len() {
        g.link(k);
    }
    parts.push(g.eliminate(Some(&sep_unknowns), limit)?);
    if parts.iter().map(|p| p.work).sum::<usize>() > limit {
        return None;
    }
    Some(SparseCholesky::from_columns(parts, m))
}

/// The elimination position of each unknown, from the unknowns in elimination order.
#[allow(clippy::cast_possible_truncation)] // the unknowns are counted in u32
fn positions(order: &[u32]) -> Vec<u32> {
    let mut pos = vec![0u32; order.len()];
    for (k, &v) in order.iter().enumerate() {
        pos[v as usize] = k as u32;
    }
    pos
}

impl SparseCholesky {
    /// Orders (minimum degree, see the module documentation) and factors the symmetric matrix
    /// whose row `i` holds `diag[i]` on the diagonal and `off[t]` in column `adj[t]` for `t` in
    /// `at[i]..at[i + 1]` (the diagonal not among them). `None` when an elimination's neighbour
    /// set passes [`MAX_FRONT`], the multiply-adds pass `limit`, or a pivot is not positive.
    pub(crate) fn new<const K: usize>(
        at: &[u32],
        adj: &[u32],
        off: &[f64],
        diag: &[f64],
        limit: usize,
    ) -> Option<Self> {
        let entries = |v: usize| {
            let (a, b) = (at[v] as usize, at[v + 1] as usize);
            adj[a..b].iter().copied().zip(off[a..b].iter().copied())
        };
        Self::with_entries::<K, _>(entries, diag, limit)
    }

    /// As [`SparseCholesky::new`] for the matrix whose row `v` has `diag[v]` on the diagonal and
    /// the off-diagonal `entries(v)` as (column, value).
    pub(crate) fn with_entries<const K: usize, I: Iterator<Item = (u32, f64)>>(
        entries: impl Fn(usize) -> I,
        diag: &[f64],
        limit: usize,
    ) -> Option<Self> {
        let m = diag.len();
        let mut graph = Graph::<K>::new(m);
        for (v, &d) in diag.iter().enumerate() {
            graph.add_row(d, entries(v));
            graph.link(v);
        }
        let columns = graph.eliminate(None, limit)?;
        Some(Self::from_columns(vec![columns], m))
    }

    /// The factor whose columns are `parts` one after the other, every unknown of the `m`
    /// eliminated once.
    fn from_columns(mut parts: Vec<Columns>, m: usize) -> Self {
        let mut bounds = vec![0u32];
        let mut order = Vec::with_capacity(m);
        for p in &parts {
            bounds.push(bounds[bounds.len() - 1] + index_u32(p.order.len()));
            order.extend_from_slice(&p.order);
        }
        debug_assert_eq!(order.len(), m);
        let pos = positions(&order);
        for p in &mut parts {
            p.row.par_iter_mut().with_min_len(CHUNK).for_each(|r| *r = pos[*r as usize]);
        }
        Self { order, parts, bounds }
    }

    /// `of` (one item per unknown of the matrix) in elimination order.
    pub(crate) fn in_order<T: Copy + Send + Sync>(&self, of: &[T]) -> Vec<T> {
        self.order.par_iter().with_min_len(CHUNK).map(|&v| of[v as usize]).collect()
    }

    /// Neighbour lists (the matrix's indices, [`NONE`] for none) in elimination order, and as
    /// elimination positions.
    pub(crate) fn renumber<const K: usize>(&self, nbr: &[[u32; K]]) -> Vec<[u32; K]> {
        let pos = positions(&self.order);
        let renumber = |&v: &u32| nbr[v as usize].map(|j| if j == NONE { NONE } else { pos[j as usize] });
        self.order.par_iter().with_min_len(CHUNK).map(renumber).collect()
    }

    /// Bytes held.
    pub(crate) fn memory_bytes(&self) -> usize {
        self.order.len() * (4 + 4 + 8) + self.parts.iter().map(|p| p.row.len() * 12).sum::<usize>()
    }

    /// Solves `A·x = b` for `C` right-hand sides at once: `x` holds `b` in elimination order (`C`
    /// values per unknown) and receives the solution in the same order.
    pub(crate) fn solve_in_place<const C: usize>(&self, x: &mut [f64]) {
        debug_assert_eq!(x.len(), self.order.len() * C);
        // L·y = b (by columns), then Lᵀ·x = y (by rows of Lᵀ, which are L's columns). With bands,
        // each band's columns touch only its own rows and the separators': the bands go side by
        // side, their updates to the separators kept apart and added in band order.
        let last = self.parts.len() - 1;
        if last == 0 {
            self.forward::<C>(0, x, &mut []);
            self.backward::<C>(0, x, &[]);
            return;
        }
        let (bands, seps) = x.split_at_mut(self.bounds[last] as usize * C);
        let mut slices = super::split_lengths(bands, self.parts[..last].iter().map(|p| p.order.len() * C));
        let updates: Vec<Vec<f64>> = slices
            .par_iter_mut()
            .enumerate()
            .map(|(p, x)| {
                let mut update = vec![0f64; seps.len()];
                self.forward::<C>(p, x, &mut update);
                update
            })
            .collect();
        for update in updates {
            for (s, u) in seps.iter_mut().zip(update) {
                *s += u;
            }
        }
        self.forward::<C>(last, seps, &mut []);
        self.backward::<C>(last, seps, &[]);
        let seps = &*seps;
        slices.par_iter_mut().enumerate().for_each(|(p, x)| self.backward::<C>(p, x, seps));
    }

    /// The forward substitution of part `p`'s columns, whose values are `x`; updates to rows past
    /// them go to `rest` (the last part's rows).
    fn forward<const C: usize>(&self, p: usize, x: &mut [f64], rest: &mut [f64]) {
        let part = &self.parts[p];
        let (first, split) = (self.bounds[p] as usize, self.bounds[p + 1] as usize);
        let last = self.bounds[self.parts.len() - 1] as usize;
        for (k, &d) in part.inv_diag.iter().enumerate() {
            let at = k * C;
            let mut yk = [0f64; C];
            for c in 0..C {
                yk[c] = x[at + c] * d;
                x[at + c] = yk[c];
            }
            let (a, e) = (part.col[k] as usize, part.col[k + 1] as usize);
            for (&i, &l) in part.row[a..e].iter().zip(&part.val[a..e]) {
                let i = i as usize;
                let (y, at) = if i < split { (&mut *x, (i - first) * C) } else { (&mut *rest, (i - last) * C) };
                for c in 0..C {
                    y[at + c] -= l * yk[c];
                }
            }
        }
    }

    /// The backward substitution of part `p`'s columns, whose values are `x`, reading rows past
    /// them from `rest` (the last part's rows).
    fn backward<const C: usize>(&self, p: usize, x: &mut [f64], rest: &[f64]) {
        let part = &self.parts[p];
        let (first, split) = (self.bounds[p] as usize, self.bounds[p + 1] as usize);
        let last = self.bounds[self.parts.len() - 1] as usize;
        for (k, &d) in part.inv_diag.iter().enumerate().rev() {
            let (a, e) = (part.col[k] as usize, part.col[k + 1] as usize);
            let at = k * C;
            let mut s = [0f64; C];
            s.copy_from_slice(&x[at..at + C]);
            for (&i, &l) in part.row[a..e].iter().zip(&part.val[a..e]) {
                let i = i as usize;
                let (y, at) = if i < split { (&*x, (i - first) * C) } else { (rest, (i - last) * C) };
                for c in 0..C {
                    s[c] -= l * y[at + c];
                }
            }
            for c in 0..C {
                x[at + c] = s[c] * d;
            }
        }
    }
}

/// The share of a hole's unknowns whose horizontal and vertical runs are both longer than
/// [`THICK`], from the neighbours (left, right, up, down; [`NONE`] where absent) of unknowns in
/// row order.
#[allow(clippy::cast_precision_loss)] // counts are far below 2^52
pub(crate) fn thick_share(nbr: &[[u32; 4]]) -> f64 {
    let m = nbr.len();
    // Run lengths along each direction: the count so far from the run's start, then each
    // unknown takes its run's total from the run's end. Left and up neighbours come earlier in
    // row order, right and down ones later.
    let runs = |back: usize, fwd: usize| {
        let mut len = vec![0u32; m];
        for i in 0..m {
            let b = nbr[i][back];
            len[i] = if b == NONE { 1 } else { len[b as usize] + 1 };
        }
        for i in (0..m).rev() {
            let f = nbr[i][fwd];
            if f != NONE {
                len[i] = len[f as usize];
            }
        }
        len
    };
    let along = rayon::join(|| runs(0, 1), || runs(2, 3));
    let along = [along.0, along.1];
    let thick = (0..m).filter(|&i| along[0][i].min(along[1][i]) > THICK).count();
    thick as f64 / m.max(1) as f64
}

/// Neighbours kept in an unknown's own record of a 5-point graph (a record of 128 bytes); longer
/// lists (at crossings) spill to vectors.
const INLINE: usize = 8;
/// [`INLINE`] for the 13-point stencil's graphs (12 neighbours to begin with).
pub(crate) const INLINE_WIDE: usize = 24;
/// Fronts up to this long find a neighbour's entries by scanning its list; longer ones (a few
/// crossings) through a table of places.
const SCAN: usize = 16;

/// One unknown of the elimination graph: its neighbour list with the values of the matrix left to
/// eliminate, its diagonal, and its links in its degree's list (two cache lines for `K` =
/// [`INLINE`]). The ordering touches each neighbour of an eliminated unknown and little else, so
/// one record per unknown is about all it reads.
#[derive(Clone, Copy)]
#[repr(C, align(64))]
struct Node<const K: usize> {
    len: u32,
    /// Index into [`Graph::spilled`] when the list is there, else [`NONE`].
    spill: u32,
    /// Its neighbours in its degree's list (see [`Graph::pop_min`]).
    prev: u32,
    next: u32,
    /// Whether the unknown is in a degree list (an unknown never linked stays in the graph).
    linked: bool,
    diag: f64,
    nbr: [u32; K],
    val: [f64; K],
}

/// The elimination graph: each unknown's neighbours and the matrix's values towards them, and
/// the unknowns by degree for the minimum-degree ordering — a doubly linked list per degree,
/// joined and taken at the back. Ties go to the unknown that joined last — after an elimination,
/// one of its neighbours — so the ordering walks along a stroke while its lists are in cache
/// (scratches at 4096, side by side: setup 0.165 → 0.149 s at best, 0.22 → 0.18 s median; taking
/// the unknown waiting longest swept across every stroke in turn).
struct Graph<const K: usize> {
    nodes: Vec<Node<K>>,
    spilled: Vec<(Vec<u32>, Vec<f64>)>,
    /// The first and last unknown of each degree's list.
    head: Vec<u32>,
    tail: Vec<u32>,
    /// No list below this degree holds an unknown.
    min: usize,
}

impl<const K: usize> Graph<K> {
    /// A graph without unknowns, with room for `m` (each record is written once, as it is
    /// added: the records of a large hole are tens of megabytes, new memory each time).
    fn new(m: usize) -> Self {
        // Degrees past MAX_FRONT share the last list: such an unknown ends the ordering when taken.
        let lists = MAX_FRONT + 2;
        Self {
            nodes: Vec::with_capacity(m),
            spilled: Vec::new(),
            head: vec![NONE; lists],
            tail: vec![NONE; lists],
            min: 0,
        }
    }

    /// Adds an unknown, not in a degree list, with the diagonal `diag` and the values `entries`
    /// towards its neighbours (which may be added later).
    fn add_row(&mut self, diag: f64, entries: impl Iterator<Item = (u32, f64)>) {
        let v = self.nodes.len();
        self.nodes.push(Node {
            len: 0,
            spill: NONE,
            prev: NONE,
            next: NONE,
            linked: false,
            diag,
            nbr: [0; K],
            val: [0.0; K],
        });
        for (t, x) in entries {
            self.push(v, t, x);
        }
    }

    /// Adds `x` to `v`'s value towards `t`, joining them if they were not.
    fn add(&mut self, v: usize, t: u32, x: f64) {
        let (list, values) = self.list_mut(v);
        match list.iter().position(|&s| s == t) {
            Some(k) => values[k] += x,
            None => self.push(v, t, x),
        }
    }

    /// Asks for `v`'s record ahead of its use, so that the misses of a front's records overlap.
    #[inline]
    fn prefetch(&self, v: usize) {
        #[cfg(target_arch = "x86_64")]
        {
            use std::arch::x86_64::{_MM_HINT_T0, _mm_prefetch};
            let p: *const Node<K> = &self.nodes[v];
            // SAFETY: prefetching never faults; only its first two cache lines are asked for.
            unsafe {
                _mm_prefetch::<_MM_HINT_T0>(p.cast::<i8>());
                _mm_prefetch::<_MM_HINT_T0>(p.cast::<i8>().wrapping_add(64));
            }
        }
    }

    fn len(&self, v: usize) -> usize {
        let node = &self.nodes[v];
        if node.spill == NONE { node.len as usize } else { self.spilled[node.spill as usize].0.len() }
    }

    fn list(&self, v: usize) -> (&[u32], &[f64]) {
        let node = &self.nodes[v];
        if node.spill == NONE {
            let n = node.len as usize;
            (&node.nbr[..n], &node.val[..n])
        } else {
            let (nbr, val) = &self.spilled[node.spill as usize];
            (nbr, val)
        }
    }

    fn list_mut(&mut self, v: usize) -> (&mut [u32], &mut [f64]) {
        let node = &mut self.nodes[v];
        if node.spill == NONE {
            let n = node.len as usize;
            (&mut node.nbr[..n], &mut node.val[..n])
        } else {
            let (nbr, val) = &mut self.spilled[node.spill as usize];
            (nbr, val)
        }
    }

    fn push(&mut self, v: usize, t: u32, x: f64) {
        let node = &mut self.nodes[v];
        if node.spill != NONE {
            let (nbr, val) = &mut self.spilled[node.spill as usize];
            nbr.push(t);
            val.push(x);
        } else if (node.len as usize) < K {
            node.nbr[node.len as usize] = t;
            node.val[node.len as usize] = x;
            node.len += 1;
        } else {
            let (mut nbr, mut val) = (node.nbr.to_vec(), node.val.to_vec());
            nbr.push(t);
            val.push(x);
            node.spill = u32::try_from(self.spilled.len()).expect("spilled lists fit in u32");
            self.spilled.push((nbr, val));
        }
    }

    /// Removes `t` from `v`'s list (order is not kept).
    fn remove(&mut self, v: usize, t: u32) {
        let node = &mut self.nodes[v];
        if node.spill == NONE {
            let n = node.len as usize;
            if let Some(k) = node.nbr[..n].iter().position(|&x| x == t) {
                node.nbr[k] = node.nbr[n - 1];
                node.val[k] = node.val[n - 1];
                node.len -= 1;
            }
        } else {
            let (nbr, val) = &mut self.spilled[node.spill as usize];
            if let Some(k) = nbr.iter().position(|&x| x == t) {
                nbr.swap_remove(k);
                val.swap_remove(k);
            }
        }
    }

    /// Joins `v` to the back of its degree's list.
    fn link(&mut self, v: usize) {
        let d = self.len(v).min(self.head.len() - 1);
        let t = self.tail[d];
        let node = &mut self.nodes[v];
        (node.prev, node.next, node.linked) = (t, NONE, true);
        if t == NONE {
            self.head[d] = index_u32(v);
        } else {
            self.nodes[t as usize].next = index_u32(v);
        }
        self.tail[d] = index_u32(v);
        self.min = self.min.min(d);
    }

    /// Takes `v` out of its degree's list (its list must not have changed since [`Graph::link`]);
    /// whether it was in one.
    fn unlink(&mut self, v: usize) -> bool {
        if !self.nodes[v].linked {
            return false;
        }
        let d = self.len(v).min(self.head.len() - 1);
        let node = &mut self.nodes[v];
        let (p, n) = (node.prev, node.next);
        node.linked = false;
        if p == NONE {
            self.head[d] = n;
        } else {
            self.nodes[p as usize].next = n;
        }
        if n == NONE {
            self.tail[d] = p;
        } else {
            self.nodes[n as usize].prev = p;
        }
        true
    }

    /// Eliminates every linked unknown, least degree first (the others stay, with the updates the
    /// eliminations made to their rows). `global` gives the matrix's index of each of the graph's
    /// unknowns (`None`: the same). `None` when an elimination's neighbour set passes
    /// [`MAX_FRONT`], the multiply-adds pass `limit`, or a pivot is not positive.
    ///
    /// The graph carries the values of the matrix left to eliminate (right-looking Cholesky):
    /// eliminating `v` makes its column of the factor from its list and takes the column's outer
    /// product from its neighbours' lists while they are in cache. Ordering and factoring in one
    /// pass saves a separate numeric factorisation's visits to every column, which in
    /// elimination order jump about the unknowns (scratches at 4096: 34 of 108 ms).
    fn eliminate(&mut self, global: Option<&[u32]>, limit: usize) -> Option<Columns> {
        let m = self.nodes.len();
        let name = |v: u32| global.map_or(v, |g| g[v as usize]);
        let mut out = Columns::default();
        out.col.push(0u32);
        // Thin holes take about 3 entries per unknown, the 13-point stencil's about 7.
        out.row.reserve(3 * m);
        out.val.reserve(3 * m);
        let (mut front, mut l) = ([0u32; MAX_FRONT], [0f64; MAX_FRONT]);
        // Where each member of the list being joined sits in it (fronts longer than SCAN only;
        // an entry is current when the list holds its unknown at that place).
        let mut place: Vec<u32> = Vec::new();
        while let Some(v) = self.pop_min() {
            let (list, values) = self.list(v);
            let f = list.len();
            if f > MAX_FRONT {
                return None;
            }
            out.work += f * (f + 3) / 2;
            if out.work > limit {
                return None;
            }
            let d = self.nodes[v].diag;
            if d <= 0.0 || !d.is_finite() {
                return None;
            }
            let inv = 1.0 / d.sqrt();
            front[..f].copy_from_slice(list);
            for &u in &front[..f] {
                self.prefetch(u as usize);
            }
            for (lt, &a) in l[..f].iter_mut().zip(values) {
                *lt = a * inv;
            }
            let (front, l) = (&front[..f], &l[..f]);
            out.order.push(name(index_u32(v)));
            out.inv_diag.push(inv);
            out.row.extend(front.iter().map(|&t| name(t)));
            out.val.extend_from_slice(l);
            out.col.push(index_u32(out.row.len()));
            if f > SCAN && place.len() < m {
                place.resize(m, 0);
            }
            // The Schur complement: a_ut −= l_u·l_t for every pair of the front, a fill entry
            // where u and t were not joined.
            for (i, (&u, &lu)) in front.iter().zip(l).enumerate() {
                let u = u as usize;
                let linked = self.unlink(u);
                self.nodes[u].diag -= lu * lu;
                self.remove(u, index_u32(v));
                if f > SCAN {
                    for (k, &t) in self.list(u).0.iter().enumerate() {
                        place[t as usize] = index_u32(k);
                    }
                }
                for (j, (&t, &lt)) in front.iter().zip(l).enumerate() {
                    if j == i {
                        continue;
                    }
                    let (list, values) = self.list_mut(u);
                    let k = if f > SCAN {
                        let k = place[t as usize] as usize;
                        (k < list.len() && list[k] == t).then_some(k)
                    } else {
                        list.iter().position(|&x| x == t)
                    };
                    match k {
                        Some(k) => values[k] -= lt * lu,
                        None => self.push(u, t, -(lt * lu)),
                    }
                }
                if linked {
                    self.link(u);
                }
            }
        }
        Some(out)
    }

    /// Takes the unknown of least degree that joined last.
    fn pop_min(&mut self) -> Option<usize> {
        while self.min < self.head.len() && self.head[self.min] == NONE {
            self.min += 1;
        }
        let v = *self.tail.get(self.min)? as usize;
        self.unlink(v);
        Some(v)
    }
}

impl Factor {
    fn unknowns(&self) -> usize {
        self.pixel.len()
    }

    fn memory_bytes(&self) -> usize {
        self.pixel.len() * (4 + 16) + self.chol.memory_bytes()
    }
}

impl Factored {
    pub(crate) fn new(width: usize, height: usize, holes: Vec<Factor>) -> Self {
        Self { width, height, holes }
    }

    pub(crate) fn unknowns(&self) -> usize {
        self.holes.iter().map(Factor::unknowns).sum()
    }

    pub(crate) fn memory_bytes(&self) -> usize {
        self.holes.iter().map(Factor::memory_bytes).sum()
    }
}

/// Solves every hole for `C` channels of `planes`; the values come back hole after hole in
/// elimination order, `C` per unknown.
pub(crate) fn solve_group<const C: usize>(f: &Factored, planes: &[&mut [f32]]) -> Result<GroupResult, FillError> {
    let mut values = vec![0f64; f.unknowns() * C];
    let slices = super::split_lengths(&mut values, f.holes.iter().map(|h| h.unknowns() * C));
    let sums: Vec<Result<Sums<C>, FillError>> = slices
        .into_par_iter()
        .zip(&f.holes)
        .map(|(x, hole)| solve_hole::<C>(hole, f.width, f.height, planes, x))
        .collect();
    super::solved_exactly((values, Vec::new()), sums)
}

/// Solves one hole into `x` and returns the squared norms of its residual and right-hand side.
fn solve_hole<const C: usize>(
    hole: &Factor,
    width: usize,
    height: usize,
    planes: &[&mut [f32]],
    x: &mut [f64],
) -> Result<Sums<C>, FillError> {
    let m = hole.unknowns();
    // The right-hand side: the known in-image neighbours of each unknown, summed. In chunks of a
    // fixed size side by side; their sums are added in order, so they do not depend on threads.
    let mut b = vec![0f64; m * C];
    let chunks: Vec<Result<[f64; C], FillError>> = b
        .par_chunks_mut(CHUNK * C)
        .enumerate()
        .map(|(q, b)| {
            let mut b_sq = [0f64; C];
            for (k, bk) in (q * CHUNK..).zip(b.chunks_exact_mut(C)) {
                let p = hole.pixel[k] as usize;
                let (px, py) = (p % width, p / width);
                let sides = [
                    (px > 0, p.wrapping_sub(1)),
                    (px + 1 < width, p + 1),
                    (py > 0, p.wrapping_sub(width)),
                    (py + 1 < height, p + width),
                ];
                for ((inside, q), &j) in sides.into_iter().zip(&hole.nbr[k]) {
                    if !inside || j != NONE {
                        continue;
                    }
                    for (c, sc) in bk.iter_mut().enumerate() {
                        let v = planes[c][q];
                        if !v.is_finite() {
                            return Err(FillError::NonFiniteRim { x: q % width, y: q / width });
                        }
                        *sc += f64::from(v);
                    }
                }
                for c in 0..C {
                    b_sq[c] += bk[c] * bk[c];
                }
            }
            Ok(b_sq)
        })
        .collect();
    let mut b_sq = [0f64; C];
    for chunk in chunks {
        let chunk = chunk?;
        for c in 0..C {
            b_sq[c] += chunk[c];
        }
    }
    x.copy_from_slice(&b);
    hole.chol.solve_in_place::<C>(x);
    // The residual b − A·x for the report.
    let x = &*x;
    let chunks: Vec<[f64; C]> = (0..m.div_ceil(CHUNK))
        .into_par_iter()
        .map(|q| {
            let mut r_sq = [0f64; C];
            for k in q * CHUNK..((q + 1) * CHUNK).min(m) {
                let p = hole.pixel[k] as usize;
                let (px, py) = (p % width, p / width);
                let degree = f64::from(
                    u8::from(px > 0) + u8::from(px + 1 < width) + u8::from(py > 0) + u8::from(py + 1 < height),
                );
                super::add_residual_sq(&mut r_sq, &b, x, k, degree, hole.nbr[k]);
            }
            r_sq
        })
        .collect();
    let mut r_sq = [0f64; C];
    for chunk in chunks {
        for c in 0..C {
            r_sq[c] += chunk[c];
        }
    }
    Ok((r_sq, b_sq))
}

/// Writes a group's values (from [`solve_group`], `count` channels) into `planes[first..]`.
pub(crate) fn write_back(f: &Factored, planes: &mut [&mut [f32]], first: usize, count: usize, values: &[f64]) {
    for (c, plane) in planes[first..first + count].iter_mut().enumerate() {
        let mut i = 0;
        for hole in &f.holes {
            for &p in &hole.pixel {
                #[allow(clippy::cast_possible_truncation)] // planes are f32 by design
                {
                    plane[p as usize] = values[i * count + c] as f32;
                }
                i += 1;
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::fill::dense::Cholesky;

    /// The fill by a dense factorisation of the same equations, in pixel order, assembled without
    /// `factor`'s neighbour search.
    fn dense_fill(width: usize, height: usize, pixels: &[u32], plane: &[f32]) -> Vec<f64> {
        let n = pixels.len();
        let index = |p: usize| pixels.iter().position(|&q| q as usize == p);
        let mut a = vec![0f64; n * n];
        let mut b = vec![0f64; n];
        for (i, &p) in pixels.iter().enumerate() {
            let p = p as usize;
            let (x, y) = (p % width, p / width);
            let sides = [
                (x > 0, p.wrapping_sub(1)),
                (x + 1 < width, p + 1),
                (y > 0, p.wrapping_sub(width)),
                (y + 1 < height, p + width),
            ];
            for (inside, q) in sides {
                if !inside {
                    continue;
                }
                a[i * n + i] += 1.0;
                match index(q) {
                    Some(j) => a[i * n + j] = -1.0,
                    None => b[i] += f64::from(plane[q]),
                }
            }
        }
        Cholesky::factor(n, a).expect("positive definite").solve_in_place(&mut b);
        b
    }

    /// Two crossing diagonal strokes 2 px wide, a dead row and a dead column that run into the
    /// image edges and cross them: one hole, thin everywhere, wide in every row. Returns the
    /// image's size, the hole's pixels, whether a pixel is in the hole, and an image.
    fn crossing_network() -> (usize, usize, Vec<u32>, impl Fn(usize, usize) -> bool, Vec<f32>) {
        let (w, h) = (40, 31);
        let inside = |x: usize, y: usize| {
            let (xi, yi) = (x as isize, y as isize);
            (xi - yi).abs() <= 1 && x < 30 || (xi + yi - 38).abs() <= 0 || y == 20 || x == 7
        };
        let pixels: Vec<u32> = (0..w * h).filter(|&p| inside(p % w, p / w)).map(|p| p as u32).collect();
        let plane: Vec<f32> = (0..w * h).map(|p| ((p * 37) % 101) as f32 + 0.25 * (p % w) as f32).collect();
        (w, h, pixels, inside, plane)
    }

    #[test]
    fn a_crossing_network_at_the_image_edge_matches_a_dense_factorisation() {
        let (w, h, pixels, inside, plane) = crossing_network();
        let expected = dense_fill(w, h, &pixels, &plane);
        let f = factor(w, h, &pixels).expect("a thin hole is factored");
        let holes = Factored::new(w, h, vec![f]);
        for channels in [1usize, 2] {
            let mut planes: Vec<Vec<f32>> =
                (0..channels).map(|c| plane.iter().map(|v| v + 10.0 * c as f32).collect()).collect();
            let refs: Vec<&mut [f32]> = planes.iter_mut().map(|p| &mut p[..]).collect();
            let result = match channels {
                1 => solve_group::<1>(&holes, &refs),
                _ => solve_group::<2>(&holes, &refs),
            }
            .expect("solves");
            let mut refs = refs;
            write_back(&holes, &mut refs, 0, channels, &result.values);
            for (c, out) in planes.iter().enumerate() {
                for (j, &p) in pixels.iter().enumerate() {
                    // A constant added to every known value is added to the fill (the rows of A
                    // without a known neighbour sum to zero): the second channel is the first + 10.
                    let want = expected[j] + 10.0 * c as f64;
                    let got = f64::from(out[p as usize]);
                    assert!((got - want).abs() <= 1e-3, "channel {c} pixel {p}: {got} vs {want}");
                }
                for p in 0..w * h {
                    if !inside(p % w, p / w) {
                        assert_eq!(out[p].to_bits(), (plane[p] + 10.0 * c as f32).to_bits());
                    }
                }
                assert!(result.reports[c].relative_residual < 1e-12, "{:?}", result.reports[c]);
            }
        }
    }

    #[test]
    fn a_hole_factored_in_bands_matches_a_dense_factorisation() {
        let (w, h, pixels, _, plane) = crossing_network();
        let expected = dense_fill(w, h, &pixels, &plane);
        let (nbr, diag) = (hole_neighbours(w, h, &pixels), hole_diagonal(w, h, &pixels));
        // One separating row; several; and more bands than rows, so that separating rows touch
        // (coupled to each other directly) and some bands are empty.
        for bands in [2, 3, 7, 60] {
            let entries = |i: usize| nbr[i].into_iter().filter(|&j| j != NONE).map(|j| (j, -1.0));
            let row = |i: usize| pixels[i] as usize / w;
            let chol = factor_in_bands::<INLINE, _>(row, entries, &diag, 1, usize::MAX, bands)
                .expect("a thin hole is factored");
            let f = Factor { pixel: chol.in_order(&pixels), nbr: chol.renumber(&nbr), chol };
            let holes = Factored::new(w, h, vec![f]);
            let mut planes = [plane.clone()];
            let refs: Vec<&mut [f32]> = planes.iter_mut().map(|p| &mut p[..]).collect();
            let result = solve_group::<1>(&holes, &refs).expect("solves");
            for (k, &p) in holes.holes[0].pixel.iter().enumerate() {
                let want = expected[pixels.binary_search(&p).expect("a hole pixel")];
                let got = result.values[k];
                assert!((got - want).abs() <= 1e-10 * want.abs().max(1.0), "{bands} bands, pixel {p}: {got} vs {want}");
            }
            assert!(result.reports[0].relative_residual < 1e-12, "{bands} bands: {:?}", result.reports[0]);
        }
    }

    #[test]
    fn bands_cut_by_strips_two_rows_thick_factor_a_stencil_reaching_two_rows() {
        // B = A² for the crossing network's 5-point matrix A: symmetric positive definite, its
        // couplings reach two rows (as the biharmonic stencil's do). Solved with and without bands.
        let (w, h, pixels, _, _) = crossing_network();
        let (nbr, diag) = (hole_neighbours(w, h, &pixels), hole_diagonal(w, h, &pixels));
        let m = pixels.len();
        let mut b_rows: Vec<std::collections::BTreeMap<u32, f64>> = vec![Default::default(); m];
        let a_row = |k: usize| {
            std::iter::once((k as u32, diag[k])).chain(nbr[k].into_iter().filter(|&j| j != NONE).map(|j| (j, -1.0)))
        };
        for (i, b_row) in b_rows.iter_mut().enumerate() {
            for (k, x) in a_row(i) {
                for (j, y) in a_row(k as usize) {
                    *b_row.entry(j).or_default() += x * y;
                }
            }
        }
        let b_diag: Vec<f64> = (0..m).map(|i| b_rows[i][&(i as u32)]).collect();
        let off = |i: usize| b_rows[i].iter().filter(move |e| *e.0 as usize != i).map(|(&j, &x)| (j, x));
        let (mut at, mut adj, mut vals) = (vec![0u32], Vec::new(), Vec::new());
        for i in 0..m {
            for (j, x) in off(i) {
                adj.push(j);
                vals.push(x);
            }
            at.push(adj.len() as u32);
        }
        let whole = SparseCholesky::new::<INLINE>(&at, &adj, &vals, &b_diag, usize::MAX).expect("factors");
        let rhs: Vec<f64> = (0..m).map(|i| ((i * 37) % 11) as f64 - 5.0).collect();
        let solve = |chol: &SparseCholesky| {
            let mut x = chol.in_order(&rhs);
            chol.solve_in_place::<1>(&mut x);
            let mut out = vec![0f64; m];
            for (k, &v) in chol.order.iter().enumerate() {
                out[v as usize] = x[k];
            }
            out
        };
        let expected = solve(&whole);
        // The solution satisfies B·x = rhs.
        for i in 0..m {
            let bx = b_diag[i] * expected[i] + off(i).map(|(j, x)| x * expected[j as usize]).sum::<f64>();
            assert!((bx - rhs[i]).abs() < 1e-9, "row {i}: {bx} vs {}", rhs[i]);
        }
        let row = |i: usize| pixels[i] as usize / w;
        for bands in [2, 3, 7, 60] {
            let chol = factor_in_bands::<INLINE, _>(row, off, &b_diag, 2, usize::MAX, bands).expect("factors");
            assert!(chol.parts.len() > 2 || bands == 2, "{bands} bands make separators");
            for (i, (got, want)) in solve(&chol).iter().zip(&expected).enumerate() {
                assert!(
                    (got - want).abs() <= 1e-9 * want.abs().max(1.0),
                    "{bands} bands, unknown {i}: {got} vs {want}"
                );
            }
        }
    }

    #[test]
    fn a_wide_hole_is_left_to_multigrid() {
        // A 60×60 square: minimum degree's fronts grow with the side, past the work bound.
        let (w, h) = (80, 80);
        let pixels: Vec<u32> = (0..w * h)
            .filter(|&p| (10..70).contains(&(p % w)) && (10..70).contains(&(p / w)))
            .map(|p| p as u32)
            .collect();
        assert!(factor(w, h, &pixels).is_none());
    }

    #[test]
    fn thickness_counts_unknowns_whose_runs_are_long_both_ways() {
        // Neighbours (left, right, up, down) in row order of a w×h block of unknowns.
        let block = |w: usize, h: usize| -> Vec<[u32; 4]> {
            (0..w * h)
                .map(|i| {
                    let (x, y) = (i % w, i / w);
                    let at = |ok: bool, j: usize| if ok { j as u32 } else { NONE };
                    [
                        at(x > 0, i.wrapping_sub(1)),
                        at(x + 1 < w, i + 1),
                        at(y > 0, i.wrapping_sub(w)),
                        at(y + 1 < h, i + w),
                    ]
                })
                .collect()
        };
        assert_eq!(thick_share(&block(40, 3)), 0.0, "a 3-pixel strip is thin");
        assert_eq!(thick_share(&block(9, 9)), 1.0, "9 > THICK both ways");
        assert_eq!(thick_share(&block(8, 30)), 0.0, "8 wide is not more than THICK");
    }

    #[test]
    fn neighbour_lists_keep_their_members_and_values_past_the_inline_room() {
        // Unknown 0 starts with neighbours 1 and 2; 1 starts with 0.
        let mut g = Graph::<INLINE>::new(3);
        g.add_row(4.0, [(1, -1.0), (2, -2.0)].into_iter());
        g.add_row(5.0, [(0, -3.0)].into_iter());
        g.add_row(6.0, std::iter::empty());
        for t in 3..3 + 2 * INLINE as u32 {
            g.push(0, t, f64::from(t) / 8.0);
        }
        g.remove(0, 2);
        g.remove(0, 7);
        g.remove(0, 99);
        g.remove(1, 0);
        let (list, values) = g.list(0);
        let mut pairs: Vec<(u32, f64)> = list.iter().copied().zip(values.iter().copied()).collect();
        pairs.sort_by_key(|p| p.0);
        let expected: Vec<(u32, f64)> = std::iter::once((1, -1.0))
            .chain((3..3 + 2 * INLINE as u32).filter(|&t| t != 7).map(|t| (t, f64::from(t) / 8.0)))
            .collect();
        assert_eq!(pairs, expected);
        assert_eq!(g.len(0), expected.len());
        assert!(g.list(1).0.is_empty() && g.list(2).0.is_empty());
        assert_eq!([g.nodes[0].diag, g.nodes[1].diag, g.nodes[2].diag], [4.0, 5.0, 6.0]);
        g.list_mut(0).1[0] = 0.5;
        assert_eq!(g.list(0).1[0], 0.5);
    }

    #[test]
    fn the_degree_lists_give_the_unknowns_by_least_degree_then_latest_arrival() {
        // Degrees 3, 1, 3, 0, 1, 2 (the lists need not be symmetric here).
        let at = [0usize, 3, 4, 7, 7, 8, 10];
        let adj = [1u32, 2, 3, 0, 0, 1, 3, 0, 0, 1];
        let mut g = Graph::<INLINE>::new(6);
        for v in 0..6 {
            g.add_row(4.0, adj[at[v]..at[v + 1]].iter().map(|&t| (t, -1.0)));
            g.link(v);
        }
        // Unknown 4 goes from degree 1 to 3, behind 0 and 2.
        g.unlink(4);
        g.push(4, 2, -1.0);
        g.push(4, 5, -1.0);
        g.link(4);
        let order: Vec<usize> = std::iter::from_fn(|| g.pop_min()).collect();
        assert_eq!(order, [3, 1, 5, 4, 2, 0]);
    }
}
