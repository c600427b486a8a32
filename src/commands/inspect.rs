//! `platekin inspect`: what was understood of an export.

use std::path::Path;

use super::CommandError;
use crate::config::ImportOptions;
use crate::files::input::{InputFile, InputRole};
use crate::import::import_data;
use crate::render::inspect::inspect_report;

/// The text describing what was read from the export at `path`.
pub fn inspect(path: &Path, options: &ImportOptions) -> Result<String, CommandError> {
    let input = InputFile::read(InputRole::Data, path)?;
    Ok(inspect_report(&import_data(input, options)?))
}
