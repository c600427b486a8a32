//! The typed choices of a run: every setting that is a choice among named options is an enum here,
//! parsed once from its word (flags or the assay file) and passed down as a value. The layers
//! below the configuration never see the words again; the words come back only when settings are
//! written out.

use std::fmt;
use std::str::FromStr;

use serde::Serialize;

use crate::core::plate::PlateFormat;
use crate::core::units::TimeUnit;

/// Which species the reader sees.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Readout {
    /// The species read is formed: the signal rises.
    Product,
    /// The species read is consumed: the signal falls.
    Substrate,
}

impl Readout {
    /// The word the settings write.
    pub fn word(self) -> &'static str {
        match self {
            Readout::Product => "product",
            Readout::Substrate => "substrate",
        }
    }
}

impl std::str::FromStr for Readout {
    type Err = String;

    fn from_str(text: &str) -> Result<Self, Self::Err> {
        match text.trim().to_ascii_lowercase().as_str() {
            "product" => Ok(Readout::Product),
            "substrate" => Ok(Readout::Substrate),
            other => Err(format!(
                "unknown readout '{other}' (expected product or substrate)"
            )),
        }
    }
}

/// What the reader measures, which decides how a signal becomes a concentration and when a read
/// is past the instrument's range.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum SignalKind {
    /// Absorbance (AU): Beer-Lambert applies, and `max-absorbance` bounds the photometric range.
    #[default]
    Absorbance,
    /// Fluorescence (relative fluorescence units): no extinction coefficient relates it to a
    /// concentration; a standard curve does. The range ends at the reader's over-range marker or
    /// at `max-signal`.
    Fluorescence,
    /// Luminescence (relative light units): as fluorescence.
    Luminescence,
}

impl SignalKind {
    /// The word the settings write.
    pub fn word(self) -> &'static str {
        match self {
            SignalKind::Absorbance => "absorbance",
            SignalKind::Fluorescence => "fluorescence",
            SignalKind::Luminescence => "luminescence",
        }
    }

    /// The unit of the raw signal, as outputs write it.
    pub fn raw_unit(self) -> &'static str {
        match self {
            SignalKind::Absorbance => "AU",
            SignalKind::Fluorescence => "RFU",
            SignalKind::Luminescence => "RLU",
        }
    }
}

impl std::str::FromStr for SignalKind {
    type Err = String;

    fn from_str(text: &str) -> Result<Self, Self::Err> {
        match text.trim().to_ascii_lowercase().as_str() {
            "absorbance" => Ok(SignalKind::Absorbance),
            "fluorescence" => Ok(SignalKind::Fluorescence),
            "luminescence" => Ok(SignalKind::Luminescence),
            other => Err(format!(
                "unknown signal '{other}' (expected absorbance, fluorescence or luminescence)"
            )),
        }
    }
}

/// The time unit kcat (and kcat/Km) are reported in.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, serde::Serialize, serde::Deserialize)]
pub enum KcatUnit {
    /// Per second (the default, as every earlier output).
    #[default]
    PerSecond,
    /// Per minute.
    PerMinute,
}

impl KcatUnit {
    /// The word the settings write (`1/s`, `1/min`).
    pub fn word(self) -> &'static str {
        match self {
            KcatUnit::PerSecond => "1/s",
            KcatUnit::PerMinute => "1/min",
        }
    }

    /// How many of this unit one per-second value is (1 or 60).
    pub fn per_second_factor(self) -> f64 {
        match self {
            KcatUnit::PerSecond => 1.0,
            KcatUnit::PerMinute => 60.0,
        }
    }

    /// The time in a compound unit (`s`, `min`).
    pub fn time_symbol(self) -> &'static str {
        match self {
            KcatUnit::PerSecond => "s",
            KcatUnit::PerMinute => "min",
        }
    }
}

impl std::str::FromStr for KcatUnit {
    type Err = String;

    fn from_str(text: &str) -> Result<Self, Self::Err> {
        match text.trim().to_ascii_lowercase().replace(' ', "").as_str() {
            "1/s" | "s-1" | "/s" => Ok(KcatUnit::PerSecond),
            "1/min" | "min-1" | "/min" => Ok(KcatUnit::PerMinute),
            other => Err(format!("unknown kcat unit '{other}' (expected 1/s or 1/min)")),
        }
    }
}

/// When the progress-curve analysis runs for a group.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum ProgressMode {
    /// For groups whose initial rates are suspect (depleted or nonlinear wells, conversion above
    /// the limit).
    Auto,
    /// For every group.
    Always,
    /// Never.
    Never,
}

impl std::str::FromStr for ProgressMode {
    type Err = String;

    fn from_str(text: &str) -> Result<Self, Self::Err> {
        match text.trim().to_ascii_lowercase().as_str() {
            "auto" => Ok(ProgressMode::Auto),
            "always" => Ok(ProgressMode::Always),
            "never" => Ok(ProgressMode::Never),
            other => Err(format!("unknown mode '{other}' (expected auto, always or never)")),
        }
    }
}

impl ProgressMode {
    /// The word the settings write.
    pub fn word(self) -> &'static str {
        match self {
            ProgressMode::Auto => "auto",
            ProgressMode::Always => "always",
            ProgressMode::Never => "never",
        }
    }
}

/// How a well's initial rate (the rate at mixing) is estimated from its window.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum InitialRateEstimator {
    /// The window's straight-line slope (a chord: it runs low by about half the fraction the
    /// window converts when S0 is well below Km).
    Chord,
    /// The tangent at mixing time of a quadratic over the window.
    Tangent,
    /// The window's slope corrected for depletion by the group's integrated rate law (iterated
    /// with the group's fit).
    #[default]
    Integrated,
}

/// The default conversion limit of a window under the `integrated` estimator: the estimator
/// corrects the chord for depletion by the group's integrated rate law, so the 10% rule's bias is
/// gone and the limit only bounds how far that law must hold. Chosen by simulation
/// (`examples/coverage_study.rs`, DEVELOPERS.md): at 10% the limit, judged from each window's own
/// slope, picks windows on the noise and left Km +0.4% to +1.7% high; at 30% the bias is under
/// 0.3% on every design studied and the Km RMSE falls by half.
pub const INTEGRATED_MAX_CONVERSION: f64 = 0.30;

/// The default conversion limit for the `chord` and `tangent` estimators: the 10% rule of thumb
/// for initial-rate conditions (common practice), which bounds the chord's depletion bias.
pub const CHORD_MAX_CONVERSION: f64 = 0.10;

impl InitialRateEstimator {
    /// Whether the estimator corrects a window's slope for substrate depletion (so the window
    /// may bend as depletion bends it, and convert more).
    pub fn corrects_depletion(self) -> bool {
        self == InitialRateEstimator::Integrated
    }

    /// The conversion limit of a window when none is given.
    pub fn default_max_conversion(self) -> f64 {
        if self.corrects_depletion() {
            INTEGRATED_MAX_CONVERSION
        } else {
            CHORD_MAX_CONVERSION
        }
    }

    /// The word the settings write.
    pub fn word(self) -> &'static str {
        match self {
            InitialRateEstimator::Chord => "chord",
            InitialRateEstimator::Tangent => "tangent",
            InitialRateEstimator::Integrated => "integrated",
        }
    }
}

impl std::str::FromStr for InitialRateEstimator {
    type Err = String;

    fn from_str(text: &str) -> Result<Self, Self::Err> {
        match text.trim().to_ascii_lowercase().as_str() {
            "chord" => Ok(InitialRateEstimator::Chord),
            "tangent" => Ok(InitialRateEstimator::Tangent),
            "integrated" => Ok(InitialRateEstimator::Integrated),
            other => Err(format!(
                "unknown estimator '{other}' (expected integrated, tangent or chord)"
            )),
        }
    }
}

/// Which calibration function a plate's standard curves use.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum StandardCurveModel {
    /// A straight line, unless the curvature test finds the top bending: then a second-order
    /// curve over every level (its slope where the samples read carries no range-choice bias).
    #[default]
    Auto,
    /// A straight line up to the highest concentration still linear.
    Line,
    /// A second-order curve over every level (ISO 8466-2:2001).
    Quadratic,
}

impl StandardCurveModel {
    /// The word the settings write.
    pub fn word(self) -> &'static str {
        match self {
            StandardCurveModel::Auto => "auto",
            StandardCurveModel::Line => "line",
            StandardCurveModel::Quadratic => "quadratic",
        }
    }
}

impl std::str::FromStr for StandardCurveModel {
    type Err = String;

    fn from_str(text: &str) -> Result<Self, Self::Err> {
        match text.trim().to_ascii_lowercase().as_str() {
            "auto" => Ok(StandardCurveModel::Auto),
            "line" => Ok(StandardCurveModel::Line),
            "quadratic" => Ok(StandardCurveModel::Quadratic),
            other => Err(format!(
                "unknown standard-curve model '{other}' (expected auto, line or quadratic)"
            )),
        }
    }
}

/// Settings of the progress-curve analysis.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct ProgressSettings {
    /// When it runs.
    pub mode: ProgressMode,
    /// Estimate one shared dead time per group.
    pub fit_dead_time: bool,
    /// Take each well's S0 from its own first signal (substrate readout) instead of the layout.
    pub s0_from_signal: bool,
}

impl Default for ProgressSettings {
    fn default() -> Self {
        ProgressSettings {
            mode: ProgressMode::Auto,
            fit_dead_time: false,
            s0_from_signal: false,
        }
    }
}

/// The layout of a kinetic export.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum DataShape {
    /// One header row: a time column and one column per well; one row per read.
    Wide,
    /// One plate-shaped block per read (rows A, B, ... by columns 1, 2, ...) under a time line.
    Grid,
    /// One row per well per read, with well, time and value columns.
    Long,
}

impl DataShape {
    /// Every shape, in the order detection tries them on one row.
    pub const ALL: [DataShape; 3] = [Self::Wide, Self::Grid, Self::Long];

    /// The lowercase name used on the command line and in reports.
    pub fn name(self) -> &'static str {
        match self {
            Self::Wide => "wide",
            Self::Grid => "grid",
            Self::Long => "long",
        }
    }
}

impl fmt::Display for DataShape {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

impl FromStr for DataShape {
    type Err = String;

    fn from_str(text: &str) -> Result<Self, Self::Err> {
        match text.trim().to_ascii_lowercase().as_str() {
            "wide" => Ok(Self::Wide),
            "grid" => Ok(Self::Grid),
            "long" => Ok(Self::Long),
            other => Err(format!(
                "unknown data shape '{other}' (expected wide, grid or long)"
            )),
        }
    }
}

/// What to do with a data row cut short (an aborted read).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Default, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum ShortRowPolicy {
    /// Stop with an error naming the line.
    Refuse,
    /// Keep the read; its missing cells become unreadable and a warning names the line.
    #[default]
    #[serde(rename = "unreadable")]
    TreatAsUnreadable,
}

impl fmt::Display for ShortRowPolicy {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            Self::Refuse => "refuse",
            Self::TreatAsUnreadable => "unreadable",
        })
    }
}

impl FromStr for ShortRowPolicy {
    type Err = String;

    fn from_str(text: &str) -> Result<Self, Self::Err> {
        match text.trim().to_ascii_lowercase().as_str() {
            "refuse" => Ok(Self::Refuse),
            "unreadable" => Ok(Self::TreatAsUnreadable),
            other => Err(format!(
                "unknown policy '{other}' (expected refuse or unreadable)"
            )),
        }
    }
}

/// How to read an export. The default detects everything.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct ImportOptions {
    /// Force a shape instead of detecting it.
    pub shape: Option<DataShape>,
    /// The unit of plain-number times (needed when no header or block line states one).
    pub time_unit: Option<TimeUnit>,
    /// The plate format, instead of inferring it from the well IDs.
    pub plate: Option<PlateFormat>,
    /// The spreadsheet sheet to read (default: the first sheet holding kinetic data).
    pub sheet: Option<String>,
    /// What to do with rows cut short.
    pub short_rows: ShortRowPolicy,
    /// The wavelength to analyse in an export holding several, nm.
    pub wavelength_nm: Option<f64>,
    /// A reference wavelength whose read is subtracted per read and well, nm.
    pub reference_wavelength_nm: Option<f64>,
}

/// The rate laws platekin fits.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum RateModelKind {
    MichaelisMenten,
    SubstrateInhibition,
    Hill,
    Competitive,
    Uncompetitive,
    Noncompetitive,
    Mixed,
    Morrison,
    Ic50,
}

/// Every kind, in a fixed order.
pub const ALL_RATE_MODELS: [RateModelKind; 9] = [
    RateModelKind::MichaelisMenten,
    RateModelKind::SubstrateInhibition,
    RateModelKind::Hill,
    RateModelKind::Competitive,
    RateModelKind::Uncompetitive,
    RateModelKind::Noncompetitive,
    RateModelKind::Mixed,
    RateModelKind::Morrison,
    RateModelKind::Ic50,
];

impl RateModelKind {
    /// The name used on the command line and in `fit.json`.
    pub fn name(self) -> &'static str {
        match self {
            RateModelKind::MichaelisMenten => "michaelis-menten",
            RateModelKind::SubstrateInhibition => "substrate-inhibition",
            RateModelKind::Hill => "hill",
            RateModelKind::Competitive => "competitive",
            RateModelKind::Uncompetitive => "uncompetitive",
            RateModelKind::Noncompetitive => "noncompetitive",
            RateModelKind::Mixed => "mixed",
            RateModelKind::Morrison => "morrison",
            RateModelKind::Ic50 => "ic50",
        }
    }

    /// Parses a command-line name.
    pub fn from_name(name: &str) -> Option<RateModelKind> {
        ALL_RATE_MODELS.into_iter().find(|kind| kind.name() == name)
    }
}

impl fmt::Display for RateModelKind {
    fn fmt(&self, formatter: &mut fmt::Formatter<'_>) -> fmt::Result {
        formatter.write_str(self.name())
    }
}

/// How the points are weighted.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Default)]
#[serde(rename_all = "kebab-case")]
pub enum Weighting {
    /// `rate-se` where every point carries its own standard error (a plate's wells, a rate table
    /// with a `rate_se` column), else `none`: resolved per group by [`Weighting::resolve`]. The
    /// default, chosen by the coverage study (DEVELOPERS.md, "Initial-rate estimators").
    #[default]
    Auto,
    /// Every point weight 1 (constant absolute error).
    None,
    /// `1 / v^2` from the observed rate (constant relative error).
    Relative,
    /// `1 / sd^2` from each point's replicate standard deviation.
    ReplicateSd,
    /// `1 / (se^2 + extra)` from each point's own standard error (a well's rate from its window
    /// fit) and the replicates' extra variance (a constant and, under the integrated estimator, a
    /// substrate-pipetting part; see `groups::replicate_extra_variance`).
    RateSe,
}

impl Weighting {
    /// The weighting used for points where `every_point_has_se` says whether each carries its
    /// own standard error: `auto` becomes `rate-se` or `none`, the others stay.
    pub fn resolve(self, every_point_has_se: bool) -> Weighting {
        match self {
            Weighting::Auto if every_point_has_se => Weighting::RateSe,
            Weighting::Auto => Weighting::None,
            chosen => chosen,
        }
    }
    pub fn name(self) -> &'static str {
        match self {
            Weighting::Auto => "auto",
            Weighting::None => "none",
            Weighting::Relative => "relative",
            Weighting::ReplicateSd => "replicate-sd",
            Weighting::RateSe => "rate-se",
        }
    }
    pub fn from_name(name: &str) -> Option<Weighting> {
        [
            Weighting::Auto,
            Weighting::None,
            Weighting::Relative,
            Weighting::ReplicateSd,
            Weighting::RateSe,
        ]
        .into_iter()
        .find(|weighting| weighting.name() == name)
    }
}

/// The loss minimised.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Default)]
#[serde(rename_all = "kebab-case")]
pub enum RobustLoss {
    /// Plain (weighted) least squares.
    #[default]
    None,
    /// Huber's loss, `c = 1.345` robust standard deviations.
    Huber,
}

impl RobustLoss {
    pub fn name(self) -> &'static str {
        match self {
            RobustLoss::None => "none",
            RobustLoss::Huber => "huber",
        }
    }
    pub fn from_name(name: &str) -> Option<RobustLoss> {
        [RobustLoss::None, RobustLoss::Huber]
            .into_iter()
            .find(|loss| loss.name() == name)
    }
}

/// Settings of the residual bootstrap.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub struct BootstrapSettings {
    pub replicates: usize,
    pub seed: u64,
}

/// Which model to fit.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub enum ModelRequest {
    /// Fit the candidates and keep the one the data support.
    Auto,
    /// Fit this one model.
    Fixed(RateModelKind),
}

impl ModelRequest {
    pub fn name(self) -> &'static str {
        match self {
            ModelRequest::Auto => "auto",
            ModelRequest::Fixed(kind) => kind.name(),
        }
    }
    pub fn from_name(name: &str) -> Option<ModelRequest> {
        if name == "auto" {
            Some(ModelRequest::Auto)
        } else {
            RateModelKind::from_name(name).map(ModelRequest::Fixed)
        }
    }
}

/// How windows are chosen.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct RateSettings {
    /// Fewest reads in a window.
    pub min_points: usize,
    /// Largest fraction of substrate converted by the window's end.
    pub max_conversion: f64,
    /// Whether the straightness tests allow the downward curvature that substrate depletion
    /// alone can make (`rates::well` module docs): true when the initial-rate estimator corrects
    /// for depletion, so that depletion does not end windows on the noise.
    pub allow_depletion_curvature: bool,
    /// Reads before this time (s) are ignored.
    pub skip_s: f64,
    /// A fixed window (start, end) in seconds instead of the automatic choice.
    pub fixed_window_s: Option<(f64, f64)>,
    /// Level of the straightness tests.
    pub alpha: f64,
    /// Raw signal above which reads are not used: `max-absorbance` for absorbance, `max-signal`
    /// (infinite when not given) for fluorescence and luminescence.
    pub max_absorbance: f64,
    /// What the reader measures (the words of the saturation note; over-range markers).
    pub signal: SignalKind,
    /// Time from mixing (the reaction's start) to the export's time zero, s: counted in the
    /// conversion limit and in the extrapolation of initial rates to mixing time.
    pub dead_time_s: f64,
}

impl Default for RateSettings {
    fn default() -> Self {
        RateSettings {
            min_points: 5,
            max_conversion: InitialRateEstimator::default().default_max_conversion(),
            allow_depletion_curvature: InitialRateEstimator::default().corrects_depletion(),
            skip_s: 0.0,
            fixed_window_s: None,
            alpha: 0.01,
            max_absorbance: 3.0,
            signal: SignalKind::Absorbance,
            dead_time_s: 0.0,
        }
    }
}

/// How much report a run writes.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum ReportMode {
    /// No report (the tables, `fit.json` and `run.json` only).
    None,
    /// `report.html`.
    #[default]
    Html,
    /// `report.html` and one PNG per plot in `plots/`.
    Full,
}

impl ReportMode {
    /// The word used on the command line and in settings.
    pub fn word(self) -> &'static str {
        match self {
            ReportMode::None => "none",
            ReportMode::Html => "html",
            ReportMode::Full => "full",
        }
    }
}

impl std::str::FromStr for ReportMode {
    type Err = String;

    fn from_str(text: &str) -> Result<Self, Self::Err> {
        match text.trim().to_ascii_lowercase().as_str() {
            "none" => Ok(ReportMode::None),
            "html" => Ok(ReportMode::Html),
            "full" => Ok(ReportMode::Full),
            other => Err(format!("unknown report '{other}' (expected none, html or full)")),
        }
    }
}

/// How groups are fitted.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct FitSettings {
    /// The model asked for; `None` is the default rule (auto where a group varies the inhibitor,
    /// else Michaelis-Menten).
    pub model: Option<ModelRequest>,
    pub weighting: Weighting,
    pub loss: RobustLoss,
    /// Profile-likelihood intervals (default true).
    pub profile: bool,
    pub bootstrap: Option<BootstrapSettings>,
    /// Km (substrate unit) for the Cheng-Prusoff conversion of an IC50.
    pub cheng_prusoff_km: Option<f64>,
}

impl Default for FitSettings {
    fn default() -> Self {
        FitSettings {
            model: None,
            weighting: Weighting::Auto,
            loss: RobustLoss::None,
            profile: true,
            bootstrap: None,
            cheng_prusoff_km: None,
        }
    }
}
