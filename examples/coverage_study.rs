//! The coverage study of the project's 95% intervals (see `platekin::simulate::study`):
//! `cargo run --release --example coverage_study -- [PLATES] [DESIGN,...]` (default 400 plates of
//! each of `clean`, `realistic` and `inhibition`). Prints one table row per design, analysis,
//! variant and parameter: plates, intervals holding the truth, bias, RMSE and mean width.
//! With `--wells` as a third argument it prints the well-level check instead
//! (`platekin::simulate::study::well_error_study`): per variant and level, the wells' observed
//! relative scatter about the truth against the SD the fit gives them, and the variance ratio.
//! `PLATEKIN_FIRST_SEED=N` starts the plates' seeds at N instead of 1000 (another draw of plates).

use std::process::ExitCode;

use platekin::simulate::study::{coverage_study, well_error_study, InitialRateEstimatorKey, StudyDesign};

fn main() -> ExitCode {
    let mut args = std::env::args().skip(1);
    let plates: usize = args.next().and_then(|n| n.parse().ok()).unwrap_or(400);
    let designs: Vec<StudyDesign> = args
        .next()
        .unwrap_or_else(|| "clean,realistic,inhibition".to_string())
        .split(',')
        .filter_map(|name| match name.trim() {
            "clean" => Some(StudyDesign::Clean),
            "realistic" => Some(StudyDesign::Realistic),
            "inhibition" => Some(StudyDesign::Inhibition),
            "dense" => Some(StudyDesign::DenseReads),
            _ => None,
        })
        .collect();
    if args.next().as_deref() == Some("--wells") {
        return print_well_levels(&designs, plates);
    }
    let first_seed: u64 = std::env::var("PLATEKIN_FIRST_SEED")
        .ok()
        .and_then(|seed| seed.parse().ok())
        .unwrap_or(1_000);
    let estimators = [
        InitialRateEstimatorKey::Integrated,
        InitialRateEstimatorKey::Chord,
        InitialRateEstimatorKey::Tangent,
    ];
    println!(
        "| design | analysis | variant | parameter | plates | covered | coverage | bias | RMSE | width |"
    );
    println!("| --- | --- | --- | --- | ---: | ---: | ---: | ---: | ---: | ---: |");
    for design in designs {
        let start = std::time::Instant::now();
        let Some(rows) = or_report(design, coverage_study(design, plates, first_seed, &estimators)) else {
            return ExitCode::from(2);
        };
        for row in rows {
            println!(
                "| {} | {} | {} | {} | {} | {} | {:.1}% | {:+.2}% | {:.2}% | {:.2}% |",
                row.design.name(),
                row.analysis.name(),
                row.variant,
                row.parameter,
                row.plates,
                row.covered,
                100.0 * row.covered as f64 / row.plates as f64,
                100.0 * row.relative_bias,
                100.0 * row.relative_rmse,
                100.0 * row.relative_width
            );
        }
        eprintln!(
            "{}: {plates} plates in {:.1} s",
            design.name(),
            start.elapsed().as_secs_f64()
        );
    }
    ExitCode::SUCCESS
}

/// The well-level check's table, one row per design, variant and level.
fn print_well_levels(designs: &[StudyDesign], plates: usize) -> ExitCode {
    println!(
        "| design | variant | [S] | [I] | wells | bias | observed SD | within-plate SD | model SD | variance ratio | within-plate ratio |"
    );
    println!("| --- | --- | ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: |");
    for &design in designs {
        let Some(rows) = or_report(design, well_error_study(design, plates, 1_000)) else {
            return ExitCode::from(2);
        };
        for row in rows {
            println!(
                "| {} | {} | {} | {} | {} | {:+.2}% | {:.3}% | {:.3}% | {:.3}% | {:.2} | {:.2} |",
                row.design.name(),
                row.variant,
                row.substrate,
                row.inhibitor,
                row.wells,
                100.0 * row.relative_bias,
                100.0 * row.observed_relative_sd,
                100.0 * row.within_plate_relative_sd,
                100.0 * row.model_relative_sd,
                row.variance_ratio(),
                row.within_plate_variance_ratio()
            );
        }
    }
    ExitCode::SUCCESS
}

/// A study's rows, or `None` with its error written to stderr.
fn or_report<T>(design: StudyDesign, result: Result<T, String>) -> Option<T> {
    result
        .map_err(|error| eprintln!("{}: {error}", design.name()))
        .ok()
}
