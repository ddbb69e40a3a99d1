//! The report's figures, each drawn once per backend: SVG (text left to the viewer) and PNG
//! (text rasterised from the embedded font, see `look.rs`).
//!
//! Figures are plain data (`LineFigure`, `BarFigure`) built from the tables, then drawn by one
//! generic function per kind, so the SVG and the PNG of a figure cannot disagree.

use std::path::{Path, PathBuf};

use std::ops::Range;

use plotters::coord::Shift;
use plotters::coord::ranged1d::{KeyPointHint, NoDefaultFormatting, ValueFormatter};
use plotters::element::DashedPathElement;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};

use super::look::{self, FAMILY, FIELD, FRAME, GUIDE, INK, MUTED, Marker, PAPER, REFERENCE, TAB};

/// Outer margin of every figure (px).
const MARGIN: u32 = 24;
/// Smallest figure width, so the title and legend always fit on a line or two.
const MIN_WIDTH: u32 = 760;
/// Facet panel size (px).
const PANEL_W: u32 = 380;
const PANEL_H: u32 = 300;
/// Facet columns at most.
const MAX_COLS: usize = 3;
/// Height of the bar-chart plotting region (px).
const BAR_H: u32 = 380;
/// First subtitle line; each subtitle line is this tall.
const SUBTITLE_TOP: u32 = 42;
const SUBTITLE_ROW: u32 = 18;
/// Each legend row is this tall.
const LEGEND_ROW: u32 = 22;

/// A value axis. For a log axis, `lo`, `hi` and `ticks` are decimal logarithms.
#[derive(Clone, Debug, PartialEq)]
pub struct Scale {
    pub lo: f64,
    pub hi: f64,
    pub ticks: Vec<f64>,
    pub log: bool,
}

impl Scale {
    /// Where a data value goes on this axis (`None` if it cannot be drawn: ≤ 0 on a log axis).
    fn at(&self, v: f64) -> Option<f64> {
        if !v.is_finite() {
            None
        } else if self.log {
            (v > 0.0).then(|| v.log10())
        } else {
            Some(v)
        }
    }

    /// Like [`Scale::at`], but clamped into the axis (for whisker ends).
    fn clamped(&self, v: f64) -> f64 {
        self.at(v).unwrap_or(self.lo).clamp(self.lo, self.hi)
    }

    fn label(&self, t: f64) -> String {
        if self.log {
            decade_label(t)
        } else {
            let step = self
                .ticks
                .windows(2)
                .map(|w| (w[1] - w[0]).abs())
                .fold(f64::INFINITY, f64::min);
            tick_label(t, step)
        }
    }

    /// A value axis for `values`, stretched to also cover `extents` (interval ends, a
    /// reference line). It starts at zero (slip, error and angle are never negative) unless
    /// the values span more than two decades, where a linear axis would flatten all but the
    /// largest into the baseline and a log axis is used instead.
    pub fn for_values(values: &[f64], extents: &[f64]) -> Scale {
        let pos = |v: &f64| v.is_finite() && *v > 0.0;
        let max = values.iter().copied().filter(pos).fold(f64::NAN, f64::max);
        let min = values.iter().copied().filter(pos).fold(f64::NAN, f64::min);
        if max / min > 100.0 {
            let all = values.iter().chain(extents).copied().filter(pos);
            let lo_v = all.clone().fold(min, f64::min);
            let hi_v = all.fold(max, f64::max);
            let lo = lo_v.log10().floor();
            let hi = hi_v.log10().ceil().max(lo + 1.0);
            let ticks = (lo as i32..=hi as i32).map(f64::from).collect();
            return Scale {
                lo,
                hi,
                ticks,
                log: true,
            };
        }
        Scale::linear_from_zero(values.iter().chain(extents).copied())
    }

    /// A linear axis from zero to a rounded top above every value.
    pub fn linear_from_zero(values: impl Iterator<Item = f64>) -> Scale {
        let top = values.filter(|v| v.is_finite()).fold(0.0f64, f64::max);
        let top = if top > 0.0 { top * 1.08 } else { 1.0 };
        let step = nice_step(top / 5.0);
        let hi = (top / step).ceil() * step;
        Scale {
            lo: 0.0,
            hi,
            ticks: ticks_between(0.0, hi, step),
            log: false,
        }
    }

    /// An axis over given positions (μ values): the positions themselves as ticks when there
    /// are few, padded so end markers are not cut; a single value gets a window around it.
    pub fn for_positions(values: &[f64]) -> Scale {
        let mut v: Vec<f64> = values.iter().copied().filter(|x| x.is_finite()).collect();
        v.sort_by(f64::total_cmp);
        v.dedup();
        let (lo, hi) = match (v.first(), v.last()) {
            (Some(a), Some(b)) => (*a, *b),
            _ => (0.0, 1.0),
        };
        let pad = if hi > lo {
            0.08 * (hi - lo)
        } else {
            (0.1 * lo.abs()).max(0.05)
        };
        let ticks = if !v.is_empty() && v.len() <= 8 {
            v
        } else {
            ticks_between(lo, hi, nice_step((hi - lo) / 6.0))
        };
        Scale {
            lo: lo - pad,
            hi: hi + pad,
            ticks,
            log: false,
        }
    }
}

/// 1, 2, 2.5 or 5 × 10^k, the smallest not below `raw`.
fn nice_step(raw: f64) -> f64 {
    if !(raw.is_finite() && raw > 0.0) {
        return 1.0;
    }
    let p = 10f64.powf(raw.log10().floor());
    [1.0, 2.0, 2.5, 5.0, 10.0]
        .iter()
        .map(|m| m * p)
        .find(|s| *s >= raw * (1.0 - 1e-9))
        .unwrap_or(10.0 * p)
}

fn ticks_between(lo: f64, hi: f64, step: f64) -> Vec<f64> {
    let first = (lo / step).ceil() as i64;
    let last = (hi / step + 1e-9).floor() as i64;
    (first..=last).map(|k| k as f64 * step).collect()
}

fn tick_label(v: f64, step: f64) -> String {
    let decimals = if step.is_finite() && step > 0.0 {
        let d = (-step.log10().floor()).max(0.0) as usize;
        // 2.5 × 10^k needs one digit more than its power.
        if ((step / 10f64.powi(-(d as i32))) - 2.5).abs() < 1e-9 {
            d + 1
        } else {
            d
        }
    } else {
        // Data positions (μ values): shortest form of the value itself.
        return format!("{v}");
    };
    format!("{:.*}", decimals.min(6), v)
}

fn decade_label(t: f64) -> String {
    let k = t.round() as i32;
    if (-3..=4).contains(&k) {
        let v = 10f64.powi(k);
        format!("{}", (v * 1e3).round() / 1e3)
    } else {
        format!("1e{k}")
    }
}

/// One point of a line series: value with its 95 % half-width when there is one.
#[derive(Clone, Copy, Debug)]
pub struct Pt {
    pub x: f64,
    pub y: f64,
    pub half: Option<f64>,
    /// The axis value before this one had no value: the line breaks here rather than
    /// drawing through a group where no run held.
    pub gap_before: bool,
}

/// One facet of a line figure.
#[derive(Clone, Debug)]
pub struct LinePanel {
    pub title: String,
    /// One list of points per series (in legend order); may be empty.
    pub series: Vec<Vec<Pt>>,
    /// A dashed reference curve (physical limit), if any.
    pub curve: Vec<(f64, f64)>,
}

/// Lines over a shared x and y axis, one facet per panel.
#[derive(Clone, Debug)]
pub struct LineFigure {
    pub stem: String,
    pub title: String,
    pub subtitle: String,
    pub series_names: Vec<String>,
    pub panels: Vec<LinePanel>,
    pub x_label: String,
    pub y_label: String,
    pub x: Scale,
    pub y: Scale,
    /// A horizontal dashed reference (the slip floor) and its label.
    pub floor: Option<(f64, String)>,
    /// Legend label of the panels' reference curve.
    pub curve_label: Option<String>,
}

/// One bar: mean and 95 % half-width; `None` when no run held.
pub type Bar = Option<(f64, Option<f64>)>;

/// Grouped bars: one group per controller, one bar per level (rate, actuator).
#[derive(Clone, Debug)]
pub struct BarFigure {
    pub stem: String,
    pub title: String,
    pub subtitle: String,
    pub groups: Vec<String>,
    pub levels: Vec<(String, RGBColor)>,
    /// `[group][level]`.
    pub values: Vec<Vec<Bar>>,
    pub y_label: String,
    pub y: Scale,
    pub floor: Option<(f64, String)>,
}

/// A written image.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Image {
    pub path: PathBuf,
    pub width: u32,
    pub height: u32,
}

enum LegendKey {
    Series(usize),
    Swatch(RGBColor),
    Dashed,
    /// A solid line with small square markers (the plan's limit on the outcome map).
    Line(RGBColor),
}

fn legend_width(label: &str) -> u32 {
    // DejaVu Sans at 13 px averages about 7.4 px per character; the key itself takes 34 px.
    34 + (label.chars().count() as f64 * 7.4).ceil() as u32 + 18
}

fn legend_rows(labels: &[String], width: u32) -> u32 {
    let avail = width.saturating_sub(2 * MARGIN).max(1);
    let mut rows = 1;
    let mut x = 0;
    for l in labels {
        let w = legend_width(l);
        if x > 0 && x + w > avail {
            rows += 1;
            x = 0;
        }
        x += w;
    }
    rows
}

/// The subtitle broken at its " · " separators into lines that fit the figure width.
fn subtitle_lines(subtitle: &str, width: u32) -> Vec<String> {
    // DejaVu Sans at 13 px averages about 7 px per character.
    let fits =
        |s: &str| (s.chars().count() as f64 * 7.0) as u32 <= width.saturating_sub(2 * MARGIN);
    let mut lines: Vec<String> = Vec::new();
    for part in subtitle.split(" · ") {
        match lines.last_mut() {
            Some(last) if fits(&format!("{last} · {part}")) => {
                last.push_str(" · ");
                last.push_str(part);
            }
            _ => lines.push(part.to_string()),
        }
    }
    lines
}

fn legend_top(subtitle: &str, width: u32) -> u32 {
    SUBTITLE_TOP + subtitle_lines(subtitle, width).len() as u32 * SUBTITLE_ROW + 8
}

fn header_height(subtitle: &str, labels: &[String], width: u32) -> u32 {
    legend_top(subtitle, width) + legend_rows(labels, width) * LEGEND_ROW + 8
}

/// Pixel size of a figure laid out as a grid of panels under the header (subtitle and legend).
fn panel_grid_size(
    (rows, cols): (usize, usize),
    subtitle: &str,
    legend: &[(LegendKey, String)],
) -> (u32, u32) {
    let width = (2 * MARGIN + cols as u32 * PANEL_W).max(MIN_WIDTH);
    let labels: Vec<String> = legend.iter().map(|(_, l)| l.clone()).collect();
    let height = header_height(subtitle, &labels, width) + rows as u32 * PANEL_H + MARGIN / 2;
    (width, height)
}

fn font(size: f64) -> TextStyle<'static> {
    FontDesc::new(FontFamily::Name(FAMILY), size, FontStyle::Normal).color(&INK)
}

fn bold(size: f64) -> TextStyle<'static> {
    FontDesc::new(FontFamily::Name(FAMILY), size, FontStyle::Bold).color(&INK)
}

fn err<E: std::fmt::Display>(what: &str) -> impl Fn(E) -> String + '_ {
    move |e| format!("{what}: drawing failed: {e}")
}

/// The paper background, the header, and the area below it where a figure draws its panels.
fn framed_body<DB: DrawingBackend>(
    root: &DrawingArea<DB, Shift>,
    stem: &str,
    title: &str,
    subtitle: &str,
    legend: &[(LegendKey, String)],
    width: u32,
) -> Result<DrawingArea<DB, Shift>, String> {
    root.fill(&PAPER)
        .map_err(err::<DrawingAreaErrorKind<DB::ErrorType>>(stem))?;
    draw_header(root, title, subtitle, legend)?;
    let labels: Vec<String> = legend.iter().map(|(_, l)| l.clone()).collect();
    Ok(root.margin(
        header_height(subtitle, &labels, width),
        MARGIN / 2,
        MARGIN / 2,
        MARGIN / 2,
    ))
}

/// Title, subtitle and legend strip.
fn draw_header<DB: DrawingBackend>(
    root: &DrawingArea<DB, Shift>,
    title: &str,
    subtitle: &str,
    keys: &[(LegendKey, String)],
) -> Result<(), String> {
    let e = err::<DrawingAreaErrorKind<DB::ErrorType>>(title);
    let m = MARGIN as i32;
    root.draw(&Text::new(title.to_string(), (m, 14), bold(19.0)))
        .map_err(&e)?;
    let width = root.dim_in_pixel().0;
    for (i, line) in subtitle_lines(subtitle, width).into_iter().enumerate() {
        root.draw(&Text::new(
            line,
            (m, (SUBTITLE_TOP + i as u32 * SUBTITLE_ROW) as i32),
            font(13.0).color(&MUTED),
        ))
        .map_err(&e)?;
    }
    let avail = width as i32 - 2 * m;
    let (mut x, mut y) = (0i32, legend_top(subtitle, width) as i32);
    for (key, label) in keys {
        let w = legend_width(label) as i32;
        if x > 0 && x + w > avail {
            x = 0;
            y += LEGEND_ROW as i32;
        }
        let (kx, ky) = (m + x, y + 8);
        match key {
            LegendKey::Series(i) => {
                let c = look::series_color(*i);
                root.draw(&PathElement::new(
                    vec![(kx, ky), (kx + 26, ky)],
                    c.stroke_width(2),
                ))
                .map_err(&e)?;
                draw_marker_px(root, look::series_marker(*i), (kx + 13, ky), c).map_err(&e)?;
            }
            LegendKey::Swatch(c) => {
                root.draw(&Rectangle::new(
                    [(kx + 4, ky - 6), (kx + 22, ky + 6)],
                    c.filled(),
                ))
                .map_err(&e)?;
            }
            LegendKey::Line(c) => {
                root.draw(&PathElement::new(
                    vec![(kx, ky), (kx + 26, ky)],
                    c.stroke_width(2),
                ))
                .map_err(&e)?;
                root.draw(&Rectangle::new(
                    [(kx + 10, ky - 3), (kx + 16, ky + 3)],
                    c.filled(),
                ))
                .map_err(&e)?;
            }
            LegendKey::Dashed => {
                root.draw(&DashedPathElement::new(
                    vec![(kx, ky), (kx + 26, ky)],
                    5,
                    3,
                    REFERENCE.stroke_width(2),
                ))
                .map_err(&e)?;
            }
        }
        root.draw(&Text::new(
            label.clone(),
            (kx + 34, ky),
            font(13.0).pos(Pos::new(HPos::Left, VPos::Center)),
        ))
        .map_err(&e)?;
        x += w;
    }
    Ok(())
}

/// The vertices of a marker shape around the origin (px); empty for the ring.
fn marker_shape(marker: Marker) -> Vec<(i32, i32)> {
    match marker {
        Marker::Ring => Vec::new(),
        Marker::Square => vec![(-4, -4), (4, -4), (4, 4), (-4, 4)],
        Marker::Diamond => vec![(0, -6), (6, 0), (0, 6), (-6, 0)],
        Marker::Triangle => vec![(0, -6), (5, 4), (-5, 4)],
        Marker::InvTriangle => vec![(0, 6), (5, -4), (-5, -4)],
    }
}

/// A hollow marker at a pixel position of a plain drawing area.
fn draw_marker_px<DB: DrawingBackend>(
    area: &DrawingArea<DB, Shift>,
    marker: Marker,
    at: (i32, i32),
    color: RGBColor,
) -> Result<(), DrawingAreaErrorKind<DB::ErrorType>> {
    let shape = marker_shape(marker);
    if shape.is_empty() {
        area.draw(&Circle::new(at, 5, FIELD.filled()))?;
        return area.draw(&Circle::new(at, 5, color.stroke_width(2)));
    }
    let pts: Vec<(i32, i32)> = shape.iter().map(|(x, y)| (at.0 + x, at.1 + y)).collect();
    area.draw(&Polygon::new(pts.clone(), FIELD.filled()))?;
    let mut closed = pts.clone();
    closed.push(pts[0]);
    area.draw(&PathElement::new(closed, color.stroke_width(2)))
}

/// A linear axis with our own tick positions and labels (decades on a log axis, the data's
/// μ values, or group names), so plotters' automatic ticks never decide the look.
#[derive(Clone)]
struct Ticked {
    scale: Scale,
    /// Labels by group index (bar charts); empty for numeric axes.
    names: Vec<String>,
}

impl Ranged for Ticked {
    type FormatOption = NoDefaultFormatting;
    type ValueType = f64;

    fn map(&self, v: &f64, limit: (i32, i32)) -> i32 {
        let span = self.scale.hi - self.scale.lo;
        if span <= 0.0 || !v.is_finite() {
            return (limit.0 + limit.1) / 2;
        }
        let t = (v - self.scale.lo) / span;
        limit.0 + ((limit.1 - limit.0) as f64 * t).round() as i32
    }

    fn key_points<H: KeyPointHint>(&self, hint: H) -> Vec<f64> {
        // Guides only at the ticks: no minor lines.
        if hint.weight().allow_light_points() {
            Vec::new()
        } else {
            self.scale.ticks.clone()
        }
    }

    fn range(&self) -> Range<f64> {
        self.scale.lo..self.scale.hi
    }
}

impl ValueFormatter<f64> for Ticked {
    fn format_ext(&self, v: &f64) -> String {
        if self.names.is_empty() {
            self.scale.label(*v)
        } else {
            self.names
                .get(v.floor().max(0.0) as usize)
                .cloned()
                .unwrap_or_default()
        }
    }
}

type Coord = Cartesian2d<Ticked, Ticked>;

/// Sets up one plotting field: tab title, paper and field colours, frame, guides, ticks.
fn field<'a, DB: DrawingBackend>(
    area: &'a DrawingArea<DB, Shift>,
    title: Option<&str>,
    x: &Scale,
    x_names: &[String],
    y: &Scale,
    x_label: &str,
    y_label: &str,
) -> Result<ChartContext<'a, DB, Coord>, String> {
    let e = err::<DrawingAreaErrorKind<DB::ErrorType>>("plot panel");
    let top = if let Some(t) = title {
        let style = bold(13.0).color(&FIELD);
        let (w, _) = area.estimate_text_size(t, &style).map_err(&e)?;
        area.draw(&Rectangle::new(
            [(62, 2), (62 + w as i32 + 16, 24)],
            TAB.filled(),
        ))
        .map_err(&e)?;
        area.draw(&Text::new(
            t.to_string(),
            (70, 13),
            style.pos(Pos::new(HPos::Left, VPos::Center)),
        ))
        .map_err(&e)?;
        28
    } else {
        6
    };
    let mut chart = ChartBuilder::on(area)
        .margin_top(top)
        .margin_right(14)
        .x_label_area_size(44)
        .y_label_area_size(62)
        .build_cartesian_2d(
            Ticked {
                scale: x.clone(),
                names: x_names.to_vec(),
            },
            Ticked {
                scale: y.clone(),
                names: Vec::new(),
            },
        )
        .map_err(&e)?;
    chart.plotting_area().fill(&FIELD).map_err(&e)?;
    chart
        .configure_mesh()
        .disable_x_mesh()
        .bold_line_style(GUIDE.stroke_width(1))
        .light_line_style(TRANSPARENT)
        .axis_style(FRAME.stroke_width(1))
        .set_all_tick_mark_size(4)
        .label_style(font(12.0).color(&MUTED))
        .axis_desc_style(font(13.0))
        .x_desc(x_label)
        .y_desc(y_label)
        .draw()
        .map_err(&e)?;
    // Close the field with a frame on all four sides.
    chart
        .draw_series(std::iter::once(PathElement::new(
            vec![
                (x.lo, y.lo),
                (x.hi, y.lo),
                (x.hi, y.hi),
                (x.lo, y.hi),
                (x.lo, y.lo),
            ],
            FRAME.stroke_width(1),
        )))
        .map_err(&e)?;
    Ok(chart)
}

/// Horizontal dashed reference line with its label at the right end.
fn draw_floor<DB: DrawingBackend>(
    chart: &mut ChartContext<'_, DB, Coord>,
    x: &Scale,
    y: &Scale,
    floor: &Option<(f64, String)>,
) -> Result<(), String> {
    let e = err::<DrawingAreaErrorKind<DB::ErrorType>>("reference line");
    let Some((value, label)) = floor else {
        return Ok(());
    };
    let Some(fy) = y.at(*value) else {
        return Ok(());
    };
    if fy < y.lo || fy > y.hi {
        return Ok(());
    }
    chart
        .draw_series(std::iter::once(DashedPathElement::new(
            vec![(x.lo, fy), (x.hi, fy)],
            6,
            4,
            REFERENCE.stroke_width(1),
        )))
        .map_err(&e)?;
    chart
        .draw_series(std::iter::once(
            EmptyElement::at((x.hi, fy))
                + Text::new(
                    label.clone(),
                    (-4, -3),
                    font(11.0)
                        .color(&REFERENCE)
                        .pos(Pos::new(HPos::Right, VPos::Bottom)),
                ),
        ))
        .map_err(&e)?;
    Ok(())
}

/// Vertical whisker with short caps, in the series colour.
fn draw_whiskers<DB: DrawingBackend>(
    chart: &mut ChartContext<'_, DB, Coord>,
    y: &Scale,
    pts: &[(f64, f64, f64)],
    color: RGBColor,
) -> Result<(), String> {
    let e = err::<DrawingAreaErrorKind<DB::ErrorType>>("interval");
    for &(x, mean, half) in pts {
        let (lo, hi) = (y.clamped(mean - half), y.clamped(mean + half));
        chart
            .draw_series(std::iter::once(PathElement::new(
                vec![(x, lo), (x, hi)],
                color.stroke_width(1),
            )))
            .map_err(&e)?;
        for end in [lo, hi] {
            chart
                .draw_series(std::iter::once(
                    EmptyElement::at((x, end))
                        + PathElement::new(vec![(-4, 0), (4, 0)], color.stroke_width(1)),
                ))
                .map_err(&e)?;
        }
    }
    Ok(())
}

/// Hollow markers at chart positions.
fn draw_markers<DB: DrawingBackend>(
    chart: &mut ChartContext<'_, DB, Coord>,
    pts: &[(f64, f64)],
    marker: Marker,
    color: RGBColor,
) -> Result<(), String> {
    let e = err::<DrawingAreaErrorKind<DB::ErrorType>>("markers");
    let shape = marker_shape(marker);
    if shape.is_empty() {
        chart
            .draw_series(pts.iter().map(|p| {
                EmptyElement::at(*p)
                    + Circle::new((0, 0), 5, FIELD.filled())
                    + Circle::new((0, 0), 5, color.stroke_width(2))
            }))
            .map_err(&e)?;
    } else {
        let mut closed = shape.clone();
        closed.push(shape[0]);
        chart
            .draw_series(pts.iter().map(|p| {
                EmptyElement::at(*p)
                    + Polygon::new(shape.clone(), FIELD.filled())
                    + PathElement::new(closed.clone(), color.stroke_width(2))
            }))
            .map_err(&e)?;
    }
    Ok(())
}

impl LineFigure {
    fn grid(&self) -> (usize, usize) {
        let n = self.panels.len().max(1);
        let cols = n.min(MAX_COLS);
        (n.div_ceil(cols), cols)
    }

    fn legend(&self) -> Vec<(LegendKey, String)> {
        let mut keys: Vec<(LegendKey, String)> = self
            .series_names
            .iter()
            .enumerate()
            .map(|(i, n)| (LegendKey::Series(i), n.clone()))
            .collect();
        if let Some(label) = &self.curve_label {
            keys.push((LegendKey::Dashed, label.clone()));
        } else if let Some((_, label)) = &self.floor {
            keys.push((LegendKey::Dashed, label.clone()));
        }
        keys
    }

    /// Pixel size of the figure (the same for the SVG and the PNG).
    pub fn size(&self) -> (u32, u32) {
        panel_grid_size(self.grid(), &self.subtitle, &self.legend())
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), String> {
        let e = err::<DrawingAreaErrorKind<DB::ErrorType>>(&self.stem);
        let body = framed_body(
            root,
            &self.stem,
            &self.title,
            &self.subtitle,
            &self.legend(),
            self.size().0,
        )?;
        let (rows, cols) = self.grid();
        let cells = body.split_evenly((rows, cols));
        let n = self.series_names.len();
        // Spread controllers a little along x so markers and whiskers at one μ do not hide
        // each other; 1 % of the axis per controller keeps them visibly at the same μ.
        let dodge = |i: usize| (i as f64 - (n as f64 - 1.0) / 2.0) * 0.01 * (self.x.hi - self.x.lo);
        for (panel, area) in self.panels.iter().zip(cells.iter()) {
            let mut chart = field(
                area,
                Some(&panel.title),
                &self.x,
                &[],
                &self.y,
                &self.x_label,
                &self.y_label,
            )?;
            draw_floor(&mut chart, &self.x, &self.y, &self.floor)?;
            let curve: Vec<(f64, f64)> = panel
                .curve
                .iter()
                .filter_map(|(x, v)| self.y.at(*v).map(|y| (*x, y.clamp(self.y.lo, self.y.hi))))
                .collect();
            if curve.len() >= 2 {
                chart
                    .draw_series(std::iter::once(DashedPathElement::new(
                        curve,
                        7,
                        4,
                        REFERENCE.stroke_width(2),
                    )))
                    .map_err(&e)?;
            }
            let mut any = false;
            for (i, pts) in panel.series.iter().enumerate() {
                let color = look::series_color(i);
                // Points a log axis cannot show (≤ 0) are dropped and break the line.
                let mut kept: Vec<Pt> = Vec::new();
                let mut dropped = false;
                for p in pts {
                    if self.y.at(p.y).is_some() {
                        kept.push(Pt {
                            gap_before: p.gap_before || dropped,
                            ..*p
                        });
                        dropped = false;
                    } else {
                        dropped = true;
                    }
                }
                let pts = &kept;
                let placed: Vec<(f64, f64, Option<f64>, f64)> = pts
                    .iter()
                    .filter_map(|p| self.y.at(p.y).map(|y| (p.x + dodge(i), y, p.half, p.y)))
                    .collect();
                any |= !placed.is_empty();
                let whiskers: Vec<(f64, f64, f64)> = placed
                    .iter()
                    .filter_map(|(x, _, h, raw)| h.map(|h| (*x, *raw, h)))
                    .collect();
                draw_whiskers(&mut chart, &self.y, &whiskers, color)?;
                // A line only joins two or more neighbouring values; a lone value is a point.
                let mut runs: Vec<Vec<(f64, f64)>> = Vec::new();
                for (p, (x, y, _, _)) in pts.iter().zip(&placed) {
                    match runs.last_mut() {
                        Some(run) if !p.gap_before => run.push((*x, *y)),
                        _ => runs.push(vec![(*x, *y)]),
                    }
                }
                for run in runs.into_iter().filter(|r| r.len() >= 2) {
                    chart
                        .draw_series(std::iter::once(PathElement::new(
                            run,
                            color.stroke_width(2),
                        )))
                        .map_err(&e)?;
                }
                let marks: Vec<(f64, f64)> = placed.iter().map(|(x, y, _, _)| (*x, *y)).collect();
                draw_markers(&mut chart, &marks, look::series_marker(i), color)?;
            }
            if !any {
                let mid = ((self.x.lo + self.x.hi) / 2.0, (self.y.lo + self.y.hi) / 2.0);
                chart
                    .draw_series(std::iter::once(Text::new(
                        "no run held here".to_string(),
                        mid,
                        font(13.0)
                            .color(&MUTED)
                            .pos(Pos::new(HPos::Center, VPos::Center)),
                    )))
                    .map_err(&e)?;
            }
        }
        root.present().map_err(&e)
    }
}

impl BarFigure {
    fn legend(&self) -> Vec<(LegendKey, String)> {
        let mut keys: Vec<(LegendKey, String)> = self
            .levels
            .iter()
            .map(|(l, c)| (LegendKey::Swatch(*c), l.clone()))
            .collect();
        if let Some((_, label)) = &self.floor {
            keys.push((LegendKey::Dashed, label.clone()));
        }
        keys
    }

    /// Pixel size of the figure (the same for the SVG and the PNG).
    pub fn size(&self) -> (u32, u32) {
        let per_group = 36 + 30 * self.levels.len() as u32;
        let width = (2 * MARGIN + 80 + self.groups.len() as u32 * per_group).max(MIN_WIDTH);
        let labels: Vec<String> = self.legend().into_iter().map(|(_, l)| l).collect();
        (
            width,
            header_height(&self.subtitle, &labels, width) + BAR_H + MARGIN / 2,
        )
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), String> {
        let e = err::<DrawingAreaErrorKind<DB::ErrorType>>(&self.stem);
        let body = framed_body(
            root,
            &self.stem,
            &self.title,
            &self.subtitle,
            &self.legend(),
            self.size().0,
        )?;
        let n = self.groups.len().max(1);
        let x = Scale {
            lo: 0.0,
            hi: n as f64,
            ticks: (0..n).map(|i| i as f64 + 0.5).collect(),
            log: false,
        };
        let mut chart = field(
            &body,
            None,
            &x,
            &self.groups,
            &self.y,
            "controller",
            &self.y_label,
        )?;
        let k = self.levels.len().max(1) as f64;
        // Bars fill 80 % of a group, with a sliver of field between neighbours.
        let slot = 0.8 / k;
        for (g, row) in self.values.iter().enumerate() {
            for (l, v) in row.iter().enumerate() {
                let x0 = g as f64 + 0.1 + l as f64 * slot;
                let (x1, xc) = (x0 + slot * 0.86, x0 + slot * 0.43);
                let color = self.levels.get(l).map(|c| c.1).unwrap_or(INK);
                match v.and_then(|(m, h)| self.y.at(m).map(|y| (y, m, h))) {
                    Some((top, mean, half)) => {
                        chart
                            .draw_series(std::iter::once(Rectangle::new(
                                [(x0, self.y.lo), (x1, top.min(self.y.hi))],
                                color.filled(),
                            )))
                            .map_err(&e)?;
                        if let Some(h) = half {
                            draw_whiskers(&mut chart, &self.y, &[(xc, mean, h)], INK)?;
                        }
                    }
                    None => {
                        // No run that held: a cross on the baseline instead of a bar.
                        chart
                            .draw_series(std::iter::once(Cross::new(
                                (xc, self.y.lo),
                                5,
                                REFERENCE.stroke_width(2),
                            )))
                            .map_err(&e)?;
                    }
                }
            }
        }
        draw_floor(&mut chart, &x, &self.y, &self.floor)?;
        root.present().map_err(&e)
    }
}

/// One condition of an outcome map: where it sits and how many of its runs ended in each
/// outcome class (in the figure's class order).
#[derive(Clone, Debug)]
pub struct MapTile {
    pub x: f64,
    pub y: f64,
    pub counts: Vec<usize>,
}

/// One facet of an outcome map (one law).
#[derive(Clone, Debug)]
pub struct MapPanel {
    pub title: String,
    pub tiles: Vec<MapTile>,
}

/// Outcome classes over two axes (slope × μ), one facet per law: each condition a tile split
/// bottom to top into its runs' classes, with a dashed reference curve (the friction angle)
/// and a solid limit line (the plan's μ_required per slope).
#[derive(Clone, Debug)]
pub struct MapFigure {
    pub stem: String,
    pub title: String,
    pub subtitle: String,
    /// Class labels and colours, bottom to top in every tile.
    pub classes: Vec<(String, RGBColor)>,
    pub panels: Vec<MapPanel>,
    pub x_label: String,
    pub y_label: String,
    pub x: Scale,
    pub y: Scale,
    /// Tile size in axis units.
    pub tile: (f64, f64),
    /// Dashed reference curve and its legend label.
    pub curve: Vec<(f64, f64)>,
    pub curve_label: String,
    /// Solid limit line (points off the axis are clipped) and its legend label; empty when
    /// the run has no limit.
    pub limit: Vec<(f64, f64)>,
    pub limit_label: String,
}

impl MapFigure {
    fn grid(&self) -> (usize, usize) {
        let n = self.panels.len().max(1);
        let cols = n.min(MAX_COLS);
        (n.div_ceil(cols), cols)
    }

    fn legend(&self) -> Vec<(LegendKey, String)> {
        let mut keys: Vec<(LegendKey, String)> = self
            .classes
            .iter()
            .map(|(l, c)| (LegendKey::Swatch(*c), l.clone()))
            .collect();
        keys.push((LegendKey::Dashed, self.curve_label.clone()));
        if !self.limit.is_empty() {
            keys.push((LegendKey::Line(TAB), self.limit_label.clone()));
        }
        keys
    }

    /// Pixel size of the figure (the same for the SVG and the PNG).
    pub fn size(&self) -> (u32, u32) {
        panel_grid_size(self.grid(), &self.subtitle, &self.legend())
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), String> {
        let e = err::<DrawingAreaErrorKind<DB::ErrorType>>(&self.stem);
        let body = framed_body(
            root,
            &self.stem,
            &self.title,
            &self.subtitle,
            &self.legend(),
            self.size().0,
        )?;
        let (rows, cols) = self.grid();
        let cells = body.split_evenly((rows, cols));
        let (w, h) = (self.tile.0 / 2.0, self.tile.1 / 2.0);
        let inside = |(x, y): (f64, f64)| {
            x >= self.x.lo && x <= self.x.hi && y >= self.y.lo && y <= self.y.hi
        };
        for (panel, area) in self.panels.iter().zip(cells.iter()) {
            let mut chart = field(
                area,
                Some(&panel.title),
                &self.x,
                &[],
                &self.y,
                &self.x_label,
                &self.y_label,
            )?;
            for tile in &panel.tiles {
                let total: usize = tile.counts.iter().sum();
                if total == 0 {
                    continue;
                }
                let mut bottom = tile.y - h;
                for (k, &n) in tile.counts.iter().enumerate() {
                    if n == 0 {
                        continue;
                    }
                    let top = bottom + 2.0 * h * n as f64 / total as f64;
                    let color = self.classes.get(k).map(|c| c.1).unwrap_or(MUTED);
                    chart
                        .draw_series(std::iter::once(Rectangle::new(
                            [(tile.x - w, bottom), (tile.x + w, top)],
                            color.filled(),
                        )))
                        .map_err(&e)?;
                    bottom = top;
                }
                chart
                    .draw_series(std::iter::once(Rectangle::new(
                        [(tile.x - w, tile.y - h), (tile.x + w, tile.y + h)],
                        FRAME.stroke_width(1),
                    )))
                    .map_err(&e)?;
            }
            // The curves broken where they leave the field.
            let mut runs: Vec<Vec<(f64, f64)>> = vec![Vec::new()];
            for p in &self.curve {
                if inside(*p) {
                    runs.last_mut().expect("one run").push(*p);
                } else if !runs.last().expect("one run").is_empty() {
                    runs.push(Vec::new());
                }
            }
            for run in runs.into_iter().filter(|r| r.len() >= 2) {
                chart
                    .draw_series(std::iter::once(DashedPathElement::new(
                        run,
                        7,
                        4,
                        REFERENCE.stroke_width(2),
                    )))
                    .map_err(&e)?;
            }
            let limit: Vec<(f64, f64)> =
                self.limit.iter().copied().filter(|p| inside(*p)).collect();
            if limit.len() >= 2 {
                chart
                    .draw_series(std::iter::once(PathElement::new(
                        limit.clone(),
                        TAB.stroke_width(2),
                    )))
                    .map_err(&e)?;
            }
            chart
                .draw_series(limit.iter().map(|p| {
                    EmptyElement::at(*p) + Rectangle::new([(-3, -3), (3, 3)], TAB.filled())
                }))
                .map_err(&e)?;
        }
        root.present().map_err(&e)
    }
}

/// A figure that can be drawn on any backend.
pub enum Figure {
    Lines(LineFigure),
    Bars(BarFigure),
    Map(MapFigure),
}

impl Figure {
    pub fn stem(&self) -> &str {
        match self {
            Figure::Lines(f) => &f.stem,
            Figure::Bars(f) => &f.stem,
            Figure::Map(f) => &f.stem,
        }
    }

    pub fn size(&self) -> (u32, u32) {
        match self {
            Figure::Lines(f) => f.size(),
            Figure::Bars(f) => f.size(),
            Figure::Map(f) => f.size(),
        }
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), String> {
        match self {
            Figure::Lines(f) => f.draw(root),
            Figure::Bars(f) => f.draw(root),
            Figure::Map(f) => f.draw(root),
        }
    }

    /// Writes `<dir>/<stem>.svg` and `<dir>/<stem>.png`.
    pub fn render(&self, dir: &Path) -> Result<Vec<Image>, String> {
        look::ensure_font()?;
        let (width, height) = self.size();
        let svg = dir.join(format!("{}.svg", self.stem()));
        let png = dir.join(format!("{}.png", self.stem()));
        {
            let root = SVGBackend::new(&svg, (width, height)).into_drawing_area();
            self.draw(&root)
                .map_err(|m| format!("{}: {m}", svg.display()))?;
        }
        {
            let root = BitMapBackend::new(&png, (width, height)).into_drawing_area();
            self.draw(&root)
                .map_err(|m| format!("{}: {m}", png.display()))?;
        }
        Ok(vec![
            Image {
                path: svg,
                width,
                height,
            },
            Image {
                path: png,
                width,
                height,
            },
        ])
    }

    /// Draws the figure into an RGB buffer (for checks that need the pixels).
    #[cfg(test)]
    pub fn raster(&self) -> Result<(u32, u32, Vec<u8>), String> {
        look::ensure_font()?;
        let (width, height) = self.size();
        let mut buf = vec![0u8; width as usize * height as usize * 3];
        {
            let root = BitMapBackend::with_buffer(&mut buf, (width, height)).into_drawing_area();
            self.draw(&root)?;
        }
        Ok((width, height, buf))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn report_scales() {
        // Three decades → log axis with decade ticks.
        let s = Scale::for_values(&[0.05, 2.0, 80.0], &[]);
        assert!(s.log);
        assert_eq!(s.ticks, vec![-2.0, -1.0, 0.0, 1.0, 2.0]);
        assert_eq!(s.label(-2.0), "0.01");
        assert_eq!(s.label(2.0), "100");
        // Within two decades → linear from zero, top above the largest value.
        let s = Scale::for_values(&[0.5, 3.0, 40.0], &[45.0]);
        assert!(!s.log);
        assert_eq!(s.lo, 0.0);
        assert!(s.hi >= 45.0);
        assert_eq!(s.ticks.first(), Some(&0.0));
        // Nothing to show, or all zero: a unit axis, not a crash.
        let s = Scale::for_values(&[], &[]);
        assert_eq!((s.lo, s.hi), (0.0, 1.0));
        let s = Scale::for_values(&[0.0, 0.0], &[]);
        assert_eq!((s.lo, s.hi), (0.0, 1.0));
        // One μ value: a window around it, the value as the only tick.
        let s = Scale::for_positions(&[0.6]);
        assert!(s.lo < 0.6 && s.hi > 0.6);
        assert_eq!(s.ticks, vec![0.6]);
        assert_eq!(s.label(0.6), "0.6");
        assert_eq!(nice_step(0.23), 0.25);
        assert_eq!(tick_label(0.25, 0.25), "0.25");
        assert_eq!(tick_label(2.0, 0.5), "2.0");
    }

    /// The PNG text comes from the embedded font: a figure whose only ink is its text must
    /// still put dark pixels where the title is.
    #[test]
    fn report_png_text_uses_embedded_font() {
        let fig = Figure::Lines(LineFigure {
            stem: "t".into(),
            title: "Mean slip".into(),
            subtitle: String::new(),
            series_names: vec![],
            panels: vec![],
            x_label: "μ".into(),
            y_label: "mm".into(),
            x: Scale::for_positions(&[]),
            y: Scale::for_values(&[], &[]),
            floor: None,
            curve_label: None,
        });
        let (w, _, buf) = fig.raster().unwrap_or_else(|e| panic!("{e}"));
        // Title band: rows 14..34, columns 24..200.
        let dark = (14..34)
            .flat_map(|y| (24..200).map(move |x| (y, x)))
            .filter(|(y, x)| {
                let i = (y * w as usize + x) * 3;
                buf[i] < 100 && buf[i + 1] < 100 && buf[i + 2] < 100
            })
            .count();
        assert!(dark > 60, "title drew {dark} dark pixels");
    }
}
