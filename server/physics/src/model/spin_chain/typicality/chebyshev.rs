//! Chebyshev propagation: the spectral interval of a sector (short Lanczos
//! run), the expansion coefficients of e^{−iHτ}, the propagator that
//! collects every output time of a stretch from one expansion, and the
//! measured magnetisations (module documentation of `typicality`).

use super::*;

/// Most Lanczos steps of the spectral estimate of a sector. The extreme
/// Ritz values on a random vector, widened by their residuals and by
/// [`BOUND_MARGIN`], enclosed the spectrum of every sector we checked
/// (N ≤ 13 against exact diagonalisation, tests); a violation is caught by
/// [`GROWTH_LIMIT`] and refused, never returned.
const BOUND_STEPS: usize = 48;

/// The estimate stops early, checked every [`BOUND_CHECK`] steps, once both
/// extreme residuals are below this fraction of the interval's width.
const BOUND_SETTLED: f64 = 0.01;

/// Lanczos steps between two checks of the spectral estimate.
const BOUND_CHECK: usize = 8;

/// Relative widening of the Lanczos interval on each side.
const BOUND_MARGIN: f64 = 0.03;

/// Seed of the spectral estimate's start vector: fixed, so that the
/// interval of a sector (and with it every bit of a run) depends on the
/// chain alone, not on the run's seed or on how a run is split.
const BOUND_SEED: u64 = 0x5EC7_0B0D;

/// Largest tolerated ‖T_n(H̃)ψ‖/‖ψ‖: within [−1, 1] every Chebyshev
/// polynomial is bounded by 1, so a larger norm means the spectrum reaches
/// outside the estimated interval.
const GROWTH_LIMIT: f64 = 1.0 + 1e-6;

/// Amplitudes per lane and block when the stored terms are added into the
/// output states (16 kB: one block of every output stays in L1/L2 cache).
const COMBINE_ROWS: usize = 1024;

/// Rows per block when an output state is measured.
const MEASURE_ROWS: usize = 4096;

/// The interval [center − half, center + half] that holds the spectrum of
/// a sector's Hamiltonian.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(super) struct Spectrum {
    pub(super) center: f64,
    pub(super) half: f64,
}

/// The spectral interval of one sector from [`BOUND_STEPS`] Lanczos steps
/// (without reorthogonalisation, which extreme Ritz values tolerate; common
/// practice): [θ_min − r_min, θ_max + r_max] with r the residual norm
/// β_m |s_m| of the extreme Ritz pair, widened by [`BOUND_MARGIN`] of its
/// width on each side.
///
/// # Errors
/// [`SpinChainError::Linalg`] when the small eigenproblem fails.
pub(super) fn spectrum(op: &SectorOperator, up: usize) -> Result<Spectrum, SpinChainError> {
    let d = op.dim();
    let mut rng = ChaCha8Rng::seed_from_u64(BOUND_SEED);
    rng.set_stream(up as u64);
    let mut q: Vec<[f64; 1]> = (0..d).map(|_| [standard_normal(&mut rng)]).collect();
    let start = lane_norms::<1>(&q)[0].sqrt();
    q.iter_mut().for_each(|a| a[0] /= start);
    let mut back = vec![[0.0]; d];
    let mut w = vec![[0.0]; d];
    let (mut alphas, mut betas) = (Vec::new(), Vec::new());
    let steps = BOUND_STEPS.min(d);
    for step in 0..steps {
        let sums = op.apply::<1>(&q, &mut w, 1.0, 0.0, (step > 0).then_some(back.as_slice()));
        let alpha = sums[0].overlap;
        w.par_iter_mut()
            .zip(&q)
            .for_each(|(w, q)| w[0] -= q[0] * alpha);
        let beta = lane_norms::<1>(&w)[0].sqrt();
        alphas.push(alpha);
        let invariant = beta <= 1e-12 * alpha.abs().max(1.0);
        if invariant || step + 1 == steps {
            return interval(&alphas, &betas, if invariant { 0.0 } else { beta }).map(|(i, _)| i);
        }
        if (step + 1) % BOUND_CHECK == 0 {
            let (range, settled) = interval(&alphas, &betas, beta)?;
            if settled {
                return Ok(range);
            }
        }
        betas.push(beta);
        back.par_iter_mut()
            .zip(&q)
            .for_each(|(b, q)| b[0] = q[0] * beta);
        q.par_iter_mut()
            .zip(&w)
            .for_each(|(q, w)| q[0] = w[0] / beta);
    }
    unreachable!("the loop returns at its last step")
}

/// The widened interval from a Lanczos tridiagonal (α, β) with coupling
/// `beta_out` out of the Krylov space, and whether its extreme residuals
/// have settled (see [`BOUND_SETTLED`]).
fn interval(
    alphas: &[f64],
    betas: &[f64],
    beta_out: f64,
) -> Result<(Spectrum, bool), SpinChainError> {
    let m = alphas.len();
    let t = Array2::from_shape_fn((m, m), |(i, j)| match i.abs_diff(j) {
        0 => alphas[i],
        1 => betas[i.min(j)],
        _ => 0.0,
    });
    let eigen = symmetric_eigen(&t)?;
    let (mut lo, mut hi) = (f64::INFINITY, f64::NEG_INFINITY);
    for (l, &theta) in eigen.values.iter().enumerate() {
        let residual = beta_out * eigen.vectors[(m - 1, l)].abs();
        lo = lo.min(theta - residual);
        hi = hi.max(theta + residual);
    }
    // The residuals of the two extreme Ritz pairs decide whether to stop.
    let order = |a: &usize, b: &usize| eigen.values[*a].total_cmp(&eigen.values[*b]);
    let first = (0..m).min_by(order).unwrap_or(0);
    let last = (0..m).max_by(order).unwrap_or(0);
    let edge = beta_out
        * eigen.vectors[(m - 1, first)]
            .abs()
            .max(eigen.vectors[(m - 1, last)].abs());
    let settled = edge <= BOUND_SETTLED * (hi - lo);
    let pad = BOUND_MARGIN * (hi - lo) + 1e-9 * (1.0 + lo.abs().max(hi.abs()));
    Ok((
        Spectrum {
            center: 0.5 * (lo + hi),
            half: 0.5 * (hi - lo) + pad,
        },
        settled,
    ))
}

/// The expansion e^{−iHτ} = e^{−ieτ} [J_0(hτ) + 2 Σ_{n≥1} (−i)^n J_n(hτ) T_n(H̃)],
/// H̃ = (H − e)/h (Jacobi–Anger; H. Tal-Ezer and R. Kosloff, J. Chem. Phys.
/// 81, 3967 (1984), from memory), without the phase e^{−ieτ}, which no
/// measured quadratic form sees. Returns the coefficients up to the first
/// index N whose tail bound 2 Σ_{n>N} |J_n(hτ)| (a bound on the relative
/// state error, since ‖T_n(H̃)‖ ≤ 1) is at most `tolerance`, and that bound.
pub(super) fn coefficients(theta: f64, tolerance: f64) -> (Vec<Amp>, f64) {
    // Beyond n ≈ θ the Bessel functions fall faster than geometrically;
    // compute until they are far below the tolerance, then cut.
    let mut values = Vec::new();
    let mut n = 0u32;
    loop {
        let j = bessel_j(n, theta);
        values.push(j);
        if f64::from(n) > theta + 2.0 && j.abs() < 1e-6 * tolerance {
            break;
        }
        n += 1;
    }
    let mut tail = 0.0;
    let mut cut = values.len() - 1;
    while cut > 0 {
        let next = tail + 2.0 * values[cut].abs();
        if next > tolerance {
            break;
        }
        tail = next;
        cut -= 1;
    }
    let phases = [
        Amp::new(1.0, 0.0),
        Amp::new(0.0, -1.0),
        Amp::new(-1.0, 0.0),
        Amp::new(0.0, 1.0),
    ];
    let list = values[..=cut]
        .iter()
        .enumerate()
        .map(|(n, &j)| {
            let weight = if n == 0 { j } else { 2.0 * j };
            phases[n % 4] * weight
        })
        .collect();
    (list, tail)
}

/// Chebyshev propagation of `B` real lanes to a list of increasing times.
pub(super) struct Propagator<'a> {
    pub(super) operator: &'a SectorOperator,
    pub(super) spectrum: Spectrum,
    pub(super) up: usize,
    pub(super) tolerance: f64,
    /// Chebyshev terms held before they are added into the outputs.
    pub(super) window: usize,
    /// Output states held at once; more times are reached by further
    /// expansions from the start vector.
    pub(super) slots: usize,
    pub(super) cancel: &'a AtomicBool,
}

/// What a propagation cost and how exact it was.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(super) struct Propagated {
    /// Largest bound on the relative state error of an output.
    pub(super) error: f64,
    /// Hamiltonian applications (each serves every lane).
    pub(super) applications: u64,
}

impl Propagator<'_> {
    /// The expansion of e^{−iHt} for every time of `times` (see
    /// [`coefficients`]), computed once per sector and shared by every
    /// group of vectors that [`Propagator::run`] propagates.
    pub(super) fn expansions(&self, times: &[f64]) -> Vec<(Vec<Amp>, f64)> {
        times
            .iter()
            .map(|&t| coefficients(self.spectrum.half * t, self.tolerance))
            .collect()
    }

    /// Evolves the `B` real lanes of `start` by e^{−iHt} (up to a global
    /// phase per time) to every time whose expansion `expansions` holds
    /// (from [`Propagator::expansions`], times sorted ascending, ≥ 0) and
    /// hands the states, a stretch of at most `slots` times at once, to
    /// `observe(indices into times, states)`; every stretch expands from
    /// the start vector, so the recursion stays real and errors do not
    /// accumulate. `tick(fraction)` reports how far the run has come.
    pub(super) fn run<const B: usize>(
        &self,
        start: &[[f64; B]],
        expansions: &[(Vec<Amp>, f64)],
        tick: &mut dyn FnMut(f64),
        mut observe: impl FnMut(&[usize], &[State<B>]),
    ) -> Result<Propagated, SpinChainError> {
        let len = start.len();
        let window = self.window.max(3);
        let half = self.spectrum.half;
        let reference = lane_norms::<B>(start);
        let total: usize = expansions
            .chunks(self.slots.max(1))
            .map(|chunk| chunk.last().map_or(0, |(c, _)| c.len()))
            .sum();
        let mut done = 0usize;
        let mut applications = 0u64;
        let mut first = 0;
        while first < expansions.len() {
            let end = (first + self.slots.max(1)).min(expansions.len());
            let stretch = &expansions[first..end];
            let terms = stretch.iter().map(|(c, _)| c.len()).max().unwrap_or(1);
            let mut outputs = vec![State::<B>::zeros(len); end - first];
            let mut ring: Vec<Vec<[f64; B]>> = vec![start.to_vec()];
            let mut flushed = 0;
            for n in 0..terms {
                if n > 0 {
                    if self.cancel.load(Ordering::Relaxed) {
                        return Err(SpinChainError::Cancelled);
                    }
                    let slot = n % window;
                    if ring.len() <= slot {
                        ring.push(vec![[0.0; B]; len]);
                    }
                    let mut y = std::mem::take(&mut ring[slot]);
                    let x = &ring[(n - 1) % window];
                    let (scale, back) = if n == 1 {
                        (1.0 / half, None)
                    } else {
                        (2.0 / half, Some(ring[(n - 2) % window].as_slice()))
                    };
                    let sums =
                        self.operator
                            .apply::<B>(x, &mut y, scale, self.spectrum.center, back);
                    ring[slot] = y;
                    applications += 1;
                    for (s, r) in sums.iter().zip(reference) {
                        if s.norm_sq > GROWTH_LIMIT * GROWTH_LIMIT * r {
                            return Err(SpinChainError::SpectralBound {
                                up: self.up,
                                growth: (s.norm_sq / r).sqrt(),
                            });
                        }
                    }
                    done += 1;
                    tick(done as f64 / total.max(1) as f64);
                }
                if n % window == window - 1 || n + 1 == terms {
                    combine(&ring, window, flushed..n + 1, stretch, &mut outputs);
                    flushed = n + 1;
                }
            }
            observe(&(first..end).collect::<Vec<_>>(), &outputs);
            first = end;
        }
        Ok(Propagated {
            error: expansions.iter().map(|(_, e)| *e).fold(0.0, f64::max),
            applications,
        })
    }
}

/// A complex output state of `B` lanes, real and imaginary parts stored
/// apart so that adding a real Chebyshev term into either is a contiguous
/// scaled sum.
#[derive(Debug, Clone)]
pub(super) struct State<const B: usize> {
    pub(super) re: Vec<[f64; B]>,
    pub(super) im: Vec<[f64; B]>,
}

impl<const B: usize> State<B> {
    fn zeros(len: usize) -> Self {
        Self {
            re: vec![[0.0; B]; len],
            im: vec![[0.0; B]; len],
        }
    }

    /// The amplitude of basis state `a` in lane `lane`.
    #[cfg(test)]
    pub(super) fn amp(&self, a: usize, lane: usize) -> Amp {
        Amp::new(self.re[a][lane], self.im[a][lane])
    }
}

/// outputs[l] += Σ_{n ∈ terms} c_l[n] T_n, block by block over the rows so
/// that every stored term is read from memory once for all outputs.
fn combine<const B: usize>(
    ring: &[Vec<[f64; B]>],
    window: usize,
    terms: std::ops::Range<usize>,
    expansions: &[(Vec<Amp>, f64)],
    outputs: &mut [State<B>],
) {
    let len = ring[0].len();
    let blocks = len.div_ceil(COMBINE_ROWS);
    type Piece<'a, const B: usize> = (&'a mut [[f64; B]], &'a mut [[f64; B]]);
    let mut per_block: Vec<Vec<Piece<'_, B>>> = (0..blocks).map(|_| Vec::new()).collect();
    for out in outputs.iter_mut() {
        let pieces = out
            .re
            .chunks_mut(COMBINE_ROWS)
            .zip(out.im.chunks_mut(COMBINE_ROWS));
        for (b, piece) in pieces.enumerate() {
            per_block[b].push(piece);
        }
    }
    per_block
        .into_par_iter()
        .enumerate()
        .for_each(|(b, mut pieces)| {
            let rows = b * COMBINE_ROWS..(b * COMBINE_ROWS + COMBINE_ROWS).min(len);
            for ((re, im), (coefficients, _)) in pieces.iter_mut().zip(expansions) {
                for n in terms.start..terms.end.min(coefficients.len()) {
                    let term = ring[n % window][rows.clone()].as_flattened();
                    // c_n is real for even n and imaginary for odd n.
                    if n % 2 == 0 {
                        add_scaled(re.as_flattened_mut(), coefficients[n].re, term);
                    } else {
                        add_scaled(im.as_flattened_mut(), coefficients[n].im, term);
                    }
                }
            }
        });
}

/// out += c · term, element by element; compiled once more for AVX2 and
/// chosen at run time (same operations in the same order, so same bits).
#[multiversion::multiversion(targets("x86_64+avx2"))]
fn add_scaled(out: &mut [f64], c: f64, term: &[f64]) {
    for (o, t) in out.iter_mut().zip(term) {
        *o += c * t;
    }
}

/// ⟨ψ_b|σᶻ_i|ψ_b⟩/⟨ψ_b|ψ_b⟩ for every lane b and site i, `[b][i]`, with the
/// basis words `states`; block sums are added in block order, so the
/// result depends on neither the thread count nor the other lanes.
pub(super) fn magnetisation_ratios<const B: usize>(
    psi: &State<B>,
    states: &[u32],
    sites: usize,
) -> Vec<Vec<f64>> {
    let width = sites + 1;
    let partials: Vec<Vec<f64>> = psi
        .re
        .par_chunks(MEASURE_ROWS)
        .zip(psi.im.par_chunks(MEASURE_ROWS))
        .zip(states.par_chunks(MEASURE_ROWS))
        .map(|((re, im), words)| {
            let mut sums = vec![0.0; B * width];
            for ((re, im), &word) in re.iter().zip(im).zip(words) {
                for b in 0..B {
                    let weight = re[b] * re[b] + im[b] * im[b];
                    let acc = &mut sums[b * width..(b + 1) * width];
                    acc[sites] += weight;
                    let mut bits = word;
                    while bits != 0 {
                        acc[bits.trailing_zeros() as usize] += weight;
                        bits &= bits - 1;
                    }
                }
            }
            sums
        })
        .collect();
    let mut sums = vec![0.0; B * width];
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
