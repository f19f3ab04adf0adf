//! `upshot-bench`: upshot's in-database plans measured side by side with the scan limit and
//! with exporting the rows to fit in memory.
//!
//! For every method, design width (p = 8, 32), segmentation (off, on: ten segments) and table
//! size (1M and 10M rows by default), it measures in separate processes, so that each peak
//! resident memory is a whole-process figure:
//! - **scan**: one hand-written DuckDB query computing exactly the sums of the method's heaviest
//!   pass (`scan.rs`), once with one `SUM` per product and once (**scan-fused**) with upshot's
//!   `upshot_moments` aggregate; the faster is the floor for any in-database method;
//! - **upshot**: the method end to end through the library (every pass) on the same file, as
//!   `run` executes it, and (**upshot-plain**) rendered without
//!   upshot's functions;
//! - **rust**: every needed column exported through Arrow and the same estimator fitted in
//!   memory with nalgebra (`memfit.rs`);
//! - **python** (with `--python`): the same through the DuckDB Python package, pandas and
//!   statsmodels (`python/export_fit.py`), as a notebook would.
//!
//! It prints the ratios (upshot ÷ floor, upshot-plain ÷ plain scan, rust ÷ upshot, python ÷ upshot), upshot's memory at the
//! largest size ÷ at the smallest, and how far the exported fits' estimates are from upshot's,
//! checks them against the targets of the benchmark issue, and writes the table as JSON and CSV.
//! Absolute times on shared machines are noisy; the ratios, measured in one run, are the result.
//!
//! Key design decision: the benchmark is a separate binary over the library crates, and runs
//! each measurement as a child process of itself, because the memory target is about whole
//! processes and DuckDB keeps its buffer pool for the life of a process.
//!
//! Usage: `upshot-bench [--rows 1000000,10000000] [--p 8,32] [--segments off,on]
//! [--methods stratify,regress,...] [--python PY] [--repeat N] [--data DIR] [--out DIR]
//! [--agree TOL]`; `upshot-bench --diagrams` times `upshot check` on large generated diagrams
//! (`diagrams.rs`) instead. For trying other formulations of a pass by hand, `upshot-bench --measure
//! sql:FILE --db DB --methods regress` times the query in FILE three times on DB.

mod data;
mod diagrams;
mod engines;
mod memfit;
mod scan;
mod work;

use clap::Parser;
use serde::Serialize;
use serde_json::{json, Value};
use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::Instant;
use upshot_engine::Engine;
use upshot_engine_duckdb::DuckDbEngine;
use upshot_methods::{estimate, Method};
use work::Work;

#[derive(Parser, Debug)]
#[command(
    name = "upshot-bench",
    about = "upshot against the scan limit and against export-and-fit"
)]
struct Args {
    /// Table sizes (rows), comma-separated.
    #[arg(long, value_delimiter = ',', default_value = "1000000,10000000")]
    rows: Vec<u64>,
    /// Design widths: 8 and/or 32.
    #[arg(long, value_delimiter = ',', default_value = "8,32")]
    p: Vec<usize>,
    /// Segmentation: off and/or on (ten segments).
    #[arg(long, value_delimiter = ',', default_value = "off,on")]
    segments: Vec<String>,
    /// Methods, comma-separated (default: all five).
    #[arg(long, value_delimiter = ',')]
    methods: Vec<String>,
    /// A Python interpreter with duckdb, pandas and statsmodels: also measure export-and-fit in
    /// Python.
    #[arg(long)]
    python: Option<PathBuf>,
    /// Only measure Python at these sizes (default: every size).
    #[arg(long, value_delimiter = ',')]
    python_rows: Vec<u64>,
    /// Runs per measurement; the median time is reported.
    #[arg(long, default_value_t = 1)]
    repeat: usize,
    /// Where the benchmark databases are kept (built once per size, reused).
    #[arg(long)]
    data: Option<PathBuf>,
    /// Where the results (JSON, CSV) are written.
    #[arg(long, default_value = "bench-results")]
    out: PathBuf,
    /// Fail (exit 1) when an exported fit's estimate differs from upshot's by more than this
    /// relative amount (the smoke run in scripts/test uses 1e-6).
    #[arg(long)]
    agree: Option<f64>,
    /// Time the identification report (`upshot check`) on large generated diagrams instead,
    /// against the 2 s target for 1,000 variables; exit 1 when a target is missed.
    #[arg(long)]
    diagrams: bool,
    /// Measure on a PostgreSQL (`postgresql://...`) or Spark Connect (`sc://...`) server instead
    /// of embedded DuckDB: the scan limit and upshot per method there (and, on PostgreSQL with
    /// --python, exporting with COPY ... TO STDOUT and fitting in Python).
    #[arg(long)]
    engine: Option<String>,
    /// Internal: measure one approach in this process and print JSON.
    #[arg(long, hide = true)]
    measure: Option<String>,
    /// Internal: the database of a measurement.
    #[arg(long, hide = true)]
    db: Option<PathBuf>,
}

fn fail(msg: String) -> ! {
    eprintln!("upshot-bench: {msg}");
    std::process::exit(2)
}

fn main() {
    let args = Args::parse();
    if let Some(approach) = &args.measure {
        let db = args
            .db
            .clone()
            .unwrap_or_else(|| fail("--db is required".into()));
        let w = Work {
            method: args
                .methods
                .first()
                .and_then(|m| work::method(m))
                .unwrap_or_else(|| fail("--methods names one method".into())),
            p: args.p[0],
            segments: args.segments[0] == "on",
        };
        match measure(approach, &db, &w) {
            Ok(v) => println!("{v}"),
            Err(e) => fail(format!("{approach} {}: {e}", w.label())),
        }
        return;
    }
    if args.diagrams {
        let dir = args.out.join("diagrams");
        match diagrams::run(&dir, args.repeat.max(3)) {
            Ok(true) => return,
            Ok(false) => std::process::exit(1),
            Err(e) => fail(e),
        }
    }
    if let Some(locator) = &args.engine {
        let works = works(&args);
        let data = args.data.clone().unwrap_or_else(|| args.out.join("data"));
        if let Err(e) = engines::run(
            locator,
            &args.rows,
            &works,
            args.repeat,
            &data,
            args.python.as_deref(),
            &args.out,
        ) {
            fail(format!("--engine: {e}"));
        }
        return;
    }
    run(&args);
}

/// Peak resident memory of this process (kB), from /proc.
fn peak_rss_kb() -> f64 {
    std::fs::read_to_string("/proc/self/status")
        .ok()
        .and_then(|s| {
            s.lines()
                .find(|l| l.starts_with("VmHWM:"))
                .and_then(|l| l.split_whitespace().nth(1).map(|v| v.parse().ok()))
        })
        .flatten()
        .unwrap_or(f64::NAN)
}

const DB_MEMORY: &str =
    "SELECT CAST(COALESCE(SUM(memory_usage_bytes), 0) AS DOUBLE) FROM duckdb_memory()";

fn open(db: &Path) -> Result<upshot_duckdb_ext::Database, String> {
    upshot_duckdb_ext::Database::open(Some(db), false).map_err(|e| e.to_string())
}

/// One measurement in this process.
fn measure(approach: &str, db: &Path, w: &Work) -> Result<Value, String> {
    match approach {
        "scan" | "scan-fused" => {
            let db = open(db)?;
            let conn = db.connection();
            let means: Vec<f64> = match scan::means_sql(w) {
                Some(q) => {
                    let mut stmt = conn.prepare(&q).map_err(|e| e.to_string())?;
                    let n = stmt.column_count();
                    stmt.query_row([], |r| (0..n).map(|i| r.get::<_, f64>(i)).collect())
                        .map_err(|e| e.to_string())?
                }
                None => vec![],
            };
            let sql = scan::sql(w, &means, approach == "scan-fused")
                .ok_or("no fused form of this scan")?;
            let start = Instant::now();
            let mut stmt = conn.prepare(&sql).map_err(|e| e.to_string())?;
            let groups = stmt
                .query_arrow([])
                .map_err(|e| e.to_string())?
                .map(|b| b.num_rows())
                .sum::<usize>();
            let seconds = start.elapsed().as_secs_f64();
            let dbm: f64 = conn
                .query_row(DB_MEMORY, [], |r| r.get(0))
                .map_err(|e| e.to_string())?;
            Ok(
                json!({"seconds": seconds, "peak_rss_kb": peak_rss_kb(), "db_memory_bytes": dbm,
                      "groups": groups, "sums_per_group": scan::sums(w)}),
            )
        }
        "upshot" | "upshot-plain" => {
            let start = Instant::now();
            let location = db.to_str().ok_or("database path is not UTF-8")?;
            let engine = DuckDbEngine::open(location, false).map_err(|e| e.to_string())?;
            let source = upshot_sql::Source::table("customers").map_err(|e| e.to_string())?;
            let flavor = if approach == "upshot" {
                engine.flavor()
            } else {
                upshot_sql::Flavor::plain(engine.dialect())
            };
            let spec = w.spec(&engine, flavor, source)?;
            let mut times: Vec<(String, f64)> = Vec::new();
            // UPSHOT_BENCH_DUMP=DIR writes each pass's SQL there, for study by hand.
            let dump = std::env::var_os("UPSHOT_BENCH_DUMP").map(PathBuf::from);
            let mut runner = |p: &upshot_sql::Pass| {
                if let Some(d) = &dump {
                    let f = d.join(format!("{:02}-{}.sql", times.len(), p.name));
                    let _ = std::fs::write(f, p.query.to_string());
                }
                let t = Instant::now();
                let r = engine.run(p).map_err(|e| e.to_string());
                times.push((p.name.clone(), t.elapsed().as_secs_f64()));
                r
            };
            let out = estimate(&spec, &mut runner).map_err(|e| e.to_string())?;
            let seconds = start.elapsed().as_secs_f64();
            let all = out
                .estimates
                .iter()
                .find(|e| e.segment == "all")
                .ok_or("no `all` row")?;
            let dbm = engine.query_number(DB_MEMORY).map_err(|e| e.to_string())?;
            Ok(
                json!({"seconds": seconds, "peak_rss_kb": peak_rss_kb(), "db_memory_bytes": dbm,
                      "passes": out.diagnostics.passes, "estimate": all.estimate,
                      "std_error": all.std_error, "pass_seconds": times}),
            )
        }
        "rust" => {
            let start = Instant::now();
            let db = open(db)?;
            let conn = db.connection();
            let rows = memfit::export(conn, w)?;
            let exported = start.elapsed().as_secs_f64();
            let f = memfit::fit(&rows, w)?;
            let seconds = start.elapsed().as_secs_f64();
            let dbm: f64 = conn
                .query_row(DB_MEMORY, [], |r| r.get(0))
                .map_err(|e| e.to_string())?;
            Ok(
                json!({"seconds": seconds, "export_seconds": exported, "peak_rss_kb": peak_rss_kb(),
                      "db_memory_bytes": dbm, "estimate": f.estimate, "std_error": f.std_error}),
            )
        }
        sql if sql.starts_with("sql:") => {
            let db = open(db)?;
            let conn = db.connection();
            let text = std::fs::read_to_string(&sql[4..]).map_err(|e| e.to_string())?;
            let mut times = Vec::new();
            for _ in 0..3 {
                let start = Instant::now();
                let mut stmt = conn.prepare(&text).map_err(|e| e.to_string())?;
                let n: usize = stmt
                    .query_arrow([])
                    .map_err(|e| e.to_string())?
                    .map(|b| b.num_rows())
                    .sum();
                times.push((start.elapsed().as_secs_f64(), n));
            }
            Ok(json!({"times": times}))
        }
        other => Err(format!("unknown approach `{other}` (scan, upshot, rust)")),
    }
}

/// Runs one measurement `repeat` times in child processes; returns the median-time result.
fn child(args: &Args, approach: &str, db: &Path, w: &Work) -> Result<Value, String> {
    let mut runs: Vec<Value> = Vec::new();
    for _ in 0..args.repeat.max(1) {
        let mut cmd = if approach == "python" {
            let py = args.python.as_ref().expect("python given");
            let mut c = Command::new(py);
            c.arg(Path::new(env!("CARGO_MANIFEST_DIR")).join("python/export_fit.py"));
            c
        } else {
            let mut c = Command::new(std::env::current_exe().map_err(|e| e.to_string())?);
            c.args(["--measure", approach]);
            c
        };
        cmd.arg("--db")
            .arg(db)
            .args(["--methods", w.method.as_str()])
            .args(["--p", &w.p.to_string()])
            .args(["--segments", if w.segments { "on" } else { "off" }]);
        let out = cmd
            .output()
            .map_err(|e| format!("cannot start {approach}: {e}"))?;
        if !out.status.success() {
            return Err(format!(
                "{approach} {} failed: {}",
                w.label(),
                String::from_utf8_lossy(&out.stderr).trim()
            ));
        }
        let v: Value = serde_json::from_slice(&out.stdout)
            .map_err(|e| format!("{approach}: {e}: {}", String::from_utf8_lossy(&out.stdout)))?;
        runs.push(v);
    }
    runs.sort_by(|a, b| {
        a["seconds"]
            .as_f64()
            .partial_cmp(&b["seconds"].as_f64())
            .unwrap()
    });
    Ok(runs.swap_remove(runs.len() / 2))
}

#[derive(Serialize, Clone)]
struct Row {
    rows: u64,
    work: Work,
    label: String,
    passes: u64,
    /// The scan limit with one `SUM` per product.
    scan_s: f64,
    /// The scan limit with the fused moments aggregate (none for stratify).
    scan_fused_s: Option<f64>,
    /// The faster of the two: the floor the targets are measured against.
    floor_s: f64,
    upshot_s: f64,
    /// upshot rendering one `SUM` per product (without upshot's functions).
    upshot_plain_s: f64,
    /// upshot-plain ÷ the plain-sum scan: the ratio before the fused aggregate.
    plain_over_scan: f64,
    rust_s: f64,
    rust_export_s: f64,
    python_s: Option<f64>,
    upshot_over_scan: f64,
    rust_over_upshot: f64,
    python_over_upshot: Option<f64>,
    upshot_rss_mb: f64,
    upshot_db_mb: f64,
    scan_rss_mb: f64,
    rust_rss_mb: f64,
    python_rss_mb: Option<f64>,
    estimate: f64,
    std_error: f64,
    rust_rel_diff: f64,
    python_rel_diff: Option<f64>,
    plain_rel_diff: f64,
    heaviest_pass: String,
    heaviest_pass_s: f64,
}

/// The targets of the benchmark issue for upshot ÷ scan.
fn scan_target(m: Method) -> f64 {
    match m {
        Method::Stratify => 1.5,
        Method::Regress | Method::PartialOut => 2.5,
        _ => 8.0,
    }
}

/// The measurements asked for: method × width × segmentation (stratify has one width).
fn works(args: &Args) -> Vec<Work> {
    let methods: Vec<Method> = if args.methods.is_empty() {
        work::METHODS.to_vec()
    } else {
        args.methods
            .iter()
            .map(|m| {
                work::method(m).unwrap_or_else(|| {
                    fail(format!("unknown method `{m}`; one of stratify, regress, weight, doubly-robust, partial-out"))
                })
            })
            .collect()
    };
    for p in &args.p {
        if *p != 8 && *p != 32 {
            fail(format!(
                "--p {p}: the benchmark's designs have 8 or 32 columns"
            ));
        }
    }
    let mut segs = Vec::new();
    for s in &args.segments {
        match s.as_str() {
            "off" => segs.push(false),
            "on" => segs.push(true),
            o => fail(format!("--segments {o}: off or on")),
        }
    }
    let mut works: Vec<Work> = Vec::new();
    for &method in &methods {
        for &segments in &segs {
            if method == Method::Stratify {
                works.push(Work {
                    method,
                    p: 8,
                    segments,
                });
                continue;
            }
            for &p in &args.p {
                works.push(Work {
                    method,
                    p,
                    segments,
                });
            }
        }
    }
    works
}

fn run(args: &Args) {
    let works = works(args);
    if let Some(py) = &args.python {
        let ok = Command::new(py)
            .args(["-c", "import duckdb, pandas, statsmodels"])
            .output()
            .map(|o| o.status.success())
            .unwrap_or(false);
        if !ok {
            fail(format!("--python {}: needs the duckdb, pandas and statsmodels packages (tests/reference/requirements.txt)", py.display()));
        }
    }
    let data_dir = args.data.clone().unwrap_or_else(|| {
        let home = std::env::var_os("HOME")
            .map(PathBuf::from)
            .unwrap_or_else(std::env::temp_dir);
        home.join(".cache/upshot-bench")
    });
    let started = Instant::now();
    let mut rows_out: Vec<Row> = Vec::new();
    for &n in &args.rows {
        let db = data::ensure(&data_dir, n).unwrap_or_else(|e| fail(e));
        // Warm the operating system's page cache so that the first measurement is not the
        // only one reading from disk.
        let _ = child(args, "scan", &db, &works[0]);
        for w in &works {
            let res = (|| -> Result<Row, String> {
                let s = child(args, "scan", &db, w)?;
                let sf = if w.method == Method::Stratify {
                    None
                } else {
                    Some(child(args, "scan-fused", &db, w)?)
                };
                let u = child(args, "upshot", &db, w)?;
                let up = child(args, "upshot-plain", &db, w)?;
                let r = child(args, "rust", &db, w)?;
                let py_here = args.python.is_some()
                    && (args.python_rows.is_empty() || args.python_rows.contains(&n));
                let p = if py_here {
                    Some(child(args, "python", &db, w)?)
                } else {
                    None
                };
                let f = |v: &Value, k: &str| v[k].as_f64().unwrap_or(f64::NAN);
                let est = f(&u, "estimate");
                let rel = |v: &Value| (f(v, "estimate") - est).abs() / est.abs();
                let heaviest = u["pass_seconds"]
                    .as_array()
                    .and_then(|a| {
                        a.iter()
                            .max_by(|x, y| x[1].as_f64().partial_cmp(&y[1].as_f64()).unwrap())
                    })
                    .cloned()
                    .unwrap_or(Value::Null);
                let scan_fused_s = sf.as_ref().map(|v| f(v, "seconds"));
                let floor_s = scan_fused_s.map_or(f(&s, "seconds"), |x| x.min(f(&s, "seconds")));
                Ok(Row {
                    rows: n,
                    work: *w,
                    label: w.label(),
                    passes: u["passes"].as_u64().unwrap_or(0),
                    scan_s: f(&s, "seconds"),
                    scan_fused_s,
                    floor_s,
                    upshot_s: f(&u, "seconds"),
                    upshot_plain_s: f(&up, "seconds"),
                    plain_over_scan: f(&up, "seconds") / f(&s, "seconds"),
                    rust_s: f(&r, "seconds"),
                    rust_export_s: f(&r, "export_seconds"),
                    python_s: p.as_ref().map(|v| f(v, "seconds")),
                    upshot_over_scan: f(&u, "seconds") / floor_s,
                    rust_over_upshot: f(&r, "seconds") / f(&u, "seconds"),
                    python_over_upshot: p.as_ref().map(|v| f(v, "seconds") / f(&u, "seconds")),
                    upshot_rss_mb: f(&u, "peak_rss_kb") / 1024.0,
                    upshot_db_mb: f(&u, "db_memory_bytes") / 1048576.0,
                    scan_rss_mb: f(&s, "peak_rss_kb") / 1024.0,
                    rust_rss_mb: f(&r, "peak_rss_kb") / 1024.0,
                    python_rss_mb: p.as_ref().map(|v| f(v, "peak_rss_kb") / 1024.0),
                    estimate: est,
                    std_error: f(&u, "std_error"),
                    rust_rel_diff: rel(&r),
                    python_rel_diff: p.as_ref().map(rel),
                    plain_rel_diff: rel(&up),
                    heaviest_pass: heaviest[0].as_str().unwrap_or("").to_string(),
                    heaviest_pass_s: heaviest[1].as_f64().unwrap_or(f64::NAN),
                })
            })();
            match res {
                Ok(row) => {
                    print_row(&row);
                    rows_out.push(row);
                }
                Err(e) => fail(e),
            }
        }
    }
    let verdicts = verdicts(&rows_out, &args.rows);
    println!();
    for v in &verdicts {
        println!("{v}");
    }
    println!("total {:.1} s", started.elapsed().as_secs_f64());
    write_results(&args.out, &rows_out, &verdicts).unwrap_or_else(|e| fail(e));
    if let Some(tol) = args.agree {
        let bad: Vec<String> = rows_out
            .iter()
            .filter(|r| {
                let within = |d: f64| d.is_finite() && d <= tol;
                !within(r.rust_rel_diff)
                    || !within(r.plain_rel_diff)
                    || r.python_rel_diff.is_some_and(|d| !within(d))
            })
            .map(|r| format!("{} at {} rows", r.label, r.rows))
            .collect();
        if !bad.is_empty() {
            eprintln!(
                "upshot-bench: exported fits disagree with upshot beyond {tol:e}: {}",
                bad.join("; ")
            );
            std::process::exit(1);
        }
        println!("agreement: every exported fit, and upshot with plain sums, within {tol:e} of upshot's estimate");
    }
}

fn print_row(r: &Row) {
    static HEADER: std::sync::Once = std::sync::Once::new();
    HEADER.call_once(|| {
        println!(
            "{:>9} {:<26} {:>6} {:>8} {:>8} {:>8} {:>8} {:>8} {:>8} {:>9} {:>10} {:>8} {:>9} {:>8} {:>8} {:>9}  heaviest pass",
            "rows", "workload", "passes", "scan s", "scanF s", "upshot s", "plain s", "rust s", "py s", "up/floor", "plain/scan", "rust/up", "py/up", "RSS MB", "DB MB", "rel diff"
        );
    });
    let opt =
        |v: Option<f64>, p: usize| v.map(|x| format!("{x:.p$}")).unwrap_or_else(|| "-".into());
    let diff = r
        .python_rel_diff
        .map_or(r.rust_rel_diff, |p| p.max(r.rust_rel_diff))
        .max(r.plain_rel_diff);
    println!(
        "{:>9} {:<26} {:>6} {:>8.3} {:>8} {:>8.3} {:>8.3} {:>8.3} {:>8} {:>9.2} {:>10.2} {:>8.1} {:>9} {:>8.0} {:>8.0} {:>9.1e}  {} {:.3} s",
        r.rows,
        r.label,
        r.passes,
        r.scan_s,
        opt(r.scan_fused_s, 3),
        r.upshot_s,
        r.upshot_plain_s,
        r.rust_s,
        opt(r.python_s, 2),
        r.upshot_over_scan,
        r.plain_over_scan,
        r.rust_over_upshot,
        opt(r.python_over_upshot, 1),
        r.upshot_rss_mb,
        r.upshot_db_mb,
        diff,
        r.heaviest_pass,
        r.heaviest_pass_s
    );
}

/// Each target of the benchmark issue, met or not, with the figure that decides it.
fn verdicts(rows: &[Row], sizes: &[u64]) -> Vec<String> {
    let mut out = Vec::new();
    let mark = |ok: bool| if ok { "meets " } else { "MISSES" };
    for r in rows {
        let t = scan_target(r.work.method);
        out.push(format!(
            "{} upshot ≤ {t}× scan limit: {} at {} rows: {:.2}× (one SUM per product: {:.2}× its scan)",
            mark(r.upshot_over_scan <= t),
            r.label,
            r.rows,
            r.upshot_over_scan,
            r.plain_over_scan
        ));
        out.push(format!(
            "{} faster than export-and-fit in Rust: {} at {} rows: {:.1}×",
            mark(r.rust_over_upshot > 1.0),
            r.label,
            r.rows,
            r.rust_over_upshot
        ));
        if let Some(py) = r.python_over_upshot {
            if r.rows >= 10_000_000 {
                out.push(format!(
                    "{} ≥ 20× faster than export-and-fit in Python: {} at {} rows: {:.1}×",
                    mark(py >= 20.0),
                    r.label,
                    r.rows,
                    py
                ));
            }
        }
    }
    let (lo, hi) = (
        sizes.iter().min().copied().unwrap_or(0),
        sizes.iter().max().copied().unwrap_or(0),
    );
    if hi > lo {
        for big in rows.iter().filter(|r| r.rows == hi) {
            if let Some(small) = rows.iter().find(|r| r.rows == lo && r.work == big.work) {
                let own = |r: &Row| r.upshot_rss_mb - r.upshot_db_mb;
                // The target excludes what the database caches (its buffer pool keeps table
                // blocks it has read, which grows with the table); both figures are printed.
                out.push(format!(
                    "{} peak RSS flat in rows (≤ 1.2×, without DuckDB's buffers): {}: {:.0} MB at {hi} rows ÷ {:.0} MB at {lo} = {:.2}× (whole process: {:.0} ÷ {:.0} MB = {:.2}×)",
                    mark(own(big) / own(small) <= 1.2),
                    big.label,
                    own(big),
                    own(small),
                    own(big) / own(small),
                    big.upshot_rss_mb,
                    small.upshot_rss_mb,
                    big.upshot_rss_mb / small.upshot_rss_mb
                ));
            }
        }
    }
    out
}

fn write_results(dir: &Path, rows: &[Row], verdicts: &[String]) -> Result<(), String> {
    std::fs::create_dir_all(dir).map_err(|e| format!("{}: {e}", dir.display()))?;
    let doc = json!({
        "machine": machine(),
        "rows": rows,
        "verdicts": verdicts,
    });
    let j = dir.join("bench.json");
    std::fs::write(
        &j,
        serde_json::to_string_pretty(&doc).expect("serialisable"),
    )
    .map_err(|e| format!("{}: {e}", j.display()))?;
    let mut csv = String::from("rows,method,p,segments,passes,scan_s,scan_fused_s,floor_s,upshot_s,upshot_plain_s,plain_over_scan,rust_s,rust_export_s,python_s,upshot_over_scan,rust_over_upshot,python_over_upshot,upshot_rss_mb,upshot_db_mb,scan_rss_mb,rust_rss_mb,python_rss_mb,estimate,std_error,rust_rel_diff,python_rel_diff,plain_rel_diff,heaviest_pass,heaviest_pass_s\n");
    let o = |v: Option<f64>| v.map(|x| x.to_string()).unwrap_or_default();
    for r in rows {
        csv.push_str(&format!(
            "{},{},{},{},{},{},{},{},{},{},{},{},{},{},{},{},{},{},{},{},{},{},{},{},{},{},{},{},{}\n",
            r.rows,
            r.work.method.as_str(),
            if r.work.method == Method::Stratify {
                String::new()
            } else {
                r.work.p.to_string()
            },
            if r.work.segments { "on" } else { "off" },
            r.passes,
            r.scan_s,
            o(r.scan_fused_s),
            r.floor_s,
            r.upshot_s,
            r.upshot_plain_s,
            r.plain_over_scan,
            r.rust_s,
            r.rust_export_s,
            o(r.python_s),
            r.upshot_over_scan,
            r.rust_over_upshot,
            o(r.python_over_upshot),
            r.upshot_rss_mb,
            r.upshot_db_mb,
            r.scan_rss_mb,
            r.rust_rss_mb,
            o(r.python_rss_mb),
            r.estimate,
            r.std_error,
            r.rust_rel_diff,
            o(r.python_rel_diff),
            r.plain_rel_diff,
            r.heaviest_pass,
            r.heaviest_pass_s
        ));
    }
    let c = dir.join("bench.csv");
    std::fs::write(&c, csv).map_err(|e| format!("{}: {e}", c.display()))?;
    println!("results: {} and {}", j.display(), c.display());
    Ok(())
}

fn machine() -> Value {
    let cpu = std::fs::read_to_string("/proc/cpuinfo")
        .ok()
        .and_then(|s| {
            s.lines()
                .find(|l| l.starts_with("model name"))
                .and_then(|l| l.split(':').nth(1))
                .map(|s| s.trim().to_string())
        })
        .unwrap_or_default();
    let cores = std::thread::available_parallelism()
        .map(|n| n.get())
        .unwrap_or(0);
    let mem_kb: f64 = std::fs::read_to_string("/proc/meminfo")
        .ok()
        .and_then(|s| {
            s.lines()
                .next()
                .and_then(|l| l.split_whitespace().nth(1).and_then(|v| v.parse().ok()))
        })
        .unwrap_or(0.0);
    json!({"cpu": cpu, "cores": cores, "memory_gib": mem_kb / 1048576.0})
}
