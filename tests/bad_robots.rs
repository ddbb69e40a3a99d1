//! Robots the loader must refuse. Each case breaks one thing in a small valid robot (URDF +
//! robot facts TOML) and checks, through the library and through `gripsweep robot`, that the
//! result is one clear message naming the offending link, joint or field — and never a panic.

use gripsweep_controllers::{Model, RobotFacts, RootKind};
use std::path::{Path, PathBuf};
use std::process::Command;

/// The valid starting point: a hull, one revolute arm, a fixed tip link (the foot).
const PROBE_URDF: &str = r#"<?xml version="1.0"?>
<robot name="probe">
  <link name="hull">
    <inertial><origin xyz="0 0 0"/><mass value="4"/>
      <inertia ixx="0.04" ixy="0" ixz="0" iyy="0.05" iyz="0" izz="0.06"/></inertial>
  </link>
  <joint name="arm_pivot" type="revolute">
    <parent link="hull"/><child link="arm"/>
    <origin xyz="0.1 0 0" rpy="0 0 0"/><axis xyz="0 1 0"/>
    <limit lower="-1" upper="1" effort="10" velocity="5"/>
  </joint>
  <link name="arm">
    <inertial><origin xyz="0 0 -0.1" rpy="0 0 0"/><mass value="0.5"/>
      <inertia ixx="0.002" ixy="0" ixz="0" iyy="0.002" iyz="0" izz="0.0005"/></inertial>
  </link>
  <joint name="tip_mount" type="fixed">
    <parent link="arm"/><child link="tip"/><origin xyz="0 0 -0.2"/>
  </joint>
  <link name="tip"/>
</robot>
"#;

const PROBE_TOML: &str = r#"urdf = "probe.urdf"

[feet]
frames = ["tip"]
radius = 0.01

[actuators]
armature = 0.001
lag = 0.004

[nominal]
arm_pivot = 0.5
"#;

/// `text` with `from` replaced by `to`; the replacement must happen, so a stale pattern cannot
/// turn a case into a test of the valid robot.
fn edit(text: &str, from: &str, to: &str) -> String {
    assert!(text.contains(from), "pattern not found: {from}");
    text.replacen(from, to, 1)
}

fn urdf_edit(from: &str, to: &str) -> String {
    edit(PROBE_URDF, from, to)
}

fn toml_edit(from: &str, to: &str) -> String {
    edit(PROBE_TOML, from, to)
}

const STRAY_LINK: &str = r#"<link name="stray"><inertial><mass value="1"/>
    <inertia ixx="0.1" ixy="0" ixz="0" iyy="0.1" iyz="0" izz="0.1"/></inertial></link>
</robot>"#;
const LOOP_JOINT: &str = r#"<joint name="loop_back" type="fixed">
    <parent link="hull"/><child link="tip"/></joint>
</robot>"#;
const ARM_INERTIAL: &str = r#"<inertial><origin xyz="0 0 -0.1" rpy="0 0 0"/><mass value="0.5"/>
      <inertia ixx="0.002" ixy="0" ixz="0" iyy="0.002" iyz="0" izz="0.0005"/></inertial>"#;

/// (case name, broken URDF, words the message must contain).
fn bad_urdfs() -> Vec<(&'static str, String, Vec<&'static str>)> {
    vec![
        (
            "closed_loop",
            urdf_edit("</robot>", LOOP_JOINT),
            vec!["link 'tip'", "tip_mount", "loop_back", "closed"],
        ),
        (
            "several_roots",
            urdf_edit("</robot>", STRAY_LINK),
            vec!["2 root links", "hull", "stray", "single root"],
        ),
        (
            "planar_joint",
            urdf_edit("type=\"revolute\"", "type=\"planar\""),
            vec![
                "joint 'arm_pivot'",
                "'planar'",
                "not supported",
                "allowed: revolute",
            ],
        ),
        (
            "floating_joint",
            urdf_edit("type=\"revolute\"", "type=\"floating\""),
            vec!["joint 'arm_pivot'", "'floating'", "not supported"],
        ),
        (
            "made_up_joint_type",
            urdf_edit("type=\"revolute\"", "type=\"hinge\""),
            vec![
                "line 7",
                "joint 'arm_pivot'",
                "'hinge'",
                "allowed: revolute",
            ],
        ),
        (
            "missing_inertial",
            urdf_edit(ARM_INERTIAL, ""),
            vec!["link 'arm'", "no mass", "mass > 0"],
        ),
        (
            "zero_mass",
            urdf_edit(
                ARM_INERTIAL,
                r#"<inertial><mass value="0"/><inertia ixx="0" ixy="0" ixz="0" iyy="0" iyz="0" izz="0"/></inertial>"#,
            ),
            vec!["link 'arm'", "no mass"],
        ),
        (
            "inertia_without_mass",
            urdf_edit("<mass value=\"0.5\"/>", "<mass value=\"0\"/>"),
            vec!["link 'arm'", "zero mass"],
        ),
        (
            "negative_mass",
            urdf_edit("<mass value=\"0.5\"/>", "<mass value=\"-0.5\"/>"),
            vec!["link 'arm'", "-0.5", "negative", "mass ≥ 0"],
        ),
        (
            "inertia_not_positive",
            urdf_edit("ixx=\"0.002\" ixy=\"0\"", "ixx=\"0.002\" ixy=\"0.01\""),
            vec!["link 'arm'", "not positive semi-definite"],
        ),
        (
            "triangle_inequality",
            urdf_edit("ixx=\"0.002\" ixy", "ixx=\"0.01\" ixy"),
            vec!["link 'arm'", "triangle inequality"],
        ),
        (
            "nan_in_joint_origin",
            urdf_edit("xyz=\"0.1 0 0\"", "xyz=\"nan 0 0\""),
            vec!["joint 'arm_pivot'", "origin xyz", "non-finite"],
        ),
        (
            "inf_in_joint_rpy",
            urdf_edit("rpy=\"0 0 0\"/><axis", "rpy=\"0 inf 0\"/><axis"),
            vec!["joint 'arm_pivot'", "origin rpy", "non-finite"],
        ),
        (
            "nan_in_inertial_origin",
            urdf_edit("xyz=\"0 0 -0.1\"", "xyz=\"0 NaN -0.1\""),
            vec!["link 'arm'", "<inertial> origin xyz", "non-finite"],
        ),
        (
            "inf_in_inertia",
            urdf_edit("izz=\"0.0005\"", "izz=\"inf\""),
            vec!["link 'arm'", "non-finite"],
        ),
        (
            "zero_axis",
            urdf_edit("<axis xyz=\"0 1 0\"/>", "<axis xyz=\"0 0 0\"/>"),
            vec!["joint 'arm_pivot'", "axis has zero length"],
        ),
        (
            "lower_above_upper",
            urdf_edit("lower=\"-1\" upper=\"1\"", "lower=\"1\" upper=\"-1\""),
            vec!["joint 'arm_pivot'", "lower ≤ upper"],
        ),
        (
            "negative_effort",
            urdf_edit("effort=\"10\"", "effort=\"-10\""),
            vec!["joint 'arm_pivot'", "effort", "≥ 0"],
        ),
        (
            "word_for_a_number",
            urdf_edit("iyy=\"0.002\"", "iyy=\"heavy\""),
            vec!["line 14", "link 'arm'", "iyy=\"heavy\"", "not a number"],
        ),
        (
            "unclosed_document",
            urdf_edit("</robot>", ""),
            vec!["not well-formed XML", "line"],
        ),
        (
            "mismatched_tag",
            urdf_edit("</joint>", "</jiont>"),
            vec!["not well-formed XML", "line 11", "jiont"],
        ),
        (
            "not_xml_at_all",
            "robot: probe\n".to_string(),
            vec!["not well-formed XML", "line 1"],
        ),
    ]
}

/// (case name, broken TOML, words the message must contain). The URDF is the valid probe.
fn bad_facts() -> Vec<(&'static str, String, Vec<&'static str>)> {
    vec![
        (
            "foot_not_a_link",
            toml_edit("frames = [\"tip\"]", "frames = [\"toe\"]"),
            vec!["feet.frames", "'toe'", "not a link", "hull, arm, tip"],
        ),
        (
            "unknown_top_level_field",
            toml_edit("[feet]", "colour = \"red\"\n\n[feet]"),
            vec!["line 3", "unknown field `colour`"],
        ),
        (
            "unknown_foot_field",
            toml_edit("radius = 0.01", "radius = 0.01\nshape = \"ball\""),
            vec!["line 6", "unknown field `shape`", "`frames` or `radius`"],
        ),
        (
            "unknown_actuator_field",
            toml_edit("lag = 0.004", "lagg = 0.004"),
            vec!["actuators.lagg", "allowed:", "lag"],
        ),
        (
            "unknown_override_field",
            toml_edit(
                "[nominal]",
                "[actuators.joints.arm_pivot]\ngain = 2.0\n\n[nominal]",
            ),
            vec!["unknown field `gain`"],
        ),
        (
            "override_of_unknown_joint",
            toml_edit(
                "[nominal]",
                "[actuators.joints.elbow]\nlag = 0.01\n\n[nominal]",
            ),
            vec![
                "actuators.joints.elbow",
                "no such moving joint",
                "arm_pivot",
            ],
        ),
        (
            "nominal_outside_limits",
            toml_edit("arm_pivot = 0.5", "arm_pivot = 1.5"),
            vec!["nominal.arm_pivot", "1.5", "outside", "[-1, 1]"],
        ),
        (
            "nominal_not_finite",
            toml_edit("arm_pivot = 0.5", "arm_pivot = nan"),
            vec!["nominal.arm_pivot", "NaN"],
        ),
        (
            "nominal_of_unknown_joint",
            toml_edit("arm_pivot = 0.5", "elbow = 0.5"),
            vec!["nominal.elbow", "no such moving joint"],
        ),
        (
            "negative_radius",
            toml_edit("radius = 0.01", "radius = -0.01"),
            vec!["feet.radius", "> 0"],
        ),
        (
            "negative_armature",
            toml_edit("armature = 0.001", "armature = -0.001"),
            vec!["armature", "arm_pivot", "≥ 0"],
        ),
        (
            "no_feet",
            toml_edit("frames = [\"tip\"]", "frames = []"),
            vec!["feet.frames", "empty"],
        ),
        (
            "missing_feet_table",
            toml_edit("[feet]\nframes = [\"tip\"]\nradius = 0.01\n", ""),
            vec!["missing field `feet`"],
        ),
        (
            "wrong_type",
            toml_edit("radius = 0.01", "radius = \"small\""),
            vec!["line 5", "invalid type", "string"],
        ),
        (
            "malformed_toml",
            toml_edit("[feet]", "[feet"),
            vec!["line 3"],
        ),
    ]
}

#[test]
fn the_probe_robot_itself_loads() {
    let model = Model::from_urdf_str(PROBE_URDF, RootKind::Floating).unwrap();
    assert_eq!(model.joint_names(), vec!["arm_pivot"]);
    let facts = RobotFacts::from_toml_str(PROBE_TOML).unwrap();
    facts.validate(&model).unwrap();
    let dir = scratch("valid");
    let (toml, _) = write_robot(&dir, "probe", PROBE_URDF, PROBE_TOML);
    // The model and facts are valid (above); the `robot` command also runs the planner's
    // stance check, which refuses a one-joint leg with the reason (a point foot needs three).
    let out = run_cli(&toml);
    assert_eq!(out.0, Some(2), "{}", out.1);
    assert!(
        out.1.contains("needs at least 3 per leg") && out.1.contains("arm_pivot"),
        "{}",
        out.1
    );
}

#[test]
fn bad_urdfs_give_one_clear_error_from_the_library() {
    for (name, urdf, needles) in bad_urdfs() {
        let message = match Model::from_urdf_str(&urdf, RootKind::Floating) {
            Ok(_) => panic!("{name}: the loader accepted it"),
            Err(e) => e.to_string(),
        };
        check_message(name, &message, &needles);
    }
}

#[test]
fn bad_facts_give_one_clear_error_from_the_library() {
    let model = Model::from_urdf_str(PROBE_URDF, RootKind::Floating).unwrap();
    for (name, toml, needles) in bad_facts() {
        let message = match RobotFacts::from_toml_str(&toml) {
            Err(e) => e,
            Ok(facts) => match facts.validate(&model) {
                Err(e) => e,
                Ok(()) => panic!("{name}: the facts were accepted"),
            },
        };
        check_message(name, &message, &needles);
    }
}

#[test]
fn bad_urdfs_exit_with_code_2_through_the_cli() {
    let dir = scratch("urdf");
    for (name, urdf, needles) in bad_urdfs() {
        let path = dir.join(format!("{name}.urdf"));
        std::fs::write(&path, &urdf).unwrap();
        let shown = path.display().to_string();
        check_cli(name, &shown, &format!("{shown}: "), &needles);
        // The same URDF named by a facts TOML: the message names the URDF, not the TOML.
        let (toml, urdf_path) = write_robot(&dir.join(name), "probe", &urdf, PROBE_TOML);
        check_cli(name, &toml, &format!("{urdf_path}: "), &needles);
    }
}

#[test]
fn bad_facts_exit_with_code_2_through_the_cli() {
    let dir = scratch("facts");
    for (name, toml, needles) in bad_facts() {
        let (path, _) = write_robot(&dir.join(name), name, PROBE_URDF, &toml);
        check_cli(name, &path, &format!("{path}: "), &needles);
    }
    // A facts file whose URDF is missing names the TOML field and the missing file.
    let (path, _) = write_robot(
        &dir.join("absent_urdf"),
        "absent",
        PROBE_URDF,
        &toml_edit("probe.urdf", "nowhere.urdf"),
    );
    check_cli(
        "absent_urdf",
        &path,
        &format!("{path}: "),
        &["field `urdf`", "nowhere.urdf", "cannot read"],
    );
}

fn check_message(name: &str, message: &str, needles: &[&str]) {
    for needle in needles {
        assert!(
            message.contains(needle),
            "{name}: message lacks '{needle}': {message}"
        );
    }
    assert!(
        !message.contains('\n'),
        "{name}: message is not one line: {message}"
    );
}

fn check_cli(name: &str, file: &str, prefix: &str, needles: &[&str]) {
    let (code, stderr, stdout) = run_cli(file);
    assert_eq!(code, Some(2), "{name}: exit code; stderr {stderr}");
    assert!(stdout.is_empty(), "{name}: printed on stdout: {stdout}");
    assert!(
        !stderr.contains("panicked") && !stderr.contains("backtrace"),
        "{name}: {stderr}"
    );
    assert_eq!(stderr.lines().count(), 1, "{name}: not one line: {stderr}");
    let line = stderr.trim_end();
    assert!(
        line.starts_with(&format!("gripsweep: {prefix}")),
        "{name}: message does not start with 'gripsweep: {prefix}': {line}"
    );
    check_message(name, line, needles);
}

fn run_cli(file: &str) -> (Option<i32>, String, String) {
    let out = Command::new(env!("CARGO_BIN_EXE_gripsweep"))
        .args(["robot", file])
        .output()
        .expect("the gripsweep binary runs");
    (
        out.status.code(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
        String::from_utf8_lossy(&out.stdout).into_owned(),
    )
}

fn scratch(test: &str) -> PathBuf {
    let dir = Path::new(env!("CARGO_TARGET_TMPDIR"))
        .join("bad_robots")
        .join(test);
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

/// Writes `<dir>/probe.urdf` and `<dir>/<stem>.toml`; returns both paths as shown in messages
/// (the URDF as the CLI joins it to the TOML's folder).
fn write_robot(dir: &Path, stem: &str, urdf: &str, toml: &str) -> (String, String) {
    std::fs::create_dir_all(dir).unwrap();
    let urdf_path = dir.join("probe.urdf");
    std::fs::write(&urdf_path, urdf).unwrap();
    let toml_path = dir.join(format!("{stem}.toml"));
    std::fs::write(&toml_path, toml).unwrap();
    (
        toml_path.display().to_string(),
        urdf_path.display().to_string(),
    )
}
