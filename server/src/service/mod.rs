//! Service: the use cases — sessions, access by token, datasets, live events.
//!
//! Owns access rules (who may read and write), content hashing, the event
//! bus, and moving CPU-heavy work (parsing, fits) off the async runtime behind
//! a concurrency limit. Knows no HTTP: the api layer maps [`ServiceError`] to
//! status codes. Talks to the database only through [`crate::store`].

pub mod archive;
mod demo;
pub mod exports;
pub mod fits;
pub mod intake;
pub mod jobs;
pub mod log;
pub mod quality;
pub mod report;
pub mod shots;
pub mod theory;
pub mod watch;

use std::sync::Arc;
use std::sync::atomic::{AtomicUsize, Ordering};

use serde::Serialize;
use sha2::{Digest, Sha256};
use spreadscope_physics::CorrelationMap;
use subtle::ConstantTimeEq;
use tokio::sync::{Semaphore, broadcast};

use crate::dataset::DatasetMeta;
use crate::ingest::{self, Format, IngestError, IngestOptions};
use crate::store::{DatasetRow, NewDataset, SessionRow, Store, StoreError};

pub use demo::DEMO_SESSION_NAME;

/// Version of this program, recorded in every result it produces.
pub const PROGRAM_VERSION: &str = concat!("spreadscope ", env!("CARGO_PKG_VERSION"));

/// The conventions every output states.
pub const CONVENTIONS: &str = "C(x,t) = 2^-N Tr[σz_{j+x}(t) σz_j(0)] (infinite temperature), \
x = i − source in sites; H = Σ_{i<j} J_ij (σ+_i σ-_j + h.c. + (Δ/2) σz_i σz_j), ħ = 1; \
scaling form Σ_x C(x,t) e^{ikx} ≈ exp(−D |k|^z t), D in sites^z per time unit.";

#[derive(Debug, Clone, thiserror::Error)]
pub enum ServiceError {
    /// Unknown token or object; reveals nothing about what exists.
    #[error("not found")]
    NotFound,
    /// A view link tried to write.
    #[error("this link is read-only: writing needs the session's edit link")]
    Forbidden,
    /// An uploaded file was rejected; every problem is listed.
    #[error("the file was rejected: {0}")]
    Invalid(IngestError),
    /// A request the user can fix (bad parameter, bad metadata field).
    #[error("{0}")]
    BadRequest(String),
    /// The job was cancelled by its client.
    #[error("the job was cancelled")]
    Cancelled,
    /// Too many heavy jobs are queued; try again after the given seconds.
    #[error("the server is busy with other computations; try again in {0} s")]
    Busy(u64),
    /// The disk holding the database is full; nothing of the request was
    /// stored and everything stored before is intact.
    #[error(
        "the server's disk is full: nothing of this request was stored; everything stored before is intact"
    )]
    StorageFull,
    /// Something on our side failed; the message is for the log only.
    #[error("internal error: {0}")]
    Internal(String),
}

impl From<StoreError> for ServiceError {
    fn from(e: StoreError) -> Self {
        match e {
            StoreError::Full => Self::StorageFull,
            e => Self::Internal(e.to_string()),
        }
    }
}

pub type ServiceResult<T> = Result<T, ServiceError>;

/// A change in a session, delivered to every open page of that session.
#[derive(Debug, Clone, Serialize)]
pub struct SessionEvent {
    #[serde(skip)]
    pub session_id: i64,
    pub kind: &'static str,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub id: Option<i64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub job: Option<String>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub fraction: Option<f64>,
}

/// The outcome of resolving a token.
#[derive(Debug, Clone)]
pub struct Access {
    pub session: SessionRow,
    pub can_edit: bool,
}

impl Access {
    fn require_edit(&self) -> ServiceResult<()> {
        if self.can_edit {
            Ok(())
        } else {
            Err(ServiceError::Forbidden)
        }
    }
}

/// Tokens of a new session.
#[derive(Debug, Clone, Serialize)]
pub struct SessionTokens {
    pub edit_token: String,
    pub view_token: String,
}

/// What a list of datasets shows about each.
#[derive(Debug, Clone, Serialize)]
pub struct DatasetSummary {
    pub id: i64,
    pub name: String,
    pub format: String,
    pub content_hash: String,
    pub created_at: String,
    pub sites: usize,
    pub times: usize,
    pub missing: usize,
    pub x_range: [i32; 2],
    pub t_range: [f64; 2],
    pub has_errors: bool,
    /// Smallest and largest Σ_x C(x,t) over the times.
    pub sum_rule_range: [f64; 2],
    pub notes: Vec<String>,
    pub meta: DatasetMeta,
}

impl DatasetSummary {
    #[must_use]
    pub fn new(row: &DatasetRow, map: &CorrelationMap) -> Self {
        let x = map.offsets();
        let t = map.times();
        let sums = map.sum_rule();
        let (lo, hi) = sums
            .iter()
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), p| {
                (lo.min(p.sum), hi.max(p.sum))
            });
        Self {
            id: row.id,
            name: row.name.clone(),
            format: row.format.clone(),
            content_hash: row.content_hash.clone(),
            created_at: row.created_at.clone(),
            sites: map.n_sites(),
            times: map.n_times(),
            missing: map.n_missing(),
            x_range: [x[0], x[x.len() - 1]],
            t_range: [t[0], t[t.len() - 1]],
            has_errors: map.errors().is_some(),
            sum_rule_range: [lo, hi],
            notes: row.notes.clone(),
            meta: row.meta.clone(),
        }
    }
}

/// Finished fit results kept for identical requests.
const SHARED_FIT_CACHE: usize = 64;

/// Limits and switches of the service.
#[derive(Debug, Clone)]
pub struct ServiceConfig {
    /// Heavy jobs (parsing, fits, simulations) allowed at once.
    pub heavy_jobs: usize,
    /// Heavy jobs allowed to wait for a free slot; more are refused as busy.
    pub heavy_queue: usize,
}

impl Default for ServiceConfig {
    fn default() -> Self {
        Self {
            heavy_jobs: std::thread::available_parallelism().map_or(2, usize::from),
            heavy_queue: 16,
        }
    }
}

/// The application's use cases. Cheap to clone.
#[derive(Debug, Clone)]
pub struct Service {
    store: Arc<Store>,
    events: broadcast::Sender<SessionEvent>,
    heavy: Arc<Semaphore>,
    /// Heavy jobs waiting for or holding a permit.
    heavy_load: Arc<AtomicUsize>,
    heavy_limit: usize,
    jobs: Arc<fits::Jobs>,
    /// Fits shared between identical requests, with their result cache.
    shared_fits: Arc<jobs::SharedJobs<fits::FitResult>>,
    log_cache: Arc<log::LogCache>,
    quality_cache: Arc<quality::QualityCache>,
}

impl Service {
    #[must_use]
    pub fn new(store: Store, config: &ServiceConfig) -> Self {
        let (events, _) = broadcast::channel(1024);
        Self {
            store: Arc::new(store),
            events,
            heavy: Arc::new(Semaphore::new(config.heavy_jobs.max(1))),
            heavy_load: Arc::new(AtomicUsize::new(0)),
            heavy_limit: config.heavy_jobs.max(1) + config.heavy_queue,
            jobs: Arc::new(fits::Jobs::default()),
            // Distinct fits in flight: one round running, one waiting.
            shared_fits: Arc::new(jobs::SharedJobs::new(
                2 * config.heavy_jobs.max(1),
                SHARED_FIT_CACHE,
            )),
            log_cache: Arc::new(log::LogCache::default()),
            quality_cache: Arc::new(quality::QualityCache::default()),
        }
    }

    /// Runs `work` on the blocking pool once a heavy-job permit is free.
    async fn heavy<T, F>(&self, work: F) -> ServiceResult<T>
    where
        T: Send + 'static,
        F: FnOnce() -> ServiceResult<T> + Send + 'static,
    {
        // Count this job for as long as it waits or runs; refuse it when the
        // queue is full rather than letting requests pile up unboundedly.
        let load = LoadGuard::enter(&self.heavy_load);
        if load.count > self.heavy_limit {
            return Err(ServiceError::Busy(5));
        }
        let _permit = self
            .heavy
            .clone()
            .acquire_owned()
            .await
            .map_err(|e| ServiceError::Internal(e.to_string()))?;
        tokio::task::spawn_blocking(work)
            .await
            .map_err(|e| ServiceError::Internal(format!("job failed: {e}")))?
    }

    /// Runs a short database call on the blocking pool.
    async fn db<T, F>(&self, work: F) -> ServiceResult<T>
    where
        T: Send + 'static,
        F: FnOnce(&Store) -> Result<T, StoreError> + Send + 'static,
    {
        let store = self.store.clone();
        tokio::task::spawn_blocking(move || work(&store))
            .await
            .map_err(|e| ServiceError::Internal(format!("database task failed: {e}")))?
            .map_err(ServiceError::from)
    }

    /// Subscribes to every session's events (filter by `session_id`).
    #[must_use]
    pub fn subscribe(&self) -> broadcast::Receiver<SessionEvent> {
        self.events.subscribe()
    }

    fn publish(&self, session_id: i64, kind: &'static str, id: i64) {
        // No receiver is fine: nobody has the page open.
        let _ = self.events.send(SessionEvent {
            session_id,
            kind,
            id: Some(id),
            job: None,
            fraction: None,
        });
    }

    fn publish_progress(&self, session_id: i64, job: &str, fraction: f64) {
        let _ = self.events.send(SessionEvent {
            session_id,
            kind: "job-progress",
            id: None,
            job: Some(job.to_string()),
            fraction: Some(fraction),
        });
    }

    /// Creates a session with fresh unguessable tokens.
    ///
    /// # Errors
    /// The random source or the database fails.
    pub async fn create_session(&self, name: &str) -> ServiceResult<SessionTokens> {
        let name = session_name(name)?;
        let edit_token = new_token()?;
        let view_token = new_token()?;
        let now = now_utc();
        let (e, v) = (edit_token.clone(), view_token.clone());
        self.db(move |s| s.create_session(&name, &e, &v, &now))
            .await?;
        Ok(SessionTokens {
            edit_token,
            view_token,
        })
    }

    /// Renames the session of an edit link and tells every open page.
    ///
    /// # Errors
    /// Forbidden for view links, BadRequest for a bad name, database failure.
    pub async fn rename_session(&self, access: &Access, name: &str) -> ServiceResult<String> {
        access.require_edit()?;
        let name = session_name(name)?;
        let (id, n) = (access.session.id, name.clone());
        if !self.db(move |s| s.rename_session(id, &n)).await? {
            return Err(ServiceError::NotFound);
        }
        self.publish(id, "session-renamed", id);
        Ok(name)
    }

    /// All sessions with their tokens, for the operator's console only.
    ///
    /// # Errors
    /// Database failure.
    pub async fn sessions(&self) -> ServiceResult<Vec<SessionRow>> {
        self.db(Store::sessions).await
    }

    /// Resolves a token to its session and rights; unknown tokens are
    /// [`ServiceError::NotFound`].
    ///
    /// # Errors
    /// Unknown token or database failure.
    pub async fn access(&self, token: &str) -> ServiceResult<Access> {
        if !is_token_shaped(token) {
            return Err(ServiceError::NotFound);
        }
        let t = token.to_string();
        let row = self
            .db(move |s| s.session_by_token(&t))
            .await?
            .ok_or(ServiceError::NotFound)?;
        let given = token.as_bytes();
        let is_edit: bool = row.edit_token.as_bytes().ct_eq(given).into();
        let is_view: bool = row.view_token.as_bytes().ct_eq(given).into();
        if !(is_edit || is_view) {
            return Err(ServiceError::NotFound);
        }
        Ok(Access {
            session: row,
            can_edit: is_edit,
        })
    }

    /// Parses and stores an uploaded map. Nothing is stored if any problem
    /// is found.
    ///
    /// # Errors
    /// Forbidden for view links, Invalid with every problem, BadRequest for
    /// a bad name, Internal on database failure.
    pub async fn add_dataset(
        &self,
        access: &Access,
        name: &str,
        format: Format,
        bytes: Vec<u8>,
        options: IngestOptions,
    ) -> ServiceResult<DatasetSummary> {
        access.require_edit()?;
        let name = validate_name(name)?;
        let session_id = access.session.id;
        let format_label = format_label(format);
        let parsed = self
            .heavy(move || ingest::parse(&bytes, format, &options).map_err(ServiceError::Invalid))
            .await?;
        self.store_dataset(StoredDataset {
            session_id,
            name,
            format: format_label,
            meta: parsed.meta,
            notes: parsed.notes,
            map: parsed.map,
            shots: None,
        })
        .await
    }

    /// Summaries of a session's datasets, oldest first.
    ///
    /// # Errors
    /// Database failure.
    pub async fn datasets(&self, access: &Access) -> ServiceResult<Vec<DatasetSummary>> {
        let session_id = access.session.id;
        let rows = self.db(move |s| s.datasets(session_id)).await?;
        Ok(rows
            .iter()
            .map(|(row, map)| DatasetSummary::new(row, map))
            .collect())
    }

    /// The id of the dataset the page opens on when its address names none
    /// (the first of `datasets`), read without decoding any map.
    ///
    /// # Errors
    /// Database failure.
    pub async fn first_dataset_id(&self, access: &Access) -> ServiceResult<Option<i64>> {
        let session_id = access.session.id;
        self.db(move |s| s.first_dataset_id(session_id)).await
    }

    /// One dataset with its map.
    ///
    /// # Errors
    /// NotFound if the session has no such dataset.
    pub async fn dataset(
        &self,
        access: &Access,
        id: i64,
    ) -> ServiceResult<(DatasetSummary, CorrelationMap)> {
        let session_id = access.session.id;
        let (row, map) = self
            .db(move |s| s.dataset(session_id, id))
            .await?
            .ok_or(ServiceError::NotFound)?;
        Ok((DatasetSummary::new(&row, &map), map))
    }

    /// Replaces a dataset's metadata.
    ///
    /// # Errors
    /// Forbidden, BadRequest naming the field, NotFound.
    pub async fn update_meta(
        &self,
        access: &Access,
        id: i64,
        meta: DatasetMeta,
    ) -> ServiceResult<DatasetSummary> {
        access.require_edit()?;
        meta.validate().map_err(ServiceError::BadRequest)?;
        let session_id = access.session.id;
        let found = self
            .db(move |s| s.update_meta(session_id, id, &meta))
            .await?;
        if !found {
            return Err(ServiceError::NotFound);
        }
        let (summary, _) = self.dataset(access, id).await?;
        self.publish(session_id, "dataset-updated", id);
        Ok(summary)
    }

    /// Creates the demo session when the store holds no session at all.
    /// Returns `true` if it was created.
    ///
    /// # Errors
    /// A demo file fails to parse (a build defect) or the database fails.
    pub async fn ensure_demo(&self) -> ServiceResult<bool> {
        if !self.sessions().await?.is_empty() {
            return Ok(false);
        }
        let tokens = self.create_session(DEMO_SESSION_NAME).await?;
        let session_id = self.access(&tokens.edit_token).await?.session.id;
        for item in demo::datasets()? {
            let (format, file) = (item.format, item.file.clone());
            let bytes = item.bytes;
            let parsed = self
                .heavy(move || {
                    ingest::parse(&bytes, format, &IngestOptions::default())
                        .map_err(|e| ServiceError::Internal(format!("demo file {file}: {e}")))
                })
                .await?;
            // The manifest's metadata wins over the file's comment lines;
            // demo data are synthetic whatever either says.
            let mut meta = item.meta.unwrap_or(parsed.meta);
            meta.synthetic = true;
            self.store_dataset(StoredDataset {
                session_id,
                name: item.name,
                format: format_label(format),
                meta,
                notes: parsed.notes,
                map: parsed.map,
                shots: None,
            })
            .await?;
        }
        Ok(true)
    }
}

/// Holds one unit of heavy-job load until dropped.
struct LoadGuard {
    counter: Arc<AtomicUsize>,
    count: usize,
}

impl LoadGuard {
    fn enter(counter: &Arc<AtomicUsize>) -> Self {
        let count = counter.fetch_add(1, Ordering::SeqCst) + 1;
        Self {
            counter: counter.clone(),
            count,
        }
    }
}

impl Drop for LoadGuard {
    fn drop(&mut self) {
        self.counter.fetch_sub(1, Ordering::SeqCst);
    }
}

/// A dataset on its way into the store.
struct StoredDataset {
    session_id: i64,
    name: String,
    format: &'static str,
    meta: DatasetMeta,
    notes: Vec<String>,
    map: CorrelationMap,
    /// The shot file and its estimator options (JSON), for shot datasets.
    shots: Option<(Vec<u8>, String)>,
}

impl Service {
    /// Writes a dataset in one transaction, reads it back and tells every
    /// open page.
    async fn store_dataset(&self, d: StoredDataset) -> ServiceResult<DatasetSummary> {
        let session_id = d.session_id;
        // An upload under an idempotency key (or a watched-folder file)
        // records its tag in the same transaction; see `intake`.
        let intake = intake::current();
        let tag = intake.as_ref().map(|i| i.tag.clone());
        let (row, map, is_new) = self
            .db(move |s| {
                let hash = content_hash(&d.map);
                let created_at = now_utc();
                let new = NewDataset {
                    session_id,
                    name: &d.name,
                    format: d.format,
                    content_hash: &hash,
                    created_at: &created_at,
                    meta: &d.meta,
                    notes: &d.notes,
                    map: &d.map,
                    shots: d.shots.as_ref().map(|(b, o)| (b.as_slice(), o.as_str())),
                };
                let (id, is_new) = match &tag {
                    None => (Some(s.insert_dataset(&new)?), true),
                    Some(tag) => match s.insert_dataset_tagged(&new, tag)? {
                        crate::store::Tagged::New(id) => (Some(id), true),
                        crate::store::Tagged::Existing(id) => (id, false),
                    },
                };
                let found = match id {
                    Some(id) => s.dataset(session_id, id)?,
                    None => None,
                };
                Ok(found.map(|(row, map)| (row, map, is_new)))
            })
            .await?
            .ok_or(ServiceError::NotFound)?;
        let summary = DatasetSummary::new(&row, &map);
        if is_new {
            self.publish(session_id, "dataset-added", summary.id);
        } else if let Some(intake) = intake {
            intake
                .already
                .store(true, std::sync::atomic::Ordering::SeqCst);
        }
        Ok(summary)
    }
}

fn validate_name(name: &str) -> ServiceResult<String> {
    let name = name.trim();
    if name.is_empty() {
        return Err(ServiceError::BadRequest(
            "parameter `name`: a dataset needs a name".into(),
        ));
    }
    if name.chars().count() > 200 {
        return Err(ServiceError::BadRequest(
            "parameter `name`: longer than 200 characters".into(),
        ));
    }
    Ok(name.to_string())
}

fn format_label(format: Format) -> &'static str {
    match format {
        Format::Csv => "csv",
        Format::Npy => "npy",
        Format::Npz => "npz",
        Format::Json => "json",
        Format::Hdf5 => "h5",
    }
}

/// 128 random bits from the operating system, as 32 lowercase hex digits.
fn new_token() -> ServiceResult<String> {
    let mut bytes = [0u8; 16];
    getrandom::fill(&mut bytes)
        .map_err(|e| ServiceError::Internal(format!("random source: {e}")))?;
    Ok(bytes.iter().map(|b| format!("{b:02x}")).collect())
}

fn is_token_shaped(token: &str) -> bool {
    token.len() == 32
        && token
            .bytes()
            .all(|b| b.is_ascii_hexdigit() && !b.is_ascii_uppercase())
}

/// A session's name as given, trimmed: at most 200 characters without
/// control characters; empty becomes "Untitled session".
///
/// # Errors
/// BadRequest naming the field.
pub fn session_name(name: &str) -> ServiceResult<String> {
    let name = name.trim();
    if name.chars().count() > 200 {
        return Err(ServiceError::BadRequest(
            "field `name`: longer than 200 characters".into(),
        ));
    }
    if name.chars().any(char::is_control) {
        return Err(ServiceError::BadRequest(
            "field `name`: contains control characters".into(),
        ));
    }
    Ok(if name.is_empty() {
        "Untitled session".to_string()
    } else {
        name.to_string()
    })
}

/// SHA-256 over a canonical encoding of the map (axes, values, errors,
/// mask), so the same data give the same hash whatever file format carried
/// them. Hex, lowercase.
#[must_use]
pub fn content_hash(map: &CorrelationMap) -> String {
    let mut h = Sha256::new();
    h.update(b"spreadscope-map-v1");
    h.update((map.n_times() as u64).to_le_bytes());
    h.update((map.n_sites() as u64).to_le_bytes());
    for x in map.offsets() {
        h.update(x.to_le_bytes());
    }
    for t in map.times() {
        h.update(t.to_bits().to_le_bytes());
    }
    for v in map.values() {
        h.update(v.to_bits().to_le_bytes());
    }
    for &p in map.present() {
        h.update([u8::from(p)]);
    }
    match map.errors() {
        Some(e) => {
            h.update([1]);
            for v in e {
                h.update(v.to_bits().to_le_bytes());
            }
        }
        None => h.update([0]),
    }
    h.finalize().iter().map(|b| format!("{b:02x}")).collect()
}

/// Current UTC time, RFC 3339, whole seconds.
#[must_use]
pub fn now_utc() -> String {
    let now = time::OffsetDateTime::now_utc();
    now.replace_nanosecond(0)
        .unwrap_or(now)
        .format(&time::format_description::well_known::Rfc3339)
        .unwrap_or_else(|_| "unknown".into())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[tokio::test]
    async fn heavy_jobs_beyond_the_queue_are_refused_as_busy() {
        let service = Service::new(
            Store::in_memory().expect("store"),
            &ServiceConfig {
                heavy_jobs: 1,
                heavy_queue: 0,
            },
        );
        let (release, wait) = std::sync::mpsc::channel::<()>();
        let (started, is_started) = tokio::sync::oneshot::channel::<()>();
        let busy = service.clone();
        let first = tokio::spawn(async move {
            busy.heavy(move || {
                let _ = started.send(());
                let _ = wait.recv();
                Ok(1)
            })
            .await
        });
        is_started.await.expect("first job runs");
        let second = service.heavy(|| Ok(2)).await;
        assert!(matches!(second, Err(ServiceError::Busy(_))), "{second:?}");
        release.send(()).expect("release");
        assert_eq!(first.await.expect("joins").expect("ok"), 1);
        assert_eq!(service.heavy(|| Ok(3)).await.expect("free again"), 3);
    }

    #[test]
    fn tokens_are_128_bit_hex_and_distinct() {
        let a = new_token().expect("random");
        let b = new_token().expect("random");
        assert_eq!(a.len(), 32);
        assert!(is_token_shaped(&a));
        assert_ne!(a, b);
        assert!(!is_token_shaped("../etc/passwd"));
    }
}
