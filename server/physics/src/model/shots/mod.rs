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

/// Largest chain the records accept: far above any analog simulator, and
/// small enough that one shot row is a few kilobytes.
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

/// Collects shots one at a time (streaming) into per-(state, time) counters.
/// Callers validate the text; this type checks only lengths, indices and
/// times, and keeps memory independent of the number of shots.
#[derive(Debug, Clone)]
pub struct ShotAccumulator {
    sites: usize,
    /// Initial bits, states × sites, each 0 or 1.
    init: Vec<u8>,
    /// Distinct times in order of first appearance.
    times: Vec<f64>,
    time_index: HashMap<u64, u32>,
    /// (state, time index) → cell.
    cell_index: HashMap<(u32, u32), u32>,
    /// (state, time index) of every cell.
    cell_keys: Vec<(u32, u32)>,
    /// Shots per cell.
    shots: Vec<u32>,
    /// Up readings per cell and site, cells × sites.
    ups: Vec<u32>,
    /// The last (state, time bits) seen and its cell: consecutive shots of one
    /// state and time, the usual file order, skip both hash look-ups.
    last: Option<((u32, u64), u32)>,
    total_shots: u64,
}

impl ShotAccumulator {
    /// An empty accumulator for a chain of `sites` sites.
    ///
    /// # Errors
    /// [`ShotError::BadSites`] for 0 or more than [`MAX_SITES`] sites.
    pub fn new(sites: usize) -> Result<Self, ShotError> {
        if sites == 0 || sites > MAX_SITES {
            return Err(ShotError::BadSites(sites));
        }
        Ok(Self {
            sites,
            init: Vec::new(),
            times: Vec::new(),
            time_index: HashMap::new(),
            cell_index: HashMap::new(),
            cell_keys: Vec::new(),
            shots: Vec::new(),
            ups: Vec::new(),
            last: None,
            total_shots: 0,
        })
    }

    #[must_use]
    pub fn sites(&self) -> usize {
        self.sites
    }

    /// Number of initial states declared so far.
    #[must_use]
    pub fn n_states(&self) -> usize {
        self.init.len() / self.sites
    }

    /// Declares an initial state and returns its index. Each byte's lowest
    /// bit is the bit (so both 0/1 values and ASCII `'0'`/`'1'` work); the
    /// caller has checked that the bytes are bits.
    ///
    /// # Errors
    /// [`ShotError::Length`] when `bits` does not have one entry per site.
    pub fn add_state(&mut self, bits: &[u8]) -> Result<usize, ShotError> {
        if bits.len() != self.sites {
            return Err(ShotError::Length {
                what: "initial bits",
                expected: self.sites,
                got: bits.len(),
            });
        }
        let index = self.n_states();
        self.init.extend(bits.iter().map(|b| b & 1));
        Ok(index)
    }

    /// The initial bits (0/1) of a declared state.
    #[must_use]
    pub fn initial_bits(&self, state: usize) -> Option<&[u8]> {
        self.init
            .get(state * self.sites..(state + 1) * self.sites)
            .filter(|_| state < self.n_states())
    }

    /// Adds one shot of `state` measured at time `t`; each byte's lowest bit
    /// is the measured bit, as in [`ShotAccumulator::add_state`].
    ///
    /// # Errors
    /// A wrong length, an undeclared state, a negative or non-finite time,
    /// more than [`MAX_COUNTERS`] counters, or more than `u32::MAX` shots in
    /// one (state, time).
    pub fn add_shot(&mut self, state: usize, t: f64, meas: &[u8]) -> Result<(), ShotError> {
        if meas.len() != self.sites {
            return Err(ShotError::Length {
                what: "measured bits",
                expected: self.sites,
                got: meas.len(),
            });
        }
        if state >= self.n_states() {
            return Err(ShotError::UnknownState(state));
        }
        if !t.is_finite() || t < 0.0 {
            return Err(ShotError::BadTime(t));
        }
        // −0 and +0 are one time.
        let t = t + 0.0;
        let state = u32::try_from(state).map_err(|_| ShotError::TooManyCounters)?;
        let key = (state, t.to_bits());
        let cell = match self.last {
            Some((k, cell)) if k == key => cell,
            _ => {
                let cell = self.cell_for(state, t)?;
                self.last = Some((key, cell));
                cell
            }
        } as usize;
        self.shots[cell] = self.shots[cell]
            .checked_add(1)
            .ok_or(ShotError::TooManyShots)?;
        let row = &mut self.ups[cell * self.sites..(cell + 1) * self.sites];
        for (count, &bit) in row.iter_mut().zip(meas) {
            *count += u32::from(bit & 1);
        }
        self.total_shots += 1;
        Ok(())
    }

    fn cell_for(&mut self, state: u32, t: f64) -> Result<u32, ShotError> {
        let next_time = self.times.len();
        let time = *self.time_index.entry(t.to_bits()).or_insert_with(|| {
            // Times beyond u32 would need more cells than MAX_COUNTERS anyway.
            next_time as u32
        });
        if time as usize == next_time {
            self.times.push(t);
        }
        match self.cell_index.entry((state, time)) {
            Entry::Occupied(e) => Ok(*e.get()),
            Entry::Vacant(e) => {
                let cell = self.cell_keys.len();
                if (cell + 1) * self.sites > MAX_COUNTERS {
                    return Err(ShotError::TooManyCounters);
                }
                self.cell_keys.push((state, time));
                self.shots.push(0);
                self.ups.resize(self.ups.len() + self.sites, 0);
                Ok(*e.insert(cell as u32))
            }
        }
    }

    /// Number of per-site counters held: (state, time) pairs × sites. It
    /// depends on how many distinct (state, time) pairs occur, never on the
    /// number of shots.
    #[must_use]
    pub fn counter_len(&self) -> usize {
        self.ups.len()
    }

    /// Shots added so far.
    #[must_use]
    pub fn total_shots(&self) -> u64 {
        self.total_shots
    }

    /// The complete records, times sorted and states ranked in a canonical
    /// order that depends only on the shots, not on the indices they were
    /// declared under: by initial bits (lexicographic), then by the list of
    /// (time, shots, up counts) of each state's cells in time order. States
    /// that tie are identical in every count, so their relative order changes
    /// no result. State indices keep their declared meaning for
    /// [`ShotRecords::counts`] and [`ShotRecords::initial_bits`].
    ///
    /// # Errors
    /// [`ShotError::NoShots`] when nothing was added.
    pub fn finish(self) -> Result<ShotRecords, ShotError> {
        if self.total_shots == 0 {
            return Err(ShotError::NoShots);
        }
        let mut order: Vec<usize> = (0..self.times.len()).collect();
        order.sort_by(|&a, &b| self.times[a].total_cmp(&self.times[b]));
        let mut rank = vec![0usize; self.times.len()];
        for (new, &old) in order.iter().enumerate() {
            rank[old] = new;
        }
        let times: Vec<f64> = order.iter().map(|&old| self.times[old]).collect();
        let mut cells: Vec<Vec<Cell>> = vec![Vec::new(); times.len()];
        // Per state, (time rank, cell) of its cells, for the canonical order.
        let n_states = self.n_states();
        let mut by_state: Vec<Vec<(usize, usize)>> = vec![Vec::new(); n_states];
        for (cell, &(state, time)) in self.cell_keys.iter().enumerate() {
            let ti = rank[time as usize];
            cells[ti].push(Cell {
                state,
                shots: self.shots[cell],
                offset: cell * self.sites,
            });
            by_state[state as usize].push((ti, cell));
        }
        for list in &mut by_state {
            list.sort_unstable();
        }
        let sites = self.sites;
        let bits = |s: usize| &self.init[s * sites..(s + 1) * sites];
        let history = |s: usize| {
            by_state[s].iter().map(|&(ti, cell)| {
                (
                    ti,
                    self.shots[cell],
                    &self.ups[cell * sites..(cell + 1) * sites],
                )
            })
        };
        let mut state_order: Vec<u32> = (0..n_states as u32).collect();
        state_order.sort_by(|&a, &b| {
            let (a, b) = (a as usize, b as usize);
            bits(a)
                .cmp(bits(b))
                .then_with(|| history(a).cmp(history(b)))
        });
        let mut state_rank = vec![0u32; n_states];
        for (k, &state) in state_order.iter().enumerate() {
            state_rank[state as usize] = k as u32;
        }
        for list in &mut cells {
            list.sort_by_key(|c| state_rank[c.state as usize]);
        }
        Ok(ShotRecords {
            sites: self.sites,
            init: self.init,
            times,
            cells,
            ups: self.ups,
            order: state_order,
            state_rank,
            total_shots: self.total_shots,
        })
    }
}

/// The shots of one initial state at one time.
#[derive(Debug, Clone, Copy)]
struct Cell {
    state: u32,
    shots: u32,
    /// Start of this cell's per-site up counts in `ShotRecords::ups`.
    offset: usize,
}

/// Complete shot records in aggregated form: per (state, time), the number
/// of shots and of up readings at each site. See the module documentation.
#[derive(Debug, Clone)]
pub struct ShotRecords {
    sites: usize,
    init: Vec<u8>,
    times: Vec<f64>,
    /// Per time index, the cells sorted by canonical state rank.
    cells: Vec<Vec<Cell>>,
    ups: Vec<u32>,
    /// The states in canonical order (see [`ShotAccumulator::finish`]):
    /// `order[k]` is the declared index of the state ranked k.
    order: Vec<u32>,
    /// Inverse of `order`: the canonical rank of each declared state.
    state_rank: Vec<u32>,
    total_shots: u64,
}

impl ShotRecords {
    #[must_use]
    pub fn sites(&self) -> usize {
        self.sites
    }

    /// Distinct times, strictly increasing.
    #[must_use]
    pub fn times(&self) -> &[f64] {
        &self.times
    }

    /// Number of initial states.
    #[must_use]
    pub fn n_states(&self) -> usize {
        self.init.len() / self.sites
    }

    /// The initial bits (0/1) of a state.
    #[must_use]
    pub fn initial_bits(&self, state: usize) -> Option<&[u8]> {
        self.init
            .get(state * self.sites..(state + 1) * self.sites)
            .filter(|_| state < self.n_states())
    }

    /// Number of states measured at each time.
    #[must_use]
    pub fn states_per_time(&self) -> Vec<usize> {
        self.cells.iter().map(Vec::len).collect()
    }

    /// Number of shots at each time.
    #[must_use]
    pub fn shots_per_time(&self) -> Vec<u64> {
        self.cells
            .iter()
            .map(|list| list.iter().map(|c| u64::from(c.shots)).sum())
            .collect()
    }

    #[must_use]
    pub fn total_shots(&self) -> u64 {
        self.total_shots
    }

    /// Per-site counters held; see [`ShotAccumulator::counter_len`].
    #[must_use]
    pub fn counter_len(&self) -> usize {
        self.ups.len()
    }

    /// Number of shots and up readings per site of `state` at time index
    /// `ti`, if that state was measured then.
    #[must_use]
    pub fn counts(&self, state: usize, ti: usize) -> Option<(u32, &[u32])> {
        let list = self.cells.get(ti)?;
        let rank = *self.state_rank.get(state)?;
        let k = list
            .binary_search_by_key(&rank, |c| self.state_rank[c.state as usize])
            .ok()?;
        let cell = list[k];
        Some((cell.shots, &self.ups[cell.offset..cell.offset + self.sites]))
    }

    fn bit(&self, state: u32, site: usize) -> u8 {
        self.init[state as usize * self.sites + site]
    }
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

/// The readout correction as it will be applied in every replicate.
#[derive(Debug, Clone)]
enum Plan {
    None,
    Fixed { p01: Vec<f64>, p10: Vec<f64> },
    TimeZero { per_site: bool },
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

/// The map-level quantities derived from one set of pair correlations.
struct Derived {
    /// `[time][offset]`
    map: Vec<Vec<f64>>,
    sums: Vec<f64>,
}

/// The geometry of the map: which offsets, and which sources each averages.
struct Geometry {
    first: usize,
    last: usize,
    sites: usize,
    /// Offsets before symmetrisation.
    raw_offsets: Vec<i32>,
    /// Offsets of the output map.
    offsets: Vec<i32>,
    symmetrise: bool,
}

impl Geometry {
    fn new(sites: usize, first: usize, last: usize, symmetrise: bool) -> Self {
        let lo = -(last as i32);
        let hi = (sites - 1 - first) as i32;
        let raw_offsets: Vec<i32> = (lo..=hi).collect();
        let offsets = if symmetrise {
            let reach = (last as i32).min(hi);
            (-reach..=reach).collect()
        } else {
            raw_offsets.clone()
        };
        Self {
            first,
            last,
            sites,
            raw_offsets,
            offsets,
            symmetrise,
        }
    }

    /// Sources j of the window with 0 ≤ j + x < N.
    fn sources(&self, x: i32) -> impl Iterator<Item = (usize, usize)> + '_ {
        (self.first..=self.last).filter_map(move |j| {
            let i = j as i64 + i64::from(x);
            (0..self.sites as i64)
                .contains(&i)
                .then_some((i as usize, j))
        })
    }

    /// The window mean of C_{j+x,j} at offset x.
    fn mean_at(&self, c: &Array2<f64>, x: i32) -> f64 {
        let (sum, n) = self
            .sources(x)
            .fold((0.0, 0usize), |(s, n), (i, j)| (s + c[(i, j)], n + 1));
        sum / n as f64
    }

    fn derive(&self, pairs: &[Option<Array2<f64>>], renormalise: bool) -> Derived {
        let mut map = Vec::with_capacity(pairs.len());
        let mut sums = Vec::with_capacity(pairs.len());
        for c in pairs {
            let Some(c) = c else {
                map.push(vec![f64::NAN; self.offsets.len()]);
                sums.push(f64::NAN);
                continue;
            };
            let window = self.last - self.first + 1;
            let sum = (self.first..=self.last)
                .map(|j| c.column(j).sum())
                .sum::<f64>()
                / window as f64;
            let factor = if renormalise { 1.0 / sum } else { 1.0 };
            let row = self
                .offsets
                .iter()
                .map(|&x| {
                    let v = if self.symmetrise {
                        0.5 * (self.mean_at(c, x) + self.mean_at(c, -x))
                    } else {
                        self.mean_at(c, x)
                    };
                    v * factor
                })
                .collect();
            map.push(row);
            sums.push(sum);
        }
        Derived { map, sums }
    }

    fn sources_per_offset(&self) -> Vec<usize> {
        self.offsets
            .iter()
            .map(|&x| {
                if self.symmetrise {
                    self.sources(x).count() + self.sources(-x).count()
                } else {
                    self.sources(x).count()
                }
            })
            .collect()
    }

    fn skipped_pairs(&self) -> usize {
        let window = self.last - self.first + 1;
        self.raw_offsets
            .iter()
            .map(|&x| window - self.sources(x).count())
            .sum()
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

/// Readout probabilities from the t = 0 cells under `weights`: per site, or
/// pooled. `Err` names what is missing.
fn calibrate(
    records: &ShotRecords,
    t0: usize,
    per_site: bool,
    weights: &[u32],
) -> Result<(Vec<f64>, Vec<f64>), String> {
    let n = records.sites;
    // Weighted shot counts with bit up / down, and the misreadings of each.
    let (mut up, mut down) = (vec![0u64; n], vec![0u64; n]);
    let (mut read0, mut read1) = (vec![0u64; n], vec![0u64; n]);
    for cell in &records.cells[t0] {
        let w = u64::from(weights[cell.state as usize]);
        if w == 0 {
            continue;
        }
        let shots = w * u64::from(cell.shots);
        for i in 0..n {
            let ups = w * u64::from(records.ups[cell.offset + i]);
            if records.bit(cell.state, i) == 1 {
                up[i] += shots;
                read0[i] += shots - ups;
            } else {
                down[i] += shots;
                read1[i] += ups;
            }
        }
    }
    let ratio = |a: u64, b: u64| a as f64 / b as f64;
    if per_site {
        let mut p01 = vec![0.0; n];
        let mut p10 = vec![0.0; n];
        for i in 0..n {
            if up[i] == 0 || down[i] == 0 {
                let which = if up[i] == 0 { "up" } else { "down" };
                return Err(format!(
                    "site {i} is never prepared {which} among the t = 0 shots, so its \
                     readout errors cannot be calibrated (use a global calibration)"
                ));
            }
            p01[i] = ratio(read0[i], up[i]);
            p10[i] = ratio(read1[i], down[i]);
        }
        Ok((p01, p10))
    } else {
        let (u, d): (u64, u64) = (up.iter().sum(), down.iter().sum());
        if u == 0 || d == 0 {
            return Err("the t = 0 shots never prepare both bit values".into());
        }
        let p01 = ratio(read0.iter().sum(), u);
        let p10 = ratio(read1.iter().sum(), d);
        Ok((vec![p01; n], vec![p10; n]))
    }
}

/// The factor b = 1 − p01 − p10 by which a readout error of the final
/// measurement scales the connected C (module documentation, "Readout
/// correction"). The one rule used wherever a readout error is inferred.
#[must_use]
pub fn readout_contrast(p01: f64, p10: f64) -> f64 {
    1.0 - p01 - p10
}

/// The symmetric readout error e (p01 = p10 = e) that scales C by the factor
/// `contrast`: the inverse of [`readout_contrast`], e = (1 − b)/2.
#[must_use]
pub fn symmetric_readout_error(contrast: f64) -> f64 {
    (1.0 - contrast) / 2.0
}

fn contrast(p01: &[f64], p10: &[f64]) -> Vec<f64> {
    p01.iter()
        .zip(p10)
        .map(|(&a, &b)| readout_contrast(a, b))
        .collect()
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

fn check_probability(p: f64, what: &str) -> Result<(), ShotError> {
    if (0.0..1.0).contains(&p) {
        Ok(())
    } else {
        Err(ShotError::Readout(format!(
            "{what} = {p} is not a probability in [0, 1)"
        )))
    }
}

fn plan_for(readout: &Readout, records: &ShotRecords) -> Result<Plan, ShotError> {
    let n = records.sites;
    Ok(match readout {
        Readout::None => Plan::None,
        Readout::Global { p01, p10 } => {
            check_probability(*p01, "p(0|1)")?;
            check_probability(*p10, "p(1|0)")?;
            Plan::Fixed {
                p01: vec![*p01; n],
                p10: vec![*p10; n],
            }
        }
        Readout::PerSite { p01, p10 } => {
            for (what, v) in [("p(0|1)", p01), ("p(1|0)", p10)] {
                if v.len() != n {
                    return Err(ShotError::Readout(format!(
                        "{} values of {what} given for a chain of {n} sites",
                        v.len()
                    )));
                }
                for (i, &p) in v.iter().enumerate() {
                    check_probability(p, &format!("{what} of site {i}"))?;
                }
            }
            Plan::Fixed {
                p01: p01.clone(),
                p10: p10.clone(),
            }
        }
        Readout::FromTimeZero { per_site } => {
            if records.times.first().is_none_or(|&t| t > 0.0) {
                return Err(ShotError::NoTimeZero);
            }
            Plan::TimeZero {
                per_site: *per_site,
            }
        }
    })
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
