//! gripsweep: the harness that runs control laws against a physics plant and reduces the runs
//! to evidence. `main.rs` is a thin shell over this library.

pub mod cell;
pub mod cli;
pub mod cli_robot;
pub mod cli_run;
pub mod floor;
pub mod infer;
pub mod ladder;
pub mod limits;
pub mod matrix;
pub mod meshes;
pub mod metrics;
pub mod onset;
pub mod pipe_law;
pub mod planner;
pub mod plant;
pub mod quantiles;
pub mod report;
pub mod robot;
pub mod run_folder;
pub mod run_format;
pub mod runner;
pub mod scenario;
pub mod scenario_world;
pub mod tuning;
pub mod world_metrics;

pub use gripsweep_controllers as controllers;

#[cfg(test)]
mod axis_table_tests;
/// The law registry and what a law of your own needs (README, "Bringing your own controller").
pub use gripsweep_controllers::laws::{
    ControlLaw, FieldKind, LawEntry, LawField, LawSettings, LawStatus, Observation, Registry,
    Target,
};
