//! Initial rates: the straight-line and quadratic fits over growing windows ([`window_fit`]), the
//! window rule, the read noise and the per-well flags ([`well`]), the no-enzyme background
//! ([`background`]), the plate analysis that puts each well's signal through them ([`plate`]), and
//! the per-condition table ([`conditions`]).

pub mod background;
pub mod conditions;
pub mod plate;
pub mod well;
pub mod window_fit;

pub use plate::*;
pub use well::*;
