/work/main/target/release/deps/upshot_graph-24fddffe5fd7815f.d: crates/graph/src/lib.rs crates/graph/src/dag.rs crates/graph/src/diagram.rs crates/graph/src/dot.rs crates/graph/src/identify.rs crates/graph/src/parse.rs crates/graph/src/report.rs crates/graph/src/separators.rs crates/graph/src/set.rs

/work/main/target/release/deps/libupshot_graph-24fddffe5fd7815f.rlib: crates/graph/src/lib.rs crates/graph/src/dag.rs crates/graph/src/diagram.rs crates/graph/src/dot.rs crates/graph/src/identify.rs crates/graph/src/parse.rs crates/graph/src/report.rs crates/graph/src/separators.rs crates/graph/src/set.rs

/work/main/target/release/deps/libupshot_graph-24fddffe5fd7815f.rmeta: crates/graph/src/lib.rs crates/graph/src/dag.rs crates/graph/src/diagram.rs crates/graph/src/dot.rs crates/graph/src/identify.rs crates/graph/src/parse.rs crates/graph/src/report.rs crates/graph/src/separators.rs crates/graph/src/set.rs

crates/graph/src/lib.rs:
crates/graph/src/dag.rs:
crates/graph/src/diagram.rs:
crates/graph/src/dot.rs:
crates/graph/src/identify.rs:
crates/graph/src/parse.rs:
crates/graph/src/report.rs:
crates/graph/src/separators.rs:
crates/graph/src/set.rs:
