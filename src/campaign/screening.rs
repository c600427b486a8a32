//! Plate quality from its controls: the Z'-factor of the positive and negative control wells'
//! rates.
//!
//! Z' = 1 - 3 (SD_p + SD_n) / |mean_p - mean_n| (Zhang, Chung and Oldenburg 1999, J Biomol Screen
//! 4:67), with the sample SDs (n - 1) of each control's rates. Z' >= 0.5 is the usual bar for a
//! screen-ready assay (common practice). The controls are the layout's wells whose `control`
//! factor reads `positive` (full activity) or `negative` (none: no enzyme, or fully inhibited);
//! a plate without at least two of each has no Z'.

// The formula lives with the single-plate screen's quality figures; a campaign reuses it.
pub use crate::screen::quality::{z_prime, ZPrime};

// The control marks belong to the layout: the group fits leave such wells out as well.
pub use crate::layout::{ControlKind, CONTROL_FACTOR};

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn control_kinds_are_read_from_the_factor() {
        assert_eq!(
            ControlKind::from_factor(" Positive "),
            Some(ControlKind::Positive)
        );
        assert_eq!(ControlKind::from_factor("neg"), Some(ControlKind::Negative));
        assert_eq!(ControlKind::from_factor("sample"), None);
    }
}
