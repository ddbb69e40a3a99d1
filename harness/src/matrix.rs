//! The scenario matrix: expansion into cells, each with a stable id and RNG seed derived from
//! its axis values (never from its position), so results are identical for any thread count,
//! order, resume or sharding.

use crate::plant::actuator::ActuatorKind;
use crate::scenario::{Axes, Scenario};
use sha2::{Digest, Sha256};

/// The axes of the matrix, as users name them (scenario fields, `cells.csv` columns, `--pick`).
pub const AXIS_NAMES: [&str; 9] = [
    "slope_deg",
    "mu",
    "rate_hz",
    "actuator",
    "controller",
    "mass_scale",
    "com_shift_mm",
    "sensor_noise",
    "seed",
];

#[derive(Clone, Debug, PartialEq)]
pub struct Cell {
    /// Position in the matrix (the order of rows in a finished `cells.csv`).
    pub index: usize,
    pub slope_deg: f64,
    pub mu: f64,
    pub rate_hz: f64,
    pub actuator: ActuatorKind,
    pub controller: String,
    pub mass_scale: f64,
    pub com_shift_mm: f64,
    pub sensor_noise: f64,
    /// Seed number, 0-based.
    pub seed: u32,
    // --- issue 14 (world14): the world axes (crate::scenario_world) ---
    pub world: crate::scenario_world::WorldCell,
    // --- end issue 14 ---
}

impl Cell {
    /// Canonical text of the axis values (Rust's shortest round-trip float formatting).
    pub fn key(&self) -> String {
        format!(
            "slope_deg={};mu={};rate_hz={};actuator={};controller={};mass_scale={};com_shift_mm={};sensor_noise={};seed={}",
            self.slope_deg,
            self.mu,
            self.rate_hz,
            self.actuator.name(),
            self.controller,
            self.mass_scale,
            self.com_shift_mm,
            self.sensor_noise,
            self.seed
        ) + &self.world.key_suffix() // issue 14 (world14): empty at the defaults
    }

    fn digest(&self) -> [u8; 32] {
        Sha256::digest(self.key().as_bytes()).into()
    }

    /// Stable id: 16 hex digits of SHA-256 of the key.
    pub fn id(&self) -> String {
        self.digest()[..8]
            .iter()
            .map(|b| format!("{b:02x}"))
            .collect()
    }

    /// RNG seed of the cell (noise, initial jitter), from the other half of the digest.
    pub fn rng_seed(&self) -> u64 {
        u64::from_le_bytes(self.digest()[8..16].try_into().expect("8 bytes"))
    }
}

/// All cells in matrix order: slope, μ, rate, actuator, controller, mass scale, CoM shift,
/// noise, seed (the last varies fastest).
pub fn expand(s: &Scenario) -> Vec<Cell> {
    expand_axes(&s.axes, s.seeds)
}

/// [`expand`] from the axes and the seed count alone (a manifest records both). The caller
/// bounds the size (a validated scenario has at most [`crate::limits::MAX_CELLS`] cells).
pub fn expand_axes(a: &Axes, seeds: u32) -> Vec<Cell> {
    let mut out = Vec::with_capacity(a.len_product(seeds).unwrap_or(0));
    let worlds = a.world.combos(); // issue 14 (world14)
    for &slope_deg in &a.slope_deg {
        for &mu in &a.mu {
            for &rate_hz in &a.rate_hz {
                for &actuator in &a.actuator {
                    for controller in &a.controller {
                        for &mass_scale in &a.mass_scale {
                            for &com_shift_mm in &a.com_shift_mm {
                                for &sensor_noise in &a.sensor_noise {
                                    // issue 14 (world14): the world axes, before the seed
                                    for world in &worlds {
                                        for seed in 0..seeds {
                                            out.push(Cell {
                                                index: out.len(),
                                                slope_deg,
                                                mu,
                                                rate_hz,
                                                actuator,
                                                controller: controller.clone(),
                                                mass_scale,
                                                com_shift_mm,
                                                sensor_noise,
                                                seed,
                                                world: world.clone(),
                                            });
                                        }
                                    }
                                }
                            }
                        }
                    }
                }
            }
        }
    }
    out
}

/// A deterministic 1/K of the cells: shard `i` (0-based) takes the cells whose index ≡ i mod K,
/// which spreads every axis evenly over the shards.
pub fn shard(cells: Vec<Cell>, i: usize, k: usize) -> Vec<Cell> {
    cells.into_iter().filter(|c| c.index % k == i).collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn cell(mu: f64, seed: u32) -> Cell {
        Cell {
            index: 0,
            slope_deg: 10.0,
            mu,
            rate_hz: 1000.0,
            actuator: ActuatorKind::Ideal,
            controller: "id-lean".into(),
            mass_scale: 1.0,
            com_shift_mm: 0.0,
            sensor_noise: 0.0,
            seed,
            world: Default::default(),
        }
    }

    #[test]
    fn ids_depend_on_axis_values_only() {
        let a = cell(0.4, 0);
        let mut b = a.clone();
        b.index = 17;
        assert_eq!(a.id(), b.id());
        assert_eq!(a.rng_seed(), b.rng_seed());
        assert_ne!(a.id(), cell(0.5, 0).id());
        assert_ne!(a.rng_seed(), cell(0.4, 1).rng_seed());
        assert_eq!(a.id().len(), 16);
    }

    #[test]
    fn shards_partition_the_matrix() {
        let cells: Vec<Cell> = (0..10)
            .map(|i| Cell {
                index: i,
                ..cell(0.1 * i as f64 + 0.1, 0)
            })
            .collect();
        let mut all: Vec<usize> = (0..3)
            .flat_map(|i| shard(cells.clone(), i, 3))
            .map(|c| c.index)
            .collect();
        all.sort();
        assert_eq!(all, (0..10).collect::<Vec<_>>());
    }
}
