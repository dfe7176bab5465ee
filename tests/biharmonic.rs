//! The biharmonic fill: exact reproduction of discrete-biharmonic data, agreement with a sparse
//! direct solve of the same system, its advantage over the harmonic fill on smooth terrain, and
//! an iteration count that barely grows with the hole.

// Sources: the 13-point stencil 20·u₀ − 8·(axis ±1) + 2·(diagonals) + 1·(axis ±2) is L5∘L5
// (Abramowitz & Stegun 1964, §25.3, from memory); which functions it annihilates is re-checked
// below in exact integer arithmetic. faer 0.24 `SparseColMat::sp_cholesky` is the independent
// direct solver. That a biharmonic fill beats a harmonic one on smooth terrain with wide holes is
// common practice (it reproduces slopes and curvature across the rim; the harmonic fill flattens
// inside the hole).

use faer::Mat;
use faer::Side;
use faer::prelude::Solve;
use faer::sparse::{SparseColMat, Triplet};
use reweave::fill::{FillMethod, FillParams, FillReport, Solver, Start, Structure};
use reweave::mask::Mask;
use reweave::synth::{self, MaskFamily};

fn fill_with(method: FillMethod, mask: &Mask, plane: &mut [f32], tolerance: f64) -> FillReport {
    fill_stored(method, Structure::Auto, mask, plane, tolerance)
}

fn fill_stored(method: FillMethod, structure: Structure, mask: &Mask, plane: &mut [f32], tolerance: f64) -> FillReport {
    let solver = Solver::for_method_with(mask, method, structure).expect("mask leaves known pixels");
    let p = FillParams { method, tolerance, ..FillParams::default() };
    solver.solve(&mut [plane], &p, Start::FullMultigrid, &mut |_| true).expect("fill converges")
}

/// The 13-point stencil applied at an integer point, in exact integer arithmetic.
fn stencil13(f: &dyn Fn(i128, i128) -> i128, x: i128, y: i128) -> i128 {
    20 * f(x, y) - 8 * (f(x - 1, y) + f(x + 1, y) + f(x, y - 1) + f(x, y + 1))
        + 2 * (f(x - 1, y - 1) + f(x + 1, y - 1) + f(x - 1, y + 1) + f(x + 1, y + 1))
        + (f(x - 2, y) + f(x + 2, y) + f(x, y - 2) + f(x, y + 2))
}

type Exact = (&'static str, fn(i128, i128) -> i128, fn(f64, f64) -> f64);

/// Discrete-biharmonic functions (ORACLES.md §4): cubics, x⁴ − y⁴, x⁴ − 3x²y², and
/// discrete-harmonic ones.
const EXACT: [Exact; 6] = [
    (
        "x³ − 2x²y + xy² + 3y³ − x + 2",
        |x, y| x * x * x - 2 * x * x * y + x * y * y + 3 * y * y * y - x + 2,
        |x, y| x * x * x - 2.0 * x * x * y + x * y * y + 3.0 * y * y * y - x + 2.0,
    ),
    ("x²y", |x, y| x * x * y, |x, y| x * x * y),
    ("x⁴ − y⁴", |x, y| x.pow(4) - y.pow(4), |x, y| x.powi(4) - y.powi(4)),
    ("x⁴ − 3x²y²", |x, y| x.pow(4) - 3 * x * x * y * y, |x, y| x.powi(4) - 3.0 * x * x * y * y),
    ("x³ − 3xy²", |x, y| x * x * x - 3 * x * y * y, |x, y| x * x * x - 3.0 * x * y * y),
    ("x² + y² (not harmonic)", |x, y| x * x + y * y, |x, y| x * x + y * y),
];

#[test]
fn the_stencil_annihilates_the_test_functions() {
    for (name, exact, _) in EXACT {
        for (x, y) in [(0, 0), (3, -7), (-11, 5), (40, 40)] {
            assert_eq!(stencil13(&exact, x, y), 0, "{name} at ({x}, {y})");
        }
    }
    // And it is not the zero operator: L5∘L5 (x² + y²)² ≡ 64 (ORACLES.md §4).
    assert_eq!(stencil13(&|x, y| (x * x + y * y).pow(2), 5, -3), 64);
}

fn shapes(n: usize) -> Vec<(&'static str, Mask)> {
    let c = (n / 2) as f64;
    vec![
        ("square", Mask::from_fn(n, n, |x, y| (8..n - 8).contains(&x) && (10..n - 12).contains(&y))),
        ("disk", Mask::from_fn(n, n, |x, y| (x as f64 - c).hypot(y as f64 - c) < c - 6.0)),
        (
            "L",
            Mask::from_fn(n, n, |x, y| {
                (6..20).contains(&x) && (6..n - 6).contains(&y)
                    || (6..n - 6).contains(&x) && (n - 20..n - 6).contains(&y)
            }),
        ),
        (
            "scratch",
            Mask::from_fn(n, n, |x, y| (x + 2 * y) % 29 < 2 && (4..n - 4).contains(&x) && (4..n - 4).contains(&y)),
        ),
        (
            "dots",
            Mask::from_fn(n, n, |x, y| x % 5 == 2 && y % 7 == 3 && (3..n - 3).contains(&x) && (3..n - 3).contains(&y)),
        ),
    ]
}

#[test]
fn discrete_biharmonic_data_is_reproduced_in_every_shape() {
    let n = 48;
    for (shape, mask) in shapes(n) {
        for (name, _, f) in EXACT.iter().take(5) {
            // Centre the coordinates so the values stay well inside f32's precision.
            let value = |x: usize, y: usize| f(x as f64 - 24.0, y as f64 - 24.0) / 100.0;
            let truth: Vec<f64> = (0..n * n).map(|i| value(i % n, i / n)).collect();
            let mut plane: Vec<f32> =
                (0..n * n).map(|i| if mask.bits()[i] { -777.0 } else { truth[i] as f32 }).collect();
            let report = fill_with(FillMethod::Biharmonic, &mask, &mut plane, 1e-10);
            let range = truth.iter().fold(0f64, |m, v| m.max(v.abs()));
            let worst = (0..n * n)
                .filter(|&i| mask.bits()[i])
                .map(|i| (f64::from(plane[i]) - truth[i]).abs())
                .fold(0f64, f64::max);
            // Exact in exact arithmetic; f32 storage of values up to `range` leaves ~1e-7·range.
            assert!(worst <= 2e-6 * range, "{shape}, {name}: error {worst:.3e} of range {range:.1} ({report:?})");
        }
    }
}

/// `B u = b` assembled from its definition — `M` the 5-point Neumann Laplacian of the image with
/// the unknowns' columns, `B = MᵀM`, `b = −Mᵀ·(L·f_known)` — and solved by faer.
fn direct(mask: &Mask, plane: &[f32]) -> Vec<f64> {
    let (w, h) = (mask.width(), mask.height());
    let bits = mask.bits();
    let mut index = vec![usize::MAX; w * h];
    let mut n = 0;
    for p in 0..w * h {
        if bits[p] {
            index[p] = n;
            n += 1;
        }
    }
    // Rows of L over every pixel: (column pixel, coefficient).
    let lrow = |p: usize| {
        let (x, y) = (p % w, p / w);
        let nb: Vec<usize> =
            [(x > 0).then(|| p - 1), (x + 1 < w).then(|| p + 1), (y > 0).then(|| p - w), (y + 1 < h).then(|| p + w)]
                .into_iter()
                .flatten()
                .collect();
        let mut row = vec![(p, nb.len() as f64)];
        row.extend(nb.into_iter().map(|q| (q, -1.0)));
        row
    };
    let mut m_trip = Vec::new();
    let mut known_part = vec![0f64; w * h];
    for (q, known) in known_part.iter_mut().enumerate() {
        for (p, c) in lrow(q) {
            if bits[p] {
                m_trip.push(Triplet::new(q, index[p], c));
            } else {
                *known += c * f64::from(plane[p]);
            }
        }
    }
    let m = SparseColMat::<usize, f64>::try_new_from_triplets(w * h, n, &m_trip).expect("valid matrix");
    let b_mat = m.transpose().to_col_major().expect("transpose") * &m;
    let mut b = Mat::<f64>::zeros(n, 1);
    for t in &m_trip {
        b[(t.col, 0)] -= t.val * known_part[t.row];
    }
    let llt = b_mat.sp_cholesky(Side::Lower).expect("B is symmetric positive definite");
    llt.solve_in_place(&mut b);
    (0..n).map(|i| b[(i, 0)]).collect()
}

#[test]
fn biharmonic_agrees_with_sparse_cholesky_on_every_family() {
    let n = 96;
    for (k, family) in MaskFamily::ALL.into_iter().enumerate() {
        let mask = family.mask(n, 300 + k as u64);
        let truth = synth::smooth_plane(n, n, 7 + k as u64);
        // The holes hold no-data (NaN, infinity, −9999), which the fill must not read.
        let no_data = [f32::NAN, f32::INFINITY, -9999.0];
        let known: Vec<f32> = (truth.iter().zip(mask.bits()).enumerate())
            .map(|(i, (&v, &m))| if m { no_data[i % 3] } else { v * 1000.0 })
            .collect();
        let reference = direct(&mask, &known);
        let range = reference.iter().fold(0f64, |m, v| m.max(v.abs())).max(1.0);
        // Both storages of the hierarchy, index lists and grids, and the automatic choice, which
        // factors the thin components (scratches, dead pixels) and picks a storage for the rest.
        for structure in [Structure::Compact, Structure::Grid, Structure::Auto] {
            if structure == Structure::Auto && matches!(family.name(), "scratches" | "deadpix") {
                let solver = Solver::for_method_with(&mask, FillMethod::Biharmonic, structure).expect("known pixels");
                assert!(solver.storage().contains("direct"), "{}: {}", family.name(), solver.storage());
            }
            let mut plane = known.clone();
            let report = fill_stored(FillMethod::Biharmonic, structure, &mask, &mut plane, 1e-9);
            let filled: Vec<f64> = (0..n * n).filter(|&i| mask.bits()[i]).map(|i| f64::from(plane[i])).collect();
            let worst = filled.iter().zip(&reference).map(|(a, b)| (a - b).abs()).fold(0f64, f64::max);
            assert!(
                worst <= 1e-4 * range,
                "{} ({structure:?}): difference {worst:.3e} of {range:.1} ({report:?})",
                family.name()
            );
        }
    }
}

#[test]
fn isolated_pixels_beside_a_wide_hole_are_factored_and_the_rest_iterated() {
    // A square too large to factor (multigrid) with isolated pixels in some of its rows and
    // elsewhere (factored apart): the rows that lose those pixels to the factorisation must leave
    // the multigrid exactly the square.
    let n = 100;
    let lone = [(90, 20), (93, 20), (90, 40), (85, 60), (90, 90), (2, 95)];
    let mask = Mask::from_fn(n, n, |x, y| ((5..75).contains(&x) && (5..75).contains(&y)) || lone.contains(&(x, y)));
    let solver = Solver::for_method(&mask, FillMethod::Biharmonic).expect("known pixels");
    assert!(solver.storage().contains("grid") && solver.storage().contains("direct"), "{}", solver.storage());
    let truth = synth::smooth_plane(n, n, 21);
    let known: Vec<f32> = truth.iter().zip(mask.bits()).map(|(&v, &m)| if m { 0.0 } else { v * 1000.0 }).collect();
    let reference = direct(&mask, &known);
    let range = reference.iter().fold(0f64, |m, v| m.max(v.abs())).max(1.0);
    let mut plane = known.clone();
    let report = fill_with(FillMethod::Biharmonic, &mask, &mut plane, 1e-9);
    let filled: Vec<f64> = (0..n * n).filter(|&i| mask.bits()[i]).map(|i| f64::from(plane[i])).collect();
    let worst = filled.iter().zip(&reference).map(|(a, b)| (a - b).abs()).fold(0f64, f64::max);
    assert!(worst <= 1e-4 * range, "difference {worst:.3e} of {range:.1} ({report:?})");
}

#[test]
fn biharmonic_beats_harmonic_on_smooth_terrain_with_wide_holes() {
    let n = 192;
    let terrain = synth::smooth_plane(n, n, 41);
    let mut mask = Mask::new(n, n);
    for (cx, cy, r) in [(50.0, 60.0, 18.0), (130.0, 70.0, 24.0), (90.0, 140.0, 20.0)] {
        synth::paint_disk(&mut mask, cx, cy, r);
    }
    let rms = |method| {
        let mut plane: Vec<f32> = terrain.iter().zip(mask.bits()).map(|(&v, &m)| if m { 0.0 } else { v }).collect();
        fill_with(method, &mask, &mut plane, 1e-8);
        let (mut s, mut k) = (0f64, 0f64);
        for i in (0..n * n).filter(|&i| mask.bits()[i]) {
            s += (f64::from(plane[i]) - f64::from(terrain[i])).powi(2);
            k += 1.0;
        }
        (s / k).sqrt()
    };
    let (harmonic, biharmonic) = (rms(FillMethod::Harmonic), rms(FillMethod::Biharmonic));
    assert!(biharmonic < 0.5 * harmonic, "biharmonic RMS error {biharmonic:.4e}, harmonic {harmonic:.4e}");
}

#[test]
fn iterations_barely_grow_with_the_hole() {
    let (mut from_zero, mut from_harmonic) = (Vec::new(), Vec::new());
    for n in [64usize, 128, 256, 512] {
        let mask = Mask::from_fn(n, n, |x, y| (4..n - 4).contains(&x) && (4..n - 4).contains(&y));
        let plane: Vec<f32> = (0..n * n).map(|i| ((i % n) as f32 * 0.37).sin() + (i / n) as f32 * 0.01).collect();
        let solver = Solver::for_method(&mask, FillMethod::Biharmonic).expect("mask leaves known pixels");
        // A warm start from zeros shows the preconditioner's own rate.
        let zeroed = |plane: &[f32]| -> Vec<f32> {
            plane.iter().zip(mask.bits()).map(|(&v, &m)| if m { 0.0 } else { v }).collect()
        };
        let solve = |plane: &mut [f32], start: Start, tolerance: f64| {
            let p = FillParams { method: FillMethod::Biharmonic, tolerance, ..FillParams::default() };
            solver.solve(&mut [plane], &p, start, &mut |_| true).expect("fill converges").channels[0].cycles
        };
        from_zero.push(solve(&mut zeroed(&plane), Start::Warm, 1e-6));
        from_harmonic.push(solve(&mut plane.clone(), Start::FullMultigrid, 1e-6));
        // Both starts reach the same fill (to a tolerance far below the one counted: at 1e-6 the
        // two iterates may differ by about 1e-4 of the range, the operator's conditioning).
        let (mut a, mut b) = (zeroed(&plane), plane.clone());
        solve(&mut a, Start::Warm, 1e-11);
        solve(&mut b, Start::FullMultigrid, 1e-11);
        let range = plane.iter().fold(f32::MIN, |m, &v| m.max(v)) - plane.iter().fold(f32::MAX, |m, &v| m.min(v));
        let worst = a.iter().zip(&b).map(|(a, b)| (a - b).abs()).fold(0f32, f32::max);
        assert!(worst <= 1e-5 * range, "the two starts differ by {worst} at {n}² (range {range})");
    }
    // Conjugate gradients preconditioned by a K-cycle keep the count nearly independent of the
    // size (Notay & Vassilevski 2008, §4), so the work stays linear in the unknowns; a V-cycle
    // preconditioner needed 17, 26, 38 and 53 iterations on 128²–1024² squares, a W-cycle 11
    // to 17.
    assert!(from_zero.iter().all(|&c| c <= 12), "iterations from zero {from_zero:?}");
    assert!(from_zero[3] <= from_zero[0] + 2, "iterations grow with the size: {from_zero:?}");
    // The harmonic fill as the start already meets the rim's values, which the relative
    // residual weighs: fewer iterations at every size.
    for (z, h) in from_zero.iter().zip(&from_harmonic) {
        assert!(h < z, "from zero {from_zero:?}, from the harmonic fill {from_harmonic:?}");
    }
}

#[test]
fn results_do_not_depend_on_the_thread_count() {
    // The sweeps split the rows into a fixed set of bands and the sums are added in a fixed
    // order, so one thread and two give the same bits (common practice for reproducible
    // parallel solvers). At 320² the blob has more points than one band takes in either storage.
    let n = 320;
    let mask = MaskFamily::ALL[2].mask(n, 11);
    let truth = synth::smooth_plane(n, n, 5);
    for structure in [Structure::Compact, Structure::Grid] {
        let solver = Solver::for_method_with(&mask, FillMethod::Biharmonic, structure).expect("known pixels");
        let run = |threads| {
            let mut plane: Vec<f32> = truth.iter().zip(mask.bits()).map(|(&v, &m)| if m { 0.0 } else { v }).collect();
            let p = FillParams { method: FillMethod::Biharmonic, threads, ..FillParams::default() };
            solver.solve(&mut [&mut plane[..]], &p, Start::FullMultigrid, &mut |_| true).expect("converges");
            plane
        };
        let (one, two) = (run(1), run(2));
        assert!(one.iter().zip(&two).all(|(a, b)| a.to_bits() == b.to_bits()), "{structure:?}: results differ");
    }
}

#[test]
fn scattered_unknowns_are_solved_without_coarse_levels() {
    // Random dropout has no 8×8 square of unknowns: one level, relaxed, then conjugate gradients
    // preconditioned by sweeps. The fill still meets the tolerance, matches the full hierarchy's
    // (grid storage asked for explicitly builds the same single level, so the blob stands in for
    // a deep one) and is the same on one thread and two.
    let n = 320;
    let dropout = MaskFamily::ALL.into_iter().find(|f| f.name() == "dropout").expect("dropout family").mask(n, 17);
    let blob = MaskFamily::ALL.into_iter().find(|f| f.name() == "blob").expect("blob family").mask(n, 17);
    let truth = synth::smooth_plane(n, n, 9);
    for (mask, shallow) in [(&dropout, true), (&blob, false)] {
        let solver = Solver::for_method(mask, FillMethod::Biharmonic).expect("known pixels");
        let run = |threads| {
            let mut plane: Vec<f32> = truth.iter().zip(mask.bits()).map(|(&v, &m)| if m { 0.0 } else { v }).collect();
            let p = FillParams { method: FillMethod::Biharmonic, threads, tolerance: 1e-8, ..FillParams::default() };
            let report =
                solver.solve(&mut [&mut plane[..]], &p, Start::FullMultigrid, &mut |_| true).expect("converges");
            (plane, report)
        };
        let ((one, report), (two, _)) = (run(1), run(2));
        assert_eq!(report.levels == 1, shallow, "levels {}", report.levels);
        assert!(report.channels[0].relative_residual <= 1e-8, "{report:?}");
        assert!(one.iter().zip(&two).all(|(a, b)| a.to_bits() == b.to_bits()), "results differ by thread count");
    }
}
