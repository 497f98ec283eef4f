//! Store side of data arriving from the lab: datasets written together with
//! the idempotency key or the watched-folder file that brought them (one
//! transaction, so a kill leaves both or neither), whole-session dumps for
//! archives and their import in one transaction, the online backup, and a
//! page limit that simulates a full disk.
//!
//! Invariant: an imported session is written in one transaction; log
//! entries are copied with their original text, times, provenance and
//! retraction links (ids are renumbered, links follow them).

use std::path::Path;

use rusqlite::{OptionalExtension, params};

use super::{
    LogRow, NewDataset, RawDataset, Store, StoreError, StoreResult, decode_dataset, full_or,
    insert_dataset_in,
};
use spreadscope_physics::CorrelationMap;

/// What brought a dataset in, recorded beside it in the same transaction.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum IngestTag {
    /// A client-chosen idempotency key of an upload.
    Key(String),
    /// A file of the watched folder, by name, size and SHA-256.
    Watched {
        name: String,
        size: u64,
        sha256: String,
    },
}

/// Outcome of a tagged insert.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Tagged {
    /// Stored now, with this id.
    New(i64),
    /// The tag was already recorded: nothing was written; this is the
    /// dataset it brought in then (`None` for a refused watched file).
    Existing(Option<i64>),
}

/// A kept shot file in a dump.
#[derive(Debug, Clone, PartialEq)]
pub struct ShotDump {
    pub name: String,
    pub format: String,
    pub bytes: Vec<u8>,
    pub estimator: String,
}

/// A dataset row exactly as stored (encoded columns kept verbatim).
#[derive(Debug, Clone, PartialEq)]
pub struct DatasetDump {
    pub id: i64,
    pub name: String,
    pub format: String,
    pub content_hash: String,
    pub created_at: String,
    pub meta_json: String,
    pub notes_json: String,
    pub offsets_json: String,
    pub times_json: String,
    pub values: Vec<u8>,
    pub errors: Option<Vec<u8>>,
    pub mask: Vec<u8>,
    pub shots: Option<ShotDump>,
}

impl DatasetDump {
    /// Decodes the map the way the store reads it back.
    ///
    /// # Errors
    /// Columns that do not form a valid map.
    pub fn map(&self) -> StoreResult<CorrelationMap> {
        let raw = RawDataset {
            id: self.id,
            session_id: 0,
            name: self.name.clone(),
            format: self.format.clone(),
            content_hash: self.content_hash.clone(),
            created_at: self.created_at.clone(),
            meta: self.meta_json.clone(),
            notes: self.notes_json.clone(),
            offsets: self.offsets_json.clone(),
            times: self.times_json.clone(),
            values: self.values.clone(),
            errors: self.errors.clone(),
            mask: self.mask.clone(),
        };
        decode_dataset(raw).map(|(_, map)| map)
    }
}

/// A whole session as stored.
#[derive(Debug, Clone, PartialEq)]
pub struct SessionDump {
    pub name: String,
    pub created_at: String,
    pub datasets: Vec<DatasetDump>,
    pub log: Vec<LogRow>,
}

impl Store {
    /// Writes a dataset and records its tag, in one transaction. When the
    /// tag is already recorded, nothing is written.
    ///
    /// # Errors
    /// Database failure (nothing written), [`StoreError::Full`].
    pub fn insert_dataset_tagged(
        &self,
        d: &NewDataset<'_>,
        tag: &IngestTag,
    ) -> StoreResult<Tagged> {
        let mut conn = self.lock();
        let tx = conn.transaction()?;
        if let Some(existing) = tag_lookup(&tx, d.session_id, tag)? {
            return Ok(Tagged::Existing(existing));
        }
        let id = insert_dataset_in(&tx, d)?;
        match tag {
            IngestTag::Key(key) => tx.execute(
                "INSERT INTO upload_keys (session_id, key, dataset_id, created_at)
                 VALUES (?1, ?2, ?3, ?4)",
                params![d.session_id, key, id, d.created_at],
            ),
            IngestTag::Watched { name, size, sha256 } => tx.execute(
                "INSERT INTO watched_files (session_id, name, size, sha256, dataset_id, seen_at)
                 VALUES (?1, ?2, ?3, ?4, ?5, ?6)",
                params![
                    d.session_id,
                    name,
                    sql_size(*size),
                    sha256,
                    id,
                    d.created_at
                ],
            ),
        }
        .map_err(full_or)?;
        tx.commit().map_err(full_or)?;
        Ok(Tagged::New(id))
    }

    /// The dataset a tag brought in, if the tag is recorded (`Some(None)`
    /// for a refused watched file).
    ///
    /// # Errors
    /// Database failure.
    pub fn tag_recorded(
        &self,
        session_id: i64,
        tag: &IngestTag,
    ) -> StoreResult<Option<Option<i64>>> {
        let conn = self.read();
        tag_lookup(&conn, session_id, tag)
    }

    /// Records a refused watched file together with the log entry that
    /// reports it, in one transaction. Returns the entry.
    ///
    /// # Errors
    /// Database failure (nothing written).
    pub fn reject_watched(
        &self,
        session_id: i64,
        tag: &IngestTag,
        entry: &super::NewLogEntry<'_>,
    ) -> StoreResult<Option<LogRow>> {
        let IngestTag::Watched { name, size, sha256 } = tag else {
            return Err(StoreError::Corrupt("not a watched file".into()));
        };
        let mut conn = self.lock();
        let tx = conn.transaction()?;
        if tag_lookup(&tx, session_id, tag)?.is_some() {
            return Ok(None);
        }
        tx.execute(
            "INSERT INTO log_entries (session_id, created_at, author, comment, program_version)
             VALUES (?1, ?2, ?3, ?4, ?5)",
            params![
                session_id,
                entry.created_at,
                entry.author,
                entry.comment,
                entry.program_version
            ],
        )
        .map_err(full_or)?;
        let log_id = tx.last_insert_rowid();
        tx.execute(
            "INSERT INTO watched_files (session_id, name, size, sha256, log_id, seen_at)
             VALUES (?1, ?2, ?3, ?4, ?5, ?6)",
            params![
                session_id,
                name,
                sql_size(*size),
                sha256,
                log_id,
                entry.created_at
            ],
        )
        .map_err(full_or)?;
        tx.commit().map_err(full_or)?;
        Ok(Some(LogRow {
            id: log_id,
            created_at: entry.created_at.into(),
            author: entry.author.into(),
            comment: entry.comment.into(),
            dataset_id: None,
            dataset_name: None,
            dataset_hash: None,
            retracts: None,
            fit_json: None,
            program_version: entry.program_version.into(),
        }))
    }

    /// A whole session read in one transaction, so the dump is consistent.
    ///
    /// # Errors
    /// Database failure.
    pub fn dump_session(&self, session_id: i64) -> StoreResult<Option<SessionDump>> {
        let mut conn = self.read();
        let tx = conn.transaction()?;
        let Some((name, created_at)) = tx
            .query_row(
                "SELECT name, created_at FROM sessions WHERE id = ?1",
                params![session_id],
                |r| Ok((r.get::<_, String>(0)?, r.get::<_, String>(1)?)),
            )
            .optional()?
        else {
            return Ok(None);
        };
        let mut datasets = Vec::new();
        {
            let mut stmt = tx.prepare(
                "SELECT d.id, d.name, d.format, d.content_hash, d.created_at, d.meta_json,
                        d.notes_json, d.offsets_json, d.times_json, d.values_blob,
                        d.errors_blob, d.mask_blob, s.name, s.format, s.bytes, s.estimator
                 FROM datasets d LEFT JOIN shot_files s ON s.dataset_id = d.id
                 WHERE d.session_id = ?1 ORDER BY d.id",
            )?;
            let rows = stmt.query_map(params![session_id], |r| {
                let shot_name: Option<String> = r.get(12)?;
                let shots = match shot_name {
                    Some(name) => Some(ShotDump {
                        name,
                        format: r.get(13)?,
                        bytes: r.get(14)?,
                        estimator: r.get(15)?,
                    }),
                    None => None,
                };
                Ok(DatasetDump {
                    id: r.get(0)?,
                    name: r.get(1)?,
                    format: r.get(2)?,
                    content_hash: r.get(3)?,
                    created_at: r.get(4)?,
                    meta_json: r.get(5)?,
                    notes_json: r.get(6)?,
                    offsets_json: r.get(7)?,
                    times_json: r.get(8)?,
                    values: r.get(9)?,
                    errors: r.get(10)?,
                    mask: r.get(11)?,
                    shots,
                })
            })?;
            for row in rows {
                datasets.push(row?);
            }
        }
        tx.commit()?;
        drop(conn);
        let log = self.log(session_id)?;
        Ok(Some(SessionDump {
            name,
            created_at,
            datasets,
            log,
        }))
    }

    /// Writes a dumped session as a new session with the given tokens, in
    /// one transaction; returns the new session's id.
    ///
    /// # Errors
    /// Database failure or a dump whose links point nowhere (nothing is
    /// written then).
    pub fn import_session(
        &self,
        dump: &SessionDump,
        edit_token: &str,
        view_token: &str,
    ) -> StoreResult<i64> {
        let mut conn = self.lock();
        let tx = conn.transaction()?;
        tx.execute(
            "INSERT INTO sessions (name, edit_token, view_token, created_at) VALUES (?1, ?2, ?3, ?4)",
            params![dump.name, edit_token, view_token, dump.created_at],
        )
        .map_err(full_or)?;
        let session_id = tx.last_insert_rowid();
        let mut dataset_ids = std::collections::HashMap::new();
        for d in &dump.datasets {
            tx.execute(
                "INSERT INTO datasets (session_id, name, format, content_hash, created_at,
                     meta_json, notes_json, offsets_json, times_json, values_blob, errors_blob,
                     mask_blob)
                 VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12)",
                params![
                    session_id,
                    d.name,
                    d.format,
                    d.content_hash,
                    d.created_at,
                    d.meta_json,
                    d.notes_json,
                    d.offsets_json,
                    d.times_json,
                    d.values,
                    d.errors,
                    d.mask
                ],
            )
            .map_err(full_or)?;
            let id = tx.last_insert_rowid();
            dataset_ids.insert(d.id, id);
            if let Some(s) = &d.shots {
                tx.execute(
                    "INSERT INTO shot_files (session_id, dataset_id, name, format, bytes, estimator)
                     VALUES (?1, ?2, ?3, ?4, ?5, ?6)",
                    params![session_id, id, s.name, s.format, s.bytes, s.estimator],
                )
                .map_err(full_or)?;
            }
        }
        let mut entry_ids = std::collections::HashMap::new();
        for e in &dump.log {
            let dataset_id = match e.dataset_id {
                Some(old) => Some(*dataset_ids.get(&old).ok_or_else(|| {
                    StoreError::Corrupt(format!(
                        "log entry {}: dataset {old} is not in the archive",
                        e.id
                    ))
                })?),
                None => None,
            };
            let retracts = match e.retracts {
                Some(old) => Some(*entry_ids.get(&old).ok_or_else(|| {
                    StoreError::Corrupt(format!(
                        "log entry {}: retracted entry {old} is not earlier in the archive",
                        e.id
                    ))
                })?),
                None => None,
            };
            tx.execute(
                "INSERT INTO log_entries (session_id, created_at, author, comment, dataset_id,
                     dataset_name, dataset_hash, retracts, fit_json, program_version)
                 VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10)",
                params![
                    session_id,
                    e.created_at,
                    e.author,
                    e.comment,
                    dataset_id,
                    e.dataset_name,
                    e.dataset_hash,
                    retracts,
                    e.fit_json,
                    e.program_version
                ],
            )
            .map_err(full_or)?;
            entry_ids.insert(e.id, tx.last_insert_rowid());
        }
        tx.commit().map_err(full_or)?;
        Ok(session_id)
    }

    /// Limits the database file to `pages` pages, so that writes beyond it
    /// fail as on a full disk. For fault tests and for operators who want a
    /// hard cap; returns the limit in force.
    ///
    /// # Errors
    /// Database failure.
    pub fn limit_pages(&self, pages: u64) -> StoreResult<u64> {
        let conn = self.lock();
        let limit: i64 = conn.query_row(&format!("PRAGMA max_page_count = {pages}"), [], |r| {
            r.get(0)
        })?;
        Ok(u64::try_from(limit).unwrap_or(0))
    }

    /// Pages the database uses now.
    ///
    /// # Errors
    /// Database failure.
    pub fn page_count(&self) -> StoreResult<u64> {
        let n: i64 = self
            .lock()
            .pragma_query_value(None, "page_count", |r| r.get(0))?;
        Ok(u64::try_from(n).unwrap_or(0))
    }
}

/// Copies the database of data directory `dir` to `out` with SQLite's online
/// backup, while a server may be writing to it, then checks the copy.
///
/// # Errors
/// No database in `dir`, `out` exists already, a copy or check failure.
pub fn backup_dir(dir: &Path, out: &Path) -> StoreResult<()> {
    let path = dir.join("spreadscope.sqlite3");
    if !path.is_file() {
        return Err(StoreError::Corrupt(format!(
            "{}: no spreadscope database here",
            path.display()
        )));
    }
    let open_error = |p: &Path| {
        let p = p.display().to_string();
        move |source| StoreError::Open { path: p, source }
    };
    let source = rusqlite::Connection::open_with_flags(
        &path,
        rusqlite::OpenFlags::SQLITE_OPEN_READ_ONLY | rusqlite::OpenFlags::SQLITE_OPEN_NO_MUTEX,
    )
    .map_err(open_error(&path))?;
    source.busy_timeout(std::time::Duration::from_secs(10))?;
    let mut target = rusqlite::Connection::open_with_flags(
        out,
        rusqlite::OpenFlags::SQLITE_OPEN_READ_WRITE
            | rusqlite::OpenFlags::SQLITE_OPEN_CREATE
            | rusqlite::OpenFlags::SQLITE_OPEN_NO_MUTEX,
    )
    .map_err(open_error(out))?;
    {
        let backup = rusqlite::backup::Backup::new(&source, &mut target)?;
        // Small steps with pauses let the server's writer in between; a
        // write during the copy restarts it, so the copy is one snapshot.
        backup.run_to_completion(256, std::time::Duration::from_millis(5), None)?;
    }
    // A single file: no write-ahead log beside the copy.
    target.pragma_update(None, "journal_mode", "DELETE")?;
    let answer: String = target.query_row("PRAGMA integrity_check", [], |r| r.get(0))?;
    if answer != "ok" {
        return Err(StoreError::Corrupt(format!(
            "the copy fails its check: {answer}"
        )));
    }
    Ok(())
}

fn tag_lookup(
    conn: &rusqlite::Connection,
    session_id: i64,
    tag: &IngestTag,
) -> StoreResult<Option<Option<i64>>> {
    Ok(match tag {
        IngestTag::Key(key) => conn
            .query_row(
                "SELECT dataset_id FROM upload_keys WHERE session_id = ?1 AND key = ?2",
                params![session_id, key],
                |r| r.get::<_, i64>(0),
            )
            .optional()?
            .map(Some),
        IngestTag::Watched { name, size, sha256 } => conn
            .query_row(
                "SELECT dataset_id FROM watched_files
                 WHERE session_id = ?1 AND name = ?2 AND size = ?3 AND sha256 = ?4",
                params![session_id, name, sql_size(*size), sha256],
                |r| r.get::<_, Option<i64>>(0),
            )
            .optional()?,
    })
}

/// File sizes as SQLite integers (no file reaches 2^63 bytes).
fn sql_size(size: u64) -> i64 {
    i64::try_from(size).unwrap_or(i64::MAX)
}
