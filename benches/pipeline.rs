//! Criterion benchmarks: import, per-well rates, the Michaelis-Menten fit, and the whole run
//! (read, analyse, tables, fits, rendering; no disk writes) on a simulated 1536-well plate with
//! 200 reads (a ~2 MB wide CSV), and the same plate with product standards in half its last
//! column converting the signal instead of Beer-Lambert (`whole_run_with_standards`: what a
//! standard curve adds; `whole_run_with_second_order_standards`: the same through a second-order
//! curve). `whole_run_progress_always` is the large plate with a progress-curve fit of every group
//! and its well-level intervals (`--progress always`), and `demo_96_wells_progress` the embedded
//! 96-well demo with its progress fits (the interactive case). Run with `cargo bench`; timings
//! never go into tests.

use std::hint::black_box;

use criterion::{criterion_group, criterion_main, Criterion};

use platekin::config::{
    resolve_analysis, AnalysisSettings, FitSettings, ProgressMode, ReportMode, SettingLayer,
};
use platekin::core::plate::PlateFormat;
use platekin::files::demo::{DEMO_ASSAY, DEMO_DATA, DEMO_LAYOUT};
use platekin::files::sheet::read_text_cells;
use platekin::import::{import_cells, ImportOptions};
use platekin::layout::parse_layout;
use platekin::pipeline::analyse_inputs;
use platekin::render::{render_run_outputs, RunRecord};
use platekin::simulate::{
    large_plate_spec, layout_tidy_csv, simulate, wide_csv, LayoutGroup, SimulatedReading, WellCondition,
    WideCsvOptions,
};

struct LargePlate {
    data_csv: String,
    layout_csv: String,
    analysis: AnalysisSettings,
}

fn large_plate() -> LargePlate {
    let plate =
        simulate(&large_plate_spec(PlateFormat::Wells1536, 200)).expect("the benchmark plate simulates");
    let layer = SettingLayer {
        extinction: Some(16_800.0),
        pathlength: Some(0.55),
        ..SettingLayer::default()
    };
    LargePlate {
        data_csv: wide_csv(&plate, &WideCsvOptions::default()),
        layout_csv: layout_tidy_csv(&plate),
        analysis: resolve_analysis(&layer).expect("benchmark settings are valid"),
    }
}

/// The large plate with its last column split: blanks in rows A-P, product standards 0-70 uM in
/// duplicate in rows Q-AF (blank wells of the simulator with the product's absorbance added:
/// 16,800 M^-1 cm^-1 x 0.55 cm, the plate's own chemistry).
fn large_plate_with_standards() -> LargePlate {
    let mut spec = large_plate_spec(PlateFormat::Wells1536, 200);
    spec.layout.pop();
    spec.layout.push(LayoutGroup {
        selection: "A48:P48".to_string(),
        condition: WellCondition::blank(),
    });
    spec.layout.push(LayoutGroup {
        selection: "Q48:AF48".to_string(),
        condition: WellCondition::blank(),
    });
    let mut plate = simulate(&spec).expect("the benchmark plate simulates");
    let level_um = |row: u16| f64::from((row - 16) / 2) * 10.0;
    let au_per_um = 16_800.0 * 0.55 * 1e-6;
    for well in plate
        .wells
        .iter_mut()
        .filter(|w| w.well.column == 47 && w.well.row >= 16)
    {
        let added = level_um(well.well.row) * au_per_um;
        for reading in &mut well.readings {
            if let SimulatedReading::Number(value) = reading {
                *value += added;
            }
        }
    }
    plate.layout.pop();
    let mut layout_csv: String = layout_tidy_csv(&plate)
        .lines()
        .enumerate()
        .map(|(index, line)| {
            if index == 0 {
                format!("{line},standard [uM]\n")
            } else {
                format!("{line},\n")
            }
        })
        .collect();
    for row in 16..32u16 {
        let label = platekin::core::plate::row_label(row);
        layout_csv.push_str(&format!("{label}48,standard,,,,{}\n", level_um(row)));
    }
    let layer = SettingLayer {
        extinction: Some(16_800.0),
        pathlength: Some(0.55),
        ..SettingLayer::default()
    };
    LargePlate {
        data_csv: wide_csv(&plate, &WideCsvOptions::default()),
        layout_csv,
        analysis: resolve_analysis(&layer).expect("benchmark settings are valid"),
    }
}

fn whole_run(plate: &LargePlate) -> usize {
    let grid = read_text_cells(plate.data_csv.as_bytes(), "large-plate.csv").expect("reads");
    let data = import_cells(&grid, &ImportOptions::default()).expect("imports");
    let layout_grid = read_text_cells(plate.layout_csv.as_bytes(), "large-layout.csv").expect("reads");
    let layout = parse_layout(&layout_grid, data.plate).expect("layout parses");
    let results = analyse_inputs(
        data,
        layout,
        &plate.analysis,
        &FitSettings::default(),
        &mut |_, _| {},
    )
    .expect("analyses");
    // The pipeline's own target excludes plots: no report here (see the report benchmark note).
    let record = RunRecord::without_inputs(SettingLayer::default(), ReportMode::None);
    let files = render_run_outputs(&results, &record).expect("renders");
    files.iter().map(|file| file.bytes.len()).sum()
}

fn benchmarks(c: &mut Criterion) {
    let plate = large_plate();
    let mut group = c.benchmark_group("plate_1536x200");
    group.sample_size(20);
    group.bench_function("read_and_import", |b| {
        b.iter(|| {
            let grid =
                read_text_cells(black_box(plate.data_csv.as_bytes()), "large-plate.csv").expect("reads");
            import_cells(&grid, &ImportOptions::default()).expect("imports")
        })
    });
    let grid = read_text_cells(plate.data_csv.as_bytes(), "large-plate.csv").expect("reads");
    let data = import_cells(&grid, &ImportOptions::default()).expect("imports");
    let layout_grid = read_text_cells(plate.layout_csv.as_bytes(), "large-layout.csv").expect("reads");
    let layout = parse_layout(&layout_grid, data.plate).expect("layout parses");
    group.bench_function("rates_all_wells", |b| {
        b.iter(|| platekin::rates::analyse_plate(black_box(&data), &layout, &plate.analysis))
    });
    group.bench_function("whole_run_without_disk", |b| {
        b.iter(|| whole_run(black_box(&plate)))
    });
    let with_standards = large_plate_with_standards();
    // The standards must convert the signal, or the benchmark measures nothing new.
    let grid = read_text_cells(with_standards.data_csv.as_bytes(), "large-plate.csv").expect("reads");
    let data = import_cells(&grid, &ImportOptions::default()).expect("imports");
    let layout_grid =
        read_text_cells(with_standards.layout_csv.as_bytes(), "large-layout.csv").expect("reads");
    let layout = parse_layout(&layout_grid, data.plate).expect("layout parses");
    let signal = platekin::rates::analyse_plate(&data, &layout, &with_standards.analysis).signal;
    assert_eq!(
        signal.calibration.map(|c| c.curves.len()),
        Some(1),
        "{:?}",
        signal.warnings
    );
    group.bench_function("whole_run_with_standards", |b| {
        b.iter(|| whole_run(black_box(&with_standards)))
    });
    // The same standards fitted to second order: every read converts through the curve's root.
    let mut second_order = large_plate_with_standards();
    second_order.analysis.standard_curve = platekin::config::StandardCurveModel::Quadratic;
    let signal = platekin::rates::analyse_plate(&data, &layout, &second_order.analysis).signal;
    assert!(
        signal
            .calibration
            .is_some_and(|c| c.curves.iter().all(|curve| curve.quadratic.is_some())),
        "the second-order benchmark must convert through a second-order curve"
    );
    group.bench_function("whole_run_with_second_order_standards", |b| {
        b.iter(|| whole_run(black_box(&second_order)))
    });
    let mut progress_always = large_plate();
    progress_always.analysis.progress.mode = ProgressMode::Always;
    group.bench_function("whole_run_progress_always", |b| {
        b.iter(|| whole_run(black_box(&progress_always)))
    });
    group.finish();

    // The demo plate as `platekin demo` runs it: its own assay settings, progress fits included.
    let demo_layer: SettingLayer = toml::from_str(DEMO_ASSAY).expect("the demo's assay file parses");
    let demo = LargePlate {
        data_csv: DEMO_DATA.to_string(),
        layout_csv: DEMO_LAYOUT.to_string(),
        analysis: resolve_analysis(&SettingLayer {
            progress: Some("always".into()),
            ..demo_layer
        })
        .expect("the demo's settings are valid"),
    };
    c.bench_function("demo_96_wells_progress", |b| {
        b.iter(|| whole_run(black_box(&demo)))
    });

    // One group's Michaelis-Menten fit: 8 concentrations in triplicate, the demo's FenA-wt.
    let substrate: Vec<f64> = [10.0, 20.0, 40.0, 80.0, 160.0, 320.0, 640.0, 1280.0]
        .iter()
        .flat_map(|s| [*s, *s, *s])
        .collect();
    let rates: Vec<f64> = substrate
        .iter()
        .enumerate()
        .map(|(i, s)| 0.048 * s / (80.0 + s) * (1.0 + 0.02 * ((i as f64 * 1.7).sin())))
        .collect();
    c.bench_function("michaelis_menten_fit_24_points", |b| {
        b.iter(|| {
            platekin::fit::fit_michaelis_menten(
                black_box(&substrate),
                black_box(&rates),
                &platekin::fit::MichaelisMentenOptions::default(),
            )
            .expect("fits")
        })
    });
}

criterion_group!(benches, benchmarks);
criterion_main!(benches);
