//! The campaign's `report.html`: one self-contained page (inline CSS and SVG, no scripts, no
//! network) with the plates table (status, Z' where the layout marks controls, flagged wells, a
//! link to each plate's own report), kcat and Km of every plate with their 95% intervals on one
//! plot in run order (so drift over days shows), and the pooled fits.

use std::fmt::Write as _;

use plotters::coord::Shift;
use plotters::prelude::*;

use super::super::plots::{
    draw_markers, drawn, level_style, padded_range, render_svg, text_style, Drawing, PlotError,
};
use super::super::report::html::{escape, STYLE};
use super::CampaignRecord;
use crate::campaign::digest::{Estimate, GroupLabel, KeyValue};
use crate::campaign::screening::CONTROL_FACTOR;
use crate::campaign::{PlateStatus, PooledFit};
use crate::config::ReportMode;
use crate::core::format::{significant, CAUTION};

/// The most flagged wells the plates table names per plate before it counts the rest.
const FLAGGED_NAMED: usize = 12;

/// A group's label as text (`variant=FenA-wt, enzyme [nM]=4`).
pub fn label_text(label: &GroupLabel) -> String {
    if label.is_empty() {
        return "all samples".to_string();
    }
    // A factor left empty on these wells says nothing about them.
    label
        .iter()
        .filter_map(|(name, value)| match value {
            KeyValue::Text(text) if text.is_empty() => None,
            KeyValue::Text(text) => Some(format!("{name}={text}")),
            KeyValue::Number(number) => Some(format!("{name}={number}")),
        })
        .collect::<Vec<_>>()
        .join(", ")
}

fn estimate_text(estimate: Option<&Estimate>) -> String {
    match estimate {
        None => "-".to_string(),
        Some(estimate) => match estimate.ci95 {
            Some([low, high]) => format!(
                "{} ({} to {}) {}",
                significant(estimate.value),
                significant(low),
                significant(high),
                estimate.unit
            ),
            None => format!("{} {}", significant(estimate.value), estimate.unit),
        },
    }
}

/// One series of the constants plot: a group's constant on each plate (x = plate's run index).
#[derive(Debug, Clone)]
struct Series {
    label: String,
    points: Vec<(f64, f64, Option<[f64; 2]>)>,
}

/// kcat (or Vmax) and Km of every plate's groups, in run order, with 95% intervals.
#[derive(Debug, Clone)]
pub struct ConstantsPlot {
    plates: Vec<String>,
    panels: Vec<(String, Vec<Series>)>,
}

impl ConstantsPlot {
    /// The plot of a campaign's plates; `None` when no plate has a fitted constant.
    pub fn of(record: &CampaignRecord<'_>) -> Option<ConstantsPlot> {
        let plates: Vec<String> = record.plates.iter().map(|p| p.plate.clone()).collect();
        let any_kcat = record
            .plates
            .iter()
            .filter_map(|p| p.digest())
            .any(|d| d.constants.iter().any(|c| c.kcat.is_some()));
        let scale_name = if any_kcat { "kcat" } else { "Vmax" };
        let mut panels = Vec::new();
        for name in [scale_name, "Km"] {
            let mut series: Vec<Series> = Vec::new();
            let mut unit = String::new();
            for (index, plate) in record.plates.iter().enumerate() {
                let Some(digest) = plate.digest() else { continue };
                for constants in &digest.constants {
                    let estimate = match name {
                        "kcat" => constants.kcat.as_ref(),
                        "Vmax" => constants.vmax.as_ref(),
                        _ => constants.km.as_ref(),
                    };
                    let Some(estimate) = estimate.filter(|e| e.value.is_finite()) else {
                        continue;
                    };
                    unit.clone_from(&estimate.unit);
                    let label = label_text(&constants.group);
                    let point = (index as f64, estimate.value, estimate.ci95);
                    match series.iter_mut().find(|s| s.label == label) {
                        Some(existing) => existing.points.push(point),
                        None => series.push(Series {
                            label,
                            points: vec![point],
                        }),
                    }
                }
            }
            if !series.is_empty() {
                panels.push((format!("{name} [{unit}]"), series));
            }
        }
        (!panels.is_empty()).then_some(ConstantsPlot { plates, panels })
    }
}

impl Drawing for ConstantsPlot {
    fn name(&self) -> String {
        "campaign-constants".to_string()
    }
    fn title(&self) -> String {
        "Constants of every plate in run order, with 95% intervals".to_string()
    }
    fn size(&self) -> (u32, u32) {
        let width = (260 + 28 * self.plates.len()).clamp(720, 4000) as u32;
        (width, 300 * self.panels.len() as u32 + 40)
    }
    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), String> {
        drawn(root.fill(&WHITE))?;
        let (legend_area, panels_area) = root.split_vertically(40);
        let areas = panels_area.split_evenly((self.panels.len(), 1));
        let x_range = (-0.5, self.plates.len() as f64 - 0.5);
        for ((title, series), area) in self.panels.iter().zip(&areas) {
            let values = series.iter().flat_map(|s| {
                s.points
                    .iter()
                    .flat_map(|(_, value, ci)| [Some(*value), ci.map(|c| c[0]), ci.map(|c| c[1])])
                    .flatten()
            });
            let y_range = padded_range(values, true);
            let mut chart = drawn(
                ChartBuilder::on(area)
                    .caption(title.as_str(), text_style(15.0, BLACK))
                    .margin(8)
                    .x_label_area_size(if self.plates.len() <= 60 { 70 } else { 30 })
                    .y_label_area_size(72)
                    .build_cartesian_2d(x_range.0..x_range.1, y_range.0..y_range.1),
            )?;
            let plates = &self.plates;
            let n_labels = plates.len().min(60);
            drawn(
                chart
                    .configure_mesh()
                    .disable_x_mesh()
                    .x_labels(n_labels)
                    .x_label_formatter(&|x: &f64| {
                        let index = x.round();
                        if (x - index).abs() > 1e-6 || index < 0.0 {
                            return String::new();
                        }
                        plates.get(index as usize).cloned().unwrap_or_default()
                    })
                    .x_label_style(text_style(11.0, BLACK).transform(FontTransform::Rotate90))
                    .y_label_style(text_style(12.0, BLACK))
                    .draw(),
            )?;
            for (index, one) in series.iter().enumerate() {
                let (colour, shape) = level_style(index);
                // Groups sit side by side within a plate's slot so that their intervals do not
                // hide each other.
                let offset = (index as f64 - (series.len() as f64 - 1.0) / 2.0) * 0.12;
                drawn(chart.draw_series(one.points.iter().filter_map(|(x, _, ci)| {
                    ci.map(|[low, high]| {
                        PathElement::new(
                            vec![(x + offset, low), (x + offset, high)],
                            colour.stroke_width(1),
                        )
                    })
                })))?;
                let points: Vec<(f64, f64)> = one.points.iter().map(|(x, y, _)| (x + offset, *y)).collect();
                draw_markers(&mut chart, &points, shape, colour, false, 4)?;
            }
        }
        // Legend: one entry per group, its colour and marker shape named in words as well.
        let labels: Vec<&str> = self.panels[0].1.iter().map(|s| s.label.as_str()).collect();
        let mut x = 10;
        for (index, label) in labels.iter().enumerate() {
            let (colour, shape) = level_style(index);
            drawn(legend_area.draw(&Circle::new((x + 5, 20), 5, colour.filled())))?;
            let text = format!("{label} ({})", shape.word());
            drawn(legend_area.draw(&Text::new(text.clone(), (x + 14, 13), text_style(12.0, BLACK))))?;
            x += 24 + 7 * text.chars().count() as i32;
        }
        Ok(())
    }
}

fn plates_section(record: &CampaignRecord<'_>, html: &mut String) {
    let failed = record
        .plates
        .iter()
        .filter(|p| matches!(p.status, PlateStatus::Failed { .. }))
        .count();
    let _ = writeln!(
        html,
        "<h2 id=\"plates\">Plates</h2>\n<p>{} plate(s) in run order: {} ok, {} failed. Z' = 1 - 3 (SD<sub>p</sub> + SD<sub>n</sub>) / |mean<sub>p</sub> - mean<sub>n</sub>| of the rates of the wells whose layout factor <code>{CONTROL_FACTOR}</code> reads <code>positive</code> or <code>negative</code> (Zhang, Chung and Oldenburg 1999, J Biomol Screen 4:67); 0.5 or more is the usual bar for a screen-ready assay.</p>",
        record.plates.len(),
        record.plates.len() - failed,
        failed
    );
    html.push_str("<div class=\"scroll\"><table>\n<tr><th>#</th><th>plate</th>");
    for name in record.factor_names {
        let _ = write!(html, "<th>{}</th>", escape(name));
    }
    html.push_str("<th>status</th><th>Z'</th><th>wells</th><th>flagged</th><th>groups fitted</th><th>constants (95% interval)</th><th>report</th></tr>\n");
    for (index, plate) in record.plates.iter().enumerate() {
        let _ = write!(
            html,
            "<tr><td class=\"num\">{}</td><td class=\"num\">{}</td>",
            index + 1,
            escape(&plate.plate)
        );
        for name in record.factor_names {
            let value = plate.factors.get(name).map(String::as_str).unwrap_or("");
            let _ = write!(html, "<td>{}</td>", escape(value));
        }
        match &plate.status {
            PlateStatus::Failed { error } => {
                let _ = write!(
                    html,
                    "<td class=\"warn\">failed</td><td colspan=\"6\" class=\"warn\">{}</td>",
                    escape(error)
                );
            }
            PlateStatus::Ok { digest, reused } => {
                let z = digest.z_prime.as_ref().map_or("-".to_string(), |z| {
                    let mark = if z.value < 0.5 { " class=\"warn\"" } else { "" };
                    format!("<span{mark}>{}</span>", significant(z.value))
                });
                let mut flagged: Vec<String> = digest
                    .flagged
                    .iter()
                    .take(FLAGGED_NAMED)
                    .map(|f| format!("{} ({})", escape(&f.well), escape(&f.flags)))
                    .collect();
                if digest.flagged.len() > FLAGGED_NAMED {
                    flagged.push(format!("and {} more", digest.flagged.len() - FLAGGED_NAMED));
                }
                let constants: Vec<String> = digest
                    .constants
                    .iter()
                    .filter(|c| c.km.is_some() || c.vmax.is_some())
                    .map(|c| {
                        let scale = c.kcat.as_ref().map_or_else(
                            || format!("Vmax {}", estimate_text(c.vmax.as_ref())),
                            |kcat| format!("kcat {}", estimate_text(Some(kcat))),
                        );
                        format!(
                            "{}: {scale}; Km {}",
                            escape(&label_text(&c.group)),
                            escape(&estimate_text(c.km.as_ref()))
                        )
                    })
                    .collect();
                let link = if record.report == ReportMode::None {
                    "-".to_string()
                } else {
                    format!("<a href=\"plates/{0}/report.html\">{0}</a>", escape(&plate.plate))
                };
                let status = if *reused { "ok (kept)" } else { "ok" };
                let _ = write!(
                    html,
                    "<td>{status}</td><td class=\"num\">{z}</td><td class=\"num\">{}</td><td>{} {}</td><td class=\"num\">{} of {}</td><td>{}</td><td>{link}</td>",
                    digest.wells,
                    digest.flagged.len(),
                    flagged.join(", "),
                    digest.groups_fitted,
                    digest.groups,
                    constants.join("<br>")
                );
            }
        }
        html.push_str("</tr>\n");
    }
    html.push_str("</table></div>\n<p>\"ok (kept)\": the plate's inputs and settings had not changed since the last run, so its results were kept (add <code>--force</code> to analyse every plate again).</p>\n");
}

fn pooled_section(record: &CampaignRecord<'_>, html: &mut String) {
    if record.pool_by.is_empty() {
        return;
    }
    let _ = writeln!(
        html,
        "<h2 id=\"pooled\">Pooled fits across plates (by {})</h2>\n<p>The wells of every plate sharing the values below are fitted together to v = k<sub>plate</sub> S / (Km + S): one Km shared by the plates and one kcat per plate (rates divided by the enzyme concentration; Vmax where the enzyme or the rate's unit is unknown), since the active enzyme varies from day to day while Km should not. The between-plate CV is the sample SD of the per-plate kcat over their mean; beside it, the CV of the plates' true kcat, with each plate's own estimation error taken out, and its 95% interval (chi-square on the plates' sample variance; it assumes the plates are a random sample with normally distributed activity, so days or lots that shift groups of plates make it approximate). Each plate's kcat interval carries its wells' scatter, its shared no-enzyme background (or blank) and Km's uncertainty. Km's 95% interval is clustered by plate (a cluster-robust sandwich covariance with t(plates - 1)), so the plates' own scatter sets its width; with fewer than 5 plates it is model-based and says so. Positive and negative controls are left out. Check that the per-plate Km above agree before relying on a pooled Km.</p>",
        escape(&record.pool_by.join(", "))
    );
    if !record.unknown_pool_factors.is_empty() {
        let _ = writeln!(
            html,
            "<p class=\"warn\">No plate has the factor(s) {}: nothing was pooled.</p>",
            escape(&record.unknown_pool_factors.join(", "))
        );
    }
    if record.pooled.is_empty() {
        return;
    }
    html.push_str("<table>\n<tr><th>pool</th><th>plates</th><th>n</th><th>pooled Km (95% interval)</th><th>mean per-plate scale</th><th>between-plate CV</th><th>CV of true kcat (95% interval)</th><th>residual SD</th><th>per plate</th><th>warnings</th></tr>\n");
    for fit in record.pooled {
        pooled_row(fit, html);
    }
    html.push_str("</table>\n");
}

/// The between-plate CV of the plates' true scales with its interval, as the table shows it.
fn corrected_cv_text(fit: &PooledFit) -> String {
    match (fit.scale_cv_corrected, fit.scale_cv_ci95) {
        (Some(cv), Some([low, high])) => {
            format!("{:.1}% ({:.1}% to {:.1}%)", 100.0 * cv, 100.0 * low, 100.0 * high)
        }
        _ => "-".to_string(),
    }
}

fn pooled_row(fit: &PooledFit, html: &mut String) {
    let key: Vec<String> = fit
        .key
        .iter()
        .map(|(name, value)| format!("{name}={value}"))
        .collect();
    let unit = fit.plates.first().map_or("", |p| p.scale.unit.as_str());
    let per_plate: Vec<String> = fit
        .plates
        .iter()
        .map(|p| format!("{}: {}", escape(&p.plate), escape(&estimate_text(Some(&p.scale)))))
        .collect();
    let mut notes: Vec<String> = fit.warnings.iter().map(|w| escape(w)).collect();
    if let Some(error) = &fit.error {
        notes.insert(0, format!("<span class=\"warn\">{}</span>", escape(error)));
    }
    let _ = writeln!(
        html,
        "<tr><td>{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td><td>{}</td><td class=\"num\">{} {}</td><td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td><td>{}</td><td>{}</td></tr>",
        escape(&key.join(", ")),
        fit.plates.len(),
        fit.n,
        escape(&estimate_text(fit.km.as_ref())),
        fit.scale_name,
        fit.scale_mean.map_or("-".to_string(), |m| format!("{} {}", significant(m), escape(unit))),
        fit.scale_cv.map_or("-".to_string(), |cv| format!("{:.1}%", 100.0 * cv)),
        corrected_cv_text(fit),
        fit.residual_sd.map_or("-".to_string(), significant),
        per_plate.join("<br>"),
        notes.join("<br>")
    );
}

/// The page.
pub fn campaign_report_html(record: &CampaignRecord<'_>) -> Result<String, PlotError> {
    let mut html = String::new();
    let _ = writeln!(
        html,
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n<title>platekin campaign: {0}</title>\n<style>{STYLE}</style>\n</head>\n<body>\n<h1>Campaign: {0}</h1>\n<p>platekin {1}; plates listed in {0}.</p>\n<p class=\"caution\">{2} Z' and pooled constants summarise the plates below; they do not replace a look at each plate's flagged wells and fits.</p>",
        escape(record.source),
        env!("CARGO_PKG_VERSION"),
        escape(CAUTION)
    );
    plates_section(record, &mut html);
    if let Some(plot) = ConstantsPlot::of(record) {
        let drawn = render_svg(&plot)?;
        let _ = writeln!(
            html,
            "<h2 id=\"constants\">Constants per plate</h2>\n<p>Each plate's own fit, plates in run order (the table's #), so that drift over days or lots shows. Bars are 95% intervals.</p>\n<div class=\"scroll\"><figure>{}<figcaption>{}</figcaption></figure></div>",
            drawn.svg,
            escape(&drawn.title)
        );
    }
    pooled_section(record, &mut html);
    html.push_str("</body>\n</html>\n");
    Ok(html)
}

#[cfg(test)]
mod tests {
    use std::collections::BTreeMap;

    use super::*;
    use crate::campaign::digest::{FlaggedWell, GroupConstants, PlateDigest, PoolPoint};
    use crate::campaign::screening::z_prime;
    use crate::campaign::{campaign_pooled_fits, PlateOutcome};
    use crate::config::SettingLayer;

    fn estimate(value: f64, unit: &str) -> Option<Estimate> {
        Some(Estimate {
            value,
            se: Some(value / 50.0),
            ci95: Some([value * 0.96, value * 1.04]),
            unit: unit.to_string(),
        })
    }

    /// A plate of invented numbers: one wild-type group, its pool points at an activity.
    fn plate(plate: &str, day: &str, activity: f64, controls: bool, reused: bool) -> PlateOutcome {
        let pool_points = [15.0, 30.0, 60.0, 120.0, 240.0, 480.0, 960.0]
            .iter()
            .enumerate()
            .map(|(index, s)| PoolPoint {
                well: format!("A{}", index + 1),
                factors: BTreeMap::from([("variant".to_string(), "wt".to_string())]),
                substrate: *s,
                rate: 0.045 * activity * s / (120.0 + s),
                turnover: Some(9.0 * activity * s / (120.0 + s) * (1.0 + 0.01 * (index as f64 - 3.0))),
                shared_loadings: Vec::new(),
            })
            .collect();
        let digest = PlateDigest {
            wells: 76,
            flagged: vec![FlaggedWell {
                well: "F9".into(),
                flags: "lag".into(),
            }],
            groups: 1,
            groups_fitted: 1,
            constants: vec![GroupConstants {
                group: vec![("variant".into(), KeyValue::Text("wt".into()))],
                model: "michaelis-menten".into(),
                kcat: estimate(9.0 * activity, "1/s"),
                km: estimate(120.0, "uM"),
                vmax: estimate(0.045 * activity, "uM/s"),
            }],
            z_prime: controls
                .then(|| z_prime(&[0.040, 0.041, 0.042], &[0.001, 0.0012, 0.0008]))
                .flatten(),
            pool_points,
            shared_errors: Vec::new(),
            rate_unit: "uM/s".into(),
            substrate_unit: Some("uM".into()),
        };
        PlateOutcome {
            plate: plate.into(),
            factors: BTreeMap::from([("day".to_string(), day.to_string())]),
            data_sha256: Some("ab".into()),
            layout_sha256: Some("cd".into()),
            status: PlateStatus::Ok { digest, reused },
        }
    }

    fn page() -> String {
        let mut plates = vec![
            plate("d1-p01", "1", 1.0, true, false),
            plate("d2-p01", "2", 0.9, false, true),
        ];
        plates.push(PlateOutcome {
            plate: "d2-p02".into(),
            factors: BTreeMap::from([("day".to_string(), "2".to_string())]),
            data_sha256: None,
            layout_sha256: None,
            status: PlateStatus::Failed {
                error: "exports/d2-p02.csv, row 9: <cut short>".into(),
            },
        });
        let pool_by = vec!["variant".to_string()];
        let (pooled, unknown) = campaign_pooled_fits(&plates, &pool_by);
        let factor_names = vec!["day".to_string()];
        let settings = SettingLayer::default();
        let record = CampaignRecord {
            source: "manifest.csv",
            factor_names: &factor_names,
            plates: &plates,
            pool_by: &pool_by,
            pooled: &pooled,
            unknown_pool_factors: &unknown,
            settings: &settings,
            report: ReportMode::Html,
        };
        campaign_report_html(&record).unwrap()
    }

    fn between<'a>(text: &'a str, start: &str, end: &str) -> Vec<&'a str> {
        text.split(start)
            .skip(1)
            .filter_map(|part| part.split(end).next())
            .collect()
    }

    /// What harmless changes (wording, styling, plot details) leave alone: headings, each plates
    /// row's plate, status and Z', the links, the plot's presence and the pooled rows.
    fn structure(page: &str) -> String {
        let mut lines: Vec<String> = between(page, "<h2 id=\"", "\"")
            .iter()
            .map(|id| format!("h2 {id}"))
            .collect();
        for row in between(page, "<tr><td class=\"num\">", "</tr>") {
            let cells = between(row, "<td", "</td>");
            // A cell's text without its tags.
            let text = |index: usize| {
                let cell = cells
                    .get(index)
                    .map_or("", |cell| cell.split_once('>').map_or("", |(_, rest)| rest));
                let mut plain = String::new();
                let mut in_tag = false;
                for c in cell.chars() {
                    match c {
                        '<' => in_tag = true,
                        '>' => in_tag = false,
                        c if !in_tag => plain.push(c),
                        _ => {}
                    }
                }
                plain
            };
            lines.push(format!("plate {} {} z {}", text(0), text(2), text(3)));
        }
        lines.push(format!("links {}", page.matches("<a href=\"plates/").count()));
        lines.push(format!("svg {}", page.matches("<svg").count()));
        lines.push(format!(
            "pooled rows {}",
            page.split("id=\"pooled\"")
                .nth(1)
                .map_or(0, |p| p.matches("<tr>").count())
        ));
        lines.join("\n") + "\n"
    }

    /// Golden file: `fixtures/golden/campaign-report-structure.txt`. After an intended change,
    /// rewrite it with `PLATEKIN_UPDATE_GOLDEN=1 cargo test --release render::campaign` and review
    /// the diff.
    #[test]
    fn campaign_report_structure_matches_the_golden_file() {
        crate::render::report::tests::assert_matches_golden(
            "campaign-report-structure.txt",
            &structure(&page()),
        );
    }

    #[test]
    fn the_page_is_self_contained_and_escapes_what_it_shows() {
        let page = page();
        assert!(!page.contains("<script"));
        // No resource is fetched (the SVG namespace is a name, not a fetch).
        assert!(!page.contains("src=\"http") && !page.contains("href=\"http") && !page.contains("url(http"));
        assert!(page.contains("&lt;cut short&gt;"), "an error's text is escaped");
        assert!(page.contains("1 F9 (lag)"));
        assert!(page.contains("ok (kept)"));
    }
}
