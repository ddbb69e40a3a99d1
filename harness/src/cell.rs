//! One cell end to end: plan → loop at the physics rate (plant → observation → law at its rate
//! → actuators → plant) → metrics. Every failure mode ends in a status, never a panic that
//! stops the run.

use crate::matrix::Cell;
use crate::metrics::{
    CellMetrics, CellStatus, INFEASIBLE_SHARE, MetricsAccumulator, law_share_text,
    no_control_reason,
};
use crate::planner::{Plan, PlanSample};
use crate::plant::actuator::Actuator;
use crate::plant::terrain::Terrain;
use crate::plant::world::{Ground, PatchRect, PatchShape, push_force};
use crate::plant::{Plant, PlantSettings};
use crate::robot::LoadedRobot;
use crate::scenario::{NoiseFile, Scenario};
use gripsweep_controllers::Model;
use gripsweep_controllers::algorithms::base_pose;
use gripsweep_controllers::laws::{
    ControlLaw, LawSettings, LawStatus, Observation, Target, build_law,
};
use gripsweep_controllers::spatial::{Inertia, Vec3, so3_exp};
use nalgebra::DVector;
use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::StandardNormal;
use std::time::Instant;

/// What one cell produced.
#[derive(Clone, Debug, PartialEq)]
pub struct CellOutcome {
    pub status: CellStatus,
    pub message: String,
    pub metrics: CellMetrics,
    /// Machine measurements (kept out of `cells.csv`): law compute time per control step.
    pub compute_median_us: f64,
    pub compute_p99_us: f64,
    pub wall_s: f64,
}

/// One row of a time trace (`gripsweep trace`), taken after a plant step at time `t`.
#[derive(Clone, Debug, Default)]
pub struct TraceRow {
    pub t: f64,
    /// The plant's state, model conventions (`q` with the base quaternion x y z w).
    pub q: Vec<f64>,
    /// The base twist, model conventions: linear then angular velocity, base frame.
    pub v_base: [f64; 6],
    /// The plan's configuration at `t` (base pose and joint references).
    pub plan_q: Vec<f64>,
    pub tau: Vec<f64>,
    /// Measured ground force per foot, surface frame [normal, t1 (uphill), t2], N.
    pub foot_force: Vec<[f64; 3]>,
    /// The law's predicted contact force per foot, same surface frame, N (zeros when the law
    /// predicts none).
    pub foot_predicted: Vec<[f64; 3]>,
    /// Each foot's ground point (sphere centre − r n), world, m.
    pub foot_pos: Vec<[f64; 3]>,
    /// Tangential speed of each foot's contact point, m/s (a planned-swing foot's is its
    /// swing speed; the trace writer leaves those blank).
    pub foot_slip: Vec<f64>,
    /// The plan's stance flag per foot (at the control step that made this row's torques).
    pub stance: Vec<bool>,
    pub law_status: &'static str,
}

/// Settings every cell of a scenario shares.
pub struct CellContext<'a> {
    pub scenario: &'a Scenario,
    pub robot: &'a LoadedRobot,
}

/// The controllers' model for a cell: masses and inertias scaled, trunk centre of mass shifted
/// forward (base x) — the model-error axis. The plant keeps the true model.
pub fn controller_model(truth: &Model, mass_scale: f64, com_shift_mm: f64) -> Model {
    let mut m = truth.clone();
    for (b, inertia) in m.inertias.iter_mut().enumerate() {
        let mut c = inertia.com();
        if b == 0 {
            c.x += com_shift_mm * 1e-3;
        }
        *inertia = Inertia::from_com(
            inertia.mass * mass_scale,
            c,
            inertia.inertia_at_com() * mass_scale,
        );
    }
    m
}

/// Law settings for a cell: the ground normal of its (nominal) terrain and the estimated μ.
pub fn law_settings(
    base: &LawSettings,
    slope: &dyn Terrain,
    mu: f64,
    mu_estimate_scale: f64,
) -> LawSettings {
    LawSettings {
        ground_normal: slope.normal_at(0.0, 0.0),
        mu_estimate: mu * mu_estimate_scale,
        ..base.clone()
    }
}

fn noise_sample(rng: &mut ChaCha8Rng, std: f64) -> f64 {
    if std == 0.0 {
        0.0
    } else {
        let z: f64 = rng.sample(StandardNormal);
        z * std
    }
}

/// Add seeded sensor noise to an observed state (level × the scenario's profile).
fn add_noise(
    q: &mut DVector<f64>,
    v: &mut DVector<f64>,
    p: &NoiseFile,
    level: f64,
    rng: &mut ChaCha8Rng,
) {
    if level == 0.0 {
        return;
    }
    let nj = q.len() - 7;
    for k in 0..3 {
        q[k] += noise_sample(rng, level * p.base_position);
        v[k] += noise_sample(rng, level * p.base_linear_velocity);
        v[3 + k] += noise_sample(rng, level * p.base_angular_velocity);
    }
    let w = Vec3::new(
        noise_sample(rng, level * p.base_orientation),
        noise_sample(rng, level * p.base_orientation),
        noise_sample(rng, level * p.base_orientation),
    );
    let quat = nalgebra::UnitQuaternion::from_quaternion(nalgebra::Quaternion::new(
        q[6], q[3], q[4], q[5],
    ));
    let rot = quat.to_rotation_matrix().into_inner() * so3_exp(&w);
    let noisy = nalgebra::UnitQuaternion::from_rotation_matrix(
        &nalgebra::Rotation3::from_matrix_unchecked(rot),
    );
    q[3] = noisy.i;
    q[4] = noisy.j;
    q[5] = noisy.k;
    q[6] = noisy.w;
    for k in 0..nj {
        q[7 + k] += noise_sample(rng, level * p.joint_angle);
        v[6 + k] += noise_sample(rng, level * p.joint_rate);
    }
}

/// Simulate one cell. `trace`: collect a time series every `every` plant steps.
pub fn run_cell(
    ctx: &CellContext,
    cell: &Cell,
    trace: Option<(&mut Vec<TraceRow>, usize)>,
) -> CellOutcome {
    run_cell_with_plan(ctx, cell, None, trace)
}

/// [`run_cell`] with a plan built beforehand for the cell's slope (plans depend only on the
/// robot, the slope, the gait and the duration, so a run builds one per slope and shares it).
pub fn run_cell_with_plan(
    ctx: &CellContext,
    cell: &Cell,
    plan: Option<&Plan>,
    mut trace: Option<(&mut Vec<TraceRow>, usize)>,
) -> CellOutcome {
    let wall = Instant::now();
    let mut outcome = simulate(ctx, cell, plan, trace.as_mut().map(|(v, e)| (&mut **v, *e)));
    outcome.wall_s = wall.elapsed().as_secs_f64();
    outcome
}

fn error_outcome(message: String) -> CellOutcome {
    CellOutcome {
        status: CellStatus::Error,
        message,
        metrics: CellMetrics {
            slip_mean_mm: f64::NAN,
            joint_rms_deg: f64::NAN,
            friction_over_share: f64::NAN,
            stance_off_ground_share: f64::NAN,
            ..CellMetrics::default()
        },
        compute_median_us: f64::NAN,
        compute_p99_us: f64::NAN,
        wall_s: 0.0,
    }
}

fn simulate(
    ctx: &CellContext,
    cell: &Cell,
    shared: Option<&Plan>,
    mut trace: Option<(&mut Vec<TraceRow>, usize)>,
) -> CellOutcome {
    let s = ctx.scenario;
    let robot = ctx.robot;
    let model = &robot.model;
    // issue 14 (world14): the planner plans on the nominal plane (slope and heading); the
    // plant's ground adds what the plan does not see (step, bumps, friction patch).
    let slope = Ground::plane(cell.slope_deg, cell.world.heading_deg);
    let built;
    let plan = match shared {
        Some(p) => p,
        None => match Plan::build(model, &robot.facts, &slope, &s.gait, s.duration) {
            Ok(p) => {
                built = p;
                &built
            }
            Err(e) => return error_outcome(format!("plan: {e}")),
        },
    };
    let settings: PlantSettings = s.plant;
    let dt = settings.dt;
    let feet = robot.foot_frames();
    let (q0, _) = plan.initial_state();
    let patch = match patch_rect(ctx, cell, &slope, &q0) {
        Ok(p) => p,
        Err(e) => return error_outcome(e),
    };
    let terrain_variant = s.world.terrain(&cell.world.terrain);
    let ground = Ground::plane(cell.slope_deg, cell.world.heading_deg).with(
        &terrain_variant,
        cell.seed,
        patch,
    );
    let mut plant = Plant::new(robot, Box::new(ground), cell.mu, settings);
    let push = s.world.push.get(&cell.world.push).cloned();
    let push_start = push
        .as_ref()
        .map_or(0.0, |p| (p.cycle as f64 + p.phase) * plan.cycle_time());
    let nj = model.n_joints();

    // Actuators per joint, and the joint friction each model shows.
    let mut actuators: Vec<Box<dyn Actuator>> = model
        .joints
        .iter()
        .map(|j| {
            cell.actuator
                .build(&robot.facts.actuator(&j.name), j.effort_limit, dt)
        })
        .collect();
    let (coulomb, viscous): (Vec<f64>, Vec<f64>) = actuators.iter().map(|a| a.friction()).unzip();
    plant.set_joint_friction(&coulomb, &viscous);

    // Initial state: the plan's, joints jittered by the seed (±2 mrad) so seeds differ.
    let mut rng = ChaCha8Rng::seed_from_u64(cell.rng_seed());
    let (mut q, mut v) = plan.initial_state();
    if cell.seed > 0 {
        for k in 0..nj {
            q[7 + k] += 2e-3 * (2.0 * rng.random::<f64>() - 1.0);
        }
    }
    plant.set_state(&q, &v);

    let law_model = controller_model(model, cell.mass_scale, cell.com_shift_mm);
    let base_law = s.law_settings_for(&cell.controller, cell.rate_hz, cell.actuator);
    let settings_law = LawSettings {
        foot_radius: robot.facts.feet.radius,
        // issue 14 (world14): a known patch gives each foot the μ̂ under its starting spot
        // (a track patch stays under its foot all run).
        mu_estimate_feet: match patch {
            Some(p) if cell.world.patch_known => foot_spots(ctx, &slope, &q0)
                .iter()
                .map(|&(u, v)| {
                    let mu = if p.contains(u, v) { p.mu } else { cell.mu };
                    mu * cell.world.mu_estimate_scale
                })
                .collect(),
            _ => Vec::new(),
        },
        ..law_settings(&base_law, &slope, cell.mu, cell.world.mu_estimate_scale)
    };
    let mut law: Box<dyn ControlLaw> =
        match build_law(&cell.controller, law_model, feet.clone(), &settings_law) {
            Ok(l) => l,
            Err(e) => return error_outcome(e),
        };

    let steps = (s.duration / dt).round() as usize;
    let every = (1.0 / (cell.rate_hz * dt)).round().max(1.0) as usize;
    let delay_steps = (s.noise.delay / dt).round() as usize;
    let uphill = slope.forward();
    let start = Vec3::new(q[0], q[1], q[2]);
    let limits: Vec<f64> = model.joints.iter().map(|j| j.effort_limit).collect();
    let mut acc =
        MetricsAccumulator::new(feet.len(), dt, cell.mu, start).with_torque_limits(&limits);
    // issue 14 (world14): the metrics an unperceived world needs.
    let mut world_acc = crate::world_metrics::WorldAccumulator::new(
        feet.len(),
        nj,
        dt,
        model.total_mass() * model.gravity.norm(),
        push.as_ref().map(|_| push_start),
    );
    let mut sample: PlanSample = plan.new_sample();
    let mut reached: PlanSample = plan.new_sample();
    let mut command = vec![0.0; nj];
    let mut applied = vec![0.0; nj];
    let (mut q_obs, mut v_obs) = (q.clone(), v.clone());
    // Delayed observations: a ring of past true states at the plant rate.
    let mut ring: Vec<(DVector<f64>, DVector<f64>)> =
        (0..=delay_steps).map(|_| (q.clone(), v.clone())).collect();
    let mut compute_us: Vec<f64> = Vec::with_capacity(steps / every + 1);
    let mut status = CellStatus::Ok;
    let mut message = String::new();
    let mut last_law = LawStatus::Solved;
    let fall_height = s.falls.min_height_share * s.body_height;
    let max_tilt = s.falls.max_tilt_deg.to_radians();
    let mut joint_err = vec![0.0; nj];

    plant.state(&mut q, &mut v);
    for step in 0..steps {
        let t = step as f64 * dt;
        plan.sample(t, &mut sample);
        // (q, v) hold the state after the previous step.
        let slot = step % ring.len();
        ring[slot].0.copy_from(&q);
        ring[slot].1.copy_from(&v);
        if step % every == 0 {
            let old = (step + 1) % ring.len();
            let (qd, vd) = if delay_steps == 0 || step < delay_steps {
                (&q, &v)
            } else {
                (&ring[old].0, &ring[old].1)
            };
            q_obs.copy_from(qd);
            v_obs.copy_from(vd);
            add_noise(
                &mut q_obs,
                &mut v_obs,
                &s.noise,
                cell.sensor_noise,
                &mut rng,
            );
            let t0 = Instant::now();
            last_law = law.compute(
                &Observation {
                    q: &q_obs,
                    v: &v_obs,
                },
                &Target {
                    q: &sample.q,
                    v: &sample.v,
                    a: &sample.a,
                    stance: &sample.stance,
                },
                &mut command,
            );
            compute_us.push(t0.elapsed().as_secs_f64() * 1e6);
            acc.control_step(last_law);
            world_acc.control_step(&command, cell.rate_hz);
            if command.iter().any(|x| !x.is_finite()) {
                status = CellStatus::Diverged;
                message = format!("the law returned a non-finite torque at t = {t:.3} s");
                break;
            }
        }
        let mut saturated = false;
        for k in 0..nj {
            applied[k] = actuators[k].drive(command[k]);
            saturated |= actuators[k].saturated();
        }
        plant.set_joint_torques(&applied);
        if let Some(p) = &push {
            plant.set_base_force(push_force(p, push_start, t, dt, &slope));
        }
        if let Err(d) = plant.step() {
            status = CellStatus::Diverged;
            message = d.0;
            break;
        }
        plant.state(&mut q, &mut v);
        // Tracking against the plan at the time the plant has reached, t + dt.
        plan.sample(t + dt, &mut reached);
        let base = base_pose(model, &q);
        let plan_base = base_pose(model, &reached.q);
        for k in 0..nj {
            joint_err[k] = q[7 + k] - reached.q[7 + k];
        }
        acc.step(
            &sample.stance,
            plant.feet(),
            &base.trans,
            &base.rot,
            &plan_base.trans,
            &plan_base.rot,
            joint_err.iter().copied(),
            &applied,
            &v.as_slice()[6..],
            saturated,
        );
        world_acc.step(
            t + dt,
            &sample.stance,
            plant.feet(),
            crate::world_metrics::base_error(&base.trans, &plan_base.trans),
        );
        if let Some((rows, every_n)) = trace.as_mut()
            && step % *every_n == 0
        {
            let surface = |f: &crate::plant::FootReading, w: &Vec3| {
                let (n, t1, t2) = slope.surface_frame(f.contact_point.x, f.contact_point.y);
                [w.dot(&n), w.dot(&t1), w.dot(&t2)]
            };
            let predicted = law.predicted_forces();
            rows.push(TraceRow {
                t: t + dt,
                q: q.as_slice().to_vec(),
                v_base: std::array::from_fn(|k| v[k]),
                plan_q: reached.q.as_slice().to_vec(),
                tau: applied.clone(),
                foot_force: plant.feet().iter().map(|f| f.force_surface).collect(),
                foot_predicted: plant
                    .feet()
                    .iter()
                    .enumerate()
                    .map(|(i, f)| predicted.get(i).map_or([0.0; 3], |w| surface(f, w)))
                    .collect(),
                foot_pos: plant
                    .feet()
                    .iter()
                    .map(|f| [f.contact_point.x, f.contact_point.y, f.contact_point.z])
                    .collect(),
                foot_slip: plant
                    .feet()
                    .iter()
                    .map(|f| f.slip_velocity.norm())
                    .collect(),
                stance: sample.stance.clone(),
                law_status: last_law.name(),
            });
        }
        // Falls: trunk low or tilted relative to the ground, or a non-foot link on the ground.
        let slope = plant.terrain();
        let n = slope.normal_at(base.trans.x, base.trans.y);
        let height = (base.trans
            - Vec3::new(
                base.trans.x,
                base.trans.y,
                slope.height_at(base.trans.x, base.trans.y),
            ))
        .dot(&n);
        let tilt = (base.rot.column(2).dot(&n)).clamp(-1.0, 1.0).acos();
        if plant.body_touching_ground() || height < fall_height || tilt > max_tilt {
            status = CellStatus::Fell;
            message = if plant.body_touching_ground() {
                format!(
                    "a link other than a foot touched the ground at t = {:.3} s",
                    t + dt
                )
            } else if height < fall_height {
                format!(
                    "trunk {:.0} mm above the ground at t = {:.3} s",
                    height * 1e3,
                    t + dt
                )
            } else {
                format!(
                    "trunk tilted {:.0}° at t = {:.3} s",
                    tilt.to_degrees(),
                    t + dt
                )
            };
            break;
        }
    }
    let end = Vec3::new(q[0], q[1], q[2]);
    let mut metrics = acc.finish(&end, &uphill, plan.planned_progress(), nj);
    metrics.world = world_acc.finish(plant.time());
    // Judge a run that stayed up: first whether the law controlled the robot at all, then
    // whether it met its own constraints (README, "Statuses").
    if status == CellStatus::Ok {
        if let Some(reason) = no_control_reason(&metrics, s.body_height) {
            status = CellStatus::NoControl;
            message = format!("{reason} ({})", law_share_text(&metrics));
        } else if metrics.law_trouble_share > INFEASIBLE_SHARE {
            status = CellStatus::Infeasible;
            message = format!(
                "the law reported trouble on {:.0} % of control steps (test: > {:.0} %): {}",
                100.0 * metrics.law_trouble_share,
                100.0 * INFEASIBLE_SHARE,
                law_share_text(&metrics)
            );
        }
    }
    compute_us.sort_by(|a, b| a.total_cmp(b));
    let pick = |p: f64| {
        if compute_us.is_empty() {
            f64::NAN
        } else {
            compute_us[((compute_us.len() - 1) as f64 * p).round() as usize]
        }
    };
    CellOutcome {
        status,
        message,
        metrics,
        compute_median_us: pick(0.5),
        compute_p99_us: pick(0.99),
        wall_s: 0.0,
    }
}

// --- issue 14 (world14) ---
/// Plane coordinates (u along the path, v to the left) of each foot's ground point at `q`.
fn foot_spots(ctx: &CellContext, ground: &Ground, q: &DVector<f64>) -> Vec<(f64, f64)> {
    let model = &ctx.robot.model;
    let mut ws = gripsweep_controllers::algorithms::Workspace::new(model);
    gripsweep_controllers::algorithms::forward_kinematics(model, &mut ws, q);
    ctx.robot
        .foot_frames()
        .iter()
        .map(|&f| {
            let p = gripsweep_controllers::algorithms::frame_pose(model, &ws, f).trans;
            ground.plane_coords(p.x, p.y)
        })
        .collect()
}

/// The cell's friction patch in plane coordinates (a track follows its foot's starting spot).
fn patch_rect(
    ctx: &CellContext,
    cell: &Cell,
    ground: &Ground,
    q0: &DVector<f64>,
) -> Result<Option<PatchRect>, String> {
    let Some(shape) = ctx.scenario.world.patch.get(&cell.world.patch) else {
        return Ok(None);
    };
    let mu = cell.world.patch_mu;
    Ok(Some(match shape {
        PatchShape::Strip { at, width } => PatchRect {
            u0: *at,
            u1: at + width,
            v0: -1e3,
            v1: 1e3,
            mu,
        },
        PatchShape::Track { foot, width } => {
            let names = &ctx.robot.facts.feet.frames;
            let Some(i) = names.iter().position(|n| n == foot) else {
                return Err(format!(
                    "patch '{}': field `foot` = '{foot}': allowed: one of the robot's feet ({})",
                    cell.world.patch,
                    names.join(", ")
                ));
            };
            let (_, v) = foot_spots(ctx, ground, q0)[i];
            PatchRect {
                u0: -1.0,
                u1: 1e3,
                v0: v - 0.5 * width,
                v1: v + 0.5 * width,
                mu,
            }
        }
    }))
}
// --- end issue 14 ---
