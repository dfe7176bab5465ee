//! Thin biharmonic holes solved exactly by a sparse Cholesky factorisation made once per mask.
//!
//! The biharmonic couplings reach two pixels (the 13-point stencil), so unknowns that close form
//! one system even across a known pixel between them. Each such component that is thin — few
//! unknowns with long runs both ways, and sparse in its bounding box — is ordered by minimum
//! degree and factored ([`SparseCholesky`]), as the harmonic fill does with its thin holes: the
//! elimination fronts of a scratch stay a few pixels wide; a large component goes in two bands
//! side by side, its separating strip two rows thick. Solving an image is then one forward and
//! one backward substitution per component. Wide holes and dense scatter (dropout, whose
//! couplings join half the image into one mesh) stay with the multigrid.

use rayon::prelude::*;

use super::{FINE, fine_row, rhs_at, row_square, square_index};
use crate::fill::sparse::{
    BANDED_MIN, BANDS, CHUNK, INLINE_WIDE, MAX_THICK_SHARE, MAX_UNKNOWNS, NONE, SparseCholesky, factor_in_bands,
    thick_share,
};
use crate::fill::{FillError, PackedMask};
/// Largest multiply-add count of a factorisation, per unknown, before the component is left to
/// multigrid (one conjugate-gradient solve with its multigrid preconditioner costs over 1000).
const MAX_WORK_PER_UNKNOWN: usize = 400;
/// Components of more unknowns than this are tried only when they fill at most
/// [`MAX_BOX_SHARE`] of their bounding box: random dropout is thin pixel by pixel, but its
/// couplings make a two-dimensional mesh whose factor grows faster than its size.
const SMALL: usize = 4096;
const MAX_BOX_SHARE: f64 = 1.0 / 8.0;
/// Components of at most this many unknowns are factored in batches of at least [`BATCH`]. The
/// thickness test is then taken over the batch, which a small thick component (a cross of two
/// 9-pixel strokes) no longer fails alone: at this size a thick shape's fronts stay short, and
/// the work bound (the sum of the components') still applies.
const BATCH_COMPONENT: usize = 64;
/// Unknowns a batch reaches before the next one begins.
const BATCH: usize = 4096;

/// One component's factor, its unknowns in elimination order.
#[derive(Debug)]
struct Component {
    pixel: Vec<u32>,
    /// The neighbours at `FINE[1..]` as elimination positions, [`NONE`] where known or outside.
    nbr: Vec<[u32; 12]>,
    chol: SparseCholesky,
}

/// The factored components of a mask.
#[derive(Debug, Default)]
pub(super) struct Thin {
    width: usize,
    height: usize,
    parts: Vec<Component>,
}

/// What solving the components of one plane gave: the values (component after component, in
/// elimination order) and the squared norms of the residual and right-hand side.
pub(super) struct Solved {
    values: Vec<f32>,
    pub(super) r_sq: f64,
    pub(super) b_sq: f64,
}

/// The union-find root of `i`, halving the path.
fn root(parent: &mut [u32], mut i: usize) -> usize {
    while parent[i] as usize != i {
        let p = parent[i] as usize;
        parent[i] = parent[p];
        i = parent[i] as usize;
    }
    i
}

/// A component's unknown count and bounding box `(x0, y0, x1, y1)`, inclusive.
type Extent = (usize, usize, usize, usize, usize);

/// The coupled components of the unknowns given by their row runs (`rows`, one list per image
/// row): the runs packed as `[y, x from, x to, first unknown]`, each run's component, and each
/// component's extent.
#[allow(clippy::cast_possible_truncation)] // the unknowns are counted in u32
fn components(rows: &[Vec<(u32, u32)>], height: usize) -> (Vec<[u32; 4]>, Vec<u32>, Vec<Extent>) {
    // Components over row runs: a run joins the previous run of its row when one known pixel
    // or none lies between (the stencil reaches two to the left), the runs of the row above
    // that overlap it widened by one (three pixels above reach), and those two rows up that
    // overlap it (one pixel). The runs increase, so the pointers into the rows above move
    // forward only.
    // y, x from, x to, first unknown (`u32`: the image has fewer than 2³² pixels)
    let mut packed: Vec<[u32; 4]> = Vec::with_capacity(rows.iter().map(Vec::len).sum());
    let mut first = 0;
    for (y, row) in rows.iter().enumerate() {
        for &(a, b) in row {
            packed.push([y as u32, a, b, first as u32]);
            first += (b - a) as usize;
        }
    }
    let runs = |k: usize| packed[k].map(|v| v as usize);
    let mut row_start = vec![0usize; height + 1];
    for r in &packed {
        row_start[r[0] as usize + 1] += 1;
    }
    for y in 0..height {
        row_start[y + 1] += row_start[y];
    }
    let mut parent: Vec<u32> = (0..packed.len() as u32).collect();
    let mut join = |i: usize, j: usize| {
        let (a, b) = (root(&mut parent, i), root(&mut parent, j));
        if a != b {
            parent[a.max(b)] = a.min(b) as u32;
        }
    };
    for y in 0..height {
        let (mut up, mut up2) = (if y >= 1 { row_start[y - 1] } else { 0 }, if y >= 2 { row_start[y - 2] } else { 0 });
        for k in row_start[y]..row_start[y + 1] {
            let [_, a, b, _] = runs(k);
            if k > row_start[y] && a - runs(k - 1)[2] <= 1 {
                join(k, k - 1);
            }
            if y >= 1 {
                let end = row_start[y];
                while up < end && runs(up)[2] < a {
                    up += 1;
                }
                let mut j = up;
                while j < end && runs(j)[1] <= b {
                    join(k, j);
                    j += 1;
                }
            }
            if y >= 2 {
                let end = row_start[y - 1];
                while up2 < end && runs(up2)[2] <= a {
                    up2 += 1;
                }
                let mut j = up2;
                while j < end && runs(j)[1] < b {
                    join(k, j);
                    j += 1;
                }
            }
        }
    }
    let mut stats: Vec<Extent> = Vec::new();
    let mut slot = vec![NONE; packed.len()];
    for k in 0..packed.len() {
        let r = root(&mut parent, k);
        if slot[r] == NONE {
            slot[r] = stats.len() as u32;
            stats.push((0, usize::MAX, usize::MAX, 0, 0));
        }
        let [y, a, b, _] = runs(k);
        let s = &mut stats[slot[r] as usize];
        *s = (s.0 + b - a, s.1.min(a), s.2.min(y), s.3.max(b - 1), s.4.max(y));
        slot[k] = slot[r];
    }
    (packed, slot, stats)
}

impl Thin {
    /// Splits the unknowns `pixels` (row-major; `rows` their runs in each image row) of a
    /// `width × height` image into coupled components and factors the thin ones. Returns them
    /// and, per unknown, whether it was taken.
    #[allow(clippy::cast_possible_truncation, clippy::cast_possible_wrap, clippy::cast_sign_loss)]
    #[allow(clippy::cast_precision_loss)] // counts are far below 2^52
    pub(super) fn plan(width: usize, height: usize, rows: &[Vec<(u32, u32)>], pixels: &[u32]) -> (Self, Vec<bool>) {
        let n = pixels.len();
        // Each row's unknowns, to find a pixel's index.
        let mut row_at = vec![0usize; height + 1];
        for (y, row) in rows.iter().enumerate() {
            row_at[y + 1] = row_at[y] + row.iter().map(|&(a, b)| (b - a) as usize).sum::<usize>();
        }
        let find = |x: i64, y: i64| -> Option<usize> {
            if x < 0 || y < 0 || x >= width as i64 || y >= height as i64 {
                return None;
            }
            let (a, b) = (row_at[y as usize], row_at[y as usize + 1]);
            let p = (y as usize * width + x as usize) as u32;
            pixels[a..b].binary_search(&p).ok().map(|k| a + k)
        };
        let (packed, slot, stats) = components(rows, height);
        let runs = |k: usize| packed[k].map(|v| v as usize);
        debug_assert_eq!(packed.last().map_or(0, |r| (r[3] + r[2] - r[1]) as usize), n, "the runs are the pixels'");
        let wanted: Vec<bool> = stats
            .iter()
            .map(|&(m, x0, y0, x1, y1)| {
                m <= MAX_UNKNOWNS && (m <= SMALL || m as f64 <= MAX_BOX_SHARE * ((x1 - x0 + 1) * (y1 - y0 + 1)) as f64)
            })
            .collect();
        if !wanted.contains(&true) {
            return (Self::default(), vec![false; n]);
        }
        // Each wanted component is a part factored on its own, except that the small ones are
        // factored together, [`BATCH`] unknowns or more a part: a block-diagonal system orders and
        // factors as its blocks would alone, and one part instead of thousands of one-pixel ones
        // saves their vectors and tasks.
        let mut part_of = vec![NONE; stats.len()];
        let mut sizes: Vec<usize> = Vec::new();
        let mut batch = None;
        for (c, &(m, ..)) in stats.iter().enumerate().filter(|&(c, _)| wanted[c]) {
            let p = match batch {
                Some(p) if m <= BATCH_COMPONENT && sizes[p] < BATCH => p,
                _ => {
                    if m <= BATCH_COMPONENT {
                        batch = Some(sizes.len());
                    }
                    sizes.push(0);
                    sizes.len() - 1
                }
            };
            sizes[p] += m;
            part_of[c] = p as u32;
        }
        // The parts' unknowns, in row order; each unknown's index in its part.
        let mut members: Vec<Vec<u32>> = sizes.iter().map(|&m| Vec::with_capacity(m)).collect();
        let mut local = vec![0u32; n];
        for (k, [_, a, b, first]) in (0..packed.len()).map(|k| (k, runs(k))) {
            let c = slot[k] as usize;
            if wanted[c] {
                let part = &mut members[part_of[c] as usize];
                for (i, l) in local.iter_mut().enumerate().skip(first).take(b - a) {
                    *l = part.len() as u32;
                    part.push(i as u32);
                }
            }
        }
        let interior = fine_row(2, 2, 5, 5);
        let (w, h) = (width as i64, height as i64);
        let parts: Vec<Option<Component>> = members
            .par_iter()
            .map(|idx| {
                if idx.is_empty() {
                    return None;
                }
                let m = idx.len();
                let xy = |i: u32| {
                    ((pixels[i as usize] as usize % width) as i64, (pixels[i as usize] as usize / width) as i64)
                };
                let nbr: Vec<[u32; 12]> = idx
                    .par_iter()
                    .with_min_len(4096)
                    .map(|&i| {
                        let (x, y) = xy(i);
                        std::array::from_fn(|t| {
                            let (dx, dy) = FINE[t + 1];
                            // A same-row neighbour that is unknown sits at most `|dx|` places
                            // away in `pixels`, which is row-major and increasing.
                            let found = if dy == 0 {
                                let target = i64::from(pixels[i as usize]) + dx;
                                let inside = x + dx >= 0 && x + dx < width as i64;
                                (1..=dx.abs())
                                    .map(|k| (i as usize).wrapping_add_signed((k * dx.signum()) as isize))
                                    .find(|&j| inside && pixels.get(j).is_some_and(|&q| i64::from(q) == target))
                            } else {
                                find(x + dx, y + dy)
                            };
                            found.map_or(NONE, |j| local[j])
                        })
                    })
                    .collect();
                // Left, right, up and down are FINE[1..5].
                let four: Vec<[u32; 4]> = nbr.iter().map(|n| [n[0], n[1], n[2], n[3]]).collect();
                if thick_share(&four) > MAX_THICK_SHARE {
                    return None;
                }
                // The rows of B: the 13-point stencil, its own near the image edge. They are read
                // as the factorisation takes them (side by side in bands), not listed first.
                let diag: Vec<f64> = idx
                    .par_iter()
                    .with_min_len(CHUNK)
                    .map(|&i| {
                        let (x, y) = xy(i);
                        row_square(x, y, w, h, &interior)[square_index((0, 0))]
                    })
                    .collect();
                let entries = |k: usize| {
                    let (x, y) = xy(idx[k]);
                    let square = row_square(x, y, w, h, &interior);
                    nbr[k].iter().zip(&FINE[1..]).filter_map(move |(&j, &o)| {
                        let a = square[square_index(o)];
                        (j != NONE && a != 0.0).then_some((j, a))
                    })
                };
                let limit = MAX_WORK_PER_UNKNOWN * m;
                let whole = || SparseCholesky::with_entries::<INLINE_WIDE, _>(&entries, &diag, limit);
                let chol = if m >= BANDED_MIN {
                    // Couplings reach two rows: the separators are two rows thick. Tried whole
                    // when the bands fail (see `sparse::factor`).
                    let row = |k: usize| pixels[idx[k] as usize] as usize / width;
                    factor_in_bands::<INLINE_WIDE, _>(row, &entries, &diag, 2, limit, BANDS).or_else(whole)?
                } else {
                    whole()?
                };
                let pixel = chol.in_order(idx).iter().map(|&i| pixels[i as usize]).collect();
                Some(Component { pixel, nbr: chol.renumber(&nbr), chol })
            })
            .collect();
        let mut taken = vec![false; n];
        let mut kept = Vec::new();
        for (idx, part) in members.iter().zip(parts) {
            if let Some(part) = part {
                for &i in idx {
                    taken[i as usize] = true;
                }
                kept.push(part);
            }
        }
        (Self { width, height, parts: kept }, taken)
    }

    /// Unknowns taken.
    pub(super) fn unknowns(&self) -> usize {
        self.parts.iter().map(|p| p.pixel.len()).sum()
    }

    /// Bytes held.
    pub(super) fn memory_bytes(&self) -> usize {
        self.parts.iter().map(|p| p.pixel.len() * (4 + 48) + p.chol.memory_bytes()).sum()
    }

    /// Solves every component for `plane` (`mask`: the image's unknowns, one per pixel).
    ///
    /// # Errors
    /// [`FillError::NonFiniteRim`] when a known value the fill reads is not finite.
    #[allow(clippy::cast_possible_truncation, clippy::cast_possible_wrap, clippy::cast_sign_loss)]
    pub(super) fn solve(&self, plane: &[f32], mask: &PackedMask) -> Result<Solved, FillError> {
        let (w, h) = (self.width as i64, self.height as i64);
        let interior = fine_row(2, 2, 5, 5);
        let parts: Vec<Result<Solved, FillError>> = self
            .parts
            .par_iter()
            .map(|part| {
                let m = part.pixel.len();
                let square_of = |k: usize| {
                    let p = i64::from(part.pixel[k]);
                    let (x, y) = (p % w, p / w);
                    (x, y, row_square(x, y, w, h, &interior))
                };
                // b = −Σ B_pr·f_r over the known pixels r the row reaches, in fixed chunks (side
                // by side when there are several; most components are a few pixels); the first
                // error in elimination order is the one reported.
                let rhs_chunk = |c: usize, out: &mut [f64]| -> Result<f64, FillError> {
                    let mut sq = 0f64;
                    for (i, bk) in out.iter_mut().enumerate() {
                        let (x, y, square) = square_of(c * CHUNK + i);
                        *bk = rhs_at(x, y, &square, w, plane, mask)?;
                        sq += *bk * *bk;
                    }
                    Ok(sq)
                };
                let mut b = vec![0f64; m];
                let chunks: Vec<Result<f64, FillError>> = if m > CHUNK {
                    b.par_chunks_mut(CHUNK).enumerate().map(|(c, out)| rhs_chunk(c, out)).collect()
                } else {
                    vec![rhs_chunk(0, &mut b)]
                };
                let mut b_sq = 0f64;
                for sq in chunks {
                    b_sq += sq?;
                }
                let mut x = b.clone();
                part.chol.solve_in_place::<1>(&mut x);
                // The residual b − B·x, for the report.
                let residual_chunk = |c: usize| {
                    let mut sq = 0f64;
                    for k in c * CHUNK..((c + 1) * CHUNK).min(m) {
                        let (_, _, square) = square_of(k);
                        let mut r = b[k] - square[square_index((0, 0))] * x[k];
                        for (t, &j) in part.nbr[k].iter().enumerate() {
                            if j != NONE {
                                r -= square[square_index(FINE[t + 1])] * x[j as usize];
                            }
                        }
                        sq += r * r;
                    }
                    sq
                };
                let r_sq: f64 = if m > CHUNK {
                    (0..m.div_ceil(CHUNK)).into_par_iter().map(residual_chunk).collect::<Vec<f64>>().iter().sum()
                } else {
                    residual_chunk(0)
                };
                Ok(Solved { values: x.iter().map(|&v| v as f32).collect(), r_sq, b_sq })
            })
            .collect();
        let mut out = Solved { values: Vec::with_capacity(self.unknowns()), r_sq: 0.0, b_sq: 0.0 };
        for part in parts {
            let part = part?;
            out.values.extend(part.values);
            out.r_sq += part.r_sq;
            out.b_sq += part.b_sq;
        }
        Ok(out)
    }

    /// Writes what [`Thin::solve`] gave into `plane`.
    pub(super) fn write(&self, plane: &mut [f32], solved: &Solved) {
        for (&p, &v) in self.parts.iter().flat_map(|part| &part.pixel).zip(&solved.values) {
            plane[p as usize] = v;
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn pixels_of(w: usize, h: usize, mut f: impl FnMut(usize, usize) -> bool) -> Vec<u32> {
        (0..w * h).filter(|&p| f(p % w, p / w)).map(|p| p as u32).collect()
    }

    /// `Thin::plan` of `pixels` with their runs.
    fn plan(w: usize, h: usize, pixels: &[u32]) -> (Thin, Vec<bool>) {
        let mut rows = vec![Vec::new(); h];
        for &p in pixels {
            let (x, y) = (p % w as u32, p as usize / w);
            match rows[y].last_mut() {
                Some((_, b)) if *b == x => *b = x + 1,
                _ => rows[y].push((x, x + 1)),
            }
        }
        Thin::plan(w, h, &rows, pixels)
    }

    #[test]
    fn components_join_across_one_known_pixel_but_not_two() {
        // (5,5) and (7,5) are two apart, within the 13-point stencil's reach; (10,5) is three
        // from (7,5), and (8,7) one across and two down from it: three steps, out of reach.
        let pixels = pixels_of(16, 12, |x, y| matches!((x, y), (5, 5) | (7, 5) | (10, 5) | (8, 7)));
        let mut rows = vec![Vec::new(); 12];
        for (x, y) in [(5, 5), (7, 5), (10, 5), (8, 7)] {
            rows[y].push((x, x + 1));
        }
        let (_, of_run, extents) = components(&rows, 12);
        assert_eq!(of_run, [0, 0, 1, 2], "the runs' components");
        let sizes: Vec<usize> = extents.iter().map(|e| e.0).collect();
        assert_eq!(sizes, [2, 1, 1]);
        let (thin, taken) = plan(16, 12, &pixels);
        assert!(taken.iter().all(|&t| t), "isolated pixels are thin");
        assert_eq!(thin.parts.len(), 1, "small components are factored in one batch");
    }

    #[test]
    fn small_components_are_batched_and_large_ones_kept_apart() {
        // Isolated pixels three apart both ways (out of each other's reach): 4800 components of
        // one unknown; and a stroke of 150 unknowns, factored on its own.
        let (w, h) = (240, 190);
        let pixels =
            pixels_of(w, h, |x, y| (y < 180 && x % 3 == 0 && y % 3 == 0) || (y == 186 && (40..190).contains(&x)));
        let (thin, taken) = plan(w, h, &pixels);
        assert!(taken.iter().all(|&t| t));
        let mut sizes: Vec<usize> = thin.parts.iter().map(|p| p.pixel.len()).collect();
        sizes.sort_unstable();
        assert_eq!(sizes, [150, 704, 4096], "one batch of BATCH, the rest in a second, the stroke apart");
    }

    #[test]
    fn dense_scatter_is_left_to_the_multigrid() {
        let mut rng = crate::synth::Rng::new(3);
        let pixels = pixels_of(160, 160, |_, _| rng.uniform() < 0.5);
        let (thin, taken) = plan(160, 160, &pixels);
        let share = taken.iter().filter(|&&t| t).count() as f64 / pixels.len() as f64;
        assert!(share < 0.1, "{share:.3} of dropout's unknowns factored");
        assert_eq!(thin.unknowns(), taken.iter().filter(|&&t| t).count());
    }
}
