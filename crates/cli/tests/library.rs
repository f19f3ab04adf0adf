//! The core library on its own: the demo study driven through `upshot-core` (resolve, plan,
//! run on an engine, typed results) with no command line, against `upshot run --format json`
//! on the same study. Every estimate and standard error must agree to 1e-12 (they are the same
//! computation; only the surface differs), and the plan must list the passes the run counted.

use serde_json::Value;
use std::path::{Path, PathBuf};
use std::process::Command;
use upshot_core::{Access, Flavor, Settings, Study};

fn repo() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../..")
}

#[test]
fn the_library_gives_the_estimates_of_the_command_line() {
    // The study as the command line reads it: a path relative to the repository (the file
    // source's path is part of the plan's SQL, and so of its hash). The only test here.
    std::env::set_current_dir(repo()).unwrap();
    let study = Study::load(Path::new("demo-data/voucher-backdoor.toml")).unwrap();
    let connectors: &[&dyn upshot_core::Connector] = &[&upshot_engine_duckdb::DUCKDB];
    let resolved = upshot_core::resolve(
        &study,
        None,
        &Settings::default(),
        Flavor::plain(&upshot_sql::DuckDb),
    )
    .unwrap();
    let plans: Vec<_> = resolved
        .iter()
        .map(|r| upshot_core::plan(r).unwrap())
        .collect();
    let files = upshot_core::files_of(&study);
    let engine =
        upshot_core::connect(connectors, &resolved[0].database, Access::ReadOnly, &files).unwrap();
    let mut passes = 0;
    let answers = upshot_core::run(engine.as_ref(), resolved, &mut |_, _| passes += 1).unwrap();
    assert_eq!(answers.len(), 3);
    let counted: usize = answers.iter().map(|a| a.summary.diagnostics.passes).sum();
    assert_eq!(passes, counted);
    for (a, p) in answers.iter().zip(&plans) {
        assert_eq!(a.summary.question, p.question);
        assert!(a.summary.diagnostics.passes >= p.passes.len());
    }

    let out = Command::new(env!("CARGO_BIN_EXE_upshot"))
        .args(["run", "demo-data/voucher-backdoor.toml", "--format", "json"])
        .current_dir(repo())
        .output()
        .unwrap();
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let cli: Value = serde_json::from_slice(&out.stdout).unwrap();
    let rows = cli["estimates"].as_array().unwrap();
    let lib: Vec<_> = answers.iter().flat_map(|a| &a.estimates).collect();
    assert_eq!(rows.len(), lib.len());
    let mut worst: f64 = 0.0;
    for (row, e) in rows.iter().zip(lib) {
        assert_eq!(row["question"], e.question.as_str());
        assert_eq!(row["segment"], e.segment.as_str());
        assert_eq!(row["method"], e.method.as_str());
        assert_eq!(row["estimand"], e.estimand.as_str());
        for (key, x) in [("estimate", e.estimate), ("std_error", e.std_error)] {
            let y = row[key].as_f64().unwrap();
            let rel = (x - y).abs() / y.abs().max(1e-300);
            worst = worst.max(rel);
            assert!(
                rel <= 1e-12,
                "{} {} {key}: library {x}, CLI {y}",
                e.question,
                e.segment
            );
        }
    }
    for (q, a) in cli["questions"].as_array().unwrap().iter().zip(&answers) {
        assert_eq!(q["plan_hash"], a.summary.plan_hash.as_str());
        assert_eq!(q["diagnostics"]["passes"], a.summary.diagnostics.passes);
    }
    eprintln!(
        "library vs CLI: worst relative difference {worst:e} over {} rows",
        rows.len()
    );
}
