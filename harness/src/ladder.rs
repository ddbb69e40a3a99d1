//! The step ladder: the same scenario run at a ladder of plant settings (physics step, solver
//! substeps, optionally contact stiffness), each rung a complete run folder (tuning included,
//! since a study at those settings would tune at them), and every output the summary uses
//! compared against the finest rung: per condition and law, as the summary shows them, the
//! means over seeds of slip per stance phase and of tracking RMS and the outcome counts; each
//! condition's slip verdict (the report's own rule, [`Study::conditions`]); onset angles when the
//! scenario has an onset study; the plan's μ_required; and the slip floor. Each cell's outcome is
//! listed too (shown, not judged: with the summary reading counts over seeds, a cell that falls
//! at one rung and its neighbour seed at another leave the summary unchanged).
//!
//! The rung chosen is the cheapest (fewest solver substeps per simulated second) whose verdicts
//! and outcomes equal the finest rung's and whose figures stay within [`TOLERANCES`]. The
//! finest rung is the one with the shortest substep (dt / substeps; then the shorter dt; then
//! the stiffer contact).

use crate::report::{
    Axis, Cell, MANIFEST_FILE, Measure, Metric, Run, Status, Study, Verdict, read_run, seed_means,
};
use crate::runner::{RunError, RunOptions, run};
use crate::scenario::Scenario;
use std::collections::BTreeMap;
use std::fmt::Write as _;
use std::path::{Path, PathBuf};
use std::time::Instant;

/// `gripsweep ladder`: flags.
#[derive(clap::Args, Debug, Clone)]
pub struct LadderArgs {
    /// Scenario file (TOML). Default: the embedded default scenario.
    pub scenario: Option<PathBuf>,
    /// Output folder: one run folder per rung (`rung-<label>/`) and the comparison
    /// (rungs.csv, rung-changes.csv, ladder.md).
    #[arg(long)]
    pub out: PathBuf,
    /// Plant settings to compare, comma-separated DT_MS/SUBSTEPS[/CONTACT_HZ].
    #[arg(long, default_value = "1/1,1/2,1/4,1/8,0.5/4")]
    pub rungs: String,
    /// Worker threads (default: one per core).
    #[arg(long)]
    pub threads: Option<usize>,
    /// Continue a stopped ladder in the same folder.
    #[arg(long)]
    pub resume: bool,
    /// No progress output.
    #[arg(long)]
    pub quiet: bool,
}

/// Run the ladder; stdout gets [`RUNGS_FILE`]'s text.
pub fn cmd_ladder(a: &LadderArgs) -> Result<String, RunError> {
    let rungs = parse_rungs(&a.rungs).map_err(RunError::input)?;
    let s = match &a.scenario {
        Some(p) => Scenario::from_file(p).map_err(|e| RunError::input(e.0))?,
        None => Scenario::default_embedded().map_err(|e| RunError::input(e.0))?,
    };
    let sum = run_ladder(
        &s,
        &LadderOptions {
            out: a.out.clone(),
            rungs,
            threads: a.threads,
            quiet: a.quiet,
            resume: a.resume,
        },
    )?;
    Ok(rungs_csv(&sum))
}

/// The per-rung summary table.
pub const RUNGS_FILE: &str = "rungs.csv";
/// Every output of every rung against the finest rung.
pub const CHANGES_FILE: &str = "rung-changes.csv";
/// The same for people.
pub const LADDER_MD: &str = "ladder.md";
/// Most rungs one ladder runs.
pub const MAX_RUNGS: usize = 12;

/// How far a rung's figures may sit from the finest rung's and still count as converged.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Tolerances {
    /// Mean slip per stance phase of a (condition, law): within max(this share of the finest
    /// value, the finest rung's slip floor, the standard error over seeds of the finest mean).
    pub slip_share: f64,
    /// Onset angle, degrees.
    pub onset_deg: f64,
    /// Tracking RMS (base position, joint angles) of a (condition, law): within max(this share
    /// of the finest value, the standard error over seeds of the finest mean).
    pub tracking_share: f64,
    /// The plan's μ_required (the plan does not depend on the plant: any change is a fault).
    pub mu_required: f64,
}

/// The tolerances: slip within max(5 %, the slip floor), onset within 0.5°, tracking within 5 %,
/// each widened to the standard error over seeds of the finest rung's mean where that is larger
/// (a change smaller than the seeds' own scatter of the mean cannot be told from it, and the
/// summary's intervals, t(0.975, n − 1) standard errors wide, already cover it).
pub const TOLERANCES: Tolerances = Tolerances {
    slip_share: 0.05,
    onset_deg: 0.5,
    tracking_share: 0.05,
    mu_required: 1e-9,
};

/// One plant setting of the ladder.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Rung {
    /// Physics step, s.
    pub dt: f64,
    pub substeps: usize,
    /// Contact stiffness (natural frequency, Hz); `None`: the scenario's.
    pub contact_hz: Option<f64>,
}

impl Rung {
    /// Folder-safe label, e.g. `1ms-x4`, `0.5ms-x4-800hz`.
    pub fn label(&self) -> String {
        let mut s = format!("{}ms-x{}", self.dt * 1e3, self.substeps);
        if let Some(hz) = self.contact_hz {
            let _ = write!(s, "-{hz}hz");
        }
        s
    }

    /// Length of one solver substep, s.
    pub fn substep_s(&self) -> f64 {
        self.dt / self.substeps as f64
    }

    /// Solver substeps per simulated second: the cost measure (the engine's work per substep,
    /// mass matrix and its factorisation included, does not depend on dt).
    pub fn cost(&self) -> f64 {
        self.substeps as f64 / self.dt
    }

    fn apply(&self, s: &mut Scenario) {
        s.plant.dt = self.dt;
        s.plant.substeps = self.substeps;
        if let Some(hz) = self.contact_hz {
            s.plant.contact_hz = hz;
        }
    }
}

/// Parse `--rungs`: comma-separated `DT_MS/SUBSTEPS[/CONTACT_HZ]`, e.g. `1/1,1/4,0.5/4`.
pub fn parse_rungs(text: &str) -> Result<Vec<Rung>, String> {
    let mut out: Vec<Rung> = Vec::new();
    for item in text.split(',').map(str::trim).filter(|t| !t.is_empty()) {
        let bad = |why: &str| {
            format!(
                "--rungs: `{item}`: {why}; allowed: DT_MS/SUBSTEPS[/CONTACT_HZ] with {} ms ≤ DT_MS ≤ 1, 1 ≤ SUBSTEPS ≤ 32, 0 < CONTACT_HZ ≤ 100000, e.g. 1/4,0.5/4",
                crate::limits::MIN_DT * 1e3
            )
        };
        let parts: Vec<&str> = item.split('/').map(str::trim).collect();
        if !(2..=3).contains(&parts.len()) {
            return Err(bad("not two or three numbers"));
        }
        let dt_ms: f64 = parts[0].parse().map_err(|_| bad("step is not a number"))?;
        let dt = dt_ms * 1e-3;
        if !(dt.is_finite() && (crate::limits::MIN_DT..=1e-3).contains(&dt)) {
            return Err(bad("step out of range"));
        }
        let substeps: usize = parts[1]
            .parse()
            .map_err(|_| bad("substeps not a whole number"))?;
        if !(1..=32).contains(&substeps) {
            return Err(bad("substeps out of range"));
        }
        let contact_hz = match parts.get(2) {
            None => None,
            Some(t) => {
                let hz: f64 = t.parse().map_err(|_| bad("contact Hz not a number"))?;
                if !(hz.is_finite() && hz > 0.0 && hz <= 1e5) {
                    return Err(bad("contact Hz out of range"));
                }
                Some(hz)
            }
        };
        let r = Rung {
            dt,
            substeps,
            contact_hz,
        };
        if out.iter().any(|o| o.label() == r.label()) {
            return Err(bad("given twice"));
        }
        out.push(r);
    }
    if out.len() < 2 || out.len() > MAX_RUNGS {
        return Err(format!(
            "--rungs `{text}`: {} rungs; allowed: 2 to {MAX_RUNGS}",
            out.len()
        ));
    }
    Ok(out)
}

/// Index of the finest rung: shortest substep, then shortest step, then stiffest contact.
pub fn finest(rungs: &[Rung], scenario_hz: f64) -> usize {
    let key = |r: &Rung| (r.substep_s(), r.dt, -r.contact_hz.unwrap_or(scenario_hz));
    (0..rungs.len())
        .min_by(|&a, &b| {
            let (ka, kb) = (key(&rungs[a]), key(&rungs[b]));
            ka.0.total_cmp(&kb.0)
                .then(ka.1.total_cmp(&kb.1))
                .then(ka.2.total_cmp(&kb.2))
        })
        .unwrap_or(0)
}

/// One compared output of one rung.
#[derive(Clone, Debug, PartialEq)]
pub struct Change {
    pub rung: usize,
    /// `slip_mean_mm`, `base_pos_rms_mm`, `joint_rms_deg`, `outcome`, `verdict`, `onset_deg`,
    /// `mu_required`, `slip_floor_mm`.
    pub output: &'static str,
    /// Cell id, condition, slope or onset group.
    pub place: String,
    pub value: String,
    pub finest: String,
    /// Numeric change (value − finest) or `same` / `changed`.
    pub change: String,
    /// The allowed change, or `equal`, or empty for a figure shown only.
    pub tolerance: String,
    /// `yes`, `no`, or empty for a figure shown only.
    pub within: &'static str,
}

/// A rung's line of [`RUNGS_FILE`].
#[derive(Clone, Debug, PartialEq)]
pub struct RungResult {
    pub rung: Rung,
    /// Wall time of this invocation's work on the rung (≈ 0 for a resumed, finished rung).
    pub wall_s: f64,
    /// The cells' own times summed (`timing.csv`, one thread each; tuning not included).
    pub cell_s: f64,
    pub cells: usize,
    /// Largest |change| of a (condition, law) mean slip, mm.
    pub slip_worst_mm: f64,
    /// Largest |change| of tracking RMS as a share of the finest value.
    pub tracking_worst_share: f64,
    /// Largest |change| of an onset angle, degrees (NaN without onset study).
    pub onset_worst_deg: f64,
    /// Compared figures outside their tolerance.
    pub outside: usize,
    /// (condition, law) groups whose outcome counts changed (judged).
    pub outcome_changes: usize,
    /// Cells whose own outcome changed (shown).
    pub cell_outcome_changes: usize,
    pub verdict_changes: usize,
    pub converged: bool,
    pub chosen: bool,
}

/// The columns of [`RUNGS_FILE`].
pub const RUNGS_COLUMNS: [&str; 17] = [
    "rung",
    "dt_s",
    "substeps",
    "contact_hz",
    "substeps_per_s",
    "finest",
    "cells",
    "wall_s",
    "cell_seconds",
    "slip_worst_change_mm",
    "tracking_worst_change_share",
    "onset_worst_change_deg",
    "figures_outside",
    "outcome_changes",
    "cell_outcome_changes",
    "verdict_changes",
    "chosen",
];

/// The columns of [`CHANGES_FILE`].
pub const CHANGES_COLUMNS: [&str; 11] = [
    "rung",
    "dt_s",
    "substeps",
    "contact_hz",
    "output",
    "place",
    "value",
    "finest",
    "change",
    "tolerance",
    "within",
];

#[derive(Clone, Debug)]
pub struct LadderOptions {
    pub out: PathBuf,
    pub rungs: Vec<Rung>,
    pub threads: Option<usize>,
    pub quiet: bool,
    /// Continue: rung folders that exist are resumed (their finished cells kept).
    pub resume: bool,
}

/// What the ladder found.
#[derive(Clone, Debug)]
pub struct LadderSummary {
    pub rungs: Vec<RungResult>,
    pub finest: usize,
    /// The cheapest converged rung (the finest at worst).
    pub chosen: usize,
    pub changes: Vec<Change>,
}

/// Run every rung into `out/rung-<label>/`, compare, and write [`RUNGS_FILE`],
/// [`CHANGES_FILE`] and [`LADDER_MD`] into `out`.
pub fn run_ladder(s: &Scenario, opts: &LadderOptions) -> Result<LadderSummary, RunError> {
    let out = &opts.out;
    if out.exists() && !opts.resume {
        let empty = std::fs::read_dir(out)
            .map(|mut d| d.next().is_none())
            .unwrap_or(false);
        if !empty {
            return Err(RunError::input(format!(
                "{}: the output folder exists and is not empty; pass --resume to continue that ladder",
                out.display()
            )));
        }
    }
    // Every rung's scenario is checked before any runs (a control rate must divide each
    // rung's plant rate, the step count stays within the limit).
    let mut scenarios = Vec::new();
    for r in &opts.rungs {
        let mut sr = s.clone();
        r.apply(&mut sr);
        check_rung(&sr, r)?;
        scenarios.push(sr);
    }
    std::fs::create_dir_all(out).map_err(|e| RunError::other(format!("{}: {e}", out.display())))?;
    let mut runs = Vec::new();
    let mut walls = Vec::new();
    for (r, sr) in opts.rungs.iter().zip(&scenarios) {
        let dir = out.join(format!("rung-{}", r.label()));
        if !opts.quiet {
            eprintln!("gripsweep: rung {} → {}", r.label(), dir.display());
        }
        let started = Instant::now();
        let resume = opts.resume && dir.join(MANIFEST_FILE).is_file();
        run(
            sr,
            &RunOptions {
                out: dir.clone(),
                threads: opts.threads,
                quiet: opts.quiet,
                resume,
                no_report: true,
                ..RunOptions::default()
            },
        )?;
        walls.push(started.elapsed().as_secs_f64());
        runs.push(read_run(&dir).map_err(RunError::other)?);
    }
    let summary = compare(&opts.rungs, &runs, &walls, s.plant.contact_hz, TOLERANCES);
    write_tables(out, &summary).map_err(RunError::other)?;
    Ok(summary)
}

fn check_rung(s: &Scenario, r: &Rung) -> Result<(), RunError> {
    let plant_rate = 1.0 / r.dt;
    for &rate in &s.axes.numbers("rate_hz") {
        let ratio = plant_rate / rate;
        if rate > plant_rate + 1e-9 || (ratio - ratio.round()).abs() > 1e-9 {
            return Err(RunError::input(format!(
                "--rungs: rung {}: the control rate {rate} Hz does not divide its plant rate {plant_rate} Hz",
                r.label()
            )));
        }
    }
    if s.duration / r.dt > crate::limits::MAX_STEPS_PER_CELL {
        return Err(RunError::input(format!(
            "--rungs: rung {}: {} s is {:.0} plant steps per cell: allowed: at most {}",
            r.label(),
            s.duration,
            s.duration / r.dt,
            crate::limits::MAX_STEPS_PER_CELL
        )));
    }
    Ok(())
}

/// Text of a verdict with law names, e.g. `lowest: id-grip`, `tie: a + b`.
pub fn verdict_text(v: &Verdict, names: &[String]) -> String {
    let n = |c: &usize| names.get(*c).cloned().unwrap_or_default();
    match v {
        Verdict::Lowest { ctrl, .. } => format!("lowest: {}", n(ctrl)),
        Verdict::Tied(all) => {
            let mut list: Vec<String> = all.iter().map(n).collect();
            list.sort();
            format!("tie: {}", list.join(" + "))
        }
        Verdict::Only(c) => format!("only: {}", n(c)),
        Verdict::NoData => "no data".into(),
    }
}

fn fmt(x: f64) -> String {
    if x.is_finite() {
        format!("{x:.6}")
    } else {
        format!("{x}")
    }
}

/// Compare every rung with the finest. `runs[i]` is rung `i`'s run folder.
pub fn compare(
    rungs: &[Rung],
    runs: &[Run],
    walls: &[f64],
    scenario_hz: f64,
    tol: Tolerances,
) -> LadderSummary {
    let fine = finest(rungs, scenario_hz);
    let f_run = &runs[fine];
    let f_study = Study::new(f_run);
    let floor = f_run.manifest.slip_floor_mm;
    let f_cells: BTreeMap<&str, &crate::report::Cell> =
        f_run.cells.iter().map(|c| (c.id.as_str(), c)).collect();
    let f_verdicts = condition_verdicts(&f_study);
    let f_groups = groups(&f_study);
    let f_onset = onset_values(&f_study);
    let mut changes = Vec::new();
    let mut results = Vec::new();
    for (i, r) in rungs.iter().enumerate() {
        let run = &runs[i];
        let study = Study::new(run);
        let mut res = RungResult {
            rung: *r,
            wall_s: walls.get(i).copied().unwrap_or(f64::NAN),
            cell_s: run
                .timing
                .as_ref()
                .map(|t| t.values().map(|x| x.wall_s).sum())
                .unwrap_or(f64::NAN),
            cells: run.cells.len(),
            slip_worst_mm: 0.0,
            tracking_worst_share: 0.0,
            onset_worst_deg: f64::NAN,
            outside: 0,
            outcome_changes: 0,
            cell_outcome_changes: 0,
            verdict_changes: 0,
            converged: false,
            chosen: false,
        };
        let mut push = |output: &'static str,
                        place: String,
                        value: String,
                        finest: String,
                        change: String,
                        tolerance: String,
                        within: &'static str| {
            changes.push(Change {
                rung: i,
                output,
                place,
                value,
                finest,
                change,
                tolerance,
                within,
            })
        };
        // Per cell: the outcome, shown.
        for c in &run.cells {
            let Some(f) = f_cells.get(c.id.as_str()) else {
                continue;
            };
            let place = format!(
                "{} slope={} mu={} rate={} {} {} seed={}",
                c.id, c.slope_deg, c.mu, c.rate_hz, c.actuator, c.controller, c.seed
            );
            let same = c.status == f.status;
            if !same {
                res.cell_outcome_changes += 1;
            }
            push(
                "cell_outcome",
                place,
                c.status.name().into(),
                f.status.name().into(),
                if same { "same" } else { "changed" }.into(),
                String::new(),
                "",
            );
        }
        // Per (condition, law), as the summary shows them: outcome counts, then the means
        // over seeds.
        let groups = groups(&study);
        for (place, fg) in &f_groups {
            let Some(g) = groups.get(place) else {
                res.outcome_changes += 1;
                push(
                    "outcome",
                    place.clone(),
                    "missing".into(),
                    outcome_text(&fg.outcomes),
                    "changed".into(),
                    "equal".into(),
                    "no",
                );
                continue;
            };
            let same = g.outcomes == fg.outcomes;
            if !same {
                res.outcome_changes += 1;
            }
            push(
                "outcome",
                place.clone(),
                outcome_text(&g.outcomes),
                outcome_text(&fg.outcomes),
                if same { "same" } else { "changed" }.into(),
                "equal".into(),
                if same { "yes" } else { "no" },
            );
            for (k, (name, _, is_slip)) in FIGURES.iter().enumerate() {
                let (v, fv) = (g.figures[k], fg.figures[k]);
                let (value, fine_mean, se) = match (v, fv) {
                    (None, None) => continue,
                    (Some(v), Some(f)) => (v.mean, f.mean, f.se),
                    _ => {
                        // Defined at one rung only: its outcome counts changed too.
                        res.outside += 1;
                        push(
                            name,
                            place.clone(),
                            v.map(|x| fmt(x.mean)).unwrap_or_else(|| "none".into()),
                            fv.map(|x| fmt(x.mean)).unwrap_or_else(|| "none".into()),
                            "changed".into(),
                            String::new(),
                            "no",
                        );
                        continue;
                    }
                };
                let d = value - fine_mean;
                let share = if *is_slip {
                    tol.slip_share
                } else {
                    tol.tracking_share
                };
                let mut allowed = (share * fine_mean.abs()).max(se);
                if *is_slip && floor.is_finite() {
                    allowed = allowed.max(floor);
                }
                let ok = d.abs() <= allowed;
                if !ok {
                    res.outside += 1;
                }
                if *is_slip {
                    res.slip_worst_mm = res.slip_worst_mm.max(d.abs());
                } else if fine_mean.abs() > 0.0 {
                    res.tracking_worst_share =
                        res.tracking_worst_share.max(d.abs() / fine_mean.abs());
                }
                push(
                    name,
                    place.clone(),
                    fmt(value),
                    fmt(fine_mean),
                    fmt(d),
                    fmt(allowed),
                    if ok { "yes" } else { "no" },
                );
            }
        }
        // Per condition: the slip verdict by the report's rule.
        let verdicts = condition_verdicts(&study);
        for (place, fv) in &f_verdicts {
            let v = verdicts
                .get(place)
                .cloned()
                .unwrap_or_else(|| "missing".into());
            let same = v == *fv;
            if !same {
                res.verdict_changes += 1;
            }
            push(
                "verdict",
                place.clone(),
                v,
                fv.clone(),
                if same { "same" } else { "changed" }.into(),
                "equal".into(),
                if same { "yes" } else { "no" },
            );
        }
        // Onset angles.
        let onset = onset_values(&study);
        for (place, fv) in &f_onset {
            let v = onset.get(place).copied().unwrap_or(f64::NAN);
            let d = v - fv;
            let ok = d.abs() <= tol.onset_deg;
            if !ok {
                res.outside += 1;
            }
            res.onset_worst_deg = if res.onset_worst_deg.is_nan() {
                d.abs()
            } else {
                res.onset_worst_deg.max(d.abs())
            };
            push(
                "onset_deg",
                place.clone(),
                fmt(v),
                fmt(*fv),
                fmt(d),
                fmt(tol.onset_deg),
                if ok { "yes" } else { "no" },
            );
        }
        // The plan's μ_required per slope (the plan does not depend on the plant).
        for fl in &f_run.manifest.plan_limits {
            let v = run
                .manifest
                .plan_limit(fl.slope_deg)
                .map(|l| l.mu_required)
                .unwrap_or(f64::NAN);
            let d = v - fl.mu_required;
            let ok = d.abs() <= tol.mu_required || v == fl.mu_required;
            if !ok {
                res.outside += 1;
            }
            push(
                "mu_required",
                format!("slope={}", fl.slope_deg),
                fmt(v),
                fmt(fl.mu_required),
                fmt(d),
                fmt(tol.mu_required),
                if ok { "yes" } else { "no" },
            );
        }
        // The slip floor itself, shown (each rung judges its ties by its own floor).
        let fl = run.manifest.slip_floor_mm;
        push(
            "slip_floor_mm",
            "standing robot".into(),
            fmt(fl),
            fmt(floor),
            fmt(fl - floor),
            String::new(),
            "",
        );
        res.converged = res.outside == 0 && res.outcome_changes == 0 && res.verdict_changes == 0;
        results.push(res);
    }
    // The cheapest converged rung; ties in cost go to the finer substep.
    let chosen = (0..rungs.len())
        .filter(|&i| results[i].converged)
        .min_by(|&a, &b| {
            rungs[a]
                .cost()
                .total_cmp(&rungs[b].cost())
                .then(rungs[a].substep_s().total_cmp(&rungs[b].substep_s()))
        })
        .unwrap_or(fine);
    results[chosen].chosen = true;
    LadderSummary {
        rungs: results,
        finest: fine,
        chosen,
        changes,
    }
}

/// The figures compared per (condition, law): output name, metric, whether it is a slip.
const FIGURES: [(&str, Metric, bool); 3] = [
    ("slip_mean_mm", Metric::SlipMean, true),
    ("base_pos_rms_mm", Metric::BasePosRms, false),
    ("joint_rms_deg", Metric::JointRms, false),
];

/// A mean over seeds (of the per-seed means, as the summary takes it) and its standard error
/// s / √n over the n seeds (0 with one seed).
#[derive(Clone, Copy, Debug)]
struct SeedMean {
    mean: f64,
    se: f64,
}

/// One (condition, law) of a run as the summary reads it.
struct Group {
    outcomes: [usize; Status::ALL.len()],
    figures: [Option<SeedMean>; 3],
}

fn seed_mean(cells: &[&Cell], m: Metric) -> Option<SeedMean> {
    let per_seed: Vec<f64> = seed_means(cells.iter().copied(), Measure::Plain(m))
        .into_values()
        .collect();
    let n = per_seed.len();
    if n == 0 {
        return None;
    }
    let mean = per_seed.iter().sum::<f64>() / n as f64;
    let se = if n > 1 {
        let var = per_seed.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (n - 1) as f64;
        (var / n as f64).sqrt()
    } else {
        0.0
    };
    Some(SeedMean { mean, se })
}

/// "ok 3" / "ok 2, fell 1": a group's outcome counts.
fn outcome_text(counts: &[usize; Status::ALL.len()]) -> String {
    Status::ALL
        .iter()
        .zip(counts)
        .filter(|(_, n)| **n > 0)
        .map(|(s, n)| format!("{} {n}", s.name()))
        .collect::<Vec<_>>()
        .join("; ")
}

/// A condition's place text: every condition axis the run varies, with its value (the axes
/// a run holds at one value name no condition apart; rungs of one ladder vary the same ones).
fn condition_place(study: &Study, idx: &[usize]) -> String {
    let text = Axis::ALL
        .iter()
        .filter(|a| study.axes.len(**a) > 1)
        .map(|a| {
            let v = study.axes.value_raw(*a, idx[a.0]);
            format!("{}={v}", a.column())
        })
        .collect::<Vec<_>>()
        .join(" ");
    if text.is_empty() {
        "the one condition".into()
    } else {
        text
    }
}

/// Every (condition, law) of a run, keyed by place and law.
fn groups(study: &Study) -> BTreeMap<String, Group> {
    let mut by: BTreeMap<(Vec<usize>, usize), Vec<&Cell>> = BTreeMap::new();
    for (i, c) in study.run.cells.iter().enumerate() {
        let (idx, ctrl) = study.place_of(i);
        by.entry((idx.to_vec(), ctrl)).or_default().push(c);
    }
    let names = study.controllers();
    by.into_iter()
        .map(|((idx, ctrl), cells)| {
            let mut outcomes = [0usize; Status::ALL.len()];
            for c in &cells {
                if let Some(k) = Status::ALL.iter().position(|s| *s == c.status) {
                    outcomes[k] += 1;
                }
            }
            let figures = FIGURES.map(|(_, m, _)| seed_mean(&cells, m));
            (
                format!(
                    "{} controller={}",
                    condition_place(study, &idx),
                    names[ctrl]
                ),
                Group { outcomes, figures },
            )
        })
        .collect()
}

/// Each condition's verdict text, keyed by its axis values.
fn condition_verdicts(study: &Study) -> BTreeMap<String, String> {
    let names = study.controllers();
    study
        .conditions()
        .iter()
        .map(|cond| {
            (
                condition_place(study, &cond.idx),
                verdict_text(&cond.verdict, names),
            )
        })
        .collect()
}

/// Each onset angle, keyed by group, μ and controller.
fn onset_values(study: &Study) -> BTreeMap<String, f64> {
    let mut out = BTreeMap::new();
    let names = study.onset_controllers();
    for t in study.onset_tables().unwrap_or_default() {
        for (m, mu) in t.mus.iter().enumerate() {
            for (c, name) in names.iter().enumerate() {
                if let Some((deg, _)) = t.onset[m][c] {
                    out.insert(
                        format!("rate={} {} mu={} {}", t.rate_hz, t.actuator, mu, name),
                        deg,
                    );
                }
            }
        }
    }
    out
}

fn csv_field(s: &str) -> String {
    if s.contains([',', '"', '\n']) {
        format!("\"{}\"", s.replace('"', "\"\""))
    } else {
        s.to_string()
    }
}

fn hz_text(r: &Rung) -> String {
    r.contact_hz.map(|h| format!("{h}")).unwrap_or_default()
}

/// The rows of [`RUNGS_FILE`] as text.
pub fn rungs_csv(sum: &LadderSummary) -> String {
    let mut s = RUNGS_COLUMNS.join(",") + "\n";
    for (i, r) in sum.rungs.iter().enumerate() {
        let row = [
            r.rung.label(),
            format!("{}", r.rung.dt),
            r.rung.substeps.to_string(),
            hz_text(&r.rung),
            format!("{}", r.rung.cost()),
            if i == sum.finest { "yes" } else { "" }.into(),
            r.cells.to_string(),
            format!("{:.1}", r.wall_s),
            format!("{:.1}", r.cell_s),
            fmt(r.slip_worst_mm),
            fmt(r.tracking_worst_share),
            fmt(r.onset_worst_deg),
            r.outside.to_string(),
            r.outcome_changes.to_string(),
            r.cell_outcome_changes.to_string(),
            r.verdict_changes.to_string(),
            if r.chosen { "yes" } else { "" }.into(),
        ];
        s += &row.map(|x| csv_field(&x)).join(",");
        s.push('\n');
    }
    s
}

fn write_tables(out: &Path, sum: &LadderSummary) -> Result<(), String> {
    let w = |name: &str, text: String| {
        std::fs::write(out.join(name), text)
            .map_err(|e| format!("{}: {e}", out.join(name).display()))
    };
    w(RUNGS_FILE, rungs_csv(sum))?;
    let mut c = CHANGES_COLUMNS.join(",") + "\n";
    for ch in &sum.changes {
        let r = &sum.rungs[ch.rung].rung;
        let row = [
            r.label(),
            format!("{}", r.dt),
            r.substeps.to_string(),
            hz_text(r),
            ch.output.into(),
            ch.place.clone(),
            ch.value.clone(),
            ch.finest.clone(),
            ch.change.clone(),
            ch.tolerance.clone(),
            ch.within.into(),
        ];
        c += &row.map(|x| csv_field(&x)).join(",");
        c.push('\n');
    }
    w(CHANGES_FILE, c)?;
    w(LADDER_MD, markdown(sum))
}

/// The ladder for people: tolerances, one line per rung, the changed verdicts and outcomes.
pub fn markdown(sum: &LadderSummary) -> String {
    let t = TOLERANCES;
    let mut s = String::from("# Step ladder\n\n");
    let _ = writeln!(
        s,
        "Every rung is the same scenario at other plant settings, tuned and run in full; each output the summary uses is compared with the finest rung (`{}`), per condition and law as the summary shows it. Tolerances: the mean over seeds of slip per stance phase within max({:.0} % of the finest value, the finest rung's slip floor, the standard error over seeds of the finest mean); the means of tracking RMS (base position, joint angles) within max({:.0} %, that standard error); onset angles within {}°; μ_required unchanged; every condition's outcome counts per law and its slip verdict (the report's rule: floor and paired test) equal. Cells whose own outcome changed are counted and listed in `rung-changes.csv` (`cell_outcome`) but not judged: the summary reads outcomes as counts over seeds.\n",
        sum.rungs[sum.finest].rung.label(),
        t.slip_share * 100.0,
        t.tracking_share * 100.0,
        t.onset_deg
    );
    s += "| rung | substeps per s | cells | cell seconds | worst slip change (mm) | worst tracking change | worst onset change (°) | figures outside | outcome-count changes | cells with another outcome | verdict changes | |\n";
    s += "|---|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|---|\n";
    for (i, r) in sum.rungs.iter().enumerate() {
        let mark = if r.chosen {
            "**chosen**"
        } else if i == sum.finest {
            "finest"
        } else if r.converged {
            "converged"
        } else {
            ""
        };
        let _ = writeln!(
            s,
            "| {} | {} | {} | {:.0} | {:.3} | {:.1} % | {} | {} | {} | {} | {} | {} |",
            r.rung.label(),
            r.rung.cost(),
            r.cells,
            r.cell_s,
            r.slip_worst_mm,
            r.tracking_worst_share * 100.0,
            if r.onset_worst_deg.is_nan() {
                "—".to_string()
            } else {
                format!("{:.2}", r.onset_worst_deg)
            },
            r.outside,
            r.outcome_changes,
            r.cell_outcome_changes,
            r.verdict_changes,
            mark
        );
    }
    let _ = writeln!(
        s,
        "\nChosen: `{}` (the cheapest rung whose verdicts and outcomes equal the finest rung's and whose figures stay within the tolerances).\n",
        sum.rungs[sum.chosen].rung.label()
    );
    let changed: Vec<&Change> = sum
        .changes
        .iter()
        .filter(|c| c.within == "no" && matches!(c.output, "verdict" | "outcome"))
        .collect();
    if !changed.is_empty() {
        s += "## Verdicts and outcomes that change\n\n| rung | what | where | here | finest |\n|---|---|---|---|---|\n";
        for c in changed {
            let _ = writeln!(
                s,
                "| {} | {} | {} | {} | {} |",
                sum.rungs[c.rung].rung.label(),
                c.output,
                c.place,
                c.value,
                c.finest
            );
        }
    }
    s
}

/// The chosen rung of a [`RUNGS_FILE`] text: (dt, substeps, contact Hz if given).
pub fn chosen_in_table(text: &str) -> Result<Rung, String> {
    let mut lines = text.lines();
    let head: Vec<&str> = lines.next().unwrap_or("").split(',').collect();
    let col = |name: &str| {
        head.iter()
            .position(|h| *h == name)
            .ok_or_else(|| format!("{RUNGS_FILE}: no column `{name}`"))
    };
    let (dt, sub, hz, ch) = (
        col("dt_s")?,
        col("substeps")?,
        col("contact_hz")?,
        col("chosen")?,
    );
    let mut found = None;
    for (n, line) in lines.enumerate() {
        let f: Vec<&str> = line.split(',').collect();
        if f.get(ch) == Some(&"yes") {
            if found.is_some() {
                return Err(format!("{RUNGS_FILE}: row {}: a second chosen rung", n + 2));
            }
            let bad = || format!("{RUNGS_FILE}: row {}: not a rung", n + 2);
            found = Some(Rung {
                dt: f.get(dt).and_then(|x| x.parse().ok()).ok_or_else(bad)?,
                substeps: f.get(sub).and_then(|x| x.parse().ok()).ok_or_else(bad)?,
                contact_hz: f.get(hz).and_then(|x| x.parse().ok()),
            });
        }
    }
    found.ok_or_else(|| format!("{RUNGS_FILE}: no chosen rung"))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn cell(seed: u64, status: Status, slip: f64) -> Cell {
        let mut c = Cell::for_tests();
        c.seed = seed;
        c.status = status;
        c.set_metric(Metric::SlipMean, slip);
        c
    }

    /// The mean over seeds and its standard error s / √n, against a hand computation: per-seed
    /// values 1, 2, 3 (mean 2, sample standard deviation 1, standard error 1 / √3); cells that
    /// do not count (a fall) are left out as the summary leaves them out.
    #[test]
    fn seed_mean_and_standard_error_match_the_hand_computation() {
        let cells = [
            cell(0, Status::Ok, 1.0),
            cell(1, Status::Ok, 2.0),
            cell(2, Status::Ok, 3.0),
            cell(3, Status::Fell, 100.0),
        ];
        let refs: Vec<&Cell> = cells.iter().collect();
        let m = seed_mean(&refs, Metric::SlipMean).unwrap();
        assert!((m.mean - 2.0).abs() < 1e-12);
        assert!((m.se - 1.0 / 3f64.sqrt()).abs() < 1e-12);
        let one = seed_mean(&refs[..1], Metric::SlipMean).unwrap();
        assert_eq!((one.mean, one.se), (1.0, 0.0));
        let mut counts = [0usize; Status::ALL.len()];
        counts[Status::ALL.iter().position(|s| *s == Status::Ok).unwrap()] = 2;
        counts[Status::ALL.iter().position(|s| *s == Status::Fell).unwrap()] = 1;
        assert_eq!(outcome_text(&counts), "ok 2; fell 1");
    }
}
