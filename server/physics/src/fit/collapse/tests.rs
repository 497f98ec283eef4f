use super::*;
use crate::model::stable::StableDensity;
use crate::numerics::stats::{mean, seeded_rng, standard_normal, std_dev};
use crate::testing::log_times;
use crate::tolerance::close;
use ndarray::Array2;

/// The shared closed-form profiles at D = 1.
fn gaussian(x: f64, t: f64) -> f64 {
    crate::testing::gaussian(x, t, 1.0)
}

fn cauchy(x: f64, t: f64) -> f64 {
    crate::testing::cauchy(x, t, 1.0)
}

fn map_of(
    times: &[f64],
    offsets: std::ops::RangeInclusive<i32>,
    f: impl Fn(f64, f64) -> f64,
    errors: Option<f64>,
) -> CorrelationMap {
    let x: Vec<i32> = offsets.collect();
    let values = Array2::from_shape_fn((times.len(), x.len()), |(i, j)| {
        f(f64::from(x[j]), times[i])
    });
    let errs = errors.map(|e| Array2::from_elem(values.dim(), e));
    CorrelationMap::complete(x, times.to_vec(), values, errs).expect("valid map")
}

#[test]
fn linear_scaling_function_collapses_exactly() {
    // C = t^(−1/z) f(x/t^(1/z)) with f(u) = 1 + 0.1u: linear between
    // any points, so every neighbourhood fit is exact and S(z_true) = 0
    // up to rounding; any other z leaves a misfit.
    let z_true = 1.5;
    let f = |x: f64, t: f64| {
        let a = t.powf(1.0 / z_true);
        (1.0 + 0.1 * x / a) / a
    };
    let map = map_of(&[1.0, 2.0, 3.5, 6.0], -5..=5, f, Some(0.01));
    let q = CollapseQuality::new(&map).expect("valid");
    let at_truth = q.quality_value(z_true);
    assert!(at_truth.s < 1e-20, "{at_truth:?}");
    assert!(at_truth.n_pairs > 0);
    assert!(q.quality(1.3) > 1.0 && q.quality(1.8) > 1.0);
    let options = CollapseOptions {
        bootstrap_resamples: 0,
        ..CollapseOptions::default()
    };
    let report = q.best(&options).expect("search runs");
    assert!((report.z - z_true).abs() < 1e-4, "{report:?}");
    assert!(report.termination.is_converged());
    assert_eq!(report.z_err_source, "profile");
}

#[test]
fn quality_matches_independent_reference() {
    // Literals printed by tests/reference/collapse_reference.py (numpy
    // 2.4.6, python 3.11.7): a brute-force implementation of the same
    // measure sharing no code with this one. The map has a t = 0 row
    // and one masked point, which both must handle alike.
    let offsets: Vec<i32> = (-3..=3).collect();
    let times = vec![0.0, 1.5, 2.5, 4.0];
    let value = |x: f64, t: f64| {
        if t > 0.0 {
            gaussian(x, t) + 0.004 * (3.7 * x + 1.3 * t).sin()
        } else {
            f64::from(u8::from(x == 0.0))
        }
    };
    let values = Array2::from_shape_fn((4, 7), |(i, j)| value(f64::from(offsets[j]), times[i]));
    let errors = Array2::from_shape_fn((4, 7), |(_, j)| {
        0.002 + 0.001 * f64::from(offsets[j].abs()) / 3.0
    });
    let mut present = Array2::from_elem((4, 7), true);
    present[(2, 1)] = false;
    let map = CorrelationMap::new(offsets, times, values, Some(errors), present).expect("valid");
    let q = CollapseQuality::new(&map).expect("valid");
    assert_eq!((q.n_curves(), q.times_dropped(), q.n_points()), (3, 1, 20));
    let reference = [
        (1.2, 78.79389870623147, 16),
        (1.5, 20.574395171089318, 18),
        (2.0, 2.7011700164926666, 18),
        (2.5, 8.416689417055435, 18),
    ];
    for (z, s, n) in reference {
        let got = q.quality_value(z);
        assert!(close(got.s, s, 1e-11, 0.0), "z = {z}: {got:?} vs {s}");
        assert_eq!(got.n_pairs, n, "z = {z}");
    }
}

/// A stable map of index μ with D = 1 (scale t^{1/μ}) on integer
/// sites, with seeded white noise `sigma` (none when 0).
fn stable_map(mu: f64, times: &[f64], half: i32, sigma: f64, seed: u64) -> CorrelationMap {
    let x: Vec<i32> = (-half..=half).collect();
    let mut rng = seeded_rng(seed);
    let values = Array2::from_shape_fn((times.len(), x.len()), |(i, j)| {
        let density = StableDensity::new(mu, times[i].powf(1.0 / mu)).expect("valid");
        density.pdf(f64::from(x[j])) + sigma * standard_normal(&mut rng)
    });
    let errors = Array2::from_elem(values.dim(), sigma.max(1e-6));
    CorrelationMap::complete(x, times.to_vec(), values, Some(errors)).expect("valid")
}

#[test]
fn noise_free_maps_give_z_and_d_from_the_first_sites_on() {
    // Exact scaling maps from t = 1, where the profile is one or two
    // sites wide: the case where the neighbourhood measure was biased
    // (z = 2.009 on the Gaussian). Truth by construction: the stable
    // density of index μ with scale (D t)^{1/μ}, D = 1 (the density
    // itself is checked against mpmath in model::stable); the Gaussian
    // is its closed form at μ = 2, variance 2Dt (physics notes).
    let times = log_times(1.0, 20.0, 12);
    for mu in [2.0, 1.3, 0.8] {
        let map = stable_map(mu, &times, 60, 0.0, 0);
        let q = CollapseQuality::new(&map).expect("valid");
        let report = q
            .best(&CollapseOptions {
                bootstrap_resamples: 0,
                ..CollapseOptions::default()
            })
            .expect("runs");
        assert!((report.z - mu).abs() < 2e-4, "μ = {mu}: {report:?}");
        assert!((report.d - 1.0).abs() < 2e-3, "μ = {mu}: D = {}", report.d);
        assert_eq!(report.z_err_source, "profile");
    }
    let map = map_of(&times, -60..=60, gaussian, Some(1e-6));
    let report = CollapseQuality::new(&map)
        .expect("valid")
        .best(&CollapseOptions {
            bootstrap_resamples: 0,
            ..CollapseOptions::default()
        })
        .expect("runs");
    assert!((report.z - 2.0).abs() < 2e-4, "{report:?}");
    assert!((report.d - 1.0).abs() < 2e-3, "{report:?}");
}

/// Mean, scatter and one-sigma coverage of z and D over seeded noisy
/// copies of a stable map (truth z = μ, D = 1).
fn calibrate(mu: f64, sigma: f64, seeds: u64, resamples: usize) -> [(f64, f64, f64); 2] {
    let times = log_times(1.0, 20.0, 12);
    let (mut zs, mut ds) = (Vec::new(), Vec::new());
    let (mut z_in, mut d_in) = (0, 0);
    for seed in 0..seeds {
        let map = stable_map(mu, &times, 60, sigma, 7000 + seed);
        let report = CollapseQuality::new(&map)
            .expect("valid")
            .best(&CollapseOptions {
                bootstrap_resamples: resamples,
                seed,
                ..CollapseOptions::default()
            })
            .expect("runs");
        z_in += usize::from((report.z - mu).abs() <= report.z_err);
        d_in += usize::from((report.d - 1.0).abs() <= report.d_err);
        zs.push(report.z);
        ds.push(report.d);
    }
    let n = seeds as f64;
    [
        (mean(&zs) - mu, std_dev(&zs), z_in as f64 / n),
        (mean(&ds) - 1.0, std_dev(&ds), d_in as f64 / n),
    ]
}

#[test]
fn noisy_copies_are_unbiased_and_their_errors_cover_about_68_percent() {
    // Calibration on seeded copies (common practice, no source): the
    // bias must stay below the scatter and the one-sigma intervals of z
    // and D must hold the truth in 50–90 % of copies (68 % expected;
    // with 40 copies the binomial σ is 7 %).
    for (mu, sigma) in [(1.3, 1e-4), (2.0, 1e-4), (0.8, 3e-4)] {
        for (what, (bias, scatter, coverage)) in
            ["z", "D"].into_iter().zip(calibrate(mu, sigma, 40, 30))
        {
            assert!(
                bias.abs() < scatter,
                "μ = {mu}, {what}: bias {bias} vs scatter {scatter}"
            );
            assert!(
                (0.5..=0.9).contains(&coverage),
                "μ = {mu}, {what}: coverage {coverage}"
            );
        }
    }
    // Without the bootstrap z's error comes from the χ² profile, which
    // is a valid one-sigma error for this least-squares fit.
    let [(bias, scatter, coverage), _] = calibrate(2.0, 1e-4, 40, 0);
    assert!(bias.abs() < scatter, "bias {bias} vs scatter {scatter}");
    assert!(
        (0.5..=0.9).contains(&coverage),
        "profile coverage {coverage}"
    );
}

#[test]
fn a_map_that_does_not_collapse_is_called_a_poor_fit_with_scaled_errors() {
    // Half the times follow a Gaussian, half a Lorentzian: no single
    // master curve holds them (common practice, no source).
    let times = log_times(2.0, 20.0, 8);
    let late = |x: f64, t: f64| {
        if t > 6.0 {
            cauchy(x, t)
        } else {
            gaussian(x, t)
        }
    };
    let map = map_of(&times, -30..=30, late, Some(1e-4));
    let report = CollapseQuality::new(&map)
        .expect("valid")
        .best(&CollapseOptions {
            bootstrap_resamples: 0,
            ..CollapseOptions::default()
        })
        .expect("runs");
    assert!(report.poor_fit, "{report:?}");
    assert!(report.err_scale > 3.0_f64.sqrt(), "{report:?}");
}

#[test]
fn a_cancelled_bootstrap_stops() {
    let map = stable_map(1.3, &log_times(1.0, 10.0, 6), 20, 1e-3, 1);
    let q = CollapseQuality::new(&map).expect("valid");
    let options = CollapseOptions {
        bootstrap_resamples: 50,
        ..CollapseOptions::default()
    };
    let calls = std::sync::atomic::AtomicUsize::new(0);
    let stop_after_two = |_: f64| calls.fetch_add(1, Ordering::SeqCst) < 2;
    assert!(matches!(
        q.best_with_progress(&options, &stop_after_two),
        Err(CollapseError::Cancelled)
    ));
    assert!(calls.load(Ordering::SeqCst) < 50);
}

#[test]
fn unknown_errors_use_the_scatter() {
    let map = map_of(&[10.0, 14.0, 20.0, 28.0], -20..=20, cauchy, None);
    let q = CollapseQuality::new(&map).expect("valid");
    assert!(!q.errors_known());
    let report = q.best(&CollapseOptions::default()).expect("runs");
    assert!((report.z - 1.0).abs() < 0.01, "{report:?}");
    assert!(!report.errors_known);
    assert!(report.z_err.is_finite());
}

#[test]
fn bad_inputs_are_rejected() {
    let one_time = map_of(
        &[0.0, 1.0],
        -2..=2,
        |x, t| if t > 0.0 { gaussian(x, t) } else { 0.0 },
        None,
    );
    assert!(matches!(
        CollapseQuality::new(&one_time),
        Err(CollapseError::TooFewCurves(1))
    ));
    let map = map_of(&[1.0, 2.0], -2..=2, gaussian, None);
    let q = CollapseQuality::new(&map).expect("valid");
    let bad = CollapseOptions {
        z_min: 2.0,
        z_max: 1.0,
        ..CollapseOptions::default()
    };
    assert!(matches!(q.best(&bad), Err(CollapseError::BadRange { .. })));
    assert!(q.quality(-1.0).is_infinite());
    assert!(q.quality(f64::NAN).is_infinite());
}

#[test]
fn report_serialises_with_plain_field_names() {
    let map = map_of(&[2.0, 3.0, 5.0], -6..=6, cauchy, Some(0.01));
    let q = CollapseQuality::new(&map).expect("valid");
    let options = CollapseOptions {
        bootstrap_resamples: 5,
        seed: 42,
        ..CollapseOptions::default()
    };
    let report = q.best(&options).expect("runs");
    let json = serde_json::to_value(&report).expect("serialises");
    for key in [
        "z",
        "z_err",
        "z_err_profile",
        "z_err_bootstrap",
        "z_bias",
        "d",
        "d_err",
        "d_bias",
        "err_scale",
        "poor_fit",
        "chi2_scan",
        "quality_min",
        "n_points",
        "z_scan",
        "seed",
        "termination",
    ] {
        assert!(json.get(key).is_some(), "missing {key}");
    }
    assert_eq!(json["seed"], 42);
    assert_eq!(
        json["z_scan"].as_array().map(Vec::len),
        Some(options.scan_points)
    );
    // Same seed, same result.
    assert_eq!(q.best(&options).expect("runs"), report);
}
