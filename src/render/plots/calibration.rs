//! The standard curve's plots: signal against concentration with the fitted line (or
//! second-order curve) over its range (standards above the highest linear concentration drawn
//! hollow), and the residuals. Text sizes are chosen so that the SVG's text is at least 11 px
//! (plotters writes a font of size f as about 0.806 f px: 14 -> 11.3 px).

use plotters::coord::Shift;
use plotters::prelude::*;

use super::palette::{BLACK, BLUE, FRAME_GREY, VERMILLION};
use super::{drawn, padded_range, titled_chart, Drawing};
use crate::signal::calibration::StandardCurve;

/// Which of the two plots.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum CalibrationPlotKind {
    /// Signal against concentration with the line.
    Curve,
    /// Signal minus the line against concentration.
    Residuals,
}

/// One plot of one curve.
pub struct CalibrationPlot<'a> {
    /// The curve.
    pub curve: &'a StandardCurve,
    /// Its position among the plate's curves (for the file name).
    pub index: usize,
    /// Which plot.
    pub kind: CalibrationPlotKind,
    /// Concentration unit.
    pub unit: String,
    /// Signal unit (`RFU`).
    pub signal_unit: &'static str,
}

impl<'a> CalibrationPlot<'a> {
    /// The curve's two plots (the curve, then its residuals), as the report and `plots/` draw them.
    pub fn both(
        curve: &'a StandardCurve,
        index: usize,
        unit: &str,
        signal_unit: &'static str,
    ) -> [CalibrationPlot<'a>; 2] {
        [CalibrationPlotKind::Curve, CalibrationPlotKind::Residuals].map(|kind| CalibrationPlot {
            curve,
            index,
            kind,
            unit: unit.to_string(),
            signal_unit,
        })
    }
}

impl Drawing for CalibrationPlot<'_> {
    fn name(&self) -> String {
        match self.kind {
            CalibrationPlotKind::Curve => format!("standard-curve-{}", self.index + 1),
            CalibrationPlotKind::Residuals => format!("standard-residuals-{}", self.index + 1),
        }
    }

    fn title(&self) -> String {
        match self.kind {
            CalibrationPlotKind::Curve => format!("Standard curve ({})", self.curve.group_label()),
            CalibrationPlotKind::Residuals => {
                format!("Standard curve residuals ({})", self.curve.group_label())
            }
        }
    }

    fn size(&self) -> (u32, u32) {
        (600, 400)
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), String> {
        drawn(root.fill(&WHITE))?;
        let curve = self.curve;
        let x_max = curve.wells.iter().map(|w| w.concentration).fold(0.0, f64::max);
        let x_range = (0.0, if x_max > 0.0 { x_max * 1.05 } else { 1.0 });
        let point = |well: &crate::signal::calibration::StandardWell| match self.kind {
            CalibrationPlotKind::Curve => (well.concentration, well.signal),
            CalibrationPlotKind::Residuals => (well.concentration, well.residual),
        };
        let y_range = match self.kind {
            CalibrationPlotKind::Curve => padded_range(curve.wells.iter().map(|w| w.signal), true),
            CalibrationPlotKind::Residuals => {
                let largest = curve.wells.iter().map(|w| w.residual.abs()).fold(0.0, f64::max);
                padded_range([-largest, largest], true)
            }
        };
        let mut chart = titled_chart(
            root,
            self.title(),
            BLACK,
            (x_range, y_range),
            (
                format!("concentration [{}]", self.unit),
                match self.kind {
                    CalibrationPlotKind::Curve => format!("blank-corrected signal [{}]", self.signal_unit),
                    CalibrationPlotKind::Residuals => format!("signal - curve [{}]", self.signal_unit),
                },
            ),
        )?;
        match self.kind {
            CalibrationPlotKind::Curve => {
                // A line needs its two ends; a second-order curve is drawn through 60 steps.
                let steps = if curve.quadratic.is_some() { 60 } else { 1 };
                let (low, high) = curve.range;
                drawn(chart.draw_series(LineSeries::new(
                    (0..=steps).map(|i| {
                        let c = low + (high - low) * f64::from(i) / f64::from(steps);
                        (c, curve.signal_at(c))
                    }),
                    BLACK.stroke_width(2),
                )))?;
            }
            CalibrationPlotKind::Residuals => {
                drawn(chart.draw_series(LineSeries::new([(x_range.0, 0.0), (x_range.1, 0.0)], FRAME_GREY)))?;
            }
        }
        drawn(
            chart.draw_series(
                curve
                    .wells
                    .iter()
                    .filter(|w| w.used)
                    .map(|w| Circle::new(point(w), 4, BLUE.filled())),
            ),
        )?;
        drawn(
            chart.draw_series(
                curve
                    .wells
                    .iter()
                    .filter(|w| !w.used)
                    .map(|w| Circle::new(point(w), 5, VERMILLION.stroke_width(2))),
            ),
        )?;
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::config::StandardCurveModel;
    use crate::render::plots::render_svg;
    use crate::signal::calibration::{fit_standard_curve, StandardReads, WeightedStraightLine};

    /// Every text of the SVG is at least 11 px (the report's rule for plot text).
    #[test]
    fn the_svg_text_is_at_least_eleven_pixels() {
        let times = [0.0, 10.0, 20.0, 30.0];
        let blank = [0.0; 4];
        let raws: Vec<crate::import::Readings> = (0..4)
            .map(|i| vec![Some(100.0 * f64::from(i) + 1.0); 4].into_iter().collect())
            .collect();
        let reads: Vec<StandardReads> = raws
            .iter()
            .enumerate()
            .map(|(i, raw)| StandardReads {
                well: crate::core::plate::WellId::new(0, i as u16),
                concentration: i as f64,
                times_s: &times,
                raw,
                blank: &blank,
            })
            .collect();
        let curve = fit_standard_curve(
            Vec::new(),
            &reads,
            crate::core::units::ConcentrationUnit::Micromolar,
            &WeightedStraightLine,
            StandardCurveModel::Line,
        )
        .unwrap();
        for kind in [CalibrationPlotKind::Curve, CalibrationPlotKind::Residuals] {
            let plot = render_svg(&CalibrationPlot {
                curve: &curve,
                index: 0,
                kind,
                unit: "uM".into(),
                signal_unit: "RFU",
            })
            .unwrap();
            let sizes: Vec<f64> = plot
                .svg
                .split("font-size=\"")
                .skip(1)
                .filter_map(|rest| rest.split('"').next()?.parse().ok())
                .collect();
            assert!(!sizes.is_empty());
            assert!(sizes.iter().all(|size| *size >= 11.0), "{sizes:?}");
        }
    }
}
