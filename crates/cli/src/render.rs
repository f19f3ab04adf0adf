//! Rendering of the core library's typed results: `run` as text, JSON or CSV; `plan` as SQL
//! text or JSON.

use crate::exit::Failure;
use upshot_core::{Answer, Estimate, QuestionPlan, QuestionSummary, Study};

fn fmt_num(x: f64) -> String {
    if !x.is_finite() {
        return "—".into();
    }
    let a = x.abs();
    if a != 0.0 && !(1e-3..1e7).contains(&a) {
        format!("{x:.4e}")
    } else {
        format!("{x:.4}")
    }
}

fn count(x: Option<f64>) -> String {
    x.map_or("—".into(), |v| format!("{v:.0}"))
}

/// The text report of `run`.
pub fn run_text(answers: &[Answer]) -> String {
    let mut o = String::new();
    for a in answers {
        let s = &a.summary;
        o.push_str(&format!(
            "question {}: {} of {} on {} — method {}, {}\n",
            s.question,
            s.estimand.as_str(),
            s.treatment,
            s.outcome,
            s.method.as_str(),
            if !s.mediators.is_empty() {
                format!("through mediators {{{}}}", s.mediators.join(", "))
            } else if s.instruments.is_empty() {
                format!("adjusting for {{{}}}", s.adjustment_set.join(", "))
            } else if s.adjustment_set.is_empty() {
                format!("instrumented by {{{}}}", s.instruments.join(", "))
            } else {
                format!(
                    "instrumented by {{{}}} given {{{}}}",
                    s.instruments.join(", "),
                    s.adjustment_set.join(", ")
                )
            }
        ));
        let header = [
            "segment",
            "estimate",
            "std. error",
            "95% interval",
            "treated",
            "control",
        ];
        let mut rows: Vec<[String; 6]> = vec![header.map(str::to_string)];
        for e in &a.estimates {
            if let Some(k) = &e.suppressed {
                let c = |x: Option<f64>| x.map_or("—".to_string(), |_| k.clone());
                rows.push([
                    e.segment.clone(),
                    "suppressed".into(),
                    "—".into(),
                    "—".into(),
                    c(e.n_treated),
                    c(e.n_control),
                ]);
                continue;
            }
            rows.push([
                e.segment.clone(),
                fmt_num(e.estimate),
                fmt_num(e.std_error),
                format!("[{}, {}]", fmt_num(e.ci_low), fmt_num(e.ci_high)),
                count(e.n_treated),
                count(e.n_control),
            ]);
        }
        let mut width = [0usize; 6];
        for row in &rows {
            for (w, c) in width.iter_mut().zip(row) {
                *w = (*w).max(c.chars().count());
            }
        }
        for row in &rows {
            o.push_str("  ");
            for (i, (c, w)) in row.iter().zip(width).enumerate() {
                let pad = w - c.chars().count();
                if i == 0 {
                    o.push_str(c);
                    o.push_str(&" ".repeat(pad));
                } else {
                    o.push_str("  ");
                    o.push_str(&" ".repeat(pad));
                    o.push_str(c);
                }
            }
            o.push('\n');
        }
        let d = &s.diagnostics;
        o.push_str(&format!(
            "  rows: {} read, {} excluded for NULL{}{}; {} passes\n",
            d.rows_read,
            d.rows_excluded_null,
            if d.null_columns.is_empty() {
                String::new()
            } else {
                format!(
                    " ({})",
                    d.null_columns
                        .iter()
                        .map(|(c, n)| format!("{c}: {n}"))
                        .collect::<Vec<_>>()
                        .join(", ")
                )
            },
            d.rows_excluded_other
                .iter()
                .map(|(why, n)| format!(", {n} excluded {why}"))
                .collect::<String>(),
            d.passes
        ));
        if !s.mediators.is_empty() {
            o.push_str(&format!("  mediators: {}\n", s.why_this_set));
        } else if s.instruments.is_empty() {
            o.push_str(&format!("  adjustment set: {}\n", s.why_this_set));
        } else {
            o.push_str(&format!("  instruments: {}\n", s.why_this_set));
            o.push_str(&instrument_text(&d.instruments));
        }
        for w in &d.warnings {
            o.push_str(&format!("  warning: {w}\n"));
        }
        for n in &d.notes {
            o.push_str(&format!("  note: {n}\n"));
        }
        o.push_str("  rests on:\n");
        for x in &s.assumptions {
            o.push_str(&format!("    - {x}\n"));
        }
        o.push('\n');
    }
    o
}

/// The first stage and tests of instrumental-variable estimates, one block per estimate row.
fn instrument_text(reports: &[upshot_core::InstrumentReport]) -> String {
    let mut o = String::new();
    for r in reports {
        let first: Vec<String> = r
            .first_stage
            .iter()
            .map(|c| {
                format!(
                    "{} {} (s.e. {})",
                    c.instrument,
                    fmt_num(c.coefficient),
                    fmt_num(c.std_error)
                )
            })
            .collect();
        o.push_str(&format!(
            "  {}: {}\n    first stage: {}; F = {:.2} on ({}, {}) df{}\n    standard errors: unadjusted {}, robust {}{}\n",
            r.segment,
            r.estimator,
            first.join(", "),
            r.partial_f,
            r.f_df.0,
            r.f_df.1,
            if r.weak { " — weak (below 10)" } else { "" },
            fmt_num(r.se_unadjusted),
            fmt_num(r.se_robust),
            r.se_delta
                .map(|d| format!(", delta method {}", fmt_num(d)))
                .unwrap_or_default()
        ));
        for (name, t) in [("Sargan", &r.sargan), ("Hansen J", &r.hansen_j)] {
            if let Some(t) = t {
                o.push_str(&format!(
                    "    over-identification, {name}: {:.3} on {} df, p = {:.3}\n",
                    t.stat, t.df, t.p_value
                ));
            }
        }
        if let Some(c) = r.complier_share {
            o.push_str(&format!(
                "    compliers: {:.1}% of rows (the estimate is their local effect, under monotonicity)\n",
                100.0 * c
            ));
        }
    }
    o
}

/// The JSON document of `run` (docs/run-output.md): every estimate row, then every question's
/// summary and diagnostics.
pub fn run_json(study: &Study, answers: &[Answer]) -> Result<String, Failure> {
    let estimates: Vec<&Estimate> = answers.iter().flat_map(|a| &a.estimates).collect();
    let questions: Vec<&QuestionSummary> = answers.iter().map(|a| &a.summary).collect();
    let doc = serde_json::json!({
        "format": "upshot-run/1",
        "tool_version": env!("CARGO_PKG_VERSION"),
        "study": study.name,
        "estimates": estimates,
        "questions": questions,
    });
    Ok(serde_json::to_string_pretty(&doc).map_err(|e| Failure::internal(e.to_string()))? + "\n")
}

fn csv_field(s: &str) -> String {
    if s.contains([',', '"', '\n']) {
        format!("\"{}\"", s.replace('"', "\"\""))
    } else {
        s.to_string()
    }
}

/// The CSV of `run`: one line per estimate row.
pub fn run_csv(answers: &[Answer]) -> String {
    let mut o = String::from(
        "question,segment,estimand,method,estimate,std_error,ci_low,ci_high,n_treated,n_control,n_used,adjustment_set\n",
    );
    let opt = |x: Option<f64>| x.map_or(String::new(), |v| format!("{v}"));
    for a in answers {
        for e in &a.estimates {
            if let Some(k) = &e.suppressed {
                // No number of a suppressed row: the counts read `<k`.
                let c = |x: Option<f64>| x.map_or(String::new(), |_| k.clone());
                o.push_str(&format!(
                    "{},{},{},{},,,,,{},{},{},{}\n",
                    csv_field(&e.question),
                    csv_field(&e.segment),
                    e.estimand.as_str(),
                    e.method.as_str(),
                    c(e.n_treated),
                    c(e.n_control),
                    k,
                    csv_field(&e.adjustment_set.join(";"))
                ));
                continue;
            }
            o.push_str(&format!(
                "{},{},{},{},{:?},{:?},{:?},{:?},{},{},{},{}\n",
                csv_field(&e.question),
                csv_field(&e.segment),
                e.estimand.as_str(),
                e.method.as_str(),
                e.estimate,
                e.std_error,
                e.ci_low,
                e.ci_high,
                opt(e.n_treated),
                opt(e.n_control),
                e.n_used,
                csv_field(&e.adjustment_set.join(";"))
            ));
        }
    }
    o
}

/// `s` on one comment line: control characters shown escaped, so that no text can end the
/// comment and stand in the plan as SQL (names are refused with such characters anyway).
fn comment(s: &str) -> String {
    s.chars()
        .map(|c| {
            if c.is_control() {
                c.escape_unicode().to_string()
            } else {
                c.to_string()
            }
        })
        .collect()
}

/// The JSON document of `plan`.
pub fn plan_json(plans: &[QuestionPlan]) -> Result<String, Failure> {
    let doc = serde_json::json!({"format": "upshot-plan/1", "tool_version": env!("CARGO_PKG_VERSION"), "questions": plans});
    Ok(serde_json::to_string_pretty(&doc).map_err(|e| Failure::internal(e.to_string()))? + "\n")
}

/// The SQL text of `plan`: per question a header comment, then each pass with its purpose.
pub fn plan_text(plans: &[QuestionPlan]) -> String {
    let mut out = String::new();
    for doc in plans {
        out.push_str(&comment(&format!(
            "-- question {}: {} of {} on {} by method {}, adjusting for {{{}}} ({} SQL, plan {})",
            doc.question,
            doc.estimand.as_str(),
            doc.treatment,
            doc.outcome,
            doc.method.as_str(),
            doc.adjustment_set.join(", "),
            doc.dialect,
            doc.plan_hash
        )));
        out.push('\n');
        for (i, p) in doc.passes.iter().enumerate() {
            out.push('\n');
            out.push_str(&comment(&format!(
                "-- pass {}: {} — {}",
                i + 1,
                p.name,
                p.purpose
            )));
            out.push('\n');
            if let Some(x) = &p.inlines {
                out.push_str(&comment(&format!("-- inlines: {x}")));
                out.push('\n');
            }
            if let Some(x) = &p.repeats {
                out.push_str(&comment(&format!("-- runs: {x}")));
                out.push('\n');
            }
            out.push_str(&p.sql);
            out.push_str(";\n");
        }
        out.push('\n');
    }
    out
}
