//! The two power series of the symmetric stable density (region map in the
//! parent module) and the standard law for μ ∉ {1, 2}, which chooses per x
//! between them, the near-Cauchy band and the Nolan grid.
//!
//! A series is used at x only if its terms fall below 1e-17 of the partial
//! sum (two in a row) within 160 terms and the sum of |terms| exceeds the
//! result by at most a factor 20; the limits x_small and x_large are found by
//! bisection on these criteria when the density is built.

use super::near_cauchy::NearCauchy;
use super::nolan::{
    NolanGrid, NolanKernel, nolan_adaptive_dpdf, nolan_adaptive_pdf, nolan_adaptive_sf,
};
use super::*;
/// A series sum with what is needed to judge it.
#[derive(Debug, Clone, Copy)]
pub(super) struct SeriesSum {
    pub(super) value: f64,
    pub(super) abs_sum: f64,
    pub(super) converged: bool,
}

/// Σ_{n < len} coef(n) yⁿ with the convergence rule of the module docs.
/// For an asymptotic series, a term 1e3 times larger than the smallest one
/// so far means divergence: stop early.
pub(super) fn sum_series(
    len: usize,
    y: f64,
    asymptotic: bool,
    coef: impl Fn(usize) -> f64,
) -> SeriesSum {
    let mut power = 1.0;
    let mut value = 0.0;
    let mut abs_sum = 0.0;
    let mut small_run = 0;
    let mut smallest = f64::INFINITY;
    for n in 0..len {
        let t = coef(n) * power;
        if !t.is_finite() {
            break;
        }
        value += t;
        let at = t.abs();
        abs_sum += at;
        if at <= SERIES_TOL * value.abs() {
            small_run += 1;
            if small_run >= 2 {
                return SeriesSum {
                    value,
                    abs_sum,
                    converged: true,
                };
            }
        } else {
            small_run = 0;
            if at < smallest {
                smallest = at;
            } else if asymptotic && at > 1e3 * smallest {
                break;
            }
        }
        power *= y;
    }
    SeriesSum {
        value,
        abs_sum,
        converged: false,
    }
}

pub(super) fn alternate(n: usize) -> f64 {
    if n % 2 == 0 { 1.0 } else { -1.0 }
}

#[derive(Debug, Clone, Copy)]
pub(super) struct Limits {
    pub(super) pdf_small: f64,
    pub(super) pdf_large: f64,
    pub(super) cdf_small: f64,
    pub(super) cdf_large: f64,
}

#[derive(Debug)]
pub(super) enum Middle {
    Empty,
    Taylor(NearCauchy),
    Grid(NolanGrid),
}

/// The standard law for μ ∉ {1, 2}.
#[derive(Debug)]
pub(super) struct GeneralStable {
    pub(super) mu: f64,
    /// c_n = Γ((2n+1)/μ) / (π μ (2n)!), n = 0, 1, …
    pub(super) small: Vec<f64>,
    /// d_n = Γ(nμ+1)/n! · sin(nπμ/2)/π, n = 1, 2, … (stored at n − 1).
    pub(super) large: Vec<f64>,
    pub(super) limits: Limits,
    pub(super) middle: Middle,
    pub(super) kernel: NolanKernel,
}

impl GeneralStable {
    pub(super) fn new(mu: f64) -> Self {
        let mut small = Vec::with_capacity(SERIES_TERMS);
        for n in 0..SERIES_TERMS {
            let m = 2.0 * n as f64 + 1.0;
            let c = gamma_ratio(m / mu, m) / (PI * mu);
            if !(c.is_finite() && c < 1e300) {
                break;
            }
            small.push(c);
        }
        let mut large = Vec::with_capacity(SERIES_TERMS);
        for n in 1..=SERIES_TERMS {
            let nf = n as f64;
            let d = gamma_ratio(nf * mu + 1.0, nf + 1.0) * sin_pi_product(nf, 0.5 * mu) / PI;
            if !(d.is_finite() && d.abs() < 1e300) {
                break;
            }
            large.push(d);
        }
        let kernel = NolanKernel::new(mu);
        let mut g = Self {
            mu,
            small,
            large,
            limits: Limits {
                pdf_small: 0.0,
                pdf_large: f64::INFINITY,
                cdf_small: 0.0,
                cdf_large: f64::INFINITY,
            },
            middle: Middle::Empty,
            kernel,
        };
        g.limits = Limits {
            pdf_small: upper_limit(|x| g.accept_small_pdf(x)),
            pdf_large: lower_limit(|x| g.accept_large_pdf(x)),
            cdf_small: upper_limit(|x| g.accept_small_cdf(x)),
            cdf_large: lower_limit(|x| g.accept_large_sf(x)),
        };
        let x_lo = g.limits.pdf_small.min(g.limits.cdf_small);
        let x_hi = g.limits.pdf_large.max(g.limits.cdf_large);
        if x_lo < x_hi {
            g.middle = if (mu - 1.0).abs() <= NEAR_CAUCHY_BAND {
                Middle::Taylor(NearCauchy::new(mu - 1.0))
            } else if x_hi.is_finite() && x_lo > 0.0 {
                let (xa, xb) = (x_lo / GRID_X_MARGIN, x_hi * GRID_X_MARGIN);
                // x f(x) is unimodal, so over [xa, xb] the integral
                // I = x f(x)/prefactor is smallest at an end, where a series holds.
                let fa = g.small_pdf(xa).value;
                let fb = g.large_pdf_scaled(xb).value * xb.powf(-mu - 1.0);
                let i_min = (xa * fa).min(xb * fb) / kernel.prefactor;
                let i_min = if i_min.is_finite() && i_min > 0.0 {
                    i_min.max(1e-280)
                } else {
                    1e-280
                };
                Middle::Grid(NolanGrid::build(kernel, xa, xb, i_min))
            } else {
                Middle::Empty
            };
        }
        g
    }

    pub(super) fn asymptotic_small(&self) -> bool {
        self.mu < 1.0
    }

    pub(super) fn asymptotic_large(&self) -> bool {
        self.mu > 1.0
    }

    /// Σ (−1)ⁿ c_n x²ⁿ = f(x).
    pub(super) fn small_pdf(&self, x: f64) -> SeriesSum {
        sum_series(self.small.len(), x * x, self.asymptotic_small(), |n| {
            alternate(n) * self.small[n]
        })
    }

    /// x Σ (−1)ⁿ c_n x²ⁿ/(2n+1) = F(x) − 1/2.
    pub(super) fn small_cdf(&self, x: f64) -> SeriesSum {
        let s = sum_series(self.small.len(), x * x, self.asymptotic_small(), |n| {
            alternate(n) * self.small[n] / (2.0 * n as f64 + 1.0)
        });
        SeriesSum {
            value: s.value * x,
            abs_sum: s.abs_sum * x,
            converged: s.converged,
        }
    }

    /// x Σ_{m≥0} (−1)^{m+1} 2(m+1) c_{m+1} x^{2m} = f'(x).
    pub(super) fn small_dpdf(&self, x: f64) -> SeriesSum {
        let len = self.small.len().saturating_sub(1);
        let s = sum_series(len, x * x, self.asymptotic_small(), |m| {
            -alternate(m) * 2.0 * (m as f64 + 1.0) * self.small[m + 1]
        });
        SeriesSum {
            value: s.value * x,
            abs_sum: s.abs_sum * x,
            converged: s.converged,
        }
    }

    /// S = Σ_{m≥0} (−1)^m d_{m+1} y^m with y = x^{−μ}; f = S x^{−μ−1}.
    pub(super) fn large_pdf_scaled(&self, x: f64) -> SeriesSum {
        let y = x.powf(-self.mu);
        sum_series(self.large.len(), y, self.asymptotic_large(), |m| {
            alternate(m) * self.large[m]
        })
    }

    /// S = Σ_{m≥0} (−1)^m d_{m+1}/((m+1)μ) y^m; 1 − F = y S.
    pub(super) fn large_sf_scaled(&self, x: f64) -> SeriesSum {
        let y = x.powf(-self.mu);
        sum_series(self.large.len(), y, self.asymptotic_large(), |m| {
            alternate(m) * self.large[m] / ((m as f64 + 1.0) * self.mu)
        })
    }

    /// S = Σ_{m≥0} (−1)^m d_{m+1} ((m+1)μ + 1) y^m; f' = −S x^{−μ−2}.
    pub(super) fn large_dpdf_scaled(&self, x: f64) -> SeriesSum {
        let y = x.powf(-self.mu);
        sum_series(self.large.len(), y, self.asymptotic_large(), |m| {
            alternate(m) * self.large[m] * ((m as f64 + 1.0) * self.mu + 1.0)
        })
    }

    /// ln of the part of f beyond all orders of the asymptotic large-x series
    /// (μ > 1): −(μ−1) μ^{−a} x^a, a = μ/(μ−1) (saddle point of the Fourier
    /// integral; exactly −x²/4 at μ = 2).
    pub(super) fn ln_beyond_all_orders(&self, x: f64) -> f64 {
        let a = self.kernel.a;
        -(self.mu - 1.0) * (a * (x.ln() - self.mu.ln())).exp()
    }

    pub(super) fn accept_small_pdf(&self, x: f64) -> bool {
        let s = self.small_pdf(x);
        s.converged && s.value > 0.0 && s.abs_sum <= SERIES_LOSS_MAX * s.value
    }

    pub(super) fn accept_small_cdf(&self, x: f64) -> bool {
        let s = self.small_cdf(x);
        let tail = 0.5 - s.value;
        s.converged && tail > 0.0 && s.abs_sum <= SERIES_LOSS_MAX * tail
    }

    pub(super) fn accept_large_pdf(&self, x: f64) -> bool {
        let s = self.large_pdf_scaled(x);
        if !(s.converged && s.value > 0.0 && s.abs_sum <= SERIES_LOSS_MAX * s.value) {
            return false;
        }
        if self.mu <= 1.0 {
            return true;
        }
        let ln_f = s.value.ln() - (self.mu + 1.0) * x.ln();
        self.ln_beyond_all_orders(x) <= BEYOND_ALL_ORDERS_TOL.ln() + ln_f
    }

    pub(super) fn accept_large_sf(&self, x: f64) -> bool {
        let s = self.large_sf_scaled(x);
        if !(s.converged && s.value > 0.0 && s.abs_sum <= SERIES_LOSS_MAX * s.value) {
            return false;
        }
        if self.mu <= 1.0 {
            return true;
        }
        let ln_sf = s.value.ln() - self.mu * x.ln();
        self.ln_beyond_all_orders(x) <= BEYOND_ALL_ORDERS_TOL.ln() + ln_sf
    }

    pub(super) fn pdf(&self, x: f64) -> (f64, StableMethod) {
        if x == 0.0 {
            return (self.small[0], StableMethod::SmallSeries);
        }
        if x <= self.limits.pdf_small {
            let s = self.small_pdf(x);
            if s.converged {
                return (s.value, StableMethod::SmallSeries);
            }
        }
        if x >= self.limits.pdf_large {
            let s = self.large_pdf_scaled(x);
            if s.converged {
                return (s.value * x.powf(-self.mu - 1.0), StableMethod::LargeSeries);
            }
        }
        self.middle_pdf(x)
    }

    pub(super) fn middle_pdf(&self, x: f64) -> (f64, StableMethod) {
        match &self.middle {
            Middle::Taylor(t) => (t.pdf(x), StableMethod::NearCauchyTaylor),
            Middle::Grid(g) if g.covers(x) => (g.pdf(x), StableMethod::NolanGrid),
            _ => (
                nolan_adaptive_pdf(&self.kernel, x),
                StableMethod::NolanAdaptive,
            ),
        }
    }

    pub(super) fn log_pdf(&self, x: f64) -> f64 {
        if x >= self.limits.pdf_large {
            let s = self.large_pdf_scaled(x);
            if s.converged {
                return s.value.ln() - (self.mu + 1.0) * x.ln();
            }
        }
        self.pdf(x).0.ln()
    }

    pub(super) fn d_pdf_dx(&self, x: f64) -> f64 {
        if x == 0.0 {
            return 0.0;
        }
        if x <= self.limits.pdf_small {
            let s = self.small_dpdf(x);
            if s.converged {
                return s.value;
            }
        }
        if x >= self.limits.pdf_large {
            let s = self.large_dpdf_scaled(x);
            if s.converged {
                return -s.value * x.powf(-self.mu - 2.0);
            }
        }
        match &self.middle {
            Middle::Taylor(t) => t.pdf_and_derivative(x).1,
            Middle::Grid(g) if g.covers(x) => g.pdf_and_derivative(x).1,
            _ => nolan_adaptive_dpdf(&self.kernel, x),
        }
    }

    pub(super) fn sf(&self, x: f64) -> f64 {
        if x <= self.limits.cdf_small {
            let s = self.small_cdf(x);
            if s.converged {
                return 0.5 - s.value;
            }
        }
        if x >= self.limits.cdf_large {
            let s = self.large_sf_scaled(x);
            if s.converged {
                return s.value * x.powf(-self.mu);
            }
        }
        match &self.middle {
            Middle::Taylor(t) => t.sf(x),
            Middle::Grid(g) if g.covers(x) => g.sf(x),
            _ => nolan_adaptive_sf(&self.kernel, x),
        }
    }
}

/// Largest x in [1e-30, 1e3] accepted by `accept`, assuming acceptance for
/// all smaller x (0 if even 1e-30 is rejected).
pub(super) fn upper_limit(accept: impl Fn(f64) -> bool) -> f64 {
    let mut lo = LIMIT_SEARCH_MIN.ln();
    let mut hi = LIMIT_SEARCH_SMALL_MAX.ln();
    if !accept(lo.exp()) {
        return 0.0;
    }
    if accept(hi.exp()) {
        return hi.exp();
    }
    for _ in 0..LIMIT_BISECTIONS {
        let mid = 0.5 * (lo + hi);
        if accept(mid.exp()) {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    lo.exp()
}

/// Smallest x in [1e-30, 1e30] accepted by `accept`, assuming acceptance for
/// all larger x (∞ if even 1e30 is rejected).
pub(super) fn lower_limit(accept: impl Fn(f64) -> bool) -> f64 {
    let mut lo = LIMIT_SEARCH_MIN.ln();
    let mut hi = LIMIT_SEARCH_LARGE_MAX.ln();
    if !accept(hi.exp()) {
        return f64::INFINITY;
    }
    if accept(lo.exp()) {
        return lo.exp();
    }
    for _ in 0..LIMIT_BISECTIONS {
        let mid = 0.5 * (lo + hi);
        if accept(mid.exp()) {
            hi = mid;
        } else {
            lo = mid;
        }
    }
    hi.exp()
}
