//! Progress-curve analysis: the whole curve of every well of a group fitted at once to an
//! integrated rate law, for when substrate depletion spoils initial rates.
//!
//! [`lambert`] holds the Lambert W / Wright omega evaluators (shared with the simulator),
//! [`closed_form`] the integrated Michaelis-Menten curve and its analytic derivatives, [`ode`] the
//! models with no closed form (product inhibition, enzyme inactivation) with forward sensitivities,
//! and [`global_fit`] the shared-constant fit of a group's wells.

pub mod closed_form;
pub mod global_fit;
pub mod lambert;
pub mod ode;
