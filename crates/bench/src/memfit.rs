//! Export and fit: every needed column pulled out of DuckDB through Arrow, then the same
//! estimators fitted in memory with nalgebra, the way a notebook would (a design matrix,
//! `XᵀX` by matrix products, logistic regression by iteratively reweighted least squares).
//!
//! The formulas are upshot's (docs/methods.md): the same estimands, folds (`fold_of`),
//! propensity clip and segment combination, so the estimates agree with upshot's to many
//! digits and the comparison is of like with like. Standard errors here are the plain
//! influence-function ones (for `weight` without the propensity-estimation term).

use crate::work::{zone_dummies, Work, CLIP, FOLDS};
use duckdb::arrow::array::{Array, AsArray};
use duckdb::arrow::compute::cast;
use duckdb::arrow::datatypes::{DataType, Float64Type};
use duckdb::Connection;
use nalgebra::{DMatrix, DVector};
use std::collections::HashMap;
use upshot_methods::Method;

/// The exported rows, as columns.
pub struct Rows {
    /// Design columns (numeric covariates, then zone dummies), without the intercept.
    pub design: Vec<Vec<f64>>,
    /// Treatment.
    pub t: Vec<f64>,
    /// Outcome.
    pub y: Vec<f64>,
    /// Fold of each row.
    pub fold: Vec<u32>,
    /// Segment of each row (0 when not segmented).
    pub seg: Vec<u32>,
    /// Stratum of each row (prior orders × zone), for stratify.
    pub stratum: Vec<u32>,
}

/// Pulls the workload's columns out of the `customers` table through Arrow.
pub fn export(conn: &Connection, w: &Work) -> Result<Rows, String> {
    let numeric = w.numeric();
    let sql = format!(
        "SELECT customer_id, region, zone, voucher, spend_30d, {} FROM customers",
        numeric.join(", ")
    );
    let mut stmt = conn.prepare(&sql).map_err(|e| e.to_string())?;
    let batches: Vec<_> = stmt.query_arrow([]).map_err(|e| e.to_string())?.collect();
    let ncol = 5 + numeric.len();
    let mut cols: Vec<Vec<f64>> = vec![Vec::new(); ncol];
    let mut zone: Vec<u32> = Vec::new();
    let names: HashMap<&str, u32> = upshot_demo::ZONES
        .iter()
        .enumerate()
        .map(|(i, z)| (z.0, i as u32))
        .collect();
    for b in &batches {
        for (j, col) in cols.iter_mut().enumerate() {
            if j == 2 {
                let s = cast(b.column(j), &DataType::Utf8).map_err(|e| e.to_string())?;
                let s = s.as_string::<i32>();
                for i in 0..s.len() {
                    zone.push(*names.get(s.value(i)).ok_or("unknown zone")?);
                }
                continue;
            }
            let f = cast(b.column(j), &DataType::Float64).map_err(|e| e.to_string())?;
            col.extend_from_slice(f.as_primitive::<Float64Type>().values());
        }
    }
    let n = zone.len();
    let fold: Vec<u32> = cols[0]
        .iter()
        .map(|&k| {
            if w.folds() > 1 {
                upshot_sql::fold_of(k as i128, FOLDS)
            } else {
                0
            }
        })
        .collect();
    let seg: Vec<u32> = if w.segments {
        cols[1].iter().map(|&r| r as u32).collect()
    } else {
        vec![0; n]
    };
    let mut design: Vec<Vec<f64>> = cols[5..].to_vec();
    for (i, _) in zone_dummies().iter().enumerate() {
        design.push(zone.iter().map(|&z| f64::from(z == i as u32 + 1)).collect());
    }
    let prior = &cols[5 + 1];
    let stratum = prior
        .iter()
        .zip(&zone)
        .map(|(&p, &z)| p as u32 * 16 + z)
        .collect();
    Ok(Rows {
        design,
        t: cols[3].clone(),
        y: cols[4].clone(),
        fold,
        seg,
        stratum,
    })
}

/// An estimate and its standard error.
#[derive(Clone, Copy, Debug)]
pub struct Fit {
    /// Point estimate.
    pub estimate: f64,
    /// Standard error.
    pub std_error: f64,
    /// Rows the estimate describes (its weight when segments are combined).
    pub n: f64,
}

/// Fits the workload's method on the exported rows; returns the overall (`all`) estimate.
pub fn fit(rows: &Rows, w: &Work) -> Result<Fit, String> {
    let mut groups: Vec<Vec<usize>> = Vec::new();
    for (i, &s) in rows.seg.iter().enumerate() {
        let s = s as usize;
        if groups.len() <= s {
            groups.resize(s + 1, Vec::new());
        }
        groups[s].push(i);
    }
    groups.retain(|g| !g.is_empty());
    if w.method == Method::PartialOut {
        return partial_out(rows, &groups);
    }
    let mut parts = Vec::new();
    for g in &groups {
        let f = match w.method {
            Method::Stratify => stratify(rows, g)?,
            Method::Regress => regress(rows, g)?,
            Method::Weight => weight(rows, g)?,
            Method::DoublyRobust => doubly_robust(rows, g)?,
            other => unreachable!("the benchmark has no {} workload", other.as_str()),
        };
        parts.push((f.n, f));
    }
    // τ = Σ wₛ τₛ, variance Σ wₛ² Vₛ + Σ wₛ (τₛ − τ)² / N (docs/methods.md).
    let n: f64 = parts.iter().map(|p| p.0).sum();
    let tau: f64 = parts.iter().map(|(m, f)| m / n * f.estimate).sum();
    let var: f64 = parts
        .iter()
        .map(|(m, f)| {
            let ws = m / n;
            ws * ws * f.std_error.powi(2) + ws * (f.estimate - tau).powi(2) / n
        })
        .sum();
    Ok(Fit {
        estimate: tau,
        std_error: var.sqrt(),
        n,
    })
}

/// The design matrix (intercept first) of rows `idx`.
fn design(rows: &Rows, idx: &[usize]) -> DMatrix<f64> {
    let k = rows.design.len();
    DMatrix::from_fn(idx.len(), k + 1, |r, c| {
        if c == 0 {
            1.0
        } else {
            rows.design[c - 1][idx[r]]
        }
    })
}

fn pick(v: &[f64], idx: &[usize]) -> DVector<f64> {
    DVector::from_iterator(idx.len(), idx.iter().map(|&i| v[i]))
}

fn solve(a: DMatrix<f64>, b: &DVector<f64>) -> Result<DVector<f64>, String> {
    a.cholesky()
        .map(|c| c.solve(b))
        .ok_or_else(|| "singular normal equations".to_string())
}

fn inverse(a: DMatrix<f64>) -> Result<DMatrix<f64>, String> {
    a.cholesky()
        .map(|c| c.inverse())
        .ok_or_else(|| "singular normal equations".to_string())
}

fn ols(x: &DMatrix<f64>, y: &DVector<f64>) -> Result<DVector<f64>, String> {
    solve(x.tr_mul(x), &x.tr_mul(y))
}

fn sigmoid(z: f64) -> f64 {
    if z >= 0.0 {
        1.0 / (1.0 + (-z).exp())
    } else {
        let e = z.exp();
        e / (1.0 + e)
    }
}

/// Logistic regression by iteratively reweighted least squares (Newton).
fn logit(x: &DMatrix<f64>, t: &DVector<f64>) -> Result<DVector<f64>, String> {
    let mut b = DVector::zeros(x.ncols());
    for _ in 0..50 {
        let p = (x * &b).map(sigmoid);
        let w = p.map(|q| q * (1.0 - q));
        let mut xw = x.clone();
        for (r, &wr) in w.iter().enumerate() {
            xw.row_mut(r).scale_mut(wr);
        }
        let info = xw.tr_mul(x);
        let score = x.tr_mul(&(t - &p));
        let step = solve(info, &score)?;
        b += &step;
        if step.amax() < 1e-10 * (1.0 + b.amax()) {
            return Ok(b);
        }
    }
    Err("logistic regression did not converge".into())
}

fn stratify(rows: &Rows, g: &[usize]) -> Result<Fit, String> {
    // (n, Σy, Σy²) per stratum and arm.
    let mut cells: HashMap<u32, [[f64; 3]; 2]> = HashMap::new();
    for &i in g {
        let c = cells.entry(rows.stratum[i]).or_default();
        let a = &mut c[usize::from(rows.t[i] > 0.5)];
        a[0] += 1.0;
        a[1] += rows.y[i];
        a[2] += rows.y[i] * rows.y[i];
    }
    let var = |a: &[f64; 3]| (a[2] - a[1] * a[1] / a[0]) / (a[0] - 1.0);
    // Strata lacking an arm are excluded.
    let kept: Vec<&[[f64; 3]; 2]> = cells
        .values()
        .filter(|c| c[0][0] > 0.0 && c[1][0] > 0.0)
        .collect();
    // Pooled within-stratum variance per arm (kept strata), for cells holding one row.
    let mut pooled = [0.0; 2];
    for (arm, p) in pooled.iter_mut().enumerate() {
        let (mut ss, mut df) = (0.0, 0.0);
        for c in &kept {
            if c[arm][0] >= 2.0 {
                ss += var(&c[arm]) * (c[arm][0] - 1.0);
                df += c[arm][0] - 1.0;
            }
        }
        *p = ss / df;
    }
    let n: f64 = kept.iter().map(|c| c[0][0] + c[1][0]).sum();
    let tau_s = |c: &[[f64; 3]; 2]| c[1][1] / c[1][0] - c[0][1] / c[0][0];
    let tau: f64 = kept
        .iter()
        .map(|c| (c[0][0] + c[1][0]) / n * tau_s(c))
        .sum();
    let v: f64 = kept
        .iter()
        .map(|c| {
            let ws = (c[0][0] + c[1][0]) / n;
            let v1 = if c[1][0] >= 2.0 {
                var(&c[1])
            } else {
                pooled[1]
            };
            let v0 = if c[0][0] >= 2.0 {
                var(&c[0])
            } else {
                pooled[0]
            };
            ws * ws * (v1 / c[1][0] + v0 / c[0][0]) + ws * (tau_s(c) - tau).powi(2) / n
        })
        .sum();
    Ok(Fit {
        estimate: tau,
        std_error: v.sqrt(),
        n,
    })
}

fn arms(rows: &Rows, g: &[usize]) -> (Vec<usize>, Vec<usize>) {
    g.iter().partition(|&&i| rows.t[i] > 0.5)
}

/// HC1 covariance of an OLS fit.
fn hc1(x: &DMatrix<f64>, y: &DVector<f64>, b: &DVector<f64>) -> Result<DMatrix<f64>, String> {
    let e = y - x * b;
    let mut xe = x.clone();
    for (r, &er) in e.iter().enumerate() {
        xe.row_mut(r).scale_mut(er);
    }
    let meat = xe.tr_mul(&xe);
    let bread = inverse(x.tr_mul(x))?;
    let (n, k) = (x.nrows() as f64, x.ncols() as f64);
    Ok(&bread * meat * &bread * (n / (n - k)))
}

fn regress(rows: &Rows, g: &[usize]) -> Result<Fit, String> {
    let x = design(rows, g);
    let (i1, i0) = arms(rows, g);
    let (x1, x0) = (design(rows, &i1), design(rows, &i0));
    let (y1, y0) = (pick(&rows.y, &i1), pick(&rows.y, &i0));
    let (b1, b0) = (ols(&x1, &y1)?, ols(&x0, &y0)?);
    let n = x.nrows() as f64;
    let xbar = x.row_mean().transpose();
    let d = &b1 - &b0;
    let tau = d.dot(&xbar);
    let v = hc1(&x1, &y1, &b1)? + hc1(&x0, &y0, &b0)?;
    let centred = DMatrix::from_fn(x.nrows(), x.ncols(), |r, c| x[(r, c)] - xbar[c]);
    let sx = centred.tr_mul(&centred) / n;
    let var = (xbar.transpose() * v * &xbar)[0] + (d.transpose() * sx * &d)[0] / n;
    Ok(Fit {
        estimate: tau,
        std_error: var.sqrt(),
        n,
    })
}

fn clip(e: f64) -> f64 {
    e.clamp(CLIP, 1.0 - CLIP)
}

fn weight(rows: &Rows, g: &[usize]) -> Result<Fit, String> {
    let x = design(rows, g);
    let t = pick(&rows.t, g);
    let y = pick(&rows.y, g);
    let gamma = logit(&x, &t)?;
    let e = (&x * gamma).map(|z| clip(sigmoid(z)));
    let (mut a1, mut s1, mut a0, mut s0) = (0.0, 0.0, 0.0, 0.0);
    for i in 0..t.len() {
        if t[i] > 0.5 {
            a1 += 1.0 / e[i];
            s1 += y[i] / e[i];
        } else {
            a0 += 1.0 / (1.0 - e[i]);
            s0 += y[i] / (1.0 - e[i]);
        }
    }
    let (m1, m0) = (s1 / a1, s0 / a0);
    let n = t.len() as f64;
    let (a1, a0) = (a1 / n, a0 / n);
    let psi: Vec<f64> = (0..t.len())
        .map(|i| t[i] / e[i] * (y[i] - m1) / a1 - (1.0 - t[i]) / (1.0 - e[i]) * (y[i] - m0) / a0)
        .collect();
    Ok(Fit {
        estimate: m1 - m0,
        std_error: (psi.iter().map(|p| p * p).sum::<f64>() / n).sqrt() / n.sqrt(),
        n,
    })
}

fn folds_of(rows: &Rows, g: &[usize], k: u32) -> (Vec<usize>, Vec<usize>) {
    g.iter().partition(|&&i| rows.fold[i] != k)
}

fn doubly_robust(rows: &Rows, g: &[usize]) -> Result<Fit, String> {
    let mut scores = Vec::with_capacity(g.len());
    for k in 0..FOLDS {
        let (train, test) = folds_of(rows, g, k);
        let gamma = logit(&design(rows, &train), &pick(&rows.t, &train))?;
        let (i1, i0) = arms(rows, &train);
        let b1 = ols(&design(rows, &i1), &pick(&rows.y, &i1))?;
        let b0 = ols(&design(rows, &i0), &pick(&rows.y, &i0))?;
        let xt = design(rows, &test);
        let (e, m1, m0) = (&xt * gamma, &xt * b1, &xt * b0);
        for (r, &i) in test.iter().enumerate() {
            let (t, y, e) = (rows.t[i], rows.y[i], clip(sigmoid(e[r])));
            scores.push(m1[r] - m0[r] + t * (y - m1[r]) / e - (1.0 - t) * (y - m0[r]) / (1.0 - e));
        }
    }
    let n = scores.len() as f64;
    let tau = scores.iter().sum::<f64>() / n;
    let var = scores.iter().map(|s| (s - tau).powi(2)).sum::<f64>() / n / n;
    Ok(Fit {
        estimate: tau,
        std_error: var.sqrt(),
        n,
    })
}

fn partial_out(rows: &Rows, groups: &[Vec<usize>]) -> Result<Fit, String> {
    let (mut stt, mut sty) = (0.0, 0.0);
    let mut res: Vec<(f64, f64)> = Vec::new();
    for g in groups {
        for k in 0..FOLDS {
            let (train, test) = folds_of(rows, g, k);
            let x = design(rows, &train);
            let by = ols(&x, &pick(&rows.y, &train))?;
            let bt = ols(&x, &pick(&rows.t, &train))?;
            let xt = design(rows, &test);
            let (my, mt) = (&xt * by, &xt * bt);
            for (r, &i) in test.iter().enumerate() {
                let (rt, ry) = (rows.t[i] - mt[r], rows.y[i] - my[r]);
                stt += rt * rt;
                sty += rt * ry;
                res.push((rt, ry));
            }
        }
    }
    let theta = sty / stt;
    let meat: f64 = res
        .iter()
        .map(|(rt, ry)| rt * rt * (ry - theta * rt).powi(2))
        .sum();
    Ok(Fit {
        estimate: theta,
        std_error: meat.sqrt() / stt,
        n: res.len() as f64,
    })
}
