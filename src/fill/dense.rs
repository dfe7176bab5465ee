//! Dense Cholesky factorisation for the coarsest multigrid level.
//!
//! The coarsest level holds at most a few hundred unknowns, so an O(n³) factorisation made once
//! per mask and an O(n²) solve per cycle cost less than the smoothing of the fine level.

/// Lower-triangular Cholesky factor `L` of a symmetric positive definite matrix, `A = L·Lᵀ`,
/// its rows stored one after another (row `i` holds `L_i0 ..= L_ii` from `i·(i + 1)/2`).
#[derive(Clone, Debug)]
pub(crate) struct Cholesky {
    n: usize,
    l: Vec<f64>,
}

/// Where `L_ij` (`j ≤ i`) is stored.
#[inline]
fn at(i: usize, j: usize) -> usize {
    i * (i + 1) / 2 + j
}

impl Cholesky {
    /// Factors the row-major symmetric matrix `a` (`n × n`). Returns `None` if it is not
    /// positive definite (a pivot is not positive).
    pub(crate) fn factor(n: usize, mut a: Vec<f64>) -> Option<Self> {
        debug_assert_eq!(a.len(), n * n);
        for j in 0..n {
            let mut d = a[j * n + j];
            for k in 0..j {
                d -= a[j * n + k] * a[j * n + k];
            }
            if d <= 0.0 || !d.is_finite() {
                return None;
            }
            let d = d.sqrt();
            a[j * n + j] = d;
            for i in j + 1..n {
                let mut s = a[i * n + j];
                for k in 0..j {
                    s -= a[i * n + k] * a[j * n + k];
                }
                a[i * n + j] = s / d;
            }
        }
        let l = (0..n).flat_map(|i| a[i * n..=i * n + i].iter().copied()).collect();
        Some(Self { n, l })
    }

    /// Solves `A x = b` in place (`x` holds `b` on entry).
    pub(crate) fn solve_in_place(&self, x: &mut [f64]) {
        let (n, l) = (self.n, &self.l);
        debug_assert_eq!(x.len(), n);
        for i in 0..n {
            let mut s = x[i];
            let row = &l[at(i, 0)..at(i, i)];
            for (lk, xk) in row.iter().zip(&x[..i]) {
                s -= lk * xk;
            }
            x[i] = s / l[at(i, i)];
        }
        for i in (0..n).rev() {
            let mut s = x[i];
            for k in i + 1..n {
                s -= l[at(k, i)] * x[k];
            }
            x[i] = s / l[at(i, i)];
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn solves_a_small_spd_system() {
        // A = [[4,1,0],[1,3,1],[0,1,2]], x = [1,2,3] → b = A x = [6, 10, 8].
        let a = vec![4.0, 1.0, 0.0, 1.0, 3.0, 1.0, 0.0, 1.0, 2.0];
        let ch = Cholesky::factor(3, a).expect("positive definite");
        let mut x = vec![6.0, 10.0, 8.0];
        ch.solve_in_place(&mut x);
        for (got, want) in x.iter().zip([1.0, 2.0, 3.0]) {
            assert!((got - want).abs() < 1e-12, "{got} vs {want}");
        }
    }

    #[test]
    fn refuses_an_indefinite_matrix() {
        assert!(Cholesky::factor(2, vec![1.0, 2.0, 2.0, 1.0]).is_none());
    }
}
