//! The matching pass of `match` and the query of its per-row table.
//!
//! Both are one query over the same common table expressions, so the table's differences and
//! the pass's sums come from the same matches:
//! - `rows_`: each row's group keys, the linear predictor of its segment's propensity model
//!   (the logit of the score, `s`), `t`, `y` and the unit key `u` when there is one;
//! - `ordered_`: each row's rank `r` in its arm by `(s, y, u)`; the running counts `c1`, `c0`
//!   of treated and untreated rows up to it in the order `(s, t, y, u)`; its same-arm
//!   neighbours' scores and outcomes (`LAG`, `LEAD`); the pooled standard deviation of the
//!   logit over the two arms, `sdl` (the caliper's unit);
//! - `cand_`: each target row joined to the `2k` rows of the other arm around its place in the
//!   sorted order (ranks `c − k + 1 … c + k`, with `c` the other arm's rows before it, through an
//!   equi-join on the rank: the `k` nearest are among them), numbered by distance `|s − s'|`
//!   and then by rank;
//! - `pairs_`: the `k` nearest within the caliper, with `m`, the target's number of matches;
//! - `targets_`: per matched target, the matches' mean outcome (the counterfactual) and mean
//!   distance;
//! - `used_`: per row used as a match, `w = Σ 1/m` and `q = Σ 1/m²` over the targets using it.

use upshot_sql::design::{predictor, PassText};
use upshot_sql::{Aggregates, Built, Design, Expr, Flavor, Models, Pass, ResultError, Source, SqlError};
use upshot_study::Estimand;

/// How rows are matched.
pub(crate) struct Shape<'a> {
    /// Segment columns (the design's first keys).
    pub segments: usize,
    /// The unit key column (the design's last key), when there is one.
    pub unit: Option<&'a str>,
    /// Matches per target row.
    pub neighbours: u32,
    /// Caliper in pooled standard deviations of the logit.
    pub caliper: Option<f64>,
    /// Which rows are matched: treated (ATT), untreated (ATC) or both (ATE).
    pub estimand: Estimand,
}

/// The common table expressions (see the module documentation), ending before `used_`.
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
    let keys: Vec<String> = (0..g).map(|i| format!("k{i}")).collect();
    let unit = shape.unit.is_some();
    let key_items = |prefix: &str| -> String {
        keys.iter()
            .map(|k| format!("{prefix}{k}, "))
            .collect::<String>()
    };
    let by_segment = if g == 0 {
        String::new()
    } else {
        format!("PARTITION BY {} ", keys.join(", "))
    };
    let by_arm = format!("PARTITION BY {}t", key_items(""));
    let tiebreak = if unit { ", u" } else { "" };
    let u_item = if unit { format!(", k{g} AS u") } else { String::new() };
    let u_keep = if unit { ", u" } else { "" };
    let arm_order = format!("{by_arm} ORDER BY s, y{tiebreak}");
    let running =
        format!("{by_segment}ORDER BY s, t, y{tiebreak} ROWS BETWEEN UNBOUNDED PRECEDING AND CURRENT ROW");
    let k = shape.neighbours;
    let offsets: Vec<String> = (1..=2 * k).map(|j| format!("({j})")).collect();
    let same_keys: String = keys
        .iter()
        .map(|k| format!("b.{k} = a.{k} AND "))
        .collect();
    let target = match shape.estimand {
        Estimand::Att => " WHERE a.t = 1.0",
        Estimand::Atc => " WHERE a.t = 0.0",
        Estimand::Ate => "",
    };
    let within = match shape.caliper {
        Some(c) => {
            let c = t.number(c, "the caliper")?;
            format!(" AND dist <= {c} * sdl")
        }
        None => String::new(),
    };
    let kt = key_items("");
    Ok(format!(
        "WITH rows_ AS (SELECT {kt}{eta} AS s, t, y{u_item} FROM ({rows}) AS design_), \
         ordered_ AS (SELECT {kt}s, t, y{u_keep}, \
           ROW_NUMBER() OVER ({arm_order}) AS r, \
           COUNT(CASE WHEN t = 1.0 THEN 1 END) OVER ({running}) AS c1, \
           COUNT(CASE WHEN t = 0.0 THEN 1 END) OVER ({running}) AS c0, \
           LAG(s) OVER ({arm_order}) AS ps, LAG(y) OVER ({arm_order}) AS py, \
           LEAD(s) OVER ({arm_order}) AS ns, LEAD(y) OVER ({arm_order}) AS ny, \
           SQRT((VAR_SAMP(CASE WHEN t = 1.0 THEN s END) OVER ({by_segment}) + VAR_SAMP(CASE WHEN t = 0.0 THEN s END) OVER ({by_segment})) / 2.0) AS sdl \
           FROM rows_), \
         cand_ AS (SELECT {a_keys}a.t, a.r, b.r AS rm, b.y AS ym, ABS(a.s - b.s) AS dist, a.sdl, \
           ROW_NUMBER() OVER (PARTITION BY {a_keys}a.t, a.r ORDER BY ABS(a.s - b.s), b.r) AS nth \
           FROM ordered_ AS a CROSS JOIN (VALUES {offsets}) AS o_ (j) \
           JOIN ordered_ AS b ON {same_keys}b.t = 1.0 - a.t AND b.r = CASE WHEN a.t = 1.0 THEN a.c0 ELSE a.c1 END - {k} + o_.j{target}), \
         pairs_ AS (SELECT {kt}t, r, rm, ym, dist, CAST(COUNT(*) OVER (PARTITION BY {kt}t, r) AS {f}) AS m \
           FROM cand_ WHERE nth <= {k}{within}), \
         targets_ AS (SELECT {kt}t, r, AVG(ym) AS cf, AVG(dist) AS distance, MAX(m) AS m FROM pairs_ GROUP BY {kt}t, r)",
        a_keys = key_items("a."),
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

/// `o.k0 = g.k0 AND ... AND ` for the segment keys.
fn join_keys(g: usize, other: &str) -> String {
    (0..g).map(|i| format!("{other}.k{i} = o.k{i} AND ")).collect()
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
/// `Σ (w² − q + 2w·[matched target]) σ²` over the rows used as matches (σ² from each row's
/// nearest same-arm neighbour by score: `(y − y')² / 2`), distances, the logit's pooled SD and
/// range by arm.
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
    let kt: String = (0..g).map(|i| format!("k{i}, ")).collect();
    let o_keys: String = (0..g).map(|i| format!("o.k{i} AS k{i}, ")).collect();
    let group: String = if g == 0 {
        String::new()
    } else {
        let k: Vec<String> = (0..g).map(|i| format!("k{i}")).collect();
        format!(" GROUP BY {0} ORDER BY {0}", k.join(", "))
    };
    let sigma2 = "CASE WHEN o.ps IS NULL AND o.ns IS NULL THEN NULL \
        WHEN o.ns IS NULL OR (o.ps IS NOT NULL AND o.s - o.ps <= o.ns - o.s) THEN 0.5 * (o.y - o.py) * (o.y - o.py) \
        ELSE 0.5 * (o.y - o.ny) * (o.y - o.ny) END";
    t.sql = format!(
        "{with}, \
         used_ AS (SELECT {kt}t AS tt, rm, SUM(1.0 / m) AS w, SUM(1.0 / (m * m)) AS q FROM pairs_ GROUP BY {kt}t, rm) \
         SELECT {kt}COUNT(*) AS n, SUM(t) AS n1, \
           SUM(CASE WHEN gr IS NULL THEN 0.0 ELSE t END) AS matched1, \
           SUM(CASE WHEN gr IS NULL THEN 0.0 ELSE 1.0 - t END) AS matched0, \
           COALESCE(SUM(d), 0.0) AS sd, COALESCE(SUM(d * d), 0.0) AS sdd, \
           COALESCE(SUM((w * w - q + CASE WHEN gr IS NULL THEN 0.0 ELSE 2.0 * w END) * sigma2), 0.0) AS sv, \
           SUM(CASE WHEN w IS NOT NULL AND sigma2 IS NULL THEN 1.0 ELSE 0.0 END) AS lone, \
           SUM(CASE WHEN w IS NULL THEN 0.0 ELSE t END) AS used1, \
           SUM(CASE WHEN w IS NULL THEN 0.0 ELSE 1.0 - t END) AS used0, \
           COALESCE(MAX(w), 0.0) AS maxw, COALESCE(SUM(w), 0.0) AS sw, \
           COALESCE(SUM(distance), 0.0) AS sdist, COALESCE(MAX(distance), 0.0) AS maxdist, \
           MAX(sdl) AS sdl, \
           MIN(CASE WHEN t = 1.0 THEN s END) AS lo1, MAX(CASE WHEN t = 1.0 THEN s END) AS hi1, \
           MIN(CASE WHEN t = 0.0 THEN s END) AS lo0, MAX(CASE WHEN t = 0.0 THEN s END) AS hi0 \
         FROM (SELECT {o_keys}o.t, o.s, o.sdl, g.r AS gr, g.distance, \
           (2.0 * o.t - 1.0) * (o.y - g.cf) AS d, w_.w, w_.q, {sigma2} AS sigma2 \
           FROM ordered_ AS o \
           LEFT JOIN targets_ AS g ON {jg}g.t = o.t AND g.r = o.r AND {target} \
           LEFT JOIN used_ AS w_ ON {jw}w_.tt = 1.0 - o.t AND w_.rm = o.r) AS unit_{group}",
        jg = join_keys(g, "g"),
        jw = join_keys(g, "w_"),
        target = targets_of(shape.estimand),
    );
    Ok(Built {
        pass: t.finish(
            "match",
            format!(
                "nearest-neighbour matching on the logit of the propensity (1:{}{}, with replacement): differences, match counts and the Abadie–Imbens variance terms{}",
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
/// `distance` (the matches' mean distance on the logit), `matches`, `propensity`.
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
         FROM ordered_ AS o LEFT JOIN targets_ AS g ON {jg}g.t = o.t AND g.r = o.r \
         WHERE {target}",
        jg = join_keys(g, "g"),
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
    pub sw: f64,
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
            sw: g("sw")?,
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
