//! Least squares with an intercept from moments.

use crate::{FitError, Moments};
use nalgebra::{DMatrix, DVector, SymmetricEigen};

/// Condition number of the covariates' correlation matrix above which they count as collinear.
pub const MAX_CONDITION: f64 = 1e12;

/// An ordinary least squares fit in original units.
#[derive(Clone, Debug, PartialEq)]
pub struct Ols {
    /// Covariate names, in order of `coef`.
    pub names: Vec<String>,
    /// Intercept.
    pub intercept: f64,
    /// Slopes.
    pub coef: Vec<f64>,
    /// Residual sum of squares.
    pub rss: f64,
    /// Coefficient of determination.
    pub r2: f64,
    /// Rows.
    pub n: f64,
    /// Condition number of the covariates' correlation matrix.
    pub condition: f64,
    /// Classical (homoskedastic) standard errors: intercept first, then slopes.
    pub std_error: Vec<f64>,
}

impl Ols {
    /// The coefficients on `(1, v)`, the centred and scaled design of the pass: what a residual
    /// pass inlines to compute `e = y - (c_0 + Σ c_i v_i)`. `x` as given to [`ols`].
    pub fn design_coefficients(&self, m: &Moments, x: &[usize]) -> Vec<f64> {
        let mut c = vec![
            self.intercept
                + x.iter()
                    .zip(&self.coef)
                    .map(|(&i, b)| b * m.centre[i])
                    .sum::<f64>(),
        ];
        c.extend(x.iter().zip(&self.coef).map(|(&i, b)| b * m.scale[i]));
        c
    }

    /// HC1 heteroskedasticity-robust standard errors (White 1980 with the n / (n - p) factor of
    /// MacKinnon & White 1985), intercept first. `meat` is `Σ e² w wᵀ` over rows for
    /// `w = (1, v_x...)`, as a residual pass returns it.
    pub fn hc1(&self, m: &Moments, x: &[usize], meat: &DMatrix<f64>) -> Result<Vec<f64>, FitError> {
        let cov = self.hc1_covariance(m, x, meat)?;
        Ok((0..cov.nrows()).map(|i| cov[(i, i)].sqrt()).collect())
    }

    /// The HC1 covariance matrix of `(intercept, slopes...)` in original units; see [`Ols::hc1`].
    pub fn hc1_covariance(
        &self,
        m: &Moments,
        x: &[usize],
        meat: &DMatrix<f64>,
    ) -> Result<DMatrix<f64>, FitError> {
        let p = x.len() + 1;
        if meat.nrows() != p || meat.ncols() != p {
            return Err(FitError::Shape(format!(
                "residual moments are {}x{}, expected {p}x{p}",
                meat.nrows(),
                meat.ncols()
            )));
        }
        // Bread: (WᵀW)⁻¹ with W = (1, v) from the Gram moments.
        let mut wtw = DMatrix::zeros(p, p);
        wtw[(0, 0)] = m.n;
        for (a, &i) in x.iter().enumerate() {
            wtw[(0, a + 1)] = m.sum[i];
            wtw[(a + 1, 0)] = m.sum[i];
            for (b, &j) in x.iter().enumerate() {
                wtw[(a + 1, b + 1)] = m.gram[(i, j)];
            }
        }
        let bread = wtw.cholesky().ok_or_else(|| FitError::Collinear {
            columns: x.iter().map(|&i| m.names[i].clone()).collect(),
            condition: f64::INFINITY,
        })?;
        let inv = bread.inverse();
        let cov_c = &inv * meat * &inv * (m.n / (m.n - p as f64));
        // Original coefficients: beta_j = c_j / s_j, beta_0 = c_0 - Σ c_j m_j / s_j.
        let mut a = DMatrix::zeros(p, p);
        a[(0, 0)] = 1.0;
        for (k, &i) in x.iter().enumerate() {
            a[(0, k + 1)] = -m.centre[i] / m.scale[i];
            a[(k + 1, k + 1)] = 1.0 / m.scale[i];
        }
        Ok(&a * cov_c * a.transpose())
    }
}

/// `Σ e² w wᵀ` for `w = (1, v...)` from rows `[v_1, ..., v_k, y]` and design coefficients `c`:
/// what the residual pass returns, computed in memory (tests, export-and-fit baseline).
pub fn residual_moments_from_rows(rows: &[Vec<f64>], c: &[f64]) -> DMatrix<f64> {
    let p = c.len();
    let mut out = DMatrix::zeros(p, p);
    let mut w = vec![1.0; p];
    for r in rows {
        w[1..p].copy_from_slice(&r[..p - 1]);
        let e = r[p - 1] - w.iter().zip(c).map(|(a, b)| a * b).sum::<f64>();
        for i in 0..p {
            for j in 0..p {
                out[(i, j)] += e * e * w[i] * w[j];
            }
        }
    }
    out
}

/// Regresses column `y` on columns `x` (with an intercept) using the moments of a Gram pass.
pub fn ols(m: &Moments, y: usize, x: &[usize]) -> Result<Ols, FitError> {
    let p = x.len() + 1;
    if m.n <= p as f64 {
        return Err(FitError::TooFewRows { n: m.n, p });
    }
    let cov = m.covariance();
    let k = x.len();
    let cxx = DMatrix::from_fn(k, k, |i, j| cov[(x[i], x[j])]);
    let cxy = DVector::from_fn(k, |i, _| cov[(x[i], y)]);
    // Standardise to a correlation matrix; a zero variance is a constant column. The variance
    // comes from E[v²] − E[v]², so a column constant in these rows (an indicator that is 0 in
    // every row of an arm, centred on the whole table's share) leaves a rounding residue of
    // about 1e-16 · E[v²], not an exact zero: judge it relative to E[v²].
    let sd: Vec<f64> = (0..k).map(|i| cxx[(i, i)].max(0.0).sqrt()).collect();
    for (i, s) in sd.iter().enumerate() {
        let mean_square = m.gram[(x[i], x[i])] / m.n;
        if *s == 0.0 || s * s <= 1e-10 * mean_square || *s <= 1e-12 {
            return Err(FitError::Constant {
                column: m.names[x[i]].clone(),
            });
        }
    }
    let r = DMatrix::from_fn(k, k, |i, j| cxx[(i, j)] / (sd[i] * sd[j]));
    let (condition, b) = if k == 0 {
        (1.0, DVector::zeros(0))
    } else {
        let eig = SymmetricEigen::new(r.clone());
        let (mut lo, mut hi) = (0, 0);
        for i in 0..k {
            if eig.eigenvalues[i] < eig.eigenvalues[lo] {
                lo = i;
            }
            if eig.eigenvalues[i] > eig.eigenvalues[hi] {
                hi = i;
            }
        }
        let condition = eig.eigenvalues[hi] / eig.eigenvalues[lo].max(f64::MIN_POSITIVE);
        if !(condition.is_finite() && condition < MAX_CONDITION) || eig.eigenvalues[lo] <= 0.0 {
            let v = eig.eigenvectors.column(lo);
            let mut involved: Vec<(f64, usize)> = (0..k)
                .map(|i| (v[i].abs(), i))
                .filter(|(a, _)| *a > 0.1)
                .collect();
            involved.sort_by(|a, b| b.0.total_cmp(&a.0));
            return Err(FitError::Collinear {
                columns: involved
                    .iter()
                    .map(|&(_, i)| m.names[x[i]].clone())
                    .collect(),
                condition: if condition.is_finite() {
                    condition
                } else {
                    f64::INFINITY
                },
            });
        }
        // Solve R c = cxy / sd, then b = c / sd.
        let rhs = DVector::from_fn(k, |i, _| cxy[i] / sd[i]);
        let chol = r.clone().cholesky().ok_or_else(|| FitError::Collinear {
            columns: x.iter().map(|&i| m.names[i].clone()).collect(),
            condition,
        })?;
        let c = chol.solve(&rhs);
        (condition, DVector::from_fn(k, |i, _| c[i] / sd[i]))
    };
    // Back to original units: v = (x - centre) / scale.
    let coef: Vec<f64> = (0..k).map(|i| b[i] * m.scale[y] / m.scale[x[i]]).collect();
    let intercept = m.mean(y) - (0..k).map(|i| coef[i] * m.mean(x[i])).sum::<f64>();
    let syy = cov[(y, y)];
    let explained = if k == 0 {
        0.0
    } else {
        (cxy.transpose() * &b)[0]
    };
    let rss_v = (m.n * (syy - explained)).max(0.0);
    let rss = rss_v * m.scale[y] * m.scale[y];
    let r2 = if syy > 0.0 { explained / syy } else { 0.0 };
    // Classical errors: sigma² (X'X)^-1 with X centred; the intercept's from the means.
    let sigma2 = rss / (m.n - p as f64);
    let mut std_error = Vec::with_capacity(p);
    let inv = if k == 0 {
        DMatrix::zeros(0, 0)
    } else {
        // (n * Cxx_original)^-1 with Cxx_original[i][j] = cxx[i][j] * scale_i * scale_j
        let co = DMatrix::from_fn(k, k, |i, j| {
            m.n * cxx[(i, j)] * m.scale[x[i]] * m.scale[x[j]]
        });
        co.cholesky()
            .map(|c| c.inverse())
            .unwrap_or_else(|| DMatrix::from_element(k, k, f64::NAN))
    };
    let means = DVector::from_fn(k, |i, _| m.mean(x[i]));
    let var_int = sigma2 / m.n
        + if k == 0 {
            0.0
        } else {
            (means.transpose() * &inv * &means)[0] * sigma2
        };
    std_error.push(var_int.sqrt());
    for i in 0..k {
        std_error.push((sigma2 * inv[(i, i)]).sqrt());
    }
    Ok(Ols {
        names: x.iter().map(|&i| m.names[i].clone()).collect(),
        intercept,
        coef,
        rss,
        r2,
        n: m.n,
        condition,
        std_error,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::tests::lcg;

    #[test]
    fn recovers_an_exact_linear_model() {
        // y = 3 + 2 x0 - 0.5 x1 exactly: residuals zero, coefficients exact to rounding.
        let mut s = 1u64;
        let rows: Vec<Vec<f64>> = (0..200)
            .map(|_| {
                let (a, b) = (1000.0 + lcg(&mut s) * 10.0, lcg(&mut s) * 4.0);
                vec![a, b, 3.0 + 2.0 * a - 0.5 * b]
            })
            .collect();
        let names = vec!["x0".to_string(), "x1".into(), "y".into()];
        let m = Moments::from_rows(names, vec![1000.0, 0.0, 2000.0], vec![3.0, 1.2, 6.0], &rows)
            .unwrap();
        let f = ols(&m, 2, &[0, 1]).unwrap();
        assert!(
            (f.coef[0] - 2.0).abs() < 1e-10 && (f.coef[1] + 0.5).abs() < 1e-10,
            "{f:?}"
        );
        assert!((f.intercept - 3.0).abs() < 1e-7, "{f:?}");
        let tss = m.n * m.covariance()[(2, 2)] * 36.0;
        assert!(f.rss < 1e-12 * tss && (f.r2 - 1.0).abs() < 1e-12, "{f:?}");
    }

    #[test]
    fn names_collinear_and_constant_columns() {
        let mut s = 7u64;
        let rows: Vec<Vec<f64>> = (0..100)
            .map(|_| {
                let (a, b) = (lcg(&mut s), lcg(&mut s));
                vec![a, b, a + 2.0 * b, 5.0, a + lcg(&mut s)]
            })
            .collect();
        let names: Vec<String> = ["a", "b", "a_plus_2b", "five", "y"]
            .iter()
            .map(|s| s.to_string())
            .collect();
        let m = Moments::from_rows(names, vec![0.0; 5], vec![1.0; 5], &rows).unwrap();
        match ols(&m, 4, &[0, 1, 2]) {
            Err(FitError::Collinear { columns, .. }) => {
                assert_eq!(columns.len(), 3, "{columns:?}");
                assert_eq!(columns[0], "a_plus_2b");
            }
            other => panic!("{other:?}"),
        }
        assert_eq!(
            ols(&m, 4, &[0, 3]),
            Err(FitError::Constant {
                column: "five".into()
            })
        );
        assert!(ols(&m, 4, &[0, 1]).is_ok());
        let few =
            Moments::from_rows(m.names.clone(), vec![0.0; 5], vec![1.0; 5], &rows[..3]).unwrap();
        assert!(matches!(
            ols(&few, 4, &[0, 1, 2]),
            Err(FitError::TooFewRows { .. })
        ));
    }
}
