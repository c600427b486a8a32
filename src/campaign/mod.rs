//! A campaign: many plates run with the single-plate pipeline, each reduced to a digest once its
//! own outputs are written ([`digest`]), their quality from the controls ([`screening`]: Z'), and
//! the cross-plate fits ([`pooled`]). The plates come from a manifest or a folder ([`manifest`]).
//! Numbers in, typed results out: the tables, `pooled.json` and the report are made in `render`.

pub mod digest;
pub mod manifest;
pub mod pooled;
pub mod screening;

use std::collections::BTreeMap;

pub use digest::{digest, PlateDigest};
pub use manifest::{Manifest, ManifestError, PlateEntry};
pub use pooled::{pooled_fits, PoolPlate, PooledFit};

/// How a plate of a campaign ended.
// One status per plate, most of them `Ok`: boxing the digest would save a few hundred bytes on
// the rare failed plate and cost an allocation on every good one.
#[allow(clippy::large_enum_variant)]
#[derive(Debug, Clone, PartialEq)]
pub enum PlateStatus {
    /// Analysed, or reused unchanged from the previous run.
    Ok {
        /// What the campaign keeps of it.
        digest: PlateDigest,
        /// Whether its previous results were reused (inputs and settings unchanged).
        reused: bool,
    },
    /// Not analysed: the error's full message, positioned as `run` gives it.
    Failed {
        /// The message.
        error: String,
    },
}

/// One plate of a campaign and how it ended.
#[derive(Debug, Clone, PartialEq)]
pub struct PlateOutcome {
    /// The plate's id.
    pub plate: String,
    /// Its manifest factors by name.
    pub factors: BTreeMap<String, String>,
    /// SHA-256 of its data file, when it could be read.
    pub data_sha256: Option<String>,
    /// SHA-256 of its layout file, when it could be read.
    pub layout_sha256: Option<String>,
    /// How it ended.
    pub status: PlateStatus,
}

impl PlateOutcome {
    /// The digest of a plate that ended well.
    pub fn digest(&self) -> Option<&PlateDigest> {
        match &self.status {
            PlateStatus::Ok { digest, .. } => Some(digest),
            PlateStatus::Failed { .. } => None,
        }
    }
}

/// The cross-plate fits of a campaign's plates that ended well.
pub fn campaign_pooled_fits(plates: &[PlateOutcome], pool_by: &[String]) -> (Vec<PooledFit>, Vec<String>) {
    let pool_plates: Vec<PoolPlate<'_>> = plates
        .iter()
        .filter_map(|outcome| {
            outcome.digest().map(|digest| PoolPlate {
                plate: &outcome.plate,
                factors: &outcome.factors,
                digest,
            })
        })
        .collect();
    pooled_fits(&pool_plates, pool_by)
}
