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

#[test]
fn every_method_agrees_with_and_without_upshots_functions() {
    let e = DuckDbEngine::open(MEMORY, false).unwrap();
    let source = Source::Csv(sample());
    let columns: Vec<ColumnType> = e
        .columns(&source)
        .unwrap()
        .into_iter()
        .map(|c| ColumnType {
            name: c.name,
            type_name: c.type_name,
            numeric: c.numeric,
            integer: c.integer,
            boolean: c.boolean,
        })
        .collect();
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
