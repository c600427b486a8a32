//! The command line: clap's raw flags, validated only, then resolved into the library's plain
//! settings (the library never sees clap types). Only the binary uses this module.

use std::path::PathBuf;

use clap::{Args, Parser, Subcommand};

use platekin::config::SettingLayer;

/// Initial rates, linearity checks and Michaelis-Menten fits for continuous enzyme assays read in
/// microplates. Results support, and do not replace, your lab's validated procedures.
#[derive(Debug, Parser)]
#[command(name = "platekin", version, about, long_about = None)]
pub struct Cli {
    /// What to do.
    #[command(subcommand)]
    pub command: Command,
}

/// The subcommands.
#[derive(Debug, Subcommand)]
pub enum Command {
    /// Analyse a plate: rates per well, flags, per-condition table and Michaelis-Menten fits.
    Run(Box<RunArgs>),
    /// Show what was understood of a raw export: shape, plate, wells, reads, times, unreadable cells.
    Inspect(InspectArgs),
    /// Run the embedded demo plate (an invented esterase assay) and write its results.
    Demo(DemoArgs),
    /// Fit a rate table (a run's conditions.csv or wells.csv, or a CSV/XLSX with `substrate` and
    /// `rate` columns) and write fit.json and a summary.
    Fit(Box<FitArgs>),
    /// Run many plates: every plate of a manifest (or every export in a folder, with --layout) in
    /// parallel, each as `run` would, then combined tables (Parquet and CSV), cross-plate fits and
    /// a campaign report.
    Batch(Box<BatchArgs>),
}

/// `platekin batch`: the run flags (applied to every plate) and the campaign's own.
#[derive(Debug, Args)]
#[command(mut_arg("data", |arg| arg
    .value_name("MANIFEST")
    .help("The manifest (CSV or spreadsheet: columns data and layout, optional plate and assay, any other column a plate factor) or a folder of exports (with --layout)")))]
#[command(mut_arg("force", |arg| arg
    .help("Analyse every plate again (by default a plate whose inputs and settings did not change keeps its results); also write into a non-empty folder platekin did not make")))]
pub struct BatchArgs {
    /// The run flags, for every plate; a plate's own assay file overrides them.
    #[command(flatten)]
    pub run: RunArgs,
    /// Plates analysed at once (default: the number of cores; at most 64).
    #[arg(long, value_name = "N")]
    pub jobs: Option<usize>,
    /// Fit the plates sharing these factors' values together (one Km, one kcat per plate); a
    /// factor is a manifest column or a layout factor.
    #[arg(long, value_name = "FACTOR[,FACTOR]", value_delimiter = ',')]
    pub pool_by: Vec<String>,
    /// No progress on stderr (failed plates are still named there).
    #[arg(long)]
    pub quiet: bool,
}

/// How rates are fitted (shared by `run` and `fit`).
#[derive(Debug, Args)]
pub struct ModelArgs {
    /// Rate law: auto, michaelis-menten, competitive, uncompetitive, noncompetitive, mixed,
    /// substrate-inhibition, hill, morrison or ic50 (default: auto where a group varies the
    /// inhibitor, else michaelis-menten).
    #[arg(long, value_name = "MODEL")]
    pub model: Option<String>,
    /// Point weights: auto (default: rate-se where every point has its own SE, else none), none,
    /// relative (1/v^2), replicate-sd (1/SD^2) or rate-se (1/(SE^2 + replicates' extra variance)).
    #[arg(long, value_name = "auto|none|relative|replicate-sd|rate-se")]
    pub weighting: Option<String>,
    /// Robust loss against outliers: none (default) or huber.
    #[arg(long, value_name = "none|huber")]
    pub robust: Option<String>,
    /// Residual-bootstrap replicates for percentile intervals (default: none).
    #[arg(long, value_name = "N")]
    pub bootstrap: Option<usize>,
    /// Seed of the bootstrap (default 1).
    #[arg(long, value_name = "SEED")]
    pub seed: Option<u64>,
    /// Skip the profile-likelihood intervals.
    #[arg(long)]
    pub no_profile: bool,
    /// Km (substrate unit) for the Cheng-Prusoff Ki of an IC50 (an assumption, labelled as such).
    #[arg(long, value_name = "KM")]
    pub cheng_prusoff_km: Option<f64>,
}

/// `platekin fit`.
#[derive(Debug, Args)]
pub struct FitArgs {
    /// The rate table.
    pub table: PathBuf,
    /// Output folder.
    #[arg(long, value_name = "DIR")]
    pub out: PathBuf,
    /// Write into a non-empty folder that platekin did not make.
    #[arg(long)]
    pub force: bool,
    /// Sheet of a spreadsheet table.
    #[arg(long, value_name = "NAME")]
    pub sheet: Option<String>,
    #[command(flatten)]
    pub models: ModelArgs,
}

/// How the raw export is read (shared by `run` and `inspect`).
#[derive(Debug, Args)]
pub struct ReadArgs {
    /// Sheet of a spreadsheet export (default: the first sheet holding data).
    #[arg(long, value_name = "NAME")]
    pub sheet: Option<String>,
    /// Force the export's shape instead of detecting it.
    #[arg(long, value_name = "wide|grid|long")]
    pub shape: Option<String>,
    /// Force the plate format instead of inferring it from the well IDs.
    #[arg(long, value_name = "96|384|1536")]
    pub plate: Option<String>,
    /// Unit of plain-number times when the header gives none.
    #[arg(long, value_name = "s|min|h")]
    pub time_unit: Option<String>,
    /// A data row cut short: `refuse` it, or read its missing cells as `unreadable` (default).
    #[arg(long, value_name = "refuse|unreadable")]
    pub short_rows: Option<String>,
    /// The wavelength to analyse (or inspect) in an export holding reads at several (labelled blocks,
    /// well columns such as `A1 405 nm`, or a `wavelength` column), nm.
    #[arg(long, value_name = "NM")]
    pub wavelength: Option<f64>,
    /// A reference wavelength whose read is subtracted from the analysed one per read and well
    /// (dual-wavelength correction for turbidity and well-to-well optics), nm.
    #[arg(long, value_name = "NM")]
    pub reference_wavelength: Option<f64>,
}

/// `platekin run`.
#[derive(Debug, Args)]
pub struct RunArgs {
    /// The plate reader's raw kinetic export (CSV, TSV, TXT, XLSX, XLS or ODS).
    pub data: PathBuf,
    /// The plate layout (tidy table or plate-shaped grid; CSV or spreadsheet).
    #[arg(long, value_name = "LAYOUT")]
    pub layout: Option<PathBuf>,
    /// Output folder.
    #[arg(long, value_name = "DIR")]
    pub out: PathBuf,
    /// Write into a non-empty folder that platekin did not make.
    #[arg(long)]
    pub force: bool,
    /// Assay settings file (TOML, same keys as these flags; flags win).
    #[arg(long, value_name = "assay.toml")]
    pub assay: Option<PathBuf>,
    /// Sheet of a spreadsheet layout.
    #[arg(long, value_name = "NAME")]
    pub layout_sheet: Option<String>,
    #[command(flatten)]
    pub read: ReadArgs,
    /// The species read is formed (`product`, signal rises) or consumed (`substrate`, signal falls).
    #[arg(long, value_name = "product|substrate")]
    pub readout: Option<String>,
    /// Extinction coefficient of the species read at the read wavelength, M^-1 cm^-1.
    #[arg(long, value_name = "M^-1 cm^-1")]
    pub extinction: Option<f64>,
    /// Optical pathlength, cm (the liquid height in a plate, not 1 cm).
    #[arg(long, value_name = "cm")]
    pub pathlength: Option<f64>,
    /// What the reader measures: absorbance (default; Beer-Lambert with --extinction and
    /// --pathlength), fluorescence or luminescence (converted by standards on the plate).
    #[arg(long, value_name = "absorbance|fluorescence|luminescence")]
    pub signal: Option<String>,
    /// Fluorescence or luminescence above which reads are not used (default: only the reader's
    /// over-range marker ends the usable reads).
    #[arg(long, value_name = "SIGNAL")]
    pub max_signal: Option<f64>,
    /// Liquid volume in each well, uL: the pathlength becomes the liquid's height in the well
    /// (meniscus ignored), with --well-diameter or --well-geometry.
    #[arg(long, value_name = "UL")]
    pub volume: Option<f64>,
    /// Diameter of a round, flat-bottomed well, mm (for --volume).
    #[arg(long, value_name = "MM")]
    pub well_diameter: Option<f64>,
    /// A named well shape for --volume: 96-round, 96-half-area, 384-square, 384-round or
    /// 1536-square (typical dimensions; the plate's own drawing is better).
    #[arg(long, value_name = "NAME")]
    pub well_geometry: Option<String>,
    /// A per-well pathlength table (CSV or spreadsheet): a `well` column and either
    /// `pathlength [cm]` or the water-peak reads `A977` and `A900`; listed wells use their own.
    #[arg(long, value_name = "FILE")]
    pub pathlength_from: Option<PathBuf>,
    /// The 1-cm (A977 - A900) of water for the water-peak method, AU (default 0.18, room
    /// temperature; read your buffer at the assay temperature).
    #[arg(long, value_name = "AU")]
    pub water_reference: Option<f64>,
    /// The unit of kcat and kcat/Km in every output: 1/s (default) or 1/min.
    #[arg(long, value_name = "1/s|1/min")]
    pub kcat_unit: Option<String>,
    /// The unit of every rate (tables, fit.json, summary, report): a concentration per s, min or
    /// h, such as uM/min or nM/s (default: the layout's unit per second, uM/s for a layout in uM).
    #[arg(long, value_name = "UNIT")]
    pub rate_unit: Option<String>,
    /// The enzyme's molecular weight in kDa: with an enzyme given as mg/mL or ug/mL in the
    /// layout, kcat is computed beside the specific activity (U/mg).
    #[arg(long, value_name = "KDA")]
    pub enzyme_mw: Option<f64>,
    /// Dead time: reads before this many seconds are ignored.
    #[arg(long, value_name = "SECONDS")]
    pub skip: Option<f64>,
    /// Largest fraction of substrate converted in an initial-rate window (default 0.30 under the
    /// integrated estimator, which corrects for depletion; 0.10 under tangent and chord).
    #[arg(long, value_name = "FRACTION")]
    pub max_conversion: Option<f64>,
    /// Fewest reads in a window (default 5).
    #[arg(long, value_name = "N")]
    pub min_points: Option<usize>,
    /// A fixed window `start:end` in seconds instead of the automatic choice.
    #[arg(long, value_name = "START:END")]
    pub window: Option<String>,
    /// Absorbance above which reads are not used (default 3.0).
    #[arg(long, value_name = "AU")]
    pub max_absorbance: Option<f64>,
    /// Level of the straightness tests (default 0.01).
    #[arg(long, value_name = "LEVEL")]
    pub alpha: Option<f64>,
    /// Keep flagged wells in condition means and fits.
    #[arg(long)]
    pub keep_flagged: bool,
    /// Layout wells absent from the data only warn.
    #[arg(long)]
    pub allow_missing: bool,
    /// Screening plates: the layout column naming each sample's compound (default `compound`).
    #[arg(long, value_name = "NAME")]
    pub compound_column: Option<String>,
    /// A table of wells to leave out, with columns `well` and `reason` (a bubble, a pipetting
    /// error); each is listed with its reason in wells.csv, the summary and the report.
    #[arg(long, value_name = "FILE")]
    pub exclude: Option<PathBuf>,
    /// Report: none, html (report.html, the default) or full (also one PNG per plot in plots/).
    #[arg(long, value_name = "none|html|full")]
    pub report: Option<String>,
    #[command(flatten)]
    pub models: ModelArgs,
    /// Progress-curve analysis (global fit of whole curves): `auto` (default: groups whose initial
    /// rates are suspect), `always` or `never`.
    #[arg(long, value_name = "auto|always|never")]
    pub progress: Option<String>,
    /// Seconds from the start of the reaction (mixing) to the reads' time zero: counted in the
    /// conversion limit, in the extrapolation of initial rates to mixing time, and in every read
    /// time of the progress-curve fits.
    #[arg(long, value_name = "SECONDS")]
    pub dead_time: Option<f64>,
    /// How each well's initial rate (at mixing time) is estimated: integrated (default: the
    /// window's slope corrected for depletion by the group's rate law), tangent (of a quadratic
    /// over the window) or chord (the window's slope, uncorrected).
    #[arg(long, value_name = "integrated|tangent|chord")]
    pub initial_rate: Option<String>,
    /// The standard curves' calibration function: auto (default: a straight line, or a
    /// second-order curve over every level when the top of the curve bends), line (a straight line
    /// up to the highest level still linear) or quadratic (second order over every level).
    #[arg(long, value_name = "auto|line|quadratic")]
    pub standard_curve: Option<String>,
    /// Estimate one shared dead time in each progress-curve fit.
    #[arg(long)]
    pub fit_dead_time: bool,
    /// With `--readout substrate`: take each well's S0 from its own first signal in the
    /// progress-curve fits (the layout's S0 is still shown beside it).
    #[arg(long)]
    pub s0_from_signal: bool,
}

/// `platekin inspect`.
#[derive(Debug, Args)]
pub struct InspectArgs {
    /// The raw export to describe.
    pub data: PathBuf,
    #[command(flatten)]
    pub read: ReadArgs,
}

/// `platekin demo`.
#[derive(Debug, Args)]
pub struct DemoArgs {
    /// Output folder.
    #[arg(long, value_name = "DIR", default_value = "platekin-demo")]
    pub out: PathBuf,
    /// Report: none, html (report.html, the default) or full (also one PNG per plot in plots/).
    #[arg(long, value_name = "none|html|full")]
    pub report: Option<String>,
}

impl ReadArgs {
    /// The reading flags as a settings layer.
    pub fn layer(&self) -> SettingLayer {
        SettingLayer {
            sheet: self.sheet.clone(),
            shape: self.shape.clone(),
            plate: self.plate.clone(),
            time_unit: self.time_unit.clone(),
            short_rows: self.short_rows.clone(),
            wavelength: self.wavelength,
            reference_wavelength: self.reference_wavelength,
            ..SettingLayer::default()
        }
    }
}

impl RunArgs {
    /// The flags as a settings layer (a switch left off is "not set", so an assay file may set it).
    pub fn layer(&self) -> SettingLayer {
        SettingLayer {
            layout: self.layout.clone(),
            layout_sheet: self.layout_sheet.clone(),
            readout: self.readout.clone(),
            extinction: self.extinction,
            pathlength: self.pathlength,
            skip: self.skip,
            max_conversion: self.max_conversion,
            min_points: self.min_points,
            window: self.window.clone(),
            max_absorbance: self.max_absorbance,
            alpha: self.alpha,
            keep_flagged: self.keep_flagged.then_some(true),
            allow_missing: self.allow_missing.then_some(true),
            compound_column: self.compound_column.clone(),
            exclude: self.exclude.clone(),
            report: self.report.clone(),
            progress: self.progress.clone(),
            dead_time: self.dead_time,
            initial_rate: self.initial_rate.clone(),
            standard_curve: self.standard_curve.clone(),
            fit_dead_time: self.fit_dead_time.then_some(true),
            s0_from_signal: self.s0_from_signal.then_some(true),
            signal: self.signal.clone(),
            max_signal: self.max_signal,
            volume: self.volume,
            well_diameter: self.well_diameter,
            well_geometry: self.well_geometry.clone(),
            pathlength_from: self.pathlength_from.clone(),
            water_reference: self.water_reference,
            kcat_unit: self.kcat_unit.clone(),
            rate_unit: self.rate_unit.clone(),
            enzyme_mw: self.enzyme_mw,
            ..self.models.layer().over(self.read.layer())
        }
    }
}

impl ModelArgs {
    /// The model flags as a settings layer.
    pub fn layer(&self) -> SettingLayer {
        SettingLayer {
            model: self.model.clone(),
            weighting: self.weighting.clone(),
            robust: self.robust.clone(),
            bootstrap: self.bootstrap,
            seed: self.seed,
            profile: self.no_profile.then_some(false),
            cheng_prusoff_km: self.cheng_prusoff_km,
            ..SettingLayer::default()
        }
    }
}
