//! Every estimator's passes give the same estimate built with upshot's DuckDB functions (the
//! fused moments aggregate, the linear-predictor function: what `run` uses) and without them
//! (one `SUM` per product, plain arithmetic), on the committed demo sample, segmented and
//! cross-fitted — the estimators' own passes (weighting, augmented and partial-out scores)
//! included.

use upshot_engine::Engine;
use upshot_engine_duckdb::{DuckDbEngine, MEMORY};
use upshot_methods::{estimate, Basis, ColumnType, Estimand, Method, NullPolicy, Spec};
use upshot_sql::{DuckDb, Flavor, Source};

fn sample() -> String {
    format!(
        "{}/../../demo-data/sample/customers.csv",
        env!("CARGO_MANIFEST_DIR")
    )
}

/// The source's columns as the methods take them.
fn columns_of(e: &DuckDbEngine, source: &Source) -> Vec<ColumnType> {
    e.columns(source)
        .unwrap()
        .into_iter()
        .map(|c| ColumnType {
            name: c.name,
            type_name: c.type_name,
            numeric: c.numeric,
            integer: c.integer,
            boolean: c.boolean,
        })
        .collect()
}

#[test]
fn every_method_agrees_with_and_without_upshots_functions() {
    let e = DuckDbEngine::open(MEMORY, false).unwrap();
    let source = Source::Csv(sample());
    let columns = columns_of(&e, &source);
    for (method, estimand) in [
        (Method::Stratify, Estimand::Ate),
        (Method::Regress, Estimand::Atc),
        (Method::Weight, Estimand::Ate),
        (Method::DoublyRobust, Estimand::Att),
        (Method::PartialOut, Estimand::Ate),
    ] {
        let spec = |flavor: Flavor| Spec {
            flavor,
            question: "q".into(),
            source: source.clone(),
            filter: None,
            treatment: "voucher".into(),
            outcome: "spend_30d".into(),
            adjust: if method == Method::Stratify {
                vec!["prior_orders".into(), "zone".into()]
            } else {
                vec![
                    "household_size".into(),
                    "prior_orders".into(),
                    "zone".into(),
                ]
            },
            instruments: vec![],
            mediators: vec![],
            bins: vec![],
            matching: Default::default(),
            segments: vec!["tenure_band".into()],
            segment_bins: None,
            estimand,
            method,
            folds: 3,
            unit: Some("customer_id".into()),
            on_null: NullPolicy::Exclude,
            clip: 0.01,
            categorical: vec![],
            basis: Basis::default(),
            columns: Some(columns.clone()),
        };
        let mut run = |p: &upshot_sql::Pass| e.run(p).map_err(|x| x.to_string());
        let fused = estimate(&spec(e.flavor()), &mut run).unwrap();
        let plain = estimate(&spec(Flavor::plain(&DuckDb)), &mut run).unwrap();
        assert_eq!(fused.estimates.len(), 4, "{method:?}");
        for (a, b) in fused.estimates.iter().zip(&plain.estimates) {
            assert_eq!(a.segment, b.segment);
            for (x, y) in [(a.estimate, b.estimate), (a.std_error, b.std_error)] {
                assert!(
                    (x - y).abs() <= 1e-10 * y.abs().max(1.0),
                    "{method:?} {}: {x} vs {y}",
                    a.segment
                );
            }
        }
    }
}

/// The propensity fits of `weight`, `match` and `doubly-robust` start from a fit on the first
/// rows when there are many (over 400,000): the estimates are those of fits started from zero
/// (here: the same run with the warm start's passes refused, which makes it start from zero)
/// to 1e-9, with fewer passes over all rows. Data: 600,000 rows generated here (simulation,
/// not a reference).
#[test]
fn warm_started_propensity_fits_give_the_cold_estimates() {
    let e = DuckDbEngine::open(MEMORY, false).unwrap();
    e.execute_batch(
        "CREATE TABLE big AS SELECT i AS id, \
           ((i * 7919) % 1000) / 100.0 AS x1, ((i * 104729) % 997) / 100.0 AS x2, \
           CASE WHEN ((i * 2654435761) % 4294967296) / 4294967296.0 \
                < 1.0 / (1.0 + EXP(-(0.4 * ((i * 7919) % 1000) / 100.0 - 0.3 * ((i * 104729) % 997) / 100.0))) \
                THEN 1 ELSE 0 END AS t, \
           ((i * 40503) % 1009) / 100.0 AS noise, (i % 3) AS band FROM range(600000) AS r(i); \
         CREATE TABLE rows_ AS SELECT *, 2.0 * t + x1 - x2 + noise AS y FROM big; \
         DROP TABLE big; ALTER TABLE rows_ RENAME TO big;",
    )
    .unwrap();
    let source = Source::table("big").unwrap();
    let columns = columns_of(&e, &source);
    for (method, segments) in [
        (Method::Weight, vec![]),
        (Method::Weight, vec!["band".to_string()]),
        (Method::Match, vec![]),
        (Method::DoublyRobust, vec!["band".to_string()]),
    ] {
        let spec = Spec {
            flavor: e.flavor(),
            question: "q".into(),
            source: source.clone(),
            filter: None,
            treatment: "t".into(),
            outcome: "y".into(),
            adjust: vec!["x1".into(), "x2".into()],
            instruments: vec![],
            mediators: vec![],
            bins: vec![],
            matching: Default::default(),
            segments,
            segment_bins: None,
            estimand: Estimand::Ate,
            method,
            folds: 3,
            unit: Some("id".into()),
            on_null: NullPolicy::Exclude,
            clip: 0.01,
            categorical: vec![],
            basis: Basis::default(),
            columns: Some(columns.clone()),
        };
        let mut names: Vec<String> = Vec::new();
        let mut warm = |p: &upshot_sql::Pass| {
            names.push(p.name.clone());
            e.run(p).map_err(|x| x.to_string())
        };
        let a = estimate(&spec, &mut warm).unwrap();
        let warm_passes = names.iter().filter(|n| *n == "warm-start").count();
        let full_steps = names.iter().filter(|n| *n == "logistic-step").count();
        assert!(warm_passes > 0, "{method:?}: {names:?}");
        let mut cold_names: Vec<String> = Vec::new();
        let mut cold = |p: &upshot_sql::Pass| {
            cold_names.push(p.name.clone());
            if p.name == "warm-start" {
                return Err("refused by the test".to_string());
            }
            e.run(p).map_err(|x| x.to_string())
        };
        let b = estimate(&spec, &mut cold).unwrap();
        let cold_steps = cold_names.iter().filter(|n| *n == "logistic-step").count();
        assert!(
            full_steps < cold_steps,
            "{method:?}: {names:?} vs {cold_names:?}"
        );
        for (x, y) in a.estimates.iter().zip(&b.estimates) {
            assert_eq!(x.segment, y.segment);
            for (u, v) in [(x.estimate, y.estimate), (x.std_error, y.std_error)] {
                assert!(
                    (u - v).abs() <= 1e-9 * v.abs(),
                    "{method:?} {}: warm {u} vs cold {v}",
                    x.segment
                );
            }
        }
        eprintln!(
            "{method:?}: {warm_passes} warm-start passes, {full_steps} full Newton passes (from zero: {cold_steps})"
        );
    }
}

/// Stratify runs no profile pass: its cell table, over every row the filter keeps with NULL
/// keys as groups of their own, is also the profile. On the demo sample with NULLs put into
/// four used columns (a source query), it reports the rows read, the rows excluded and the
/// NULLs per column that the profile pass reports for `regress` over the same columns, and the
/// estimate it gives is the one over the complete rows alone (a source query dropping them).
/// The checks the profile fed keep their refusals: a treatment value that is neither 0 nor 1,
/// and `--on-null error`. (Agreement with one another, not with an outside reference: the
/// estimates themselves are checked against statsmodels by tests/reference.)
#[test]
fn stratify_profiles_in_its_cell_table() {
    let e = DuckDbEngine::open(MEMORY, false).unwrap();
    let csv = sample().replace('\'', "''");
    let query = |select: &str| {
        Source::query(
            &format!("SELECT {select} FROM read_csv_auto('{csv}')"),
            &DuckDb,
        )
        .unwrap()
    };
    let nulls = "customer_id, tenure_band, \
        CASE WHEN customer_id % 7 = 0 THEN NULL ELSE voucher END AS voucher, \
        CASE WHEN customer_id % 11 = 0 THEN NULL ELSE spend_30d END AS spend_30d, \
        CASE WHEN customer_id % 13 = 0 THEN NULL ELSE prior_orders END AS prior_orders, \
        CASE WHEN customer_id % 17 = 0 THEN NULL ELSE zone END AS zone";
    let with_nulls = query(nulls);
    let complete = Source::query(
        &format!(
            "SELECT * FROM (SELECT {nulls} FROM read_csv_auto('{csv}')) AS t \
             WHERE voucher IS NOT NULL AND spend_30d IS NOT NULL \
             AND prior_orders IS NOT NULL AND zone IS NOT NULL"
        ),
        &DuckDb,
    )
    .unwrap();
    let spec = |source: &Source, method: Method, on_null: NullPolicy| Spec {
        flavor: e.flavor(),
        question: "q".into(),
        source: source.clone(),
        filter: None,
        treatment: "voucher".into(),
        outcome: "spend_30d".into(),
        adjust: vec!["prior_orders".into(), "zone".into()],
        instruments: vec![],
        mediators: vec![],
        bins: vec![],
        matching: Default::default(),
        segments: vec!["tenure_band".into()],
        segment_bins: None,
        estimand: Estimand::Ate,
        method,
        folds: 1,
        unit: None,
        on_null,
        clip: 0.01,
        categorical: vec![],
        basis: Basis::default(),
        columns: Some(columns_of(&e, source)),
    };
    let mut run = |p: &upshot_sql::Pass| e.run(p).map_err(|x| x.to_string());
    let strat = estimate(
        &spec(&with_nulls, Method::Stratify, NullPolicy::Exclude),
        &mut run,
    )
    .unwrap();
    let regress = estimate(
        &spec(&with_nulls, Method::Regress, NullPolicy::Exclude),
        &mut run,
    )
    .unwrap();
    let (d, r) = (&strat.diagnostics, &regress.diagnostics);
    assert_eq!(d.passes, 1);
    assert!(d.rows_excluded_null > 0.0);
    assert_eq!(
        (d.rows_read, d.rows_excluded_null, &d.null_columns),
        (r.rows_read, r.rows_excluded_null, &r.null_columns)
    );
    let kept = estimate(
        &spec(&complete, Method::Stratify, NullPolicy::Exclude),
        &mut run,
    )
    .unwrap();
    assert_eq!(
        kept.diagnostics.rows_read,
        d.rows_read - d.rows_excluded_null
    );
    assert_eq!(strat.estimates.len(), kept.estimates.len());
    for (a, b) in strat.estimates.iter().zip(&kept.estimates) {
        assert_eq!(a.segment, b.segment);
        for (x, y) in [(a.estimate, b.estimate), (a.std_error, b.std_error)] {
            assert!((x - y).abs() <= 1e-12 * y.abs().max(1.0), "{x} vs {y}");
        }
    }
    let refused = estimate(
        &spec(&with_nulls, Method::Stratify, NullPolicy::Error),
        &mut run,
    )
    .unwrap_err()
    .to_string();
    assert!(refused.contains("with --on-null error"), "{refused}");
    let not01 = query(
        "customer_id, tenure_band, spend_30d, prior_orders, zone, \
         CASE WHEN customer_id = 100005 THEN 2 ELSE voucher END AS voucher",
    );
    let refused = estimate(
        &spec(&not01, Method::Stratify, NullPolicy::Exclude),
        &mut run,
    )
    .unwrap_err()
    .to_string();
    assert!(
        refused.contains("needs a 0/1 treatment") && refused.contains("1 of its values"),
        "{refused}"
    );
    // A categorical stratum with a level per row: more cells than the table may have.
    let wide = Source::query(
        "SELECT CAST(i AS VARCHAR) AS spend_30d, i % 2 AS voucher, 1.0 * i AS prior_orders, \
         'a' AS zone, 'x' AS tenure_band, 1.0 * (i % 3) AS zone_code FROM range(250000) AS r(i)",
        &DuckDb,
    )
    .unwrap();
    let mut s = spec(&wide, Method::Stratify, NullPolicy::Exclude);
    (s.outcome, s.adjust) = ("prior_orders".into(), vec!["spend_30d".into()]);
    s.categorical = vec!["spend_30d".into()];
    let refused = estimate(&s, &mut run).unwrap_err().to_string();
    assert!(refused.contains("more than 200000 cells"), "{refused}");
    // A numeric stratum with a value per row: refused by its distinct values, counted in the
    // truncated table (a bound from below).
    let mut s = spec(&wide, Method::Stratify, NullPolicy::Exclude);
    (s.outcome, s.adjust) = ("zone_code".into(), vec!["prior_orders".into()]);
    let refused = estimate(&s, &mut run).unwrap_err().to_string();
    assert!(
        refused.contains("`prior_orders` has at least") && refused.contains("distinct values"),
        "{refused}"
    );
}
