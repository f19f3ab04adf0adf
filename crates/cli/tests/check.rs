//! End-to-end tests of `upshot check` and `upshot demo`: the demo studies give the routes
//! derived by hand from their diagrams (demo-data/*.graph), and bad input exits non-zero with a
//! located message and writes nothing.

use serde_json::Value;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

fn repo() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../..")
}

fn upshot(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_upshot"))
        .args(args)
        .current_dir(repo())
        .output()
        .expect("binary runs")
}

fn json(args: &[&str]) -> (i32, Value) {
    let mut a = args.to_vec();
    a.extend(["--format", "json"]);
    let out = upshot(&a);
    let v: Value = serde_json::from_slice(&out.stdout).unwrap_or_else(|e| {
        panic!(
            "{e}: {}{}",
            String::from_utf8_lossy(&out.stdout),
            String::from_utf8_lossy(&out.stderr)
        )
    });
    (out.status.code().unwrap(), v)
}

fn strs(v: &Value) -> Vec<String> {
    v.as_array()
        .unwrap()
        .iter()
        .map(|x| x.as_str().unwrap().to_string())
        .collect()
}

fn sets(v: &Value) -> Vec<Vec<String>> {
    v.as_array().unwrap().iter().map(strs).collect()
}

#[test]
fn backdoor_demo_study() {
    let (code, doc) = json(&["check", "demo-data/voucher-backdoor.toml"]);
    assert_eq!(code, 0);
    assert_eq!(doc["format"], "upshot-check/1");
    let q = &doc["questions"][0];
    assert_eq!(q["identified"], true);
    let a = &q["identification"]["adjustment"];
    assert_eq!(sets(&a["minimal_sets"]), vec![vec!["prior_orders", "zone"]]);
    // O = pa(app_sessions, spend_30d) \ forb = {tenure_band, household_size, prior_orders, zone}
    assert_eq!(
        strs(&a["optimal_set"]),
        vec!["household_size", "prior_orders", "tenure_band", "zone"]
    );
    assert_eq!(q["chosen"]["route"], "adjustment");
    assert_eq!(
        sets(&q["identification"]["front_door"]["sets"]),
        vec![vec!["app_sessions"]]
    );
    assert_eq!(
        q["identification"]["instrument"]["found"][0]["instrument"],
        "mail_wave"
    );
    assert_eq!(strs(&q["segments"]), vec!["tenure_band"]);
    // reordered_30d has no household_size parent, so its optimal set is smaller.
    let r = &doc["questions"][2];
    assert_eq!(
        strs(&r["identification"]["adjustment"]["optimal_set"]),
        vec!["prior_orders", "tenure_band", "zone"]
    );
    assert!(doc["implied_independences"].as_array().unwrap().len() > 10);
}

#[test]
fn latent_demo_studies() {
    for (file, route) in [
        ("demo-data/voucher-frontdoor.toml", "front-door"),
        ("demo-data/voucher-instrument.toml", "instrument"),
    ] {
        let (code, doc) = json(&["check", file]);
        assert_eq!(code, 0, "{file}");
        let q = &doc["questions"][0];
        assert_eq!(q["chosen"]["route"], route, "{file}");
        let a = &q["identification"]["adjustment"];
        assert_eq!(a["exists"], false);
        assert_eq!(a["open_path"], "voucher <- household_income -> spend_30d");
        assert_eq!(strs(&a["measure_to_adjust"]), vec!["household_income"]);
    }
    // The same diagram with a backdoor method is not identified: exit 3, and the hint names the
    // routes that do work.
    let out = upshot(&[
        "check",
        "demo-data/voucher-frontdoor.toml",
        "--method",
        "regress",
    ]);
    assert_eq!(out.status.code(), Some(3));
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(
        text.contains("NOT IDENTIFIED") && text.contains("--method front-door"),
        "{text}"
    );
}

#[test]
fn flags_instead_of_a_study() {
    let (code, doc) = json(&[
        "check",
        "--graph",
        "w -> z; w -> y; z -> t -> y; t <-> y",
        "--treatment",
        "t",
        "--outcome",
        "y",
    ]);
    assert_eq!(code, 0);
    let iv = &doc["questions"][0]["identification"]["instrument"]["found"][0];
    assert_eq!(iv["instrument"], "z");
    assert_eq!(strs(&iv["given"]), vec!["w"]);
    let (code, doc) = json(&[
        "check",
        "--graph",
        "c -> t -> y; c -> y; t -> m -> y",
        "--treatment",
        "t",
        "--outcome",
        "y",
        "--adjust",
        "c,m",
    ]);
    assert_eq!(code, 3);
    let problems =
        doc["questions"][0]["identification"]["adjustment"]["declared"]["problems"].to_string();
    assert!(problems.contains("mediator"), "{problems}");
    let (code, _) = json(&[
        "check",
        "--graph",
        "t -> y; t <-> y",
        "--treatment",
        "t",
        "--outcome",
        "y",
    ]);
    assert_eq!(code, 3);
    let (code, doc) = json(&[
        "check",
        "demo-data/voucher-backdoor.toml",
        "--question",
        "spend",
        "--adjust",
        "zone",
    ]);
    assert_eq!(code, 3);
    assert_eq!(doc["questions"].as_array().unwrap().len(), 1);
    let dot = repo().join("target-test-graph.dot");
    std::fs::write(&dot, "digraph { c -> t -> y; c -> y }").unwrap();
    let out = upshot(&[
        "check",
        "--graph",
        dot.to_str().unwrap(),
        "--treatment",
        "t",
        "--outcome",
        "y",
    ]);
    std::fs::remove_file(&dot).unwrap();
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
}

fn fails(args: &[&str], code: i32, needle: &str) {
    let out = upshot(args);
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(code), "{args:?}: {err}");
    assert!(
        err.contains(needle),
        "{args:?}: expected `{needle}` in: {err}"
    );
    assert!(out.stdout.is_empty(), "{args:?} printed to stdout");
}

/// `check --graph "a -> b" --treatment a --outcome b` followed by `extra`.
fn ab_flags<'a>(extra: &[&'a str]) -> Vec<&'a str> {
    let mut v = vec![
        "check",
        "--graph",
        "a -> b",
        "--treatment",
        "a",
        "--outcome",
        "b",
    ];
    v.extend_from_slice(extra);
    v
}

#[test]
fn bad_input_is_located_and_exits_2() {
    let dir = std::env::temp_dir().join(format!("upshot-check-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let write = |name: &str, text: &str| {
        let p = dir.join(name);
        std::fs::write(&p, text).unwrap();
        p.to_str().unwrap().to_string()
    };
    let cyc = write("cycle.toml", "[diagram]\ntext = '''\na -> b\nb -> a\n'''\n[[question]]\ntreatment = \"a\"\noutcome = \"b\"\n");
    fails(
        &["check", &cyc],
        2,
        "cycle.toml:4:3: `diagram`: the diagram has a directed cycle: a -> b -> a",
    );
    let key = write(
        "key.toml",
        "[diagram]\ntext = 'a -> b'\n[[question]]\ntreatment = \"a\"\noutcom = \"b\"\n",
    );
    fails(&["check", &key], 2, "key.toml:5:1: unknown field `outcom`");
    let role = write("role.toml", "[diagram]\ntext = '''\na -> b\na: hidden\n'''\n[[question]]\ntreatment = \"a\"\noutcome = \"b\"\n");
    fails(
        &["check", &role],
        2,
        "role.toml:4:4: `diagram`: unknown role `hidden` for `a`",
    );
    let dup = write("dup.graph", "a -> b\nc -> b\na -> b\n");
    fails(
        &[
            "check",
            "--graph",
            &dup,
            "--treatment",
            "a",
            "--outcome",
            "b",
        ],
        2,
        "dup.graph:3:3: `diagram`: duplicate edge `a -> b`",
    );
    fails(
        &[
            "check",
            "--graph",
            "a -> a",
            "--treatment",
            "a",
            "--outcome",
            "a",
        ],
        2,
        "self-loop on `a`",
    );
    fails(
        &[
            "check",
            "--graph",
            "a -> b",
            "--treatment",
            "x",
            "--outcome",
            "b",
        ],
        2,
        "--treatment: `x` is not a variable of the diagram",
    );
    fails(
        &["check", "--graph", "a -> b", "--treatment", "a"],
        2,
        "--outcome is required",
    );
    fails(
        &ab_flags(&["--method", "magic"]),
        2,
        "unknown method `magic`",
    );
    fails(&ab_flags(&["--format", "xml"]), 2, "unknown format `xml`");
    fails(
        &["check", "no-such-study.toml"],
        2,
        "no-such-study.toml: cannot read the study file",
    );
    fails(
        &[
            "check",
            "--graph",
            "missing.graph",
            "--treatment",
            "a",
            "--outcome",
            "b",
        ],
        2,
        "no file `missing.graph`",
    );
    fails(
        &[
            "check",
            "demo-data/voucher-backdoor.toml",
            "--question",
            "nope",
        ],
        2,
        "no question `nope`",
    );
    fails(&["check"], 2, "nothing to check");
    // Names are checked against the source's columns (schema only) unless --offline.
    let sample = repo().join("demo-data/sample/customers.csv");
    let typo = write(
        "typo.toml",
        &format!("[source]\nfile = '{}'\n[diagram]\ntext = 'voucher -> spend_3Od'\n[[question]]\ntreatment = \"voucher\"\noutcome = \"spend_3Od\"\n", sample.display()),
    );
    fails(
        &["check", &typo],
        2,
        "observed variable `spend_3Od` is not a column of",
    );
    assert_eq!(
        upshot(&["check", &typo, "--offline"]).status.code(),
        Some(0)
    );
    let nofile = write("nofile.toml", "[source]\nfile = 'missing.csv'\n[diagram]\ntext = 'a -> b'\n[[question]]\ntreatment = \"a\"\noutcome = \"b\"\n");
    fails(&["check", &nofile], 2, "no file");
    fails(
        &[
            "check",
            "--graph",
            "digraph { a -> b",
            "--treatment",
            "a",
            "--outcome",
            "b",
        ],
        2,
        "missing `}`",
    );
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn demo_writes_rows_and_truth() {
    let dir = std::env::temp_dir().join(format!("upshot-demo-{}", std::process::id()));
    let out = upshot(&[
        "demo",
        "--out",
        dir.to_str().unwrap(),
        "--rows",
        "2000",
        "--seed",
        "5",
        "--variant",
        "observed",
    ]);
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let csv = std::fs::read_to_string(dir.join("customers.csv")).unwrap();
    assert_eq!(csv.lines().count(), 2001);
    assert!(csv.starts_with("customer_id,zone,tenure_band,prior_orders,household_size,mail_wave,voucher,app_sessions,spend_30d,reordered_30d\n"));
    let truth: Value =
        serde_json::from_str(&std::fs::read_to_string(dir.join("customers.truth.json")).unwrap())
            .unwrap();
    assert!(truth["outcomes"]["spend_30d"]["ate"].as_f64().unwrap() > 0.0);
    assert!(
        truth["outcomes"]["spend_30d"]["naive_difference"]
            .as_f64()
            .unwrap()
            < 0.0
    );
    assert!(!dir.join("customers_latent.csv").exists());
    std::fs::remove_dir_all(&dir).unwrap();
    let bad = std::env::temp_dir().join(format!("upshot-demo-bad-{}", std::process::id()));
    fails(
        &[
            "demo",
            "--out",
            bad.to_str().unwrap(),
            "--variant",
            "sideways",
        ],
        2,
        "unknown variant `sideways`",
    );
    assert!(!bad.exists(), "a rejected run must write nothing");
    fails(
        &["demo", "--out", "/proc/upshot-cannot-write-here"],
        2,
        "--out: cannot create /proc/upshot-cannot-write-here",
    );
}
