//! `upshot`: causal effects computed inside the database. This binary binds flags and renders
//! results; every step in between — identification, route and method choice, source
//! resolution, plans, runs, the results table — is the core library's (`upshot-core`).
//! Exit codes are documented in README.md and in [`exit`].

mod check;
mod demo;
mod estimate;
mod exit;
mod render;

use clap::{Parser, Subcommand};
use exit::Failure;

/// The engines this binary links: the one place an engine is registered with the CLI.
pub(crate) static ENGINES: &[&dyn upshot_core::Connector] = &[
    &upshot_engine_duckdb::DUCKDB,
    &upshot_engine_postgres::POSTGRES,
    &upshot_engine_spark::SPARK,
];

#[derive(Parser)]
#[command(name = "upshot", version, about = "Causal effects computed inside the database", long_about = None)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Decide whether each question's effect is identified, and by which routes.
    Check(Box<check::Args>),
    /// List the SQL passes each question's estimate runs, in order, without running them.
    Plan(Box<estimate::Args>),
    /// Estimate each question's effect in the database and report it.
    Run(Box<estimate::Args>),
    /// Write the demo scenario's rows and truth files.
    Demo(demo::Args),
}

fn main() {
    let cli = Cli::parse();
    let result: Result<i32, Failure> = match cli.command {
        Command::Check(a) => check::run(*a),
        Command::Plan(a) => estimate::run_plan(*a),
        Command::Run(a) => estimate::run_run(*a),
        Command::Demo(a) => demo::run(a),
    };
    match result {
        Ok(code) => std::process::exit(code),
        Err(f) => {
            use std::io::Write as _;
            let shown = upshot_core::printable(&f.message);
            let _ = writeln!(std::io::stderr(), "upshot: error: {shown}");
            std::process::exit(f.code);
        }
    }
}
