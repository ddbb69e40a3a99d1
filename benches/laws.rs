//! Compute time of one control step of every registered law on the brindle quadruped (18 DOF),
//! on realistic states: the crawl plan up a 10° slope (the quick and default scenarios' gait)
//! sampled every 1 ms over its 4 s, so calls follow each other as in a 1 kHz loop and cover both
//! the 4-foot and the 3-foot stance phases; the observed state is the plan's perturbed by a
//! smooth tracking error (base ±3 mm and ±0.6°, joints ±10 mrad, velocities ±0.05), so every
//! feedback term is active. The controllers believe μ̂ = 0.5 on the slope's normal.
//!
//! Two measurements per law:
//! 1. criterion (`law_step/<name>`): mean and median per call;
//! 2. a tail loop printed after criterion's report: every one of 20 000 calls (5 passes over
//!    the 4000 states, after one untimed pass) timed on its own with `Instant`, sorted:
//!    p50 / p90 / p99 / p99.9 / max, the p50 of the 4-foot and 3-foot calls apart, the law's
//!    statuses, and the heap allocations per call counted by this binary's global allocator.
//!
//!     cargo bench --bench laws -- --warm-up-time 2 --measurement-time 5
//!
//! Under `cargo test --benches` (no `--bench` flag) criterion runs each law once and the tail
//! loop runs 200 calls, as a smoke test.

use criterion::Criterion;
use gripsweep::planner::{Gait, Plan};
use gripsweep::plant::terrain::{Slope, Terrain};
use gripsweep::robot::LoadedRobot;
use gripsweep_controllers::laws::{
    ControlLaw, LawSettings, LawStatus, Observation, Target, build_law, law_names,
};
use nalgebra::{DVector, UnitQuaternion};
use std::alloc::{GlobalAlloc, Layout, System};
use std::hint::black_box;
use std::sync::atomic::{AtomicU64, Ordering};
use std::time::Instant;

/// Counts every allocation and reallocation (not frees) of the process.
struct Counting;

static ALLOCS: AtomicU64 = AtomicU64::new(0);
static ALLOC_BYTES: AtomicU64 = AtomicU64::new(0);

unsafe impl GlobalAlloc for Counting {
    unsafe fn alloc(&self, layout: Layout) -> *mut u8 {
        ALLOCS.fetch_add(1, Ordering::Relaxed);
        ALLOC_BYTES.fetch_add(layout.size() as u64, Ordering::Relaxed);
        unsafe { System.alloc(layout) }
    }
    unsafe fn dealloc(&self, ptr: *mut u8, layout: Layout) {
        unsafe { System.dealloc(ptr, layout) }
    }
    unsafe fn alloc_zeroed(&self, layout: Layout) -> *mut u8 {
        ALLOCS.fetch_add(1, Ordering::Relaxed);
        ALLOC_BYTES.fetch_add(layout.size() as u64, Ordering::Relaxed);
        unsafe { System.alloc_zeroed(layout) }
    }
    unsafe fn realloc(&self, ptr: *mut u8, layout: Layout, new_size: usize) -> *mut u8 {
        ALLOCS.fetch_add(1, Ordering::Relaxed);
        ALLOC_BYTES.fetch_add(new_size as u64, Ordering::Relaxed);
        unsafe { System.realloc(ptr, layout, new_size) }
    }
}

#[global_allocator]
static GLOBAL: Counting = Counting;

const SLOPE_DEG: f64 = 10.0;
const MU_ESTIMATE: f64 = 0.5;
const DURATION: f64 = 4.0;
const DT: f64 = 1e-3;
const TAIL_CALLS: usize = 20_000;

/// One control step's inputs.
struct Step {
    q: DVector<f64>,
    v: DVector<f64>,
    q_ref: DVector<f64>,
    v_ref: DVector<f64>,
    a_ref: DVector<f64>,
    stance: Vec<bool>,
}

impl Step {
    fn feet_down(&self) -> usize {
        self.stance.iter().filter(|s| **s).count()
    }
}

/// The plan sampled every 1 ms, the observation perturbed by a smooth error.
fn steps(robot: &LoadedRobot) -> Vec<Step> {
    let slope = Slope::degrees(SLOPE_DEG);
    let gait = Gait::Crawl {
        step_length: 0.06,
        swing_height: 0.05,
        cycle_period: 3.2,
        body_height: 0.30,
        margin: Some(0.02),
        shift_accel: None,
    };
    let plan = Plan::build(&robot.model, &robot.facts, &slope, &gait, DURATION).expect("plan");
    let mut s = plan.new_sample();
    let n = (DURATION / DT).round() as usize;
    (0..n)
        .map(|i| {
            let t = i as f64 * DT;
            plan.sample(t, &mut s);
            // Each coordinate's error: its own frequency (0.5–2.3 Hz) and phase.
            let wave = |k: usize| (2.0 * std::f64::consts::PI * (0.5 + 0.3 * k as f64) * t).sin();
            let mut q = s.q.clone();
            for k in 0..3 {
                q[k] += 3e-3 * wave(k);
            }
            let quat =
                UnitQuaternion::from_quaternion(nalgebra::Quaternion::new(q[6], q[3], q[4], q[5]));
            let tilt =
                UnitQuaternion::from_euler_angles(0.01 * wave(3), 0.01 * wave(4), 0.01 * wave(5));
            let quat = quat * tilt;
            q[3] = quat.i;
            q[4] = quat.j;
            q[5] = quat.k;
            q[6] = quat.w;
            for k in 7..q.len() {
                q[k] += 0.01 * wave(k % 7);
            }
            let v = DVector::from_fn(s.v.len(), |k, _| s.v[k] + 0.05 * wave(k + 1));
            Step {
                q,
                v,
                q_ref: s.q.clone(),
                v_ref: s.v.clone(),
                a_ref: s.a.clone(),
                stance: s.stance.clone(),
            }
        })
        .collect()
}

fn law_settings() -> LawSettings {
    let slope = Slope::degrees(SLOPE_DEG);
    LawSettings {
        ground_normal: slope.normal_at(0.0, 0.0),
        mu_estimate: MU_ESTIMATE,
        ..LawSettings::default()
    }
}

fn build(robot: &LoadedRobot, name: &str) -> Box<dyn ControlLaw> {
    build_law(
        name,
        robot.model.clone(),
        robot.foot_frames(),
        &law_settings(),
    )
    .expect("registered law")
}

fn call(law: &mut dyn ControlLaw, s: &Step, tau: &mut [f64]) -> LawStatus {
    law.compute(
        &Observation { q: &s.q, v: &s.v },
        &Target {
            q: &s.q_ref,
            v: &s.v_ref,
            a: &s.a_ref,
            stance: &s.stance,
        },
        tau,
    )
}

fn criterion_part(c: &mut Criterion, robot: &LoadedRobot, steps: &[Step]) {
    let mut group = c.benchmark_group("law_step");
    let mut tau = vec![0.0; robot.model.n_joints()];
    for name in law_names() {
        let mut law = build(robot, &name);
        let mut k = 0;
        group.bench_function(&name, |b| {
            b.iter(|| {
                let s = &steps[k % steps.len()];
                k += 1;
                black_box(call(law.as_mut(), s, &mut tau));
                black_box(tau[0])
            })
        });
    }
    group.finish();
}

fn pick(sorted: &[f64], p: f64) -> f64 {
    if sorted.is_empty() {
        f64::NAN
    } else {
        sorted[((sorted.len() - 1) as f64 * p).round() as usize]
    }
}

/// Every call timed on its own; allocations counted over one further pass.
fn tail_part(robot: &LoadedRobot, steps: &[Step], calls: usize) {
    let n = steps.len();
    let four = steps.iter().filter(|s| s.feet_down() == 4).count();
    println!(
        "\ntail loop: {calls} calls per law after {} untimed ones; states: {n} (4 feet down: {four}, 3 feet: {})",
        calls.min(n),
        steps.iter().filter(|s| s.feet_down() == 3).count()
    );
    // What `Instant` itself costs per timed call.
    let mut floor: Vec<f64> = (0..calls.min(20_000))
        .map(|_| {
            let t0 = Instant::now();
            t0.elapsed().as_secs_f64() * 1e6
        })
        .collect();
    floor.sort_by(|a, b| a.total_cmp(b));
    println!(
        "timer floor (an empty timed call): p50 {:.3} µs",
        pick(&floor, 0.5)
    );
    println!(
        "{:<13} {:>8} {:>8} {:>8} {:>8} {:>9} {:>10} {:>10}  {:>12} {:>10}  statuses",
        "law",
        "p50 µs",
        "p90 µs",
        "p99 µs",
        "p99.9 µs",
        "max µs",
        "p50 4-foot",
        "p50 3-foot",
        "allocs/call",
        "bytes/call"
    );
    let mut tau = vec![0.0; robot.model.n_joints()];
    for name in law_names() {
        let mut law = build(robot, &name);
        for s in steps.iter().cycle().take(calls.min(n)) {
            black_box(call(law.as_mut(), s, &mut tau));
        }
        let mut all = Vec::with_capacity(calls);
        let mut by_feet: [Vec<f64>; 2] = [Vec::with_capacity(calls), Vec::with_capacity(calls)];
        let mut statuses: Vec<(LawStatus, usize)> = Vec::new();
        for (i, s) in steps.iter().cycle().take(calls).enumerate() {
            let t0 = Instant::now();
            let status = call(law.as_mut(), s, &mut tau);
            let us = t0.elapsed().as_secs_f64() * 1e6;
            black_box(tau[0]);
            all.push(us);
            if s.feet_down() == 4 {
                by_feet[0].push(us);
            } else {
                by_feet[1].push(us);
            }
            // Statuses over one pass of the states.
            if i < n {
                match statuses.iter_mut().find(|(st, _)| *st == status) {
                    Some((_, c)) => *c += 1,
                    None => statuses.push((status, 1)),
                }
            }
        }
        // Allocations: one more pass, counted.
        let passes = calls.min(n);
        let (a0, b0) = (
            ALLOCS.load(Ordering::Relaxed),
            ALLOC_BYTES.load(Ordering::Relaxed),
        );
        for s in steps.iter().cycle().take(passes) {
            black_box(call(law.as_mut(), s, &mut tau));
        }
        let allocs = (ALLOCS.load(Ordering::Relaxed) - a0) as f64 / passes as f64;
        let bytes = (ALLOC_BYTES.load(Ordering::Relaxed) - b0) as f64 / passes as f64;
        all.sort_by(|a, b| a.total_cmp(b));
        for v in by_feet.iter_mut() {
            v.sort_by(|a, b| a.total_cmp(b));
        }
        let statuses: Vec<String> = statuses.iter().map(|(s, c)| format!("{s} {c}")).collect();
        println!(
            "{:<13} {:>8.3} {:>8.3} {:>8.3} {:>8.3} {:>9.1} {:>10.3} {:>10.3}  {:>12.1} {:>10.0}  {}",
            name,
            pick(&all, 0.5),
            pick(&all, 0.9),
            pick(&all, 0.99),
            pick(&all, 0.999),
            all.last().copied().unwrap_or(f64::NAN),
            pick(&by_feet[0], 0.5),
            pick(&by_feet[1], 0.5),
            allocs,
            bytes,
            statuses.join(", ")
        );
    }
}

fn main() {
    let bench_mode = std::env::args().any(|a| a == "--bench");
    let robot = LoadedRobot::demo().expect("demo robot");
    assert_eq!(robot.model.nv(), 18);
    let steps = steps(&robot);
    let mut c = Criterion::default().configure_from_args();
    criterion_part(&mut c, &robot, &steps);
    c.final_summary();
    tail_part(&robot, &steps, if bench_mode { TAIL_CALLS } else { 200 });
}
