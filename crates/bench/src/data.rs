//! The benchmark's data: the demo generator's rows at scale, in a file-backed DuckDB database,
//! with 24 extra numeric covariates and a ten-level segment column.
//!
//! The extra covariates `x01`..`x24` are deterministic arithmetic hashes of the customer id,
//! uniform on [-0.5, 0.5): they affect neither voucher nor spend, so every adjustment set that
//! includes them stays valid, and they widen the design to p = 32 the way a real warehouse table
//! with many recorded attributes would. `region` (customer id modulo 10) is the segment column.

use duckdb::Connection;
use std::path::{Path, PathBuf};

/// Bumped whenever the table's definition changes, so stale files are rebuilt.
const DATA_VERSION: i64 = 1;

/// Number of extra covariates.
pub const EXTRA: usize = 24;

/// The name of extra covariate `k` (0-based).
pub fn extra(k: usize) -> String {
    format!("x{:02}", k + 1)
}

/// The benchmark database for `rows` rows in `dir`, built if missing or stale.
pub fn ensure(dir: &Path, rows: u64) -> Result<PathBuf, String> {
    std::fs::create_dir_all(dir).map_err(|e| format!("{}: {e}", dir.display()))?;
    let path = dir.join(format!("bench-{rows}.duckdb"));
    if path.is_file() && current(&path, rows) {
        return Ok(path);
    }
    let started = std::time::Instant::now();
    eprintln!("building {} ({rows} rows)...", path.display());
    let csv = dir.join(format!("bench-{rows}.csv"));
    let tmp = dir.join(format!("bench-{rows}.duckdb.tmp"));
    let _ = std::fs::remove_file(&tmp);
    let cfg = upshot_demo::Config {
        rows,
        seed: 2026,
        variant: upshot_demo::Variant::Observed,
    };
    let f = std::fs::File::create(&csv).map_err(|e| format!("{}: {e}", csv.display()))?;
    upshot_demo::write_csv(&cfg, f).map_err(|e| format!("{}: {e}", csv.display()))?;
    let extras: Vec<String> = (0..EXTRA)
        .map(|k| {
            // Distinct odd multipliers and offsets; the modulus is the prime 1,000,003.
            let a = 7_919 * (k as i64 + 1) + 104_729;
            let b = 15_485_863 + 31 * k as i64;
            format!(
                "CAST((customer_id * {a} + {b}) % 1000003 AS DOUBLE) / 1000003.0 - 0.5 AS {}",
                extra(k)
            )
        })
        .collect();
    let conn = Connection::open(&tmp).map_err(|e| format!("{}: {e}", tmp.display()))?;
    conn.execute_batch(&format!(
        "CREATE TABLE customers AS SELECT *, customer_id % 10 AS region, {} FROM read_csv_auto('{}');
         CREATE TABLE bench_meta AS SELECT {DATA_VERSION} AS version, {rows} AS rows;
         CHECKPOINT;",
        extras.join(", "),
        csv.display()
    ))
    .map_err(|e| format!("building {}: {e}", tmp.display()))?;
    drop(conn);
    let _ = std::fs::remove_file(&csv);
    std::fs::rename(&tmp, &path).map_err(|e| format!("{}: {e}", path.display()))?;
    eprintln!(
        "built {} in {:.1} s",
        path.display(),
        started.elapsed().as_secs_f64()
    );
    Ok(path)
}

fn current(path: &Path, rows: u64) -> bool {
    let Ok(conn) = Connection::open_with_flags(
        path,
        duckdb::Config::default()
            .access_mode(duckdb::AccessMode::ReadOnly)
            .expect("read-only config"),
    ) else {
        return false;
    };
    conn.query_row("SELECT version, rows FROM bench_meta", [], |r| {
        Ok((r.get::<_, i64>(0)?, r.get::<_, i64>(1)?))
    })
    .map(|(v, n)| v == DATA_VERSION && n == rows as i64)
    .unwrap_or(false)
}
