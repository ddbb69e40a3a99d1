//! The harness's own cost inside one cell, against the plant's: the real stages of
//! `harness/src/cell.rs` (`CellSetup`: sense, control, actuate, step_plant, measure, judge)
//! called one by one with each timed on its own (`Instant` around each; the timer's own cost is
//! printed), for a quick-scenario cell (crawl up 10°, μ 0.8, 1 kHz control, ideal actuators,
//! seed 0, no noise) under two laws:
//!
//! * plan build, once per cell: `Plan::build`;
//! * setup, once per cell: `CellSetup::build` (plant, law, actuators, sensors, metrics);
//! * plan (the `sense` stage): the plan's sample at t, the delayed-observation ring and noise;
//! * law (`control`): `law.compute`, its compute-time record and `control_step`;
//! * plant (`actuate` + `step_plant`): the actuators, `set_joint_torques`, `plant.step`,
//!   `plant.state`;
//! * metrics (`measure` + `judge`): the base poses of the state and the plan, the joint errors,
//!   `MetricsAccumulator::step`, the fall checks; `finish` once at the end.
//!
//! The same cell is then run by the real `run_cell` (`harness/src/cell.rs`), untimed inside,
//! and its wall time is set against the replay's total as a check that the replay is faithful.
//! Run-level I/O (manifest, `cells.csv` rows, the report) is measured from whole runs by
//! `benches/run_bench.sh`.
//!
//!     cargo bench --bench harness
//!
//! Under `cargo test --benches` (no `--bench` flag) each cell runs once instead of three times.

use gripsweep::cell::{CellContext, CellSetup, CellSpec, run_cell};
use gripsweep::matrix::Cell;
use gripsweep::planner::Plan;
use gripsweep::plant::actuator::ActuatorKind;
use gripsweep::plant::terrain::Slope;
use gripsweep::scenario::Scenario;
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
    Cell::probe(0.8, 1000.0, ActuatorKind::Ideal, controller).set("slope_deg", 10.0)
}

/// The cell run through the real stages of `cell.rs` (`CellSetup`), each stage timed.
fn replay(s: &Scenario, robot: &gripsweep::robot::LoadedRobot, cell: &Cell) -> Parts {
    let mut p = Parts::default();
    let wall = Instant::now();
    let t0 = Instant::now();
    let slope = Slope::degrees(cell.slope_deg());
    let plan = Plan::build(&robot.model, &robot.facts, &slope, &s.gait, s.duration).expect("plan");
    p.plan_build = t0.elapsed().as_secs_f64();
    let t0 = Instant::now();
    let spec = CellSpec::of(s, cell);
    let mut setup = CellSetup::build(robot, cell, &spec, Some(&plan)).expect("setup");
    p.setup += t0.elapsed().as_secs_f64();
    let mut stop = None;
    for step in 0..setup.steps {
        let t = step as f64 * setup.dt;
        let t0 = Instant::now();
        setup.sense(step, t);
        let t1 = Instant::now();
        let control = if setup.is_control_step(step) {
            setup.control(t)
        } else {
            Ok(())
        };
        let t2 = Instant::now();
        setup.actuate(t);
        let stepped = control.and_then(|_| setup.step_plant());
        let t3 = Instant::now();
        let judged = stepped.and_then(|_| {
            setup.measure(t);
            setup.judge(t)
        });
        let t4 = Instant::now();
        // Sensing holds the plan sample, the delay ring and the noise; control the law and
        // its bookkeeping; the plant the actuators and the engine; metrics the rest.
        p.plan += (t1 - t0).as_secs_f64();
        p.law += (t2 - t1).as_secs_f64();
        p.plant += (t3 - t2).as_secs_f64();
        p.metrics += (t4 - t3).as_secs_f64();
        p.steps += 1;
        if let Err(e) = judged {
            p.fell = true;
            stop = Some(e);
            break;
        }
    }
    let t0 = Instant::now();
    black_box(setup.finish(stop));
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
        "timer floor: {:.0} ns per Instant pair; the replay takes 5 timer reads per step",
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
    for law in ["stiff-pd", "force-cost-id-load"] {
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
