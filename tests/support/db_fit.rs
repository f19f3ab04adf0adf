//! The in-database path of the reference checks: profile, Gram, residual and logistic passes
//! built by `upshot_sql`, run by DuckDB on a CSV source — or, with `UPSHOT_FIT_DB` set to a
//! `postgresql://` locator, by PostgreSQL on a table loaded from the CSV's columns —, finished by
//! `upshot_fit`. Only the aggregates leave the database.

use nalgebra::{DMatrix, DVector};
use serde_json::{json, Value};
use upshot_engine::{Access, Engine};
use upshot_engine_duckdb::{DuckDbEngine, MEMORY};
use upshot_engine_postgres::PostgresEngine;
use upshot_fit::{logit, ols, LogitSums, Moments, NewtonOptions};
use upshot_sql::{
    gram, logistic_fits, profile, residuals, Design, DesignTerm, Models, ProfileColumn, Source,
    Variants,
};

fn fail(msg: String) -> ! {
    eprintln!("fit-cases: {msg}");
    std::process::exit(2)
}

/// Least squares (`logistic = false`) or logistic regression of `outcome` on `covariates`.
pub fn fit(path: &str, outcome: &str, covariates: &[String], logistic: bool) -> Value {
    let mut cols: Vec<String> = covariates.to_vec();
    cols.push(outcome.to_string());
    match std::env::var("UPSHOT_FIT_DB") {
        Ok(locator) => {
            let pg = PostgresEngine::connect(&locator, Access::ReadWrite)
                .unwrap_or_else(|e| fail(e.to_string()));
            let table = format!("fit_case_{}", std::process::id());
            load(&pg, path, &cols, &table);
            let src = Source::table(&table).unwrap_or_else(|e| fail(e.to_string()));
            let v = fit_on(&pg, &src, outcome, covariates, &cols, logistic);
            let _ = pg.execute_batch(&format!("DROP TABLE {table}"));
            v
        }
        Err(_) => {
            let e = DuckDbEngine::open(MEMORY, false).unwrap_or_else(|e| fail(e.to_string()));
            let src = Source::Csv(path.to_string());
            fit_on(&e, &src, outcome, covariates, &cols, logistic)
        }
    }
}

/// Loads the columns `cols` of the CSV at `path` (numbers, written with 17 significant digits)
/// into a new PostgreSQL table of DOUBLE PRECISION columns; the statements are the test's own.
fn load(pg: &PostgresEngine, path: &str, cols: &[String], table: &str) {
    let text = std::fs::read_to_string(path).unwrap_or_else(|e| fail(format!("{path}: {e}")));
    let mut lines = text.lines();
    let header: Vec<&str> = lines.next().unwrap_or_default().split(',').collect();
    let idx: Vec<usize> = cols
        .iter()
        .map(|c| {
            header
                .iter()
                .position(|h| h == c)
                .unwrap_or_else(|| fail(format!("no column `{c}`")))
        })
        .collect();
    let mut values = Vec::new();
    for line in lines.filter(|l| !l.trim().is_empty()) {
        let fields: Vec<&str> = line.split(',').collect();
        let row: Vec<String> = idx
            .iter()
            .map(|&i| {
                let x: f64 = fields[i]
                    .parse()
                    .unwrap_or_else(|_| fail(format!("not a number: {}", fields[i])));
                format!("{x:?}::float8")
            })
            .collect();
        values.push(format!("({})", row.join(", ")));
    }
    let defs: Vec<String> = cols
        .iter()
        .map(|c| format!("\"{}\" DOUBLE PRECISION", c.replace('"', "\"\"")))
        .collect();
    pg.execute_batch(&format!(
        "DROP TABLE IF EXISTS {table}; CREATE TABLE {table} ({}); INSERT INTO {table} VALUES {}",
        defs.join(", "),
        values.join(", ")
    ))
    .unwrap_or_else(|e| fail(e.to_string()));
}

fn fit_on(
    e: &dyn Engine,
    src: &Source,
    outcome: &str,
    covariates: &[String],
    cols: &[String],
    logistic: bool,
) -> Value {
    let d = e.flavor();
    let d = &d;
    let src = src.clone();
    let k = cols.len();
    let pc: Vec<ProfileColumn> = cols
        .iter()
        .map(|c| ProfileColumn {
            name: c.clone(),
            numeric: true,
            distinct: false,
            zero_one: false,
        })
        .collect();
    let prof = e
        .run(&profile(d, &src, None, &pc).unwrap())
        .unwrap_or_else(|e| fail(e.to_string()));
    let num = |a: &upshot_engine::Aggregates, name: &str| {
        a.number(0, name).unwrap_or_else(|e| fail(e.to_string()))
    };
    let centre: Vec<f64> = (0..k).map(|i| num(&prof, &format!("c{i}_mean"))).collect();
    let scale: Vec<f64> = (0..k)
        .map(|i| {
            let n = num(&prof, &format!("c{i}_n"));
            let var = num(&prof, &format!("c{i}_ss")) / n - centre[i] * centre[i];
            var.max(0.0).sqrt().max(f64::MIN_POSITIVE)
        })
        .collect();
    let terms: Vec<DesignTerm> = (0..k)
        .map(|i| DesignTerm::Numeric {
            column: cols[i].clone(),
            centre: centre[i],
            scale: scale[i],
        })
        .collect();
    if logistic {
        let x_terms = &terms[..k - 1];
        let mut names = vec!["(intercept)".to_string()];
        names.extend(covariates.iter().cloned());
        let mut passes = 0;
        let result = logit::<String, _>(
            &names,
            |c| {
                passes += 1;
                let a = e
                    .run(
                        &logistic_fits(
                            d,
                            &src,
                            None,
                            &Design::grouped(&[], x_terms, &[("t", outcome)]),
                            &Models::single(c.to_vec()),
                            Variants::Single,
                        )
                        .map_err(|e| e.to_string())?
                        .pass,
                    )
                    .map_err(|e| e.to_string())?;
                let p = c.len();
                let g = |n: &str| a.number(0, n).map_err(|e| e.to_string());
                let mut info = DMatrix::zeros(p, p);
                for i in 0..p {
                    for j in i..p {
                        let v = g(&format!("h{i}_{j}"))?;
                        info[(i, j)] = v;
                        info[(j, i)] = v;
                    }
                }
                Ok(LogitSums {
                    n: g("n")?,
                    score: DVector::from_iterator(
                        p,
                        (0..p).map(|i| g(&format!("u{i}")).unwrap_or(f64::NAN)),
                    ),
                    information: info,
                    loglik: g("loglik")?,
                    min_p: g("min_p")?,
                    max_p: g("max_p")?,
                })
            },
            NewtonOptions::default(),
        )
        .unwrap_or_else(|e| fail(e));
        return match result {
            Ok(f) => {
                let mut a = DMatrix::zeros(k, k);
                a[(0, 0)] = 1.0;
                for j in 1..k {
                    a[(0, j)] = -centre[j - 1] / scale[j - 1];
                    a[(j, j)] = 1.0 / scale[j - 1];
                }
                let beta = &a * DVector::from_vec(f.coef.clone());
                let cov = &a * &f.covariance * a.transpose();
                json!({"coef": beta.iter().collect::<Vec<_>>(), "std_error": (0..k).map(|i| cov[(i, i)].sqrt()).collect::<Vec<_>>(),
                       "loglik": f.loglik, "iterations": f.iterations, "passes": passes + 1})
            }
            Err(err) => json!({"error": err.to_string()}),
        };
    }
    let g = e
        .run(&gram(d, &src, None, &Design::grouped(&[], &terms, &[])).unwrap())
        .unwrap_or_else(|e| fail(e.to_string()));
    let sum: Vec<f64> = (0..k).map(|i| num(&g, &format!("s{i}"))).collect();
    let mut upper = Vec::new();
    for i in 0..k {
        for j in i..k {
            upper.push(num(&g, &format!("g{i}_{j}")));
        }
    }
    let m = Moments::from_upper(cols.to_vec(), num(&g, "n"), centre, scale, sum, &upper)
        .unwrap_or_else(|e| fail(e.to_string()));
    let x: Vec<usize> = (0..k - 1).collect();
    match ols(&m, k - 1, &x) {
        Ok(f) => {
            let c = f.design_coefficients(&m, &x);
            let r = e
                .run(
                    &residuals(
                        d,
                        &src,
                        None,
                        &Design::grouped(&[], &terms[..k - 1], &[("y", outcome)]),
                        &Models::single(c.clone()),
                    )
                    .unwrap(),
                )
                .unwrap_or_else(|e| fail(e.to_string()));
            let mut meat = DMatrix::zeros(k, k);
            for i in 0..k {
                for j in i..k {
                    let v = num(&r, &format!("r{i}_{j}"));
                    meat[(i, j)] = v;
                    meat[(j, i)] = v;
                }
            }
            let hc1 = f.hc1(&m, &x, &meat).unwrap_or_else(|e| fail(e.to_string()));
            json!({"intercept": f.intercept, "coef": f.coef, "std_error": f.std_error, "hc1": hc1, "condition": f.condition, "passes": 3})
        }
        Err(err) => json!({"error": err.to_string()}),
    }
}
