//! Which analysis to trust, through the binary: each outcome of the decision (`initial-rate`,
//! `progress-curve`, `either`, `neither`) from a plate simulated by numerical integration of the
//! rate law (truth known), written to a temporary folder and run with `platekin run`.

mod common;

use std::path::Path;

use common::{platekin, text};
use platekin::simulate::{
    demo_bench_spec, layout_tidy_csv, simulate, wide_csv, LayoutGroup, SimulationSpec, VariantKinetics,
    WellCondition, WideCsvOptions,
};
use serde_json::Value;

/// Eight [S] from 5 to 320 uM in rows A-H, triplicates of one variant (kcat 20/s, Km 100 uM) at
/// `enzyme_nm`, a no-enzyme control and a blank per row; reads every 20 s for 30 min; extinction
/// 10,000 M^-1 cm^-1 at 0.55 cm. At 10 nM the low-[S] wells lose half their substrate within a
/// few minutes.
fn plate_spec(enzyme_nm: f64) -> SimulationSpec {
    plate_spec_with_reads(enzyme_nm, (0..91).map(|i| 20.0 * f64::from(i)).collect(), 0.001)
}

/// As [`plate_spec`] with its own read times (s) and read noise (AU).
fn plate_spec_with_reads(enzyme_nm: f64, read_times_s: Vec<f64>, noise_sd_au: f64) -> SimulationSpec {
    let substrates = [5.0, 10.0, 20.0, 40.0, 80.0, 160.0, 240.0, 320.0];
    let mut layout = Vec::new();
    for (row, s) in substrates.iter().enumerate() {
        let letter = (b'A' + row as u8) as char;
        layout.push(LayoutGroup {
            selection: format!("{letter}1:{letter}3"),
            condition: WellCondition::sample(*s, enzyme_nm, "variant-a"),
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
    SimulationSpec {
        read_times_s,
        extinction_coefficient_per_m_per_cm: 10_000.0,
        pathlength_cm: 0.55,
        variants: vec![VariantKinetics {
            name: "variant-a".into(),
            kcat_per_s: 20.0,
            km_um: 100.0,
            ki_um: None,
        }],
        layout,
        defects: Vec::new(),
        noise_sd_au,
        seed: 57,
        ..demo_bench_spec()
    }
}

/// Writes the plate's export and layout into `folder`, runs `platekin run` with `flags` and
/// returns `progress.json`.
fn run_plate(folder: &Path, spec: &SimulationSpec, flags: &[&str]) -> Value {
    let plate = simulate(spec).expect("the simulator runs");
    std::fs::write(
        folder.join("plate.csv"),
        wide_csv(&plate, &WideCsvOptions::default()),
    )
    .unwrap();
    std::fs::write(folder.join("layout.csv"), layout_tidy_csv(&plate)).unwrap();
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
    args.extend_from_slice(flags);
    let output = platekin(&args, folder);
    assert!(output.status.success(), "run failed: {}", text(&output.stderr));
    let progress = std::fs::read_to_string(folder.join("out/progress.json")).expect("progress.json written");
    serde_json::from_str(&progress).unwrap()
}

/// The one group's trust word and reason.
fn trust_of(progress: &Value) -> (String, String) {
    let groups = progress["groups"].as_array().expect("groups");
    assert_eq!(groups.len(), 1, "{progress:#}");
    let group = &groups[0];
    (
        group["trust"].as_str().expect("trust").to_string(),
        group["trust_reason"].as_str().unwrap_or_default().to_string(),
    )
}

#[test]
fn low_conversion_plate_trusts_the_initial_rates_without_a_progress_fit() {
    let folder = tempfile::tempdir().unwrap();
    // 0.5 nM read every 10 s for 4 min: the lowest [S] converts about 2% over the run.
    let reads = (0..25).map(|i| 10.0 * f64::from(i)).collect();
    let progress = run_plate(
        folder.path(),
        &plate_spec_with_reads(0.5, reads, 0.0002),
        &["--extinction", "10000", "--pathlength", "0.55"],
    );
    let (trust, reason) = trust_of(&progress);
    assert_eq!(trust, "initial-rate", "{reason}");
}

#[test]
fn chord_rates_on_a_depletion_plate_give_way_to_the_progress_curves() {
    let folder = tempfile::tempdir().unwrap();
    let progress = run_plate(
        folder.path(),
        &plate_spec(30.0),
        &[
            "--extinction",
            "10000",
            "--pathlength",
            "0.55",
            "--initial-rate",
            "chord",
        ],
    );
    let (trust, reason) = trust_of(&progress);
    assert_eq!(trust, "progress-curve", "{reason}");
}

#[test]
fn integrated_rates_and_progress_curves_agree_on_a_depletion_plate() {
    let folder = tempfile::tempdir().unwrap();
    let progress = run_plate(
        folder.path(),
        &plate_spec(10.0),
        &["--extinction", "10000", "--pathlength", "0.55"],
    );
    let (trust, reason) = trust_of(&progress);
    assert_eq!(trust, "either", "{reason}");
}

#[test]
fn half_the_true_extinction_makes_the_curves_overshoot_and_trusts_neither() {
    // Product read at twice its true concentration runs past S0: no rate law fits the curves,
    // and the initial rates are suspect on this plate too.
    let folder = tempfile::tempdir().unwrap();
    let progress = run_plate(
        folder.path(),
        &plate_spec(10.0),
        &["--extinction", "5000", "--pathlength", "0.55"],
    );
    let (trust, reason) = trust_of(&progress);
    assert_eq!(trust, "neither", "{reason}");
}
