//! End-to-end tests of `upshot plan` and `upshot run` on the committed demo sample: every
//! method runs, recovers the demo's true effect within its interval (simulation truth from the
//! generator), bad input exits 2 with a message naming the column or value and writes nothing,
//! and `--into` is atomic and idempotent.

use serde_json::Value;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};
use upshot_engine::Engine;
use upshot_engine_duckdb::DuckDbEngine;

fn repo() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../..")
}

fn upshot(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_upshot"))
        .args(args)
        .current_dir(repo())
        .output()
        .expect("binary runs")
}

fn text(o: &Output) -> String {
    format!(
        "{}{}",
        String::from_utf8_lossy(&o.stdout),
        String::from_utf8_lossy(&o.stderr)
    )
}

fn json(args: &[&str]) -> Value {
    let mut a = args.to_vec();
    a.extend(["--format", "json"]);
    let out = upshot(&a);
    assert_eq!(out.status.code(), Some(0), "{}", text(&out));
    serde_json::from_slice(&out.stdout).unwrap_or_else(|e| panic!("{e}: {}", text(&out)))
}

/// Runs and expects exit `code`, a message containing every `needle`, and nothing on stdout.
fn fails(args: &[&str], code: i32, needles: &[&str]) {
    let out = upshot(args);
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(code), "{args:?}: {}", text(&out));
    for n in needles {
        assert!(err.contains(n), "{args:?}: `{n}` not in: {err}");
    }
    assert!(out.stdout.is_empty(), "{args:?} printed: {}", text(&out));
}

const SAMPLE: &str = "demo-data/sample/customers.csv";
const GRAPH: &str = "demo-data/voucher.graph";

fn truth() -> Value {
    let t = std::fs::read_to_string(repo().join("demo-data/sample/customers.truth.json")).unwrap();
    serde_json::from_str(&t).unwrap()
}

/// A scratch DuckDB file with the sample as table `customers` plus columns for bad-input cases.
fn scratch(name: &str) -> PathBuf {
    let dir = std::env::temp_dir().join(format!("upshot-run-{}-{name}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    let db = dir.join("demo.duckdb");
    let e = DuckDbEngine::open(db.to_str().unwrap(), true).unwrap();
    let csv = repo().join(SAMPLE);
    e.execute_batch(&format!(
        "CREATE TABLE customers AS SELECT *, prior_orders * 2 + 1 AS orders_doubled, \
         prior_orders + 100 * voucher AS leak, customer_id % 2000 AS cell_id, \
         CASE WHEN customer_id % 10 = 0 THEN NULL ELSE household_size END AS household_gappy, \
         CAST(NULL AS DOUBLE) AS empty_col, spend_30d AS \"spend 30d\", zone AS \"select\", \
         prior_orders AS \"say \"\"hi\"\"\", CAST(voucher AS BOOLEAN) AS voucher_flag FROM read_csv_auto('{}');
         CREATE TABLE extreme AS SELECT *, prior_orders * 1e300 AS big_x, spend_30d * 1e300 AS big_y, \
         CASE WHEN customer_id = 100017 THEN 1.7e308 ELSE spend_30d END AS huge_y, \
         CASE WHEN customer_id = 100017 THEN 'inf'::DOUBLE ELSE spend_30d END AS inf_y, \
         CASE WHEN customer_id = 100017 THEN 'nan'::DOUBLE ELSE household_size END AS nan_x, \
         CAST(spend_30d AS VARCHAR) AS spend_text FROM customers;
         CREATE TABLE new_untreated AS SELECT * REPLACE (CASE WHEN tenure_band = 'new' THEN 0 ELSE voucher END AS voucher) FROM customers;",
        csv.display()
    ))
    .unwrap();
    db
}

#[test]
fn every_method_recovers_the_demo_truth_within_its_interval() {
    // Simulation truth: the generator's effect for the sampled rows (truth file, spend_30d).
    let t = truth();
    let want = |k: &str| {
        t["outcomes"]["spend_30d"][k]
            .as_f64()
            .unwrap_or_else(|| panic!("{k} in {t}"))
    };
    for (method, estimand, key) in [
        ("regress", "ATE", "ate"),
        ("weight", "ATE", "ate"),
        ("doubly-robust", "ATE", "ate"),
        ("partial-out", "ATE", "ate"),
        ("doubly-robust", "ATT", "att"),
        ("regress", "ATC", "atc"),
    ] {
        let v = json(&[
            "run",
            "--graph",
            GRAPH,
            "--source",
            SAMPLE,
            "--treatment",
            "voucher",
            "--outcome",
            "spend_30d",
            "--method",
            method,
            "--estimand",
            estimand,
            "--unit",
            "customer_id",
        ]);
        let e = &v["estimates"][0];
        let (lo, hi) = (
            e["ci_low"].as_f64().unwrap(),
            e["ci_high"].as_f64().unwrap(),
        );
        let truth = want(key);
        assert!(
            lo <= truth && truth <= hi,
            "{method} {estimand}: [{lo}, {hi}] misses {truth}"
        );
        for k in [
            "question",
            "segment",
            "estimand",
            "method",
            "estimate",
            "std_error",
            "n_treated",
            "n_control",
            "adjustment_set",
        ] {
            assert!(!e[k].is_null(), "{method}: {k} missing in {e}");
        }
        assert_eq!(e["method"], method);
    }
    // Stratify needs discrete strata: the minimal set {prior_orders, zone} is discrete.
    let v = json(&[
        "run",
        "--graph",
        GRAPH,
        "--source",
        SAMPLE,
        "--treatment",
        "voucher",
        "--outcome",
        "spend_30d",
        "--method",
        "stratify",
        "--adjust",
        "prior_orders,zone",
    ]);
    let e = &v["estimates"][0];
    let truth = want("ate");
    assert!(
        e["ci_low"].as_f64().unwrap() <= truth && truth <= e["ci_high"].as_f64().unwrap(),
        "{e}"
    );
}

#[test]
fn segments_give_one_row_each_plus_all() {
    let v = json(&[
        "run",
        "demo-data/voucher-backdoor.toml",
        "--question",
        "spend",
        "--method",
        "regress",
    ]);
    let est = v["estimates"].as_array().unwrap();
    assert_eq!(est[0]["segment"], "all");
    let bands: Vec<&str> = est[1..]
        .iter()
        .map(|e| e["segment_values"]["tenure_band"].as_str().unwrap())
        .collect();
    assert_eq!(bands.len(), 3, "{bands:?}");
    let t = truth();
    for e in &est[1..] {
        let band = e["segment_values"]["tenure_band"].as_str().unwrap();
        let truth = t["outcomes"]["spend_30d"]["cate_by_tenure_band"][band]
            .as_f64()
            .unwrap();
        let (lo, hi) = (
            e["ci_low"].as_f64().unwrap(),
            e["ci_high"].as_f64().unwrap(),
        );
        assert!(
            lo <= truth && truth <= hi,
            "{band}: [{lo}, {hi}] misses {truth}"
        );
    }
}

#[test]
fn plan_lists_the_passes_run_executes() {
    for method in [
        "stratify",
        "regress",
        "weight",
        "doubly-robust",
        "partial-out",
    ] {
        let adjust = if method == "stratify" {
            "prior_orders,zone"
        } else {
            "household_size,prior_orders,zone"
        };
        let args = [
            "--graph",
            GRAPH,
            "--source",
            SAMPLE,
            "--treatment",
            "voucher",
            "--outcome",
            "spend_30d",
            "--method",
            method,
            "--adjust",
            adjust,
            "--unit",
            "customer_id",
        ];
        let mut p = vec!["plan"];
        p.extend(args);
        let plan = json(&p);
        let planned: Vec<String> = plan["questions"][0]["passes"]
            .as_array()
            .unwrap()
            .iter()
            .map(|x| x["name"].as_str().unwrap().to_string())
            .collect();
        let mut r = vec!["run"];
        r.extend(args);
        let run = json(&r);
        let passes = run["questions"][0]["diagnostics"]["passes"]
            .as_u64()
            .unwrap() as usize;
        let iterative = planned.iter().filter(|n| *n == "logistic-step").count();
        if iterative == 0 {
            assert_eq!(passes, planned.len(), "{method}: plan {planned:?}");
        } else {
            assert!(
                passes > planned.len(),
                "{method}: {passes} passes, plan {planned:?}"
            );
        }
        let out = upshot(
            &p.iter()
                .copied()
                .filter(|a| *a != "--format")
                .collect::<Vec<_>>(),
        );
        let s = String::from_utf8_lossy(&out.stdout);
        // Stratify's cell table is its own profile: one pass.
        let first = if method == "stratify" {
            "cells"
        } else {
            "profile"
        };
        assert!(s.contains(&format!("-- pass 1: {first}")), "{s}");
        assert!(s.contains("SELECT"), "{s}");
    }
    // PostgreSQL reads a table (plan opens no database); a file source is refused there.
    let pg = |source: &str| {
        upshot(&[
            "plan",
            "--graph",
            GRAPH,
            "--db",
            "warehouse.duckdb",
            "--source",
            source,
            "--treatment",
            "voucher",
            "--outcome",
            "spend_30d",
            "--method",
            "weight",
            "--dialect",
            "postgres",
        ])
    };
    let out = pg("analytics.customers");
    let s = String::from_utf8_lossy(&out.stdout);
    assert!(s.contains("DOUBLE PRECISION"), "{}", text(&out));
    assert!(s.contains("\"analytics\".\"customers\""), "{s}");
    assert!(!s.contains("upshot_"), "{s}");
    let out = pg(SAMPLE);
    assert_eq!(out.status.code(), Some(2), "{}", text(&out));
    assert!(text(&out).contains("reads no CSV files"), "{}", text(&out));
    // Without upshot's functions: --portable; the old dialect name says what replaced it.
    let portable = upshot(&[
        "plan",
        "--graph",
        GRAPH,
        "--source",
        SAMPLE,
        "--treatment",
        "voucher",
        "--outcome",
        "spend_30d",
        "--method",
        "weight",
        "--portable",
    ]);
    let s = String::from_utf8_lossy(&portable.stdout);
    assert!(s.contains("SUM(") && !s.contains("upshot_"), "{s}");
    fails(
        &[
            "plan",
            "--graph",
            GRAPH,
            "--source",
            SAMPLE,
            "--treatment",
            "voucher",
            "--outcome",
            "spend_30d",
            "--dialect",
            "duckdb-plain",
        ],
        2,
        &["--portable"],
    );
}

#[test]
fn csv_output_has_the_documented_columns() {
    let out = upshot(&[
        "run",
        "--graph",
        GRAPH,
        "--source",
        SAMPLE,
        "--treatment",
        "voucher",
        "--outcome",
        "spend_30d",
        "--method",
        "regress",
        "--format",
        "csv",
    ]);
    let s = String::from_utf8_lossy(&out.stdout);
    assert!(s.starts_with("question,segment,estimand,method,estimate,std_error,ci_low,ci_high,n_treated,n_control,n_used,adjustment_set\n"), "{s}");
    assert_eq!(s.lines().count(), 2, "{s}");
}

#[test]
fn bad_input_is_refused_with_the_column_or_value_named() {
    let db = scratch("bad");
    let db = db.to_str().unwrap();
    let base = |t: &str, y: &str, m: &str| -> Vec<String> {
        [
            "run",
            "--db",
            db,
            "--source",
            "customers",
            "--graph",
            "",
            "--treatment",
            t,
            "--outcome",
            y,
            "--method",
            m,
        ]
        .iter()
        .map(|s| s.to_string())
        .collect()
    };
    let run = |mut a: Vec<String>, graph: &str, extra: &[&str], code: i32, needles: &[&str]| {
        a[6] = graph.to_string();
        a.extend(extra.iter().map(|s| s.to_string()));
        let refs: Vec<&str> = a.iter().map(|s| s.as_str()).collect();
        fails(&refs, code, needles);
    };
    let g = "prior_orders, zone -> voucher; prior_orders, zone, voucher -> spend_30d";
    // unknown table
    fails(
        &[
            "run",
            "--db",
            db,
            "--source",
            "no_such_table",
            "--graph",
            g,
            "--treatment",
            "voucher",
            "--outcome",
            "spend_30d",
        ],
        2,
        &["no_such_table"],
    );
    // unknown column, with a suggestion
    run(
        base("vouchr", "spend_30d", "regress"),
        "prior_orders -> vouchr -> spend_30d; prior_orders -> spend_30d",
        &[],
        2,
        &["no column `vouchr`", "did you mean `voucher`"],
    );
    // treatment not 0/1 for a binary method
    run(
        base("household_size", "spend_30d", "weight"),
        "prior_orders -> household_size -> spend_30d; prior_orders -> spend_30d",
        &[],
        2,
        &["`household_size`", "0/1"],
    );
    // constant treatment
    run(
        base("voucher", "spend_30d", "regress"),
        g,
        &["--filter", "voucher = 1"],
        2,
        &["treatment `voucher` is constant"],
    );
    // an arm with no rows in a segment
    fails(
        &[
            "run",
            "--db",
            db,
            "--source",
            "new_untreated",
            "--graph",
            "prior_orders, zone -> voucher; prior_orders, zone, voucher, tenure_band -> spend_30d",
            "--treatment",
            "voucher",
            "--outcome",
            "spend_30d",
            "--method",
            "regress",
            "--segment-by",
            "tenure_band",
        ],
        2,
        &["tenure_band=new has no treated rows"],
    );
    // outcome not numeric
    run(
        base("voucher", "zone", "regress"),
        "prior_orders -> voucher -> zone; prior_orders -> zone",
        &[],
        2,
        &["outcome `zone` is not numeric"],
    );
    // all rows NULL in a used column
    run(
        base("voucher", "spend_30d", "regress"),
        "empty_col, prior_orders -> voucher -> spend_30d; empty_col, prior_orders -> spend_30d",
        &[],
        2,
        &["no usable rows", "`empty_col` 5000 NULL"],
    );
    // empty source
    run(
        base("voucher", "spend_30d", "regress"),
        g,
        &["--filter", "1 = 0"],
        2,
        &["no rows"],
    );
    // perfectly collinear covariates
    run(base("voucher", "spend_30d", "regress"), "prior_orders, orders_doubled -> voucher -> spend_30d; prior_orders, orders_doubled -> spend_30d", &[], 2, &["collinear", "`orders_doubled`", "`prior_orders`"]);
    // perfect separation / propensities at 0 and 1
    run(
        base("voucher", "spend_30d", "weight"),
        "leak -> voucher -> spend_30d; leak -> spend_30d",
        &[],
        2,
        &["separation", "`leak`", "positivity"],
    );
    // a continuous stratum column
    run(
        base("voucher", "spend_30d", "stratify"),
        "cell_id -> voucher -> spend_30d; cell_id -> spend_30d",
        &[],
        2,
        &["`cell_id` has 2000 distinct values", "--method regress"],
    );
    // NULLs with --on-null error
    run(
        base("voucher", "spend_30d", "regress"),
        "household_gappy -> voucher -> spend_30d; household_gappy -> spend_30d",
        &["--on-null", "error"],
        2,
        &["500 of 5000 rows", "`household_gappy` 500 NULL"],
    );
    // a filter that is not one expression; a source that is not one SELECT
    run(
        base("voucher", "spend_30d", "regress"),
        g,
        &["--filter", "1; DROP TABLE customers"],
        2,
        &["one SQL expression"],
    );
    fails(
        &[
            "run",
            "--db",
            db,
            "--source",
            "SELECT * FROM customers; DROP TABLE customers",
            "--graph",
            g,
            "--treatment",
            "voucher",
            "--outcome",
            "spend_30d",
        ],
        2,
        &["one SELECT"],
    );
    // the table survived all of it
    let e = DuckDbEngine::open(db, false).unwrap();
    assert_eq!(
        e.columns(&upshot_sql::Source::table("customers").unwrap())
            .unwrap()
            .len(),
        19
    );
}

#[test]
fn many_cells_warn_and_nulls_are_counted() {
    let db = scratch("cells");
    let db = db.to_str().unwrap();
    let out = upshot(&[
        "run",
        "--db",
        db,
        "--source",
        "customers",
        "--graph",
        "cell_id: categorical; cell_id -> voucher -> spend_30d; cell_id -> spend_30d",
        "--treatment",
        "voucher",
        "--outcome",
        "spend_30d",
        "--method",
        "stratify",
    ]);
    assert_eq!(out.status.code(), Some(0), "{}", text(&out));
    let s = text(&out);
    assert!(s.contains("warning: the cell table has "), "{s}");
    assert!(s.contains("doubly-robust"), "{s}");
    let v = json(&[
        "run",
        "--db",
        db,
        "--source",
        "customers",
        "--graph",
        "household_gappy -> voucher -> spend_30d; household_gappy -> spend_30d",
        "--treatment",
        "voucher",
        "--outcome",
        "spend_30d",
        "--method",
        "regress",
    ]);
    let d = &v["questions"][0]["diagnostics"];
    assert_eq!(d["rows_excluded_null"], 500.0, "{d}");
    assert_eq!(v["estimates"][0]["n_used"], 4500.0);
}

#[test]
fn quoted_identifiers_work() {
    let db = scratch("quoted");
    let db = db.to_str().unwrap();
    let v = json(&["run", "--db", db, "--source", "customers", "--graph", "\"say \\\"hi\\\"\", \"select\" -> voucher -> \"spend 30d\"; \"say \\\"hi\\\"\", \"select\" -> \"spend 30d\"", "--treatment", "voucher", "--outcome", "spend 30d", "--method", "doubly-robust", "--unit", "customer_id"]);
    let e = &v["estimates"][0];
    let plain = json(&[
        "run",
        "--db",
        db,
        "--source",
        "customers",
        "--graph",
        "prior_orders, zone -> voucher -> spend_30d; prior_orders, zone -> spend_30d",
        "--treatment",
        "voucher",
        "--outcome",
        "spend_30d",
        "--method",
        "doubly-robust",
        "--unit",
        "customer_id",
    ]);
    let p = &plain["estimates"][0];
    assert!(
        (e["estimate"].as_f64().unwrap() - p["estimate"].as_f64().unwrap()).abs() < 1e-9,
        "{e} vs {p}"
    );
}

#[test]
fn parquet_files_and_patterns_give_the_csv_estimate() {
    // The same rows as Parquet — one file, and split over two files read by a pattern — must
    // give the CSV's estimate and standard error.
    let dir = std::env::temp_dir().join(format!("upshot-run-{}-parquet", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(dir.join("parts")).unwrap();
    let e = DuckDbEngine::open(upshot_engine_duckdb::MEMORY, true).unwrap();
    let csv = repo().join(SAMPLE);
    let one = dir.join("customers.parquet");
    e.execute_batch(&format!(
        "COPY (SELECT * FROM read_csv_auto('{csv}')) TO '{one}' (FORMAT parquet);
         COPY (SELECT * FROM read_csv_auto('{csv}') WHERE customer_id % 2 = 0) TO '{a}' (FORMAT parquet);
         COPY (SELECT * FROM read_csv_auto('{csv}') WHERE customer_id % 2 = 1) TO '{b}' (FORMAT parquet);",
        csv = csv.display(),
        one = one.display(),
        a = dir.join("parts/part-0.parquet").display(),
        b = dir.join("parts/part-1.parquet").display(),
    ))
    .unwrap();
    let estimate = |source: &str| {
        let v = json(&[
            "run",
            "--graph",
            GRAPH,
            "--source",
            source,
            "--treatment",
            "voucher",
            "--outcome",
            "spend_30d",
            "--method",
            "doubly-robust",
            "--unit",
            "customer_id",
        ]);
        let e = &v["estimates"][0];
        (
            e["estimate"].as_f64().unwrap(),
            e["std_error"].as_f64().unwrap(),
        )
    };
    let want = estimate(SAMPLE);
    let pattern = dir.join("parts/part-*.parquet");
    for source in [one.display().to_string(), pattern.display().to_string()] {
        let got = estimate(&source);
        assert!(
            (got.0 - want.0).abs() < 1e-9 * want.0.abs() && (got.1 - want.1).abs() < 1e-9 * want.1,
            "{source}: {got:?} vs CSV {want:?}"
        );
    }
    // A pattern that matches nothing, and a folder, are refused as input.
    let none = dir.join("parts/nothing-*.parquet");
    let out = upshot(&[
        "run",
        "--graph",
        GRAPH,
        "--source",
        none.to_str().unwrap(),
        "--treatment",
        "voucher",
        "--outcome",
        "spend_30d",
    ]);
    assert_eq!(out.status.code(), Some(2), "{}", text(&out));
    assert!(text(&out).contains("nothing-*.parquet"), "{}", text(&out));
    fails(
        &[
            "run",
            "--graph",
            GRAPH,
            "--source",
            dir.join("parts").to_str().unwrap(),
            "--treatment",
            "voucher",
            "--outcome",
            "spend_30d",
        ],
        2,
        &["is a folder", "*.parquet"],
    );
    let _ = std::fs::remove_dir_all(&dir);
}

fn count_rows(db: &str, table: &str, key: Option<&str>) -> f64 {
    let e = DuckDbEngine::open(db, false).unwrap();
    let sql = match key {
        Some(k) => format!("SELECT COUNT(*) AS n FROM {table} WHERE run_key = '{k}'"),
        None => format!("SELECT COUNT(*) AS n FROM {table}"),
    };
    e.query_number(&sql).unwrap()
}

#[test]
fn into_appends_atomically_and_a_run_key_replaces() {
    let db = scratch("into");
    let db = db.to_str().unwrap();
    let args = |extra: &[&str]| -> Vec<String> {
        let mut a: Vec<String> = [
            "run",
            "demo-data/voucher-backdoor.toml",
            "--db",
            db,
            "--source",
            SAMPLE,
            "--question",
            "spend",
            "--method",
            "regress",
            "--into",
            "effects",
        ]
        .iter()
        .map(|s| s.to_string())
        .collect();
        a.extend(extra.iter().map(|s| s.to_string()));
        a
    };
    let go = |a: Vec<String>| {
        let refs: Vec<&str> = a.iter().map(|s| s.as_str()).collect();
        let o = upshot(&refs);
        assert_eq!(o.status.code(), Some(0), "{}", text(&o));
    };
    go(args(&["--run-key", "daily-2026-12-01"]));
    assert_eq!(count_rows(db, "effects", None), 4.0);
    go(args(&["--run-key", "daily-2026-12-01"]));
    assert_eq!(
        count_rows(db, "effects", None),
        4.0,
        "same run key must replace"
    );
    go(args(&["--run-key", "daily-2026-12-02"]));
    assert_eq!(count_rows(db, "effects", Some("daily-2026-12-02")), 4.0);
    go(args(&[]));
    assert_eq!(count_rows(db, "effects", None), 12.0);
    // A failure inside the transaction writes nothing: a table of another shape.
    let e = DuckDbEngine::open(db, true).unwrap();
    e.execute_batch("CREATE TABLE other (x INTEGER); INSERT INTO other VALUES (1)")
        .unwrap();
    drop(e);
    let mut bad = args(&["--run-key", "k"]);
    bad[11] = "other".into();
    let refs: Vec<&str> = bad.iter().map(|s| s.as_str()).collect();
    let o = upshot(&refs);
    assert_eq!(o.status.code(), Some(1), "{}", text(&o));
    assert!(text(&o).contains("nothing was written"), "{}", text(&o));
    assert_eq!(count_rows(db, "other", None), 1.0);
    // Bad input before writing creates no table.
    let mut bad = args(&["--method", "nonsense"]);
    bad[11] = "never".into();
    bad.retain(|a| a != "regress");
    let pos = bad.iter().position(|a| a == "--method").unwrap();
    bad.remove(pos);
    let refs: Vec<&str> = bad.iter().map(|s| s.as_str()).collect();
    let o = upshot(&refs);
    assert_eq!(o.status.code(), Some(2), "{}", text(&o));
    let e = DuckDbEngine::open(db, false).unwrap();
    assert!(e.query_number("SELECT COUNT(*) FROM never").is_err());
}

#[test]
fn plan_and_run_without_a_unit_key_fit_on_all_rows_and_say_so() {
    // Formerly a panic (exit 101): doubly-robust and partial-out without --unit.
    for method in ["doubly-robust", "partial-out", "auto"] {
        let args = [
            "--graph",
            GRAPH,
            "--source",
            SAMPLE,
            "--treatment",
            "voucher",
            "--outcome",
            "spend_30d",
            "--method",
            method,
        ];
        let mut p = vec!["plan"];
        p.extend(args);
        let out = upshot(&p);
        assert_eq!(out.status.code(), Some(0), "{method}: {}", text(&out));
        let s = String::from_utf8_lossy(&out.stdout);
        assert!(
            !s.contains("logistic-scores"),
            "{method}: cross-fitted without a unit: {s}"
        );
        let mut r = vec!["run"];
        r.extend(args);
        let out = upshot(&r);
        assert_eq!(out.status.code(), Some(0), "{method}: {}", text(&out));
        let s = String::from_utf8_lossy(&out.stdout);
        assert!(s.contains("note: no unit key was named"), "{method}: {s}");
    }
}

#[test]
fn filters_are_row_predicates_and_sources_read_only() {
    let db = scratch("hostile");
    let db = db.to_str().unwrap();
    let g = "prior_orders, zone -> voucher; prior_orders, zone, voucher -> spend_30d";
    let base = |extra: &[&str]| {
        let mut a = vec![
            "run",
            "--db",
            db,
            "--graph",
            g,
            "--treatment",
            "voucher",
            "--outcome",
            "spend_30d",
            "--method",
            "regress",
        ];
        a.extend(extra);
        a.iter().map(|s| s.to_string()).collect::<Vec<_>>()
    };
    let go = |a: Vec<String>, needles: &[&str]| {
        let refs: Vec<&str> = a.iter().map(|s| s.as_str()).collect();
        fails(&refs, 2, needles);
    };
    // A subquery in a filter read a file's contents; now it is refused by name.
    go(
        base(&[
            "--source",
            "customers",
            "--filter",
            "prior_orders < (SELECT count(*) FROM read_text('/etc/hostname'))",
        ]),
        &["filter", "subquery", "read_text"],
    );
    go(
        base(&["--source", "customers", "--filter", "getenv('HOME') <> ''"]),
        &["getenv"],
    );
    // Data-modifying statements anywhere in a source query are refused before any query runs.
    for q in [
        "WITH gone AS (DELETE FROM customers RETURNING *) SELECT * FROM gone",
        "WITH a AS (SELECT * FROM customers), b AS (UPDATE customers SET voucher = 0 RETURNING *) SELECT * FROM a",
    ] {
        let a = base(&["--source", q]);
        let refs: Vec<&str> = a.iter().map(|s| s.as_str()).collect();
        let out = upshot(&refs);
        assert_eq!(out.status.code(), Some(2), "{q}: {}", text(&out));
        assert!(out.stdout.is_empty());
    }
    let e = DuckDbEngine::open(db, false).unwrap();
    assert_eq!(
        e.query_number("SELECT COUNT(*) FROM customers WHERE voucher = 1")
            .unwrap(),
        e.query_number("SELECT SUM(voucher) FROM customers")
            .unwrap()
    );
    assert_eq!(
        e.query_number("SELECT COUNT(*) FROM customers").unwrap(),
        5000.0
    );
}

#[test]
fn a_closed_or_full_output_is_exit_1_and_writes_nothing() {
    let db = scratch("closed");
    let db = db.to_str().unwrap();
    let args = [
        "run",
        "demo-data/voucher-backdoor.toml",
        "--db",
        db,
        "--source",
        SAMPLE,
        "--question",
        "spend",
        "--method",
        "regress",
        "--into",
        "effects",
    ];
    // A full device: every write fails.
    let full = std::fs::OpenOptions::new()
        .write(true)
        .open("/dev/full")
        .unwrap();
    let out = Command::new(env!("CARGO_BIN_EXE_upshot"))
        .args(args)
        .current_dir(repo())
        .stdout(full)
        .output()
        .unwrap();
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(1), "{err}");
    assert!(err.contains("cannot write the output"), "{err}");
    assert!(!err.contains("panicked"), "{err}");
    let e = DuckDbEngine::open(db, false).unwrap();
    assert!(
        e.query_number("SELECT COUNT(*) FROM effects").is_err(),
        "nothing written"
    );
    drop(e);
    // A closed pipe (`| head -c0`): no panic, whether or not the reader left first.
    for verb in ["run", "check"] {
        let script = format!(
            "set -o pipefail; \"$0\" {verb} demo-data/voucher-backdoor.toml | head -c0; echo \"status ${{PIPESTATUS[0]}}\"",
        );
        let out = Command::new("bash")
            .args(["-c", &script, env!("CARGO_BIN_EXE_upshot")])
            .current_dir(repo())
            .output()
            .unwrap();
        let all = text(&out);
        assert!(!all.contains("panicked"), "{verb}: {all}");
        assert!(
            all.contains("status 0") || all.contains("status 1"),
            "{verb}: {all}"
        );
    }
}

#[test]
fn the_one_binary_treatment_rule() {
    // regress fits one model per arm: a declared non-binary treatment is refused at the study,
    // as for every adjustment method that compares arms.
    fails(
        &[
            "run",
            "--graph",
            "t: continuous; x -> t -> spend_30d; x -> spend_30d",
            "--source",
            SAMPLE,
            "--treatment",
            "t",
            "--outcome",
            "spend_30d",
            "--method",
            "regress",
        ],
        2,
        &["binary", "partial-out"],
    );
}

#[test]
fn check_and_run_read_the_same_database_from_a_study() {
    // A study names its database relative to itself; `check` and `run` both resolve it so,
    // whatever the current folder.
    let dir = std::env::temp_dir().join(format!("upshot-run-{}-paths", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(dir.join("studies")).unwrap();
    let db = dir.join("studies/warehouse.duckdb");
    let e = DuckDbEngine::open(db.to_str().unwrap(), true).unwrap();
    e.execute_batch(&format!(
        "CREATE TABLE customers AS SELECT * FROM read_csv_auto('{}')",
        repo().join(SAMPLE).display()
    ))
    .unwrap();
    drop(e);
    std::fs::copy(repo().join(GRAPH), dir.join("studies/voucher.graph")).unwrap();
    std::fs::write(
        dir.join("studies/s.toml"),
        "[source]\ndatabase = \"warehouse.duckdb\"\ntable = \"customers\"\n\n[diagram]\nfile = \"voucher.graph\"\n\n[[question]]\nname = \"spend\"\ntreatment = \"voucher\"\noutcome = \"spend_30d\"\nmethod = \"regress\"\n",
    )
    .unwrap();
    for verb in ["check", "run"] {
        let out = Command::new(env!("CARGO_BIN_EXE_upshot"))
            .args([verb, "studies/s.toml"])
            .current_dir(&dir)
            .output()
            .unwrap();
        assert_eq!(out.status.code(), Some(0), "{verb}: {}", text(&out));
    }
    let _ = std::fs::remove_dir_all(&dir);
}

#[test]
fn a_boolean_treatment_gives_the_estimate_of_its_0_1_coding() {
    let db = scratch("boolean");
    let db = db.to_str().unwrap();
    let estimate = |t: &str| {
        let g = format!("prior_orders, zone -> {t} -> spend_30d; prior_orders, zone -> spend_30d");
        let v = json(&[
            "run",
            "--db",
            db,
            "--source",
            "customers",
            "--graph",
            &g,
            "--treatment",
            t,
            "--outcome",
            "spend_30d",
            "--method",
            "doubly-robust",
            "--unit",
            "customer_id",
        ]);
        (
            v["estimates"][0]["estimate"].as_f64().unwrap(),
            v["estimates"][0]["std_error"].as_f64().unwrap(),
        )
    };
    let (a, b) = (estimate("voucher"), estimate("voucher_flag"));
    assert!(
        (a.0 - b.0).abs() < 1e-12 * a.0.abs() && (a.1 - b.1).abs() < 1e-12 * a.1,
        "{a:?} {b:?}"
    );
}

#[test]
fn the_database_reads_no_file_and_no_url_on_a_querys_behalf() {
    let db = scratch("confined");
    let db = db.to_str().unwrap();
    let g = "prior_orders, zone -> voucher; prior_orders, zone, voucher -> spend_30d";
    let csv = repo().join(SAMPLE).display().to_string();
    for q in [
        format!("SELECT * FROM read_csv_auto('{csv}')"),
        "SELECT c.* FROM customers c, read_text('/etc/hostname') t".to_string(),
        "SELECT c.* FROM customers c, read_text('https://example.invalid/x.txt') t".to_string(),
    ] {
        fails(
            &[
                "run",
                "--db",
                db,
                "--source",
                &q,
                "--graph",
                g,
                "--treatment",
                "voucher",
                "--outcome",
                "spend_30d",
                "--method",
                "regress",
            ],
            2,
            &["file source"],
        );
    }
    // The study's own file source is read, as a file or through a query over the table.
    let ok = upshot(&[
        "run",
        "--source",
        SAMPLE,
        "--graph",
        g,
        "--treatment",
        "voucher",
        "--outcome",
        "spend_30d",
        "--method",
        "regress",
    ]);
    assert_eq!(ok.status.code(), Some(0), "{}", text(&ok));
}

#[test]
fn names_with_control_or_invisible_characters_are_refused() {
    let dir = std::env::temp_dir().join(format!("upshot-run-{}-names", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    std::fs::copy(repo().join(SAMPLE), dir.join("customers.csv")).unwrap();
    // A question name that would have put `DROP TABLE sim;` on a line of its own in a plan.
    let study = dir.join("q.toml");
    std::fs::write(
        &study,
        "[source]\nfile = \"customers.csv\"\n[diagram]\ntext = '''prior_orders -> voucher -> spend_30d; prior_orders -> spend_30d'''\n[[question]]\nname = \"q\\nDROP TABLE sim;\\n--\"\ntreatment = \"voucher\"\noutcome = \"spend_30d\"\n",
    )
    .unwrap();
    for verb in ["plan", "check", "run"] {
        fails(
            &[verb, study.to_str().unwrap()],
            2,
            &["U+000A", "question name"],
        );
    }
    // A DOT variable whose quoted name holds a line break, and one with a zero-width space.
    for (graph, code) in [
        (
            "digraph { \"prior\nDROP TABLE sim;\" -> voucher -> spend_30d }",
            "U+000A",
        ),
        (
            "digraph { \"prior\u{200B}orders\" -> voucher -> spend_30d }",
            "U+200B",
        ),
        (
            "prior_orders -> voucher -> spend_30d; \"esc\u{1b}]0;pwned\u{7}\" -> spend_30d",
            "U+001B",
        ),
    ] {
        let out = upshot(&[
            "plan",
            "--graph",
            graph,
            "--source",
            SAMPLE,
            "--treatment",
            "voucher",
            "--outcome",
            "spend_30d",
        ]);
        let err = String::from_utf8_lossy(&out.stderr);
        assert_eq!(out.status.code(), Some(2), "{graph:?}: {}", text(&out));
        assert!(err.contains(code), "{graph:?}: {err}");
        assert!(
            !err.contains('\u{1b}') && !err.contains("\nDROP"),
            "{err:?}"
        );
        assert!(out.stdout.is_empty());
    }
    let _ = std::fs::remove_dir_all(&dir);
}

#[test]
fn a_non_deterministic_filter_is_refused() {
    fails(
        &[
            "run",
            "--graph",
            GRAPH,
            "--source",
            SAMPLE,
            "--treatment",
            "voucher",
            "--outcome",
            "spend_30d",
            "--filter",
            "random() < 0.5",
        ],
        2,
        &["random(...)", "deterministic"],
    );
}

#[test]
fn extreme_values_are_refused_with_the_column_named() {
    let db = scratch("extreme");
    let db = db.to_str().unwrap();
    for method in [
        "stratify",
        "regress",
        "weight",
        "doubly-robust",
        "partial-out",
    ] {
        for (x, y, needles) in [
            ("big_x", "spend_30d", ["`big_x`", "Rescale"]),
            ("prior_orders", "big_y", ["big_y", "Rescale"]),
            ("prior_orders", "huge_y", ["huge_y", "Rescale"]),
            ("prior_orders", "inf_y", ["inf_y", "infinit"]),
            ("nan_x", "spend_30d", ["`nan_x`", "NaN"]),
        ] {
            if method == "stratify" && (x == "big_x" || x == "nan_x") {
                continue; // continuous strata are refused for another reason
            }
            let g = format!("{x} -> voucher -> {y}; {x} -> {y}");
            let out = upshot(&[
                "run",
                "--db",
                db,
                "--source",
                "extreme",
                "--graph",
                &g,
                "--treatment",
                "voucher",
                "--outcome",
                y,
                "--method",
                method,
                "--unit",
                "customer_id",
                "--format",
                "json",
            ]);
            let err = String::from_utf8_lossy(&out.stderr);
            assert_eq!(
                out.status.code(),
                Some(2),
                "{method} {x} {y}: {}",
                text(&out)
            );
            assert!(
                out.stdout.is_empty(),
                "{method} {x} {y} printed: {}",
                text(&out)
            );
            for n in needles {
                assert!(err.contains(n), "{method} {x} {y}: `{n}` not in {err}");
            }
        }
    }
}

#[test]
fn weak_spots_get_specific_answers() {
    let db = scratch("weak");
    let db = db.to_str().unwrap();
    let g = "prior_orders, zone -> voucher; prior_orders, zone, voucher -> spend_30d";
    let run = |extra: &[&str]| {
        let mut a = vec![
            "run",
            "--db",
            db,
            "--graph",
            g,
            "--treatment",
            "voucher",
            "--outcome",
            "spend_30d",
            "--method",
            "regress",
        ];
        a.extend(extra);
        a.iter().map(|s| s.to_string()).collect::<Vec<_>>()
    };
    let go = |a: Vec<String>, code: i32, needles: &[&str]| {
        let refs: Vec<&str> = a.iter().map(|s| s.as_str()).collect();
        fails(&refs, code, needles);
    };
    // A bare value is not silently cast to a boolean.
    go(
        run(&["--source", "customers", "--filter", "prior_orders"]),
        2,
        &["a filter must be a condition"],
    );
    // Statements other than SELECT are named as such, not looked up as tables.
    for q in [
        "ATTACH 'other.duckdb' AS other",
        "COPY customers TO 'out.csv'",
        "PRAGMA database_list",
        "SET threads = 1",
        "CREATE TABLE z AS SELECT 1",
        "INSTALL httpfs",
        "LOAD httpfs",
    ] {
        let a = run(&["--source", q]);
        let refs: Vec<&str> = a.iter().map(|s| s.as_str()).collect();
        let out = upshot(&refs);
        assert_eq!(out.status.code(), Some(2), "{q}: {}", text(&out));
        let err = String::from_utf8_lossy(&out.stderr);
        assert!(err.contains("source"), "{q}: {err}");
        assert!(
            !err.contains("cannot read the columns"),
            "{q} was looked up: {err}"
        );
    }
    // Out-of-range numbers are reported as given.
    go(
        run(&["--source", "customers", "--folds", "-1"]),
        2,
        &["--folds: -1 folds"],
    );
    go(
        run(&["--source", "customers", "--clip", "-0.1"]),
        2,
        &["--clip: -0.1"],
    );
    // An empty run key is not stored.
    go(
        run(&[
            "--source",
            "customers",
            "--into",
            "effects",
            "--run-key",
            " ",
        ]),
        2,
        &["--run-key: empty"],
    );
    // A text column of numbers is called text.
    let out = upshot(&[
        "run",
        "--db",
        db,
        "--source",
        "extreme",
        "--graph",
        "spend_text -> voucher -> spend_30d; spend_text -> spend_30d",
        "--treatment",
        "voucher",
        "--outcome",
        "spend_30d",
        "--method",
        "regress",
    ]);
    assert_eq!(out.status.code(), Some(2), "{}", text(&out));
    assert!(text(&out).contains("is a text column"), "{}", text(&out));
    // A database held by another process: a retryable failure (exit 1), nothing written.
    let held = DuckDbEngine::open(db, true).unwrap();
    go(
        run(&["--source", "customers", "--into", "effects"]),
        1,
        &["in use", "retry"],
    );
    drop(held);
}

#[test]
fn a_pass_past_the_timeout_is_cancelled_and_nothing_is_written() {
    // A source whose rows multiply (5,000 × 4,000) makes every pass slow; DuckDB's query is
    // interrupted after one second, the run fails with exit 1 and --into writes nothing.
    let db = scratch("timeout");
    let db = db.to_str().unwrap();
    let slow = "SELECT c.* FROM customers AS c CROSS JOIN (SELECT 1 AS one FROM customers LIMIT 4000) AS r";
    let started = std::time::Instant::now();
    let out = upshot(&[
        "run",
        "demo-data/voucher-backdoor.toml",
        "--question",
        "spend",
        "--db",
        db,
        "--source",
        slow,
        "--timeout",
        "1",
        "--into",
        "timed_out",
    ]);
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(1), "{err}");
    assert!(err.contains("cancelled after 1 s (--timeout 1)"), "{err}");
    assert!(out.stdout.is_empty());
    assert!(started.elapsed().as_secs() < 60, "{:?}", started.elapsed());
    let e = DuckDbEngine::open(db, false).unwrap();
    assert_eq!(
        e.query_number(
            "SELECT COUNT(*) FROM information_schema.tables WHERE table_name = 'timed_out'"
        )
        .unwrap(),
        0.0
    );
    let zero = upshot(&["run", "demo-data/voucher-backdoor.toml", "--timeout", "0"]);
    assert_eq!(zero.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&zero.stderr).contains("--timeout"));
}

const LATENT: &str = "demo-data/sample/customers_latent.csv";
const LATENT_GRAPH: &str = "demo-data/voucher-latent.graph";

/// `iv` on the demo's latent variant (income unrecorded: no adjustment set exists): the study
/// runs, plan lists the passes run executes (with and without segments), the interval covers
/// the simulation truth, and the bad inputs of the instruments are refused.
#[test]
fn iv_runs_where_adjustment_cannot_and_refuses_bad_instruments() {
    let t: Value = serde_json::from_str(
        &std::fs::read_to_string(repo().join("demo-data/sample/customers_latent.truth.json"))
            .unwrap(),
    )
    .unwrap();
    let ate = t["outcomes"]["spend_30d"]["ate"].as_f64().unwrap();
    let v = json(&["run", "demo-data/voucher-instrument.toml"]);
    let e = &v["estimates"][0];
    assert_eq!(e["method"], "iv");
    let (lo, hi) = (
        e["ci_low"].as_f64().unwrap(),
        e["ci_high"].as_f64().unwrap(),
    );
    assert!(lo <= ate && ate <= hi, "[{lo}, {hi}] misses {ate}");
    let q = &v["questions"][0];
    assert_eq!(q["instruments"][0], "mail_wave");
    let rep = &q["diagnostics"]["instruments"][0];
    assert!(rep["partial_f"].as_f64().unwrap() > 10.0, "{rep}");
    assert!(
        rep["sargan"]["df"] == 2 && rep["hansen_j"]["df"] == 2,
        "{rep}"
    );
    for segments in [false, true] {
        let mut args = vec![
            "--graph",
            LATENT_GRAPH,
            "--source",
            LATENT,
            "--treatment",
            "voucher",
            "--outcome",
            "spend_30d",
            "--method",
            "iv",
        ];
        if segments {
            args.extend(["--segment-by", "tenure_band"]);
        }
        let plan = json(&[&["plan"], args.as_slice()].concat());
        let planned = plan["questions"][0]["passes"].as_array().unwrap().len();
        let run = json(&[&["run"], args.as_slice()].concat());
        let passes = run["questions"][0]["diagnostics"]["passes"]
            .as_u64()
            .unwrap();
        assert_eq!(passes as usize, planned, "segments {segments}");
        let rows = run["estimates"].as_array().unwrap().len();
        let reports = run["questions"][0]["diagnostics"]["instruments"]
            .as_array()
            .unwrap()
            .len();
        assert_eq!(rows, reports, "one report per estimate row");
        assert_eq!(rows, if segments { 4 } else { 1 });
    }
    let iv = |extra: &[&str]| -> Vec<String> {
        let mut a: Vec<String> = [
            "run",
            "--graph",
            LATENT_GRAPH,
            "--source",
            LATENT,
            "--treatment",
            "voucher",
            "--outcome",
            "spend_30d",
            "--method",
            "iv",
        ]
        .iter()
        .map(|s| s.to_string())
        .collect();
        a.extend(extra.iter().map(|s| s.to_string()));
        a
    };
    let go = |extra: &[&str], code: i32, needles: &[&str]| {
        let a = iv(extra);
        fails(
            &a.iter().map(String::as_str).collect::<Vec<_>>(),
            code,
            needles,
        );
    };
    go(
        &[
            "--instruments",
            "mail_wave",
            "--instrument-given",
            "mail_wave",
        ],
        2,
        &["instrument `mail_wave` is also a covariate"],
    );
    go(&["--estimand", "ATT"], 2, &["compliers", "--estimand ATE"]);
    go(
        &["--filter", "mail_wave = 1"],
        2,
        &["instrument `mail_wave` has a single level (1)"],
    );
    go(
        &["--instruments", "zone"],
        3,
        &["zone -> spend_30d", "mail_wave works"],
    );
    // An instrument with no pull on the treatment: parity of the id, centred within each arm
    // in a source query, so that its covariance with the treatment is zero.
    let dir = std::env::temp_dir().join(format!("upshot-iv-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let db = dir.join("latent.duckdb");
    let e = DuckDbEngine::open(db.to_str().unwrap(), true).unwrap();
    e.execute_batch(&format!(
        "CREATE TABLE customers AS SELECT *, (customer_id % 2) - AVG(customer_id % 2) OVER (PARTITION BY voucher) AS parity FROM read_csv_auto('{}')",
        repo().join(LATENT).display()
    ))
    .unwrap();
    drop(e);
    let graph = dir.join("parity.graph");
    std::fs::write(
        &graph,
        "income: latent\nparity -> voucher -> spend_30d\nincome -> voucher, spend_30d\n",
    )
    .unwrap();
    fails(
        &[
            "run",
            "--graph",
            graph.to_str().unwrap(),
            "--db",
            db.to_str().unwrap(),
            "--source",
            "customers",
            "--treatment",
            "voucher",
            "--outcome",
            "spend_30d",
            "--method",
            "iv",
            "--instruments",
            "parity",
        ],
        2,
        &[
            "do not move the treatment `voucher`",
            "first-stage F = 0.000",
        ],
    );
    std::fs::remove_dir_all(&dir).unwrap();
}

/// `front-door` on the demo's latent variant: the study (a continuous mediator: product of
/// slopes) covers the simulation truth, plan lists the passes run executes for both routes,
/// and the bad inputs of mediators are refused.
#[test]
fn front_door_runs_where_adjustment_cannot_and_refuses_bad_mediators() {
    let t: Value = serde_json::from_str(
        &std::fs::read_to_string(repo().join("demo-data/sample/customers_latent.truth.json"))
            .unwrap(),
    )
    .unwrap();
    let ate = t["outcomes"]["spend_30d"]["ate"].as_f64().unwrap();
    let v = json(&["run", "demo-data/voucher-frontdoor.toml"]);
    let e = &v["estimates"][0];
    assert_eq!(e["method"], "front-door");
    assert_eq!(v["questions"][0]["mediators"][0], "app_sessions");
    let (lo, hi) = (
        e["ci_low"].as_f64().unwrap(),
        e["ci_high"].as_f64().unwrap(),
    );
    assert!(lo <= ate && ate <= hi, "[{lo}, {hi}] misses {ate}");
    // A discrete mediator (declared categorical), from a DuckDB table.
    let dir = std::env::temp_dir().join(format!("upshot-fd-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let db = dir.join("latent.duckdb");
    let eng = DuckDbEngine::open(db.to_str().unwrap(), true).unwrap();
    eng.execute_batch(&format!(
        "CREATE TABLE customers AS SELECT *, LEAST(app_sessions, 6) AS sessions, LEAST(app_sessions, 12) AS sessions_wide, 3 AS one_value, app_sessions * 2 AS doubled FROM read_csv_auto('{}')",
        repo().join(LATENT).display()
    ))
    .unwrap();
    drop(eng);
    // One diagram per mediator set: the mediators intercept every path from voucher.
    let graph = |mediators: &str| {
        let path = dir.join(format!("{}.graph", mediators.replace(',', "_")));
        std::fs::write(
            &path,
            format!(
                "income: latent\nsessions, sessions_wide, one_value: categorical\ntenure_band: ordinal\n\
                 voucher -> {mediators}\n{mediators} -> spend_30d\n\
                 income -> voucher, spend_30d\ntenure_band -> {mediators}\n"
            ),
        )
        .unwrap();
        path.to_str().unwrap().to_string()
    };
    let d = db.to_str().unwrap();
    let args = |mediators: &str, extra: &[&'static str]| -> Vec<String> {
        let g = graph(mediators);
        let mut a: Vec<String> = [
            "--graph",
            &g,
            "--db",
            d,
            "--source",
            "customers",
            "--treatment",
            "voucher",
            "--outcome",
            "spend_30d",
            "--method",
            "front-door",
            "--mediators",
            mediators,
        ]
        .iter()
        .map(|s| s.to_string())
        .collect();
        a.extend(extra.iter().map(|s| s.to_string()));
        a
    };
    for (mediators, segments) in [
        ("sessions", false),
        ("sessions", true),
        ("app_sessions", true),
    ] {
        let extra: &[&str] = if segments {
            &["--segment-by", "tenure_band"]
        } else {
            &[]
        };
        let a = args(mediators, extra);
        let a: Vec<&str> = a.iter().map(String::as_str).collect();
        let plan = json(&[&["plan"], a.as_slice()].concat());
        let planned = plan["questions"][0]["passes"].as_array().unwrap().len();
        let run = json(&[&["run"], a.as_slice()].concat());
        let passes = run["questions"][0]["diagnostics"]["passes"]
            .as_u64()
            .unwrap();
        assert_eq!(passes as usize, planned, "{mediators} segments {segments}");
    }
    let go = |mediators: &str, extra: &[&'static str], code: i32, needles: &[&str]| {
        let mut a = vec!["run".to_string()];
        a.extend(args(mediators, extra));
        fails(
            &a.iter().map(String::as_str).collect::<Vec<_>>(),
            code,
            needles,
        );
    };
    go("one_value", &[], 2, &["the mediators take a single value"]);
    go(
        "sessions_wide",
        &["--segment-by", "tenure_band"],
        2,
        &["positivity fails", "among the untreated"],
    );
    go("app_sessions,doubled", &[], 2, &["needs them all discrete"]);
    go(
        "app_sessions",
        &["--estimand", "ATT"],
        2,
        &["--estimand ATE"],
    );
    std::fs::remove_dir_all(&dir).unwrap();
}

/// `auto` across routes: adjustment where a set exists, else front-door, else an instrument;
/// the output names the route and its assumptions.
#[test]
fn auto_takes_adjustment_then_front_door_then_instruments() {
    let base = [
        "--source",
        LATENT,
        "--treatment",
        "voucher",
        "--outcome",
        "spend_30d",
    ];
    let v = json(&[&["run", "--graph", GRAPH], base.as_slice()].concat());
    assert_eq!(v["estimates"][0]["method"], "doubly-robust");
    let v = json(&[&["run", "--graph", LATENT_GRAPH], base.as_slice()].concat());
    assert_eq!(v["estimates"][0]["method"], "front-door");
    let q = &v["questions"][0];
    assert!(
        q["why_this_set"].as_str().unwrap().contains("front-door"),
        "{q}"
    );
    assert!(
        q["assumptions"].as_array().unwrap().iter().any(|a| a
            .as_str()
            .unwrap()
            .contains("mediators carry the whole effect")),
        "{q}"
    );
    let dir = std::env::temp_dir().join(format!("upshot-auto-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let graph = dir.join("iv.graph");
    std::fs::write(
        &graph,
        "income: latent\nmail_wave: categorical\nmail_wave -> voucher -> spend_30d\nincome -> voucher, spend_30d\n",
    )
    .unwrap();
    let v = json(
        &[
            &["run", "--graph", graph.to_str().unwrap()],
            base.as_slice(),
        ]
        .concat(),
    );
    assert_eq!(v["estimates"][0]["method"], "iv");
    let q = &v["questions"][0];
    assert!(
        q["assumptions"]
            .as_array()
            .unwrap()
            .iter()
            .any(|a| a.as_str().unwrap().contains("exclusion")),
        "{q}"
    );
    std::fs::remove_dir_all(&dir).unwrap();
}

/// Small-cell suppression: a segment with fewer than --min-cell rows in an arm shows no
/// number in any output or in the results table, and one more segment is hidden with it so
/// that the `all` row's counts cannot give it back.
#[test]
fn small_segments_are_suppressed_everywhere() {
    let args = [
        "run",
        "demo-data/voucher-backdoor.toml",
        "--question",
        "spend",
        "--method",
        "regress",
        "--min-cell",
        "700",
    ];
    let v = json(&args);
    let rows = v["estimates"].as_array().unwrap();
    let hidden: Vec<&str> = rows
        .iter()
        .filter(|e| e["suppressed"] == "<700")
        .map(|e| e["segment"].as_str().unwrap())
        .collect();
    // `new` has fewer than 700 untreated rows; 2y+ is the smallest of the others.
    assert_eq!(hidden, ["tenure_band=2y+", "tenure_band=new"], "{v}");
    for e in rows.iter().filter(|e| !e["suppressed"].is_null()) {
        for k in [
            "estimate",
            "std_error",
            "ci_low",
            "ci_high",
            "n_treated",
            "n_control",
            "n_used",
        ] {
            assert!(e[k].is_null(), "{k} of {e}");
        }
    }
    assert!(rows[0]["estimate"].is_number() && rows[1]["estimate"].is_number());
    let notes = v["questions"][0]["diagnostics"]["notes"].to_string();
    assert!(
        notes.contains("segment tenure_band=new: suppressed"),
        "{notes}"
    );
    // Notes about a hidden segment (coarsen's hold its unmatched counts) are withheld.
    let mut coarse = args.to_vec();
    coarse[5] = "coarsen";
    let v = json(&coarse);
    let notes = v["questions"][0]["diagnostics"]["notes"]
        .as_array()
        .unwrap();
    for n in notes {
        let n = n.as_str().unwrap();
        assert!(
            !n.starts_with("segment tenure_band=new") || n.contains("suppressed"),
            "{n}"
        );
    }
    let out = upshot(&[&args[..], &["--format", "csv"]].concat());
    let csv = String::from_utf8_lossy(&out.stdout);
    let line = csv.lines().find(|l| l.contains("tenure_band=new")).unwrap();
    assert!(line.contains(",,,,<700,<700,<700,"), "{line}");
    let out = upshot(&args);
    let shown = String::from_utf8_lossy(&out.stdout);
    assert!(
        shown.contains("suppressed") && shown.contains("<700"),
        "{shown}"
    );
    // The results table: NULLs, never the numbers.
    let dir = std::env::temp_dir().join(format!("upshot-cells-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let db = dir.join("r.duckdb");
    let out = upshot(
        &[
            &args[..],
            &["--db", db.to_str().unwrap(), "--into", "effects"],
        ]
        .concat(),
    );
    assert_eq!(out.status.code(), Some(0), "{}", text(&out));
    let e = DuckDbEngine::open(db.to_str().unwrap(), false).unwrap();
    let n = e
        .query_number("SELECT COUNT(*) AS n FROM effects WHERE estimate IS NULL AND n_used IS NULL AND n_treated IS NULL")
        .unwrap();
    assert_eq!(n, 2.0);
    drop(e);
    std::fs::remove_dir_all(&dir).unwrap();
    // 0 shows every row.
    let v = json(&[&args[..6], &["--min-cell", "0"]].concat());
    assert!(v["estimates"]
        .as_array()
        .unwrap()
        .iter()
        .all(|e| e["suppressed"].is_null()));
}

/// `coarsen` runs with the automatic bins and with --coarsen, plan lists its one cells pass, and a
/// --coarsen for a column that is not a numeric covariate is refused.
#[test]
fn coarsen_bins_and_matches_exactly() {
    let base = [
        "--graph",
        GRAPH,
        "--source",
        SAMPLE,
        "--treatment",
        "voucher",
        "--outcome",
        "spend_30d",
        "--method",
        "coarsen",
        "--adjust",
        "household_size,prior_orders,zone",
    ];
    let v = json(&[&["run"], base.as_slice(), &["--estimand", "ATT"]].concat());
    let e = &v["estimates"][0];
    let att = truth()["outcomes"]["spend_30d"]["att"].as_f64().unwrap();
    assert!(
        e["ci_low"].as_f64().unwrap() <= att && att <= e["ci_high"].as_f64().unwrap(),
        "{e} misses {att}"
    );
    let notes = v["questions"][0]["diagnostics"]["notes"].to_string();
    assert!(
        notes.contains("unmatched") && notes.contains("coarsened:"),
        "{notes}"
    );
    let plan = json(&[&["plan"], base.as_slice()].concat());
    let names: Vec<&str> = plan["questions"][0]["passes"]
        .as_array()
        .unwrap()
        .iter()
        .map(|p| p["name"].as_str().unwrap())
        .collect();
    assert_eq!(names, ["profile", "cells"]);
    assert_eq!(v["questions"][0]["diagnostics"]["passes"], 2);
    fails(
        &[&["run"], base.as_slice(), &["--coarsen", "zone=3"]].concat(),
        2,
        &["bins were given for `zone`, which is not a numeric covariate"],
    );
    fails(
        &[&["run"], base.as_slice(), &["--coarsen", "prior_orders=0"]].concat(),
        2,
        &["--coarsen: `prior_orders=0` is not COLUMN=BINS"],
    );
}

fn query(db: &str, sql: &str) -> f64 {
    DuckDbEngine::open(db, false)
        .unwrap()
        .query_number(sql)
        .unwrap()
}

#[test]
fn match_estimates_and_writes_one_row_per_matched_unit() {
    let db = scratch("match");
    let db = db.to_str().unwrap();
    let base = [
        "--graph",
        GRAPH,
        "--db",
        db,
        "--source",
        "customers",
        "--treatment",
        "voucher",
        "--outcome",
        "spend_30d",
        "--method",
        "match",
        "--unit",
        "customer_id",
    ];
    let truth = truth();
    for (estimand, key) in [("ATT", "att"), ("ATE", "ate"), ("ATC", "atc")] {
        let v = json(&[&["run"], base.as_slice(), &["--estimand", estimand]].concat());
        let e = &v["estimates"][0];
        let t = truth["outcomes"]["spend_30d"][key].as_f64().unwrap();
        assert!(
            e["ci_low"].as_f64().unwrap() <= t && t <= e["ci_high"].as_f64().unwrap(),
            "{estimand}: {e} misses {t}"
        );
        let notes = v["questions"][0]["diagnostics"]["notes"].to_string();
        assert!(notes.contains("1:1 nearest-neighbour matching"), "{notes}");
    }
    // The per-row table: one row per target unit, its mean difference the estimate.
    let att = |extra: &[&str]| -> Vec<String> {
        [
            &["run"],
            base.as_slice(),
            &["--estimand", "ATT", "--neighbours", "3"],
            extra,
        ]
        .concat()
        .iter()
        .map(|s| s.to_string())
        .collect()
    };
    let refs = |a: &[String]| -> Vec<String> { a.to_vec() };
    let run = |a: Vec<String>| -> Value {
        let r: Vec<&str> = a.iter().map(|s| s.as_str()).collect();
        json(&r)
    };
    let v = run(refs(&att(&["--rows-into", "matched_rows"])));
    let estimate = v["estimates"][0]["estimate"].as_f64().unwrap();
    let mean = query(db, "SELECT AVG(difference) FROM matched_rows");
    assert!(
        (mean - estimate).abs() <= 1e-9 * estimate.abs(),
        "table mean {mean} vs estimate {estimate}"
    );
    let treated = query(db, "SELECT COUNT(*) FROM customers WHERE voucher = 1");
    assert_eq!(query(db, "SELECT COUNT(*) FROM matched_rows"), treated);
    assert_eq!(
        query(db, "SELECT COUNT(DISTINCT customer_id) FROM matched_rows WHERE treatment = 1 AND matches >= 3"),
        treated
    );
    // An existing table is refused without --replace, and kept.
    let again: Vec<String> = att(&["--rows-into", "matched_rows"]);
    let r: Vec<&str> = again.iter().map(|s| s.as_str()).collect();
    fails(&r, 2, &["matched_rows", "the table exists", "--replace"]);
    let v = run(att(&[
        "--rows-into",
        "matched_rows",
        "--replace",
        "--caliper",
        "0.2",
    ]));
    let estimate = v["estimates"][0]["estimate"].as_f64().unwrap();
    let mean = query(db, "SELECT AVG(difference) FROM matched_rows");
    assert!((mean - estimate).abs() <= 1e-9 * estimate.abs());
    // Segments: one estimate per segment, the table carries the segment column.
    let v = run(att(&[
        "--segment-by",
        "tenure_band",
        "--rows-into",
        "by_band",
    ]));
    for e in v["estimates"].as_array().unwrap() {
        let seg = e["segment"].as_str().unwrap();
        if let Some(band) = seg.strip_prefix("tenure_band=") {
            let mean = query(
                db,
                &format!("SELECT AVG(difference) FROM by_band WHERE tenure_band = '{band}'"),
            );
            let est = e["estimate"].as_f64().unwrap();
            assert!(
                (mean - est).abs() <= 1e-9 * est.abs(),
                "{seg}: {mean} vs {est}"
            );
        }
    }
    // plan lists what run executes.
    let plan = json(&[&["plan"], base.as_slice()].concat());
    let names: Vec<&str> = plan["questions"][0]["passes"]
        .as_array()
        .unwrap()
        .iter()
        .map(|p| p["name"].as_str().unwrap())
        .collect();
    assert_eq!(names.last(), Some(&"match"), "{names:?}");
    // Bad input: nothing written.
    let bad = |extra: &[&str], needles: &[&str]| {
        fails(&[&["run"], base.as_slice(), extra].concat(), 2, needles);
    };
    // Distinct logits everywhere (a unique jitter on a covariate): no exact ties to match at
    // distance 0, so a caliper of 1e-12 SD matches nothing.
    DuckDbEngine::open(db, true)
        .unwrap()
        .execute_batch("CREATE TABLE jittered AS SELECT * REPLACE (household_size + customer_id * 1e-7 AS household_size) FROM customers")
        .unwrap();
    let mut jittered = base.to_vec();
    jittered[5] = "jittered";
    fails(
        &[
            &["run"],
            jittered.as_slice(),
            &["--caliper", "1e-12", "--rows-into", "never_a"],
        ]
        .concat(),
        2,
        &[
            "caliper of 1.000e-12 SD",
            "matches nothing",
            "widen --caliper",
        ],
    );
    bad(&["--caliper", "0"], &["--caliper"]);
    bad(&["--neighbours", "0"], &["--neighbours"]);
    bad(&["--replace"], &["--replace needs --rows-into"]);
    assert!(DuckDbEngine::open(db, false)
        .unwrap()
        .query_number("SELECT COUNT(*) FROM never_a")
        .is_err());
    // The question without a method or unit key, then the flags of each case.
    let question = [
        "run",
        "--graph",
        GRAPH,
        "--treatment",
        "voucher",
        "--outcome",
        "spend_30d",
    ];
    let in_db = ["--db", db, "--source", "customers"];
    let case = |extra: &[&str], needles: &[&str]| {
        fails(&[question.as_slice(), extra].concat(), 2, needles);
    };
    case(
        &[&in_db[..], &["--method", "match", "--rows-into", "never_b"]].concat(),
        &["--rows-into", "--unit"],
    );
    case(
        &[
            "--source",
            SAMPLE,
            "--method",
            "match",
            "--unit",
            "customer_id",
            "--rows-into",
            "never_c",
        ],
        &["--rows-into", "keeps nothing"],
    );
    case(
        &[
            &in_db[..],
            &[
                "--method",
                "regress",
                "--unit",
                "customer_id",
                "--rows-into",
                "never_d",
            ],
        ]
        .concat(),
        &["--rows-into", "match"],
    );
    case(
        &[&in_db[..], &["--method", "regress", "--neighbours", "2"]].concat(),
        &["--neighbours", "match"],
    );
}

/// `--bins`: numeric segment columns cut at quantiles computed in the database. Each bin's
/// label names its range, and its rows are exactly the rows in that range (counted here with
/// SQL over the same table); small bins are suppressed, in the output and in the results
/// table; `match` writes the bin number into its per-row table; a covariate cut into bins keeps
/// at least two of its values per bin; bad requests exit 2.
#[test]
fn bins_cut_numeric_segments_at_quantiles_computed_in_the_database() {
    let db = scratch("bins");
    let db = db.to_str().unwrap();
    let base = [
        "--graph",
        GRAPH,
        "--db",
        db,
        "--source",
        "customers",
        "--treatment",
        "voucher",
        "--outcome",
        "spend_30d",
        "--segment-by",
        "prior_orders",
    ];
    let run = |extra: &[&str]| json(&[&["run"], base.as_slice(), extra].concat());
    // The bounds of a label `[a, b)` or `[a, b]`, and whether the upper one is included.
    let range = |label: &str| -> (f64, f64, bool) {
        let inner = &label[1..label.len() - 1];
        let (a, b) = inner.split_once(", ").unwrap();
        (a.parse().unwrap(), b.parse().unwrap(), label.ends_with(']'))
    };
    let v = run(&["--method", "stratify", "--bins", "4", "--min-cell", "0"]);
    let rows = v["estimates"].as_array().unwrap();
    assert_eq!(rows.len(), 5, "{v}");
    let mut total = 0.0;
    let mut last_high = None;
    for e in &rows[1..] {
        let label = e["segment_values"]["prior_orders"].as_str().unwrap();
        let (a, b, closed) = range(label);
        if let Some(h) = last_high {
            assert_eq!(a, h, "bins meet: {label}");
        }
        last_high = Some(b);
        let n = query(
            db,
            &format!(
                "SELECT COUNT(*) FROM customers WHERE prior_orders >= {a} AND prior_orders {} {b}",
                if closed { "<=" } else { "<" }
            ),
        );
        let used = e["n_used"].as_f64().unwrap();
        // Stratify drops strata lacking an arm: never more rows than the range holds.
        assert!(used <= n && used > 0.0, "{label}: {used} of {n}");
        total += n;
    }
    assert_eq!(total, query(db, "SELECT COUNT(*) FROM customers"));
    // The first and last edges are the column's minimum and maximum.
    let first = range(rows[1]["segment_values"]["prior_orders"].as_str().unwrap());
    assert_eq!(
        first.0,
        query(db, "SELECT MIN(prior_orders) FROM customers")
    );
    assert_eq!(
        last_high.unwrap(),
        query(db, "SELECT MAX(prior_orders) FROM customers")
    );
    let notes = v["questions"][0]["diagnostics"]["notes"].to_string();
    assert!(
        notes.contains("segment `prior_orders` cut into 4 bins"),
        "{notes}"
    );
    // Regress models prior_orders (a confounder): its bins keep two values each.
    let v = run(&["--method", "regress", "--bins", "4"]);
    for e in &v["estimates"].as_array().unwrap()[1..] {
        let (a, b, closed) = range(e["segment_values"]["prior_orders"].as_str().unwrap());
        let values = query(
            db,
            &format!(
                "SELECT COUNT(DISTINCT prior_orders) FROM customers WHERE prior_orders >= {a} AND prior_orders {} {b}",
                if closed { "<=" } else { "<" }
            ),
        );
        assert!(values >= 2.0, "{e}");
    }
    let notes = v["questions"][0]["diagnostics"]["notes"].to_string();
    assert!(notes.contains("were merged"), "{notes}");
    // Small bins are suppressed, also in the results table, which names the bins by range.
    let args = [
        "--method",
        "stratify",
        "--bins",
        "8",
        "--min-cell",
        "150",
        "--into",
        "effects",
    ];
    let v = run(&args);
    let hidden = v["estimates"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|e| e["suppressed"] == "<150")
        .count();
    assert!(hidden >= 1, "{v}");
    assert_eq!(
        query(db, "SELECT COUNT(*) FROM effects WHERE segment LIKE 'prior_orders=[%' AND estimate IS NULL"),
        hidden as f64
    );
    // match: the per-row table holds each row's bin number; per bin its mean difference is
    // the bin's estimate.
    let v = run(&[
        "--method",
        "match",
        "--estimand",
        "ATT",
        "--unit",
        "customer_id",
        "--bins",
        "3",
        "--rows-into",
        "matched",
    ]);
    for (i, e) in v["estimates"].as_array().unwrap()[1..].iter().enumerate() {
        let mean = query(
            db,
            &format!(
                "SELECT AVG(difference) FROM matched WHERE prior_orders_bin = {}",
                i + 1
            ),
        );
        let est = e["estimate"].as_f64().unwrap();
        assert!((mean - est).abs() <= 1e-9 * est.abs(), "{e}: {mean}");
    }
    // plan: the quantile pass comes first.
    let plan = json(
        &[
            &["plan"],
            base.as_slice(),
            &["--method", "weight", "--bins", "4"],
        ]
        .concat(),
    );
    assert_eq!(plan["questions"][0]["passes"][0]["name"], "quantiles");
    // Bad requests.
    let bad = |extra: &[&str], needles: &[&str]| {
        fails(&[&["run"], base.as_slice(), extra].concat(), 2, needles)
    };
    bad(&["--bins", "1"], &["--bins: 1 bins; use 2 to 100"]);
    bad(&["--bins", "101"], &["use 2 to 100"]);
    bad(&["--bins", "-2"], &["--bins: -2 bins"]);
    let mut zone = base.to_vec();
    zone[11] = "zone";
    fails(
        &[&["run"], zone.as_slice(), &["--bins", "4"]].concat(),
        2,
        &["--bins cuts numeric segment columns", "`zone`"],
    );
    fails(
        &[&["run"], &base[..10], &["--bins", "4"]].concat(),
        2,
        &["name the segment columns too"],
    );
    let mut clash = base.to_vec();
    clash[5] = "SELECT *, 1 AS prior_orders_bin FROM customers";
    fails(
        &[&["run"], clash.as_slice(), &["--bins", "4"]].concat(),
        2,
        &["`prior_orders_bin`", "rename that column"],
    );
    let mut nan = base.to_vec();
    nan[1] = "nan_x -> voucher -> spend_30d";
    nan[5] = "extreme";
    nan[11] = "nan_x";
    fails(
        &[&["run"], nan.as_slice(), &["--bins", "4"]].concat(),
        2,
        &["segment column `nan_x` holds NaN or infinite values"],
    );
    assert_eq!(
        query(db, "SELECT COUNT(*) FROM information_schema.tables WHERE table_name NOT IN ('customers', 'extreme', 'new_untreated', 'effects', 'matched')"),
        0.0
    );
}
