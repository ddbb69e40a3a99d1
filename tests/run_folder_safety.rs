//! Run folders that never lose, mix or double data, and inputs that never crash the tool,
//! through the real binary: `--force` replaces only this tool's run folders, the manifest's
//! input hashes stop `--resume` and `merge` from mixing robots, one writer per folder (a lock
//! the OS frees when the holder dies), every kept row checked before anything is written, and
//! values that once crashed or hung the tool refused with exit code 2. Each refusal asserts the
//! exit code, that the message names the file and field (or folder and row), and that nothing
//! outside the run folder changed (here: nothing at all).

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::{Command, Output, Stdio};
use std::time::{Duration, Instant};

fn bin() -> Command {
    Command::new(env!("CARGO_BIN_EXE_gripsweep"))
}

fn temp(name: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("gripsweep-safety-{}-{name}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    d
}

fn repo(rel: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join(rel)
}

/// A copy of the demo robot's two files in `dir` (so a test may change them).
fn robot_copy(dir: &Path) -> PathBuf {
    std::fs::copy(
        repo("scenarios/robots/brindle.urdf"),
        dir.join("brindle.urdf"),
    )
    .unwrap();
    std::fs::copy(
        repo("scenarios/robots/brindle.toml"),
        dir.join("brindle.toml"),
    )
    .unwrap();
    dir.join("brindle.toml")
}

/// A cheap matrix: standing for 0.5 s, 2 slopes × 2 μ (4 cells), stiff PD.
fn tiny(dir: &Path, robot: &Path, extra: &str) -> PathBuf {
    let text = format!(
        "name = \"tiny\"\nrobot = \"{}\"\nduration = 0.5\n[gait]\nkind = \"stand\"\n[axes]\nslope_deg = [0.0, 4.0]\nmu = [0.5, 0.9]\ncontroller = [\"stiff-pd\"]\n{extra}",
        robot.display()
    );
    let p = dir.join("tiny.toml");
    std::fs::write(&p, text).unwrap();
    p
}

fn run_in(cwd: Option<&Path>, args: &[&str]) -> Output {
    let mut c = bin();
    c.args(args);
    if let Some(d) = cwd {
        c.current_dir(d);
    }
    let out = c.output().unwrap();
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(
        !stderr.contains("panicked") && !stderr.contains("RUST_BACKTRACE"),
        "{stderr}"
    );
    out
}

fn run(args: &[&str]) -> Output {
    run_in(None, args)
}

fn s(p: &Path) -> &str {
    p.to_str().unwrap()
}

/// Every file under `dir` with its bytes, but for the lock files (each records the PID of the
/// last process that locked its folder, refused or not).
fn snapshot(dir: &Path) -> BTreeMap<PathBuf, Vec<u8>> {
    let mut out = BTreeMap::new();
    let mut stack = vec![dir.to_path_buf()];
    while let Some(d) = stack.pop() {
        for e in std::fs::read_dir(&d).unwrap() {
            let p = e.unwrap().path();
            if p.is_dir() {
                out.insert(p.clone(), Vec::new());
                stack.push(p);
            } else if p.file_name().is_some_and(|n| n != "run.lock") {
                out.insert(p.clone(), std::fs::read(&p).unwrap());
            }
        }
    }
    out
}

/// Exit code 2, every `needles` in the message, and `dir` byte for byte as it was.
fn refused(o: &Output, needles: &[&str], dir: &Path, before: &BTreeMap<PathBuf, Vec<u8>>) {
    let msg = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(2), "{msg}");
    for n in needles {
        assert!(msg.contains(n), "message lacks {n:?}: {msg}");
    }
    assert!(
        snapshot(dir) == *before,
        "the command changed files although refused: {msg}"
    );
}

fn ok(o: &Output) {
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
}

#[test]
fn force_replaces_only_run_folders_of_this_tool() {
    let d = temp("force");
    let robot = robot_copy(&d);
    let sc = tiny(&d, &robot, "");
    // A folder of the user's own files.
    let mine = d.join("mine");
    std::fs::create_dir_all(&mine).unwrap();
    std::fs::write(mine.join("notes.txt"), "mine").unwrap();
    let before = snapshot(&d);
    let o = run(&["run", s(&sc), "--out", s(&mine), "--force", "--quiet"]);
    refused(&o, &["mine", "not a run folder"], &d, &before);

    // A real run folder, with a user's file put into it.
    let r = d.join("r");
    ok(&run(&["run", s(&sc), "--out", s(&r), "--quiet"]));
    std::fs::write(r.join("notes.txt"), "mine").unwrap();
    let before = snapshot(&d);
    // `--out .` from inside it (the current folder), and from a folder below it (an ancestor).
    let o = run_in(
        Some(&r),
        &["run", s(&sc), "--out", ".", "--force", "--quiet"],
    );
    refused(&o, &["current folder"], &d, &before);
    std::fs::create_dir_all(r.join("sub")).unwrap();
    let before = snapshot(&d);
    let o = run_in(
        Some(&r.join("sub")),
        &["run", s(&sc), "--out", "..", "--force", "--quiet"],
    );
    refused(&o, &["current folder"], &d, &before);
    std::fs::remove_dir(r.join("sub")).unwrap();
    // A run folder that holds the command's own scenario.
    let inner = r.join("inner.toml");
    std::fs::copy(&sc, &inner).unwrap();
    let before = snapshot(&d);
    let o = run(&["run", s(&inner), "--out", s(&r), "--force", "--quiet"]);
    refused(&o, &["holds an input", "inner.toml"], &d, &before);
    std::fs::remove_file(&inner).unwrap();

    // Replaced: only the tool's own files go; the user's file stays.
    ok(&run(&["run", s(&sc), "--out", s(&r), "--force", "--quiet"]));
    assert_eq!(
        std::fs::read_to_string(r.join("notes.txt")).unwrap(),
        "mine"
    );
    assert_eq!(
        std::fs::read_to_string(r.join("cells.csv"))
            .unwrap()
            .lines()
            .count(),
        5
    );

    // merge --out <one of its shards> --force.
    let s1 = d.join("s1");
    let s2 = d.join("s2");
    ok(&run(&[
        "run",
        s(&sc),
        "--out",
        s(&s1),
        "--shard",
        "1/2",
        "--quiet",
    ]));
    ok(&run(&[
        "run",
        s(&sc),
        "--out",
        s(&s2),
        "--shard",
        "2/2",
        "--quiet",
    ]));
    let before = snapshot(&d);
    let o = run(&["merge", s(&s1), s(&s2), "--out", s(&s1), "--force"]);
    refused(&o, &["s1", "holds an input"], &d, &before);
    let _ = std::fs::remove_dir_all(&d);
}

#[test]
fn resume_and_merge_refuse_changed_robot_files() {
    let d = temp("robot-hash");
    let robot = robot_copy(&d);
    let sc = tiny(&d, &robot, "");
    let r = d.join("r");
    ok(&run(&["run", s(&sc), "--out", s(&r), "--quiet"]));
    let s1 = d.join("s1");
    ok(&run(&[
        "run",
        s(&sc),
        "--out",
        s(&s1),
        "--shard",
        "1/2",
        "--quiet",
    ]));

    // The facts change (a different armature) between runs.
    let facts = std::fs::read_to_string(&robot).unwrap();
    assert!(facts.contains("delay = 0.002"));
    std::fs::write(&robot, facts.replacen("delay = 0.002", "delay = 0.003", 1)).unwrap();
    let before = snapshot(&d);
    let o = run(&["run", s(&sc), "--out", s(&r), "--resume", "--quiet"]);
    refused(
        &o,
        &["robot_facts", "brindle.toml", "refusing to mix"],
        &d,
        &before,
    );

    // The URDF changes instead (a comment is enough: the hash is of the text).
    std::fs::write(&robot, &facts).unwrap();
    let urdf = d.join("brindle.urdf");
    let text = std::fs::read_to_string(&urdf).unwrap();
    std::fs::write(&urdf, format!("{text}\n<!-- changed -->\n")).unwrap();
    let before = snapshot(&d);
    let o = run(&["run", s(&sc), "--out", s(&r), "--resume", "--quiet"]);
    refused(&o, &["urdf", "brindle.urdf"], &d, &before);

    // Shards made with different robot files do not merge.
    let s2 = d.join("s2");
    ok(&run(&[
        "run",
        s(&sc),
        "--out",
        s(&s2),
        "--shard",
        "2/2",
        "--quiet",
    ]));
    let merged = d.join("merged");
    let before = snapshot(&d);
    let o = run(&["merge", s(&s1), s(&s2), "--out", s(&merged)]);
    refused(&o, &["s2", "urdf", "brindle.urdf"], &d, &before);
    assert!(!merged.exists());
    let _ = std::fs::remove_dir_all(&d);
}

#[test]
fn one_writer_per_folder_and_a_killed_holder_frees_the_lock() {
    let d = temp("lock");
    let robot = robot_copy(&d);
    // More cells, so the first run is still going when the second starts.
    let sc = tiny(&d, &robot, "mass_scale = [0.9, 1.0, 1.1]\n");
    let r = d.join("r");
    let mut first = bin()
        .args(["run", s(&sc), "--out", s(&r), "--threads", "1", "--quiet"])
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .unwrap();
    let pid = first.id().to_string();
    let t0 = Instant::now();
    while std::fs::read_to_string(r.join("run.lock"))
        .unwrap_or_default()
        .trim()
        != pid
    {
        assert!(t0.elapsed() < Duration::from_secs(60), "no lock taken");
        std::thread::sleep(Duration::from_millis(10));
    }
    // A requeued copy (--resume) and a --force are both refused at once, naming the holder.
    for extra in ["--resume", "--force"] {
        let o = run(&["run", s(&sc), "--out", s(&r), extra, "--quiet"]);
        let msg = String::from_utf8_lossy(&o.stderr);
        assert_eq!(o.status.code(), Some(2), "{msg}");
        assert!(msg.contains(&format!("PID {pid}")), "{msg}");
        assert!(msg.contains(s(&r)), "{msg}");
    }
    // SIGKILL the holder: the OS frees the lock; a resume finishes the folder.
    first.kill().unwrap();
    first.wait().unwrap();
    ok(&run(&[
        "run",
        s(&sc),
        "--out",
        s(&r),
        "--resume",
        "--quiet",
    ]));
    let text = std::fs::read_to_string(r.join("cells.csv")).unwrap();
    let ids: Vec<&str> = text.lines().skip(1).map(|l| &l[..16]).collect();
    let unique: std::collections::BTreeSet<&&str> = ids.iter().collect();
    assert_eq!(ids.len(), 12, "{text}");
    assert_eq!(unique.len(), 12, "a cell doubled: {text}");
    let _ = std::fs::remove_dir_all(&d);
}

#[test]
fn resume_and_merge_check_every_kept_row() {
    let d = temp("rows");
    let robot = robot_copy(&d);
    let sc = tiny(&d, &robot, "");
    let r = d.join("r");
    ok(&run(&["run", s(&sc), "--out", s(&r), "--quiet"]));
    let good = std::fs::read_to_string(r.join("cells.csv")).unwrap();
    let lines: Vec<&str> = good.lines().collect();
    let cells = r.join("cells.csv");
    let resume = || run(&["run", s(&sc), "--out", s(&r), "--resume", "--quiet"]);

    // A doubled row.
    std::fs::write(&cells, format!("{good}{}\n", lines[2])).unwrap();
    let before = snapshot(&d);
    refused(
        &resume(),
        &["cells.csv", "line 6", "appears twice"],
        &d,
        &before,
    );
    // A row whose cell id was changed (a foreign row).
    let foreign = good.replacen(&lines[3][..16], "0123456789abcdef", 1);
    std::fs::write(&cells, &foreign).unwrap();
    let before = snapshot(&d);
    refused(
        &resume(),
        &["cells.csv", "line 4", "not a cell of this matrix"],
        &d,
        &before,
    );
    // A row whose axis value does not belong to its id.
    let fields: Vec<&str> = lines[1].split(',').collect();
    let moved = lines[1].replacen(&format!(",{},", fields[3]), ",0.77,", 1);
    std::fs::write(&cells, good.replacen(lines[1], &moved, 1)).unwrap();
    let before = snapshot(&d);
    refused(
        &resume(),
        &["cells.csv", "line 2", "column `mu`"],
        &d,
        &before,
    );
    // A metric that is not a number.
    let header: Vec<&str> = lines[0].split(',').collect();
    let slip = header.iter().position(|c| *c == "slip_mean_mm").unwrap();
    let mut row: Vec<&str> = lines[4].split(',').collect();
    row[slip] = "abc";
    std::fs::write(&cells, good.replacen(lines[4], &row.join(","), 1)).unwrap();
    let before = snapshot(&d);
    refused(
        &resume(),
        &["cells.csv", "line 5", "not a number"],
        &d,
        &before,
    );
    // A row with a field missing.
    let last = lines[4].rsplit_once(',').unwrap().0;
    std::fs::write(&cells, good.replacen(lines[4], last, 1)).unwrap();
    let before = snapshot(&d);
    refused(&resume(), &["cells.csv", "line 5"], &d, &before);

    // A torn last line cut inside a two-byte character: cut, the cell runs again, and the
    // folder ends as the whole run did.
    let mut torn = lines[..4].join("\n").into_bytes();
    torn.extend_from_slice(b"\n");
    torn.extend_from_slice(&lines[4].as_bytes()[..40]);
    torn.push(0xc3);
    std::fs::write(&cells, &torn).unwrap();
    ok(&resume());
    assert_eq!(std::fs::read_to_string(&cells).unwrap(), good);

    // Merge: a damaged shard is named (file and line) and nothing is written.
    let s1 = d.join("s1");
    let s2 = d.join("s2");
    ok(&run(&[
        "run",
        s(&sc),
        "--out",
        s(&s1),
        "--shard",
        "1/2",
        "--quiet",
    ]));
    ok(&run(&[
        "run",
        s(&sc),
        "--out",
        s(&s2),
        "--shard",
        "2/2",
        "--quiet",
    ]));
    let shard_rows = std::fs::read_to_string(s2.join("cells.csv")).unwrap();
    let second = shard_rows.lines().nth(1).unwrap().to_string();
    std::fs::write(s2.join("cells.csv"), format!("{shard_rows}{second}\n")).unwrap();
    let merged = d.join("merged");
    let before = snapshot(&d);
    let o = run(&["merge", s(&s1), s(&s2), "--out", s(&merged)]);
    refused(
        &o,
        &["s2", "cells.csv", "line 4", "appears twice"],
        &d,
        &before,
    );
    // A row of shard 1 in shard 2 (a foreign row for that shard).
    let first_of_1 = std::fs::read_to_string(s1.join("cells.csv")).unwrap();
    let row1 = first_of_1.lines().nth(1).unwrap();
    std::fs::write(s2.join("cells.csv"), shard_rows.replacen(&second, row1, 1)).unwrap();
    let before = snapshot(&d);
    let o = run(&["merge", s(&s1), s(&s2), "--out", s(&merged)]);
    refused(
        &o,
        &["s2", "cells.csv", "line 2", "of this shard"],
        &d,
        &before,
    );
    std::fs::write(s2.join("cells.csv"), &shard_rows).unwrap();
    ok(&run(&["merge", s(&s1), s(&s2), "--out", s(&merged)]));
    assert_eq!(
        std::fs::read_to_string(merged.join("cells.csv")).unwrap(),
        good
    );
    let _ = std::fs::remove_dir_all(&d);
}

/// Values that once crashed, hung or filled memory: each refused with exit 2 by `check` and by
/// `run`, naming the file and field, and no folder written.
#[test]
fn values_that_could_crash_the_tool_are_refused() {
    let d = temp("bounds");
    let robot = robot_copy(&d);
    let facts = std::fs::read_to_string(&robot).unwrap();
    let many = |n: usize, lo: f64, step: f64| {
        (0..n)
            .map(|i| format!("{}", lo + step * i as f64))
            .collect::<Vec<_>>()
            .join(", ")
    };
    // Facts variants, each written beside the URDF.
    let variant = |name: &str, text: String| {
        let p = d.join(name);
        std::fs::write(&p, text).unwrap();
        p
    };
    let slow_loop = variant(
        "slow-loop.toml",
        facts.replace("torque_loop_rate = 4000.0", "torque_loop_rate = 1e-9"),
    );
    let long_delay = variant(
        "long-delay.toml",
        facts.replace("delay = 0.002", "delay = 1e6"),
    );
    let endless = variant(
        "endless.toml",
        facts.replace("urdf = \"brindle.urdf\"", "urdf = \"/dev/zero\""),
    );
    let mut deep = String::from("<robot name=\"deep\">");
    deep.push_str(&"<link name=\"x\">".repeat(50_000));
    std::fs::write(d.join("deep.urdf"), deep).unwrap();
    let deep_facts = variant(
        "deep.toml",
        facts.replace("urdf = \"brindle.urdf\"", "urdf = \"deep.urdf\""),
    );
    let big_axes = format!(
        "slope_deg = [{}]\nmu = [{}]\nmass_scale = [{}]\ncom_shift_mm = [{}]\nsensor_noise = [{}]\nrate_hz = [1000.0, 500.0, 250.0, 200.0, 125.0, 100.0, 50.0, 40.0, 25.0, 20.0]\nactuator = [\"ideal\", \"open-current\", \"torque-loop\"]\n",
        many(1000, -50.0, 0.1),
        many(1000, 0.01, 0.004),
        many(1000, 0.3, 0.004),
        many(1000, -100.0, 0.2),
        many(1000, 0.0, 0.05),
    );
    // (case, robot facts, top-level lines, [axes] lines, tables after, words of the message)
    type Case<'a> = (&'a str, PathBuf, String, String, String, Vec<&'a str>);
    let none = String::new;
    let cases: Vec<Case> = vec![
        (
            "observation delay",
            robot.clone(),
            none(),
            none(),
            "[noise]\ndelay = 1e6\n".into(),
            vec!["noise.delay", "allowed"],
        ),
        (
            "slow torque loop",
            slow_loop.clone(),
            none(),
            none(),
            none(),
            vec!["slow-loop.toml", "torque_loop_rate"],
        ),
        (
            "actuator delay",
            long_delay.clone(),
            none(),
            none(),
            none(),
            vec!["long-delay.toml", "`delay`"],
        ),
        (
            "endless device",
            endless.clone(),
            none(),
            none(),
            none(),
            vec!["endless.toml", "field `urdf`", "not a regular file"],
        ),
        (
            "deep URDF",
            deep_facts.clone(),
            none(),
            none(),
            none(),
            vec!["deep.urdf", "nested", "allowed: at most 64"],
        ),
        (
            "huge matrix",
            robot.clone(),
            "seeds = 1000\n".into(),
            format!(
                "mu = [0.5, 0.9]\nmass_scale = [{}]\n",
                many(1000, 0.3, 0.004)
            ),
            none(),
            vec!["field `axes`", "allowed: at most 1000000"],
        ),
        (
            "overflowing matrix",
            robot.clone(),
            "seeds = 1000\n".into(),
            big_axes,
            none(),
            vec!["field `axes`", "cells", "allowed: at most 1000000"],
        ),
        (
            "near-equal rates",
            robot.clone(),
            none(),
            "rate_hz = [500.0, 500.0000000001]\n".into(),
            none(),
            vec!["axes.rate_hz", "same value"],
        ),
    ];
    for (what, facts_path, top, axes, tail, needles) in cases {
        let text = format!(
            "name = \"tiny\"\nrobot = \"{}\"\nduration = 0.5\n{top}[gait]\nkind = \"stand\"\n[axes]\ncontroller = [\"stiff-pd\"]\n{axes}{tail}",
            facts_path.display()
        );
        let sc = d.join("tiny.toml");
        std::fs::write(&sc, text).unwrap();
        let out = d.join("out");
        let before = snapshot(&d);
        eprintln!("case: {what}");
        let o = run(&["check", s(&sc)]);
        let mut needles = needles.clone();
        refused(&o, &needles, &d, &before);
        let o = run(&["run", s(&sc), "--out", s(&out), "--quiet"]);
        needles.push("tiny.toml");
        refused(&o, &needles, &d, &before);
        assert!(!out.exists(), "{what}: a folder was written");
    }

    // A near-zero duration, a scenario too large to read, nesting too deep for the parser.
    let cases: Vec<(&str, String, Vec<&str>)> = vec![
        (
            "near-zero duration",
            "name = \"z\"\nduration = 1e-9\n[gait]\nkind = \"stand\"\n".into(),
            vec!["field `duration`", "allowed: at least"],
        ),
        (
            "huge file",
            format!(
                "name = \"z\"\n{}",
                "# padding padding padding padding\n".repeat(40_000)
            ),
            vec!["bytes", "allowed: at most 1048576"],
        ),
        (
            "deep TOML",
            format!("name = \"z\"\nx = {}", "[".repeat(100_000)),
            vec!["line 2", "nested", "allowed: at most 32"],
        ),
        (
            "tiny step far too long",
            "name = \"z\"\nduration = 600\n[plant]\ndt = 1e-5\n[gait]\nkind = \"stand\"\n".into(),
            vec!["field `duration`", "plant steps"],
        ),
    ];
    for (what, text, needles) in cases {
        let sc = d.join("bad.toml");
        std::fs::write(&sc, text).unwrap();
        let before = snapshot(&d);
        let o = run(&["check", s(&sc)]);
        let mut needles = needles.clone();
        needles.push("bad.toml");
        refused(&o, &needles, &d, &before);
        assert!(!d.join("out").exists(), "{what}");
    }

    // `robot` reads robot files through the same bounds.
    let before = snapshot(&d);
    refused(
        &run(&["robot", s(&deep_facts)]),
        &["deep.urdf", "nested"],
        &d,
        &before,
    );
    refused(
        &run(&["robot", s(&endless)]),
        &["endless.toml", "not a regular file"],
        &d,
        &before,
    );
    refused(
        &run(&["robot", "/dev/zero.urdf"]),
        &["/dev/zero.urdf"],
        &d,
        &before,
    );

    // Threads beyond the machine.
    let sc = tiny(&d, &robot, "");
    let before = snapshot(&d);
    let o = run(&[
        "run",
        s(&sc),
        "--out",
        s(&d.join("out")),
        "--threads",
        "100000",
        "--quiet",
    ]);
    refused(&o, &["--threads 100000", "allowed: 1 to"], &d, &before);
    let o = run(&["check", s(&sc), "--threads", "100000"]);
    refused(&o, &["--threads 100000"], &d, &before);
    let _ = std::fs::remove_dir_all(&d);
}

/// `check` probes a fixed number of plant steps: with the smallest step it still answers (the
/// probe used to grow with 1/dt).
#[test]
fn check_answers_with_the_smallest_step() {
    let d = temp("tiny-dt");
    let sc = d.join("fine.toml");
    std::fs::write(
        &sc,
        "name = \"fine\"\nduration = 2.0\n[plant]\ndt = 1e-5\n[gait]\nkind = \"stand\"\n[axes]\ncontroller = [\"stiff-pd\"]\n",
    )
    .unwrap();
    let o = run(&["check", s(&sc)]);
    ok(&o);
    assert!(String::from_utf8_lossy(&o.stdout).contains("1 cells"));
    let _ = std::fs::remove_dir_all(&d);
}

/// A bounded fuzz test of the scenario parser and validator (a seeded generator, so a failure
/// reproduces): TOML-shaped text built from the scenario's own keys with extreme, wrong-typed
/// and random values, then byte-mutated. Every input must be accepted or refused with a
/// message naming the file, never panic, and take well under a second; accepted ones must lie
/// within the stated bounds. A sample goes through the binary: exit 0 or 2, never another code.
#[test]
fn the_scenario_parser_never_panics_on_arbitrary_input() {
    use gripsweep::limits::{MAX_CELLS, MAX_STEPS_PER_CELL};
    use gripsweep::scenario::Scenario;
    use rand::{RngExt, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    const TABLES: [(&str, &[&str]); 9] = [
        ("", &["name", "robot", "duration", "seeds"]),
        (
            "gait",
            &[
                "kind",
                "step_length",
                "swing_height",
                "cycle_period",
                "body_height",
                "margin",
                "amplitude",
                "period",
            ],
        ),
        (
            "plant",
            &[
                "dt",
                "substeps",
                "contact_hz",
                "contact_damping",
                "joint_limits",
            ],
        ),
        (
            "laws",
            &["mu_estimate_scale", "stiff_kp", "joint_kd", "cone_margin"],
        ),
        (
            "axes",
            &[
                "slope_deg",
                "mu",
                "rate_hz",
                "actuator",
                "controller",
                "mass_scale",
                "com_shift_mm",
                "sensor_noise",
            ],
        ),
        (
            "noise",
            &["joint_angle", "joint_rate", "base_position", "delay"],
        ),
        ("falls", &["min_height_share", "max_tilt_deg"]),
        ("onset", &["lo_deg", "hi_deg", "steps", "threshold_mm"]),
        ("nonsense", &["x"]),
    ];
    const NUMBERS: [&str; 22] = [
        "0",
        "-1",
        "1",
        "0.5",
        "4.0",
        "1e308",
        "-1e308",
        "nan",
        "inf",
        "-inf",
        "1e-300",
        "5e-324",
        "4294967296",
        "18446744073709551615",
        "-9223372036854775808",
        "1000",
        "1e-5",
        "600",
        "0.001",
        "100000",
        "3.2",
        "1e6",
    ];
    const STRINGS: [&str; 12] = [
        "\"stand\"",
        "\"crawl\"",
        "\"trot\"",
        "\"weight-shift\"",
        "\"embedded:brindle\"",
        "\"../../nowhere.toml\"",
        "\"\"",
        "\"ideal\"",
        "\"stiff-pd\"",
        "\"force-cost-id-load\"",
        "\"torque-loop\"",
        "\"\\u00e9\\u4e2d\"",
    ];
    fn value(rng: &mut ChaCha8Rng, depth: u32) -> String {
        match rng.random_range(0..10) {
            0..=3 => NUMBERS[rng.random_range(0..NUMBERS.len())].to_string(),
            4 => format!(
                "{}",
                rng.random::<f64>() * 10f64.powi(rng.random_range(-6..7))
            ),
            5 => STRINGS[rng.random_range(0..STRINGS.len())].to_string(),
            6 => ["true", "false"][rng.random_range(0..2)].to_string(),
            7 if depth == 0 && rng.random_range(0..10) == 0 => {
                // A long axis of numbers.
                let items: Vec<String> = (0..1500)
                    .map(|_| NUMBERS[rng.random_range(0..NUMBERS.len())].to_string())
                    .collect();
                format!("[{}]", items.join(", "))
            }
            7 | 8 if depth < 3 => {
                let n = rng.random_range(0..6);
                let items: Vec<String> = (0..n).map(|_| value(rng, depth + 1)).collect();
                format!("[{}]", items.join(", "))
            }
            _ => format!("{{ k = {} }}", NUMBERS[rng.random_range(0..NUMBERS.len())]),
        }
    }
    /// A value the validator should accept for `key` (tame cases).
    fn plausible(key: &str) -> &'static str {
        match key {
            "name" => "\"tame\"",
            "duration" => "4.0",
            "seeds" => "2",
            "kind" => "\"stand\"",
            "cycle_period" => "3.2",
            "period" => "2.0",
            "dt" => "0.0005",
            "substeps" => "4",
            "contact_hz" => "50.0",
            "contact_damping" => "1.0",
            "joint_limits" => "true",
            "slope_deg" => "[0.0, 5.0]",
            "mu" => "[0.5, 0.9]",
            "rate_hz" => "[500.0]",
            "actuator" => "[\"ideal\", \"open-current\"]",
            "controller" => "[\"stiff-pd\"]",
            "mass_scale" => "[1.0]",
            "com_shift_mm" => "[0.0, 10.0]",
            "sensor_noise" => "[0.0, 1.0]",
            "delay" => "0.002",
            "min_height_share" => "0.5",
            "max_tilt_deg" => "45.0",
            "lo_deg" => "0.0",
            "hi_deg" => "20.0",
            "steps" => "4",
            "threshold_mm" => "1.0",
            _ => "0.03",
        }
    }
    let mut rng = ChaCha8Rng::seed_from_u64(11);
    let started = Instant::now();
    let mut samples: Vec<(String, bool)> = Vec::new();
    let (mut accepted, mut cases) = (0usize, 0usize);
    let mut slowest = Duration::ZERO;
    while cases < 3000 && started.elapsed() < Duration::from_secs(20) {
        cases += 1;
        // Tame cases: known tables, plausible values with a rare wild one, no damage (so some
        // are accepted); wild cases: anything.
        let tame = rng.random_range(0..10) < 4;
        let mut text = String::new();
        if tame || rng.random_range(0..10) < 9 {
            text.push_str("name = \"fuzz\"\n");
        }
        for (table, keys) in TABLES {
            if tame && (table == "laws" || table == "nonsense" || table == "onset") {
                continue;
            }
            if !table.is_empty() {
                if rng.random_range(0..3) == 0 {
                    continue;
                }
                text.push_str(&format!("[{table}]\n"));
            }
            for key in keys.iter() {
                if tame && (*key == "name" || *key == "robot") {
                    continue;
                }
                if rng.random_range(0..3) == 0 {
                    let v = if tame && rng.random_range(0..30) != 0 {
                        plausible(key).to_string()
                    } else {
                        value(&mut rng, 0)
                    };
                    text.push_str(&format!("{key} = {v}\n"));
                }
            }
        }
        // Byte-level damage: cut a stretch, or insert brackets, quotes or a stray byte.
        if !tame && rng.random_range(0..4) == 0 && !text.is_empty() {
            let mut bytes = text.into_bytes();
            let at = rng.random_range(0..bytes.len());
            match rng.random_range(0..3) {
                0 => {
                    let end = (at + rng.random_range(1..20)).min(bytes.len());
                    bytes.drain(at..end);
                }
                1 => {
                    let junk =
                        [b'[', b']', b'{', b'"', b'=', b'\n', b'#', 0xff][rng.random_range(0..8)];
                    bytes.insert(at, junk);
                }
                _ => bytes.truncate(at),
            }
            text = String::from_utf8_lossy(&bytes).into_owned();
        }
        let t0 = Instant::now();
        let result = std::panic::catch_unwind(|| Scenario::from_text("fuzz.toml", &text, None));
        let took = t0.elapsed();
        let Ok(result) = result else {
            panic!("the validator panicked on:\n{text}");
        };
        // A bound against hangs, not a performance figure (the machine may be shared).
        assert!(took < Duration::from_secs(10), "took {took:?} on:\n{text}");
        slowest = slowest.max(took);
        match result {
            Ok(sc) => {
                accepted += 1;
                assert!(
                    sc.cell_count() >= 1 && sc.cell_count() <= MAX_CELLS,
                    "{text}"
                );
                assert!(sc.duration / sc.plant.dt <= MAX_STEPS_PER_CELL, "{text}");
                if samples.iter().filter(|s| s.1).count() < 2 && sc.cell_count() <= 20 {
                    samples.push((text, true));
                }
            }
            Err(e) => {
                assert!(
                    e.0.starts_with("fuzz.toml"),
                    "message does not name the file: {e}"
                );
                assert!(!e.0.is_empty());
                if samples.iter().filter(|s| !s.1).count() < 10 {
                    samples.push((text, false));
                }
            }
        }
    }
    eprintln!("{cases} cases, {accepted} accepted, slowest {slowest:?}");
    assert!(cases >= 200, "only {cases} cases in the time bound");
    assert!(
        accepted > 0,
        "no generated scenario was valid: the generator is too wild"
    );
    assert!(accepted < cases, "no generated scenario was refused");
    let d = temp("fuzz");
    let path = d.join("fuzz.toml");
    for (text, valid) in samples {
        std::fs::write(&path, &text).unwrap();
        // `check` simulates a short probe for a valid scenario; a refused one stops at once.
        // A valid scenario may still be refused (2) by the plan check against the robot.
        let o = run(&["check", s(&path)]);
        let code = o.status.code();
        assert!(
            code == Some(2) || (valid && code == Some(0)),
            "exit {code:?}: {}\n{text}",
            String::from_utf8_lossy(&o.stderr)
        );
    }
    let _ = std::fs::remove_dir_all(&d);
}

/// A resume given a tuning table other than the one the folder's cells ran with is refused
/// (its rows would mix two gain sets), naming the table, and nothing changes.
#[test]
fn resume_refuses_another_tuning_table() {
    let d = temp("gains");
    let robot = robot_copy(&d);
    let sc = tiny(&d, &robot, "");
    let r = d.join("r");
    ok(&run(&["run", s(&sc), "--out", s(&r), "--quiet"]));
    // The folder's own table with stiff PD's gains changed: valid for these inputs (its input
    // hashes are untouched), but not the gains the cells ran with.
    let own = std::fs::read_to_string(r.join("gains.csv")).unwrap();
    let mut lines: Vec<String> = own.lines().map(String::from).collect();
    let head: Vec<&str> = lines[0].split(',').collect();
    let last = head.iter().position(|c| *c == "stiff_kd").unwrap();
    let mut f: Vec<String> = lines[1].splitn(last + 2, ',').map(String::from).collect();
    for (c, v) in [
        ("s_chosen", "0.0625"),
        ("stiff_kp", "1250"),
        ("stiff_kd", "7.5"),
    ] {
        f[head.iter().position(|h| *h == c).unwrap()] = v.into();
    }
    lines[1] = f.join(",");
    let edited = d.join("edited-gains.csv");
    std::fs::write(&edited, lines.join("\n") + "\n").unwrap();
    let before = snapshot(&d);
    let o = run(&[
        "run",
        s(&sc),
        "--out",
        s(&r),
        "--resume",
        "--gains-from",
        s(&edited),
        "--quiet",
    ]);
    refused(&o, &["--resume", "gains.csv", "gains_sha256"], &d, &before);
    // The folder's own table resumes (nothing left to run).
    ok(&run(&[
        "run",
        s(&sc),
        "--out",
        s(&r),
        "--resume",
        "--quiet",
    ]));
}
