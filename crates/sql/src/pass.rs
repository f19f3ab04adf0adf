//! Pass builders: each returns one grouped aggregate query over the source.

use crate::design::{Design, Key, Models, Variants};
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
    /// Whether to count distinct values (approximately where the engine can): hashing every
    /// value is the costliest part of a profile, so only columns whose checks need it ask.
    pub distinct: bool,
    /// Whether to count the values that are neither 0 nor 1 (`c{i}_not01`): the exact, cheap
    /// check of a 0/1 treatment.
    pub zero_one: bool,
}

pub(crate) struct Text {
    pub(crate) sql: String,
    pub(crate) binds: Vec<Bind>,
}

impl Text {
    pub(crate) fn new() -> Self {
        Text {
            sql: String::new(),
            binds: Vec::new(),
        }
    }
    /// Appends a placeholder for `b` and returns its text.
    pub(crate) fn bind(&mut self, b: Bind) -> String {
        self.binds.push(b);
        format!("__{}", self.binds.len() - 1)
    }
}

pub(crate) fn not_null(t: &mut Text, columns: &[String]) -> String {
    let mut w = String::from("__filter");
    for c in columns {
        let p = t.bind(Bind::Column(c.clone()));
        w.push_str(&format!(" AND {p} IS NOT NULL"));
    }
    w
}

/// The profile pass: row count, and per column non-NULL count, and for numeric columns
/// minimum, maximum, mean and sum of squares and, where asked, distinct count
/// (approximate where the engine has it). Output aliases: `n_rows`, then `c{i}_n`, `c{i}_min`, `c{i}_max`, `c{i}_mean`,
/// `c{i}_ss`, `c{i}_not01`, `c{i}_distinct` (where asked), and `n_complete` (rows with no NULL in any of the columns). Means and deviations centre and scale the later passes.
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
        if c.numeric {
            // Text columns get no MIN/MAX: comparing strings row by row costs more than the
            // rest of the pass, and their levels come from the levels pass.
            items.push(format!("MIN({p}) AS c{i}_min"));
            items.push(format!("MAX({p}) AS c{i}_max"));
            items.push(format!("AVG(CAST({p} AS {})) AS c{i}_mean", d.float_type()));
            // The sum of squares, not STDDEV_POP: the deviation only scales the later passes
            // (their sums are centred on the exact mean), and a running-variance aggregate
            // costs several times a sum.
            items.push(format!(
                "SUM(CAST({p} AS {f}) * CAST({p} AS {f})) AS c{i}_ss",
                f = d.float_type()
            ));
        }
        if c.zero_one {
            items.push(format!(
                "COUNT(*) FILTER (WHERE {p} <> 0 AND {p} <> 1) AS c{i}_not01"
            ));
        }
        if c.distinct {
            items.push(match d.approx_distinct() {
                Some(f) => format!("{f}({p}) AS c{i}_distinct"),
                None => format!("COUNT(DISTINCT {p}) AS c{i}_distinct"),
            });
        }
    }
    if !columns.is_empty() {
        let mut all = Vec::new();
        for c in columns {
            let p = t.bind(Bind::Column(c.name.clone()));
            all.push(format!("{p} IS NOT NULL"));
        }
        items.push(format!(
            "SUM(CASE WHEN {} THEN 1 ELSE 0 END) AS n_complete",
            all.join(" AND ")
        ));
    }
    t.sql = format!(
        "SELECT {} FROM __src AS src WHERE __filter",
        items.join(", ")
    );
    Ok(Pass {
        name: "profile".into(),
        purpose: "row count; per column: non-NULL count, and for numbers min, max, mean, sum of squares (and a distinct count where a check needs it)".into(),
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
    /// `(Π factors - centre) / scale`: a product of centred, scaled terms (squares,
    /// interactions of a basis expansion).
    Product {
        /// The factors, each centred and scaled itself.
        factors: Vec<DesignTerm>,
        /// Centre.
        centre: f64,
        /// Scale (positive).
        scale: f64,
    },
}

impl DesignTerm {
    /// The column the term reads (the first factor's, for a product).
    pub fn column(&self) -> &str {
        match self {
            DesignTerm::Numeric { column, .. } | DesignTerm::Level { column, .. } => column,
            DesignTerm::Product { factors, .. } => factors.first().map_or("", |f| f.column()),
        }
    }

    /// Its centre and scale.
    pub fn centre_scale(&self) -> (f64, f64) {
        match self {
            DesignTerm::Numeric { centre, scale, .. }
            | DesignTerm::Level { centre, scale, .. }
            | DesignTerm::Product { centre, scale, .. } => (*centre, *scale),
        }
    }
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
    crate::design::design_gram(d, source, filter, &plain(groups, terms, None))
}

/// A design of column group keys and terms, with the outcome under the alias `alias`.
fn plain(groups: &[String], terms: &[DesignTerm], outcome: Option<(&'static str, &str)>) -> Design {
    Design {
        keys: groups.iter().map(|g| Key::Column(g.clone())).collect(),
        terms: terms.to_vec(),
        extras: outcome
            .map(|(a, c)| vec![(a, c.to_string())])
            .unwrap_or_default(),
        fold: None,
    }
}

/// The factor `v_{i-1}` of the design `(1, v...)` at index `i`, as ` * v{i-1}` (empty for the
/// intercept).
pub(crate) fn factor(i: usize) -> String {
    if i == 0 {
        String::new()
    } else {
        format!(" * v{}", i - 1)
    }
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
    crate::design::logistic_fits(
        d,
        source,
        filter,
        &plain(groups, terms, Some(("t", outcome))),
        &Models::single(coef.to_vec()),
        Variants::Single,
    )
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
    crate::design::design_residuals(
        d,
        source,
        filter,
        &plain(groups, terms, Some(("y", outcome))),
        &Models::single(coef.to_vec()),
    )
}

/// A query returning the source's columns and no rows (`LIMIT 0`), for schema checks.
pub fn schema_probe(d: &dyn Dialect, source: &Source) -> Result<Pass, SqlError> {
    Ok(Pass {
        name: "schema".into(),
        purpose: "the source's column names and types (reads no rows)".into(),
        query: template::query(d, "SELECT * FROM __src AS src LIMIT 0", &[], source, None)?,
    })
}
