//! Tests of the report: the structure of the demo plate's page against a golden file (headings,
//! table rows, one miniature per used well, the flagged-well table), the PNGs, `run.json`, and
//! the 384- and 1536-well overviews of simulated plates.

use super::*;
use crate::import::{import_cells, ImportOptions};
use crate::layout::parse_layout;
use crate::plate::PlateFormat;
use crate::run::analyse_inputs;
use crate::settings::resolve_analysis;
use crate::sheet_reader::read_text_cells;
use crate::simulate::{large_plate_spec, layout_tidy_csv, simulate, wide_csv, WideCsvOptions};

/// The demo plate's settings.
pub(crate) fn demo_layer() -> SettingLayer {
    toml::from_str(crate::demo::DEMO_ASSAY).unwrap()
}

/// The demo plate, analysed.
pub(crate) fn demo_results() -> RunResults {
    let grid = read_text_cells(
        crate::demo::DEMO_DATA.as_bytes(),
        "amber-fen-wide.csv (embedded demo)",
    )
    .unwrap();
    let data = import_cells(&grid, &ImportOptions::default()).unwrap();
    let layout_grid = read_text_cells(crate::demo::DEMO_LAYOUT.as_bytes(), "amber-fen-layout.csv").unwrap();
    let layout = parse_layout(&layout_grid, data.plate).unwrap();
    analyse_inputs(data, layout, &resolve_analysis(&demo_layer()).unwrap()).unwrap()
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
    let results = analyse_inputs(data, layout, &resolve_analysis(&layer).unwrap()).unwrap();
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

fn table_rows(section: &str) -> usize {
    section.matches("<tr>").count() + section.matches("<tr ").count()
}

fn section<'a>(page: &'a str, id: &str) -> &'a str {
    let start = page.find(&format!("<section id=\"{id}\">")).unwrap();
    let end = start + page[start..].find("</section>").unwrap();
    &page[start..end]
}

/// A summary of the page that harmless changes (wording, styling, plot details, numbers in the
/// last digits) leave alone: section headings, group headings, row counts of each table, the
/// flagged wells with their flags, and the wells the overview links.
fn structure(page: &str) -> String {
    let mut lines = Vec::new();
    for heading in all_between(page, "<h2>", "</h2>") {
        lines.push(format!("h2 {heading}"));
    }
    for heading in all_between(page, "<h3>", "</h3>") {
        lines.push(format!("h3 {heading}"));
    }
    for id in ["inputs", "settings", "conditions", "trust", "checklist"] {
        lines.push(format!("rows {id} {}", table_rows(section(page, id))));
    }
    for row in all_between(section(page, "flagged"), "<tr data-well=\"", "</tr>") {
        let well = row.split('"').next().unwrap_or("");
        let cells = all_between(row, "<td>", "</td>");
        lines.push(format!("flagged {well} {}", cells.get(2).copied().unwrap_or("")));
    }
    let overview = section(page, "overview");
    let linked = overview.matches("<a href=\"#well-").count();
    let cells = overview.matches("data-well=").count();
    lines.push(format!("overview cells {cells} linked {linked}"));
    lines.push(format!(
        "details {}",
        section(page, "details").matches("<figure id=\"well-").count()
    ));
    lines.push(format!(
        "group figures {}",
        section(page, "fits").matches("<figure").count()
    ));
    lines.join("\n") + "\n"
}

fn demo_page() -> (RunResults, String) {
    let results = demo_results();
    let layer = demo_layer();
    let records = input_records(&[], &results).unwrap();
    let parts = ReportParts::build(&results, &layer, &records).unwrap();
    let page = report_html(&parts);
    (results, page)
}

/// Golden file: `fixtures/golden/demo-report-structure.txt`. After an intended change, rewrite it
/// with `PLATEKIN_UPDATE_GOLDEN=1 cargo test report::tests` and review the diff.
#[test]
fn demo_report_structure_matches_the_golden_file() {
    let (_, page) = demo_page();
    let actual = structure(&page);
    let path =
        std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("fixtures/golden/demo-report-structure.txt");
    if std::env::var_os("PLATEKIN_UPDATE_GOLDEN").is_some() {
        std::fs::create_dir_all(path.parent().unwrap()).unwrap();
        std::fs::write(&path, &actual).unwrap();
    }
    let expected = std::fs::read_to_string(&path).unwrap();
    assert_eq!(
        actual, expected,
        "report structure changed; see the test's doc comment"
    );
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
    let files = render_report_outputs(&results, &layer, &[], &[]).unwrap();
    let pngs: Vec<&OutputFile> = files.iter().filter(|f| f.name.ends_with(".png")).collect();
    let expected = 1 + 3 * results.fits.len() + results.analysis.wells.len();
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
    let earlier = vec![OutputFile {
        name: "wells.csv".into(),
        bytes: b"well\n".to_vec(),
    }];
    let files = render_report_outputs(&results, &layer, &[], &earlier).unwrap();
    let run: Value = serde_json::from_slice(&files.last().unwrap().bytes).unwrap();
    assert_eq!(run["version"], env!("CARGO_PKG_VERSION"));
    assert_eq!(run["inputs"].as_array().unwrap().len(), 3);
    assert_eq!(
        run["inputs"][0]["sha256"],
        sha256_hex(crate::demo::DEMO_DATA.as_bytes()),
        "the data's checksum"
    );
    assert_eq!(run["settings"]["extinction"], 16800.0);
    let names: Vec<&str> = run["outputs"]
        .as_array()
        .unwrap()
        .iter()
        .map(|o| o["name"].as_str().unwrap())
        .collect();
    assert_eq!(names, ["wells.csv", "report.html"]);
    assert_eq!(run["report"], "html");
}

/// SHA-256 of "abc": FIPS 180-2, Appendix B.1 (the standard's own example).
#[test]
fn sha256_matches_the_fips_example() {
    assert_eq!(
        sha256_hex(b"abc"),
        "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
    );
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
        ReportMode::from_layer(&SettingLayer::default()),
        Ok(ReportMode::Html)
    );
    let none = render_report_outputs(
        &demo_results(),
        &SettingLayer {
            report: Some("none".into()),
            ..demo_layer()
        },
        &[],
        &[],
    )
    .unwrap();
    assert_eq!(
        none.iter().map(|f| f.name.as_str()).collect::<Vec<_>>(),
        ["run.json"]
    );
}

/// The 384- and 1536-well overviews: every analysed well appears once as a cell, the cells are
/// large enough to read (384: 60 x 42 px miniatures with 9 px labels; 1536: 22 x 16 px heat-map
/// cells), and the whole overview keeps a readable width.
#[test]
fn large_plates_give_a_legible_overview_with_every_well() {
    for (format, min_cell) in [
        (PlateFormat::Wells384, (56, 40)),
        (PlateFormat::Wells1536, (20, 14)),
    ] {
        let (results, layer) = large_results(format);
        let records = Vec::new();
        let parts = ReportParts::build(&results, &layer, &records).unwrap();
        let geometry = crate::plots::OverviewGeometry::for_plate(format);
        assert!(
            geometry.cell_width >= min_cell.0 && geometry.cell_height >= min_cell.1,
            "{format}"
        );
        assert!(
            parts.overview.width <= 1600,
            "{format}: {} px wide",
            parts.overview.width
        );
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
