//! Small holes whose discrete harmonic values are known exactly as fractions.
//!
//! The image is an (n+2)×(n+2) frame of known pixels around an n×n hole, with the top row 1 and
//! the rest 0. The fill is checked against (a) the fractions of ORACLES.md §3 (a computed check
//! in exact rational arithmetic) and (b) the same fractions re-derived here by exact Gaussian
//! elimination over the rationals, independent of the solver under test.

// Source: ORACLES.md §3 (computed check, exact rational arithmetic), re-derived below.

use reweave::mask::Mask;

use crate::common::{STRUCTURES, fill_plane_with};

/// A fraction in lowest terms.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
struct Q(i128, i128);

fn gcd(a: i128, b: i128) -> i128 {
    if b == 0 { a.abs() } else { gcd(b, a % b) }
}

impl Q {
    fn new(n: i128, d: i128) -> Self {
        let g = gcd(n, d).max(1) * d.signum();
        Self(n / g, d / g)
    }
    fn sub(self, o: Self) -> Self {
        Self::new(self.0 * o.1 - o.0 * self.1, self.1 * o.1)
    }
    fn mul(self, o: Self) -> Self {
        Self::new(self.0 * o.0, self.1 * o.1)
    }
    fn div(self, o: Self) -> Self {
        Self::new(self.0 * o.1, self.1 * o.0)
    }
    fn f64(self) -> f64 {
        self.0 as f64 / self.1 as f64
    }
}

/// Solves the 5-point Dirichlet problem on the n×n hole exactly; returns the values row-major
/// (row 0 next to the top edge).
fn exact_solution(n: usize) -> Vec<Q> {
    let m = n * n;
    let zero = Q(0, 1);
    let mut a = vec![vec![zero; m + 1]; m];
    for y in 0..n {
        for x in 0..n {
            let i = y * n + x;
            a[i][i] = Q(4, 1);
            for (dx, dy) in [(-1i64, 0i64), (1, 0), (0, -1), (0, 1)] {
                let (nx, ny) = (x as i64 + dx, y as i64 + dy);
                if nx >= 0 && ny >= 0 && (nx as usize) < n && (ny as usize) < n {
                    a[i][ny as usize * n + nx as usize] = Q(-1, 1);
                } else if ny < 0 {
                    a[i][m] = a[i][m].sub(Q(-1, 1)); // top neighbour is known and equals 1
                }
            }
        }
    }
    for col in 0..m {
        let pivot = (col..m).find(|&r| a[r][col] != zero).expect("non-singular");
        a.swap(col, pivot);
        for r in 0..m {
            if r != col && a[r][col] != zero {
                let f = a[r][col].div(a[col][col]);
                let pivot_row = a[col].clone();
                for (dst, src) in a[r][col..=m].iter_mut().zip(&pivot_row[col..=m]) {
                    *dst = dst.sub(f.mul(*src));
                }
            }
        }
    }
    (0..m).map(|i| a[i][m].div(a[i][i])).collect()
}

/// The fill of the `n × n` hole, with each storage of the solver.
fn filled(n: usize) -> Vec<Vec<f32>> {
    let w = n + 2;
    let mask = Mask::from_fn(w, w, |x, y| x >= 1 && y >= 1 && x <= n && y <= n);
    STRUCTURES
        .iter()
        .map(|&s| {
            let (plane, _) = fill_plane_with(s, w, w, &mask, |_, y| if y == 0.0 { 1.0 } else { 0.0 }, 1e-12);
            (1..=n).flat_map(|y| (1..=n).map(move |x| (x, y))).map(|(x, y)| plane[y * w + x]).collect()
        })
        .collect()
}

fn assert_close(got: &[f32], want: &[Q]) {
    for (g, w) in got.iter().zip(want) {
        // f32 output: 1e-7 is a few units in the last place for values below 1.
        assert!((f64::from(*g) - w.f64()).abs() < 2e-7, "got {g}, want {}/{}", w.0, w.1);
    }
}

#[test]
fn one_pixel_hole_is_the_mean_of_its_neighbours() {
    // Mean-value property of the 5-point stencil (textbook): (1 + 0 + 0 + 0) / 4.
    let want = [Q(1, 4)];
    assert_eq!(exact_solution(1), want);
    for got in filled(1) {
        assert_close(&got, &want);
    }
}

#[test]
fn two_by_two_hole_matches_the_exact_fractions() {
    // ORACLES.md §3 (computed check, exact rationals): top row 3/8, bottom row 1/8.
    let want = [Q(3, 8), Q(3, 8), Q(1, 8), Q(1, 8)];
    assert_eq!(exact_solution(2), want);
    for got in filled(2) {
        assert_close(&got, &want);
    }
}

#[test]
fn three_by_three_hole_matches_the_exact_fractions() {
    // ORACLES.md §3 (computed check, exact rationals): top corners 3/7, top middle 59/112,
    // side middle 3/16, centre 1/4, bottom corners 1/14, bottom middle 11/112.
    let want = [Q(3, 7), Q(59, 112), Q(3, 7), Q(3, 16), Q(1, 4), Q(3, 16), Q(1, 14), Q(11, 112), Q(1, 14)];
    assert_eq!(exact_solution(3), want);
    for got in filled(3) {
        assert_close(&got, &want);
    }
}
