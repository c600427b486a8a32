//! The report's "Standard curves" section, shown only when the layout has standards: each curve's
//! plot and residuals, its statistics and warnings, and how its slope's uncertainty enters kcat.

use std::fmt::Write as _;

use super::html::escape;
use crate::core::format::significant;
use crate::pipeline::RunResults;
use crate::render::plots::{render_svg, CalibrationPlot};
use crate::signal::calibration::{CURVATURE_ALPHA, LOD_FACTOR, LOQ_FACTOR};

/// The section's HTML, or "" without standards.
pub fn calibration_section(results: &RunResults) -> String {
    let signal = &results.analysis.signal;
    let Some(calibration) = &signal.calibration else {
        return String::new();
    };
    let unit = calibration.unit.to_string();
    let mut html = String::from("<section id=\"calibration\">\n<h2>Standard curves</h2>\n");
    let _ = writeln!(
        html,
        "<p>Each standard's signal is its mean blank-corrected {} over the reads; the curve is fitted by {}. \
         LOD = {LOD_FACTOR} s/b and LOQ = {LOQ_FACTOR} s/b (ICH Q2(R1)); a quadratic term significant at the {:.0}% \
         level means the top bends: a straight line then ends at the highest level still linear (hollow points are \
         above it), or a second-order curve is fitted over every level (the default, <code>--standard-curve auto</code>), \
         whose slope where the samples read converts their rates. The relative SE of that slope is combined into the \
         SEs and intervals of Vmax, kcat and kcat/Km. Standards are only as good as their stock: \
         check them against your lab's validated procedure.</p>",
        signal.raw_unit,
        escape(calibration.curves.first().map_or("", |c| c.estimator)),
        100.0 * CURVATURE_ALPHA
    );
    for (index, curve) in calibration.curves.iter().enumerate() {
        let _ = writeln!(
            html,
            "<h3>Curve {}: {}</h3>",
            index + 1,
            escape(&curve.group_label())
        );
        for plot in CalibrationPlot::both(curve, index, &unit, signal.raw_unit) {
            match render_svg(&plot) {
                Ok(plot) => {
                    let _ = writeln!(
                        html,
                        "<figure class=\"group\">\n{}\n<figcaption>{}</figcaption>\n</figure>",
                        plot.svg,
                        escape(&plot.title)
                    );
                }
                Err(error) => {
                    let _ = writeln!(html, "<p>{}</p>", escape(&format!("plot not drawn: {error}")));
                }
            }
        }
        let line = &curve.line;
        let second_order = curve.quadratic.map(|term| {
            [
                (
                    "second-order term",
                    format!(
                        "{} &plusmn; {} {}/{unit}^2",
                        significant(term.coefficient),
                        significant(term.se),
                        signal.raw_unit
                    ),
                ),
                (
                    "slope where the samples read",
                    format!(
                        "{} {}/{unit} at {} {unit} (SE {:.2}%)",
                        significant(curve.local_slope(curve.working_concentration)),
                        signal.raw_unit,
                        significant(curve.working_concentration),
                        100.0 * curve.slope_relative_se()
                    ),
                ),
            ]
        });
        let rows = [
            ("calibration function", curve.model_words().to_string()),
            (
                if curve.quadratic.is_some() {
                    "slope at zero"
                } else {
                    "slope"
                },
                format!(
                    "{} &plusmn; {} {}/{unit}",
                    significant(line.slope),
                    significant(line.slope_se),
                    signal.raw_unit
                ),
            ),
            (
                "intercept",
                format!(
                    "{} &plusmn; {} {}",
                    significant(line.intercept),
                    significant(line.intercept_se),
                    signal.raw_unit
                ),
            ),
            ("R^2", format!("{:.5}", line.r_squared)),
            (
                "residual SD",
                format!("{} {}", significant(line.residual_sd), signal.raw_unit),
            ),
            (
                "LOD / LOQ",
                format!("{} / {} {unit}", significant(curve.lod), significant(curve.loq)),
            ),
            (
                "range fitted",
                format!(
                    "{} to {} {unit}",
                    significant(curve.range.0),
                    significant(curve.range.1)
                ),
            ),
            (
                "standards",
                format!(
                    "{} wells, {} fitted",
                    curve.wells.len(),
                    curve.wells.iter().filter(|w| w.used).count()
                ),
            ),
        ];
        html.push_str("<table class=\"calibration\">\n");
        for (name, value) in rows.into_iter().chain(second_order.into_iter().flatten()) {
            let _ = writeln!(html, "<tr><th>{}</th><td>{value}</td></tr>", escape(name));
        }
        html.push_str("</table>\n");
        if !curve.warnings.is_empty() {
            html.push_str("<ul>\n");
            for warning in &curve.warnings {
                let _ = writeln!(html, "<li>{}</li>", escape(warning));
            }
            html.push_str("</ul>\n");
        }
    }
    html.push_str("</section>\n");
    html
}
