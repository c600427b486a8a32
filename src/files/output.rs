//! Writing a run's files as one unit. The output folder is refused when it holds files platekin did
//! not make (unless forced), and no output may overwrite an input. Every file is first written
//! into a staging folder inside the output folder; only when all of them are written are they moved
//! into place, after the previous run's outputs have been moved aside. A failure at any step moves
//! everything back, so the folder holds the previous run's outputs or the new run's, never a mix;
//! and outputs of the previous run that this run does not write (a report, plots) do not linger
//! beside the new ones.
//!
//! The marker file `.platekin-output` says the folder was made by platekin and lists the outputs
//! of the last run written into it. While the new outputs are swapped in, the marker lists the
//! previous run's outputs and the new ones together, and interrupts (Ctrl-C, SIGTERM, SIGHUP) are
//! held back until the swap is done ([`interrupts`]); so even a process killed outright in the
//! swap leaves a marker that names every output the next run must replace. Staging and set-aside
//! folders left by an interrupted run are removed by the next run into the same folder.
//!
//! The outputs of a run (with `run.json`, which records the others' checksums) are replaced only
//! by another run's: `platekin fit --out RUNDIR` would leave `run.json` naming a `fit.json` that
//! is no longer there, so it is refused.

use std::collections::BTreeSet;
use std::fs;
use std::io::Write;
use std::path::{Path, PathBuf};

/// The marker file that says a folder was made by platekin.
pub const MARKER_FILE: &str = ".platekin-output";

/// The first line of the marker.
const MARKER_HEADER: &str = "This folder was written by platekin.";

/// Names of the staging and set-aside folders inside the output folder.
const STAGING_PREFIX: &str = ".platekin-staging-";
const PREVIOUS_PREFIX: &str = ".platekin-previous-";

/// Outputs a run may write, assumed present when a marker from an older platekin lists none.
const KNOWN_OUTPUTS: [&str; 8] = [
    "wells.csv",
    "conditions.csv",
    "fit.json",
    "progress.json",
    "settings.toml",
    "report.html",
    "run.json",
    "summary.txt",
];

/// Why outputs could not be written.
#[derive(Debug, thiserror::Error)]
pub enum OutputError {
    /// The folder holds other files.
    #[error("{folder}: the output folder is not empty and was not made by platekin; choose another --out or add --force")]
    NotOurs {
        /// The folder.
        folder: String,
    },
    /// The path exists but is a file.
    #[error("{folder}: the output path is a file, not a folder")]
    NotAFolder {
        /// The path.
        folder: String,
    },
    /// Outputs without `run.json` would replace a run's outputs.
    #[error(
        "{folder}: the folder holds the outputs of a `platekin run` (run.json records their checksums); \
         writing {files} there would replace them; choose another --out"
    )]
    WouldReplaceRun {
        /// The folder.
        folder: String,
        /// The outputs that would be written.
        files: String,
    },
    /// An output would replace an input.
    #[error("{path}: this output would overwrite an input file; choose another --out")]
    WouldOverwriteInput {
        /// The clashing path.
        path: String,
    },
    /// A filesystem failure.
    #[error("{path}: cannot write")]
    Io {
        /// The file or folder.
        path: String,
        /// The system's reason.
        #[source]
        source: std::io::Error,
    },
}

fn io_error(path: &Path) -> impl FnOnce(std::io::Error) -> OutputError + '_ {
    move |source| OutputError::Io {
        path: path.display().to_string(),
        source,
    }
}

/// One file to write: its name inside the output folder (may include one subfolder) and bytes.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct OutputFile {
    /// Relative name, e.g. `wells.csv`.
    pub name: String,
    /// Contents.
    pub bytes: Vec<u8>,
}

/// Checks that `folder` may receive outputs, without changing anything.
pub fn check_output_folder(folder: &Path, force: bool) -> Result<(), OutputError> {
    if !folder.exists() {
        return Ok(());
    }
    if !folder.is_dir() {
        return Err(OutputError::NotAFolder {
            folder: folder.display().to_string(),
        });
    }
    // A folder that holds nothing but what an interrupted first run left (its staging folder) is
    // empty to a new run, which removes the leftovers.
    let mut entries = fs::read_dir(folder).map_err(io_error(folder))?;
    let empty =
        entries.all(|entry| entry.is_ok_and(|entry| is_leftover(&entry.file_name().to_string_lossy())));
    if empty || force || folder.join(MARKER_FILE).exists() {
        Ok(())
    } else {
        Err(OutputError::NotOurs {
            folder: folder.display().to_string(),
        })
    }
}

/// The outputs the marker of `folder` lists (for an older marker that lists none, the known output
/// names and the PNGs under `plots/`).
fn previous_outputs(folder: &Path) -> BTreeSet<String> {
    let Ok(text) = fs::read_to_string(folder.join(MARKER_FILE)) else {
        return BTreeSet::new();
    };
    let listed: BTreeSet<String> = text
        .lines()
        .skip(1)
        .filter(|line| !line.starts_with('#') && !line.trim().is_empty())
        .map(|line| line.trim().to_string())
        .collect();
    if !listed.is_empty() {
        return listed;
    }
    let mut known: BTreeSet<String> = KNOWN_OUTPUTS.iter().map(|name| name.to_string()).collect();
    if let Ok(plots) = fs::read_dir(folder.join("plots")) {
        for entry in plots.flatten() {
            let name = entry.file_name().to_string_lossy().into_owned();
            if name.ends_with(".png") {
                known.insert(format!("plots/{name}"));
            }
        }
    }
    known
}

/// Whether a folder entry is a staging or set-aside folder of a run.
fn is_leftover(name: &str) -> bool {
    name.starts_with(STAGING_PREFIX) || name.starts_with(PREVIOUS_PREFIX)
}

/// Removes staging and set-aside folders an interrupted run left in `folder`.
fn remove_leftovers(folder: &Path) {
    if let Ok(entries) = fs::read_dir(folder) {
        for entry in entries.flatten() {
            if is_leftover(&entry.file_name().to_string_lossy()) {
                let _ = fs::remove_dir_all(entry.path());
            }
        }
    }
}

/// A relative output name that stays inside the folder.
fn is_plain_relative(name: &str) -> bool {
    let path = Path::new(name);
    !name.is_empty()
        && path.is_relative()
        && path
            .components()
            .all(|component| matches!(component, std::path::Component::Normal(_)))
}

/// Writes `bytes` to a new file and flushes it to disk.
fn write_new_file(path: &Path, bytes: &[u8]) -> Result<(), OutputError> {
    if let Some(parent) = path.parent() {
        fs::create_dir_all(parent).map_err(io_error(parent))?;
    }
    let mut file = fs::File::create(path).map_err(io_error(path))?;
    file.write_all(bytes).map_err(io_error(path))?;
    file.sync_all().map_err(io_error(path))
}

/// Moves `from` to `to`, making `to`'s folder.
fn move_file(from: &Path, to: &Path) -> Result<(), OutputError> {
    if let Some(parent) = to.parent() {
        fs::create_dir_all(parent).map_err(io_error(parent))?;
    }
    fs::rename(from, to).map_err(io_error(to))
}

/// Writes every file into `folder` (made if absent) as one unit (module docs). `inputs` are the
/// run's input files: an output path that is one of them is refused before anything is written.
pub fn write_outputs(
    folder: &Path,
    force: bool,
    inputs: &[PathBuf],
    files: &[OutputFile],
) -> Result<Vec<PathBuf>, OutputError> {
    check_output_folder(folder, force)?;
    let canonical_inputs: Vec<PathBuf> = inputs
        .iter()
        .filter_map(|path| path.canonicalize().ok())
        .collect();
    for file in files {
        let target = folder.join(&file.name);
        if !is_plain_relative(&file.name) || file.name == MARKER_FILE {
            return Err(OutputError::Io {
                path: target.display().to_string(),
                source: std::io::Error::new(std::io::ErrorKind::InvalidInput, "not a plain output name"),
            });
        }
        if let Ok(canonical) = target.canonicalize() {
            if canonical_inputs.contains(&canonical) {
                return Err(OutputError::WouldOverwriteInput {
                    path: target.display().to_string(),
                });
            }
        }
    }
    let writes_run_record = files.iter().any(|file| file.name == "run.json");
    if !writes_run_record
        && previous_outputs(folder).contains("run.json")
        && folder.join("run.json").is_file()
    {
        return Err(OutputError::WouldReplaceRun {
            folder: folder.display().to_string(),
            files: files
                .iter()
                .map(|file| file.name.as_str())
                .collect::<Vec<_>>()
                .join(", "),
        });
    }
    let created = !folder.exists();
    fs::create_dir_all(folder).map_err(io_error(folder))?;
    remove_leftovers(folder);
    let result = commit(folder, files);
    if result.is_err() && created {
        // Nothing of this run may remain: the folder did not exist before.
        let _ = fs::remove_dir_all(folder);
    }
    result
}

/// Stages every file, sets the previous outputs aside, moves the new ones in, and rolls back on
/// any failure.
fn commit(folder: &Path, files: &[OutputFile]) -> Result<Vec<PathBuf>, OutputError> {
    let staging = folder.join(format!("{STAGING_PREFIX}{}", std::process::id()));
    let previous_dir = folder.join(format!("{PREVIOUS_PREFIX}{}", std::process::id()));
    let staged = (|| {
        for file in files {
            write_new_file(&staging.join(&file.name), &file.bytes)?;
        }
        let mut marker = format!("{MARKER_HEADER}\n# outputs of the last run written here:\n");
        for file in files {
            marker.push_str(&file.name);
            marker.push('\n');
        }
        write_new_file(&staging.join(MARKER_FILE), marker.as_bytes())
    })();
    if let Err(error) = staged {
        let _ = fs::remove_dir_all(&staging);
        return Err(error);
    }
    // From here to the end the folder changes: interrupts wait until it is whole again.
    let _held = interrupts::hold();
    let previous = previous_outputs(folder);
    let previous_marker = fs::read(folder.join(MARKER_FILE)).ok();
    // The marker first names both runs' outputs, so that a process killed in the swap leaves a
    // folder whose every output the next run replaces.
    let mut interim =
        format!("{MARKER_HEADER}\n# outputs of the last run written here (a swap in progress):\n");
    let names: BTreeSet<&str> = previous
        .iter()
        .map(String::as_str)
        .chain(files.iter().map(|file| file.name.as_str()))
        .collect();
    for name in names {
        interim.push_str(name);
        interim.push('\n');
    }
    let interim_path = staging.join(".platekin-output-interim");
    if let Err(error) = write_new_file(&interim_path, interim.as_bytes())
        .and_then(|()| move_file(&interim_path, &folder.join(MARKER_FILE)))
    {
        let _ = fs::remove_dir_all(&staging);
        return Err(error);
    }
    // Set the previous run's outputs aside, then move the new ones in.
    let mut set_aside: Vec<String> = Vec::new();
    let mut placed: Vec<String> = Vec::new();
    let moved = (|| {
        for name in previous {
            let path = folder.join(&name);
            if is_plain_relative(&name) && path.is_file() {
                move_file(&path, &previous_dir.join(&name))?;
                set_aside.push(name);
            }
        }
        for file in files {
            move_file(&staging.join(&file.name), &folder.join(&file.name))?;
            placed.push(file.name.clone());
        }
        move_file(&staging.join(MARKER_FILE), &folder.join(MARKER_FILE))
    })();
    if let Err(error) = moved {
        for name in &placed {
            let _ = fs::remove_file(folder.join(name));
        }
        for name in &set_aside {
            let _ = move_file(&previous_dir.join(name), &folder.join(name));
        }
        match &previous_marker {
            Some(bytes) => {
                let _ = fs::write(folder.join(MARKER_FILE), bytes);
            }
            None => {
                let _ = fs::remove_file(folder.join(MARKER_FILE));
            }
        }
        let _ = fs::remove_dir_all(&staging);
        let _ = fs::remove_dir_all(&previous_dir);
        return Err(error);
    }
    let _ = fs::remove_dir_all(&staging);
    let _ = fs::remove_dir_all(&previous_dir);
    // A subfolder the previous run filled and this one does not (plots/) goes when empty.
    for name in &set_aside {
        if let Some(parent) = Path::new(name).parent().filter(|p| !p.as_os_str().is_empty()) {
            let _ = fs::remove_dir(folder.join(parent));
        }
    }
    Ok(files.iter().map(|file| folder.join(&file.name)).collect())
}

/// Holding interrupts back while the output folder changes. On unix the first hold installs, once
/// for the process, handlers for SIGINT, SIGTERM and SIGHUP that act as the default (end the
/// process) except while a hold is alive, when they only note the signal; the last hold to end
/// re-raises what was noted. A signal the process ignores (a background job's SIGINT) stays
/// ignored. Elsewhere a hold does nothing.
mod interrupts {
    /// Interrupts are held back while this lives.
    pub struct Held {
        #[cfg(unix)]
        _private: (),
    }

    #[cfg(unix)]
    mod unix {
        use std::sync::atomic::{AtomicBool, Ordering};
        use std::sync::{Arc, Mutex, OnceLock};

        use signal_hook::consts::{SIGHUP, SIGINT, SIGTERM};

        /// The process-wide state behind every hold.
        pub(super) struct Deferral {
            /// True while no hold is alive: a signal then acts as its default.
            acting_normally: Arc<AtomicBool>,
            /// Each handled signal, and whether it arrived during a hold.
            pending: Vec<(i32, Arc<AtomicBool>)>,
            /// How many holds are alive.
            holders: Mutex<usize>,
        }

        /// Whether the process ignores `signal` now.
        fn is_ignored(signal: i32) -> bool {
            // SAFETY: with a null new action, sigaction only reads the current disposition into
            // `current`, a zeroed plain-data struct of the right type.
            unsafe {
                let mut current: libc::sigaction = std::mem::zeroed();
                libc::sigaction(signal, std::ptr::null(), &mut current) == 0
                    && current.sa_sigaction == libc::SIG_IGN
            }
        }

        /// The deferral, installed on first use (`None` if no handler could be installed).
        pub(super) fn deferral() -> Option<&'static Deferral> {
            static DEFERRAL: OnceLock<Option<Deferral>> = OnceLock::new();
            DEFERRAL
                .get_or_init(|| {
                    let acting_normally = Arc::new(AtomicBool::new(true));
                    let mut pending = Vec::new();
                    for signal in [SIGINT, SIGTERM, SIGHUP] {
                        if is_ignored(signal) {
                            continue;
                        }
                        let flag = Arc::new(AtomicBool::new(false));
                        signal_hook::flag::register_conditional_default(signal, acting_normally.clone())
                            .ok()?;
                        signal_hook::flag::register(signal, flag.clone()).ok()?;
                        pending.push((signal, flag));
                    }
                    Some(Deferral {
                        acting_normally,
                        pending,
                        holders: Mutex::new(0),
                    })
                })
                .as_ref()
        }

        impl Deferral {
            pub(super) fn begin(&self) {
                let mut holders = self
                    .holders
                    .lock()
                    .unwrap_or_else(|poisoned| poisoned.into_inner());
                *holders += 1;
                self.acting_normally.store(false, Ordering::SeqCst);
            }

            pub(super) fn end(&self) {
                let mut holders = self
                    .holders
                    .lock()
                    .unwrap_or_else(|poisoned| poisoned.into_inner());
                *holders = holders.saturating_sub(1);
                if *holders > 0 {
                    return;
                }
                self.acting_normally.store(true, Ordering::SeqCst);
                for (signal, flag) in &self.pending {
                    if flag.swap(false, Ordering::SeqCst) {
                        // The interrupt that waited: now act on it as the default would.
                        let _ = signal_hook::low_level::emulate_default_handler(*signal);
                    }
                }
            }
        }
    }

    /// Holds interrupts back until the returned value is dropped.
    pub fn hold() -> Held {
        #[cfg(unix)]
        if let Some(deferral) = unix::deferral() {
            deferral.begin();
        }
        Held {
            #[cfg(unix)]
            _private: (),
        }
    }

    impl Drop for Held {
        fn drop(&mut self) {
            #[cfg(unix)]
            if let Some(deferral) = unix::deferral() {
                deferral.end();
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn file(name: &str, text: &str) -> OutputFile {
        OutputFile {
            name: name.into(),
            bytes: text.as_bytes().to_vec(),
        }
    }

    fn listing(folder: &Path) -> Vec<String> {
        let mut names = Vec::new();
        for entry in fs::read_dir(folder).unwrap().flatten() {
            let name = entry.file_name().to_string_lossy().into_owned();
            if entry.path().is_dir() {
                for inner in fs::read_dir(entry.path()).unwrap().flatten() {
                    names.push(format!("{name}/{}", inner.file_name().to_string_lossy()));
                }
            } else {
                names.push(name);
            }
        }
        names.sort();
        names
    }

    #[test]
    fn writes_into_a_new_folder_and_again_into_its_own() {
        let root = tempfile::tempdir().unwrap();
        let out = root.path().join("run");
        write_outputs(&out, false, &[], &[file("a.csv", "x\n")]).unwrap();
        assert_eq!(fs::read_to_string(out.join("a.csv")).unwrap(), "x\n");
        write_outputs(&out, false, &[], &[file("a.csv", "y\n")]).unwrap();
        assert_eq!(fs::read_to_string(out.join("a.csv")).unwrap(), "y\n");
        assert_eq!(listing(&out), vec![MARKER_FILE.to_string(), "a.csv".to_string()]);
    }

    #[test]
    fn outputs_the_new_run_does_not_write_are_removed_and_other_files_kept() {
        let root = tempfile::tempdir().unwrap();
        let out = root.path().join("run");
        write_outputs(
            &out,
            false,
            &[],
            &[
                file("a.csv", "x"),
                file("report.html", "r"),
                file("plots/p.png", "p"),
            ],
        )
        .unwrap();
        fs::write(out.join("my-notes.txt"), "mine").unwrap();
        write_outputs(&out, false, &[], &[file("a.csv", "y")]).unwrap();
        assert_eq!(
            listing(&out),
            vec![
                MARKER_FILE.to_string(),
                "a.csv".to_string(),
                "my-notes.txt".to_string()
            ]
        );
    }

    #[test]
    fn a_failure_part_way_leaves_the_previous_outputs_whole() {
        let root = tempfile::tempdir().unwrap();
        let out = root.path().join("run");
        write_outputs(
            &out,
            false,
            &[],
            &[file("a.csv", "old a"), file("b.csv", "old b")],
        )
        .unwrap();
        // A second file cannot be staged: its name holds a folder that is a file in the staging
        // area (`a.csv/inner`), so the write fails after the first file was written.
        let error = write_outputs(
            &out,
            false,
            &[],
            &[file("a.csv", "new a"), file("a.csv/inner", "x")],
        )
        .unwrap_err();
        assert!(matches!(error, OutputError::Io { .. }), "{error}");
        assert!(
            std::error::Error::source(&error).is_some(),
            "the io::Error is kept"
        );
        assert_eq!(fs::read_to_string(out.join("a.csv")).unwrap(), "old a");
        assert_eq!(fs::read_to_string(out.join("b.csv")).unwrap(), "old b");
        assert_eq!(
            listing(&out),
            vec![MARKER_FILE.to_string(), "a.csv".to_string(), "b.csv".to_string()]
        );
    }

    #[test]
    fn a_failed_first_run_leaves_no_folder() {
        let root = tempfile::tempdir().unwrap();
        let out = root.path().join("run");
        assert!(write_outputs(&out, false, &[], &[file("a.csv", "x"), file("a.csv/inner", "y")]).is_err());
        assert!(!out.exists());
    }

    #[test]
    fn leftovers_of_an_interrupted_run_are_removed() {
        let root = tempfile::tempdir().unwrap();
        let out = root.path().join("run");
        write_outputs(&out, false, &[], &[file("a.csv", "x")]).unwrap();
        fs::create_dir_all(out.join(".platekin-staging-1")).unwrap();
        fs::write(out.join(".platekin-staging-1/big.tmp"), "partial").unwrap();
        write_outputs(&out, false, &[], &[file("a.csv", "y")]).unwrap();
        assert_eq!(listing(&out), vec![MARKER_FILE.to_string(), "a.csv".to_string()]);
    }

    #[test]
    fn a_folder_holding_only_an_interrupted_first_run_is_taken() {
        let root = tempfile::tempdir().unwrap();
        let out = root.path().join("run");
        fs::create_dir_all(out.join(".platekin-staging-7")).unwrap();
        fs::write(out.join(".platekin-staging-7/wells.csv"), "partial").unwrap();
        write_outputs(&out, false, &[], &[file("a.csv", "x")]).unwrap();
        assert_eq!(listing(&out), vec![MARKER_FILE.to_string(), "a.csv".to_string()]);
    }

    #[test]
    fn a_run_s_outputs_are_not_replaced_by_outputs_without_a_run_record() {
        let root = tempfile::tempdir().unwrap();
        let out = root.path().join("run");
        write_outputs(
            &out,
            false,
            &[],
            &[file("fit.json", "run fit"), file("run.json", "record")],
        )
        .unwrap();
        let error = write_outputs(&out, false, &[], &[file("fit.json", "table fit")]).unwrap_err();
        assert!(matches!(error, OutputError::WouldReplaceRun { .. }), "{error}");
        assert_eq!(fs::read_to_string(out.join("fit.json")).unwrap(), "run fit");
        // Another run replaces them.
        write_outputs(
            &out,
            false,
            &[],
            &[file("fit.json", "new"), file("run.json", "new record")],
        )
        .unwrap();
        assert_eq!(fs::read_to_string(out.join("fit.json")).unwrap(), "new");
    }

    #[test]
    fn a_failed_swap_restores_the_marker_too() {
        let root = tempfile::tempdir().unwrap();
        let out = root.path().join("run");
        write_outputs(&out, false, &[], &[file("a.csv", "old"), file("b.csv", "old b")]).unwrap();
        let marker = fs::read(out.join(MARKER_FILE)).unwrap();
        // `c.csv` cannot be moved in: a folder of that name stands in the way.
        fs::create_dir_all(out.join("c.csv/inside")).unwrap();
        let error =
            write_outputs(&out, false, &[], &[file("a.csv", "new"), file("c.csv", "new c")]).unwrap_err();
        assert!(matches!(error, OutputError::Io { .. }), "{error}");
        assert_eq!(fs::read(out.join(MARKER_FILE)).unwrap(), marker);
        assert_eq!(fs::read_to_string(out.join("a.csv")).unwrap(), "old");
        assert_eq!(fs::read_to_string(out.join("b.csv")).unwrap(), "old b");
    }

    #[test]
    fn refuses_a_foreign_folder_unless_forced() {
        let root = tempfile::tempdir().unwrap();
        fs::write(root.path().join("notes.txt"), "mine").unwrap();
        let error = write_outputs(root.path(), false, &[], &[file("a.csv", "x")]).unwrap_err();
        assert!(error.to_string().contains("--force"), "{error}");
        assert!(!root.path().join("a.csv").exists());
        write_outputs(root.path(), true, &[], &[file("a.csv", "x")]).unwrap();
        assert!(root.path().join("a.csv").exists());
        assert_eq!(fs::read_to_string(root.path().join("notes.txt")).unwrap(), "mine");
    }

    #[test]
    fn never_overwrites_an_input() {
        let root = tempfile::tempdir().unwrap();
        let input = root.path().join("wells.csv");
        fs::write(&input, "raw").unwrap();
        let error = write_outputs(
            root.path(),
            true,
            std::slice::from_ref(&input),
            &[file("wells.csv", "x")],
        )
        .unwrap_err();
        assert!(matches!(error, OutputError::WouldOverwriteInput { .. }));
        assert_eq!(fs::read_to_string(&input).unwrap(), "raw");
    }
}
