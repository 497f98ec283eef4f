//! The stable density at unit scale as a table: ln f_μ and its slopes on a
//! grid in asinh(u), interpolated by clamped cubic splines, and the grid in
//! μ whose neighbours give ∂f/∂μ (module documentation of `profile`).

use super::*;

/// ln f_μ(u) and d ln f_μ/du at unit scale, for u ≥ 0.
pub(super) struct UnitDensity {
    pub(super) ln_f: Box<dyn Fn(f64) -> f64>,
    pub(super) d_ln_f: Box<dyn Fn(f64) -> f64>,
}

/// f_μ from the stable-density model (module documentation).
pub(super) fn unit_density(mu: f64) -> Result<UnitDensity, ProfileError> {
    let density = StableDensity::standard(mu).map_err(|e| ProfileError::Density {
        mu,
        reason: e.to_string(),
    })?;
    let slope = density.clone();
    Ok(UnitDensity {
        ln_f: Box::new(move |u| density.log_pdf(u)),
        d_ln_f: Box::new(move |u| slope.d_pdf_dx(u) / slope.pdf(u)),
    })
}

/// Largest |x|/s a density table covers; beyond it the table continues
/// its end slope (the power-law tail).
pub(super) const MAX_TABLE_U: f64 = 1e8;

/// Step of the interpolation grid in w = asinh(u/c).
pub(super) const TABLE_STEP: f64 = 0.03;

/// c = min(1, √(2Γ(1/μ)/Γ(3/μ))): the curvature scale of f_μ at 0
/// (f_μ(u) ≈ f_μ(0)(1 − u²/c²) from the small-x series).
pub(super) fn curvature_scale(mu: f64) -> f64 {
    (2.0 * gamma(1.0 / mu) / gamma(3.0 / mu)).sqrt().min(1.0)
}

/// The uniform grid w_k = k h, u = c sinh w, shared by tables of one fit.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(super) struct Grid {
    pub(super) scale: f64,
    pub(super) step: f64,
    pub(super) intervals: usize,
    pub(super) u_max: f64,
}

/// Where u falls on a [`Grid`]: interval j and the weights a = 1 − b, b,
/// or the distance in w beyond the last node.
#[derive(Debug, Clone, Copy)]
pub(super) struct Location {
    pub(super) j: usize,
    pub(super) a: f64,
    pub(super) b: f64,
    pub(super) beyond: Option<f64>,
    /// dw/du = 1/√(c² + u²).
    pub(super) dw_du: f64,
}

impl Grid {
    pub(super) fn new(scale: f64, u_max: f64) -> Self {
        let u_max = u_max.max(4.0 * scale);
        let w_max = (u_max / scale).asinh();
        let intervals = ((w_max / TABLE_STEP).ceil() as usize).max(16);
        Self {
            scale,
            step: w_max / intervals as f64,
            intervals,
            u_max,
        }
    }

    pub(super) fn locate(&self, u: f64) -> Location {
        let w = (u / self.scale).asinh();
        let pos = w / self.step;
        let dw_du = 1.0 / self.scale.hypot(u);
        if pos >= self.intervals as f64 {
            return Location {
                j: self.intervals,
                a: 0.0,
                b: 1.0,
                beyond: Some(w - self.intervals as f64 * self.step),
                dw_du,
            };
        }
        let j = pos as usize;
        let b = pos - j as f64;
        Location {
            j,
            a: 1.0 - b,
            b,
            beyond: None,
            dw_du,
        }
    }
}

/// Clamped cubic spline of g(w) = ln f_μ(c sinh w) on a [`Grid`] (module
/// documentation).
#[derive(Debug)]
pub(super) struct DensityTable {
    pub(super) mu: f64,
    pub(super) grid: Grid,
    pub(super) g: Vec<f64>,
    pub(super) second: Vec<f64>,
    pub(super) end_slope: f64,
}

impl DensityTable {
    pub(super) fn build(mu: f64, grid: Grid, density: &UnitDensity) -> Self {
        let (c, h) = (grid.scale, grid.step);
        let g: Vec<f64> = (0..=grid.intervals)
            .map(|k| (density.ln_f)(c * (k as f64 * h).sinh()))
            .collect();
        // dg/dw = (d ln f/du)·du/dw with du/dw = c cosh w at the far end;
        // the one-sided difference stands in if that slope is not finite.
        let w_end = grid.intervals as f64 * h;
        let exact_end = (density.d_ln_f)(c * w_end.sinh()) * c * w_end.cosh();
        let end_slope = if exact_end.is_finite() {
            exact_end
        } else {
            one_sided_slope(&g, h)
        };
        let second = clamped_spline(&g, h, 0.0, end_slope);
        Self {
            mu,
            grid,
            g,
            second,
            end_slope,
        }
    }

    /// (g, dg/dw) at a location of this table's grid; beyond the last node
    /// the end's straight line in w (a power law in u).
    pub(super) fn log_at(&self, at: &Location) -> (f64, f64) {
        if let Some(beyond) = at.beyond {
            return (
                self.g[self.grid.intervals] + self.end_slope * beyond,
                self.end_slope,
            );
        }
        let (j, a, b, h) = (at.j, at.a, at.b, self.grid.step);
        let (g0, g1, m0, m1) = (self.g[j], self.g[j + 1], self.second[j], self.second[j + 1]);
        let g = a * g0 + b * g1 + ((a * a * a - a) * m0 + (b * b * b - b) * m1) * h * h / 6.0;
        let dg =
            (g1 - g0) / h - (3.0 * a * a - 1.0) / 6.0 * h * m0 + (3.0 * b * b - 1.0) / 6.0 * h * m1;
        (g, dg)
    }

    /// (f(u), f'(u)) for u ≥ 0.
    pub(super) fn eval(&self, u: f64) -> (f64, f64) {
        let at = self.grid.locate(u);
        let (g, dg) = self.log_at(&at);
        let f = g.exp();
        (f, f * dg * at.dw_du)
    }
}

/// g'(w_end) by the third-order one-sided difference
/// (11g_K − 18g_{K−1} + 9g_{K−2} − 2g_{K−3})/(6h).
pub(super) fn one_sided_slope(g: &[f64], h: f64) -> f64 {
    let k = g.len() - 1;
    (11.0 * g[k] - 18.0 * g[k - 1] + 9.0 * g[k - 2] - 2.0 * g[k - 3]) / (6.0 * h)
}

/// Second derivatives of the clamped cubic spline through (k h, g_k) with
/// end slopes `d0`, `d1` (tridiagonal system, Thomas algorithm; de Boor, "A
/// Practical Guide to Splines", ch. IV).
pub(super) fn clamped_spline(g: &[f64], h: f64, d0: f64, d1: f64) -> Vec<f64> {
    let n = g.len();
    let mut diag = vec![4.0; n];
    let mut rhs = vec![0.0; n];
    diag[0] = 2.0;
    diag[n - 1] = 2.0;
    rhs[0] = 6.0 / h * ((g[1] - g[0]) / h - d0);
    rhs[n - 1] = 6.0 / h * (d1 - (g[n - 1] - g[n - 2]) / h);
    for k in 1..n - 1 {
        rhs[k] = 6.0 / (h * h) * (g[k + 1] - 2.0 * g[k] + g[k - 1]);
    }
    // Off-diagonals are all 1.
    for k in 1..n {
        let w = 1.0 / diag[k - 1];
        diag[k] -= w;
        rhs[k] -= w * rhs[k - 1];
    }
    let mut m = vec![0.0; n];
    m[n - 1] = rhs[n - 1] / diag[n - 1];
    for k in (0..n - 1).rev() {
        m[k] = (rhs[k] - m[k + 1]) / diag[k];
    }
    m
}

/// Tables at equally spaced μ around a best fit, interpolated in μ by
/// four-point Lagrange polynomials: the bootstrap's replicates move μ by
/// about its standard error, and this grid spares each of them new density
/// tables (module documentation, "The bootstrap").
#[derive(Debug)]
pub(super) struct MuGrid {
    pub(super) first: f64,
    pub(super) delta: f64,
    pub(super) tables: Vec<DensityTable>,
}

impl MuGrid {
    /// Tables over μ̂ ± 6σ_μ (within the bounds; at least 1e-3 wide), at
    /// 6–25 equally spaced μ no farther apart than 0.01 where possible, on
    /// one grid in u covering `u_max`. `None` when σ_μ is not finite.
    pub(super) fn build(
        mu: f64,
        mu_err: f64,
        u_max: f64,
        bounds: [f64; 2],
    ) -> Result<Option<Self>, ProfileError> {
        if !(mu_err.is_finite() && mu.is_finite()) {
            return Ok(None);
        }
        let half = (6.0 * mu_err).max(5e-4);
        let mut lo = (mu - half).max(bounds[0]);
        let mut hi = (mu + half).min(bounds[1]);
        if hi - lo < 1e-3 {
            // Against a bound: extend inwards.
            if lo <= bounds[0] {
                hi = (lo + 1e-3).min(bounds[1]);
            } else {
                lo = (hi - 1e-3).max(bounds[0]);
            }
        }
        let count = (((hi - lo) / 0.01).ceil() as usize + 1).clamp(6, 25);
        let delta = (hi - lo) / (count - 1) as f64;
        let grid = Grid::new(curvature_scale(mu), u_max);
        let tables = (0..count)
            .map(|k| {
                let m = lo + k as f64 * delta;
                unit_density(m).map(|d| DensityTable::build(m, grid, &d))
            })
            .collect::<Result<Vec<_>, _>>()?;
        Ok(Some(Self {
            first: lo,
            delta,
            tables,
        }))
    }

    pub(super) fn grid(&self) -> &Grid {
        &self.tables[0].grid
    }

    pub(super) fn covers(&self, mu: f64, u_needed: f64) -> bool {
        let last = self.first + self.delta * (self.tables.len() - 1) as f64;
        mu >= self.first && mu <= last && u_needed <= self.grid().u_max
    }

    /// The four tables around μ and their Lagrange weights and
    /// μ-derivatives of the weights.
    pub(super) fn stencil(&self, mu: f64) -> (usize, [f64; 4], [f64; 4]) {
        let n = self.tables.len();
        let pos = (mu - self.first) / self.delta;
        let k = (pos.floor() as usize).clamp(1, n - 3);
        let tau = pos - k as f64;
        let weights = [
            -tau * (tau - 1.0) * (tau - 2.0) / 6.0,
            (tau + 1.0) * (tau - 1.0) * (tau - 2.0) / 2.0,
            -(tau + 1.0) * tau * (tau - 2.0) / 2.0,
            (tau + 1.0) * tau * (tau - 1.0) / 6.0,
        ];
        let slopes = [
            -(3.0 * tau * tau - 6.0 * tau + 2.0) / 6.0 / self.delta,
            (3.0 * tau * tau - 4.0 * tau - 1.0) / 2.0 / self.delta,
            -(3.0 * tau * tau - 2.0 * tau - 2.0) / 2.0 / self.delta,
            (3.0 * tau * tau - 1.0) / 6.0 / self.delta,
        ];
        (k - 1, weights, slopes)
    }
}
