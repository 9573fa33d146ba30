//! Small dense symmetric positive-definite linear algebra (Cholesky with a
//! pivot check), for the normal equations of logistic regression.

/// Cholesky factorisation A = L Lᵀ of a symmetric positive-definite p × p
/// matrix stored row-major.
#[derive(Debug, Clone)]
pub(super) struct Cholesky {
    l: Vec<f64>,
    p: usize,
}

impl Cholesky {
    /// Factorises `a` (row-major p × p; only the lower triangle is read).
    ///
    /// Column j is declared singular — `Err(j)` — when its pivot
    /// d = a_jj − Σ_k l_jk² is not greater than `rel_tol · a_jj`. For a Gram
    /// matrix d / a_jj is 1 − R² of column j regressed on the columns before
    /// it, so the check flags (near-)linear dependence on earlier columns.
    pub(super) fn new(a: &[f64], p: usize, rel_tol: f64) -> Result<Self, usize> {
        debug_assert_eq!(a.len(), p * p);
        let mut l = vec![0.0; p * p];
        for j in 0..p {
            let ajj = a[j * p + j];
            let mut d = ajj;
            for k in 0..j {
                d -= l[j * p + k] * l[j * p + k];
            }
            if !(ajj > 0.0 && d > rel_tol * ajj && d.is_finite()) {
                return Err(j);
            }
            let ljj = d.sqrt();
            l[j * p + j] = ljj;
            for i in (j + 1)..p {
                let mut s = a[i * p + j];
                for k in 0..j {
                    s -= l[i * p + k] * l[j * p + k];
                }
                l[i * p + j] = s / ljj;
            }
        }
        Ok(Cholesky { l, p })
    }

    /// Solves A x = b.
    pub(super) fn solve(&self, b: &[f64]) -> Vec<f64> {
        let p = self.p;
        let l = &self.l;
        // Forward: L y = b.
        let mut y = b.to_vec();
        for i in 0..p {
            let mut s = y[i];
            for k in 0..i {
                s -= l[i * p + k] * y[k];
            }
            y[i] = s / l[i * p + i];
        }
        // Backward: Lᵀ x = y.
        for i in (0..p).rev() {
            let mut s = y[i];
            for k in (i + 1)..p {
                s -= l[k * p + i] * y[k];
            }
            y[i] = s / l[i * p + i];
        }
        y
    }

    /// A⁻¹, row-major.
    pub(super) fn inverse(&self) -> Vec<f64> {
        let p = self.p;
        let mut inv = vec![0.0; p * p];
        let mut e = vec![0.0; p];
        for j in 0..p {
            e.iter_mut().for_each(|v| *v = 0.0);
            e[j] = 1.0;
            let col = self.solve(&e);
            for i in 0..p {
                inv[i * p + j] = col[i];
            }
        }
        // Symmetrise away rounding asymmetry.
        for i in 0..p {
            for j in (i + 1)..p {
                let m = 0.5 * (inv[i * p + j] + inv[j * p + i]);
                inv[i * p + j] = m;
                inv[j * p + i] = m;
            }
        }
        inv
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    #[test]
    fn solves_and_inverts_spd_matrix() {
        // A = M Mᵀ + I for a fixed M, so it is SPD.
        let a = [4.0, 2.0, 0.6, 2.0, 5.0, 1.5, 0.6, 1.5, 3.0];
        let c = Cholesky::new(&a, 3, 1e-12).unwrap();
        let b = [1.0, -2.0, 0.5];
        let x = c.solve(&b);
        for i in 0..3 {
            let ax: f64 = (0..3).map(|k| a[i * 3 + k] * x[k]).sum();
            assert_relative_eq!(ax, b[i], epsilon = 1e-14);
        }
        let inv = c.inverse();
        for i in 0..3 {
            for j in 0..3 {
                let prod: f64 = (0..3).map(|k| a[i * 3 + k] * inv[k * 3 + j]).sum();
                assert_relative_eq!(prod, if i == j { 1.0 } else { 0.0 }, epsilon = 1e-14);
            }
        }
    }

    #[test]
    fn flags_dependent_column() {
        // Column 2 = column 0 + column 1 in the Gram matrix of
        // rows (1,0,1), (0,1,1), (1,1,2), (2,0,2).
        let rows = [
            [1.0, 0.0, 1.0],
            [0.0, 1.0, 1.0],
            [1.0, 1.0, 2.0],
            [2.0, 0.0, 2.0],
        ];
        let mut g = [0.0; 9];
        for r in &rows {
            for i in 0..3 {
                for j in 0..3 {
                    g[i * 3 + j] += r[i] * r[j];
                }
            }
        }
        assert_eq!(Cholesky::new(&g, 3, 1e-10).unwrap_err(), 2);
        // Zero diagonal.
        assert_eq!(
            Cholesky::new(&[1.0, 0.0, 0.0, 0.0], 2, 1e-10).unwrap_err(),
            1
        );
    }
}
