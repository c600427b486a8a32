//! Per-group plots of a global [S] x [I] fit: rate against [S] with one colour and one marker
//! shape per inhibitor level (never colour alone), the global fit's curve at each level over its
//! points, and the residuals against [S] marked the same way.
//!
//! The curves are the fitted rate law itself, v(S, I) from [`predict_rate`] with the constants the
//! group's fit reports (an inverse constant 1/Ki is rebuilt from Ki; a constant the fit reports as
//! unbounded, or leaves out, counts as an absent term, 1/Ki = 0). No band is drawn: with three or
//! more parameters the delta-method band of the plain Michaelis-Menten plot does not carry over
//! without the full covariance, which the report does not keep.
//! References: the rate laws of `fit::models` (Segel 1975, Enzyme Kinetics, ch. 3 and 4); Okabe
//! and Ito (2008) for the palette.

use plotters::coord::Shift;
use plotters::prelude::*;

use super::palette::{BLACK, BLUE, BLUISH_GREEN, FRAME_GREY, ORANGE, REDDISH_PURPLE, SKY_BLUE, VERMILLION};
use super::{drawn, padded_range, text_style, titled_chart, Drawing};
use crate::fit::models::{predict_rate, RateModelKind};
use crate::groups::{GroupFit, LeftOutPlace};
use crate::pipeline::RunResults;
use crate::render::words::group_label;

/// Colours for the inhibitor levels, in order (Okabe-Ito without yellow, which is too pale on
/// white for points and thin lines).
pub const LEVEL_COLOURS: [RGBColor; 7] = [
    BLACK,
    ORANGE,
    SKY_BLUE,
    BLUISH_GREEN,
    BLUE,
    VERMILLION,
    REDDISH_PURPLE,
];

/// Marker shapes for the inhibitor levels, in order; with colour they tell levels apart twice.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum MarkerShape {
    /// Filled circle.
    Circle,
    /// Filled triangle.
    Triangle,
    /// Filled square.
    Square,
    /// Filled diamond.
    Diamond,
    /// Diagonal cross.
    Cross,
    /// Open circle.
    Ring,
}

/// The shapes in the order levels get them.
pub const LEVEL_SHAPES: [MarkerShape; 6] = [
    MarkerShape::Circle,
    MarkerShape::Triangle,
    MarkerShape::Square,
    MarkerShape::Diamond,
    MarkerShape::Cross,
    MarkerShape::Ring,
];

impl MarkerShape {
    /// A short word for captions and tests.
    pub fn word(self) -> &'static str {
        match self {
            MarkerShape::Circle => "circle",
            MarkerShape::Triangle => "triangle",
            MarkerShape::Square => "square",
            MarkerShape::Diamond => "diamond",
            MarkerShape::Cross => "cross",
            MarkerShape::Ring => "ring",
        }
    }
}

/// One well of an inhibitor group.
#[derive(Debug, Clone, PartialEq)]
pub struct InhibitionPoint {
    /// Well ID.
    pub well: String,
    /// Substrate concentration.
    pub substrate: f64,
    /// Index into [`InhibitionView::levels`].
    pub level: usize,
    /// Rate.
    pub rate: f64,
    /// Whether the fit used it (else it was left out as flagged).
    pub used: bool,
}

/// A group fitted globally over [S] x [I], ready to draw.
#[derive(Debug, Clone)]
pub struct InhibitionView {
    /// One-based number of the group in the run.
    pub number: usize,
    /// Its label.
    pub label: String,
    /// The rate law reported.
    pub model: RateModelKind,
    /// The fitted parameters in the model's order ([`RateModelKind::parameter_names`]), when the
    /// fit gave them all.
    pub parameters: Option<Vec<f64>>,
    /// Enzyme concentration in the inhibitor unit (read by the tight-binding model only).
    pub enzyme: f64,
    /// The inhibitor levels, ascending.
    pub levels: Vec<f64>,
    /// The wells.
    pub points: Vec<InhibitionPoint>,
    /// Rate unit.
    pub rate_unit: String,
    /// Substrate unit.
    pub substrate_unit: String,
    /// Inhibitor unit.
    pub inhibitor_unit: String,
}

impl InhibitionView {
    /// The global fit's rate at (S, level), when the fit gave parameters.
    pub fn fitted(&self, substrate: f64, level: usize) -> Option<f64> {
        let parameters = self.parameters.as_ref()?;
        let inhibitor = *self.levels.get(level)?;
        let mut gradient = vec![0.0; parameters.len()];
        let value = predict_rate(
            self.model,
            parameters,
            substrate,
            inhibitor,
            self.enzyme,
            &mut gradient,
        );
        value.is_finite().then_some(value)
    }

    /// Residuals (S, level, v - v_fit) of the fitted wells.
    pub fn residuals(&self) -> Vec<(f64, usize, f64)> {
        self.points
            .iter()
            .filter(|p| p.used)
            .filter_map(|p| Some((p.substrate, p.level, p.rate - self.fitted(p.substrate, p.level)?)))
            .collect()
    }

    /// The legend text of a level.
    pub fn level_text(&self, level: usize) -> String {
        // The level as the layout gave it (shortest form: 2.5, not 2.500).
        format!("[I] = {} {}", self.levels[level], self.inhibitor_unit)
    }
}

/// The colour and shape of level `index`.
pub fn level_style(index: usize) -> (RGBColor, MarkerShape) {
    (
        LEVEL_COLOURS[index % LEVEL_COLOURS.len()],
        LEVEL_SHAPES[index % LEVEL_SHAPES.len()],
    )
}

/// The parameter vector of `model` from a report's constants: `1/Ki` from `Ki` (an absent or
/// non-finite constant is an absent term, 0); `None` when a direct parameter is missing.
pub fn model_parameters(model: RateModelKind, fit: &GroupFit) -> Option<Vec<f64>> {
    model
        .parameter_names()
        .iter()
        .map(|name| match name.strip_prefix("1/") {
            Some(constant) => Some(
                fit.parameters
                    .get(constant)
                    .map(|p| p.value)
                    .filter(|v| v.is_finite() && *v > 0.0)
                    .map_or(0.0, |v| 1.0 / v),
            ),
            None => fit
                .parameters
                .get(*name)
                .map(|p| p.value)
                .filter(|v| v.is_finite()),
        })
        .collect()
}

/// The view of every group whose fitted wells span more than one inhibitor level, with its
/// one-based group number.
pub fn inhibition_plots(results: &RunResults) -> Vec<InhibitionView> {
    results
        .fits
        .iter()
        .enumerate()
        .filter_map(|(index, fit)| inhibition_view(index + 1, fit, results))
        .collect()
}

fn inhibition_view(number: usize, fit: &GroupFit, results: &RunResults) -> Option<InhibitionView> {
    let find = |name: &str| results.analysis.wells.iter().find(|w| w.well.to_string() == name);
    let left_out = fit.wells_left_out.iter().filter_map(|left| match left.place {
        LeftOutPlace::Well(well) => Some(well.to_string()),
        LeftOutPlace::Row(_) => None,
    });
    let names: Vec<(String, bool)> = fit
        .wells_used
        .iter()
        .map(|w| (w.clone(), true))
        .chain(left_out.map(|w| (w, false)))
        .collect();
    let mut raw = Vec::new();
    let mut enzyme = None;
    for (name, used) in names {
        let Some(well) = find(&name) else { continue };
        let (Some(substrate), Some(rate)) = (well.setup.substrate, well.rate_value) else {
            continue;
        };
        enzyme = enzyme.or(well.setup.enzyme);
        // In the written unit, like the fitted constants drawn with it.
        let rate = results.rates_in.rate(rate);
        raw.push((name, substrate, well.setup.inhibitor.unwrap_or(0.0), rate, used));
    }
    let mut levels: Vec<f64> = Vec::new();
    for &(_, _, inhibitor, _, used) in &raw {
        if used && !levels.contains(&inhibitor) {
            levels.push(inhibitor);
        }
    }
    if levels.len() < 2 {
        return None;
    }
    levels.sort_by(f64::total_cmp);
    let points = raw
        .into_iter()
        .filter_map(|(well, substrate, inhibitor, rate, used)| {
            Some(InhibitionPoint {
                well,
                substrate,
                level: levels.iter().position(|l| *l == inhibitor)?,
                rate,
                used,
            })
        })
        .collect();
    let model = fit.model;
    let layout = &results.layout;
    let enzyme_in_inhibitor_unit = match (enzyme, layout.enzyme_unit, layout.inhibitor_unit) {
        (Some(value), Some(from), Some(to)) => value * from.factor_to(to),
        _ => 0.0,
    };
    let parameters = if fit.error.is_none() {
        model_parameters(model, fit)
    } else {
        None
    };
    let unit_text = |unit: Option<crate::core::units::ConcentrationUnit>, fallback: &str| {
        unit.map_or_else(|| fallback.to_string(), |u| u.to_string())
    };
    Some(InhibitionView {
        number,
        label: group_label(&fit.group),
        model,
        // Without an enzyme concentration the tight-binding curve cannot be drawn.
        parameters: parameters.filter(|_| model != RateModelKind::Morrison || enzyme_in_inhibitor_unit > 0.0),
        enzyme: enzyme_in_inhibitor_unit,
        levels,
        points,
        rate_unit: results.rates_in.unit.clone(),
        substrate_unit: unit_text(layout.substrate_unit, "substrate units"),
        inhibitor_unit: unit_text(layout.inhibitor_unit, "inhibitor units"),
    })
}

/// Which view of an inhibitor group.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum InhibitionPlotKind {
    /// Rate against [S] at each [I] with the global fit.
    Rate,
    /// Residuals against [S] at each [I].
    Residuals,
}

impl InhibitionPlotKind {
    /// Both, in report order.
    pub const ALL: [InhibitionPlotKind; 2] = [Self::Rate, Self::Residuals];
}

/// One plot of an inhibitor group.
pub struct InhibitionPlot<'a> {
    /// The group.
    pub view: &'a InhibitionView,
    /// Which plot.
    pub kind: InhibitionPlotKind,
}

/// The chart type every plot of this module and the progress plots draw on.
pub(crate) type LinearChart<'a, DB> = ChartContext<
    'a,
    DB,
    Cartesian2d<plotters::coord::types::RangedCoordf64, plotters::coord::types::RangedCoordf64>,
>;

/// Draws markers of `shape` (radius `size` pixels) at `points` in data coordinates; `open` draws
/// the outline only.
pub(crate) fn draw_markers<DB: DrawingBackend>(
    chart: &mut LinearChart<'_, DB>,
    points: &[(f64, f64)],
    shape: MarkerShape,
    colour: RGBColor,
    open: bool,
    size: i32,
) -> Result<(), String> {
    let style = if open {
        colour.stroke_width(2)
    } else {
        colour.filled()
    };
    match shape {
        MarkerShape::Circle => {
            drawn(chart.draw_series(points.iter().map(|p| Circle::new(*p, size, style))))?;
        }
        MarkerShape::Ring => {
            drawn(
                chart.draw_series(
                    points
                        .iter()
                        .map(|p| Circle::new(*p, size, colour.stroke_width(2))),
                ),
            )?;
        }
        MarkerShape::Triangle => {
            drawn(chart.draw_series(points.iter().map(|p| TriangleMarker::new(*p, size + 1, style))))?;
        }
        MarkerShape::Cross => {
            drawn(
                chart.draw_series(
                    points
                        .iter()
                        .map(|p| Cross::new(*p, size, colour.stroke_width(2))),
                ),
            )?;
        }
        MarkerShape::Square => {
            drawn(chart.draw_series(points.iter().map(|p| {
                EmptyElement::at(*p) + Rectangle::new([(-size + 1, -size + 1), (size - 1, size - 1)], style)
            })))?;
        }
        MarkerShape::Diamond => {
            drawn(chart.draw_series(points.iter().map(|p| {
                EmptyElement::at(*p)
                    + Polygon::new(
                        vec![(0, -size - 1), (size + 1, 0), (0, size + 1), (-size - 1, 0)],
                        style,
                    )
            })))?;
        }
    }
    Ok(())
}

/// A legend marker as pixel vertices around (9, 0) (beside the legend's line start) and whether
/// it is filled: one polygon per shape keeps every legend entry one element type.
pub(crate) fn legend_shape(shape: MarkerShape) -> (Vec<(i32, i32)>, bool) {
    let around = |points: &[(f64, f64)]| -> Vec<(i32, i32)> {
        points
            .iter()
            .map(|(x, y)| (9 + x.round() as i32, y.round() as i32))
            .collect()
    };
    let circle: Vec<(f64, f64)> = (0..16)
        .map(|i| {
            let angle = std::f64::consts::TAU * f64::from(i) / 16.0;
            (5.0 * angle.cos(), 5.0 * angle.sin())
        })
        .collect();
    match shape {
        MarkerShape::Circle => (around(&circle), true),
        MarkerShape::Ring => (around(&circle), false),
        MarkerShape::Triangle => (around(&[(0.0, -6.0), (5.5, 4.0), (-5.5, 4.0)]), true),
        MarkerShape::Square => (
            around(&[(-4.0, -4.0), (4.0, -4.0), (4.0, 4.0), (-4.0, 4.0)]),
            true,
        ),
        MarkerShape::Diamond => (around(&[(0.0, -6.0), (6.0, 0.0), (0.0, 6.0), (-6.0, 0.0)]), true),
        MarkerShape::Cross => (
            around(&[
                (-5.0, -3.5),
                (-3.5, -5.0),
                (0.0, -1.5),
                (3.5, -5.0),
                (5.0, -3.5),
                (1.5, 0.0),
                (5.0, 3.5),
                (3.5, 5.0),
                (0.0, 1.5),
                (-3.5, 5.0),
                (-5.0, 3.5),
                (-1.5, 0.0),
            ]),
            true,
        ),
    }
}

/// A legend entry of `shape` in `colour` at (x, y): a short line with the marker on it.
macro_rules! legend_entry {
    ($x:expr, $y:expr, $shape:expr, $colour:expr) => {{
        let (vertices, filled) = $crate::render::plots::inhibition::legend_shape($shape);
        let mut outline = vertices.clone();
        outline.push(vertices[0]);
        let fill = if filled { $colour.filled() } else { WHITE.filled() };
        EmptyElement::at(($x, $y))
            + PathElement::new(vec![(0, 0), (18, 0)], $colour.stroke_width(2))
            + Polygon::new(vertices, fill)
            + PathElement::new(outline, $colour.stroke_width(1))
    }};
}
pub(crate) use legend_entry;

impl Drawing for InhibitionPlot<'_> {
    fn name(&self) -> String {
        match self.kind {
            InhibitionPlotKind::Rate => format!("group-{}-inhibition", self.view.number),
            InhibitionPlotKind::Residuals => format!("group-{}-inhibition-residuals", self.view.number),
        }
    }

    fn title(&self) -> String {
        match self.kind {
            InhibitionPlotKind::Rate => format!(
                "Rate against [S] at each [I], global {} fit: {}",
                self.view.model, self.view.label
            ),
            InhibitionPlotKind::Residuals => {
                format!("Residuals of the global fit at each [I]: {}", self.view.label)
            }
        }
    }

    fn size(&self) -> (u32, u32) {
        match self.kind {
            InhibitionPlotKind::Rate => (640, 440),
            InhibitionPlotKind::Residuals => (640, 320),
        }
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), String> {
        drawn(root.fill(&WHITE))?;
        let view = self.view;
        let s_max = view.points.iter().map(|p| p.substrate).fold(0.0, f64::max);
        let x_range = (0.0, if s_max > 0.0 { s_max * 1.05 } else { 1.0 });
        let curves: Vec<Vec<(f64, f64)>> = (0..view.levels.len())
            .map(|level| {
                (0..=120)
                    .filter_map(|i| {
                        let s = x_range.1 * f64::from(i) / 120.0;
                        view.fitted(s, level).map(|v| (s, v))
                    })
                    .collect()
            })
            .collect();
        let residuals = view.residuals();
        let (y_range, y_desc) = match self.kind {
            InhibitionPlotKind::Rate => (
                padded_range(
                    view.points
                        .iter()
                        .map(|p| p.rate)
                        .chain(curves.iter().flatten().map(|p| p.1)),
                    true,
                ),
                format!("rate [{}]", view.rate_unit),
            ),
            InhibitionPlotKind::Residuals => {
                let largest = residuals.iter().map(|r| r.2.abs()).fold(0.0, f64::max);
                (
                    padded_range([-largest, largest], true),
                    format!("observed - fitted [{}]", view.rate_unit),
                )
            }
        };
        let mut chart = titled_chart(
            root,
            self.title(),
            BLACK,
            (x_range, y_range),
            (format!("[S] [{}]", view.substrate_unit), y_desc),
        )?;
        if self.kind == InhibitionPlotKind::Residuals {
            drawn(chart.draw_series(LineSeries::new([(x_range.0, 0.0), (x_range.1, 0.0)], FRAME_GREY)))?;
        }
        for (level, curve) in curves.iter().enumerate() {
            let (colour, shape) = level_style(level);
            let label = view.level_text(level);
            match self.kind {
                InhibitionPlotKind::Rate => {
                    let used: Vec<(f64, f64)> = view
                        .points
                        .iter()
                        .filter(|p| p.level == level && p.used)
                        .map(|p| (p.substrate, p.rate))
                        .collect();
                    let left_out: Vec<(f64, f64)> = view
                        .points
                        .iter()
                        .filter(|p| p.level == level && !p.used)
                        .map(|p| (p.substrate, p.rate))
                        .collect();
                    if !curve.is_empty() {
                        drawn(
                            chart.draw_series(LineSeries::new(curve.iter().copied(), colour.stroke_width(2))),
                        )?;
                    }
                    draw_markers(&mut chart, &used, shape, colour, false, 5)?;
                    // Left-out wells: the level's shape drawn open, so they read as not fitted.
                    draw_markers(&mut chart, &left_out, shape, colour, true, 5)?;
                }
                InhibitionPlotKind::Residuals => {
                    let points: Vec<(f64, f64)> = residuals
                        .iter()
                        .filter(|r| r.1 == level)
                        .map(|r| (r.0, r.2))
                        .collect();
                    draw_markers(&mut chart, &points, shape, colour, false, 5)?;
                }
            }
            // The legend entry: the level's line and marker (drawn off-chart, legend only).
            drawn(chart.draw_series(std::iter::empty::<Circle<(f64, f64), i32>>()))?
                .label(label)
                .legend(move |(x, y)| legend_entry!(x, y, shape, colour));
        }
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
