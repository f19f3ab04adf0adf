//! `upshot`: causal effects computed inside the database. This binary is a thin layer over the
//! library crates: it parses flags, loads studies, calls the libraries and prints results.
//! Exit codes are documented in README.md and in [`exit`].

mod check;
mod demo;
mod estimate;
mod exit;

use clap::{Parser, Subcommand};
use exit::Failure;

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
            eprintln!("upshot: error: {}", f.message);
            std::process::exit(f.code);
        }
    }
}
