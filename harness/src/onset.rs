//! The slip-onset study: for each friction coefficient and each law × control rate × actuator,
//! the steepest slope the law holds before sustained slip (mean stance-phase slip above the
//! floor plus a threshold) or a fall, found by bisection on the slope angle. Each group is one
//! unit of work: its row is appended to `onset.csv` when its bisection ends, so a killed run
//! resumes group by group, and groups shard like cells.

use crate::cell::{CellContext, run_cell};
use crate::matrix::Cell;
use crate::plant::actuator::ActuatorKind;
use crate::robot::LoadedRobot;
use crate::run_format::Outcome;
use crate::scenario::{OnsetFile, Scenario};
use sha2::{Digest, Sha256};

pub use crate::run_format::ONSET_FILE;
pub const ONSET_COLUMNS: [&str; 9] = [
    "group_id",
    "index",
    "mu",
    "controller",
    "rate_hz",
    "actuator",
    "onset_deg",
    "friction_angle_deg",
    "runs",
];

/// One bisection: μ × law × rate × actuator (other axes at their first value, seed 0).
#[derive(Clone, Debug, PartialEq)]
pub struct OnsetGroup {
    pub index: usize,
    pub mu: f64,
    pub controller: String,
    pub rate_hz: f64,
    pub actuator: ActuatorKind,
}

impl OnsetGroup {
    pub fn id(&self) -> String {
        let key = format!(
            "onset;mu={};controller={};rate_hz={};actuator={}",
            self.mu,
            self.controller,
            self.rate_hz,
            self.actuator.name()
        );
        Sha256::digest(key.as_bytes())[..8]
            .iter()
            .map(|b| format!("{b:02x}"))
            .collect()
    }
}

pub fn groups(s: &Scenario) -> Vec<OnsetGroup> {
    let a = &s.axes;
    let mut out = Vec::new();
    for mu in a.numbers("mu") {
        for controller in a.names("controller") {
            for rate_hz in a.numbers("rate_hz") {
                for actuator in a.actuators() {
                    out.push(OnsetGroup {
                        index: out.len(),
                        mu,
                        controller: controller.clone(),
                        rate_hz,
                        actuator,
                    });
                }
            }
        }
    }
    out
}

/// Whether the law held the slope: the run ended `ok` (stayed up, controlled, met its constraints)
/// and its mean stance-phase slip stayed within
/// the floor plus the threshold.
fn holds(s: &Scenario, robot: &LoadedRobot, g: &OnsetGroup, slope_deg: f64, limit_mm: f64) -> bool {
    // Every other axis at its first value.
    let cell = Cell::first_of(&s.axes)
        .set("slope_deg", slope_deg)
        .set("mu", g.mu)
        .set("rate_hz", g.rate_hz)
        .set("actuator", g.actuator.name())
        .set("controller", g.controller.as_str());
    let out = run_cell(&CellContext { scenario: s, robot }, &cell, None);
    // Held means held and controlled: an infeasible or no-control run stayed up but what it
    // measures is the law giving way, not the law holding the slope.
    out.status == Outcome::Ok && out.metrics.slip_mean_mm <= limit_mm
}

/// Bisection for one group: (onset angle in degrees, runs made). If even `lo_deg` is not held
/// the onset is reported as `lo_deg` with one run; the answer is within (hi − lo) / 2^steps.
pub fn bisect(
    s: &Scenario,
    robot: &LoadedRobot,
    o: &OnsetFile,
    g: &OnsetGroup,
    floor_mm: f64,
) -> (f64, u32) {
    let limit = floor_mm + o.threshold_mm;
    let mut runs = 1;
    if !holds(s, robot, g, o.lo_deg, limit) {
        return (o.lo_deg, runs);
    }
    let (mut lo, mut hi) = (o.lo_deg, o.hi_deg);
    for _ in 0..o.steps {
        let mid = 0.5 * (lo + hi);
        runs += 1;
        if holds(s, robot, g, mid, limit) {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    (lo, runs)
}

pub fn record(g: &OnsetGroup, onset_deg: f64, runs: u32) -> Vec<String> {
    vec![
        g.id(),
        g.index.to_string(),
        format!("{}", g.mu),
        g.controller.clone(),
        format!("{}", g.rate_hz),
        g.actuator.name().to_string(),
        format!("{onset_deg}"),
        format!("{}", g.mu.atan().to_degrees()),
        runs.to_string(),
    ]
}
