//! The main job end to end through the real binary: outputs, resume after SIGKILL, thread
//! count and sharding invariance, merge refusals, and malformed inputs.

use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

fn bin() -> Command {
    Command::new(env!("CARGO_BIN_EXE_gripsweep"))
}

fn temp(name: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("gripsweep-e2e-{}-{name}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    d
}

fn robot_path() -> String {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("scenarios/robots/brindle.toml")
        .display()
        .to_string()
}

/// A small matrix: 2 slopes × 2 μ × 2 laws at 1 kHz, crawl for 3.6 s (one cycle of the even
/// grid: the fast timing keeps this test short).
fn small_scenario(dir: &Path, extra_axes: &str) -> PathBuf {
    let text = format!(
        r#"name = "small"
robot = "{}"
duration = 3.6
[gait]
kind = "crawl"
cycle_period = 3.2
shifts = "even"
[axes]
slope_deg = [0.0, 8.0]
mu = [0.5, 0.9]
rate_hz = [1000.0]
controller = ["stiff-pd", "force-cost-id-load"]
{extra_axes}
"#,
        robot_path()
    );
    let p = dir.join("small.toml");
    std::fs::write(&p, text).unwrap();
    p
}

fn run(args: &[&str]) -> std::process::Output {
    let out = bin().args(args).output().unwrap();
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(
        !stderr.contains("panicked") && !stderr.contains("RUST_BACKTRACE"),
        "{stderr}"
    );
    out
}

fn cells(dir: &Path) -> String {
    std::fs::read_to_string(dir.join("cells.csv")).unwrap()
}

#[test]
fn a_small_run_writes_every_output_and_is_thread_and_shard_invariant() {
    let d = temp("small");
    let sc = small_scenario(&d, "");
    let one = d.join("one");
    let out = run(&[
        "run",
        sc.to_str().unwrap(),
        "--out",
        one.to_str().unwrap(),
        "--threads",
        "1",
        "--quiet",
    ]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    for f in [
        "manifest.json",
        "cells.csv",
        "timing.csv",
        "summary.md",
        "summary.csv",
    ] {
        let p = one.join(f);
        assert!(
            p.is_file() && std::fs::metadata(&p).unwrap().len() > 0,
            "{f} missing or empty"
        );
    }
    let plots: Vec<_> = std::fs::read_dir(one.join("plots"))
        .unwrap()
        .map(|e| e.unwrap().path())
        .collect();
    assert!(
        plots
            .iter()
            .any(|p| p.extension().is_some_and(|e| e == "png"))
    );
    assert!(
        plots
            .iter()
            .any(|p| p.extension().is_some_and(|e| e == "svg"))
    );
    for p in &plots {
        assert!(
            std::fs::metadata(p).unwrap().len() > 200,
            "{} is (nearly) empty",
            p.display()
        );
    }
    let text = cells(&one);
    let rows: Vec<&str> = text.lines().skip(1).collect();
    assert_eq!(rows.len(), 8, "one row per cell");
    let mut rdr = csv::Reader::from_reader(text.as_bytes());
    let status_col = rdr
        .headers()
        .unwrap()
        .iter()
        .position(|h| h == "status")
        .unwrap();
    for r in rdr.records() {
        let st = r.unwrap()[status_col].to_string();
        assert!(["ok", "fell", "diverged", "infeasible", "error"].contains(&st.as_str()));
    }
    let manifest: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(one.join("manifest.json")).unwrap()).unwrap();
    assert!(manifest["slip_floor_mm"].as_f64().unwrap() >= 0.0);
    assert_eq!(manifest["cell_count"], 8);

    // Two threads: the same bytes.
    let two = d.join("two");
    assert!(
        run(&[
            "run",
            sc.to_str().unwrap(),
            "--out",
            two.to_str().unwrap(),
            "--threads",
            "2",
            "--quiet"
        ])
        .status
        .success()
    );
    assert_eq!(cells(&one), cells(&two), "threads 1 vs 2");

    // Three shards (run out of order), merged: the same bytes.
    let mut shard_dirs = Vec::new();
    for i in [3, 1, 2] {
        let sd = d.join(format!("shard{i}"));
        let o = run(&[
            "run",
            sc.to_str().unwrap(),
            "--out",
            sd.to_str().unwrap(),
            "--shard",
            &format!("{i}/3"),
            "--quiet",
        ]);
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        shard_dirs.push(sd);
    }
    // An incomplete set is refused, naming the missing shard.
    let merged = d.join("merged");
    let o = run(&[
        "merge",
        shard_dirs[0].to_str().unwrap(),
        shard_dirs[1].to_str().unwrap(),
        "--out",
        merged.to_str().unwrap(),
    ]);
    assert_eq!(o.status.code(), Some(2));
    assert!(
        String::from_utf8_lossy(&o.stderr).contains("missing shard(s) 2/3"),
        "{}",
        String::from_utf8_lossy(&o.stderr)
    );
    assert!(!merged.exists(), "nothing written on refusal");
    let mut args = vec!["merge"];
    args.extend(shard_dirs.iter().map(|p| p.to_str().unwrap()));
    args.extend(["--out", merged.to_str().unwrap()]);
    let o = run(&args);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert_eq!(cells(&one), cells(&merged), "sharded + merged vs unsharded");
    assert!(merged.join("summary.md").is_file());

    // An existing folder is never overwritten without --force.
    let o = run(&[
        "run",
        sc.to_str().unwrap(),
        "--out",
        one.to_str().unwrap(),
        "--quiet",
    ]);
    assert_eq!(o.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&o.stderr).contains("--force"));
    let _ = std::fs::remove_dir_all(&d);
}

#[test]
fn a_killed_run_resumes_without_losing_or_doubling_a_cell() {
    let d = temp("resume");
    let sc = small_scenario(&d, "");
    let full = d.join("full");
    assert!(
        run(&[
            "run",
            sc.to_str().unwrap(),
            "--out",
            full.to_str().unwrap(),
            "--threads",
            "1",
            "--quiet"
        ])
        .status
        .success()
    );

    let killed = d.join("killed");
    let mut child = bin()
        .args([
            "run",
            sc.to_str().unwrap(),
            "--out",
            killed.to_str().unwrap(),
            "--threads",
            "1",
            "--quiet",
        ])
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .unwrap();
    // Wait for a few finished rows, then SIGKILL mid-run.
    let t0 = Instant::now();
    loop {
        let rows = std::fs::read_to_string(killed.join("cells.csv"))
            .map(|t| t.lines().count().saturating_sub(1))
            .unwrap_or(0);
        if rows >= 3 {
            break;
        }
        assert!(t0.elapsed() < Duration::from_secs(300), "no rows appeared");
        std::thread::sleep(Duration::from_millis(20));
    }
    child.kill().unwrap();
    child.wait().unwrap();
    let partial = cells(&killed).lines().count() - 1;
    assert!((3..8).contains(&partial), "killed after {partial} rows");
    let o = run(&[
        "run",
        sc.to_str().unwrap(),
        "--out",
        killed.to_str().unwrap(),
        "--resume",
        "--quiet",
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert_eq!(
        cells(&full),
        cells(&killed),
        "resumed run differs from the uninterrupted one"
    );
    let _ = std::fs::remove_dir_all(&d);
}

/// Each malformed input: exit code 2, one message naming the file and the field, no panic, no
/// output folder.
#[test]
fn malformed_scenarios_are_refused_with_a_clear_message() {
    let d = temp("bad");
    let robot = robot_path();
    let good_head = format!("name = \"bad\"\nrobot = \"{robot}\"\nduration = 3.6\n");
    let bad_urdf = d.join("broken.urdf");
    std::fs::write(&bad_urdf, "<robot name=\"x\"><link name=\"a\"/><joint name=\"j\" type=\"revolute\"><parent link=\"a\"/><child link=\"nowhere\"/></joint></robot>").unwrap();
    let bad_facts = d.join("broken.toml");
    std::fs::write(
        &bad_facts,
        "urdf = \"broken.urdf\"\n[feet]\nframes = [\"a\"]\nradius = 0.02\n",
    )
    .unwrap();
    let cases: Vec<(&str, String, &str)> = vec![
        (
            "syntax error",
            format!("{good_head}[axes\nmu = [0.5]\n"),
            "bad.toml",
        ),
        (
            "unknown top-level field",
            format!("{good_head}colour = \"red\"\n"),
            "colour",
        ),
        (
            "unknown axis",
            format!("{good_head}[axes]\nfloor = [1.0]\n"),
            "floor",
        ),
        (
            "wrong type",
            format!("{good_head}[axes]\nmu = \"high\"\n"),
            "mu",
        ),
        (
            "empty axis",
            format!("{good_head}[axes]\nmu = []\n"),
            "axes.mu",
        ),
        (
            "μ ≤ 0",
            format!("{good_head}[axes]\nmu = [0.5, 0.0]\n"),
            "axes.mu",
        ),
        (
            "negative μ",
            format!("{good_head}[axes]\nmu = [-0.3]\n"),
            "axes.mu",
        ),
        (
            "slope too steep",
            format!("{good_head}[axes]\nslope_deg = [61.0]\n"),
            "axes.slope_deg",
        ),
        (
            "rate not dividing",
            format!("{good_head}[axes]\nrate_hz = [300.0]\n"),
            "axes.rate_hz",
        ),
        (
            "unknown controller",
            format!("{good_head}[axes]\ncontroller = [\"magic\"]\n"),
            "axes.controller",
        ),
        (
            "unknown actuator",
            format!("{good_head}[axes]\nactuator = [\"hydraulic\"]\n"),
            "axes.actuator",
        ),
        (
            "missing robot file",
            "name = \"bad\"\nrobot = \"no/such/robot.toml\"\n".to_string(),
            "robot",
        ),
        (
            "bad URDF",
            format!("name = \"bad\"\nrobot = \"{}\"\n", bad_facts.display()),
            "nowhere",
        ),
        (
            "negative duration",
            format!("name = \"bad\"\nrobot = \"{robot}\"\nduration = -1.0\n"),
            "duration",
        ),
        ("zero seeds", format!("{good_head}seeds = 0\n"), "seeds"),
        (
            "unknown gait",
            format!("{good_head}[gait]\nkind = \"gallop\"\n"),
            "gait.kind",
        ),
        (
            "unknown shift timing",
            format!("{good_head}[gait]\nkind = \"crawl\"\nshifts = \"brisk\"\n"),
            "gait.shifts",
        ),
        (
            "negative shift acceleration",
            format!("{good_head}[gait]\nkind = \"crawl\"\nshift_accel = -0.2\n"),
            "gait.shift_accel",
        ),
        (
            "shift acceleration with the even grid",
            format!("{good_head}[gait]\nkind = \"crawl\"\nshifts = \"even\"\nshift_accel = 0.2\n"),
            "gait.shift_accel",
        ),
        (
            "duration shorter than a cycle",
            format!("name = \"bad\"\nrobot = \"{robot}\"\nduration = 1.0\n"),
            "duration",
        ),
        (
            "duplicate axis value",
            format!("{good_head}[axes]\nslope_deg = [5.0, 5.0]\n"),
            "axes.slope_deg",
        ),
    ];
    assert!(cases.len() >= 15);
    for (what, text, needle) in cases {
        let p = d.join("bad.toml");
        std::fs::write(&p, &text).unwrap();
        let out_dir = d.join("never");
        for cmd in ["run", "check"] {
            let mut args = vec![cmd, p.to_str().unwrap()];
            if cmd == "run" {
                args.extend(["--out", out_dir.to_str().unwrap()]);
            }
            let o = run(&args);
            let err = String::from_utf8_lossy(&o.stderr);
            assert_eq!(o.status.code(), Some(2), "{what} ({cmd}): {err}");
            assert!(
                err.contains(needle),
                "{what} ({cmd}): message does not name `{needle}`: {err}"
            );
            assert!(
                err.contains("bad.toml") || err.contains("broken"),
                "{what} ({cmd}): message does not name the file: {err}"
            );
            // One message (a TOML syntax error quotes the offending line under it).
            assert!(
                err.matches("gripsweep:").count() == 1 && err.lines().count() <= 8,
                "{what} ({cmd}): not one clear message: {err}"
            );
            assert!(!out_dir.exists(), "{what}: something was written");
        }
    }
    let _ = std::fs::remove_dir_all(&d);
}

#[test]
fn check_and_trace_work_on_a_small_scenario() {
    let d = temp("check");
    let sc = small_scenario(&d, "");
    let o = run(&["check", sc.to_str().unwrap()]);
    assert!(o.status.success());
    let text = String::from_utf8_lossy(&o.stdout);
    assert!(
        text.contains("8 cells") && text.contains("Estimated run time"),
        "{text}"
    );
    let trace = d.join("trace.csv");
    let o = run(&[
        "trace",
        sc.to_str().unwrap(),
        "--pick",
        "mu=0.9",
        "--pick",
        "controller=force-cost-id-load",
        "--out",
        trace.to_str().unwrap(),
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let t = std::fs::read_to_string(&trace).unwrap();
    let head = t.lines().next().unwrap();
    for col in [
        "t_s",
        "base_z_m",
        "fl_knee_rad",
        "fl_knee_torque_nm",
        "fl_toe_fn_n",
        "fl_toe_slip_speed_mm_s",
        "cell_status",
    ] {
        assert!(head.contains(col), "{col} not in {head}");
    }
    assert!(t.lines().count() > 300);
    // Beside the CSV, its replay page (tests/report_html.rs checks its numbers).
    assert!(d.join("trace.html").is_file());
    let o = run(&[
        "trace",
        sc.to_str().unwrap(),
        "--pick",
        "mu=0.7",
        "--out",
        trace.to_str().unwrap(),
    ]);
    assert_eq!(o.status.code(), Some(2));
    let _ = std::fs::remove_dir_all(&d);
}

#[test]
fn every_shipped_scenario_is_valid_and_plans_on_every_slope() {
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("scenarios");
    let mut n = 0;
    for entry in std::fs::read_dir(&dir).unwrap() {
        let p = entry.unwrap().path();
        if p.extension().is_some_and(|e| e == "toml") {
            let s = gripsweep::scenario::Scenario::from_file(&p).unwrap_or_else(|e| panic!("{e}"));
            let robot = s.load_robot().unwrap();
            s.check_plans(&robot).unwrap_or_else(|e| panic!("{e}"));
            assert!(s.cell_count() > 0);
            n += 1;
        }
    }
    assert!(
        n >= 5,
        "expected the default, quick, weight-shift, rate-and-sensing and onset scenarios"
    );
    // The embedded default is the file on disk.
    let embedded = gripsweep::scenario::Scenario::default_embedded().unwrap();
    assert_eq!(
        embedded.text,
        std::fs::read_to_string(dir.join("default.toml")).unwrap()
    );
}
