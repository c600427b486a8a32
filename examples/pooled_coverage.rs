//! The coverage study of the cross-plate fits (see `platekin::simulate::pooled_study`):
//! `cargo run --release --example pooled_coverage -- [CAMPAIGNS] [PLATES] [READS] [ESTIMATOR]`
//! (default 200 campaigns of 30 plates, 60 reads, the `integrated` estimator). Prints one row per
//! variant: campaigns, the pooled Km's intervals holding the truth (clustered by plate, and
//! model-based), Km's bias and RMSE, the plates' own Km bias, the between-plate CV of kcat against
//! the true activities' CV, and per-plate kcat coverage.

use std::process::ExitCode;

use platekin::config::InitialRateEstimator;
use platekin::simulate::pooled_study::{pooled_coverage_study, PooledStudy};

fn main() -> ExitCode {
    let mut args = std::env::args().skip(1);
    let mut number = |default: usize| args.next().and_then(|n| n.parse().ok()).unwrap_or(default);
    let campaigns = number(200).clamp(1, 10_000);
    let plates = number(30).clamp(2, 1_000);
    let reads = number(60).clamp(5, 2_000);
    let estimator = match std::env::args().nth(4).as_deref() {
        Some("chord") => InitialRateEstimator::Chord,
        Some("tangent") => InitialRateEstimator::Tangent,
        _ => InitialRateEstimator::Integrated,
    };
    let study = PooledStudy {
        campaigns,
        plates,
        reads,
        // PLATEKIN_FIRST_SEED=20240917 with one campaign of 30 plates repeats the demo campaign.
        first_seed: std::env::var("PLATEKIN_FIRST_SEED")
            .ok()
            .and_then(|seed| seed.parse().ok())
            .unwrap_or(7_000),
        estimator,
        // PLATEKIN_PLATES=independent drops the day factors (the CV interval's own assumption).
        independent_plates: std::env::var("PLATEKIN_PLATES").is_ok_and(|v| v == "independent"),
    };
    let start = std::time::Instant::now();
    let rows = match pooled_coverage_study(&study) {
        Ok(rows) => rows,
        Err(error) => {
            eprintln!("{error}");
            return ExitCode::from(2);
        }
    };
    println!("{campaigns} campaigns of {plates} plates ({reads} reads), estimator {estimator:?}");
    println!("| variant | campaigns | Km covered (clustered) | Km covered (model-based) | Km bias | Km RMSE | width (clustered) | width (model) | plates' own Km bias | kcat CV | true CV | plate kcat covered |");
    println!("| --- | ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: |");
    for r in &rows {
        let pct = |k: usize, n: usize| 100.0 * k as f64 / n.max(1) as f64;
        println!(
            "| {} | {} | {} ({:.1}%) | {} ({:.1}%) | {:+.3}% | {:.3}% | {:.3}% | {:.3}% | {:+.3}% | {:.2}% | {:.2}% | {}/{} ({:.1}%) |",
            r.variant,
            r.campaigns,
            r.covered,
            pct(r.covered, r.campaigns),
            r.covered_model_based,
            pct(r.covered_model_based, r.campaigns),
            100.0 * r.km_relative_bias,
            100.0 * r.km_relative_rmse,
            100.0 * r.relative_width,
            100.0 * r.relative_width_model_based,
            100.0 * r.plate_km_relative_bias,
            100.0 * r.kcat_cv_mean,
            100.0 * r.true_cv_mean,
            r.plate_kcat_covered,
            r.plate_kcat_intervals,
            pct(r.plate_kcat_covered, r.plate_kcat_intervals),
        );
    }
    println!();
    println!("| variant | Km SD of estimates | Km mean SE (clustered) | SE / SD | plate kcat RMSE | plate kcat RMS SE | of which shared | CV population | CV corrected (mean) | CV interval holds population CV | holds own plates' CV |");
    println!("| --- | ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: |");
    for r in &rows {
        let pct = |k: usize, n: usize| 100.0 * k as f64 / n.max(1) as f64;
        println!(
            "| {} | {:.3}% | {:.3}% | {:.3} | {:.3}% | {:.3}% | {:.3}% | {:.2}% | {:.2}% | {}/{} ({:.1}%) | {}/{} ({:.1}%) |",
            r.variant,
            100.0 * r.km_relative_sd,
            100.0 * r.km_relative_se_mean,
            r.km_relative_se_mean / r.km_relative_sd,
            100.0 * r.plate_kcat_relative_rmse,
            100.0 * r.plate_kcat_relative_se_rms,
            100.0 * r.plate_kcat_relative_shared_se_rms,
            100.0 * r.population_cv,
            100.0 * r.cv_corrected_mean,
            r.cv_covered,
            r.cv_intervals,
            pct(r.cv_covered, r.cv_intervals),
            r.cv_covered_own_plates,
            r.cv_intervals,
            pct(r.cv_covered_own_plates, r.cv_intervals),
        );
    }
    eprintln!("{:.1} s", start.elapsed().as_secs_f64());
    ExitCode::SUCCESS
}
