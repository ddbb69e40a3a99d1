//! Which figures a run gets, built from the computed tables. A figure whose axis has a single
//! value would compare nothing; it is skipped and the reason goes into `summary.md`.

use super::Computed;
use super::look;
use super::plots::{Bar, BarFigure, Figure, LineFigure, LinePanel, Pt, Scale};
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
