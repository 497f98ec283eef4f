use super::*;

/// One NIST StRD problem as stored in tests/reference/nist_strd.json.
#[derive(Debug, serde::Deserialize)]
struct NistProblem {
    name: String,
    x: Vec<f64>,
    y: Vec<f64>,
    start1: Vec<f64>,
    start2: Vec<f64>,
    certified: Vec<f64>,
    certified_sd: Vec<f64>,
    rss: f64,
    residual_sd: f64,
    dof: usize,
}

#[derive(Debug, serde::Deserialize)]
struct NistFile {
    problems: Vec<NistProblem>,
}

fn nist() -> Vec<NistProblem> {
    let text = include_str!("../../../../../tests/reference/nist_strd.json");
    let file: NistFile = serde_json::from_str(text).expect("nist_strd.json parses");
    file.problems
}

/// The NIST model functions (formulas from the StRD .dat headers).
fn model(name: &str) -> fn(f64, &[f64]) -> f64 {
    match name {
        "MGH09" => |x, b| b[0] * (x * x + x * b[1]) / (x * x + x * b[2] + b[3]),
        "Thurber" => |x, b| {
            (b[0] + b[1] * x + b[2] * x * x + b[3] * x.powi(3))
                / (1.0 + b[4] * x + b[5] * x * x + b[6] * x.powi(3))
        },
        "Eckerle4" => |x, b| (b[0] / b[1]) * (-0.5 * ((x - b[2]) / b[1]).powi(2)).exp(),
        "Rat43" => |x, b| b[0] / (1.0 + (b[1] - b[2] * x).exp()).powf(1.0 / b[3]),
        "BoxBOD" => |x, b| b[0] * (1.0 - (-b[1] * x).exp()),
        "MGH10" => |x, b| b[0] * (b[1] / (x + b[2])).exp(),
        other => panic!("no model for {other}"),
    }
}

/// Analytic gradients ∂f/∂b (differentiated by hand) for some problems,
/// so that both the analytic and the finite-difference paths are tested.
type GradientFn = fn(f64, &[f64], &mut [f64]);

fn gradient(name: &str) -> Option<GradientFn> {
    match name {
        "MGH09" => Some(|x, b, g| {
            let num = x * x + x * b[1];
            let den = x * x + x * b[2] + b[3];
            g[0] = num / den;
            g[1] = b[0] * x / den;
            g[2] = -b[0] * num * x / (den * den);
            g[3] = -b[0] * num / (den * den);
        }),
        "Eckerle4" => Some(|x, b, g| {
            let d = (x - b[2]) / b[1];
            let e = (-0.5 * d * d).exp();
            g[0] = e / b[1];
            g[1] = b[0] * e * (d * d - 1.0) / (b[1] * b[1]);
            g[2] = b[0] * e * d / (b[1] * b[1]);
        }),
        "BoxBOD" => Some(|x, b, g| {
            let e = (-b[1] * x).exp();
            g[0] = 1.0 - e;
            g[1] = b[0] * x * e;
        }),
        "MGH10" => Some(|x, b, g| {
            let e = (b[1] / (x + b[2])).exp();
            g[0] = e;
            g[1] = b[0] * e / (x + b[2]);
            g[2] = -b[0] * e * b[1] / (x + b[2]).powi(2);
        }),
        _ => None,
    }
}

fn fit_problem(p: &NistProblem, start: &[f64], method: JacobianMethod) -> LeastSquaresReport {
    let f = model(&p.name);
    let mut fit = CurveFit::new(&p.x, &p.y, None, start.len(), f).expect("valid data");
    if let Some(g) = gradient(&p.name) {
        fit = fit.with_gradient(g);
    }
    let options = LmOptions {
        jacobian: method,
        ..LmOptions::default()
    };
    least_squares(&fit, start, &options).expect("fit runs")
}

#[test]
fn nist_data_reproduce_certified_rss() {
    // Guards against typing errors in nist_strd.json: the certified RSS
    // and residual SD follow from the data at the certified parameters.
    for p in nist() {
        let f = model(&p.name);
        let rss: f64 =
            p.x.iter()
                .zip(&p.y)
                .map(|(&x, &y)| (y - f(x, &p.certified)).powi(2))
                .sum();
        assert!(
            crate::tolerance::close(rss, p.rss, 1e-9, 0.0),
            "{}: RSS {rss} vs certified {}",
            p.name,
            p.rss
        );
        let sd = (p.rss / p.dof as f64).sqrt();
        assert!(
            crate::tolerance::close(sd, p.residual_sd, 1e-9, 0.0),
            "{}",
            p.name
        );
        assert_eq!(p.x.len() - p.certified.len(), p.dof, "{}", p.name);
    }
}

/// NIST StRD certified values (see nist_strd.json for the source): both
/// starting points, parameters to 6 significant digits, standard errors
/// (scaled covariance, NIST's convention) to 4.
fn check_against_certified(method: JacobianMethod) {
    for p in nist() {
        for (label, start) in [("start 1", &p.start1), ("start 2", &p.start2)] {
            let report = fit_problem(&p, start, method);
            let tag = format!("{} {label} {method:?}: {report:?}", p.name);
            assert!(report.termination.is_converged(), "{tag}");
            assert!(
                crate::tolerance::close(report.chi2, p.rss, 1e-9, 0.0),
                "{tag}"
            );
            for (j, (&got, &want)) in report.params.iter().zip(&p.certified).enumerate() {
                assert!(
                    crate::tolerance::close(got, want, 1e-6, 0.0),
                    "{tag}: b{} = {got}, certified {want}",
                    j + 1
                );
            }
            let se = report.scaled_std_errors();
            for (j, (&got, &want)) in se.iter().zip(&p.certified_sd).enumerate() {
                assert!(
                    crate::tolerance::close(got, want, 1e-4, 0.0),
                    "{tag}: sd(b{}) = {got}, certified {want}",
                    j + 1
                );
            }
            assert_eq!(report.dof, p.dof);
        }
    }
}

#[test]
fn nist_higher_difficulty_analytic_or_central() {
    check_against_certified(JacobianMethod::Auto);
}

#[test]
fn nist_higher_difficulty_forward_differences() {
    check_against_certified(JacobianMethod::ForwardDifference);
}

/// Rosenbrock's function as least squares, r = (10(x₂ − x₁²), 1 − x₁)
/// (Moré, Garbow & Hillstrom 1981, problem 1): minimum χ² = 0 at (1, 1),
/// standard start (−1.2, 1).
struct Rosenbrock;

impl LeastSquaresProblem for Rosenbrock {
    fn n_params(&self) -> usize {
        2
    }
    fn n_residuals(&self) -> usize {
        2
    }
    fn residuals(&self, p: &[f64], r: &mut [f64]) {
        r[0] = 10.0 * (p[1] - p[0] * p[0]);
        r[1] = 1.0 - p[0];
    }
    fn jacobian(&self, p: &[f64], jac: &mut [f64]) -> bool {
        jac.copy_from_slice(&[-20.0 * p[0], 10.0, -1.0, 0.0]);
        true
    }
}

#[test]
fn rosenbrock_reaches_its_known_minimum() {
    for method in [
        JacobianMethod::Analytic,
        JacobianMethod::ForwardDifference,
        JacobianMethod::CentralDifference,
    ] {
        let options = LmOptions {
            jacobian: method,
            ..LmOptions::default()
        };
        let report = least_squares(&Rosenbrock, &[-1.2, 1.0], &options).expect("runs");
        assert!(report.termination.is_converged(), "{method:?}: {report:?}");
        assert!((report.params[0] - 1.0).abs() < 1e-9, "{report:?}");
        assert!((report.params[1] - 1.0).abs() < 1e-9, "{report:?}");
        assert!(report.chi2 < 1e-20, "{report:?}");
        assert!(report.chi2_dof.is_nan(), "dof = 0 has no χ²/dof");
    }
}

#[test]
fn bounds_hold_and_are_flagged() {
    // Rosenbrock restricted to x₁ ≤ 0.5: along the bound the minimum of
    // 100(x₂ − 0.25)² + 0.25 is at x₂ = 0.25 (by hand).
    let options = LmOptions {
        upper: Some(vec![0.5, f64::INFINITY]),
        ..LmOptions::default()
    };
    let report = least_squares(&Rosenbrock, &[-1.2, 1.0], &options).expect("runs");
    assert!(report.termination.is_converged(), "{report:?}");
    assert!((report.params[0] - 0.5).abs() < 1e-12);
    assert!((report.params[1] - 0.25).abs() < 1e-9, "{report:?}");
    assert!((report.chi2 - 0.25).abs() < 1e-12);
    assert_eq!(report.at_bound, vec![true, false]);
}

#[test]
fn weighted_straight_line_matches_closed_form() {
    // Weighted linear regression y = a + b x, closed form of Bevington &
    // Robinson, "Data reduction and error analysis", 3rd ed., eqs. 6.12:
    // Δ = S·Sxx − Sx², a = (Sxx·Sy − Sx·Sxy)/Δ, b = (S·Sxy − Sx·Sy)/Δ,
    // σa² = Sxx/Δ, σb² = S/Δ, with S = Σ1/σ², Sx = Σx/σ², ...
    let x = [0.0, 1.0, 2.0, 3.0, 4.0, 5.0];
    let y = [1.1, 2.9, 5.2, 6.8, 9.3, 10.9];
    let s = [0.1, 0.2, 0.1, 0.3, 0.2, 0.1];
    let w: Vec<f64> = s.iter().map(|v| 1.0 / (v * v)).collect();
    let sum = |f: &dyn Fn(usize) -> f64| (0..6).map(f).sum::<f64>();
    let (s0, sx, sy) = (sum(&|i| w[i]), sum(&|i| w[i] * x[i]), sum(&|i| w[i] * y[i]));
    let (sxx, sxy) = (sum(&|i| w[i] * x[i] * x[i]), sum(&|i| w[i] * x[i] * y[i]));
    let delta = s0 * sxx - sx * sx;
    let a = (sxx * sy - sx * sxy) / delta;
    let b = (s0 * sxy - sx * sy) / delta;
    let fit = CurveFit::new(&x, &y, Some(&s), 2, |x, p| p[0] + p[1] * x)
        .expect("valid")
        .with_gradient(|x, _, g| {
            g[0] = 1.0;
            g[1] = x;
        });
    let report = least_squares(&fit, &[0.0, 0.0], &LmOptions::default()).expect("runs");
    let se = report.std_errors();
    assert!(crate::tolerance::close(
        se[0],
        (sxx / delta).sqrt(),
        1e-10,
        0.0
    ));
    assert!(crate::tolerance::close(
        se[1],
        (s0 / delta).sqrt(),
        1e-10,
        0.0
    ));
    // χ² cannot resolve parameter changes below ~√ε of a standard error
    // (module documentation), so that is the accuracy to expect.
    assert!(
        (report.params[0] - a).abs() < 1e-6 * se[0],
        "{report:?} a={a}"
    );
    assert!(
        (report.params[1] - b).abs() < 1e-6 * se[1],
        "{report:?} b={b}"
    );
    let chi2: f64 = (0..6).map(|i| w[i] * (y[i] - a - b * x[i]).powi(2)).sum();
    assert!(crate::tolerance::close(report.chi2, chi2, 1e-10, 0.0));
    assert_eq!(report.dof, 4);
    let scaled = report.scaled_std_errors();
    assert!(crate::tolerance::close(
        scaled[1],
        se[1] * (chi2 / 4.0).sqrt(),
        1e-12,
        0.0
    ));
}

#[test]
fn rank_deficient_model_is_reported_singular() {
    // y = (a + b)·x: only a + b is determined.
    let x = [1.0, 2.0, 3.0];
    let y = [2.0, 4.1, 5.9];
    let fit = CurveFit::new(&x, &y, None, 2, |x, p| (p[0] + p[1]) * x).expect("valid");
    let report = least_squares(&fit, &[0.5, 0.5], &LmOptions::default()).expect("runs");
    assert_eq!(report.termination, Termination::SingularJacobian);
    assert_eq!(report.rank, 1);
    assert!(report.covariance[0][0].is_nan());
    // The determined combination still fits: Σxy/Σx² = 27.9/14 (by hand).
    assert!(
        (report.params[0] + report.params[1] - 27.9 / 14.0).abs() < 1e-9,
        "{report:?}"
    );
}

#[test]
fn bad_inputs_are_rejected_with_reasons() {
    let x = [1.0, 2.0];
    let y = [1.0, 2.0];
    assert!(matches!(
        CurveFit::new(&x, &y, Some(&[1.0, 0.0]), 1, |x, p| p[0] * x),
        Err(OptimizeError::BadSigma { index: 1, .. })
    ));
    let fit = CurveFit::new(&x, &y, None, 3, |x, p| p[0] * x).expect("valid");
    assert!(matches!(
        least_squares(&fit, &[1.0, 1.0, 1.0], &LmOptions::default()),
        Err(OptimizeError::TooFewResiduals { .. })
    ));
    let fit = CurveFit::new(&x, &y, None, 1, |x, p| p[0] * x).expect("valid");
    let bounded = LmOptions {
        lower: Some(vec![2.0]),
        ..LmOptions::default()
    };
    assert!(matches!(
        least_squares(&fit, &[1.0], &bounded),
        Err(OptimizeError::BadStart { index: 0, .. })
    ));
    let analytic = LmOptions {
        jacobian: JacobianMethod::Analytic,
        ..LmOptions::default()
    };
    assert!(matches!(
        least_squares(&fit, &[1.0], &analytic),
        Err(OptimizeError::NoAnalyticJacobian)
    ));
    let fit = CurveFit::new(&x, &y, None, 1, |x, p| (p[0] - x).ln()).expect("valid");
    assert!(matches!(
        least_squares(&fit, &[0.0], &LmOptions::default()),
        Err(OptimizeError::NonFiniteStart { .. })
    ));
}

#[test]
fn brent_finds_known_minima_and_roots() {
    // min of (x − 2)² + 1 on [0, 5] is at 2 (by hand); cos has its minimum
    // on [2, 5] at π.
    let m = minimize_bounded(|x| (x - 2.0).powi(2) + 1.0, 0.0, 5.0, 1e-10, 100).expect("ok");
    assert!((m.x - 2.0).abs() < 1e-7 && m.termination == Termination::Converged);
    let m = minimize_bounded(f64::cos, 2.0, 5.0, 1e-10, 100).expect("ok");
    assert!((m.x - std::f64::consts::PI).abs() < 1e-7);
    // The first positive zero of J₀ is 2.404825557695773 (A&S Table 9.5).
    let r = root_bracketed(|x| puruspe::Jn(0, x), 1.0, 3.0, 1e-14).expect("ok");
    assert!((r.x - 2.404825557695773).abs() < 1e-12, "{r:?}");
    assert!(matches!(
        root_bracketed(|x| x * x + 1.0, -1.0, 1.0, 1e-10),
        Err(OptimizeError::NotBracketed { .. })
    ));
    assert!(minimize_bounded(|x| x, 1.0, 1.0, 1e-8, 10).is_err());
}

#[test]
fn scan_finds_the_global_minimum_and_flags_boundaries() {
    // x + 2 sin(3x) on [−3, 3]: several local minima; the global one is
    // near x = −2.617 where 3 cos(3x)·2 = −1 (checked by the scan itself
    // against a dense grid below, an independent brute force).
    let f = |x: f64| x + 2.0 * (3.0 * x).sin();
    let (best, scan) = scan_then_brent(f, -3.0, 3.0, 31, 1e-10).expect("ok");
    assert_eq!(scan.len(), 31);
    let brute = (0..=600_000)
        .map(|k| -3.0 + 6.0 * f64::from(k) / 600_000.0)
        .min_by(|a, b| f(*a).total_cmp(&f(*b)))
        .expect("non-empty");
    assert!((best.x - brute).abs() < 1e-4, "{best:?} vs {brute}");
    assert_eq!(best.termination, Termination::Converged);
    let (edge, _) = scan_then_brent(|x| x, 0.0, 1.0, 5, 1e-10).expect("ok");
    assert_eq!(edge.termination, Termination::MinimumAtBoundary);
    assert!(edge.x < 1e-4);
}
