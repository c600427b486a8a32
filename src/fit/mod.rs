//! Curve fitting for platekin: a general nonlinear least-squares core (Levenberg-Marquardt through
//! argmin, asymptotic standard errors, t and F quantiles) and the Michaelis-Menten fit built on it.
//!
//! Residuals are always `model - observed`. Every result type is `serde::Serialize`.

pub mod dose_response;
pub mod inference;
pub mod integrated;
pub mod lambert;
pub mod least_squares;
pub mod michaelis_menten;
pub mod models;
pub mod selection;

pub use least_squares::{
    asymptotic_covariance, check_jacobian, check_jacobian_scaled, cluster_bias_reduced_covariance,
    cluster_jackknife_covariance, cluster_leverage_adjusted_covariance, cluster_robust_covariance,
    confidence_interval_95, f_quantile, finite_difference_jacobian, finite_difference_jacobian_scaled,
    fit_least_squares, t_quantile, t_quantile_975, ClusterEffects, ClusterLeverage, ConvergenceTest,
    CovarianceSummary, FitError, JacobianDiscrepancy, LeastSquaresFit, LeastSquaresOptions,
    LevenbergMarquardt, LevenbergMarquardtState, LeverageAdjustedCovariance, LeverageAdjustment,
    ResidualModel, ResidualProblem, StopReason,
};
pub use michaelis_menten::{
    describe_michaelis_menten, fit_michaelis_menten, linearised_estimates, michaelis_menten_rate,
    turnover_estimates, vmax_over_km_delta_method, LinearisedEstimate, LinearisedEstimates,
    MichaelisMentenFit, MichaelisMentenModel, MichaelisMentenOptions, ParameterEstimate, SpecificityModel,
    StartMethod, TurnoverEstimates, MAXIMUM_RELATIVE_STANDARD_ERROR, SUBSTRATE_ABOVE_KM_FACTOR,
    SUBSTRATE_BELOW_KM_FACTOR,
};
