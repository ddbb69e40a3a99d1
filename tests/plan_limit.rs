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
            assert!(ok, "{name} standing on {deg}°: μ_required {} vs tan θ {want}", l.mu_required);
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

#[test]
#[ignore]
fn measure() {
    let acc: f64 = std::env::var("ACC").unwrap().parse().unwrap();
    let margin: Option<f64> = std::env::var("MARGIN").ok().and_then(|m| m.parse().ok());
    let sk = std::env::var("SKITTER").is_ok();
    let gait = if sk {
        Gait::Crawl { step_length: 0.04, swing_height: 0.03, cycle_period: 3.0, body_height: 0.125, margin, shift_accel: if acc > 0.0 { Some(acc) } else { None } }
    } else {
        Gait::Crawl { step_length: 0.06, swing_height: 0.05, cycle_period: 3.2, body_height: 0.30, margin, shift_accel: if acc > 0.0 { Some(acc) } else { None } }
    };
    let robot = if sk { skitter() } else { brindle() };
    for deg in [0.0f64, 10.0, 20.0, 25.0] {
        let slope = Slope::degrees(deg);
        let mut d = 4.0;
        let p = loop {
            match Plan::build(&robot.model, &robot.facts, &slope, &gait, d) {
                Ok(p) => break p,
                Err(e) if e.0.contains("duration") && d < 60.0 => d += 1.0,
                Err(e) => panic!("{e}"),
            }
        };
        let l = plan_limit(&p, &slope).unwrap();
        eprintln!("{deg:>4}: margin {:.4} dur {d} cycle {:.2} mu {:.4} (tan {:.4}, ratio {:.3}) at {:.2} share {:.3} tl {:.4}", p.crawl_margin(), p.cycle_time(), l.mu_required, deg.to_radians().tan(), l.mu_required / deg.to_radians().tan(), l.at_s, l.torque_share, l.mu_required_torque_limited);
    }
}
