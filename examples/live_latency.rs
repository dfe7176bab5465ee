//! Figures (not a test) for the window's live mode: the work between releasing the mouse after a
//! scratch-sized stroke on a 24-megapixel RGB photo and the repaired tiles being ready, as the
//! window does it (mask scans, hierarchy, warm-started solve, colour conversion of two tiles).
//!
//! `cargo run --release --example live_latency`

use std::time::Instant;

use reweave::fill::{FillParams, Solver, Start};
use reweave::mask::Mask;
use reweave::synth::{paint_line, smooth_plane};

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let (w, h) = (6000, 4000);
    let mut planes: Vec<Vec<f32>> = (0..3).map(|c| smooth_plane(w, h, c)).collect();
    let mut mask = Mask::new(w, h);
    paint_line(&mut mask, (1000.0, 1000.0), (1300.0, 1100.0), 3.0);
    let previous = mask.clone();
    for run in 0..3 {
        let t0 = Instant::now();
        let holes = mask.hole_stats();
        let restored = previous.bits().iter().zip(mask.bits()).filter(|(a, b)| **a && !**b).count();
        let t1 = Instant::now();
        let solver = Solver::new(&mask)?;
        let t2 = Instant::now();
        let mut views: Vec<&mut [f32]> = planes.iter_mut().map(Vec::as_mut_slice).collect();
        let report = solver.solve(&mut views, &FillParams::default(), Start::Warm, &mut |_| true)?;
        let t3 = Instant::now();
        let tile: u64 =
            planes[0][..2 * 1024 * 1024].iter().map(|&v| u64::from((v * 255.0).clamp(0.0, 255.0) as u8)).sum();
        let t4 = Instant::now();
        println!(
            "run {run}: {} unknowns in {} hole(s); scans {:.3} s, setup {:.3} s, solve {:.3} s, tiles {:.3} s, total {:.3} s ({restored} restored, checksum {tile})",
            report.unknowns,
            holes.holes,
            (t1 - t0).as_secs_f64(),
            (t2 - t1).as_secs_f64(),
            (t3 - t2).as_secs_f64(),
            (t4 - t3).as_secs_f64(),
            (t4 - t0).as_secs_f64(),
        );
    }
    Ok(())
}
