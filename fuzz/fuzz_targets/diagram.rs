//! The diagram parser (edge syntax, and DOT when the text looks like it): any input gives a
//! diagram or an error, never a panic, and an accepted diagram's names have no control
//! characters that a study would then refuse silently; every report on it completes.
#![no_main]
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    if let Ok(text) = std::str::from_utf8(data) {
        if let Ok(d) = upshot_graph::Diagram::parse(text) {
            // Every report the CLI prints must be computable on an accepted diagram.
            let _ = upshot_graph::report::implied(&d);
            let _ = upshot_graph::report::markov_basis(&d);
            // Identification between the first and the last observed variable (every route's
            // search), as `check` asks it.
            let observed = d.observed().to_vec();
            if let (Some(&a), Some(&b)) = (observed.first(), observed.last()) {
                if a != b {
                    let x = vec![d.name(a).to_string()];
                    let y = vec![d.name(b).to_string()];
                    let _ = upshot_graph::report::identify(&d, &x, &y, &Default::default());
                }
            }
        }
    }
});
