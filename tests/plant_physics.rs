//! The plant against the outside world and against our model:
//! * Coulomb's law on an incline (any mechanics textbook, e.g. Halliday, Resnick & Walker,
//!   "Fundamentals of Physics", the chapter on friction): a block stays iff tan θ ≤ μ, and slides
//!   with a = g (sin θ − μ cos θ);
//! * the whole robot held stiff on a slope slides iff tan θ > μ;
//! * plant dynamics = model dynamics (gravity hold, forward dynamics, standing load).

use gripsweep::plant::actuator::ActuatorKind;
use gripsweep::plant::terrain::{FOOT_FRICTION, GROUND_GROUP, ROBOT_GROUP, Slope, Terrain};
use gripsweep::plant::world::{Ground, PatchRect, TerrainVariant};
use gripsweep::plant::{Plant, PlantSettings, configured_world};
use gripsweep::robot::LoadedRobot;
use gripsweep_controllers::algorithms::{Workspace, forward_dynamics, nonlinear_effects};
use gripsweep_controllers::spatial::{Pose, Vec3};
use gripsweep_controllers::{Model, RootKind};
use nalgebra::DVector;
use rapier3d::prelude::*;

const G: f64 = 9.81;

/// A 1 kg, 0.2 m cube released at rest on the plant's slope with the plant's combine rule;
/// returns its displacement along the slope (downhill positive) at 0.5 s and 1.0 s.
fn block_on_slope(angle_deg: f64, mu: f64) -> (f64, f64) {
    block_on_ground(&Slope::degrees(angle_deg), angle_deg, mu)
}

/// [`block_on_slope`] on any ground whose surface at the origin is the plane of `angle_deg`
/// facing uphill (issue 14: the same check per friction patch).
fn block_on_ground(ground: &dyn Terrain, angle_deg: f64, mu: f64) -> (f64, f64) {
    let settings = PlantSettings::default();
    let mut world = configured_world(&settings);
    let slope = Slope::degrees(angle_deg);
    ground.build(&mut world.colliders, mu);
    let n = slope.normal_at(0.0, 0.0);
    let h = 0.1;
    let centre = n * h;
    let rot = Rotation::from_axis_angle(Vector::new(0.0, 1.0, 0.0), -slope.angle);
    let rb = RigidBodyBuilder::dynamic()
        .pose(rapier3d::math::Pose::from_parts(
            Vector::new(centre.x, centre.y, centre.z),
            rot,
        ))
        .can_sleep(false)
        .build();
    let body = world.bodies.insert(rb);
    let col = ColliderBuilder::cuboid(h, h, h)
        .mass(1.0)
        .friction(FOOT_FRICTION)
        .friction_combine_rule(CoefficientCombineRule::Min)
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
    let downhill = -slope.uphill();
    let start = world.bodies[body].translation();
    let mut d_half = 0.0;
    let n_steps = steps(1.0);
    for step in 1..=n_steps {
        world.step();
        if step == n_steps / 2 {
            let p = world.bodies[body].translation() - start;
            d_half = Vec3::new(p.x, p.y, p.z).dot(&downhill);
        }
    }
    let p = world.bodies[body].translation() - start;
    (d_half, Vec3::new(p.x, p.y, p.z).dot(&downhill))
}

#[test]
fn block_on_incline_obeys_coulombs_law() {
    for mu in [0.2, 0.5, 0.8] {
        let friction_angle = f64::atan(mu).to_degrees();
        for offset in [-6.0, -1.0, 1.0, 6.0] {
            let angle = friction_angle + offset;
            let (d_half, d_full) = block_on_slope(angle, mu);
            let th = angle.to_radians();
            let a_theory = G * (th.sin() - mu * th.cos());
            if a_theory <= 0.0 {
                assert!(
                    d_full.abs() < 1e-4,
                    "μ {mu}, {angle:.2}°: block crept {d_full} m"
                );
            } else {
                // d(t) = a t² / 2 from rest: a from the displacement between 0.5 s and 1 s,
                // which does not depend on the first contact transient.
                let a = (d_full - d_half) / (0.5 * (1.0 - 0.25));
                eprintln!("μ {mu}, {angle:.2}°: a = {a:.5}, theory {a_theory:.5}");
                assert!(
                    (a - a_theory).abs() < 0.01 * a_theory,
                    "μ {mu}, {angle:.2}°: a = {a}, theory {a_theory}"
                );
            }
        }
    }
}

// --- issue 14 (world14): Coulomb's law per friction patch ---
/// The block on a patch of μ_p inside ground of another μ (0.9 or 0.05, so the ground's own
/// value would give the other answer): it slides iff tan θ > μ_p, with a = g (sin θ − μ_p
/// cos θ) (the textbook law above). The patch spans the block's whole slide (u from −4 m to
/// 1 m); the ground's boxes are split at its edges.
#[test]
fn block_on_a_friction_patch_obeys_coulombs_law_with_the_patch_mu() {
    for (mu_p, ground_mu) in [(0.2, 0.9), (0.5, 0.05)] {
        let friction_angle = f64::atan(mu_p).to_degrees();
        for offset in [-4.0, 4.0] {
            let angle = friction_angle + offset;
            let patch = PatchRect {
                u0: -4.0,
                u1: 1.0,
                v0: -0.5,
                v1: 0.5,
                mu: mu_p,
            };
            let ground = Ground::plane(angle, 0.0).with(&TerrainVariant::PLANE, 0, Some(patch));
            assert_eq!(ground.friction_at(0.0, 0.0, ground_mu), mu_p);
            assert_eq!(ground.friction_at(0.0, 0.8, ground_mu), ground_mu);
            let (d_half, d_full) = block_on_ground(&ground, angle, ground_mu);
            let th = angle.to_radians();
            let a_theory = G * (th.sin() - mu_p * th.cos());
            if a_theory <= 0.0 {
                assert!(
                    d_full.abs() < 1e-4,
                    "patch μ {mu_p}, {angle:.2}°: block crept {d_full} m"
                );
            } else {
                let a = (d_full - d_half) / (0.5 * (1.0 - 0.25));
                eprintln!(
                    "patch μ {mu_p} (ground {ground_mu}), {angle:.2}°: a = {a:.5}, theory {a_theory:.5}"
                );
                assert!(
                    (a - a_theory).abs() < 0.01 * a_theory,
                    "patch μ {mu_p}, {angle:.2}°: a = {a}, theory {a_theory}"
                );
            }
        }
    }
}
// --- end issue 14 ---

fn nominal_state(robot: &LoadedRobot) -> (DVector<f64>, DVector<f64>) {
    let model = &robot.model;
    let mut q = model.neutral();
    for (k, a) in robot.facts.nominal_joints(model).into_iter().enumerate() {
        q[model.nq_base() + k] = a;
    }
    (q, DVector::zeros(model.nv()))
}

/// Place the robot's feet on the terrain at the origin in its nominal posture, trunk parallel to
/// the ground, feet just touching.
fn standing_state(robot: &LoadedRobot, slope: &Slope) -> (DVector<f64>, DVector<f64>) {
    let (mut q, v) = nominal_state(robot);
    let model = &robot.model;
    let mut ws = Workspace::new(model);
    gripsweep_controllers::algorithms::forward_kinematics(model, &mut ws, &q);
    let foot = robot.foot_frames()[0];
    let foot_z = gripsweep_controllers::algorithms::frame_pose(model, &ws, foot)
        .trans
        .z;
    // Base frame above the sloped surface by the standing height, tilted with the slope.
    let height = -foot_z + robot.facts.feet.radius;
    let rot = nalgebra::Rotation3::from_axis_angle(&Vec3::y_axis(), -slope.angle).into_inner();
    let base = Pose::new(rot, slope.normal_at(0.0, 0.0) * height);
    gripsweep_controllers::configuration::set_base_pose(&mut q, &base);
    (q, v)
}

/// Stiff joint PD around the nominal posture.
fn hold(
    plant: &mut Plant,
    q_ref: &DVector<f64>,
    q: &DVector<f64>,
    v: &DVector<f64>,
    kp: f64,
    kd: f64,
) {
    let n = q_ref.len() - 7;
    let tau: Vec<f64> = (0..n)
        .map(|k| kp * (q_ref[7 + k] - q[7 + k]) - kd * v[6 + k])
        .collect();
    plant.set_joint_torques(&tau);
}

/// Plant steps in `seconds` at the default plant step (the checks below hold time, not steps).
fn steps(seconds: f64) -> usize {
    (seconds / PlantSettings::default().dt).round() as usize
}

#[test]
fn standing_robot_contact_forces_carry_its_weight() {
    let robot = LoadedRobot::demo().unwrap();
    let slope = Slope::degrees(0.0);
    let mut plant = Plant::new(&robot, Box::new(slope), 1.0, PlantSettings::default());
    let (q0, v0) = standing_state(&robot, &slope);
    plant.set_state(&q0, &v0);
    let mut q = q0.clone();
    let mut v = v0.clone();
    let mut sum = Vec3::zeros();
    let mut count = 0;
    for step in 0..steps(1.5) {
        plant.state(&mut q, &mut v);
        hold(&mut plant, &q0, &q, &v, 300.0, 5.0);
        plant.step().unwrap();
        if step >= steps(1.0) {
            sum += plant.feet().iter().map(|f| f.force).sum::<Vec3>();
            count += 1;
        }
    }
    let mean = sum / count as f64;
    let weight = robot.model.total_mass() * G;
    eprintln!(
        "mean contact force {mean:?}, weight {weight}; trunk z {}",
        q[2]
    );
    assert!(
        (mean.z - weight).abs() < 0.01 * weight,
        "vertical {} vs weight {weight}",
        mean.z
    );
    assert!(mean.x.abs() < 0.01 * weight && mean.y.abs() < 0.01 * weight);
    assert!(plant.feet().iter().all(|f| f.in_contact));
}

/// Robot held stiff on a slope facing uphill: its downhill displacement between 1 s and 2 s and
/// between 1.5 s and 2 s (the first second lets the landing transient settle: feet placed at the
/// nominal posture take up the load and the downhill feet, which carry more, may slip briefly).
fn robot_slide_on_slope(angle_deg: f64, mu: f64) -> (f64, f64) {
    let robot = LoadedRobot::demo().unwrap();
    let slope = Slope::degrees(angle_deg);
    let mut plant = Plant::new(&robot, Box::new(slope), mu, PlantSettings::default());
    let (q0, v0) = standing_state(&robot, &slope);
    plant.set_state(&q0, &v0);
    let (mut q, mut v) = (q0.clone(), v0.clone());
    let downhill = -slope.uphill();
    let mut marks = [Vec3::zeros(); 2];
    let (one, half) = (steps(1.0), steps(0.5));
    for step in 1..=steps(2.0) {
        plant.state(&mut q, &mut v);
        hold(&mut plant, &q0, &q, &v, 1000.0, 10.0);
        plant.step().unwrap();
        if step == one || step == one + half {
            plant.state(&mut q, &mut v);
            marks[(step - one) / half] = Vec3::new(q[0], q[1], q[2]);
        }
    }
    plant.state(&mut q, &mut v);
    let end = Vec3::new(q[0], q[1], q[2]);
    (
        (end - marks[0]).dot(&downhill),
        (end - marks[1]).dot(&downhill),
    )
}

#[test]
fn robot_held_stiff_slides_iff_slope_exceeds_friction_angle() {
    for mu in [0.3, 0.45] {
        let fa = f64::atan(mu).to_degrees();
        for offset in [-2.0, 2.0] {
            let angle = fa + offset;
            let (d_1s, d_half_s) = robot_slide_on_slope(angle, mu);
            if offset < 0.0 {
                eprintln!("μ {mu}: {angle:.2}° moved {d_1s:.2e} m in the last second");
                assert!(d_1s.abs() < 1e-3, "μ {mu} at {angle:.1}° slid {d_1s} m");
            } else {
                // Steady sliding: d(t) = v0 t + a t²/2 over [1, 2] and [1.5, 2] gives a.
                // d[1,2] = v₁ + a/2, d[1.5,2] = v₁/2 + 3a/8  ⇒  a = 4 (2 d[1.5,2] − d[1,2]).
                let a = 4.0 * (2.0 * d_half_s - d_1s);
                let th = angle.to_radians();
                let mu_eff = (G * th.sin() - a) / (G * th.cos());
                eprintln!(
                    "μ {mu}: {angle:.2}° slid {d_1s:.4} m in the last second, effective μ {mu_eff:.4}"
                );
                assert!(d_1s > 0.05, "μ {mu} at {angle:.1}° held ({d_1s} m)");
                assert!(
                    (mu_eff - mu).abs() < 0.05 * mu,
                    "effective μ {mu_eff} vs {mu}"
                );
            }
        }
    }
}

fn fixed_base(robot: &mut LoadedRobot, height: f64) {
    robot.model.root = RootKind::Fixed;
    robot.model.fixed_base_pose =
        Pose::new(nalgebra::Matrix3::identity(), Vec3::new(0.0, 0.0, height));
}

#[test]
fn gravity_torques_of_the_model_hold_the_legs_in_the_air() {
    let mut robot = LoadedRobot::demo().unwrap();
    fixed_base(&mut robot, 1.0);
    let model: &Model = &robot.model;
    let mut plant = Plant::new(
        &robot,
        Box::new(Slope::degrees(0.0)),
        1.0,
        PlantSettings::default(),
    );
    let q0 = DVector::from_vec(robot.facts.nominal_joints(model));
    let v0 = DVector::zeros(model.nv());
    plant.set_state(&q0, &v0);
    let mut ws = Workspace::new(model);
    let g = nonlinear_effects(model, &mut ws, &q0, &v0).clone();
    plant.set_joint_torques(g.as_slice());
    let (mut q, mut v) = (q0.clone(), v0.clone());
    for _ in 0..2000 {
        plant.step().unwrap();
    }
    plant.state(&mut q, &mut v);
    let drift = (&q - &q0).amax();
    eprintln!("gravity hold drift after 2 s: {drift:e} rad");
    assert!(drift < 1e-4, "drift {drift}");
}

/// v after `dt` from (q, v) under constant τ by classical RK4 on the model.
fn rk4_velocity(
    model: &Model,
    ws: &mut Workspace,
    q: &DVector<f64>,
    v: &DVector<f64>,
    tau: &DVector<f64>,
    dt: f64,
    n: usize,
) -> DVector<f64> {
    use gripsweep_controllers::configuration::integrate;
    let h = dt / n as f64;
    let (mut q, mut v) = (q.clone(), v.clone());
    for _ in 0..n {
        let a1 = forward_dynamics(model, ws, &q, &v, tau).unwrap();
        let v2 = &v + &a1 * (h / 2.0);
        let a2 = forward_dynamics(model, ws, &integrate(model, &q, &v, h / 2.0), &v2, tau).unwrap();
        let v3 = &v + &a2 * (h / 2.0);
        let a3 =
            forward_dynamics(model, ws, &integrate(model, &q, &v2, h / 2.0), &v3, tau).unwrap();
        let v4 = &v + &a3 * h;
        let a4 = forward_dynamics(model, ws, &integrate(model, &q, &v3, h), &v4, tau).unwrap();
        let dq = (&v + &v2 * 2.0 + &v3 * 2.0 + &v4) / 6.0;
        q = integrate(model, &q, &dq, h);
        v += (a1 + a2 * 2.0 + a3 * 2.0 + a4) * (h / 6.0);
    }
    v
}

#[test]
fn plant_acceleration_matches_model_forward_dynamics() {
    let mut robot = LoadedRobot::demo().unwrap();
    robot.model.gravity = Vec3::zeros();
    let model = robot.model.clone();
    let (mut q0, _) = nominal_state(&robot);
    q0[2] = 2.0;
    let mut ws = Workspace::new(&model);
    let mut errors = Vec::new();
    for substeps in [1, 2, 4, 8] {
        let settings = PlantSettings {
            substeps,
            ..PlantSettings::default()
        };
        let mut worst = 0.0f64;
        for trial in 0..5 {
            let s = trial as f64;
            let mut q = q0.clone();
            let quat = nalgebra::UnitQuaternion::from_euler_angles(0.1 * s, -0.2, 0.3 + 0.05 * s);
            q[3] = quat.i;
            q[4] = quat.j;
            q[5] = quat.k;
            q[6] = quat.w;
            let v = DVector::from_fn(model.nv(), |i, _| ((i as f64 + 1.0) * (0.7 + s)).sin());
            let mut tau = DVector::from_fn(model.nv(), |i, _| 5.0 * ((i as f64) * 1.3 + s).cos());
            tau.rows_mut(0, 6).fill(0.0);
            let mut plant = Plant::new(&robot, Box::new(Slope::degrees(0.0)), 1.0, settings);
            plant.set_state(&q, &v);
            plant.set_joint_torques(&tau.as_slice()[6..]);
            plant.step().unwrap();
            let (mut q1, mut v1) = (q.clone(), v.clone());
            plant.state(&mut q1, &mut v1);
            // Reference: the model's forward dynamics integrated over the same step with RK4 at
            // 50 sub-intervals (error ~1e-12), so the comparison measures the engine's
            // integrator, not the finite difference.
            let v_ref = rk4_velocity(&model, &mut ws, &q, &v, &tau, settings.dt, 50);
            let dv_plant = &v1 - &v;
            let dv_ref = &v_ref - &v;
            let rel = (&dv_plant - &dv_ref).norm() / dv_ref.norm();
            worst = worst.max(rel);
        }
        eprintln!("substeps {substeps}: worst relative v̇ error {worst:e}");
        errors.push(worst);
    }
    assert!(errors[2] < 0.02, "4 substeps: {}", errors[2]);
    // First order in dt / substeps: 8 substeps at least 4× better than 1.
    assert!(
        errors[3] < errors[0] / 4.0,
        "error must shrink with substeps: {errors:?}"
    );
}

#[test]
fn joint_friction_at_constant_velocity_is_the_configured_value() {
    // A turntable: one link spinning about the vertical on a fixed base, no gravity torque.
    let urdf = r#"<robot name="turntable">
      <link name="stand"><inertial><mass value="5"/><inertia ixx="0.1" ixy="0" ixz="0" iyy="0.1" iyz="0" izz="0.1"/></inertial></link>
      <link name="plate"><inertial><mass value="1"/><inertia ixx="0.01" ixy="0" ixz="0" iyy="0.01" iyz="0" izz="0.02"/></inertial></link>
      <link name="toe"><inertial><mass value="0.01"/><inertia ixx="1e-6" ixy="0" ixz="0" iyy="1e-6" iyz="0" izz="1e-6"/></inertial></link>
      <joint name="spin" type="continuous"><parent link="stand"/><child link="plate"/><axis xyz="0 0 1"/><limit effort="10" velocity="100"/></joint>
      <joint name="toe_mount" type="fixed"><origin xyz="0.1 0 0.5"/><parent link="plate"/><child link="toe"/></joint>
    </robot>"#;
    let facts = r#"urdf = "x"
      [feet]
      frames = ["toe"]
      radius = 0.01
      [actuators]
      coulomb = 0.3
      viscous = 0.05
      torque_loop_gain = 9.0
    "#;
    let mut robot =
        LoadedRobot::from_texts("turntable.toml", facts, "turntable.urdf", urdf).unwrap();
    fixed_base(&mut robot, 1.0);
    let params = robot.facts.actuator("spin");
    let tau = 1.0;
    for kind in ActuatorKind::ALL {
        let settings = PlantSettings::default();
        let mut plant = Plant::new(&robot, Box::new(Slope::degrees(0.0)), 1.0, settings);
        let mut act = kind.build(&params, 10.0, settings.dt);
        let (c, b) = act.friction();
        plant.set_joint_friction(&[c], &[b]);
        let (mut q, mut v) = (DVector::zeros(1), DVector::zeros(1));
        plant.set_state(&q, &v);
        for _ in 0..steps(4.0) {
            let applied = act.drive(tau);
            plant.set_joint_torques(&[applied]);
            plant.step().unwrap();
        }
        plant.state(&mut q, &mut v);
        // Steady state: applied torque = Coulomb + viscous × ω (ideal: no friction, so the
        // plate keeps accelerating at τ / I).
        let applied = act.drive(tau);
        // ω(t) = ω_ss (1 − e^{−b t / I}), ω_ss = (τ − c) / b: the applied torque minus the
        // friction the engine applied accelerates the plate (ideal: none, ω = τ t / I).
        let i_zz = 0.02 + 0.01 * 0.1f64.powi(2) + 1e-6;
        let t = 4.0;
        let omega_expected = if b > 0.0 {
            (applied - c) / b * (1.0 - (-b * t / i_zz).exp())
        } else {
            applied * t / i_zz
        };
        eprintln!("{kind}: ω {} rad/s, expected {omega_expected}", v[0]);
        assert!(
            (v[0] - omega_expected).abs() < 2e-3 * omega_expected,
            "{kind}: ω {} vs {omega_expected}",
            v[0]
        );
    }
    // Torque sensing divides the friction by 1 + gain = 10.
    let open = ActuatorKind::OpenCurrent
        .build(&params, 10.0, 1e-3)
        .friction();
    let sensed = ActuatorKind::TorqueLoop
        .build(&params, 10.0, 1e-3)
        .friction();
    assert!((open.0 / sensed.0 - 10.0).abs() < 1e-12 && (open.1 / sensed.1 - 10.0).abs() < 1e-12);
}

#[test]
fn plant_state_round_trips_in_model_conventions() {
    // set_state then state gives back (q, v): base pose and body-frame twist through the
    // plant's centre-of-mass root, joint angles and rates through the engine's coordinates;
    // and the plant's foot centres are where the model's kinematics puts them.
    let robot = LoadedRobot::demo().unwrap();
    let model = &robot.model;
    let mut ws = Workspace::new(model);
    let (q0, _) = nominal_state(&robot);
    for trial in 0..5 {
        let s = trial as f64;
        let mut q = q0.clone();
        q[0] = 0.3 * s;
        q[1] = -0.1;
        q[2] = 1.5;
        let quat = nalgebra::UnitQuaternion::from_euler_angles(0.2 - 0.1 * s, 0.3, -0.4 * s);
        q[3] = quat.i;
        q[4] = quat.j;
        q[5] = quat.k;
        q[6] = quat.w;
        for k in 0..12 {
            q[7 + k] += 0.1 * ((k as f64) + s).sin();
        }
        let v = DVector::from_fn(model.nv(), |i, _| ((i as f64) * 0.7 + s).cos());
        let mut plant = Plant::new(
            &robot,
            Box::new(Slope::degrees(0.0)),
            1.0,
            PlantSettings::default(),
        );
        plant.set_state(&q, &v);
        let (mut q1, mut v1) = (q.clone(), v.clone());
        plant.state(&mut q1, &mut v1);
        // The quaternion may come back negated (same rotation).
        let sign = if q1.rows(3, 4).dot(&q.rows(3, 4)) < 0.0 {
            -1.0
        } else {
            1.0
        };
        for i in 3..7 {
            q1[i] *= sign;
        }
        assert!(
            (&q1 - &q).amax() < 1e-12,
            "q differs by {}",
            (&q1 - &q).amax()
        );
        assert!(
            (&v1 - &v).amax() < 1e-12,
            "v differs by {}",
            (&v1 - &v).amax()
        );
        gripsweep_controllers::algorithms::forward_kinematics(model, &mut ws, &q);
        for (i, f) in robot.foot_frames().iter().enumerate() {
            let p = gripsweep_controllers::algorithms::frame_pose(model, &ws, *f).trans;
            let c = plant.feet()[i].centre;
            assert!((p - c).norm() < 1e-12, "foot {i}: model {p:?}, plant {c:?}");
        }
    }
}
