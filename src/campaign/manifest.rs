//! The list of plates of a campaign: a manifest table (CSV or spreadsheet) with columns `data` and
//! `layout` (paths relative to the manifest), optional `plate` (an id; default the data file's
//! stem) and `assay` (a per-plate settings file), and any other column as a plate-level factor
//! (day, operator, lot); or every export in a folder with one layout. Every error names the file,
//! sheet, row and column.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use crate::core::cells::{CellGrid, Position};
use crate::files::input::{InputError, InputFile, InputRole};
use crate::files::sheet::{read_input_cells, MergedCells, SheetReadError};

/// The most plates one campaign may hold: far beyond a week of screening, and small enough that
/// the campaign's tables (one row per well of every plate) stay within a laptop's memory.
pub const MAX_PLATES: usize = 20_000;

/// The longest plate id (it names a folder).
pub const MAX_PLATE_ID_CHARS: usize = 100;

/// The columns a manifest gives meaning to; every other column is a plate factor.
const RESERVED_COLUMNS: [&str; 4] = ["data", "layout", "plate", "assay"];

/// The file endings read as plate exports when a folder is given.
const EXPORT_ENDINGS: [&str; 8] = ["csv", "tsv", "txt", "xlsx", "xlsm", "xlsb", "xls", "ods"];

/// One plate of a campaign.
#[derive(Debug, Clone, PartialEq)]
pub struct PlateEntry {
    /// The plate's id: the name of its output folder and the `plate` column of every table.
    pub plate: String,
    /// The raw export.
    pub data: PathBuf,
    /// The layout.
    pub layout: PathBuf,
    /// A per-plate settings file whose keys override the command's flags.
    pub assay: Option<PathBuf>,
    /// The plate's factor values, one per [`Manifest::factor_names`] (empty text where the cell is
    /// empty).
    pub factors: Vec<String>,
    /// Where the plate was listed (the manifest row, or the folder's file), for messages.
    pub listed_at: String,
}

/// The plates of a campaign, in run order.
#[derive(Debug, Clone, PartialEq)]
pub struct Manifest {
    /// The manifest file or the folder, as the user named it.
    pub source: String,
    /// The plate-level factors, in the manifest's column order.
    pub factor_names: Vec<String>,
    /// The plates, in the manifest's row order (a folder's files in name order).
    pub plates: Vec<PlateEntry>,
}

impl Manifest {
    /// The factor values of a plate by name.
    pub fn factors_of<'a>(&'a self, entry: &'a PlateEntry) -> impl Iterator<Item = (&'a str, &'a str)> {
        self.factor_names
            .iter()
            .map(String::as_str)
            .zip(entry.factors.iter().map(String::as_str))
    }
}

/// Why a manifest (or a folder of exports) cannot be used: the whole campaign stops before
/// anything is written.
#[derive(Debug, thiserror::Error)]
pub enum ManifestError {
    /// The manifest file could not be read.
    #[error(transparent)]
    Unreadable(#[from] InputError),
    /// The manifest's cells could not be read.
    #[error(transparent)]
    Cells(#[from] SheetReadError),
    /// The manifest has no header row.
    #[error("{file}: the manifest is empty (it needs a header row with `data` and `layout` columns and one row per plate)")]
    Empty {
        /// The manifest.
        file: String,
    },
    /// A required column is missing.
    #[error("{position}: the header has no `{column}` column (the manifest needs `data` and `layout`; `plate`, `assay` and factor columns are optional)")]
    MissingColumn {
        /// The header row.
        position: Position,
        /// The missing column.
        column: &'static str,
    },
    /// Two columns share a name.
    #[error("{position}: the column `{name}` appears twice in the header")]
    DuplicateColumn {
        /// The second one.
        position: Position,
        /// The name.
        name: String,
    },
    /// A column holds values but has no name.
    #[error(
        "{position}: this column holds values but its header is empty; name it (it would be a plate factor)"
    )]
    UnnamedColumn {
        /// The header cell.
        position: Position,
    },
    /// A required cell is empty.
    #[error("{position}: the `{column}` cell is empty")]
    EmptyCell {
        /// The cell.
        position: Position,
        /// Its column.
        column: &'static str,
    },
    /// A plate id cannot name a folder.
    #[error("{at}: the plate id '{plate}' cannot name a folder: use 1 to {max} letters, digits, '.', '-' or '_', not starting with '.'", max = MAX_PLATE_ID_CHARS)]
    BadPlateId {
        /// Where the plate is listed.
        at: String,
        /// The id.
        plate: String,
    },
    /// Two plates share an id.
    #[error("{at}: the plate id '{plate}' is already used at {first}; give each plate its own id (a `plate` column)")]
    DuplicatePlate {
        /// The second listing.
        at: String,
        /// The id.
        plate: String,
        /// The first listing.
        first: String,
    },
    /// No plate is listed.
    #[error("{source_name}: no plate is listed")]
    NoPlates {
        /// The manifest or folder.
        source_name: String,
    },
    /// Too many plates.
    #[error("{source_name}: {count} plates listed, more than the {limit} one campaign may hold; split it into several manifests")]
    TooManyPlates {
        /// The manifest or folder.
        source_name: String,
        /// How many were listed.
        count: usize,
        /// The ceiling.
        limit: usize,
    },
    /// The folder could not be listed.
    #[error("{folder}: cannot list the folder")]
    Folder {
        /// The folder.
        folder: String,
        /// The system's reason.
        #[source]
        source: std::io::Error,
    },
    /// A folder was given without `--layout`.
    #[error("{folder}: a folder of exports needs one layout for all of them: add --layout LAYOUT (or give a manifest)")]
    FolderWithoutLayout {
        /// The folder.
        folder: String,
    },
}

/// Whether an id can name a plate's output folder on every common file system.
pub fn is_valid_plate_id(plate: &str) -> bool {
    !plate.is_empty()
        && plate.chars().count() <= MAX_PLATE_ID_CHARS
        && !plate.starts_with('.')
        && plate
            .chars()
            .all(|c| c.is_ascii_alphanumeric() || matches!(c, '.' | '-' | '_'))
}

/// A plate id made from a file stem: characters a folder name cannot safely hold become `-`.
pub fn plate_id_from_stem(path: &Path) -> String {
    let stem = path
        .file_stem()
        .map(|stem| stem.to_string_lossy().into_owned())
        .unwrap_or_default();
    let cleaned: String = stem
        .chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() || matches!(c, '.' | '-' | '_') {
                c
            } else {
                '-'
            }
        })
        .take(MAX_PLATE_ID_CHARS)
        .collect();
    cleaned.trim_start_matches('.').to_string()
}

/// Reads a manifest file (CSV/TSV or the first sheet of a spreadsheet holding data).
pub fn read_manifest(path: &Path) -> Result<Manifest, ManifestError> {
    let input = InputFile::read(InputRole::Table, path)?;
    let grid = read_input_cells(&input, None, MergedCells::Fill)?;
    let folder = path.parent().unwrap_or(Path::new(""));
    parse_manifest(&grid, folder)
}

/// The manifest's plates from its cells; relative paths are taken from `folder`.
pub fn parse_manifest(grid: &CellGrid, folder: &Path) -> Result<Manifest, ManifestError> {
    let file = grid.source.to_string();
    let header_row = (0..grid.n_rows())
        .find(|&row| !grid.row_is_blank(row))
        .ok_or(ManifestError::Empty { file: file.clone() })?;
    let width = (header_row..grid.n_rows())
        .map(|row| grid.row_width(row))
        .max()
        .unwrap_or(0);
    // Column index by lower-case name; factors keep the header's spelling.
    let mut columns: BTreeMap<String, usize> = BTreeMap::new();
    let mut factor_columns: Vec<(String, usize)> = Vec::new();
    for column in 0..width {
        let name = grid.cell(header_row, column).as_text().trim().to_string();
        if name.is_empty() {
            let holds_values = (header_row + 1..grid.n_rows()).any(|row| !grid.cell(row, column).is_empty());
            if holds_values {
                return Err(ManifestError::UnnamedColumn {
                    position: grid.position(header_row, Some(column)),
                });
            }
            continue;
        }
        let key = name.to_lowercase();
        if columns.insert(key.clone(), column).is_some() {
            return Err(ManifestError::DuplicateColumn {
                position: grid.position(header_row, Some(column)),
                name,
            });
        }
        if !RESERVED_COLUMNS.contains(&key.as_str()) {
            factor_columns.push((name, column));
        }
    }
    let required = |column: &'static str| {
        columns
            .get(column)
            .copied()
            .ok_or_else(|| ManifestError::MissingColumn {
                position: grid.position(header_row, None),
                column,
            })
    };
    let data_column = required("data")?;
    let layout_column = required("layout")?;
    let plate_column = columns.get("plate").copied();
    let assay_column = columns.get("assay").copied();
    let listed_rows = (header_row + 1..grid.n_rows())
        .filter(|&row| !grid.row_is_blank(row))
        .count();
    if listed_rows > MAX_PLATES {
        return Err(ManifestError::TooManyPlates {
            source_name: file,
            count: listed_rows,
            limit: MAX_PLATES,
        });
    }
    let mut plates = Vec::new();
    for row in header_row + 1..grid.n_rows() {
        if grid.row_is_blank(row) {
            continue;
        }
        let path_in = |column: usize, name: &'static str| -> Result<PathBuf, ManifestError> {
            let text = grid.cell(row, column).as_text();
            let text = text.trim();
            if text.is_empty() {
                return Err(ManifestError::EmptyCell {
                    position: grid.position(row, Some(column)),
                    column: name,
                });
            }
            Ok(folder.join(text))
        };
        let data = path_in(data_column, "data")?;
        let layout = path_in(layout_column, "layout")?;
        let assay = assay_column
            .filter(|&column| !grid.cell(row, column).is_empty())
            .map(|column| path_in(column, "assay"))
            .transpose()?;
        let listed_at = grid.position(row, None).to_string();
        let plate = match plate_column.map(|column| grid.cell(row, column).as_text().trim().to_string()) {
            Some(plate) if !plate.is_empty() => {
                if !is_valid_plate_id(&plate) {
                    return Err(ManifestError::BadPlateId {
                        at: grid.position(row, plate_column).to_string(),
                        plate,
                    });
                }
                plate
            }
            _ => stem_id(&data, &listed_at)?,
        };
        let factors = factor_columns
            .iter()
            .map(|(_, column)| grid.cell(row, *column).as_text().trim().to_string())
            .collect();
        plates.push(PlateEntry {
            plate,
            data,
            layout,
            assay,
            factors,
            listed_at,
        });
    }
    finish(
        file,
        factor_columns.into_iter().map(|(name, _)| name).collect(),
        plates,
    )
}

fn stem_id(data: &Path, listed_at: &str) -> Result<String, ManifestError> {
    let plate = plate_id_from_stem(data);
    if is_valid_plate_id(&plate) {
        Ok(plate)
    } else {
        Err(ManifestError::BadPlateId {
            at: listed_at.to_string(),
            plate,
        })
    }
}

/// Checks the count and that ids are unique.
fn finish(
    source_name: String,
    factor_names: Vec<String>,
    plates: Vec<PlateEntry>,
) -> Result<Manifest, ManifestError> {
    if plates.is_empty() {
        return Err(ManifestError::NoPlates { source_name });
    }
    let mut seen: BTreeMap<String, String> = BTreeMap::new();
    for entry in &plates {
        // Ids are compared without case: two folders differing only in case collide on some
        // file systems.
        if let Some(first) = seen.insert(entry.plate.to_lowercase(), entry.listed_at.clone()) {
            return Err(ManifestError::DuplicatePlate {
                at: entry.listed_at.clone(),
                plate: entry.plate.clone(),
                first,
            });
        }
    }
    Ok(Manifest {
        source: source_name,
        factor_names,
        plates,
    })
}

/// Every export in `folder` (by file ending, hidden files and the layout itself left out), in
/// name order, each with `layout`; plate ids are the file stems.
pub fn folder_manifest(folder: &Path, layout: Option<&Path>) -> Result<Manifest, ManifestError> {
    let source_name = folder.display().to_string();
    let layout = layout.ok_or_else(|| ManifestError::FolderWithoutLayout {
        folder: source_name.clone(),
    })?;
    let listing_error = |source| ManifestError::Folder {
        folder: source_name.clone(),
        source,
    };
    let layout_canonical = layout.canonicalize().ok();
    let mut files = Vec::new();
    for entry in std::fs::read_dir(folder).map_err(listing_error)? {
        let path = entry.map_err(listing_error)?.path();
        let name = path
            .file_name()
            .map(|n| n.to_string_lossy().into_owned())
            .unwrap_or_default();
        let ending = path
            .extension()
            .map(|e| e.to_string_lossy().to_ascii_lowercase())
            .unwrap_or_default();
        let is_layout = layout_canonical.is_some() && path.canonicalize().ok() == layout_canonical;
        if name.starts_with('.') || !path.is_file() || is_layout || !EXPORT_ENDINGS.contains(&ending.as_str())
        {
            continue;
        }
        files.push(path);
        if files.len() > MAX_PLATES {
            return Err(ManifestError::TooManyPlates {
                source_name,
                count: files.len(),
                limit: MAX_PLATES,
            });
        }
    }
    files.sort();
    let plates = files
        .into_iter()
        .map(|data| {
            let listed_at = data.display().to_string();
            Ok(PlateEntry {
                plate: stem_id(&data, &listed_at)?,
                layout: layout.to_path_buf(),
                assay: None,
                factors: Vec::new(),
                listed_at,
                data,
            })
        })
        .collect::<Result<Vec<_>, ManifestError>>()?;
    finish(source_name, Vec::new(), plates)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::files::sheet::read_text_cells;
    use proptest::prelude::*;

    fn manifest(text: &str) -> Result<Manifest, ManifestError> {
        let grid = read_text_cells(text.as_bytes(), "plates.csv").unwrap();
        parse_manifest(&grid, Path::new("runs"))
    }

    #[test]
    fn reads_paths_ids_assays_and_factors_in_order() {
        let parsed = manifest(
            "Data,layout,plate,day,operator,assay\nd1.csv,l.csv,P-01,1,Ana,\nsub/d2.csv,l.csv,,2,Ben,slow.toml\n",
        )
        .unwrap();
        assert_eq!(parsed.factor_names, vec!["day", "operator"]);
        assert_eq!(parsed.plates.len(), 2);
        assert_eq!(parsed.plates[0].plate, "P-01");
        assert_eq!(parsed.plates[0].data, Path::new("runs/d1.csv"));
        assert_eq!(parsed.plates[0].assay, None);
        assert_eq!(parsed.plates[0].factors, vec!["1", "Ana"]);
        // No id: the data file's stem.
        assert_eq!(parsed.plates[1].plate, "d2");
        assert_eq!(parsed.plates[1].assay, Some(PathBuf::from("runs/slow.toml")));
        let factors: Vec<_> = parsed.factors_of(&parsed.plates[1]).collect();
        assert_eq!(factors, vec![("day", "2"), ("operator", "Ben")]);
    }

    #[test]
    fn errors_name_the_file_row_and_column() {
        let error = manifest("data,plate\nd1.csv,P1\n").unwrap_err();
        assert_eq!(
            error.to_string(),
            "plates.csv, row 1: the header has no `layout` column (the manifest needs `data` and `layout`; `plate`, `assay` and factor columns are optional)"
        );
        let error = manifest("data,layout\nd1.csv,l.csv\n,l.csv\n").unwrap_err();
        assert!(
            error
                .to_string()
                .starts_with("plates.csv, row 3, column 1 (A): the `data` cell is empty"),
            "{error}"
        );
        let error = manifest("data,layout,plate\nd1.csv,l.csv,P1\nd2.csv,l.csv,p1\n").unwrap_err();
        assert!(
            error
                .to_string()
                .contains("'p1' is already used at plates.csv, row 2"),
            "{error}"
        );
        let error = manifest("data,layout,plate\nd1.csv,l.csv,../escape\n").unwrap_err();
        assert!(
            error.to_string().starts_with("plates.csv, row 2, column 3 (C)"),
            "{error}"
        );
        let error = manifest("data,layout,,\nd1.csv,l.csv,,x\n").unwrap_err();
        assert!(
            error.to_string().starts_with("plates.csv, row 1, column 4 (D)"),
            "{error}"
        );
        let error = manifest("data,layout,day,Day\nd1.csv,l.csv,1,2\n").unwrap_err();
        assert!(error.to_string().contains("`Day` appears twice"), "{error}");
        assert!(matches!(
            manifest("data,layout\n"),
            Err(ManifestError::NoPlates { .. })
        ));
        assert!(matches!(manifest(""), Err(ManifestError::Empty { .. })));
    }

    #[test]
    fn a_spreadsheet_manifest_reads_like_a_csv_one_with_numbers_as_factors() {
        let mut workbook = rust_xlsxwriter::Workbook::new();
        let sheet = workbook.add_worksheet();
        for (column, header) in ["data", "layout", "plate", "day"].iter().enumerate() {
            sheet.write_string(0, column as u16, *header).unwrap();
        }
        sheet.write_string(1, 0, "d1.csv").unwrap();
        sheet.write_string(1, 1, "l.csv").unwrap();
        sheet.write_string(1, 2, "P1").unwrap();
        sheet.write_number(1, 3, 2.0).unwrap();
        sheet.write_string(3, 0, "d2.csv").unwrap();
        let bytes = workbook.save_to_buffer().unwrap();
        let grid =
            crate::files::sheet::read_spreadsheet_cells(&bytes, "plates.xlsx", None, MergedCells::Fill)
                .unwrap();
        let error = parse_manifest(&grid, Path::new("runs")).unwrap_err();
        // Row 3 is blank and skipped; row 4 lacks its layout.
        assert!(
            error
                .to_string()
                .starts_with("plates.xlsx, sheet 'Sheet1', row 4, column 2 (B): the `layout` cell is empty"),
            "{error}"
        );
        let mut workbook = rust_xlsxwriter::Workbook::new();
        let sheet = workbook.add_worksheet();
        for (column, text) in ["data", "layout", "plate", "day"].iter().enumerate() {
            sheet.write_string(0, column as u16, *text).unwrap();
        }
        for (column, text) in ["d1.csv", "l.csv", "P1"].iter().enumerate() {
            sheet.write_string(1, column as u16, *text).unwrap();
        }
        sheet.write_number(1, 3, 2.0).unwrap();
        let bytes = workbook.save_to_buffer().unwrap();
        let grid =
            crate::files::sheet::read_spreadsheet_cells(&bytes, "plates.xlsx", None, MergedCells::Fill)
                .unwrap();
        let parsed = parse_manifest(&grid, Path::new("runs")).unwrap();
        assert_eq!(parsed.plates[0].plate, "P1");
        assert_eq!(parsed.plates[0].factors, vec!["2"]);
    }

    #[test]
    fn stems_become_folder_safe_ids() {
        assert_eq!(
            plate_id_from_stem(Path::new("a/day 1 (plate 3).csv")),
            "day-1--plate-3-"
        );
        assert_eq!(plate_id_from_stem(Path::new(".hidden.csv")), "hidden");
        assert!(!is_valid_plate_id(".."));
        assert!(!is_valid_plate_id("a/b"));
        assert!(is_valid_plate_id("day1_P03.v2"));
    }

    proptest! {
        #[test]
        fn any_manifest_text_parses_or_fails_with_a_position(text in "[a-z0-9,./\n ]{0,120}") {
            match manifest(&text) {
                Ok(parsed) => {
                    prop_assert!(!parsed.plates.is_empty());
                    for entry in &parsed.plates {
                        prop_assert!(is_valid_plate_id(&entry.plate));
                    }
                }
                Err(error) => prop_assert!(error.to_string().starts_with("plates.csv"), "{}", error),
            }
        }

        #[test]
        fn stems_always_give_valid_ids_or_empty(stem in "[ -~]{1,40}") {
            let plate = plate_id_from_stem(Path::new(&format!("{stem}.csv")));
            prop_assert!(plate.is_empty() || is_valid_plate_id(&plate) || plate.len() > MAX_PLATE_ID_CHARS);
        }
    }
}
