//! Store: the only code that knows the database (SQLite through rusqlite,
//! bundled). Owns the schema, its numbered migrations and the encoding of
//! maps as rows. Knows no physics beyond `CorrelationMap`'s accessors, and no
//! HTTP.
//!
//! Invariant: every write is one transaction; the database runs in
//! write-ahead-log mode with `synchronous = FULL`, so an acknowledged write
//! survives a kill of the process at any moment.

use std::path::Path;
use std::sync::Mutex;

use ndarray::Array2;
use rusqlite::{Connection, OptionalExtension, params};
use spreadscope_physics::CorrelationMap;

use crate::dataset::DatasetMeta;

mod lab;
pub use lab::{DatasetDump, IngestTag, SessionDump, ShotDump, Tagged, backup_dir};

/// Numbered migrations, applied in order; `PRAGMA user_version` records how
/// many have run. Never edit a released migration: add a new one.
const MIGRATIONS: &[&str] = &[
    include_str!("migrations/0001_init.sql"),
    include_str!("migrations/0002_log.sql"),
    include_str!("migrations/0003_shots.sql"),
    include_str!("migrations/0004_lab.sql"),
];

#[derive(Debug, thiserror::Error)]
pub enum StoreError {
    #[error("database error: {0}")]
    Sqlite(#[from] rusqlite::Error),
    /// The disk, or the database's page limit, is full; the write was
    /// rolled back and everything stored before is intact.
    #[error("the disk holding the database is full; nothing of this request was stored")]
    Full,
    #[error("stored data are corrupt: {0}")]
    Corrupt(String),
    #[error("database at {path}: {source}")]
    Open {
        path: String,
        source: rusqlite::Error,
    },
}

pub type StoreResult<T> = Result<T, StoreError>;

/// A session row.
#[derive(Debug, Clone, PartialEq)]
pub struct SessionRow {
    pub id: i64,
    pub name: String,
    pub edit_token: String,
    pub view_token: String,
    pub created_at: String,
}

/// A dataset ready to be written.
#[derive(Debug, Clone)]
pub struct NewDataset<'a> {
    pub session_id: i64,
    pub name: &'a str,
    pub format: &'a str,
    pub content_hash: &'a str,
    pub created_at: &'a str,
    pub meta: &'a DatasetMeta,
    pub notes: &'a [String],
    pub map: &'a CorrelationMap,
    /// The shot file the map was estimated from, kept beside it:
    /// (bytes, estimator options as JSON).
    pub shots: Option<(&'a [u8], &'a str)>,
}

/// A stored dataset's descriptive columns (without the map).
#[derive(Debug, Clone, PartialEq)]
pub struct DatasetRow {
    pub id: i64,
    pub session_id: i64,
    pub name: String,
    pub format: String,
    pub content_hash: String,
    pub created_at: String,
    pub meta: DatasetMeta,
    pub notes: Vec<String>,
}

/// The single owner of the database connections: one writer, and a few
/// read-only connections so that readers never wait behind a write's
/// flush to disk (write-ahead logging lets them read the last commit).
#[derive(Debug)]
pub struct Store {
    conn: Mutex<Connection>,
    readers: Vec<Mutex<Connection>>,
    next_reader: std::sync::atomic::AtomicUsize,
}

/// Read-only connections of a file database.
const READERS: usize = 4;

impl Store {
    /// Opens (creating if needed) the database file `spreadscope.sqlite3`
    /// in `dir` and runs pending migrations.
    ///
    /// # Errors
    /// The directory or file cannot be opened, or a migration fails.
    pub fn open_dir(dir: &Path) -> StoreResult<Self> {
        let path = dir.join("spreadscope.sqlite3");
        let open_error = |source| StoreError::Open {
            path: path.display().to_string(),
            source,
        };
        let conn = Connection::open(&path).map_err(open_error)?;
        let mut store = Self::init(conn)?;
        for _ in 0..READERS {
            let reader = Connection::open_with_flags(
                &path,
                rusqlite::OpenFlags::SQLITE_OPEN_READ_ONLY
                    | rusqlite::OpenFlags::SQLITE_OPEN_NO_MUTEX,
            )
            .map_err(open_error)?;
            reader.busy_timeout(std::time::Duration::from_secs(5))?;
            store.readers.push(Mutex::new(reader));
        }
        Ok(store)
    }

    /// An in-memory database, for tests.
    ///
    /// # Errors
    /// A migration fails.
    pub fn in_memory() -> StoreResult<Self> {
        Self::init(Connection::open_in_memory()?)
    }

    fn init(mut conn: Connection) -> StoreResult<Self> {
        conn.pragma_update(None, "journal_mode", "WAL")?;
        conn.pragma_update(None, "synchronous", "FULL")?;
        conn.pragma_update(None, "foreign_keys", "ON")?;
        conn.busy_timeout(std::time::Duration::from_secs(5))?;
        let done: i64 = conn.pragma_query_value(None, "user_version", |r| r.get(0))?;
        let done = usize::try_from(done).unwrap_or(0);
        for (index, sql) in MIGRATIONS.iter().enumerate().skip(done) {
            let tx = conn.transaction()?;
            tx.execute_batch(sql)?;
            tx.pragma_update(None, "user_version", index as i64 + 1)?;
            tx.commit()?;
        }
        Ok(Self {
            conn: Mutex::new(conn),
            readers: Vec::new(),
            next_reader: std::sync::atomic::AtomicUsize::new(0),
        })
    }

    /// A connection for reading: a free read-only one if any, else the next
    /// in turn; the writer when there are none (in-memory databases).
    fn read(&self) -> std::sync::MutexGuard<'_, Connection> {
        if self.readers.is_empty() {
            return self.lock();
        }
        for reader in &self.readers {
            if let Ok(guard) = reader.try_lock() {
                return guard;
            }
        }
        let k = self
            .next_reader
            .fetch_add(1, std::sync::atomic::Ordering::Relaxed)
            % self.readers.len();
        self.readers[k]
            .lock()
            .unwrap_or_else(std::sync::PoisonError::into_inner)
    }

    fn lock(&self) -> std::sync::MutexGuard<'_, Connection> {
        // A panic while holding the lock cannot leave SQLite inconsistent
        // (transactions roll back on drop), so a poisoned lock is usable.
        self.conn
            .lock()
            .unwrap_or_else(std::sync::PoisonError::into_inner)
    }

    /// Number of migrations applied.
    ///
    /// # Errors
    /// Database failure.
    pub fn schema_version(&self) -> StoreResult<i64> {
        Ok(self
            .lock()
            .pragma_query_value(None, "user_version", |r| r.get(0))?)
    }

    /// SQLite's own integrity check; `Ok(true)` when it answers "ok".
    ///
    /// # Errors
    /// Database failure.
    pub fn integrity_ok(&self) -> StoreResult<bool> {
        let answer: String = self
            .lock()
            .query_row("PRAGMA integrity_check", [], |r| r.get(0))?;
        Ok(answer == "ok")
    }

    /// # Errors
    /// Database failure (including a token collision, which at 128 random
    /// bits does not happen in practice).
    pub fn create_session(
        &self,
        name: &str,
        edit_token: &str,
        view_token: &str,
        created_at: &str,
    ) -> StoreResult<SessionRow> {
        let conn = self.lock();
        conn.execute(
            "INSERT INTO sessions (name, edit_token, view_token, created_at) VALUES (?1, ?2, ?3, ?4)",
            params![name, edit_token, view_token, created_at],
        )?;
        Ok(SessionRow {
            id: conn.last_insert_rowid(),
            name: name.into(),
            edit_token: edit_token.into(),
            view_token: view_token.into(),
            created_at: created_at.into(),
        })
    }

    /// All sessions, oldest first.
    ///
    /// # Errors
    /// Database failure.
    pub fn sessions(&self) -> StoreResult<Vec<SessionRow>> {
        let conn = self.read();
        let mut stmt = conn.prepare(
            "SELECT id, name, edit_token, view_token, created_at FROM sessions ORDER BY id",
        )?;
        let rows = stmt.query_map([], session_from_row)?;
        Ok(rows.collect::<Result<_, _>>()?)
    }

    /// Renames a session; `false` when no session has that id.
    ///
    /// # Errors
    /// Database failure.
    pub fn rename_session(&self, id: i64, name: &str) -> StoreResult<bool> {
        let changed = self.lock().execute(
            "UPDATE sessions SET name = ?1 WHERE id = ?2",
            params![name, id],
        )?;
        Ok(changed == 1)
    }

    /// The session holding `token` as its edit or view token, with `true`
    /// when it is the edit token. The caller compares tokens in constant time
    /// afterwards; the index lookup only narrows the candidates.
    ///
    /// # Errors
    /// Database failure.
    pub fn session_by_token(&self, token: &str) -> StoreResult<Option<SessionRow>> {
        let conn = self.read();
        Ok(conn
            .query_row(
                "SELECT id, name, edit_token, view_token, created_at FROM sessions
                 WHERE edit_token = ?1 OR view_token = ?1",
                params![token],
                session_from_row,
            )
            .optional()?)
    }

    /// Writes a dataset (and the shot file it came from, if any) in one
    /// transaction and returns its id.
    ///
    /// # Errors
    /// Database failure; nothing is written then.
    pub fn insert_dataset(&self, d: &NewDataset<'_>) -> StoreResult<i64> {
        let mut conn = self.lock();
        let tx = conn.transaction()?;
        let id = insert_dataset_in(&tx, d)?;
        tx.commit().map_err(full_or)?;
        Ok(id)
    }

    /// The datasets of a session, oldest first.
    ///
    /// # Errors
    /// Database failure or corrupt rows.
    pub fn datasets(&self, session_id: i64) -> StoreResult<Vec<(DatasetRow, CorrelationMap)>> {
        let conn = self.read();
        let mut stmt = conn.prepare(&format!(
            "{DATASET_SELECT} WHERE session_id = ?1 ORDER BY id"
        ))?;
        let rows = stmt.query_map(params![session_id], raw_dataset_from_row)?;
        rows.map(|r| r.map_err(StoreError::from).and_then(decode_dataset))
            .collect()
    }

    /// The id of a session's oldest dataset (the one `datasets` lists first),
    /// without reading any map.
    ///
    /// # Errors
    /// Database failure.
    pub fn first_dataset_id(&self, session_id: i64) -> StoreResult<Option<i64>> {
        let conn = self.read();
        Ok(conn
            .query_row(
                "SELECT id FROM datasets WHERE session_id = ?1 ORDER BY id LIMIT 1",
                params![session_id],
                |r| r.get(0),
            )
            .optional()?)
    }

    /// One dataset of a session.
    ///
    /// # Errors
    /// Database failure or a corrupt row.
    pub fn dataset(
        &self,
        session_id: i64,
        id: i64,
    ) -> StoreResult<Option<(DatasetRow, CorrelationMap)>> {
        let conn = self.read();
        let raw = conn
            .query_row(
                &format!("{DATASET_SELECT} WHERE session_id = ?1 AND id = ?2"),
                params![session_id, id],
                raw_dataset_from_row,
            )
            .optional()?;
        raw.map(decode_dataset).transpose()
    }

    /// The kept shot file of a dataset: (format, bytes, upload options).
    ///
    /// # Errors
    /// Database failure.
    pub fn shot_file(
        &self,
        session_id: i64,
        dataset_id: i64,
    ) -> StoreResult<Option<(String, Vec<u8>, String)>> {
        Ok(self
            .read()
            .query_row(
                "SELECT format, bytes, estimator FROM shot_files WHERE session_id = ?1 AND dataset_id = ?2",
                params![session_id, dataset_id],
                |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?)),
            )
            .optional()?)
    }

    /// Replaces a dataset's metadata. Returns `false` if no such dataset.
    ///
    /// # Errors
    /// Database failure.
    pub fn update_meta(&self, session_id: i64, id: i64, meta: &DatasetMeta) -> StoreResult<bool> {
        let json = serde_json::to_string(meta).map_err(|e| StoreError::Corrupt(e.to_string()))?;
        let changed = self.lock().execute(
            "UPDATE datasets SET meta_json = ?1 WHERE session_id = ?2 AND id = ?3",
            params![json, session_id, id],
        )?;
        Ok(changed == 1)
    }
}

/// A log entry ready to be written.
#[derive(Debug, Clone)]
pub struct NewLogEntry<'a> {
    pub session_id: i64,
    pub created_at: &'a str,
    pub author: &'a str,
    pub comment: &'a str,
    pub dataset_id: Option<i64>,
    pub retracts: Option<i64>,
    /// The fit report as JSON text, stored verbatim.
    pub fit_json: Option<&'a str>,
    pub program_version: &'a str,
}

/// A stored log entry.
#[derive(Debug, Clone, PartialEq)]
pub struct LogRow {
    pub id: i64,
    pub created_at: String,
    pub author: String,
    pub comment: String,
    pub dataset_id: Option<i64>,
    pub dataset_name: Option<String>,
    pub dataset_hash: Option<String>,
    pub retracts: Option<i64>,
    pub fit_json: Option<String>,
    pub program_version: String,
}

/// Why a log entry was refused by the store.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum LogRefusal {
    /// The dataset is not in this session.
    NoSuchDataset(i64),
    /// The retracted entry is not in this session.
    NoSuchEntry(i64),
}

impl Store {
    /// Appends a log entry in one transaction, copying the dataset's name and
    /// content hash into the entry so the provenance survives any later
    /// change of the dataset's metadata.
    ///
    /// # Errors
    /// Database failure; a refusal is `Ok(Err(..))` and writes nothing.
    pub fn append_log(&self, e: &NewLogEntry<'_>) -> StoreResult<Result<LogRow, LogRefusal>> {
        let mut conn = self.lock();
        let tx = conn.transaction()?;
        let dataset = match e.dataset_id {
            None => None,
            Some(id) => {
                let found = tx
                    .query_row(
                        "SELECT name, content_hash FROM datasets WHERE session_id = ?1 AND id = ?2",
                        params![e.session_id, id],
                        |r| Ok((r.get::<_, String>(0)?, r.get::<_, String>(1)?)),
                    )
                    .optional()?;
                match found {
                    Some(d) => Some(d),
                    None => return Ok(Err(LogRefusal::NoSuchDataset(id))),
                }
            }
        };
        if let Some(old) = e.retracts {
            let exists: Option<i64> = tx
                .query_row(
                    "SELECT id FROM log_entries WHERE session_id = ?1 AND id = ?2",
                    params![e.session_id, old],
                    |r| r.get(0),
                )
                .optional()?;
            if exists.is_none() {
                return Ok(Err(LogRefusal::NoSuchEntry(old)));
            }
        }
        let (name, hash) = dataset.unzip();
        tx.execute(
            "INSERT INTO log_entries (session_id, created_at, author, comment, dataset_id,
                 dataset_name, dataset_hash, retracts, fit_json, program_version)
             VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10)",
            params![
                e.session_id,
                e.created_at,
                e.author,
                e.comment,
                e.dataset_id,
                name,
                hash,
                e.retracts,
                e.fit_json,
                e.program_version
            ],
        )
        .map_err(full_or)?;
        let id = tx.last_insert_rowid();
        tx.commit().map_err(full_or)?;
        Ok(Ok(LogRow {
            id,
            created_at: e.created_at.into(),
            author: e.author.into(),
            comment: e.comment.into(),
            dataset_id: e.dataset_id,
            dataset_name: name,
            dataset_hash: hash,
            retracts: e.retracts,
            fit_json: e.fit_json.map(Into::into),
            program_version: e.program_version.into(),
        }))
    }

    /// A session's log entries with id above `after`, oldest first.
    ///
    /// # Errors
    /// Database failure.
    pub fn log_after(&self, session_id: i64, after: i64) -> StoreResult<Vec<LogRow>> {
        self.log_where(session_id, after)
    }

    /// A session's log, oldest first.
    ///
    /// # Errors
    /// Database failure.
    pub fn log(&self, session_id: i64) -> StoreResult<Vec<LogRow>> {
        self.log_where(session_id, 0)
    }

    fn log_where(&self, session_id: i64, after: i64) -> StoreResult<Vec<LogRow>> {
        let conn = self.read();
        let mut stmt = conn.prepare_cached(
            "SELECT id, created_at, author, comment, dataset_id, dataset_name, dataset_hash,
                    retracts, fit_json, program_version
             FROM log_entries WHERE session_id = ?1 AND id > ?2 ORDER BY id",
        )?;
        let rows = stmt.query_map(params![session_id, after], |r| {
            Ok(LogRow {
                id: r.get(0)?,
                created_at: r.get(1)?,
                author: r.get(2)?,
                comment: r.get(3)?,
                dataset_id: r.get(4)?,
                dataset_name: r.get(5)?,
                dataset_hash: r.get(6)?,
                retracts: r.get(7)?,
                fit_json: r.get(8)?,
                program_version: r.get(9)?,
            })
        })?;
        Ok(rows.collect::<Result<_, _>>()?)
    }
}

/// Maps SQLite's "database or disk is full" to [`StoreError::Full`].
fn full_or(e: rusqlite::Error) -> StoreError {
    match e.sqlite_error_code() {
        Some(rusqlite::ErrorCode::DiskFull) => StoreError::Full,
        _ => StoreError::Sqlite(e),
    }
}

/// Inserts a dataset (and its shot file) inside the caller's transaction.
fn insert_dataset_in(tx: &rusqlite::Transaction<'_>, d: &NewDataset<'_>) -> StoreResult<i64> {
    let map = d.map;
    let meta = serde_json::to_string(d.meta).map_err(|e| StoreError::Corrupt(e.to_string()))?;
    let notes = serde_json::to_string(d.notes).map_err(|e| StoreError::Corrupt(e.to_string()))?;
    let offsets =
        serde_json::to_string(map.offsets()).map_err(|e| StoreError::Corrupt(e.to_string()))?;
    let times =
        serde_json::to_string(map.times()).map_err(|e| StoreError::Corrupt(e.to_string()))?;
    let values = f64_blob(map.values());
    let errors = map.errors().map(f64_blob);
    let mask: Vec<u8> = map.present().iter().map(|&p| u8::from(p)).collect();
    tx.execute(
        "INSERT INTO datasets (session_id, name, format, content_hash, created_at, meta_json,
             notes_json, offsets_json, times_json, values_blob, errors_blob, mask_blob)
         VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12)",
        params![
            d.session_id,
            d.name,
            d.format,
            d.content_hash,
            d.created_at,
            meta,
            notes,
            offsets,
            times,
            values,
            errors,
            mask
        ],
    )
    .map_err(full_or)?;
    let id = tx.last_insert_rowid();
    if let Some((bytes, options)) = d.shots {
        tx.execute(
            "INSERT INTO shot_files (session_id, dataset_id, name, format, bytes, estimator)
             VALUES (?1, ?2, ?3, ?4, ?5, ?6)",
            params![d.session_id, id, d.name, d.format, bytes, options],
        )
        .map_err(full_or)?;
    }
    Ok(id)
}

const DATASET_SELECT: &str = "SELECT id, session_id, name, format, content_hash, created_at,
    meta_json, notes_json, offsets_json, times_json, values_blob, errors_blob, mask_blob
    FROM datasets";

fn session_from_row(r: &rusqlite::Row<'_>) -> rusqlite::Result<SessionRow> {
    Ok(SessionRow {
        id: r.get(0)?,
        name: r.get(1)?,
        edit_token: r.get(2)?,
        view_token: r.get(3)?,
        created_at: r.get(4)?,
    })
}

struct RawDataset {
    id: i64,
    session_id: i64,
    name: String,
    format: String,
    content_hash: String,
    created_at: String,
    meta: String,
    notes: String,
    offsets: String,
    times: String,
    values: Vec<u8>,
    errors: Option<Vec<u8>>,
    mask: Vec<u8>,
}

fn raw_dataset_from_row(r: &rusqlite::Row<'_>) -> rusqlite::Result<RawDataset> {
    Ok(RawDataset {
        id: r.get(0)?,
        session_id: r.get(1)?,
        name: r.get(2)?,
        format: r.get(3)?,
        content_hash: r.get(4)?,
        created_at: r.get(5)?,
        meta: r.get(6)?,
        notes: r.get(7)?,
        offsets: r.get(8)?,
        times: r.get(9)?,
        values: r.get(10)?,
        errors: r.get(11)?,
        mask: r.get(12)?,
    })
}

fn decode_dataset(raw: RawDataset) -> StoreResult<(DatasetRow, CorrelationMap)> {
    let corrupt = |what: &str, e: &dyn std::fmt::Display| {
        StoreError::Corrupt(format!("dataset {}: {what}: {e}", raw.id))
    };
    let meta: DatasetMeta = serde_json::from_str(&raw.meta).map_err(|e| corrupt("meta", &e))?;
    let notes: Vec<String> = serde_json::from_str(&raw.notes).map_err(|e| corrupt("notes", &e))?;
    let offsets: Vec<i32> =
        serde_json::from_str(&raw.offsets).map_err(|e| corrupt("offsets", &e))?;
    let times: Vec<f64> = serde_json::from_str(&raw.times).map_err(|e| corrupt("times", &e))?;
    let shape = (times.len(), offsets.len());
    let values = blob_f64(&raw.values, shape).ok_or_else(|| corrupt("values", &"bad length"))?;
    let errors = match &raw.errors {
        Some(b) => Some(blob_f64(b, shape).ok_or_else(|| corrupt("errors", &"bad length"))?),
        None => None,
    };
    let mask = Array2::from_shape_vec(shape, raw.mask.iter().map(|&b| b != 0).collect())
        .map_err(|e| corrupt("mask", &e))?;
    let map = CorrelationMap::new(offsets, times, values, errors, mask)
        .map_err(|e| corrupt("map", &e))?;
    Ok((
        DatasetRow {
            id: raw.id,
            session_id: raw.session_id,
            name: raw.name,
            format: raw.format,
            content_hash: raw.content_hash,
            created_at: raw.created_at,
            meta,
            notes,
        },
        map,
    ))
}

fn f64_blob(a: &Array2<f64>) -> Vec<u8> {
    a.iter().flat_map(|v| v.to_le_bytes()).collect()
}

fn blob_f64(bytes: &[u8], shape: (usize, usize)) -> Option<Array2<f64>> {
    if bytes.len() != shape.0 * shape.1 * 8 {
        return None;
    }
    let values = bytes
        .chunks_exact(8)
        .map(|c| {
            let mut b = [0u8; 8];
            b.copy_from_slice(c);
            f64::from_le_bytes(b)
        })
        .collect();
    Array2::from_shape_vec(shape, values).ok()
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    #[test]
    fn dataset_round_trips_bit_for_bit() {
        let store = Store::in_memory().expect("opens");
        assert_eq!(
            store.schema_version().expect("reads"),
            MIGRATIONS.len() as i64
        );
        let s = store
            .create_session("s", "edit", "view", "2026-01-01T00:00:00Z")
            .expect("creates");
        let map = CorrelationMap::new(
            vec![-1, 0, 1],
            vec![0.0, 0.1],
            array![[0.0, 1.0, 0.0], [0.1, 0.8, 0.1 + 1e-17]],
            Some(array![[1.0, 1.0, 1.0], [0.5, 0.25, 0.125]]),
            array![[true, true, false], [true, true, true]],
        )
        .expect("valid");
        let meta = DatasetMeta {
            alpha: Some(1.2),
            ..DatasetMeta::default()
        };
        let id = store
            .insert_dataset(&NewDataset {
                session_id: s.id,
                name: "d",
                format: "csv",
                content_hash: "h",
                created_at: "now",
                meta: &meta,
                notes: &["n".into()],
                map: &map,
                shots: None,
            })
            .expect("inserts");
        let (row, back) = store.dataset(s.id, id).expect("reads").expect("exists");
        assert_eq!(back, map);
        assert_eq!(row.meta, meta);
        assert!(store.dataset(s.id + 1, id).expect("reads").is_none());
        assert!(store.integrity_ok().expect("checks"));
    }

    #[test]
    fn log_entries_are_append_only() {
        let store = Store::in_memory().expect("opens");
        let s = store.create_session("a", "e", "v", "t").expect("creates");
        let entry = NewLogEntry {
            session_id: s.id,
            created_at: "t",
            author: "ana",
            comment: "first",
            dataset_id: None,
            retracts: None,
            fit_json: None,
            program_version: "v",
        };
        let first = store.append_log(&entry).expect("db").expect("accepted");
        let retraction = NewLogEntry {
            retracts: Some(first.id),
            comment: "wrong window",
            ..entry.clone()
        };
        store
            .append_log(&retraction)
            .expect("db")
            .expect("accepted");
        let dangling = NewLogEntry {
            retracts: Some(999),
            ..entry.clone()
        };
        assert_eq!(
            store.append_log(&dangling).expect("db"),
            Err(LogRefusal::NoSuchEntry(999))
        );
        let foreign = NewLogEntry {
            dataset_id: Some(1),
            ..entry
        };
        assert_eq!(
            store.append_log(&foreign).expect("db"),
            Err(LogRefusal::NoSuchDataset(1))
        );
        let conn = store.lock();
        assert!(
            conn.execute("UPDATE log_entries SET comment = 'x'", [])
                .is_err()
        );
        assert!(conn.execute("DELETE FROM log_entries", []).is_err());
        drop(conn);
        let log = store.log(s.id).expect("reads");
        assert_eq!(log.len(), 2);
        assert_eq!(log[1].retracts, Some(log[0].id));
    }

    #[test]
    fn tokens_find_their_session() {
        let store = Store::in_memory().expect("opens");
        store.create_session("a", "e1", "v1", "t").expect("creates");
        let found = store
            .session_by_token("v1")
            .expect("reads")
            .expect("exists");
        assert_eq!(found.name, "a");
        assert!(store.session_by_token("nope").expect("reads").is_none());
    }
}
