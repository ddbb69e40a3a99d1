pub use gripsweep_controllers;
