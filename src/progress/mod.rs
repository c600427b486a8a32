//! Progress-curve analysis: the whole curve of every well of a group fitted at once to an
//! integrated rate law, for when substrate depletion spoils initial rates.
//!
//! [`lambert`] holds the Lambert W / Wright omega evaluators, [`closed_form`] the integrated
//! Michaelis-Menten curve and its analytic derivatives, [`ode`] the models with no closed form
//! (product inhibition, enzyme inactivation) with forward sensitivities, [`global_fit`] the
//! shared-constant fit of a group's wells, [`choice`] the model choice, [`trust`] the decision on
//! which analysis to trust, and [`analysis`] the per-group analysis behind `progress.json`.

pub mod analysis;
pub mod choice;
pub mod closed_form;
pub mod global_fit;
pub mod lambert;
pub mod ode;
pub mod trust;
