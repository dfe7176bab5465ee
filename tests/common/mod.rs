//! Helpers shared by the integration tests.

// Source: helpers only; the tests that use them name the sources of their check values.
// `mean_factor` is the geometric mean of the per-cycle residual reduction, the usual measure of
// a multigrid convergence factor (common practice; Trottenberg, Oosterlee & Schüller, Multigrid,
// 2001, §2.5, from memory).

#![allow(dead_code)] // not every test module uses every helper

use reweave::fill::{FillParams, FillReport, Solver, Start, Structure};
use reweave::mask::Mask;

/// Both ways the solver can store its levels; the oracle tests check each.
pub const STRUCTURES: [Structure; 2] = [Structure::Compact, Structure::Grid];

/// Fills one plane whose known pixels hold `f(x, y)` (masked pixels start at a junk value) with
/// the solver's automatic choice of storage.
pub fn fill_plane(
    w: usize,
    h: usize,
    mask: &Mask,
    f: impl Fn(f64, f64) -> f64,
    tolerance: f64,
) -> (Vec<f32>, FillReport) {
    fill_plane_with(Structure::Auto, w, h, mask, f, tolerance)
}

/// [`fill_plane`] with the given storage.
pub fn fill_plane_with(
    structure: Structure,
    w: usize,
    h: usize,
    mask: &Mask,
    f: impl Fn(f64, f64) -> f64,
    tolerance: f64,
) -> (Vec<f32>, FillReport) {
    let mut plane: Vec<f32> =
        (0..w * h).map(|i| if mask.bits()[i] { 12345.0 } else { f((i % w) as f64, (i / w) as f64) as f32 }).collect();
    let params = FillParams { tolerance, ..FillParams::default() };
    let solver = Solver::with_structure(mask, structure).expect("mask leaves known pixels");
    let report =
        solver.solve(&mut [&mut plane[..]], &params, Start::FullMultigrid, &mut |_| true).expect("fill converges");
    (plane, report)
}

/// Geometric mean of the per-cycle residual reduction, leaving out the start.
pub fn mean_factor(history: &[f64]) -> f64 {
    assert!(history.len() >= 3, "need at least two cycles to measure a factor: {history:?}");
    let cycles = (history.len() - 2) as f64;
    (history[history.len() - 1] / history[1]).powf(1.0 / cycles)
}

/// Maximum of |a − b| over the masked pixels.
pub fn max_diff_in_mask(mask: &Mask, a: &[f32], b: impl Fn(usize) -> f64) -> f64 {
    mask.bits().iter().enumerate().filter(|(_, m)| **m).map(|(i, _)| (f64::from(a[i]) - b(i)).abs()).fold(0.0, f64::max)
}
