//! The three channels of an RGB pixel in one vector register.
//!
//! The grid storage keeps a pixel's channels side by side (`u[i * C + c]`), so a colour image's
//! stencil update is three scalar updates with the same neighbours. Where the processor has AVX,
//! [`Rgb`] loads the three samples of one pixel into one 256-bit register (the fourth lane is
//! never read or written) and applies the update to all three at once. Every operation rounds each
//! lane exactly as the scalar code rounds that channel, in the same order, so the results are the
//! same bit for bit with and without it (a unit test checks this).

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
