/work/main/target/release/deps/upshot_tests-4469327146353845.d: tests/support/lib.rs

/work/main/target/release/deps/libupshot_tests-4469327146353845.rlib: tests/support/lib.rs

/work/main/target/release/deps/libupshot_tests-4469327146353845.rmeta: tests/support/lib.rs

tests/support/lib.rs:

# env-dep:CARGO_MANIFEST_DIR=/work/main/tests
