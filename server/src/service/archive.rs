//! Session archives: a whole session (datasets as stored, kept shot files,
//! metadata, the pinned log with its retractions and provenance hashes) as
//! one ZIP file, and its import into a new session with new links.
//!
//! Layout: `manifest.json` (what the session holds, every stored column
//! verbatim, and the SHA-256 of every other member) and one member per
//! stored blob (`datasets/{id}/values`, `errors`, `mask`, `shots`), stored
//! uncompressed so the bytes are the database's own.
//!
//! Invariant: an archive is checked completely before anything is written
//! (members against the manifest's SHA-256, each map against its content
//! hash, each log entry's links and provenance), then imported in one
//! transaction: a truncated or altered archive is refused with a reason and
//! leaves nothing behind. The checks detect damage and careless edits, not
//! a forger who rewrites the manifest consistently.

use std::collections::{BTreeMap, HashMap, HashSet};
use std::io::{Cursor, Read, Write};

use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};

use super::{Access, PROGRAM_VERSION, Service, ServiceError, ServiceResult, SessionTokens};
use crate::store::{DatasetDump, LogRow, SessionDump, ShotDump};

const MANIFEST: &str = "manifest.json";
const KIND: &str = "spreadscope session archive";
const VERSION: u32 = 1;

#[derive(Debug, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
struct Manifest {
    kind: String,
    version: u32,
    program_version: String,
    exported_at: String,
    session: SessionPart,
    datasets: Vec<DatasetPart>,
    log: Vec<LogPart>,
}

#[derive(Debug, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
struct SessionPart {
    name: String,
    created_at: String,
}

#[derive(Debug, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
struct DatasetPart {
    id: i64,
    name: String,
    format: String,
    content_hash: String,
    created_at: String,
    meta_json: String,
    notes_json: String,
    offsets_json: String,
    times_json: String,
    /// Content hash of the map as decoded from the stored columns.
    map_check: String,
    /// Member name → SHA-256 (hex).
    members: BTreeMap<String, String>,
    shots: Option<ShotPart>,
}

#[derive(Debug, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
struct ShotPart {
    name: String,
    format: String,
    estimator: String,
}

#[derive(Debug, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
struct LogPart {
    id: i64,
    created_at: String,
    author: String,
    comment: String,
    dataset_id: Option<i64>,
    dataset_name: Option<String>,
    dataset_hash: Option<String>,
    retracts: Option<i64>,
    fit_json: Option<String>,
    program_version: String,
}

/// What an import made.
#[derive(Debug, Clone)]
pub struct Imported {
    pub tokens: SessionTokens,
    pub datasets: usize,
    pub log_entries: usize,
}

fn sha256_hex(bytes: &[u8]) -> String {
    Sha256::digest(bytes)
        .iter()
        .map(|b| format!("{b:02x}"))
        .collect()
}

fn refused(reason: impl std::fmt::Display) -> ServiceError {
    ServiceError::BadRequest(format!("archive refused, nothing imported: {reason}"))
}

/// Builds the archive of a dumped session.
fn write_archive(dump: &SessionDump) -> ServiceResult<Vec<u8>> {
    let internal = |e: &dyn std::fmt::Display| ServiceError::Internal(format!("archive: {e}"));
    let options = zip::write::SimpleFileOptions::default()
        .compression_method(zip::CompressionMethod::Stored)
        .large_file(true);
    let mut zip = zip::ZipWriter::new(Cursor::new(Vec::new()));
    let mut datasets = Vec::new();
    for d in &dump.datasets {
        let map = d.map().map_err(|e| internal(&e))?;
        let mut blobs: Vec<(&str, &[u8])> = vec![("values", &d.values), ("mask", &d.mask)];
        if let Some(e) = &d.errors {
            blobs.push(("errors", e));
        }
        if let Some(s) = &d.shots {
            blobs.push(("shots", &s.bytes));
        }
        let mut members = BTreeMap::new();
        for (what, bytes) in blobs {
            let name = format!("datasets/{}/{what}", d.id);
            zip.start_file(name.as_str(), options)
                .map_err(|e| internal(&e))?;
            zip.write_all(bytes).map_err(|e| internal(&e))?;
            members.insert(name, sha256_hex(bytes));
        }
        datasets.push(DatasetPart {
            id: d.id,
            name: d.name.clone(),
            format: d.format.clone(),
            content_hash: d.content_hash.clone(),
            created_at: d.created_at.clone(),
            meta_json: d.meta_json.clone(),
            notes_json: d.notes_json.clone(),
            offsets_json: d.offsets_json.clone(),
            times_json: d.times_json.clone(),
            map_check: super::content_hash(&map),
            members,
            shots: d.shots.as_ref().map(|s| ShotPart {
                name: s.name.clone(),
                format: s.format.clone(),
                estimator: s.estimator.clone(),
            }),
        });
    }
    let manifest = Manifest {
        kind: KIND.into(),
        version: VERSION,
        program_version: PROGRAM_VERSION.into(),
        exported_at: super::now_utc(),
        session: SessionPart {
            name: dump.name.clone(),
            created_at: dump.created_at.clone(),
        },
        datasets,
        log: dump
            .log
            .iter()
            .map(|e| LogPart {
                id: e.id,
                created_at: e.created_at.clone(),
                author: e.author.clone(),
                comment: e.comment.clone(),
                dataset_id: e.dataset_id,
                dataset_name: e.dataset_name.clone(),
                dataset_hash: e.dataset_hash.clone(),
                retracts: e.retracts,
                fit_json: e.fit_json.clone(),
                program_version: e.program_version.clone(),
            })
            .collect(),
    };
    let text = serde_json::to_vec_pretty(&manifest).map_err(|e| internal(&e))?;
    zip.start_file(MANIFEST, options)
        .map_err(|e| internal(&e))?;
    zip.write_all(&text).map_err(|e| internal(&e))?;
    Ok(zip.finish().map_err(|e| internal(&e))?.into_inner())
}

/// Reads and checks an archive completely; returns the session to import.
///
/// # Errors
/// BadRequest with the reason for anything truncated, altered or
/// inconsistent.
fn read_archive(bytes: &[u8]) -> ServiceResult<SessionDump> {
    let mut zip = zip::ZipArchive::new(Cursor::new(bytes)).map_err(|e| {
        refused(format!(
            "not a complete spreadscope archive (truncated, or not a ZIP file): {e}"
        ))
    })?;
    let limit = bytes.len() as u64;
    let mut member = |name: &str| -> ServiceResult<Vec<u8>> {
        let mut file = zip
            .by_name(name)
            .map_err(|_| refused(format!("member `{name}` is missing")))?;
        let mut out = Vec::new();
        (&mut file)
            .take(limit)
            .read_to_end(&mut out)
            .map_err(|e| refused(format!("member `{name}` is damaged: {e}")))?;
        Ok(out)
    };
    let manifest: Manifest = serde_json::from_slice(&member(MANIFEST)?)
        .map_err(|e| refused(format!("`{MANIFEST}` does not parse: {e}")))?;
    if manifest.kind != KIND || manifest.version != VERSION {
        return Err(refused(format!(
            "`{MANIFEST}`: kind `{}` version {} is not a {KIND} of version {VERSION}",
            manifest.kind, manifest.version
        )));
    }
    let mut datasets = Vec::new();
    let mut hashes = HashMap::new();
    for part in manifest.datasets {
        let what = format!("dataset {} (“{}”)", part.id, part.name);
        let mut blobs = HashMap::new();
        for (name, expected) in &part.members {
            let bytes = member(name)?;
            if &sha256_hex(&bytes) != expected {
                return Err(refused(format!(
                    "member `{name}` was altered or damaged (its SHA-256 differs from the manifest's)"
                )));
            }
            let kind = name.rsplit('/').next().unwrap_or_default().to_string();
            blobs.insert(kind, bytes);
        }
        let mut take = |kind: &str| blobs.remove(kind);
        let values = take("values").ok_or_else(|| refused(format!("{what}: no values")))?;
        let mask = take("mask").ok_or_else(|| refused(format!("{what}: no mask")))?;
        let errors = take("errors");
        let shots = match (part.shots, take("shots")) {
            (Some(s), Some(bytes)) => Some(ShotDump {
                name: s.name,
                format: s.format,
                bytes,
                estimator: s.estimator,
            }),
            (None, None) => None,
            _ => {
                return Err(refused(format!(
                    "{what}: shot file and its description disagree"
                )));
            }
        };
        let dump = DatasetDump {
            id: part.id,
            name: part.name,
            format: part.format,
            content_hash: part.content_hash,
            created_at: part.created_at,
            meta_json: part.meta_json,
            notes_json: part.notes_json,
            offsets_json: part.offsets_json,
            times_json: part.times_json,
            values,
            errors,
            mask,
            shots,
        };
        let map = dump
            .map()
            .map_err(|e| refused(format!("{what}: the map does not decode: {e}")))?;
        if super::content_hash(&map) != part.map_check {
            return Err(refused(format!(
                "{what}: the map differs from the one exported (content hash)"
            )));
        }
        serde_json::from_str::<crate::dataset::DatasetMeta>(&dump.meta_json)
            .map_err(|e| refused(format!("{what}: metadata: {e}")))?;
        serde_json::from_str::<Vec<String>>(&dump.notes_json)
            .map_err(|e| refused(format!("{what}: notes: {e}")))?;
        if hashes.insert(dump.id, dump.content_hash.clone()).is_some() {
            return Err(refused(format!("{what}: id given twice")));
        }
        datasets.push(dump);
    }
    let mut earlier = HashSet::new();
    let mut log = Vec::new();
    for e in manifest.log {
        if let Some(d) = e.dataset_id {
            match hashes.get(&d) {
                None => {
                    return Err(refused(format!(
                        "log entry {}: its dataset {d} is not in the archive",
                        e.id
                    )));
                }
                Some(h) if e.dataset_hash.as_deref() != Some(h.as_str()) => {
                    return Err(refused(format!(
                        "log entry {}: its provenance hash differs from dataset {d}'s",
                        e.id
                    )));
                }
                Some(_) => {}
            }
        }
        if let Some(r) = e.retracts {
            if !earlier.contains(&r) {
                return Err(refused(format!(
                    "log entry {}: the entry it retracts ({r}) is not earlier in the archive",
                    e.id
                )));
            }
        }
        if let Some(fit) = &e.fit_json {
            serde_json::from_str::<serde_json::Value>(fit)
                .map_err(|err| refused(format!("log entry {}: fit report: {err}", e.id)))?;
        }
        earlier.insert(e.id);
        log.push(LogRow {
            id: e.id,
            created_at: e.created_at,
            author: e.author,
            comment: e.comment,
            dataset_id: e.dataset_id,
            dataset_name: e.dataset_name,
            dataset_hash: e.dataset_hash,
            retracts: e.retracts,
            fit_json: e.fit_json,
            program_version: e.program_version,
        });
    }
    Ok(SessionDump {
        name: manifest.session.name,
        created_at: manifest.session.created_at,
        datasets,
        log,
    })
}

impl Service {
    /// The session as one archive file (a view link may export).
    ///
    /// # Errors
    /// Database failure.
    pub async fn export_archive(&self, access: &Access) -> ServiceResult<Vec<u8>> {
        let session_id = access.session.id;
        let dump = self
            .db(move |s| s.dump_session(session_id))
            .await?
            .ok_or(ServiceError::NotFound)?;
        self.heavy(move || write_archive(&dump)).await
    }

    /// Imports an archive into a new session with new links.
    ///
    /// # Errors
    /// BadRequest with the reason for a truncated, altered or inconsistent
    /// archive (nothing is written then); StorageFull; Internal.
    pub async fn import_archive(&self, bytes: Vec<u8>) -> ServiceResult<Imported> {
        let dump = self.heavy(move || read_archive(&bytes)).await?;
        let tokens = SessionTokens {
            edit_token: super::new_token()?,
            view_token: super::new_token()?,
        };
        let (datasets, log_entries) = (dump.datasets.len(), dump.log.len());
        let (e, v) = (tokens.edit_token.clone(), tokens.view_token.clone());
        self.db(move |s| s.import_session(&dump, &e, &v)).await?;
        Ok(Imported {
            tokens,
            datasets,
            log_entries,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn garbage_is_refused_with_a_reason() {
        let err = read_archive(b"not a zip at all").unwrap_err();
        assert!(err.to_string().contains("not a complete"), "{err}");
    }
}
