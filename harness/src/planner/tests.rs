//! Unit tests of the planner's parts; whole plans on the demo robots are checked in
//! `tests/planner.rs`.

use super::*;
use crate::plant::terrain::Slope;
use crate::robot::LoadedRobot;
use gripsweep_controllers::RootKind;

/// A one-legged robot whose joint frames are all turned (rpy on every origin), whose first axis
/// is oblique, whose knee axis is the reverse of the hip pitch axis in its own frame, and whose
/// links are offset along the pitch axis: the closed form must find all of that in the model.
const TWISTED_LEG: &str = r#"<?xml version="1.0"?>
<robot name="twisted">
  <link name="base"><inertial><mass value="2"/><inertia ixx="0.01" ixy="0" ixz="0" iyy="0.01" iyz="0" izz="0.01"/></inertial></link>
  <joint name="j1" type="revolute">
    <parent link="base"/><child link="l1"/>
    <origin xyz="0.1 0.05 -0.02" rpy="0.3 -0.2 0.5"/>
    <axis xyz="0.6 0 0.8"/>
    <limit lower="-3" upper="3" effort="1" velocity="1"/>
  </joint>
  <link name="l1"><inertial><mass value="0.3"/><inertia ixx="0.001" ixy="0" ixz="0" iyy="0.001" iyz="0" izz="0.001"/></inertial></link>
  <joint name="j2" type="revolute">
    <parent link="l1"/><child link="l2"/>
    <origin xyz="0.02 0.06 0.01" rpy="0.1 0.2 -0.3"/>
    <axis xyz="0 1 0"/>
    <limit lower="-3" upper="3" effort="1" velocity="1"/>
  </joint>
  <link name="l2"><inertial><mass value="0.3"/><inertia ixx="0.001" ixy="0" ixz="0" iyy="0.001" iyz="0" izz="0.001"/></inertial></link>
  <joint name="j3" type="revolute">
    <parent link="l2"/><child link="l3"/>
    <origin xyz="0.01 0.02 -0.2" rpy="0 0.4 0"/>
    <axis xyz="0 -1 0"/>
    <limit lower="-3" upper="3" effort="1" velocity="1"/>
  </joint>
  <link name="l3"><inertial><mass value="0.2"/><inertia ixx="0.001" ixy="0" ixz="0" iyy="0.001" iyz="0" izz="0.001"/></inertial></link>
  <joint name="toe_mount" type="fixed">
    <parent link="l3"/><child link="toe"/>
    <origin xyz="0.03 0.01 -0.22" rpy="0 0 0"/>
  </joint>
  <link name="toe"><inertial><mass value="0.02"/><inertia ixx="1e-6" ixy="0" ixz="0" iyy="1e-6" iyz="0" izz="1e-6"/></inertial></link>
</robot>
"#;

const TWISTED_FACTS: &str = r#"
urdf = "twisted.urdf"
[feet]
frames = ["toe"]
radius = 0.01
[nominal]
j1 = 0.2
j2 = 0.5
j3 = 1.1
"#;

fn twisted() -> (Model, RobotFacts) {
    let model = Model::from_urdf_str(TWISTED_LEG, RootKind::Floating).unwrap();
    let facts = RobotFacts::from_toml_str(TWISTED_FACTS).unwrap();
    (model, facts)
}

#[test]
fn closed_form_reads_any_joint_frames_from_the_model() {
    let (model, facts) = twisted();
    let legs = Legs::new(&model, &facts).unwrap();
    let leg = legs.leg(0);
    assert!(leg.has_closed_form());
    assert_eq!(leg.method(), IkMethod::Analytic);
    let mut scratch = legs.new_scratch(&model);
    let home = legs.model_foot_position(&model, 0, leg.nominal(), &mut scratch);
    let (mut solved, mut agree) = (0, 0);
    for k in 0..343 {
        let d = Vec3::new(
            (k % 7) as f64 - 3.0,
            ((k / 7) % 7) as f64 - 3.0,
            (k / 49) as f64 - 3.0,
        ) * 0.02;
        let target = home + d;
        let closed = legs.solve_with(
            &model,
            0,
            &target,
            IkMethod::Analytic,
            leg.nominal(),
            &mut scratch,
        );
        let numeric = legs.solve_with(
            &model,
            0,
            &target,
            IkMethod::Numeric,
            leg.nominal(),
            &mut scratch,
        );
        if let Err(e) = &closed {
            assert!(
                e.contains("out of reach") || e.contains("outside its limits"),
                "{e}"
            );
            // A target the closed form finds out of reach is out of reach for any method.
            if e.contains("out of reach") {
                assert!(
                    numeric.is_err(),
                    "{d:?}: {e}, but numeric found {numeric:?}"
                );
            }
        }
        if let Ok(q) = closed {
            solved += 1;
            let found = legs.model_foot_position(&model, 0, &q, &mut scratch);
            assert!(
                (found - target).norm() < 1e-12,
                "closed form off by {}",
                (found - target).norm()
            );
            // The numeric method may land on another branch from the nominal seed; the closed
            // form's is the one nearest the nominal posture.
            if let Ok(qn) = numeric {
                let dist =
                    |q: &[f64]| -> f64 { (0..3).map(|i| (q[i] - leg.nominal()[i]).powi(2)).sum() };
                let same = (0..3).all(|i| (q[i] - qn[i]).abs() < 1e-8);
                assert!(same || dist(&q) <= dist(&qn) + 1e-12, "{q:?} vs {qn:?}");
                agree += usize::from(same);
            }
        }
    }
    println!("twisted leg: {solved}/343 solved, numeric agrees on {agree}");
    // The nominal leg is fairly stretched: the far corners of the ±6 cm grid are out of reach.
    assert!(solved > 200, "only {solved} of 343 targets solved");
    // Near the nominal posture both methods find the same answer.
    assert!(agree > 150, "the methods agree on only {agree} targets");
}

#[test]
fn closed_form_picks_the_branch_nearest_the_nominal_posture() {
    let r = LoadedRobot::demo().unwrap();
    let legs = Legs::new(&r.model, &r.facts).unwrap();
    let mut scratch = legs.new_scratch(&r.model);
    for i in 0..legs.len() {
        let leg = legs.leg(i);
        // The same foot position with the knee folded the other way is the other branch.
        let mirrored = [leg.nominal()[0], -leg.nominal()[1], -leg.nominal()[2]];
        let target = legs.model_foot_position(&r.model, i, &mirrored, &mut scratch);
        let nominal_target = legs.model_foot_position(&r.model, i, leg.nominal(), &mut scratch);
        assert!((target - nominal_target).norm() < 1e-12);
        let q = legs
            .solve_with(
                &r.model,
                i,
                &target,
                IkMethod::Analytic,
                &mirrored,
                &mut scratch,
            )
            .unwrap();
        assert!(
            (0..3).all(|k| (q[k] - leg.nominal()[k]).abs() < 1e-12),
            "{q:?}"
        );
    }
}

#[test]
fn legs_that_do_not_have_three_joints_are_refused() {
    let urdf = TWISTED_LEG.replace(
        r#"<parent link="l3"/><child link="toe"/>"#,
        r#"<parent link="l2"/><child link="toe"/>"#,
    );
    let model = Model::from_urdf_str(&urdf, RootKind::Floating).unwrap();
    let facts = RobotFacts::from_toml_str(TWISTED_FACTS).unwrap();
    let e = Legs::new(&model, &facts).unwrap_err();
    assert!(
        e.0.contains("foot 'toe'") && e.0.contains("has 2 moving joints"),
        "{e}"
    );
}

#[test]
fn crawl_order_and_trot_groups_follow_the_body() {
    let r = LoadedRobot::demo().unwrap();
    let plan = Plan::build(&r.model, &r.facts, &Slope::degrees(0.0), &Gait::Stand, 1.0).unwrap();
    let mut ws = Workspace::new(&r.model);
    let (q, _) = plan.initial_state();
    forward_kinematics(&r.model, &mut ws, &q);
    let footprint: Vec<P2> = (0..4)
        .map(|i| {
            let p = frame_pose(&r.model, &ws, plan.legs().leg(i).frame()).trans;
            P2::new(p.x, p.y)
        })
        .collect();
    let (order, groups) = foot_order(&footprint);
    let names: Vec<&str> = order
        .iter()
        .map(|&i| r.facts.feet.frames[i].as_str())
        .collect();
    assert_eq!(names, ["hr_toe", "fr_toe", "hl_toe", "fl_toe"]);
    // fl fr hl hr: diagonal pairs.
    assert_eq!(groups, [0, 1, 1, 0]);

    let path =
        std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("scenarios/robots/skitter.toml");
    let s = LoadedRobot::from_facts_file(&path).unwrap();
    let plan = Plan::build(&s.model, &s.facts, &Slope::degrees(0.0), &Gait::Stand, 1.0).unwrap();
    let mut ws = Workspace::new(&s.model);
    let (q, _) = plan.initial_state();
    forward_kinematics(&s.model, &mut ws, &q);
    let footprint: Vec<P2> = (0..6)
        .map(|i| {
            let p = frame_pose(&s.model, &ws, plan.legs().leg(i).frame()).trans;
            P2::new(p.x, p.y)
        })
        .collect();
    let (order, groups) = foot_order(&footprint);
    let names: Vec<&str> = order
        .iter()
        .map(|&i| s.facts.feet.frames[i].as_str())
        .collect();
    assert_eq!(
        names,
        ["r3_toe", "r2_toe", "r1_toe", "l3_toe", "l2_toe", "l1_toe"]
    );
    // l1 l2 l3 r1 r2 r3: alternating tripods {l1, l3, r2} and {l2, r1, r3}.
    assert_eq!(groups, [0, 1, 0, 1, 0, 1]);
}

/// The constant-offset approximation of the centre of mass is not enough on its own for the
/// quadruped (the swinging leg is over a tenth of its mass), and the correction is modest.
#[test]
fn crawl_corrects_the_centre_of_mass_approximation() {
    let r = LoadedRobot::demo().unwrap();
    let gait = Gait::Crawl {
        step_length: 0.08,
        swing_height: 0.06,
        cycle_period: 4.0,
        body_height: 0.30,
        margin: Some(0.03),
        shift_accel: None,
    };
    for slope in [0.0, 15.0] {
        let plan = Plan::build(&r.model, &r.facts, &Slope::degrees(slope), &gait, 5.0).unwrap();
        let (rounds, widening) = plan.crawl_correction();
        println!(
            "brindle crawl on {slope}°: {rounds} rounds, largest edge widening {widening:.4} m"
        );
        assert!(rounds >= 2, "the approximation alone kept the margin");
        assert!(widening > 1e-3 && widening < 0.03, "widening {widening}");
    }
}

#[test]
fn sine_cosine_roots_solve_the_equation() {
    let (a, b) = (0.3, -0.7);
    for c in [-0.7, 0.0, 0.5, 0.76] {
        let roots = legs::sine_cosine_roots(a, b, c).unwrap();
        for x in roots {
            assert!((a * x.cos() + b * x.sin() - c).abs() < 1e-14);
        }
    }
    assert!(legs::sine_cosine_roots(a, b, 0.77).is_none());
}
