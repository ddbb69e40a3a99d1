//! End-to-end runs of `gripsweep robot`: the built binary on the embedded demo, on files, on a
//! state file (its dynamics terms must equal the library's to 1e-12), and on bad state files
//! (exit code 2, one message naming the file and the field, never a panic).

use gripsweep::cli_robot::{self, DEMO_FACTS, DEMO_URDF, RobotArgs};
use gripsweep_controllers::algorithms::{
    Workspace, center_of_mass, crba_after_fk, forward_kinematics, frame_jacobian, frame_pose,
    rnea_after_fk,
};
use gripsweep_controllers::{Model, RobotFacts, RootKind};
use nalgebra::{DMatrix, DVector, Vector4};
use serde_json::{Value, json};
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

fn gripsweep(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_gripsweep"))
        .args(args)
        .current_dir(env!("CARGO_MANIFEST_DIR"))
        .output()
        .expect("the gripsweep binary runs")
}

fn stdout_json(out: &Output) -> Value {
    assert!(
        out.status.success(),
        "exit {:?}, stderr: {}",
        out.status.code(),
        String::from_utf8_lossy(&out.stderr)
    );
    serde_json::from_slice(&out.stdout).expect("stdout is JSON")
}

/// A fresh scratch folder for one test.
fn scratch(test: &str) -> PathBuf {
    let dir = Path::new(env!("CARGO_TARGET_TMPDIR"))
        .join("cli_robot")
        .join(test);
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

fn demo_model() -> Model {
    Model::from_urdf_str(DEMO_URDF, RootKind::Floating).unwrap()
}

/// splitmix64, for a deterministic test state.
struct Rng(u64);
impl Rng {
    fn uniform(&mut self, lo: f64, hi: f64) -> f64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^= z >> 31;
        lo + (hi - lo) * ((z >> 11) as f64 / (1u64 << 53) as f64)
    }
}

fn random_state(model: &Model, seed: u64) -> (DVector<f64>, DVector<f64>, DVector<f64>) {
    let mut rng = Rng(seed);
    let mut q = model.neutral();
    for k in 0..3 {
        q[k] = rng.uniform(-1.0, 1.0);
    }
    let quat = Vector4::from_fn(|_, _| rng.uniform(-1.0, 1.0)).normalize();
    for k in 0..4 {
        q[3 + k] = quat[k];
    }
    for (k, j) in model.joints.iter().enumerate() {
        q[7 + k] = rng.uniform(j.lower, j.upper);
    }
    let v = DVector::from_fn(model.nv(), |_, _| rng.uniform(-2.0, 2.0));
    let a = DVector::from_fn(model.nv(), |_, _| rng.uniform(-2.0, 2.0));
    (q, v, a)
}

fn numbers(v: &Value) -> Vec<f64> {
    v.as_array()
        .expect("an array")
        .iter()
        .map(|x| x.as_f64().expect("a number"))
        .collect()
}

fn max_diff(ours: &[f64], theirs: &[f64]) -> f64 {
    assert_eq!(ours.len(), theirs.len());
    ours.iter()
        .zip(theirs)
        .map(|(a, b)| (a - b).abs())
        .fold(0.0, f64::max)
}

fn write_state(dir: &Path, name: &str, state: &Value) -> String {
    let path = dir.join(name);
    std::fs::write(&path, state.to_string()).unwrap();
    path.display().to_string()
}

#[test]
fn default_robot_is_the_embedded_quadruped() {
    let json = stdout_json(&gripsweep(&["robot", "--json"]));
    assert_eq!(json["dof"], 18);
    assert_eq!(json["nq"], 19);
    assert_eq!(json["name"], "brindle");
    let joints = json["joint_names"].as_array().unwrap();
    assert_eq!(joints.len(), 12);
    assert_eq!(joints[0], "fl_abduct");
    assert_eq!(
        json["feet"],
        json!(["fl_toe", "fr_toe", "hl_toe", "hr_toe"])
    );
    assert_eq!(json["foot_radius"], 0.02);
    assert_eq!(json["frame_names"].as_array().unwrap().len(), 17);
    assert!((json["total_mass"].as_f64().unwrap() - 18.36).abs() < 1e-12);
    assert_eq!(json["armature_in_mass_matrix"], false);
    // The knees carry the per-joint armature override of brindle.toml.
    assert_eq!(json["joints"][2]["name"], "fl_knee");
    assert_eq!(json["joints"][2]["armature"], 0.02);
    assert_eq!(json["joints"][0]["armature"], 0.012);
    assert!(json.get("M").is_none(), "no state, no dynamics terms");

    let human = gripsweep(&["robot"]);
    assert!(human.status.success());
    let text = String::from_utf8(human.stdout).unwrap();
    assert!(text.starts_with("robot 'brindle'"), "{text}");
    assert!(
        text.contains("hr_knee") && text.contains("18.3600 kg"),
        "{text}"
    );
    assert!(text.contains("fl_toe, fr_toe, hl_toe, hr_toe"), "{text}");
}

#[test]
fn nominal_centre_of_mass_is_computed_at_the_facts_posture() {
    let json = stdout_json(&gripsweep(&["robot", "--json"]));
    let model = demo_model();
    let facts = RobotFacts::from_toml_str(DEMO_FACTS).unwrap();
    let mut q = model.neutral();
    for (k, angle) in facts.nominal_joints(&model).into_iter().enumerate() {
        q[7 + k] = angle;
    }
    // serde_json parses floats to within an ulp (no `float_roundtrip` feature).
    assert!(max_diff(&numbers(&json["nominal_q"]), q.as_slice()) < 1e-15);
    let mut ws = Workspace::new(&model);
    forward_kinematics(&model, &mut ws, &q);
    let com = center_of_mass(&model, &ws);
    assert!(max_diff(&numbers(&json["com_nominal"]), com.as_slice()) < 1e-12);
    // Standing on its toes the trunk's COM sits below the trunk frame, legs folded under it.
    assert!(com.z < 0.0);
}

#[test]
fn files_load_by_kind_facts_toml_or_bare_urdf() {
    let toml = stdout_json(&gripsweep(&[
        "robot",
        "--json",
        "scenarios/robots/skitter.toml",
    ]));
    assert_eq!(toml["dof"], 24);
    assert_eq!(toml["feet"].as_array().unwrap().len(), 6);
    let urdf = stdout_json(&gripsweep(&[
        "robot",
        "--json",
        "scenarios/robots/skitter.urdf",
    ]));
    assert_eq!(urdf["dof"], 24);
    assert_eq!(urdf["feet"], json!([]), "a bare URDF names no feet");
    assert_eq!(urdf["foot_radius"], Value::Null);
    assert_eq!(urdf["joints"][0]["armature"], 0.0);
    // The continuous joint has no position limits, which JSON writes as null.
    let yaw = urdf["joints"]
        .as_array()
        .unwrap()
        .iter()
        .find(|j| j["name"] == "r3_yaw")
        .expect("skitter has r3_yaw");
    assert_eq!(yaw["kind"], "continuous");
    assert_eq!(yaw["lower"], Value::Null);
}

#[test]
fn state_output_matches_the_library_to_1e_12() {
    let dir = scratch("state_output");
    let model = demo_model();
    let (q, v, a) = random_state(&model, 42);
    let path = write_state(
        &dir,
        "state.json",
        &json!({"q": q.as_slice(), "v": v.as_slice(), "a": a.as_slice()}),
    );
    let out = stdout_json(&gripsweep(&["robot", "--json", "--state", &path]));

    let nv = model.nv();
    let mut ws = Workspace::new(&model);
    forward_kinematics(&model, &mut ws, &q);
    crba_after_fk(&model, &mut ws);
    let m_rows: Vec<Vec<f64>> = out["M"].as_array().unwrap().iter().map(numbers).collect();
    assert_eq!(m_rows.len(), nv);
    for (r, row) in m_rows.iter().enumerate() {
        let ours: Vec<f64> = (0..nv).map(|c| ws.mass_matrix[(r, c)]).collect();
        assert!(max_diff(row, &ours) <= 1e-12, "M row {r}");
    }
    rnea_after_fk(&model, &mut ws, &v, &DVector::zeros(nv));
    assert!(max_diff(&numbers(&out["h"]), ws.tau.as_slice()) <= 1e-12);
    rnea_after_fk(&model, &mut ws, &v, &a);
    assert!(max_diff(&numbers(&out["rnea"]), ws.tau.as_slice()) <= 1e-12);
    let com = center_of_mass(&model, &ws);
    assert!(max_diff(&numbers(&out["com"]), com.as_slice()) <= 1e-12);

    let frames = out["frames"].as_object().unwrap();
    assert_eq!(frames.len(), model.frames.len());
    let mut jac = DMatrix::zeros(3, nv);
    for (k, f) in model.frames.iter().enumerate() {
        let entry = &frames[&f.name];
        let p = frame_pose(&model, &ws, k).trans;
        assert!(max_diff(&numbers(&entry["position"]), p.as_slice()) <= 1e-12);
        frame_jacobian(&model, &ws, k, &mut jac, 0, false);
        let rows = entry["jacobian"].as_array().unwrap();
        assert_eq!(rows.len(), 3, "translational rows only");
        for (r, row) in rows.iter().enumerate() {
            let ours: Vec<f64> = (0..nv).map(|c| jac[(r, c)]).collect();
            assert!(
                max_diff(&numbers(row), &ours) <= 1e-12,
                "{} row {r}",
                f.name
            );
        }
    }
    // The toe Jacobian is not trivially zero: the toe moves with its own leg's joints.
    let toe = &frames["fl_toe"]["jacobian"][0];
    assert!(numbers(toe)[6..9].iter().any(|x| x.abs() > 1e-3));
}

#[test]
fn armature_enters_m_only_when_asked() {
    let dir = scratch("armature");
    let model = demo_model();
    let (q, v, a) = random_state(&model, 7);
    let path = write_state(
        &dir,
        "state.json",
        &json!({"q": q.as_slice(), "v": v.as_slice(), "a": a.as_slice()}),
    );
    let plain = stdout_json(&gripsweep(&["robot", "--json", "--state", &path]));
    let with = stdout_json(&gripsweep(&[
        "robot",
        "--json",
        "--with-armature",
        "--state",
        &path,
    ]));
    assert_eq!(with["armature_in_mass_matrix"], true);
    let facts = RobotFacts::from_toml_str(DEMO_FACTS).unwrap();
    let nv = model.nv();
    for r in 0..nv {
        for c in 0..nv {
            let d = with["M"][r][c].as_f64().unwrap() - plain["M"][r][c].as_f64().unwrap();
            let expected = if r == c && r >= 6 {
                facts.actuator(&model.joints[r - 6].name).armature
            } else {
                0.0
            };
            assert!((d - expected).abs() < 1e-12, "M[{r}][{c}] changed by {d}");
        }
    }
    assert!(
        max_diff(&numbers(&with["h"]), &numbers(&plain["h"])) < 1e-12,
        "armature does not enter h"
    );
}

#[test]
fn library_entry_point_gives_the_same_output_as_the_binary() {
    let text = cli_robot::run(&RobotArgs {
        json: true,
        ..RobotArgs::default()
    })
    .unwrap();
    let binary = gripsweep(&["robot", "--json"]);
    assert_eq!(text.as_bytes(), binary.stdout.as_slice());
}

/// Runs the binary expecting exit code 2 and a short message on stderr naming every `needle`.
fn assert_rejected(args: &[&str], needles: &[&str]) {
    let out = gripsweep(args);
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{args:?}: stderr {stderr}");
    assert!(out.stdout.is_empty(), "{args:?}: nothing on stdout");
    for needle in needles {
        assert!(
            stderr.contains(needle),
            "{args:?}: stderr lacks '{needle}': {stderr}"
        );
    }
    assert!(!stderr.contains("panicked") && !stderr.contains("backtrace"));
    // Our own messages are one line; clap's usage errors add a usage line and a hint.
    let max_lines = if stderr.starts_with("gripsweep: ") {
        1
    } else {
        8
    };
    assert!(
        stderr.lines().count() <= max_lines,
        "{args:?}: long message {stderr}"
    );
}

#[test]
fn bad_state_files_are_rejected_with_the_file_and_field() {
    let dir = scratch("bad_states");
    let model = demo_model();
    let (q, v, a) = random_state(&model, 3);
    let (q, v, a) = (q.as_slice(), v.as_slice(), a.as_slice());
    let cases: Vec<(&str, String, Vec<&str>)> = vec![
        (
            "short_q.json",
            json!({"q": &q[..18], "v": v, "a": a}).to_string(),
            vec!["field \"q\"", "18 entries", "needs 19"],
        ),
        (
            "long_v.json",
            json!({"q": q, "v": ([v, &[0.0][..]].concat()), "a": a}).to_string(),
            vec!["field \"v\"", "19 entries", "needs 18"],
        ),
        (
            "missing_a.json",
            json!({"q": q, "v": v}).to_string(),
            vec!["missing field \"a\""],
        ),
        (
            "string_entry.json",
            json!({"q": q, "v": v, "a": ([&[json!("fast")][..], &vec![json!(0.0); 17]].concat())})
                .to_string(),
            vec!["field \"a\" entry 0", "finite number"],
        ),
        (
            "nan.json",
            format!(
                "{{\"q\": {}, \"v\": [NaN{}], \"a\": {}}}",
                json!(q),
                ", 0".repeat(17),
                json!(a)
            ),
            vec!["not readable JSON", "line 1"],
        ),
        (
            "overflow.json",
            format!(
                "{{\"q\": {}, \"v\": [1e999{}], \"a\": {}}}",
                json!(q),
                ", 0".repeat(17),
                json!(a)
            ),
            vec!["not readable JSON"],
        ),
        (
            "not_json.json",
            "q = [0, 0, 0]".to_string(),
            vec!["not readable JSON"],
        ),
        (
            "array.json",
            "[1, 2, 3]".to_string(),
            vec!["expected a JSON object"],
        ),
        (
            "not_array.json",
            json!({"q": q, "v": 3.0, "a": a}).to_string(),
            vec!["field \"v\" is not an array"],
        ),
        (
            "unknown.json",
            json!({"q": q, "v": v, "a": a, "qdd": a}).to_string(),
            vec!["unknown field \"qdd\""],
        ),
        (
            "quaternion.json",
            json!({"q": ([&q[..3], &[0.0, 0.0, 0.0, 0.5], &q[7..]].concat()), "v": v, "a": a})
                .to_string(),
            vec!["field \"q\" entries 3..7", "unit quaternion"],
        ),
    ];
    for (name, text, needles) in cases {
        let path = dir.join(name);
        std::fs::write(&path, text).unwrap();
        let shown = path.display().to_string();
        let mut all = needles.clone();
        all.push(&shown);
        assert_rejected(&["robot", "--json", "--state", &shown], &all);
    }
    let missing = dir.join("absent.json").display().to_string();
    assert_rejected(
        &["robot", "--json", "--state", &missing],
        &[&missing, "cannot read"],
    );
}

#[test]
fn bad_invocations_exit_with_code_2() {
    let dir = scratch("bad_invocations");
    // --state without --json is a usage error (clap's own, also code 2).
    let state = write_state(&dir, "s.json", &json!({"q": [], "v": [], "a": []}));
    assert_rejected(&["robot", "--state", &state], &["--json"]);
    assert_rejected(
        &["robot", "no/such/robot.toml"],
        &["no/such/robot.toml", "cannot read"],
    );
    let odd = dir.join("robot.yaml");
    std::fs::write(&odd, "name: x").unwrap();
    let odd = odd.display().to_string();
    assert_rejected(&["robot", &odd], &[&odd, "allowed", ".toml", ".urdf"]);
    assert_rejected(
        &["robot", "--with-armature", "scenarios/robots/brindle.urdf"],
        &["--with-armature", "robot facts"],
    );
    assert_rejected(&["robot", "--no-such-flag"], &["--no-such-flag"]);
}
