//! Lattice-walk fit: the jump-rate scale γ0 and the coupling exponent α of
//! the classical walk on the finite open chain, fitted to a whole space–time
//! window of a correlation map, with their covariance and the implied
//! dynamical exponent z = min(2α − 1, 2).
//!
//! Owns the least-squares problem "map ≈ walk(γ0, α)" and its analytic
//! Jacobian. Must not know how the map was measured or windowed; the chain
//! length and the source site come from the caller.
//!
//! # The model
//! dP_i/dt = Σ_{j≠i} γ_ij (P_j − P_i), γ_ij = γ0 |i−j|^{−2α}, P_i(0) =
//! δ_{i,source} on N sites (physics notes, "Classical lattice walk"); the map is
//! compared as C(x,t) = P_{source+x}(t). Unlike a scaling form it holds at
//! all times and feels the chain's ends, so it can be fitted to data whose
//! spread has reached the edges, where tail and profile fits fail.
//!
//! # One eigendecomposition per α
//! γ0 only sets the time unit: with G₁(α) the generator at γ0 = 1 (G₁_ij =
//! |i−j|^{−2α} off the diagonal, minus the row sums on it),
//! P(t) = exp(γ0 t G₁) e_s = V diag(e^{λ_k γ0 t}) Vᵀ e_s, with G₁ = V Λ Vᵀ
//! real symmetric. The decomposition is computed once per α and cached, so
//! a change of γ0 costs O(N²) per time and every derivative is analytic:
//! - ∂P/∂γ0 = V diag(λ_k t e^{λ_k γ0 t}) Vᵀ e_s;
//! - ∂P/∂α = V (Φ ∘ M) Vᵀ e_s with M = Vᵀ (∂G₁/∂α) V, ∂G₁_ij/∂α =
//!   −2 ln|i−j| |i−j|^{−2α} off the diagonal, and the divided differences
//!   Φ_kl = (e^{λ_k τ} − e^{λ_l τ})/(λ_k − λ_l) (τ e^{λ_k τ} when equal),
//!   τ = γ0 t — the Daleckii–Krein formula for the derivative of a matrix
//!   function (Higham, "Functions of Matrices", SIAM 2008, Thm 3.11).
//!   Φ is evaluated directly where |λ_k − λ_l|τ > 1e-3 (cancellation costs
//!   at most ε/1e-3) and as τ e^{aτ} (1 − e^{−d})/d with a = max(λ_k, λ_l),
//!   d = |λ_k − λ_l|τ for closer pairs, which neither overflows nor cancels.
//!
//! The tests compare both derivatives with central differences.
//!
//! # Maps averaged over sources
//! A map estimated from shots over a bulk window of sources A..=B is
//! C(x,t) = mean over the sources j of the window with 0 ≤ j + x < N of
//! P_{j+x ← j}(t), and, when symmetrised, (C(x) + C(−x))/2. Near the ends
//! these sources feel the chain differently, so a single-source walk does
//! not describe the map (on 11 sites with sources 3..=7 it biases α by 1.7
//! of its errors). With [`SourceAverage`] the model is formed exactly like
//! the map: every point is a weighted sum of P_{i ← j} over its (site,
//! source) pairs, each source propagated from its own row of V, and the
//! derivatives are the same weighted sums of the single-source ones.
//!
//! # Errors of the parameters
//! With data errors: the unscaled covariance (JᵀWJ)⁻¹ of the Levenberg–
//! Marquardt engine, judged by χ²/dof. Without: unit weights and the
//! covariance scaled by χ²/dof (the scatter), as in the tail module. The
//! implied z = min(2α − 1, 2) is not differentiable at α = 3/2; its error is
//! half the width of the image of [α − σ_α, α + σ_α], `z_interval`.
//!
//! # Starting point
//! Unless given, α is scanned over {0.6, 0.85, 1.2, 1.75, 3}; for each,
//! γ0 is chosen so that the walk's return probability P_ss(γ0 t*) equals
//! the measured C(0,t*) at the time t* whose value lies nearest (in log)
//! to the middle between 1 and the equilibrium 1/N (P_ss decreases
//! monotonically in γ0 t, so bisection finds it), and the candidate with the
//! smallest χ² — refined by the vertex of the parabola through it and its
//! neighbouring candidates — starts the fit.

use std::cell::{Cell, RefCell};
use std::rc::Rc;

use ndarray::Array2;
use thiserror::Error;

use crate::CorrelationMap;
use crate::fit::tail::ErrorBasis;
use crate::model::lattice_walk::MAX_SITES;
use crate::numerics::linalg::{LinalgError, symmetric_eigen};
use crate::numerics::optimize::{
    JacobianMethod, LeastSquaresProblem, LmOptions, OptimizeError, Termination, least_squares,
};
use crate::numerics::stats::chi2_survival;
use crate::numerics::zeta::expm1_over_x;

/// Why a lattice-walk fit could not be made.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum LatticeWalkFitError {
    #[error("a lattice-walk fit needs between 2 and {MAX_SITES} sites, got {0}")]
    Sites(usize),
    #[error("source site {source_site} is outside the chain of {sites} sites")]
    SourceOutOfRange { source_site: usize, sites: usize },
    #[error(
        "offset x = {offset} puts site {site} outside the chain of {sites} sites with source {source_site}: check --sites and --source"
    )]
    OffsetOutsideChain {
        offset: i32,
        site: i64,
        sites: usize,
        source_site: usize,
    },
    #[error(
        "the sources {first}..={last} the map averages are not a window of the chain of {sites} sites"
    )]
    BadSourceWindow {
        first: usize,
        last: usize,
        sites: usize,
    },
    #[error("alpha range [{lower}, {upper}] must be finite, positive and increasing")]
    BadAlphaRange { lower: f64, upper: f64 },
    #[error("start gamma0 = {gamma0}, alpha = {alpha} is not finite or outside the bounds")]
    BadStart { gamma0: f64, alpha: f64 },
    #[error("only {0} points in the window; the fit of two parameters needs at least 3")]
    TooFewPoints(usize),
    #[error(transparent)]
    Linalg(#[from] LinalgError),
    #[error("fit failed: {0}")]
    Fit(#[from] OptimizeError),
}

/// Settings of [`fit_lattice_walk`].
#[derive(Debug, Clone, PartialEq)]
pub struct LatticeWalkFitOptions {
    /// Chain length N.
    pub sites: usize,
    /// Source site j (0-based); map offsets are x = i − j. Unused when
    /// `average` is given.
    pub source: usize,
    /// The map is a mean over a window of sources (module documentation,
    /// "Maps averaged over sources"); `None` for a single source.
    pub average: Option<SourceAverage>,
    /// Starting (γ0, α); `None` scans α (module documentation).
    pub start: Option<[f64; 2]>,
    /// Bounds of α. Below ~0.1 the rates are nearly all-to-all; above ~5 the
    /// walk is nearest-neighbour to better than 1e-3 and α is undetermined.
    pub alpha_bounds: [f64; 2],
}

impl LatticeWalkFitOptions {
    /// Options for a chain of `sites` sites and the given source, α in
    /// [0.1, 5], scanned start.
    #[must_use]
    pub fn new(sites: usize, source: usize) -> Self {
        Self {
            sites,
            source,
            average: None,
            start: None,
            alpha_bounds: [0.1, 5.0],
        }
    }

    /// Options for a map averaged over the sources of `average`.
    #[must_use]
    pub fn averaged(sites: usize, average: SourceAverage) -> Self {
        Self {
            average: Some(average),
            ..Self::new(sites, average.first)
        }
    }
}

/// A map formed as the mean over the sources `first..=last` of C_{j+x,j}(t),
/// each offset x averaging the sources j with 0 ≤ j + x < N, and, when
/// `symmetrised`, replaced by (C(x) + C(−x))/2 — what the shot estimator's
/// bulk window produces.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
pub struct SourceAverage {
    pub first: usize,
    pub last: usize,
    pub symmetrised: bool,
}

impl SourceAverage {
    /// The one source j.
    #[must_use]
    pub fn single(j: usize) -> Self {
        Self {
            first: j,
            last: j,
            symmetrised: false,
        }
    }

    /// The sources j of the window with 0 ≤ j + x < `sites`, and the site
    /// j + x of each.
    fn pairs(self, sites: usize, x: i32) -> impl Iterator<Item = (usize, usize)> {
        (self.first..=self.last).filter_map(move |j| {
            let i = j as i64 + i64::from(x);
            (0..sites as i64).contains(&i).then_some((i as usize, j))
        })
    }

    /// The (site, source, weight) terms whose sum is the map at offset x:
    /// C(x,t) = Σ weight · P_{site ← source}(t); empty when no source of the
    /// window reaches x. The fit and the fitted curves drawn over the data
    /// both form the model from these.
    #[must_use]
    pub fn terms(self, sites: usize, x: i32) -> Vec<(usize, usize, f64)> {
        let side = |x: i32, share: f64| {
            let pairs: Vec<(usize, usize)> = self.pairs(sites, x).collect();
            let w = share / pairs.len().max(1) as f64;
            pairs.into_iter().map(move |(i, j)| (i, j, w))
        };
        if self.symmetrised {
            let (plus, minus): (Vec<_>, Vec<_>) = (side(x, 0.5).collect(), side(-x, 0.5).collect());
            if plus.is_empty() || minus.is_empty() {
                return Vec::new();
            }
            plus.into_iter().chain(minus).collect()
        } else {
            side(x, 1.0).collect()
        }
    }
}

/// Result of [`fit_lattice_walk`].
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct LatticeWalkFitReport {
    /// Rate between nearest neighbours, per time unit.
    pub gamma0: f64,
    pub gamma0_err: f64,
    /// Coupling exponent α (rates ∝ r^{−2α}).
    pub alpha: f64,
    pub alpha_err: f64,
    /// Correlation coefficient of (γ0, α).
    pub correlation: f64,
    /// z = min(2α − 1, 2).
    pub z: f64,
    /// Half the width of `z_interval`.
    pub z_err: f64,
    /// Image of [α − σ_α, α + σ_α] under min(2α − 1, 2).
    pub z_interval: [f64; 2],
    pub chi2: f64,
    pub dof: usize,
    pub chi2_dof: f64,
    /// P(χ² ≥ observed) when the data carry errors.
    pub p_value: Option<f64>,
    pub points: usize,
    pub sites: usize,
    pub source: usize,
    /// The window of sources the map averages, when it does.
    pub average: Option<SourceAverage>,
    /// First and last time of the window.
    pub t_window: [f64; 2],
    /// α ended on one of its bounds (its error is then meaningless).
    pub alpha_at_bound: bool,
    pub error_basis: ErrorBasis,
    pub iterations: usize,
    /// Eigendecompositions of the N × N generator that the fit needed.
    pub eigendecompositions: usize,
    pub termination: Termination,
}

/// Eigendecomposition of G₁(α) and, once asked for, M = Vᵀ ∂G₁/∂α V.
#[derive(Debug)]
struct Spectrum {
    alpha: f64,
    /// Eigenvalues λ_k ≤ 0 of G₁ (rounding above 0 clamped).
    values: Vec<f64>,
    /// V row-major: vectors[i * n + k] = V_ik.
    vectors: Vec<f64>,
    /// Vᵀ e_s for every source s of the problem: the source rows of V.
    source_rows: Vec<Vec<f64>>,
    derivative: RefCell<Option<Vec<f64>>>,
}

/// One term of a point's model value: weight · P_{site ← source}.
#[derive(Debug, Clone, Copy)]
struct Term {
    site: usize,
    /// Index into [`WalkProblem::sources`].
    source: usize,
    weight: f64,
}

/// The measured points and the walk's geometry.
#[derive(Debug)]
struct WalkProblem {
    sites: usize,
    /// The distinct sources the map is formed from (one unless averaged).
    sources: Vec<usize>,
    /// Distinct times and, per time, the residual indices.
    times: Vec<f64>,
    by_time: Vec<Vec<usize>>,
    /// Terms of residual k: `terms[term_start[k]..term_start[k + 1]]`.
    terms: Vec<Term>,
    term_start: Vec<usize>,
    y: Vec<f64>,
    sigma: Vec<f64>,
    cache: RefCell<Vec<Rc<Spectrum>>>,
    decompositions: Cell<usize>,
}

impl WalkProblem {
    fn spectrum(&self, alpha: f64) -> Result<Rc<Spectrum>, LinalgError> {
        if let Some(s) = self
            .cache
            .borrow()
            .iter()
            .find(|s| s.alpha.to_bits() == alpha.to_bits())
        {
            return Ok(Rc::clone(s));
        }
        let n = self.sites;
        let mut generator = Array2::<f64>::zeros((n, n));
        for i in 0..n {
            let mut out = 0.0;
            for j in 0..n {
                if i != j {
                    let rate = (i.abs_diff(j) as f64).powf(-2.0 * alpha);
                    generator[(i, j)] = rate;
                    out += rate;
                }
            }
            generator[(i, i)] = -out;
        }
        let eigen = symmetric_eigen(&generator)?;
        self.decompositions.set(self.decompositions.get() + 1);
        let values = eigen.values.iter().map(|&l| l.min(0.0)).collect();
        let vectors: Vec<f64> = eigen.vectors.iter().copied().collect();
        let source_rows = self
            .sources
            .iter()
            .map(|&s| vectors[s * n..(s + 1) * n].to_vec())
            .collect();
        let spectrum = Rc::new(Spectrum {
            alpha,
            values,
            vectors,
            source_rows,
            derivative: RefCell::new(None),
        });
        let mut cache = self.cache.borrow_mut();
        if cache.len() >= 4 {
            cache.remove(0);
        }
        cache.push(Rc::clone(&spectrum));
        Ok(spectrum)
    }

    /// M = Vᵀ (∂G₁/∂α) V, row-major.
    fn derivative_matrix(&self, spectrum: &Spectrum) -> Vec<f64> {
        if let Some(m) = spectrum.derivative.borrow().as_ref() {
            return m.clone();
        }
        let n = self.sites;
        let alpha = spectrum.alpha;
        let mut dg = Array2::<f64>::zeros((n, n));
        for i in 0..n {
            let mut out = 0.0;
            for j in 0..n {
                if i != j {
                    let r = i.abs_diff(j) as f64;
                    let d = -2.0 * r.ln() * r.powf(-2.0 * alpha);
                    dg[(i, j)] = d;
                    out += d;
                }
            }
            dg[(i, i)] = -out;
        }
        let v = Array2::from_shape_vec((n, n), spectrum.vectors.clone())
            .unwrap_or_else(|_| Array2::zeros((n, n)));
        let m = v.t().dot(&dg).dot(&v);
        let flat: Vec<f64> = m.iter().copied().collect();
        *spectrum.derivative.borrow_mut() = Some(flat.clone());
        flat
    }

    /// P(t) at every site from every source for γ0 and the spectrum, into
    /// `out` (source-major, N per source); `scratch` holds mode amplitudes.
    fn propagate(&self, sp: &Spectrum, gamma0: f64, t: f64, out: &mut [f64], scratch: &mut [f64]) {
        let n = self.sites;
        for (row_b, out) in sp.source_rows.iter().zip(out.chunks_exact_mut(n)) {
            for ((a, &l), &b) in scratch.iter_mut().zip(&sp.values).zip(row_b) {
                *a = (l * gamma0 * t).exp() * b;
            }
            mode_sum(&sp.vectors, scratch, out);
        }
    }

    /// The model value of residual k from per-source site vectors
    /// (source-major, N per source).
    fn model(&self, k: usize, per_source: &[f64]) -> f64 {
        let n = self.sites;
        self.terms[self.term_start[k]..self.term_start[k + 1]]
            .iter()
            .map(|term| term.weight * per_source[term.source * n + term.site])
            .sum()
    }

    /// χ² at (γ0, α) without touching the optimiser.
    fn chi2(&self, gamma0: f64, alpha: f64) -> Result<f64, LinalgError> {
        let mut r = vec![0.0; self.y.len()];
        let sp = self.spectrum(alpha)?;
        self.residuals_with(&sp, gamma0, &mut r);
        Ok(r.iter().map(|v| v * v).sum())
    }

    fn residuals_with(&self, sp: &Spectrum, gamma0: f64, r: &mut [f64]) {
        let n = self.sites;
        let mut p = vec![0.0; n * self.sources.len()];
        let mut scratch = vec![0.0; n];
        for (ti, &t) in self.times.iter().enumerate() {
            self.propagate(sp, gamma0, t, &mut p, &mut scratch);
            for &k in &self.by_time[ti] {
                r[k] = (self.y[k] - self.model(k, &p)) / self.sigma[k];
            }
        }
    }
}

impl LeastSquaresProblem for WalkProblem {
    fn n_params(&self) -> usize {
        2
    }

    fn n_residuals(&self) -> usize {
        self.y.len()
    }

    fn residuals(&self, p: &[f64], r: &mut [f64]) {
        match self.spectrum(p[1]) {
            Ok(sp) => self.residuals_with(&sp, p[0], r),
            Err(_) => r.fill(f64::NAN),
        }
    }

    fn jacobian(&self, p: &[f64], jac: &mut [f64]) -> bool {
        let (gamma0, n) = (p[0], self.sites);
        let Ok(sp) = self.spectrum(p[1]) else {
            jac.fill(f64::NAN);
            return true;
        };
        let m = self.derivative_matrix(&sp);
        let inverse_gaps: Vec<f64> = (0..n * n)
            .map(|kl| 1.0 / (sp.values[kl / n] - sp.values[kl % n]))
            .collect();
        let n_src = self.sources.len();
        let mut d_gamma = vec![0.0; n * n_src];
        let mut d_alpha = vec![0.0; n * n_src];
        let mut c_gamma = vec![0.0; n];
        let mut c_alpha = vec![0.0; n];
        let mut growth = vec![0.0; n];
        let mut phi_m = vec![0.0; n * n];
        for (ti, &t) in self.times.iter().enumerate() {
            let tau = gamma0 * t;
            for (g, l) in growth.iter_mut().zip(&sp.values) {
                *g = (l * tau).exp();
            }
            // Φ ∘ M. Φ_kl = (E_k − E_l)/(λ_k − λ_l) loses at most
            // ε/(|λ_k − λ_l|τ) to cancellation, so it is used when that gap
            // exceeds 1e-3; closer pairs take the stable form of the module
            // documentation. Φ was built with τ = γ0 t as the time:
            // d exp(τG₁)/dα.
            for k in 0..n {
                let lk = sp.values[k];
                let inverse = &inverse_gaps[k * n..(k + 1) * n];
                for l in 0..n {
                    let gap = lk - sp.values[l];
                    let phi = if gap.abs() * tau > 1e-3 {
                        (growth[k] - growth[l]) * inverse[l]
                    } else {
                        let high = if gap >= 0.0 { growth[k] } else { growth[l] };
                        tau * high * expm1_over_x(-gap.abs() * tau)
                    };
                    phi_m[k * n + l] = phi * m[k * n + l];
                }
            }
            for (q, b) in sp.source_rows.iter().enumerate() {
                for k in 0..n {
                    c_gamma[k] = sp.values[k] * t * growth[k] * b[k];
                    let row = &phi_m[k * n..(k + 1) * n];
                    c_alpha[k] = row.iter().zip(b).map(|(a, b)| a * b).sum();
                }
                mode_sum(&sp.vectors, &c_gamma, &mut d_gamma[q * n..(q + 1) * n]);
                mode_sum(&sp.vectors, &c_alpha, &mut d_alpha[q * n..(q + 1) * n]);
            }
            for &k in &self.by_time[ti] {
                let s = -1.0 / self.sigma[k];
                jac[2 * k] = s * self.model(k, &d_gamma);
                jac[2 * k + 1] = s * self.model(k, &d_alpha);
            }
        }
        true
    }
}

/// out_i = Σ_k V_ik a_k for V row-major (N × N).
fn mode_sum(vectors: &[f64], a: &[f64], out: &mut [f64]) {
    let n = a.len();
    for (i, o) in out.iter_mut().enumerate() {
        let row = &vectors[i * n..(i + 1) * n];
        *o = row.iter().zip(a).map(|(v, a)| v * a).sum();
    }
}

/// Multiples of the coherence time after which the walk window starts.
pub const WALK_START_COHERENCE_TIMES: f64 = 3.0;

/// Where the default window of the walk fit starts: three coherence times
/// in. At the earliest times spin dynamics is coherent, C(0,t) ≈ 1 −
/// t² Σ_b K_0b² (the short-time expansion), not a walk's 1 − γt, and
/// fitting the walk there biases α: on exact 10-site α = 1 data with noise
/// 0.02, every time gives α = 1.10 ± 0.04 with χ²/dof 3.5, from the default
/// start (t = 1.8/J) α = 1.02 ± 0.10 with χ²/dof 1.4 (test
/// `the_default_walk_window_skips_the_coherent_start`). The coherence time τ is read from the data as the first time
/// where C(0,t) has fallen to 1/e (a Gaussian decay e^{−t²/τ²} reaches it
/// at τ); `None` when it never does or the map has no x = 0 column (then
/// every time is used). For a walk map the cut only drops early times the
/// walk also describes.
#[must_use]
pub fn walk_window_start(map: &CorrelationMap) -> Option<f64> {
    let series = map.autocorrelation()?;
    let tau = series
        .iter()
        .find(|(t, c, _)| *t > 0.0 && *c <= (-1.0f64).exp())
        .map(|p| p.0)?;
    let start = WALK_START_COHERENCE_TIMES * tau;
    // Keep at least three times after the cut.
    let later = series.iter().filter(|p| p.0 >= start).count();
    (later >= 3).then_some(start)
}

/// Fits (γ0, α) of the finite-chain lattice walk to every present point of
/// `map` (already windowed by the caller), weighted by the map's errors
/// (unit weights without). See the module documentation.
///
/// # Errors
/// A chain size outside 2..=[`MAX_SITES`], a source outside the chain, an
/// offset of the map that falls outside the chain, a bad α range or start,
/// fewer than 3 points, or a failed eigendecomposition or fit.
pub fn fit_lattice_walk(
    map: &CorrelationMap,
    options: &LatticeWalkFitOptions,
) -> Result<LatticeWalkFitReport, LatticeWalkFitError> {
    let (sites, source) = (options.sites, options.source);
    if !(2..=MAX_SITES).contains(&sites) {
        return Err(LatticeWalkFitError::Sites(sites));
    }
    if source >= sites {
        return Err(LatticeWalkFitError::SourceOutOfRange {
            source_site: source,
            sites,
        });
    }
    let [a_lo, a_hi] = options.alpha_bounds;
    if !(a_lo.is_finite() && a_hi.is_finite() && a_lo > 0.0 && a_lo < a_hi) {
        return Err(LatticeWalkFitError::BadAlphaRange {
            lower: a_lo,
            upper: a_hi,
        });
    }
    let average = match options.average {
        Some(a) => {
            if a.first > a.last || a.last >= sites {
                return Err(LatticeWalkFitError::BadSourceWindow {
                    first: a.first,
                    last: a.last,
                    sites,
                });
            }
            a
        }
        None => SourceAverage::single(source),
    };
    let problem = build_problem(map, sites, average)?;
    let points = problem.y.len();
    if points < 3 {
        return Err(LatticeWalkFitError::TooFewPoints(points));
    }
    let start = match options.start {
        Some([g, a]) => {
            if !(g.is_finite() && g > 0.0 && a.is_finite() && a >= a_lo && a <= a_hi) {
                return Err(LatticeWalkFitError::BadStart {
                    gamma0: g,
                    alpha: a,
                });
            }
            [g, a]
        }
        None => scan_start(&problem, map, [a_lo, a_hi])?,
    };
    let lm = LmOptions {
        jacobian: JacobianMethod::Analytic,
        lower: Some(vec![f64::MIN_POSITIVE, a_lo]),
        upper: Some(vec![f64::INFINITY, a_hi]),
        max_iterations: 300,
        gradient_tolerance: 1e-10,
        step_tolerance: 1e-10,
        chi2_tolerance: 1e-12,
        ..LmOptions::default()
    };
    let report = least_squares(&problem, &start, &lm)?;
    let errors_known = map.errors().is_some();
    let (cov, error_basis) = if errors_known {
        (&report.covariance, ErrorBasis::Data)
    } else {
        (&report.scaled_covariance, ErrorBasis::Scatter)
    };
    let (gamma0, alpha) = (report.params[0], report.params[1]);
    let gamma0_err = cov[0][0].sqrt();
    let alpha_err = cov[1][1].sqrt();
    let implied = |a: f64| (2.0 * a - 1.0).min(2.0);
    let z_interval = [implied(alpha - alpha_err), implied(alpha + alpha_err)];
    let times = &problem.times;
    Ok(LatticeWalkFitReport {
        gamma0,
        gamma0_err,
        alpha,
        alpha_err,
        correlation: cov[0][1] / (gamma0_err * alpha_err),
        z: implied(alpha),
        z_err: 0.5 * (z_interval[1] - z_interval[0]),
        z_interval,
        chi2: report.chi2,
        dof: report.dof,
        chi2_dof: report.chi2_dof,
        p_value: errors_known.then(|| chi2_survival(report.chi2, report.dof)),
        points,
        sites,
        source,
        average: options.average,
        t_window: [times[0], times[times.len() - 1]],
        alpha_at_bound: report.at_bound[1],
        error_basis,
        iterations: report.iterations,
        eigendecompositions: problem.decompositions.get(),
        termination: report.termination,
    })
}

fn build_problem(
    map: &CorrelationMap,
    sites: usize,
    average: SourceAverage,
) -> Result<WalkProblem, LatticeWalkFitError> {
    let mut sources: Vec<usize> = Vec::new();
    let mut terms_of = Vec::with_capacity(map.offsets().len());
    for (xi, &x) in map.offsets().iter().enumerate() {
        let mut terms = average.terms(sites, x);
        if terms.is_empty() {
            // Only an offset that is actually measured matters.
            if (0..map.n_times()).any(|ti| map.present()[(ti, xi)]) {
                return Err(LatticeWalkFitError::OffsetOutsideChain {
                    offset: x,
                    // The site nearest the chain from the window's sources.
                    site: if x < 0 { average.last } else { average.first } as i64 + i64::from(x),
                    sites,
                    source_site: average.first,
                });
            }
        }
        for term in &mut terms {
            term.1 = match sources.iter().position(|&s| s == term.1) {
                Some(q) => q,
                None => {
                    sources.push(term.1);
                    sources.len() - 1
                }
            };
        }
        terms_of.push(terms);
    }
    if sources.is_empty() {
        sources.push(average.first);
    }
    let mut problem = WalkProblem {
        sites,
        sources,
        times: Vec::new(),
        by_time: Vec::new(),
        terms: Vec::new(),
        term_start: vec![0],
        y: Vec::new(),
        sigma: Vec::new(),
        cache: RefCell::new(Vec::new()),
        decompositions: Cell::new(0),
    };
    for (ti, &t) in map.times().iter().enumerate() {
        let mut here = Vec::new();
        for (xi, terms) in terms_of.iter().enumerate() {
            let Some((c, e)) = map.get(ti, xi) else {
                continue;
            };
            if terms.is_empty() {
                continue;
            }
            here.push(problem.y.len());
            problem.y.push(c);
            problem.sigma.push(e.unwrap_or(1.0));
            problem
                .terms
                .extend(terms.iter().map(|&(site, source, weight)| Term {
                    site,
                    source,
                    weight,
                }));
            problem.term_start.push(problem.terms.len());
        }
        if !here.is_empty() {
            problem.times.push(t);
            problem.by_time.push(here);
        }
    }
    Ok(problem)
}

/// Return probability P_ss(τ) = Σ_k b_k² e^{λ_k τ} at γ0 = 1, averaged
/// over the problem's sources (every source reaches x = 0).
fn return_probability(sp: &Spectrum, tau: f64) -> f64 {
    let total: f64 = sp
        .source_rows
        .iter()
        .map(|row| {
            sp.values
                .iter()
                .zip(row)
                .map(|(l, b)| b * b * (l * tau).exp())
                .sum::<f64>()
        })
        .sum();
    total / sp.source_rows.len() as f64
}

/// The starting point of the module documentation.
fn scan_start(
    problem: &WalkProblem,
    map: &CorrelationMap,
    alpha_bounds: [f64; 2],
) -> Result<[f64; 2], LatticeWalkFitError> {
    let equilibrium = 1.0 / problem.sites as f64;
    let target = equilibrium.sqrt();
    // The matching time: C(0,t) strictly between equilibrium and 1, nearest
    // to the geometric middle.
    let anchor = map.autocorrelation().and_then(|series| {
        series
            .into_iter()
            .filter(|&(t, c, _)| t > 0.0 && c > 1.05 * equilibrium && c < 0.98)
            .min_by(|a, b| {
                (a.1 / target)
                    .ln()
                    .abs()
                    .total_cmp(&(b.1 / target).ln().abs())
            })
    });
    // γ0 for a given α: match P_ss(γ0 t*) to the anchor value (P_ss falls
    // from 1 at τ = 0 towards 1/N: bracket, then bisect).
    let matched = |alpha: f64| -> Result<(f64, f64), LatticeWalkFitError> {
        let sp = problem.spectrum(alpha)?;
        let gamma0 = match anchor {
            Some((t, c, _)) => {
                let mut hi = 1.0;
                while return_probability(&sp, hi) > c && hi < 1e12 {
                    hi *= 4.0;
                }
                let mut lo = 0.0;
                for _ in 0..80 {
                    let mid = 0.5 * (lo + hi);
                    if return_probability(&sp, mid) > c {
                        lo = mid;
                    } else {
                        hi = mid;
                    }
                }
                0.5 * (lo + hi) / t
            }
            None => 1.0,
        };
        Ok((gamma0, problem.chi2(gamma0, alpha)?))
    };
    let candidates: Vec<f64> = [0.6, 0.85, 1.2, 1.75, 3.0]
        .into_iter()
        .filter(|&a| a >= alpha_bounds[0] && a <= alpha_bounds[1])
        .collect();
    let mut scan = Vec::with_capacity(candidates.len());
    for &alpha in &candidates {
        let (gamma0, chi2) = matched(alpha)?;
        scan.push((
            alpha,
            gamma0,
            if chi2.is_finite() {
                chi2
            } else {
                f64::INFINITY
            },
        ));
    }
    let Some(b) = (0..scan.len()).min_by(|&i, &j| scan[i].2.total_cmp(&scan[j].2)) else {
        return Ok([1.0, alpha_bounds[0].max(1.0).min(alpha_bounds[1])]);
    };
    let mut best = (scan[b].2, [scan[b].1, scan[b].0]);
    // Refine by the vertex of the parabola through the best candidate and
    // its neighbours (one more decomposition, fewer iterations later).
    if b > 0 && b + 1 < scan.len() {
        let ((a0, _, c0), (a1, _, c1), (a2, _, c2)) = (scan[b - 1], scan[b], scan[b + 1]);
        let numerator = (a1 - a0).powi(2) * (c1 - c2) - (a1 - a2).powi(2) * (c1 - c0);
        let denominator = (a1 - a0) * (c1 - c2) - (a1 - a2) * (c1 - c0);
        let vertex = a1 - 0.5 * numerator / denominator;
        if vertex.is_finite() && vertex > a0 && vertex < a2 {
            let (gamma0, chi2) = matched(vertex)?;
            if chi2 < best.0 {
                best = (chi2, [gamma0, vertex]);
            }
        }
    }
    Ok(best.1)
}

#[cfg(test)]
mod tests;
