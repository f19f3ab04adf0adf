//! Pass builders: each returns one grouped aggregate query over the source.

use crate::dialect::Dialect;
use crate::error::SqlError;
use crate::source::Source;
use crate::template::{self, Bind};
use sqlparser::ast::{Expr, Query};

/// One aggregate query of a plan.
#[derive(Clone, Debug, PartialEq)]
pub struct Pass {
    /// Short name (`profile`, `cells`, `gram`).
    pub name: String,
    /// What it computes, for `upshot plan`.
    pub purpose: String,
    /// The query.
    pub query: Query,
}

impl Pass {
    /// The query as SQL text, laid out on several lines.
    pub fn sql(&self) -> String {
        format!("{:#}", self.query)
    }
}

/// A column to profile.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct ProfileColumn {
    /// Column name.
    pub name: String,
    /// Whether to compute a mean (numeric columns).
    pub numeric: bool,
}

struct Text {
    sql: String,
    binds: Vec<Bind>,
}

impl Text {
    fn new() -> Self {
        Text {
            sql: String::new(),
            binds: Vec::new(),
        }
    }
    /// Appends a placeholder for `b` and returns its text.
    fn bind(&mut self, b: Bind) -> String {
        self.binds.push(b);
        format!("__{}", self.binds.len() - 1)
    }
}

fn not_null(t: &mut Text, columns: &[String]) -> String {
    let mut w = String::from("__filter");
    for c in columns {
        let p = t.bind(Bind::Column(c.clone()));
        w.push_str(&format!(" AND {p} IS NOT NULL"));
    }
    w
}

/// The profile pass: row count, and per column non-NULL count, minimum, maximum, mean and
/// population standard deviation (numeric columns) and distinct count (approximate where the
/// engine has it). Output aliases: `n_rows`, then `c{i}_n`, `c{i}_min`, `c{i}_max`, `c{i}_mean`,
/// `c{i}_sd`, `c{i}_distinct`. Means and deviations centre and scale the later passes.
pub fn profile(
    d: &dyn Dialect,
    source: &Source,
    filter: Option<&Expr>,
    columns: &[ProfileColumn],
) -> Result<Pass, SqlError> {
    let mut t = Text::new();
    let mut items = vec!["COUNT(*) AS n_rows".to_string()];
    for (i, c) in columns.iter().enumerate() {
        let p = t.bind(Bind::Column(c.name.clone()));
        items.push(format!("COUNT({p}) AS c{i}_n"));
        items.push(format!("MIN({p}) AS c{i}_min"));
        items.push(format!("MAX({p}) AS c{i}_max"));
        if c.numeric {
            items.push(format!("AVG(CAST({p} AS {})) AS c{i}_mean", d.float_type()));
            items.push(format!(
                "STDDEV_POP(CAST({p} AS {})) AS c{i}_sd",
                d.float_type()
            ));
        }
        items.push(match d.approx_distinct() {
            Some(f) => format!("{f}({p}) AS c{i}_distinct"),
            None => format!("COUNT(DISTINCT {p}) AS c{i}_distinct"),
        });
    }
    t.sql = format!(
        "SELECT {} FROM __src AS src WHERE __filter",
        items.join(", ")
    );
    Ok(Pass {
        name: "profile".into(),
        purpose: "row count; per column: non-NULL count, min, max, mean, standard deviation, distinct count".into(),
        query: template::query(d, &t.sql, &t.binds, source, filter)?,
    })
}

/// The cell table: per combination of `keys` (segments, strata, treatment), the row count and
/// the sum and sum of squares of `value`. Rows with NULL in a key or the value are excluded.
/// Output aliases: `k{i}`, `n`, `sy`, `syy`; ordered by the keys.
pub fn cells(
    d: &dyn Dialect,
    source: &Source,
    filter: Option<&Expr>,
    keys: &[String],
    value: &str,
) -> Result<Pass, SqlError> {
    let mut t = Text::new();
    let mut used = keys.to_vec();
    used.push(value.to_string());
    let y = t.bind(Bind::Column(value.to_string()));
    let ks: Vec<String> = keys
        .iter()
        .map(|k| t.bind(Bind::Column(k.clone())))
        .collect();
    let f = d.float_type();
    let mut items: Vec<String> = ks
        .iter()
        .enumerate()
        .map(|(i, k)| format!("{k} AS k{i}"))
        .collect();
    items.push("COUNT(*) AS n".into());
    items.push(format!("SUM(CAST({y} AS {f})) AS sy"));
    items.push(format!("SUM(CAST({y} AS {f}) * CAST({y} AS {f})) AS syy"));
    let w = not_null(&mut t, &used);
    let mut sql = format!("SELECT {} FROM __src AS src WHERE {w}", items.join(", "));
    if !ks.is_empty() {
        let order: Vec<String> = (1..=ks.len()).map(|i| i.to_string()).collect();
        sql.push_str(&format!(
            " GROUP BY {} ORDER BY {}",
            ks.join(", "),
            order.join(", ")
        ));
    }
    t.sql = sql;
    Ok(Pass {
        name: "cells".into(),
        purpose: format!(
            "per cell of ({}): n, sum and sum of squares of the outcome",
            keys.join(", ")
        ),
        query: template::query(d, &t.sql, &t.binds, source, filter)?,
    })
}

/// One entry of a design vector, centred and scaled before products are summed.
#[derive(Clone, Debug, PartialEq)]
pub enum DesignTerm {
    /// `(x - centre) / scale` for a numeric column.
    Numeric {
        /// Column.
        column: String,
        /// Centre (the profile mean).
        centre: f64,
        /// Scale (positive).
        scale: f64,
    },
    /// `(1[x = level] - centre) / scale`: one-hot for one level of a categorical column.
    Level {
        /// Column.
        column: String,
        /// The level, compared as a string literal.
        level: String,
        /// Centre (the level's share).
        centre: f64,
        /// Scale (positive).
        scale: f64,
    },
}

impl DesignTerm {
    fn column(&self) -> &str {
        match self {
            DesignTerm::Numeric { column, .. } | DesignTerm::Level { column, .. } => column,
        }
    }
}

/// The derived table of design rows shared by the Gram and logistic passes: group keys `k{i}`,
/// centred and scaled terms `v{i}`, and optionally the outcome as a float `y`. Rows with NULL
/// in any used column are excluded.
fn design_rows(
    t: &mut Text,
    d: &dyn Dialect,
    groups: &[String],
    terms: &[DesignTerm],
    outcome: Option<&str>,
) -> Result<String, SqlError> {
    let f = d.float_type();
    let mut inner = Vec::new();
    let mut used: Vec<String> = groups.to_vec();
    for (i, g) in groups.iter().enumerate() {
        let p = t.bind(Bind::Column(g.clone()));
        inner.push(format!("{p} AS k{i}"));
    }
    for (i, term) in terms.iter().enumerate() {
        if !used.iter().any(|u| u == term.column()) {
            used.push(term.column().to_string());
        }
        let (centre, scale) = match term {
            DesignTerm::Numeric { centre, scale, .. } | DesignTerm::Level { centre, scale, .. } => {
                (*centre, *scale)
            }
        };
        if !(scale.is_finite() && scale > 0.0) {
            return Err(SqlError::BadScale {
                column: term.column().to_string(),
                scale,
            });
        }
        template::number(centre, &format!("the centre of `{}`", term.column()))?;
        let c = t.bind(Bind::Column(term.column().to_string()));
        let raw = match term {
            DesignTerm::Numeric { .. } => format!("CAST({c} AS {f})"),
            DesignTerm::Level { level, .. } => {
                let l = t.bind(Bind::Text(level.clone()));
                format!("CASE WHEN CAST({c} AS VARCHAR) = {l} THEN 1.0 ELSE 0.0 END")
            }
        };
        let m = t.bind(Bind::Number(centre));
        let s = t.bind(Bind::Number(scale));
        inner.push(format!("({raw} - {m}) / {s} AS v{i}"));
    }
    if let Some(y) = outcome {
        used.push(y.to_string());
        let p = t.bind(Bind::Column(y.to_string()));
        inner.push(format!("CAST({p} AS {f}) AS y"));
    }
    let w = not_null(t, &used);
    let items = if inner.is_empty() {
        "1 AS one".to_string()
    } else {
        inner.join(", ")
    };
    Ok(format!("SELECT {items} FROM __src AS src WHERE {w}"))
}

fn group_tail(groups: &[String]) -> String {
    if groups.is_empty() {
        String::new()
    } else {
        let keys: Vec<String> = (0..groups.len()).map(|i| format!("k{i}")).collect();
        format!(" GROUP BY {k} ORDER BY {k}", k = keys.join(", "))
    }
}

fn per(groups: &[String]) -> String {
    if groups.is_empty() {
        String::new()
    } else {
        format!(" per ({})", groups.join(", "))
    }
}

/// `c_0 + c_1 v0 + ...` with the coefficients inlined as numeric literals.
fn linear_predictor(t: &mut Text, coef: &[f64]) -> Result<String, SqlError> {
    for (i, c) in coef.iter().enumerate() {
        template::number(*c, &format!("coefficient {i}"))?;
    }
    let mut out = t.bind(Bind::Number(coef[0]));
    for (i, c) in coef[1..].iter().enumerate() {
        let b = t.bind(Bind::Number(*c));
        out.push_str(&format!(" + {b} * v{i}"));
    }
    Ok(out)
}

/// The centred Gram pass: per group, `n`, `s{i} = Σ v_i` and `g{i}_{j} = Σ v_i v_j` (i ≤ j) of
/// the design vector `v`. Centring with the profile means keeps the sums well conditioned.
/// Rows with NULL in a group key or a term's column are excluded. The terms are computed once
/// per row in a derived table, then summed.
pub fn gram(
    d: &dyn Dialect,
    source: &Source,
    filter: Option<&Expr>,
    groups: &[String],
    terms: &[DesignTerm],
) -> Result<Pass, SqlError> {
    let mut t = Text::new();
    let rows = design_rows(&mut t, d, groups, terms, None)?;
    let mut outer = keys_and_count(groups);
    for i in 0..terms.len() {
        outer.push(format!("SUM(v{i}) AS s{i}"));
    }
    for i in 0..terms.len() {
        for j in i..terms.len() {
            outer.push(format!("SUM(v{i} * v{j}) AS g{i}_{j}"));
        }
    }
    t.sql = format!(
        "SELECT {} FROM ({rows}) AS rows_{}",
        outer.join(", "),
        group_tail(groups)
    );
    Ok(Pass {
        name: "gram".into(),
        purpose: format!(
            "centred Gram matrix of {} terms{}",
            terms.len(),
            per(groups)
        ),
        query: template::query(d, &t.sql, &t.binds, source, filter)?,
    })
}

/// The factor `v_{i-1}` of the design `(1, v...)` at index `i`, as ` * v{i-1}` (empty for the
/// intercept).
fn factor(i: usize) -> String {
    if i == 0 {
        String::new()
    } else {
        format!(" * v{}", i - 1)
    }
}

/// Group keys and the row count, the first outputs of every grouped pass.
fn keys_and_count(groups: &[String]) -> Vec<String> {
    let mut out: Vec<String> = (0..groups.len()).map(|i| format!("k{i}")).collect();
    out.push("COUNT(*) AS n".into());
    out
}

/// `SUM({weight} w_i w_j) AS {alias}{i}_{j}` for i ≤ j over the design `w = (1, v_0..v_{k-1})`.
fn weighted_products(out: &mut Vec<String>, weight: &str, alias: &str, k: usize) {
    for i in 0..=k {
        for j in i..=k {
            out.push(format!(
                "SUM({weight}{}{}) AS {alias}{i}_{j}",
                factor(i),
                factor(j)
            ));
        }
    }
}

/// Design rows with the outcome and the linear predictor `c_0 + Σ c_i v_i` of the inlined
/// coefficients (intercept first): the shared start of passes evaluated at a current fit.
fn rows_at_fit(
    t: &mut Text,
    d: &dyn Dialect,
    groups: &[String],
    terms: &[DesignTerm],
    outcome: &str,
    coef: &[f64],
) -> Result<(String, String), SqlError> {
    assert_eq!(
        coef.len(),
        terms.len() + 1,
        "one coefficient per term plus the intercept"
    );
    let rows = design_rows(t, d, groups, terms, Some(outcome))?;
    let linear = linear_predictor(t, coef)?;
    Ok((rows, linear))
}

/// One Newton step of a logistic regression of the 0/1 column `outcome` on the design terms,
/// with the current coefficients `coef` (intercept first, on the centred, scaled terms) inlined
/// as literals. Per group: `n`; the score `u{i} = Σ v_i (y - p)`; the information
/// `h{i}_{j} = Σ p (1 - p) v_i v_j` (i ≤ j); `loglik`; `min_p`, `max_p`. Index 0 is the
/// intercept (`v_0 = 1`), index `i + 1` the term `i`. Probabilities and the log-likelihood are
/// written so that `EXP` only ever sees a non-positive argument (no overflow).
pub fn logistic_step(
    d: &dyn Dialect,
    source: &Source,
    filter: Option<&Expr>,
    groups: &[String],
    terms: &[DesignTerm],
    outcome: &str,
    coef: &[f64],
) -> Result<Pass, SqlError> {
    let mut t = Text::new();
    let (rows, eta) = rows_at_fit(&mut t, d, groups, terms, outcome, coef)?;
    let mut outer = keys_and_count(groups);
    for i in 0..=terms.len() {
        outer.push(format!("SUM((y - p){}) AS u{i}", factor(i)));
    }
    weighted_products(&mut outer, "p * (1.0 - p)", "h", terms.len());
    outer.push("SUM(y * eta - CASE WHEN eta > 0 THEN eta + LN(1.0 + EXP(-eta)) ELSE LN(1.0 + EXP(eta)) END) AS loglik".into());
    outer.push("MIN(p) AS min_p".into());
    outer.push("MAX(p) AS max_p".into());
    t.sql = format!(
        "SELECT {} FROM (SELECT *, CASE WHEN eta >= 0 THEN 1.0 / (1.0 + EXP(-eta)) ELSE EXP(eta) / (1.0 + EXP(eta)) END AS p FROM (SELECT *, {eta} AS eta FROM ({rows}) AS rows_) AS linear_) AS fitted_{}",
        outer.join(", "),
        group_tail(groups)
    );
    Ok(Pass {
        name: "logistic-step".into(),
        purpose: format!(
            "score, information and log-likelihood of a logistic model for {outcome} at the current coefficients{}",
            per(groups)
        ),
        query: template::query(d, &t.sql, &t.binds, source, filter)?,
    })
}

/// The residual pass of a linear fit: with the design coefficients `coef` on `(1, v)` inlined
/// as literals and `e = y - (c_0 + Σ c_i v_i)`, per group `n` and `r{i}_{j} = Σ e² w_i w_j`
/// (i ≤ j) for `w = (1, v...)`: the meat of HC1 sandwich errors (`r0_0` is the residual sum of
/// squares).
pub fn residual_moments(
    d: &dyn Dialect,
    source: &Source,
    filter: Option<&Expr>,
    groups: &[String],
    terms: &[DesignTerm],
    outcome: &str,
    coef: &[f64],
) -> Result<Pass, SqlError> {
    let mut t = Text::new();
    let (rows, fitted) = rows_at_fit(&mut t, d, groups, terms, outcome, coef)?;
    let mut outer = keys_and_count(groups);
    weighted_products(&mut outer, "e * e", "r", terms.len());
    t.sql = format!(
        "SELECT {} FROM (SELECT *, y - ({fitted}) AS e FROM ({rows}) AS rows_) AS residuals_{}",
        outer.join(", "),
        group_tail(groups)
    );
    Ok(Pass {
        name: "residuals".into(),
        purpose: format!(
            "residual moments of a linear model for {outcome} (HC1 meat){}",
            per(groups)
        ),
        query: template::query(d, &t.sql, &t.binds, source, filter)?,
    })
}

/// A query returning the source's columns and no rows (`LIMIT 0`), for schema checks.
pub fn schema_probe(d: &dyn Dialect, source: &Source) -> Result<Pass, SqlError> {
    Ok(Pass {
        name: "schema".into(),
        purpose: "the source's column names and types (reads no rows)".into(),
        query: template::query(d, "SELECT * FROM __src AS src LIMIT 0", &[], source, None)?,
    })
}
