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
//! with random product initial states. Trajectories come in antithetic
//! pairs (a control variate, common practice): the two members share every
//! draw except the source's z, +1 in one and −1 in the other, and
//!
//! ```text
//! v_i(t) = (z_i⁺(t) − z_i⁻(t)) / 2,   E[v_i(t)] = E[z_i(t) z_j(0)],
//! ```
//!
//! is averaged over pairs. At t = 0, v_i = δ_ij exactly, and Σ_i v_i = 1 for
//! every pair (Σ_i z_i is conserved), so C_ij(0) = δ_ij and the sum rule
//! hold exactly, and the noise grows from zero as the members of a pair
//! drift apart instead of starting at O(1) for the products z_i(0) z_j(0).
//! `errors` is the standard error of the mean of v over pairs (its variance
//! from the sums of the values and of their squares).
//!
//! # Short times
//! Expanding to second order, with all components independent ±1,
//! E[z̈_i(0) z_j(0)] = 2J_ij² for i ≠ j (two terms of
//! z̈_i = Σ_k J_ik(ẋ_k y_i + x_k ẏ_i − ẏ_k x_i − y_k ẋ_i) survive, both with
//! k = j), so the estimate is
//! δ_ij − t²(δ_ij Σ_k J_ik² − J_ij²) + O(t⁴): DTWA reproduces the exact t²
//! coefficient of the short-time expansion (see
//! [`crate::model::short_time`]) for every Δ; the test
//! `dtwa_matches_the_short_time_expansion_at_order_t_squared` checks it.
//! Beyond that order DTWA is an approximation.
//!
//! # Where it holds (validation against exact dynamics)
//! Largest |C_i,source(t)_DTWA − C_i,source(t)_exact| over every site i and
//! 21 times in [0, 5] (J = 1, central source, 40 000 trajectories: the
//! statistical error of each DTWA value is at most 0.005), against exact
//! diagonalisation of every sector (12 sites) or sector typicality with 8
//! vectors (16 sites; its own error is about 0.001); measured with
//! `cargo run --release -p spreadscope-physics --example dtwa_validate`:
//!
//! ```text
//! sites  α      Δ     max |ΔC|   at t ≤ 1
//!   12   0.8    0     0.070      0.030
//!   12   1.2    0     0.076      0.015
//!   12   1.2    1     0.046      0.046
//!   12   1.2   −0.5   0.059      0.017
//!   12   2      0     0.076      0.020
//!   12   3      0.5   0.190      0.031
//!   12   NN     0     0.195      0.021
//!   12   NN     1     0.064      0.064
//!   16   0.8    0     0.066      0.036
//!   16   1.2    1     0.042      0.042
//!   16   NN     0     0.153      0.014
//! ```
//!
//! DTWA is good to about 0.05–0.08 (in units where C_jj(0) = 1) for couplings
//! up to α ≈ 2 at any Δ, and to a few 10⁻² for t ≤ 1/J everywhere; it misses
//! the coherent oscillations of short-range chains (α ≳ 3, nearest
//! neighbours at Δ = 0, whose free-fermion interference it cannot carry) by up
//! to 0.2 at later times. The test `dtwa_agrees_with_exact_dynamics_as_the_table_says`
//! keeps the 12-site cases with these figures plus four statistical errors.
//!
//! # Integration
//! Classical fourth-order Runge–Kutta with a fixed step between consecutive
//! output times: the step is at most `step_scale / ω`, with
//! ω = max_i (Σ_j 2J_ij² + V_ij²)^{1/2} the root-mean-square precession rate
//! of a spin in a field of random ±1 spins (default `step_scale` 0.05: on
//! 100 sites at α = 1.2 to t = 10 the values move by 3.5e-5 when the step is
//! made 4× finer, 6.5e-4 at twice the step; bench `dtwa`). Trajectories are
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
    /// Number of trajectories (≥ 4, to state an error; used in pairs).
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

/// The largest Runge–Kutta step of a run (see the module documentation).
#[must_use]
pub fn largest_step(chain: &SpinChain, step_scale: f64) -> f64 {
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
    if chain.sites() > super::MAX_DTWA_SITES {
        return Err(SpinChainError::TooLargeForDtwa {
            sites: chain.sites(),
            max: super::MAX_DTWA_SITES,
        });
    }
    if options.trajectories < 4 {
        return Err(SpinChainError::TooFewTrajectories(options.trajectories));
    }
    if !(options.step_scale > 0.0 && options.step_scale <= 0.5) {
        return Err(SpinChainError::BadStepScale(options.step_scale));
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
/// Too long a chain, fewer than 4 trajectories, a bad step scale, a bad source or time,
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

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::couplings::Couplings;
    use crate::model::short_time::ShortTimeExpansion;

    fn never() -> AtomicBool {
        AtomicBool::new(false)
    }

    fn power_chain(sites: usize, alpha: Option<f64>, delta: f64) -> (Couplings, SpinChain) {
        let couplings = match alpha {
            Some(a) => Couplings::power_law(sites, 1.0, a).expect("couplings"),
            None => {
                let mut m = Array2::<f64>::zeros((sites, sites));
                for i in 0..sites - 1 {
                    m[(i, i + 1)] = 1.0;
                    m[(i + 1, i)] = 1.0;
                }
                Couplings::from_matrix(m).expect("couplings")
            }
        };
        let chain = SpinChain::new(&couplings, delta).expect("chain");
        (couplings, chain)
    }

    #[test]
    fn dtwa_agrees_with_exact_dynamics_as_the_table_says() {
        // The 12-site rows of the module documentation's table (measured
        // with 40 000 trajectories): the largest deviation from exact
        // diagonalisation over every site and 21 times in [0, 5] must stay
        // within the measured figure plus four of this run's largest
        // statistical errors (4000 trajectories).
        let times: Vec<f64> = (0..=20).map(|k| 0.25 * f64::from(k)).collect();
        let table: [(Option<f64>, f64, f64); 5] = [
            (Some(0.8), 0.0, 0.070),
            (Some(1.2), 0.0, 0.076),
            (Some(1.2), 1.0, 0.046),
            (Some(3.0), 0.5, 0.190),
            (None, 0.0, 0.195),
        ];
        for (alpha, delta, measured) in table {
            let (_, chain) = power_chain(12, alpha, delta);
            let exact = chain.correlations_exact(5, &times).expect("exact");
            let dtwa = correlations(
                &chain,
                5,
                &times,
                &DtwaOptions::new(4000, 3),
                &|_| {},
                &never(),
            )
            .expect("dtwa");
            let worst = (&dtwa.values - &exact)
                .iter()
                .fold(0.0f64, |w, d| w.max(d.abs()));
            let sigma = dtwa.errors.iter().fold(0.0f64, |w, &e| w.max(e));
            assert!(
                worst <= measured + 4.0 * sigma,
                "α {alpha:?}, Δ {delta}: {worst} > {measured} + 4 × {sigma}"
            );
        }
    }

    #[test]
    fn dtwa_matches_the_short_time_expansion_at_order_t_squared() {
        // DTWA reproduces c2 = J_ij² − δ_ij S_i exactly (module
        // documentation); the short-time module's coefficients are checked
        // against brute-force dynamics in its own tests. At t = 0.05 the t⁴
        // terms are below 1e-5 here; the comparison allows them (DTWA's t⁴
        // coefficient is not exact) plus four statistical errors.
        let (couplings, chain) = power_chain(10, Some(1.1), 0.7);
        let expansion = ShortTimeExpansion::new(&couplings, 0.7).expect("expansion");
        let times = [0.0, 0.05];
        let dtwa = correlations(
            &chain,
            4,
            &times,
            &DtwaOptions::new(2000, 9),
            &|_| {},
            &never(),
        )
        .expect("dtwa");
        for i in 0..10 {
            let [c0, c2, c4] = expansion.coefficients(i, 4).expect("coefficients");
            assert!((dtwa.values[(0, i)] - c0).abs() < 1e-15, "C_{i}4(0)");
            let t: f64 = 0.05;
            let second_order = c0 + c2 * t * t;
            let allowance = 2.0 * c4.abs() * t.powi(4) + 4.0 * dtwa.errors[(1, i)] + 1e-12;
            assert!(
                (dtwa.values[(1, i)] - second_order).abs() <= allowance,
                "site {i}: {} vs {second_order} ± {allowance}",
                dtwa.values[(1, i)]
            );
            // And the t² term is really there, not lost in the allowance.
            if c2.abs() * t * t > 10.0 * allowance {
                assert!((dtwa.values[(1, i)] - c0).abs() > 0.5 * c2.abs() * t * t);
            }
        }
    }

    #[test]
    fn sum_rule_and_initial_condition_hold_for_every_run() {
        // Exact properties of the estimator (module documentation): C_ij(0)
        // = δ_ij and Σ_i C_ij(t) = 1, because every pair conserves Σ_i z_i.
        let (_, chain) = power_chain(9, Some(0.9), -0.4);
        let times = [0.0, 0.7, 3.0];
        let dtwa = correlations(
            &chain,
            2,
            &times,
            &DtwaOptions::new(64, 1),
            &|_| {},
            &never(),
        )
        .expect("dtwa");
        for i in 0..9 {
            let expected = if i == 2 { 1.0 } else { 0.0 };
            assert!((dtwa.values[(0, i)] - expected).abs() < 1e-15, "C_{i}2(0)");
        }
        for row in dtwa.values.rows() {
            assert!((row.sum() - 1.0).abs() < 1e-9, "Σ_i C = {}", row.sum());
        }
    }

    #[test]
    fn shards_merge_into_the_bits_of_one_run_whatever_the_threads() {
        // The shard contract (module documentation): batches computed apart,
        // in any order, on any number of threads, reduce to the same bits.
        let (_, chain) = power_chain(8, Some(1.3), 0.5);
        let times = [1.0, 0.2, 2.5];
        let options = DtwaOptions::new(300, 17);
        let whole = correlations(&chain, 3, &times, &options, &|_| {}, &never()).expect("run");
        let part = |k: usize| {
            batch_sums(
                &chain,
                3,
                &times,
                &options,
                &move |b| b % 3 == k,
                &|_| {},
                &never(),
            )
            .expect("shard")
        };
        let mut parts: Vec<BatchSums> = (0..3).rev().flat_map(part).collect();
        let merged = reduce(&chain, 3, &times, &options, parts.clone()).expect("merge");
        assert_eq!(merged, whole);
        let single = rayon::ThreadPoolBuilder::new()
            .num_threads(1)
            .build()
            .expect("pool")
            .install(|| correlations(&chain, 3, &times, &options, &|_| {}, &never()))
            .expect("run");
        assert_eq!(single, whole);
        parts.pop();
        let err = reduce(&chain, 3, &times, &options, parts).unwrap_err();
        assert!(
            matches!(err, SpinChainError::IncompleteRun { missing: 1, .. }),
            "{err}"
        );
    }

    #[test]
    fn refuses_what_it_cannot_do_and_stops_when_cancelled() {
        let (_, chain) = power_chain(6, Some(1.0), 0.0);
        let run = |options: &DtwaOptions, cancel: &AtomicBool| {
            correlations(&chain, 2, &[0.5, 1.0], options, &|_| {}, cancel)
        };
        assert!(matches!(
            run(&DtwaOptions::new(3, 0), &never()),
            Err(SpinChainError::TooFewTrajectories(3))
        ));
        let mut bad_step = DtwaOptions::new(16, 0);
        bad_step.step_scale = 0.9;
        assert!(matches!(
            run(&bad_step, &never()),
            Err(SpinChainError::BadStepScale(_))
        ));
        let cancelled = AtomicBool::new(true);
        assert!(matches!(
            run(&DtwaOptions::new(16, 0), &cancelled),
            Err(SpinChainError::Cancelled)
        ));
    }
}
