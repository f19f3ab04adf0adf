//! `match`: nearest-neighbour matching on the logit of the propensity score, 1:k with
//! replacement, optionally within a caliper, for ATT, ATC or ATE (Abadie & Imbens 2006).
//!
//! The propensity is the logistic model of `weight` (Newton over aggregate passes, per
//! segment). One more query matches inside the database (see `passes.rs`): each target row's
//! `k` nearest rows of the other arm by the logit, and every row tied with the `k`-th — as
//! Abadie & Imbens define the match set, so no order among tied rows decides anything and every
//! engine finds the same matches. Only sums leave the database; with a unit key the same query,
//! ending in one row per target, becomes the per-row table (`--rows-into`), whose mean
//! difference is the printed estimate.
//!
//! Variance: Abadie & Imbens (2006), with the matching metric the logit and `m_i`, the number
//! of matches of target `i` (more than `k` with ties, fewer within a caliper). With
//! `w_j = Σ 1/m_i` and `q_j = Σ 1/m_i²` over the targets `i` that use row `j`, the estimate is
//! `τ = (1/N) Σ_i d_i` over the `N` matched targets, and
//! `V = (1/N²) [Σ_i (d_i − τ)² + Σ_j (w_j² − q_j + 2 w_j·[j is a matched target]) σ²_j]`,
//! with `σ²_j` from `j`'s nearest same-arm rows by score (passes.rs). With `m_i = M` this is
//! their `V̂` for ATE (`(K/M)² + (2M − 1)K/M²`) and for ATT (`K(K − 1)/M²`). The score is
//! treated as known: for ATE that is conservative (Abadie & Imbens 2016); docs/methods.md says
//! what the coverage benchmark measured.

mod passes;

use crate::combine::{finish, segment, segment_label, Part};
use crate::crossfit::segment_row_design;
use crate::models::{per_segment, placeholder_segments};
use crate::prepare::Setup;
use crate::propensity::{fit_propensity, logistic_pass, Finish};
use crate::read::row_of;
use crate::{ask, Estimand, Estimate, MethodError, Outcome, Runner};
use passes::{matching_sums, per_row, MatchLayout, MatchSums, Shape};
use upshot_sql::{Built, Design, Key, Models, Pass};

/// Most neighbours per row.
pub const MAX_NEIGHBOURS: u32 = 50;

fn design(s: &Setup) -> Design {
    let mut d = segment_row_design(s);
    if let Some(u) = &s.spec.unit {
        d.keys.push(Key::Column(u.clone()));
    }
    d
}

fn shape<'a>(s: &'a Setup) -> Shape<'a> {
    Shape {
        segments: s.spec.segments.len(),
        unit: s.spec.unit.as_deref(),
        neighbours: s.spec.matching.neighbours,
        caliper: s.spec.matching.caliper,
        estimand: s.spec.estimand,
    }
}

fn match_pass(s: &Setup, models: &Models) -> Result<Built<MatchLayout>, MethodError> {
    let spec = s.spec;
    Ok(matching_sums(
        &spec.flavor,
        &spec.source,
        s.filter.as_ref(),
        &design(s),
        models,
        &shape(s),
    )?)
}

/// The per-row table's query (with a unit key), for the models fitted.
fn rows_query(s: &Setup, models: &Models) -> Result<Option<Pass>, MethodError> {
    if s.spec.unit.is_none() {
        return Ok(None);
    }
    let spec = s.spec;
    Ok(Some(per_row(
        &spec.flavor,
        &spec.source,
        s.filter.as_ref(),
        &design(s),
        models,
        &shape(s),
        &spec.segments,
    )?))
}

pub(crate) fn passes(s: &Setup) -> Result<Vec<Pass>, MethodError> {
    let segs = placeholder_segments(s);
    let zero = vec![vec![0.0; s.terms.len() + 1]];
    let models = per_segment(&segs, &zero);
    Ok(vec![
        logistic_pass(s, &models)?.pass,
        match_pass(s, &models)?.pass,
    ])
}

/// One segment's estimate and variance from the pass's sums, with the number of matched
/// targets; `None` when no target row found a match.
pub(crate) fn estimate_of(m: &MatchSums) -> Option<(f64, f64, f64)> {
    let n = m.matched1 + m.matched0;
    if n == 0.0 {
        return None;
    }
    let tau = m.sd / n;
    let spread = (m.sdd - m.sd * tau).max(0.0);
    Some((tau, (spread + m.sv) / (n * n), n))
}

/// A number as a person would write it: plain, or in scientific notation when very small.
fn short(x: f64) -> String {
    if x != 0.0 && x.abs() < 1e-3 {
        format!("{x:.3e}")
    } else {
        format!("{}", (x * 1e4).round() / 1e4)
    }
}

/// The target rows' arm as a word and a space (`"treated "`), or nothing for ATE.
fn targets_word(t: Estimand) -> &'static str {
    match t {
        Estimand::Att => "treated ",
        Estimand::Atc => "untreated ",
        Estimand::Ate => "",
    }
}

pub(crate) fn run(s: &Setup, r: &mut dyn Runner) -> Result<Outcome, MethodError> {
    let spec = s.spec;
    let (segs, fits) = fit_propensity(s, r, Finish::Confirmed)?;
    let coefs: Vec<Vec<f64>> = fits.iter().map(|f| f.coef.clone()).collect();
    let models = per_segment(&segs, &coefs);
    let mp = match_pass(s, &models)?;
    let a = ask(r, &mp)?;
    let mut out = Outcome::default();
    let mut parts = Vec::new();
    let k = spec.matching.neighbours;
    for key in &segs {
        let row = row_of(&a, key)?;
        let m = mp.layout.read(&a, row)?;
        let label = segment_label(s, key);
        let (n1, n0) = (m.n1, m.n - m.n1);
        let (targets1, targets0) = match spec.estimand {
            Estimand::Att => (n1, 0.0),
            Estimand::Atc => (0.0, n0),
            Estimand::Ate => (n1, n0),
        };
        let (un1, un0) = (targets1 - m.matched1, targets0 - m.matched0);
        let caliper = spec.matching.caliper.map(|c| (short(c), short(c * m.sdl)));
        let Some((tau, var, matched)) = estimate_of(&m) else {
            return Err(MethodError::Input(match caliper {
                Some((c, width)) => format!(
                    "{label}: the caliper of {c} SD of the logit ({width}) matches nothing: no {}row has a row of the other arm that close (treated logits from {:.3} to {:.3}, untreated from {:.3} to {:.3}); widen --caliper, or leave it out",
                    targets_word(spec.estimand),
                    m.range1.0, m.range1.1, m.range0.0, m.range0.1
                ),
                None => format!("{label}: no row could be matched; each arm needs rows"),
            }));
        };
        let reach = match caliper {
            Some((c, width)) => format!(
                "; caliper {c} × pooled SD of the logit {:.4} = {width}",
                m.sdl
            ),
            None => String::new(),
        };
        out.diagnostics.notes.push(format!(
            "{label}: 1:{k} nearest-neighbour matching with replacement (rows as near as the last match included) on the logit of the propensity (treated from {:.3} to {:.3}, untreated from {:.3} to {:.3}){reach}; matched {} of {} treated and {} of {} untreated target rows; mean distance {:.4}, largest {:.4}; {} treated and {} untreated rows served as matches, the most used one {:.1} times",
            m.range1.0,
            m.range1.1,
            m.range0.0,
            m.range0.1,
            m.matched1,
            targets1,
            m.matched0,
            targets0,
            m.sdist / matched,
            m.maxdist,
            m.used1,
            m.used0,
            m.maxw,
        ));
        if un1 + un0 > 0.0 {
            out.diagnostics.warnings.push(format!(
                "{label}: {un1} treated and {un0} untreated target rows had no match within the caliper and are left out: the estimate is the effect among the matched rows, not the whole {}population",
                targets_word(spec.estimand)
            ));
        }
        if m.lone > 0.0 {
            out.diagnostics.notes.push(format!(
                "{label}: {} rows used as matches have no other row in their arm to estimate their outcome's variance from; they add nothing to the variance",
                m.lone
            ));
        }
        let mut e = Estimate::new(spec, &segment(s, key), tau, var.max(0.0).sqrt());
        e.n_treated = Some(n1);
        e.n_control = Some(n0);
        e.n_used = m.n;
        parts.push(Part {
            estimate: e,
            target_size: matched,
        });
    }
    out.estimates = finish(s, parts);
    out.rows = rows_query(s, &models)?;
    Ok(out)
}

estimator!(Match, crate::Method::Match);

#[cfg(test)]
mod tests {
    use super::*;

    fn sums(sd: f64, sdd: f64, sv: f64, matched1: f64) -> MatchSums {
        MatchSums {
            n: 10.0,
            n1: 4.0,
            matched1,
            matched0: 0.0,
            sd,
            sdd,
            sv,
            lone: 0.0,
            used1: 0.0,
            used0: 3.0,
            maxw: 2.0,
            sdist: 0.0,
            maxdist: 0.0,
            sdl: 1.0,
            range1: (0.0, 1.0),
            range0: (0.0, 1.0),
        }
    }

    /// ATT of four treated rows matched 1:1 to controls worked by hand: treated outcomes
    /// 5, 7, 9, 11; matched controls 4, 4, 6, 8 (the control with outcome 4 used twice, so
    /// `K = 2` for it, `1` for the others). Differences 1, 3, 3, 3: τ = 2.5,
    /// Σ (d − τ)² = 2.25 + 0.25 · 3 = 3. With σ² = 1 for each control, the Abadie–Imbens term
    /// is `Σ K(K − 1) σ²` = 2 (only the control used twice), so V = (3 + 2) / 16.
    #[test]
    fn abadie_imbens_by_hand() {
        let d = [1.0, 3.0, 3.0, 3.0];
        let sd: f64 = d.iter().sum();
        let sdd: f64 = d.iter().map(|x| x * x).sum();
        // w² − q per control: (2² − 2) σ² + 2 × (1 − 1) σ² = 2.
        let (tau, var, n) = estimate_of(&sums(sd, sdd, 2.0, 4.0)).unwrap();
        assert_eq!(n, 4.0);
        assert!((tau - 2.5).abs() < 1e-15);
        assert!((var - 5.0 / 16.0).abs() < 1e-15);
        assert!(estimate_of(&sums(0.0, 0.0, 0.0, 0.0)).is_none());
    }
}
