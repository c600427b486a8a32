//! The commands (`run`, `inspect`, `demo`, `fit`, `batch`): each takes resolved settings, reads its inputs
//! once, runs the pipeline, renders every output in memory and writes them as one unit, and
//! returns the summary text for the binary to print. Nothing here prints or exits.

pub mod batch;
pub mod demo;
pub mod fit;
pub mod inspect;
pub mod run;

use crate::config::SettingsError;
use crate::files::input::InputError;
use crate::files::output::OutputError;
use crate::groups::rate_table::RateTableError;
use crate::import::ImportError;
use crate::pipeline::PipelineError;
use crate::render::RenderError;

/// Why a command did not complete. Input errors name their file and position; the others say
/// which output failed, with the system's reason as the source.
#[derive(Debug, thiserror::Error)]
pub enum CommandError {
    /// A setting cannot be used.
    #[error(transparent)]
    Settings(#[from] SettingsError),
    /// An input file could not be read.
    #[error(transparent)]
    Input(#[from] InputError),
    /// The export could not be imported (`inspect`).
    #[error(transparent)]
    Import(#[from] ImportError),
    /// The inputs could not be analysed.
    #[error(transparent)]
    Pipeline(#[from] PipelineError),
    /// A rate table could not be read (`fit`).
    #[error(transparent)]
    RateTable(#[from] RateTableError),
    /// An output could not be rendered.
    #[error(transparent)]
    Render(#[from] RenderError),
    /// The outputs could not be written.
    #[error(transparent)]
    Output(#[from] OutputError),
    /// A campaign's manifest (or folder) cannot be used (`batch`).
    #[error(transparent)]
    Manifest(#[from] crate::campaign::ManifestError),
    /// A campaign's own option cannot be used (`batch`).
    #[error("{message}")]
    Campaign {
        /// What is wrong, naming the option.
        message: String,
    },
}
