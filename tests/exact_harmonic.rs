//! A fill reproduces, up to floating-point rounding, every function that is exactly harmonic for
//! the 5-point stencil, whatever the shape of the hole.

use reweave::fill::Structure;
use reweave::mask::Mask;
use reweave::synth::{Rng, paint_disk, paint_line};

use crate::common::{STRUCTURES, fill_plane_with, max_diff_in_mask};

/// Holes of several shapes on a `w × h` image, all at least two pixels from the image edge.
fn shapes(w: usize, h: usize) -> Vec<(&'static str, Mask)> {
    let (wf, hf) = (w as f64, h as f64);
    let square = Mask::from_fn(w, h, |x, y| x * 5 >= w && x * 5 < 3 * w && y * 5 >= h && y * 5 < 4 * h);
    let mut disk = Mask::new(w, h);
    paint_disk(&mut disk, wf / 2.0, hf / 2.0, 0.3 * wf.min(hf));
    let l_shape =
        Mask::from_fn(w, h, |x, y| (2..w - 3).contains(&x) && (2..h - 3).contains(&y) && !(x * 2 >= w && y * 2 < h));
    let mut scratch = Mask::new(w, h);
    paint_line(&mut scratch, (3.0, 3.0), (wf - 4.0, hf - 4.0), 1.0);
    let mut blobs = Mask::new(w, h);
    let mut rng = Rng::new(7);
    for _ in 0..6 {
        let r = 1.0 + 0.1 * wf.min(hf) * rng.uniform();
        paint_disk(
            &mut blobs,
            r + 2.0 + (wf - 2.0 * r - 5.0) * rng.uniform(),
            r + 2.0 + (hf - 2.0 * r - 5.0) * rng.uniform(),
            r,
        );
    }
    let dropout = {
        let mut rng = Rng::new(11);
        Mask::from_fn(w, h, |x, y| x >= 2 && y >= 2 && x + 2 < w && y + 2 < h && rng.uniform() < 0.5)
    };
    vec![
        ("square", square),
        ("disk", disk),
        ("L", l_shape),
        ("scratch", scratch),
        ("blobs", blobs),
        ("dropout", dropout),
    ]
}

/// Fills `f` (in coordinates centred on the image) over every hole shape on a `w × h` image and
/// checks the error against the largest value: f32 output keeps about 7 digits.
fn check_reproduced_on(w: usize, h: usize, name: &str, f: impl Fn(f64, f64) -> f64 + Copy) {
    let (cx, cy) = ((w / 2) as f64, (h / 2) as f64);
    let g = move |x: f64, y: f64| f(x - cx, y - cy);
    let scale = (0..w * h).map(|i| g((i % w) as f64, (i / w) as f64).abs()).fold(0.0, f64::max);
    for (shape, mask) in shapes(w, h) {
        assert!(mask.count() > 0, "{shape} hole is empty");
        for structure in STRUCTURES {
            let (plane, report) = fill_plane_with(structure, w, h, &mask, g, 1e-12);
            let err = max_diff_in_mask(&mask, &plane, |i| g((i % w) as f64, (i / w) as f64));
            assert!(
                err <= 1e-6 * scale,
                "{name} in a {shape} hole ({structure:?}): max error {err:e} (scale {scale:e}, residual {:e})",
                report.channels[0].relative_residual
            );
        }
    }
}

fn check_reproduced(name: &str, f: impl Fn(f64, f64) -> f64 + Copy) {
    check_reproduced_on(48, 40, name, f);
}

#[test]
fn affine_data_is_reproduced() {
    // Affine functions satisfy every consistent difference scheme exactly (common practice).
    check_reproduced("2 + 0.5x - 0.25y", |x, y| 2.0 + 0.5 * x - 0.25 * y);
}

#[test]
fn real_part_of_z_squared_is_reproduced() {
    // Re z² = x² − y²: L5 u = (2) + (−2) = 0 exactly (textbook; ORACLES.md §3, exact rational check).
    check_reproduced("x^2 - y^2", |x, y| x * x - y * y);
}

#[test]
fn imaginary_part_of_z_squared_is_reproduced() {
    // Im z² / 2 = xy: every 5-point difference of xy cancels (textbook; ORACLES.md §3).
    check_reproduced("xy", |x, y| x * y);
}

#[test]
fn real_part_of_z_cubed_is_reproduced() {
    // Re z³ = x³ − 3xy² is exactly discrete-harmonic (ORACLES.md §3, exact rational arithmetic).
    check_reproduced("x^3 - 3xy^2", |x, y| x * x * x - 3.0 * x * y * y);
}

#[test]
fn exponential_cosine_is_reproduced() {
    // (2+√3)^x·cos(πy/2): the x-neighbours sum to a^x(a + 1/a) = 4a^x for a = 2+√3 and the
    // y-neighbours' cosines cancel, so the 5-point sum is 4u: e^{αx}cos(βy) is discrete-harmonic
    // when cosh α + cos β = 2 (ORACLES.md §3, exact check).
    // A 20-pixel-wide image keeps its range to (2+√3)^±10 ≈ 5e5, within f32's 7 digits.
    let a = 2.0 + 3f64.sqrt();
    check_reproduced_on(20, 18, "(2+sqrt3)^x cos(pi y/2)", move |x, y| {
        a.powf(x) * (std::f64::consts::FRAC_PI_2 * y).cos()
    });
}

/// The discrete harmonic fill of Re z⁴ = x⁴ − 6x²y² + y⁴ on [0,1]² with the square hole
/// (0.25, 0.75)², at grid spacing 1/(n−1); returns the max error against Re z⁴.
fn re_z4_error(n: usize, structure: Structure) -> f64 {
    let h = 1.0 / (n - 1) as f64;
    let u = move |x: f64, y: f64| {
        let (x, y) = (x * h, y * h);
        x.powi(4) - 6.0 * x * x * y * y + y.powi(4)
    };
    let inside = |i: usize| {
        let t = i as f64 * h;
        t > 0.25 + 1e-12 && t < 0.75 - 1e-12
    };
    let mask = Mask::from_fn(n, n, |x, y| inside(x) && inside(y));
    let (plane, _) = fill_plane_with(structure, n, n, &mask, u, 1e-12);
    max_diff_in_mask(&mask, &plane, |i| u((i % n) as f64, (i / n) as f64))
}

#[test]
fn re_z4_error_shrinks_fourfold_per_refinement() {
    // L5(Re z⁴) ≡ 4 on the integer grid, the truncation term (h²/12)(u_xxxx + u_yyyy) of the
    // 5-point Laplacian (LeVeque, Finite Difference Methods for ODEs and PDEs, SIAM 2007, §3.4),
    // so the fill is not exact and its error is O(h²): about 4× smaller per halving of h.
    for structure in STRUCTURES {
        let (e1, e2, e3) = (re_z4_error(33, structure), re_z4_error(65, structure), re_z4_error(129, structure));
        assert!(e1 > 1e-5, "Re z^4 is not discrete-harmonic, so the error must be visible: {e1:e}");
        for (coarse, fine) in [(e1, e2), (e2, e3)] {
            let ratio = coarse / fine;
            assert!((3.6..=4.4).contains(&ratio), "{structure:?}: error ratio {ratio} (errors {coarse:e} -> {fine:e})");
        }
    }
}
