//! The robot model and the control laws of gripsweep. This crate knows nothing of the physics
//! engine, files or the scenario matrix: it takes URDF text and state vectors and returns
//! dynamics terms and torques.

// Index loops mirror the equations (row r, column c) in the numerical code.
#![allow(clippy::needless_range_loop)]

pub mod algorithms;
pub mod configuration;
pub mod dense;
pub mod laws;
pub mod model;
pub mod robot_facts;
pub mod spatial;
#[cfg(test)]
mod test_robots;

pub use algorithms::Workspace;
pub use model::{Model, ModelError, RootKind};
pub use robot_facts::RobotFacts;
