//! The coverage study of the cross-plate fits (`--pool-by`): many simulated campaigns of the
//! Cobble Lane design ([`super::campaign`]: the plates' true activities scattered by day and by
//! plate, 2% pipetting error in each well's substrate, the rate law integrated numerically by the
//! simulator, independently of the fitter's closed form), each plate analysed by the library as
//! `platekin batch` analyses it, then pooled by variant. Counts how often the pooled Km's 95%
//! interval (clustered by plate, and the model-based one beside it) holds the truth, with Km's
//! bias and RMSE, and how the between-plate CV of kcat compares with the CV of the plates' true
//! activities. It serves `examples/pooled_coverage.rs` (the full study) and `tests/pooled.rs`
//! (a small one in CI).

use std::collections::BTreeMap;

use super::campaign::{
    campaign_day, campaign_layout_csv, campaign_plates_seeded, DAY_ACTIVITY, PLATE_ACTIVITY_SD, VARIANT_KCAT,
    VARIANT_KM, WILD_TYPE_KCAT, WILD_TYPE_KM,
};
use super::simulate;
use super::study::analyse_plates_on_threads;
use super::writers::{wide_csv, WideCsvOptions};
use crate::campaign::{campaign_pooled_fits, digest, PlateDigest, PlateOutcome, PlateStatus};
use crate::config::{AnalysisSettings, FitSettings, InitialRateEstimator, ProgressMode, ProgressSettings};
use crate::files::sheet::read_text_cells;
use crate::import::{import_cells, ImportOptions};
use crate::layout::parse_layout;
use crate::pipeline::analyse_inputs;

/// The campaigns' extinction coefficient (M^-1 cm^-1) and pathlength (cm), as their `assay.toml`.
const EXTINCTION: f64 = 16_800.0;
const PATHLENGTH: f64 = 0.55;

/// What a study runs.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PooledStudy {
    /// Campaigns simulated.
    pub campaigns: usize,
    /// Plates per campaign.
    pub plates: usize,
    /// Reads per plate (every 10 s).
    pub reads: usize,
    /// Seed of the first campaign; campaign c uses `first_seed + c`.
    pub first_seed: u64,
    /// The initial-rate estimator of the plates' analysis.
    pub estimator: InitialRateEstimator,
    /// Plates independent of each other (each plate's activity drawn around 1 with SD
    /// [`PLATE_ACTIVITY_SD`], no day factor): the between-plate CV interval's own assumption. Else
    /// the Cobble Lane design, whose day factors shift a third of the plates each.
    pub independent_plates: bool,
}

/// One variant's figures over the study's campaigns.
#[derive(Debug, Clone, PartialEq)]
pub struct PooledCoverageRow {
    /// The variant.
    pub variant: String,
    /// Campaigns with a pooled Km and an interval.
    pub campaigns: usize,
    /// Of those, clustered (reported) intervals holding the true Km.
    pub covered: usize,
    /// Of those, model-based intervals holding the true Km.
    pub covered_model_based: usize,
    /// Mean relative error of the pooled Km.
    pub km_relative_bias: f64,
    /// Root-mean-square relative error of the pooled Km.
    pub km_relative_rmse: f64,
    /// Mean width of the clustered interval over the truth.
    pub relative_width: f64,
    /// Mean width of the model-based interval over the truth.
    pub relative_width_model_based: f64,
    /// Mean relative error of each plate's own Km (the single-plate fits), for comparison.
    pub plate_km_relative_bias: f64,
    /// Mean between-plate CV of kcat reported.
    pub kcat_cv_mean: f64,
    /// Mean CV of the plates' true activities (the CV the report should find).
    pub true_cv_mean: f64,
    /// Per-plate kcat intervals (model-based, from the pooled fit) holding the plate's true kcat.
    pub plate_kcat_covered: usize,
    /// Per-plate kcat intervals counted.
    pub plate_kcat_intervals: usize,
    /// SD of the pooled Km's relative errors over the campaigns (what its SE should match).
    pub km_relative_sd: f64,
    /// Mean of the clustered SE over the truth.
    pub km_relative_se_mean: f64,
    /// Root-mean-square relative error of the per-plate kcat (against each plate's truth).
    pub plate_kcat_relative_rmse: f64,
    /// Root-mean-square relative SE of the per-plate kcat.
    pub plate_kcat_relative_se_rms: f64,
    /// Root-mean-square of the part of that SE from the plates' shared blank and background.
    pub plate_kcat_relative_shared_se_rms: f64,
    /// The CV of the plates' activities in the simulated population (the design's: day factors
    /// and plate scatter, or the plate scatter alone for independent plates).
    pub population_cv: f64,
    /// Mean of the between-plate CV with estimation error taken out.
    pub cv_corrected_mean: f64,
    /// Campaigns whose CV interval holds the population CV.
    pub cv_covered: usize,
    /// Campaigns with a CV interval.
    pub cv_intervals: usize,
    /// Campaigns whose CV interval holds the CV of that campaign's own true activities.
    pub cv_covered_own_plates: usize,
}

/// One campaign's pooled figures for one variant.
#[derive(Debug, Clone, Copy)]
struct CampaignFigures {
    km: f64,
    clustered: [f64; 2],
    model_based: [f64; 2],
    plate_km_mean: f64,
    kcat_cv: f64,
    true_cv: f64,
    kcat_covered: usize,
    kcat_intervals: usize,
    km_se: f64,
    kcat_squared_errors: f64,
    kcat_squared_ses: f64,
    kcat_squared_shared: f64,
    cv_corrected: Option<f64>,
    cv_interval: Option<[f64; 2]>,
    population_cv: f64,
}

fn analysis_settings(estimator: InitialRateEstimator) -> AnalysisSettings {
    AnalysisSettings {
        extinction_per_molar_cm: Some(EXTINCTION),
        pathlength_cm: Some(PATHLENGTH),
        // The pooled fit takes the wells' initial rates; the progress curves add nothing to it.
        progress: ProgressSettings {
            mode: ProgressMode::Never,
            ..ProgressSettings::default()
        },
        ..AnalysisSettings::default()
    }
    .with_initial_rate(estimator)
}

/// Simulates and analyses plate `plate` of campaign `seed`: its digest and true activity.
fn analyse_campaign_plate(
    study: &PooledStudy,
    seed: u64,
    plate: usize,
) -> Result<(PlateDigest, f64), String> {
    let plates = campaign_plates_seeded(study.plates, study.reads, seed);
    let mut entry = plates.get(plate).ok_or("no such plate")?.clone();
    if study.independent_plates {
        // The plate's own factor only: its day's activity divided out of the truth and the rates.
        let day = DAY_ACTIVITY[campaign_day(plate, study.plates)];
        entry.activity /= day;
        for variant in &mut entry.spec.variants {
            variant.kcat_per_s /= day;
        }
    }
    let simulated = simulate(&entry.spec).map_err(|e| e.to_string())?;
    let data_csv = wide_csv(&simulated, &WideCsvOptions::default());
    let grid = read_text_cells(data_csv.as_bytes(), "campaign.csv").map_err(|e| e.to_string())?;
    let layout_grid =
        read_text_cells(campaign_layout_csv().as_bytes(), "layout.csv").map_err(|e| e.to_string())?;
    let data = import_cells(&grid, &ImportOptions::default()).map_err(|e| e.to_string())?;
    let layout = parse_layout(&layout_grid, data.plate).map_err(|e| e.to_string())?;
    let results = analyse_inputs(
        data,
        layout,
        &analysis_settings(study.estimator),
        &FitSettings {
            profile: false,
            ..FitSettings::default()
        },
        &mut |_, _| {},
    )
    .map_err(|e| e.to_string())?;
    Ok((digest(&results), entry.activity))
}

fn sample_cv(values: &[f64]) -> f64 {
    let n = values.len() as f64;
    let mean = values.iter().sum::<f64>() / n;
    let variance = values.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (n - 1.0);
    variance.sqrt() / mean
}

/// One simulated campaign as the library analysed it: each plate's outcome (ids `c{campaign}-p{plate}`)
/// and each plate's true activity relative to nominal.
#[derive(Debug, Clone)]
pub struct SimulatedCampaign {
    /// The plates, in run order.
    pub outcomes: Vec<PlateOutcome>,
    /// Each plate's true activity by plate id.
    pub activity: BTreeMap<String, f64>,
    /// The CV of plate activities in the population the campaign's plates are drawn from.
    pub population_cv: f64,
}

/// The CV of plate activities in the simulated population: a plate's activity is its day's factor
/// d times a factor around 1 with SD `sd` (normal), the days weighted by their share of the
/// plates, so the CV is `sqrt(E[d^2] (1 + sd^2) - E[d]^2) / E[d]`; for independent plates `sd`.
pub fn population_cv(plates: usize, independent: bool) -> f64 {
    if independent || plates == 0 {
        return PLATE_ACTIVITY_SD;
    }
    let days: Vec<f64> = (0..plates)
        .map(|index| DAY_ACTIVITY[campaign_day(index, plates)])
        .collect();
    let mean = days.iter().sum::<f64>() / plates as f64;
    let mean_square = days.iter().map(|d| d * d).sum::<f64>() / plates as f64;
    (mean_square * (1.0 + PLATE_ACTIVITY_SD * PLATE_ACTIVITY_SD) - mean * mean).sqrt() / mean
}

/// The study's campaigns, simulated and every plate analysed (in parallel over plates).
pub fn simulate_campaigns(study: &PooledStudy) -> Result<Vec<SimulatedCampaign>, String> {
    if study.plates < 2 || study.campaigns == 0 {
        return Err("a study needs campaigns of at least two plates".to_string());
    }
    let total = study.campaigns * study.plates;
    let analysed = analyse_plates_on_threads(total, |index| {
        let index = index as usize;
        let seed = study.first_seed + (index / study.plates) as u64;
        analyse_campaign_plate(study, seed, index % study.plates)
    });
    analysed
        .chunks(study.plates)
        .enumerate()
        .map(|(campaign, chunk)| {
            let mut outcomes = Vec::new();
            let mut activity = BTreeMap::new();
            for (plate, result) in chunk.iter().enumerate() {
                let (digest, plate_activity) = result.clone()?;
                let id = format!("c{campaign}-p{plate:02}");
                activity.insert(id.clone(), plate_activity);
                outcomes.push(PlateOutcome {
                    plate: id,
                    factors: BTreeMap::new(),
                    data_sha256: None,
                    layout_sha256: None,
                    status: PlateStatus::Ok {
                        digest,
                        reused: false,
                    },
                });
            }
            Ok(SimulatedCampaign {
                outcomes,
                activity,
                population_cv: population_cv(study.plates, study.independent_plates),
            })
        })
        .collect()
}

/// The true (kcat at full activity, Km) of each simulated variant.
pub fn variant_truths() -> BTreeMap<&'static str, (f64, f64)> {
    BTreeMap::from([
        ("GlmA-wt", (WILD_TYPE_KCAT, WILD_TYPE_KM)),
        ("GlmA-K41R", (VARIANT_KCAT, VARIANT_KM)),
    ])
}

/// Runs the study and tabulates, per variant, coverage, bias and the CV's agreement.
pub fn pooled_coverage_study(study: &PooledStudy) -> Result<Vec<PooledCoverageRow>, String> {
    Ok(tabulate_campaigns(&simulate_campaigns(study)?))
}

/// Tabulates, per variant, coverage, bias and the CV's agreement over analysed campaigns.
pub fn tabulate_campaigns(campaigns: &[SimulatedCampaign]) -> Vec<PooledCoverageRow> {
    let truths = variant_truths();
    let mut figures: BTreeMap<String, Vec<CampaignFigures>> = BTreeMap::new();
    for SimulatedCampaign {
        outcomes,
        activity,
        population_cv,
    } in campaigns
    {
        let (fits, _) = campaign_pooled_fits(outcomes, &["variant".to_string()]);
        for fit in fits {
            let Some(variant) = fit.key.first().map(|(_, value)| value.clone()) else {
                continue;
            };
            let Some(&(kcat, km_truth)) = truths.get(variant.as_str()) else {
                continue;
            };
            let (Some(km), Some(model_based), Some(kcat_cv)) = (&fit.km, &fit.km_model_based, fit.scale_cv)
            else {
                continue;
            };
            let (Some(clustered), Some(model_interval)) = (km.ci95, model_based.ci95) else {
                continue;
            };
            let activities: Vec<f64> = fit
                .plates
                .iter()
                .filter_map(|p| activity.get(&p.plate).copied())
                .collect();
            let mut kcat_covered = 0;
            let mut kcat_intervals = 0;
            let (mut kcat_squared_errors, mut kcat_squared_ses, mut kcat_squared_shared) = (0.0, 0.0, 0.0);
            for plate in &fit.plates {
                if let (Some([low, high]), Some(se), Some(a)) =
                    (plate.scale.ci95, plate.scale.se, activity.get(&plate.plate))
                {
                    let truth = kcat * a;
                    kcat_intervals += 1;
                    kcat_covered += usize::from(low <= truth && truth <= high);
                    kcat_squared_errors += (plate.scale.value / truth - 1.0).powi(2);
                    kcat_squared_ses += (se / truth).powi(2);
                    kcat_squared_shared += (plate.shared_se.unwrap_or(0.0) / truth).powi(2);
                }
            }
            let plate_kms: Vec<f64> = outcomes
                .iter()
                .filter_map(PlateOutcome::digest)
                .flat_map(|d| d.constants.iter())
                .filter(|c| {
                    c.group.iter().any(|(name, value)| {
                        name == "variant"
                            && matches!(value, crate::campaign::digest::KeyValue::Text(t) if *t == variant)
                    }) && !c.group.iter().any(|(name, value)| {
                        name == "control"
                            && !matches!(value, crate::campaign::digest::KeyValue::Text(t) if t.is_empty())
                    })
                })
                .filter_map(|c| c.km.as_ref().map(|k| k.value))
                .collect();
            let plate_km_mean = plate_kms.iter().sum::<f64>() / plate_kms.len().max(1) as f64;
            figures.entry(variant).or_default().push(CampaignFigures {
                km: km.value / km_truth,
                clustered: [clustered[0] / km_truth, clustered[1] / km_truth],
                model_based: [model_interval[0] / km_truth, model_interval[1] / km_truth],
                plate_km_mean: plate_km_mean / km_truth,
                kcat_cv,
                true_cv: sample_cv(&activities),
                kcat_covered,
                kcat_intervals,
                km_se: km.se.unwrap_or(f64::NAN) / km_truth,
                kcat_squared_errors,
                kcat_squared_ses,
                kcat_squared_shared,
                cv_corrected: fit.scale_cv_corrected,
                cv_interval: fit.scale_cv_ci95,
                population_cv: *population_cv,
            });
        }
    }
    figures
        .into_iter()
        .map(|(variant, rows)| {
            let n = rows.len() as f64;
            let mean = |f: &dyn Fn(&CampaignFigures) -> f64| rows.iter().map(f).sum::<f64>() / n;
            let holds = |[low, high]: [f64; 2]| low <= 1.0 && 1.0 <= high;
            // Root mean square over every plate of every campaign.
            let plate_count = rows.iter().map(|r| r.kcat_intervals).sum::<usize>().max(1) as f64;
            let per_plate =
                |f: &dyn Fn(&CampaignFigures) -> f64| (rows.iter().map(f).sum::<f64>() / plate_count).sqrt();
            PooledCoverageRow {
                variant,
                campaigns: rows.len(),
                covered: rows.iter().filter(|r| holds(r.clustered)).count(),
                covered_model_based: rows.iter().filter(|r| holds(r.model_based)).count(),
                km_relative_bias: mean(&|r| r.km - 1.0),
                km_relative_rmse: mean(&|r| (r.km - 1.0).powi(2)).sqrt(),
                relative_width: mean(&|r| r.clustered[1] - r.clustered[0]),
                relative_width_model_based: mean(&|r| r.model_based[1] - r.model_based[0]),
                plate_km_relative_bias: mean(&|r| r.plate_km_mean - 1.0),
                kcat_cv_mean: mean(&|r| r.kcat_cv),
                true_cv_mean: mean(&|r| r.true_cv),
                plate_kcat_covered: rows.iter().map(|r| r.kcat_covered).sum(),
                plate_kcat_intervals: rows.iter().map(|r| r.kcat_intervals).sum(),
                km_relative_sd: (rows
                    .iter()
                    .map(|r| r.km)
                    .map(|k| (k - mean(&|r| r.km)).powi(2))
                    .sum::<f64>()
                    / (n - 1.0).max(1.0))
                .sqrt(),
                km_relative_se_mean: mean(&|r| r.km_se),
                plate_kcat_relative_rmse: per_plate(&|r| r.kcat_squared_errors),
                plate_kcat_relative_se_rms: per_plate(&|r| r.kcat_squared_ses),
                plate_kcat_relative_shared_se_rms: per_plate(&|r| r.kcat_squared_shared),
                population_cv: mean(&|r| r.population_cv),
                cv_corrected_mean: {
                    let values: Vec<f64> = rows.iter().filter_map(|r| r.cv_corrected).collect();
                    values.iter().sum::<f64>() / values.len().max(1) as f64
                },
                cv_covered: rows
                    .iter()
                    .filter(|r| {
                        r.cv_interval
                            .is_some_and(|[low, high]| low <= r.population_cv && r.population_cv <= high)
                    })
                    .count(),
                cv_intervals: rows.iter().filter(|r| r.cv_interval.is_some()).count(),
                cv_covered_own_plates: rows
                    .iter()
                    .filter(|r| {
                        r.cv_interval
                            .is_some_and(|[low, high]| low <= r.true_cv && r.true_cv <= high)
                    })
                    .count(),
            }
        })
        .collect()
}
