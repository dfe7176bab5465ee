//! Finding the damage automatically: detectors that turn planes into a [`Mask`].
//!
//! Every detector works on `f32` planes in the image's own units and costs O(pixels) or
//! O(pixels · window), in parallel over rows. None of them knows about files.
//!
//! - [`outliers`]: single pixels far from their local median (hot, dead, cosmic-ray-like), with a
//!   sharpness test so real point sources and fine lines are left alone.
//! - [`Stack`]: from several frames of one sensor, pixels extreme in a share of the frames, or
//!   stuck (no variation at all).
//! - [`lines`]: columns and rows whose median departs from their neighbours'.
//! - [`scratches`]: thin bright or dark structures (morphological top-hat), long enough.
//! - [`by_value`]: pixels within a tolerance of a value or colour, optionally connected to a seed.
//! - [`grow`], [`keep_sizes`]: post-processing common to all.

use rayon::prelude::*;

use crate::mask::Mask;

/// Scale from the median absolute deviation to the standard deviation of a normal distribution
/// (common practice: 1/Φ⁻¹(3/4) = 1.4826).
pub const MAD_TO_SIGMA: f64 = 1.4826;

/// The median of a slice (reorders it); `NaN` for an empty one. Non-finite values must be
/// removed by the caller.
#[must_use]
pub fn median(values: &mut [f32]) -> f32 {
    if values.is_empty() {
        return f32::NAN;
    }
    let mid = values.len() / 2;
    let (_, m, _) = values.select_nth_unstable_by(mid, f32::total_cmp);
    *m
}

/// Robust standard deviation: 1.4826 × the median absolute deviation from the median.
#[must_use]
pub fn robust_sigma(values: &[f32]) -> f64 {
    let mut v: Vec<f32> = values.iter().copied().filter(|x| x.is_finite()).collect();
    if v.is_empty() {
        return 0.0;
    }
    let m = median(&mut v);
    for x in &mut v {
        *x = (*x - m).abs();
    }
    MAD_TO_SIGMA * f64::from(median(&mut v))
}

/// Median over the (2r+1)² square around each pixel, clipped at the image edge; non-finite
/// samples are left out.
#[must_use]
pub fn median_filter(plane: &[f32], w: usize, h: usize, r: usize) -> Vec<f32> {
    let mut out = vec![0f32; w * h];
    out.par_chunks_mut(w.max(1)).enumerate().for_each(|(y, row)| {
        let mut buf = Vec::with_capacity((2 * r + 1) * (2 * r + 1));
        let (y0, y1) = (y.saturating_sub(r), (y + r).min(h - 1));
        for (x, o) in row.iter_mut().enumerate() {
            let (x0, x1) = (x.saturating_sub(r), (x + r).min(w - 1));
            buf.clear();
            for yy in y0..=y1 {
                buf.extend(plane[yy * w + x0..=yy * w + x1].iter().copied().filter(|v| v.is_finite()));
            }
            *o = median(&mut buf);
        }
    });
    out
}

/// Robust noise per tile of `tile × tile` pixels, as a per-pixel lookup.
fn tiled_sigma(residual: &[f32], w: usize, h: usize, tile: usize) -> Vec<f32> {
    let (tx, ty) = (w.div_ceil(tile), h.div_ceil(tile));
    let sigmas: Vec<f32> = (0..tx * ty)
        .into_par_iter()
        .map(|t| {
            let (cx, cy) = (t % tx, t / tx);
            let mut v = Vec::with_capacity(tile * tile);
            for y in cy * tile..((cy + 1) * tile).min(h) {
                v.extend_from_slice(&residual[y * w + cx * tile..y * w + ((cx + 1) * tile).min(w)]);
            }
            #[allow(clippy::cast_possible_truncation)]
            let s = robust_sigma(&v) as f32;
            s
        })
        .collect();
    // A tile that is flat (σ̂ = 0, e.g. synthetic or saturated) borrows the image-wide value.
    let mut nonzero: Vec<f32> = sigmas.iter().copied().filter(|&s| s > 0.0).collect();
    let fallback = if nonzero.is_empty() { f32::MIN_POSITIVE } else { median(&mut nonzero) };
    let mut out = vec![0f32; w * h];
    for y in 0..h {
        for x in 0..w {
            let s = sigmas[(y / tile) * tx + x / tile];
            out[y * w + x] = if s > 0.0 { s } else { fallback };
        }
    }
    out
}

/// Parameters of [`outliers`].
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct OutlierParams {
    /// Flag `|x − median| > k·σ̂` (5 is common practice in detector work).
    pub k: f64,
    /// Half-size of the median window (2 → 5×5).
    pub radius: usize,
    /// Sharpness limit: the Laplacian over the fine structure must exceed this (van Dokkum 2001,
    /// PASP 113, 1420, uses f_lim ≈ 2 for well-sampled images; larger spares more real sources).
    pub sharpness: f64,
}

impl Default for OutlierParams {
    fn default() -> Self {
        Self { k: 5.0, radius: 2, sharpness: 2.0 }
    }
}

/// Hot, dead and cosmic-ray-like pixels: far from their local median in any channel, and sharper
/// than the optics allow.
///
/// The sharpness test follows the fine-structure criterion of van Dokkum (2001, PASP 113, 1420):
/// with `F = M3 − M7(M3)` (M3, M7: 3×3 and 7×7 medians) the fine structure and `L` the pixel minus
/// the mean of its neighbours (the 5-point Laplacian with van Dokkum's kernel/4 normalisation), a
/// pixel is taken only if `|L| / max(|F|, σ̂) > sharpness`. A point source
/// whose width spans a few pixels survives the 3×3 median, so its `F` is large and it is spared;
/// a single bad pixel does not, so its ratio is large.
#[must_use]
pub fn outliers(planes: &[Vec<f32>], w: usize, h: usize, p: &OutlierParams) -> Mask {
    let mut bits = vec![false; w * h];
    for plane in planes {
        let m = median_filter(plane, w, h, p.radius);
        let residual: Vec<f32> = plane.iter().zip(&m).map(|(&x, &m)| if x.is_finite() { x - m } else { 0.0 }).collect();
        let sigma = tiled_sigma(&residual, w, h, 64);
        let m3 = median_filter(plane, w, h, 1);
        let m7 = median_filter(&m3, w, h, 3);
        let flags: Vec<bool> = (0..w * h)
            .into_par_iter()
            .map(|i| {
                let s = f64::from(sigma[i]);
                let r = f64::from(residual[i]);
                if r.abs() <= p.k * s || !plane[i].is_finite() {
                    return false;
                }
                let (x, y) = (i % w, i / w);
                // The noise around a candidate, from the residuals of its 7×7 neighbourhood (itself
                // left out): on the wings of bright sources, shot noise exceeds the sky's.
                let mut around = Vec::with_capacity(48);
                for yy in y.saturating_sub(3)..=(y + 3).min(h - 1) {
                    for xx in x.saturating_sub(3)..=(x + 3).min(w - 1) {
                        if (xx, yy) != (x, y) {
                            around.push(residual[yy * w + xx]);
                        }
                    }
                }
                let s = s.max(robust_sigma(&around));
                if r.abs() <= p.k * s {
                    return false;
                }
                let mut lap = 0.0;
                let mut deg = 0.0;
                for (dx, dy) in [(-1i64, 0i64), (1, 0), (0, -1), (0, 1)] {
                    let (nx, ny) = (x as i64 + dx, y as i64 + dy);
                    if nx >= 0 && ny >= 0 && (nx as usize) < w && (ny as usize) < h {
                        let v = plane[ny as usize * w + nx as usize];
                        if v.is_finite() {
                            lap -= f64::from(v);
                            deg += 1.0;
                        }
                    }
                }
                // x minus the mean of its neighbours: the 5-point Laplacian over its centre weight,
                // the normalisation (kernel/4) of van Dokkum's L.
                let lap = if deg > 0.0 { f64::from(plane[i]) + lap / deg } else { 0.0 };
                let fine = f64::from(m3[i] - m7[i]).abs().max(s);
                // A spike stands out from its neighbours in the direction it departs from the
                // median; a pixel on the convex wing of a bright source does not.
                lap.signum() == r.signum() && lap.abs() / fine > p.sharpness
            })
            .collect();
        for (b, f) in bits.iter_mut().zip(flags) {
            *b |= f;
        }
    }
    Mask::from_bits(w, h, bits)
}

/// Columns (and rows) whose median departs from the medians of their neighbours by more than
/// `k·σ̂`, σ̂ being the robust spread of those departures over the image (bad columns and rows of
/// a detector, common practice).
#[must_use]
pub fn lines(planes: &[Vec<f32>], w: usize, h: usize, k: f64) -> Mask {
    let mut mask = Mask::new(w, h);
    for plane in planes {
        let col_medians: Vec<f32> = (0..w)
            .into_par_iter()
            .map(|x| {
                let mut v: Vec<f32> = (0..h).map(|y| plane[y * w + x]).filter(|v| v.is_finite()).collect();
                median(&mut v)
            })
            .collect();
        let row_medians: Vec<f32> = (0..h)
            .into_par_iter()
            .map(|y| {
                let mut v: Vec<f32> = plane[y * w..(y + 1) * w].iter().copied().filter(|v| v.is_finite()).collect();
                median(&mut v)
            })
            .collect();
        for x in departing(&col_medians, k) {
            for y in 0..h {
                mask.set(x, y, true);
            }
        }
        for y in departing(&row_medians, k) {
            for x in 0..w {
                mask.set(x, y, true);
            }
        }
    }
    mask
}

/// Indices whose value departs from the median of its neighbours (±1..±3, itself left out) by
/// more than `k` robust standard deviations of all such departures.
fn departing(values: &[f32], k: f64) -> Vec<usize> {
    let n = values.len();
    if n < 5 {
        return Vec::new();
    }
    let departures: Vec<f32> = (0..n)
        .map(|i| {
            let mut nb: Vec<f32> = (i.saturating_sub(3)..(i + 4).min(n))
                .filter(|&j| j != i && values[j].is_finite())
                .map(|j| values[j])
                .collect();
            values[i] - median(&mut nb)
        })
        .collect();
    let s = robust_sigma(&departures).max(1e-12);
    (0..n).filter(|&i| f64::from(departures[i].abs()) > k * s).collect()
}

/// Running minimum or maximum over a window of `2r+1` along rows, then columns (a square element).
fn square_filter(plane: &[f32], w: usize, h: usize, r: usize, take_max: bool) -> Vec<f32> {
    let pick = |a: f32, b: f32| if take_max { a.max(b) } else { a.min(b) };
    let mut rows = vec![0f32; w * h];
    rows.par_chunks_mut(w.max(1)).enumerate().for_each(|(y, out)| {
        let src = &plane[y * w..(y + 1) * w];
        for (x, o) in out.iter_mut().enumerate() {
            *o = src[x.saturating_sub(r)..=(x + r).min(w - 1)].iter().copied().fold(src[x], pick);
        }
    });
    let mut out = vec![0f32; w * h];
    out.par_chunks_mut(w.max(1)).enumerate().for_each(|(y, o)| {
        for (x, v) in o.iter_mut().enumerate() {
            let mut acc = rows[y * w + x];
            for yy in y.saturating_sub(r)..=(y + r).min(h - 1) {
                acc = pick(acc, rows[yy * w + x]);
            }
            *v = acc;
        }
    });
    out
}

/// Parameters of [`scratches`].
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct ScratchParams {
    /// Width of the structuring element in pixels: wider than the widest scratch.
    pub element: usize,
    /// Flag top-hat values above `k·σ̂` of the top-hat image.
    pub k: f64,
    /// Drop detections whose longest side is shorter than this (dust is not a scratch).
    pub min_length: usize,
}

impl Default for ScratchParams {
    fn default() -> Self {
        Self { element: 7, k: 5.0, min_length: 15 }
    }
}

/// Thin bright or dark structures: the white top-hat (image minus its opening) and the black
/// top-hat (closing minus image) with a square element wider than the scratch, thresholded at
/// `k·σ̂`, keeping only connected pieces at least `min_length` long (Serra, Image Analysis and
/// Mathematical Morphology, 1982, for the top-hat; common practice for scanned film and prints).
#[must_use]
pub fn scratches(planes: &[Vec<f32>], w: usize, h: usize, p: &ScratchParams) -> Mask {
    // Work on the mean of the channels: a scratch on a print or film marks every channel.
    #[allow(clippy::cast_precision_loss)]
    let n = planes.len().max(1) as f32;
    let luma: Vec<f32> = (0..w * h).map(|i| planes.iter().map(|pl| pl[i]).sum::<f32>() / n).collect();
    let r = p.element / 2;
    let opened = square_filter(&square_filter(&luma, w, h, r, false), w, h, r, true);
    let closed = square_filter(&square_filter(&luma, w, h, r, true), w, h, r, false);
    let white: Vec<f32> = luma.iter().zip(&opened).map(|(a, b)| a - b).collect();
    let black: Vec<f32> = closed.iter().zip(&luma).map(|(a, b)| a - b).collect();
    let mut bits = vec![false; w * h];
    for top in [&white, &black] {
        // The top-hat of a textured background is one-sided; its spread around the median is the noise.
        let s = robust_sigma(top).max(1e-6);
        let mut sorted: Vec<f32> = top.clone();
        let base = f64::from(median(&mut sorted));
        for (b, &t) in bits.iter_mut().zip(top.iter()) {
            *b |= f64::from(t) - base > p.k * s;
        }
    }
    let mask = Mask::from_bits(w, h, bits);
    keep_long(&mask, p.min_length)
}

/// Keeps the 8-connected pieces whose bounding box has a side at least `min_length` long.
fn keep_long(mask: &Mask, min_length: usize) -> Mask {
    let (w, h) = (mask.width(), mask.height());
    let bits = mask.bits();
    let mut out = Mask::new(w, h);
    let mut seen = vec![false; w * h];
    let mut stack = Vec::new();
    let mut piece = Vec::new();
    for start in 0..w * h {
        if !bits[start] || seen[start] {
            continue;
        }
        seen[start] = true;
        stack.push(start);
        piece.clear();
        let (mut x0, mut y0, mut x1, mut y1) = (usize::MAX, usize::MAX, 0, 0);
        while let Some(p) = stack.pop() {
            piece.push(p);
            let (x, y) = (p % w, p / w);
            (x0, y0, x1, y1) = (x0.min(x), y0.min(y), x1.max(x), y1.max(y));
            for dy in -1i64..=1 {
                for dx in -1i64..=1 {
                    let (nx, ny) = (x as i64 + dx, y as i64 + dy);
                    if nx < 0 || ny < 0 || nx as usize >= w || ny as usize >= h {
                        continue;
                    }
                    let q = ny as usize * w + nx as usize;
                    if bits[q] && !seen[q] {
                        seen[q] = true;
                        stack.push(q);
                    }
                }
            }
        }
        if (x1 - x0 + 1).max(y1 - y0 + 1) >= min_length {
            for &p in &piece {
                out.bits_mut()[p] = true;
            }
        }
    }
    out
}

/// Pixels whose samples are all within `tolerance` of `value` (one value per channel, or one for
/// all), in the image's own units; with `seed`, only those connected (4-neighbour) to it.
#[must_use]
pub fn by_value(
    planes: &[Vec<f32>],
    w: usize,
    h: usize,
    value: &[f64],
    tolerance: f64,
    seed: Option<(usize, usize)>,
) -> Mask {
    let near = |i: usize| {
        planes.iter().enumerate().all(|(c, p)| {
            let v = value.get(c).or(value.last()).copied().unwrap_or(0.0);
            (f64::from(p[i]) - v).abs() <= tolerance || (v.is_nan() && p[i].is_nan())
        })
    };
    let Some((sx, sy)) = seed else {
        return Mask::from_bits(w, h, (0..w * h).map(near).collect());
    };
    let mut mask = Mask::new(w, h);
    if sx >= w || sy >= h || !near(sy * w + sx) {
        return mask;
    }
    let mut stack = vec![sy * w + sx];
    mask.bits_mut()[sy * w + sx] = true;
    while let Some(p) = stack.pop() {
        let (x, y) = (p % w, p / w);
        let nbrs =
            [(x > 0).then(|| p - 1), (x + 1 < w).then(|| p + 1), (y > 0).then(|| p - w), (y + 1 < h).then(|| p + w)];
        for q in nbrs.into_iter().flatten() {
            if !mask.bits()[q] && near(q) {
                mask.bits_mut()[q] = true;
                stack.push(q);
            }
        }
    }
    mask
}

/// Adds a halo of `n` pixels around every marked pixel (an octagon, alternating 4- and
/// 8-neighbour steps, close to a disk).
pub fn grow(mask: &mut Mask, n: usize) {
    let (w, h) = (mask.width(), mask.height());
    for step in 0..n {
        let src = mask.bits().to_vec();
        let diagonal = step % 2 == 1;
        let dst = mask.bits_mut();
        for y in 0..h {
            for x in 0..w {
                if src[y * w + x] {
                    continue;
                }
                let at = |dx: i64, dy: i64| {
                    let (nx, ny) = (x as i64 + dx, y as i64 + dy);
                    nx >= 0 && ny >= 0 && (nx as usize) < w && (ny as usize) < h && src[ny as usize * w + nx as usize]
                };
                let mut hit = at(-1, 0) || at(1, 0) || at(0, -1) || at(0, 1);
                if diagonal && !hit {
                    hit = at(-1, -1) || at(1, -1) || at(-1, 1) || at(1, 1);
                }
                dst[y * w + x] = hit;
            }
        }
    }
}

/// Drops holes smaller than `min` or larger than `max` pixels.
pub fn keep_sizes(mask: &mut Mask, min: Option<usize>, max: Option<usize>) {
    if min.is_none() && max.is_none() {
        return;
    }
    let (labels, sizes) = mask.label_holes();
    let keep: Vec<bool> = sizes.iter().map(|&s| min.is_none_or(|m| s >= m) && max.is_none_or(|m| s <= m)).collect();
    for (b, &l) in mask.bits_mut().iter_mut().zip(&labels) {
        if l != 0 && !keep[l as usize - 1] {
            *b = false;
        }
    }
}

/// Bad pixels from a stack of frames of one sensor (darks or flats), fed one frame at a time so
/// only a few planes are in memory.
#[derive(Debug)]
pub struct Stack {
    w: usize,
    h: usize,
    k: f64,
    frames: usize,
    extreme: Vec<u16>,
    first: Vec<f32>,
    varies: Vec<bool>,
}

impl Stack {
    /// A stack for `w × h` frames, flagging samples beyond `k` robust σ of their frame's residual.
    #[must_use]
    pub fn new(w: usize, h: usize, k: f64) -> Self {
        Self { w, h, k, frames: 0, extreme: vec![0; w * h], first: Vec::new(), varies: vec![false; w * h] }
    }

    /// Adds one frame (the first channel of an image).
    pub fn add(&mut self, plane: &[f32]) {
        let (w, h) = (self.w, self.h);
        let m = median_filter(plane, w, h, 2);
        let residual: Vec<f32> = plane.iter().zip(&m).map(|(a, b)| a - b).collect();
        let sigma = tiled_sigma(&residual, w, h, 64);
        for i in 0..w * h {
            if f64::from(residual[i].abs()) > self.k * f64::from(sigma[i]) {
                self.extreme[i] = self.extreme[i].saturating_add(1);
            }
        }
        if self.frames == 0 {
            self.first = plane.to_vec();
        } else {
            for ((v, &a), &b) in self.varies.iter_mut().zip(plane).zip(&self.first) {
                *v |= a.to_bits() != b.to_bits();
            }
        }
        self.frames += 1;
    }

    /// Pixels extreme in at least `share` of the frames, or (with two frames or more) never
    /// changing while the frames do.
    #[must_use]
    pub fn finish(&self, share: f64) -> Mask {
        #[allow(clippy::cast_precision_loss)]
        let need = (share * self.frames as f64).ceil().max(1.0);
        let frames_vary = self.varies.iter().any(|&v| v);
        Mask::from_bits(
            self.w,
            self.h,
            (0..self.w * self.h)
                .map(|i| f64::from(self.extreme[i]) >= need || (self.frames > 1 && frames_vary && !self.varies[i]))
                .collect(),
        )
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn robust_sigma_of_a_normal_sample() {
        // 1.4826·MAD estimates σ of a normal distribution (common practice).
        let mut rng = crate::synth::Rng::new(3);
        #[allow(clippy::cast_possible_truncation)]
        let v: Vec<f32> = (0..20000).map(|_| (7.0 * rng.normal()) as f32).collect();
        let s = robust_sigma(&v);
        assert!((s - 7.0).abs() < 0.2, "{s}");
    }

    #[test]
    fn grow_and_sizes() {
        let mut m = Mask::from_fn(9, 9, |x, y| (x, y) == (4, 4));
        grow(&mut m, 1);
        assert_eq!(m.count(), 5);
        grow(&mut m, 1);
        assert_eq!(m.count(), 13);
        let mut m = Mask::from_fn(9, 9, |x, y| (x, y) == (1, 1) || (x >= 5 && y >= 5));
        keep_sizes(&mut m, Some(2), None);
        assert_eq!(m.count(), 16);
    }

    #[test]
    fn value_with_seed_takes_only_the_connected_region() {
        let plane: Vec<f32> = (0..25).map(|i| if i % 5 == 2 || i == 0 { 9.0 } else { 1.0 }).collect();
        let m = by_value(std::slice::from_ref(&plane), 5, 5, &[9.0], 0.5, Some((2, 0)));
        assert_eq!(m.count(), 5);
        let m = by_value(&[plane], 5, 5, &[9.0], 0.5, None);
        assert_eq!(m.count(), 6);
    }
}
