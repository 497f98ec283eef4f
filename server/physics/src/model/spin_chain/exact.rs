//! Exact infinite-temperature correlations of a [`SpinChain`] by dense
//! diagonalisation of every magnetisation sector (N ≤ 14).
//!
//! Owns: the eigenbasis contraction below. Must not know: random sampling,
//! time propagation of vectors, files or threads of the server.
//!
//! Method (derivable; the trace identities are common practice). In a sector
//! with Hamiltonian H = V Λ Vᵀ (real orthogonal V, eigenvalues λ_m), σᶻ_i is
//! diagonal in the spin basis, so its eigenbasis matrix A_i = Vᵀ σᶻ_i V is real
//! symmetric and
//!
//!   Tr[e^{iHt} σᶻ_i e^{−iHt} σᶻ_j] = Σ_{m,n} e^{i(λ_m−λ_n)t} A_i\[m,n\] A_j\[n,m\]
//!                                  = Σ_{m,n} cos((λ_m−λ_n)t) A_i\[m,n\] A_j\[m,n\],
//!
//! the sine part cancelling under m ↔ n. With c_m = cos λ_m t and
//! s_m = sin λ_m t, cos((λ_m−λ_n)t) = c_m c_n + s_m s_n, so with
//! P_i = A_i ∘ A_j (elementwise) the sector trace is cᵀ P_i c + sᵀ P_i s:
//! O(d²) per site and time, done for all times at once as one matrix product
//! P_i [c(t_1) … s(t_T)]. A_i itself is formed once per sector from
//! σᶻ_i = 2 Π_i − 1 (Π_i the projector on spin i up): A_i = 2 V_iᵀ V_i − 1,
//! V_i the rows of V whose basis word has bit i set, which costs d² · C(N−1, k−1)
//! multiply-adds instead of d³.
//!
//! Accuracy: the eigendecomposition is backward stable, so values carry an
//! absolute error of a few hundred ulps times the sector dimension
//! (≲ 1e-12 for N ≤ 14); sum rule and symmetries hold to the same level.

use ndarray::{Array1, Array2, Axis};
use rayon::prelude::*;

use super::{MAX_EXACT_SITES, MAX_TYPICAL_SITES, Sector, SpinChain, SpinChainError};
use crate::numerics::linalg::symmetric_eigen;

/// Memory allowed for the per-site work buffers that run at the same time
/// (each holds about two d × d matrices); keeps the exact method within
/// about 1 GiB on machines with many cores.
const WORK_BUFFER_BUDGET: usize = 1 << 30;

/// Memory allowed for the eigenbasis matrices A_j of the sources kept at the
/// same time; more sources are handled in groups.
const SOURCE_BUFFER_BUDGET: usize = 1 << 29;

/// C_{i,j}(t) for every site i, every source j of `sources` and every time,
/// one `[time, site]` array per source. The diagonalisation and the site
/// matrices A_i are shared by all sources. See the module documentation for
/// the method and its accuracy.
pub(super) fn correlations(
    chain: &SpinChain,
    sources: &[usize],
    times: &[f64],
) -> Result<Vec<Array2<f64>>, SpinChainError> {
    let sites = chain.sites();
    if sites > MAX_EXACT_SITES {
        return Err(SpinChainError::TooLargeForExact {
            sites,
            max: MAX_EXACT_SITES,
            typical_max: MAX_TYPICAL_SITES,
        });
    }
    for &source in sources {
        chain.check_source_and_times(source, times)?;
    }
    let n_times = times.len();
    let mut totals = vec![Array2::<f64>::zeros((n_times, sites)); sources.len()];
    for up in 0..=sites / 2 {
        let sector = Sector::new(sites, up);
        let traces = sector_traces(chain, &sector, sources, times)?;
        for (total, trace) in totals.iter_mut().zip(&traces) {
            total.scaled_add(sector.flip_weight(), trace);
        }
    }
    let norm = 1.0 / (1u64 << sites) as f64;
    for total in &mut totals {
        total.mapv_inplace(|v| v * norm);
    }
    Ok(totals)
}

/// Tr_sector[σᶻ_i(t) σᶻ_j] for all sites i, sources j and times: one
/// `[time, site]` array per source.
fn sector_traces(
    chain: &SpinChain,
    sector: &Sector,
    sources: &[usize],
    times: &[f64],
) -> Result<Vec<Array2<f64>>, SpinChainError> {
    let n_times = times.len();
    let d = sector.dim();
    let eigen = symmetric_eigen(&chain.dense_sector_hamiltonian(sector))?;
    // Columns 0..T hold cos(λ_m t), columns T..2T hold sin(λ_m t).
    let phases = Array2::from_shape_fn((d, 2 * n_times), |(m, c)| {
        let lambda = eigen.values[m];
        if c < n_times {
            (lambda * times[c]).cos()
        } else {
            (lambda * times[c - n_times]).sin()
        }
    });
    let matrix_bytes = 8 * d * d;
    let group_size = (SOURCE_BUFFER_BUDGET / matrix_bytes.max(1)).clamp(1, sources.len().max(1));
    let per_task_bytes = 8 * (2 * d * d + d * sector.dim_with_up() + 4 * d * n_times);
    let concurrent =
        (WORK_BUFFER_BUDGET / per_task_bytes.max(1)).clamp(1, rayon::current_num_threads().max(1));
    let site_list: Vec<usize> = (0..sector.sites).collect();
    let mut traces = vec![Array2::<f64>::zeros((n_times, sector.sites)); sources.len()];
    for (group_index, group) in sources.chunks(group_size).enumerate() {
        let stored: Vec<Array2<f64>> = group
            .par_iter()
            .map(|&source| site_in_eigenbasis(&eigen.vectors, sector, source))
            .collect();
        for chunk in site_list.chunks(concurrent) {
            let columns: Vec<(usize, Vec<Array1<f64>>)> = chunk
                .par_iter()
                .map(|&site| {
                    // A site that is also a source of this group reuses
                    // its stored matrix.
                    let own;
                    let a_site = match group.iter().position(|&s| s == site) {
                        Some(k) => &stored[k],
                        None => {
                            own = site_in_eigenbasis(&eigen.vectors, sector, site);
                            &own
                        }
                    };
                    let per_source = stored
                        .iter()
                        .map(|a_source| {
                            let weighted = (a_site * a_source).dot(&phases);
                            Array1::from_shape_fn(n_times, |c| {
                                let cos_part = phases.column(c).dot(&weighted.column(c));
                                let sin_part = phases
                                    .column(c + n_times)
                                    .dot(&weighted.column(c + n_times));
                                cos_part + sin_part
                            })
                        })
                        .collect();
                    (site, per_source)
                })
                .collect();
            for (site, per_source) in columns {
                for (k, column) in per_source.into_iter().enumerate() {
                    traces[group_index * group_size + k]
                        .column_mut(site)
                        .assign(&column);
                }
            }
        }
    }
    Ok(traces)
}

/// A_i = Vᵀ σᶻ_i V = 2 V_iᵀ V_i − 1, with V_i the rows of the eigenvector
/// matrix whose basis word has spin `site` up.
fn site_in_eigenbasis(vectors: &Array2<f64>, sector: &Sector, site: usize) -> Array2<f64> {
    let d = sector.dim();
    let rows: Vec<usize> = sector
        .states
        .iter()
        .enumerate()
        .filter(|(_, s)| (**s >> site) & 1 == 1)
        .map(|(a, _)| a)
        .collect();
    let mut a = if rows.is_empty() {
        Array2::zeros((d, d))
    } else {
        let up_rows = vectors.select(Axis(0), &rows);
        let mut gram = up_rows.t().dot(&up_rows);
        gram.mapv_inplace(|v| 2.0 * v);
        gram
    };
    for m in 0..d {
        a[(m, m)] -= 1.0;
    }
    a
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::couplings::Couplings;
    use crate::numerics::linalg::symmetric_eigen;
    use ndarray::Array2;
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    /// |[exp(−i h t)]_ij|² for a real symmetric single-particle hopping
    /// matrix h, from its own eigendecomposition h = W diag(ε) Wᵀ: the
    /// Jordan–Wigner free-fermion result for nearest-neighbour flip-flop
    /// chains (physics notes, "Free fermions"). A separate computation from the
    /// many-body one: N × N instead of 2^N.
    fn free_fermion_propagator_squared(hopping: &Array2<f64>, t: f64) -> Array2<f64> {
        let eig = symmetric_eigen(hopping).expect("converges");
        let n = hopping.nrows();
        Array2::from_shape_fn((n, n), |(i, j)| {
            let (mut re, mut im) = (0.0, 0.0);
            for (m, &eps) in eig.values.iter().enumerate() {
                let w = eig.vectors[(i, m)] * eig.vectors[(j, m)];
                re += w * (eps * t).cos();
                im -= w * (eps * t).sin();
            }
            re * re + im * im
        })
    }

    #[test]
    fn two_sites_oscillate_as_cos_and_sin_squared() {
        // the physics notes "Two sites": C_11 = cos²(Jt), C_12 = sin²(Jt); the Ising
        // term shifts both one-up states equally, so Δ does not enter
        // (derivable from the 2 × 2 sector Hamiltonian).
        let j = 0.7;
        let times = [0.0, 0.3, 1.0, 2.2, 7.5];
        for delta in [0.0, 1.3] {
            let chain = SpinChain::new(&Couplings::power_law(2, j, 1.0).unwrap(), delta).unwrap();
            let c = chain.correlations_exact(0, &times).expect("computes");
            for (ti, &t) in times.iter().enumerate() {
                assert!(
                    (c[(ti, 0)] - (j * t).cos().powi(2)).abs() < 1e-14,
                    "C_11 at t = {t}"
                );
                assert!(
                    (c[(ti, 1)] - (j * t).sin().powi(2)).abs() < 1e-14,
                    "C_12 at t = {t}"
                );
            }
        }
    }

    #[test]
    fn nearest_neighbour_xy_equals_free_fermions() {
        // Jordan–Wigner is exact for nearest-neighbour flip-flop chains with
        // any (here random, seeded) bond strengths: C_ij(t) = |[e^{−iht}]_ij|²
        // (physics notes, "Free fermions").
        let mut rng = ChaCha8Rng::seed_from_u64(11);
        for sites in [8usize, 10, 12] {
            let mut hopping = Array2::<f64>::zeros((sites, sites));
            for i in 0..sites - 1 {
                let bond = 0.5 + rng.random::<f64>();
                hopping[(i, i + 1)] = bond;
                hopping[(i + 1, i)] = bond;
            }
            let chain = SpinChain::new(&Couplings::from_matrix(hopping.clone()).unwrap(), 0.0)
                .expect("valid");
            let times = [0.0, 0.4, 1.7, 3.1, 9.0];
            let sources = [0, sites / 2 - 1];
            let all = chain
                .correlations_exact_many(&sources, &times)
                .expect("computes");
            for (&source, c) in sources.iter().zip(&all) {
                for (ti, &t) in times.iter().enumerate() {
                    let u2 = free_fermion_propagator_squared(&hopping, t);
                    for i in 0..sites {
                        let diff = (c[(ti, i)] - u2[(i, source)]).abs();
                        assert!(
                            diff < 1e-10,
                            "N = {sites}, j = {source}, i = {i}, t = {t}: {diff}"
                        );
                    }
                }
            }
        }
    }

    #[test]
    fn bulk_of_a_uniform_chain_follows_bessel_squares_at_short_times() {
        // Infinite uniform chain: C(n, t) = J_n(2Jt)² (physics notes; A&S 9.1).
        // On the open chain of N sites the method of images (eigenfunctions
        // sin(k(i+1)), k = πm/(N+1)) writes U_ij as J_{i−j}(2Jt) up to a phase
        // minus image terms of orders i+j+2, 2N−i−j and 2(N+1)−|i−j|, so
        // |C_ij − J_n²| ≤ 2|J_n| S + S² with S the sum of the image moduli
        // (derivable). The bound is evaluated with puruspe and doubled for
        // the images further out.
        let (j, sites, source) = (1.0, 12usize, 5usize);
        let chain = SpinChain::new(&Couplings::power_law(sites, j, f64::INFINITY).unwrap(), 0.0)
            .expect("valid");
        let times = [0.25, 0.5, 0.75, 1.0, 1.5];
        let c = chain.correlations_exact(source, &times).expect("computes");
        let bessel = |order: usize, x: f64| puruspe::Jn(order as u32, x);
        for (ti, &t) in times.iter().enumerate() {
            let x = 2.0 * j * t;
            for i in 2..=8usize {
                let n = i.abs_diff(source);
                let images = bessel(i + source + 2, x).abs()
                    + bessel(2 * sites - i - source, x).abs()
                    + bessel(2 * (sites + 1) - n, x).abs();
                let direct = bessel(n, x);
                let bound = 2.0 * (2.0 * direct.abs() * images + images * images) + 1e-14;
                let diff = (c[(ti, i)] - direct * direct).abs();
                assert!(diff <= bound, "i = {i}, t = {t}: {diff} > {bound}");
            }
        }
    }

    #[test]
    fn sum_rule_and_symmetries_hold_for_power_law_xxz() {
        // Σ_i C_ij = 1 (U(1) symmetry), C_ij = C_ji, and C_ij = C_{N−1−i,N−1−j}
        // for a uniform open chain (physics notes, "Transport classes").
        let sites = 10;
        let chain =
            SpinChain::new(&Couplings::power_law(sites, 1.0, 1.2).unwrap(), 0.6).expect("valid");
        let times = [0.0, 0.8, 2.5, 6.0];
        let sources: Vec<usize> = (0..sites).collect();
        let columns = chain
            .correlations_exact_many(&sources, &times)
            .expect("computes");
        // The one-source entry point gives the same numbers.
        let single = chain.correlations_exact(7, &times).expect("computes");
        assert!((&single - &columns[7]).iter().all(|d| d.abs() < 1e-14));
        for (ti, _) in times.iter().enumerate() {
            for j in 0..sites {
                let sum: f64 = columns[j].row(ti).sum();
                assert!((sum - 1.0).abs() < 1e-12, "sum rule, j = {j}: {sum}");
                for i in 0..sites {
                    let c_ij = columns[j][(ti, i)];
                    assert!((c_ij - columns[i][(ti, j)]).abs() < 1e-12, "C_ij = C_ji");
                    let mirrored = columns[sites - 1 - j][(ti, sites - 1 - i)];
                    assert!((c_ij - mirrored).abs() < 1e-12, "reflection");
                }
            }
        }
    }

    #[test]
    fn short_times_follow_the_t_squared_law_for_power_law_couplings() {
        // C_ii = 1 − t² Σ_b J_ib² + O(t⁴), C_ij = t² J_ij² + O(t⁴), independent
        // of Δ (physics notes, "Short-time expansion", nested commutators). At
        // t = 1e-3 the t⁴ term is ~1e-12 relative to the t² term's 1e-6.
        let sites = 9;
        let couplings = Couplings::power_law(sites, 1.0, 1.5).unwrap();
        let chain = SpinChain::new(&couplings, 0.8).expect("valid");
        let t = 1e-3;
        for source in [0, 4] {
            let c = chain.correlations_exact(source, &[t]).expect("computes");
            let rate: f64 = (0..sites).map(|b| couplings.get(source, b).powi(2)).sum();
            let leading = (1.0 - c[(0, source)]) / (t * t);
            assert!((leading - rate).abs() < 1e-5 * rate, "{leading} vs {rate}");
            for i in (0..sites).filter(|&i| i != source) {
                let expected = t * t * couplings.get(i, source).powi(2);
                assert!((c[(0, i)] - expected).abs() < 1e-5 * expected, "i = {i}");
            }
        }
    }

    /// (sites, α, Δ, source, [(t, C_{i,source}(t) for every i)]).
    type FixtureCase = (usize, f64, f64, usize, &'static [(f64, &'static [f64])]);

    #[test]
    fn interacting_chains_match_a_kronecker_product_reference() {
        // Fixture: scipy 1.17.1 / numpy 2.4.6, full 2^N Hamiltonian built from
        // Kronecker products of Pauli matrices ((σˣσˣ + σʸσʸ)/2 per pair) and
        // diagonalised densely with scipy.linalg.eigh; produced by
        // `python3 tests/reference/bench_scipy_spin_chain.py --fixture`.
        let cases: [FixtureCase; 2] = [
            (
                6,
                1.0,
                1.0,
                2,
                &[
                    (
                        0.5,
                        &[
                            0.06333091214540756,
                            0.17503086298329132,
                            0.49977536691603475,
                            0.17180073945886187,
                            0.06020524813777599,
                            0.029856870358628378,
                        ],
                    ),
                    (
                        1.0,
                        &[
                            0.21201060896515153,
                            0.215924333414624,
                            0.07476724761140374,
                            0.1992000073347552,
                            0.1720008236210609,
                            0.12609697905300435,
                        ],
                    ),
                    (
                        2.5,
                        &[
                            0.09506839018685943,
                            0.1909800417680783,
                            0.18941547285845145,
                            0.2110666830512405,
                            0.22194481571350602,
                            0.091524596421864,
                        ],
                    ),
                ],
            ),
            (
                5,
                1.5,
                -0.6,
                0,
                &[
                    (
                        0.7,
                        &[
                            0.5569754796195816,
                            0.34178162550277597,
                            0.07225913748271998,
                            0.020225090657673132,
                            0.008758666737249125,
                        ],
                    ),
                    (
                        3.0,
                        &[
                            0.3064662043745928,
                            0.27089859869732436,
                            0.25423931877694816,
                            0.1105852141176368,
                            0.05781066403349775,
                        ],
                    ),
                ],
            ),
        ];
        for (sites, alpha, delta, source, rows) in cases {
            let chain = SpinChain::new(&Couplings::power_law(sites, 1.0, alpha).unwrap(), delta)
                .expect("valid");
            let times: Vec<f64> = rows.iter().map(|(t, _)| *t).collect();
            let c = chain.correlations_exact(source, &times).expect("computes");
            for (ti, (t, expected)) in rows.iter().enumerate() {
                for (i, &value) in expected.iter().enumerate() {
                    let diff = (c[(ti, i)] - value).abs();
                    assert!(diff < 1e-12, "N = {sites}, t = {t}, i = {i}: {diff}");
                }
            }
        }
    }

    #[test]
    fn heisenberg_chain_keeps_the_sum_rule() {
        // Δ = 1 (isotropic) still conserves Σ_i σᶻ_i, hence Σ_i C_ij = 1
        // (common practice, no source).
        let chain = SpinChain::new(&Couplings::power_law(9, 1.0, f64::INFINITY).unwrap(), 1.0)
            .expect("valid");
        let c = chain
            .correlations_exact(3, &[0.5, 3.0, 12.0])
            .expect("computes");
        for row in c.rows() {
            assert!((row.sum() - 1.0).abs() < 1e-12);
        }
    }

    #[test]
    fn ising_only_chain_does_not_move_magnetisation() {
        // No flip-flop term: H is diagonal in the σᶻ basis, so σᶻ_i(t) = σᶻ_i
        // and C_ij(t) = δ_ij at all times (common practice, no source).
        let sites = 7;
        let none = Couplings::from_matrix(Array2::zeros((sites, sites))).unwrap();
        let ising = Couplings::power_law(sites, 1.3, 1.0).unwrap();
        let chain = SpinChain::with_ising(&none, &ising).expect("valid");
        let c = chain
            .correlations_exact(2, &[0.0, 1.0, 50.0])
            .expect("computes");
        for row in c.rows() {
            for (i, &v) in row.iter().enumerate() {
                let expected = if i == 2 { 1.0 } else { 0.0 };
                assert!((v - expected).abs() < 1e-14);
            }
        }
    }

    #[test]
    fn refuses_chains_beyond_the_exact_limit_and_points_to_typicality() {
        let chain = SpinChain::new(&Couplings::power_law(15, 1.0, 1.0).unwrap(), 0.0).unwrap();
        let err = chain.correlations_exact(0, &[1.0]).expect_err("too large");
        assert!(matches!(
            err,
            SpinChainError::TooLargeForExact { sites: 15, .. }
        ));
        assert!(err.to_string().contains("typicality"));
    }
}
