//! `summary.csv`: every number of the report in long format, one row per (table, group keys,
//! controller, metric), at full precision (Rust's shortest round-trip form), keys blank where
//! they do not apply. Counts are written in the `mean` column with `ci95_half` blank.

use std::path::Path;

use super::Computed;
use super::input::Status;
use super::stats::Stat;
use super::tables::{Axis, Entry, N_AXES, Pivot, Study, Verdict};

/// Columns after the condition keys.
const TAIL: [&str; 8] = [
    "controller",
    "metric",
    "mean",
    "ci95_half",
    "n",
    "n_cells",
    "fell",
    "mark",
];

/// `table`, one key column per condition axis (named as in `cells.csv`), then [`TAIL`].
fn header() -> Vec<&'static str> {
    let mut h = vec!["table"];
    h.extend(Axis::ALL.iter().map(|a| a.column()));
    h.extend(TAIL);
    h
}

/// One output row under construction.
struct Row {
    table: &'static str,
    keys: [String; N_AXES],
    controller: String,
    metric: String,
    mean: String,
    ci95_half: String,
    n: String,
    n_cells: String,
    fell: String,
    mark: &'static str,
}

impl Row {
    fn new(table: &'static str, controller: &str, metric: &str) -> Row {
        Row {
            table,
            keys: std::array::from_fn(|_| String::new()),
            controller: controller.to_string(),
            metric: metric.to_string(),
            mean: String::new(),
            ci95_half: String::new(),
            n: String::new(),
            n_cells: String::new(),
            fell: String::new(),
            mark: "",
        }
    }

    fn key(mut self, study: &Study, axis: Axis, value: usize) -> Row {
        self.keys[axis.0] = study.axes.value_raw(axis, value);
        self
    }

    fn stat(mut self, s: Option<&Stat>, scale: f64) -> Row {
        match s {
            Some(s) => {
                self.mean = format!("{}", s.mean * scale);
                self.ci95_half = s
                    .ci95_half
                    .map(|h| format!("{}", h * scale))
                    .unwrap_or_default();
                self.n = s.seeds.to_string();
                self.n_cells = s.cells.to_string();
            }
            None => {
                self.n = "0".to_string();
                self.n_cells = "0".to_string();
            }
        }
        self
    }

    fn entry(self, e: &Entry) -> Row {
        let mut r = self.stat(e.stat.as_ref(), 1.0);
        r.fell = e.fell.to_string();
        r
    }

    fn count(mut self, value: usize, of: usize) -> Row {
        self.mean = value.to_string();
        self.n_cells = of.to_string();
        self
    }

    fn fields(&self) -> Vec<&str> {
        let mut f = vec![self.table];
        f.extend(self.keys.iter().map(String::as_str));
        f.extend([
            self.controller.as_str(),
            self.metric.as_str(),
            self.mean.as_str(),
            self.ci95_half.as_str(),
            self.n.as_str(),
            self.n_cells.as_str(),
            self.fell.as_str(),
            self.mark,
        ]);
        f
    }
}

/// The mark of controller `c` under a slip verdict: `lowest`, `tied`, `only`, or blank
/// (`unranked` is set by the caller for a law with a run in the group that did not end ok).
fn mark(v: Option<&Verdict>, c: usize) -> &'static str {
    match v {
        Some(Verdict::Lowest { ctrl, .. }) if *ctrl == c => "lowest",
        Some(Verdict::Tied(ids)) if ids.contains(&c) => "tied",
        Some(Verdict::Only(o)) if *o == c => "only",
        _ => "",
    }
}

fn pivot_rows(out: &mut Vec<Row>, study: &Study, p: &Pivot) {
    for row in &p.rows {
        for (c, e) in row.entries.iter().enumerate() {
            let mut r = Row::new(p.table, &study.controllers()[c], p.measure.name())
                .key(study, p.row_axis, row.value)
                .entry(e);
            if let Some((a, v)) = p.fixed {
                r = r.key(study, a, v);
            }
            for &(a, v) in &p.extra_fixed {
                r = r.key(study, a, v);
            }
            r.mark = if row.unranked.contains(&c) {
                "unranked"
            } else {
                mark(row.verdict.as_ref(), c)
            };
            out.push(r);
        }
    }
}

pub fn write(path: &Path, study: &Study, computed: &Computed) -> Result<(), String> {
    let mut rows: Vec<Row> = Vec::new();
    for p in computed
        .slip_by_friction
        .iter()
        .chain(computed.slip_by_regime.iter().flatten())
        .chain(&computed.tracking_by_friction)
        .chain([
            &computed.rate_slip,
            &computed.rate_tracking,
            &computed.actuator_slip,
            &computed.actuator_tracking,
        ])
    {
        pivot_rows(&mut rows, study, p);
    }
    for (m, entries) in &computed.per_controller {
        for (c, e) in entries.iter().enumerate() {
            rows.push(Row::new("per_controller", &study.controllers()[c], m.name()).entry(e));
        }
    }
    for (c, counts) in computed.statuses.iter().enumerate() {
        let total: usize = counts.iter().sum();
        for (s, n) in Status::ALL.iter().zip(counts) {
            rows.push(
                Row::new(
                    "outcomes",
                    &study.controllers()[c],
                    &format!("runs_{}", s.name()),
                )
                .count(*n, total),
            );
        }
    }
    if let Some(compute) = &computed.compute {
        for (c, r) in compute.iter().enumerate() {
            let name = &study.controllers()[c];
            rows.push(
                Row::new("compute_time", name, "compute_median_us").stat(r.median_us.as_ref(), 1.0),
            );
            rows.push(
                Row::new("compute_time", name, "compute_p99_us").stat(r.p99_us.as_ref(), 1.0),
            );
            let mut worst = Row::new("compute_time", name, "compute_p99_worst_us");
            worst.mean = format!("{}", r.worst_p99_us);
            worst.n_cells = r.cells.to_string();
            rows.push(worst);
            let mut wall = Row::new("compute_time", name, "wall_s_total");
            wall.mean = format!("{}", r.wall_s);
            wall.n_cells = r.cells.to_string();
            rows.push(wall);
        }
    }
    for cond in &computed.conditions {
        for (c, e) in cond.entries.iter().enumerate() {
            if e.cells == 0 {
                continue;
            }
            let mut r = Row::new("condition_slip", &study.controllers()[c], "slip_mean_mm");
            for a in Axis::ALL {
                r = r.key(study, a, cond.idx[a.0]);
            }
            let mut r = r.entry(e);
            r.mark = if e.stat.is_some() && !e.rankable() {
                "unranked"
            } else {
                mark(Some(&cond.verdict), c)
            };
            rows.push(r);
        }
    }
    if let Some(tables) = &computed.onset {
        let names = study.onset_controllers();
        for t in tables {
            for (m, mu) in t.mus.iter().enumerate() {
                let keyed = |mut r: Row| {
                    r.keys[Axis::Mu.0] = format!("{mu}");
                    r.keys[Axis::Rate.0] = format!("{}", t.rate_hz);
                    r.keys[Axis::Actuator.0] = t.actuator.clone();
                    r
                };
                let mut limit = keyed(Row::new("onset", "", "friction_angle_deg"));
                limit.mean = format!("{}", t.friction_angle_deg[m]);
                rows.push(limit);
                for (c, v) in t.onset[m].iter().enumerate() {
                    if let Some((deg, runs)) = v {
                        let mut r = keyed(Row::new("onset", &names[c], "onset_deg"));
                        r.mean = format!("{deg}");
                        r.n_cells = runs.to_string();
                        rows.push(r);
                    }
                }
            }
        }
    }

    let mut w = csv::Writer::from_path(path)
        .map_err(|e| format!("{}: cannot write: {e}", path.display()))?;
    let werr = |e: csv::Error| format!("{}: cannot write: {e}", path.display());
    w.write_record(header()).map_err(werr)?;
    for r in &rows {
        w.write_record(r.fields()).map_err(werr)?;
    }
    w.flush()
        .map_err(|e| format!("{}: cannot write: {e}", path.display()))
}
