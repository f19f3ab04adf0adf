//! The `upshot_linear` scalar function: `c_0 + c_1 x_1 + ... + c_k x_k` in one call, the
//! coefficients passed as one list.

use crate::ExtError;
use duckdb::ffi;

/// The function's name in SQL.
pub const LINEAR: &str = "upshot_linear";

/// `upshot_linear([c_0, c_1, ..., c_k], x_1, ..., x_k)`: the coefficients as one list (a
/// constant list costs DuckDB almost nothing to hand over per chunk, where each constant
/// argument of its own would be copied out to a full vector), then the values (all DOUBLE).
/// Summed left to right, as `c_0 + c_1 * x_1 + ...` is in SQL; NULL where a value or the list
/// is NULL. One pass over the chunk per term instead of two vector operations (and their
/// temporaries) per term in DuckDB's expression executor.
unsafe extern "C" fn linear(
    info: ffi::duckdb_function_info,
    input: ffi::duckdb_data_chunk,
    output: ffi::duckdb_vector,
) {
    // SAFETY: DuckDB passes a flattened chunk (a LIST(DOUBLE) column, then DOUBLE columns) and
    // a DOUBLE output vector of the chunk's size.
    unsafe {
        let n = ffi::duckdb_data_chunk_get_size(input) as usize;
        if n == 0 {
            return;
        }
        let ncol = ffi::duckdb_data_chunk_get_column_count(input) as usize;
        let out =
            std::slice::from_raw_parts_mut(ffi::duckdb_vector_get_data(output) as *mut f64, n);
        let list = ffi::duckdb_data_chunk_get_vector(input, 0);
        let entries = std::slice::from_raw_parts(
            ffi::duckdb_vector_get_data(list) as *const ffi::duckdb_list_entry,
            n,
        );
        let child = ffi::duckdb_list_vector_get_child(list);
        let coef = ffi::duckdb_vector_get_data(child) as *const f64;
        let mut masks: Vec<*const u64> = Vec::new();
        let mut xs: Vec<&[f64]> = Vec::with_capacity(ncol - 1);
        for c in 0..ncol {
            let v = ffi::duckdb_data_chunk_get_vector(input, c as ffi::idx_t);
            let m = ffi::duckdb_vector_get_validity(v) as *const u64;
            if !m.is_null() {
                masks.push(m);
            }
            if c > 0 {
                xs.push(std::slice::from_raw_parts(
                    ffi::duckdb_vector_get_data(v) as *const f64,
                    n,
                ));
            }
        }
        let valid = |r: usize| masks.iter().all(|m| (*m.add(r / 64) >> (r % 64)) & 1 == 1);
        let first = entries[0];
        let same = entries
            .iter()
            .all(|e| e.offset == first.offset && e.length == first.length);
        let need = xs.len() + 1;
        if entries
            .iter()
            .enumerate()
            .any(|(r, e)| e.length as usize != need && valid(r))
        {
            ffi::duckdb_scalar_function_set_error(
                info,
                c"upshot_linear: the coefficient list needs one entry more than there are values"
                    .as_ptr(),
            );
            return;
        }
        if same && valid_len(first, need) {
            // One model for the whole chunk: term by term, each a pass over the chunk.
            let c = std::slice::from_raw_parts(coef.add(first.offset as usize), need);
            out.fill(c[0]);
            for (ci, x) in c[1..].iter().zip(&xs) {
                for (o, xv) in out.iter_mut().zip(*x) {
                    *o += ci * xv;
                }
            }
        } else {
            for (r, (o, e)) in out.iter_mut().zip(entries).enumerate() {
                if !valid_len(*e, need) {
                    continue;
                }
                let c = std::slice::from_raw_parts(coef.add(e.offset as usize), need);
                let mut acc = c[0];
                for (ci, x) in c[1..].iter().zip(&xs) {
                    acc += ci * x[r];
                }
                *o = acc;
            }
        }
        if !masks.is_empty() {
            ffi::duckdb_vector_ensure_validity_writable(output);
            let mask = ffi::duckdb_vector_get_validity(output);
            for r in 0..n {
                if !valid(r) {
                    ffi::duckdb_validity_set_row_invalid(mask, r as ffi::idx_t);
                }
            }
        }
    }
}

fn valid_len(e: ffi::duckdb_list_entry, need: usize) -> bool {
    e.length as usize == need
}

/// Registers the function through connection `con`.
///
/// SAFETY: `con` must be an open connection.
pub(crate) unsafe fn register(con: ffi::duckdb_connection) -> Result<(), ExtError> {
    unsafe {
        let mut f = ffi::duckdb_create_scalar_function();
        ffi::duckdb_scalar_function_set_name(f, c"upshot_linear".as_ptr());
        let mut double = ffi::duckdb_create_logical_type(ffi::DUCKDB_TYPE_DUCKDB_TYPE_DOUBLE);
        let mut list = ffi::duckdb_create_list_type(double);
        ffi::duckdb_scalar_function_add_parameter(f, list);
        ffi::duckdb_scalar_function_set_varargs(f, double);
        ffi::duckdb_scalar_function_set_return_type(f, double);
        ffi::duckdb_scalar_function_set_function(f, Some(linear));
        let ok = ffi::duckdb_register_scalar_function(con, f) == ffi::DuckDBSuccess;
        ffi::duckdb_destroy_scalar_function(&mut f);
        ffi::duckdb_destroy_logical_type(&mut list);
        ffi::duckdb_destroy_logical_type(&mut double);
        if ok {
            Ok(())
        } else {
            Err(ExtError::Register(LINEAR))
        }
    }
}
