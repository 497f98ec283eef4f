//! `SpinChain`: the flip-flop (XXZ) Hamiltonian of an open chain with
//! arbitrary couplings, its magnetisation sectors, and the two ways this crate
//! computes the infinite-temperature correlation C_ij(t) from it:
//! [`SpinChain::correlations_exact`] (full diagonalisation of every sector,
//! N ≤ 14) and [`SpinChain::correlations_typical`] (dynamical typicality with
//! Chebyshev propagation, matrix-free, N ≤ 24). Longer chains are left to the
//! semiclassical [`dtwa`] module.
//!
//! Owns: the Hamiltonian convention, the sector bases (combinatorial index),
//! the diagonal and off-diagonal matrix elements, and the conversion of the
//! results to a [`CorrelationMap`]. Must not know: files, wire formats,
//! threads of the server or fits; progress and cancellation come in as plain
//! callbacks.
//!
//! Convention (stated in every output of the program):
//! H = Σ_{i<j} J_ij (σ⁺_i σ⁻_j + σ⁻_i σ⁺_j + (Δ/2) σᶻ_i σᶻ_j), ħ = 1, so the
//! amplitude between |…↑_i…↓_j…⟩ and the swapped state is J_ij and the
//! single-particle hopping is K_ij = J_ij. C_ij(t) = 2^-N Tr[σᶻ_i(t) σᶻ_j(0)].
//!
//! Two exact symmetries are used by both methods (common practice, derivable):
//! H conserves the magnetisation Σ_i σᶻ_i, so it is block diagonal in the
//! sectors of fixed up-spin number k; and the global spin flip Π_i σˣ_i maps
//! H to itself, σᶻ_i to −σᶻ_i and sector k to sector N − k, so sector N − k
//! contributes to Tr[σᶻ_i(t) σᶻ_j] exactly what sector k contributes. Only the
//! sectors k ≤ N/2 are therefore computed, those with k < N/2 counted twice.
//!
//! Longer chains are left to the semiclassical [`dtwa`] module (any length
//! up to [`MAX_DTWA_SITES`], validated against exact dynamics in its docs).

pub mod dtwa;
pub mod exact;
pub mod typicality;

use ndarray::Array2;
use thiserror::Error;

use crate::model::correlation_map::{CorrelationMap, MapError};
use crate::model::couplings::Couplings;
use crate::numerics::linalg::LinalgError;

pub use typicality::{MemoryPlan, TypicalityOptions, TypicalityResult};

/// Largest chain the exact method accepts: the central sector of 14 sites has
/// dimension 3432, whose dense eigendecomposition and eigenbasis products
/// (a few hundred MB, tens of seconds on two cores) are the practical limit.
pub const MAX_EXACT_SITES: usize = 14;

/// Largest chain the typicality method accepts: basis states are 32-bit
/// words and the Hamiltonian is applied without being stored, so the limit is
/// the memory of the propagated vectors (the central sector of 24 sites has
/// C(24, 12) = 2704156 states, 22 MB per real vector, 43 MB per complex
/// output state); the memory plan
/// refuses a run that does not fit its limit.
pub const MAX_TYPICAL_SITES: usize = 24;

/// Largest chain the semiclassical method accepts: each step multiplies the
/// N × N coupling matrices with the spins of a batch, so the cost grows like
/// N²; 2000 sites is where one trajectory to t = 10 takes about a second.
pub const MAX_DTWA_SITES: usize = 2000;

/// Why a spin-chain computation was refused or stopped.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum SpinChainError {
    #[error(
        "spin chain: exact diagonalisation handles at most {max} sites, got {sites}; \
         use the typicality method (correlations_typical) for up to {typical_max} sites"
    )]
    TooLargeForExact {
        sites: usize,
        max: usize,
        typical_max: usize,
    },
    #[error("spin chain: the typicality method handles at most {max} sites, got {sites}")]
    TooLargeForTypicality { sites: usize, max: usize },
    #[error("spin chain: source site {site} is outside the chain of {sites} sites (0-based)")]
    SourceOutOfRange { site: usize, sites: usize },
    #[error("spin chain: time {value} at index {index} is negative or not finite")]
    BadTime { index: usize, value: f64 },
    #[error("spin chain: anisotropy delta must be finite, got {0}")]
    BadDelta(f64),
    #[error(
        "spin chain: flip-flop couplings have {flip_flop} sites but Ising couplings have {ising}"
    )]
    SiteMismatch { flip_flop: usize, ising: usize },
    #[error("spin chain: typicality needs at least 2 samples to state an error, got {0}")]
    TooFewSamples(usize),
    #[error("spin chain: propagation tolerance must lie in (0, 1e-3], got {0}")]
    BadTolerance(f64),
    #[error(
        "spin chain: the spectrum of the sector with {up} up spins reaches outside the \
         interval estimated for it (a Chebyshev term grew {growth:.6} times its start); \
         the result would be wrong, so none is returned"
    )]
    SpectralBound { up: usize, growth: f64 },
    #[error(
        "spin chain: typicality for {sites} sites needs about {needed_bytes} bytes \
         ({detail}), over the memory limit of {limit_bytes} bytes"
    )]
    MemoryLimit {
        sites: usize,
        needed_bytes: u64,
        limit_bytes: u64,
        detail: String,
    },
    #[error("spin chain: the semiclassical method handles at most {max} sites, got {sites}")]
    TooLargeForDtwa { sites: usize, max: usize },
    #[error(
        "spin chain: the semiclassical method needs at least 4 trajectories to state an error, got {0}"
    )]
    TooFewTrajectories(usize),
    #[error("spin chain: the semiclassical step scale must lie in (0, 0.5], got {0}")]
    BadStepScale(f64),
    #[error(
        "spin chain: the parts do not make up one run: expected {expected}, found {found}, \
         {missing} missing (parts of different runs, or a part left out)"
    )]
    IncompleteRun {
        expected: usize,
        found: usize,
        missing: usize,
    },
    #[error("spin chain: computation cancelled")]
    Cancelled,
    #[error("spin chain: {0}")]
    Linalg(#[from] LinalgError),
    #[error("spin chain: result is not a valid correlation map: {0}")]
    Map(#[from] MapError),
}

/// Binomial coefficients C(n, r) for 0 ≤ n, r ≤ 32 (Pascal's triangle).
const BINOMIAL: [[usize; 33]; 33] = {
    let mut table = [[0usize; 33]; 33];
    let mut n = 0;
    while n < 33 {
        table[n][0] = 1;
        let mut r = 1;
        while r <= n {
            table[n][r] = table[n - 1][r - 1] + table[n - 1][r];
            r += 1;
        }
        n += 1;
    }
    table
};

/// C(n, r), zero when r > n.
pub(crate) fn binomial(n: usize, r: usize) -> usize {
    if r > n { 0 } else { BINOMIAL[n][r] }
}

/// The basis of one magnetisation sector: all N-bit words with `up` bits set
/// (bit i set = spin i up), in increasing numeric order. The position of a
/// word in this list is its combinatorial index Σ_p C(c_p, p) over its set
/// bits c_1 < c_2 < … (combinatorial number system, common practice), so a
/// word is located without a search or a table of 2^N entries.
#[derive(Debug, Clone)]
pub(crate) struct Sector {
    pub(crate) sites: usize,
    pub(crate) up: usize,
    pub(crate) states: Vec<u32>,
}

impl Sector {
    pub(crate) fn new(sites: usize, up: usize) -> Self {
        debug_assert!(sites <= MAX_TYPICAL_SITES && up <= sites);
        let dim = binomial(sites, up);
        let mut states = Vec::with_capacity(dim);
        if up == 0 {
            states.push(0);
        } else {
            // Gosper's hack: the next larger word with the same number of set
            // bits (HAKMEM item 175), which enumerates the sector in order.
            let mut v: u32 = (1u32 << up) - 1;
            let end: u32 = 1u32 << sites;
            while v < end {
                states.push(v);
                let t = v | (v - 1);
                v = (t + 1) | (((!t & (t + 1)) - 1) >> (v.trailing_zeros() + 1));
            }
        }
        debug_assert_eq!(states.len(), dim);
        Self { sites, up, states }
    }

    pub(crate) fn dim(&self) -> usize {
        self.states.len()
    }

    /// Position of `state` (which must lie in this sector) in the basis.
    #[inline]
    pub(crate) fn index_of(&self, state: u32) -> usize {
        let mut rank = 0;
        let mut rest = state;
        let mut p = 1;
        while rest != 0 {
            rank += BINOMIAL[rest.trailing_zeros() as usize][p];
            p += 1;
            rest &= rest - 1;
        }
        rank
    }

    /// Number of basis states with spin `site` up: C(N − 1, k − 1).
    pub(crate) fn dim_with_up(&self) -> usize {
        if self.up == 0 {
            0
        } else {
            binomial(self.sites - 1, self.up - 1)
        }
    }

    /// Weight of this sector in the sum over all sectors: 2 when its
    /// spin-flipped partner N − k is a different sector (and is skipped),
    /// 1 for the self-conjugate sector k = N/2.
    pub(crate) fn flip_weight(&self) -> f64 {
        if 2 * self.up == self.sites { 1.0 } else { 2.0 }
    }
}

/// One flip-flop term J_ij (σ⁺_i σ⁻_j + h.c.): it connects basis words that
/// differ exactly at bits i and j, with amplitude J_ij.
#[derive(Debug, Clone, Copy)]
pub(crate) struct FlipTerm {
    pub(crate) mask: u32,
    pub(crate) amplitude: f64,
}

/// One Ising term c σᶻ_i σᶻ_j with c = V_ij / 2 (V_ij = Δ J_ij for
/// [`SpinChain::new`]).
#[derive(Debug, Clone, Copy)]
pub(crate) struct IsingTerm {
    pub(crate) mask: u32,
    pub(crate) coefficient: f64,
}

/// The spin chain H = Σ_{i<j} [J_ij (σ⁺_i σ⁻_j + σ⁻_i σ⁺_j) + (V_ij/2) σᶻ_i σᶻ_j]
/// with V_ij = Δ J_ij (the XXZ convention of this crate). See the module
/// documentation for the conventions.
#[derive(Debug, Clone)]
pub struct SpinChain {
    flip_flop: Couplings,
    ising: Couplings,
    delta: Option<f64>,
    flips: Vec<FlipTerm>,
    isings: Vec<IsingTerm>,
}

impl SpinChain {
    /// The XXZ chain with flip-flop couplings J_ij and Ising couplings Δ J_ij.
    /// Nearest neighbours (α = ∞) are just a [`Couplings`] value.
    ///
    /// # Errors
    /// [`SpinChainError::BadDelta`] when Δ is not finite.
    pub fn new(couplings: &Couplings, delta: f64) -> Result<Self, SpinChainError> {
        if !delta.is_finite() {
            return Err(SpinChainError::BadDelta(delta));
        }
        let ising = Couplings::from_matrix(couplings.matrix().mapv(|j| delta * j))
            .expect("a finite multiple of valid couplings is valid couplings");
        let mut chain = Self::with_ising(couplings, &ising)?;
        chain.delta = Some(delta);
        Ok(chain)
    }

    /// A chain whose Ising couplings V_ij are independent of the flip-flop
    /// couplings J_ij: H = Σ_{i<j} [J_ij (σ⁺_i σ⁻_j + h.c.) + (V_ij/2) σᶻ_i σᶻ_j]
    /// (for example a measured σᶻσᶻ matrix). `new(J, Δ)` equals
    /// `with_ising(J, Δ·J)`.
    ///
    /// # Errors
    /// [`SpinChainError::SiteMismatch`] when the two matrices differ in size.
    pub fn with_ising(flip_flop: &Couplings, ising: &Couplings) -> Result<Self, SpinChainError> {
        let sites = flip_flop.sites();
        if ising.sites() != sites {
            return Err(SpinChainError::SiteMismatch {
                flip_flop: sites,
                ising: ising.sites(),
            });
        }
        let mut flips = Vec::new();
        let mut isings = Vec::new();
        // Pairs with a zero coupling are left out, so a nearest-neighbour
        // chain costs N − 1 terms per basis state rather than N(N − 1)/2.
        // Masks need sites ≤ 32; larger chains are refused by both methods
        // before any mask is used, so they are simply not built.
        if sites <= 32 {
            for i in 0..sites {
                for j in (i + 1)..sites {
                    let mask = (1u32 << i) | (1u32 << j);
                    let amplitude = flip_flop.get(i, j);
                    if amplitude.abs() > 0.0 {
                        flips.push(FlipTerm { mask, amplitude });
                    }
                    let coefficient = 0.5 * ising.get(i, j);
                    if coefficient.abs() > 0.0 {
                        isings.push(IsingTerm { mask, coefficient });
                    }
                }
            }
        }
        Ok(Self {
            flip_flop: flip_flop.clone(),
            ising: ising.clone(),
            delta: None,
            flips,
            isings,
        })
    }

    /// Number of sites N.
    #[must_use]
    pub fn sites(&self) -> usize {
        self.flip_flop.sites()
    }

    /// The flip-flop couplings J_ij.
    #[must_use]
    pub fn flip_flop(&self) -> &Couplings {
        &self.flip_flop
    }

    /// The Ising couplings V_ij (the σᶻσᶻ term is (V_ij/2) σᶻ_i σᶻ_j).
    #[must_use]
    pub fn ising(&self) -> &Couplings {
        &self.ising
    }

    /// Δ when the chain was built by [`SpinChain::new`], `None` for
    /// independent Ising couplings.
    #[must_use]
    pub fn delta(&self) -> Option<f64> {
        self.delta
    }

    /// Exact C_{i,source}(t) for every site i and time, as a `[time, site]`
    /// array; see [`exact`] for the method and its accuracy.
    ///
    /// # Errors
    /// More than [`MAX_EXACT_SITES`] sites (the message points to the
    /// typicality method), a source outside the chain, a negative or
    /// non-finite time, or an eigensolver failure.
    pub fn correlations_exact(
        &self,
        source: usize,
        times: &[f64],
    ) -> Result<Array2<f64>, SpinChainError> {
        let mut all = exact::correlations(self, &[source], times)?;
        Ok(all.remove(0))
    }

    /// Exact C_{i,j}(t) for several sources j at once (one `[time, site]`
    /// array per source, in the order given), sharing the diagonalisation:
    /// averaging over a bulk window of sources costs little more than one.
    ///
    /// # Errors
    /// As [`SpinChain::correlations_exact`].
    pub fn correlations_exact_many(
        &self,
        sources: &[usize],
        times: &[f64],
    ) -> Result<Vec<Array2<f64>>, SpinChainError> {
        exact::correlations(self, sources, times)
    }

    /// Typicality estimate of C_{i,source}(t) with `samples` random vectors
    /// seeded by `seed`, default memory limit and propagation tolerance, no
    /// progress report; see [`typicality`] for the estimator.
    ///
    /// # Errors
    /// As [`SpinChain::correlations_typical_with`].
    pub fn correlations_typical(
        &self,
        source: usize,
        times: &[f64],
        samples: usize,
        seed: u64,
    ) -> Result<TypicalityResult, SpinChainError> {
        let never = std::sync::atomic::AtomicBool::new(false);
        self.correlations_typical_with(
            source,
            times,
            &TypicalityOptions::new(samples, seed),
            &|_| {},
            &never,
        )
    }

    /// Typicality estimate with explicit options, a progress callback
    /// (fraction done in [0, 1], called from worker threads) and a
    /// cancellation flag checked before every Hamiltonian application.
    ///
    /// # Errors
    /// More than [`MAX_TYPICAL_SITES`] sites, an estimated memory use over
    /// the limit, fewer than 2 samples, a bad source or time, a bad
    /// tolerance, cancellation, or an eigensolver failure.
    pub fn correlations_typical_with(
        &self,
        source: usize,
        times: &[f64],
        options: &TypicalityOptions,
        progress: &(dyn Fn(f64) + Sync),
        cancel: &std::sync::atomic::AtomicBool,
    ) -> Result<TypicalityResult, SpinChainError> {
        typicality::correlations(self, source, times, options, progress, cancel)
    }

    /// Diagonal matrix element ⟨s|H|s⟩ = Σ_{i<j} (V_ij/2) z_i z_j with
    /// z = ±1 read from the bits of `state`.
    #[inline]
    pub(crate) fn diagonal_energy(&self, state: u32) -> f64 {
        self.isings
            .iter()
            .map(|term| {
                // Exactly one bit of the pair set means antiparallel spins.
                if (state & term.mask).count_ones() == 1 {
                    -term.coefficient
                } else {
                    term.coefficient
                }
            })
            .sum()
    }

    /// The flip-flop terms with a nonzero coupling.
    pub(crate) fn flip_terms(&self) -> &[FlipTerm] {
        &self.flips
    }

    /// The dense Hamiltonian of one sector (real symmetric, d × d).
    pub(crate) fn dense_sector_hamiltonian(&self, sector: &Sector) -> Array2<f64> {
        let d = sector.dim();
        let mut h = Array2::zeros((d, d));
        for (a, &state) in sector.states.iter().enumerate() {
            h[(a, a)] = self.diagonal_energy(state);
            for term in &self.flips {
                if (state & term.mask).count_ones() == 1 {
                    let b = sector.index_of(state ^ term.mask);
                    h[(a, b)] += term.amplitude;
                }
            }
        }
        h
    }

    pub(crate) fn check_source_and_times(
        &self,
        source: usize,
        times: &[f64],
    ) -> Result<(), SpinChainError> {
        if source >= self.sites() {
            return Err(SpinChainError::SourceOutOfRange {
                site: source,
                sites: self.sites(),
            });
        }
        if let Some((index, &value)) = times
            .iter()
            .enumerate()
            .find(|(_, t)| !t.is_finite() || **t < 0.0)
        {
            return Err(SpinChainError::BadTime { index, value });
        }
        Ok(())
    }
}

/// Turns a `[time, site]` array of C_{i,source}(t) (as returned by
/// [`SpinChain::correlations_exact`]) into a complete [`CorrelationMap`] with
/// offsets x = i − source and the given one-sigma errors, if any.
///
/// # Errors
/// [`SpinChainError::Map`] when the times are not strictly increasing, an
/// error is not positive, or shapes disagree.
pub fn to_correlation_map(
    values: &Array2<f64>,
    errors: Option<&Array2<f64>>,
    source: usize,
    times: &[f64],
) -> Result<CorrelationMap, SpinChainError> {
    let sites = values.ncols();
    if source >= sites {
        return Err(SpinChainError::SourceOutOfRange {
            site: source,
            sites,
        });
    }
    let offsets = (0..sites)
        .map(|i| i as i32 - source as i32)
        .collect::<Vec<_>>();
    Ok(CorrelationMap::complete(
        offsets,
        times.to_vec(),
        values.clone(),
        errors.cloned(),
    )?)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sector_basis_is_ordered_and_indexed_by_combinatorial_rank() {
        // Sector sizes are binomial coefficients C(N, k) (common practice);
        // C(10, 4) = 210 and C(22, 11) = 705432 (values from memory, also
        // given by Pascal's rule in BINOMIAL).
        assert_eq!(binomial(10, 4), 210);
        assert_eq!(binomial(22, 11), 705_432);
        for (sites, up) in [(1, 0), (6, 0), (6, 3), (10, 4), (12, 12)] {
            let sector = Sector::new(sites, up);
            assert_eq!(sector.dim(), binomial(sites, up));
            assert!(sector.states.windows(2).all(|w| w[0] < w[1]));
            for (index, &state) in sector.states.iter().enumerate() {
                assert_eq!(state.count_ones() as usize, up);
                assert_eq!(sector.index_of(state), index);
            }
        }
    }

    #[test]
    fn sector_traces_add_up_over_the_spin_flip_pairs() {
        // Σ_k C(N, k) = 2^N (binomial theorem): the flip weights must cover
        // the whole Hilbert space exactly once.
        for sites in [2usize, 5, 8] {
            let covered: f64 = (0..=sites / 2)
                .map(|k| {
                    let sector = Sector::new(sites, k);
                    sector.flip_weight() * sector.dim() as f64
                })
                .sum();
            assert!((covered - (1u64 << sites) as f64).abs() < 1e-9);
        }
    }

    #[test]
    fn dense_hamiltonian_of_two_sites_has_flip_flop_amplitude_j() {
        // Two sites, one up spin: H = [[−ΔJ/2, J], [J, −ΔJ/2]] in the basis
        // (|↑↓⟩, |↓↑⟩), from the definition of H (σ⁺σ⁻ has unit matrix
        // element; antiparallel spins give σᶻσᶻ = −1).
        let couplings = Couplings::power_law(2, 0.7, 1.0).expect("valid");
        let chain = SpinChain::new(&couplings, 1.5).expect("valid");
        let h = chain.dense_sector_hamiltonian(&Sector::new(2, 1));
        assert!((h[(0, 1)] - 0.7).abs() < 1e-15 && (h[(1, 0)] - 0.7).abs() < 1e-15);
        assert!((h[(0, 0)] + 0.5 * 1.5 * 0.7).abs() < 1e-15);
        let full = chain.dense_sector_hamiltonian(&Sector::new(2, 2));
        assert!((full[(0, 0)] - 0.5 * 1.5 * 0.7).abs() < 1e-15);
    }

    #[test]
    fn constructor_rejects_bad_input() {
        let couplings = Couplings::power_law(4, 1.0, 1.0).expect("valid");
        assert!(matches!(
            SpinChain::new(&couplings, f64::NAN),
            Err(SpinChainError::BadDelta(_))
        ));
        let other = Couplings::power_law(5, 1.0, 1.0).expect("valid");
        assert!(matches!(
            SpinChain::with_ising(&couplings, &other),
            Err(SpinChainError::SiteMismatch { .. })
        ));
        let chain = SpinChain::new(&couplings, 0.0).expect("valid");
        assert!(matches!(
            chain.correlations_exact(4, &[0.0]),
            Err(SpinChainError::SourceOutOfRange { .. })
        ));
        assert!(matches!(
            chain.correlations_exact(1, &[0.0, -1.0]),
            Err(SpinChainError::BadTime { index: 1, .. })
        ));
    }

    #[test]
    fn map_conversion_uses_offsets_from_the_source() {
        let values = ndarray::array![[0.0, 1.0, 0.0], [0.2, 0.6, 0.2]];
        let map = to_correlation_map(&values, None, 1, &[0.0, 1.0]).expect("valid");
        assert_eq!(map.offsets(), &[-1, 0, 1]);
        assert!(to_correlation_map(&values, None, 3, &[0.0, 1.0]).is_err());
        assert!(matches!(
            to_correlation_map(&values, None, 1, &[1.0, 0.0]),
            Err(SpinChainError::Map(_))
        ));
    }
}
