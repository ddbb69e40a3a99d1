//! The run-side commands (`run`, `check`, `trace`, `report`, `merge`) as library functions:
//! flags in, text out, errors with the exit code they deserve.

use crate::cell::{CellContext, CellSpec, TraceRow, run_cell, run_spec};
use crate::matrix::{Cell, expand};
use crate::run_format::AxisValue;
use crate::runner::{RunError, RunOptions, merge, run};
use crate::scenario::Scenario;
use clap::Args;
use std::path::{Path, PathBuf};
use std::time::Instant;

#[derive(Args, Debug, Clone)]
pub struct RunArgs {
    /// Scenario file (TOML). Default: the embedded default scenario (scenarios/default.toml).
    pub scenario: Option<PathBuf>,
    /// Output folder. Default: results/<scenario name> (results/<name>-shard-I-of-K with --shard).
    #[arg(long)]
    pub out: Option<PathBuf>,
    /// Worker threads, 1 to the number of cores this machine offers (more is refused).
    /// Default: one per core.
    #[arg(long)]
    pub threads: Option<usize>,
    /// Run only shard I of K (1-based, e.g. 2/4): the cells whose matrix index is ≡ I−1 mod K.
    #[arg(long, value_name = "I/K")]
    pub shard: Option<String>,
    /// Continue a killed run in the same output folder: finished cells are kept, the rest run.
    #[arg(long, conflicts_with = "force")]
    pub resume: bool,
    /// Replace an existing run folder of this tool (only its own files are removed); any
    /// other folder, the current folder or one holding an input is refused.
    #[arg(long)]
    pub force: bool,
    /// No progress output.
    #[arg(long)]
    pub quiet: bool,
    /// Reuse a tuning table made earlier (a run folder's gains.csv, or `gripsweep tune --out`)
    /// instead of tuning; refused when it was made for other robot files, plant settings or
    /// law settings.
    #[arg(long, value_name = "GAINS.csv")]
    pub gains_from: Option<PathBuf>,
}

#[derive(Args, Debug, Clone)]
pub struct TuneArgs {
    /// Scenario file (TOML). Default: the embedded default scenario.
    pub scenario: Option<PathBuf>,
    /// Worker threads. Default: one per core (the table does not depend on it).
    #[arg(long)]
    pub threads: Option<usize>,
    /// Also write the table to this file (refused if it exists), for `run --gains-from`.
    #[arg(long)]
    pub out: Option<PathBuf>,
}

#[derive(Args, Debug, Clone)]
pub struct CheckArgs {
    /// Scenario file (TOML). Default: the embedded default scenario.
    pub scenario: Option<PathBuf>,
    /// Threads assumed for the run-time estimate, 1 to the cores this machine offers.
    /// Default: one per core.
    #[arg(long)]
    pub threads: Option<usize>,
}

#[derive(Args, Debug, Clone)]
pub struct TraceArgs {
    /// Scenario file (TOML). Default: the embedded default scenario.
    pub scenario: Option<PathBuf>,
    /// Axis values of the cell to trace, e.g. --pick mu=0.4 --pick controller=id-lean; axes not
    /// given take their first value. Axes: slope_deg, mu, rate_hz, actuator, controller,
    /// mass_scale, com_shift_mm, sensor_noise, seed.
    #[arg(long, value_name = "AXIS=VALUE")]
    pub pick: Vec<String>,
    /// Output CSV. Default: trace.csv.
    #[arg(long, default_value = "trace.csv")]
    pub out: PathBuf,
    /// Write one row every N physics steps (N × plant.dt apart; 10 ms at the default 1 ms
    /// step). Default: 10.
    #[arg(long, default_value_t = 10)]
    pub every: usize,
    /// Do not write the replay page (by default `trace` writes, beside the CSV, the same
    /// path with `.html`: a self-contained page that replays the cell).
    #[arg(long)]
    pub no_replay: bool,
}

#[derive(Args, Debug, Clone)]
pub struct ReportArgs {
    /// A run folder (with cells.csv and manifest.json).
    pub dir: PathBuf,
}

#[derive(Args, Debug, Clone)]
pub struct MergeArgs {
    /// Shard folders to join.
    #[arg(required = true)]
    pub dirs: Vec<PathBuf>,
    /// Output folder for the joined run.
    #[arg(long)]
    pub out: PathBuf,
    /// Replace an existing run folder of this tool (never one of the shards, the current
    /// folder or a folder of other files).
    #[arg(long)]
    pub force: bool,
}

fn load(path: &Option<PathBuf>) -> Result<Scenario, RunError> {
    match path {
        Some(p) => Scenario::from_file(p).map_err(|e| RunError::input(e.0)),
        None => Scenario::default_embedded().map_err(|e| RunError::input(e.0)),
    }
}

/// Most rows `trace` keeps.
const MAX_TRACE_ROWS: f64 = 200_000.0;

/// "I/K" (1-based) → (I−1, K).
pub fn parse_shard(s: &str) -> Result<(usize, usize), RunError> {
    let bad = || {
        RunError::input(format!(
            "--shard {s}: allowed: I/K with 1 ≤ I ≤ K, e.g. 2/4"
        ))
    };
    let (i, k) = s.split_once('/').ok_or_else(bad)?;
    let (i, k): (usize, usize) = (
        i.trim().parse().map_err(|_| bad())?,
        k.trim().parse().map_err(|_| bad())?,
    );
    if k == 0 || i == 0 || i > k {
        return Err(bad());
    }
    Ok((i - 1, k))
}

fn slug(name: &str) -> String {
    name.chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() || c == '-' || c == '_' {
                c
            } else {
                '-'
            }
        })
        .collect()
}

pub fn cmd_run(a: &RunArgs) -> Result<String, RunError> {
    let s = load(&a.scenario)?;
    let shard = a.shard.as_deref().map(parse_shard).transpose()?;
    let out = a.out.clone().unwrap_or_else(|| {
        let base = PathBuf::from("results");
        match shard {
            Some((i, k)) => base.join(format!("{}-shard-{}-of-{k}", slug(&s.name), i + 1)),
            None => base.join(slug(&s.name)),
        }
    });
    let opts = RunOptions {
        out: out.clone(),
        threads: a.threads,
        shard,
        resume: a.resume,
        force: a.force,
        quiet: a.quiet,
        no_report: false,
        gains_from: a.gains_from.clone(),
    };
    let sum = run(&s, &opts)?;
    Ok(format!(
        "{}: {} cells ({} run now, {} kept from before), {} not ok; slip floor {:.3} mm; {:.1} s\nresults in {}\n",
        s.name,
        sum.cells_total,
        sum.cells_run,
        sum.cells_skipped,
        sum.failures,
        sum.slip_floor_mm,
        sum.wall_s,
        out.display()
    ))
}

/// `tune`: the tuning alone; the table as CSV on stdout.
pub fn cmd_tune(a: &TuneArgs) -> Result<String, RunError> {
    let s = load(&a.scenario)?;
    crate::limits::check_threads(a.threads).map_err(RunError::input)?;
    if let Some(p) = &a.out
        && p.exists()
    {
        return Err(RunError::input(format!(
            "--out {}: the file exists; choose another name",
            p.display()
        )));
    }
    let robot = s.load_robot().map_err(RunError::input)?;
    let started = Instant::now();
    let table = crate::tuning::tune(&s, &robot, a.threads).map_err(RunError::input)?;
    let csv = table.to_csv();
    if let Some(p) = &a.out {
        std::fs::write(p, &csv).map_err(|e| RunError::other(format!("{}: {e}", p.display())))?;
    }
    let trials: usize = table.rows.iter().map(|r| r.trials).sum();
    eprintln!(
        "gripsweep: tuned {} combinations with {trials} tuning runs in {:.1} s",
        table.rows.len(),
        started.elapsed().as_secs_f64()
    );
    Ok(csv)
}

pub fn cmd_check(a: &CheckArgs) -> Result<String, RunError> {
    let s = load(&a.scenario)?;
    let robot = s.load_robot().map_err(RunError::input)?;
    s.check_plans(&robot).map_err(|e| RunError::input(e.0))?;
    let cells = expand(&s);
    // Estimate: simulate a short stretch of standing (all feet down: the costliest control
    // step) with each controller and scale by the cells' durations.
    let threads = crate::limits::check_threads(a.threads)
        .map_err(RunError::input)?
        .unwrap_or_else(rayon::current_num_threads)
        .max(1);
    // A probe of a fixed number of plant steps, so `check` answers in bounded time whatever
    // the step size.
    let probe = (crate::limits::CHECK_PROBE_STEPS as f64 * s.plant.dt).min(s.duration);
    let mut per_controller = Vec::new();
    for c in &s.axes.names("controller") {
        let cell = cells
            .iter()
            .find(|x| x.controller() == c)
            .expect("every controller has cells");
        // The cell's own setup, standing for the probe's length.
        let spec = CellSpec {
            duration: probe,
            gait: crate::planner::Gait::Stand,
            ..CellSpec::of(&s, cell)
        };
        let t0 = Instant::now();
        run_spec(&robot, cell, &spec, None, None);
        per_controller.push((c.clone(), t0.elapsed().as_secs_f64() / probe));
    }
    let total_s: f64 = cells
        .iter()
        .map(|c| {
            per_controller
                .iter()
                .find(|(n, _)| n == c.controller())
                .map(|x| x.1)
                .unwrap_or(0.0)
                * s.duration
        })
        .sum::<f64>()
        / threads as f64;
    let mut text = format!(
        "{}: valid.\n{} cells ({} × {} seeds), {} s each.\n",
        s.source,
        cells.len(),
        crate::run_format::AXES
            .iter()
            .zip(&s.axes.values)
            .map(|(a, v)| format!("{} {}", v.len(), a.name))
            .collect::<Vec<_>>()
            .join(" × "),
        s.seeds,
        s.duration
    );
    // The plan's own limit per slope (planner/limit.rs): the friction and torque share any
    // law needs at least.
    text.push_str("The plan's limit (least friction any force distribution needs; share of the torque limits it then takes):\n");
    for deg in s.axes.numbers("slope_deg") {
        let slope = crate::plant::terrain::Slope::degrees(deg);
        let line =
            crate::planner::Plan::build(&robot.model, &robot.facts, &slope, &s.gait, s.duration)
                .map_err(|e| e.0)
                .and_then(|plan| {
                    crate::planner::limit::plan_limit(&plan, &slope).map(|l| (plan.cycle_time(), l))
                });
        text.push_str(&match line {
            Ok((cycle, l)) => format!(
                "  slope {deg}°: μ_required {} (tan θ {:.3}, at t = {:.2} s), torque share {}, μ_required within the torque limits {}; cycle {cycle:.2} s\n",
                fmt_mu(l.mu_required),
                deg.to_radians().tan(),
                l.at_s,
                fmt_mu(l.torque_share),
                fmt_mu(l.mu_required_torque_limited),
            ),
            Err(e) => format!("  slope {deg}°: limit not computed: {e}\n"),
        });
    }
    text.push_str(&format!("Estimated run time on {threads} thread(s): {:.0} s ({:.1} min), from a {probe} s probe per controller:\n", total_s, total_s / 60.0));
    for (c, w) in per_controller {
        text.push_str(&format!(
            "  {c}: {:.3} s of wall time per simulated second\n",
            w
        ));
    }
    Ok(text)
}

/// A friction coefficient or share for `check`: three decimals, "none suffices" when infinite.
fn fmt_mu(x: f64) -> String {
    if x.is_finite() {
        format!("{x:.3}")
    } else if x.is_nan() {
        "undefined".into()
    } else {
        "∞ (no friction suffices: the plan tips the robot)".into()
    }
}

/// The cell of the scenario matching `picks` (AXIS=VALUE); unspecified axes: first value.
pub fn pick_cell(s: &Scenario, picks: &[String]) -> Result<Cell, RunError> {
    let mut want: Vec<(String, String)> = Vec::new();
    let names = crate::run_format::axis_columns();
    for p in picks {
        let Some((k, v)) = p.split_once('=') else {
            return Err(RunError::input(format!(
                "--pick {p}: allowed: AXIS=VALUE with AXIS one of {}",
                names.join(", ")
            )));
        };
        if !names.contains(&k.trim()) {
            return Err(RunError::input(format!(
                "--pick {p}: unknown axis '{}'; allowed: {}",
                k.trim(),
                names.join(", ")
            )));
        }
        want.push((k.trim().to_string(), v.trim().to_string()));
    }
    let matches = |c: &Cell| {
        want.iter().all(|(k, v)| {
            let Some(i) = crate::run_format::axis_index(k) else {
                return v.parse::<u32>().is_ok_and(|w| w == c.seed);
            };
            match &c.values[i] {
                AxisValue::Number(x) => v.parse::<f64>().is_ok_and(|w| (w - x).abs() < 1e-9),
                AxisValue::Name(n) => n == v,
            }
        })
    };
    expand(s).into_iter().find(|c| matches(c)).ok_or_else(|| {
        RunError::input(format!(
            "--pick {}: no cell of {} has these axis values (see `gripsweep check`)",
            picks.join(" --pick "),
            s.source
        ))
    })
}

pub fn cmd_trace(a: &TraceArgs) -> Result<String, RunError> {
    let s = load(&a.scenario)?;
    if a.every == 0 {
        return Err(RunError::input("--every 0: allowed: 1 or more"));
    }
    let robot = s.load_robot().map_err(RunError::input)?;
    if robot.model.nq_base() != 7 {
        return Err(RunError::input(format!(
            "{}: trace needs a floating-base robot",
            robot.source
        )));
    }
    // One trace row holds every joint's angle and torque and every foot's forces: bound the
    // rows kept in memory.
    let rows_wanted = s.duration / s.plant.dt / a.every as f64;
    if rows_wanted > MAX_TRACE_ROWS {
        return Err(RunError::input(format!(
            "--every {}: {rows_wanted:.0} rows for {} s at plant.dt = {} s: allowed: at most {MAX_TRACE_ROWS} rows (raise --every)",
            a.every, s.duration, s.plant.dt
        )));
    }
    let cell = pick_cell(&s, &a.pick)?;
    // The cell runs with the gains `run` would give it: tune its one combination.
    let mut one = s.clone();
    one.axes = one
        .axes
        .with("rate_hz", vec![cell.rate_hz().into()])
        .with("actuator", vec![cell.actuator().name().into()])
        .with("controller", vec![cell.controller().into()]);
    let table = crate::tuning::tune(&one, &robot, None).map_err(RunError::input)?;
    let mut s = s;
    table.apply(&mut s);
    let mut rows: Vec<TraceRow> = Vec::new();
    let out = run_cell(
        &CellContext {
            scenario: &s,
            robot: &robot,
        },
        &cell,
        Some((&mut rows, a.every)),
    );
    write_trace(&a.out, &robot, &rows, out.status.name()).map_err(RunError::other)?;
    let replay = replay_path(&a.out, a.no_replay);
    if let Some(page) = &replay {
        let csv_name = a
            .out
            .file_name()
            .map(|n| n.to_string_lossy().to_string())
            .unwrap_or_default();
        crate::report::replay::write_replay(
            page,
            &robot,
            &rows,
            &crate::report::replay::ReplayInfo {
                cell_id: &cell.id(),
                cell_key: &cell.key(),
                status: out.status.name(),
                message: &out.message,
                slope_deg: cell.slope_deg(),
                mu: cell.mu(),
                row_dt: a.every as f64 * s.plant.dt,
                csv_name: &csv_name,
            },
        )
        .map_err(RunError::other)?;
    }
    Ok(format!(
        "cell {} ({}): {}{}; {} rows in {}{}\n",
        cell.id(),
        cell.key(),
        out.status.name(),
        if out.message.is_empty() {
            String::new()
        } else {
            format!(" ({})", out.message)
        },
        rows.len(),
        a.out.display(),
        replay
            .map(|p| format!(", replay in {}", p.display()))
            .unwrap_or_default()
    ))
}

/// Where `trace` writes its replay page: the CSV's path with `.html` (none with
/// `--no-replay`, or when the CSV itself ends in `.html`).
pub fn replay_path(csv: &Path, off: bool) -> Option<PathBuf> {
    let page = csv.with_extension("html");
    (!off && page != csv).then_some(page)
}

/// The trace CSV's header: time; the base pose and twist; the plan's base pose; per joint its
/// angle, the plan's reference and the applied torque; per foot the plan's stance flag, its
/// ground point, the measured and the law's predicted force (surface frame) and its slip speed
/// (blank for a planned-swing foot); the law's and the cell's status.
pub fn trace_header(robot: &crate::robot::LoadedRobot) -> Vec<String> {
    let mut head: Vec<String> = [
        "t_s",
        "base_x_m",
        "base_y_m",
        "base_z_m",
        "base_qx",
        "base_qy",
        "base_qz",
        "base_qw",
        "base_vx_m_s",
        "base_vy_m_s",
        "base_vz_m_s",
        "base_wx_rad_s",
        "base_wy_rad_s",
        "base_wz_rad_s",
        "plan_base_x_m",
        "plan_base_y_m",
        "plan_base_z_m",
        "plan_base_qx",
        "plan_base_qy",
        "plan_base_qz",
        "plan_base_qw",
    ]
    .iter()
    .map(|s| s.to_string())
    .collect();
    let joints = robot.model.joint_names();
    head.extend(joints.iter().map(|j| format!("{j}_rad")));
    head.extend(joints.iter().map(|j| format!("{j}_ref_rad")));
    head.extend(joints.iter().map(|j| format!("{j}_torque_nm")));
    for f in &robot.facts.feet.frames {
        for c in TRACE_FOOT_COLUMNS {
            head.push(format!("{f}_{c}"));
        }
    }
    head.push("law_status".into());
    head.push("cell_status".into());
    head
}

/// Per-foot columns of the trace, in order.
pub const TRACE_FOOT_COLUMNS: [&str; 11] = [
    "stance",
    "x_m",
    "y_m",
    "z_m",
    "fn_n",
    "ft1_n",
    "ft2_n",
    "pred_fn_n",
    "pred_ft1_n",
    "pred_ft2_n",
    "slip_speed_mm_s",
];

/// A number as the trace writes it: Rust's shortest round-trip text (the replay embeds the
/// same text, so both hold the same values bit for bit).
pub fn trace_num(x: f64) -> String {
    format!("{x}")
}

fn write_trace(
    path: &Path,
    robot: &crate::robot::LoadedRobot,
    rows: &[TraceRow],
    status: &str,
) -> Result<(), String> {
    let head = trace_header(robot);
    let nj = robot.model.n_joints();
    let mut w = csv::Writer::from_path(path).map_err(|e| format!("{}: {e}", path.display()))?;
    w.write_record(&head)
        .map_err(|e| format!("{}: {e}", path.display()))?;
    for r in rows {
        let mut rec: Vec<String> = vec![trace_num(r.t)];
        rec.extend(r.q[..7].iter().map(|x| trace_num(*x)));
        rec.extend(r.v_base.iter().map(|x| trace_num(*x)));
        rec.extend(r.plan_q[..7].iter().map(|x| trace_num(*x)));
        rec.extend(r.q[7..7 + nj].iter().map(|x| trace_num(*x)));
        rec.extend(r.plan_q[7..7 + nj].iter().map(|x| trace_num(*x)));
        rec.extend(r.tau.iter().map(|x| trace_num(*x)));
        for i in 0..r.foot_force.len() {
            rec.push(if r.stance[i] { "1".into() } else { "0".into() });
            rec.extend(r.foot_pos[i].iter().map(|x| trace_num(*x)));
            rec.extend(r.foot_force[i].iter().map(|x| trace_num(*x)));
            rec.extend(r.foot_predicted[i].iter().map(|x| trace_num(*x)));
            // A swing foot's tangential speed is its swing, not a slip.
            rec.push(if r.stance[i] {
                trace_num(r.foot_slip[i] * 1e3)
            } else {
                String::new()
            });
        }
        rec.push(r.law_status.to_string());
        rec.push(status.to_string());
        w.write_record(&rec)
            .map_err(|e| format!("{}: {e}", path.display()))?;
    }
    w.flush().map_err(|e| format!("{}: {e}", path.display()))
}

pub fn cmd_report(a: &ReportArgs) -> Result<String, RunError> {
    if !a.dir.join(crate::runner::CELLS_FILE).is_file() {
        return Err(RunError::input(format!(
            "{}: no cells.csv here; give a run folder",
            a.dir.display()
        )));
    }
    crate::runner::write_report(&a.dir).map_err(RunError::input)?;
    Ok(format!("report written in {}\n", a.dir.display()))
}

pub fn cmd_merge(a: &MergeArgs) -> Result<String, RunError> {
    let n = merge(&a.dirs, &a.out, a.force, false)?;
    Ok(format!(
        "{n} cells joined from {} shards into {}\n",
        a.dirs.len(),
        a.out.display()
    ))
}
