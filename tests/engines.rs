//! Every engine against DuckDB, on real servers: the demo table (100,000 rows) loaded into
//! PostgreSQL and into Spark (through Spark Connect); every method × estimand × without/with
//! segments run by the `upshot` binary on each; estimates and standard errors must equal
//! DuckDB's to 1e-9 relative (the same passes; only the engines' summation order differs).
//! Then `--into` twice with one run key leaves one copy, and the bad inputs of the engines
//! issue give their messages and exit codes, writing nothing.
//!
//! The servers come from `scripts/test` (scripts/postgres, scripts/spark), which sets
//! `UPSHOT_TEST_POSTGRES` (a `postgresql://` locator of a superuser on a throwaway cluster)
//! and `UPSHOT_TEST_SPARK` (an `sc://` locator naming the token variable,
//! `UPSHOT_TEST_SPARK_TOKEN`: the server asks for a bearer token), plus
//! `UPSHOT_TEST_SPARK_TLS` (the same server behind a TLS front) and `UPSHOT_TEST_SPARK_CA`
//! (the throwaway CA that signed the front's certificate). Without them the tests say so and
//! pass: `cargo test` alone needs no server.

use serde_json::Value;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};
use upshot_engine::Access;
use upshot_engine_postgres::PostgresEngine;
use upshot_engine_spark::SparkEngine;

const ROWS: u64 = 100_000;
const TOLERANCE: f64 = 1e-9;

fn repo() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("..")
}

/// The `upshot` binary `cargo test --workspace` built beside this test.
fn upshot() -> PathBuf {
    let exe = std::env::current_exe().unwrap();
    let bin = exe.parent().unwrap().parent().unwrap().join("upshot");
    assert!(
        bin.exists(),
        "{} missing: run cargo test --workspace (it builds the binary)",
        bin.display()
    );
    bin
}

fn run(args: &[&str], env: &[(&str, &str)]) -> Output {
    let mut c = Command::new(upshot());
    c.args(args).current_dir(repo()).env_remove("PGPASSWORD");
    for (k, v) in env {
        c.env(k, v);
    }
    c.output().unwrap()
}

fn ok(out: &Output, what: &str) -> Value {
    assert_eq!(
        out.status.code(),
        Some(0),
        "{what}: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    serde_json::from_slice(&out.stdout).unwrap()
}

/// Every method × estimand the methods take, without and with segments: 42 questions.
fn study(dir: &Path) -> PathBuf {
    std::fs::copy(
        repo().join("demo-data/voucher.graph"),
        dir.join("voucher.graph"),
    )
    .unwrap();
    let mut s = String::from(
        "[study]\nname = \"engines\"\n\n[source]\nfile = \"customers.csv\"\nunit = \"customer_id\"\n\n[diagram]\nfile = \"voucher.graph\"\n",
    );
    for method in [
        "regress",
        "weight",
        "doubly-robust",
        "partial-out",
        "stratify",
        "iv",
        "front-door",
        "coarsen",
        "match",
    ] {
        for estimand in ["ATE", "ATT", "ATC"] {
            if matches!(method, "partial-out" | "iv" | "front-door") && estimand != "ATE" {
                continue;
            }
            for segmented in [false, true] {
                s.push_str(&format!(
                    "\n[[question]]\nname = \"{method}-{estimand}{}\"\ntreatment = \"voucher\"\noutcome = \"spend_30d\"\nestimand = \"{estimand}\"\nmethod = \"{method}\"\n{}{}",
                    if segmented { "-by-tenure" } else { "" },
                    if segmented {
                        "segments = [\"tenure_band\"]\n"
                    } else {
                        ""
                    },
                    // The mailing wave moves the voucher and nothing else (voucher.graph).
                    // The voucher acts only through app sessions (voucher.graph).
                    match method {
                        "iv" => "instruments = [\"mail_wave\"]\n",
                        "front-door" => "mediators = [\"app_sessions\"]\n",
                        _ => "",
                    }
                ));
            }
        }
    }
    let path = dir.join("engines.toml");
    std::fs::write(&path, s).unwrap();
    path
}

const COLUMNS: &str = "customer_id BIGINT, zone VARCHAR(40), tenure_band VARCHAR(40), prior_orders BIGINT, household_size BIGINT, mail_wave BIGINT, voucher BIGINT, app_sessions BIGINT, spend_30d DOUBLE PRECISION, reordered_30d BIGINT";

struct Fixture {
    dir: PathBuf,
    study: PathBuf,
    duckdb: Value,
}

/// The demo rows and DuckDB's answers, made once for every test of this file.
fn fixture() -> &'static Fixture {
    static F: std::sync::OnceLock<Fixture> = std::sync::OnceLock::new();
    F.get_or_init(make_fixture)
}

fn make_fixture() -> Fixture {
    // scripts/test gives a directory it removes; else one under the system's temporary directory.
    let dir = std::env::var_os("UPSHOT_TEST_DIR")
        .map(PathBuf::from)
        .unwrap_or_else(std::env::temp_dir)
        .join(format!("upshot-engines-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let out = run(
        &[
            "demo",
            "--rows",
            &ROWS.to_string(),
            "--variant",
            "observed",
            "--out",
            dir.to_str().unwrap(),
        ],
        &[],
    );
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    // The server reads the file as another user.
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt;
        for p in [dir.clone(), dir.join("customers.csv")] {
            std::fs::set_permissions(&p, std::fs::Permissions::from_mode(0o755)).unwrap();
        }
    }
    let study = study(&dir);
    let duckdb = ok(
        &run(&["run", study.to_str().unwrap(), "--format", "json"], &[]),
        "DuckDB",
    );
    Fixture { dir, study, duckdb }
}

/// Compares every estimate and standard error with DuckDB's; returns the worst relative gap.
fn agree(engine: &str, want: &Value, got: &Value) -> f64 {
    let w = want["estimates"].as_array().unwrap();
    let g = got["estimates"].as_array().unwrap();
    assert_eq!(w.len(), g.len(), "{engine}: estimate rows");
    let mut worst: f64 = 0.0;
    for (a, b) in w.iter().zip(g) {
        for key in ["question", "segment", "method", "estimand", "n_used"] {
            assert_eq!(a[key], b[key], "{engine}: {key} of {}", a["question"]);
        }
        for key in ["estimate", "std_error"] {
            let (x, y) = (a[key].as_f64().unwrap(), b[key].as_f64().unwrap());
            let rel = (x - y).abs() / x.abs().max(1e-300);
            worst = worst.max(rel);
            assert!(
                rel <= TOLERANCE,
                "{engine} {} {} {key}: DuckDB {x}, {engine} {y} (relative {rel:e})",
                a["question"],
                a["segment"]
            );
        }
    }
    worst
}

fn passes(v: &Value) -> u64 {
    v["questions"]
        .as_array()
        .unwrap()
        .iter()
        .map(|q| q["diagnostics"]["passes"].as_u64().unwrap_or(0))
        .sum()
}

/// `match` with 3 neighbours and a caliper, per tenure band, its rows written to `table`:
/// the engine's estimates equal DuckDB's (on the study's file), and returns the engine's
/// answer for the caller to check the table's mean difference against.
fn matching_with_rows(engine: &str, locator: &str, table: &str) -> Value {
    let f = fixture();
    let study = f.study.to_str().unwrap();
    let extra = [
        "--question",
        "match-ATT-by-tenure",
        "--neighbours",
        "3",
        "--caliper",
        "0.2",
        "--format",
        "json",
    ];
    let duckdb = ok(
        &run(&[&["run", study], extra.as_slice()].concat(), &[]),
        "DuckDB",
    );
    let got = ok(
        &run(
            &[
                &["run", study, "--db", locator, "--source", "customers"],
                extra.as_slice(),
                &["--rows-into", table, "--replace"],
            ]
            .concat(),
            &[],
        ),
        engine,
    );
    let worst = agree(engine, &duckdb, &got);
    eprintln!("{engine}: match with a caliper agrees with DuckDB (worst relative gap {worst:.1e})");
    got
}

/// `--bins`: questions segmented by a numeric column cut at quantiles the engine computes
/// give DuckDB's bins (the same ranges, as segment labels) and estimates. And cross-fitted
/// questions with 12 segments × 5 folds = 60 models per family, which every engine reads from a
/// joined table of coefficients (over `JOINED_MODELS`; fewer models by nested `CASE`).
fn bins_agree(engine: &str, locator: &str) {
    let f = fixture();
    let study = f.study.to_str().unwrap();
    let mut worst: f64 = 0.0;
    let mut rows = 0;
    let two = "mail_wave,tenure_band";
    let cases: [(&str, Vec<&str>); 6] = [
        (
            "regress-ATE",
            vec!["--segment-by", "prior_orders", "--bins", "4"],
        ),
        (
            "weight-ATT",
            vec!["--segment-by", "household_size", "--bins", "3"],
        ),
        (
            "match-ATE",
            vec!["--segment-by", "prior_orders", "--bins", "4"],
        ),
        (
            "stratify-ATE",
            vec!["--segment-by", "prior_orders", "--bins", "5"],
        ),
        ("doubly-robust-ATE", vec!["--segment-by", two]),
        ("partial-out-ATE", vec!["--segment-by", two]),
    ];
    for (question, segments) in cases {
        let extra = [
            &["--question", question, "--format", "json"][..],
            &segments[..],
        ]
        .concat();
        let duckdb = ok(
            &run(&[&["run", study], extra.as_slice()].concat(), &[]),
            "DuckDB",
        );
        let got = ok(
            &run(
                &[
                    &["run", study, "--db", locator, "--source", "customers"],
                    extra.as_slice(),
                ]
                .concat(),
                &[],
            ),
            engine,
        );
        // `agree` compares the segment labels, which name each bin's range.
        worst = worst.max(agree(engine, &duckdb, &got));
        rows += got["estimates"].as_array().unwrap().len();
    }
    eprintln!("{engine}: {rows} estimates over quantile bins and over 60 cross-fitted models per family agree with DuckDB's (worst relative gap {worst:.1e})");
}

/// The `all` row's estimate of a `matching_with_rows` answer.
fn all_estimate(v: &Value) -> f64 {
    v["estimates"]
        .as_array()
        .unwrap()
        .iter()
        .find(|e| e["segment"] == "all")
        .unwrap()["estimate"]
        .as_f64()
        .unwrap()
}

/// The PostgreSQL server of `scripts/test`, with the demo table loaded (once).
fn postgres() -> Option<(String, PostgresEngine)> {
    let Ok(locator) = std::env::var("UPSHOT_TEST_POSTGRES") else {
        eprintln!("skipped: UPSHOT_TEST_POSTGRES is not set (scripts/test starts a server)");
        return None;
    };
    static LOADED: std::sync::OnceLock<()> = std::sync::OnceLock::new();
    let pg = PostgresEngine::connect(&locator, Access::ReadWrite).unwrap();
    LOADED.get_or_init(|| {
        let csv = fixture().dir.join("customers.csv");
        pg.execute_batch(&format!(
            "DROP TABLE IF EXISTS customers; CREATE TABLE customers ({COLUMNS}); COPY customers FROM '{}' WITH (FORMAT csv, HEADER true); ANALYZE customers",
            csv.display()
        ))
        .unwrap();
    });
    Some((locator, pg))
}

#[test]
fn postgres_gives_duckdb_estimates() {
    let Some((locator, _pg)) = postgres() else {
        return;
    };
    let f = fixture();
    let study = f.study.to_str().unwrap();
    let t = std::time::Instant::now();
    let got = ok(
        &run(
            &[
                "run",
                study,
                "--db",
                &locator,
                "--source",
                "customers",
                "--format",
                "json",
            ],
            &[],
        ),
        "PostgreSQL",
    );
    let worst = agree("PostgreSQL", &f.duckdb, &got);
    eprintln!(
        "PostgreSQL: {} estimates agree with DuckDB's (worst relative gap {worst:.1e}); {} passes in {:.1} s",
        got["estimates"].as_array().unwrap().len(),
        passes(&got),
        t.elapsed().as_secs_f64()
    );
}

#[test]
fn postgres_match_writes_its_rows_and_agrees() {
    let Some((locator, pg)) = postgres() else {
        return;
    };
    let got = matching_with_rows("PostgreSQL", &locator, "matched_rows");
    let rows = pg
        .select("SELECT AVG(difference) AS mean, COUNT(*) AS n FROM matched_rows")
        .unwrap();
    let (mean, est) = (rows.number(0, "mean").unwrap(), all_estimate(&got));
    assert!(
        (mean - est).abs() <= TOLERANCE * est.abs(),
        "{mean} vs {est}"
    );
}

#[test]
fn postgres_bins_agree() {
    let Some((locator, _pg)) = postgres() else {
        return;
    };
    bins_agree("PostgreSQL", &locator);
}

#[test]
fn postgres_into_twice_with_one_key_keeps_one_copy() {
    let Some((locator, pg)) = postgres() else {
        return;
    };
    let study = fixture().study.to_str().unwrap();
    // --into twice with one key: one copy; a third run without a key appends.
    let into = |key: Option<&str>| {
        let mut args = vec![
            "run",
            study,
            "--db",
            &locator,
            "--source",
            "customers",
            "--question",
            "weight-ATE-by-tenure",
            "--into",
            "analytics.effects",
        ];
        if let Some(k) = key {
            args.extend(["--run-key", k]);
        }
        let out = run(&args, &[]);
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
    };
    pg.execute_batch(
        "CREATE SCHEMA IF NOT EXISTS analytics; DROP TABLE IF EXISTS analytics.effects",
    )
    .unwrap();
    into(Some("daily"));
    into(Some("daily"));
    let rows = pg
        .select("SELECT COUNT(*) AS n, COUNT(DISTINCT run_at) AS runs FROM analytics.effects WHERE run_key = 'daily'")
        .unwrap();
    assert_eq!(
        rows.number(0, "n").unwrap(),
        4.0,
        "one copy: all + 3 tenure bands"
    );
    assert_eq!(rows.number(0, "runs").unwrap(), 1.0);
    into(None);
    let all = pg
        .select("SELECT COUNT(*) AS n FROM analytics.effects")
        .unwrap();
    assert_eq!(all.number(0, "n").unwrap(), 8.0);
}

fn refused(out: &Output, code: i32, needles: &[&str], what: &str) {
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(code), "{what}: {err}");
    assert!(
        out.stdout.is_empty(),
        "{what}: printed {}",
        String::from_utf8_lossy(&out.stdout)
    );
    for n in needles {
        assert!(err.contains(n), "{what}: `{n}` not in: {err}");
    }
    assert!(!err.contains("panicked"), "{what}: {err}");
}

#[test]
fn postgres_bad_inputs_are_refused_and_write_nothing() {
    let Some((locator, pg)) = postgres() else {
        return;
    };
    let locator = locator.as_str();
    let study = fixture().study.to_str().unwrap();
    let q = ["--question", "regress-ATE"];
    let base = |db: &str, source: &str| -> Vec<String> {
        ["run", study, "--db", db, "--source", source]
            .iter()
            .chain(q.iter())
            .map(|s| s.to_string())
            .collect()
    };
    let go = |args: Vec<String>, env: &[(&str, &str)]| {
        let a: Vec<&str> = args.iter().map(|s| s.as_str()).collect();
        run(&a, env)
    };
    // Unreachable: a free port nobody listens on.
    let port = std::net::TcpListener::bind("127.0.0.1:0")
        .unwrap()
        .local_addr()
        .unwrap()
        .port();
    let nowhere = format!("postgresql://upshot@127.0.0.1:{port}/postgres");
    refused(
        &go(base(&nowhere, "customers"), &[]),
        2,
        &["--db", "cannot open", "Connection refused"],
        "unreachable",
    );
    // A password in the locator: refused before connecting, and never shown.
    let with_password = locator.replacen("://upshot@", "://upshot:s3cret@", 1);
    let out = go(base(&with_password, "customers"), &[]);
    refused(&out, 2, &["PGPASSWORD", "***"], "password in the locator");
    assert!(!String::from_utf8_lossy(&out.stderr).contains("s3cret"));
    // A bad password (a role that must give one: scripts/postgres asks `guarded` for it).
    pg.execute_batch("DROP ROLE IF EXISTS guarded; CREATE ROLE guarded LOGIN PASSWORD 'right-one'; GRANT SELECT ON customers TO guarded").unwrap();
    let guarded = locator.replacen("://upshot@", "://guarded@", 1);
    let out = go(base(&guarded, "customers"), &[("PGPASSWORD", "wrong-one")]);
    refused(
        &out,
        2,
        &["password authentication failed", "guarded"],
        "bad password",
    );
    assert!(!String::from_utf8_lossy(&out.stderr).contains("wrong-one"));
    let out = go(base(&guarded, "customers"), &[("PGPASSWORD", "right-one")]);
    assert!(
        out.status.success(),
        "right password: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    // Unknown schema, table, column.
    refused(
        &go(base(locator, "nowhere.customers"), &[]),
        2,
        &["nowhere"],
        "unknown schema",
    );
    refused(
        &go(base(locator, "no_such_table"), &[]),
        2,
        &["no_such_table"],
        "unknown table",
    );
    let mut a = base(locator, "customers");
    a.extend(["--outcome".into(), "spend_90d".into()]);
    refused(&go(a, &[]), 2, &["spend_90d"], "unknown column");
    // A text column used as a number.
    let text = "SELECT customer_id, zone, tenure_band, prior_orders, household_size, mail_wave, voucher, app_sessions, CAST(spend_30d AS TEXT) AS spend_30d FROM customers";
    refused(
        &go(base(locator, text), &[]),
        2,
        &["spend_30d", "text"],
        "text outcome",
    );
    // A file source: PostgreSQL reads no files of this machine.
    refused(
        &go(base(locator, "demo-data/sample/customers.csv"), &[]),
        2,
        &["file"],
        "file source",
    );
    // A statement timeout: a source that sleeps per row, cancelled by the server.
    let slow = "SELECT c.*, pg_sleep(0.01) AS pause FROM customers AS c";
    let mut a = base(locator, slow);
    a.extend([
        "--timeout".into(),
        "1".into(),
        "--into".into(),
        "timeout_results".into(),
    ]);
    let t = std::time::Instant::now();
    refused(&go(a, &[]), 1, &["--timeout 1", "cancelled"], "timeout");
    assert!(
        t.elapsed().as_secs() < 30,
        "the timeout took {:?}",
        t.elapsed()
    );
    let left = pg
        .select("SELECT COUNT(*) AS n FROM pg_tables WHERE tablename = 'timeout_results'")
        .unwrap();
    assert_eq!(left.number(0, "n").unwrap(), 0.0, "nothing written");
}

/// The Spark Connect server of `scripts/test`, with the demo table loaded (once) as a
/// Parquet table.
fn spark() -> Option<(String, SparkEngine)> {
    let Ok(locator) = std::env::var("UPSHOT_TEST_SPARK") else {
        eprintln!("skipped: UPSHOT_TEST_SPARK is not set (scripts/test starts a server)");
        return None;
    };
    static LOADED: std::sync::OnceLock<()> = std::sync::OnceLock::new();
    let spark = SparkEngine::connect(&locator).unwrap();
    LOADED.get_or_init(|| {
        let csv = fixture().dir.join("customers.csv");
        let spark_columns = COLUMNS
            .replace("VARCHAR(40)", "STRING")
            .replace("DOUBLE PRECISION", "DOUBLE");
        for sql in [
            "DROP TABLE IF EXISTS customers_csv".to_string(),
            "DROP TABLE IF EXISTS customers".to_string(),
            format!(
                "CREATE TABLE customers_csv ({spark_columns}) USING csv OPTIONS (path '{}', header 'true')",
                csv.display()
            ),
            "CREATE TABLE customers USING parquet AS SELECT * FROM customers_csv".to_string(),
        ] {
            spark.sql(&sql, vec![]).unwrap();
        }
    });
    Some((locator, spark))
}

#[test]
fn spark_gives_duckdb_estimates() {
    let Some((locator, _spark)) = spark() else {
        return;
    };
    let f = fixture();
    let study = f.study.to_str().unwrap();
    let t = std::time::Instant::now();
    let got = ok(
        &run(
            &[
                "run",
                study,
                "--db",
                &locator,
                "--source",
                "customers",
                "--format",
                "json",
            ],
            &[],
        ),
        "Spark",
    );
    let worst = agree("Spark", &f.duckdb, &got);
    eprintln!(
        "Spark: {} estimates agree with DuckDB's (worst relative gap {worst:.1e}); {} queries in {:.1} s",
        got["estimates"].as_array().unwrap().len(),
        passes(&got),
        t.elapsed().as_secs_f64()
    );
}

#[test]
fn spark_match_writes_its_rows_and_agrees() {
    let Some((locator, spark)) = spark() else {
        return;
    };
    let got = matching_with_rows("Spark", &locator, "matched_rows");
    let b = spark
        .sql("SELECT AVG(difference) FROM matched_rows", vec![])
        .unwrap();
    use arrow_array::cast::AsArray;
    let mean = b[0]
        .column(0)
        .as_primitive::<arrow_array::types::Float64Type>()
        .value(0);
    let est = all_estimate(&got);
    assert!(
        (mean - est).abs() <= TOLERANCE * est.abs(),
        "{mean} vs {est}"
    );
}

#[test]
fn spark_bins_agree() {
    let Some((locator, _spark)) = spark() else {
        return;
    };
    bins_agree("Spark", &locator);
}

#[test]
fn spark_into_twice_with_one_key_keeps_one_copy() {
    let Some((locator, spark)) = spark() else {
        return;
    };
    let study = fixture().study.to_str().unwrap();
    let into = |key: &str| {
        let out = run(
            &[
                "run",
                study,
                "--db",
                &locator,
                "--source",
                "customers",
                "--question",
                "weight-ATE-by-tenure",
                "--into",
                "effects",
                "--run-key",
                key,
            ],
            &[],
        );
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
    };
    spark.sql("DROP TABLE IF EXISTS effects", vec![]).unwrap();
    into("daily");
    into("daily");
    into("weekly");
    let count = |sql: &str| -> i64 {
        let b = spark.sql(sql, vec![]).unwrap();
        use arrow_array::cast::AsArray;
        b[0].column(0)
            .as_primitive::<arrow_array::types::Int64Type>()
            .value(0)
    };
    assert_eq!(
        count("SELECT COUNT(*) FROM effects WHERE run_key = 'daily'"),
        4
    );
    assert_eq!(
        count("SELECT COUNT(DISTINCT run_at) FROM effects WHERE run_key = 'daily'"),
        1
    );
    assert_eq!(count("SELECT COUNT(*) FROM effects"), 8);
}

/// The same server behind a TLS front whose certificate a throwaway CA signed: trusted
/// through `SSL_CERT_FILE`, the estimates equal DuckDB's; without it, the certificate is
/// refused; plaintext to the TLS port and TLS to the plaintext port fail with a hint.
#[test]
fn spark_over_tls_with_a_token() {
    let Some((locator, _spark)) = spark() else {
        return;
    };
    let (Ok(tls), Ok(ca)) = (
        std::env::var("UPSHOT_TEST_SPARK_TLS"),
        std::env::var("UPSHOT_TEST_SPARK_CA"),
    ) else {
        eprintln!("skipped: UPSHOT_TEST_SPARK_TLS / UPSHOT_TEST_SPARK_CA are not set");
        return;
    };
    let f = fixture();
    let study = f.study.to_str().unwrap();
    // One question (per segment: the weighting passes) is enough to cross the TLS front; the
    // plaintext test runs them all.
    let question = "weight-ATE-by-tenure";
    let go = |db: &str, env: &[(&str, &str)]| {
        run(
            &[
                "run",
                study,
                "--db",
                db,
                "--source",
                "customers",
                "--question",
                question,
                "--format",
                "json",
            ],
            env,
        )
    };
    let got = ok(&go(&tls, &[("SSL_CERT_FILE", &ca)]), "Spark over TLS");
    let mut want = f.duckdb.clone();
    want["estimates"]
        .as_array_mut()
        .unwrap()
        .retain(|e| e["question"] == question);
    let worst = agree("Spark over TLS", &want, &got);
    eprintln!(
        "Spark over TLS with a token: {} estimates agree with DuckDB's (worst relative gap {worst:.1e})",
        got["estimates"].as_array().unwrap().len()
    );
    // An empty CA file: the front's certificate is from an issuer nobody trusts.
    let empty = std::env::temp_dir().join(format!("upshot-empty-ca-{}.pem", std::process::id()));
    std::fs::write(&empty, "").unwrap();
    refused(
        &go(&tls, &[("SSL_CERT_FILE", empty.to_str().unwrap())]),
        2,
        &["certificate", "SSL_CERT_FILE"],
        "untrusted certificate",
    );
    std::fs::remove_file(&empty).unwrap();
    let plain_to_tls = tls.replace(";use_ssl=true", "");
    refused(
        &go(&plain_to_tls, &[]),
        2,
        &["use_ssl=true"],
        "plaintext to the TLS port",
    );
    let tls_to_plain = format!("{locator};use_ssl=true");
    refused(
        &go(&tls_to_plain, &[("SSL_CERT_FILE", &ca)]),
        2,
        &["unreachable", "TLS"],
        "TLS to the plaintext port",
    );
}

#[test]
fn spark_bad_inputs_are_refused() {
    let Some((locator, _spark)) = spark() else {
        return;
    };
    let study = fixture().study.to_str().unwrap();
    let q = ["--question", "regress-ATE"];
    let go = |db: &str, source: &str, extra: &[&str]| {
        let mut a = vec!["run", study, "--db", db, "--source", source];
        a.extend(q);
        a.extend(extra);
        run(&a, &[])
    };
    let port = std::net::TcpListener::bind("127.0.0.1:0")
        .unwrap()
        .local_addr()
        .unwrap()
        .port();
    refused(
        &go(&format!("sc://127.0.0.1:{port}"), "customers", &[]),
        2,
        &["--db", "unreachable"],
        "unreachable",
    );
    let base = locator.split("/;").next().unwrap();
    let out = go(&format!("{base}/;token=abc123"), "customers", &[]);
    refused(&out, 2, &["token", "token_env"], "token in the locator");
    assert!(!String::from_utf8_lossy(&out.stderr).contains("abc123"));
    refused(
        &go(base, "customers", &[]),
        2,
        &["refused the credentials", "No authentication token"],
        "no token",
    );
    let wrong = run(
        &[
            "run",
            study,
            "--db",
            &format!("{base}/;token_env=UPSHOT_WRONG_TOKEN"),
            "--source",
            "customers",
            "--question",
            "regress-ATE",
        ],
        &[("UPSHOT_WRONG_TOKEN", "not-the-token")],
    );
    refused(
        &wrong,
        2,
        &["refused the credentials", "Invalid authentication token"],
        "wrong token",
    );
    assert!(!String::from_utf8_lossy(&wrong.stderr).contains("not-the-token"));
    refused(
        &go(
            &format!("{base}/;token_env=UPSHOT_UNSET_TOKEN"),
            "customers",
            &[],
        ),
        2,
        &["UPSHOT_UNSET_TOKEN is not set"],
        "token variable unset",
    );
    refused(
        &go(
            "sc://spark.example:15002/;token_env=UPSHOT_TEST_SPARK_TOKEN",
            "customers",
            &[],
        ),
        2,
        &["only over TLS", "use_ssl=true"],
        "token in plaintext beyond loopback",
    );
    refused(
        &go(&locator, "nowhere.customers", &[]),
        2,
        &["nowhere"],
        "unknown schema",
    );
    refused(
        &go(&locator, "no_such_table", &[]),
        2,
        &["no_such_table"],
        "unknown table",
    );
    refused(
        &go(&locator, "customers", &["--outcome", "spend_90d"]),
        2,
        &["spend_90d"],
        "unknown column",
    );
    let text = "SELECT customer_id, zone, tenure_band, prior_orders, household_size, mail_wave, voucher, app_sessions, CAST(spend_30d AS STRING) AS spend_30d FROM customers";
    refused(
        &go(&locator, text, &[]),
        2,
        &["spend_30d", "string"],
        "text outcome",
    );
    refused(
        &go(&locator, "demo-data/sample/customers.csv", &[]),
        2,
        &["file"],
        "file source",
    );
}
