//! Calibration of every estimator on seeded noisy copies of maps with known
//! truth, made by the project's own models: bias (mean − truth), scatter
//! (standard deviation over copies) and one-sigma coverage (fraction of
//! copies whose value ± √(stat² + window²) holds the truth) per estimator
//! and for the verdict. Used by the `calibrate` example (full figures) and
//! by a test (few seeds).
//!
//! Owns the calibration cases. Must not print or write: values in, a
//! [`CaseSummary`] out.
//!
//! # Cases
//! - stable densities of index μ (model `stable`), scale (t)^{1/μ} (D = 1),
//!   |x| ≤ 60, t = 1..20, white noise 1e-4;
//! - the Gaussian (μ = 2, D = 1);
//! - the lattice walk α = 0.9 on a finite chain of 61 sites (z = 0.8),
//!   chain length given, t = 0.1..50;
//! - free fermions on 121 sites, J = 1 (z = 1), t = 1..20;
//! - realistic noise on the stable μ = 1.3 map: noise correlated along x
//!   (AR(1), ρ = 0.6; the stated errors ignore the correlation), low signal
//!   at late times (noise growing ∝ t), and lattice effects at small scales
//!   (t = 0.3..5, the scale below two sites at the start);
//! - the μ = 1.3 map *estimated from sampled shots* (module `model::shots`):
//!   a chain of 61 sites whose pair correlations are the stable density,
//!   P_ij(t) = f(i − j, t), fresh random product states at every time, one
//!   shot each, each measured spin up with probability (1 + Σ_j P_ij s_j)/2
//!   (so that E[m_i s_j] = P_ij, the estimator's identity), estimated with
//!   the bulk source window of the 11 central sites and its bootstrap over
//!   initial states. The map's points are then correlated across offsets
//!   and times while its errors are stated point by point.

use ndarray::Array2;

use crate::CorrelationMap;
use crate::fit::analysis::{AnalysisOptions, analyze};
use crate::fit::verdict::Standing;
use crate::model::couplings::Couplings;
use crate::model::free_fermion::FreeFermionChain;
use crate::model::lattice_walk::LatticeWalk;
use crate::model::shots::{EstimateOptions, ShotAccumulator, SourceWindow, estimate};
use crate::model::stable::StableDensity;
use crate::numerics::stats::{seeded_rng, standard_normal};
use rand::Rng;

/// `count` times spaced evenly in ln t over [t0, t1].
fn log_times(t0: f64, t1: f64, count: usize) -> Vec<f64> {
    (0..count)
        .map(|k| t0 * (t1 / t0).powf(k as f64 / (count - 1) as f64))
        .collect()
}

/// How the noise is made.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Noise {
    /// Independent Gaussian noise of this size, stated as the error.
    White(f64),
    /// AR(1) along x with correlation ρ, marginal size σ; σ stated.
    CorrelatedInX { sigma: f64, rho: f64 },
    /// Independent noise σ (t/t_0), growing with time, stated.
    GrowingInTime(f64),
    /// The map estimated from sampled shots (module documentation):
    /// `states` random product states per time, one shot each; only for a
    /// stable truth.
    Shots { states: usize },
}

/// The exact map of a case.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Truth {
    Stable { mu: f64, t: [f64; 2] },
    FiniteWalk { alpha: f64, sites: usize },
    FreeFermions { sites: usize },
}

/// One calibration case.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Case {
    pub name: &'static str,
    pub truth: Truth,
    pub noise: Noise,
}

impl Case {
    /// The true z.
    #[must_use]
    pub fn z(&self) -> f64 {
        match self.truth {
            Truth::Stable { mu, .. } => mu,
            Truth::FiniteWalk { alpha, .. } => (2.0 * alpha - 1.0).min(2.0),
            Truth::FreeFermions { .. } => 1.0,
        }
    }

    fn exact(&self) -> (Vec<i32>, Vec<f64>, Array2<f64>, Option<usize>) {
        match self.truth {
            Truth::Stable { mu, t } => {
                let x: Vec<i32> = (-60..=60).collect();
                let times = log_times(t[0], t[1], 14);
                let v = Array2::from_shape_fn((times.len(), x.len()), |(i, j)| {
                    StableDensity::new(mu, times[i].powf(1.0 / mu))
                        .map_or(f64::NAN, |d| d.pdf(f64::from(x[j])))
                });
                (x, times, v, None)
            }
            Truth::FiniteWalk { alpha, sites } => {
                let times = log_times(0.1, 50.0, 30);
                let source = sites / 2;
                let v = LatticeWalk::power_law(sites, 1.0, alpha)
                    .and_then(|w| w.propagate(source, &times))
                    .unwrap_or_else(|_| Array2::from_elem((times.len(), sites), f64::NAN));
                let x = (0..sites).map(|i| i as i32 - source as i32).collect();
                (x, times, v, Some(sites))
            }
            Truth::FreeFermions { sites } => {
                let times = log_times(1.0, 20.0, 25);
                let source = sites / 2;
                let h = Array2::from_shape_fn((sites, sites), |(i, j)| {
                    if i.abs_diff(j) == 1 { 1.0 } else { 0.0 }
                });
                let v = Couplings::from_matrix(h)
                    .ok()
                    .and_then(|c| FreeFermionChain::new(&c).ok())
                    .and_then(|c| c.correlations(source, &times).ok())
                    .unwrap_or_else(|| Array2::from_elem((times.len(), sites), f64::NAN));
                let x = (0..sites).map(|i| i as i32 - source as i32).collect();
                (x, times, v, None)
            }
        }
    }

    /// The noisy copy with seed `seed`, and the chain length to give.
    #[must_use]
    pub fn copy(&self, seed: u64) -> Option<(CorrelationMap, Option<usize>)> {
        if let (Noise::Shots { states }, Truth::Stable { mu, t }) = (self.noise, self.truth) {
            return shot_copy(mu, t, states, seed).map(|m| (m, None));
        }
        let (x, times, exact, sites) = self.exact();
        let mut rng = seeded_rng(seed);
        let (n_t, n_x) = exact.dim();
        let mut values = exact.clone();
        let mut errors = Array2::zeros((n_t, n_x));
        for i in 0..n_t {
            let mut previous = 0.0;
            for j in 0..n_x {
                let (noise, sigma) = match self.noise {
                    Noise::White(s) => (s * standard_normal(&mut rng), s),
                    Noise::CorrelatedInX { sigma, rho } => {
                        let e = if j == 0 {
                            standard_normal(&mut rng)
                        } else {
                            rho * previous + (1.0 - rho * rho).sqrt() * standard_normal(&mut rng)
                        };
                        previous = e;
                        (sigma * e, sigma)
                    }
                    Noise::GrowingInTime(s) => {
                        let s = s * times[i] / times[0];
                        (s * standard_normal(&mut rng), s)
                    }
                    // A shot case with a truth other than the stable law
                    // has no copy.
                    Noise::Shots { .. } => return None,
                };
                values[(i, j)] += noise;
                errors[(i, j)] = sigma;
            }
        }
        CorrelationMap::complete(x, times, values, Some(errors))
            .ok()
            .map(|m| (m, sites))
    }
}

/// Sites of the chain of the shot case, and its bulk source window.
const SHOT_SITES: usize = 61;
const SHOT_BULK: (usize, usize) = (25, 35);

/// A map estimated from sampled shots on a chain whose pair correlations
/// are the stable density of index μ, scale t^{1/μ} (module documentation).
fn shot_copy(mu: f64, span: [f64; 2], states: usize, seed: u64) -> Option<CorrelationMap> {
    let times = log_times(span[0], span[1], 10);
    let mut rng = seeded_rng(seed);
    let mut acc = ShotAccumulator::new(SHOT_SITES).ok()?;
    let mut bits = vec![0u8; SHOT_SITES];
    let mut meas = vec![0u8; SHOT_SITES];
    let mut spins = vec![0.0; SHOT_SITES];
    for &t in &times {
        let density = StableDensity::new(mu, t.powf(1.0 / mu)).ok()?;
        // P_ij depends on i − j only: one row of values per offset.
        let kernel: Vec<f64> = (0..SHOT_SITES).map(|d| density.pdf(d as f64)).collect();
        for _ in 0..states {
            for (b, s) in bits.iter_mut().zip(spins.iter_mut()) {
                let up = rng.random::<bool>();
                *b = u8::from(up);
                *s = if up { 1.0 } else { -1.0 };
            }
            let state = acc.add_state(&bits).ok()?;
            for (i, m) in meas.iter_mut().enumerate() {
                let mean: f64 = spins
                    .iter()
                    .enumerate()
                    .map(|(j, s)| kernel[i.abs_diff(j)] * s)
                    .sum();
                let p_up = 0.5 * (1.0 + mean.clamp(-1.0, 1.0));
                *m = u8::from(rng.random::<f64>() < p_up);
            }
            acc.add_shot(state, t, &meas).ok()?;
        }
    }
    let records = acc.finish().ok()?;
    let options = EstimateOptions {
        window: SourceWindow::Bulk {
            first: SHOT_BULK.0,
            last: SHOT_BULK.1,
        },
        replicates: 30,
        seed,
        ..EstimateOptions::default()
    };
    estimate(&records, &options).ok().map(|e| e.map)
}

/// The cases of the module documentation.
#[must_use]
pub fn cases() -> Vec<Case> {
    let stable = |mu| Truth::Stable { mu, t: [1.0, 20.0] };
    vec![
        Case {
            name: "stable μ = 0.8",
            truth: stable(0.8),
            noise: Noise::White(1e-4),
        },
        Case {
            name: "stable μ = 1.3",
            truth: stable(1.3),
            noise: Noise::White(1e-4),
        },
        Case {
            name: "stable μ = 1.7",
            truth: stable(1.7),
            noise: Noise::White(1e-4),
        },
        Case {
            name: "Gaussian",
            truth: stable(2.0),
            noise: Noise::White(1e-4),
        },
        Case {
            name: "lattice walk α = 0.9, 61 sites",
            truth: Truth::FiniteWalk {
                alpha: 0.9,
                sites: 61,
            },
            noise: Noise::White(1e-4),
        },
        Case {
            name: "free fermions, 121 sites",
            truth: Truth::FreeFermions { sites: 121 },
            noise: Noise::White(1e-4),
        },
        Case {
            name: "μ = 1.3, noise correlated in x",
            truth: stable(1.3),
            noise: Noise::CorrelatedInX {
                sigma: 1e-4,
                rho: 0.6,
            },
        },
        Case {
            name: "μ = 1.3, low signal late",
            truth: stable(1.3),
            noise: Noise::GrowingInTime(2e-5),
        },
        Case {
            name: "μ = 1.3, small scales",
            truth: Truth::Stable {
                mu: 1.3,
                t: [0.3, 5.0],
            },
            noise: Noise::White(1e-4),
        },
        Case {
            name: "μ = 1.3, estimated from shots",
            truth: stable(1.3),
            noise: Noise::Shots { states: 4000 },
        },
    ]
}

/// Figures of one estimator (or the verdict) over the copies of a case.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct EstimatorFigures {
    pub estimator: String,
    /// Copies where it applied.
    pub applied: usize,
    pub bias: f64,
    pub scatter: f64,
    /// Fraction of applied copies with |z − truth| ≤ √(stat² + window²).
    pub coverage: f64,
    /// Mean of the stated total error.
    pub mean_err: f64,
}

/// All figures of one case.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct CaseSummary {
    pub case: &'static str,
    pub z_true: f64,
    pub copies: usize,
    pub estimators: Vec<EstimatorFigures>,
}

fn figures(name: String, truth: f64, samples: &[(f64, f64)]) -> EstimatorFigures {
    let n = samples.len();
    let nf = n.max(1) as f64;
    let mean = samples.iter().map(|s| s.0).sum::<f64>() / nf;
    let var = samples.iter().map(|s| (s.0 - mean).powi(2)).sum::<f64>() / (nf - 1.0).max(1.0);
    let covered = samples
        .iter()
        .filter(|(z, e)| (z - truth).abs() <= *e)
        .count();
    EstimatorFigures {
        estimator: name,
        applied: n,
        bias: mean - truth,
        scatter: var.sqrt(),
        coverage: covered as f64 / nf,
        mean_err: samples.iter().map(|s| s.1).sum::<f64>() / nf,
    }
}

/// Runs `copies` seeded copies of `case` through the analysis with
/// `bootstrap` resamples.
#[must_use]
pub fn run(case: &Case, copies: usize, bootstrap: usize) -> CaseSummary {
    let truth = case.z();
    let mut by_estimator: Vec<(String, Vec<(f64, f64)>)> = Vec::new();
    let mut push = |name: &str, z: f64, e: f64| {
        if let Some(slot) = by_estimator.iter_mut().find(|(n, _)| n == name) {
            slot.1.push((z, e));
        } else {
            by_estimator.push((name.to_string(), vec![(z, e)]));
        }
    };
    for seed in 0..copies as u64 {
        let Some((map, sites)) = case.copy(1000 + seed) else {
            continue;
        };
        let options = AnalysisOptions {
            sites,
            bootstrap,
            seed,
            ..AnalysisOptions::default()
        };
        let Ok(report) = analyze(&map, &options) else {
            continue;
        };
        for l in &report.estimators {
            if let (Standing::Applies, Some(z)) = (l.standing, l.z) {
                if l.name != "Gaussian profile" {
                    push(l.name, z.value, z.total_err());
                }
            }
        }
        let v = &report.verdict;
        if let (Some(z), Some(s)) = (v.z, v.z_err_stat) {
            push("verdict", z, s.hypot(v.z_err_sys.unwrap_or(0.0)));
        }
    }
    CaseSummary {
        case: case.name,
        z_true: truth,
        copies,
        estimators: by_estimator
            .into_iter()
            .map(|(name, samples)| figures(name, truth, &samples))
            .collect(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_shot_copy_estimates_the_stable_density() {
        // E[m_i s_j] = P_ij (the estimator's identity, model::shots): the
        // estimated map must hold f(x, t) (stable density, checked against
        // mpmath in model::stable) within its errors at most points.
        let map = shot_copy(1.3, [1.0, 20.0], 2000, 7).expect("a map");
        let (mut inside, mut total) = (0u32, 0u32);
        let errors = map.errors().expect("bootstrap errors");
        for (ti, &t) in map.times().iter().enumerate() {
            let f = StableDensity::new(1.3, t.powf(1.0 / 1.3)).expect("valid");
            for (xi, &x) in map
                .offsets()
                .iter()
                .enumerate()
                .filter(|(_, x)| x.abs() <= 10)
            {
                if !map.present()[(ti, xi)] {
                    continue;
                }
                let pull = (map.values()[(ti, xi)] - f.pdf(f64::from(x))) / errors[(ti, xi)];
                total += 1;
                inside += u32::from(pull.abs() <= 2.0);
            }
        }
        // 95 % expected within 2σ (common practice, no source).
        assert!(total > 100, "{total}");
        assert!(
            f64::from(inside) / f64::from(total) > 0.85,
            "{inside}/{total}"
        );
    }

    #[test]
    fn verdict_is_calibrated_on_stable_and_gaussian_copies() {
        // Truth from the models (z = μ of the stable density; physics notes,
        // "Transport classes"); 68 % coverage of a one-sigma interval is
        // common practice, no source. Ten copies each, no bootstrap.
        for case in cases()
            .iter()
            .filter(|c| c.name == "stable μ = 1.3" || c.name == "Gaussian")
        {
            let summary = run(case, 10, 0);
            let v = summary
                .estimators
                .iter()
                .find(|e| e.estimator == "verdict")
                .expect("verdict figures");
            assert!(v.applied >= 8, "{summary:?}");
            assert!((0.5..=0.9).contains(&v.coverage), "{summary:?}");
            assert!(v.bias.abs() < v.scatter, "{summary:?}");
        }
    }
}
