//! The report's screening section: the plate's quality figures, the ranked compound table, a
//! small-multiples panel of dose-response thumbnails (observed % activity, the fitted curve, the
//! IC50 marked, flags as words) and the % activity heat map of the plate; and, on any plate, the
//! wells excluded by hand with their reasons. Hand-written SVG, one small drawing per compound,
//! every text at least 11 px, so that 150 compounds stay a light page.

use std::fmt::Write as _;

use super::html::escape;
use crate::core::format::significant;
use crate::core::plate::{row_label, WellId};
use crate::fit::dose_response::{DoseResponseCurve, FourParameterLogistic, Ic50Qualifier};
use crate::layout::Role;
use crate::pipeline::RunResults;
use crate::render::screen::{
    flag_words, plateau_rule_words, quality_warnings, ScreenAnswer, CHENG_PRUSOFF_WORDS, SUMMARY_COMPOUNDS,
};
use crate::screen::{CompoundResult, ScreenAnalysis};

/// Smallest text in the drawings, px.
const TEXT_PX: u32 = 11;
/// A thumbnail's size, px.
const THUMB_WIDTH: f64 = 170.0;
const THUMB_HEIGHT: f64 = 120.0;
/// The % activity axis of the thumbnails.
const ACTIVITY_AXIS: (f64, f64) = (-20.0, 130.0);

/// The screening section and the exclusions list ("" when the run has neither).
pub fn screen_section(results: &RunResults) -> String {
    let mut html = String::new();
    if let Some(screen) = &results.screen {
        html.push_str("<section id=\"screen\">\n<h2>Screen: plate quality and compounds</h2>\n");
        html.push_str(&quality_html(screen));
        html.push_str(&compound_table(screen));
        html.push_str(&thumbnails(screen));
        html.push_str(&heat_map(results, screen));
        html.push_str("</section>\n");
    }
    if !results.exclusions.is_empty() {
        html.push_str("<section id=\"excluded\">\n<h2>Wells excluded by hand</h2>\n<table>\n<tr><th>well</th><th>reason</th><th>asked for in</th></tr>\n");
        for exclusion in &results.exclusions {
            let _ = writeln!(
                html,
                "<tr><td>{}</td><td>{}</td><td>{}</td></tr>",
                exclusion.well,
                escape(&exclusion.reason),
                escape(&exclusion.origin)
            );
        }
        html.push_str("</table>\n<p>These wells are in <code>wells.csv</code> with <code>used</code> false and the reason in <code>notes</code>; <code>settings.toml</code> records them so the run repeats.</p>\n</section>\n");
    }
    html
}

/// The results block of a screening plate (inside the page's Results section): the screen's answer
/// in a sentence (compounds, actives, inactive, flagged, Z'), the most potent actives with their
/// IC50 and 95% interval, and the inactive compounds by name; the full table follows in the
/// Screen section.
pub fn screen_results_html(screen: &ScreenAnalysis) -> String {
    let answer = ScreenAnswer::of(screen);
    let unit = escape(&answer.unit);
    let mut html = format!(
        "<p><strong>{}</strong>.</p>
",
        escape(&answer.headline())
    );
    if !answer.actives.is_empty() {
        let _ = writeln!(
            html,
            "<p>The {} most potent active compounds (IC50 and profile 95% interval); every compound, the plate quality and the curves are in <a href=\"#screen\">Screen</a>.</p>",
            answer.actives.len().min(SUMMARY_COMPOUNDS)
        );
        let _ = writeln!(
            html,
            "<table class=\"results\">\n<thead><tr><th scope=\"col\">compound</th><th scope=\"col\">IC50 [{unit}]</th><th scope=\"col\">95% interval</th><th scope=\"col\">flags</th></tr></thead>\n<tbody>"
        );
        for compound in answer.actives.iter().take(SUMMARY_COMPOUNDS) {
            let rank = screen
                .compounds
                .iter()
                .position(|c| std::ptr::eq(c, *compound))
                .map_or(0, |at| at + 1);
            let interval = match compound.ic50_ci95() {
                [None, None] => "-".to_string(),
                [low, high] => format!(
                    "{} to {}",
                    low.map_or("open".to_string(), significant),
                    high.map_or("open".to_string(), significant)
                ),
            };
            let _ = writeln!(
                html,
                "<tr><th scope=\"row\"><a href=\"#cpd-{rank}\">{}</a></th><td class=\"num\">{}</td><td class=\"num\">{interval}</td><td>{}</td></tr>",
                escape(&compound.name),
                escape(&ic50_text(compound)),
                escape(&flag_words(&compound.fit.flags))
            );
        }
        html.push_str("</tbody>\n</table>\n");
    }
    if !answer.above.is_empty() {
        let names: Vec<String> = answer.above.iter().map(|c| escape(&c.name)).collect();
        let _ = writeln!(
            html,
            "<p>Inactive (activity above 50% up to the highest dose; IC50 reported as &gt; that dose): {}.</p>",
            names.join(", ")
        );
    }
    html
}

fn figure(value: Option<f64>) -> String {
    value.map_or_else(|| "-".to_string(), |v| format!("{v:.2}"))
}

fn quality_html(screen: &ScreenAnalysis) -> String {
    let quality = &screen.quality;
    let mut html = String::from("<h3>Plate quality</h3>\n<table>\n<tr><th>figure</th><th>value</th></tr>\n");
    let rows = [
        (
            "Z' (Zhang, Chung and Oldenburg 1999)",
            figure(quality.z_prime.as_ref().map(|z| z.value)),
        ),
        ("signal window", figure(quality.signal_window)),
        ("signal-to-background", figure(quality.signal_to_background)),
        (
            "uninhibited controls: n, CV %",
            format!(
                "{}, {}",
                quality.uninhibited.n,
                figure(quality.uninhibited.cv_percent)
            ),
        ),
        (
            "inhibited controls: n, CV %",
            format!(
                "{}, {}",
                quality.inhibited.n,
                figure(quality.inhibited.cv_percent)
            ),
        ),
    ];
    for (name, value) in rows {
        let _ = writeln!(
            html,
            "<tr><td>{}</td><td class=\"num\">{}</td></tr>",
            escape(name),
            escape(&value)
        );
    }
    for check in &quality.edge {
        let _ = writeln!(
            html,
            "<tr><td>edge check, {} controls: outer {} wells vs inner {}</td><td class=\"num\">{:+.1}% of the window{}</td></tr>",
            check.role,
            check.edge.0,
            check.inner.0,
            check.difference_percent,
            if check.flagged { " (flagged)" } else { "" }
        );
    }
    html.push_str("</table>\n");
    for warning in quality_warnings(screen) {
        let _ = writeln!(html, "<p class=\"warn\">{}</p>", escape(&warning));
    }
    html.push_str("<p>% activity = 100 (v - mean inhibited) / (mean uninhibited - mean inhibited), from the used control wells of the same plate");
    if !screen.control_factors.is_empty() {
        let _ = write!(
            html,
            " and the same {}",
            escape(&screen.control_factors.join(", "))
        );
    }
    html.push_str(". Rates near zero or below are data and are kept.</p>\n");
    html
}

fn unit_of(screen: &ScreenAnalysis) -> String {
    screen
        .inhibitor_unit
        .map_or_else(|| "dose unit".to_string(), |unit| unit.to_string())
}

fn ic50_text(compound: &CompoundResult) -> String {
    let value = significant(compound.ic50());
    match compound.fit.qualifier {
        Ic50Qualifier::Equal => value,
        other => format!("{} {value}", other.sign()),
    }
}

fn compound_table(screen: &ScreenAnalysis) -> String {
    let unit = escape(&unit_of(screen));
    let mut html = format!(
        "<h3>Compounds, most potent first</h3>\n<p>{}</p>\n<div class=\"scroll\"><table>\n<tr><th>rank</th><th>compound</th><th>IC50 [{unit}]</th><th>95% interval (profile)</th><th>hill</th><th>top [%]</th><th>bottom [%]</th><th>n</th><th>flags</th>{}</tr>\n",
        escape(&plateau_rule_words()),
        if screen.cheng_prusoff.is_some() {
            format!("<th>Ki [{unit}] (competitive assumed)</th>")
        } else {
            String::new()
        }
    );
    for (rank, compound) in screen.compounds.iter().enumerate() {
        let [low, high] = compound.ic50_ci95();
        let interval = match compound.fit.qualifier {
            Ic50Qualifier::Equal => format!(
                "{} to {}",
                low.map_or("open".to_string(), significant),
                high.map_or("open".to_string(), significant)
            ),
            _ => "-".to_string(),
        };
        let parameter = |index: usize, fixed: bool| {
            compound.fit.parameters.map_or("-".to_string(), |p| {
                format!("{}{}", significant(p[index]), if fixed { " (fixed)" } else { "" })
            })
        };
        let _ = write!(
            html,
            "<tr><td class=\"num\">{}</td><td><a href=\"#cpd-{}\">{}</a></td><td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td><td>{}</td>",
            rank + 1,
            rank + 1,
            escape(&compound.name),
            escape(&ic50_text(compound)),
            interval,
            parameter(3, false),
            parameter(0, compound.fit.top_fixed),
            parameter(1, compound.fit.bottom_fixed),
            compound.fit.n_points,
            escape(&flag_words(&compound.fit.flags))
        );
        if screen.cheng_prusoff.is_some() {
            let ki = compound
                .ki
                .map_or("-".to_string(), |ki| match compound.fit.qualifier {
                    Ic50Qualifier::Equal => significant(ki),
                    other => format!("{} {}", other.sign(), significant(ki)),
                });
            let _ = write!(html, "<td class=\"num\">{}</td>", escape(&ki));
        }
        html.push_str("</tr>\n");
    }
    html.push_str("</table></div>\n");
    if let Some(cp) = screen.cheng_prusoff {
        let _ = writeln!(
            html,
            "<p class=\"warn\">{} (here Km {} and [S] {} in the substrate unit).</p>",
            escape(CHENG_PRUSOFF_WORDS),
            significant(cp.km),
            significant(cp.substrate)
        );
    }
    html
}

/// One compound's thumbnail: observed points (hollow when not used), the fitted curve, the IC50
/// marked (a dashed line at `=`, an arrow at a bound), its name, IC50 and flags as words.
fn thumbnail(rank: usize, compound: &CompoundResult, low: f64, high: f64) -> String {
    let (left, right, top, bottom) = (8.0, THUMB_WIDTH - 6.0, 30.0, THUMB_HEIGHT - 18.0);
    let x_of = |log_dose: f64| left + (log_dose - low) / (high - low).max(1e-9) * (right - left);
    let y_of = |activity: f64| {
        let clamped = activity.clamp(ACTIVITY_AXIS.0, ACTIVITY_AXIS.1);
        bottom - (clamped - ACTIVITY_AXIS.0) / (ACTIVITY_AXIS.1 - ACTIVITY_AXIS.0) * (bottom - top)
    };
    let mut svg = format!(
        "<svg id=\"cpd-{}\" xmlns=\"http://www.w3.org/2000/svg\" width=\"{THUMB_WIDTH}\" height=\"{THUMB_HEIGHT}\" viewBox=\"0 0 {THUMB_WIDTH} {THUMB_HEIGHT}\" font-family=\"sans-serif\" font-size=\"{TEXT_PX}\" role=\"img\">",
        rank + 1
    );
    let _ = write!(
        svg,
        "<title>{}</title><rect x=\"{left}\" y=\"{top}\" width=\"{}\" height=\"{}\" fill=\"#fafafa\" stroke=\"#ccc\"/>",
        escape(&compound.name),
        right - left,
        bottom - top
    );
    for level in [0.0, 100.0] {
        let _ = write!(
            svg,
            "<line x1=\"{left}\" x2=\"{right}\" y1=\"{y:.1}\" y2=\"{y:.1}\" stroke=\"#bbb\" stroke-dasharray=\"2 2\"/>",
            y = y_of(level)
        );
    }
    if let Some(parameters) = compound.fit.parameters {
        let points: Vec<String> = (0..=40)
            .map(|i| {
                let x = low + (high - low) * f64::from(i) / 40.0;
                format!(
                    "{:.1},{:.1}",
                    x_of(x),
                    y_of(FourParameterLogistic.value(x, &parameters))
                )
            })
            .collect();
        let _ = write!(
            svg,
            "<polyline points=\"{}\" fill=\"none\" stroke=\"#0072B2\" stroke-width=\"1.5\"/>",
            points.join(" ")
        );
    }
    for (_, dose, activity, used) in &compound.points {
        let _ = write!(
            svg,
            "<circle cx=\"{:.1}\" cy=\"{:.1}\" r=\"2.5\" fill=\"{}\" stroke=\"#222\"/>",
            x_of(dose.log10()),
            y_of(*activity),
            if *used { "#222" } else { "none" }
        );
    }
    let marker_x = x_of(compound.fit.log_ic50);
    match compound.fit.qualifier {
        Ic50Qualifier::Equal => {
            let _ = write!(
                svg,
                "<line x1=\"{marker_x:.1}\" x2=\"{marker_x:.1}\" y1=\"{top}\" y2=\"{bottom}\" stroke=\"#D55E00\" stroke-dasharray=\"3 2\"/>"
            );
        }
        Ic50Qualifier::Above | Ic50Qualifier::Below => {
            let direction = if compound.fit.qualifier == Ic50Qualifier::Above {
                1.0
            } else {
                -1.0
            };
            let y = y_of(50.0);
            let _ = write!(
                svg,
                "<path d=\"M{:.1},{y:.1} l{:.1},-4 l0,8 z\" fill=\"#D55E00\"/>",
                marker_x + direction * 6.0,
                -direction * 6.0
            );
        }
    }
    let _ = write!(
        svg,
        "<text x=\"2\" y=\"12\" font-weight=\"bold\">{}</text><text x=\"2\" y=\"25\">IC50 {}</text>",
        escape(&compound.name),
        escape(&ic50_text(compound))
    );
    let flags = flag_words(&compound.fit.flags);
    if !flags.is_empty() {
        let _ = write!(
            svg,
            "<text x=\"2\" y=\"{}\" fill=\"#8a3b00\">{}</text>",
            THUMB_HEIGHT - 4.0,
            escape(&flags.replace(';', ", "))
        );
    }
    svg.push_str("</svg>");
    svg
}

fn thumbnails(screen: &ScreenAnalysis) -> String {
    let all_doses: Vec<f64> = screen
        .compounds
        .iter()
        .flat_map(|c| c.points.iter().map(|(_, dose, _, _)| dose.log10()))
        .filter(|x| x.is_finite())
        .collect();
    let low = all_doses.iter().copied().fold(f64::INFINITY, f64::min);
    let high = all_doses.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    if !(low.is_finite() && high.is_finite()) {
        return String::new();
    }
    let (low, high) = (low - 0.2, high + 0.2);
    let mut html = format!(
        "<h3>Dose-response curves</h3>\n<p>One panel per compound, in rank order: % activity (dashed lines at 0 and 100%) against log dose from {} to {} {}, the same axes in every panel; filled points are used, hollow ones left out; the curve is the fit, the dashed vertical line its IC50, an arrow a bound beyond the tested doses.</p>\n<div class=\"thumbs\">",
        significant(10f64.powf(low + 0.2)),
        significant(10f64.powf(high - 0.2)),
        escape(&unit_of(screen))
    );
    for (rank, compound) in screen.compounds.iter().enumerate() {
        html.push_str(&thumbnail(rank, compound, low, high));
    }
    html.push_str("</div>\n");
    html
}

/// A colour from 0% (dark blue) to 100% (pale yellow), clamped; colour-blind-safe ends.
fn activity_colour(activity: f64) -> String {
    let f = (activity / 100.0).clamp(0.0, 1.0);
    let mix = |a: f64, b: f64| (a + (b - a) * f).round() as u8;
    format!(
        "#{:02x}{:02x}{:02x}",
        mix(8.0, 250.0),
        mix(48.0, 240.0),
        mix(107.0, 180.0)
    )
}

fn heat_map(results: &RunResults, screen: &ScreenAnalysis) -> String {
    let plate = screen.plate;
    let (n_rows, n_columns) = (plate.n_rows(), plate.n_columns());
    let cell = if n_columns > 24 { 9.0 } else { 15.0 };
    let label_every = if n_columns > 24 { 4 } else { 1 };
    let (left, top) = (26.0, 16.0);
    let width = left + cell * f64::from(n_columns) + 4.0;
    let height = top + cell * f64::from(n_rows) + 4.0;
    let mut svg = format!(
        "<svg xmlns=\"http://www.w3.org/2000/svg\" width=\"{width}\" height=\"{height}\" viewBox=\"0 0 {width} {height}\" font-family=\"sans-serif\" font-size=\"{TEXT_PX}\" role=\"img\"><title>% activity by well</title>"
    );
    for column in (0..n_columns).filter(|c| (c + 1) % label_every == 0 || *c == 0) {
        let _ = write!(
            svg,
            "<text x=\"{:.1}\" y=\"12\" text-anchor=\"middle\">{}</text>",
            left + cell * (f64::from(column) + 0.5),
            column + 1
        );
    }
    for row in (0..n_rows).filter(|r| r % label_every == 0) {
        let _ = write!(
            svg,
            "<text x=\"2\" y=\"{:.1}\">{}</text>",
            top + cell * (f64::from(row) + 0.8),
            row_label(row)
        );
    }
    for well in &results.analysis.wells {
        let WellId { row, column } = well.well;
        let (x, y) = (left + cell * f64::from(column), top + cell * f64::from(row));
        let activity = screen.activity.get(&well.well);
        let fill = activity.map_or_else(|| "#ffffff".to_string(), |a| activity_colour(*a));
        let stroke = match well.setup.role {
            Role::Uninhibited | Role::Inhibited => "#000",
            _ => "#ddd",
        };
        let hover = match activity {
            Some(a) => format!("{}: {} {:.0}%", well.well, well.setup.role, a),
            None => format!("{}: {}", well.well, well.setup.role),
        };
        let _ = write!(
            svg,
            "<rect x=\"{x:.1}\" y=\"{y:.1}\" width=\"{cell}\" height=\"{cell}\" fill=\"{fill}\" stroke=\"{stroke}\"><title>{}</title></rect>",
            escape(&hover)
        );
        if !well.used {
            let _ = write!(
                svg,
                "<path d=\"M{x:.1},{y:.1} l{cell},{cell} M{:.1},{y:.1} l-{cell},{cell}\" stroke=\"#D55E00\"/>",
                x + cell
            );
        }
    }
    svg.push_str("</svg>");
    format!(
        "<h3>% activity heat map</h3>\n<p>Each well's % activity, dark blue at 0% to pale yellow at 100% (beyond: the end colours); controls outlined in black; a cross marks a well left out (flagged or excluded by hand).</p>\n<div class=\"scroll\">{svg}</div>\n"
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn activity_colours_run_from_dark_to_pale_and_clamp() {
        assert_eq!(activity_colour(0.0), "#08306b");
        assert_eq!(activity_colour(100.0), "#faf0b4");
        assert_eq!(activity_colour(-40.0), activity_colour(0.0));
        assert_eq!(activity_colour(180.0), activity_colour(100.0));
    }
}
