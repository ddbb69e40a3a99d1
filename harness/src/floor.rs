//! The slip floor: the plant's apparent slip of feet that do not move, with no controller in
//! the loop. The robot stands on flat ground (μ = 1) in the planned standing posture with every
//! joint held by the engine — an implicit dry friction far above any torque gravity can exert
//! (the engine's multibody joint friction is solved inside the constraint solver, so a joint
//! at rest stays at rest) — for the scenario's duration and plant settings. Its mean
//! stance-phase slip, measured with the cells' own metric, is the floor below which no
//! difference between laws means anything. It depends on the robot and the plant only, never
//! on a law or its tuning.

use crate::metrics::MetricsAccumulator;
use crate::planner::{Gait, Plan};
use crate::plant::Plant;
use crate::plant::terrain::Slope;
use crate::robot::LoadedRobot;
use crate::scenario::Scenario;
use gripsweep_controllers::algorithms::base_pose;
use gripsweep_controllers::spatial::Vec3;

/// Above this mean slip per stance phase (mm) the floor is implausible: a robot whose joints
/// are locked should not creep a millimetre on flat ground at μ = 1. The laws' differences of
/// interest are 0.1–100 mm, so a floor beyond 1 mm would hide most of them; the run then warns
/// and ranks nothing on slip.
pub const FLOOR_BOUND_MM: f64 = 1.0;

/// Holding friction of every locked joint, as a multiple of the total weight × 1 m (N·m): far
/// above any gravity torque of the robot.
const HOLD_FACTOR: f64 = 100.0;

/// The slip floor of a scenario's robot and plant settings, mm per stance phase (NaN when the
/// standing posture cannot be planned).
pub fn slip_floor(s: &Scenario, robot: &LoadedRobot) -> f64 {
    let slope = Slope::degrees(0.0);
    let Ok(plan) = Plan::build(&robot.model, &robot.facts, &slope, &Gait::Stand, s.duration)
    else {
        return f64::NAN;
    };
    let model = &robot.model;
    let nj = model.n_joints();
    let dt = s.plant.dt;
    let mut plant = Plant::new(robot, Box::new(slope), 1.0, s.plant);
    let weight = model.inertias.iter().map(|i| i.mass).sum::<f64>() * model.gravity.norm();
    plant.set_joint_friction(&vec![HOLD_FACTOR * weight; nj], &vec![0.0; nj]);
    let (mut q, mut v) = plan.initial_state();
    plant.set_state(&q, &v);
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
