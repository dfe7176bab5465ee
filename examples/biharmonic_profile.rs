//! One biharmonic fill of a benchmark case (the frame unless a case is named) at 1024² unless a
//! size is given, for profiling.
//!
//! `cargo run --release --example biharmonic_profile [scratches|deadpix|blob|dropout|frame] [size]`

use reweave::fill::{FillMethod, FillParams, Solver, Start};
use reweave::synth::{self, MaskFamily};

fn main() {
    let name = std::env::args().nth(1).unwrap_or_else(|| "frame".into());
    let n = std::env::args().nth(2).map_or(1024, |s| s.parse().expect("a size in pixels"));
    let family = MaskFamily::ALL.into_iter().find(|f| f.name() == name).expect("a benchmark case");
    let mask = family.mask(n, 5);
    let mut plane = synth::smooth_plane(n, n, 3);
    let solver = Solver::for_method(&mask, FillMethod::Biharmonic).expect("known pixels");
    let params = FillParams { method: FillMethod::Biharmonic, ..FillParams::default() };
    let report = solver.solve(&mut [&mut plane[..]], &params, Start::FullMultigrid, &mut |_| true).expect("converges");
    println!(
        "{} levels, {} iterations, setup {:.3} s, solve {:.3} s",
        report.levels, report.channels[0].cycles, report.setup_seconds, report.solve_seconds
    );
}
