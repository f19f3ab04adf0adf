//! The `upshot_moments` aggregate: `Σ w z zᵀ` (upper triangle) for `z = (1, v_1, ..., v_k)`.

use crate::ExtError;
use duckdb::ffi;
use std::cell::RefCell;
use std::ffi::c_void;
use std::os::raw::c_char;

/// The aggregate's name in SQL.
pub const MOMENTS: &str = "upshot_moments";

/// The most design columns `v` a call may pass (one overload per count is registered).
pub const MAX_TERMS: usize = 160;

/// Rows per tile of the block products (a tile of 40 columns fits the L2 cache).
const TILE: usize = 256;

/// Distinct groups a chunk may touch before it is summed row by row instead of by group.
const MAX_GROUPS: usize = 64;

/// The length of the result list for `width` = 1 + the number of design columns.
fn entries(width: usize) -> usize {
    width * (width + 1) / 2
}

/// The width `1 + k` of this overload, kept as the function's extra info.
///
/// SAFETY: `info` comes from DuckDB for a function registered by [`register`].
unsafe fn width(info: ffi::duckdb_function_info) -> usize {
    unsafe { *(ffi::duckdb_aggregate_function_get_extra_info(info) as *const usize) }
}

unsafe extern "C" fn state_size(info: ffi::duckdb_function_info) -> ffi::idx_t {
    let w = unsafe { width(info) };
    (entries(w) * std::mem::size_of::<f64>()) as ffi::idx_t
}

unsafe extern "C" fn state_init(
    info: ffi::duckdb_function_info,
    state: ffi::duckdb_aggregate_state,
) {
    let w = unsafe { width(info) };
    // SAFETY: DuckDB allocated `state_size` bytes (8-aligned) for the state.
    unsafe { std::ptr::write_bytes(state as *mut f64, 0, entries(w)) };
}

thread_local! {
    static SCRATCH: RefCell<Scratch> = RefCell::new(Scratch::default());
}

/// Buffers reused across chunks on a thread.
#[derive(Default)]
struct Scratch {
    /// Per touched group: its state and its rows in this chunk.
    groups: Vec<(ffi::duckdb_aggregate_state, Vec<u32>)>,
    /// A group's rows gathered column by column.
    gathered: Vec<f64>,
    /// `w · v_i` over a tile.
    weighted: Vec<f64>,
    /// Partial sums of the tile.
    partial: Vec<f64>,
}

unsafe extern "C" fn update(
    info: ffi::duckdb_function_info,
    input: ffi::duckdb_data_chunk,
    states: *mut ffi::duckdb_aggregate_state,
) {
    // SAFETY: DuckDB passes a flattened chunk of `width` DOUBLE columns and one state pointer
    // per row, each to `state_size` bytes initialised by `state_init`.
    unsafe {
        let w = width(info);
        let n = ffi::duckdb_data_chunk_get_size(input) as usize;
        if n == 0 {
            return;
        }
        let mut cols: Vec<&[f64]> = Vec::with_capacity(w);
        let mut masks: Vec<*const u64> = Vec::with_capacity(w);
        for c in 0..w {
            let v = ffi::duckdb_data_chunk_get_vector(input, c as ffi::idx_t);
            cols.push(std::slice::from_raw_parts(
                ffi::duckdb_vector_get_data(v) as *const f64,
                n,
            ));
            let m = ffi::duckdb_vector_get_validity(v) as *const u64;
            if !m.is_null() {
                masks.push(m);
            }
        }
        let valid = |r: usize| masks.iter().all(|m| (*m.add(r / 64) >> (r % 64)) & 1 == 1);
        let states = std::slice::from_raw_parts(states, n);
        SCRATCH.with(|s| {
            let s = &mut *s.borrow_mut();
            // Rows by state, in first-seen order.
            for g in &mut s.groups {
                g.1.clear();
            }
            let mut used = 0usize;
            let mut last = usize::MAX;
            let mut too_many = false;
            for (r, st) in states.iter().enumerate() {
                if !masks.is_empty() && !valid(r) {
                    continue;
                }
                let g = if last < used && s.groups[last].0 == *st {
                    last
                } else if let Some(g) = s.groups[..used].iter().position(|g| g.0 == *st) {
                    g
                } else {
                    if used == MAX_GROUPS {
                        too_many = true;
                        break;
                    }
                    if used == s.groups.len() {
                        s.groups.push((*st, Vec::new()));
                    } else {
                        s.groups[used].0 = *st;
                    }
                    used += 1;
                    used - 1
                };
                s.groups[g].1.push(r as u32);
                last = g;
            }
            if too_many {
                for (r, st) in states.iter().enumerate() {
                    if masks.is_empty() || valid(r) {
                        let acc = std::slice::from_raw_parts_mut(*st as *mut f64, entries(w));
                        add_row(acc, &cols, r);
                    }
                }
                return;
            }
            for g in 0..used {
                let (st, rows) = (s.groups[g].0, std::mem::take(&mut s.groups[g].1));
                let acc = std::slice::from_raw_parts_mut(st as *mut f64, entries(w));
                if rows.len() == n {
                    add_block(acc, &cols, &mut s.weighted, &mut s.partial);
                } else {
                    let len = rows.len();
                    s.gathered.clear();
                    s.gathered.resize(w * len, 0.0);
                    for (c, col) in cols.iter().enumerate() {
                        let dst = &mut s.gathered[c * len..(c + 1) * len];
                        for (d, r) in dst.iter_mut().zip(&rows) {
                            *d = col[*r as usize];
                        }
                    }
                    let gathered = std::mem::take(&mut s.gathered);
                    let views: Vec<&[f64]> = gathered.chunks_exact(len).collect();
                    add_block(acc, &views, &mut s.weighted, &mut s.partial);
                    s.gathered = gathered;
                }
                s.groups[g].1 = rows;
            }
        });
    }
}

/// Adds one row's products to `acc`.
fn add_row(acc: &mut [f64], cols: &[&[f64]], r: usize) {
    let w = cols.len();
    let weight = cols[0][r];
    let z = |i: usize| if i == 0 { 1.0 } else { cols[i][r] };
    let mut idx = 0;
    for i in 0..w {
        let wz = weight * z(i);
        for j in i..w {
            acc[idx] += wz * z(j);
            idx += 1;
        }
    }
}

/// Adds the products of every row of `cols` (column 0 the weight, then the design columns, all
/// the same length) to `acc`, tile by tile: each tile's sums are formed apart, then added.
fn add_block(acc: &mut [f64], cols: &[&[f64]], weighted: &mut Vec<f64>, partial: &mut Vec<f64>) {
    let w = cols.len();
    let n = cols[0].len();
    partial.clear();
    partial.resize(entries(w), 0.0);
    let mut start = 0;
    while start < n {
        let end = (start + TILE).min(n);
        let weight = &cols[0][start..end];
        let mut idx = 0;
        for i in 0..w {
            // w · z_i over the tile (z_0 = 1).
            weighted.clear();
            if i == 0 {
                weighted.extend_from_slice(weight);
            } else {
                weighted.extend(weight.iter().zip(&cols[i][start..end]).map(|(a, b)| a * b));
            }
            for (j, col) in cols.iter().enumerate().skip(i) {
                partial[idx] += if j == 0 {
                    weighted.iter().sum::<f64>()
                } else {
                    dot(weighted, &col[start..end])
                };
                idx += 1;
            }
        }
        for (a, p) in acc.iter_mut().zip(partial.iter_mut()) {
            *a += *p;
            *p = 0.0;
        }
        start = end;
    }
}

/// A dot product with eight independent accumulators (vectorises without reassociation).
fn dot(a: &[f64], b: &[f64]) -> f64 {
    let n = a.len().min(b.len());
    let (a, b) = (&a[..n], &b[..n]);
    let mut s = [0.0f64; 8];
    let ca = a.chunks_exact(8);
    let cb = b.chunks_exact(8);
    let tail: f64 = ca
        .remainder()
        .iter()
        .zip(cb.remainder())
        .map(|(x, y)| x * y)
        .sum();
    for (x, y) in ca.zip(cb) {
        for l in 0..8 {
            s[l] += x[l] * y[l];
        }
    }
    ((s[0] + s[1]) + (s[2] + s[3])) + ((s[4] + s[5]) + (s[6] + s[7])) + tail
}

unsafe extern "C" fn combine(
    info: ffi::duckdb_function_info,
    source: *mut ffi::duckdb_aggregate_state,
    target: *mut ffi::duckdb_aggregate_state,
    count: ffi::idx_t,
) {
    // SAFETY: `count` initialised states on each side, each `entries(width)` doubles.
    unsafe {
        let m = entries(width(info));
        for c in 0..count as usize {
            let src = std::slice::from_raw_parts(*source.add(c) as *const f64, m);
            let dst = std::slice::from_raw_parts_mut(*target.add(c) as *mut f64, m);
            for (d, s) in dst.iter_mut().zip(src) {
                *d += *s;
            }
        }
    }
}

unsafe extern "C" fn finalize(
    info: ffi::duckdb_function_info,
    source: *mut ffi::duckdb_aggregate_state,
    result: ffi::duckdb_vector,
    count: ffi::idx_t,
    offset: ffi::idx_t,
) {
    // SAFETY: `result` is a LIST(DOUBLE) vector with room for `offset + count` entries; the
    // child vector is grown before it is written.
    unsafe {
        let m = entries(width(info));
        let mut size = ffi::duckdb_list_vector_get_size(result) as usize;
        let need = size + count as usize * m;
        if ffi::duckdb_list_vector_reserve(result, need as ffi::idx_t) != ffi::DuckDBSuccess {
            ffi::duckdb_aggregate_function_set_error(
                info,
                c"upshot_moments: cannot allocate the result list".as_ptr(),
            );
            return;
        }
        let child = ffi::duckdb_list_vector_get_child(result);
        let values = ffi::duckdb_vector_get_data(child) as *mut f64;
        let lists = ffi::duckdb_vector_get_data(result) as *mut ffi::duckdb_list_entry;
        for c in 0..count as usize {
            let src = *source.add(c) as *const f64;
            std::ptr::copy_nonoverlapping(src, values.add(size), m);
            *lists.add(offset as usize + c) = ffi::duckdb_list_entry {
                offset: size as u64,
                length: m as u64,
            };
            size += m;
        }
        ffi::duckdb_list_vector_set_size(result, size as ffi::idx_t);
    }
}

unsafe extern "C" fn drop_width(p: *mut c_void) {
    // SAFETY: created by `Box::into_raw` in `register`.
    drop(unsafe { Box::from_raw(p as *mut usize) });
}

/// Registers every overload (1 to [`MAX_TERMS`] design columns) through connection `con`.
///
/// SAFETY: `con` must be an open connection.
pub(crate) unsafe fn register(con: ffi::duckdb_connection) -> Result<(), ExtError> {
    unsafe {
        let name = c"upshot_moments";
        let mut set = ffi::duckdb_create_aggregate_function_set(name.as_ptr() as *const c_char);
        let mut double = ffi::duckdb_create_logical_type(ffi::DUCKDB_TYPE_DUCKDB_TYPE_DOUBLE);
        let mut list = ffi::duckdb_create_list_type(double);
        let mut ok = true;
        for k in 1..=MAX_TERMS {
            let mut f = ffi::duckdb_create_aggregate_function();
            ffi::duckdb_aggregate_function_set_name(f, name.as_ptr());
            for _ in 0..=k {
                ffi::duckdb_aggregate_function_add_parameter(f, double);
            }
            ffi::duckdb_aggregate_function_set_return_type(f, list);
            ffi::duckdb_aggregate_function_set_functions(
                f,
                Some(state_size),
                Some(state_init),
                Some(update),
                Some(combine),
                Some(finalize),
            );
            let extra = Box::into_raw(Box::new(k + 1));
            ffi::duckdb_aggregate_function_set_extra_info(
                f,
                extra as *mut c_void,
                Some(drop_width),
            );
            ok &= ffi::duckdb_add_aggregate_function_to_set(set, f) == ffi::DuckDBSuccess;
            ffi::duckdb_destroy_aggregate_function(&mut f);
        }
        ok &= ffi::duckdb_register_aggregate_function_set(con, set) == ffi::DuckDBSuccess;
        ffi::duckdb_destroy_aggregate_function_set(&mut set);
        ffi::duckdb_destroy_logical_type(&mut list);
        ffi::duckdb_destroy_logical_type(&mut double);
        if ok {
            Ok(())
        } else {
            Err(ExtError::Register(MOMENTS))
        }
    }
}
