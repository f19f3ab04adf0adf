//! `upshot plan` and `upshot run`: flags turned into a study and settings, then the core
//! library's resolve, plan and run; rendering and exit codes here.

use crate::check::{clean, request};
use crate::exit::{emit, Failure, OK};
use crate::render;
use crate::ENGINES;
use std::io::{IsTerminal, Write as _};
use std::path::PathBuf;
use upshot_core::{Access, Flavor, Request};
use upshot_sql::{dialect_by_name, Dialect, DIALECTS};
use upshot_study::QuestionInput;

/// Flags of `upshot plan` and `upshot run`.
#[derive(clap::Args)]
pub struct Args {
    /// Study file (TOML). Without it, give --graph, --treatment and --outcome.
    study: Option<PathBuf>,
    /// Only this question of the study.
    #[arg(long)]
    question: Option<String>,
    /// Diagram: a file path, `-` for standard input, or inline edges such as "z -> t -> y".
    #[arg(long, allow_hyphen_values = true)]
    graph: Option<String>,
    /// Treatment column.
    #[arg(long, value_delimiter = ',')]
    treatment: Vec<String>,
    /// Outcome column.
    #[arg(long, value_delimiter = ',')]
    outcome: Vec<String>,
    /// ATE, ATT or ATC.
    #[arg(long)]
    estimand: Option<String>,
    /// Segment columns for per-segment effects, comma-separated.
    #[arg(long = "segment-by", value_delimiter = ',')]
    segment_by: Vec<String>,
    /// Cut numeric segment columns into this many bins at their quantiles, computed in the
    /// database (2 to 100).
    #[arg(long, allow_negative_numbers = true)]
    bins: Option<i64>,
    /// Method key: auto, stratify, regress, weight, doubly-robust, partial-out, iv, front-door,
    /// match, coarsen.
    #[arg(long)]
    method: Option<String>,
    /// Adjustment set to use instead of the one identification picks (checked first).
    #[arg(long, value_delimiter = ',', num_args = 0..)]
    adjust: Option<Vec<String>>,
    /// Instruments for `--method iv`, comma-separated (checked against the diagram first).
    #[arg(long, value_delimiter = ',')]
    instruments: Option<Vec<String>>,
    /// Mediators for `--method front-door`, comma-separated (checked against the diagram first).
    #[arg(long, value_delimiter = ',')]
    mediators: Option<Vec<String>>,
    /// Variables the instruments are conditioned on (covariates of `iv`), comma-separated.
    #[arg(long = "instrument-given", value_delimiter = ',')]
    instrument_given: Vec<String>,
    /// Database: a DuckDB file, or duckdb::memory: (default: the study's, else in-memory).
    #[arg(long)]
    db: Option<String>,
    /// Rows: a table name, a CSV or Parquet file, or one SELECT statement (default: the study's).
    #[arg(long)]
    source: Option<String>,
    /// A condition on each row's columns restricting the rows (one SQL expression).
    #[arg(long)]
    filter: Option<String>,
    /// Integer unit key column, for cross-fitting folds (without one, nothing is cross-fitted).
    #[arg(long)]
    unit: Option<String>,
    /// Cross-fitting folds for doubly-robust and partial-out (1 = none).
    #[arg(long, default_value_t = 5, allow_negative_numbers = true)]
    folds: i64,
    /// Rows with NULL in a used column: `exclude` (count and report them) or `error`.
    #[arg(long = "on-null", default_value = "exclude")]
    on_null: String,
    /// Clip propensities to [c, 1 - c] (0 = no clipping).
    #[arg(long, default_value_t = 0.01, allow_negative_numbers = true)]
    clip: f64,
    /// Add squares of numeric covariates to the models.
    #[arg(long)]
    squares: bool,
    /// Add pairwise products of covariates to the models.
    #[arg(long)]
    interactions: bool,
    /// Suppress estimate rows with fewer than this many rows in either treatment arm (in all,
    /// for a continuous treatment): no estimate, counts shown as `<k` (0 = show every row).
    #[arg(long = "min-cell", default_value_t = upshot_core::DEFAULT_MIN_CELL as i64, allow_negative_numbers = true)]
    min_cell: i64,
    /// `coarsen`: bins for a numeric covariate instead of the automatic rule, as COLUMN=BINS
    /// (comma-separated for several).
    #[arg(long, value_delimiter = ',')]
    coarsen: Vec<String>,
    /// `match`: rows of the other arm matched to each row (1:k, with replacement).
    #[arg(long, default_value_t = 1, allow_negative_numbers = true)]
    neighbours: i64,
    /// `match`: refuse matches farther than this many pooled standard deviations of the logit
    /// of the propensity (0.2 is the usual choice).
    #[arg(long, allow_negative_numbers = true)]
    caliper: Option<f64>,
    /// `run --method match`: create this table in the source's database with one row per
    /// matched unit (unit key, treatment, outcome, counterfactual, difference, distance).
    #[arg(long = "rows-into")]
    rows_into: Option<String>,
    /// `run --rows-into`: replace the table if it exists.
    #[arg(long)]
    replace: bool,
    /// Output: text, json or csv (`plan`: text or json).
    #[arg(long, default_value = "text")]
    format: String,
    /// `run`: append the estimates to this results table in the database (one transaction).
    #[arg(long)]
    into: Option<String>,
    /// `run --into`: a key for this run; rerunning with the same key replaces its rows.
    #[arg(long = "run-key")]
    run_key: Option<String>,
    /// `run`: cancel any pass that runs longer than this many seconds (the database cancels
    /// it; nothing is written).
    #[arg(long)]
    timeout: Option<u64>,
    /// `plan`: SQL dialect to render (duckdb, postgres, spark).
    #[arg(long)]
    dialect: Option<String>,
    /// `plan`: render for a database without upshot's functions (`upshot_moments`,
    /// `upshot_linear`): one SUM per product and plain arithmetic.
    #[arg(long)]
    portable: bool,
}

fn overrides(a: &Args) -> QuestionInput {
    QuestionInput {
        treatment: clean(a.treatment.clone()),
        outcome: clean(a.outcome.clone()),
        estimand: a.estimand.clone(),
        segments: clean(a.segment_by.clone()),
        method: a.method.clone(),
        adjust: a.adjust.clone().map(clean),
        mediators: a.mediators.clone().map(clean),
        instruments: a.instruments.clone().map(clean),
        instrument_given: clean(a.instrument_given.clone()),
        spelling: Default::default(),
    }
}

/// The request the flags describe: a study file or `--graph` with question flags, and the
/// source and estimation flags in place of the study's.
fn request_of(a: &Args) -> Result<Request, Failure> {
    Ok(Request {
        db: a.db.clone(),
        source: a.source.clone(),
        filter: a.filter.clone(),
        unit: a.unit.clone(),
        folds: a.folds,
        clip: a.clip,
        on_null: a.on_null.clone(),
        squares: a.squares,
        interactions: a.interactions,
        min_cell: a.min_cell,
        coarsen: a.coarsen.clone(),
        neighbours: a.neighbours,
        caliper: a.caliper,
        bins: a.bins,
        ..request(a.study.as_deref(), a.graph.as_deref(), overrides(a))?
    })
}

/// `upshot plan`.
pub fn run_plan(a: Args) -> Result<i32, Failure> {
    if a.into.is_some() || a.run_key.is_some() || a.rows_into.is_some() || a.replace {
        return Err(Failure::input(
            "--into, --run-key, --rows-into and --replace belong to `upshot run`; `plan` writes nothing",
        ));
    }
    if a.timeout.is_some() {
        return Err(Failure::input(
            "--timeout belongs to `upshot run`; `plan` runs nothing",
        ));
    }
    let json = match a.format.as_str() {
        "text" => false,
        "json" => true,
        f => {
            return Err(Failure::input(format!(
                "--format: unknown format `{f}` for plan; expected text or json"
            )))
        }
    };
    let request = request_of(&a)?;
    let study = request.study("plan")?;
    let d: &'static dyn Dialect = match a.dialect.as_deref() {
        // Without --dialect: the dialect of the engine `run` would open (--db, or the study's).
        None => {
            upshot_core::connector(ENGINES, &upshot_core::database_of(&study))
                .map_err(|e| Failure::input(format!("--db: {e}")))?
                .dialect()
        }
        Some("duckdb-plain") => {
            return Err(Failure::input(
                "--dialect: `duckdb-plain` is now `--dialect duckdb --portable` (upshot's functions are a fact about the database, not a dialect)",
            ))
        }
        Some(n) => dialect_by_name(n).ok_or_else(|| {
            Failure::input(format!(
                "--dialect: unknown dialect `{n}`; expected one of {}",
                DIALECTS
                    .iter()
                    .map(|d| d.name())
                    .collect::<Vec<_>>()
                    .join(", ")
            ))
        })?,
    };
    // DuckDB as `run` opens it has upshot's functions; other databases, and --portable, not.
    let flavor = if d.name() == "duckdb" && !a.portable {
        Flavor::duckdb()
    } else {
        Flavor::plain(d)
    };
    let resolved =
        upshot_core::resolve(&study, a.question.as_deref(), &request.settings()?, flavor)?;
    let plans = resolved
        .iter()
        .map(upshot_core::plan)
        .collect::<Result<Vec<_>, _>>()?;
    let out = if json {
        render::plan_json(&plans)?
    } else {
        render::plan_text(&plans)
    };
    emit(&out)?;
    Ok(OK)
}

/// Shows one line of progress on a terminal; silent otherwise.
struct Progress {
    on: bool,
    count: usize,
}

impl Progress {
    fn pass(&mut self, question: &str, name: &str) {
        self.count += 1;
        if self.on {
            const SPIN: [char; 4] = ['|', '/', '-', '\\'];
            let mut err = std::io::stderr();
            let _ = write!(
                err,
                "\r\x1b[2K{} {question}: pass {} ({name})",
                SPIN[self.count % 4],
                self.count
            );
            let _ = err.flush();
        }
    }
    fn done(&self) {
        if self.on {
            let _ = write!(std::io::stderr(), "\r\x1b[2K");
        }
    }
}

/// `upshot run`.
pub fn run_run(a: Args) -> Result<i32, Failure> {
    let format = a.format.as_str();
    if !matches!(format, "text" | "json" | "csv") {
        return Err(Failure::input(format!(
            "--format: unknown format `{format}`; expected text, json or csv"
        )));
    }
    if a.dialect.is_some() || a.portable {
        return Err(Failure::input(
            "--dialect and --portable belong to `upshot plan`; `run` uses the engine's dialect",
        ));
    }
    if a.run_key.as_deref().is_some_and(|k| k.trim().is_empty()) {
        return Err(Failure::input(
            "--run-key: empty; name the run (for example daily-2026-12-03), or leave the flag out",
        ));
    }
    if a.timeout == Some(0) {
        return Err(Failure::input(
            "--timeout: 0 seconds; give the most seconds a pass may take (for example 600), or leave the flag out",
        ));
    }
    if a.run_key.is_some() && a.into.is_none() {
        return Err(Failure::input(
            "--run-key needs --into TABLE (it names a run in the results table)",
        ));
    }
    if a.replace && a.rows_into.is_none() {
        return Err(Failure::input(
            "--replace needs --rows-into TABLE (it allows that table to be replaced)",
        ));
    }
    let rows_into = a.rows_into.as_ref().map(|table| upshot_core::RowsInto {
        table: table.clone(),
        replace: a.replace,
    });
    let request = request_of(&a)?;
    let study = request.study("run")?;
    let settings = request.settings()?;
    // The engine's dialect parses user SQL; nothing is opened before every question resolves.
    let locator = upshot_core::database_of(&study);
    let connector = upshot_core::connector(ENGINES, &locator)
        .map_err(|e| Failure::input(format!("--db: {e}")))?;
    let resolved = upshot_core::resolve(
        &study,
        a.question.as_deref(),
        &settings,
        Flavor::plain(connector.dialect()),
    )?;
    if let Some(r) = &rows_into {
        upshot_core::check_rows_request(&resolved, r)?;
    }
    let access = if a.into.is_some() || rows_into.is_some() {
        Access::ReadWrite
    } else {
        Access::ReadOnly
    };
    let whence = if a.db.is_some() {
        "--db"
    } else {
        "[source] database"
    };
    let engine = connector
        .connect(&locator, access, &upshot_core::files_of(&study))
        .map_err(|e| crate::exit::opening(whence, e))?;
    if let Some(seconds) = a.timeout {
        engine
            .limit_time(std::time::Duration::from_secs(seconds))
            .map_err(|e| crate::exit::opening(whence, e))?;
    }
    if let Some(table) = &a.into {
        upshot_core::check_results_table(engine.as_ref(), table)?;
    }
    if a.into.is_some() && !engine.capabilities().durable {
        return Err(Failure::input(
            "--into needs a database file to write to: give --db FILE (a DuckDB file; it is created if missing)",
        ));
    }
    if let Some(r) = &rows_into {
        upshot_core::check_rows_table(engine.as_ref(), r)?;
    }
    let mut progress = Progress {
        on: std::io::stderr().is_terminal() && format == "text",
        count: 0,
    };
    let answers = upshot_core::run(engine.as_ref(), resolved, &mut |q, p| progress.pass(q, p));
    progress.done();
    let answers = answers?;
    let out = match format {
        "json" => render::run_json(&study, &answers)?,
        "csv" => render::run_csv(&answers),
        _ => render::run_text(&answers),
    };
    if a.into.is_none() && rows_into.is_none() {
        emit(&out)?;
        return Ok(OK);
    }
    // The tables are written, then the output, then the transaction commits: all or nothing.
    let mut out = out;
    if format == "text" {
        if let Some(r) = &rows_into {
            out.push_str(&format!(
                "one row per matched unit written to {}\n",
                r.table
            ));
        }
        if let Some(table) = &a.into {
            out.push_str(&format!("estimates appended to {table}\n"));
        }
    }
    upshot_core::write_results(
        engine.as_ref(),
        upshot_core::Writes {
            into: a.into.as_deref(),
            run_key: a.run_key.as_deref(),
            rows_into: rows_into.as_ref(),
        },
        &study,
        &answers,
        &mut || emit(&out).map_err(|f| f.message),
    )?;
    Ok(OK)
}
