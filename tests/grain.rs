//! Grain: the noise level measured around each hole and added inside it.

// Source: for white noise of standard deviation σ, the residual f_p − ¼Σ f_q has variance
// (1 + 4/16)σ² (sum of independent variances; common practice), and 1.4826·MAD estimates the
// standard deviation of normal data (the normal-consistency constant, common practice). The 10%
// bound leaves room for the sampling error of a median over ~2000 band samples (≈ 3%).

use reweave::fill::{FillParams, fill};
use reweave::mask::Mask;
use reweave::synth::Rng;

fn noisy(w: usize, h: usize, sigma: f64, seed: u64) -> Vec<f32> {
    let mut rng = Rng::new(seed);
    (0..w * h).map(|i| (100.0 + 0.2 * (i % w) as f64 + sigma * rng.normal()) as f32).collect()
}

#[test]
fn grain_matches_the_noise_around_each_hole_and_is_seeded() {
    let (w, h) = (300, 200);
    // Left half noise σ = 2, right half σ = 8: each hole gets its own surroundings' level.
    let mut image = noisy(w, h, 2.0, 1);
    let right = noisy(w, h, 8.0, 2);
    for i in 0..w * h {
        if i % w >= w / 2 {
            image[i] = right[i];
        }
    }
    let mut mask = Mask::new(w, h);
    reweave::synth::paint_disk(&mut mask, 70.0, 100.0, 40.0);
    reweave::synth::paint_disk(&mut mask, 230.0, 100.0, 40.0);
    let run = |seed| {
        let mut plane = image.clone();
        let params = FillParams { grain: Some(seed), ..FillParams::default() };
        let report = fill(&mut [&mut plane[..]], &mask, &params).expect("fill");
        (plane, report)
    };
    let (plane, report) = run(9);
    let record = report.grain.clone().expect("grain recorded");
    assert_eq!(record.seed, 9);
    // The spread of the filled values around the smooth fill, per hole.
    let mut smooth = image.clone();
    fill(&mut [&mut smooth[..]], &mask, &FillParams::default()).expect("fill");
    for (cx, expected) in [(70.0, 2.0), (230.0, 8.0)] {
        let diffs: Vec<f64> = (0..w * h)
            .filter(|&i| mask.bits()[i] && ((i % w) as f64 - cx).abs() < 45.0)
            .map(|i| f64::from(plane[i] - smooth[i]))
            .collect();
        let sd = (diffs.iter().map(|d| d * d).sum::<f64>() / diffs.len() as f64).sqrt();
        assert!((sd / expected - 1.0).abs() < 0.1, "hole at x={cx}: grain σ {sd:.3}, surroundings {expected}");
    }
    // Known pixels untouched, the same seed the same result, another seed another one.
    for i in 0..w * h {
        if !mask.bits()[i] {
            assert_eq!(plane[i].to_bits(), image[i].to_bits());
        }
    }
    assert_eq!(run(9).0, plane);
    assert_ne!(run(10).0, plane);
    // Off by default.
    let mut plain = image.clone();
    assert!(fill(&mut [&mut plain[..]], &mask, &FillParams::default()).expect("fill").grain.is_none());
    assert_eq!(plain, smooth);
}
