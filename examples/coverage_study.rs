//! The coverage study of the project's 95% intervals (see `platekin::simulate::study`):
//! `cargo run --release --example coverage_study -- [PLATES] [DESIGN,...]` (default 400 plates of
//! each of `clean`, `realistic` and `inhibition`). Prints one table row per design, analysis,
//! variant and parameter: plates, intervals holding the truth, bias, RMSE and mean width.

use std::process::ExitCode;

use platekin::simulate::study::{coverage_study, InitialRateEstimatorKey, StudyDesign};

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
        let rows = match coverage_study(design, plates, 1_000, &estimators) {
            Ok(rows) => rows,
            Err(error) => {
                eprintln!("{}: {error}", design.name());
                return ExitCode::from(2);
            }
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
