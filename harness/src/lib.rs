pub use gripsweep_controllers;
pub mod cli_robot;
