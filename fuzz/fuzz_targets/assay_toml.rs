//! Fuzz target: an assay file (TOML). Reading and resolving it never panics; an error about a
//! value the file gave names the file; settings that resolve are written back (`settings.toml`)
//! and read again to the same settings, so that `--assay settings.toml` repeats a run.
#![no_main]

use std::path::{Path, PathBuf};

use libfuzzer_sys::fuzz_target;
use platekin::config::{resolve_run_from, SettingLayer};

fuzz_target!(|bytes: &[u8]| {
    let Ok(text) = std::str::from_utf8(bytes) else {
        return;
    };
    let file = Path::new("fuzz-assay.toml");
    let layer = match SettingLayer::from_assay_text(text, file) {
        Ok(layer) => layer,
        Err(error) => {
            assert!(error.to_string().contains("fuzz-assay.toml"), "{error}");
            return;
        }
    };
    match resolve_run_from(
        PathBuf::from("plate.csv"),
        SettingLayer::default(),
        Some((file, layer)),
    ) {
        Err(error) => {
            let message = error.to_string();
            assert!(
                message.contains("fuzz-assay.toml") || message.starts_with("no plate layout"),
                "an assay value's error does not name the file: {message}"
            );
        }
        Ok(settings) => {
            let written = toml::to_string(&settings.used).expect("settings.toml is written");
            let again: SettingLayer = toml::from_str(&written).expect("settings.toml reads back");
            assert_eq!(again, settings.used, "settings.toml does not repeat the run");
        }
    }
});
