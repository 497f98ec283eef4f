//! Infinite-temperature correlations of a [`SpinChain`] by dynamical
//! typicality (N ≤ 24): random vectors stand in for the trace, and a Lanczos
//! (Krylov) propagator evolves them sector by sector with a Hamiltonian that
//! is applied without being stored (see [`SectorOperator`]).
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

/// A complex amplitude; H is real, so its real and imaginary parts share the
/// decoding of every sparse entry.
#[derive(Debug, Clone, Copy, Default, PartialEq)]
struct Amp {
    re: f64,
    im: f64,
}

/// The Hamiltonian of one sector, applied without being stored.
///
/// Every basis word splits into a low half (bits below `low_bits`) and a high
/// half. The combinatorial rank (see [`Sector`]) is the rank of the low half
/// among the low words with the same number c of set bits plus a share that
/// depends on the high half and c alone, so the words with one high half
/// form a contiguous block, ordered like the low words of class c (the
/// two-table indexing of H. Q. Lin, Phys. Rev. B 42, 6561 (1990), from
/// memory). A flip-flop moves an up spin p to an empty site q; by where p
/// and q lie, H splits into three parts, each applied block by block
/// without computing a rank per matrix element:
///
/// - both in the high half: block h meets block h' = h with the spin moved,
///   row for row (a scaled vector sum over the block);
/// - both in the low half: the same small sparse matrix of class c inside
///   every block (tabulated once per class);
/// - one in each half: block h meets the block with one more or one fewer
///   high bit, rows paired by a table per class and low site.
///
/// Only the diagonal (d values) and tables of the low words are stored: a
/// 20-site sector needs 1.5 MB instead of 74 MB of packed matrix entries.
#[derive(Debug)]
struct SectorOperator {
    diagonal: Vec<f64>,
    sites: usize,
    low_bits: u32,
    /// J_ij in row-major order (N × N, zero on the diagonal).
    coupling: Vec<f64>,
    /// The blocks in basis order: (high word, class c, first row).
    blocks: Vec<(u32, usize, usize)>,
    /// First row of the block of every high word (unused words: 0).
    block_start: Vec<usize>,
    /// Per class c: the flip-flops inside the low half.
    inside: Vec<RowTable>,
    /// Per class c and high site p: an up spin at p moves to any empty low
    /// site (columns in class c + 1).
    to_low: Vec<Vec<RowTable>>,
    /// Per class c and high site p: an up spin of the low half moves to the
    /// empty site p (columns in class c − 1).
    from_low: Vec<Vec<RowTable>>,
}

/// A small sparse matrix between two classes of low words, row by row:
/// row r holds (column r', J) for `entries[rows[r]..rows[r + 1]]`.
#[derive(Debug, Default)]
struct RowTable {
    rows: Vec<usize>,
    entries: Vec<(u16, f64)>,
}

impl RowTable {
    /// Row by row over `words` (one class), the entries `of(word)` yields.
    fn build(words: &[u32], of: impl Fn(u32) -> Vec<(u16, f64)>) -> Self {
        let mut rows = vec![0];
        let mut entries = Vec::new();
        for &w in words {
            entries.extend(of(w));
            rows.push(entries.len());
        }
        Self { rows, entries }
    }

    /// y_r += Σ J x_{r'} over the rows of y.
    #[inline]
    fn add_product(&self, x: &[Amp], y: &mut [Amp]) {
        for (r, out) in y.iter_mut().enumerate() {
            let (mut re, mut im) = (0.0, 0.0);
            for &(r2, j) in &self.entries[self.rows[r]..self.rows[r + 1]] {
                let v = x[r2 as usize];
                re += j * v.re;
                im += j * v.im;
            }
            out.re += re;
            out.im += im;
        }
    }
}

impl SectorOperator {
    fn build(chain: &SpinChain, sector: &Sector) -> Self {
        let n = sector.sites;
        let up = sector.up;
        let low_bits = (n / 2) as u32;
        let high_bits = n as u32 - low_bits;
        let mut coupling = vec![0.0; n * n];
        for term in chain.flip_terms() {
            let i = term.mask.trailing_zeros() as usize;
            let j = 31 - term.mask.leading_zeros() as usize;
            coupling[i * n + j] = term.amplitude;
            coupling[j * n + i] = term.amplitude;
        }
        // Low words by class, in increasing order (= their rank in the class).
        let mut words: Vec<Vec<u32>> = vec![Vec::new(); low_bits as usize + 1];
        for w in 0u32..1 << low_bits {
            words[w.count_ones() as usize].push(w);
        }
        let rank = |w: u32| rank_share(w, 0, 0) as u16;
        let lb = low_bits as usize;
        let low_sites = || 0..low_bits;
        let j_of = |a: usize, b: usize| coupling[a * n + b];
        let inside = words
            .iter()
            .map(|class| {
                RowTable::build(class, |w| {
                    let mut out = Vec::new();
                    for p in low_sites().filter(|&p| (w >> p) & 1 == 1) {
                        for q in low_sites().filter(|&q| (w >> q) & 1 == 0) {
                            let j = j_of(p as usize, q as usize);
                            if j != 0.0 {
                                out.push((rank(w ^ (1 << p) ^ (1 << q)), j));
                            }
                        }
                    }
                    out
                })
            })
            .collect();
        let cross = |leaving: bool| -> Vec<Vec<RowTable>> {
            words
                .iter()
                .map(|class| {
                    (0..high_bits as usize)
                        .map(|p| {
                            RowTable::build(class, |w| {
                                low_sites()
                                    .filter(|&q| ((w >> q) & 1 == 1) == leaving)
                                    .map(|q| (rank(w ^ (1 << q)), j_of(q as usize, lb + p)))
                                    .filter(|&(_, j)| j != 0.0)
                                    .collect()
                            })
                        })
                        .collect()
                })
                .collect()
        };
        let to_low = cross(false);
        let from_low = cross(true);
        let mut blocks = Vec::new();
        let mut block_start = vec![0usize; 1 << high_bits];
        for h in 0u32..1 << high_bits {
            let high_up = h.count_ones() as usize;
            if high_up > up || up - high_up > low_bits as usize {
                continue;
            }
            let class = up - high_up;
            let start = rank_share(h, low_bits, class as u32);
            block_start[h as usize] = start;
            blocks.push((h, class, start));
        }
        blocks.sort_by_key(|&(_, _, start)| start);
        let diagonal = sector
            .states
            .par_iter()
            .map(|&s| chain.diagonal_energy(s))
            .collect();
        Self {
            diagonal,
            sites: n,
            low_bits,
            coupling,
            blocks,
            block_start,
            inside,
            to_low,
            from_low,
        }
    }

    /// Position of a word of this sector in its basis.
    #[cfg(test)]
    fn index_of(&self, state: u32) -> usize {
        let low = state & ((1 << self.low_bits) - 1);
        let high = state >> self.low_bits;
        self.block_start[high as usize] + rank_share(low, 0, 0)
    }

    /// y_block += (H − diagonal) x on the rows of one block.
    fn off_diagonal_block(&self, h: u32, class: usize, x: &[Amp], y: &mut [Amp]) {
        let n = self.sites;
        let lb = self.low_bits as usize;
        let high_bits = n - lb;
        // Low half: the class's sparse matrix, inside the block.
        let start = self.block_start[h as usize];
        let len = y.len();
        self.inside[class].add_product(&x[start..start + len], y);
        for p in 0..high_bits {
            let p_site = lb + p;
            if (h >> p) & 1 == 1 {
                // Up spin p in the high half moves to an empty high site q.
                for q in (0..high_bits).filter(|&q| (h >> q) & 1 == 0) {
                    let j = self.coupling[p_site * n + lb + q];
                    if j == 0.0 {
                        continue;
                    }
                    let other = self.block_start[(h ^ (1 << p) ^ (1 << q)) as usize];
                    for (out, v) in y.iter_mut().zip(&x[other..other + len]) {
                        out.re += j * v.re;
                        out.im += j * v.im;
                    }
                }
                // ... or to an empty low site: one more low bit.
                let other = self.block_start[(h ^ (1 << p)) as usize];
                self.to_low[class][p].add_product(&x[other..], y);
            } else if class > 0 {
                // An up spin of the low half moves to the empty high site p.
                let other = self.block_start[(h | (1 << p)) as usize];
                self.from_low[class][p].add_product(&x[other..], y);
            }
        }
    }

    /// y = H x − b·z for the optional pair (b, z) (the Lanczos recurrence's
    /// previous vector, folded into the same pass over memory). Returns
    /// Re⟨x|y⟩, summed block by block in basis order so that it does not
    /// depend on the thread count.
    fn apply(&self, x: &[Amp], y: &mut [Amp], back: Option<(f64, &[Amp])>) -> f64 {
        let mut pieces = Vec::with_capacity(self.blocks.len());
        let mut rest = y;
        for &(_, class, _) in &self.blocks {
            let len = binomial(self.low_bits as usize, class);
            let (head, tail) = std::mem::take(&mut rest).split_at_mut(len);
            pieces.push(head);
            rest = tail;
        }
        let partials: Vec<f64> = pieces
            .into_par_iter()
            .zip(self.blocks.par_iter())
            .with_min_len(BLOCKS_PER_TASK)
            .map(|(ys, &(h, class, start))| {
                for (offset, out) in ys.iter_mut().enumerate() {
                    let a = start + offset;
                    let diag = self.diagonal[a];
                    *out = Amp {
                        re: diag * x[a].re,
                        im: diag * x[a].im,
                    };
                    if let Some((b, z)) = back {
                        out.re -= b * z[a].re;
                        out.im -= b * z[a].im;
                    }
                }
                self.off_diagonal_block(h, class, x, ys);
                ys.iter()
                    .zip(&x[start..])
                    .map(|(h, x)| x.re * h.re + x.im * h.im)
                    .sum::<f64>()
            })
            .collect();
        partials.iter().sum()
    }
}

/// w ← w − α q, returning ‖w‖ (block sums in block order).
fn orthogonalise(w: &mut [Amp], q: &[Amp], alpha: f64) -> f64 {
    let partials: Vec<f64> = w
        .par_chunks_mut(ROWS_PER_TASK)
        .zip(q.par_chunks(ROWS_PER_TASK))
        .map(|(ws, qs)| {
            let mut sum = 0.0;
            for (x, q) in ws.iter_mut().zip(qs) {
                x.re -= alpha * q.re;
                x.im -= alpha * q.im;
                sum += x.re * x.re + x.im * x.im;
            }
            sum
        })
        .collect();
    partials.iter().sum::<f64>().sqrt()
}

/// out ← v / s, in parallel.
fn scaled_copy(out: &mut [Amp], v: &[Amp], s: f64) {
    out.par_chunks_mut(ROWS_PER_TASK)
        .zip(v.par_chunks(ROWS_PER_TASK))
        .for_each(|(os, vs)| {
            for (o, x) in os.iter_mut().zip(vs) {
                *o = Amp {
                    re: x.re / s,
                    im: x.im / s,
                };
            }
        });
}

/// Σ_q C(offset + c_q, before + q) over the set bits c_1 < c_2 < … of `word`:
/// the share of the combinatorial rank carried by bits that sit `offset`
/// places higher in the full word, with `before` set bits below them.
fn rank_share(word: u32, offset: u32, before: u32) -> usize {
    let mut rank = 0;
    let mut rest = word;
    let mut p = before as usize + 1;
    while rest != 0 {
        rank += binomial((rest.trailing_zeros() + offset) as usize, p);
        p += 1;
        rest &= rest - 1;
    }
    rank
}

fn norm(v: &[Amp]) -> f64 {
    v.iter()
        .map(|a| a.re * a.re + a.im * a.im)
        .sum::<f64>()
        .sqrt()
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
    /// accumulated relative error estimate and the number of Hamiltonian
    /// applications.
    fn run(
        &self,
        start: Vec<Amp>,
        times: &[f64],
        mut observe: impl FnMut(&[usize], &KrylovOutputs<'_>),
    ) -> Result<(f64, u64), SpinChainError> {
        let d = start.len();
        // A Krylov space cannot outgrow its sector.
        let max_dim = self.max_dim.min(d).max(1);
        // The small eigenproblem costs about m³ operations, an application
        // of H about d·N: check the whole horizon every `check_every` steps,
        // often in large sectors, rarely in small ones.
        let check_every =
            (max_dim.pow(3) / (d * self.operator.sites).max(1)).clamp(CHECK_EVERY, max_dim);
        let mut psi = start;
        let mut basis: Vec<Vec<Amp>> = Vec::new();
        let mut w = vec![Amp::default(); d];
        let (mut now, mut next, mut carried, mut worst) = (0.0f64, 0usize, 0.0f64, 0.0f64);
        let mut applications = 0u64;
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
            let mut alphas = Vec::with_capacity(max_dim);
            let mut betas = Vec::with_capacity(max_dim);
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
                let alpha = self.operator.apply(&basis[j], &mut w, back);
                applications += 1;
                let beta = orthogonalise(&mut w, &basis[j], alpha);
                alphas.push(alpha);
                // The space is invariant when nothing is left of w (exactly
                // zero for a one-dimensional sector).
                let invariant = beta <= f64::MIN_POSITIVE;
                let last = invariant || alphas.len() == max_dim;
                // The small eigenproblem is solved only every few steps: in
                // small sectors it costs more than a Hamiltonian application,
                // and a few extra Krylov vectors cost less than checking
                // after each one.
                if last || alphas.len() % check_every == 0 {
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
                scaled_copy(&mut basis[j + 1], &w, beta);
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
        Ok((worst, applications))
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
mod tests {
    use super::*;
    use crate::model::couplings::Couplings;
    use crate::tolerance::close;
    use std::sync::Mutex;

    fn chain(sites: usize, alpha: f64, delta: f64) -> SpinChain {
        SpinChain::new(&Couplings::power_law(sites, 1.0, alpha).unwrap(), delta).unwrap()
    }

    #[test]
    fn two_table_index_matches_the_combinatorial_rank() {
        // The look-up tables against the rank computed bit by bit (the
        // combinatorial number system of `Sector`), and H x built without a
        // matrix against the dense sector Hamiltonian times x.
        // Power-law couplings use every pair; nearest neighbours leave most
        // of the block tables empty.
        for (sites, up, alpha) in [
            (7, 3, 1.1),
            (10, 5, 1.1),
            (11, 2, 1.1),
            (12, 6, 1.1),
            (11, 5, f64::INFINITY),
            (12, 4, f64::INFINITY),
        ] {
            let spin_chain = chain(sites, alpha, 0.4);
            let sector = Sector::new(sites, up);
            let operator = SectorOperator::build(&spin_chain, &sector);
            for (index, &state) in sector.states.iter().enumerate() {
                assert_eq!(operator.index_of(state), index);
            }
            let mut rng = ChaCha8Rng::seed_from_u64(3);
            let x: Vec<Amp> = (0..sector.dim()).map(|_| gaussian(&mut rng)).collect();
            let mut y = vec![Amp::default(); sector.dim()];
            operator.apply(&x, &mut y, None);
            let dense = spin_chain.dense_sector_hamiltonian(&sector);
            for (a, out) in y.iter().enumerate() {
                let re: f64 = (0..sector.dim()).map(|b| dense[(a, b)] * x[b].re).sum();
                let im: f64 = (0..sector.dim()).map(|b| dense[(a, b)] * x[b].im).sum();
                assert!(close(out.re, re, 1e-12, 1e-12) && close(out.im, im, 1e-12, 1e-12));
            }
        }
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
            let (bound, _) = propagator
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
        let big = chain(25, 1.0, 0.0);
        assert!(matches!(
            big.correlations_typical(0, &[1.0], 2, 0),
            Err(SpinChainError::TooLargeForTypicality { sites: 25, .. })
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
        // N = 20 needs at least 27 Krylov-sized vectors of the central
        // sector (184756 amplitudes × 16 bytes each, 80 MB): a 64 MiB limit
        // is refused before any work.
        let mut tight = TypicalityOptions::new(2, 0);
        tight.memory_limit_bytes = 64 << 20;
        let err = chain(20, 1.0, 0.0)
            .correlations_typical_with(10, &[1.0], &tight, &|_| {}, &never)
            .expect_err("over the limit");
        assert!(matches!(err, SpinChainError::MemoryLimit { sites: 20, .. }));
        assert!(err.to_string().contains("memory limit"));
        // The default plan of 20 sites stays within 300 MB with one vector
        // in flight; 24 sites fit in 3 GB with a 64-dimensional space, in the
        // default 2 GiB with a shorter one.
        let plan = memory_plan(&chain(20, 1.0, 0.0), 2, 50, DEFAULT_MEMORY_LIMIT_BYTES).unwrap();
        assert!(
            plan.bytes <= 300_000_000 && plan.krylov_dim >= 60,
            "{plan:?}"
        );
        assert_eq!(plan.concurrent_samples, 1);
        let plan = memory_plan(&chain(24, 1.0, 0.0), 2, 50, 3_000_000_000).unwrap();
        assert!(
            plan.bytes <= 3_000_000_000 && plan.krylov_dim == 64,
            "{plan:?}"
        );
        let plan = memory_plan(&chain(24, 1.0, 0.0), 2, 50, DEFAULT_MEMORY_LIMIT_BYTES).unwrap();
        assert!(
            plan.bytes <= DEFAULT_MEMORY_LIMIT_BYTES && (40..64).contains(&plan.krylov_dim),
            "{plan:?}"
        );
        let refused = memory_plan(&chain(24, 1.0, 0.0), 2, 50, 1 << 30).expect_err("too big");
        assert!(
            refused.to_string().contains("dimension 2704156"),
            "{refused}"
        );
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
