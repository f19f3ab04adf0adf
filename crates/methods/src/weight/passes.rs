//! The weighting pass of `weight`.

use upshot_sql::design::{factor, products_of, propensity_columns, Out, PassText};
use upshot_sql::{Design, Expr, Flavor, Models, Pass, Source, SqlError};
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
) -> Result<Pass, SqlError> {
    let mut t = PassText::new(flavor);
    let rows = design.rows(&mut t)?;
    let k = design.terms.len();
    let (eta, e) = propensity_columns(&mut t, propensity, k, clip)?;
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
    for i in 0..=k {
        let w = factor(i);
        for (alias, summand) in linear {
            outs.push(Out::plain(
                format!("SUM({summand}{w})"),
                format!("{alias}{i}"),
            ));
        }
    }
    let score2 = "(t - e_raw) * (t - e_raw)";
    outs.push(Out::Products(products_of(score2, "s", k)));
    let from = format!(
        "(SELECT *, {w1} AS w1, {w1d} AS w1d, {w0} AS w0, {w0d} AS w0d FROM (SELECT *, {e} FROM (SELECT *, {eta} FROM ({rows}) AS rows_) AS linear_) AS propensity_) AS weighted_"
    );
    t.sql = t.aggregate(k, &design.key_names(), &outs, &from);
    t.finish(
        "weights",
        format!(
            "inverse-probability-weighted outcome sums by arm, with the terms of their stacked-equation variance{}",
            design.per()
        ),
        source,
        filter,
    )
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
