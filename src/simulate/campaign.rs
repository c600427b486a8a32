//! An invented campaign for `platekin batch`: the Cobble Lane glimmerase campaign, 30 plates over
//! three days, for the demo folder, the integration tests and the timing example. Everything is
//! invented: the lab, the enzyme "glimmerase", its variants, the operators, the substrate lots.
//!
//! Each plate is the same 96-well layout: rows A-H a substrate series (15-1920 uM); columns 1-3
//! GlmA-wt (5 nM) and 4-6 GlmA-K41R (30 nM) in triplicate; column 7 no-enzyme controls at every
//! substrate; A8 C8 E8 G8 buffer blanks; column 9 positive controls (GlmA-wt at the top substrate)
//! and column 10 negative controls (no enzyme at the top substrate), marked in the layout's
//! `control` column for the Z'-factor. The active enzyme differs by plate: a day factor (1.00,
//! 0.90, 0.82: the stock loses activity) times a plate factor drawn around 1 (SD 4%), applied to
//! kcat, while the layout states the nominal enzyme, so the truth is kcat x activity per plate
//! and one Km per variant. Each well's substrate carries a 2% pipetting error and the reader's
//! noise is 0.0015 AU.

use std::fmt::Write as _;
use std::path::{Path, PathBuf};

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, Normal};

use super::demo::demo_bench_spec;
use super::writers::{wide_csv, WideCsvOptions};
use super::{
    simulate, LayoutGroup, SimulatedPlate, SimulationError, SimulationSpec, VariantKinetics, WellCondition,
};
use crate::core::plate::{row_label, PlateFormat};

/// The substrate series, uM, one plate row each (A = lowest): about 0.13-16 x Km of GlmA-wt.
pub const CAMPAIGN_SUBSTRATE_UM: [f64; 8] = [15.0, 30.0, 60.0, 120.0, 240.0, 480.0, 960.0, 1920.0];
/// True kcat of GlmA-wt at full activity, 1/s.
pub const WILD_TYPE_KCAT: f64 = 9.0;
/// True Km of GlmA-wt, uM.
pub const WILD_TYPE_KM: f64 = 120.0;
/// True kcat of GlmA-K41R at full activity, 1/s.
pub const VARIANT_KCAT: f64 = 3.0;
/// True Km of GlmA-K41R, uM.
pub const VARIANT_KM: f64 = 400.0;
/// The enzyme's activity on each day, relative to the first.
pub const DAY_ACTIVITY: [f64; 3] = [1.0, 0.90, 0.82];
/// SD of a plate's activity factor around its day's activity (relative).
pub const PLATE_ACTIVITY_SD: f64 = 0.04;
/// Operators by day (invented).
const OPERATORS: [&str; 3] = ["Ines", "Tomas", "Wren"];
/// Seed of the campaign.
pub const CAMPAIGN_SEED: u64 = 20_240_917;

/// One plate of the campaign.
#[derive(Debug, Clone)]
pub struct CampaignPlate {
    /// Its id (`d1-p01`).
    pub plate: String,
    /// Day of the campaign (1-3).
    pub day: usize,
    /// Who ran it.
    pub operator: &'static str,
    /// The substrate lot.
    pub lot: &'static str,
    /// Active enzyme relative to nominal.
    pub activity: f64,
    /// The plate to simulate.
    pub spec: SimulationSpec,
}

/// The campaign's layout as a tidy CSV with the `control` column.
pub fn campaign_layout_csv() -> String {
    let mut text = String::from("well,role,substrate [uM],enzyme [nM],variant,control\n");
    for (row, substrate) in CAMPAIGN_SUBSTRATE_UM.iter().enumerate() {
        let letter = row_label(row as u16);
        let _ = writeln!(text, "{letter}1:{letter}3,sample,{substrate},5,GlmA-wt,");
        let _ = writeln!(text, "{letter}4:{letter}6,sample,{substrate},30,GlmA-K41R,");
        let _ = writeln!(text, "{letter}7,no-enzyme,{substrate},,,");
    }
    text.push_str("A8 C8 E8 G8,blank,,,,\n");
    let top = CAMPAIGN_SUBSTRATE_UM[CAMPAIGN_SUBSTRATE_UM.len() - 1];
    let _ = writeln!(text, "A9:H9,sample,{top},5,GlmA-wt,positive");
    let _ = writeln!(text, "A10:H10,no-enzyme,{top},,,negative");
    text
}

fn layout_groups() -> Vec<LayoutGroup> {
    let mut layout = Vec::new();
    for (row, &substrate) in CAMPAIGN_SUBSTRATE_UM.iter().enumerate() {
        let letter = row_label(row as u16);
        let group = |selection: String, condition: WellCondition| LayoutGroup { selection, condition };
        layout.push(group(
            format!("{letter}1:{letter}3"),
            WellCondition::sample(substrate, 5.0, "GlmA-wt"),
        ));
        layout.push(group(
            format!("{letter}4:{letter}6"),
            WellCondition::sample(substrate, 30.0, "GlmA-K41R"),
        ));
        layout.push(group(format!("{letter}7"), WellCondition::no_enzyme(substrate)));
    }
    let top = CAMPAIGN_SUBSTRATE_UM[CAMPAIGN_SUBSTRATE_UM.len() - 1];
    layout.push(LayoutGroup {
        selection: "A8 C8 E8 G8".into(),
        condition: WellCondition::blank(),
    });
    layout.push(LayoutGroup {
        selection: "A9:H9".into(),
        condition: WellCondition::sample(top, 5.0, "GlmA-wt"),
    });
    layout.push(LayoutGroup {
        selection: "A10:H10".into(),
        condition: WellCondition::no_enzyme(top),
    });
    layout
}

/// The day (0-2) of plate `index` of `n_plates`: the plates spread evenly over three days.
pub fn campaign_day(index: usize, n_plates: usize) -> usize {
    (index / n_plates.div_ceil(3).max(1)).min(2)
}

/// The campaign's plates: `n_plates` spread evenly over three days, `n_reads` reads every 10 s.
pub fn campaign_plates(n_plates: usize, n_reads: usize) -> Vec<CampaignPlate> {
    campaign_plates_seeded(n_plates, n_reads, CAMPAIGN_SEED)
}

/// The plates of another campaign of the same design, drawn from `seed` (plate activities,
/// pipetting and noise), for simulation studies over many campaigns.
pub fn campaign_plates_seeded(n_plates: usize, n_reads: usize, seed: u64) -> Vec<CampaignPlate> {
    let mut generator = ChaCha8Rng::seed_from_u64(seed);
    let jitter = Normal::new(1.0, PLATE_ACTIVITY_SD).ok();
    let per_day = n_plates.div_ceil(3).max(1);
    (0..n_plates)
        .map(|index| {
            let day = campaign_day(index, n_plates);
            let plate_factor = jitter.map_or(1.0, |normal| normal.sample(&mut generator));
            let activity = DAY_ACTIVITY[day] * plate_factor;
            let lot = if day < 2 { "L-0317" } else { "L-0402" };
            let plate = format!("d{}-p{:02}", day + 1, index - day * per_day + 1);
            let spec = SimulationSpec {
                run_name: format!("Cobble Lane glimmerase campaign, plate {plate}"),
                metadata: vec![
                    (
                        "Run".into(),
                        format!("Cobble Lane glimmerase campaign, plate {plate}"),
                    ),
                    ("Operator".into(), OPERATORS[day].into()),
                    ("Wavelength [nm]".into(), "405".into()),
                    (
                        "Note".into(),
                        "simulated campaign data; every name and value is invented".into(),
                    ),
                ],
                format: PlateFormat::Wells96,
                read_times_s: (0..n_reads).map(|read| read as f64 * 10.0).collect(),
                variants: vec![
                    VariantKinetics {
                        name: "GlmA-wt".into(),
                        kcat_per_s: WILD_TYPE_KCAT * activity,
                        km_um: WILD_TYPE_KM,
                        ki_um: None,
                    },
                    VariantKinetics {
                        name: "GlmA-K41R".into(),
                        kcat_per_s: VARIANT_KCAT * activity,
                        km_um: VARIANT_KM,
                        ki_um: None,
                    },
                ],
                layout: layout_groups(),
                defects: Vec::new(),
                // A realistic bench: 2% pipetting error in each well's substrate, a noisier reader.
                substrate_pipetting_cv: 0.02,
                noise_sd_au: 0.0015,
                seed: generator.random(),
                ..demo_bench_spec()
            };
            CampaignPlate {
                plate,
                day: day + 1,
                operator: OPERATORS[day],
                lot,
                activity,
                spec,
            }
        })
        .collect()
}

/// Why the campaign could not be written.
#[derive(Debug, thiserror::Error)]
pub enum CampaignWriteError {
    /// A plate could not be simulated.
    #[error("plate {plate}: {source}")]
    Simulation {
        /// The plate.
        plate: String,
        /// The simulator's reason.
        #[source]
        source: SimulationError,
    },
    /// A file could not be written.
    #[error("{path}: cannot write")]
    Io {
        /// The file.
        path: String,
        /// The system's reason.
        #[source]
        source: std::io::Error,
    },
}

/// A plate's wide CSV export.
pub fn plate_export(plate: &CampaignPlate) -> Result<String, CampaignWriteError> {
    let simulated: SimulatedPlate =
        simulate(&plate.spec).map_err(|source| CampaignWriteError::Simulation {
            plate: plate.plate.clone(),
            source,
        })?;
    Ok(wide_csv(&simulated, &WideCsvOptions::default()))
}

/// Writes the campaign into `folder`: `layout.csv`, `assay.toml`, one `PLATE.csv` export per plate
/// in `exports/`, and `manifest.csv` (data, layout, plate, day, operator, lot); returns the
/// manifest's path.
pub fn write_campaign(folder: &Path, plates: &[CampaignPlate]) -> Result<PathBuf, CampaignWriteError> {
    let write = |name: &str, text: &str| {
        let path = folder.join(name);
        if let Some(parent) = path.parent() {
            std::fs::create_dir_all(parent).map_err(|source| CampaignWriteError::Io {
                path: parent.display().to_string(),
                source,
            })?;
        }
        std::fs::write(&path, text).map_err(|source| CampaignWriteError::Io {
            path: path.display().to_string(),
            source,
        })
    };
    write("layout.csv", &campaign_layout_csv())?;
    write(
        "assay.toml",
        "# The Cobble Lane glimmerase campaign (invented): chromophore and well height.\nextinction = 16800\npathlength = 0.55\n",
    )?;
    let mut manifest = String::from("data,layout,plate,day,operator,lot\n");
    for plate in plates {
        write(&format!("exports/{}.csv", plate.plate), &plate_export(plate)?)?;
        let _ = writeln!(
            manifest,
            "exports/{0}.csv,layout.csv,{0},{1},{2},{3}",
            plate.plate, plate.day, plate.operator, plate.lot
        );
    }
    write("manifest.csv", &manifest)?;
    Ok(folder.join("manifest.csv"))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn plates_spread_over_three_days_with_their_activity() {
        let plates = campaign_plates(30, 20);
        assert_eq!(plates.len(), 30);
        assert_eq!(plates[0].plate, "d1-p01");
        assert_eq!(plates[29].plate, "d3-p10");
        assert_eq!(plates.iter().filter(|p| p.day == 2).count(), 10);
        let wild_type = &plates[15].spec.variants[0];
        assert!((wild_type.kcat_per_s / WILD_TYPE_KCAT - plates[15].activity).abs() < 1e-12);
        assert_eq!(wild_type.km_um, WILD_TYPE_KM);
        // The written layout and the simulated one hold the same wells.
        let layout = campaign_layout_csv();
        assert!(layout.contains("A9:H9,sample,1920,5,GlmA-wt,positive"));
        assert_eq!(layout_groups().len() + 1, layout.lines().count());
    }
}
