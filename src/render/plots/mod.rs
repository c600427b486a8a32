//! Plots of a run, drawn with plotters into SVG strings in memory (and PNG bytes on request): the
//! plate overview (miniatures, or a rate heat map for 1536 wells), one larger plot per well, and
//! per group the rate against [S] with its fitted curve and 95% band, the residuals, and the
//! double-reciprocal diagnostic; per inhibitor group the rate at each [I] with the global fit, and
//! per progress-curve group the observed curves with the fitted ones, each with its residuals.
//!
//! Text needs no system library: the DejaVu Sans font compiled in by the `dejavu` crate is
//! registered once with plotters' ab_glyph text renderer ([`register_fonts`]).
//!
//! Colours are the Okabe-Ito palette, chosen to stay distinguishable for the common forms of
//! colour blindness, and a flag is never shown by colour alone (a hatch pattern, a frame and its
//! word or, on crowded plates, its word in the hover text go with it). References: Okabe M and Ito K (2008), Color Universal Design (CUD): how to make
//! figures and presentations that are friendly to colorblind people, https://jfly.uni-koeln.de/color/;
//! Wong B (2011), Points of view: color blindness, Nature Methods 8:441.

mod calibration;
mod groups;
mod inhibition;
mod progress;
mod wells;

use std::sync::OnceLock;

use plotters::coord::types::RangedCoordf64;
use plotters::coord::Shift;
use plotters::prelude::*;
use plotters::style::FontStyle;

pub use calibration::{CalibrationPlot, CalibrationPlotKind};
pub use groups::{group_plots, mean_band, GroupPlot, GroupPlotKind, GroupPoint, GroupView};
pub(crate) use inhibition::draw_markers;
pub use inhibition::{
    inhibition_plots, level_style, model_parameters, InhibitionPlot, InhibitionPlotKind, InhibitionPoint,
    InhibitionView, MarkerShape, LEVEL_COLOURS, LEVEL_SHAPES,
};
pub use progress::{progress_plots, ProgressPlot, ProgressPlotKind, ProgressView};
pub use wells::{
    plate_view, viridis, Overview, OverviewGeometry, PlateView, WellDetail, WellState, WellView, ALL_FLAGS,
    DETAIL_ALL_WELLS_UP_TO,
};

/// Why a plot could not be drawn (a drawing-library failure; not reachable from user input).
#[derive(Debug, thiserror::Error)]
pub enum PlotError {
    /// The compiled-in font was refused by the text renderer.
    #[error("the compiled-in DejaVu font could not be registered")]
    Font,
    /// The drawing backend failed.
    #[error("drawing the plot '{plot}' failed: {message}")]
    Draw {
        /// The plot's file stem.
        plot: String,
        /// The backend's reason.
        message: String,
    },
    /// The PNG encoder failed.
    #[error("encoding the plot '{plot}' as PNG failed: {message}")]
    Png {
        /// The plot's file stem.
        plot: String,
        /// The encoder's reason.
        message: String,
    },
}

/// The Okabe-Ito palette (Okabe and Ito 2008), as RGB.
pub mod palette {
    use plotters::style::RGBColor;

    /// Black.
    pub const BLACK: RGBColor = RGBColor(0x00, 0x00, 0x00);
    /// Orange.
    pub const ORANGE: RGBColor = RGBColor(0xE6, 0x9F, 0x00);
    /// Sky blue.
    pub const SKY_BLUE: RGBColor = RGBColor(0x56, 0xB4, 0xE9);
    /// Bluish green.
    pub const BLUISH_GREEN: RGBColor = RGBColor(0x00, 0x9E, 0x73);
    /// Yellow.
    pub const YELLOW: RGBColor = RGBColor(0xF0, 0xE4, 0x42);
    /// Blue.
    pub const BLUE: RGBColor = RGBColor(0x00, 0x72, 0xB2);
    /// Vermillion.
    pub const VERMILLION: RGBColor = RGBColor(0xD5, 0x5E, 0x00);
    /// Reddish purple.
    pub const REDDISH_PURPLE: RGBColor = RGBColor(0xCC, 0x79, 0xA7);
    /// Neutral grey for empty wells and wells without data (not part of the palette).
    pub const EMPTY_GREY: RGBColor = RGBColor(0xD9, 0xD9, 0xD9);
    /// Light grey for frames.
    pub const FRAME_GREY: RGBColor = RGBColor(0x99, 0x99, 0x99);
}

/// The font family every plot uses (plotters' name for the sans-serif family).
pub const FONT_FAMILY: &str = "sans-serif";

/// Registers the compiled-in DejaVu Sans font with plotters, once per process.
pub fn register_fonts() -> Result<(), PlotError> {
    static REGISTERED: OnceLock<bool> = OnceLock::new();
    let ok = REGISTERED.get_or_init(|| {
        plotters::style::register_font(FONT_FAMILY, FontStyle::Normal, dejavu::sans::regular()).is_ok()
            && plotters::style::register_font(FONT_FAMILY, FontStyle::Bold, dejavu::sans::bold()).is_ok()
    });
    if *ok {
        Ok(())
    } else {
        Err(PlotError::Font)
    }
}

/// One drawn plot: SVG text, with the means to draw it again as PNG.
#[derive(Debug, Clone)]
pub struct Plot {
    /// File stem, unique within a run (`overview`, `well-B3`, `group-1-rate`).
    pub name: String,
    /// What the plot shows, for captions and alt text.
    pub title: String,
    /// Width in pixels.
    pub width: u32,
    /// Height in pixels.
    pub height: u32,
    /// The SVG document.
    pub svg: String,
}

/// Something that can draw itself on any plotters backend.
pub trait Drawing {
    /// File stem of the plot.
    fn name(&self) -> String;
    /// Title, for captions.
    fn title(&self) -> String;
    /// Size in pixels.
    fn size(&self) -> (u32, u32);
    /// Draws on `root` (already the plot's full size).
    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), String>;
}

/// Draws to an SVG string.
pub fn render_svg<D: Drawing>(drawing: &D) -> Result<Plot, PlotError> {
    register_fonts()?;
    let (width, height) = drawing.size();
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (width, height)).into_drawing_area();
        drawing.draw(&root).map_err(|message| PlotError::Draw {
            plot: drawing.name(),
            message,
        })?;
        root.present().map_err(|error| PlotError::Draw {
            plot: drawing.name(),
            message: error.to_string(),
        })?;
    }
    Ok(Plot {
        name: drawing.name(),
        title: drawing.title(),
        width,
        height,
        svg,
    })
}

/// Draws to PNG bytes (RGB, 8 bits per channel).
pub fn render_png<D: Drawing>(drawing: &D) -> Result<Vec<u8>, PlotError> {
    register_fonts()?;
    let (width, height) = drawing.size();
    let draw_error = |message: String| PlotError::Draw {
        plot: drawing.name(),
        message,
    };
    let mut pixels = vec![0u8; width as usize * height as usize * 3];
    {
        let backend = BitMapBackend::<plotters::backend::RGBPixel>::with_buffer_and_format(
            &mut pixels,
            (width, height),
        )
        .map_err(|error| draw_error(error.to_string()))?;
        let root = backend.into_drawing_area();
        drawing.draw(&root).map_err(draw_error)?;
        root.present().map_err(|error| draw_error(error.to_string()))?;
    }
    let png_error = |message: String| PlotError::Png {
        plot: drawing.name(),
        message,
    };
    let mut bytes = Vec::new();
    {
        let mut encoder = png::Encoder::new(&mut bytes, width, height);
        encoder.set_color(png::ColorType::Rgb);
        encoder.set_depth(png::BitDepth::Eight);
        let mut writer = encoder.write_header().map_err(|e| png_error(e.to_string()))?;
        writer
            .write_image_data(&pixels)
            .map_err(|e| png_error(e.to_string()))?;
        writer.finish().map_err(|e| png_error(e.to_string()))?;
    }
    Ok(bytes)
}

/// Turns any displayable drawing error into the plain message [`Drawing::draw`] returns.
pub(crate) fn drawn<T, E: std::fmt::Display>(result: Result<T, E>) -> Result<T, String> {
    result.map_err(|error| error.to_string())
}

/// A chart over plain f64 axes with the caption, margin, label areas and axes every group-level
/// plot uses (one place, so the plots keep one look): the title in `title_colour`, the axes
/// described by `(x_desc, y_desc)`, tick labels in [`text_px`] sizes without trailing zeros, no
/// light grid lines.
pub(crate) fn titled_chart<'a, DB: DrawingBackend>(
    root: &'a DrawingArea<DB, Shift>,
    title: String,
    title_colour: RGBColor,
    (x_range, y_range): ((f64, f64), (f64, f64)),
    (x_desc, y_desc): (String, String),
) -> Result<ChartContext<'a, DB, Cartesian2d<RangedCoordf64, RangedCoordf64>>, String> {
    let mut chart = drawn(
        ChartBuilder::on(root)
            .caption(title, text_style(text_px::TITLE, title_colour))
            .margin(10)
            .x_label_area_size(48)
            .y_label_area_size(80)
            .build_cartesian_2d(x_range.0..x_range.1, y_range.0..y_range.1),
    )?;
    drawn(
        chart
            .configure_mesh()
            .x_desc(x_desc)
            .y_desc(y_desc)
            .label_style(text_style(text_px::TICK, palette::BLACK))
            .axis_desc_style(text_style(text_px::AXIS, palette::BLACK))
            .x_label_formatter(&tick_label)
            .y_label_formatter(&tick_label)
            .max_light_lines(0)
            .draw(),
    )?;
    Ok(chart)
}

/// plotters' SVG backend writes a font size of the size asked divided by 1.24 (its bitmap backend
/// draws the same), so sizes are asked here in the pixels wanted on the page and scaled up.
const PLOTTERS_FONT_SCALE: f64 = 1.24;

/// The smallest text any plot carries, in pixels at the page's natural width (issue 14: 11 px).
pub const MIN_TEXT_PX: f64 = 11.0;

/// The plots' text sizes in pixels on the page, one set for every plot so they look alike.
pub mod text_px {
    /// Tick labels and legends.
    pub const TICK: f64 = 12.0;
    /// Axis descriptions.
    pub const AXIS: f64 = 13.0;
    /// Titles.
    pub const TITLE: f64 = 15.0;
}

/// The font of the plots at `px` pixels on the page (never below [`MIN_TEXT_PX`]).
pub(crate) fn font_px(px: f64, style: FontStyle) -> FontDesc<'static> {
    (FONT_FAMILY, px.max(MIN_TEXT_PX) * PLOTTERS_FONT_SCALE, style).into_font()
}

/// A text style in the plots' font, `px` pixels high on the page (never below [`MIN_TEXT_PX`]).
pub(crate) fn text_style(px: f64, colour: RGBColor) -> TextStyle<'static> {
    styled_font(font_px(px, FontStyle::Normal), colour)
}

/// A tick label: the value to four significant digits without trailing zeros (`0.002`, `100`,
/// `1.5e-5`), never `100.0`.
pub(crate) fn tick_label(value: &f64) -> String {
    crate::render::display::tick(*value)
}

/// A text style from a font and a colour (plotters' `color` ties the style to the colour's borrow).
pub(crate) fn styled_font(font: FontDesc<'static>, colour: RGBColor) -> TextStyle<'static> {
    TextStyle {
        font,
        color: colour.to_backend_color(),
        pos: plotters::style::text_anchor::Pos::default(),
    }
}

/// Axis range with a small margin around finite values; a flat or empty set gets a unit span.
pub(crate) fn padded_range(values: impl IntoIterator<Item = f64>, include_zero: bool) -> (f64, f64) {
    let mut low = f64::INFINITY;
    let mut high = f64::NEG_INFINITY;
    for value in values.into_iter().filter(|v| v.is_finite()) {
        low = low.min(value);
        high = high.max(value);
    }
    if include_zero {
        low = low.min(0.0);
        high = high.max(0.0);
    }
    if !low.is_finite() || !high.is_finite() {
        return (0.0, 1.0);
    }
    let span = high - low;
    if span <= f64::EPSILON * high.abs().max(1.0) {
        let half = if high == 0.0 { 1.0 } else { high.abs() * 0.1 };
        return (low - half, high + half);
    }
    (low - 0.05 * span, high + 0.05 * span)
}

/// At most `max` of `points`, evenly spaced by index and always keeping the first and the last:
/// what a plot draws of a long trace. A figure a few hundred pixels wide cannot show more points
/// than it has pixels, and drawing every read of a 2000-read export made a 1536-well report
/// 425 MB; the numbers themselves stay in the CSV and JSON tables.
pub(crate) fn thinned<T: Copy>(points: &[T], max: usize) -> Vec<T> {
    crate::core::stats::evenly_spaced_indices(points.len(), max)
        .into_iter()
        .map(|i| points[i])
        .collect()
}

/// Of a plot's `total` budget of points shared by `series` series, each series' share (never
/// below `floor`).
pub(crate) fn share_of(total: usize, series: usize, floor: usize) -> usize {
    (total / series.max(1)).max(floor)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn thinned_keeps_short_traces_whole_and_long_ones_evenly_with_both_ends() {
        let short: Vec<usize> = (0..49).collect();
        assert_eq!(thinned(&short, 120), short);
        let long: Vec<usize> = (0..2000).collect();
        let kept = thinned(&long, 100);
        assert_eq!(kept.len(), 100);
        assert_eq!((kept[0], kept[99]), (0, 1999));
        let gaps: Vec<usize> = kept.windows(2).map(|w| w[1] - w[0]).collect();
        assert!(gaps.iter().all(|g| (20..=21).contains(g)), "{gaps:?}");
        assert_eq!(share_of(6000, 736, 8), 8);
        assert_eq!(share_of(6000, 24, 8), 250);
    }

    #[test]
    fn padded_range_widens_flat_and_empty_sets() {
        assert_eq!(padded_range(Vec::<f64>::new(), false), (0.0, 1.0));
        let (low, high) = padded_range([2.0, 2.0], false);
        assert!(low < 2.0 && high > 2.0);
        let (low, high) = padded_range([1.0, 3.0, f64::NAN], true);
        assert!(low < 0.0 && high > 3.0);
    }

    #[test]
    fn fonts_register_and_measure_text() {
        register_fonts().unwrap();
        // Registering twice is harmless.
        register_fonts().unwrap();
        let style = text_style(12.0, palette::BLACK);
        let (width, height) = style.font.box_size("Km").unwrap();
        assert!(
            width > 5 && height > 5,
            "the font measures text: {width} x {height}"
        );
    }
}
