//! What a campaign keeps of each plate between runs, so that a plate whose inputs and settings did
//! not change is not analysed again: beside the plate's own outputs, in the campaign's
//! `.platekin-batch/PLATE/` folder, its digest with the key it was made under (`digest.json`) and
//! its rows of the campaign tables (Parquet, which keeps every column's type). The digest
//! and tables are typed values stored for the next run, read back only under an equal key: no
//! decision is made from a text made for people. A plate is
//! reused only when its `run.json` and the kept key both match the inputs' SHA-256, the settings
//! and the platekin version of this run; anything missing, unreadable or different means the
//! plate is analysed again.

use serde::{Deserialize, Serialize};

use super::super::json::json_file;
use super::super::RenderError;
use super::tables::{parquet_bytes, read_parquet_bytes, PlateTables, TABLE_COUNT, TABLE_NAMES};
use crate::campaign::PlateDigest;
use crate::config::SettingLayer;
use crate::files::output::OutputFile;

/// The campaign's folder of kept plate results.
pub const STORE_FOLDER: &str = ".platekin-batch";

/// The file of a kept digest.
pub const DIGEST_FILE: &str = "digest.json";

/// What a plate's results were made from: equal keys mean equal results.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ResultKey {
    /// The platekin version.
    pub version: String,
    /// SHA-256 of the data file.
    pub data_sha256: String,
    /// SHA-256 of the layout file.
    pub layout_sha256: String,
    /// Every setting as used.
    pub settings: SettingLayer,
}

impl ResultKey {
    /// The key of a plate analysed by this platekin.
    pub fn new(data_sha256: String, layout_sha256: String, settings: SettingLayer) -> ResultKey {
        ResultKey {
            version: env!("CARGO_PKG_VERSION").to_string(),
            data_sha256,
            layout_sha256,
            settings,
        }
    }
}

#[derive(Serialize, Deserialize)]
struct KeptDigest {
    key: ResultKey,
    digest: PlateDigest,
}

/// The files a plate keeps for the next run (names relative to its store folder).
pub fn kept_files(
    key: &ResultKey,
    digest: &PlateDigest,
    tables: &PlateTables,
) -> Result<Vec<OutputFile>, RenderError> {
    let kept = KeptDigest {
        key: key.clone(),
        digest: digest.clone(),
    };
    let value = serde_json::to_value(&kept).map_err(|source| RenderError::Json {
        file: DIGEST_FILE.to_string(),
        source,
    })?;
    let mut files = vec![json_file(DIGEST_FILE, &value)?];
    for (name, frame) in TABLE_NAMES.iter().zip(tables.frames()) {
        files.push(OutputFile {
            name: format!("{name}.parquet"),
            bytes: parquet_bytes(&mut frame.clone())?,
        });
    }
    Ok(files)
}

/// The kept digest, when its key is `key`.
pub fn kept_digest(bytes: &[u8], key: &ResultKey) -> Option<PlateDigest> {
    let kept: KeptDigest = serde_json::from_slice(bytes).ok()?;
    (kept.key == *key).then_some(kept.digest)
}

/// The kept tables from their Parquet bytes, in [`TABLE_NAMES`] order.
pub fn kept_tables(bytes: [Vec<u8>; TABLE_COUNT]) -> Option<PlateTables> {
    let [wells, conditions, fits, compounds] = bytes;
    Some(PlateTables::from_frames([
        read_parquet_bytes(wells).ok()?,
        read_parquet_bytes(conditions).ok()?,
        read_parquet_bytes(fits).ok()?,
        read_parquet_bytes(compounds).ok()?,
    ]))
}

/// Whether a plate's `run.json` records the inputs, settings and version of `key`.
pub fn run_record_matches(run_json: &[u8], key: &ResultKey) -> bool {
    #[derive(Deserialize)]
    struct Input {
        role: String,
        sha256: String,
    }
    #[derive(Deserialize)]
    struct Record {
        version: String,
        inputs: Vec<Input>,
        settings: SettingLayer,
    }
    let Ok(record) = serde_json::from_slice::<Record>(run_json) else {
        return false;
    };
    let hash_of = |role: &str| {
        record
            .inputs
            .iter()
            .find(|input| input.role == role)
            .map(|input| input.sha256.as_str())
    };
    record.version == key.version
        && hash_of("data") == Some(key.data_sha256.as_str())
        && hash_of("layout") == Some(key.layout_sha256.as_str())
        && record.settings == key.settings
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::render::json::{run_json, InputRecord};

    fn key() -> ResultKey {
        ResultKey::new(
            "aa".into(),
            "bb".into(),
            SettingLayer {
                max_conversion: Some(0.1),
                ..SettingLayer::default()
            },
        )
    }

    #[test]
    fn a_run_record_matches_only_its_own_inputs_and_settings() {
        let record = |data: &str, conversion: f64| {
            let inputs = vec![
                InputRecord {
                    role: "data".into(),
                    file: "d.csv".into(),
                    bytes: 1,
                    sha256: data.into(),
                },
                InputRecord {
                    role: "layout".into(),
                    file: "l.csv".into(),
                    bytes: 1,
                    sha256: "bb".into(),
                },
            ];
            let used = SettingLayer {
                max_conversion: Some(conversion),
                ..SettingLayer::default()
            };
            run_json(&inputs, &used, "html", &[]).unwrap().bytes
        };
        assert!(run_record_matches(&record("aa", 0.1), &key()));
        assert!(!run_record_matches(&record("ab", 0.1), &key()));
        assert!(!run_record_matches(&record("aa", 0.05), &key()));
        assert!(!run_record_matches(b"not json", &key()));
    }

    #[test]
    fn a_kept_digest_is_returned_only_under_its_key() {
        let digest = PlateDigest {
            wells: 3,
            flagged: Vec::new(),
            groups: 0,
            groups_fitted: 0,
            constants: Vec::new(),
            z_prime: None,
            pool_points: Vec::new(),
            shared_errors: Vec::new(),
            rate_unit: "uM/s".into(),
            substrate_unit: Some("uM".into()),
        };
        let tables = PlateTables::from_frames([
            polars::df!("well" => ["A1"]).unwrap(),
            polars::df!("role" => ["sample"]).unwrap(),
            polars::df!("group" => ["g"]).unwrap(),
            polars::prelude::DataFrame::empty(),
        ]);
        let files = kept_files(&key(), &digest, &tables).unwrap();
        assert_eq!(kept_digest(&files[0].bytes, &key()), Some(digest));
        let other = ResultKey {
            version: "0.0.0".into(),
            ..key()
        };
        assert_eq!(kept_digest(&files[0].bytes, &other), None);
        let back = kept_tables([
            files[1].bytes.clone(),
            files[2].bytes.clone(),
            files[3].bytes.clone(),
            files[4].bytes.clone(),
        ])
        .unwrap();
        assert!(back.wells.equals_missing(&tables.wells));
        // A plate without compounds keeps an empty table, read back empty.
        assert_eq!(back.compounds.shape(), (0, 0));
    }
}
