//! upshot as a DuckDB loadable extension: `upshot_identify`, `upshot_plan`, `upshot_estimate`
//! and `upshot_study` as table functions (docs/sql-functions.md), and upshot's own
//! `upshot_moments` and `upshot_linear` registered for the plans they run — so an analyst gets
//! the CLI's answers from a SQL prompt.
//!
//! This crate only binds SQL arguments into an [`upshot_core::Request`] and turns the core's
//! typed results into rows; it must not decide anything the CLI would decide differently.
//! Estimates run their passes on a second connection to the calling database (DuckDB's C API
//! runs no query on the caller's own connection from inside a table function): they see
//! committed tables, not the caller's TEMP tables or uncommitted rows.

mod functions;
mod rows;

use duckdb::ffi::{duckdb_extension_access, duckdb_extension_info};

/// The entry point DuckDB calls on `LOAD` (named after the file, `upshot.duckdb_extension`).
///
/// # Safety
/// Called by DuckDB only, with its own `info` and `access`.
#[no_mangle]
pub unsafe extern "C" fn upshot_init_c_api(
    info: duckdb_extension_info,
    access: *const duckdb_extension_access,
) -> bool {
    // SAFETY: the arguments are DuckDB's, passed on unchanged.
    unsafe {
        upshot_duckdb_ext::extension_init(info, access, |con, kept| {
            functions::register(con, kept).map_err(|e| e.to_string())
        })
    }
}
