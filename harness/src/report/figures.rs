//! Which figures a run gets, built from the computed tables. A figure whose axis has a single
//! value would compare nothing; it is skipped and the reason goes into `summary.md`.

use super::Computed;
use super::look;
use super::plots::{
    Bar, BarFigure, Figure, LineFigure, LinePanel, MapFigure, MapPanel, MapTile, Pt, Scale,
};
use super::tables::{Axis, Pivot, Study};

/// The figures to draw and the ones left out.
pub struct Planned {
    pub figures: Vec<Figure>,
    /// Human-readable reasons, one per skipped figure.
    pub skipped: Vec<String>,
    /// File stems of skipped figures (to remove stale copies).
    pub skipped_stems: Vec<&'static str>,
}

pub const SLIP_STEM: &str = "slip_vs_friction";
pub const TRACKING_STEM: &str = "tracking_vs_friction";
pub const RATE_STEM: &str = "rate_study";
pub const ACTUATOR_STEM: &str = "actuator_study";
pub const ONSET_STEM: &str = "onset_vs_friction";
pub const OUTCOME_STEM: &str = "outcome_map";

/// The outcome map's classes, in drawing order (bottom to top in a tile).
pub const OUTCOME_CLASSES: [&str; 5] = [
    "held and controlled",
    "did not control",
    "beyond the plan's limit",
    "fell or diverged",
    "not set up",
];

/// A run's class on the outcome map, from its `status` text in `cells.csv` and whether its
/// condition is beyond the plan's limit: a fall is a fall wherever it happened; otherwise a
/// run on a condition beyond the plan's limit is counted there (the plan asked for more than
/// friction or the joints give, whatever the law did); `ok` is held and controlled; `error`
/// was never run; every other status (a law that could not meet its constraints, a run that
/// held up but did not control the robot, a status this report does not know) is "did not
/// control".
pub fn outcome_class(status: &str, beyond_limit: bool) -> usize {
    match status {
        "fell" | "diverged" => 3,
        "error" => 4,
        _ if beyond_limit => 2,
        "ok" => 0,
        _ => 1,
    }
}

/// What each figure shows, for the list in `summary.md`.
pub fn describe(stem: &str) -> &'static str {
    match stem {
        SLIP_STEM => {
            "mean slip vs friction coefficient, one line per controller, one panel per slope"
        }
        TRACKING_STEM => "base position error vs friction coefficient, same layout",
        RATE_STEM => "mean slip by control rate, grouped by controller",
        ACTUATOR_STEM => "mean slip by actuator model, grouped by controller",
        ONSET_STEM => {
            "slip-onset angle vs friction coefficient, with the friction angle as the physical limit"
        }
        OUTCOME_STEM => {
            "outcome of every run per condition (slope × μ), one panel per controller, with the friction angle and the plan's μ_required"
        }
        _ => "",
    }
}

pub fn plan(study: &Study, computed: &Computed) -> Planned {
    let mut planned = Planned {
        figures: Vec::new(),
        skipped: Vec::new(),
        skipped_stems: Vec::new(),
    };
    let scenario = &study.run.manifest.scenario_name;
    let floor = study.floor;
    let floor_ref = (floor > 0.0).then(|| (floor, "slip floor".to_string()));
    let interval_note = "whiskers: 95 % interval over seeds where ≥ 3 seeds";

    planned.figures.push(Figure::Lines(friction_lines(
        study,
        &computed.slip_by_friction,
        SLIP_STEM,
        "Mean slip per stance phase against ground friction",
        format!(
            "{scenario} · mean over seeds of the runs that held · {interval_note} · dashed: slip floor {} mm",
            short(floor)
        ),
        "mean slip per stance phase (mm",
        floor_ref.clone(),
    )));
    planned.figures.push(Figure::Lines(friction_lines(
        study,
        &computed.tracking_by_friction,
        TRACKING_STEM,
        "Base position tracking against ground friction",
        format!("{scenario} · mean over seeds of the runs that held · {interval_note}"),
        "base position error, RMS (mm",
        None,
    )));

    let rates = study.axes.len(Axis::Rate);
    if rates >= 2 {
        let levels = (0..rates)
            .map(|i| (study.axes.value_text(Axis::Rate, i), look::ramp(i, rates)))
            .collect();
        planned.figures.push(Figure::Bars(bars(
            study,
            &computed.rate_slip,
            RATE_STEM,
            "What control rate buys: mean slip per stance phase",
            format!("{scenario} · pooled over the other axes · {interval_note}"),
            levels,
            floor_ref.clone(),
        )));
    } else {
        planned.skipped.push(format!(
            "rate study: the run has a single control rate ({}), so there is no rate comparison to plot",
            study.axes.value_text(Axis::Rate, 0)
        ));
        planned.skipped_stems.push(RATE_STEM);
    }

    let acts = study.axes.len(Axis::Actuator);
    if acts >= 2 {
        let levels = (0..acts)
            .map(|i| {
                (
                    study.axes.value_text(Axis::Actuator, i),
                    look::LEVELS[i % look::LEVELS.len()],
                )
            })
            .collect();
        planned.figures.push(Figure::Bars(bars(
            study,
            &computed.actuator_slip,
            ACTUATOR_STEM,
            "What torque sensing buys: mean slip per stance phase by actuator model",
            format!("{scenario} · pooled over the other axes · {interval_note}"),
            levels,
            floor_ref,
        )));
    } else {
        planned.skipped.push(format!(
            "actuator study: the run has a single actuator model ({}), so there is no actuator comparison to plot",
            study.axes.value_text(Axis::Actuator, 0)
        ));
        planned.skipped_stems.push(ACTUATOR_STEM);
    }

    planned.figures.push(Figure::Map(outcome_map(study)));

    match &computed.onset {
        Some(tables) if !tables.is_empty() => {
            planned
                .figures
                .push(Figure::Lines(onset_lines(study, tables)));
        }
        Some(_) => {
            planned
                .skipped
                .push("slip-onset study: onset.csv has no rows".to_string());
            planned.skipped_stems.push(ONSET_STEM);
        }
        None => planned.skipped_stems.push(ONSET_STEM),
    }
    planned
}

/// The outcome map: per controller, every condition (slope × μ) as a tile split into the
/// share of its runs (over rates, actuators, seeds and the other axes) in each outcome class,
/// with the friction angle μ = tan θ and the plan's μ_required per slope (from the manifest).
fn outcome_map(study: &Study) -> MapFigure {
    let run = study.run;
    let mut slopes: Vec<f64> = run.cells.iter().map(|c| c.slope_deg).collect();
    let mut mus: Vec<f64> = run.cells.iter().map(|c| c.mu).collect();
    for v in [&mut slopes, &mut mus] {
        v.sort_by(f64::total_cmp);
        v.dedup();
    }
    let limits: Vec<(f64, f64)> = slopes
        .iter()
        .filter_map(|&d| {
            run.manifest
                .plan_limit(d)
                .map(|l| (d, l.mu_required))
                .filter(|(_, m)| m.is_finite())
        })
        .collect();
    let spacing = |v: &[f64], fallback: f64| {
        v.windows(2)
            .map(|w| w[1] - w[0])
            .fold(f64::INFINITY, f64::min)
            .min(fallback)
    };
    // Tiles of 80 % of the grid spacing; the axes hold whole tiles, and μ starts at 0 so the
    // friction angle is in view from flat ground up.
    let (sx, sy) = (spacing(&slopes, 10.0), spacing(&mus, 0.2));
    let tile = (0.8 * sx, 0.8 * sy);
    let (x_lo, x_hi) = (
        slopes.first().copied().unwrap_or(0.0) - 0.5 * sx,
        slopes.last().copied().unwrap_or(0.0) + 0.5 * sx,
    );
    let top_limit = limits.iter().map(|l| l.1).fold(0.0, f64::max);
    let y_hi = (mus.last().copied().unwrap_or(1.0) + 0.5 * sy).max(top_limit * 1.05);
    let y_lo = (mus.first().copied().unwrap_or(0.0) - 0.5 * sy).min(0.0);
    let x = Scale {
        lo: x_lo,
        hi: x_hi,
        ticks: slopes.clone(),
        log: false,
    };
    let y = Scale {
        lo: y_lo,
        hi: y_hi,
        ticks: mus.clone(),
        log: false,
    };
    let panels = study
        .controllers()
        .iter()
        .map(|name| {
            let tiles = slopes
                .iter()
                .flat_map(|&d| mus.iter().map(move |&m| (d, m)))
                .map(|(d, m)| {
                    let beyond = run.manifest.beyond_plan_limit(d, m);
                    let mut counts = vec![0; OUTCOME_CLASSES.len()];
                    for c in run
                        .cells
                        .iter()
                        .filter(|c| c.controller == *name && c.slope_deg == d && c.mu == m)
                    {
                        counts[outcome_class(c.status.name(), beyond)] += 1;
                    }
                    MapTile { x: d, y: m, counts }
                })
                .collect();
            MapPanel {
                title: name.clone(),
                tiles,
            }
        })
        .collect();
    let n = 60;
    let curve = (0..=n)
        .map(|i| {
            let d = x.lo + 0.98 * (x.hi - x.lo) * i as f64 / n as f64;
            (d, d.to_radians().tan())
        })
        .collect();
    MapFigure {
        stem: OUTCOME_STEM.into(),
        title: "How every run ended, by slope and ground friction".into(),
        subtitle: format!(
            "{} · each tile: the runs of one condition (all rates, actuators, seeds), split by outcome · dashed: friction angle μ = tan θ · solid: the plan's μ_required{}",
            run.manifest.scenario_name,
            if limits.is_empty() {
                " (not in this run's manifest)"
            } else {
                ""
            }
        ),
        classes: OUTCOME_CLASSES
            .iter()
            .zip(look::OUTCOMES)
            .map(|(l, c)| (l.to_string(), c))
            .collect(),
        panels,
        x_label: "slope (°)".into(),
        y_label: "friction coefficient μ".into(),
        x,
        y,
        tile,
        curve,
        curve_label: "friction angle μ = tan θ".into(),
        limit: limits,
        limit_label: "plan's μ_required".into(),
    }
}

/// Shortest display of a number (no trailing zeros beyond what it needs).
/// Three significant digits for labels (the tables carry the full numbers).
fn short(v: f64) -> String {
    if v == 0.0 || !v.is_finite() {
        return format!("{v}");
    }
    let digits = (2 - v.abs().log10().floor() as i32).max(0) as usize;
    format!("{v:.digits$}")
}

fn friction_lines(
    study: &Study,
    pivots: &[Pivot],
    stem: &str,
    title: &str,
    subtitle: String,
    y_label_open: &str,
    floor: Option<(f64, String)>,
) -> LineFigure {
    let mus = study.axes.numbers(Axis::Mu);
    let mut means = Vec::new();
    let mut tops = Vec::new();
    let panels: Vec<LinePanel> = pivots
        .iter()
        .map(|p| {
            let title = p
                .fixed
                .map(|(a, i)| study.axes.value_text(a, i))
                .unwrap_or_default();
            let series = (0..study.controllers().len())
                .map(|c| {
                    let mut gap = false;
                    let mut pts = Vec::new();
                    for row in &p.rows {
                        let stat = row.entries.get(c).and_then(|e| e.stat);
                        match (stat, mus.get(row.value)) {
                            (Some(s), Some(mu)) => {
                                means.push(s.mean);
                                tops.push(s.mean + s.ci95_half.unwrap_or(0.0));
                                pts.push(Pt {
                                    x: *mu,
                                    y: s.mean,
                                    half: s.ci95_half,
                                    gap_before: gap,
                                });
                                gap = false;
                            }
                            _ => gap = !pts.is_empty(),
                        }
                    }
                    pts
                })
                .collect();
            LinePanel {
                title,
                series,
                curve: Vec::new(),
            }
        })
        .collect();
    if let Some((f, _)) = &floor {
        tops.push(*f);
    }
    let y = Scale::for_values(&means, &tops);
    let y_label = if y.log {
        format!("{y_label_open}, log scale)")
    } else {
        format!("{y_label_open})")
    };
    LineFigure {
        stem: stem.to_string(),
        title: title.to_string(),
        subtitle,
        series_names: study.controllers().to_vec(),
        panels,
        x_label: "static friction coefficient μ".to_string(),
        y_label,
        x: Scale::for_positions(mus),
        y,
        floor,
        curve_label: None,
    }
}

fn bars(
    study: &Study,
    pivot: &Pivot,
    stem: &str,
    title: &str,
    subtitle: String,
    levels: Vec<(String, plotters::style::RGBColor)>,
    floor: Option<(f64, String)>,
) -> BarFigure {
    let n_ctrl = study.controllers().len();
    let values: Vec<Vec<Bar>> = (0..n_ctrl)
        .map(|c| {
            pivot
                .rows
                .iter()
                .map(|row| {
                    row.entries
                        .get(c)
                        .and_then(|e| e.stat)
                        .map(|s| (s.mean, s.ci95_half))
                })
                .collect()
        })
        .collect();
    let means: Vec<f64> = values.iter().flatten().flatten().map(|v| v.0).collect();
    let mut tops: Vec<f64> = values
        .iter()
        .flatten()
        .flatten()
        .map(|(m, h)| m + h.unwrap_or(0.0))
        .collect();
    if let Some((f, _)) = &floor {
        tops.push(*f);
    }
    let y = Scale::for_values(&means, &tops);
    let subtitle = if values.iter().flatten().any(Option::is_none) {
        format!("{subtitle} · ×: no run held")
    } else {
        subtitle
    };
    let y_label = if y.log {
        "mean slip per stance phase (mm, log scale)"
    } else {
        "mean slip per stance phase (mm)"
    };
    BarFigure {
        stem: stem.to_string(),
        title: title.to_string(),
        subtitle,
        groups: study.controllers().to_vec(),
        levels,
        values,
        y_label: y_label.to_string(),
        y,
        floor,
    }
}

fn onset_lines(study: &Study, tables: &[super::tables::OnsetTable]) -> LineFigure {
    let names = study.onset_controllers();
    let all_mu: Vec<f64> = tables.iter().flat_map(|t| t.mus.iter().copied()).collect();
    let x = Scale::for_positions(&all_mu);
    // The physical limit as a smooth curve over the drawn μ range, not only at the data μ.
    let (a, b) = (x.lo.max(0.0), x.hi);
    let curve: Vec<(f64, f64)> = (0..=60)
        .map(|k| {
            let mu = a + (b - a) * k as f64 / 60.0;
            (mu, mu.atan().to_degrees())
        })
        .collect();
    let mut values: Vec<f64> = curve.iter().map(|c| c.1).collect();
    let panels = tables
        .iter()
        .map(|t| {
            let series = (0..names.len())
                .map(|c| {
                    t.mus
                        .iter()
                        .zip(&t.onset)
                        .filter_map(|(mu, row)| {
                            let (deg, _) = (*row.get(c)?)?;
                            values.push(deg);
                            Some(Pt {
                                x: *mu,
                                y: deg,
                                half: None,
                                gap_before: false,
                            })
                        })
                        .collect()
                })
                .collect();
            LinePanel {
                title: format!("{} Hz · {}", short(t.rate_hz), t.actuator),
                series,
                curve: curve.clone(),
            }
        })
        .collect();
    LineFigure {
        stem: ONSET_STEM.to_string(),
        title: "Steepest slope held before sustained slip".to_string(),
        subtitle: format!(
            "{} · found by bisection on the slope angle · dashed: friction angle atan μ, the physical limit",
            study.run.manifest.scenario_name
        ),
        series_names: names,
        panels,
        x_label: "static friction coefficient μ".to_string(),
        y_label: "slip-onset slope angle (°)".to_string(),
        x,
        // Angles: always linear, a log axis would distort the comparison with atan μ.
        y: Scale::linear_from_zero(values.into_iter()),
        floor: None,
        curve_label: Some("physical limit (atan μ)".to_string()),
    }
}
