//! The DuckDB engine on the committed demo sample: passes run in the database and return only
//! aggregates; results agree with the generator's own figures (demo-data/sample/*.truth.json).

use upshot_engine::{Engine, EngineError};
use upshot_engine_duckdb::{DuckDbEngine, MEMORY};
use upshot_sql::{cells, gram, parse_filter, profile, Design, DesignTerm, ProfileColumn, Source};

fn sample() -> String {
    format!(
        "{}/../../demo-data/sample/customers.csv",
        env!("CARGO_MANIFEST_DIR")
    )
}

fn truth() -> serde_json::Value {
    let path = format!(
        "{}/../../demo-data/sample/customers.truth.json",
        env!("CARGO_MANIFEST_DIR")
    );
    serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap()
}

#[test]
fn schema_of_a_csv_source() {
    let e = DuckDbEngine::open(MEMORY, false).unwrap();
    let cols = e.columns(&Source::Csv(sample())).unwrap();
    let names: Vec<&str> = cols.iter().map(|c| c.name.as_str()).collect();
    assert_eq!(
        names,
        [
            "customer_id",
            "zone",
            "tenure_band",
            "prior_orders",
            "household_size",
            "mail_wave",
            "voucher",
            "app_sessions",
            "spend_30d",
            "reordered_30d"
        ]
    );
    assert!(cols.iter().find(|c| c.name == "spend_30d").unwrap().numeric);
    assert!(!cols.iter().find(|c| c.name == "zone").unwrap().numeric);
}

#[test]
fn profile_and_cells_match_the_generator() {
    let e = DuckDbEngine::open(MEMORY, false).unwrap();
    let f = e.flavor();
    let d = &f;
    let src = Source::Csv(sample());
    let p = e
        .run(
            &profile(
                d,
                &src,
                None,
                &[
                    ProfileColumn {
                        name: "voucher".into(),
                        numeric: true,
                        distinct: true,
                        zero_one: false,
                    },
                    ProfileColumn {
                        name: "zone".into(),
                        numeric: false,
                        distinct: true,
                        zero_one: false,
                    },
                ],
            )
            .unwrap(),
        )
        .unwrap();
    assert_eq!(p.number(0, "n_rows").unwrap(), 5000.0);
    let t = truth();
    let treated = t["treated"].as_f64().unwrap();
    assert_eq!(p.number(0, "c0_mean").unwrap(), treated / 5000.0);
    // Text columns are counted, not compared: no MIN/MAX (their levels come from another pass).
    assert_eq!(p.number(0, "c1_n").unwrap(), 5000.0);
    assert!(!p.names.iter().any(|n| n == "c1_min"), "{:?}", p.names);
    // Naive difference of means from the cell table (CSV spend is rounded to cents, so allow 0.01).
    let c = e
        .run(&cells(d, &src, None, &["voucher".into()], "spend_30d").unwrap())
        .unwrap();
    assert_eq!(c.rows.len(), 2);
    let mean = |r: usize| c.number(r, "sy").unwrap() / c.number(r, "n").unwrap();
    let naive = mean(1) - mean(0);
    let want = t["outcomes"]["spend_30d"]["naive_difference"]
        .as_f64()
        .unwrap();
    assert!(
        (naive - want).abs() < 0.01,
        "naive {naive} vs truth file {want}"
    );
}

#[test]
fn quoted_names_filters_and_groups() {
    let e = DuckDbEngine::open(MEMORY, false).unwrap();
    e.execute_batch("CREATE TABLE \"order lines\" (\"spend 30d\" DOUBLE, \"select\" VARCHAR, g INTEGER); INSERT INTO \"order lines\" VALUES (1, 'a', 0), (2, 'b', 0), (4, 'a', 1), (NULL, 'a', 1)").unwrap();
    let f = e.flavor();
    let d = &f;
    let src = Source::table("order lines").unwrap();
    let filter = parse_filter("\"select\" = 'a'", d.dialect).unwrap();
    let g = e
        .run(
            &gram(
                d,
                &src,
                Some(&filter),
                &Design::grouped(
                    &["g".into()],
                    &[DesignTerm::Numeric {
                        column: "spend 30d".into(),
                        centre: 2.0,
                        scale: 1.0,
                    }],
                    &[],
                ),
            )
            .unwrap(),
        )
        .unwrap();
    // Group 0: one row (1 - 2 = -1); group 1: one row (4 - 2 = 2), the NULL row excluded.
    assert_eq!(g.rows.len(), 2);
    assert_eq!(
        (
            g.number(0, "n").unwrap(),
            g.number(0, "s0").unwrap(),
            g.number(0, "g0_0").unwrap()
        ),
        (1.0, -1.0, 1.0)
    );
    assert_eq!(
        (
            g.number(1, "n").unwrap(),
            g.number(1, "s0").unwrap(),
            g.number(1, "g0_0").unwrap()
        ),
        (1.0, 2.0, 4.0)
    );
}

#[test]
fn database_errors_name_the_pass() {
    let e = DuckDbEngine::open(MEMORY, false).unwrap();
    let f = e.flavor();
    let d = &f;
    let err = e
        .run(
            &profile(
                d,
                &Source::table("no_such_table").unwrap(),
                None,
                &[ProfileColumn {
                    name: "x".into(),
                    numeric: true,
                    distinct: true,
                    zero_one: false,
                }],
            )
            .unwrap(),
        )
        .unwrap_err();
    assert!(
        matches!(&err, EngineError::Query { pass, message } if pass == "profile" && message.contains("no_such_table")),
        "{err}"
    );
    let err = DuckDbEngine::open("/no/such/dir/db.duckdb", false)
        .err()
        .unwrap();
    assert!(err.to_string().contains("/no/such/dir/db.duckdb"), "{err}");
}

/// Every shared pass with sums of products or inlined models gives the same numbers built
/// with upshot's functions (what `run` uses on the DuckDB databases it opens: the fused
/// moments aggregate and the linear-predictor function) and without them (one `SUM` per
/// product, plain arithmetic): Gram, logistic steps (single, by fold, cross-fitting) and
/// residual moments, grouped by tenure band, on the demo sample. The estimators' own passes
/// are compared end to end in crates/methods/tests/duckdb.rs.
#[test]
fn fused_moments_equal_plain_sums() {
    use upshot_sql::{
        logistic_fits, residuals, DuckDb, Flavor, Fold, Key, KeyValue, Model, Models, Selector,
        Variants,
    };
    let e = DuckDbEngine::open(MEMORY, false).unwrap();
    let src = Source::Csv(sample());
    let terms = vec![
        DesignTerm::Numeric {
            column: "prior_orders".into(),
            centre: 2.6,
            scale: 1.7,
        },
        DesignTerm::Numeric {
            column: "household_size".into(),
            centre: 2.5,
            scale: 1.2,
        },
        DesignTerm::Level {
            column: "zone".into(),
            levels: vec!["Harbour".into()],
            centre: 0.15,
            scale: 0.36,
        },
    ];
    let design = Design {
        keys: vec![Key::Column("tenure_band".into())],
        terms,
        extras: vec![("t", "voucher".into()), ("y", "spend_30d".into())],
        fold: Some(Fold {
            unit: "customer_id".into(),
            folds: 3,
        }),
    };
    let one = Models::single(vec![-0.4, 0.5, -0.1, 0.3]);
    let by_fold = Models {
        selector: Selector {
            keys: vec![],
            fold: true,
        },
        models: (0..3)
            .map(|m| Model {
                key: vec![KeyValue::Number(f64::from(m))],
                coef: vec![-0.4 + 0.1 * f64::from(m), 0.5, -0.1, 0.3],
            })
            .collect(),
    };
    type Build<'a> = dyn Fn(&Flavor) -> upshot_sql::Pass + 'a;
    let passes: Vec<(&str, Box<Build<'_>>)> = vec![
        (
            "gram",
            Box::new(|f| gram(f, &src, None, &design).unwrap().pass),
        ),
        (
            "logistic",
            Box::new(|f| {
                logistic_fits(f, &src, None, &design, &one, Variants::Single)
                    .unwrap()
                    .pass
            }),
        ),
        (
            "logistic by fold",
            Box::new(|f| {
                logistic_fits(f, &src, None, &design, &one, Variants::ByFold)
                    .unwrap()
                    .pass
            }),
        ),
        (
            "logistic cross-fit",
            Box::new(|f| {
                logistic_fits(f, &src, None, &design, &by_fold, Variants::Complement(3))
                    .unwrap()
                    .pass
            }),
        ),
        (
            "residuals",
            Box::new(|f| residuals(f, &src, None, &design, &one).unwrap().pass),
        ),
    ];
    for (what, build) in &passes {
        let fused = build(&e.flavor());
        assert!(
            fused.sql().contains("upshot_moments(") || fused.sql().contains("upshot_linear("),
            "{what}"
        );
        let plain = build(&Flavor::plain(&DuckDb));
        assert!(!plain.sql().contains("upshot_"), "{what}");
        let a = e.run(&fused).unwrap();
        let b = e.run(&plain).unwrap();
        assert_eq!(a.rows.len(), b.rows.len(), "{what}");
        let mut names = b.names.clone();
        names.sort();
        let mut fused_names = a.names.clone();
        fused_names.sort();
        assert_eq!(names, fused_names, "{what}");
        for r in 0..b.rows.len() {
            for name in &b.names {
                match (a.cell(r, name).unwrap(), b.cell(r, name).unwrap()) {
                    (upshot_engine::Cell::Number(x), upshot_engine::Cell::Number(y)) => assert!(
                        (x - y).abs() <= 1e-10 * y.abs().max(1.0),
                        "{what} row {r} {name}: fused {x} plain {y}"
                    ),
                    (x, y) => assert_eq!(x, y, "{what} row {r} {name}"),
                }
            }
        }
    }
    assert_eq!(
        upshot_sql::DUCKDB_MOMENTS,
        (upshot_duckdb_ext::MOMENTS, upshot_duckdb_ext::MAX_TERMS)
    );
    assert_eq!(upshot_sql::DUCKDB_LINEAR, upshot_duckdb_ext::LINEAR);
}

#[test]
fn fold_hash_in_sql_equals_fold_of_for_every_integer_key_type() {
    use upshot_sql::{fold_of, Fold, Key, KeyValue};
    let e = DuckDbEngine::open(MEMORY, false).unwrap();
    // Keys that fit 64 bits (negative too), 128-bit keys, unsigned keys past i64::MAX, and
    // integral decimals: the SQL hash must put each row in the fold `fold_of` computes.
    let keys: Vec<i128> = (0..400)
        .map(|i| i128::from(i) * 7_919 - 1_000_000)
        .chain((0..400).map(|i| (i128::from(i) + 3) * -100_000_000_000_000_000_000))
        .chain((0..400).map(|i| i128::from(u64::MAX) - i128::from(i) * 1_234_567))
        .collect();
    e.execute_batch(
        "CREATE TABLE k (b BIGINT, h HUGEINT, u UBIGINT, d DECIMAL(38,0), x DOUBLE, part INTEGER)",
    )
    .unwrap();
    let mut values = Vec::new();
    for (i, k) in keys.iter().enumerate() {
        let part = i / 400;
        let b = if part == 0 {
            k.to_string()
        } else {
            "NULL".into()
        };
        let u = if part == 2 {
            k.to_string()
        } else {
            "NULL".into()
        };
        values.push(format!("({b}, {k}, {u}, {k}, 1.0, {part})"));
    }
    e.execute_batch(&format!("INSERT INTO k VALUES {}", values.join(", ")))
        .unwrap();
    let src = Source::table("k").unwrap();
    for (column, part) in [("b", Some(0)), ("h", None), ("u", Some(2)), ("d", None)] {
        let f = e.flavor();
        let filter = part.map(|p| parse_filter(&format!("part = {p}"), f.dialect).unwrap());
        let design = Design {
            keys: vec![Key::Fold],
            terms: vec![DesignTerm::Numeric {
                column: "x".into(),
                centre: 0.0,
                scale: 1.0,
            }],
            extras: vec![],
            fold: Some(Fold {
                unit: column.into(),
                folds: 5,
            }),
        };
        let built = gram(&f, &src, filter.as_ref(), &design).unwrap();
        let g = e.run(&built.pass).unwrap();
        let mut expected = [0.0f64; 5];
        for (i, k) in keys.iter().enumerate() {
            if part.is_none_or(|p| p == i / 400) {
                expected[fold_of(*k, 5) as usize] += 1.0;
            }
        }
        let mut got = [0.0f64; 5];
        for r in 0..g.rows.len() {
            let KeyValue::Number(fold) = built.layout.keys(&g, r).unwrap()[0] else {
                panic!("fold key is a number")
            };
            got[fold as usize] = g.number(r, "n").unwrap();
        }
        assert_eq!(got, expected, "key column {column}");
    }
}
