//! The fill on arbitrary small images and masks, with both storages of the solver. Invariants:
//! no panic; on success every sample outside the mask is unchanged, every filled value is
//! finite and within its hole's rim values (maximum principle); on failure nothing changed.
#![no_main]

use libfuzzer_sys::fuzz_target;
use reweave::fill::{FillParams, Solver, Start, Structure};
use reweave::mask::Mask;

fuzz_target!(|data: &[u8]| {
    if data.len() < 3 {
        return;
    }
    let (w, h) = (usize::from(data[0] % 40) + 1, usize::from(data[1] % 40) + 1);
    let body = &data[2..];
    let byte = |i: usize| body.get(i % body.len().max(1)).copied().unwrap_or(0);
    let mask = Mask::from_fn(w, h, |x, y| byte(y * w + x) & 1 == 1);
    // Values: mostly ordinary, some extreme or non-finite.
    let plane: Vec<f32> = (0..w * h)
        .map(|i| match byte(i + 7) >> 4 {
            0 => f32::NAN,
            1 => 1e30,
            2 => -1e-40,
            k => f32::from(byte(i + 3)) * f32::from(k),
        })
        .collect();
    for structure in [Structure::Compact, Structure::Grid, Structure::Auto] {
        let mut p = plane.clone();
        let Ok(solver) = Solver::with_structure(&mask, structure) else {
            assert_eq!(mask.count(), w * h, "only an all-masked image has no solver");
            continue;
        };
        let params = FillParams { max_cycles: 60, ..FillParams::default() };
        match solver.solve(&mut [&mut p[..]], &params, Start::FullMultigrid, &mut |_| true) {
            Ok(_) => {
                let (labels, sizes) = mask.label_holes();
                let mut lo = vec![f32::INFINITY; sizes.len()];
                let mut hi = vec![f32::NEG_INFINITY; sizes.len()];
                for i in 0..w * h {
                    if !mask.bits()[i] {
                        assert_eq!(p[i].to_bits(), plane[i].to_bits(), "known sample changed");
                        let (x, y) = (i % w, i / w);
                        for (nx, ny) in [(x.wrapping_sub(1), y), (x + 1, y), (x, y.wrapping_sub(1)), (x, y + 1)] {
                            if nx < w && ny < h && labels[ny * w + nx] != 0 {
                                let l = labels[ny * w + nx] as usize - 1;
                                lo[l] = lo[l].min(plane[i]);
                                hi[l] = hi[l].max(plane[i]);
                            }
                        }
                    }
                }
                for i in 0..w * h {
                    if mask.bits()[i] {
                        let l = labels[i] as usize - 1;
                        assert!(p[i].is_finite(), "filled value not finite");
                        let slack = 1e-4 * (hi[l] - lo[l]).abs().max(f32::MIN_POSITIVE);
                        assert!(p[i] >= lo[l] - slack && p[i] <= hi[l] + slack, "maximum principle");
                    }
                }
            }
            Err(_) => assert!(p.iter().zip(&plane).all(|(a, b)| a.to_bits() == b.to_bits()), "changed on error"),
        }
    }
});
