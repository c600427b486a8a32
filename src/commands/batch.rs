//! `platekin batch`: every plate of a manifest (or a folder of exports) through the single-plate
//! run, in parallel, each plate's outputs in `DIR/plates/PLATE/` exactly as `run` writes them;
//! then the campaign's own outputs in `DIR` as one unit. One bad plate never stops the others: it
//! is listed with its error. A plate whose inputs and settings match its previous run is kept, not
//! analysed again (unless `force`).
//!
//! Memory: a plate's full results are dropped once its outputs are written and its digest and
//! table rows taken, so memory grows with the plates in flight (`jobs`), not with the campaign.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicUsize, Ordering};

use super::run::{run_plate_inputs, with_exclusion_table};
use super::CommandError;
use crate::campaign::manifest::{folder_manifest, read_manifest};
use crate::campaign::pooled::MAX_POOL_FACTORS;
use crate::campaign::{campaign_pooled_fits, digest, Manifest, PlateEntry, PlateOutcome, PlateStatus};
use crate::config::{
    resolve_analysis, resolve_fit, resolve_import, resolve_report, resolve_run, SettingLayer,
};
use crate::core::format::CAUTION;
use crate::files::input::{InputFile, InputRole};
use crate::files::output::{check_output_folder, write_outputs, OutputError, OutputFile};
use crate::pipeline::PlateInputs;
use crate::render::campaign::store::{
    kept_digest, kept_files, kept_tables, run_record_matches, ResultKey, DIGEST_FILE, STORE_FOLDER,
};
use crate::render::campaign::tables::{
    plate_tables, read_parquet_bytes, PlateTables, TABLE_COUNT, TABLE_NAMES,
};
use crate::render::campaign::{campaign_outputs, CampaignRecord};
use crate::render::tables::TableError;
use polars::prelude::{PolarsError, Schema};

/// The most plates analysed at once: beyond the cores of any workstation, and each plate in
/// flight holds its reads in memory.
pub const MAX_JOBS: usize = 64;

/// The stack of each worker thread: the 8 MiB a program's main thread gets, where `run` analyses
/// its plate.
const WORKER_STACK_BYTES: usize = 8 * 1024 * 1024;

/// The folder of the plates' own outputs inside the campaign folder.
pub const PLATES_FOLDER: &str = "plates";

/// What `platekin batch` is asked to do.
#[derive(Debug, Clone)]
pub struct BatchRequest {
    /// The manifest (CSV or spreadsheet) or a folder of exports.
    pub source: PathBuf,
    /// The campaign's output folder.
    pub out: PathBuf,
    /// The command's settings (flags over `--assay`); a plate's own assay file overrides them, its
    /// manifest layout overrides all.
    pub settings: SettingLayer,
    /// Analyse every plate again, and write into a folder platekin did not make.
    pub force: bool,
    /// Plates analysed at once (1 to [`MAX_JOBS`]).
    pub jobs: usize,
    /// Factors whose shared values pool plates into one cross-plate fit.
    pub pool_by: Vec<String>,
}

/// A plate has finished (reported from the worker threads as plates complete).
#[derive(Debug, Clone, Copy)]
pub struct PlateFinished<'a> {
    /// The plate.
    pub plate: &'a str,
    /// Its error, if it failed.
    pub error: Option<&'a str>,
    /// Whether its previous results were kept.
    pub reused: bool,
    /// Plates finished so far, this one included.
    pub done: usize,
    /// Plates failed so far.
    pub failed: usize,
    /// Plates in the campaign.
    pub total: usize,
}

/// A plate as a worker hands it back: its place in the manifest, how it ended, and its tables'
/// schemas when it ended well.
type FinishedPlate = (usize, PlateOutcome, Option<[Schema; TABLE_COUNT]>);

/// What a completed campaign hands back.
#[derive(Debug, Clone)]
pub struct BatchOutcome {
    /// Every plate, in run order.
    pub plates: Vec<PlateOutcome>,
    /// Plates that failed.
    pub failed: usize,
    /// The campaign-level files written.
    pub written: Vec<PathBuf>,
    /// The summary for stdout.
    pub summary: String,
}

fn campaign_error(message: String) -> CommandError {
    CommandError::Campaign { message }
}

/// Checks the campaign's own options and the command's settings before anything is read or
/// written.
fn check_request(request: &BatchRequest) -> Result<(), CommandError> {
    if request.jobs == 0 || request.jobs > MAX_JOBS {
        return Err(campaign_error(format!(
            "--jobs must be 1 to {MAX_JOBS}, got {}",
            request.jobs
        )));
    }
    if request.pool_by.len() > MAX_POOL_FACTORS {
        return Err(campaign_error(format!(
            "--pool-by takes at most {MAX_POOL_FACTORS} factors, got {}",
            request.pool_by.len()
        )));
    }
    if request.pool_by.iter().any(|name| name.trim().is_empty()) {
        return Err(campaign_error(
            "--pool-by has an empty factor name (write FACTOR or FACTOR,FACTOR)".to_string(),
        ));
    }
    // Every flag is checked once here, so a bad flag stops the campaign instead of failing each
    // plate with the same message.
    resolve_import(&request.settings)?;
    resolve_analysis(&request.settings)?;
    resolve_fit(&request.settings)?;
    resolve_report(&request.settings)?;
    Ok(())
}

/// The full message of an error and its causes, as the binary prints it for `run`.
pub fn error_chain(error: &dyn std::error::Error) -> String {
    let mut text = error.to_string();
    let mut source = error.source();
    while let Some(cause) = source {
        text.push_str(": ");
        text.push_str(&cause.to_string());
        source = cause.source();
    }
    text
}

/// Reads the manifest, runs every plate, fits across plates and writes the campaign's outputs.
/// `finished` is called from the worker threads as each plate ends.
pub fn run_batch(
    request: &BatchRequest,
    finished: &(dyn Fn(PlateFinished<'_>) + Sync),
) -> Result<BatchOutcome, CommandError> {
    check_request(request)?;
    let manifest = if request.source.is_dir() {
        folder_manifest(&request.source, request.settings.layout.as_deref())?
    } else {
        read_manifest(&request.source)?
    };
    check_output_folder(&request.out, request.force)?;
    // One worker loop per thread of the pool takes the next plate until none is left, so exactly
    // `jobs` plates are in flight. (A parallel iterator over the plates would let a thread waiting
    // inside one plate's own parallel steps steal a whole other plate and run it on top of its
    // stack: more plates in memory than `jobs`, and a stack overflow on a long campaign.) The
    // plates' own parallel steps run in the same pool.
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(request.jobs)
        .stack_size(WORKER_STACK_BYTES)
        .build()
        .map_err(|error| campaign_error(format!("cannot start {} worker threads: {error}", request.jobs)))?;
    let next = AtomicUsize::new(0);
    let done = AtomicUsize::new(0);
    let failed = AtomicUsize::new(0);
    let total = manifest.plates.len();
    let per_worker: Vec<Vec<FinishedPlate>> = pool.broadcast(|_| {
        let mut finished_here = Vec::new();
        loop {
            let index = next.fetch_add(1, Ordering::SeqCst);
            let Some(entry) = manifest.plates.get(index) else {
                break;
            };
            let (outcome, plate_tables) = run_one_plate(entry, &manifest, request);
            let error = match &outcome.status {
                PlateStatus::Failed { error } => Some(error.as_str()),
                PlateStatus::Ok { .. } => None,
            };
            let failed_now = failed.fetch_add(usize::from(error.is_some()), Ordering::SeqCst)
                + usize::from(error.is_some());
            finished(PlateFinished {
                plate: &entry.plate,
                error,
                reused: matches!(outcome.status, PlateStatus::Ok { reused: true, .. }),
                done: done.fetch_add(1, Ordering::SeqCst) + 1,
                failed: failed_now,
                total,
            });
            finished_here.push((index, outcome, plate_tables));
        }
        finished_here
    });
    let mut results: Vec<FinishedPlate> = per_worker.into_iter().flatten().collect();
    results.sort_by_key(|(index, _, _)| *index);
    let mut plates = Vec::with_capacity(results.len());
    let mut schemas = Vec::new();
    for (index, outcome, plate_schemas) in results {
        if let Some(plate_schemas) = plate_schemas {
            schemas.push((index, plate_schemas));
        }
        plates.push(outcome);
    }
    let (pooled, unknown) = campaign_pooled_fits(&plates, &request.pool_by);
    let report = resolve_report(&request.settings)?;
    let record = CampaignRecord {
        source: &manifest.source,
        factor_names: &manifest.factor_names,
        plates: &plates,
        pool_by: &request.pool_by,
        pooled: &pooled,
        unknown_pool_factors: &unknown,
        settings: &request.settings,
        report,
    };
    // Each plate's rows come from what it keeps for the next run (written or checked above).
    let load = |index: usize, kind: usize| -> Result<polars::prelude::DataFrame, TableError> {
        let path = request
            .out
            .join(STORE_FOLDER)
            .join(&plates[index].plate)
            .join(format!("{}.parquet", TABLE_NAMES[kind]));
        read_parquet_bytes(std::fs::read(&path).map_err(PolarsError::from)?)
    };
    let files = campaign_outputs(&record, &schemas, &load)?;
    // The ownership of the folder was checked before the plates were written into it.
    let written = write_outputs(&request.out, true, &[], &files)?;
    let n_failed = plates
        .iter()
        .filter(|p| matches!(p.status, PlateStatus::Failed { .. }))
        .count();
    let compounds = files.iter().any(|file| file.name == "compounds.csv");
    let summary = batch_summary(&plates, &pooled, &unknown, &request.out, report, compounds);
    Ok(BatchOutcome {
        plates,
        failed: n_failed,
        written,
        summary,
    })
}

/// The text `platekin batch` prints.
fn batch_summary(
    plates: &[PlateOutcome],
    pooled: &[crate::campaign::PooledFit],
    unknown: &[String],
    out: &Path,
    report: crate::config::ReportMode,
    compounds: bool,
) -> String {
    let failed: Vec<&PlateOutcome> = plates
        .iter()
        .filter(|p| matches!(p.status, PlateStatus::Failed { .. }))
        .collect();
    let kept = plates
        .iter()
        .filter(|p| matches!(p.status, PlateStatus::Ok { reused: true, .. }))
        .count();
    let mut text = format!(
        "platekin batch: {} plate(s): {} ok ({} kept from the previous run), {} failed\n",
        plates.len(),
        plates.len() - failed.len(),
        kept,
        failed.len()
    );
    for plate in &failed {
        if let PlateStatus::Failed { error } = &plate.status {
            text.push_str(&format!("  failed: {}: {error}\n", plate.plate));
        }
    }
    for fit in pooled {
        let key: Vec<String> = fit.key.iter().map(|(n, v)| format!("{n}={v}")).collect();
        match (&fit.km, &fit.error) {
            (Some(km), _) => text.push_str(&format!(
                "  pooled {}: {} plate(s), Km {} {}{}{}{}\n",
                key.join(", "),
                fit.plates.len(),
                crate::core::format::significant(km.value),
                km.unit,
                km.ci95.map_or(String::new(), |[low, high]| format!(
                    " (95% {} to {})",
                    crate::core::format::significant(low),
                    crate::core::format::significant(high)
                )),
                match fit.km_interval {
                    Some(crate::campaign::pooled::KmInterval::ClusteredByPlate) => ", clustered by plate",
                    Some(crate::campaign::pooled::KmInterval::ModelBased) => ", model-based: too few plates",
                    None => "",
                },
                fit.scale_cv.map_or(String::new(), |cv| format!(
                    ", between-plate CV of {} {:.1}%{}",
                    fit.scale_name,
                    100.0 * cv,
                    match (fit.scale_cv_corrected, fit.scale_cv_ci95) {
                        (Some(corrected), Some([low, high])) => format!(
                            " ({:.1}% without estimation error, 95% {:.1}% to {:.1}%)",
                            100.0 * corrected,
                            100.0 * low,
                            100.0 * high
                        ),
                        _ => String::new(),
                    }
                )),
            )),
            (None, Some(error)) => text.push_str(&format!("  pooled {}: no fit: {error}\n", key.join(", "))),
            (None, None) => {}
        }
    }
    if !unknown.is_empty() {
        text.push_str(&format!(
            "  --pool-by: no plate has the factor(s) {}\n",
            unknown.join(", ")
        ));
    }
    text.push_str(&format!(
        "outputs in {}: plates.csv, wells/conditions/fits{} (.parquet and .csv){}{}, batch.json; each plate in {}/PLATE/\n",
        out.display(),
        if compounds { "/compounds" } else { "" },
        if pooled.is_empty() && unknown.is_empty() { "" } else { ", pooled.json" },
        if report == crate::config::ReportMode::None { "" } else { ", report.html" },
        PLATES_FOLDER
    ));
    text.push_str(CAUTION);
    text.push('\n');
    text
}

/// Writes what a plate keeps for the next run. These files are a cache, not results: each is
/// written beside its place and renamed into it, without the flush to disk that outputs get (a
/// plate's outputs are flushed by `run`'s writer). The digest goes first out and last in, so a run
/// stopped part way leaves no digest, and the plate is analysed again next time.
fn keep_results(store_folder: &Path, files: &[OutputFile]) -> Result<(), OutputError> {
    let io_error = |path: &Path| {
        let path = path.display().to_string();
        move |source| OutputError::Io { path, source }
    };
    std::fs::create_dir_all(store_folder).map_err(io_error(store_folder))?;
    let digest_path = store_folder.join(DIGEST_FILE);
    if digest_path.exists() {
        std::fs::remove_file(&digest_path).map_err(io_error(&digest_path))?;
    }
    let (digest, tables): (Vec<&OutputFile>, Vec<&OutputFile>) =
        files.iter().partition(|f| f.name == DIGEST_FILE);
    for file in tables.into_iter().chain(digest) {
        let path = store_folder.join(&file.name);
        let staged = store_folder.join(format!("{}.partial", file.name));
        std::fs::write(&staged, &file.bytes).map_err(io_error(&staged))?;
        std::fs::rename(&staged, &path).map_err(io_error(&path))?;
    }
    Ok(())
}

/// Reads the kept results of a plate whose `run.json` and kept key match `key`.
fn kept_results(
    plate_folder: &Path,
    store_folder: &Path,
    key: &ResultKey,
) -> Option<(crate::campaign::PlateDigest, PlateTables)> {
    let run_json = std::fs::read(plate_folder.join("run.json")).ok()?;
    if !run_record_matches(&run_json, key) {
        return None;
    }
    let digest = kept_digest(&std::fs::read(store_folder.join(DIGEST_FILE)).ok()?, key)?;
    let bytes = TABLE_NAMES.map(|name| std::fs::read(store_folder.join(format!("{name}.parquet"))).ok());
    let [Some(wells), Some(conditions), Some(fits), Some(compounds)] = bytes else {
        return None;
    };
    Some((digest, kept_tables([wells, conditions, fits, compounds])?))
}

/// One plate from its files to its outputs, digest and kept rows (their schemas returned); any error becomes the plate's
/// `failed` status with the message `run` would give.
fn run_one_plate(
    entry: &PlateEntry,
    manifest: &Manifest,
    request: &BatchRequest,
) -> (PlateOutcome, Option<[Schema; TABLE_COUNT]>) {
    let factors: BTreeMap<String, String> = manifest
        .factors_of(entry)
        .map(|(name, value)| (name.to_string(), value.to_string()))
        .collect();
    let mut outcome = PlateOutcome {
        plate: entry.plate.clone(),
        factors,
        data_sha256: None,
        layout_sha256: None,
        status: PlateStatus::Failed { error: String::new() },
    };
    let plate_folder = request.out.join(PLATES_FOLDER).join(&entry.plate);
    let store_folder = request.out.join(STORE_FOLDER).join(&entry.plate);
    let result = (|| -> Result<(PlateStatus, PlateTables), CommandError> {
        let own = match &entry.assay {
            Some(assay) => SettingLayer::from_assay_file(assay)?.over(request.settings.clone()),
            None => request.settings.clone(),
        };
        let layer = SettingLayer {
            layout: Some(entry.layout.clone()),
            ..SettingLayer::default()
        }
        .over(own);
        // The exclusion table's rows join the settings, so the result key sees them.
        let settings = with_exclusion_table(&resolve_run(entry.data.clone(), layer)?)?;
        if settings.pathlength_from.is_some() {
            // A kept plate is known by its data and layout only, so a changed table would go
            // unseen: refused until the campaign's key holds it.
            return Err(crate::config::SettingsError::Invalid {
                key: Some("pathlength-from"),
                message: "pathlength-from is not available in batch; give each plate's pathlength (or volume and well shape) in its assay file"
                    .to_string(),
            }
            .into());
        }
        let inputs = PlateInputs {
            data: InputFile::read(InputRole::Data, &settings.data)?,
            layout: InputFile::read(InputRole::Layout, &settings.layout)?,
            pathlengths: None,
        };
        let key = ResultKey::new(
            inputs.data.sha256(),
            inputs.layout.sha256(),
            settings.used.clone(),
        );
        outcome.data_sha256 = Some(key.data_sha256.clone());
        outcome.layout_sha256 = Some(key.layout_sha256.clone());
        if !request.force {
            if let Some((digest, tables)) = kept_results(&plate_folder, &store_folder, &key) {
                return Ok((PlateStatus::Ok { digest, reused: true }, tables));
            }
        }
        let run = run_plate_inputs(&settings, inputs, &plate_folder, false, &mut |_, _| {})?;
        let plate_digest = digest(&run.results);
        let tables = plate_tables(&run.results).map_err(crate::render::RenderError::from)?;
        drop(run);
        keep_results(&store_folder, &kept_files(&key, &plate_digest, &tables)?)?;
        Ok((
            PlateStatus::Ok {
                digest: plate_digest,
                reused: false,
            },
            tables,
        ))
    })();
    match result {
        Ok((status, tables)) => {
            outcome.status = status;
            let schemas = tables.frames().map(|frame| frame.schema().as_ref().clone());
            (outcome, Some(schemas))
        }
        Err(error) => {
            let mut error = error_chain(&error);
            // A failed plate leaves nothing from an earlier run that could pass for its results:
            // its outputs and what the campaign kept of it are removed (the folder is platekin's,
            // checked before any plate ran; a plate id never starts with '.').
            let mut removed = false;
            for folder in [&plate_folder, &store_folder] {
                match std::fs::remove_dir_all(folder) {
                    Ok(()) => removed |= folder == &plate_folder,
                    Err(cause) if cause.kind() == std::io::ErrorKind::NotFound => {}
                    Err(cause) => error.push_str(&format!(
                        " (its earlier outputs in {} could not be removed: {cause}; they are not this run's)",
                        folder.display()
                    )),
                }
            }
            if removed {
                error.push_str(" (the outputs of its earlier run were removed)");
            }
            outcome.status = PlateStatus::Failed { error };
            (outcome, None)
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_error_chain_joins_every_cause() {
        let io = std::io::Error::new(std::io::ErrorKind::NotFound, "no such file");
        let error = CommandError::Input(crate::files::input::InputError::Unreadable {
            file: "d.csv".into(),
            source: io,
        });
        assert_eq!(error_chain(&error), "d.csv: cannot read the file: no such file");
    }

    #[test]
    fn bad_campaign_options_are_refused_before_anything_is_read() {
        let request = BatchRequest {
            source: PathBuf::from("no-such-manifest.csv"),
            out: PathBuf::from("no-such-out"),
            settings: SettingLayer::default(),
            force: false,
            jobs: 0,
            pool_by: Vec::new(),
        };
        let error = run_batch(&request, &|_| {}).unwrap_err();
        assert!(error.to_string().contains("--jobs must be 1 to 64"), "{error}");
        let request = BatchRequest {
            jobs: 2,
            settings: SettingLayer {
                max_conversion: Some(3.0),
                ..SettingLayer::default()
            },
            ..request
        };
        let error = run_batch(&request, &|_| {}).unwrap_err();
        assert!(error.to_string().contains("max-conversion"), "{error}");
        assert!(!Path::new("no-such-out").exists());
    }
}
