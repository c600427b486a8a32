//! A simulated fluorescence plate with product standards, for the calibration tests, the coverage
//! study and the demo. Everything is invented: the Hollin Moss lab, its aminopeptidase HmpA and
//! the fluorophore "mossamine" released from a quenched peptide.
//!
//! The kinetic wells come from the plate simulator ([`super::simulate`]: Michaelis-Menten progress
//! curves integrated numerically, per-well offsets, Gaussian read noise), read with a linear
//! response of [`RFU_PER_UM`] (the simulator's "epsilon l" set to RFU per M over 1 cm). Standard
//! wells hold known mossamine concentrations in duplicate: a buffer well's simulated reads (its
//! offset and read noise) plus the standard's signal with a pipetting error of
//! [`STANDARD_PIPETTING_CV`]. Every reading then passes through a slight inner-filter bend: the
//! fluorophore absorbs its own excitation light with absorbance `A = a c` across the well, so the
//! signal is multiplied by `(1 - 10^-A) / (A ln 10)` (the primary inner-filter factor for a
//! uniformly absorbing sample; common practice, e.g. Lakowicz, Principles of Fluorescence
//! Spectroscopy, 3rd ed. 2006, section 2.10), which bends the top of the standard curve by a few
//! percent.

use super::{
    simulate, LayoutGroup, Readout, SimulatedPlate, SimulatedReading, SimulationError, SimulationSpec,
    VariantKinetics, WellCondition,
};
use crate::core::plate::{row_label, PlateFormat, WellId};

use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, Normal};

/// The fluorophore's response, RFU per uM.
pub const RFU_PER_UM: f64 = 900.0;
/// The fluorophore's absorbance at the excitation wavelength across the well, per uM (about 7% bend
/// at the top standard, 16 uM; under 1% below 2 uM, where the samples' product stays).
pub const INNER_FILTER_ABSORBANCE_PER_UM: f64 = 0.004;
/// CV of a standard well's pipetted concentration.
pub const STANDARD_PIPETTING_CV: f64 = 0.005;
/// CV of each kinetic well's pipetted substrate (the scatter between replicate wells).
pub const SUBSTRATE_PIPETTING_CV: f64 = 0.03;
/// The product standards, uM, each in duplicate (columns 9 and 10, rows A-H).
pub const STANDARD_LEVELS_UM: [f64; 8] = [0.0, 0.5, 1.0, 2.0, 4.0, 8.0, 12.0, 16.0];
/// The substrate series, uM, one row each (A = lowest).
pub const SUBSTRATE_SERIES_UM: [f64; 8] = [5.0, 10.0, 20.0, 40.0, 80.0, 160.0, 320.0, 640.0];
/// HmpA in the sample wells, nM.
pub const ENZYME_NM: f64 = 0.5;
/// HmpA's turnover number, 1/s (the truth).
pub const KCAT_PER_S: f64 = 8.0;
/// HmpA's Michaelis constant, uM (the truth).
pub const KM_UM: f64 = 60.0;

/// A simulated fluorescence plate: the export (wide CSV), the layout (tidy CSV) and the truth.
#[derive(Debug, Clone)]
pub struct FluorescencePlate {
    /// The wide export, RFU.
    pub export_csv: String,
    /// The tidy layout with `standard [uM]`.
    pub layout_csv: String,
    /// kcat, 1/s.
    pub kcat_per_s: f64,
    /// Km, uM.
    pub km_um: f64,
}

/// The inner-filter factor `(1 - 10^-A) / (A ln 10)`, 1 at A = 0.
pub fn inner_filter_factor(absorbance: f64) -> f64 {
    if absorbance.abs() < 1e-9 {
        return 1.0 - std::f64::consts::LN_10 * absorbance / 2.0;
    }
    (1.0 - 10f64.powf(-absorbance)) / (absorbance * std::f64::consts::LN_10)
}

/// The signal read for a linear signal `signal` (RFU), bent by the fluorophore it stands for.
fn bend(signal: f64) -> f64 {
    signal * inner_filter_factor(INNER_FILTER_ABSORBANCE_PER_UM * (signal / RFU_PER_UM).max(0.0))
}

/// The plate simulator's spec of the kinetic wells: samples in triplicate (columns 1-3), no-enzyme
/// controls (column 4), blanks (column 11, rows A-D), and buffer wells in columns 9 and 10 that
/// become the standards.
pub fn fluorescence_spec(seed: u64) -> SimulationSpec {
    let mut layout = Vec::new();
    for (row, &substrate) in SUBSTRATE_SERIES_UM.iter().enumerate() {
        let letter = row_label(row as u16);
        layout.push(LayoutGroup {
            selection: format!("{letter}1:{letter}3"),
            condition: WellCondition::sample(substrate, ENZYME_NM, "HmpA"),
        });
        layout.push(LayoutGroup {
            selection: format!("{letter}4"),
            condition: WellCondition::no_enzyme(substrate),
        });
        layout.push(LayoutGroup {
            selection: format!("{letter}9:{letter}10"),
            condition: WellCondition::blank(),
        });
    }
    layout.push(LayoutGroup {
        selection: "A11:D11".to_string(),
        condition: WellCondition::blank(),
    });
    SimulationSpec {
        run_name: "Hollin Moss HmpA fluorogenic assay (invented)".to_string(),
        metadata: vec![("Lab".to_string(), "Hollin Moss (invented)".to_string())],
        format: PlateFormat::Wells96,
        read_times_s: (0..31).map(|read| f64::from(read) * 20.0).collect(),
        wavelength_nm: 450.0,
        temperature_set_point_c: 30.0,
        temperature_jitter_sd_c: 0.0,
        // RFU per M over a 1 cm "pathlength": the simulator's Beer-Lambert is a linear response.
        extinction_coefficient_per_m_per_cm: RFU_PER_UM * 1e6,
        pathlength_cm: 1.0,
        readout: Readout::Product,
        variants: vec![VariantKinetics {
            name: "HmpA".to_string(),
            kcat_per_s: KCAT_PER_S,
            km_um: KM_UM,
            ki_um: None,
        }],
        layout,
        defects: Vec::new(),
        liquid_offset_range_au: (180.0, 220.0),
        empty_offset_range_au: (20.0, 30.0),
        noise_sd_au: 6.0,
        baseline_drift_au_per_s: 0.0,
        spontaneous_hydrolysis_per_s: 1e-6,
        dead_time_s: 0.0,
        substrate_pipetting_cv: SUBSTRATE_PIPETTING_CV,
        noise_growth_per_au: 0.0,
        well_drift_sd_au_per_s: 0.0,
        reading_decimals: 0,
        seed,
    }
}

/// Simulates the plate of `seed` and writes its export and layout.
pub fn fluorescence_plate(seed: u64) -> Result<FluorescencePlate, SimulationError> {
    let mut plate: SimulatedPlate = simulate(&fluorescence_spec(seed))?;
    let mut rng = ChaCha8Rng::seed_from_u64(seed ^ 0x5eed_f100);
    let pipetting = Normal::new(0.0, STANDARD_PIPETTING_CV).map_err(|_| SimulationError::BadSetting {
        setting: "standard pipetting CV",
        value: STANDARD_PIPETTING_CV.to_string(),
        requirement: "a finite SD",
    })?;
    let standard_of = |well: WellId| -> Option<f64> {
        matches!(well.column, 8 | 9)
            .then(|| STANDARD_LEVELS_UM.get(usize::from(well.row)).copied())
            .flatten()
    };
    for well in &mut plate.wells {
        let added =
            standard_of(well.well).map(|level| level * (1.0 + pipetting.sample(&mut rng)) * RFU_PER_UM);
        for reading in &mut well.readings {
            if let SimulatedReading::Number(value) = reading {
                *value = bend(*value + added.unwrap_or(0.0)).round();
            }
        }
    }
    let export_csv = super::wide_csv(
        &plate,
        &super::WideCsvOptions {
            temperature_column: false,
            ..super::WideCsvOptions::default()
        },
    );
    Ok(FluorescencePlate {
        export_csv,
        layout_csv: layout_csv(),
        kcat_per_s: KCAT_PER_S,
        km_um: KM_UM,
    })
}

/// The tidy layout: samples, controls, blanks and standards.
pub fn layout_csv() -> String {
    let mut text = String::from("# Hollin Moss HmpA, fluorogenic peptide (invented scenario)\n");
    text.push_str("well,role,substrate [uM],enzyme [nM],standard [uM]\n");
    for (row, &substrate) in SUBSTRATE_SERIES_UM.iter().enumerate() {
        let letter = row_label(row as u16);
        text.push_str(&format!("{letter}1:{letter}3,sample,{substrate},{ENZYME_NM},\n"));
        text.push_str(&format!("{letter}4,no-enzyme,{substrate},,\n"));
        text.push_str(&format!(
            "{letter}9:{letter}10,standard,,,{}\n",
            STANDARD_LEVELS_UM[row]
        ));
    }
    text.push_str("A11:D11,blank,,,\n");
    text
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_inner_filter_factor_is_one_at_zero_and_bends_gently() {
        assert!((inner_filter_factor(0.0) - 1.0).abs() < 1e-12);
        // A = 0.0352: (1 - 10^-0.0352) / (0.0352 ln 10) = 0.077853 / 0.081051 = 0.96055 (worked
        // by hand from the formula: 10^-0.0352 = exp(-0.081051) = 0.922147).
        let factor = inner_filter_factor(0.0352);
        assert!((factor - 0.96055).abs() < 1e-4, "{factor}");
    }

    #[test]
    fn the_plate_has_standards_in_duplicate_and_rfu_readings() {
        let plate = fluorescence_plate(7).unwrap();
        assert!(plate.layout_csv.contains("H9:H10,standard,,,16"));
        assert!(plate.export_csv.contains("H10"));
    }
}
