//! Study-file errors: each names the file, line, column and key, and says what is allowed.

use upshot_study::{Location, Method, Study, StudyError};

const GRAPH: &str = "zone -> voucher -> sessions -> spend; zone -> spend\\nincome: latent\\nincome -> spend\\nrate: continuous\\nrate -> spend";

fn study(body: &str) -> Result<Study, StudyError> {
    let text = format!("[diagram]\ntext = \"{GRAPH}\"\n\n{body}");
    Study::parse(&text, "s.toml", None)
}

fn err(body: &str) -> (usize, usize, String) {
    let e = study(body).unwrap_err();
    let shown = e.to_string();
    match e.location {
        Location::File { line, col, .. } => (line, col, shown),
        other => panic!("expected a file location, got {other:?}: {shown}"),
    }
}

#[test]
fn a_valid_study() {
    let s = study("[[question]]\ntreatment = \"voucher\"\noutcome = \"spend\"\nmethod = \"regress\"\nadjust = [\"zone\"]\n").unwrap();
    assert_eq!(s.questions.len(), 1);
    let q = &s.questions[0];
    assert_eq!(q.name, "q1");
    assert_eq!(q.method, Method::Regress);
    assert_eq!(q.adjust.as_deref(), Some(&["zone".to_string()][..]));
}

#[test]
fn unknown_key_names_line_and_allowed_keys() {
    let (line, col, msg) = err("[[question]]\ntreatmnt = \"voucher\"\noutcome = \"spend\"\n");
    assert_eq!((line, col), (5, 1), "{msg}");
    assert!(
        msg.contains("unknown field `treatmnt`") && msg.contains("`treatment`"),
        "{msg}"
    );
    assert!(msg.contains("s.toml:5:1"), "{msg}");
}

#[test]
fn unknown_variable_suggests_a_name() {
    let (line, _, msg) = err("[[question]]\ntreatment = \"vouchr\"\noutcome = \"spend\"\n");
    assert_eq!(line, 5);
    assert!(msg.contains("did you mean `voucher`?"), "{msg}");
    assert!(msg.contains("question[1].treatment"), "{msg}");
}

#[test]
fn latent_and_overlapping_variables() {
    let (_, _, msg) = err("[[question]]\ntreatment = \"income\"\noutcome = \"spend\"\n");
    assert!(msg.contains("latent"), "{msg}");
    let (_, _, msg) = err("[[question]]\ntreatment = \"spend\"\noutcome = \"spend\"\n");
    assert!(msg.contains("both treatment and outcome"), "{msg}");
    let (_, _, msg) = err("[[question]]\ntreatment = \"voucher\"\noutcome = \"spend\"\nadjust = [\"zone\", \"voucher\"]\n");
    assert!(msg.contains("treatment or outcome"), "{msg}");
    let (_, _, msg) = err("[[question]]\ntreatment = \"voucher\"\noutcome = \"spend\"\nadjust = [\"zone\", \"zone\"]\n");
    assert!(msg.contains("listed twice"), "{msg}");
}

#[test]
fn methods_estimands_and_types() {
    let (line, col, msg) =
        err("[[question]]\ntreatment = \"voucher\"\noutcome = \"spend\"\nmethod = \"regres\"\n");
    assert_eq!((line, col), (7, 10), "{msg}");
    assert!(
        msg.contains("did you mean `regress`?") && msg.contains("doubly-robust"),
        "{msg}"
    );
    let (_, _, msg) =
        err("[[question]]\ntreatment = \"voucher\"\noutcome = \"spend\"\nestimand = \"ATX\"\n");
    assert!(msg.contains("expected one of: ATE, ATT, ATC"), "{msg}");
    let (_, _, msg) =
        err("[[question]]\ntreatment = \"rate\"\noutcome = \"spend\"\nmethod = \"weight\"\n");
    assert!(
        msg.contains("needs a binary (0/1) treatment") && msg.contains("declared continuous"),
        "{msg}"
    );
    let (line, _, msg) = err("[[question]]\ntreatment = 5\noutcome = \"spend\"\n");
    assert_eq!(line, 5);
    assert!(
        msg.contains("a variable name or a list of variable names"),
        "{msg}"
    );
}

#[test]
fn segments_must_precede_treatment() {
    let (_, _, msg) = err(
        "[[question]]\ntreatment = \"voucher\"\noutcome = \"spend\"\nsegments = [\"sessions\"]\n",
    );
    assert!(
        msg.contains("affected by the treatment (voucher -> sessions)"),
        "{msg}"
    );
}

#[test]
fn diagram_errors_point_into_the_study_file() {
    let text = "[study]\nname = \"x\"\n\n[diagram]\ntext = '''\na -> b\nb -> a\n'''\n\n[[question]]\ntreatment = \"a\"\noutcome = \"b\"\n";
    let e = Study::parse(text, "s.toml", None).unwrap_err();
    match &e.location {
        Location::File {
            line, col, text, ..
        } => {
            assert_eq!((*line, *col), (7, 3), "{e}");
            assert_eq!(text, "b -> a");
        }
        other => panic!("{other:?}"),
    }
    assert!(e.to_string().contains("directed cycle"), "{e}");
}

#[test]
fn structural_errors() {
    let e = Study::parse(
        "[[question]]\ntreatment = \"a\"\noutcome = \"b\"\n",
        "s.toml",
        None,
    )
    .unwrap_err();
    assert!(e.to_string().contains("missing section [diagram]"), "{e}");
    let (_, _, msg) = err("");
    assert!(msg.contains("asks no question"), "{msg}");
    let (line, _, msg) = err("[source]\ntable = \"t\"\nquery = \"select 1\"\n[[question]]\ntreatment = \"voucher\"\noutcome = \"spend\"\n");
    assert_eq!(line, 6);
    assert!(
        msg.contains("give one of `table`, `query` or `file`"),
        "{msg}"
    );
    let e = study("[[question]]\nname = \"a\"\ntreatment = \"voucher\"\noutcome = \"spend\"\n[[question]]\nname = \"a\"\ntreatment = \"voucher\"\noutcome = \"spend\"\n").unwrap_err();
    assert!(e.to_string().contains("names must be unique"), "{e}");
    let (_, _, msg) = err("[source]\ntable = \"t\"\nunit = \"zone\"\n[[question]]\ntreatment = \"voucher\"\noutcome = \"spend\"\n");
    assert!(msg.contains("unit key"), "{msg}");
    let e = Study::parse(
        "[diagram]\nfile = \"missing.graph\"\n[[question]]\ntreatment = \"a\"\noutcome = \"b\"\n",
        "s.toml",
        None,
    )
    .unwrap_err();
    assert!(
        e.to_string().contains("cannot read") && e.to_string().contains("missing.graph"),
        "{e}"
    );
    let e = Study::parse("[diagram\n", "s.toml", None).unwrap_err();
    assert!(matches!(e.location, Location::File { line: 1, .. }), "{e}");
}

#[test]
fn the_demo_studies_load() {
    let root = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("../../demo-data");
    for f in [
        "voucher-backdoor.toml",
        "voucher-frontdoor.toml",
        "voucher-instrument.toml",
    ] {
        let s = Study::load(&root.join(f)).unwrap_or_else(|e| panic!("{f}: {e}"));
        assert!(!s.questions.is_empty());
    }
}
