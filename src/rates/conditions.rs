//! The per-condition rate table: wells grouped by role, substrate, enzyme, inhibitor and the
//! layout's free factors, with n, n used, mean, SD, SEM, CV and a summary of the flags. Built with
//! polars (the wells become a DataFrame, partitioned by the grouping columns in plate order).

use std::collections::BTreeMap;

use polars::prelude::*;

use super::plate::{PlateAnalysis, WellResult};
use super::well::Flag;
use crate::core::stats::summary;
use crate::layout::{Layout, Role};

/// One condition's row.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct Condition {
    /// Role of the wells.
    pub role: Role,
    /// Substrate concentration (layout unit).
    pub substrate: Option<f64>,
    /// Enzyme concentration (layout unit).
    pub enzyme: Option<f64>,
    /// Inhibitor concentration (layout unit).
    pub inhibitor: Option<f64>,
    /// Free factors, by name.
    pub factors: BTreeMap<String, String>,
    /// Wells in the condition.
    pub n: usize,
    /// Wells whose rate was used.
    pub n_used: usize,
    /// Mean rate of the used wells.
    pub rate_mean: Option<f64>,
    /// Their SD (n_used >= 2).
    pub rate_sd: Option<f64>,
    /// Their SEM (n_used >= 2).
    pub rate_sem: Option<f64>,
    /// SD / |mean|, where the mean is more than twice its SEM away from zero (else none).
    pub cv: Option<f64>,
    /// How many of the condition's wells carry each flag.
    pub flags: BTreeMap<Flag, usize>,
}

/// Why the table could not be built (a polars failure; not reachable from user input).
#[derive(Debug, thiserror::Error)]
#[error("building the condition table failed: {0}")]
pub struct TableError(#[from] PolarsError);

fn role_order(role: Role) -> u8 {
    match role {
        Role::Sample => 0,
        Role::NoEnzyme => 1,
        Role::Blank => 2,
        Role::Standard => 3,
        Role::Empty => 4,
        Role::Uninhibited => 5,
        Role::Inhibited => 6,
    }
}

fn factor_column(name: &str) -> String {
    format!("factor:{name}")
}

/// The wells of a plate as a DataFrame with the grouping columns and `index` (the well's position
/// in `analysis.wells`), in the order conditions are listed (samples, no-enzyme, blanks; factors;
/// substrate).
pub fn wells_frame(analysis: &PlateAnalysis, layout: &Layout) -> Result<DataFrame, TableError> {
    let mut wells: Vec<(usize, &WellResult)> = analysis.wells.iter().enumerate().collect();
    wells.sort_by(|(_, a), (_, b)| {
        role_order(a.setup.role)
            .cmp(&role_order(b.setup.role))
            .then_with(|| a.setup.factors.cmp(&b.setup.factors))
            .then_with(|| {
                a.setup
                    .enzyme
                    .unwrap_or(-1.0)
                    .total_cmp(&b.setup.enzyme.unwrap_or(-1.0))
            })
            .then_with(|| {
                a.setup
                    .inhibitor
                    .unwrap_or(-1.0)
                    .total_cmp(&b.setup.inhibitor.unwrap_or(-1.0))
            })
            .then_with(|| {
                a.setup
                    .substrate
                    .unwrap_or(-1.0)
                    .total_cmp(&b.setup.substrate.unwrap_or(-1.0))
            })
            .then_with(|| a.well.cmp(&b.well))
    });
    let height = wells.len();
    let (indices, wells): (Vec<usize>, Vec<&WellResult>) = wells.into_iter().unzip();
    let mut columns = vec![
        Column::new(
            "role".into(),
            wells.iter().map(|w| w.setup.role.to_string()).collect::<Vec<_>>(),
        ),
        Column::new(
            "substrate".into(),
            wells.iter().map(|w| w.setup.substrate).collect::<Vec<_>>(),
        ),
        Column::new(
            "enzyme".into(),
            wells.iter().map(|w| w.setup.enzyme).collect::<Vec<_>>(),
        ),
        Column::new(
            "inhibitor".into(),
            wells.iter().map(|w| w.setup.inhibitor).collect::<Vec<_>>(),
        ),
    ];
    for name in &layout.factor_names {
        let values: Vec<String> = wells
            .iter()
            .map(|w| w.setup.factors.get(name).cloned().unwrap_or_default())
            .collect();
        columns.push(Column::new(factor_column(name).into(), values));
    }
    columns.push(Column::new(
        "index".into(),
        indices.iter().map(|&i| i as u64).collect::<Vec<_>>(),
    ));
    Ok(DataFrame::new(height, columns)?)
}

/// Groups the wells into conditions.
pub fn condition_table(analysis: &PlateAnalysis, layout: &Layout) -> Result<Vec<Condition>, TableError> {
    let frame = wells_frame(analysis, layout)?;
    if frame.height() == 0 {
        return Ok(Vec::new());
    }
    let mut keys: Vec<String> = vec![
        "role".into(),
        "substrate".into(),
        "enzyme".into(),
        "inhibitor".into(),
    ];
    keys.extend(layout.factor_names.iter().map(|name| factor_column(name)));
    let mut conditions = Vec::new();
    for part in frame.partition_by_stable(keys, true)? {
        let first_f64 =
            |name: &str| -> Result<Option<f64>, TableError> { Ok(part.column(name)?.f64()?.get(0)) };
        let mut factors = BTreeMap::new();
        for name in &layout.factor_names {
            let value = part
                .column(&factor_column(name))?
                .str()?
                .get(0)
                .unwrap_or_default()
                .to_string();
            factors.insert(name.clone(), value);
        }
        let members: Vec<&WellResult> = part
            .column("index")?
            .u64()?
            .iter()
            .flatten()
            .filter_map(|index| analysis.wells.get(index as usize))
            .collect();
        let used_rates: Vec<f64> = members
            .iter()
            .filter(|well| well.used)
            .filter_map(|well| well.rate_value)
            .collect();
        let Some(role) = members.first().map(|well| well.setup.role) else {
            continue;
        };
        let n_used = used_rates.len();
        let stats = summary(&used_rates);
        let mean = stats.map(|s| s.mean);
        let sd = stats.and_then(|s| s.sd);
        let sem = stats.and_then(|s| s.sem());
        // A CV means something only for a mean clearly away from zero: a blank's mean is zero
        // by construction, and its CV would be noise divided by noise.
        let cv = sd
            .zip(mean)
            .filter(|(_, mean)| sem.is_some_and(|sem| mean.abs() > 2.0 * sem))
            .map(|(sd, mean)| sd / mean.abs());
        let mut flags: BTreeMap<Flag, usize> = BTreeMap::new();
        for flag in members.iter().flat_map(|well| well.rate.flags.iter()) {
            *flags.entry(*flag).or_insert(0) += 1;
        }
        conditions.push(Condition {
            role,
            substrate: first_f64("substrate")?,
            enzyme: first_f64("enzyme")?,
            inhibitor: first_f64("inhibitor")?,
            factors,
            n: part.height(),
            n_used,
            rate_mean: mean,
            rate_sd: sd,
            rate_sem: sem,
            cv,
            flags,
        });
    }
    Ok(conditions)
}
