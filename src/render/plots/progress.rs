//! Per-group plots of a progress-curve fit: every fitted well's observed reads with the global
//! fit's curve over them, and the residuals (observed - fitted) against time, in the signal units
//! the fit used (in the reader's own signal unit, blank- and background-corrected; see
//! `progress::analysis`).
//!
//! Wells are told apart by S0: one Okabe-Ito colour and one marker shape per S0 level (the same
//! pairs as the inhibitor plots), the fitted curve drawn as a line in the level's colour. The
//! fitted values are the model's signal at each read (offset included), so the line joins the
//! fitted reads; reads are dense enough in a kinetic read for that to show the curve's shape.
//! References: Okabe and Ito (2008) for the palette; the fit itself: `progress::global_fit`.

use plotters::coord::Shift;
use plotters::prelude::*;

use super::inhibition::{draw_markers, legend_entry, level_style};
use super::palette::{BLACK, FRAME_GREY};
use super::{drawn, padded_range, text_style, titled_chart, Drawing};
use crate::pipeline::RunResults;
use crate::progress::analysis::{ProgressCurve, ProgressGroupReport};
use crate::render::words::group_label;

/// A group's progress-curve fit, ready to draw.
#[derive(Debug, Clone)]
pub struct ProgressView {
    /// One-based number of the group in the progress analysis (for file names and anchors).
    pub number: usize,
    /// Its label.
    pub label: String,
    /// The model chosen.
    pub model: String,
    /// The fitted wells' curves.
    pub curves: Vec<ProgressCurve>,
    /// The S0 levels, ascending (wells without S0 share the last level).
    pub levels: Vec<f64>,
    /// Substrate unit, for the legend.
    pub substrate_unit: String,
    /// The signal's unit (AU, RFU or RLU): the fit works on the blank-corrected signal.
    pub signal_unit: &'static str,
}

impl ProgressView {
    /// The level index of a curve.
    pub fn level_of(&self, curve: &ProgressCurve) -> usize {
        curve
            .s0
            .and_then(|s0| self.levels.iter().position(|l| *l == s0))
            .unwrap_or(self.levels.len().saturating_sub(1))
    }

    /// Residuals (t, observed - fitted) of one curve.
    pub fn residuals(curve: &ProgressCurve) -> Vec<(f64, f64)> {
        curve
            .times_s
            .iter()
            .zip(curve.observed.iter().zip(&curve.fitted))
            .map(|(t, (y, f))| (*t, y - f))
            .collect()
    }
}

/// The view of every analysed progress-curve group with curves.
pub fn progress_plots(results: &RunResults) -> Vec<ProgressView> {
    results
        .progress
        .groups
        .iter()
        .enumerate()
        .filter(|(_, group)| group.analysed && !group.curves.is_empty())
        .map(|(index, group)| progress_view(index + 1, group, results))
        .collect()
}

fn progress_view(number: usize, group: &ProgressGroupReport, results: &RunResults) -> ProgressView {
    let mut levels: Vec<f64> = Vec::new();
    for s0 in group.curves.iter().filter_map(|c| c.s0) {
        if !levels.contains(&s0) {
            levels.push(s0);
        }
    }
    levels.sort_by(f64::total_cmp);
    ProgressView {
        number,
        label: group_label(&group.group),
        model: group.model.map(|m| m.name().to_string()).unwrap_or_default(),
        curves: group.curves.clone(),
        levels,
        substrate_unit: results
            .layout
            .substrate_unit
            .map_or_else(|| "substrate units".to_string(), |u| u.to_string()),
        signal_unit: results.analysis.signal.raw_unit,
    }
}

/// Which view of a progress-curve fit.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ProgressPlotKind {
    /// Observed reads with the fitted curves.
    Curves,
    /// Residuals against time.
    Residuals,
}

impl ProgressPlotKind {
    /// Both, in report order.
    pub const ALL: [ProgressPlotKind; 2] = [Self::Curves, Self::Residuals];
}

/// Markers one progress plot draws at most, shared among its curves.
const MARKERS_PER_PLOT: usize = 6000;
/// Fewest markers a curve keeps however many curves share the plot.
const MARKER_FLOOR: usize = 8;
/// Points of the fitted lines one progress plot draws at most, shared among its curves.
const LINE_POINTS_PER_PLOT: usize = 30_000;
/// Fewest points a fitted line keeps (enough for a smooth curve at this size).
const LINE_POINT_FLOOR: usize = 40;

/// One plot of a progress-curve fit.
pub struct ProgressPlot<'a> {
    /// The group.
    pub view: &'a ProgressView,
    /// Which plot.
    pub kind: ProgressPlotKind,
}

impl Drawing for ProgressPlot<'_> {
    fn name(&self) -> String {
        match self.kind {
            ProgressPlotKind::Curves => format!("progress-{}-curves", self.view.number),
            ProgressPlotKind::Residuals => format!("progress-{}-residuals", self.view.number),
        }
    }

    fn title(&self) -> String {
        match self.kind {
            ProgressPlotKind::Curves => format!(
                "Progress curves with the global {} fit: {}",
                self.view.model, self.view.label
            ),
            ProgressPlotKind::Residuals => {
                format!("Progress-curve residuals against time: {}", self.view.label)
            }
        }
    }

    fn size(&self) -> (u32, u32) {
        match self.kind {
            ProgressPlotKind::Curves => (640, 460),
            ProgressPlotKind::Residuals => (640, 320),
        }
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), String> {
        drawn(root.fill(&WHITE))?;
        let view = self.view;
        let times = view.curves.iter().flat_map(|c| c.times_s.iter().copied());
        let t_max = times.clone().fold(0.0, f64::max);
        let x_range = (0.0, if t_max > 0.0 { t_max * 1.03 } else { 1.0 });
        let (y_range, y_desc) = match self.kind {
            ProgressPlotKind::Curves => (
                padded_range(
                    view.curves
                        .iter()
                        .flat_map(|c| c.observed.iter().chain(&c.fitted).copied()),
                    false,
                ),
                format!("signal [{}] (blank- and background-corrected)", view.signal_unit),
            ),
            ProgressPlotKind::Residuals => {
                let largest = view
                    .curves
                    .iter()
                    .flat_map(ProgressView::residuals)
                    .map(|r| r.1.abs())
                    .fold(0.0, f64::max);
                (
                    padded_range([-largest, largest], true),
                    format!("observed - fitted [{}]", view.signal_unit),
                )
            }
        };
        let mut chart = titled_chart(
            root,
            self.title(),
            BLACK,
            (x_range, y_range),
            ("time [s]".to_string(), y_desc),
        )?;
        if self.kind == ProgressPlotKind::Residuals {
            drawn(chart.draw_series(LineSeries::new([(x_range.0, 0.0), (x_range.1, 0.0)], FRAME_GREY)))?;
        }
        // A plate of 700 wells x 2000 reads per group would draw 1.4 million markers: each plot
        // shares a budget of markers and line points among its curves (every read stays in
        // progress.json).
        let markers_per_curve = super::share_of(MARKERS_PER_PLOT, view.curves.len(), MARKER_FLOOR);
        let line_points_per_curve =
            super::share_of(LINE_POINTS_PER_PLOT, view.curves.len(), LINE_POINT_FLOOR);
        for curve in &view.curves {
            let (colour, shape) = level_style(view.level_of(curve));
            match self.kind {
                ProgressPlotKind::Curves => {
                    let observed: Vec<(f64, f64)> = curve
                        .times_s
                        .iter()
                        .copied()
                        .zip(curve.observed.iter().copied())
                        .collect();
                    draw_markers(
                        &mut chart,
                        &super::thinned(&observed, markers_per_curve),
                        shape,
                        colour.mix(0.55).rgb_colour(),
                        false,
                        3,
                    )?;
                    let fitted: Vec<(f64, f64)> = curve
                        .times_s
                        .iter()
                        .copied()
                        .zip(curve.fitted.iter().copied())
                        .collect();
                    drawn(chart.draw_series(LineSeries::new(
                        super::thinned(&fitted, line_points_per_curve),
                        colour.stroke_width(2),
                    )))?;
                }
                ProgressPlotKind::Residuals => {
                    draw_markers(
                        &mut chart,
                        &super::thinned(&ProgressView::residuals(curve), markers_per_curve),
                        shape,
                        colour,
                        false,
                        3,
                    )?;
                }
            }
        }
        // One legend entry per S0 level.
        for (level, s0) in view.levels.iter().enumerate() {
            let (colour, shape) = level_style(level);
            drawn(chart.draw_series(std::iter::empty::<Circle<(f64, f64), i32>>()))?
                .label(format!("S0 = {s0} {}", view.substrate_unit))
                .legend(move |(x, y)| legend_entry!(x, y, shape, colour));
        }
        drawn(
            chart
                .configure_series_labels()
                .label_font(text_style(super::text_px::TICK, BLACK))
                .background_style(WHITE.mix(0.85))
                .border_style(FRAME_GREY)
                .position(match self.kind {
                    ProgressPlotKind::Curves => SeriesLabelPosition::UpperLeft,
                    ProgressPlotKind::Residuals => SeriesLabelPosition::UpperRight,
                })
                .draw(),
        )?;
        Ok(())
    }
}

/// Mixing a colour with white: plotters' `mix` gives an RGBA colour; this flattens it onto white
/// so the marker helpers take one colour type.
trait OnWhite {
    fn rgb_colour(&self) -> RGBColor;
}

impl OnWhite for RGBAColor {
    fn rgb_colour(&self) -> RGBColor {
        let alpha = self.3;
        let blend = |c: u8| (f64::from(c) * alpha + 255.0 * (1.0 - alpha)).round() as u8;
        RGBColor(blend(self.0), blend(self.1), blend(self.2))
    }
}
