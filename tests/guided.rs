//! The guided fill: exact reproduction when the source is the target plus a constant, texture
//! carried into the hole, no seam at the rim, and the automatic placement of sources.

// Sources: the guided fill solves eq. (7) of Pérez, Gangnet & Blake, "Poisson Image Editing",
// ACM TOG 22(3) 2003 with v_pq = s_p − s_q; "g = f* + c gives f = f*" is the check listed there
// (ORACLES.md §4). The texture and seam bounds are the (high-frequency energy within 30% of
// the surroundings; harmonic near zero); the seam measure — mean absolute difference across the
// rim against the same measure between known neighbours — is common practice.

use reweave::fill::guided::ChosenSource;
use reweave::fill::{FillMethod, FillParams, FillReport, fill};
use reweave::mask::Mask;
use reweave::synth::Rng;

fn guided(plane: &mut [f32], mask: &Mask, chosen: Vec<ChosenSource>) -> FillReport {
    let params =
        FillParams { method: FillMethod::Guided, chosen_sources: chosen, tolerance: 1e-9, ..FillParams::default() };
    fill(&mut [plane], mask, &params).expect("guided fill succeeds")
}

/// A periodic texture (period 16 in x and 12 in y) plus a step of `c` on the right half.
fn stepped_texture(w: usize, h: usize, c: f32) -> Vec<f32> {
    (0..w * h)
        .map(|i| {
            let (x, y) = ((i % w) as f32, (i / w) as f32);
            let t = 40.0 * (x * std::f32::consts::TAU / 16.0).sin() * (y * std::f32::consts::TAU / 12.0).cos();
            100.0 + t + if i % w >= w / 2 { c } else { 0.0 }
        })
        .collect()
}

#[test]
fn a_source_equal_to_the_target_plus_a_constant_reproduces_the_target() {
    let (w, h) = (160, 96);
    let truth = stepped_texture(w, h, 35.0);
    let mask = Mask::from_fn(w, h, |x, y| (20..45).contains(&x) && (30..60).contains(&y));
    let mut plane: Vec<f32> = truth.iter().zip(mask.bits()).map(|(&v, &m)| if m { 0.0 } else { v }).collect();
    // Moved by 96 = 6 periods to the right: the source is the target plus 35.
    let report = guided(&mut plane, &mask, vec![ChosenSource { at: (30, 40), offset: (96, 0) }]);
    assert_eq!(report.placements.len(), 1);
    assert_eq!(report.placements[0].offset, Some((96, 0)));
    let worst = (0..w * h).filter(|&i| mask.bits()[i]).map(|i| (plane[i] - truth[i]).abs()).fold(0f32, f32::max);
    assert!(worst < 1e-3, "largest error {worst}");
}

#[test]
fn automatic_placement_finds_a_matching_source() {
    let (w, h) = (160, 96);
    let truth = stepped_texture(w, h, 35.0);
    let mask = Mask::from_fn(w, h, |x, y| (20..45).contains(&x) && (30..60).contains(&y));
    let mut plane: Vec<f32> = truth.iter().zip(mask.bits()).map(|(&v, &m)| if m { 0.0 } else { v }).collect();
    let report = guided(&mut plane, &mask, Vec::new());
    let placed = report.placements[0];
    let (dx, dy) = placed.offset.expect("a source fits");
    // Any whole number of periods matches the band exactly (up to the constant step).
    assert_eq!((dx.rem_euclid(16), dy.rem_euclid(12)), (0, 0), "offset ({dx}, {dy})");
    assert!(placed.mismatch.is_some_and(|m| m < 1e-3), "{placed:?}");
    let worst = (0..w * h).filter(|&i| mask.bits()[i]).map(|i| (plane[i] - truth[i]).abs()).fold(0f32, f32::max);
    assert!(worst < 1e-3, "largest error {worst}");
}

/// A textured image: a smooth ramp plus seeded noise, a little smoothed (grain-like).
fn textured(w: usize, h: usize, seed: u64) -> Vec<f32> {
    let mut rng = Rng::new(seed);
    let noise: Vec<f32> = (0..w * h).map(|_| rng.normal() as f32).collect();
    (0..w * h)
        .map(|i| {
            let (x, y) = (i % w, i / w);
            let mut s = noise[i] * 2.0;
            for (dx, dy) in [(-1, 0), (1, 0), (0, -1), (0, 1)] {
                let (a, b) = ((x as i64 + dx).clamp(0, w as i64 - 1), (y as i64 + dy).clamp(0, h as i64 - 1));
                s += noise[b as usize * w + a as usize];
            }
            50.0 + 0.3 * x as f32 + 0.1 * y as f32 + 10.0 * s / 6.0
        })
        .collect()
}

/// Mean squared 5-point Laplacian over the pixels `p` whose four neighbours satisfy `inside`.
fn hf_energy(plane: &[f32], w: usize, h: usize, inside: impl Fn(usize, usize) -> bool) -> f64 {
    let (mut s, mut k) = (0f64, 0f64);
    for y in 1..h - 1 {
        for x in 1..w - 1 {
            if inside(x, y) && inside(x - 1, y) && inside(x + 1, y) && inside(x, y - 1) && inside(x, y + 1) {
                let p = y * w + x;
                let l =
                    4.0 * f64::from(plane[p]) - f64::from(plane[p - 1] + plane[p + 1] + plane[p - w] + plane[p + w]);
                s += l * l;
                k += 1.0;
            }
        }
    }
    s / k
}

#[test]
fn texture_comes_through_and_the_rim_has_no_seam() {
    let (w, h) = (256, 192);
    let image = textured(w, h, 77);
    let in_hole = |x: usize, y: usize| (x as f64 - 120.0).hypot(y as f64 - 90.0) < 22.0;
    let mask = Mask::from_fn(w, h, in_hole);
    let near = |x: usize, y: usize| {
        let d = (x as f64 - 120.0).hypot(y as f64 - 90.0);
        (26.0..50.0).contains(&d)
    };
    let surroundings = hf_energy(&image, w, h, near);

    let mut harmonic = image.clone();
    fill(&mut [&mut harmonic[..]], &mask, &FillParams::default()).expect("harmonic fill");
    let mut plane = image.clone();
    let report = guided(&mut plane, &mask, Vec::new());
    assert!(report.placements[0].offset.is_some());

    let inside_guided = hf_energy(&plane, w, h, in_hole);
    let inside_harmonic = hf_energy(&harmonic, w, h, in_hole);
    let ratio = inside_guided / surroundings;
    assert!((0.7..=1.3).contains(&ratio), "guided energy {inside_guided:.3} vs surroundings {surroundings:.3}");
    assert!(inside_harmonic < 0.05 * surroundings, "harmonic energy {inside_harmonic:.3}");

    // Seam: the mean jump between a filled pixel and its known neighbour is like the mean jump
    // between known neighbours nearby.
    let bits = mask.bits();
    let (mut across, mut na, mut known, mut nk) = (0f64, 0f64, 0f64, 0f64);
    for y in 1..h - 1 {
        for x in 1..w - 1 {
            let p = y * w + x;
            for q in [p + 1, p + w] {
                let jump = f64::from((plane[p] - plane[q]).abs());
                if bits[p] != bits[q] {
                    across += jump;
                    na += 1.0;
                } else if !bits[p] && near(x, y) {
                    known += jump;
                    nk += 1.0;
                }
            }
        }
    }
    let (across, known) = (across / na, known / nk);
    assert!(across < 1.3 * known, "jump across the rim {across:.3} vs between known pixels {known:.3}");
}

#[test]
fn known_pixels_stay_and_every_hole_gets_its_own_source() {
    let (w, h) = (200, 150);
    let image = textured(w, h, 5);
    let mut mask = Mask::new(w, h);
    for (cx, cy, r) in [(40.0, 40.0, 6.0), (150.0, 100.0, 9.0), (100.0, 30.0, 3.0)] {
        reweave::synth::paint_disk(&mut mask, cx, cy, r);
    }
    mask.set(10, 140, true); // a single pixel
    let mut plane = image.clone();
    let report = guided(&mut plane, &mask, Vec::new());
    assert_eq!(report.placements.len(), 4);
    for p in &report.placements {
        let (dx, dy) = p.offset.expect("every hole finds a source");
        // The source is made of known pixels only.
        for y in p.hole.y..p.hole.y + p.hole.height {
            for x in p.hole.x..p.hole.x + p.hole.width {
                if mask.get(x, y) {
                    let (sx, sy) = ((x as isize + dx) as usize, (y as isize + dy) as usize);
                    assert!(!mask.get(sx, sy), "source pixel ({sx}, {sy}) is itself damaged");
                }
            }
        }
    }
    for i in 0..w * h {
        if !mask.bits()[i] {
            assert_eq!(plane[i].to_bits(), image[i].to_bits(), "known pixel {i} changed");
        } else {
            assert!(plane[i].is_finite());
        }
    }
}
