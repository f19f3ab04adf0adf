//! The score pass of `partial-out`.

use upshot_sql::design::{predictor, Out, PassText};
use upshot_sql::{Aggregates, Built, Design, Expr, Flavor, Models, ResultError, Source, SqlError};

/// The partialled-out score pass: with each row's cross-fitted linear models of the treatment
/// (`gt`) and the outcome (`gy`) inlined and residuals `rt = t - gt`, `ry = y - gy`, per group
/// `n`, `stt = Σ rt²`, `sty = Σ rt ry`, `s22 = Σ rt² ry²`, `s31 = Σ rt³ ry`, `s40 = Σ rt⁴`.
pub(crate) fn partial_out_sums(
    flavor: &Flavor,
    source: &Source,
    filter: Option<&Expr>,
    design: &Design,
    treatment: &Models,
    outcome: &Models,
) -> Result<Built<PartialOutLayout>, SqlError> {
    let mut t = PassText::new(flavor);
    let rows = design.rows(&mut t)?;
    let k = design.terms.len();
    let gt = predictor(&mut t, treatment, k)?;
    let gy = predictor(&mut t, outcome, k)?;
    let mut outs = vec![Out::plain("COUNT(*)", "n")];
    for (alias, e) in [
        ("stt", "rt * rt"),
        ("sty", "rt * ry"),
        ("s22", "rt * rt * ry * ry"),
        ("s31", "rt * rt * rt * ry"),
        ("s40", "rt * rt * rt * rt"),
    ] {
        outs.push(Out::plain(format!("SUM({e})"), alias));
    }
    let from = format!(
        "(SELECT *, t - ({gt}) AS rt, y - ({gy}) AS ry FROM {}) AS residuals_",
        t.rows_table(&rows, "rows_")
    );
    t.sql = t.aggregate(k, &design.key_names(), &outs, &from);
    Ok(Built {
        pass: t.finish(
        "scores",
        format!(
            "residuals of treatment and outcome on the covariates (cross-fitted models): their sums of products{}",
            design.per()
        ),
        source,
        filter,
        )?,
        layout: PartialOutLayout,
    })
}

/// The layout of the partialled-out score pass: per group `n`, `Σ rt²`, `Σ rt ry`,
/// `Σ rt² ry²`, `Σ rt³ ry`, `Σ rt⁴`.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) struct PartialOutLayout;

impl PartialOutLayout {
    pub(crate) fn read(&self, a: &Aggregates, row: usize) -> Result<super::Sums, ResultError> {
        let g = |n: &str| a.number_or(row, n, 0.0);
        Ok(super::Sums {
            n: a.number(row, "n")?,
            stt: g("stt")?,
            sty: g("sty")?,
            s22: g("s22")?,
            s31: g("s31")?,
            s40: g("s40")?,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::golden::{self, fold_models};

    #[test]
    fn golden_partial_out_pass() {
        let src = Source::table("customers").unwrap();
        for (dir, f) in golden::flavors() {
            let p = partial_out_sums(
                &f,
                &src,
                None,
                &golden::fold_design(),
                &fold_models(0.3),
                &fold_models(60.0),
            )
            .unwrap();
            golden::check(dir, &f, "partial-out", &p);
        }
    }
}
