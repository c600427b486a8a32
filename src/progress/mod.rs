//! Progress-curve analysis: the whole curve of every well of a group fitted at once to an
//! integrated rate law, for when substrate depletion spoils initial rates.
//!
//! [`lambert`] holds the Lambert W / Wright omega evaluators (shared with the simulator),
//! [`closed_form`] the integrated Michaelis-Menten curve and its analytic derivatives, [`ode`] the
//! models with no closed form (product inhibition, enzyme inactivation) with forward sensitivities,
//! [`global_fit`] the shared-constant fit of a group's wells, and [`report`] the per-group reports
//! behind `progress.json` (when to run, model choice, which analysis to trust).

pub mod closed_form;
pub mod global_fit;
pub mod lambert;
pub mod ode;
pub mod report;
