//! `platekin fit`: a rate table from anywhere, fitted with the same code a run uses; writes
//! `fit.json` and `summary.txt`.

use std::path::{Path, PathBuf};

use super::CommandError;
use crate::config::FitSettings;
use crate::files::input::{InputFile, InputRole};
use crate::files::output::{check_output_folder, write_outputs, OutputFile};
use crate::groups::rate_table::{fit_table, read_rate_table};
use crate::groups::GroupFit;
use crate::render::json::{json_file, table_fit_document};
use crate::render::summary::table_fit_summary;

/// What `platekin fit` hands back.
#[derive(Debug, Clone)]
pub struct TableFitOutcome {
    /// One fit per group of the table.
    pub fits: Vec<GroupFit>,
    /// The files written.
    pub written: Vec<PathBuf>,
    /// The summary for stdout.
    pub summary: String,
}

/// Reads, fits and writes `fit.json` and `summary.txt` into `out`.
pub fn fit_table_file(
    path: &Path,
    sheet: Option<&str>,
    settings: &FitSettings,
    out: &Path,
    force: bool,
    progress: &mut dyn FnMut(usize, usize),
) -> Result<TableFitOutcome, CommandError> {
    check_output_folder(out, force)?;
    let input = InputFile::read(InputRole::Table, path)?;
    let table = read_rate_table(&input, sheet, settings)?;
    let fits = fit_table(&table, settings, progress);
    let summary = table_fit_summary(&table.source, table.kind.words(), &fits, out);
    let document = table_fit_document(&input.name, table.kind.words(), &fits, settings)?;
    let files = vec![
        json_file("fit.json", &document)?,
        OutputFile {
            name: "summary.txt".into(),
            bytes: summary.clone().into_bytes(),
        },
    ];
    let written = write_outputs(out, force, &[path.to_path_buf()], &files)?;
    Ok(TableFitOutcome {
        fits,
        written,
        summary,
    })
}
