//! Inhibitor screens and dose-response plates: % activity of every sample from its plate's
//! controls, the plate's quality figures ([`quality`]), and one dose-response curve per compound
//! (`fit::dose_response`).
//!
//! A plate is a screen when its layout has `uninhibited` or `inhibited` wells; its samples then
//! name their compound in the compound factor (`compound`, or `--compound-column NAME`). Then:
//! - % activity = 100 (v - mean_i) / (mean_u - mean_i), with the used rates of the uninhibited
//!   (100%) and inhibited (0%) controls of the same plate and, where a factor splits the controls
//!   (a factor some control wells carry a value of, other than the compound), of the same value of
//!   that factor (DOMAIN notes, "Screening plates"). The controls' means are taken as exact.
//! - Near-zero and negative rates are data: a sample's `weak` flag never leaves it out (see
//!   `rates::well`), and % activity below 0 or above 100 is kept as measured.
//! - Each compound's used samples give % activity against the `inhibitor` dose, fitted by the
//!   four-parameter logistic on log dose (`fit::dose_response` states the plateau rule, the bounds
//!   and the flags).
//! - With `--cheng-prusoff-km` and one substrate concentration among the samples, Ki = IC50 /
//!   (1 + [S]/Km) (Cheng and Prusoff 1973, Biochem Pharmacol 22:3099), which holds only for a
//!   competitive inhibitor under rapid equilibrium with [I] >> [E]: an assumption, labelled so.
//!
//! Bad input is refused naming the layout file, row and well: controls missing, a sample without
//! matching controls, a sample without compound or positive dose, a compound with one dose.

pub mod quality;

use std::collections::{BTreeMap, BTreeSet};

use rayon::prelude::*;

use crate::config::ScreenSettings;
use crate::core::cells::{Position, Source};
use crate::core::plate::{PlateFormat, WellId};
use crate::core::units::ConcentrationUnit;
use crate::fit::dose_response::{fit_dose_response, CurveFlag, DoseResponseFit, Ic50Qualifier};
use crate::layout::{Layout, Role};
use crate::rates::PlateAnalysis;
use quality::{plate_quality, PlateQuality};

/// Why a screening plate cannot be analysed. Each names the layout file and, where one is
/// concerned, the row and well.
#[derive(Debug, thiserror::Error)]
pub enum ScreenError {
    /// A control role is missing altogether.
    #[error("{layout}: a screening plate needs `uninhibited` (100% activity) and `inhibited` (0% activity) control wells; no well is `{missing}`")]
    ControlsMissing {
        /// The layout.
        layout: Source,
        /// The role no well has.
        missing: Role,
    },
    /// Fewer than two used control rates of one kind.
    #[error(
        "{layout}: only {n} `{role}` control well(s) have a usable rate; % activity and Z' need at least two"
    )]
    TooFewControls {
        /// The layout.
        layout: Source,
        /// Which control.
        role: Role,
        /// How many are usable.
        n: usize,
    },
    /// A sample whose group has no controls of one kind.
    #[error("{position}: well {well} ({group}) has no `{role}` control with a usable rate in its group, so its activity has no reference")]
    NoControlsForWell {
        /// The sample's cell in the layout.
        position: Position,
        /// The well.
        well: WellId,
        /// The group, as factor values.
        group: String,
        /// The missing control.
        role: Role,
    },
    /// The compound factor is not in the layout.
    #[error("{layout}: no column '{name}' names the compounds (give a `compound` column, or --compound-column NAME)")]
    NoCompoundColumn {
        /// The layout.
        layout: Source,
        /// The column looked for.
        name: String,
    },
    /// A sample without compound.
    #[error("{position}: sample well {well} names no compound (column '{column}')")]
    NoCompound {
        /// Its cell.
        position: Position,
        /// The well.
        well: WellId,
        /// The compound column.
        column: String,
    },
    /// A sample without a positive dose.
    #[error("{position}: sample well {well} of compound '{compound}' has no positive inhibitor dose (vehicle wells are `uninhibited` controls)")]
    NoDose {
        /// Its cell.
        position: Position,
        /// The well.
        well: WellId,
        /// The compound.
        compound: String,
    },
    /// A compound tested at one dose only.
    #[error("{position}: compound '{compound}' is tested at one dose only (wells {wells}); a dose-response curve needs at least two")]
    OneDose {
        /// The first well's cell.
        position: Position,
        /// The compound.
        compound: String,
        /// Its wells.
        wells: String,
    },
}

/// One compound's result.
#[derive(Debug, Clone, PartialEq)]
pub struct CompoundResult {
    /// The compound's name as the layout writes it.
    pub name: String,
    /// (well, dose, % activity, used) of every sample well of the compound with a rate.
    pub points: Vec<(WellId, f64, f64, bool)>,
    /// The fit of the used points.
    pub fit: DoseResponseFit,
    /// Cheng-Prusoff Ki (inhibitor unit), when Km and [S] are known.
    pub ki: Option<f64>,
}

impl CompoundResult {
    /// The IC50 (or its bound) in the inhibitor unit.
    pub fn ic50(&self) -> f64 {
        10f64.powf(self.fit.log_ic50)
    }

    /// The IC50's profile interval in the inhibitor unit.
    pub fn ic50_ci95(&self) -> [Option<f64>; 2] {
        self.fit.log_ic50_ci95.map(|end| end.map(|x| 10f64.powf(x)))
    }
}

/// What the Cheng-Prusoff conversion used.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ChengPrusoff {
    /// Km, substrate unit.
    pub km: f64,
    /// [S], substrate unit.
    pub substrate: f64,
}

/// Everything a screening plate gives.
#[derive(Debug, Clone, PartialEq)]
pub struct ScreenAnalysis {
    /// The factor naming compounds.
    pub compound_column: String,
    /// % activity of every sample and control well with a rate.
    pub activity: BTreeMap<WellId, f64>,
    /// The plate's quality figures.
    pub quality: PlateQuality,
    /// One result per compound, ranked: `<` first, then `=` by IC50, then `>`.
    pub compounds: Vec<CompoundResult>,
    /// The unit of doses and IC50s.
    pub inhibitor_unit: Option<ConcentrationUnit>,
    /// The Cheng-Prusoff conversion, when it applies.
    pub cheng_prusoff: Option<ChengPrusoff>,
    /// The factors that split the controls into groups.
    pub control_factors: Vec<String>,
    /// The plate format (for the heat map).
    pub plate: PlateFormat,
}

/// Whether the layout describes a screening plate: it has `uninhibited` or `inhibited` wells. A
/// `compound` factor alone does not make one (it still splits rate-law groups, as any factor).
pub fn is_screen(layout: &Layout) -> bool {
    layout
        .wells
        .values()
        .any(|setup| setup.role.is_screening_control())
}

fn compound_factor(layout: &Layout, settings: &ScreenSettings) -> Option<String> {
    layout
        .factor_names
        .iter()
        .find(|name| name.trim().eq_ignore_ascii_case(settings.compound_column.trim()))
        .cloned()
}

/// Analyses a screening plate (module docs). `cheng_prusoff_km` is in the substrate unit.
pub fn analyse_screen(
    analysis: &PlateAnalysis,
    layout: &Layout,
    settings: &ScreenSettings,
    cheng_prusoff_km: Option<f64>,
    plate: PlateFormat,
) -> Result<ScreenAnalysis, ScreenError> {
    for role in [Role::Uninhibited, Role::Inhibited] {
        if layout.wells_with_role(role).next().is_none() {
            return Err(ScreenError::ControlsMissing {
                layout: layout.source.clone(),
                missing: role,
            });
        }
    }
    let compound_column = compound_factor(layout, settings).ok_or_else(|| ScreenError::NoCompoundColumn {
        layout: layout.source.clone(),
        name: settings.compound_column.clone(),
    })?;
    // The factors that split the controls: those some control well carries a value of.
    let control_factors: Vec<String> = layout
        .factor_names
        .iter()
        .filter(|name| **name != compound_column)
        .filter(|name| {
            layout.wells.values().any(|setup| {
                setup.role.is_screening_control()
                    && setup.factors.get(*name).is_some_and(|v| !v.trim().is_empty())
            })
        })
        .cloned()
        .collect();
    let group_of = |factors: &BTreeMap<String, String>| -> Vec<String> {
        control_factors
            .iter()
            .map(|name| {
                factors
                    .get(name)
                    .map(|v| v.trim().to_string())
                    .unwrap_or_default()
            })
            .collect()
    };
    // Used control rates per group and for the whole plate.
    let mut control_rates: BTreeMap<(Vec<String>, Role), Vec<f64>> = BTreeMap::new();
    let mut plate_controls: BTreeMap<Role, Vec<(WellId, f64)>> = BTreeMap::new();
    for well in &analysis.wells {
        let role = well.setup.role;
        if !role.is_screening_control() || !well.used {
            continue;
        }
        if let Some(rate) = well.rate_value {
            control_rates
                .entry((group_of(&well.setup.factors), role))
                .or_default()
                .push(rate);
            plate_controls.entry(role).or_default().push((well.well, rate));
        }
    }
    for role in [Role::Uninhibited, Role::Inhibited] {
        let n = plate_controls.get(&role).map_or(0, Vec::len);
        if n < 2 {
            return Err(ScreenError::TooFewControls {
                layout: layout.source.clone(),
                role,
                n,
            });
        }
    }
    let means: BTreeMap<(Vec<String>, Role), f64> = control_rates
        .iter()
        .map(|(key, rates)| (key.clone(), rates.iter().sum::<f64>() / rates.len() as f64))
        .collect();
    let group_text = |group: &[String]| -> String {
        if control_factors.is_empty() {
            "the plate".to_string()
        } else {
            control_factors
                .iter()
                .zip(group)
                .map(|(name, value)| format!("{name} = {value}"))
                .collect::<Vec<_>>()
                .join(", ")
        }
    };

    let mut activity = BTreeMap::new();
    let mut by_compound: BTreeMap<String, Vec<(WellId, f64, f64, bool)>> = BTreeMap::new();
    let mut doses_by_compound: BTreeMap<String, (Position, BTreeSet<u64>, Vec<WellId>)> = BTreeMap::new();
    for (well, setup) in layout.wells_with_role(Role::Sample) {
        let compound = setup
            .factors
            .get(&compound_column)
            .map(|v| v.trim().to_string())
            .unwrap_or_default();
        if compound.is_empty() {
            return Err(ScreenError::NoCompound {
                position: setup.position.clone(),
                well: *well,
                column: compound_column.clone(),
            });
        }
        let dose = setup.inhibitor.filter(|dose| dose.is_finite() && *dose > 0.0);
        let Some(dose) = dose else {
            return Err(ScreenError::NoDose {
                position: setup.position.clone(),
                well: *well,
                compound,
            });
        };
        let entry = doses_by_compound
            .entry(compound)
            .or_insert_with(|| (setup.position.clone(), BTreeSet::new(), Vec::new()));
        entry.1.insert(dose.to_bits());
        entry.2.push(*well);
    }
    for (compound, (position, doses, wells)) in &doses_by_compound {
        if doses.len() < 2 {
            return Err(ScreenError::OneDose {
                position: position.clone(),
                compound: compound.clone(),
                wells: wells.iter().map(WellId::to_string).collect::<Vec<_>>().join(" "),
            });
        }
    }
    for well in &analysis.wells {
        let role = well.setup.role;
        if role != Role::Sample && !role.is_screening_control() {
            continue;
        }
        let group = group_of(&well.setup.factors);
        let reference = |control: Role| means.get(&(group.clone(), control)).copied();
        let (high, low) = match (reference(Role::Uninhibited), reference(Role::Inhibited)) {
            (Some(high), Some(low)) => (high, low),
            (high, _) => {
                return Err(ScreenError::NoControlsForWell {
                    position: well.setup.position.clone(),
                    well: well.well,
                    group: group_text(&group),
                    role: if high.is_none() {
                        Role::Uninhibited
                    } else {
                        Role::Inhibited
                    },
                })
            }
        };
        let Some(rate) = well.rate_value else { continue };
        let percent = 100.0 * (rate - low) / (high - low);
        if !percent.is_finite() {
            continue;
        }
        activity.insert(well.well, percent);
        if role == Role::Sample {
            let compound = well
                .setup
                .factors
                .get(&compound_column)
                .map(|v| v.trim().to_string())
                .unwrap_or_default();
            let dose = well.setup.inhibitor.unwrap_or(f64::NAN);
            by_compound
                .entry(compound)
                .or_default()
                .push((well.well, dose, percent, well.used));
        }
    }

    let cheng_prusoff = cheng_prusoff_km.and_then(|km| {
        let substrates: BTreeSet<u64> = layout
            .wells_with_role(Role::Sample)
            .filter_map(|(_, setup)| setup.substrate.map(f64::to_bits))
            .collect();
        let single =
            (substrates.len() == 1).then(|| substrates.iter().next().map(|bits| f64::from_bits(*bits)));
        single.flatten().map(|substrate| ChengPrusoff { km, substrate })
    });
    let mut compounds: Vec<CompoundResult> = by_compound
        .into_par_iter()
        .map(|(name, points)| {
            let (doses, responses): (Vec<f64>, Vec<f64>) = points
                .iter()
                .filter(|(_, _, _, used)| *used)
                .map(|(_, dose, percent, _)| (*dose, *percent))
                .unzip();
            let fit = fit_dose_response(&doses, &responses).unwrap_or_else(|_| unfittable(&doses));
            let ic50 = 10f64.powf(fit.log_ic50);
            let ki = cheng_prusoff.map(|cp| ic50 / (1.0 + cp.substrate / cp.km));
            CompoundResult {
                name,
                points,
                fit,
                ki,
            }
        })
        .collect();
    compounds.sort_by(|a, b| {
        let rank = |q: Ic50Qualifier| match q {
            Ic50Qualifier::Below => 0,
            Ic50Qualifier::Equal => 1,
            Ic50Qualifier::Above => 2,
        };
        rank(a.fit.qualifier)
            .cmp(&rank(b.fit.qualifier))
            .then(a.fit.log_ic50.total_cmp(&b.fit.log_ic50))
            .then(a.name.cmp(&b.name))
    });
    let quality = plate_quality(
        plate_controls.get(&Role::Uninhibited).map_or(&[], Vec::as_slice),
        plate_controls.get(&Role::Inhibited).map_or(&[], Vec::as_slice),
        plate,
    );
    Ok(ScreenAnalysis {
        compound_column,
        activity,
        quality,
        compounds,
        inhibitor_unit: layout.inhibitor_unit,
        cheng_prusoff,
        control_factors,
        plate,
    })
}

/// A compound whose used wells span fewer than two doses (wells left out): no curve, the bound
/// taken at the highest dose and flagged `no-fit`.
fn unfittable(doses: &[f64]) -> DoseResponseFit {
    let highest = doses.iter().copied().fold(f64::NAN, f64::max);
    DoseResponseFit {
        parameters: None,
        top_fixed: true,
        bottom_fixed: true,
        qualifier: Ic50Qualifier::Above,
        log_ic50: if highest.is_finite() {
            highest.log10()
        } else {
            f64::NAN
        },
        log_ic50_ci95: [None, None],
        flags: vec![CurveFlag::NoFit],
        n_points: doses.len(),
        n_doses: doses.iter().map(|d| d.to_bits()).collect::<BTreeSet<_>>().len(),
        residual_sd: None,
    }
}
