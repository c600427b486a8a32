//! Integration tests: the real `platekin` binary on the fixtures and the demo plates, checking exit
//! codes, messages, and what is (and is not) written.

mod common;
use common::{platekin, project, text};

use std::path::Path;

/// Runs a command that must fail: exit code 2, every expected fragment in stderr, no panic, and
/// the output folder never created.
fn check_refused(args: &[&str], expected: &[&str]) {
    let scratch = tempfile::tempdir().unwrap();
    let out = scratch.path().join("out");
    let mut all: Vec<&str> = args.to_vec();
    let out_text = out.display().to_string();
    if args.first() == Some(&"run") {
        all.extend(["--out", out_text.as_str()]);
    }
    let output = platekin(&all, &project("fixtures"));
    let stderr = text(&output.stderr);
    assert_eq!(
        output.status.code(),
        Some(2),
        "args {args:?}\nstderr: {stderr}\nstdout: {}",
        text(&output.stdout)
    );
    assert!(!stderr.contains("panicked"), "{stderr}");
    for fragment in expected {
        assert!(
            stderr.contains(fragment),
            "expected {fragment:?} in stderr:\n{stderr}"
        );
    }
    assert!(
        !out.exists(),
        "a refused run must write nothing, but {} exists",
        out.display()
    );
}

fn csv_rows(path: &Path) -> Vec<Vec<String>> {
    let mut reader = csv::ReaderBuilder::new()
        .has_headers(false)
        .from_path(path)
        .unwrap();
    reader
        .records()
        .map(|r| r.unwrap().iter().map(str::to_string).collect())
        .collect()
}

fn column<'a>(rows: &'a [Vec<String>], name: &str) -> Vec<&'a str> {
    let index = rows[0]
        .iter()
        .position(|h| h == name)
        .unwrap_or_else(|| panic!("no column {name} in {:?}", rows[0]));
    rows[1..].iter().map(|row| row[index].as_str()).collect()
}

#[test]
fn demo_runs_and_writes_every_output() {
    let scratch = tempfile::tempdir().unwrap();
    let output = platekin(&["demo"], scratch.path());
    let stdout = text(&output.stdout);
    assert!(output.status.success(), "{}", text(&output.stderr));
    assert!(stdout.contains("kcat"), "{stdout}");
    assert!(stdout.contains("validated procedures"), "{stdout}");
    let folder = scratch.path().join("platekin-demo");
    for file in ["wells.csv", "conditions.csv", "fit.json", "settings.toml"] {
        assert!(folder.join(file).is_file(), "{file} missing");
    }
    // The folder is platekin's own now: running again is allowed.
    let again = platekin(&["demo"], scratch.path());
    assert!(again.status.success(), "{}", text(&again.stderr));
}

#[test]
fn wells_and_conditions_headers_keep_the_contract() {
    let scratch = tempfile::tempdir().unwrap();
    assert!(platekin(&["demo"], scratch.path()).status.success());
    let folder = scratch.path().join("platekin-demo");
    let wells = csv_rows(&folder.join("wells.csv"));
    for header in [
        "well",
        "role",
        "substrate [uM]",
        "enzyme [nM]",
        "variant",
        "rate [uM/s]",
        "rate_se [uM/s]",
        "r2",
        "window_start [s]",
        "window_end [s]",
        "n_points",
        "conversion",
        "flags",
        "used",
    ] {
        assert!(
            wells[0].iter().any(|h| h == header),
            "wells.csv lacks {header}: {:?}",
            wells[0]
        );
    }
    let conditions = csv_rows(&folder.join("conditions.csv"));
    for header in [
        "role",
        "n",
        "n_used",
        "rate_mean [uM/s]",
        "rate_sd [uM/s]",
        "rate_sem [uM/s]",
        "cv",
        "flags",
    ] {
        assert!(
            conditions[0].iter().any(|h| h == header),
            "conditions.csv lacks {header}: {:?}",
            conditions[0]
        );
    }
    let fit: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(folder.join("fit.json")).unwrap()).unwrap();
    let group = &fit["groups"][0];
    assert_eq!(group["model"], "michaelis-menten");
    for parameter in ["Vmax", "Km", "kcat", "kcat_over_Km"] {
        let p = &group["parameters"][parameter];
        assert!(p["value"].is_number() && p["se"].is_number(), "{parameter}: {p}");
        assert!(
            p["ci95"].as_array().is_some_and(|a| a.len() == 2),
            "{parameter}: {p}"
        );
        assert!(p["unit"].is_string(), "{parameter}: {p}");
    }
    assert_eq!(group["parameters"]["kcat"]["unit"], "1/s");
    assert_eq!(group["parameters"]["kcat_over_Km"]["unit"], "1/(M*s)");
    assert!(group["linearised"]["lineweaver_burk"].is_object());
    assert!(fit["settings"]["max-conversion"].is_number());
}

/// The demo truth is known by construction (the simulator in `src/simulate/` wrote the demo
/// plates and `amber-fen-truth.json`): each shape must recover it and flag exactly the planted
/// defects.
fn check_demo_run(args: &[&str]) {
    let scratch = tempfile::tempdir().unwrap();
    let out = scratch.path().join("out");
    let mut all: Vec<&str> = args.to_vec();
    let out_text = out.display().to_string();
    all.extend(["--out", out_text.as_str()]);
    let output = platekin(&all, &project("demo-plates"));
    assert!(output.status.success(), "{}", text(&output.stderr));

    let truth: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(project("demo-plates/amber-fen-truth.json")).unwrap())
            .unwrap();
    let wells = csv_rows(&out.join("wells.csv"));
    let names = column(&wells, "well");
    let flags = column(&wells, "flags");
    let planted: Vec<(String, String)> = truth["planted_defects"]
        .as_array()
        .unwrap()
        .iter()
        .map(|d| {
            (
                d["well"].as_str().unwrap().to_string(),
                d["defect"]["kind"].as_str().unwrap().to_string(),
            )
        })
        .collect();
    let expected_flag = |kind: &str| match kind {
        "over-range" => "unreadable",
        "extra-noise" => "noisy",
        "lag" => "lag",
        "high-background" => "saturated",
        other => panic!("unknown planted defect {other}"),
    };
    for (well, flag_text) in names.iter().zip(&flags) {
        match planted.iter().find(|(w, _)| w == well) {
            Some((_, kind)) => assert!(
                flag_text.split(';').any(|f| f == expected_flag(kind)),
                "{well} ({kind}) flagged '{flag_text}'"
            ),
            None => assert!(flag_text.is_empty(), "clean well {well} flagged '{flag_text}'"),
        }
    }

    // Per-well rates against the true initial rates: within 10%, or 4 standard errors where the
    // signal is small. Windows that convert up to 10% of the substrate make low-[S] rates run a
    // few percent low; that is the initial-rate method, not noise.
    let rates = column(&wells, "rate [uM/s]");
    let ses = column(&wells, "rate_se [uM/s]");
    let roles = column(&wells, "role");
    for truth_well in truth["wells"].as_array().unwrap() {
        let name = truth_well["well"].as_str().unwrap();
        if truth_well["role"] != "sample" || !truth_well["defect"].is_null() {
            continue;
        }
        let index = names.iter().position(|w| *w == name).unwrap();
        assert_eq!(roles[index], "sample");
        let measured: f64 = rates[index].parse().unwrap();
        let se: f64 = ses[index].parse().unwrap();
        let expected = truth_well["enzymatic_initial_rate_um_per_s"].as_f64().unwrap();
        let off = (measured - expected).abs();
        assert!(
            off < 0.10 * expected || off < 4.0 * se,
            "{name}: rate {measured} +- {se} vs true {expected}"
        );
    }

    let fit: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("fit.json")).unwrap()).unwrap();
    for variant in truth["variants"].as_array().unwrap() {
        let name = variant["name"].as_str().unwrap();
        let group = fit["groups"]
            .as_array()
            .unwrap()
            .iter()
            .find(|g| g["group"]["variant"] == name)
            .unwrap();
        let kcat = group["parameters"]["kcat"]["value"].as_f64().unwrap();
        let km = group["parameters"]["Km"]["value"].as_f64().unwrap();
        let true_kcat = variant["kcat_per_s"].as_f64().unwrap();
        let true_km = variant["km_um"].as_f64().unwrap();
        assert!(
            (kcat / true_kcat - 1.0).abs() < 0.03,
            "{name}: kcat {kcat} vs {true_kcat}"
        );
        assert!((km / true_km - 1.0).abs() < 0.05, "{name}: Km {km} vs {true_km}");
        // The demo has what real runs have (dead time, pipetting, drift, noise growing with
        // absorbance), and its truth lies inside every interval it reports (issue 9): the
        // initial-rate fit's and the progress-curve fit's, kcat/Km in 1/(M s).
        let true_values = [
            ("kcat", true_kcat),
            ("Km", true_km),
            ("kcat_over_Km", true_kcat / true_km * 1e6),
        ];
        let inside = |what: &str, parameter: &serde_json::Value, truth: f64| {
            let interval = &parameter["ci95"];
            let (low, high) = (interval[0].as_f64().unwrap(), interval[1].as_f64().unwrap());
            assert!(
                low <= truth && truth <= high,
                "{name} {what}: {truth} outside [{low}, {high}]"
            );
            if let Some(profile) = parameter["ci95_profile"].as_array() {
                if let (Some(low), Some(high)) = (profile[0].as_f64(), profile[1].as_f64()) {
                    assert!(
                        low <= truth && truth <= high,
                        "{name} {what} profile: {truth} outside [{low}, {high}]"
                    );
                }
            }
        };
        for (parameter, truth) in true_values {
            inside(parameter, &group["parameters"][parameter], truth);
        }
        let progress: serde_json::Value =
            serde_json::from_str(&std::fs::read_to_string(out.join("progress.json")).unwrap()).unwrap();
        let progress_group = progress["groups"]
            .as_array()
            .unwrap()
            .iter()
            .find(|g| g["group"]["variant"] == name)
            .unwrap();
        assert_eq!(
            progress_group["analysed"], true,
            "{name}: the demo's progress fit runs"
        );
        for (parameter, truth) in true_values {
            inside(parameter, &progress_group["parameters"][parameter], truth);
        }
    }
}

#[test]
fn demo_wide_csv_with_tidy_layout_recovers_the_truth() {
    check_demo_run(&[
        "run",
        "amber-fen-wide.csv",
        "--layout",
        "amber-fen-layout.csv",
        "--extinction",
        "16800",
        "--pathlength",
        "0.55",
    ]);
}

#[test]
fn demo_grid_csv_with_grid_layout_recovers_the_truth() {
    check_demo_run(&[
        "run",
        "amber-fen-grid.csv",
        "--layout",
        "amber-fen-layout-grid.csv",
        "--extinction",
        "16800",
        "--pathlength",
        "0.55",
    ]);
}

#[test]
fn demo_xlsx_with_assay_file_recovers_the_truth() {
    check_demo_run(&["run", "amber-fen.xlsx", "--assay", "amber-fen-assay.toml"]);
}

#[test]
fn inspect_describes_each_demo_file() {
    for (file, shape) in [
        ("amber-fen-wide.csv", "wide"),
        ("amber-fen-grid.csv", "grid"),
        ("amber-fen.xlsx", "wide"),
    ] {
        let output = platekin(&["inspect", file], &project("demo-plates"));
        let stdout = text(&output.stdout);
        assert!(output.status.success(), "{file}: {}", text(&output.stderr));
        assert!(stdout.contains(shape), "{file}: {stdout}");
        assert!(stdout.contains("96 wells"), "{file}: {stdout}");
        assert!(stdout.contains("49"), "{file}: {stdout}");
        assert!(
            stdout.contains("C5 read 23 (t = 330 s): 'OVER'"),
            "{file}: {stdout}"
        );
    }
}

#[test]
fn small_plate_runs_with_flags_and_assay_file() {
    let scratch = tempfile::tempdir().unwrap();
    let out = scratch.path().join("out");
    let output = platekin(
        &[
            "run",
            "small-plate.csv",
            "--assay",
            "assay-small.toml",
            "--min-points",
            "5",
            "--out",
            out.to_str().unwrap(),
        ],
        &project("fixtures"),
    );
    assert!(output.status.success(), "{}", text(&output.stderr));
    let settings = std::fs::read_to_string(out.join("settings.toml")).unwrap();
    // The flag wins over the assay file's `min-points = 4`.
    assert!(settings.contains("min-points = 5"), "{settings}");
    assert!(settings.contains("extinction = 10000"), "{settings}");
    let wells = csv_rows(&out.join("wells.csv"));
    let slopes = column(&wells, "window_slope [uM/s]");
    let rates = column(&wells, "rate [uM/s]");
    let names = column(&wells, "well");
    // A2's slope is 0.00035 AU/s by construction; minus the blank (flat) and the no-enzyme
    // background at the same 100 uM (B2, 1e-5 AU/s), over epsilon l = 10000 * 0.5 per M, in uM/s:
    // 0.00034 / 5000 * 1e6 = 0.068.
    let a2 = names.iter().position(|w| *w == "A2").unwrap();
    let slope: f64 = slopes[a2].parse().unwrap();
    assert!((slope - 0.068).abs() < 0.001, "A2 window slope {slope}");
    // The initial rate at mixing corrects the chord for the depletion the group's rate law implies:
    // never below it.
    let rate: f64 = rates[a2].parse().unwrap();
    assert!(rate >= slope, "A2 rate {rate} below its window's slope {slope}");
}

#[test]
fn foreign_output_folder_is_refused_without_force() {
    let scratch = tempfile::tempdir().unwrap();
    std::fs::write(scratch.path().join("notes.txt"), "keep me").unwrap();
    let args = [
        "run",
        "small-plate.csv",
        "--layout",
        "small-layout.csv",
        "--out",
        scratch.path().to_str().unwrap(),
    ];
    let output = platekin(&args, &project("fixtures"));
    assert_eq!(output.status.code(), Some(2));
    assert!(
        text(&output.stderr).contains("--force"),
        "{}",
        text(&output.stderr)
    );
    assert!(!scratch.path().join("wells.csv").exists());
    let mut forced = args.to_vec();
    forced.push("--force");
    let output = platekin(&forced, &project("fixtures"));
    assert!(output.status.success(), "{}", text(&output.stderr));
    assert_eq!(
        std::fs::read_to_string(scratch.path().join("notes.txt")).unwrap(),
        "keep me"
    );
}

#[test]
fn layout_well_off_the_plate_is_named() {
    check_refused(
        &["run", "small-plate.csv", "--layout", "layout-off-plate.csv"],
        &["layout-off-plate.csv", "A13", "row 7"],
    );
}

#[test]
fn layout_conflicting_duplicate_is_named() {
    check_refused(
        &["run", "small-plate.csv", "--layout", "layout-conflict.csv"],
        &["layout-conflict.csv", "A2", "row 3", "row 7"],
    );
}

#[test]
fn layout_unknown_role_is_named() {
    check_refused(
        &["run", "small-plate.csv", "--layout", "layout-unknown-role.csv"],
        &["layout-unknown-role.csv", "buffer", "B1", "row 5"],
    );
}

#[test]
fn layout_unknown_unit_is_named() {
    check_refused(
        &["run", "small-plate.csv", "--layout", "layout-unknown-unit.csv"],
        &["layout-unknown-unit.csv", "ug/mL", "row 1"],
    );
}

#[test]
fn sample_without_substrate_is_named() {
    check_refused(
        &["run", "small-plate.csv", "--layout", "layout-no-substrate.csv"],
        &["layout-no-substrate.csv", "A3", "row 4"],
    );
}

#[test]
fn layout_wells_absent_from_the_data_are_named_unless_allowed() {
    check_refused(
        &["run", "small-plate.csv", "--layout", "layout-missing-wells.csv"],
        &["C1"],
    );
    let scratch = tempfile::tempdir().unwrap();
    let out = scratch.path().join("out");
    let output = platekin(
        &[
            "run",
            "small-plate.csv",
            "--layout",
            "layout-missing-wells.csv",
            "--allow-missing",
            "--out",
            out.to_str().unwrap(),
        ],
        &project("fixtures"),
    );
    assert!(output.status.success(), "{}", text(&output.stderr));
    assert!(
        text(&output.stdout).contains("C1"),
        "the warning names the missing well: {}",
        text(&output.stdout)
    );
}

#[test]
fn plain_number_times_without_a_unit_ask_for_one() {
    check_refused(
        &[
            "run",
            "small-plate-no-time-unit.csv",
            "--layout",
            "small-layout.csv",
        ],
        &["small-plate-no-time-unit.csv", "--time-unit"],
    );
    let scratch = tempfile::tempdir().unwrap();
    let out = scratch.path().join("out");
    let output = platekin(
        &[
            "run",
            "small-plate-no-time-unit.csv",
            "--layout",
            "small-layout.csv",
            "--time-unit",
            "s",
            "--out",
            out.to_str().unwrap(),
        ],
        &project("fixtures"),
    );
    assert!(output.status.success(), "{}", text(&output.stderr));
}

#[test]
fn short_rows_are_refused_or_read_as_unreadable() {
    check_refused(
        &[
            "run",
            "small-plate-short-row.csv",
            "--layout",
            "small-layout.csv",
            "--short-rows",
            "refuse",
        ],
        &["small-plate-short-row.csv", "row 10"],
    );
    let scratch = tempfile::tempdir().unwrap();
    let out = scratch.path().join("out");
    let output = platekin(
        &[
            "run",
            "small-plate-short-row.csv",
            "--layout",
            "small-layout.csv",
            "--out",
            out.to_str().unwrap(),
        ],
        &project("fixtures"),
    );
    assert!(output.status.success(), "{}", text(&output.stderr));
    assert!(
        text(&output.stdout).contains("row 10"),
        "the warning names the line: {}",
        text(&output.stdout)
    );
    let wells = csv_rows(&out.join("wells.csv"));
    let names = column(&wells, "well");
    let flags = column(&wells, "flags");
    let a3 = names.iter().position(|w| *w == "A3").unwrap();
    assert!(flags[a3].contains("unreadable"), "A3 lost read 7: {}", flags[a3]);
}

#[test]
fn missing_files_and_bad_settings_are_refused() {
    check_refused(
        &["run", "no-such-plate.csv", "--layout", "small-layout.csv"],
        &["no-such-plate.csv"],
    );
    check_refused(
        &["run", "small-plate.csv", "--assay", "assay-bad-key.toml"],
        &["assay-bad-key.toml", "max_conversoin"],
    );
    check_refused(
        &[
            "run",
            "small-plate.csv",
            "--layout",
            "small-layout.csv",
            "--extinction",
            "16800",
        ],
        &["--pathlength"],
    );
    check_refused(
        &[
            "run",
            "small-plate.csv",
            "--layout",
            "small-layout.csv",
            "--window",
            "300:0",
        ],
        &["window"],
    );
    check_refused(&["inspect", "no-such-plate.csv"], &["no-such-plate.csv"]);
}

#[test]
fn a_run_repeats_exactly_from_its_settings_file() {
    let scratch = tempfile::tempdir().unwrap();
    let first = scratch.path().join("first");
    let output = platekin(
        &[
            "run",
            "small-plate.csv",
            "--assay",
            "assay-small.toml",
            "--skip",
            "10",
            "--out",
            first.to_str().unwrap(),
        ],
        &project("fixtures"),
    );
    assert!(output.status.success(), "{}", text(&output.stderr));
    // From another folder, with only the recorded settings.
    let second = scratch.path().join("second");
    let data = project("fixtures/small-plate.csv");
    let output = platekin(
        &[
            "run",
            data.to_str().unwrap(),
            "--assay",
            first.join("settings.toml").to_str().unwrap(),
            "--out",
            second.to_str().unwrap(),
        ],
        scratch.path(),
    );
    assert!(output.status.success(), "{}", text(&output.stderr));
    for file in ["wells.csv", "conditions.csv", "settings.toml"] {
        assert_eq!(
            std::fs::read_to_string(first.join(file)).unwrap(),
            std::fs::read_to_string(second.join(file)).unwrap(),
            "{file} differs"
        );
    }
}

#[test]
fn a_factor_named_like_an_output_column_is_kept_apart() {
    let scratch = tempfile::tempdir().unwrap();
    let layout = scratch.path().join("layout.csv");
    let layout_text = std::fs::read_to_string(project("fixtures/small-layout.csv"))
        .unwrap()
        .replace("variant", "flags");
    std::fs::write(&layout, layout_text).unwrap();
    let out = scratch.path().join("out");
    let output = platekin(
        &[
            "run",
            "small-plate.csv",
            "--layout",
            layout.to_str().unwrap(),
            "--out",
            out.to_str().unwrap(),
        ],
        &project("fixtures"),
    );
    assert!(output.status.success(), "{}", text(&output.stderr));
    for file in ["wells.csv", "conditions.csv"] {
        let rows = csv_rows(&out.join(file));
        assert!(
            rows[0].iter().any(|h| h == "factor:flags"),
            "{file}: {:?}",
            rows[0]
        );
        assert!(rows[0].iter().any(|h| h == "flags"), "{file}: {:?}", rows[0]);
    }
}
