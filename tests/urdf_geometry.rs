//! What the URDF carries beyond the model (issue 12 parts 4 and 5): collision meshes as convex
//! hulls (their extent against the files' own bounding boxes, read here without the loader's
//! crates), a missing mesh said once, `<dynamics>` friction and its precedence, a foot radius
//! that disagrees with the URDF refused, a mesh trunk on the ground ending a cell as `fell`, and
//! a bare URDF that runs a study.

use gripsweep::cell::{CellContext, run_cell};
use gripsweep::matrix::Cell;
use gripsweep::metrics::CellStatus;
use gripsweep::plant::actuator::ActuatorKind;
use gripsweep::robot::LoadedRobot;
use gripsweep::scenario::Scenario;
use std::path::{Path, PathBuf};
use std::process::Command;

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

fn scratch(test: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("gripsweep-urdf-{test}-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    d
}

fn gripsweep(args: &[&str]) -> (Option<i32>, String, String) {
    let out = Command::new(env!("CARGO_BIN_EXE_gripsweep"))
        .args(args)
        .output()
        .unwrap();
    (
        out.status.code(),
        String::from_utf8_lossy(&out.stdout).into_owned(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

/// Bounding box of a binary STL, read by the format's definition (80-byte header, a u32
/// count, then 50 bytes per triangle: normal, three vertices as little-endian f32, 2 bytes).
fn binary_stl_box(path: &Path) -> ([f64; 3], [f64; 3]) {
    let b = std::fs::read(path).unwrap();
    let n = u32::from_le_bytes(b[80..84].try_into().unwrap()) as usize;
    assert_eq!(b.len(), 84 + 50 * n, "a binary STL");
    let mut pts = Vec::new();
    for t in 0..n {
        for v in 0..3 {
            let at = 84 + 50 * t + 12 + 12 * v;
            let c = |i: usize| {
                f64::from(f32::from_le_bytes(
                    b[at + 4 * i..at + 4 * i + 4].try_into().unwrap(),
                ))
            };
            pts.push([c(0), c(1), c(2)]);
        }
    }
    bbox(&pts)
}

/// Bounding box of the `v x y z` lines of an OBJ file, or the `vertex x y z` lines of an ASCII STL.
fn text_box(path: &Path, key: &str) -> ([f64; 3], [f64; 3]) {
    let text = std::fs::read_to_string(path).unwrap();
    let pts: Vec<[f64; 3]> = text
        .lines()
        .filter_map(|l| {
            let mut it = l.split_whitespace();
            (it.next() == Some(key)).then(|| {
                let v: Vec<f64> = it.map(|x| x.parse().unwrap()).collect();
                [v[0], v[1], v[2]]
            })
        })
        .collect();
    assert!(!pts.is_empty());
    bbox(&pts)
}

fn bbox(pts: &[[f64; 3]]) -> ([f64; 3], [f64; 3]) {
    let mut lo = [f64::INFINITY; 3];
    let mut hi = [f64::NEG_INFINITY; 3];
    for p in pts {
        for i in 0..3 {
            lo[i] = lo[i].min(p[i]);
            hi[i] = hi[i].max(p[i]);
        }
    }
    (lo, hi)
}

fn assert_box(what: &str, got: ([f64; 3], [f64; 3]), want: ([f64; 3], [f64; 3])) {
    for i in 0..3 {
        // The files hold f32 (STL) or 6 significant digits (OBJ, ASCII STL).
        assert!(
            (got.0[i] - want.0[i]).abs() < 1e-6 && (got.1[i] - want.1[i]).abs() < 1e-6,
            "{what}: hull box {got:?}, file box {want:?}"
        );
    }
}

fn hull_box(robot: &LoadedRobot, link: &str) -> ([f64; 3], [f64; 3]) {
    let m = robot
        .meshes
        .iter()
        .find(|m| m.link == link)
        .unwrap_or_else(|| panic!("{link} has a loaded mesh"));
    bbox(&m.hull)
}

#[test]
fn collision_meshes_load_as_hulls_with_the_files_extent() {
    let robot = LoadedRobot::from_facts_file(&root().join("scenarios/robots/dray.toml")).unwrap();
    assert!(
        robot.missing_meshes.is_empty(),
        "{:?}",
        robot.missing_meshes
    );
    // Trunk (binary STL, relative path), 4 thighs (OBJ, package://), 4 shanks (ASCII STL).
    assert_eq!(robot.meshes.len(), 9);
    let meshes = root().join("scenarios/robots/meshes");
    let trunk_box = binary_stl_box(&meshes.join("dray_trunk.stl"));
    assert_box("trunk", hull_box(&robot, "trunk"), trunk_box);
    // The generator's figures: a 0.80 x 0.40 x 0.18 m box.
    assert_box("trunk", trunk_box, ([-0.4, -0.2, -0.09], [0.4, 0.2, 0.09]));
    assert_box(
        "thigh",
        hull_box(&robot, "fl_thigh"),
        text_box(&meshes.join("dray_thigh.obj"), "v"),
    );
    assert_box(
        "shank",
        hull_box(&robot, "hr_shank"),
        text_box(&meshes.join("dray_shank.stl"), "vertex"),
    );
    // The URDF's scale, by an absolute path this time.
    let dir = scratch("scale");
    let urdf = std::fs::read_to_string(root().join("scenarios/robots/brindle.urdf"))
        .unwrap()
        .replace(
            "<!-- COM deliberately",
            &format!(
                "<collision><geometry><mesh filename=\"file://{}\" scale=\"0.5 2 -1\"/></geometry></collision>\n    <!-- COM deliberately",
                meshes.join("dray_trunk.stl").display()
            ),
        );
    std::fs::write(dir.join("scaled.urdf"), urdf).unwrap();
    let facts = std::fs::read_to_string(root().join("scenarios/robots/brindle.toml"))
        .unwrap()
        .replace("brindle.urdf", "scaled.urdf");
    std::fs::write(dir.join("scaled.toml"), facts).unwrap();
    let scaled = LoadedRobot::from_facts_file(&dir.join("scaled.toml")).unwrap();
    assert_box(
        "scaled trunk",
        hull_box(&scaled, "trunk"),
        ([-0.2, -0.4, -0.09], [0.2, 0.4, 0.09]),
    );
}

#[test]
fn a_missing_mesh_is_said_once_naming_the_link_and_in_the_manifest() {
    let dir = scratch("missing");
    let urdf = std::fs::read_to_string(root().join("scenarios/robots/brindle.urdf"))
        .unwrap()
        .replace(
            "<!-- COM deliberately",
            "<collision><geometry><mesh filename=\"package://nowhere/shell.stl\"/></geometry></collision>\n    <!-- COM deliberately",
        );
    std::fs::write(dir.join("holey.urdf"), urdf).unwrap();
    let facts = std::fs::read_to_string(root().join("scenarios/robots/brindle.toml"))
        .unwrap()
        .replace("brindle.urdf", "holey.urdf");
    std::fs::write(dir.join("holey.toml"), facts).unwrap();
    // One cell, gains pinned (no tuning), half a second standing.
    std::fs::write(
        dir.join("s.toml"),
        "name = \"holey\"\nrobot = \"holey.toml\"\nduration = 0.5\n[gait]\nkind = \"stand\"\n[laws.stiff-pd]\nkp = 20000.0\nkd = 30.0\n[axes]\ncontroller = [\"stiff-pd\"]\n",
    )
    .unwrap();
    let out = dir.join("out");
    let (code, _, err) = gripsweep(&[
        "run",
        dir.join("s.toml").to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "--quiet",
    ]);
    assert_eq!(code, Some(0), "{err}");
    assert_eq!(err.matches("not loaded").count(), 1, "said once: {err}");
    assert!(err.contains("links left without that collision") && err.contains("trunk"));
    let manifest: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("manifest.json")).unwrap()).unwrap();
    let w = manifest["collision_warning"].as_str().unwrap();
    assert!(
        w.contains("trunk") && w.contains("package://nowhere/shell.stl"),
        "{w}"
    );
    assert!(manifest["inputs"]["collision_meshes"]["sha256"].is_string());
    // The robot command says it too.
    let (code, _, err) = gripsweep(&["robot", dir.join("holey.toml").to_str().unwrap()]);
    assert_eq!(code, Some(0));
    assert_eq!(err.matches("not loaded").count(), 1, "{err}");
}

#[test]
fn urdf_dynamics_feeds_joint_friction_below_what_the_facts_say() {
    // fl_swing and fl_knee get <dynamics>; brindle's facts set coulomb 0.4 / viscous 0.03 for
    // every joint and coulomb 0.6 on the knees.
    let dynamics = "<axis xyz=\"0 1 0\"/>\n    <dynamics damping=\"0.07\" friction=\"0.9\"/>";
    let urdf = std::fs::read_to_string(root().join("scenarios/robots/brindle.urdf"))
        .unwrap()
        .replacen("<axis xyz=\"0 1 0\"/>", dynamics, 2);
    let facts_text = std::fs::read_to_string(root().join("scenarios/robots/brindle.toml")).unwrap();
    let load = |facts: &str| LoadedRobot::from_texts("f.toml", facts, "r.urdf", &urdf).unwrap();
    let c_v = |r: &LoadedRobot, j: &str| {
        let p = r.facts.actuator(j);
        (p.coulomb, p.viscous)
    };
    // Facts as shipped: the facts win everywhere (default on fl_swing, the knee's own table).
    let r = load(&facts_text);
    assert_eq!(c_v(&r, "fl_swing"), (0.4, 0.03));
    assert_eq!(c_v(&r, "fl_knee"), (0.6, 0.03));
    // Without the facts' defaults: the URDF's values, except the knee's own coulomb.
    let no_defaults = facts_text
        .replace("coulomb = 0.4 ", "# ")
        .replace("viscous = 0.03 ", "# ");
    let r = load(&no_defaults);
    assert_eq!(
        c_v(&r, "fl_swing"),
        (0.9, 0.07),
        "URDF under no facts value"
    );
    assert_eq!(c_v(&r, "fl_knee"), (0.6, 0.07), "joint table over URDF");
    assert_eq!(
        c_v(&r, "fr_swing"),
        (0.0, 0.0),
        "no <dynamics>, no facts: none"
    );
    // A negative value in the URDF is refused, naming the joint.
    let bad = urdf.replacen("damping=\"0.07\"", "damping=\"-1\"", 1);
    let e = LoadedRobot::from_texts("f.toml", &facts_text, "r.urdf", &bad).unwrap_err();
    assert!(
        e.contains("r.urdf") && e.contains("fl_swing") && e.contains("damping"),
        "{e}"
    );
    // The demo robots carry no <dynamics>: their results do not move.
    for name in ["brindle", "tamber", "skitter"] {
        let text =
            std::fs::read_to_string(root().join(format!("scenarios/robots/{name}.urdf"))).unwrap();
        assert!(!text.contains("<dynamics"), "{name}");
    }
}

#[test]
fn a_foot_radius_unlike_the_urdf_sphere_is_refused_with_both_values() {
    let dir = scratch("radius");
    std::fs::copy(
        root().join("scenarios/robots/brindle.urdf"),
        dir.join("brindle.urdf"),
    )
    .unwrap();
    let facts = std::fs::read_to_string(root().join("scenarios/robots/brindle.toml"))
        .unwrap()
        .replace("radius = 0.02 ", "radius = 0.025 ");
    let path = dir.join("wide-feet.toml");
    std::fs::write(&path, facts).unwrap();
    let (code, out, err) = gripsweep(&["robot", path.to_str().unwrap()]);
    assert_eq!(code, Some(2), "{err}");
    assert!(out.is_empty());
    assert_eq!(err.lines().count(), 1, "{err}");
    for needle in [
        "wide-feet.toml",
        "feet.radius",
        "0.025",
        "0.02 m",
        "fl_toe",
        "brindle.urdf",
    ] {
        assert!(err.contains(needle), "{needle} in {err}");
    }
    // The library refuses it too (every command loads through it).
    let e = LoadedRobot::from_facts_file(&path).unwrap_err();
    assert!(e.contains("0.025") && e.contains("0.02 m"), "{e}");
}

fn cell(controller: &str) -> Cell {
    Cell::probe(0.8, 1000.0, ActuatorKind::Ideal, controller).set("slope_deg", 0.0)
}

#[test]
fn a_mesh_trunk_on_the_ground_ends_the_cell_as_fell() {
    // brindle with a chamfered-box trunk mesh (tests/robots/boxy_trunk.stl, 0.40 x 0.24 x
    // 0.10 m) and legs too weak to stand (stiff PD at kp 1, kd 0.1): it sinks until something
    // touches. The height and tilt criteria are switched off, so only a touch ends the cell.
    let dir = scratch("boxy");
    let urdf = std::fs::read_to_string(root().join("scenarios/robots/brindle.urdf"))
        .unwrap()
        .replace(
            "<!-- COM deliberately",
            &format!(
                "<collision><geometry><mesh filename=\"{}\"/></geometry></collision>\n    <!-- COM deliberately",
                root().join("tests/robots/boxy_trunk.stl").display()
            ),
        );
    std::fs::write(dir.join("boxy.urdf"), &urdf).unwrap();
    let facts = std::fs::read_to_string(root().join("scenarios/robots/brindle.toml"))
        .unwrap()
        .replace("brindle.urdf", "boxy.urdf");
    std::fs::write(dir.join("boxy.toml"), &facts).unwrap();
    let text = "name = \"sink\"\nrobot = \"boxy.toml\"\nduration = 3.0\n[gait]\nkind = \"stand\"\n[laws.stiff-pd]\nkp = 1.0\nkd = 0.1\n[falls]\nmin_height_share = 0.001\nmax_tilt_deg = 89.0\n";
    let s = Scenario::from_text("sink.toml", text, Some(&dir)).unwrap();
    let robot = s.load_robot().unwrap();
    assert_eq!(robot.meshes.len(), 1);
    let out = run_cell(
        &CellContext {
            scenario: &s,
            robot: &robot,
        },
        &cell("stiff-pd"),
        None,
    );
    eprintln!("mesh trunk: {} — {}", out.status.name(), out.message);
    assert_eq!(out.status, CellStatus::Fell, "{}", out.message);
    assert!(
        out.message.contains("other than a foot touched the ground"),
        "{}",
        out.message
    );
    // Without the mesh the same robot sinks through: nothing else of brindle's collides, so
    // the cell does not end by a touch.
    let bare = urdf.replace("boxy_trunk.stl", "no_such_file.stl");
    std::fs::write(dir.join("boxy.urdf"), bare).unwrap();
    let robot = s.load_robot_quietly().unwrap();
    assert!(robot.meshes.is_empty() && robot.missing_meshes.len() == 1);
    let out = run_cell(
        &CellContext {
            scenario: &s,
            robot: &robot,
        },
        &cell("stiff-pd"),
        None,
    );
    eprintln!("no trunk mesh: {} — {}", out.status.name(), out.message);
    assert!(
        !out.message.contains("other than a foot touched"),
        "{}",
        out.message
    );
}

#[test]
fn a_bare_urdf_runs_a_study_and_its_draft_facts_load() {
    let dir = scratch("bare");
    std::fs::copy(
        root().join("scenarios/robots/tamber.urdf"),
        dir.join("bare.urdf"),
    )
    .unwrap();
    // The draft facts: feet and radius inferred, a posture with the feet below the hips.
    let (code, draft, err) = gripsweep(&[
        "robot",
        dir.join("bare.urdf").to_str().unwrap(),
        "--draft-facts",
    ]);
    assert_eq!(code, Some(0), "{err}");
    let facts = gripsweep_controllers::RobotFacts::from_toml_str(&draft).unwrap();
    let tamber =
        LoadedRobot::from_facts_file(&root().join("scenarios/robots/tamber.toml")).unwrap();
    assert_eq!(facts.feet.frames, tamber.facts.feet.frames);
    assert_eq!(facts.feet.radius, tamber.facts.feet.radius);
    std::fs::write(dir.join("saved.toml"), &draft).unwrap();
    let saved = LoadedRobot::from_facts_file(&dir.join("saved.toml")).unwrap();
    let st = saved.nominal_stance();
    eprintln!(
        "inferred stance height {:.4} m, feet {:?}",
        st.height, st.feet
    );
    assert!(st.height > 0.1, "{}", st.height);
    // A scenario names the URDF itself; one stand cell with pinned gains runs.
    std::fs::write(
        dir.join("s.toml"),
        "name = \"bare\"\nrobot = \"bare.urdf\"\nduration = 2.0\n[gait]\nkind = \"stand\"\n[laws.stiff-pd]\nkp = 2000.0\nkd = 10.0\n[axes]\ncontroller = [\"stiff-pd\"]\n",
    )
    .unwrap();
    let out = dir.join("out");
    let (code, _, err) = gripsweep(&[
        "run",
        dir.join("s.toml").to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "--quiet",
    ]);
    assert_eq!(code, Some(0), "{err}");
    assert!(
        err.contains("inferred") && err.contains("--draft-facts"),
        "{err}"
    );
    let cells = std::fs::read_to_string(out.join("cells.csv")).unwrap();
    assert_eq!(cells.lines().count(), 2, "{cells}");
    assert!(cells.lines().nth(1).unwrap().contains(",ok,"), "{cells}");
    // Feet named in the scenario must be links with spheres.
    std::fs::write(
        dir.join("t.toml"),
        "name = \"bare\"\nrobot = \"bare.urdf\"\nfeet = [\"trunk\"]\n",
    )
    .unwrap();
    let (code, _, err) = gripsweep(&["check", dir.join("t.toml").to_str().unwrap()]);
    assert_eq!(code, Some(2), "{err}");
    assert!(err.contains("trunk"), "{err}");
}
