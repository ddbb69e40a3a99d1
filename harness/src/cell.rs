//! One cell end to end: plan → loop at the physics rate (plant → observation → law at its rate
//! → actuators → plant) → metrics. Every failure mode ends in a status, never a panic that
//! stops the run.

use crate::matrix::Cell;
use crate::metrics::{
    CellMetrics, INFEASIBLE_SHARE, MetricsAccumulator, law_share_text, no_control_reason,
};
use crate::planner::{Gait, Plan, PlanSample};
use crate::plant::actuator::Actuator;
use crate::plant::terrain::Terrain;
use crate::plant::world::{Ground, PatchRect, PatchShape, PushVariant, TerrainVariant, push_force};
use crate::plant::{Plant, PlantSettings};
use crate::robot::LoadedRobot;
use crate::run_format::Outcome as CellStatus;
use crate::scenario::{FallsFile, NoiseFile, Scenario};
use gripsweep_controllers::Model;
use gripsweep_controllers::algorithms::base_pose;
use gripsweep_controllers::laws::{
    ControlLaw, LawSettings, LawStatus, Observation, Target, build_law,
};
use gripsweep_controllers::spatial::{Inertia, Mat3, Pose, Vec3, so3_exp};
use nalgebra::DVector;
use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::StandardNormal;
use std::borrow::Cow;
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
    /// A piped law's own compute time per control step as its program reports it (the
    /// round trip is `compute_*`); NaN for the built-in laws.
    pub child_median_us: f64,
    pub child_p99_us: f64,
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

/// Everything a cell's setup is built from, resolved from the scenario for one cell
/// ([`CellSpec::of`]). Probes (the slip floor, `check`, a tuning run) change a field here
/// instead of cloning and changing the scenario.
#[derive(Clone, Debug)]
pub struct CellSpec {
    pub gait: Gait,
    pub duration: f64,
    pub plant: PlantSettings,
    /// The law's settings for the cell's (law, rate, actuator): the tuned gains or the
    /// scenario's; the per-cell parts (ground normal, μ estimate, foot radius) are added by
    /// [`CellSetup::build`].
    pub law: LawSettings,
    pub mu_estimate_scale: f64,
    /// The sensor noise profile at level 1 and the observation delay.
    pub noise: NoiseFile,
    pub falls: FallsFile,
    /// The plan's trunk height, m (the fall test and the no-control test scale with it).
    pub body_height: f64,
    /// A piped law (`[external.<name>]`): the cell's law is served by a child process taken
    /// from this law's pool instead of the registry.
    pub external: Option<std::sync::Arc<crate::pipe_law::ExternalLaw>>,
    /// The world the plan does not see (issue 14): the cell's `[terrain.<name>]` (the plane
    /// when `terrain = "plane"`), `[patch.<name>]` and `[push.<name>]` (`None` at "none").
    pub terrain: TerrainVariant,
    pub patch: Option<(String, PatchShape)>,
    pub push: Option<PushVariant>,
}

impl CellSpec {
    /// The spec of `cell` in scenario `s`.
    pub fn of(s: &Scenario, cell: &Cell) -> CellSpec {
        CellSpec {
            law: s.law_settings_for(cell.controller(), cell.rate_hz(), cell.actuator()),
            external: s.external_law(cell.controller()).cloned(),
            mu_estimate_scale: cell.number("mu_estimate_scale"),
            terrain: s.world.terrain(cell.name("terrain")),
            patch: s
                .world
                .patch
                .get(cell.name("patch"))
                .map(|p| (cell.name("patch").to_string(), p.clone())),
            push: s.world.push.get(cell.name("push")).cloned(),
            ..CellSpec::scenario_defaults(s)
        }
    }

    /// The scenario's settings with the laws' default settings (a probe sets its own law
    /// settings, gait or duration on it).
    pub fn scenario_defaults(s: &Scenario) -> CellSpec {
        CellSpec {
            gait: s.gait.clone(),
            duration: s.duration,
            plant: s.plant,
            law: s.laws.clone(),
            mu_estimate_scale: s.mu_estimate_scale,
            noise: s.noise.clone(),
            falls: s.falls.clone(),
            body_height: s.body_height,
            external: None,
            terrain: TerrainVariant::PLANE,
            patch: None,
            push: None,
        }
    }
}

/// The simulated sensors: the delayed, noisy view of the plant's state the law receives.
pub struct Sensors {
    profile: NoiseFile,
    /// The cell's `sensor_noise` level (× the profile).
    level: f64,
    /// Observation delay in plant steps.
    delay_steps: usize,
    /// Past true states at the plant rate (a ring of `delay_steps + 1`).
    ring: Vec<(DVector<f64>, DVector<f64>)>,
}

/// When the trunk counts as down.
#[derive(Clone, Copy, Debug)]
pub struct FallLimits {
    /// Least trunk height above the ground, m.
    pub min_height: f64,
    /// Largest trunk tilt from the ground normal, rad.
    pub max_tilt: f64,
}

/// One cell, set up: plan, plant, actuators, law, sensors, fall limits and metrics, built once
/// by [`CellSetup::build`], and the loop state the stages share. The stages — [`sense`],
/// [`control`], [`actuate`], [`step_plant`], [`measure`], [`judge`] — read only this, never
/// the scenario; [`CellSetup::run`] runs them in that order every plant step.
///
/// [`sense`]: CellSetup::sense
/// [`control`]: CellSetup::control
/// [`actuate`]: CellSetup::actuate
/// [`step_plant`]: CellSetup::step_plant
/// [`measure`]: CellSetup::measure
/// [`judge`]: CellSetup::judge
pub struct CellSetup<'a> {
    pub model: &'a Model,
    pub plan: Cow<'a, Plan>,
    /// The nominal plane (slope and heading) the plan and the law see; the plant's ground adds
    /// what they do not (step, bumps, friction patch).
    pub slope: Ground,
    pub plant: Plant,
    pub actuators: Vec<Box<dyn Actuator>>,
    pub law: Box<dyn ControlLaw>,
    pub sensors: Sensors,
    pub falls: FallLimits,
    pub metrics: MetricsAccumulator,
    /// The world metrics (issue 14; [`crate::world_metrics`]).
    pub world_metrics: crate::world_metrics::WorldAccumulator,
    /// The cell's push and its start time, s (`None`: no push).
    pub push: Option<(PushVariant, f64)>,
    /// The plan's trunk height, m (for the no-control test).
    pub body_height: f64,
    pub dt: f64,
    /// Plant steps in the run.
    pub steps: usize,
    /// Plant steps per control step.
    pub every: usize,
    /// The control rate, Hz.
    pub rate_hz: f64,
    rng: ChaCha8Rng,
    q: DVector<f64>,
    v: DVector<f64>,
    q_obs: DVector<f64>,
    v_obs: DVector<f64>,
    sample: PlanSample,
    reached: PlanSample,
    command: Vec<f64>,
    applied: Vec<f64>,
    saturated: bool,
    joint_err: Vec<f64>,
    base: Pose,
    compute_us: crate::quantiles::TimeHistogram,
    last_law: LawStatus,
    /// A piped law's report (its failures and its program's own compute times).
    pipe_probe: Option<crate::pipe_law::PipeProbe>,
}

/// Why a run stopped before its end.
pub type Stop = (CellStatus, String);

impl<'a> CellSetup<'a> {
    /// Build a cell's setup. `plan`: one built beforehand for the cell's slope and heading
    /// (plans depend only on the robot, the nominal plane, the gait and the duration, so a run
    /// shares one per slope).
    pub fn build(
        robot: &'a LoadedRobot,
        cell: &Cell,
        spec: &CellSpec,
        plan: Option<&'a Plan>,
    ) -> Result<CellSetup<'a>, String> {
        let model = &robot.model;
        // The planner plans on the nominal plane (slope and heading); the plant's ground adds
        // what the plan does not see (step, bumps, friction patch).
        let slope = Ground::plane(cell.slope_deg(), cell.number("heading_deg"));
        let plan = match plan {
            Some(p) => Cow::Borrowed(p),
            None => Cow::Owned(
                Plan::build(model, &robot.facts, &slope, &spec.gait, spec.duration)
                    .map_err(|e| format!("plan: {e}"))?,
            ),
        };
        let dt = spec.plant.dt;
        let feet = robot.foot_frames();
        let (q0, _) = plan.initial_state();
        let patch = patch_rect(robot, cell, spec, &slope, &q0)?;
        let ground = Ground::plane(cell.slope_deg(), cell.number("heading_deg")).with(
            &spec.terrain,
            cell.seed,
            patch,
        );
        let mut plant = Plant::new(robot, Box::new(ground), cell.mu(), spec.plant);
        let push = spec.push.clone().map(|p| {
            let start = (p.cycle as f64 + p.phase) * plan.cycle_time();
            (p, start)
        });
        let nj = model.n_joints();

        // Actuators per joint, and the joint friction each model shows.
        let actuators: Vec<Box<dyn Actuator>> = model
            .joints
            .iter()
            .map(|j| {
                cell.actuator()
                    .build(&robot.facts.actuator(&j.name), j.effort_limit, dt)
            })
            .collect();
        let (coulomb, viscous): (Vec<f64>, Vec<f64>) =
            actuators.iter().map(|a| a.friction()).unzip();
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

        let law_model = controller_model(model, cell.mass_scale(), cell.com_shift_mm());
        let settings_law = LawSettings {
            foot_radius: robot.facts.feet.radius,
            // A known patch gives each foot the μ̂ under its starting spot (a track patch stays
            // under its foot all run).
            mu_estimate_feet: match patch {
                Some(p) if cell.name("patch_known") == "true" => foot_spots(robot, &slope, &q0)
                    .iter()
                    .map(|&(u, v)| {
                        let mu = if p.contains(u, v) { p.mu } else { cell.mu() };
                        mu * spec.mu_estimate_scale
                    })
                    .collect(),
                _ => Vec::new(),
            },
            ..law_settings(&spec.law, &slope, cell.mu(), spec.mu_estimate_scale)
        };
        // A piped law (`[external.<name>]`) is served by a child process; the others are built
        // from the registry.
        let mut pipe_probe = None;
        let law: Box<dyn ControlLaw> = match &spec.external {
            Some(ext) => {
                let session = crate::pipe_law::Session {
                    model,
                    feet: &feet,
                    foot_radius: robot.facts.feet.radius,
                    dt,
                };
                let info = crate::pipe_law::CellInfo {
                    cell_id: &cell.id(),
                    seed: cell.rng_seed(),
                    rate_hz: cell.rate_hz(),
                    duration: spec.duration,
                    model: &law_model,
                    settings: &settings_law,
                };
                let (l, probe) = ext.start_cell(&session, &info)?;
                pipe_probe = Some(probe);
                Box::new(l)
            }
            None => build_law(cell.controller(), law_model, feet.clone(), &settings_law)?,
        };

        let steps = (spec.duration / dt).round() as usize;
        let every = (1.0 / (cell.rate_hz() * dt)).round().max(1.0) as usize;
        let delay_steps = (spec.noise.delay / dt).round() as usize;
        let start = Vec3::new(q[0], q[1], q[2]);
        let limits: Vec<f64> = model.joints.iter().map(|j| j.effort_limit).collect();
        let metrics =
            MetricsAccumulator::new(feet.len(), dt, cell.mu(), start).with_torque_limits(&limits);
        let world_metrics = crate::world_metrics::WorldAccumulator::new(
            feet.len(),
            nj,
            dt,
            model.total_mass() * model.gravity.norm(),
            push.as_ref().map(|(_, start)| *start),
        );
        let sample = plan.new_sample();
        let reached = plan.new_sample();
        plant.state(&mut q, &mut v);
        Ok(CellSetup {
            model,
            slope,
            plant,
            actuators,
            law,
            sensors: Sensors {
                profile: spec.noise.clone(),
                level: cell.sensor_noise(),
                delay_steps,
                ring: (0..=delay_steps).map(|_| (q.clone(), v.clone())).collect(),
            },
            falls: FallLimits {
                min_height: spec.falls.min_height_share * spec.body_height,
                max_tilt: spec.falls.max_tilt_deg.to_radians(),
            },
            metrics,
            world_metrics,
            push,
            body_height: spec.body_height,
            dt,
            steps,
            every,
            rate_hz: cell.rate_hz(),
            rng,
            q_obs: q.clone(),
            v_obs: v.clone(),
            q,
            v,
            sample,
            reached,
            command: vec![0.0; nj],
            applied: vec![0.0; nj],
            saturated: false,
            joint_err: vec![0.0; nj],
            base: Pose::new(Mat3::identity(), Vec3::zeros()),
            compute_us: crate::quantiles::TimeHistogram::new(),
            last_law: LawStatus::Solved,
            pipe_probe,
            plan,
        })
    }

    /// Whether plant step `step` is a control step.
    pub fn is_control_step(&self, step: usize) -> bool {
        step.is_multiple_of(self.every)
    }

    /// Sense: the plan's target at `t`, the true state into the delay ring, and on a control
    /// step the law's observation (delayed, with seeded noise).
    pub fn sense(&mut self, step: usize, t: f64) {
        self.plan.sample(t, &mut self.sample);
        let control_step = self.is_control_step(step);
        // (q, v) hold the state after the previous step.
        let ring = &mut self.sensors.ring;
        let slot = step % ring.len();
        ring[slot].0.copy_from(&self.q);
        ring[slot].1.copy_from(&self.v);
        if control_step {
            let old = (step + 1) % ring.len();
            let delay = self.sensors.delay_steps;
            let (qd, vd) = if delay == 0 || step < delay {
                (&self.q, &self.v)
            } else {
                (&ring[old].0, &ring[old].1)
            };
            self.q_obs.copy_from(qd);
            self.v_obs.copy_from(vd);
            add_noise(
                &mut self.q_obs,
                &mut self.v_obs,
                &self.sensors.profile,
                self.sensors.level,
                &mut self.rng,
            );
        }
    }

    /// Control (on a control step): the law's torque command from the observation and the
    /// target, its compute time kept. Stops the run on a non-finite torque.
    pub fn control(&mut self, t: f64) -> Result<(), Stop> {
        let t0 = Instant::now();
        self.last_law = self.law.compute(
            &Observation {
                q: &self.q_obs,
                v: &self.v_obs,
            },
            &Target {
                q: &self.sample.q,
                v: &self.sample.v,
                a: &self.sample.a,
                stance: &self.sample.stance,
            },
            &mut self.command,
        );
        self.compute_us.add(t0.elapsed().as_secs_f64() * 1e6);
        if let Some(p) = &self.pipe_probe
            && let Some(e) = p.lock().unwrap_or_else(|e| e.into_inner()).error.take()
        {
            return Err((CellStatus::Error, e));
        }
        self.metrics.control_step(self.last_law);
        self.world_metrics.control_step(&self.command, self.rate_hz);
        if self.command.iter().any(|x| !x.is_finite()) {
            return Err((
                CellStatus::Diverged,
                format!("the law returned a non-finite torque at t = {t:.3} s"),
            ));
        }
        Ok(())
    }

    /// Actuate: each joint's actuator turns the command into the applied torque; the cell's
    /// push, if any, acts on the trunk.
    pub fn actuate(&mut self, t: f64) {
        self.saturated = false;
        for (k, a) in self.actuators.iter_mut().enumerate() {
            self.applied[k] = a.drive(self.command[k]);
            self.saturated |= a.saturated();
        }
        if let Some((p, start)) = &self.push {
            self.plant
                .set_base_force(push_force(p, *start, t, self.dt, &self.slope));
        }
    }

    /// Step the plant with the applied torques. Stops the run when the engine diverges.
    pub fn step_plant(&mut self) -> Result<(), Stop> {
        self.plant.set_joint_torques(&self.applied);
        self.plant.step().map_err(|d| (CellStatus::Diverged, d.0))?;
        self.plant.state(&mut self.q, &mut self.v);
        Ok(())
    }

    /// Measure: tracking against the plan at the time the plant has reached (`t + dt`), slip,
    /// friction use, torques, into the metrics.
    pub fn measure(&mut self, t: f64) {
        let nj = self.joint_err.len();
        self.plan.sample(t + self.dt, &mut self.reached);
        self.base = base_pose(self.model, &self.q);
        let plan_base = base_pose(self.model, &self.reached.q);
        for k in 0..nj {
            self.joint_err[k] = self.q[7 + k] - self.reached.q[7 + k];
        }
        self.metrics.step(
            &self.sample.stance,
            self.plant.feet(),
            &self.base.trans,
            &self.base.rot,
            &plan_base.trans,
            &plan_base.rot,
            self.joint_err.iter().copied(),
            &self.applied,
            &self.v.as_slice()[6..],
            self.saturated,
        );
        self.world_metrics.step(
            t + self.dt,
            &self.sample.stance,
            self.plant.feet(),
            crate::world_metrics::base_error(&self.base.trans, &plan_base.trans),
        );
    }

    /// Judge the step: a fall (the trunk low or tilted relative to the ground, or a non-foot
    /// link on the ground) stops the run.
    pub fn judge(&self, t: f64) -> Result<(), Stop> {
        // The plant's ground, step and bumps included.
        let (slope, base) = (self.plant.terrain(), &self.base);
        let n = slope.normal_at(base.trans.x, base.trans.y);
        let height = (base.trans
            - Vec3::new(
                base.trans.x,
                base.trans.y,
                slope.height_at(base.trans.x, base.trans.y),
            ))
        .dot(&n);
        let tilt = (base.rot.column(2).dot(&n)).clamp(-1.0, 1.0).acos();
        let touching = self.plant.body_touching_ground();
        if !(touching || height < self.falls.min_height || tilt > self.falls.max_tilt) {
            return Ok(());
        }
        let message = if touching {
            format!(
                "a link other than a foot touched the ground at t = {:.3} s",
                t + self.dt
            )
        } else if height < self.falls.min_height {
            format!(
                "trunk {:.0} mm above the ground at t = {:.3} s",
                height * 1e3,
                t + self.dt
            )
        } else {
            format!(
                "trunk tilted {:.0}° at t = {:.3} s",
                tilt.to_degrees(),
                t + self.dt
            )
        };
        Err((CellStatus::Fell, message))
    }

    /// One trace row of the state after the step at `t`.
    fn trace_row(&self, t: f64) -> TraceRow {
        let slope = &self.slope;
        let surface = |f: &crate::plant::FootReading, w: &Vec3| {
            let (n, t1, t2) = slope.surface_frame(f.contact_point.x, f.contact_point.y);
            [w.dot(&n), w.dot(&t1), w.dot(&t2)]
        };
        let predicted = self.law.predicted_forces();
        let feet = self.plant.feet();
        TraceRow {
            t: t + self.dt,
            q: self.q.as_slice().to_vec(),
            v_base: std::array::from_fn(|k| self.v[k]),
            plan_q: self.reached.q.as_slice().to_vec(),
            tau: self.applied.clone(),
            foot_force: feet.iter().map(|f| f.force_surface).collect(),
            foot_predicted: feet
                .iter()
                .enumerate()
                .map(|(i, f)| predicted.get(i).map_or([0.0; 3], |w| surface(f, w)))
                .collect(),
            foot_pos: feet
                .iter()
                .map(|f| [f.contact_point.x, f.contact_point.y, f.contact_point.z])
                .collect(),
            foot_slip: feet.iter().map(|f| f.slip_velocity.norm()).collect(),
            stance: self.sample.stance.clone(),
            law_status: self.last_law.name(),
        }
    }

    /// One plant step through every stage; `Err` when the run stops here.
    pub fn step(&mut self, step: usize) -> Result<(), Stop> {
        let t = step as f64 * self.dt;
        self.sense(step, t);
        if self.is_control_step(step) {
            self.control(t)?;
        }
        self.actuate(t);
        self.step_plant()?;
        self.measure(t);
        Ok(())
    }

    /// Run the cell to its end (or its stop) and judge it. `trace`: collect a time series
    /// every `every` plant steps.
    pub fn run(mut self, mut trace: Option<(&mut Vec<TraceRow>, usize)>) -> CellOutcome {
        let mut stop: Option<Stop> = None;
        for step in 0..self.steps {
            let t = step as f64 * self.dt;
            if let Err(s) = self.step(step) {
                stop = Some(s);
                break;
            }
            if let Some((rows, every_n)) = trace.as_mut()
                && step % *every_n == 0
            {
                rows.push(self.trace_row(t));
            }
            if let Err(s) = self.judge(t) {
                stop = Some(s);
                break;
            }
        }
        self.finish(stop)
    }

    /// The metrics and the verdict. A run that stayed up is judged first on whether the law
    /// controlled the robot at all, then on whether it met its own constraints (README,
    /// "Statuses").
    pub fn finish(self, stop: Option<Stop>) -> CellOutcome {
        // A piped law that failed (time-out, exit, malformed reply) ends its cell as a set-up
        // error would: no metrics of a run its law did not finish.
        if let Some((CellStatus::Error, message)) = stop {
            return error_outcome(message);
        }
        let nj = self.joint_err.len();
        let end = Vec3::new(self.q[0], self.q[1], self.q[2]);
        // Progress is measured along the walking direction (uphill at heading 0).
        let uphill = self.slope.forward();
        let mut metrics = self
            .metrics
            .finish(&end, &uphill, self.plan.planned_progress(), nj);
        metrics.world = self.world_metrics.finish(self.plant.time());
        let (mut status, mut message) = stop.unwrap_or((CellStatus::Ok, String::new()));
        if status == CellStatus::Ok {
            if let Some(reason) = no_control_reason(&metrics, self.body_height) {
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
        let (child_median_us, child_p99_us) =
            crate::pipe_law::child_time_stats(self.pipe_probe.as_ref());
        let pick = |p: f64| self.compute_us.quantile(p);
        CellOutcome {
            status,
            message,
            metrics,
            compute_median_us: pick(0.5),
            compute_p99_us: pick(0.99),
            child_median_us,
            child_p99_us,
            wall_s: 0.0,
        }
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
    trace: Option<(&mut Vec<TraceRow>, usize)>,
) -> CellOutcome {
    run_spec(
        ctx.robot,
        cell,
        &CellSpec::of(ctx.scenario, cell),
        plan,
        trace,
    )
}

/// Simulate one cell from its spec (a probe's, or [`CellSpec::of`] a scenario's cell).
pub fn run_spec(
    robot: &LoadedRobot,
    cell: &Cell,
    spec: &CellSpec,
    plan: Option<&Plan>,
    trace: Option<(&mut Vec<TraceRow>, usize)>,
) -> CellOutcome {
    let wall = Instant::now();
    let mut outcome = match CellSetup::build(robot, cell, spec, plan) {
        Ok(setup) => setup.run(trace),
        Err(e) => error_outcome(e),
    };
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
        child_median_us: f64::NAN,
        child_p99_us: f64::NAN,
        wall_s: 0.0,
    }
}

/// Plane coordinates (u along the path, v to the left) of each foot's ground point at `q`.
fn foot_spots(robot: &LoadedRobot, ground: &Ground, q: &DVector<f64>) -> Vec<(f64, f64)> {
    let model = &robot.model;
    let mut ws = gripsweep_controllers::algorithms::Workspace::new(model);
    gripsweep_controllers::algorithms::forward_kinematics(model, &mut ws, q);
    robot
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
    robot: &LoadedRobot,
    cell: &Cell,
    spec: &CellSpec,
    ground: &Ground,
    q0: &DVector<f64>,
) -> Result<Option<PatchRect>, String> {
    let Some((name, shape)) = &spec.patch else {
        return Ok(None);
    };
    let mu = cell.number("patch_mu");
    Ok(Some(match shape {
        PatchShape::Strip { at, width } => PatchRect {
            u0: *at,
            u1: at + width,
            v0: -1e3,
            v1: 1e3,
            mu,
        },
        PatchShape::Track { foot, width } => {
            let names = &robot.facts.feet.frames;
            let Some(i) = names.iter().position(|n| n == foot) else {
                return Err(format!(
                    "patch '{name}': field `foot` = '{foot}': allowed: one of the robot's feet ({})",
                    names.join(", ")
                ));
            };
            let (_, v) = foot_spots(robot, ground, q0)[i];
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
