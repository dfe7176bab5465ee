//! The three channels of an RGB pixel in one vector register.
//!
//! The grid storage keeps a pixel's channels side by side (`u[i * C + c]`), so a colour image's
//! stencil update is three scalar updates with the same neighbours. Where the processor has AVX,
//! [`Rgb`] loads the three samples of one pixel into one register (256-bit for `f64`, 128-bit for
//! `f32`; the fourth lane is never read from memory nor written to it) and applies the update to
//! all three at once. Every operation rounds each lane exactly as the scalar code rounds that
//! channel, in the same order, so the results are the same bit for bit with and without it (a
//! unit test checks this).

/// Three-channel vector kernels, present when the processor supports them.
#[derive(Clone, Copy)]
pub(crate) struct Rgb(());

impl Rgb {
    /// The kernels, if this processor has the instructions they need.
    pub(crate) fn detect() -> Option<Rgb> {
        #[cfg(target_arch = "x86_64")]
        if std::arch::is_x86_feature_detected!("avx") {
            return Some(Rgb(()));
        }
        None
    }

    /// `u[p] = 0.25 · (u[p − 3] + u[p + 3] + u[p − wc] + u[p + wc])` channel by channel for the
    /// pixels `p = row + 3x`, `x = first, first + 2, … < end`.
    ///
    /// # Safety
    /// Every sample read or written is inside one allocation and no other thread writes the
    /// samples read or touches the samples written meanwhile.
    #[inline]
    pub(crate) unsafe fn relax(self, row: *mut f64, wc: usize, first: usize, end: usize) {
        #[cfg(target_arch = "x86_64")]
        // SAFETY: `detect` found AVX; the caller's contract covers the memory.
        unsafe {
            x86::relax(row, wc, first, end)
        }
        #[cfg(not(target_arch = "x86_64"))]
        {
            let _ = (row, wc, first, end);
            unreachable!("Rgb is only made where AVX exists")
        }
    }

    /// `e[p] = (t[q] − s3 · e[p − 3] − s5 · e[p + 3]) · inv` channel by channel (`f32`) for the
    /// points `k = 0, 2, 4, … < n` of a run, at `p = row + 3k` and `q = terms + 3k`.
    ///
    /// # Safety
    /// As for [`Rgb::relax`]; `terms` holds `3n` samples.
    #[inline]
    pub(crate) unsafe fn relax_same_row(self, row: *mut f32, terms: *const f32, n: usize, s3: f32, s5: f32, inv: f32) {
        #[cfg(target_arch = "x86_64")]
        // SAFETY: `detect` found AVX (and with it SSE2); the caller's contract covers the memory.
        unsafe {
            x86::relax_same_row(row, terms, n, s3, s5, inv)
        }
        #[cfg(not(target_arch = "x86_64"))]
        {
            let _ = (row, terms, n, s3, s5, inv);
            unreachable!("Rgb is only made where AVX exists")
        }
    }

    /// The residuals `m[x − 1] + m[x + 1] + up[x] + down[x] − 4·m[x]` of the cells `x = 0, 2, 4,
    /// …` of a span, three channels each, into `out` (`3n` for `n` cells): `mid` starts one cell
    /// before the span, `up` and `down` at its first cell.
    #[inline]
    pub(crate) fn residual_every_other(self, mid: &[f64], up: &[f64], down: &[f64], out: &mut [f64]) {
        let n = out.len() / 3;
        if n == 0 {
            return;
        }
        assert!(mid.len() >= 6 * n + 3 && up.len() >= 6 * n - 3 && down.len() >= 6 * n - 3);
        #[cfg(target_arch = "x86_64")]
        // SAFETY: `detect` found AVX; the assertion keeps every read inside the slices.
        unsafe {
            x86::residual_every_other(mid.as_ptr(), up.as_ptr(), down.as_ptr(), out.as_mut_ptr(), n)
        }
    }

    /// Adds the bilinear interpolation of a run of `n` coarse parents to the fine cells `0..2n − 1`
    /// of `fine` (`f64`, three channels): cell `2k` takes parent `k`, cell `2k + 1` the mean of
    /// parents `k` and `k + 1`; with `below` (odd fine rows), each parent is first averaged with
    /// the one below it.
    #[inline]
    pub(crate) fn interpolate_run(self, parents: &[f32], below: Option<&[f32]>, fine: &mut [f64]) {
        let n = parents.len() / 3;
        if n == 0 {
            return;
        }
        assert!(fine.len() >= 6 * n - 3 && below.is_none_or(|b| b.len() >= 3 * n));
        #[cfg(target_arch = "x86_64")]
        // SAFETY: `detect` found AVX; the assertion keeps every access inside the slices.
        unsafe {
            x86::interpolate_run(parents.as_ptr(), below.map(<[f32]>::as_ptr), fine.as_mut_ptr(), n)
        }
    }

    /// Full weighting for a run of coarse points, three channels each, rounded to `f32` into
    /// `out` (`3n` for `n` points): coarse point `k` takes fine cells `2k..=2k + 2` of the rows
    /// `a` (above), `b` and `d` (below), each `3(2n + 1)` samples.
    #[inline]
    pub(crate) fn full_weighting(self, a: &[f64], b: &[f64], d: &[f64], out: &mut [f32]) {
        let n = out.len() / 3;
        assert!(a.len() >= 6 * n + 3 && b.len() >= 6 * n + 3 && d.len() >= 6 * n + 3);
        #[cfg(target_arch = "x86_64")]
        // SAFETY: `detect` found AVX; the assertion keeps every read inside the slices.
        unsafe {
            x86::full_weighting(a.as_ptr(), b.as_ptr(), d.as_ptr(), out.as_mut_ptr(), n)
        }
    }
}

#[cfg(target_arch = "x86_64")]
mod x86 {
    use std::arch::x86_64::*;

    /// The three samples at `p` in lanes 0..3 (lane 3 zero).
    #[inline]
    #[target_feature(enable = "avx")]
    unsafe fn load3(p: *const f64) -> __m256d {
        // SAFETY: the caller's; exactly p, p + 1 and p + 2 are read.
        unsafe { _mm256_insertf128_pd(_mm256_castpd128_pd256(_mm_loadu_pd(p)), _mm_load_sd(p.add(2)), 1) }
    }

    /// Stores lanes 0..3 of `v` at `p`.
    #[inline]
    #[target_feature(enable = "avx")]
    unsafe fn store3(p: *mut f64, v: __m256d) {
        // SAFETY: the caller's; exactly p, p + 1 and p + 2 are written.
        unsafe {
            _mm_storeu_pd(p, _mm256_castpd256_pd128(v));
            _mm_store_sd(p.add(2), _mm256_extractf128_pd(v, 1));
        }
    }

    /// The three `f32` samples at `p` in lanes 0..3 (lane 3 zero).
    #[inline]
    #[target_feature(enable = "avx")]
    unsafe fn load3f(p: *const f32) -> __m128 {
        // SAFETY: the caller's; exactly p, p + 1 and p + 2 are read (the 8-byte load is unaligned).
        unsafe { _mm_movelh_ps(_mm_castsi128_ps(_mm_loadl_epi64(p.cast())), _mm_load_ss(p.add(2))) }
    }

    /// Stores lanes 0..3 of `v` at `p`.
    #[inline]
    #[target_feature(enable = "avx")]
    unsafe fn store3f(p: *mut f32, v: __m128) {
        // SAFETY: the caller's; exactly p, p + 1 and p + 2 are written (the 8-byte store is
        // unaligned).
        unsafe {
            _mm_storel_epi64(p.cast(), _mm_castps_si128(v));
            _mm_store_ss(p.add(2), _mm_movehl_ps(v, v));
        }
    }

    #[target_feature(enable = "avx")]
    pub(super) unsafe fn relax_same_row(row: *mut f32, terms: *const f32, n: usize, s3: f32, s5: f32, inv: f32) {
        let (s3, s5, inv) = (_mm_set1_ps(s3), _mm_set1_ps(s5), _mm_set1_ps(inv));
        let mut k = 0;
        while k < n {
            // SAFETY: the caller's contract.
            unsafe {
                let p = row.add(3 * k);
                let v = _mm_sub_ps(
                    _mm_sub_ps(load3f(terms.add(3 * k)), _mm_mul_ps(s3, load3f(p.sub(3)))),
                    _mm_mul_ps(s5, load3f(p.add(3))),
                );
                store3f(p, _mm_mul_ps(v, inv));
            }
            k += 2;
        }
    }

    #[target_feature(enable = "avx")]
    pub(super) unsafe fn interpolate_run(parents: *const f32, below: Option<*const f32>, fine: *mut f64, n: usize) {
        let half = _mm256_set1_pd(0.5);
        // SAFETY (all): the caller checked the lengths.
        let column = |k: usize| unsafe {
            let v = _mm256_cvtps_pd(load3f(parents.add(3 * k)));
            match below {
                Some(b) => _mm256_mul_pd(half, _mm256_add_pd(v, _mm256_cvtps_pd(load3f(b.add(3 * k))))),
                None => v,
            }
        };
        let mut left = column(0);
        for k in 0..n {
            unsafe {
                let p = fine.add(6 * k);
                store3(p, _mm256_add_pd(load3(p), left));
                if k + 1 < n {
                    let right = column(k + 1);
                    store3(p.add(3), _mm256_add_pd(load3(p.add(3)), _mm256_mul_pd(half, _mm256_add_pd(left, right))));
                    left = right;
                }
            }
        }
    }

    #[target_feature(enable = "avx")]
    pub(super) unsafe fn residual_every_other(
        mid: *const f64,
        up: *const f64,
        down: *const f64,
        out: *mut f64,
        n: usize,
    ) {
        let four = _mm256_set1_pd(4.0);
        for j in 0..n {
            let k = 6 * j;
            // SAFETY: the caller checked the lengths.
            unsafe {
                let s = _mm256_add_pd(
                    _mm256_add_pd(_mm256_add_pd(load3(mid.add(k)), load3(mid.add(k + 6))), load3(up.add(k))),
                    load3(down.add(k)),
                );
                store3(out.add(3 * j), _mm256_sub_pd(s, _mm256_mul_pd(four, load3(mid.add(k + 3)))));
            }
        }
    }

    #[target_feature(enable = "avx")]
    pub(super) unsafe fn full_weighting(a: *const f64, b: *const f64, d: *const f64, out: *mut f32, n: usize) {
        for k in 0..n {
            // SAFETY: the caller checked the lengths.
            unsafe { full_weighting_one(a.add(6 * k), b.add(6 * k), d.add(6 * k), out.add(3 * k)) }
        }
    }

    #[inline]
    #[target_feature(enable = "avx")]
    unsafe fn full_weighting_one(a: *const f64, b: *const f64, d: *const f64, out: *mut f32) {
        // SAFETY: the caller's: nine samples in each row, three out.
        unsafe {
            let corners =
                _mm256_add_pd(_mm256_add_pd(_mm256_add_pd(load3(a), load3(a.add(6))), load3(d)), load3(d.add(6)));
            let sides = _mm256_add_pd(
                _mm256_add_pd(_mm256_add_pd(load3(a.add(3)), load3(d.add(3))), load3(b)),
                load3(b.add(6)),
            );
            let acc = _mm256_add_pd(
                _mm256_add_pd(_mm256_mul_pd(_mm256_set1_pd(0.25), corners), _mm256_mul_pd(_mm256_set1_pd(0.5), sides)),
                load3(b.add(3)),
            );
            store3f(out, _mm256_cvtpd_ps(acc));
        }
    }

    #[target_feature(enable = "avx")]
    pub(super) unsafe fn relax(row: *mut f64, wc: usize, first: usize, end: usize) {
        let quarter = _mm256_set1_pd(0.25);
        let mut x = first;
        while x < end {
            // SAFETY: the caller's contract; masked lanes are not accessed.
            unsafe {
                let p = row.add(3 * x);
                let s = _mm256_add_pd(
                    _mm256_add_pd(_mm256_add_pd(load3(p.sub(3)), load3(p.add(3))), load3(p.sub(wc))),
                    load3(p.add(wc)),
                );
                store3(p, _mm256_mul_pd(quarter, s));
            }
            x += 2;
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn three_channel_relaxation_equals_the_scalar_update_bit_for_bit() {
        let Some(rgb) = Rgb::detect() else {
            eprintln!("no vector kernels on this processor; nothing to compare");
            return;
        };
        let (w, h) = (37, 5);
        let wc = 3 * w;
        let mut rng = crate::synth::Rng::new(3);
        // Values of many magnitudes, so a different rounding order would show.
        let start: Vec<f64> =
            (0..wc * h).map(|_| (rng.uniform() - 0.5) * 10f64.powi((rng.uniform() * 12.0) as i32 - 6)).collect();
        for (first, end) in [(1, 36), (2, 35), (5, 6), (7, 7)] {
            let mut vector = start.clone();
            // SAFETY: rows 1..=3 with their neighbours lie inside the vector; one thread.
            unsafe { rgb.relax(vector.as_mut_ptr().add(2 * wc), wc, first, end) };
            let mut scalar = start.clone();
            for x in (first..end).step_by(2) {
                let p = 2 * wc + 3 * x;
                for c in 0..3 {
                    let s = scalar[p - 3 + c] + scalar[p + 3 + c] + scalar[p - wc + c] + scalar[p + wc + c];
                    scalar[p + c] = 0.25 * s;
                }
            }
            assert!(vector.iter().zip(&scalar).all(|(a, b)| a.to_bits() == b.to_bits()), "cells {first}..{end}");
            assert!(first == end || vector != start, "something was relaxed");
        }
    }
}
