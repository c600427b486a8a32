//! Writing a run's files: the output folder is refused when it holds files platekin did not make
//! (unless forced), every file is written atomically (a temporary file in the same folder, then a
//! rename) so an interrupted run leaves no half file, and no output may overwrite an input.

use std::fs;
use std::io::Write;
use std::path::{Path, PathBuf};

/// The marker file that says a folder was made by platekin.
pub const MARKER_FILE: &str = ".platekin-output";

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
    /// An output would replace an input.
    #[error("{path}: this output would overwrite an input file; choose another --out")]
    WouldOverwriteInput {
        /// The clashing path.
        path: String,
    },
    /// A filesystem failure.
    #[error("{path}: {message}")]
    Io {
        /// The file or folder.
        path: String,
        /// The system's reason.
        message: String,
    },
}

fn io_error(path: &Path, error: std::io::Error) -> OutputError {
    OutputError::Io {
        path: path.display().to_string(),
        message: error.to_string(),
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
    let mut entries = fs::read_dir(folder).map_err(|error| io_error(folder, error))?;
    let empty = entries.next().is_none();
    if empty || force || folder.join(MARKER_FILE).exists() {
        Ok(())
    } else {
        Err(OutputError::NotOurs {
            folder: folder.display().to_string(),
        })
    }
}

/// Writes every file into `folder` (made if absent), each atomically. `inputs` are the run's
/// input files: an output path that is one of them is refused before anything is written.
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
        if let Ok(canonical) = target.canonicalize() {
            if canonical_inputs.contains(&canonical) {
                return Err(OutputError::WouldOverwriteInput {
                    path: target.display().to_string(),
                });
            }
        }
    }
    fs::create_dir_all(folder).map_err(|error| io_error(folder, error))?;
    write_atomically(
        &folder.join(MARKER_FILE),
        b"This folder was written by platekin.\n",
    )?;
    let mut written = Vec::with_capacity(files.len());
    for file in files {
        let target = folder.join(&file.name);
        if let Some(parent) = target.parent() {
            fs::create_dir_all(parent).map_err(|error| io_error(parent, error))?;
        }
        write_atomically(&target, &file.bytes)?;
        written.push(target);
    }
    Ok(written)
}

/// Writes `bytes` to a temporary file beside `target`, flushes it, then renames it over `target`.
pub fn write_atomically(target: &Path, bytes: &[u8]) -> Result<(), OutputError> {
    let name = target
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| "output".into());
    let temporary = target.with_file_name(format!(".{name}.tmp-{}", std::process::id()));
    let result = (|| {
        let mut file = fs::File::create(&temporary)?;
        file.write_all(bytes)?;
        file.sync_all()?;
        fs::rename(&temporary, target)
    })();
    if let Err(error) = result {
        let _ = fs::remove_file(&temporary);
        return Err(io_error(target, error));
    }
    Ok(())
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

    #[test]
    fn writes_into_a_new_folder_and_again_into_its_own() {
        let root = tempfile::tempdir().unwrap();
        let out = root.path().join("run");
        write_outputs(&out, false, &[], &[file("a.csv", "x\n")]).unwrap();
        assert_eq!(fs::read_to_string(out.join("a.csv")).unwrap(), "x\n");
        write_outputs(&out, false, &[], &[file("a.csv", "y\n")]).unwrap();
        assert_eq!(fs::read_to_string(out.join("a.csv")).unwrap(), "y\n");
        let leftovers: Vec<_> = fs::read_dir(&out)
            .unwrap()
            .filter_map(|e| e.ok())
            .filter(|e| e.file_name().to_string_lossy().contains(".tmp-"))
            .collect();
        assert!(leftovers.is_empty());
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
