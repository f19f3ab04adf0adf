/work/main/target/release/deps/upshot_graph-e999edfdafa98d31.d: crates/graph/src/lib.rs crates/graph/src/dag.rs crates/graph/src/diagram.rs crates/graph/src/dot.rs crates/graph/src/identify.rs crates/graph/src/parse.rs crates/graph/src/report.rs crates/graph/src/separators.rs crates/graph/src/set.rs

/work/main/target/release/deps/upshot_graph-e999edfdafa98d31: crates/graph/src/lib.rs crates/graph/src/dag.rs crates/graph/src/diagram.rs crates/graph/src/dot.rs crates/graph/src/identify.rs crates/graph/src/parse.rs crates/graph/src/report.rs crates/graph/src/separators.rs crates/graph/src/set.rs

crates/graph/src/lib.rs:
crates/graph/src/dag.rs:
crates/graph/src/diagram.rs:
crates/graph/src/dot.rs:
crates/graph/src/identify.rs:
crates/graph/src/parse.rs:
crates/graph/src/report.rs:
crates/graph/src/separators.rs:
crates/graph/src/set.rs:
