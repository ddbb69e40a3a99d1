//! The harness's own cost inside one cell, against the plant's: the cell loop of
//! `harness/src/cell.rs` replayed step by step with each part timed on its own (`Instant`
//! around each part; the timer's own cost is printed), for a quick-scenario cell (crawl up 10°,
//! μ 0.8, 1 kHz control, ideal actuators, seed 0, no noise) under two laws:
//!
//! * plan build, once per cell: `Plan::build`;
//! * setup, once per cell: `Plant::new`, the law, the actuators, the metrics accumulator;
//! * plan: `plan.sample(t)` every step;
//! * law: copying the observation and `law.compute`;
//! * plant: the actuators, `set_joint_torques`, `plant.step`, `plant.state`;
//! * harness bookkeeping and metrics: the delayed-observation ring, the base poses of the state
//!   and the plan, the joint errors, `MetricsAccumulator::step` and `control_step`, the fall
//!   checks; `finish` and the compute-time percentiles once at the end.
//!
//! The same cell is then run by the real `run_cell` (`harness/src/cell.rs`), untimed inside,
//! and its wall time is set against the replay's total as a check that the replay is faithful.
//! Run-level I/O (manifest, `cells.csv` rows, the report) is measured from whole runs by
//! `benches/run_bench.sh`.
//!
//!     cargo bench --bench harness
//!
//! Under `cargo test --benches` (no `--bench` flag) each cell runs once instead of three times.

use gripsweep::cell::{CellContext, controller_model, law_settings, run_cell};
use gripsweep::matrix::Cell;
use gripsweep::metrics::MetricsAccumulator;
use gripsweep::planner::Plan;
use gripsweep::plant::Plant;
use gripsweep::plant::actuator::{Actuator, ActuatorKind};
use gripsweep::plant::terrain::{Slope, Terrain};
use gripsweep::scenario::Scenario;
use gripsweep_controllers::algorithms::base_pose;
use gripsweep_controllers::laws::{LawSettings, Observation, Target, build_law};
use gripsweep_controllers::spatial::Vec3;
use nalgebra::DVector;
use std::hint::black_box;
use std::path::Path;
use std::time::Instant;

const REPEATS: usize = 3;

/// Seconds spent in each part of one cell.
#[derive(Clone, Copy, Default, Debug)]
struct Parts {
    plan_build: f64,
    setup: f64,
    plan: f64,
    law: f64,
    plant: f64,
    metrics: f64,
    total: f64,
    steps: usize,
    fell: bool,
}

fn cell(controller: &str) -> Cell {
    Cell {
        index: 0,
        slope_deg: 10.0,
        mu: 0.8,
        rate_hz: 1000.0,
        actuator: ActuatorKind::Ideal,
        controller: controller.into(),
        mass_scale: 1.0,
        com_shift_mm: 0.0,
        sensor_noise: 0.0,
        seed: 0,
        world: Default::default(),
    }
}

/// `cell.rs`'s `simulate` for a noise-free, delay-free cell, each part timed.
fn replay(s: &Scenario, robot: &gripsweep::robot::LoadedRobot, cell: &Cell) -> Parts {
    let mut p = Parts::default();
    let wall = Instant::now();
    let t0 = Instant::now();
    let model = &robot.model;
    let slope = Slope::degrees(cell.slope_deg);
    let plan = Plan::build(model, &robot.facts, &slope, &s.gait, s.duration).expect("plan");
    p.plan_build = t0.elapsed().as_secs_f64();
    let t0 = Instant::now();
    let dt = s.plant.dt;
    let mut plant = Plant::new(robot, Box::new(slope), cell.mu, s.plant);
    let feet = robot.foot_frames();
    let nj = model.n_joints();
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
    let (mut q, mut v) = plan.initial_state();
    plant.set_state(&q, &v);
    let law_model = controller_model(model, cell.mass_scale, cell.com_shift_mm);
    let base_law = s.law_settings_for(&cell.controller, cell.rate_hz, cell.actuator);
    let settings_law = LawSettings {
        foot_radius: robot.facts.feet.radius,
        ..law_settings(&base_law, &slope, cell.mu, s.mu_estimate_scale)
    };
    let mut law = build_law(&cell.controller, law_model, feet.clone(), &settings_law).expect("law");
    let steps = (s.duration / dt).round() as usize;
    let every = (1.0 / (cell.rate_hz * dt)).round().max(1.0) as usize;
    let uphill = slope.uphill();
    let start = Vec3::new(q[0], q[1], q[2]);
    let limits: Vec<f64> = model.joints.iter().map(|j| j.effort_limit).collect();
    let mut acc =
        MetricsAccumulator::new(feet.len(), dt, cell.mu, start).with_torque_limits(&limits);
    let mut sample = plan.new_sample();
    let mut command = vec![0.0; nj];
    let mut applied = vec![0.0; nj];
    let (mut q_obs, mut v_obs) = (q.clone(), v.clone());
    let mut ring: Vec<(DVector<f64>, DVector<f64>)> = vec![(q.clone(), v.clone())];
    let mut compute_us: Vec<f64> = Vec::with_capacity(steps / every + 1);
    let fall_height = s.falls.min_height_share * s.body_height;
    let max_tilt = s.falls.max_tilt_deg.to_radians();
    let mut joint_err = vec![0.0; nj];
    plant.state(&mut q, &mut v);
    p.setup += t0.elapsed().as_secs_f64();

    for step in 0..steps {
        let t = step as f64 * dt;
        let t0 = Instant::now();
        plan.sample(t, &mut sample);
        let t1 = Instant::now();
        let slot = step % ring.len();
        ring[slot].0.copy_from(&q);
        ring[slot].1.copy_from(&v);
        let t2 = Instant::now();
        let mut law_s = 0.0;
        if step % every == 0 {
            q_obs.copy_from(&q);
            v_obs.copy_from(&v);
            let tc = Instant::now();
            let status = law.compute(
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
            // As cell.rs: the law's compute time is measured and kept (counted as harness).
            compute_us.push(tc.elapsed().as_secs_f64() * 1e6);
            acc.control_step(status);
        }
        let t3 = Instant::now();
        law_s += (t3 - t2).as_secs_f64();
        let mut saturated = false;
        for k in 0..nj {
            applied[k] = actuators[k].drive(command[k]);
            saturated |= actuators[k].saturated();
        }
        plant.set_joint_torques(&applied);
        plant.step().expect("no divergence");
        plant.state(&mut q, &mut v);
        let t4 = Instant::now();
        let base = base_pose(model, &q);
        let plan_base = base_pose(model, &sample.q);
        for k in 0..nj {
            joint_err[k] = q[7 + k] - sample.q[7 + k];
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
        let n = slope.normal_at(base.trans.x, base.trans.y);
        let height = (base.trans
            - Vec3::new(
                base.trans.x,
                base.trans.y,
                slope.height_at(base.trans.x, base.trans.y),
            ))
        .dot(&n);
        let tilt = (base.rot.column(2).dot(&n)).clamp(-1.0, 1.0).acos();
        let fell = plant.body_touching_ground() || height < fall_height || tilt > max_tilt;
        let t5 = Instant::now();
        p.plan += (t1 - t0).as_secs_f64();
        p.metrics += (t2 - t1).as_secs_f64() + (t5 - t4).as_secs_f64();
        p.law += law_s;
        p.plant += (t4 - t3).as_secs_f64();
        p.steps += 1;
        if fell {
            p.fell = true;
            break;
        }
    }
    let t0 = Instant::now();
    let end = Vec3::new(q[0], q[1], q[2]);
    let metrics = acc.finish(&end, &uphill, plan.planned_progress(), nj);
    compute_us.sort_by(|a, b| a.total_cmp(b));
    black_box((metrics, compute_us.first().copied()));
    p.metrics += t0.elapsed().as_secs_f64();
    p.total = wall.elapsed().as_secs_f64();
    p
}

fn median(mut x: Vec<f64>) -> f64 {
    x.sort_by(|a, b| a.total_cmp(b));
    x[x.len() / 2]
}

fn main() {
    let bench_mode = std::env::args().any(|a| a == "--bench");
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("scenarios/quick.toml");
    let s = Scenario::from_file(&path).expect("quick scenario");
    let repeats = if bench_mode { REPEATS } else { 1 };
    let robot = s.load_robot().expect("robot");
    let floor = {
        let mut x: Vec<f64> = (0..10_000)
            .map(|_| {
                let t0 = Instant::now();
                t0.elapsed().as_secs_f64()
            })
            .collect();
        x.sort_by(|a, b| a.total_cmp(b));
        x[x.len() / 2]
    };
    println!(
        "one cell of {} ({} s, dt {} ms, {} substeps): slope 10°, μ 0.8, 1 kHz, ideal; median of {repeats} runs each",
        path.display(),
        s.duration,
        s.plant.dt * 1e3,
        s.plant.substeps
    );
    println!(
        "timer floor: {:.0} ns per Instant pair; the replay takes 4 pairs per step",
        floor * 1e9
    );
    println!(
        "{:<13} {:>6} {:>9} {:>9} {:>10} {:>10} {:>11} {:>10} {:>10} {:>9} {:>10} {:>7}",
        "law",
        "steps",
        "build ms",
        "setup ms",
        "plan µs/st",
        "law µs/st",
        "plant µs/st",
        "metr µs/st",
        "harness %",
        "replay s",
        "run_cell s",
        "diff %"
    );
    for law in ["stiff-pd", "id-grip-load"] {
        let c = cell(law);
        let runs: Vec<Parts> = (0..repeats).map(|_| replay(&s, &robot, &c)).collect();
        let real: Vec<f64> = (0..repeats)
            .map(|_| {
                let out = run_cell(
                    &CellContext {
                        scenario: &s,
                        robot: &robot,
                    },
                    &c,
                    None,
                );
                out.wall_s
            })
            .collect();
        let m = |f: fn(&Parts) -> f64| median(runs.iter().map(f).collect());
        let steps = runs[0].steps as f64;
        let build = m(|p| p.plan_build);
        let setup = m(|p| p.setup);
        let plan = m(|p| p.plan);
        let law_t = m(|p| p.law);
        let plant = m(|p| p.plant);
        let metrics = m(|p| p.metrics);
        let total = m(|p| p.total);
        let real = median(real);
        // Harness = planning (once and per step) + bookkeeping and metrics, against the plant.
        let harness = build + plan + metrics;
        println!(
            "{:<13} {:>6} {:>9.1} {:>9.1} {:>10.3} {:>10.3} {:>11.2} {:>10.3} {:>10.2} {:>9.3} {:>10.3} {:>+7.1}{}",
            law,
            runs[0].steps,
            build * 1e3,
            setup * 1e3,
            plan / steps * 1e6,
            law_t / steps * 1e6,
            plant / steps * 1e6,
            metrics / steps * 1e6,
            100.0 * harness / plant,
            total,
            real,
            100.0 * (real - total) / total,
            if runs[0].fell { "  (fell)" } else { "" }
        );
    }
    println!(
        "harness % = (plan build + plan samples + bookkeeping/metrics) / plant; setup (Plant::new, law, actuators) is not counted"
    );
}
