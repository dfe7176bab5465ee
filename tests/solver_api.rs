//! The solver's contract for the programs built on it: deterministic results, warm starts after a
//! mask edit, cancelling, and an honest error when it cannot converge.

use reweave::fill::{FillError, FillMethod, FillParams, Solver, Start, Structure};
use reweave::mask::Mask;
use reweave::synth::{MaskFamily, smooth_plane};

#[test]
fn results_do_not_depend_on_the_thread_count() {
    // Dropout's holes are solved directly, in tasks, or (forced) as one grid; blob is several
    // grids and factored holes, solved side by side.
    let n = 300;
    for (family, structure) in [
        (MaskFamily::Dropout, Structure::Auto),
        (MaskFamily::Dropout, Structure::Grid),
        (MaskFamily::Blob, Structure::Auto),
    ] {
        let mask = family.mask(n, 2);
        let solver = Solver::with_structure(&mask, structure).unwrap();
        let mut outputs = Vec::new();
        for threads in [1, 2, 3] {
            let mut plane = smooth_plane(n, n, 4);
            let params = FillParams { threads, ..FillParams::default() };
            solver.solve(&mut [&mut plane[..]], &params, Start::FullMultigrid, &mut |_| true).unwrap();
            outputs.push(plane);
        }
        for o in &outputs[1..] {
            assert!(
                o.iter().zip(&outputs[0]).all(|(a, b)| a.to_bits() == b.to_bits()),
                "{family} ({structure:?}): bitwise identical"
            );
        }
    }
}

#[test]
fn warm_start_after_a_small_edit_needs_fewer_cycles() {
    let n = 256;
    let mask = MaskFamily::Blob.mask(n, 8);
    let mut plane = smooth_plane(n, n, 1);
    let params = FillParams { tolerance: 1e-8, ..FillParams::default() };
    Solver::new(&mask).unwrap().solve(&mut [&mut plane[..]], &params, Start::FullMultigrid, &mut |_| true).unwrap();
    // A stroke adds a few pixels next to the big hole.
    let mut edited = mask.clone();
    for x in 40..60 {
        edited.set(x, 128, true);
    }
    let solver = Solver::new(&edited).unwrap();
    let mut cold = plane.clone();
    let cold_report = solver.solve(&mut [&mut cold[..]], &params, Start::FullMultigrid, &mut |_| true).unwrap();
    let mut warm = plane.clone();
    let warm_report = solver.solve(&mut [&mut warm[..]], &params, Start::Warm, &mut |_| true).unwrap();
    assert!(
        warm_report.channels[0].cycles < cold_report.channels[0].cycles,
        "warm {} vs cold {}",
        warm_report.channels[0].cycles,
        cold_report.channels[0].cycles
    );
    let diff = cold.iter().zip(&warm).map(|(a, b)| (a - b).abs()).fold(0f32, f32::max);
    assert!(diff < 1e-4, "warm and cold starts agree: {diff}");
}

#[test]
fn cancelling_leaves_the_planes_unchanged() {
    let n = 128;
    let mask = MaskFamily::Frame.mask(n, 1);
    // No-data in the hole, a not-a-number with a payload among them: it comes back bit for bit.
    let no_data = [f32::from_bits(0x7fc0_1234), -9999.0, f32::NAN];
    let original: Vec<f32> = smooth_plane(n, n, 2)
        .iter()
        .zip(mask.bits())
        .enumerate()
        .map(|(i, (&v, &m))| if m { no_data[i % 3] } else { v })
        .collect();
    // The biharmonic fill starts from a harmonic fill written into the planes: a cancel puts
    // the old values back.
    for method in [FillMethod::Harmonic, FillMethod::Biharmonic] {
        let mut plane = original.clone();
        let solver = Solver::for_method(&mask, method).unwrap();
        let mut calls = 0;
        let params = FillParams { method, ..FillParams::default() };
        let result = solver.solve(&mut [&mut plane[..]], &params, Start::FullMultigrid, &mut |p| {
            calls += 1;
            assert!(p.residual > 0.0 && p.cycle <= p.max_cycles);
            false
        });
        assert_eq!(result.unwrap_err(), FillError::Cancelled, "{method:?}");
        assert_eq!(calls, 1, "{method:?}");
        assert!(plane.iter().zip(&original).all(|(a, b)| a.to_bits() == b.to_bits()), "{method:?}: planes changed");
    }
}

#[test]
fn too_few_cycles_is_an_error_with_the_residual() {
    let n = 128;
    let mask = MaskFamily::Frame.mask(n, 1);
    let mut plane = smooth_plane(n, n, 2);
    let params = FillParams { tolerance: 1e-12, max_cycles: 2, ..FillParams::default() };
    match Solver::new(&mask).unwrap().solve(&mut [&mut plane[..]], &params, Start::FullMultigrid, &mut |_| true) {
        Err(FillError::NoConvergence { residual, cycles }) => {
            assert_eq!(cycles, 2);
            assert!(residual > 1e-12 && residual < 1e-2, "residual {residual}");
        }
        other => panic!("expected NoConvergence, got {other:?}"),
    }
}

#[test]
fn a_mask_over_every_pixel_is_refused() {
    assert_eq!(Solver::new(&Mask::from_fn(4, 3, |_, _| true)).unwrap_err(), FillError::NoKnownPixels);
}

#[test]
fn five_channels_are_filled_in_two_passes() {
    let n = 64;
    let mask = MaskFamily::Blob.mask(n, 3);
    let mut planes: Vec<Vec<f32>> = (0..5).map(|c| smooth_plane(n, n, c)).collect();
    let expected: Vec<Vec<f32>> = planes
        .iter()
        .map(|p| {
            let mut q = p.clone();
            reweave::fill::fill(&mut [&mut q[..]], &mask, &FillParams::default()).unwrap();
            q
        })
        .collect();
    let mut views: Vec<&mut [f32]> = planes.iter_mut().map(Vec::as_mut_slice).collect();
    let report = reweave::fill::fill(&mut views, &mask, &FillParams::default()).unwrap();
    assert_eq!(report.channels.len(), 5);
    for (got, want) in planes.iter().zip(&expected) {
        let diff = got.iter().zip(want).map(|(a, b)| (a - b).abs()).fold(0f32, f32::max);
        assert!(diff < 1e-5, "channel groups agree with single-channel fills: {diff}");
    }
}

#[test]
fn grid_and_compact_storage_agree_on_every_channel() {
    // The same equations stored two ways (DEVELOPERS.md, "Solver design"): the fills agree to the
    // solver tolerance on a three-channel image, and the automatic choice puts the big hole on a
    // grid.
    let n = 240;
    let mask = MaskFamily::Blob.mask(n, 4);
    let auto = Solver::new(&mask).unwrap();
    assert!(auto.level_sizes().iter().any(|(grid, _)| *grid), "a large round hole gets a grid");
    let original: Vec<Vec<f32>> = (0..3).map(|c| smooth_plane(n, n, 10 + c)).collect();
    let mut results = Vec::new();
    for structure in [Structure::Compact, Structure::Grid] {
        let mut planes = original.clone();
        let mut views: Vec<&mut [f32]> = planes.iter_mut().map(Vec::as_mut_slice).collect();
        let params = FillParams { tolerance: 1e-9, ..FillParams::default() };
        let solver = Solver::with_structure(&mask, structure).unwrap();
        let report = solver.solve(&mut views, &params, Start::FullMultigrid, &mut |_| true).unwrap();
        assert!(report.channels.iter().all(|c| c.relative_residual <= 1e-9), "{structure:?}: {report:?}");
        results.push(planes);
    }
    for c in 0..3 {
        let range =
            original[c].iter().fold(f32::MIN, |m, &v| m.max(v)) - original[c].iter().fold(f32::MAX, |m, &v| m.min(v));
        for (p, &m) in mask.bits().iter().enumerate() {
            let (a, b) = (results[0][c][p], results[1][c][p]);
            if m {
                assert!((a - b).abs() <= 1e-5 * range, "channel {c} pixel {p}: {a} vs {b}");
            } else {
                assert_eq!(a.to_bits(), original[c][p].to_bits(), "known pixels are never written");
                assert_eq!(b.to_bits(), original[c][p].to_bits(), "known pixels are never written");
            }
        }
    }
}

#[test]
fn refilling_near_an_edit_matches_a_full_refill_and_leaves_other_holes_alone() {
    // Two separate holes; a stroke extends the left one. Holes never touch, so re-filling only
    // the holes near the stroke must give what a whole re-fill gives (common practice for local
    // updates of independent subproblems), and the right hole must keep its values exactly.
    let (w, h) = (160, 120);
    let mut mask = Mask::from_fn(w, h, |x, y| {
        let (a, b) = (x as f64 - 40.0, y as f64 - 60.0);
        let (c, d) = (x as f64 - 120.0, y as f64 - 60.0);
        a * a + b * b < 400.0 || c * c + d * d < 300.0
    });
    let original = smooth_plane(w, h, 6);
    let params = FillParams { tolerance: 1e-9, ..FillParams::default() };
    let mut before = original.clone();
    reweave::fill::fill(&mut [&mut before[..]], &mask, &params).unwrap();
    for x in 55..75 {
        mask.set(x, 61, true);
    }
    let local = reweave::fill::fill_near(&[before.clone()], &mask, (55, 61, 75, 62), &params, &mut |_| true)
        .unwrap()
        .expect("the stroke touches a hole");
    assert!(local.bbox().2 <= 80, "only the left hole is cut out: {:?}", local.bbox());
    let mut near = vec![before.clone()];
    local.write_back(&mut near, w);
    let mut full = before.clone();
    for x in 55..75 {
        full[61 * w + x] = original[61 * w + x];
    }
    reweave::fill::fill(&mut [&mut full[..]], &mask, &params).unwrap();
    for (p, &m) in mask.bits().iter().enumerate() {
        if p % w >= 90 {
            assert_eq!(near[0][p].to_bits(), before[p].to_bits(), "right hole unchanged at {p}");
        } else if m {
            assert!((near[0][p] - full[p]).abs() < 1e-4, "pixel {p}: {} vs {}", near[0][p], full[p]);
        }
    }
    assert_eq!(local.report.unknowns, local.mask.count());
}
