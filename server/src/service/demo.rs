//! The demo session: synthetic datasets from `sample-sessions/demo/`,
//! embedded in the binary so a fresh data directory shows something real from
//! any working directory. `sample-sessions/demo/manifest.json` lists them;
//! `sample-sessions/generate.sh` regenerates them with a seeded command.

use rust_embed::RustEmbed;
use serde::Deserialize;

use super::{ServiceError, ServiceResult};
use crate::dataset::DatasetMeta;
use crate::ingest::Format;

pub const DEMO_SESSION_NAME: &str = "Demo — Tern Island chain runs (synthetic)";

#[derive(RustEmbed)]
#[folder = "sample-sessions/demo"]
struct DemoFiles;

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct Manifest {
    datasets: Vec<ManifestEntry>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct ManifestEntry {
    name: String,
    file: String,
    #[serde(default)]
    meta: Option<DatasetMeta>,
}

/// One demo dataset, ready for upload.
#[derive(Debug)]
pub struct DemoDataset {
    pub name: String,
    pub file: String,
    pub format: Format,
    pub bytes: Vec<u8>,
    pub meta: Option<DatasetMeta>,
}

fn missing(what: &str) -> ServiceError {
    ServiceError::Internal(format!("demo session: {what}"))
}

/// The demo datasets in manifest order.
///
/// # Errors
/// The embedded manifest is missing or malformed (a build defect).
pub fn datasets() -> ServiceResult<Vec<DemoDataset>> {
    let manifest = DemoFiles::get("manifest.json").ok_or_else(|| missing("no manifest.json"))?;
    let manifest: Manifest = serde_json::from_slice(&manifest.data)
        .map_err(|e| missing(&format!("manifest.json: {e}")))?;
    manifest
        .datasets
        .into_iter()
        .map(|entry| {
            let file = DemoFiles::get(&entry.file)
                .ok_or_else(|| missing(&format!("no file {}", entry.file)))?;
            let format = Format::from_file_name(&entry.file)
                .ok_or_else(|| missing(&format!("unknown format of {}", entry.file)))?;
            Ok(DemoDataset {
                name: entry.name,
                file: entry.file,
                format,
                bytes: file.data.into_owned(),
                meta: entry.meta,
            })
        })
        .collect()
}
