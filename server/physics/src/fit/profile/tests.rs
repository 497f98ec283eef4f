use super::*;
use crate::numerics::stats::seeded_rng;
use crate::testing::{cauchy, gaussian};
use crate::tolerance::close;
use ndarray::Array2;

/// A complete map of `f` on offsets −x_max..=x_max at `times`, with
/// seeded noise of `noise` (absolute) plus `relative`·C on every point,
/// and those errors attached.
fn noisy_map(
    f: impl Fn(f64, f64) -> f64,
    x_max: i32,
    times: &[f64],
    noise: f64,
    relative: f64,
    seed: u64,
) -> CorrelationMap {
    let x: Vec<i32> = (-x_max..=x_max).collect();
    let exact = Array2::from_shape_fn((times.len(), x.len()), |(i, j)| {
        f(f64::from(x[j]), times[i])
    });
    let errors = exact.mapv(|c| noise + relative * c.abs());
    let mut rng = seeded_rng(seed);
    let values = Array2::from_shape_fn(exact.dim(), |ij| {
        exact[ij] + errors[ij] * standard_normal(&mut rng)
    });
    CorrelationMap::complete(x, times.to_vec(), values, Some(errors)).expect("valid map")
}

#[test]
fn a_free_fermion_map_never_panics_the_profile_fit() {
    // C = J_x(2t)² of the XX chain (a front, no stable law): in the
    // window t = 2–20 a trial step drove D → 0 and asked the density
    // table for an unbounded range ("capacity overflow"). The fit must
    // answer with a result or an error. Model: free fermions, exact.
    use crate::model::couplings::Couplings;
    use crate::model::free_fermion::FreeFermionChain;
    let sites = 121;
    let times = crate::testing::log_times(1.0, 20.0, 25);
    let h = Array2::from_shape_fn(
        (sites, sites),
        |(i, j)| {
            if i.abs_diff(j) == 1 { 1.0 } else { 0.0 }
        },
    );
    let chain =
        FreeFermionChain::new(&Couplings::from_matrix(h).expect("couplings")).expect("chain");
    let values = chain.correlations(60, &times).expect("correlations");
    let x: Vec<i32> = (0..sites).map(|i| i as i32 - 60).collect();
    let errors = Array2::from_elem(values.dim(), 1e-4);
    let map = CorrelationMap::complete(x, times, values, Some(errors)).expect("map");
    for (t0, x_max) in [(2.0, None), (1.0, Some(20)), (5.0, Some(40))] {
        let window = map.window(Some(t0), Some(20.0), x_max).expect("window");
        let options = ProfileOptions {
            bootstrap: 0,
            ..ProfileOptions::default()
        };
        if let Ok(c) = compare_profiles(&window, &options) {
            assert!(c.stable.mu.is_finite() && c.stable.d.is_finite(), "{c:?}");
        }
    }
}

#[test]
fn gaussian_fit_recovers_d_within_errors_and_bootstrap_agrees() {
    // Closed-form Gaussian, D = 0.7, 41 sites × 6 times, noise 1e-3.
    let times = [2.0, 3.0, 4.5, 6.0, 8.0, 10.0];
    let map = noisy_map(|x, t| gaussian(x, t, 0.7), 20, &times, 1e-3, 0.0, 5);
    let options = ProfileOptions {
        bootstrap: 100,
        seed: 9,
        ..ProfileOptions::default()
    };
    let r = fit_profile(&map, ProfileModel::Gaussian, &options).expect("fits");
    assert!(r.termination.is_converged(), "{r:?}");
    assert!((r.d - 0.7).abs() < 3.0 * r.d_err, "{r:?}");
    assert!(r.d_err < 0.01, "{r:?}");
    assert!(r.chi2_dof > 0.8 && r.chi2_dof < 1.2, "{r:?}");
    // The bootstrap error estimates the same spread as the covariance
    // (linear regime): within 25 % for 100 replicates (relative standard
    // error of a standard deviation ≈ 1/√(2K) = 7 %).
    let boot = r.d_err_bootstrap.expect("bootstrap ran");
    assert!((boot / r.d_err - 1.0).abs() < 0.25, "{boot} vs {}", r.d_err);
    assert_eq!(r.seed, 9);
}

#[test]
fn gaussian_covariance_interval_covers_the_truth_about_68_percent() {
    // 300 seeds of a small map (21 sites × 4 times); the binomial
    // standard deviation of the coverage is 2.7 %, so 60–76 % is ±3σ
    // around the nominal 68.27 % (A&S 26.2).
    let times = [1.0, 2.0, 3.0, 5.0];
    let seeds = 300;
    let mut covered = 0;
    for seed in 0..seeds {
        let map = noisy_map(|x, t| gaussian(x, t, 1.3), 10, &times, 2e-3, 0.02, seed);
        let r =
            fit_profile(&map, ProfileModel::Gaussian, &ProfileOptions::default()).expect("fits");
        if (r.d - 1.3).abs() <= r.d_err {
            covered += 1;
        }
    }
    let fraction = f64::from(covered) / f64::from(seeds as u32);
    assert!((0.60..=0.76).contains(&fraction), "coverage {fraction}");
}

#[test]
fn gaussian_fit_without_errors_reports_scatter_errors() {
    // Exact Gaussian data without errors: D recovered to rounding, the
    // error basis is the scatter.
    let x: Vec<i32> = (-8..=8).collect();
    let times = vec![1.0, 2.0, 4.0];
    let values = Array2::from_shape_fn((3, x.len()), |(i, j)| {
        gaussian(f64::from(x[j]), times[i], 0.45)
    });
    let map = CorrelationMap::complete(x, times, values, None).expect("map");
    let r = fit_profile(&map, ProfileModel::Gaussian, &ProfileOptions::default()).expect("fits");
    assert!((r.d - 0.45).abs() < 1e-10, "{r:?}");
    assert_eq!(r.error_basis, ErrorBasis::Scatter);
    assert!(r.p_value.is_none());
}

/// The interpolation error bound of the module documentation.
fn assert_table_matches(mu: f64, table: &DensityTable, f: &dyn Fn(f64) -> f64) {
    let peak = f(0.0);
    for k in 0..3000 {
        let u = 0.0137 + 0.1 * f64::from(k);
        let (v, dv) = table.eval(u);
        let exact = f(u);
        assert!(
            (v - exact).abs() <= 3e-6 * exact + 1e-8 * peak,
            "mu {mu}, u {u}: {v} vs {exact}"
        );
        let h = 1e-6 * u.max(1.0);
        let slope = (f(u + h) - f(u - h)) / (2.0 * h);
        // Spline slopes are one order less accurate (O(h³)).
        assert!(
            (dv - slope).abs() <= 1e-4 * slope.abs() + 1e-5 * exact + 1e-9 * peak,
            "mu {mu}, u {u}: f' {dv} vs {slope}"
        );
    }
}

#[test]
fn table_reproduces_closed_form_densities() {
    // Against the closed forms at μ = 1, 1/(π(1+u²)), and μ = 2,
    // exp(−u²/4)/(2√π) (physics notes), at points between the nodes:
    // error ≤ 3e-6 of f plus 1e-8 of the peak (the Gaussian's far tail,
    // f < 1e-5 f(0), is interpolated to ~u²·1e-8 relative).
    let cauchy_unit = UnitDensity {
        ln_f: Box::new(|u: f64| -(PI * (1.0 + u * u)).ln()),
        d_ln_f: Box::new(|u: f64| -2.0 * u / (1.0 + u * u)),
    };
    let gauss_unit = UnitDensity {
        ln_f: Box::new(|u: f64| -u * u / 4.0 - (2.0 * PI.sqrt()).ln()),
        d_ln_f: Box::new(|u: f64| -u / 2.0),
    };
    let cauchy_f = |u: f64| 1.0 / (PI * (1.0 + u * u));
    let gauss_f = |u: f64| (-u * u / 4.0).exp() / (2.0 * PI.sqrt());
    let table = |mu: f64, density: &UnitDensity| {
        DensityTable::build(mu, Grid::new(curvature_scale(mu), 300.0), density)
    };
    assert_table_matches(1.0, &table(1.0, &cauchy_unit), &cauchy_f);
    assert_table_matches(2.0, &table(2.0, &gauss_unit), &gauss_f);
}

#[test]
fn table_reproduces_the_stable_density_at_other_indices() {
    // The same bound against `StableDensity` itself (checked against
    // mpmath to 1e-12 in its own module) where no closed form exists.
    for mu in [0.35, 0.5, 0.8, 1.2, 1.5, 1.9, 1.97, 1.995] {
        let density = StableDensity::standard(mu).expect("valid mu");
        let grid = Grid::new(curvature_scale(mu), 300.0);
        let table = DensityTable::build(mu, grid, &unit_density(mu).expect("density"));
        assert_table_matches(mu, &table, &|u| density.pdf(u));
    }
}

#[test]
fn mu_grid_interpolates_between_its_tables() {
    // Four-point Lagrange interpolation in μ (spacing 0.01) against a
    // table built directly at the target μ on the same u grid: ln f to
    // 5e-8 (the Lagrange remainder δ⁴|τ(τ²−1)(τ−2)|/24·∂⁴g/∂μ⁴ is
    // ≈ 2e-10·∂⁴g/∂μ⁴ inside and up to 40 times more in the end
    // intervals, where the stencil cannot be centred), and ∂ ln f/∂μ
    // against central differences of direct tables to 1e-5 absolute.
    let grid = MuGrid::build(1.3, 0.02, 50.0, [MU_MIN, 2.0])
        .expect("density")
        .expect("finite error");
    assert_eq!(grid.tables.len(), 25);
    let direct =
        |mu: f64| DensityTable::build(mu, *grid.grid(), &unit_density(mu).expect("density"));
    for mu in [1.1837, 1.2551, 1.3, 1.3555, 1.4163] {
        assert!(grid.covers(mu, 40.0));
        let (first, weights, slopes) = grid.stencil(mu);
        let (at_mu, up, down) = (direct(mu), direct(mu + 1e-4), direct(mu - 1e-4));
        for k in 0..200 {
            let u = 0.013 + 0.25 * f64::from(k);
            let at = grid.grid().locate(u);
            let (mut g, mut dg_dmu) = (0.0, 0.0);
            for q in 0..4 {
                let gq = grid.tables[first + q].log_at(&at).0;
                g += weights[q] * gq;
                dg_dmu += slopes[q] * gq;
            }
            let exact = at_mu.log_at(&at).0;
            assert!((g - exact).abs() < 5e-8, "mu {mu}, u {u}: {g} vs {exact}");
            let slope = (up.log_at(&at).0 - down.log_at(&at).0) / 2e-4;
            assert!(
                (dg_dmu - slope).abs() < 1e-5,
                "mu {mu}, u {u}: {dg_dmu} vs {slope}"
            );
        }
    }
    assert!(!grid.covers(1.5, 1.0) && !grid.covers(1.3, 1e4));
}

/// C(x,t) from the stable density with s = (Dt)^(1/μ).
fn stable_profile(mu: f64, d: f64) -> impl Fn(f64, f64) -> f64 {
    let density = StableDensity::standard(mu).expect("valid mu");
    move |x, t| {
        let s = (d * t).powf(1.0 / mu);
        density.pdf(x / s) / s
    }
}

#[test]
fn stable_fit_recovers_cauchy_parameters_and_aic_prefers_it() {
    // Closed-form Cauchy data (μ = 1, D = 0.8), 61 sites × 6 times, noise
    // 2e-4 + 1 % of C. Truth within 3σ; the stable model must win by
    // AIC and BIC by a wide margin.
    let times = [2.0, 3.0, 4.5, 6.0, 8.0, 10.0];
    let map = noisy_map(|x, t| cauchy(x, t, 0.8), 30, &times, 2e-4, 0.01, 17);
    let c = compare_profiles(&map, &ProfileOptions::default()).expect("fits");
    let s = &c.stable;
    assert!(s.termination.is_converged(), "{s:?}");
    assert!((s.mu - 1.0).abs() < 3.0 * s.mu_err, "{s:?}");
    assert!((s.d - 0.8).abs() < 3.0 * s.d_err, "{s:?}");
    assert!(s.mu_err < 0.02, "{s:?}");
    assert!(s.chi2_dof > 0.8 && s.chi2_dof < 1.25, "{s:?}");
    assert_eq!(c.preferred, ProfileModel::Stable, "{}", c.reason);
    assert!(c.delta_aic > 10.0 && c.delta_bic > 10.0, "{c:?}");
}

#[test]
fn stable_fit_recovers_other_indices() {
    // Data from `StableDensity` at μ = 0.7 (D = 0.5) and μ = 1.5
    // (D = 1.2), 61 sites × 5 times, noise 2e-4 + 1 %.
    let times = [2.0, 3.5, 5.0, 7.0, 10.0];
    for (mu, d, seed) in [(0.7, 0.5, 31), (1.5, 1.2, 32)] {
        let map = noisy_map(stable_profile(mu, d), 30, &times, 2e-4, 0.01, seed);
        let r = fit_profile(&map, ProfileModel::Stable, &ProfileOptions::default()).expect("fits");
        assert!((r.mu - mu).abs() < 3.0 * r.mu_err, "{r:?}");
        assert!((r.d - d).abs() < 3.0 * r.d_err, "{r:?}");
        assert!(r.mu_err < 0.05, "{r:?}");
    }
}

#[test]
fn maps_without_errors_use_the_scatter_and_still_compare_models() {
    // Exact closed-form Cauchy values (μ = 1, D = 0.6) without errors:
    // μ and D recovered to the table's accuracy, the information
    // criteria from n ln(χ²/n) still prefer the stable model, and the
    // bootstrap runs with σ_eff = √(χ²/dof).
    let x: Vec<i32> = (-15..=15).collect();
    let times = vec![2.0, 3.0, 5.0, 8.0];
    let values = Array2::from_shape_fn((times.len(), x.len()), |(i, j)| {
        cauchy(f64::from(x[j]), times[i], 0.6)
    });
    let map = CorrelationMap::complete(x, times, values, None).expect("map");
    let options = ProfileOptions {
        bootstrap: 10,
        seed: 1,
        ..ProfileOptions::default()
    };
    let c = compare_profiles(&map, &options).expect("fits");
    assert_eq!(c.preferred, ProfileModel::Stable, "{}", c.reason);
    assert_eq!(c.stable.error_basis, ErrorBasis::Scatter);
    assert!((c.stable.mu - 1.0).abs() < 1e-5, "{:?}", c.stable);
    assert!((c.stable.d - 0.6).abs() < 1e-5, "{:?}", c.stable);
    assert!(c.stable.mu_err_bootstrap.is_some_and(f64::is_finite));
}

#[test]
fn fits_agree_with_scipy_curve_fit() {
    // scipy 1.17.1, numpy 2.4.6: curve_fit (absolute_sigma),
    // levy_stable.pdf default method; tests/reference/profile_reference.py
    const SCIPY_GAUSSIAN_D: f64 = 1.1205270156053773;
    const SCIPY_GAUSSIAN_D_ERR: f64 = 0.011697542427648411;
    const SCIPY_GAUSSIAN_CHI2: f64 = 1157.407599278696;
    const SCIPY_STABLE_D: f64 = 0.7505969348349345;
    const SCIPY_STABLE_D_ERR: f64 = 0.009866331089891338;
    const SCIPY_STABLE_MU: f64 = 1.3910123177497287;
    const SCIPY_STABLE_MU_ERR: f64 = 0.014698116297564193;
    const SCIPY_STABLE_CHI2: f64 = 90.92457874428366;
    // The same deterministic map as the script: an equal Cauchy +
    // Gaussian mixture (D = 0.8) times 1 + 0.03 sin(3.7x + 1.3t).
    let x: Vec<i32> = (-12..=12).collect();
    let times = vec![2.0, 3.0, 5.0, 8.0];
    let values = Array2::from_shape_fn((times.len(), x.len()), |(i, j)| {
        let (xv, t) = (f64::from(x[j]), times[i]);
        0.5 * (cauchy(xv, t, 0.8) + gaussian(xv, t, 0.8))
            * (1.0 + 0.03 * (3.7 * xv + 1.3 * t).sin())
    });
    let errors = values.mapv(|c: f64| 0.002 + 0.01 * c.abs());
    let map = CorrelationMap::complete(x, times, values, Some(errors)).expect("map");
    let c = compare_profiles(&map, &ProfileOptions::default()).expect("fits");
    let (g, s) = (&c.gaussian, &c.stable);
    // Observed agreement ~1e-7 relative; bounds: parameters and χ² to
    // 1e-6 (table and levy_stable accuracy), errors to 1e-5 (scipy's
    // finite-difference Jacobian).
    let agree = |ours: f64, theirs: f64, rel: f64| {
        assert!(close(ours, theirs, rel, 0.0), "{ours} vs scipy {theirs}");
    };
    agree(g.d, SCIPY_GAUSSIAN_D, 1e-6);
    agree(g.d_err, SCIPY_GAUSSIAN_D_ERR, 1e-5);
    agree(g.chi2, SCIPY_GAUSSIAN_CHI2, 1e-6);
    agree(s.d, SCIPY_STABLE_D, 1e-6);
    agree(s.d_err, SCIPY_STABLE_D_ERR, 1e-5);
    agree(s.mu, SCIPY_STABLE_MU, 1e-6);
    agree(s.mu_err, SCIPY_STABLE_MU_ERR, 1e-5);
    agree(s.chi2, SCIPY_STABLE_CHI2, 1e-6);
    assert_eq!(c.preferred, ProfileModel::Stable);
}

#[test]
fn aic_prefers_the_gaussian_on_gaussian_data() {
    // The stable model contains the Gaussian (μ = 2, on its bound), so
    // its χ² is never larger; ΔAIC = Δχ² − 2 exceeds 0 only when the
    // free μ lowers χ² by more than 2, which for a boundary parameter
    // happens with probability ½·P(χ²₁ > 2) ≈ 8 % (Chernoff 1954,
    // boundary likelihood ratio; from memory). Over 25 seeds at least
    // 20 must prefer the Gaussian (binomial, p = 0.92: P(< 20) ≈ 3 %).
    let times = [2.0, 4.0, 6.0, 9.0];
    let mut gaussian_wins = 0;
    for seed in 0..25 {
        let map = noisy_map(
            |x, t| gaussian(x, t, 0.6),
            15,
            &times,
            5e-4,
            0.01,
            100 + seed,
        );
        let c = compare_profiles(&map, &ProfileOptions::default()).expect("fits");
        if c.preferred == ProfileModel::Gaussian {
            gaussian_wins += 1;
        }
    }
    assert!(gaussian_wins >= 20, "{gaussian_wins} of 25");
}

#[test]
fn fixed_index_is_marked_fixed_and_the_boundary_is_stated() {
    // A preferred Gaussian has μ = 2 by construction: its μ must be
    // marked fixed (an error of 0 would read as exact), the stable fit's
    // μ must not be, and the ΔAIC rule must say that μ = 2 sits on the
    // boundary of the stable model's range, where the usual χ²
    // calibration of the likelihood ratio does not hold (Chernoff 1954).
    let times = [2.0, 4.0, 6.0, 9.0];
    let map = noisy_map(|x, t| gaussian(x, t, 0.6), 15, &times, 5e-4, 0.01, 100);
    let c = compare_profiles(&map, &ProfileOptions::default()).expect("fits");
    assert!(c.gaussian.mu_fixed && !c.stable.mu_fixed, "{c:?}");
    let json = serde_json::to_value(&c.gaussian).expect("serialises");
    assert_eq!(json["mu_fixed"], serde_json::Value::Bool(true));
    assert!(c.reason.contains("boundary"), "{}", c.reason);
}

#[test]
fn stable_covariance_interval_covers_the_truth_about_68_percent() {
    // Coverage of μ over 150 seeds of small Cauchy maps (21 sites × 4
    // times); binomial standard deviation 3.8 %, so 60–76 % is about
    // ±2σ around 68.27 % (A&S 26.2). The bootstrap error of one map is
    // compared with its covariance error as well.
    let times = [1.5, 2.5, 4.0, 6.0];
    let seeds = 150u32;
    let mut covered = 0;
    for seed in 0..seeds {
        let map = noisy_map(
            |x, t| cauchy(x, t, 1.0),
            10,
            &times,
            1e-3,
            0.02,
            500 + u64::from(seed),
        );
        let r = fit_profile(&map, ProfileModel::Stable, &ProfileOptions::default()).expect("fits");
        if (r.mu - 1.0).abs() <= r.mu_err {
            covered += 1;
        }
    }
    let fraction = f64::from(covered) / f64::from(seeds);
    assert!((0.60..=0.76).contains(&fraction), "coverage {fraction}");

    let map = noisy_map(|x, t| cauchy(x, t, 1.0), 10, &times, 1e-3, 0.02, 9);
    let options = ProfileOptions {
        bootstrap: 100,
        seed: 4,
        ..ProfileOptions::default()
    };
    let r = fit_profile(&map, ProfileModel::Stable, &options).expect("fits");
    let boot = r.mu_err_bootstrap.expect("bootstrap ran");
    // 1/√(2K) = 7 % relative standard error of a standard deviation.
    assert!(
        (boot / r.mu_err - 1.0).abs() < 0.3,
        "{boot} vs {}",
        r.mu_err
    );
    let again = fit_profile(&map, ProfileModel::Stable, &options).expect("fits");
    assert_eq!(
        again.mu_err_bootstrap, r.mu_err_bootstrap,
        "seeded bootstrap repeats"
    );
}
