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
