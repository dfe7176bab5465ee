//! Degenerate images and masks: tiny and thin images, constant data, masks that touch every
//! border or leave one known pixel, extreme and non-finite values, and a write that fails half
//! way. Each either fills correctly or fails with a clear error and leaves everything unchanged.
//! Every case runs on both storages of the solver.

// Source: the linear fill of a 1-D hole, the constant fill with one Dirichlet pixel and the mean
// of four around an isolated pixel are textbook facts of the discrete Laplace equation (LeVeque,
// Finite Difference Methods for ODEs and PDEs, SIAM 2007, ch. 2–3; mean-value property); the
// range checks are the maximum principle (same book); "no file left after a failed write" and the
// error texts are the project's own contract (common practice for atomic writes).

use reweave::fill::{FillError, FillParams, Solver, Start, Structure};
use reweave::mask::Mask;
use reweave::raster;

use crate::common::STRUCTURES;

fn solve(structure: Structure, plane: &mut [f32], mask: &Mask) -> Result<reweave::fill::FillReport, FillError> {
    let params = FillParams { tolerance: 1e-10, ..FillParams::default() };
    Solver::with_structure(mask, structure)?.solve(&mut [plane], &params, Start::FullMultigrid, &mut |_| true)
}

#[test]
fn a_one_pixel_image_has_nothing_to_fill_from() {
    for s in STRUCTURES {
        let mut plane = [7.0f32];
        let mask = Mask::from_fn(1, 1, |_, _| true);
        assert_eq!(solve(s, &mut plane, &mask).unwrap_err(), FillError::NoKnownPixels);
        assert_eq!(plane, [7.0]);
        // And with nothing masked, nothing changes.
        let report = solve(s, &mut plane, &Mask::new(1, 1)).unwrap();
        assert_eq!((report.unknowns, plane), (0, [7.0]));
    }
}

#[test]
fn thin_images_fill_linearly_between_known_ends() {
    // On a 1×N or N×1 image the 5-point equation with the natural boundary is the 1-D Laplace
    // equation u'' = 0, whose discrete solution between two known ends is linear (textbook).
    let n = 300;
    let known = |i: usize| i < 3 || i >= n - 4;
    for (w, h) in [(n, 1), (1, n)] {
        let mask = Mask::from_fn(w, h, |x, y| !known(x + y));
        for s in STRUCTURES {
            let mut plane: Vec<f32> = (0..n).map(|i| if known(i) { 2.0 * i as f32 + 5.0 } else { -1.0 }).collect();
            solve(s, &mut plane, &mask).unwrap();
            for (i, v) in plane.iter().enumerate() {
                assert!((v - (2.0 * i as f32 + 5.0)).abs() < 1e-3, "{w}×{h} {s:?}: pixel {i} = {v}");
            }
        }
    }
}

#[test]
fn one_known_pixel_fills_everything_with_its_value() {
    // With a single Dirichlet pixel and the natural boundary everywhere else, the only harmonic
    // function is the constant (uniqueness of the mixed problem; textbook).
    let (w, h) = (70, 50);
    let mask = Mask::from_fn(w, h, |x, y| (x, y) != (13, 41));
    for s in STRUCTURES {
        let mut plane = vec![0.0f32; w * h];
        plane[41 * w + 13] = 3.25;
        solve(s, &mut plane, &mask).unwrap();
        assert!(
            plane.iter().all(|v| (v - 3.25).abs() < 1e-5),
            "{s:?}: {:?}",
            plane.iter().fold(0f32, |m, v| m.max((v - 3.25).abs()))
        );
    }
}

#[test]
fn a_mask_touching_every_border_around_a_known_block() {
    // Known: a constant block in the middle; everything else, up to every image edge, masked.
    let (w, h) = (90, 64);
    let mask = Mask::from_fn(w, h, |x, y| !((40..50).contains(&x) && (30..36).contains(&y)));
    for s in STRUCTURES {
        let mut plane = vec![f32::NAN; w * h];
        for y in 30..36 {
            for x in 40..50 {
                plane[y * w + x] = -17.5;
            }
        }
        solve(s, &mut plane, &mask).unwrap();
        assert!(plane.iter().all(|&v| v == -17.5 || (v + 17.5).abs() < 1e-5), "{s:?}");
    }
}

#[test]
fn constant_data_stays_constant_on_every_mask_family() {
    for family in reweave::synth::MaskFamily::ALL {
        let mask = family.mask(160, 11);
        for s in STRUCTURES {
            let mut plane = vec![1234.5f32; 160 * 160];
            solve(s, &mut plane, &mask).unwrap();
            assert!(plane.iter().all(|v| (v - 1234.5).abs() <= 1e-3), "{family} {s:?}");
        }
    }
}

#[test]
fn isolated_pixels_take_the_mean_of_their_four_neighbours() {
    // Every masked pixel is alone (a checkerboard of one-pixel holes inside a known border): the
    // fill is the mean of the four known neighbours, the mean-value property of the 5-point
    // stencil (textbook).
    let (w, h) = (41, 33);
    let mask = Mask::from_fn(w, h, |x, y| x > 0 && y > 0 && x + 1 < w && y + 1 < h && (x + y) % 2 == 0);
    let value = |x: usize, y: usize| ((x * 7 + y * 13) % 17) as f32;
    for s in STRUCTURES {
        let mut plane: Vec<f32> = (0..w * h).map(|i| if mask.bits()[i] { 0.0 } else { value(i % w, i / w) }).collect();
        solve(s, &mut plane, &mask).unwrap();
        for y in 1..h - 1 {
            for x in 1..w - 1 {
                if mask.get(x, y) {
                    let mean = (value(x - 1, y) + value(x + 1, y) + value(x, y - 1) + value(x, y + 1)) / 4.0;
                    assert!((plane[y * w + x] - mean).abs() < 1e-5, "{s:?} at ({x},{y})");
                }
            }
        }
    }
}

#[test]
fn huge_and_subnormal_values_stay_finite_and_within_the_rim() {
    let (w, h) = (80, 60);
    let mask = Mask::from_fn(w, h, |x, y| (10..70).contains(&x) && (10..50).contains(&y));
    for (low, high) in [(-1e30f32, 1e30f32), (1e-40, 3e-40), (0.0, f32::MAX / 8.0)] {
        for s in STRUCTURES {
            let mut plane: Vec<f32> = (0..w * h).map(|i| if (i % w) < w / 2 { low } else { high }).collect();
            solve(s, &mut plane, &mask).unwrap_or_else(|e| panic!("{s:?} [{low}, {high}]: {e}"));
            for (i, &v) in plane.iter().enumerate() {
                assert!(v.is_finite() && v >= low && v <= high, "{s:?} [{low}, {high}]: pixel {i} = {v}");
            }
        }
    }
}

#[test]
fn a_non_finite_pixel_next_to_a_hole_is_named_and_nothing_changes() {
    let (w, h) = (120, 90);
    let mask = Mask::from_fn(w, h, |x, y| (20..100).contains(&x) && (20..70).contains(&y));
    for s in STRUCTURES {
        for bad in [f32::NAN, f32::INFINITY] {
            let mut plane: Vec<f32> = (0..w * h).map(|i| (i % 97) as f32).collect();
            plane[19 * w + 50] = bad; // just above the hole
            let before = plane.clone();
            let err = solve(s, &mut plane, &mask).unwrap_err();
            assert_eq!(err, FillError::NonFiniteRim { x: 50, y: 19 }, "{s:?}");
            assert!(err.to_string().contains("(50, 19)"));
            assert!(plane.iter().zip(&before).all(|(a, b)| a.to_bits() == b.to_bits()), "{s:?}: planes unchanged");
        }
        // A non-finite pixel that does not touch a hole is simply left alone.
        let mut plane: Vec<f32> = (0..w * h).map(|i| (i % 97) as f32).collect();
        plane[5 * w + 5] = f32::NAN;
        solve(s, &mut plane, &mask).unwrap();
        assert!(plane[5 * w + 5].is_nan());
        assert!(mask.bits().iter().zip(&plane).all(|(&m, v)| !m || v.is_finite()));
    }
}

#[test]
fn a_write_that_fails_half_way_leaves_no_file() {
    // A full disk or a lost connection mid-write (simulated by a writer that fails after some
    // bytes): the target is not created and no temporary file is left beside it.
    let dir = tempfile::tempdir().unwrap();
    let target = dir.path().join("result.tif");
    let err = raster::write_atomic(&target, |w| {
        use std::io::Write;
        w.write_all(&[0u8; 100_000]).map_err(|e| e.to_string())?;
        Err("No space left on device (os error 28)".to_owned())
    })
    .unwrap_err();
    assert!(err.to_string().contains("result.tif") && err.to_string().contains("No space left"), "{err}");
    assert_eq!(std::fs::read_dir(dir.path()).unwrap().count(), 0, "nothing left in the folder");

    // Over an existing file: the old content survives.
    std::fs::write(&target, b"earlier result").unwrap();
    raster::write_atomic(&target, |_| Err("disk full".to_owned())).unwrap_err();
    assert_eq!(std::fs::read(&target).unwrap(), b"earlier result");
    assert_eq!(std::fs::read_dir(dir.path()).unwrap().count(), 1);
}

/// The other methods on the same degenerate inputs: they fill (finite values, known pixels
/// unchanged, constants stay constant) or fail with the same clear errors.
#[test]
fn biharmonic_and_guided_fill_degenerate_inputs_or_say_why() {
    use reweave::fill::{FillMethod, fill};
    for method in [FillMethod::Biharmonic, FillMethod::Guided] {
        let params = FillParams { method, tolerance: 1e-10, ..FillParams::default() };
        // Nothing to fill from.
        let mut one = [7.0f32];
        assert_eq!(
            fill(&mut [&mut one[..]], &Mask::from_fn(1, 1, |_, _| true), &params).unwrap_err(),
            FillError::NoKnownPixels
        );
        assert_eq!(one, [7.0]);
        // Thin images, one known pixel, a mask around a known block, isolated pixels: constant
        // data stays constant (both equations reproduce constants; common practice).
        let cases: Vec<(usize, usize, Mask)> = vec![
            (1, 40, Mask::from_fn(1, 40, |_, y| (5..35).contains(&y))),
            (40, 1, Mask::from_fn(40, 1, |x, _| x != 0 && x != 39)),
            (9, 7, Mask::from_fn(9, 7, |x, y| (x, y) != (4, 3))),
            (12, 12, Mask::from_fn(12, 12, |x, y| !(4..8).contains(&x) || !(4..8).contains(&y))),
            (20, 20, Mask::from_fn(20, 20, |x, y| (x + 3 * y) % 7 == 0)),
        ];
        for (w, h, mask) in cases {
            let mut plane: Vec<f32> = (0..w * h).map(|i| if mask.bits()[i] { f32::NAN } else { 42.5 }).collect();
            let report = fill(&mut [&mut plane[..]], &mask, &params)
                .unwrap_or_else(|e| panic!("{} on {w}×{h}: {e}", method.name()));
            assert_eq!(report.unknowns, mask.count());
            for (i, v) in plane.iter().enumerate() {
                assert!((v - 42.5).abs() < 1e-4, "{} on {w}×{h}: pixel {i} = {v}", method.name());
            }
        }
        // A NaN next to a hole is named, and nothing changes.
        let (w, h) = (10, 10);
        let mask = Mask::from_fn(w, h, |x, y| (4..6).contains(&x) && (4..6).contains(&y));
        let mut plane: Vec<f32> = vec![1.0; w * h];
        plane[4 * w + 3] = f32::NAN;
        let before = plane.clone();
        let err = fill(&mut [&mut plane[..]], &mask, &params).unwrap_err();
        assert_eq!(err, FillError::NonFiniteRim { x: 3, y: 4 }, "{}", method.name());
        assert!(plane.iter().zip(&before).all(|(a, b)| a.to_bits() == b.to_bits()));
    }
}
