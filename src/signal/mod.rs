//! From raw readings to product formed, computed once per plate and stored on the plate analysis:
//! the blank at each read (mean of the readable `blank` wells), the readout's sign (a substrate
//! read falls, so its signal is negated to give product formed) and the Beer-Lambert conversion
//! `c = A / (epsilon l)` (c in M, epsilon in M^-1 cm^-1, l in cm) into the layout's substrate unit.
//! The rates, the progress-curve fits and the plots all read the signal through this one value.

use crate::config::{AnalysisSettings, Readout};
use crate::core::units::ConcentrationUnit;
use crate::import::KineticData;
use crate::layout::{Layout, Role};

/// How a plate's raw readings become product formed.
#[derive(Debug, Clone, PartialEq)]
pub struct PlateSignal {
    /// The blank at each read, AU: the mean of the readable blank wells (0 where none is readable).
    pub blank_per_read: Vec<f64>,
    /// How many blank wells the layout has in the data.
    pub n_blank_wells: usize,
    /// +1 for a product read, -1 for a substrate read.
    pub sign: f64,
    /// Concentration (in [`PlateSignal::concentration_unit`]) per AU, when the signal is converted.
    pub per_absorbance: Option<f64>,
    /// The unit of product formed when the signal is converted; `None`: the signal stays in AU.
    pub concentration_unit: Option<ConcentrationUnit>,
    /// Plate-level remarks (no blanks, no extinction coefficient...).
    pub warnings: Vec<String>,
}

impl PlateSignal {
    /// Works out the plate's blank, sign and conversion from the data, the layout and the settings.
    pub fn new(data: &KineticData, layout: &Layout, settings: &AnalysisSettings) -> PlateSignal {
        let mut warnings = Vec::new();
        let blank_wells: Vec<&[Option<f64>]> = data
            .wells
            .iter()
            .filter(|trace| {
                layout
                    .wells
                    .get(&trace.well)
                    .is_some_and(|setup| setup.role == Role::Blank)
            })
            .map(|trace| trace.values.as_slice())
            .collect();
        let blank_per_read = (0..data.times_s.len())
            .map(|read| {
                let readable: Vec<f64> = blank_wells.iter().filter_map(|trace| trace[read]).collect();
                crate::core::stats::mean(&readable).unwrap_or(0.0)
            })
            .collect();
        if blank_wells.is_empty() {
            warnings.push("no blank wells: absorbance is not blank-corrected".to_string());
        }
        let unit = layout.substrate_unit;
        let per_absorbance = match (settings.extinction_per_molar_cm, settings.pathlength_cm, unit) {
            (Some(epsilon), Some(path), Some(unit)) => Some(1.0 / (epsilon * path) / unit.in_molar()),
            (Some(_), Some(_), None) => {
                warnings
                    .push("the layout gives no substrate unit: rates stay in absorbance units".to_string());
                None
            }
            _ => {
                warnings.push(
                    "no extinction coefficient and pathlength: rates are in absorbance units and the conversion limit is not checked"
                        .to_string(),
                );
                None
            }
        };
        PlateSignal {
            blank_per_read,
            n_blank_wells: blank_wells.len(),
            sign: match settings.readout {
                Readout::Product => 1.0,
                Readout::Substrate => -1.0,
            },
            per_absorbance,
            concentration_unit: per_absorbance.and(unit),
            warnings,
        }
    }

    /// A well's readings as product formed at each read: blank-corrected, signed and converted
    /// (`None` where a read is unreadable).
    pub fn product_formed(&self, raw: &[Option<f64>]) -> Vec<Option<f64>> {
        let scale = self.per_absorbance.unwrap_or(1.0);
        raw.iter()
            .zip(&self.blank_per_read)
            .map(|(value, blank)| value.map(|a| self.sign * (a - blank) * scale))
            .collect()
    }

    /// The unit of product formed: `uM` (the layout's substrate unit) or `AU`.
    pub fn amount_unit(&self) -> String {
        self.concentration_unit
            .map_or_else(|| "AU".to_string(), |unit| unit.to_string())
    }

    /// The unit of rates: `uM/s` or `AU/s`.
    pub fn rate_unit(&self) -> String {
        format!("{}/s", self.amount_unit())
    }

    /// The y-axis label of product-formed curves.
    pub fn value_label(&self) -> String {
        match self.concentration_unit {
            Some(unit) => format!("product formed [{unit}]"),
            None => "blank-corrected signal [AU]".to_string(),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::files::sheet::read_text_cells;
    use crate::import::{import_cells, ImportOptions};
    use crate::layout::parse_layout;

    #[test]
    fn blank_is_the_mean_of_readable_blanks_and_a_substrate_read_is_negated() {
        // Invented numbers: two blanks (A2 unreadable at the second read) and one sample.
        let data = "Time [s],A1,A2,B1\n0,0.10,0.12,1.0\n10,0.20,OVER,0.9\n";
        let layout = "well,role,substrate [uM]\nA1,blank,\nA2,blank,\nB1,sample,10\n";
        let data = import_cells(
            &read_text_cells(data.as_bytes(), "d.csv").unwrap(),
            &ImportOptions::default(),
        )
        .unwrap();
        let layout = parse_layout(&read_text_cells(layout.as_bytes(), "l.csv").unwrap(), data.plate).unwrap();
        let settings = AnalysisSettings {
            readout: Readout::Substrate,
            extinction_per_molar_cm: Some(10_000.0),
            pathlength_cm: Some(0.5),
            ..AnalysisSettings::default()
        };
        let signal = PlateSignal::new(&data, &layout, &settings);
        assert_eq!(signal.n_blank_wells, 2);
        assert!((signal.blank_per_read[0] - 0.11).abs() < 1e-15);
        assert!((signal.blank_per_read[1] - 0.20).abs() < 1e-15);
        // 1 AU / (10^4 M^-1 cm^-1 x 0.5 cm) = 2e-4 M = 200 uM, negated for a substrate read.
        let formed = signal.product_formed(&[Some(1.11), None]);
        assert!((formed[0].unwrap() + 200.0).abs() < 1e-9, "{formed:?}");
        assert_eq!(formed[1], None);
        assert_eq!(signal.rate_unit(), "uM/s");
        assert_eq!(signal.value_label(), "product formed [uM]");
    }
}
