//! The global fit of a group's progress curves: every well shares kcat and Km (and 1/Kp or
//! k_inact when that model is chosen, and optionally one dead time), keeps its own S0 and E0 from
//! the layout and its own signal offset, and the residuals are in the signal units measured.
//!
//! Model: well i, read j: `y_ij = b_i + g_i S_i(t_j + t_dead; theta)`, where `g_i` is the signal per
//! unit substrate (`-epsilon l` for a product read, since P = S0 - S; `+epsilon l` for a
//! substrate read, in AU per concentration unit), `b_i` the well's offset and `S_i` the substrate
//! curve ([`crate::fit::integrated`] or [`super::ode`]).
//!
//! Variable projection: the offsets enter linearly, so for given theta each is the well's mean of
//! `y - g S`; substituting it leaves the projected residuals
//! `r_ij = (g_i S_ij - y_ij) - mean_j(g_i S_ij - y_ij)`, a problem in theta alone. The projector
//! (centring within each well) does not depend on theta, so the projected Jacobian is exactly the
//! centred model Jacobian (Golub and Pereyra's result in its simplest case) and the covariance of
//! theta from it equals the theta block of the full covariance (the Schur complement). The residual
//! variance counts the offsets: `s^2 = RSS / (n - p - m)` for n reads, p shared parameters and m
//! wells. The reduced problem (p <= 4 columns) goes to the Levenberg-Marquardt solver of
//! [`crate::fit::least_squares`]; kcat and Km are fitted as logarithms (kept positive).
//!
//! Start: each well's first reads give an initial slope v_i; over a log grid of Km from
//! min(S0)/20 to 20 max(S0), kcat = median_i v_i (Km + S0_i) / (S0_i E0_i), and the grid point with
//! the lowest residual sum of squares starts the fit. Extended models start from the
//! Michaelis-Menten optimum with the extra term at 0. A refit that follows an earlier fit (the
//! extended models after the plain one, the profiled refit, the calibration sensitivity's
//! perturbed inputs) starts from it instead ([`fit_group_from`]).
//!
//! Intervals: asymptotic `value +- t(0.975, n - p - m) se` (read-level, kept as
//! `ci95_asymptotic`); clustered by well (CR3, each well's leverage undone, plus the shared
//! errors of the blank and background) with t at its effective degrees of freedom
//! ([`WellLeverage`]; `t(0.975, m - 1)` when they cannot be had), the reported `ci95`; for Km also
//! the profile-likelihood interval, re-optimising the other shared parameters at each Km (Bates and
//! Watts 1988), calibrated by the well-clustered variance so that it means what the reported
//! interval means: `{Km : RSS_Km <= RSS_min (1 + c t^2 / (n - p - m))}` (t as the clustered
//! interval's) with
//! `c = var_clustered(Km) / var_read-level(Km)` (the profile keeps its shape, the clustered
//! variance sets its scale; Royall and Tsou 2003, J R Stat Soc B 65:391, from memory). Without a
//! clustered variance the read-level `F(0.95; 1, n - p - m)` stands in for `c t^2`, as before. Model choice: AICc with
//! k = p + m + 1 (the offsets and the variance count), and the extra-sum-of-squares F test of each
//! extended model against plain Michaelis-Menten. Per well: residual SD and the Wald-Wolfowitz runs
//! test on residual signs (too few runs means systematic misfit).
//!
//! Assumptions: independent, equal-variance Gaussian read noise within a group; S0 and E0 as the
//! layout says; the signal is linear in the species read (Beer-Lambert).
//!
//! References: Golub and Pereyra 1973, SIAM J Numer Anal 10:413 (variable projection);
//! Bates and Watts 1988, "Nonlinear Regression Analysis and Its Applications", Wiley (profile
//! intervals); Hurvich and Tsai 1989, Biometrika 76:297 (AICc); Wald and Wolfowitz 1940, Ann Math
//! Stat 11:147 (runs test); Duggleby 1995, Methods Enzymol 249:61 (global progress-curve fits).
//! Volume and page numbers from memory.

use nalgebra::DMatrix;
use rayon::prelude::*;

use super::ode::{integrate_curve, CurveConstants, OdeTolerances};
use crate::core::stats::{
    aicc, extra_sum_of_squares, f_quantile, mean, median, straight_line, t_quantile_975,
};
use crate::fit::integrated::michaelis_menten_point;
use crate::fit::{
    asymptotic_covariance, cluster_leverage_adjusted_covariance, cluster_robust_covariance,
    fit_least_squares, ClusterEffects, LeastSquaresOptions, LeverageAdjustment, ResidualModel,
};

/// One well's curve, ready to fit.
#[derive(Debug, Clone, PartialEq)]
pub struct WellCurve {
    /// The well's name, for messages.
    pub label: String,
    /// Read times as measured, s.
    pub times_s: Vec<f64>,
    /// Signal at those reads (blank-corrected), AU.
    pub signal: Vec<f64>,
    /// Starting substrate, concentration unit of the group.
    pub s0: f64,
    /// Enzyme, same concentration unit.
    pub e0: f64,
    /// d(signal)/d(substrate), AU per concentration unit (negative for a product read).
    pub signal_per_substrate: f64,
}

/// The rate laws a group can be fitted with.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, serde::Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum ProgressModel {
    /// Plain Michaelis-Menten, closed form.
    MichaelisMenten,
    /// Michaelis-Menten with competitive product inhibition (ODE).
    ProductInhibition,
    /// Michaelis-Menten with first-order enzyme inactivation (ODE).
    Inactivation,
}

impl ProgressModel {
    /// The name written in `progress.json`.
    pub fn name(self) -> &'static str {
        match self {
            ProgressModel::MichaelisMenten => "michaelis-menten",
            ProgressModel::ProductInhibition => "product-inhibition",
            ProgressModel::Inactivation => "inactivation",
        }
    }

    fn extra_parameter(self) -> Option<&'static str> {
        match self {
            ProgressModel::MichaelisMenten => None,
            ProgressModel::ProductInhibition => Some("inverse_Kp"),
            ProgressModel::Inactivation => Some("k_inact"),
        }
    }
}

/// The shape in time of an error shared by wells' signals.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum ErrorShape {
    /// `(t / t_scale)^power`, t the read time.
    Power {
        /// The power.
        power: i32,
        /// The time scale, s.
        t_scale: f64,
    },
    /// 1 at this read time, 0 elsewhere.
    AtTime(f64),
}

impl ErrorShape {
    fn at(self, t: f64) -> f64 {
        match self {
            ErrorShape::Power { power, t_scale } => (t / t_scale).powi(power),
            ErrorShape::AtTime(time) => {
                if (t - time).abs() <= 1e-9 * time.abs().max(1.0) {
                    1.0
                } else {
                    0.0
                }
            }
        }
    }
}

/// An error that several wells' signals share: a correction subtracted from them that was itself
/// estimated (the blank, the no-enzyme background). Its effect on well w's signal at read time t is
/// `well_weights[w] x shape(t)` per unit of the error.
#[derive(Debug, Clone, PartialEq)]
pub struct SharedSignalError {
    /// The error's weight on each well's signal, in the order of the fit's wells.
    pub well_weights: Vec<f64>,
    /// Its shape in time.
    pub shape: ErrorShape,
}

/// The shared errors of a group and their covariance; the fit adds what they do to its estimates,
/// `A C A^T` with `A = (J^T J)^-1 J^T L` (L the errors' loadings on the observations), to the
/// covariance clustered by well.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct SharedSignalErrors {
    /// The errors.
    pub errors: Vec<SharedSignalError>,
    /// Their covariance, one row and column per error.
    pub covariance: Vec<Vec<f64>>,
    /// The independent blocks of that covariance in order (errors estimated together: the blank's
    /// polynomial, one background law), each with how many errors it holds and the degrees of
    /// freedom its variances were estimated with (infinite when known), for the effective
    /// degrees of freedom of intervals that include them.
    pub blocks: Vec<SharedErrorBlock>,
}

/// One independent block of [`SharedSignalErrors`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SharedErrorBlock {
    /// Errors in the block (consecutive in `errors`).
    pub errors: usize,
    /// Degrees of freedom of the block's variance estimate.
    pub degrees_of_freedom: f64,
}

/// How to fit.
#[derive(Debug, Clone, PartialEq)]
pub struct GlobalFitOptions {
    /// The rate law.
    pub model: ProgressModel,
    /// Time from the start of the reaction to time zero of the reads, s (added to every read time).
    pub dead_time_s: f64,
    /// Estimate one shared dead time (starting from `dead_time_s`).
    pub fit_dead_time: bool,
    /// ODE tolerances (ODE models only).
    pub ode: OdeTolerances,
    /// Compute the profile-likelihood interval of Km.
    pub profile_km: bool,
    /// Errors the wells' signals share (estimated corrections), propagated into the covariance.
    pub shared_errors: SharedSignalErrors,
}

impl Default for GlobalFitOptions {
    fn default() -> Self {
        GlobalFitOptions {
            model: ProgressModel::MichaelisMenten,
            dead_time_s: 0.0,
            fit_dead_time: false,
            ode: OdeTolerances::default(),
            profile_km: true,
            shared_errors: SharedSignalErrors::default(),
        }
    }
}

/// Why a group could not be fitted.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ProgressError {
    /// Fewer than two wells.
    #[error("a global progress-curve fit needs at least 2 wells with a substrate and enzyme concentration; this group has {count}{}", if wells.is_empty() { String::new() } else { format!(" ({wells})") })]
    TooFewWells {
        /// How many.
        count: usize,
        /// Which.
        wells: String,
    },
    /// A well's inputs are unusable.
    #[error("well {well}: {reason}")]
    BadWell {
        /// The well.
        well: String,
        /// What is wrong.
        reason: String,
    },
    /// No curve moves beyond the noise.
    #[error("the curves are flat: no well's signal changes by more than 5 times its read-to-read scatter, so there is no progress curve to fit")]
    FlatCurves,
    /// The solver gave up.
    #[error("the {model} fit did not converge: {reason}")]
    DidNotConverge {
        /// The model.
        model: &'static str,
        /// Why.
        reason: String,
    },
    /// The least-squares core refused the problem.
    #[error("the {model} fit failed: {message}")]
    Fit {
        /// The model.
        model: &'static str,
        /// The message.
        message: String,
    },
}

/// Per-well diagnostics of a fit.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct WellDiagnostics {
    /// The well.
    pub well: String,
    /// Reads fitted.
    pub n: usize,
    /// The fitted signal offset, AU.
    pub signal_offset: f64,
    /// Residual SD, AU.
    pub residual_sd: f64,
    /// Read times of the fitted reads, s (for plots; not in `progress.json`).
    #[serde(skip)]
    pub times_s: Vec<f64>,
    /// The fitted reads' signal, AU.
    #[serde(skip)]
    pub observed: Vec<f64>,
    /// The fitted signal at those reads (offset included), AU.
    #[serde(skip)]
    pub fitted: Vec<f64>,
    /// Runs of residual signs.
    pub runs: usize,
    /// Runs-test z (negative: fewer runs than chance, a systematic misfit).
    pub runs_z: Option<f64>,
    /// True when `runs_z < -2.576` (two-sided 1% level).
    pub systematic_misfit: bool,
    /// The initial rate the fitted constants imply, kcat E0 S0 / (Km + S0), concentration/s.
    pub implied_initial_rate: f64,
    /// Fraction of S0 converted by the last read, by the fitted curve.
    pub fitted_conversion: f64,
}

/// One fitted shared parameter.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct FittedParameter {
    /// Name (`kcat`, `Km`, `inverse_Kp`, `k_inact`, `dead_time`).
    pub name: String,
    /// Estimate.
    pub value: f64,
    /// Asymptotic standard error (every read independent evidence).
    pub se: Option<f64>,
    /// Asymptotic 95% interval.
    pub ci95: Option<[f64; 2]>,
    /// Standard error robust to errors shared by the reads of a well (clustered by well).
    pub se_by_well: Option<f64>,
    /// 95% interval from it, with t at the clustered variance's effective degrees of freedom
    /// ([`WellLeverage::effective_dof`]; t(wells - 1) when they cannot be had).
    pub ci95_by_well: Option<[f64; 2]>,
}

/// A group's global fit.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct GlobalFit {
    /// The rate law.
    pub model: ProgressModel,
    /// Shared parameters in order kcat, Km, [extra], [dead_time].
    pub parameters: Vec<FittedParameter>,
    /// Profile-likelihood 95% interval of Km, calibrated by the well-clustered variance (module
    /// notes; `None` on a side the data leave open).
    pub km_profile_ci95: Option<[Option<f64>; 2]>,
    /// Each well's weight in the clustered variance (the effective degrees of freedom of its
    /// intervals).
    #[serde(skip)]
    pub well_leverage: Option<WellLeverage>,
    /// Correlation matrix of the shared parameters.
    pub correlation: Option<Vec<Vec<f64>>>,
    /// Covariance of the shared parameters clustered by well (see
    /// [`crate::fit::cluster_robust_covariance`]).
    pub covariance_by_well: Option<Vec<Vec<f64>>>,
    /// Residual sum of squares, AU^2.
    pub rss: f64,
    /// Reads fitted.
    pub n_observations: usize,
    /// Wells (offsets).
    pub n_wells: usize,
    /// Degrees of freedom n - p - m.
    pub degrees_of_freedom: usize,
    /// Residual SD, AU.
    pub residual_sd: f64,
    /// AICc.
    pub aicc: f64,
    /// Solver iterations.
    pub iterations: u64,
    /// Per-well diagnostics.
    pub wells: Vec<WellDiagnostics>,
}

impl GlobalFit {
    /// A parameter by name.
    pub fn parameter(&self, name: &str) -> Option<&FittedParameter> {
        self.parameters.iter().find(|p| p.name == name)
    }
}

/// The effective degrees of freedom of a progress fit's well-level intervals.
///
/// The variance of a contrast `c' theta` is the clustered variance (CR3) plus what each block of
/// shared errors (the blank, a background law, a matched control) adds, `v = v_wells + sum_k v_k`.
/// Each part is an estimate with its own degrees of freedom: the wells' from Satterthwaite's
/// approximation under a working model of independent reads plus each well's S0 error
/// ([`crate::fit::ClusterLeverage`]: each well's leverage included, and a constant that few wells
/// carry gets few), a shared block's from how it was estimated. Satterthwaite's rule for a sum of
/// independent variance estimates gives `dof = v^2 / (v_wells^2 / dof_wells + sum_k v_k^2 / dof_k)`.
///
/// Why: `t(wells - 1)` made the interval too short when a few wells carry a constant (the clean
/// design's slow-variant Km covered 91.8% with CR3 and t(23)); giving a well-estimated blank the
/// wells' few degrees of freedom made it too long (the clean design's slow kcat, much of whose
/// variance is the blank's, covered 97.4% over 1000 plates); and independent reads alone gave the
/// wells' part more degrees of freedom than their S0 errors leave it (realistic fast Km 92.8%).
///
/// References: Satterthwaite 1946, Biometrics Bulletin 2:110; Bell and McCaffrey 2002, Survey
/// Methodology 28:169; volumes and pages from memory.
#[derive(Debug, Clone, PartialEq)]
pub struct WellLeverage {
    wells: crate::fit::ClusterLeverage,
    clustered: DMatrix<f64>,
    shared: Vec<(DMatrix<f64>, f64)>,
}

impl WellLeverage {
    /// The effective degrees of freedom of the variance of `contrast' theta` (see the type).
    pub fn effective_dof(&self, contrast: &[f64]) -> Option<f64> {
        let wells_dof = self.wells.effective_degrees_of_freedom(contrast)?;
        let c = nalgebra::DVector::from_column_slice(contrast);
        let variance_of = |covariance: &DMatrix<f64>| c.dot(&(covariance * &c)).max(0.0);
        let wells_variance = variance_of(&self.clustered);
        let mut total = wells_variance;
        let mut spread = wells_variance * wells_variance / wells_dof;
        for (covariance, dof) in &self.shared {
            let v = variance_of(covariance);
            total += v;
            if dof.is_finite() {
                spread += v * v / dof;
            }
        }
        (spread > 0.0 && total.is_finite()).then(|| total * total / spread)
    }

    /// The 97.5% t quantile at [`Self::effective_dof`] (at least 1).
    pub fn quantile_975(&self, contrast: &[f64]) -> Option<f64> {
        let dof = self.effective_dof(contrast)?;
        crate::core::stats::t_quantile(0.975, dof.max(1.0)).ok()
    }
}

/// The projected least-squares problem (see the module notes).
pub struct ProgressProblem<'a> {
    wells: &'a [WellCurve],
    model: ProgressModel,
    dead_time_s: f64,
    fit_dead_time: bool,
    ode: OdeTolerances,
    offsets: Vec<usize>,
    n_observations: usize,
    /// The closed form's derivatives cost little beside omega itself, so a residual evaluation
    /// keeps them for the Jacobian that the solver asks for next at the same point.
    cache: std::sync::Mutex<Option<(Vec<f64>, SharedPoints)>>,
}

/// Point values of one well: substrate and derivatives in (kcat, Km, extra, dead time).
type WellPoints = Vec<(f64, [f64; 4])>;

/// Every well's points at one set of parameters, shared between the cache and its readers.
type SharedPoints = std::sync::Arc<Vec<WellPoints>>;

impl<'a> ProgressProblem<'a> {
    /// Sets up the problem for `wells` with `options`.
    pub fn new(wells: &'a [WellCurve], options: &GlobalFitOptions) -> ProgressProblem<'a> {
        let mut offsets = Vec::with_capacity(wells.len() + 1);
        let mut total = 0;
        for well in wells {
            offsets.push(total);
            total += well.signal.len();
        }
        offsets.push(total);
        ProgressProblem {
            wells,
            model: options.model,
            dead_time_s: options.dead_time_s,
            fit_dead_time: options.fit_dead_time,
            ode: options.ode,
            offsets,
            n_observations: total,
            cache: std::sync::Mutex::new(None),
        }
    }

    /// Names of the shared parameters in order.
    pub fn parameter_names(&self) -> Vec<String> {
        let mut names = vec!["kcat".to_string(), "Km".to_string()];
        if let Some(extra) = self.model.extra_parameter() {
            names.push(extra.to_string());
        }
        if self.fit_dead_time {
            names.push("dead_time".to_string());
        }
        names
    }

    fn unpack(&self, parameters: &[f64]) -> (CurveConstants, f64) {
        let mut constants = CurveConstants {
            kcat: parameters[0],
            km: parameters[1],
            inverse_kp: 0.0,
            k_inact: 0.0,
        };
        let mut next = 2;
        match self.model {
            ProgressModel::MichaelisMenten => {}
            ProgressModel::ProductInhibition => {
                constants.inverse_kp = parameters[next];
                next += 1;
            }
            ProgressModel::Inactivation => {
                constants.k_inact = parameters[next];
                next += 1;
            }
        }
        let dead = if self.fit_dead_time {
            parameters[next]
        } else {
            self.dead_time_s
        };
        (constants, dead)
    }

    /// Substrate (and derivatives when asked) for one well; NaN-filled when the model is undefined.
    fn well_points(
        &self,
        well: &WellCurve,
        constants: &CurveConstants,
        dead: f64,
        derivatives: bool,
    ) -> WellPoints {
        let times: Vec<f64> = well.times_s.iter().map(|t| t + dead).collect();
        match self.model {
            ProgressModel::MichaelisMenten => times
                .iter()
                .map(|&t| {
                    let p = michaelis_menten_point(well.s0, well.e0, constants.kcat, constants.km, t);
                    (p.substrate, [p.d_kcat, p.d_km, 0.0, p.d_time])
                })
                .collect(),
            ProgressModel::ProductInhibition | ProgressModel::Inactivation => {
                match integrate_curve(well.s0, well.e0, constants, &times, derivatives, self.ode) {
                    Ok(points) => {
                        let extra = if self.model == ProgressModel::ProductInhibition {
                            2
                        } else {
                            3
                        };
                        points
                            .iter()
                            .map(|p| {
                                let d = p.derivatives;
                                (p.substrate, [d[0], d[1], d[extra], d[4]])
                            })
                            .collect()
                    }
                    Err(_) => vec![(f64::NAN, [f64::NAN; 4]); times.len()],
                }
            }
        }
    }

    fn all_points(&self, parameters: &[f64], derivatives: bool) -> SharedPoints {
        let closed_form = self.model == ProgressModel::MichaelisMenten;
        if closed_form {
            if let Ok(guard) = self.cache.lock() {
                if let Some((at, points)) = guard.as_ref() {
                    if at.as_slice() == parameters {
                        // Shared, not copied: on a 768-well group the points are about 8 MB.
                        return std::sync::Arc::clone(points);
                    }
                }
            }
        }
        let (constants, dead) = self.unpack(parameters);
        // Wells are independent: spread them over the cores (ODE wells always; closed-form wells
        // when there are enough reads to outweigh the thread hand-off).
        let points: Vec<WellPoints> = if !closed_form || self.n_observations >= 2000 {
            self.wells
                .par_iter()
                .map(|well| self.well_points(well, &constants, dead, derivatives || closed_form))
                .collect()
        } else {
            self.wells
                .iter()
                .map(|well| self.well_points(well, &constants, dead, true))
                .collect()
        };
        let points = std::sync::Arc::new(points);
        if closed_form {
            if let Ok(mut guard) = self.cache.lock() {
                *guard = Some((parameters.to_vec(), std::sync::Arc::clone(&points)));
            }
        }
        points
    }

    /// The signal offsets `b_i` at `parameters`.
    pub fn offsets(&self, parameters: &[f64]) -> Vec<f64> {
        let points = self.all_points(parameters, false);
        self.wells
            .iter()
            .zip(points.iter())
            .map(|(well, pts)| {
                let n = well.signal.len() as f64;
                well.signal
                    .iter()
                    .zip(pts)
                    .map(|(y, (s, _))| y - well.signal_per_substrate * s)
                    .sum::<f64>()
                    / n
            })
            .collect()
    }

    fn derivative_columns(&self) -> Vec<usize> {
        let mut columns = vec![0, 1];
        if self.model != ProgressModel::MichaelisMenten {
            columns.push(2);
        }
        if self.fit_dead_time {
            columns.push(3);
        }
        columns
    }
}

impl ResidualModel for ProgressProblem<'_> {
    fn n_parameters(&self) -> usize {
        2 + usize::from(self.model != ProgressModel::MichaelisMenten) + usize::from(self.fit_dead_time)
    }

    fn n_observations(&self) -> usize {
        self.n_observations
    }

    fn residuals(&self, parameters: &[f64], residuals: &mut [f64]) {
        let points = self.all_points(parameters, false);
        for (index, (well, pts)) in self.wells.iter().zip(points.iter()).enumerate() {
            let slice = &mut residuals[self.offsets[index]..self.offsets[index + 1]];
            let mut sum = 0.0;
            for ((r, y), (s, _)) in slice.iter_mut().zip(&well.signal).zip(pts) {
                *r = well.signal_per_substrate * s - y;
                sum += *r;
            }
            let mean = sum / slice.len() as f64;
            slice.iter_mut().for_each(|r| *r -= mean);
        }
    }

    fn jacobian(&self, parameters: &[f64], jacobian: &mut DMatrix<f64>) {
        let points = self.all_points(parameters, true);
        let columns = self.derivative_columns();
        for (index, (well, pts)) in self.wells.iter().zip(points.iter()).enumerate() {
            let start = self.offsets[index];
            let n = pts.len() as f64;
            for (column, &which) in columns.iter().enumerate() {
                let mean = pts.iter().map(|(_, d)| d[which]).sum::<f64>() / n;
                for (row, (_, d)) in pts.iter().enumerate() {
                    jacobian[(start + row, column)] = well.signal_per_substrate * (d[which] - mean);
                }
            }
        }
    }
}

/// A problem with some parameters held fixed (for starts and profiles).
struct Fixed<'a, M> {
    inner: &'a M,
    full: Vec<f64>,
    free: Vec<usize>,
}

impl<M: ResidualModel> Fixed<'_, M> {
    fn expand(&self, reduced: &[f64]) -> Vec<f64> {
        let mut full = self.full.clone();
        for (value, &index) in reduced.iter().zip(&self.free) {
            full[index] = *value;
        }
        full
    }
}

impl<M: ResidualModel> ResidualModel for Fixed<'_, M> {
    fn n_parameters(&self) -> usize {
        self.free.len()
    }
    fn n_observations(&self) -> usize {
        self.inner.n_observations()
    }
    fn residuals(&self, parameters: &[f64], residuals: &mut [f64]) {
        self.inner.residuals(&self.expand(parameters), residuals);
    }
    fn jacobian(&self, parameters: &[f64], jacobian: &mut DMatrix<f64>) {
        let mut full = DMatrix::zeros(self.inner.n_observations(), self.full.len());
        self.inner.jacobian(&self.expand(parameters), &mut full);
        for (column, &index) in self.free.iter().enumerate() {
            jacobian.set_column(column, &full.column(index));
        }
    }
}

fn rss_of<M: ResidualModel>(model: &M, parameters: &[f64]) -> f64 {
    let mut residuals = vec![0.0; model.n_observations()];
    model.residuals(parameters, &mut residuals);
    let rss: f64 = residuals.iter().map(|r| r * r).sum();
    if rss.is_finite() {
        rss
    } else {
        f64::INFINITY
    }
}

/// Straight-line slope of the first few reads.
fn early_slope(times: &[f64], values: &[f64]) -> Option<f64> {
    let n = times.len().min(6);
    straight_line(&times[..n], &values[..n]).map(|line| line.slope)
}

/// Read-to-read scatter of a curve: the SD of second differences / sqrt(6) (insensitive to a
/// smooth trend; common practice).
fn scatter(values: &[f64]) -> f64 {
    if values.len() < 4 {
        return 0.0;
    }
    let second: Vec<f64> = values.windows(3).map(|w| w[0] - 2.0 * w[1] + w[2]).collect();
    (second.iter().map(|d| d * d).sum::<f64>() / second.len() as f64 / 6.0).sqrt()
}

/// Checks the wells before any fitting: count, finite inputs, some movement.
pub fn check_wells(wells: &[WellCurve]) -> Result<(), ProgressError> {
    if wells.len() < 2 {
        return Err(ProgressError::TooFewWells {
            count: wells.len(),
            wells: wells
                .iter()
                .map(|w| w.label.clone())
                .collect::<Vec<_>>()
                .join(", "),
        });
    }
    for well in wells {
        let bad = |reason: String| ProgressError::BadWell {
            well: well.label.clone(),
            reason,
        };
        if !(well.s0.is_finite() && well.s0 > 0.0) {
            return Err(bad(format!(
                "starting substrate must be above 0, not {}",
                well.s0
            )));
        }
        if !(well.e0.is_finite() && well.e0 > 0.0) {
            return Err(bad(format!(
                "enzyme concentration must be above 0, not {}",
                well.e0
            )));
        }
        if !(well.signal_per_substrate.is_finite() && well.signal_per_substrate != 0.0) {
            return Err(bad(
                "no signal per unit substrate (extinction and pathlength)".into()
            ));
        }
        if well.times_s.len() != well.signal.len() || well.signal.len() < 3 {
            return Err(bad(format!(
                "{} readable reads; at least 3 are needed",
                well.signal.len()
            )));
        }
        if !well.signal.iter().chain(&well.times_s).all(|v| v.is_finite()) {
            return Err(bad("a read time or signal is not a finite number".into()));
        }
    }
    let moves = wells.iter().any(|well| {
        let n = well.signal.len();
        let k = (n / 4).clamp(1, 3);
        let first = mean(&well.signal[..k]).unwrap_or(0.0);
        let last = mean(&well.signal[n - k..]).unwrap_or(0.0);
        let noise = scatter(&well.signal).max(1e-12 * first.abs().max(1.0));
        (last - first).abs() > 5.0 * noise
    });
    if !moves {
        return Err(ProgressError::FlatCurves);
    }
    Ok(())
}

/// A data-derived start for kcat and Km (module notes).
fn michaelis_menten_start(problem: &ProgressProblem, wells: &[WellCurve], dead: f64) -> Vec<f64> {
    let slopes: Vec<Option<f64>> = wells
        .iter()
        .map(|w| early_slope(&w.times_s, &w.signal).map(|s| -s / w.signal_per_substrate))
        .collect();
    let s_min = wells.iter().map(|w| w.s0).fold(f64::INFINITY, f64::min);
    let s_max = wells.iter().map(|w| w.s0).fold(0.0, f64::max);
    let (low, high) = ((s_min / 20.0).ln(), (s_max * 20.0).ln());
    let mut best: Option<(f64, Vec<f64>)> = None;
    for step in 0..=10 {
        let km = (low + (high - low) * f64::from(step) / 10.0).exp();
        let kcat = median(
            wells
                .iter()
                .zip(&slopes)
                .filter_map(|(w, v)| v.filter(|v| *v > 0.0).map(|v| v * (km + w.s0) / (w.s0 * w.e0))),
        )
        .unwrap_or(1.0);
        let mut parameters = vec![kcat, km];
        if problem.n_parameters() == 3 {
            parameters.push(dead);
        }
        let rss = rss_of(problem, &parameters);
        if best.as_ref().is_none_or(|(b, _)| rss < *b) {
            best = Some((rss, parameters));
        }
    }
    best.map_or_else(|| vec![1.0, s_max.max(1e-9)], |(_, p)| p)
}

fn least_squares_options(n_parameters: usize) -> LeastSquaresOptions {
    LeastSquaresOptions {
        max_iterations: 200,
        relative_reduction_tolerance: 1e-12,
        relative_step_tolerance: 1e-10,
        gradient_tolerance: 1e-10,
        positive_parameters: (0..n_parameters.min(2)).collect(),
        ..LeastSquaresOptions::default()
    }
}

/// Runs the solver for a problem from `start`; returns the parameters and iterations.
fn solve<M: ResidualModel>(
    model: &M,
    start: &[f64],
    positive: Vec<usize>,
    name: &'static str,
) -> Result<(Vec<f64>, f64, u64), ProgressError> {
    let options = LeastSquaresOptions {
        positive_parameters: positive,
        ..least_squares_options(0)
    };
    let fit = fit_least_squares(model, start, &options).map_err(|error| ProgressError::Fit {
        model: name,
        message: error.to_string(),
    })?;
    if !fit.converged() {
        return Err(ProgressError::DidNotConverge {
            model: name,
            reason: fit.stop_reason.to_string(),
        });
    }
    Ok((fit.parameters, fit.rss, fit.iterations))
}

/// Fits the group's wells with `options.model` (a plain Michaelis-Menten fit first provides the
/// start of the extended models).
pub fn fit_group(wells: &[WellCurve], options: &GlobalFitOptions) -> Result<GlobalFit, ProgressError> {
    fit_group_from(wells, options, None)
}

/// [`fit_group`], started from an earlier fit of the same wells (or of wells a few percent off
/// them) instead of the data-derived grid: a fit of `options.model` is solved from directly, a
/// plain Michaelis-Menten fit starts the plain stage. A refit near a known optimum takes a few
/// solver iterations where the grid and the plain stage took tens; a warm start that fails falls
/// back to the cold route, so the warm start changes the cost, not which fits succeed.
pub fn fit_group_from(
    wells: &[WellCurve],
    options: &GlobalFitOptions,
    warm: Option<&GlobalFit>,
) -> Result<GlobalFit, ProgressError> {
    check_wells(wells)?;
    let problem = ProgressProblem::new(wells, options);
    let warm_values = |fit: &GlobalFit, names: &[String]| -> Option<Vec<f64>> {
        names
            .iter()
            .map(|name| fit.parameter(name).map(|p| p.value).filter(|v| v.is_finite()))
            .collect()
    };
    if let Some(start) = warm
        .filter(|fit| fit.model == options.model)
        .and_then(|fit| warm_values(fit, &problem.parameter_names()))
    {
        if let Ok((parameters, rss, iterations)) = solve(&problem, &start, vec![0, 1], options.model.name()) {
            return Ok(summarise(&problem, wells, options, parameters, rss, iterations));
        }
    }
    let plain_options = GlobalFitOptions {
        model: ProgressModel::MichaelisMenten,
        ..options.clone()
    };
    let plain = ProgressProblem::new(wells, &plain_options);
    // A plain warm fit that failed above as the whole problem is not tried again as its stage.
    let warm_plain = warm
        .filter(|fit| fit.model == ProgressModel::MichaelisMenten && options.model != fit.model)
        .and_then(|fit| warm_values(fit, &plain.parameter_names()))
        .and_then(|start| solve(&plain, &start, vec![0, 1], ProgressModel::MichaelisMenten.name()).ok());
    let (mut parameters, mut rss, mut iterations) = match warm_plain {
        Some(solved) => solved,
        None => {
            let start = michaelis_menten_start(&plain, wells, options.dead_time_s);
            solve(&plain, &start, vec![0, 1], ProgressModel::MichaelisMenten.name())?
        }
    };
    if options.model != ProgressModel::MichaelisMenten {
        let mut extended = parameters[..2].to_vec();
        extended.push(0.0);
        if options.fit_dead_time {
            extended.push(parameters[2]);
        }
        let (p, r, i) = solve(&problem, &extended, vec![0, 1], options.model.name())?;
        parameters = p;
        rss = r;
        iterations += i;
    }
    Ok(summarise(&problem, wells, options, parameters, rss, iterations))
}

fn summarise(
    problem: &ProgressProblem,
    wells: &[WellCurve],
    options: &GlobalFitOptions,
    parameters: Vec<f64>,
    rss: f64,
    iterations: u64,
) -> GlobalFit {
    let n = problem.n_observations();
    let p = problem.n_parameters();
    let m = wells.len();
    let dof = n.saturating_sub(p + m);
    let mut jacobian = DMatrix::zeros(n, p);
    problem.jacobian(&parameters, &mut jacobian);
    // asymptotic_covariance divides by n - p; rescale so that s^2 = RSS / (n - p - m).
    let scaled_rss = if dof > 0 {
        rss * (n - p) as f64 / dof as f64
    } else {
        f64::NAN
    };
    let covariance = asymptotic_covariance(&jacobian, scaled_rss);
    let quantile = if dof > 0 { t_quantile_975(dof).ok() } else { None };
    // Reads of one well share its errors: the covariance clustered by well, with t(wells - 1).
    let mut residuals = vec![0.0; n];
    problem.residuals(&parameters, &mut residuals);
    let clusters: Vec<std::ops::Range<usize>> = problem.offsets.windows(2).map(|w| w[0]..w[1]).collect();
    // Each well's leverage undone (CR3: a well's S0 error moves its curve along the directions
    // the fit uses, so the fit takes up a share mu of it, which CR2 only half undoes: CR2's
    // realistic fast Km covered 92.1%; CR1 ran small with a few tens of wells), CR1 where leaving
    // a well out leaves a parameter undetermined. The wells' S0 errors also enter the working
    // model of the degrees of freedom (`WellLeverage`).
    let effects = substrate_effect_directions(wells, options, &parameters, &residuals)
        .map(|directions| ClusterEffects { directions });
    let adjusted = cluster_leverage_adjusted_covariance(
        &jacobian,
        &residuals,
        &clusters,
        LeverageAdjustment::Jackknife,
        effects.as_ref(),
    );
    let shared = shared_error_covariance(&jacobian, problem, wells, &options.shared_errors);
    let shared_total = shared
        .iter()
        .map(|(covariance, _)| covariance)
        .cloned()
        .reduce(|a, b| a + b);
    let clustered = adjusted
        .as_ref()
        .map(|adjusted| adjusted.covariance.clone())
        .or_else(|| cluster_robust_covariance(&jacobian, &residuals, &clusters));
    let by_well = clustered.map(|clustered| match &shared_total {
        Some(shared) => clustered + shared,
        None => clustered,
    });
    let leverage = adjusted.map(|adjusted| WellLeverage {
        wells: adjusted.leverage,
        clustered: adjusted.covariance,
        shared,
    });
    let well_quantile = (m >= 2).then(|| t_quantile_975(m - 1).ok()).flatten();
    let names = problem.parameter_names();
    let fitted: Vec<FittedParameter> = names
        .iter()
        .enumerate()
        .map(|(index, name)| {
            let se = covariance.standard_errors.as_ref().map(|s| s[index]);
            let se_by_well = by_well
                .as_ref()
                .map(|c| c[(index, index)].max(0.0).sqrt())
                .filter(|s| s.is_finite());
            let value = parameters[index];
            FittedParameter {
                name: name.clone(),
                value,
                se,
                ci95: se.zip(quantile).map(|(se, q)| [value - q * se, value + q * se]),
                se_by_well,
                ci95_by_well: se_by_well
                    .zip(
                        leverage
                            .as_ref()
                            .and_then(|l| {
                                let mut contrast = vec![0.0; p];
                                contrast[index] = 1.0;
                                l.quantile_975(&contrast)
                            })
                            .or(well_quantile),
                    )
                    .map(|(se, q)| [value - q * se, value + q * se]),
            }
        })
        .collect();
    let correlation = covariance
        .correlation
        .as_ref()
        .map(|c| c.row_iter().map(|row| row.iter().copied().collect()).collect());
    let residual_sd = if dof > 0 {
        (rss / dof as f64).sqrt()
    } else {
        f64::NAN
    };
    // The per-well offsets and the residual variance count as parameters.
    let aicc = aicc(n, p + m + 1, rss).unwrap_or(f64::NAN);
    // The profile's threshold, as a multiple of RSS_min - 1 (module notes).
    let km_clustered_scale = fitted.get(1).and_then(|km| {
        let model_se = km.se.filter(|se| *se > 0.0)?;
        let well_se = km.se_by_well?;
        let mut contrast = vec![0.0; p];
        contrast[1] = 1.0;
        let quantile = leverage
            .as_ref()
            .and_then(|l| l.quantile_975(&contrast))
            .or(well_quantile)?;
        Some((well_se / model_se).powi(2) * quantile * quantile)
    });
    let km_profile_ci95 = (options.profile_km && dof > 0)
        .then(|| {
            let read_level_se = fitted.get(1).and_then(|km| km.se);
            profile_interval(
                problem,
                &parameters,
                1,
                rss,
                dof,
                km_clustered_scale,
                read_level_se,
            )
        })
        .flatten();
    let well_diagnostics = well_diagnostics(problem, wells, &parameters);
    GlobalFit {
        model: options.model,
        parameters: fitted,
        km_profile_ci95,
        well_leverage: leverage,
        correlation,
        covariance_by_well: by_well.map(|c| c.row_iter().map(|row| row.iter().copied().collect()).collect()),
        rss,
        n_observations: n,
        n_wells: m,
        degrees_of_freedom: dof,
        residual_sd,
        aicc,
        iterations,
        wells: well_diagnostics,
    }
}

/// Each read's loading on its well's relative error in S0 (pipetting scales the whole curve):
/// `d(projected residual) / d ln S0`, by a forward difference of 1e-6; `None` when the curves
/// cannot be evaluated.
fn substrate_effect_directions(
    wells: &[WellCurve],
    options: &GlobalFitOptions,
    parameters: &[f64],
    residuals: &[f64],
) -> Option<Vec<f64>> {
    const STEP: f64 = 1e-6;
    let shifted: Vec<WellCurve> = wells
        .iter()
        .map(|well| WellCurve {
            s0: well.s0 * (1.0 + STEP),
            ..well.clone()
        })
        .collect();
    let problem = ProgressProblem::new(&shifted, options);
    let mut moved = vec![0.0; residuals.len()];
    problem.residuals(parameters, &mut moved);
    let directions: Vec<f64> = moved
        .iter()
        .zip(residuals)
        .map(|(after, before)| (after - before) / STEP)
        .collect();
    directions.iter().all(|d| d.is_finite()).then_some(directions)
}

/// What the shared errors do to the estimates, block by block: `A_k C_k A_k^T`,
/// `A_k = (J^T J)^-1 J^T L_k` (module docs of [`SharedSignalErrors`]), each with its block's degrees
/// of freedom; empty without errors or when `J^T J` is singular.
fn shared_error_covariance(
    jacobian: &DMatrix<f64>,
    problem: &ProgressProblem,
    wells: &[WellCurve],
    shared: &SharedSignalErrors,
) -> Vec<(DMatrix<f64>, f64)> {
    let k = shared.errors.len();
    if k == 0 {
        return Vec::new();
    }
    let (n, p) = jacobian.shape();
    let Some(bread) = asymptotic_covariance(jacobian, n.saturating_sub(p) as f64).covariance else {
        return Vec::new();
    };
    // J^T L, without forming L (n x k): each error touches the reads of the wells it weighs.
    let mut jt_l = DMatrix::<f64>::zeros(p, k);
    for (column, error) in shared.errors.iter().enumerate() {
        for (index, well) in wells.iter().enumerate() {
            let weight = error.well_weights.get(index).copied().unwrap_or(0.0);
            if weight == 0.0 {
                continue;
            }
            let start = problem.offsets[index];
            for (read, &t) in well.times_s.iter().enumerate() {
                let loading = weight * error.shape.at(t);
                if loading != 0.0 {
                    for row in 0..p {
                        jt_l[(row, column)] += jacobian[(start + read, row)] * loading;
                    }
                }
            }
        }
    }
    let covariance = DMatrix::from_fn(k, k, |i, j| {
        shared
            .covariance
            .get(i)
            .and_then(|row| row.get(j))
            .copied()
            .unwrap_or(0.0)
    });
    let a = bread * jt_l;
    // Errors outside any declared block count as one block of known variance.
    let mut blocks = shared.blocks.clone();
    let declared: usize = blocks.iter().map(|block| block.errors).sum();
    if declared < k {
        blocks.push(SharedErrorBlock {
            errors: k - declared,
            degrees_of_freedom: f64::INFINITY,
        });
    }
    let mut at = 0;
    let mut parts = Vec::with_capacity(blocks.len());
    for block in blocks {
        let size = block.errors.min(k - at);
        if size == 0 {
            continue;
        }
        let a_k = a.columns(at, size);
        let c_k = covariance.view((at, at), (size, size));
        let part = a_k * c_k * a_k.transpose();
        if !part.iter().all(|v| v.is_finite()) {
            return Vec::new();
        }
        parts.push((part, block.degrees_of_freedom));
        at += size;
    }
    parts
}

fn well_diagnostics(
    problem: &ProgressProblem,
    wells: &[WellCurve],
    parameters: &[f64],
) -> Vec<WellDiagnostics> {
    let mut residuals = vec![0.0; problem.n_observations()];
    problem.residuals(parameters, &mut residuals);
    let offsets = problem.offsets(parameters);
    let (constants, dead) = problem.unpack(parameters);
    wells
        .iter()
        .enumerate()
        .map(|(index, well)| {
            let r = &residuals[problem.offsets[index]..problem.offsets[index + 1]];
            let n = r.len();
            let residual_sd = (r.iter().map(|v| v * v).sum::<f64>() / (n.max(2) - 1) as f64).sqrt();
            let (runs, runs_z) = runs_test(r);
            // Read times ascend, so the last point is the last read.
            let s_end = problem
                .well_points(well, &constants, dead, false)
                .last()
                .map_or(f64::NAN, |(s, _)| *s);
            WellDiagnostics {
                well: well.label.clone(),
                times_s: well.times_s.clone(),
                observed: well.signal.clone(),
                // The residuals are fitted minus observed (offset removed by the mean), so
                // fitted = observed + residual.
                fitted: well.signal.iter().zip(r).map(|(y, r)| y + r).collect(),
                n,
                signal_offset: offsets[index],
                residual_sd,
                runs,
                runs_z,
                systematic_misfit: runs_z.is_some_and(|z| z < -2.576),
                implied_initial_rate: constants.kcat * well.e0 * well.s0 / (constants.km + well.s0),
                fitted_conversion: 1.0 - s_end / well.s0,
            }
        })
        .collect()
}

/// Wald-Wolfowitz runs test on the signs of `residuals` (zeros skipped): the number of runs and
/// `z = (R - E R) / sd R` with `E R = 1 + 2 n+ n- / N`,
/// `Var R = 2 n+ n- (2 n+ n- - N) / (N^2 (N - 1))`.
pub fn runs_test(residuals: &[f64]) -> (usize, Option<f64>) {
    let signs: Vec<bool> = residuals
        .iter()
        .filter(|r| **r != 0.0)
        .map(|r| *r > 0.0)
        .collect();
    if signs.is_empty() {
        return (0, None);
    }
    let runs = 1 + signs.windows(2).filter(|w| w[0] != w[1]).count();
    let positive = signs.iter().filter(|s| **s).count() as f64;
    let negative = signs.len() as f64 - positive;
    let total = signs.len() as f64;
    if positive == 0.0 || negative == 0.0 || total < 3.0 {
        return (runs, None);
    }
    let product = 2.0 * positive * negative;
    let expected = 1.0 + product / total;
    let variance = product * (product - total) / (total * total * (total - 1.0));
    if variance <= 0.0 {
        return (runs, None);
    }
    (runs, Some((runs as f64 - expected) / variance.sqrt()))
}

/// Profile-likelihood 95% interval of parameter `index` (module notes); `None` on a side where
/// the residual sum of squares never reaches the threshold within a factor 10^4, or a sub-fit
/// fails.
///
/// Search: each side's first trial value is where a parabolic profile would cross the threshold
/// (`ln(value) +- 1.1 (se / value) sqrt(c t^2)`, from the read-level `se` of the parameter; the
/// 1.1 puts it just outside), and the step doubles up to a factor 1.25 while the RSS stays below.
/// A fixed first step of a factor 1.25 overshot a well-determined Km by 20-40 standard errors and
/// left the crossing search a wide bracket. Each trial value is a full sub-fit, so trials are
/// what the profile costs.
fn profile_interval(
    problem: &ProgressProblem,
    optimum: &[f64],
    index: usize,
    rss_min: f64,
    dof: usize,
    clustered_scale: Option<f64>,
    read_level_se: Option<f64>,
) -> Option<[Option<f64>; 2]> {
    let scale = match clustered_scale {
        Some(scale) => scale,
        None => f_quantile(0.95, 1.0, dof as f64).ok()?,
    };
    let threshold = rss_min * (1.0 + scale / dof as f64);
    let free: Vec<usize> = (0..optimum.len()).filter(|&i| i != index).collect();
    let positive: Vec<usize> = free
        .iter()
        .enumerate()
        .filter(|(_, &i)| i < 2)
        .map(|(reduced, _)| reduced)
        .collect();
    // RSS at a fixed value, re-optimising the rest from `warm`.
    let profile_at = |value: f64, warm: &[f64]| -> Option<(f64, Vec<f64>)> {
        let mut full = optimum.to_vec();
        full[index] = value;
        let fixed = Fixed {
            inner: problem,
            full,
            free: free.clone(),
        };
        let start: Vec<f64> = free.iter().map(|&i| warm[i]).collect();
        let (reduced, rss, _) = solve(&fixed, &start, positive.clone(), "profile").ok()?;
        Some((rss, fixed.expand(&reduced)))
    };
    let centre = optimum[index];
    let largest_step = PROFILE_LARGEST_LOG_STEP;
    let first_step = read_level_se
        .map(|se| 1.1 * (se / centre) * scale.sqrt())
        .filter(|step| step.is_finite() && *step > 0.0)
        .map_or(largest_step, |step| step.min(largest_step));
    let side = |direction: f64| -> Option<f64> {
        let mut inside = (centre.ln(), rss_min, optimum.to_vec());
        let mut step = first_step;
        for _ in 0..PROFILE_MAX_TRIALS {
            let candidate = inside.0 + direction * step;
            if (candidate - centre.ln()).abs() > PROFILE_LOG_REACH {
                return None;
            }
            let (rss, at) = profile_at(candidate.exp(), &inside.2)?;
            if rss > threshold {
                let bracket = ProfileBracket {
                    rss_min,
                    threshold,
                    inside,
                    outside: (candidate, rss),
                };
                return Some(crossing(&profile_at, bracket).exp());
            }
            inside = (candidate, rss, at);
            step = (2.0 * step).min(largest_step);
        }
        None
    };
    // The two sides are independent searches.
    let (lower, upper) = rayon::join(|| side(-1.0), || side(1.0));
    Some([lower, upper])
}

/// Largest step of the profile search, in ln(value): a factor 1.25.
const PROFILE_LARGEST_LOG_STEP: f64 = 0.22314355131420976;
/// How far the profile search goes from the optimum, in ln(value): a factor 10^4.
const PROFILE_LOG_REACH: f64 = 9.210340371976184;
/// Trial values per side of the profile search: enough to reach [`PROFILE_LOG_REACH`] in steps of
/// [`PROFILE_LARGEST_LOG_STEP`] from the smallest first step.
const PROFILE_MAX_TRIALS: usize = 80;

/// The profile's RSS at a value of the profiled parameter, re-optimised from warm parameters,
/// with the parameters it ended at.
type ProfileAt<'a> = dyn Fn(f64, &[f64]) -> Option<(f64, Vec<f64>)> + 'a;

/// A bracket of the profile's threshold crossing: the profile's minimum and threshold, a point
/// inside (log value, RSS below the threshold, the parameters there) and one outside (log value,
/// RSS above).
struct ProfileBracket {
    rss_min: f64,
    threshold: f64,
    inside: (f64, f64, Vec<f64>),
    outside: (f64, f64),
}

/// Where the profile's RSS crosses the threshold within `bracket`: the Illinois variant of
/// regula falsi in log value on the signed root `sqrt(RSS - RSS_min) - sqrt(threshold -
/// RSS_min)`, bisection as the fallback when a step stalls. The root is linear in the value where
/// the profile is a parabola (close to it near the optimum), so the first step lands within a
/// small fraction of the interval's half-width and one or two more reach the tolerance; on the
/// RSS itself, regula falsi crept in from the far end of a wide bracket.
/// References: Dowell and Jarratt 1971, BIT 11:168 (the Illinois method; from memory); Bates and
/// Watts 1988 (the profile's signed root; from memory).
fn crossing(profile_at: &ProfileAt, bracket: ProfileBracket) -> f64 {
    const TOLERANCE: f64 = 1e-5;
    let ProfileBracket {
        rss_min,
        threshold,
        inside,
        outside,
    } = bracket;
    let target = (threshold - rss_min).max(0.0).sqrt();
    let signed_root = |rss: f64| (rss - rss_min).max(0.0).sqrt() - target;
    let (mut in_x, mut in_g, mut warm) = (inside.0, signed_root(inside.1), inside.2);
    let (mut out_x, mut out_g) = (outside.0, signed_root(outside.1));
    let mut last_side_kept: Option<bool> = None;
    for _ in 0..20 {
        if (out_x - in_x).abs() < TOLERANCE {
            break;
        }
        let mut x = in_x - in_g * (out_x - in_x) / (out_g - in_g);
        if !x.is_finite() || (x - in_x) * (x - out_x) >= 0.0 {
            x = 0.5 * (in_x + out_x);
        }
        let Some((rss, at)) = profile_at(x.exp(), &warm) else {
            break;
        };
        let g = signed_root(rss);
        if rss > threshold {
            out_x = x;
            out_g = g;
            // The inside end kept twice running: halve its value so the next step moves it.
            if last_side_kept == Some(true) {
                in_g *= 0.5;
            }
            last_side_kept = Some(true);
        } else {
            in_x = x;
            in_g = g;
            warm = at;
            if last_side_kept == Some(false) {
                out_g *= 0.5;
            }
            last_side_kept = Some(false);
        }
        if (rss - threshold).abs() <= 1e-9 * threshold {
            return x;
        }
    }
    0.5 * (in_x + out_x)
}

/// The extra-sum-of-squares F test of a model with one more parameter against a nested one:
/// `F = (RSS_0 - RSS_1) / (RSS_1 / dof_1)` on (1, dof_1); returns `(F, p)`.
pub fn extra_sum_of_squares_test(rss_nested: f64, rss_full: f64, dof_full: usize) -> Option<(f64, f64)> {
    // n and p only enter through n - p = dof_full and the one extra parameter.
    let test = extra_sum_of_squares(dof_full + 1, (0, rss_nested), (1, rss_full))?;
    Some((test.f, test.p_value))
}

/// Synthetic groups for tests and benchmarks: curves from the closed form or the ODE with
/// Gaussian read noise (ChaCha8, seeded), each well with its own offset.
pub mod synthetic {
    use rand::SeedableRng;
    use rand_chacha::ChaCha8Rng;
    use rand_distr::{Distribution, Normal};

    use super::WellCurve;
    use crate::progress::ode::{integrate_curve, CurveConstants, OdeTolerances};

    /// What to simulate.
    #[derive(Debug, Clone, PartialEq)]
    pub struct SyntheticGroup {
        /// True constants.
        pub constants: CurveConstants,
        /// Starting substrate of each well, uM.
        pub s0_um: Vec<f64>,
        /// Enzyme, uM.
        pub e0_um: f64,
        /// Read times, s.
        pub times_s: Vec<f64>,
        /// True dead time added to every read time, s.
        pub dead_time_s: f64,
        /// Signal per uM of substrate, AU/uM (negative: product read).
        pub signal_per_substrate: f64,
        /// Read noise SD, AU.
        pub noise_sd: f64,
        /// Seed.
        pub seed: u64,
    }

    /// Simulates the group; `None` if the ODE fails (not for sane inputs).
    pub fn simulate_group(spec: &SyntheticGroup) -> Option<Vec<WellCurve>> {
        let mut rng = ChaCha8Rng::seed_from_u64(spec.seed);
        let noise = Normal::new(0.0, spec.noise_sd.max(0.0)).ok()?;
        let times: Vec<f64> = spec.times_s.iter().map(|t| t + spec.dead_time_s).collect();
        let tight = OdeTolerances { relative: 1e-11 };
        spec.s0_um
            .iter()
            .enumerate()
            .map(|(index, &s0)| {
                let plain = spec.constants.inverse_kp == 0.0 && spec.constants.k_inact == 0.0;
                let substrate: Vec<f64> = if plain {
                    times
                        .iter()
                        .map(|&t| {
                            crate::fit::integrated::substrate_remaining(
                                s0,
                                spec.constants.km,
                                spec.constants.kcat * spec.e0_um,
                                t.max(0.0),
                            )
                        })
                        .collect()
                } else {
                    integrate_curve(s0, spec.e0_um, &spec.constants, &times, false, tight)
                        .ok()?
                        .iter()
                        .map(|p| p.substrate)
                        .collect()
                };
                let offset = 0.04 + 0.002 * index as f64;
                let signal = substrate
                    .iter()
                    .map(|s| offset + spec.signal_per_substrate * (s - s0) + noise.sample(&mut rng))
                    .collect();
                Some(WellCurve {
                    label: format!("W{}", index + 1),
                    times_s: spec.times_s.clone(),
                    signal,
                    s0,
                    e0: spec.e0_um,
                    signal_per_substrate: spec.signal_per_substrate,
                })
            })
            .collect()
    }
}

#[cfg(test)]
mod tests {
    use super::synthetic::{simulate_group, SyntheticGroup};
    use super::*;
    use crate::fit::check_jacobian_scaled;
    use approx::assert_relative_eq;

    fn spec(constants: CurveConstants, seed: u64) -> SyntheticGroup {
        SyntheticGroup {
            constants,
            s0_um: vec![5.0, 10.0, 20.0, 40.0, 80.0, 160.0, 320.0, 640.0],
            e0_um: 0.005,
            times_s: (0..60).map(|i| 30.0 * f64::from(i)).collect(),
            dead_time_s: 0.0,
            // 4-nitrophenolate-like 18000 M^-1 cm^-1 x 0.55 cm = 0.0099 AU/uM, product read.
            signal_per_substrate: -0.0099,
            noise_sd: 0.002,
            seed,
        }
    }

    fn plain(kcat: f64, km: f64) -> CurveConstants {
        CurveConstants {
            kcat,
            km,
            inverse_kp: 0.0,
            k_inact: 0.0,
        }
    }

    /// A straight line `a + b x` over 18 reads in six wells of three: its Jacobian and wells.
    fn line_over_six_wells(x: &[f64; 18]) -> (DMatrix<f64>, Vec<std::ops::Range<usize>>) {
        let jacobian = DMatrix::from_fn(18, 2, |row, column| if column == 0 { 1.0 } else { x[row] });
        (jacobian, (0..6).map(|g| 3 * g..3 * g + 3).collect())
    }

    #[test]
    fn effective_degrees_of_freedom_fall_when_few_wells_carry_a_constant() {
        // A line through 6 wells of 3 reads: the mean of equal wells has exactly wells - 1 = 5
        // degrees of freedom (the Bell-McCaffrey value for equal clusters: the clustered variance
        // is then the ordinary variance of the wells' means); a slope fixed mostly by the two end
        // wells gets fewer, and the t quantile follows.
        let x = [
            0.0, 0.0, 0.0, 1.0, 1.0, 1.0, 1.0, 1.0, 1.0, 1.0, 1.0, 1.0, 1.0, 1.0, 1.0, 10.0, 10.0, 10.0,
        ];
        let (jacobian, clusters) = line_over_six_wells(&x);
        let residuals = [0.0; 18];
        let leverage: crate::fit::ClusterLeverage =
            crate::fit::cluster_bias_reduced_covariance(&jacobian, &residuals, &clusters, None)
                .unwrap()
                .leverage;
        let slope = leverage.effective_degrees_of_freedom(&[0.0, 1.0]).unwrap();
        assert!(slope < 2.0, "{slope}");
        let even = DMatrix::from_element(18, 1, 1.0);
        let mean = crate::fit::cluster_bias_reduced_covariance(&even, &residuals, &clusters, None)
            .unwrap()
            .leverage;
        approx::assert_relative_eq!(
            mean.effective_degrees_of_freedom(&[1.0]).unwrap(),
            5.0,
            max_relative = 1e-12
        );
        assert!(leverage.quantile_975(&[0.0, 1.0]).unwrap() > mean.quantile_975(&[1.0]).unwrap());
    }

    #[test]
    fn shared_errors_bring_their_own_degrees_of_freedom() {
        // Satterthwaite's rule over the parts: a shared block as large as the wells' part and
        // known exactly gives (2v)^2 / (v^2 / d) = 4 d; with d_k degrees of freedom of its own,
        // 4 / (1 / d + 1 / d_k); a block that does not touch the contrast changes nothing.
        let x = [
            0.0, 0.0, 0.0, 1.0, 1.0, 1.0, 2.0, 2.0, 2.0, 3.0, 3.0, 3.0, 5.0, 5.0, 5.0, 8.0, 8.0, 8.0,
        ];
        let (jacobian, clusters) = line_over_six_wells(&x);
        let residuals: Vec<f64> = (0..18).map(|i| ((i * 7 % 5) as f64 - 2.0) * 0.01).collect();
        let adjusted = cluster_leverage_adjusted_covariance(
            &jacobian,
            &residuals,
            &clusters,
            LeverageAdjustment::Jackknife,
            None,
        )
        .unwrap();
        let contrast = [0.0, 1.0];
        let wells_dof = adjusted.leverage.effective_degrees_of_freedom(&contrast).unwrap();
        let wells_variance = adjusted.covariance[(1, 1)];
        let block = |variance: f64, other: f64| DMatrix::from_row_slice(2, 2, &[other, 0.0, 0.0, variance]);
        let with = |shared: Vec<(DMatrix<f64>, f64)>| WellLeverage {
            wells: adjusted.leverage.clone(),
            clustered: adjusted.covariance.clone(),
            shared,
        };
        let alone = with(Vec::new()).effective_dof(&contrast).unwrap();
        approx::assert_relative_eq!(alone, wells_dof, max_relative = 1e-12);
        let known = with(vec![(block(wells_variance, 0.0), f64::INFINITY)])
            .effective_dof(&contrast)
            .unwrap();
        approx::assert_relative_eq!(known, 4.0 * wells_dof, max_relative = 1e-12);
        let estimated = with(vec![(block(wells_variance, 0.0), 10.0)])
            .effective_dof(&contrast)
            .unwrap();
        approx::assert_relative_eq!(estimated, 4.0 / (1.0 / wells_dof + 0.1), max_relative = 1e-12);
        let elsewhere = with(vec![(block(0.0, 1.0), 2.0)])
            .effective_dof(&contrast)
            .unwrap();
        approx::assert_relative_eq!(elsewhere, wells_dof, max_relative = 1e-12);
        // More degrees of freedom, a shorter t.
        assert!(
            with(vec![(block(wells_variance, 0.0), f64::INFINITY)])
                .quantile_975(&contrast)
                .unwrap()
                < with(Vec::new()).quantile_975(&contrast).unwrap()
        );
    }

    #[test]
    fn projected_jacobian_matches_finite_differences() {
        // Analytic (implicit-differentiation / sensitivity) Jacobians of the projected residuals
        // against central differences (common practice).
        let wells = simulate_group(&spec(plain(12.0, 60.0), 1)).unwrap();
        for (model, parameters) in [
            (ProgressModel::MichaelisMenten, vec![12.0, 60.0, 7.0]),
            (ProgressModel::ProductInhibition, vec![12.0, 60.0, 0.01, 7.0]),
            (ProgressModel::Inactivation, vec![12.0, 60.0, 2e-4, 7.0]),
        ] {
            let options = GlobalFitOptions {
                model,
                fit_dead_time: true,
                ode: OdeTolerances { relative: 1e-12 },
                ..GlobalFitOptions::default()
            };
            let problem = ProgressProblem::new(&wells, &options);
            let check = check_jacobian_scaled(&problem, &parameters, &[1.0, 1.0, 1e-3, 1.0]);
            // Central differences with step eps^(1/3) |theta| carry the ~1e-15 relative rounding
            // of S (S0 up to 640 uM) divided by the step: about 1e-6 of a column's largest entry.
            assert!(check.largest_relative_error < 1e-5, "{model:?}: {check:?}");
        }
    }

    #[test]
    fn plain_fit_recovers_truth_and_its_intervals_cover_it() {
        let wells = simulate_group(&spec(plain(12.0, 60.0), 2)).unwrap();
        let fit = fit_group(&wells, &GlobalFitOptions::default()).unwrap();
        let kcat = fit.parameter("kcat").unwrap();
        let km = fit.parameter("Km").unwrap();
        assert!((kcat.value / 12.0 - 1.0).abs() < 0.03, "{kcat:?}");
        assert!((km.value / 60.0 - 1.0).abs() < 0.05, "{km:?}");
        let [lo, hi] = km.ci95.unwrap();
        assert!(lo < 60.0 && 60.0 < hi, "asymptotic interval {lo}..{hi}");
        let [plo, phi] = fit.km_profile_ci95.unwrap();
        let (plo, phi) = (plo.unwrap(), phi.unwrap());
        assert!(
            plo < km.value && km.value < phi && plo < 60.0 && 60.0 < phi,
            "profile {plo}..{phi}"
        );
        // The residual SD estimates the simulated noise.
        assert!((fit.residual_sd / 0.002 - 1.0).abs() < 0.1, "{}", fit.residual_sd);
        assert_eq!(fit.degrees_of_freedom, 8 * 60 - 2 - 8);
        // Offsets: simulated b = 0.04 + 0.002 i - g S0 with the fitted S-form offset b_i + g S.
        let first = &fit.wells[0];
        assert!(
            (first.signal_offset - (0.04 + 0.0099 * 5.0)).abs() < 0.002,
            "{first:?}"
        );
        assert!(fit.wells.iter().filter(|w| w.systematic_misfit).count() <= 1);
    }

    #[test]
    fn the_profile_limits_are_where_the_profile_reaches_its_threshold() {
        // The crossing search is checked against its definition: at each reported limit, Km held
        // there and kcat re-optimised from the optimum gives RSS_min (1 + c t^2 / dof) to within
        // the search's tolerance, and a step of 0.1% further out lies above it.
        let wells = simulate_group(&spec(plain(12.0, 60.0), 2)).unwrap();
        let options = GlobalFitOptions::default();
        let fit = fit_group(&wells, &options).unwrap();
        let problem = ProgressProblem::new(&wells, &options);
        let optimum = [fit.parameters[0].value, fit.parameters[1].value];
        let km = fit.parameter("Km").unwrap();
        let contrast = [0.0, 1.0];
        let quantile = fit
            .well_leverage
            .as_ref()
            .and_then(|l| l.quantile_975(&contrast))
            .unwrap();
        let scale = (km.se_by_well.unwrap() / km.se.unwrap()).powi(2) * quantile * quantile;
        let dof = fit.degrees_of_freedom as f64;
        let threshold = fit.rss * (1.0 + scale / dof);
        let profile_rss = |km_value: f64| {
            let fixed = Fixed {
                inner: &problem,
                full: vec![optimum[0], km_value],
                free: vec![0],
            };
            let (_, rss, _) = solve(&fixed, &optimum[..1], vec![0], "profile").unwrap();
            rss
        };
        let [lower, upper] = fit.km_profile_ci95.unwrap();
        for (limit, outward) in [(lower.unwrap(), 0.999), (upper.unwrap(), 1.001)] {
            let rss = profile_rss(limit);
            assert!(
                ((rss - fit.rss) / (threshold - fit.rss) - 1.0).abs() < 1e-3,
                "limit {limit}: RSS {rss}, threshold {threshold}, minimum {}",
                fit.rss
            );
            assert!(profile_rss(limit * outward) > threshold, "limit {limit}");
        }
    }

    #[test]
    fn a_warm_start_finds_the_cold_start_optimum() {
        // The same wells refitted from an earlier fit, and wells whose S0 is 5% off refitted from
        // the fit of the original ones (what the calibration sensitivity does): the warm route
        // reaches the optimum the grid start reaches, in no more solver iterations (and without
        // the grid's eleven evaluations; the time saved is in the closing note, not asserted).
        // Where the warm start is the optimum itself, strictly fewer: a warm route that silently
        // fell back to the cold one would count the cold route's iterations (measured here: 0
        // against 4 for the same wells, 4 against 8 for the extended model).
        let wells = simulate_group(&spec(plain(12.0, 60.0), 5)).unwrap();
        let options = GlobalFitOptions {
            profile_km: false,
            ..GlobalFitOptions::default()
        };
        let cold = fit_group(&wells, &options).unwrap();
        let shifted: Vec<WellCurve> = wells
            .iter()
            .map(|well| WellCurve {
                s0: 1.05 * well.s0,
                ..well.clone()
            })
            .collect();
        for (data, at_the_optimum) in [(&wells, true), (&shifted, false)] {
            let cold_here = fit_group(data, &options).unwrap();
            let warm = fit_group_from(data, &options, Some(&cold)).unwrap();
            for (a, b) in warm.parameters.iter().zip(&cold_here.parameters) {
                assert_relative_eq!(a.value, b.value, max_relative = 1e-6);
            }
            assert!(
                warm.iterations < cold_here.iterations
                    || (!at_the_optimum && warm.iterations == cold_here.iterations),
                "warm {} cold {}",
                warm.iterations,
                cold_here.iterations
            );
        }
        // An extended model from a plain fit: the plain stage starts warm, the result is the
        // cold route's.
        let extended = GlobalFitOptions {
            model: ProgressModel::ProductInhibition,
            ..options.clone()
        };
        let warm = fit_group_from(&wells, &extended, Some(&cold)).unwrap();
        let cold_extended = fit_group(&wells, &extended).unwrap();
        for (a, b) in warm.parameters.iter().zip(&cold_extended.parameters) {
            assert_relative_eq!(a.value, b.value, max_relative = 1e-5, epsilon = 1e-9);
        }
        assert!(
            warm.iterations < cold_extended.iterations,
            "warm {} cold {}",
            warm.iterations,
            cold_extended.iterations
        );
    }

    #[test]
    fn dead_time_is_estimated() {
        let mut truth = spec(plain(12.0, 60.0), 3);
        truth.dead_time_s = 20.0;
        let wells = simulate_group(&truth).unwrap();
        let options = GlobalFitOptions {
            fit_dead_time: true,
            profile_km: false,
            ..GlobalFitOptions::default()
        };
        let fit = fit_group(&wells, &options).unwrap();
        let dead = fit.parameter("dead_time").unwrap();
        assert!(
            (dead.value - 20.0).abs() < 3.0 * dead.se.unwrap() + 1.0,
            "{dead:?}"
        );
        assert!((fit.parameter("Km").unwrap().value / 60.0 - 1.0).abs() < 0.06);
    }

    #[test]
    fn product_inhibition_is_recovered_from_ode_data_and_not_needed_without_it() {
        let inhibited = CurveConstants {
            inverse_kp: 1.0 / 40.0,
            ..plain(12.0, 60.0)
        };
        let wells = simulate_group(&spec(inhibited, 4)).unwrap();
        let options = GlobalFitOptions {
            model: ProgressModel::ProductInhibition,
            profile_km: false,
            ..GlobalFitOptions::default()
        };
        let fit = fit_group(&wells, &options).unwrap();
        let q = fit.parameter("inverse_Kp").unwrap();
        assert!((q.value * 40.0 - 1.0).abs() < 0.15, "{q:?}");
        let plain_fit = fit_group(
            &wells,
            &GlobalFitOptions {
                profile_km: false,
                ..GlobalFitOptions::default()
            },
        )
        .unwrap();
        let (_, p) = extra_sum_of_squares_test(plain_fit.rss, fit.rss, fit.degrees_of_freedom).unwrap();
        assert!(p < 1e-6 && fit.aicc < plain_fit.aicc, "p {p}");

        let clean = simulate_group(&spec(plain(12.0, 60.0), 5)).unwrap();
        let with_term = fit_group(&clean, &options).unwrap();
        let without = fit_group(
            &clean,
            &GlobalFitOptions {
                profile_km: false,
                ..GlobalFitOptions::default()
            },
        )
        .unwrap();
        let q = with_term.parameter("inverse_Kp").unwrap();
        let [lo, hi] = q.ci95.unwrap();
        assert!(
            lo < 0.0 && 0.0 < hi,
            "1/Kp interval {lo}..{hi} must include 0 when absent"
        );
        let (_, p) =
            extra_sum_of_squares_test(without.rss, with_term.rss, with_term.degrees_of_freedom).unwrap();
        assert!(p > 0.01, "p {p}");
    }

    #[test]
    fn inactivation_is_recovered_from_ode_data() {
        let decaying = CurveConstants {
            k_inact: 8e-4,
            ..plain(12.0, 60.0)
        };
        let wells = simulate_group(&spec(decaying, 6)).unwrap();
        let options = GlobalFitOptions {
            model: ProgressModel::Inactivation,
            profile_km: false,
            ..GlobalFitOptions::default()
        };
        let fit = fit_group(&wells, &options).unwrap();
        let k = fit.parameter("k_inact").unwrap();
        assert!((k.value / 8e-4 - 1.0).abs() < 0.15, "{k:?}");
        assert!((fit.parameter("kcat").unwrap().value / 12.0 - 1.0).abs() < 0.05);
    }

    #[test]
    fn bad_groups_give_clear_errors() {
        let wells = simulate_group(&spec(plain(12.0, 60.0), 7)).unwrap();
        let one = fit_group(&wells[..1], &GlobalFitOptions::default()).unwrap_err();
        assert!(
            one.to_string().contains("at least 2 wells") && one.to_string().contains("W1"),
            "{one}"
        );
        let mut flat = spec(plain(0.0, 60.0), 8);
        flat.constants.kcat = 0.0;
        let flat_wells = simulate_group(&flat).unwrap();
        let error = fit_group(&flat_wells, &GlobalFitOptions::default()).unwrap_err();
        assert_eq!(error, ProgressError::FlatCurves);
        let mut no_substrate = wells.clone();
        no_substrate[2].s0 = 0.0;
        let error = fit_group(&no_substrate, &GlobalFitOptions::default()).unwrap_err();
        assert!(
            error.to_string().contains("W3") && error.to_string().contains("substrate"),
            "{error}"
        );
    }

    #[test]
    fn runs_test_sees_systematic_patterns() {
        let alternating: Vec<f64> = (0..40).map(|i| if i % 2 == 0 { 1.0 } else { -1.0 }).collect();
        let (runs, z) = runs_test(&alternating);
        assert_eq!(runs, 40);
        assert!(z.unwrap() > 3.0);
        let blocks: Vec<f64> = (0..40).map(|i| if i < 20 { 1.0 } else { -1.0 }).collect();
        let (runs, z) = runs_test(&blocks);
        assert_eq!(runs, 2);
        assert!(z.unwrap() < -5.0);
    }
}
