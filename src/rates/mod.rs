//! Initial rates: the straight-line fits over growing windows ([`window_fit`]), the window rule and
//! the per-well flags ([`well`]), the plate analysis that puts each well's corrected signal through
//! them and subtracts the no-enzyme background ([`plate`]), and the per-condition table
//! ([`conditions`]).

pub mod conditions;
pub mod plate;
pub mod well;
pub mod window_fit;

pub use plate::*;
pub use well::*;
