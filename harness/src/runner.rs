//! Running a matrix: cells in parallel (rayon), rows streamed to `cells.csv` as they finish
//! (flushed and synced, so a killed run loses nothing), resume without losing or doubling a
//! cell, deterministic shards, and `merge` of shard folders into what one process would give.

use crate::cell::{CellContext, CellOutcome, run_cell_with_plan};
use crate::matrix::{Cell, expand, shard};
use crate::planner::Gait;
use crate::robot::LoadedRobot;
use crate::run_folder::{
    FolderState, check_replaceable, compare_inputs, folder_state, input_entry, read_manifest,
    remove_tool_files, sha256_hex,
};
use crate::run_format::{Manifest, Outcome, ShardInfo, metric_columns};
use crate::scenario::Scenario;
use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};
use rayon::prelude::*;
use serde_json::{Value, json};
use std::collections::{HashMap, HashSet};
use std::fs::{File, OpenOptions};
use std::io::{IsTerminal, Seek, SeekFrom, Write};
use std::path::{Path, PathBuf};
use std::sync::mpsc;
use std::time::{Instant, SystemTime, UNIX_EPOCH};

pub use crate::run_format::{CELLS_FILE, MANIFEST_FILE, TIMING_COLUMNS, TIMING_FILE};

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

/// The columns of `cells.csv` ([`crate::run_format::cells_header`]).
pub fn header() -> Vec<String> {
    crate::run_format::cells_header()
}

/// Rust's shortest round-trip formatting: bit-identical text for bit-identical numbers.
fn num(x: f64) -> String {
    crate::run_format::num_text(x)
}

fn cell_record(cell: &Cell, out: &CellOutcome) -> Vec<String> {
    cell.csv_record(
        cell.id(),
        out.status.name(),
        &out.message,
        out.metrics.values().iter().map(|v| num(*v)),
    )
}

fn csv_line(fields: &[String]) -> String {
    let mut w = csv::WriterBuilder::new()
        .terminator(csv::Terminator::Any(b'\n'))
        .from_writer(Vec::new());
    w.write_record(fields).expect("writing to memory");
    String::from_utf8(w.into_inner().expect("memory")).expect("utf-8")
}

fn now_unix() -> f64 {
    SystemTime::now()
        .duration_since(UNIX_EPOCH)
        .map(|d| d.as_secs_f64())
        .unwrap_or(0.0)
}

/// An append-only CSV file whose rows survive a kill: each row is written whole, flushed and
/// synced. Opened after its kept rows were checked ([`crate::run_folder::complete_lines`],
/// [`crate::run_folder::check_rows`]); a torn last line is cut only then.
struct RowFile {
    file: File,
}

impl RowFile {
    /// Open for appending, keeping the first `keep` bytes (0: a new file, header written).
    fn open(path: &Path, header: &[String], keep: u64) -> Result<RowFile, String> {
        let mut file = OpenOptions::new()
            .read(true)
            .append(true)
            .create(true)
            .open(path)
            .map_err(|e| format!("{}: {e}", path.display()))?;
        let len = file
            .metadata()
            .map_err(|e| format!("{}: {e}", path.display()))?
            .len();
        if keep < len {
            file.set_len(keep)
                .map_err(|e| format!("{}: {e}", path.display()))?;
            file.seek(SeekFrom::End(0))
                .map_err(|e| format!("{}: {e}", path.display()))?;
        }
        if keep == 0 {
            file.write_all(csv_line(header).as_bytes())
                .map_err(|e| format!("{}: {e}", path.display()))?;
            file.sync_data()
                .map_err(|e| format!("{}: {e}", path.display()))?;
        }
        Ok(RowFile { file })
    }

    fn append(&mut self, fields: &[String]) -> std::io::Result<()> {
        self.file.write_all(csv_line(fields).as_bytes())?;
        self.file.flush()?;
        self.file.sync_data()
    }
}

/// The rows kept in a run-folder CSV and the byte length they end at: the complete lines,
/// each checked by `check`; a missing file keeps nothing.
fn kept_rows(
    path: &Path,
    header: &[String],
    check: impl FnMut(&csv::StringRecord) -> Result<(), String>,
) -> Result<(Vec<csv::StringRecord>, u64), String> {
    if !path.exists() {
        return Ok((Vec::new(), 0));
    }
    let (bytes, _) = crate::run_folder::complete_lines(path)?;
    if bytes.is_empty() {
        return Ok((Vec::new(), 0));
    }
    let rows = crate::run_folder::check_rows(path, &bytes, header, check)?;
    Ok((rows, bytes.len() as u64))
}

/// A check of `cells.csv` rows against the cells they may hold (`expected`, by id): the cell
/// id is one of them and appears once, the index and axis columns are that cell's, the status
/// is known and every metric column is a number. Columns are found by name.
fn cell_row_check<'a>(
    header: &'a [String],
    expected: &'a HashMap<String, &'a Cell>,
) -> impl FnMut(&csv::StringRecord) -> Result<(), String> + 'a {
    let mut seen: HashMap<String, u64> = HashMap::new();
    move |rec| {
        let line = rec.position().map_or(0, |p| p.line());
        let id = rec.get(0).unwrap_or("");
        let Some(cell) = expected.get(id) else {
            return Err(format!(
                "column `cell_id`: '{id}' is not a cell of this matrix (or of this shard)"
            ));
        };
        if let Some(first) = seen.insert(id.to_string(), line) {
            return Err(format!(
                "column `cell_id`: cell {id} appears twice (first on line {first})"
            ));
        }
        // The id matched already: compare the other identity columns.
        let own = cell.identity(String::new());
        for (col, value) in header.iter().zip(rec.iter()) {
            let col = col.as_str();
            if col == "cell_id" {
                continue;
            }
            if let Some((_, want)) = own.iter().find(|(n, _)| *n == col) {
                if value != want {
                    return Err(format!(
                        "column `{col}`: '{value}' is not the value of cell {id} ('{want}')"
                    ));
                }
            } else if col == "status" {
                if Outcome::parse(value).is_none() {
                    return Err(format!("column `status`: unknown status '{value}'"));
                }
            } else if metric_columns().contains(&col) && value.parse::<f64>().is_err() {
                return Err(format!("column `{col}`: '{value}' is not a number"));
            }
        }
        Ok(())
    }
}

/// A check of `timing.csv` rows: a cell of `expected`, once, and numbers.
fn timing_row_check<'a>(
    expected: &'a HashMap<String, &'a Cell>,
) -> impl FnMut(&csv::StringRecord) -> Result<(), String> + 'a {
    let mut seen: HashSet<String> = HashSet::new();
    move |rec| {
        let id = rec.get(0).unwrap_or("");
        if !expected.contains_key(id) {
            return Err(format!(
                "column `cell_id`: '{id}' is not a cell of this matrix (or of this shard)"
            ));
        }
        if !seen.insert(id.to_string()) {
            return Err(format!("column `cell_id`: cell {id} appears twice"));
        }
        for (col, value) in TIMING_COLUMNS.iter().zip(rec.iter()).skip(1) {
            if value.parse::<f64>().is_err() {
                return Err(format!("column `{col}`: '{value}' is not a number"));
            }
        }
        Ok(())
    }
}

/// A check of `onset.csv` rows: a group id of `groups`, once.
fn onset_row_check(
    groups: &HashSet<String>,
) -> impl FnMut(&csv::StringRecord) -> Result<(), String> + '_ {
    let mut seen: HashSet<String> = HashSet::new();
    move |rec| {
        let id = rec.get(0).unwrap_or("");
        if !groups.contains(id) {
            return Err(format!(
                "column `group_id`: '{id}' is not a group of this study (or of this shard)"
            ));
        }
        if !seen.insert(id.to_string()) {
            return Err(format!("column `group_id`: group {id} appears twice"));
        }
        if rec.get(1).is_none_or(|v| v.parse::<usize>().is_err()) {
            return Err("column `index`: not a whole number".into());
        }
        Ok(())
    }
}

/// Rewrite a CSV with its rows in matrix order (index column 1 for cells, by id order for
/// timing), atomically.
fn write_sorted(path: &Path, header: &[String], rows: &[Vec<String>]) -> Result<(), String> {
    let tmp = path.with_extension("csv.tmp");
    // One writer for every row (a writer per row cost more than the sort at 100 000 rows).
    let mut w = csv::WriterBuilder::new()
        .terminator(csv::Terminator::Any(b'\n'))
        .from_writer(Vec::with_capacity(rows.len() * 256));
    for r in std::iter::once(header).chain(rows.iter().map(Vec::as_slice)) {
        w.write_record(r)
            .map_err(|e| format!("{}: {e}", tmp.display()))?;
    }
    let text = w
        .into_inner()
        .map_err(|e| format!("{}: {e}", tmp.display()))?;
    std::fs::write(&tmp, text).map_err(|e| format!("{}: {e}", tmp.display()))?;
    File::open(&tmp)
        .and_then(|f| f.sync_all())
        .map_err(|e| format!("{}: {e}", tmp.display()))?;
    std::fs::rename(&tmp, path).map_err(|e| format!("{}: {e}", path.display()))
}

fn manifest(
    s: &Scenario,
    robot: &LoadedRobot,
    opts: &RunOptions,
    total: usize,
    in_shard: usize,
    floor: f64,
) -> Manifest {
    Manifest {
        tool: "gripsweep".into(),
        tool_version: env!("CARGO_PKG_VERSION").into(),
        scenario_name: s.name.clone(),
        scenario_source: s.source.clone(),
        scenario_sha256: sha256_hex(&s.text),
        inputs: manifest_inputs(s, robot),
        scenario_text: s.text.clone(),
        robot_source: robot.source.clone(),
        robot_facts_sha256: sha256_hex(&robot.facts_text),
        robot_urdf_sha256: sha256_hex(&robot.urdf_text),
        collision_warning: robot.mesh_warning(),
        gait: gait_text(&s.gait),
        duration_s: s.duration,
        seeds: s.seeds,
        plant: json!({ "dt_s": s.plant.dt, "substeps": s.plant.substeps, "contact_hz": s.plant.contact_hz,
                   "contact_damping": s.plant.contact_damping, "joint_limits": s.plant.joint_limits }),
        axes: Manifest::axes_field(&s.axes.values),
        cell_count: total,
        shard: opts.shard.map(|(index, count)| ShardInfo {
            index,
            count,
            cells: in_shard,
        }),
        slip_floor_mm: finite(floor),
        slip_locked_mm: None,
        slip_floor_implausible: false,
        gains_sha256: None,
        onset_groups: None,
        plan_limits: Value::Null,
        merged_from: None,
        started_unix_s: now_unix(),
        finished_unix_s: None,
    }
}

fn gait_text(g: &Gait) -> String {
    format!("{g:?}")
}

/// A number for the manifest: `None` (JSON null) when it is not finite.
fn finite(x: f64) -> Option<f64> {
    x.is_finite().then_some(x)
}

/// The plan's friction limit on each slope (planner/limit.rs), for the manifest's
/// `plan_limits`: one object per slope with `slope_deg`, `mu_required` (null when no friction
/// is enough), `at_s`, `torque_share` (null when undefined) and `mu_required_torque_limited`
/// (null when no friction is enough). A slope whose plan or limit fails is left out.
pub fn plan_limits_json(plans: &[(f64, crate::planner::Plan)]) -> Value {
    let finite = |x: f64| if x.is_finite() { json!(x) } else { Value::Null };
    let rows: Vec<Value> = plans
        .par_iter()
        .map(|(deg, plan)| {
            let slope = crate::plant::terrain::Slope::degrees(*deg);
            crate::planner::limit::plan_limit(plan, &slope)
                .ok()
                .map(|l| {
                    json!({
                        "slope_deg": deg,
                        "mu_required": finite(l.mu_required),
                        "at_s": l.at_s,
                        "torque_share": finite(l.torque_share),
                        "mu_required_torque_limited": finite(l.mu_required_torque_limited),
                    })
                })
        })
        .collect::<Vec<_>>()
        .into_iter()
        .flatten()
        .collect();
    json!(rows)
}

fn write_manifest(dir: &Path, m: &Manifest) -> Result<(), String> {
    m.write(dir)
}

/// A run folder's manifest as the typed [`Manifest`] (`what`: the folder, for the message).
fn typed_manifest(dir: &Path, m: Value) -> Result<Manifest, RunError> {
    serde_json::from_value(m)
        .map_err(|e| RunError::input(format!("{}: {e}", dir.join(MANIFEST_FILE).display())))
}

/// The apparent slip of feet that do not move, for this scenario's robot and plant settings
/// (joints locked by the engine, no controller; see [`crate::floor`]).
pub fn slip_floor(s: &Scenario, robot: &LoadedRobot) -> f64 {
    crate::floor::slip_floor(s, robot)
}

/// The inputs that shape a cell, by role, each with its path and SHA-256 (manifest `inputs`).
/// `--resume` and `merge` refuse a folder whose inputs differ. A new input (a tuning table)
/// is one more entry here.
pub fn manifest_inputs(s: &Scenario, robot: &LoadedRobot) -> Value {
    let mut inputs = json!({
        "scenario": input_entry(&s.source, &s.text),
        "robot_facts": input_entry(&robot.source, &robot.facts_text),
        "urdf": input_entry(&robot.urdf_source, &robot.urdf_text),
    });
    // Collision meshes shape a cell too (a fall is seen or not): every file's hash, and the
    // meshes not found (a file that appears later changes the results). Only for a URDF with
    // mesh collisions, so other folders' inputs are unchanged.
    if !robot.meshes.is_empty() || !robot.missing_meshes.is_empty() {
        let mut listing: Vec<String> = robot
            .meshes
            .iter()
            .map(|m| format!("{} {} {}", m.link, m.file.display(), m.sha256))
            .collect();
        listing.extend(
            robot
                .missing_meshes
                .iter()
                .map(|m| format!("{} {} missing", m.link, m.uri)),
        );
        inputs["collision_meshes"] = input_entry(
            &format!(
                "{} mesh file(s) named by {}",
                listing.len(),
                robot.urdf_source
            ),
            &listing.join("\n"),
        );
    }
    // Piped laws: each program's path and SHA-256 (`external.<name>`).
    for (role, entry) in crate::pipe_law::manifest_entries(&s.external) {
        inputs[role] = entry;
    }
    inputs
}

/// The files a run reads (for `--force`: never replace a folder holding one).
fn input_paths(s: &Scenario, robot: &LoadedRobot, gains_from: Option<&PathBuf>) -> Vec<PathBuf> {
    let mut v = vec![PathBuf::from(&s.source)];
    v.extend(gains_from.cloned());
    if s.robot_path.is_some() {
        if !robot.inferred_facts {
            v.push(PathBuf::from(&robot.source));
        }
        v.push(PathBuf::from(&robot.urdf_source));
        v.extend(robot.meshes.iter().map(|m| m.file.clone()));
    }
    v
}

/// Run a scenario's cells (or one shard of them) into `opts.out`.
pub fn run(s: &Scenario, opts: &RunOptions) -> Result<RunSummary, RunError> {
    let started = Instant::now();
    let threads = crate::limits::check_threads(opts.threads).map_err(RunError::input)?;
    let robot = s.load_robot().map_err(RunError::input)?;
    s.check_plans(&robot).map_err(|e| RunError::input(e.0))?;
    let all = expand(s);
    let total = all.len();
    let cells = match opts.shard {
        Some((i, k)) => shard(all, i, k),
        None => all,
    };
    let out = &opts.out;
    let inputs = manifest_inputs(s, &robot);
    let head = header();
    let timing_head: Vec<String> = TIMING_COLUMNS.iter().map(|s| s.to_string()).collect();

    // Decide what to do with the folder before touching it; then lock it, and decide again
    // under the lock (another process may have started meanwhile).
    let resuming = match folder_state(out) {
        FolderState::Missing | FolderState::Empty => false,
        FolderState::RunFolder(_) if opts.resume => true,
        FolderState::RunFolder(_) if opts.force => {
            check_replaceable(out, &input_paths(s, &robot, opts.gains_from.as_ref()))?;
            false
        }
        FolderState::Foreign(why) if opts.resume || opts.force => {
            return Err(RunError::input(format!(
                "{}: not a run folder of gripsweep ({why}); refusing to {} it",
                out.display(),
                if opts.resume { "resume" } else { "replace" }
            )));
        }
        _ => {
            return Err(RunError::input(format!(
                "{}: the output folder exists and is not empty; pass --resume to continue that run or --force to replace it",
                out.display()
            )));
        }
    };
    // A tuning table given with --gains-from that does not fit is refused before anything is
    // written.
    let given_table = match &opts.gains_from {
        Some(p) => Some(crate::tuning::read_table(p, s, &robot).map_err(RunError::input)?),
        None => None,
    };
    std::fs::create_dir_all(out).map_err(|e| RunError::other(format!("{}: {e}", out.display())))?;
    let _lock = crate::run_folder::lock(out)?;
    let state = folder_state(out);
    let mut floor = f64::NAN;
    let mut kept = (Vec::new(), 0u64, Vec::new(), 0u64);
    let man = if resuming {
        let FolderState::RunFolder(m) = state else {
            return Err(RunError::input(format!(
                "{}: changed while this command started; try again",
                out.display()
            )));
        };
        let m = typed_manifest(out, m)?;
        let what = format!("{}: --resume", out.display());
        compare_inputs(&what, &m.inputs, &inputs).map_err(RunError::input)?;
        let shard_then = m.shard.map(|sh| (sh.index, sh.count));
        if shard_then != opts.shard {
            return Err(RunError::input(format!(
                "{what}: the folder holds shard {shard_then:?}, not {:?}",
                opts.shard
            )));
        }
        // Every kept row is checked before anything is written.
        let expected: HashMap<String, &Cell> = cells.iter().map(|c| (c.id(), c)).collect();
        let (rows, keep) = kept_rows(
            &out.join(CELLS_FILE),
            &head,
            cell_row_check(&head, &expected),
        )
        .map_err(RunError::input)?;
        let (timing, tkeep) = kept_rows(
            &out.join(TIMING_FILE),
            &timing_head,
            timing_row_check(&expected),
        )
        .map_err(RunError::input)?;
        kept = (rows, keep, timing, tkeep);
        if s.onset.is_some() {
            let groups = onset_group_ids(s, opts.shard);
            let head: Vec<String> = crate::onset::ONSET_COLUMNS
                .iter()
                .map(|c| c.to_string())
                .collect();
            kept_rows(
                &out.join(crate::onset::ONSET_FILE),
                &head,
                onset_row_check(&groups),
            )
            .map_err(RunError::input)?;
        }
        floor = m.slip_floor_mm.unwrap_or(f64::NAN);
        Some(m)
    } else {
        match state {
            FolderState::Missing | FolderState::Empty => {}
            FolderState::RunFolder(_) if opts.force => remove_tool_files(out)?,
            _ => {
                return Err(RunError::input(format!(
                    "{}: changed while this command started; try again",
                    out.display()
                )));
            }
        }
        None
    };
    // Gains, under the lock (a second writer is refused at once, not after a tuning): the
    // table given with --gains-from, the folder's own on --resume (its inputs were compared
    // above), or a fresh tuning.
    let own_table = out.join(crate::tuning::GAINS_FILE);
    let table = match given_table {
        Some(t) => t,
        None if resuming && own_table.is_file() => {
            crate::tuning::read_table(&own_table, s, &robot).map_err(RunError::input)?
        }
        None => {
            if !opts.quiet {
                eprintln!(
                    "gripsweep: tuning {} (law, rate, actuator) combinations",
                    crate::tuning::combos(s).len()
                );
            }
            crate::tuning::tune(s, &robot, threads).map_err(RunError::input)?
        }
    };
    let gains_csv = table.to_csv();
    // The folder's kept cells ran with the gains its manifest names: a resume with another
    // table would mix results.
    if resuming
        && let Some(old) = man.as_ref().and_then(|m| m.gains_sha256.as_deref())
        && old != sha256_hex(&gains_csv)
    {
        return Err(RunError::input(format!(
            "{}: --resume: the tuning table differs from the one the folder's cells ran with (SHA-256 of {} against the manifest's `gains_sha256`); resume without --gains-from, or start a new folder",
            out.display(),
            crate::tuning::GAINS_FILE
        )));
    }
    let mut tuned = s.clone();
    table.apply(&mut tuned);
    let s = &tuned;
    if floor.is_nan() {
        floor = slip_floor(s, &robot);
    }
    let mut man = man.unwrap_or_else(|| manifest(s, &robot, opts, total, cells.len(), floor));
    man.inputs = inputs;
    man.slip_floor_mm = finite(floor);
    // The tuning table is one more input of the run: written with the folder, hashed here.
    std::fs::write(out.join(crate::tuning::GAINS_FILE), &gains_csv)
        .map_err(|e| RunError::other(format!("{}: {e}", out.display())))?;
    man.gains_sha256 = Some(sha256_hex(&gains_csv));
    if man.slip_locked_mm.is_none() {
        man.slip_locked_mm = finite(crate::floor::locked_slip(s, &robot));
    }
    let implausible = floor.is_nan() || floor > crate::floor::FLOOR_BOUND_MM;
    man.slip_floor_implausible = implausible;
    if implausible {
        eprintln!(
            "gripsweep: warning: the slip floor is {floor:.3} mm per stance phase, above the plausible {} mm (a robot standing still on flat ground at μ = 1 should not creep); no table ranks the laws on slip",
            crate::floor::FLOOR_BOUND_MM
        );
    }
    if s.onset.is_some() {
        let n = crate::onset::groups(s)
            .into_iter()
            .filter(|g| opts.shard.is_none_or(|(i, k)| g.index % k == i))
            .count();
        man.onset_groups = Some(n as u64);
    }
    write_manifest(out, &man).map_err(RunError::other)?;

    let (done_rows, keep, _, tkeep) = kept;
    let mut cells_file =
        RowFile::open(&out.join(CELLS_FILE), &head, keep).map_err(RunError::other)?;
    let mut timing_file =
        RowFile::open(&out.join(TIMING_FILE), &timing_head, tkeep).map_err(RunError::other)?;
    let done: HashSet<&str> = done_rows.iter().filter_map(|r| r.get(0)).collect();
    let todo: Vec<&Cell> = cells
        .iter()
        .filter(|c| !done.contains(c.id().as_str()))
        .collect();
    let skipped = cells.len() - todo.len();
    // Kept rows were checked (`cell_row_check`): every status parses.
    let status_col = head.iter().position(|c| c == "status");
    let mut failures = done_rows
        .iter()
        .filter(|r| {
            status_col
                .and_then(|i| r.get(i))
                .and_then(Outcome::parse)
                .is_none_or(Outcome::is_failure)
        })
        .count();

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
        .numbers("slope_deg")
        .into_iter()
        .filter_map(|deg| {
            let slope = crate::plant::terrain::Slope::degrees(deg);
            crate::planner::Plan::build(&robot.model, &robot.facts, &slope, &s.gait, s.duration)
                .ok()
                .map(|p| (deg, p))
        })
        .collect();
    let plan_for = |deg: f64| plans.iter().find(|(d, _)| *d == deg).map(|(_, p)| p);
    man.plan_limits = plan_limits_json(&plans);
    write_manifest(out, &man).map_err(RunError::other)?;
    parallel_units(
        threads,
        &todo,
        // The shared plans face uphill; a cell with another heading plans its own.
        |cell| {
            let shared = if cell.number("heading_deg") == 0.0 {
                plan_for(cell.slope_deg())
            } else {
                None
            };
            run_cell_with_plan(&ctx, cell, shared, None)
        },
        |done_now, i, outcome| {
            let cell = todo[i];
            if outcome.status.is_failure() {
                failures += 1;
            }
            let rec = cell_record(cell, &outcome);
            let timing = vec![
                cell.id(),
                num(outcome.compute_median_us),
                num(outcome.compute_p99_us),
                num(outcome.child_median_us),
                num(outcome.child_p99_us),
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
        run_onset(s, &robot, o, opts, threads, floor)?;
    }

    // Complete: rewrite both files in matrix order, so a finished folder is byte-identical
    // whatever the thread count, the order of completion or the number of resumes.
    finalize(out, &head, &timing_head).map_err(RunError::other)?;
    man.finished_unix_s = Some(now_unix());
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
    threads: Option<usize>,
    floor: f64,
) -> Result<(), RunError> {
    use crate::onset::{ONSET_COLUMNS, ONSET_FILE, bisect, groups, record};
    let mut all = groups(s);
    if let Some((i, k)) = opts.shard {
        all.retain(|g| g.index % k == i);
    }
    let head: Vec<String> = ONSET_COLUMNS.iter().map(|c| c.to_string()).collect();
    let path = opts.out.join(ONSET_FILE);
    let ids = onset_group_ids(s, opts.shard);
    let (done_rows, keep) =
        kept_rows(&path, &head, onset_row_check(&ids)).map_err(RunError::input)?;
    let mut file = RowFile::open(&path, &head, keep).map_err(RunError::other)?;
    let done: HashSet<&str> = done_rows.iter().filter_map(|r| r.get(0)).collect();
    let todo: Vec<_> = all
        .into_iter()
        .filter(|g| !done.contains(g.id().as_str()))
        .collect();
    if !opts.quiet && !todo.is_empty() {
        eprintln!(
            "gripsweep: slip-onset study, {} groups by bisection",
            todo.len()
        );
    }
    let mut err = None;
    parallel_units(
        threads,
        &todo,
        |g| bisect(s, robot, o, g, floor),
        |_, i, (deg, runs)| {
            if err.is_none()
                && let Err(e) = file.append(&record(&todo[i], deg, runs))
            {
                err = Some(format!("{}: {e}", path.display()));
            }
        },
    )
    .map_err(RunError::other)?;
    if let Some(e) = err {
        return Err(RunError::other(e));
    }
    let (_, mut rows) = read_rows(&path).map_err(RunError::other)?;
    rows.sort_by_key(|r| r[1].parse::<usize>().unwrap_or(usize::MAX));
    write_sorted(&path, &head, &rows).map_err(RunError::other)
}

/// The ids of the slip-onset groups of a scenario (of one shard).
fn onset_group_ids(s: &Scenario, shard: Option<(usize, usize)>) -> HashSet<String> {
    crate::onset::groups(s)
        .into_iter()
        .filter(|g| shard.is_none_or(|(i, k)| g.index % k == i))
        .map(|g| g.id())
        .collect()
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

/// The end-of-run rewrite of a run folder: `cells.csv` and `timing.csv` in matrix order.
pub fn rewrite_in_matrix_order(out: &Path) -> Result<(), String> {
    let timing_head: Vec<String> = TIMING_COLUMNS.iter().map(|s| s.to_string()).collect();
    finalize(out, &header(), &timing_head)
}

fn finalize(out: &Path, head: &[String], timing_head: &[String]) -> Result<(), String> {
    let (_, mut rows) = read_rows(&out.join(CELLS_FILE))?;
    sort_rows(&mut rows);
    write_sorted(&out.join(CELLS_FILE), head, &rows)?;
    let (_, mut timing) = read_rows(&out.join(TIMING_FILE))?;
    sort_timing(&mut timing, &rows);
    write_sorted(&out.join(TIMING_FILE), timing_head, &timing)
}

/// Cell rows in matrix order (by their index column), O(n log n).
pub fn sort_rows(rows: &mut [Vec<String>]) {
    rows.sort_by_cached_key(|r| r[1].parse::<usize>().unwrap_or(usize::MAX));
}

/// Timing rows in the order of `cells` (sorted cell rows), one per cell: a map from id to
/// position, so O(n log n) rather than a search per row.
pub fn sort_timing(timing: &mut Vec<Vec<String>>, cells: &[Vec<String>]) {
    let order: HashMap<&str, usize> = cells
        .iter()
        .enumerate()
        .map(|(i, r)| (r[0].as_str(), i))
        .collect();
    timing.sort_by_cached_key(|r| order.get(r[0].as_str()).copied().unwrap_or(usize::MAX));
    timing.dedup_by(|a, b| a[0] == b[0]);
}

/// Join shard folders into `out`: refuses mixed inputs, missing, incomplete or damaged shards,
/// naming the shard (and file and line), and checks everything before it writes anything.
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
        crate::run_folder::check_not_written(d)?;
        let m = read_manifest(d).map_err(RunError::input)?;
        if m["tool"] != "gripsweep" {
            return Err(RunError::input(format!(
                "{}: not a run folder of gripsweep",
                d.display()
            )));
        }
        let m = typed_manifest(d, m)?;
        let Some(sh) = m.shard else {
            return Err(RunError::input(format!(
                "{}: not a shard (its manifest has no shard)",
                d.display()
            )));
        };
        let (i, k, n) = (sh.index, sh.count, sh.cells);
        if k == 0 {
            return Err(RunError::input(format!(
                "{}: {MANIFEST_FILE}: field `shard.count`: not a shard count",
                d.display()
            )));
        }
        shards.push((d.clone(), m, i, k, n));
    }
    let (first_inputs, k) = (shards[0].1.inputs.clone(), shards[0].3);
    for (d, m, _, kk, _) in &shards {
        let what = format!(
            "{}: a shard made from other inputs than {}",
            d.display(),
            shards[0].0.display()
        );
        compare_inputs(&what, &first_inputs, &m.inputs).map_err(RunError::input)?;
        if m.gains_sha256 != shards[0].1.gains_sha256 {
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
    // The matrix the shards were made from, from the manifest (the same in every shard: the
    // inputs are equal), to check every row against.
    let all_cells = crate::run_folder::cells_of_manifest(&shards[0].1)
        .map_err(|e| RunError::input(format!("{}: {MANIFEST_FILE}: {e}", shards[0].0.display())))?;
    let head = header();
    let timing_head: Vec<String> = TIMING_COLUMNS.iter().map(|s| s.to_string()).collect();
    let mut all_rows: Vec<Vec<String>> = Vec::with_capacity(all_cells.len());
    let mut all_timing: Vec<Vec<String>> = Vec::with_capacity(all_cells.len());
    let mut incomplete = Vec::new();
    for (d, m, i, _, n) in &shards {
        let expected: HashMap<String, &Cell> = all_cells
            .iter()
            .filter(|c| c.index % k == *i)
            .map(|c| (c.id(), c))
            .collect();
        if expected.len() != *n {
            return Err(RunError::input(format!(
                "{}: {MANIFEST_FILE}: field `shard.cells` = {n}, but shard {}/{k} of the matrix has {} cells",
                d.display(),
                i + 1,
                expected.len()
            )));
        }
        let read =
            |file: &str,
             head: &[String],
             check: &mut dyn FnMut(&csv::StringRecord) -> Result<(), String>| {
                let path = d.join(file);
                // A torn last line (a shard killed mid-write) is left out here and makes the
                // shard incomplete below; its complete rows are checked all the same.
                let (bytes, torn) = crate::run_folder::complete_lines(&path)?;
                crate::run_folder::check_rows(&path, &bytes, head, check).map(|r| (r, torn))
            };
        let (rows, torn) = read(CELLS_FILE, &head, &mut cell_row_check(&head, &expected))
            .map_err(RunError::input)?;
        if torn || rows.len() != *n || m.finished_unix_s.is_none() {
            incomplete.push(format!(
                "{}/{k} ({} of {n} cells, in {})",
                i + 1,
                rows.len(),
                d.display()
            ));
            continue;
        }
        all_rows.extend(rows.iter().map(|r| r.iter().map(String::from).collect()));
        if d.join(TIMING_FILE).exists() {
            let (t, _) = read(TIMING_FILE, &timing_head, &mut timing_row_check(&expected))
                .map_err(RunError::input)?;
            all_timing.extend(t.iter().map(|r| r.iter().map(String::from).collect()));
        }
    }
    if !incomplete.is_empty() {
        return Err(RunError::input(format!(
            "merge: incomplete shard(s) {}; finish them with `gripsweep run … --shard I/K --resume` and merge again",
            incomplete.join(", ")
        )));
    }
    // The slip-onset study, when the scenario has one: every shard's groups, complete and
    // checked, before anything is written.
    let mut onset_rows: Option<Vec<Vec<String>>> = None;
    if shards[0].1.onset_groups.is_some() {
        use crate::onset::{ONSET_COLUMNS, ONSET_FILE};
        let head: Vec<String> = ONSET_COLUMNS.iter().map(|c| c.to_string()).collect();
        let mut rows = Vec::new();
        let mut short = Vec::new();
        for (d, m, i, _, _) in &shards {
            let want = m.onset_groups.unwrap_or(0) as usize;
            let path = d.join(ONSET_FILE);
            let got = if path.exists() {
                let (bytes, _) =
                    crate::run_folder::complete_lines(&path).map_err(RunError::input)?;
                let mut ids = HashSet::new();
                crate::run_folder::check_rows(&path, &bytes, &head, |r| {
                    let id = r.get(0).unwrap_or("").to_string();
                    if ids.insert(id.clone()) {
                        Ok(())
                    } else {
                        Err(format!("column `group_id`: group {id} appears twice"))
                    }
                })
                .map_err(RunError::input)?
            } else {
                Vec::new()
            };
            if got.len() != want {
                short.push(format!(
                    "{}/{k} ({} of {want} onset groups, in {})",
                    i + 1,
                    got.len(),
                    d.display()
                ));
            }
            rows.extend(
                got.iter()
                    .map(|r| r.iter().map(String::from).collect::<Vec<_>>()),
            );
        }
        if !short.is_empty() {
            return Err(RunError::input(format!(
                "merge: incomplete slip-onset study in shard(s) {}; resume them and merge again",
                short.join(", ")
            )));
        }
        sort_rows(&mut rows);
        onset_rows = Some(rows);
    }

    // Everything checked: now the output folder.
    match folder_state(out) {
        FolderState::Missing | FolderState::Empty => {}
        FolderState::RunFolder(_) if force => check_replaceable(out, dirs)?,
        FolderState::Foreign(why) if force => {
            return Err(RunError::input(format!(
                "{}: --force: not a run folder of gripsweep ({why}); refusing to replace it",
                out.display()
            )));
        }
        _ => {
            return Err(RunError::input(format!(
                "{}: the output folder exists and is not empty; pass --force to replace it",
                out.display()
            )));
        }
    }
    std::fs::create_dir_all(out).map_err(|e| RunError::other(format!("{}: {e}", out.display())))?;
    let _lock = crate::run_folder::lock(out)?;
    if force {
        remove_tool_files(out)?;
    }
    sort_rows(&mut all_rows);
    write_sorted(&out.join(CELLS_FILE), &head, &all_rows).map_err(RunError::other)?;
    // Every shard ran with the same tuning table (checked above): the joined run's is that one.
    let gains = shards[0].0.join(crate::tuning::GAINS_FILE);
    if gains.is_file() {
        std::fs::copy(&gains, out.join(crate::tuning::GAINS_FILE))
            .map_err(|e| RunError::other(format!("{}: {e}", gains.display())))?;
    }
    sort_timing(&mut all_timing, &all_rows);
    write_sorted(&out.join(TIMING_FILE), &timing_head, &all_timing).map_err(RunError::other)?;
    if let Some(rows) = onset_rows {
        use crate::onset::{ONSET_COLUMNS, ONSET_FILE};
        let head: Vec<String> = ONSET_COLUMNS.iter().map(|c| c.to_string()).collect();
        write_sorted(&out.join(ONSET_FILE), &head, &rows).map_err(RunError::other)?;
    }
    let mut man = shards[0].1.clone();
    man.shard = None;
    if man.onset_groups.is_some() {
        man.onset_groups = Some(shards.iter().filter_map(|x| x.1.onset_groups).sum());
    }
    man.merged_from = Some(dirs.iter().map(|d| d.display().to_string()).collect());
    man.finished_unix_s = Some(now_unix());
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
