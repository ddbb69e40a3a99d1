//! The planner against its own definitions, on both demo robots (the brindle quadruped, whose
//! legs have the closed-form structure, and the skitter hexapod, whose front legs do not), on
//! flat ground and on a 15° slope:
//! * leg inverse kinematics: FK(IK(p)) = p over a grid of targets, unreachable targets refused;
//! * velocities and accelerations against central finite differences of positions;
//! * continuous acceleration across every breakpoint;
//! * stance feet still and on the ground; FK of the planned q on the planned feet;
//! * the crawl's centre of mass (full model) inside the stance polygon with the margin;
//! * planned progress; sample() allocates nothing.

use gripsweep::planner::{CACHE_CHUNKS, CHUNK_KNOTS, Gait, IkMethod, Plan, PlanSample};
use gripsweep::plant::terrain::{Slope, Terrain};
use gripsweep::robot::LoadedRobot;
use gripsweep_controllers::algorithms::{
    Workspace, center_of_mass, forward_kinematics, frame_pose,
};
use gripsweep_controllers::configuration::difference;
use gripsweep_controllers::spatial::Vec3;
use nalgebra::{DVector, Vector2};
use std::alloc::{GlobalAlloc, Layout, System};
use std::cell::Cell;
use std::path::Path;
use std::sync::OnceLock;

// ---------------------------------------------------------------------------------------------
// Allocation counting for the current thread (other tests run in parallel on other threads).

struct CountingAlloc;

thread_local! {
    static ALLOCATIONS: Cell<usize> = const { Cell::new(0) };
}

unsafe impl GlobalAlloc for CountingAlloc {
    unsafe fn alloc(&self, layout: Layout) -> *mut u8 {
        let _ = ALLOCATIONS.try_with(|c| c.set(c.get() + 1));
        unsafe { System.alloc(layout) }
    }
    unsafe fn dealloc(&self, ptr: *mut u8, layout: Layout) {
        unsafe { System.dealloc(ptr, layout) }
    }
    unsafe fn realloc(&self, ptr: *mut u8, layout: Layout, new_size: usize) -> *mut u8 {
        let _ = ALLOCATIONS.try_with(|c| c.set(c.get() + 1));
        unsafe { System.realloc(ptr, layout, new_size) }
    }
}

#[global_allocator]
static GLOBAL: CountingAlloc = CountingAlloc;

fn allocations() -> usize {
    ALLOCATIONS.with(|c| c.get())
}

// ---------------------------------------------------------------------------------------------
// Robots, gaits, plans.

fn brindle() -> &'static LoadedRobot {
    static R: OnceLock<LoadedRobot> = OnceLock::new();
    R.get_or_init(|| LoadedRobot::demo().expect("demo robot loads"))
}

fn skitter() -> &'static LoadedRobot {
    static R: OnceLock<LoadedRobot> = OnceLock::new();
    R.get_or_init(|| {
        let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("scenarios/robots/skitter.toml");
        LoadedRobot::from_facts_file(&path).expect("skitter loads")
    })
}

const BRINDLE_CRAWL: Gait = Gait::Crawl {
    step_length: 0.08,
    swing_height: 0.06,
    cycle_period: 4.0,
    body_height: 0.30,
    margin: Some(0.025),
    shift_accel: None,
};
/// The default crawl's timing: paced shifts (peak base acceleration ≤ 2 % of g), the margin
/// derived from the robot.
const BRINDLE_PACED: Gait = Gait::Crawl {
    step_length: 0.06,
    swing_height: 0.05,
    cycle_period: 3.2,
    body_height: 0.30,
    margin: None,
    shift_accel: Some(0.196),
};
const BRINDLE_SHIFT: Gait = Gait::WeightShift {
    amplitude: 0.04,
    period: 2.0,
    body_height: 0.30,
};
const BRINDLE_TROT: Gait = Gait::Trot {
    step_length: 0.10,
    swing_height: 0.05,
    cycle_period: 0.6,
    body_height: 0.30,
};
const SKITTER_CRAWL: Gait = Gait::Crawl {
    step_length: 0.04,
    swing_height: 0.03,
    cycle_period: 3.0,
    body_height: 0.125,
    margin: Some(0.02),
    shift_accel: None,
};
const SKITTER_TROT: Gait = Gait::Trot {
    step_length: 0.04,
    swing_height: 0.03,
    cycle_period: 0.8,
    body_height: 0.125,
};
const SKITTER_SHIFT: Gait = Gait::WeightShift {
    amplitude: 0.02,
    period: 3.0,
    body_height: 0.125,
};

fn plan(robot: &LoadedRobot, slope_deg: f64, gait: &Gait, duration: f64) -> Plan {
    let slope = Slope::degrees(slope_deg);
    Plan::build(&robot.model, &robot.facts, &slope, gait, duration)
        .unwrap_or_else(|e| panic!("{gait:?} on {slope_deg}°: {e}"))
}

/// Every plan the checks below run over: (label, robot, slope angle, plan).
fn all_plans() -> &'static Vec<(String, &'static LoadedRobot, f64, Plan)> {
    static P: OnceLock<Vec<(String, &'static LoadedRobot, f64, Plan)>> = OnceLock::new();
    P.get_or_init(|| {
        let mut out = Vec::new();
        for slope in [0.0, 15.0] {
            let cases: [(&str, &'static LoadedRobot, Gait, f64); 8] = [
                ("brindle stand", brindle(), Gait::Stand, 2.0),
                ("brindle crawl", brindle(), BRINDLE_CRAWL, 9.0),
                ("brindle paced crawl", brindle(), BRINDLE_PACED, 10.0),
                ("brindle shift", brindle(), BRINDLE_SHIFT, 4.5),
                ("brindle trot", brindle(), BRINDLE_TROT, 3.1),
                ("skitter crawl", skitter(), SKITTER_CRAWL, 6.8),
                ("skitter trot", skitter(), SKITTER_TROT, 3.3),
                ("skitter shift", skitter(), SKITTER_SHIFT, 3.2),
            ];
            for (name, robot, gait, duration) in cases {
                let p = plan(robot, slope, &gait, duration);
                out.push((format!("{name} on {slope}°"), robot, slope, p));
            }
        }
        out
    })
}

/// Times in (0, duration) at least `guard` away from every breakpoint.
fn times_between_breakpoints(plan: &Plan, count: usize, guard: f64) -> Vec<f64> {
    let d = plan.duration();
    (0..count)
        .map(|k| d * (k as f64 + 0.5 + 0.37 * ((k * 7) % 5) as f64 / 5.0) / count as f64)
        .filter(|t| plan.breakpoints().iter().all(|b| (t - b).abs() > guard))
        .collect()
}

fn amax(v: &DVector<f64>) -> f64 {
    v.amax()
}

/// Paced shifts: the base's planned acceleration never exceeds the bound (sampled every
/// millisecond; the minimum-jerk peak is reached inside a shift), the cycle is longer than the
/// even grid's, and the derived margin is the documented share of the robot's footprint.
#[test]
fn paced_shifts_keep_the_base_acceleration_within_the_bound() {
    let Gait::Crawl {
        shift_accel: Some(bound),
        ..
    } = BRINDLE_PACED
    else {
        unreachable!()
    };
    for (label, robot, _, p) in all_plans() {
        if !label.starts_with("brindle paced crawl") {
            continue;
        }
        assert!(std::ptr::eq(*robot, brindle()));
        let mut s = p.new_sample();
        let mut peak = 0.0f64;
        let n = (p.duration() / 1e-3) as usize;
        for k in 0..=n {
            p.sample(k as f64 * 1e-3, &mut s);
            peak = peak.max(Vec3::new(s.a[0], s.a[1], s.a[2]).norm());
        }
        assert!(
            peak <= bound * (1.0 + 1e-9),
            "{label}: peak {peak} > {bound}"
        );
        // The longest shift does run at the bound (it is not merely slow everywhere).
        assert!(
            peak >= 0.9 * bound,
            "{label}: peak {peak} far below {bound}"
        );
        assert!(
            p.cycle_time() > 3.2 + 0.1,
            "{label}: cycle {}",
            p.cycle_time()
        );
        assert!(p.crawl_margin() > 0.0 && p.crawl_margin() < 0.1, "{label}");
    }
}

// ---------------------------------------------------------------------------------------------
// Inverse kinematics.

#[test]
fn leg_ik_round_trips_over_the_workspace_of_both_robots() {
    for (robot, reach) in [(brindle(), 0.08), (skitter(), 0.04)] {
        let model = &robot.model;
        let legs = gripsweep::planner::Legs::new(model, &robot.facts).unwrap();
        let mut scratch = legs.new_scratch(model);
        let mut ws = Workspace::new(model);
        let mut q = model.neutral();
        for i in 0..legs.len() {
            let leg = legs.leg(i);
            let nominal = leg.nominal();
            let home = legs.model_foot_position(model, i, nominal, &mut scratch);
            let mut methods = vec![IkMethod::Numeric];
            if leg.has_closed_form() {
                methods.push(IkMethod::Analytic);
            }
            let (mut solved, mut tried, mut worst) = (0, 0, 0.0f64);
            let steps = [-1.0, -0.5, 0.0, 0.5, 1.0];
            for dx in steps {
                for dy in steps {
                    for dz in steps {
                        let target = home + Vec3::new(dx, dy, dz) * reach;
                        let mut answers = Vec::new();
                        for &m in &methods {
                            tried += 1;
                            let Ok(angles) =
                                legs.solve_with(model, i, &target, m, nominal, &mut scratch)
                            else {
                                continue;
                            };
                            solved += 1;
                            // Check with the model's own forward kinematics, base at the origin.
                            for k in 0..3 {
                                q[7 + leg.joints()[k]] = angles[k];
                            }
                            forward_kinematics(model, &mut ws, &q);
                            let err = (frame_pose(model, &ws, leg.frame()).trans - target).norm();
                            worst = worst.max(err);
                            answers.push(angles);
                        }
                        // Both methods pick the branch of the nominal posture.
                        if answers.len() == 2 {
                            for k in 0..3 {
                                assert!(
                                    (answers[0][k] - answers[1][k]).abs() < 1e-8,
                                    "{}: closed form and numeric disagree at {target:?}: {answers:?}",
                                    leg.foot()
                                );
                            }
                        }
                    }
                }
            }
            println!(
                "{} {}: {:?}, {solved}/{tried} solved, worst |FK(IK(p)) − p| = {worst:.1e} m",
                robot.model.name,
                leg.foot(),
                leg.method()
            );
            assert!(worst < 1e-10, "{}: FK(IK(p)) off by {worst}", leg.foot());
            // Most of the grid is reachable, so the check above is not vacuous.
            assert!(
                solved * 10 >= tried * 8,
                "{}: only {solved}/{tried} grid targets solved",
                leg.foot()
            );
        }
    }
}

#[test]
fn ik_methods_are_chosen_by_leg_structure() {
    let legs = gripsweep::planner::Legs::new(&brindle().model, &brindle().facts).unwrap();
    for i in 0..legs.len() {
        assert_eq!(
            legs.leg(i).method(),
            IkMethod::Analytic,
            "{}",
            legs.leg(i).foot()
        );
    }
    // skitter: l2 l3 r2 r3 have a yaw joint and two parallel pitch joints; the front legs'
    // tilted lift axis is not parallel to the knee, so they fall back to the numeric method.
    let legs = gripsweep::planner::Legs::new(&skitter().model, &skitter().facts).unwrap();
    for i in 0..legs.len() {
        let leg = legs.leg(i);
        let expect = if leg.foot().starts_with("l1") || leg.foot().starts_with("r1") {
            IkMethod::Numeric
        } else {
            IkMethod::Analytic
        };
        assert_eq!(leg.method(), expect, "{}", leg.foot());
    }
}

#[test]
fn unreachable_targets_get_a_clear_error() {
    for robot in [brindle(), skitter()] {
        let model = &robot.model;
        let legs = gripsweep::planner::Legs::new(model, &robot.facts).unwrap();
        let mut scratch = legs.new_scratch(model);
        for i in 0..legs.len() {
            let leg = legs.leg(i);
            let far = Vec3::new(0.0, 0.0, -2.0);
            let mut methods = vec![IkMethod::Numeric];
            if leg.has_closed_form() {
                methods.push(IkMethod::Analytic);
            }
            for m in methods {
                let e = legs
                    .solve_with(model, i, &far, m, leg.nominal(), &mut scratch)
                    .unwrap_err();
                assert!(e.contains("out of reach"), "{} {m:?}: {e}", leg.foot());
            }
        }
    }
    // In a plan: a body too high for the legs names the foot and the time.
    let e = Plan::build(
        &brindle().model,
        &brindle().facts,
        &Slope::degrees(0.0),
        &Gait::WeightShift {
            amplitude: 0.03,
            period: 2.0,
            body_height: 0.6,
        },
        4.0,
    )
    .unwrap_err();
    assert!(
        e.0.starts_with("foot '")
            && e.0.contains("at t = 0.0000 s")
            && e.0.contains("out of reach"),
        "{e}"
    );
    // A step too long for the legs: refused when the foot gets there.
    let e = Plan::build(
        &brindle().model,
        &brindle().facts,
        &Slope::degrees(0.0),
        &Gait::Crawl {
            step_length: 0.5,
            swing_height: 0.05,
            cycle_period: 4.0,
            body_height: 0.30,
            margin: Some(0.01),
            shift_accel: None,
        },
        6.0,
    )
    .unwrap_err();
    // The message names the foot, the instant and whether it swings, and a gait setting.
    assert!(
        e.0.starts_with("foot '") && e.0.contains(" s (swinging): ") && e.0.contains("`gait."),
        "{e}"
    );
}

#[test]
fn bad_parameters_are_refused_with_the_parameter_named() {
    let r = brindle();
    let flat = Slope::degrees(0.0);
    let build = |gait: Gait, duration: f64| {
        Plan::build(&r.model, &r.facts, &flat, &gait, duration)
            .map(|_| ())
            .unwrap_err()
            .0
    };
    let crawl = |step_length, cycle_period, margin| Gait::Crawl {
        step_length,
        swing_height: 0.05,
        cycle_period,
        body_height: 0.3,
        margin: Some(margin),
        shift_accel: None,
    };
    assert!(build(crawl(0.05, -1.0, 0.01), 8.0).contains("`cycle_period` = -1"));
    assert!(build(crawl(-0.05, 4.0, 0.01), 8.0).contains("`step_length`"));
    assert!(build(crawl(0.05, 4.0, f64::NAN), 8.0).contains("`margin`"));
    assert!(build(Gait::Stand, 0.0).contains("duration"));
    assert!(build(Gait::Stand, 1e9).contains("duration = 1000000000 s: allowed: at most"));
    let e = build(crawl(0.05, 1e-6, 0.01), 8.0);
    assert!(e.contains("`cycle_period` = 0.000001 s makes moves"), "{e}");
    assert!(build(crawl(0.05, 4.0, 0.01), 3.0).contains("duration"));
    // The brindle stance triangles have inscribed circles of about 7 cm.
    let e = build(crawl(0.05, 4.0, 0.2), 8.0);
    assert!(
        e.contains("margin = 0.2 m cannot be met") && e.contains("at most"),
        "{e}"
    );
    let e = build(
        Gait::WeightShift {
            amplitude: 0.5,
            period: 2.0,
            body_height: 0.3,
        },
        4.0,
    );
    assert!(e.contains("amplitude"), "{e}");
    let e = build(
        Gait::Trot {
            step_length: 0.1,
            swing_height: 0.05,
            cycle_period: 0.0,
            body_height: 0.3,
        },
        4.0,
    );
    assert!(e.contains("`cycle_period` = 0"), "{e}");
}

// ---------------------------------------------------------------------------------------------
// Derivatives.

/// Richardson-extrapolated central differences of the exact plan ([`Plan::evaluate`]): first
/// and second derivatives with O(ε⁴) truncation error. Displacements of q are taken with
/// `difference` (the base on SE(3), in its own frame, as v is).
struct Differences {
    v: DVector<f64>,
    a_from_q: DVector<f64>,
    a_from_v: DVector<f64>,
    foot_v: Vec<Vec3>,
    foot_a: Vec<Vec3>,
}

fn differences(plan: &Plan, t: f64, eps: f64, exact: bool) -> (PlanSample, Differences) {
    let model = plan.model();
    let mut scratch = plan.new_scratch();
    let mut at = |s: f64| {
        let mut out = plan.new_sample();
        if exact {
            plan.evaluate(s, &mut scratch, &mut out).unwrap();
        } else {
            plan.sample(s, &mut out);
        }
        out
    };
    let c = at(t);
    let [m2, m1, p1, p2] = [-2.0, -1.0, 1.0, 2.0].map(|k| at(t + k * eps));
    let dq = |s: &PlanSample| difference(model, &c.q, &s.q);
    let (dm2, dm1, dp1, dp2) = (dq(&m2), dq(&m1), dq(&p1), dq(&p2));
    let d1 = (&dp1 - &dm1) / (2.0 * eps);
    let d2 = (&dp2 - &dm2) / (4.0 * eps);
    let v = (d1 * 4.0 - d2) / 3.0;
    let s1 = (&dp1 + &dm1) / (eps * eps);
    let s2 = (&dp2 + &dm2) / (4.0 * eps * eps);
    let a_from_q = (s1 * 4.0 - s2) / 3.0;
    let e1 = (&p1.v - &m1.v) / (2.0 * eps);
    let e2 = (&p2.v - &m2.v) / (4.0 * eps);
    let a_from_v = (e1 * 4.0 - e2) / 3.0;
    let n = c.foot_pos.len();
    let foot_v = (0..n)
        .map(|i| {
            let f1 = (p1.foot_pos[i] - m1.foot_pos[i]) / (2.0 * eps);
            let f2 = (p2.foot_pos[i] - m2.foot_pos[i]) / (4.0 * eps);
            (f1 * 4.0 - f2) / 3.0
        })
        .collect();
    let foot_a = (0..n)
        .map(|i| {
            let f1 = (p1.foot_pos[i] + m1.foot_pos[i] - c.foot_pos[i] * 2.0) / (eps * eps);
            let f2 = (p2.foot_pos[i] + m2.foot_pos[i] - c.foot_pos[i] * 2.0) / (4.0 * eps * eps);
            (f1 * 4.0 - f2) / 3.0
        })
        .collect();
    (
        c,
        Differences {
            v,
            a_from_q,
            a_from_v,
            foot_v,
            foot_a,
        },
    )
}

/// Analytic rates and accelerations (through the Jacobian) against finite differences of the
/// exact positions. With ε = 0.5 ms and Richardson extrapolation the truncation error is
/// about ε⁴ f⁽⁵⁾/30 for rates and ε⁴ f⁽⁶⁾/90 for accelerations. The sharpest motion here (the
/// skitter's 0.25 s swings, joint accelerations up to 165 rad/s²) has f⁽⁵⁾ ~ 1e7 rad/s⁵ and
/// f⁽⁶⁾ ~ 1e9 rad/s⁶: ≲ 2e-8 rad/s and ≲ 1e-6 rad/s². Rounding of the positions (≤ 1e-15)
/// adds ≲ 1e-11 and ≲ 1e-8. Tolerances 1e-6 rad/s (m/s) and 1e-5 rad/s² (m/s²). A wrong
/// formula is far outside them: leaving out J̇v alone errs by |J̇v|/σ(J) ~ 1–100 rad/s².
#[test]
fn velocities_and_accelerations_match_finite_differences() {
    let eps = 5e-4;
    for (label, _, _, plan) in all_plans() {
        let (mut ev, mut ea, mut ef) = (0.0f64, 0.0f64, 0.0f64);
        let (mut peak_v, mut peak_a) = (0.0f64, 0.0f64);
        for t in times_between_breakpoints(plan, 120, 2.5 * eps) {
            let (c, d) = differences(plan, t, eps, true);
            ev = ev.max(amax(&(&c.v - &d.v)));
            ea = ea.max(amax(&(&c.a - &d.a_from_q)).max(amax(&(&c.a - &d.a_from_v))));
            for i in 0..c.foot_pos.len() {
                ef = ef
                    .max((c.foot_vel[i] - d.foot_v[i]).amax())
                    .max((c.foot_acc[i] - d.foot_a[i]).amax() * 1e-2);
            }
            peak_v = peak_v.max(amax(&c.v));
            peak_a = peak_a.max(amax(&c.a));
        }
        println!(
            "{label}: FD error v {ev:.1e} (peak {peak_v:.2}), a {ea:.1e} (peak {peak_a:.2}), feet {ef:.1e}"
        );
        assert!(
            peak_v > 0.0 || label.contains("stand"),
            "{label}: nothing moves"
        );
        assert!(ev < 1e-6, "{label}: velocity vs FD {ev}");
        assert!(ea < 1e-5, "{label}: acceleration vs FD {ea}");
        assert!(ef < 1e-6, "{label}: feet vs FD {ef}");
    }
}

/// Plans longer than the knot cache holds (two robots, two gaits): the build keeps only the
/// last chunks; a sample in a dropped chunk makes it again from its seed, and that chunk equals
/// the build's bit for bit (a clone of the plan starts with no chunks, so every chunk it reads
/// is made again; the original still holds the build's own last chunks). The cache stays
/// within its bound throughout.
#[test]
fn knot_chunks_made_again_equal_the_build_s() {
    for (robot, gait, label) in [
        (brindle(), BRINDLE_PACED, "brindle paced crawl"),
        (skitter(), SKITTER_TROT, "skitter trot"),
    ] {
        let built = plan(robot, 10.0, &gait, 24.0);
        let knots = built.knot_times();
        assert!(
            knots.len() > CACHE_CHUNKS * CHUNK_KNOTS,
            "{label}: too short to test"
        );
        assert!(built.knot_chunks_kept() <= CACHE_CHUNKS, "{label}");
        let fresh = built.clone();
        assert_eq!(fresh.knot_chunks_kept(), 0, "{label}: a clone starts empty");
        // Backwards over the last chunks first (the build's own, in `built`), then forwards
        // over the whole plan (dropping and making chunks again in both).
        let late: Vec<f64> = (0..knots.len())
            .rev()
            .step_by(97)
            .take(120)
            .flat_map(|k| {
                let t = knots[k];
                let next = knots.get(k + 1).copied().unwrap_or(t);
                [t, 0.5 * (t + next)]
            })
            .collect();
        let all: Vec<f64> = (0..knots.len())
            .step_by(53)
            .map(|k| knots[k] + 0.37e-3)
            .collect();
        let (mut a, mut b) = (built.new_sample(), fresh.new_sample());
        for &t in late.iter().chain(&all) {
            built.sample(t, &mut a);
            fresh.sample(t, &mut b);
            for (name, x, y) in [("q", &a.q, &b.q), ("v", &a.v, &b.v), ("a", &a.a, &b.a)] {
                let same = x
                    .iter()
                    .zip(y.iter())
                    .all(|(p, q)| p.to_bits() == q.to_bits());
                assert!(
                    same,
                    "{label} t = {t}: {name} differs between the build's chunk and one made again"
                );
            }
            assert!(built.knot_chunks_kept() <= CACHE_CHUNKS, "{label}");
            assert!(fresh.knot_chunks_kept() <= CACHE_CHUNKS, "{label}");
        }
    }
}

/// `sample` (knots + quintic Hermite) against the exact solution: equal at knots, within the
/// interpolation error between them; and its own velocity and acceleration are the derivatives
/// of its own position (central differences inside one knot interval, ε = 1e-5 s: truncation
/// ε² f'''/6 ≲ 1e-6, rounding 1e-16/ε² = 1e-6 for accelerations).
#[test]
fn sample_interpolates_the_exact_plan() {
    for (label, _, _, plan) in all_plans() {
        let mut scratch = plan.new_scratch();
        let mut exact = plan.new_sample();
        let mut fast = plan.new_sample();
        let knots = plan.knot_times();
        let (mut at_knots, mut between_q, mut between_v, mut between_a) =
            (0.0f64, 0.0f64, 0.0f64, 0.0f64);
        for k in (0..knots.len()).step_by(7) {
            plan.sample(knots[k], &mut fast);
            plan.evaluate(knots[k], &mut scratch, &mut exact).unwrap();
            at_knots = at_knots
                .max(amax(&(&fast.q - &exact.q)))
                .max(amax(&(&fast.v - &exact.v)))
                .max(amax(&(&fast.a - &exact.a)));
            if k + 1 < knots.len() {
                let t = knots[k] + 0.43 * (knots[k + 1] - knots[k]);
                plan.sample(t, &mut fast);
                plan.evaluate(t, &mut scratch, &mut exact).unwrap();
                between_q = between_q.max(amax(&(&fast.q - &exact.q)));
                between_v = between_v.max(amax(&(&fast.v - &exact.v)));
                between_a = between_a.max(amax(&(&fast.a - &exact.a)));
                // Derivatives of the interpolant itself.
                let h = 1e-5;
                let mut lo = plan.new_sample();
                let mut hi = plan.new_sample();
                plan.sample(t - h, &mut lo);
                plan.sample(t + h, &mut hi);
                let model = plan.model();
                let fd_v = difference(model, &lo.q, &hi.q) / (2.0 * h);
                let fd_a = (&hi.v - &lo.v) / (2.0 * h);
                assert!(amax(&(&fd_v - &fast.v)) < 1e-6, "{label} t={t}: v vs FD");
                assert!(amax(&(&fd_a - &fast.a)) < 1e-4, "{label} t={t}: a vs FD");
            }
        }
        println!(
            "{label}: sample − exact at knots {at_knots:.1e}; between knots q {between_q:.1e}, v {between_v:.1e}, a {between_a:.1e}"
        );
        assert!(at_knots < 1e-12, "{label}: at knots {at_knots}");
        // Quintic Hermite over h = 1 ms: errors ~ h⁶ q⁽⁶⁾, h⁵ q⁽⁶⁾, h⁴ q⁽⁶⁾ up to constants
        // (q⁽⁶⁾ ≲ 1e9 rad/s⁶ here); measured at most 1e-14 rad, 2e-9 rad/s, 2.4e-6 rad/s².
        assert!(between_q < 1e-12, "{label}: q between knots {between_q}");
        assert!(between_v < 1e-8, "{label}: v between knots {between_v}");
        assert!(between_a < 1e-5, "{label}: a between knots {between_a}");
    }
}

/// Acceleration just before and just after every breakpoint (δ = 1e-10 s each side), both of
/// `sample` and of the exact solution: with jerks below 1e4 rad/s³ a continuous acceleration
/// changes by < 2e-6 over 2δ, and rounding in the interpolation adds < 1e-8; the tolerance
/// 1e-5 rad/s² (m/s²) is far below the jump a non-C² joint would make (a rest-to-rest move of
/// these sizes starting with non-zero acceleration jumps by more than 0.1).
#[test]
fn acceleration_is_continuous_across_breakpoints() {
    let delta = 1e-10;
    for (label, _, _, plan) in all_plans() {
        let mut scratch = plan.new_scratch();
        let mut before = plan.new_sample();
        let mut after = plan.new_sample();
        let (mut worst, mut worst_exact) = (0.0f64, 0.0f64);
        let bps = plan.breakpoints();
        assert!(bps.len() >= 2);
        for &b in &bps[1..bps.len() - 1] {
            plan.sample(b - delta, &mut before);
            plan.sample(b + delta, &mut after);
            worst = worst.max(amax(&(&before.a - &after.a)));
            for i in 0..before.foot_acc.len() {
                worst = worst.max((before.foot_acc[i] - after.foot_acc[i]).amax());
            }
            assert!(
                amax(&(&before.v - &after.v)) < 1e-6,
                "{label} at {b}: v jumps"
            );
            plan.evaluate(b - delta, &mut scratch, &mut before).unwrap();
            plan.evaluate(b + delta, &mut scratch, &mut after).unwrap();
            worst_exact = worst_exact.max(amax(&(&before.a - &after.a)));
        }
        println!(
            "{label}: {} breakpoints, largest acceleration change across one: sample {worst:.1e}, exact {worst_exact:.1e}",
            bps.len()
        );
        assert!(worst < 1e-5, "{label}: acceleration jumps by {worst}");
        assert!(
            worst_exact < 1e-5,
            "{label}: exact acceleration jumps by {worst_exact}"
        );
    }
}

// ---------------------------------------------------------------------------------------------
// Feet.

#[test]
fn stance_feet_stay_put_on_the_ground_and_fk_matches_the_plan() {
    for (label, robot, slope_deg, plan) in all_plans() {
        let slope = Slope::degrees(*slope_deg);
        let n = slope.normal_at(0.0, 0.0);
        let radius = robot.facts.feet.radius;
        let model = plan.model();
        let mut ws = Workspace::new(model);
        let mut s = plan.new_sample();
        let starts = plan.phase_starts().to_vec();
        let (mut still, mut fk, mut ground, mut rest) = (0.0f64, 0.0f64, 0.0f64, 0.0f64);
        for (p, &t0) in starts.iter().enumerate() {
            let t1 = starts.get(p + 1).copied().unwrap_or(plan.duration());
            plan.sample(t0, &mut s);
            assert_eq!(s.phase_index, p, "{label}: phase index at {t0}");
            let stance = s.stance.clone();
            let first = s.foot_pos.clone();
            for k in 0..=20 {
                let t = t0 + (t1 - t0) * k as f64 / 20.0;
                plan.sample(t, &mut s);
                forward_kinematics(model, &mut ws, &s.q);
                for i in 0..stance.len() {
                    let frame = plan.legs().leg(i).frame();
                    fk = fk.max((frame_pose(model, &ws, frame).trans - s.foot_pos[i]).norm());
                    if stance[i] {
                        still = still.max((s.foot_pos[i] - first[i]).norm());
                        // Plane through the origin: the centre is the radius above it.
                        ground = ground.max((s.foot_pos[i].dot(&n) - radius).abs());
                        // Exactly zero inside; at touchdown the swing piece's end (rounding).
                        rest = rest.max(s.foot_vel[i].norm()).max(s.foot_acc[i].norm());
                    } else {
                        // A swinging foot is above the ground.
                        assert!(
                            s.foot_pos[i].dot(&n) > radius - 1e-12,
                            "{label}: swing below ground"
                        );
                    }
                }
            }
        }
        println!(
            "{label}: stance drift {still:.1e} m, |FK − plan| {fk:.1e} m, off ground {ground:.1e} m, stance foot speed/acceleration {rest:.1e}"
        );
        assert!(rest < 1e-9, "{label}: stance feet move at {rest}");
        assert!(still < 1e-12, "{label}: stance feet move by {still}");
        assert!(
            fk < 1e-9,
            "{label}: FK of planned q misses the feet by {fk}"
        );
        assert!(
            ground < 1e-12,
            "{label}: stance feet off the ground by {ground}"
        );
    }
}

#[test]
fn initial_state_stands_on_the_terrain_at_rest() {
    for (label, robot, slope_deg, plan) in all_plans() {
        let slope = Slope::degrees(*slope_deg);
        let (q, v) = plan.initial_state();
        assert_eq!(amax(&v), 0.0, "{label}");
        let model = &robot.model;
        let mut ws = Workspace::new(model);
        forward_kinematics(model, &mut ws, &q);
        let n = slope.normal_at(0.0, 0.0);
        for f in &robot.facts.feet.frames {
            let p = frame_pose(model, &ws, model.frame_index(f).unwrap()).trans;
            assert!(
                (p.dot(&n) - robot.facts.feet.radius).abs() < 1e-12,
                "{label} {f}"
            );
        }
        // The trunk is parallel to the slope: its z axis is the normal.
        let base = frame_pose(model, &ws, 0);
        assert!((base.rot.column(2) - n).norm() < 1e-12, "{label}");
    }
}

// ---------------------------------------------------------------------------------------------
// Crawl: static stability with the full model's centre of mass.

fn convex_hull(points: &[Vector2<f64>]) -> Vec<Vector2<f64>> {
    let mut pts = points.to_vec();
    pts.sort_by(|a, b| a.x.total_cmp(&b.x).then(a.y.total_cmp(&b.y)));
    let cross = |o: &Vector2<f64>, a: &Vector2<f64>, b: &Vector2<f64>| {
        (a.x - o.x) * (b.y - o.y) - (a.y - o.y) * (b.x - o.x)
    };
    let mut hull: Vec<Vector2<f64>> = Vec::new();
    for pass in 0..2 {
        let start = hull.len();
        let seq: Vec<Vector2<f64>> = if pass == 0 {
            pts.clone()
        } else {
            pts.iter().rev().copied().collect()
        };
        for p in seq {
            while hull.len() >= start + 2
                && cross(&hull[hull.len() - 2], &hull[hull.len() - 1], &p) <= 0.0
            {
                hull.pop();
            }
            hull.push(p);
        }
        hull.pop();
    }
    hull
}

/// Smallest distance from x to the edges of a counter-clockwise convex polygon (negative
/// outside).
fn polygon_margin(hull: &[Vector2<f64>], x: &Vector2<f64>) -> f64 {
    (0..hull.len())
        .map(|k| {
            let (a, b) = (hull[k], hull[(k + 1) % hull.len()]);
            let d = (b - a).normalize();
            d.x * (x.y - a.y) - d.y * (x.x - a.x)
        })
        .fold(f64::INFINITY, f64::min)
}

/// During every swing, the full model's centre of mass projected along gravity (vertical) onto
/// the slope lies inside the polygon of the stance feet with at least the margin, to 1e-6 m
/// (the plan enforces it at every knot, 1 ms apart; between knots the swinging leg moves the
/// centre of mass by far less).
#[test]
fn crawl_keeps_the_full_centre_of_mass_inside_the_stance_polygon() {
    let cases = [
        (brindle(), BRINDLE_CRAWL, 9.0),
        (skitter(), SKITTER_CRAWL, 6.8),
    ];
    for (robot, gait, duration) in cases {
        let Gait::Crawl {
            margin: Some(margin),
            ..
        } = gait
        else {
            unreachable!()
        };
        for slope_deg in [0.0, 15.0] {
            let slope = Slope::degrees(slope_deg);
            let (n, t1, t2) = slope.surface_frame(0.0, 0.0);
            let plan = plan(robot, slope_deg, &gait, duration);
            let model = plan.model();
            let mut ws = Workspace::new(model);
            let mut s = plan.new_sample();
            let radius = robot.facts.feet.radius;
            let g = model.gravity.normalize();
            let (mut worst, mut swings_seen, mut samples) = (f64::INFINITY, 0usize, 0usize);
            let mut last_phase = usize::MAX;
            let steps = (duration / 1e-3) as usize;
            for k in 0..steps {
                let t = (k as f64 + 0.37) * 1e-3;
                plan.sample(t, &mut s);
                if s.stance.iter().all(|&x| x) {
                    continue;
                }
                assert_eq!(
                    s.stance.iter().filter(|&&x| !x).count(),
                    1,
                    "one swing foot at a time"
                );
                if s.phase_index != last_phase {
                    swings_seen += 1;
                    last_phase = s.phase_index;
                }
                forward_kinematics(model, &mut ws, &s.q);
                let com = center_of_mass(model, &ws);
                // Along gravity onto the plane n·x = 0.
                let on_plane = com - g * (com.dot(&n) / g.dot(&n));
                let c2 = Vector2::new(on_plane.dot(&t1), on_plane.dot(&t2));
                let spots: Vec<Vector2<f64>> = (0..s.stance.len())
                    .filter(|&i| s.stance[i])
                    .map(|i| {
                        let spot = s.foot_pos[i] - n * radius;
                        Vector2::new(spot.dot(&t1), spot.dot(&t2))
                    })
                    .collect();
                worst = worst.min(polygon_margin(&convex_hull(&spots), &c2));
                samples += 1;
            }
            println!(
                "{} crawl on {slope_deg}°: {swings_seen} swings, {samples} samples, smallest CoM margin {worst:.6} m (asked {margin})",
                robot.model.name
            );
            assert!(swings_seen >= robot.facts.feet.frames.len());
            assert!(worst >= margin - 1e-6, "margin {worst} < {margin}");
        }
    }
}

// ---------------------------------------------------------------------------------------------
// Progress.

#[test]
fn planned_progress_is_whole_cycles_of_steps() {
    let uphill = |deg: f64| Slope::degrees(deg).uphill();
    for (label, robot, slope_deg, plan) in all_plans() {
        let n_feet = robot.facts.feet.frames.len();
        let mut s0 = plan.new_sample();
        let mut s1 = plan.new_sample();
        plan.sample(0.0, &mut s0);
        plan.sample(plan.duration(), &mut s1);
        let made = (s1.base_pos - s0.base_pos).dot(&uphill(*slope_deg));
        assert!((made - plan.planned_progress()).abs() < 1e-12, "{label}");
        // Count the steps in the stance schedule: phases with some foot in the air.
        let mut swings_per_foot = vec![0usize; n_feet];
        let mut s = plan.new_sample();
        let starts = plan.phase_starts();
        for (p, &t0) in starts.iter().enumerate() {
            let t1 = starts.get(p + 1).copied().unwrap_or(plan.duration());
            plan.sample(0.5 * (t0 + t1), &mut s);
            for (count, &down) in swings_per_foot.iter_mut().zip(&s.stance) {
                *count += usize::from(!down);
            }
        }
        let cycles = swings_per_foot[0];
        assert!(
            swings_per_foot.iter().all(|&c| c == cycles),
            "{label}: {swings_per_foot:?}"
        );
        assert_eq!(cycles, plan.cycles(), "{label}");
        let expected = if label.contains("crawl") {
            let Gait::Crawl { step_length, .. } = (if label.starts_with("brindle paced") {
                BRINDLE_PACED
            } else if label.starts_with("brindle") {
                BRINDLE_CRAWL
            } else {
                SKITTER_CRAWL
            }) else {
                unreachable!()
            };
            cycles as f64 * step_length
        } else if label.contains("trot") {
            let Gait::Trot { step_length, .. } = (if label.starts_with("brindle") {
                BRINDLE_TROT
            } else {
                SKITTER_TROT
            }) else {
                unreachable!()
            };
            // The first and last cycles ramp the speed up and down.
            (cycles as f64 - 1.0) * step_length
        } else {
            0.0
        };
        println!(
            "{label}: {cycles} cycles, progress {:.6} m",
            plan.planned_progress()
        );
        assert!(
            (plan.planned_progress() - expected).abs() < 1e-12,
            "{label}: progress {} vs {expected}",
            plan.planned_progress()
        );
        if label.contains("crawl") || label.contains("trot") {
            // A paced cycle is long (5–9 s); one is enough to check the bookkeeping.
            let least = if label.contains("paced") { 1 } else { 2 };
            assert!(cycles >= least, "{label}: the plan must step");
        }
        // Every foot ends where it started, moved by the progress along the slope.
        for i in 0..n_feet {
            let moved = s1.foot_pos[i] - s0.foot_pos[i];
            assert!(
                (moved - uphill(*slope_deg) * expected).norm() < 1e-9,
                "{label} foot {i}"
            );
        }
    }
}

// ---------------------------------------------------------------------------------------------
// The per-step path.

#[test]
fn sample_allocates_nothing_and_is_fast() {
    // Building: a 10 s crawl and trot on the slope, each robot (release build; shared machine).
    for (robot, gaits) in [
        (brindle(), [BRINDLE_CRAWL, BRINDLE_TROT]),
        (skitter(), [SKITTER_CRAWL, SKITTER_TROT]),
    ] {
        for gait in gaits {
            let start = std::time::Instant::now();
            let p = plan(robot, 15.0, &gait, 10.0);
            let secs = start.elapsed().as_secs_f64();
            println!(
                "{} {:?}: build {secs:.3} s for 10 s ({} knots, crawl correction {:?})",
                robot.model.name,
                gait,
                p.knot_times().len(),
                p.crawl_correction()
            );
            assert!(secs < 60.0, "building takes {secs} s");
        }
    }
    for (label, _, _, plan) in all_plans().iter().filter(|p| p.0.contains("on 15")) {
        let mut s = plan.new_sample();
        plan.sample(0.1, &mut s);
        let n = 20_000;
        let before = allocations();
        let start = std::time::Instant::now();
        for k in 0..n {
            plan.sample(plan.duration() * (k as f64 / n as f64), &mut s);
        }
        let per = start.elapsed().as_secs_f64() / n as f64 * 1e6;
        let allocated = allocations() - before;
        println!("{label}: sample() {per:.2} µs, {allocated} allocations");
        assert_eq!(allocated, 0, "{label}: sample allocated");
        // Loose: a plain check that sampling is not solving (an IK solve per leg would cost
        // several µs per numeric leg); timing on a shared machine is noisy.
        assert!(per < 50.0, "{label}: sample takes {per} µs");
    }
}
