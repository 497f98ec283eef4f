//! Shot records of random product initial states and the estimator that
//! turns them into the infinite-temperature correlation C_ij(t) and the map
//! C(x,t), with errors from a bootstrap over initial states.
//!
//! Owns: the aggregated form of raw single shots ([`ShotAccumulator`] while
//! reading, [`ShotRecords`] when complete), the connected estimator, the
//! readout-error inversion, the bootstrap, the source window, the reflection
//! symmetrisation, the sum rule and the optional renormalisation. Must not
//! know: files, formats or line numbers (the ingest layer validates those and
//! names the place), HTTP or the database.
//!
//! # Conventions
//! A bit is 1 for spin up, s = 2·bit − 1 = ±1; site 0 is the first bit.
//! C_ij(t) = 2^-N Tr[σᶻ_i(t) σᶻ_j]: i is the probe measured at time t, j the
//! source prepared at time 0. C(x,t) = C_{j+x,j}(t) for one source j or the
//! mean over the sources j of a window.
//!
//! # Sufficient statistics
//! A shot is (initial state, time, measured bits). For the estimator below
//! only the per-state mean of each measured spin matters, so the records keep,
//! for every (state, time) that occurs, the number of shots and the number of
//! up readings at every site: memory is (occupied (state, time) pairs) × sites
//! counters — at most states × times × sites — and independent of the number
//! of shots.
//!
//! # Why the estimator equals 2^-N Tr[σᶻ_i(t) σᶻ_j]
//! A shot starts from the basis state |s⟩, s ∈ {±1}^N, evolves to e^{−iHt}|s⟩
//! and measures every σᶻ. By the Born rule the reading m_i = ±1 of site i has
//! conditional mean E[m_i | s] = ⟨s|σᶻ_i(t)|s⟩ =: f_i(s), with
//! σᶻ_i(t) = e^{iHt} σᶻ_i e^{−iHt}. The mean X_i(s) of m_i over the S_s ≥ 1
//! shots of state s is therefore an unbiased estimate of f_i(s), whatever S_s.
//! Let s be drawn uniformly from the 2^N basis states: the mixture
//! Σ_s 2^-N |s⟩⟨s| = 2^-N 𝟙 is the infinite-temperature state. Because
//! σᶻ_j|s⟩ = s_j|s⟩,
//!
//!   E_s[f_i(s) s_j] = 2^-N Σ_s ⟨s|σᶻ_i(t) σᶻ_j|s⟩ = 2^-N Tr[σᶻ_i(t) σᶻ_j] = C_ij(t),
//!
//! while E_s[f_i(s)] = 2^-N Tr σᶻ_i(t) = 2^-N Tr σᶻ_i = 0 (cyclic trace) and
//! E_s\[s_j\] = 0. Hence Cov(X_i, s_j) = E\[X_i s_j\] − E\[X_i\] E\[s_j\] = C_ij(t):
//! shot noise has zero mean given s, so it adds variance but no bias. Over
//! the M states measured at time t the estimate is the sample covariance with
//! the unbiased divisor,
//!
//!   Ĉ_ij(t) = M/(M−1) · [ mean(X_i s_j) − mean(X_i) mean(s_j) ],
//!
//! whose expectation is exactly Cov(X_i, s_j) (the divisor M would bias it by
//! the factor (M−1)/M). The subtracted product of means vanishes in
//! expectation but cancels the finite-sample imbalance of the sampled states
//! and any constant offset of X_i — in particular the offset of readout error
//! below — which is why the connected form is used (common practice).
//!
//! Weighting: every state counts once, through the mean over its own shots.
//! The target is the uniform average over states, so equal weights are
//! unbiased however the shots are distributed; weighting by shot count would
//! bias the result whenever the number of kept shots depends on the state
//! (losses, post-selection). When all states have the same number of shots
//! the two weightings coincide.
//!
//! # Errors: bootstrap over initial states
//! Shots of one state share that state and are not independent draws of the
//! ensemble; the spread of f_i(s) over states usually dominates the error
//! (a single run's s_j m_i has variance 1 − C², the physics notes). The error bars
//! therefore come from resampling the states with replacement (Efron &
//! Tibshirani, "An Introduction to the Bootstrap", 1993, ch. 6), with one
//! draw shared by all times so that correlations between times and pairs are
//! kept, and with everything recomputed in each replicate: the readout
//! calibration from time-zero shots, the window average, the sum rule and the
//! renormalisation. The reported error is the standard deviation of the
//! replicates around the point estimate; the reported value is the point
//! estimate itself. Replicate draws come from [`seeded_rng`] with the seed
//! recorded in the result, so every number is reproducible.
//!
//! The draws pick states by their place in a canonical order (initial bits,
//! then the counts at each time; see [`ShotAccumulator::finish`]), never by
//! the index a file gave them, and every sum over states runs in that order.
//! The same shots therefore give bit-identical values and errors for one
//! seed whether a file numbers its states by first appearance (CSV) or by
//! row of an initial-state array (NPZ, HDF5). Drawing by declared index
//! would send a seed's draws to different states under another numbering;
//! with few states one numbering can then miss, in every replicate, the only
//! state whose source bit differs, so every replicate gives C = 0 at that
//! source and the spread is zero while the other numbering has a spread.
//!
//! # Readout correction
//! Let p01 = p(0|1), the probability to read 0 when the spin is up, and
//! p10 = p(1|0), to read 1 when it is down. For a true spin s and the reading
//! m = ±1: E[m | s = +1] = 1 − 2 p01 and E[m | s = −1] = −1 + 2 p10, so
//!
//!   E[m | s] = a + b s,  a = p10 − p01,  b = 1 − p01 − p10,
//!
//! and ŝ = (m − a)/b is an unbiased estimator of s whenever b > 0 (readout
//! better than guessing). Only the probe spin, read at time t, is corrected:
//! the source spin s_j(0) is the prepared value, not a reading. In the
//! connected covariance the offset a cancels exactly, so the corrected
//! estimate is Ĉ_ij / b_i, and uncorrected data are scaled by
//! b_i = 1 − p01 − p10 (1 − 2e for a symmetric error e).
//! The rule of thumb "(1 − 2e)²" (physics notes, common practice) holds when the
//! recorded initial bits are also wrong with probability e (symmetric
//! preparation error): with recorded bits r and true bits s,
//! E[r_j | s] = (1 − 2e) s_j, so Cov(f_i(s), r_j) = (1 − 2e) C_ij as well.
//!
//! Calibration from time-zero shots: at t = 0, f_i(s) = s_i, so p10_i is the
//! fraction of up readings among the t = 0 shots of states whose bit i is 0
//! and p01_i the fraction of down readings among those whose bit i is 1
//! (per site, or pooled over sites for a global pair). These rates contain
//! any preparation error too: for symmetric preparation error the time-zero
//! factor is b_prep · b_read, exactly the factor multiplying C, so dividing
//! by it corrects both. An asymmetric preparation error biases the ensemble
//! itself away from infinite temperature and is not undone by any linear
//! correction. Given probabilities are treated as exact; probabilities
//! calibrated from time-zero shots are re-estimated in every bootstrap
//! replicate, which propagates their uncertainty.
//!
//! # Sum rule, losses and renormalisation
//! Under U(1) symmetry Σ_i C_ij(t) = 2^-N Tr[M_z(t) σᶻ_j] = 2^-N Tr[M_z σᶻ_j] = 1
//! for every source j (M_z = Σ_i σᶻ_i is conserved). The reported sum is
//! S(t) = mean over the window's sources of Σ_i C_ij(t), the whole column of
//! each source (for a single source this is Σ_x C(x,t) of the map). Atom
//! losses and uncorrected readout error make S(t) < 1; a departure beyond
//! three bootstrap standard deviations is reported as a warning. The check
//! is weaker than it looks: the column sum adds N − 1 cross-covariances that
//! vanish on average but each carry sampling noise of about 1/√M, so the
//! error of S is about √(N/M) (0.2 for 40 sites and 1000 states), far larger
//! than the error of one C_ij.
//! Renormalisation, when asked for, divides the map at each time by S(t) and
//! stores the factor 1/S(t); the pair tensor C_ij(t) is never renormalised.
//!
//! # Window and symmetrisation
//! For sources A..=B the offsets run from −B to N−1−A; each offset averages
//! the sources j with 0 ≤ j + x < N, and the (source, offset) pairs falling
//! outside the chain are skipped and counted. Reflection symmetrisation
//! replaces C(x) by (C(x) + C(−x))/2 on the offsets that have a mirror image
//! (|x| ≤ min(B, N−1−A)) and drops the others, so that the result is exactly
//! symmetric; the number dropped is recorded.

use std::collections::HashMap;
use std::collections::hash_map::Entry;

use ndarray::{Array2, Array3};
use rayon::prelude::*;
use thiserror::Error;

use crate::model::correlation_map::{CorrelationMap, MapError};
use crate::numerics::stats::{resample_indices_into, seeded_rng};

mod readout;
mod records;
/// Largest chain the records accept: far above any analog simulator, and
/// small enough that one shot row is a few kilobytes.
mod window;

use readout::{Plan, calibrate, contrast, plan_for};
pub use readout::{readout_contrast, symmetric_readout_error};
use records::Cell;
pub use records::{ShotAccumulator, ShotRecords};
use window::Geometry;

pub const MAX_SITES: usize = 4096;

/// Largest number of per-site counters ((state, time) pairs × sites) the
/// records may hold: 2^27 counters of 4 bytes are 512 MiB.
pub const MAX_COUNTERS: usize = 1 << 27;

/// Replicates used when the caller does not say: enough for errors good to
/// about 1/√(2·200) = 5 % (Efron & Tibshirani 1993, §6.4).
pub const DEFAULT_REPLICATES: usize = 200;

/// Why shots could not be recorded or estimated.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum ShotError {
    #[error("a chain of {0} sites is not supported (1 to {MAX_SITES})")]
    BadSites(usize),
    #[error("{what} have {got} bits, expected {expected} (one per site)")]
    Length {
        what: &'static str,
        expected: usize,
        got: usize,
    },
    #[error("state {0} was never declared")]
    UnknownState(usize),
    #[error("time {0} is negative or not finite")]
    BadTime(f64),
    #[error(
        "the shots need more than {MAX_COUNTERS} counters ((state, time) pairs × sites); \
         split the file by time"
    )]
    TooManyCounters,
    #[error("more than {} shots for one state at one time", u32::MAX)]
    TooManyShots,
    #[error("there are no shots")]
    NoShots,
    #[error("source site {source_site} is outside the chain of {sites} sites (0-based)")]
    SourceOutOfRange { source_site: usize, sites: usize },
    #[error("source window {first}..={last} is empty or outside the chain of {sites} sites")]
    BadWindow {
        first: usize,
        last: usize,
        sites: usize,
    },
    #[error(
        "time {t}: only {states} initial state(s) were measured; a covariance over \
         states needs at least 2"
    )]
    TooFewStates { t: f64, states: usize },
    #[error(
        "time {t}: source site {site} has the same initial bit in every state measured \
         then, so its correlations cannot be estimated"
    )]
    ConstantSource { t: f64, site: usize },
    #[error("readout: {0}")]
    Readout(String),
    #[error(
        "readout calibration from time-zero shots was asked for, but no shot was taken \
         at t = 0"
    )]
    NoTimeZero,
    #[error("the bootstrap needs at least 2 replicates, got {0}")]
    TooFewReplicates(usize),
    #[error("result is not a valid correlation map: {0}")]
    Map(#[from] MapError),
}

/// Which sources C(x,t) is formed from.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "snake_case")]
pub enum SourceWindow {
    /// One source site j (0-based).
    Single(usize),
    /// The mean over the sources first..=last.
    Bulk { first: usize, last: usize },
    /// The single source (N − 1)/2 (rounded down): the middle site, or the
    /// left of the two middle sites of an even chain.
    Central,
}

impl SourceWindow {
    /// The window as an inclusive range of sources on a chain of `sites`.
    ///
    /// # Errors
    /// A source outside the chain or an empty window.
    pub fn resolve(self, sites: usize) -> Result<(usize, usize), ShotError> {
        match self {
            Self::Single(j) if j < sites => Ok((j, j)),
            Self::Single(j) => Err(ShotError::SourceOutOfRange {
                source_site: j,
                sites,
            }),
            Self::Bulk { first, last } if first <= last && last < sites => Ok((first, last)),
            Self::Bulk { first, last } => Err(ShotError::BadWindow { first, last, sites }),
            Self::Central => Ok(((sites - 1) / 2, (sites - 1) / 2)),
        }
    }
}

/// Readout-error handling; probabilities as in the module documentation
/// (p01 = p(0|1), reading down when up; p10 = p(1|0), reading up when down).
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Readout {
    /// No correction.
    None,
    /// One pair for every site.
    Global { p01: f64, p10: f64 },
    /// One pair per site.
    PerSite { p01: Vec<f64>, p10: Vec<f64> },
    /// Calibrated from the t = 0 shots, per site or pooled over sites.
    FromTimeZero { per_site: bool },
}

/// Settings of [`estimate`].
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct EstimateOptions {
    pub window: SourceWindow,
    pub readout: Readout,
    /// Replace C(x) by (C(x) + C(−x))/2.
    pub symmetrise: bool,
    /// Divide the map at each time by its sum rule S(t).
    pub renormalise: bool,
    /// Bootstrap replicates (≥ 2).
    pub replicates: usize,
    pub seed: u64,
}

impl Default for EstimateOptions {
    fn default() -> Self {
        Self {
            window: SourceWindow::Central,
            readout: Readout::None,
            symmetrise: false,
            renormalise: false,
            replicates: DEFAULT_REPLICATES,
            seed: 0,
        }
    }
}

/// C_ij(t) for every probe i and source j, `[time, i, j]`, with bootstrap
/// errors; readout-corrected when a correction was asked for, never
/// renormalised.
#[derive(Debug, Clone, PartialEq)]
pub struct PairCorrelations {
    pub times: Vec<f64>,
    pub values: Array3<f64>,
    pub errors: Array3<f64>,
}

/// The sum rule at one time: S(t) = mean over the window's sources of
/// Σ_i C_ij(t), with its bootstrap error.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct SumRuleEstimate {
    pub t: f64,
    pub sum: f64,
    pub err: f64,
    /// |S − 1| > 3 err.
    pub departs: bool,
    /// The factor 1/S(t) applied to the map, when renormalising.
    pub factor: Option<f64>,
    pub factor_err: Option<f64>,
}

/// The readout correction that was applied.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct ReadoutApplied {
    /// "given" or "time-zero shots".
    pub origin: &'static str,
    pub per_site: bool,
    pub p01: Vec<f64>,
    pub p10: Vec<f64>,
    /// Bootstrap errors of the calibrated probabilities (`None` when given).
    pub p01_err: Option<Vec<f64>>,
    pub p10_err: Option<Vec<f64>>,
    /// b_i = 1 − p01_i − p10_i, the factor divided out of C_ij.
    pub contrast: Vec<f64>,
}

/// What was done, for the provenance of a pinned result.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct EstimateProvenance {
    pub estimator: &'static str,
    pub convention: &'static str,
    pub options: EstimateOptions,
    /// The window resolved to sources first..=last.
    pub sources: (usize, usize),
    pub states: usize,
    pub shots: u64,
    /// (source, offset) pairs of the offset range that fall outside the chain.
    pub skipped_pairs: usize,
    /// Offsets dropped by symmetrisation because their mirror is missing.
    pub dropped_offsets: usize,
    /// Bootstrap replicates that failed (too few states drawn at some time,
    /// or a calibration that could not be formed) and were left out.
    pub failed_replicates: usize,
}

/// The result of [`estimate`].
#[derive(Debug, Clone)]
pub struct ShotEstimate {
    /// C(x,t) with bootstrap errors (renormalised when asked for). Points
    /// whose bootstrap spread is exactly zero are masked out with a warning.
    pub map: CorrelationMap,
    /// Number of (source, offset) pairs averaged at each offset of the map:
    /// the sources with 0 ≤ j + x < N, counted at x and −x when symmetrised.
    pub sources_per_offset: Vec<usize>,
    pub pairs: PairCorrelations,
    pub sum_rule: Vec<SumRuleEstimate>,
    pub readout: Option<ReadoutApplied>,
    pub states_per_time: Vec<usize>,
    pub shots_per_time: Vec<u64>,
    pub warnings: Vec<String>,
    pub provenance: EstimateProvenance,
}

/// One evaluation of everything on one set of state weights.
struct Evaluation {
    /// Per time, C_ij corrected, `[i, j]`; `None` when fewer than 2 states.
    pairs: Vec<Option<Array2<f64>>>,
    /// Per-site probabilities used, when calibrated.
    calibration: Option<(Vec<f64>, Vec<f64>)>,
}

/// Running sums of deviations from the point estimate, per quantity.
struct Spread {
    sum: Vec<f64>,
    sum_sq: Vec<f64>,
    n: Vec<u32>,
}

impl Spread {
    fn new(len: usize) -> Self {
        Self {
            sum: vec![0.0; len],
            sum_sq: vec![0.0; len],
            n: vec![0; len],
        }
    }

    fn add(&mut self, index: usize, value: f64, centre: f64) {
        let d = value - centre;
        if d.is_finite() {
            self.sum[index] += d;
            self.sum_sq[index] += d * d;
            self.n[index] += 1;
        }
    }

    /// Sample standard deviation of the replicates (n − 1 divisor),
    /// computed from deviations about the point estimate so that no
    /// cancellation occurs; NaN with fewer than 2 replicates.
    fn std(&self, index: usize) -> f64 {
        let n = f64::from(self.n[index]);
        if n < 2.0 {
            return f64::NAN;
        }
        let s = self.sum[index];
        ((self.sum_sq[index] - s * s / n).max(0.0) / (n - 1.0)).sqrt()
    }
}

/// The unbiased weighted covariance over states at one time,
/// C_ij = (Σ w X_i s_j − (Σ w X_i)(Σ w s_j)/W)/(W − 1), W = Σ w, with
/// X_i = 2·ups/shots − 1 the state's mean reading and s_j = ±1 its initial
/// spin. `None` when W < 2.
fn raw_covariance(records: &ShotRecords, ti: usize, weights: &[u32]) -> Option<Array2<f64>> {
    let n = records.sites;
    let cells: Vec<(Cell, f64)> = records.cells[ti]
        .iter()
        .filter_map(|c| {
            let w = weights[c.state as usize];
            (w > 0).then_some((*c, f64::from(w)))
        })
        .collect();
    let total: f64 = cells.iter().map(|(_, w)| w).sum();
    if total < 2.0 {
        return None;
    }
    let rows = cells.len();
    let mut weighted = Array2::<f64>::zeros((rows, n));
    let mut spins = Array2::<f64>::zeros((rows, n));
    for (r, (cell, w)) in cells.iter().enumerate() {
        let ups = &records.ups[cell.offset..cell.offset + n];
        let scale = 2.0 / f64::from(cell.shots);
        for i in 0..n {
            weighted[(r, i)] = w * (scale * f64::from(ups[i]) - 1.0);
            spins[(r, i)] = 2.0 * f64::from(records.bit(cell.state, i)) - 1.0;
        }
    }
    let weight_col = ndarray::Array1::from_iter(cells.iter().map(|(_, w)| *w));
    let sum_x = weighted.sum_axis(ndarray::Axis(0));
    let sum_s = weight_col.dot(&spins);
    let mut c = weighted.t().dot(&spins);
    for i in 0..n {
        for j in 0..n {
            c[(i, j)] = (c[(i, j)] - sum_x[i] * sum_s[j] / total) / (total - 1.0);
        }
    }
    Some(c)
}

fn evaluate(records: &ShotRecords, plan: &Plan, weights: &[u32]) -> Result<Evaluation, String> {
    let calibration = match plan {
        Plan::None => None,
        Plan::Fixed { p01, p10 } => Some((p01.clone(), p10.clone())),
        Plan::TimeZero { per_site } => Some(calibrate(records, 0, *per_site, weights)?),
    };
    let contrast = calibration.as_ref().map(|(a, b)| contrast(a, b));
    if let Some(b) = &contrast {
        if let Some((i, v)) = b
            .iter()
            .enumerate()
            .find(|(_, v)| !(v.is_finite() && **v > 0.0))
        {
            return Err(format!(
                "site {i} has 1 − p(0|1) − p(1|0) = {v:.4} ≤ 0: its readout is no better \
                 than guessing and cannot be inverted"
            ));
        }
    }
    let pairs = (0..records.times.len())
        .into_par_iter()
        .map(|ti| {
            let mut c = raw_covariance(records, ti, weights)?;
            if let Some(b) = &contrast {
                for (i, mut row) in c.rows_mut().into_iter().enumerate() {
                    row /= b[i];
                }
            }
            Some(c)
        })
        .collect();
    Ok(Evaluation { pairs, calibration })
}

/// Estimates C_ij(t) and C(x,t) with bootstrap errors from shot records.
/// See the module documentation for the estimator, its derivation, the
/// readout inversion, the sum rule and the window.
///
/// Cost: (replicates + 1) × Σ_t M_t N² multiply-adds (M_t states at time t,
/// N sites), spread over the rayon pool across times.
///
/// # Errors
/// A bad window or readout specification, fewer than 2 replicates, a time
/// with fewer than 2 states, a source whose initial bit never varies at some
/// time, a readout calibration that cannot be formed or inverted, or a map
/// with no point left.
pub fn estimate(
    records: &ShotRecords,
    options: &EstimateOptions,
) -> Result<ShotEstimate, ShotError> {
    let n = records.sites;
    let (first, last) = options.window.resolve(n)?;
    if options.replicates < 2 {
        return Err(ShotError::TooFewReplicates(options.replicates));
    }
    for (ti, list) in records.cells.iter().enumerate() {
        let t = records.times[ti];
        if list.len() < 2 {
            return Err(ShotError::TooFewStates {
                t,
                states: list.len(),
            });
        }
        for site in first..=last {
            let b0 = records.bit(list[0].state, site);
            if list.iter().all(|c| records.bit(c.state, site) == b0) {
                return Err(ShotError::ConstantSource { t, site });
            }
        }
    }
    let plan = plan_for(&options.readout, records)?;
    let geometry = Geometry::new(n, first, last, options.symmetrise);
    let n_states = records.n_states();
    let ones = vec![1u32; n_states];
    let point = evaluate(records, &plan, &ones).map_err(ShotError::Readout)?;
    let point_pairs: Vec<Array2<f64>> = point
        .pairs
        .iter()
        .map(|c| c.clone().expect("every time has at least 2 states"))
        .collect();
    let derived = geometry.derive(&point.pairs, options.renormalise);

    let n_times = records.times.len();
    let n_offsets = geometry.offsets.len();
    let mut pair_spread = Spread::new(n_times * n * n);
    let mut map_spread = Spread::new(n_times * n_offsets);
    let mut sum_spread = Spread::new(n_times);
    let mut factor_spread = Spread::new(n_times);
    let mut calib_spread = Spread::new(2 * n);
    let mut failed = 0usize;
    let mut rng = seeded_rng(options.seed);
    let mut draw = Vec::with_capacity(n_states);
    let mut weights = vec![0u32; n_states];
    for _ in 0..options.replicates {
        resample_indices_into(n_states, &mut rng, &mut draw);
        weights.iter_mut().for_each(|w| *w = 0);
        // Draw k picks the state of canonical rank k, so a seed's replicates
        // do not depend on how the input numbered its states.
        for &k in &draw {
            weights[records.order[k] as usize] += 1;
        }
        let Ok(rep) = evaluate(records, &plan, &weights) else {
            failed += 1;
            continue;
        };
        if rep.pairs.iter().any(Option::is_none) {
            failed += 1;
        }
        let rep_derived = geometry.derive(&rep.pairs, options.renormalise);
        for (ti, c) in rep.pairs.iter().enumerate() {
            let Some(c) = c else { continue };
            let centre = &point_pairs[ti];
            for ((i, j), &v) in c.indexed_iter() {
                pair_spread.add((ti * n + i) * n + j, v, centre[(i, j)]);
            }
            for (xi, &v) in rep_derived.map[ti].iter().enumerate() {
                map_spread.add(ti * n_offsets + xi, v, derived.map[ti][xi]);
            }
            let (s, s0) = (rep_derived.sums[ti], derived.sums[ti]);
            sum_spread.add(ti, s, s0);
            factor_spread.add(ti, 1.0 / s, 1.0 / s0);
        }
        if let (Some((a, b)), Some((a0, b0))) = (&rep.calibration, &point.calibration) {
            for i in 0..n {
                calib_spread.add(i, a[i], a0[i]);
                calib_spread.add(n + i, b[i], b0[i]);
            }
        }
    }

    let mut warnings = Vec::new();
    if failed > 0 {
        warnings.push(format!(
            "{failed} of {} bootstrap replicates could not be evaluated at every time \
             and were left out where they failed",
            options.replicates
        ));
    }

    // The pair tensor.
    let mut values = Array3::<f64>::zeros((n_times, n, n));
    let mut errors = Array3::<f64>::zeros((n_times, n, n));
    for ti in 0..n_times {
        for i in 0..n {
            for j in 0..n {
                values[(ti, i, j)] = point_pairs[ti][(i, j)];
                errors[(ti, i, j)] = pair_spread.std((ti * n + i) * n + j);
            }
        }
    }

    // The map.
    let mut map_values = Array2::<f64>::zeros((n_times, n_offsets));
    let mut map_errors = Array2::<f64>::zeros((n_times, n_offsets));
    let mut present = Array2::from_elem((n_times, n_offsets), true);
    let mut masked = Vec::new();
    for ti in 0..n_times {
        for xi in 0..n_offsets {
            let err = map_spread.std(ti * n_offsets + xi);
            map_values[(ti, xi)] = derived.map[ti][xi];
            map_errors[(ti, xi)] = err;
            if !(err.is_finite() && err > 0.0 && derived.map[ti][xi].is_finite()) {
                present[(ti, xi)] = false;
                masked.push((records.times[ti], geometry.offsets[xi]));
            }
        }
    }
    if let Some((t, x)) = masked.first() {
        warnings.push(format!(
            "{} map point(s) have no bootstrap spread (a probe site read the same value \
             in every shot), e.g. t = {t}, x = {x}; they are masked out",
            masked.len()
        ));
    }
    let map = CorrelationMap::new(
        geometry.offsets.clone(),
        records.times.clone(),
        map_values,
        Some(map_errors),
        present,
    )?;

    // The sum rule.
    let sum_rule: Vec<SumRuleEstimate> = (0..n_times)
        .map(|ti| {
            let sum = derived.sums[ti];
            let err = sum_spread.std(ti);
            SumRuleEstimate {
                t: records.times[ti],
                sum,
                err,
                departs: (sum - 1.0).abs() > 3.0 * err,
                factor: options.renormalise.then(|| 1.0 / sum),
                factor_err: options.renormalise.then(|| factor_spread.std(ti)),
            }
        })
        .collect();
    let departing: Vec<&SumRuleEstimate> = sum_rule.iter().filter(|s| s.departs).collect();
    if let Some(worst) = departing.iter().max_by(|a, b| {
        ((a.sum - 1.0) / a.err)
            .abs()
            .total_cmp(&((b.sum - 1.0) / b.err).abs())
    }) {
        warnings.push(format!(
            "the sum rule Σ_x C(x,t) departs from 1 by more than 3σ at {} of {} times \
             (worst: {:.4} ± {:.4} at t = {}); losses or uncorrected readout error?{}",
            departing.len(),
            n_times,
            worst.sum,
            worst.err,
            worst.t,
            if options.renormalise {
                " The map was renormalised by 1/Σ."
            } else {
                ""
            }
        ));
    }

    let readout = point.calibration.as_ref().map(|(p01, p10)| {
        let calibrated = matches!(plan, Plan::TimeZero { .. });
        let per_site = match &options.readout {
            Readout::PerSite { .. } => true,
            Readout::FromTimeZero { per_site } => *per_site,
            _ => false,
        };
        ReadoutApplied {
            origin: if calibrated {
                "time-zero shots"
            } else {
                "given"
            },
            per_site,
            p01: p01.clone(),
            p10: p10.clone(),
            p01_err: calibrated.then(|| (0..n).map(|i| calib_spread.std(i)).collect()),
            p10_err: calibrated.then(|| (0..n).map(|i| calib_spread.std(n + i)).collect()),
            contrast: contrast(p01, p10),
        }
    });

    let dropped_offsets = geometry.raw_offsets.len() - geometry.offsets.len();
    Ok(ShotEstimate {
        map,
        sources_per_offset: geometry.sources_per_offset(),
        pairs: PairCorrelations {
            times: records.times.clone(),
            values,
            errors,
        },
        sum_rule,
        readout,
        states_per_time: records.states_per_time(),
        shots_per_time: records.shots_per_time(),
        warnings,
        provenance: EstimateProvenance {
            estimator: "connected covariance over initial states (unbiased M−1 divisor), \
                        each state weighted equally by the mean of its shots; errors by \
                        bootstrap over initial states",
            convention: "C_ij(t) = 2^-N Tr[σz_i(t) σz_j]; C(x,t) = C_{j+x,j}(t); bit 1 = up",
            options: options.clone(),
            sources: (first, last),
            states: n_states,
            shots: records.total_shots,
            skipped_pairs: geometry.skipped_pairs(),
            dropped_offsets,
            failed_replicates: failed,
        },
    })
}

#[cfg(test)]
mod tests;
