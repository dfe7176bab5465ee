//! A harmonic fill never leaves the range of the known values around each hole (discrete maximum
//! principle: each unknown is the mean of its in-image neighbours; textbook, e.g. LeVeque, Finite
//! Difference Methods for ODEs and PDEs, SIAM 2007, §3.4; ORACLES.md §3).

// Source: discrete maximum principle, LeVeque, Finite Difference Methods for ODEs and PDEs,
// SIAM 2007, §3.4 (textbook); the f32 rounding slack is half an ulp of the values (common practice).

use reweave::fill::{FillParams, fill};
use reweave::synth::{MaskFamily, Rng};

#[test]
fn filled_values_stay_within_each_holes_rim() {
    let n = 128;
    for (k, family) in MaskFamily::ALL.into_iter().enumerate() {
        let mask = family.mask(n, 40 + k as u64);
        let mut rng = Rng::new(k as u64 + 3);
        let original: Vec<f32> = (0..n * n).map(|_| (1000.0 * rng.uniform()) as f32).collect();
        let mut plane = original.clone();
        let params = FillParams { tolerance: 1e-10, ..FillParams::default() };
        fill(&mut [&mut plane[..]], &mask, &params).expect("fill converges");
        let (labels, sizes) = mask.label_holes();
        let mut lo = vec![f32::MAX; sizes.len() + 1];
        let mut hi = vec![f32::MIN; sizes.len() + 1];
        for p in 0..n * n {
            if labels[p] != 0 {
                continue;
            }
            let (x, y) = (p % n, p / n);
            let nbrs = [
                (x > 0).then(|| p - 1),
                (x + 1 < n).then(|| p + 1),
                (y > 0).then(|| p - n),
                (y + 1 < n).then(|| p + n),
            ];
            for q in nbrs.into_iter().flatten() {
                let l = labels[q] as usize;
                lo[l] = lo[l].min(original[p]);
                hi[l] = hi[l].max(original[p]);
            }
        }
        for p in 0..n * n {
            let l = labels[p] as usize;
            if l == 0 {
                assert_eq!(plane[p].to_bits(), original[p].to_bits(), "{family}: known pixel changed");
                continue;
            }
            // Rounding slack: the f64 solution is stored as f32 (half an ulp of 1000 is 3e-5).
            let slack = 1e-4;
            assert!(
                plane[p] >= lo[l] - slack && plane[p] <= hi[l] + slack,
                "{family}: hole {l} value {} outside its rim range [{}, {}]",
                plane[p],
                lo[l],
                hi[l]
            );
        }
    }
}
