//! The `gripsweep` command line as a library function, so that a user's crate gets the whole
//! front end with its own laws added: `fn main() -> ExitCode { gripsweep::cli::main_with_laws(
//! vec![my_law::entry()]) }` (README, "Bringing your own controller"). Output for programs
//! goes to stdout, messages to stderr; bad input exits with code 2.

use crate::cli_robot::{self, CliError, RobotArgs};
use crate::cli_run::{self, CheckArgs, MergeArgs, ReportArgs, RunArgs, TraceArgs, TuneArgs};
use clap::{Parser, Subcommand};
use gripsweep_controllers::laws::{LawEntry, Registry, registry};
use std::io::Write;
use std::process::ExitCode;

/// Simulates legged robots under interchangeable whole-body control laws and reports which law
/// keeps the feet from slipping, tracks the plan and stays within torque limits.
#[derive(Parser, Debug)]
#[command(name = "gripsweep", version, about, long_about = None)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand, Debug)]
enum Command {
    /// Run a scenario matrix (default: the embedded default scenario) and write cells.csv,
    /// manifest.json, summary.md/.csv, report.html and plots/ into the output folder.
    Run(RunArgs),
    /// Tune every (law, control rate, actuator) the scenario needs, as `run` does before its
    /// cells, and print the tuning table as CSV.
    Tune(TuneArgs),
    /// Validate a scenario without running it; print the cell count and an estimated run time.
    Check(CheckArgs),
    /// Run one cell chosen by its axis values and write its time series as CSV, and beside it a
    /// self-contained HTML page that replays it.
    Trace(TraceArgs),
    /// Rebuild summary.md, summary.csv, report.html and plots/ of a run folder from its cells.csv.
    Report(ReportArgs),
    /// Join the folders of a sharded run into the result an unsharded run gives.
    Merge(MergeArgs),
    /// Load a robot (facts TOML + URDF, a bare URDF, or the embedded demo quadruped) and report
    /// its model: coordinates, bodies, joints with limits, mass, centre of mass, feet; with
    /// --state, the dynamics terms at one state as JSON.
    Robot(RobotArgs),
    /// Run the scenario at a ladder of plant settings (step, substeps, contact stiffness) and
    /// compare every output the summary uses, and every verdict, with the finest rung.
    Ladder(crate::ladder::LadderArgs),
}

/// The whole command-line front end over the built-in laws.
pub fn main() -> ExitCode {
    main_with(Registry::builtin())
}

/// The whole command-line front end with the built-in laws plus `laws` (a user crate's
/// `main` is this one line). A name clash (with a built-in law, a former name or another of
/// `laws`) exits with code 2 and names the law.
pub fn main_with_laws(laws: Vec<LawEntry>) -> ExitCode {
    let mut reg = Registry::builtin();
    for law in laws {
        if let Err(e) = reg.add(law) {
            eprintln!("gripsweep: {e}");
            return ExitCode::from(2);
        }
    }
    main_with(reg)
}

/// The whole command-line front end with `registry` as the process's law registry (installed
/// before any argument is read, so every command — `run`, `check`, `tune`, `trace` — sees
/// the same laws and validates their `[laws.<name>]` tables from their declarations).
pub fn main_with(registry: Registry) -> ExitCode {
    registry::install(registry);
    let cli = Cli::parse();
    let outcome = match &cli.command {
        Command::Robot(args) => {
            cli_robot::run(args).map_err(|CliError(m)| (m, CliError::EXIT_CODE))
        }
        Command::Run(a) => cli_run::cmd_run(a).map_err(into_cli),
        Command::Tune(a) => cli_run::cmd_tune(a).map_err(into_cli),
        Command::Check(a) => cli_run::cmd_check(a).map_err(into_cli),
        Command::Trace(a) => cli_run::cmd_trace(a).map_err(into_cli),
        Command::Report(a) => cli_run::cmd_report(a).map_err(into_cli),
        Command::Merge(a) => cli_run::cmd_merge(a).map_err(into_cli),
        Command::Ladder(a) => crate::ladder::cmd_ladder(a).map_err(into_cli),
    };
    match outcome {
        Ok(text) => {
            // A closed pipe (e.g. `| head`) is not an error worth a message.
            let mut out = std::io::stdout().lock();
            match out.write_all(text.as_bytes()).and_then(|()| out.flush()) {
                Ok(()) => ExitCode::SUCCESS,
                Err(e) if e.kind() == std::io::ErrorKind::BrokenPipe => ExitCode::SUCCESS,
                Err(e) => {
                    eprintln!("gripsweep: cannot write to stdout: {e}");
                    ExitCode::FAILURE
                }
            }
        }
        Err((msg, code)) => {
            eprintln!("gripsweep: {msg}");
            ExitCode::from(code)
        }
    }
}

fn into_cli(e: crate::runner::RunError) -> (String, u8) {
    (e.message, e.code as u8)
}
