//! Automatic scaling collapse: the dynamical exponent z and the transport
//! coefficient D that collapse the rescaled curves t^(1/z) C(x,t) versus
//! x/t^(1/z) onto one master curve, with errors from the χ² profile and a
//! seeded parametric bootstrap, and the published quality measure S of
//! Houdayer & Hartmann, Phys. Rev. B 70, 014418 (2004), at the best z.
//!
//! Owns the quality measure S (also the slider's), the search for the best
//! z, the errors and the collapse report; the master-curve fit itself is in
//! `master`. Must not know how the map was windowed or where it came
//! from: callers pass the window they want collapsed.
//!
//! # The curves
//! One curve per time t > 0 of the map with at least two present points
//! (other times are dropped and counted). For a trial exponent z, with
//! a = t^(1/z), each present point (x, C ± δC) becomes
//! u = x/a, y = a C, dy = a δC.
//! One exponent scales both axes, as the sum rule Σ_x C = 1 demands: the
//! area under y(u) is then the same for every curve. Fitting separate
//! exponents for the two axes would let an unweighted measure be minimised
//! by shrinking every curve (physics notes, "Scaling-collapse quality").
//!
//! # The best z and D
//! z minimises the χ² of every point against one smooth master curve M(u)
//! refitted at each z (the profile χ²(z); see `master` for the curve, the
//! argument against the neighbourhood measure, and how D is read from the
//! master curve's scale). A coarse scan of [z_min, z_max] brackets the
//! minimum and Brent's method refines it.
//!
//! # Errors
//! With χ²/dof above 1 every error below is scaled by √(χ²/dof)
//! (`err_scale`); above [`POOR_COLLAPSE_ABOVE`] the report says `poor_fit`.
//! Without errors in the map every point gets δC = 1 and the scaling makes
//! the errors those of the scatter (`errors_known = false`).
//! - **Profile**: the interval where χ²(z) ≤ χ²_min + err_scale² (Δχ² = 1
//!   for one parameter of interest with the curve's coefficients refitted;
//!   common practice, no source); `z_err_profile` is its half width. This
//!   is a valid one-sigma error here, unlike the width of the minimum of S
//!   (whose terms are correlated and whose minimum is rugged).
//! - **Bootstrap** (recommended; D's error needs it): parametric, centred
//!   on the master-curve model's value of every point at the best z, each
//!   replicate adding seeded Gaussian noise of the (scaled) errors and
//!   refitting z (Brent over z ± 6σ, widened while the minimum sits at an
//!   open end) and D. `z_err`/`d_err` are the replicates' standard
//!   deviations, `z_interval`/`d_interval` their 16th–84th percentiles and
//!   `z_bias`/`d_bias` their mean minus the estimate. Replicates run in
//!   parallel with generators derived from the seed and the replicate's
//!   index, so results do not depend on the thread count.
//!
//! On seeded copies of stable maps (μ = 0.8, 1.3, 2, from t = 1 on integer
//! sites, where the profile is one or two sites wide) the bias of z and D
//! is below a quarter of their scatter and the one-sigma intervals cover
//! the truth in 55–70 % of copies (test
//! `noisy_copies_are_unbiased_and_their_errors_cover_about_68_percent`).
//!
//! # The quality S
//! For every point (i, j) (curve i, point j) the neighbourhood is built from
//! every *other* curve i' whose u-range contains u_ij: from each such curve
//! the two points with u_{i'k} ≤ u_ij < u_{i'k+1} (its nearest neighbours
//! on either side; when u_ij coincides with a point of curve i', as at
//! x = 0, that point and the next one above are taken, and at the upper end
//! of the range the last pair). A straight line Y(u) = α + β(u − u_ij) is
//! fitted to the neighbourhood by weighted least squares, weights 1/dy². With
//! K_n = Σ w (u − u_ij)^n and K_y = Σ w y, K_uy = Σ w (u − u_ij) y:
//! Y_ij = α = (K_2 K_y − K_1 K_uy)/Δ, dY_ij² = K_2/Δ, Δ = K_0 K_2 − K_1²
//! (the variance of the fitted intercept). Then
//! S(z) = (1/N) Σ (y_ij − Y_ij)²/(dy_ij² + dY_ij²),
//! summed over the N points that have a non-empty neighbourhood; S = +∞
//! when no point has one. The neighbourhood rule (nearest neighbours on
//! each side from every other curve, points without partners excluded) is
//! as remembered from their paper, not checked against it. S ≈ 1 for a
//! collapse consistent with the errors where every curve is densely
//! sampled; where a curve has few points across its peak the straight
//! lines miss the curvature and S exceeds 1 even at the true z.
//!
//! # Cost
//! Every evaluation of χ²(z) is O(points) (see `master`): the search takes
//! ~40 (scan, Brent, the two ends of the profile interval), a bootstrap
//! replicate 4 (the parabola through three points, then D) and rarely a
//! Brent search. S costs O(curves × points) per evaluation: it is computed
//! at the best z, and over the scan only when asked for and below
//! [`QUALITY_SCAN_BUDGET`]. Measured (`cargo bench --bench collapse`,
//! release, 2 cores): z and D without S on 101 × 60 points 19 ms, with 100
//! replicates and S over the scan 150 ms; on 401 × 400, 0.8 s and 3.3 s.
//! Time grows linearly with points × (40 + 4 × replicates).

mod master;

use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};

use rayon::prelude::*;
use thiserror::Error;

use crate::CorrelationMap;
use crate::numerics::optimize::{
    OptimizeError, Termination, minimize_bounded, root_bracketed, scan_then_brent,
};
use crate::numerics::stats::{BootstrapSummary, seeded_rng, standard_normal, summarize_bootstrap};
use master::MasterCollapse;

/// Why a collapse could not be attempted.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum CollapseError {
    #[error("need at least two times t > 0 with two or more points each; found {0}")]
    TooFewCurves(usize),
    #[error("z range [{z_min}, {z_max}] must be finite, positive and increasing")]
    BadRange { z_min: f64, z_max: f64 },
    #[error("need at least 3 scan points, got {0}")]
    TooFewScanPoints(usize),
    #[error("collapse search failed: {0}")]
    Search(#[from] OptimizeError),
    #[error("no master curve could be fitted at the best z (the data are degenerate)")]
    NoMasterCurve,
    #[error("cancelled")]
    Cancelled,
}

/// S(z) and the number of points that entered it.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct QualityValue {
    pub s: f64,
    pub n_pairs: usize,
}

/// The z-independent part of the collapse of one map: the curves, their
/// offsets, values and errors, flattened. See the module documentation.
#[derive(Debug, Clone)]
pub struct CollapseQuality {
    ln_t: Vec<f64>,
    /// Curve i holds points start[i]..start[i+1].
    start: Vec<usize>,
    x: Vec<f64>,
    c: Vec<f64>,
    err: Vec<f64>,
    errors_known: bool,
    times_dropped: usize,
    longest: usize,
}

/// Running sums of one point's neighbourhood fit.
#[derive(Debug, Clone, Copy, Default)]
struct Neighbourhood {
    k0: f64,
    k1: f64,
    k2: f64,
    ky: f64,
    kuy: f64,
    partners: u32,
}

impl Neighbourhood {
    /// Adds one bracketing pair of another curve: offsets d = u − u_j from
    /// the point, weights w = 1/dy² and w·y. Offsets relative to the point
    /// keep every sum of the size of the neighbourhood, so nothing large
    /// cancels in Δ = K_0 K_2 − K_1².
    #[inline]
    fn add_pair(&mut self, da: f64, wa: f64, wya: f64, db: f64, wb: f64, wyb: f64) {
        self.k0 += wa + wb;
        self.k1 += wa * da + wb * db;
        self.k2 += wa * da * da + wb * db * db;
        self.ky += wya + wyb;
        self.kuy += wya * da + wyb * db;
        self.partners += 1;
    }
}

impl CollapseQuality {
    /// Prepares the collapse of `map` (already windowed by the caller).
    ///
    /// # Errors
    /// [`CollapseError::TooFewCurves`] when fewer than two times t > 0 have
    /// two or more present points.
    pub fn new(map: &CorrelationMap) -> Result<Self, CollapseError> {
        let offsets = map.offsets();
        let errors = map.errors();
        let mut q = Self {
            ln_t: Vec::new(),
            start: vec![0],
            x: Vec::new(),
            c: Vec::new(),
            err: Vec::new(),
            errors_known: errors.is_some(),
            times_dropped: 0,
            longest: 0,
        };
        for (ti, &t) in map.times().iter().enumerate() {
            let present: Vec<usize> = (0..offsets.len())
                .filter(|&xi| map.present()[(ti, xi)])
                .collect();
            if t.is_nan() || t <= 0.0 || present.len() < 2 {
                q.times_dropped += 1;
                continue;
            }
            for xi in present {
                q.x.push(f64::from(offsets[xi]));
                q.c.push(map.values()[(ti, xi)]);
                q.err.push(errors.map_or(1.0, |e| e[(ti, xi)]));
            }
            q.ln_t.push(t.ln());
            q.start.push(q.x.len());
        }
        let curves = q.ln_t.len();
        if curves < 2 {
            return Err(CollapseError::TooFewCurves(curves));
        }
        q.longest = q.start.windows(2).map(|w| w[1] - w[0]).max().unwrap_or(0);
        Ok(q)
    }

    /// Number of curves (times) in the collapse.
    #[must_use]
    pub fn n_curves(&self) -> usize {
        self.ln_t.len()
    }

    /// Number of data points over all curves.
    #[must_use]
    pub fn n_points(&self) -> usize {
        self.x.len()
    }

    /// Times dropped because t ≤ 0 or fewer than two points were present.
    #[must_use]
    pub fn times_dropped(&self) -> usize {
        self.times_dropped
    }

    /// Whether the map carried errors (otherwise δC = 1 is used).
    #[must_use]
    pub fn errors_known(&self) -> bool {
        self.errors_known
    }

    /// The quality S(z) of the module documentation; +∞ when no point has a
    /// partner or z is not a positive finite number.
    #[must_use]
    pub fn quality(&self, z: f64) -> f64 {
        self.quality_value(z).s
    }

    /// S(z) with the number N of points that entered it.
    #[must_use]
    pub fn quality_value(&self, z: f64) -> QualityValue {
        self.evaluate(z, &self.c)
    }

    /// S(z) for the values `c`.
    fn evaluate(&self, z: f64, c: &[f64]) -> QualityValue {
        let infinite = QualityValue {
            s: f64::INFINITY,
            n_pairs: 0,
        };
        if !(z.is_finite() && z > 0.0) {
            return infinite;
        }
        let n = self.x.len();
        let mut u = vec![0.0; n];
        let mut y = vec![0.0; n];
        let mut w = vec![0.0; n];
        let mut wy = vec![0.0; n];
        let mut dy2 = vec![0.0; n];
        for (i, &ln_t) in self.ln_t.iter().enumerate() {
            let a = (ln_t / z).exp();
            for k in self.start[i]..self.start[i + 1] {
                u[k] = self.x[k] / a;
                y[k] = a * c[k];
                let d = a * self.err[k];
                dy2[k] = d * d;
                w[k] = 1.0 / dy2[k];
                wy[k] = w[k] * y[k];
            }
        }
        let mut acc = vec![Neighbourhood::default(); self.longest];
        let mut sum = 0.0;
        let mut n_pairs = 0usize;
        let curves = self.ln_t.len();
        for i in 0..curves {
            let (s1, e1) = (self.start[i], self.start[i + 1]);
            let u1 = &u[s1..e1];
            let acc = &mut acc[..e1 - s1];
            acc.fill(Neighbourhood::default());
            for i2 in (0..curves).filter(|&i2| i2 != i) {
                let (s2, e2) = (self.start[i2], self.start[i2 + 1]);
                let (u2, w2, wy2) = (&u[s2..e2], &w[s2..e2], &wy[s2..e2]);
                let last = u2.len() - 1;
                // Only the points of curve i inside curve i2's u-range have
                // neighbours on both sides there. Both u-lists are sorted
                // (x increases, a > 0), so one merge walk finds each
                // point's segment [u2[p], u2[p+1]]: no search per point.
                let j1 = u1.partition_point(|&v| v <= u2[last]);
                let j0 = u1.partition_point(|&v| v < u2[0]);
                let mut p = 0;
                for (nb, &uj) in acc[j0..j1].iter_mut().zip(&u1[j0..j1]) {
                    while p + 1 < last && u2[p + 1] <= uj {
                        p += 1;
                    }
                    nb.add_pair(
                        u2[p] - uj,
                        w2[p],
                        wy2[p],
                        u2[p + 1] - uj,
                        w2[p + 1],
                        wy2[p + 1],
                    );
                }
            }
            for (j, nb) in acc.iter().enumerate() {
                if nb.partners == 0 {
                    continue;
                }
                let delta = nb.k0 * nb.k2 - nb.k1 * nb.k1;
                if delta.is_nan() || delta <= 0.0 {
                    continue;
                }
                let fit = (nb.k2 * nb.ky - nb.k1 * nb.kuy) / delta;
                let fit_var = nb.k2 / delta;
                let k = s1 + j;
                sum += (y[k] - fit).powi(2) / (dy2[k] + fit_var);
                n_pairs += 1;
            }
        }
        if n_pairs == 0 {
            return infinite;
        }
        QualityValue {
            s: sum / n_pairs as f64,
            n_pairs,
        }
    }

    /// Fits z and D against a smooth master curve and reports them with
    /// their errors (see the module documentation).
    ///
    /// # Errors
    /// An invalid range or scan count, or a failure of the search.
    pub fn best(&self, options: &CollapseOptions) -> Result<CollapseReport, CollapseError> {
        self.best_with_progress(options, &|_| true)
    }

    /// As [`CollapseQuality::best`], calling `progress(fraction)` after each
    /// bootstrap replicate; when it returns `false` the replicates still
    /// running finish and [`CollapseError::Cancelled`] is returned.
    ///
    /// # Errors
    /// As [`CollapseQuality::best`], and [`CollapseError::Cancelled`].
    pub fn best_with_progress(
        &self,
        options: &CollapseOptions,
        progress: &(dyn Fn(f64) -> bool + Sync),
    ) -> Result<CollapseReport, CollapseError> {
        let (z_min, z_max) = (options.z_min, options.z_max);
        if !(z_min.is_finite() && z_max.is_finite() && z_min > 0.0 && z_min < z_max) {
            return Err(CollapseError::BadRange { z_min, z_max });
        }
        if options.scan_points < 3 {
            return Err(CollapseError::TooFewScanPoints(options.scan_points));
        }
        if !progress(0.0) {
            return Err(CollapseError::Cancelled);
        }
        let tol = options.tolerance;
        let master = MasterCollapse::new(self);
        let chi2 = |z: f64| master.chi2(z, &self.c);
        let (found, chi2_scan) = scan_then_brent(chi2, z_min, z_max, options.scan_points, tol)?;
        let z = found.x;
        let fit = master.fit(z, &self.c).ok_or(CollapseError::NoMasterCurve)?;
        let dof = master.dof();
        let chi2_dof = fit.chi2 / dof as f64;
        // A fit worse than its errors allow has its errors scaled by
        // √(χ²/dof); with unknown errors that scaling is the error itself.
        let err_scale = if self.errors_known {
            chi2_dof.sqrt().max(1.0)
        } else {
            chi2_dof.sqrt()
        };
        let poor_fit = self.errors_known && chi2_dof > POOR_COLLAPSE_ABOVE;
        let target = fit.chi2 + err_scale * err_scale;
        // The ends of the profile interval are needed to ~1 % of its width:
        // a first guess of the width from the curvature at the minimum sets
        // the root finder's tolerance.
        let h = 1e-3 * (z_max - z_min);
        let curvature =
            (chi2((z - h).max(z_min)) - 2.0 * fit.chi2 + chi2((z + h).min(z_max))) / (h * h);
        let width_guess = if curvature > 0.0 {
            (2.0 * err_scale * err_scale / curvature).sqrt()
        } else {
            z_max - z_min
        };
        let root_tol = tol.max(0.01 * width_guess);
        let lower = crossing(&chi2, z, target, z_min, &chi2_scan, root_tol)?;
        let upper = crossing(&chi2, z, target, z_max, &chi2_scan, root_tol)?;
        let z_err_profile = 0.5 * (upper - lower);
        let d = master::diffusion_constant(&fit.curve, z);

        let bootstrap = if options.bootstrap_resamples > 0 && err_scale > 0.0 {
            let centre = master.fitted_values(z, &fit.curve);
            let sigma = if z_err_profile > 0.0 && z_err_profile.is_finite() {
                z_err_profile
            } else {
                (z_max - z_min) / (options.scan_points - 1) as f64
            };
            let around = Around {
                centre: &centre,
                err_scale,
                z,
                sigma,
            };
            Some(self.bootstrap(&master, &around, options, progress)?)
        } else {
            None
        };
        let (z_boot, d_boot) = match &bootstrap {
            Some((zb, db)) => (Some(*zb), Some(*db)),
            None => (None, None),
        };
        // D's error needs the bootstrap: carried from z alone it misses the
        // scale's own noise and covered the truth in 15 % of copies.
        let (d_err, d_interval) = match (d, d_boot) {
            (Some(_), Some(b)) if b.replicates > 1 => (b.std, [b.lower, b.upper]),
            _ => (f64::NAN, [f64::NAN; 2]),
        };
        let z_scan =
            if options.quality_scan && self.n_curves() * self.n_points() <= QUALITY_SCAN_BUDGET {
                chi2_scan
                    .iter()
                    .map(|&(zs, _)| (zs, self.quality(zs)))
                    .collect()
            } else {
                Vec::new()
            };
        Ok(CollapseReport {
            z,
            z_err: z_boot.map_or(z_err_profile, |b| b.std),
            z_err_source: if z_boot.is_some() {
                "bootstrap"
            } else {
                "profile"
            },
            z_err_profile,
            z_interval: z_boot.map_or([lower, upper], |b| [b.lower, b.upper]),
            z_err_bootstrap: z_boot.map(|b| b.std),
            z_bias: z_boot.map(|b| b.mean - z),
            bootstrap: z_boot,
            d: d.unwrap_or(f64::NAN),
            d_err,
            d_interval,
            d_bias: d.zip(d_boot).map(|(d, b)| b.mean - d),
            chi2_dof,
            err_scale: err_scale.max(1.0),
            poor_fit,
            master_pieces: fit.curve_params - 3,
            quality_min: if options.quality {
                self.quality(z)
            } else {
                f64::NAN
            },
            n_points: fit.n,
            n_curves: self.n_curves(),
            times_dropped: self.times_dropped,
            errors_known: self.errors_known,
            z_scan,
            chi2_scan: chi2_scan
                .iter()
                .map(|&(zs, c)| (zs, c / dof as f64))
                .collect(),
            seed: options.seed,
            bootstrap_resamples: options.bootstrap_resamples,
            termination: found.termination,
        })
    }

    /// Parametric bootstrap around the master-curve model: each replicate
    /// adds seeded Gaussian noise of the (scaled) errors to the fitted
    /// values and refits z and D. Replicates run in parallel, each with its
    /// own generator derived from the seed, so the result does not depend
    /// on the number of threads.
    fn bootstrap(
        &self,
        master: &MasterCollapse<'_>,
        around: &Around<'_>,
        options: &CollapseOptions,
        progress: &(dyn Fn(f64) -> bool + Sync),
    ) -> Result<(BootstrapSummary, BootstrapSummary), CollapseError> {
        let total = options.bootstrap_resamples;
        let done = AtomicUsize::new(0);
        let stopped = AtomicBool::new(false);
        let pairs: Vec<(f64, f64)> = (0..total)
            .into_par_iter()
            .map(|r| {
                if stopped.load(Ordering::Relaxed) {
                    return (f64::NAN, f64::NAN);
                }
                let mut rng = seeded_rng(
                    options
                        .seed
                        .wrapping_add((r as u64 + 1).wrapping_mul(0x9E37_79B9_7F4A_7C15)),
                );
                let values: Vec<f64> = around
                    .centre
                    .iter()
                    .zip(&self.err)
                    .map(|(c, e)| c + around.err_scale * e * standard_normal(&mut rng))
                    .collect();
                let zr = refit(master, &values, around.z, around.sigma, options);
                let dr = master
                    .fit(zr, &values)
                    .and_then(|f| master::diffusion_constant(&f.curve, zr))
                    .unwrap_or(f64::NAN);
                let finished = done.fetch_add(1, Ordering::Relaxed) + 1;
                if !progress(finished as f64 / total as f64) {
                    stopped.store(true, Ordering::Relaxed);
                }
                (zr, dr)
            })
            .collect();
        if stopped.load(Ordering::Relaxed) {
            return Err(CollapseError::Cancelled);
        }
        let zs: Vec<f64> = pairs.iter().map(|p| p.0).collect();
        let ds: Vec<f64> = pairs.iter().map(|p| p.1).collect();
        Ok((summarize_bootstrap(&zs), summarize_bootstrap(&ds)))
    }
}

/// Largest curves × points for which S is also computed over the scan
/// (each evaluation costs about curves × points operations; 2·10⁶ is ~2 ms).
pub const QUALITY_SCAN_BUDGET: usize = 2_000_000;

/// Where the bootstrap replicates are centred and how wide they are.
struct Around<'a> {
    /// The model's value of every point at the best z.
    centre: &'a [f64],
    /// Factor on the data errors (√(χ²/dof) of a poor fit).
    err_scale: f64,
    z: f64,
    /// z's error from the χ² profile: the refit searches z ± 6σ.
    sigma: f64,
}

/// χ²/dof of the master-curve fit above which the collapse is called poor
/// (its errors are scaled by √(χ²/dof) from 1 up; common practice, no
/// source).
pub const POOR_COLLAPSE_ABOVE: f64 = 3.0;

/// The z between `z` and `edge` where f first reaches `target`, bracketed
/// from the scan and refined by Brent's root finder; `edge` itself when f
/// stays below the target all the way.
fn crossing(
    f: &dyn Fn(f64) -> f64,
    z: f64,
    target: f64,
    edge: f64,
    scan: &[(f64, f64)],
    tol: f64,
) -> Result<f64, CollapseError> {
    let outward = |zs: f64| if edge > z { zs > z } else { zs < z };
    let mut candidates: Vec<&(f64, f64)> = scan.iter().filter(|p| outward(p.0)).collect();
    candidates.sort_by(|a, b| (a.0 - z).abs().total_cmp(&(b.0 - z).abs()));
    let mut inner = z;
    for &&(zs, s) in &candidates {
        if s >= target {
            // The first scan point above the target may lie far out: look
            // for the crossing between the minimum and it.
            let (a, b) = if zs < inner { (zs, inner) } else { (inner, zs) };
            let root = root_bracketed(|v| f(v) - target, a, b, tol)?;
            return Ok(root.x);
        }
        inner = zs;
    }
    Ok(edge)
}

/// The best z of replicate values. First the vertex of the parabola
/// through χ² at z − σ, z, z + σ (the profile is close to a parabola
/// within a few σ of its minimum, and a replicate's minimum lies there);
/// when that is not a minimum within 2σ, Brent over z ± 6σ (clamped to the
/// range), widened while the minimum sits at an end that is not the
/// range's. NaN when the search fails.
fn refit(
    master: &MasterCollapse<'_>,
    values: &[f64],
    z: f64,
    sigma: f64,
    options: &CollapseOptions,
) -> f64 {
    if z - sigma >= options.z_min && z + sigma <= options.z_max {
        let f0 = master.chi2(z - sigma, values);
        let f1 = master.chi2(z, values);
        let f2 = master.chi2(z + sigma, values);
        let curvature = f0 - 2.0 * f1 + f2;
        if curvature > 0.0 {
            let offset = 0.5 * (f0 - f2) / curvature;
            if offset.abs() <= 2.0 {
                return z + sigma * offset;
            }
        }
    }
    let quality = |v: f64| master.chi2(v, values);
    // A hundredth of z's error is all a replicate needs.
    let tol = options.tolerance.max(0.01 * sigma);
    let mut half = 6.0 * sigma;
    for _ in 0..4 {
        let a = (z - half).max(options.z_min);
        let b = (z + half).min(options.z_max);
        let Ok(m) = minimize_bounded(quality, a, b, tol, 200) else {
            return f64::NAN;
        };
        let near = 1e-3 * (b - a);
        let at_open_end =
            (m.x - a < near && a > options.z_min) || (b - m.x < near && b < options.z_max);
        if !at_open_end {
            return m.x;
        }
        half *= 3.0;
    }
    f64::NAN
}

/// Settings of [`CollapseQuality::best`].
#[derive(Debug, Clone, PartialEq)]
pub struct CollapseOptions {
    pub z_min: f64,
    pub z_max: f64,
    /// Points of the coarse scan that brackets the minimum.
    pub scan_points: usize,
    /// Absolute tolerance on z of the Brent searches.
    pub tolerance: f64,
    /// Parametric bootstrap replicates (0: none; `z_err` is then the χ²
    /// profile's and D has no error). Each costs about 10 evaluations of
    /// the master-curve χ².
    pub bootstrap_resamples: usize,
    pub seed: u64,
    /// Compute the quality S at the best z (S costs curves × points per
    /// evaluation; quick re-fits that only need z leave it out).
    pub quality: bool,
    /// Also compute S over the scan (for the S(z) picture), while
    /// curves × points ≤ [`QUALITY_SCAN_BUDGET`].
    pub quality_scan: bool,
}

impl Default for CollapseOptions {
    fn default() -> Self {
        Self {
            z_min: 0.5,
            z_max: 3.0,
            scan_points: 26,
            tolerance: 1e-5,
            bootstrap_resamples: crate::fit::windows::DEFAULT_BOOTSTRAP,
            seed: 0,
            quality: true,
            quality_scan: true,
        }
    }
}

/// Result of an automatic collapse.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct CollapseReport {
    /// The exponent of the master-curve fit.
    pub z: f64,
    /// The recommended one-sigma error: the bootstrap's standard deviation
    /// when it ran, the χ² profile's otherwise (see `z_err_source`); scaled
    /// by `err_scale`.
    pub z_err: f64,
    /// Where `z_err` comes from: "bootstrap" or "profile".
    pub z_err_source: &'static str,
    /// Half the width of the interval where χ²(z) ≤ χ²_min + err_scale².
    pub z_err_profile: f64,
    /// The bootstrap's 16th–84th percentile interval when it ran, the χ²
    /// profile's interval otherwise.
    pub z_interval: [f64; 2],
    pub z_err_bootstrap: Option<f64>,
    /// Bootstrap mean minus the estimate.
    pub z_bias: Option<f64>,
    pub bootstrap: Option<BootstrapSummary>,
    /// D in the rate convention s(t) = (D t)^{1/z}, sites^z per time unit,
    /// read from the master curve's scale (NaN when it cannot be read).
    pub d: f64,
    /// D's one-sigma error from the bootstrap; NaN without it (carried
    /// from z alone it would miss the scale's own noise).
    pub d_err: f64,
    pub d_interval: [f64; 2],
    pub d_bias: Option<f64>,
    /// χ²/dof of the master-curve fit at the best z (with unknown errors,
    /// in units of the assumed unit error).
    pub chi2_dof: f64,
    /// Factor (≥ 1) applied to the errors because χ²/dof > 1.
    pub err_scale: f64,
    /// χ²/dof above [`POOR_COLLAPSE_ABOVE`]: the curves do not fall on one
    /// master curve within their errors.
    pub poor_fit: bool,
    /// Pieces of the master curve's spline.
    pub master_pieces: usize,
    /// The published quality S of Houdayer & Hartmann at the best z (≈ 1
    /// for a collapse consistent with the errors; NaN when not asked for).
    pub quality_min: f64,
    /// Points in the fit.
    pub n_points: usize,
    pub n_curves: usize,
    pub times_dropped: usize,
    pub errors_known: bool,
    /// The quality S at the points of the coarse scan, (z, S) pairs; empty
    /// when not asked for or above [`QUALITY_SCAN_BUDGET`].
    pub z_scan: Vec<(f64, f64)>,
    /// χ²/dof of the master-curve fit at the same points.
    pub chi2_scan: Vec<(f64, f64)>,
    pub seed: u64,
    pub bootstrap_resamples: usize,
    pub termination: Termination,
}

#[cfg(test)]
mod tests {
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
        let map =
            CorrelationMap::new(offsets, times, values, Some(errors), present).expect("valid");
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
}
