//! Tests of the report: the structure of the demo plate's page against a golden file (headings,
//! table rows, one miniature per used well, the flagged-well table), the PNGs, `run.json`, and
//! the 384- and 1536-well overviews of simulated plates.

use serde_json::Value;

use super::*;
use crate::config::{resolve_analysis, resolve_fit, SettingLayer};
use crate::core::format::CAUTION;
use crate::core::plate::PlateFormat;
use crate::files::input::sha256_hex;
use crate::files::sheet::read_text_cells;
use crate::import::{import_cells, ImportOptions};
use crate::layout::parse_layout;
use crate::pipeline::analyse_inputs;
use crate::render::plots::ProgressView;
use crate::render::words::trust_analysis_words;
use crate::simulate::{large_plate_spec, layout_tidy_csv, simulate, wide_csv, WideCsvOptions};

use crate::files::demo::{demo_files, DEMO_ASSAY, DEMO_DATA, DEMO_LAYOUT};

/// The demo plate's settings.
pub(crate) fn demo_layer() -> SettingLayer {
    toml::from_str(DEMO_ASSAY).unwrap()
}

/// A record of a run with no input files, for the page.
pub(crate) fn record(layer: &SettingLayer) -> RunRecord {
    RunRecord::without_inputs(layer.clone(), crate::config::resolve_report(layer).unwrap())
}

/// The record of a demo run: the three embedded files, as `platekin demo` records them.
pub(crate) fn demo_record(layer: &SettingLayer) -> RunRecord {
    RunRecord {
        inputs: demo_files().iter().map(crate::render::InputRecord::of).collect(),
        ..record(layer)
    }
}

/// Analyses parsed inputs with a layer's analysis and fit settings.
fn analyse(
    data: crate::import::KineticData,
    layout: crate::layout::Layout,
    layer: &SettingLayer,
) -> RunResults {
    analyse_inputs(
        data,
        layout,
        &resolve_analysis(layer).unwrap(),
        &resolve_fit(layer).unwrap(),
        &mut |_, _| {},
    )
    .unwrap()
}

/// The demo plate, analysed.
pub(crate) fn demo_results() -> RunResults {
    demo_results_with(&demo_layer())
}

/// The demo plate, analysed with `layer`'s settings.
pub(crate) fn demo_results_with(layer: &SettingLayer) -> RunResults {
    let grid = read_text_cells(DEMO_DATA.as_bytes(), "amber-fen-wide.csv (embedded demo)").unwrap();
    let data = import_cells(&grid, &ImportOptions::default()).unwrap();
    let layout_grid = read_text_cells(DEMO_LAYOUT.as_bytes(), "amber-fen-layout.csv").unwrap();
    let layout = parse_layout(&layout_grid, data.plate).unwrap();
    analyse(data, layout, layer)
}

fn large_results(format: PlateFormat) -> (RunResults, SettingLayer) {
    let plate = simulate(&large_plate_spec(format, 40)).unwrap();
    let layer = SettingLayer {
        extinction: Some(16_800.0),
        pathlength: Some(0.55),
        ..SettingLayer::default()
    };
    let grid = read_text_cells(
        wide_csv(&plate, &WideCsvOptions::default()).as_bytes(),
        "large.csv",
    )
    .unwrap();
    let data = import_cells(&grid, &ImportOptions::default()).unwrap();
    let layout_grid = read_text_cells(layout_tidy_csv(&plate).as_bytes(), "large-layout.csv").unwrap();
    let layout = parse_layout(&layout_grid, data.plate).unwrap();
    let results = analyse(data, layout, &layer);
    (results, layer)
}

/// The text between `start` and the next `end` after each occurrence of `start`.
fn all_between<'a>(text: &'a str, start: &str, end: &str) -> Vec<&'a str> {
    let mut found = Vec::new();
    let mut rest = text;
    while let Some(at) = rest.find(start) {
        let after = &rest[at + start.len()..];
        match after.find(end) {
            Some(stop) => {
                found.push(&after[..stop]);
                rest = &after[stop..];
            }
            None => break,
        }
    }
    found
}

/// The smallest `font-size` in an SVG (or a page of them), in pixels.
pub(crate) fn smallest_font_px(svg: &str) -> Option<f64> {
    all_between(svg, "font-size=\"", "\"")
        .iter()
        .filter_map(|size| size.trim_end_matches("px").parse::<f64>().ok())
        .map(|size| (size * 1000.0).round() / 1000.0)
        .reduce(f64::min)
}

/// Issue 14: no plot text below 11 px at the page's natural width (plots are drawn at their own
/// size and never scaled up or down on a wide screen).
#[test]
fn no_plot_text_is_smaller_than_eleven_pixels_and_plots_have_text_alternatives() {
    let (_, page) = demo_page();
    // Every group plot is an image with a text alternative.
    let figures = all_between(section(&page, "fits"), "<figure class=\"", "</figure>");
    assert!(!figures.is_empty());
    for figure in figures {
        assert!(
            figure.contains("<svg role=\"img\" aria-label=\"Plot: "),
            "{}",
            &figure[..80.min(figure.len())]
        );
    }
    // Every drawing on the page (the plate overview and every well's miniature too) has a role
    // and a text alternative that says what it shows.
    let openings: Vec<&str> = page.split("<svg").skip(1).collect();
    assert!(openings.len() > 60, "{} drawings", openings.len());
    for opening in openings {
        let tag = &opening[..opening.find('>').unwrap_or(opening.len())];
        assert!(
            (tag.contains(" role=\"img\"") || tag.contains(" role=\"group\""))
                && tag.contains(" aria-label=\""),
            "a drawing without a text alternative: <svg{}",
            &tag[..120.min(tag.len())]
        );
    }
    assert!(page.contains("aria-label=\"Plot: well A1 reads against time"));
    let smallest = smallest_font_px(&page).unwrap();
    assert!(smallest >= 11.0, "smallest plot text {smallest} px");
    let (results, layer) = inhibition_results();
    let record = record(&layer);
    let parts = ReportParts::build(&results, &record).unwrap();
    let smallest = smallest_font_px(&report_html(&parts)).unwrap();
    assert!(
        smallest >= 11.0,
        "inhibition page: smallest plot text {smallest} px"
    );
}

fn table_rows(section: &str) -> usize {
    section.matches("<tr>").count() + section.matches("<tr ").count()
}

fn section<'a>(page: &'a str, id: &str) -> &'a str {
    let start = page.find(&format!("<section id=\"{id}\">")).unwrap();
    let end = start + page[start..].find("</section>").unwrap();
    &page[start..end]
}

/// A section of the page, or "" when the page leaves it out.
fn section_if_shown<'a>(page: &'a str, id: &str) -> &'a str {
    if page.contains(&format!("<section id=\"{id}\">")) {
        section(page, id)
    } else {
        ""
    }
}

/// A summary of the page that harmless changes (wording, styling, plot details, numbers in the
/// last digits) leave alone: section headings, group headings, row counts of each table, the
/// flagged wells with their flags, and the wells the overview links.
fn structure(page: &str) -> String {
    let mut lines = Vec::new();
    let nav = all_between(page, "<nav>", "</nav>").concat();
    lines.push(format!(
        "nav {}",
        all_between(&nav, "<a href=\"#", "\"").join(" ")
    ));
    for heading in all_between(page, "<h2>", "</h2>") {
        lines.push(format!("h2 {heading}"));
    }
    for heading in all_between(page, "<h3>", "</h3>") {
        lines.push(format!("h3 {heading}"));
    }
    for id in ["results", "about", "conditions", "trust", "checklist"] {
        lines.push(format!("rows {id} {}", table_rows(section_if_shown(page, id))));
    }
    for row in all_between(
        section_if_shown(page, "results"),
        "<tr><th scope=\"row\">",
        "</tr>",
    ) {
        // A screen's rows name the compound inside a link to its curve.
        let group = row
            .strip_prefix("<a href=\"")
            .and_then(|linked| linked.split('>').nth(1))
            .unwrap_or(row)
            .split('<')
            .next()
            .unwrap_or("");
        let analysis = all_between(row, "<strong>", "</strong>");
        lines.push(format!(
            "result {group}: trust {}",
            analysis.first().copied().unwrap_or("")
        ));
    }
    for row in all_between(section_if_shown(page, "flagged"), "<tr data-well=\"", "</tr>") {
        let well = row.split('"').next().unwrap_or("");
        let cells = all_between(row, "<td>", "</td>");
        lines.push(format!("flagged {well} {}", cells.get(2).copied().unwrap_or("")));
    }
    let overview = section_if_shown(page, "overview");
    let linked = overview.matches("<a href=\"#well-").count();
    let cells = overview.matches("data-well=").count();
    lines.push(format!("overview cells {cells} linked {linked}"));
    lines.push(format!(
        "details {}",
        section_if_shown(page, "details")
            .matches("<figure id=\"well-")
            .count()
    ));
    lines.push(format!(
        "group figures {}",
        section_if_shown(page, "fits").matches("<figure").count()
    ));
    for table in all_between(
        section_if_shown(page, "fits"),
        "<table class=\"models\">",
        "</table>",
    ) {
        lines.push(format!("models tried rows {}", table_rows(table)));
    }
    let progress = section_if_shown(page, "progress");
    for article in all_between(progress, "<article class=\"group\" id=\"progress-", "</article>") {
        let number = article.split('"').next().unwrap_or("");
        let tables: Vec<String> = ["progress-parameters", "progress-models", "runs"]
            .iter()
            .map(|class| {
                let rows: usize = all_between(article, &format!("<table class=\"{class}\">"), "</table>")
                    .iter()
                    .map(|t| table_rows(t))
                    .sum();
                format!("{class} {rows}")
            })
            .collect();
        lines.push(format!(
            "progress {number}: {} figures {}",
            tables.join(", "),
            article.matches("<figure").count()
        ));
    }
    lines.join("\n") + "\n"
}

fn demo_page() -> (RunResults, String) {
    let results = demo_results();
    let layer = demo_layer();
    let record = demo_record(&layer);
    let parts = ReportParts::build(&results, &record).unwrap();
    let page = report_html(&parts);
    (results, page)
}

/// Golden file: `fixtures/golden/demo-report-structure.txt`. After an intended change, rewrite it
/// with `PLATEKIN_UPDATE_GOLDEN=1 cargo test report::tests` and review the diff.
#[test]
fn demo_report_structure_matches_the_golden_file() {
    let (_, page) = demo_page();
    assert_matches_golden("demo-report-structure.txt", &structure(&page));
}

/// Compares a page's structure with `fixtures/golden/NAME`, or rewrites that file when
/// `PLATEKIN_UPDATE_GOLDEN` is set (then review the diff).
pub(crate) fn assert_matches_golden(name: &str, actual: &str) {
    let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("fixtures/golden")
        .join(name);
    if std::env::var_os("PLATEKIN_UPDATE_GOLDEN").is_some() {
        std::fs::create_dir_all(path.parent().unwrap()).unwrap();
        std::fs::write(&path, actual).unwrap();
    }
    let expected = std::fs::read_to_string(&path).unwrap();
    assert_eq!(
        actual, expected,
        "{name}: the report's structure changed; see the test's doc comment"
    );
}

/// Golden file: `fixtures/golden/demo-progress-report-structure.txt`, the demo with `--progress
/// always` (the progress-curve articles, their tables and plots). Rewrite it as the test above.
#[test]
fn demo_progress_report_structure_matches_the_golden_file() {
    let layer = SettingLayer {
        progress: Some("always".into()),
        ..demo_layer()
    };
    let results = demo_results_with(&layer);
    let record = demo_record(&layer);
    let parts = ReportParts::build(&results, &record).unwrap();
    assert_matches_golden(
        "demo-progress-report-structure.txt",
        &structure(&report_html(&parts)),
    );
}

/// Golden file: `fixtures/golden/screen-report-structure.txt`, a simulated 384-well screen of
/// eight compounds (every fourth inactive): the results block leads with the screen's answer, and
/// the group-fit, progress-curve and trust sections, which have nothing to show on a screen, are
/// left out of the page and its contents. Rewrite it as the tests above.
#[test]
fn screen_report_structure_matches_the_golden_file() {
    use crate::simulate::screen::screen_plate;
    let screen = screen_plate(PlateFormat::Wells384, 8, 4, 21, 33);
    let plate = simulate(&screen.spec).unwrap();
    let grid = read_text_cells(
        wide_csv(&plate, &WideCsvOptions::default()).as_bytes(),
        "screen.csv",
    )
    .unwrap();
    let data = import_cells(&grid, &ImportOptions::default()).unwrap();
    let layout_grid = read_text_cells(screen.layout_csv.as_bytes(), "screen-layout.csv").unwrap();
    let layout = parse_layout(&layout_grid, data.plate).unwrap();
    let layer = SettingLayer::default();
    let results = analyse(data, layout, &layer);
    assert!(results.screen.is_some() && results.fits.is_empty());
    let record = record(&layer);
    let parts = ReportParts::build(&results, &record).unwrap();
    let page = report_html(&parts);
    for id in ["fits", "progress", "trust"] {
        assert!(!page.contains(&format!("<section id=\"{id}\">")), "{id} shown");
        assert!(!page.contains(&format!("href=\"#{id}\"")), "{id} in the contents");
    }
    let results_part = section(&page, "results");
    assert!(results_part.contains("8 compounds: "), "{results_part}");
    assert!(results_part.contains("Z&#39; 0."), "{results_part}");
    assert!(!results_part.contains("No group was fitted"));
    // Every link of the contents leads to a section on the page.
    let nav = all_between(&page, "<nav>", "</nav>").concat();
    for id in all_between(&nav, "<a href=\"#", "\"") {
        assert!(page.contains(&format!("<section id=\"{id}\">")), "{id}");
    }
    assert_matches_golden("screen-report-structure.txt", &structure(&page));
}

/// Independent of the golden file: one miniature cell per plate position, a link and a detail plot
/// for every analysed well, and a flagged-table row for every flagged well.
#[test]
fn demo_report_has_one_miniature_per_well_and_every_flag() {
    let (results, page) = demo_page();
    let overview = section(&page, "overview");
    assert_eq!(
        overview.matches("data-well=").count(),
        results.data.plate.n_wells()
    );
    for well in results.analysis.wells.iter().filter(|w| w.used) {
        assert!(
            overview.contains(&format!("<a href=\"#well-{}\">", well.well)),
            "used well {} links to its detail",
            well.well
        );
        assert!(page.contains(&format!("<figure id=\"well-{}\"", well.well)));
    }
    let flagged = section(&page, "flagged");
    for well in results.analysis.wells.iter().filter(|w| !w.rate.flags.is_empty()) {
        assert!(
            flagged.contains(&format!("<tr data-well=\"{}\">", well.well)),
            "{}",
            well.well
        );
    }
    // Self-contained: no scripts, no external references.
    assert!(!page.contains("<script"));
    assert!(!page.contains("http://") || page.matches("http://").count() == page.matches("xmlns").count());
    assert!(!page.contains("src=\"http"));
    assert!(!page.contains("<link"));
    assert!(page.contains(&super::html::escape(CAUTION)));
    // The export's temperature is used in the checklist.
    assert!(section(&page, "checklist").contains("°C"));
}

fn png_is_not_blank(bytes: &[u8]) -> (u32, u32) {
    let decoder = png::Decoder::new(bytes);
    let mut reader = decoder.read_info().unwrap();
    let mut pixels = vec![0; reader.output_buffer_size()];
    let info = reader.next_frame(&mut pixels).unwrap();
    let pixels = &pixels[..info.buffer_size()];
    let first = &pixels[..3];
    let differing = pixels.chunks(3).filter(|p| *p != first).count();
    assert!(
        differing * 100 > pixels.len() / 3,
        "more than 1% of pixels differ from the first ({differing})"
    );
    let dark = pixels.chunks(3).filter(|p| p.iter().all(|c| *c < 80)).count();
    assert!(dark > 100, "text and lines are drawn ({dark} dark pixels)");
    (info.width, info.height)
}

#[test]
fn full_report_pngs_decode_and_are_not_blank() {
    let results = demo_results();
    let layer = SettingLayer {
        report: Some("full".into()),
        ..demo_layer()
    };
    let files = crate::render::render_run_outputs(&results, &record(&layer)).unwrap();
    let pngs: Vec<&OutputFile> = files.iter().filter(|f| f.name.ends_with(".png")).collect();
    // One plate map, three figures per group fit, two per progress-curve fit, one per well.
    let progress_fits = results.progress.groups.iter().filter(|g| g.analysed).count();
    let expected = 1 + 3 * results.fits.len() + 2 * progress_fits + results.analysis.wells.len();
    assert_eq!(pngs.len(), expected);
    for file in pngs.iter().filter(|f| !f.name.starts_with("plots/well-")).take(8) {
        let (width, height) = png_is_not_blank(&file.bytes);
        assert!(width >= 400 && height >= 250, "{}", file.name);
    }
    png_is_not_blank(&pngs.last().unwrap().bytes);
    assert!(files.iter().any(|f| f.name == "report.html"));
    assert_eq!(files.last().unwrap().name, "run.json");
}

#[test]
fn run_json_records_inputs_settings_and_outputs() {
    let results = demo_results();
    let layer = demo_layer();
    let record = demo_record(&layer);
    let files = crate::render::render_run_outputs(&results, &record).unwrap();
    let run: Value = serde_json::from_slice(&files.last().unwrap().bytes).unwrap();
    assert_eq!(run["version"], env!("CARGO_PKG_VERSION"));
    assert_eq!(run["inputs"].as_array().unwrap().len(), 3);
    assert_eq!(
        run["inputs"][0]["sha256"],
        sha256_hex(DEMO_DATA.as_bytes()),
        "the data's checksum"
    );
    assert_eq!(run["settings"]["extinction"], 16800.0);
    let names: Vec<&str> = run["outputs"]
        .as_array()
        .unwrap()
        .iter()
        .map(|o| o["name"].as_str().unwrap())
        .collect();
    assert_eq!(
        names,
        [
            "wells.csv",
            "conditions.csv",
            "fit.json",
            "progress.json",
            "settings.toml",
            "report.html"
        ]
    );
    for (listed, file) in run["outputs"].as_array().unwrap().iter().zip(&files) {
        assert_eq!(listed["sha256"], sha256_hex(&file.bytes), "{}", file.name);
    }
    assert_eq!(run["report"], "html");
}

#[test]
fn report_mode_parses_and_refuses_unknown_words() {
    assert_eq!("full".parse::<ReportMode>(), Ok(ReportMode::Full));
    assert_eq!(" HTML ".parse::<ReportMode>(), Ok(ReportMode::Html));
    assert_eq!("none".parse::<ReportMode>(), Ok(ReportMode::None));
    assert!("pdf"
        .parse::<ReportMode>()
        .unwrap_err()
        .contains("none, html or full"));
    assert_eq!(
        crate::config::resolve_report(&SettingLayer::default()).unwrap(),
        ReportMode::Html
    );
    let none = report_files(
        &demo_results(),
        &record(&SettingLayer {
            report: Some("none".into()),
            ..demo_layer()
        }),
    )
    .unwrap();
    assert!(none.is_empty());
}

/// The 384- and 1536-well overviews: every analysed well appears once as a cell, the cells are
/// large enough to read (384: 46 x 36 px miniatures with 11 px labels; 1536: 22 x 16 px heat-map
/// cells), no text is below 11 px, and the whole overview fits a 1366 px laptop screen.
#[test]
fn large_plates_give_a_legible_overview_with_every_well() {
    for (format, min_cell) in [
        (PlateFormat::Wells384, (44, 34)),
        (PlateFormat::Wells1536, (20, 14)),
    ] {
        let (results, layer) = large_results(format);
        let record = record(&layer);
        let parts = ReportParts::build(&results, &record).unwrap();
        let geometry = crate::render::plots::OverviewGeometry::for_plate(format);
        assert!(
            geometry.cell_width >= min_cell.0 && geometry.cell_height >= min_cell.1,
            "{format}"
        );
        assert!(
            parts.overview.width <= 1152,
            "{format}: {} px wide",
            parts.overview.width
        );
        let smallest = smallest_font_px(&parts.overview.svg).unwrap();
        assert!(smallest >= 11.0, "{format}: {smallest} px");
        assert_eq!(
            analysed_well_count(&parts),
            results.analysis.wells.len(),
            "{format}"
        );
        let page = report_html(&parts);
        let overview = section(&page, "overview");
        for well in &results.analysis.wells {
            assert_eq!(
                overview.matches(&format!("data-well=\"{}\"", well.well)).count(),
                1,
                "{format}: {} appears once",
                well.well
            );
        }
        if format == PlateFormat::Wells1536 {
            assert!(overview.contains("viridis"));
            assert!(page.contains("only flagged wells get a detail plot"));
        } else {
            // Every analysed well of a 384-well plate has its miniature's label drawn.
            for well in &results.analysis.wells {
                let svg = &parts.overview.svg;
                let label = |end: &str| format!(">\n{}{end}", well.well);
                assert!(
                    svg.contains(&label("\n")) || svg.contains(&label(" ")),
                    "{}",
                    well.well
                );
            }
        }
    }
}

/// Deterministic noise in [-1, 1): one draw of a ChaCha8 generator seeded with `seed`.
fn lcg_noise(seed: u64) -> f64 {
    use rand::{Rng, SeedableRng};
    rand_chacha::ChaCha8Rng::seed_from_u64(seed).random_range(-1.0..1.0)
}

/// An invented 56-well [S] x [I] plate (as `tests/fit_command.rs` builds one): competitive
/// inhibition with Vmax 0.05 uM/s, Km 50 uM, Ki 5 uM; rows A-G the substrate levels, columns 1-8
/// four inhibitor levels in duplicate, H1-H4 blanks; 10 reads 10 s apart.
pub(crate) fn inhibition_results() -> (RunResults, SettingLayer) {
    let substrate_um = [10.0, 20.0, 40.0, 80.0, 160.0, 320.0, 640.0];
    let inhibitor_um = [0.0, 2.5, 5.0, 10.0];
    // Absorbance per uM of product: 18300 M^-1 cm^-1 x 0.5 cm x 1e-6 M/uM.
    let au_per_um = 18300.0 * 0.5 * 1e-6;
    let mut wells = Vec::new();
    let mut layout = String::from("well,role,substrate [uM],inhibitor [uM],enzyme [nM],variant\n");
    for (row_index, row) in ['A', 'B', 'C', 'D', 'E', 'F', 'G'].iter().enumerate() {
        for column in 1..=8 {
            let substrate = substrate_um[row_index];
            let inhibitor = inhibitor_um[(column - 1) / 2];
            let rate = 0.05 * substrate / (50.0 * (1.0 + inhibitor / 5.0) + substrate);
            wells.push((format!("{row}{column}"), rate));
            layout.push_str(&format!("{row}{column},sample,{substrate},{inhibitor},10,wt\n"));
        }
    }
    for column in 1..=4 {
        wells.push((format!("H{column}"), 0.0));
        layout.push_str(&format!("H{column},blank,,,,\n"));
    }
    let mut data = String::from("Time [s],");
    data.push_str(&wells.iter().map(|(w, _)| w.clone()).collect::<Vec<_>>().join(","));
    data.push('\n');
    for read in 0..10u64 {
        let time = 10.0 * read as f64;
        data.push_str(&format!("{time}"));
        for (index, (_, rate)) in wells.iter().enumerate() {
            let absorbance =
                0.05 + rate * time * au_per_um + 3.5e-4 * lcg_noise(read * 1000 + index as u64 + 17);
            data.push_str(&format!(",{absorbance:.6}"));
        }
        data.push('\n');
    }
    let layer = SettingLayer {
        extinction: Some(18_300.0),
        pathlength: Some(0.5),
        ..SettingLayer::default()
    };
    let grid = read_text_cells(data.as_bytes(), "inhibition-plate.csv").unwrap();
    let imported = import_cells(&grid, &ImportOptions::default()).unwrap();
    let layout_grid = read_text_cells(layout.as_bytes(), "inhibition-layout.csv").unwrap();
    let layout = parse_layout(&layout_grid, imported.plate).unwrap();
    let results = analyse(imported, layout, &layer);
    (results, layer)
}

/// An inhibitor plate's report shows, in its one group, the rate against [S] at each of the four
/// [I] levels with the global fit, the residuals, and the model choice with AICc.
#[test]
fn inhibitor_plate_report_has_the_inhibition_plots_and_model_choice() {
    let (results, layer) = inhibition_results();
    assert_eq!(results.fits.len(), 1, "one global [S] x [I] group");
    let fit = &results.fits[0];
    let record = record(&layer);
    let parts = ReportParts::build(&results, &record).unwrap();
    assert_eq!(parts.inhibition.len(), 1);
    let (view, plots) = &parts.inhibition[0];
    assert_eq!(view.levels, vec![0.0, 2.5, 5.0, 10.0]);
    // The invented truth is competitive inhibition; the curves come from the reported constants.
    let residuals = view.residuals();
    assert_eq!(residuals.len(), fit.wells_used.len());
    let largest_rate = view.points.iter().map(|p| p.rate).fold(0.0, f64::max);
    for (_, _, residual) in &residuals {
        assert!(residual.abs() < 0.1 * largest_rate, "residual {residual}");
    }
    // The fitted curve falls with [I] at any [S] (every inhibition model does).
    let at_km: Vec<f64> = (0..4).map(|level| view.fitted(50.0, level).unwrap()).collect();
    assert!(at_km.windows(2).all(|w| w[1] < w[0]), "{at_km:?}");
    let rate_plot = &plots[0];
    for level in 0..4 {
        assert!(
            rate_plot.svg.contains(&view.level_text(level)),
            "legend names {}",
            view.level_text(level)
        );
    }
    // Four colours: each level's colour appears in the plot.
    for level in 0..4 {
        let (colour, _) = crate::render::plots::level_style(level);
        let hex = format!("#{:02X}{:02X}{:02X}", colour.0, colour.1, colour.2);
        assert!(rate_plot.svg.to_uppercase().contains(&hex), "colour {hex}");
    }
    let page = report_html(&parts);
    let fits = section(&page, "fits");
    assert!(fits.contains("Rate against [S] at each [I]"));
    assert!(fits.contains("Residuals of the global fit at each [I]"));
    assert!(fits.contains("<table class=\"models\">"));
    assert!(fits.contains("AICc"));
    assert!(fits.contains(fit.equation.unwrap()));
    // The checklist names the model actually reported, not a fixed Michaelis-Menten line.
    let checklist = section(&page, "checklist");
    assert!(
        checklist.contains(&html::escape(fit.equation.unwrap())),
        "{checklist}"
    );
    assert!(!checklist.contains("v = Vmax [S] / (Km + [S]) by"), "{checklist}");
    for candidate in &fit.models_tried {
        assert!(fits.contains(candidate.model.name()), "{}", candidate.model);
    }
    assert!(fits.contains("<td>Ki</td>") || fits.contains("<td>Ki_prime</td>"));
    // Full mode writes both plots as PNG, and they are not blank.
    let pngs = parts.png_files().unwrap();
    for stem in ["group-1-inhibition", "group-1-inhibition-residuals"] {
        let file = pngs
            .iter()
            .find(|f| f.name == format!("plots/{stem}.png"))
            .unwrap();
        png_is_not_blank(&file.bytes);
    }
}

/// Every level gets a distinct (colour, shape) pair for the first six levels, so no two levels
/// differ by colour alone or by shape alone (common practice for colour-blind-safe plots).
#[test]
fn inhibitor_levels_differ_in_colour_and_shape() {
    for a in 0..6 {
        for b in (a + 1)..6 {
            let (colour_a, shape_a) = crate::render::plots::level_style(a);
            let (colour_b, shape_b) = crate::render::plots::level_style(b);
            assert!(colour_a != colour_b && shape_a != shape_b, "levels {a} and {b}");
        }
    }
}

/// The demo with `--progress always`: every group gets a progress-curve article with its
/// parameters, models tried, a runs-test row per fitted well, the two plots (whose fitted curves
/// follow the reads), and the trust table takes the progress analysis's own verdict.
#[test]
fn demo_report_with_progress_always_has_the_progress_section_and_plots() {
    let layer = SettingLayer {
        progress: Some("always".into()),
        report: Some("full".into()),
        ..demo_layer()
    };
    let results = demo_results_with(&layer);
    let analysed: Vec<_> = results.progress.groups.iter().filter(|g| g.analysed).collect();
    assert!(
        !analysed.is_empty(),
        "the demo's groups get progress fits with --progress always"
    );
    let record = record(&layer);
    let parts = ReportParts::build(&results, &record).unwrap();
    assert_eq!(parts.progress.len(), analysed.len());
    for (view, plots) in &parts.progress {
        assert_eq!(plots.len(), 2);
        assert!(plots[0].svg.contains("S0 = "), "the legend names the S0 levels");
        // The fitted curve follows the reads: residuals are small beside the signal's span.
        let signal: Vec<f64> = view
            .curves
            .iter()
            .flat_map(|c| c.observed.iter().copied())
            .collect();
        let span = signal.iter().copied().fold(f64::NEG_INFINITY, f64::max)
            - signal.iter().copied().fold(f64::INFINITY, f64::min);
        for curve in &view.curves {
            assert_eq!(curve.times_s.len(), curve.fitted.len());
            let worst = ProgressView::residuals(curve)
                .iter()
                .map(|r| r.1.abs())
                .fold(0.0, f64::max);
            assert!(
                worst < 0.1 * span,
                "well {}: residual {worst} of span {span}",
                curve.well
            );
        }
    }
    let page = report_html(&parts);
    let progress = section(&page, "progress");
    assert_eq!(
        progress
            .matches("<article class=\"group\" id=\"progress-")
            .count(),
        results.progress.groups.len()
    );
    assert_eq!(progress.matches("<figure").count(), 2 * analysed.len());
    for group in &analysed {
        assert!(group.parameters.contains_key("Km"));
        for tried in &group.models_tried {
            assert!(
                progress.contains(&super::html::escape(&crate::render::words::verdict_words(tried))),
                "{}",
                tried.model.name()
            );
        }
        for curve in &group.curves {
            assert!(progress.contains(&format!("<a href=\"#well-{}\">", curve.well)));
        }
        let reason = crate::render::words::trust_reason_words(&group.decision.reason);
        assert!(progress.contains(&super::html::escape(&reason)));
    }
    assert!(progress.contains("profile 95% interval"));
    // The trust table takes the progress analysis's verdict.
    let trust = section(&page, "trust");
    for group in &analysed {
        assert!(
            trust.contains(trust_analysis_words(group.decision.trust)),
            "{:?}",
            group.decision.trust
        );
        let reason = crate::render::words::trust_reason_words(&group.decision.reason);
        assert!(trust.contains(&super::html::escape(&reason)));
    }
    assert!(!trust.contains("the only analysis this run made"));
    // Full mode writes the progress plots as PNG; they decode and are not blank.
    let pngs = parts.png_files().unwrap();
    for (view, _) in &parts.progress {
        for stem in ["curves", "residuals"] {
            let name = format!("plots/progress-{}-{stem}.png", view.number);
            let file = pngs.iter().find(|f| f.name == name).unwrap();
            let (width, height) = png_is_not_blank(&file.bytes);
            assert!(width >= 600 && height >= 300, "{name}");
        }
    }
}

/// Without a progress fit the trust table keeps the initial-rate verdict and says why.
#[test]
fn trust_without_progress_fit_is_initial_rates() {
    let layer = SettingLayer {
        progress: Some("never".into()),
        ..demo_layer()
    };
    let results = demo_results_with(&layer);
    assert!(results.progress.groups.iter().all(|g| !g.analysed));
    for verdict in trust_verdicts(&results) {
        assert_eq!(verdict.analysis, "initial rates");
        assert!(verdict.reasons[0].contains("only analysis"));
    }
}
