//! The coverage study: many simulated plates whose truth is known (the simulator integrates the
//! rate law numerically, independently of the fitter's closed form), each put through the whole
//! analysis, counting how often each reported 95% interval holds the truth, with the estimates'
//! bias and root-mean-square error. It serves `examples/coverage_study.rs` (the full study, a few
//! hundred plates per design) and `tests/coverage.rs` (a small study in CI).
//!
//! Designs (all invented):
//! * `clean`: two variants (kcat 12 /s, Km 80 uM at 5 nM; kcat 4 /s, Km 250 uM at 50 nM), eight
//!   [S] from 0.1 to 13 x Km in triplicate, reads every 20 s for 15 min, constant read noise
//!   0.002 AU; the lowest [S] convert about half their substrate over the read.
//! * `realistic`: the same with 30 s from mixing to the first read (given to the analysis as the
//!   dead time), 3% pipetting error in each well's S0, read noise growing with absorbance, a slow
//!   per-well baseline drift and spontaneous substrate turnover (with no-enzyme controls).
//! * `inhibition`: one variant (kcat 10 /s, Km 50 uM, 5 nM) with a competitive inhibitor (Ki
//!   5 uM): seven [S] from 10 to 640 uM by four [I] (0 to 10 uM) in duplicate, realistic errors,
//!   fitted with the competitive model.
//! * `dense`: the clean design read every 2 s for 15 min (451 reads), so that the progress-curve
//!   fit takes 250 of each well's reads, evenly spaced
//!   (`PROGRESS_READS_PER_WELL` in `progress::analysis`): its coverage checks the thinned fit.
//!
//! The well-level check ([`well_error_study`]) looks one step below the intervals: at each [S]
//! (and [I]) level it sets the scatter of the wells' integrated initial rates about the simulated
//! truth at the layout's S0 against the variance the fit gives them (their standard error squared
//! plus the replicates' extra variance). A ratio of 1 is a variance model that fits; the ratio's
//! shape over the levels says which error the model misses. The observed scatter also holds what
//! the wells of a plate share (blank, background law), which the fit carries as shared errors,
//! so the ratio runs above 1 where a shared error is large; the replicates' scatter about their
//! own plate's mean at the level (the within-plate SD) leaves those out.

use std::collections::BTreeMap;

use super::writers::{layout_tidy_csv, wide_csv, WideCsvOptions};
use super::{simulate, LayoutGroup, SimulationSpec, VariantKinetics, WellCondition};
use crate::config::{
    AnalysisSettings, FitSettings, InitialRateEstimator, ModelRequest, ProgressMode, ProgressSettings,
    RateModelKind,
};
use crate::core::cells::CellGrid;
use crate::core::plate::row_label;
use crate::files::sheet::read_text_cells;
use crate::groups::ParameterReport;
use crate::import::{import_cells, ImportOptions};
use crate::layout::parse_layout;
use crate::pipeline::{analyse_inputs, RunResults};

/// A study design.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub enum StudyDesign {
    /// Clean plates.
    Clean,
    /// Plates with what real runs have.
    Realistic,
    /// A competitive-inhibition [S] x [I] plate with realistic errors.
    Inhibition,
    /// The clean plate read every 2 s (more reads than a progress fit takes).
    DenseReads,
}

impl StudyDesign {
    /// The design's name.
    pub fn name(self) -> &'static str {
        match self {
            StudyDesign::Clean => "clean",
            StudyDesign::Realistic => "realistic",
            StudyDesign::Inhibition => "inhibition",
            StudyDesign::DenseReads => "dense",
        }
    }
}

/// What was analysed: an initial-rate estimator's fit, or the progress-curve fit (its reported,
/// well-clustered interval, or the read-level one beside it).
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub enum StudyAnalysis {
    /// The group fit on initial rates by an estimator.
    InitialRate(InitialRateEstimatorKey),
    /// The progress-curve fit's reported interval (clustered by well).
    ProgressCurve,
    /// The progress-curve fit's read-level (asymptotic) interval.
    ProgressCurveReadLevel,
    /// The progress-curve fit's profile interval of Km (calibrated by the clustered variance).
    ProgressCurveProfile,
}

/// An estimator as an ordered key.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub enum InitialRateEstimatorKey {
    /// `chord`.
    Chord,
    /// `tangent`.
    Tangent,
    /// `integrated`.
    Integrated,
}

impl InitialRateEstimatorKey {
    fn estimator(self) -> InitialRateEstimator {
        match self {
            InitialRateEstimatorKey::Chord => InitialRateEstimator::Chord,
            InitialRateEstimatorKey::Tangent => InitialRateEstimator::Tangent,
            InitialRateEstimatorKey::Integrated => InitialRateEstimator::Integrated,
        }
    }
}

impl StudyAnalysis {
    /// The analysis's name.
    pub fn name(self) -> &'static str {
        match self {
            StudyAnalysis::InitialRate(InitialRateEstimatorKey::Chord) => "initial rates (chord)",
            StudyAnalysis::InitialRate(InitialRateEstimatorKey::Tangent) => "initial rates (tangent)",
            StudyAnalysis::InitialRate(InitialRateEstimatorKey::Integrated) => "initial rates (integrated)",
            StudyAnalysis::ProgressCurve => "progress curves",
            StudyAnalysis::ProgressCurveReadLevel => "progress curves, read-level interval",
            StudyAnalysis::ProgressCurveProfile => "progress curves, profile interval",
        }
    }
}

/// One cell of the study's table.
#[derive(Debug, Clone, PartialEq)]
pub struct CoverageRow {
    /// The design.
    pub design: StudyDesign,
    /// The analysis.
    pub analysis: StudyAnalysis,
    /// The variant.
    pub variant: String,
    /// The parameter (`kcat`, `Km`, `kcat_over_Km`, `Ki`).
    pub parameter: String,
    /// Plates with an estimate and an interval.
    pub plates: usize,
    /// Of those, intervals holding the truth.
    pub covered: usize,
    /// Mean relative error of the estimate.
    pub relative_bias: f64,
    /// Root-mean-square relative error.
    pub relative_rmse: f64,
    /// Mean interval width over the truth.
    pub relative_width: f64,
}

/// The truth of one variant.
#[derive(Debug, Clone, PartialEq)]
struct Truth {
    name: &'static str,
    kcat: f64,
    km: f64,
    enzyme_nm: f64,
    ki: Option<f64>,
}

impl Truth {
    /// The variant as the simulator takes it.
    fn kinetics(&self) -> VariantKinetics {
        VariantKinetics {
            name: self.name.to_string(),
            kcat_per_s: self.kcat,
            km_um: self.km,
            ki_um: self.ki,
        }
    }
}

const CLEAN_VARIANTS: [Truth; 2] = [
    Truth {
        name: "fast",
        kcat: 12.0,
        km: 80.0,
        enzyme_nm: 5.0,
        ki: None,
    },
    Truth {
        name: "slow",
        kcat: 4.0,
        km: 250.0,
        enzyme_nm: 50.0,
        ki: None,
    },
];

const INHIBITED: Truth = Truth {
    name: "wt",
    kcat: 10.0,
    km: 50.0,
    enzyme_nm: 5.0,
    ki: Some(5.0),
};

/// Extinction coefficient x pathlength of the designs' product, M^-1 (16,800 M^-1 cm^-1 x 0.55 cm).
const EXTINCTION: f64 = 16_800.0;
const PATHLENGTH: f64 = 0.55;
/// The realistic designs' time from mixing to the first read, s.
const REALISTIC_DEAD_TIME_S: f64 = 30.0;

/// The plate of `design` with generator seed `seed`, and the truth of its variants.
fn design_spec(design: StudyDesign, seed: u64) -> (SimulationSpec, Vec<Truth>) {
    let mut layout = Vec::new();
    let variants: Vec<Truth> = match design {
        StudyDesign::Clean | StudyDesign::Realistic | StudyDesign::DenseReads => CLEAN_VARIANTS.to_vec(),
        StudyDesign::Inhibition => vec![INHIBITED],
    };
    match design {
        StudyDesign::Clean | StudyDesign::Realistic | StudyDesign::DenseReads => {
            // Eight [S] from 0.1 to 13 x Km, geometric; columns 1-3 and 4-6 the variants in
            // triplicate, 7 and 8 no-enzyme controls at each variant's levels, 9 blanks.
            for (index, variant) in variants.iter().enumerate() {
                for row in 0..8u16 {
                    let substrate = variant.km * 0.1 * 130f64.powf(f64::from(row) / 7.0);
                    let substrate = (substrate * 100.0).round() / 100.0;
                    let letter = row_label(row);
                    let first = 1 + 3 * index;
                    layout.push(LayoutGroup {
                        selection: format!("{letter}{first}:{letter}{}", first + 2),
                        condition: WellCondition::sample(substrate, variant.enzyme_nm, variant.name),
                    });
                    layout.push(LayoutGroup {
                        selection: format!("{letter}{}", 7 + index),
                        condition: WellCondition::no_enzyme(substrate),
                    });
                }
            }
            layout.push(LayoutGroup {
                selection: "A9:H9".to_string(),
                condition: WellCondition::blank(),
            });
        }
        StudyDesign::Inhibition => {
            let substrates = [10.0, 20.0, 40.0, 80.0, 160.0, 320.0, 640.0];
            let inhibitors = [0.0, 2.5, 5.0, 10.0];
            for (row, substrate) in substrates.iter().enumerate() {
                let letter = row_label(row as u16);
                for (level, inhibitor) in inhibitors.iter().enumerate() {
                    let first = 1 + 2 * level;
                    layout.push(LayoutGroup {
                        selection: format!("{letter}{first}:{letter}{}", first + 1),
                        condition: WellCondition::sample(*substrate, INHIBITED.enzyme_nm, INHIBITED.name)
                            .with_inhibitor(*inhibitor),
                    });
                }
                layout.push(LayoutGroup {
                    selection: format!("{letter}9"),
                    condition: WellCondition::no_enzyme(*substrate),
                });
            }
            layout.push(LayoutGroup {
                selection: "H1:H4".to_string(),
                condition: WellCondition::blank(),
            });
        }
    }
    let realistic = matches!(design, StudyDesign::Realistic | StudyDesign::Inhibition);
    let (reads, read_interval_s) = if design == StudyDesign::DenseReads {
        (451, 2.0)
    } else {
        (46, 20.0)
    };
    let spec = SimulationSpec {
        run_name: format!("coverage study, {} design, plate {seed}", design.name()),
        metadata: Vec::new(),
        format: crate::core::plate::PlateFormat::Wells96,
        read_times_s: (0..reads).map(|read| read_interval_s * f64::from(read)).collect(),
        wavelength_nm: 405.0,
        temperature_set_point_c: 30.0,
        temperature_jitter_sd_c: 0.0,
        extinction_coefficient_per_m_per_cm: EXTINCTION,
        pathlength_cm: PATHLENGTH,
        readout: super::Readout::Product,
        variants: variants.iter().map(Truth::kinetics).collect(),
        layout,
        defects: Vec::new(),
        liquid_offset_range_au: (0.04, 0.06),
        empty_offset_range_au: (0.035, 0.045),
        noise_sd_au: 0.002,
        baseline_drift_au_per_s: 0.0,
        spontaneous_hydrolysis_per_s: if realistic { 2e-6 } else { 0.0 },
        dead_time_s: if realistic { REALISTIC_DEAD_TIME_S } else { 0.0 },
        substrate_pipetting_cv: if realistic { 0.03 } else { 0.0 },
        noise_growth_per_au: if realistic { 0.3 } else { 0.0 },
        well_drift_sd_au_per_s: if realistic { 1e-6 } else { 0.0 },
        reading_decimals: 4,
        seed,
    };
    (spec, variants)
}

/// One analysed plate's intervals: (analysis, variant, parameter) to (estimate, interval).
type PlateIntervals = Vec<(StudyAnalysis, String, String, f64, Option<[f64; 2]>)>;

/// Estimates and intervals by (analysis, variant, parameter), over every plate.
type StudyCells = BTreeMap<(StudyAnalysis, String, String), Vec<(f64, Option<[f64; 2]>)>>;

fn analysis_settings(
    design: StudyDesign,
    estimator: InitialRateEstimator,
    progress: ProgressMode,
) -> AnalysisSettings {
    let mut settings = AnalysisSettings {
        extinction_per_molar_cm: Some(EXTINCTION),
        pathlength_cm: Some(PATHLENGTH),
        progress: ProgressSettings {
            mode: progress,
            ..ProgressSettings::default()
        },
        ..AnalysisSettings::default()
    }
    .with_initial_rate(estimator);
    if matches!(design, StudyDesign::Realistic | StudyDesign::Inhibition) {
        settings.rates.dead_time_s = REALISTIC_DEAD_TIME_S;
    }
    settings
}

/// A simulated plate as the files a user would give: the export's and the layout's cells.
fn simulated_cells(spec: &SimulationSpec) -> Result<(CellGrid, CellGrid), String> {
    let plate = simulate(spec).map_err(|error| error.to_string())?;
    let data_csv = wide_csv(&plate, &WideCsvOptions::default());
    let layout_csv = layout_tidy_csv(&plate);
    let grid = read_text_cells(data_csv.as_bytes(), "study.csv").map_err(|e| e.to_string())?;
    let layout_grid =
        read_text_cells(layout_csv.as_bytes(), "study-layout.csv").map_err(|e| e.to_string())?;
    Ok((grid, layout_grid))
}

/// How the study fits a design's groups.
fn study_fit_settings(design: StudyDesign) -> FitSettings {
    FitSettings {
        model: (design == StudyDesign::Inhibition).then_some(ModelRequest::Fixed(RateModelKind::Competitive)),
        // The reported ci95 is the covariance interval; the profile does not change it.
        profile: false,
        ..FitSettings::default()
    }
}

/// The whole analysis of a simulated plate's cells with one estimator.
fn analyse_simulated(
    grid: &CellGrid,
    layout_grid: &CellGrid,
    design: StudyDesign,
    estimator: InitialRateEstimator,
    progress: ProgressMode,
    fit_settings: &FitSettings,
) -> Result<RunResults, String> {
    let data = import_cells(grid, &ImportOptions::default()).map_err(|e| e.to_string())?;
    let layout = parse_layout(layout_grid, data.plate).map_err(|e| e.to_string())?;
    let settings = analysis_settings(design, estimator, progress);
    analyse_inputs(data, layout, &settings, fit_settings, &mut |_, _| {}).map_err(|e| e.to_string())
}

/// One simulated plate analysed with one estimator.
fn analyse_plate_results(
    design: StudyDesign,
    seed: u64,
    estimator: InitialRateEstimator,
    progress: ProgressMode,
) -> Result<RunResults, String> {
    let (spec, _) = design_spec(design, seed);
    let (grid, layout_grid) = simulated_cells(&spec)?;
    analyse_simulated(
        &grid,
        &layout_grid,
        design,
        estimator,
        progress,
        &study_fit_settings(design),
    )
}

fn analyse_plate(
    design: StudyDesign,
    seed: u64,
    estimators: &[InitialRateEstimatorKey],
) -> Result<PlateIntervals, String> {
    let (spec, truths) = design_spec(design, seed);
    let (grid, layout_grid) = simulated_cells(&spec)?;
    let fit_settings = study_fit_settings(design);
    let mut intervals = Vec::new();
    for (index, key) in estimators.iter().enumerate() {
        // The progress-curve fit is the same whatever the estimator: run it once.
        let progress = if index == 0 && design != StudyDesign::Inhibition {
            ProgressMode::Always
        } else {
            ProgressMode::Never
        };
        let results = analyse_simulated(
            &grid,
            &layout_grid,
            design,
            key.estimator(),
            progress,
            &fit_settings,
        )?;
        collect(
            &results,
            StudyAnalysis::InitialRate(*key),
            &truths,
            &mut intervals,
        );
    }
    Ok(intervals)
}

fn collect(results: &RunResults, analysis: StudyAnalysis, truths: &[Truth], intervals: &mut PlateIntervals) {
    let mut push =
        |analysis: StudyAnalysis, variant: &str, name: &str, parameter: Option<&ParameterReport>| {
            if let Some(p) = parameter {
                intervals.push((analysis, variant.to_string(), name.to_string(), p.value, p.ci95));
            }
        };
    for truth in truths {
        for fit in results
            .fits
            .iter()
            .filter(|f| f.group.text("variant") == Some(truth.name))
        {
            for name in ["kcat", "Km", "kcat_over_Km", "Ki"] {
                push(analysis, truth.name, name, fit.parameters.get(name));
            }
        }
        for group in results
            .progress
            .groups
            .iter()
            .filter(|g| g.analysed && g.group.text("variant") == Some(truth.name))
        {
            for name in ["kcat", "Km", "kcat_over_Km"] {
                let parameter = group.parameters.get(name);
                push(StudyAnalysis::ProgressCurve, truth.name, name, parameter);
                let read_level = parameter.and_then(|p| {
                    p.asymptotic.map(|(se, ci95)| ParameterReport {
                        se,
                        ci95,
                        ..p.clone()
                    })
                });
                push(
                    StudyAnalysis::ProgressCurveReadLevel,
                    truth.name,
                    name,
                    read_level.as_ref(),
                );
                // A profile open on a side holds no interval to count.
                let profile = parameter.and_then(|p| match p.ci95_profile {
                    Some([Some(low), Some(high)]) => Some(ParameterReport {
                        ci95: Some([low, high]),
                        ..p.clone()
                    }),
                    _ => None,
                });
                push(
                    StudyAnalysis::ProgressCurveProfile,
                    truth.name,
                    name,
                    profile.as_ref(),
                );
            }
        }
    }
}

fn true_value(truths: &[Truth], variant: &str, parameter: &str) -> Option<f64> {
    let truth = truths.iter().find(|t| t.name == variant)?;
    match parameter {
        "kcat" => Some(truth.kcat),
        "Km" => Some(truth.km),
        // 1/(M s): kcat / Km[uM] x 1e6.
        "kcat_over_Km" => Some(truth.kcat / truth.km * 1e6),
        "Ki" => truth.ki,
        _ => None,
    }
}

/// One [S] (and [I]) level of the well-level check.
#[derive(Debug, Clone, PartialEq)]
pub struct WellLevelRow {
    /// The design.
    pub design: StudyDesign,
    /// The variant.
    pub variant: String,
    /// [S] from the layout, uM.
    pub substrate: f64,
    /// [I] from the layout, uM (0 without inhibitor).
    pub inhibitor: f64,
    /// Wells over every plate.
    pub wells: usize,
    /// Mean relative error of the wells' initial rates against the truth at the layout's S0.
    pub relative_bias: f64,
    /// SD of the relative errors.
    pub observed_relative_sd: f64,
    /// SD of the relative errors about each plate's own mean at the level (the replicates'
    /// scatter): the wells' own errors without what a plate's wells share (blank, background law),
    /// which is what the fit's per-well variance should match. NaN without replicates.
    pub within_plate_relative_sd: f64,
    /// Root-mean-square of the variance the fit gives the wells, `sqrt(se^2 + tau^2)`, over the
    /// truth.
    pub model_relative_sd: f64,
}

impl WellLevelRow {
    /// Observed variance over the fit's: 1 where the variance model fits.
    pub fn variance_ratio(&self) -> f64 {
        (self.observed_relative_sd / self.model_relative_sd).powi(2)
    }

    /// The replicates' variance about their plate's mean over the fit's per-well variance.
    pub fn within_plate_variance_ratio(&self) -> f64 {
        (self.within_plate_relative_sd / self.model_relative_sd).powi(2)
    }
}

/// One well of the well-level check: its level, its rate's relative error against the truth and
/// the variance the fit gives it, over the truth squared.
struct WellError {
    variant: String,
    substrate: f64,
    inhibitor: f64,
    relative_error: f64,
    relative_model_variance: f64,
}

/// The true initial rate of a variant's well, uM/s, at the layout's `substrate` and `inhibitor`:
/// the simulator's own law for the well (`well_kinetics`), without pipetting error or
/// spontaneous turnover, so that what the check sees of those is error.
fn true_initial_rate(truth: &Truth, substrate: f64, inhibitor: f64) -> f64 {
    let condition = WellCondition::sample(substrate, truth.enzyme_nm, truth.name).with_inhibitor(inhibitor);
    super::well_kinetics(&condition, Some(&truth.kinetics()), 0.0, 0.0, 1.0).initial_rate()
}

/// A level of the well-level check: variant, [S], [I].
type LevelKey = (String, f64, f64);

/// A well of a level: its plate, relative error and relative model variance.
type LevelMember = (usize, f64, f64);

/// The well-level check (module docs) over `plates` plates of `design` with the `integrated`
/// estimator: one row per variant and level, in level order.
pub fn well_error_study(
    design: StudyDesign,
    plates: usize,
    first_seed: u64,
) -> Result<Vec<WellLevelRow>, String> {
    let (_, truths) = design_spec(design, first_seed);
    let outcomes: Vec<Vec<WellError>> = analyse_plates_on_threads(plates, |offset| {
        let results = analyse_plate_results(
            design,
            first_seed + offset,
            InitialRateEstimator::Integrated,
            ProgressMode::Never,
        )?;
        let mut wells = Vec::new();
        for fit in &results.fits {
            let Some(truth) = truths.iter().find(|t| fit.group.text("variant") == Some(t.name)) else {
                continue;
            };
            for (well, rate, se) in &fit.initial_rates {
                let Some(setup) = results.layout.wells.get(well) else {
                    continue;
                };
                let substrate = setup
                    .quantity(crate::layout::Quantity::Substrate)
                    .unwrap_or(f64::NAN);
                let inhibitor = setup.quantity(crate::layout::Quantity::Inhibitor).unwrap_or(0.0);
                let truth_rate = true_initial_rate(truth, substrate, inhibitor);
                // The variance the well's weight took beyond its SE: the group's extra variance at
                // the well's d rate / d ln S0 (0 where the fit had none).
                let sensitivity = fit
                    .substrate_sensitivities
                    .iter()
                    .find(|(fitted, _)| fitted == well)
                    .map_or(0.0, |(_, sensitivity)| *sensitivity);
                let extra = fit.extra_variance.map_or(0.0, |model| model.at(sensitivity));
                wells.push(WellError {
                    variant: truth.name.to_string(),
                    substrate,
                    inhibitor,
                    relative_error: rate / truth_rate - 1.0,
                    relative_model_variance: (se * se + extra) / (truth_rate * truth_rate),
                });
            }
        }
        Ok::<_, String>(wells)
    })
    .into_iter()
    .collect::<Result<_, _>>()?;
    // Wells by (variant, [S], [I]): (plate, relative error, relative model variance) each.
    let mut levels: Vec<(LevelKey, Vec<LevelMember>)> = Vec::new();
    for (plate, wells) in outcomes.into_iter().enumerate() {
        for well in wells {
            let key = (well.variant, well.substrate, well.inhibitor);
            let member = (plate, well.relative_error, well.relative_model_variance);
            match levels.iter_mut().find(|(k, _)| *k == key) {
                Some((_, members)) => members.push(member),
                None => levels.push((key, vec![member])),
            }
        }
    }
    levels.sort_by(|a, b| {
        (a.0 .0.as_str(), a.0 .2, a.0 .1)
            .partial_cmp(&(b.0 .0.as_str(), b.0 .2, b.0 .1))
            .unwrap_or(std::cmp::Ordering::Equal)
    });
    Ok(levels
        .into_iter()
        .filter(|(_, members)| members.len() >= 2)
        .map(|((variant, substrate, inhibitor), members)| {
            let n = members.len() as f64;
            let mean = members.iter().map(|(_, e, _)| e).sum::<f64>() / n;
            let observed =
                (members.iter().map(|(_, e, _)| (e - mean).powi(2)).sum::<f64>() / (n - 1.0)).sqrt();
            let model = (members.iter().map(|(_, _, v)| v).sum::<f64>() / n).sqrt();
            WellLevelRow {
                design,
                variant,
                substrate,
                inhibitor,
                wells: members.len(),
                relative_bias: mean,
                observed_relative_sd: observed,
                within_plate_relative_sd: within_plate_sd(&members),
                model_relative_sd: model,
            }
        })
        .collect())
}

/// The pooled SD of a level's wells about their own plate's mean (each plate's replicates), from
/// `(plate, relative error, _)`; NaN without replicates.
fn within_plate_sd(members: &[LevelMember]) -> f64 {
    let mut by_plate: BTreeMap<usize, Vec<f64>> = BTreeMap::new();
    for (plate, error, _) in members {
        by_plate.entry(*plate).or_default().push(*error);
    }
    let (mut squares, mut degrees_of_freedom) = (0.0, 0usize);
    for errors in by_plate.values().filter(|errors| errors.len() >= 2) {
        let mean = errors.iter().sum::<f64>() / errors.len() as f64;
        squares += errors.iter().map(|e| (e - mean).powi(2)).sum::<f64>();
        degrees_of_freedom += errors.len() - 1;
    }
    if degrees_of_freedom == 0 {
        return f64::NAN;
    }
    (squares / degrees_of_freedom as f64).sqrt()
}

/// Runs `analyse(0..plates)` on plain threads (one per core), results in plate order.
///
/// Not a rayon parallel iterator: the pipeline calls polars, whose own thread pool, entered from
/// a rayon worker, lets the waiting worker steal further plates onto the same stack, nesting
/// hundreds of plates deep until the stack overflows (seen at 400 plates). Plain threads wait
/// without stealing.
pub(super) fn analyse_plates_on_threads<T: Send>(plates: usize, analyse: impl Fn(u64) -> T + Sync) -> Vec<T> {
    let next_plate = std::sync::atomic::AtomicUsize::new(0);
    let workers = std::thread::available_parallelism()
        .map_or(1, |n| n.get())
        .min(plates.max(1));
    let mut done: Vec<(usize, T)> = std::thread::scope(|scope| {
        let handles: Vec<_> = (0..workers)
            .map(|_| {
                scope.spawn(|| {
                    let mut mine = Vec::new();
                    loop {
                        let index = next_plate.fetch_add(1, std::sync::atomic::Ordering::Relaxed);
                        if index >= plates {
                            return mine;
                        }
                        mine.push((index, analyse(index as u64)));
                    }
                })
            })
            .collect();
        handles
            .into_iter()
            .flat_map(|handle| {
                handle
                    .join()
                    .unwrap_or_else(|panic| std::panic::resume_unwind(panic))
            })
            .collect()
    });
    done.sort_by_key(|(index, _)| *index);
    done.into_iter().map(|(_, outcome)| outcome).collect()
}

/// Runs `plates` plates of `design` (seeds `first_seed..`), analysing each by `estimators` (the
/// first also with the progress-curve fit), and tabulates coverage, bias and RMSE.
pub fn coverage_study(
    design: StudyDesign,
    plates: usize,
    first_seed: u64,
    estimators: &[InitialRateEstimatorKey],
) -> Result<Vec<CoverageRow>, String> {
    let (_, truths) = design_spec(design, first_seed);
    let outcomes: Vec<PlateIntervals> = analyse_plates_on_threads(plates, |offset| {
        analyse_plate(design, first_seed + offset, estimators)
    })
    .into_iter()
    .collect::<Result<_, _>>()?;
    let mut cells = StudyCells::new();
    for outcome in outcomes {
        for (analysis, variant, parameter, value, interval) in outcome {
            cells
                .entry((analysis, variant, parameter))
                .or_default()
                .push((value, interval));
        }
    }
    let mut rows = Vec::new();
    for ((analysis, variant, parameter), values) in cells {
        let Some(truth) = true_value(&truths, &variant, &parameter) else {
            continue;
        };
        let with_interval: Vec<(f64, [f64; 2])> =
            values.iter().filter_map(|(v, i)| i.map(|i| (*v, i))).collect();
        let n = with_interval.len();
        if n == 0 {
            continue;
        }
        let covered = with_interval
            .iter()
            .filter(|(_, [lo, hi])| *lo <= truth && truth <= *hi)
            .count();
        let errors: Vec<f64> = with_interval.iter().map(|(v, _)| v / truth - 1.0).collect();
        let relative_bias = errors.iter().sum::<f64>() / n as f64;
        let relative_rmse = (errors.iter().map(|e| e * e).sum::<f64>() / n as f64).sqrt();
        let relative_width = with_interval
            .iter()
            .map(|(_, [lo, hi])| (hi - lo) / truth)
            .sum::<f64>()
            / n as f64;
        rows.push(CoverageRow {
            design,
            analysis,
            variant,
            parameter,
            plates: n,
            covered,
            relative_bias,
            relative_rmse,
            relative_width,
        });
    }
    Ok(rows)
}
