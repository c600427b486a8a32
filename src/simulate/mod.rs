//! A microplate simulator with known truth: continuous absorbance assays (Michaelis-Menten
//! progress curves read through Beer-Lambert, per-well offsets, seeded Gaussian noise and planted
//! defects), and writers for the input formats platekin reads, so that tests, benchmarks and the
//! invented demo runs start from plates whose answer is known.
//!
//! Signal model, per well and read time t (concentrations in uM, enzyme in nM, time in s):
//! - the reaction started `dead_time_s` before the export's time zero, so a read at export time t
//!   sees the reaction at `t + dead_time_s` since mixing;
//! - each well's true S0 is the layout's times `1 + cv z` (`substrate_pipetting_cv`, z standard
//!   normal): the layout states the intended amount, the well holds what was pipetted;
//! - sample: `Vmax = kcat [E]` (uM/s, with [E] converted from nM); product `P` integrated
//!   numerically from mixing ([`kinetics`]: Michaelis-Menten plus first-order spontaneous
//!   hydrolysis, a planted lag as a ramp of activity), independently of the fitter's closed form;
//! - no-enzyme: `P(t) = S0 (1 - exp(-k_spont t))` (first order, exact);
//! - blank (buffer only) and empty wells: no product;
//! - read species: product (signal rises) or substrate `S0 - P` (signal falls);
//! - absorbance: `A(t) = offset_well + background_extra + epsilon l c(t) + (drift + drift_well) t +
//!   noise`, with c in M (`c_uM 1e-6`), epsilon in M^-1 cm^-1 and l in cm (Beer-Lambert),
//!   `drift_well` drawn per well (`well_drift_sd_au_per_s`), noise `N(0, sd_well 10^(g A_clean))`
//!   (`noise_growth_per_au` = g: photometric noise grows with absorbance as less light reaches the
//!   detector) from a ChaCha8 generator seeded by the spec seed with one stream per well, and the
//!   result rounded to the reader's decimals.
//!
//! Assumptions: the Michaelis-Menten quasi-steady state ([E] much less than [S]), no product
//! inhibition, no enzyme inactivation, the substrate does not absorb at the read wavelength when
//! the product is read (and vice versa).
//!
//! References: Beer-Lambert law (common practice); Schnell and Mendoza 1997, J Theor Biol 187:207;
//! Goudar, Sonnad and Duggleby 1999, Biochim Biophys Acta 1429:377; Simpson's rule (common
//! practice).

pub mod campaign;
pub mod demo;
pub mod fluorescence;
pub mod kinetics;
pub mod pooled_study;
pub mod screen;
pub mod study;
pub mod writers;

use std::collections::BTreeMap;

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, Normal};

use crate::core::plate::{parse_well_selection, PlateFormat, WellId};
use kinetics::WellKinetics;

pub use demo::{demo_bench_spec, demo_files, demo_readme, demo_spec, large_plate_spec};
pub use writers::{
    grid_csv, layout_grid_csv, layout_tidy_csv, long_csv, truth_json, wide_csv, xlsx_bytes, GridCsvOptions,
    GridTimeLabel, SimulationWriteError, TimeStyle, WellColumns, WideCsvOptions,
};

/// The highest number of decimals a simulated reader may print; beyond this, rounding means nothing
/// for a double.
const MAX_READING_DECIMALS: u32 = 12;

/// What a well holds.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, serde::Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum WellRole {
    /// Enzyme and substrate.
    Sample,
    /// Buffer only.
    Blank,
    /// Substrate without enzyme (spontaneous hydrolysis control).
    NoEnzyme,
    /// Nothing: the reader sees plastic and air.
    Empty,
}

impl WellRole {
    /// The spelling used in layout files (`sample`, `blank`, `no-enzyme`, `empty`).
    pub fn label(self) -> &'static str {
        match self {
            Self::Sample => "sample",
            Self::Blank => "blank",
            Self::NoEnzyme => "no-enzyme",
            Self::Empty => "empty",
        }
    }
}

/// The contents of a well as the layout states them.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct WellCondition {
    /// What the well holds.
    pub role: WellRole,
    /// Initial substrate, uM (samples and no-enzyme controls).
    pub substrate_um: Option<f64>,
    /// Enzyme, nM (samples).
    pub enzyme_nm: Option<f64>,
    /// Inhibitor, uM (`None`: none added).
    pub inhibitor_um: Option<f64>,
    /// Enzyme variant (samples); `None` on controls so that they serve every variant.
    pub variant: Option<String>,
}

impl WellCondition {
    /// A sample well.
    pub fn sample(substrate_um: f64, enzyme_nm: f64, variant: &str) -> Self {
        Self {
            role: WellRole::Sample,
            substrate_um: Some(substrate_um),
            enzyme_nm: Some(enzyme_nm),
            inhibitor_um: None,
            variant: Some(variant.to_string()),
        }
    }

    /// The same well with an inhibitor added.
    pub fn with_inhibitor(self, inhibitor_um: f64) -> Self {
        Self {
            inhibitor_um: Some(inhibitor_um),
            ..self
        }
    }

    /// A no-enzyme control at a substrate concentration.
    pub fn no_enzyme(substrate_um: f64) -> Self {
        Self {
            role: WellRole::NoEnzyme,
            substrate_um: Some(substrate_um),
            enzyme_nm: None,
            inhibitor_um: None,
            variant: None,
        }
    }

    /// A buffer-only blank.
    pub fn blank() -> Self {
        Self {
            role: WellRole::Blank,
            substrate_um: None,
            enzyme_nm: None,
            inhibitor_um: None,
            variant: None,
        }
    }

    /// An empty well.
    pub fn empty() -> Self {
        Self {
            role: WellRole::Empty,
            substrate_um: None,
            enzyme_nm: None,
            inhibitor_um: None,
            variant: None,
        }
    }
}

/// One line of a layout: a well selection as written (`B3`, `B1:B3`, `B1 B3 B5`) and its contents.
#[derive(Debug, Clone, PartialEq)]
pub struct LayoutGroup {
    /// The selection text, parsed by [`parse_well_selection`] and written unchanged to the tidy
    /// layout.
    pub selection: String,
    /// What every well of the selection holds.
    pub condition: WellCondition,
}

/// True kinetic constants of one enzyme variant.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct VariantKinetics {
    /// Variant name as the layout writes it.
    pub name: String,
    /// Turnover number, 1/s.
    pub kcat_per_s: f64,
    /// Michaelis constant, uM.
    pub km_um: f64,
    /// Competitive inhibition constant of the plate's inhibitor, uM (`None`: not inhibited).
    pub ki_um: Option<f64>,
}

/// Which species the absorbance follows.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum Readout {
    /// The product absorbs: the signal rises.
    Product,
    /// The substrate absorbs: the signal falls.
    Substrate,
}

/// A realistic fault planted in one well, recorded in the truth.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
#[serde(tag = "kind", rename_all = "kebab-case")]
pub enum PlantedDefect {
    /// The reader printed an over-range marker instead of a number at these reads (zero-based
    /// read indices), e.g. a bubble crossing the light path.
    OverRange {
        /// Zero-based indices of the affected reads.
        read_indices: Vec<usize>,
        /// The text written in place of the number (e.g. `OVER`).
        marker: String,
    },
    /// Activity ramps up as `1 - exp(-t/tau)` (slow mixing or hysteretic activation).
    Lag {
        /// Ramp time constant, s.
        tau_s: f64,
    },
    /// The well's noise standard deviation is this many times the plate's.
    ExtraNoise {
        /// Multiplier of the plate noise SD.
        factor: f64,
    },
    /// A constant extra absorbance (turbidity, a precipitate), large enough to push readings above
    /// the reader's reliable range.
    HighBackground {
        /// Extra absorbance added to every read, AU.
        extra_absorbance: f64,
    },
}

impl PlantedDefect {
    /// The kind's name as the truth file spells it.
    pub fn kind(&self) -> &'static str {
        match self {
            Self::OverRange { .. } => "over-range",
            Self::Lag { .. } => "lag",
            Self::ExtraNoise { .. } => "extra-noise",
            Self::HighBackground { .. } => "high-background",
        }
    }
}

/// Everything needed to simulate one plate. Build it in code (see [`demo_spec`]); [`simulate`]
/// checks it and names the bad part.
#[derive(Debug, Clone, PartialEq)]
pub struct SimulationSpec {
    /// Short run name, written as the `Run` metadata line.
    pub run_name: String,
    /// Key-value lines written above the wide CSV header and on the XLSX `Notes` sheet.
    pub metadata: Vec<(String, String)>,
    /// Plate format.
    pub format: PlateFormat,
    /// Read times, s, strictly increasing, first at or after 0.
    pub read_times_s: Vec<f64>,
    /// Read wavelength, nm (metadata only).
    pub wavelength_nm: f64,
    /// Incubator set point, C.
    pub temperature_set_point_c: f64,
    /// Standard deviation of the reported temperature around the set point, C.
    pub temperature_jitter_sd_c: f64,
    /// Extinction coefficient of the read species, M^-1 cm^-1.
    pub extinction_coefficient_per_m_per_cm: f64,
    /// Optical pathlength (liquid height), cm.
    pub pathlength_cm: f64,
    /// Which species is read.
    pub readout: Readout,
    /// True constants of each variant named in the layout.
    pub variants: Vec<VariantKinetics>,
    /// The plate layout; each well at most once.
    pub layout: Vec<LayoutGroup>,
    /// Planted defects, at most one per well, each on a well of the layout.
    pub defects: Vec<(WellId, PlantedDefect)>,
    /// Range of the per-well absorbance offset for wells with liquid, AU (uniform).
    pub liquid_offset_range_au: (f64, f64),
    /// Range of the per-well offset for empty wells (plastic and air), AU (uniform).
    pub empty_offset_range_au: (f64, f64),
    /// Gaussian noise standard deviation of one reading, AU.
    pub noise_sd_au: f64,
    /// Baseline drift shared by all wells (lamp, warming), AU/s; 0 for none.
    pub baseline_drift_au_per_s: f64,
    /// First-order rate constant of the uncatalysed hydrolysis of the substrate, 1/s.
    pub spontaneous_hydrolysis_per_s: f64,
    /// Time from mixing to the export's time zero, s.
    pub dead_time_s: f64,
    /// Relative SD of each well's true S0 around the layout's value (pipetting), 0 for none.
    pub substrate_pipetting_cv: f64,
    /// Growth of the read noise with absorbance: SD `noise_sd_au 10^(g A)` at absorbance A; 0 for
    /// constant noise.
    pub noise_growth_per_au: f64,
    /// SD of a per-well baseline drift (optics, evaporation), AU/s; 0 for none.
    pub well_drift_sd_au_per_s: f64,
    /// Decimals the simulated reader prints.
    pub reading_decimals: u32,
    /// Seed of the ChaCha8 generator; the same seed gives the same plate.
    pub seed: u64,
}

/// One simulated reading: a number, or the text the reader printed instead.
#[derive(Debug, Clone, PartialEq)]
pub enum SimulatedReading {
    /// Absorbance, AU, rounded to the reader's decimals.
    Number(f64),
    /// Text in place of a number (an over-range marker).
    Text(String),
}

impl SimulatedReading {
    /// The number, if the reading is one.
    pub fn as_number(&self) -> Option<f64> {
        match self {
            Self::Number(value) => Some(*value),
            Self::Text(_) => None,
        }
    }
}

/// The readings of one well, one per read time.
#[derive(Debug, Clone, PartialEq)]
pub struct SimulatedWell {
    /// The well.
    pub well: WellId,
    /// What it holds.
    pub condition: WellCondition,
    /// One reading per read time.
    pub readings: Vec<SimulatedReading>,
}

/// A simulated plate: readings, the layout that produced them and the truth.
#[derive(Debug, Clone, PartialEq)]
pub struct SimulatedPlate {
    /// Plate format.
    pub format: PlateFormat,
    /// Run name.
    pub run_name: String,
    /// Metadata lines.
    pub metadata: Vec<(String, String)>,
    /// Read times, s.
    pub read_times_s: Vec<f64>,
    /// Reported temperature at each read, C (rounded to 0.1).
    pub temperatures_c: Vec<f64>,
    /// Decimals of the readings.
    pub reading_decimals: u32,
    /// Every well of the layout in reading order (A1, A2, ..., B1, ...).
    pub wells: Vec<SimulatedWell>,
    /// The layout as given (for the layout writers).
    pub layout: Vec<LayoutGroup>,
    /// The known answer.
    pub truth: PlateTruth,
}

impl SimulatedPlate {
    /// The readings of a well, if the well is on the layout.
    pub fn readings_of(&self, well: WellId) -> Option<&[SimulatedReading]> {
        self.wells
            .binary_search_by(|simulated| simulated.well.cmp(&well))
            .ok()
            .map(|index| self.wells[index].readings.as_slice())
    }
}

/// The known answer of a simulated plate, written as the truth JSON.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct PlateTruth {
    /// Run name.
    pub run_name: String,
    /// A reminder that the data are simulated.
    pub note: String,
    /// Settings shared by all wells.
    pub settings: TruthSettings,
    /// True constants per variant.
    pub variants: Vec<VariantTruth>,
    /// One entry per well of the layout, reading order.
    pub wells: Vec<WellTruth>,
    /// Every planted defect, with what it does.
    pub planted_defects: Vec<DefectTruth>,
}

/// Plate-wide settings of the truth.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct TruthSettings {
    /// Plate format.
    pub plate_format: PlateFormat,
    /// Read wavelength, nm.
    pub wavelength_nm: f64,
    /// Extinction coefficient of the read species, M^-1 cm^-1.
    pub extinction_coefficient_per_m_per_cm: f64,
    /// Pathlength, cm.
    pub pathlength_cm: f64,
    /// Read species.
    pub readout: Readout,
    /// Read times, s.
    pub read_times_s: Vec<f64>,
    /// Temperature set point, C.
    pub temperature_set_point_c: f64,
    /// Plate noise SD, AU.
    pub noise_sd_au: f64,
    /// Baseline drift, AU/s.
    pub baseline_drift_au_per_s: f64,
    /// Spontaneous hydrolysis rate constant, 1/s.
    pub spontaneous_hydrolysis_per_s: f64,
    /// Time from mixing to the export's time zero, s.
    pub dead_time_s: f64,
    /// Relative SD of the wells' true S0 around the layout's (pipetting).
    pub substrate_pipetting_cv: f64,
    /// Growth of the read noise with absorbance (SD `noise_sd_au 10^(g A)`).
    pub noise_growth_per_au: f64,
    /// SD of the per-well baseline drift, AU/s.
    pub well_drift_sd_au_per_s: f64,
    /// Decimals of the readings.
    pub reading_decimals: u32,
    /// Generator seed.
    pub seed: u64,
    /// Unit of substrate concentrations.
    pub substrate_unit: String,
    /// Unit of enzyme concentrations.
    pub enzyme_unit: String,
    /// Unit of rates.
    pub rate_unit: String,
}

/// True constants of one variant.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct VariantTruth {
    /// Variant name.
    pub name: String,
    /// Turnover number, 1/s.
    pub kcat_per_s: f64,
    /// Michaelis constant, uM.
    pub km_um: f64,
    /// Specificity constant kcat/Km, 1/(uM s).
    pub kcat_over_km_per_um_per_s: f64,
    /// The enzyme concentrations this variant was used at on the plate, nM, ascending.
    pub enzyme_nm_used: Vec<f64>,
}

/// The truth of one well.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct WellTruth {
    /// The well.
    pub well: WellId,
    /// What it holds.
    pub role: WellRole,
    /// Initial substrate as the layout states it, uM.
    pub substrate_um: Option<f64>,
    /// Initial substrate the well truly held (after pipetting error), uM.
    pub substrate_true_um: Option<f64>,
    /// Enzyme, nM.
    pub enzyme_nm: Option<f64>,
    /// Variant.
    pub variant: Option<String>,
    /// The well's own baseline drift, AU/s (besides the plate's).
    pub drift_au_per_s: f64,
    /// Absorbance offset (before any planted background), AU.
    pub offset_au: f64,
    /// Noise SD of this well, AU.
    pub noise_sd_au: f64,
    /// `kcat [E]`, uM/s (samples).
    pub vmax_um_per_s: Option<f64>,
    /// Enzymatic initial rate `Vmax S0/(Km + S0)`, uM/s (samples; for a lag well the rate once
    /// the ramp is over).
    pub enzymatic_initial_rate_um_per_s: Option<f64>,
    /// Spontaneous initial rate `k_spont S0`, uM/s (wells with substrate).
    pub spontaneous_initial_rate_um_per_s: Option<f64>,
    /// Initial slope of the noiseless absorbance, AU/s: `+-epsilon l (v_enz + v_spont) 1e-6 +
    /// drift` (sign by readout; post-ramp for a lag well).
    pub initial_slope_au_per_s: f64,
    /// Fraction of S0 converted at the last read (wells with substrate).
    pub fraction_converted_at_last_read: Option<f64>,
    /// The last read time at which at most 10% of S0 is converted (the usual initial-rate limit,
    /// common practice); `None` if even the first read is past it or the well has no substrate.
    pub last_read_within_10_percent_s: Option<f64>,
    /// The planted defect, if any.
    pub defect: Option<PlantedDefect>,
}

/// One planted defect with a plain description.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct DefectTruth {
    /// The well.
    pub well: WellId,
    /// The defect.
    pub defect: PlantedDefect,
    /// What it looks like in the data.
    pub description: String,
    /// Read times the defect shows at, s (all reads for lasting defects).
    pub affected_read_times_s: Vec<f64>,
}

/// A spec that cannot be simulated; each variant names the part at fault.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum SimulationError {
    /// A plate-wide setting is out of range.
    #[error("setting '{setting}' is {value}: {requirement}")]
    BadSetting {
        /// Setting name.
        setting: &'static str,
        /// Its value.
        value: String,
        /// What it must be.
        requirement: &'static str,
    },
    /// The read times are empty, not finite, negative or not strictly increasing.
    #[error("read times: {problem}")]
    BadReadTimes {
        /// What is wrong.
        problem: String,
    },
    /// A variant's constants are out of range or its name repeats.
    #[error("variant '{variant}': {problem}")]
    BadVariant {
        /// Variant name.
        variant: String,
        /// What is wrong.
        problem: String,
    },
    /// A layout selection does not parse.
    #[error("layout line {line} ('{selection}'): {message}")]
    BadSelection {
        /// One-based index of the layout group.
        line: usize,
        /// The selection text.
        selection: String,
        /// The parser's message.
        message: String,
    },
    /// A layout well lies outside the plate.
    #[error("layout line {line}: well {well} is not on a {format}-well plate")]
    WellOffPlate {
        /// One-based index of the layout group.
        line: usize,
        /// The well.
        well: WellId,
        /// The plate format.
        format: PlateFormat,
    },
    /// A well appears in two layout groups.
    #[error("well {well} is on layout lines {first_line} and {second_line}")]
    WellInTwoGroups {
        /// The well.
        well: WellId,
        /// One-based index of its first group.
        first_line: usize,
        /// One-based index of the repeating group.
        second_line: usize,
    },
    /// A layout condition does not fit its role (missing or negative concentration, unknown
    /// variant).
    #[error("layout line {line} ('{selection}'): {problem}")]
    BadCondition {
        /// One-based index of the layout group.
        line: usize,
        /// The selection text.
        selection: String,
        /// What is wrong.
        problem: String,
    },
    /// The numerical integration of a well's rate law failed.
    #[error("well {well}: the rate law's integration failed: {message}")]
    Integration {
        /// The well.
        well: WellId,
        /// The integrator's reason.
        message: String,
    },
    /// A defect is on a well outside the layout, repeats a well, or has bad parameters.
    #[error("defect at well {well}: {problem}")]
    BadDefect {
        /// The well.
        well: WellId,
        /// What is wrong.
        problem: String,
    },
}

/// Simulates the plate described by `spec`.
///
/// Deterministic: the same spec (and so the same seed) gives identical readings. Each well draws
/// its offset and noise from its own ChaCha8 stream, so adding or removing a well leaves the
/// others unchanged.
pub fn simulate(spec: &SimulationSpec) -> Result<SimulatedPlate, SimulationError> {
    check_settings(spec)?;
    let variants = check_variants(spec)?;
    let conditions = expand_layout(spec, &variants)?;
    let defects = check_defects(spec, &conditions)?;
    let rounding_scale = 10f64.powi(spec.reading_decimals as i32);
    let round_reading = |value: f64| (value * rounding_scale).round() / rounding_scale;

    let mut wells = Vec::with_capacity(conditions.len());
    let mut well_truths = Vec::with_capacity(conditions.len());
    for (&well, condition) in &conditions {
        let defect = defects.get(&well).copied();
        let kinetics = condition
            .variant
            .as_ref()
            .and_then(|name| variants.get(name.as_str()).copied());
        let mut rng = well_generator(spec.seed, well);
        let offset_range = match condition.role {
            WellRole::Empty => spec.empty_offset_range_au,
            _ => spec.liquid_offset_range_au,
        };
        let offset_au = rng.random_range(offset_range.0..=offset_range.1);
        let standard_normal = Normal::new(0.0, 1.0).map_err(|_| SimulationError::BadSetting {
            setting: "substrate_pipetting_cv",
            value: spec.substrate_pipetting_cv.to_string(),
            requirement: "must be finite and at least 0",
        })?;
        // The pipetting factor and the well's drift are drawn for every well, so that a setting
        // of 0 leaves the noise stream where it would be otherwise.
        let pipetting_factor =
            (1.0 + spec.substrate_pipetting_cv * standard_normal.sample(&mut rng)).max(0.05);
        let drift_au_per_s = spec.well_drift_sd_au_per_s * standard_normal.sample(&mut rng);
        let noise_factor = match defect {
            Some(PlantedDefect::ExtraNoise { factor }) => *factor,
            _ => 1.0,
        };
        let noise_sd_au = spec.noise_sd_au * noise_factor;
        let background_extra = match defect {
            Some(PlantedDefect::HighBackground { extra_absorbance }) => *extra_absorbance,
            _ => 0.0,
        };
        let lag_tau_s = match defect {
            Some(PlantedDefect::Lag { tau_s }) => *tau_s,
            _ => 0.0,
        };
        let curve = well_kinetics(
            condition,
            kinetics,
            lag_tau_s,
            spec.spontaneous_hydrolysis_per_s,
            pipetting_factor,
        );
        let since_mixing: Vec<f64> = spec.read_times_s.iter().map(|t| t + spec.dead_time_s).collect();
        let products_um = curve
            .product_at(&since_mixing)
            .map_err(|message| SimulationError::Integration { well, message })?;
        let absorbance_per_um = spec.extinction_coefficient_per_m_per_cm * spec.pathlength_cm * 1e-6;
        let noise = Normal::new(0.0, noise_sd_au).map_err(|_| SimulationError::BadSetting {
            setting: "noise_sd_au",
            value: noise_sd_au.to_string(),
            requirement: "must be finite and at least 0",
        })?;

        let mut readings = Vec::with_capacity(spec.read_times_s.len());
        for (read_index, (&time_s, &product_um)) in spec.read_times_s.iter().zip(&products_um).enumerate() {
            let read_species_um = match spec.readout {
                Readout::Product => product_um,
                Readout::Substrate => curve.substrate_initial_um - product_um,
            };
            let clean = offset_au
                + background_extra
                + absorbance_per_um * read_species_um
                + (spec.baseline_drift_au_per_s + drift_au_per_s) * time_s;
            // Draw the noise even where a marker replaces the number, so that a planted marker
            // leaves the well's other readings as they would be without it.
            let growth = 10f64.powf(spec.noise_growth_per_au * clean.max(0.0));
            let noisy = clean + growth * noise.sample(&mut rng);
            let reading = match defect {
                Some(PlantedDefect::OverRange { read_indices, marker })
                    if read_indices.contains(&read_index) =>
                {
                    SimulatedReading::Text(marker.clone())
                }
                _ => SimulatedReading::Number(round_reading(noisy)),
            };
            readings.push(reading);
        }

        well_truths.push(well_truth(
            spec,
            well,
            condition,
            &curve,
            &products_um,
            (offset_au, drift_au_per_s),
            noise_sd_au,
            defect,
        ));
        wells.push(SimulatedWell {
            well,
            condition: condition.clone(),
            readings,
        });
    }

    let temperatures_c = simulate_temperatures(spec)?;
    let truth = PlateTruth {
        run_name: spec.run_name.clone(),
        note: "Simulated data with known truth; every name and value is invented".to_string(),
        settings: TruthSettings {
            plate_format: spec.format,
            wavelength_nm: spec.wavelength_nm,
            extinction_coefficient_per_m_per_cm: spec.extinction_coefficient_per_m_per_cm,
            pathlength_cm: spec.pathlength_cm,
            readout: spec.readout,
            read_times_s: spec.read_times_s.clone(),
            temperature_set_point_c: spec.temperature_set_point_c,
            noise_sd_au: spec.noise_sd_au,
            baseline_drift_au_per_s: spec.baseline_drift_au_per_s,
            spontaneous_hydrolysis_per_s: spec.spontaneous_hydrolysis_per_s,
            dead_time_s: spec.dead_time_s,
            substrate_pipetting_cv: spec.substrate_pipetting_cv,
            noise_growth_per_au: spec.noise_growth_per_au,
            well_drift_sd_au_per_s: spec.well_drift_sd_au_per_s,
            reading_decimals: spec.reading_decimals,
            seed: spec.seed,
            substrate_unit: "uM".to_string(),
            enzyme_unit: "nM".to_string(),
            rate_unit: "uM/s".to_string(),
        },
        variants: variant_truths(spec, &conditions),
        wells: well_truths,
        planted_defects: defect_truths(spec, &defects),
    };
    Ok(SimulatedPlate {
        format: spec.format,
        run_name: spec.run_name.clone(),
        metadata: spec.metadata.clone(),
        read_times_s: spec.read_times_s.clone(),
        temperatures_c,
        reading_decimals: spec.reading_decimals,
        wells,
        layout: spec.layout.clone(),
        truth,
    })
}

/// The generator of one well: the spec seed, on a stream of its own (stream 0 is the
/// temperature's).
fn well_generator(seed: u64, well: WellId) -> ChaCha8Rng {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    rng.set_stream(1 + u64::from(well.row) * 64 + u64::from(well.column));
    rng
}

/// Reported temperatures: set point plus Gaussian jitter, rounded to 0.1 C as readers print them.
fn simulate_temperatures(spec: &SimulationSpec) -> Result<Vec<f64>, SimulationError> {
    let mut rng = ChaCha8Rng::seed_from_u64(spec.seed);
    rng.set_stream(0);
    let jitter = Normal::new(0.0, spec.temperature_jitter_sd_c).map_err(|_| SimulationError::BadSetting {
        setting: "temperature_jitter_sd_c",
        value: spec.temperature_jitter_sd_c.to_string(),
        requirement: "must be finite and at least 0",
    })?;
    Ok(spec
        .read_times_s
        .iter()
        .map(|_| ((spec.temperature_set_point_c + jitter.sample(&mut rng)) * 10.0).round() / 10.0)
        .collect())
}

/// The chemistry of one well: what it holds (with its true S0) and its enzyme's constants.
fn well_kinetics(
    condition: &WellCondition,
    kinetics: Option<&VariantKinetics>,
    lag_tau_s: f64,
    spontaneous_per_s: f64,
    pipetting_factor: f64,
) -> WellKinetics {
    let substrate_initial_um = match condition.role {
        WellRole::Sample | WellRole::NoEnzyme => condition.substrate_um.unwrap_or(0.0) * pipetting_factor,
        WellRole::Blank | WellRole::Empty => 0.0,
    };
    let (km_um, vmax_um_per_s) = match (condition.role, kinetics) {
        // kcat [1/s] times [E] in nM converted to uM gives Vmax in uM/s; a competitive inhibitor
        // raises the apparent Km to Km (1 + I/Ki).
        (WellRole::Sample, Some(kinetics)) => (
            kinetics.km_um
                * match (kinetics.ki_um, condition.inhibitor_um) {
                    (Some(ki), Some(inhibitor)) => 1.0 + inhibitor / ki,
                    _ => 1.0,
                },
            kinetics.kcat_per_s * condition.enzyme_nm.unwrap_or(0.0) * 1e-3,
        ),
        // Without enzyme the Michaelis-Menten part is idle; any positive Km will do.
        _ => (1.0, 0.0),
    };
    WellKinetics {
        substrate_initial_um,
        km_um,
        vmax_um_per_s,
        lag_tau_s,
        spontaneous_per_s,
    }
}

/// Builds the truth of one well.
#[allow(clippy::too_many_arguments)]
fn well_truth(
    spec: &SimulationSpec,
    well: WellId,
    condition: &WellCondition,
    curve: &WellKinetics,
    products_um: &[f64],
    (offset_au, drift_au_per_s): (f64, f64),
    noise_sd_au: f64,
    defect: Option<&PlantedDefect>,
) -> WellTruth {
    let s0 = curve.substrate_initial_um;
    let has_substrate = matches!(condition.role, WellRole::Sample | WellRole::NoEnzyme);
    let is_sample = condition.role == WellRole::Sample;
    let enzymatic_rate = curve.vmax_um_per_s * s0 / (curve.km_um + s0);
    let spontaneous_rate = curve.spontaneous_per_s * s0;
    let total_rate = if is_sample {
        enzymatic_rate + spontaneous_rate
    } else {
        spontaneous_rate
    };
    let sign = match spec.readout {
        Readout::Product => 1.0,
        Readout::Substrate => -1.0,
    };
    let drift = spec.baseline_drift_au_per_s + drift_au_per_s;
    let initial_slope_au_per_s = if has_substrate {
        sign * spec.extinction_coefficient_per_m_per_cm * spec.pathlength_cm * 1e-6 * total_rate + drift
    } else {
        drift
    };
    let fractions: Vec<f64> = if has_substrate && s0 > 0.0 {
        products_um.iter().map(|product| product / s0).collect()
    } else {
        Vec::new()
    };
    let last_read_within_10_percent_s = fractions
        .iter()
        .zip(&spec.read_times_s)
        .take_while(|(fraction, _)| **fraction <= 0.10)
        .last()
        .map(|(_, &time_s)| time_s);
    WellTruth {
        well,
        role: condition.role,
        substrate_um: condition.substrate_um,
        substrate_true_um: has_substrate.then_some(s0),
        enzyme_nm: condition.enzyme_nm,
        variant: condition.variant.clone(),
        drift_au_per_s,
        offset_au,
        noise_sd_au,
        vmax_um_per_s: is_sample.then_some(curve.vmax_um_per_s),
        enzymatic_initial_rate_um_per_s: is_sample.then_some(enzymatic_rate),
        spontaneous_initial_rate_um_per_s: has_substrate.then_some(spontaneous_rate),
        initial_slope_au_per_s,
        fraction_converted_at_last_read: fractions.last().copied(),
        last_read_within_10_percent_s,
        defect: defect.cloned(),
    }
}

/// Per-variant truth with the enzyme concentrations used.
fn variant_truths(spec: &SimulationSpec, conditions: &BTreeMap<WellId, WellCondition>) -> Vec<VariantTruth> {
    spec.variants
        .iter()
        .map(|variant| {
            let mut enzyme_nm_used: Vec<f64> = conditions
                .values()
                .filter(|condition| condition.variant.as_deref() == Some(variant.name.as_str()))
                .filter_map(|condition| condition.enzyme_nm)
                .collect();
            enzyme_nm_used.sort_by(f64::total_cmp);
            enzyme_nm_used.dedup();
            VariantTruth {
                name: variant.name.clone(),
                kcat_per_s: variant.kcat_per_s,
                km_um: variant.km_um,
                kcat_over_km_per_um_per_s: variant.kcat_per_s / variant.km_um,
                enzyme_nm_used,
            }
        })
        .collect()
}

/// The defects with a description of what each does to the data.
fn defect_truths(spec: &SimulationSpec, defects: &BTreeMap<WellId, &PlantedDefect>) -> Vec<DefectTruth> {
    defects
        .iter()
        .map(|(&well, &defect)| {
            let (description, affected_read_times_s) = match defect {
                PlantedDefect::OverRange { read_indices, marker } => (
                    format!(
                        "the reader printed '{marker}' instead of a number at {} read(s); the other reads are clean",
                        read_indices.len()
                    ),
                    read_indices.iter().filter_map(|&index| spec.read_times_s.get(index).copied()).collect(),
                ),
                PlantedDefect::Lag { tau_s } => (
                    format!(
                        "activity ramps as 1 - exp(-t/{tau_s} s): the slope rises over the first {:.0} s",
                        3.0 * tau_s
                    ),
                    spec.read_times_s.clone(),
                ),
                PlantedDefect::ExtraNoise { factor } => (
                    format!("noise SD {factor} times the plate's ({} AU)", factor * spec.noise_sd_au),
                    spec.read_times_s.clone(),
                ),
                PlantedDefect::HighBackground { extra_absorbance } => (
                    format!(
                        "extra absorbance {extra_absorbance} AU (turbidity): readings above 3.0 AU are outside a reader's reliable range"
                    ),
                    spec.read_times_s.clone(),
                ),
            };
            DefectTruth { well, defect: defect.clone(), description, affected_read_times_s }
        })
        .collect()
}

fn check_settings(spec: &SimulationSpec) -> Result<(), SimulationError> {
    let positive = [
        (
            "extinction_coefficient_per_m_per_cm",
            spec.extinction_coefficient_per_m_per_cm,
        ),
        ("pathlength_cm", spec.pathlength_cm),
    ];
    for (setting, value) in positive {
        if !(value.is_finite() && value > 0.0) {
            return Err(SimulationError::BadSetting {
                setting,
                value: value.to_string(),
                requirement: "must be finite and above 0",
            });
        }
    }
    let non_negative = [
        ("noise_sd_au", spec.noise_sd_au),
        ("temperature_jitter_sd_c", spec.temperature_jitter_sd_c),
        ("spontaneous_hydrolysis_per_s", spec.spontaneous_hydrolysis_per_s),
        ("dead_time_s", spec.dead_time_s),
        ("substrate_pipetting_cv", spec.substrate_pipetting_cv),
        ("noise_growth_per_au", spec.noise_growth_per_au),
        ("well_drift_sd_au_per_s", spec.well_drift_sd_au_per_s),
    ];
    for (setting, value) in non_negative {
        if !(value.is_finite() && value >= 0.0) {
            return Err(SimulationError::BadSetting {
                setting,
                value: value.to_string(),
                requirement: "must be finite and at least 0",
            });
        }
    }
    let finite = [
        ("baseline_drift_au_per_s", spec.baseline_drift_au_per_s),
        ("temperature_set_point_c", spec.temperature_set_point_c),
        ("wavelength_nm", spec.wavelength_nm),
    ];
    for (setting, value) in finite {
        if !value.is_finite() {
            return Err(SimulationError::BadSetting {
                setting,
                value: value.to_string(),
                requirement: "must be finite",
            });
        }
    }
    for (setting, (low, high)) in [
        ("liquid_offset_range_au", spec.liquid_offset_range_au),
        ("empty_offset_range_au", spec.empty_offset_range_au),
    ] {
        if !(low.is_finite() && high.is_finite() && low <= high) {
            return Err(SimulationError::BadSetting {
                setting,
                value: format!("({low}, {high})"),
                requirement: "must be finite with low <= high",
            });
        }
    }
    if spec.reading_decimals > MAX_READING_DECIMALS {
        return Err(SimulationError::BadSetting {
            setting: "reading_decimals",
            value: spec.reading_decimals.to_string(),
            requirement: "must be at most 12",
        });
    }
    let times = &spec.read_times_s;
    if times.is_empty() {
        return Err(SimulationError::BadReadTimes {
            problem: "no read time given".to_string(),
        });
    }
    if let Some((index, time)) = times
        .iter()
        .enumerate()
        .find(|(_, time)| !(time.is_finite() && **time >= 0.0))
    {
        return Err(SimulationError::BadReadTimes {
            problem: format!("read {} is {time} s (must be finite and at least 0)", index + 1),
        });
    }
    if let Some(index) = times.windows(2).position(|pair| pair[1] <= pair[0]) {
        return Err(SimulationError::BadReadTimes {
            problem: format!(
                "read {} ({} s) does not come after read {}",
                index + 2,
                times[index + 1],
                index + 1
            ),
        });
    }
    Ok(())
}

fn check_variants(spec: &SimulationSpec) -> Result<BTreeMap<&str, &VariantKinetics>, SimulationError> {
    let mut variants = BTreeMap::new();
    for variant in &spec.variants {
        let bad = |problem: String| SimulationError::BadVariant {
            variant: variant.name.clone(),
            problem,
        };
        if !(variant.km_um.is_finite() && variant.km_um > 0.0) {
            return Err(bad(format!("Km {} uM must be finite and above 0", variant.km_um)));
        }
        if !(variant.kcat_per_s.is_finite() && variant.kcat_per_s >= 0.0) {
            return Err(bad(format!(
                "kcat {} /s must be finite and at least 0",
                variant.kcat_per_s
            )));
        }
        if variants.insert(variant.name.as_str(), variant).is_some() {
            return Err(bad("the name is given twice".to_string()));
        }
    }
    Ok(variants)
}

fn expand_layout(
    spec: &SimulationSpec,
    variants: &BTreeMap<&str, &VariantKinetics>,
) -> Result<BTreeMap<WellId, WellCondition>, SimulationError> {
    let mut conditions = BTreeMap::new();
    let mut line_of_well: BTreeMap<WellId, usize> = BTreeMap::new();
    for (index, group) in spec.layout.iter().enumerate() {
        let line = index + 1;
        check_condition(line, group, variants)?;
        let wells =
            parse_well_selection(&group.selection).map_err(|message| SimulationError::BadSelection {
                line,
                selection: group.selection.clone(),
                message,
            })?;
        for well in wells {
            if !spec.format.contains(well) {
                return Err(SimulationError::WellOffPlate {
                    line,
                    well,
                    format: spec.format,
                });
            }
            if let Some(&first_line) = line_of_well.get(&well) {
                return Err(SimulationError::WellInTwoGroups {
                    well,
                    first_line,
                    second_line: line,
                });
            }
            line_of_well.insert(well, line);
            conditions.insert(well, group.condition.clone());
        }
    }
    Ok(conditions)
}

fn check_condition(
    line: usize,
    group: &LayoutGroup,
    variants: &BTreeMap<&str, &VariantKinetics>,
) -> Result<(), SimulationError> {
    let bad = |problem: String| SimulationError::BadCondition {
        line,
        selection: group.selection.clone(),
        problem,
    };
    let condition = &group.condition;
    for (name, value) in [
        ("substrate", condition.substrate_um),
        ("enzyme", condition.enzyme_nm),
    ] {
        if let Some(value) = value {
            if !(value.is_finite() && value >= 0.0) {
                return Err(bad(format!(
                    "{name} concentration {value} must be finite and at least 0"
                )));
            }
        }
    }
    match condition.role {
        WellRole::Sample => {
            if condition.substrate_um.is_none() || condition.enzyme_nm.is_none() {
                return Err(bad(
                    "a sample needs a substrate and an enzyme concentration".to_string()
                ));
            }
            match condition.variant.as_deref() {
                Some(name) if variants.contains_key(name) => {}
                Some(name) => {
                    return Err(bad(format!(
                        "variant '{name}' has no kinetic constants in the spec"
                    )))
                }
                None => return Err(bad("a sample needs a variant".to_string())),
            }
        }
        WellRole::NoEnzyme => {
            if condition.substrate_um.is_none() {
                return Err(bad(
                    "a no-enzyme control needs a substrate concentration".to_string()
                ));
            }
        }
        WellRole::Blank | WellRole::Empty => {}
    }
    Ok(())
}

fn check_defects<'spec>(
    spec: &'spec SimulationSpec,
    conditions: &BTreeMap<WellId, WellCondition>,
) -> Result<BTreeMap<WellId, &'spec PlantedDefect>, SimulationError> {
    let mut defects = BTreeMap::new();
    for (well, defect) in &spec.defects {
        let bad = |problem: String| SimulationError::BadDefect { well: *well, problem };
        if !conditions.contains_key(well) {
            return Err(bad("the well is not on the layout".to_string()));
        }
        match defect {
            PlantedDefect::OverRange { read_indices, marker } => {
                if let Some(index) = read_indices
                    .iter()
                    .find(|&&index| index >= spec.read_times_s.len())
                {
                    return Err(bad(format!("read index {index} is past the last read")));
                }
                if marker.trim().is_empty() || marker.trim().parse::<f64>().is_ok() {
                    return Err(bad(format!("marker '{marker}' must be non-numeric text")));
                }
            }
            PlantedDefect::Lag { tau_s } if !(tau_s.is_finite() && *tau_s > 0.0) => {
                return Err(bad(format!(
                    "lag time constant {tau_s} s must be finite and above 0"
                )));
            }
            PlantedDefect::ExtraNoise { factor } if !(factor.is_finite() && *factor >= 0.0) => {
                return Err(bad(format!(
                    "noise factor {factor} must be finite and at least 0"
                )));
            }
            PlantedDefect::HighBackground { extra_absorbance } if !extra_absorbance.is_finite() => {
                return Err(bad(format!("extra absorbance {extra_absorbance} must be finite")));
            }
            _ => {}
        }
        if defects.insert(*well, defect).is_some() {
            return Err(bad("the well has two defects".to_string()));
        }
    }
    Ok(defects)
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    fn small_spec() -> SimulationSpec {
        SimulationSpec {
            run_name: "test".to_string(),
            metadata: vec![],
            format: PlateFormat::Wells96,
            read_times_s: (0..11).map(|read| f64::from(read) * 60.0).collect(),
            wavelength_nm: 405.0,
            temperature_set_point_c: 30.0,
            temperature_jitter_sd_c: 0.05,
            extinction_coefficient_per_m_per_cm: 10_000.0,
            pathlength_cm: 0.5,
            readout: Readout::Product,
            variants: vec![VariantKinetics {
                name: "X".to_string(),
                kcat_per_s: 10.0,
                km_um: 50.0,
                ki_um: None,
            }],
            layout: vec![
                LayoutGroup {
                    selection: "A1:A2".to_string(),
                    condition: WellCondition::sample(20.0, 10.0, "X"),
                },
                LayoutGroup {
                    selection: "B1".to_string(),
                    condition: WellCondition::no_enzyme(20.0),
                },
                LayoutGroup {
                    selection: "C1 C3".to_string(),
                    condition: WellCondition::blank(),
                },
            ],
            defects: vec![],
            liquid_offset_range_au: (0.04, 0.06),
            empty_offset_range_au: (0.035, 0.045),
            noise_sd_au: 0.0,
            baseline_drift_au_per_s: 0.0,
            spontaneous_hydrolysis_per_s: 1e-5,
            dead_time_s: 0.0,
            substrate_pipetting_cv: 0.0,
            noise_growth_per_au: 0.0,
            well_drift_sd_au_per_s: 0.0,
            reading_decimals: 12,
            seed: 7,
        }
    }

    /// The simulator integrates the rate law numerically; the fitter's closed form (an independent
    /// implementation, checked against mpmath in `fit::integrated`) must agree with it.
    #[test]
    fn noiseless_sample_follows_beer_lambert_of_the_integrated_rate_law() {
        let mut spec = small_spec();
        spec.spontaneous_hydrolysis_per_s = 0.0;
        spec.dead_time_s = 25.0;
        let plate = simulate(&spec).unwrap();
        let truth = &plate.truth.wells[0];
        let readings = plate.readings_of(WellId::new(0, 0)).unwrap();
        let vmax = 10.0 * 10.0 * 1e-3;
        for (reading, &time) in readings.iter().zip(&spec.read_times_s) {
            // The reaction is 25 s older than the export's clock says.
            let product = 20.0 - crate::fit::integrated::substrate_remaining(20.0, 50.0, vmax, time + 25.0);
            let expected = truth.offset_au + 10_000.0 * 0.5 * product * 1e-6;
            assert_relative_eq!(reading.as_number().unwrap(), expected, max_relative = 1e-9);
        }
    }

    #[test]
    fn pipetting_error_moves_the_true_substrate_and_the_truth_records_it() {
        let plain = simulate(&small_spec()).unwrap();
        let a1 = &plain.truth.wells[0];
        assert_eq!(a1.substrate_true_um, Some(20.0));
        let mut spec = small_spec();
        spec.substrate_pipetting_cv = 0.03;
        let pipetted = simulate(&spec).unwrap();
        let a1 = &pipetted.truth.wells[0];
        let a2 = &pipetted.truth.wells[1];
        assert_eq!(a1.substrate_um, Some(20.0));
        let (s1, s2) = (a1.substrate_true_um.unwrap(), a2.substrate_true_um.unwrap());
        assert!(s1 != 20.0 && s2 != 20.0 && s1 != s2, "{s1} {s2}");
        assert!((s1 / 20.0 - 1.0).abs() < 0.15 && (s2 / 20.0 - 1.0).abs() < 0.15);
    }

    #[test]
    fn no_enzyme_and_blank_wells() {
        let plate = simulate(&small_spec()).unwrap();
        let no_enzyme = &plate.truth.wells[2];
        assert_eq!(no_enzyme.role, WellRole::NoEnzyme);
        let readings = plate.readings_of(WellId::new(1, 0)).unwrap();
        let last = readings.last().unwrap().as_number().unwrap();
        let expected = no_enzyme.offset_au + 10_000.0 * 0.5 * 20.0 * -(-1e-5f64 * 600.0).exp_m1() * 1e-6;
        assert_relative_eq!(last, expected, max_relative = 1e-10);
        for well in [WellId::new(2, 0), WellId::new(2, 2)] {
            let readings = plate.readings_of(well).unwrap();
            let first = readings[0].as_number().unwrap();
            assert!(readings.iter().all(|reading| reading.as_number() == Some(first)));
        }
        assert!(plate.readings_of(WellId::new(2, 1)).is_none());
    }

    #[test]
    fn spontaneous_hydrolysis_adds_to_sample_product() {
        let with = simulate(&small_spec()).unwrap();
        let mut spec = small_spec();
        spec.spontaneous_hydrolysis_per_s = 0.0;
        let without = simulate(&spec).unwrap();
        let extra = with.wells[0].readings[10].as_number().unwrap()
            - without.wells[0].readings[10].as_number().unwrap();
        // At most k S0 t scaled by epsilon l; less because the enzyme depletes S (most of it is
        // gone by 600 s here) and the two reactions compete for what is left.
        let upper = 1e-5 * 20.0 * 600.0 * 10_000.0 * 0.5 * 1e-6;
        assert!(
            extra > 0.3 * upper && extra < upper,
            "extra {extra} upper {upper}"
        );
    }

    #[test]
    fn substrate_readout_falls() {
        let mut spec = small_spec();
        spec.readout = Readout::Substrate;
        let plate = simulate(&spec).unwrap();
        let readings = plate.readings_of(WellId::new(0, 0)).unwrap();
        let first = readings[0].as_number().unwrap();
        let last = readings[10].as_number().unwrap();
        assert!(last < first);
        assert!(plate.truth.wells[0].initial_slope_au_per_s < 0.0);
        assert_relative_eq!(
            first - plate.truth.wells[0].offset_au,
            10_000.0 * 0.5 * 20.0e-6,
            max_relative = 1e-10
        );
    }

    #[test]
    fn lag_well_starts_slow_then_catches_the_plain_slope() {
        let mut spec = small_spec();
        spec.spontaneous_hydrolysis_per_s = 0.0;
        spec.defects = vec![(WellId::new(0, 1), PlantedDefect::Lag { tau_s: 60.0 })];
        let plate = simulate(&spec).unwrap();
        let plain = plate.readings_of(WellId::new(0, 0)).unwrap();
        let lagged = plate.readings_of(WellId::new(0, 1)).unwrap();
        let slope = |readings: &[SimulatedReading], from: usize| {
            readings[from + 1].as_number().unwrap() - readings[from].as_number().unwrap()
        };
        assert!(slope(lagged, 0) < 0.7 * slope(plain, 0));
        // Late on, the lagged well runs tau behind; its slope then matches the plain curve's slope
        // at an earlier time, so it is slightly higher than the plain well's (less depleted).
        assert!(slope(lagged, 8) >= slope(plain, 8));
    }

    #[test]
    fn same_seed_same_plate_other_seed_other_noise() {
        let mut spec = small_spec();
        spec.noise_sd_au = 0.002;
        spec.reading_decimals = 4;
        let first = simulate(&spec).unwrap();
        let second = simulate(&spec).unwrap();
        assert_eq!(first, second);
        spec.seed += 1;
        let third = simulate(&spec).unwrap();
        assert_ne!(first.wells, third.wells);
    }

    #[test]
    fn removing_a_well_leaves_the_others_unchanged() {
        let mut spec = small_spec();
        spec.noise_sd_au = 0.002;
        let full = simulate(&spec).unwrap();
        spec.layout.remove(1);
        let fewer = simulate(&spec).unwrap();
        assert_eq!(
            full.readings_of(WellId::new(0, 0)),
            fewer.readings_of(WellId::new(0, 0))
        );
        assert_eq!(
            full.readings_of(WellId::new(2, 2)),
            fewer.readings_of(WellId::new(2, 2))
        );
    }

    #[test]
    fn readings_are_rounded_to_the_reader_decimals() {
        let mut spec = small_spec();
        spec.noise_sd_au = 0.002;
        spec.reading_decimals = 4;
        let plate = simulate(&spec).unwrap();
        for well in &plate.wells {
            for reading in &well.readings {
                let value = reading.as_number().unwrap();
                assert!((value * 1e4 - (value * 1e4).round()).abs() < 1e-6, "{value}");
            }
        }
    }

    #[test]
    fn bad_specs_name_the_part_at_fault() {
        let mut spec = small_spec();
        spec.layout.push(LayoutGroup {
            selection: "A2:A3".to_string(),
            condition: WellCondition::blank(),
        });
        assert_eq!(
            simulate(&spec).unwrap_err(),
            SimulationError::WellInTwoGroups {
                well: WellId::new(0, 1),
                first_line: 1,
                second_line: 4
            }
        );

        let mut spec = small_spec();
        spec.layout.push(LayoutGroup {
            selection: "I1".to_string(),
            condition: WellCondition::blank(),
        });
        assert!(matches!(
            simulate(&spec).unwrap_err(),
            SimulationError::WellOffPlate { line: 4, .. }
        ));

        let mut spec = small_spec();
        spec.layout[0].condition.variant = Some("Y".to_string());
        let error = simulate(&spec).unwrap_err();
        assert!(error.to_string().contains("variant 'Y'"), "{error}");

        let mut spec = small_spec();
        spec.read_times_s = vec![0.0, 30.0, 30.0];
        assert!(simulate(&spec).unwrap_err().to_string().contains("read 3"));

        let mut spec = small_spec();
        spec.defects = vec![(WellId::new(7, 11), PlantedDefect::ExtraNoise { factor: 10.0 })];
        assert!(matches!(
            simulate(&spec).unwrap_err(),
            SimulationError::BadDefect { .. }
        ));

        let mut spec = small_spec();
        spec.defects = vec![(
            WellId::new(0, 0),
            PlantedDefect::OverRange {
                read_indices: vec![11],
                marker: "OVER".to_string(),
            },
        )];
        assert!(simulate(&spec)
            .unwrap_err()
            .to_string()
            .contains("past the last read"));

        let mut spec = small_spec();
        spec.variants[0].km_um = 0.0;
        assert!(matches!(
            simulate(&spec).unwrap_err(),
            SimulationError::BadVariant { .. }
        ));

        let mut spec = small_spec();
        spec.layout[1].selection = "B1 Q".to_string();
        assert!(matches!(
            simulate(&spec).unwrap_err(),
            SimulationError::BadSelection { line: 2, .. }
        ));
    }
}
