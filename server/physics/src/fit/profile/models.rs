//! The two least-squares problems of the profile fit: the Gaussian in
//! (D) and the stable law in (D, μ) with its Jacobian from the density
//! tables.

use super::*;

/// The Gaussian model: C = exp(−x²/(4Dt))/(2√(πDt)).
pub(super) struct GaussianProblem<'a> {
    pub(super) data: &'a ProfileData,
    pub(super) y: &'a [f64],
}

impl LeastSquaresProblem for GaussianProblem<'_> {
    fn n_params(&self) -> usize {
        1
    }

    fn n_residuals(&self) -> usize {
        self.y.len()
    }

    fn residuals(&self, p: &[f64], r: &mut [f64]) {
        let d = p[0];
        for (k, rk) in r.iter_mut().enumerate() {
            let dt = d * self.data.times[self.data.time_index[k]];
            let x = self.data.x[k];
            let c = (-x * x / (4.0 * dt)).exp() / (2.0 * (PI * dt).sqrt());
            *rk = (self.y[k] - c) / self.data.sigma[k];
        }
    }

    fn jacobian(&self, p: &[f64], jac: &mut [f64]) -> bool {
        let d = p[0];
        for (k, jk) in jac.iter_mut().enumerate() {
            let t = self.data.times[self.data.time_index[k]];
            let dt = d * t;
            let x = self.data.x[k];
            let c = (-x * x / (4.0 * dt)).exp() / (2.0 * (PI * dt).sqrt());
            // ∂C/∂D = C (x²/(4D²t) − 1/(2D)).
            let dc = c * (x * x / (4.0 * d * dt) - 0.5 / d);
            *jk = -dc / self.data.sigma[k];
        }
        true
    }
}

/// Half-width of the central difference in μ for ∂f/∂μ.
pub(super) const MU_STEP: f64 = 1e-4;

/// (f, ∂f/∂u, ∂f/∂μ) at unit scale for every distinct (time, |x|) node.
pub(super) type NodeValues = Vec<[f64; 3]>;

/// The stable model with parameters (D, μ).
pub(super) struct StableProblem<'a> {
    pub(super) data: &'a ProfileData,
    pub(super) y: &'a [f64],
    pub(super) mu_bounds: [f64; 2],
    pub(super) precision: Precision,
    /// Shared tables around the best fit, for bootstrap refits.
    pub(super) mu_grid: Option<&'a MuGrid>,
    pub(super) cache: RefCell<Vec<Rc<DensityTable>>>,
    pub(super) failure: RefCell<Option<ProfileError>>,
    pub(super) tables: Cell<usize>,
}

impl<'a> StableProblem<'a> {
    pub(super) fn new(
        data: &'a ProfileData,
        y: &'a [f64],
        mu_bounds: [f64; 2],
        precision: Precision,
        mu_grid: Option<&'a MuGrid>,
    ) -> Self {
        Self {
            data,
            y,
            mu_bounds,
            precision,
            mu_grid,
            cache: RefCell::new(Vec::new()),
            failure: RefCell::new(None),
            tables: Cell::new(0),
        }
    }

    /// The largest |x|/s(t) of the data at (D, μ): s is smallest at the
    /// earliest time.
    pub(super) fn u_needed(&self, d: f64, mu: f64) -> f64 {
        self.data.abs_x_max / (d * self.data.times[0]).powf(1.0 / mu)
    }

    pub(super) fn table(&self, mu: f64, u_needed: f64) -> Option<Rc<DensityTable>> {
        // A trial step with D → 0 asks for u → ∞ (or NaN): beyond
        // MAX_TABLE_U the table's power-law end carries on, so the grid
        // never needs more (an unbounded request overflowed its length).
        let u_needed = if u_needed.is_finite() {
            u_needed.min(MAX_TABLE_U)
        } else {
            MAX_TABLE_U
        };
        if let Some(t) = self
            .cache
            .borrow()
            .iter()
            .find(|t| t.mu.to_bits() == mu.to_bits() && t.grid.u_max >= u_needed)
        {
            return Some(Rc::clone(t));
        }
        let density = match unit_density(mu) {
            Ok(d) => d,
            Err(e) => {
                *self.failure.borrow_mut() = Some(e);
                return None;
            }
        };
        // A margin, so that the next few steps in D reuse the table.
        let grid = Grid::new(curvature_scale(mu), 2.0 * u_needed);
        let table = Rc::new(DensityTable::build(mu, grid, &density));
        self.tables.set(self.tables.get() + 1);
        let mut cache = self.cache.borrow_mut();
        if cache.len() >= 6 {
            cache.remove(0);
        }
        cache.push(Rc::clone(&table));
        Some(table)
    }

    pub(super) fn scales(&self, d: f64, mu: f64) -> Vec<f64> {
        self.data
            .times
            .iter()
            .map(|&t| (d * t).powf(1.0 / mu))
            .collect()
    }

    /// f (and, with `derivatives`, ∂f/∂u and ∂f/∂μ) at every node, from the
    /// shared μ grid when it covers (D, μ), otherwise from per-μ tables;
    /// `None` when the density failed.
    pub(super) fn node_values(
        &self,
        d: f64,
        mu: f64,
        s: &[f64],
        derivatives: bool,
    ) -> Option<NodeValues> {
        let need = self.u_needed(d, mu);
        let nodes = &self.data.nodes;
        if let Some(grid) = self.mu_grid.filter(|g| g.covers(mu, need)) {
            let (first, weights, slopes) = grid.stencil(mu);
            let tables = &grid.tables[first..first + 4];
            return Some(
                nodes
                    .iter()
                    .map(|&(ti, ax)| {
                        let u = ax / s[ti];
                        let at = grid.grid().locate(u);
                        let (mut g, mut dg_dw, mut dg_dmu) = (0.0, 0.0, 0.0);
                        for (q, table) in tables.iter().enumerate() {
                            let (gq, dq) = table.log_at(&at);
                            g += weights[q] * gq;
                            dg_dw += weights[q] * dq;
                            dg_dmu += slopes[q] * gq;
                        }
                        let f = g.exp();
                        [f, f * dg_dw * at.dw_du, f * dg_dmu]
                    })
                    .collect(),
            );
        }
        let table = self.table(mu, need)?;
        if !derivatives {
            return Some(
                nodes
                    .iter()
                    .map(|&(ti, ax)| [table.eval(ax / s[ti]).0, 0.0, 0.0])
                    .collect(),
            );
        }
        // Central differences for the final covariance; a forward one (half
        // the tables) for bootstrap refits, which only need the minimum.
        let (lo, hi) = match self.precision {
            Precision::Full => (
                (mu - MU_STEP).max(self.mu_bounds[0]),
                (mu + MU_STEP).min(self.mu_bounds[1]),
            ),
            Precision::Replicate if mu + MU_STEP <= self.mu_bounds[1] => (mu, mu + MU_STEP),
            Precision::Replicate => (mu - MU_STEP, mu),
        };
        let below = self.table(lo, need)?;
        let above = self.table(hi, need)?;
        Some(
            nodes
                .iter()
                .map(|&(ti, ax)| {
                    let u = ax / s[ti];
                    let (f, df) = table.eval(u);
                    [f, df, (above.eval(u).0 - below.eval(u).0) / (hi - lo)]
                })
                .collect(),
        )
    }
}

impl LeastSquaresProblem for StableProblem<'_> {
    fn n_params(&self) -> usize {
        2
    }

    fn n_residuals(&self) -> usize {
        self.y.len()
    }

    fn residuals(&self, p: &[f64], r: &mut [f64]) {
        let (d, mu) = (p[0], p[1]);
        let s = self.scales(d, mu);
        let Some(values) = self.node_values(d, mu, &s, false) else {
            r.fill(f64::NAN);
            return;
        };
        for (k, rk) in r.iter_mut().enumerate() {
            let n = self.data.node_of[k];
            let c = values[n][0] / s[self.data.nodes[n].0];
            *rk = (self.y[k] - c) / self.data.sigma[k];
        }
    }

    fn jacobian(&self, p: &[f64], jac: &mut [f64]) -> bool {
        let (d, mu) = (p[0], p[1]);
        let s = self.scales(d, mu);
        let Some(values) = self.node_values(d, mu, &s, true) else {
            jac.fill(f64::NAN);
            return true;
        };
        let ln_dt: Vec<f64> = self.data.times.iter().map(|&t| (d * t).ln()).collect();
        // ∂C/∂D = −(f + u f')/(sμD); ∂C/∂μ = (f + u f') ln(Dt)/(sμ²) + ∂f/∂μ / s.
        let derivatives: Vec<[f64; 2]> = self
            .data
            .nodes
            .iter()
            .zip(&values)
            .map(|(&(ti, ax), &[f, df, df_dmu])| {
                let sk = s[ti];
                let core = f + ax / sk * df;
                [
                    -core / (sk * mu * d),
                    core * ln_dt[ti] / (sk * mu * mu) + df_dmu / sk,
                ]
            })
            .collect();
        for k in 0..self.y.len() {
            let [dc_dd, dc_dmu] = derivatives[self.data.node_of[k]];
            let w = -1.0 / self.data.sigma[k];
            jac[2 * k] = w * dc_dd;
            jac[2 * k + 1] = w * dc_dmu;
        }
        true
    }
}
