//! Simulated inhibitor screens with known IC50s and Hill slopes, for tests, benchmarks and the
//! screening demo: controls in the first two and last two columns (uninhibited in the outermost,
//! inhibited next to them), compounds filling the other columns eight doses each (a three-fold
//! series), some of them inactive.
//!
//! The simulator knows competitive inhibition, `Km_app = Km (1 + I/Ki)`. A compound with Hill
//! slope h is simulated at the effective concentration `I_sim = Ki (I/Ki)^h`, so that
//! `Km_app = Km (1 + (I/Ki)^h)` and, at substrate S, the initial rate relative to the uninhibited
//! one is `1 / (1 + (I/IC50)^h)` with `IC50 = Ki (1 + S/Km)^(1/h)`: exactly the four-parameter
//! logistic with top 100%, bottom 0%, slope h. The rates come from the simulator's own
//! integration of the progress curves (noise, depletion and all), never from the fitted formula.
//! The layout platekin reads is written here with the true doses, roles and compound names.

use std::fmt::Write as _;

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

use super::{demo_bench_spec, LayoutGroup, Readout, SimulationSpec, VariantKinetics, WellCondition};
use crate::core::plate::{PlateFormat, WellId};

/// Substrate in every well, uM (equal to Km, so IC50 = Ki 2^(1/h)).
pub const SCREEN_SUBSTRATE_UM: f64 = 40.0;
/// Km of the screened enzyme, uM.
pub const SCREEN_KM_UM: f64 = 40.0;
/// Enzyme in every well but the inhibited controls' reference, nM.
pub const SCREEN_ENZYME_NM: f64 = 2.0;
/// Lowest dose, uM; the series rises three-fold.
pub const SCREEN_LOWEST_DOSE_UM: f64 = 0.01;
/// Doses per compound.
pub const SCREEN_DOSES: usize = 8;
/// An inactive compound's IC50, uM (far beyond the highest dose, 21.87 uM).
pub const INACTIVE_IC50_UM: f64 = 1.0e5;

/// One compound's truth.
#[derive(Debug, Clone, PartialEq)]
pub struct CompoundTruth {
    /// Its name in the layout.
    pub name: String,
    /// True IC50, uM.
    pub ic50_um: f64,
    /// True Hill slope.
    pub hill: f64,
    /// Whether it is meant to stay above 50% at every dose.
    pub inactive: bool,
}

/// A simulated screen: what to simulate, the layout platekin reads, and the truth.
#[derive(Debug, Clone)]
pub struct ScreenPlate {
    /// The simulation (its own layout holds the effective concentrations).
    pub spec: SimulationSpec,
    /// The tidy layout for platekin: roles, `compound`, `substrate [uM]`, `enzyme [nM]`,
    /// `inhibitor [uM]` with the true doses.
    pub layout_csv: String,
    /// Every compound's truth, in layout order.
    pub compounds: Vec<CompoundTruth>,
    /// The uninhibited and inhibited control wells.
    pub controls: (Vec<WellId>, Vec<WellId>),
}

/// The doses of every compound, uM.
pub fn screen_doses() -> Vec<f64> {
    (0..SCREEN_DOSES)
        .map(|i| SCREEN_LOWEST_DOSE_UM * 3f64.powi(i as i32))
        .collect()
}

/// A screen of `n_compounds` (every `inactive_every`-th inactive) on `format`, with `n_reads`
/// reads every 20 s and the given seed. Panics if the compounds do not fit the plate (a caller's
/// mistake, never a user's input).
pub fn screen_plate(
    format: PlateFormat,
    n_compounds: usize,
    inactive_every: usize,
    n_reads: usize,
    seed: u64,
) -> ScreenPlate {
    let n_rows = format.n_rows();
    let n_columns = format.n_columns();
    let sample_columns: Vec<u16> = (3..=n_columns - 2).collect();
    let positions: Vec<WellId> = sample_columns
        .iter()
        .flat_map(|column| (0..n_rows).map(move |row| WellId::new(row, column - 1)))
        .collect();
    assert!(
        n_compounds * SCREEN_DOSES <= positions.len(),
        "the compounds do not fit the plate"
    );
    let mut random = ChaCha8Rng::seed_from_u64(seed);
    let mut layout = Vec::new();
    let mut variants = vec![
        VariantKinetics {
            name: "vehicle".into(),
            kcat_per_s: 10.0,
            km_um: SCREEN_KM_UM,
            ki_um: None,
        },
        VariantKinetics {
            name: "reference".into(),
            kcat_per_s: 10.0,
            km_um: SCREEN_KM_UM,
            ki_um: Some(1e-6),
        },
    ];
    let mut text = String::from("well,role,compound,substrate [uM],enzyme [nM],inhibitor [uM]\n");
    let (mut uninhibited, mut inhibited) = (Vec::new(), Vec::new());
    for row in 0..n_rows {
        for (column, role) in [
            (1, "uninhibited"),
            (2, "inhibited"),
            (n_columns - 1, "inhibited"),
            (n_columns, "uninhibited"),
        ] {
            let well = WellId::new(row, column - 1);
            let condition = if role == "uninhibited" {
                uninhibited.push(well);
                WellCondition::sample(SCREEN_SUBSTRATE_UM, SCREEN_ENZYME_NM, "vehicle")
            } else {
                inhibited.push(well);
                WellCondition::sample(SCREEN_SUBSTRATE_UM, SCREEN_ENZYME_NM, "reference")
                    .with_inhibitor(100.0)
            };
            layout.push(LayoutGroup {
                selection: well.to_string(),
                condition,
            });
            let dose = if role == "inhibited" { "100" } else { "" };
            let _ = writeln!(
                text,
                "{well},{role},,{SCREEN_SUBSTRATE_UM},{SCREEN_ENZYME_NM},{dose}"
            );
        }
    }
    let doses = screen_doses();
    let mut compounds = Vec::new();
    for index in 0..n_compounds {
        let inactive = inactive_every > 0 && index % inactive_every == inactive_every - 1;
        // Active IC50s spread log-uniformly over 0.05 to 5 uM, inside the tested 0.01 to 21.87.
        let ic50_um = if inactive {
            INACTIVE_IC50_UM
        } else {
            10f64.powf(random.random_range(0.05f64.log10()..5f64.log10()))
        };
        let hill: f64 = random.random_range(0.8..1.5);
        let name = format!("CPD-{:03}", index + 1);
        let ki_um = ic50_um / (1.0 + SCREEN_SUBSTRATE_UM / SCREEN_KM_UM).powf(1.0 / hill);
        variants.push(VariantKinetics {
            name: name.clone(),
            kcat_per_s: 10.0,
            km_um: SCREEN_KM_UM,
            ki_um: Some(ki_um),
        });
        for (dose_index, dose) in doses.iter().enumerate() {
            let well = positions[index * SCREEN_DOSES + dose_index];
            let effective = ki_um * (dose / ki_um).powf(hill);
            layout.push(LayoutGroup {
                selection: well.to_string(),
                condition: WellCondition::sample(SCREEN_SUBSTRATE_UM, SCREEN_ENZYME_NM, &name)
                    .with_inhibitor(effective),
            });
            let _ = writeln!(
                text,
                "{well},sample,{name},{SCREEN_SUBSTRATE_UM},{SCREEN_ENZYME_NM},{dose}"
            );
        }
        compounds.push(CompoundTruth {
            name,
            ic50_um,
            hill,
            inactive,
        });
    }
    let run_name = format!("Simulated inhibitor screen ({format} wells, {n_compounds} compounds)");
    let spec = SimulationSpec {
        run_name: run_name.clone(),
        metadata: vec![
            ("Run".to_string(), run_name),
            (
                "Note".to_string(),
                "simulated screen; every name and value is invented".to_string(),
            ),
        ],
        format,
        read_times_s: (0..n_reads).map(|read| read as f64 * 20.0).collect(),
        readout: Readout::Product,
        extinction_coefficient_per_m_per_cm: 18_000.0,
        pathlength_cm: 0.5,
        variants,
        layout,
        defects: Vec::new(),
        noise_sd_au: 0.0008,
        spontaneous_hydrolysis_per_s: 0.0,
        seed,
        ..demo_bench_spec()
    };
    ScreenPlate {
        spec,
        layout_csv: text,
        compounds,
        controls: (uninhibited, inhibited),
    }
}

/// The screening demo's files, by name: an invented scenario (the Heron Quay screening bench, 40
/// fragments against the invented hydrolase "quaylase"), a 384-well plate read every 20 s for
/// 10 min. One sample well carries extra noise (a bubble the screener saw and excluded), another
/// a smaller noise burst left to platekin's flags.
pub fn heron_quay_demo_files() -> Result<Vec<(&'static str, String)>, super::SimulationError> {
    let mut screen = screen_plate(PlateFormat::Wells384, 40, 8, 31, 20_261_203);
    let rename = |text: &str| text.replace("CPD-", "HQF-");
    screen.layout_csv = format!(
        "# Heron Quay screening bench (invented): quaylase against 40 fragments, 8 doses each\n{}",
        rename(&screen.layout_csv)
    );
    for variant in &mut screen.spec.variants {
        variant.name = rename(&variant.name);
    }
    for group in &mut screen.spec.layout {
        if let Some(variant) = &group.condition.variant {
            group.condition.variant = Some(rename(variant));
        }
    }
    screen.spec.run_name = "Heron Quay quaylase fragment screen".to_string();
    screen.spec.metadata = [
        ("Run", "Heron Quay quaylase fragment screen"),
        ("Lab", "Heron Quay screening bench (invented)"),
        ("Enzyme", "quaylase, 2 nM (invented)"),
        ("Plate", "384 wells"),
        ("Wavelength [nm]", "410"),
        ("Read interval [s]", "20"),
        ("Note", "simulated demo data; every name and value is invented"),
    ]
    .iter()
    .map(|(key, value)| (key.to_string(), value.to_string()))
    .collect();
    screen.spec.defects = vec![
        (
            WellId::new(6, 8),
            super::PlantedDefect::ExtraNoise { factor: 12.0 },
        ),
        (
            WellId::new(11, 14),
            super::PlantedDefect::ExtraNoise { factor: 3.0 },
        ),
    ];
    let plate = super::simulate(&screen.spec)?;
    let data = super::wide_csv(&plate, &super::WideCsvOptions::default());
    Ok(vec![
        ("heron-quay-screen-wide.csv", data),
        ("heron-quay-screen-layout.csv", screen.layout_csv),
        (
            "heron-quay-screen-exclude.csv",
            "# wells the screener left out at the bench\nwell,reason\nG9,bubble over the well from read 3 (seen at the bench)\n".to_string(),
        ),
        (
            "heron-quay-screen-assay.toml",
            "# Heron Quay quaylase fragment screen (invented): run with\n# platekin run heron-quay-screen-wide.csv --assay heron-quay-screen-assay.toml --out heron-quay-results\nlayout = \"heron-quay-screen-layout.csv\"\nexclude = \"heron-quay-screen-exclude.csv\"\n# Km of quaylase for its substrate under the screen's conditions (uM, the layout's substrate unit):\n# gives the Cheng-Prusoff Ki, an assumption that each fragment competes with the substrate\ncheng-prusoff-km = 40\n".to_string(),
        ),
    ])
}
