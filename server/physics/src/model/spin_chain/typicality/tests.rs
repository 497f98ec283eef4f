use super::*;
use crate::model::couplings::Couplings;
use crate::tolerance::close;
use std::sync::Mutex;

fn chain(sites: usize, alpha: f64, delta: f64) -> SpinChain {
    SpinChain::new(&Couplings::power_law(sites, 1.0, alpha).unwrap(), delta).unwrap()
}

/// The sector operator's basis position of every word of `sector`.
fn positions(operator: &SectorOperator, sector: &Sector) -> Vec<usize> {
    let mut at = std::collections::HashMap::new();
    for (a, &word) in operator.states.iter().enumerate() {
        at.insert(word, a);
    }
    sector.states.iter().map(|w| at[w]).collect()
}

#[test]
fn panel_basis_and_lanes_match_the_dense_hamiltonian() {
    // The panel basis is a permutation of the sector, and s·(H − e)x − z
    // built without a matrix, for one and for two interleaved lanes,
    // equals the dense sector Hamiltonian (built term by term in the
    // sector's own order) applied to each lane. Power-law couplings use
    // every pair; nearest neighbours leave most of the tables empty.
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
        let at = positions(&operator, &sector);
        let mut sorted = operator.states.clone();
        sorted.sort_unstable();
        assert_eq!(sorted, sector.states, "{sites} sites, {up} up");
        let d = sector.dim();
        let mut rng = ChaCha8Rng::seed_from_u64(3);
        let mut normal = || standard_normal(&mut rng);
        let x: Vec<[f64; 3]> = (0..d).map(|_| [normal(), normal(), normal()]).collect();
        let z: Vec<[f64; 3]> = (0..d).map(|_| [normal(), normal(), normal()]).collect();
        let (scale, shift) = (0.7, -0.3);
        let mut y3 = vec![[0.0; 3]; d];
        let sums = operator.apply::<3>(&x, &mut y3, scale, shift, Some(&z));
        let dense = spin_chain.dense_sector_hamiltonian(&sector);
        for lane in 0..3 {
            let xl: Vec<[f64; 1]> = x.iter().map(|v| [v[lane]]).collect();
            let zl: Vec<[f64; 1]> = z.iter().map(|v| [v[lane]]).collect();
            let mut y1 = vec![[0.0]; d];
            let one = operator.apply::<1>(&xl, &mut y1, scale, shift, Some(&zl));
            // A lane alone gives the same bits as beside other lanes.
            assert_eq!(one[0], sums[lane]);
            for (a, out) in y1.iter().enumerate() {
                assert_eq!(out[0].to_bits(), y3[a][lane].to_bits());
            }
            for (i, &ai) in at.iter().enumerate() {
                let mut expect = 0.0;
                for (j, &aj) in at.iter().enumerate() {
                    let h = dense[(i, j)] - if i == j { shift } else { 0.0 };
                    expect += xl[aj][0] * h;
                }
                expect = expect * scale - zl[ai][0];
                let got = y1[ai][0];
                assert!(
                    close(got, expect, 1e-12, 1e-12),
                    "{sites} sites, {up} up, row {i}: {got} against {expect}"
                );
            }
        }
    }
}

#[test]
fn bessel_coefficients_match_scipy_and_their_tail_bound() {
    // J_n(x) behind the expansion coefficients, against scipy 1.17.1
    // `special.jv` (agreeing with mpmath 1.3 besselj at 30 digits to the
    // digits shown), including orders far beyond the argument.
    for (n, x, value) in [
        (0u32, 0.5, 0.938469807240813),
        (30, 25.0, 0.01180902612426896),
        (120, 100.0, 1.1476221795665094e-05),
        (250, 200.0, 2.501789099721087e-12),
        (5, 180.0, -0.01254934264299848),
    ] {
        let got = bessel_j(n, x);
        assert!(
            close(got, value, 1e-15, 1e-10),
            "J_{n}({x}) = {got}, scipy {value}"
        );
    }
    // The coefficients: J_0, then 2(−i)^n J_n; the cut keeps the tail bound
    // 2 Σ_{n>N} |J_n| below the tolerance, and Σ_n c_n = e^{−iθ} (T_n(1) = 1,
    // the Jacobi–Anger expansion at x = 1; common practice, no source).
    for theta in [0.0, 0.3, 7.5, 120.0] {
        let (c, tail) = coefficients(theta, 1e-10);
        assert!(tail <= 1e-10);
        assert!(c.len() as f64 >= theta, "θ = {theta}: {} terms", c.len());
        let sum: Amp = c.iter().sum();
        let expect = Amp::new(theta.cos(), -theta.sin());
        assert!((sum - expect).norm() < 1e-9, "θ = {theta}: Σ c_n = {sum}");
    }
}

#[test]
fn spectral_interval_encloses_the_exact_spectrum() {
    // The interval from the short Lanczos run against the eigenvalues of
    // the dense sector Hamiltonian (a different algorithm), and not wider
    // than needed by more than the margin and residuals allow.
    for (sites, up, alpha, delta) in [
        (12, 6, 1.2, 0.0),
        (12, 3, 0.8, -0.5),
        (13, 6, f64::INFINITY, 1.0),
        (10, 1, 1.5, 0.3),
        (12, 5, 3.0, 2.0),
        (11, 4, 0.5, -1.0),
        (4, 2, 1.0, 0.0),
    ] {
        let spin_chain = chain(sites, alpha, delta);
        let sector = Sector::new(sites, up);
        let operator = SectorOperator::build(&spin_chain, &sector);
        let range = spectrum(&operator, up).unwrap();
        let eigen = symmetric_eigen(&spin_chain.dense_sector_hamiltonian(&sector)).unwrap();
        let lo = eigen.values.iter().copied().fold(f64::INFINITY, f64::min);
        let hi = eigen
            .values
            .iter()
            .copied()
            .fold(f64::NEG_INFINITY, f64::max);
        assert!(range.center - range.half <= lo && hi <= range.center + range.half);
        assert!(
            2.0 * range.half <= 1.3 * (hi - lo),
            "{sites}/{up}: {range:?} for [{lo}, {hi}]"
        );
    }
}

#[test]
fn chebyshev_propagation_matches_the_eigendecomposition() {
    // The propagator against e^{−iHt} = V e^{−iΛt} Vᵀ from a dense
    // eigendecomposition of the same sector (a different algorithm), two
    // real lanes at once; one output state held at a time forces one
    // expansion per time, a short window many additions into the outputs. States are
    // compared up to the global phase e^{−iet} the expansion leaves out.
    let spin_chain = chain(10, 1.0, 0.5);
    let sector = Sector::new(10, 5);
    let operator = SectorOperator::build(&spin_chain, &sector);
    let at = positions(&operator, &sector);
    let d = sector.dim();
    let eigen = symmetric_eigen(&spin_chain.dense_sector_hamiltonian(&sector)).unwrap();
    let mut rng = ChaCha8Rng::seed_from_u64(5);
    let start: Vec<[f64; 2]> = (0..d)
        .map(|_| [standard_normal(&mut rng), standard_normal(&mut rng)])
        .collect();
    let times = [0.0, 0.3, 1.7, 4.0, 9.5];
    let never = AtomicBool::new(false);
    let range = spectrum(&operator, 5).unwrap();
    for (window, slots) in [(3, 1), (12, 64), (5, 2)] {
        let propagator = Propagator {
            operator: &operator,
            spectrum: range,
            up: 5,
            tolerance: 1e-12,
            window,
            slots,
            cancel: &never,
        };
        let mut worst = 0.0f64;
        let mut seen = 0;
        let outcome = propagator
            .run::<2>(
                &start,
                &propagator.expansions(&times),
                &mut |_| {},
                |indices, states| {
                    for (&k, psi) in indices.iter().zip(states) {
                        seen += 1;
                        let t = times[k];
                        let phase = Amp::from_polar(1.0, -range.center * t);
                        for lane in [0, 1] {
                            let v = &eigen.vectors;
                            let mut diff = 0.0;
                            let mut norm_sq = 0.0;
                            // Coefficients in the eigenbasis, rotated by e^{−iλt}.
                            let mut exact = vec![Amp::default(); d];
                            for (m, &lambda) in eigen.values.iter().enumerate() {
                                let mut c = Amp::default();
                                for (i, &ai) in at.iter().enumerate() {
                                    c += start[ai][lane] * v[(i, m)];
                                }
                                let c = c * Amp::from_polar(1.0, -lambda * t);
                                for (i, e) in exact.iter_mut().enumerate() {
                                    *e += c * v[(i, m)];
                                }
                            }
                            for (i, &ai) in at.iter().enumerate() {
                                diff += (psi.amp(ai, lane) * phase - exact[i]).norm_sqr();
                                norm_sq += exact[i].norm_sqr();
                            }
                            worst = worst.max((diff / norm_sq).sqrt());
                        }
                    }
                },
            )
            .unwrap();
        assert_eq!(seen, times.len());
        assert!(
            worst < 1e-10,
            "window {window}, slots {slots}: relative error {worst}"
        );
        assert!(
            outcome.error < 1e-10,
            "window {window}: bound {}",
            outcome.error
        );
    }
}

#[test]
fn a_spectrum_outside_the_interval_is_refused() {
    // A deliberately narrow interval: the growth check must stop the run
    // instead of returning a diverging series.
    let spin_chain = chain(8, 1.0, 0.0);
    let sector = Sector::new(8, 4);
    let operator = SectorOperator::build(&spin_chain, &sector);
    let mut range = spectrum(&operator, 4).unwrap();
    range.half *= 0.5;
    let never = AtomicBool::new(false);
    let propagator = Propagator {
        operator: &operator,
        spectrum: range,
        up: 4,
        tolerance: 1e-10,
        window: 12,
        slots: 4,
        cancel: &never,
    };
    let mut rng = ChaCha8Rng::seed_from_u64(9);
    let start: Vec<[f64; 1]> = (0..sector.dim())
        .map(|_| [standard_normal(&mut rng)])
        .collect();
    let outcome = propagator.run::<1>(
        &start,
        &propagator.expansions(&[1.0, 5.0]),
        &mut |_| {},
        |_, _| {},
    );
    assert!(
        matches!(outcome, Err(SpinChainError::SpectralBound { up: 4, .. })),
        "{outcome:?}"
    );
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
    let rms = |r: &TypicalityResult| ((&r.values - &exact).mapv(|d| d * d).mean().unwrap()).sqrt();
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
    // N = 20 needs at least four vectors of the central sector (three
    // Chebyshev terms and one output state, 184756 amplitudes × 16 bytes
    // each, 11.8 MB): an 8 MiB limit is refused before any work.
    let mut tight = TypicalityOptions::new(2, 0);
    tight.memory_limit_bytes = 8 << 20;
    let err = chain(20, 1.0, 0.0)
        .correlations_typical_with(10, &[1.0], &tight, &|_| {}, &never)
        .expect_err("over the limit");
    assert!(matches!(err, SpinChainError::MemoryLimit { sites: 20, .. }));
    assert!(err.to_string().contains("memory limit"));
    // The benchmark's plan (20 sites, 2 vectors, 20 times) stays within
    // 300 MB with both vectors together and every output state held; 24
    // sites hold two lanes in 3 GB and one in the default 2 GiB; with a
    // smaller limit fewer output states are held at once.
    let plan = memory_plan(&chain(20, 1.0, 0.0), 2, 20, DEFAULT_MEMORY_LIMIT_BYTES).unwrap();
    assert!(plan.bytes <= 300_000_000, "{plan:?}");
    assert_eq!((plan.lanes, plan.window, plan.slots), (2, WINDOW, 20));
    let plan = memory_plan(&chain(24, 1.0, 0.0), 2, 20, 3_000_000_000).unwrap();
    assert!(plan.bytes <= 3_000_000_000 && plan.lanes == 2, "{plan:?}");
    let plan = memory_plan(&chain(24, 1.0, 0.0), 2, 20, DEFAULT_MEMORY_LIMIT_BYTES).unwrap();
    assert!(
        plan.bytes <= DEFAULT_MEMORY_LIMIT_BYTES && (plan.lanes, plan.slots) == (1, 20),
        "{plan:?}"
    );
    let plan = memory_plan(&chain(24, 1.0, 0.0), 2, 20, 1 << 30).unwrap();
    assert!(
        plan.bytes <= 1 << 30 && plan.lanes == 1 && plan.slots < 20,
        "{plan:?}"
    );
    let refused = memory_plan(&chain(24, 1.0, 0.0), 2, 20, 128 << 20).expect_err("too big");
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
