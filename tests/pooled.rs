//! The cross-plate fits' coverage study in small (the full study is
//! `examples/pooled_coverage.rs`, 400 campaigns of 30 plates, figures in DEVELOPERS.md): campaigns
//! of the invented Cobble Lane design simulated by numerical integration of the rate law (the
//! simulator's own ODE system, independent of the fitter's closed form), every plate analysed by
//! the library as `platekin batch` does, pooled by variant, and the pooled Km's 95% interval checked
//! against the simulation's truth. With 60 campaigns a count of 52 or more is what an honest 95%
//! interval gives nearly always (binomial mean 57, SD 1.7); the seeds are fixed, so the counts are
//! reproducible and a regression shows as a drop.

use platekin::config::InitialRateEstimator;
use platekin::simulate::pooled_study::{pooled_coverage_study, PooledStudy};

const CAMPAIGNS: usize = 60;

#[test]
fn the_pooled_km_interval_clustered_by_plate_covers_the_truth() {
    let rows = pooled_coverage_study(&PooledStudy {
        campaigns: CAMPAIGNS,
        plates: 10,
        reads: 60,
        first_seed: 100,
        estimator: InitialRateEstimator::Integrated,
        independent_plates: false,
    })
    .expect("the study runs");
    assert_eq!(rows.len(), 2, "one row per variant");
    let mut clustered = 0;
    let mut model_based = 0;
    for r in &rows {
        eprintln!(
            "{}: clustered {}/{} model-based {}/{} Km bias {:+.3}% RMSE {:.3}% kcat CV {:.2}% (true {:.2}%) plate kcat {}/{}",
            r.variant,
            r.covered,
            r.campaigns,
            r.covered_model_based,
            r.campaigns,
            100.0 * r.km_relative_bias,
            100.0 * r.km_relative_rmse,
            100.0 * r.kcat_cv_mean,
            100.0 * r.true_cv_mean,
            r.plate_kcat_covered,
            r.plate_kcat_intervals
        );
        assert_eq!(r.campaigns, CAMPAIGNS, "{}: every campaign pooled", r.variant);
        assert!(
            r.covered >= 52,
            "{}: the clustered interval held the truth in {} of {}",
            r.variant,
            r.covered,
            r.campaigns
        );
        assert!(
            r.km_relative_bias.abs() < 0.005,
            "{}: Km bias {:+.3}%",
            r.variant,
            100.0 * r.km_relative_bias
        );
        // The between-plate CV of kcat finds the CV of the plates' true activities.
        assert!(
            (r.kcat_cv_mean / r.true_cv_mean - 1.0).abs() < 0.1,
            "{}: CV {} against {}",
            r.variant,
            r.kcat_cv_mean,
            r.true_cv_mean
        );
        // The clustered interval is the wider: the plates' scatter exceeds what the wells' own
        // residuals claim.
        assert!(r.relative_width > r.relative_width_model_based, "{r:?}");
        // Per-plate kcat intervals carry the plate's shared background and Km's uncertainty:
        // without them they held the truth 87-91% of the time in the full study.
        let plate_coverage = r.plate_kcat_covered as f64 / r.plate_kcat_intervals as f64;
        assert!(
            (0.92..=0.99).contains(&plate_coverage),
            "{}: per-plate kcat intervals held the truth in {} of {}",
            r.variant,
            r.plate_kcat_covered,
            r.plate_kcat_intervals
        );
        // The SEs match the errors' size (to within the sampling error of 60 campaigns' SD).
        let ratio = r.km_relative_se_mean / r.km_relative_sd;
        assert!((0.8..1.25).contains(&ratio), "{}: Km SE / SD {ratio}", r.variant);
        clustered += r.covered;
        model_based += r.covered_model_based;
    }
    assert!(
        clustered > model_based,
        "clustered {clustered} against model-based {model_based}"
    );
}

/// The between-plate CV's interval under its own assumption (plates independent, activity normal
/// around 1 with SD 4%): the campaigns' intervals hold the population's CV about 95% of the time
/// (60 campaigns: binomial mean 57, SD 1.7), and the CV with estimation error taken out is close
/// to it.
#[test]
fn the_between_plate_cv_interval_covers_the_population_cv() {
    let rows = pooled_coverage_study(&PooledStudy {
        campaigns: CAMPAIGNS,
        plates: 10,
        reads: 60,
        first_seed: 500,
        estimator: InitialRateEstimator::Integrated,
        independent_plates: true,
    })
    .expect("the study runs");
    for r in &rows {
        eprintln!(
            "{}: CV interval held the population CV {} of {}, CV {:.2}% (population {:.2}%)",
            r.variant,
            r.cv_covered,
            r.cv_intervals,
            100.0 * r.cv_corrected_mean,
            100.0 * r.population_cv
        );
        assert_eq!(r.cv_intervals, CAMPAIGNS);
        assert!(
            r.cv_covered >= 52,
            "{}: {} of {}",
            r.variant,
            r.cv_covered,
            r.cv_intervals
        );
        assert!(
            r.cv_covered < CAMPAIGNS,
            "{}: an interval that always holds the truth is too wide to tell",
            r.variant
        );
        assert!(
            (r.cv_corrected_mean / r.population_cv - 1.0).abs() < 0.1,
            "{}: CV {} against {}",
            r.variant,
            r.cv_corrected_mean,
            r.population_cv
        );
    }
}
