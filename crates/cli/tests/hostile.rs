//! The hostile-input catalogue (`tests/hostile/cases.json`): every case runs the `upshot`
//! binary against a scratch database and must end with its expected exit code, say the expected
//! fragment on standard error (nothing on standard output when it fails), never panic, and —
//! unless the case is a successful `--into` — leave the database exactly as it was (its tables,
//! their row counts and a hash of their contents).
//!
//! A case: `name`, `args` (with `{db}`, `{dir}`, `{sample}` replaced), `code`, `says`, optional
//! `files` (written into `{dir}` first), `writes` (a successful `--into`), `prints` (a fragment
//! of standard output, for cases that succeed). Cases whose name
//! starts with `output full` run with standard output on `/dev/full`. `UPSHOT_HOSTILE_BIN`
//! names another `upshot` binary to run the catalogue against.

use serde_json::Value;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use upshot_engine_duckdb::DuckDbEngine;

fn repo() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../..")
}

/// Tables, row counts and a content hash of every table: what a case must leave unchanged.
fn fingerprint(db: &str) -> Vec<(String, f64, f64)> {
    let e = DuckDbEngine::open(db, false).unwrap();
    let tables = ["customers", "extreme", "new_untreated", "other"];
    let mut out = Vec::new();
    for t in tables {
        let n = e
            .query_number(&format!("SELECT COUNT(*) FROM {t}"))
            .unwrap();
        let h = e
            .query_number(&format!(
                "SELECT CAST(COALESCE(SUM(hash(CAST(x AS VARCHAR)) % 1000000007), 0) AS DOUBLE) FROM {t} AS x"
            ))
            .unwrap();
        out.push((t.to_string(), n, h));
    }
    let all = e
        .query_number("SELECT COUNT(*) FROM information_schema.tables")
        .unwrap();
    out.push(("(tables)".into(), all, 0.0));
    out
}

fn setup(dir: &Path) -> String {
    let db = dir.join("hostile.duckdb");
    let e = DuckDbEngine::open(db.to_str().unwrap(), true).unwrap();
    let csv = repo().join("demo-data/sample/customers.csv");
    e.execute_batch(&format!(
        "CREATE TABLE customers AS SELECT *, prior_orders * 2 + 1 AS orders_doubled, \
         prior_orders + 100 * voucher AS leak, customer_id % 2000 AS cell_id, \
         CASE WHEN customer_id % 10 = 0 THEN NULL ELSE household_size END AS household_gappy, \
         CAST(NULL AS DOUBLE) AS empty_col, 7 AS one_unit, \
         CAST(customer_id AS HUGEINT) * -100000000000000000000 AS huge_unit, \
         CAST(customer_id AS UBIGINT) + 9223372036854775808 AS wide_unit, \
         CAST(customer_id AS VARCHAR) AS sid, \
         CASE WHEN customer_id = 100017 THEN 'rare' ELSE zone END AS zone_rare, \
         CASE WHEN customer_id % 50 = 0 THEN 'tiny' || (customer_id % 400) ELSE zone END AS zone_small FROM read_csv_auto('{}');
         CREATE TABLE extreme AS SELECT *, prior_orders * 1e300 AS big_x, spend_30d * 1e300 AS big_y, \
         CASE WHEN customer_id = 100017 THEN 1.7e308 ELSE spend_30d END AS huge_y, \
         CASE WHEN customer_id = 100017 THEN 'inf'::DOUBLE ELSE spend_30d END AS inf_y, \
         CASE WHEN customer_id = 100017 THEN 'nan'::DOUBLE ELSE household_size END AS nan_x, \
         CAST(spend_30d AS VARCHAR) AS spend_text FROM customers;
         CREATE TABLE new_untreated AS SELECT * REPLACE (CASE WHEN tenure_band = 'new' THEN 0 ELSE voucher END AS voucher) FROM customers;
         CREATE TABLE other (x INTEGER); INSERT INTO other VALUES (1);",
        csv.display()
    ))
    .unwrap();
    db.display().to_string()
}

#[test]
fn every_hostile_case_gets_its_answer_and_changes_nothing() {
    let dir = std::env::temp_dir().join(format!("upshot-hostile-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    let db = setup(&dir);
    let sample = repo().join("demo-data/sample/customers.csv");
    let text = std::fs::read_to_string(repo().join("tests/hostile/cases.json")).unwrap();
    let cases: Vec<Value> = serde_json::from_str(&text).unwrap();
    assert!(cases.len() >= 150, "{} cases", cases.len());
    // UPSHOT_HOSTILE_BIN runs the catalogue against another build (to count an older
    // version's verdicts); by default, this build's binary.
    let binary = std::env::var_os("UPSHOT_HOSTILE_BIN")
        .map(PathBuf::from)
        .unwrap_or_else(|| PathBuf::from(env!("CARGO_BIN_EXE_upshot")));
    let mut before = fingerprint(&db);
    let mut failures = Vec::new();
    for c in &cases {
        let name = c["name"].as_str().unwrap();
        let fill = |s: &str| {
            s.replace("{db}", &db)
                .replace("{dir}", &dir.display().to_string())
                .replace("{sample}", &sample.display().to_string())
        };
        if let Some(files) = c["files"].as_object() {
            for (f, body) in files {
                std::fs::write(dir.join(f), body.as_str().unwrap()).unwrap();
            }
        }
        let args: Vec<String> = c["args"]
            .as_array()
            .unwrap()
            .iter()
            .map(|a| fill(a.as_str().unwrap()))
            .collect();
        let mut cmd = Command::new(&binary);
        cmd.args(&args).current_dir(&dir).stdin(Stdio::null());
        if name.starts_with("output full") {
            cmd.stdout(
                std::fs::OpenOptions::new()
                    .write(true)
                    .open("/dev/full")
                    .unwrap(),
            );
        }
        let out = cmd.output().unwrap();
        let (stdout, stderr) = (
            String::from_utf8_lossy(&out.stdout),
            String::from_utf8_lossy(&out.stderr),
        );
        let code = c["code"].as_i64().unwrap() as i32;
        let says = fill(c["says"].as_str().unwrap());
        let mut wrong = Vec::new();
        if out.status.code() != Some(code) {
            wrong.push(format!("exit {:?}, expected {code}", out.status.code()));
        }
        if !stderr.contains(&says) {
            wrong.push(format!("stderr lacks `{says}`"));
        }
        if let Some(prints) = c["prints"].as_str() {
            if !stdout.contains(prints) {
                wrong.push(format!("stdout lacks `{prints}`"));
            }
        }
        if stderr.contains("panicked") || stderr.contains('\u{1b}') {
            wrong.push("a panic or a raw escape on stderr".into());
        }
        if code != 0 && !stdout.is_empty() {
            wrong.push("printed on stdout".into());
        }
        let after = fingerprint(&db);
        if c["writes"].as_bool() != Some(true) && after != before {
            wrong.push(format!("the database changed: {before:?} -> {after:?}"));
        }
        before = after;
        if !wrong.is_empty() {
            failures.push(format!(
                "{name}: {}\n    args {args:?}\n    stderr {}",
                wrong.join("; "),
                stderr.trim()
            ));
        }
    }
    let _ = std::fs::remove_dir_all(&dir);
    eprintln!(
        "hostile input: {} cases, {} as expected",
        cases.len(),
        cases.len() - failures.len()
    );
    assert!(
        failures.is_empty(),
        "{} of {} cases:\n{}",
        failures.len(),
        cases.len(),
        failures.join("\n")
    );
}
