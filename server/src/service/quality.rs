//! The live collapse quality behind the z slider.
//!
//! A drag sends one request per frame at a new z on the same dataset and
//! window. Preparing the measure (reading and decoding the map, windowing
//! it, sorting the curves) costs far more than evaluating S(z), so the
//! prepared [`CollapseQuality`] is kept per (session, dataset, window) in a
//! small cache, and both the preparation and the evaluation run on the
//! blocking pool, never on the async runtime.
//!
//! Invariant: a stored map never changes (datasets are immutable; only
//! their metadata can be edited, and S does not depend on it), so a cached
//! measure never goes stale. Entries are keyed by the session as well as
//! the dataset, so a token of one session never reaches another session's
//! entry.

use std::collections::VecDeque;
use std::sync::{Arc, Mutex, PoisonError};

use serde_json::{Value, json};
use spreadscope_physics::fit::collapse::CollapseQuality;

use super::fits::Windows;
use super::{Access, Service, ServiceError, ServiceResult};

/// Prepared measures kept at once (a few datasets × a few windows).
const CAPACITY: usize = 16;

/// The cache key: session, dataset and the window as exact bit patterns.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
struct Key {
    session: i64,
    dataset: i64,
    t_min: Option<u64>,
    t_max: Option<u64>,
    x_max: Option<i32>,
}

impl Key {
    fn new(session: i64, dataset: i64, w: &Windows) -> Self {
        Self {
            session,
            dataset,
            t_min: w.t_min.map(f64::to_bits),
            t_max: w.t_max.map(f64::to_bits),
            x_max: w.x_max,
        }
    }
}

/// Most recently used last; at most `CAPACITY` entries.
#[derive(Debug, Default)]
pub struct QualityCache {
    entries: Mutex<VecDeque<(Key, Arc<CollapseQuality>)>>,
}

impl QualityCache {
    fn get(&self, key: &Key) -> Option<Arc<CollapseQuality>> {
        let mut entries = self.entries.lock().unwrap_or_else(PoisonError::into_inner);
        let k = entries.iter().position(|(k, _)| k == key)?;
        let entry = entries.remove(k)?;
        let measure = entry.1.clone();
        entries.push_back(entry);
        Some(measure)
    }

    fn insert(&self, key: Key, measure: Arc<CollapseQuality>) {
        let mut entries = self.entries.lock().unwrap_or_else(PoisonError::into_inner);
        entries.retain(|(k, _)| *k != key);
        entries.push_back((key, measure));
        while entries.len() > CAPACITY {
            entries.pop_front();
        }
    }

    /// Number of prepared measures held.
    #[must_use]
    pub fn len(&self) -> usize {
        self.entries
            .lock()
            .unwrap_or_else(PoisonError::into_inner)
            .len()
    }

    /// True when nothing is held.
    #[must_use]
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }
}

impl Service {
    /// The collapse quality S at one z (for dragging a slider), from the
    /// prepared measure of the dataset's window (prepared on first use);
    /// bounds the request leaves open come from the one window rule.
    ///
    /// # Errors
    /// NotFound, BadRequest for a bad window or z.
    pub async fn collapse_quality(
        &self,
        access: &Access,
        dataset: i64,
        windows: Windows,
        z: f64,
    ) -> ServiceResult<Value> {
        if !(z.is_finite() && z > 0.0) {
            return Err(ServiceError::BadRequest(
                "parameter `z`: must be a positive number".into(),
            ));
        }
        let key = Key::new(access.session.id, dataset, &windows);
        let measure = match self.quality_cache.get(&key) {
            Some(measure) => measure,
            None => {
                let (summary, map) = self.dataset(access, dataset).await?;
                let measure = tokio::task::spawn_blocking(move || {
                    // Open bounds are closed by the one window rule, as the
                    // fits route does: the slider's S and the best fit's S
                    // describe the same points.
                    let choice = crate::service::fits::default_windows(
                        &map,
                        &summary.meta,
                        windows,
                        &crate::service::fits::FitOptions::default(),
                    );
                    let used = Windows {
                        t_min: Some(choice.t_min),
                        t_max: Some(choice.t_max),
                        x_max: choice.x_max,
                    };
                    let windowed = used.apply(&map)?;
                    CollapseQuality::new(&windowed)
                        .map(Arc::new)
                        .map_err(|e| ServiceError::BadRequest(format!("fit: {e}")))
                })
                .await
                .map_err(|e| ServiceError::Internal(format!("collapse quality: {e}")))??;
                self.quality_cache.insert(key, measure.clone());
                measure
            }
        };
        let value = tokio::task::spawn_blocking(move || measure.quality_value(z))
            .await
            .map_err(|e| ServiceError::Internal(format!("collapse quality: {e}")))?;
        Ok(json!({"z": z, "quality": value.s, "n_points": value.n_pairs}))
    }

    /// The slider's cache (tests read its size).
    #[must_use]
    pub fn quality_cache(&self) -> &QualityCache {
        &self.quality_cache
    }
}
