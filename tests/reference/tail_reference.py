#!/usr/bin/env python3
"""Reference fit for spreadscope's autocorrelation tail (fit/tail.rs).

An independent fit with scipy: C(0,t) = A t^(-s) in linear space, weighted by
the given one-sigma errors, by scipy.optimize.curve_fit with absolute_sigma
(covariance (J^T W J)^-1). It shares no code with the Rust implementation.
Run it to print the literals of the Rust test
`tail::tests::linear_space_fit_agrees_with_scipy_curve_fit`:

    python3 tests/reference/tail_reference.py

The series is synthetic and deterministic: the Cauchy return probability
1/(pi D t) at D = 1.3 for nine times log-spaced from 2 to 40, times the fixed
pattern (1 + 0.3 sin(2.1 k + 0.4)) standing in for noise at low signal
(one value is pushed below zero), errors 0.3 / (pi D t) + 0.002.
"""

import math

import numpy as np
import scipy
from scipy.optimize import curve_fit


def main():
    d = 1.3
    times = [2.0 * (40.0 / 2.0) ** (k / 8.0) for k in range(9)]
    truth = [1.0 / (math.pi * d * t) for t in times]
    values = [c * (1.0 + 0.3 * math.sin(2.1 * k + 0.4)) - (0.02 if k == 8 else 0.0)
              for k, c in enumerate(truth)]
    errors = [0.3 * c + 0.002 for c in truth]
    model = lambda t, a, s: a * np.power(t, -s)
    p, cov = curve_fit(model, np.array(times), np.array(values), p0=[0.2, 1.0],
                       sigma=np.array(errors), absolute_sigma=True)
    resid = (np.array(values) - model(np.array(times), *p)) / np.array(errors)
    print(f"// scipy {scipy.__version__}, numpy {np.__version__}")
    print("const SCIPY_S: f64 = %r;" % float(p[1]))
    print("const SCIPY_S_ERR: f64 = %r;" % math.sqrt(cov[1, 1]))
    print("const SCIPY_A: f64 = %r;" % float(p[0]))
    print("const SCIPY_A_ERR: f64 = %r;" % math.sqrt(cov[0, 0]))
    print("const SCIPY_CHI2: f64 = %r;" % float(resid @ resid))
    print("values:", values)


if __name__ == "__main__":
    main()
