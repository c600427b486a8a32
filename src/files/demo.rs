//! The embedded demo plate's input files: an invented esterase plate (the Amber Fen scenario in
//! `demo-plates/`), compiled into the binary so that `platekin demo` needs no files. They are
//! handed on as input files with their names, like any run's.

use super::input::{InputFile, InputRole};

/// The demo's raw export (wide CSV).
pub const DEMO_DATA: &str = include_str!("../../demo-plates/amber-fen-wide.csv");
/// The demo's layout (tidy CSV).
pub const DEMO_LAYOUT: &str = include_str!("../../demo-plates/amber-fen-layout.csv");
/// The demo's assay settings.
pub const DEMO_ASSAY: &str = include_str!("../../demo-plates/amber-fen-assay.toml");

/// The demo's data, layout and assay file, as embedded input files.
pub fn demo_files() -> [InputFile; 3] {
    [
        InputFile::embedded(InputRole::Data, "amber-fen-wide.csv (embedded demo)", DEMO_DATA),
        InputFile::embedded(
            InputRole::Layout,
            "amber-fen-layout.csv (embedded demo)",
            DEMO_LAYOUT,
        ),
        InputFile::embedded(
            InputRole::Assay,
            "amber-fen-assay.toml (embedded demo)",
            DEMO_ASSAY,
        ),
    ]
}
