//! Holes solved exactly, by a sparse Cholesky factorisation in envelope (profile) storage.
//!
//! Many holes are small or thin: isolated dead pixels, the clusters of random dropout, short
//! scratches. Numbered line by line (rows, or columns when the hole's box is wider than tall),
//! every unknown couples to at most two earlier ones: its neighbour before it on its line and its
//! neighbour on the previous line. The Cholesky factor's row `i` then fills in only between the
//! first of those and `i` (the envelope; George & Liu, *Computer Solution of Large Sparse Positive
//! Definite Systems*, 1981, ch. 4). Where the envelopes are short the factorisation costs a few
//! multiply-adds per unknown and the solution is exact up to rounding, with no hierarchy and no
//! iteration; [`plan`] takes such holes and leaves the rest to multigrid.
//!
//! Nothing but the unknowns' positions is kept: the factor is rebuilt per image, hole by hole, in
//! scratch that each task reuses, so memory follows the unknowns.
//!
//! A hole is a 4-connected component of the mask, so every in-image neighbour of its unknowns is
//! either in the same hole or known: the equations need nothing but the hole's own positions.

use std::ops::Range;

use rayon::prelude::*;

use super::{FillError, GroupResult, Sums};

/// Largest hole solved directly.
const MAX_UNKNOWNS: usize = 1 << 14;
/// Largest mean over a hole's unknowns of the squared envelope length for it to be solved
/// directly: the factorisation costs about half that many multiply-adds per unknown, which at 256
/// is still less than one multigrid cycle. Random dropout at 50% averages about 15.
const MAX_MEAN_ENVELOPE_SQ: usize = 256;
/// Unknowns per parallel task (holes are not split).
const TASK_UNKNOWNS: usize = 1 << 14;
/// No coupling.
const NONE: u32 = u32::MAX;

/// The holes solved directly.
#[derive(Debug)]
pub(crate) struct Holes {
    width: usize,
    height: usize,
    /// Every hole's unknowns, hole after hole, each hole in its elimination order: as keys
    /// `y·width + x` (by rows) or `x·height + y` (by columns), increasing within a hole.
    keys: Vec<u32>,
    /// Hole `k` is `keys[start[k]..start[k + 1]]`.
    start: Vec<u32>,
    /// Whether hole `k` is numbered by columns.
    by_columns: Vec<bool>,
    /// Holes per parallel task: task `t` solves holes `tasks[t]..tasks[t + 1]`.
    tasks: Vec<u32>,
}

/// How a hole's keys map to pixels.
#[derive(Clone, Copy)]
struct Lines {
    /// Pixels per line, and lines.
    len: usize,
    count: usize,
    by_columns: bool,
    width: usize,
}

impl Lines {
    fn new(width: usize, height: usize, by_columns: bool) -> Self {
        if by_columns {
            Self { len: height, count: width, by_columns, width }
        } else {
            Self { len: width, count: height, by_columns, width }
        }
    }

    fn key(&self, x: usize, y: usize) -> u32 {
        let k = if self.by_columns { x * self.len + y } else { y * self.len + x };
        u32::try_from(k).expect("image index fits in u32")
    }

    /// The pixel indices `y·width + x` of increasing `keys`, dividing only where a line starts.
    fn pixels<'k>(&self, keys: &'k [u32]) -> impl Iterator<Item = usize> + 'k {
        let lines = *self;
        let (mut line, mut line_start, mut line_end) = (0usize, 0usize, 0usize);
        keys.iter().map(move |&key| {
            let k = key as usize;
            if !lines.by_columns {
                return k;
            }
            if k >= line_end {
                line = k / lines.len;
                line_start = line * lines.len;
                line_end = line_start + lines.len;
            }
            (k - line_start) * lines.width + line
        })
    }
}

/// The couplings of one unknown of a hole: its place (`a` along line `line`), the indices (within
/// the hole) of its neighbours before and after it on its line and on the previous and next lines
/// ([`NONE`] where that neighbour is known or outside the image), and its number of in-image
/// neighbours (the diagonal).
#[derive(Clone, Copy, Debug, Default)]
struct Coupling {
    a: u32,
    line: u32,
    prev: u32,
    up: u32,
    next: u32,
    down: u32,
    degree: u8,
}

impl Coupling {
    /// The first index row `i`'s envelope reaches (`i` itself when nothing earlier couples).
    fn first(&self, i: usize) -> usize {
        if self.up != NONE {
            self.up as usize
        } else if self.prev != NONE {
            self.prev as usize
        } else {
            i
        }
    }
}

/// Fills `out` with the couplings of the hole `keys` (increasing).
fn couplings(keys: &[u32], lines: Lines, out: &mut Vec<Coupling>) {
    out.clear();
    let m = keys.len();
    let (mut up_at, mut down_at) = (0usize, 0usize);
    // The current line and where it starts and ends, so a key's place needs no division unless
    // it starts a new line.
    let (mut line, mut line_start, mut line_end) = (0usize, 0usize, 0usize);
    for (i, &key) in keys.iter().enumerate() {
        let k = key as usize;
        if k >= line_end {
            line = k / lines.len;
            line_start = line * lines.len;
            line_end = line_start + lines.len;
        }
        let a = k - line_start;
        let mut c =
            Coupling { a: a as u32, line: line as u32, prev: NONE, up: NONE, next: NONE, down: NONE, degree: 0 };
        if a > 0 {
            c.degree += 1;
            if i > 0 && keys[i - 1] == key - 1 {
                c.prev = (i - 1) as u32;
            }
        }
        if a + 1 < lines.len {
            c.degree += 1;
            if i + 1 < m && keys[i + 1] == key + 1 {
                c.next = (i + 1) as u32;
            }
        }
        if line > 0 {
            c.degree += 1;
            // The keys are increasing, so the search positions only move forward.
            let target = key - lines.len as u32;
            while up_at < i && keys[up_at] < target {
                up_at += 1;
            }
            if keys[up_at] == target {
                c.up = up_at as u32;
            }
        }
        if line + 1 < lines.count {
            c.degree += 1;
            let target = key + lines.len as u32;
            down_at = down_at.max(i + 1);
            while down_at < m && keys[down_at] < target {
                down_at += 1;
            }
            if down_at < m && keys[down_at] == target {
                c.down = down_at as u32;
            }
        }
        out.push(c);
    }
}

/// `Σ (i − first(i))²` over a hole: about twice the multiply-adds of its factorisation.
fn envelope_cost(cpl: &[Coupling]) -> usize {
    cpl.iter().enumerate().map(|(i, c)| (i - c.first(i)).pow(2)).sum()
}

/// Takes the holes that are cheap to solve directly (see the module documentation) out of the
/// holes of `runs` (`hole_of` gives each run's hole, `sizes` each hole's unknowns, `boxes` each
/// hole's `(x_min, y_min, x_max, y_max)`). Returns them (if any) and which holes were taken.
pub(crate) fn plan(
    (width, height): (usize, usize),
    runs: &[Vec<(u32, u32)>],
    hole_of: &[u32],
    sizes: &[usize],
    boxes: &[super::HoleBox],
) -> (Option<Holes>, Vec<bool>) {
    let holes = sizes.len();
    let candidates: Vec<u32> =
        (0..holes).filter(|&k| sizes[k] <= MAX_UNKNOWNS).map(|k| u32::try_from(k).expect("holes fit in u32")).collect();
    let (mut keys, cand_start) = super::hole_pixels(runs, hole_of, width, sizes, &candidates);
    if keys.is_empty() {
        return (None, vec![false; holes]);
    }
    // Each candidate in its numbering, then its envelope's cost; candidates go in groups of about
    // TASK_UNKNOWNS unknowns, one task each.
    let mut groups = vec![0usize];
    for (i, w) in cand_start.windows(2).enumerate() {
        if (w[1] - cand_start[groups[groups.len() - 1]]) as usize >= TASK_UNKNOWNS {
            groups.push(i + 1);
        }
    }
    if groups[groups.len() - 1] != candidates.len() {
        groups.push(candidates.len());
    }
    let slices =
        super::split_lengths(&mut keys, groups.windows(2).map(|g| (cand_start[g[1]] - cand_start[g[0]]) as usize));
    let accepted: Vec<Vec<bool>> = slices
        .into_par_iter()
        .zip(groups.par_windows(2))
        .map(|(keys, g)| {
            let mut cpl = Vec::new();
            let base = cand_start[g[0]] as usize;
            (g[0]..g[1])
                .map(|i| {
                    let s = &mut keys[cand_start[i] as usize - base..cand_start[i + 1] as usize - base];
                    let (x0, y0, x1, y1) = boxes[candidates[i] as usize];
                    let by_columns = x1 - x0 > y1 - y0;
                    let lines = Lines::new(width, height, by_columns);
                    if by_columns {
                        for key in s.iter_mut() {
                            let p = *key as usize;
                            *key = lines.key(p % width, p / width);
                        }
                        s.sort_unstable();
                    }
                    couplings(s, lines, &mut cpl);
                    envelope_cost(&cpl) <= MAX_MEAN_ENVELOPE_SQ * s.len()
                })
                .collect()
        })
        .collect();
    // The taken holes' keys moved together, in place.
    let mut taken = vec![false; holes];
    let mut out = Holes { width, height, keys: Vec::new(), start: vec![0], by_columns: Vec::new(), tasks: vec![0] };
    let mut in_task = 0usize;
    let mut end = 0usize;
    for (i, ok) in accepted.into_iter().flatten().enumerate() {
        if !ok {
            continue;
        }
        let k = candidates[i] as usize;
        taken[k] = true;
        let (x0, y0, x1, y1) = boxes[k];
        let (a, b) = (cand_start[i] as usize, cand_start[i + 1] as usize);
        keys.copy_within(a..b, end);
        end += b - a;
        out.start.push(u32::try_from(end).expect("unknowns fit in u32"));
        out.by_columns.push(x1 - x0 > y1 - y0);
        in_task += b - a;
        if in_task >= TASK_UNKNOWNS {
            out.tasks.push(u32::try_from(out.by_columns.len()).expect("holes fit in u32"));
            in_task = 0;
        }
    }
    keys.truncate(end);
    keys.shrink_to_fit();
    out.keys = keys;
    if out.by_columns.is_empty() {
        return (None, taken);
    }
    if in_task > 0 {
        out.tasks.push(u32::try_from(out.by_columns.len()).expect("holes fit in u32"));
    }
    (Some(out), taken)
}

impl Holes {
    /// Number of unknowns.
    pub(crate) fn unknowns(&self) -> usize {
        self.keys.len()
    }

    /// Bytes held.
    pub(crate) fn memory_bytes(&self) -> usize {
        self.keys.len() * 4 + self.start.len() * 4 + self.by_columns.len() + self.tasks.len() * 4
    }

    fn hole(&self, k: usize) -> (Range<usize>, Lines) {
        (self.start[k] as usize..self.start[k + 1] as usize, Lines::new(self.width, self.height, self.by_columns[k]))
    }
}

/// One task's scratch, reused from hole to hole.
#[derive(Default)]
struct Scratch {
    cpl: Vec<Coupling>,
    /// Start of each row of the factor in `env`; the row holds columns `first(i)..i`.
    row_at: Vec<usize>,
    env: Vec<f64>,
    inv_diag: Vec<f64>,
    /// The right-hand side and the solution, `C` values per unknown.
    b: Vec<f64>,
    x: Vec<f64>,
}

/// Solves every hole for `C` channels of `planes`. The values come back in the order of
/// [`Holes::pixels`], `C` per unknown.
pub(crate) fn solve_group<const C: usize>(holes: &Holes, planes: &[&mut [f32]]) -> Result<GroupResult, FillError> {
    let n = holes.unknowns();
    // Written before read (each task stores its solutions), so the pages fault once.
    let mut rounded = vec![0f32; n * C];
    let slices = super::split_lengths(
        &mut rounded,
        holes.tasks.windows(2).map(|t| (holes.start[t[1] as usize] - holes.start[t[0] as usize]) as usize * C),
    );
    let sums: Vec<Result<Sums<C>, FillError>> = slices
        .into_par_iter()
        .zip(holes.tasks.par_windows(2))
        .map_init(Scratch::default, |scratch, (out, t)| {
            let mut sums = ([0f64; C], [0f64; C]);
            let base = holes.start[t[0] as usize] as usize;
            for k in t[0] as usize..t[1] as usize {
                let (range, lines) = holes.hole(k);
                let out = &mut out[(range.start - base) * C..(range.end - base) * C];
                let (r_sq, b_sq) = solve_hole::<C>(&holes.keys[range], lines, planes, scratch)?;
                for (o, &x) in out.iter_mut().zip(&scratch.x) {
                    #[allow(clippy::cast_possible_truncation)] // planes are f32 by design
                    {
                        *o = x as f32;
                    }
                }
                for c in 0..C {
                    sums.0[c] += r_sq[c];
                    sums.1[c] += b_sq[c];
                }
            }
            Ok(sums)
        })
        .collect();
    super::solved_exactly((Vec::new(), rounded), sums)
}

/// Solves one hole into `s.x` (`C` values per unknown) and returns the squared norms of its
/// residual and right-hand side per channel.
fn solve_hole<const C: usize>(
    keys: &[u32],
    lines: Lines,
    planes: &[&mut [f32]],
    s: &mut Scratch,
) -> Result<Sums<C>, FillError> {
    let m = keys.len();
    couplings(keys, lines, &mut s.cpl);
    let cpl = &s.cpl;

    // The right-hand side: each unknown's known in-image neighbours, summed.
    let mut b_sq = [0f64; C];
    s.b.clear();
    let w = lines.width;
    // Pixel steps along a line and across lines.
    let (along, across) = if lines.by_columns { (w, 1) } else { (1, w) };
    for c in cpl {
        let (a, line) = (c.a as usize, c.line as usize);
        let p = if lines.by_columns { a * w + line } else { line * w + a };
        let mut sum = [0f64; C];
        let known = [
            (a > 0 && c.prev == NONE, p.wrapping_sub(along)),
            (a + 1 < lines.len && c.next == NONE, p + along),
            (line > 0 && c.up == NONE, p.wrapping_sub(across)),
            (line + 1 < lines.count && c.down == NONE, p + across),
        ];
        for (is_known, q) in known {
            if !is_known {
                continue;
            }
            for (cc, sc) in sum.iter_mut().enumerate() {
                let v = planes[cc][q];
                if !v.is_finite() {
                    return Err(FillError::NonFiniteRim { x: q % w, y: q / w });
                }
                *sc += f64::from(v);
            }
        }
        s.b.extend_from_slice(&sum);
        for cc in 0..C {
            b_sq[cc] += sum[cc] * sum[cc];
        }
    }

    // Factor A = L·Lᵀ row by row: L_ij = (A_ij − Σ_k L_ik·L_jk) / L_jj over the overlap of the
    // two rows' envelopes, then L_ii = √(A_ii − Σ_k L_ik²).
    s.row_at.clear();
    let mut len = 0usize;
    for (i, c) in cpl.iter().enumerate() {
        s.row_at.push(len);
        len += i - c.first(i);
    }
    s.env.clear();
    s.env.resize(len, 0.0);
    s.inv_diag.clear();
    for (i, c) in cpl.iter().enumerate() {
        let fi = c.first(i);
        let (done, row) = s.env.split_at_mut(s.row_at[i]);
        let row = &mut row[..i - fi];
        // A's off-diagonal entries of row i below the diagonal: −1 at the earlier neighbours.
        if c.up != NONE {
            row[c.up as usize - fi] = -1.0;
        }
        if c.prev != NONE {
            row[c.prev as usize - fi] = -1.0;
        }
        for j in fi..i {
            let fj = cpl[j].first(j);
            let k0 = fi.max(fj);
            let lj = &done[s.row_at[j] + (k0 - fj)..s.row_at[j] + (j - fj)];
            let (li, rest) = row.split_at_mut(j - fi);
            let dot: f64 = li[k0 - fi..].iter().zip(lj).map(|(a, b)| a * b).sum();
            rest[0] = (rest[0] - dot) * s.inv_diag[j];
        }
        let d = f64::from(c.degree) - row.iter().map(|v| v * v).sum::<f64>();
        if d <= 0.0 || !d.is_finite() {
            // Not possible for these matrices in exact arithmetic (each hole has a known
            // neighbour, so A is positive definite); reported rather than hidden.
            return Err(FillError::NoConvergence { residual: f64::INFINITY, cycles: 0 });
        }
        s.inv_diag.push(1.0 / d.sqrt());
    }

    // L·y = b, then Lᵀ·x = y, in place, all channels together.
    let x = &mut s.x;
    x.clone_from(&s.b);
    for (i, c) in cpl.iter().enumerate() {
        let fi = c.first(i);
        let row = &s.env[s.row_at[i]..s.row_at[i] + (i - fi)];
        let mut acc = [0f64; C];
        acc.copy_from_slice(&x[i * C..(i + 1) * C]);
        for (k, &l) in row.iter().enumerate() {
            for cc in 0..C {
                acc[cc] -= l * x[(fi + k) * C + cc];
            }
        }
        for cc in 0..C {
            x[i * C + cc] = acc[cc] * s.inv_diag[i];
        }
    }
    for i in (0..m).rev() {
        let fi = cpl[i].first(i);
        let d = s.inv_diag[i];
        let mut xi = [0f64; C];
        for cc in 0..C {
            xi[cc] = x[i * C + cc] * d;
            x[i * C + cc] = xi[cc];
        }
        let row = &s.env[s.row_at[i]..s.row_at[i] + (i - fi)];
        for (k, &l) in row.iter().enumerate() {
            for cc in 0..C {
                x[(fi + k) * C + cc] -= l * xi[cc];
            }
        }
    }

    // The residual b − A·x of the solution, for the report: r_i = b_i − degree_i·x_i + the sum
    // of its hole neighbours' x.
    let mut r_sq = [0f64; C];
    for (i, c) in cpl.iter().enumerate() {
        super::add_residual_sq(&mut r_sq, &s.b, x, i, f64::from(c.degree), [c.prev, c.next, c.up, c.down]);
    }
    Ok((r_sq, b_sq))
}

/// A plane's samples, shared between the tasks of [`write_back`], which write disjoint pixels.
#[derive(Clone, Copy)]
struct SharedPlane(*mut f32);
// SAFETY: see the type's documentation: every unknown belongs to one hole and every hole to one
// task, so no two tasks write the same sample, and nothing reads the plane meanwhile.
unsafe impl Send for SharedPlane {}
// SAFETY: as above.
unsafe impl Sync for SharedPlane {}

/// Writes a group's values (from [`solve_group`], `count` channels) into `planes[first..]`.
pub(crate) fn write_back(holes: &Holes, planes: &mut [&mut [f32]], first: usize, count: usize, values: &[f32]) {
    for (c, plane) in planes[first..first + count].iter_mut().enumerate() {
        let len = plane.len();
        let ptr = SharedPlane(plane.as_mut_ptr());
        holes.tasks.par_windows(2).for_each(|t| {
            let p = ptr;
            for k in t[0] as usize..t[1] as usize {
                let (range, lines) = holes.hole(k);
                for (i, q) in range.clone().zip(lines.pixels(&holes.keys[range])) {
                    assert!(q < len, "an unknown lies in the image");
                    // SAFETY: `q` is in the plane (checked) and written by this task only (see
                    // `SharedPlane`).
                    unsafe {
                        *p.0.add(q) = values[i * count + c];
                    }
                }
            }
        });
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::fill::dense::Cholesky;
    use crate::mask::{Mask, row_runs, run_holes};

    /// The direct part of `mask`'s holes, as `plan` in the solver takes it.
    fn holes_of(mask: &Mask) -> (Option<Holes>, Vec<bool>) {
        let runs = row_runs(mask);
        let (hole_of, count) = run_holes(&runs);
        let (sizes, boxes) = crate::fill::hole_extents(&runs, &hole_of, count);
        plan((mask.width(), mask.height()), &runs, &hole_of, &sizes, &boxes)
    }

    /// The fill of every masked pixel by a dense factorisation of the whole system (all holes at
    /// once, numbered in pixel order): the same equations, assembled independently of `couplings`.
    fn dense_fill(mask: &Mask, plane: &[f32]) -> Vec<f64> {
        let (w, h) = (mask.width(), mask.height());
        let index: Vec<Option<usize>> = {
            let mut n = 0;
            mask.bits().iter().map(|&m| m.then(|| (n, n += 1).0)).collect()
        };
        let n = index.iter().flatten().count();
        let mut a = vec![0f64; n * n];
        let mut x = vec![0f64; n];
        for p in 0..w * h {
            let Some(i) = index[p] else { continue };
            let (px, py) = (p % w, p / w);
            for q in [
                (px > 0).then(|| p - 1),
                (px + 1 < w).then(|| p + 1),
                (py > 0).then(|| p - w),
                (py + 1 < h).then(|| p + w),
            ]
            .into_iter()
            .flatten()
            {
                a[i * n + i] += 1.0;
                match index[q] {
                    Some(j) => a[i * n + j] = -1.0,
                    None => x[i] += f64::from(plane[q]),
                }
            }
        }
        Cholesky::factor(n, a).expect("positive definite").solve_in_place(&mut x);
        x
    }

    fn random_plane(w: usize, h: usize, seed: u64) -> Vec<f32> {
        let mut state = seed;
        (0..w * h)
            .map(|_| {
                state = state.wrapping_mul(6_364_136_223_846_793_005).wrapping_add(1_442_695_040_888_963_407);
                (state >> 40) as f32 / (1u64 << 24) as f32 * 100.0
            })
            .collect()
    }

    #[test]
    fn direct_holes_match_a_dense_factorisation_in_both_numberings_and_at_the_image_edge() {
        // Holes wider than tall (numbered by columns), taller than wide (by rows), touching every
        // edge and corner, single pixels, an L and a ring (so a line has several pieces).
        let (w, h) = (23, 17);
        let mask = Mask::from_fn(w, h, |x, y| {
            (y == 0 && (2..12).contains(&x))
                || (x == w - 1 && (3..16).contains(&y))
                || (x, y) == (0, h - 1)
                || (x, y) == (5, 5)
                || ((8..11).contains(&x) && (4..13).contains(&y) && !(x == 9 && (6..11).contains(&y)))
                || (y == 14 && (1..7).contains(&x))
                || (x == 1 && (8..14).contains(&y))
                || ((13..20).contains(&x) && (9..12).contains(&y) && !((15..18).contains(&x) && y == 10))
        });
        let (holes, taken) = holes_of(&mask);
        let holes = holes.expect("small holes are taken");
        assert!(taken.iter().all(|&t| t), "every hole here is small and thin");
        assert!(holes.by_columns.iter().any(|&c| c) && holes.by_columns.iter().any(|&c| !c), "both numberings occur");
        for channels in [1usize, 3] {
            let planes: Vec<Vec<f32>> = (0..channels).map(|c| random_plane(w, h, 11 + c as u64)).collect();
            let mut copies = planes.clone();
            let refs: Vec<&mut [f32]> = copies.iter_mut().map(|p| &mut p[..]).collect();
            let result = match channels {
                1 => solve_group::<1>(&holes, &refs),
                _ => solve_group::<3>(&holes, &refs),
            }
            .expect("solves");
            let mut refs = refs;
            write_back(&holes, &mut refs, 0, channels, &result.rounded);
            for (c, plane) in planes.iter().enumerate() {
                let expected = dense_fill(&mask, plane);
                let mut j = 0;
                for p in 0..w * h {
                    if mask.bits()[p] {
                        let diff = (f64::from(copies[c][p]) - expected[j]).abs();
                        assert!(
                            diff <= 1e-4,
                            "channel {c} pixel ({}, {}): {} vs {}",
                            p % w,
                            p / w,
                            copies[c][p],
                            expected[j]
                        );
                        j += 1;
                    } else {
                        assert_eq!(copies[c][p].to_bits(), plane[p].to_bits(), "known pixels stay");
                    }
                }
                assert!(result.reports[c].relative_residual < 1e-12, "{:?}", result.reports[c]);
                assert_eq!(result.reports[c].cycles, 0);
            }
        }
    }

    #[test]
    fn wide_holes_are_left_to_multigrid_and_dropout_is_taken() {
        // A 40×40 square: every row's envelope is 40 long, mean square 1600 > the bound.
        let square = Mask::from_fn(60, 60, |x, y| (10..50).contains(&x) && (10..50).contains(&y));
        let (holes, taken) = holes_of(&square);
        assert!(holes.is_none() && taken == [false]);
        // A 3-pixel-wide diagonal band is thin along its length: taken whole.
        let band = Mask::from_fn(80, 80, |x, y| (x as isize - y as isize).abs() <= 1 && x > 2 && x < 77);
        assert!(holes_of(&band).0.is_some());
        // Half the pixels missing at random: small clusters, all taken.
        let mut state = 5u64;
        let dropout = Mask::from_fn(128, 128, |_, _| {
            state = state.wrapping_mul(6_364_136_223_846_793_005).wrapping_add(1_442_695_040_888_963_407);
            state >> 63 == 1
        });
        let (holes, taken) = holes_of(&dropout);
        assert!(taken.iter().all(|&t| t));
        assert_eq!(holes.expect("taken").unknowns(), dropout.bits().iter().filter(|&&b| b).count());
    }

    #[test]
    fn a_non_finite_rim_value_is_reported_with_its_position() {
        let mask = Mask::from_fn(8, 8, |x, y| (x, y) == (3, 4));
        let (holes, _) = holes_of(&mask);
        let mut plane = vec![1f32; 64];
        plane[4 * 8 + 4] = f32::NAN;
        let err = solve_group::<1>(&holes.expect("taken"), &[&mut plane[..]]).err();
        assert_eq!(err, Some(FillError::NonFiniteRim { x: 4, y: 4 }));
    }
}
