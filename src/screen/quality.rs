//! Plate quality from its screening controls: the Z'-factor, the signal window, the
//! signal-to-background ratio, each control's CV and n, and an edge check.
//!
//! - Z' = 1 - 3 (SD_u + SD_i) / |mean_u - mean_i| (Zhang, Chung and Oldenburg 1999, J Biomol Screen
//!   4:67), with the sample SDs (n - 1) of each control's rates; Z' >= 0.5 is the usual bar for a
//!   screen-ready assay (common practice).
//! - Signal window SW = (|mean_u - mean_i| - 3 (SD_u + SD_i)) / SD_u (Iversen et al. 2006, J Biomol
//!   Screen 11:247; volume and page from memory): the gap between the controls' 3-SD bands in units
//!   of the uninhibited SD.
//! - Signal-to-background S/B = mean_u / mean_i, only when the inhibited mean is positive and more
//!   than three standard errors from zero (a rate near zero makes the ratio meaningless; Z' and SW
//!   stay valid).
//! - CV = 100 SD / |mean| of each control, under the same condition on its mean.
//! - Edge check: each control's wells on the outer rows and columns against its inner wells, the
//!   difference of their means in % of the control window (mean_u - mean_i); a difference of
//!   [`EDGE_LIMIT_PERCENT`] or more is flagged (the project's threshold: evaporation and
//!   temperature gradients act first on the edge wells).

use serde::{Deserialize, Serialize};

use crate::core::plate::{PlateFormat, WellId};
use crate::core::stats::summary;
use crate::layout::Role;

/// The Z' below which a plate is not screen-ready (common practice).
pub const Z_PRIME_BAR: f64 = 0.5;

/// An edge-inner difference of this many % of the control window or more is flagged.
pub const EDGE_LIMIT_PERCENT: f64 = 10.0;

/// The Z'-factor of a plate with the summaries it was computed from.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ZPrime {
    /// Z'.
    pub value: f64,
    /// Mean rate of the positive controls.
    pub positive_mean: f64,
    /// SD of the positive controls' rates.
    pub positive_sd: f64,
    /// Positive controls with a rate.
    pub positive_n: usize,
    /// Mean rate of the negative controls.
    pub negative_mean: f64,
    /// SD of the negative controls' rates.
    pub negative_sd: f64,
    /// Negative controls with a rate.
    pub negative_n: usize,
}

/// Z' from the two controls' rates; `None` with fewer than two of either, or when the means
/// coincide.
pub fn z_prime(positive: &[f64], negative: &[f64]) -> Option<ZPrime> {
    if positive.len() < 2 || negative.len() < 2 {
        return None;
    }
    let positive_summary = summary(positive)?;
    let negative_summary = summary(negative)?;
    let (positive_sd, negative_sd) = (positive_summary.sd?, negative_summary.sd?);
    let separation = (positive_summary.mean - negative_summary.mean).abs();
    if separation.is_nan() || separation <= 0.0 {
        return None;
    }
    let value = 1.0 - 3.0 * (positive_sd + negative_sd) / separation;
    value.is_finite().then_some(ZPrime {
        value,
        positive_mean: positive_summary.mean,
        positive_sd,
        positive_n: positive.len(),
        negative_mean: negative_summary.mean,
        negative_sd,
        negative_n: negative.len(),
    })
}

/// One control's rates summarised.
#[derive(Debug, Clone, PartialEq)]
pub struct ControlSummary {
    /// Used wells with a rate.
    pub n: usize,
    /// Their mean rate.
    pub mean: Option<f64>,
    /// Their sample SD.
    pub sd: Option<f64>,
    /// 100 SD / |mean|.
    pub cv_percent: Option<f64>,
}

impl ControlSummary {
    /// The summary of some rates.
    pub fn of(rates: &[f64]) -> ControlSummary {
        let found = summary(rates);
        let mean = found.map(|s| s.mean);
        let sd = found.and_then(|s| s.sd);
        ControlSummary {
            n: rates.len(),
            mean,
            sd,
            cv_percent: mean
                .zip(sd)
                .filter(|(mean, sd)| clearly_away_from_zero(*mean, *sd, rates.len()))
                .map(|(mean, sd)| 100.0 * sd / mean.abs()),
        }
    }
}

/// Edge wells against inner wells of one control.
#[derive(Debug, Clone, PartialEq)]
pub struct EdgeCheck {
    /// Which control.
    pub role: Role,
    /// Edge wells and their mean rate.
    pub edge: (usize, f64),
    /// Inner wells and their mean rate.
    pub inner: (usize, f64),
    /// (edge mean - inner mean) in % of the control window.
    pub difference_percent: f64,
    /// At or beyond [`EDGE_LIMIT_PERCENT`].
    pub flagged: bool,
}

/// The plate's quality figures.
#[derive(Debug, Clone, PartialEq)]
pub struct PlateQuality {
    /// The uninhibited controls.
    pub uninhibited: ControlSummary,
    /// The inhibited controls.
    pub inhibited: ControlSummary,
    /// Z' with what it was computed from.
    pub z_prime: Option<ZPrime>,
    /// The signal window.
    pub signal_window: Option<f64>,
    /// Signal-to-background.
    pub signal_to_background: Option<f64>,
    /// Edge checks (controls with at least two edge and two inner wells).
    pub edge: Vec<EdgeCheck>,
}

impl PlateQuality {
    /// Whether Z' is below [`Z_PRIME_BAR`] (or could not be computed).
    pub fn below_bar(&self) -> bool {
        self.z_prime.as_ref().is_none_or(|z| z.value < Z_PRIME_BAR)
    }
}

/// Whether a mean lies more than three standard errors from zero: a CV or a ratio over a mean
/// that does not is noise over noise (fully inhibited controls have rates near zero by design).
fn clearly_away_from_zero(mean: f64, sd: f64, n: usize) -> bool {
    n > 0 && mean.abs() > 3.0 * sd / (n as f64).sqrt()
}

/// A control well and its rate.
type ControlRate = (WellId, f64);

fn is_edge(well: WellId, plate: PlateFormat) -> bool {
    well.row == 0
        || well.column == 0
        || well.row + 1 == plate.n_rows()
        || well.column + 1 == plate.n_columns()
}

/// The quality figures of the used control rates, `(well, rate)` for each control.
pub fn plate_quality(
    uninhibited: &[(WellId, f64)],
    inhibited: &[(WellId, f64)],
    plate: PlateFormat,
) -> PlateQuality {
    let rates = |wells: &[(WellId, f64)]| wells.iter().map(|(_, rate)| *rate).collect::<Vec<f64>>();
    let (u_rates, i_rates) = (rates(uninhibited), rates(inhibited));
    let u = ControlSummary::of(&u_rates);
    let i = ControlSummary::of(&i_rates);
    let z = z_prime(&u_rates, &i_rates);
    let signal_window = match (u.mean, u.sd, i.mean, i.sd) {
        (Some(mu), Some(su), Some(mi), Some(si)) if su > 0.0 => {
            Some(((mu - mi).abs() - 3.0 * (su + si)) / su)
        }
        _ => None,
    };
    let signal_to_background = match (u.mean, i.mean, i.sd) {
        (Some(mu), Some(mi), Some(si)) if mi > 0.0 && clearly_away_from_zero(mi, si, i.n) => Some(mu / mi),
        _ => None,
    };
    let window = u.mean.zip(i.mean).map(|(mu, mi)| mu - mi).filter(|w| *w != 0.0);
    let mut edge = Vec::new();
    if let Some(window) = window {
        for (role, wells) in [(Role::Uninhibited, uninhibited), (Role::Inhibited, inhibited)] {
            let (outer, inner): (Vec<&ControlRate>, Vec<&ControlRate>) =
                wells.iter().partition(|(well, _)| is_edge(*well, plate));
            if outer.len() < 2 || inner.len() < 2 {
                continue;
            }
            let mean =
                |wells: &[&(WellId, f64)]| wells.iter().map(|(_, r)| r).sum::<f64>() / wells.len() as f64;
            let (edge_mean, inner_mean) = (mean(&outer), mean(&inner));
            let difference_percent = 100.0 * (edge_mean - inner_mean) / window;
            edge.push(EdgeCheck {
                role,
                edge: (outer.len(), edge_mean),
                inner: (inner.len(), inner_mean),
                difference_percent,
                flagged: difference_percent.abs() >= EDGE_LIMIT_PERCENT,
            });
        }
    }
    PlateQuality {
        uninhibited: u,
        inhibited: i,
        z_prime: z,
        signal_window,
        signal_to_background,
        edge,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    #[test]
    fn z_prime_follows_the_published_formula() {
        // Zhang, Chung and Oldenburg 1999: Z' = 1 - 3 (sd_p + sd_n) / |mean_p - mean_n|. Positive
        // controls 98, 100, 102 (mean 100, SD 2); negative 9, 10, 11 (mean 10, SD 1): 1 - 9/90.
        let z = z_prime(&[98.0, 100.0, 102.0], &[9.0, 10.0, 11.0]).unwrap();
        assert_relative_eq!(z.value, 0.9, epsilon = 1e-12);
        assert_relative_eq!(z.positive_sd, 2.0, epsilon = 1e-12);
        assert_eq!((z.positive_n, z.negative_n), (3, 3));
        // Overlapping controls give a negative Z'; the formula is symmetric in the two.
        let overlapping = z_prime(&[1.0, 3.0], &[2.0, 4.0]).unwrap();
        assert!(overlapping.value < 0.0);
        assert_relative_eq!(
            z_prime(&[2.0, 4.0], &[1.0, 3.0]).unwrap().value,
            overlapping.value,
            epsilon = 1e-12
        );
    }

    #[test]
    fn too_few_controls_or_equal_means_give_none() {
        assert!(z_prime(&[1.0], &[0.0, 0.1]).is_none());
        assert!(z_prime(&[1.0, 1.0], &[1.0, 1.0]).is_none());
    }

    #[test]
    fn quality_figures_by_hand() {
        // Hand computation: uninhibited 98, 100, 102 (mean 100, SD 2, CV 2%), inhibited 9, 10, 11
        // (mean 10, SD 1, CV 10%). Z' = 1 - 3 x 3 / 90 = 0.9; SW = (90 - 9) / 2 = 40.5;
        // S/B = 100 / 10 = 10.
        let well = |text: &str| WellId::parse(text).unwrap();
        let u = [(well("A1"), 98.0), (well("B1"), 100.0), (well("C1"), 102.0)];
        let i = [(well("A2"), 9.0), (well("B2"), 10.0), (well("C2"), 11.0)];
        let quality = plate_quality(&u, &i, PlateFormat::Wells96);
        assert_relative_eq!(quality.z_prime.as_ref().unwrap().value, 0.9, epsilon = 1e-12);
        assert_relative_eq!(quality.signal_window.unwrap(), 40.5, epsilon = 1e-12);
        assert_relative_eq!(quality.signal_to_background.unwrap(), 10.0, epsilon = 1e-12);
        assert_relative_eq!(quality.uninhibited.cv_percent.unwrap(), 2.0, epsilon = 1e-12);
        assert_relative_eq!(quality.inhibited.cv_percent.unwrap(), 10.0, epsilon = 1e-12);
        assert!(!quality.below_bar());
        // A1 is an edge well, B1 and C1 inner: too few edge wells for a check.
        assert!(quality.edge.is_empty());
        // Edge wells A5 and H5 read 10 higher than inner B5, C5: 10 / 95 of the window.
        let u = [
            (well("A5"), 110.0),
            (well("H5"), 110.0),
            (well("B5"), 100.0),
            (well("C5"), 100.0),
        ];
        let quality = plate_quality(&u, &i, PlateFormat::Wells96);
        let check = &quality.edge[0];
        assert_eq!(check.role, Role::Uninhibited);
        assert_relative_eq!(check.difference_percent, 100.0 * 10.0 / 95.0, epsilon = 1e-9);
        assert!(check.flagged);
        // An inhibited mean at or below zero has no signal-to-background.
        let i = [(well("A2"), -0.5), (well("B2"), 0.2), (well("C2"), 0.1)];
        assert!(plate_quality(&u, &i, PlateFormat::Wells96)
            .signal_to_background
            .is_none());
    }
}
