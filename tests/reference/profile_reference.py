#!/usr/bin/env python3
"""Reference fits for spreadscope's scaling-function fit (fit/profile/).

An independent fit of the same synthetic map with scipy: curve_fit
(trust-region reflective with bounds, absolute_sigma=True so that the
covariance is (J^T W J)^-1) and scipy.stats.levy_stable.pdf (its default
"piecewise" method, Nolan's integral) for the stable density. It shares no
code with the Rust implementation. Run it to print the literals used by the
Rust test `profile::tests::fits_agree_with_scipy_curve_fit`:

    python3 tests/reference/profile_reference.py

The map is synthetic and deterministic: the equal mixture of the Cauchy
profile Dt/(pi((Dt)^2+x^2)) and the Gaussian exp(-x^2/(4Dt))/(2 sqrt(pi Dt))
with D = 0.8 (not itself a stable law, so the fitted index lands between 1
and 2, away from mu = 1 where levy_stable switches to the Cauchy value),
times the fixed pattern (1 + 0.03 sin(3.7 x + 1.3 t)) standing in for noise,
on x = -12..12 and t = 2, 3, 5, 8, with errors 0.002 + 0.01 C.
Convention: C(x,t) = f_mu(x/s)/s with s = (Dt)^(1/mu) and f_mu the stable
density of characteristic function exp(-|k|^mu) (scipy: alpha = mu, beta = 0,
scale = s).
"""

import math

import numpy as np
import scipy
from scipy.optimize import curve_fit
from scipy.stats import levy_stable

OFFSETS = list(range(-12, 13))
TIMES = [2.0, 3.0, 5.0, 8.0]


def value(x, t):
    dt = 0.8 * t
    lorentz = dt / (math.pi * (dt * dt + x * x))
    gauss = math.exp(-x * x / (4.0 * dt)) / (2.0 * math.sqrt(math.pi * dt))
    return 0.5 * (lorentz + gauss) * (1.0 + 0.03 * math.sin(3.7 * x + 1.3 * t))


def error(c):
    return 0.002 + 0.01 * abs(c)


def gaussian(xt, d):
    x, t = xt
    return np.exp(-x * x / (4.0 * d * t)) / (2.0 * np.sqrt(np.pi * d * t))


def stable(xt, d, mu):
    x, t = xt
    scale = (d * t) ** (1.0 / mu)
    return levy_stable.pdf(x / scale, mu, 0.0) / scale


def main():
    x = np.array([float(v) for t in TIMES for v in OFFSETS])
    t = np.array([t for t in TIMES for _ in OFFSETS])
    c = np.array([value(a, b) for a, b in zip(x, t)])
    err = np.array([error(v) for v in c])

    (d_g,), cov_g = curve_fit(gaussian, (x, t), c, p0=[1.0], sigma=err, absolute_sigma=True,
                              xtol=1e-14, ftol=1e-14, gtol=1e-14)
    chi2_g = float(np.sum(((c - gaussian((x, t), d_g)) / err) ** 2))
    (d_s, mu_s), cov_s = curve_fit(stable, (x, t), c, p0=[0.8, 1.5], sigma=err,
                                   absolute_sigma=True, bounds=([1e-12, 0.3], [np.inf, 2.0]),
                                   xtol=1e-14, ftol=1e-14, gtol=1e-14)
    chi2_s = float(np.sum(((c - stable((x, t), d_s, mu_s)) / err) ** 2))

    print(f"// scipy {scipy.__version__}, numpy {np.__version__}: curve_fit (absolute_sigma),")
    print("// levy_stable.pdf default method; tests/reference/profile_reference.py")
    print(f"const SCIPY_GAUSSIAN_D: f64 = {float(d_g)!r};")
    print(f"const SCIPY_GAUSSIAN_D_ERR: f64 = {math.sqrt(cov_g[0, 0])!r};")
    print(f"const SCIPY_GAUSSIAN_CHI2: f64 = {chi2_g!r};")
    print(f"const SCIPY_STABLE_D: f64 = {float(d_s)!r};")
    print(f"const SCIPY_STABLE_D_ERR: f64 = {math.sqrt(cov_s[0, 0])!r};")
    print(f"const SCIPY_STABLE_MU: f64 = {float(mu_s)!r};")
    print(f"const SCIPY_STABLE_MU_ERR: f64 = {math.sqrt(cov_s[1, 1])!r};")
    print(f"const SCIPY_STABLE_CHI2: f64 = {chi2_s!r};")


if __name__ == "__main__":
    main()
