#!/usr/bin/env python3
"""Reference fit for spreadscope's lattice-walk fit (fit/lattice_walk_fit/).

An independent fit with scipy: the master equation dP/dt = G P on an open
chain of N = 9 sites, G_ij = gamma0 |i-j|^(-2 alpha) (i != j), G_ii = -sum_j
G_ij, propagated with scipy.linalg.expm (Pade approximation, no
eigendecomposition), fitted by scipy.optimize.curve_fit with absolute_sigma
(covariance (J^T W J)^-1). It shares no code with the Rust implementation.
Run it to print the literals of the Rust test
`lattice_walk_fit::tests::fit_agrees_with_scipy_expm_curve_fit`:

    python3 tests/reference/lattice_walk_fit_reference.py

The map is synthetic and deterministic: the walk at gamma0 = 0.9, alpha = 1.1
from source 3, times 0.5, 1, 2, 4, times the fixed pattern
(1 + 0.02 sin(2.3 i + 1.7 t)) standing in for noise, errors 0.001 + 0.02 P.
"""

import math

import numpy as np
import scipy
from scipy.linalg import expm
from scipy.optimize import curve_fit

SITES = 9
SOURCE = 3
TIMES = [0.5, 1.0, 2.0, 4.0]


def propagate(gamma0, alpha):
    g = np.zeros((SITES, SITES))
    for i in range(SITES):
        for j in range(SITES):
            if i != j:
                g[i, j] = gamma0 * abs(i - j) ** (-2.0 * alpha)
        g[i, i] = -g[i].sum()
    start = np.zeros(SITES)
    start[SOURCE] = 1.0
    return np.array([expm(g * t) @ start for t in TIMES])


def main():
    exact = propagate(0.9, 1.1)
    values = np.array(
        [[exact[k, i] * (1.0 + 0.02 * math.sin(2.3 * i + 1.7 * t)) for i in range(SITES)]
         for k, t in enumerate(TIMES)]
    )
    errors = 0.001 + 0.02 * np.abs(values)

    def model(_, gamma0, alpha):
        return propagate(gamma0, alpha).ravel()

    (gamma0, alpha), cov = curve_fit(
        model, None, values.ravel(), p0=[1.0, 1.0], sigma=errors.ravel(), absolute_sigma=True,
        xtol=1e-14, ftol=1e-14, gtol=1e-14,
    )
    chi2 = float(np.sum(((values.ravel() - model(None, gamma0, alpha)) / errors.ravel()) ** 2))
    print(f"// scipy {scipy.__version__}, numpy {np.__version__}: expm + curve_fit (absolute_sigma);")
    print("// tests/reference/lattice_walk_fit_reference.py")
    print(f"const SCIPY_GAMMA0: f64 = {float(gamma0)!r};")
    print(f"const SCIPY_GAMMA0_ERR: f64 = {math.sqrt(cov[0, 0])!r};")
    print(f"const SCIPY_ALPHA: f64 = {float(alpha)!r};")
    print(f"const SCIPY_ALPHA_ERR: f64 = {math.sqrt(cov[1, 1])!r};")
    print(f"const SCIPY_CHI2: f64 = {chi2!r};")


if __name__ == "__main__":
    main()
