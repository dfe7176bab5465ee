//! Finding the damage: seeded synthetic detector frames and prints with known defects, checked
//! for recall and precision (bounds from the detection issue; methods cited in src/detect).

use reweave::detect::{self, OutlierParams, ScratchParams, Stack};
use reweave::mask::Mask;
use reweave::synth::{Rng, paint_line};

const N: usize = 512;

struct Frame {
    plane: Vec<f32>,
    bad: Vec<usize>,
    stars: Vec<(f64, f64)>,
}

/// A smooth sky with 40 stars of 2–5 px FWHM, read and shot noise, hot and dead pixels at fixed
/// places (same sensor), and a dim bad column at x = 300 (offset −40, 5σ of read noise).
fn frame(seed: u64, sensor: u64) -> Frame {
    let mut sensor_rng = Rng::new(sensor);
    let defects: Vec<(usize, f32)> = (0..240)
        .map(|k| {
            let p = sensor_rng.below(N * N);
            let v = if k % 2 == 0 { 1500.0 + 20000.0 * sensor_rng.uniform() as f32 } else { 0.0 };
            (p, v)
        })
        .collect();
    let mut rng = Rng::new(seed);
    let mut sky: Vec<f64> = (0..N * N).map(|i| 1000.0 + 0.2 * (i % N) as f64 + 0.1 * (i / N) as f64).collect();
    let mut stars = Vec::new();
    for _ in 0..40 {
        let (sx, sy) = (10.0 + (N as f64 - 20.0) * rng.uniform(), 10.0 + (N as f64 - 20.0) * rng.uniform());
        let fwhm = 2.0 + 3.0 * rng.uniform();
        let sigma = fwhm / 2.354_820_045; // FWHM = 2√(2 ln 2)·σ (common practice)
        let peak = 300.0 * (60.0f64).powf(rng.uniform());
        for y in (sy as usize).saturating_sub(15)..((sy as usize) + 16).min(N) {
            for x in (sx as usize).saturating_sub(15)..((sx as usize) + 16).min(N) {
                let d2 = (x as f64 - sx).powi(2) + (y as f64 - sy).powi(2);
                sky[y * N + x] += peak * (-d2 / (2.0 * sigma * sigma)).exp();
            }
        }
        stars.push((sx, sy));
    }
    let mut plane: Vec<f32> =
        sky.iter().map(|&s| (s + (64.0 + (s - 1000.0).max(0.0) / 4.0).sqrt() * rng.normal()) as f32).collect();
    for y in 0..N {
        plane[y * N + 300] -= 40.0;
    }
    let mut bad = Vec::new();
    for &(p, v) in &defects {
        if p % N == 300 {
            continue;
        }
        plane[p] = v;
        bad.push(p);
    }
    bad.sort_unstable();
    bad.dedup();
    Frame { plane, bad, stars }
}

fn recall_precision(found: &Mask, truth: &[usize], ignore: impl Fn(usize) -> bool) -> (f64, f64) {
    let hits = truth.iter().filter(|&&p| found.bits()[p]).count();
    let marked: Vec<usize> = (0..N * N).filter(|&p| found.bits()[p] && !ignore(p)).collect();
    let true_marks = marked.iter().filter(|p| truth.binary_search(p).is_ok()).count();
    (hits as f64 / truth.len() as f64, true_marks as f64 / marked.len().max(1) as f64)
}

#[test]
fn outliers_find_hot_and_dead_pixels_but_no_star_core() {
    let f = frame(1, 77);
    let found = detect::outliers(std::slice::from_ref(&f.plane), N, N, &OutlierParams::default());
    let (recall, precision) = recall_precision(&found, &f.bad, |p| p % N == 300);
    assert!(recall >= 0.99 && precision >= 0.99, "recall {recall}, precision {precision}");
    for &(sx, sy) in &f.stars {
        let (x, y) = (sx.round() as usize, sy.round() as usize);
        let core = (y - 1..=y + 1).flat_map(|yy| (x - 1..=x + 1).map(move |xx| yy * N + xx));
        for p in core {
            assert!(!found.bits()[p] || f.bad.binary_search(&p).is_ok(), "star core at ({x},{y}) marked");
        }
    }
}

#[test]
fn lines_find_the_dim_bad_column() {
    let f = frame(2, 77);
    let found = detect::lines(&[f.plane], N, N, 5.0);
    assert!((0..N).all(|y| found.get(300, y)), "column 300 found");
    assert_eq!(found.count(), N, "only that column");
}

#[test]
fn stack_finds_hot_dead_and_stuck_pixels() {
    let mut stack = Stack::new(N, N, 5.0);
    let mut stuck = Vec::new();
    let mut rng = Rng::new(5);
    for _ in 0..12 {
        stuck.push(rng.below(N * N));
    }
    let mut truth = frame(10, 77).bad;
    for s in 0..8 {
        let mut f = frame(10 + s, 77);
        for &p in &stuck {
            f.plane[p] = 1234.0; // stuck at a plausible value
        }
        stack.add(&f.plane);
    }
    truth.extend(&stuck);
    truth.sort_unstable();
    truth.dedup();
    let found = stack.finish(0.5);
    let (recall, precision) = recall_precision(&found, &truth, |p| p % N == 300);
    assert!(recall >= 0.99 && precision >= 0.99, "recall {recall}, precision {precision}");
}

#[test]
fn scratches_are_found_on_a_scanned_print() {
    // A smooth print with paper grain and 12 thin scratches, bright and dark, 1–3 px wide.
    let (w, h) = (640, 480);
    let mut rng = Rng::new(8);
    let mut plane: Vec<f32> = (0..w * h)
        .map(|i| {
            (120.0 + 60.0 * ((i % w) as f64 / 90.0).sin() * ((i / w) as f64 / 70.0).cos() + 3.0 * rng.normal()) as f32
        })
        .collect();
    let mut truth = Mask::new(w, h);
    for k in 0..12 {
        let mut one = Mask::new(w, h);
        let a = (rng.uniform() * w as f64, rng.uniform() * h as f64);
        let ang = rng.uniform() * std::f64::consts::PI;
        let len = 80.0 + 200.0 * rng.uniform();
        paint_line(&mut one, a, (a.0 + len * ang.cos(), a.1 + len * ang.sin()), 1.0 + 2.0 * rng.uniform());
        let value = if k % 2 == 0 { 235.0 } else { 15.0 };
        for (i, &m) in one.bits().iter().enumerate() {
            if m {
                plane[i] = value;
                truth.bits_mut()[i] = true;
            }
        }
    }
    let found = detect::scratches(&[plane], w, h, &ScratchParams::default());
    let covered = truth.bits().iter().zip(found.bits()).filter(|(t, f)| **t && **f).count();
    let coverage = covered as f64 / truth.count() as f64;
    let mut band = truth.clone();
    detect::grow(&mut band, 2);
    let false_marks = found.bits().iter().zip(band.bits()).filter(|(f, b)| **f && !**b).count();
    let false_share = false_marks as f64 / found.count().max(1) as f64;
    assert!(coverage >= 0.95, "coverage {coverage}");
    assert!(false_share <= 0.02, "false marks {false_share}");
}

#[test]
fn outliers_hold_up_on_other_frames_and_sensors() {
    for seed in 2..7u64 {
        let f = frame(seed * 7, 77 + seed);
        let found = detect::outliers(std::slice::from_ref(&f.plane), N, N, &OutlierParams::default());
        let (recall, precision) = recall_precision(&found, &f.bad, |p| p % N == 300);
        assert!(recall >= 0.99 && precision >= 0.99, "seed {seed}: recall {recall}, precision {precision}");
    }
}
