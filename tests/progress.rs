//! Progress-curve analysis through the whole library path (simulated export and layout, import,
//! initial rates, group fits, progress-curve fits): known truth recovered on a depletion-heavy
//! plate where initial rates fail, model choice, and the bad cases (single well, flat curves).

use platekin::config::{resolve_analysis, resolve_fit, ReportMode, SettingLayer};
use platekin::files::sheet::read_text_cells;
use platekin::groups::GroupKey;
use platekin::import::{import_cells, ImportOptions};
use platekin::layout::parse_layout;
use platekin::pipeline::{analyse_inputs, RunResults};
use platekin::progress::choice::ModelVerdict;
use platekin::progress::global_fit::ProgressModel;
use platekin::progress::trust::{RunReason, Trust, TrustReason};
use platekin::render::summary::run_summary;
use platekin::render::{render_run_outputs, RunRecord};
use platekin::simulate::{
    demo_bench_spec, layout_tidy_csv, simulate, wide_csv, LayoutGroup, SimulationSpec, VariantKinetics,
    WellCondition, WideCsvOptions,
};

const KCAT: f64 = 20.0;
const KM_UM: f64 = 100.0;

/// Eight substrate levels in rows A-H, three replicates of the depleting enzyme (10 nM, kcat 20/s,
/// Km 100 uM) in columns 1-3, one well of "solo" in column 4 row A, a dead variant (kcat 0) in
/// columns 5-6, no-enzyme controls in column 7 and blanks in column 8. Reads every 20 s for 30 min;
/// extinction 10,000 M^-1 cm^-1 at 0.55 cm keeps 320 uM below 2 AU; noise 0.001 AU.
fn depletion_spec() -> SimulationSpec {
    let substrates = [5.0, 10.0, 20.0, 40.0, 80.0, 160.0, 240.0, 320.0];
    let mut layout = Vec::new();
    for (row, s) in substrates.iter().enumerate() {
        let letter = (b'A' + row as u8) as char;
        layout.push(LayoutGroup {
            selection: format!("{letter}1:{letter}3"),
            condition: WellCondition::sample(*s, 10.0, "fast"),
        });
        layout.push(LayoutGroup {
            selection: format!("{letter}5:{letter}6"),
            condition: WellCondition::sample(*s, 10.0, "dead"),
        });
        layout.push(LayoutGroup {
            selection: format!("{letter}7"),
            condition: WellCondition::no_enzyme(*s),
        });
        layout.push(LayoutGroup {
            selection: format!("{letter}8"),
            condition: WellCondition::blank(),
        });
    }
    layout.push(LayoutGroup {
        selection: "A4".into(),
        condition: WellCondition::sample(80.0, 10.0, "solo"),
    });
    SimulationSpec {
        read_times_s: (0..91).map(|i| 20.0 * f64::from(i)).collect(),
        extinction_coefficient_per_m_per_cm: 10_000.0,
        pathlength_cm: 0.55,
        variants: vec![
            VariantKinetics {
                name: "fast".into(),
                kcat_per_s: KCAT,
                km_um: KM_UM,
                ki_um: None,
            },
            VariantKinetics {
                name: "dead".into(),
                kcat_per_s: 0.0,
                km_um: KM_UM,
                ki_um: None,
            },
            VariantKinetics {
                name: "solo".into(),
                kcat_per_s: KCAT,
                km_um: KM_UM,
                ki_um: None,
            },
        ],
        layout,
        defects: Vec::new(),
        noise_sd_au: 0.001,
        seed: 31,
        ..demo_bench_spec()
    }
}

fn run(extra: SettingLayer) -> RunResults {
    run_spec(&depletion_spec(), extra, |layout| layout)
}

fn run_spec(
    spec: &SimulationSpec,
    extra: SettingLayer,
    edit_layout: impl Fn(String) -> String,
) -> RunResults {
    let plate = simulate(spec).unwrap();
    let csv = wide_csv(&plate, &WideCsvOptions::default());
    let grid = read_text_cells(csv.as_bytes(), "depletion.csv").unwrap();
    let data = import_cells(&grid, &ImportOptions::default()).unwrap();
    let layout_csv = edit_layout(layout_tidy_csv(&plate));
    let layout_grid = read_text_cells(layout_csv.as_bytes(), "depletion-layout.csv").unwrap();
    let layout = parse_layout(&layout_grid, data.plate).unwrap();
    let layer = SettingLayer {
        extinction: extra.extinction.or(Some(10_000.0)),
        pathlength: extra.pathlength.or(Some(0.55)),
        ..extra
    };
    analyse_inputs(
        data,
        layout,
        &resolve_analysis(&layer).unwrap(),
        &resolve_fit(&layer).unwrap(),
        &mut |_, _| {},
    )
    .unwrap()
}

fn group_of<'a, T>(items: &'a [T], variant: &str, key: impl Fn(&T) -> &GroupKey) -> &'a T {
    items
        .iter()
        .find(|item| key(item).text("variant") == Some(variant))
        .unwrap()
}

fn summary(results: &RunResults) -> String {
    run_summary(results, ReportMode::Html, std::path::Path::new("out"))
}

#[test]
fn depletion_heavy_plate_initial_rates_miss_km_and_the_global_fit_recovers_it() {
    // A fixed 0-600 s window with flagged wells kept is how depletion biases a routine analysis:
    // at low S0 most substrate is gone within the window, so slopes (chords) fall short of v0.
    let chords = run(SettingLayer {
        window: Some("0:600".into()),
        keep_flagged: Some(true),
        initial_rate: Some("chord".into()),
        ..SettingLayer::default()
    });
    let initial_km = group_of(&chords.fits, "fast", |f| &f.group).parameters["Km"].value;
    assert!(
        (initial_km / KM_UM - 1.0).abs() > 0.20,
        "chord Km {initial_km} should miss {KM_UM} by more than 20%"
    );
    // The integrated estimator (the default) corrects each chord by the group's rate law.
    let results = run(SettingLayer {
        window: Some("0:600".into()),
        keep_flagged: Some(true),
        ..SettingLayer::default()
    });
    let corrected_km = group_of(&results.fits, "fast", |f| &f.group).parameters["Km"].value;
    assert!(
        (corrected_km / KM_UM - 1.0).abs() < 0.05,
        "integrated Km {corrected_km} should be within 5% of {KM_UM}"
    );
    let progress = group_of(&results.progress.groups, "fast", |g| &g.group);
    assert!(progress.analysed, "{progress:?}");
    assert!(
        matches!(progress.run, RunReason::Suspect(_)),
        "{:?}",
        progress.run
    );
    let kcat = progress.parameters["kcat"].value;
    let km = progress.parameters["Km"].value;
    assert!((kcat / KCAT - 1.0).abs() < 0.05, "kcat {kcat} vs {KCAT}");
    assert!((km / KM_UM - 1.0).abs() < 0.05, "Km {km} vs {KM_UM}");
    // At 0.001 AU noise over 24 x 91 reads the interval is under 1% wide, narrower than the
    // simulator's 3-decimal rounding and spontaneous hydrolysis can be trusted to, so the check is
    // that it brackets the estimate and lies within 5% of the truth, not that it covers it.
    let [lo, hi] = progress.parameters["Km"].ci95_profile.unwrap();
    let (lo, hi) = (lo.unwrap(), hi.unwrap());
    assert!(
        lo < km && km < hi && lo > 0.95 * KM_UM && hi < 1.05 * KM_UM,
        "profile {lo}..{hi}"
    );
    assert_eq!(
        progress.model,
        Some(ProgressModel::MichaelisMenten),
        "{:#?}",
        progress.models_tried
    );
    // The corrected initial rates agree with the whole curves: either will do, and the reason names
    // the signs of depletion the rates showed. The chords disagree: the progress-curve fit.
    assert_eq!(progress.decision.trust, Trust::Either, "{:?}", progress.decision);
    assert!(matches!(
        progress.decision.reason,
        TrustReason::Agree {
            suspicion: Some(_),
            ..
        }
    ));
    let chord_progress = group_of(&chords.progress.groups, "fast", |g| &g.group);
    assert_eq!(
        chord_progress.decision.trust,
        Trust::ProgressCurve,
        "{:?}",
        chord_progress.decision
    );
    // Product inhibition and inactivation are absent from the truth and reported as not needed.
    for tried in &progress.models_tried[1..] {
        assert!(
            !tried.verdict.is_needed() && !matches!(tried.verdict, ModelVerdict::Failed(_)),
            "{tried:?}"
        );
    }
    // The window slopes fall short of the fitted initial rates at low S0: at S0 = 5 uM << Km the
    // curve is nearly first order with k = Vmax/(Km + S0) = 0.2/105 per s, so the chord of the
    // 0-600 s window is (1 - exp(-kT))/(kT) = 0.58 of the initial rate (kT = 1.14).
    let low = progress.wells.iter().find(|w| w.well == "A1").unwrap();
    let ratio = low.window_over_implied.unwrap();
    assert!(ratio > 0.5 && ratio < 0.65, "{low:?}");
    // progress.json holds the schema; the summary names what to trust.
    let record = RunRecord::without_inputs(SettingLayer::default(), ReportMode::None);
    let files = render_run_outputs(&results, &record).unwrap();
    let file = files.iter().find(|f| f.name == "progress.json").unwrap();
    let json: serde_json::Value = serde_json::from_slice(&file.bytes).unwrap();
    let group = &json["groups"].as_array().unwrap()[0];
    for key in [
        "group",
        "model",
        "parameters",
        "correlation",
        "aicc",
        "models_tried",
        "warnings",
    ] {
        assert!(!group[key].is_null(), "progress.json lacks {key}: {group}");
    }
    assert_eq!(group["parameters"]["kcat"]["unit"], "1/s");
    assert_eq!(group["parameters"]["Km"]["ci95"].as_array().unwrap().len(), 2);
    let summary = summary(&chords);
    // The results block at the top names the analysis trusted and shows its constants.
    assert!(
        summary.contains("from progress curves") && summary.contains("trust: progress curves"),
        "{summary}"
    );
}

#[test]
fn bad_groups_get_clear_messages_and_auto_skips_clean_groups() {
    let results = run(SettingLayer {
        progress: Some("always".into()),
        ..SettingLayer::default()
    });
    let solo = group_of(&results.progress.groups, "solo", |g| &g.group);
    let error = solo.error.as_deref().unwrap();
    assert!(
        error.contains("at least 2 wells") && error.contains("A4"),
        "{error}"
    );
    assert_eq!(solo.decision.trust, Trust::InitialRate);
    let dead = group_of(&results.progress.groups, "dead", |g| &g.group);
    assert!(dead.error.as_deref().unwrap().contains("flat"), "{dead:?}");

    let never = run(SettingLayer {
        progress: Some("never".into()),
        ..SettingLayer::default()
    });
    assert!(never.progress.groups.iter().all(|g| !g.analysed));
    assert!(summary(&never).contains("--progress never"));
}

#[test]
fn the_binary_writes_progress_json_and_refuses_a_bad_mode() {
    let folder = tempfile::tempdir().unwrap();
    let demo = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-plates");
    let data = demo.join("amber-fen-wide.csv");
    let layout = demo.join("amber-fen-layout.csv");
    let out = folder.path().join("out");
    let run = |mode: &str, out: &std::path::Path| {
        std::process::Command::new(env!("CARGO_BIN_EXE_platekin"))
            .args([
                "run",
                data.to_str().unwrap(),
                "--layout",
                layout.to_str().unwrap(),
            ])
            .args([
                "--extinction",
                "16800",
                "--pathlength",
                "0.55",
                "--progress",
                mode,
            ])
            .args(["--dead-time", "5", "--out", out.to_str().unwrap()])
            .output()
            .unwrap()
    };
    let output = run("always", &out);
    assert!(
        output.status.success(),
        "{}",
        String::from_utf8_lossy(&output.stderr)
    );
    let stdout = String::from_utf8_lossy(&output.stdout);
    assert!(
        stdout.contains("Progress-curve analysis (--progress always)"),
        "{stdout}"
    );
    let json: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("progress.json")).unwrap()).unwrap();
    assert_eq!(json["mode"], "always");
    let groups = json["groups"].as_array().unwrap();
    assert_eq!(groups.len(), 2);
    // Demo truth (src/simulate/demo.rs): FenA-wt kcat 12 /s, Km 80 uM.
    let wild_type = &groups[0];
    assert_eq!(wild_type["dead_time_s"], 5.0);
    let km = wild_type["parameters"]["Km"]["value"].as_f64().unwrap();
    assert!((km / 80.0 - 1.0).abs() < 0.05, "Km {km}");
    assert_eq!(json["settings"]["progress"], "always");

    let refused = run("sometimes", &folder.path().join("refused"));
    assert!(!refused.status.success());
    let stderr = String::from_utf8_lossy(&refused.stderr);
    assert!(
        stderr.contains("progress") && stderr.contains("sometimes"),
        "{stderr}"
    );
    assert!(!folder.path().join("refused").join("progress.json").exists());
}

#[test]
fn substrate_readout_s0_from_signal_names_a_pipetting_error() {
    // A substrate read (the signal falls); H3 truly holds 300 uM but the layout claims 200 uM.
    let mut spec = depletion_spec();
    spec.readout = platekin::simulate::Readout::Substrate;
    for group in &mut spec.layout {
        if group.selection == "H1:H3" {
            group.selection = "H1:H2".into();
        }
    }
    spec.layout.push(LayoutGroup {
        selection: "H3".into(),
        condition: WellCondition::sample(300.0, 10.0, "fast"),
    });
    let edit = |layout: String| layout.replace("H3,sample,300,", "H3,sample,200,");
    let layer = |from_signal: bool| SettingLayer {
        readout: Some("substrate".into()),
        progress: Some("always".into()),
        s0_from_signal: Some(from_signal),
        ..SettingLayer::default()
    };
    let results = run_spec(&spec, layer(false), edit);
    let fast = group_of(&results.progress.groups, "fast", |g| &g.group);
    let warning = fast
        .warnings
        .iter()
        .find(|w| w.contains("S0 from the first signal"))
        .unwrap();
    assert!(warning.contains("H3 (layout 200"), "{warning}");
    assert!(
        !warning.contains("H2 ("),
        "only the wrong well is named: {warning}"
    );
    let h3 = fast.wells.iter().find(|w| w.well == "H3").unwrap();
    let from_signal = h3.s0_from_signal.unwrap();
    assert!((from_signal / 300.0 - 1.0).abs() < 0.03, "{h3:?}");

    // Fitting with the signal's S0 recovers the truth within 5%.
    let corrected = run_spec(&spec, layer(true), edit);
    let fast = group_of(&corrected.progress.groups, "fast", |g| &g.group);
    let km = fast.parameters["Km"].value;
    let kcat = fast.parameters["kcat"].value;
    assert!(
        (km / KM_UM - 1.0).abs() < 0.05 && (kcat / KCAT - 1.0).abs() < 0.05,
        "Km {km} kcat {kcat}"
    );
}

#[test]
fn progress_constants_report_their_sensitivity_to_calibration_and_substrate() {
    use platekin::progress::analysis::CalibrationInput;
    let results = run(SettingLayer::default());
    let progress = group_of(&results.progress.groups, "fast", |g| &g.group);
    assert!(progress.analysed);
    assert_eq!(progress.sensitivity.len(), 4, "{:?}", progress.sensitivity);
    let reported_km = progress.parameters["Km"].value;
    let reported_kcat = progress.parameters["kcat"].value;
    let mut compared = 0;
    for case in &progress.sensitivity {
        match case.input {
            // The same change made by the user: a whole run with extinction x pathlength off by
            // the factor gives the progress constants the sensitivity predicts.
            CalibrationInput::ExtinctionPathlength => {
                let rerun = run(SettingLayer {
                    extinction: Some(10_000.0 * case.factor),
                    ..SettingLayer::default()
                });
                let rerun_fit = group_of(&rerun.progress.groups, "fast", |g| &g.group);
                // The sensitivity keeps the chosen model; a rerun may choose another (at +5%
                // the plateaus fall short of S0 and read as inactivation): compare like with like.
                if rerun_fit.model != progress.model {
                    continue;
                }
                compared += 1;
                for (name, reported) in [("Km", reported_km), ("kcat", reported_kcat)] {
                    let observed = rerun_fit.parameters[name].value / reported - 1.0;
                    let predicted = case.relative_change[name];
                    assert!(
                        (observed - predicted).abs() < 0.005,
                        "{name} at factor {}: rerun {observed:+.4}, sensitivity {predicted:+.4}",
                        case.factor
                    );
                }
            }
            // Every S0 off by f: Km follows in proportion or more (the curves' plateaus also
            // read S0; here up to four times the 5%).
            CalibrationInput::SubstrateStart => {
                let km = case.relative_change["Km"];
                let expected = case.factor - 1.0;
                assert!(km / expected > 0.9, "Km {km} for factor {}", case.factor);
            }
        }
    }
    assert!(compared >= 1, "no rerun kept the model");
    // On this plate the curves run to completion, so their plateaus pin S0 x extinction x
    // pathlength: a 5% calibration error moves Km by several percent (initial-rate Km would not
    // move at all).
    let low = progress
        .sensitivity
        .iter()
        .find(|c| c.input == CalibrationInput::ExtinctionPathlength && c.factor < 1.0)
        .expect("the -5% case");
    assert!(low.relative_change["Km"].abs() > 0.05, "{low:?}");
    let text = summary(&results);
    assert!(text.contains("extinction x pathlength -5%/+5%: kcat"), "{text}");
}
