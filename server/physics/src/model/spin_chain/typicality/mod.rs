//! Infinite-temperature correlations of a [`SpinChain`] by dynamical
//! typicality (N ≤ 24): random vectors stand in for the trace, and a Lanczos
//! (Krylov) propagator evolves them sector by sector with a Hamiltonian that
//! is applied without being stored (see `operator.rs`).
//!
//! Owns: the estimator, its statistical error, the Krylov propagator and its
//! step control, the memory plan, and the per-sample random streams. Must not
//! know: files, the server's threads or wire formats; progress and
//! cancellation come in as a callback and a flag.
//!
//! Estimator (derivable; the typicality identity E⟨ψ|A|ψ⟩ = Tr A for a vector
//! of independent standard complex Gaussian amplitudes is common practice).
//! With the projector Π_j = (1 + σᶻ_j)/2 and Tr σᶻ_i(t) = Tr σᶻ_i,
//!
//!   Tr_k[σᶻ_i(t) σᶻ_j] = 2 Tr_k[Π_j σᶻ_i(t) Π_j] − Tr_k σᶻ_i
//!
//! in every magnetisation sector k. Let |φ⟩ be Gaussian on the D = C(N−1, k−1)
//! basis states of sector k with spin j up (that is, Π_j applied to a Gaussian
//! vector of the sector). Its direction is uniform (Haar) on that subspace, so
//! ⟨φ(t)|σᶻ_i|φ(t)⟩ / ⟨φ|φ⟩ is an unbiased estimate of Tr_k[Π_j σᶻ_i(t) Π_j]/D
//! whose variance is O(1/D). Normalising sector by sector removes the
//! fluctuation of the sector norms, makes C_jj(0) = 1 exactly and makes the
//! sum rule Σ_i C_ij(t) = 1 hold for every single sample, because Σ_i σᶻ_i is
//! the constant 2k − N in sector k. The estimate of C_ij(t) is
//!
//!   2^-N Σ_{k ≤ N/2} w_k [2 D_k ⟨φ_k(t)|σᶻ_i|φ_k(t)⟩/⟨φ_k|φ_k⟩ − d_k (2k − N)/N],
//!
//! w_k the spin-flip weight (module [`super`]). Every sector draws its own
//! vectors ([`vectors_in_sector`]); `errors` adds the standard errors of the
//! sector means in quadrature, of order 2^{1−N/2}/√samples.
//!
//! Propagation: Lanczos for the exponential, ψ(t_0 + τ) ≈ ‖ψ‖ Q_m e^{−iτT_m} e_1
//! (Saad, SIAM J. Numer. Anal. 29, 209 (1992)), without reorthogonalisation,
//! which the exponential tolerates (Druskin, Greenbaum & Knizhnerman, SIAM J.
//! Sci. Comput. 19, 38 (1998); both from memory). One Krylov space serves every
//! output time it covers: a step τ is accepted when the a-posteriori estimate
//! β_m |e_mᵀ e^{−iτT_m} e_1| of the relative state error is at most the step
//! tolerance; the propagator then restarts from the largest accepted τ.
//! Errors of the restarts add; their sum, doubled (a ratio of quadratic
//! forms), is reported as `propagation_error`.
//!
//! The default step tolerance, 1e-8, sits far below the statistical error it
//! is added to: that error is about 2^{1−N/2}/√samples, at least 2·10⁻⁵ for
//! N ≤ 24 and up to 10⁴ samples, while a run restarts a few tens of times at
//! most, so the propagation bound stays near 10⁻⁷ (printed by the bench:
//! 5·10⁻⁸ at 20 sites). Tightening it to 1e-12 cost about a fifth more
//! Hamiltonian applications for no visible change in any result.

use crate::numerics::stats::standard_normal;
use std::sync::atomic::{AtomicBool, AtomicU64, Ordering};

use ndarray::Array2;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;

use super::{MAX_TYPICAL_SITES, Sector, SpinChain, SpinChainError, binomial};
use crate::model::correlation_map::CorrelationMap;
use crate::numerics::linalg::{LinalgError, symmetric_eigen};

mod krylov;
mod operator;

use krylov::*;
use operator::*;

/// Default memory limit for one typicality run: 2 GiB.
pub const DEFAULT_MEMORY_LIMIT_BYTES: u64 = 2 << 30;

/// Default relative state error accepted per Krylov step.
pub const DEFAULT_STEP_TOLERANCE: f64 = 1e-8;

/// Largest Krylov dimension: a longer space covers a longer time per
/// Hamiltonian application (the first ~log(1/tol) vectors are overhead), at
/// the cost of one stored vector per dimension. For N = 16–20, α = 1 and
/// t ≤ 10, 128 needed about a quarter fewer applications than 64.
const MAX_KRYLOV_DIM: usize = 128;

/// Smallest Krylov dimension the memory plan may fall back to before it
/// refuses; below this most of each space is overhead.
const MIN_KRYLOV_DIM: usize = 24;

/// Fewest Krylov steps between two convergence checks of the whole
/// remaining time interval (large sectors; small ones check less often).
const CHECK_EVERY: usize = 4;

/// Rows per block when several output states are assembled and measured
/// together (their partial states stay in the core's cache).
const MEASURE_ROWS: usize = 512;

/// Blocks (basis words with one high half, see [`SectorOperator`]) per
/// parallel task at least.
const BLOCKS_PER_TASK: usize = 8;

/// Rows per parallel task in the sparse products (large enough that the
/// scheduling cost is negligible, small enough to balance two cores).
const ROWS_PER_TASK: usize = 4096;

/// Bytes the Krylov vectors of one vector in flight may take before the
/// plan shortens the Krylov space: 256 MiB keeps a 20-site run under 300 MB
/// with 87 dimensions.
const KRYLOV_BUDGET_BYTES: u64 = 256 << 20;

/// Krylov dimension the plan grants beyond [`KRYLOV_BUDGET_BYTES`] when the
/// memory limit allows (22 and 24 sites): with a shorter space most of
/// each restart is spent before the error estimate falls (measured at 20
/// sites, α = 1.2, tolerance 1e-8: a 65-dimensional space advances 2.6 time
/// units, 44 dimensions' worth of the spectral width).
const LONG_CHAIN_KRYLOV_DIM: usize = 64;

/// Sectors smaller than this propagate several vectors at once (one per
/// thread); larger ones propagate one vector at a time, parallel over
/// amplitudes, so that only one set of Krylov vectors is in memory.
const SMALL_SECTOR: usize = 1 << 14;

/// Largest factor by which a small sector gets more vectors than the
/// largest one (see [`vectors_in_sector`]).
const MAX_VECTOR_FACTOR: usize = 16;

/// Options of a typicality run.
#[derive(Debug, Clone, PartialEq)]
pub struct TypicalityOptions {
    /// Number of independent random vectors in the largest sector (≥ 2, to
    /// state an error); smaller sectors get more (see [`vectors_in_sector`]).
    pub samples: usize,
    /// Seed of the per-sample ChaCha8 streams.
    pub seed: u64,
    /// Refuse up front when the memory plan exceeds this many bytes.
    pub memory_limit_bytes: u64,
    /// Accepted relative state error per Krylov step, in (0, 1e-3].
    pub step_tolerance: f64,
}

impl TypicalityOptions {
    /// `samples` vectors from `seed`, 2 GiB limit, 1e-8 step tolerance.
    #[must_use]
    pub fn new(samples: usize, seed: u64) -> Self {
        Self {
            samples,
            seed,
            memory_limit_bytes: DEFAULT_MEMORY_LIMIT_BYTES,
            step_tolerance: DEFAULT_STEP_TOLERANCE,
        }
    }
}

/// How a typicality run uses memory, decided before it starts.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct MemoryPlan {
    /// Estimated peak bytes (Krylov vectors of the largest sector, its basis
    /// and diagonal, index tables, per-vector results).
    pub bytes: u64,
    /// Largest Krylov dimension used.
    pub krylov_dim: usize,
    /// Vectors propagated at the same time in the largest sector (1: the
    /// threads share the amplitudes of one vector).
    pub concurrent_samples: usize,
}

/// Typicality estimate of C_{i,source}(t), `[time, site]`, in the order of the
/// requested times.
#[derive(Debug, Clone, PartialEq)]
pub struct TypicalityResult {
    /// Mean over samples.
    pub values: Array2<f64>,
    /// Standard error of the mean over samples (0 where every sample agrees
    /// exactly, as for C_jj(0)).
    pub errors: Array2<f64>,
    pub samples: usize,
    pub seed: u64,
    pub source: usize,
    pub times: Vec<f64>,
    /// Bound on the deterministic error of each value from the Krylov
    /// propagation (sum of accepted step-error estimates, doubled).
    pub propagation_error: f64,
    /// The memory plan the run used.
    pub memory: MemoryPlan,
    /// Hamiltonian applications summed over every propagated vector.
    pub applications: u64,
    /// Number of propagated vectors (over all sectors).
    pub vectors: usize,
}

impl TypicalityResult {
    /// The result as a [`CorrelationMap`] (x = i − source) whose errors are the
    /// standard errors, raised where smaller to the propagation bound (and to
    /// machine epsilon), so that every error is positive as the map requires.
    ///
    /// # Errors
    /// [`SpinChainError::Map`] when the times are not strictly increasing.
    pub fn to_correlation_map(&self) -> Result<CorrelationMap, SpinChainError> {
        let floor = self.propagation_error.max(f64::EPSILON);
        let errors = self.errors.mapv(|e| e.max(floor));
        super::to_correlation_map(&self.values, Some(&errors), self.source, &self.times)
    }
}

/// Number of random vectors drawn in sector `up` when the largest sector
/// gets `samples`: samples · min(16, ⌊√(d_max/d_k)⌋).
///
/// The normalised sector estimate fluctuates by about 1/√d_k relative to its
/// size (typicality, common practice), so small sectors are the noisiest per
/// vector, while a vector there costs d_k/d_max of one in the largest sector.
/// Drawing more where a sector is small evens the sectors' relative errors
/// almost for free. The floor keeps every sector of at least a quarter of the
/// largest dimension at `samples` vectors, so that `samples` means what it
/// says where the cost is. For 20 sites, rounding up instead would draw twice
/// the vectors in the sectors k = 7, 8, 9: 1.6 times the work for an error
/// 1.3 times smaller, the same error per unit of work within 10 % (variance
/// Σ_k w_k² D_k/n_k against cost Σ_k n_k d_k k(N − k); our own arithmetic).
#[must_use]
pub fn vectors_in_sector(sites: usize, up: usize, samples: usize) -> usize {
    let largest = binomial(sites, sites / 2) as f64;
    let dim = binomial(sites, up).max(1) as f64;
    let factor = ((largest / dim).sqrt().floor() as usize).clamp(1, MAX_VECTOR_FACTOR);
    samples * factor
}

/// The memory plan of a typicality run, decided from the largest sector
/// (d = C(N, ⌊N/2⌋)): the Krylov dimension is the largest in [24, 128]
/// whose vectors fit 256 MiB, but at least 64, shortened (never below 24)
/// when the whole plan would exceed `limit_bytes`; vectors of large sectors are
/// propagated one at a time with the threads sharing its amplitudes.
///
/// # Errors
/// [`SpinChainError::MemoryLimit`] when not even the smallest Krylov space
/// fits; [`SpinChainError::TooLargeForTypicality`] beyond
/// [`MAX_TYPICAL_SITES`] sites.
pub fn memory_plan(
    chain: &SpinChain,
    samples: usize,
    n_times: usize,
    limit_bytes: u64,
) -> Result<MemoryPlan, SpinChainError> {
    let sites = chain.sites();
    if sites > MAX_TYPICAL_SITES {
        return Err(SpinChainError::TooLargeForTypicality {
            sites,
            max: MAX_TYPICAL_SITES,
        });
    }
    let d = binomial(sites, sites / 2) as u64;
    // Basis words, diagonal, two rank tables, per-vector results.
    let tables = (((sites / 2 + 2) as u64) << (sites - sites / 2)) * 4;
    let results: u64 = (0..=sites / 2)
        .map(|k| (vectors_in_sector(sites, k, samples) * n_times * sites * 8) as u64)
        .sum();
    let fixed = d * 4 + d * 8 + tables + results;
    // Krylov vectors plus w, ψ and the measured block, 16 bytes per amplitude.
    let vectors = |dim: usize| (dim as u64 + 3) * d * 16;
    let preferred = (MIN_KRYLOV_DIM..=MAX_KRYLOV_DIM)
        .rev()
        .find(|&m| vectors(m) <= KRYLOV_BUDGET_BYTES)
        .unwrap_or(MIN_KRYLOV_DIM)
        .max(LONG_CHAIN_KRYLOV_DIM);
    let krylov_dim = (MIN_KRYLOV_DIM..=preferred)
        .rev()
        .find(|&m| fixed + vectors(m) <= limit_bytes)
        .ok_or_else(|| SpinChainError::MemoryLimit {
            sites,
            needed_bytes: fixed + vectors(MIN_KRYLOV_DIM),
            limit_bytes,
            detail: format!(
                "{} bytes for {MIN_KRYLOV_DIM} + 3 Krylov vectors of the largest sector \
                 (dimension {d}) and {fixed} bytes for its basis, diagonal and results",
                vectors(MIN_KRYLOV_DIM)
            ),
        })?;
    let concurrent_samples = if (d as usize) < SMALL_SECTOR {
        rayon::current_num_threads().min(samples).max(1)
    } else {
        1
    };
    Ok(MemoryPlan {
        bytes: fixed + concurrent_samples as u64 * vectors(krylov_dim),
        krylov_dim,
        concurrent_samples,
    })
}

/// A standard complex Gaussian amplitude (E|z|² = 2): two independent
/// standard normal parts from the crate's one sampler (`numerics::stats`).
fn gaussian(rng: &mut ChaCha8Rng) -> Amp {
    let re = standard_normal(rng);
    Amp::new(re, standard_normal(rng))
}

/// What one random vector of one sector measured: ⟨φ(t)|σᶻ_i|φ(t)⟩/⟨φ|φ⟩
/// as a `[time, site]` array in the order of the requested times. A run is
/// the list of these records; [`reduce`] turns any complete list, in any
/// order, into the same bits, which is what lets a run be split into shards.
#[derive(Debug, Clone, PartialEq)]
pub struct VectorRecord {
    /// Up-spin number k of the sector (k ≤ N/2).
    pub up: usize,
    /// Index of the vector within its sector (its random stream).
    pub vector: usize,
    pub ratios: Array2<f64>,
    /// Accumulated relative error estimate of its Krylov propagation.
    pub propagation_error: f64,
    /// Hamiltonian applications its propagation took.
    pub applications: u64,
}

/// Every (sector, vector) pair of a run in its canonical order: sectors
/// k = 1 … ⌊N/2⌋ (k = 0 has no state with the source up), vectors in order.
#[must_use]
pub fn vector_ids(sites: usize, samples: usize) -> Vec<(usize, usize)> {
    (1..=sites / 2)
        .flat_map(|k| (0..vectors_in_sector(sites, k, samples)).map(move |v| (k, v)))
        .collect()
}

fn check_options(
    chain: &SpinChain,
    source: usize,
    times: &[f64],
    options: &TypicalityOptions,
) -> Result<MemoryPlan, SpinChainError> {
    let sites = chain.sites();
    if sites > MAX_TYPICAL_SITES {
        return Err(SpinChainError::TooLargeForTypicality {
            sites,
            max: MAX_TYPICAL_SITES,
        });
    }
    if options.samples < 2 {
        return Err(SpinChainError::TooFewSamples(options.samples));
    }
    let tol = options.step_tolerance;
    if !(tol > 0.0 && tol <= 1e-3) {
        return Err(SpinChainError::BadTolerance(tol));
    }
    chain.check_source_and_times(source, times)?;
    memory_plan(
        chain,
        options.samples,
        times.len(),
        options.memory_limit_bytes,
    )
}

/// Propagates the vectors `select` keeps (out of [`vector_ids`]) and returns
/// their records in canonical order. Progress counts basis states times
/// output times over the selected vectors.
///
/// # Errors
/// As [`SpinChain::correlations_typical_with`].
pub fn vector_records(
    chain: &SpinChain,
    source: usize,
    times: &[f64],
    options: &TypicalityOptions,
    select: &(dyn Fn(usize, usize) -> bool + Sync),
    progress: &(dyn Fn(f64) + Sync),
    cancel: &AtomicBool,
) -> Result<Vec<VectorRecord>, SpinChainError> {
    let plan = check_options(chain, source, times, options)?;
    let sites = chain.sites();
    let n_times = times.len();
    let mut order: Vec<usize> = (0..n_times).collect();
    order.sort_by(|&a, &b| times[a].total_cmp(&times[b]));
    let sorted: Vec<f64> = order.iter().map(|&k| times[k]).collect();

    let chosen: Vec<(usize, usize)> = vector_ids(sites, options.samples)
        .into_iter()
        .filter(|&(k, v)| select(k, v))
        .collect();
    let total_units: u64 = chosen
        .iter()
        .map(|&(k, _)| (binomial(sites, k) * n_times) as u64)
        .sum();
    let done_units = AtomicU64::new(0);
    let report = |units: u64| {
        let done = done_units.fetch_add(units, Ordering::Relaxed) + units;
        progress((done as f64 / total_units.max(1) as f64).min(1.0));
    };

    let mut records = Vec::with_capacity(chosen.len());
    for up in 1..=sites / 2 {
        let vectors: Vec<usize> = chosen
            .iter()
            .filter(|&&(k, _)| k == up)
            .map(|&(_, v)| v)
            .collect();
        if vectors.is_empty() {
            continue;
        }
        if cancel.load(Ordering::Relaxed) {
            return Err(SpinChainError::Cancelled);
        }
        let sector = Sector::new(sites, up);
        let operator = SectorOperator::build(chain, &sector);
        let propagator = Propagator {
            operator: &operator,
            max_dim: plan.krylov_dim,
            tolerance: options.step_tolerance,
            cancel,
        };
        let dim = sector.dim() as u64;
        let fine_progress = sector.dim() >= ROWS_PER_TASK;
        let concurrent = if sector.dim() < SMALL_SECTOR {
            rayon::current_num_threads().max(1)
        } else {
            1
        };
        let run_one = |vector: usize| -> Result<VectorRecord, SpinChainError> {
            let mut rng = ChaCha8Rng::seed_from_u64(options.seed);
            rng.set_stream(((vector as u64) << 8) | up as u64);
            let start: Vec<Amp> = sector
                .states
                .iter()
                .map(|&s| {
                    if (s >> source) & 1 == 1 {
                        gaussian(&mut rng)
                    } else {
                        Amp::default()
                    }
                })
                .collect();
            let mut ratios = Array2::<f64>::zeros((n_times, sites));
            let (error, applications) = propagator.run(start, &sorted, |indices, outputs| {
                let batch = outputs.magnetisation_ratios(&sector.states, sites);
                for (&k, row) in indices.iter().zip(batch) {
                    ratios
                        .row_mut(order[k])
                        .assign(&ndarray::ArrayView1::from(&row));
                }
                if fine_progress {
                    report(dim * indices.len() as u64);
                }
            })?;
            if !fine_progress {
                report(dim * n_times as u64);
            }
            Ok(VectorRecord {
                up,
                vector,
                ratios,
                propagation_error: error,
                applications,
            })
        };
        for batch in vectors.chunks(concurrent) {
            let outcomes: Vec<Result<VectorRecord, SpinChainError>> = if batch.len() == 1 {
                vec![run_one(batch[0])]
            } else {
                batch.par_iter().map(|&v| run_one(v)).collect()
            };
            for outcome in outcomes {
                records.push(outcome?);
            }
        }
    }
    Ok(records)
}

/// Combines the records of a complete run into the estimate (see the
/// module documentation). The records are put in canonical order first and
/// every sum runs in that order, so the bits do not depend on how the run
/// was split or in which order shards arrive.
///
/// # Errors
/// [`SpinChainError::IncompleteRun`] when a (sector, vector) pair is missing,
/// repeated or foreign to the run, or a record's shape is wrong; the other
/// errors of the options as in [`SpinChain::correlations_typical_with`].
pub fn reduce(
    chain: &SpinChain,
    source: usize,
    times: &[f64],
    options: &TypicalityOptions,
    mut records: Vec<VectorRecord>,
) -> Result<TypicalityResult, SpinChainError> {
    let plan = check_options(chain, source, times, options)?;
    let sites = chain.sites();
    let n_times = times.len();
    records.sort_by_key(|r| (r.up, r.vector));
    let expected = vector_ids(sites, options.samples);
    let found: Vec<(usize, usize)> = records.iter().map(|r| (r.up, r.vector)).collect();
    if found != expected {
        let missing = expected.iter().filter(|id| !found.contains(id)).count();
        return Err(SpinChainError::IncompleteRun {
            expected: expected.len(),
            found: found.len(),
            missing,
        });
    }
    if let Some(bad) = records.iter().find(|r| r.ratios.dim() != (n_times, sites)) {
        return Err(SpinChainError::IncompleteRun {
            expected: n_times * sites,
            found: bad.ratios.len(),
            missing: 0,
        });
    }
    let norm_factor = 1.0 / (1u64 << sites) as f64;
    let mut values = Array2::<f64>::zeros((n_times, sites));
    let mut variance = Array2::<f64>::zeros((n_times, sites));
    let mut propagation_error = 0.0f64;
    for up in 0..=sites / 2 {
        let sector_dim = binomial(sites, up);
        let weight = if 2 * up == sites { 1.0 } else { 2.0 } * norm_factor;
        // Tr_k σᶻ_i = d_k (2k − N)/N for every site i, since a fraction k/N
        // of the sector's basis has spin i up.
        let trace = sector_dim as f64 * (2.0 * up as f64 - sites as f64) / sites as f64;
        let offset = -weight * trace;
        values.mapv_inplace(|v| v + offset);
        let group: Vec<&VectorRecord> = records.iter().filter(|r| r.up == up).collect();
        if group.is_empty() {
            // k = 0: no state has the source up, only the constant remains.
            continue;
        }
        let count = group.len() as f64;
        let scale = weight * 2.0 * binomial(sites - 1, up - 1) as f64;
        let mut mean = Array2::<f64>::zeros((n_times, sites));
        for record in &group {
            mean += &record.ratios;
            propagation_error = propagation_error.max(2.0 * record.propagation_error);
        }
        mean.mapv_inplace(|m| m / count);
        // Two passes (mean first, then squared deviations) so that values every
        // vector reproduces exactly, such as C_jj(0) = 1, get an error of 0
        // rather than the rounding residue of Σx² − S x̄².
        let mut squares = Array2::<f64>::zeros((n_times, sites));
        for record in &group {
            ndarray::Zip::from(&mut squares)
                .and(&record.ratios)
                .and(&mean)
                .for_each(|s, &x, &m| *s += (x - m) * (x - m));
        }
        // Variance of the sector mean with the unbiased sample variance.
        ndarray::Zip::from(&mut values)
            .and(&mut variance)
            .and(&mean)
            .and(&squares)
            .for_each(|v, var, &m, &sq| {
                *v += scale * m;
                *var += scale * scale * sq / (count - 1.0) / count;
            });
    }
    Ok(TypicalityResult {
        values,
        errors: variance.mapv(f64::sqrt),
        samples: options.samples,
        seed: options.seed,
        source,
        times: times.to_vec(),
        propagation_error,
        memory: plan,
        applications: records.iter().map(|r| r.applications).sum(),
        vectors: records.len(),
    })
}

/// See the module documentation.
pub(super) fn correlations(
    chain: &SpinChain,
    source: usize,
    times: &[f64],
    options: &TypicalityOptions,
    progress: &(dyn Fn(f64) + Sync),
    cancel: &AtomicBool,
) -> Result<TypicalityResult, SpinChainError> {
    let records = vector_records(
        chain,
        source,
        times,
        options,
        &|_, _| true,
        progress,
        cancel,
    )?;
    let result = reduce(chain, source, times, options, records)?;
    progress(1.0);
    Ok(result)
}

#[cfg(test)]
mod tests;
