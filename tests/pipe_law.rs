//! Piped laws (harness/src/pipe_law.rs, docs/pipe-protocol.md): the Python example controller
//! runs a small study end to end, bit-identical across runs and thread counts; a program that
//! sleeps past its time-out, exits mid-cell or writes garbage ends its cell with `error` and a
//! clear message while the run completes; no child process outlives the run; a missing program
//! is refused at `check`; a changed program is refused on `--resume`. Needs `python3` with
//! numpy (the CI script installs it).

use gripsweep::controllers::algorithms::{Workspace, frame_pose, rnea};
use gripsweep::controllers::laws::{ControlLaw, LawSettings, Observation, Target};
use gripsweep::pipe_law::{CellInfo, Session, parse_external};
use gripsweep::robot::LoadedRobot;
use nalgebra::DVector;
use std::path::{Path, PathBuf};
use std::process::Command;
use std::sync::Mutex;

/// The tests look at this process's children in /proc, so they run one at a time.
static SERIAL: Mutex<()> = Mutex::new(());

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

fn example_controller() -> String {
    root()
        .join("examples/python-pipe-law/controller.py")
        .display()
        .to_string()
}

fn temp(name: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("gripsweep-pipe-{}-{name}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    d
}

fn bin() -> Command {
    Command::new(env!("CARGO_BIN_EXE_gripsweep"))
}

/// Processes whose command line holds `tag` (our children are started with `--tag <tag>`).
fn tagged_processes(tag: &str) -> Vec<String> {
    let mut found = Vec::new();
    for e in std::fs::read_dir("/proc").unwrap().flatten() {
        let name = e.file_name().to_string_lossy().to_string();
        if !name.chars().all(|c| c.is_ascii_digit()) {
            continue;
        }
        if let Ok(cmd) = std::fs::read(e.path().join("cmdline")) {
            let cmd = String::from_utf8_lossy(&cmd).replace('\0', " ");
            if cmd.contains(tag) {
                found.push(format!("{name}: {cmd}"));
            }
        }
    }
    found
}

/// Children of this process (alive or zombie), from /proc/<pid>/stat (field 4 is the parent).
fn own_children() -> Vec<String> {
    let me = std::process::id().to_string();
    let mut found = Vec::new();
    for e in std::fs::read_dir("/proc").unwrap().flatten() {
        let Ok(stat) = std::fs::read_to_string(e.path().join("stat")) else {
            continue;
        };
        // "pid (comm) state ppid ...": comm may hold spaces, so split after the last ')'.
        let Some(close) = stat.rfind(')') else {
            continue;
        };
        let rest: Vec<&str> = stat[close + 1..].split_whitespace().collect();
        if rest.len() > 1 && rest[1] == me {
            found.push(stat.chars().take(80).collect());
        }
    }
    found
}

fn read_cells(dir: &Path) -> Vec<std::collections::HashMap<String, String>> {
    let mut r = csv::Reader::from_path(dir.join("cells.csv")).unwrap();
    let head = r.headers().unwrap().clone();
    r.records()
        .map(|rec| {
            let rec = rec.unwrap();
            head.iter()
                .zip(rec.iter())
                .map(|(h, v)| (h.to_string(), v.to_string()))
                .collect()
        })
        .collect()
}

/// The Python example's model (its own kinematics from the HELLO and CELL messages) gives the
/// harness's g(q) and feet positions. Reference: the harness's RNEA and forward kinematics,
/// which tests/pinocchio_reference.rs checks against Pinocchio.
#[test]
fn python_model_from_the_handshake_matches_the_harness_model() {
    let _g = SERIAL.lock().unwrap_or_else(|e| e.into_inner());
    let dir = temp("model");
    let program = root().join("tests/pipe/gravity_check.py");
    let table: toml::Table = toml::from_str(&format!(
        "[check]\nprogram = \"{}\"\nargs = [\"--tag\", \"{}\"]\n",
        program.display(),
        dir.display()
    ))
    .unwrap();
    let laws = parse_external(&table, &dir, &[]).unwrap();
    let robot = LoadedRobot::demo().unwrap();
    let model = &robot.model;
    let feet = robot.foot_frames();
    let settings = LawSettings::default();
    let session = Session {
        model,
        feet: &feet,
        foot_radius: robot.facts.feet.radius,
        dt: 1e-3,
    };
    // The model-error axis: the law's model differs from the plant's (masses scaled, trunk CoM
    // shifted); the CELL message carries it.
    let law_model = gripsweep::cell::controller_model(model, 1.2, 15.0);
    let info = CellInfo {
        cell_id: "check",
        seed: 1,
        rate_hz: 1000.0,
        duration: 1.0,
        model: &law_model,
        settings: &settings,
    };
    let (mut law, probe) = laws[0].start_cell(&session, &info).unwrap();
    let nj = model.n_joints();
    let mut ws = Workspace::new(&law_model);
    for trial in 0..3 {
        let mut q = model.neutral();
        q[0] = 0.1 * trial as f64;
        q[1] = -0.2;
        q[2] = 0.35;
        let quat = nalgebra::UnitQuaternion::from_euler_angles(0.1, -0.2 + 0.1 * trial as f64, 0.3);
        q[3] = quat.i;
        q[4] = quat.j;
        q[5] = quat.k;
        q[6] = quat.w;
        for k in 0..nj {
            q[7 + k] = 0.3 * ((k + trial) as f64 * 1.7).sin();
        }
        let zero_v = DVector::zeros(model.nv());
        let stance = vec![true; feet.len()];
        let mut tau = vec![0.0; nj];
        law.compute(
            &Observation { q: &q, v: &zero_v },
            &Target {
                q: &q,
                v: &zero_v,
                a: &zero_v,
                stance: &stance,
            },
            &mut tau,
        );
        assert!(probe.lock().unwrap().error.is_none(), "{:?}", probe);
        let g = rnea(&law_model, &mut ws, &q, &zero_v, &zero_v).clone();
        for k in 0..nj {
            let r = g[6 + k];
            assert!(
                (tau[k] - r).abs() <= 1e-9 * (1.0 + r.abs()),
                "joint {k}: python g = {}, harness g = {r}",
                tau[k]
            );
        }
        for (i, &f) in feet.iter().enumerate() {
            let p = frame_pose(&law_model, &ws, f).trans;
            let py = law.predicted_forces()[i];
            assert!((py - p).norm() < 1e-12, "foot {i}: {py} vs {p}");
        }
    }
    drop(law);
    drop(laws);
    assert!(tagged_processes(&dir.display().to_string()).is_empty());
    assert!(own_children().is_empty(), "{:?}", own_children());
}

fn study(dir: &Path, tag: &str) -> PathBuf {
    let text = format!(
        r#"name = "pipe-study"
robot = "{robot}"
duration = 1.0
[gait]
kind = "weight-shift"
[axes]
slope_deg = [0.0, 8.0]
mu = [0.8]
rate_hz = [250.0]
controller = ["py-joint-pd", "py-static-support"]
[external.py-joint-pd]
program = "{prog}"
args = ["--tag", "{tag}"]
[external.py-joint-pd.settings]
law = "joint-pd"
[external.py-static-support]
program = "{prog}"
args = ["--tag", "{tag}"]
[external.py-static-support.settings]
law = "static-support"
"#,
        robot = root().join("scenarios/robots/brindle.toml").display(),
        prog = example_controller(),
    );
    let p = dir.join("study.toml");
    std::fs::write(&p, text).unwrap();
    p
}

/// Four cells with the Python example's two laws: every cell runs to the end (`ok`), the
/// timing file has the program's own compute time beside the round trip, and `cells.csv` is
/// byte-identical across two runs with 2 threads and one with 1 thread.
#[test]
fn python_study_runs_and_is_identical_across_runs_and_threads() {
    let _g = SERIAL.lock().unwrap_or_else(|e| e.into_inner());
    let dir = temp("study");
    let tag = dir.display().to_string();
    let scn = study(&dir, &tag);
    let mut outs = Vec::new();
    for (name, threads) in [("a", "2"), ("b", "2"), ("c", "1")] {
        let out = dir.join(name);
        let o = bin()
            .args(["run", scn.to_str().unwrap(), "--out"])
            .arg(&out)
            .args(["--threads", threads, "--quiet"])
            .output()
            .unwrap();
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        assert!(
            tagged_processes(&tag).is_empty(),
            "{:?}",
            tagged_processes(&tag)
        );
        outs.push(out);
    }
    let rows = read_cells(&outs[0]);
    assert_eq!(rows.len(), 4);
    for r in &rows {
        assert_eq!(r["status"], "ok", "{r:?}");
    }
    let a = std::fs::read(outs[0].join("cells.csv")).unwrap();
    for o in &outs[1..] {
        assert!(
            a == std::fs::read(o.join("cells.csv")).unwrap(),
            "{} differs",
            o.display()
        );
    }
    // The child's own time is there, and below the round trip the cell measured.
    let timing = std::fs::read_to_string(outs[0].join("timing.csv")).unwrap();
    let mut lines = timing.lines();
    let head: Vec<&str> = lines.next().unwrap().split(',').collect();
    let col = |n: &str| head.iter().position(|h| *h == n).unwrap();
    for l in lines {
        let f: Vec<&str> = l.split(',').collect();
        let child: f64 = f[col("child_median_us")].parse().unwrap();
        let round: f64 = f[col("compute_median_us")].parse().unwrap();
        assert!(child.is_finite() && child > 0.0 && child < round, "{l}");
    }
    // The manifest names the program and its hash.
    let man: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(outs[0].join("manifest.json")).unwrap())
            .unwrap();
    let entry = &man["inputs"]["external.py-static-support"];
    assert_eq!(entry["sha256"].as_str().unwrap().len(), 64, "{man}");
}

/// Programs that sleep past the step time-out, exit mid-cell and write garbage each end their
/// cell with `error` and a message that says what happened and shows their last stderr line; a
/// sound law in the same run is unaffected; the run completes; no child process is left, alive
/// or zombie.
#[test]
fn misbehaving_programs_end_their_cells_and_leave_no_process() {
    let _g = SERIAL.lock().unwrap_or_else(|e| e.into_inner());
    let dir = temp("bad");
    let tag = dir.display().to_string();
    // Time-outs far above a healthy step even on a loaded machine, so that only the sleeper's
    // sleep at step 5 can trip one.
    let law = |name: &str, how: &str, timeout_ms: u32| {
        format!(
            "[external.{name}]\nprogram = \"{}\"\nargs = [\"--tag\", \"{tag}\"]\nstep_timeout_ms = {timeout_ms}\n[external.{name}.settings]\nlaw = \"joint-pd\"\nmisbehave = \"{how}\"\nmisbehave_at = 5\n",
            example_controller()
        )
    };
    let text = format!(
        "name = \"bad\"\nrobot = \"{}\"\nduration = 0.6\n[gait]\nkind = \"stand\"\n[axes]\nrate_hz = [250.0]\ncontroller = [\"sleeper\", \"quitter\", \"babbler\", \"sound\"]\n{}{}{}{}",
        root().join("scenarios/robots/brindle.toml").display(),
        law("sleeper", "sleep", 2500),
        law("quitter", "exit", 20000),
        law("babbler", "garbage", 20000),
        law("sound", "", 20000),
    );
    let scn = dir.join("bad.toml");
    std::fs::write(&scn, text).unwrap();
    let s = gripsweep::scenario::Scenario::from_file(&scn).unwrap();
    let out = dir.join("out");
    let summary = gripsweep::runner::run(
        &s,
        &gripsweep::runner::RunOptions {
            out: out.clone(),
            threads: Some(2),
            shard: None,
            resume: false,
            force: false,
            quiet: true,
            no_report: true,
            gains_from: None,
        },
    )
    .unwrap();
    assert_eq!(summary.cells_run, 4);
    // Idle children leave when the scenario (which owns the pools) is dropped.
    drop(s);
    let rows = read_cells(&out);
    let by = |c: &str| rows.iter().find(|r| r["controller"] == c).unwrap();
    let expect = [
        (
            "sleeper",
            "no reply within 2500 ms at control step t = 0.020 s",
        ),
        ("quitter", "exited (exit status: 3)"),
        ("babbler", "malformed reply: a frame length of"),
    ];
    for (c, what) in expect {
        let r = by(c);
        assert_eq!(r["status"], "error", "{r:?}");
        let m = &r["message"];
        assert!(m.contains(&format!("external law '{c}'")), "{m}");
        assert!(m.contains(what), "{c}: {m}");
        assert!(
            m.contains("misbehaving on purpose"),
            "{c}: the message shows the program's stderr: {m}"
        );
    }
    assert_ne!(by("sound")["status"], "error", "{:?}", by("sound"));
    assert!(
        tagged_processes(&tag).is_empty(),
        "{:?}",
        tagged_processes(&tag)
    );
    assert!(own_children().is_empty(), "{:?}", own_children());
}

/// A program that does not exist is refused by `check` (exit 2, file and field named, nothing
/// run); a program changed after a run is refused by `--resume` (its SHA-256 is a manifest
/// input).
#[test]
fn missing_program_is_refused_and_a_changed_one_stops_a_resume() {
    let _g = SERIAL.lock().unwrap_or_else(|e| e.into_inner());
    let dir = temp("inputs");
    let robot = root().join("scenarios/robots/brindle.toml");
    let text = |prog: &str| {
        format!(
            "name = \"inputs\"\nrobot = \"{}\"\nduration = 0.5\n[gait]\nkind = \"stand\"\n[axes]\nrate_hz = [250.0]\ncontroller = [\"mine\"]\n[external.mine]\nprogram = \"{prog}\"\n",
            robot.display()
        )
    };
    let scn = dir.join("missing.toml");
    std::fs::write(&scn, text("no-such-controller.py")).unwrap();
    let o = bin()
        .args(["check", scn.to_str().unwrap()])
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(2));
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(
        err.contains("missing.toml") && err.contains("`external.mine.program`"),
        "{err}"
    );
    assert!(err.contains("no-such-controller.py"), "{err}");

    // The echo program, copied beside the scenario (a relative path), then changed.
    let prog = dir.join("echo.py");
    std::fs::copy(root().join("tests/pipe/echo_zero.py"), &prog).unwrap();
    let scn = dir.join("echo.toml");
    std::fs::write(&scn, text("echo.py")).unwrap();
    let out = dir.join("out");
    let o = bin()
        .args(["run", scn.to_str().unwrap(), "--quiet", "--out"])
        .arg(&out)
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    // Zero torques: the robot sinks; the cell ends (not `error`: the program answered).
    let rows = read_cells(&out);
    assert_ne!(rows[0]["status"], "error", "{:?}", rows[0]);
    let mut body = std::fs::read_to_string(&prog).unwrap();
    body.push_str("# changed\n");
    std::fs::write(&prog, body).unwrap();
    let o = bin()
        .args(["run", scn.to_str().unwrap(), "--quiet", "--resume", "--out"])
        .arg(&out)
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(2));
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(err.contains("echo.py"), "{err}");
}

/// `[external.<name>]` is checked field by field, each message naming the file and the field.
#[test]
fn external_tables_are_checked_field_by_field() {
    let dir = temp("fields");
    let prog = root().join("tests/pipe/echo_zero.py");
    let head = format!(
        "name = \"f\"\nrobot = \"{}\"\nduration = 1.0\n[gait]\nkind = \"stand\"\n",
        root().join("scenarios/robots/brindle.toml").display()
    );
    let cases = [
        (
            format!(
                "[axes]\ncontroller = [\"stiff-pd\"]\n[external.stiff-pd]\nprogram = \"{}\"\n",
                prog.display()
            ),
            "`external.stiff-pd`",
            "built-in law",
        ),
        (
            format!(
                "[axes]\ncontroller = [\"m\"]\n[external.m]\nprogram = \"{}\"\ncolour = 1\n",
                prog.display()
            ),
            "`external.m.colour`",
            "allowed: program, args",
        ),
        (
            format!(
                "[axes]\ncontroller = [\"m\"]\n[external.m]\nprogram = \"{}\"\nstep_timeout_ms = 0\n",
                prog.display()
            ),
            "`external.m.step_timeout_ms`",
            "0 < ms",
        ),
        (
            format!(
                "[axes]\ncontroller = [\"m\"]\n[external.m]\nprogram = \"{}\"\n[external.m.settings]\nx = {{ a = 1 }}\n",
                prog.display()
            ),
            "`external.m.settings.x`",
            "allowed: a number",
        ),
        (
            "[axes]\ncontroller = [\"m\"]\n[external.m]\nargs = []\n".to_string(),
            "`external.m.program`",
            "missing",
        ),
        (
            format!(
                "[axes]\ncontroller = [\"other\"]\n[external.m]\nprogram = \"{}\"\n",
                prog.display()
            ),
            "`axes.controller`",
            ", m. To bring your own",
        ),
    ];
    for (body, field, what) in cases {
        let text = format!("{head}{body}");
        let e = gripsweep::scenario::Scenario::from_text("f.toml", &text, Some(&dir))
            .err()
            .unwrap_or_else(|| panic!("accepted: {text}"))
            .0;
        assert!(e.starts_with("f.toml: field "), "{e}");
        assert!(e.contains(field) && e.contains(what), "{field}: {e}");
    }
}
