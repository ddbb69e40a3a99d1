//! The run format: what a run folder holds and how its rows are spelled, in one place that
//! depends on nothing else in this crate. The runner writes with it; `merge`, `--resume`, the
//! slip-onset study, the report and `trace` read with it, and the tests check against it.
//!
//! - the file names of a run folder;
//! - [`Outcome`], how a cell ended (the `status` column), once;
//! - [`METRICS`], the metric columns of `cells.csv` (name, unit), in file order;
//! - [`AXES`], the one axis table: for each scenario axis its name (the `[axes]` field, the
//!   `cells.csv` column, the cell-key name and the `--pick` name), its validation, its default,
//!   the canonical text of a value, and how the report labels it. Adding an axis is one entry
//!   here plus its use in the cell (DEVELOPERS.md, "Adding a scenario axis");
//! - [`Manifest`], the typed `manifest.json`: every field required, a missing one an error
//!   naming the file and the field.

use serde::{Deserialize, Deserializer, Serialize};
use std::path::Path;

/// One row per cell: identity, axes, outcome, metrics (matrix order once the run finished).
pub const CELLS_FILE: &str = "cells.csv";
/// Machine measurements per cell, kept apart so `cells.csv` is identical across machines.
pub const TIMING_FILE: &str = "timing.csv";
/// What the run was made from and of ([`Manifest`]).
pub const MANIFEST_FILE: &str = "manifest.json";
/// The slip-onset study's rows (a scenario with an `[onset]` table).
pub const ONSET_FILE: &str = "onset.csv";
/// The tuning table the cells ran with.
pub const GAINS_FILE: &str = "gains.csv";

/// The columns of `timing.csv`.
/// `child_*`: a piped law's own compute time as its program reports it (NaN for built-in
/// laws); `compute_*` is the law call as the cell sees it (for a piped law, the round trip).
pub const TIMING_COLUMNS: [&str; 6] = [
    "cell_id",
    "compute_median_us",
    "compute_p99_us",
    "child_median_us",
    "child_p99_us",
    "wall_s",
];

/// Rust's shortest round-trip formatting: bit-identical text for bit-identical numbers. Every
/// number in a cell key and a CSV row is written with it.
pub fn num_text(x: f64) -> String {
    format!("{x}")
}

// ---------------------------------------------------------------------------------------------
// Outcomes

/// How a cell ended, as the `status` column spells it.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum Outcome {
    Ok,
    /// The law reported it could not satisfy its constraints on more than the infeasible share
    /// of its control steps (`metrics::INFEASIBLE_SHARE`; the robot stayed up).
    Infeasible,
    /// The robot stayed up to the end but the law did not control it: the torques sat at their
    /// limits, the base drifted far from the plan, or a joint's torque oscillated.
    NoControl,
    /// Trunk low, trunk or leg touching the ground, or tilted beyond the limit.
    Fell,
    /// Non-finite state or the engine quarantined a body.
    Diverged,
    /// The cell could not be set up (e.g. the plan does not fit the slope).
    Error,
}

impl Outcome {
    /// Every outcome, in the column order of the report's outcomes table.
    pub const ALL: [Outcome; 6] = [
        Outcome::Ok,
        Outcome::Infeasible,
        Outcome::NoControl,
        Outcome::Fell,
        Outcome::Diverged,
        Outcome::Error,
    ];

    /// The text in the `status` column.
    pub fn name(self) -> &'static str {
        match self {
            Outcome::Ok => "ok",
            Outcome::Infeasible => "infeasible",
            Outcome::NoControl => "no-control",
            Outcome::Fell => "fell",
            Outcome::Diverged => "diverged",
            Outcome::Error => "error",
        }
    }

    pub fn parse(s: &str) -> Option<Outcome> {
        Outcome::ALL.into_iter().find(|o| o.name() == s)
    }

    /// The names, comma-separated, for messages.
    pub fn names() -> String {
        Outcome::ALL.map(Outcome::name).join(", ")
    }

    /// Runs whose numbers enter means and rankings: only those that held and whose law
    /// controlled the robot and met its constraints. An infeasible or no-control run went the
    /// whole duration, but what it measures is the law giving way, not the law; a run that
    /// fell or diverged stopped early and its averages cover a different, shorter motion.
    /// Every other outcome is counted and shown beside its condition, never ranked.
    pub fn counts_for_means(self) -> bool {
        matches!(self, Outcome::Ok)
    }

    /// Runs that stayed up to the end of the plan (whatever their law did).
    pub fn held(self) -> bool {
        matches!(self, Outcome::Ok | Outcome::Infeasible | Outcome::NoControl)
    }

    /// Runs the robot did not survive.
    pub fn is_fall(self) -> bool {
        matches!(self, Outcome::Fell | Outcome::Diverged)
    }

    /// Whether the run counts as a failure in the runner's progress line (anything not ok).
    pub fn is_failure(self) -> bool {
        self != Outcome::Ok
    }
}

// ---------------------------------------------------------------------------------------------
// Metrics

/// One metric column of `cells.csv`.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct MetricColumn {
    /// Column name in `cells.csv` (and metric name in `summary.csv`).
    pub name: &'static str,
    /// Unit, SI ("1" for a share or a ratio, "count" for a count).
    pub unit: &'static str,
}

const fn metric(name: &'static str, unit: &'static str) -> MetricColumn {
    MetricColumn { name, unit }
}

/// The metric columns of `cells.csv`, in file order (`metrics::CellMetrics::values` and the
/// report's `Metric` follow it; a test checks both).
pub const METRICS: [MetricColumn; 29] = [
    metric("sim_time_s", "s"),
    metric("slip_mean_mm", "mm"),
    metric("slip_max_mm", "mm"),
    metric("slip_total_mm", "mm"),
    metric("stance_phases", "count"),
    metric("base_pos_rms_mm", "mm"),
    metric("base_orient_rms_deg", "deg"),
    metric("joint_rms_deg", "deg"),
    metric("progress_m", "m"),
    metric("progress_planned_m", "m"),
    metric("torque_rms_nm", "N·m"),
    metric("torque_peak_nm", "N·m"),
    metric("torque_limit_share", "1"),
    metric("energy_j", "J"),
    metric("friction_use_max", "1"),
    metric("friction_over_share", "1"),
    metric("law_trouble_share", "1"),
    metric("law_solved_share", "1"),
    metric("law_infeasible_share", "1"),
    metric("law_underactuated_share", "1"),
    metric("law_failed_share", "1"),
    metric("stance_off_ground_share", "1"),
    metric("torque_flip_rate_hz", "Hz"),
    // The world metrics (issue 14; crate::world_metrics), NaN where they do not apply.
    metric("touchdown_force_peak_bw", "1"),
    metric("torque_rate_peak_nm_per_s", "N·m/s"),
    metric("push_displacement_mm", "mm"),
    metric("push_recovery_s", "s"),
    metric("step_early_share", "1"),
    metric("step_late_share", "1"),
];

/// The metric column names, in file order.
pub const fn metric_columns() -> [&'static str; METRICS.len()] {
    let mut out = [""; METRICS.len()];
    let mut i = 0;
    while i < METRICS.len() {
        out[i] = METRICS[i].name;
        i += 1;
    }
    out
}

// ---------------------------------------------------------------------------------------------
// Axes

/// One value on an axis.
#[derive(Clone, Debug, PartialEq)]
pub enum AxisValue {
    Number(f64),
    Name(String),
}

impl AxisValue {
    /// The canonical text: shortest round-trip for numbers, the name as given. The cell key,
    /// the `cells.csv` column, `--pick` and the manifest all use it.
    pub fn text(&self) -> String {
        match self {
            AxisValue::Number(x) => num_text(*x),
            AxisValue::Name(n) => n.clone(),
        }
    }

    pub fn number(&self) -> Option<f64> {
        match self {
            AxisValue::Number(x) => Some(*x),
            AxisValue::Name(_) => None,
        }
    }

    pub fn name(&self) -> Option<&str> {
        match self {
            AxisValue::Number(_) => None,
            AxisValue::Name(n) => Some(n),
        }
    }
}

impl From<f64> for AxisValue {
    fn from(x: f64) -> Self {
        AxisValue::Number(x)
    }
}

impl From<&str> for AxisValue {
    fn from(n: &str) -> Self {
        AxisValue::Name(n.to_string())
    }
}

/// Whether an axis's values are numbers or names.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum AxisKind {
    Number,
    Name,
}

/// What validation and defaults may depend on beyond the value itself: the scenario's plant
/// rate and the names the crate knows (passed in, so this module depends on nothing).
#[derive(Clone, Copy, Debug)]
pub struct AxisContext<'a> {
    /// The plant rate, Hz (1 / `plant.dt`).
    pub plant_rate_hz: f64,
    /// The registered control laws (`axes.controller`).
    pub laws: &'a [&'a str],
    /// The actuator models (`axes.actuator`).
    pub actuators: &'a [&'a str],
    /// The scenario's `[terrain.<name>]`, `[patch.<name>]`, `[push.<name>]` tables, by name
    /// (`axes.terrain`, `axes.patch`, `axes.push` name one of them or the neutral name).
    pub terrains: &'a [&'a str],
    pub patches: &'a [&'a str],
    pub pushes: &'a [&'a str],
}

/// How an axis enters the cell key (the key feeds the cell id and the RNG seed).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum InKey {
    /// Always `name=text`.
    Always,
    /// Left out while the value is the axis's [`Axis::neutral`] value (the value that
    /// reproduces the matrix from before the axis existed), so adding an axis keeps every
    /// earlier cell's id and seed. Use this for every axis added from now on.
    UnlessNeutral,
}

/// One axis of the scenario matrix. The order of [`AXES`] is the order of the matrix (the last
/// varies fastest, then the seed), of the key, of the `cells.csv` columns and of the report.
#[derive(Clone, Copy, Debug)]
pub struct Axis {
    /// The user's spelling everywhere: `[axes]` field, `cells.csv` column, key, `--pick`.
    pub name: &'static str,
    pub kind: AxisKind,
    /// The values when the scenario leaves the field out.
    pub default: fn(&AxisContext) -> Vec<AxisValue>,
    /// `Err(allowed)`, the allowed values in words, when a value is not allowed.
    pub check: fn(&AxisValue, &AxisContext) -> Result<(), String>,
    pub in_key: InKey,
    /// The value at which the axis changes nothing (flat ground, the true model, no noise),
    /// `None` where there is none (μ, the rate, names). Probes (the slip floor, the tuning
    /// runs) put every axis they do not set at it.
    pub neutral: Option<f64>,
    /// The neutral value of a name axis (`plane`, `none`), `None` where there is none; the
    /// name-axis counterpart of [`Axis::neutral`].
    pub neutral_name: Option<&'static str>,
    /// What the axis is, for people (report text and headings).
    pub label: &'static str,
    /// A value with its unit for people ("slope 15°", "100 Hz"), from the canonical text.
    pub value_label: fn(&str) -> String,
    /// Whether the report groups conditions by it (every axis but the controller: the report
    /// compares controllers within a condition).
    pub condition: bool,
}

impl Axis {
    /// The `name=text` of a value in the cell key, or `None` when [`InKey::UnlessNeutral`]
    /// leaves it out.
    pub fn key_part(&self, v: &AxisValue) -> Option<String> {
        match self.in_key {
            InKey::UnlessNeutral if self.is_neutral(v) => None,
            _ => Some(format!("{}={}", self.name, v.text())),
        }
    }

    /// Whether the axis's `cells.csv` column comes after the metrics ([`late_axis_columns`]).
    pub fn after_metrics(&self) -> bool {
        self.in_key == InKey::UnlessNeutral
    }

    /// Whether `v` is the axis's neutral value (number or name).
    pub fn is_neutral(&self, v: &AxisValue) -> bool {
        match v {
            AxisValue::Number(x) => self.neutral == Some(*x),
            AxisValue::Name(n) => self.neutral_name == Some(n.as_str()),
        }
    }

    /// The neutral value, if the axis has one.
    pub fn neutral_value(&self) -> Option<AxisValue> {
        match (self.neutral, self.neutral_name) {
            (Some(x), _) => Some(AxisValue::Number(x)),
            (None, Some(n)) => Some(AxisValue::from(n)),
            (None, None) => None,
        }
    }

    /// The scenario field, for messages.
    pub fn field(&self) -> String {
        format!("axes.{}", self.name)
    }
}

fn number_in(v: &AxisValue, ok: impl Fn(f64) -> bool, allowed: &str) -> Result<(), String> {
    match v {
        AxisValue::Number(x) if x.is_finite() && ok(*x) => Ok(()),
        _ => Err(allowed.to_string()),
    }
}

fn name_in(v: &AxisValue, known: &[&str], what: &str) -> Result<(), String> {
    match v {
        AxisValue::Name(n) if known.contains(&n.as_str()) => Ok(()),
        _ => Err(format!("{what}: {}", known.join(", "))),
    }
}

fn numbers(v: &[f64]) -> Vec<AxisValue> {
    v.iter().map(|x| AxisValue::Number(*x)).collect()
}

/// The seed column: not an axis of this table (its values come from `seeds`), always last.
pub const SEED: &str = "seed";

/// The axis table. Keep each existing axis's name and position: the key text, and so every
/// cell's id and seed, is made from it. A new axis goes at the end, with
/// [`InKey::UnlessNeutral`] (DEVELOPERS.md, "Adding a scenario axis").
#[cfg(not(test))]
pub const AXES: &[Axis] = &TABLE;

/// In this crate's unit tests the table holds one more axis, `test_knob`, that nothing else in
/// the code names: the tests see it reach the key, `cells.csv` and the report through the
/// table alone (`harness/src/axis_table_tests.rs`).
#[cfg(test)]
pub const AXES: &[Axis] = &{
    let mut t = [TEST_KNOB; TABLE.len() + 1];
    let mut i = 0;
    while i < TABLE.len() {
        t[i] = TABLE[i];
        i += 1;
    }
    t
};

#[cfg(test)]
const TEST_KNOB: Axis = Axis {
    name: "test_knob",
    kind: AxisKind::Number,
    default: |_| numbers(&[0.0]),
    check: |v, _| number_in(v, |x| (0.0..=10.0).contains(&x), "0 ≤ knob ≤ 10"),
    in_key: InKey::UnlessNeutral,
    neutral: Some(0.0),
    neutral_name: None,
    label: "test knob",
    value_label: |t| format!("knob {t}"),
    condition: true,
};

const TABLE: [Axis; 15] = [
    Axis {
        name: "slope_deg",
        kind: AxisKind::Number,
        default: |_| numbers(&[0.0]),
        check: |v, _| number_in(v, |x| x.abs() < 60.0, "|slope| < 60°"),
        in_key: InKey::Always,
        neutral: Some(0.0),
        neutral_name: None,
        label: "slope",
        value_label: |t| format!("slope {t}°"),
        condition: true,
    },
    Axis {
        name: "mu",
        kind: AxisKind::Number,
        default: |_| numbers(&[0.6]),
        check: |v, _| number_in(v, |x| x > 0.0 && x <= 5.0, "0 < μ ≤ 5"),
        in_key: InKey::Always,
        neutral: None,
        neutral_name: None,
        label: "friction coefficient μ",
        value_label: |t| format!("μ {t}"),
        condition: true,
    },
    Axis {
        name: "rate_hz",
        kind: AxisKind::Number,
        default: |c| numbers(&[c.plant_rate_hz.round()]),
        check: |v, c| {
            let plant = c.plant_rate_hz;
            number_in(
                v,
                |x| {
                    let ratio = plant / x;
                    x >= 1.0 && x <= plant + 1e-9 && (ratio - ratio.round()).abs() < 1e-9
                },
                &format!(
                    "a control rate that divides the plant rate {plant} Hz (e.g. 100, 250, 500, 1000)"
                ),
            )
        },
        in_key: InKey::Always,
        neutral: None,
        neutral_name: None,
        label: "control rate",
        value_label: |t| format!("{t} Hz"),
        condition: true,
    },
    Axis {
        name: "actuator",
        kind: AxisKind::Name,
        default: |_| vec![AxisValue::from("ideal")],
        check: |v, c| name_in(v, c.actuators, "allowed"),
        in_key: InKey::Always,
        neutral: None,
        neutral_name: None,
        label: "actuator",
        value_label: |t| t.to_string(),
        condition: true,
    },
    Axis {
        name: "controller",
        kind: AxisKind::Name,
        default: |c| c.laws.iter().map(|n| AxisValue::from(*n)).collect(),
        check: |v, c| name_in(v, c.laws, "allowed"),
        in_key: InKey::Always,
        neutral: None,
        neutral_name: None,
        label: "controller",
        value_label: |t| t.to_string(),
        condition: false,
    },
    Axis {
        name: "mass_scale",
        kind: AxisKind::Number,
        default: |_| numbers(&[1.0]),
        check: |v, _| number_in(v, |x| x > 0.2 && x < 5.0, "0.2 < scale < 5"),
        in_key: InKey::Always,
        neutral: Some(1.0),
        neutral_name: None,
        label: "model mass scale",
        value_label: |t| format!("model mass ×{t}"),
        condition: true,
    },
    Axis {
        name: "com_shift_mm",
        kind: AxisKind::Number,
        default: |_| numbers(&[0.0]),
        check: |v, _| number_in(v, |x| x.abs() <= 200.0, "|shift| ≤ 200 mm"),
        in_key: InKey::Always,
        neutral: Some(0.0),
        neutral_name: None,
        label: "model CoM shift",
        value_label: |t| format!("model CoM shift {t} mm"),
        condition: true,
    },
    Axis {
        name: "sensor_noise",
        kind: AxisKind::Number,
        default: |_| numbers(&[0.0]),
        check: |v, _| number_in(v, |x| (0.0..=100.0).contains(&x), "0 ≤ level ≤ 100"),
        in_key: InKey::Always,
        neutral: Some(0.0),
        neutral_name: None,
        label: "sensor noise",
        value_label: |t| format!("sensor noise ×{t}"),
        condition: true,
    },
    // The world axes (issue 14): the ground the plan does not see, pushes, the friction
    // estimate. Named tables live in the scenario (crate::scenario_world).
    Axis {
        name: "heading_deg",
        kind: AxisKind::Number,
        default: |_| numbers(&[0.0]),
        check: |v, _| {
            number_in(
                v,
                |x| x.abs() <= 180.0,
                "−180 to 180 (0: straight uphill, 90: across, uphill on the right)",
            )
        },
        in_key: InKey::UnlessNeutral,
        neutral: Some(0.0),
        neutral_name: None,
        label: "heading on the slope",
        value_label: |t| format!("heading {t}°"),
        condition: true,
    },
    Axis {
        name: "terrain",
        kind: AxisKind::Name,
        default: |_| vec![AxisValue::from(PLANE)],
        check: |v, c| named_table(v, PLANE, c.terrains, "terrain"),
        in_key: InKey::UnlessNeutral,
        neutral: None,
        neutral_name: Some(PLANE),
        label: "terrain",
        value_label: |t| format!("terrain {t}"),
        condition: true,
    },
    Axis {
        name: "patch",
        kind: AxisKind::Name,
        default: |_| vec![AxisValue::from(NONE)],
        check: |v, c| named_table(v, NONE, c.patches, "patch"),
        in_key: InKey::UnlessNeutral,
        neutral: None,
        neutral_name: Some(NONE),
        label: "friction patch",
        value_label: |t| format!("patch {t}"),
        condition: true,
    },
    Axis {
        name: "patch_mu",
        kind: AxisKind::Number,
        // Only used where `patch` names a patch.
        default: |_| numbers(&[0.1]),
        check: |v, _| number_in(v, |x| x > 0.0 && x <= 5.0, "0 < μ ≤ 5"),
        in_key: InKey::UnlessNeutral,
        neutral: Some(0.1),
        neutral_name: None,
        label: "patch friction coefficient",
        value_label: |t| format!("patch μ {t}"),
        condition: true,
    },
    Axis {
        name: "patch_known",
        // true / false (a TOML boolean, spelled as its name).
        kind: AxisKind::Name,
        default: |_| vec![AxisValue::from("false")],
        check: |v, _| name_in(v, &["false", "true"], "allowed"),
        in_key: InKey::UnlessNeutral,
        neutral: None,
        neutral_name: Some("false"),
        label: "patch known to the controller",
        value_label: |t| match t {
            "true" => "patch known".to_string(),
            _ => "patch unknown".to_string(),
        },
        condition: true,
    },
    Axis {
        name: "push",
        kind: AxisKind::Name,
        default: |_| vec![AxisValue::from(NONE)],
        check: |v, c| named_table(v, NONE, c.pushes, "push"),
        in_key: InKey::UnlessNeutral,
        neutral: None,
        neutral_name: Some(NONE),
        label: "push",
        value_label: |t| format!("push {t}"),
        condition: true,
    },
    Axis {
        name: "mu_estimate_scale",
        kind: AxisKind::Number,
        // `laws.mu_estimate_scale`, when given, replaces this default (scenario.rs).
        default: |_| numbers(&[1.0]),
        check: |v, _| number_in(v, |x| x > 0.0 && x <= 10.0, "0 < scale ≤ 10"),
        in_key: InKey::UnlessNeutral,
        neutral: Some(1.0),
        neutral_name: None,
        label: "friction estimate scale",
        value_label: |t| format!("μ̂ ×{t}"),
        condition: true,
    },
];

/// The neutral name of `axes.terrain`: the nominal plane.
pub const PLANE: &str = "plane";
/// The neutral name of `axes.patch` and `axes.push`: none.
pub const NONE: &str = "none";

/// A name axis whose values are the neutral name or a named scenario table.
fn named_table(v: &AxisValue, neutral: &str, known: &[&str], table: &str) -> Result<(), String> {
    match v {
        AxisValue::Name(n) if n == neutral || known.contains(&n.as_str()) => Ok(()),
        _ => Err(format!(
            "allowed: {neutral} or the name of a [{table}.<name>] table"
        )),
    }
}

/// The number of condition axes ([`Axis::condition`]).
pub const fn condition_axis_count() -> usize {
    let (mut i, mut n) = (0, 0);
    while i < AXES.len() {
        if AXES[i].condition {
            n += 1;
        }
        i += 1;
    }
    n
}

/// The position in [`AXES`] of the `k`-th condition axis.
pub const fn condition_axis(k: usize) -> usize {
    let (mut i, mut n) = (0, 0);
    while i < AXES.len() {
        if AXES[i].condition {
            if n == k {
                return i;
            }
            n += 1;
        }
        i += 1;
    }
    panic!("no such condition axis")
}

/// The position of an axis in [`AXES`], by name.
pub fn axis_index(name: &str) -> Option<usize> {
    AXES.iter().position(|a| a.name == name)
}

/// The position of an axis that must exist (a name written in this crate's code).
pub fn axis(name: &str) -> usize {
    axis_index(name).unwrap_or_else(|| panic!("`{name}` is not an axis of run_format::AXES"))
}

/// Every axis name and then `seed`: the axis columns of `cells.csv` and the `--pick` names.
pub fn axis_columns() -> Vec<&'static str> {
    AXES.iter().map(|a| a.name).chain([SEED]).collect()
}

/// The canonical key of a cell: `name=text` per axis in table order, then `seed=N`.
pub fn cell_key(values: &[AxisValue], seed: u32) -> String {
    let mut parts: Vec<String> = AXES
        .iter()
        .zip(values)
        .filter_map(|(a, v)| a.key_part(v))
        .collect();
    parts.push(format!("{SEED}={seed}"));
    parts.join(";")
}

/// The columns of `cells.csv` before the metrics: identity, the axes of the first release
/// ([`InKey::Always`]), the seed, the outcome.
pub fn cell_columns() -> Vec<&'static str> {
    let mut h = vec!["cell_id", "index"];
    h.extend(AXES.iter().filter(|a| !a.after_metrics()).map(|a| a.name));
    h.extend([SEED, "status", "message"]);
    h
}

/// The axis columns after the metrics: every axis added since the first release
/// ([`InKey::UnlessNeutral`]), so a file's first columns keep their places as axes are added.
pub fn late_axis_columns() -> Vec<&'static str> {
    AXES.iter()
        .filter(|a| a.after_metrics())
        .map(|a| a.name)
        .collect()
}

/// Every column of `cells.csv`, in file order.
pub fn cells_header() -> Vec<String> {
    cell_columns()
        .into_iter()
        .chain(metric_columns())
        .chain(late_axis_columns())
        .map(String::from)
        .collect()
}

// ---------------------------------------------------------------------------------------------
// The manifest

/// A field that must be present but may be `null` (serde would otherwise read a missing
/// `Option` as `None`, a silent default).
fn present<'de, D: Deserializer<'de>, T: Deserialize<'de>>(d: D) -> Result<Option<T>, D::Error> {
    Option::<T>::deserialize(d)
}

/// The shard a folder holds.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ShardInfo {
    /// 0-based.
    pub index: usize,
    pub count: usize,
    /// Cells of the matrix in this shard.
    pub cells: usize,
}

/// `manifest.json`: what a run was made from (inputs and their hashes, the scenario text, the
/// matrix's axes) and what it found before the cells (slip floor, the plan's limits). Every
/// field is written and every field is required on reading; a field that may be empty is
/// `null`, never absent.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Manifest {
    pub tool: String,
    pub tool_version: String,
    pub scenario_name: String,
    pub scenario_source: String,
    pub scenario_sha256: String,
    /// By role: `{ "path": …, "sha256": … }` (`runner::manifest_inputs`).
    pub inputs: serde_json::Value,
    pub scenario_text: String,
    pub robot_source: String,
    pub robot_facts_sha256: String,
    pub robot_urdf_sha256: String,
    /// Collision meshes the plant went without (`crate::meshes`; `null` when none).
    #[serde(deserialize_with = "present")]
    pub collision_warning: Option<String>,
    pub gait: String,
    pub duration_s: f64,
    pub seeds: u32,
    pub plant: serde_json::Value,
    /// Per axis of [`AXES`], its values as canonical text (`Vec<String>` per name).
    pub axes: std::collections::BTreeMap<String, Vec<serde_json::Value>>,
    pub cell_count: usize,
    #[serde(deserialize_with = "present")]
    pub shard: Option<ShardInfo>,
    /// The slip floor, mm per stance phase (`null`: it could not be measured).
    #[serde(deserialize_with = "present")]
    pub slip_floor_mm: Option<f64>,
    #[serde(deserialize_with = "present")]
    pub slip_locked_mm: Option<f64>,
    pub slip_floor_implausible: bool,
    #[serde(deserialize_with = "present")]
    pub gains_sha256: Option<String>,
    /// Slip-onset groups in this folder (`null`: the scenario has no onset study).
    #[serde(deserialize_with = "present")]
    pub onset_groups: Option<u64>,
    /// The plan's limit per slope (`runner::plan_limits_json`; `null` until computed).
    pub plan_limits: serde_json::Value,
    /// The shard folders a merged folder was made from (`null`: not merged).
    #[serde(deserialize_with = "present")]
    pub merged_from: Option<Vec<String>>,
    pub started_unix_s: f64,
    #[serde(deserialize_with = "present")]
    pub finished_unix_s: Option<f64>,
}

impl Manifest {
    /// Read `dir/manifest.json`; any problem names the file (and the field).
    pub fn read(dir: &Path) -> Result<Manifest, String> {
        let p = dir.join(MANIFEST_FILE);
        let text = std::fs::read_to_string(&p).map_err(|e| format!("{}: {e}", p.display()))?;
        Manifest::parse(&p, &text)
    }

    /// Parse manifest text read from `path` (for messages).
    pub fn parse(path: &Path, text: &str) -> Result<Manifest, String> {
        serde_json::from_str(text).map_err(|e| format!("{}: {e}", path.display()))
    }

    /// Write `dir/manifest.json` through a temporary file and a rename, so a kill never
    /// leaves a torn manifest.
    pub fn write(&self, dir: &Path) -> Result<(), String> {
        let p = dir.join(MANIFEST_FILE);
        let tmp = dir.join("manifest.json.tmp");
        let text = serde_json::to_string_pretty(self).map_err(|e| e.to_string())?;
        std::fs::write(&tmp, text + "\n").map_err(|e| format!("{}: {e}", tmp.display()))?;
        std::fs::rename(&tmp, &p).map_err(|e| format!("{}: {e}", p.display()))
    }

    /// The axis values the manifest records, per axis of [`AXES`], checked against the table's
    /// kinds (not against the context: a merge has no scenario). A missing or mistyped axis is
    /// an error naming the field.
    pub fn axis_values(&self) -> Result<Vec<Vec<AxisValue>>, String> {
        for name in self.axes.keys() {
            if axis_index(name).is_none() {
                return Err(format!("field `axes.{name}`: not an axis of this version"));
            }
        }
        AXES.iter()
            .map(|a| {
                let vs = self
                    .axes
                    .get(a.name)
                    .ok_or_else(|| format!("field `axes.{}` missing", a.name))?;
                vs.iter()
                    .map(|v| match (a.kind, v) {
                        (AxisKind::Number, serde_json::Value::Number(n)) => n
                            .as_f64()
                            .map(AxisValue::Number)
                            .ok_or_else(|| format!("field `axes.{}`: not a number", a.name)),
                        (AxisKind::Name, serde_json::Value::String(s)) => {
                            Ok(AxisValue::Name(s.clone()))
                        }
                        (AxisKind::Number, _) => {
                            Err(format!("field `axes.{}`: not a number", a.name))
                        }
                        (AxisKind::Name, _) => Err(format!("field `axes.{}`: not a name", a.name)),
                    })
                    .collect()
            })
            .collect()
    }

    /// The `axes` field for a matrix's values (numbers as JSON numbers, names as strings).
    pub fn axes_field(
        values: &[Vec<AxisValue>],
    ) -> std::collections::BTreeMap<String, Vec<serde_json::Value>> {
        AXES.iter()
            .zip(values)
            .map(|(a, vs)| {
                let vs = vs
                    .iter()
                    .map(|v| match v {
                        AxisValue::Number(x) => serde_json::json!(x),
                        AxisValue::Name(n) => serde_json::json!(n),
                    })
                    .collect();
                (a.name.to_string(), vs)
            })
            .collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn outcome_names_round_trip() {
        for o in Outcome::ALL {
            assert_eq!(Outcome::parse(o.name()), Some(o));
        }
        assert_eq!(Outcome::parse("held"), None);
    }

    #[test]
    fn key_keeps_the_text_of_the_first_release() {
        // The key text of a cell as the matrix wrote it before the axis table existed (cell ids
        // and seeds are made from it, so it must never change for the existing axes).
        let v: Vec<AxisValue> = vec![
            10.0.into(),
            0.4.into(),
            1000.0.into(),
            "ideal".into(),
            "id-lean".into(),
            1.0.into(),
            0.0.into(),
            0.5.into(),
        ];
        assert_eq!(
            cell_key(&v, 2),
            "slope_deg=10;mu=0.4;rate_hz=1000;actuator=ideal;controller=id-lean;mass_scale=1;com_shift_mm=0;sensor_noise=0.5;seed=2"
        );
    }

    #[test]
    fn neutral_values_stay_out_of_the_key() {
        let a = Axis {
            in_key: InKey::UnlessNeutral,
            ..AXES[0]
        };
        assert_eq!(a.key_part(&0.0.into()), None);
        assert_eq!(a.key_part(&3.0.into()).as_deref(), Some("slope_deg=3"));
    }

    #[test]
    fn a_manifest_without_a_field_names_it() {
        let e = Manifest::parse(Path::new("m.json"), r#"{"tool": "gripsweep"}"#).unwrap_err();
        assert!(e.contains("m.json") && e.contains("tool_version"), "{e}");
    }
}
