//! The validators of user SQL: a filter (one row predicate over the source's columns) and a
//! source query (one read-only SELECT), in both dialects; what they accept must render.
#![no_main]
use libfuzzer_sys::fuzz_target;
use upshot_sql::{parse_filter, Dialect, DuckDb, Postgres, Source};

fuzz_target!(|data: &[u8]| {
    if let Ok(text) = std::str::from_utf8(data) {
        for d in [&DuckDb as &dyn Dialect, &Postgres] {
            if let Ok(f) = parse_filter(text, d) {
                let _ = f.to_string();
            }
            if let Ok(Source::Query(q)) = Source::query(text, d) {
                let _ = q.to_string();
            }
        }
    }
});
