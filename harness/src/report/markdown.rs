//! `summary.md`: the tables for people, with the reading rules stated before the numbers and
//! the "where each law wins" text generated from the same numbers (no sentence is written
//! that the data did not produce).

use std::fmt::Write as _;

use super::Computed;
use super::figures::{self, Planned};
use super::input::Status;
use super::stats::{MIN_SEEDS_FOR_CI, Stat};
use super::tables::{Axis, Condition, Entry, Measure, Pivot, Study, Verdict};

/// Decimals that show `x` to three significant digits (none for large values, at most six).
pub fn decimals_for(x: f64) -> usize {
    if !x.is_finite() || x == 0.0 {
        return 2;
    }
    (2 - x.abs().log10().floor() as i32).clamp(0, 6) as usize
}

/// A number to three significant digits.
pub fn num(x: f64) -> String {
    if x.is_finite() {
        format!("{:.*}", decimals_for(x), x)
    } else {
        "—".to_string()
    }
}

/// "mean ± half" with three or more seeds, else "mean (n=k)"; the interval shares the
/// mean's decimals so the two read as one quantity.
pub fn stat_text(s: &Stat, scale: f64) -> String {
    let m = s.mean * scale;
    let d = decimals_for(m);
    match s.ci95_half {
        Some(h) => format!("{m:.d$} ± {:.d$}", h * scale),
        None => format!("{m:.d$} (n={})", s.seeds),
    }
}

fn entry_text(e: &Entry, scale: f64, bold: bool) -> String {
    let mut t = match &e.stat {
        Some(s) if bold => format!("**{}**", stat_text(s, scale)),
        Some(s) => stat_text(s, scale),
        None if e.cells == 0 => "·".to_string(),
        None => "—".to_string(),
    };
    if e.fell > 0 {
        let _ = write!(t, " · {} fell", e.fell);
    }
    // Every other outcome beside the number, never in it.
    for (k, st) in Status::ALL.iter().enumerate() {
        if !matches!(st, Status::Ok) && !st.is_fall() && e.outcomes[k] > 0 {
            let _ = write!(t, " · {} {}", e.outcomes[k], st.name());
        }
    }
    if e.beyond > 0 {
        let _ = write!(t, " · {} beyond the plan's limit", e.beyond);
    }
    t
}

/// Text safe inside a Markdown table cell.
fn cell(s: &str) -> String {
    s.replace('|', "\\|").replace(['\n', '\r'], " ")
}

fn names(study: &Study, ids: &[usize]) -> String {
    ids.iter()
        .map(|c| cell(&study.controllers()[*c]))
        .collect::<Vec<_>>()
        .join(", ")
}

fn verdict_text(study: &Study, v: &Verdict) -> String {
    match v {
        Verdict::Lowest { ctrl, margin, .. } => format!(
            "{} (by {} mm)",
            cell(&study.controllers()[*ctrl]),
            num(*margin)
        ),
        Verdict::Tied(ids) => format!(
            "tie: {} (within {} mm or not shown by the paired test)",
            names(study, ids),
            num(study.floor)
        ),
        Verdict::Only(c) => format!(
            "{} (the only law whose runs all ended ok)",
            cell(&study.controllers()[*c])
        ),
        Verdict::NoData => "—".to_string(),
    }
}

/// A controller-column table: one row per value of the pivot's row axis.
fn pivot_table(out: &mut String, study: &Study, p: &Pivot) {
    let ctrls = study.controllers();
    let row_head = match p.row_axis {
        Axis::Mu => "μ",
        Axis::Rate => "control rate",
        Axis::Actuator => "actuator",
        other => other.label(),
    };
    let _ = write!(out, "| {row_head} |");
    for c in ctrls {
        let _ = write!(out, " {} |", cell(c));
    }
    if p.judged {
        out.push_str(" lowest slip |");
    }
    out.push('\n');
    out.push_str("|---|");
    for _ in ctrls {
        out.push_str("---:|");
    }
    if p.judged {
        out.push_str("---|");
    }
    out.push('\n');
    for row in &p.rows {
        let label = match p.row_axis {
            Axis::Mu => study.axes.value_raw(Axis::Mu, row.value),
            a => study.axes.value_text(a, row.value),
        };
        let leaders = row
            .verdict
            .as_ref()
            .map(Verdict::leaders)
            .unwrap_or_default();
        let _ = write!(out, "| {} |", cell(&label));
        for (c, e) in row.entries.iter().enumerate() {
            let _ = write!(
                out,
                " {} |",
                entry_text(e, p.measure.display_scale(), leaders.contains(&c))
            );
        }
        if let Some(v) = &row.verdict {
            let mut text = verdict_text(study, v);
            if !row.unranked.is_empty() {
                let _ = write!(
                    text,
                    " · not ranked (not every run ok): {}",
                    names(study, &row.unranked)
                );
            }
            let _ = write!(out, " {text} |");
        }
        out.push('\n');
    }
    out.push('\n');
}

/// Controllers as rows, measures as columns.
fn measure_table(out: &mut String, study: &Study, columns: &[(Measure, Vec<Entry>)]) {
    out.push_str("| controller |");
    for (m, _) in columns {
        let _ = write!(out, " {} |", m.heading());
    }
    out.push_str("\n|---|");
    for _ in columns {
        out.push_str("---:|");
    }
    out.push('\n');
    for (c, name) in study.controllers().iter().enumerate() {
        let _ = write!(out, "| {} |", cell(name));
        for (m, entries) in columns {
            let text = entries
                .get(c)
                .and_then(|e| e.stat.as_ref())
                .map(|s| stat_text(s, m.display_scale()))
                .unwrap_or_else(|| "—".to_string());
            let _ = write!(out, " {text} |");
        }
        out.push('\n');
    }
    out.push('\n');
}

pub fn render(study: &Study, computed: &Computed, planned: &Planned) -> String {
    let run = study.run;
    let m = &run.manifest;
    let mut out = String::new();
    let floor = num(study.floor);
    let _ = writeln!(
        out,
        "# {} — slip, tracking and effort by controller\n",
        m.scenario_name
    );
    let folder = run
        .dir
        .file_name()
        .map(|n| n.to_string_lossy().to_string())
        .unwrap_or_else(|| run.dir.display().to_string());
    let _ = writeln!(
        out,
        "Run folder `{folder}` · {} runs · {} controllers · seeds {} · gripsweep {}\n",
        run.cells.len(),
        study.controllers().len(),
        {
            let mut seeds: Vec<u64> = run.cells.iter().map(|c| c.seed).collect();
            seeds.sort_unstable();
            seeds.dedup();
            seeds.len()
        },
        m.tool_version
    );

    // ---- how to read ------------------------------------------------------------------
    out.push_str("## How to read this\n\n");
    let _ = writeln!(
        out,
        "Every number is a mean over seeds: the runs of one seed in a group are averaged first, \
then the seeds, so each seed counts once. With {MIN_SEEDS_FOR_CI} or more seeds a number reads \
`mean ± h`, where h is the half-width of its 95 % confidence interval (Student t over the \
per-seed means, t(0.975, seeds − 1) · s / √seeds); with fewer seeds it reads `mean (n=seeds)`. \
A table pools every axis it does not name: the slip-by-friction table of one slope, for \
example, pools control rates, actuator models, model errors and sensor noise. Only runs with \
status `ok` — the robot held up to the end and the law controlled it and met its constraints — \
count towards slip, tracking and effort. Every other outcome is counted beside the number and \
never averaged in: `· k fell` (falls and divergences: the run stopped early), `· k no-control` \
(held up but the law did not control the robot: torque limits, tracking or oscillation, see the \
README), `· k infeasible` (the law could not meet its constraints), `· k error`, and \
`· k beyond the plan's limit` (a condition no law can hold with this plan). A metric the runner \
could not define (NaN) is left out of its \
own mean. `—`: no run of the group held; `·`: the group has no runs.\n"
    );
    let _ = writeln!(
        out,
        "Slip is how far each planned-stance foot's ground contact point moved along the ground from \
where its stance phase began (rolling excluded, touching or not), in mm per stance phase. \
**Slip floor of this run: {floor} mm per stance phase** — the apparent slip of feet that do not \
move, measured for this run's plant settings. In every slip table the lowest mean of a row is in \
bold and the last column names its law, but only when every other law's mean lies more than the \
floor above it *and* a paired t-test across seeds (per-seed means paired by seed, two-sided, \
α = {alpha}) finds the difference; every other law is in bold too and reported as a tie. With \
fewer than two seeds no difference can be tested, so every row is a tie. The t-test is used \
because with three seeds a sign or signed-rank test cannot reach α = 0.05. A law with any run \
in a row that did not end `ok`, or beyond the plan's limit, is shown but not ranked in that row \
(listed as *not ranked*): its mean covers only part of the runs, usually the easier ones.\n",
        alpha = super::tables::PAIRED_ALPHA
    );

    plan_limit_section(&mut out, study);

    // ---- slip by friction ---------------------------------------------------------------
    out.push_str("## Mean slip by friction coefficient\n\n");
    out.push_str(
        "Mean slip per stance phase (mm) by static friction coefficient μ (rows) and controller \
(columns), one table per slope.\n\n",
    );
    for (s_idx, p) in computed.slip_by_friction.iter().enumerate() {
        if let Some((a, i)) = p.fixed {
            let t = study.axes.value_text(a, i);
            let mut chars = t.chars();
            let title = match chars.next() {
                Some(f) => f.to_uppercase().collect::<String>() + chars.as_str(),
                None => t.clone(),
            };
            let _ = writeln!(out, "### {title}\n");
        }
        pivot_table(&mut out, study, p);
        if let Some(split) = computed.slip_by_regime.get(s_idx).filter(|v| !v.is_empty()) {
            out.push_str(
                "Pooling control rates and actuator models changes the answer on this slope (some \
row's lowest or tied laws differ in some regime), so here is the table per control rate and \
actuator model:\n\n",
            );
            for sp in split {
                let title: Vec<String> = sp
                    .fixed
                    .iter()
                    .chain(&sp.extra_fixed)
                    .map(|(a, v)| study.axes.value_text(*a, *v))
                    .collect();
                let _ = writeln!(out, "#### {}\n", capitalise(&title.join(", ")));
                pivot_table(&mut out, study, sp);
            }
        }
    }

    // ---- rate and actuator studies ------------------------------------------------------
    let studies = [
        (
            "What control rate buys",
            Axis::Rate,
            &computed.rate_slip,
            &computed.rate_tracking,
            figures::RATE_STEM,
        ),
        (
            "What torque sensing buys",
            Axis::Actuator,
            &computed.actuator_slip,
            &computed.actuator_tracking,
            figures::ACTUATOR_STEM,
        ),
    ];
    for (heading, axis, slip, tracking, stem) in studies {
        let _ = writeln!(out, "## {heading}\n");
        let _ = writeln!(
            out,
            "Slip and base tracking by {} (rows) and controller. Each law is compared with \
itself: its column averages only the conditions (every other axis fixed, all seeds) in which \
every one of its runs at every {} ended `ok`, so each row of a column covers the same \
conditions; columns cover different conditions and are not ranked against each other. The \
counts beside a number cover all the law's runs at that {}.\n",
            axis.label(),
            axis.label(),
            axis.label()
        );
        if let Some(matched) = &slip.matched {
            let parts: Vec<String> = matched
                .iter()
                .enumerate()
                .map(|(c, (m, t))| format!("{} {m} of {t}", cell(&study.controllers()[c])))
                .collect();
            let _ = writeln!(out, "Conditions compared: {}.\n", parts.join(", "));
        }
        if study.axes.len(axis) < 2 {
            let _ = writeln!(
                out,
                "This run has a single {} ({}), so these tables have one row and compare \
nothing across {}; the `{stem}` plot is not drawn.\n",
                axis.label(),
                study.axes.value_text(axis, 0),
                axis.label()
            );
        }
        let _ = writeln!(out, "### {}\n", capitalise(SLIP_HEADING));
        pivot_table(&mut out, study, slip);
        let _ = writeln!(out, "### {}\n", capitalise(tracking.measure.heading()));
        pivot_table(&mut out, study, tracking);
    }

    // ---- tracking and effort ------------------------------------------------------------
    out.push_str("## Tracking and effort per controller\n\n");
    out.push_str("Means over the whole run (every condition pooled), runs that held only.\n\n");
    let n_te = super::tables::TRACKING_EFFORT.len();
    measure_table(&mut out, study, &computed.per_controller[..n_te]);
    out.push_str("Slip, friction use and law health:\n\n");
    // issue 14 (world14): slip and health end at the slip column; the world table follows.
    let n_ch = n_te + super::tables::CONTACT_HEALTH.len() + 1;
    measure_table(&mut out, study, &computed.per_controller[n_te..n_ch]);
    if computed.per_controller.len() > n_ch {
        out.push_str("Touchdown impacts, torque rate, pushes and step timing:\n\n");
        measure_table(&mut out, study, &computed.per_controller[n_ch..]);
    }

    // ---- outcomes -----------------------------------------------------------------------
    out.push_str("## Run outcomes\n\n");
    out.push_str("| controller | runs |");
    for s in Status::ALL {
        let _ = write!(out, " {} |", s.name());
    }
    out.push_str(" fell or diverged |\n|---|---:|");
    for _ in Status::ALL {
        out.push_str("---:|");
    }
    out.push_str("---:|\n");
    for (c, counts) in computed.statuses.iter().enumerate() {
        let total: usize = counts.iter().sum();
        let falls: usize = Status::ALL
            .iter()
            .zip(counts)
            .filter(|(s, _)| s.is_fall())
            .map(|(_, n)| n)
            .sum();
        let _ = write!(out, "| {} | {total} |", cell(&study.controllers()[c]));
        for n in counts {
            let _ = write!(out, " {n} |");
        }
        let share = if total > 0 {
            100.0 * falls as f64 / total as f64
        } else {
            0.0
        };
        let _ = writeln!(out, " {falls} ({share:.0} %) |");
    }
    out.push('\n');
    let messages = study.frequent_messages(8);
    if !messages.is_empty() {
        out.push_str("Most frequent messages of runs that did not end `ok`:\n\n");
        for (status, ctrl, msg, n) in messages {
            let _ = writeln!(
                out,
                "- {n} × `{}` {}: {}",
                status.name(),
                cell(&ctrl),
                cell(&msg)
            );
        }
        out.push('\n');
    }

    // ---- compute time -------------------------------------------------------------------
    out.push_str("## Controller compute time\n\n");
    match &computed.compute {
        Some(rows) => {
            out.push_str(
                "Per control step, from `timing.csv` (machine measurements: unlike every other \
number here they depend on the machine and the thread count). Median and p99 are each run's \
own, averaged over runs and seeds; every run with a timing row counts, whatever its status.\n\n",
            );
            out.push_str(
                "| controller | median per step (µs) | p99 per step (µs) | worst p99 (µs) | wall time (s) | runs timed |\n\
|---|---:|---:|---:|---:|---:|\n",
            );
            for (c, r) in rows.iter().enumerate() {
                let st = |s: &Option<Stat>| {
                    s.as_ref()
                        .map(|s| stat_text(s, 1.0))
                        .unwrap_or_else(|| "—".to_string())
                };
                let _ = writeln!(
                    out,
                    "| {} | {} | {} | {} | {} | {} |",
                    cell(&study.controllers()[c]),
                    st(&r.median_us),
                    st(&r.p99_us),
                    num(r.worst_p99_us),
                    num(r.wall_s),
                    r.cells
                );
            }
            out.push('\n');
            if run.timing_unmatched > 0 {
                let _ = writeln!(
                    out,
                    "`timing.csv` has {} row(s) for runs that are not in `cells.csv`; they are left out.\n",
                    run.timing_unmatched
                );
            }
        }
        None => out.push_str(
            "This run folder has no `timing.csv`, so compute times are not reported.\n\n",
        ),
    }

    // ---- where each law wins ------------------------------------------------------------
    where_each_law_wins(&mut out, study, computed);

    // ---- onset --------------------------------------------------------------------------
    if let Some(tables) = &computed.onset {
        onset_section(&mut out, study, tables);
    }

    // ---- figures ------------------------------------------------------------------------
    out.push_str("## Figures\n\n");
    for fig in &planned.figures {
        let stem = fig.stem();
        let _ = writeln!(
            out,
            "- `plots/{stem}.svg` (and `.png`): {}\n\n  ![{}](plots/{stem}.svg)\n",
            figures::describe(stem),
            figures::describe(stem)
        );
    }
    for s in &planned.skipped {
        let _ = writeln!(out, "- Not drawn — {s}.");
    }
    if !planned.skipped.is_empty() {
        out.push('\n');
    }
    let mut inputs = vec!["`cells.csv`", "`manifest.json`"];
    if run.timing.is_some() {
        inputs.push("`timing.csv`");
    }
    if run.onset.is_some() {
        inputs.push("`onset.csv`");
    }
    let _ = writeln!(
        out,
        "`summary.csv` holds the same numbers in long format at full precision (one row per \
table, group, controller and metric). This report was built from {} alone; \
`gripsweep report` rebuilds it.",
        inputs.join(", ")
    );
    out
}

/// The plan's own limit per slope (from the manifest) and the conditions of this run beyond it.
fn plan_limit_section(out: &mut String, study: &Study) {
    let m = &study.run.manifest;
    out.push_str("## The plan's own limit\n\n");
    if m.plan_limits.is_empty() {
        out.push_str("This run's manifest has no plan limit (made before it was computed).\n\n");
        return;
    }
    out.push_str(
        "μ_required is the least friction coefficient with which any distribution of contact \
forces realises the planned motion on the robot's model (the largest over the plan, sampled \
every 10 ms and at every phase boundary); the torque share is the largest share of the joint \
torque limits that distribution needs. A condition with μ below μ_required, or a torque share \
above 1, is **beyond the plan's limit**: no law can hold the plan there, so its runs are shown \
but say nothing about the laws. `∞`: no friction suffices (the plan tips the robot).\n\n",
    );
    out.push_str(
        "| slope | μ_required | at (s) | torque share | μ_required within torque limits | μ of this run beyond the limit |\n|---|---|---|---|---|---|\n",
    );
    let mut mus: Vec<f64> = study.run.cells.iter().map(|c| c.mu).collect();
    mus.sort_by(f64::total_cmp);
    mus.dedup();
    let show = |x: f64| {
        if x.is_finite() {
            format!("{x:.3}")
        } else if x.is_nan() {
            "—".to_string()
        } else {
            "∞".to_string()
        }
    };
    for l in &m.plan_limits {
        let beyond: Vec<String> = mus
            .iter()
            .filter(|&&mu| m.beyond_plan_limit(l.slope_deg, mu))
            .map(|mu| mu.to_string())
            .collect();
        let _ = writeln!(
            out,
            "| {}° | {} | {} | {} | {} | {} |",
            l.slope_deg,
            show(l.mu_required),
            show(l.at_s),
            show(l.torque_share),
            show(l.mu_required_torque_limited),
            if beyond.is_empty() {
                "none".to_string()
            } else {
                beyond.join(", ")
            }
        );
    }
    out.push('\n');
}

fn plural(n: usize, word: &str) -> String {
    if n == 1 {
        format!("1 {word}")
    } else {
        format!("{n} {word}s")
    }
}

const SLIP_HEADING: &str = "mean slip per stance phase (mm)";

fn capitalise(s: &str) -> String {
    let mut c = s.chars();
    match c.next() {
        Some(f) => f.to_uppercase().collect::<String>() + c.as_str(),
        None => String::new(),
    }
}

/// Axes that vary in this run (the ones worth naming in a condition).
fn varying(study: &Study) -> Vec<Axis> {
    Axis::ALL
        .into_iter()
        .filter(|a| study.axes.len(*a) > 1)
        .collect()
}

fn condition_text(study: &Study, cond: &Condition, axes: &[Axis]) -> String {
    if axes.is_empty() {
        return "the run's only condition".to_string();
    }
    axes.iter()
        .map(|a| study.axes.value_text(*a, cond.idx[a.0]))
        .collect::<Vec<_>>()
        .join(", ")
}

fn where_each_law_wins(out: &mut String, study: &Study, computed: &Computed) {
    let conds = &computed.conditions;
    let records = &computed.records;
    let axes = varying(study);
    let floor = num(study.floor);
    out.push_str("## Where each law wins\n\n");
    let axis_list = if axes.is_empty() {
        "a single setting of every axis".to_string()
    } else {
        axes.iter()
            .map(|a| a.label())
            .collect::<Vec<_>>()
            .join(", ")
    };
    let count = |f: &dyn Fn(&Verdict) -> bool| conds.iter().filter(|c| f(&c.verdict)).count();
    let decisive = count(&|v| matches!(v, Verdict::Lowest { .. }));
    let tied = count(&|v| matches!(v, Verdict::Tied(_)));
    let only = count(&|v| matches!(v, Verdict::Only(_)));
    let _ = writeln!(
        out,
        "A condition is one combination of {axis_list}, pooled over seeds. A law *wins* a \
condition when its mean slip is below every other law's by more than the slip floor ({floor} mm) \
and a paired t-test across seeds finds the difference; otherwise the laws *tie*. Only laws whose \
every run of a condition ended `ok` are ranked there (a run that fell, did not control the \
robot or was infeasible is counted, never a winner), and no law in a condition beyond the \
plan's limit. Of {} conditions, {decisive} had a winner, {tied} a tie, {only} only one law \
whose runs all ended ok, and {} none.\n",
        conds.len(),
        conds.len() - decisive - tied - only
    );

    for (c, name) in study.controllers().iter().enumerate() {
        let r = &records[c];
        let mut s = format!("- **{}** ", cell(name));
        if r.wins.is_empty() {
            let _ = write!(
                s,
                "never had the lowest slip by more than the floor in its {} conditions",
                r.present
            );
            if !r.ties.is_empty() {
                let _ = write!(s, "; it tied for lowest in {}", r.ties.len());
            }
        } else {
            let _ = write!(
                s,
                "had the lowest slip by more than the floor in {} of its {} conditions",
                r.wins.len(),
                r.present
            );
            if !r.ties.is_empty() {
                let _ = write!(s, " and tied for lowest in {} more", r.ties.len());
            }
        }
        if !r.only.is_empty() {
            let _ = write!(
                s,
                "; it was the only law that held without a fall in {}",
                r.only.len()
            );
        }
        s.push('.');
        if !r.wins.is_empty() {
            // Where the wins fall, axis by axis.
            let mut parts = Vec::new();
            for a in &axes {
                let mut per_value = vec![0usize; study.axes.len(*a)];
                for w in &r.wins {
                    per_value[conds[*w].idx[a.0]] += 1;
                }
                let listed: Vec<String> = per_value
                    .iter()
                    .enumerate()
                    .filter(|(_, n)| **n > 0)
                    .map(|(v, n)| format!("{} ({n})", study.axes.value_text(*a, v)))
                    .collect();
                if !listed.is_empty() {
                    parts.push(listed.join(", "));
                }
            }
            if !parts.is_empty() {
                let _ = write!(s, " Its wins: {}.", parts.join("; "));
            }
            let mut by_margin: Vec<(usize, f64, usize)> = r
                .wins
                .iter()
                .filter_map(|w| match &conds[*w].verdict {
                    Verdict::Lowest {
                        margin, runner_up, ..
                    } => Some((*w, *margin, *runner_up)),
                    _ => None,
                })
                .collect();
            by_margin.sort_by(|a, b| b.1.total_cmp(&a.1));
            let leads: Vec<String> = by_margin
                .iter()
                .take(2)
                .map(|(w, _, ru)| {
                    let mean = |k: usize| {
                        conds[*w].entries[k]
                            .stat
                            .map(|st| num(st.mean))
                            .unwrap_or_default()
                    };
                    format!(
                        "{}: {} mm against {} mm for {}",
                        condition_text(study, &conds[*w], &axes),
                        mean(c),
                        mean(*ru),
                        cell(&study.controllers()[*ru])
                    )
                })
                .collect();
            if !leads.is_empty() {
                let _ = write!(s, " Largest leads — {}.", leads.join("; "));
            }
        }
        if r.fell_in > 0 {
            let _ = write!(
                s,
                " It fell or diverged in at least one run of {}.",
                plural(r.fell_in, "condition")
            );
        }
        out.push_str(&s);
        out.push('\n');
    }
    out.push('\n');

    // Lowest-or-tied shares by axis value: the table the axis sentences are read from.
    let n_ctrl = study.controllers().len();
    let tally = |a: Axis, v: usize, c: usize| -> (usize, usize) {
        let mut led = 0;
        let mut ran = 0;
        for cond in conds.iter().filter(|k| k.idx[a.0] == v) {
            if cond.entries[c].cells > 0 {
                ran += 1;
                if cond.verdict.leaders().contains(&c) {
                    led += 1;
                }
            }
        }
        (led, ran)
    };
    if !axes.is_empty() && n_ctrl > 1 {
        out.push_str(
            "Conditions where each law had the lowest slip or tied for it, out of the conditions \
it ran, by axis value:\n\n| axis value |",
        );
        for n in study.controllers() {
            let _ = write!(out, " {} |", cell(n));
        }
        out.push_str("\n|---|");
        for _ in 0..n_ctrl {
            out.push_str("---:|");
        }
        out.push('\n');
        for a in &axes {
            for v in 0..study.axes.len(*a) {
                let _ = write!(out, "| {} |", cell(&study.axes.value_text(*a, v)));
                for c in 0..n_ctrl {
                    let (led, ran) = tally(*a, v, c);
                    let _ = write!(out, " {led}/{ran} |");
                }
                out.push('\n');
            }
        }
        out.push('\n');
        // Who leads most often at each value of the axes a designer can change.
        let design_axes: Vec<&Axis> = axes
            .iter()
            .filter(|a| !matches!(**a, Axis::Slope | Axis::Mu))
            .collect();
        for a in design_axes.iter().copied() {
            let parts: Vec<String> = (0..study.axes.len(*a))
                .map(|v| {
                    let counts: Vec<(usize, usize)> =
                        (0..n_ctrl).map(|c| tally(*a, v, c)).collect();
                    let best = counts.iter().map(|x| x.0).max().unwrap_or(0);
                    let who: Vec<String> = counts
                        .iter()
                        .enumerate()
                        .filter(|(_, x)| x.0 == best && best > 0)
                        .map(|(c, x)| {
                            format!("{} ({}/{})", cell(&study.controllers()[c]), x.0, x.1)
                        })
                        .collect();
                    if who.is_empty() {
                        format!("at {} no law led", study.axes.value_text(*a, v))
                    } else {
                        format!("at {}: {}", study.axes.value_text(*a, v), who.join(" and "))
                    }
                })
                .collect();
            let _ = writeln!(
                out,
                "- By {}, the law with the lowest slip (or a tie) most often — {}.",
                a.label(),
                parts.join("; ")
            );
        }
        if !design_axes.is_empty() {
            out.push('\n');
        }
    }

    // Stiff PD: the model-free baseline the prototype found hard to beat.
    match study.stiff_pd() {
        Some(pd) => {
            let r = &records[pd];
            let name = cell(&study.controllers()[pd]);
            let share = if r.present > 0 {
                100.0 * r.leads() as f64 / r.present as f64
            } else {
                0.0
            };
            let _ = write!(
                out,
                "**Where stiff PD does well.** `{name}` (joint PD, no model) had the lowest slip \
or tied for it in {} of its {} conditions ({share:.0} %).",
                r.leads(),
                r.present
            );
            for a in &axes {
                let shares: Vec<(usize, usize, usize)> = (0..study.axes.len(*a))
                    .map(|v| {
                        let (l, n) = tally(*a, v, pd);
                        (v, l, n)
                    })
                    .filter(|x| x.2 > 0)
                    .collect();
                let ratio = |x: &(usize, usize, usize)| x.1 as f64 / x.2 as f64;
                let best = shares.iter().max_by(|p, q| ratio(p).total_cmp(&ratio(q)));
                let worst = shares.iter().min_by(|p, q| ratio(p).total_cmp(&ratio(q)));
                if let (Some(b), Some(w)) = (best, worst)
                    && ratio(b) > ratio(w)
                {
                    let _ = write!(
                        out,
                        " By {}, it does best at {} ({}/{}) and least well at {} ({}/{}).",
                        a.label(),
                        study.axes.value_text(*a, b.0),
                        b.1,
                        b.2,
                        study.axes.value_text(*a, w.0),
                        w.1,
                        w.2
                    );
                }
            }
            if r.fell_in > 0 {
                let _ = write!(
                    out,
                    " It fell or diverged in at least one run of {}.",
                    plural(r.fell_in, "condition")
                );
            }
            out.push_str("\n\n");
        }
        None => out.push_str(
            "There is no stiff PD law in this run (no controller named with a `pd` word), so \
the model-free baseline is not part of the comparison.\n\n",
        ),
    }
}

fn onset_section(out: &mut String, study: &Study, tables: &[super::tables::OnsetTable]) {
    out.push_str("## Slip-onset study\n\n");
    out.push_str(
        "The steepest slope (°) each law held before sustained slip or a fall, found by \
bisection on the slope angle (runs per group in brackets). The friction angle atan μ is the \
physical limit: with that friction no law can hold a steeper uniform slope.\n\n",
    );
    let names = study.onset_controllers();
    for t in tables {
        let _ = writeln!(out, "### {} Hz, {}\n", t.rate_hz, cell(&t.actuator));
        out.push_str("| μ | physical limit atan μ (°) |");
        for n in &names {
            let _ = write!(out, " {} |", cell(n));
        }
        out.push_str(" steepest held |\n|---|---:|");
        for _ in &names {
            out.push_str("---:|");
        }
        out.push_str("---|\n");
        for (m, mu) in t.mus.iter().enumerate() {
            let _ = write!(out, "| {mu} | {} |", num(t.friction_angle_deg[m]));
            let mut best = f64::NEG_INFINITY;
            for v in t.onset[m].iter().flatten() {
                if v.0.is_finite() {
                    best = best.max(v.0);
                }
            }
            for v in &t.onset[m] {
                let text = match v {
                    Some((deg, runs)) if deg.is_finite() => {
                        format!("{} ({runs})", num(*deg))
                    }
                    Some((_, runs)) => format!("— ({runs})"),
                    None => "·".to_string(),
                };
                let _ = write!(out, " {text} |");
            }
            let leaders: Vec<String> = names
                .iter()
                .zip(&t.onset[m])
                .filter(|(_, v)| matches!(v, Some((d, _)) if *d == best))
                .map(|(n, _)| cell(n))
                .collect();
            let _ = writeln!(
                out,
                " {} |",
                if leaders.is_empty() {
                    "—".to_string()
                } else {
                    leaders.join(", ")
                }
            );
        }
        out.push('\n');
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn report_number_format() {
        assert_eq!(num(2.0 / 3.0), "0.667");
        assert_eq!(num(12.345), "12.3");
        assert_eq!(num(1234.4), "1234");
        assert_eq!(num(0.001234), "0.00123");
        let s = Stat {
            mean: 7.0 / 3.0,
            ci95_half: Some(3.7947),
            seeds: 3,
            cells: 3,
        };
        assert_eq!(stat_text(&s, 1.0), "2.33 ± 3.79");
        let s = Stat {
            mean: 0.25,
            ci95_half: None,
            seeds: 2,
            cells: 4,
        };
        assert_eq!(stat_text(&s, 100.0), "25.0 (n=2)");
    }
}
