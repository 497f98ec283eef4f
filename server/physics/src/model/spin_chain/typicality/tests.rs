use super::*;
use crate::model::couplings::Couplings;
use crate::tolerance::close;
use std::sync::Mutex;

fn chain(sites: usize, alpha: f64, delta: f64) -> SpinChain {
    SpinChain::new(&Couplings::power_law(sites, 1.0, alpha).unwrap(), delta).unwrap()
}

#[test]
fn two_table_index_matches_the_combinatorial_rank() {
    // The look-up tables against the rank computed bit by bit (the
    // combinatorial number system of `Sector`), and H x built without a
    // matrix against the dense sector Hamiltonian times x.
    // Power-law couplings use every pair; nearest neighbours leave most
    // of the block tables empty.
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
        for (index, &state) in sector.states.iter().enumerate() {
            assert_eq!(operator.index_of(state), index);
        }
        let mut rng = ChaCha8Rng::seed_from_u64(3);
        let x: Vec<Amp> = (0..sector.dim()).map(|_| gaussian(&mut rng)).collect();
        let mut y = vec![Amp::default(); sector.dim()];
        operator.apply(&x, &mut y, None);
        let dense = spin_chain.dense_sector_hamiltonian(&sector);
        for (a, out) in y.iter().enumerate() {
            let re: f64 = (0..sector.dim()).map(|b| dense[(a, b)] * x[b].re).sum();
            let im: f64 = (0..sector.dim()).map(|b| dense[(a, b)] * x[b].im).sum();
            assert!(close(out.re, re, 1e-12, 1e-12) && close(out.im, im, 1e-12, 1e-12));
        }
    }
}

#[test]
fn lanczos_propagation_matches_the_eigendecomposition() {
    // The Krylov propagator against e^{−iHt} = V e^{−iΛt} Vᵀ from a dense
    // eigendecomposition of the same sector (a different algorithm); a
    // small Krylov dimension forces several restarts per output time.
    let spin_chain = chain(10, 1.0, 0.5);
    let sector = Sector::new(10, 5);
    let operator = SectorOperator::build(&spin_chain, &sector);
    let eigen = symmetric_eigen(&spin_chain.dense_sector_hamiltonian(&sector)).unwrap();
    let mut rng = ChaCha8Rng::seed_from_u64(5);
    let start: Vec<Amp> = (0..sector.dim()).map(|_| gaussian(&mut rng)).collect();
    let times = [0.0, 0.3, 1.7, 4.0, 9.5];
    let never = AtomicBool::new(false);
    for max_dim in [12, 64, MAX_KRYLOV_DIM] {
        let propagator = Propagator {
            operator: &operator,
            max_dim,
            tolerance: 1e-12,
            cancel: &never,
        };
        let mut worst = 0.0f64;
        let (bound, _) = propagator
            .run(start.clone(), &times, |indices, outputs| {
                for (l, &k) in indices.iter().enumerate() {
                    let psi = outputs.state(l);
                    let t = times[k];
                    let v = &eigen.vectors;
                    // Coefficients in the eigenbasis, rotated by e^{−iλt}.
                    let mut exact = vec![Amp::default(); psi.len()];
                    for (m, &lambda) in eigen.values.iter().enumerate() {
                        let (mut re, mut im) = (0.0, 0.0);
                        for (a, s) in start.iter().enumerate() {
                            re += v[(a, m)] * s.re;
                            im += v[(a, m)] * s.im;
                        }
                        let (sin, cos) = (lambda * t).sin_cos();
                        let (cr, ci) = (re * cos + im * sin, im * cos - re * sin);
                        for (a, e) in exact.iter_mut().enumerate() {
                            e.re += v[(a, m)] * cr;
                            e.im += v[(a, m)] * ci;
                        }
                    }
                    let diff: f64 = psi
                        .iter()
                        .zip(&exact)
                        .map(|(p, e)| (p.re - e.re).powi(2) + (p.im - e.im).powi(2))
                        .sum::<f64>()
                        .sqrt();
                    worst = worst.max(diff / norm(&start));
                }
            })
            .unwrap();
        assert!(worst < 1e-10, "max_dim {max_dim}: relative error {worst}");
        assert!(bound < 1e-10, "max_dim {max_dim}: estimated {bound}");
    }
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
    // N = 20 needs at least 27 Krylov-sized vectors of the central
    // sector (184756 amplitudes × 16 bytes each, 80 MB): a 64 MiB limit
    // is refused before any work.
    let mut tight = TypicalityOptions::new(2, 0);
    tight.memory_limit_bytes = 64 << 20;
    let err = chain(20, 1.0, 0.0)
        .correlations_typical_with(10, &[1.0], &tight, &|_| {}, &never)
        .expect_err("over the limit");
    assert!(matches!(err, SpinChainError::MemoryLimit { sites: 20, .. }));
    assert!(err.to_string().contains("memory limit"));
    // The default plan of 20 sites stays within 300 MB with one vector
    // in flight; 24 sites fit in 3 GB with a 64-dimensional space, in the
    // default 2 GiB with a shorter one.
    let plan = memory_plan(&chain(20, 1.0, 0.0), 2, 50, DEFAULT_MEMORY_LIMIT_BYTES).unwrap();
    assert!(
        plan.bytes <= 300_000_000 && plan.krylov_dim >= 60,
        "{plan:?}"
    );
    assert_eq!(plan.concurrent_samples, 1);
    let plan = memory_plan(&chain(24, 1.0, 0.0), 2, 50, 3_000_000_000).unwrap();
    assert!(
        plan.bytes <= 3_000_000_000 && plan.krylov_dim == 64,
        "{plan:?}"
    );
    let plan = memory_plan(&chain(24, 1.0, 0.0), 2, 50, DEFAULT_MEMORY_LIMIT_BYTES).unwrap();
    assert!(
        plan.bytes <= DEFAULT_MEMORY_LIMIT_BYTES && (40..64).contains(&plan.krylov_dim),
        "{plan:?}"
    );
    let refused = memory_plan(&chain(24, 1.0, 0.0), 2, 50, 1 << 30).expect_err("too big");
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
