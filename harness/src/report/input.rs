//! Reading a finished run folder: `cells.csv`, `manifest.json`, and the optional
//! `timing.csv` and `onset.csv`.
//!
//! Everything here is file data, so nothing may panic on it: every problem becomes an error
//! that names the file and, for a CSV, the data row, the file line and the column. Row and line
//! differ when a quoted message spans lines, so both are given.

use std::collections::{HashMap, HashSet};
use std::path::{Path, PathBuf};

use crate::run_format::{AXES, AxisKind, AxisValue, METRICS};
/// File names inside a run folder, the outcome enum and the column lists: the run format.
pub use crate::run_format::{CELLS_FILE, MANIFEST_FILE, ONSET_FILE, TIMING_FILE};

/// How a cell ended, as the runner writes it in the `status` column
/// ([`crate::run_format::Outcome`]; its `ALL` order is the outcomes table's column order).
pub use crate::run_format::Outcome as Status;

/// The per-cell metric columns of `cells.csv`, in file order.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum Metric {
    SimTime,
    SlipMean,
    SlipMax,
    SlipTotal,
    StancePhases,
    BasePosRms,
    BaseOrientRms,
    JointRms,
    Progress,
    ProgressPlanned,
    TorqueRms,
    TorquePeak,
    TorqueLimitShare,
    Energy,
    FrictionUseMax,
    FrictionOverShare,
    LawTroubleShare,
    LawSolvedShare,
    LawInfeasibleShare,
    LawUnderactuatedShare,
    LawFailedShare,
    StanceOffGroundShare,
    TorqueFlipRate,
    // The world metrics (issue 14; crate::world_metrics).
    TouchdownForcePeak,
    TorqueRatePeak,
    PushDisplacement,
    PushRecovery,
    StepEarlyShare,
    StepLateShare,
}

impl Metric {
    pub const ALL: [Metric; 29] = [
        Metric::SimTime,
        Metric::SlipMean,
        Metric::SlipMax,
        Metric::SlipTotal,
        Metric::StancePhases,
        Metric::BasePosRms,
        Metric::BaseOrientRms,
        Metric::JointRms,
        Metric::Progress,
        Metric::ProgressPlanned,
        Metric::TorqueRms,
        Metric::TorquePeak,
        Metric::TorqueLimitShare,
        Metric::Energy,
        Metric::FrictionUseMax,
        Metric::FrictionOverShare,
        Metric::LawTroubleShare,
        Metric::LawSolvedShare,
        Metric::LawInfeasibleShare,
        Metric::LawUnderactuatedShare,
        Metric::LawFailedShare,
        Metric::StanceOffGroundShare,
        Metric::TorqueFlipRate,
        Metric::TouchdownForcePeak,
        Metric::TorqueRatePeak,
        Metric::PushDisplacement,
        Metric::PushRecovery,
        Metric::StepEarlyShare,
        Metric::StepLateShare,
    ];

    /// Column name in `cells.csv` (and metric name in `summary.csv`): the run format's
    /// [`METRICS`] entry at the same position.
    pub fn column(self) -> &'static str {
        METRICS[self as usize].name
    }

    /// Columns added after the first release of `cells.csv` (law-status shares, off-ground
    /// share, torque reversals): a run folder written before them still reads, with NaN.
    fn is_optional(self) -> bool {
        matches!(
            self,
            Metric::LawSolvedShare
                | Metric::LawInfeasibleShare
                | Metric::LawUnderactuatedShare
                | Metric::LawFailedShare
                | Metric::StanceOffGroundShare
                | Metric::TorqueFlipRate
                | Metric::TouchdownForcePeak
                | Metric::TorqueRatePeak
                | Metric::PushDisplacement
                | Metric::PushRecovery
                | Metric::StepEarlyShare
                | Metric::StepLateShare
        )
    }

    /// Whether the column holds a count rather than a measurement.
    fn is_integer(self) -> bool {
        matches!(self, Metric::StancePhases)
    }
}

/// One row of `cells.csv`.
#[derive(Clone, Debug)]
pub struct Cell {
    pub id: String,
    pub index: u64,
    pub slope_deg: f64,
    pub mu: f64,
    pub rate_hz: f64,
    pub actuator: String,
    pub controller: String,
    pub mass_scale: f64,
    pub com_shift_mm: f64,
    pub sensor_noise: f64,
    /// Every axis of the run format's table, in table order, as read (numbers finite).
    pub axis_values: Vec<AxisValue>,
    pub seed: u64,
    pub status: Status,
    pub message: String,
    /// Whether the cell's condition is beyond the plan's physical limit (μ below the plan's
    /// μ_required or a torque share above 1): shown, never ranked, kept out of the means.
    /// Set by [`beyond_plan_limit`] when the run is read.
    pub beyond_plan_limit: bool,
    metrics: [f64; Metric::ALL.len()],
}

impl Cell {
    /// The metric as written; NaN where the runner could not define it.
    pub fn metric(&self, m: Metric) -> f64 {
        self.metrics[m as usize]
    }

    /// A cell with every metric NaN, on no axis, for unit tests elsewhere in the crate.
    #[cfg(test)]
    pub(crate) fn for_tests() -> Cell {
        Cell {
            id: String::new(),
            index: 0,
            slope_deg: 0.0,
            mu: 0.0,
            rate_hz: 0.0,
            actuator: String::new(),
            controller: String::new(),
            mass_scale: 1.0,
            com_shift_mm: 0.0,
            sensor_noise: 0.0,
            axis_values: Vec::new(),
            seed: 0,
            status: Status::Ok,
            message: String::new(),
            beyond_plan_limit: false,
            metrics: [f64::NAN; Metric::ALL.len()],
        }
    }

    #[cfg(test)]
    pub(crate) fn set_metric(&mut self, m: Metric, v: f64) {
        self.metrics[m as usize] = v;
    }
}

/// The fields of `manifest.json` the report relies on.
#[derive(Clone, Debug)]
pub struct Manifest {
    pub scenario_name: String,
    pub slip_floor_mm: f64,
    pub tool_version: String,
    /// The plan's limit per slope (`plan_limits`; empty for runs made before it existed).
    pub plan_limits: Vec<PlanLimit>,
}

/// The plan's own limit on one slope, as the runner wrote it (planner/limit.rs).
#[derive(Clone, Debug, PartialEq)]
pub struct PlanLimit {
    pub slope_deg: f64,
    /// Least friction any contact-force distribution needs for the plan (∞: none suffices).
    pub mu_required: f64,
    /// Where along the plan, s.
    pub at_s: f64,
    /// Share of the joint torque limits that distribution needs (NaN: undefined).
    pub torque_share: f64,
    /// μ_required with the torque limits imposed (∞: none suffices).
    pub mu_required_torque_limited: f64,
}

impl Manifest {
    /// The plan's limit on a slope, if the manifest has it.
    pub fn plan_limit(&self, slope_deg: f64) -> Option<&PlanLimit> {
        self.plan_limits
            .iter()
            .find(|l| (l.slope_deg - slope_deg).abs() < 1e-9)
    }

    /// Whether a condition (slope, μ) is beyond the plan's own limit: μ below what any force
    /// distribution needs for the plan, or the plan needing more than the joints' torque limits
    /// (torque share above 1). Such conditions are shown, never ranked, and left out of pooled
    /// tables. False when the manifest has no limit for the slope (older runs).
    pub fn beyond_plan_limit(&self, slope_deg: f64, mu: f64) -> bool {
        self.plan_limit(slope_deg)
            .is_some_and(|l| mu < l.mu_required || l.torque_share > 1.0)
    }
}

/// One row of `timing.csv`: machine measurements, kept apart from `cells.csv` so that file is
/// bit-identical across thread counts.
#[derive(Clone, Copy, Debug)]
pub struct Timing {
    pub compute_median_us: f64,
    pub compute_p99_us: f64,
    pub wall_s: f64,
}

/// One row of `onset.csv`: the steepest slope a law held for one group.
#[derive(Clone, Debug)]
pub struct OnsetRow {
    pub mu: f64,
    pub controller: String,
    pub rate_hz: f64,
    pub actuator: String,
    pub onset_deg: f64,
    pub friction_angle_deg: f64,
    pub runs: u64,
}

/// Everything read from a run folder.
#[derive(Clone, Debug)]
pub struct Run {
    pub dir: PathBuf,
    pub manifest: Manifest,
    /// Sorted by `index` (matrix order), whatever order the runner appended them in.
    pub cells: Vec<Cell>,
    /// `None` when the run has no `timing.csv`.
    pub timing: Option<HashMap<String, Timing>>,
    /// Rows of `timing.csv` whose `cell_id` is not in `cells.csv` (left out of the tables).
    pub timing_unmatched: usize,
    /// `None` when the run has no `onset.csv`.
    pub onset: Option<Vec<OnsetRow>>,
}

/// Reads a whole run folder.
pub fn read_run(dir: &Path) -> Result<Run, String> {
    if !dir.is_dir() {
        return Err(format!(
            "{}: not a run folder (no such directory)",
            dir.display()
        ));
    }
    let manifest = read_manifest(&dir.join(MANIFEST_FILE))?;
    let mut cells = read_cells(&dir.join(CELLS_FILE))?;
    for c in &mut cells {
        c.beyond_plan_limit = beyond_plan_limit(&manifest, c);
    }
    let timing_path = dir.join(TIMING_FILE);
    let (timing, timing_unmatched) = if timing_path.exists() {
        let known: HashSet<&str> = cells.iter().map(|c| c.id.as_str()).collect();
        let all = read_timing(&timing_path)?;
        let total = all.len();
        let kept: HashMap<String, Timing> = all
            .into_iter()
            .filter(|(id, _)| known.contains(id.as_str()))
            .collect();
        let unmatched = total - kept.len();
        (Some(kept), unmatched)
    } else {
        (None, 0)
    };
    let onset_path = dir.join(ONSET_FILE);
    let onset = if onset_path.exists() {
        Some(read_onset(&onset_path)?)
    } else {
        None
    };
    Ok(Run {
        dir: dir.to_path_buf(),
        manifest,
        cells,
        timing,
        timing_unmatched,
        onset,
    })
}

/// Whether a cell's condition is beyond what its plan allows any law to hold: μ below the plan's
/// μ_required for the cell's slope, or a torque share above 1 ([`Manifest::beyond_plan_limit`]).
/// The single place the report asks; every table that ranks or pools excludes such cells
/// ([`Cell::beyond_plan_limit`]). Runs whose manifest has no limit for the slope: never beyond.
pub fn beyond_plan_limit(manifest: &Manifest, cell: &Cell) -> bool {
    manifest.beyond_plan_limit(cell.slope_deg, cell.mu)
}

/// Reads `manifest.json`; only the three fields the report needs are required.
pub fn read_manifest(path: &Path) -> Result<Manifest, String> {
    let text = std::fs::read_to_string(path)
        .map_err(|e| format!("{}: cannot read: {e}", path.display()))?;
    let value: serde_json::Value = serde_json::from_str(&text)
        .map_err(|e| format!("{}: not valid JSON: {e}", path.display()))?;
    let obj = value
        .as_object()
        .ok_or_else(|| format!("{}: expected a JSON object at the top", path.display()))?;
    let field = |name: &str| {
        obj.get(name)
            .ok_or_else(|| format!("{}: missing field '{name}'", path.display()))
    };
    let string_field = |name: &str| -> Result<String, String> {
        field(name)?
            .as_str()
            .map(str::to_string)
            .ok_or_else(|| format!("{}: field '{name}' must be a string", path.display()))
    };
    let scenario_name = string_field("scenario_name")?;
    let tool_version = string_field("tool_version")?;
    let slip_floor_mm = field("slip_floor_mm")?.as_f64().ok_or_else(|| {
        format!(
            "{}: field 'slip_floor_mm' must be a number (mm of apparent slip per stance phase)",
            path.display()
        )
    })?;
    if !slip_floor_mm.is_finite() || slip_floor_mm < 0.0 {
        return Err(format!(
            "{}: field 'slip_floor_mm' must be a finite number ≥ 0, found {slip_floor_mm}",
            path.display()
        ));
    }
    let plan_limits = match obj.get("plan_limits") {
        None | Some(serde_json::Value::Null) => Vec::new(),
        Some(v) => read_plan_limits(path, v)?,
    };
    Ok(Manifest {
        scenario_name,
        slip_floor_mm,
        tool_version,
        plan_limits,
    })
}

/// The manifest's `plan_limits`: an array of objects; null numbers mean "none suffices" for the
/// friction fields and "undefined" for the torque share.
fn read_plan_limits(path: &Path, v: &serde_json::Value) -> Result<Vec<PlanLimit>, String> {
    let bad = |what: String| format!("{}: field 'plan_limits': {what}", path.display());
    let rows = v
        .as_array()
        .ok_or_else(|| bad("must be an array of objects".into()))?;
    rows.iter()
        .enumerate()
        .map(|(i, row)| {
            let num = |name: &str, null: f64| -> Result<f64, String> {
                match row.get(name) {
                    Some(serde_json::Value::Null) => Ok(null),
                    Some(x) => x.as_f64().filter(|x| x.is_finite()).ok_or_else(|| {
                        bad(format!("entry {i}: '{name}' must be a number or null"))
                    }),
                    None => Err(bad(format!("entry {i}: missing '{name}'"))),
                }
            };
            Ok(PlanLimit {
                slope_deg: num("slope_deg", f64::NAN)?,
                mu_required: num("mu_required", f64::INFINITY)?,
                at_s: num("at_s", f64::NAN)?,
                torque_share: num("torque_share", f64::NAN)?,
                mu_required_torque_limited: num("mu_required_torque_limited", f64::INFINITY)?,
            })
        })
        .collect()
}

/// Reads `cells.csv` and returns the cells in matrix order.
pub fn read_cells(path: &Path) -> Result<Vec<Cell>, String> {
    let mut required: Vec<&str> = crate::run_format::cell_columns();
    required.extend(
        Metric::ALL
            .iter()
            .filter(|m| !m.is_optional())
            .map(|m| m.column()),
    );
    let table = CsvTable::read(path, &required)?;
    let mut cells = Vec::with_capacity(table.rows.len());
    let mut seen_id: HashMap<String, usize> = HashMap::new();
    for row in table.rows() {
        let id = row.text("cell_id")?.to_string();
        if id.len() != 16 || !id.bytes().all(|b| b.is_ascii_hexdigit()) {
            return Err(row.error("cell_id", &format!("expected 16 hex digits, found '{id}'")));
        }
        if let Some(first) = seen_id.insert(id.clone(), row.row) {
            return Err(row.error(
                "cell_id",
                &format!(
                    "cell '{id}' appears twice (first at row {first}); merge or resume doubled it"
                ),
            ));
        }
        let status_text = row.text("status")?;
        let status = Status::parse(status_text).ok_or_else(|| {
            row.error(
                "status",
                &format!(
                    "unknown status '{status_text}'; expected one of {}",
                    Status::names()
                ),
            )
        })?;
        let mut metrics = [f64::NAN; Metric::ALL.len()];
        for m in Metric::ALL {
            metrics[m as usize] = if m.is_optional() && !table.columns.contains_key(m.column()) {
                f64::NAN
            } else if m.is_integer() {
                row.integer(m.column())? as f64
            } else {
                row.number(m.column())?
            };
        }
        let axis_values = AXES
            .iter()
            .map(|a| match a.kind {
                // An axis added after the folder was written reads as its neutral value (the
                // value that reproduces the cells from before it existed).
                _ if a.after_metrics() && !table.columns.contains_key(a.name) => a
                    .neutral_value()
                    .ok_or_else(|| row.error(a.name, "column missing")),
                AxisKind::Number => row.axis_number(a.name).map(AxisValue::Number),
                AxisKind::Name => row.name(a.name).map(AxisValue::Name),
            })
            .collect::<Result<Vec<_>, _>>()?;
        cells.push(Cell {
            id,
            index: row.integer("index")?,
            slope_deg: row.axis_number("slope_deg")?,
            mu: row.axis_number("mu")?,
            rate_hz: row.axis_number("rate_hz")?,
            actuator: row.name("actuator")?,
            controller: row.name("controller")?,
            mass_scale: row.axis_number("mass_scale")?,
            com_shift_mm: row.axis_number("com_shift_mm")?,
            sensor_noise: row.axis_number("sensor_noise")?,
            axis_values,
            seed: row.integer("seed")?,
            status,
            message: row.text("message")?.to_string(),
            beyond_plan_limit: false,
            metrics,
        });
    }
    if cells.is_empty() {
        return Err(format!(
            "{}: no cells (only a header); nothing to report",
            path.display()
        ));
    }
    // Matrix order, so "first appearance" of a controller or actuator means the scenario's
    // order, not the order in which parallel workers happened to finish.
    cells.sort_by_key(|c| c.index);
    Ok(cells)
}

/// Reads `timing.csv` into a map from cell id.
pub fn read_timing(path: &Path) -> Result<Vec<(String, Timing)>, String> {
    let table = CsvTable::read(
        path,
        &["cell_id", "compute_median_us", "compute_p99_us", "wall_s"],
    )?;
    let mut out = Vec::with_capacity(table.rows.len());
    let mut seen: HashSet<String> = HashSet::new();
    for row in table.rows() {
        let id = row.text("cell_id")?.to_string();
        if !seen.insert(id.clone()) {
            return Err(row.error("cell_id", &format!("cell '{id}' appears twice")));
        }
        out.push((
            id,
            Timing {
                compute_median_us: row.number("compute_median_us")?,
                compute_p99_us: row.number("compute_p99_us")?,
                wall_s: row.number("wall_s")?,
            },
        ));
    }
    Ok(out)
}

/// Reads `onset.csv`.
pub fn read_onset(path: &Path) -> Result<Vec<OnsetRow>, String> {
    let table = CsvTable::read(
        path,
        &[
            "mu",
            "controller",
            "rate_hz",
            "actuator",
            "onset_deg",
            "friction_angle_deg",
            "runs",
        ],
    )?;
    let mut out = Vec::with_capacity(table.rows.len());
    for row in table.rows() {
        out.push(OnsetRow {
            mu: row.axis_number("mu")?,
            controller: row.name("controller")?,
            rate_hz: row.axis_number("rate_hz")?,
            actuator: row.name("actuator")?,
            onset_deg: row.number("onset_deg")?,
            friction_angle_deg: row.number("friction_angle_deg")?,
            runs: row.integer("runs")?,
        });
    }
    Ok(out)
}

/// A CSV file held as text records, with the header mapped to column positions.
struct CsvTable {
    path: PathBuf,
    columns: HashMap<String, usize>,
    /// (data row number from 1, file line where the record starts, fields)
    rows: Vec<(usize, u64, csv::StringRecord)>,
}

impl CsvTable {
    fn read(path: &Path, required: &[&str]) -> Result<CsvTable, String> {
        let file = std::fs::File::open(path)
            .map_err(|e| format!("{}: cannot open: {e}", path.display()))?;
        // Flexible so that a short or long row reaches our own check, which names the row and
        // the first missing column instead of the reader's generic length message.
        let mut reader = csv::ReaderBuilder::new()
            .has_headers(true)
            .flexible(true)
            .from_reader(std::io::BufReader::new(file));
        let header = reader
            .headers()
            .map_err(|e| format!("{}: line 1 (header): {e}", path.display()))?
            .clone();
        let mut columns = HashMap::new();
        for (i, name) in header.iter().enumerate() {
            if columns.insert(name.trim().to_string(), i).is_some() {
                return Err(format!(
                    "{}: line 1 (header), column {}: column '{}' appears twice",
                    path.display(),
                    i + 1,
                    name.trim()
                ));
            }
        }
        for name in required {
            if !columns.contains_key(*name) {
                return Err(format!(
                    "{}: line 1 (header): missing column '{name}' (found: {})",
                    path.display(),
                    header.iter().collect::<Vec<_>>().join(", ")
                ));
            }
        }
        let mut rows = Vec::new();
        for (i, record) in reader.records().enumerate() {
            let row = i + 1;
            let record = record.map_err(|e| {
                let line = e.position().map(|p| p.line()).unwrap_or(0);
                format!("{}: row {row} (line {line}): {e}", path.display())
            })?;
            let line = record.position().map(|p| p.line()).unwrap_or(0);
            if record.len() != header.len() {
                let what = if record.len() < header.len() {
                    format!(
                        "has {} fields, the header has {}; column '{}' is missing",
                        record.len(),
                        header.len(),
                        header.get(record.len()).unwrap_or("?")
                    )
                } else {
                    format!(
                        "has {} fields, the header has {} (an unquoted comma in a message?)",
                        record.len(),
                        header.len()
                    )
                };
                return Err(format!(
                    "{}: row {row} (line {line}) {what}",
                    path.display()
                ));
            }
            rows.push((row, line, record));
        }
        Ok(CsvTable {
            path: path.to_path_buf(),
            columns,
            rows,
        })
    }

    fn rows(&self) -> impl Iterator<Item = RowRef<'_>> {
        self.rows.iter().map(|(row, line, record)| RowRef {
            table: self,
            row: *row,
            line: *line,
            record,
        })
    }
}

/// One data row with typed, error-reporting accessors.
struct RowRef<'a> {
    table: &'a CsvTable,
    row: usize,
    line: u64,
    record: &'a csv::StringRecord,
}

impl RowRef<'_> {
    fn error(&self, column: &str, what: &str) -> String {
        format!(
            "{}: row {} (line {}), column '{column}': {what}",
            self.table.path.display(),
            self.row,
            self.line
        )
    }

    fn text(&self, column: &str) -> Result<&str, String> {
        self.table
            .columns
            .get(column)
            .and_then(|&i| self.record.get(i))
            .ok_or_else(|| self.error(column, "missing"))
    }

    /// A name (controller, actuator): any non-empty text.
    fn name(&self, column: &str) -> Result<String, String> {
        let t = self.text(column)?.trim();
        if t.is_empty() {
            return Err(self.error(column, "empty; expected a name"));
        }
        Ok(t.to_string())
    }

    /// A metric: a number, or NaN where it is undefined.
    fn number(&self, column: &str) -> Result<f64, String> {
        let t = self.text(column)?.trim();
        t.parse::<f64>().map_err(|_| {
            self.error(
                column,
                &format!("expected a number (NaN where undefined), found '{t}'"),
            )
        })
    }

    /// An axis value: a finite number, since rows are grouped by it.
    fn axis_number(&self, column: &str) -> Result<f64, String> {
        let t = self.text(column)?.trim();
        match t.parse::<f64>() {
            Ok(v) if v.is_finite() => Ok(v),
            _ => Err(self.error(column, &format!("expected a finite number, found '{t}'"))),
        }
    }

    fn integer(&self, column: &str) -> Result<u64, String> {
        let t = self.text(column)?.trim();
        t.parse::<u64>()
            .map_err(|_| self.error(column, &format!("expected a whole number ≥ 0, found '{t}'")))
    }
}
