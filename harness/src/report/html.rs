//! `report.html`: the review sheet of a run folder in one self-contained file — the verdict
//! per law first, the figures inline as SVG, then the per-condition tables (sortable with a
//! small inline script; in the written order without it), the runs worth watching with the
//! command that makes their replay, the tuning table, the plan's limits and the run's inputs.
//!
//! Every number comes from the tables the other writers read ([`Computed`], [`Study`]); this
//! file only lays them out. The figures are the SVG files `figures::plan` rendered, read back.

use std::fmt::Write as _;
use std::path::Path;

use super::Computed;
use super::figures::{self, Planned};
use super::input::Status;
use super::markdown::{num, stat_text};
use super::page::{self, esc};
use super::tables::{Axis, Entry, Measure, Study, Verdict};

/// Name of the review sheet inside the run folder.
pub const REPORT_HTML: &str = "report.html";

/// The tuning table a run folder may hold (written by the tuning step); shown when present.
pub const GAINS_FILE: &str = "gains.csv";

/// Most runs listed under "Runs worth watching" (the worst of each condition first, then
/// the falls); the rest are counted.
pub const MAX_WATCH_ROWS: usize = 60;

/// Most bytes of `gains.csv` read.
const MAX_GAINS_BYTES: u64 = 1 << 20;

/// Condition columns: the axes that vary, or slope and μ when none does.
fn shown_axes(study: &Study) -> Vec<Axis> {
    let v: Vec<Axis> = Axis::ALL
        .into_iter()
        .filter(|a| study.axes.len(*a) > 1)
        .collect();
    if v.is_empty() {
        vec![Axis::Slope, Axis::Mu]
    } else {
        v
    }
}

fn plural(n: usize, one: &str, many: &str) -> String {
    if n == 1 {
        format!("{n} {one}")
    } else {
        format!("{n} {many}")
    }
}

fn entry_cell(e: &Entry, scale: f64) -> String {
    let mut t = match &e.stat {
        Some(s) => format!(
            "<td class=\"n\" data-v=\"{}\">{}",
            s.mean * scale,
            esc(&stat_text(s, scale))
        ),
        None => "<td class=\"n\" data-v=\"\">—".to_string(),
    };
    if e.fell > 0 {
        let _ = write!(t, " <span class=\"tally t-fell\">{} fell</span>", e.fell);
    }
    let others = e.not_ok().saturating_sub(e.fell);
    if others > 0 {
        let _ = write!(t, " <span class=\"tally t-amber\">{others} not ok</span>");
    }
    if e.beyond > 0 {
        let _ = write!(
            t,
            " <span class=\"tally t-beyond\">{} beyond</span>",
            e.beyond
        );
    }
    t.push_str("</td>");
    t
}

fn verdict_html(study: &Study, v: &Verdict) -> String {
    let ctrls = study.controllers();
    match v {
        Verdict::Lowest { ctrl, margin, .. } => format!(
            "<b>{}</b> lowest, by {} mm",
            esc(&ctrls[*ctrl]),
            num(*margin)
        ),
        Verdict::Tied(ids) => format!(
            "tie: {}",
            esc(&ids
                .iter()
                .map(|c| ctrls[*c].as_str())
                .collect::<Vec<_>>()
                .join(", "))
        ),
        Verdict::Only(c) => format!("only {} held on every run", esc(&ctrls[*c])),
        Verdict::NoData => "not ranked".to_string(),
    }
}

/// A condition's axis values for the verdict sentences: slope and μ, and every other axis the
/// run varies (rate, actuator, model error, noise) — a condition fixes every axis, so a
/// sentence without them would name several conditions at once.
fn place(study: &Study, idx: &[usize; super::tables::N_AXES]) -> String {
    let mut parts = vec![
        study.axes.value_text(Axis::Slope, idx[Axis::Slope.0]),
        format!("μ {}", study.axes.value_raw(Axis::Mu, idx[Axis::Mu.0])),
    ];
    for axis in Axis::ALL
        .into_iter()
        .filter(|a| !matches!(*a, Axis::Slope | Axis::Mu))
    {
        if study.axes.len(axis) > 1 {
            parts.push(study.axes.value_text(axis, idx[axis.0]));
        }
    }
    parts.join(", ")
}

fn list_places(mut v: Vec<String>, limit: usize) -> String {
    // Each place once, in first-seen order.
    let mut seen = std::collections::HashSet::new();
    v.retain(|p| seen.insert(p.clone()));
    let n = v.len();
    if n > limit {
        v.truncate(limit);
        format!("{} and {} more", v.join("; "), n - limit)
    } else {
        v.join("; ")
    }
}

/// One card per law: where it held and controlled the robot, how much it slipped, where it
/// fell, where it won — each number from the computed tables.
fn verdicts(out: &mut String, study: &Study, computed: &Computed) {
    let conds = &computed.conditions;
    let slip_mean = computed
        .per_controller
        .iter()
        .find(|(m, _)| *m == super::tables::SLIP)
        .map(|(_, v)| v.clone())
        .unwrap_or_default();
    let seeds = {
        let mut v: Vec<u64> = study.run.cells.iter().map(|c| c.seed).collect();
        v.sort_unstable();
        v.dedup();
        v.len()
    };
    let _ = writeln!(
        out,
        "<section id=\"verdict\"><h2>Verdict</h2>\n<p>A law <em>wins</em> a condition when its \
mean slip is lower than every other law's by more than the slip floor ({} mm per stance phase) \
<em>and</em> a paired t-test over seeds (two-sided, α = {}) finds the difference; otherwise the \
laws tie. Only runs that held and controlled the robot are ranked, and no condition beyond the \
plan's own limit.{}</p>",
        num(study.floor),
        super::tables::PAIRED_ALPHA,
        if seeds < 2 {
            " This run has a single seed, so no difference can be tested: every ranked condition \
is a tie."
        } else {
            ""
        }
    );
    for (c, name) in study.controllers().iter().enumerate() {
        let counts = &computed.statuses[c];
        let total: usize = counts.iter().sum();
        let count_of = |f: &dyn Fn(Status) -> bool| -> usize {
            Status::ALL
                .iter()
                .zip(counts)
                .filter(|(s, _)| f(**s))
                .map(|(_, n)| *n)
                .sum()
        };
        let ok = count_of(&|s| matches!(s, Status::Ok));
        let fell = count_of(&|s| s.is_fall());
        let error = count_of(&|s| s.name() == "error");
        let not_control = total - ok - fell - error;
        let mut held_all = Vec::new();
        let mut fell_in = Vec::new();
        let mut worst: Option<(f64, String)> = None;
        for cond in conds {
            let e = &cond.entries[c];
            if e.cells == 0 {
                continue;
            }
            if e.fell > 0 {
                fell_in.push(place(study, &cond.idx));
            }
            if e.rankable() {
                held_all.push(place(study, &cond.idx));
            }
            if let Some(s) = e.stat
                && worst.as_ref().is_none_or(|w| s.mean > w.0)
            {
                worst = Some((s.mean, place(study, &cond.idx)));
            }
        }
        let r = &computed.records[c];
        let class = if fell > 0 {
            "fell"
        } else if ok == total {
            "held"
        } else {
            "amber"
        };
        let _ = write!(
            out,
            "<div class=\"card {class} law-verdict\" data-law=\"{}\"><h3>{}</h3><p>",
            esc(name),
            esc(name)
        );
        let _ = write!(
            out,
            "<span class=\"tally t-held\">{ok}</span>held and controlled · \
<span class=\"tally t-amber\">{not_control}</span>did not control · \
<span class=\"tally t-fell\">{fell}</span>fell or diverged{} — of {total} runs.</p><p>",
            if error > 0 {
                format!(" · <span class=\"tally t-none\">{error}</span>not set up")
            } else {
                String::new()
            }
        );
        let mut s = String::new();
        if held_all.is_empty() {
            s.push_str("It held and controlled the robot on every run of no condition.");
        } else {
            let _ = write!(
                s,
                "Held and controlled on every run at {} of its {} conditions ({}).",
                held_all.len(),
                r.present,
                esc(&list_places(held_all, 8))
            );
        }
        if let Some(st) = slip_mean.get(c).and_then(|e| e.stat) {
            let _ = write!(
                s,
                " Mean slip over the runs that count: {} mm per stance phase",
                esc(&stat_text(&st, 1.0))
            );
            if let Some((w, at)) = &worst {
                let _ = write!(s, "; most at {} ({} mm)", esc(at), num(*w));
            }
            s.push('.');
        }
        if fell_in.is_empty() {
            s.push_str(" It never fell.");
        } else {
            let _ = write!(
                s,
                " Fell or diverged in {} ({}).",
                plural(fell_in.len(), "condition", "conditions"),
                esc(&list_places(fell_in, 8))
            );
        }
        let wins: Vec<String> = r
            .wins
            .iter()
            .map(|w| place(study, &conds[*w].idx))
            .collect();
        if wins.is_empty() {
            let _ = write!(
                s,
                " It won no condition; it tied for the lowest slip in {}.",
                plural(r.ties.len(), "condition", "conditions")
            );
        } else {
            let _ = write!(
                s,
                " It won {} ({}) and tied in {}.",
                plural(wins.len(), "condition", "conditions"),
                esc(&list_places(wins, 8)),
                r.ties.len()
            );
        }
        out.push_str(&s);
        out.push_str("</p></div>\n");
    }
    out.push_str("</section>\n");
}

/// The figures, outcome map first, each SVG read back from `plots/` and inlined.
fn figures_section(
    out: &mut String,
    dir: &Path,
    study: &Study,
    planned: &Planned,
) -> Result<(), String> {
    out.push_str("<section id=\"figures\"><h2>Figures</h2>\n");
    let mut figs: Vec<&str> = planned.figures.iter().map(|f| f.stem()).collect();
    figs.sort_by_key(|s| *s != figures::OUTCOME_STEM);
    for stem in figs {
        let path = dir.join(super::PLOTS_DIR).join(format!("{stem}.svg"));
        let svg = std::fs::read_to_string(&path)
            .map_err(|e| format!("{}: cannot read: {e}", path.display()))?;
        let body = svg.find("<svg").map(|i| &svg[i..]).unwrap_or(svg.as_str());
        let _ = writeln!(
            out,
            "<figure class=\"fig\" id=\"fig-{stem}\" data-figure=\"{stem}\">{body}<figcaption>{}</figcaption></figure>",
            esc(figures::describe(stem))
        );
    }
    regime_map(out, study);
    for s in &planned.skipped {
        let _ = writeln!(out, "<p class=\"muted\">Not drawn — {}.</p>", esc(s));
    }
    out.push_str("</section>\n");
    Ok(())
}

/// The outcome map over control rate × actuator model: per law a grid whose cells count the
/// runs of each outcome class ([`figures::OUTCOME_CLASSES`], classed by
/// [`figures::outcome_class`]), pooled over slope, μ and the other axes. Drawn as a table so it
/// reads without JavaScript and in print; skipped when both axes have a single value.
fn regime_map(out: &mut String, study: &Study) {
    let (n_rate, n_act) = (study.axes.len(Axis::Rate), study.axes.len(Axis::Actuator));
    if n_rate < 2 && n_act < 2 {
        return;
    }
    const CHIPS: [&str; 5] = ["t-held", "t-amber", "t-beyond", "t-fell", "t-none"];
    let n_ctrl = study.controllers().len();
    let mut counts = vec![[0usize; 5]; n_ctrl * n_rate * n_act];
    for (i, c) in study.run.cells.iter().enumerate() {
        let (key, ctrl) = study.place_of(i);
        let k = (ctrl * n_rate + key[Axis::Rate.0]) * n_act + key[Axis::Actuator.0];
        counts[k][figures::outcome_class(c.status.name(), c.beyond_plan_limit)] += 1;
    }
    out.push_str("<h3 id=\"regime-map\">Outcomes by control rate × actuator model</h3>\n<p>Each cell counts the runs of one law at one control rate and actuator model (all slopes, μ and seeds): ");
    for (k, name) in figures::OUTCOME_CLASSES.iter().enumerate() {
        let _ = write!(
            out,
            "<span class=\"tally {}\">n</span>{} ",
            CHIPS[k],
            esc(name)
        );
    }
    out.push_str("(zeros left out).</p>\n<div class=\"scroll\"><table id=\"table-regime-map\"><thead><tr><th>law</th><th>actuator</th>");
    for r in 0..n_rate {
        let _ = write!(
            out,
            "<th>{}</th>",
            esc(&study.axes.value_text(Axis::Rate, r))
        );
    }
    out.push_str("</tr></thead><tbody>\n");
    for (c, name) in study.controllers().iter().enumerate() {
        for a in 0..n_act {
            let _ = write!(
                out,
                "<tr><td>{}</td><td>{}</td>",
                esc(name),
                esc(&study.axes.value_text(Axis::Actuator, a))
            );
            for r in 0..n_rate {
                out.push_str("<td>");
                for (k, n) in counts[(c * n_rate + r) * n_act + a].iter().enumerate() {
                    if *n > 0 {
                        let _ = write!(out, "<span class=\"tally {}\">{n}</span>", CHIPS[k]);
                    }
                }
                out.push_str("</td>");
            }
            out.push_str("</tr>\n");
        }
    }
    out.push_str("</tbody></table></div>\n");
}

/// Per condition: each law's slip, base tracking and torque, and the verdict.
fn conditions_table(out: &mut String, study: &Study, computed: &Computed) {
    let axes = shown_axes(study);
    let measures = [
        super::tables::SLIP,
        super::tables::BASE_POS,
        Measure::Plain(super::input::Metric::TorqueRms),
    ];
    out.push_str(
        "<section id=\"conditions\"><h2>Slip, tracking and effort per condition</h2>\n\
<p>Means over seeds of the runs that count (status ok, within the plan's limit), ± the 95 % \
interval where there are three seeds or more. Click a heading to sort.</p>\n",
    );
    for (m, title) in measures.iter().zip(["Slip", "Tracking", "Effort"]) {
        let _ = writeln!(
            out,
            "<h3>{title}: {}</h3><div class=\"scroll\"><table class=\"sortable\" id=\"table-{}\"><thead><tr>",
            esc(m.heading()),
            m.name()
        );
        for a in &axes {
            let class = if *a == Axis::Actuator { "" } else { "num" };
            let _ = write!(out, "<th class=\"{class}\">{}</th>", esc(a.label()));
        }
        for c in study.controllers() {
            let _ = write!(out, "<th class=\"num\">{}</th>", esc(c));
        }
        if *m == super::tables::SLIP {
            out.push_str("<th>verdict</th>");
        }
        out.push_str("</tr></thead><tbody>\n");
        for cond in &computed.conditions {
            out.push_str("<tr>");
            for a in &axes {
                let i = cond.idx[a.0];
                let raw = study.axes.value_raw(*a, i);
                let shown = match *a {
                    Axis::Slope => format!("{raw}°"),
                    Axis::Mu => raw.clone(),
                    _ => study.axes.value_text(*a, i),
                };
                let _ = write!(
                    out,
                    "<td class=\"n\" data-v=\"{}\">{}</td>",
                    esc(&raw),
                    esc(&shown)
                );
            }
            let fixed: Vec<(Axis, usize)> = Axis::ALL.iter().map(|a| (*a, cond.idx[a.0])).collect();
            for c in 0..study.controllers().len() {
                let e = if *m == super::tables::SLIP {
                    cond.entries[c]
                } else {
                    study.entry(c, &fixed, *m)
                };
                out.push_str(&entry_cell(&e, m.display_scale()));
            }
            if *m == super::tables::SLIP {
                let _ = write!(out, "<td>{}</td>", verdict_html(study, &cond.verdict));
            }
            out.push_str("</tr>\n");
        }
        out.push_str("</tbody></table></div>\n");
    }
    out.push_str("</section>\n");
}

/// The `gripsweep trace` command that replays one run of this folder. `keep[k]`: whether to
/// name the k-th of `run_format::axis_columns()` (every axis of the table, then the seed; an
/// axis with one value in the run can be left out: `trace` takes an axis's first value when it
/// is not picked); the controller is always named.
pub fn trace_command(
    scenario_source: Option<&str>,
    c: &super::input::Cell,
    keep: &[bool],
) -> String {
    let mut cmd = String::from("gripsweep trace");
    if let Some(src) = scenario_source {
        let _ = write!(cmd, " {}", shell_word(src));
    }
    let picks = crate::run_format::AXES
        .iter()
        .zip(&c.axis_values)
        .map(|(a, v)| (a.name, v.text()))
        .chain([(crate::run_format::SEED, c.seed.to_string())]);
    for (i, (k, v)) in picks.enumerate() {
        if keep.get(i).copied().unwrap_or(true) || k == "controller" {
            let _ = write!(cmd, " --pick {}", shell_word(&format!("{k}={v}")));
        }
    }
    let _ = write!(cmd, " --out replay-{}.csv", c.id);
    cmd
}

/// A word safe to paste into a POSIX shell.
fn shell_word(s: &str) -> String {
    if !s.is_empty()
        && s.chars()
            .all(|c| c.is_ascii_alphanumeric() || "-_./=:+,".contains(c))
    {
        s.to_string()
    } else {
        format!("'{}'", s.replace('\'', "'\\''"))
    }
}

/// The runs worth watching: per condition the worst run (a fall first, then the largest slip),
/// then every other fall, each with the command that writes its replay.
fn watch_list(
    out: &mut String,
    study: &Study,
    computed: &Computed,
    manifest: &serde_json::Value,
    source: Option<&str>,
) {
    let run = study.run;
    let severity = |c: &super::input::Cell| -> (u8, f64) {
        let s = if c.status.is_fall() {
            3
        } else if c.status.name() == "error" {
            0
        } else if !matches!(c.status, Status::Ok) {
            2
        } else {
            1
        };
        let slip = c.metric(super::input::Metric::SlipMean);
        (s, if slip.is_finite() { slip } else { 0.0 })
    };
    let mut worst: Vec<Option<usize>> = vec![None; computed.conditions.len()];
    for (i, c) in run.cells.iter().enumerate() {
        let (key, _) = study.place_of(i);
        let Some(k) = computed.conditions.iter().position(|x| x.idx == key) else {
            continue;
        };
        let better = match worst[k] {
            None => true,
            Some(j) => {
                let (a, b) = (severity(c), severity(&run.cells[j]));
                a.0 > b.0 || (a.0 == b.0 && a.1 > b.1)
            }
        };
        if better && severity(c).0 > 0 {
            worst[k] = Some(i);
        }
    }
    let mut rows: Vec<(usize, &str)> = worst
        .iter()
        .flatten()
        .map(|i| (*i, "worst of its condition"))
        .collect();
    for (i, c) in run.cells.iter().enumerate() {
        if c.status.is_fall() && !rows.iter().any(|(j, _)| *j == i) {
            rows.push((i, "fell"));
        }
    }
    // Most severe first, so the cap never hides a fall behind a run that merely slipped.
    rows.sort_by(|a, b| {
        let (x, y) = (severity(&run.cells[a.0]), severity(&run.cells[b.0]));
        y.0.cmp(&x.0).then(y.1.total_cmp(&x.1)).then(a.0.cmp(&b.0))
    });
    let total = rows.len();
    rows.truncate(MAX_WATCH_ROWS);
    // Axes the scenario gives more than one value (from the manifest, not from the rows: a
    // shard may hold one value of an axis that has several); every axis when it is not known.
    let keep: Vec<bool> = crate::run_format::axis_columns()
        .into_iter()
        .map(|name| {
            let n = if name == "seed" {
                manifest
                    .get("seeds")
                    .and_then(|v| v.as_u64())
                    .map(|n| n as usize)
            } else {
                // An axis a folder's manifest does not list (written before the axis existed)
                // ran at its neutral value only.
                manifest.get("axes").and_then(|a| match a.get(name) {
                    Some(v) => v.as_array().map(|v| v.len()),
                    None => a.is_object().then_some(1),
                })
            };
            n.is_none_or(|n| n > 1)
        })
        .collect();
    out.push_str("<section id=\"watch\"><h2>Runs worth watching</h2>\n<p>The worst run of each \
condition (a fall before a run that did not control the robot, before the largest slip) and every \
other fall, most severe first. Each command, run where the scenario file is, writes the run's trace CSV and beside it \
a replay page (<code>.html</code>) that opens in any browser.</p>\n");
    if total > rows.len() {
        let _ = writeln!(
            out,
            "<p class=\"muted\">{} more runs are not listed (at most {MAX_WATCH_ROWS}).</p>",
            total - rows.len()
        );
    }
    out.push_str("<div class=\"scroll\"><table class=\"sortable\" id=\"table-watch\"><thead><tr><th>why</th><th>controller</th><th class=\"num\">slope</th><th class=\"num\">μ</th><th>status</th><th class=\"num\">mean slip (mm)</th><th>replay command</th></tr></thead><tbody>\n");
    for (i, why) in rows {
        let c = &run.cells[i];
        let _ = writeln!(
            out,
            "<tr><td>{why}</td><td>{}</td><td class=\"n\">{}°</td><td class=\"n\">{}</td><td>{}{}</td><td class=\"n\">{}</td><td><code class=\"cmd\">{}</code></td></tr>",
            esc(&c.controller),
            c.slope_deg,
            c.mu,
            esc(c.status.name()),
            if c.message.is_empty() {
                String::new()
            } else {
                format!(" <span class=\"muted\">— {}</span>", esc(&c.message))
            },
            num(c.metric(super::input::Metric::SlipMean)),
            esc(&trace_command(source, c, &keep))
        );
    }
    out.push_str("</tbody></table></div></section>\n");
}

fn outcomes_table(out: &mut String, study: &Study, computed: &Computed) {
    out.push_str("<section id=\"outcomes\"><h2>Run outcomes</h2><div class=\"scroll\"><table class=\"sortable\" id=\"table-outcomes\"><thead><tr><th>controller</th><th class=\"num\">runs</th>");
    for s in Status::ALL {
        let _ = write!(out, "<th class=\"num\">{}</th>", esc(s.name()));
    }
    out.push_str("</tr></thead><tbody>\n");
    for (c, counts) in computed.statuses.iter().enumerate() {
        let _ = write!(
            out,
            "<tr><td>{}</td><td class=\"n\">{}</td>",
            esc(&study.controllers()[c]),
            counts.iter().sum::<usize>()
        );
        for n in counts {
            let _ = write!(out, "<td class=\"n\">{n}</td>");
        }
        out.push_str("</tr>\n");
    }
    out.push_str("</tbody></table></div>\n");
    // Every measure per law over the whole run, as in summary.md.
    out.push_str("<h3>Every measure, per law, over the whole run</h3><div class=\"scroll\"><table class=\"sortable\" id=\"table-measures\"><thead><tr><th>measure</th>");
    for c in study.controllers() {
        let _ = write!(out, "<th class=\"num\">{}</th>", esc(c));
    }
    out.push_str("</tr></thead><tbody>\n");
    for (m, entries) in &computed.per_controller {
        let _ = write!(out, "<tr><td>{}</td>", esc(m.heading()));
        for e in entries {
            out.push_str(&entry_cell(e, m.display_scale()));
        }
        out.push_str("</tr>\n");
    }
    out.push_str("</tbody></table></div></section>\n");
}

/// `gains.csv`, shown as written, when the run folder has one.
fn tuning_section(out: &mut String, dir: &Path) {
    out.push_str("<section id=\"tuning\"><h2>Gains</h2>\n");
    let path = dir.join(GAINS_FILE);
    if !path.is_file() {
        out.push_str("<p class=\"muted\">This run folder has no <code>gains.csv</code>: the laws ran with the gains of the scenario and their defaults.</p></section>\n");
        return;
    }
    let text = match crate::limits::read_text_bounded(&path, MAX_GAINS_BYTES, "tuning table") {
        Ok(t) => t,
        Err(e) => {
            let _ = writeln!(
                out,
                "<p class=\"muted\">Not shown: {}</p></section>",
                esc(&e)
            );
            return;
        }
    };
    let mut rdr = csv::ReaderBuilder::new()
        .flexible(true)
        .from_reader(text.as_bytes());
    let _ = writeln!(
        out,
        "<p>From <code>{GAINS_FILE}</code> in this folder, as written.</p><div class=\"scroll\"><table class=\"sortable\" id=\"table-gains\"><thead><tr>"
    );
    if let Ok(h) = rdr.headers() {
        for f in h {
            let _ = write!(out, "<th class=\"num\">{}</th>", esc(f));
        }
    }
    out.push_str("</tr></thead><tbody>\n");
    for rec in rdr.records().map_while(Result::ok).take(1000) {
        out.push_str("<tr>");
        for f in &rec {
            let _ = write!(out, "<td>{}</td>", esc(f));
        }
        out.push_str("</tr>\n");
    }
    out.push_str("</tbody></table></div></section>\n");
}

/// The plan's limits, the slip floor, the inputs and their hashes.
fn inputs_section(out: &mut String, study: &Study, manifest: &serde_json::Value) {
    let m = &study.run.manifest;
    out.push_str("<section id=\"inputs\"><h2>Limits, floor and inputs</h2>\n");
    if m.plan_limits.is_empty() {
        out.push_str("<p class=\"muted\">The manifest has no plan limits (a run made before they were computed).</p>\n");
    } else {
        out.push_str("<p>The plan's own limit per slope: the least friction any contact-force distribution needs for the planned motion (μ<sub>required</sub>), the share of the joint torque limits that distribution takes, and μ<sub>required</sub> with the torque limits imposed. A condition with μ below μ<sub>required</sub> is beyond the plan's limit: shown, never ranked.</p>\n<table id=\"table-limits\"><thead><tr><th>slope</th><th>tan θ</th><th>μ required</th><th>at (s)</th><th>torque share</th><th>μ required within torque limits</th></tr></thead><tbody>\n");
        for l in &m.plan_limits {
            let _ = writeln!(
                out,
                "<tr><td class=\"n\">{}°</td><td class=\"n\">{:.3}</td><td class=\"n\">{}</td><td class=\"n\">{:.2}</td><td class=\"n\">{}</td><td class=\"n\">{}</td></tr>",
                l.slope_deg,
                l.slope_deg.to_radians().tan(),
                num(l.mu_required),
                l.at_s,
                num(l.torque_share),
                num(l.mu_required_torque_limited)
            );
        }
        out.push_str("</tbody></table>\n");
    }
    let _ = writeln!(
        out,
        "<p>Slip floor: <b>{} mm</b> per stance phase — differences of mean slip below it are ties (see <code>summary.md</code> for how it is measured).</p>",
        num(study.floor)
    );
    out.push_str("<table id=\"table-inputs\"><thead><tr><th>input</th><th>file</th><th>SHA-256</th></tr></thead><tbody>\n");
    if let Some(obj) = manifest.get("inputs").and_then(|v| v.as_object()) {
        for (role, e) in obj {
            let path = e
                .get("path")
                .or_else(|| e.get("source"))
                .and_then(|v| v.as_str())
                .unwrap_or("");
            let sha = e.get("sha256").and_then(|v| v.as_str()).unwrap_or("");
            let _ = writeln!(
                out,
                "<tr><td>{}</td><td><code>{}</code></td><td><code>{}</code></td></tr>",
                esc(role),
                esc(path),
                esc(sha)
            );
        }
    }
    out.push_str("</tbody></table>\n");
    let _ = writeln!(
        out,
        "<p class=\"muted\">gripsweep {} · the same numbers at full precision are in <code>summary.csv</code>, the long tables in <code>summary.md</code>; <code>gripsweep report</code> rebuilds this page from the folder.</p></section>",
        esc(&m.tool_version)
    );
}

/// The page.
pub fn render(
    dir: &Path,
    study: &Study,
    computed: &Computed,
    planned: &Planned,
) -> Result<String, String> {
    let run = study.run;
    let manifest_path = dir.join(super::MANIFEST_FILE);
    let manifest: serde_json::Value = std::fs::read_to_string(&manifest_path)
        .ok()
        .and_then(|t| serde_json::from_str(&t).ok())
        .unwrap_or(serde_json::Value::Null);
    let source = manifest
        .get("scenario_source")
        .and_then(|v| v.as_str())
        .filter(|s| !s.is_empty() && *s != crate::scenario::DEFAULT_SCENARIO_NAME);
    let name = &run.manifest.scenario_name;
    let mut out = page::open(&format!("{name} · review sheet · gripsweep"), "");
    let _ = writeln!(
        out,
        "<h1>{} — review sheet</h1>\n<p class=\"byline\">{} · {} · seeds {} · gripsweep {}</p>",
        esc(name),
        plural(run.cells.len(), "run", "runs"),
        plural(study.controllers().len(), "law", "laws"),
        {
            let mut seeds: Vec<u64> = run.cells.iter().map(|c| c.seed).collect();
            seeds.sort_unstable();
            seeds.dedup();
            seeds.len()
        },
        esc(&run.manifest.tool_version)
    );
    out.push_str("<nav class=\"toc\"><a href=\"#verdict\">Verdict</a><br><a href=\"#figures\">Figures</a><br><a href=\"#conditions\">Per condition</a><br><a href=\"#watch\">Runs worth watching</a><br><a href=\"#outcomes\">Run outcomes</a><br><a href=\"#tuning\">Gains</a><br><a href=\"#inputs\">Limits, floor and inputs</a></nav>\n");
    verdicts(&mut out, study, computed);
    figures_section(&mut out, dir, study, planned)?;
    conditions_table(&mut out, study, computed);
    watch_list(&mut out, study, computed, &manifest, source);
    outcomes_table(&mut out, study, computed);
    tuning_section(&mut out, dir);
    inputs_section(&mut out, study, &manifest);
    out.push_str(&page::close(&[page::SORT_SCRIPT]));
    Ok(out)
}
