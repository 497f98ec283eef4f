//! Uploads that may be retried: an upload carries a client-chosen
//! idempotency key, recorded with its dataset in the same transaction, so a
//! retry after a lost response stores nothing and answers with the dataset
//! that is already there.
//!
//! The key travels to the one place that writes datasets
//! (`Service::store_dataset`) as a task-local value around the upload
//! call, so every kind of upload (maps, shot files, watched-folder files)
//! gets it without each use case threading an extra argument through.
//!
//! Invariant: a tagged dataset and its tag are one transaction; a tag is
//! looked up in that same transaction, so two racing retries store once.

use std::future::Future;
use std::sync::Arc;
use std::sync::atomic::{AtomicBool, Ordering};

use super::{Access, DatasetSummary, Service, ServiceError, ServiceResult};
use crate::store::IngestTag;

tokio::task_local! {
    static TAG: Arc<Intake>;
}

/// The tag of the upload in progress, and whether it turned out to be
/// stored already.
#[derive(Debug)]
pub(super) struct Intake {
    pub(super) tag: IngestTag,
    pub(super) already: AtomicBool,
}

/// The tag of the current task's upload, if any.
pub(super) fn current() -> Option<Arc<Intake>> {
    TAG.try_with(Clone::clone).ok()
}

/// Longest accepted idempotency key.
pub const MAX_KEY_CHARS: usize = 200;

/// Checks a client-chosen key: 1 to 200 visible ASCII characters.
///
/// # Errors
/// BadRequest naming the key.
pub fn check_key(key: &str) -> ServiceResult<()> {
    if key.is_empty() || key.len() > MAX_KEY_CHARS || !key.bytes().all(|b| b.is_ascii_graphic()) {
        return Err(ServiceError::BadRequest(format!(
            "idempotency key: 1 to {MAX_KEY_CHARS} visible ASCII characters (letters, digits, punctuation)"
        )));
    }
    Ok(())
}

/// An upload's result: the dataset, and `true` when it was already stored
/// under the same key (nothing new was written).
#[derive(Debug, Clone)]
pub struct Uploaded {
    pub summary: DatasetSummary,
    pub already_stored: bool,
}

impl Service {
    /// Runs an upload (`work`) under an ingest tag. When the tag is already
    /// recorded the upload is not parsed at all and the stored dataset is
    /// returned.
    ///
    /// # Errors
    /// Whatever the upload returns; NotFound if a recorded tag's dataset is
    /// gone (a refused watched file has none).
    pub(super) async fn tagged<F>(
        &self,
        access: &Access,
        tag: IngestTag,
        work: F,
    ) -> ServiceResult<Uploaded>
    where
        F: Future<Output = ServiceResult<DatasetSummary>>,
    {
        access.require_edit()?;
        let session_id = access.session.id;
        let probe = tag.clone();
        if let Some(existing) = self.db(move |s| s.tag_recorded(session_id, &probe)).await? {
            let id = existing.ok_or(ServiceError::NotFound)?;
            let (summary, _) = self.dataset(access, id).await?;
            return Ok(Uploaded {
                summary,
                already_stored: true,
            });
        }
        let intake = Arc::new(Intake {
            tag,
            already: AtomicBool::new(false),
        });
        let summary = TAG.scope(intake.clone(), work).await?;
        Ok(Uploaded {
            summary,
            already_stored: intake.already.load(Ordering::SeqCst),
        })
    }

    /// [`Service::add_dataset`] under an optional idempotency key.
    ///
    /// # Errors
    /// As [`Service::add_dataset`], and BadRequest for a malformed key.
    pub async fn add_dataset_keyed(
        &self,
        access: &Access,
        key: Option<String>,
        name: &str,
        format: crate::ingest::Format,
        bytes: Vec<u8>,
        options: crate::ingest::IngestOptions,
    ) -> ServiceResult<Uploaded> {
        let work = self.add_dataset(access, name, format, bytes, options);
        self.keyed(access, key, work).await
    }

    /// [`Service::add_shots`] under an optional idempotency key.
    ///
    /// # Errors
    /// As [`Service::add_shots`], and BadRequest for a malformed key.
    pub async fn add_shots_keyed(
        &self,
        access: &Access,
        key: Option<String>,
        name: &str,
        format: crate::ingest::shots::ShotFormat,
        bytes: Vec<u8>,
        options: super::shots::ShotOptions,
    ) -> ServiceResult<Uploaded> {
        let work = self.add_shots(access, name, format, bytes, options);
        self.keyed(access, key, work).await
    }

    async fn keyed<F>(
        &self,
        access: &Access,
        key: Option<String>,
        work: F,
    ) -> ServiceResult<Uploaded>
    where
        F: Future<Output = ServiceResult<DatasetSummary>>,
    {
        match key {
            None => Ok(Uploaded {
                summary: work.await?,
                already_stored: false,
            }),
            Some(key) => {
                check_key(&key)?;
                self.tagged(access, IngestTag::Key(key), work).await
            }
        }
    }
}
