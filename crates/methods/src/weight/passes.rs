//! The weighting pass of `weight`.

use upshot_sql::design::{products_of, propensity_columns, Out, PassText};
use upshot_sql::{Aggregates, Built, Design, Expr, Flavor, Models, ResultError, Source, SqlError};
use upshot_study::Estimand;

/// The weighting pass (Hajek estimator with stacked-equation variance): per group, with the
/// propensity model inlined, sums of the weighted outcome by arm, of squared weights, the
/// derivative terms of the weighted means with respect to the propensity coefficients
/// (`d1_{i}`, `d1y_{i}`, `d0_{i}`, `d0y_{i}`), the cross terms with the logistic score
/// (`c1_{i}`, `c1y_{i}`, `c0_{i}`, `c0y_{i}`), the score's outer product `s{i}_{j}`, and
/// counts of clipped rows by arm. `w = (1, v...)` as in [`logistic_fits`].
pub(crate) fn weighting_sums(
    flavor: &Flavor,
    source: &Source,
    filter: Option<&Expr>,
    design: &Design,
    propensity: &Models,
    target: Estimand,
    clip: f64,
) -> Result<Built<WeightingLayout>, SqlError> {
    let mut t = PassText::new(flavor);
    let rows = design.rows(&mut t)?;
    let k = design.terms.len();
    let propensity = propensity_columns(&mut t, propensity, k, clip)?;
    // Weights of each arm and the derivative factor dw/deta = w'(e) e (1 - e), zero where clipped.
    let (w1, w1d, w0, w0d) = match target {
        Estimand::Ate => (
            "1.0 / e",
            "-(1.0 - e) / e * inside",
            "1.0 / (1.0 - e)",
            "e / (1.0 - e) * inside",
        ),
        Estimand::Att => ("1.0", "0.0", "e / (1.0 - e)", "e / (1.0 - e) * inside"),
        Estimand::Atc => ("(1.0 - e) / e", "-(1.0 - e) / e * inside", "1.0", "0.0"),
    };
    let mut outs = vec![Out::plain("COUNT(*)", "n")];
    let sums: Vec<(String, String)> = vec![
        ("n1".into(), "t".into()),
        ("a1".into(), "t * w1".into()),
        ("b1".into(), "t * w1 * y".into()),
        ("q1".into(), "t * w1 * w1".into()),
        ("q1y".into(), "t * w1 * w1 * y".into()),
        ("q1yy".into(), "t * w1 * w1 * y * y".into()),
        ("a0".into(), "(1.0 - t) * w0".into()),
        ("b0".into(), "(1.0 - t) * w0 * y".into()),
        ("q0".into(), "(1.0 - t) * w0 * w0".into()),
        ("q0y".into(), "(1.0 - t) * w0 * w0 * y".into()),
        ("q0yy".into(), "(1.0 - t) * w0 * w0 * y * y".into()),
        ("clipped1".into(), "t * (1.0 - inside)".into()),
        ("clipped0".into(), "(1.0 - t) * (1.0 - inside)".into()),
    ];
    for (alias, e) in sums {
        outs.push(Out::plain(format!("SUM({e})"), alias));
    }
    outs.push(Out::plain("MIN(e_raw)", "min_e"));
    outs.push(Out::plain("MAX(e_raw)", "max_e"));
    // Per design entry w_i: the derivative terms and the cross terms with the logistic score.
    let linear = [
        ("d1_", "t * w1d"),
        ("d1y_", "t * w1d * y"),
        ("d0_", "(1.0 - t) * w0d"),
        ("d0y_", "(1.0 - t) * w0d * y"),
        ("c1_", "t * w1 * (1.0 - e_raw)"),
        ("c1y_", "t * w1 * (1.0 - e_raw) * y"),
        ("c0_", "(1.0 - t) * w0 * e_raw"),
        ("c0y_", "(1.0 - t) * w0 * e_raw * y"),
    ];
    outs.push(Out::Cross(
        linear
            .iter()
            .map(|(alias, summand)| (alias.to_string(), summand.to_string()))
            .collect(),
    ));
    let score2 = "(t - e_raw) * (t - e_raw)";
    outs.push(Out::Products(products_of(score2, "s", k)));
    // The logistic information at these coefficients: the propensity fit ends on a step
    // without evaluating its final coefficients (`NewtonOptions::confirm`), and its variance
    // term needs the information there.
    outs.push(Out::Products(products_of("e_raw * (1.0 - e_raw)", "h", k)));
    let from = format!(
        "(SELECT *, {w1} AS w1, {w1d} AS w1d, {w0} AS w0, {w0d} AS w0d FROM {}) AS weighted_",
        propensity.over(&t.rows_table(&rows, "rows_"), "", "propensity_")
    );
    t.sql = t.aggregate(k, &design.key_names(), &outs, &from);
    Ok(Built {
        pass: t.finish(
        "weights",
        format!(
            "inverse-probability-weighted outcome sums by arm, with the terms of their stacked-equation variance{}",
            design.per()
        ),
        source,
        filter,
        )?,
        layout: WeightingLayout { width: k + 1 },
    })
}

/// The weighting pass's sums of one group.
#[derive(Clone, Debug, PartialEq)]
pub(crate) struct WeightingSums {
    pub n: f64,
    pub n1: f64,
    pub a1: f64,
    pub b1: f64,
    pub q1: f64,
    pub q1y: f64,
    pub q1yy: f64,
    pub a0: f64,
    pub b0: f64,
    pub q0: f64,
    pub q0y: f64,
    pub q0yy: f64,
    pub clipped1: f64,
    pub clipped0: f64,
    pub min_e: f64,
    pub max_e: f64,
    /// Per design entry `w_i`: the derivative terms of the weighted means.
    pub d1: Vec<f64>,
    pub d1y: Vec<f64>,
    pub d0: Vec<f64>,
    pub d0y: Vec<f64>,
    /// Per design entry: the cross terms with the logistic score.
    pub c1: Vec<f64>,
    pub c1y: Vec<f64>,
    pub c0: Vec<f64>,
    pub c0y: Vec<f64>,
    /// The score's outer product `Σ (t − e)² w_i w_j`, `i ≤ j`, row by row.
    pub s: Vec<f64>,
    /// The logistic information `Σ e (1 − e) w_i w_j`, `i ≤ j`, row by row.
    pub h: Vec<f64>,
}

/// The layout of the weighting pass.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) struct WeightingLayout {
    /// `1 +` design terms.
    pub width: usize,
}

impl WeightingLayout {
    pub(crate) fn read(&self, a: &Aggregates, row: usize) -> Result<WeightingSums, ResultError> {
        let g = |n: &str| a.number_or(row, n, 0.0);
        let v = |prefix: &str| -> Result<Vec<f64>, ResultError> {
            (0..self.width)
                .map(|i| a.number_or(row, &format!("{prefix}{i}"), 0.0))
                .collect()
        };
        let (mut s, mut h) = (Vec::new(), Vec::new());
        for i in 0..self.width {
            for j in i..self.width {
                s.push(g(&format!("s{i}_{j}"))?);
                h.push(g(&format!("h{i}_{j}"))?);
            }
        }
        Ok(WeightingSums {
            n: a.number(row, "n")?,
            n1: g("n1")?,
            a1: g("a1")?,
            b1: g("b1")?,
            q1: g("q1")?,
            q1y: g("q1y")?,
            q1yy: g("q1yy")?,
            a0: g("a0")?,
            b0: g("b0")?,
            q0: g("q0")?,
            q0y: g("q0y")?,
            q0yy: g("q0yy")?,
            clipped1: g("clipped1")?,
            clipped0: g("clipped0")?,
            min_e: g("min_e")?,
            max_e: g("max_e")?,
            d1: v("d1_")?,
            d1y: v("d1y_")?,
            d0: v("d0_")?,
            d0y: v("d0y_")?,
            c1: v("c1_")?,
            c1y: v("c1y_")?,
            c0: v("c0_")?,
            c0y: v("c0y_")?,
            s,
            h,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::golden;

    #[test]
    fn golden_weighting_pass() {
        let src = Source::table("customers").unwrap();
        let mut design = golden::fold_design();
        design.fold = None;
        for (dir, f) in golden::flavors() {
            let p = weighting_sums(
                &f,
                &src,
                None,
                &design,
                &Models::single(vec![0.1, 0.2, 0.3]),
                Estimand::Ate,
                0.01,
            )
            .unwrap();
            golden::check(dir, &f, "weights", &p);
        }
    }
}
