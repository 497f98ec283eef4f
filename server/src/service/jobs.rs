//! Heavy requests under a crowd: identical requests compute once and share
//! the result, finished results are kept in a small cache, a request that
//! cannot start soon is refused at once as busy (429 with a retry time), and
//! a computation nobody waits for any more is cancelled.
//!
//! Two requests are identical when their key is: for fits, the dataset's
//! content hash and metadata, the method, the windows and every option
//! including the seed (see [`Service::fit_shared`]). The result is then the
//! same by construction (every estimator is deterministic given its seed).
//!
//! Written here rather than taken from a crate: the sharing has to know the
//! service's cancellation flags and its busy answer; the pieces (a map of
//! in-flight keys to `tokio::sync::watch` channels and a bounded FIFO of
//! results) are short.
//!
//! Invariant: at most `capacity` distinct computations are in flight; a
//! computation is cancelled exactly when its last waiter goes away before
//! it finishes; only successful results are cached.

use std::collections::{HashMap, VecDeque};
use std::future::Future;
use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::{Arc, Mutex};
use std::time::{Duration, Instant};

use tokio::sync::watch;

use super::fits::{FitRequest, FitResult};
use super::{Access, Service, ServiceError, ServiceResult};

type Outcome<T> = Option<Result<Arc<T>, Arc<ServiceError>>>;

struct Flight<T> {
    id: u64,
    rx: watch::Receiver<Outcome<T>>,
    waiters: usize,
    abort: tokio::task::AbortHandle,
    on_cancel: Option<Box<dyn FnOnce() + Send>>,
}

struct State<T> {
    inflight: HashMap<String, Flight<T>>,
    cache: VecDeque<(String, Arc<T>)>,
    recent: VecDeque<Duration>,
}

/// Shared, deduplicated heavy computations keyed by a request's identity.
pub struct SharedJobs<T> {
    state: Mutex<State<T>>,
    capacity: usize,
    cache_size: usize,
    next_id: AtomicU64,
    started: AtomicU64,
}

impl<T> std::fmt::Debug for SharedJobs<T> {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("SharedJobs")
            .field("capacity", &self.capacity)
            .field("cache_size", &self.cache_size)
            .field("started", &self.started.load(Ordering::Relaxed))
            .finish_non_exhaustive()
    }
}

impl<T: Send + Sync + 'static> SharedJobs<T> {
    /// At most `capacity` distinct computations in flight, `cache_size`
    /// finished results kept.
    #[must_use]
    pub fn new(capacity: usize, cache_size: usize) -> Self {
        Self {
            state: Mutex::new(State {
                inflight: HashMap::new(),
                cache: VecDeque::new(),
                recent: VecDeque::new(),
            }),
            capacity: capacity.max(1),
            cache_size,
            next_id: AtomicU64::new(0),
            started: AtomicU64::new(0),
        }
    }

    fn lock(&self) -> std::sync::MutexGuard<'_, State<T>> {
        self.state
            .lock()
            .unwrap_or_else(std::sync::PoisonError::into_inner)
    }

    /// Computations started so far (each identical group counts once).
    #[must_use]
    pub fn started(&self) -> u64 {
        self.started.load(Ordering::SeqCst)
    }

    /// Distinct computations in flight now.
    #[must_use]
    pub fn in_flight(&self) -> usize {
        self.lock().inflight.len()
    }

    /// Seconds after which a refused request should try again: the mean
    /// duration of recent computations, at least one second.
    fn retry_after(state: &State<T>) -> u64 {
        if state.recent.is_empty() {
            return 5;
        }
        let total: Duration = state.recent.iter().sum();
        let mean = total.as_secs_f64() / state.recent.len() as f64;
        mean.ceil().max(1.0) as u64
    }

    /// The result for `key`: from the cache, by joining an identical
    /// computation in flight, or by starting `work` (refused as
    /// [`ServiceError::Busy`] when `capacity` computations are in flight).
    /// `on_cancel` runs when every waiter has gone before the end.
    ///
    /// # Errors
    /// Busy, or the computation's own error.
    pub async fn run<Fut>(
        self: &Arc<Self>,
        key: String,
        work: Fut,
        on_cancel: impl FnOnce() + Send + 'static,
    ) -> ServiceResult<Arc<T>>
    where
        Fut: Future<Output = ServiceResult<T>> + Send + 'static,
    {
        let (id, mut rx) = {
            let mut state = self.lock();
            if let Some(pos) = state.cache.iter().position(|(k, _)| *k == key) {
                if let Some(hit) = state.cache.remove(pos) {
                    let value = hit.1.clone();
                    state.cache.push_back(hit);
                    return Ok(value);
                }
            }
            if let Some(flight) = state.inflight.get_mut(&key) {
                flight.waiters += 1;
                (flight.id, flight.rx.clone())
            } else {
                if state.inflight.len() >= self.capacity {
                    return Err(ServiceError::Busy(Self::retry_after(&state)));
                }
                let id = self.next_id.fetch_add(1, Ordering::SeqCst);
                self.started.fetch_add(1, Ordering::SeqCst);
                let (tx, rx) = watch::channel(None);
                let jobs = self.clone();
                let task_key = key.clone();
                let started = Instant::now();
                let handle = tokio::spawn(async move {
                    let outcome = work.await;
                    jobs.finish(&task_key, id, started.elapsed(), outcome, &tx);
                });
                state.inflight.insert(
                    key.clone(),
                    Flight {
                        id,
                        rx: rx.clone(),
                        waiters: 1,
                        abort: handle.abort_handle(),
                        on_cancel: Some(Box::new(on_cancel)),
                    },
                );
                (id, rx)
            }
        };
        let mut waiter = Waiter {
            jobs: self.clone(),
            key,
            id,
            done: false,
        };
        let outcome = rx
            .wait_for(Option::is_some)
            .await
            .map_err(|_| ServiceError::Cancelled)?
            .clone();
        waiter.done = true;
        match outcome {
            Some(Ok(value)) => Ok(value),
            Some(Err(e)) => Err(ServiceError::clone(&e)),
            None => Err(ServiceError::Cancelled),
        }
    }

    fn finish(
        &self,
        key: &str,
        id: u64,
        took: Duration,
        outcome: ServiceResult<T>,
        tx: &watch::Sender<Outcome<T>>,
    ) {
        let outcome = outcome.map(Arc::new).map_err(Arc::new);
        {
            let mut state = self.lock();
            if state.inflight.get(key).is_some_and(|f| f.id == id) {
                state.inflight.remove(key);
            }
            state.recent.push_back(took);
            if state.recent.len() > 8 {
                state.recent.pop_front();
            }
            if let Ok(value) = &outcome {
                if self.cache_size > 0 {
                    state.cache.push_back((key.to_string(), value.clone()));
                    while state.cache.len() > self.cache_size {
                        state.cache.pop_front();
                    }
                }
            }
        }
        // Nobody listening is fine: every waiter went away.
        let _ = tx.send(Some(outcome));
    }

    fn leave(&self, key: &str, id: u64) {
        let cancel = {
            let mut state = self.lock();
            let Some(flight) = state.inflight.get_mut(key) else {
                return;
            };
            if flight.id != id {
                return;
            }
            flight.waiters = flight.waiters.saturating_sub(1);
            if flight.waiters > 0 {
                return;
            }
            state.inflight.remove(key)
        };
        if let Some(mut flight) = cancel {
            flight.abort.abort();
            if let Some(f) = flight.on_cancel.take() {
                f();
            }
        }
    }
}

/// One waiter of a shared computation; leaving early (the client went away)
/// cancels the computation when nobody else waits.
struct Waiter<T: Send + Sync + 'static> {
    jobs: Arc<SharedJobs<T>>,
    key: String,
    id: u64,
    done: bool,
}

impl<T: Send + Sync + 'static> Drop for Waiter<T> {
    fn drop(&mut self) {
        if !self.done {
            self.jobs.leave(&self.key, self.id);
        }
    }
}

impl Service {
    /// [`Service::fit`] shared between identical requests: same dataset
    /// content and metadata, method, windows and options (seed included)
    /// compute once; finished results are cached; a new computation beyond
    /// the limit is refused at once as busy; a computation whose every
    /// client went away is cancelled. The answer names the asking session's
    /// dataset.
    ///
    /// # Errors
    /// As [`Service::fit`], and Busy with a retry time.
    pub async fn fit_shared(
        &self,
        access: &Access,
        dataset: i64,
        mut request: FitRequest,
    ) -> ServiceResult<Arc<FitResult>> {
        let (summary, _) = self.dataset(access, dataset).await?;
        let key = format!(
            "{}|{:?}|{:?}|{:?}|{:?}",
            summary.content_hash,
            summary.meta,
            request.method,
            request.windows,
            request.options.clone().unwrap_or_default()
        );
        let job = match &request.job {
            Some(job) => job.clone(),
            None => format!("shared-{}", self.shared_fits.next_id.load(Ordering::SeqCst)),
        };
        request.job = Some(job.clone());
        let service = self.clone();
        let owner = access.clone();
        let canceller = self.clone();
        let asker = access.clone();
        let result = self
            .shared_fits
            .run(
                key,
                async move { service.fit(&owner, dataset, request).await },
                move || {
                    let _ = canceller.cancel_job(&asker, &job);
                },
            )
            .await?;
        if result.dataset == dataset && result.dataset_name == summary.name {
            Ok(result)
        } else {
            let mut mine = (*result).clone();
            mine.dataset = dataset;
            mine.dataset_name = summary.name;
            Ok(Arc::new(mine))
        }
    }

    /// Shared fit computations started so far (for tests and the console).
    #[must_use]
    pub fn shared_fits_started(&self) -> u64 {
        self.shared_fits.started()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::sync::atomic::AtomicBool;

    #[tokio::test]
    async fn identical_requests_compute_once_and_share() {
        let jobs = Arc::new(SharedJobs::<u32>::new(2, 4));
        let gate = Arc::new(tokio::sync::Notify::new());
        let mut waiters = Vec::new();
        for _ in 0..12 {
            let (jobs, gate) = (jobs.clone(), gate.clone());
            waiters.push(tokio::spawn(async move {
                jobs.run(
                    "same".into(),
                    async move {
                        gate.notified().await;
                        Ok(42)
                    },
                    || {},
                )
                .await
            }));
        }
        while jobs.in_flight() == 0 {
            tokio::task::yield_now().await;
        }
        // Let every waiter join before the work may finish.
        for _ in 0..50 {
            tokio::task::yield_now().await;
        }
        gate.notify_one();
        for w in waiters {
            assert_eq!(*w.await.expect("joins").expect("result"), 42);
        }
        assert_eq!(jobs.started(), 1);
        // A later identical request is served from the cache.
        let again = jobs
            .run("same".into(), async { Ok(7) }, || {})
            .await
            .expect("cached");
        assert_eq!(*again, 42);
        assert_eq!(jobs.started(), 1);
    }

    #[tokio::test]
    async fn a_request_beyond_capacity_is_busy_at_once() {
        let jobs = Arc::new(SharedJobs::<u32>::new(1, 4));
        let gate = Arc::new(tokio::sync::Notify::new());
        let (j, g) = (jobs.clone(), gate.clone());
        let first = tokio::spawn(async move {
            j.run(
                "a".into(),
                async move {
                    g.notified().await;
                    Ok(1)
                },
                || {},
            )
            .await
        });
        while jobs.in_flight() == 0 {
            tokio::task::yield_now().await;
        }
        let other = jobs.run("b".into(), async { Ok(2) }, || {}).await;
        assert!(
            matches!(other, Err(ServiceError::Busy(s)) if s >= 1),
            "{other:?}"
        );
        gate.notify_one();
        assert_eq!(*first.await.expect("joins").expect("ok"), 1);
        assert_eq!(
            *jobs
                .run("b".into(), async { Ok(2) }, || {})
                .await
                .expect("free"),
            2
        );
    }

    #[tokio::test]
    async fn work_nobody_waits_for_is_cancelled() {
        let jobs = Arc::new(SharedJobs::<u32>::new(2, 4));
        let cancelled = Arc::new(AtomicBool::new(false));
        let flag = cancelled.clone();
        let pending = jobs.run(
            "slow".into(),
            std::future::pending::<ServiceResult<u32>>(),
            move || flag.store(true, Ordering::SeqCst),
        );
        // The client goes away after a short wait.
        let gone = tokio::time::timeout(Duration::from_millis(20), pending).await;
        assert!(gone.is_err());
        assert!(cancelled.load(Ordering::SeqCst));
        assert_eq!(jobs.in_flight(), 0);
    }

    #[tokio::test]
    async fn errors_are_shared_but_not_cached() {
        let jobs = Arc::new(SharedJobs::<u32>::new(2, 4));
        let first = jobs
            .run(
                "bad".into(),
                async { Err(ServiceError::BadRequest("field `x`".into())) },
                || {},
            )
            .await;
        assert!(matches!(first, Err(ServiceError::BadRequest(_))));
        let second = jobs.run("bad".into(), async { Ok(3) }, || {}).await;
        assert_eq!(*second.expect("recomputed"), 3);
        assert_eq!(jobs.started(), 2);
    }
}
