//! The example crate's law runs a small study end to end through the whole gripsweep command
//! line (`gripsweep::cli::main_with_laws`): its cells are ok and bit-identical across thread
//! counts; its own `[laws.compensated-pd]` fields are validated from its declaration.

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

fn bin() -> Command {
    Command::new(env!("CARGO_BIN_EXE_gripsweep-own-law"))
}

fn study() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("study.toml")
}

fn scratch(tag: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("own-law-{}-{tag}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    d
}

fn text(o: &Output) -> String {
    format!(
        "{}{}",
        String::from_utf8_lossy(&o.stdout),
        String::from_utf8_lossy(&o.stderr)
    )
}

#[test]
fn own_law_runs_a_study_the_same_on_one_and_two_threads() {
    let dir = scratch("run");
    let mut cells = Vec::new();
    for threads in ["1", "2"] {
        let out = dir.join(format!("t{threads}"));
        let o = bin()
            .arg("run")
            .arg(study())
            .arg("--out")
            .arg(&out)
            .args(["--threads", threads, "--quiet"])
            .output()
            .unwrap();
        assert!(o.status.success(), "{}", text(&o));
        cells.push(std::fs::read_to_string(out.join("cells.csv")).unwrap());
    }
    assert_eq!(cells[0], cells[1], "cells differ between 1 and 2 threads");
    let mut rows = cells[0].lines();
    let header: Vec<&str> = rows.next().unwrap().split(',').collect();
    let col = |name: &str| header.iter().position(|h| *h == name).unwrap();
    let rows: Vec<Vec<&str>> = rows.map(|r| r.split(',').collect()).collect();
    assert_eq!(rows.len(), 2);
    for r in &rows {
        assert_eq!(r[col("controller")], "compensated-pd");
        // The hexapod held and tracked under the law on both slopes.
        assert_eq!(r[col("status")], "ok", "{r:?}");
        assert_eq!(r[col("law_solved_share")], "1");
    }
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn own_fields_are_checked_from_the_law_declaration() {
    let dir = scratch("bad");
    let base = std::fs::read_to_string(study()).unwrap();
    let robot = Path::new(env!("CARGO_MANIFEST_DIR")).join("../../scenarios/robots/skitter.toml");
    let base = base.replace(
        "../../scenarios/robots/skitter.toml",
        &robot.display().to_string(),
    );
    for (edit, expect) in [
        (
            base.replace("kd = 3.0", "kq = 3.0"),
            "field `laws.compensated-pd.kq`: unknown field for compensated-pd; allowed: kp, kd, at_rate",
        ),
        (
            base.replace("kp = 300.0", "kp = -1.0"),
            "laws.compensated-pd.kp`: -1: allowed: a number > 0",
        ),
        (
            base.replace(
                "controller = [\"compensated-pd\"]",
                "controller = [\"my-wbc\"]",
            ),
            "Bringing your own controller",
        ),
    ] {
        let path = dir.join("s.toml");
        std::fs::write(&path, edit).unwrap();
        let o = bin().arg("check").arg(&path).output().unwrap();
        assert_eq!(o.status.code(), Some(2), "{}", text(&o));
        assert!(text(&o).contains(expect), "{}", text(&o));
    }
    std::fs::remove_dir_all(&dir).unwrap();
}
