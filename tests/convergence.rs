//! Multigrid convergence: the residual falls by a fixed factor per cycle that does not grow with
//! the size of the hole, on every mask family, where plain Gauss-Seidel needs O(n²) sweeps.

use reweave::fill::{FillParams, Solver, Start, Structure};
use reweave::mask::Mask;
use reweave::synth::{MaskFamily, Rng};

use crate::common::mean_factor;

/// Asymptotic reduction factor per cycle: known pixels 0, unknowns start at seeded noise (every
/// error mode present), default V-cycle.
fn factor(mask: &Mask, seed: u64) -> (f64, usize) {
    factor_with(Structure::Auto, mask, seed)
}

/// [`factor`] with the given storage.
fn factor_with(structure: Structure, mask: &Mask, seed: u64) -> (f64, usize) {
    let (w, h) = (mask.width(), mask.height());
    let mut rng = Rng::new(seed);
    let mut plane: Vec<f32> = mask.bits().iter().map(|&m| if m { rng.uniform() as f32 } else { 0.0 }).collect();
    let solver = Solver::with_structure(mask, structure).expect("known pixels exist");
    // b = 0, so the residual reported is absolute; 1e-7 gives 7–9 cycles from noise.
    let params = FillParams { tolerance: 1e-7, ..FillParams::default() };
    let report = solver.solve(&mut [&mut plane[..]], &params, Start::Warm, &mut |_| true).expect("converges");
    assert_eq!(plane.len(), w * h);
    let history = &report.channels[0].history;
    (mean_factor(history), history.len() - 1)
}

fn centred_square(n: usize) -> Mask {
    Mask::from_fn(n, n, |x, y| (n / 4..3 * n / 4).contains(&x) && (n / 4..3 * n / 4).contains(&y))
}

#[test]
fn square_hole_factor_is_textbook_and_independent_of_size() {
    // Textbook V-cycle factors with red-black Gauss-Seidel are about 0.1 and independent of h
    // (Trottenberg, Oosterlee & Schüller, Multigrid, 2001, ch. 4 (from memory); ORACLES.md §2
    // measured V(1,1) 0.105–0.107 for N = 32…256, computed check). Bound from the Core issue.
    let sizes = [128, 256, 512, 1024];
    let factors: Vec<f64> = sizes.iter().map(|&n| factor(&centred_square(n), n as u64).0).collect();
    for (n, f) in sizes.iter().zip(&factors) {
        eprintln!("square hole in {n}²: {f:.3} per cycle");
        assert!(*f <= 0.15, "square hole in {n}²: {f:.3} per cycle");
    }
    let ratio = factors[3] / factors[0];
    assert!(ratio <= 1.1, "factor grows with size: {factors:?}");
}

#[test]
fn every_mask_family_converges_fast() {
    // Both multigrid storages on every family (the default storage solves some of these holes
    // directly, without cycles).
    for family in MaskFamily::ALL {
        for structure in [Structure::Compact, Structure::Grid] {
            let (f, cycles) = factor_with(structure, &family.mask(512, 3), 17);
            eprintln!("{family} 512² ({structure:?}): {f:.3} per cycle, {cycles} cycles");
            assert!(f <= 0.3, "{family} ({structure:?}): {f:.3} per cycle");
        }
    }
}

/// Red-black Gauss-Seidel on an n×n hole with the top edge 1 and the other edges 0: the sweeps
/// needed to reach a relative residual of 1e-6, and the residual reduction per sweep measured
/// over the last 200 of them (the asymptotic factor).
fn gauss_seidel(n: usize) -> (usize, f64) {
    let w = n + 2;
    let mut u = vec![0f64; w * w];
    u[..w].fill(1.0);
    let residual = |u: &[f64]| -> f64 {
        let mut s = 0.0;
        for y in 1..=n {
            for x in 1..=n {
                let p = y * w + x;
                let r = u[p - 1] + u[p + 1] + u[p - w] + u[p + w] - 4.0 * u[p];
                s += r * r;
            }
        }
        s.sqrt()
    };
    let r0 = residual(&u);
    let mut history = vec![r0];
    loop {
        for colour in 0..2 {
            for y in 1..=n {
                for x in (1..=n).filter(|x| (x + y) % 2 == colour) {
                    let p = y * w + x;
                    u[p] = 0.25 * (u[p - 1] + u[p + 1] + u[p - w] + u[p + w]);
                }
            }
        }
        history.push(residual(&u));
        if history[history.len() - 1] <= 1e-6 * r0 {
            let k = history.len() - 1;
            return (k, (history[k] / history[k - 200]).powf(1.0 / 200.0));
        }
    }
}

fn multigrid_cycles(n: usize) -> usize {
    let w = n + 2;
    let mask = Mask::from_fn(w, w, |x, y| x >= 1 && y >= 1 && x <= n && y <= n);
    let mut plane: Vec<f32> = (0..w * w).map(|i| if i < w { 1.0 } else { 0.0 }).collect();
    // Multigrid explicitly: the default storage factors holes this small directly.
    let solver = Solver::with_structure(&mask, Structure::Grid).expect("known pixels exist");
    let report = solver
        .solve(&mut [&mut plane[..]], &FillParams::default(), Start::FullMultigrid, &mut |_| true)
        .expect("converges");
    report.channels[0].cycles
}

#[test]
fn gauss_seidel_needs_quadratic_sweeps_where_multigrid_needs_constant_cycles() {
    // Gauss-Seidel reduces the error by cos²(πh) per sweep (LeVeque, Finite Difference Methods for
    // ODEs and PDEs, SIAM 2007, §4.2; ORACLES.md §1), so it needs O(1/h²) = O(n²) sweeps.
    let mut sweeps = Vec::new();
    for n in [31usize, 63] {
        let (k, rho) = gauss_seidel(n);
        let h = 1.0 / (n + 1) as f64;
        let expected = (std::f64::consts::PI * h).cos().powi(2);
        assert!((rho - expected).abs() <= 2e-4, "n={n}: measured {rho:.6} per sweep, cos²(πh) = {expected:.6}");
        sweeps.push(k);
    }
    let (m31, m63, m255) = (multigrid_cycles(31), multigrid_cycles(63), multigrid_cycles(255));
    eprintln!("Gauss-Seidel {sweeps:?} sweeps, multigrid {m31}/{m63}/{m255} cycles");
    assert!(sweeps[1] > 3 * sweeps[0], "Gauss-Seidel sweeps {sweeps:?}");
    assert!(m63 <= m31 + 1 && m255 <= m31 + 1, "multigrid cycles grow: {m31}, {m63}, {m255}");
    assert!(m255 <= 10, "multigrid needs {m255} cycles");
}
