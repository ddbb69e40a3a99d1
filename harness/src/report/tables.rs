//! From cells to tables: the axes of the run, grouped means over seeds, the slip-floor rule
//! that decides which law (if any) had the lowest slip, and the per-condition comparison that
//! the "where each law wins" text is generated from.
//!
//! Nothing here formats text; `markdown.rs`, `long_csv.rs` and `plots.rs` read these values.

use std::collections::{BTreeMap, HashMap};

use super::input::{Cell, Metric, OnsetRow, Run, Status};
use super::stats::{Stat, over_seeds, t_975};
use crate::run_format::{AXES, AxisKind, AxisValue};

/// The number of condition axes: the run format's axes the report groups conditions by
/// (every axis but the controller; the seed is not an axis).
pub const N_AXES: usize = crate::run_format::condition_axis_count();

/// A matrix axis a condition is made of: the `k`-th condition axis of the run format's table
/// ([`crate::run_format::AXES`] without the controller), so an axis added there is a condition
/// axis here, in every table, with no change to the report.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub struct Axis(pub usize);

/// The axes the report treats in its own way (the outcome map is slope × μ, the rate and
/// actuator studies), by their place in the table; a test checks the names.
#[allow(non_upper_case_globals)]
impl Axis {
    pub const Slope: Axis = Axis(0);
    pub const Mu: Axis = Axis(1);
    pub const Rate: Axis = Axis(2);
    pub const Actuator: Axis = Axis(3);

    /// Every condition axis, in table order: the order they are named in text and in
    /// `summary.csv`.
    pub const ALL: [Axis; N_AXES] = {
        let mut out = [Axis(0); N_AXES];
        let mut i = 0;
        while i < N_AXES {
            out[i] = Axis(i);
            i += 1;
        }
        out
    };

    /// The axis's entry in the run format's table.
    pub fn def(self) -> &'static crate::run_format::Axis {
        &AXES[crate::run_format::condition_axis(self.0)]
    }

    /// Column name in `cells.csv` and `summary.csv`.
    pub fn column(self) -> &'static str {
        self.def().name
    }

    /// What the axis is, for people.
    pub fn label(self) -> &'static str {
        self.def().label
    }

    fn is_numeric(self) -> bool {
        self.def().kind == AxisKind::Number
    }
}

/// The distinct values of each axis: numbers ascending, names in matrix order.
#[derive(Clone, Debug)]
pub struct Axes {
    numeric: Vec<Vec<f64>>,
    names: Vec<Vec<String>>,
    pub controllers: Vec<String>,
}

impl Axes {
    fn from_cells(cells: &[Cell]) -> Axes {
        let mut numeric: Vec<Vec<f64>> = vec![Vec::new(); N_AXES];
        let mut names: Vec<Vec<String>> = vec![Vec::new(); N_AXES];
        let mut controllers: Vec<String> = Vec::new();
        for c in cells {
            for axis in Axis::ALL {
                match axis_value(c, axis) {
                    AxisValue::Number(v) => numeric[axis.0].push(*v),
                    AxisValue::Name(n) => {
                        if !names[axis.0].contains(n) {
                            names[axis.0].push(n.clone());
                        }
                    }
                }
            }
            if !controllers.contains(&c.controller) {
                controllers.push(c.controller.clone());
            }
        }
        for values in &mut numeric {
            values.sort_by(f64::total_cmp);
            values.dedup();
        }
        Axes {
            numeric,
            names,
            controllers,
        }
    }

    /// Number of distinct values on an axis.
    pub fn len(&self, axis: Axis) -> usize {
        if axis.is_numeric() {
            self.numeric[axis.0].len()
        } else {
            self.names[axis.0].len()
        }
    }

    /// The numeric values of a numeric axis (empty for a name axis).
    pub fn numbers(&self, axis: Axis) -> &[f64] {
        &self.numeric[axis.0]
    }

    fn index(&self, c: &Cell, axis: Axis) -> usize {
        match axis_value(c, axis) {
            AxisValue::Number(v) => self.numeric[axis.0]
                .iter()
                .position(|x| x == v)
                .unwrap_or(0),
            AxisValue::Name(n) => self.names[axis.0].iter().position(|a| a == n).unwrap_or(0),
        }
    }

    /// The value as written in `summary.csv` (shortest round-trip, or the name).
    pub fn value_raw(&self, axis: Axis, i: usize) -> String {
        if axis.is_numeric() {
            self.numeric[axis.0]
                .get(i)
                .map(|v| format!("{v}"))
                .unwrap_or_default()
        } else {
            self.names[axis.0].get(i).cloned().unwrap_or_default()
        }
    }

    /// The value with its unit, for people ("slope 15°", "μ 0.4", "100 Hz", "ideal", …).
    pub fn value_text(&self, axis: Axis, i: usize) -> String {
        (axis.def().value_label)(&self.value_raw(axis, i))
    }
}

fn axis_value(c: &Cell, axis: Axis) -> &AxisValue {
    &c.axis_values[crate::run_format::condition_axis(axis.0)]
}

/// A quantity averaged in the tables: a `cells.csv` metric or one derived from them.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Measure {
    Plain(Metric),
    /// Progress made as a share of the planned progress.
    ProgressShare,
}

impl Measure {
    pub fn value(self, c: &Cell) -> f64 {
        match self {
            Measure::Plain(m) => c.metric(m),
            Measure::ProgressShare => {
                let planned = c.metric(Metric::ProgressPlanned);
                if planned.abs() > 0.0 {
                    c.metric(Metric::Progress) / planned
                } else {
                    f64::NAN
                }
            }
        }
    }

    /// Metric name in `summary.csv` (raw units, shares as 0..1).
    pub fn name(self) -> &'static str {
        match self {
            Measure::Plain(m) => m.column(),
            Measure::ProgressShare => "progress_share",
        }
    }

    /// Column heading for people, with the unit.
    pub fn heading(self) -> &'static str {
        match self {
            Measure::Plain(m) => match m {
                Metric::SimTime => "simulated time (s)",
                Metric::SlipMean => "mean slip per stance phase (mm)",
                Metric::SlipMax => "largest stance slip (mm)",
                Metric::SlipTotal => "total slip (mm)",
                Metric::StancePhases => "stance phases",
                Metric::BasePosRms => "base position error, RMS (mm)",
                Metric::BaseOrientRms => "base orientation error, RMS (°)",
                Metric::JointRms => "joint angle error, RMS (°)",
                Metric::Progress => "progress uphill (m)",
                Metric::ProgressPlanned => "planned progress (m)",
                Metric::TorqueRms => "joint torque, RMS (N·m)",
                Metric::TorquePeak => "joint torque, peak (N·m)",
                Metric::TorqueLimitShare => "time at a torque limit (%)",
                Metric::Energy => "mechanical energy (J)",
                Metric::FrictionUseMax => "peak friction use ‖f_t‖/(μ f_n)",
                Metric::FrictionOverShare => "stance time at the friction limit (%)",
                Metric::LawTroubleShare => "steps the law did not solve (%)",
                Metric::LawSolvedShare => "steps the law solved (%)",
                Metric::LawInfeasibleShare => "steps the law found infeasible (%)",
                Metric::LawUnderactuatedShare => "steps the law found underactuated (%)",
                Metric::LawFailedShare => "steps the law failed (%)",
                Metric::StanceOffGroundShare => "planned stance time off the ground (%)",
                Metric::TorqueFlipRate => "torque reversals per second, worst joint",
                Metric::TouchdownForcePeak => "peak touchdown force (body weights)",
                Metric::TorqueRatePeak => "peak joint torque rate (N·m/s)",
                Metric::PushDisplacement => "base displaced by the push (mm)",
                Metric::PushRecovery => "recovery after the push (s)",
                Metric::StepEarlyShare => "steps landing early (%)",
                Metric::StepLateShare => "steps landing late (%)",
            },
            Measure::ProgressShare => "progress made (% of plan)",
        }
    }

    /// Factor from the raw value to the value shown in `summary.md` (shares as percent).
    pub fn display_scale(self) -> f64 {
        match self {
            Measure::Plain(
                Metric::TorqueLimitShare
                | Metric::FrictionOverShare
                | Metric::LawTroubleShare
                | Metric::LawSolvedShare
                | Metric::LawInfeasibleShare
                | Metric::LawUnderactuatedShare
                | Metric::LawFailedShare
                | Metric::StanceOffGroundShare
                | Metric::StepEarlyShare
                | Metric::StepLateShare,
            )
            | Measure::ProgressShare => 100.0,
            Measure::Plain(_) => 1.0,
        }
    }
}

pub const SLIP: Measure = Measure::Plain(Metric::SlipMean);
pub const BASE_POS: Measure = Measure::Plain(Metric::BasePosRms);

/// Tracking and effort columns of the per-controller table.
pub const TRACKING_EFFORT: [Measure; 8] = [
    Measure::Plain(Metric::BasePosRms),
    Measure::Plain(Metric::BaseOrientRms),
    Measure::Plain(Metric::JointRms),
    Measure::ProgressShare,
    Measure::Plain(Metric::TorqueRms),
    Measure::Plain(Metric::TorquePeak),
    Measure::Plain(Metric::Energy),
    Measure::Plain(Metric::TorqueLimitShare),
];

/// Contact and law-health columns of the per-controller table.
pub const CONTACT_HEALTH: [Measure; 6] = [
    Measure::Plain(Metric::SlipMax),
    Measure::Plain(Metric::SlipTotal),
    Measure::Plain(Metric::StanceOffGroundShare),
    Measure::Plain(Metric::FrictionUseMax),
    Measure::Plain(Metric::FrictionOverShare),
    Measure::Plain(Metric::LawTroubleShare),
];

// --- issue 14 (world14) ---
/// Impacts, torque rate, push response and step timing: a third per-controller table, shown
/// when the run has any of these values (a run folder from before them has none).
pub const WORLD: [Measure; 6] = [
    Measure::Plain(Metric::TouchdownForcePeak),
    Measure::Plain(Metric::TorqueRatePeak),
    Measure::Plain(Metric::PushDisplacement),
    Measure::Plain(Metric::PushRecovery),
    Measure::Plain(Metric::StepEarlyShare),
    Measure::Plain(Metric::StepLateShare),
];
// --- end issue 14 ---

/// One table entry: a group of cells of one controller.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Entry {
    /// Over the group's cells that count (status `ok`, condition within the plan's limit);
    /// `None` when it has none with a defined value.
    pub stat: Option<Stat>,
    /// Cells of the group that fell or diverged (not in the mean).
    pub fell: usize,
    /// Cells of the group per status, in [`Status::ALL`] order (all of them, counted).
    pub outcomes: [usize; Status::ALL.len()],
    /// Cells of the group in a condition beyond the plan's limit (not in the mean).
    pub beyond: usize,
    /// All cells of the group, whatever their status.
    pub cells: usize,
}

impl Entry {
    fn of<'a>(cells: impl Iterator<Item = &'a Cell>, measure: Measure) -> Entry {
        let cells: Vec<&Cell> = cells.collect();
        Entry::of_split(cells.iter().copied(), cells.iter().copied(), measure)
    }

    /// The mean over `counted` (those of them that count), the outcome counts over `all`.
    fn of_split<'a>(
        all: impl Iterator<Item = &'a Cell>,
        counted: impl Iterator<Item = &'a Cell>,
        measure: Measure,
    ) -> Entry {
        let mut fell = 0;
        let mut count = 0;
        let mut beyond = 0;
        let mut outcomes = [0usize; Status::ALL.len()];
        for c in all {
            count += 1;
            if c.status.is_fall() {
                fell += 1;
            }
            if c.beyond_plan_limit {
                beyond += 1;
            }
            if let Some(k) = Status::ALL.iter().position(|s| *s == c.status) {
                outcomes[k] += 1;
            }
        }
        Entry {
            stat: over_seeds(seed_samples(counted, measure)),
            fell,
            outcomes,
            beyond,
            cells: count,
        }
    }

    /// Cells of the group that did not end `ok` (whatever else happened).
    pub fn not_ok(&self) -> usize {
        self.cells - self.outcomes[0]
    }

    /// Whether the law may be ranked in this group: it has a mean, and every one of its runs
    /// held and controlled the robot (status `ok`) in a condition within the plan's limit. A law
    /// with any other outcome in the group has a mean over a different set of runs (or none).
    pub fn rankable(&self) -> bool {
        self.stat.is_some() && self.not_ok() == 0 && self.beyond == 0
    }
}

/// Whether a cell's numbers enter means and rankings: it ended `ok` and its condition is within
/// the plan's physical limit.
pub fn counts(c: &Cell) -> bool {
    c.status.counts_for_means() && !c.beyond_plan_limit
}

/// `(seed, value)` samples of the cells that count.
fn seed_samples<'a>(
    cells: impl Iterator<Item = &'a Cell>,
    measure: Measure,
) -> impl Iterator<Item = (u64, f64)> {
    cells
        .filter(|c| counts(c))
        .map(move |c| (c.seed, measure.value(c)))
}

/// Per-seed means of the cells that count (non-finite values left out), by seed.
pub fn seed_means<'a>(
    cells: impl Iterator<Item = &'a Cell>,
    measure: Measure,
) -> BTreeMap<u64, f64> {
    let mut acc: BTreeMap<u64, (f64, usize)> = BTreeMap::new();
    for (seed, v) in seed_samples(cells, measure) {
        if v.is_finite() {
            let e = acc.entry(seed).or_insert((0.0, 0));
            e.0 += v;
            e.1 += 1;
        }
    }
    acc.into_iter()
        .map(|(s, (sum, n))| (s, sum / n as f64))
        .collect()
}

/// Significance level of the paired test between two laws.
pub const PAIRED_ALPHA: f64 = 0.05;

/// Paired t-test across seeds (two-sided, α = [`PAIRED_ALPHA`]) on the per-seed values of two
/// laws in the same group: the seeds are the pairs (same initial jitter, same conditions), the
/// statistic t = d̄ / (s_d / √n) over the n per-seed differences with n − 1 degrees of freedom
/// (Montgomery & Runger, "Applied Statistics and Probability for Engineers", Wiley, 3rd ed.
/// 2003, §10-4 "Paired t-test"; from memory). Chosen over the sign test and the Wilcoxon
/// signed-rank test because with three seeds neither of those can reach α = 0.05 (their
/// smallest two-sided p-value with n = 3 is 2 · 2⁻³ = 0.25), while the t-test can (t(0.975, 2)
/// = 4.30). Needs two common seeds; a zero spread with a nonzero mean difference is significant.
pub fn paired_difference_significant(a: &BTreeMap<u64, f64>, b: &BTreeMap<u64, f64>) -> bool {
    let diffs: Vec<f64> = a
        .iter()
        .filter_map(|(seed, va)| b.get(seed).map(|vb| va - vb))
        .collect();
    let n = diffs.len();
    if n < 2 {
        return false;
    }
    let mean = diffs.iter().sum::<f64>() / n as f64;
    let var = diffs.iter().map(|d| (d - mean).powi(2)).sum::<f64>() / (n - 1) as f64;
    if var == 0.0 {
        return mean != 0.0;
    }
    let t = mean / (var / n as f64).sqrt();
    t.abs() > t_975(n - 1)
}

/// Which law had the lowest mean slip in a row, under the slip-floor rule.
#[derive(Clone, Debug, PartialEq)]
pub enum Verdict {
    /// One law lower than every other by more than the floor; `margin` to the runner-up.
    Lowest {
        ctrl: usize,
        margin: f64,
        runner_up: usize,
    },
    /// Two or more laws within the floor of the lowest mean (lowest first): no winner.
    Tied(Vec<usize>),
    /// Only one law had a mean to compare.
    Only(usize),
    /// No law had a mean.
    NoData,
}

impl Verdict {
    /// Laws that had the lowest slip or tied for it.
    pub fn leaders(&self) -> Vec<usize> {
        match self {
            Verdict::Lowest { ctrl, .. } | Verdict::Only(ctrl) => vec![*ctrl],
            Verdict::Tied(v) => v.clone(),
            Verdict::NoData => Vec::new(),
        }
    }
}

/// The slip-floor rule: the lowest mean wins only if every other mean exceeds it by more than
/// `floor`; every law within the floor of the lowest (difference ≤ floor) ties with it. A
/// difference the plant's own jitter could produce is no evidence for either law, so no law is
/// called better than another on a difference below it (README, "Outputs").
pub fn judge(means: &[(usize, f64)], floor: f64) -> Verdict {
    let mut sorted: Vec<(usize, f64)> = means.iter().copied().filter(|m| m.1.is_finite()).collect();
    sorted.sort_by(|a, b| a.1.total_cmp(&b.1));
    match sorted.as_slice() {
        [] => Verdict::NoData,
        [(only, _)] => Verdict::Only(*only),
        [(best, low), rest @ ..] => {
            let tied: Vec<usize> = rest
                .iter()
                .filter(|(_, m)| m - low <= floor)
                .map(|(c, _)| *c)
                .collect();
            if tied.is_empty() {
                let (runner_up, second) = rest[0];
                Verdict::Lowest {
                    ctrl: *best,
                    margin: second - low,
                    runner_up,
                }
            } else {
                let mut all = vec![*best];
                all.extend(tied);
                Verdict::Tied(all)
            }
        }
    }
}

/// The slip-floor rule with the paired test: the lowest mean wins only if every other law's
/// mean exceeds it by more than `floor` *and* the paired t-test across seeds
/// ([`paired_difference_significant`]) finds the difference; every other law ties with it.
/// `laws`: (controller, per-seed values) of the rankable laws.
pub fn judge_paired(laws: &[(usize, BTreeMap<u64, f64>)], floor: f64) -> Verdict {
    let mean = |m: &BTreeMap<u64, f64>| m.values().sum::<f64>() / m.len().max(1) as f64;
    let mut sorted: Vec<(usize, f64, &BTreeMap<u64, f64>)> = laws
        .iter()
        .filter(|(_, m)| !m.is_empty())
        .map(|(c, m)| (*c, mean(m), m))
        .filter(|x| x.1.is_finite())
        .collect();
    sorted.sort_by(|a, b| a.1.total_cmp(&b.1));
    match sorted.as_slice() {
        [] => Verdict::NoData,
        [(only, _, _)] => Verdict::Only(*only),
        [(best, low, best_seeds), rest @ ..] => {
            let tied: Vec<usize> = rest
                .iter()
                .filter(|(_, m, seeds)| {
                    !(m - low > floor && paired_difference_significant(seeds, best_seeds))
                })
                .map(|(c, _, _)| *c)
                .collect();
            if tied.is_empty() {
                let (runner_up, second, _) = rest[0];
                Verdict::Lowest {
                    ctrl: *best,
                    margin: second - low,
                    runner_up,
                }
            } else {
                let mut all = vec![*best];
                all.extend(tied);
                Verdict::Tied(all)
            }
        }
    }
}

/// A controller-by-row table: rows are the values of one axis, columns the controllers,
/// optionally for one fixed value of another axis (the slope, for the slip tables).
#[derive(Clone, Debug)]
pub struct Pivot {
    /// Table name in `summary.csv`.
    pub table: &'static str,
    pub fixed: Option<(Axis, usize)>,
    /// Further fixed axis values (the per-regime slip tables fix the rate and actuator too).
    pub extra_fixed: Vec<(Axis, usize)>,
    pub row_axis: Axis,
    pub measure: Measure,
    pub rows: Vec<PivotRow>,
    /// Whether the rows carry a slip-floor verdict (slip tables only: the floor is a slip
    /// floor and says nothing about tracking differences).
    pub judged: bool,
    /// For a within-law table ([`Study::within_law`]): per controller, the conditions it was
    /// compared over (every run at every value of the row axis ended `ok`) and the conditions
    /// it ran in. `None` for a pooled table.
    pub matched: Option<Vec<(usize, usize)>>,
}

#[derive(Clone, Debug)]
pub struct PivotRow {
    pub value: usize,
    /// One per controller, in the run's controller order.
    pub entries: Vec<Entry>,
    /// Among the laws with a mean and no fall in the row (see [`Study::pivot`]).
    pub verdict: Option<Verdict>,
    /// Laws with a mean that fell or diverged somewhere in the row, so were not ranked.
    pub unranked: Vec<usize>,
}

/// One combination of every condition axis (seeds and controllers aside).
#[derive(Clone, Debug)]
pub struct Condition {
    /// Value index on each axis of [`Axis::ALL`].
    pub idx: [usize; N_AXES],
    /// Mean slip per controller.
    pub entries: Vec<Entry>,
    /// Among the laws whose every run here ended `ok` within the plan's limit (see
    /// [`Entry::rankable`]), by the slip floor and the paired test ([`judge_paired`]).
    pub verdict: Verdict,
}

/// A controller's record over the conditions.
#[derive(Clone, Debug, Default)]
pub struct LawRecord {
    /// Conditions where it had the lowest slip by more than the floor.
    pub wins: Vec<usize>,
    /// Conditions where it tied for the lowest slip.
    pub ties: Vec<usize>,
    /// Conditions where it was the only law that held without a fall.
    pub only: Vec<usize>,
    /// Conditions where it ran at all.
    pub present: usize,
    /// Conditions where it fell or diverged at least once.
    pub fell_in: usize,
}

impl LawRecord {
    pub fn leads(&self) -> usize {
        self.wins.len() + self.ties.len() + self.only.len()
    }
}

/// Per-controller compute time from `timing.csv`.
#[derive(Clone, Debug)]
pub struct ComputeRow {
    pub median_us: Option<Stat>,
    pub p99_us: Option<Stat>,
    pub worst_p99_us: f64,
    pub wall_s: f64,
    pub cells: usize,
}

/// Onset angles of one (rate, actuator) group.
#[derive(Clone, Debug)]
pub struct OnsetTable {
    pub rate_hz: f64,
    pub actuator: String,
    /// μ ascending.
    pub mus: Vec<f64>,
    /// `[mu][controller]` → (onset °, runs).
    pub onset: Vec<Vec<Option<(f64, u64)>>>,
    /// Friction angle per μ as the file gives it.
    pub friction_angle_deg: Vec<f64>,
}

/// Everything the report shows, computed once.
pub struct Study<'a> {
    pub run: &'a Run,
    pub axes: Axes,
    /// Per cell (same order as `run.cells`): value index on each axis of [`Axis::ALL`].
    keys: Vec<[usize; N_AXES]>,
    ctrl: Vec<usize>,
    pub floor: f64,
}

impl<'a> Study<'a> {
    /// The floor slip verdicts are judged against: above the plausibility bound
    /// ([`crate::floor::FLOOR_BOUND_MM`]) it is infinite, so every law ties and nothing is
    /// ranked on slip.
    pub fn rank_floor(&self) -> f64 {
        if self.floor > crate::floor::FLOOR_BOUND_MM {
            f64::INFINITY
        } else {
            self.floor
        }
    }

    pub fn new(run: &'a Run) -> Study<'a> {
        let axes = Axes::from_cells(&run.cells);
        let keys = run
            .cells
            .iter()
            .map(|c| Axis::ALL.map(|a| axes.index(c, a)))
            .collect();
        let ctrl = run
            .cells
            .iter()
            .map(|c| {
                axes.controllers
                    .iter()
                    .position(|n| *n == c.controller)
                    .unwrap_or(0)
            })
            .collect();
        Study {
            run,
            axes,
            keys,
            ctrl,
            floor: run.manifest.slip_floor_mm,
        }
    }

    pub fn controllers(&self) -> &[String] {
        &self.axes.controllers
    }

    /// The condition (value index on each axis of [`Axis::ALL`]) and the controller index of
    /// `run.cells[i]`.
    pub fn place_of(&self, i: usize) -> ([usize; N_AXES], usize) {
        (self.keys[i], self.ctrl[i])
    }

    /// Cells of controller `ctrl` whose axis values match every `(axis, value)` in `fixed`.
    fn select<'s>(
        &'s self,
        ctrl: usize,
        fixed: &'s [(Axis, usize)],
    ) -> impl Iterator<Item = &'a Cell> + 's {
        self.run
            .cells
            .iter()
            .zip(self.keys.iter().zip(self.ctrl.iter()))
            .filter(move |(_, (key, c))| {
                **c == ctrl && fixed.iter().all(|(axis, v)| key[axis.0] == *v)
            })
            .map(|(cell, _)| cell)
    }

    /// The entry of one controller over the cells matching `fixed`.
    pub fn entry(&self, ctrl: usize, fixed: &[(Axis, usize)], measure: Measure) -> Entry {
        Entry::of(self.select(ctrl, fixed), measure)
    }

    /// A table with one row per value of `row_axis` (and a fixed value of another axis).
    pub fn pivot(
        &self,
        table: &'static str,
        fixed: Option<(Axis, usize)>,
        row_axis: Axis,
        measure: Measure,
        judged: bool,
    ) -> Pivot {
        let all: Vec<(Axis, usize)> = fixed.into_iter().collect();
        self.pivot_fixed(table, &all, row_axis, measure, judged)
    }

    /// [`Study::pivot`] with any number of fixed axis values.
    pub fn pivot_fixed(
        &self,
        table: &'static str,
        fixed_all: &[(Axis, usize)],
        row_axis: Axis,
        measure: Measure,
        judged: bool,
    ) -> Pivot {
        let rows = (0..self.axes.len(row_axis))
            .map(|value| {
                let mut sel = vec![(row_axis, value)];
                sel.extend(fixed_all.iter().copied());
                let entries: Vec<Entry> = (0..self.controllers().len())
                    .map(|c| self.entry(c, &sel, measure))
                    .collect();
                // A law with any run in the row that did not end ok has a mean over only part
                // of the row's runs (usually the easier ones), so it is shown but not ranked.
                let unranked: Vec<usize> = if judged {
                    entries
                        .iter()
                        .enumerate()
                        .filter(|(_, e)| e.stat.is_some() && !e.rankable())
                        .map(|(c, _)| c)
                        .collect()
                } else {
                    Vec::new()
                };
                let verdict = judged.then(|| {
                    let laws: Vec<(usize, BTreeMap<u64, f64>)> = entries
                        .iter()
                        .enumerate()
                        .filter(|(_, e)| e.rankable())
                        .map(|(c, _)| (c, seed_means(self.select(c, &sel), measure)))
                        .collect();
                    judge_paired(&laws, self.rank_floor())
                });
                PivotRow {
                    value,
                    entries,
                    verdict,
                    unranked,
                }
            })
            .collect();
        Pivot {
            table,
            fixed: fixed_all.first().copied(),
            extra_fixed: fixed_all.iter().skip(1).copied().collect(),
            row_axis,
            measure,
            rows,
            judged,
            matched: None,
        }
    }

    /// Per slope, the slip-by-friction tables of each (control rate, actuator model) — but only
    /// for the slopes where pooling rates and actuators changes the answer: some row's leaders
    /// (winner or tied laws) in some regime differ from the pooled table's. Empty for a slope
    /// whose pooled verdicts hold in every regime.
    pub fn slip_by_regime(&self, pooled: &[Pivot]) -> Vec<Vec<Pivot>> {
        let (n_rate, n_act) = (self.axes.len(Axis::Rate), self.axes.len(Axis::Actuator));
        (0..self.axes.len(Axis::Slope))
            .map(|s| {
                if n_rate * n_act < 2 {
                    return Vec::new();
                }
                let mut split = Vec::new();
                for r in 0..n_rate {
                    for a in 0..n_act {
                        let p = self.pivot_fixed(
                            "slip_by_friction_regime",
                            &[(Axis::Slope, s), (Axis::Rate, r), (Axis::Actuator, a)],
                            Axis::Mu,
                            SLIP,
                            true,
                        );
                        if p.rows
                            .iter()
                            .any(|row| row.entries.iter().any(|e| e.cells > 0))
                        {
                            split.push(p);
                        }
                    }
                }
                let leaders = |row: &PivotRow| {
                    row.verdict
                        .as_ref()
                        .map(Verdict::leaders)
                        .unwrap_or_default()
                };
                let changes = split.iter().any(|p| {
                    p.rows.iter().zip(&pooled[s].rows).any(|(row, pooled_row)| {
                        !matches!(row.verdict, Some(Verdict::NoData) | None)
                            && leaders(row) != leaders(pooled_row)
                    })
                });
                if changes { split } else { Vec::new() }
            })
            .collect()
    }

    /// Each law against itself across the values of `axis` (control rates, actuator models):
    /// for each controller, only the conditions (every other axis fixed, all seeds) in which
    /// every one of its runs at every value of `axis` ended `ok` within the plan's limit, so
    /// each row of a column averages the same conditions and no mean is over different
    /// survivors. Columns are not compared with each other (each law has its own set), so the
    /// rows carry no verdict; each entry's outcome counts cover all the law's runs at that value.
    pub fn within_law(&self, table: &'static str, axis: Axis, measure: Measure) -> Pivot {
        let n_ctrl = self.controllers().len();
        let n_val = self.axes.len(axis);
        let mut matched = Vec::with_capacity(n_ctrl);
        // Per controller: the condition keys (axis index blanked) that qualify.
        let mut qualifying: Vec<std::collections::HashSet<[usize; N_AXES]>> = Vec::new();
        for c in 0..n_ctrl {
            // key without `axis` → (values seen, all counted)
            let mut groups: HashMap<[usize; N_AXES], (Vec<bool>, bool)> = HashMap::new();
            for (cell, (key, cc)) in self.run.cells.iter().zip(self.keys.iter().zip(&self.ctrl)) {
                if *cc != c {
                    continue;
                }
                let mut k = *key;
                let v = k[axis.0];
                k[axis.0] = usize::MAX;
                let g = groups.entry(k).or_insert((vec![false; n_val], true));
                g.0[v] = true;
                g.1 &= counts(cell);
            }
            let total = groups.len();
            let ok: std::collections::HashSet<[usize; N_AXES]> = groups
                .into_iter()
                .filter(|(_, (seen, all_ok))| *all_ok && seen.iter().all(|s| *s))
                .map(|(k, _)| k)
                .collect();
            matched.push((ok.len(), total));
            qualifying.push(ok);
        }
        let rows = (0..n_val)
            .map(|value| {
                let entries = (0..n_ctrl)
                    .map(|c| {
                        let sel = [(axis, value)];
                        let in_set = |cell: &&Cell| {
                            let i = self.index_of(cell);
                            let mut k = self.keys[i];
                            k[axis.0] = usize::MAX;
                            qualifying[c].contains(&k)
                        };
                        Entry::of_split(
                            self.select(c, &sel),
                            self.select(c, &sel).filter(in_set),
                            measure,
                        )
                    })
                    .collect();
                PivotRow {
                    value,
                    entries,
                    verdict: None,
                    unranked: Vec::new(),
                }
            })
            .collect();
        Pivot {
            table,
            fixed: None,
            extra_fixed: Vec::new(),
            row_axis: axis,
            measure,
            rows,
            judged: false,
            matched: Some(matched),
        }
    }

    /// Position of a cell of this run in `run.cells` (cells are distinct by id and order).
    fn index_of(&self, cell: &Cell) -> usize {
        // `run.cells` is sorted by matrix index, unique per cell.
        self.run
            .cells
            .binary_search_by_key(&cell.index, |c| c.index)
            .unwrap_or(0)
    }

    /// Slip by μ × controller, one table per slope.
    pub fn slip_by_friction(&self) -> Vec<Pivot> {
        (0..self.axes.len(Axis::Slope))
            .map(|s| {
                self.pivot(
                    "slip_by_friction",
                    Some((Axis::Slope, s)),
                    Axis::Mu,
                    SLIP,
                    true,
                )
            })
            .collect()
    }

    /// Base position error by μ × controller, one table per slope (for the tracking plot).
    pub fn tracking_by_friction(&self) -> Vec<Pivot> {
        (0..self.axes.len(Axis::Slope))
            .map(|s| {
                self.pivot(
                    "tracking_by_friction",
                    Some((Axis::Slope, s)),
                    Axis::Mu,
                    BASE_POS,
                    false,
                )
            })
            .collect()
    }

    /// Every condition that has cells, in axis order, with its slip verdict.
    pub fn conditions(&self) -> Vec<Condition> {
        let n_ctrl = self.controllers().len();
        let mut groups: HashMap<[usize; N_AXES], Vec<Vec<&Cell>>> = HashMap::new();
        for (cell, (key, c)) in self.run.cells.iter().zip(self.keys.iter().zip(&self.ctrl)) {
            groups
                .entry(*key)
                .or_insert_with(|| vec![Vec::new(); n_ctrl])[*c]
                .push(cell);
        }
        let mut keys: Vec<[usize; N_AXES]> = groups.keys().copied().collect();
        keys.sort();
        keys.into_iter()
            .map(|idx| {
                let per_ctrl = groups.remove(&idx).unwrap_or_default();
                let entries: Vec<Entry> = per_ctrl
                    .iter()
                    .map(|cells| Entry::of(cells.iter().copied(), SLIP))
                    .collect();
                let eligible: Vec<(usize, BTreeMap<u64, f64>)> = entries
                    .iter()
                    .enumerate()
                    .filter(|(_, e)| e.rankable())
                    .map(|(c, _)| (c, seed_means(per_ctrl[c].iter().copied(), SLIP)))
                    .collect();
                let verdict = judge_paired(&eligible, self.rank_floor());
                Condition {
                    idx,
                    entries,
                    verdict,
                }
            })
            .collect()
    }

    /// Each controller's wins, ties and lone holds over the conditions.
    pub fn records(&self, conditions: &[Condition]) -> Vec<LawRecord> {
        let mut out = vec![LawRecord::default(); self.controllers().len()];
        for (i, cond) in conditions.iter().enumerate() {
            for (c, e) in cond.entries.iter().enumerate() {
                if e.cells > 0 {
                    out[c].present += 1;
                }
                if e.fell > 0 {
                    out[c].fell_in += 1;
                }
            }
            // "Only" counts as a lead only if some other law ran here and failed to hold.
            let others_ran = cond.entries.iter().filter(|e| e.cells > 0).count() > 1;
            match &cond.verdict {
                Verdict::Lowest { ctrl, .. } => out[*ctrl].wins.push(i),
                Verdict::Tied(v) => v.iter().for_each(|c| out[*c].ties.push(i)),
                Verdict::Only(c) if others_ran => out[*c].only.push(i),
                _ => {}
            }
        }
        out
    }

    /// Status counts per controller, in [`Status::ALL`] order.
    pub fn status_counts(&self) -> Vec<[usize; Status::ALL.len()]> {
        let mut out = vec![[0usize; Status::ALL.len()]; self.controllers().len()];
        for (cell, c) in self.run.cells.iter().zip(&self.ctrl) {
            if let Some(k) = Status::ALL.iter().position(|s| *s == cell.status) {
                out[*c][k] += 1;
            }
        }
        out
    }

    /// The most frequent (status, controller, message) of runs that did not end ok.
    pub fn frequent_messages(&self, limit: usize) -> Vec<(Status, String, String, usize)> {
        let mut counts: HashMap<(Status, usize, &str), (usize, usize)> = HashMap::new();
        for (i, (cell, c)) in self.run.cells.iter().zip(&self.ctrl).enumerate() {
            if cell.status == Status::Ok || cell.message.trim().is_empty() {
                continue;
            }
            let e = counts
                .entry((cell.status, *c, cell.message.trim()))
                .or_insert((0, i));
            e.0 += 1;
        }
        let mut list: Vec<_> = counts.into_iter().collect();
        // Most frequent first; first appearance in matrix order breaks ties, for a stable file.
        list.sort_by(|a, b| b.1.0.cmp(&a.1.0).then(a.1.1.cmp(&b.1.1)));
        list.into_iter()
            .take(limit)
            .map(|((status, c, msg), (n, _))| {
                (status, self.controllers()[c].clone(), msg.to_string(), n)
            })
            .collect()
    }

    /// Compute time per controller; `None` without `timing.csv`.
    pub fn compute_times(&self) -> Option<Vec<ComputeRow>> {
        let timing = self.run.timing.as_ref()?;
        Some(
            (0..self.controllers().len())
                .map(|c| {
                    let timed: Vec<(&Cell, _)> = self
                        .select(c, &[])
                        .filter_map(|cell| timing.get(&cell.id).map(|t| (cell, *t)))
                        .collect();
                    // Compute time is a property of the law's arithmetic, valid up to a fall
                    // too, so every timed cell counts here, whatever its status.
                    ComputeRow {
                        median_us: over_seeds(
                            timed
                                .iter()
                                .map(|(cell, t)| (cell.seed, t.compute_median_us)),
                        ),
                        p99_us: over_seeds(
                            timed.iter().map(|(cell, t)| (cell.seed, t.compute_p99_us)),
                        ),
                        worst_p99_us: timed
                            .iter()
                            .map(|(_, t)| t.compute_p99_us)
                            .filter(|v| v.is_finite())
                            .fold(f64::NAN, f64::max),
                        wall_s: timed
                            .iter()
                            .map(|(_, t)| t.wall_s)
                            .filter(|v| v.is_finite())
                            .sum(),
                        cells: timed.len(),
                    }
                })
                .collect(),
        )
    }

    /// Controllers of the onset study: the run's order, then any only the onset file names.
    pub fn onset_controllers(&self) -> Vec<String> {
        let mut names = self.controllers().to_vec();
        for row in self.run.onset.iter().flatten() {
            if !names.contains(&row.controller) {
                names.push(row.controller.clone());
            }
        }
        names
    }

    /// The onset study grouped by (rate, actuator); `None` without `onset.csv`.
    pub fn onset_tables(&self) -> Option<Vec<OnsetTable>> {
        let rows: &[OnsetRow] = self.run.onset.as_ref()?;
        let names = self.onset_controllers();
        let mut groups: Vec<(f64, String)> = Vec::new();
        for r in rows {
            if !groups
                .iter()
                .any(|(h, a)| *h == r.rate_hz && *a == r.actuator)
            {
                groups.push((r.rate_hz, r.actuator.clone()));
            }
        }
        // Rate ascending, actuators in the run's order (then the file's).
        let act_rank = |a: &str| {
            self.axes.names[Axis::Actuator.0]
                .iter()
                .position(|x| x == a)
                .unwrap_or(usize::MAX)
        };
        groups.sort_by(|a, b| {
            a.0.total_cmp(&b.0)
                .then(act_rank(&a.1).cmp(&act_rank(&b.1)))
        });
        Some(
            groups
                .into_iter()
                .map(|(rate_hz, actuator)| {
                    let in_group: Vec<&OnsetRow> = rows
                        .iter()
                        .filter(|r| r.rate_hz == rate_hz && r.actuator == actuator)
                        .collect();
                    let mut mus: Vec<f64> = in_group.iter().map(|r| r.mu).collect();
                    mus.sort_by(f64::total_cmp);
                    mus.dedup();
                    let mut onset = vec![vec![None; names.len()]; mus.len()];
                    let mut friction_angle_deg = vec![f64::NAN; mus.len()];
                    for r in &in_group {
                        let (Some(m), Some(c)) = (
                            mus.iter().position(|x| *x == r.mu),
                            names.iter().position(|n| *n == r.controller),
                        ) else {
                            continue;
                        };
                        onset[m][c] = Some((r.onset_deg, r.runs));
                        friction_angle_deg[m] = r.friction_angle_deg;
                    }
                    OnsetTable {
                        rate_hz,
                        actuator,
                        mus,
                        onset,
                        friction_angle_deg,
                    }
                })
                .collect(),
        )
    }

    /// The name of a model-free stiff joint PD law, if the run has one. Names are the
    /// scenario's, so it is recognised by a `pd` word in its name (`stiff-pd`, `pd-stiff`).
    pub fn stiff_pd(&self) -> Option<usize> {
        self.controllers().iter().position(|n| {
            n.to_ascii_lowercase()
                .split(|ch: char| !ch.is_ascii_alphanumeric())
                .any(|w| w == "pd")
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn report_paired_test_by_hand() {
        use std::collections::BTreeMap;
        let m = |v: &[f64]| -> BTreeMap<u64, f64> {
            v.iter().enumerate().map(|(i, x)| (i as u64, *x)).collect()
        };
        // Differences 1.0, 1.2, 0.9: mean 1.0333, s = 0.1528, t = 11.7 > t(0.975, 2) = 4.30.
        assert!(paired_difference_significant(
            &m(&[2.0, 2.2, 1.9]),
            &m(&[1.0, 1.0, 1.0])
        ));
        // Differences −1, −0.5, +1: t = −0.17, no difference.
        assert!(!paired_difference_significant(
            &m(&[1.0, 2.0, 4.0]),
            &m(&[2.0, 2.5, 3.0])
        ));
        // One seed: nothing to test.
        assert!(!paired_difference_significant(&m(&[1.0]), &m(&[5.0])));
        // A constant nonzero difference is significant; equal values are not.
        assert!(paired_difference_significant(
            &m(&[1.0, 1.0]),
            &m(&[1.5, 1.5])
        ));
        assert!(!paired_difference_significant(
            &m(&[1.0, 1.0]),
            &m(&[1.0, 1.0])
        ));
        // The verdict: a gap above the floor without support is a tie.
        let v = judge_paired(&[(0, m(&[1.0, 2.0, 4.0])), (1, m(&[2.0, 2.5, 3.0]))], 0.0);
        assert_eq!(v, Verdict::Tied(vec![0, 1]));
        let v = judge_paired(&[(0, m(&[1.0, 1.0, 1.0])), (1, m(&[1.5, 1.5, 1.5]))], 0.2);
        assert!(matches!(
            v,
            Verdict::Lowest {
                ctrl: 0,
                runner_up: 1,
                ..
            }
        ));
    }

    #[test]
    fn report_floor_rule() {
        // Differences 0.05 and 0.30 against a floor of 0.1: the first ties, the second loses.
        let v = judge(&[(0, 1.0), (1, 1.05), (2, 1.3)], 0.1);
        assert_eq!(v, Verdict::Tied(vec![0, 1]));
        match judge(&[(0, 1.3), (1, 1.0)], 0.1) {
            Verdict::Lowest {
                ctrl,
                margin,
                runner_up,
            } => {
                assert_eq!((ctrl, runner_up), (1, 0));
                assert!((margin - 0.3).abs() < 1e-12);
            }
            other => panic!("expected a winner, got {other:?}"),
        }
        // Exactly the floor is not "more than the floor".
        assert_eq!(judge(&[(0, 1.0), (1, 1.5)], 0.5), Verdict::Tied(vec![0, 1]));
        assert_eq!(judge(&[(3, 2.0)], 0.1), Verdict::Only(3));
        assert_eq!(judge(&[(3, f64::NAN)], 0.1), Verdict::NoData);
    }
}
