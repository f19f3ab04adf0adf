//! `upshot-bench --engine LOCATOR`: the benchmark on a PostgreSQL server or a Spark Connect
//! server instead of embedded DuckDB.
//!
//! For every size, the benchmark table (`data.rs`) is loaded into the server once (PostgreSQL:
//! server-side `COPY` from a CSV file written beside the DuckDB file; Spark: a Parquet table
//! created from a Parquet file) as `upshot_bench_<rows>`. Then, for every method × width ×
//! segmentation, in this process, medians of `--repeat` runs:
//! - **scan**: the scan-limit query of `scan.rs` in the server's SQL (the floor for any
//!   in-database method there);
//! - **upshot**: the method end to end through the library on the server (queries counted);
//! - **python** (PostgreSQL, with `--python`): exporting the rows with `COPY ... TO STDOUT`
//!   through psql into pandas and fitting with statsmodels (`python/export_fit.py`), the way users
//!   do it today.
//!
//! The server is the measured process here, so no peak memory is reported; the ratios are the
//! result. Writes `engine-<kind>.json` under `--out`.

use crate::scan;
use crate::work::Work;
use serde_json::{json, Value};
use std::path::Path;
use std::time::Instant;
use upshot_engine::{Access, Engine};
use upshot_engine_postgres::PostgresEngine;
use upshot_engine_spark::SparkEngine;
use upshot_methods::estimate;

/// A server the benchmark runs on.
enum Server {
    Postgres(PostgresEngine),
    Spark(SparkEngine),
}

impl Server {
    fn engine(&self) -> &dyn Engine {
        match self {
            Server::Postgres(e) => e,
            Server::Spark(e) => e,
        }
    }
    fn kind(&self) -> &'static str {
        match self {
            Server::Postgres(_) => "postgresql",
            Server::Spark(_) => "spark",
        }
    }
    /// Runs the benchmark's own SQL; returns the first row's values as numbers.
    fn numbers(&self, sql: &str) -> Result<Vec<f64>, String> {
        let a = match self {
            Server::Postgres(e) => e.select(sql),
            Server::Spark(e) => e.select(sql),
        }
        .map_err(|e| e.to_string())?;
        Ok(a.names
            .iter()
            .map(|n| a.number(0, n).unwrap_or(f64::NAN))
            .collect())
    }
    fn execute(&self, sql: &str) -> Result<(), String> {
        match self {
            Server::Postgres(e) => e.execute_batch(sql).map_err(|e| e.to_string()),
            Server::Spark(e) => e.sql(sql, vec![]).map(|_| ()).map_err(|e| e.to_string()),
        }
    }
    /// Loads the benchmark table of `db` (a DuckDB file) as `table`, unless it is there with
    /// `rows` rows already.
    fn load(&self, db: &Path, table: &str, rows: u64) -> Result<(), String> {
        if let Ok(n) = self.numbers(&format!("SELECT COUNT(*) FROM {table}")) {
            if n.first() == Some(&(rows as f64)) {
                return Ok(());
            }
        }
        let started = Instant::now();
        let conn = duckdb::Connection::open(db).map_err(|e| e.to_string())?;
        let dir = db.parent().unwrap_or(Path::new("."));
        match self {
            Server::Postgres(_) => {
                let csv = dir.join(format!("{table}.csv"));
                conn.execute_batch(&format!(
                    "COPY customers TO '{}' (FORMAT csv, HEADER true)",
                    csv.display()
                ))
                .map_err(|e| e.to_string())?;
                let mut stmt = conn
                    .prepare("SELECT column_name, data_type FROM information_schema.columns WHERE table_name = 'customers' ORDER BY ordinal_position")
                    .map_err(|e| e.to_string())?;
                let cols: Vec<String> = stmt
                    .query_map([], |r| {
                        let (n, t): (String, String) = (r.get(0)?, r.get(1)?);
                        let t = match t.as_str() {
                            "DOUBLE" => "DOUBLE PRECISION",
                            "BIGINT" | "INTEGER" => "BIGINT",
                            _ => "TEXT",
                        };
                        Ok(format!("{n} {t}"))
                    })
                    .map_err(|e| e.to_string())?
                    .collect::<Result<_, _>>()
                    .map_err(|e| e.to_string())?;
                set_readable(dir, &csv);
                self.execute(&format!(
                    "DROP TABLE IF EXISTS {table}; CREATE TABLE {table} ({}); COPY {table} FROM '{}' WITH (FORMAT csv, HEADER true); ANALYZE {table}",
                    cols.join(", "),
                    csv.display()
                ))?;
                let _ = std::fs::remove_file(&csv);
            }
            Server::Spark(_) => {
                let parquet = dir.join(format!("{table}.parquet"));
                conn.execute_batch(&format!(
                    "COPY customers TO '{}' (FORMAT parquet)",
                    parquet.display()
                ))
                .map_err(|e| e.to_string())?;
                self.execute(&format!("DROP TABLE IF EXISTS {table}"))?;
                self.execute(&format!(
                    "CREATE TABLE {table} USING parquet AS SELECT * FROM parquet.`{}`",
                    parquet.display()
                ))?;
            }
        }
        eprintln!(
            "loaded {rows} rows into {} as {table} in {:.1} s",
            self.kind(),
            started.elapsed().as_secs_f64()
        );
        Ok(())
    }
}

/// The server process reads the file as another user.
fn set_readable(dir: &Path, file: &Path) {
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt;
        let _ = std::fs::set_permissions(dir, std::fs::Permissions::from_mode(0o755));
        let _ = std::fs::set_permissions(file, std::fs::Permissions::from_mode(0o644));
    }
}

fn median(mut v: Vec<f64>) -> f64 {
    v.sort_by(f64::total_cmp);
    v[v.len() / 2]
}

/// The scan-limit query rendered for the server (its float type, its table).
fn scan_sql(server: &Server, w: &Work, table: &str) -> Result<Option<String>, String> {
    let float = server.engine().dialect().float_type();
    let render = |s: String| {
        s.replace("AS DOUBLE)", &format!("AS {float})"))
            .replace("FROM customers", &format!("FROM {table}"))
    };
    let means = match scan::means_sql(w) {
        Some(q) => server.numbers(&render(q))?,
        None => vec![],
    };
    Ok(scan::sql(w, &means, false).map(render))
}

fn upshot_once(server: &Server, w: &Work, table: &str) -> Result<(f64, usize, f64, f64), String> {
    let engine = server.engine();
    let start = Instant::now();
    let source = upshot_sql::Source::table(table).map_err(|e| e.to_string())?;
    let spec = w.spec(engine, engine.flavor(), source)?;
    let mut runner = |p: &upshot_sql::Pass| engine.run(p).map_err(|e| e.to_string());
    let out = estimate(&spec, &mut runner).map_err(|e| e.to_string())?;
    let all = out
        .estimates
        .iter()
        .find(|e| e.segment == "all")
        .ok_or("no `all` row")?;
    Ok((
        start.elapsed().as_secs_f64(),
        out.diagnostics.passes,
        all.estimate,
        all.std_error,
    ))
}

fn python_once(python: &Path, locator: &str, w: &Work, table: &str) -> Result<(f64, f64), String> {
    let out = std::process::Command::new(python)
        .arg(Path::new(env!("CARGO_MANIFEST_DIR")).join("python/export_fit.py"))
        .args(["--postgres", locator, "--table", table])
        .args(["--methods", w.method.as_str()])
        .args(["--p", &w.p.to_string()])
        .args(["--segments", if w.segments { "on" } else { "off" }])
        .output()
        .map_err(|e| e.to_string())?;
    if !out.status.success() {
        return Err(String::from_utf8_lossy(&out.stderr).to_string());
    }
    let v: Value = serde_json::from_slice(&out.stdout).map_err(|e| e.to_string())?;
    Ok((
        v["seconds"].as_f64().unwrap_or(f64::NAN),
        v["estimate"].as_f64().unwrap_or(f64::NAN),
    ))
}

/// The whole engine benchmark.
#[allow(clippy::too_many_arguments)]
pub fn run(
    locator: &str,
    sizes: &[u64],
    works: &[Work],
    repeat: usize,
    data: &Path,
    python: Option<&Path>,
    out: &Path,
) -> Result<(), String> {
    let server = if locator.starts_with("sc://") {
        Server::Spark(SparkEngine::connect(locator).map_err(|e| e.to_string())?)
    } else {
        Server::Postgres(
            PostgresEngine::connect(locator, Access::ReadWrite).map_err(|e| e.to_string())?,
        )
    };
    let repeat = repeat.max(1);
    let mut rows_out = Vec::new();
    println!(
        "{:<36} {:>9} {:>9} {:>7} {:>8} {:>9} {:>8}",
        "engine / method / p / segments / rows",
        "scan s",
        "upshot s",
        "ratio",
        "queries",
        "python s",
        "py/ups"
    );
    for &n in sizes {
        let db = crate::data::ensure(data, n)?;
        let table = format!("upshot_bench_{n}");
        server.load(&db, &table, n)?;
        for w in works {
            let scan = match scan_sql(&server, w, &table)? {
                Some(sql) => {
                    let mut t = Vec::new();
                    for _ in 0..repeat {
                        let s = Instant::now();
                        server.numbers(&sql)?;
                        t.push(s.elapsed().as_secs_f64());
                    }
                    median(t)
                }
                None => f64::NAN,
            };
            let mut t = Vec::new();
            let mut last = (0.0, 0, 0.0, 0.0);
            for _ in 0..repeat {
                last = upshot_once(&server, w, &table)?;
                t.push(last.0);
            }
            let ups = median(t);
            let py = match (python, &server) {
                (Some(py), Server::Postgres(_)) => {
                    let mut t = Vec::new();
                    let mut est = f64::NAN;
                    for _ in 0..repeat {
                        let (s, e) = python_once(py, locator, w, &table)?;
                        t.push(s);
                        est = e;
                    }
                    Some((median(t), est))
                }
                _ => None,
            };
            println!(
                "{:<36} {:>9.2} {:>9.2} {:>7.1} {:>8} {:>9} {:>8}",
                format!("{} {} {}", server.kind(), w.label(), n),
                scan,
                ups,
                ups / scan,
                last.1,
                py.map(|p| format!("{:.2}", p.0))
                    .unwrap_or_else(|| "-".into()),
                py.map(|p| format!("{:.1}", p.0 / ups))
                    .unwrap_or_else(|| "-".into()),
            );
            rows_out.push(json!({
                "engine": server.kind(), "method": w.method.as_str(), "p": w.p,
                "segments": w.segments, "rows": n, "scan_s": scan, "upshot_s": ups,
                "upshot_over_scan": ups / scan, "queries": last.1, "estimate": last.2,
                "std_error": last.3, "python_s": py.map(|p| p.0),
                "python_estimate": py.map(|p| p.1),
                "python_over_upshot": py.map(|p| p.0 / ups),
            }));
        }
    }
    std::fs::create_dir_all(out).map_err(|e| e.to_string())?;
    let path = out.join(format!("engine-{}.json", server.kind()));
    std::fs::write(
        &path,
        serde_json::to_string_pretty(&rows_out).unwrap_or_default(),
    )
    .map_err(|e| format!("{}: {e}", path.display()))?;
    println!("wrote {}", path.display());
    Ok(())
}
