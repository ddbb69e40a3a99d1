//! Legs as robots have them (issue 12 part 3), on the two robots of scenarios/robots/ built for
//! it: yarrow, a quadruped whose legs start with a hip yaw joint, and cairn, a hexapod with four
//! joints per leg.
//! * Leg inverse kinematics against references written here from the URDFs' numbers alone: a
//!   forward kinematics of the yaw–pitch–pitch leg and its textbook closed form (yaw from the
//!   target's bearing, then the planar two-link leg by the law of cosines: Craig, "Introduction
//!   to Robotics: Mechanics and Control", 3rd ed. 2005, ch. 4), and a forward kinematics of
//!   the four-joint leg. Solutions reproduce the target to 1e-6 m within the joint limits.
//! * A leg of two joints is refused by `gripsweep robot` and `gripsweep check`, with the reason.
//! * Planner errors name the robot file, the foot, the instant, the cause and a gait setting.
//! * Each robot plans a stand, a weight shift and a crawl, and a model-based law (tuned by the
//!   tool's own tuner) holds it `ok` through the crawl in the real plant.

use gripsweep::planner::{DEFAULT_SHIFT_ACCEL, Gait, IkMethod, Legs, Plan};
use gripsweep::plant::terrain::Slope;
use gripsweep::robot::LoadedRobot;
use gripsweep_controllers::spatial::Vec3;
use std::f64::consts::FRAC_PI_4;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

fn root() -> &'static Path {
    Path::new(env!("CARGO_MANIFEST_DIR"))
}

fn load(name: &str) -> LoadedRobot {
    LoadedRobot::from_facts_file(&root().join(format!("scenarios/robots/{name}.toml")))
        .unwrap_or_else(|e| panic!("{name}: {e}"))
}

fn gripsweep(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_gripsweep"))
        .args(args)
        .current_dir(root())
        .output()
        .expect("the gripsweep binary runs")
}

/// A fresh scratch folder for one test.
fn scratch(test: &str) -> PathBuf {
    let dir = Path::new(env!("CARGO_TARGET_TMPDIR"))
        .join("leg_layouts")
        .join(test);
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

// yarrow's leg, from yarrow.urdf: yaw mount at (±0.21, ±0.12, 0) turned ±45°/±135° about z;
// lift 0.05 m out along the mount's x, about its y; upper link 0.18 m along x; knee about y;
// lower link 0.26 m along −z to the toe centre.
const Y_HUB: f64 = 0.05;
const Y_UP: f64 = 0.18;
const Y_LOW: f64 = 0.26;

fn yarrow_mount(foot: &str) -> (f64, f64, f64) {
    match foot {
        "fl_toe" => (0.21, 0.12, FRAC_PI_4),
        "fr_toe" => (0.21, -0.12, -FRAC_PI_4),
        "hl_toe" => (-0.21, 0.12, 3.0 * FRAC_PI_4),
        "hr_toe" => (-0.21, -0.12, -3.0 * FRAC_PI_4),
        _ => unreachable!(),
    }
}

/// Rotation about y applied to (x, z): R_y(a) (x, 0, z) = (x cos a + z sin a, 0, −x sin a + z cos a).
fn rot_y(a: f64, x: f64, z: f64) -> (f64, f64) {
    (x * a.cos() + z * a.sin(), -x * a.sin() + z * a.cos())
}

/// Toe centre in the trunk frame for (yaw, lift, knee), written from the URDF's numbers.
fn yarrow_fk(foot: &str, q: &[f64]) -> Vec3 {
    let (mx, my, mount) = yarrow_mount(foot);
    // In the lift frame: upper link tip, then the lower link hanging along −z.
    let (ux, uz) = rot_y(q[1], Y_UP, 0.0);
    let (lx, lz) = rot_y(q[1] + q[2], 0.0, -Y_LOW);
    let (r, z) = (Y_HUB + ux + lx, uz + lz);
    let heading = mount + q[0];
    Vec3::new(mx + r * heading.cos(), my + r * heading.sin(), z)
}

/// The textbook closed form of the yaw–pitch–pitch leg, the branch with the knee bent
/// positive (the nominal posture's): yaw from the target's bearing in the mount frame, then
/// the planar two-link problem in the leg's vertical plane by the law of cosines.
fn yarrow_closed_form(foot: &str, p: &Vec3) -> [f64; 3] {
    let (mx, my, mount) = yarrow_mount(foot);
    let (dx, dy) = (p.x - mx, p.y - my);
    let yaw = dy.atan2(dx) - mount;
    let yaw =
        (yaw + std::f64::consts::PI).rem_euclid(2.0 * std::f64::consts::PI) - std::f64::consts::PI;
    // Planar: from the lift axis, horizontal reach r and height z of the toe. With lift a and
    // knee b: r = L1 cos a − L2 sin(a + b), z = −L1 sin a − L2 cos(a + b).
    let (r, z) = (dx.hypot(dy) - Y_HUB, p.z);
    let d2 = r * r + z * z;
    // The toe is R_y(a) (L1 − L2 sin b, −L2 cos b), so its distance d from the lift axis
    // satisfies d² = L1² + L2² − 2 L1 L2 sin b (law of cosines).
    let sin_b = (Y_UP * Y_UP + Y_LOW * Y_LOW - d2) / (2.0 * Y_UP * Y_LOW);
    let b = sin_b.clamp(-1.0, 1.0).asin();
    // Then a: (r, z) = R(−a)·(L1 − L2 sin b, −L2 cos b) in the (x, z) plane.
    let (kx, kz) = (Y_UP - Y_LOW * b.sin(), -Y_LOW * b.cos());
    let a = kz.atan2(kx) - z.atan2(r);
    [yaw, a, b]
}

#[test]
fn yaw_first_leg_ik_matches_an_independent_closed_form_and_forward_kinematics() {
    let r = load("yarrow");
    let legs = Legs::new(&r.model, &r.facts).unwrap();
    let mut scratch = legs.new_scratch(&r.model);
    for i in 0..legs.len() {
        let leg = legs.leg(i);
        let foot = leg.foot().to_string();
        assert_eq!(leg.n(), 3);
        // The closed form applies (yaw then two parallel pitch axes) and was chosen.
        assert_eq!(leg.method(), IkMethod::Analytic, "{foot}");
        let nominal = leg.nominal().to_vec();
        let home = yarrow_fk(&foot, &nominal);
        // The independent forward kinematics agrees with the model's.
        let model_home = legs.model_foot_position(&r.model, i, &nominal, &mut scratch);
        assert!(
            (home - model_home).norm() < 1e-12,
            "{foot}: {home} vs {model_home}"
        );
        let (lo, hi) = leg.limits();
        let (mut solved, mut worst) = (0, 0.0f64);
        let steps = [-1.0, -0.5, 0.0, 0.5, 1.0];
        for dx in steps {
            for dy in steps {
                for dz in steps {
                    let target = home + Vec3::new(dx, dy, dz) * 0.05;
                    let planner = legs
                        .solve(&r.model, i, &target, &nominal, &mut scratch)
                        .unwrap_or_else(|e| panic!("{foot} at {target}: {e}"));
                    let numeric = legs
                        .solve_with(
                            &r.model,
                            i,
                            &target,
                            IkMethod::Numeric,
                            &nominal,
                            &mut scratch,
                        )
                        .unwrap_or_else(|e| panic!("{foot} numeric at {target}: {e}"));
                    let reference = yarrow_closed_form(&foot, &target);
                    for q in [&planner, &numeric] {
                        let err = (yarrow_fk(&foot, q) - target).norm();
                        worst = worst.max(err);
                        assert!(err < 1e-6, "{foot}: FK(IK) off by {err} at {target}");
                        for k in 0..3 {
                            assert!(
                                q[k] >= lo[k] - 1e-9 && q[k] <= hi[k] + 1e-9,
                                "{foot}: {q:?}"
                            );
                            assert!(
                                (q[k] - reference[k]).abs() < 1e-8,
                                "{foot} at {target}: {q:?} vs the textbook closed form {reference:?}"
                            );
                        }
                    }
                    solved += 1;
                }
            }
        }
        println!("yarrow {foot}: {solved}/125 targets, worst |FK(IK(p)) − p| = {worst:.1e} m");
    }
    let stats = (scratch.numeric_solves, scratch.numeric_iterations);
    println!(
        "numeric solves {}, Levenberg–Marquardt iterations {} ({:.1} per solve)",
        stats.0,
        stats.1,
        stats.1 as f64 / stats.0.max(1) as f64
    );
}

// cairn's leg, from cairn.urdf: yaw mount at (0.22 | 0 | −0.22, ±0.15, 0) turned ±90° about z;
// lift 0.05 m out; upper 0.16 m along x; knee; middle 0.14 m along x; ankle; foot link 0.12 m
// along −z to the toe centre.
fn cairn_fk(foot: &str, q: &[f64]) -> Vec3 {
    let side = if foot.starts_with('l') { 1.0 } else { -1.0 };
    let x = match &foot[1..2] {
        "1" => 0.22,
        "2" => 0.0,
        _ => -0.22,
    };
    let (ux, uz) = rot_y(q[1], 0.16, 0.0);
    let (mx, mz) = rot_y(q[1] + q[2], 0.14, 0.0);
    let (lx, lz) = rot_y(q[1] + q[2] + q[3], 0.0, -0.12);
    let (r, z) = (0.05 + ux + mx + lx, uz + mz + lz);
    let heading = side * std::f64::consts::FRAC_PI_2 + q[0];
    Vec3::new(x + r * heading.cos(), side * 0.15 + r * heading.sin(), z)
}

#[test]
fn four_joint_leg_ik_reproduces_targets_within_limits_and_stays_smooth() {
    let r = load("cairn");
    let legs = Legs::new(&r.model, &r.facts).unwrap();
    let mut scratch = legs.new_scratch(&r.model);
    for i in 0..legs.len() {
        let leg = legs.leg(i);
        let foot = leg.foot().to_string();
        assert_eq!(leg.n(), 4);
        assert!(!leg.has_closed_form());
        let nominal = leg.nominal().to_vec();
        let home = cairn_fk(&foot, &nominal);
        let model_home = legs.model_foot_position(&r.model, i, &nominal, &mut scratch);
        assert!((home - model_home).norm() < 1e-12, "{foot}");
        let (lo, hi) = leg.limits();
        let extra = leg.extra_rows().clone();
        assert_eq!(extra.nrows(), 1);
        let mut worst = 0.0f64;
        let steps = [-1.0, -0.5, 0.0, 0.5, 1.0];
        for dx in steps {
            for dy in steps {
                for dz in steps {
                    let target = home + Vec3::new(dx, dy, dz) * 0.04;
                    let q = legs
                        .solve(&r.model, i, &target, &nominal, &mut scratch)
                        .unwrap_or_else(|e| panic!("{foot} at {target}: {e}"));
                    let err = (cairn_fk(&foot, &q) - target).norm();
                    worst = worst.max(err);
                    assert!(err < 1e-6, "{foot}: FK(IK) off by {err}");
                    for k in 0..4 {
                        assert!(
                            q[k] >= lo[k] - 1e-9 && q[k] <= hi[k] + 1e-9,
                            "{foot}: {q:?}"
                        );
                    }
                    // The direction the leg leaves free holds its nominal value.
                    let held: f64 = (0..4).map(|c| extra[(0, c)] * (q[c] - nominal[c])).sum();
                    assert!(held.abs() < 1e-9, "{foot}: extra row off by {held}");
                }
            }
        }
        // Warm-started along a line (as the planner does from knot to knot), the angles move
        // smoothly: no step larger than a few times the target's step over the leg's reach.
        let mut prev = nominal.clone();
        let mut largest = 0.0f64;
        for k in 0..=200 {
            let s = k as f64 / 200.0;
            let target = home + Vec3::new(0.06 * s - 0.03, -0.03 + 0.05 * s, 0.02 * s);
            let q = legs
                .solve(&r.model, i, &target, &prev, &mut scratch)
                .unwrap_or_else(|e| panic!("{foot} at {target}: {e}"));
            if k > 0 {
                largest = largest.max((0..4).map(|c| (q[c] - prev[c]).abs()).fold(0.0, f64::max));
            }
            prev = q;
        }
        assert!(
            largest < 0.01,
            "{foot}: a joint jumps {largest} rad between close targets"
        );
        println!(
            "cairn {foot}: worst |FK(IK(p)) − p| = {worst:.1e} m, largest step {largest:.2e} rad"
        );
    }
    println!(
        "numeric solves {}, Levenberg–Marquardt iterations {} ({:.1} per solve)",
        scratch.numeric_solves,
        scratch.numeric_iterations,
        scratch.numeric_iterations as f64 / scratch.numeric_solves.max(1) as f64
    );
}

/// yarrow with the knee of its fore-left leg welded: that leg has two joints.
fn two_joint_robot(dir: &Path) -> PathBuf {
    let urdf = std::fs::read_to_string(root().join("scenarios/robots/yarrow.urdf")).unwrap();
    let welded = urdf.replace(
        r#"<joint name="fl_knee" type="revolute">"#,
        r#"<joint name="fl_knee" type="fixed">"#,
    );
    assert_ne!(urdf, welded);
    std::fs::write(dir.join("yarrow.urdf"), welded).unwrap();
    let facts = std::fs::read_to_string(root().join("scenarios/robots/yarrow.toml")).unwrap();
    let facts: String = facts
        .lines()
        .filter(|l| !l.starts_with("fl_knee"))
        .map(|l| format!("{l}\n"))
        .collect();
    let path = dir.join("two-joint.toml");
    std::fs::write(&path, facts).unwrap();
    path
}

#[test]
fn a_two_joint_leg_is_refused_with_the_reason() {
    let dir = scratch("two_joint");
    let robot = two_joint_robot(&dir);
    let shown = robot.display().to_string();
    let out = gripsweep(&["robot", &shown]);
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{err}");
    assert!(out.stdout.is_empty());
    for part in [
        shown.as_str(),
        "foot 'fl_toe'",
        "2 moving joints",
        "fl_yaw, fl_lift",
        "at least 3",
        "point foot has three coordinates",
    ] {
        assert!(err.contains(part), "missing {part:?} in: {err}");
    }
    // `check` refuses a scenario naming it, with the same reason and the robot file named.
    let scenario = dir.join("two-joint-scenario.toml");
    std::fs::write(
        &scenario,
        "name = \"two-joint\"\nrobot = \"two-joint.toml\"\nduration = 9.0\n[gait]\nkind = \"crawl\"\n[axes]\ncontroller = [\"force-cost-id\"]\n",
    )
    .unwrap();
    let out = gripsweep(&["check", &scenario.display().to_string()]);
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{err}");
    for part in [
        "two-joint.toml",
        "foot 'fl_toe'",
        "2 moving joints",
        "point foot",
    ] {
        assert!(err.contains(part), "missing {part:?} in: {err}");
    }
}

fn default_crawl(h: f64) -> Gait {
    Gait::Crawl {
        step_length: h / 5.0,
        swing_height: h / 6.0,
        cycle_period: 3.2,
        body_height: h,
        margin: None,
        shift_accel: Some(DEFAULT_SHIFT_ACCEL),
    }
}

#[test]
fn planner_errors_speak_of_the_robot_and_name_a_gait_setting() {
    let r = load("yarrow");
    let h = r.nominal_stance().height;
    let flat = Slope::degrees(0.0);
    let shift = |body_height: f64| {
        Plan::build(
            &r.model,
            &r.facts,
            &flat,
            &Gait::WeightShift {
                amplitude: 0.02,
                period: 2.0,
                body_height,
            },
            3.0,
        )
        .unwrap_err()
        .0
    };
    // A body far above the nominal stance: out of reach at the start, by a stated distance.
    let e = shift(h + 0.5);
    for part in [
        "foot '",
        "at t = 0.0000 s",
        "is out of reach",
        "the leg spans",
        "`gait.body_height` nearer the robot's nominal stance height",
    ] {
        assert!(e.contains(part), "missing {part:?} in: {e}");
    }
    // 0.2 m above: within reach, but the knee would have to bend past its limit; the joint,
    // the angle and the excess are named.
    let e = shift(h + 0.2);
    for part in [
        "at t = 0.0000 s",
        "joint '",
        "_knee' = ",
        "outside its limits [-0.6, 2.4] by ",
        "`gait.body_height`",
    ] {
        assert!(e.contains(part), "missing {part:?} in: {e}");
    }
    // A step far too long: the swinging foot leaves the leg's reach or a joint's range; the
    // message says which and by how much, and names swing height or step length.
    let mut long = default_crawl(h);
    if let Gait::Crawl { step_length, .. } = &mut long {
        *step_length = 0.4;
    }
    let e = Plan::build(&r.model, &r.facts, &flat, &long, 12.0)
        .unwrap_err()
        .0;
    assert!(e.starts_with("foot '") && e.contains(" s ("), "{e}");
    assert!(
        (e.contains("out of reach by") && e.contains(" m"))
            || (e.contains("outside its limits") && e.contains(" rad ("))
            || e.contains("singular"),
        "{e}"
    );
    assert!(e.contains("`gait.step_length` (now 0.4000 m)"), "{e}");
    println!("{e}");
    // Through `check`: the robot file is named; the scenario's gait and duration are not
    // blamed wholesale.
    let dir = scratch("errors");
    let scenario = dir.join("long-step.toml");
    std::fs::write(
        &scenario,
        format!(
            "name = \"long-step\"\nrobot = \"{}\"\nduration = 12.0\n[gait]\nkind = \"crawl\"\nstep_length = 0.4\n[axes]\ncontroller = [\"force-cost-id\"]\n",
            root().join("scenarios/robots/yarrow.toml").display()
        ),
    )
    .unwrap();
    let out = gripsweep(&["check", &scenario.display().to_string()]);
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{err}");
    assert!(
        err.contains("robots/yarrow.toml") && err.contains("foot '"),
        "{err}"
    );
    assert!(!err.contains("fields `gait` and `duration`"), "{err}");
}

#[test]
fn new_robots_stand_shift_and_crawl_and_a_model_based_law_holds_the_crawl() {
    let flat = Slope::degrees(0.0);
    for (name, law, duration) in [
        ("yarrow", "force-cost-id", 9.0),
        ("cairn", "force-cost-id", 5.0),
    ] {
        let r = load(name);
        let h = r.nominal_stance().height;
        // The robot command's stance check passes.
        let check = gripsweep::robot::stance_check(&r.model, &r.facts)
            .unwrap_or_else(|e| panic!("{name}: {e}"));
        assert_eq!(check.legs.len(), r.facts.feet.frames.len());
        for gait in [
            Gait::Stand,
            Gait::WeightShift {
                amplitude: h / 10.0,
                period: 3.0,
                body_height: h,
            },
            default_crawl(h),
        ] {
            Plan::build(&r.model, &r.facts, &flat, &gait, duration)
                .unwrap_or_else(|e| panic!("{name} {gait:?}: {e}"));
        }
        // One cell in the real plant: flat, μ 0.8, 1 kHz, ideal actuators, gains from the
        // tuner.
        let dir = scratch(name);
        let scenario = dir.join("crawl.toml");
        std::fs::write(
            &scenario,
            format!(
                "name = \"{name}-crawl\"\nrobot = \"{}\"\nduration = {duration}\nseeds = 1\n[gait]\nkind = \"crawl\"\n[axes]\nslope_deg = [0.0]\nmu = [0.8]\nrate_hz = [1000.0]\nactuator = [\"ideal\"]\ncontroller = [\"{law}\"]\n",
                root().join(format!("scenarios/robots/{name}.toml")).display()
            ),
        )
        .unwrap();
        let out_dir = dir.join("run");
        let out = gripsweep(&[
            "run",
            &scenario.display().to_string(),
            "--out",
            &out_dir.display().to_string(),
            "--threads",
            "1",
            "--quiet",
        ]);
        assert!(
            out.status.success() || out.status.code() == Some(1),
            "{name}: {}",
            String::from_utf8_lossy(&out.stderr)
        );
        let cells = std::fs::read_to_string(out_dir.join("cells.csv")).unwrap();
        let mut lines = cells.lines();
        let head: Vec<&str> = lines.next().unwrap().split(',').collect();
        let status = head.iter().position(|c| *c == "status").unwrap();
        let row: Vec<&str> = lines.next().expect("one cell").split(',').collect();
        println!("{name} crawl with {law}: {}", row[status]);
        assert_eq!(row[status], "ok", "{name} with {law}: {row:?}");
    }
}

/// yarrow with its fore-left knee folded so the toe sits right under the hip yaw axis: turning
/// the yaw joint no longer moves the foot. `gripsweep robot` refuses it and says why.
#[test]
fn a_foot_under_its_yaw_axis_is_refused_as_a_singular_leg_with_the_reason() {
    let dir = scratch("under_yaw");
    std::fs::copy(
        root().join("scenarios/robots/yarrow.urdf"),
        dir.join("yarrow.urdf"),
    )
    .unwrap();
    // Horizontal reach from the yaw axis: 0.05 + 0.18 cos(lift) − 0.26 sin(lift + knee) = 0.
    let lift: f64 = -0.4;
    let knee = ((Y_HUB + Y_UP * lift.cos()) / Y_LOW).asin() - lift;
    let facts = std::fs::read_to_string(root().join("scenarios/robots/yarrow.toml")).unwrap();
    let facts = facts.replace("fl_knee = 0.4", &format!("fl_knee = {knee}"));
    let path = dir.join("under-yaw.toml");
    std::fs::write(&path, facts).unwrap();
    let out = gripsweep(&["robot", &path.display().to_string()]);
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{err}");
    for part in [
        "under-yaw.toml",
        "the planner cannot serve this robot",
        "foot 'fl_toe'",
        "singular",
        "from the axis of joint 'fl_yaw'",
    ] {
        assert!(err.contains(part), "missing {part:?} in: {err}");
    }
}
