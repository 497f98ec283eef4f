//! **Nolan integral** (Nolan, Commun. Statist.–Stoch. Models 13, 759 (1997),
//! Thm 1 with β = 0): for x > 0, μ ≠ 1,
//! f(x) = μ/(π|μ−1| x) ∫₀^{π/2} h e^{−h} dθ, h = x^{μ/(μ−1)} V(θ),
//! V(θ) = (cos θ / sin μθ)^{μ/(μ−1)} cos((μ−1)θ)/cos θ, and
//! 1 − F(x) = (1/π)∫ e^{−h} dθ (μ > 1) or (1/π)∫ (1 − e^{−h}) dθ (μ < 1).
//! ln h = a ln x + ψ(θ), a = μ/(μ−1), ψ = ln V monotone. The integrand has a
//! sharp peak at h = 1 and, near the endpoints, ln h ≈ p ln(distance) with
//! non-integer p. The substitution θ = (π/2)/(1 + e^{−t}) makes ln h close to
//! linear in t at both ends, so the integrand becomes a smooth Gumbel-like
//! bump exp(u − eᵘ) (u = ln h) times a smooth Jacobian. Because x enters only
//! through the shift a ln x, the nodes are chosen once per μ: panels in t are
//! sized so that ψ changes by ≤ 1.5 and t by ≤ 0.5 across each (≤ 4 and ≤ 1
//! in the deep slow tail, which no x visits node by node), with 12-point
//! Gauss–Legendre in every panel, covering, for every x of the middle region,
//! ln h from 5.6 down to where e^{ln h} times the remaining angle is 1e-19 of
//! the smallest integral the region needs. Evaluating at x sums one by one
//! only the nodes with −3 ≤ u ≤ 4.6 (one exponential each); the slow tail
//! u < −3, where h e^{−h} = Σ (−1)^{k−1} h^k/(k−1)!, comes from eleven
//! precomputed prefix sums of w V^k, and u > 4.6 contributes < e^{−95} per
//! unit angle (negligible even next to μ = 2). So the peak is always
//! resolved (every panel is narrow in u: "split at the peak" in effect) and a
//! point costs 60–250 exponentials. An independent globally adaptive
//! Gauss–Kronrod evaluation of the same integral, split at the peak and at
//! fixed levels of u, serves as fallback and is compared against the grid in
//! the tests (agreement ~1e-15).
//!
//!
//! The quadrature is written here rather than taken from a library: the
//! nodes depend on μ only and are reused for every x (x enters as a shift of
//! ln h), which no general-purpose integrator offers; the adaptive fallback
//! uses the crate's own Gauss–Kronrod rule with breakpoints at the peak.

use super::series::alternate;
use super::*;

/// The x-independent part of Nolan's integrand in the logistic variable t.
#[derive(Debug, Clone, Copy)]
pub(super) struct NolanKernel {
    pub(super) mu: f64,
    /// a = μ/(μ − 1).
    pub(super) a: f64,
    /// δ = 1 − μ/2 (exact), so that angles near π/2 are reduced without loss.
    pub(super) delta: f64,
    /// μ/(π |μ − 1|).
    pub(super) prefactor: f64,
}

/// θ = (π/2) σ(t), φ = π/2 − θ = (π/2) σ(−t), and dθ/dt, each computed
/// without cancellation.
#[derive(Debug, Clone, Copy)]
pub(super) struct Angles {
    pub(super) theta: f64,
    pub(super) phi: f64,
    pub(super) jac: f64,
}

impl Angles {
    pub(super) fn at(t: f64) -> Self {
        let e = (-t.abs()).exp();
        let p = 1.0 / (1.0 + e);
        let q = e * p;
        let (s, sbar) = if t >= 0.0 { (p, q) } else { (q, p) };
        Self {
            theta: FRAC_PI_2 * s,
            phi: FRAC_PI_2 * sbar,
            jac: FRAC_PI_2 * s * sbar,
        }
    }
}

impl NolanKernel {
    pub(super) fn new(mu: f64) -> Self {
        Self {
            mu,
            a: mu / (mu - 1.0),
            delta: 1.0 - 0.5 * mu,
            prefactor: mu / (PI * (mu - 1.0).abs()),
        }
    }

    /// sin(μθ), cos((μ−1)θ) and cos θ: near π/2 through φ and δ so that small
    /// values keep their relative accuracy (sin μθ → sin(πδ) as μ → 2).
    pub(super) fn trig(&self, ang: Angles) -> (f64, f64, f64) {
        let cos_theta = ang.phi.sin();
        if ang.theta < FRAC_PI_4 {
            (
                (self.mu * ang.theta).sin(),
                ((self.mu - 1.0) * ang.theta).cos(),
                cos_theta,
            )
        } else {
            let base = PI * self.delta;
            (
                (base + self.mu * ang.phi).sin(),
                (base + (self.mu - 1.0) * ang.phi).sin(),
                cos_theta,
            )
        }
    }

    /// ψ = ln V(θ) = a ln(cos θ / sin μθ) + ln(cos((μ−1)θ)/cos θ).
    pub(super) fn psi(&self, ang: Angles) -> f64 {
        let (sin_mu, cos_m1, cos_theta) = self.trig(ang);
        self.a * (cos_theta / sin_mu).ln() + (cos_m1 / cos_theta).ln()
    }

    pub(super) fn psi_at(&self, t: f64) -> f64 {
        self.psi(Angles::at(t))
    }

    /// dψ/dt (used only to size panels).
    pub(super) fn psi_slope(&self, t: f64) -> f64 {
        let ang = Angles::at(t);
        let (sin_mu, cos_m1, cos_theta) = self.trig(ang);
        let tan_theta = ang.theta.sin() / cos_theta;
        let cos_mu = if ang.theta < FRAC_PI_4 {
            (self.mu * ang.theta).cos()
        } else {
            -(PI * self.delta + self.mu * ang.phi).cos()
        };
        let sin_m1 = ((self.mu - 1.0) * ang.theta).sin();
        let d_theta = -self.a * (tan_theta + self.mu * cos_mu / sin_mu) + tan_theta
            - (self.mu - 1.0) * sin_m1 / cos_m1;
        d_theta * ang.jac
    }

    /// ψ increases with t for μ < 1 and decreases for μ > 1.
    pub(super) fn increasing(&self) -> bool {
        self.mu < 1.0
    }

    /// t in [−limit, limit] with ψ(t) = target (clamped at the ends).
    pub(super) fn solve_psi(&self, target: f64, limit: f64) -> f64 {
        let left_of_root = |t: f64| {
            let p = self.psi_at(t);
            if self.increasing() {
                p < target
            } else {
                p > target
            }
        };
        let (mut lo, mut hi) = (-limit, limit);
        if !left_of_root(lo) {
            return lo;
        }
        if left_of_root(hi) {
            return hi;
        }
        for _ in 0..60 {
            let mid = 0.5 * (lo + hi);
            if left_of_root(mid) {
                lo = mid;
            } else {
                hi = mid;
            }
        }
        0.5 * (lo + hi)
    }

    /// t beyond which ∫ h e^{−h} dθ < e^{ln_bound} for every a ln x ≤ l_max:
    /// the root of l_max + ψ(t) + ln(angle left to the slow endpoint) =
    /// ln_bound (monotone), since h e^{−h} ≤ h and h decreases towards that
    /// endpoint.
    pub(super) fn solve_slow_end(&self, l_max: f64, ln_bound: f64) -> f64 {
        let g = |t: f64| l_max + self.psi_at(t) + self.measures(t).0.ln() - ln_bound;
        // Toward the slow endpoint t decreases for μ < 1 and increases for μ > 1.
        let (mut inside, mut outside) = if self.increasing() {
            (T_LIMIT_ADAPTIVE, -T_LIMIT_ADAPTIVE)
        } else {
            (-T_LIMIT_ADAPTIVE, T_LIMIT_ADAPTIVE)
        };
        if g(outside) > 0.0 {
            return outside;
        }
        if g(inside) <= 0.0 {
            return inside;
        }
        for _ in 0..60 {
            let mid = 0.5 * (inside + outside);
            if g(mid) > 0.0 {
                inside = mid;
            } else {
                outside = mid;
            }
        }
        outside
    }

    /// Angular length between t and the endpoint where h → 0 (θ = 0 for
    /// μ < 1, θ = π/2 for μ > 1), and between t and the other endpoint.
    pub(super) fn measures(&self, t: f64) -> (f64, f64) {
        let ang = Angles::at(t);
        if self.increasing() {
            (ang.theta, ang.phi)
        } else {
            (ang.phi, ang.theta)
        }
    }
}

pub(super) fn grid_rule() -> &'static GaussLegendre {
    static RULE: OnceLock<GaussLegendre> = OnceLock::new();
    RULE.get_or_init(|| GaussLegendre::new(GRID_GL_POINTS))
}

/// k! for k = 0..=DEEP_ORDER.
pub(super) fn small_factorials() -> [f64; DEEP_ORDER + 1] {
    let mut f = [1.0; DEEP_ORDER + 1];
    for k in 1..=DEEP_ORDER {
        f[k] = f[k - 1] * k as f64;
    }
    f
}

/// Nolan's integral on nodes fixed once per μ (see the module docs).
#[derive(Debug)]
pub(super) struct NolanGrid {
    pub(super) kernel: NolanKernel,
    /// ψ at the nodes, ascending (slow end first).
    pub(super) psi: Vec<f64>,
    /// e^{ψ − ψ_ref} at the nodes (may over- or underflow far outside every
    /// window, where it is never used).
    pub(super) v_scaled: Vec<f64>,
    /// Gauss–Legendre weight × panel half-width × dθ/dt.
    pub(super) weight: Vec<f64>,
    /// Reference shift: the middle of the a ln x range the grid serves.
    pub(super) psi_ref: f64,
    /// prefix[j][k−1] = Σ_{i<j} w_i e^{k(ψ_i − ψ_ref)}, k = 1..=DEEP_ORDER.
    pub(super) prefix: Vec<[f64; DEEP_ORDER]>,
    /// Per panel boundary b (node index b·GRID_GL_POINTS): angular measure to
    /// the slow endpoint and to the steep endpoint.
    pub(super) boundary_measures: Vec<(f64, f64)>,
    pub(super) x_min: f64,
    pub(super) x_max: f64,
}

impl NolanGrid {
    /// Nodes for x in [x_min, x_max]; `i_min` is a lower bound of
    /// ∫ h e^{−h} dθ over that range, which sets how far the slow tail must
    /// reach.
    pub(super) fn build(kernel: NolanKernel, x_min: f64, x_max: f64, i_min: f64) -> Self {
        let rule = grid_rule();
        let l1 = kernel.a * x_min.ln();
        let l2 = kernel.a * x_max.ln();
        let (l_min, l_max) = (l1.min(l2), l1.max(l2));
        let t_steep = kernel.solve_psi(U_CUT + 1.0 - l_min, T_LIMIT);
        let t_slow = kernel.solve_slow_end(l_max, (GRID_SLOW_END_REL * i_min).ln());
        let (t_start, t_end) = (t_steep.min(t_slow), t_steep.max(t_slow));
        // Below this ψ no x of the grid evaluates nodes one by one (only the
        // k = 1, 2 prefix sums matter there), so panels may be coarser.
        let psi_deep = U_DEEP - l_max - 0.5;

        // Panel edges in ascending t.
        let mut edges = vec![t_start];
        let mut t = t_start;
        while t < t_end && edges.len() <= GRID_MAX_PANELS {
            let psi0 = kernel.psi_at(t);
            let deep = psi0 < psi_deep;
            let (dpsi, dt_max) = if deep {
                (GRID_DPSI_DEEP, GRID_DT_MAX_DEEP)
            } else {
                (GRID_DPSI, GRID_DT_MAX)
            };
            let slope = kernel.psi_slope(t).abs();
            let mut step = if slope > 0.0 {
                (dpsi / slope).min(dt_max)
            } else {
                dt_max
            };
            let mut t1 = (t + step).min(t_end);
            for _ in 0..40 {
                // A panel that reaches into the one-by-one zone obeys its limits.
                let psi1 = kernel.psi_at(t1);
                let fine = !deep || psi1 >= psi_deep;
                let (lim_psi, lim_dt) = if fine {
                    (GRID_DPSI, GRID_DT_MAX)
                } else {
                    (GRID_DPSI_DEEP, GRID_DT_MAX_DEEP)
                };
                if (psi1 - psi0).abs() <= 1.5 * lim_psi && t1 - t <= lim_dt * (1.0 + 1e-12) {
                    break;
                }
                step *= 0.5;
                t1 = (t + step).min(t_end);
            }
            edges.push(t1);
            t = t1;
        }
        let panels = edges.len() - 1;
        // Order panels and nodes so that ψ ascends (slow end first).
        let order: Vec<usize> = if kernel.increasing() {
            (0..panels).collect()
        } else {
            (0..panels).rev().collect()
        };
        let n = rule.nodes().len();
        let mut psi = Vec::with_capacity(panels * n);
        let mut weight = Vec::with_capacity(panels * n);
        let mut boundary_measures = Vec::with_capacity(panels + 1);
        for &p in &order {
            let (a, b) = (edges[p], edges[p + 1]);
            // The slow-side edge of this panel.
            let slow_edge = if kernel.increasing() { a } else { b };
            boundary_measures.push(kernel.measures(slow_edge));
            let c = 0.5 * (a + b);
            let h = 0.5 * (b - a);
            for i in 0..n {
                let k = if kernel.increasing() { i } else { n - 1 - i };
                let tn = c + h * rule.nodes()[k];
                let ang = Angles::at(tn);
                psi.push(kernel.psi(ang));
                weight.push(rule.weights()[k] * h * ang.jac);
            }
        }
        let last_edge = if kernel.increasing() {
            edges[panels]
        } else {
            edges[0]
        };
        boundary_measures.push(kernel.measures(last_edge));

        let psi_ref = -0.5 * (l_min + l_max);
        let v_scaled: Vec<f64> = psi.iter().map(|p| (p - psi_ref).exp()).collect();
        let mut prefix = Vec::with_capacity(psi.len() + 1);
        let mut acc = [0.0; DEEP_ORDER];
        prefix.push(acc);
        for (v, w) in v_scaled.iter().zip(&weight) {
            let mut vk = *w;
            for a in &mut acc {
                vk *= v;
                *a += vk;
            }
            prefix.push(acc);
        }
        Self {
            kernel,
            psi,
            v_scaled,
            weight,
            psi_ref,
            prefix,
            boundary_measures,
            x_min,
            x_max,
        }
    }

    pub(super) fn covers(&self, x: f64) -> bool {
        x >= self.x_min && x <= self.x_max
    }

    /// Σ_{i<j} w_i Σ_k coef[k−1] h_i^k through the prefix sums, with
    /// e_shift = e^{a ln x + ψ_ref} (so that h_i = e_shift · v_scaled[i]).
    pub(super) fn deep_sum(&self, j: usize, e_shift: f64, coef: &[f64; DEEP_ORDER]) -> f64 {
        let row = &self.prefix[j];
        let mut ek = 1.0;
        let mut s = 0.0;
        for k in 0..DEEP_ORDER {
            ek *= e_shift;
            if row[k] > 0.0 {
                s += coef[k] * ek * row[k];
            }
        }
        s
    }

    /// Index range of the nodes summed one by one at a ln x = l.
    pub(super) fn window(&self, l: f64) -> (usize, usize) {
        let j_deep = self.psi.partition_point(|&p| p + l < U_DEEP);
        let j_cut = self.psi.partition_point(|&p| p + l <= U_CUT).max(j_deep);
        (j_deep, j_cut)
    }

    /// f at x.
    pub(super) fn pdf(&self, x: f64) -> f64 {
        let l = self.kernel.a * x.ln();
        let e_shift = (l + self.psi_ref).exp();
        let (j_deep, j_cut) = self.window(l);
        let mut integral = self.deep_sum(j_deep, e_shift, &deep_pdf_coef());
        for j in j_deep..j_cut {
            let h = e_shift * self.v_scaled[j];
            integral += self.weight[j] * h * (-h).exp();
        }
        self.kernel.prefactor * integral / x
    }

    /// (f, f') at x: f' = −f/x + (μ/(π|μ−1|)) (a/x²) ∫ (1 − h) h e^{−h} dθ.
    pub(super) fn pdf_and_derivative(&self, x: f64) -> (f64, f64) {
        let l = self.kernel.a * x.ln();
        let e_shift = (l + self.psi_ref).exp();
        let (j_deep, j_cut) = self.window(l);
        let mut integral = self.deep_sum(j_deep, e_shift, &deep_pdf_coef());
        let mut deriv = self.deep_sum(j_deep, e_shift, &deep_derivative_coef());
        for j in j_deep..j_cut {
            let h = e_shift * self.v_scaled[j];
            let g = self.weight[j] * h * (-h).exp();
            integral += g;
            deriv += (1.0 - h) * g;
        }
        let f = self.kernel.prefactor * integral / x;
        let df = -f / x + self.kernel.prefactor * self.kernel.a * deriv / (x * x);
        (f, df)
    }

    /// 1 − F(x), split at the panel boundary nearest to h = 1.
    pub(super) fn sf(&self, x: f64) -> f64 {
        let n = GRID_GL_POINTS;
        let l = self.kernel.a * x.ln();
        let e_shift = (l + self.psi_ref).exp();
        let panels = self.boundary_measures.len() - 1;
        let j0 = self.psi.partition_point(|&p| p + l < 0.0);
        let b = ((j0 + n / 2) / n).min(panels);
        let split = b * n;
        let (slow_measure, steep_measure) = self.boundary_measures[b];
        let (j_deep, j_cut) = self.window(l);
        let j_deep = j_deep.min(split);
        let j_cut = j_cut.max(split);
        let mut slow = self.deep_sum(j_deep, e_shift, &deep_cdf_coef());
        for j in j_deep..split {
            let h = e_shift * self.v_scaled[j];
            slow += self.weight[j] * (-(-h).exp_m1());
        }
        let mut steep = 0.0;
        for j in split..j_cut {
            let h = e_shift * self.v_scaled[j];
            steep += self.weight[j] * (-h).exp();
        }
        if self.kernel.increasing() {
            (slow + steep_measure - steep) / PI
        } else {
            (slow_measure - slow + steep) / PI
        }
    }
}

/// h e^{−h} = Σ_{k≥1} (−1)^{k−1} h^k/(k−1)!.
pub(super) fn deep_pdf_coef() -> [f64; DEEP_ORDER] {
    let f = small_factorials();
    std::array::from_fn(|i| alternate(i) / f[i])
}

/// (1 − h) h e^{−h} = Σ_{k≥1} (−1)^{k−1} h^k (1/(k−1)! + 1/(k−2)!).
pub(super) fn deep_derivative_coef() -> [f64; DEEP_ORDER] {
    let f = small_factorials();
    std::array::from_fn(|i| alternate(i) * (1.0 / f[i] + if i >= 1 { 1.0 / f[i - 1] } else { 0.0 }))
}

/// 1 − e^{−h} = Σ_{k≥1} (−1)^{k−1} h^k/k!.
pub(super) fn deep_cdf_coef() -> [f64; DEEP_ORDER] {
    let f = small_factorials();
    std::array::from_fn(|i| alternate(i) / f[i + 1])
}

/// Breakpoints in t at fixed levels of u = ln h, for the adaptive fallback.
pub(super) fn nolan_breaks(kernel: &NolanKernel, l: f64, levels: &[f64]) -> Vec<f64> {
    let mut b: Vec<f64> = levels
        .iter()
        .map(|&u| kernel.solve_psi(u - l, T_LIMIT_ADAPTIVE))
        .collect();
    b.sort_by(f64::total_cmp);
    b.dedup_by(|p, q| (*p - *q).abs() < 1e-12);
    b
}

/// h e^{−h} · dθ/dt at t (0 where h is astronomically large).
pub(super) fn nolan_pdf_integrand(kernel: &NolanKernel, l: f64, t: f64) -> f64 {
    let ang = Angles::at(t);
    let u = l + kernel.psi(ang);
    if u > 50.0 {
        return 0.0;
    }
    let h = u.exp();
    ang.jac * h * (-h).exp()
}

pub(super) const ADAPTIVE_LEVELS: [f64; 9] = [
    U_SLOW_END,
    -25.0,
    -12.0,
    -5.0,
    -1.5,
    0.0,
    1.5,
    U_CUT,
    U_CUT + 2.0,
];

/// Nolan's pdf integral by adaptive Gauss–Kronrod on the whole t-range, split
/// at the peak (u = 0) and at fixed levels of u.
pub(super) fn nolan_adaptive_pdf(kernel: &NolanKernel, x: f64) -> f64 {
    let l = kernel.a * x.ln();
    let breaks = nolan_breaks(kernel, l, &ADAPTIVE_LEVELS);
    let r = integrate_adaptive(
        |t| nolan_pdf_integrand(kernel, l, t),
        &breaks,
        1e-14,
        0.0,
        4000,
    );
    kernel.prefactor * r.value / x
}

/// f'(x) from the same integral: −f/x + (μ/(π|μ−1|)) a/x² ∫ (1 − h) h e^{−h} dθ.
pub(super) fn nolan_adaptive_dpdf(kernel: &NolanKernel, x: f64) -> f64 {
    let l = kernel.a * x.ln();
    let breaks = nolan_breaks(kernel, l, &ADAPTIVE_LEVELS);
    let d = integrate_adaptive(
        |t| {
            let ang = Angles::at(t);
            let u = l + kernel.psi(ang);
            if u > 50.0 {
                return 0.0;
            }
            let h = u.exp();
            ang.jac * (1.0 - h) * h * (-h).exp()
        },
        &breaks,
        1e-14,
        0.0,
        4000,
    );
    let f = nolan_adaptive_pdf(kernel, x);
    -f / x + kernel.prefactor * kernel.a * d.value / (x * x)
}

/// 1 − F(x) from Nolan's CDF integral by adaptive Gauss–Kronrod, split at the
/// peak into the part where h < 1 (integrand 1 − e^{−h}) and the rest (e^{−h}).
pub(super) fn nolan_adaptive_sf(kernel: &NolanKernel, x: f64) -> f64 {
    let l = kernel.a * x.ln();
    let t_peak = kernel.solve_psi(-l, T_LIMIT_ADAPTIVE);
    let (slow_measure, steep_measure) = kernel.measures(t_peak);
    let slow_levels = [U_SLOW_END, -25.0, -12.0, -5.0, -1.5, 0.0];
    let steep_levels = [0.0, 1.5, U_CUT, U_CUT + 2.0];
    let slow_breaks = nolan_breaks(kernel, l, &slow_levels);
    let steep_breaks = nolan_breaks(kernel, l, &steep_levels);
    let slow = integrate_adaptive(
        |t| {
            let ang = Angles::at(t);
            let h = (l + kernel.psi(ang)).exp();
            ang.jac * (-(-h).exp_m1())
        },
        &slow_breaks,
        1e-14,
        0.0,
        4000,
    );
    let steep = integrate_adaptive(
        |t| {
            let ang = Angles::at(t);
            let u = l + kernel.psi(ang);
            if u > 50.0 {
                return 0.0;
            }
            ang.jac * (-(u.exp())).exp()
        },
        &steep_breaks,
        1e-14,
        0.0,
        4000,
    );
    if kernel.increasing() {
        (slow.value + steep_measure - steep.value) / PI
    } else {
        (slow_measure - slow.value + steep.value) / PI
    }
}
