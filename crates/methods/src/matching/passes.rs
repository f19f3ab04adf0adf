//! The matching pass of `match` and the query of its per-row table.
//!
//! Rows with the same logit share their matches, so matching runs on *cells*: the distinct
//! logits of each arm within a segment (with discrete covariates there are few). Both queries
//! are one statement over the same common table expressions, so the table's differences and
//! the pass's sums come from the same matches:
//! - `rows_`: each row's group keys, the linear predictor of its segment's propensity model
//!   (the logit of the score, `s`), `t`, `y` and the unit key `u` when there is one;
//! - `ranked_`: each row with `r`, the rank of its logit among its arm's distinct logits, the
//!   logits rounded to 9 decimals first (`GRID`);
//! - `spread_`: per segment, the pooled standard deviation of the logit over the two arms'
//!   rows, `sdl` (the caliper's unit);
//! - `cells_`: per arm and distinct logit, the rows `n`, `Σ y` and the sample variance of `y`;
//! - `placed_`: each cell with `c1`, `c0`, the treated and untreated cells up to it in the
//!   order `(s, t)`, and its arm's neighbouring cells (`LAG`, `LEAD`), from which `sv` is the
//!   sum of its rows' outcome variances `σ²` (below);
//! - `cand_`: each target cell joined to the `2k` cells of the other arm around its place
//!   (ranks `c − k + 1 … c + k`, an equi-join on the rank: every cell holds a row, so the `k`
//!   nearest rows are in them), with `closer`, the rows of strictly closer cells;
//! - `pairs_`: the matches: every cell with `closer < k` — the `k` nearest rows and every row
//!   tied with the `k`-th (Abadie & Imbens 2006 match all ties), kept within the caliper —
//!   with `m`, the target's number of matched rows;
//! - `targets_`: per matched target cell, the matches' mean outcome (the counterfactual), mean
//!   distance and `m`.
//!
//! `σ²_j` (Abadie & Imbens' estimator with `J` same-arm neighbours, all rows at the smallest
//! distance): `J/(J + 1) · (y_j − ȳ_J)²`. In a cell of `n ≥ 2` rows the neighbours are the
//! cell's other rows, and the cell's sum of `σ²_j` is `n` times its sample variance; a lone
//! row's neighbours are the rows of the nearer adjacent cell of its arm (of both, when equally
//! near).

use upshot_sql::design::{predictor, PassText};
use upshot_sql::{
    Aggregates, Built, Design, Expr, Flavor, Models, Pass, ResultError, Source, SqlError,
};
use upshot_study::Estimand;

/// Logits are compared on a grid of `1 / GRID` (rounded to 9 decimals): distances that are
/// equal in exact arithmetic (two cells one step of an integer covariate either side of a
/// target) are then equal on every engine, whatever its rounding of the linear predictor, and
/// every comparison after it is exact.
const GRID: &str = "1000000000.0";

/// How rows are matched.
pub(crate) struct Shape<'a> {
    /// Segment columns (the design's first keys).
    pub segments: usize,
    /// The unit key column (the design's last key), when there is one.
    pub unit: Option<&'a str>,
    /// Matches per target row (more where rows tie at the k-th distance).
    pub neighbours: u32,
    /// Caliper in pooled standard deviations of the logit.
    pub caliper: Option<f64>,
    /// Which rows are matched: treated (ATT), untreated (ATC) or both (ATE).
    pub estimand: Estimand,
}

/// The segment keys `k0, k1, …, ` with `prefix` (`"a."`), each followed by `, `.
fn keys_of(g: usize, prefix: &str) -> String {
    (0..g).map(|i| format!("{prefix}k{i}, ")).collect()
}

/// `x.k0 = y.k0 AND … AND ` for the segment keys.
fn same_keys(g: usize, x: &str, y: &str) -> String {
    (0..g)
        .map(|i| format!("{x}.k{i} = {y}.k{i} AND "))
        .collect()
}

/// The join of `spread_` (as `sp`) to the cells aliased `on`, by the segment keys.
fn spread_join(g: usize, on: &str) -> String {
    if g == 0 {
        "CROSS JOIN spread_ AS sp".to_string()
    } else {
        let keys = same_keys(g, "sp", on);
        format!("JOIN spread_ AS sp ON {}", keys.trim_end_matches(" AND "))
    }
}

/// The common table expressions (see the module documentation), ending with `targets_`.
fn ctes(
    t: &mut PassText,
    design: &Design,
    models: &Models,
    shape: &Shape,
) -> Result<String, SqlError> {
    let rows = design.rows(t)?;
    let terms = design.terms.len();
    let eta = predictor(t, models, terms)?;
    let f = t.float();
    let g = shape.segments;
    let kt = keys_of(g, "");
    let unit = shape.unit.is_some();
    let u_item = if unit {
        format!(", k{g} AS u")
    } else {
        String::new()
    };
    let u_keep = if unit { ", u" } else { "" };
    let by_segment = if g == 0 {
        String::new()
    } else {
        let k: Vec<String> = (0..g).map(|i| format!("k{i}")).collect();
        format!("PARTITION BY {} ", k.join(", "))
    };
    let group_segments = if g == 0 {
        String::new()
    } else {
        let k: Vec<String> = (0..g).map(|i| format!("k{i}")).collect();
        format!(" GROUP BY {}", k.join(", "))
    };
    let arm = format!("PARTITION BY {kt}t ORDER BY r");
    let running =
        format!("{by_segment}ORDER BY s, t ROWS BETWEEN UNBOUNDED PRECEDING AND CURRENT ROW");
    let k = shape.neighbours;
    let offsets: Vec<String> = (1..=2 * k).map(|j| format!("({j})")).collect();
    let target = match shape.estimand {
        Estimand::Att => " WHERE a.t = 1.0",
        Estimand::Atc => " WHERE a.t = 0.0",
        Estimand::Ate => "",
    };
    let within = match shape.caliper {
        Some(c) => {
            let c = t.number(c, "the caliper")?;
            format!(" AND dist <= {c} * sdl * {GRID}")
        }
        None => String::new(),
    };
    let spread_join = spread_join(g, "a");
    // σ² summed over a cell's rows (module documentation); NULL for a row alone in its arm.
    let near =
        |n: &str, sy: &str| format!("({n} / ({n} + 1.0)) * (sy - {sy} / {n}) * (sy - {sy} / {n})");
    let sigma = format!(
        "CASE WHEN n >= 2.0 THEN n * vy \
         WHEN ps IS NULL AND ns IS NULL THEN NULL \
         WHEN ns IS NULL OR (ps IS NOT NULL AND s - ps < ns - s) THEN {prev} \
         WHEN ps IS NULL OR ns - s < s - ps THEN {next} \
         ELSE {both} END",
        prev = near("pn", "psy"),
        next = near("nn", "nsy"),
        both = near("(pn + nn)", "(psy + nsy)"),
    );
    let design_rows = t.rows_table(&rows, "design_");
    Ok(format!(
        "WITH rows_ AS (SELECT {kt}{eta} AS s, t, y{u_item} FROM {design_rows}), \
         ranked_ AS (SELECT {kt}s, sq, t, y{u_keep}, DENSE_RANK() OVER (PARTITION BY {kt}t ORDER BY sq) AS r \
           FROM (SELECT {kt}s, t, y{u_keep}, CAST(FLOOR(s * {GRID} + 0.5) AS {f}) AS sq FROM rows_) AS grid_), \
         spread_ AS (SELECT {kt}SQRT((VAR_SAMP(CASE WHEN t = 1.0 THEN s END) + VAR_SAMP(CASE WHEN t = 0.0 THEN s END)) / 2.0) AS sdl \
           FROM rows_{group_segments}), \
         cells_ AS (SELECT {kt}t, r, MIN(sq) AS s, CAST(COUNT(*) AS {f}) AS n, SUM(y) AS sy, COALESCE(VAR_SAMP(y), 0.0) AS vy \
           FROM ranked_ GROUP BY {kt}t, r), \
         adjacent_ AS (SELECT {kt}t, r, s, n, sy, vy, \
           COUNT(CASE WHEN t = 1.0 THEN 1 END) OVER ({running}) AS c1, \
           COUNT(CASE WHEN t = 0.0 THEN 1 END) OVER ({running}) AS c0, \
           LAG(s) OVER ({arm}) AS ps, LAG(n) OVER ({arm}) AS pn, LAG(sy) OVER ({arm}) AS psy, \
           LEAD(s) OVER ({arm}) AS ns, LEAD(n) OVER ({arm}) AS nn, LEAD(sy) OVER ({arm}) AS nsy \
           FROM cells_), \
         placed_ AS (SELECT {kt}t, r, s, n, sy, vy, c1, c0, {sigma} AS sv FROM adjacent_), \
         cand_ AS (SELECT {a_keys}a.t, a.r, a.n AS an, b.r AS rm, b.n AS bn, b.sy AS bsy, ABS(a.s - b.s) AS dist, sp.sdl \
           FROM placed_ AS a CROSS JOIN (VALUES {offsets}) AS o_ (j) \
           JOIN placed_ AS b ON {ab}b.t = 1.0 - a.t AND b.r = CASE WHEN a.t = 1.0 THEN a.c0 ELSE a.c1 END - {k} + o_.j \
           {spread_join}{target}), \
         near_ AS (SELECT {kt}t, r, an, rm, bn, bsy, dist, sdl, \
           SUM(bn) OVER (PARTITION BY {kt}t, r ORDER BY dist RANGE BETWEEN UNBOUNDED PRECEDING AND CURRENT ROW) \
             - SUM(bn) OVER (PARTITION BY {kt}t, r, dist) AS closer \
           FROM cand_), \
         pairs_ AS (SELECT {kt}t, r, an, rm, bn, bsy, dist, SUM(bn) OVER (PARTITION BY {kt}t, r) AS m \
           FROM near_ WHERE closer < {k}{within}), \
         targets_ AS (SELECT {kt}t, r, SUM(bsy) / SUM(bn) AS cf, SUM(bn * dist) / SUM(bn) / {GRID} AS distance, MAX(m) AS m \
           FROM pairs_ GROUP BY {kt}t, r)",
        a_keys = keys_of(g, "a."),
        ab = same_keys(g, "b", "a"),
        offsets = offsets.join(", "),
    ))
}

/// ` per (segment, ...)` for the first `g` keys of `design` (the segments; the unit key after
/// them is not a group).
fn per(design: &Design, g: usize) -> String {
    let d = Design {
        keys: design.keys[..g].to_vec(),
        ..design.clone()
    };
    d.per()
}

/// The target rows' condition on `o`.
fn targets_of(estimand: Estimand) -> &'static str {
    match estimand {
        Estimand::Att => "o.t = 1.0",
        Estimand::Atc => "o.t = 0.0",
        Estimand::Ate => "1 = 1",
    }
}

/// The matching pass: per segment, row and match counts by arm, the sums of the targets'
/// differences and their squares, the Abadie–Imbens variance term
/// `Σ (w² − q + 2w·[matched target]) σ²` over the rows used as matches (module documentation),
/// distances, the logit's pooled SD and its range by arm. All from the cells.
pub(crate) fn matching_sums(
    flavor: &Flavor,
    source: &Source,
    filter: Option<&Expr>,
    design: &Design,
    propensity: &Models,
    shape: &Shape,
) -> Result<Built<MatchLayout>, SqlError> {
    let mut t = PassText::new(flavor);
    let with = ctes(&mut t, design, propensity, shape)?;
    let g = shape.segments;
    let kt = keys_of(g, "");
    let o_keys: String = (0..g).map(|i| format!("o.k{i} AS k{i}, ")).collect();
    let group: String = if g == 0 {
        String::new()
    } else {
        let k: Vec<String> = (0..g).map(|i| format!("k{i}")).collect();
        format!(" GROUP BY {0} ORDER BY {0}", k.join(", "))
    };
    let spread_join = spread_join(g, "o");
    t.sql = format!(
        "{with}, \
         used_ AS (SELECT {kt}t AS tt, rm, SUM(an / m) AS w, SUM(an / (m * m)) AS q FROM pairs_ GROUP BY {kt}t, rm) \
         SELECT {kt}SUM(n) AS n, SUM(n * t) AS n1, \
           SUM(CASE WHEN gr IS NULL THEN 0.0 ELSE n * t END) AS matched1, \
           SUM(CASE WHEN gr IS NULL THEN 0.0 ELSE n * (1.0 - t) END) AS matched0, \
           COALESCE(SUM(d), 0.0) AS sd, COALESCE(SUM(dd), 0.0) AS sdd, \
           COALESCE(SUM((w * w - q + CASE WHEN gr IS NULL THEN 0.0 ELSE 2.0 * w END) * sv), 0.0) AS sv, \
           SUM(CASE WHEN w IS NOT NULL AND sv IS NULL THEN n ELSE 0.0 END) AS lone, \
           SUM(CASE WHEN w IS NULL THEN 0.0 ELSE n * t END) AS used1, \
           SUM(CASE WHEN w IS NULL THEN 0.0 ELSE n * (1.0 - t) END) AS used0, \
           COALESCE(MAX(w), 0.0) AS maxw, \
           COALESCE(SUM(n * distance), 0.0) AS sdist, COALESCE(MAX(distance), 0.0) AS maxdist, \
           MAX(sdl) AS sdl, \
           MIN(CASE WHEN t = 1.0 THEN s END) / {GRID} AS lo1, MAX(CASE WHEN t = 1.0 THEN s END) / {GRID} AS hi1, \
           MIN(CASE WHEN t = 0.0 THEN s END) / {GRID} AS lo0, MAX(CASE WHEN t = 0.0 THEN s END) / {GRID} AS hi0 \
         FROM (SELECT {o_keys}o.t, o.s, o.n, o.sv, sp.sdl, g.r AS gr, g.distance, \
           (2.0 * o.t - 1.0) * (o.sy - o.n * g.cf) AS d, \
           (o.n - 1.0) * o.vy + o.n * (o.sy / o.n - g.cf) * (o.sy / o.n - g.cf) AS dd, w_.w, w_.q \
           FROM placed_ AS o {spread_join} \
           LEFT JOIN targets_ AS g ON {jg}g.t = o.t AND g.r = o.r AND {target} \
           LEFT JOIN used_ AS w_ ON {jw}w_.tt = 1.0 - o.t AND w_.rm = o.r) AS cell_{group}",
        jg = same_keys(g, "g", "o"),
        jw = same_keys(g, "w_", "o"),
        target = targets_of(shape.estimand),
    );
    Ok(Built {
        pass: t.finish(
            "match",
            format!(
                "nearest-neighbour matching on the logit of the propensity (1:{}{}, with replacement, ties included): differences, match counts and the Abadie–Imbens variance terms{}",
                shape.neighbours,
                shape
                    .caliper
                    .map_or(String::new(), |c| format!(", caliper {c} SD")),
                per(design, g)
            ),
            source,
            filter,
        )?,
        layout: MatchLayout,
    })
}

/// The per-row table's query: one row per target row (matched or not) with its unit key (under
/// its own name), segment columns (under theirs), `treatment`, `outcome`, `counterfactual` (the
/// matches' mean outcome), `difference` (treated minus untreated outcome; NULL when unmatched),
/// `distance` (the matches' mean distance on the logit), `matches`, `propensity`, `logit`.
pub(crate) fn per_row(
    flavor: &Flavor,
    source: &Source,
    filter: Option<&Expr>,
    design: &Design,
    propensity: &Models,
    shape: &Shape,
    segment_names: &[String],
) -> Result<Pass, SqlError> {
    let mut t = PassText::new(flavor);
    let with = ctes(&mut t, design, propensity, shape)?;
    let g = shape.segments;
    let seg_items: String = (0..g).map(|i| format!(", o.k{i} AS seg{i}_")).collect();
    t.sql = format!(
        "{with} SELECT o.u AS unit_{seg_items}, o.t AS treatment, o.y AS outcome, g.cf AS counterfactual, \
           (2.0 * o.t - 1.0) * (o.y - g.cf) AS difference, g.distance AS distance, \
           COALESCE(g.m, 0.0) AS matches, 1.0 / (1.0 + EXP(-o.s)) AS propensity, o.s AS logit \
         FROM ranked_ AS o LEFT JOIN targets_ AS g ON {jg}g.t = o.t AND g.r = o.r \
         WHERE {target}",
        jg = same_keys(g, "g", "o"),
        target = targets_of(shape.estimand),
    );
    let mut pass = t.finish(
        "rows",
        "one row per matched unit: its outcome, the matches' mean outcome, the difference".into(),
        source,
        filter,
    )?;
    let mut renames = vec![(
        "unit_".to_string(),
        shape.unit.unwrap_or_default().to_string(),
    )];
    for (i, name) in segment_names.iter().enumerate() {
        renames.push((format!("seg{i}_"), name.clone()));
    }
    pass.rename_outputs(&renames, flavor.dialect);
    Ok(pass)
}

/// The matching pass's sums of one segment.
#[derive(Clone, Debug, PartialEq)]
pub(crate) struct MatchSums {
    pub n: f64,
    pub n1: f64,
    pub matched1: f64,
    pub matched0: f64,
    pub sd: f64,
    pub sdd: f64,
    pub sv: f64,
    pub lone: f64,
    pub used1: f64,
    pub used0: f64,
    pub maxw: f64,
    pub sdist: f64,
    pub maxdist: f64,
    pub sdl: f64,
    /// Logit range of the treated rows, then of the untreated.
    pub range1: (f64, f64),
    pub range0: (f64, f64),
}

/// The layout of the matching pass.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) struct MatchLayout;

impl MatchLayout {
    pub(crate) fn read(&self, a: &Aggregates, row: usize) -> Result<MatchSums, ResultError> {
        let g = |n: &str| a.number_or(row, n, 0.0);
        let nan = |n: &str| a.number_or(row, n, f64::NAN);
        Ok(MatchSums {
            n: a.number(row, "n")?,
            n1: g("n1")?,
            matched1: g("matched1")?,
            matched0: g("matched0")?,
            sd: g("sd")?,
            sdd: g("sdd")?,
            sv: g("sv")?,
            lone: g("lone")?,
            used1: g("used1")?,
            used0: g("used0")?,
            maxw: g("maxw")?,
            sdist: g("sdist")?,
            maxdist: g("maxdist")?,
            sdl: nan("sdl")?,
            range1: (nan("lo1")?, nan("hi1")?),
            range0: (nan("lo0")?, nan("hi0")?),
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::golden;
    use upshot_sql::{Design, Key};

    fn design() -> Design {
        let mut d = golden::fold_design();
        d.fold = None;
        d.keys.push(Key::Column("customer_id".into()));
        d
    }

    #[test]
    fn golden_matching_pass_and_rows() {
        let src = Source::table("customers").unwrap();
        let shape = Shape {
            segments: 1,
            unit: Some("customer_id"),
            neighbours: 2,
            caliper: Some(0.2),
            estimand: Estimand::Att,
        };
        for (dir, f) in golden::flavors() {
            let models = Models::single(vec![0.1, 0.2, 0.3]);
            let p = matching_sums(&f, &src, None, &design(), &models, &shape).unwrap();
            golden::check(dir, &f, "match", &p);
            let rows = per_row(
                &f,
                &src,
                None,
                &design(),
                &models,
                &shape,
                &["tenure_band".into()],
            )
            .unwrap();
            golden::check(dir, &f, "match-rows", &rows);
        }
    }
}
