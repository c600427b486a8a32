//! A user's input file read once into memory. The bytes that are parsed are the bytes that are
//! hashed into `run.json`, so a file that changes while a run reads it, or that can be read only
//! once (a named pipe, `<(cat file)`), is still recorded truthfully. A file larger than
//! [`MAX_INPUT_BYTES`] is refused before it is held in memory.

use std::io::Read;
use std::path::{Path, PathBuf};

use sha2::{Digest, Sha256};

/// The largest input file read (256 MiB): far beyond any plate export (a 1536-well, 2000-read
/// export is about 21 MB) and small enough never to exhaust a laptop's memory.
pub const MAX_INPUT_BYTES: u64 = 256 * 1024 * 1024;

/// What an input is to the run.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum InputRole {
    /// The plate reader's export.
    Data,
    /// The plate layout.
    Layout,
    /// The assay settings file.
    Assay,
    /// A rate table given to `platekin fit`.
    Table,
    /// A table of wells left out by hand (`--exclude`).
    Exclusions,
    /// A per-well pathlength table (`--pathlength-from`).
    Pathlength,
}

impl InputRole {
    /// The word `run.json` and the report use.
    pub fn word(self) -> &'static str {
        match self {
            InputRole::Data => "data",
            InputRole::Layout => "layout",
            InputRole::Assay => "assay",
            InputRole::Table => "table",
            InputRole::Exclusions => "exclusions",
            InputRole::Pathlength => "pathlength",
        }
    }
}

/// One input, read.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct InputFile {
    /// What it is to the run.
    pub role: InputRole,
    /// The name errors and outputs show: the path as the user gave it, or an embedded file's name.
    pub name: String,
    /// The path it was read from; `None` for an embedded file.
    pub path: Option<PathBuf>,
    /// Its contents.
    pub bytes: Vec<u8>,
    /// Lowercase hex SHA-256 of `bytes`, computed once when the file is read (a campaign's result
    /// key and `run.json` both need it; hashing a large export twice costs a second pass).
    sha256: String,
}

/// Why an input could not be read.
#[derive(Debug, thiserror::Error)]
pub enum InputError {
    /// The file could not be opened or read.
    #[error("{file}: cannot read the file")]
    Unreadable {
        /// The file as the user named it.
        file: String,
        /// The system's reason.
        #[source]
        source: std::io::Error,
    },
    /// The file is larger than [`MAX_INPUT_BYTES`].
    #[error("{file}: the file is larger than {limit} MiB, the most platekin reads")]
    TooLarge {
        /// The file as the user named it.
        file: String,
        /// The ceiling, in MiB.
        limit: u64,
    },
}

impl InputFile {
    /// Reads `path` once (refusing files over [`MAX_INPUT_BYTES`]).
    pub fn read(role: InputRole, path: &Path) -> Result<InputFile, InputError> {
        let name = path.display().to_string();
        let unreadable = |source| InputError::Unreadable {
            file: name.clone(),
            source,
        };
        let file = std::fs::File::open(path).map_err(unreadable)?;
        // A regular file's size is known: reserve it (plus one byte to see the end), so a 21 MB
        // export takes 21 MB and not the 32 MB a doubling buffer would. A pipe grows as it reads.
        let known_size = file
            .metadata()
            .ok()
            .filter(std::fs::Metadata::is_file)
            .map_or(0, |metadata| metadata.len().min(MAX_INPUT_BYTES));
        let mut bytes = Vec::with_capacity(usize::try_from(known_size + 1).unwrap_or(0));
        file.take(MAX_INPUT_BYTES + 1)
            .read_to_end(&mut bytes)
            .map_err(unreadable)?;
        if bytes.len() as u64 > MAX_INPUT_BYTES {
            return Err(InputError::TooLarge {
                file: name,
                limit: MAX_INPUT_BYTES / (1024 * 1024),
            });
        }
        Ok(InputFile::new(role, name, Some(path.to_path_buf()), bytes))
    }

    /// An input from bytes already in memory, hashed once here.
    pub fn new(role: InputRole, name: String, path: Option<PathBuf>, bytes: Vec<u8>) -> InputFile {
        InputFile {
            role,
            name,
            path,
            sha256: sha256_hex(&bytes),
            bytes,
        }
    }

    /// A file compiled into the program (the demo's).
    pub fn embedded(role: InputRole, name: &str, text: &str) -> InputFile {
        InputFile::new(role, name.to_string(), None, text.as_bytes().to_vec())
    }

    /// Whether the file is a spreadsheet (XLSX, XLSM, XLSB, XLS, ODS), judged by its name.
    pub fn is_spreadsheet(&self) -> bool {
        is_spreadsheet_name(&self.name)
    }

    /// Lowercase hex SHA-256 of the bytes (computed when the file was read).
    pub fn sha256(&self) -> String {
        self.sha256.clone()
    }
}

/// Whether a file name has a spreadsheet's extension (XLSX, XLSM, XLSB, XLS, ODS).
pub fn is_spreadsheet_name(name: &str) -> bool {
    let extension = Path::new(name)
        .extension()
        .and_then(|e| e.to_str())
        .map(str::to_ascii_lowercase);
    matches!(
        extension.as_deref(),
        Some("xlsx" | "xlsm" | "xlsb" | "xls" | "ods")
    )
}

/// Lowercase hex SHA-256 of `bytes`.
pub fn sha256_hex(bytes: &[u8]) -> String {
    Sha256::digest(bytes)
        .iter()
        .map(|byte| format!("{byte:02x}"))
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_files_hash_is_made_once_and_matches_its_bytes() {
        let file = InputFile::embedded(InputRole::Data, "abc.csv", "abc");
        assert_eq!(file.sha256(), sha256_hex(b"abc"));
        assert_eq!(file.sha256, file.sha256());
    }

    #[test]
    fn sha256_matches_the_fips_example() {
        // FIPS 180-2, Appendix B.1: SHA-256("abc").
        assert_eq!(
            sha256_hex(b"abc"),
            "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
        );
    }

    #[test]
    fn a_file_is_read_once_and_a_missing_one_is_named() {
        let folder = tempfile::tempdir().unwrap();
        let path = folder.path().join("plate.csv");
        std::fs::write(&path, "Time [s],A1\n0,0.1\n").unwrap();
        let input = InputFile::read(InputRole::Data, &path).unwrap();
        assert_eq!(input.bytes, b"Time [s],A1\n0,0.1\n");
        assert!(!input.is_spreadsheet());
        let missing = InputFile::read(InputRole::Data, &folder.path().join("none.csv")).unwrap_err();
        assert!(missing.to_string().contains("none.csv"), "{missing}");
        assert!(
            std::error::Error::source(&missing).is_some(),
            "the io::Error is kept as the source"
        );
    }

    #[test]
    fn spreadsheets_are_known_by_their_extension() {
        assert!(is_spreadsheet_name("a.XLSX"));
        assert!(is_spreadsheet_name("dir/b.ods"));
        assert!(!is_spreadsheet_name("c.csv"));
    }
}
