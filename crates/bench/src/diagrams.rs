//! The identification report on large diagrams: `upshot check` timed end to end (whole
//! processes, medians) on generated diagrams, against the target of 2 s for 1,000 variables.
//!
//! The diagrams are the shapes that once made the report slow or crash: a long chain (deep
//! recursion, quadratic lists), a sparse random diagram (many candidate instruments), a dense
//! one (many minimal separators), and a 30,000-variable chain (the stack and the memory).

use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::Instant;

/// A generated diagram: its name, its text, the treatment and the outcome.
struct Shape {
    name: &'static str,
    text: String,
    treatment: String,
    outcome: String,
    /// The report's target time (seconds), where the benchmark issue sets one.
    target: Option<f64>,
}

fn chain(n: usize) -> String {
    (0..n - 1)
        .map(|i| format!("v{i} -> v{}\n", i + 1))
        .collect()
}

/// A xorshift generator: the same diagrams on every machine.
fn rng(mut state: u64) -> impl FnMut() -> u64 {
    move || {
        state ^= state << 13;
        state ^= state >> 7;
        state ^= state << 17;
        state
    }
}

fn shapes() -> Vec<Shape> {
    let mut next = rng(0x9E37_79B9_7F4A_7C15);
    // Sparse: every variable gets two parents drawn from those before it.
    let mut sparse = String::new();
    for j in 1..1000u64 {
        let mut parents: Vec<u64> = (0..2).map(|_| next() % j).collect();
        parents.dedup();
        for i in parents {
            sparse.push_str(&format!("v{i} -> v{j}\n"));
        }
    }
    // Dense: 300 variables, each pair joined with probability 0.05, and every third variable a
    // common cause of the treatment and the outcome.
    let mut dense = String::new();
    for i in 0..300u64 {
        for j in i + 1..300 {
            if next() % 100 < 5 {
                dense.push_str(&format!("v{i} -> v{j}\n"));
            }
        }
    }
    for i in (0..300).step_by(3) {
        dense.push_str(&format!("v{i} -> t\nv{i} -> y\n"));
    }
    dense.push_str("t -> y\n");
    vec![
        Shape {
            name: "chain, 1,000 variables",
            text: chain(1000),
            treatment: "v10".into(),
            outcome: "v900".into(),
            target: Some(2.0),
        },
        Shape {
            name: "sparse random, 1,000 variables",
            text: sparse,
            treatment: "v100".into(),
            outcome: "v900".into(),
            target: Some(2.0),
        },
        Shape {
            name: "dense random, 300 variables",
            text: dense,
            treatment: "t".into(),
            outcome: "y".into(),
            target: None,
        },
        Shape {
            name: "chain, 30,000 variables",
            text: chain(30_000),
            treatment: "v100".into(),
            outcome: "v29000".into(),
            target: None,
        },
    ]
}

/// The `upshot` binary beside this one (both are built into the same directory).
fn upshot_binary() -> Result<PathBuf, String> {
    let me = std::env::current_exe().map_err(|e| e.to_string())?;
    let bin = me.with_file_name("upshot");
    if bin.exists() {
        Ok(bin)
    } else {
        Err(format!(
            "no `upshot` binary beside {}; build the workspace first (cargo build --release --workspace)",
            me.display()
        ))
    }
}

fn median(mut v: Vec<f64>) -> f64 {
    v.sort_by(f64::total_cmp);
    v[v.len() / 2]
}

/// Times `upshot check` on each shape (`repeat` runs, median) and prints the table; returns
/// false when a target is missed or a check fails.
pub fn run(dir: &Path, repeat: usize) -> Result<bool, String> {
    let bin = upshot_binary()?;
    std::fs::create_dir_all(dir).map_err(|e| format!("{}: {e}", dir.display()))?;
    println!("identification report on large diagrams (`upshot check --offline`, whole process, median of {repeat})");
    println!(
        "{:<34} {:>8} {:>9} {:>8}",
        "diagram", "edges", "seconds", "target"
    );
    let mut ok = true;
    for s in shapes() {
        let file = dir.join(format!("{}.graph", s.name.replace([' ', ','], "")));
        std::fs::write(&file, &s.text).map_err(|e| format!("{}: {e}", file.display()))?;
        let mut times = Vec::new();
        for _ in 0..repeat.max(1) {
            let start = Instant::now();
            let out = Command::new(&bin)
                .args(["check", "--offline", "--graph"])
                .arg(&file)
                .args(["--treatment", &s.treatment, "--outcome", &s.outcome])
                .output()
                .map_err(|e| e.to_string())?;
            times.push(start.elapsed().as_secs_f64());
            if !out.status.success() {
                return Err(format!(
                    "{}: upshot check failed: {}",
                    s.name,
                    String::from_utf8_lossy(&out.stderr)
                ));
            }
        }
        let t = median(times);
        let verdict = match s.target {
            Some(target) if t > target => {
                ok = false;
                format!("{target} s MISSED")
            }
            Some(target) => format!("{target} s met"),
            None => "-".into(),
        };
        println!(
            "{:<34} {:>8} {:>9.2} {:>8}",
            s.name,
            s.text.lines().count(),
            t,
            verdict
        );
    }
    Ok(ok)
}
