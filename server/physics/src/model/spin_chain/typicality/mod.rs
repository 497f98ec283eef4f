//! Infinite-temperature correlations of a [`SpinChain`] by dynamical
//! typicality (N ≤ 24): random vectors stand in for the trace, and a
//! Chebyshev propagator evolves them sector by sector with a Hamiltonian that
//! is applied without being stored (see `operator.rs`, `chebyshev.rs`).
//!
//! Owns: the estimator, its statistical error, the propagator and its
//! tolerance, the memory plan, and the per-sample random streams. Must not
//! know: files, the server's threads or wire formats; progress and
//! cancellation come in as a callback and a flag.
//!
//! Estimator (derivable; the typicality identity E⟨ψ|A|ψ⟩ = Tr A for a vector
//! of independent standard Gaussian amplitudes is common practice).
//! With the projector Π_j = (1 + σᶻ_j)/2 and Tr σᶻ_i(t) = Tr σᶻ_i,
//!
//!   Tr_k[σᶻ_i(t) σᶻ_j] = 2 Tr_k[Π_j σᶻ_i(t) Π_j] − Tr_k σᶻ_i
//!
//! in every magnetisation sector k. Let |φ⟩ have independent real standard
//! Gaussian amplitudes on the D = C(N−1, k−1) basis states of sector k with
//! spin j up (Π_j applied to a Gaussian vector of the sector). Its direction
//! is uniform on the real sphere of that subspace, so
//! ⟨φ(t)|σᶻ_i|φ(t)⟩ / ⟨φ|φ⟩ = φᵀ Re A φ / φᵀφ, A = Π_j σᶻ_i(t) Π_j, is an
//! unbiased estimate of Tr_k A / D whose variance is O(1/D).
//!
//! Real vectors, not complex ones: H and σᶻ are real, so the conjugate of
//! A(t) is A(−t), and the variance of the real estimate exceeds that of a
//! complex Gaussian vector by the term Tr[A(t) A(−t)], a correlation at time
//! 2t that has decayed at the times that matter (our own arithmetic; at
//! t = 0 the real variance is twice the complex one). A real vector's
//! Chebyshev recursion is real, half the work and memory of a complex one,
//! so at late times a real vector buys the same error for half the cost.
//! The stated errors come from the spread of the samples either way. Normalising sector by sector removes the
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
//! Propagation: Chebyshev expansion of the exponential (H. Tal-Ezer and
//! R. Kosloff, J. Chem. Phys. 81, 3967 (1984), from memory),
//! e^{−iHτ} = e^{−ieτ} [J_0(hτ) + 2 Σ_{n≥1} (−i)^n J_n(hτ) T_n(H̃)] with
//! H̃ = (H − e)/h and the sector's spectrum inside [e − h, e + h]. One
//! expansion serves every output time of a stretch: the terms
//! T_n(H̃)ψ follow from T_{n+1} = 2H̃T_n − T_{n−1}, a window of them is kept
//! and added into every output state block by block, so each term is read
//! once for all times. The series is cut where 2 Σ_{n>N} |J_n(hτ)| (a bound
//! on the relative state error, as ‖T_n(H̃)‖ ≤ 1) falls below the step
//! tolerance; when the output states do not all fit the memory plan the
//! expansion restarts from the last state of a stretch and the bounds add.
//! Their largest sum, doubled (a ratio of quadratic forms), is reported as
//! `propagation_error`.
//!
//! The interval [e − h, e + h] comes from a short Lanczos run per sector
//! (`chebyshev::spectrum`), widened by the residuals of its extreme Ritz
//! pairs and a margin; should the spectrum still reach outside, the norm of
//! some T_n ψ exceeds ‖ψ‖, which the propagator checks at every term and
//! refuses ([`SpinChainError::SpectralBound`]) rather than return a wrong
//! result.
//!
//! Several vectors of a sector ("lanes", up to [`MAX_LANES`]) are
//! propagated together: one pass over the Hamiltonian's tables serves every
//! lane, and every lane's arithmetic is the same as if it ran alone, so
//! results do not depend on which vectors share a pass (nor on the thread
//! count). Compared with the Lanczos propagator this module used before, at
//! 20 sites the Chebyshev run needs no orthogonalisation or stored Krylov
//! basis and about the same number of Hamiltonian applications per vector.
//!
//! The default step tolerance, 1e-8, sits far below the statistical error it
//! is added to: that error is about 2^{1−N/2}/√samples, at least 2·10⁻⁵ for
//! N ≤ 24 and up to 10⁴ samples.

use crate::numerics::stats::standard_normal;
use std::sync::atomic::{AtomicBool, AtomicU64, Ordering};

use ndarray::Array2;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;

use super::{MAX_TYPICAL_SITES, Sector, SpinChain, SpinChainError, binomial};
use crate::model::correlation_map::CorrelationMap;
use crate::numerics::linalg::symmetric_eigen;
use crate::numerics::special::bessel_j;

mod chebyshev;
mod operator;

use chebyshev::*;
use operator::*;

/// Default memory limit for one typicality run: 2 GiB.
pub const DEFAULT_MEMORY_LIMIT_BYTES: u64 = 2 << 30;

/// Default bound on the relative state error of one expansion.
pub const DEFAULT_STEP_TOLERANCE: f64 = 1e-8;

/// Most vectors propagated together (see the module documentation).
pub const MAX_LANES: usize = 4;

/// Chebyshev terms kept before they are added into the output states: the
/// outputs are read and written once per window, so their memory traffic
/// per term falls as 1/window while the window's own vectors cost memory.
const WINDOW: usize = 12;

/// Smallest window the memory plan may fall back to.
const MIN_WINDOW: usize = 3;

/// Most output states held at once (more times restart the expansion).
const MAX_SLOTS: usize = 64;

/// Sectors smaller than this propagate several groups of lanes at once
/// (one per thread); larger ones one group at a time, parallel over rows.
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
    /// Bound on the relative state error of one Chebyshev expansion, in
    /// (0, 1e-3].
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
    /// Estimated peak bytes (the propagation vectors of the largest sector,
    /// its basis and diagonal, per-vector results).
    pub bytes: u64,
    /// Vectors propagated together in the largest sector.
    pub lanes: usize,
    /// Chebyshev terms kept between additions into the outputs.
    pub window: usize,
    /// Output states held at once (fewer than the times: the expansion
    /// restarts).
    pub slots: usize,
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
    /// Bound on the deterministic error of each value from the Chebyshev
    /// propagation (sum of the expansions' tail bounds, doubled).
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
/// (d = C(N, ⌊N/2⌋)): [`MAX_LANES`] vectors together when their window of
/// `WINDOW` (12) Chebyshev terms and every output state fit `limit_bytes`, else
/// one vector at a time; then fewer output states held at once (the
/// expansion restarts between them) and a shorter window, before it
/// refuses.
///
/// # Errors
/// [`SpinChainError::MemoryLimit`] when not even one lane with a window of
/// `MIN_WINDOW` (3) terms and one output state fits;
/// [`SpinChainError::TooLargeForTypicality`] beyond [`MAX_TYPICAL_SITES`]
/// sites.
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
    // Basis words, diagonal, rank tables, per-vector results, and the three
    // vectors of the spectral estimate (freed before propagation starts).
    let tables = (1u64 << (sites - sites / 2)) * 4 + (1u64 << (sites / 2)) * 4;
    let results: u64 = (0..=sites / 2)
        .map(|k| (vectors_in_sector(sites, k, samples) * n_times * sites * 8) as u64)
        .sum();
    let fixed = d * 4 + d * 8 + tables + results;
    // Per lane: the window of real terms and the start vector (8 bytes per
    // amplitude), the complex output states (16 bytes).
    let vectors = |lanes: usize, window: usize, slots: usize| {
        ((window as u64 + 1) * 8 + slots as u64 * 16) * d * lanes as u64
    };
    let all_slots = n_times.clamp(1, MAX_SLOTS);
    let mut candidates = Vec::new();
    for lanes in (1..=MAX_LANES.min(samples.max(1))).rev() {
        candidates.push((lanes, WINDOW, all_slots));
    }
    candidates.extend((1..all_slots).rev().map(|slots| (1, WINDOW, slots)));
    candidates.extend((MIN_WINDOW..WINDOW).rev().map(|window| (1, window, 1)));
    let (lanes, window, slots) = candidates
        .into_iter()
        .find(|&(lanes, window, slots)| fixed + vectors(lanes, window, slots) <= limit_bytes)
        .ok_or_else(|| SpinChainError::MemoryLimit {
            sites,
            needed_bytes: fixed + vectors(1, MIN_WINDOW, 1),
            limit_bytes,
            detail: format!(
                "{} bytes for {MIN_WINDOW} Chebyshev terms and one output state of the \
                 largest sector (dimension {d}) and {fixed} bytes for its basis, diagonal \
                 and results",
                vectors(1, MIN_WINDOW, 1)
            ),
        })?;
    Ok(MemoryPlan {
        bytes: fixed + vectors(lanes, window, slots),
        lanes,
        window,
        slots,
    })
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
    // The plan refuses a chain beyond the method's size first.
    let plan = memory_plan(
        chain,
        options.samples,
        times.len(),
        options.memory_limit_bytes,
    );
    if let Err(e @ SpinChainError::TooLargeForTypicality { .. }) = plan {
        return Err(e);
    }
    if options.samples < 2 {
        return Err(SpinChainError::TooFewSamples(options.samples));
    }
    let tol = options.step_tolerance;
    if !(tol > 0.0 && tol <= 1e-3) {
        return Err(SpinChainError::BadTolerance(tol));
    }
    chain.check_source_and_times(source, times)?;
    plan
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
        drop(sector);
        let propagator = Propagator {
            operator: &operator,
            spectrum: spectrum(&operator, up)?,
            up,
            tolerance: options.step_tolerance,
            window: plan.window,
            slots: plan.slots,
            cancel,
        };
        let expansions = propagator.expansions(&sorted);
        let lanes = Lanes {
            propagator: &propagator,
            seed: options.seed,
            source,
            expansions: &expansions,
            order: &order,
            report: &report,
        };
        let run_group = |group: &[usize]| match group.len() {
            4 => lanes.run::<4>(group),
            3 => lanes.run::<3>(group),
            2 => lanes.run::<2>(group),
            _ => lanes.run::<1>(group),
        };
        // Smaller sectors afford more lanes in the memory of the largest.
        let largest = binomial(sites, sites / 2);
        let lanes_here = (plan.lanes * largest / operator.dim()).clamp(1, MAX_LANES);
        let groups: Vec<&[usize]> = vectors.chunks(lanes_here).collect();
        let outcomes: Vec<Result<Vec<VectorRecord>, SpinChainError>> =
            if operator.dim() < SMALL_SECTOR {
                groups.par_iter().map(|g| run_group(g)).collect()
            } else {
                groups.iter().map(|g| run_group(g)).collect()
            };
        for outcome in outcomes {
            records.extend(outcome?);
        }
    }
    Ok(records)
}

/// What the vectors of one sector share while they are propagated.
struct Lanes<'a> {
    propagator: &'a Propagator<'a>,
    seed: u64,
    source: usize,
    /// The expansions of e^{−iHt} at the sorted times, shared by the groups.
    expansions: &'a [(Vec<Amp>, f64)],
    order: &'a [usize],
    report: &'a (dyn Fn(u64) + Sync),
}

impl Lanes<'_> {
    /// Propagates the vectors `group` (B of them) together and returns
    /// their records; every vector draws its start from its own stream.
    fn run<const B: usize>(&self, group: &[usize]) -> Result<Vec<VectorRecord>, SpinChainError> {
        let operator = self.propagator.operator;
        let up = self.propagator.up;
        let sites = operator.sites;
        let n_times = self.expansions.len();
        let dim = operator.dim();
        let mut start = vec![[0.0; B]; dim];
        for (b, &vector) in group.iter().enumerate() {
            let mut rng = ChaCha8Rng::seed_from_u64(self.seed);
            rng.set_stream(((vector as u64) << 8) | up as u64);
            for (amplitude, &state) in start.iter_mut().zip(&operator.states) {
                if (state >> self.source) & 1 == 1 {
                    amplitude[b] = standard_normal(&mut rng);
                }
            }
        }
        let mut ratios = vec![Array2::<f64>::zeros((n_times, sites)); B];
        let units = (dim * B * n_times) as u64;
        let mut reported = 0u64;
        let mut tick = |fraction: f64| {
            let target = ((fraction * units as f64) as u64).min(units);
            if target > reported {
                (self.report)(target - reported);
                reported = target;
            }
        };
        let outcome =
            self.propagator
                .run::<B>(&start, self.expansions, &mut tick, |indices, states| {
                    for (&k, state) in indices.iter().zip(states) {
                        let measured = magnetisation_ratios::<B>(state, &operator.states, sites);
                        for (lane, row) in ratios.iter_mut().zip(measured) {
                            lane.row_mut(self.order[k])
                                .assign(&ndarray::ArrayView1::from(&row));
                        }
                    }
                })?;
        tick(1.0);
        Ok(group
            .iter()
            .zip(ratios)
            .map(|(&vector, ratios)| VectorRecord {
                up,
                vector,
                ratios,
                propagation_error: outcome.error,
                applications: outcome.applications,
            })
            .collect())
    }
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
