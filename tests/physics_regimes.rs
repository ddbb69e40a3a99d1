//! The physics holds up (issue checks): each law stands and crawls on good ground; on flat
//! ground slip stays near the floor; beyond the friction angle every law slips or falls; and in
//! the regime where the statics predicts it (low μ on a shallow slope), the load-normalised
//! contact-force law holds where minimum torque slips.

use gripsweep::cell::{CellContext, CellOutcome, run_cell};
use gripsweep::matrix::Cell;
use gripsweep::metrics::CellStatus;
use gripsweep::plant::actuator::ActuatorKind;
use gripsweep::robot::LoadedRobot;
use gripsweep::runner::slip_floor;
use gripsweep::scenario::Scenario;
use rayon::prelude::*;

const LAWS: [&str; 5] = [
    "stiff-pd",
    "id-lean",
    "id-grip",
    "id-grip-load",
    "cone-margin",
];

fn scenario(gait: &str, duration: f64) -> Scenario {
    let text = format!("name = \"physics\"\nduration = {duration}\n[gait]\nkind = \"{gait}\"\n");
    Scenario::from_text("physics.toml", &text, None).unwrap()
}

fn cell(slope_deg: f64, mu: f64, controller: &str) -> Cell {
    Cell::probe(mu, 1000.0, ActuatorKind::Ideal, controller).set("slope_deg", slope_deg)
}

fn run_all(s: &Scenario, cells: &[Cell]) -> Vec<CellOutcome> {
    let robot = LoadedRobot::demo().unwrap();
    cells
        .par_iter()
        .map(|c| {
            run_cell(
                &CellContext {
                    scenario: s,
                    robot: &robot,
                },
                c,
                None,
            )
        })
        .collect()
}

#[test]
fn every_law_stands_and_crawls_for_ten_seconds_on_good_ground() {
    for gait in ["stand", "crawl"] {
        let s = scenario(gait, 10.0);
        let cells: Vec<Cell> = LAWS.iter().map(|l| cell(0.0, 1.0, l)).collect();
        for (c, out) in cells.iter().zip(run_all(&s, &cells)) {
            eprintln!(
                "{gait} {}: {} — base {:.2} mm, orientation {:.3}°, joints {:.3}° RMS; slip {:.4} mm/phase",
                c.controller(),
                out.status.name(),
                out.metrics.base_pos_rms_mm,
                out.metrics.base_orient_rms_deg,
                out.metrics.joint_rms_deg,
                out.metrics.slip_mean_mm
            );
            // No fall, no divergence, the whole 10 s. Tracking differs by law and is stated,
            // not bounded tightly: on three feet the minimum-torque law loads the light foot
            // beyond μ = 1 (its internal forces lower the torques, see tests/control_laws.rs)
            // and slides, trading tracking for torque — so far (165 mm RMS with the contact
            // at the ground point, 133 mm at the sphere centre, when written) that the
            // tracking test calls it `no-control` on the crawl: it stays up but is not ranked.
            let drifted = gait == "crawl"
                && c.controller() == "id-lean"
                && out.status == CellStatus::NoControl
                && out.message.contains("off the plan");
            assert!(
                out.status == CellStatus::Ok || drifted,
                "{gait} {}: {} {}",
                c.controller(),
                out.status.name(),
                out.message
            );
            assert!((out.metrics.sim_time_s - 10.0).abs() < 1e-6);
            assert!(
                out.metrics.base_pos_rms_mm < 250.0,
                "{gait} {}: base error {} mm",
                c.controller(),
                out.metrics.base_pos_rms_mm
            );
            if gait == "stand" {
                assert!(
                    out.metrics.base_pos_rms_mm < 1.0,
                    "{}: standing base error {} mm",
                    c.controller(),
                    out.metrics.base_pos_rms_mm
                );
            }
        }
    }
}

#[test]
fn slip_on_flat_good_ground_stays_near_the_floor() {
    // Weight shifting on four feet: the regime where every law is expected to hold on μ = 1.
    // (In a crawl the minimum-torque law does not: see the test above.)
    let s = scenario("weight-shift", 6.4);
    let robot = LoadedRobot::demo().unwrap();
    let floor = slip_floor(&s, &robot);
    // Margin: 2.5 mm per stance phase over the standing floor. Measured: the model-based laws
    // 0.085 mm, stiff PD 1.8 mm (its position errors push the feet against each other); a law
    // that lets a foot slide goes far beyond.
    let margin = 2.5;
    let cells: Vec<Cell> = LAWS.iter().map(|l| cell(0.0, 1.0, l)).collect();
    for (c, out) in cells.iter().zip(run_all(&s, &cells)) {
        eprintln!(
            "flat μ = 1, {}: {:.4} mm per stance phase (floor {floor:.4})",
            c.controller(),
            out.metrics.slip_mean_mm
        );
        assert_eq!(out.status, CellStatus::Ok);
        assert!(
            out.metrics.slip_mean_mm < floor + margin,
            "{}: {}",
            c.controller(),
            out.metrics.slip_mean_mm
        );
    }
}

#[test]
fn beyond_the_friction_angle_every_law_slips_or_falls() {
    // tan 22° = 0.40 > μ = 0.3: no distribution of forces can hold the robot.
    let s = scenario("stand", 3.0);
    let cells: Vec<Cell> = LAWS.iter().map(|l| cell(22.0, 0.3, l)).collect();
    for (c, out) in cells.iter().zip(run_all(&s, &cells)) {
        eprintln!(
            "22°, μ 0.3, {}: {} slip {:.1} mm",
            c.controller(),
            out.status.name(),
            out.metrics.slip_total_mm
        );
        assert!(
            out.status == CellStatus::Fell || out.metrics.slip_total_mm > 100.0,
            "{}: held on a slope steeper than the friction angle ({} mm)",
            c.controller(),
            out.metrics.slip_total_mm
        );
    }
}

#[test]
fn load_normalised_contact_cost_holds_where_minimum_torque_slips() {
    // Regime: μ = 0.3 on 6° while weight shifting. The statics (tests/control_laws.rs) puts the
    // minimum-torque law's worst foot ratio above 0.3 on such a slope and the load-normalised
    // law's near tan θ = 0.105; the plant must agree, by far more than the slip floor.
    let s = scenario("weight-shift", 4.0);
    let robot = LoadedRobot::demo().unwrap();
    let floor = slip_floor(&s, &robot);
    let cells = [cell(6.0, 0.3, "id-lean"), cell(6.0, 0.3, "id-grip-load")];
    let out = run_all(&s, &cells);
    let (lean, load) = (&out[0].metrics, &out[1].metrics);
    eprintln!(
        "6°, μ 0.3: id-lean {:.3} mm, id-grip-load {:.3} mm per stance phase (floor {floor:.4})",
        lean.slip_mean_mm, load.slip_mean_mm
    );
    assert!(out[1].status == CellStatus::Ok);
    assert!(
        lean.slip_mean_mm > load.slip_mean_mm + 10.0 * floor + 5.0,
        "id-lean {} vs id-grip-load {}",
        lean.slip_mean_mm,
        load.slip_mean_mm
    );
}
