//! First and second moments of a centred, scaled design vector.

use crate::FitError;
use nalgebra::{DMatrix, DVector};

/// The aggregates of a Gram pass for one group. With `v_i = (x_i - centre_i) / scale_i`:
/// `n` rows, `sum[i] = Σ v_i`, `gram[(i, j)] = Σ v_i v_j` (symmetric). Invariant: all vectors
/// have one entry per column, `gram` is square of that size, scales are positive.
#[derive(Clone, Debug, PartialEq)]
pub struct Moments {
    /// Column names, for messages.
    pub names: Vec<String>,
    /// Row count.
    pub n: f64,
    /// Centres used by the pass.
    pub centre: Vec<f64>,
    /// Scales used by the pass.
    pub scale: Vec<f64>,
    /// Sums of the centred, scaled columns.
    pub sum: DVector<f64>,
    /// Sums of products of the centred, scaled columns.
    pub gram: DMatrix<f64>,
}

impl Moments {
    /// Builds moments from the upper triangle `g{i}_{j}` (i ≤ j, row-major), as a pass returns it.
    pub fn from_upper(
        names: Vec<String>,
        n: f64,
        centre: Vec<f64>,
        scale: Vec<f64>,
        sum: Vec<f64>,
        upper: &[f64],
    ) -> Result<Moments, FitError> {
        let k = names.len();
        if centre.len() != k || scale.len() != k || sum.len() != k || upper.len() != k * (k + 1) / 2
        {
            return Err(FitError::Shape(format!(
                "{k} columns but {} centres, {} scales, {} sums, {} products",
                centre.len(),
                scale.len(),
                sum.len(),
                upper.len()
            )));
        }
        if let Some(i) = scale.iter().position(|s| !(s.is_finite() && *s > 0.0)) {
            return Err(FitError::Shape(format!(
                "scale of `{}` is {}",
                names[i], scale[i]
            )));
        }
        let mut gram = DMatrix::zeros(k, k);
        let mut it = upper.iter();
        for i in 0..k {
            for j in i..k {
                let v = *it.next().expect("length checked");
                gram[(i, j)] = v;
                gram[(j, i)] = v;
            }
        }
        Ok(Moments {
            names,
            n,
            centre,
            scale,
            sum: DVector::from_vec(sum),
            gram,
        })
    }

    /// Accumulates moments from rows in memory (for tests and the export-and-fit comparison).
    pub fn from_rows(
        names: Vec<String>,
        centre: Vec<f64>,
        scale: Vec<f64>,
        rows: &[Vec<f64>],
    ) -> Result<Moments, FitError> {
        let k = names.len();
        let mut sum = vec![0.0; k];
        let mut upper = vec![0.0; k * (k + 1) / 2];
        let mut v = vec![0.0; k];
        for r in rows {
            if r.len() != k {
                return Err(FitError::Shape(format!(
                    "a row has {} values for {k} columns",
                    r.len()
                )));
            }
            for i in 0..k {
                v[i] = (r[i] - centre[i]) / scale[i];
                sum[i] += v[i];
            }
            let mut idx = 0;
            for i in 0..k {
                for j in i..k {
                    upper[idx] += v[i] * v[j];
                    idx += 1;
                }
            }
        }
        Moments::from_upper(names, rows.len() as f64, centre, scale, sum, &upper)
    }

    /// These moments minus `other`'s (same columns, centres and scales): the sums of the rows
    /// in `self` but not in `other`, as cross-fitting uses ("all rows but fold k").
    pub fn minus(&self, other: &Moments) -> Result<Moments, FitError> {
        if self.names != other.names || self.centre != other.centre || self.scale != other.scale {
            return Err(FitError::Shape(
                "moments of different designs cannot be subtracted".into(),
            ));
        }
        Ok(Moments {
            names: self.names.clone(),
            n: self.n - other.n,
            centre: self.centre.clone(),
            scale: self.scale.clone(),
            sum: &self.sum - &other.sum,
            gram: &self.gram - &other.gram,
        })
    }

    /// These moments plus `other`'s (same design): the sums over both groups of rows.
    pub fn plus(&self, other: &Moments) -> Result<Moments, FitError> {
        if self.names != other.names || self.centre != other.centre || self.scale != other.scale {
            return Err(FitError::Shape(
                "moments of different designs cannot be added".into(),
            ));
        }
        Ok(Moments {
            names: self.names.clone(),
            n: self.n + other.n,
            centre: self.centre.clone(),
            scale: self.scale.clone(),
            sum: &self.sum + &other.sum,
            gram: &self.gram + &other.gram,
        })
    }

    /// Mean of column `i` in original units.
    pub fn mean(&self, i: usize) -> f64 {
        self.centre[i] + self.scale[i] * self.sum[i] / self.n
    }

    /// Covariance matrix (divisor n) in the centred, scaled units.
    pub fn covariance(&self) -> DMatrix<f64> {
        let m = &self.sum / self.n;
        &self.gram / self.n - &m * m.transpose()
    }
}
