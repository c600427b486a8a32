//! Plate quality from its controls: the Z'-factor of the positive and negative control wells'
//! rates.
//!
//! Z' = 1 - 3 (SD_p + SD_n) / |mean_p - mean_n| (Zhang, Chung and Oldenburg 1999, J Biomol Screen
//! 4:67), with the sample SDs (n - 1) of each control's rates. Z' >= 0.5 is the usual bar for a
//! screen-ready assay (common practice). The controls are the layout's wells whose `control`
//! factor reads `positive` (full activity) or `negative` (none: no enzyme, or fully inhibited);
//! a plate without at least two of each has no Z'.

use serde::{Deserialize, Serialize};

use crate::core::stats::summary;

/// The layout factor that marks control wells.
pub const CONTROL_FACTOR: &str = "control";

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

/// Which control a well is, from its `control` factor (case and spaces ignored).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ControlKind {
    /// Full activity.
    Positive,
    /// No activity.
    Negative,
}

impl ControlKind {
    /// The kind a factor value names, if any.
    pub fn from_factor(value: &str) -> Option<ControlKind> {
        match value.trim().to_ascii_lowercase().as_str() {
            "positive" | "pos" | "+" => Some(ControlKind::Positive),
            "negative" | "neg" | "-" => Some(ControlKind::Negative),
            _ => None,
        }
    }
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
        assert_eq!(
            ControlKind::from_factor(" Positive "),
            Some(ControlKind::Positive)
        );
        assert_eq!(ControlKind::from_factor("neg"), Some(ControlKind::Negative));
        assert_eq!(ControlKind::from_factor("sample"), None);
    }
}
