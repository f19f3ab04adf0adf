//! `coverage`: how often each method's 95% interval covers the demo generator's true effect.
//!
//! Simulation truth: the generator's population values (ATE 7.8 on spend; CATE 12 / 8 / 4 for
//! tenure bands new / 1y / 2y+), which it derives in closed form. For each replicate a fresh
//! demo table (seed = replicate number) is written to a CSV file and every method is run through
//! the library on DuckDB, segmented by tenure band (the `all` row is the ATE). Prints, per
//! method: coverage of the ATE and of each band's CATE, the mean estimate, the mean standard
//! error and the standard deviation of the estimates across replicates (their ratio should be
//! near 1), and exits 1 if a method's ATE coverage falls outside [0.92, 0.98] (for 200
//! replicates the binomial standard error of a 95% coverage is 1.5 points; the band is two of
//! them, common practice for simulation checks). Runs with fewer than 200 replicates (the test
//! suite's smoke run) print the table without the gate.
//!
//! The propensity methods adjust for the mailing wave too (see the method list); a last row
//! repeats `weight` without it, ungated, to show what a misspecified propensity does.
//!
//! `partial-out` estimates a variance-weighted effect, which equals the CATE within a band (the
//! effect does not vary with the covariates there) but not the ATE across bands: its `all` row is
//! reported and not gated.
//!
//! Usage: coverage [--replicates 200] [--rows 2000] [--folds 5] [--clip-per-mille 10]
//! [--methods weight,doubly-robust] (only those rows of the table)

use std::collections::BTreeMap;
use upshot_engine::Engine;
use upshot_engine_duckdb::{DuckDbEngine, MEMORY};
use upshot_methods::{estimate, Basis, ColumnType, Estimand, Method, NullPolicy, Spec};
use upshot_sql::{DuckDb, Source};

fn arg(name: &str, default: u64) -> u64 {
    let a: Vec<String> = std::env::args().collect();
    a.iter()
        .position(|x| x == name)
        .and_then(|i| a.get(i + 1))
        .map(|v| {
            v.parse()
                .unwrap_or_else(|_| panic!("{name}: not a number: {v}"))
        })
        .unwrap_or(default)
}

/// One row of the table: a method, its adjustment set, whether its ATE coverage is gated, an
/// optional filter, and a note printed after it.
struct Row {
    method: Method,
    adjust: Vec<String>,
    gated: bool,
    filter: Option<&'static str>,
    note: &'static str,
}

#[derive(Default)]
struct Tally {
    ate_hits: u32,
    cate_hits: BTreeMap<String, u32>,
    estimates: Vec<f64>,
    ses: Vec<f64>,
}

fn main() {
    let replicates = arg("--replicates", 200);
    let rows = arg("--rows", 2000);
    let folds = arg("--folds", 5) as u32;
    // Propensity clip in thousandths (default 10 = 0.01, the `run` default).
    let clip = arg("--clip-per-mille", 10) as f64 / 1000.0;
    let dir = std::env::temp_dir().join(format!("upshot-coverage-{}", std::process::id()));
    std::fs::create_dir_all(&dir).expect("temp dir");
    let engine = DuckDbEngine::open(MEMORY, true).expect("in-memory DuckDB");
    let truth_ate = 7.8;
    let truth_cate: BTreeMap<&str, f64> = [("new", 12.0), ("1y", 8.0), ("2y+", 4.0)].into();
    // Adjustment sets, all valid for the demo diagram. The propensity methods also get the
    // mailing wave, which drives targeting: with it their logistic model is the generator's own
    // (correctly specified); without it (the last weight row, not gated) it is not, and shows the bias
    // that misspecification brings.
    let rows_of = |method, adjust: &[&str], gated, filter, note| Row {
        method,
        adjust: adjust.iter().map(|s| s.to_string()).collect(),
        gated,
        filter,
        note,
    };
    let methods = [
        rows_of(Method::Stratify, &["prior_orders", "zone"], true, None, ""),
        rows_of(
            Method::Regress,
            &["household_size", "prior_orders", "zone"],
            true,
            None,
            "",
        ),
        rows_of(
            Method::Weight,
            &["prior_orders", "zone", "mail_wave"],
            false,
            None,
            " (not gated: heavy-tailed weights, see docs/methods.md)",
        ),
        // The same on the rows with good overlap. Tenure band (which alone sets the effect) is
        // drawn independently of prior orders, so the truth is unchanged on this subset.
        rows_of(
            Method::Weight,
            &["prior_orders", "zone", "mail_wave"],
            true,
            Some("prior_orders <= 6"),
            " [rows with prior_orders <= 6]",
        ),
        rows_of(
            Method::DoublyRobust,
            &["household_size", "prior_orders", "zone", "mail_wave"],
            true,
            None,
            "",
        ),
        rows_of(
            Method::PartialOut,
            &["household_size", "prior_orders", "zone"],
            false,
            None,
            " (not gated: a variance-weighted effect)",
        ),
        rows_of(
            Method::Weight,
            &["household_size", "prior_orders", "zone"],
            false,
            None,
            " (not gated: misspecified propensity)",
        ),
        rows_of(
            Method::Match,
            &["prior_orders", "zone", "mail_wave"],
            true,
            None,
            "",
        ),
    ];
    let only: Option<Vec<String>> = {
        let a: Vec<String> = std::env::args().collect();
        a.iter()
            .position(|x| x == "--methods")
            .and_then(|i| a.get(i + 1))
            .map(|v| v.split(',').map(|s| s.to_string()).collect())
    };
    let methods: Vec<_> = methods
        .into_iter()
        .filter(|r| {
            only.as_ref()
                .is_none_or(|o| o.iter().any(|k| k == r.method.as_str()))
        })
        .collect();
    let mut tallies: Vec<Tally> = methods.iter().map(|_| Tally::default()).collect();
    let start = std::time::Instant::now();
    for r in 0..replicates {
        let path = dir.join("customers.csv");
        let cfg = upshot_demo::Config {
            rows,
            seed: r + 1,
            variant: upshot_demo::Variant::Observed,
        };
        let f = std::fs::File::create(&path).expect("write replicate");
        upshot_demo::write_csv(&cfg, std::io::BufWriter::new(f)).expect("write replicate");
        // Load the replicate into a table once: passes then scan DuckDB's own storage, as they
        // would in a warehouse, instead of parsing the CSV file on every pass.
        engine
            .execute_batch(&format!(
                "CREATE OR REPLACE TABLE replicate AS SELECT * FROM read_csv_auto('{}')",
                path.display()
            ))
            .expect("load replicate");
        let source = Source::table("replicate").expect("table name");
        let columns: Vec<ColumnType> = engine
            .columns(&source)
            .expect("schema")
            .into_iter()
            .map(|c| ColumnType {
                name: c.name,
                type_name: c.type_name,
                numeric: c.numeric,
                integer: c.integer,
                boolean: c.boolean,
            })
            .collect();
        for (row, tally) in methods.iter().zip(tallies.iter_mut()) {
            let (method, adjust) = (&row.method, &row.adjust);
            let spec = Spec {
                flavor: engine.flavor(),
                question: "coverage".into(),
                source: source.clone(),
                filter: row
                    .filter
                    .map(|f| upshot_sql::parse_filter(f, &DuckDb).expect("filter parses")),
                treatment: "voucher".into(),
                outcome: "spend_30d".into(),
                adjust: adjust.iter().map(|s| s.to_string()).collect(),
                instruments: vec![],
                mediators: vec![],
                bins: vec![],
                matching: Default::default(),
                segments: vec!["tenure_band".into()],
                segment_bins: None,
                estimand: Estimand::Ate,
                method: *method,
                folds,
                unit: Some("customer_id".into()),
                on_null: NullPolicy::Exclude,
                clip,
                categorical: vec!["zone".into(), "tenure_band".into(), "mail_wave".into()],
                basis: Basis::default(),
                columns: Some(columns.clone()),
            };
            let mut runner = |p: &upshot_sql::Pass| engine.run(p).map_err(|e| e.to_string());
            let out = estimate(&spec, &mut runner)
                .unwrap_or_else(|e| panic!("replicate {r}, {}: {e}", method.as_str()));
            for e in &out.estimates {
                if e.segment == "all" {
                    tally.estimates.push(e.estimate);
                    tally.ses.push(e.std_error);
                    if e.ci_low <= truth_ate && truth_ate <= e.ci_high {
                        tally.ate_hits += 1;
                    }
                } else {
                    let band = e.segment_values[0].1.clone();
                    let t = truth_cate[band.as_str()];
                    let hit = u32::from(e.ci_low <= t && t <= e.ci_high);
                    *tally.cate_hits.entry(band).or_default() += hit;
                }
            }
        }
    }
    let _ = std::fs::remove_dir_all(&dir);
    let n = replicates as f64;
    println!(
        "coverage of 95% intervals: {replicates} replicates of {rows} demo rows, {folds} folds, segments by tenure band ({:.1} s)",
        start.elapsed().as_secs_f64()
    );
    println!(
        "{:<14} {:>8} {:>8} {:>8} {:>8} {:>10} {:>9} {:>9} {:>8}  adjusting for",
        "method", "ATE", "new", "1y", "2y+", "mean est.", "mean SE", "sd est.", "SE/sd"
    );
    let mut bad = false;
    for (row, t) in methods.iter().zip(&tallies) {
        let (method, adjust, gated) = (&row.method, &row.adjust, &row.gated);
        let mean = t.estimates.iter().sum::<f64>() / n;
        let sd = (t.estimates.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (n - 1.0)).sqrt();
        let mse = t.ses.iter().sum::<f64>() / n;
        let ate = f64::from(t.ate_hits) / n;
        let c = |b: &str| f64::from(*t.cate_hits.get(b).unwrap_or(&0)) / n;
        println!(
            "{:<14} {:>8.3} {:>8.3} {:>8.3} {:>8.3} {:>10.3} {:>9.3} {:>9.3} {:>8.2}  {{{}}}{}",
            method.as_str(),
            ate,
            c("new"),
            c("1y"),
            c("2y+"),
            mean,
            mse,
            sd,
            mse / sd,
            adjust.join(", "),
            row.note
        );
        if replicates >= 200 && *gated && !(0.92..=0.98).contains(&ate) {
            bad = true;
        }
    }
    if bad {
        println!("FAIL: an ATE coverage is outside [0.92, 0.98]");
        std::process::exit(1);
    }
}
