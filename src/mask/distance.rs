//! How far each pixel is from the nearest known pixel: the exact Euclidean distance transform of
//! Felzenszwalb & Huttenlocher ("Distance Transforms of Sampled Functions", Theory of Computing
//! 8, 2012, §2–3): the lower envelope of parabolas, one pass over the columns and one over the
//! rows, linear in the number of pixels.
//!
//! A filled value is a guess whose support shrinks with this distance: deep inside a wide hole
//! any smooth fill (harmonic or biharmonic) only interpolates the rim, and texture is not
//! reconstructed. The deepest point of a hole is its inradius.

use rayon::prelude::*;

use super::Mask;

/// Stands for "no known pixel on this line" in the 1-D passes (larger than any squared
/// distance in an image that fits in memory, and still exact in `f64` arithmetic).
const FAR: f64 = 1e30;

/// The squared distance transform of the sampled function `f` along one line, into `d`
/// (`v` and `z` are scratch of length `n` and `n + 1`).
fn line(f: &[f64], d: &mut [f64], v: &mut [usize], z: &mut [f64]) {
    let n = f.len();
    let mut k = 0usize;
    v[0] = 0;
    z[0] = f64::NEG_INFINITY;
    z[1] = f64::INFINITY;
    #[allow(clippy::cast_precision_loss)] // line positions are far below 2^52
    let meet = |q: usize, p: usize| ((f[q] + (q * q) as f64) - (f[p] + (p * p) as f64)) / (2.0 * (q - p) as f64);
    for q in 1..n {
        // Drop the parabolas the new one hides; z[0] = −∞ stops the search at the first.
        let mut s = meet(q, v[k]);
        while k > 0 && s <= z[k] {
            k -= 1;
            s = meet(q, v[k]);
        }
        k += 1;
        v[k] = q;
        z[k] = s;
        z[k + 1] = f64::INFINITY;
    }
    k = 0;
    #[allow(clippy::cast_precision_loss)]
    for (q, out) in d.iter_mut().enumerate() {
        while z[k + 1] < q as f64 {
            k += 1;
        }
        let p = v[k];
        let dq = q as f64 - p as f64;
        *out = dq * dq + f[p];
    }
}

/// The Euclidean distance, in pixels, from every pixel to the nearest known (unmasked) pixel: 0
/// on known pixels. With no known pixel at all, every distance is infinite.
#[must_use]
pub fn distance_to_known(mask: &Mask) -> Vec<f32> {
    let (w, h) = (mask.width(), mask.height());
    let bits = mask.bits();
    // Columns first (into a column-major buffer), then rows.
    let mut columns = vec![0f64; w * h];
    columns.par_chunks_mut(h).enumerate().for_each(|(x, col)| {
        let f: Vec<f64> = (0..h).map(|y| if bits[y * w + x] { FAR } else { 0.0 }).collect();
        let (mut v, mut z) = (vec![0usize; h], vec![0f64; h + 1]);
        line(&f, col, &mut v, &mut z);
    });
    let mut out = vec![0f32; w * h];
    out.par_chunks_mut(w).enumerate().for_each(|(y, row)| {
        let f: Vec<f64> = (0..w).map(|x| columns[x * h + y]).collect();
        let mut d = vec![0f64; w];
        let (mut v, mut z) = (vec![0usize; w], vec![0f64; w + 1]);
        line(&f, &mut d, &mut v, &mut z);
        for (o, &sq) in row.iter_mut().zip(&d) {
            #[allow(clippy::cast_possible_truncation)] // distances are stored in f32
            {
                *o = if sq >= FAR / 2.0 { f32::INFINITY } else { sq.sqrt() as f32 };
            }
        }
    });
    out
}

/// The deepest point of a hole: its distance from the nearest known pixel (the hole's inradius)
/// and where it is.
#[derive(Clone, Copy, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct Depth {
    pub pixels: f32,
    pub x: usize,
    pub y: usize,
}

/// The deepest point of every hole whose inradius exceeds `limit` pixels, deepest first.
#[must_use]
pub fn holes_deeper_than(mask: &Mask, distance: &[f32], limit: f32) -> Vec<Depth> {
    let w = mask.width();
    let (labels, sizes) = mask.label_holes();
    let mut deepest: Vec<Option<Depth>> = vec![None; sizes.len()];
    for (p, &l) in labels.iter().enumerate() {
        if l == 0 || distance[p] <= limit {
            continue;
        }
        let slot = &mut deepest[l as usize - 1];
        if slot.is_none_or(|d| distance[p] > d.pixels) {
            *slot = Some(Depth { pixels: distance[p], x: p % w, y: p / w });
        }
    }
    let mut out: Vec<Depth> = deepest.into_iter().flatten().collect();
    out.sort_by(|a, b| b.pixels.total_cmp(&a.pixels));
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Brute force: the distance to the nearest known pixel by trying them all.
    fn brute(mask: &Mask) -> Vec<f32> {
        let (w, h) = (mask.width(), mask.height());
        let known: Vec<(usize, usize)> = (0..w * h).filter(|&i| !mask.bits()[i]).map(|i| (i % w, i / w)).collect();
        (0..w * h)
            .map(|i| {
                let (x, y) = (i % w, i / w);
                known
                    .iter()
                    .map(|&(a, b)| {
                        let (dx, dy) = (x.abs_diff(a) as f64, y.abs_diff(b) as f64);
                        (dx * dx + dy * dy).sqrt()
                    })
                    .fold(f64::INFINITY, f64::min) as f32
            })
            .collect()
    }

    #[test]
    fn matches_brute_force_on_random_masks() {
        let mut rng = crate::synth::Rng::new(9);
        for (w, h, density) in [(37, 23, 0.5), (50, 41, 0.9), (13, 60, 0.97), (64, 1, 0.7), (1, 30, 0.6)] {
            let mask = Mask::from_fn(w, h, |_, _| rng.uniform() < density);
            if mask.count() == w * h {
                continue;
            }
            let fast = distance_to_known(&mask);
            for (i, (a, b)) in fast.iter().zip(brute(&mask)).enumerate() {
                assert!((a - b).abs() <= 1e-4 * b.max(1.0), "{w}×{h} pixel {i}: {a} vs {b}");
            }
        }
    }

    #[test]
    fn a_disk_hole_is_as_deep_as_its_radius() {
        // A disk of radius 30 around (50, 50): its centre is about 30 px from the nearest known
        // pixel (one pixel less or so on the grid).
        let mask = Mask::from_fn(101, 101, |x, y| {
            let (dx, dy) = (x as f64 - 50.0, y as f64 - 50.0);
            dx * dx + dy * dy < 900.0
        });
        let d = distance_to_known(&mask);
        let deep = holes_deeper_than(&mask, &d, 16.0);
        assert_eq!(deep.len(), 1);
        assert!((29.0..=31.0).contains(&deep[0].pixels), "{:?}", deep[0]);
        assert_eq!((deep[0].x, deep[0].y), (50, 50));
        assert!(holes_deeper_than(&mask, &d, 31.0).is_empty());
        assert!(distance_to_known(&Mask::from_fn(3, 2, |_, _| true)).iter().all(|v| v.is_infinite()));
    }
}
