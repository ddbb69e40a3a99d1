//! The plan's friction limit (planner/limit.rs) against closed forms:
//! * standing still on a uniform slope of angle θ: every foot force can be parallel to gravity,
//!   and then each foot's tangential/normal ratio is tan θ; no distribution does better, since
//!   the tangential forces must sum to m g sin θ and the normal ones to m g cos θ, so the
//!   largest ratio is at least (Σ‖f_t‖)/(Σ f_n) ≥ tan θ (the block-on-an-incline result:
//!   Halliday, Resnick & Walker, "Fundamentals of Physics", Wiley, the chapter on friction —
//!   a block held on an incline needs μ_s ≥ tan θ). μ_required = 0, tan 10°, tan 20° to 0.1 %;
//! * a slow weight shift on flat ground needs no more than its peak base acceleration over g
//!   (the horizontal force the whole body needs is m·a_com, and the legs' feet stay put, so
//!   |a_com| ≤ |a_base|; the minimum-jerk peak 10/√3 · d/T² is from Flash & Hogan, "The
//!   coordination of arm movements", J. Neuroscience 1985);
//! * with the torque limits imposed, the need is never lower;
//! * both on the demo quadruped and the hexapod.

use gripsweep::planner::limit::{limit_at_times, plan_limit, sample_times};
use gripsweep::planner::{Gait, Plan};
use gripsweep::plant::terrain::Slope;
use gripsweep::robot::LoadedRobot;
use std::path::Path;
use std::sync::OnceLock;

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

fn plan(robot: &LoadedRobot, deg: f64, gait: &Gait, duration: f64) -> (Plan, Slope) {
    let slope = Slope::degrees(deg);
    let p = Plan::build(&robot.model, &robot.facts, &slope, gait, duration)
        .unwrap_or_else(|e| panic!("{gait:?} on {deg}°: {e}"));
    (p, slope)
}

#[test]
fn standing_still_needs_tan_theta() {
    for (name, robot) in [("brindle", brindle()), ("skitter", skitter())] {
        for deg in [0.0f64, 10.0, 20.0] {
            let (p, s) = plan(robot, deg, &Gait::Stand, 0.3);
            let l = plan_limit(&p, &s).expect("limit");
            let want = deg.to_radians().tan();
            let ok = if deg == 0.0 {
                l.mu_required < 1e-4
            } else {
                (l.mu_required - want).abs() <= 1e-3 * want
            };
            assert!(
                ok,
                "{name} standing on {deg}°: μ_required {} vs tan θ {want}",
                l.mu_required
            );
            assert!(
                l.mu_required_torque_limited >= l.mu_required,
                "{name} {deg}°: {l:?}"
            );
            assert!(
                l.torque_share > 0.0 && l.torque_share < 1.0,
                "{name} {deg}°: standing needs a share of the limits {}",
                l.torque_share
            );
            assert_eq!(l.instants, sample_times(&p).len());
        }
    }
}

#[test]
fn slow_weight_shift_on_flat_ground_needs_almost_nothing() {
    let (amplitude, period) = (0.03, 8.0);
    let gait = Gait::WeightShift {
        amplitude,
        period,
        body_height: 0.30,
    };
    let (p, s) = plan(brindle(), 0.0, &gait, 8.0);
    let l = plan_limit(&p, &s).expect("limit");
    // Four feet: moves of period / 4, at most 2 × amplitude long (from one side to another).
    let t = period / 4.0;
    let a_peak = 10.0 / 3f64.sqrt() * 2.0 * amplitude / (t * t);
    let bound = a_peak / 9.81;
    assert!(
        l.mu_required > 0.0 && l.mu_required <= bound,
        "weight shift: μ_required {} vs peak base acceleration / g {bound}",
        l.mu_required
    );
    assert!(l.mu_required_torque_limited >= l.mu_required);
}

#[test]
fn torque_limits_never_lower_the_need_and_the_worst_instant_is_reported() {
    let gait = Gait::Crawl {
        step_length: 0.06,
        swing_height: 0.05,
        cycle_period: 3.2,
        body_height: 0.30,
        margin: Some(0.02),
        shift_accel: None,
    };
    let (p, s) = plan(brindle(), 10.0, &gait, 4.0);
    let l = plan_limit(&p, &s).expect("limit");
    assert!(l.mu_required > 10f64.to_radians().tan(), "{l:?}");
    assert!(l.mu_required_torque_limited >= l.mu_required, "{l:?}");
    // The reported instant alone gives the same need.
    let one = limit_at_times(&p, &s, &[l.at_s]).expect("limit");
    assert!(
        (one.mu_required - l.mu_required).abs() <= 1e-4 * l.mu_required,
        "{one:?} vs {l:?}"
    );
}

/// The stated bound on the default (paced) crawl: μ_required ≤ 1.25 tan θ + 0.03. Reasoning
/// (README, "The planner"): a base acceleration a needs a horizontal force m a on top of
/// gravity's, which adds about a / (g cos θ) ≤ 0.021 on 0–25° at the default 2 % of g; the
/// swinging legs add the rest.
fn within_stated_factor(mu_required: f64, deg: f64) -> bool {
    mu_required <= 1.25 * deg.to_radians().tan() + 0.03
}

#[test]
fn default_crawl_stays_within_the_stated_factor_of_tan_theta() {
    let s = gripsweep::scenario::Scenario::default_embedded().expect("default scenario");
    let robot = brindle();
    for deg in s.axes.numbers("slope_deg") {
        let (p, slope) = plan(robot, deg, &s.gait, s.duration);
        let l = plan_limit(&p, &slope).expect("limit");
        assert!(
            within_stated_factor(l.mu_required, deg) && l.mu_required >= deg.to_radians().tan(),
            "default crawl on {deg}°: μ_required {} (tan θ {})",
            l.mu_required,
            deg.to_radians().tan()
        );
        assert!(l.torque_share < 1.0, "{deg}°: {l:?}");
    }
    // The same gait settings (paced shifts, derived margin) on the hexapod, with its own body
    // height and a step that fits its legs.
    let Gait::Crawl {
        swing_height,
        cycle_period,
        shift_accel,
        margin,
        ..
    } = s.gait
    else {
        panic!("the default gait is a crawl")
    };
    assert!(margin.is_none() && shift_accel.is_some());
    let hexapod = Gait::Crawl {
        step_length: 0.04,
        swing_height: swing_height.min(0.03),
        cycle_period,
        body_height: 0.125,
        margin,
        shift_accel,
    };
    for deg in [0.0, 20.0] {
        let (p, slope) = plan(skitter(), deg, &hexapod, 6.0);
        let l = plan_limit(&p, &slope).expect("limit");
        assert!(
            within_stated_factor(l.mu_required, deg),
            "skitter crawl on {deg}°: μ_required {}",
            l.mu_required
        );
    }
}

#[test]
fn the_even_grid_is_still_available_and_needs_more_friction() {
    let even = Gait::Crawl {
        step_length: 0.06,
        swing_height: 0.05,
        cycle_period: 3.2,
        body_height: 0.30,
        margin: None,
        shift_accel: None,
    };
    let (p, slope) = plan(brindle(), 10.0, &even, 4.0);
    assert!((p.cycle_time() - 3.2).abs() < 1e-12);
    let l = plan_limit(&p, &slope).expect("limit");
    assert!(!within_stated_factor(l.mu_required, 10.0), "{l:?}");
}
