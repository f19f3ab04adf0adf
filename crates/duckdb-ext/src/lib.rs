//! upshot's functions inside DuckDB, and databases opened with them registered.
//!
//! Provides [`Database`] (a DuckDB database upshot opened, with a `duckdb::Connection` on it)
//! and the aggregate `upshot_moments(w, v_1, ..., v_k)` ([`MOMENTS`]): per group, the upper
//! triangle, row by row, of `Σ w z zᵀ` for `z = (1, v_1, ..., v_k)`, as one `LIST(DOUBLE)` —
//! the count (or weight total), first and second moments of a design in one aggregate; and
//! the scalar function `upshot_linear([c_0, ..., c_k], x_1, ..., x_k)` ([`LINEAR`]), a linear
//! predictor in one call.
//!
//! Key design decision: one fused aggregate instead of `(k + 1)(k + 2) / 2` separate
//! `SUM(a * b)` expressions. DuckDB evaluates each of those as its own projection and its own
//! aggregate state; at 33 design columns that is ~600 of each per row and dominates the pass.
//! The aggregate gathers each chunk's rows by group and forms the products as dot products over
//! tiles of rows; each tile's sums are added to the group's state (on NIST Longley through
//! DuckDB this gives 11.9–13.3 correct digits, against 12.1–13.3 with DuckDB's own SUMs). The same
//! reasoning gives `upshot_linear`: one call per inlined model instead of two vector operations per
//! term.
//!
//! This is the only crate with `unsafe`: the edge to DuckDB's C API (opening a database to
//! get its raw handle, registering the functions, their callbacks). It builds no SQL of passes and
//! knows nothing of diagrams or estimators.
#![deny(missing_docs)]

mod linear;
mod moments;

use duckdb::ffi;
use std::ffi::{CStr, CString};
use std::path::Path;
use std::ptr;

pub use linear::LINEAR;
pub use moments::{MAX_TERMS, MOMENTS};

/// Opening a database or registering upshot's functions failed.
#[derive(Debug, thiserror::Error)]
pub enum ExtError {
    /// DuckDB refused to open the database.
    #[error("{0}")]
    Open(String),
    /// The path cannot be passed to DuckDB (an interior NUL byte).
    #[error("the path contains a NUL byte")]
    Path,
    /// Registering a function failed.
    #[error("registering `{0}` in DuckDB failed")]
    Register(&'static str),
    /// The connection on the opened database failed.
    #[error(transparent)]
    Connection(#[from] duckdb::Error),
}

/// A DuckDB database opened by upshot, with upshot's functions registered and one connection;
/// or, in the loadable extension, a connection of upshot's to its host's database
/// ([`Database::attach`]).
///
/// Invariant: the connection is dropped before the database is closed; a host's database is
/// never closed by us.
pub struct Database {
    conn: Option<duckdb::Connection>,
    raw: ffi::duckdb_database,
    owned: bool,
}

/// Registers upshot's functions in `raw` through a short-lived connection of its own.
///
/// # Safety
/// `raw` must be an open database.
unsafe fn register(raw: ffi::duckdb_database) -> Result<(), ExtError> {
    // SAFETY: per the contract; the connection is closed on every path.
    unsafe {
        let mut con: ffi::duckdb_connection = ptr::null_mut();
        if ffi::duckdb_connect(raw, &mut con) != ffi::DuckDBSuccess {
            return Err(ExtError::Register(MOMENTS));
        }
        let done = moments::register(con).and_then(|()| linear::register(con));
        ffi::duckdb_disconnect(&mut con);
        done
    }
}

// SAFETY: a DuckDB database handle and a connection may be used (and the handle closed) from
// any thread, one thread at a time; the handle is only closed in `Drop`, after the connection.
unsafe impl Send for Database {}

impl Database {
    /// Opens `path` (a database file, read-only unless `write`), or a fresh in-memory database
    /// when `path` is `None`, and registers upshot's functions.
    pub fn open(path: Option<&Path>, write: bool) -> Result<Database, ExtError> {
        let c_path = match path {
            Some(p) => {
                Some(CString::new(p.as_os_str().as_encoded_bytes()).map_err(|_| ExtError::Path)?)
            }
            None => None,
        };
        let mut raw: ffi::duckdb_database = ptr::null_mut();
        // SAFETY: plain C API calls with valid pointers; every object created is destroyed on
        // each path out of the block.
        unsafe {
            let mut config: ffi::duckdb_config = ptr::null_mut();
            if ffi::duckdb_create_config(&mut config) != ffi::DuckDBSuccess {
                return Err(ExtError::Open(
                    "cannot create a DuckDB configuration".into(),
                ));
            }
            if path.is_some() && !write {
                let (k, v) = (c"access_mode", c"READ_ONLY");
                if ffi::duckdb_set_config(config, k.as_ptr(), v.as_ptr()) != ffi::DuckDBSuccess {
                    ffi::duckdb_destroy_config(&mut config);
                    return Err(ExtError::Open("cannot set read-only access".into()));
                }
            }
            let mut error: *mut std::os::raw::c_char = ptr::null_mut();
            let p = c_path.as_ref().map_or(ptr::null(), |c| c.as_ptr());
            let state = ffi::duckdb_open_ext(p, &mut raw, config, &mut error);
            ffi::duckdb_destroy_config(&mut config);
            if state != ffi::DuckDBSuccess {
                let message = if error.is_null() {
                    "DuckDB could not open it".to_string()
                } else {
                    let m = CStr::from_ptr(error).to_string_lossy().into_owned();
                    ffi::duckdb_free(error.cast());
                    m
                };
                ffi::duckdb_close(&mut raw);
                return Err(ExtError::Open(message));
            }
        }
        let mut db = Database {
            conn: None,
            raw,
            owned: true,
        };
        // SAFETY: `raw` is an open database.
        unsafe { register(db.raw)? };
        // SAFETY: `raw` stays open until `Drop`, which drops this connection first.
        db.conn = Some(unsafe { duckdb::Connection::open_from_raw(db.raw) }?);
        Ok(db)
    }

    /// A connection to the database of the DuckDB process that loaded upshot as an extension
    /// (made by [`extension_init`]; upshot's functions are registered there). It is a
    /// connection of its own: it sees committed tables, not the calling connection's TEMP
    /// tables or uncommitted rows. The database is the host's and is never closed by us.
    pub fn attach(conn: duckdb::Connection) -> Database {
        Database {
            conn: Some(conn),
            raw: ptr::null_mut(),
            owned: false,
        }
    }

    /// The connection.
    pub fn connection(&self) -> &duckdb::Connection {
        self.conn.as_ref().expect("a connection until drop")
    }
}

/// The body of a loadable extension's entry point (`<name>_init_c_api`): initialises the C
/// API function table (DuckDB v1.2.0's C API or later), registers upshot's functions in the
/// host's database, and hands `setup` two connections to it: one to register table functions
/// on, and one to keep for running passes. The database handle DuckDB passes is valid only
/// during the load, so every connection upshot needs later is made here. A failure is
/// reported to DuckDB (the `LOAD` fails with the message) and returns false.
///
/// # Safety
/// `info` and `access` must be what DuckDB passed to the entry point.
#[cfg(feature = "loadable")]
pub unsafe fn extension_init(
    info: ffi::duckdb_extension_info,
    access: *const ffi::duckdb_extension_access,
    setup: impl FnOnce(&duckdb::Connection, duckdb::Connection) -> Result<(), String>,
) -> bool {
    // SAFETY: per the contract, `access` is DuckDB's access table for this load, and the
    // database it gives is open for the duration of this call.
    let result = unsafe {
        (|| -> Result<bool, String> {
            if !ffi::duckdb_rs_extension_api_init(info, access, "v1.2.0")
                .map_err(|e| e.to_string())?
            {
                return Ok(false);
            }
            let get_database = (*access)
                .get_database
                .ok_or("DuckDB gave the extension no database")?;
            let db = get_database(info);
            if db.is_null() {
                return Ok(false);
            }
            register(*db).map_err(|e| e.to_string())?;
            let con = duckdb::Connection::open_from_raw(*db).map_err(|e| e.to_string())?;
            let kept = duckdb::Connection::open_from_raw(*db).map_err(|e| e.to_string())?;
            setup(&con, kept)?;
            Ok(true)
        })()
    };
    match result {
        Ok(loaded) => loaded,
        Err(message) => {
            // SAFETY: as above; the message outlives the call.
            unsafe {
                if let Some(set_error) = (*access).set_error {
                    let c = CString::new(message.replace('\0', " ")).unwrap_or_default();
                    set_error(info, c.as_ptr());
                }
            }
            false
        }
    }
}

impl Drop for Database {
    fn drop(&mut self) {
        self.conn = None;
        if self.owned {
            // SAFETY: the only connection of ours on it is gone; the handle was opened by us.
            unsafe { ffi::duckdb_close(&mut self.raw) };
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The aggregate against plain SUMs of the same products, grouped and ungrouped, with
    /// NULL rows (skipped) and more groups per chunk than the by-group path takes.
    #[test]
    fn moments_equal_plain_sums() {
        let db = Database::open(None, true).unwrap();
        let c = db.connection();
        c.execute_batch(
            "CREATE TABLE t AS SELECT i, i % 7 AS g, i % 97 AS h, \
             sin(i) AS a, cos(i * 0.3) AS b, (i % 13) * 0.25 AS c, 0.5 + (i % 3) AS w \
             FROM range(10000) r(i); \
             INSERT INTO t VALUES (10000, 1, 1, NULL, 1.0, 1.0, 1.0)",
        )
        .unwrap();
        for key in ["1", "g", "h"] {
            let fused: Vec<(i64, Vec<f64>)> = {
                let q = format!(
                    "SELECT {key} AS k, upshot_moments(w, a, b, c) FROM t GROUP BY k ORDER BY k"
                );
                let mut s = c.prepare(&q).unwrap();
                let rows = s
                    .query_map([], |r| {
                        let k: i64 = r.get(0)?;
                        let v: duckdb::types::Value = r.get(1)?;
                        Ok((k, v))
                    })
                    .unwrap();
                rows.map(|r| {
                    let (k, v) = r.unwrap();
                    let duckdb::types::Value::List(items) = v else {
                        panic!("a list")
                    };
                    let xs = items
                        .into_iter()
                        .map(|x| match x {
                            duckdb::types::Value::Double(d) => d,
                            other => panic!("{other:?}"),
                        })
                        .collect();
                    (k, xs)
                })
                .collect()
            };
            let z = ["1.0", "a", "b", "c"];
            let mut sums = Vec::new();
            for i in 0..4 {
                for j in i..4 {
                    sums.push(format!("SUM(w * {} * {})", z[i], z[j]));
                }
            }
            let q = format!(
                "SELECT {key} AS k, {} FROM t WHERE a IS NOT NULL GROUP BY k ORDER BY k",
                sums.join(", ")
            );
            let mut s = c.prepare(&q).unwrap();
            let plain: Vec<Vec<f64>> = s
                .query_map([], |r| (1..=10).map(|i| r.get::<_, f64>(i)).collect())
                .unwrap()
                .map(|r| r.unwrap())
                .collect();
            assert_eq!(fused.len(), plain.len(), "{key}");
            for ((_, f), p) in fused.iter().zip(&plain) {
                assert_eq!(f.len(), 10);
                for (x, y) in f.iter().zip(p) {
                    assert!(
                        (x - y).abs() <= 1e-11 * y.abs().max(1.0),
                        "{key}: {x} vs {y}"
                    );
                }
            }
        }
        // The linear predictor gives the same bits as the arithmetic it replaces, and NULL
        // where a value is NULL.
        let mut s = c
            .prepare(
                "SELECT upshot_linear([0.25, -1.5, 0.75, 2.0], a, b, c) = 0.25 + -1.5 * a + 0.75 * b + 2.0 * c, \
                 upshot_linear([0.25, -1.5, 0.75, 2.0], a, b, c) IS NULL, a IS NULL FROM t ORDER BY i",
            )
            .unwrap();
        let rows: Vec<(Option<bool>, bool, bool)> = s
            .query_map([], |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?)))
            .unwrap()
            .map(|r| r.unwrap())
            .collect();
        assert_eq!(rows.len(), 10_001);
        for (same, null, a_null) in rows {
            assert_eq!(null, a_null);
            if !a_null {
                assert_eq!(same, Some(true));
            }
        }
    }
}
