//! Estimation over strata from a cell table (per segment, stratum and arm: rows, Σy, Σy²):
//! strata lacking an arm are excluded and reported (with their rows per arm); the rest are
//! combined into the estimand's weighted difference of means. Used by `stratify` (strata of the
//! adjustment columns) and `coarsen` (strata of coarsened covariates). Cell variances are
//! unbiased (divisor n − 1); a cell with one row of an arm borrows that arm's pooled
//! within-stratum variance.

use crate::combine::{finish, segment, segment_label, Part};
use crate::prepare::Setup;
use crate::read::by_segment;
use crate::{Estimand, Estimate, MethodError, Outcome};
use upshot_sql::{Aggregates, CellsLayout, KeyValue};

/// Cell counts beyond this get a warning: most cells then hold a handful of rows.
pub const MANY_CELLS: usize = 1000;

#[derive(Default, Clone, Copy)]
struct Arm {
    n: f64,
    sy: f64,
    syy: f64,
}

impl Arm {
    fn mean(&self) -> f64 {
        self.sy / self.n
    }
    /// Within-cell sum of squared deviations.
    fn ss(&self) -> f64 {
        (self.syy - self.sy * self.sy / self.n).max(0.0)
    }
    /// Unbiased variance of the cell (divisor n - 1); a single-row cell borrows `pooled`.
    fn var(&self, pooled: f64) -> f64 {
        if self.n > 1.0 {
            self.ss() / (self.n - 1.0)
        } else {
            pooled
        }
    }
}

/// The arm's pooled within-stratum variance over the strata with at least two of its rows.
fn pooled(kept: &[&[Arm; 2]], arm: usize) -> f64 {
    let (ss, df) = kept
        .iter()
        .filter(|a| a[arm].n > 1.0)
        .fold((0.0, 0.0), |(ss, df), a| {
            (ss + a[arm].ss(), df + a[arm].n - 1.0)
        });
    if df > 0.0 {
        ss / df
    } else {
        0.0
    }
}

/// The estimate from a cell table whose keys are the segments, `nstrata` stratum keys and the
/// treatment; `word` names the strata in messages ("strata", "coarsened cells").
pub(crate) fn estimate(
    s: &Setup,
    layout: &CellsLayout,
    a: &Aggregates,
    nstrata: usize,
    word: &str,
) -> Result<Outcome, MethodError> {
    let spec = s.spec;
    let nseg = spec.segments.len();
    let mut out = Outcome {
        estimates: vec![],
        diagnostics: Default::default(),
        rows: None,
    };
    if a.rows.len() > MANY_CELLS {
        out.diagnostics.warnings.push(format!(
            "the cell table has {} cells ({word} × arms{}): many {word} hold few rows, so estimates are noisy and many may lack an arm; consider --method doubly-robust or regress, or coarser adjustment columns",
            a.rows.len(),
            if nseg > 0 { " × segments" } else { "" }
        ));
    }
    let mut parts = Vec::new();
    let mut excluded_total = 0.0;
    for (seg_key, rows) in by_segment(a, nseg)? {
        // strata of this segment: key values -> arms
        let mut strata: Vec<(Vec<KeyValue>, [Arm; 2])> = Vec::new();
        for row in rows {
            let mut k = layout.keys(a, row)?;
            let arm = k.pop();
            let k = k.split_off(nseg);
            debug_assert_eq!(k.len(), nstrata);
            let (n, sy, syy) = layout.sums(a, row)?;
            let cell = Arm { n, sy, syy };
            let idx = usize::from(arm == Some(KeyValue::Number(1.0)));
            match strata.iter_mut().find(|(v, _)| *v == k) {
                Some((_, arms)) => arms[idx] = cell,
                None => {
                    let mut arms = [Arm::default(); 2];
                    arms[idx] = cell;
                    strata.push((k, arms));
                }
            }
        }
        let kept: Vec<&[Arm; 2]> = strata
            .iter()
            .filter(|(_, a)| a[0].n > 0.0 && a[1].n > 0.0)
            .map(|(_, a)| a)
            .collect();
        let all_rows: f64 = strata.iter().map(|(_, a)| a[0].n + a[1].n).sum();
        let kept_rows: f64 = kept.iter().map(|a| a[0].n + a[1].n).sum();
        let excluded = all_rows - kept_rows;
        if kept.is_empty() {
            return Err(MethodError::Input(format!(
                "{}: none of the {word} has both treated and untreated rows, so nothing can be compared; check the treatment coding, or use fewer or coarser adjustment columns",
                segment_label(s, &seg_key)
            )));
        }
        if excluded > 0.0 {
            excluded_total += excluded;
            let lacking = strata.len() - kept.len();
            let arm_rows = |arm: usize, of: &mut dyn Iterator<Item = &[Arm; 2]>| {
                of.map(|a| a[arm].n).sum::<f64>()
            };
            let (t_all, c_all) = (
                arm_rows(1, &mut strata.iter().map(|x| &x.1)),
                arm_rows(0, &mut strata.iter().map(|x| &x.1)),
            );
            let (t_kept, c_kept) = (
                arm_rows(1, &mut kept.iter().copied()),
                arm_rows(0, &mut kept.iter().copied()),
            );
            out.diagnostics.notes.push(format!(
                "{}: {lacking} of {} {word} lack treated or untreated rows and are excluded: {excluded} rows ({:.1}% of its rows; unmatched: {} of {t_all} treated, {} of {c_all} untreated); the estimate describes the remaining {word}",
                segment_label(s, &seg_key),
                strata.len(),
                100.0 * excluded / all_rows,
                t_all - t_kept,
                c_all - c_kept
            ));
        }
        let size = |a: &[Arm; 2]| match spec.estimand {
            Estimand::Ate => a[0].n + a[1].n,
            Estimand::Att => a[1].n,
            Estimand::Atc => a[0].n,
        };
        let total: f64 = kept.iter().map(|a| size(a)).sum();
        let tau: f64 = kept
            .iter()
            .map(|a| size(a) / total * (a[1].mean() - a[0].mean()))
            .sum();
        let (p0, p1) = (pooled(&kept, 0), pooled(&kept, 1));
        let var: f64 = kept
            .iter()
            .map(|a| {
                let w = size(a) / total;
                let t = a[1].mean() - a[0].mean();
                w * w * (a[1].var(p1) / a[1].n + a[0].var(p0) / a[0].n)
                    + w * (t - tau).powi(2) / total
            })
            .sum();
        let mut e = Estimate::new(spec, &segment(s, &seg_key), tau, var.sqrt());
        e.n_treated = Some(kept.iter().map(|a| a[1].n).sum());
        e.n_control = Some(kept.iter().map(|a| a[0].n).sum());
        e.n_used = kept_rows;
        parts.push(Part {
            estimate: e,
            target_size: total,
        });
    }
    if excluded_total > 0.0 {
        out.diagnostics
            .rows_excluded_other
            .push((format!("in {word} lacking an arm"), excluded_total));
    }
    out.estimates = finish(s, parts);
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::{pooled, Arm};

    /// Cell variances with divisor n − 1; a single-row cell borrows the arm's pooled variance.
    #[test]
    fn cell_variances() {
        let ys = [2.0, 4.0, 9.0];
        let a = Arm {
            n: 3.0,
            sy: ys.iter().sum(),
            syy: ys.iter().map(|y| y * y).sum(),
        };
        assert!((a.mean() - 5.0).abs() < 1e-15);
        // (9 + 1 + 16) / 2
        assert!((a.var(99.0) - 13.0).abs() < 1e-12);
        let single = Arm {
            n: 1.0,
            sy: 3.0,
            syy: 9.0,
        };
        assert_eq!(single.var(7.5), 7.5);
        let b = Arm {
            n: 2.0,
            sy: 2.0,
            syy: 2.0,
        };
        // pooled over the cells with ≥ 2 rows: (26 + 0) / (2 + 1)
        let cells = [[a, a], [b, b], [single, single]];
        let kept: Vec<&[Arm; 2]> = cells.iter().collect();
        assert!((pooled(&kept, 1) - 26.0 / 3.0).abs() < 1e-12);
    }
}
