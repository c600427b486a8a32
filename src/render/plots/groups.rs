//! Per-group plots of the Michaelis-Menten fit: rate against [S] with every replicate well, the
//! fitted curve and its 95% confidence band; residuals against [S]; and the double-reciprocal view,
//! drawn and labelled as a diagnostic only.
//!
//! The band is the delta method on the fitted mean: for v(S) = Vmax S / (Km + S) with gradient
//! g = [S/(Km+S), -Vmax S/(Km+S)^2] and parameter covariance C (from the fit's standard errors
//! and their correlation, s^2 (J^T J)^-1), Var v(S) = g^T C g, and the band is
//! v(S) ± t(0.975, n-2) sqrt(Var v(S)). Assumes the asymptotic normality the standard errors
//! already assume; it is a band for the mean curve, not for new wells.
//! References: Bates and Watts (1988), Nonlinear Regression Analysis and Its Applications, ch. 2
//! (linear approximation inference bands); the double-reciprocal caveat: Smith, McCarty and
//! Kitanidis (1998), Appl Environ Microbiol 64:2044.

use plotters::coord::Shift;
use plotters::prelude::*;

use super::palette::{BLACK, BLUE, FRAME_GREY, ORANGE, SKY_BLUE, VERMILLION};
use super::{drawn, padded_range, text_style, titled_chart, Drawing};
use crate::core::stats::t_critical;
use crate::groups::{GroupFit, LeftOutPlace};
use crate::pipeline::RunResults;
use crate::render::words::{group_label, left_out_words};

/// One replicate well of a group.
#[derive(Debug, Clone, PartialEq)]
pub struct GroupPoint {
    /// Well ID.
    pub well: String,
    /// Substrate concentration.
    pub substrate: f64,
    /// Rate.
    pub rate: f64,
}

/// A group's data and fit, ready to draw.
#[derive(Debug, Clone)]
pub struct GroupView {
    /// One-based number of the group in the run (for file names).
    pub number: usize,
    /// Its label (`variant=FenA-wt, enzyme [nM]=4`).
    pub label: String,
    /// Wells fitted.
    pub used: Vec<GroupPoint>,
    /// Wells left out that still have a rate, with the reason.
    pub left_out: Vec<(GroupPoint, String)>,
    /// (Vmax, Km) when a fit exists.
    pub estimates: Option<(f64, f64)>,
    /// Covariance of (Vmax, Km): [var Vmax, cov, var Km], when the standard errors exist.
    pub covariance: Option<[f64; 3]>,
    /// The Lineweaver-Burk straight line (slope, intercept) of 1/v on 1/S, when computed.
    pub lineweaver_burk: Option<(f64, f64)>,
    /// Rate unit.
    pub rate_unit: String,
    /// Substrate unit.
    pub substrate_unit: String,
}

impl GroupView {
    /// The fitted mean rate at `substrate`.
    pub fn fitted(&self, substrate: f64) -> Option<f64> {
        self.estimates
            .map(|(vmax, km)| vmax * substrate / (km + substrate))
    }

    /// Residuals (S, v - v_fit) of the fitted wells.
    pub fn residuals(&self) -> Vec<(f64, f64)> {
        self.used
            .iter()
            .filter_map(|p| self.fitted(p.substrate).map(|f| (p.substrate, p.rate - f)))
            .collect()
    }
}

/// Mean curve and 95% band at `substrate`: (fit, low, high). See the module docs for the formula.
pub fn mean_band(
    vmax: f64,
    km: f64,
    covariance: [f64; 3],
    t_quantile: f64,
    substrate: f64,
) -> (f64, f64, f64) {
    let denominator = km + substrate;
    let fit = vmax * substrate / denominator;
    let d_vmax = substrate / denominator;
    let d_km = -vmax * substrate / (denominator * denominator);
    let [var_vmax, cov, var_km] = covariance;
    let variance = d_vmax * d_vmax * var_vmax + 2.0 * d_vmax * d_km * cov + d_km * d_km * var_km;
    let half = t_quantile * variance.max(0.0).sqrt();
    (fit, fit - half, fit + half)
}

/// Builds the view of every group of a run.
pub fn group_plots(results: &RunResults) -> Vec<GroupView> {
    results
        .fits
        .iter()
        .enumerate()
        .map(|(index, fit)| group_view(index + 1, fit, results))
        .collect()
}

fn group_view(number: usize, fit: &GroupFit, results: &RunResults) -> GroupView {
    let point = |name: &str| -> Option<GroupPoint> {
        let well = results
            .analysis
            .wells
            .iter()
            .find(|w| w.well.to_string() == name)?;
        Some(GroupPoint {
            well: name.to_string(),
            substrate: well.setup.substrate?,
            // In the written unit, like the fitted constants drawn with it.
            rate: results.rates_in.rate(well.rate_value?),
        })
    };
    let used = fit.wells_used.iter().filter_map(|name| point(name)).collect();
    let left_out = fit
        .wells_left_out
        .iter()
        .filter_map(|left| match left.place {
            LeftOutPlace::Well(well) => Some((point(&well.to_string())?, left_out_words(&left.reason))),
            LeftOutPlace::Row(_) => None,
        })
        .collect();
    let vmax = fit.parameters.get("Vmax");
    let km = fit.parameters.get("Km");
    let estimates = vmax.zip(km).map(|(v, k)| (v.value, k.value));
    let covariance = match (
        vmax.and_then(|v| v.se),
        km.and_then(|k| k.se),
        fit.correlation_vmax_km,
    ) {
        (Some(se_v), Some(se_k), Some(rho)) if se_v.is_finite() && se_k.is_finite() && rho.is_finite() => {
            Some([se_v * se_v, rho * se_v * se_k, se_k * se_k])
        }
        _ => None,
    };
    let lineweaver_burk = fit
        .linearised
        .and_then(|linearised| linearised.lineweaver_burk)
        .map(|lb| (lb.slope, lb.intercept));
    GroupView {
        number,
        label: group_label(&fit.group),
        used,
        left_out,
        estimates,
        covariance,
        lineweaver_burk,
        rate_unit: results.rates_in.unit.clone(),
        substrate_unit: results
            .layout
            .substrate_unit
            .map_or_else(|| "substrate units".to_string(), |u| u.to_string()),
    }
}

/// Which view of a group.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum GroupPlotKind {
    /// Rate against [S] with the fit and band.
    Rate,
    /// Residuals against [S].
    Residuals,
    /// 1/v against 1/S, a diagnostic only.
    DoubleReciprocal,
}

impl GroupPlotKind {
    /// All three, in report order.
    pub const ALL: [GroupPlotKind; 3] = [Self::Rate, Self::Residuals, Self::DoubleReciprocal];

    fn stem(self) -> &'static str {
        match self {
            Self::Rate => "rate",
            Self::Residuals => "residuals",
            Self::DoubleReciprocal => "double-reciprocal",
        }
    }
}

/// One plot of a group.
pub struct GroupPlot<'a> {
    /// The group.
    pub view: &'a GroupView,
    /// Which plot.
    pub kind: GroupPlotKind,
}

impl Drawing for GroupPlot<'_> {
    fn name(&self) -> String {
        format!("group-{}-{}", self.view.number, self.kind.stem())
    }

    fn title(&self) -> String {
        match self.kind {
            GroupPlotKind::Rate => format!("Rate against [S]: {}", self.view.label),
            GroupPlotKind::Residuals => format!("Residuals: {}", self.view.label),
            GroupPlotKind::DoubleReciprocal => {
                format!("Diagnostic only, double-reciprocal view: {}", self.view.label)
            }
        }
    }

    fn size(&self) -> (u32, u32) {
        match self.kind {
            GroupPlotKind::Rate => (640, 420),
            _ => (640, 300),
        }
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), String> {
        drawn(root.fill(&WHITE))?;
        match self.kind {
            GroupPlotKind::Rate => self.draw_rate(root),
            GroupPlotKind::Residuals => self.draw_residuals(root),
            GroupPlotKind::DoubleReciprocal => self.draw_double_reciprocal(root),
        }
    }
}

impl GroupPlot<'_> {
    fn substrate_axis(&self) -> String {
        format!("[S] [{}]", self.view.substrate_unit)
    }

    fn draw_rate<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), String> {
        let view = self.view;
        let all_points = view.used.iter().chain(view.left_out.iter().map(|(p, _)| p));
        let s_max = all_points.clone().map(|p| p.substrate).fold(0.0, f64::max);
        let x_range = (0.0, if s_max > 0.0 { s_max * 1.05 } else { 1.0 });
        let curve: Vec<(f64, f64, f64, f64)> = match (view.estimates, view.covariance) {
            (Some((vmax, km)), covariance) => {
                let t = t_critical(0.05, view.used.len().saturating_sub(2));
                // With no residual degrees of freedom there is no band, but the curve still shows.
                let covariance = covariance.filter(|_| t.is_finite());
                (0..=120)
                    .map(|i| {
                        let s = x_range.1 * f64::from(i) / 120.0;
                        match covariance {
                            Some(c) => {
                                let (fit, low, high) = mean_band(vmax, km, c, t, s);
                                (s, fit, low, high)
                            }
                            None => {
                                let fit = vmax * s / (km + s);
                                (s, fit, fit, fit)
                            }
                        }
                    })
                    .filter(|p| p.1.is_finite() && p.2.is_finite() && p.3.is_finite())
                    .collect()
            }
            _ => Vec::new(),
        };
        let y_values = all_points
            .map(|p| p.rate)
            .chain(curve.iter().flat_map(|p| [p.1, p.2, p.3]));
        let y_range = padded_range(y_values, true);
        let mut chart = titled_chart(
            root,
            self.title(),
            BLACK,
            (x_range, y_range),
            (self.substrate_axis(), format!("rate [{}]", view.rate_unit)),
        )?;
        let has_band = curve.iter().any(|p| p.3 > p.2);
        if has_band {
            let mut polygon: Vec<(f64, f64)> = curve.iter().map(|p| (p.0, p.3)).collect();
            polygon.extend(curve.iter().rev().map(|p| (p.0, p.2)));
            drawn(chart.draw_series(std::iter::once(Polygon::new(
                polygon,
                SKY_BLUE.mix(0.35).filled(),
            ))))?
            .label("95% band of the fitted mean (delta method)")
            .legend(|(x, y)| Rectangle::new([(x, y - 5), (x + 16, y + 5)], SKY_BLUE.mix(0.35).filled()));
        }
        if !curve.is_empty() {
            drawn(chart.draw_series(LineSeries::new(
                curve.iter().map(|p| (p.0, p.1)),
                BLACK.stroke_width(2),
            )))?
            .label("Michaelis-Menten fit")
            .legend(|(x, y)| PathElement::new(vec![(x, y), (x + 16, y)], BLACK.stroke_width(2)));
        }
        drawn(
            chart.draw_series(
                view.used
                    .iter()
                    .map(|p| Circle::new((p.substrate, p.rate), 4, BLUE.filled())),
            ),
        )?
        .label("replicate wells (fitted)")
        .legend(|(x, y)| Circle::new((x + 8, y), 4, BLUE.filled()));
        if !view.left_out.is_empty() {
            drawn(
                chart.draw_series(
                    view.left_out
                        .iter()
                        .map(|(p, _)| Cross::new((p.substrate, p.rate), 5, VERMILLION.stroke_width(2))),
                ),
            )?
            .label("left out (flagged)")
            .legend(|(x, y)| Cross::new((x + 8, y), 5, VERMILLION.stroke_width(2)));
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

    fn draw_residuals<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), String> {
        let view = self.view;
        let residuals = view.residuals();
        let s_max = residuals.iter().map(|p| p.0).fold(0.0, f64::max);
        let x_range = (0.0, if s_max > 0.0 { s_max * 1.05 } else { 1.0 });
        let largest = residuals.iter().map(|p| p.1.abs()).fold(0.0, f64::max);
        let y_range = padded_range([-largest, largest], true);
        let mut chart = titled_chart(
            root,
            self.title(),
            BLACK,
            (x_range, y_range),
            (
                self.substrate_axis(),
                format!("observed - fitted [{}]", view.rate_unit),
            ),
        )?;
        drawn(chart.draw_series(LineSeries::new([(x_range.0, 0.0), (x_range.1, 0.0)], FRAME_GREY)))?;
        drawn(chart.draw_series(residuals.iter().map(|p| Circle::new(*p, 4, BLUE.filled()))))?;
        Ok(())
    }

    fn draw_double_reciprocal<DB: DrawingBackend>(
        &self,
        root: &DrawingArea<DB, Shift>,
    ) -> Result<(), String> {
        let view = self.view;
        let points: Vec<(f64, f64)> = view
            .used
            .iter()
            .filter(|p| p.substrate > 0.0 && p.rate > 0.0)
            .map(|p| (1.0 / p.substrate, 1.0 / p.rate))
            .collect();
        let x_max = points.iter().map(|p| p.0).fold(0.0, f64::max);
        let x_range = (0.0, if x_max > 0.0 { x_max * 1.05 } else { 1.0 });
        let nonlinear_line: Option<[(f64, f64); 2]> = view
            .estimates
            .filter(|(vmax, _)| *vmax > 0.0)
            .map(|(vmax, km)| [x_range.0, x_range.1].map(|x| (x, 1.0 / vmax + km / vmax * x)));
        let straight_line: Option<[(f64, f64); 2]> = view
            .lineweaver_burk
            .map(|(slope, intercept)| [x_range.0, x_range.1].map(|x| (x, intercept + slope * x)));
        let y_values = points
            .iter()
            .map(|p| p.1)
            .chain(nonlinear_line.iter().flatten().map(|p| p.1))
            .chain(straight_line.iter().flatten().map(|p| p.1));
        let y_range = padded_range(y_values, true);
        let mut chart = titled_chart(
            root,
            self.title(),
            VERMILLION,
            (x_range, y_range),
            (
                format!("1/[S] [1/{}]", view.substrate_unit),
                format!("1/rate [1/({})]", view.rate_unit),
            ),
        )?;
        if let Some(line) = nonlinear_line {
            drawn(chart.draw_series(LineSeries::new(line, BLACK.stroke_width(2))))?
                .label("nonlinear fit, transformed (the estimate)")
                .legend(|(x, y)| PathElement::new(vec![(x, y), (x + 16, y)], BLACK.stroke_width(2)));
        }
        if let Some(line) = straight_line {
            drawn(chart.draw_series(DashedLineSeries::new(line, 6, 4, ORANGE.stroke_width(2))))?
                .label("straight line through 1/v (distorts errors; not the estimate)")
                .legend(|(x, y)| PathElement::new(vec![(x, y), (x + 16, y)], ORANGE.stroke_width(2)));
        }
        drawn(chart.draw_series(points.iter().map(|p| Circle::new(*p, 4, BLUE.filled()))))?
            .label("wells, 1/v against 1/[S]")
            .legend(|(x, y)| Circle::new((x + 8, y), 4, BLUE.filled()));
        drawn(
            chart
                .configure_series_labels()
                .label_font(text_style(super::text_px::TICK, BLACK))
                .background_style(WHITE.mix(0.85))
                .border_style(FRAME_GREY)
                .position(SeriesLabelPosition::UpperLeft)
                .draw(),
        )?;
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// With no uncertainty the band collapses onto the curve; at S = Km the curve is Vmax/2
    /// (Michaelis-Menten definition), and with var Vmax only the half-width is t se(Vmax) / 2.
    #[test]
    fn band_follows_the_delta_method() {
        let (fit, low, high) = mean_band(10.0, 5.0, [0.0, 0.0, 0.0], 2.0, 5.0);
        assert_eq!((fit, low, high), (5.0, 5.0, 5.0));
        let (fit, low, high) = mean_band(10.0, 5.0, [4.0, 0.0, 0.0], 2.0, 5.0);
        assert!((fit - 5.0).abs() < 1e-12);
        assert!((high - fit - 2.0 * 2.0 * 0.5).abs() < 1e-12, "{high}");
        assert!((fit - low - 2.0).abs() < 1e-12);
        // A Km-only variance vanishes at S = 0 and at very large S.
        let (_, low0, high0) = mean_band(10.0, 5.0, [0.0, 0.0, 1.0], 2.0, 0.0);
        assert_eq!(low0, high0);
        let (fit_far, low_far, _) = mean_band(10.0, 5.0, [0.0, 0.0, 1.0], 2.0, 1e9);
        assert!((fit_far - low_far) < 1e-6);
    }

    proptest::proptest! {
        /// For any positive-semidefinite covariance the band holds the curve and is symmetric
        /// about it (common practice: a delta-method interval is fit +- t sd).
        #[test]
        fn band_brackets_the_curve(
            vmax in 0.01f64..1e3,
            km in 0.01f64..1e3,
            sd_v in 0.0f64..10.0,
            sd_k in 0.0f64..10.0,
            rho in -1.0f64..1.0,
            substrate in 0.0f64..1e4,
        ) {
            let covariance = [sd_v * sd_v, rho * sd_v * sd_k, sd_k * sd_k];
            let (fit, low, high) = mean_band(vmax, km, covariance, 2.0, substrate);
            proptest::prop_assert!(low <= fit + 1e-12 * fit.abs() && fit <= high + 1e-12 * fit.abs());
            proptest::prop_assert!(((high - fit) - (fit - low)).abs() <= 1e-9 * (1.0 + fit.abs()));
        }
    }

    /// Two wells leave no degrees of freedom: the curve is drawn without a band, and nothing fails.
    #[test]
    fn two_point_group_draws_its_curve_without_a_band() {
        let view = GroupView {
            number: 1,
            label: "two wells".into(),
            used: vec![
                GroupPoint {
                    well: "A1".into(),
                    substrate: 10.0,
                    rate: 1.0,
                },
                GroupPoint {
                    well: "A2".into(),
                    substrate: 100.0,
                    rate: 3.0,
                },
            ],
            left_out: Vec::new(),
            estimates: Some((4.0, 30.0)),
            covariance: Some([0.1, 0.0, 1.0]),
            lineweaver_burk: None,
            rate_unit: "uM/s".into(),
            substrate_unit: "uM".into(),
        };
        let plot = crate::render::plots::render_svg(&GroupPlot {
            view: &view,
            kind: GroupPlotKind::Rate,
        })
        .unwrap();
        assert!(plot.svg.contains("Michaelis-Menten fit"));
        assert!(!plot.svg.contains("95% band"));
        for kind in GroupPlotKind::ALL {
            crate::render::plots::render_svg(&GroupPlot { view: &view, kind }).unwrap();
        }
    }

    #[test]
    fn demo_groups_have_fits_bands_and_residuals() {
        let results = crate::render::report::tests::demo_results();
        let views = group_plots(&results);
        assert_eq!(views.len(), results.fits.len());
        for view in &views {
            assert!(view.estimates.is_some(), "{}", view.label);
            assert!(view.covariance.is_some(), "{}", view.label);
            assert_eq!(view.residuals().len(), view.used.len());
            let rss: f64 = view.residuals().iter().map(|r| r.1 * r.1).sum();
            assert!(rss.is_finite() && rss > 0.0);
        }
    }
}
