//! Integration tests of the rate-law choice through the binary: a run whose layout varies an
//! inhibitor within a group gets one global [S] x [I] fit, `platekin fit` on that run's tables and on
//! a user's spreadsheet, seeded bootstraps, and refused inputs. Every plate here is invented and
//! generated in the test from stated truth (competitive inhibition, Vmax 0.05 uM/s, Km 50 uM,
//! Ki 5 uM).

mod common;
use common::{platekin, text};

use std::path::{Path, PathBuf};
use std::process::Output;

const VMAX_UM_PER_S: f64 = 0.05;
const KM_UM: f64 = 50.0;
const KI_UM: f64 = 5.0;
const SUBSTRATE_UM: [f64; 7] = [10.0, 20.0, 40.0, 80.0, 160.0, 320.0, 640.0];
const INHIBITOR_UM: [f64; 4] = [0.0, 2.5, 5.0, 10.0];
/// Absorbance per uM of product: 18300 M^-1 cm^-1 x 0.5 cm x 1e-6 M/uM.
const AU_PER_UM: f64 = 18300.0 * 0.5 * 1e-6;

/// Deterministic noise in [-1, 1): one draw of a ChaCha8 generator seeded with `seed`.
fn noise(seed: u64) -> f64 {
    use rand::{Rng, SeedableRng};
    rand_chacha::ChaCha8Rng::seed_from_u64(seed).random_range(-1.0..1.0)
}

/// Writes an invented wide export and a tidy layout: rows A-G hold the substrate levels, columns
/// 1-8 the inhibitor levels in duplicate, H1-H4 blanks; 10 reads 10 s apart, noise about 2e-4 AU.
fn write_inhibition_plate(dir: &Path) -> (PathBuf, PathBuf) {
    let rows = ['A', 'B', 'C', 'D', 'E', 'F', 'G'];
    let mut wells = Vec::new();
    let mut layout = String::from("well,role,substrate [uM],inhibitor [uM],enzyme [nM],variant\n");
    for (row_index, &row) in rows.iter().enumerate() {
        for column in 1..=8 {
            let substrate = SUBSTRATE_UM[row_index];
            let inhibitor = INHIBITOR_UM[(column - 1) / 2];
            let rate = VMAX_UM_PER_S * substrate / (KM_UM * (1.0 + inhibitor / KI_UM) + substrate);
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
        let mut line = format!("{time}");
        for (index, (_, rate)) in wells.iter().enumerate() {
            let absorbance = 0.05 + rate * time * AU_PER_UM + 3.5e-4 * noise(read * 1000 + index as u64 + 17);
            line.push_str(&format!(",{absorbance:.6}"));
        }
        data.push_str(&line);
        data.push('\n');
    }
    let data_path = dir.join("inhibition-plate.csv");
    let layout_path = dir.join("inhibition-layout.csv");
    std::fs::write(&data_path, data).unwrap();
    std::fs::write(&layout_path, layout).unwrap();
    (data_path, layout_path)
}

fn run_plate(dir: &Path, extra: &[&str]) -> (Output, PathBuf) {
    let (data, layout) = write_inhibition_plate(dir);
    let out = dir.join(format!("run-out-{}", extra.join("_").replace(['-', ' '], "")));
    let mut args = vec![
        "run",
        data.to_str().unwrap(),
        "--layout",
        layout.to_str().unwrap(),
        "--extinction",
        "18300",
        "--pathlength",
        "0.5",
        "--out",
        out.to_str().unwrap(),
    ];
    args.extend_from_slice(extra);
    (platekin(&args, dir), out)
}

fn fit_json(folder: &Path) -> serde_json::Value {
    serde_json::from_str(&std::fs::read_to_string(folder.join("fit.json")).unwrap()).unwrap()
}

#[test]
fn a_run_varying_the_inhibitor_gets_one_global_fit_and_identifies_competitive_inhibition() {
    let scratch = tempfile::tempdir().unwrap();
    let (output, out) = run_plate(scratch.path(), &[]);
    let stdout = text(&output.stdout);
    assert!(output.status.success(), "{}\n{stdout}", text(&output.stderr));
    let fit = fit_json(&out);
    let groups = fit["groups"].as_array().unwrap();
    assert_eq!(groups.len(), 1, "one global group over [S] x [I]");
    let group = &groups[0];
    assert_eq!(group["model_requested"], "auto");
    assert_eq!(group["model"], "competitive", "{}", group["model_choice"]);
    assert_eq!(group["n"], 56);
    // Ki within 10% of the truth (noise 2e-4 AU on 56 wells; a stated tolerance).
    let ki = group["parameters"]["Ki"]["value"].as_f64().unwrap();
    assert!((ki / KI_UM - 1.0).abs() < 0.10, "Ki {ki}");
    assert_eq!(group["parameters"]["Ki"]["unit"], "uM");
    let profile = group["parameters"]["Ki"]["ci95_profile"].as_array().unwrap();
    assert!(profile[0].as_f64().unwrap() < ki && ki < profile[1].as_f64().unwrap());
    // kcat = Vmax / [E] = 0.05 uM/s / 0.01 uM = 5 /s, within 5%.
    let kcat = group["parameters"]["kcat"]["value"].as_f64().unwrap();
    assert!((kcat / 5.0 - 1.0).abs() < 0.05, "kcat {kcat}");
    let tried: Vec<&str> = group["models_tried"]
        .as_array()
        .unwrap()
        .iter()
        .map(|m| m["model"].as_str().unwrap())
        .collect();
    assert_eq!(
        tried,
        [
            "michaelis-menten",
            "competitive",
            "uncompetitive",
            "noncompetitive",
            "mixed"
        ]
    );
    assert!(group["models_tried"][1]["AICc"].is_number());
    // Fields of the Michaelis-Menten schema are kept.
    for field in ["residual_sd", "linearised", "warnings", "n", "parameters"] {
        assert!(group.get(field).is_some(), "{field} missing");
    }
    assert!(
        stdout.contains("model competitive") && stdout.contains("Ki"),
        "{stdout}"
    );
}

#[test]
fn fit_on_the_run_tables_repeats_the_run_fit() {
    let scratch = tempfile::tempdir().unwrap();
    let (output, out) = run_plate(scratch.path(), &[]);
    assert!(output.status.success(), "{}", text(&output.stderr));
    let run_ki = fit_json(&out)["groups"][0]["parameters"]["Ki"]["value"]
        .as_f64()
        .unwrap();
    let wells_out = scratch.path().join("from-wells");
    let result = platekin(
        &[
            "fit",
            out.join("wells.csv").to_str().unwrap(),
            "--out",
            wells_out.to_str().unwrap(),
        ],
        scratch.path(),
    );
    assert!(result.status.success(), "{}", text(&result.stderr));
    let from_wells = fit_json(&wells_out);
    assert_eq!(from_wells["table"], "run wells");
    let group = &from_wells["groups"][0];
    assert_eq!(group["model"], "competitive");
    let ki = group["parameters"]["Ki"]["value"].as_f64().unwrap();
    // The same points, the same code: equal to rounding of the CSV's printed digits.
    assert!((ki / run_ki - 1.0).abs() < 1e-6, "{ki} vs {run_ki}");
    assert!(wells_out.join("summary.txt").exists());

    let conditions_out = scratch.path().join("from-conditions");
    let result = platekin(
        &[
            "fit",
            out.join("conditions.csv").to_str().unwrap(),
            "--out",
            conditions_out.to_str().unwrap(),
            "--weighting",
            "replicate-sd",
            "--model",
            "mixed",
        ],
        scratch.path(),
    );
    assert!(result.status.success(), "{}", text(&result.stderr));
    let from_conditions = fit_json(&conditions_out);
    assert_eq!(from_conditions["table"], "run conditions");
    let group = &from_conditions["groups"][0];
    assert_eq!(group["weighting"], "replicate-sd");
    assert_eq!(group["model_requested"], "mixed");
    // A mixed fit of competitive data either stays mixed with a Ki' that is not determined, or
    // collapses and is reported as competitive; never a confident finite Ki'.
    match group["model"].as_str().unwrap() {
        "competitive" => assert!(group["warnings"].to_string().contains("collapsed")),
        "mixed" => assert_eq!(group["parameters"]["Ki_prime"]["determined"], false, "{group}"),
        other => panic!("unexpected model {other}"),
    }
    let ki = group["parameters"]["Ki"]["value"].as_f64().unwrap();
    assert!((ki / KI_UM - 1.0).abs() < 0.15, "Ki {ki}");
}

#[test]
fn bootstrap_is_repeatable_with_a_seed() {
    let scratch = tempfile::tempdir().unwrap();
    let (first, first_out) = run_plate(scratch.path(), &["--bootstrap", "40", "--seed", "7"]);
    assert!(first.status.success(), "{}", text(&first.stderr));
    let second_dir = scratch.path().join("again");
    std::fs::create_dir(&second_dir).unwrap();
    let (second, second_out) = run_plate(&second_dir, &["--bootstrap", "40", "--seed", "7"]);
    assert!(second.status.success(), "{}", text(&second.stderr));
    let a = fit_json(&first_out)["groups"][0]["parameters"]["Ki"]["ci95_bootstrap"].clone();
    let b = fit_json(&second_out)["groups"][0]["parameters"]["Ki"]["ci95_bootstrap"].clone();
    assert!(a.is_array(), "{a}");
    assert_eq!(a, b);
    assert_eq!(fit_json(&first_out)["groups"][0]["bootstrap"]["seed"], 7);
}

#[test]
fn fit_reads_a_user_spreadsheet_and_fits_the_hill_model() {
    let scratch = tempfile::tempdir().unwrap();
    let path = scratch.path().join("cooperative.xlsx");
    let mut workbook = rust_xlsxwriter::Workbook::new();
    let sheet = workbook.add_worksheet();
    sheet.write_string(0, 0, "substrate [mM]").unwrap();
    sheet.write_string(0, 1, "rate").unwrap();
    let mut row = 1;
    // Invented: Vmax 3, K 0.8 mM, h 2.2, duplicate points with +-0.5% deterministic scatter.
    for s in [0.1, 0.2, 0.4, 0.6, 0.8, 1.0, 1.5, 2.0, 4.0, 8.0] {
        for replicate in 0..2 {
            let q = (s / 0.8f64).powf(2.2);
            let v = 3.0 * q / (1.0 + q) * (1.0 + 0.005 * noise(row as u64 * 7 + replicate));
            sheet.write_number(row, 0, s).unwrap();
            sheet.write_number(row, 1, v).unwrap();
            row += 1;
        }
    }
    workbook.save(&path).unwrap();
    let out = scratch.path().join("hill-out");
    let result = platekin(
        &["fit", path.to_str().unwrap(), "--out", out.to_str().unwrap()],
        scratch.path(),
    );
    assert!(result.status.success(), "{}", text(&result.stderr));
    let group = &fit_json(&out)["groups"][0];
    assert_eq!(group["model_requested"], "michaelis-menten");
    let auto_out = scratch.path().join("hill-auto");
    let result = platekin(
        &[
            "fit",
            path.to_str().unwrap(),
            "--out",
            auto_out.to_str().unwrap(),
            "--model",
            "auto",
        ],
        scratch.path(),
    );
    assert!(result.status.success(), "{}", text(&result.stderr));
    let group = &fit_json(&auto_out)["groups"][0];
    assert_eq!(group["model"], "hill", "{}", group["model_choice"]);
    let h = group["parameters"]["h"]["value"].as_f64().unwrap();
    assert!((h / 2.2 - 1.0).abs() < 0.05, "h {h}");
    assert_eq!(group["parameters"]["K"]["unit"], "mM");
    // Unitless rate column: reported unitless.
    assert_eq!(group["parameters"]["Vmax"]["unit"], "");
}

#[test]
fn fit_refuses_bad_options_and_tables_and_writes_nothing() {
    let scratch = tempfile::tempdir().unwrap();
    let table = scratch.path().join("table.csv");
    std::fs::write(&table, "substrate,speed\n1,2\n2,3\n").unwrap();
    let good = scratch.path().join("good.csv");
    std::fs::write(&good, "substrate,rate\n1,2\n2,3\n4,4\n").unwrap();
    let out = scratch.path().join("out");
    for (args, expected) in [
        (vec!["fit", table.to_str().unwrap()], "no 'rate' column"),
        (
            vec!["fit", good.to_str().unwrap(), "--model", "linear"],
            "unknown --model 'linear'",
        ),
        (
            vec!["fit", good.to_str().unwrap(), "--weighting", "heavy"],
            "unknown --weighting 'heavy'",
        ),
    ] {
        let mut all = args.clone();
        all.extend(["--out", out.to_str().unwrap()]);
        let result = platekin(&all, scratch.path());
        let stderr = text(&result.stderr);
        assert_eq!(result.status.code(), Some(2), "{stderr}");
        assert!(stderr.contains(expected), "{expected:?} not in {stderr}");
        assert!(!stderr.contains("panicked"));
        assert!(!out.exists());
    }
}

#[test]
fn model_settings_come_from_the_assay_file_and_are_written_back() {
    let scratch = tempfile::tempdir().unwrap();
    let (data, layout) = write_inhibition_plate(scratch.path());
    let assay = scratch.path().join("assay.toml");
    std::fs::write(
        &assay,
        "extinction = 18300\npathlength = 0.5\nmodel = \"noncompetitive\"\nweighting = \"relative\"\n",
    )
    .unwrap();
    let out = scratch.path().join("assay-out");
    let result = platekin(
        &[
            "run",
            data.to_str().unwrap(),
            "--layout",
            layout.to_str().unwrap(),
            "--assay",
            assay.to_str().unwrap(),
            "--model",
            "competitive",
            "--out",
            out.to_str().unwrap(),
        ],
        scratch.path(),
    );
    assert!(result.status.success(), "{}", text(&result.stderr));
    let group = &fit_json(&out)["groups"][0];
    // The flag wins over the file; the file's weighting stays.
    assert_eq!(group["model_requested"], "competitive");
    assert_eq!(group["weighting"], "relative");
    let written = std::fs::read_to_string(out.join("settings.toml")).unwrap();
    assert!(written.contains("model = \"competitive\""), "{written}");
    assert!(written.contains("weighting = \"relative\""), "{written}");
}

/// The inhibitor plate's report shows the rate against [S] at each [I] with the global fit and the
/// models tried; `--report full` writes that plot as a PNG that is not blank.
#[test]
fn inhibitor_plate_report_shows_the_rate_at_each_inhibitor_level() {
    let scratch = tempfile::tempdir().unwrap();
    let (output, out) = run_plate(scratch.path(), &["--report", "full"]);
    assert!(output.status.success(), "{}", text(&output.stderr));
    let page = std::fs::read_to_string(out.join("report.html")).unwrap();
    assert!(page.contains("Rate against [S] at each [I]"));
    assert!(page.contains("<table class=\"models\">"));
    for level in ["[I] = 0 uM", "[I] = 2.5 uM", "[I] = 5 uM", "[I] = 10 uM"] {
        assert!(page.contains(level), "{level}");
    }
    let bytes = std::fs::read(out.join("plots/group-1-inhibition.png")).unwrap();
    let mut reader = png::Decoder::new(&bytes[..]).read_info().unwrap();
    let mut pixels = vec![0; reader.output_buffer_size()];
    let info = reader.next_frame(&mut pixels).unwrap();
    let pixels = &pixels[..info.buffer_size()];
    let first = &pixels[..3];
    assert!(pixels.chunks(3).filter(|p| *p != first).count() * 100 > pixels.len() / 3);
    assert!(out.join("plots/group-1-inhibition-residuals.png").exists());
}

/// A run's tables written with `--rate-unit uM/min` fit to the same kcat (per second) and Vmax
/// (per minute, 60 times the uM/s run's: 1 min = 60 s) as the run itself.
#[test]
fn fit_reads_a_rate_table_per_minute() {
    let scratch = tempfile::tempdir().unwrap();
    let data = common::project("demo-plates/amber-fen-wide.csv");
    let layout = common::project("demo-plates/amber-fen-layout.csv");
    let run = platekin(
        &[
            "run",
            data.to_str().unwrap(),
            "--layout",
            layout.to_str().unwrap(),
            "--extinction",
            "16800",
            "--pathlength",
            "0.55",
            "--report",
            "none",
            "--progress",
            "never",
            "--rate-unit",
            "uM/min",
            "--out",
            "run",
        ],
        scratch.path(),
    );
    assert!(run.status.success(), "{}", text(&run.stderr));
    let refit = platekin(&["fit", "run/wells.csv", "--out", "refit"], scratch.path());
    assert!(refit.status.success(), "{}", text(&refit.stderr));
    let (run_fit, refit_fit) = (
        fit_json(&scratch.path().join("run")),
        fit_json(&scratch.path().join("refit")),
    );
    for group in 0..2 {
        // Both groups' weights take the extra variance pooled over the plate's two groups, in
        // the run and in the refit alike.
        let (run_extra, refit_extra) = (
            &run_fit["groups"][group]["extra_variance"],
            &refit_fit["groups"][group]["extra_variance"],
        );
        assert_eq!(run_extra["groups_pooled"], 2, "{run_extra}");
        assert_eq!(refit_extra["groups_pooled"], 2, "{refit_extra}");
        let (cv_run, cv_refit) = (
            run_extra["substrate_cv"].as_f64().unwrap(),
            refit_extra["substrate_cv"].as_f64().unwrap(),
        );
        assert!(
            (cv_run - cv_refit).abs() <= 1e-6 * cv_run.max(1e-12),
            "{cv_run} vs {cv_refit}"
        );
        let (a, b) = (
            &run_fit["groups"][group]["parameters"],
            &refit_fit["groups"][group]["parameters"],
        );
        assert_eq!(b["kcat"]["unit"], "1/s");
        assert_eq!(b["Vmax"]["unit"], "uM/min");
        for name in ["kcat", "Vmax", "Km"] {
            let (x, y) = (
                a[name]["value"].as_f64().unwrap(),
                b[name]["value"].as_f64().unwrap(),
            );
            // The same points through the CSV's printed digits, and the same extra variance
            // pooled over both groups (the run settles its pool on the rates it writes; 3e-9
            // measured, 3e-6 when it did not).
            assert!((y / x - 1.0).abs() < 1e-7, "{name}: {y} vs {x}");
        }
    }
}
