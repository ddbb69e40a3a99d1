//! The run-folder paths whose cost grows with the cell count: the end-of-run rewrite of a run
//! folder (`cells.csv` and `timing.csv` put in matrix order, `runner::rewrite_in_matrix_order`)
//! and `merge` of shard folders (every row checked, then sorted and written, no report), on a
//! synthetic matrix of 100 000 cells (10 slopes × 10 μ × 10 mass scales × 10 CoM shifts × 10
//! seeds, standing) with rows in completion order (shuffled). The rows are made up (numbers,
//! not simulations): these paths read, check, sort and write text and never look at the
//! values. Target: under 2 s each (issue 11). Wall time, median of 3 (1 under `cargo test
//! --benches`).
//!
//!     cargo bench --bench run_folder

use gripsweep::matrix::expand;
use gripsweep::metrics::CellMetrics;
use gripsweep::run_format::{Manifest, ShardInfo};
use gripsweep::runner::{self, CELLS_FILE, MANIFEST_FILE, TIMING_FILE};
use gripsweep::scenario::Scenario;
use rand::SeedableRng;
use rand::seq::SliceRandom;
use rand_chacha::ChaCha8Rng;
use std::path::Path;
use std::time::Instant;

const SCENARIO: &str = "name = \"bench\"\nduration = 4.0\nseeds = 10\n[gait]\nkind = \"stand\"\n[axes]\nslope_deg = [0, 1, 2, 3, 4, 5, 6, 7, 8, 9]\nmu = [0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8, 0.9, 1.0]\ncontroller = [\"stiff-pd\"]\nmass_scale = [0.6, 0.7, 0.8, 0.9, 1.0, 1.1, 1.2, 1.3, 1.4, 1.5]\ncom_shift_mm = [-20, -15, -10, -5, 0, 5, 10, 15, 20, 25]\n";

fn csv_text(head: &[String], rows: &[Vec<String>]) -> String {
    let mut w = csv::WriterBuilder::new()
        .terminator(csv::Terminator::Any(b'\n'))
        .from_writer(Vec::new());
    w.write_record(head).unwrap();
    for r in rows {
        w.write_record(r).unwrap();
    }
    String::from_utf8(w.into_inner().unwrap()).unwrap()
}

fn main() {
    let bench_mode = std::env::args().any(|a| a == "--bench");
    let repeats = if bench_mode { 3 } else { 1 };
    let s = Scenario::from_text("bench.toml", SCENARIO, None).expect("scenario");
    let robot = s.load_robot().expect("robot");
    let cells = expand(&s);
    assert_eq!(cells.len(), 100_000);
    let mut rng = ChaCha8Rng::seed_from_u64(1);
    let mut rows: Vec<Vec<String>> = cells
        .iter()
        .map(|c| {
            c.csv_record(
                c.id(),
                "ok",
                "",
                (0..CellMetrics::COLUMNS.len())
                    .map(|k| format!("{}", 0.1234567 * (k + c.index) as f64)),
            )
        })
        .collect();
    rows.shuffle(&mut rng);
    let timing: Vec<Vec<String>> = rows
        .iter()
        .map(|r| {
            vec![
                r[0].clone(),
                "812.5".into(),
                "1490.25".into(),
                "NaN".into(),
                "NaN".into(),
                "3.104".into(),
            ]
        })
        .collect();
    let head = runner::header();
    let timing_head: Vec<String> = runner::TIMING_COLUMNS
        .iter()
        .map(|c| c.to_string())
        .collect();
    let root =
        std::env::temp_dir().join(format!("gripsweep-bench-run-folder-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&root);
    let inputs = runner::manifest_inputs(&s, &robot);
    let manifest = |shard: Option<(usize, usize, usize)>| Manifest {
        tool: "gripsweep".into(),
        tool_version: "bench".into(),
        scenario_name: s.name.clone(),
        scenario_source: s.source.clone(),
        scenario_sha256: String::new(),
        inputs: inputs.clone(),
        scenario_text: s.text.clone(),
        robot_source: robot.source.clone(),
        robot_facts_sha256: String::new(),
        robot_urdf_sha256: String::new(),
        collision_warning: None,
        gait: String::new(),
        duration_s: s.duration,
        seeds: s.seeds,
        plant: serde_json::Value::Null,
        axes: Manifest::axes_field(&s.axes.values),
        cell_count: cells.len(),
        shard: shard.map(|(index, count, cells)| ShardInfo {
            index,
            count,
            cells,
        }),
        slip_floor_mm: Some(0.02),
        slip_locked_mm: None,
        slip_floor_implausible: false,
        gains_sha256: None,
        onset_groups: None,
        plan_limits: serde_json::Value::Null,
        merged_from: None,
        started_unix_s: 0.0,
        finished_unix_s: Some(1.0),
    };
    let write_folder = |dir: &Path, rows: &[Vec<String>], timing: &[Vec<String>], shard| {
        std::fs::create_dir_all(dir).unwrap();
        std::fs::write(dir.join(CELLS_FILE), csv_text(&head, rows)).unwrap();
        std::fs::write(dir.join(TIMING_FILE), csv_text(&timing_head, timing)).unwrap();
        std::fs::write(
            dir.join(MANIFEST_FILE),
            serde_json::to_string_pretty(&manifest(shard)).unwrap(),
        )
        .unwrap();
    };

    // Two shards of 50 000 cells each.
    let k = 2;
    let mut shard_dirs = Vec::new();
    for i in 0..k {
        let pick = |r: &&Vec<String>| r[1].parse::<usize>().unwrap() % k == i;
        let r: Vec<Vec<String>> = rows.iter().filter(pick).cloned().collect();
        let ids: std::collections::HashSet<&String> = r.iter().map(|x| &x[0]).collect();
        let t: Vec<Vec<String>> = timing
            .iter()
            .filter(|x| ids.contains(&x[0]))
            .cloned()
            .collect();
        let d = root.join(format!("shard-{i}"));
        write_folder(&d, &r, &t, Some((i, k, r.len())));
        shard_dirs.push(d);
    }
    let mut merge_s = Vec::new();
    let mut rewrite_s = Vec::new();
    for rep in 0..repeats {
        let out = root.join(format!("merged-{rep}"));
        let t0 = Instant::now();
        let n = runner::merge(&shard_dirs, &out, false, true).expect("merge");
        merge_s.push(t0.elapsed().as_secs_f64());
        assert_eq!(n, 100_000);

        let one = root.join(format!("run-{rep}"));
        write_folder(&one, &rows, &timing, None);
        let t0 = Instant::now();
        runner::rewrite_in_matrix_order(&one).expect("rewrite");
        rewrite_s.push(t0.elapsed().as_secs_f64());
        assert_eq!(
            std::fs::read(one.join(CELLS_FILE)).unwrap(),
            std::fs::read(out.join(CELLS_FILE)).unwrap(),
            "the rewritten run and the merge differ"
        );
    }
    let median = |v: &mut Vec<f64>| {
        v.sort_by(|a, b| a.total_cmp(b));
        v[v.len() / 2]
    };
    println!(
        "100000 cells: merge of 2 shards {:.3} s, end-of-run rewrite {:.3} s (median of {repeats})",
        median(&mut merge_s),
        median(&mut rewrite_s)
    );
    let _ = std::fs::remove_dir_all(&root);
}
