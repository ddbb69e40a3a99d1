//! Running a matrix: cells in parallel (rayon), rows streamed to `cells.csv` as they finish
//! (flushed and synced, so a killed run loses nothing), resume without losing or doubling a
//! cell, deterministic shards, and `merge` of shard folders into what one process would give.

use crate::cell::{CellContext, CellOutcome, run_cell_with_plan};
use crate::matrix::{Cell, expand, shard};
use crate::metrics::{CellMetrics, CellStatus};
use crate::planner::Gait;
use crate::robot::LoadedRobot;
use crate::scenario::Scenario;
use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};
use rayon::prelude::*;
use serde_json::{Value, json};
use sha2::{Digest, Sha256};
use std::collections::HashSet;
use std::fs::{File, OpenOptions};
use std::io::{IsTerminal, Read, Seek, SeekFrom, Write};
use std::path::{Path, PathBuf};
use std::sync::mpsc;
use std::time::{Instant, SystemTime, UNIX_EPOCH};

pub const CELLS_FILE: &str = "cells.csv";
pub const TIMING_FILE: &str = "timing.csv";
pub const MANIFEST_FILE: &str = "manifest.json";

pub const TIMING_COLUMNS: [&str; 4] = ["cell_id", "compute_median_us", "compute_p99_us", "wall_s"];

/// A run failure, with the exit code the command should end with (2: bad input or an output
/// folder in the way; 1: anything else).
#[derive(Debug)]
pub struct RunError {
    pub message: String,
    pub code: i32,
}

impl RunError {
    pub fn input(message: impl Into<String>) -> Self {
        RunError {
            message: message.into(),
            code: 2,
        }
    }
    pub fn other(message: impl Into<String>) -> Self {
        RunError {
            message: message.into(),
            code: 1,
        }
    }
}

#[derive(Clone, Debug, Default)]
pub struct RunOptions {
    pub out: PathBuf,
    pub threads: Option<usize>,
    /// (index, count), 0-based index.
    pub shard: Option<(usize, usize)>,
    pub resume: bool,
    pub force: bool,
    pub quiet: bool,
    /// Skip the report (tests and shards).
    pub no_report: bool,
    /// Reuse this tuning table (`gains.csv` of an earlier run or of `gripsweep tune --out`)
    /// instead of tuning; it must match the scenario's robot files, plant settings and laws.
    pub gains_from: Option<PathBuf>,
}

#[derive(Clone, Debug)]
pub struct RunSummary {
    pub cells_total: usize,
    pub cells_run: usize,
    pub cells_skipped: usize,
    pub failures: usize,
    pub slip_floor_mm: f64,
    pub wall_s: f64,
}

fn header() -> Vec<String> {
    // Identity, the axes (crate::matrix::AXIS_NAMES), the outcome, the metrics.
    let mut h: Vec<String> = ["cell_id", "index"]
        .iter()
        .chain(crate::matrix::AXIS_NAMES.iter())
        .map(|s| s.to_string())
        .collect();
    h.push("status".into());
    h.push("message".into());
    h.extend(CellMetrics::COLUMNS.iter().map(|s| s.to_string()));
    h
}

/// Rust's shortest round-trip formatting: bit-identical text for bit-identical numbers.
fn num(x: f64) -> String {
    format!("{x}")
}

fn cell_record(cell: &Cell, out: &CellOutcome) -> Vec<String> {
    let mut r = vec![
        cell.id(),
        cell.index.to_string(),
        num(cell.slope_deg),
        num(cell.mu),
        num(cell.rate_hz),
        cell.actuator.name().to_string(),
        cell.controller.clone(),
        num(cell.mass_scale),
        num(cell.com_shift_mm),
        num(cell.sensor_noise),
        cell.seed.to_string(),
        out.status.name().to_string(),
        out.message.clone(),
    ];
    r.extend(out.metrics.values().iter().map(|v| num(*v)));
    r
}

fn csv_line(fields: &[String]) -> String {
    let mut w = csv::WriterBuilder::new()
        .terminator(csv::Terminator::Any(b'\n'))
        .from_writer(Vec::new());
    w.write_record(fields).expect("writing to memory");
    String::from_utf8(w.into_inner().expect("memory")).expect("utf-8")
}

fn sha256_hex(text: &str) -> String {
    Sha256::digest(text.as_bytes())
        .iter()
        .map(|b| format!("{b:02x}"))
        .collect()
}

fn now_unix() -> f64 {
    SystemTime::now()
        .duration_since(UNIX_EPOCH)
        .map(|d| d.as_secs_f64())
        .unwrap_or(0.0)
}

/// An append-only CSV file whose rows survive a kill: a torn last line (no newline) is cut off
/// on open, each row is written whole, flushed and synced.
struct RowFile {
    file: File,
}

impl RowFile {
    fn open(path: &Path, header: &[String]) -> Result<(RowFile, Vec<Vec<String>>), String> {
        let mut file = OpenOptions::new()
            .read(true)
            .append(true)
            .create(true)
            .open(path)
            .map_err(|e| format!("{}: {e}", path.display()))?;
        let mut text = String::new();
        file.read_to_string(&mut text)
            .map_err(|e| format!("{}: {e}", path.display()))?;
        let keep = match text.rfind('\n') {
            Some(i) => i + 1,
            None => 0,
        };
        if keep < text.len() {
            file.set_len(keep as u64)
                .map_err(|e| format!("{}: {e}", path.display()))?;
            file.seek(SeekFrom::End(0))
                .map_err(|e| format!("{}: {e}", path.display()))?;
        }
        let mut rows = Vec::new();
        if keep == 0 {
            file.write_all(csv_line(header).as_bytes())
                .map_err(|e| format!("{}: {e}", path.display()))?;
            file.sync_data()
                .map_err(|e| format!("{}: {e}", path.display()))?;
        } else {
            let mut rdr = csv::ReaderBuilder::new()
                .has_headers(true)
                .from_reader(&text.as_bytes()[..keep]);
            let found: Vec<String> = rdr
                .headers()
                .map_err(|e| format!("{}: {e}", path.display()))?
                .iter()
                .map(String::from)
                .collect();
            if found != header {
                return Err(format!(
                    "{}: the header does not match this version's columns",
                    path.display()
                ));
            }
            for (i, rec) in rdr.records().enumerate() {
                let rec = rec.map_err(|e| format!("{}: row {}: {e}", path.display(), i + 2))?;
                rows.push(rec.iter().map(String::from).collect());
            }
        }
        Ok((RowFile { file }, rows))
    }

    fn append(&mut self, fields: &[String]) -> std::io::Result<()> {
        self.file.write_all(csv_line(fields).as_bytes())?;
        self.file.flush()?;
        self.file.sync_data()
    }
}

/// Rewrite a CSV with its rows in matrix order (index column 1 for cells, by id order for
/// timing), atomically.
fn write_sorted(path: &Path, header: &[String], rows: &[Vec<String>]) -> Result<(), String> {
    let tmp = path.with_extension("csv.tmp");
    let mut text = csv_line(header);
    for r in rows {
        text.push_str(&csv_line(r));
    }
    std::fs::write(&tmp, text).map_err(|e| format!("{}: {e}", tmp.display()))?;
    File::open(&tmp)
        .and_then(|f| f.sync_all())
        .map_err(|e| format!("{}: {e}", tmp.display()))?;
    std::fs::rename(&tmp, path).map_err(|e| format!("{}: {e}", path.display()))
}

fn gait_json(g: &Gait) -> Value {
    json!(format!("{g:?}"))
}

fn manifest(
    s: &Scenario,
    robot: &LoadedRobot,
    opts: &RunOptions,
    total: usize,
    in_shard: usize,
    floor: f64,
) -> Value {
    let a = &s.axes;
    json!({
        "tool": "gripsweep",
        "tool_version": env!("CARGO_PKG_VERSION"),
        "scenario_name": s.name,
        "scenario_source": s.source,
        "scenario_sha256": sha256_hex(&s.text),
        "scenario_text": s.text,
        "robot_source": robot.source,
        "robot_facts_sha256": sha256_hex(&robot.facts_text),
        "robot_urdf_sha256": sha256_hex(&robot.urdf_text),
        "gait": gait_json(&s.gait),
        "duration_s": s.duration,
        "seeds": s.seeds,
        "plant": { "dt_s": s.plant.dt, "substeps": s.plant.substeps, "contact_hz": s.plant.contact_hz,
                   "contact_damping": s.plant.contact_damping, "joint_limits": s.plant.joint_limits },
        "axes": {
            "slope_deg": a.slope_deg, "mu": a.mu, "rate_hz": a.rate_hz,
            "actuator": a.actuator.iter().map(|k| k.name()).collect::<Vec<_>>(),
            "controller": a.controller, "mass_scale": a.mass_scale, "com_shift_mm": a.com_shift_mm,
            "sensor_noise": a.sensor_noise,
        },
        "cell_count": total,
        "shard": opts.shard.map(|(i, k)| json!({"index": i, "count": k, "cells": in_shard})),
        "slip_floor_mm": floor,
        "started_unix_s": now_unix(),
        "finished_unix_s": Value::Null,
    })
}

fn read_manifest(dir: &Path) -> Result<Value, String> {
    let p = dir.join(MANIFEST_FILE);
    let text = std::fs::read_to_string(&p).map_err(|e| format!("{}: {e}", p.display()))?;
    serde_json::from_str(&text).map_err(|e| format!("{}: not valid JSON: {e}", p.display()))
}

fn write_manifest(dir: &Path, m: &Value) -> Result<(), String> {
    // Written to a temporary file and renamed, so a kill never leaves a torn manifest.
    let p = dir.join(MANIFEST_FILE);
    let tmp = dir.join("manifest.json.tmp");
    let text = serde_json::to_string_pretty(m).expect("json");
    std::fs::write(&tmp, text + "\n").map_err(|e| format!("{}: {e}", tmp.display()))?;
    std::fs::rename(&tmp, &p).map_err(|e| format!("{}: {e}", p.display()))
}

/// The apparent slip of feet that do not move, for this scenario's robot and plant settings
/// (joints locked by the engine, no controller; see [`crate::floor`]).
pub fn slip_floor(s: &Scenario, robot: &LoadedRobot) -> f64 {
    crate::floor::slip_floor(s, robot)
}

/// Run a scenario's cells (or one shard of them) into `opts.out`.
pub fn run(s: &Scenario, opts: &RunOptions) -> Result<RunSummary, RunError> {
    let started = Instant::now();
    let robot = s.load_robot().map_err(RunError::input)?;
    s.check_plans(&robot).map_err(|e| RunError::input(e.0))?;
    let all = expand(s);
    let total = all.len();
    let cells = match opts.shard {
        Some((i, k)) => shard(all, i, k),
        None => all,
    };
    let out = &opts.out;
    let exists = out.exists()
        && std::fs::read_dir(out)
            .map(|mut d| d.next().is_some())
            .unwrap_or(false);
    let scenario_hash = sha256_hex(&s.text);
    // Gains first (a reused table that does not fit is refused before anything is written):
    // a table given with --gains-from, the folder's own on --resume, or a fresh tuning.
    let own_table = out.join(crate::tuning::GAINS_FILE);
    let table = if let Some(p) = &opts.gains_from {
        crate::tuning::read_table(p, s, &robot).map_err(RunError::input)?
    } else if opts.resume && exists && own_table.is_file() {
        crate::tuning::read_table(&own_table, s, &robot).map_err(RunError::input)?
    } else {
        if !opts.quiet {
            eprintln!(
                "gripsweep: tuning {} (law, rate, actuator) combinations",
                crate::tuning::combos(s).len()
            );
        }
        crate::tuning::tune(s, &robot, opts.threads).map_err(RunError::input)?
    };
    let gains_csv = table.to_csv();
    let mut tuned = s.clone();
    table.apply(&mut tuned);
    let s = &tuned;
    let mut floor = f64::NAN;
    if exists {
        if opts.resume {
            let m = read_manifest(out).map_err(RunError::input)?;
            if m["scenario_sha256"].as_str() != Some(scenario_hash.as_str()) {
                return Err(RunError::input(format!(
                    "{}: --resume: the folder holds a run of a different scenario ({}); refusing to mix results",
                    out.display(),
                    m["scenario_source"].as_str().unwrap_or("?")
                )));
            }
            let shard_then = m["shard"].as_object().map(|o| {
                (
                    o["index"].as_u64().unwrap_or(0) as usize,
                    o["count"].as_u64().unwrap_or(0) as usize,
                )
            });
            if shard_then != opts.shard {
                return Err(RunError::input(format!(
                    "{}: --resume: the folder holds shard {shard_then:?}, not {:?}",
                    out.display(),
                    opts.shard
                )));
            }
            floor = m["slip_floor_mm"].as_f64().unwrap_or(f64::NAN);
        } else if opts.force {
            std::fs::remove_dir_all(out)
                .map_err(|e| RunError::other(format!("{}: {e}", out.display())))?;
        } else {
            return Err(RunError::input(format!(
                "{}: the output folder exists and is not empty; pass --resume to continue that run or --force to replace it",
                out.display()
            )));
        }
    }
    std::fs::create_dir_all(out).map_err(|e| RunError::other(format!("{}: {e}", out.display())))?;
    if floor.is_nan() {
        floor = slip_floor(s, &robot);
    }
    let mut man = if opts.resume && exists {
        read_manifest(out).map_err(RunError::other)?
    } else {
        manifest(s, &robot, opts, total, cells.len(), floor)
    };
    man["slip_floor_mm"] = json!(floor);
    // The tuning table is one more input of the run: written with the folder, hashed here.
    std::fs::write(out.join(crate::tuning::GAINS_FILE), &gains_csv)
        .map_err(|e| RunError::other(format!("{}: {e}", out.display())))?;
    man["gains_sha256"] = json!(sha256_hex(&gains_csv));
    if man.get("slip_locked_mm").is_none() {
        man["slip_locked_mm"] = json!(crate::floor::locked_slip(s, &robot));
    }
    let implausible = floor.is_nan() || floor > crate::floor::FLOOR_BOUND_MM;
    man["slip_floor_implausible"] = json!(implausible);
    if implausible {
        eprintln!(
            "gripsweep: warning: the slip floor is {floor:.3} mm per stance phase, above the plausible {} mm (locked joints should not creep); no table ranks the laws on slip",
            crate::floor::FLOOR_BOUND_MM
        );
    }
    if s.onset.is_some() {
        let n = crate::onset::groups(s)
            .into_iter()
            .filter(|g| opts.shard.is_none_or(|(i, k)| g.index % k == i))
            .count();
        man["onset_groups"] = json!(n);
    }
    write_manifest(out, &man).map_err(RunError::other)?;

    let head = header();
    let timing_head: Vec<String> = TIMING_COLUMNS.iter().map(|s| s.to_string()).collect();
    let (mut cells_file, done_rows) =
        RowFile::open(&out.join(CELLS_FILE), &head).map_err(RunError::other)?;
    let (mut timing_file, _) =
        RowFile::open(&out.join(TIMING_FILE), &timing_head).map_err(RunError::other)?;
    let done: HashSet<String> = done_rows.iter().map(|r| r[0].clone()).collect();
    let todo: Vec<&Cell> = cells.iter().filter(|c| !done.contains(&c.id())).collect();
    let skipped = cells.len() - todo.len();
    let mut failures = done_rows.iter().filter(|r| r[11] != "ok").count();

    let bar = progress_bar(cells.len() as u64, skipped as u64, opts.quiet);
    let ctx = CellContext {
        scenario: s,
        robot: &robot,
    };
    let mut write_error = None;
    let mut plain_last = Instant::now();
    let n_todo = todo.len();
    // One plan per slope, shared by every cell on it (a plan does not depend on the other
    // axes); a slope whose plan fails is left to its cells, which report it as an error.
    let plans: Vec<(f64, crate::planner::Plan)> = s
        .axes
        .slope_deg
        .iter()
        .filter_map(|&deg| {
            let slope = crate::plant::terrain::Slope::degrees(deg);
            crate::planner::Plan::build(&robot.model, &robot.facts, &slope, &s.gait, s.duration)
                .ok()
                .map(|p| (deg, p))
        })
        .collect();
    let plan_for = |deg: f64| plans.iter().find(|(d, _)| *d == deg).map(|(_, p)| p);
    parallel_units(
        opts.threads,
        &todo,
        |cell| run_cell_with_plan(&ctx, cell, plan_for(cell.slope_deg), None),
        |done_now, i, outcome| {
            let cell = todo[i];
            if outcome.status != CellStatus::Ok {
                failures += 1;
            }
            let rec = cell_record(cell, &outcome);
            let timing = vec![
                cell.id(),
                num(outcome.compute_median_us),
                num(outcome.compute_p99_us),
                format!("{:.3}", outcome.wall_s),
            ];
            if write_error.is_none()
                && let Err(e) = cells_file
                    .append(&rec)
                    .and_then(|_| timing_file.append(&timing))
            {
                write_error = Some(format!("{}: {e}", out.display()));
            }
            bar.inc(1);
            bar.set_message(format!("failures {failures}"));
            if !opts.quiet
                && bar.is_hidden()
                && (plain_last.elapsed().as_secs_f64() > 10.0 || done_now + 1 == n_todo)
            {
                plain_last = Instant::now();
                let elapsed = started.elapsed().as_secs_f64();
                let rate = (done_now + 1) as f64 / elapsed.max(1e-9);
                let left = (n_todo - done_now - 1) as f64 / rate.max(1e-9);
                eprintln!(
                    "gripsweep: {}/{} cells, {:.2} cells/s, about {:.0} s left, {failures} not ok",
                    skipped + done_now + 1,
                    cells.len(),
                    rate,
                    left
                );
            }
        },
    )
    .map_err(RunError::other)?;
    bar.finish_and_clear();
    if let Some(e) = write_error {
        return Err(RunError::other(e));
    }
    if let Some(o) = &s.onset {
        run_onset(s, &robot, o, opts, floor).map_err(RunError::other)?;
    }

    // Complete: rewrite both files in matrix order, so a finished folder is byte-identical
    // whatever the thread count, the order of completion or the number of resumes.
    finalize(out, &head, &timing_head).map_err(RunError::other)?;
    man["finished_unix_s"] = json!(now_unix());
    write_manifest(out, &man).map_err(RunError::other)?;
    if opts.shard.is_none() && !opts.no_report {
        write_report(out).map_err(RunError::other)?;
    }
    Ok(RunSummary {
        cells_total: cells.len(),
        cells_run: n_todo,
        cells_skipped: skipped,
        failures,
        slip_floor_mm: floor,
        wall_s: started.elapsed().as_secs_f64(),
    })
}

/// Run `work` on every unit in parallel (rayon, `threads` workers, default one per core) and
/// hand each result to `done(count_so_far, unit_index, result)` on the calling thread, in
/// completion order.
fn parallel_units<U: Sync, R: Send>(
    threads: Option<usize>,
    units: &[U],
    work: impl Fn(&U) -> R + Sync,
    mut done: impl FnMut(usize, usize, R),
) -> Result<(), String> {
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(threads.unwrap_or(0))
        .build()
        .map_err(|e| format!("thread pool: {e}"))?;
    let (tx, rx) = mpsc::channel::<(usize, R)>();
    std::thread::scope(|scope| {
        let work = &work;
        scope.spawn(move || {
            pool.install(|| {
                units
                    .par_iter()
                    // One unit per task: rayon's default splits handed a thread long runs of
                    // cells, which left one core idle at the end of a run.
                    .with_max_len(1)
                    .enumerate()
                    .for_each_with(tx, |tx, (i, u)| {
                        let _ = tx.send((i, work(u)));
                    });
            });
        });
        for (n, (i, r)) in rx.iter().enumerate() {
            done(n, i, r);
        }
    });
    Ok(())
}

/// The slip-onset study of a scenario (its `[onset]` table), into `onset.csv`.
fn run_onset(
    s: &Scenario,
    robot: &LoadedRobot,
    o: &crate::scenario::OnsetFile,
    opts: &RunOptions,
    floor: f64,
) -> Result<(), String> {
    use crate::onset::{ONSET_COLUMNS, ONSET_FILE, bisect, groups, record};
    let mut all = groups(s);
    if let Some((i, k)) = opts.shard {
        all.retain(|g| g.index % k == i);
    }
    let head: Vec<String> = ONSET_COLUMNS.iter().map(|c| c.to_string()).collect();
    let path = opts.out.join(ONSET_FILE);
    let (mut file, done_rows) = RowFile::open(&path, &head)?;
    let done: HashSet<String> = done_rows.iter().map(|r| r[0].clone()).collect();
    let todo: Vec<_> = all
        .into_iter()
        .filter(|g| !done.contains(&g.id()))
        .collect();
    if !opts.quiet && !todo.is_empty() {
        eprintln!(
            "gripsweep: slip-onset study, {} groups by bisection",
            todo.len()
        );
    }
    let mut err = None;
    parallel_units(
        opts.threads,
        &todo,
        |g| bisect(s, robot, o, g, floor),
        |_, i, (deg, runs)| {
            if err.is_none()
                && let Err(e) = file.append(&record(&todo[i], deg, runs))
            {
                err = Some(format!("{}: {e}", path.display()));
            }
        },
    )?;
    if let Some(e) = err {
        return Err(e);
    }
    let (_, mut rows) = read_rows(&path)?;
    rows.sort_by_key(|r| r[1].parse::<usize>().unwrap_or(usize::MAX));
    write_sorted(&path, &head, &rows)
}

fn progress_bar(len: u64, pos: u64, quiet: bool) -> ProgressBar {
    if quiet || !std::io::stderr().is_terminal() {
        return ProgressBar::hidden();
    }
    let bar = ProgressBar::with_draw_target(Some(len), ProgressDrawTarget::stderr());
    bar.set_style(
        ProgressStyle::with_template(
            "{bar:32.green/white} {pos}/{len} cells  {per_sec}  left {eta}  {msg}",
        )
        .unwrap_or_else(|_| ProgressStyle::default_bar()),
    );
    bar.set_position(pos);
    bar
}

fn read_rows(path: &Path) -> Result<(Vec<String>, Vec<Vec<String>>), String> {
    let mut rdr = csv::Reader::from_path(path).map_err(|e| format!("{}: {e}", path.display()))?;
    let head = rdr
        .headers()
        .map_err(|e| format!("{}: {e}", path.display()))?
        .iter()
        .map(String::from)
        .collect();
    let mut rows = Vec::new();
    for (i, rec) in rdr.records().enumerate() {
        rows.push(
            rec.map_err(|e| format!("{}: row {}: {e}", path.display(), i + 2))?
                .iter()
                .map(String::from)
                .collect(),
        );
    }
    Ok((head, rows))
}

fn finalize(out: &Path, head: &[String], timing_head: &[String]) -> Result<(), String> {
    let (_, mut rows) = read_rows(&out.join(CELLS_FILE))?;
    rows.sort_by_key(|r| r[1].parse::<usize>().unwrap_or(usize::MAX));
    write_sorted(&out.join(CELLS_FILE), head, &rows)?;
    let order: Vec<String> = rows.iter().map(|r| r[0].clone()).collect();
    let (_, mut timing) = read_rows(&out.join(TIMING_FILE))?;
    timing.sort_by_key(|r| {
        order
            .iter()
            .position(|id| *id == r[0])
            .unwrap_or(usize::MAX)
    });
    timing.dedup_by(|a, b| a[0] == b[0]);
    write_sorted(&out.join(TIMING_FILE), timing_head, &timing)
}

/// Join shard folders into `out`: refuses mixed scenarios, missing or incomplete shards,
/// naming them.
pub fn merge(
    dirs: &[PathBuf],
    out: &Path,
    force: bool,
    no_report: bool,
) -> Result<usize, RunError> {
    if dirs.is_empty() {
        return Err(RunError::input("merge: give the shard folders to join"));
    }
    let mut shards = Vec::new();
    for d in dirs {
        let m = read_manifest(d).map_err(RunError::input)?;
        let Some(sh) = m["shard"].as_object() else {
            return Err(RunError::input(format!(
                "{}: not a shard (its manifest has no shard)",
                d.display()
            )));
        };
        let (i, k, n) = (
            sh["index"].as_u64().unwrap_or(0) as usize,
            sh["count"].as_u64().unwrap_or(0) as usize,
            sh["cells"].as_u64().unwrap_or(0) as usize,
        );
        shards.push((d.clone(), m, i, k, n));
    }
    let (first_hash, k) = (shards[0].1["scenario_sha256"].clone(), shards[0].3);
    for (d, m, _, kk, _) in &shards {
        if m["scenario_sha256"] != first_hash {
            return Err(RunError::input(format!(
                "{}: a shard of a different scenario than {}",
                d.display(),
                shards[0].0.display()
            )));
        }
        if m["gains_sha256"] != shards[0].1["gains_sha256"] {
            return Err(RunError::input(format!(
                "{}: ran with other gains (gains.csv) than {}; tune once and pass the table to every shard with --gains-from",
                d.display(),
                shards[0].0.display()
            )));
        }
        if *kk != k {
            return Err(RunError::input(format!(
                "{}: a shard of {kk}, the others of {k}",
                d.display()
            )));
        }
    }
    let mut seen = vec![None; k];
    for (d, _, i, _, _) in &shards {
        if *i >= k {
            return Err(RunError::input(format!(
                "{}: shard index {} out of range for {k} shards",
                d.display(),
                i + 1
            )));
        }
        if let Some(prev) = &seen[*i] {
            return Err(RunError::input(format!(
                "shard {}/{k} given twice: {} and {}",
                i + 1,
                Path::new(prev).display(),
                d.display()
            )));
        }
        seen[*i] = Some(d.display().to_string());
    }
    let missing: Vec<String> = (0..k)
        .filter(|i| seen[*i].is_none())
        .map(|i| format!("{}/{k}", i + 1))
        .collect();
    if !missing.is_empty() {
        return Err(RunError::input(format!(
            "merge: missing shard(s) {}; run them and merge again",
            missing.join(", ")
        )));
    }
    let mut all_rows = Vec::new();
    let mut all_timing = Vec::new();
    let mut incomplete = Vec::new();
    for (d, m, i, _, n) in &shards {
        let (_, rows) = read_rows(&d.join(CELLS_FILE)).map_err(RunError::input)?;
        let unique: HashSet<&String> = rows.iter().map(|r| &r[0]).collect();
        if unique.len() != *n || m["finished_unix_s"].is_null() {
            incomplete.push(format!(
                "{}/{k} ({} of {n} cells, in {})",
                i + 1,
                unique.len(),
                d.display()
            ));
            continue;
        }
        all_rows.extend(rows);
        if let Ok((_, t)) = read_rows(&d.join(TIMING_FILE)) {
            all_timing.extend(t);
        }
    }
    if !incomplete.is_empty() {
        return Err(RunError::input(format!(
            "merge: incomplete shard(s) {}; finish them with `gripsweep run … --shard I/K --resume` and merge again",
            incomplete.join(", ")
        )));
    }
    if out.exists()
        && std::fs::read_dir(out)
            .map(|mut r| r.next().is_some())
            .unwrap_or(false)
    {
        if !force {
            return Err(RunError::input(format!(
                "{}: the output folder exists and is not empty; pass --force to replace it",
                out.display()
            )));
        }
        std::fs::remove_dir_all(out)
            .map_err(|e| RunError::other(format!("{}: {e}", out.display())))?;
    }
    std::fs::create_dir_all(out).map_err(|e| RunError::other(format!("{}: {e}", out.display())))?;
    // Every shard ran with the same tuning table (checked above): the joined run's is that one.
    let gains = shards[0].0.join(crate::tuning::GAINS_FILE);
    if gains.is_file() {
        std::fs::copy(&gains, out.join(crate::tuning::GAINS_FILE))
            .map_err(|e| RunError::other(format!("{}: {e}", gains.display())))?;
    }
    all_rows.sort_by_key(|r| r[1].parse::<usize>().unwrap_or(usize::MAX));
    let head = header();
    write_sorted(&out.join(CELLS_FILE), &head, &all_rows).map_err(RunError::other)?;
    let order: Vec<String> = all_rows.iter().map(|r| r[0].clone()).collect();
    all_timing.sort_by_key(|r| {
        order
            .iter()
            .position(|id| *id == r[0])
            .unwrap_or(usize::MAX)
    });
    let timing_head: Vec<String> = TIMING_COLUMNS.iter().map(|s| s.to_string()).collect();
    write_sorted(&out.join(TIMING_FILE), &timing_head, &all_timing).map_err(RunError::other)?;
    // The slip-onset study, when the scenario has one: every shard's groups, complete.
    if shards[0]
        .1
        .get("onset_groups")
        .is_some_and(|v| !v.is_null())
    {
        use crate::onset::{ONSET_COLUMNS, ONSET_FILE};
        let mut rows = Vec::new();
        let mut short = Vec::new();
        for (d, m, i, _, _) in &shards {
            let want = m["onset_groups"].as_u64().unwrap_or(0) as usize;
            let got = read_rows(&d.join(ONSET_FILE))
                .map(|(_, r)| r)
                .unwrap_or_default();
            if got.len() != want {
                short.push(format!(
                    "{}/{k} ({} of {want} onset groups, in {})",
                    i + 1,
                    got.len(),
                    d.display()
                ));
            }
            rows.extend(got);
        }
        if !short.is_empty() {
            let _ = std::fs::remove_dir_all(out);
            return Err(RunError::input(format!(
                "merge: incomplete slip-onset study in shard(s) {}; resume them and merge again",
                short.join(", ")
            )));
        }
        rows.sort_by_key(|r| r[1].parse::<usize>().unwrap_or(usize::MAX));
        let head: Vec<String> = ONSET_COLUMNS.iter().map(|c| c.to_string()).collect();
        write_sorted(&out.join(ONSET_FILE), &head, &rows).map_err(RunError::other)?;
    }
    let mut man = shards[0].1.clone();
    man["shard"] = Value::Null;
    if man.get("onset_groups").is_some() {
        man["onset_groups"] = json!(
            shards
                .iter()
                .map(|x| x.1["onset_groups"].as_u64().unwrap_or(0))
                .sum::<u64>()
        );
    }
    man["merged_from"] = json!(
        dirs.iter()
            .map(|d| d.display().to_string())
            .collect::<Vec<_>>()
    );
    man["finished_unix_s"] = json!(now_unix());
    write_manifest(out, &man).map_err(RunError::other)?;
    if !no_report {
        write_report(out).map_err(RunError::other)?;
    }
    Ok(all_rows.len())
}

/// Tables and plots of a finished run folder.
pub fn write_report(dir: &Path) -> Result<(), String> {
    crate::report::write_report(dir).map(|_| ())
}
