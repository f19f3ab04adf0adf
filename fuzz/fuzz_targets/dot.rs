//! The DOT parser: the input is put inside `digraph { ... }`.
#![no_main]
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    if let Ok(text) = std::str::from_utf8(data) {
        let _ = upshot_graph::Diagram::parse(&format!("digraph {{ {text} }}"));
    }
});
