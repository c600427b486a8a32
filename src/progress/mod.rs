//! Progress-curve analysis: the whole curve of every well of a group fitted at once to an
//! integrated rate law, for when substrate depletion spoils initial rates.
//!
//! The integrated Michaelis-Menten curve and its analytic derivatives live in
//! [`crate::fit::integrated`] (with the Lambert W / Wright omega evaluators); [`ode`] holds the
//! models with no closed form
//! (product inhibition, enzyme inactivation) with forward sensitivities, [`global_fit`] the
//! shared-constant fit of a group's wells, [`choice`] the model choice, [`trust`] the decision on
//! which analysis to trust, and [`analysis`] the per-group analysis behind `progress.json`.

pub mod analysis;
pub mod choice;
pub mod global_fit;
pub mod ode;
pub mod trust;
