//! `coarsen`: coarsened exact matching (Iacus, King & Porro 2012). Numeric covariates are cut
//! into equal-width bins, categorical ones kept as they are; rows match exactly on the
//! resulting cells, one cells pass counts them per arm, cells without both arms are dropped
//! (their rows reported per arm as unmatched), and the matched cells give the estimand's
//! weighted difference of means — the CEM-weighted difference in means — through the shared
//! strata arithmetic (`strata`).
//!
//! Binning rule (automatic): Sturges' rule, `⌈log₂ n⌉ + 1` equal-width bins between the
//! column's minimum and maximum over the rows used (the profile pass gives all three, so the
//! bins cost no pass); `--coarsen COLUMN=K` sets K for a column. A column whose values are
//! integers spanning no more than the bins gets one bin per value instead (no cell splits a
//! value, none is empty by construction).

use crate::prepare::{is_categorical, modelled, Setup};
use crate::{ask_unchecked, MethodError, Outcome, Runner};
use upshot_sql::{binned_cells, Built, Cell, CellKey, CellsLayout, Pass};

/// Sturges' rule: `⌈log₂ n⌉ + 1` bins for n values.
pub fn sturges(n: f64) -> u32 {
    (n.max(1.0).log2().ceil() as u32) + 1
}

/// The cell keys: segments, the coarsened covariates, the treatment.
fn keys(s: &Setup) -> Result<Vec<CellKey>, MethodError> {
    let spec = s.spec;
    let mut keys: Vec<CellKey> = spec.segments.iter().cloned().map(CellKey::Column).collect();
    for c in modelled(spec) {
        if is_categorical(spec, &c) {
            keys.push(CellKey::Column(c));
            continue;
        }
        let p = s
            .column(&c)
            .ok_or_else(|| MethodError::Engine(format!("`{c}` was not profiled")))?;
        let (Cell::Number(lo), Cell::Number(hi)) = (&p.min, &p.max) else {
            return Err(MethodError::Input(format!(
                "covariate `{c}` has no numeric values to bin; declare it categorical, or give it numbers"
            )));
        };
        let (lo, hi) = (*lo, *hi);
        let asked = spec.bins.iter().find(|(b, _)| *b == c).map(|(_, k)| *k);
        let integral = lo.fract() == 0.0 && hi.fract() == 0.0 && hi - lo < 1e6;
        let bins = asked.unwrap_or_else(|| sturges(p.non_null));
        if hi == lo {
            keys.push(CellKey::Bins {
                column: c,
                low: lo,
                width: 1.0,
                bins: 1,
            });
        } else if asked.is_none() && integral && hi - lo + 1.0 <= f64::from(bins) {
            // One bin per integer value.
            keys.push(CellKey::Bins {
                column: c,
                low: lo,
                width: 1.0,
                bins: (hi - lo) as u32 + 1,
            });
        } else {
            keys.push(CellKey::Bins {
                column: c,
                low: lo,
                width: (hi - lo) / f64::from(bins),
                bins,
            });
        }
    }
    keys.push(CellKey::Column(spec.treatment.clone()));
    Ok(keys)
}

fn cells_pass(s: &Setup) -> Result<Built<CellsLayout>, MethodError> {
    let spec = s.spec;
    Ok(binned_cells(
        &spec.flavor,
        &spec.source,
        s.filter.as_ref(),
        &keys(s)?,
        &spec.outcome,
    )?)
}

pub(crate) fn passes(s: &Setup) -> Result<Vec<Pass>, MethodError> {
    Ok(vec![cells_pass(s)?.pass])
}

pub(crate) fn run(s: &Setup, r: &mut dyn Runner) -> Result<Outcome, MethodError> {
    let spec = s.spec;
    for (c, _) in &spec.bins {
        if !modelled(spec).contains(c) || is_categorical(spec, c) {
            return Err(MethodError::Input(format!(
                "bins were given for `{c}`, which is not a numeric covariate of this question (its numeric covariates: {})",
                modelled(spec)
                    .into_iter()
                    .filter(|m| !is_categorical(spec, m))
                    .collect::<Vec<_>>()
                    .join(", ")
            )));
        }
    }
    let keys = keys(s)?;
    let cp = cells_pass(s)?;
    let a = ask_unchecked(r, &cp)?;
    let mut out =
        crate::strata::estimate(s, &cp.layout, &a, modelled(spec).len(), "coarsened cells")?;
    let bins: Vec<String> = keys
        .iter()
        .filter_map(|k| match k {
            CellKey::Bins {
                column,
                low,
                width,
                bins,
            } => Some(format!(
                "{column}: {bins} bin{} of width {width} from {low}",
                if *bins == 1 { "" } else { "s" }
            )),
            CellKey::Column(_) => None,
        })
        .collect();
    if !bins.is_empty() {
        out.diagnostics
            .notes
            .push(format!("coarsened: {}", bins.join("; ")));
    }
    Ok(out)
}

estimator!(Coarsen, crate::Method::Coarsen);

#[cfg(test)]
mod tests {
    use super::sturges;
    use crate::golden;
    use upshot_sql::{binned_cells, CellKey, Source};

    /// The cells pass over coarsened keys, in every rendering.
    #[test]
    fn golden_coarsened_cells() {
        let src = Source::table("customers").unwrap();
        let keys = [
            CellKey::Column("tenure_band".into()),
            CellKey::Bins {
                column: "prior orders".into(),
                low: 0.0,
                width: 2.5,
                bins: 4,
            },
            CellKey::Column("zone".into()),
            CellKey::Column("voucher".into()),
        ];
        for (dir, f) in golden::flavors() {
            let p = binned_cells(&f, &src, None, &keys, "spend_30d").unwrap();
            golden::check(dir, &f, "cells-coarsened", &p.pass);
        }
    }

    /// Sturges' rule: ⌈log₂ n⌉ + 1 (n = 5000: 13 + 1; n = 1024: 10 + 1).
    #[test]
    fn sturges_rule() {
        assert_eq!(sturges(5000.0), 14);
        assert_eq!(sturges(1024.0), 11);
        assert_eq!(sturges(1.0), 1);
    }
}
