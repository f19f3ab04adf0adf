//! `iv`: instrumental variables. One Gram pass over `[W, Z, T, Y]` per segment gives the
//! first stage, two-stage least squares and Sargan's test (`upshot_fit::two_stage`); one score
//! pass of the residuals `e = y − (α + Wβ + τT)` gives their moments against the instruments,
//! hence robust (HC1) errors and Hansen's J. With one 0/1 instrument and no covariates the
//! estimate is the Wald ratio `(ȳ₁ − ȳ₀) / (t̄₁ − t̄₀)` (which 2SLS equals exactly) with a
//! delta-method error. With segments, each segment gets its own fit, and the `all` row is
//! 2SLS on all rows (the segments' moments summed) — not a mean of the segments' local
//! effects, which weight their compliers differently — with its own score pass.

use crate::combine::{segment, segment_label};
use crate::crossfit::gram_pass;
use crate::models::{per_segment, placeholder_segments};
use crate::prepare::{modelled, Setup};
use crate::read::{by_segment, moments, row_of, symmetric};
use crate::{
    ask, Estimate, InstrumentCoefficient, InstrumentReport, MethodError, Outcome, Runner, TestStat,
};
use upshot_fit::{two_stage, FitError, IvColumns, Moments, TwoStage};
use upshot_sql::{
    residuals_and_pooled, Built, Design, DesignTerm, KeyValue, Models, Pass, ResidualLayout,
};

/// First-stage F below which the instruments count as weak: common practice after Staiger &
/// Stock (1997).
pub const WEAK_F: f64 = 10.0;

/// First-stage F below which no estimate is made: the instruments' pull on the treatment is
/// indistinguishable from noise (upshot's rule; an estimate there is centred near the
/// confounded comparison, with an interval that means nothing).
pub const NO_PULL_F: f64 = 1.0;

/// The Gram pass's terms after the covariates: instruments, treatment, outcome.
fn gram_terms(s: &Setup) -> Vec<DesignTerm> {
    let mut t = s.instrument_terms.clone();
    t.push(s.treatment_term.clone());
    t.push(s.outcome_term.clone());
    t
}

fn gram(s: &Setup) -> Result<Built<upshot_sql::GramLayout>, MethodError> {
    gram_pass(s, false, gram_terms(s))
}

/// The score pass: residual moments over `(1, W, Z, T)` per segment; with segments, also those
/// of the `all` row's 2SLS model (`pooled`), summed over the segments in Rust, so that the
/// `all` row needs no pass of its own.
fn score_pass(
    s: &Setup,
    models: &Models,
    pooled: Option<&Models>,
) -> Result<Built<ResidualLayout>, MethodError> {
    let spec = s.spec;
    let mut terms = s.terms.clone();
    terms.extend(s.instrument_terms.iter().cloned());
    terms.push(s.treatment_term.clone());
    let design = Design {
        keys: s.segment_keys(),
        terms,
        extras: vec![("y", spec.outcome.clone())],
        fold: None,
    };
    Ok(residuals_and_pooled(
        &spec.flavor,
        &spec.source,
        s.filter.as_ref(),
        &design,
        models,
        pooled,
    )?)
}

fn width(s: &Setup) -> usize {
    s.terms.len() + s.instrument_terms.len() + 2
}

fn placeholder_models(s: &Setup) -> Models {
    per_segment(&placeholder_segments(s), &[vec![0.0; width(s)]])
}

pub(crate) fn passes(s: &Setup) -> Result<Vec<Pass>, MethodError> {
    let pooled = Models::single(vec![0.0; width(s)]);
    let pooled = (!s.spec.segments.is_empty()).then_some(&pooled);
    Ok(vec![
        gram(s)?.pass,
        score_pass(s, &placeholder_models(s), pooled)?.pass,
    ])
}

/// Names of the Gram pass's columns: covariate terms, instruments, treatment, outcome.
fn names(s: &Setup) -> Vec<String> {
    let spec = s.spec;
    let mut n = s.term_names.clone();
    n.extend(s.instrument_names.iter().cloned());
    n.push(spec.treatment.clone());
    n.push(spec.outcome.clone());
    n
}

fn columns(s: &Setup) -> IvColumns {
    let (p, q) = (s.terms.len(), s.instrument_terms.len());
    IvColumns {
        w: (0..p).collect(),
        z: (p..p + q).collect(),
        t: p + q,
        y: p + q + 1,
    }
}

/// Whether column `c` held only 0 and 1 in the rows profiled.
fn zero_one(s: &Setup, c: &str) -> bool {
    s.column(c).is_some_and(|p| {
        p.not01 == 0.0
            && matches!((&p.min, &p.max), (upshot_sql::Cell::Number(a), upshot_sql::Cell::Number(b)) if *a == 0.0 && *b == 1.0)
    })
}

/// The Wald shape: one numeric 0/1 instrument and nothing to condition on.
fn is_wald(s: &Setup) -> bool {
    s.terms.is_empty()
        && matches!(s.instrument_terms.as_slice(), [DesignTerm::Numeric { column, .. }] if zero_one(s, column))
}

fn fit(s: &Setup, m: &Moments, label: &str) -> Result<TwoStage, MethodError> {
    let f = two_stage(m, &columns(s)).map_err(|e| match e {
        FitError::Collinear { .. } | FitError::Constant { .. } | FitError::TooFewRows { .. } => {
            MethodError::Input(format!("{label}: the first stage cannot be fitted: {e}"))
        }
        e => MethodError::Input(format!("{label}: {e}")),
    })?;
    let fs = &f.first_stage;
    if fs.partial_f.is_nan() || fs.partial_f < NO_PULL_F {
        return Err(MethodError::Input(format!(
            "{label}: the instruments ({}) do not move the treatment `{}`: first-stage F = {:.3} (below {NO_PULL_F}), so an instrumental estimate would be noise centred near the confounded comparison; find an instrument that shifts the treatment{}",
            s.spec.instruments.join(", "),
            s.spec.treatment,
            fs.partial_f,
            if modelled(s.spec).is_empty() { "" } else { " once the covariates are held fixed" }
        )));
    }
    Ok(f)
}

/// The report of one fit, and the standard error the estimate carries.
fn report(
    s: &Setup,
    seg: &str,
    f: &TwoStage,
    meat: &nalgebra::DMatrix<f64>,
    sum_z: f64,
    label: &str,
) -> Result<(InstrumentReport, f64), MethodError> {
    let robust = f
        .robust(meat)
        .map_err(|e| MethodError::Input(format!("{label}: {e}")))?;
    let wald = if is_wald(s) {
        f.wald_se(meat, sum_z)
    } else {
        None
    };
    let binary_treatment = zero_one(s, &s.spec.treatment);
    let fs = &f.first_stage;
    let r = InstrumentReport {
        segment: seg.to_string(),
        estimator: if wald.is_some() {
            "Wald ratio (difference in outcome means over difference in treatment means), delta-method error"
        } else {
            "two-stage least squares, robust (HC1) error"
        },
        first_stage: s
            .instrument_names
            .iter()
            .zip(fs.coef.iter().zip(&fs.std_error))
            .map(|(z, (c, e))| InstrumentCoefficient {
                instrument: z.clone(),
                coefficient: *c,
                std_error: *e,
            })
            .collect(),
        partial_f: fs.partial_f,
        f_df: fs.df,
        weak: fs.partial_f < WEAK_F,
        se_unadjusted: f.classical_se,
        se_robust: robust.se,
        se_delta: wald,
        sargan: f.sargan.as_ref().map(TestStat::from),
        hansen_j: robust.hansen_j.as_ref().map(TestStat::from),
        complier_share: (wald.is_some() && binary_treatment).then(|| fs.coef[0].abs()),
    };
    let se = wald.unwrap_or(robust.se);
    Ok((r, se))
}

pub(crate) fn run(s: &Setup, r: &mut dyn Runner) -> Result<Outcome, MethodError> {
    let spec = s.spec;
    let nseg = spec.segments.len();
    let gp = gram(s)?;
    let g = ask(r, &gp)?;
    let names = names(s);
    let terms = {
        let mut t = s.terms.clone();
        t.extend(gram_terms(s));
        t
    };
    let z_at = s.terms.len();
    struct Seg {
        key: Vec<KeyValue>,
        m: Moments,
        fit: TwoStage,
    }
    let mut segs = Vec::new();
    for (key, rows) in by_segment(&g, nseg)? {
        let m = moments(&gp.layout, &g, rows[0], &names, &terms)?;
        let label = segment_label(s, &key);
        let fit = fit(s, &m, &label)?;
        segs.push(Seg { key, m, fit });
    }
    let keys: Vec<Vec<KeyValue>> = segs.iter().map(|seg| seg.key.clone()).collect();
    let coefs: Vec<Vec<f64>> = segs.iter().map(|seg| seg.fit.design.clone()).collect();
    let models = per_segment(&keys, &coefs);
    // With segments, the `all` row is 2SLS on all rows: the segments' moments summed.
    let pooled = if nseg > 0 {
        let mut all = segs[0].m.clone();
        for seg in &segs[1..] {
            all = all
                .plus(&seg.m)
                .map_err(|e| MethodError::Engine(e.to_string()))?;
        }
        let f = fit(s, &all, "all rows")?;
        Some((all, f))
    } else {
        None
    };
    let pooled_models = pooled
        .as_ref()
        .map(|(_, f)| Models::single(f.design.clone()));
    let sp = score_pass(s, &models, pooled_models.as_ref())?;
    let res = ask(r, &sp)?;
    let w = width(s);
    let mut estimates = Vec::new();
    let mut reports = Vec::new();
    let mut warnings = Vec::new();
    let mut one = |key: &[KeyValue],
                   m: &Moments,
                   f: &TwoStage,
                   meat: &nalgebra::DMatrix<f64>|
     -> Result<Estimate, MethodError> {
        let seg = segment(s, key);
        let label = segment_label(s, key);
        let (rep, se) = report(s, &seg_text(&seg), f, meat, m.sum[z_at], &label)?;
        if rep.weak {
            warnings.push(format!(
                "{label}: weak instruments — first-stage F = {:.2} is below {WEAK_F} (common practice, Staiger & Stock 1997): the estimate leans toward the confounded comparison and its interval is too narrow",
                rep.partial_f
            ));
        }
        let mut e = Estimate::new(spec, &seg, f.effect, se);
        e.n_used = m.n;
        if zero_one(s, &spec.treatment) {
            let n1 = m.mean(columns(s).t) * m.n;
            e.n_treated = Some(n1.round());
            e.n_control = Some((m.n - n1).round());
        }
        reports.push(rep);
        Ok(e)
    };
    let mut per_segment = Vec::new();
    for seg in &segs {
        let row = row_of(&res, &seg.key)?;
        let meat = symmetric(&sp.layout.meat(&res, row)?, w);
        per_segment.push(one(&seg.key, &seg.m, &seg.fit, &meat)?);
    }
    if let Some((all, f)) = &pooled {
        let mut meat = nalgebra::DMatrix::zeros(w, w);
        for seg in &segs {
            let row = row_of(&res, &seg.key)?;
            meat += symmetric(&sp.layout.pooled_meat(&res, row)?, w);
        }
        estimates.push(one(&[], all, f, &meat)?);
        // The pooled report first, as its estimate.
        reports.rotate_right(1);
    }
    estimates.extend(per_segment);
    let mut out = Outcome {
        estimates,
        diagnostics: Default::default(),
        rows: None,
    };
    out.diagnostics.warnings = warnings;
    out.diagnostics.instruments = reports;
    Ok(out)
}

fn seg_text(seg: &crate::Segment) -> String {
    seg.label()
}

estimator!(Iv, crate::Method::Iv);
