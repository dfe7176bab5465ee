//! Optional grain: seeded noise added to filled pixels so a smooth fill does not stand out from
//! a noisy surround.
//!
//! The noise level of each hole is measured on the band of known pixels around it: the high-pass
//! residual `r = f_p − ¼·Σ_{q ~ p} f_q` (where `p` and its four neighbours are known) has, for
//! white noise of standard deviation σ on a smooth signal, variance `(1 + 4/16)·σ² = 1.25·σ²`;
//! its median absolute deviation times 1.4826 estimates the standard deviation robustly (the
//! normal-consistency constant, common practice), so `σ = 1.4826·MAD(r) / √1.25`. Each filled
//! pixel then gets independent normal noise of that σ, from a generator seeded with the given seed
//! and the hole's number, so the result does not depend on the thread count.
//!
//! Grain is invented texture, not data: the scientific profile refuses it.

use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use super::guided::{HolePixels, band_pixels};
use crate::mask::Mask;
use crate::synth::Rng;

/// Band of known pixels around each hole whose noise is measured.
const BAND: usize = 4;
/// Fewer residuals than this in a hole's band: use the median σ of the image's holes instead.
const MIN_SAMPLES: usize = 16;

/// What grain was added: the seed and, per channel, the median σ over the holes.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct GrainRecord {
    pub seed: u64,
    pub sigma: Vec<f64>,
}

fn median(v: &mut [f64]) -> Option<f64> {
    if v.is_empty() {
        return None;
    }
    let mid = v.len() / 2;
    let (_, m, _) = v.select_nth_unstable_by(mid, f64::total_cmp);
    Some(*m)
}

/// Robust σ of the high-pass residual over `band` (indices into the plane).
fn sigma(plane: &[f32], mask: &Mask, band: &[usize]) -> Option<f64> {
    let (w, h) = (mask.width(), mask.height());
    let bits = mask.bits();
    let mut r: Vec<f64> = band
        .iter()
        .filter_map(|&p| {
            let (x, y) = (p % w, p / w);
            if x == 0 || y == 0 || x + 1 == w || y + 1 == h {
                return None;
            }
            let n = [p - 1, p + 1, p - w, p + w];
            if n.iter().any(|&q| bits[q]) {
                return None;
            }
            let mean = n.iter().map(|&q| f64::from(plane[q])).sum::<f64>() * 0.25;
            let v = f64::from(plane[p]) - mean;
            v.is_finite().then_some(v)
        })
        .collect();
    if r.len() < MIN_SAMPLES {
        return None;
    }
    let centre = median(&mut r)?;
    let mut dev: Vec<f64> = r.iter().map(|v| (v - centre).abs()).collect();
    Some(1.4826 * median(&mut dev)? / 1.25f64.sqrt())
}

/// Adds grain to the masked pixels of `planes` (already filled) and returns what was added.
#[must_use]
pub fn add(planes: &mut [&mut [f32]], mask: &Mask, seed: u64) -> GrainRecord {
    let holes = HolePixels::of(mask);
    let bands: Vec<Vec<usize>> = holes.pixels.par_iter().map(|px| band_pixels(mask, px, BAND)).collect();
    let mut record = GrainRecord { seed, sigma: Vec::with_capacity(planes.len()) };
    for (c, plane) in planes.iter_mut().enumerate() {
        let measured: Vec<Option<f64>> = bands.par_iter().map(|b| sigma(plane, mask, b)).collect();
        let mut known: Vec<f64> = measured.iter().flatten().copied().collect();
        let typical = median(&mut known).unwrap_or(0.0);
        record.sigma.push(typical);
        let noise: Vec<Vec<f32>> = holes
            .pixels
            .par_iter()
            .enumerate()
            .map(|(k, px)| {
                let s = measured[k].unwrap_or(typical);
                let mut rng = Rng::new(seed ^ ((k as u64) << 8 | c as u64).wrapping_mul(0x2545_F491_4F6C_DD1D));
                #[allow(clippy::cast_possible_truncation)] // noise far below f32::MAX
                px.iter().map(|_| (s * rng.normal()) as f32).collect()
            })
            .collect();
        for (px, n) in holes.pixels.iter().zip(noise) {
            for (&p, v) in px.iter().zip(n) {
                plane[p as usize] += v;
            }
        }
    }
    record
}
