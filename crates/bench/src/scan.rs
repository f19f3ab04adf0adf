//! The scan limit: one hand-written DuckDB query computing exactly the sums of a method's
//! heaviest pass, the floor for any in-database method.
//!
//! - stratify: the cell table, `GROUP BY [region,] prior_orders, zone, voucher` → n, Σy, Σy².
//! - regress: the centred Gram matrix of [covariates, y] grouped by [region,] arm.
//! - weight: the centred Gram matrix of [covariates, t] grouped by [region] — the size of one
//!   Newton step's information matrix and score.
//! - doubly-robust: the centred Gram matrix of [covariates, y] grouped by [region,] fold, arm.
//! - partial-out: the centred Gram matrix of [covariates, t, y] grouped by [region,] fold.
//!
//! Each is measured twice where it has products: with one `SUM(a * b)` per product, and with
//! upshot's fused `upshot_moments` aggregate (registered by `upshot-duckdb-ext`); the floor is
//! the faster of the two.
//!
//! The text is the benchmark's own (fixed column names), written the way a person would write
//! it by hand; centring constants are the columns' means, computed before the clock starts.

use crate::work::{zone_dummies, Work, FOLDS};
use upshot_methods::Method;

/// The fold hash of upshot's design passes, written out by hand (see `upshot_sql::fold_of`).
fn fold_expr() -> String {
    let p = upshot_sql::FOLD_PRIME;
    let a = format!("(((customer_id % {p}) + {p}) % {p})");
    let h1 = format!("(({a} * 48271 + 11) % {p})");
    format!("(((({h1} * {h1}) % {p}) * 16807 + {h1}) % {p}) % {FOLDS}")
}

/// The terms of the design (expressions before centring) and their names.
fn terms(w: &Work) -> Vec<(String, String)> {
    let mut v: Vec<(String, String)> = w
        .numeric()
        .into_iter()
        .map(|c| (format!("CAST({c} AS DOUBLE)"), c))
        .collect();
    for (i, z) in zone_dummies().into_iter().enumerate() {
        v.push((
            format!("CASE WHEN zone = '{z}' THEN 1.0 ELSE 0.0 END"),
            format!("zone_{i}"),
        ));
    }
    match w.method {
        Method::Regress | Method::DoublyRobust => {
            v.push(("CAST(spend_30d AS DOUBLE)".into(), "y".into()))
        }
        Method::Weight => v.push(("CAST(voucher AS DOUBLE)".into(), "t".into())),
        Method::PartialOut => {
            v.push(("CAST(voucher AS DOUBLE)".into(), "t".into()));
            v.push(("CAST(spend_30d AS DOUBLE)".into(), "y".into()));
        }
        _ => {}
    }
    v
}

/// The query that computes the means used for centring (run before timing).
pub fn means_sql(w: &Work) -> Option<String> {
    if w.method == Method::Stratify {
        return None;
    }
    let t = terms(w);
    Some(format!(
        "SELECT {} FROM customers",
        t.iter()
            .map(|(e, _)| format!("AVG({e})"))
            .collect::<Vec<_>>()
            .join(", ")
    ))
}

/// The scan-limit query; `means` from [`means_sql`] (ignored for stratify). With `fused`, the
/// sums of products come from upshot's `upshot_moments` aggregate (one call) instead of one
/// `SUM` each; `None` for stratify, which has no products.
pub fn sql(w: &Work, means: &[f64], fused: bool) -> Option<String> {
    let seg = if w.segments { "region, " } else { "" };
    if w.method == Method::Stratify {
        return (!fused).then(|| format!(
            "SELECT {seg}prior_orders, zone, voucher, COUNT(*) AS n, SUM(spend_30d) AS sy, \
             SUM(spend_30d * spend_30d) AS syy FROM customers GROUP BY {seg}prior_orders, zone, voucher"
        ));
    }
    let t = terms(w);
    let mut keys: Vec<String> = Vec::new();
    if w.segments {
        keys.push("region".into());
    }
    match w.method {
        Method::Regress => keys.push("voucher".into()),
        Method::DoublyRobust => {
            keys.push(format!("{} AS fold", fold_expr()));
            keys.push("voucher".into());
        }
        Method::PartialOut => keys.push(format!("{} AS fold", fold_expr())),
        _ => {}
    }
    let key_names: Vec<String> = keys
        .iter()
        .map(|k| k.rsplit(" AS ").next().unwrap_or(k).to_string())
        .collect();
    let inner: Vec<String> = keys
        .iter()
        .cloned()
        .chain(
            t.iter()
                .zip(means)
                .enumerate()
                .map(|(i, ((e, _), m))| format!("{e} - {m:e} AS v{i}")),
        )
        .collect();
    let mut sums = vec!["COUNT(*) AS n".to_string()];
    if fused {
        let vs: Vec<String> = (0..t.len()).map(|i| format!("v{i}")).collect();
        sums.push(format!("upshot_moments(1.0, {}) AS m", vs.join(", ")));
    } else {
        for i in 0..t.len() {
            sums.push(format!("SUM(v{i}) AS s{i}"));
        }
        for i in 0..t.len() {
            for j in i..t.len() {
                sums.push(format!("SUM(v{i} * v{j}) AS g{i}_{j}"));
            }
        }
    }
    let group = if key_names.is_empty() {
        String::new()
    } else {
        format!(" GROUP BY {}", key_names.join(", "))
    };
    let select_keys = if key_names.is_empty() {
        String::new()
    } else {
        format!("{}, ", key_names.join(", "))
    };
    Some(format!(
        "SELECT {select_keys}{} FROM (SELECT {} FROM customers) AS r{group}",
        sums.join(", "),
        inner.join(", ")
    ))
}

/// The number of sums the scan-limit query computes per group.
pub fn sums(w: &Work) -> usize {
    if w.method == Method::Stratify {
        return 3;
    }
    let k = terms(w).len();
    1 + k + k * (k + 1) / 2
}
