//! Infinite-temperature correlations of a [`SpinChain`] by dynamical
//! typicality (N ≤ 22): random vectors stand in for the trace, and a Lanczos
//! (Krylov) propagator evolves them sector by sector with a sparse,
//! bit-built Hamiltonian.
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
//! w_k the spin-flip weight (module [`super`]). Each sample draws fresh
//! vectors in every sector; `errors` is the standard error of the mean over
//! samples, of order 2^{−N/2}/√samples.
//!
//! Propagation: Lanczos for the exponential, ψ(t_0 + τ) ≈ ‖ψ‖ Q_m e^{−iτT_m} e_1
//! (Saad, SIAM J. Numer. Anal. 29, 209 (1992)), without reorthogonalisation,
//! which the exponential tolerates (Druskin, Greenbaum & Knizhnerman, SIAM J.
//! Sci. Comput. 19, 38 (1998); both from memory). One Krylov space serves every
//! output time it covers: a step τ is accepted when the a-posteriori estimate
//! β_m |e_mᵀ e^{−iτT_m} e_1| of the relative state error is at most the step
//! tolerance (default 1e-12); the propagator then restarts from the largest
//! accepted τ. Errors of the restarts add; their sum, doubled (a ratio of
//! quadratic forms), is reported as `propagation_error`.

use std::sync::atomic::{AtomicBool, AtomicU64, Ordering};

use ndarray::Array2;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;

use super::{MAX_TYPICAL_SITES, Sector, SpinChain, SpinChainError, binomial};
use crate::model::correlation_map::CorrelationMap;
use crate::numerics::linalg::{LinalgError, symmetric_eigen};

/// Default memory limit for one typicality run: 2 GiB.
pub const DEFAULT_MEMORY_LIMIT_BYTES: u64 = 2 << 30;

/// Default relative state error accepted per Krylov step.
pub const DEFAULT_STEP_TOLERANCE: f64 = 1e-12;

/// Largest Krylov dimension: a longer space covers a longer time per
/// Hamiltonian application (the first ~log(1/tol) vectors are overhead), at
/// the cost of one stored vector per dimension. For N = 16–20, α = 1 and
/// t ≤ 10, 128 needed about a quarter fewer applications than 64.
const MAX_KRYLOV_DIM: usize = 128;

/// Smallest Krylov dimension the memory plan may fall back to before it
/// refuses; below this most of each space is overhead.
const MIN_KRYLOV_DIM: usize = 24;

/// Krylov steps between two convergence checks of the whole remaining
/// time interval.
const CHECK_EVERY: usize = 4;

/// Rows per block when several output states are assembled and measured
/// together (their partial states stay in the core's cache).
const MEASURE_ROWS: usize = 512;

/// Rows per parallel task in the sparse products (large enough that the
/// scheduling cost is negligible, small enough to balance two cores).
const ROWS_PER_TASK: usize = 4096;

/// A packed sparse entry keeps the column in its low 24 bits and the index of
/// its flip-flop term in the high 8 bits (see `MAX_TYPICAL_SITES`).
const COLUMN_BITS: u32 = 24;
const COLUMN_MASK: u32 = (1 << COLUMN_BITS) - 1;

/// Options of a typicality run.
#[derive(Debug, Clone, PartialEq)]
pub struct TypicalityOptions {
    /// Number of independent random vectors (≥ 2, to state an error).
    pub samples: usize,
    /// Seed of the per-sample ChaCha8 streams.
    pub seed: u64,
    /// Refuse up front when the memory plan exceeds this many bytes.
    pub memory_limit_bytes: u64,
    /// Accepted relative state error per Krylov step, in (0, 1e-3].
    pub step_tolerance: f64,
}

impl TypicalityOptions {
    /// `samples` vectors from `seed`, 2 GiB limit, 1e-12 step tolerance.
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
    /// Estimated peak bytes (sparse Hamiltonian of the largest sector, Krylov
    /// vectors of the samples in flight, per-sample results).
    pub bytes: u64,
    /// Largest Krylov dimension used.
    pub krylov_dim: usize,
    /// Samples propagated at the same time.
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

/// A complex amplitude; H is real, so its real and imaginary parts share the
/// decoding of every sparse entry.
#[derive(Debug, Clone, Copy, Default, PartialEq)]
struct Amp {
    re: f64,
    im: f64,
}

/// The Hamiltonian of one sector as a packed sparse matrix plus diagonal.
#[derive(Debug)]
struct SectorOperator {
    diagonal: Vec<f64>,
    row_start: Vec<usize>,
    entries: Vec<u32>,
    amplitudes: Vec<f64>,
}

impl SectorOperator {
    fn build(chain: &SpinChain, sector: &Sector) -> Self {
        let flips = chain.flip_terms();
        assert!(flips.len() <= 1 << (32 - COLUMN_BITS) && sector.dim() <= 1 << COLUMN_BITS);
        let flippable = |state: u32, mask: u32| (state & mask).count_ones() == 1;
        let counts: Vec<usize> = sector
            .states
            .par_iter()
            .map(|&s| flips.iter().filter(|f| flippable(s, f.mask)).count())
            .collect();
        let mut row_start = Vec::with_capacity(counts.len() + 1);
        row_start.push(0);
        for c in &counts {
            row_start.push(row_start.last().copied().unwrap_or(0) + c);
        }
        drop(counts);
        let d = sector.dim();
        let mut entries = vec![0u32; row_start[d]];
        let mut blocks = Vec::new();
        let mut rest = entries.as_mut_slice();
        for first in (0..d).step_by(ROWS_PER_TASK) {
            let last = (first + ROWS_PER_TASK).min(d);
            let (head, tail) =
                std::mem::take(&mut rest).split_at_mut(row_start[last] - row_start[first]);
            blocks.push((first, last, head));
            rest = tail;
        }
        blocks.into_par_iter().for_each(|(first, last, out)| {
            let mut k = 0;
            for &state in &sector.states[first..last] {
                for (index, term) in flips.iter().enumerate() {
                    if flippable(state, term.mask) {
                        let column = sector.index_of(state ^ term.mask) as u32;
                        out[k] = column | ((index as u32) << COLUMN_BITS);
                        k += 1;
                    }
                }
            }
        });
        let diagonal = sector
            .states
            .par_iter()
            .map(|&s| chain.diagonal_energy(s))
            .collect();
        Self {
            diagonal,
            row_start,
            entries,
            amplitudes: flips.iter().map(|f| f.amplitude).collect(),
        }
    }

    /// y = H x − b·z for the optional pair (b, z) (the Lanczos recurrence's
    /// previous vector, folded into the same pass over memory).
    fn apply(&self, x: &[Amp], y: &mut [Amp], back: Option<(f64, &[Amp])>) {
        y.par_chunks_mut(ROWS_PER_TASK)
            .enumerate()
            .for_each(|(block, ys)| {
                let first = block * ROWS_PER_TASK;
                for (offset, out) in ys.iter_mut().enumerate() {
                    let a = first + offset;
                    let diag = self.diagonal[a];
                    let mut re = diag * x[a].re;
                    let mut im = diag * x[a].im;
                    for &entry in &self.entries[self.row_start[a]..self.row_start[a + 1]] {
                        let column = (entry & COLUMN_MASK) as usize;
                        let amplitude = self.amplitudes[(entry >> COLUMN_BITS) as usize];
                        re += amplitude * x[column].re;
                        im += amplitude * x[column].im;
                    }
                    if let Some((b, z)) = back {
                        re -= b * z[a].re;
                        im -= b * z[a].im;
                    }
                    *out = Amp { re, im };
                }
            });
    }
}

fn norm(v: &[Amp]) -> f64 {
    v.iter()
        .map(|a| a.re * a.re + a.im * a.im)
        .sum::<f64>()
        .sqrt()
}

/// Re⟨u|v⟩.
fn real_dot(u: &[Amp], v: &[Amp]) -> f64 {
    u.iter()
        .zip(v)
        .map(|(a, b)| a.re * b.re + a.im * b.im)
        .sum()
}

/// e^{−iτT} e_1 for the Lanczos tridiagonal T = S diag(θ) Sᵀ.
#[derive(Debug)]
struct SmallExponential {
    theta: Vec<f64>,
    vectors: Array2<f64>,
    /// β_m, the coupling out of the Krylov space (0 when it is invariant).
    beta_out: f64,
}

impl SmallExponential {
    fn new(alphas: &[f64], betas: &[f64], beta_out: f64) -> Result<Self, LinalgError> {
        let m = alphas.len();
        let t = Array2::from_shape_fn((m, m), |(i, j)| {
            if i == j {
                alphas[i]
            } else if i == j + 1 {
                betas[j]
            } else if j == i + 1 {
                betas[i]
            } else {
                0.0
            }
        });
        let eigen = symmetric_eigen(&t)?;
        Ok(Self {
            theta: eigen.values,
            vectors: eigen.vectors,
            beta_out,
        })
    }

    /// Component `row` of e^{−iτT} e_1.
    fn component(&self, row: usize, tau: f64) -> Amp {
        let mut c = Amp::default();
        for (l, &theta) in self.theta.iter().enumerate() {
            let w = self.vectors[(row, l)] * self.vectors[(0, l)];
            let (sin, cos) = (theta * tau).sin_cos();
            c.re += w * cos;
            c.im -= w * sin;
        }
        c
    }

    /// All components of e^{−iτT} e_1 times `scale` (the phases computed
    /// once).
    fn components(&self, tau: f64, scale: f64) -> Vec<Amp> {
        let weighted: Vec<Amp> = self
            .theta
            .iter()
            .enumerate()
            .map(|(l, &theta)| {
                let (sin, cos) = (theta * tau).sin_cos();
                let w = scale * self.vectors[(0, l)];
                Amp {
                    re: w * cos,
                    im: -w * sin,
                }
            })
            .collect();
        (0..self.theta.len())
            .map(|p| {
                let mut c = Amp::default();
                for (l, phase) in weighted.iter().enumerate() {
                    c.re += self.vectors[(p, l)] * phase.re;
                    c.im += self.vectors[(p, l)] * phase.im;
                }
                c
            })
            .collect()
    }

    /// A-posteriori estimate of the relative error after a step τ.
    fn error(&self, tau: f64) -> f64 {
        let last = self.component(self.theta.len() - 1, tau);
        self.beta_out * last.re.hypot(last.im)
    }

    /// out = scale · Σ_p c_p(τ) q_p, one Krylov vector at a time over blocks
    /// of rows so that every vector is streamed once.
    fn combine(&self, basis: &[Vec<Amp>], scale: f64, tau: f64, out: &mut [Amp]) {
        let coefficients = self.components(tau, scale);
        out.par_chunks_mut(ROWS_PER_TASK)
            .enumerate()
            .for_each(|(block, chunk)| {
                let rows = block * ROWS_PER_TASK..block * ROWS_PER_TASK + chunk.len();
                chunk.fill(Amp::default());
                for (c, q) in coefficients.iter().zip(basis) {
                    for (o, x) in chunk.iter_mut().zip(&q[rows.clone()]) {
                        o.re += c.re * x.re - c.im * x.im;
                        o.im += c.re * x.im + c.im * x.re;
                    }
                }
            });
    }

    /// The largest step in [lo, hi] whose error estimate is within `tol`,
    /// by bisection (lo is known to be within, hi not).
    fn largest_step(&self, mut lo: f64, mut hi: f64, tol: f64) -> f64 {
        for _ in 0..80 {
            let mid = 0.5 * (lo + hi);
            if self.error(mid) <= tol {
                lo = mid;
            } else {
                hi = mid;
            }
        }
        lo
    }
}

/// States at several times from one Krylov space:
/// ψ(τ_l) = Σ_p coefficients[l][p] · basis[p].
struct KrylovOutputs<'a> {
    basis: &'a [Vec<Amp>],
    coefficients: Vec<Vec<Amp>>,
}

impl KrylovOutputs<'_> {
    /// The state of output `l`, assembled in full (used by tests; the
    /// estimator needs only [`KrylovOutputs::magnetisation_ratios`]).
    #[cfg(test)]
    fn state(&self, l: usize) -> Vec<Amp> {
        let mut out = vec![Amp::default(); self.basis[0].len()];
        for (c, q) in self.coefficients[l].iter().zip(self.basis) {
            for (o, x) in out.iter_mut().zip(q) {
                o.re += c.re * x.re - c.im * x.im;
                o.im += c.re * x.im + c.im * x.re;
            }
        }
        out
    }

    /// ⟨ψ_l|σᶻ_i|ψ_l⟩/⟨ψ_l|ψ_l⟩ for every output l and site i, `[l][i]`.
    ///
    /// One pass over blocks of rows: each Krylov vector is read once per
    /// block and used for every output time, and the states are measured
    /// in the block without ever being stored whole. Block sums are added
    /// in block order, so the result does not depend on the thread count.
    fn magnetisation_ratios(&self, states: &[u32], sites: usize) -> Vec<Vec<f64>> {
        let outputs = self.coefficients.len();
        let d = states.len();
        let width = sites + 1;
        let partials: Vec<Vec<f64>> = (0..d.div_ceil(MEASURE_ROWS))
            .into_par_iter()
            .map(|block| {
                let rows = block * MEASURE_ROWS..((block + 1) * MEASURE_ROWS).min(d);
                let len = rows.len();
                let mut amplitudes = vec![Amp::default(); outputs * len];
                for (p, q) in self.basis.iter().enumerate() {
                    let q = &q[rows.clone()];
                    for (l, out) in amplitudes.chunks_exact_mut(len).enumerate() {
                        let c = self.coefficients[l][p];
                        for (o, x) in out.iter_mut().zip(q) {
                            o.re += c.re * x.re - c.im * x.im;
                            o.im += c.re * x.im + c.im * x.re;
                        }
                    }
                }
                // Per output: the weight with each spin up, then the total.
                let mut sums = vec![0.0; outputs * width];
                for (l, out) in amplitudes.chunks_exact(len).enumerate() {
                    let acc = &mut sums[l * width..(l + 1) * width];
                    for (a, &state) in out.iter().zip(&states[rows.clone()]) {
                        let weight = a.re * a.re + a.im * a.im;
                        acc[sites] += weight;
                        let mut bits = state;
                        while bits != 0 {
                            acc[bits.trailing_zeros() as usize] += weight;
                            bits &= bits - 1;
                        }
                    }
                }
                sums
            })
            .collect();
        let mut sums = vec![0.0; outputs * width];
        for partial in &partials {
            for (s, p) in sums.iter_mut().zip(partial) {
                *s += p;
            }
        }
        sums.chunks_exact(width)
            .map(|acc| {
                let total = acc[sites];
                acc[..sites]
                    .iter()
                    .map(|up| (2.0 * up - total) / total)
                    .collect()
            })
            .collect()
    }
}

/// Krylov propagation of one vector through a list of increasing times.
struct Propagator<'a> {
    operator: &'a SectorOperator,
    max_dim: usize,
    tolerance: f64,
    cancel: &'a AtomicBool,
}

impl Propagator<'_> {
    /// Evolves `start` by e^{−iHt} to every time of `times` (sorted
    /// ascending, ≥ 0) and hands the states, a batch per Krylov space, to
    /// `observe(indices into times, outputs)`. Returns the largest
    /// accumulated relative error estimate.
    fn run(
        &self,
        start: Vec<Amp>,
        times: &[f64],
        mut observe: impl FnMut(&[usize], &KrylovOutputs<'_>),
    ) -> Result<f64, SpinChainError> {
        let d = start.len();
        let mut psi = start;
        let mut basis: Vec<Vec<Amp>> = Vec::new();
        let mut w = vec![Amp::default(); d];
        let (mut now, mut next, mut carried, mut worst) = (0.0f64, 0usize, 0.0f64, 0.0f64);
        while next < times.len() {
            if times[next] <= now {
                let first = next;
                while next < times.len() && times[next] <= now {
                    next += 1;
                }
                let unit = Amp { re: 1.0, im: 0.0 };
                let outputs = KrylovOutputs {
                    basis: std::slice::from_ref(&psi),
                    coefficients: vec![vec![unit]; next - first],
                };
                observe(&(first..next).collect::<Vec<_>>(), &outputs);
                worst = worst.max(carried);
                continue;
            }
            let scale = norm(&psi);
            if basis.is_empty() {
                basis.push(vec![Amp::default(); d]);
            }
            for (q, p) in basis[0].iter_mut().zip(&psi) {
                *q = Amp {
                    re: p.re / scale,
                    im: p.im / scale,
                };
            }
            let horizon = times[times.len() - 1] - now;
            let mut alphas = Vec::with_capacity(self.max_dim);
            let mut betas = Vec::with_capacity(self.max_dim);
            let small = loop {
                if self.cancel.load(Ordering::Relaxed) {
                    return Err(SpinChainError::Cancelled);
                }
                let j = alphas.len();
                let back = if j > 0 {
                    Some((betas[j - 1], basis[j - 1].as_slice()))
                } else {
                    None
                };
                self.operator.apply(&basis[j], &mut w, back);
                let alpha = real_dot(&basis[j], &w);
                for (x, q) in w.iter_mut().zip(&basis[j]) {
                    x.re -= alpha * q.re;
                    x.im -= alpha * q.im;
                }
                let beta = norm(&w);
                alphas.push(alpha);
                // The space is invariant when nothing is left of w (exactly
                // zero for a one-dimensional sector).
                let invariant = beta <= f64::MIN_POSITIVE;
                let last = invariant || alphas.len() == self.max_dim;
                // The small eigenproblem is solved only every few steps: in
                // small sectors it costs more than a Hamiltonian application,
                // and a few extra Krylov vectors cost less than checking
                // after each one.
                if last || alphas.len() % CHECK_EVERY == 0 {
                    let beta_out = if invariant { 0.0 } else { beta };
                    let small = SmallExponential::new(&alphas, &betas, beta_out)?;
                    if last || small.error(horizon) <= self.tolerance {
                        break small;
                    }
                }
                betas.push(beta);
                if basis.len() <= j + 1 {
                    basis.push(vec![Amp::default(); d]);
                }
                for (q, x) in basis[j + 1].iter_mut().zip(&w) {
                    *q = Amp {
                        re: x.re / beta,
                        im: x.im / beta,
                    };
                }
            };
            let used = &basis[..alphas.len()];
            let first = next;
            let mut coefficients = Vec::new();
            let mut reached = 0.0;
            while next < times.len() {
                let tau = times[next] - now;
                let error = small.error(tau);
                if error > self.tolerance {
                    break;
                }
                coefficients.push(small.components(tau, scale));
                worst = worst.max(carried + error);
                reached = tau;
                next += 1;
            }
            if next > first {
                let outputs = KrylovOutputs {
                    basis: used,
                    coefficients,
                };
                observe(&(first..next).collect::<Vec<_>>(), &outputs);
            }
            if next == times.len() {
                break;
            }
            let step = small.largest_step(reached, times[next] - now, self.tolerance);
            if step <= 0.0 {
                return Err(SpinChainError::Linalg(LinalgError::NoConvergence));
            }
            small.combine(used, scale, step, &mut psi);
            carried += small.error(step);
            now += step;
        }
        Ok(worst)
    }
}

/// The memory plan of a typicality run: the Krylov dimension is chosen first
/// (largest that fits with one sample in flight, so it does not depend on
/// the number of threads), then as many concurrent samples as fit.
///
/// # Errors
/// [`SpinChainError::MemoryLimit`] when not even one sample with the smallest
/// Krylov space fits; [`SpinChainError::TooLargeForTypicality`] beyond 22
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
    let up = sites / 2;
    let d = binomial(sites, up) as u64;
    let per_row = chain.flip_terms().len().min(up * (sites - up)) as u64;
    // Packed entries, row offsets, diagonal, basis words, row counts at build.
    let operator = d * per_row * 4 + (d + 1) * 8 + d * 8 + d * 4 + d * 8;
    let results = 2 * (samples * n_times * sites * 8) as u64;
    let fixed = operator + results;
    // Krylov vectors plus w, ψ and the output state, 16 bytes per amplitude.
    let per_sample = |dim: usize| (dim as u64 + 3) * d * 16 + (n_times * sites * 8) as u64;
    let krylov_dim = (MIN_KRYLOV_DIM..=MAX_KRYLOV_DIM)
        .rev()
        .find(|&m| fixed + per_sample(m) <= limit_bytes)
        .ok_or_else(|| SpinChainError::MemoryLimit {
            sites,
            needed_bytes: fixed + per_sample(MIN_KRYLOV_DIM),
            limit_bytes,
            detail: format!(
                "{operator} bytes for the sparse Hamiltonian of the largest sector \
                 (dimension {d}) and {} bytes for {MIN_KRYLOV_DIM} + 3 Krylov vectors",
                per_sample(MIN_KRYLOV_DIM)
            ),
        })?;
    let wanted = rayon::current_num_threads().min(samples).max(1);
    let concurrent_samples = (1..=wanted)
        .rev()
        .find(|&c| fixed + c as u64 * per_sample(krylov_dim) <= limit_bytes)
        .unwrap_or(1);
    Ok(MemoryPlan {
        bytes: fixed + concurrent_samples as u64 * per_sample(krylov_dim),
        krylov_dim,
        concurrent_samples,
    })
}

/// A standard complex Gaussian amplitude (E|z|² = 2) by the Box–Muller
/// transform (Box & Muller, Ann. Math. Stat. 29, 610 (1958)).
fn gaussian(rng: &mut ChaCha8Rng) -> Amp {
    let u1 = 1.0 - rng.random::<f64>();
    let u2 = rng.random::<f64>();
    let r = (-2.0 * u1.ln()).sqrt();
    let (s, c) = (std::f64::consts::TAU * u2).sin_cos();
    Amp {
        re: r * c,
        im: r * s,
    }
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
    let plan = memory_plan(
        chain,
        options.samples,
        times.len(),
        options.memory_limit_bytes,
    )?;

    let n_times = times.len();
    let mut order: Vec<usize> = (0..n_times).collect();
    order.sort_by(|&a, &b| times[a].total_cmp(&times[b]));
    let sorted: Vec<f64> = order.iter().map(|&k| times[k]).collect();

    let norm_factor = 1.0 / (1u64 << sites) as f64;
    let sectors: Vec<usize> = (0..=sites / 2).collect();
    // Progress is counted in basis states times output times; sectors
    // without a propagation (no state with the source up) count nothing.
    let total_units: u64 = sectors
        .iter()
        .filter(|&&k| k > 0)
        .map(|&k| binomial(sites, k) as u64)
        .sum::<u64>()
        * (options.samples * n_times) as u64;
    let done_units = AtomicU64::new(0);
    let report = |units: u64| {
        let done = done_units.fetch_add(units, Ordering::Relaxed) + units;
        progress((done as f64 / total_units.max(1) as f64).min(1.0));
    };

    let mut per_sample: Vec<Array2<f64>> = vec![Array2::zeros((n_times, sites)); options.samples];
    let mut propagation_error = 0.0f64;
    for &up in &sectors {
        if cancel.load(Ordering::Relaxed) {
            return Err(SpinChainError::Cancelled);
        }
        let sector = Sector::new(sites, up);
        let weight = sector.flip_weight() * norm_factor;
        let offset = -weight * sector.trace_sigma_z();
        let with_up = sector.dim_with_up();
        if with_up == 0 {
            // No basis state has the source up: Π_j vanishes on this sector
            // and its contribution is the constant −Tr_k σᶻ_i.
            for sample in &mut per_sample {
                sample.mapv_inplace(|v| v + offset);
            }
            continue;
        }
        let operator = SectorOperator::build(chain, &sector);
        let propagator = Propagator {
            operator: &operator,
            max_dim: plan.krylov_dim,
            tolerance: tol,
            cancel,
        };
        let dim = sector.dim() as u64;
        let fine_progress = sector.dim() >= ROWS_PER_TASK;
        let sample_ids: Vec<usize> = (0..options.samples).collect();
        for batch in sample_ids.chunks(plan.concurrent_samples) {
            let outcomes: Vec<Result<(Array2<f64>, f64), SpinChainError>> = batch
                .par_iter()
                .map(|&sample| {
                    let mut rng = ChaCha8Rng::seed_from_u64(options.seed);
                    rng.set_stream(((sample as u64) << 8) | up as u64);
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
                    let error = propagator.run(start, &sorted, |indices, outputs| {
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
                    Ok((ratios, error))
                })
                .collect();
            for (&sample, outcome) in batch.iter().zip(outcomes) {
                let (ratios, error) = outcome?;
                propagation_error = propagation_error.max(2.0 * error);
                let scale = weight * 2.0 * with_up as f64;
                per_sample[sample].zip_mut_with(&ratios, |v, r| *v += scale * r + offset);
            }
        }
    }

    let count = options.samples as f64;
    let mut values = Array2::<f64>::zeros((n_times, sites));
    for sample in &per_sample {
        values += sample;
    }
    values.mapv_inplace(|v| v / count);
    // Two passes (mean first, then squared deviations) so that values every
    // sample reproduces exactly, such as C_jj(0) = 1, get an error of 0
    // rather than the rounding residue of Σx² − S x̄².
    let mut squares = Array2::<f64>::zeros((n_times, sites));
    for sample in &per_sample {
        ndarray::Zip::from(&mut squares)
            .and(sample)
            .and(&values)
            .for_each(|s, &x, &mean| *s += (x - mean) * (x - mean));
    }
    // Standard error of the mean with the unbiased sample variance.
    let errors = squares.mapv(|s| (s / (count - 1.0) / count).sqrt());
    progress(1.0);
    Ok(TypicalityResult {
        values,
        errors,
        samples: options.samples,
        seed: options.seed,
        source,
        times: times.to_vec(),
        propagation_error,
        memory: plan,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::couplings::Couplings;
    use crate::tolerance::close;
    use std::sync::Mutex;

    fn chain(sites: usize, alpha: f64, delta: f64) -> SpinChain {
        SpinChain::new(&Couplings::power_law(sites, 1.0, alpha).unwrap(), delta).unwrap()
    }

    #[test]
    fn lanczos_propagation_matches_the_eigendecomposition() {
        // The Krylov propagator against e^{−iHt} = V e^{−iΛt} Vᵀ from a dense
        // eigendecomposition of the same sector (a different algorithm); a
        // small Krylov dimension forces several restarts per output time.
        let spin_chain = chain(10, 1.0, 0.5);
        let sector = Sector::new(10, 5);
        let operator = SectorOperator::build(&spin_chain, &sector);
        let eigen = symmetric_eigen(&spin_chain.dense_sector_hamiltonian(&sector)).unwrap();
        let mut rng = ChaCha8Rng::seed_from_u64(5);
        let start: Vec<Amp> = (0..sector.dim()).map(|_| gaussian(&mut rng)).collect();
        let times = [0.0, 0.3, 1.7, 4.0, 9.5];
        let never = AtomicBool::new(false);
        for max_dim in [12, 64, MAX_KRYLOV_DIM] {
            let propagator = Propagator {
                operator: &operator,
                max_dim,
                tolerance: 1e-12,
                cancel: &never,
            };
            let mut worst = 0.0f64;
            let bound = propagator
                .run(start.clone(), &times, |indices, outputs| {
                    for (l, &k) in indices.iter().enumerate() {
                        let psi = outputs.state(l);
                        let t = times[k];
                        let v = &eigen.vectors;
                        // Coefficients in the eigenbasis, rotated by e^{−iλt}.
                        let mut exact = vec![Amp::default(); psi.len()];
                        for (m, &lambda) in eigen.values.iter().enumerate() {
                            let (mut re, mut im) = (0.0, 0.0);
                            for (a, s) in start.iter().enumerate() {
                                re += v[(a, m)] * s.re;
                                im += v[(a, m)] * s.im;
                            }
                            let (sin, cos) = (lambda * t).sin_cos();
                            let (cr, ci) = (re * cos + im * sin, im * cos - re * sin);
                            for (a, e) in exact.iter_mut().enumerate() {
                                e.re += v[(a, m)] * cr;
                                e.im += v[(a, m)] * ci;
                            }
                        }
                        let diff: f64 = psi
                            .iter()
                            .zip(&exact)
                            .map(|(p, e)| (p.re - e.re).powi(2) + (p.im - e.im).powi(2))
                            .sum::<f64>()
                            .sqrt();
                        worst = worst.max(diff / norm(&start));
                    }
                })
                .unwrap();
            assert!(worst < 1e-10, "max_dim {max_dim}: relative error {worst}");
            assert!(bound < 1e-10, "max_dim {max_dim}: estimated {bound}");
        }
    }

    /// Mean of ((typicality − exact)/error)² over the points with a nonzero
    /// stated error.
    fn chi_square_per_point(result: &TypicalityResult, exact: &Array2<f64>) -> (f64, usize) {
        let mut sum = 0.0;
        let mut count = 0;
        ndarray::Zip::from(&result.values)
            .and(&result.errors)
            .and(exact)
            .for_each(|&v, &e, &x| {
                if e > 1e-13 {
                    sum += ((v - x) / e).powi(2);
                    count += 1;
                }
            });
        (sum / count as f64, count)
    }

    #[test]
    fn typicality_agrees_with_exact_within_its_stated_errors() {
        // The exact method (dense diagonalisation, tested against free
        // fermions and the two-site formula) is the reference. With S
        // samples the normalised deviation follows Student's t with S − 1
        // degrees of freedom, whose second moment is (S − 1)/(S − 3) ≈ 1.1
        // for S = 24 (common practice). Points are correlated (shared
        // samples), so the band is wide: 0.5 < χ²/point < 2.
        let times: Vec<f64> = (0..16).map(|k| 0.4 * k as f64).collect();
        for (sites, alpha, delta, source) in [(10, 1.0, 0.5, 3), (12, f64::INFINITY, 1.0, 6)] {
            let spin_chain = chain(sites, alpha, delta);
            let exact = spin_chain.correlations_exact(source, &times).unwrap();
            let result = spin_chain
                .correlations_typical(source, &times, 24, 7)
                .unwrap();
            let (chi2, points) = chi_square_per_point(&result, &exact);
            assert!(points > 100, "{points} points");
            assert!((0.5..2.0).contains(&chi2), "N = {sites}: χ²/point = {chi2}");
            // And the agreement is statistical, not a coincidence of scale:
            // errors are of order 2^{−N/2}/√S.
            let typical = result.errors.iter().copied().fold(0.0f64, f64::max);
            assert!(typical < 0.05, "N = {sites}: largest error {typical}");
        }
    }

    #[test]
    fn statistical_error_shrinks_like_one_over_root_samples() {
        // Standard error ∝ 1/√S (central limit theorem, common practice):
        // quadrupling the samples halves it. Averaged over all points; the
        // small-sample bias of s (c4(8) ≈ 0.965) is well inside the band.
        let spin_chain = chain(10, 1.0, 0.0);
        let times: Vec<f64> = (1..=10).map(|k| 0.5 * k as f64).collect();
        let few = spin_chain.correlations_typical(4, &times, 8, 21).unwrap();
        let many = spin_chain.correlations_typical(4, &times, 32, 22).unwrap();
        let ratio = few.errors.mean().unwrap() / many.errors.mean().unwrap();
        assert!((1.7..2.3).contains(&ratio), "error ratio {ratio}");
        let exact = spin_chain.correlations_exact(4, &times).unwrap();
        let rms =
            |r: &TypicalityResult| ((&r.values - &exact).mapv(|d| d * d).mean().unwrap()).sqrt();
        // The actual deviation from exact shrinks too (expected ratio 2, but
        // a single pair of runs scatters widely around it).
        let deviation_ratio = rms(&few) / rms(&many);
        assert!(
            (1.0..4.0).contains(&deviation_ratio),
            "deviation ratio {deviation_ratio}"
        );
    }

    #[test]
    fn sum_rule_and_initial_condition_hold_sample_by_sample() {
        // Σ_i σᶻ_i is constant in each sector, so the normalised sector
        // estimator keeps Σ_i C_ij(t) = 1 and C_jj(0) = 1 exactly (derivable,
        // see the module documentation); only rounding remains.
        let spin_chain = chain(9, 1.3, 0.7);
        let result = spin_chain
            .correlations_typical(2, &[0.0, 1.0, 3.0], 3, 99)
            .unwrap();
        for row in result.values.rows() {
            assert!((row.sum() - 1.0).abs() < 1e-12, "sum {}", row.sum());
        }
        assert!((result.values[(0, 2)] - 1.0).abs() < 1e-13);
        assert!(result.errors[(0, 2)] < 1e-14);
        let map = result.to_correlation_map().unwrap();
        assert_eq!(map.offsets()[0], -2);
        assert!(map.errors().unwrap().iter().all(|&e| e > 0.0));
    }

    #[test]
    fn results_do_not_depend_on_the_number_of_threads() {
        // Every sample has its own seeded ChaCha8 stream and is combined in
        // sample order, so the thread count cannot change a single bit.
        let spin_chain = chain(10, 1.0, 0.3);
        let times = [0.5, 2.0];
        let run = |threads: usize| {
            rayon::ThreadPoolBuilder::new()
                .num_threads(threads)
                .build()
                .unwrap()
                .install(|| spin_chain.correlations_typical(5, &times, 5, 3).unwrap())
        };
        let (one, three) = (run(1), run(3));
        for (a, b) in one.values.iter().zip(three.values.iter()) {
            assert!(close(*a, *b, 0.0, 0.0), "{a} vs {b}");
        }
        for (a, b) in one.errors.iter().zip(three.errors.iter()) {
            assert!(close(*a, *b, 0.0, 0.0));
        }
        let other_seed = spin_chain.correlations_typical(5, &times, 5, 4).unwrap();
        assert!(!close(
            other_seed.values[(1, 0)],
            one.values[(1, 0)],
            0.0,
            0.0
        ));
    }

    #[test]
    fn unordered_times_come_back_in_the_requested_order() {
        let spin_chain = chain(8, 1.0, 0.0);
        let sorted = spin_chain
            .correlations_typical(3, &[0.5, 1.5, 2.5], 2, 1)
            .unwrap();
        let shuffled = spin_chain
            .correlations_typical(3, &[2.5, 0.5, 1.5], 2, 1)
            .unwrap();
        for (row_sorted, row_shuffled) in [(0, 1), (1, 2), (2, 0)] {
            for i in 0..8 {
                let (a, b) = (
                    sorted.values[(row_sorted, i)],
                    shuffled.values[(row_shuffled, i)],
                );
                assert!((a - b).abs() < 1e-11, "{a} vs {b}");
            }
        }
    }

    #[test]
    fn refuses_what_it_cannot_do_and_says_why() {
        let never = AtomicBool::new(false);
        let big = chain(23, 1.0, 0.0);
        assert!(matches!(
            big.correlations_typical(0, &[1.0], 2, 0),
            Err(SpinChainError::TooLargeForTypicality { sites: 23, .. })
        ));
        let small = chain(6, 1.0, 0.0);
        assert!(matches!(
            small.correlations_typical(0, &[1.0], 1, 0),
            Err(SpinChainError::TooFewSamples(1))
        ));
        let mut options = TypicalityOptions::new(2, 0);
        options.step_tolerance = 0.0;
        assert!(matches!(
            small.correlations_typical_with(0, &[1.0], &options, &|_| {}, &never),
            Err(SpinChainError::BadTolerance(_))
        ));
        // N = 20 needs a 74 MB sparse Hamiltonian alone (184756 rows × 100
        // entries × 4 bytes): a 64 MiB limit is refused before any work.
        let mut tight = TypicalityOptions::new(2, 0);
        tight.memory_limit_bytes = 64 << 20;
        let err = chain(20, 1.0, 0.0)
            .correlations_typical_with(10, &[1.0], &tight, &|_| {}, &never)
            .expect_err("over the limit");
        assert!(matches!(err, SpinChainError::MemoryLimit { sites: 20, .. }));
        assert!(err.to_string().contains("memory limit"));
        let plan = memory_plan(&chain(20, 1.0, 0.0), 2, 50, DEFAULT_MEMORY_LIMIT_BYTES).unwrap();
        assert!(plan.bytes <= DEFAULT_MEMORY_LIMIT_BYTES && plan.krylov_dim == MAX_KRYLOV_DIM);
    }

    #[test]
    fn reports_progress_and_stops_when_cancelled() {
        let spin_chain = chain(10, 1.0, 0.0);
        let options = TypicalityOptions::new(2, 0);
        let seen = Mutex::new(Vec::new());
        let never = AtomicBool::new(false);
        spin_chain
            .correlations_typical_with(
                4,
                &[1.0, 2.0],
                &options,
                &|f| seen.lock().unwrap().push(f),
                &never,
            )
            .unwrap();
        let seen = seen.into_inner().unwrap();
        assert!(seen.iter().all(|f| (0.0..=1.0).contains(f)));
        assert!(close(*seen.last().unwrap(), 1.0, 0.0, 0.0));
        let cancelled = AtomicBool::new(true);
        assert!(matches!(
            spin_chain.correlations_typical_with(4, &[1.0], &options, &|_| {}, &cancelled),
            Err(SpinChainError::Cancelled)
        ));
    }
}
