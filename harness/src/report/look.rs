//! The report's visual style, kept in one place so every plot looks the same: warm paper
//! background, white plotting fields framed in taupe, horizontal guide lines only, hollow
//! ring markers, facet titles as a small ink tab, and a legend strip under the title.
//!
//! Fonts: PNGs are rasterised with ab_glyph from DejaVu Sans, whose bytes the `dejavu` crate
//! embeds in the binary (DejaVu fonts licence: Bitstream Vera terms plus public-domain
//! changes, which allow embedding and redistribution). No system font is looked up, so a fresh
//! CI machine draws the same PNGs. SVGs carry the same family name with a generic fallback.

use std::sync::OnceLock;

use plotters::style::{FontStyle, RGBColor};

/// Font family: registered for ab_glyph under this exact string, and written verbatim into
/// the SVG `font-family` attribute, where it reads as a CSS font list.
pub const FAMILY: &str = "DejaVu Sans, Verdana, sans-serif";

/// Figure background (warm paper).
pub const PAPER: RGBColor = RGBColor(0xF6, 0xF3, 0xEC);
/// Plotting field.
pub const FIELD: RGBColor = RGBColor(0xFF, 0xFE, 0xFA);
/// Field frame and axis lines.
pub const FRAME: RGBColor = RGBColor(0xB5, 0xAB, 0x98);
/// Horizontal guide lines.
pub const GUIDE: RGBColor = RGBColor(0xEA, 0xE4, 0xD7);
/// Titles and axis descriptions.
pub const INK: RGBColor = RGBColor(0x24, 0x2A, 0x31);
/// Tick labels, subtitles, notes.
pub const MUTED: RGBColor = RGBColor(0x6F, 0x68, 0x5B);
/// Reference lines (slip floor, physical limit).
pub const REFERENCE: RGBColor = RGBColor(0x8C, 0x7F, 0x68);
/// The tab behind facet titles.
pub const TAB: RGBColor = RGBColor(0x2F, 0x4B, 0x5C);

/// One colour per controller, chosen to stay apart in hue and lightness on the paper
/// background: slate, terracotta, moss, plum, ochre, sea, raspberry, graphite.
pub const SERIES: [RGBColor; 8] = [
    RGBColor(0x1D, 0x5C, 0x7E),
    RGBColor(0xC4, 0x57, 0x3A),
    RGBColor(0x5A, 0x8A, 0x3C),
    RGBColor(0x86, 0x5A, 0x9E),
    RGBColor(0xD9, 0xA0, 0x2B),
    RGBColor(0x2E, 0x9C, 0x8F),
    RGBColor(0xB0, 0x3F, 0x6A),
    RGBColor(0x4A, 0x4A, 0x4A),
];

/// Colours for the levels of a categorical axis drawn as bars (actuator models): apart from
/// the controller colours, since in the bar charts controllers are the groups, not colours.
pub const LEVELS: [RGBColor; 6] = [
    RGBColor(0xC9, 0xA8, 0x6A),
    RGBColor(0x4F, 0x86, 0x84),
    RGBColor(0x9A, 0x48, 0x3B),
    RGBColor(0x3A, 0x4E, 0x6B),
    RGBColor(0x8C, 0x90, 0x3E),
    RGBColor(0x9A, 0x76, 0x98),
];

/// Outcome classes on the outcome map, in its order: held and controlled (moss), did not
/// control (ochre), beyond the plan's limit (dusty plum), fell or diverged (terracotta), could
/// not be set up (stone).
pub const OUTCOMES: [RGBColor; 5] = [
    RGBColor(0x5A, 0x8A, 0x3C),
    RGBColor(0xD9, 0xA0, 0x2B),
    RGBColor(0x9A, 0x76, 0x98),
    RGBColor(0xC4, 0x57, 0x3A),
    RGBColor(0xA8, 0xA2, 0x96),
];

/// Ordered shades (light → dark) for an ordered axis such as control rate.
pub fn ramp(i: usize, n: usize) -> RGBColor {
    let light = (0xB9, 0xD8, 0xD3);
    let dark = (0x12, 0x43, 0x52);
    let t = if n <= 1 {
        1.0
    } else {
        i as f64 / (n - 1) as f64
    };
    let mix = |a: u8, b: u8| (a as f64 + (b as f64 - a as f64) * t).round() as u8;
    RGBColor(
        mix(light.0, dark.0),
        mix(light.1, dark.1),
        mix(light.2, dark.2),
    )
}

/// Marker shapes, cycled per controller so lines stay apart without colour.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Marker {
    Ring,
    Square,
    Diamond,
    Triangle,
    InvTriangle,
}

pub const MARKERS: [Marker; 5] = [
    Marker::Ring,
    Marker::Square,
    Marker::Diamond,
    Marker::Triangle,
    Marker::InvTriangle,
];

pub fn series_color(i: usize) -> RGBColor {
    SERIES[i % SERIES.len()]
}

pub fn series_marker(i: usize) -> Marker {
    MARKERS[i % MARKERS.len()]
}

/// Registers the embedded font with plotters once per process; every drawing call goes
/// through here first, since text drawing fails without a registered font.
pub fn ensure_font() -> Result<(), String> {
    static DONE: OnceLock<Result<(), String>> = OnceLock::new();
    DONE.get_or_init(|| {
        plotters::style::register_font(FAMILY, FontStyle::Normal, dejavu::sans::regular())
            .map_err(|_| "embedded DejaVu Sans regular is not a valid font".to_string())?;
        plotters::style::register_font(FAMILY, FontStyle::Bold, dejavu::sans::bold())
            .map_err(|_| "embedded DejaVu Sans bold is not a valid font".to_string())?;
        Ok(())
    })
    .clone()
}
