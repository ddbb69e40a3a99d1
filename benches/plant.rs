//! Cost of one plant step: the brindle quadruped standing on flat ground (μ = 1), all four feet
//! in contact, held in its nominal posture by a stiff joint PD (kp 300 N·m/rad, kd 5 N·m·s/rad,
//! as `tests/plant_physics.rs` holds it), at 1, 2 and 4 solver substeps per 1 ms step (4 is
//! the default). One iteration is what a cell does per physics step apart from the controller
//! and the metrics: read the state in the model's conventions, set 12 joint torques, step.
//! Simulated seconds per wall second = 1 ms / (time per step). BENCHMARKS.md has the figures.
//!
//!     cargo bench --bench plant -- --warm-up-time 2 --measurement-time 5

use criterion::{Criterion, criterion_group, criterion_main};
use gripsweep::plant::terrain::{Slope, Terrain};
use gripsweep::plant::{Plant, PlantSettings};
use gripsweep::robot::LoadedRobot;
use gripsweep_controllers::algorithms::{Workspace, forward_kinematics, frame_pose};
use gripsweep_controllers::configuration::set_base_pose;
use gripsweep_controllers::spatial::{Pose, Vec3};
use nalgebra::DVector;
use std::hint::black_box;

const KP: f64 = 300.0;
const KD: f64 = 5.0;
/// Steps before timing, so the landing transient is over and the feet carry the weight.
const SETTLE_STEPS: usize = 500;

/// The nominal posture with the feet just touching the terrain at the origin, trunk parallel
/// to it (as `standing_state` in tests/plant_physics.rs).
fn standing_state(robot: &LoadedRobot, slope: &Slope) -> (DVector<f64>, DVector<f64>) {
    let model = &robot.model;
    let mut q = model.neutral();
    for (k, a) in robot.facts.nominal_joints(model).into_iter().enumerate() {
        q[model.nq_base() + k] = a;
    }
    let mut ws = Workspace::new(model);
    forward_kinematics(model, &mut ws, &q);
    let foot_z = frame_pose(model, &ws, robot.foot_frames()[0]).trans.z;
    let height = -foot_z + robot.facts.feet.radius;
    let rot = nalgebra::Rotation3::from_axis_angle(&Vec3::y_axis(), -slope.angle).into_inner();
    set_base_pose(&mut q, &Pose::new(rot, slope.normal_at(0.0, 0.0) * height));
    (q, DVector::zeros(model.nv()))
}

/// A standing plant and the buffers of one held step.
struct Held {
    plant: Plant,
    q_ref: DVector<f64>,
    q: DVector<f64>,
    v: DVector<f64>,
    tau: Vec<f64>,
}

impl Held {
    fn new(robot: &LoadedRobot, substeps: usize) -> Held {
        let slope = Slope::degrees(0.0);
        let settings = PlantSettings {
            substeps,
            ..PlantSettings::default()
        };
        let mut plant = Plant::new(robot, Box::new(slope), 1.0, settings);
        let (q_ref, v0) = standing_state(robot, &slope);
        plant.set_state(&q_ref, &v0);
        let n = robot.model.n_joints();
        let mut held = Held {
            plant,
            q: q_ref.clone(),
            v: v0,
            q_ref,
            tau: vec![0.0; n],
        };
        for _ in 0..SETTLE_STEPS {
            held.step();
        }
        assert!(
            held.plant.feet().iter().all(|f| f.in_contact),
            "{substeps} substeps: not standing on four feet after settling"
        );
        held
    }

    fn step(&mut self) {
        self.plant.state(&mut self.q, &mut self.v);
        for (k, t) in self.tau.iter_mut().enumerate() {
            *t = KP * (self.q_ref[7 + k] - self.q[7 + k]) - KD * self.v[6 + k];
        }
        self.plant.set_joint_torques(&self.tau);
        self.plant
            .step()
            .expect("the standing plant does not diverge");
    }
}

fn plant_benches(c: &mut Criterion) {
    let robot = LoadedRobot::demo().expect("demo robot");
    for substeps in [1, 2, 4] {
        let mut held = Held::new(&robot, substeps);
        c.bench_function(&format!("plant_step_standing_substeps_{substeps}"), |b| {
            b.iter(|| {
                held.step();
                black_box(held.plant.feet()[0].force.z)
            })
        });
        // Still standing after however many steps criterion took.
        assert!(held.plant.feet().iter().all(|f| f.in_contact));
    }
}

criterion_group!(benches, plant_benches);
criterion_main!(benches);
