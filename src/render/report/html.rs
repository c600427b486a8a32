//! The HTML of `report.html`: one page, inline CSS and SVG, no scripts, no external resources.
//! Sections, in order: inputs, settings, plate overview (each well with a hover text and a link to
//! its detail), flagged wells, conditions, group fits with plots and warnings, which analysis to
//! trust, a reporting checklist after the STRENDA guidelines, well details, and the caution.

use std::fmt::Write as _;

use super::trust_verdicts;
use crate::core::format::CAUTION;
use crate::files::output::OutputFile;
use crate::layout::Role;
use crate::pipeline::RunResults;
use crate::render::display::{cv_percent, number_html as significant, DisplayUnit};
use crate::render::plots::CalibrationPlot;
use crate::render::plots::{
    group_plots, inhibition_plots, plate_view, render_png, render_svg, GroupPlotKind, GroupView,
    InhibitionPlot, InhibitionPlotKind, InhibitionView, PlateView, Plot, PlotError,
};
use crate::render::plots::{progress_plots, ProgressPlot, ProgressPlotKind, ProgressView};
use crate::render::plots::{
    Drawing, GroupPlot, Overview, OverviewGeometry, WellDetail, DETAIL_ALL_WELLS_UP_TO,
};
use crate::render::results::{numbers_from_words, other_constants, result_columns, run_results, trust_word};
use crate::render::words::{
    flag_count_words, group_label, run_reason_words, trust_reason_words, verdict_words,
};
use crate::render::RunRecord;

/// Everything the page shows, drawn.
pub struct ReportParts<'a> {
    /// The run.
    pub results: &'a RunResults,
    /// Where the run came from and what it used.
    pub record: &'a RunRecord,
    /// The plate, ready to draw.
    pub plate: PlateView,
    /// The overview plot.
    pub overview: Plot,
    /// The groups and their plots (rate, residuals, double reciprocal).
    pub groups: Vec<(GroupView, Vec<Plot>)>,
    /// Groups fitted globally over [S] x [I] and their plots (rate at each [I], residuals).
    pub inhibition: Vec<(InhibitionView, Vec<Plot>)>,
    /// Groups with a progress-curve fit and their plots (curves with the fit, residuals).
    pub progress: Vec<(ProgressView, Vec<Plot>)>,
    /// Detail plots of wells, by index into `plate.wells`.
    pub details: Vec<(usize, Plot)>,
}

fn overview_title(results: &RunResults) -> String {
    format!(
        "Plate overview: {} ({}-well plate, {} reads)",
        results.data.source,
        results.data.plate,
        results.data.times_s.len()
    )
}

impl<'a> ReportParts<'a> {
    /// Draws every plot of the page.
    pub fn build(results: &'a RunResults, record: &'a RunRecord) -> Result<ReportParts<'a>, PlotError> {
        ReportParts::build_from_view(results, plate_view(results), record)
    }

    /// Draws every plot of the page from a plate view made beforehand (`plate_view(results)`), so
    /// that the raw reads can go once it is made (`KineticData::release_reads`).
    pub fn build_from_view(
        results: &'a RunResults,
        plate: PlateView,
        record: &'a RunRecord,
    ) -> Result<ReportParts<'a>, PlotError> {
        let overview = render_svg(&Overview {
            view: &plate,
            title: overview_title(results),
        })?;
        let mut groups = Vec::new();
        for view in group_plots(results) {
            let plots = GroupPlotKind::ALL
                .iter()
                .map(|kind| {
                    render_svg(&GroupPlot {
                        view: &view,
                        kind: *kind,
                    })
                })
                .collect::<Result<Vec<_>, _>>()?;
            groups.push((view, plots));
        }
        let mut inhibition = Vec::new();
        for view in inhibition_plots(results) {
            let plots = InhibitionPlotKind::ALL
                .iter()
                .map(|kind| {
                    render_svg(&InhibitionPlot {
                        view: &view,
                        kind: *kind,
                    })
                })
                .collect::<Result<Vec<_>, _>>()?;
            inhibition.push((view, plots));
        }
        let mut progress = Vec::new();
        for view in progress_plots(results) {
            let plots = ProgressPlotKind::ALL
                .iter()
                .map(|kind| {
                    render_svg(&ProgressPlot {
                        view: &view,
                        kind: *kind,
                    })
                })
                .collect::<Result<Vec<_>, _>>()?;
            progress.push((view, plots));
        }
        // The detail figures the view marks (`WellView::detail`).
        let mut details = Vec::new();
        for (index, well) in plate.wells.iter().enumerate() {
            if well.detail {
                details.push((index, render_svg(&WellDetail { view: &plate, well })?));
            }
        }
        Ok(ReportParts {
            results,
            record,
            plate,
            overview,
            groups,
            inhibition,
            progress,
            details,
        })
    }

    /// One PNG per plot, under `plots/`.
    pub fn png_files(&self) -> Result<Vec<OutputFile>, PlotError> {
        let mut files = vec![OutputFile {
            name: "plots/overview.png".into(),
            bytes: render_png(&Overview {
                view: &self.plate,
                title: overview_title(self.results),
            })?,
        }];
        for (view, _) in &self.groups {
            for kind in GroupPlotKind::ALL {
                let drawing = GroupPlot { view, kind };
                files.push(OutputFile {
                    name: format!("plots/{}.png", drawing.name()),
                    bytes: render_png(&drawing)?,
                });
            }
        }
        for (view, _) in &self.inhibition {
            for kind in InhibitionPlotKind::ALL {
                let drawing = InhibitionPlot { view, kind };
                files.push(OutputFile {
                    name: format!("plots/{}.png", drawing.name()),
                    bytes: render_png(&drawing)?,
                });
            }
        }
        for (view, _) in &self.progress {
            for kind in ProgressPlotKind::ALL {
                let drawing = ProgressPlot { view, kind };
                files.push(OutputFile {
                    name: format!("plots/{}.png", drawing.name()),
                    bytes: render_png(&drawing)?,
                });
            }
        }
        if let Some(calibration) = &self.results.analysis.signal.calibration {
            let unit = calibration.unit.to_string();
            for (index, curve) in calibration.curves.iter().enumerate() {
                for drawing in
                    CalibrationPlot::both(curve, index, &unit, self.results.analysis.signal.raw_unit)
                {
                    files.push(OutputFile {
                        name: format!("plots/{}.png", drawing.name()),
                        bytes: render_png(&drawing)?,
                    });
                }
            }
        }
        for (index, _) in &self.details {
            let drawing = WellDetail {
                view: &self.plate,
                well: &self.plate.wells[*index],
            };
            files.push(OutputFile {
                name: format!("plots/{}.png", drawing.name()),
                bytes: render_png(&drawing)?,
            });
        }
        Ok(files)
    }

    fn has_detail(&self, index: usize) -> bool {
        self.details.iter().any(|(i, _)| *i == index)
    }
}

/// Escapes text for HTML and SVG.
pub fn escape(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for c in text.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            other => out.push(other),
        }
    }
    out
}

/// The report's CSS (the campaign page shares it).
pub(crate) const STYLE: &str = "
body{font-family:'DejaVu Sans',Verdana,Arial,sans-serif;margin:1.5em auto;max-width:72em;padding:0 1em;color:#111;line-height:1.4}
h1{font-size:1.6em;margin-bottom:.2em}h2{border-bottom:2px solid #0072B2;padding-bottom:.15em;margin-top:2em}
table{border-collapse:collapse;margin:.6em 0;font-size:.92em}th,td{border:1px solid #bbb;padding:.2em .5em;text-align:left;vertical-align:top}
th{background:#eef4fa}td.num{text-align:right;font-variant-numeric:tabular-nums;white-space:nowrap}
.caution{border-left:5px solid #D55E00;background:#fdf1e8;padding:.6em 1em}
.warn{color:#8a3b00}.scroll{overflow-x:auto;border:1px solid #ddd;padding:4px}
tr.chosen td{font-weight:bold}table.results{font-size:1em}table.results th[scope=row]{background:none;font-weight:bold}.ci{color:#444;font-size:.9em}
p.model code{font-size:.95em}
.scroll svg{max-width:none}svg{max-width:100%;height:auto}
figure{display:inline-block;margin:.5em 1em .5em 0;vertical-align:top}figcaption{font-size:.85em;max-width:40em}
.diagnostic{border:2px dashed #D55E00;padding:.3em}
.thumbs svg{margin:2px;border:1px solid #eee}
.details figure{margin:.3em}.details figure:target{outline:3px solid #0072B2}
code{background:#f3f3f3;padding:0 .2em}
@media print{nav{display:none}details::details-content{content-visibility:visible;display:block}body{max-width:none;margin:0}.scroll{overflow:visible;border:0}figure,table,tr,.caution{break-inside:avoid}article.group{break-before:page}h2,h3{break-after:avoid}a{color:inherit;text-decoration:none}}
";

/// The page.
pub fn report_html(parts: &ReportParts) -> String {
    let results = parts.results;
    // The head and small sections first; the page is then allocated once at its full size, so a
    // large plate's report is never copied while it grows (on 1536 wells it is about 15 MB).
    let mut page = String::new();
    page.push_str("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n");
    let _ = writeln!(
        page,
        "<title>platekin report: {}</title>\n<style>{STYLE}</style>\n</head>\n<body>",
        escape(&results.data.source.to_string())
    );
    let _ = writeln!(
        page,
        "<h1>platekin run report</h1>\n<p>{} &middot; platekin {} &middot; {}-well plate, {} reads, rates in {}</p>",
        escape(&results.data.source.to_string()),
        env!("CARGO_PKG_VERSION"),
        results.data.plate,
        results.data.times_s.len(),
        escape(&results.rates_in.unit)
    );
    let _ = writeln!(page, "<p class=\"caution\">{}</p>", escape(CAUTION));
    // A screen fits no rate law and no progress curve: those sections are left out rather than
    // shown empty, and the contents list only the sections on the page.
    let screen_only =
        results.screen.is_some() && results.fits.is_empty() && results.progress.groups.is_empty();
    let shown: Vec<(&str, &str)> = SECTIONS
        .iter()
        .copied()
        .filter(|(id, _)| !(screen_only && ["fits", "progress", "trust"].contains(id)))
        .flat_map(|section| {
            // The sections only some plates have, in page order after the one they follow.
            let optional: &[(&str, &str, bool)] = match section.0 {
                "overview" => &[
                    ("screen", "Screen", results.screen.is_some()),
                    (
                        "excluded",
                        "Wells excluded by hand",
                        !results.exclusions.is_empty(),
                    ),
                ],
                "flagged" => &[(
                    "calibration",
                    "Standard curves",
                    results.analysis.signal.calibration.is_some(),
                )],
                _ => &[],
            };
            let shown_after: Vec<(&str, &str)> = optional
                .iter()
                .filter(|(_, _, present)| *present)
                .map(|(id, title, _)| (*id, *title))
                .collect();
            std::iter::once(section).chain(shown_after)
        })
        .collect();
    let mut before_details = vec![
        contents(&shown),
        results_section(parts),
        overview_section(parts),
        super::screen::screen_section(results),
        flagged_section(parts),
        super::calibration::calibration_section(results),
    ];
    if !screen_only {
        before_details.extend([
            groups_section(parts),
            progress_section(parts),
            trust_section(parts),
        ]);
    }
    before_details.extend([conditions_section(parts), checklist_section(parts)]);
    let after_details = format!(
        "{}<section id=\"caution\">\n<h2>Caution</h2>\n<p class=\"caution\">{}</p>\n</section>\n</body>\n</html>\n",
        about_section(parts),
        escape(CAUTION)
    );
    let size = page.len()
        + before_details.iter().map(String::len).sum::<usize>()
        + details_size_bound(parts)
        + after_details.len();
    let mut whole = String::with_capacity(size);
    whole.push_str(&page);
    drop(page);
    for section in before_details {
        whole.push_str(&section);
    }
    write_details_section(parts, &mut whole);
    whole.push_str(&after_details);
    whole
}

/// An upper bound of the details section's length: each figure's SVG, its alternative text and
/// caption (the well's hover text twice) and the markup around them.
fn details_size_bound(parts: &ReportParts) -> usize {
    let figures: usize = parts
        .details
        .iter()
        .map(|(index, plot)| plot.svg.len() + 2 * (parts.plate.wells[*index].hover.len() * 6) + 512)
        .sum();
    figures + 1024
}

/// The section ids and headings, in page order (the golden tests check these).
pub const SECTIONS: [(&str, &str); 11] = [
    ("results", "Results"),
    ("overview", "Plate overview"),
    ("flagged", "Flagged wells"),
    ("fits", "Group fits"),
    ("progress", "Progress-curve fits"),
    ("trust", "Which analysis to trust"),
    ("conditions", "Conditions"),
    ("checklist", "Reporting checklist"),
    ("details", "Well details"),
    ("about", "About this run"),
    ("caution", "Caution"),
];

fn heading(id: &str) -> String {
    let title = SECTIONS
        .iter()
        .find(|(section, _)| *section == id)
        .map_or(id, |(_, title)| title);
    format!("<section id=\"{id}\">\n<h2>{title}</h2>\n")
}

fn contents(sections: &[(&str, &str)]) -> String {
    let links: Vec<String> = sections
        .iter()
        .map(|(id, title)| format!("<a href=\"#{id}\">{title}</a>"))
        .collect();
    format!("<nav><p>{}</p></nav>\n", links.join(" &middot; "))
}

/// The answer first: per group the constants of the analysis to trust with their 95% intervals
/// in units that read plainly, the model and analysis, the wells, and the verdict in a line; then
/// the warnings that change how the numbers may be used.
fn results_section(parts: &ReportParts) -> String {
    let results = parts.results;
    let rows = run_results(results);
    let columns = result_columns(&rows);
    let mut html = heading("results");
    if let Some(screen) = &results.screen {
        html.push_str(&super::screen::screen_results_html(screen));
    } else if rows.is_empty() {
        html.push_str("<p>No group was fitted: see the conditions and the flagged wells below.</p>\n");
    } else {
        html.push_str("<p>Per group, the constants of the analysis to trust (value and 95% interval); the details of every fit follow below.</p>\n");
        html.push_str("<table class=\"results\">\n<thead><tr><th scope=\"col\">group</th>");
        for (name, unit) in &columns {
            let _ = write!(html, "<th scope=\"col\">{} [{}]</th>", escape(name), unit.html());
        }
        let any_other = rows.iter().any(|row| !other_constants(row, &columns).is_empty());
        if any_other {
            html.push_str("<th scope=\"col\">other constants</th>");
        }
        html.push_str("<th scope=\"col\">model, from</th><th scope=\"col\">wells used (left out)</th><th scope=\"col\">analysis to trust</th></tr></thead>\n<tbody>\n");
        for row in &rows {
            let _ = write!(html, "<tr><th scope=\"row\">{}</th>", escape(&row.label));
            for (name, unit) in &columns {
                match row.parameters.iter().find(|(n, _)| n == name) {
                    Some((_, p)) if row.error.is_none() => {
                        let interval = p.ci95.map_or(String::new(), |[lo, hi]| {
                            format!(
                                " <span class=\"ci\">[{}, {}]</span>",
                                unit.value_like(lo, p.value),
                                unit.value_like(hi, p.value)
                            )
                        });
                        let doubt = if p.determined {
                            ""
                        } else {
                            " <span class=\"warn\">(not determined)</span>"
                        };
                        let _ = write!(
                            html,
                            "<td class=\"num\">{}{interval}{doubt}</td>",
                            unit.value(p.value)
                        );
                    }
                    _ => html.push_str("<td class=\"num\">-</td>"),
                }
            }
            if any_other {
                let others: Vec<String> = other_constants(row, &columns)
                    .into_iter()
                    .map(|(name, p, unit)| {
                        format!(
                            "{} {} {}",
                            escape(name),
                            unit.with_interval(p.value, p.ci95),
                            unit.html()
                        )
                    })
                    .collect();
                let _ = write!(html, "<td>{}</td>", others.join("<br>"));
            }
            let verdict = row.trust.map_or("initial rates", trust_word);
            let _ =
                writeln!(
                html,
                "<td>{} from {}</td><td class=\"num\">{} ({})</td><td{}><strong>{}</strong>: {}{}</td></tr>",
                escape(row.model),
                numbers_from_words(row.numbers_from),
                row.wells_used,
                row.wells_left_out,
                if row.usable { "" } else { " class=\"warn\"" },
                escape(verdict),
                escape(row.error.as_deref().unwrap_or(&row.reason)),
                if row.usable { "" } else { "; do not use these numbers without checking" }
            );
        }
        html.push_str("</tbody>\n</table>\n");
    }
    let group_warnings: Vec<String> = rows
        .iter()
        .flat_map(|row| row.warnings.iter().map(move |w| format!("{}: {w}", row.label)))
        .collect();
    let plate_warnings: Vec<&String> = results
        .input_warnings
        .iter()
        .chain(&results.analysis.warnings)
        .collect();
    if !group_warnings.is_empty() || !plate_warnings.is_empty() {
        html.push_str("<h3>Warnings</h3>\n<ul class=\"warnings\">\n");
        for warning in &group_warnings {
            let _ = writeln!(html, "<li class=\"warn\">{}</li>", escape(warning));
        }
        for warning in plate_warnings {
            let _ = writeln!(html, "<li>{}</li>", escape(warning));
        }
        html.push_str("</ul>\n");
    }
    html.push_str("</section>\n");
    html
}

/// Inputs, their checksums and every setting: collapsed at the end, for whoever repeats or audits
/// the run.
fn about_section(parts: &ReportParts) -> String {
    let mut html = heading("about");
    html.push_str("<details>\n<summary>Inputs (sizes and SHA-256), how the export was read, and every setting used</summary>\n");
    html.push_str(&inputs_part(parts));
    html.push_str(&settings_part(parts));
    html.push_str("</details>\n</section>\n");
    html
}

fn inputs_part(parts: &ReportParts) -> String {
    let mut html = String::from("<h3 id=\"inputs\">Inputs</h3>\n");
    if parts.record.inputs.is_empty() {
        html.push_str("<p>No input files were recorded for this run.</p>\n");
    } else {
        html.push_str("<table>\n<tr><th>input</th><th>file</th><th>bytes</th><th>SHA-256</th></tr>\n");
        for record in &parts.record.inputs {
            let _ = writeln!(
                html,
                "<tr><td>{}</td><td>{}</td><td class=\"num\">{}</td><td><code>{}</code></td></tr>",
                escape(&record.role),
                escape(&record.file),
                record.bytes,
                record.sha256
            );
        }
        html.push_str("</table>\n");
    }
    let data = &parts.results.data;
    let span = match (data.times_s.first(), data.times_s.last()) {
        (Some(first), Some(last)) => format!("{} to {} s", significant(*first), significant(*last)),
        _ => "no reads".to_string(),
    };
    let _ = writeln!(
        html,
        "<p>Read as a {} export: {} wells with data, {} reads from {span}; temperature {}.</p>",
        data.shape,
        data.wells.len(),
        data.times_s.len(),
        escape(&temperature_text(parts.results))
    );
    html
}

/// The export's temperature: range and mean over the reads, or a note that it holds none.
pub fn temperature_text(results: &RunResults) -> String {
    let values: Vec<f64> = results
        .data
        .temperatures_c
        .iter()
        .flatten()
        .flatten()
        .copied()
        .filter(|t| t.is_finite())
        .collect();
    if values.is_empty() {
        return "not in the export".to_string();
    }
    let low = values.iter().copied().fold(f64::INFINITY, f64::min);
    let high = values.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    let mean = crate::core::stats::mean(&values).unwrap_or(f64::NAN);
    format!("{low:.1} to {high:.1} °C in the export (mean {mean:.1} °C)")
}

fn settings_part(parts: &ReportParts) -> String {
    let mut html = String::from("<h3 id=\"settings\">Settings used</h3>\n");
    html.push_str("<table>\n<tr><th>setting</th><th>value</th></tr>\n");
    if let Ok(serde_json::Value::Object(map)) = serde_json::to_value(&parts.record.used) {
        for (name, value) in map {
            let text = match value {
                serde_json::Value::Null => "(not set: default)".to_string(),
                serde_json::Value::String(s) => s,
                other => other.to_string(),
            };
            let _ = writeln!(
                html,
                "<tr><td>{}</td><td>{}</td></tr>",
                escape(&name),
                escape(&text)
            );
        }
    }
    html.push_str("</table>\n<p>The same settings are in <code>settings.toml</code> (repeat the run with <code>--assay settings.toml</code>) and <code>run.json</code>.</p>\n");
    html
}

/// The overview SVG with one transparent, titled (and, where a detail exists, linked) rectangle
/// over each well: SVG `<title>` gives the hover text without scripts.
fn overview_with_links(parts: &ReportParts) -> String {
    let geometry = OverviewGeometry::for_plate(parts.plate.plate);
    let mut overlay = String::from("<g class=\"wells\">\n");
    for (index, well) in parts.plate.wells.iter().enumerate() {
        let (x, y, w, h) = geometry.cell(well.well);
        let rect = format!(
            "<rect x=\"{x}\" y=\"{y}\" width=\"{w}\" height=\"{h}\" fill=\"transparent\" data-well=\"{}\"><title>{}</title></rect>",
            well.well,
            escape(&well.hover)
        );
        if parts.has_detail(index) {
            let _ = writeln!(overlay, "<a href=\"#{}\">{rect}</a>", well.anchor());
        } else {
            let _ = writeln!(overlay, "{rect}");
        }
    }
    overlay.push_str("</g>\n");
    // A group, not an image: the wells inside are links a keyboard or screen reader reaches.
    let svg = with_text_alternative(
        &parts.overview.svg,
        "group",
        &format!(
            "{}: one cell per well; each well's title gives its rate and flags, and links to its detail",
            parts.overview.title
        ),
    );
    match svg.rfind("</svg>") {
        Some(end) => format!("{}{overlay}{}", &svg[..end], &svg[end..]),
        None => svg,
    }
}

fn overview_section(parts: &ReportParts) -> String {
    let mut html = heading("overview");
    let kind = if OverviewGeometry::for_plate(parts.plate.plate).heat_map {
        "Each cell is one well coloured by its rate (viridis scale); flagged wells carry a white inset, a diagonal and a red frame."
    } else {
        "Each miniature is one well: its curve (blue, on its own scale), the initial-rate window (orange) and the fitted straight line (black). Flagged wells are hatched and framed in red, and on a 96-well plate carry their first flag's word."
    };
    let _ = writeln!(
        html,
        "<p>{kind} Hover over a well for its rate and flags; click it for its detail.</p>\n<div class=\"scroll\">\n{}\n</div>",
        overview_with_links(parts)
    );
    html.push_str("</section>\n");
    html
}

fn flagged_section(parts: &ReportParts) -> String {
    let mut html = heading("flagged");
    let flagged: Vec<_> = parts
        .results
        .analysis
        .wells
        .iter()
        .filter(|w| !w.rate.flags.is_empty() || w.rate_value.is_none())
        .collect();
    if flagged.is_empty() {
        html.push_str("<p>No well was flagged.</p>\n</section>\n");
        return html;
    }
    let _ = writeln!(
        html,
        "<p>{} wells flagged or without a rate. Flagged wells are left out of means and fits unless <code>--keep-flagged</code> is given.</p>",
        flagged.len()
    );
    html.push_str("<table class=\"flagged\">\n<tr><th>well</th><th>role</th><th>flags</th><th>used</th><th>reason</th></tr>\n");
    for well in flagged {
        let codes = well
            .rate
            .flags
            .iter()
            .map(|f| f.word().to_string())
            .collect::<Vec<_>>()
            .join(", ");
        let reason = if well.rate.notes.is_empty() {
            if well.rate_value.is_none() {
                "no rate".to_string()
            } else {
                well.flag_text()
            }
        } else {
            well.rate.notes.join("; ")
        };
        let _ = writeln!(
            html,
            "<tr data-well=\"{w}\"><td><a href=\"#well-{w}\">{w}</a></td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
            well.setup.role,
            escape(&codes),
            if well.used { "yes" } else { "no" },
            escape(&reason),
            w = well.well,
        );
    }
    html.push_str("</table>\n</section>\n");
    html
}

fn optional(value: Option<f64>) -> String {
    value.map_or("-".to_string(), significant)
}

fn conditions_section(parts: &ReportParts) -> String {
    let results = parts.results;
    let layout = &results.layout;
    let unit =
        |u: Option<crate::core::units::ConcentrationUnit>| u.map_or(String::new(), |u| format!(" [{u}]"));
    let mut html = heading("conditions");
    let _ = write!(
        html,
        "<table class=\"conditions\">\n<tr><th>role</th><th>substrate{}</th><th>enzyme{}</th><th>inhibitor{}</th>",
        unit(layout.substrate_unit),
        layout
            .enzyme_unit_text()
            .map_or(String::new(), |u| format!(" [{u}]")),
        unit(layout.inhibitor_unit)
    );
    for name in &layout.factor_names {
        let _ = write!(html, "<th>{}</th>", escape(name));
    }
    // One display unit for the rate columns, chosen over the conditions' means.
    let rates = DisplayUnit::for_rates(
        &results.rates_in,
        results.conditions.iter().filter_map(|c| c.rate_mean),
    );
    let _ = writeln!(
        html,
        "<th>n</th><th>n used</th><th>mean [{r}]</th><th>SD [{r}]</th><th>SEM [{r}]</th><th>CV</th><th>flags</th></tr>",
        r = rates.html()
    );
    let rate = |value: Option<f64>| value.map_or("-".to_string(), |v| rates.value(v));
    for condition in &results.conditions {
        let _ = write!(
            html,
            "<tr><td>{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td>",
            escape(&condition.role.to_string()),
            optional(condition.substrate),
            optional(condition.enzyme),
            optional(condition.inhibitor)
        );
        for name in &layout.factor_names {
            let value = condition.factors.get(name).map_or("", String::as_str);
            let _ = write!(html, "<td>{}</td>", escape(value));
        }
        let _ = writeln!(
            html,
            "<td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td><td>{}</td></tr>",
            condition.n,
            condition.n_used,
            rate(condition.rate_mean),
            rate(condition.rate_sd),
            rate(condition.rate_sem),
            cv_percent(condition.cv),
            escape(&flag_count_words(&condition.flags))
        );
    }
    html.push_str("</table>\n</section>\n");
    html
}

/// A plot with its caption; the SVG is marked as an image whose text alternative says what it
/// shows (its title; the numbers it draws are in the tables beside it).
fn figure(plot: &Plot, class: &str) -> String {
    format!(
        "<figure class=\"{class}\">\n{}\n<figcaption>{}</figcaption>\n</figure>\n",
        labelled_svg(plot),
        escape(&plot.title)
    )
}

/// The plot's SVG with `role="img"` and an `aria-label` naming what it shows.
fn labelled_svg(plot: &Plot) -> String {
    with_text_alternative(
        &plot.svg,
        "img",
        &format!(
            "Plot: {} (the values drawn are in the tables of this section)",
            plot.title
        ),
    )
}

/// An SVG marked with a role and its text alternative (`img` for a picture, `group` for one
/// whose parts are links a reader can reach).
fn with_text_alternative(svg: &str, role: &str, text: &str) -> String {
    svg.replacen(
        "<svg ",
        &format!("<svg role=\"{role}\" aria-label=\"{}\" ", escape(text)),
        1,
    )
}

fn groups_section(parts: &ReportParts) -> String {
    let mut html = heading("fits");
    html.push_str("<p>Fits of the rate law each group's model choice reports (Michaelis-Menten, v = Vmax [S] / (Km + [S]), unless another model is asked for or the inhibitor is varied), by nonlinear least squares on every used replicate well (not the means); standard errors from the Jacobian at the optimum, 95% intervals from the t distribution. The band around the curve is the 95% band of the fitted mean (delta method).</p>\n");
    for ((view, plots), fit) in parts.groups.iter().zip(&parts.results.fits) {
        let _ = writeln!(
            html,
            "<article class=\"group\" id=\"group-{}\">\n<h3>Group {}: {}</h3>",
            view.number,
            view.number,
            escape(&view.label)
        );
        if let Some(error) = &fit.error {
            let _ = writeln!(html, "<p class=\"warn\">{}</p>", escape(error));
        }
        html.push_str("<table>\n<tr><th>parameter</th><th>value</th><th>SE</th><th>95% interval</th><th>profile 95% interval</th><th>unit</th><th>determined</th></tr>\n");
        // The usual four first, then every other constant the reported model has (Ki, Ki', h...).
        let first = ["Vmax", "Km", "kcat", "kcat_over_Km"];
        let names = first.into_iter().chain(
            fit.parameters
                .keys()
                .map(String::as_str)
                .filter(|n| !first.contains(n)),
        );
        for name in names {
            if let Some(p) = fit.parameters.get(name) {
                let _ = writeln!(
                    html,
                    "<tr><td>{}</td>{}</tr>",
                    name.replace("_over_", "/"),
                    parameter_cells(p)
                );
            }
        }
        let _ = writeln!(
            html,
            "</table>\n<p>{} wells fitted; residual SD {}.</p>",
            fit.n,
            fit.residual_sd.map_or("-".to_string(), |sd| {
                // A weighted fit's residuals are divided by each point's SD or rate: no unit.
                if fit.weighting != crate::config::Weighting::None {
                    return format!(
                        "{} (weighted residuals, {}: no unit)",
                        significant(sd),
                        fit.weighting.name()
                    );
                }
                // The residual SD is already in the written unit (expressed with the constants).
                let unit = if parts.results.rates_in.chosen {
                    DisplayUnit::unchanged(&parts.results.rates_in.unit)
                } else {
                    DisplayUnit::for_values(&parts.results.rates_in.unit, [sd])
                };
                format!("{} {}", unit.value(sd), unit.html())
            })
        );
        html.push_str(&model_choice_html(fit));
        if !fit.warnings.is_empty() {
            html.push_str("<ul class=\"warnings\">\n");
            for warning in &fit.warnings {
                let _ = writeln!(html, "<li class=\"warn\">{}</li>", escape(warning));
            }
            html.push_str("</ul>\n");
        }
        for (plot, kind) in plots.iter().zip(GroupPlotKind::ALL) {
            let class = if kind == GroupPlotKind::DoubleReciprocal {
                "diagnostic"
            } else {
                "plot"
            };
            html.push_str(&figure(plot, class));
        }
        if let Some((inhibition, plots)) = parts.inhibition.iter().find(|(v, _)| v.number == view.number) {
            let _ = writeln!(
                html,
                "<p>This group varies the inhibitor ({} levels): one global {} fit over [S] x [I]. Each [I] has its own colour and marker shape; open markers are wells left out. The plain Michaelis-Menten views above pool every level and are for orientation only.</p>",
                inhibition.levels.len(),
                escape(inhibition.model.name())
            );
            for plot in plots {
                html.push_str(&figure(plot, "plot inhibition"));
            }
        }
        html.push_str("<p>The double-reciprocal view is a diagnostic only: inverting rates distorts their errors, so its straight line is not an estimate (Smith, McCarty and Kitanidis 1998, Appl Environ Microbiol 64:2044).</p>\n</article>\n");
    }
    html.push_str("</section>\n");
    html
}

/// The model choice of a group: the equation reported, why it was chosen, and every candidate
/// with its AICc, difference to the best and Akaike weight.
fn model_choice_html(fit: &crate::groups::GroupFit) -> String {
    let mut html = String::new();
    let _ = write!(
        html,
        "<p class=\"model\">Model reported: <strong>{}</strong>",
        escape(fit.model.name())
    );
    if let Some(equation) = &fit.equation {
        let _ = write!(html, ", <code>{}</code>", escape(equation));
    }
    html.push('.');
    if let Some(choice) = &fit.model_choice {
        let _ = write!(html, " Choice: {}.", escape(choice));
    }
    html.push_str("</p>\n");
    if fit.models_tried.is_empty() {
        return html;
    }
    html.push_str("<table class=\"models\">\n<tr><th>model tried</th><th>parameters</th><th>RSS</th><th>AICc</th><th>delta AICc</th><th>Akaike weight</th><th>converged</th><th>eligible</th><th>note</th></tr>\n");
    for candidate in &fit.models_tried {
        let chosen = candidate.model == fit.model;
        let _ = writeln!(
            html,
            "<tr{}><td>{}{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
            if chosen { " class=\"chosen\"" } else { "" },
            escape(candidate.model.name()),
            if chosen { " (reported)" } else { "" },
            candidate.n_parameters,
            optional(candidate.rss),
            optional(candidate.aicc),
            optional(candidate.delta_aicc),
            optional(candidate.akaike_weight),
            if candidate.converged { "yes" } else { "no" },
            if candidate.eligible { "yes" } else { "no" },
            escape(candidate.note.as_deref().unwrap_or(""))
        );
    }
    html.push_str("</table>\n");
    html
}

/// A constant's cells in the unit that reads plainly: value, SE, 95% interval, profile 95%
/// interval (an open end where the profile does not cross), unit, determined.
fn parameter_cells(p: &crate::groups::ParameterReport) -> String {
    let unit = DisplayUnit::for_values(&p.unit, [p.value]);
    let interval = p.ci95.map_or("-".to_string(), |[lo, hi]| {
        format!(
            "{} to {}",
            unit.value_like(lo, p.value),
            unit.value_like(hi, p.value)
        )
    });
    let profile = p.ci95_profile.map_or("-".to_string(), |[lo, hi]| {
        let side = |v: Option<f64>| v.map_or("open".to_string(), |v| unit.value_like(v, p.value));
        format!("{} to {}", side(lo), side(hi))
    });
    format!(
        "<td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{interval}</td><td class=\"num\">{profile}</td><td>{}</td><td>{}</td>",
        unit.value(p.value),
        p.se.map_or("-".to_string(), |se| unit.value(se)),
        unit.html(),
        if p.determined { "yes" } else { "no" }
    )
}

fn progress_section(parts: &ReportParts) -> String {
    let progress = &parts.results.progress;
    let mut html = heading("progress");
    let _ = writeln!(
        html,
        "<p>Global fits of the integrated rate law to every read of a group's wells at once (<code>--progress {}</code>): kcat and Km shared, one signal offset per well, in the signal units the fit used (absorbance, blank- and background-corrected). Per well, a runs test on the residual signs looks for systematic misfit (z below -2.576, the 1% level).</p>",
        escape(progress.mode.word())
    );
    if progress.groups.is_empty() {
        html.push_str("<p>No group was analysed by progress curves.</p>\n</section>\n");
        return html;
    }
    for (index, group) in progress.groups.iter().enumerate() {
        let number = index + 1;
        let _ = writeln!(
            html,
            "<article class=\"group\" id=\"progress-{number}\">\n<h3>Progress curves {number}: {}</h3>\n<p>{}</p>",
            escape(&group_label(&group.group)),
            escape(&run_reason_words(&group.run))
        );
        if let Some(error) = &group.error {
            let _ = writeln!(html, "<p class=\"warn\">{}</p>", escape(error));
        }
        if !group.analysed {
            html.push_str("</article>\n");
            continue;
        }
        let _ = writeln!(
            html,
            "<p class=\"model\">Model chosen: <strong>{}</strong>; {} reads of {} wells; residual SD {} {}; AICc {}; dead time {} s.</p>",
            escape(group.model.map_or("-", |m| m.name())),
            group.n,
            group.n_wells,
            optional(group.residual_sd),
            parts.results.analysis.signal.raw_unit,
            optional(group.aicc),
            optional(group.dead_time_s)
        );
        html.push_str("<table class=\"progress-parameters\">\n<tr><th>parameter</th><th>value</th><th>SE</th><th>95% interval</th><th>profile 95% interval</th><th>unit</th><th>determined</th></tr>\n");
        for (name, p) in &group.parameters {
            let _ = writeln!(
                html,
                "<tr><td>{}</td>{}</tr>",
                escape(&name.replace("_over_", "/")),
                parameter_cells(p)
            );
        }
        html.push_str("</table>\n");
        if !group.models_tried.is_empty() {
            let _ = writeln!(
                html,
                "<table class=\"progress-models\">\n<tr><th>model tried</th><th>AICc</th><th>delta AICc</th><th>residual SD [{}]</th><th>F test p</th><th>verdict</th></tr>",
                parts.results.analysis.signal.raw_unit
            );
            for tried in &group.models_tried {
                let _ = writeln!(
                    html,
                    "<tr><td>{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td><td>{}</td></tr>",
                    escape(tried.model.name()),
                    optional(tried.aicc),
                    optional(tried.delta_aicc),
                    optional(tried.residual_sd),
                    optional(tried.f_test_p),
                    escape(&verdict_words(tried))
                );
            }
            html.push_str("</table>\n");
        }
        if !group.warnings.is_empty() {
            html.push_str("<ul class=\"warnings\">\n");
            for warning in &group.warnings {
                let _ = writeln!(html, "<li class=\"warn\">{}</li>", escape(warning));
            }
            html.push_str("</ul>\n");
        }
        if !group.curves.is_empty() {
            html.push_str("<table class=\"runs\">\n<tr><th>well</th><th>S0</th><th>reads</th><th>runs</th><th>runs z</th><th>systematic misfit</th></tr>\n");
            for curve in &group.curves {
                let _ = writeln!(
                    html,
                    "<tr><td><a href=\"#well-{w}\">{w}</a></td><td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td><td>{}</td></tr>",
                    optional(curve.s0),
                    curve.observed.len(),
                    curve.runs.0,
                    optional(curve.runs.1),
                    if curve.systematic_misfit { "yes" } else { "no" },
                    w = escape(&curve.well)
                );
            }
            html.push_str("</table>\n");
        }
        if let Some((_, plots)) = parts.progress.iter().find(|(v, _)| v.number == number) {
            for plot in plots {
                html.push_str(&figure(plot, "plot progress"));
            }
        }
        let _ = writeln!(
            html,
            "<p>Which analysis to trust: <strong>{}</strong>. {}</p>\n</article>",
            escape(group.decision.trust.word()),
            escape(&trust_reason_words(&group.decision.reason))
        );
    }
    html.push_str("</section>\n");
    html
}

fn trust_section(parts: &ReportParts) -> String {
    let mut html = heading("trust");
    html.push_str("<table>\n<tr><th>group</th><th>analysis to use</th><th>why</th></tr>\n");
    for verdict in trust_verdicts(parts.results) {
        let _ = writeln!(
            html,
            "<tr><td>{}</td><td>{}</td><td>{}</td></tr>",
            escape(&verdict.group),
            escape(&verdict.analysis),
            escape(&verdict.reasons.join("; "))
        );
    }
    html.push_str("</table>\n</section>\n");
    html
}

/// The checklist's "equation fitted and fitting method": the equations of the fits actually
/// reported, their weighting and the initial-rate estimator, and the progress-curve law where it ran.
fn fitting_method_text(results: &RunResults) -> String {
    let mut equations: Vec<&str> = Vec::new();
    let mut weightings: Vec<&str> = Vec::new();
    let mut estimators: Vec<&str> = Vec::new();
    for fit in results.fits.iter().filter(|f| f.error.is_none()) {
        let push = |list: &mut Vec<&'static str>, word: &'static str| {
            if !list.contains(&word) {
                list.push(word);
            }
        };
        if let Some(equation) = fit.equation {
            if !equations.contains(&equation) {
                equations.push(equation);
            }
        }
        push(&mut weightings, fit.weighting.name());
        push(&mut estimators, fit.estimator.word());
    }
    let pooled_groups = results
        .fits
        .iter()
        .map(|fit| fit.extra_variance_groups)
        .max()
        .unwrap_or(0);
    let mut text = if results.screen.is_some() && equations.is_empty() {
        "Per compound, the four-parameter logistic of % activity on log10 dose by unweighted least squares (Levenberg-Marquardt), top and bottom by the plateau rule stated in Screen, IC50 intervals by profile likelihood; initial rates from straight-line windows.".to_string()
    } else if equations.is_empty() {
        "No rate law was fitted.".to_string()
    } else {
        format!(
            "{} by nonlinear least squares (Levenberg-Marquardt) on the replicate wells, weighting {}{}; initial rates by the {} estimator; standard errors from the Jacobian with the blank's and background's shared errors{}; linearisations shown as diagnostics only.",
            equations.join("; "),
            weightings.join(", "),
            if !weightings.contains(&"rate-se") {
                ""
            } else if pooled_groups > 1 {
                " (each well's standard error plus the replicates' extra variance: a constant, and under the integrated estimator a substrate-pipetting part that follows d rate / d ln S0 of the fitted law, both estimated once from the replicates of every group on the plate)"
            } else {
                " (each well's standard error plus the replicates' extra variance: a constant, and under the integrated estimator a substrate-pipetting part that follows d rate / d ln S0 of the fitted law)"
            },
            estimators.join(", "),
            if estimators.contains(&"integrated") {
                ", and for rates corrected by the fitted law itself, that law's feedback on its own constants"
            } else {
                ""
            }
        )
    };
    let progress_laws: Vec<&str> = results
        .progress
        .groups
        .iter()
        .filter_map(|g| g.model.map(|m| m.name()))
        .fold(Vec::new(), |mut laws, law| {
            if !laws.contains(&law) {
                laws.push(law);
            }
            laws
        });
    if !progress_laws.is_empty() {
        text.push_str(&format!(
            " Progress curves: the integrated {} rate law fitted globally to every read, intervals clustered by well.",
            progress_laws.join(", ")
        ));
    }
    text
}

fn checklist_section(parts: &ReportParts) -> String {
    let results = parts.results;
    let mut html = heading("checklist");
    html.push_str("<p>What a publication of these kinetic data needs to state, following the items of the STRENDA guidelines (Standards for Reporting Enzymology Data; Tipton et al. 2014, Perspectives in Science 1:131), phrased here for this run: what the run supplies, and what only you can add.</p>\n");
    let fitted = results.fits.iter().filter(|f| f.error.is_none()).count();
    let has_kcat = results.fits.iter().any(|f| f.parameters.contains_key("kcat"));
    let n_used = results.analysis.wells.iter().filter(|w| w.used).count();
    let n_flagged = results
        .analysis
        .wells
        .iter()
        .filter(|w| !w.rate.flags.is_empty())
        .count();
    let max_conversion = results.settings.rates.max_conversion;
    let temperature = temperature_text(results);
    let temperature_known = results
        .data
        .temperatures_c
        .as_ref()
        .is_some_and(|t| t.iter().any(Option::is_some));
    let enzyme_levels: std::collections::BTreeSet<String> = results
        .analysis
        .wells
        .iter()
        .filter(|w| w.setup.role == Role::Sample)
        .filter_map(|w| w.setup.enzyme.map(significant))
        .collect();
    let supplied = "supplied by this run";
    let yours = "you must state";
    let mut rows: Vec<(&str, String, String)> = vec![
        (
            "Kinetic parameters with units and uncertainty",
            supplied.into(),
            match &results.screen {
                // A screen reports IC50s, not rate-law constants.
                Some(screen) => format!(
                    "IC50 (or its bound) with profile 95% intervals, Hill slope, top and bottom for {} compounds, and the plate's Z' (Screen).",
                    screen.compounds.len()
                ),
                None => format!(
                    "Vmax and Km{} with standard errors and 95% intervals for {fitted} of {} groups (Group fits).",
                    if has_kcat { ", kcat and kcat/Km" } else { "" },
                    results.fits.len()
                ),
            },
        ),
        (
            "Equation fitted and fitting method",
            supplied.into(),
            fitting_method_text(results),
        ),
        (
            "Replicates and precision",
            supplied.into(),
            format!("{n_used} wells used; n, SD, SEM and CV per condition (Conditions). Independent repeats on other days or preparations are not in one plate: state them."),
        ),
        (
            "Evidence for initial-rate conditions",
            supplied.into(),
            format!(
                "Each window is straight by two t tests and converts at most {:.0}% of the substrate; {n_flagged} wells flagged (Flagged wells).",
                max_conversion * 100.0
            ),
        ),
        (
            "Substrate and enzyme concentrations",
            supplied.into(),
            format!(
                "From the layout: substrate per well; enzyme {}.",
                if enzyme_levels.is_empty() {
                    "not given".to_string()
                } else {
                    format!(
                        "{} level(s): {}{}",
                        enzyme_levels.len(),
                        enzyme_levels.into_iter().collect::<Vec<_>>().join(", "),
                        results.layout.enzyme_unit_text().map_or(String::new(), |unit| format!(" {unit}"))
                    )
                }
            ),
        ),
        (
            "Assay temperature",
            if temperature_known { supplied.into() } else { yours.into() },
            if temperature_known {
                format!("{temperature}; confirm it is the reaction temperature, not only the chamber's.")
            } else {
                "The export holds no temperature: state the assay temperature.".into()
            },
        ),
        (
            "Signal conversion",
            if results.settings.extinction_per_molar_cm.is_some() || results.analysis.signal.calibration.is_some() {
                supplied.into()
            } else {
                yours.into()
            },
            match (
                &results.analysis.signal.calibration,
                results.settings.extinction_per_molar_cm,
                results.settings.pathlength_cm,
            ) {
                (Some(calibration), _, _) => format!(
                    "Standard curves on the plate ({} curve(s), {}; see Standard curves): state the standard's identity, purity and how its stock was made.",
                    calibration.curves.len(),
                    calibration.curves.first().map_or("", |curve| curve.model_words())
                ),
                (None, Some(e), Some(l)) => format!("Extinction coefficient {e} M^-1 cm^-1 and pathlength {l} cm as given; state their source and the wavelength."),
                _ => format!(
                    "Rates are in {} per second: give the extinction coefficient and pathlength (absorbance) or standards on the plate to report concentrations.",
                    results.analysis.signal.raw_unit
                ),
            },
        ),
    ];
    for item in [
        (
            "Enzyme identity",
            "name, EC number, organism, sequence or variant, any tags",
        ),
        (
            "Enzyme preparation",
            "source, purity, how the concentration was measured, oligomeric state, storage",
        ),
        (
            "Assay conditions",
            "pH and how it was set, buffer and its concentration, ions and additives, total volume",
        ),
        (
            "Substrate",
            "identity and purity, and whether co-substrates were saturating",
        ),
        (
            "How the reaction was started",
            "what was added last, mixing, and the dead time before the first read",
        ),
        (
            "Rate proportional to enzyme",
            "evidence that the rate scales with enzyme concentration (a dilution series)",
        ),
    ] {
        rows.push((item.0, yours.into(), format!("State {}.", item.1)));
    }
    html.push_str("<table class=\"checklist\">\n<tr><th>item</th><th>status</th><th>details</th></tr>\n");
    for (item, status, details) in rows {
        let _ = writeln!(
            html,
            "<tr><td>{}</td><td>{}</td><td>{}</td></tr>",
            escape(item),
            escape(&status),
            escape(&details)
        );
    }
    html.push_str("</table>\n</section>\n");
    html
}

fn write_details_section(parts: &ReportParts, html: &mut String) {
    html.push_str(&heading("details"));
    if parts.results.screen.is_some() {
        html.push_str("<p>On a screening plate only wells left out get a detail plot here; every well is in <code>wells.csv</code> and the heat map.</p>\n");
    } else if parts.plate.plate.n_wells() > DETAIL_ALL_WELLS_UP_TO {
        let _ = writeln!(
            html,
            "<p>On a {}-well plate only flagged wells get a detail plot here; every well is in <code>wells.csv</code>.</p>",
            parts.plate.plate
        );
    }
    html.push_str("<div class=\"details\">\n");
    for (index, plot) in &parts.details {
        let well = &parts.plate.wells[*index];
        let _ = writeln!(
            html,
            "<figure id=\"{}\" class=\"well\">\n{}\n<figcaption>{}</figcaption>\n</figure>",
            well.anchor(),
            with_text_alternative(
                &plot.svg,
                "img",
                &format!(
                    "Plot: well {} reads against time with its initial-rate window and line; {}",
                    well.well, well.hover
                )
            ),
            escape(&well.hover)
        );
    }
    html.push_str("</div>\n</section>\n");
}

#[cfg(test)]
mod tests {
    use super::*;

    proptest::proptest! {
        /// Escaped text never opens a tag or closes an attribute, and unescaping gives it back.
        #[test]
        fn escaped_text_is_inert(text in ".{0,40}") {
            let escaped = escape(&text);
            proptest::prop_assert!(!escaped.contains('<') && !escaped.contains('>') && !escaped.contains('"'));
            let back = escaped
                .replace("&lt;", "<")
                .replace("&gt;", ">")
                .replace("&quot;", "\"")
                .replace("&#39;", "'")
                .replace("&amp;", "&");
            proptest::prop_assert_eq!(back, text);
        }
    }

    #[test]
    fn escape_covers_markup_characters() {
        assert_eq!(
            escape("a<b & \"c\" 'd'>"),
            "a&lt;b &amp; &quot;c&quot; &#39;d&#39;&gt;"
        );
    }
}
