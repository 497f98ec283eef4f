use super::*;
use crate::model::lattice_walk::LatticeWalk;
use crate::numerics::stats::{seeded_rng, standard_normal};
use crate::testing::log_times;
use crate::tolerance::close;

fn noisy_walk_map(
    sites: usize,
    source: usize,
    gamma0: f64,
    alpha: f64,
    times: &[f64],
    noise: f64,
    seed: u64,
) -> CorrelationMap {
    let walk = LatticeWalk::power_law(sites, gamma0, alpha).expect("valid walk");
    let exact = walk.propagate(source, times).expect("propagates");
    let mut rng = seeded_rng(seed);
    let values = exact.mapv(|c| c + noise * standard_normal(&mut rng));
    let errors = Array2::from_elem(values.dim(), noise);
    let offsets = (0..sites).map(|i| i as i32 - source as i32).collect();
    CorrelationMap::complete(offsets, times.to_vec(), values, Some(errors)).expect("valid map")
}

/// The analytic Jacobian of `problem` at `params` against central
/// differences of its residuals, which are accurate to ~h²·P‴ ≈ 1e-7 of the
/// residual scale (1/σ = 1e3) with h = 1e-5 of each parameter.
fn assert_jacobian_matches_differences(problem: &WalkProblem, params: [f64; 2], case: &str) {
    let m = problem.y.len();
    let mut jac = vec![0.0; 2 * m];
    assert!(problem.jacobian(&params, &mut jac));
    for j in 0..2 {
        let h = 1e-5 * params[j];
        let (mut up, mut down) = (params, params);
        up[j] += h;
        down[j] -= h;
        let (mut r_up, mut r_down) = (vec![0.0; m], vec![0.0; m]);
        problem.residuals(&up, &mut r_up);
        problem.residuals(&down, &mut r_down);
        for k in 0..m {
            let numeric = (r_up[k] - r_down[k]) / (2.0 * h);
            let analytic = jac[2 * k + j];
            assert!(
                close(analytic, numeric, 1e-6, 1e-4),
                "{case}, param {j}, point {k}: analytic {analytic} vs numeric {numeric}"
            );
        }
    }
}

#[test]
fn model_matches_the_lattice_walk_model_and_derivatives_match_differences() {
    // The fit's own propagation must reproduce `LatticeWalk::propagate`
    // (an independent construction of the same walk), and the analytic
    // Jacobian must agree with central differences of the residuals.
    let (sites, source, gamma0, alpha) = (15, 4, 0.7, 1.1);
    let times = [0.0, 0.3, 1.0, 2.5, 6.0];
    let map = noisy_walk_map(sites, source, gamma0, alpha, &times, 1e-3, 1);
    let problem = build_problem(&map, sites, SourceAverage::single(source)).expect("valid");
    let sp = problem.spectrum(alpha).expect("eigen");
    let reference = LatticeWalk::power_law(sites, gamma0, alpha)
        .expect("walk")
        .propagate(source, &times)
        .expect("propagates");
    let (mut p, mut scratch) = (vec![0.0; sites], vec![0.0; sites]);
    for (ti, &t) in times.iter().enumerate() {
        problem.propagate(&sp, gamma0, t, &mut p, &mut scratch);
        for i in 0..sites {
            assert!(
                (p[i] - reference[(ti, i)]).abs() < 1e-13,
                "t = {t}, i = {i}: {} vs {}",
                p[i],
                reference[(ti, i)]
            );
        }
    }
    assert_jacobian_matches_differences(&problem, [gamma0, alpha], "single source");
}

/// The walk from every source of `average`, averaged per offset over the
/// sources that reach it and symmetrised when asked, built here from
/// `LatticeWalk::propagate` (not the fit's own propagation), plus seeded
/// noise.
fn noisy_averaged_walk_map(
    sites: usize,
    average: SourceAverage,
    truth: [f64; 2],
    times: &[f64],
    noise: f64,
    seed: u64,
) -> CorrelationMap {
    let walk = LatticeWalk::power_law(sites, truth[0], truth[1]).expect("valid walk");
    let from: Vec<Array2<f64>> = (average.first..=average.last)
        .map(|j| walk.propagate(j, times).expect("propagates"))
        .collect();
    let hi = (sites - 1 - average.first) as i32;
    let offsets: Vec<i32> = if average.symmetrised {
        let reach = (average.last as i32).min(hi);
        (-reach..=reach).collect()
    } else {
        (-(average.last as i32)..=hi).collect()
    };
    let mean_at = |ti: usize, x: i32| {
        let (mut sum, mut count) = (0.0, 0);
        for (q, j) in (average.first..=average.last).enumerate() {
            let i = j as i32 + x;
            if (0..sites as i32).contains(&i) {
                sum += from[q][(ti, i as usize)];
                count += 1;
            }
        }
        sum / f64::from(count)
    };
    let mut rng = seeded_rng(seed);
    let values = Array2::from_shape_fn((times.len(), offsets.len()), |(ti, xi)| {
        let x = offsets[xi];
        let exact = if average.symmetrised {
            0.5 * (mean_at(ti, x) + mean_at(ti, -x))
        } else {
            mean_at(ti, x)
        };
        exact + noise * standard_normal(&mut rng)
    });
    let errors = Array2::from_elem(values.dim(), noise.max(1e-12));
    CorrelationMap::complete(offsets, times.to_vec(), values, Some(errors)).expect("valid map")
}

#[test]
fn averaged_model_matches_the_walk_averaged_by_hand_and_derivatives_match_differences_self_consistent()
 {
    // Self-consistent only in the averaging, which the helper above does
    // independently of the fit's terms; the walk itself comes from
    // `LatticeWalk::propagate`.
    let (sites, truth) = (13, [0.7, 1.1]);
    let times = [0.0, 0.4, 1.5, 4.0, 9.0];
    for symmetrised in [false, true] {
        let average = SourceAverage {
            first: 3,
            last: 8,
            symmetrised,
        };
        let exact = noisy_averaged_walk_map(sites, average, truth, &times, 0.0, 1);
        let problem = build_problem(&exact, sites, average).expect("valid");
        let mut r = vec![0.0; problem.y.len()];
        problem.residuals(&truth, &mut r);
        // Residuals are divided by the 1e-12 floor of the errors.
        let worst = r.iter().fold(0.0f64, |w, v| w.max(v.abs())) * 1e-12;
        assert!(worst < 1e-13, "symmetrised {symmetrised}: {worst}");
        let map = noisy_averaged_walk_map(sites, average, truth, &times, 1e-3, 2);
        let problem = build_problem(&map, sites, average).expect("valid");
        assert_jacobian_matches_differences(&problem, truth, &format!("symmetrised {symmetrised}"));
    }
}

#[test]
fn a_bulk_averaged_map_is_fitted_with_its_window_and_its_errors_cover_the_truth() {
    // Sources 3..=7 of 11 sites, symmetrised, to late times where every
    // source feels the ends: the window model covers (γ0, α) = (1, 0.9)
    // in 56–80 % of 100 seeds (±2.5 binomial σ around 68.27 %, A&S
    // 26.2), while the single centre source fitted to the same maps
    // (|x| ≤ 5, all it reaches) is biased: its mean pull over 10 seeds
    // is 1.7, where an unbiased fit gives 0 ± 0.32.
    let (sites, truth) = (11, [1.0, 0.9]);
    let average = SourceAverage {
        first: 3,
        last: 7,
        symmetrised: true,
    };
    let times = log_times(0.3, 8.0, 7);
    let (mut covered, mut pulls_single) = (0, Vec::new());
    let seeds = 100;
    for seed in 0..seeds {
        let map = noisy_averaged_walk_map(sites, average, truth, &times, 5e-3, 500 + seed);
        let r =
            fit_lattice_walk(&map, &LatticeWalkFitOptions::averaged(sites, average)).expect("fits");
        assert_eq!(r.average, Some(average));
        if (r.alpha - truth[1]).abs() <= r.alpha_err {
            covered += 1;
        }
        if seed < 10 {
            // The centre source reaches |x| ≤ 5 only.
            let inner = map.window(None, None, Some(5)).expect("window");
            let single =
                fit_lattice_walk(&inner, &LatticeWalkFitOptions::new(sites, 5)).expect("fits");
            pulls_single.push((single.alpha - truth[1]) / single.alpha_err);
        }
    }
    let fraction = f64::from(covered) / seeds as f64;
    assert!((0.56..=0.80).contains(&fraction), "coverage {fraction}");
    let mean_pull = pulls_single.iter().sum::<f64>() / pulls_single.len() as f64;
    assert!(mean_pull.abs() > 1.0, "single-source pull {mean_pull}");
}

#[test]
fn a_source_window_outside_the_chain_is_refused() {
    let times = [0.5, 1.0, 2.0];
    let map = noisy_walk_map(9, 4, 1.0, 1.0, &times, 1e-3, 3);
    let bad = SourceAverage {
        first: 5,
        last: 9,
        symmetrised: false,
    };
    let err = fit_lattice_walk(&map, &LatticeWalkFitOptions::averaged(9, bad)).unwrap_err();
    assert!(matches!(err, LatticeWalkFitError::BadSourceWindow { .. }));
    assert!(err.to_string().contains("5..=9"), "{err}");
}

#[test]
fn recovers_gamma0_and_alpha_from_noisy_walk_data() {
    // Truth (γ0, α) = (0.8, 1.2) put into the walk; seeded Gaussian noise
    // of 2e-3. The one-sigma errors must be small and the estimates
    // within 2.5 of them (a 1.2 % two-sided chance for a correct error).
    let (sites, source) = (31, 15);
    let times = log_times(0.1, 20.0, 15);
    let map = noisy_walk_map(sites, source, 0.8, 1.2, &times, 2e-3, 7);
    let report = fit_lattice_walk(&map, &LatticeWalkFitOptions::new(sites, source)).expect("fits");
    assert!(report.termination.is_converged(), "{report:?}");
    assert!(
        report.alpha_err < 0.02 && report.gamma0_err < 0.02,
        "{report:?}"
    );
    assert!(
        (report.alpha - 1.2).abs() < 2.5 * report.alpha_err,
        "{report:?}"
    );
    assert!(
        (report.gamma0 - 0.8).abs() < 2.5 * report.gamma0_err,
        "{report:?}"
    );
    // z = 2α − 1 = 1.4 for α < 3/2 (physics notes, "Classical lattice walk").
    assert!(close(report.z, 2.0 * report.alpha - 1.0, 1e-15, 0.0));
    assert!(report.chi2_dof > 0.7 && report.chi2_dof < 1.3, "{report:?}");
    assert!(report.eigendecompositions < 60, "{report:?}");
}

#[test]
fn one_sigma_interval_of_alpha_covers_the_truth_about_68_percent() {
    // Coverage over 200 seeds of small maps (11 sites, 6 times). The
    // nominal one-sigma probability is 68.27 % (A&S 26.2); with 200
    // seeds the binomial standard deviation is 3.3 %, so 60–76 % is a
    // ±2.4σ band.
    let (sites, source) = (11, 5);
    let times = log_times(0.2, 4.0, 6);
    let (gamma0, alpha) = (1.0, 0.9);
    let seeds = 200;
    let mut covered = 0;
    for seed in 0..seeds {
        let map = noisy_walk_map(sites, source, gamma0, alpha, &times, 5e-3, 1000 + seed);
        let r = fit_lattice_walk(&map, &LatticeWalkFitOptions::new(sites, source)).expect("fits");
        if (r.alpha - alpha).abs() <= r.alpha_err {
            covered += 1;
        }
    }
    let fraction = f64::from(covered) / seeds as f64;
    assert!((0.60..=0.76).contains(&fraction), "coverage {fraction}");
}

#[test]
fn fit_agrees_with_scipy_expm_curve_fit() {
    // scipy 1.17.1, numpy 2.4.6: expm + curve_fit (absolute_sigma);
    // tests/reference/lattice_walk_fit_reference.py
    const SCIPY_GAMMA0: f64 = 0.8785188619630269;
    const SCIPY_GAMMA0_ERR: f64 = 0.021876208470490863;
    const SCIPY_ALPHA: f64 = 1.082482075432329;
    const SCIPY_ALPHA_ERR: f64 = 0.018372958944079823;
    const SCIPY_CHI2: f64 = 6.568965307481971;
    // The script's deterministic map: the walk at (0.9, 1.1) from source
    // 3 of 9 sites times 1 + 0.02 sin(2.3i + 1.7t), errors 0.001 + 0.02P.
    let (sites, source) = (9, 3);
    let times = [0.5, 1.0, 2.0, 4.0];
    let exact = LatticeWalk::power_law(sites, 0.9, 1.1)
        .expect("walk")
        .propagate(source, &times)
        .expect("propagates");
    let values = Array2::from_shape_fn(exact.dim(), |(k, i)| {
        exact[(k, i)] * (1.0 + 0.02 * (2.3 * i as f64 + 1.7 * times[k]).sin())
    });
    let errors = values.mapv(|p: f64| 0.001 + 0.02 * p.abs());
    let offsets = (0..sites).map(|i| i as i32 - source as i32).collect();
    let map = CorrelationMap::complete(offsets, times.to_vec(), values, Some(errors)).expect("map");
    let r = fit_lattice_walk(&map, &LatticeWalkFitOptions::new(sites, source)).expect("fits");
    // Both minimise the same χ²: parameters and χ² to 1e-7, errors to
    // 1e-5 (scipy's finite-difference Jacobian).
    let agree = |ours: f64, theirs: f64, rel: f64| {
        assert!(close(ours, theirs, rel, 0.0), "{ours} vs scipy {theirs}");
    };
    agree(r.gamma0, SCIPY_GAMMA0, 1e-7);
    agree(r.alpha, SCIPY_ALPHA, 1e-7);
    agree(r.chi2, SCIPY_CHI2, 1e-7);
    agree(r.gamma0_err, SCIPY_GAMMA0_ERR, 1e-5);
    agree(r.alpha_err, SCIPY_ALPHA_ERR, 1e-5);
}

#[test]
fn offsets_outside_the_chain_are_refused_with_their_place() {
    let map = noisy_walk_map(9, 4, 1.0, 1.0, &[0.5, 1.0, 2.0], 1e-3, 3);
    let err = fit_lattice_walk(&map, &LatticeWalkFitOptions::new(9, 2)).unwrap_err();
    assert!(
        matches!(
            err,
            LatticeWalkFitError::OffsetOutsideChain { offset: -4, .. }
        ),
        "{err}"
    );
    assert!(err.to_string().contains("x = -4"));
    assert!(fit_lattice_walk(&map, &LatticeWalkFitOptions::new(9, 9)).is_err());
}

mod start_tests {
    use super::*;
    use crate::model::couplings::Couplings;
    use crate::model::spin_chain::{SpinChain, to_correlation_map};
    use crate::numerics::stats::{seeded_rng, standard_normal};

    #[test]
    fn the_default_walk_window_skips_the_coherent_start() {
        // Exact dynamics of a 10-site flip-flop chain with couplings 1/r
        // (model::spin_chain, checked against brute-force 2^N evolution
        // there), seeded noise 0.02 as on a small experiment. The classical
        // walk is a late-time description (physics notes, "Lattice walk"):
        // fitted from t → 0 it absorbs the coherent t² decay.
        let n = 10;
        let times: Vec<f64> = (1..=60).map(|k| 0.1 * f64::from(k)).collect();
        let chain = SpinChain::new(&Couplings::power_law(n, 1.0, 1.0).expect("couplings"), 0.0)
            .expect("chain");
        let exact = chain.correlations_exact(4, &times).expect("exact");
        let mut rng = seeded_rng(4);
        let noisy = exact.mapv(|c| c + 0.02 * standard_normal(&mut rng));
        let errors = ndarray::Array2::from_elem(exact.dim(), 0.02);
        let map = to_correlation_map(&noisy, Some(&errors), 4, &times).expect("map");
        let start = walk_window_start(&map).expect("C(0,t) falls below 1/e");
        let all = fit_lattice_walk(&map, &LatticeWalkFitOptions::new(n, 4)).expect("fits");
        let late = fit_lattice_walk(
            &map.window(Some(start), None, None).expect("window"),
            &LatticeWalkFitOptions::new(n, 4),
        )
        .expect("fits");
        // Truth α = 1 (the chain's couplings).
        assert!((1.5..2.5).contains(&start), "start {start}");
        assert!(all.chi2_dof > 2.5, "{all:?}");
        assert!((late.alpha - 1.0).abs() < 2.0 * late.alpha_err, "{late:?}");
        assert!(late.chi2_dof < 2.0, "{late:?}");
    }
}
