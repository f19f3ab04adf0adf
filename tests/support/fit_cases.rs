//! Fits least squares through upshot's finisher on a CSV file, the way the in-database path
//! will: a profile pass (means and standard deviations), a centred Gram pass, then
//! `upshot_fit::ols`. Used by `tests/reference/fit_statsmodels.py` to compare with NIST's
//! certified Longley values and with statsmodels.
//!
//! With `--logit` first, fits a logistic regression by Newton's method over the sums one
//! logistic pass returns (`upshot_fit::logit`), computed here in memory from the centred rows.
//!
//! With `--in-db`, the same fit runs through the in-database path instead: passes built by
//! `upshot_sql`, run by DuckDB on the CSV file, finished by `upshot_fit` (see `db_fit.rs`).
//!
//! Usage: `fit-cases [--in-db] [--logit] FILE.csv OUTCOME COVARIATE...`; prints one JSON object.

mod db_fit;

use nalgebra::DMatrix;
use serde_json::json;
use upshot_fit::{
    logit, logit_sums_from_rows, ols, residual_moments_from_rows, Moments, NewtonOptions,
};

fn fail(msg: String) -> ! {
    eprintln!("fit-cases: {msg}");
    std::process::exit(2)
}

fn main() {
    let mut args: Vec<String> = std::env::args().skip(1).collect();
    let in_db = args.first().is_some_and(|a| a == "--in-db");
    if in_db {
        args.remove(0);
    }
    let logistic = args.first().is_some_and(|a| a == "--logit");
    if logistic {
        args.remove(0);
    }
    if args.len() < 2 {
        fail("usage: fit-cases [--in-db] [--logit] FILE.csv OUTCOME COVARIATE...".into());
    }
    if in_db {
        println!("{}", db_fit::fit(&args[0], &args[1], &args[2..], logistic));
        return;
    }
    let text =
        std::fs::read_to_string(&args[0]).unwrap_or_else(|e| fail(format!("{}: {e}", args[0])));
    let mut lines = text.lines();
    let header: Vec<&str> = lines.next().unwrap_or_default().split(',').collect();
    let wanted: Vec<&String> = args[2..].iter().chain(std::iter::once(&args[1])).collect();
    let idx: Vec<usize> = wanted
        .iter()
        .map(|w| {
            header
                .iter()
                .position(|h| h == w)
                .unwrap_or_else(|| fail(format!("no column `{w}`")))
        })
        .collect();
    let rows: Vec<Vec<f64>> = lines
        .filter(|l| !l.trim().is_empty())
        .enumerate()
        .map(|(r, l)| {
            let cells: Vec<&str> = l.split(',').collect();
            idx.iter()
                .map(|&i| {
                    cells[i].trim().parse().unwrap_or_else(|_| {
                        fail(format!("row {}: `{}` is not a number", r + 2, cells[i]))
                    })
                })
                .collect()
        })
        .collect();
    // Profile pass: mean and standard deviation per column.
    let k = idx.len();
    let n = rows.len() as f64;
    let mean: Vec<f64> = (0..k)
        .map(|j| rows.iter().map(|r| r[j]).sum::<f64>() / n)
        .collect();
    let sd: Vec<f64> = (0..k)
        .map(|j| {
            (rows.iter().map(|r| (r[j] - mean[j]).powi(2)).sum::<f64>() / n)
                .sqrt()
                .max(f64::MIN_POSITIVE)
        })
        .collect();
    let names: Vec<String> = wanted.iter().map(|s| s.to_string()).collect();
    if logistic {
        let v: Vec<Vec<f64>> = rows
            .iter()
            .map(|r| {
                let mut v: Vec<f64> = (0..k - 1).map(|j| (r[j] - mean[j]) / sd[j]).collect();
                v.push(r[k - 1]);
                v
            })
            .collect();
        let mut coef_names = vec!["(intercept)".to_string()];
        coef_names.extend(names[..k - 1].iter().cloned());
        let fit = logit::<(), _>(
            &coef_names,
            |c| Ok(logit_sums_from_rows(&v, c)),
            NewtonOptions::default(),
        )
        .unwrap();
        match fit {
            Ok(f) => {
                // Back to original units: beta = A b.
                let mut a = DMatrix::zeros(k, k);
                a[(0, 0)] = 1.0;
                for j in 1..k {
                    a[(0, j)] = -mean[j - 1] / sd[j - 1];
                    a[(j, j)] = 1.0 / sd[j - 1];
                }
                let b = nalgebra::DVector::from_vec(f.coef.clone());
                let beta = &a * b;
                let cov = &a * &f.covariance * a.transpose();
                let se: Vec<f64> = (0..k).map(|i| cov[(i, i)].sqrt()).collect();
                println!(
                    "{}",
                    json!({"coef": beta.iter().collect::<Vec<_>>(), "std_error": se, "loglik": f.loglik, "iterations": f.iterations})
                );
            }
            Err(e) => println!("{}", json!({"error": e.to_string()})),
        }
        return;
    }
    let m = Moments::from_rows(names, mean, sd, &rows).unwrap_or_else(|e| fail(e.to_string()));
    let x: Vec<usize> = (0..k - 1).collect();
    match ols(&m, k - 1, &x) {
        Ok(f) => {
            // Residual pass: Σ e² w wᵀ with the design coefficients inlined.
            let c = f.design_coefficients(&m, &x);
            let v: Vec<Vec<f64>> = rows
                .iter()
                .map(|r| {
                    let mut v: Vec<f64> = (0..k - 1)
                        .map(|j| (r[j] - m.centre[j]) / m.scale[j])
                        .collect();
                    v.push(r[k - 1]);
                    v
                })
                .collect();
            let meat = residual_moments_from_rows(&v, &c);
            let hc1 = f.hc1(&m, &x, &meat).unwrap_or_else(|e| fail(e.to_string()));
            println!(
                "{}",
                json!({"intercept": f.intercept, "coef": f.coef, "std_error": f.std_error, "hc1": hc1, "condition": f.condition, "rss": f.rss, "r2": f.r2})
            )
        }
        Err(e) => println!("{}", json!({"error": e.to_string()})),
    }
}
