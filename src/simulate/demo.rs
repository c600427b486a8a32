//! The invented demo run (the Amber Fen esterase screen), a large plate for benchmarks, and the
//! demo folder's files and README. Everything here is invented: the lab, the enzyme, its
//! variants, the chromophore and its extinction coefficient.

use std::fmt::Write as _;

use super::writers::{
    grid_csv, layout_grid_csv, layout_tidy_csv, truth_json, wide_csv, xlsx_bytes, GridCsvOptions,
    SimulationWriteError, WideCsvOptions,
};
use super::{
    LayoutGroup, PlantedDefect, Readout, SimulatedPlate, SimulationSpec, VariantKinetics, WellCondition,
    WellRole,
};
use crate::core::plate::{row_label, PlateFormat, WellId};

/// Name of the wild-type variant of the invented esterase.
pub const DEMO_WILD_TYPE: &str = "FenA-wt";
/// Name of the invented point variant.
pub const DEMO_VARIANT_S112T: &str = "FenA-S112T";
/// The demo's substrate series, uM: one plate row per concentration (A = lowest), spanning about
/// 0.13-16 x Km of FenA-wt and 0.04-5 x Km of FenA-S112T.
pub const DEMO_SUBSTRATE_SERIES_UM: [f64; 8] = [10.0, 20.0, 40.0, 80.0, 160.0, 320.0, 640.0, 1280.0];
/// Enzyme of the FenA-wt wells, nM.
pub const DEMO_WILD_TYPE_ENZYME_NM: f64 = 4.0;
/// Enzyme of the FenA-S112T wells, nM: ten times more, so that its low-substrate wells deplete as
/// noticeably as the wild type's.
pub const DEMO_S112T_ENZYME_NM: f64 = 40.0;
/// Seed of the demo plate.
pub const DEMO_SEED: u64 = 4_052_024;
/// Seconds from mixing to the demo's first read (its assay file gives them as `dead-time`).
pub const DEMO_DEAD_TIME_S: f64 = 20.0;
/// Extinction coefficient of the demo's chromophore, M^-1 cm^-1 (invented value for the scenario).
pub const DEMO_EXTINCTION_COEFFICIENT: f64 = 16_800.0;

/// File names of the demo folder, in the order [`demo_files`] returns them.
pub const DEMO_FILE_NAMES: [&str; 7] = [
    "amber-fen-wide.csv",
    "amber-fen-grid.csv",
    "amber-fen.xlsx",
    "amber-fen-layout.csv",
    "amber-fen-layout-grid.csv",
    "amber-fen-truth.json",
    "README.md",
];

/// The Amber Fen plate: invented esterase "fenesterase", variants FenA-wt (kcat 12 /s, Km 80 uM,
/// 4 nM) and FenA-S112T (kcat 4 /s, Km 250 uM, 40 nM), read at 405 nm for an invented chromophore
/// (epsilon 16,800 M^-1 cm^-1, pathlength 0.55 cm), 96 wells, 49 reads every 15 s (0-720 s) at
/// 30 C, photometric noise SD 0.001 AU.
///
/// Layout: rows A-H hold the substrate series 10-1280 uM; columns 1-3 FenA-wt and 4-6
/// FenA-S112T in triplicate; column 7 no-enzyme controls at every concentration (no variant, so
/// they serve both); A8 C8 E8 G8 buffer blanks; the rest empty. Planted defects: `OVER` markers in
/// C5 at 330-360 s, ten-fold noise in F6, a lag in G5 (tau 60 s), and extra background pushing H4
/// above 3.0 AU.
pub fn demo_spec() -> SimulationSpec {
    let mut layout = Vec::new();
    for (row, &substrate_um) in DEMO_SUBSTRATE_SERIES_UM.iter().enumerate() {
        let letter = row_label(row as u16);
        layout.push(LayoutGroup {
            selection: format!("{letter}1:{letter}3"),
            condition: WellCondition::sample(substrate_um, DEMO_WILD_TYPE_ENZYME_NM, DEMO_WILD_TYPE),
        });
        layout.push(LayoutGroup {
            selection: format!("{letter}4:{letter}6"),
            condition: WellCondition::sample(substrate_um, DEMO_S112T_ENZYME_NM, DEMO_VARIANT_S112T),
        });
    }
    for (row, &substrate_um) in DEMO_SUBSTRATE_SERIES_UM.iter().enumerate() {
        layout.push(LayoutGroup {
            selection: format!("{}7", row_label(row as u16)),
            condition: WellCondition::no_enzyme(substrate_um),
        });
    }
    layout.push(LayoutGroup {
        selection: "A8 C8 E8 G8".to_string(),
        condition: WellCondition::blank(),
    });
    layout.push(LayoutGroup {
        selection: "B8 D8 F8 H8".to_string(),
        condition: WellCondition::empty(),
    });
    layout.push(LayoutGroup {
        selection: "A9:H12".to_string(),
        condition: WellCondition::empty(),
    });

    // Zero-based (row, column): C5, F6, G5, H4. Reads 22-24 are 330, 345 and 360 s. The lag sits in
    // a fast well (FenA-S112T, 640 uM) so that it stands well clear of the noise.
    let defects = vec![
        (
            WellId::new(2, 4),
            PlantedDefect::OverRange {
                read_indices: vec![22, 23, 24],
                marker: "OVER".to_string(),
            },
        ),
        (WellId::new(5, 5), PlantedDefect::ExtraNoise { factor: 10.0 }),
        (WellId::new(6, 4), PlantedDefect::Lag { tau_s: 60.0 }),
        (
            WellId::new(7, 3),
            PlantedDefect::HighBackground {
                extra_absorbance: 2.45,
            },
        ),
    ];

    let run_name = "Amber Fen esterase screen".to_string();
    let metadata = [
        ("Run", run_name.as_str()),
        ("Lab", "Lab of the Amber Fen (invented)"),
        ("Enzyme", "fenesterase FenA-wt and FenA-S112T (invented)"),
        ("Plate", "96 wells"),
        ("Wavelength [nm]", "405"),
        ("Pathlength [cm]", "0.55"),
        ("Read interval [s]", "15"),
        ("Temperature set point [C]", "30"),
        ("Note", "simulated demo data; every name and value is invented"),
    ]
    .iter()
    .map(|(key, value)| (key.to_string(), value.to_string()))
    .collect();

    SimulationSpec {
        run_name,
        metadata,
        format: PlateFormat::Wells96,
        read_times_s: (0..49).map(|read| f64::from(read) * 15.0).collect(),
        wavelength_nm: 405.0,
        temperature_set_point_c: 30.0,
        temperature_jitter_sd_c: 0.04,
        extinction_coefficient_per_m_per_cm: DEMO_EXTINCTION_COEFFICIENT,
        pathlength_cm: 0.55,
        readout: Readout::Product,
        variants: demo_variants(),
        layout,
        defects,
        liquid_offset_range_au: (0.04, 0.06),
        empty_offset_range_au: (0.035, 0.045),
        noise_sd_au: 0.001,
        // What real runs have (issue 9): a plate-wide baseline creeping up, each well drifting a
        // little on its own, noise growing with absorbance, 2% pipetting error in each well's S0,
        // and 20 s from mixing to the first read (given to the analysis as `dead-time`).
        baseline_drift_au_per_s: 2e-6,
        spontaneous_hydrolysis_per_s: 1e-6,
        dead_time_s: DEMO_DEAD_TIME_S,
        substrate_pipetting_cv: 0.02,
        noise_growth_per_au: 0.3,
        well_drift_sd_au_per_s: 5e-7,
        reading_decimals: 4,
        seed: DEMO_SEED,
    }
}

/// The demo's bench (reader, chromophore, offsets, noise, reads) without its real-run defects
/// (dead time, pipetting error, drift, noise growing with absorbance): the base of scenarios
/// that state their own defects.
pub fn demo_bench_spec() -> SimulationSpec {
    SimulationSpec {
        dead_time_s: 0.0,
        baseline_drift_au_per_s: 0.0,
        noise_growth_per_au: 0.0,
        well_drift_sd_au_per_s: 0.0,
        substrate_pipetting_cv: 0.0,
        ..demo_spec()
    }
}

fn demo_variants() -> Vec<VariantKinetics> {
    vec![
        VariantKinetics {
            name: DEMO_WILD_TYPE.to_string(),
            kcat_per_s: 12.0,
            km_um: 80.0,
            ki_um: None,
        },
        VariantKinetics {
            name: DEMO_VARIANT_S112T.to_string(),
            kcat_per_s: 4.0,
            km_um: 250.0,
            ki_um: None,
        },
    ]
}

/// A full plate of the demo chemistry for benchmarks: the top half of the rows FenA-wt, the
/// bottom half FenA-S112T, the columns but the last two cycling through the demo substrate series,
/// the second-last column no-enzyme controls, the last column blanks; `n_reads` reads every 10 s,
/// no defects. For 1536 wells and 200 reads the wide CSV is about 2 MB.
pub fn large_plate_spec(format: PlateFormat, n_reads: usize) -> SimulationSpec {
    let n_rows = format.n_rows();
    let n_columns = format.n_columns();
    let half = n_rows / 2;
    let halves = [
        (0, half - 1, DEMO_WILD_TYPE, DEMO_WILD_TYPE_ENZYME_NM),
        (half, n_rows - 1, DEMO_VARIANT_S112T, DEMO_S112T_ENZYME_NM),
    ];
    let mut layout = Vec::new();
    for (first_row, last_row, variant, enzyme_nm) in halves {
        for column in 1..=n_columns - 2 {
            let substrate_um =
                DEMO_SUBSTRATE_SERIES_UM[usize::from(column - 1) % DEMO_SUBSTRATE_SERIES_UM.len()];
            layout.push(LayoutGroup {
                selection: format!("{}{column}:{}{column}", row_label(first_row), row_label(last_row)),
                condition: WellCondition::sample(substrate_um, enzyme_nm, variant),
            });
        }
    }
    for row in 0..n_rows {
        layout.push(LayoutGroup {
            selection: format!("{}{}", row_label(row), n_columns - 1),
            condition: WellCondition::no_enzyme(
                DEMO_SUBSTRATE_SERIES_UM[usize::from(row) % DEMO_SUBSTRATE_SERIES_UM.len()],
            ),
        });
    }
    layout.push(LayoutGroup {
        selection: format!("A{n_columns}:{}{n_columns}", row_label(n_rows - 1)),
        condition: WellCondition::blank(),
    });
    let run_name = format!("Large simulated plate ({format} wells, {n_reads} reads)");
    SimulationSpec {
        metadata: vec![
            ("Run".to_string(), run_name.clone()),
            ("Wavelength [nm]".to_string(), "405".to_string()),
            (
                "Note".to_string(),
                "simulated benchmark data; every name and value is invented".to_string(),
            ),
        ],
        run_name,
        format,
        read_times_s: (0..n_reads).map(|read| read as f64 * 10.0).collect(),
        layout,
        defects: Vec::new(),
        ..demo_spec()
    }
}

/// The README of the demo folder, written from the plate's truth so that it cannot disagree with
/// the data.
pub fn demo_readme(plate: &SimulatedPlate) -> String {
    let truth = &plate.truth;
    let settings = &truth.settings;
    let mut text = String::new();
    let _ = writeln!(text, "# Amber Fen demo plates\n");
    let _ = writeln!(
        text,
        "Everything in this folder is invented and was made by platekin's plate simulator \
         (`src/simulate/`, run by `cargo run --example make_demo_plates -- FOLDER`): the Lab of the \
         Amber Fen, the esterase \"fenesterase\" and its variants {DEMO_WILD_TYPE} and \
         {DEMO_VARIANT_S112T}, the chromophore and its extinction coefficient, and every reading. The \
         same seed ({}) gives the same bytes.\n",
        settings.seed
    );
    let _ = writeln!(text, "## Scenario\n");
    let first = settings.read_times_s.first().copied().unwrap_or(0.0);
    let last = settings.read_times_s.last().copied().unwrap_or(0.0);
    let _ = writeln!(
        text,
        "A continuous absorbance assay of an esterase in a {}-well plate: the enzyme releases a \
         chromophore read at {} nm (extinction coefficient {} M^-1 cm^-1, an invented value for the \
         scenario; pathlength {} cm). {} reads from {} s to {} s at {} C. The product is read, so the \
         signal rises. Readings have {} decimals; noise SD {} AU times 10^({} x absorbance); well \
         offsets 0.04-0.06 AU (empty wells 0.035-0.045 AU); spontaneous hydrolysis {} /s. What real \
         runs have: {} s from mixing to the first read (the assay file's `dead-time`), {}% pipetting \
         error (CV) in each well's substrate, a baseline drifting by {} AU/s across the plate and by \
         SD {} AU/s from well to well.\n",
        settings.plate_format,
        settings.wavelength_nm,
        settings.extinction_coefficient_per_m_per_cm,
        settings.pathlength_cm,
        settings.read_times_s.len(),
        first,
        last,
        settings.temperature_set_point_c,
        settings.reading_decimals,
        settings.noise_sd_au,
        settings.noise_growth_per_au,
        settings.spontaneous_hydrolysis_per_s,
        settings.dead_time_s,
        100.0 * settings.substrate_pipetting_cv,
        settings.baseline_drift_au_per_s,
        settings.well_drift_sd_au_per_s,
    );
    let _ = writeln!(text, "## Files\n");
    let files = [
        ("amber-fen-wide.csv", "readings, wide: metadata lines, header `Time [s],Temperature [C],A1..H12`, one row per read, summary lines below"),
        ("amber-fen-grid.csv", "the same readings, one 8 x 12 block per read headed `Time h:mm:ss` and `Temperature 30.0 C`"),
        ("amber-fen.xlsx", "the same readings, wide, sheet `Kinetics` (time as `[h]:mm:ss` cells) after a text-only sheet `Notes`"),
        ("amber-fen-layout.csv", "layout, tidy: `well,role,substrate [uM],enzyme [nM],variant` with single wells, rectangles and lists"),
        ("amber-fen-layout-grid.csv", "the same layout as plate grids: blocks `role`, `substrate [uM]`, `enzyme [nM]`, `variant`"),
        ("amber-fen-truth.json", "the known answer: constants, per-well truth, planted defects, settings"),
    ];
    for (name, description) in files {
        let _ = writeln!(text, "- `{name}`: {description}");
    }
    let _ = writeln!(text, "\n## Layout\n");
    let _ = writeln!(
        text,
        "Rows A-H hold substrate {} uM. Columns 1-3: {DEMO_WILD_TYPE} at {DEMO_WILD_TYPE_ENZYME_NM} nM, \
         columns 4-6: {DEMO_VARIANT_S112T} at {DEMO_S112T_ENZYME_NM} nM (triplicates). Column 7: \
         no-enzyme controls at every concentration, variant left empty so they serve both variants. \
         A8 C8 E8 G8: blanks (buffer only). B8 D8 F8 H8 and A9:H12: empty.\n",
        DEMO_SUBSTRATE_SERIES_UM.map(|value| value.to_string()).join(", ")
    );
    let _ = writeln!(text, "## True constants\n");
    let _ = writeln!(
        text,
        "| variant | kcat [1/s] | Km [uM] | kcat/Km [1/(uM s)] | enzyme [nM] |"
    );
    let _ = writeln!(text, "| --- | --- | --- | --- | --- |");
    for variant in &truth.variants {
        let enzyme: Vec<String> = variant
            .enzyme_nm_used
            .iter()
            .map(|value| value.to_string())
            .collect();
        let _ = writeln!(
            text,
            "| {} | {} | {} | {} | {} |",
            variant.name,
            variant.kcat_per_s,
            variant.km_um,
            variant.kcat_over_km_per_um_per_s,
            enzyme.join(", ")
        );
    }
    let conversion = depletion_summary(plate);
    let _ = writeln!(text, "\n{conversion}");
    let _ = writeln!(text, "## Planted defects\n");
    for defect in &truth.planted_defects {
        let times: Vec<String> = defect
            .affected_read_times_s
            .iter()
            .map(|time| time.to_string())
            .collect();
        let when = if defect.affected_read_times_s.len() == settings.read_times_s.len() {
            "all reads".to_string()
        } else {
            format!("at {} s", times.join(", "))
        };
        let _ = writeln!(
            text,
            "- {} ({}): {}; {}.",
            defect.well,
            defect.defect.kind(),
            defect.description,
            when
        );
    }
    let _ = writeln!(text, "\nEvery other well is clean.\n");
    let _ = writeln!(text, "## How the readings were made\n");
    let model_lines = [
        "Substrate by the closed form of the integrated Michaelis-Menten equation, S(t) = Km W0((S0/Km) exp((S0 - Vmax t)/Km)), Vmax = kcat [E], evaluated as Km omega(z) (Wright omega) with z = ln(S0/Km) + (S0 - Vmax t)/Km.",
        "Product P = S0 - S, plus spontaneous first-order hydrolysis k_spont times the integral of S (no-enzyme wells: S0 (1 - exp(-k_spont t))).",
        "Absorbance A = offset + epsilon l P (Beer-Lambert, P in M) + Gaussian noise, rounded to the reader's decimals.",
        "The lag well's activity ramps as 1 - exp(-t/tau), which replaces t by t - tau (1 - exp(-t/tau)) in the closed form.",
    ];
    for line in model_lines {
        let _ = writeln!(text, "- {line}");
    }
    text
}

/// One paragraph stating how much substrate the lowest and highest concentrations convert.
fn depletion_summary(plate: &SimulatedPlate) -> String {
    let lowest = DEMO_SUBSTRATE_SERIES_UM[0];
    let highest = DEMO_SUBSTRATE_SERIES_UM[DEMO_SUBSTRATE_SERIES_UM.len() - 1];
    let sample_fractions = |substrate_um: f64| -> Vec<f64> {
        plate
            .truth
            .wells
            .iter()
            .filter(|well| well.role == WellRole::Sample && well.substrate_um == Some(substrate_um))
            .filter_map(|well| well.fraction_converted_at_last_read)
            .collect()
    };
    let range = |values: &[f64]| {
        let low = values.iter().copied().fold(f64::INFINITY, f64::min);
        let high = values.iter().copied().fold(f64::NEG_INFINITY, f64::max);
        format!("{:.0}-{:.0}%", 100.0 * low, 100.0 * high)
    };
    format!(
        "By the last read the {lowest} uM sample wells have converted {} of their substrate (no longer \
         initial-rate conditions late in the read), the {highest} uM wells {}.\n",
        range(&sample_fractions(lowest)),
        range(&sample_fractions(highest)),
    )
}

/// Every file of the demo folder, named as in [`DEMO_FILE_NAMES`], with its bytes.
pub fn demo_files(plate: &SimulatedPlate) -> Result<Vec<(&'static str, Vec<u8>)>, SimulationWriteError> {
    let contents = [
        wide_csv(plate, &WideCsvOptions::default()).into_bytes(),
        grid_csv(plate, &GridCsvOptions::default()).into_bytes(),
        xlsx_bytes(plate)?,
        layout_tidy_csv(plate).into_bytes(),
        layout_grid_csv(plate).into_bytes(),
        truth_json(plate)?.into_bytes(),
        demo_readme(plate).into_bytes(),
    ];
    Ok(DEMO_FILE_NAMES.into_iter().zip(contents).collect())
}

#[cfg(test)]
mod tests {
    use super::super::{simulate, SimulatedReading};
    use super::*;
    use crate::fit::integrated as progress;

    fn demo_plate() -> SimulatedPlate {
        simulate(&demo_spec()).unwrap()
    }

    fn time_index(plate: &SimulatedPlate, time_s: f64) -> usize {
        plate
            .read_times_s
            .iter()
            .position(|&time| time == time_s)
            .unwrap()
    }

    fn least_squares_slope(times: &[f64], values: &[f64]) -> f64 {
        let n = times.len() as f64;
        let mean_time = times.iter().sum::<f64>() / n;
        let mean_value = values.iter().sum::<f64>() / n;
        let covariance: f64 = times
            .iter()
            .zip(values)
            .map(|(t, v)| (t - mean_time) * (v - mean_value))
            .sum();
        let variance: f64 = times.iter().map(|t| (t - mean_time).powi(2)).sum();
        covariance / variance
    }

    #[test]
    fn demo_is_deterministic_to_the_byte() {
        let first = demo_files(&demo_plate()).unwrap();
        let second = demo_files(&demo_plate()).unwrap();
        assert_eq!(first, second);
        assert_eq!(first.len(), DEMO_FILE_NAMES.len());
    }

    #[test]
    fn lowest_substrate_wells_deplete_more_than_ten_percent_within_the_read() {
        // Checked twice: from the closed form, and from the noisy readings themselves.
        let spec = demo_spec();
        let plate = demo_plate();
        let last_time = *spec.read_times_s.last().unwrap();
        let absorbance_per_um = spec.extinction_coefficient_per_m_per_cm * spec.pathlength_cm * 1e-6;
        let low_wells: Vec<_> = plate
            .wells
            .iter()
            .filter(|well| {
                well.condition.role == WellRole::Sample && well.condition.substrate_um == Some(10.0)
            })
            .collect();
        assert_eq!(low_wells.len(), 6);
        for well in low_wells {
            let variant = spec
                .variants
                .iter()
                .find(|variant| Some(&variant.name) == well.condition.variant.as_ref())
                .unwrap();
            let vmax = variant.kcat_per_s * well.condition.enzyme_nm.unwrap() * 1e-3;
            let left = progress::substrate_remaining(10.0, variant.km_um, vmax, last_time);
            assert!(1.0 - left / 10.0 > 0.10, "{}: {}", well.well, 1.0 - left / 10.0);
            let first = well.readings[0].as_number().unwrap();
            let last = well.readings.last().unwrap().as_number().unwrap();
            let converted_from_readings = (last - first) / (absorbance_per_um * 10.0);
            assert!(
                converted_from_readings > 0.10,
                "{}: {converted_from_readings}",
                well.well
            );
        }
    }

    #[test]
    fn highest_substrate_wells_stay_under_ten_percent_in_the_first_three_minutes() {
        let spec = demo_spec();
        let plate = demo_plate();
        let high_truths: Vec<_> = plate
            .truth
            .wells
            .iter()
            .filter(|well| well.role == WellRole::Sample && well.substrate_um == Some(1280.0))
            .collect();
        assert_eq!(high_truths.len(), 6);
        for truth in high_truths {
            let variant = spec
                .variants
                .iter()
                .find(|variant| Some(&variant.name) == truth.variant.as_ref())
                .unwrap();
            let vmax = variant.kcat_per_s * truth.enzyme_nm.unwrap() * 1e-3;
            let left = progress::substrate_remaining(1280.0, variant.km_um, vmax, 180.0);
            assert!(1.0 - left / 1280.0 < 0.10, "{}", truth.well);
            assert!(truth.last_read_within_10_percent_s.unwrap() >= 180.0);
        }
    }

    #[test]
    fn planted_defects_are_where_the_truth_says() {
        let plate = demo_plate();
        let over = plate.readings_of(WellId::parse("C5").unwrap()).unwrap();
        let markers: Vec<usize> = over
            .iter()
            .enumerate()
            .filter(|(_, reading)| matches!(reading, SimulatedReading::Text(text) if text == "OVER"))
            .map(|(index, _)| index)
            .collect();
        assert_eq!(markers, [22, 23, 24]);
        let text_cells = plate
            .wells
            .iter()
            .flat_map(|well| &well.readings)
            .filter(|reading| reading.as_number().is_none())
            .count();
        assert_eq!(text_cells, 3);

        let high = plate.readings_of(WellId::parse("H4").unwrap()).unwrap();
        assert!(high[0].as_number().unwrap() < 3.0);
        assert!(high.last().unwrap().as_number().unwrap() > 3.0);
        let wells_above_three = plate
            .wells
            .iter()
            .filter(|well| {
                well.readings
                    .iter()
                    .any(|reading| reading.as_number().is_some_and(|value| value > 3.0))
            })
            .count();
        assert_eq!(wells_above_three, 1);

        // The lag well's slope over the first two minutes is well below its later slope; its
        // replicates' early slopes are not (they only fall slightly later, by depletion).
        let early_over_late = |well: &str| {
            let readings = plate.readings_of(WellId::parse(well).unwrap()).unwrap();
            let values: Vec<f64> = readings
                .iter()
                .map(|reading| reading.as_number().unwrap())
                .collect();
            let early = least_squares_slope(&plate.read_times_s[..5], &values[..5]);
            let late = least_squares_slope(&plate.read_times_s[10..], &values[10..]);
            early / late
        };
        let ratios = [
            early_over_late("G4"),
            early_over_late("G5"),
            early_over_late("G6"),
        ];
        assert!(
            ratios[1] < 0.75 && ratios[0] > 0.9 && ratios[2] > 0.9,
            "{ratios:?}"
        );

        // The noisy well scatters about ten times more around a straight line than a replicate.
        let scatter = |well: &str| {
            let readings = plate.readings_of(WellId::parse(well).unwrap()).unwrap();
            let values: Vec<f64> = readings
                .iter()
                .map(|reading| reading.as_number().unwrap())
                .collect();
            let second_differences: Vec<f64> = values.windows(3).map(|w| w[2] - 2.0 * w[1] + w[0]).collect();
            (second_differences.iter().map(|d| d * d).sum::<f64>() / second_differences.len() as f64).sqrt()
        };
        assert!(scatter("F6") > 4.0 * scatter("F4").max(scatter("F5")));

        let kinds: Vec<(String, &str)> = plate
            .truth
            .planted_defects
            .iter()
            .map(|defect| (defect.well.to_string(), defect.defect.kind()))
            .collect();
        assert_eq!(
            kinds,
            [
                ("C5".to_string(), "over-range"),
                ("F6".to_string(), "extra-noise"),
                ("G5".to_string(), "lag"),
                ("H4".to_string(), "high-background"),
            ]
        );
    }

    #[test]
    fn demo_layout_uses_rectangles_and_lists_and_covers_the_plate() {
        let plate = demo_plate();
        assert_eq!(plate.wells.len(), 96);
        let tidy = layout_tidy_csv(&plate);
        assert!(tidy
            .lines()
            .any(|line| line.starts_with("A1:A3,sample,10,4,FenA-wt")));
        assert!(tidy.lines().any(|line| line == "A8 C8 E8 G8,blank,,,"));
        assert!(tidy.lines().any(|line| line == "A7,no-enzyme,10,,"));
        let count = |role: WellRole| {
            plate
                .wells
                .iter()
                .filter(|well| well.condition.role == role)
                .count()
        };
        assert_eq!(
            (
                count(WellRole::Sample),
                count(WellRole::NoEnzyme),
                count(WellRole::Blank)
            ),
            (48, 8, 4)
        );
        assert_eq!(count(WellRole::Empty), 36);
    }

    #[test]
    fn offsets_and_noise_are_in_the_stated_ranges() {
        let plate = demo_plate();
        for well in &plate.truth.wells {
            let (low, high) = if well.role == WellRole::Empty {
                (0.035, 0.045)
            } else {
                (0.04, 0.06)
            };
            assert!((low..=high).contains(&well.offset_au), "{}", well.well);
        }
        // Blank wells: readings scatter around their offset, plus the plate's slow baseline drift
        // and the well's own, with the plate's noise SD: the scatter about each blank's own line.
        let residuals: Vec<f64> = plate
            .wells
            .iter()
            .filter(|well| well.condition.role == WellRole::Blank)
            .flat_map(|well| {
                let values: Vec<f64> = well.readings.iter().map(|r| r.as_number().unwrap()).collect();
                let times = &plate.truth.settings.read_times_s;
                let n = values.len() as f64;
                let (mean_t, mean_y) = (times.iter().sum::<f64>() / n, values.iter().sum::<f64>() / n);
                let slope = times
                    .iter()
                    .zip(&values)
                    .map(|(t, y)| (t - mean_t) * (y - mean_y))
                    .sum::<f64>()
                    / times.iter().map(|t| (t - mean_t).powi(2)).sum::<f64>();
                times
                    .iter()
                    .zip(&values)
                    .map(|(t, y)| y - mean_y - slope * (t - mean_t))
                    .collect::<Vec<_>>()
            })
            .collect();
        let sd = (residuals.iter().map(|r| r * r).sum::<f64>() / residuals.len() as f64).sqrt();
        assert!(sd > 0.0007 && sd < 0.0013, "blank SD {sd} (spec 0.001)");
    }

    #[test]
    fn readme_lists_every_defect_and_says_it_is_invented() {
        let plate = demo_plate();
        let readme = demo_readme(&plate);
        assert!(readme.contains("Everything in this folder is invented"));
        assert!(readme.contains("invented value for the scenario"));
        for defect in &plate.truth.planted_defects {
            assert!(readme.contains(&format!("- {} ({})", defect.well, defect.defect.kind())));
        }
    }

    #[test]
    fn large_plate_fills_the_format_and_writes_about_two_megabytes() {
        let plate = simulate(&large_plate_spec(PlateFormat::Wells1536, 200)).unwrap();
        assert_eq!(plate.wells.len(), 1536);
        assert_eq!(plate.read_times_s.len(), 200);
        let bytes = wide_csv(&plate, &WideCsvOptions::default()).len();
        assert!((1_800_000..2_600_000).contains(&bytes), "{bytes} bytes");
        let small = simulate(&large_plate_spec(PlateFormat::Wells96, 5)).unwrap();
        assert_eq!(small.wells.len(), 96);
        assert_eq!(time_index(&small, 40.0), 4);
    }
}
