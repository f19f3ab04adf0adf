//! The augmented score pass of `doubly-robust`.

use upshot_sql::design::{predictor, propensity_columns, Out, PassText};
use upshot_sql::{Aggregates, Built, Design, Expr, Flavor, Models, ResultError, Source, SqlError};
use upshot_study::Estimand;

/// The nuisance models of the augmented score pass and what it targets.
#[derive(Clone, Copy, Debug)]
pub(crate) struct Nuisances<'a> {
    /// The propensity model(s).
    pub propensity: &'a Models,
    /// The treated arm's outcome model(s).
    pub treated: &'a Models,
    /// The control arm's outcome model(s).
    pub control: &'a Models,
    /// The estimand.
    pub target: Estimand,
    /// Propensities are clipped to `[clip, 1 - clip]`.
    pub clip: f64,
}

/// The augmented (doubly robust) score pass: with each row's cross-fitted propensity and arm
/// outcome models inlined, per group `n`, `n1` (treated rows), `sn = Σ num`, `snn = Σ num²`,
/// `sdn = Σ d·num`, `sd = Σ d` and clipped-row counts, where `num` is the row's score and
/// `d` its weight in the target population (1, `t` or `1 - t`): the estimate is `sn / sd`.
pub(crate) fn augmented_sums(
    flavor: &Flavor,
    source: &Source,
    filter: Option<&Expr>,
    design: &Design,
    models: &Nuisances,
) -> Result<Built<AugmentedLayout>, SqlError> {
    let Nuisances {
        propensity,
        treated,
        control,
        target,
        clip,
    } = *models;
    let mut t = PassText::new(flavor);
    let rows = design.rows(&mut t)?;
    let k = design.terms.len();
    let propensity = propensity_columns(&mut t, propensity, k, clip)?;
    let m1 = predictor(&mut t, treated, k)?;
    let m0 = predictor(&mut t, control, k)?;
    let (num, den) = match target {
        Estimand::Ate => (
            "m1 - m0 + t * (y - m1) / e - (1.0 - t) * (y - m0) / (1.0 - e)",
            "1.0",
        ),
        Estimand::Att => ("t * (y - m0) - (1.0 - t) * e / (1.0 - e) * (y - m0)", "t"),
        Estimand::Atc => (
            "(1.0 - t) * (m1 - y) + t * (1.0 - e) / e * (y - m1)",
            "(1.0 - t)",
        ),
    };
    let mut outs = vec![Out::plain("COUNT(*)", "n")];
    for (alias, e) in [
        ("n1", "SUM(t)"),
        ("sn", "SUM(num)"),
        ("snn", "SUM(num * num)"),
        ("sdn", "SUM(den * num)"),
        ("sd", "SUM(den)"),
        ("clipped1", "SUM(t * (1.0 - inside))"),
        ("clipped0", "SUM((1.0 - t) * (1.0 - inside))"),
        ("min_e", "MIN(e_raw)"),
        ("max_e", "MAX(e_raw)"),
    ] {
        outs.push(Out::plain(e, alias));
    }
    let from = format!(
        "(SELECT *, {num} AS num, {den} AS den FROM {}) AS scores_",
        propensity.over(
            &t.rows_table(&rows, "rows_"),
            &format!(", {m1} AS m1, {m0} AS m0"),
            "nuisance_"
        )
    );
    t.sql = t.aggregate(k, &design.key_names(), &outs, &from);
    Ok(Built {
        pass: t.finish(
        "scores",
        format!(
            "augmented inverse-probability-weighted scores from the cross-fitted propensity and outcome models: sum and sum of squares{}",
            design.per()
        ),
        source,
        filter,
        )?,
        layout: AugmentedLayout,
    })
}

/// The augmented score pass's sums of one group.
#[derive(Clone, Copy, Debug, PartialEq)]
pub(crate) struct AugmentedSums {
    pub n: f64,
    pub n1: f64,
    /// `Σ num`, `Σ num²`, `Σ d·num`, `Σ d` (the estimate is `sn / sd`).
    pub sn: f64,
    pub snn: f64,
    pub sdn: f64,
    pub sd: f64,
    pub clipped1: f64,
    pub clipped0: f64,
    pub min_e: f64,
    pub max_e: f64,
}

/// The layout of the augmented score pass.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) struct AugmentedLayout;

impl AugmentedLayout {
    pub(crate) fn read(&self, a: &Aggregates, row: usize) -> Result<AugmentedSums, ResultError> {
        let g = |n: &str| a.number_or(row, n, 0.0);
        Ok(AugmentedSums {
            n: a.number(row, "n")?,
            n1: g("n1")?,
            sn: g("sn")?,
            snn: g("snn")?,
            sdn: g("sdn")?,
            sd: g("sd")?,
            clipped1: g("clipped1")?,
            clipped0: g("clipped0")?,
            min_e: g("min_e")?,
            max_e: g("max_e")?,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::golden::{self, fold_models};

    /// The augmented pass over the golden fold design for each flavor, with the nuisance
    /// families `models(offset)` (propensity 0, treated 50, control 40).
    fn each_flavor(
        models: &dyn Fn(f64) -> Models,
        target: Estimand,
    ) -> Vec<(&'static str, Flavor, Built<AugmentedLayout>)> {
        let src = Source::table("customers").unwrap();
        let (e, m1, m0) = (models(0.0), models(50.0), models(40.0));
        golden::flavors()
            .into_iter()
            .map(|(dir, f)| {
                let p = augmented_sums(
                    &f,
                    &src,
                    None,
                    &golden::fold_design(),
                    &Nuisances {
                        propensity: &e,
                        treated: &m1,
                        control: &m0,
                        target,
                        clip: 0.01,
                    },
                )
                .unwrap();
                (dir, f, p)
            })
            .collect()
    }

    #[test]
    fn golden_augmented_pass() {
        for (dir, f, p) in each_flavor(&fold_models, Estimand::Att) {
            golden::check(dir, &f, "augmented", &p);
        }
    }

    /// With more models than [`upshot_sql::design::JOINED_MODELS`] (9 segments × 2 folds),
    /// every dialect reads them from one joined table of the three families' coefficients.
    #[test]
    fn golden_augmented_pass_with_joined_models() {
        let many = |offset: f64| {
            let mut m = fold_models(offset);
            m.models = (0..9)
                .flat_map(|b| {
                    (0..2).map(move |f| upshot_sql::Model {
                        key: vec![
                            upshot_sql::KeyValue::Text(format!("band{b}")),
                            upshot_sql::KeyValue::Number(f64::from(f)),
                        ],
                        coef: vec![offset + f64::from(b), 0.5, -0.25 * f64::from(f)],
                    })
                })
                .collect();
            m
        };
        for (dir, f, p) in each_flavor(&many, Estimand::Ate) {
            assert_eq!(
                p.pass.sql().matches("LEFT JOIN (VALUES").count(),
                1,
                "{dir}"
            );
            golden::check(dir, &f, "augmented-joined", &p);
        }
    }
}
