/work/main/target/release/deps/graph_cases-50ad2d9c9a477740.d: tests/support/graph_cases.rs

/work/main/target/release/deps/graph_cases-50ad2d9c9a477740: tests/support/graph_cases.rs

tests/support/graph_cases.rs:
