//! `platekin batch` through the real binary on simulated campaigns (the invented Cobble Lane
//! glimmerase plates, written into a temporary folder): a 30-plate campaign with one export cut
//! short, the kept results of a second run, `--force`, the pooled fits against the simulation's
//! truth, per-plate constants equal to `run`'s bit for bit, and an unusable manifest.

mod common;

use std::collections::BTreeMap;
use std::path::Path;

use common::{platekin, text};
use platekin::simulate::campaign::{
    campaign_plates, write_campaign, CampaignPlate, VARIANT_KM, WILD_TYPE_KCAT, WILD_TYPE_KM,
};
use polars::prelude::*;

/// Reads a CSV table with polars.
fn read_csv(path: &Path) -> DataFrame {
    CsvReadOptions::default()
        .with_has_header(true)
        .try_into_reader_with_file_path(Some(path.to_path_buf()))
        .unwrap()
        .finish()
        .unwrap()
}

fn read_parquet(path: &Path) -> DataFrame {
    ParquetReader::new(std::fs::File::open(path).unwrap())
        .finish()
        .unwrap()
}

fn strings(frame: &DataFrame, column: &str) -> Vec<String> {
    let column = frame.column(column).unwrap().cast(&DataType::String).unwrap();
    let text = column.str().unwrap();
    (0..text.len())
        .map(|index| text.get(index).unwrap_or("").to_string())
        .collect()
}

/// Writes a campaign of `n` plates (60 reads) and returns its plates.
fn campaign(folder: &Path, n: usize) -> Vec<CampaignPlate> {
    let plates = campaign_plates(n, 60);
    write_campaign(folder, &plates).unwrap();
    plates
}

/// Cuts an export in the middle of its header line, as an interrupted copy would.
fn cut_short(export: &Path) {
    let bytes = std::fs::read(export).unwrap();
    let header = text(&bytes).find("Time [s]").unwrap();
    std::fs::write(export, &bytes[..header + 40]).unwrap();
}

/// The campaign's manifest and assay file, outputs into `results`, no reports.
const CAMPAIGN_ARGS: [&str; 8] = [
    "batch",
    "manifest.csv",
    "--assay",
    "assay.toml",
    "--out",
    "results",
    "--report",
    "none",
];

#[test]
fn thirty_plates_with_one_cut_short_give_29_ok_1_failed_and_exit_3() {
    let root = tempfile::tempdir().unwrap();
    let plates = campaign(root.path(), 30);
    cut_short(&root.path().join("exports/d2-p04.csv"));
    let mut args = CAMPAIGN_ARGS.to_vec();
    args.extend(["--pool-by", "variant"]);
    let output = platekin(&args, root.path());
    let stderr = text(&output.stderr);
    assert_eq!(output.status.code(), Some(3), "stderr:\n{stderr}");
    assert!(stderr.contains("plate d2-p04 failed: "), "stderr:\n{stderr}");
    assert!(
        stderr.contains("exports/d2-p04.csv"),
        "the error names the file:\n{stderr}"
    );
    let out = root.path().join("results");
    let table = read_csv(&out.join("plates.csv"));
    assert_eq!(table.height(), 30);
    let status = strings(&table, "status");
    assert_eq!(status.iter().filter(|s| *s == "ok").count(), 29);
    let failed: Vec<String> = strings(&table, "plate")
        .into_iter()
        .zip(&status)
        .filter(|(_, s)| *s == "failed")
        .map(|(plate, _)| plate)
        .collect();
    assert_eq!(failed, vec!["d2-p04"]);
    let errors = strings(&table, "error");
    assert!(errors[13].contains("d2-p04.csv"), "{}", errors[13]);
    // The manifest's factors are in every table; each plate's rows carry its plate id.
    assert_eq!(strings(&table, "operator")[0], "Ines");
    let wells = read_parquet(&out.join("wells.parquet"));
    // 76 analysed wells per plate (every layout well but the empty ones), 29 plates.
    assert_eq!(wells.height(), 29 * 76);
    assert_eq!(strings(&wells, "lot")[29 * 76 - 1], "L-0402");
    assert!(!strings(&wells, "plate").contains(&"d2-p04".to_string()));
    // No plate is a screen: no campaign compounds table.
    assert!(!out.join("compounds.csv").exists() && !out.join("compounds.parquet").exists());
    assert!(out.join("plates/d1-p01/wells.csv").exists());
    assert!(
        !out.join("plates/d2-p04").exists(),
        "the failed plate writes nothing of its own"
    );

    // Pooled fits: one per variant; the shared Km recovers the simulation's truth within 3% and the
    // between-plate CV of kcat is near the CV of the plates' true activities.
    let pooled: serde_json::Value =
        serde_json::from_slice(&std::fs::read(out.join("pooled.json")).unwrap()).unwrap();
    let pools = pooled["pools"].as_array().unwrap();
    assert_eq!(pools.len(), 2);
    let activities: Vec<f64> = plates
        .iter()
        .filter(|p| p.plate != "d2-p04")
        .map(|p| p.activity)
        .collect();
    let mean = activities.iter().sum::<f64>() / activities.len() as f64;
    let sd =
        (activities.iter().map(|a| (a - mean).powi(2)).sum::<f64>() / (activities.len() - 1) as f64).sqrt();
    for pool in pools {
        let variant = pool["key"][0][1].as_str().unwrap();
        let truth_km = if variant == "GlmA-wt" {
            WILD_TYPE_KM
        } else {
            VARIANT_KM
        };
        let km = &pool["km"];
        let value = km["value"].as_f64().unwrap();
        let [low, high] = [km["ci95"][0].as_f64().unwrap(), km["ci95"][1].as_f64().unwrap()];
        assert!(low < value && value < high);
        assert!(
            (value / truth_km - 1.0).abs() < 0.03,
            "{variant}: Km {value} ({low}-{high}), truth {truth_km}"
        );
        assert_eq!(pool["plates"].as_array().unwrap().len(), 29);
        // The CV of the plates' true kcat (estimation error out) sits inside its interval, below
        // the raw CV; every plate's kcat carries its shared background.
        let corrected = pool["scale_cv_corrected"].as_f64().unwrap();
        let [cv_low, cv_high] = [
            pool["scale_cv_ci95"][0].as_f64().unwrap(),
            pool["scale_cv_ci95"][1].as_f64().unwrap(),
        ];
        assert!(
            cv_low < corrected && corrected < cv_high,
            "{variant}: {cv_low} {corrected} {cv_high}"
        );
        assert!(corrected <= pool["scale_cv"].as_f64().unwrap());
        assert!(pool["plates"][0]["shared_se"].as_f64().unwrap() > 0.0);
        let cv = pool["scale_cv"].as_f64().unwrap();
        assert!(
            (cv / (sd / mean) - 1.0).abs() < 0.35,
            "{variant}: CV {cv} against {}",
            sd / mean
        );
        if variant == "GlmA-wt" {
            let kcat = pool["plates"][0]["scale"]["value"].as_f64().unwrap();
            assert!(
                (kcat / (WILD_TYPE_KCAT * plates[0].activity) - 1.0).abs() < 0.1,
                "kcat {kcat}"
            );
        }
    }

    // A second run keeps every plate whose inputs did not change; the tables are rebuilt.
    let again = platekin(&args, root.path());
    assert_eq!(again.status.code(), Some(3));
    let table = read_csv(&out.join("plates.csv"));
    let reused = strings(&table, "reused");
    assert_eq!(reused.iter().filter(|r| *r == "true").count(), 29, "{reused:?}");
    assert_eq!(read_parquet(&out.join("wells.parquet")).height(), 29 * 76);
    // --force analyses every plate again.
    let mut forced = args.to_vec();
    forced.push("--force");
    let output = platekin(&forced, root.path());
    assert_eq!(output.status.code(), Some(3));
    let reused = strings(&read_csv(&out.join("plates.csv")), "reused");
    assert_eq!(reused.iter().filter(|r| *r == "false").count(), 29, "{reused:?}");
    // A plate that ran before and fails now leaves no stale results behind: its folder and what
    // the campaign kept of it are removed, and its row says so.
    assert!(out.join("plates/d1-p02/fit.json").exists());
    cut_short(&root.path().join("exports/d1-p02.csv"));
    let output = platekin(&args, root.path());
    assert_eq!(output.status.code(), Some(3));
    assert!(!out.join("plates/d1-p02").exists());
    assert!(!out.join(".platekin-batch/d1-p02").exists());
    let table = read_csv(&out.join("plates.csv"));
    assert_eq!(strings(&table, "status")[1], "failed");
    assert!(
        strings(&table, "error")[1].contains("the outputs of its earlier run were removed"),
        "{}",
        strings(&table, "error")[1]
    );
    assert_eq!(read_parquet(&out.join("wells.parquet")).height(), 28 * 76);
}

/// Each group's parameters in a `fit.json`, by group and name: (value, se, ci95).
fn fitted_parameters(fit_json: &Path) -> BTreeMap<String, String> {
    let document: serde_json::Value = serde_json::from_slice(&std::fs::read(fit_json).unwrap()).unwrap();
    let mut parameters = BTreeMap::new();
    for group in document["groups"].as_array().unwrap() {
        for (name, parameter) in group["parameters"].as_object().unwrap() {
            // serde_json writes the shortest text that reads back as the same double, so equal
            // text is equal bits.
            parameters.insert(format!("{} {name}", group["group"]), parameter.to_string());
        }
    }
    parameters
}

#[test]
fn per_plate_constants_from_batch_equal_those_of_run_bit_for_bit() {
    let root = tempfile::tempdir().unwrap();
    campaign(root.path(), 3);
    let mut args = CAMPAIGN_ARGS.to_vec();
    args.extend(["--jobs", "2"]);
    let batch = platekin(&args, root.path());
    assert_eq!(batch.status.code(), Some(0), "{}", text(&batch.stderr));
    // Positive and negative controls (the layout's `control` column) are no Michaelis-Menten
    // group: each plate fits its two variants only, and the controls keep their rates for Z'.
    let table = read_csv(&root.path().join("results/plates.csv"));
    assert_eq!(strings(&table, "groups_fitted"), vec!["2", "2", "2"]);
    assert!(strings(&table, "z_prime").iter().all(|z| !z.is_empty()));
    let fit: serde_json::Value =
        serde_json::from_slice(&std::fs::read(root.path().join("results/plates/d1-p01/fit.json")).unwrap())
            .unwrap();
    let groups: Vec<String> = fit["groups"]
        .as_array()
        .unwrap()
        .iter()
        .map(|group| group["group"].to_string())
        .collect();
    assert_eq!(groups.len(), 2, "{groups:?}");
    assert!(groups.iter().all(|g| !g.contains("positive")), "{groups:?}");
    let wells = read_csv(&root.path().join("results/plates/d1-p01/wells.csv"));
    let controls: Vec<String> = strings(&wells, "well")
        .into_iter()
        .zip(strings(&wells, "control"))
        .filter(|(_, control)| control == "positive")
        .map(|(well, _)| well)
        .collect();
    assert_eq!(controls.len(), 8, "{controls:?}");
    for plate in ["d1-p01", "d3-p01"] {
        let run = platekin(
            &[
                "run",
                &format!("exports/{plate}.csv"),
                "--layout",
                "layout.csv",
                "--assay",
                "assay.toml",
                "--out",
                &format!("single-{plate}"),
                "--report",
                "none",
            ],
            root.path(),
        );
        assert_eq!(run.status.code(), Some(0), "{}", text(&run.stderr));
        let from_batch = root.path().join("results/plates").join(plate);
        let from_run = root.path().join(format!("single-{plate}"));
        let batch_parameters = fitted_parameters(&from_batch.join("fit.json"));
        assert!(batch_parameters.keys().any(|k| k.ends_with(" kcat")));
        assert_eq!(batch_parameters, fitted_parameters(&from_run.join("fit.json")));
        for table in ["wells.csv", "conditions.csv", "progress.json"] {
            let (a, b) = (
                std::fs::read(from_batch.join(table)).unwrap(),
                std::fs::read(from_run.join(table)).unwrap(),
            );
            if table == "progress.json" {
                // The inputs are named as given (relative to the manifest or the working folder).
                let strip = |bytes: &[u8]| -> serde_json::Value {
                    let mut value: serde_json::Value = serde_json::from_slice(bytes).unwrap();
                    value["inputs"] = serde_json::Value::Null;
                    value
                };
                assert_eq!(strip(&a), strip(&b), "{plate} {table}");
            } else {
                assert_eq!(a, b, "{plate} {table}");
            }
        }
        // The combined fits table carries the same doubles.
        let fits = read_parquet(&root.path().join("results/fits.parquet"));
        let document: serde_json::Value =
            serde_json::from_slice(&std::fs::read(from_run.join("fit.json")).unwrap()).unwrap();
        let run_kcat = document["groups"][0]["parameters"]["kcat"]["value"]
            .as_f64()
            .unwrap();
        let mask = fits.column("plate").unwrap().str().unwrap().equal(plate)
            & fits.column("parameter").unwrap().str().unwrap().equal("kcat")
            & fits
                .column("analysis")
                .unwrap()
                .str()
                .unwrap()
                .equal("initial-rate");
        let values: Vec<f64> = fits
            .filter(&mask)
            .unwrap()
            .column("value")
            .unwrap()
            .f64()
            .unwrap()
            .into_no_null_iter()
            .collect();
        assert!(
            values.iter().any(|v| v.to_bits() == run_kcat.to_bits()),
            "{values:?} vs {run_kcat}"
        );
    }
}

#[test]
fn an_unusable_manifest_stops_before_anything_is_written() {
    let root = tempfile::tempdir().unwrap();
    campaign(root.path(), 2);
    std::fs::write(root.path().join("bad.csv"), "data,plate\nexports/d1-p01.csv,P1\n").unwrap();
    let output = platekin(&["batch", "bad.csv", "--out", "results"], root.path());
    assert_eq!(output.status.code(), Some(2));
    let stderr = text(&output.stderr);
    assert!(
        stderr.contains("bad.csv, row 1: the header has no `layout` column"),
        "{stderr}"
    );
    assert!(!root.path().join("results").exists());
    // Two plates with one id.
    std::fs::write(
        root.path().join("twice.csv"),
        "data,layout,plate\nexports/d1-p01.csv,layout.csv,A\nexports/d3-p01.csv,layout.csv,a\n",
    )
    .unwrap();
    let output = platekin(&["batch", "twice.csv", "--out", "results"], root.path());
    assert_eq!(output.status.code(), Some(2));
    assert!(text(&output.stderr)
        .contains("twice.csv, row 3: the plate id 'a' is already used at twice.csv, row 2"));
    assert!(!root.path().join("results").exists());
    // A folder of exports with one layout runs every export; progress lines go to stderr
    // (not a terminal here), one per plate.
    let folder_args = [
        "batch",
        "exports",
        "--layout",
        "layout.csv",
        "--assay",
        "assay.toml",
        "--out",
        "folder-results",
    ];
    let output = platekin(&folder_args, root.path());
    assert_eq!(output.status.code(), Some(0), "{}", text(&output.stderr));
    let stderr = text(&output.stderr);
    assert_eq!(
        stderr
            .lines()
            .filter(|l| l.starts_with("platekin batch: "))
            .count(),
        2,
        "{stderr}"
    );
    assert!(root.path().join("folder-results/report.html").exists());
    assert!(root
        .path()
        .join("folder-results/plates/d1-p01/report.html")
        .exists());
    let report = std::fs::read_to_string(root.path().join("folder-results/report.html")).unwrap();
    assert!(report.contains("href=\"plates/d1-p01/report.html\""));
    assert!(report.contains("<svg"), "the constants plot is inline");
    // --quiet: nothing on stderr when every plate runs.
    let mut quiet = folder_args.to_vec();
    quiet.push("--quiet");
    let output = platekin(&quiet, root.path());
    assert_eq!(output.status.code(), Some(0));
    assert_eq!(text(&output.stderr), "");
}

#[test]
fn a_plates_own_assay_file_overrides_the_commands_flags() {
    let root = tempfile::tempdir().unwrap();
    campaign(root.path(), 2);
    std::fs::write(root.path().join("slow.toml"), "max-conversion = 0.05\n").unwrap();
    std::fs::write(
        root.path().join("own.csv"),
        "data,layout,plate,assay,day\nexports/d1-p01.csv,layout.csv,first,,1\nexports/d2-p01.csv,layout.csv,second,slow.toml,2\n",
    )
    .unwrap();
    let output = platekin(
        &[
            "batch",
            "own.csv",
            "--assay",
            "assay.toml",
            "--max-conversion",
            "0.08",
            "--out",
            "results",
            "--report",
            "none",
        ],
        root.path(),
    );
    assert_eq!(output.status.code(), Some(0), "{}", text(&output.stderr));
    let settings = |plate: &str| {
        std::fs::read_to_string(
            root.path()
                .join("results/plates")
                .join(plate)
                .join("settings.toml"),
        )
        .unwrap()
    };
    assert!(
        settings("first").contains("max-conversion = 0.08"),
        "{}",
        settings("first")
    );
    assert!(
        settings("second").contains("max-conversion = 0.05"),
        "{}",
        settings("second")
    );
    // The command's --assay still gives what neither overrides.
    assert!(
        settings("second").contains("extinction = 16800"),
        "{}",
        settings("second")
    );
}

/// The pooled fit's Km, its interval and the kcat scales do not depend on the unit rates are
/// written in: the pool points and their loadings on the shared errors change unit together, and
/// Vmax (as each plate's scale) comes out in the unit asked.
#[test]
fn pooled_constants_do_not_depend_on_the_rate_unit() {
    let root = tempfile::tempdir().unwrap();
    campaign(root.path(), 6);
    let pooled = |unit: &str, out: &str| -> serde_json::Value {
        let mut args = CAMPAIGN_ARGS.to_vec();
        args[5] = out;
        args.extend(["--pool-by", "variant", "--rate-unit", unit, "--jobs", "1"]);
        let output = platekin(&args, root.path());
        assert_eq!(output.status.code(), Some(0), "{}", text(&output.stderr));
        serde_json::from_slice(&std::fs::read(root.path().join(out).join("pooled.json")).unwrap()).unwrap()
    };
    let per_second = pooled("uM/s", "per-second");
    let per_minute = pooled("uM/min", "per-minute");
    let pools = per_second["pools"].as_array().unwrap();
    assert_eq!(pools.len(), 2);
    for (a, b) in pools.iter().zip(per_minute["pools"].as_array().unwrap()) {
        for path in [["km", "value"], ["km", "se"]] {
            let (x, y) = (
                a[path[0]][path[1]].as_f64().unwrap(),
                b[path[0]][path[1]].as_f64().unwrap(),
            );
            assert!((x / y - 1.0).abs() < 1e-9, "{path:?}: {x} vs {y}");
        }
        for bound in 0..2 {
            let (x, y) = (
                a["km"]["ci95"][bound].as_f64().unwrap(),
                b["km"]["ci95"][bound].as_f64().unwrap(),
            );
            assert!((x / y - 1.0).abs() < 1e-9, "ci95[{bound}]: {x} vs {y}");
        }
        let (x, y) = (a["scale_cv"].as_f64().unwrap(), b["scale_cv"].as_f64().unwrap());
        assert!((x / y - 1.0).abs() < 1e-9, "scale_cv: {x} vs {y}");
        // Each plate's kcat and its SE, which carry the plate's shared background.
        let plates = a["plates"].as_array().unwrap();
        assert_eq!(plates.len(), 6);
        for (p, q) in plates.iter().zip(b["plates"].as_array().unwrap()) {
            assert!(p["shared_se"].as_f64().unwrap() > 0.0);
            for (x, y) in [
                (&p["shared_se"], &q["shared_se"]),
                (&p["scale"]["value"], &q["scale"]["value"]),
                (&p["scale"]["se"], &q["scale"]["se"]),
            ] {
                let (x, y) = (x.as_f64().unwrap(), y.as_f64().unwrap());
                assert!((x / y - 1.0).abs() < 1e-9, "plate {}: {x} vs {y}", p["plate"]);
            }
        }
    }
}
