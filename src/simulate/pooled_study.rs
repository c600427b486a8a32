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
    campaign_layout_csv, campaign_plates_seeded, VARIANT_KCAT, VARIANT_KM, WILD_TYPE_KCAT, WILD_TYPE_KM,
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
}

fn analysis_settings(estimator: InitialRateEstimator) -> AnalysisSettings {
    AnalysisSettings {
        extinction_per_molar_cm: Some(EXTINCTION),
        pathlength_cm: Some(PATHLENGTH),
        initial_rate: estimator,
        // The pooled fit takes the wells' initial rates; the progress curves add nothing to it.
        progress: ProgressSettings {
            mode: ProgressMode::Never,
            ..ProgressSettings::default()
        },
        ..AnalysisSettings::default()
    }
}

/// Simulates and analyses plate `plate` of campaign `seed`: its digest and true activity.
fn analyse_campaign_plate(
    study: &PooledStudy,
    seed: u64,
    plate: usize,
) -> Result<(PlateDigest, f64), String> {
    let plates = campaign_plates_seeded(study.plates, study.reads, seed);
    let entry = plates.get(plate).ok_or("no such plate")?;
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

/// Runs the study and tabulates, per variant, coverage, bias and the CV's agreement.
pub fn pooled_coverage_study(study: &PooledStudy) -> Result<Vec<PooledCoverageRow>, String> {
    if study.plates < 2 || study.campaigns == 0 {
        return Err("a study needs campaigns of at least two plates".to_string());
    }
    let total = study.campaigns * study.plates;
    let analysed = analyse_plates_on_threads(total, |index| {
        let index = index as usize;
        let seed = study.first_seed + (index / study.plates) as u64;
        analyse_campaign_plate(study, seed, index % study.plates)
    });
    let truths: BTreeMap<&str, (f64, f64)> = BTreeMap::from([
        ("GlmA-wt", (WILD_TYPE_KCAT, WILD_TYPE_KM)),
        ("GlmA-K41R", (VARIANT_KCAT, VARIANT_KM)),
    ]);
    let mut figures: BTreeMap<String, Vec<CampaignFigures>> = BTreeMap::new();
    for (campaign, chunk) in analysed.chunks(study.plates).enumerate() {
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
        let (fits, _) = campaign_pooled_fits(&outcomes, &["variant".to_string()]);
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
            for plate in &fit.plates {
                if let (Some([low, high]), Some(a)) = (plate.scale.ci95, activity.get(&plate.plate)) {
                    kcat_intervals += 1;
                    kcat_covered += usize::from(low <= kcat * a && kcat * a <= high);
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
            });
        }
    }
    Ok(figures
        .into_iter()
        .map(|(variant, rows)| {
            let n = rows.len() as f64;
            let mean = |f: &dyn Fn(&CampaignFigures) -> f64| rows.iter().map(f).sum::<f64>() / n;
            let holds = |[low, high]: [f64; 2]| low <= 1.0 && 1.0 <= high;
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
            }
        })
        .collect())
}
