//! Integration tests of `--report`: the real binary on a demo plate writes report.html and
//! run.json (html, the default), adds plot PNGs (full), writes no report (none), and refuses an
//! unknown choice before writing anything.

mod common;
use common::project;

use std::path::Path;
use std::process::{Command, Output};

fn run_demo_plate(extra: &[&str], out: &Path) -> Output {
    let mut args = vec![
        "run",
        "amber-fen-wide.csv",
        "--assay",
        "amber-fen-assay.toml",
        "--out",
        out.to_str().unwrap(),
    ];
    args.extend(extra);
    Command::new(env!("CARGO_BIN_EXE_platekin"))
        .args(&args)
        .current_dir(project("demo-plates"))
        .output()
        .expect("the platekin binary runs")
}

#[test]
fn default_run_writes_a_report_and_run_json_with_checksums() {
    let scratch = tempfile::tempdir().unwrap();
    let out = scratch.path().join("out");
    let output = run_demo_plate(&[], &out);
    assert!(
        output.status.success(),
        "{}",
        String::from_utf8_lossy(&output.stderr)
    );
    let page = std::fs::read_to_string(out.join("report.html")).unwrap();
    assert!(page.starts_with("<!DOCTYPE html>"));
    assert!(page.contains("<h2>Plate overview</h2>") && page.contains("<h2>Reporting checklist</h2>"));
    assert!(!out.join("plots").exists(), "html mode writes no PNGs");
    let run: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("run.json")).unwrap()).unwrap();
    let data = std::fs::read(project("demo-plates/amber-fen-wide.csv")).unwrap();
    assert_eq!(
        run["inputs"][0]["sha256"],
        platekin::files::input::sha256_hex(&data)
    );
    assert_eq!(run["inputs"][0]["bytes"], data.len());
    assert_eq!(run["settings"]["report"], "html");
    assert_eq!(run["settings"]["alpha"], 0.01, "defaults are filled in");
    let outputs: Vec<&str> = run["outputs"]
        .as_array()
        .unwrap()
        .iter()
        .map(|o| o["name"].as_str().unwrap())
        .collect();
    for name in [
        "wells.csv",
        "conditions.csv",
        "fit.json",
        "settings.toml",
        "report.html",
    ] {
        assert!(outputs.contains(&name), "{name} listed in run.json");
        let bytes = std::fs::read(out.join(name)).unwrap();
        let listed = run["outputs"]
            .as_array()
            .unwrap()
            .iter()
            .find(|o| o["name"] == name)
            .unwrap();
        assert_eq!(
            listed["sha256"],
            platekin::files::input::sha256_hex(&bytes),
            "{name}"
        );
    }
    let summary = String::from_utf8_lossy(&output.stdout);
    assert!(
        summary.contains("report.html") && summary.contains("run.json"),
        "{summary}"
    );
}

#[test]
fn full_report_adds_pngs_and_none_writes_no_report() {
    let scratch = tempfile::tempdir().unwrap();
    let full = scratch.path().join("full");
    let output = run_demo_plate(&["--report", "full"], &full);
    assert!(
        output.status.success(),
        "{}",
        String::from_utf8_lossy(&output.stderr)
    );
    let overview = std::fs::read(full.join("plots/overview.png")).unwrap();
    assert_eq!(&overview[..8], b"\x89PNG\r\n\x1a\n");
    assert!(full.join("plots/group-1-rate.png").exists());
    assert!(full.join("plots/group-2-double-reciprocal.png").exists());

    let none = scratch.path().join("none");
    let output = run_demo_plate(&["--report", "none"], &none);
    assert!(
        output.status.success(),
        "{}",
        String::from_utf8_lossy(&output.stderr)
    );
    assert!(!none.join("report.html").exists());
    assert!(none.join("run.json").exists());
}

#[test]
fn unknown_report_choice_is_refused_and_nothing_is_written() {
    let scratch = tempfile::tempdir().unwrap();
    let out = scratch.path().join("out");
    let output = run_demo_plate(&["--report", "pdf"], &out);
    assert_eq!(output.status.code(), Some(2));
    let stderr = String::from_utf8_lossy(&output.stderr);
    assert!(
        stderr.contains("unknown report 'pdf'") && !stderr.contains("panicked"),
        "{stderr}"
    );
    assert!(!out.exists());
}

/// Decodes a PNG and checks it is not blank: more than 1% of pixels differ from the first, and
/// lines or text are drawn (common practice for a smoke test of a rendered plot).
fn assert_png_not_blank(path: &Path) {
    let bytes = std::fs::read(path).unwrap();
    let mut reader = png::Decoder::new(&bytes[..]).read_info().unwrap();
    let mut pixels = vec![0; reader.output_buffer_size()];
    let info = reader.next_frame(&mut pixels).unwrap();
    let pixels = &pixels[..info.buffer_size()];
    let channels = info.color_type.samples();
    let first = &pixels[..channels];
    let differing = pixels.chunks(channels).filter(|p| *p != first).count();
    assert!(
        differing * 100 > pixels.len() / channels,
        "{}: {differing} pixels differ",
        path.display()
    );
    let dark = pixels
        .chunks(channels)
        .filter(|p| p.iter().take(3).all(|c| *c < 80))
        .count();
    assert!(dark > 100, "{}: {dark} dark pixels", path.display());
}

/// The demo with `--progress always --report full`: the page has the progress-curve section with
/// its plots, and every progress PNG decodes and is not blank.
#[test]
fn progress_always_report_has_the_progress_section_and_plots() {
    let scratch = tempfile::tempdir().unwrap();
    let out = scratch.path().join("progress");
    let output = run_demo_plate(&["--progress", "always", "--report", "full"], &out);
    assert!(
        output.status.success(),
        "{}",
        String::from_utf8_lossy(&output.stderr)
    );
    let page = std::fs::read_to_string(out.join("report.html")).unwrap();
    assert!(page.contains("<section id=\"progress\">"));
    assert!(page.contains("Progress curves with the global"));
    assert!(page.contains("Progress-curve residuals against time"));
    let progress: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("progress.json")).unwrap()).unwrap();
    let groups = progress["groups"].as_array().unwrap();
    let mut analysed = 0;
    for (index, group) in groups.iter().enumerate() {
        if group["analysed"] == true {
            analysed += 1;
            for stem in ["curves", "residuals"] {
                assert_png_not_blank(&out.join(format!("plots/progress-{}-{stem}.png", index + 1)));
            }
        }
    }
    assert!(analysed > 0);
    // The plot data stay out of progress.json.
    assert!(groups.iter().all(|g| g.get("curves").is_none()));
    for name in [
        "overview",
        "group-1-rate",
        "group-1-residuals",
        "group-2-double-reciprocal",
    ] {
        assert_png_not_blank(&out.join(format!("plots/{name}.png")));
    }
}
