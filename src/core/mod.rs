//! The bottom layer: what every other layer may use and which uses nothing of platekin's own.
//! Cells with their positions, plate geometry, units, the shared statistics (median, mean and SD,
//! straight-line fits, t and F quantiles, AICc, the extra-sum-of-squares F test) and the number
//! formatting and caution text every output shares. The core never prints, reads files or exits.

pub mod cells;
pub mod format;
pub mod geometry;
pub mod memory;
pub mod plate;
pub mod stats;
pub mod units;
