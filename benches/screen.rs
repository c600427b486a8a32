//! Criterion benchmarks of a screening plate: a simulated 1536-well screen of 150 compounds at
//! eight doses (controls in four columns, 31 reads): the whole analysis (import, rates, % activity,
//! plate quality, 150 dose-response fits with profile intervals and leave-one-dose-out checks,
//! tables; no report, no disk), and the dose-response fits alone. The goal: under 1 s.
//! Run with `cargo bench --bench screen`; timings never go into tests.

use std::hint::black_box;

use criterion::{criterion_group, criterion_main, Criterion};

use platekin::config::{AnalysisSettings, FitSettings, ReportMode, SettingLayer};
use platekin::core::plate::PlateFormat;
use platekin::files::sheet::read_text_cells;
use platekin::import::{import_cells, ImportOptions};
use platekin::layout::parse_layout;
use platekin::pipeline::analyse_inputs;
use platekin::render::{render_run_outputs, RunRecord};
use platekin::simulate::screen::screen_plate;
use platekin::simulate::{simulate, wide_csv, WideCsvOptions};

fn whole_screen(data_csv: &str, layout_csv: &str) -> usize {
    let grid = read_text_cells(data_csv.as_bytes(), "screen.csv").expect("reads");
    let data = import_cells(&grid, &ImportOptions::default()).expect("imports");
    let layout_grid = read_text_cells(layout_csv.as_bytes(), "screen-layout.csv").expect("reads");
    let layout = parse_layout(&layout_grid, data.plate).expect("layout parses");
    let results = analyse_inputs(
        data,
        layout,
        &AnalysisSettings::default(),
        &FitSettings::default(),
        &mut |_, _| {},
    )
    .expect("analyses");
    let record = RunRecord::without_inputs(SettingLayer::default(), ReportMode::None);
    let files = render_run_outputs(&results, &record).expect("renders");
    files.iter().map(|file| file.bytes.len()).sum()
}

fn benchmarks(c: &mut Criterion) {
    let screen = screen_plate(PlateFormat::Wells1536, 150, 10, 31, 1536);
    let plate = simulate(&screen.spec).expect("the benchmark screen simulates");
    let data_csv = wide_csv(&plate, &WideCsvOptions::default());
    let mut group = c.benchmark_group("screen_1536_150_compounds");
    group.sample_size(10);
    group.bench_function("whole_run_without_disk", |b| {
        b.iter(|| whole_screen(black_box(&data_csv), black_box(&screen.layout_csv)))
    });
    // The fits alone: each compound's eight doses of the simulation's truth with a wiggle.
    let doses = platekin::simulate::screen::screen_doses();
    let series: Vec<Vec<f64>> = screen
        .compounds
        .iter()
        .enumerate()
        .map(|(index, truth)| {
            doses
                .iter()
                .enumerate()
                .map(|(i, dose)| {
                    100.0 / (1.0 + (dose / truth.ic50_um).powf(truth.hill))
                        + 2.0 * ((index * 8 + i) as f64 * 1.3).sin()
                })
                .collect()
        })
        .collect();
    group.bench_function("dose_response_fits_150", |b| {
        b.iter(|| {
            series
                .iter()
                .map(|responses| {
                    platekin::fit::dose_response::fit_dose_response(black_box(&doses), responses)
                        .expect("fits")
                        .n_points
                })
                .sum::<usize>()
        })
    });
    group.finish();
}

criterion_group!(benches, benchmarks);
criterion_main!(benches);
