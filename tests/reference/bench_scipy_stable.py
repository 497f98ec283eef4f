#!/usr/bin/env python3
"""Time scipy.stats.levy_stable.pdf on the points of the Rust stable benchmark.

Side by side with server/physics/benches/stable.rs:
    cargo bench -p spreadscope-physics --bench stable
    python3 tests/reference/bench_scipy_stable.py
Same indices mu, same 162 x points (61 log-spaced in [1e-3, 1e3] and 101 evenly
spaced in [0, 20]); scipy's alpha is our mu, beta = 0, and its scale is our s
(characteristic function exp(-|s k|^alpha) for beta = 0). Prints the mean time
per point and, against a 50-digit mpmath reference on a subset of the points
(the Nolan integral of tests/reference/stable_reference.py), scipy's largest
relative error, so that speed and accuracy are compared on the same footing.
"""

import time

import numpy as np
import scipy
from scipy.stats import levy_stable

MUS = [0.5, 0.8, 0.999, 1.001, 1.2, 1.5, 1.8, 1.95, 2.0]


def points():
    xs = [10 ** (-3 + 0.1 * k) for k in range(61)]
    xs += [0.2 * k for k in range(101)]
    return np.array(xs)


def main():
    xs = points()
    print("scipy %s levy_stable.pdf (pdf_default_method = %s), %d points per index"
          % (scipy.__version__, getattr(levy_stable, "pdf_default_method", "?"), len(xs)))
    print("%6s %14s" % ("mu", "ns per point"))
    total = 0.0
    for mu in MUS:
        # One warm-up call, then time the whole point set.
        levy_stable.pdf(xs[:2], mu, 0.0)
        start = time.perf_counter()
        levy_stable.pdf(xs, mu, 0.0)
        ns = (time.perf_counter() - start) * 1e9 / len(xs)
        total += ns
        print("%6s %14.0f" % (mu, ns), flush=True)
    print("mean pdf over all indices: %.0f ns/point" % (total / len(MUS)))

    # Accuracy on a few points against the 50-digit reference.
    try:
        import os
        import sys
        sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
        import stable_reference as ref
    except ImportError:
        return
    worst = {}
    for mu in ["0.8", "0.999", "1.001", "1.5", "1.95"]:
        for x in ["0.001", "0.5", "2", "10"]:
            want = float(ref.reference_pdf(x, mu)[0])
            got = float(levy_stable.pdf(float(x), float(mu), 0.0))
            worst[mu] = max(worst.get(mu, 0.0), abs(got / want - 1))
    for mu, err in worst.items():
        print("scipy max rel error at mu = %s (x in 1e-3, 0.5, 2, 10): %.1e" % (mu, err))


if __name__ == "__main__":
    main()
