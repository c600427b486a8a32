//! Signal to concentration (issue 11): a simulated fluorescence plate with product standards
//! (the plate simulator's Michaelis-Menten curves, RFU, a slight inner-filter bend at the top,
//! standards in duplicate) recovers the truth through the library and the binary; the coverage of
//! kcat's interval with the slope's uncertainty combined; and each new bad input refused, naming
//! the file and the well.

mod common;

use common::{assert_refused, platekin, text};
use platekin::config::{resolve_analysis, resolve_fit, SettingLayer};
use platekin::files::sheet::read_text_cells;
use platekin::import::{import_cells, ImportOptions};
use platekin::layout::parse_layout;
use platekin::pipeline::{analyse_inputs, RunResults};
use platekin::simulate::fluorescence::{fluorescence_plate, KCAT_PER_S, KM_UM, RFU_PER_UM};

/// A scratch folder holding the plate of `seed` as `plate.csv` and its layout as `layout.csv`.
fn scratch_with_plate(
    seed: u64,
) -> (
    tempfile::TempDir,
    platekin::simulate::fluorescence::FluorescencePlate,
) {
    let scratch = tempfile::tempdir().unwrap();
    let plate = fluorescence_plate(seed).unwrap();
    std::fs::write(scratch.path().join("plate.csv"), &plate.export_csv).unwrap();
    std::fs::write(scratch.path().join("layout.csv"), &plate.layout_csv).unwrap();
    (scratch, plate)
}

fn fluorescence_layer() -> SettingLayer {
    SettingLayer {
        signal: Some("fluorescence".into()),
        // Profile intervals are not needed for these checks and cost a refit per parameter.
        profile: Some(false),
        ..SettingLayer::default()
    }
}

fn analyse(export: &str, layout: &str, layer: &SettingLayer) -> RunResults {
    let grid = read_text_cells(export.as_bytes(), "hollin-moss.csv").unwrap();
    let data = import_cells(&grid, &ImportOptions::default()).unwrap();
    let layout_grid = read_text_cells(layout.as_bytes(), "hollin-moss-layout.csv").unwrap();
    let layout = parse_layout(&layout_grid, data.plate).unwrap();
    analyse_inputs(
        data,
        layout,
        &resolve_analysis(layer).unwrap(),
        &resolve_fit(layer).unwrap(),
        &mut |_, _| {},
    )
    .unwrap()
}

/// kcat (value, interval, se) and Km of the plate's one group.
fn constants(results: &RunResults) -> ((f64, [f64; 2], f64), f64) {
    let fit = &results.fits[0];
    let kcat = &fit.parameters["kcat"];
    (
        (kcat.value, kcat.ci95.unwrap(), kcat.se.unwrap()),
        fit.parameters["Km"].value,
    )
}

#[test]
fn a_fluorescence_plate_with_standards_recovers_kcat_and_km_with_the_slope_in_the_interval() {
    let plate = fluorescence_plate(11).unwrap();
    let results = analyse(&plate.export_csv, &plate.layout_csv, &fluorescence_layer());
    let calibration = results
        .analysis
        .signal
        .calibration
        .as_ref()
        .expect("a standard curve");
    assert_eq!(calibration.curves.len(), 1);
    let curve = &calibration.curves[0];
    // The inner-filter bend at the top is found: the highest level still linear is named, and the
    // default (auto) fits a second-order curve over every level.
    assert!(curve.curvature.bends, "{:?}", curve.curvature);
    assert!(
        curve.curvature.highest_linear.is_some_and(|top| top < 16.0),
        "{:?}",
        curve.curvature
    );
    assert_eq!(curve.range, (0.0, 16.0));
    let term = curve.quadratic.expect("a second-order curve");
    // The bend: the simulator's inner filter is (1 - 10^-A) / (A ln 10) ~ 1 - A ln(10) / 2 with
    // A = 0.004 c, so q / b ~ -0.0046 per uM (the same expansion over the buffer's own signal).
    let bend_per_um = term.coefficient / curve.line.slope;
    assert!((-0.008..-0.002).contains(&bend_per_um), "{bend_per_um}");
    // Samples read low on the curve, where the slope is taken.
    assert!(
        (0.0..2.0).contains(&curve.working_concentration),
        "{}",
        curve.working_concentration
    );
    assert_eq!(results.analysis.signal.rate_unit(), "uM/s");
    let ((kcat, [lo, hi], _), km) = constants(&results);
    assert!((kcat / KCAT_PER_S - 1.0).abs() < 0.05, "kcat {kcat}");
    assert!((km / KM_UM - 1.0).abs() < 0.08, "Km {km}");
    assert!(lo < KCAT_PER_S && KCAT_PER_S < hi, "[{lo}, {hi}]");
    assert!(
        results.fits[0]
            .warnings
            .iter()
            .any(|w| w.contains("slope uncertainty") && w.contains("kcat")),
        "{:?}",
        results.fits[0].warnings
    );
}

/// How many simulated plates the coverage checks run: `PLATEKIN_CALIBRATION_PLATES`, else 40.
fn simulated_plates() -> usize {
    std::env::var("PLATEKIN_CALIBRATION_PLATES")
        .ok()
        .and_then(|text| text.parse().ok())
        .unwrap_or(40)
}

/// The coverage of kcat's 95% interval over simulated plates (each its own seed), with the
/// slope's uncertainty combined. CI runs 40 plates; `PLATEKIN_CALIBRATION_PLATES=200 cargo test
/// --release --test calibration -- --nocapture coverage` runs more and prints the figures.
#[test]
fn coverage_of_kcat_with_the_slope_uncertainty() {
    let plates = simulated_plates();
    let mut covered = 0;
    let mut covered_without_slope = 0;
    let mut errors = Vec::new();
    for seed in 0..plates as u64 {
        let plate = fluorescence_plate(1000 + seed).unwrap();
        let results = analyse(&plate.export_csv, &plate.layout_csv, &fluorescence_layer());
        let ((kcat, [lo, hi], se), _) = constants(&results);
        if lo <= KCAT_PER_S && KCAT_PER_S <= hi {
            covered += 1;
        }
        // The same interval without the slope's term: the fit's SE alone.
        let curve = &results.analysis.signal.calibration.as_ref().unwrap().curves[0];
        let fit_se = (se * se - (kcat * curve.slope_relative_se()).powi(2))
            .max(0.0)
            .sqrt();
        let half = (hi - lo) / 2.0 * fit_se / se;
        if (kcat - KCAT_PER_S).abs() <= half {
            covered_without_slope += 1;
        }
        errors.push(kcat / KCAT_PER_S - 1.0);
        if std::env::var_os("PLATEKIN_CALIBRATION_VERBOSE").is_some() {
            println!(
                "plate {seed}: kcat {:+.2}% (SE {:.2}%, fit alone {:.2}%), slope {:+.2}% of the linear response (SE {:.2}%), fitted to {} uM",
                100.0 * (kcat / KCAT_PER_S - 1.0),
                100.0 * se / kcat,
                100.0 * fit_se / kcat,
                100.0 * (curve.line.slope / RFU_PER_UM - 1.0),
                100.0 * curve.slope_relative_se(),
                curve.range.1
            );
        }
    }
    let bias = errors.iter().sum::<f64>() / plates as f64;
    let rmse = (errors.iter().map(|e| e * e).sum::<f64>() / plates as f64).sqrt();
    println!(
        "coverage of kcat over {plates} plates: {covered} with the slope's uncertainty, {covered_without_slope} without; bias {:+.2}%, RMSE {:.2}%",
        100.0 * bias,
        100.0 * rmse
    );
    // 95% nominal. Measured (400 plates, see DEVELOPERS.md): 376/400 (94.0%), bias +0.03%, RMSE
    // 0.77% with the default second-order curve; the straight line up to the highest linear level
    // covered 76%, because its slope's bias depended on where the curvature test ended the range.
    // The seeds are fixed, so the check is deterministic; its floor is the coverage study's 85%.
    assert!(
        covered >= covered_without_slope,
        "{covered} vs {covered_without_slope}"
    );
    assert!(covered * 100 >= plates * 85, "{covered} of {plates}");
    assert!(bias.abs() < 0.01, "bias {bias}");
}

/// The progress-curve fit through a second-order standard curve: the reads are straightened by
/// the curve (`PlateSignal::straightened_signal`) before the whole curves are fitted, so kcat and
/// Km come out unbiased and kcat's interval (the slope's uncertainty combined) covers the truth.
/// CI runs 40 plates; `PLATEKIN_CALIBRATION_PLATES=400 cargo test --release --test calibration
/// -- --nocapture progress_coverage` prints the figures of DEVELOPERS.md.
#[test]
fn progress_coverage_through_the_standard_curve() {
    let plates = simulated_plates();
    let layer = SettingLayer {
        progress: Some("always".into()),
        ..fluorescence_layer()
    };
    let (mut covered_kcat, mut covered_km) = (0, 0);
    let (mut kcat_errors, mut km_errors) = (Vec::new(), Vec::new());
    for seed in 0..plates as u64 {
        let plate = fluorescence_plate(1000 + seed).unwrap();
        let results = analyse(&plate.export_csv, &plate.layout_csv, &layer);
        let group = &results.progress.groups[0];
        assert!(group.analysed, "plate {seed}: {:?}", group.run);
        let kcat = &group.parameters["kcat"];
        let km = &group.parameters["Km"];
        let [lo, hi] = kcat.ci95.unwrap();
        covered_kcat += usize::from(lo <= KCAT_PER_S && KCAT_PER_S <= hi);
        let [lo, hi] = km.ci95.unwrap();
        covered_km += usize::from(lo <= KM_UM && KM_UM <= hi);
        kcat_errors.push(kcat.value / KCAT_PER_S - 1.0);
        km_errors.push(km.value / KM_UM - 1.0);
    }
    let mean = |errors: &[f64]| errors.iter().sum::<f64>() / errors.len() as f64;
    println!(
        "progress curves over {plates} plates: kcat covered {covered_kcat}, bias {:+.2}%; Km covered {covered_km}, bias {:+.2}%",
        100.0 * mean(&kcat_errors),
        100.0 * mean(&km_errors)
    );
    assert!(
        covered_kcat * 100 >= plates * 85,
        "kcat {covered_kcat} of {plates}"
    );
    assert!(covered_km * 100 >= plates * 85, "Km {covered_km} of {plates}");
    assert!(mean(&kcat_errors).abs() < 0.01, "kcat bias");
    assert!(mean(&km_errors).abs() < 0.02, "Km bias");
}

/// Runs the simulated fluorescence plate of seed 5 through the binary into `out` with `extra`
/// flags; the run must succeed.
fn run_fluorescence_plate(extra: &[&str]) -> (tempfile::TempDir, std::process::Output) {
    let (scratch, _) = scratch_with_plate(5);
    let mut args = vec![
        "run",
        "plate.csv",
        "--layout",
        "layout.csv",
        "--signal",
        "fluorescence",
        "--out",
        "out",
    ];
    args.extend_from_slice(extra);
    let output = platekin(&args, scratch.path());
    assert!(output.status.success(), "{}", text(&output.stderr));
    (scratch, output)
}

#[test]
fn the_binary_writes_rates_in_concentration_units_from_the_standards() {
    let (scratch, _) = run_fluorescence_plate(&["--report", "none"]);
    let wells = std::fs::read_to_string(scratch.path().join("out/wells.csv")).unwrap();
    assert!(wells.lines().next().unwrap().contains("rate [uM/s]"), "{wells}");
    let settings = std::fs::read_to_string(scratch.path().join("out/settings.toml")).unwrap();
    assert!(settings.contains("signal = \"fluorescence\""), "{settings}");
}

/// `--standard-curve` through the binary: the default (auto) fits the simulated plate's bent
/// standards to second order over every level; `line` keeps the straight line up to the highest
/// level still linear; each is written in `calibration.json`, `settings.toml` and the summary; an
/// unknown model is refused naming the accepted ones, with nothing written.
#[test]
fn the_standard_curve_model_is_chosen_recorded_and_checked() {
    let calibration_of = |scratch: &tempfile::TempDir| -> serde_json::Value {
        let text = std::fs::read_to_string(scratch.path().join("out/calibration.json")).unwrap();
        serde_json::from_str(&text).unwrap()
    };
    let (auto, output) = run_fluorescence_plate(&["--report", "none"]);
    let curve = &calibration_of(&auto)["curves"][0];
    assert_eq!(curve["model"], "second-order", "{curve}");
    assert_eq!(curve["range"][1], 16.0);
    assert!(
        curve["quadratic"]["coefficient"].as_f64().unwrap() < 0.0,
        "{curve}"
    );
    assert!(curve["curvature"]["highest_linear"].as_f64().unwrap() < 16.0);
    assert!(text(&output.stdout).contains("standard curve (plate, second order)"));
    let settings = std::fs::read_to_string(auto.path().join("out/settings.toml")).unwrap();
    assert!(settings.contains("standard-curve = \"auto\""), "{settings}");

    let (line, output) = run_fluorescence_plate(&["--report", "none", "--standard-curve", "line"]);
    let curve = &calibration_of(&line)["curves"][0];
    assert_eq!(curve["model"], "line", "{curve}");
    assert!(curve["quadratic"].is_null());
    assert_eq!(curve["range"][1], curve["curvature"]["highest_linear"]);
    assert!(text(&output.stdout).contains("standard curve (plate): slope"));

    // `--report full` writes the curve and its residuals as PNGs beside the report's SVGs.
    let (full, _) = run_fluorescence_plate(&["--report", "full"]);
    for name in ["standard-curve-1.png", "standard-residuals-1.png"] {
        let bytes = std::fs::read(full.path().join("out/plots").join(name)).unwrap();
        assert!(bytes.starts_with(b"\x89PNG"), "{name}");
    }

    let (scratch, _) = scratch_with_plate(5);
    let bad = platekin(
        &[
            "run",
            "plate.csv",
            "--layout",
            "layout.csv",
            "--signal",
            "fluorescence",
            "--standard-curve",
            "cubic",
            "--out",
            "bad",
        ],
        scratch.path(),
    );
    assert_refused(
        &bad,
        &["'cubic'", "auto, line or quadratic"],
        &scratch.path().join("bad"),
    );
}

/// The progress fit works on the reader's own signal: on a fluorescence plate its residual SD and
/// its plots' axes are in RFU, never in absorbance units.
#[test]
fn progress_fits_on_a_fluorescence_plate_speak_in_rfu() {
    let (scratch, output) = run_fluorescence_plate(&["--progress", "always"]);
    let stdout = text(&output.stdout);
    let fitted = stdout
        .lines()
        .find(|line| line.contains("global fit of"))
        .unwrap_or_else(|| panic!("no progress fit in the summary:\n{stdout}"));
    assert!(fitted.ends_with(" RFU"), "{fitted}");
    let report = std::fs::read_to_string(scratch.path().join("out/report.html")).unwrap();
    assert!(
        report.contains("residual SD [RFU]"),
        "the models-tried table's unit"
    );
    assert!(report.contains("signal [RFU] (blank- and background-corrected)"));
    assert!(report.contains("observed - fitted [RFU]"));
    // Nothing speaks of extinction or absorbance: the sensitivity is to the standard curve's
    // slope, and the checklist names the standards as the conversion.
    assert!(stdout.contains("standard curve slope -5%/+5%: kcat"), "{stdout}");
    assert!(!stdout.contains("extinction"), "{stdout}");
    assert!(report.contains("Standard curves on the plate (1 curve(s), second order"));
    for absorbance in ["[AU]", " AU;", "residual SD [AU]", "absorbance units"] {
        assert!(
            !report.contains(absorbance),
            "{absorbance} on a fluorescence report"
        );
    }
}

#[test]
fn extinction_with_fluorescence_is_refused_with_the_reason() {
    let (scratch, _) = scratch_with_plate(5);
    let output = platekin(
        &[
            "run",
            "plate.csv",
            "--layout",
            "layout.csv",
            "--signal",
            "fluorescence",
            "--extinction",
            "2e9",
            "--pathlength",
            "1",
            "--out",
            "out",
        ],
        scratch.path(),
    );
    assert_eq!(output.status.code(), Some(2));
    let message = text(&output.stderr);
    assert!(
        message.contains("extinction cannot convert fluorescence"),
        "{message}"
    );
    assert!(!scratch.path().join("out").exists());
}

/// Each bad layout is refused through the binary with exit 2, naming the file and the well (and
/// nothing is written).
#[test]
fn bad_standards_are_refused_naming_the_file_and_the_well() {
    let (scratch, plate) = scratch_with_plate(5);
    let cases: [(&str, String, &[&str]); 3] = [
        (
            "one-level.csv",
            plate
                .layout_csv
                .lines()
                .map(|line| {
                    // Every standard at 4 uM: one level.
                    match line.split_once(",standard,,,") {
                        Some((wells, _)) => format!("{wells},standard,,,4"),
                        None => line.to_string(),
                    }
                })
                .collect::<Vec<_>>()
                .join("\n"),
            &["one-level.csv", "A9", "1 concentration(s)"],
        ),
        (
            "no-concentration.csv",
            plate
                .layout_csv
                .replace("C9:C10,standard,,,1", "C9:C10,standard,,,"),
            &["no-concentration.csv", "C9", "standard", "no concentration"],
        ),
        (
            "no-curve.csv",
            // The standards are made up in buffer B1, the samples in no buffer named.
            plate
                .layout_csv
                .lines()
                .map(|line| match line {
                    _ if line.starts_with('#') => line.to_string(),
                    _ if line.starts_with("well,") => format!("{line},buffer"),
                    _ if line.contains(",standard,") => format!("{line},B1"),
                    _ => format!("{line},"),
                })
                .collect::<Vec<_>>()
                .join("\n"),
            &["no-curve.csv", "A1", "no standard curve", "buffer = 'B1'"],
        ),
    ];
    for (name, layout, expected) in cases {
        std::fs::write(scratch.path().join(name), &layout).unwrap();
        let output = platekin(
            &[
                "run",
                "plate.csv",
                "--layout",
                name,
                "--signal",
                "fluorescence",
                "--out",
                "out",
            ],
            scratch.path(),
        );
        assert_eq!(output.status.code(), Some(2), "{name}");
        let message = text(&output.stderr);
        for part in expected {
            assert!(message.contains(part), "{name}: {part} not in {message}");
        }
        assert!(!scratch.path().join("out").exists());
    }
}

/// Runs the binary in `scratch` on the Amber Fen demo plate (extinction 16,800, no report, no
/// progress fits) with `extra` flags.
fn run_demo_plate(scratch: &std::path::Path, extra: &[&str]) -> std::process::Output {
    let data = common::project("demo-plates/amber-fen-wide.csv");
    let layout = common::project("demo-plates/amber-fen-layout.csv");
    let mut args = vec!["--layout", layout.to_str().unwrap()];
    args.extend_from_slice(extra);
    run_export(scratch, data.to_str().unwrap(), &args)
}

/// Runs the binary in `scratch` on `data` with the demo's extinction coefficient, no report and
/// no progress fits, and `extra` flags.
fn run_export(scratch: &std::path::Path, data: &str, extra: &[&str]) -> std::process::Output {
    let mut args = vec![
        "run",
        data,
        "--extinction",
        "16800",
        "--report",
        "none",
        "--progress",
        "never",
    ];
    args.extend_from_slice(extra);
    platekin(&args, scratch)
}

/// kcat of the first group in a run folder's fit.json.
fn first_kcat(folder: &std::path::Path) -> f64 {
    let fit: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(folder.join("fit.json")).unwrap()).unwrap();
    fit["groups"][0]["parameters"]["kcat"]["value"].as_f64().unwrap()
}

/// The demo plate (200 uL, 0.55 cm) run with the pathlength from its volume and a well diameter
/// whose cylinder holds 200 uL at 5.5 mm (d = sqrt(4 x 200 / (pi x 5.5)) = 6.80438 mm, by hand)
/// gives the same kcat as the pathlength typed, and records the pathlength it used.
#[test]
fn a_pathlength_from_volume_and_diameter_gives_the_same_constants_and_is_recorded() {
    let scratch = tempfile::tempdir().unwrap();
    let typed = run_demo_plate(scratch.path(), &["--pathlength", "0.55", "--out", "typed"]);
    assert!(typed.status.success(), "{}", text(&typed.stderr));
    let from_volume = run_demo_plate(
        scratch.path(),
        &[
            "--volume",
            "200",
            "--well-diameter",
            "6.804382397290101",
            "--out",
            "volume",
        ],
    );
    assert!(from_volume.status.success(), "{}", text(&from_volume.stderr));
    let (a, b) = (
        first_kcat(&scratch.path().join("typed")),
        first_kcat(&scratch.path().join("volume")),
    );
    assert!((a / b - 1.0).abs() < 1e-6, "{a} vs {b}");
    let settings = std::fs::read_to_string(scratch.path().join("volume/settings.toml")).unwrap();
    let recorded: toml::Value = toml::from_str(&settings).unwrap();
    assert!(
        (recorded["pathlength"].as_float().unwrap() - 0.55).abs() < 1e-12,
        "{settings}"
    );
    assert_eq!(recorded["volume"].as_float(), Some(200.0), "{settings}");
    let run = std::fs::read_to_string(scratch.path().join("volume/run.json")).unwrap();
    assert!(
        run.contains("\"pathlength\": 0.5499") || run.contains("\"pathlength\": 0.55"),
        "{run}"
    );
    assert!(run.contains("\"volume\": 200"), "{run}");
    // The recorded settings run again unchanged (pathlength and volume agree).
    let data = common::project("demo-plates/amber-fen-wide.csv");
    let again = platekin(
        &[
            "run",
            data.to_str().unwrap(),
            "--assay",
            "volume/settings.toml",
            "--out",
            "again",
            "--report",
            "none",
        ],
        scratch.path(),
    );
    assert!(again.status.success(), "{}", text(&again.stderr));
    // A volume larger than the well is refused, naming the setting and the well's capacity.
    let overfull = run_demo_plate(
        scratch.path(),
        &[
            "--volume",
            "50",
            "--well-geometry",
            "1536-square",
            "--out",
            "overfull",
        ],
    );
    assert_eq!(overfull.status.code(), Some(2));
    let message = text(&overfull.stderr);
    assert!(
        message.contains("volume 50 uL is more than the well holds"),
        "{message}"
    );
    assert!(!scratch.path().join("overfull").exists());
}

/// The `window_slope` of `well` in a run folder's wells.csv.
fn window_slope(folder: &std::path::Path, well: &str) -> f64 {
    let wells = std::fs::read_to_string(folder.join("wells.csv")).unwrap();
    let mut lines = wells.lines();
    let header: Vec<&str> = lines.next().unwrap().split(',').collect();
    let column = header.iter().position(|h| h.starts_with("window_slope")).unwrap();
    let row = lines.find(|line| line.starts_with(&format!("{well},"))).unwrap();
    row.split(',').nth(column).unwrap().parse().unwrap()
}

/// A water-peak table gives each listed well its own pathlength: (A977 - A900) / 0.18 is 0.55 cm
/// for every well but the no-enzyme control A7, read at 0.5 cm (0.090 / 0.18, by hand), so A7's
/// slope over a fixed window (controls have no background subtracted) is 0.55 / 0.5 = 1.1 times the
/// slope with 0.55 cm typed, and B7's is unchanged.
#[test]
fn a_water_peak_table_gives_each_well_its_own_pathlength() {
    let scratch = tempfile::tempdir().unwrap();
    let mut table = String::from("well,A977,A900\n");
    for row in ["A", "B", "C", "D", "E", "F", "G", "H"] {
        for column in 1..=12 {
            let a977 = if (row, column) == ("A", 7) { 0.131 } else { 0.140 };
            table.push_str(&format!("{row}{column},{a977},0.041\n"));
        }
    }
    std::fs::write(scratch.path().join("water.csv"), table).unwrap();
    let fixed = ["--window", "0:300", "--initial-rate", "chord"];
    let typed = run_demo_plate(
        scratch.path(),
        &[&fixed[..], &["--pathlength", "0.55", "--out", "typed"]].concat(),
    );
    assert!(typed.status.success(), "{}", text(&typed.stderr));
    let table_run = run_demo_plate(
        scratch.path(),
        &[&fixed[..], &["--pathlength-from", "water.csv", "--out", "table"]].concat(),
    );
    assert!(table_run.status.success(), "{}", text(&table_run.stderr));
    let ratio =
        window_slope(&scratch.path().join("table"), "A7") / window_slope(&scratch.path().join("typed"), "A7");
    assert!((ratio - 1.1).abs() < 1e-9, "{ratio}");
    let same =
        window_slope(&scratch.path().join("table"), "B7") / window_slope(&scratch.path().join("typed"), "B7");
    assert!((same - 1.0).abs() < 1e-9, "{same}");
    let run = std::fs::read_to_string(scratch.path().join("table/run.json")).unwrap();
    assert!(run.contains("water.csv"), "{run}");
    // A bad cell is refused naming the file, row and column.
    std::fs::write(scratch.path().join("bad.csv"), "well,A977,A900\nA1,0.14,n/a\n").unwrap();
    let bad = run_demo_plate(
        scratch.path(),
        &[&fixed[..], &["--pathlength-from", "bad.csv", "--out", "bad"]].concat(),
    );
    assert_eq!(bad.status.code(), Some(2));
    let message = text(&bad.stderr);
    assert!(
        message.contains("bad.csv") && message.contains("row 2") && message.contains("A900"),
        "{message}"
    );
    assert!(!scratch.path().join("bad").exists());
}

/// A fluorescence well whose export holds the reader's over-range marker from some read on is
/// flagged `saturated` (not merely unreadable) and said so in its notes.
#[test]
fn an_over_range_marker_flags_a_fluorescence_well_saturated() {
    let plate = fluorescence_plate(5).unwrap();
    let mut lines: Vec<String> = plate.export_csv.lines().map(str::to_string).collect();
    let header = lines.iter().position(|line| line.starts_with("Time")).unwrap();
    let column = lines[header].split(',').position(|cell| cell == "H3").unwrap();
    for line in lines.iter_mut().skip(header + 21).take(10) {
        let mut cells: Vec<String> = line.split(',').map(str::to_string).collect();
        if cells.len() > column {
            cells[column] = "OVER".to_string();
            *line = cells.join(",");
        }
    }
    let export = lines.join("\n") + "\n";
    let results = analyse(&export, &plate.layout_csv, &fluorescence_layer());
    let well = results
        .analysis
        .wells
        .iter()
        .find(|well| well.well.to_string() == "H3")
        .unwrap();
    assert!(
        well.rate.flags.contains(&platekin::rates::Flag::Saturated),
        "{:?}",
        well.rate.flags
    );
    assert!(
        well.rate
            .notes
            .iter()
            .any(|note| note.contains("fluorescence over the reader's range")),
        "{:?}",
        well.rate.notes
    );
}

/// `--kcat-unit 1/min` gives kcat and kcat/Km 60 times their per-second values (1 min = 60 s) with
/// the unit written beside them in fit.json and the summary; an unknown unit is refused.
#[test]
fn kcat_per_minute_is_sixty_times_per_second_everywhere() {
    let scratch = tempfile::tempdir().unwrap();
    let seconds = run_demo_plate(scratch.path(), &["--pathlength", "0.55", "--out", "seconds"]);
    assert!(seconds.status.success(), "{}", text(&seconds.stderr));
    let minutes = run_demo_plate(
        scratch.path(),
        &["--pathlength", "0.55", "--kcat-unit", "1/min", "--out", "minutes"],
    );
    assert!(minutes.status.success(), "{}", text(&minutes.stderr));
    let fit = |folder: &str| -> serde_json::Value {
        serde_json::from_str(&std::fs::read_to_string(scratch.path().join(folder).join("fit.json")).unwrap())
            .unwrap()
    };
    let (per_second, per_minute) = (fit("seconds"), fit("minutes"));
    for (name, unit) in [("kcat", "1/min"), ("kcat_over_Km", "1/(M*min)")] {
        let a = &per_second["groups"][0]["parameters"][name];
        let b = &per_minute["groups"][0]["parameters"][name];
        assert_eq!(b["unit"], unit);
        let ratio = b["value"].as_f64().unwrap() / a["value"].as_f64().unwrap();
        assert!((ratio - 60.0).abs() < 1e-9, "{name}: {ratio}");
        // Back to seconds: the same number.
        assert!((b["value"].as_f64().unwrap() / 60.0 / a["value"].as_f64().unwrap() - 1.0).abs() < 1e-12);
        let (a_hi, b_hi) = (a["ci95"][1].as_f64().unwrap(), b["ci95"][1].as_f64().unwrap());
        assert!((b_hi / a_hi - 60.0).abs() < 1e-9, "{name} interval");
    }
    assert!(
        text(&minutes.stdout).contains("1/min"),
        "{}",
        text(&minutes.stdout)
    );
    let bad = run_demo_plate(
        scratch.path(),
        &["--pathlength", "0.55", "--kcat-unit", "1/h", "--out", "bad"],
    );
    assert_eq!(bad.status.code(), Some(2));
    assert!(text(&bad.stderr).contains("kcat-unit"), "{}", text(&bad.stderr));
}

/// The column of `header` in a run's CSV table, as numbers (empty cells as `None`). The columns
/// read here stand before any free text, so splitting at commas is safe.
fn csv_column(path: &std::path::Path, header: &str) -> Vec<Option<f64>> {
    let table = std::fs::read_to_string(path).unwrap();
    let mut lines = table.lines();
    let headers: Vec<&str> = lines.next().unwrap().split(',').collect();
    let index = headers
        .iter()
        .position(|h| *h == header)
        .unwrap_or_else(|| panic!("no column {header} in {headers:?}"));
    lines
        .map(|line| line.split(',').nth(index).and_then(|cell| cell.parse().ok()))
        .collect()
}

/// `--rate-unit nM/min` writes every rate 1000 x 60 times its uM/s value: nano is 1e-9 and micro
/// 1e-6, one minute is 60 s (SI Brochure, 9th edition, 2019, tables 7 and 8). The wells' and the
/// conditions' rates, Vmax with its SE and intervals, the headers, fit.json's unit and the summary
/// line all change together; Km and kcat do not; settings.toml repeats the unit, and the assay
/// file's `rate-unit` key does what the flag does.
#[test]
fn rates_in_nanomolar_per_minute_everywhere() {
    let scratch = tempfile::tempdir().unwrap();
    let base = ["--pathlength", "0.55"];
    let run = |extra: &[&str]| {
        let mut args = base.to_vec();
        args.extend_from_slice(extra);
        let output = run_demo_plate(scratch.path(), &args);
        assert!(output.status.success(), "{}", text(&output.stderr));
        output
    };
    run(&["--out", "default"]);
    let asked = run(&["--rate-unit", "nM/min", "--out", "asked"]);
    assert!(
        text(&asked.stdout).contains("rates in nM/min"),
        "{}",
        text(&asked.stdout)
    );
    let folder = |name: &str| scratch.path().join(name);
    let factor = 1e-6 / 1e-9 * 60.0;
    for (table, internal, written) in [
        ("wells.csv", "rate [uM/s]", "rate [nM/min]"),
        ("wells.csv", "rate_se [uM/s]", "rate_se [nM/min]"),
        ("wells.csv", "background [uM/s]", "background [nM/min]"),
        ("conditions.csv", "rate_mean [uM/s]", "rate_mean [nM/min]"),
        ("conditions.csv", "rate_sd [uM/s]", "rate_sd [nM/min]"),
    ] {
        let before = csv_column(&folder("default").join(table), internal);
        let after = csv_column(&folder("asked").join(table), written);
        assert_eq!(before.len(), after.len());
        assert!(before.iter().flatten().count() > 4, "{table} {internal}");
        for (b, a) in before.iter().zip(&after) {
            match (b, a) {
                (Some(b), Some(a)) => assert!(
                    (a - b * factor).abs() <= 1e-9 * (b * factor).abs().max(1e-12),
                    "{table} {written}: {a} against {b}"
                ),
                (None, None) => {}
                other => panic!("{table} {written}: {other:?}"),
            }
        }
    }
    let fit = |name: &str| -> serde_json::Value {
        serde_json::from_str(&std::fs::read_to_string(folder(name).join("fit.json")).unwrap()).unwrap()
    };
    let (before, after) = (fit("default"), fit("asked"));
    for group in 0..2 {
        let (b, a) = (
            &before["groups"][group]["parameters"],
            &after["groups"][group]["parameters"],
        );
        assert_eq!(b["Vmax"]["unit"], "uM/s");
        assert_eq!(a["Vmax"]["unit"], "nM/min");
        for field in ["value", "se"] {
            let ratio = a["Vmax"][field].as_f64().unwrap() / b["Vmax"][field].as_f64().unwrap();
            assert!((ratio / factor - 1.0).abs() < 1e-12, "Vmax {field}: {ratio}");
        }
        for end in 0..2 {
            let ratio = a["Vmax"]["ci95"][end].as_f64().unwrap() / b["Vmax"]["ci95"][end].as_f64().unwrap();
            assert!((ratio / factor - 1.0).abs() < 1e-12, "Vmax interval: {ratio}");
        }
        // Converting back gives the per-second value again.
        let back = a["Vmax"]["value"].as_f64().unwrap() / factor;
        assert!((back / b["Vmax"]["value"].as_f64().unwrap() - 1.0).abs() < 1e-12);
        assert_eq!(a["Km"], b["Km"]);
        assert_eq!(a["kcat"], b["kcat"]);
    }
    let settings = std::fs::read_to_string(folder("asked").join("settings.toml")).unwrap();
    assert!(settings.contains("rate-unit = \"nM/min\""), "{settings}");

    // The assay file's key, as a lab would keep it.
    std::fs::write(scratch.path().join("assay.toml"), "rate-unit = \"uM/min\"\n").unwrap();
    run(&["--assay", "assay.toml", "--out", "from-assay"]);
    let per_minute = csv_column(&folder("from-assay").join("wells.csv"), "rate [uM/min]");
    let per_second = csv_column(&folder("default").join("wells.csv"), "rate [uM/s]");
    for (m, s) in per_minute.iter().zip(&per_second) {
        if let (Some(m), Some(s)) = (m, s) {
            assert!((m / s - 60.0).abs() < 1e-9, "{m} {s}");
        }
    }
}

/// A rate unit that is not one is refused naming it and the accepted forms; a concentration per
/// time on rates that stay in absorbance units is refused naming both; nothing is written.
#[test]
fn bad_rate_units_are_refused_with_the_accepted_list() {
    let scratch = tempfile::tempdir().unwrap();
    let bad = run_demo_plate(
        scratch.path(),
        &[
            "--pathlength",
            "0.55",
            "--rate-unit",
            "uM/fortnight",
            "--out",
            "bad",
        ],
    );
    assert_eq!(bad.status.code(), Some(2));
    let message = text(&bad.stderr);
    assert!(message.contains("'uM/fortnight'"), "{message}");
    assert!(
        message.contains("uM/min") && message.contains("nM/s"),
        "{message}"
    );
    assert!(!scratch.path().join("bad").exists());

    // Without a pathlength the rates stay in AU/s: no concentration to express.
    let data = common::project("demo-plates/amber-fen-wide.csv");
    let layout = common::project("demo-plates/amber-fen-layout.csv");
    let unconverted = platekin(
        &[
            "run",
            data.to_str().unwrap(),
            "--layout",
            layout.to_str().unwrap(),
            "--report",
            "none",
            "--rate-unit",
            "uM/min",
            "--out",
            "absorbance",
        ],
        scratch.path(),
    );
    assert_refused(
        &unconverted,
        &["uM/min", "AU/s"],
        &scratch.path().join("absorbance"),
    );
}

/// Runs `data` in `scratch` with the demo's extinction coefficient and pathlength (rates in uM/s),
/// no report and no progress fit, and `extra`.
fn run_in_micromolar(scratch: &std::path::Path, data: &str, extra: &[&str]) -> std::process::Output {
    let mut args = vec!["--pathlength", "0.55"];
    args.extend_from_slice(extra);
    run_export(scratch, data, &args)
}

/// The demo layout with the enzyme written as a mass concentration of a protein of `kda`:
/// ug/mL = nM x kDa x 1e-3 (1 nM = 1e-9 mol/L; 1 kDa = 1000 g/mol; 1 g/L = 1000 ug/mL).
fn demo_layout_in_micrograms_per_millilitre(kda: f64) -> String {
    let layout = std::fs::read_to_string(common::project("demo-plates/amber-fen-layout.csv")).unwrap();
    let mut lines = layout.lines();
    let mut text = lines.next().unwrap().replace("enzyme [nM]", "enzyme [ug/mL]") + "\n";
    for line in lines {
        let mut cells: Vec<String> = line.split(',').map(str::to_string).collect();
        if let Ok(nanomolar) = cells[3].parse::<f64>() {
            cells[3] = format!("{}", nanomolar * kda * 1e-3);
        }
        text.push_str(&cells.join(","));
        text.push('\n');
    }
    text
}

/// An enzyme given in ug/mL gives the specific activity in U/mg (1 U = 1 umol/min: IUBMB,
/// Enzyme Nomenclature 1992, and the 1961 International Union of Biochemistry definition) and,
/// without the molecular weight, no kcat with the reason; with `--enzyme-mw` the same kcat as
/// the molar layout, and kcat = specific activity x MW / 60 (U/mg x kDa = umol/min per umol).
#[test]
fn an_enzyme_in_micrograms_per_millilitre_gives_specific_activity_and_with_its_weight_kcat() {
    let scratch = tempfile::tempdir().unwrap();
    let kda = 52.3;
    std::fs::write(
        scratch.path().join("mass-layout.csv"),
        demo_layout_in_micrograms_per_millilitre(kda),
    )
    .unwrap();
    let data = common::project("demo-plates/amber-fen-wide.csv");
    let run = |extra: &[&str]| run_in_micromolar(scratch.path(), data.to_str().unwrap(), extra);
    let molar = run(&[
        "--layout",
        common::project("demo-plates/amber-fen-layout.csv")
            .to_str()
            .unwrap(),
        "--out",
        "molar",
    ]);
    assert!(molar.status.success(), "{}", text(&molar.stderr));
    let without_weight = run(&["--layout", "mass-layout.csv", "--out", "mass"]);
    assert!(
        without_weight.status.success(),
        "{}",
        text(&without_weight.stderr)
    );
    let with_weight = run(&[
        "--layout",
        "mass-layout.csv",
        "--enzyme-mw",
        "52.3",
        "--out",
        "weighed",
    ]);
    assert!(with_weight.status.success(), "{}", text(&with_weight.stderr));
    let fit = |name: &str| -> serde_json::Value {
        serde_json::from_str(&std::fs::read_to_string(scratch.path().join(name).join("fit.json")).unwrap())
            .unwrap()
    };
    let (molar, mass, weighed) = (fit("molar"), fit("mass"), fit("weighed"));
    let summary = text(&without_weight.stdout);
    assert!(
        summary.contains("U/mg") && summary.contains("--enzyme-mw"),
        "{summary}"
    );
    let wells = std::fs::read_to_string(scratch.path().join("mass").join("wells.csv")).unwrap();
    assert!(
        wells.starts_with("well,role,substrate [uM],enzyme [ug/mL],"),
        "{wells}"
    );
    for group in 0..2 {
        let parameters = &mass["groups"][group]["parameters"];
        assert!(parameters.get("kcat").is_none(), "{parameters}");
        let warnings = mass["groups"][group]["warnings"].to_string();
        assert!(
            warnings.contains("no kcat") && warnings.contains("--enzyme-mw"),
            "{warnings}"
        );
        let activity = &parameters["specific_activity"];
        assert_eq!(activity["unit"], "U/mg");
        // By hand: Vmax [uM/s] x 60 s/min = umol/(L min); the enzyme [ug/mL] = mg/L.
        let vmax = parameters["Vmax"]["value"].as_f64().unwrap();
        let enzyme_mg_per_l = if group == 0 { 4.0 } else { 40.0 } * kda * 1e-3;
        let by_hand = vmax * 60.0 / enzyme_mg_per_l;
        let value = activity["value"].as_f64().unwrap();
        assert!((value / by_hand - 1.0).abs() < 1e-12, "{value} against {by_hand}");
        let ratio_se = activity["se"].as_f64().unwrap() / parameters["Vmax"]["se"].as_f64().unwrap();
        assert!((ratio_se / (value / vmax) - 1.0).abs() < 1e-12);
        // With the weight: kcat equals the molar layout's, and kcat = U/mg x kDa / 60.
        let kcat = weighed["groups"][group]["parameters"]["kcat"]["value"]
            .as_f64()
            .unwrap();
        let molar_kcat = molar["groups"][group]["parameters"]["kcat"]["value"]
            .as_f64()
            .unwrap();
        assert!(
            (kcat / molar_kcat - 1.0).abs() < 1e-9,
            "{kcat} against {molar_kcat}"
        );
        assert!((kcat / (value * kda / 60.0) - 1.0).abs() < 1e-9);
    }
    let settings = std::fs::read_to_string(scratch.path().join("weighed").join("settings.toml")).unwrap();
    assert!(settings.contains("enzyme-mw = 52.3"), "{settings}");
    // A weight in Da instead of kDa, or none at all, is refused naming the setting.
    for bad in ["--enzyme-mw=52300", "--enzyme-mw=0", "--enzyme-mw=-1"] {
        let refused = run(&["--layout", "mass-layout.csv", bad, "--out", "bad"]);
        assert_eq!(refused.status.code(), Some(2), "{bad}");
        assert!(
            text(&refused.stderr).contains("enzyme-mw"),
            "{}",
            text(&refused.stderr)
        );
        assert!(!scratch.path().join("bad").exists());
    }
}

/// A layout's enzyme in a unit that is neither molar nor a mass concentration is refused naming
/// the unit, the header cell and every unit the enzyme column accepts.
#[test]
fn an_unknown_enzyme_unit_names_the_accepted_units() {
    let scratch = tempfile::tempdir().unwrap();
    let layout = demo_layout_in_micrograms_per_millilitre(50.0).replace("enzyme [ug/mL]", "enzyme [U/mL]");
    std::fs::write(scratch.path().join("layout.csv"), layout).unwrap();
    let data = common::project("demo-plates/amber-fen-wide.csv");
    let refused = platekin(
        &[
            "run",
            data.to_str().unwrap(),
            "--layout",
            "layout.csv",
            "--out",
            "bad",
        ],
        scratch.path(),
    );
    assert_eq!(refused.status.code(), Some(2));
    let message = text(&refused.stderr);
    assert!(
        message.contains("'U/mL'") && message.contains("mg/mL") && message.contains("nM"),
        "{message}"
    );
    assert!(message.contains("layout.csv"), "{message}");
}

/// The invented turbidity of well `index` (0-based, A1 = 0, row by row) at `time_s`: the same at
/// both wavelengths, as the dual-wavelength correction assumes (a haze that scatters alike), and
/// drifting differently from well to well (a drift shared by every well would leave with the
/// blank).
fn turbidity(index: usize, time_s: f64) -> f64 {
    0.02 + 0.003 * (index % 7) as f64 + 3e-6 * (index % 5) as f64 * time_s
}

/// The demo wide export's header (wells) and reads: (time, the cells after the temperature).
fn demo_reads() -> (Vec<String>, Vec<(f64, Vec<String>)>) {
    let export = std::fs::read_to_string(common::project("demo-plates/amber-fen-wide.csv")).unwrap();
    let mut lines = export.lines().skip_while(|line| !line.starts_with("Time [s]"));
    let header: Vec<String> = lines
        .next()
        .unwrap()
        .split(',')
        .skip(2)
        .map(str::to_string)
        .collect();
    let reads = lines
        .map_while(|line| {
            let cells: Vec<&str> = line.split(',').collect();
            let time: f64 = cells.first()?.parse().ok()?;
            Some((time, cells[2..].iter().map(|cell| cell.to_string()).collect()))
        })
        .collect();
    (header, reads)
}

/// A reading at 405 nm (the demo's, plus the turbidity) and at 600 nm (the turbidity alone); a
/// cell that holds no number stays as it is at 405 nm.
fn two_readings(cell: &str, index: usize, time_s: f64) -> (String, String) {
    let haze = turbidity(index, time_s);
    match cell.parse::<f64>() {
        Ok(value) => (format!("{}", value + haze), format!("{haze}")),
        Err(_) => (cell.to_string(), format!("{haze}")),
    }
}

/// One of [`two_readings`]: the 405 nm one for `pick` 0, else the 600 nm one.
fn reading_at(pick: usize, cell: &str, index: usize, time_s: f64) -> String {
    let (at_405, at_600) = two_readings(cell, index, time_s);
    if pick == 0 {
        at_405
    } else {
        at_600
    }
}

/// The demo plate read at 405 and 600 nm in each shape (invented: the demo's reads plus a haze
/// at 405 nm, the haze alone at 600 nm): wide blocks under label lines, wide columns labelled by
/// wavelength, a long table with a wavelength column, grid blocks under label lines.
fn two_wavelength_exports() -> Vec<(&'static str, String)> {
    let (wells, reads) = demo_reads();
    let mut blocks = String::from("Run,Amber Fen haze check (invented)\n");
    for (label, pick) in [("Wavelength: 405 nm", 0), ("Wavelength: 600 nm", 1)] {
        blocks.push_str(&format!("\n{label}\nTime [s],{}\n", wells.join(",")));
        for (time, cells) in &reads {
            let row: Vec<String> = cells
                .iter()
                .enumerate()
                .map(|(index, cell)| reading_at(pick, cell, index, *time))
                .collect();
            blocks.push_str(&format!("{time},{}\n", row.join(",")));
        }
    }
    let mut columns = String::from("Time [s]");
    for well in &wells {
        columns.push_str(&format!(",{well} 405 nm,{well} (600 nm)"));
    }
    columns.push('\n');
    let mut long = String::from("well,time [s],wavelength [nm],value\n");
    for (time, cells) in &reads {
        columns.push_str(&format!("{time}"));
        for (index, cell) in cells.iter().enumerate() {
            let (at_405, at_600) = two_readings(cell, index, *time);
            columns.push_str(&format!(",{at_405},{at_600}"));
            long.push_str(&format!(
                "{},{time},405,{at_405}\n{},{time},600,{at_600}\n",
                wells[index], wells[index]
            ));
        }
        columns.push('\n');
    }
    let mut grid = String::new();
    for (label, pick) in [("Wavelength: 405 nm", 0), ("Wavelength: 600 nm", 1)] {
        grid.push_str(&format!("{label}\n"));
        for (time, cells) in &reads {
            grid.push_str(&format!("Time {time} s\n,1,2,3,4,5,6,7,8,9,10,11,12\n"));
            for (row, letter) in "ABCDEFGH".chars().enumerate() {
                let values: Vec<String> = (0..12)
                    .map(|column| reading_at(pick, &cells[row * 12 + column], row * 12 + column, *time))
                    .collect();
                grid.push_str(&format!("{letter},{}\n", values.join(",")));
            }
            grid.push('\n');
        }
    }
    vec![
        ("wide-blocks.csv", blocks),
        ("wide-columns.csv", columns),
        ("long.csv", long),
        ("grid.csv", grid),
    ]
}

/// A CSV text as a spreadsheet of one sheet (numbers as numbers), for the XLSX shape.
fn as_workbook(csv_text: &str, path: &std::path::Path) {
    let mut workbook = rust_xlsxwriter::Workbook::new();
    let sheet = workbook.add_worksheet();
    for (row, line) in csv_text.lines().enumerate() {
        for (column, cell) in line.split(',').enumerate() {
            if cell.is_empty() {
                continue;
            }
            let (row, column) = (row as u32, column as u16);
            match cell.parse::<f64>() {
                Ok(number) => sheet.write_number(row, column, number).map(|_| ()),
                Err(_) => sheet.write_string(row, column, cell).map(|_| ()),
            }
            .unwrap();
        }
    }
    workbook.save(path).unwrap();
}

/// Two wavelengths in every export shape, through the binary: without `--wavelength` the run is
/// refused listing both; a wavelength the export lacks is refused listing both; `--wavelength
/// 405 --reference-wavelength 600` subtracts the haze read by read and gives the single-wavelength
/// demo's rates (to rounding: the invented haze is the same at both wavelengths); nothing is
/// written by a refused run.
#[test]
fn two_wavelength_exports_in_every_shape_pick_one_and_subtract_the_reference() {
    let scratch = tempfile::tempdir().unwrap();
    let layout = common::project("demo-plates/amber-fen-layout.csv");
    let run = |data: &str, extra: &[&str]| {
        let mut args = vec!["--layout", layout.to_str().unwrap()];
        args.extend_from_slice(extra);
        run_in_micromolar(scratch.path(), data, &args)
    };
    let demo = common::project("demo-plates/amber-fen-wide.csv");
    let single = run(demo.to_str().unwrap(), &["--out", "single"]);
    assert!(single.status.success(), "{}", text(&single.stderr));
    let expected = csv_column(&scratch.path().join("single").join("wells.csv"), "rate [uM/s]");
    let mut files = Vec::new();
    for (name, contents) in two_wavelength_exports() {
        std::fs::write(scratch.path().join(name), &contents).unwrap();
        if name == "wide-blocks.csv" {
            as_workbook(&contents, &scratch.path().join("wide-blocks.xlsx"));
            files.push("wide-blocks.xlsx".to_string());
        }
        files.push(name.to_string());
    }
    for file in &files {
        let ambiguous = run(file, &["--out", "ambiguous"]);
        assert_eq!(ambiguous.status.code(), Some(2), "{file}");
        let message = text(&ambiguous.stderr);
        // Each wavelength with the row where it is first labelled: `405 nm (row 3) and 600 nm
        // (row 55)` (the rows differ by shape).
        let names_rows =
            |message: &str| message.contains("405 nm (row ") && message.contains(") and 600 nm (row ");
        assert!(
            names_rows(&message) && message.contains("--wavelength"),
            "{file}: {message}"
        );
        let absent = run(file, &["--wavelength", "450", "--out", "absent"]);
        assert_eq!(absent.status.code(), Some(2), "{file}");
        let message = text(&absent.stderr);
        assert!(
            message.contains("450") && names_rows(&message),
            "{file}: {message}"
        );
        assert!(!scratch.path().join("ambiguous").exists() && !scratch.path().join("absent").exists());

        let out = format!("corrected-{file}");
        let corrected = run(
            file,
            &[
                "--wavelength",
                "405",
                "--reference-wavelength",
                "600",
                "--out",
                &out,
            ],
        );
        assert!(corrected.status.success(), "{file}: {}", text(&corrected.stderr));
        let rates = csv_column(&scratch.path().join(&out).join("wells.csv"), "rate [uM/s]");
        assert_eq!(rates.len(), expected.len(), "{file}");
        assert!(expected.iter().flatten().count() > 40);
        for (got, want) in rates.iter().zip(&expected) {
            match (got, want) {
                (Some(got), Some(want)) => {
                    assert!(
                        (got - want).abs() <= 1e-9 * want.abs().max(1e-6),
                        "{file}: {got} against {want}"
                    )
                }
                (None, None) => {}
                other => panic!("{file}: {other:?}"),
            }
        }
        // The haze alone leaves 405 nm rates higher by its drift, so the subtraction did work.
        let uncorrected = run(file, &["--wavelength", "405", "--out", &format!("raw-{file}")]);
        assert!(
            uncorrected.status.success(),
            "{file}: {}",
            text(&uncorrected.stderr)
        );
        let raw = csv_column(
            &scratch.path().join(format!("raw-{file}")).join("wells.csv"),
            "rate [uM/s]",
        );
        let shifted = raw
            .iter()
            .zip(&expected)
            .filter(|(raw, want)| matches!((raw, want), (Some(r), Some(w)) if (r - w).abs() > 1e-4))
            .count();
        assert!(shifted > 20, "{file}: {shifted}");
    }
}

/// The simulated plate's layout with its enzyme written in ug/mL for a protein of `kda`
/// (ug/mL = nM x kDa x 1e-3; the enzyme is the layout's fourth column).
fn layout_in_micrograms_per_millilitre(layout_csv: &str, kda: f64) -> String {
    let mut text = String::new();
    for line in layout_csv.lines() {
        let mut cells: Vec<String> = line.split(',').map(str::to_string).collect();
        if let Some(cell) = cells.get_mut(3) {
            if cell.as_str() == "enzyme [nM]" {
                *cell = "enzyme [ug/mL]".to_string();
            } else if let Ok(nanomolar) = cell.parse::<f64>() {
                *cell = format!("{}", nanomolar * kda * 1e-3);
            }
        }
        text.push_str(&cells.join(","));
        text.push('\n');
    }
    text
}

/// The specific activity against the simulator's truth, kcat x 60 / MW (1 U = 1 umol/min), over
/// the simulated fluorescence plates of the kcat coverage check: its interval covers the truth on
/// exactly the plates where kcat's does (it is Vmax scaled by a known constant, with the slope's
/// uncertainty combined alike), and its bias is kcat's. `PLATEKIN_CALIBRATION_PLATES` sets the
/// number of plates (40 by default).
#[test]
fn specific_activity_covers_the_simulated_truth_as_kcat_does() {
    let plates = simulated_plates();
    let kda = 31.6;
    let truth = KCAT_PER_S * 60.0 / kda;
    let (mut covered_kcat, mut covered_activity) = (0, 0);
    let mut errors = Vec::new();
    for seed in 0..plates as u64 {
        let plate = fluorescence_plate(1000 + seed).unwrap();
        let molar = analyse(&plate.export_csv, &plate.layout_csv, &fluorescence_layer());
        let mass_layout = layout_in_micrograms_per_millilitre(&plate.layout_csv, kda);
        let mass = analyse(&plate.export_csv, &mass_layout, &fluorescence_layer());
        let ((_, [lo, hi], _), _) = constants(&molar);
        let kcat_covers = lo <= KCAT_PER_S && KCAT_PER_S <= hi;
        let activity = &mass.fits[0].parameters["specific_activity"];
        let [low, high] = activity.ci95.unwrap();
        let activity_covers = low <= truth && truth <= high;
        assert_eq!(kcat_covers, activity_covers, "plate {seed}");
        covered_kcat += usize::from(kcat_covers);
        covered_activity += usize::from(activity_covers);
        errors.push(activity.value / truth - 1.0);
    }
    let bias = errors.iter().sum::<f64>() / plates as f64;
    println!(
        "specific activity over {plates} plates: {covered_activity} intervals hold the truth (kcat: {covered_kcat}); bias {:+.2}%",
        100.0 * bias
    );
    assert!(
        covered_activity * 100 >= plates * 70,
        "{covered_activity} of {plates}"
    );
    assert!(bias.abs() < 0.05, "bias {bias}");
}
