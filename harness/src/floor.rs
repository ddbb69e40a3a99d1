//! The slip floor: the apparent slip of feet that do not move, below which no difference
//! between laws means anything. It depends on the robot and the plant settings only, never on
//! the laws a scenario lists or on their settings:
//!
//! - [`slip_floor`] (the floor every verdict uses): the robot stands still on flat ground
//!   (μ = 1, ideal actuators, exact model, no noise) for the scenario's duration under the
//!   stiff joint PD law **with the gains the tuner gives it for this robot at the plant rate**
//!   (never the scenario's own `[laws.stiff-pd]` pins), so it neither saturates nor shakes on
//!   a robot it was not made for.
//! - [`locked_slip`] (reported beside it): the same stand with no controller at all, every
//!   joint held by the engine's implicit position motors ([`LOCK_HZ`]). Measured on brindle
//!   (2 s): 0.81 mm at a 50 Hz lock, 2.6 mm at 100 Hz, 5.3 mm at 300 Hz, the robot creeping
//!   steadily as the lock stiffens; the engine's joint friction as a lock crept 5.2 mm. That
//!   is the solver's two implicit constraints (joint lock and contact) fighting, not the
//!   contact behaviour a controlled robot sees (0.01–0.02 mm under the tuned PD), so it is
//!   recorded for inspection but does not set the floor.

use crate::cell::{CellSpec, run_spec};
use crate::matrix::Cell;
use crate::metrics::MetricsAccumulator;
use crate::planner::{Gait, Plan};
use crate::plant::Plant;
use crate::plant::actuator::ActuatorKind;
use crate::plant::terrain::Slope;
use crate::robot::LoadedRobot;
use crate::scenario::Scenario;
use gripsweep_controllers::algorithms::base_pose;
use gripsweep_controllers::spatial::Vec3;

/// Above this mean slip per stance phase (mm) the floor is implausible: a robot standing still
/// on flat ground at μ = 1 should not creep a millimetre. The laws' differences of
/// interest are 0.1–100 mm, so a floor beyond 1 mm would hide most of them; the run then warns
/// and ranks nothing on slip.
pub const FLOOR_BOUND_MM: f64 = 1.0;

/// Natural frequency of the engine's joint locks in [`locked_slip`], Hz (critically damped).
/// Every lock tried let the locked demo robots creep (see above); this one crept least.
pub const LOCK_HZ: f64 = 50.0;

/// The slip floor of a scenario's robot and plant settings, mm per stance phase (NaN when the
/// standing posture cannot be planned or tuned).
pub fn slip_floor(s: &Scenario, robot: &LoadedRobot) -> f64 {
    let plant_rate = (1.0 / s.plant.dt).round();
    let mut standing = s.clone();
    standing.law_tables.clear();
    standing.tuned.clear();
    standing.axes = standing
        .axes
        .with("rate_hz", vec![plant_rate.into()])
        .with("actuator", vec![ActuatorKind::Ideal.name().into()])
        .with("controller", vec!["stiff-pd".into()]);
    let Ok(table) = crate::tuning::tune(&standing, robot, Some(1)) else {
        return f64::NAN;
    };
    table.apply(&mut standing);
    let cell = Cell::probe(1.0, plant_rate, ActuatorKind::Ideal, "stiff-pd");
    // The scenario's robot and plant settings, standing, with the gains just tuned.
    let spec = CellSpec {
        gait: Gait::Stand,
        ..CellSpec::of(&standing, &cell)
    };
    run_spec(robot, &cell, &spec, None, None)
        .metrics
        .slip_mean_mm
}

/// The stand with every joint locked by the engine and no controller, mm per stance phase
/// (NaN when the standing posture cannot be planned): a diagnostic beside the floor.
pub fn locked_slip(s: &Scenario, robot: &LoadedRobot) -> f64 {
    let slope = Slope::degrees(0.0);
    let Ok(plan) = Plan::build(&robot.model, &robot.facts, &slope, &Gait::Stand, s.duration) else {
        return f64::NAN;
    };
    let model = &robot.model;
    let nj = model.n_joints();
    let dt = s.plant.dt;
    let mut plant = Plant::new(robot, Box::new(slope), 1.0, s.plant);
    let (mut q, mut v) = plan.initial_state();
    plant.set_state(&q, &v);
    plant.lock_joints(LOCK_HZ);
    plant.state(&mut q, &mut v);
    let start = Vec3::new(q[0], q[1], q[2]);
    let n_feet = robot.facts.feet.frames.len();
    let mut acc = MetricsAccumulator::new(n_feet, dt, 1.0, start);
    let stance = vec![true; n_feet];
    let zeros = vec![0.0; nj];
    plant.set_joint_torques(&zeros);
    let steps = (s.duration / dt).round() as usize;
    for _ in 0..steps {
        if plant.step().is_err() {
            return f64::NAN;
        }
        plant.state(&mut q, &mut v);
        let base = base_pose(model, &q);
        acc.step(
            &stance,
            plant.feet(),
            &base.trans,
            &base.rot,
            &base.trans,
            &base.rot,
            zeros.iter().copied(),
            &zeros,
            &v.as_slice()[6..],
            false,
        );
    }
    let end = Vec3::new(q[0], q[1], q[2]);
    acc.finish(&end, &slope.uphill(), 0.0, nj).slip_mean_mm
}
