//! Inhibitor screens through the binary: a simulated 384-well screen (40 compounds at eight
//! three-fold doses, controls in four columns, every seventh compound inactive, Hill slopes 0.8 to
//! 1.5; rates from the simulator's integration of the progress curves, truth known), exclusions
//! recorded everywhere, and every new bad input refused naming the file and well or row.

mod common;

use std::collections::BTreeMap;
use std::path::Path;

use common::{platekin, text};
use platekin::core::plate::PlateFormat;
use platekin::simulate::screen::{screen_plate, ScreenPlate};
use platekin::simulate::{simulate, wide_csv, WideCsvOptions};
use serde_json::Value;

/// Writes the plate's export and layout into `folder`.
fn write_screen(folder: &Path, screen: &ScreenPlate) {
    let plate = simulate(&screen.spec).expect("the simulator runs");
    std::fs::write(
        folder.join("plate.csv"),
        wide_csv(&plate, &WideCsvOptions::default()),
    )
    .unwrap();
    std::fs::write(folder.join("layout.csv"), &screen.layout_csv).unwrap();
}

fn screen_384() -> ScreenPlate {
    screen_plate(PlateFormat::Wells384, 40, 7, 31, 2026)
}

/// Rows of a CSV by header.
fn csv_rows(path: &Path) -> Vec<BTreeMap<String, String>> {
    let content = std::fs::read_to_string(path).unwrap();
    let mut lines = content.lines();
    let header: Vec<String> = lines.next().unwrap().split(',').map(str::to_string).collect();
    lines
        .map(|line| {
            header
                .iter()
                .cloned()
                .zip(line.split(',').map(str::to_string))
                .collect()
        })
        .collect()
}

fn run(folder: &Path, extra: &[&str]) -> std::process::Output {
    let mut args = vec![
        "run",
        "plate.csv",
        "--layout",
        "layout.csv",
        "--out",
        "out",
        "--report",
        "none",
    ];
    args.extend_from_slice(extra);
    platekin(&args, folder)
}

#[test]
fn a_simulated_384_well_screen_recovers_ic50s_bounds_and_z_prime() {
    let folder = tempfile::tempdir().unwrap();
    let screen = screen_384();
    write_screen(folder.path(), &screen);
    let output = run(folder.path(), &[]);
    assert!(output.status.success(), "{}", text(&output.stderr));
    let out = folder.path().join("out");
    let compounds = csv_rows(&out.join("compounds.csv"));
    assert_eq!(compounds.len(), 40);
    let header: Vec<&String> = compounds[0].keys().collect();
    for column in [
        "compound",
        "IC50 [uM]",
        "IC50_qualifier",
        "IC50_ci95_low [uM]",
        "IC50_ci95_high [uM]",
        "hill",
        "top [%]",
        "bottom [%]",
        "n_points",
        "flags",
    ] {
        assert!(
            compounds[0].contains_key(column),
            "{column} missing from {header:?}"
        );
    }
    let by_name: BTreeMap<&str, &BTreeMap<String, String>> = compounds
        .iter()
        .map(|row| (row["compound"].as_str(), row))
        .collect();
    // Tolerance: 0.15 log10 units (a factor 1.41) on every active compound; the rates carry read
    // noise (SD 0.0008 AU) and depletion of up to 10%, and the controls' means are estimates.
    let mut worst: f64 = 0.0;
    let mut inside = 0;
    let mut active = 0;
    let mut flat_without_curve = 0;
    for truth in &screen.compounds {
        let row = by_name[truth.name.as_str()];
        if truth.inactive {
            // Flat compounds (activity near 100% at every dose): the `>` bound stands without a
            // `no-fit` flag, whether or not the curve converged (fit::dose_response, "Bounds
            // without a curve").
            assert_eq!(row["IC50_qualifier"], ">", "{}: {row:?}", truth.name);
            assert!(!row["flags"].contains("no-fit"), "{}: {row:?}", truth.name);
            assert_eq!(row["IC50 [uM]"], "21.87", "{}: {row:?}", truth.name);
            flat_without_curve += usize::from(row["hill"].is_empty());
            continue;
        }
        active += 1;
        assert_eq!(row["IC50_qualifier"], "=", "{}: {row:?}", truth.name);
        let ic50: f64 = row["IC50 [uM]"].parse().unwrap();
        let error = (ic50.log10() - truth.ic50_um.log10()).abs();
        worst = worst.max(error);
        assert!(
            error < 0.15,
            "{}: IC50 {ic50} against {} ({row:?})",
            truth.name,
            truth.ic50_um
        );
        let low: f64 = row["IC50_ci95_low [uM]"].parse().unwrap();
        let high: f64 = row["IC50_ci95_high [uM]"].parse().unwrap();
        assert!(low < ic50 && ic50 < high, "{row:?}");
        if low <= truth.ic50_um && truth.ic50_um <= high {
            inside += 1;
        }
    }
    eprintln!(
        "worst |log10 IC50 error| {worst:.3}; {inside} of {active} intervals hold the truth; {flat_without_curve} flat compound(s) without a converged curve"
    );
    assert!(inside * 10 >= active * 8, "{inside} of {active}");
    // The plate has flat compounds whose curve does not converge, so the rule above is exercised.
    assert!(
        flat_without_curve > 0,
        "every flat compound converged: the no-curve bound is untested"
    );

    // Z' equals the formula applied to the control rates of wells.csv.
    let wells = csv_rows(&out.join("wells.csv"));
    let rate_header = wells[0].keys().find(|k| k.starts_with("rate [")).unwrap().clone();
    let rates_of = |role: &str| -> Vec<f64> {
        wells
            .iter()
            .filter(|row| row["role"] == role && row["used"] == "true")
            .map(|row| row[&rate_header].parse().unwrap())
            .collect()
    };
    let (u, i) = (rates_of("uninhibited"), rates_of("inhibited"));
    assert_eq!((u.len(), i.len()), (32, 32));
    let mean = |v: &[f64]| v.iter().sum::<f64>() / v.len() as f64;
    let sd = |v: &[f64]| {
        let m = mean(v);
        (v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / (v.len() - 1) as f64).sqrt()
    };
    let z_by_hand = 1.0 - 3.0 * (sd(&u) + sd(&i)) / (mean(&u) - mean(&i)).abs();
    let qc: Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("plate_qc.json")).unwrap()).unwrap();
    let z = qc["z_prime"].as_f64().unwrap();
    assert!(
        (z - z_by_hand).abs() < 1e-6 * z_by_hand.abs().max(1.0),
        "{z} against {z_by_hand}"
    );
    assert_eq!(qc["uninhibited"]["n"], 32);
    assert!(qc["signal_window"].as_f64().is_some());
    // % activity of a sample is the formula on its rate.
    let sample = wells.iter().find(|row| row["role"] == "sample").unwrap();
    let rate: f64 = sample[&rate_header].parse().unwrap();
    let activity: f64 = sample["activity [%]"].parse().unwrap();
    let by_hand = 100.0 * (rate - mean(&i)) / (mean(&u) - mean(&i));
    assert!((activity - by_hand).abs() < 1e-6, "{activity} against {by_hand}");
}

#[test]
fn exclusions_are_recorded_everywhere_and_repeat() {
    let folder = tempfile::tempdir().unwrap();
    let screen = screen_plate(PlateFormat::Wells384, 6, 0, 21, 7);
    write_screen(folder.path(), &screen);
    // One well by file, one by the layout's exclude column.
    std::fs::write(
        folder.path().join("bad.csv"),
        "well,reason\nC5,bubble seen at the bench\n",
    )
    .unwrap();
    let layout = screen
        .layout_csv
        .replacen("inhibitor [uM]\n", "inhibitor [uM],exclude\n", 1);
    let layout: String = layout
        .lines()
        .map(|line| {
            if line.starts_with("D5,") {
                format!("{line},tip touched the well\n")
            } else if line.starts_with("well,") {
                format!("{line}\n")
            } else {
                format!("{line},\n")
            }
        })
        .collect();
    std::fs::write(folder.path().join("layout.csv"), layout).unwrap();
    let output = run(folder.path(), &["--exclude", "bad.csv"]);
    assert!(output.status.success(), "{}", text(&output.stderr));
    let summary = text(&output.stdout);
    assert!(
        summary.contains("C5") && summary.contains("bubble seen at the bench"),
        "{summary}"
    );
    assert!(summary.contains("tip touched the well"), "{summary}");
    // Each hand-excluded well is named once, on the summary's own line for them.
    for reason in ["bubble seen at the bench", "tip touched the well"] {
        assert_eq!(summary.matches(reason).count(), 1, "{reason}: {summary}");
    }
    let out = folder.path().join("out");
    let wells = csv_rows(&out.join("wells.csv"));
    for (well, reason) in [("C5", "bubble seen at the bench"), ("D5", "tip touched the well")] {
        let row = wells.iter().find(|row| row["well"] == well).unwrap();
        assert_eq!(row["used"], "false", "{row:?}");
        assert!(row["notes"].contains(reason), "{row:?}");
    }
    let settings = std::fs::read_to_string(out.join("settings.toml")).unwrap();
    assert!(
        settings.contains("bubble seen at the bench") && settings.contains("C5"),
        "{settings}"
    );
    // The settings repeat the run without the file.
    std::fs::remove_file(folder.path().join("bad.csv")).unwrap();
    let again = platekin(
        &[
            "run",
            "plate.csv",
            "--assay",
            "out/settings.toml",
            "--out",
            "again",
            "--report",
            "none",
        ],
        folder.path(),
    );
    assert!(again.status.success(), "{}", text(&again.stderr));
    assert_eq!(
        std::fs::read(out.join("compounds.csv")).unwrap(),
        std::fs::read(folder.path().join("again/compounds.csv")).unwrap()
    );
    let rows = csv_rows(&folder.path().join("again/wells.csv"));
    assert_eq!(
        rows.iter().find(|row| row["well"] == "C5").unwrap()["used"],
        "false"
    );
}

/// Runs with a changed layout (and extra flags) and returns the error text, checking that nothing
/// was written.
fn refused(layout: &str, extra: &[&str], files: &[(&str, &str)]) -> String {
    let folder = tempfile::tempdir().unwrap();
    let screen = screen_plate(PlateFormat::Wells384, 4, 0, 21, 11);
    write_screen(folder.path(), &screen);
    std::fs::write(folder.path().join("layout.csv"), layout).unwrap();
    for (name, content) in files {
        std::fs::write(folder.path().join(name), content).unwrap();
    }
    let output = run(folder.path(), extra);
    assert_eq!(output.status.code(), Some(2), "{}", text(&output.stdout));
    assert!(!folder.path().join("out").exists(), "nothing is written");
    text(&output.stderr)
}

#[test]
fn bad_screening_inputs_are_refused_naming_the_file_and_well() {
    let screen = screen_plate(PlateFormat::Wells384, 4, 0, 21, 11);
    let layout = &screen.layout_csv;
    // Controls missing: no inhibited wells.
    let without_inhibited: String = layout
        .lines()
        .filter(|line| !line.contains(",inhibited,"))
        .map(|line| format!("{line}\n"))
        .collect();
    let message = refused(&without_inhibited, &["--allow-missing"], &[]);
    assert!(
        message.contains("layout.csv") && message.contains("no well is `inhibited`"),
        "{message}"
    );
    // A compound tested at one dose: CPD-001's doses all set to 1.
    let one_dose: String = layout
        .lines()
        .map(|line| {
            if line.contains(",CPD-001,") {
                let mut cells: Vec<&str> = line.split(',').collect();
                cells[5] = "1";
                format!("{}\n", cells.join(","))
            } else {
                format!("{line}\n")
            }
        })
        .collect();
    let message = refused(&one_dose, &[], &[]);
    assert!(
        message.contains("layout.csv, row") && message.contains("CPD-001") && message.contains("one dose"),
        "{message}"
    );
    // Activity without controls: a factor splits the controls, and one sample's group has none.
    let split: String = layout
        .lines()
        .enumerate()
        .map(|(index, line)| {
            if index == 0 {
                format!("{line},batch\n")
            } else if line.contains(",uninhibited,") || line.contains(",inhibited,") {
                format!("{line},north\n")
            } else if line.starts_with("A3,") {
                format!("{line},south\n")
            } else {
                format!("{line},north\n")
            }
        })
        .collect();
    let message = refused(&split, &[], &[]);
    assert!(
        message.contains("layout.csv, row") && message.contains("A3") && message.contains("batch = south"),
        "{message}"
    );
    // An exclusion naming a well off the plate.
    let message = refused(
        layout,
        &["--exclude", "bad.csv"],
        &[("bad.csv", "well,reason\nB2,bubble\nQ30,bubble\n")],
    );
    assert!(
        message.contains("bad.csv, row 3")
            && message.contains("Q30")
            && message.contains("off the 384-well plate"),
        "{message}"
    );
    // A sample without a dose, and one without a compound.
    let edit = |well: &str, column: usize, value: &str| -> String {
        layout
            .lines()
            .map(|line| {
                if line.starts_with(&format!("{well},")) {
                    let mut cells: Vec<&str> = line.split(',').collect();
                    cells[column] = value;
                    format!("{}\n", cells.join(","))
                } else {
                    format!("{line}\n")
                }
            })
            .collect()
    };
    let message = refused(&edit("B3", 5, ""), &[], &[]);
    assert!(
        message.contains("layout.csv, row")
            && message.contains("B3")
            && message.contains("no positive inhibitor dose"),
        "{message}"
    );
    let message = refused(&edit("C3", 2, ""), &[], &[]);
    assert!(
        message.contains("layout.csv, row")
            && message.contains("C3")
            && message.contains("names no compound"),
        "{message}"
    );
    // A compound column asked for that the layout does not have.
    let message = refused(layout, &["--compound-column", "inhibitor_id"], &[]);
    assert!(
        message.contains("layout.csv") && message.contains("inhibitor_id"),
        "{message}"
    );
}

/// Coverage of the IC50's profile-likelihood 95% interval: 200 simulated active compounds (five
/// 384-well plates of 40, seeds 101 to 105, IC50 log-uniform over 0.05 to 5 uM, Hill 0.8 to 1.5),
/// each plate through the binary. The count of intervals holding the truth has a binomial SD of
/// about 3 (1.5%) at 95%; the test asks for at least 88% and a log-scale bias within 0.03 log10
/// units, and prints both.
#[test]
fn the_ic50_interval_covers_the_truth_over_200_simulated_compounds() {
    let mut inside = 0;
    let mut total = 0;
    let mut log_errors = Vec::new();
    for seed in 101..=105 {
        let folder = tempfile::tempdir().unwrap();
        let screen = screen_plate(PlateFormat::Wells384, 40, 0, 31, seed);
        write_screen(folder.path(), &screen);
        let output = run(folder.path(), &[]);
        assert!(output.status.success(), "{}", text(&output.stderr));
        let rows = csv_rows(&folder.path().join("out/compounds.csv"));
        for truth in &screen.compounds {
            let row = rows.iter().find(|row| row["compound"] == truth.name).unwrap();
            total += 1;
            let ic50: f64 = row["IC50 [uM]"].parse().unwrap();
            log_errors.push(ic50.log10() - truth.ic50_um.log10());
            let low = row["IC50_ci95_low [uM]"].parse::<f64>().unwrap_or(0.0);
            let high = row["IC50_ci95_high [uM]"].parse::<f64>().unwrap_or(f64::INFINITY);
            if row["IC50_qualifier"] == "=" && low <= truth.ic50_um && truth.ic50_um <= high {
                inside += 1;
            }
        }
    }
    let bias = log_errors.iter().sum::<f64>() / log_errors.len() as f64;
    let rmse = (log_errors.iter().map(|e| e * e).sum::<f64>() / log_errors.len() as f64).sqrt();
    eprintln!(
        "IC50 interval coverage {inside}/{total} ({:.1}%); log10 bias {bias:+.4}, RMSE {rmse:.4}",
        100.0 * inside as f64 / total as f64
    );
    assert_eq!(total, 200);
    assert!(inside >= 176, "coverage {inside}/{total}");
    assert!(bias.abs() < 0.03, "log10 bias {bias}");
}

/// The screening demo (the invented Heron Quay fragment screen): the committed files are the
/// simulator's output byte for byte, and the two commands of its README work: the run (with its
/// exclusion table and Cheng-Prusoff Km from the assay file) and a report a screener can read:
/// quality figures, a ranked table, one thumbnail per compound, the heat map, text of 11 px or more.
#[test]
fn the_screening_demo_runs_from_its_files_and_reports_for_a_screener() {
    let folder = tempfile::tempdir().unwrap();
    for (name, text) in platekin::simulate::screen::heron_quay_demo_files().unwrap() {
        let committed = std::fs::read_to_string(common::project(&format!("demo-plates/{name}"))).unwrap();
        assert!(
            committed == text,
            "demo-plates/{name} differs from the simulator's output (rerun make_screen_demo)"
        );
        std::fs::write(folder.path().join(name), text).unwrap();
    }
    let output = platekin(
        &[
            "run",
            "heron-quay-screen-wide.csv",
            "--assay",
            "heron-quay-screen-assay.toml",
            "--out",
            "heron-quay-results",
        ],
        folder.path(),
    );
    assert!(output.status.success(), "{}", text(&output.stderr));
    let summary = text(&output.stdout);
    assert!(
        summary.contains("Plate quality: Z'") && summary.contains("G9 (bubble"),
        "{summary}"
    );
    // The answer first: the screen's results block (compounds, actives with IC50 [interval], Z')
    // before the plate's quality details; no empty rate-law or progress-curve blocks.
    let answer = summary
        .find("Results (screen; IC50 [95% interval]): 40 compounds: ")
        .unwrap_or_else(|| panic!("{summary}"));
    assert!(answer < summary.find("Plate quality: Z'").unwrap(), "{summary}");
    assert!(summary[answer..].contains("Z' 0.9"), "{summary}");
    let first_active = summary[answer..].lines().nth(1).unwrap();
    assert!(
        first_active.starts_with("  HQF-")
            && first_active.contains(" IC50 = ")
            && first_active.contains(" uM"),
        "{first_active}"
    );
    assert!(
        summary.contains("inactive (IC50 > the highest dose): "),
        "{summary}"
    );
    for empty in [
        "Initial-rate fits",
        "Progress-curve analysis",
        "no group was fitted",
    ] {
        assert!(!summary.contains(empty), "{empty} in {summary}");
    }
    assert!(summary.contains("compounds.csv, plate_qc.json"), "{summary}");
    assert!(summary.contains("assumes a competitive inhibitor"), "{summary}");
    let out = folder.path().join("heron-quay-results");
    let compounds = csv_rows(&out.join("compounds.csv"));
    assert_eq!(compounds.len(), 40);
    assert!(compounds[0].contains_key("Ki [uM]"));
    let report = std::fs::read_to_string(out.join("report.html")).unwrap();
    for heading in [
        "Screen: plate quality and compounds",
        "Compounds, most potent first",
        "Dose-response curves",
        "% activity heat map",
        "Wells excluded by hand",
    ] {
        assert!(report.contains(heading), "{heading} missing");
    }
    assert_eq!(report.matches("<svg id=\"cpd-").count(), 40);
    // The report's results block leads with the same answer; the sections a screen has nothing for
    // are left out, and so are their links.
    let results_part = &report
        [report.find("<section id=\"results\">").unwrap()..report.find("<section id=\"overview\">").unwrap()];
    assert!(results_part.contains("40 compounds: "), "{results_part}");
    assert!(results_part.contains("<a href=\"#cpd-1\">"), "{results_part}");
    for id in ["fits", "progress", "trust"] {
        assert!(!report.contains(&format!("<section id=\"{id}\">")), "{id}");
        assert!(!report.contains(&format!("href=\"#{id}\"")), "{id}");
    }
    assert!(report.contains("<a href=\"#screen\">Screen</a>"));
    assert!(report.contains("<a href=\"#excluded\">Wells excluded by hand</a>"));
    let screen_part = &report
        [report.find("<section id=\"screen\">").unwrap()..report.find("<section id=\"flagged\">").unwrap()];
    for size in screen_part.split("font-size=\"").skip(1) {
        let px: u32 = size.split('"').next().unwrap().parse().unwrap();
        assert!(px >= 11, "text of {px} px");
    }
    // Light: thumbnails and a heat map, not one detail plot per well.
    assert!(report.len() < 1_500_000, "report of {} bytes", report.len());
}

/// Screening plates in a campaign: `platekin batch` writes each plate's screen outputs, carries its
/// Z' (from the `uninhibited`/`inhibited` controls, computed once) into `plates.csv`, and stacks the
/// plates' `compounds.csv` into the campaign's `compounds.csv` and `compounds.parquet` (each row
/// with `plate` and the manifest's factors, then the per-plate columns); a second run keeps both
/// plates and writes the same table.
#[test]
fn screens_in_a_campaign_keep_their_outputs_z_prime_and_a_combined_compounds_table() {
    let folder = tempfile::tempdir().unwrap();
    for (name, seed) in [("s1", 33), ("s2", 34)] {
        let plate_folder = folder.path().join(name);
        std::fs::create_dir(&plate_folder).unwrap();
        write_screen(
            &plate_folder,
            &screen_plate(PlateFormat::Wells384, 8, 4, 21, seed),
        );
    }
    std::fs::write(
        folder.path().join("manifest.csv"),
        "plate,data,layout,day\ns1,s1/plate.csv,s1/layout.csv,1\ns2,s2/plate.csv,s2/layout.csv,2\n",
    )
    .unwrap();
    let batch = || {
        platekin(
            &["batch", "manifest.csv", "--out", "campaign", "--report", "none"],
            folder.path(),
        )
    };
    let output = batch();
    assert!(output.status.success(), "{}", text(&output.stderr));
    assert!(text(&output.stdout).contains("wells/conditions/fits/compounds"));
    let campaign = folder.path().join("campaign");
    let plate = campaign.join("plates/s1");
    assert!(plate.join("compounds.csv").exists());
    let qc: Value =
        serde_json::from_str(&std::fs::read_to_string(plate.join("plate_qc.json")).unwrap()).unwrap();
    let rows = csv_rows(&campaign.join("plates.csv"));
    let z: f64 = rows[0]["z_prime"].parse().unwrap();
    // The same number, written by two writers (the CSV one may round the last digit).
    let from_plate = qc["z_prime"].as_f64().unwrap();
    assert!(
        (z - from_plate).abs() <= 1e-12 * from_plate.abs(),
        "{z} against {from_plate}"
    );

    // The combined table: the plates' own rows, in run order, behind `plate` and `day`.
    let combined_text = std::fs::read_to_string(campaign.join("compounds.csv")).unwrap();
    let mut expected = String::new();
    for (name, day) in [("s1", "1"), ("s2", "2")] {
        let own = std::fs::read_to_string(campaign.join(format!("plates/{name}/compounds.csv"))).unwrap();
        let mut lines = own.lines();
        let header = lines.next().unwrap();
        if expected.is_empty() {
            assert!(
                header.starts_with("compound,IC50 [uM],IC50_qualifier,"),
                "{header}"
            );
            expected.push_str(&format!("plate,day,{header}\n"));
        }
        for line in lines {
            expected.push_str(&format!("{name},{day},{line}\n"));
        }
    }
    assert_eq!(combined_text, expected);
    assert_eq!(combined_text.lines().count(), 1 + 2 * 8);
    // The Parquet twin holds the same rows with typed columns.
    let parquet = std::fs::read(campaign.join("compounds.parquet")).unwrap();
    let frame = platekin::render::campaign::tables::read_parquet_bytes(parquet).unwrap();
    assert_eq!(frame.height(), 16);
    let names: Vec<&str> = frame.get_column_names().iter().map(|n| n.as_str()).collect();
    assert_eq!(&names[..4], &["plate", "day", "compound", "IC50 [uM]"]);
    assert_eq!(
        frame.column("IC50 [uM]").unwrap().dtype(),
        &polars::prelude::DataType::Float64
    );
    assert_eq!(
        frame.column("n_points").unwrap().dtype(),
        &polars::prelude::DataType::UInt32
    );

    // A second run keeps both plates (their kept rows include the compounds) and writes the same.
    let again = batch();
    assert!(again.status.success(), "{}", text(&again.stderr));
    assert!(
        text(&again.stdout).contains("(2 kept from the previous run)"),
        "{}",
        text(&again.stdout)
    );
    assert_eq!(
        std::fs::read_to_string(campaign.join("compounds.csv")).unwrap(),
        combined_text
    );
}
