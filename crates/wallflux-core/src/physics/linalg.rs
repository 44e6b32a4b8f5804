//! Small dense linear algebra on fixed-size arrays: the least-squares
//! solver of every fit in the core (the polynomial fit of
//! [`crate::physics::fit`], the Gauss–Newton steps of
//! [`crate::physics::layered`]).
//!
//! No heap: a problem of at most `N` unknowns lives in an `N × N` array,
//! with `N` a const generic.
//!
//! # Method
//!
//! `A x ≈ b` is solved by the row-updating QR least-squares method (Golub &
//! Van Loan, *Matrix Computations*, Givens QR and least squares): each row
//! `(a | b)` is folded into an upper-triangular `R` and a right-hand side
//! `z` by Givens rotations that zero the row's entries left to right, so no
//! row is stored and the normal equations `AᵀA` are never formed (the
//! condition number is that of `A`, not its square). Then `x = R⁻¹ z` by
//! back substitution and, for weighted rows, the covariance of `x` is
//! `(AᵀA)⁻¹ = R⁻¹ R⁻ᵀ`.
//!
//! The rank test compares each diagonal `R_jj` with the norm of column `j`
//! of `A` (`‖a_j‖² = Σ_i R_ij²`, `Q` being orthogonal): the ratio is the
//! sine of the angle between column `j` and the span of the columns before
//! it, so the test does not depend on the units of the unknowns.

/// The triangular factor `R | z` of a least-squares problem in `n ≤ N`
/// unknowns, built one row at a time.
#[derive(Debug, Clone, Copy)]
pub struct GivensQr<const N: usize> {
    r: [[f64; N]; N],
    z: [f64; N],
    n: usize,
}

// Triangular index arithmetic reads better with indices than with iterators.
#[allow(clippy::needless_range_loop)]
impl<const N: usize> GivensQr<N> {
    /// An empty factor for `n` unknowns (at most `N`; more are cut to `N`).
    pub fn new(n: usize) -> Self {
        GivensQr {
            r: [[0.0; N]; N],
            z: [0.0; N],
            n: n.min(N),
        }
    }

    /// Folds one row `(row | rhs)` into `R | z`; entries of `row` past the
    /// `n` unknowns are ignored.
    pub fn fold(&mut self, mut row: [f64; N], mut rhs: f64) {
        let n = self.n;
        for j in 0..n {
            let a = row[j];
            if a == 0.0 {
                continue;
            }
            let rjj = self.r[j][j];
            let hyp = rjj.hypot(a);
            let (c, s) = (rjj / hyp, a / hyp);
            self.r[j][j] = hyp;
            for k in (j + 1)..n {
                let (rk, ak) = (self.r[j][k], row[k]);
                self.r[j][k] = c * rk + s * ak;
                row[k] = c * ak - s * rk;
            }
            let zj = self.z[j];
            self.z[j] = c * zj + s * rhs;
            rhs = c * rhs - s * zj;
        }
    }

    /// Whether every column is independent of those before it: `R_jj`
    /// exceeds `rel_tol` times the norm of column `j` (false for a NaN, and
    /// for a column that is all zero).
    pub fn columns_independent(&self, rel_tol: f64) -> bool {
        (0..self.n).all(|j| {
            let norm = self
                .r
                .iter()
                .take(j + 1)
                .fold(0.0_f64, |acc, row| acc.hypot(row[j]));
            self.r[j][j] > rel_tol * norm
        })
    }

    /// The least-squares solution `x = R⁻¹ z` by back substitution (zero
    /// past the `n` unknowns). Check [`Self::columns_independent`] first.
    pub fn solve(&self) -> [f64; N] {
        let n = self.n;
        let mut x = [0.0_f64; N];
        for i in (0..n).rev() {
            let mut s = self.z[i];
            for k in (i + 1)..n {
                s -= self.r[i][k] * x[k];
            }
            x[i] = s / self.r[i][i];
        }
        x
    }

    /// `R⁻¹ R⁻ᵀ = (AᵀA)⁻¹`: the covariance of the solution when each row
    /// was weighted by `1/σ` (zero past the `n` unknowns).
    pub fn covariance(&self) -> [[f64; N]; N] {
        let n = self.n;
        let inv = self.r_inverse();
        let mut cov = [[0.0_f64; N]; N];
        for i in 0..n {
            for j in 0..n {
                cov[i][j] = (i.max(j)..n).map(|k| inv[i][k] * inv[j][k]).sum();
            }
        }
        cov
    }

    /// `R⁻¹`, column by column: column `j` solves `R c = e_j` by back
    /// substitution from row `j` up.
    fn r_inverse(&self) -> [[f64; N]; N] {
        let n = self.n;
        let mut inv = [[0.0_f64; N]; N];
        for j in 0..n {
            for i in (0..=j).rev() {
                let unit = if i == j { 1.0 } else { 0.0 };
                let s: f64 = ((i + 1)..=j).map(|k| self.r[i][k] * inv[k][j]).sum();
                inv[i][j] = (unit - s) / self.r[i][i];
            }
        }
        inv
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn close(got: f64, want: f64) -> bool {
        (got - want).abs() <= 1e-12 * want.abs().max(1.0)
    }

    /// `A` = rows `e1, e2, e3, (1, 1, 1)`, `b = (1, 2, 3, 0)`. By hand:
    /// `AᵀA = I + 11ᵀ`, whose inverse is `I − 11ᵀ/4` (Sherman–Morrison,
    /// `(I + uuᵀ)⁻¹ = I − uuᵀ/(1 + uᵀu)`), and `Aᵀb = (1, 2, 3)`, so
    /// `x = (1, 2, 3) − (6/4)(1, 1, 1) = (−1/2, 1/2, 3/2)` and the
    /// covariance has 3/4 on the diagonal and −1/4 off it.
    const ROWS: [([f64; 3], f64); 4] = [
        ([1.0, 0.0, 0.0], 1.0),
        ([0.0, 1.0, 0.0], 2.0),
        ([0.0, 0.0, 1.0], 3.0),
        ([1.0, 1.0, 1.0], 0.0),
    ];

    fn check_hand_solution(qr: &GivensQr<3>) {
        assert!(qr.columns_independent(1e-9));
        let x = qr.solve();
        for (got, want) in x.iter().zip([-0.5, 0.5, 1.5]) {
            assert!(close(*got, want), "x {x:?}");
        }
        let cov = qr.covariance();
        for (i, row) in cov.iter().enumerate() {
            for (j, &c) in row.iter().enumerate() {
                let want = if i == j { 0.75 } else { -0.25 };
                assert!(close(c, want), "cov[{i}][{j}] = {c}");
            }
        }
    }

    #[test]
    fn three_unknowns_match_the_hand_solution() {
        let mut qr = GivensQr::<3>::new(3);
        for (row, rhs) in ROWS {
            qr.fold(row, rhs);
        }
        check_hand_solution(&qr);
    }

    #[test]
    fn row_order_does_not_matter() {
        // The least-squares solution is a property of the set of rows.
        let mut qr = GivensQr::<3>::new(3);
        for (row, rhs) in ROWS.iter().rev() {
            qr.fold(*row, *rhs);
        }
        check_hand_solution(&qr);
    }

    #[test]
    fn fewer_unknowns_than_the_capacity() {
        // Straight line through (0, 1), (1, 3), (2, 4) in a 3-capacity
        // factor: slope = S_xy / S_xx = 3 / 2, intercept = ȳ − slope x̄ =
        // 8/3 − 3/2 = 7/6 (simple linear regression by hand); the third
        // entry of each row is ignored.
        let mut qr = GivensQr::<3>::new(2);
        for (x, y) in [(0.0, 1.0), (1.0, 3.0), (2.0, 4.0)] {
            qr.fold([1.0, x, 99.0], y);
        }
        assert!(qr.columns_independent(1e-9));
        let sol = qr.solve();
        assert!(close(sol[0], 7.0 / 6.0) && close(sol[1], 1.5) && sol[2] == 0.0);
        // Var(slope) = 1 / S_xx = 1/2 for unit weights.
        assert!(close(qr.covariance()[1][1], 0.5));
    }

    #[test]
    fn dependent_columns_are_found() {
        // Column 3 = column 1 + column 2 in every row: rank 2.
        let mut qr = GivensQr::<3>::new(3);
        for (a, b) in [(1.0, 2.0), (3.0, -1.0), (0.5, 4.0), (2.0, 2.0)] {
            qr.fold([a, b, a + b], a - b);
        }
        assert!(!qr.columns_independent(1e-9));
        // An untouched column (never a non-zero entry) is dependent too.
        let mut qr = GivensQr::<2>::new(2);
        qr.fold([1.0, 0.0], 1.0);
        assert!(!qr.columns_independent(1e-9));
    }
}
