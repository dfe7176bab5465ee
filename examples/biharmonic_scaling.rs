//! Biharmonic fill: iterations and time against the harmonic fill on the same masks.
//!
//! `cargo run --release --example biharmonic_scaling`

use std::time::Instant;

use reweave::fill::{Cycle, FillMethod, FillParams, Solver, Start};
use reweave::mask::Mask;
use reweave::synth::{self, MaskFamily};

/// Iterations and the best of three times (setup + solve): the machine's speed wanders, and the
/// fastest run is the one least disturbed.
fn run(method: FillMethod, mask: &Mask, plane: &[f32], cycle: Cycle, sweeps: usize) -> (usize, f64) {
    let runs: Vec<(usize, f64, f64)> = (0..3).map(|_| run_split(method, mask, plane, cycle, sweeps)).collect();
    let best = runs.iter().fold(runs[0], |b, r| if r.1 < b.1 { *r } else { b });
    if method == FillMethod::Biharmonic {
        print!("[setup {:.3} s] ", best.2);
    }
    (best.0, best.1)
}

fn run_split(method: FillMethod, mask: &Mask, plane: &[f32], cycle: Cycle, sweeps: usize) -> (usize, f64, f64) {
    let mut p = plane.to_vec();
    let t0 = Instant::now();
    let solver = Solver::for_method(mask, method).expect("known pixels");
    let params = FillParams { method, cycle, pre_smooth: sweeps, post_smooth: sweeps, ..FillParams::default() };
    let report = solver.solve(&mut [&mut p[..]], &params, Start::FullMultigrid, &mut |_| true).expect("converges");
    (report.channels[0].cycles, t0.elapsed().as_secs_f64(), report.setup_seconds)
}

fn main() {
    let sweeps: usize = std::env::var("SWEEPS").ok().and_then(|s| s.parse().ok()).unwrap_or(2);
    let cycle = if std::env::var("W").is_ok() { Cycle::W } else { Cycle::V };
    for n in [128usize, 256, 512, 1024] {
        let square = Mask::from_fn(n, n, |x, y| (4..n - 4).contains(&x) && (4..n - 4).contains(&y));
        let plane = synth::smooth_plane(n, n, 3);
        let (hi, ht) = run(FillMethod::Harmonic, &square, &plane, Cycle::V, 2);
        let (bi, bt) = run(FillMethod::Biharmonic, &square, &plane, cycle, sweeps);
        println!("square {n}: harmonic {hi} cycles {ht:.3} s, biharmonic {bi} iterations {bt:.3} s ({:.1}×)", bt / ht);
    }
    for family in MaskFamily::ALL {
        let n = 1024;
        let mask = family.mask(n, 5);
        let plane = synth::smooth_plane(n, n, 3);
        let (hi, ht) = run(FillMethod::Harmonic, &mask, &plane, Cycle::V, 2);
        let (bi, bt) = run(FillMethod::Biharmonic, &mask, &plane, cycle, sweeps);
        println!(
            "{} {n}: harmonic {hi} cycles {ht:.3} s, biharmonic {bi} iterations {bt:.3} s ({:.1}×)",
            family.name(),
            bt / ht
        );
    }
}
