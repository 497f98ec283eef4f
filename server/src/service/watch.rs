//! The watched folder: files that appear in a directory are taken into one
//! session while it is open in browsers.
//!
//! A file is read only once its size and modification time have stayed the
//! same for [`WatchSettings::settle`] (so a file still being copied or
//! written is not read), and files whose name starts with `.` or ends in
//! `.part`, `.tmp` or `~` are ignored (so a writer may also write under such
//! a name and rename into place). Names containing `.shots.` (e.g.
//! `run7.shots.csv`) are shot records, estimated with the default options;
//! every other file is a correlation map in the format its name or first
//! bytes say.
//!
//! Invariant: a file (name, size, SHA-256) is taken in at most once per
//! session, across restarts: the record of it is written in the same
//! transaction as its dataset, or as the log entry that reports it refused.
//! A refused file stores nothing but that log entry, which names the file
//! and its bad lines (the log is where every open page shows it).
//!
//! Polls the directory rather than subscribing to file-system events: it
//! works the same on every platform and on network shares, and the
//! stability rule needs a timer anyway.

use std::collections::HashMap;
use std::path::{Path, PathBuf};
use std::time::{Duration, Instant, SystemTime};

use sha2::{Digest, Sha256};

use super::shots::ShotOptions;
use super::{Access, PROGRAM_VERSION, Service, ServiceError, now_utc};
use crate::ingest::shots::ShotFormat;
use crate::ingest::{Format, IngestOptions};
use crate::store::{IngestTag, NewLogEntry};

/// Author of the log entries the watched folder writes.
pub const WATCH_AUTHOR: &str = "watched folder";

/// How the folder is watched.
#[derive(Debug, Clone)]
pub struct WatchSettings {
    /// Time between two looks at the directory.
    pub poll: Duration,
    /// How long a file's size and time must stay unchanged before it is read.
    pub settle: Duration,
}

impl Default for WatchSettings {
    fn default() -> Self {
        Self {
            poll: Duration::from_millis(250),
            settle: Duration::from_millis(1000),
        }
    }
}

/// What happened to one file.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum WatchOutcome {
    /// Stored as this dataset.
    Stored(i64),
    /// Taken in before (this run or an earlier one).
    Known,
    /// Refused; this log entry reports it.
    Refused(i64),
}

fn ignored(name: &str) -> bool {
    name.starts_with('.')
        || name.ends_with(".part")
        || name.ends_with(".tmp")
        || name.ends_with('~')
}

impl Service {
    /// Watches `dir` for the session of `access` until the task is dropped.
    /// Problems with the directory itself are reported on standard error and
    /// retried.
    pub async fn watch_folder(&self, access: Access, dir: PathBuf, settings: WatchSettings) {
        // name → (size, modified, unchanged since)
        let mut seen: HashMap<String, (u64, Option<SystemTime>, Instant)> = HashMap::new();
        let mut done: HashMap<String, (u64, Option<SystemTime>)> = HashMap::new();
        let mut complained = false;
        loop {
            match list(&dir) {
                Ok(files) => {
                    complained = false;
                    let now = Instant::now();
                    seen.retain(|name, _| files.iter().any(|(n, _, _)| n == name));
                    for (name, size, modified) in files {
                        if done.get(&name) == Some(&(size, modified)) {
                            continue;
                        }
                        let entry = seen.entry(name.clone()).or_insert((size, modified, now));
                        if (entry.0, entry.1) != (size, modified) {
                            *entry = (size, modified, now);
                            continue;
                        }
                        if now.duration_since(entry.2) < settings.settle {
                            continue;
                        }
                        match self.take_in(&access, &dir.join(&name), &name, size).await {
                            Ok(Some(outcome)) => {
                                if let WatchOutcome::Refused(_) = outcome {
                                    eprintln!(
                                        "spreadscope: watched folder: {name} refused (see the session log)"
                                    );
                                }
                                done.insert(name.clone(), (size, modified));
                            }
                            // Changed while being read: wait for it to settle again.
                            Ok(None) => {
                                seen.remove(&name);
                            }
                            Err(e) => {
                                eprintln!(
                                    "spreadscope: watched folder: {name}: {e}; will try again"
                                );
                            }
                        }
                    }
                }
                Err(e) => {
                    if !complained {
                        eprintln!("spreadscope: watched folder {}: {e}", dir.display());
                        complained = true;
                    }
                }
            }
            tokio::time::sleep(settings.poll).await;
        }
    }

    /// Takes in one settled file. `Ok(None)` when its size changed while
    /// being read.
    ///
    /// # Errors
    /// The file cannot be read, the database fails or the server is busy
    /// (the caller tries again later).
    pub async fn take_in(
        &self,
        access: &Access,
        path: &Path,
        name: &str,
        size: u64,
    ) -> Result<Option<WatchOutcome>, ServiceError> {
        let owned = path.to_path_buf();
        let bytes = tokio::task::spawn_blocking(move || std::fs::read(owned))
            .await
            .map_err(|e| ServiceError::Internal(e.to_string()))?
            .map_err(|e| ServiceError::Internal(format!("{}: {e}", path.display())))?;
        if bytes.len() as u64 != size {
            return Ok(None);
        }
        let sha256: String = Sha256::digest(&bytes)
            .iter()
            .map(|b| format!("{b:02x}"))
            .collect();
        let tag = IngestTag::Watched {
            name: name.to_string(),
            size,
            sha256,
        };
        let session_id = access.session.id;
        let probe = tag.clone();
        if self
            .db(move |s| s.tag_recorded(session_id, &probe))
            .await?
            .is_some()
        {
            return Ok(Some(WatchOutcome::Known));
        }
        let outcome = if name.contains(".shots.") {
            match ShotFormat::from_file_name(name).or_else(|| ShotFormat::sniff(&bytes)) {
                Some(format) => {
                    let work = self.add_shots(access, name, format, bytes, ShotOptions::default());
                    self.tagged(access, tag.clone(), work).await
                }
                None => Err(ServiceError::BadRequest(
                    "not a shot-record format spreadscope reads (CSV, NPZ, HDF5)".into(),
                )),
            }
        } else {
            match Format::from_file_name(name).or_else(|| crate::ingest::sniff(&bytes)) {
                Some(format) => {
                    let work =
                        self.add_dataset(access, name, format, bytes, IngestOptions::default());
                    self.tagged(access, tag.clone(), work).await
                }
                None => Err(ServiceError::BadRequest(
                    "not a map format spreadscope reads (CSV, NPY, NPZ, JSON, HDF5)".into(),
                )),
            }
        };
        let reason = match outcome {
            Ok(uploaded) if uploaded.already_stored => return Ok(Some(WatchOutcome::Known)),
            Ok(uploaded) => return Ok(Some(WatchOutcome::Stored(uploaded.summary.id))),
            Err(ServiceError::Invalid(e)) => e
                .problems
                .iter()
                .take(20)
                .map(|p| match p.line {
                    Some(line) => format!("line {line}: {}", p.reason),
                    None => p.reason.clone(),
                })
                .collect::<Vec<_>>()
                .join("; "),
            Err(ServiceError::BadRequest(reason)) => reason,
            Err(e) => return Err(e),
        };
        let comment = format!(
            "File “{name}” from the watched folder was refused; nothing from it was stored. {reason}"
        );
        let now = now_utc();
        let row = self
            .db(move |s| {
                s.reject_watched(
                    session_id,
                    &tag,
                    &NewLogEntry {
                        session_id,
                        created_at: &now,
                        author: WATCH_AUTHOR,
                        comment: &comment,
                        dataset_id: None,
                        retracts: None,
                        fit_json: None,
                        program_version: PROGRAM_VERSION,
                    },
                )
            })
            .await?;
        match row {
            Some(row) => {
                self.publish(session_id, "log-added", row.id);
                Ok(Some(WatchOutcome::Refused(row.id)))
            }
            None => Ok(Some(WatchOutcome::Known)),
        }
    }
}

/// Regular files of `dir` that may be taken in: (name, size, modified).
fn list(dir: &Path) -> std::io::Result<Vec<(String, u64, Option<SystemTime>)>> {
    let mut out = Vec::new();
    for entry in std::fs::read_dir(dir)? {
        let entry = entry?;
        let Ok(name) = entry.file_name().into_string() else {
            continue;
        };
        if ignored(&name) {
            continue;
        }
        let meta = entry.metadata()?;
        if meta.is_file() {
            out.push((name, meta.len(), meta.modified().ok()));
        }
    }
    out.sort();
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn partial_and_hidden_names_are_ignored() {
        assert!(ignored(".run1.csv"));
        assert!(ignored("run1.csv.part"));
        assert!(ignored("run1.csv.tmp"));
        assert!(!ignored("run1.csv"));
        assert!(!ignored("run1.shots.h5"));
    }
}
