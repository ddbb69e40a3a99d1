//! The scenario matrix: expansion into cells, each with a stable id and RNG seed derived from
//! its axis values (never from its position), so results are identical for any thread count,
//! order, resume or sharding. The axes themselves are the table [`crate::run_format::AXES`].

use crate::plant::actuator::ActuatorKind;
use crate::run_format::{AXES, AxisValue, axis, axis_columns, cell_key};
use crate::scenario::{Axes, Scenario};
use sha2::{Digest, Sha256};

/// The axes of the matrix and the seed, as users name them (scenario fields, `cells.csv`
/// columns, `--pick`), in table order.
pub fn axis_names() -> Vec<&'static str> {
    axis_columns()
}

#[derive(Clone, Debug, PartialEq)]
pub struct Cell {
    /// Position in the matrix (the order of rows in a finished `cells.csv`).
    pub index: usize,
    /// One value per axis of [`AXES`], in table order.
    pub values: Vec<AxisValue>,
    /// Seed number, 0-based.
    pub seed: u32,
}

impl Cell {
    /// A cell at the first value of every axis of `axes` (a convenience for probes, tests and
    /// benchmarks, which then [`Cell::set`] what they vary).
    pub fn first_of(axes: &Axes) -> Cell {
        Cell {
            index: 0,
            values: axes.values.iter().map(|v| v[0].clone()).collect(),
            seed: 0,
        }
    }

    /// A probe cell (the slip floor, a tuning run): every axis at its neutral value (flat
    /// ground, the true model, no noise), the ones without one given here.
    pub fn probe(mu: f64, rate_hz: f64, actuator: ActuatorKind, controller: &str) -> Cell {
        let values = AXES
            .iter()
            .map(|a| match (a.neutral_value(), a.kind) {
                (Some(x), _) => x,
                (None, crate::run_format::AxisKind::Number) => AxisValue::Number(f64::NAN),
                (None, crate::run_format::AxisKind::Name) => AxisValue::Name(String::new()),
            })
            .collect();
        Cell {
            index: 0,
            values,
            seed: 0,
        }
        .set("mu", mu)
        .set("rate_hz", rate_hz)
        .set("actuator", actuator.name())
        .set("controller", controller)
    }

    /// The same cell with one axis set (by its table name).
    pub fn set(mut self, name: &str, value: impl Into<AxisValue>) -> Cell {
        self.values[axis(name)] = value.into();
        self
    }

    /// The value of an axis, by its table name.
    pub fn value(&self, name: &str) -> &AxisValue {
        &self.values[axis(name)]
    }

    /// A number axis's value (NaN if the axis holds names: a table error caught by tests).
    pub fn number(&self, name: &str) -> f64 {
        self.value(name).number().unwrap_or(f64::NAN)
    }

    /// A name axis's value.
    pub fn name(&self, name: &str) -> &str {
        self.value(name).name().unwrap_or("")
    }

    pub fn slope_deg(&self) -> f64 {
        self.number("slope_deg")
    }
    pub fn mu(&self) -> f64 {
        self.number("mu")
    }
    pub fn rate_hz(&self) -> f64 {
        self.number("rate_hz")
    }
    /// The actuator model (validated against [`ActuatorKind`] by the scenario and the manifest
    /// reader, so a name it does not know cannot reach a cell).
    pub fn actuator(&self) -> ActuatorKind {
        ActuatorKind::parse(self.name("actuator")).unwrap_or(ActuatorKind::Ideal)
    }
    pub fn controller(&self) -> &str {
        self.name("controller")
    }
    pub fn mass_scale(&self) -> f64 {
        self.number("mass_scale")
    }
    pub fn com_shift_mm(&self) -> f64 {
        self.number("com_shift_mm")
    }
    pub fn sensor_noise(&self) -> f64 {
        self.number("sensor_noise")
    }

    /// Canonical text of the axis values (Rust's shortest round-trip float formatting):
    /// [`crate::run_format::cell_key`].
    pub fn key(&self) -> String {
        cell_key(&self.values, self.seed)
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

    /// The identity columns of the cell as `cells.csv` writes them (id, index, every axis,
    /// seed), by column name.
    pub fn identity(&self, id: String) -> Vec<(&'static str, String)> {
        let mut out = vec![("cell_id", id), ("index", self.index.to_string())];
        out.extend(
            AXES.iter()
                .zip(&self.values)
                .map(|(a, v)| (a.name, v.text())),
        );
        out.push((crate::run_format::SEED, self.seed.to_string()));
        out
    }

    /// A `cells.csv` row in [`crate::run_format::cells_header`] order: identity and the first
    /// axes, the outcome, the metric texts, then the axes written after the metrics
    /// ([`crate::run_format::late_axis_columns`]).
    pub fn csv_record(
        &self,
        id: String,
        status: &str,
        message: &str,
        metrics: impl IntoIterator<Item = String>,
    ) -> Vec<String> {
        let identity = self.identity(id);
        let text = |col: &str| {
            identity
                .iter()
                .find(|(n, _)| *n == col)
                .map(|(_, v)| v.clone())
                .unwrap_or_default()
        };
        let mut r: Vec<String> = crate::run_format::cell_columns()
            .into_iter()
            .take_while(|c| *c != "status")
            .map(text)
            .collect();
        r.push(status.to_string());
        r.push(message.to_string());
        r.extend(metrics);
        r.extend(crate::run_format::late_axis_columns().into_iter().map(text));
        r
    }
}

/// All cells in matrix order: the axes in table order, then the seed (the last varies
/// fastest).
pub fn expand(s: &Scenario) -> Vec<Cell> {
    expand_axes(&s.axes, s.seeds)
}

/// [`expand`] from the axes and the seed count alone (a manifest records both). The caller
/// bounds the size (a validated scenario has at most [`crate::limits::MAX_CELLS`] cells).
pub fn expand_axes(a: &Axes, seeds: u32) -> Vec<Cell> {
    let n = a.len_product(seeds).unwrap_or(0);
    let mut out = Vec::with_capacity(n);
    if n == 0 {
        return out;
    }
    // An odometer over the axes, the last axis fastest, then the seed.
    let mut pos = vec![0usize; a.values.len()];
    loop {
        let values: Vec<AxisValue> = a
            .values
            .iter()
            .zip(&pos)
            .map(|(v, &i)| v[i].clone())
            .collect();
        for seed in 0..seeds {
            out.push(Cell {
                index: out.len(),
                values: values.clone(),
                seed,
            });
        }
        let mut k = pos.len();
        loop {
            if k == 0 {
                return out;
            }
            k -= 1;
            pos[k] += 1;
            if pos[k] < a.values[k].len() {
                break;
            }
            pos[k] = 0;
        }
    }
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
            values: vec![
                10.0.into(),
                mu.into(),
                1000.0.into(),
                "ideal".into(),
                "min-torque-id".into(),
                1.0.into(),
                0.0.into(),
                0.0.into(),
            ],
            seed,
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
