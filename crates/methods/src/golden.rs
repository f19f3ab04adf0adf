//! Golden plans of the estimators' own passes (`sql/golden/<rendering>/<pass>.sql`, beside the
//! shared passes' files that `upshot-sql`'s test checks): the fixtures and the comparison.

use upshot_sql::{
    Design, DesignTerm, DuckDb, Flavor, Fold, Key, KeyValue, Model, Models, Pass, Postgres,
    Selector, Spark,
};

/// The renderings with golden files: DuckDB as upshot opens it (with its functions), DuckDB
/// without them, PostgreSQL, Spark SQL.
pub(crate) fn flavors() -> [(&'static str, Flavor); 4] {
    [
        ("duckdb", Flavor::duckdb()),
        ("duckdb-plain", Flavor::plain(&DuckDb)),
        ("postgres", Flavor::plain(&Postgres)),
        ("spark", Flavor::plain(&Spark)),
    ]
}

/// A cross-fitting design: segment and fold keys, one numeric and one squared term, the
/// treatment and outcome as extras.
pub(crate) fn fold_design() -> Design {
    let x = DesignTerm::Numeric {
        column: "prior orders".into(),
        centre: 2.5,
        scale: 1.5,
    };
    Design {
        keys: vec![Key::Column("tenure_band".into())],
        terms: vec![
            x.clone(),
            DesignTerm::Product {
                factors: vec![x.clone(), x],
                centre: 1.0,
                scale: 1.0,
            },
        ],
        extras: vec![("t", "voucher".into()), ("y", "spend_30d".into())],
        fold: Some(Fold {
            unit: "customer_id".into(),
            folds: 2,
        }),
    }
}

/// Models per tenure band and fold.
pub(crate) fn fold_models(offset: f64) -> Models {
    let mut models = Vec::new();
    for band in ["new", "1y"] {
        for f in 0..2 {
            models.push(Model {
                key: vec![KeyValue::Text(band.into()), KeyValue::Number(f as f64)],
                coef: vec![offset + f as f64, 0.5, -0.25],
            });
        }
    }
    Models {
        selector: Selector {
            keys: vec![0],
            fold: true,
        },
        models,
    }
}

/// Compares `pass` with `sql/golden/<dir>/<name>.sql` (rewrites it with `UPSHOT_BLESS=1`) and
/// checks that the file round-trips through the dialect's parser.
pub(crate) fn check(dir: &str, flavor: &Flavor, name: &str, pass: &Pass) {
    let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("../../sql/golden")
        .join(dir)
        .join(format!("{name}.sql"));
    let sql = pass.sql() + "\n";
    if std::env::var_os("UPSHOT_BLESS").is_some() {
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
    let parsed = sqlparser::parser::Parser::parse_sql(flavor.dialect.parser().as_ref(), &want)
        .unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    assert_eq!(parsed.len(), 1);
    assert_eq!(
        format!("{:#}", parsed[0]) + "\n",
        want,
        "{} does not round-trip",
        path.display()
    );
}

/// The logistic passes of cross-fitting (file names carry a prefix to keep them apart from the
/// single fit's `logistic-step`).
#[test]
fn golden_crossfit_logistic_passes() {
    use upshot_sql::{logistic_fits, Source, Variants};
    let src = Source::table("customers").unwrap();
    let design = fold_design();
    for (dir, f) in flavors() {
        for (name, variants, models) in [
            (
                "logistic-crossfit",
                Variants::Complement(2),
                fold_models(0.0),
            ),
            (
                "logistic-by-fold",
                Variants::ByFold,
                Models::single(vec![0.1, 0.2, 0.3]),
            ),
            (
                "logistic-scores",
                Variants::ComplementScores(2),
                fold_models(0.0),
            ),
        ] {
            let p = logistic_fits(&f, &src, None, &design, &models, variants).unwrap();
            check(dir, &f, name, &p);
        }
    }
}

/// The propensity's first Newton pass grouped by fold and arm, with the outcome models' Gram
/// sums riding in it (`doubly-robust`).
#[test]
fn golden_logistic_pass_with_gram() {
    use upshot_sql::{logistic_fits_with_gram, Source, Variants};
    let src = Source::table("customers").unwrap();
    let outcome = DesignTerm::Numeric {
        column: "spend_30d".into(),
        centre: 40.0,
        scale: 12.0,
    };
    for (dir, f) in flavors() {
        let p = logistic_fits_with_gram(
            &f,
            &src,
            None,
            &fold_design(),
            &Models::single(vec![0.1, 0.2, 0.3]),
            Variants::ByFold,
            std::slice::from_ref(&outcome),
        )
        .unwrap();
        assert_eq!(p.layout.gram.terms, 3, "{dir}");
        check(dir, &f, "logistic-by-fold-gram", &p);
    }
}
