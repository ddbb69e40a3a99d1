//! The report: reduces a finished run folder to tables for people (`summary.md`), the same
//! numbers for machines (`summary.csv`), figures (`plots/*.svg`, `plots/*.png`) and the review
//! sheet that holds them all in one file (`report.html`, see `html.rs`).
//!
//! It reads only the run's files (`cells.csv`, `manifest.json`, and `timing.csv` and
//! `onset.csv` when present), so `gripsweep report DIR` rebuilds the same report from a copy
//! of the folder on any machine. Data flows one way: input → tables → (markdown, csv, plots).

mod figures;
mod html;
mod input;
mod long_csv;
mod look;
mod markdown;
mod page;
mod plots;
pub mod replay;
mod stats;
mod tables;

use std::path::{Path, PathBuf};

pub use figures::{OUTCOME_CLASSES, outcome_class};
pub use html::{REPORT_HTML, trace_command};
pub use input::{
    CELLS_FILE, Cell, MANIFEST_FILE, Manifest, Metric, ONSET_FILE, OnsetRow, PlanLimit, Run,
    Status, TIMING_FILE, Timing, read_manifest, read_run,
};
pub use plots::Image;
pub use stats::{Stat, mean_ci95, over_seeds, t_975};
pub use tables::{Axis, Measure, Study, Verdict, judge, seed_means};

use tables::{ComputeRow, Condition, Entry, LawRecord, OnsetTable, Pivot};

/// Name of the people's summary inside the run folder.
pub const SUMMARY_MD: &str = "summary.md";
/// Name of the machines' summary inside the run folder.
pub const SUMMARY_CSV: &str = "summary.csv";
/// Folder of the figures inside the run folder.
pub const PLOTS_DIR: &str = "plots";

/// What `write_report` did.
#[derive(Clone, Debug)]
pub struct ReportSummary {
    /// Every file written, summaries first, then figures (SVG before PNG).
    pub files: Vec<PathBuf>,
    /// The figures with their pixel size (the SVG and the PNG of a figure share it).
    pub images: Vec<Image>,
    /// Figures not drawn, each with the reason (also stated in `summary.md`).
    pub skipped: Vec<String>,
    /// Cells read from `cells.csv`.
    pub cells: usize,
    /// Controllers in matrix order.
    pub controllers: Vec<String>,
    /// The slip floor every "lowest slip" verdict was judged against (mm per stance phase).
    pub slip_floor_mm: f64,
}

/// Every table of the report, computed once and read by the three writers.
pub(crate) struct Computed {
    pub slip_by_friction: Vec<Pivot>,
    /// Per slope: the per-(rate, actuator) slip tables where pooling changes the answer.
    pub slip_by_regime: Vec<Vec<Pivot>>,
    pub tracking_by_friction: Vec<Pivot>,
    pub rate_slip: Pivot,
    pub rate_tracking: Pivot,
    pub actuator_slip: Pivot,
    pub actuator_tracking: Pivot,
    /// Per-controller means of each measure over the whole run.
    pub per_controller: Vec<(Measure, Vec<Entry>)>,
    pub conditions: Vec<Condition>,
    pub records: Vec<LawRecord>,
    pub statuses: Vec<[usize; input::Status::ALL.len()]>,
    pub compute: Option<Vec<ComputeRow>>,
    pub onset: Option<Vec<OnsetTable>>,
}

impl Computed {
    fn new(study: &Study) -> Computed {
        let n_ctrl = study.controllers().len();
        // issue 14 (world14): the world table only where the run has its columns.
        let world: &[Measure] = if study.run.cells.iter().any(|c| {
            tables::WORLD
                .iter()
                .any(|m| matches!(m, Measure::Plain(x) if c.metric(*x).is_finite()))
        }) {
            &tables::WORLD
        } else {
            &[]
        };
        let per_controller = tables::TRACKING_EFFORT
            .iter()
            .chain(tables::CONTACT_HEALTH.iter())
            .chain(std::iter::once(&tables::SLIP))
            .chain(world.iter())
            .map(|m| (*m, (0..n_ctrl).map(|c| study.entry(c, &[], *m)).collect()))
            .collect();
        let conditions = study.conditions();
        let slip_by_friction = study.slip_by_friction();
        let slip_by_regime = study.slip_by_regime(&slip_by_friction);
        let records = study.records(&conditions);
        Computed {
            slip_by_friction,
            slip_by_regime,
            tracking_by_friction: study.tracking_by_friction(),
            // Each law against itself, within the conditions where every compared run held.
            rate_slip: study.within_law("rate_study", Axis::Rate, tables::SLIP),
            rate_tracking: study.within_law("rate_study", Axis::Rate, tables::BASE_POS),
            actuator_slip: study.within_law("actuator_study", Axis::Actuator, tables::SLIP),
            actuator_tracking: study.within_law("actuator_study", Axis::Actuator, tables::BASE_POS),
            per_controller,
            conditions,
            records,
            statuses: study.status_counts(),
            compute: study.compute_times(),
            onset: study.onset_tables(),
        }
    }
}

/// Reads the run folder `dir` and writes `summary.md`, `summary.csv` and `plots/` into it.
///
/// Errors name the file and, for CSV data, the row, line and column; nothing is written when
/// the input cannot be read.
pub fn write_report(dir: &Path) -> Result<ReportSummary, String> {
    let run = read_run(dir)?;
    let study = Study::new(&run);
    let computed = Computed::new(&study);
    let planned = figures::plan(&study, &computed);

    let plots_dir = dir.join(PLOTS_DIR);
    std::fs::create_dir_all(&plots_dir)
        .map_err(|e| format!("{}: cannot create: {e}", plots_dir.display()))?;
    let mut images = Vec::new();
    for fig in &planned.figures {
        images.extend(fig.render(&plots_dir)?);
    }
    // A figure skipped now may exist from an earlier report of a folder that had more data;
    // leaving it would show a plot the summary says is not there.
    for stem in &planned.skipped_stems {
        for ext in ["svg", "png"] {
            let stale = plots_dir.join(format!("{stem}.{ext}"));
            if stale.exists() {
                std::fs::remove_file(&stale)
                    .map_err(|e| format!("{}: cannot remove stale figure: {e}", stale.display()))?;
            }
        }
    }

    let md_path = dir.join(SUMMARY_MD);
    let mut md = markdown::render(&study, &computed, &planned);
    md.push_str(&gains_section(dir, run.manifest.slip_floor_mm));
    std::fs::write(&md_path, md)
        .map_err(|e| format!("{}: cannot write: {e}", md_path.display()))?;
    let csv_path = dir.join(SUMMARY_CSV);
    long_csv::write(&csv_path, &study, &computed)?;

    let html_path = dir.join(REPORT_HTML);
    let html = html::render(dir, &study, &computed, &planned)?;
    std::fs::write(&html_path, html)
        .map_err(|e| format!("{}: cannot write: {e}", html_path.display()))?;

    let mut files = vec![md_path, csv_path, html_path];
    files.extend(images.iter().map(|i| i.path.clone()));
    Ok(ReportSummary {
        files,
        images,
        skipped: planned.skipped.clone(),
        cells: run.cells.len(),
        controllers: study.controllers().to_vec(),
        slip_floor_mm: run.manifest.slip_floor_mm,
    })
}

/// The summary's closing section: the gains every law ran with (the run folder's tuning table),
/// and a warning when the slip floor is implausible.
fn gains_section(dir: &Path, floor: f64) -> String {
    use std::fmt::Write as _;
    let mut out = String::new();
    if floor > crate::floor::FLOOR_BOUND_MM {
        let _ = writeln!(
            out,
            "\n## Warning: implausible slip floor\n\nThe robot standing still on flat ground (μ = 1, stiff PD with its tuned gains at the plant rate) crept {floor:.3} mm per stance phase, above the plausible {} mm: the plant's contact model cannot resolve slip differences here, so no table above ranks the laws on slip (every law ties).\n",
            crate::floor::FLOOR_BOUND_MM
        );
    }
    let path = dir.join(crate::tuning::GAINS_FILE);
    let Ok(text) = std::fs::read_to_string(&path) else {
        return out;
    };
    let mut reader = csv::ReaderBuilder::new().from_reader(text.as_bytes());
    let Ok(head) = reader.headers().cloned() else {
        return out;
    };
    let col = |name: &str| head.iter().position(|h| h == name);
    let cols = [
        ("law", "law"),
        ("rate_hz", "rate, Hz"),
        ("actuator", "actuator"),
        ("s_critical", "s_c"),
        ("s_chosen", "s"),
        ("stiff_kp", "kp"),
        ("stiff_kd", "kd"),
        ("task_kp", "task kp, 1/s²"),
        ("task_kd", "task kd, 1/s"),
        ("joint_kp", "joint kp"),
        ("joint_kd", "joint kd"),
        ("joint_rms_deg", "joint RMS on the tuning motion, °"),
        ("reason", "why"),
    ];
    let _ = writeln!(
        out,
        "\n## Gains every law ran with\n\nFrom `{}` (tuned for this robot, rate and actuator before the cells; see the README, *Tuning*). s: gain scale on the law's settings (stiffness × s, damping × √s); s_c: the critical scale; kp in N·m/rad, kd in N·m·s/rad.\n",
        crate::tuning::GAINS_FILE
    );
    let _ = writeln!(
        out,
        "| {} |\n|{}",
        cols.iter().map(|c| c.1).collect::<Vec<_>>().join(" | "),
        " --- |".repeat(cols.len())
    );
    for rec in reader.records().flatten() {
        let cells: Vec<String> = cols
            .iter()
            .map(|(name, _)| {
                let v = col(name).and_then(|k| rec.get(k)).unwrap_or("");
                let bound = col("s_critical_bound")
                    .and_then(|k| rec.get(k))
                    .unwrap_or("");
                let mark = match (*name, bound) {
                    ("s_critical", "at-upper") => "≥ ",
                    ("s_critical", "below-lower") => "< ",
                    _ => "",
                };
                let text = match v.parse::<f64>() {
                    Ok(x) if *name != "rate_hz" && x.abs() >= 100.0 => format!("{x:.0}"),
                    Ok(x) if *name != "rate_hz" => format!("{x:.3}"),
                    _ if v.is_empty() => "—".to_string(),
                    _ => v.to_string(),
                };
                format!("{mark}{text}")
            })
            .collect();
        let _ = writeln!(out, "| {} |", cells.join(" | "));
    }
    out
}
