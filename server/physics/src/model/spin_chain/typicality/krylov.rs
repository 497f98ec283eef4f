//! Krylov propagation: the small exponential of the Lanczos tridiagonal,
//! the states at several times from one Krylov space and their measured
//! magnetisations, and the propagator that steps a vector through the
//! requested times within the step tolerance.

use super::*;

/// e^{−iτT} e_1 for the Lanczos tridiagonal T = S diag(θ) Sᵀ.
#[derive(Debug)]
pub(super) struct SmallExponential {
    pub(super) theta: Vec<f64>,
    pub(super) vectors: Array2<f64>,
    /// β_m, the coupling out of the Krylov space (0 when it is invariant).
    pub(super) beta_out: f64,
}

impl SmallExponential {
    pub(super) fn new(alphas: &[f64], betas: &[f64], beta_out: f64) -> Result<Self, LinalgError> {
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
    pub(super) fn component(&self, row: usize, tau: f64) -> Amp {
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
    pub(super) fn components(&self, tau: f64, scale: f64) -> Vec<Amp> {
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
    pub(super) fn error(&self, tau: f64) -> f64 {
        let last = self.component(self.theta.len() - 1, tau);
        self.beta_out * last.re.hypot(last.im)
    }

    /// out = scale · Σ_p c_p(τ) q_p, one Krylov vector at a time over blocks
    /// of rows so that every vector is streamed once.
    pub(super) fn combine(&self, basis: &[Vec<Amp>], scale: f64, tau: f64, out: &mut [Amp]) {
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
    pub(super) fn largest_step(&self, mut lo: f64, mut hi: f64, tol: f64) -> f64 {
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
pub(super) struct KrylovOutputs<'a> {
    pub(super) basis: &'a [Vec<Amp>],
    pub(super) coefficients: Vec<Vec<Amp>>,
}

impl KrylovOutputs<'_> {
    /// The state of output `l`, assembled in full (used by tests; the
    /// estimator needs only [`KrylovOutputs::magnetisation_ratios`]).
    #[cfg(test)]
    pub(super) fn state(&self, l: usize) -> Vec<Amp> {
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
    pub(super) fn magnetisation_ratios(&self, states: &[u32], sites: usize) -> Vec<Vec<f64>> {
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
pub(super) struct Propagator<'a> {
    pub(super) operator: &'a SectorOperator,
    pub(super) max_dim: usize,
    pub(super) tolerance: f64,
    pub(super) cancel: &'a AtomicBool,
}

impl Propagator<'_> {
    /// Evolves `start` by e^{−iHt} to every time of `times` (sorted
    /// ascending, ≥ 0) and hands the states, a batch per Krylov space, to
    /// `observe(indices into times, outputs)`. Returns the largest
    /// accumulated relative error estimate and the number of Hamiltonian
    /// applications.
    pub(super) fn run(
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
