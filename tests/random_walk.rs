//! The fill at a pixel equals the expected known value where a random walk started there first
//! lands (Doyle & Snell, Random Walks and Electric Networks, MAA 1984, ch. 1 §1.2; Lawler & Limic,
//! Random Walk: A Modern Introduction, CUP 2010, ch. 6). A neighbour outside the image is not a
//! choice for the walk, which is the natural boundary of the fill.

// Source: Doyle & Snell, Random Walks and Electric Networks, MAA 1984, ch. 1 §1.2 (from memory for
// the section); the 4-standard-error bound is common practice (normal tails, ORACLES.md §3).

use reweave::mask::Mask;
use reweave::synth::{Rng, paint_disk};

use crate::common::{STRUCTURES, fill_plane_with};

/// Mean and standard error of the known value first reached by `walks` walks from `(x0, y0)`.
fn walk_estimate(mask: &Mask, plane: &[f32], x0: usize, y0: usize, walks: usize, rng: &mut Rng) -> (f64, f64) {
    let (w, h) = (mask.width(), mask.height());
    let (mut sum, mut sum_sq) = (0.0, 0.0);
    for _ in 0..walks {
        let (mut x, mut y) = (x0, y0);
        while mask.get(x, y) {
            let mut options = [(0usize, 0usize); 4];
            let mut k = 0;
            if x > 0 {
                options[k] = (x - 1, y);
                k += 1;
            }
            if x + 1 < w {
                options[k] = (x + 1, y);
                k += 1;
            }
            if y > 0 {
                options[k] = (x, y - 1);
                k += 1;
            }
            if y + 1 < h {
                options[k] = (x, y + 1);
                k += 1;
            }
            (x, y) = options[rng.below(k)];
        }
        let v = f64::from(plane[y * w + x]);
        sum += v;
        sum_sq += v * v;
    }
    let m = walks as f64;
    let mean = sum / m;
    let var = (sum_sq / m - mean * mean).max(0.0);
    (mean, (var / m).sqrt())
}

fn check(mask: &Mask, points: &[(usize, usize)], seed: u64) {
    let (w, h) = (mask.width(), mask.height());
    let mut rng = Rng::new(seed);
    let rough: Vec<f64> = (0..w * h).map(|_| rng.uniform()).collect();
    let fills: Vec<Vec<f32>> = STRUCTURES
        .iter()
        .map(|&s| fill_plane_with(s, w, h, mask, |x, y| rough[y as usize * w + x as usize], 1e-10).0)
        .collect();
    let plane = &fills[0];
    let mut rng = Rng::new(seed + 1);
    for &(x, y) in points {
        assert!(mask.get(x, y), "({x},{y}) must be in the hole");
        let (mc, se) = walk_estimate(mask, plane, x, y, 40_000, &mut rng);
        for (s, fill) in STRUCTURES.iter().zip(&fills) {
            let u = f64::from(fill[y * w + x]);
            // |MC − u| ≤ 4 SE: a false alarm has probability about 6e-5 per point (normal tails).
            assert!((mc - u).abs() <= 4.0 * se, "at ({x},{y}), {s:?}: walks give {mc} ± {se}, fill gives {u}");
        }
    }
}

#[test]
fn fill_matches_random_walks_in_an_interior_hole() {
    let mut mask = Mask::new(24, 24);
    paint_disk(&mut mask, 12.0, 12.0, 7.0);
    check(&mask, &[(12, 12), (9, 10), (15, 14), (12, 6), (17, 12), (7, 13)], 5);
}

#[test]
fn fill_matches_random_walks_where_the_hole_meets_the_image_edge() {
    // A hole along the left edge: walks there can only step right, up or down.
    let mask = Mask::from_fn(20, 24, |x, y| x < 7 && (4..20).contains(&y));
    check(&mask, &[(0, 12), (0, 5), (3, 10), (6, 18), (1, 19)], 9);
}
