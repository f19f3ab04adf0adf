//! Pass shapes shared by estimators: the profile, the cell table, category levels, the
//! centred Gram matrix, residual moments of linear fits (the HC1 meat) and logistic Newton
//! steps; and the schema probe. An estimator's own passes live with the estimator (crate
//! `upshot-methods`), built from the same kit ([`crate::design`]).

use crate::design::{
    factor, not_null, predictor, products_of, Design, DesignTerm, KeyValue, Model, Models, Out,
    Pass, PassText, Products, Selector, SIGMOID,
};
use crate::dialect::Flavor;
use crate::error::SqlError;
use crate::layout::{
    Built, CellsLayout, CutsLayout, GramLayout, LevelsLayout, LogisticGramLayout, LogisticLayout,
    NonFiniteLayout, ProfileColumn, ProfileLayout, ProfiledCellsLayout, ResidualLayout,
};
use crate::source::Source;
use crate::template::Bind;
use sqlparser::ast::Expr;

/// The profile pass: row count, and per column non-NULL count, and for numeric columns
/// minimum, maximum, mean and sum of squares and, where asked, distinct count
/// (approximate where the engine has it). Output aliases: `n_rows`, then `c{i}_n`, `c{i}_min`, `c{i}_max`, `c{i}_mean`,
/// `c{i}_ss`, `c{i}_not01`, `c{i}_distinct` (where asked), and `n_complete` (rows with no NULL in any of the columns). Means and deviations centre and scale the later passes.
pub fn profile(
    flavor: &Flavor,
    source: &Source,
    filter: Option<&Expr>,
    columns: &[ProfileColumn],
) -> Result<Built<ProfileLayout>, SqlError> {
    let mut t = PassText::new(flavor);
    let d = flavor.dialect;
    let mut items = vec!["COUNT(*) AS n_rows".to_string()];
    for (i, c) in columns.iter().enumerate() {
        let p = t.column(&c.name);
        let x = t.float_of(&p, &c.name);
        // A boolean the dialect cannot cast is compared and ordered as a number too.
        let v = if t.boolean_via_integer(&c.name) {
            x.clone()
        } else {
            p.clone()
        };
        items.push(format!("COUNT({p}) AS c{i}_n"));
        if c.numeric {
            // Text columns get no MIN/MAX: comparing strings row by row costs more than the
            // rest of the pass, and their levels come from the levels pass.
            items.push(format!("MIN({v}) AS c{i}_min"));
            items.push(format!("MAX({v}) AS c{i}_max"));
            items.push(format!("AVG({x}) AS c{i}_mean"));
            // The sum of squares, not STDDEV_POP: the deviation only scales the later passes
            // (their sums are centred on the exact mean), and a running-variance aggregate
            // costs several times a sum.
            items.push(format!("SUM({x} * {x}) AS c{i}_ss"));
        }
        if c.zero_one {
            items.push(if d.aggregate_filter() {
                format!("COUNT(*) FILTER (WHERE {v} <> 0 AND {v} <> 1) AS c{i}_not01")
            } else {
                format!("SUM(CASE WHEN {v} <> 0 AND {v} <> 1 THEN 1 ELSE 0 END) AS c{i}_not01")
            });
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
            let p = t.column(&c.name);
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
    Ok(Built {
        pass: Pass {
            name: "profile".into(),
            purpose: "row count; per column: non-NULL count, and for numbers min, max, mean, sum of squares (and a distinct count where a check needs it)".into(),
            query: t.query(source, filter)?,
        },
        layout: ProfileLayout {
            columns: columns.to_vec(),
        },
    })
}

/// Per column, the rows whose value is not a finite number within ±`limit`: NaN, +infinity,
/// -infinity, and finite values beyond the limit. Run only to explain a refusal (the profile
/// found such a value), so a run that goes on never pays for it. Output aliases `c{i}_nan`,
/// `c{i}_pinf`, `c{i}_ninf`, `c{i}_big`.
pub fn nonfinite(
    flavor: &Flavor,
    source: &Source,
    filter: Option<&Expr>,
    columns: &[String],
    limit: f64,
) -> Result<Built<NonFiniteLayout>, SqlError> {
    let mut t = PassText::new(flavor);
    let d = flavor.dialect;
    let f = t.float();
    let count = |cond: String, alias: String| {
        if d.aggregate_filter() {
            format!("COUNT(*) FILTER (WHERE {cond}) AS {alias}")
        } else {
            format!("SUM(CASE WHEN {cond} THEN 1 ELSE 0 END) AS {alias}")
        }
    };
    let mut items = vec!["COUNT(*) AS n_rows".to_string()];
    for (i, c) in columns.iter().enumerate() {
        let p = t.column(c);
        let x = t.float_of(&p, c);
        let l = t.number(limit, "the magnitude limit")?;
        // NaN equals itself in DuckDB, PostgreSQL and Spark SQL (and orders above every number).
        let nan = format!("{x} = CAST('NaN' AS {f})");
        let pinf = format!("{x} = CAST('Infinity' AS {f})");
        let ninf = format!("{x} = CAST('-Infinity' AS {f})");
        items.push(count(nan.clone(), format!("c{i}_nan")));
        items.push(count(pinf.clone(), format!("c{i}_pinf")));
        items.push(count(ninf.clone(), format!("c{i}_ninf")));
        items.push(count(
            format!("NOT ({nan} OR {pinf} OR {ninf}) AND ({x} > {l} OR {x} < -{l})"),
            format!("c{i}_big"),
        ));
    }
    t.sql = format!(
        "SELECT {} FROM __src AS src WHERE __filter",
        items.join(", ")
    );
    Ok(Built {
        pass: Pass {
            name: "nonfinite".into(),
            purpose: "per column: rows holding NaN, +infinity, -infinity, or a number beyond the magnitude limit (run only to explain a refusal)".into(),
            query: t.query(source, filter)?,
        },
        layout: NonFiniteLayout {
            columns: columns.to_vec(),
        },
    })
}

/// A key of the cell table: a column's value, or the bin of a numeric column among `bins`
/// equal-width bins of width `width` starting at `low` (values below the first bin fall in
/// it, values above the last in the last).
#[derive(Clone, Debug, PartialEq)]
pub enum CellKey {
    /// The column's value.
    Column(String),
    /// The bin number 0..bins of the column's value.
    Bins {
        /// The column.
        column: String,
        /// Lower edge of bin 0.
        low: f64,
        /// Bin width (positive).
        width: f64,
        /// Number of bins (at least 1).
        bins: u32,
    },
}

impl CellKey {
    /// The column the key reads.
    pub fn column(&self) -> &str {
        match self {
            CellKey::Column(c) | CellKey::Bins { column: c, .. } => c,
        }
    }
}

/// The cell table: per combination of `keys` (segments, strata, treatment), the row count and
/// the sum and sum of squares of `value`. Rows with NULL in a key or the value are excluded.
/// Output aliases: `k{i}`, `n`, `sy`, `syy`; ordered by the keys.
pub fn cells(
    flavor: &Flavor,
    source: &Source,
    filter: Option<&Expr>,
    keys: &[String],
    value: &str,
) -> Result<Built<CellsLayout>, SqlError> {
    let keys: Vec<CellKey> = keys.iter().cloned().map(CellKey::Column).collect();
    binned_cells(flavor, source, filter, &keys, value)
}

/// [`cells`] with keys that may bin numeric columns (coarsened exact matching).
pub fn binned_cells(
    flavor: &Flavor,
    source: &Source,
    filter: Option<&Expr>,
    keys: &[CellKey],
    value: &str,
) -> Result<Built<CellsLayout>, SqlError> {
    let mut t = PassText::new(flavor);
    let mut used: Vec<String> = keys.iter().map(|k| k.column().to_string()).collect();
    used.push(value.to_string());
    let y = t.column(value);
    let mut ks: Vec<String> = Vec::new();
    for k in keys {
        ks.push(match k {
            CellKey::Column(c) => t.column(c),
            CellKey::Bins {
                column,
                low,
                width,
                bins,
            } => {
                if !(width.is_finite() && *width > 0.0) || *bins == 0 {
                    return Err(SqlError::BadScale {
                        column: column.clone(),
                        scale: *width,
                    });
                }
                let x = t.float_column(column);
                let lo = t.number(*low, &format!("the lowest bin edge of `{column}`"))?;
                let w = t.number(*width, &format!("the bin width of `{column}`"))?;
                let last = t.number(f64::from(bins - 1), "the last bin")?;
                let zero = t.number(0.0, "the first bin")?;
                format!(
                    "CAST(LEAST({last}, GREATEST({zero}, FLOOR(({x} - {lo}) / {w}))) AS BIGINT)"
                )
            }
        });
    }
    let mut items: Vec<String> = ks
        .iter()
        .enumerate()
        .map(|(i, k)| format!("{k} AS k{i}"))
        .collect();
    items.push("COUNT(*) AS n".into());
    let yf = t.float_of(&y, value);
    items.push(format!("SUM({yf}) AS sy"));
    items.push(format!("SUM({yf} * {yf}) AS syy"));
    let w = not_null(&mut t, &used);
    let mut sql = format!("SELECT {} FROM __src AS src WHERE {w}", items.join(", "));
    sql.push_str(&grouped_by(&ks));
    t.sql = sql;
    Ok(Built {
        pass: Pass {
            name: "cells".into(),
            purpose: format!(
                "per cell of ({}): n, sum and sum of squares of the outcome",
                keys.iter()
                    .map(|k| match k {
                        CellKey::Column(c) => c.clone(),
                        CellKey::Bins { column, bins, .. } => format!("{column} in {bins} bins"),
                    })
                    .collect::<Vec<_>>()
                    .join(", ")
            ),
            query: t.query(source, filter)?,
        },
        layout: CellsLayout { keys: keys.len() },
    })
}

/// ` GROUP BY` the keys and ` ORDER BY` their positions (nothing without keys).
fn grouped_by(keys: &[String]) -> String {
    if keys.is_empty() {
        return String::new();
    }
    let order: Vec<String> = (1..=keys.len()).map(|i| i.to_string()).collect();
    format!(
        " GROUP BY {} ORDER BY {}",
        keys.join(", "),
        order.join(", ")
    )
}

/// The cell table that is its own profile: per combination of `keys` over every row the user's
/// filter keeps — NULL keys are groups of their own — the rows (`n_rows`), the rows with a
/// value (`n`), the value's sum and sum of squares (`sy`, `syy`) and range (`y_min`, `y_max`).
/// Ordered by the keys; at most `max_cells + 1` groups come back, so a caller learns that
/// there are more than `max_cells` without reading them. Counts, NULLs, ranges and distinct
/// values of the keys follow from the groups, so no profile pass runs before it.
pub fn profiled_cells(
    flavor: &Flavor,
    source: &Source,
    filter: Option<&Expr>,
    keys: &[String],
    value: &str,
    max_cells: u64,
) -> Result<Built<ProfiledCellsLayout>, SqlError> {
    let mut t = PassText::new(flavor);
    let y = t.column(value);
    let yf = t.float_of(&y, value);
    // A boolean the dialect cannot cast is compared as a number, as in the profile.
    let yv = if t.boolean_via_integer(value) {
        yf.clone()
    } else {
        y.clone()
    };
    // A boolean key the dialect cannot cast to a float groups as 0/1, so its values read as
    // numbers on every engine (the treatment's 0/1 check).
    let ks: Vec<String> = keys
        .iter()
        .map(|k| {
            let p = t.column(k);
            if t.boolean_via_integer(k) {
                format!("CAST({p} AS INTEGER)")
            } else {
                p
            }
        })
        .collect();
    let mut items: Vec<String> = ks
        .iter()
        .enumerate()
        .map(|(i, k)| format!("{k} AS k{i}"))
        .collect();
    items.push("COUNT(*) AS n_rows".into());
    items.push(format!("COUNT({y}) AS n"));
    items.push(format!("SUM({yf}) AS sy"));
    items.push(format!("SUM({yf} * {yf}) AS syy"));
    items.push(format!("MIN({yv}) AS y_min"));
    items.push(format!("MAX({yv}) AS y_max"));
    let mut sql = format!(
        "SELECT {} FROM __src AS src WHERE __filter",
        items.join(", ")
    );
    if !ks.is_empty() {
        sql.push_str(&format!(
            "{} LIMIT {}",
            grouped_by(&ks),
            max_cells.saturating_add(1)
        ));
    }
    t.sql = sql;
    Ok(Built {
        pass: Pass {
            name: "cells".into(),
            purpose: format!(
                "per cell of ({}), NULLs included: rows, and the outcome's count, sum, sum of squares and range; the profile follows from the cells",
                keys.join(", ")
            ),
            query: t.query(source, filter)?,
        },
        layout: ProfiledCellsLayout {
            cells: CellsLayout { keys: keys.len() },
        },
    })
}

/// The centred Gram pass of a design: per group `n`, `s{i} = Σ v_i`, `g{i}_{j} = Σ v_i v_j`.
pub fn gram(
    flavor: &Flavor,
    source: &Source,
    filter: Option<&Expr>,
    design: &Design,
) -> Result<Built<GramLayout>, SqlError> {
    let mut t = PassText::new(flavor);
    let rows = design.rows(&mut t)?;
    let k = design.terms.len();
    let outs = [Out::plain("COUNT(*)", "n"), gram_sums(k)];
    t.sql = t.aggregate(k, &design.key_names(), &outs, &format!("({rows}) AS rows_"));
    Ok(Built {
        pass: Pass {
            name: "gram".into(),
            purpose: format!("centred Gram matrix of {k} terms{}", design.per()),
            query: t.query(source, filter)?,
        },
        layout: GramLayout {
            keys: design.keys.len(),
            terms: k,
        },
    })
}

/// The centred Gram sums of `k` design terms: `s{i} = Σ v_i` and `g{i}_{j} = Σ v_i v_j`
/// (`i ≤ j`), read by [`GramLayout`] (with `n`, the group's `COUNT(*)`).
fn gram_sums(k: usize) -> Out {
    let mut entries = Vec::new();
    for i in 0..k {
        entries.push((format!("s{i}"), format!("v{i}"), 0, i + 1));
    }
    for i in 0..k {
        for j in i..k {
            entries.push((format!("g{i}_{j}"), format!("v{i} * v{j}"), i + 1, j + 1));
        }
    }
    Out::Products(Products {
        weight: "1.0".into(),
        entries,
        terms: k,
    })
}

/// How many logistic fits a pass evaluates per group.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Variants {
    /// One fit over all the group's rows; outputs unprefixed (`u0`, `h0_0`, `loglik`, ...).
    Single,
    /// Cross-fitting: fit `m` uses the rows whose fold is not `m`, for `m` in `0..folds`;
    /// outputs prefixed `m{m}_` (`m0_u0`, ...). The models' selector must end with the fold,
    /// whose value then names the held-out fold. The pass is grouped by the row's fold `f` as
    /// well (after the design's keys) and every model is summed over every fold's rows, so the
    /// sums of fit `m` are those of the groups with `f <> m` (added up by the caller): plain
    /// sums, with no per-model condition, cost half as much as `CASE`-restricted ones.
    Complement(u32),
    /// As [`Variants::Complement`] (grouped by the fold too), but only the scores `u{i}` of
    /// each fit: for fits that step with a fixed curvature matrix, whose sums of products are
    /// the costly part of a Newton pass.
    ComplementScores(u32),
    /// One fit per group, as [`Variants::Single`], with the sums grouped by the row's fold `f`
    /// too (the design must have a fold): the group's sums are those of all its folds, and the
    /// fits leaving one fold out can start from the sums of the others.
    ByFold,
}

impl Variants {
    fn complement(self) -> Option<u32> {
        match self {
            Variants::Single | Variants::ByFold => None,
            Variants::Complement(k) | Variants::ComplementScores(k) => Some(k),
        }
    }
}

/// One Newton step of logistic regressions of the 0/1 extra `t` on the design terms, with each
/// model's coefficients inlined. Per group and variant: `u{i} = Σ w_i (t - p)`,
/// `h{i}_{j} = Σ p (1 - p) w_i w_j` (i ≤ j) for `w = (1, v...)`, `loglik`, `min_p`, `max_p`;
/// for [`Variants::Complement`] the sums are prefixed `m{m}_` and grouped by the fold `f` too;
/// [`Variants::ComplementScores`] keeps only their `u{i}`; [`Variants::ByFold`] is one fit per
/// group with the sums grouped by fold.
pub fn logistic_fits(
    flavor: &Flavor,
    source: &Source,
    filter: Option<&Expr>,
    design: &Design,
    models: &Models,
    variants: Variants,
) -> Result<Built<LogisticLayout>, SqlError> {
    let (pass, layout) = logistic_pass(flavor, source, filter, design, models, variants, None)?;
    Ok(Built { pass, layout })
}

/// A Newton step of one logistic fit per group ([`Variants::Single`] or [`Variants::ByFold`],
/// as [`logistic_fits`]) grouped by the 0/1 extra `t` as well, that also returns per group the
/// centred Gram sums `s{i}`, `g{i}_{j}` of the design's terms followed by the `more` terms
/// (the sums of [`gram`]; `n` is shared): the Gram pass of per-arm outcome models riding in a
/// propensity model's Newton pass, one scan for both. A fit's sums are those of its group's
/// arms added up.
pub fn logistic_fits_with_gram(
    flavor: &Flavor,
    source: &Source,
    filter: Option<&Expr>,
    design: &Design,
    models: &Models,
    variants: Variants,
    more: &[DesignTerm],
) -> Result<Built<LogisticGramLayout>, SqlError> {
    assert!(
        variants.complement().is_none(),
        "the Gram sums ride in a pass of one fit per group"
    );
    let (pass, logistic) =
        logistic_pass(flavor, source, filter, design, models, variants, Some(more))?;
    let gram = GramLayout {
        keys: design.keys.len(),
        terms: design.terms.len() + more.len(),
    };
    Ok(Built {
        pass,
        layout: LogisticGramLayout { logistic, gram },
    })
}

/// The pass of [`logistic_fits`], grouped by arm with the Gram sums of the design's terms and
/// `gram` when that is given ([`logistic_fits_with_gram`]).
fn logistic_pass(
    flavor: &Flavor,
    source: &Source,
    filter: Option<&Expr>,
    design: &Design,
    models: &Models,
    variants: Variants,
    gram: Option<&[DesignTerm]>,
) -> Result<(Pass, LogisticLayout), SqlError> {
    let mut t = PassText::new(flavor);
    let k = design.terms.len();
    let rows = match gram {
        None => design.rows(&mut t)?,
        Some(more) => {
            let mut wide = design.clone();
            wide.terms.extend(more.iter().cloned());
            wide.rows(&mut t)?
        }
    };
    let mut keys = design.key_names();
    if variants.complement().is_some() || variants == Variants::ByFold {
        assert!(
            design.fold.is_some(),
            "grouping by fold needs the design's fold"
        );
        keys.push("f".into());
    }
    if gram.is_some() {
        keys.push("t".into());
    }
    let mut outs = vec![Out::plain("COUNT(*)", "n"), Out::plain("SUM(t)", "n1")];
    let mut etas = Vec::new();
    let list: Vec<(String, Option<u32>)> = match variants.complement() {
        None => {
            etas.push(format!("{} AS eta", predictor(&mut t, models, k)?));
            vec![(String::new(), None)]
        }
        Some(folds) => {
            let sel = &models.selector;
            assert!(
                sel.fold,
                "complement fits select their model by the held-out fold"
            );
            for m in 0..folds {
                let own = Models {
                    selector: Selector {
                        keys: sel.keys.clone(),
                        fold: false,
                    },
                    models: models
                        .models
                        .iter()
                        .filter(|x| x.key.last() == Some(&KeyValue::Number(f64::from(m))))
                        .map(|x| Model {
                            key: x.key[..x.key.len() - 1].to_vec(),
                            coef: x.coef.clone(),
                        })
                        .collect(),
                };
                etas.push(format!("{} AS eta{m}", predictor(&mut t, &own, k)?));
            }
            (0..folds).map(|m| (format!("m{m}_"), Some(m))).collect()
        }
    };
    let mut probs = Vec::new();
    for (pre, m) in &list {
        let (eta, p) = match m {
            None => ("eta".to_string(), "p".to_string()),
            Some(m) => (format!("eta{m}"), format!("p{m}")),
        };
        probs.push(format!("{} AS {p}", SIGMOID.replace("eta", &eta)));
        for i in 0..=k {
            outs.push(Out::plain(
                format!("SUM((t - {p}){})", factor(i)),
                format!("{pre}u{i}"),
            ));
        }
        if let Variants::ComplementScores(_) = variants {
            continue;
        }
        let curvature = format!("{p} * (1.0 - {p})");
        outs.push(Out::Products(products_of(
            &curvature,
            &format!("{pre}h"),
            k,
        )));
        outs.push(Out::plain(
            format!("SUM(t * {eta} - CASE WHEN {eta} > 0 THEN {eta} + LN(1.0 + EXP(-{eta})) ELSE LN(1.0 + EXP({eta})) END)"),
            format!("{pre}loglik"),
        ));
        outs.push(Out::plain(format!("MIN({p})"), format!("{pre}min_p")));
        outs.push(Out::plain(format!("MAX({p})"), format!("{pre}max_p")));
    }
    let mut width = k;
    if let Some(more) = gram {
        width += more.len();
        outs.push(gram_sums(width));
    }
    let from = format!(
        "(SELECT *, {} FROM (SELECT *, {} FROM {}) AS linear_) AS fitted_",
        probs.join(", "),
        etas.join(", "),
        t.rows_table(&rows, "rows_"),
    );
    t.sql = t.aggregate(width, &keys, &outs, &from);
    let layout = LogisticLayout {
        keys: design.keys.len(),
        width: k + 1,
        by_fold: variants.complement().is_some() || variants == Variants::ByFold,
        scores_only: matches!(variants, Variants::ComplementScores(_)),
    };
    let what = match variants {
        Variants::Single => String::new(),
        Variants::ByFold => ", per fold".to_string(),
        Variants::Complement(k) => format!(", {k} cross-fitting fits (each leaving one fold out)"),
        Variants::ComplementScores(k) => {
            let pass = Pass {
                name: "logistic-scores".into(),
                purpose: format!(
                    "scores of {k} cross-fitting propensity fits (each leaving one fold out) at their current coefficients{}, per fold; each fit steps with a fixed curvature matrix",
                    design.per()
                ),
                query: t.query(source, filter)?,
            };
            return Ok((pass, layout));
        }
    };
    let (name, what) = match gram {
        None => ("logistic-step", what),
        Some(_) => (
            "logistic-step-gram",
            format!("{what}, per arm; and the centred Gram matrix of {width} terms per arm"),
        ),
    };
    let pass = Pass {
        name: name.into(),
        purpose: format!(
            "one Newton step of the propensity model: score, information and log-likelihood at the current coefficients{}{what}",
            design.per()
        ),
        query: t.query(source, filter)?,
    };
    Ok((pass, layout))
}

/// Residual moments of per-group linear models of the extra `y`: with each row's model
/// inlined and `e = y - fitted`, per group `n` and `r{i}_{j} = Σ e² w_i w_j` for
/// `w = (1, v...)` (the HC1 meat; `r0_0` is the residual sum of squares).
pub fn residuals(
    flavor: &Flavor,
    source: &Source,
    filter: Option<&Expr>,
    design: &Design,
    models: &Models,
) -> Result<Built<ResidualLayout>, SqlError> {
    residuals_and_pooled(flavor, source, filter, design, models, None)
}

/// [`residuals`], and with `pooled` also the moments of the residuals of that one model over
/// the same groups (`q{i}_{j}`; [`ResidualLayout::pooled_meat`]), whose sum over the groups is
/// the pooled model's meat: the `all` row of a method fitted per segment, in the same pass.
pub fn residuals_and_pooled(
    flavor: &Flavor,
    source: &Source,
    filter: Option<&Expr>,
    design: &Design,
    models: &Models,
    pooled: Option<&Models>,
) -> Result<Built<ResidualLayout>, SqlError> {
    let mut t = PassText::new(flavor);
    let rows = design.rows(&mut t)?;
    let k = design.terms.len();
    let fitted = predictor(&mut t, models, k)?;
    let mut outs = vec![
        Out::plain("COUNT(*)", "n"),
        Out::Products(products_of("e * e", "r", k)),
    ];
    let mut more = String::new();
    if let Some(p) = pooled {
        let fitted = predictor(&mut t, p, k)?;
        more = format!(", y - ({fitted}) AS e_pooled");
        outs.push(Out::Products(products_of("e_pooled * e_pooled", "q", k)));
    }
    let from = format!(
        "(SELECT *, y - ({fitted}) AS e{more} FROM {}) AS residuals_",
        t.rows_table(&rows, "rows_")
    );
    t.sql = t.aggregate(k, &design.key_names(), &outs, &from);
    Ok(Built {
        pass: Pass {
            name: "residuals".into(),
            purpose: format!(
                "residual moments of the outcome models at their fitted coefficients (HC1 meat){}",
                design.per()
            ),
            query: t.query(source, filter)?,
        },
        layout: ResidualLayout {
            keys: design.keys.len(),
            width: k + 1,
        },
    })
}

/// The levels of categorical `columns` with their row counts, per combination of the `by`
/// columns (segments), and with the rows of arm 1 of `arm` (a 0/1 treatment) counted too.
/// Only rows with no NULL in `complete` count. Output: `which` (the column's index), `level`,
/// `b{j}` (the `by` values, as text), `n`, and `n1` with an arm.
pub fn levels(
    flavor: &Flavor,
    source: &Source,
    filter: Option<&Expr>,
    columns: &[String],
    complete: &[String],
    by: &[String],
    arm: Option<&str>,
) -> Result<Built<LevelsLayout>, SqlError> {
    let mut t = PassText::new(flavor);
    let d = flavor.dialect;
    let text = d.text_type();
    let mut branches = Vec::new();
    for (i, c) in columns.iter().enumerate() {
        let p = t.column(c);
        let w = not_null(&mut t, complete);
        let mut items = vec![
            format!("{i} AS which"),
            format!("CAST({p} AS {text}) AS level"),
        ];
        let mut groups = vec![p.clone()];
        for (j, b) in by.iter().enumerate() {
            let q = t.column(b);
            items.push(format!("CAST({q} AS {text}) AS b{j}"));
            groups.push(q);
        }
        items.push("COUNT(*) AS n".into());
        if let Some(a) = arm {
            let x = t.float_column(a);
            items.push(format!("SUM(CASE WHEN {x} = 1 THEN 1 ELSE 0 END) AS n1"));
        }
        branches.push(format!(
            "SELECT {} FROM __src AS src WHERE {w} GROUP BY {}",
            items.join(", "),
            groups.join(", ")
        ));
    }
    let mut outer = vec!["which".to_string(), "level".to_string()];
    outer.extend((0..by.len()).map(|j| format!("b{j}")));
    let order = outer.join(", ");
    outer.push("n".into());
    if arm.is_some() {
        outer.push("n1".into());
    }
    t.sql = format!(
        "SELECT {} FROM ({}) AS levels_ ORDER BY {order}",
        outer.join(", "),
        branches.join(" UNION ALL ")
    );
    Ok(Built {
        pass: Pass {
            name: "levels".into(),
            purpose: format!(
                "the levels of {} and their row counts{}{}",
                columns.join(", "),
                if by.is_empty() {
                    String::new()
                } else {
                    format!(" per {}", by.join(" × "))
                },
                arm.map(|a| format!(", with the rows where {a} = 1"))
                    .unwrap_or_default()
            ),
            query: t.query(source, filter)?,
        },
        layout: LevelsLayout {
            by: by.len(),
            arm: arm.is_some(),
        },
    })
}

/// The quantile cut points of numeric `column` over the rows `filter` keeps: for `i` in
/// `1..bins`, `cut{i}` is the smallest value `v` with `count(x ≤ v) · bins ≥ i · count(x)` (the
/// inverse of the empirical distribution function at `i / bins`: Hyndman & Fan's definition
/// 1, and SQL's `percentile_disc`). It is computed in exact integer arithmetic from the
/// cumulative counts of the distinct values, so every engine finds the same cuts; only the
/// cuts leave the database. Also `n` (rows), `distinct_values`, `lo` and `hi` (minimum and
/// maximum), and `after{i}`: the next larger value after cut `i` (after `lo` for `i = 0`;
/// NULL for none), which tells a bin that holds a single value. Values are compared as 64-bit floats, as [`crate::Binned`] compares them.
pub fn quantile_cuts(
    flavor: &Flavor,
    source: &Source,
    filter: Option<&Expr>,
    column: &str,
    bins: u32,
) -> Result<Built<CutsLayout>, SqlError> {
    let mut t = PassText::new(flavor);
    let x = t.float_column(column);
    let k = t.bind(Bind::Integer(i64::from(bins)));
    let mut items = vec![
        "COUNT(*) AS distinct_values".to_string(),
        "MIN(total) AS n".to_string(),
        "MIN(v) AS lo".to_string(),
        "MAX(v) AS hi".to_string(),
    ];
    for i in 0..bins {
        let at = t.bind(Bind::Integer(i64::from(i)));
        let reached = format!("below * {k} >= total * {at}");
        if i > 0 {
            items.push(format!("MIN(CASE WHEN {reached} THEN v END) AS cut{i}"));
        }
        // The value after the cut (after the smallest value for i = 0): `next_v` rises with
        // `v`, so its minimum over the values at or past the cut is the cut's next value.
        items.push(format!(
            "MIN(CASE WHEN {reached} THEN next_v END) AS after{i}"
        ));
    }
    t.sql = format!(
        "WITH values_ AS (SELECT {x} AS v, COUNT(*) AS c FROM __src AS src WHERE __filter GROUP BY {x}), \
         cumulative_ AS (SELECT v, SUM(c) OVER (ORDER BY v ROWS BETWEEN UNBOUNDED PRECEDING AND CURRENT ROW) AS below, \
         SUM(c) OVER () AS total, LEAD(v) OVER (ORDER BY v) AS next_v FROM values_) \
         SELECT {} FROM cumulative_",
        items.join(", ")
    );
    Ok(Built {
        pass: Pass {
            name: "quantiles".into(),
            purpose: format!(
                "the cut points of segment column `{column}` at the quantiles 1/{bins} .. {}/{bins} of the rows used (from the cumulative counts of its distinct values)",
                bins.saturating_sub(1)
            ),
            query: t.query(source, filter)?,
        },
        layout: CutsLayout { bins },
    })
}

/// A query returning the source's columns and no rows (`LIMIT 0`), for schema checks.
pub fn schema_probe(flavor: &Flavor, source: &Source) -> Result<Pass, SqlError> {
    Ok(Pass {
        name: "schema".into(),
        purpose: "the source's column names and types (reads no rows)".into(),
        query: {
            let mut t = PassText::new(flavor);
            t.sql = "SELECT * FROM __src AS src LIMIT 0".into();
            t.query(source, None)?
        },
    })
}
