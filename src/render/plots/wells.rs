//! The plate's wells as plots: the overview laid out as the plate (one miniature per well with
//! its curve, initial-rate window and fitted line; a rate heat map for 1536 wells) and one larger
//! plot per well.
//!
//! The curves are "product formed" in the units the window fit used, from the plate's one
//! [`crate::signal::PlateSignal`] (a test checks that the line refitted over each window gives the
//! well's slope), so the fitted line lies on its points.

use std::collections::BTreeMap;

use plotters::coord::Shift;
use plotters::prelude::*;

use super::palette::{BLACK, BLUE, EMPTY_GREY, FRAME_GREY, ORANGE, VERMILLION};
use super::{drawn, padded_range, text_style, Drawing};
use crate::core::format::significant;
use crate::core::plate::{PlateFormat, WellId};
use crate::layout::Role;
use crate::pipeline::RunResults;
use crate::rates::Flag;

/// Points of a well's curve one overview miniature (at most about 90 px wide) draws.
const MINIATURE_LINE_POINTS: usize = 150;

/// Every flag, for legends.
pub const ALL_FLAGS: [Flag; 7] = [
    Flag::Nonlinear,
    Flag::Lag,
    Flag::Unreadable,
    Flag::Depleted,
    Flag::Noisy,
    Flag::Weak,
    Flag::Saturated,
];

/// What the plate holds at one position.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum WellState {
    /// The layout says `empty`, or does not name the well.
    Empty,
    /// The layout names the well but the data hold no trace for it.
    NoData,
    /// Analysed: it has a window search result.
    Analysed,
}

/// One plate position, ready to draw.
#[derive(Debug, Clone)]
pub struct WellView {
    /// The well.
    pub well: WellId,
    /// Its state.
    pub state: WellState,
    /// Its role, when the layout names it.
    pub role: Option<Role>,
    /// Substrate concentration, layout unit.
    pub substrate: Option<f64>,
    /// The readable reads a figure draws, (time s, product formed in the fit's units): every read
    /// of a trace up to [`DETAIL_LINE_POINTS`], else those evenly spaced, the window's reads (up to
    /// [`MARKED_READS`]) and the lowest and highest read. Why not every read: a 1536-well plate of
    /// 2000 reads held 49 MB of converted traces for figures that draw at most 600 points each.
    pub trace: Vec<(f64, f64)>,
    /// Initial-rate window (s).
    pub window: Option<(f64, f64)>,
    /// The window's straight line: (intercept, slope) in the trace's units.
    pub line: Option<(f64, f64)>,
    /// Rate after background subtraction, and its SE, in the written rate unit.
    pub rate: Option<(f64, f64)>,
    /// Flags raised.
    pub flags: Vec<Flag>,
    /// Whether the rate entered means and fits.
    pub used: bool,
    /// One line for hover texts and tables.
    pub hover: String,
    /// Whether the report draws the well's detail figure ([`shows_detail`]); a well without one
    /// keeps only the miniature's points in `trace`.
    pub detail: bool,
}

/// Plates up to this many wells get a detail figure of every analysed well; larger ones of the
/// flagged wells only (a 1536-well page of every well's figure would weigh hundreds of MB).
pub const DETAIL_ALL_WELLS_UP_TO: usize = 384;

/// Whether the report draws a well's detail figure: every analysed well of a plate up to
/// [`DETAIL_ALL_WELLS_UP_TO`] wells, the flagged ones of a larger plate; on a screening plate
/// only the wells left out (or flagged beyond `weak`, which fully inhibited wells are), since its
/// wells are the thumbnails and the heat map.
fn shows_detail(view: &WellView, wells_on_plate: usize, screen: bool) -> bool {
    let shown = if screen {
        !view.used || view.flags.iter().any(|flag| flag.excludes())
    } else {
        wells_on_plate <= DETAIL_ALL_WELLS_UP_TO || !view.flags.is_empty()
    };
    view.state == WellState::Analysed && shown
}

impl WellView {
    /// The flags' words joined: `depleted, weak` (words, never codes a reader must learn).
    pub fn flag_words(&self) -> String {
        self.flags
            .iter()
            .map(|flag| flag.word())
            .collect::<Vec<_>>()
            .join(", ")
    }

    /// The first flag's word, with how many more there are: `depleted +1`.
    pub fn first_flag_word(&self) -> Option<String> {
        let first = self.flags.first()?;
        Some(match self.flags.len() {
            1 => first.word().to_string(),
            n => format!("{} +{}", first.word(), n - 1),
        })
    }

    /// The anchor of the well's detail in the report.
    pub fn anchor(&self) -> String {
        format!("well-{}", self.well)
    }
}

/// The whole plate, ready to draw.
#[derive(Debug, Clone)]
pub struct PlateView {
    /// Plate format.
    pub plate: PlateFormat,
    /// Read times (s).
    pub times_s: Vec<f64>,
    /// Every plate position, row by row.
    pub wells: Vec<WellView>,
    /// The y axis of well curves, with its unit.
    pub value_label: String,
    /// Rate unit (`uM/s` or `AU/s`).
    pub rate_unit: String,
    /// Substrate unit, for labels.
    pub substrate_unit: String,
}

impl PlateView {
    /// The view of one well.
    pub fn get(&self, well: WellId) -> Option<&WellView> {
        self.wells.iter().find(|view| view.well == well)
    }
}

/// A detail plot marks every read of a trace up to this many; a longer trace is drawn as a line
/// with markers on (up to this many of) the window's reads only, which keeps a 384-well page's
/// 384 detail plots to a few MB.
const MARKED_READS: usize = 120;

/// A plot 420 px wide shows no more than this many points of a long trace's line.
const DETAIL_LINE_POINTS: usize = 600;

/// The reads of one well a figure draws (see [`WellView::trace`]), in time order: all of them up
/// to the figure's line points ([`DETAIL_LINE_POINTS`] for a detail figure, else
/// [`MINIATURE_LINE_POINTS`]), else that many evenly spaced, the window's (for a detail figure,
/// which marks them) and the lowest and highest.
fn drawn_reads(
    times_s: &[f64],
    formed: &[Option<f64>],
    window: Option<(f64, f64)>,
    detail: bool,
) -> Vec<(f64, f64)> {
    let line_points = if detail {
        DETAIL_LINE_POINTS
    } else {
        MINIATURE_LINE_POINTS
    };
    let readable: Vec<(f64, f64)> = times_s
        .iter()
        .zip(formed)
        .filter_map(|(t, value)| value.map(|v| (*t, v)))
        .collect();
    if readable.len() <= line_points {
        return readable;
    }
    let mut kept = crate::core::stats::evenly_spaced_indices(readable.len(), line_points);
    if let (Some((start, end)), true) = (window, detail) {
        let in_window: Vec<usize> = (0..readable.len())
            .filter(|&i| readable[i].0 >= start && readable[i].0 <= end)
            .collect();
        kept.extend(super::thinned(&in_window, MARKED_READS));
    }
    // The axis spans every read, so the lowest and highest stay.
    let by_value = |a: &usize, b: &usize| readable[*a].1.total_cmp(&readable[*b].1);
    kept.extend((0..readable.len()).min_by(by_value));
    kept.extend((0..readable.len()).max_by(by_value));
    kept.sort_unstable();
    kept.dedup();
    kept.into_iter().map(|i| readable[i]).collect()
}

/// Builds the plate view of a run.
pub fn plate_view(results: &RunResults) -> PlateView {
    let data = &results.data;
    let layout = &results.layout;
    let analysis = &results.analysis;
    let signal = &analysis.signal;
    let traces: BTreeMap<WellId, &crate::import::Readings> = data
        .wells
        .iter()
        .map(|trace| (trace.well, &trace.values))
        .collect();
    let value_label = signal.value_label();
    let rates = &results.rates_in;
    let rate_unit = rates.unit.clone();
    let substrate_unit = layout
        .substrate_unit
        .map_or_else(|| "substrate units".to_string(), |unit| unit.to_string());
    let screen = results.screen.is_some();
    let results_by_well: BTreeMap<WellId, &crate::rates::WellResult> =
        analysis.wells.iter().map(|w| (w.well, w)).collect();

    let mut wells = Vec::with_capacity(data.plate.n_wells());
    for well in data.plate.wells() {
        let setup = layout.wells.get(&well);
        let role = setup.map(|s| s.role);
        let substrate = setup.and_then(|s| s.substrate);
        let concentration = substrate.map_or(String::new(), |s| {
            format!(", [S] {} {substrate_unit}", significant(s))
        });
        let mut view = WellView {
            well,
            state: WellState::Empty,
            role,
            substrate,
            trace: Vec::new(),
            window: None,
            line: None,
            rate: None,
            flags: Vec::new(),
            used: false,
            hover: format!("{well}: empty"),
            detail: false,
        };
        match (role, results_by_well.get(&well), traces.get(&well)) {
            (None | Some(Role::Empty), ..) => {}
            (Some(role), Some(result), Some(raw)) => {
                view.state = WellState::Analysed;
                view.window = result.rate.window_s;
                view.line = result.rate.fit.map(|fit| (fit.intercept, fit.slope));
                // Rates in the written unit; the line stays in the trace's units and seconds.
                view.rate = result
                    .rate_value
                    .zip(result.rate_se)
                    .map(|(rate, se)| (rates.rate(rate), rates.rate(se)));
                view.flags = result.rate.flags.clone();
                view.used = result.used;
                let rate = match view.rate {
                    Some((rate, se)) => {
                        format!("rate {} ± {} {}", significant(rate), significant(se), rate_unit)
                    }
                    None => "no rate".to_string(),
                };
                let flags = if view.flags.is_empty() {
                    "no flags".to_string()
                } else {
                    format!("flags: {}", result.flag_text().replace(';', ", "))
                };
                let used_text = if view.used {
                    "used"
                } else {
                    "left out of means and fits"
                };
                view.hover = format!("{well} {role}{concentration}: {rate}; {flags}; {used_text}");
                view.detail = shows_detail(&view, data.plate.n_wells(), screen);
                view.trace = drawn_reads(
                    &data.times_s,
                    &signal.well_product_formed(well, raw),
                    result.rate.window_s,
                    view.detail,
                );
            }
            (Some(role), ..) => {
                view.state = WellState::NoData;
                view.hover = format!("{well} {role}{concentration}: no data in the export");
            }
        }
        wells.push(view);
    }
    PlateView {
        plate: data.plate,
        times_s: data.times_s.clone(),
        wells,
        value_label,
        rate_unit,
        substrate_unit,
    }
}

/// Pixel geometry of the overview.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct OverviewGeometry {
    /// Left margin (row letters).
    pub left: u32,
    /// Top margin (title and column numbers).
    pub top: u32,
    /// Cell width.
    pub cell_width: u32,
    /// Cell height.
    pub cell_height: u32,
    /// Whole width.
    pub width: u32,
    /// Whole height.
    pub height: u32,
    /// Whether wells are drawn as heat-map cells rather than miniatures.
    pub heat_map: bool,
}

impl OverviewGeometry {
    /// The geometry for a plate format: miniatures up to 384 wells, a heat map for 1536.
    pub fn for_plate(plate: PlateFormat) -> OverviewGeometry {
        let (cell_width, cell_height, heat_map) = match plate {
            PlateFormat::Wells96 => (92, 64, false),
            // 24 columns of 46 px: the plate fits a 1366 px laptop screen without scrolling.
            PlateFormat::Wells384 => (46, 36, false),
            PlateFormat::Wells1536 => (22, 16, true),
        };
        let left = 36;
        let top = 52;
        let bottom = if heat_map { 70 } else { 58 };
        let right = 12;
        OverviewGeometry {
            left,
            top,
            cell_width,
            cell_height,
            width: left + cell_width * u32::from(plate.n_columns()) + right,
            height: top + cell_height * u32::from(plate.n_rows()) + bottom,
            heat_map,
        }
    }

    /// A well's cell: (x, y, width, height) in pixels.
    pub fn cell(&self, well: WellId) -> (u32, u32, u32, u32) {
        (
            self.left + self.cell_width * u32::from(well.column),
            self.top + self.cell_height * u32::from(well.row),
            self.cell_width,
            self.cell_height,
        )
    }
}

/// The plate overview.
pub struct Overview<'a> {
    /// The plate.
    pub view: &'a PlateView,
    /// A title line (the run's data file).
    pub title: String,
}

impl Overview<'_> {
    /// Its geometry.
    pub fn geometry(&self) -> OverviewGeometry {
        OverviewGeometry::for_plate(self.view.plate)
    }
}

/// Hatches a `width` x `height` area with lines x + y = c every `step` pixels: the pattern that
/// marks a flagged well besides its colour and code.
fn hatch<DB: DrawingBackend>(
    area: &DrawingArea<DB, Shift>,
    width: i32,
    height: i32,
    step: i32,
    style: ShapeStyle,
) -> Result<(), String> {
    let mut c = step;
    while c < width + height {
        let x_start = (c - height).max(0);
        let x_end = c.min(width);
        drawn(area.draw(&PathElement::new(
            vec![(x_start, c - x_start), (x_end, c - x_end)],
            style,
        )))?;
        c += step;
    }
    Ok(())
}

/// Viridis at `fraction` in [0, 1], linear between five anchors (van der Walt and Smith 2015, the
/// matplotlib colour map; anchor values from memory), a sequential map readable in grey and with
/// common colour blindness.
pub fn viridis(fraction: f64) -> RGBColor {
    const ANCHORS: [(u8, u8, u8); 5] = [
        (0x44, 0x01, 0x54),
        (0x3B, 0x52, 0x8B),
        (0x21, 0x91, 0x8C),
        (0x5E, 0xC9, 0x62),
        (0xFD, 0xE7, 0x25),
    ];
    let f = if fraction.is_finite() {
        fraction.clamp(0.0, 1.0)
    } else {
        0.0
    };
    let scaled = f * (ANCHORS.len() - 1) as f64;
    let index = (scaled.floor() as usize).min(ANCHORS.len() - 2);
    let t = scaled - index as f64;
    let mix = |a: u8, b: u8| (f64::from(a) + (f64::from(b) - f64::from(a)) * t).round() as u8;
    let (a, b) = (ANCHORS[index], ANCHORS[index + 1]);
    RGBColor(mix(a.0, b.0), mix(a.1, b.1), mix(a.2, b.2))
}

fn role_tag(role: Option<Role>) -> &'static str {
    match role {
        Some(Role::Blank) => " blank",
        Some(Role::NoEnzyme) => " no-E",
        Some(Role::Uninhibited) => " 100%",
        Some(Role::Inhibited) => " 0%",
        Some(Role::Standard) => " std",
        _ => "",
    }
}

impl Drawing for Overview<'_> {
    fn name(&self) -> String {
        "overview".to_string()
    }

    fn title(&self) -> String {
        self.title.clone()
    }

    fn size(&self) -> (u32, u32) {
        let geometry = self.geometry();
        (geometry.width, geometry.height)
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), String> {
        let geometry = self.geometry();
        let view = self.view;
        drawn(root.fill(&WHITE))?;
        drawn(root.draw_text(
            &self.title,
            &text_style(super::text_px::TITLE, BLACK),
            (geometry.left as i32, 8),
        ))?;
        let label_style = text_style(super::text_px::TICK, BLACK);
        for column in 0..view.plate.n_columns() {
            let (x, _, w, _) = geometry.cell(WellId::new(0, column));
            let text = (column + 1).to_string();
            let shift = if geometry.heat_map && column % 2 == 1 {
                12
            } else {
                0
            };
            drawn(root.draw_text(
                &text,
                &label_style,
                (
                    (x + w / 2) as i32 - 3 * text.len() as i32,
                    geometry.top as i32 - 16 - shift,
                ),
            ))?;
        }
        for row in 0..view.plate.n_rows() {
            let (_, y, _, h) = geometry.cell(WellId::new(row, 0));
            drawn(root.draw_text(
                &WellId::new(row, 0).row_label(),
                &label_style,
                (6, (y + h / 2) as i32 - 6),
            ))?;
        }
        if geometry.heat_map {
            self.draw_heat_map(root, &geometry)?;
        } else {
            for well in &view.wells {
                self.draw_miniature(root, &geometry, well)?;
            }
            self.draw_legend(root, &geometry)?;
        }
        Ok(())
    }
}

impl Overview<'_> {
    fn draw_miniature<DB: DrawingBackend>(
        &self,
        root: &DrawingArea<DB, Shift>,
        geometry: &OverviewGeometry,
        well: &WellView,
    ) -> Result<(), String> {
        let (x, y, w, h) = geometry.cell(well.well);
        let cell = root.clone().shrink((x, y), (w, h));
        let (wi, hi) = (w as i32, h as i32);
        let small = geometry.cell_width < 80;
        // plotters draws text at about 0.8 of the size asked: 11 gives 9 px labels at 384 wells.
        let font = if small {
            super::MIN_TEXT_PX
        } else {
            super::text_px::TICK
        };
        let flagged = !well.flags.is_empty();
        let background = if well.state == WellState::Analysed {
            WHITE
        } else {
            EMPTY_GREY
        };
        drawn(cell.draw(&Rectangle::new([(1, 1), (wi - 1, hi - 1)], background.filled())))?;
        if flagged {
            hatch(
                &cell,
                wi,
                hi,
                if small { 7 } else { 9 },
                VERMILLION.mix(0.35).stroke_width(1),
            )?;
        }
        let label = format!("{}{}", well.well, role_tag(well.role));
        drawn(cell.draw_text(&label, &text_style(font, BLACK), (4, 3)))?;
        // Miniatures wide enough carry the flag's word along their foot; narrower ones (384 wells)
        // carry the hatch and frame only, with the words in the hover text.
        let word_below = if small { None } else { well.first_flag_word() };
        if let Some(word) = &word_below {
            let style = super::styled_font(super::font_px(super::MIN_TEXT_PX, FontStyle::Bold), VERMILLION);
            drawn(cell.draw_text(word, &style, (4, hi - 16)))?;
        }
        if well.state == WellState::Analysed {
            let foot = if word_below.is_some() { 15 } else { 0 };
            let plot_area = cell
                .clone()
                .shrink((3, font as u32 + 5), (w - 6, h - font as u32 - 8 - foot));
            let t_range = padded_range(self.view.times_s.iter().copied(), false);
            let y_range = padded_range(well.trace.iter().map(|p| p.1), false);
            let mut chart = drawn(
                ChartBuilder::on(&plot_area).build_cartesian_2d(t_range.0..t_range.1, y_range.0..y_range.1),
            )?;
            if let Some((start, end)) = well.window {
                drawn(chart.draw_series(std::iter::once(Rectangle::new(
                    [(start, y_range.0), (end, y_range.1)],
                    ORANGE.mix(0.3).filled(),
                ))))?;
            }
            let points = &well.trace;
            // The fitted line goes under the curve so the reads in the window stay visible.
            if let (Some((start, end)), Some((intercept, slope))) = (well.window, well.line) {
                drawn(chart.draw_series(LineSeries::new(
                    [start, end].map(|t| (t, intercept + slope * t)),
                    BLACK.stroke_width(3),
                )))?;
            }
            drawn(chart.draw_series(LineSeries::new(
                super::thinned(points, MINIATURE_LINE_POINTS),
                BLUE.stroke_width(1),
            )))?;
        } else if well.state == WellState::NoData {
            drawn(cell.draw_text("no data", &text_style(font, BLACK), (3, hi / 2)))?;
        }
        let frame = if flagged {
            VERMILLION.stroke_width(2)
        } else {
            FRAME_GREY.stroke_width(1)
        };
        drawn(cell.draw(&Rectangle::new([(1, 1), (wi - 1, hi - 1)], frame)))?;
        Ok(())
    }

    fn draw_legend<DB: DrawingBackend>(
        &self,
        root: &DrawingArea<DB, Shift>,
        geometry: &OverviewGeometry,
    ) -> Result<(), String> {
        let y = (geometry.height - 50) as i32;
        let x = geometry.left as i32;
        let style = text_style(super::text_px::AXIS, BLACK);
        drawn(root.draw(&PathElement::new(
            vec![(x, y + 7), (x + 22, y + 7)],
            BLUE.stroke_width(2),
        )))?;
        drawn(root.draw_text("product formed (each well on its own scale)", &style, (x + 28, y)))?;
        let x2 = x + 330;
        drawn(root.draw(&Rectangle::new(
            [(x2, y), (x2 + 22, y + 14)],
            ORANGE.mix(0.3).filled(),
        )))?;
        drawn(root.draw_text("initial-rate window", &style, (x2 + 28, y)))?;
        let x3 = x2 + 180;
        drawn(root.draw(&PathElement::new(
            vec![(x3, y + 7), (x3 + 22, y + 7)],
            BLACK.stroke_width(2),
        )))?;
        drawn(root.draw_text("fitted straight line", &style, (x3 + 28, y)))?;
        let x4 = x3 + 180;
        drawn(root.draw(&Rectangle::new([(x4, y), (x4 + 22, y + 14)], EMPTY_GREY.filled())))?;
        drawn(root.draw_text("empty or no data", &style, (x4 + 28, y)))?;
        let y2 = y + 22;
        let marker = root.clone().shrink((x as u32, y2 as u32), (22u32, 14u32));
        hatch(&marker, 22, 14, 6, VERMILLION.mix(0.5).stroke_width(1))?;
        drawn(marker.draw(&Rectangle::new([(0, 0), (22, 14)], VERMILLION.stroke_width(2))))?;
        drawn(root.draw_text(
            if geometry.cell_width < 80 {
                "flagged: hatched and framed in red (hover over a well for its flags)"
            } else {
                "flagged: hatched, framed in red, with the first flag's word (hover over a well for every flag)"
            },
            &style,
            (x + 28, y2),
        ))?;
        Ok(())
    }

    fn draw_heat_map<DB: DrawingBackend>(
        &self,
        root: &DrawingArea<DB, Shift>,
        geometry: &OverviewGeometry,
    ) -> Result<(), String> {
        let rates: Vec<f64> = self
            .view
            .wells
            .iter()
            .filter_map(|w| w.rate.map(|r| r.0))
            .filter(|r| r.is_finite())
            .collect();
        let low = rates.iter().copied().fold(f64::INFINITY, f64::min);
        let high = rates.iter().copied().fold(f64::NEG_INFINITY, f64::max);
        let span = if high > low { high - low } else { 1.0 };
        for well in &self.view.wells {
            let (x, y, w, h) = geometry.cell(well.well);
            let cell = root.clone().shrink((x, y), (w, h));
            let (wi, hi) = (w as i32, h as i32);
            let fill = match (well.state, well.rate) {
                (WellState::Analysed, Some((rate, _))) => viridis((rate - low) / span),
                (WellState::Analysed, None) => WHITE,
                _ => EMPTY_GREY,
            };
            drawn(cell.draw(&Rectangle::new([(0, 0), (wi - 1, hi - 1)], fill.filled())))?;
            if !well.flags.is_empty() {
                // The marker: a white inset crossed by a diagonal (the words are in the hover text).
                drawn(cell.draw(&Rectangle::new([(2, 2), (wi - 3, hi - 3)], WHITE.filled())))?;
                drawn(cell.draw(&PathElement::new(
                    vec![(2, hi - 3), (wi - 3, 2)],
                    VERMILLION.stroke_width(1),
                )))?;
                drawn(cell.draw(&Rectangle::new(
                    [(0, 0), (wi - 1, hi - 1)],
                    VERMILLION.stroke_width(2),
                )))?;
            } else {
                drawn(cell.draw(&Rectangle::new([(0, 0), (wi - 1, hi - 1)], WHITE.stroke_width(1))))?;
            }
        }
        // Colour bar and legend.
        let y = (geometry.height - 60) as i32;
        let x = geometry.left as i32;
        let bar_width = 240;
        for i in 0..bar_width {
            let colour = viridis(f64::from(i) / f64::from(bar_width - 1));
            drawn(root.draw(&Rectangle::new(
                [(x + i, y), (x + i + 1, y + 14)],
                colour.filled(),
            )))?;
        }
        let style = text_style(super::text_px::AXIS, BLACK);
        let (low_text, high_text) = if rates.is_empty() {
            ("-".to_string(), "-".to_string())
        } else {
            (significant(low), significant(high))
        };
        drawn(root.draw_text(
            &format!("rate {low_text} to {high_text} {}", self.view.rate_unit),
            &style,
            (x + bar_width + 10, y),
        ))?;
        drawn(root.draw_text(
            "flagged: white inset, diagonal and red frame (hover over a well for its flags); grey: empty",
            &style,
            (x, y + 24),
        ))?;
        Ok(())
    }
}

/// A larger plot of one well: its points, window and fitted line with axes and units.
pub struct WellDetail<'a> {
    /// The plate.
    pub view: &'a PlateView,
    /// The well.
    pub well: &'a WellView,
}

impl Drawing for WellDetail<'_> {
    fn name(&self) -> String {
        format!("well-{}", self.well.well)
    }

    fn title(&self) -> String {
        self.well.hover.clone()
    }

    fn size(&self) -> (u32, u32) {
        (420, 270)
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), String> {
        let well = self.well;
        drawn(root.fill(&WHITE))?;
        let role = well.role.map_or("", |r| r.name());
        let substrate = well.substrate.map_or(String::new(), |s| {
            format!(", [S] {} {}", significant(s), self.view.substrate_unit)
        });
        let flags = if well.flags.is_empty() {
            String::new()
        } else {
            format!(" | flagged {}", well.flag_words())
        };
        let caption = format!("Well {} ({role}{substrate}){flags}", well.well);
        let t_range = padded_range(self.view.times_s.iter().copied(), false);
        let y_range = padded_range(well.trace.iter().map(|p| p.1), false);
        let mut chart = drawn(
            ChartBuilder::on(root)
                .caption(caption, text_style(super::text_px::TITLE, BLACK))
                .margin(8)
                .x_label_area_size(44)
                .y_label_area_size(72)
                .build_cartesian_2d(t_range.0..t_range.1, y_range.0..y_range.1),
        )?;
        drawn(
            chart
                .configure_mesh()
                .x_desc("time [s]")
                .y_desc(self.view.value_label.as_str())
                .label_style(text_style(super::text_px::TICK, BLACK))
                .axis_desc_style(text_style(super::text_px::TICK, BLACK))
                .x_labels(6)
                .y_labels(5)
                .x_label_formatter(&super::tick_label)
                .y_label_formatter(&super::tick_label)
                .max_light_lines(0)
                .draw(),
        )?;
        if let Some((start, end)) = well.window {
            drawn(chart.draw_series(std::iter::once(Rectangle::new(
                [(start, y_range.0), (end, y_range.1)],
                ORANGE.mix(0.3).filled(),
            ))))?
            .label("initial-rate window")
            .legend(|(x, y)| Rectangle::new([(x, y - 5), (x + 16, y + 5)], ORANGE.mix(0.3).filled()));
        }
        // The line goes under the reads so they stay visible.
        if let (Some((start, end)), Some((intercept, slope))) = (well.window, well.line) {
            drawn(chart.draw_series(LineSeries::new(
                [start, end].map(|t| (t, intercept + slope * t)),
                BLACK.stroke_width(2),
            )))?
            .label("fitted straight line")
            .legend(|(x, y)| PathElement::new(vec![(x, y), (x + 16, y)], BLACK.stroke_width(2)));
        }
        let points = &well.trace;
        let marked: Vec<(f64, f64)> = if points.len() <= MARKED_READS {
            points.clone()
        } else {
            drawn(chart.draw_series(LineSeries::new(
                super::thinned(points, DETAIL_LINE_POINTS),
                BLUE.stroke_width(1),
            )))?;
            let (start, end) = well.window.unwrap_or((f64::NAN, f64::NAN));
            let in_window: Vec<(f64, f64)> = points
                .iter()
                .copied()
                .filter(|p| p.0 >= start && p.0 <= end)
                .collect();
            super::thinned(&in_window, MARKED_READS)
        };
        drawn(chart.draw_series(marked.iter().map(|p| Circle::new(*p, 2, BLUE.filled()))))?
            .label("reads")
            .legend(|(x, y)| Circle::new((x + 8, y), 3, BLUE.filled()));
        drawn(
            chart
                .configure_series_labels()
                .label_font(text_style(super::text_px::TICK, BLACK))
                .background_style(WHITE.mix(0.85))
                .border_style(FRAME_GREY)
                .position(SeriesLabelPosition::LowerRight)
                .draw(),
        )?;
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_flag_has_a_distinct_word() {
        let words: std::collections::BTreeSet<&str> = ALL_FLAGS.iter().map(|f| f.word()).collect();
        assert_eq!(words.len(), ALL_FLAGS.len());
    }

    #[test]
    fn geometry_places_cells_on_the_plate_grid() {
        for plate in [
            PlateFormat::Wells96,
            PlateFormat::Wells384,
            PlateFormat::Wells1536,
        ] {
            let geometry = OverviewGeometry::for_plate(plate);
            let last = WellId::new(plate.n_rows() - 1, plate.n_columns() - 1);
            let (x, y, w, h) = geometry.cell(last);
            assert!(x + w <= geometry.width && y + h <= geometry.height, "{plate}");
            assert_eq!(geometry.heat_map, plate == PlateFormat::Wells1536);
        }
    }

    #[test]
    fn viridis_runs_from_dark_purple_to_yellow() {
        assert_eq!(viridis(0.0), RGBColor(0x44, 0x01, 0x54));
        assert_eq!(viridis(1.0), RGBColor(0xFD, 0xE7, 0x25));
        assert_eq!(viridis(f64::NAN), viridis(0.0));
        assert_eq!(viridis(0.5), RGBColor(0x21, 0x91, 0x8C));
    }

    /// The reconstructed curves must be the ones the window fit saw: refitting each window on the
    /// view's trace gives the well's slope (before background subtraction).
    #[test]
    fn view_traces_reproduce_each_wells_window_fit() {
        let results = crate::render::report::tests::demo_results();
        let view = plate_view(&results);
        let mut checked = 0;
        for result in &results.analysis.wells {
            let (Some(fit), Some((start, end))) = (result.rate.fit, result.rate.window_s) else {
                continue;
            };
            let well = view.get(result.well).unwrap();
            let points: Vec<(f64, f64)> = well
                .trace
                .iter()
                .copied()
                .filter(|(t, _)| *t >= start - 1e-9 && *t <= end + 1e-9)
                .collect();
            let (times, values): (Vec<f64>, Vec<f64>) = points.iter().copied().unzip();
            let refit = crate::core::stats::straight_line(&times, &values).unwrap();
            assert!(
                (refit.slope - fit.slope).abs() <= 1e-6 * fit.slope.abs().max(1e-12),
                "{}: {} vs {}",
                result.well,
                refit.slope,
                fit.slope
            );
            checked += 1;
        }
        assert!(checked > 50, "most demo wells have a window ({checked})");
    }
}
