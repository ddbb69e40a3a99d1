//! The world the plan does not know (issue 14), against outside facts:
//! * heading on the slope: standing still, the stance feet's tangential / normal force ratio of
//!   the cone program is tan θ whatever the heading (statics of a body on an incline: the
//!   contact forces carry the weight m g, whose components along and across the plane are
//!   m g sin θ and m g cos θ; e.g. Meriam & Kraige, "Engineering Mechanics: Statics", the
//!   chapter on friction);
//! * an unperceived step and a bump field: the plant's ground height where a foot-sized sphere
//!   rests equals the analytic one, to the contact model's penetration;
//! * the plan is byte-identical with and without the step (the step is really unperceived);
//! * pushes: an impulse J on the trunk in the air changes the robot's linear momentum by J, a
//!   force F held for T by F·T (Newton's second law for a system of bodies: the rate of change
//!   of its total linear momentum is the sum of the external forces).

use gripsweep::cell::{CellContext, TraceRow, run_cell};
use gripsweep::matrix::expand;
use gripsweep::planner::{Gait, Plan};
use gripsweep::plant::terrain::{GROUND_GROUP, ROBOT_GROUP, Terrain};
use gripsweep::plant::world::{BumpField, Ground, PushVariant, TerrainVariant, push_force};
use gripsweep::plant::{Plant, PlantSettings, configured_world};
use gripsweep::robot::LoadedRobot;
use gripsweep::scenario::Scenario;
use gripsweep_controllers::algorithms::{
    Workspace, forward_kinematics, momentum_world, velocities_and_bias,
};
use gripsweep_controllers::laws::{LawSettings, Observation, Target, build_law};
use gripsweep_controllers::spatial::Vec3;
use nalgebra::DVector;
use rapier3d::prelude::*;

#[test]
fn cone_program_force_ratio_is_tan_theta_at_any_heading() {
    let robot = LoadedRobot::demo().unwrap();
    let model = &robot.model;
    let feet = robot.foot_frames();
    for deg in [10.0, 20.0] {
        let th = f64::to_radians(deg);
        for heading in [0.0, 30.0, 45.0, 90.0, 135.0] {
            let ground = Ground::plane(deg, heading);
            let plan = Plan::build(model, &robot.facts, &ground, &Gait::Stand, 1.0).unwrap();
            let (q, v) = plan.initial_state();
            let a = DVector::zeros(model.nv());
            let settings = LawSettings {
                ground_normal: ground.normal_at(0.0, 0.0),
                mu_estimate: 1.0,
                foot_radius: robot.facts.feet.radius,
                ..LawSettings::default()
            };
            let mut law = build_law("cone-margin", model.clone(), feet.clone(), &settings).unwrap();
            let stance = vec![true; feet.len()];
            let mut tau = vec![0.0; model.n_joints()];
            let status = law.compute(
                &Observation { q: &q, v: &v },
                &Target {
                    q: &q,
                    v: &v,
                    a: &a,
                    stance: &stance,
                },
                &mut tau,
            );
            let n = ground.normal_at(0.0, 0.0);
            let total: Vec3 = law.predicted_forces().iter().sum();
            let normal = total.dot(&n);
            let tangential = (total - n * normal).norm();
            let ratio = tangential / normal;
            // Per foot too: the cone program spends friction evenly when it can.
            let per_foot: Vec<f64> = law
                .predicted_forces()
                .iter()
                .map(|f| (f - n * f.dot(&n)).norm() / f.dot(&n))
                .collect();
            eprintln!(
                "θ {deg}°, heading {heading}°: {status:?}, ratio {ratio:.6} (tan θ {:.6}), feet {per_foot:.4?}",
                th.tan()
            );
            assert!(
                (ratio - th.tan()).abs() < 1e-3 * th.tan(),
                "θ {deg}°, heading {heading}°: ratio {ratio}, tan θ {}",
                th.tan()
            );
            // The weight is carried: the total force is m g up, to 0.5 % (the plan's
            // accelerations are zero standing).
            let weight = model.total_mass() * 9.81;
            assert!(
                (total - Vec3::new(0.0, 0.0, weight)).norm() < 5e-3 * weight,
                "total {total:?} vs weight {weight}"
            );
        }
    }
}

/// A foot-sized sphere (the demo robot's radius, 2 kg — about the load a crawl's stance foot
/// carries is 3–5 kg; the penetration scales with it) free to move only along world z,
/// released just above the ground at (x, y); returns its centre's height after 0.3 s.
fn resting_centre(ground: &Ground, x: f64, y: f64, radius: f64, drop_from: f64) -> f64 {
    let settings = PlantSettings::default();
    let mut world = configured_world(&settings);
    ground.build(&mut world.colliders, 1.0);
    let rb = RigidBodyBuilder::dynamic()
        .translation(Vector::new(x, y, drop_from))
        .enabled_translations(false, false, true)
        .lock_rotations()
        .can_sleep(false)
        .build();
    let body = world.bodies.insert(rb);
    let col = ColliderBuilder::ball(radius)
        .mass(2.0)
        .friction(1.0)
        .restitution(0.0)
        .collision_groups(InteractionGroups::new(
            ROBOT_GROUP,
            GROUND_GROUP,
            InteractionTestMode::And,
        ))
        .build();
    world
        .colliders
        .insert_with_parent(col, body, &mut world.bodies);
    for _ in 0..300 {
        world.step();
    }
    world.bodies[body].translation().z
}

/// The contact model's penetration at rest, measured on the plain plane (the same sphere).
const PENETRATION_TOL: f64 = 2e-4;

#[test]
fn step_height_in_the_plant_is_the_analytic_one() {
    let r = 0.02;
    for (deg, heading) in [(0.0, 0.0), (10.0, 0.0), (10.0, 60.0)] {
        for h in [-0.04, 0.02, 0.04] {
            let v = TerrainVariant {
                step_height: h,
                step_at: 0.3,
                ..TerrainVariant::PLANE
            };
            let ground = Ground::plane(deg, heading).with(&v, 0, None);
            let n = ground.normal_at(0.0, 0.0);
            // Points before and after the edge, well away from it (a sphere near the riser
            // touches its edge).
            for u in [0.1, 0.2, 0.4, 0.6] {
                // The world point of plane coordinates (u, 0.05) on the nominal plane.
                let (_, t1, t2) = ground.surface_frame(0.0, 0.0);
                let p = t1 * u + t2 * 0.05;
                let z_ground = ground.height_at(p.x, p.y);
                // A sphere touching a plane with normal n from above: its centre is r / n_z
                // above the plane along the vertical.
                let want = z_ground + r / n.z;
                let got = resting_centre(&ground, p.x, p.y, r, want + 0.01);
                let step_here = if u >= 0.3 { h } else { 0.0 };
                eprintln!(
                    "θ {deg}°, ψ {heading}°, h {h}, u {u}: centre {got:.6}, analytic {want:.6} (step {step_here}), penetration {:.2e} m",
                    want - got
                );
                assert!(
                    (got - want).abs() < PENETRATION_TOL,
                    "θ {deg}°, ψ {heading}°, h {h}, u {u}: {got} vs {want}"
                );
            }
        }
    }
}

#[test]
fn bump_field_height_in_the_plant_is_the_analytic_one() {
    let r = 0.02;
    let v = TerrainVariant {
        bump_rms: 0.01,
        bump_wavelength: 0.25,
        bump_at: 0.0,
        bump_seed: 7,
        ..TerrainVariant::PLANE
    };
    let ground = Ground::plane(0.0, 0.0).with(&v, 3, None);
    let field = BumpField::new(&v, 3);
    let mut worst: f64 = 0.0;
    for i in 0..8 {
        let (x, y) = (0.4 + 0.173 * i as f64, -0.3 + 0.081 * i as f64);
        // The analytic resting height of a sphere on the surface z = δ(x, y): the highest
        // centre over the disc of radius r, max over (x', y') of δ(x', y') + √(r² − d²).
        let mut want = f64::NEG_INFINITY;
        let m = 60;
        for a in -m..=m {
            for b in -m..=m {
                let (dx, dy) = (r * a as f64 / m as f64, r * b as f64 / m as f64);
                let d2 = dx * dx + dy * dy;
                if d2 <= r * r {
                    want = want.max(field.height(x + dx, y + dy) + (r * r - d2).sqrt());
                }
            }
        }
        let got = resting_centre(&ground, x, y, r, want + 0.01);
        worst = worst.max((got - want).abs());
        eprintln!(
            "({x:.3}, {y:.3}): δ {:.5}, centre {got:.6}, analytic {want:.6}, diff {:.2e}",
            field.height(x, y),
            got - want
        );
    }
    // The height field's triangles depart from the analytic surface by at most
    // Σ A (π h / λ)² / 2 = 8 × 0.005 × 0.0193 ≈ 0.77 mm at 16 cells per wavelength (a bound;
    // the sampling error of the disc search is below 1 µm); plus the penetration.
    eprintln!("worst difference {worst:.2e} m");
    assert!(worst < 7.7e-4 + PENETRATION_TOL, "worst {worst}");
}

const STEP_SCENARIO: &str = r#"
name = "unperceived-step-check"
duration = 7.2
[gait]
kind = "crawl"
step_length = 0.06
swing_height = 0.05
cycle_period = 3.2
body_height = 0.30
[terrain.down]
step_height = -0.03
step_at = 0.1
[axes]
slope_deg = [5.0]
mu = [0.8]
controller = ["stiff-pd"]
terrain = ["plane", "down"]
"#;

#[test]
fn the_plan_is_byte_identical_with_and_without_the_step() {
    let s = Scenario::from_text("step.toml", STEP_SCENARIO, None).unwrap();
    let robot = s.load_robot().unwrap();
    let ctx = CellContext {
        scenario: &s,
        robot: &robot,
    };
    let cells = expand(&s);
    assert_eq!(cells.len(), 2);
    let mut traces: Vec<Vec<TraceRow>> = Vec::new();
    for c in &cells {
        let mut rows = Vec::new();
        let out = run_cell(&ctx, c, Some((&mut rows, 10)));
        eprintln!("{}: {:?} {}", c.key(), out.status, out.message);
        traces.push(rows);
    }
    let (a, b) = (&traces[0], &traces[1]);
    let n = a.len().min(b.len());
    assert!(n > 100, "{n} rows");
    for k in 0..n {
        let bits = |r: &TraceRow| r.plan_q.iter().map(|x| x.to_bits()).collect::<Vec<_>>();
        assert_eq!(bits(&a[k]), bits(&b[k]), "plan differs at row {k}");
    }
    // The plant does see the step: the front feet (beyond the edge) stand lower.
    let last = n - 1;
    let dz: f64 = (0..a[last].foot_pos.len())
        .map(|i| (a[last].foot_pos[i][2] - b[last].foot_pos[i][2]).abs())
        .fold(0.0, f64::max);
    eprintln!("largest foot height difference {dz:.4} m");
    assert!(dz > 0.02, "the step did not reach the plant: {dz}");
    // Keys: the default terrain adds nothing, the step cell names its terrain.
    assert!(!cells[0].key().contains("terrain"));
    assert!(
        cells[1].key().ends_with(";terrain=down;seed=0"),
        "{}",
        cells[1].key()
    );
}

/// The demo robot high above the ground, joints free, pushed on the trunk by `push` starting at
/// 0.05 s; returns (measured change of linear momentum − the gravity impulse, expected push
/// impulse) over 0.5 s.
fn pushed_in_the_air(push: &PushVariant) -> (Vec3, Vec3) {
    let robot = LoadedRobot::demo().unwrap();
    let model = &robot.model;
    let ground = Ground::plane(10.0, 30.0);
    let settings = PlantSettings::default();
    let dt = settings.dt;
    let mut plant = Plant::new(&robot, Box::new(Ground::plane(10.0, 30.0)), 0.8, settings);
    let mut q = model.neutral();
    for (k, a) in robot.facts.nominal_joints(model).into_iter().enumerate() {
        q[7 + k] = a;
    }
    q[2] = 5.0;
    let mut v = DVector::zeros(model.nv());
    plant.set_state(&q, &v);
    let mut ws = Workspace::new(model);
    let mut momentum = |q: &DVector<f64>, v: &DVector<f64>| {
        forward_kinematics(model, &mut ws, q);
        velocities_and_bias(model, &mut ws, v);
        momentum_world(model, &ws).0
    };
    plant.state(&mut q, &mut v);
    let p0 = momentum(&q, &v);
    let steps = 500;
    let mut expected = Vec3::zeros();
    plant.set_joint_torques(&vec![0.0; model.n_joints()]);
    for step in 0..steps {
        let f = push_force(push, 0.05, step as f64 * dt, dt, &ground);
        expected += f * dt;
        plant.set_base_force(f);
        plant.step().unwrap();
        assert!(plant.feet().iter().all(|f| !f.in_contact));
    }
    plant.state(&mut q, &mut v);
    let p1 = momentum(&q, &v);
    let gravity = model.gravity * model.total_mass() * (steps as f64 * dt);
    (p1 - p0 - gravity, expected)
}

#[test]
fn a_push_changes_momentum_by_its_impulse() {
    let impulse = PushVariant {
        impulse: true,
        magnitude: 6.0,
        direction_deg: 30.0,
        duration_s: 0.0,
        cycle: 0,
        phase: 0.0,
    };
    let force = PushVariant {
        impulse: false,
        magnitude: 40.0,
        direction_deg: -120.0,
        duration_s: 0.2,
        ..impulse.clone()
    };
    for (p, want_norm) in [(&impulse, 6.0), (&force, 40.0 * 0.2)] {
        let (got, expected) = pushed_in_the_air(p);
        eprintln!("{p:?}: Δp − m g t = {got:?}, J = {expected:?}");
        assert!((expected.norm() - want_norm).abs() < 1e-9 * want_norm);
        assert!(
            (got - expected).norm() < 0.01 * expected.norm(),
            "Δp {got:?} vs J {expected:?}"
        );
        // In the tangent plane of the slope.
        let n = Ground::plane(10.0, 30.0).normal_at(0.0, 0.0);
        assert!(expected.dot(&n).abs() < 1e-9 * want_norm);
    }
}
