//! Golden SQL plans of the shared pass shapes (sql/golden/<rendering>/<pass>.sql; the
//! cross-fitting logistic passes and the estimators' own passes are checked in
//! `upshot-methods`) and the rules for user SQL.
//!
//! Each golden file is the rendering of a fixed pass; the test fails when the rendering changes
//! (rewrite them with `UPSHOT_BLESS=1 cargo test -p upshot-sql`). Each golden file must also
//! round-trip: parsed with the dialect's parser and rendered again, it gives the same text
//! (the sqlparser-rs test culture of AST round trips).

use sqlparser::parser::Parser;
use std::path::PathBuf;
use upshot_sql::{
    cells, gram, levels, logistic_fits, parse_filter, profile, profiled_cells, residuals, Design,
    DesignTerm, DuckDb, Flavor, Models, Pass, Postgres, ProfileColumn, Source, Spark, SqlError,
    Variants, DIALECTS,
};

/// The renderings with golden files: DuckDB as upshot opens it (with its functions), DuckDB
/// without them, PostgreSQL, Spark SQL.
fn flavors() -> [(&'static str, Flavor); 4] {
    [
        ("duckdb", Flavor::duckdb()),
        ("duckdb-plain", Flavor::plain(&DuckDb)),
        ("postgres", Flavor::plain(&Postgres)),
        ("spark", Flavor::plain(&Spark)),
    ]
}

fn golden_dir() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("../../sql/golden")
}

/// Fixed passes over a source whose names need quoting (a space, a reserved word, a quote).
fn passes(f: &Flavor) -> Vec<Pass> {
    let d = f.dialect;
    let src = Source::table("main.order lines").unwrap();
    let filter = parse_filter("\"zone\" <> 'Old Town' AND prior_orders >= 0", d).unwrap();
    let q = Source::query("SELECT * FROM customers WHERE voucher IN (0, 1)", d).unwrap();
    vec![
        profile(
            f,
            &src,
            Some(&filter),
            &[
                ProfileColumn {
                    name: "spend 30d".into(),
                    numeric: true,
                    distinct: true,
                    zero_one: false,
                },
                ProfileColumn {
                    name: "select".into(),
                    numeric: false,
                    distinct: true,
                    zero_one: false,
                },
            ],
        )
        .unwrap()
        .pass,
        cells(
            f,
            &q,
            None,
            &["tenure_band".into(), "voucher".into()],
            "spend_30d",
        )
        .unwrap()
        .pass,
        gram(
            f,
            &src,
            Some(&filter),
            &Design::grouped(
                &["voucher".into()],
                &[
                    DesignTerm::Numeric {
                        column: "prior_orders".into(),
                        centre: 2.65,
                        scale: 1.7,
                    },
                    DesignTerm::Level {
                        column: "zone".into(),
                        levels: vec!["Old Town".into()],
                        centre: 0.17,
                        scale: 0.375,
                    },
                    DesignTerm::Numeric {
                        column: "say \"hi\"".into(),
                        centre: -1e-7,
                        scale: 3.0,
                    },
                ],
                &[],
            ),
        )
        .unwrap()
        .pass,
        logistic_fits(
            f,
            &src,
            None,
            &Design::grouped(
                &[],
                &[
                    DesignTerm::Numeric {
                        column: "prior_orders".into(),
                        centre: 2.65,
                        scale: 1.7,
                    },
                    DesignTerm::Level {
                        column: "zone".into(),
                        levels: vec!["Old Town".into()],
                        centre: 0.17,
                        scale: 0.375,
                    },
                ],
                &[("t", "voucher")],
            ),
            &Models::single(vec![0.25, -0.75, 1.0 / 3.0]),
            Variants::Single,
        )
        .unwrap()
        .pass,
        residuals(
            f,
            &src,
            None,
            &Design::grouped(
                &["tenure_band".into()],
                &[DesignTerm::Numeric {
                    column: "app_sessions".into(),
                    centre: 3.5,
                    scale: 2.0,
                }],
                &[("y", "spend_30d")],
            ),
            &Models::single(vec![80.5, 8.0]),
        )
        .unwrap()
        .pass,
    ]
}

/// Category levels, per segment, with the treated rows counted.
fn levels_pass(f: &Flavor) -> Pass {
    levels(
        f,
        &Source::table("customers").unwrap(),
        None,
        &["zone".into(), "mail wave".into()],
        &[
            "zone".into(),
            "mail wave".into(),
            "voucher".into(),
            "tenure_band".into(),
        ],
        &["tenure_band".into()],
        Some("voucher"),
    )
    .unwrap()
    .pass
}

#[test]
fn golden_plans_render_and_round_trip() {
    let bless = std::env::var_os("UPSHOT_BLESS").is_some();
    for (dir, f) in flavors() {
        let mut all: Vec<(String, Pass)> = passes(&f)
            .into_iter()
            .map(|p| (p.name.clone(), p))
            .collect();
        all.push(("levels".into(), levels_pass(&f)));
        // Stratify's cell table, which is also its profile: every row the filter keeps.
        let src = Source::table("main.order lines").unwrap();
        let filter =
            parse_filter("\"zone\" <> 'Old Town' AND prior_orders >= 0", f.dialect).unwrap();
        let keys = ["mail wave".to_string(), "zone".into(), "voucher".into()];
        let p = profiled_cells(&f, &src, Some(&filter), &keys, "spend 30d", 200_000);
        all.push(("cells-profiled".into(), p.unwrap().pass));
        for (name, p) in all {
            let sql = p.sql() + "\n";
            let path = golden_dir().join(dir).join(format!("{name}.sql"));
            if bless {
                std::fs::create_dir_all(path.parent().unwrap()).unwrap();
                std::fs::write(&path, &sql).unwrap();
            }
            let want = std::fs::read_to_string(&path)
                .unwrap_or_else(|e| panic!("{}: {e}; run with UPSHOT_BLESS=1", path.display()));
            assert_eq!(
                sql,
                want,
                "{} changed; if intended, rerun with UPSHOT_BLESS=1",
                path.display()
            );
            let parsed = Parser::parse_sql(f.dialect.parser().as_ref(), &want)
                .unwrap_or_else(|e| panic!("{}: {e}", path.display()));
            assert_eq!(parsed.len(), 1);
            assert_eq!(
                format!("{:#}", parsed[0]) + "\n",
                want,
                "{} does not round-trip",
                path.display()
            );
        }
    }
}

#[test]
fn identifiers_are_quoted_and_literals_escaped() {
    let sql: Vec<String> = passes(&Flavor::duckdb()).iter().map(|p| p.sql()).collect();
    assert!(
        sql[0].contains("\"main\".\"order lines\" AS src"),
        "{}",
        sql[0]
    );
    assert!(sql[0].contains("COUNT(\"select\")"), "{}", sql[0]);
    assert!(sql[2].contains("\"say \"\"hi\"\"\""), "{}", sql[2]);
    assert!(sql[2].contains("'Old Town'"), "{}", sql[2]);
    assert!(sql[2].contains("-1e-7"), "{}", sql[2]);
    let pg = Flavor::plain(&Postgres);
    assert!(passes(&pg)[2].sql().contains("DOUBLE PRECISION"));
    assert!(passes(&pg)[0].sql().contains("COUNT(DISTINCT"));
}

#[test]
fn user_sql_must_be_one_select_or_one_expression() {
    let d = &DuckDb;
    assert!(matches!(
        parse_filter("1; DROP TABLE x", d),
        Err(SqlError::TrailingInput { .. })
    ));
    assert!(matches!(
        parse_filter("a = 1 b", d),
        Err(SqlError::TrailingInput { .. })
    ));
    assert!(matches!(parse_filter("", d), Err(SqlError::Empty { .. })));
    assert!(matches!(
        parse_filter("a = = 1", d),
        Err(SqlError::Parse { .. })
    ));
    assert!(parse_filter(
        "zone IN ('Harbour', 'Old Town') AND NOT (voucher IS NULL)",
        d
    )
    .is_ok());
    assert!(matches!(
        Source::query("SELECT 1; DROP TABLE x", d),
        Err(SqlError::NotOneStatement { count: 2 })
    ));
    assert!(matches!(
        Source::query("DROP TABLE x", d),
        Err(SqlError::NotASelect { .. })
    ));
    assert!(matches!(
        Source::query("DELETE FROM x", d),
        Err(SqlError::NotASelect { .. })
    ));
    assert!(matches!(
        Source::query("INSERT INTO x VALUES (1)", d),
        Err(SqlError::NotASelect { .. })
    ));
    assert!(Source::query(
        "WITH a AS (SELECT 1 AS v) SELECT v FROM a UNION ALL SELECT 2",
        d
    )
    .is_ok());
    // Data-modifying statements are refused anywhere in a source query, before any engine
    // sees it: in a WITH clause, in a derived table, in a subquery.
    for p in [&DuckDb as &dyn upshot_sql::Dialect, &Postgres, &Spark] {
        for sql in [
            "WITH gone AS (DELETE FROM customers RETURNING *) SELECT * FROM gone",
            "WITH a AS (SELECT 1 AS v), b AS (UPDATE customers SET voucher = 1 RETURNING *) SELECT * FROM a",
            "SELECT * FROM (SELECT * FROM customers) AS c WHERE c.id IN (WITH d AS (DELETE FROM t RETURNING id) SELECT id FROM d)",
        ] {
            match Source::query(sql, p) {
                Err(SqlError::NotASelect { kind }) => {
                    assert!(kind == "DELETE" || kind == "UPDATE", "{sql}: {kind}")
                }
                Err(SqlError::Parse { .. }) => {} // the dialect does not even parse it
                other => panic!("{} accepted {sql}: {other:?}", p.name()),
            }
        }
    }
    assert!(matches!(Source::table("a..b"), Err(SqlError::Empty { .. })));
    let e = parse_filter("1; DROP TABLE x", d).unwrap_err().to_string();
    assert!(
        e.contains("one SQL expression") && e.contains("DROP"),
        "{e}"
    );
}

#[test]
fn csv_sources_are_string_literals() {
    let src = Source::Csv("demo-data/it's here.csv".into());
    let sql = upshot_sql::schema_probe(&Flavor::duckdb(), &src)
        .unwrap()
        .sql();
    assert!(
        sql.contains("read_csv_auto('demo-data/it''s here.csv') AS src"),
        "{sql}"
    );
    assert!(sql.contains("LIMIT 0"), "{sql}");
}

#[test]
fn parquet_sources_are_string_literals() {
    let src = Source::file("data/part-*.PARQUET");
    assert_eq!(src, Source::Parquet("data/part-*.PARQUET".into()));
    assert_eq!(Source::file("a.csv"), Source::Csv("a.csv".into()));
    let sql = upshot_sql::schema_probe(&Flavor::duckdb(), &src)
        .unwrap()
        .sql();
    assert!(
        sql.contains("read_parquet('data/part-*.PARQUET') AS src"),
        "{sql}"
    );
}

#[test]
fn bad_numbers_are_refused() {
    let src = Source::table("t").unwrap();
    let bad = |centre: f64, scale: f64| {
        gram(
            &Flavor::duckdb(),
            &src,
            None,
            &Design::grouped(
                &[],
                &[DesignTerm::Numeric {
                    column: "x".into(),
                    centre,
                    scale,
                }],
                &[],
            ),
        )
    };
    assert!(matches!(bad(0.0, 0.0), Err(SqlError::BadScale { .. })));
    assert!(matches!(
        bad(f64::NAN, 1.0),
        Err(SqlError::NonFinite { .. })
    ));
    assert!(bad(0.0, 1.0).is_ok());
}

#[test]
fn results_schema_file_is_current_and_statements_quote_the_name() {
    let path = golden_dir().join("../results.sql");
    let want = upshot_sql::results_schema_file();
    if std::env::var_os("UPSHOT_BLESS").is_some() {
        std::fs::write(&path, &want).unwrap();
    }
    assert_eq!(
        std::fs::read_to_string(&path).unwrap(),
        want,
        "sql/results.sql is stale; rerun with UPSHOT_BLESS=1"
    );
    for d in DIALECTS {
        let parsed = Parser::parse_sql(d.parser().as_ref(), &want).unwrap();
        assert_eq!(parsed.len(), 1);
        let s = upshot_sql::results_sql(d, "analytics.effect results").unwrap();
        let q = d.quote();
        assert!(
            s.create
                .contains(&format!("{q}analytics{q}.{q}effect results{q}")),
            "{}",
            s.create
        );
        assert!(s.insert.contains("CURRENT_TIMESTAMP"));
    }
    let d = &DuckDb;
    let evil = upshot_sql::results_sql(d, "x\"; DROP TABLE y; --").unwrap();
    assert!(
        evil.create
            .starts_with("CREATE TABLE IF NOT EXISTS \"x\"\"; DROP TABLE y; --\""),
        "{}",
        evil.create
    );
    assert!(upshot_sql::results_sql(d, "a..b").is_err());
}

#[test]
fn booleans_are_read_through_an_integer_where_the_dialect_needs_it() {
    let src = Source::table("t").unwrap();
    let col = |name: &str| ProfileColumn {
        name: name.into(),
        numeric: true,
        distinct: false,
        zero_one: true,
    };
    let term = DesignTerm::Numeric {
        column: "flag".into(),
        centre: 0.5,
        scale: 0.5,
    };
    let design = Design::grouped(&[], &[term], &[("t", "flag")]);
    let pg = Flavor::plain(&Postgres).with_booleans(vec!["flag".into()]);
    let p = profile(&pg, &src, None, &[col("flag"), col("x")])
        .unwrap()
        .sql();
    let via = "CAST(CAST(\"flag\" AS INTEGER) AS DOUBLE PRECISION)";
    assert!(p.contains(&format!("MIN({via})")), "{p}");
    assert!(p.contains(&format!("AVG({via})")), "{p}");
    assert!(p.contains(&format!("{via} <> 0")), "{p}");
    assert!(
        p.contains("MIN(\"x\")") && p.contains("AVG(CAST(\"x\" AS DOUBLE PRECISION))"),
        "{p}"
    );
    let g = gram(&pg, &src, None, &design).unwrap().sql();
    assert!(g.contains(via), "{g}");
    assert!(!g.contains("CAST(\"flag\" AS DOUBLE PRECISION)"), "{g}");
    // DuckDB casts a boolean to a float itself: the same text as for any column.
    let duck = Flavor::duckdb().with_booleans(vec!["flag".into()]);
    let p = profile(&duck, &src, None, &[col("flag")]).unwrap().sql();
    assert!(
        p.contains("AVG(CAST(\"flag\" AS DOUBLE))") && !p.contains("INTEGER"),
        "{p}"
    );
}

/// Found by fuzzing (fuzz/regressions/sql): nested input that made the parser backtrack for
/// 9.8 s is refused at once.
#[test]
fn deeply_nested_user_sql_is_refused_quickly() {
    let path =
        PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("../../fuzz/regressions/sql/nested-timeout");
    let text = String::from_utf8_lossy(&std::fs::read(path).unwrap()).to_string();
    for d in DIALECTS {
        let _ = parse_filter(&text, d);
        let _ = Source::query(&text, d);
    }
    let deep = format!("{}1 = 1{}", "(".repeat(40), ")".repeat(40));
    assert!(matches!(
        parse_filter(&deep, &DuckDb),
        Err(SqlError::Parse { .. })
    ));
    assert!(parse_filter(
        &format!("{}1 = 1{}", "(".repeat(10), ")".repeat(10)),
        &DuckDb
    )
    .is_ok());
}
