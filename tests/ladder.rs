//! The step ladder (`gripsweep ladder`): on a two-cell scenario every rung runs and every output
//! the summary uses is compared with the finest rung, figure by figure against the rungs' own
//! cells.csv; bad rungs are refused with exit code 2 and nothing written; and the committed
//! ladder table agrees with the plant's default settings.

use gripsweep::ladder::{CHANGES_FILE, LADDER_MD, RUNGS_FILE, chosen_in_table, parse_rungs};
use gripsweep::plant::PlantSettings;
use std::collections::HashMap;
use std::path::{Path, PathBuf};
use std::process::Command;

fn temp(name: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("gripsweep-ladder-{}-{name}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    d
}

/// Two cells: one slope, one floor, two laws at 1 kHz, one crawl cycle of the even grid.
fn two_cells(dir: &Path) -> PathBuf {
    let robot = Path::new(env!("CARGO_MANIFEST_DIR")).join("scenarios/robots/brindle.toml");
    let text = format!(
        r#"name = "two-cells"
robot = "{}"
duration = 3.6
[gait]
kind = "crawl"
cycle_period = 3.2
shifts = "even"
[axes]
slope_deg = [8.0]
mu = [0.9]
rate_hz = [1000.0]
controller = ["stiff-pd", "id-grip-load"]
"#,
        robot.display()
    );
    let p = dir.join("two.toml");
    std::fs::write(&p, text).unwrap();
    p
}

/// Rows of a CSV as column → value maps (no quoted commas in the columns read here).
fn rows(text: &str) -> Vec<HashMap<String, String>> {
    let mut r = csv::Reader::from_reader(text.as_bytes());
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

#[test]
fn ladder_runs_every_rung_and_reports_every_output_against_the_finest() {
    let dir = temp("two");
    let scen = two_cells(&dir);
    let out = dir.join("ladder");
    let o = Command::new(env!("CARGO_BIN_EXE_gripsweep"))
        .args([
            "ladder",
            scen.to_str().unwrap(),
            "--quiet",
            "--rungs",
            "1/1,1/2",
        ])
        .arg("--out")
        .arg(&out)
        .output()
        .unwrap();
    let stderr = String::from_utf8_lossy(&o.stderr);
    assert!(o.status.success(), "{stderr}");
    let stdout = String::from_utf8_lossy(&o.stdout);
    let rungs_text = std::fs::read_to_string(out.join(RUNGS_FILE)).unwrap();
    assert_eq!(stdout, rungs_text, "stdout is the rung table");
    assert!(out.join(LADDER_MD).is_file());
    let rungs = rows(&rungs_text);
    assert_eq!(rungs.len(), 2);
    // 1 ms / 2 substeps has the shorter substep: it is the finest.
    let finest: Vec<&str> = rungs
        .iter()
        .filter(|r| r["finest"] == "yes")
        .map(|r| r["rung"].as_str())
        .collect();
    assert_eq!(finest, ["1ms-x2"]);
    assert_eq!(rungs.iter().filter(|r| r["chosen"] == "yes").count(), 1);
    for r in &rungs {
        assert_eq!(r["cells"], "2");
    }

    let changes = rows(&std::fs::read_to_string(out.join(CHANGES_FILE)).unwrap());
    for rung in ["1ms-x1", "1ms-x2"] {
        let cells = rows(
            &std::fs::read_to_string(out.join(format!("rung-{rung}")).join("cells.csv")).unwrap(),
        );
        let fine = rows(&std::fs::read_to_string(out.join("rung-1ms-x2/cells.csv")).unwrap());
        assert_eq!(cells.len(), 2);
        let mine: Vec<&HashMap<String, String>> =
            changes.iter().filter(|c| c["rung"] == rung).collect();
        let count = |output: &str| mine.iter().filter(|c| c["output"] == output).count();
        // Every cell's outcome (shown), each (condition, law)'s outcome counts, the
        // condition's verdict, the plan's μ_required, the floor.
        assert_eq!(count("cell_outcome"), 2, "{rung}");
        assert_eq!(count("outcome"), 2, "{rung}");
        assert_eq!(count("verdict"), 1, "{rung}");
        assert_eq!(count("mu_required"), 1, "{rung}");
        assert_eq!(count("slip_floor_mm"), 1, "{rung}");
        for (cell, f) in cells.iter().zip(&fine) {
            assert_eq!(cell["cell_id"], f["cell_id"]);
            let id = &cell["cell_id"];
            let outcome = mine
                .iter()
                .find(|c| c["output"] == "cell_outcome" && c["place"].starts_with(id.as_str()))
                .expect("cell outcome row");
            assert_eq!(outcome["value"], cell["status"]);
            assert_eq!(outcome["finest"], f["status"]);
            assert_eq!(
                outcome["within"], "",
                "a cell's own outcome is shown, not judged"
            );
            // One seed and one condition: each law's group is this one cell, so its counts
            // read "<status> 1" and its means are the cell's figures.
            let law = format!("controller={}", cell["controller"]);
            let group = |output: &str| {
                mine.iter()
                    .find(|c| c["output"] == output && c["place"].ends_with(law.as_str()))
                    .unwrap_or_else(|| panic!("{rung} {law}: no {output} row"))
            };
            let counts = group("outcome");
            assert_eq!(counts["value"], format!("{} 1", cell["status"]), "{rung}");
            assert_eq!(counts["finest"], format!("{} 1", f["status"]), "{rung}");
            if cell["status"] != "ok" || f["status"] != "ok" {
                continue;
            }
            // Each figure: the rung's value, the finest's, their difference, the tolerance.
            for (output, column) in [
                ("slip_mean_mm", "slip_mean_mm"),
                ("base_pos_rms_mm", "base_pos_rms_mm"),
                ("joint_rms_deg", "joint_rms_deg"),
            ] {
                let row = group(output);
                let num = |s: &str| s.parse::<f64>().unwrap();
                let (v, fv) = (num(&cell[column]), num(&f[column]));
                assert!((num(&row["value"]) - v).abs() < 1e-5, "{rung} {output}");
                assert!((num(&row["finest"]) - fv).abs() < 1e-5, "{rung} {output}");
                assert!(
                    (num(&row["change"]) - (v - fv)).abs() < 2e-6,
                    "{rung} {output}"
                );
                let tol = num(&row["tolerance"]);
                assert!(tol >= 0.05 * fv.abs() - 1e-6, "{rung} {output}");
                assert_eq!(
                    row["within"] == "yes",
                    (v - fv).abs() <= tol + 1e-6,
                    "{rung} {output}"
                );
                if rung == "1ms-x2" {
                    assert_eq!(num(&row["change"]), 0.0, "the finest against itself");
                }
            }
        }
    }
    // The markdown states the tolerances.
    let md = std::fs::read_to_string(out.join(LADDER_MD)).unwrap();
    assert!(md.contains("5 %") && md.contains("0.5°"), "{md}");

    // A second ladder into the same folder is refused without --resume.
    let again = Command::new(env!("CARGO_BIN_EXE_gripsweep"))
        .args([
            "ladder",
            scen.to_str().unwrap(),
            "--quiet",
            "--rungs",
            "1/1,1/2",
        ])
        .arg("--out")
        .arg(&out)
        .output()
        .unwrap();
    assert_eq!(again.status.code(), Some(2));
    let _ = std::fs::remove_dir_all(&dir);
}

#[test]
fn bad_rungs_are_refused_naming_the_rung_and_nothing_is_written() {
    let dir = temp("bad");
    let scen = two_cells(&dir);
    for (rungs, says) in [
        ("1/0,1/2", "`1/0`"),
        ("2/4,1/4", "`2/4`"),
        ("1/4", "1 rungs"),
        ("1/4,1/4", "given twice"),
        ("0.3/4,1/4", "control rate"),
        ("1/4/-5,1/2", "`1/4/-5`"),
    ] {
        let out = dir.join("out");
        let o = Command::new(env!("CARGO_BIN_EXE_gripsweep"))
            .args([
                "ladder",
                scen.to_str().unwrap(),
                "--quiet",
                "--rungs",
                rungs,
            ])
            .arg("--out")
            .arg(&out)
            .output()
            .unwrap();
        let stderr = String::from_utf8_lossy(&o.stderr);
        assert_eq!(o.status.code(), Some(2), "{rungs}: {stderr}");
        assert!(stderr.contains(says), "{rungs}: {stderr}");
        assert!(!out.exists(), "{rungs}: wrote {}", out.display());
    }
    assert!(parse_rungs("1/4,0.5/4/800").is_ok());
    let _ = std::fs::remove_dir_all(&dir);
}

/// The plant's default settings, and the default study's, are the rung the committed ladder
/// chose (results/ladder/, the full ladder on the default study's conditions, made by the
/// command in BENCHMARKS.md, "Step ladder").
#[test]
fn plant_defaults_are_the_rung_the_committed_ladder_chose() {
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("results/ladder/rungs.csv");
    let text = std::fs::read_to_string(&path).unwrap();
    let chosen = chosen_in_table(&text).unwrap();
    let d = PlantSettings::default();
    let study = gripsweep::scenario::Scenario::default_embedded()
        .unwrap()
        .plant;
    for (what, dt, substeps, hz) in [
        ("PlantSettings::default()", d.dt, d.substeps, d.contact_hz),
        (
            "the default study's [plant]",
            study.dt,
            study.substeps,
            study.contact_hz,
        ),
    ] {
        assert_eq!(
            (chosen.dt, chosen.substeps),
            (dt, substeps),
            "{}: the ladder chose {}; {what} is {dt} s × {substeps} substeps",
            path.display(),
            chosen.label(),
        );
        if let Some(c) = chosen.contact_hz {
            assert_eq!(c, hz, "{what}: contact stiffness");
        }
    }
}
