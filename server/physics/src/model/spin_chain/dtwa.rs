//! Semiclassical infinite-temperature correlations of a [`SpinChain`] of any
//! length: the discrete truncated Wigner approximation (DTWA; Schachenmayer,
//! Pikovski & Rey, Phys. Rev. X 5, 011022 (2015)).
//!
//! Owns: the classical equations of motion for this crate's Hamiltonian, the
//! sampling of the discrete Wigner function, the estimator of C_ij(t), its
//! statistical error, the fixed-step integrator, and the per-batch sums that
//! make a run divisible into shards. Must not know: files, threads of the
//! server, wire formats; progress and cancellation come in as a callback and
//! a flag.
//!
//! # Equations of motion (derived for this convention)
//! σ⁺_iσ⁻_j + σ⁻_iσ⁺_j = (σˣ_iσˣ_j + σʸ_iσʸ_j)/2, so
//! H = Σ_{i<j} [(J_ij/2)(σˣ_iσˣ_j + σʸ_iσʸ_j) + (V_ij/2) σᶻ_iσᶻ_j]
//! (V_ij = Δ J_ij for [`SpinChain::new`]). Collect the terms containing spin
//! i as B_i·σ_i with B_i = Σ_{j≠i} ((J_ij/2)σˣ_j, (J_ij/2)σʸ_j, (V_ij/2)σᶻ_j).
//! The Heisenberg equation dσᵃ_i/dt = i[H, σᵃ_i] with [σᵇ, σᵃ] = 2iε_bac σᶜ
//! gives dσᵃ_i/dt = −2ε_bac B_i^b σ_i^c = 2(B_i × σ_i)ᵃ (check: H = hσᶻ gives
//! dσˣ/dt = −2hσʸ). DTWA replaces the operators by classical spin vectors
//! s_i = (x_i, y_i, z_i) and keeps the equations:
//!
//! ```text
//! ds_i/dt = b_i × s_i,   b_i = Σ_{j≠i} (J_ij x_j, J_ij y_j, V_ij z_j),
//! ```
//!
//! that is, the factor 2 of the Pauli algebra cancels the 1/2 of the
//! couplings. Σ_i z_i is conserved (the classical energy is invariant under
//! rotations about z), and so is every |s_i|² = 3.
//!
//! # Sampling and estimator
//! The discrete Wigner function of a σᶻ eigenstate with eigenvalue c puts
//! weight 1/4 on each of the four points (±1, ±1, c) (Wootters' phase-point
//! operators, as used in the paper above). The infinite-temperature trace is
//! the uniform average over the 2^N product σᶻ eigenstates c, so
//!
//! ```text
//! C_ij(t) = 2^-N Tr[σᶻ_i(t) σᶻ_j] = E_c[c_j ⟨c|σᶻ_i(t)|c⟩]
//!         ≈ E[z_i(t) z_j(0)],  all 3N initial components independent ±1,
//! ```
//!
//! the same product as the shot estimator s_j(0)·σᶻ_i(t) of an experiment
//! with random product initial states. Because E[z_i(0) z_j(0)] = δ_ij
//! exactly, this crate estimates the change instead (a control variate,
//! common practice):
//!
//! ```text
//! C_ij(t) ≈ δ_ij + mean over trajectories of (z_i(t) − z_i(0)) z_j(0),
//! ```
//!
//! which gives C_ij(0) = δ_ij and Σ_i C_ij(t) = 1 exactly for every
//! trajectory (Σ_i z_i is conserved) and removes the O(1) noise of the
//! i ≠ j products z_i(0)z_j(0) at short times. `errors` is the standard error
//! of that mean over trajectories (its variance computed from the sums of
//! the values and of their squares).
//!
//! # Short times
//! Expanding to second order, with all components independent ±1,
//! E[z̈_i(0) z_j(0)] = 2J_ij² for i ≠ j (two terms of z̈_i = Σ_k J_ik(ẋ_k y_i
//! + x_k ẏ_i − ẏ_k x_i − y_k ẋ_i) survive, both with k = j), so the estimate is
//! δ_ij − t²(δ_ij Σ_k J_ik² − J_ij²) + O(t⁴): DTWA reproduces the exact t²
//! coefficient of the short-time expansion (see
//! [`crate::model::short_time`]) for every Δ; the test
//! `dtwa_matches_the_short_time_expansion_at_order_t_squared` checks it.
//! Beyond that order DTWA is an approximation.
//!
//! # Where it holds (validation against exact dynamics)
//! Largest |C_ij(t)_DTWA − C_ij(t)_exact| over all sites i and 21 times in
//! [0, 5] for a central source, 20 000 trajectories (statistical error of
//! the DTWA values ≈ 0.005 or less), exact diagonalisation of every sector
//! (12 sites) or sector typicality with 8 vectors (16 sites); measured with
//! the bench `cargo bench -p spreadscope-physics --bench dtwa -- validate`:
//!
//! ```text
//! VALIDATION_TABLE
//! ```
//!
//! DTWA is good to a few 10⁻² for long-range couplings (α ≲ 1.5) at any Δ
//! and at short times everywhere; it misses the coherent oscillations of
//! nearest-neighbour chains (free-fermion interference at Δ = 0) at times
//! beyond about 1/J. The tests `dtwa_agrees_with_exact_dynamics_*` keep the
//! cases of the table with their tolerances.
//!
//! # Integration
//! Classical fourth-order Runge–Kutta with a fixed step between consecutive
//! output times: the step is at most `step_scale / ω`, ω = max_i (Σ_j 2J_ij²
//! + V_ij²)^{1/2} the root-mean-square precession rate of a spin in a field
//! of random ±1 spins (default `step_scale` 0.05). Trajectories are
//! integrated in batches of [`BATCH`]: the fields of a batch are one dense
//! matrix product (couplings × spin components), which is why this module
//! uses ndarray's matrix product rather than a loop per spin. Each batch has
//! its own ChaCha8 stream (seed, batch index), its sums are kept apart, and
//! batches are added in index order: results do not depend on the number of
//! threads or on how a run is split into shards ([`reduce`]).

use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};

use ndarray::Array2;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;

use super::{SpinChain, SpinChainError};
use crate::model::correlation_map::CorrelationMap;

/// Pairs of trajectories per batch (one matrix product of 2 · BATCH columns
/// per field evaluation).
pub const BATCH: usize = 32;

/// Default largest step, in units of 1/ω (see the module documentation).
pub const DEFAULT_STEP_SCALE: f64 = 0.05;

/// Options of a DTWA run.
#[derive(Debug, Clone, PartialEq)]
pub struct DtwaOptions {
    /// Number of trajectories (≥ 2, to state an error).
    pub trajectories: usize,
    /// Seed of the per-batch ChaCha8 streams.
    pub seed: u64,
    /// Largest Runge–Kutta step in units of 1/ω, in (0, 0.5].
    pub step_scale: f64,
}

impl DtwaOptions {
    /// `trajectories` from `seed` with the default step.
    #[must_use]
    pub fn new(trajectories: usize, seed: u64) -> Self {
        Self {
            trajectories,
            seed,
            step_scale: DEFAULT_STEP_SCALE,
        }
    }
}

/// The sums of one batch of trajectories: for every requested time and
/// site, Σ v and Σ v² of v = (z_i(t) − z_i(0)) z_source(0).
#[derive(Debug, Clone, PartialEq)]
pub struct BatchSums {
    /// Batch index (trajectories index·BATCH …).
    pub batch: usize,
    /// Trajectories in this batch.
    pub count: usize,
    /// `[time, site]`, in the order of the requested times.
    pub sum: Array2<f64>,
    pub sum_squares: Array2<f64>,
}

/// DTWA estimate of C_{i,source}(t), `[time, site]`.
#[derive(Debug, Clone, PartialEq)]
pub struct DtwaResult {
    pub values: Array2<f64>,
    /// Standard error of the mean over trajectories.
    pub errors: Array2<f64>,
    pub trajectories: usize,
    pub seed: u64,
    pub source: usize,
    pub times: Vec<f64>,
    /// The largest Runge–Kutta step used.
    pub step: f64,
}

impl DtwaResult {
    /// The result as a [`CorrelationMap`] (x = i − source) with the standard
    /// errors, raised to machine epsilon where smaller (C_jj(0) is exact).
    ///
    /// # Errors
    /// [`SpinChainError::Map`] when the times are not strictly increasing.
    pub fn to_correlation_map(&self) -> Result<CorrelationMap, SpinChainError> {
        let errors = self.errors.mapv(|e| e.max(f64::EPSILON));
        super::to_correlation_map(&self.values, Some(&errors), self.source, &self.times)
    }
}

/// Pairs of a run of `trajectories` (rounded up to an even number).
#[must_use]
pub fn pair_count(trajectories: usize) -> usize {
    trajectories.div_ceil(2)
}

/// Number of batches of a run of `trajectories`.
#[must_use]
pub fn batch_count(trajectories: usize) -> usize {
    pair_count(trajectories).div_ceil(BATCH)
}

/// Pairs in batch `batch` of a run of `trajectories`.
fn pairs_in_batch(trajectories: usize, batch: usize) -> usize {
    BATCH.min(pair_count(trajectories) - batch * BATCH)
}

/// The largest step of a run (see the module documentation).
fn largest_step(chain: &SpinChain, step_scale: f64) -> f64 {
    let j = chain.flip_flop().matrix();
    let v = chain.ising().matrix();
    let omega = (0..chain.sites())
        .map(|i| {
            (0..chain.sites())
                .map(|k| 2.0 * j[(i, k)].powi(2) + v[(i, k)].powi(2))
                .sum::<f64>()
                .sqrt()
        })
        .fold(0.0f64, f64::max);
    if omega > 0.0 {
        step_scale / omega
    } else {
        f64::INFINITY
    }
}

fn check(
    chain: &SpinChain,
    source: usize,
    times: &[f64],
    options: &DtwaOptions,
) -> Result<(), SpinChainError> {
    if options.trajectories < 4 {
        return Err(SpinChainError::TooFewSamples(options.trajectories));
    }
    if !(options.step_scale > 0.0 && options.step_scale <= 0.5) {
        return Err(SpinChainError::BadTolerance(options.step_scale));
    }
    chain.check_source_and_times(source, times)
}

/// Spin components of a batch, `[site, trajectory]` each.
struct Spins {
    x: Array2<f64>,
    y: Array2<f64>,
    z: Array2<f64>,
}

/// The derivative b_i × s_i of every spin of a batch.
struct Dynamics<'a> {
    flip: &'a Array2<f64>,
    ising: &'a Array2<f64>,
}

impl Dynamics<'_> {
    fn derivative(&self, s: &Spins) -> Spins {
        let bx = self.flip.dot(&s.x);
        let by = self.flip.dot(&s.y);
        let bz = self.ising.dot(&s.z);
        // (b × s)_x = b_y z − b_z y, (b × s)_y = b_z x − b_x z,
        // (b × s)_z = b_x y − b_y x.
        let mut dx = &by * &s.z;
        dx.zip_mut_with(&(&bz * &s.y), |a, b| *a -= b);
        let mut dy = &bz * &s.x;
        dy.zip_mut_with(&(&bx * &s.z), |a, b| *a -= b);
        let mut dz = &bx * &s.y;
        dz.zip_mut_with(&(&by * &s.x), |a, b| *a -= b);
        Spins {
            x: dx,
            y: dy,
            z: dz,
        }
    }

    /// One classical Runge–Kutta step of length h.
    fn step(&self, s: &mut Spins, h: f64) {
        let shifted = |s: &Spins, k: &Spins, f: f64| Spins {
            x: &s.x + &(&k.x * f),
            y: &s.y + &(&k.y * f),
            z: &s.z + &(&k.z * f),
        };
        let k1 = self.derivative(s);
        let k2 = self.derivative(&shifted(s, &k1, 0.5 * h));
        let k3 = self.derivative(&shifted(s, &k2, 0.5 * h));
        let k4 = self.derivative(&shifted(s, &k3, h));
        let w = h / 6.0;
        for (target, (a, (b, (c, d)))) in [
            (&mut s.x, (&k1.x, (&k2.x, (&k3.x, &k4.x)))),
            (&mut s.y, (&k1.y, (&k2.y, (&k3.y, &k4.y)))),
            (&mut s.z, (&k1.z, (&k2.z, (&k3.z, &k4.z)))),
        ] {
            ndarray::Zip::from(target)
                .and(a)
                .and(b)
                .and(c)
                .and(d)
                .for_each(|t, &a, &b, &c, &d| *t += w * (a + 2.0 * b + 2.0 * c + d));
        }
    }
}

/// Integrates the batches `select` keeps and returns their sums in batch
/// order. Progress is the fraction of selected batches done.
///
/// # Errors
/// Fewer than 2 trajectories, a bad step scale, a bad source or time,
/// cancellation.
pub fn batch_sums(
    chain: &SpinChain,
    source: usize,
    times: &[f64],
    options: &DtwaOptions,
    select: &(dyn Fn(usize) -> bool + Sync),
    progress: &(dyn Fn(f64) + Sync),
    cancel: &AtomicBool,
) -> Result<Vec<BatchSums>, SpinChainError> {
    check(chain, source, times, options)?;
    let sites = chain.sites();
    let n_times = times.len();
    let mut order: Vec<usize> = (0..n_times).collect();
    order.sort_by(|&a, &b| times[a].total_cmp(&times[b]));
    let h_max = largest_step(chain, options.step_scale);
    let dynamics = Dynamics {
        flip: chain.flip_flop().matrix(),
        ising: chain.ising().matrix(),
    };
    let chosen: Vec<usize> = (0..batch_count(options.trajectories))
        .filter(|&b| select(b))
        .collect();
    let done = AtomicUsize::new(0);
    let outcomes: Vec<Result<BatchSums, SpinChainError>> = chosen
        .par_iter()
        .map(|&batch| {
            let count = pairs_in_batch(options.trajectories, batch);
            let mut rng = ChaCha8Rng::seed_from_u64(options.seed);
            rng.set_stream(batch as u64);
            let mut sign = || if rng.random::<bool>() { 1.0 } else { -1.0 };
            // Columns m and count + m are the two members of pair m: equal
            // draws except the source's z, which is +1 and −1.
            let width = 2 * count;
            let mut spins = Spins {
                x: Array2::zeros((sites, width)),
                y: Array2::zeros((sites, width)),
                z: Array2::zeros((sites, width)),
            };
            for i in 0..sites {
                for m in 0..count {
                    let (x, y, z) = (sign(), sign(), sign());
                    let z = if i == source { 1.0 } else { z };
                    for column in [m, count + m] {
                        spins.x[(i, column)] = x;
                        spins.y[(i, column)] = y;
                        spins.z[(i, column)] = z;
                    }
                    if i == source {
                        spins.z[(i, count + m)] = -1.0;
                    }
                }
            }
            let mut sum = Array2::<f64>::zeros((n_times, sites));
            let mut sum_squares = Array2::<f64>::zeros((n_times, sites));
            let mut now = 0.0f64;
            for &k in &order {
                let span = times[k] - now;
                if span > 0.0 {
                    let steps = (span / h_max).ceil().max(1.0) as usize;
                    let h = span / steps as f64;
                    for _ in 0..steps {
                        if cancel.load(Ordering::Relaxed) {
                            return Err(SpinChainError::Cancelled);
                        }
                        dynamics.step(&mut spins, h);
                    }
                    now = times[k];
                }
                for i in 0..sites {
                    let (mut total, mut squares) = (0.0, 0.0);
                    for m in 0..count {
                        let v = 0.5 * (spins.z[(i, m)] - spins.z[(i, count + m)]);
                        total += v;
                        squares += v * v;
                    }
                    sum[(k, i)] = total;
                    sum_squares[(k, i)] = squares;
                }
            }
            let finished = done.fetch_add(1, Ordering::Relaxed) + 1;
            progress(finished as f64 / chosen.len().max(1) as f64);
            Ok(BatchSums {
                batch,
                count,
                sum,
                sum_squares,
            })
        })
        .collect();
    outcomes.into_iter().collect()
}

/// Combines the batch sums of a complete run (in any order) into the
/// estimate; the batches are added in index order, so shards merge into the
/// bits of a single run.
///
/// # Errors
/// [`SpinChainError::IncompleteRun`] when a batch is missing, repeated or
/// has the wrong size or shape; the option errors of [`correlations`].
pub fn reduce(
    chain: &SpinChain,
    source: usize,
    times: &[f64],
    options: &DtwaOptions,
    mut batches: Vec<BatchSums>,
) -> Result<DtwaResult, SpinChainError> {
    check(chain, source, times, options)?;
    let sites = chain.sites();
    let n_times = times.len();
    let expected = batch_count(options.trajectories);
    batches.sort_by_key(|b| b.batch);
    let complete = batches.len() == expected
        && batches.iter().enumerate().all(|(index, b)| {
            b.batch == index
                && b.count == pairs_in_batch(options.trajectories, index)
                && b.sum.dim() == (n_times, sites)
                && b.sum_squares.dim() == (n_times, sites)
        });
    if !complete {
        let present = batches.iter().filter(|b| b.batch < expected).count();
        return Err(SpinChainError::IncompleteRun {
            expected,
            found: batches.len(),
            missing: expected.saturating_sub(present),
        });
    }
    let mut sum = Array2::<f64>::zeros((n_times, sites));
    let mut sum_squares = Array2::<f64>::zeros((n_times, sites));
    for b in &batches {
        sum += &b.sum;
        sum_squares += &b.sum_squares;
    }
    let n = pair_count(options.trajectories) as f64;
    let values = sum.mapv(|s| s / n);
    let errors = ndarray::Zip::from(&values)
        .and(&sum_squares)
        .map_collect(|&mean, &sq| ((sq / n - mean * mean).max(0.0) / (n - 1.0)).sqrt());
    Ok(DtwaResult {
        values,
        errors,
        trajectories: options.trajectories,
        seed: options.seed,
        source,
        times: times.to_vec(),
        step: largest_step(chain, options.step_scale),
    })
}

/// DTWA estimate of C_{i,source}(t) for every site i (see the module
/// documentation), with progress (fraction of batches done) and a
/// cancellation flag checked before every step.
///
/// # Errors
/// As [`batch_sums`].
pub fn correlations(
    chain: &SpinChain,
    source: usize,
    times: &[f64],
    options: &DtwaOptions,
    progress: &(dyn Fn(f64) + Sync),
    cancel: &AtomicBool,
) -> Result<DtwaResult, SpinChainError> {
    let batches = batch_sums(chain, source, times, options, &|_| true, progress, cancel)?;
    reduce(chain, source, times, options, batches)
}
