//! The inner loops of the multigrid cycle: Gauss-Seidel sweeps, residuals, restriction and
//! interpolation. Vectors hold `C` channels interleaved per point (`v[i * C + c]`) so one pass over
//! the stencil relaxes every channel, and end with a ghost point whose value stays zero, so unused
//! stencil slots need no branch.
//!
//! Work is split into fixed chunks of points and partial sums are added in chunk order, so results
//! do not depend on the number of threads.

use std::ops::Range;

use rayon::prelude::*;

use super::hierarchy::{CHILDREN, K_FINE, Level, PARENTS};

/// Points per parallel task.
const CHUNK: usize = 2048;
/// Passes over at most this many points run on the calling thread: waking the other threads
/// would cost more than the pass (the coarse levels of thin scratches are this small).
const SMALL: usize = 1 << 13;

/// Runs `body(ci)` for chunks `0..chunks`, side by side unless `points` is small.
fn for_chunks(chunks: usize, points: usize, body: impl Fn(usize) + Send + Sync) {
    if points <= SMALL {
        (0..chunks).for_each(body);
    } else {
        (0..chunks).into_par_iter().for_each(body);
    }
}

/// Runs `body(ci, chunk)` for the chunks of `len` elements of `v`, side by side unless `points`
/// is small.
fn for_chunks_mut<T: Send>(v: &mut [T], len: usize, points: usize, body: impl Fn(usize, &mut [T]) + Send + Sync) {
    if points <= SMALL {
        v.chunks_mut(len).enumerate().for_each(|(ci, c)| body(ci, c));
    } else {
        v.par_chunks_mut(len).enumerate().for_each(|(ci, c)| body(ci, c));
    }
}

/// A raw pointer that may be shared between threads. Used only by the Gauss-Seidel sweep, where
/// every task writes the points of one colour, which no other point of the same colour reads.
#[derive(Clone, Copy)]
struct SharedMut(*mut f64);
// SAFETY: see the type's documentation; the sweep upholds the disjointness.
unsafe impl Send for SharedMut {}
// SAFETY: as above.
unsafe impl Sync for SharedMut {}
impl SharedMut {
    fn get(self) -> *mut f64 {
        self.0
    }
}

/// One Gauss-Seidel sweep over the points of `range`, which must be one colour of `level`.
pub(crate) fn sweep<const K: usize, const C: usize>(level: &Level, range: Range<usize>, u: &mut [f64], b: &[f64]) {
    debug_assert_eq!(level.k, K);
    debug_assert!(u.len() >= (level.n + 1) * C && b.len() >= level.n * C);
    let (nbr, coef, inv_diag) = (&level.nbr[..], &level.coef[..], &level.inv_diag[..]);
    let len = u.len();
    let ptr = SharedMut(u.as_mut_ptr());
    let chunks = range.len().div_ceil(CHUNK);
    let points = range.len();
    for_chunks(chunks, points, |ci| {
        let p = ptr.get();
        let lo = range.start + ci * CHUNK;
        let hi = (lo + CHUNK).min(range.end);
        for i in lo..hi {
            let mut s = [0f64; C];
            s.copy_from_slice(&b[i * C..i * C + C]);
            for t in 0..K {
                let j = nbr[i * K + t] as usize;
                let a = if K == K_FINE { -1.0 } else { f64::from(coef[i * K + t]) };
                debug_assert!(j * C + C <= len);
                for (c, sc) in s.iter_mut().enumerate() {
                    // SAFETY: `j` is a neighbour (or the ghost) and so never of this colour; no task
                    // writes it during this sweep. The index is within `u` (checked above).
                    *sc -= a * unsafe { *p.add(j * C + c) };
                }
            }
            let d = inv_diag[i];
            for (c, sc) in s.iter().enumerate() {
                // SAFETY: point `i` belongs to this chunk only; `i < n` so the index is in bounds.
                unsafe { *p.add(i * C + c) = sc * d };
            }
        }
    });
}

/// Number of partial sums [`residual`] needs for `n` points.
pub(crate) fn partials_len(n: usize) -> usize {
    n.div_ceil(CHUNK).max(1)
}

/// `r = b − A·u` on every point, and the squared residual norm per channel. `partial` is scratch
/// of at least [`partials_len`] entries, so nothing is allocated.
///
/// The points of `relaxed` (a colour just swept, or an empty range) get `r = 0` without being
/// computed: right after a Gauss-Seidel half-sweep their residual is zero up to rounding.
pub(crate) fn residual<const K: usize, const C: usize>(
    level: &Level,
    u: &[f64],
    b: &[f64],
    r: &mut [f64],
    partial: &mut [[f64; C]],
    relaxed: Range<usize>,
) -> [f64; C] {
    debug_assert_eq!(level.k, K);
    let n = level.n;
    let chunks = n.div_ceil(CHUNK);
    let (nbr, coef, diag) = (&level.nbr[..], &level.coef[..], &level.diag[..]);
    let body = |ci: usize, rc: &mut [f64], sq: &mut [f64; C]| {
        let lo = ci * CHUNK;
        let hi = lo + rc.len() / C;
        *sq = [0f64; C];
        let (skip_lo, skip_hi) = (relaxed.start.clamp(lo, hi), relaxed.end.clamp(lo, hi));
        rc[(skip_lo - lo) * C..(skip_hi - lo) * C].fill(0.0);
        for i in (lo..skip_lo).chain(skip_hi..hi) {
            let mut s = [0f64; C];
            for c in 0..C {
                s[c] = b[i * C + c] - diag[i] * u[i * C + c];
            }
            for t in 0..K {
                let j = nbr[i * K + t] as usize;
                let a = if K == K_FINE { -1.0 } else { f64::from(coef[i * K + t]) };
                for c in 0..C {
                    s[c] -= a * u[j * C + c];
                }
            }
            rc[(i - lo) * C..(i - lo + 1) * C].copy_from_slice(&s);
            for c in 0..C {
                sq[c] += s[c] * s[c];
            }
        }
    };
    let (r_points, partial) = (&mut r[..n * C], &mut partial[..chunks]);
    if n <= SMALL {
        r_points.chunks_mut(CHUNK * C).zip(partial.iter_mut()).enumerate().for_each(|(ci, (rc, sq))| body(ci, rc, sq));
    } else {
        r_points
            .par_chunks_mut(CHUNK * C)
            .zip(partial.par_iter_mut())
            .enumerate()
            .for_each(|(ci, (rc, sq))| body(ci, rc, sq));
    }
    r[n * C..(n + 1) * C].fill(0.0);
    sum_partials(&partial[..chunks])
}

/// Squared norm per channel of the first `n` points of `v`.
pub(crate) fn norm_sq<const C: usize>(v: &[f64], n: usize) -> [f64; C] {
    let partial: Vec<[f64; C]> = v[..n * C]
        .par_chunks(CHUNK * C)
        .map(|vc| {
            let mut sq = [0f64; C];
            for vi in vc.chunks_exact(C) {
                for c in 0..C {
                    sq[c] += vi[c] * vi[c];
                }
            }
            sq
        })
        .collect();
    sum_partials(&partial)
}

fn sum_partials<const C: usize>(partial: &[[f64; C]]) -> [f64; C] {
    let mut total = [0f64; C];
    for p in partial {
        for c in 0..C {
            total[c] += p[c];
        }
    }
    total
}

/// `b_coarse = Pᵀ·r_fine` (full weighting restricted to the unknowns); the ghost is zeroed.
pub(crate) fn restrict<const C: usize>(coarse: &Level, r_fine: &[f64], b_coarse: &mut [f64]) {
    let nc = coarse.n;
    let (children, cweights) = (&coarse.children[..], &coarse.cweights[..]);
    for_chunks_mut(&mut b_coarse[..nc * C], CHUNK * C, nc, |ci, bc| {
        let lo = ci * CHUNK;
        for (off, bi) in bc.chunks_exact_mut(C).enumerate() {
            let i = lo + off;
            let mut s = [0f64; C];
            for t in 0..CHILDREN {
                let f = children[i * CHILDREN + t] as usize;
                let w = f64::from(cweights[i * CHILDREN + t]);
                for c in 0..C {
                    s[c] += w * r_fine[f * C + c];
                }
            }
            bi.copy_from_slice(&s);
        }
    });
    b_coarse[nc * C..(nc + 1) * C].fill(0.0);
}

/// `u_fine += P·u_coarse` (bilinear interpolation restricted to the unknowns).
pub(crate) fn prolong_add<const C: usize>(fine: &Level, u_coarse: &[f64], u_fine: &mut [f64]) {
    let n = fine.n;
    let (parents, pweights) = (&fine.parents[..], &fine.pweights[..]);
    for_chunks_mut(&mut u_fine[..n * C], CHUNK * C, n, |ci, uc| {
        let lo = ci * CHUNK;
        for (off, ui) in uc.chunks_exact_mut(C).enumerate() {
            let i = lo + off;
            for t in 0..PARENTS {
                let j = parents[i * PARENTS + t] as usize;
                let w = f64::from(pweights[i * PARENTS + t]);
                for c in 0..C {
                    ui[c] += w * u_coarse[j * C + c];
                }
            }
        }
    });
}
