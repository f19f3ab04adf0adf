//! The study-file loader: TOML, the diagram inside it, every check against the diagram.
#![no_main]
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    if let Ok(text) = std::str::from_utf8(data) {
        // No base folder: a `[diagram] file` is looked up in a folder that does not exist.
        let _ = upshot_study::Study::parse(
            text,
            "fuzz.toml",
            Some(std::path::Path::new("/nonexistent")),
        );
    }
});
