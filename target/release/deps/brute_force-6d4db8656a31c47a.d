/work/main/target/release/deps/brute_force-6d4db8656a31c47a.d: crates/graph/tests/brute_force.rs

/work/main/target/release/deps/brute_force-6d4db8656a31c47a: crates/graph/tests/brute_force.rs

crates/graph/tests/brute_force.rs:
