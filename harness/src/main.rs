//! The `gripsweep` command: parses flags and hands the work to the library (`gripsweep::*`).
//! Output for programs goes to stdout, messages to stderr; bad input exits with code 2.

use clap::{Parser, Subcommand};
use gripsweep::cli_robot::{self, CliError, RobotArgs};
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
    /// Load a robot (facts TOML + URDF, a bare URDF, or the embedded demo quadruped) and report
    /// its model: coordinates, bodies, joints with limits, mass, centre of mass, feet; with
    /// --state, the dynamics terms at one state as JSON.
    Robot(RobotArgs),
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    let outcome = match &cli.command {
        Command::Robot(args) => cli_robot::run(args),
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
        Err(CliError(msg)) => {
            eprintln!("gripsweep: {msg}");
            ExitCode::from(CliError::EXIT_CODE)
        }
    }
}
