/work/main/target/release/deps/textbook-6a8fd3901b83f64c.d: crates/graph/tests/textbook.rs

/work/main/target/release/deps/textbook-6a8fd3901b83f64c: crates/graph/tests/textbook.rs

crates/graph/tests/textbook.rs:
