//! Thin holes of any shape solved exactly by a sparse Cholesky factorisation made once per mask.
//!
//! The envelope method of [`super::direct`] needs a hole that is thin across its lines; a network
//! of crossing scratches or a dead row crossing dead columns is thin everywhere but wide in every
//! line. Ordered by minimum degree (eliminate next the unknown with the fewest uneliminated
//! neighbours; Tinney & Walker 1967, George & Liu 1981, ch. 5) the factor of such a hole has only
//! a few entries per unknown: along a strip the elimination front stays as wide as the strip, and
//! a crossing adds a small clique. The ordering is an explicit elimination graph, whose
//! neighbour sets at each elimination are the columns of the factor, so the symbolic factorisation
//! comes with it; [`factor`] gives up (the hole goes to multigrid) as soon as the factor would cost
//! more than [`MAX_WORK_PER_UNKNOWN`] multiply-adds per unknown.
//!
//! Solving an image is then one forward and one backward substitution per hole, all channels
//! together: the cheapest fill for a mask applied to many images and for re-fills in the window.

use rayon::prelude::*;

use super::{FillError, GroupResult, Sums};

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
    /// Column `k` of `L` below the diagonal: rows `row[col[k]..col[k + 1]]` (increasing, all
    /// greater than `k`), values `val[..]` at the same places.
    col: Vec<u32>,
    row: Vec<u32>,
    val: Vec<f64>,
    /// `1 / L_kk`.
    inv_diag: Vec<f64>,
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
    // The hole's graph: 4-neighbours that are unknowns. The pixels increase, so the searches for
    // the neighbours above and below move forward only.
    let mut nbr0 = Vec::with_capacity(m);
    let (mut up_at, mut down_at) = (0usize, 0usize);
    for i in 0..m {
        let p = pixels[i] as usize;
        let (x, y) = (p % width, p / width);
        let mut n = [NONE; 4];
        if x > 0 && i > 0 && pixels[i - 1] as usize == p - 1 {
            n[0] = (i - 1) as u32;
        }
        if x + 1 < width && i + 1 < m && pixels[i + 1] as usize == p + 1 {
            n[1] = (i + 1) as u32;
        }
        if y > 0 {
            while up_at < i && (pixels[up_at] as usize) < p - width {
                up_at += 1;
            }
            if pixels[up_at] as usize == p - width {
                n[2] = up_at as u32;
            }
        }
        if y + 1 < height {
            down_at = down_at.max(i + 1);
            while down_at < m && (pixels[down_at] as usize) < p + width {
                down_at += 1;
            }
            if down_at < m && pixels[down_at] as usize == p + width {
                n[3] = down_at as u32;
            }
        }
        nbr0.push(n);
    }
    let share = thick_share(&nbr0);
    if share > MAX_THICK_SHARE {
        return None;
    }
    // The matrix: the degree on the diagonal, −1 towards each hole neighbour.
    let mut at = Vec::with_capacity(m + 1);
    at.push(0u32);
    let mut adj = Vec::with_capacity(4 * m);
    for n in &nbr0 {
        adj.extend(n.iter().copied().filter(|&j| j != NONE));
        at.push(u32::try_from(adj.len()).expect("couplings fit in u32"));
    }
    let off = vec![-1f64; adj.len()];
    let diag: Vec<f64> = pixels
        .iter()
        .map(|&p| {
            let (x, y) = (p as usize % width, p as usize / width);
            f64::from(u8::from(x > 0) + u8::from(x + 1 < width) + u8::from(y > 0) + u8::from(y + 1 < height))
        })
        .collect();
    let chol = SparseCholesky::new(&at, &adj, &off, &diag, MAX_WORK_PER_UNKNOWN * m)?;
    Some(Factor { pixel: chol.in_order(pixels), nbr: chol.renumber(&nbr0), chol })
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
    pub(crate) fn new(at: &[u32], adj: &[u32], off: &[f64], diag: &[f64], limit: usize) -> Option<Self> {
        let m = diag.len();
        // The elimination graph, each unknown's neighbours in one arena (see `Graph`).
        let mut graph = Graph::new(at, adj);
        // Minimum degree on the explicit elimination graph, with a bucket of unknowns per degree.
        let mut buckets = Buckets::new(m);
        for v in 0..m {
            buckets.insert(v, graph.neighbours(v).len());
        }
        let mut order = Vec::with_capacity(m);
        // The neighbour set of each elimination (original indices): the factor's column pattern.
        let mut pattern_at = Vec::with_capacity(m + 1);
        let mut patterns: Vec<u32> = Vec::new();
        pattern_at.push(0usize);
        let mut work = 0usize;
        let mut front = [0u32; MAX_FRONT];
        // A neighbour's mark is `u` while it is known to be in the list of `u` being joined.
        while let Some(v) = buckets.pop_min() {
            order.push(v as u32);
            let f = graph.neighbours(v).len();
            if f > MAX_FRONT {
                return None;
            }
            front[..f].copy_from_slice(graph.neighbours(v));
            let front = &front[..f];
            work += f * (f + 3) / 2;
            if work > limit {
                return None;
            }
            for &u in front {
                let u = u as usize;
                graph.remove(u, v as u32);
                graph.set_mark(u, u as u32);
                for k in 0..graph.neighbours(u).len() {
                    let t = graph.neighbours(u)[k];
                    graph.set_mark(t as usize, u as u32);
                }
                for &t in front {
                    if graph.mark(t as usize) != u as u32 {
                        graph.push(u, t);
                    }
                }
                buckets.remove(u);
                buckets.insert(u, graph.neighbours(u).len());
            }
            patterns.extend_from_slice(front);
            pattern_at.push(patterns.len());
        }
        drop(graph);
        debug_assert_eq!(order.len(), m);
        let pos = positions(&order);

        // The structure of L in elimination order.
        let mut col = Vec::with_capacity(m + 1);
        col.push(0u32);
        let mut row = Vec::with_capacity(patterns.len());
        for k in 0..m {
            let start = row.len();
            row.extend(patterns[pattern_at[k]..pattern_at[k + 1]].iter().map(|&u| pos[u as usize]));
            row[start..].sort_unstable();
            col.push(u32::try_from(row.len()).expect("factor entries fit in u32"));
        }
        drop(patterns);

        // Numeric factorisation, right-looking: when column k is final, its outer product is
        // taken from the later columns (every pair of its rows is an entry of L by construction).
        let mut val = vec![0f64; row.len()];
        let mut d = vec![0f64; m];
        for (k, &v) in order.iter().enumerate() {
            let v = v as usize;
            d[k] = diag[v];
            let (a, b) = (col[k] as usize, col[k + 1] as usize);
            for t in at[v] as usize..at[v + 1] as usize {
                let j = pos[adj[t] as usize];
                if j as usize > k {
                    let at = a + row[a..b].binary_search(&j).expect("a neighbour is in its column");
                    val[at] = off[t];
                }
            }
        }
        let mut inv_diag = vec![0f64; m];
        for k in 0..m {
            let dk = d[k];
            if dk <= 0.0 || !dk.is_finite() {
                return None;
            }
            let l = dk.sqrt();
            inv_diag[k] = 1.0 / l;
            let (a, b) = (col[k] as usize, col[k + 1] as usize);
            for v in &mut val[a..b] {
                *v /= l;
            }
            for s in a..b {
                let (i, li) = (row[s] as usize, val[s]);
                d[i] -= li * li;
                // Rows after `s` are greater than i: they update column i.
                let (ca, cb) = (col[i] as usize, col[i + 1] as usize);
                let mut at = ca;
                for t in s + 1..b {
                    let r = row[t];
                    // Both lists increase, so the search moves forward only.
                    while row[at] < r {
                        at += 1;
                    }
                    debug_assert!(at < cb && row[at] == r);
                    val[at] -= val[t] * li;
                }
            }
        }
        Some(Self { order, col, row, val, inv_diag })
    }

    /// `of` (one item per unknown of the matrix) in elimination order.
    pub(crate) fn in_order<T: Copy>(&self, of: &[T]) -> Vec<T> {
        self.order.iter().map(|&v| of[v as usize]).collect()
    }

    /// Neighbour lists (the matrix's indices, [`NONE`] for none) in elimination order, and as
    /// elimination positions.
    pub(crate) fn renumber<const K: usize>(&self, nbr: &[[u32; K]]) -> Vec<[u32; K]> {
        let pos = positions(&self.order);
        self.order.iter().map(|&v| nbr[v as usize].map(|j| if j == NONE { NONE } else { pos[j as usize] })).collect()
    }

    /// Bytes held.
    pub(crate) fn memory_bytes(&self) -> usize {
        self.order.len() * (4 + 4 + 8) + self.row.len() * 12
    }

    /// Solves `A·x = b` for `C` right-hand sides at once: `x` holds `b` in elimination order (`C`
    /// values per unknown) and receives the solution in the same order.
    pub(crate) fn solve_in_place<const C: usize>(&self, x: &mut [f64]) {
        let m = self.order.len();
        debug_assert_eq!(x.len(), m * C);
        // L·y = b (by columns), then Lᵀ·x = y (by rows of Lᵀ, which are L's columns).
        for k in 0..m {
            let d = self.inv_diag[k];
            let mut yk = [0f64; C];
            for c in 0..C {
                yk[c] = x[k * C + c] * d;
                x[k * C + c] = yk[c];
            }
            let (a, e) = (self.col[k] as usize, self.col[k + 1] as usize);
            for (&i, &l) in self.row[a..e].iter().zip(&self.val[a..e]) {
                for c in 0..C {
                    x[i as usize * C + c] -= l * yk[c];
                }
            }
        }
        for k in (0..m).rev() {
            let (a, e) = (self.col[k] as usize, self.col[k + 1] as usize);
            let mut s = [0f64; C];
            s.copy_from_slice(&x[k * C..(k + 1) * C]);
            for (&i, &l) in self.row[a..e].iter().zip(&self.val[a..e]) {
                for c in 0..C {
                    s[c] -= l * x[i as usize * C + c];
                }
            }
            for c in 0..C {
                x[k * C + c] = s[c] * self.inv_diag[k];
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
    let mut along = [vec![0u32; m], vec![0u32; m]];
    for (dir, (back, fwd)) in [(0usize, 1usize), (2, 3)].into_iter().enumerate() {
        let len = &mut along[dir];
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
    }
    let thick = (0..m).filter(|&i| along[0][i].min(along[1][i]) > THICK).count();
    thick as f64 / m.max(1) as f64
}

/// Neighbours kept in an unknown's own record; longer lists (at crossings) spill to a vector.
const INLINE: usize = 13;

/// One unknown of the elimination graph: its neighbour list and the ordering's mark, in one cache
/// line. The ordering touches each neighbour of an eliminated unknown, and the neighbours of
/// those; with the list, its length and the mark in separate arrays, each touch was several
/// cache misses once the hole's graph outgrew the processor's second-level cache.
#[derive(Clone, Copy)]
#[repr(C, align(64))]
struct Node {
    len: u32,
    /// Index into [`Graph::spilled`] when the list is there, else [`NONE`].
    spill: u32,
    /// See [`SparseCholesky::new`].
    mark: u32,
    inline: [u32; INLINE],
}

/// The neighbour lists of an elimination graph.
struct Graph {
    nodes: Vec<Node>,
    spilled: Vec<Vec<u32>>,
}

impl Graph {
    /// The graph whose unknown `v` has the neighbours `adj[at[v]..at[v + 1]]`.
    fn new(at: &[u32], adj: &[u32]) -> Self {
        let m = at.len() - 1;
        let mut g =
            Self { nodes: vec![Node { len: 0, spill: NONE, mark: NONE, inline: [0; INLINE] }; m], spilled: Vec::new() };
        for v in 0..m {
            for &j in &adj[at[v] as usize..at[v + 1] as usize] {
                g.push(v, j);
            }
        }
        g
    }

    fn neighbours(&self, v: usize) -> &[u32] {
        let node = &self.nodes[v];
        if node.spill == NONE { &node.inline[..node.len as usize] } else { &self.spilled[node.spill as usize] }
    }

    fn mark(&self, v: usize) -> u32 {
        self.nodes[v].mark
    }

    fn set_mark(&mut self, v: usize, mark: u32) {
        self.nodes[v].mark = mark;
    }

    fn push(&mut self, v: usize, t: u32) {
        let node = &mut self.nodes[v];
        if node.spill != NONE {
            self.spilled[node.spill as usize].push(t);
        } else if (node.len as usize) < INLINE {
            node.inline[node.len as usize] = t;
            node.len += 1;
        } else {
            let mut list = node.inline.to_vec();
            list.push(t);
            node.spill = u32::try_from(self.spilled.len()).expect("spilled lists fit in u32");
            self.spilled.push(list);
        }
    }

    /// Removes `t` from `v`'s list (order is not kept).
    fn remove(&mut self, v: usize, t: u32) {
        let node = &mut self.nodes[v];
        let list: &mut [u32] = if node.spill == NONE {
            &mut node.inline[..node.len as usize]
        } else {
            &mut self.spilled[node.spill as usize]
        };
        if let Some(k) = list.iter().position(|&x| x == t) {
            let last = list.len() - 1;
            list.swap(k, last);
            if node.spill == NONE {
                node.len -= 1;
            } else {
                self.spilled[node.spill as usize].pop();
            }
        }
    }
}

/// Unknowns by degree, for the minimum-degree ordering: a doubly linked list per degree, joined
/// and taken at the back. Ties go to the unknown that joined last — after an elimination, one of
/// its neighbours — so the ordering walks along a stroke while its lists are in cache (scratches
/// at 4096, side by side: setup 0.165 → 0.149 s at best, 0.22 → 0.18 s median; taking the
/// unknown waiting longest swept across every stroke in turn).
struct Buckets {
    head: Vec<u32>,
    tail: Vec<u32>,
    next: Vec<u32>,
    prev: Vec<u32>,
    degree: Vec<u32>,
    /// No bucket below this one holds an unknown.
    min: usize,
}

impl Buckets {
    fn new(m: usize) -> Self {
        Self {
            head: vec![NONE; m + 1],
            tail: vec![NONE; m + 1],
            next: vec![NONE; m],
            prev: vec![NONE; m],
            degree: vec![0; m],
            min: 0,
        }
    }

    fn insert(&mut self, v: usize, d: usize) {
        let d = d.min(self.head.len() - 1);
        self.degree[v] = d as u32;
        let t = self.tail[d];
        self.prev[v] = t;
        self.next[v] = NONE;
        if t == NONE {
            self.head[d] = v as u32;
        } else {
            self.next[t as usize] = v as u32;
        }
        self.tail[d] = v as u32;
        self.min = self.min.min(d);
    }

    fn remove(&mut self, v: usize) {
        let d = self.degree[v] as usize;
        let (p, n) = (self.prev[v], self.next[v]);
        if p == NONE {
            self.head[d] = n;
        } else {
            self.next[p as usize] = n;
        }
        if n == NONE {
            self.tail[d] = p;
        } else {
            self.prev[n as usize] = p;
        }
    }

    fn pop_min(&mut self) -> Option<usize> {
        while self.min < self.head.len() && self.head[self.min] == NONE {
            self.min += 1;
        }
        let v = *self.tail.get(self.min)? as usize;
        self.remove(v);
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
    // The right-hand side: the known in-image neighbours of each unknown, summed.
    let mut b = vec![0f64; m * C];
    let mut b_sq = [0f64; C];
    for k in 0..m {
        let p = hole.pixel[k] as usize;
        let (px, py) = (p % width, p / width);
        let sides = [
            (px > 0, p.wrapping_sub(1)),
            (px + 1 < width, p + 1),
            (py > 0, p.wrapping_sub(width)),
            (py + 1 < height, p + width),
        ];
        let mut sum = [0f64; C];
        for ((inside, q), &j) in sides.into_iter().zip(&hole.nbr[k]) {
            if !inside || j != NONE {
                continue;
            }
            for (c, sc) in sum.iter_mut().enumerate() {
                let v = planes[c][q];
                if !v.is_finite() {
                    return Err(FillError::NonFiniteRim { x: q % width, y: q / width });
                }
                *sc += f64::from(v);
            }
        }
        b[k * C..(k + 1) * C].copy_from_slice(&sum);
        for c in 0..C {
            b_sq[c] += sum[c] * sum[c];
        }
    }
    x.copy_from_slice(&b);
    hole.chol.solve_in_place::<C>(x);
    // The residual b − A·x for the report.
    let mut r_sq = [0f64; C];
    for k in 0..m {
        let p = hole.pixel[k] as usize;
        let (px, py) = (p % width, p / width);
        let degree =
            f64::from(u8::from(px > 0) + u8::from(px + 1 < width) + u8::from(py > 0) + u8::from(py + 1 < height));
        super::add_residual_sq(&mut r_sq, &b, x, k, degree, hole.nbr[k]);
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

    #[test]
    fn a_crossing_network_at_the_image_edge_matches_a_dense_factorisation() {
        // Two crossing diagonal strokes 2 px wide, a dead row and a dead column that run into the
        // image edges and cross them: one hole, thin everywhere, wide in every row.
        let (w, h) = (40, 31);
        let inside = |x: usize, y: usize| {
            let (xi, yi) = (x as isize, y as isize);
            (xi - yi).abs() <= 1 && x < 30 || (xi + yi - 38).abs() <= 0 || y == 20 || x == 7
        };
        let pixels: Vec<u32> = (0..w * h).filter(|&p| inside(p % w, p / w)).map(|p| p as u32).collect();
        let plane: Vec<f32> = (0..w * h).map(|p| ((p * 37) % 101) as f32 + 0.25 * (p % w) as f32).collect();
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
    fn neighbour_lists_keep_their_members_past_the_inline_room() {
        // Unknown 0 starts with neighbours 1 and 2; 1 starts with 0.
        let mut g = Graph::new(&[0, 2, 3, 3], &[1, 2, 0]);
        for t in 3..3 + 2 * INLINE as u32 {
            g.push(0, t);
        }
        g.remove(0, 2);
        g.remove(0, 7);
        g.remove(0, 99);
        g.remove(1, 0);
        let mut list = g.neighbours(0).to_vec();
        list.sort_unstable();
        let expected: Vec<u32> = (1..3 + 2 * INLINE as u32).filter(|&t| t != 2 && t != 7).collect();
        assert_eq!(list, expected);
        assert!(g.neighbours(1).is_empty() && g.neighbours(2).is_empty());
        g.set_mark(2, 5);
        assert_eq!((g.mark(2), g.mark(1)), (5, NONE));
    }

    #[test]
    fn the_degree_buckets_give_the_unknowns_by_least_degree_then_latest_arrival() {
        let mut b = Buckets::new(6);
        for (v, d) in [(0, 3), (1, 1), (2, 3), (3, 0), (4, 1), (5, 2)] {
            b.insert(v, d);
        }
        b.remove(4);
        b.insert(4, 3);
        let order: Vec<usize> = std::iter::from_fn(|| b.pop_min()).collect();
        assert_eq!(order, [3, 1, 5, 4, 2, 0]);
    }
}
