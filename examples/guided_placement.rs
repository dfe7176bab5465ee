//! Guided fill on a 24-megapixel RGB image: how long placing the source of a 100 000-pixel hole
//! takes, and the whole fill with 200 dust specks besides.
//!
//! `cargo run --release --example guided_placement`

use std::time::Instant;

use reweave::fill::{FillMethod, FillParams, fill, guided};
use reweave::mask::Mask;
use reweave::synth::{self, Rng};

fn main() {
    let (w, h) = (6000usize, 4000usize);
    let mut rng = Rng::new(17);
    // Three channels: smooth shading plus seeded grain.
    let planes: Vec<Vec<f32>> = (0..3)
        .map(|c| {
            let base = synth::smooth_plane(w, h, 30 + c);
            base.iter().map(|&v| 255.0 * v + 6.0 * rng.normal() as f32).collect()
        })
        .collect();
    let mut mask = Mask::new(w, h);
    synth::paint_disk(&mut mask, 2400.0, 1700.0, 178.5); // ≈ 100 000 pixels
    let big = mask.count();
    let views: Vec<&[f32]> = planes.iter().map(Vec::as_slice).collect();
    let t0 = Instant::now();
    let placed = guided::place(&views, &mask, &[]);
    println!(
        "one hole of {big} px in a {w}×{h} RGB image: placed in {:.3} s at offset {:?} (mismatch {:?})",
        t0.elapsed().as_secs_f64(),
        placed[0].offset,
        placed[0].mismatch
    );
    for _ in 0..200 {
        let (x, y) = (rng.uniform() * w as f64, rng.uniform() * h as f64);
        synth::paint_disk(&mut mask, x, y, 1.0 + 3.0 * rng.uniform());
    }
    let mut planes = planes;
    let mut views: Vec<&mut [f32]> = planes.iter_mut().map(Vec::as_mut_slice).collect();
    let t0 = Instant::now();
    let params = FillParams { method: FillMethod::Guided, ..FillParams::default() };
    let report = fill(&mut views, &mask, &params).expect("guided fill");
    println!(
        "with 200 dust specks besides ({} px in {} holes): placing {:.3} s, filling {:.3} s, total {:.3} s",
        report.unknowns,
        report.placements.len(),
        report.setup_seconds,
        report.solve_seconds,
        t0.elapsed().as_secs_f64()
    );
}
