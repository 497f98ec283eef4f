#!/usr/bin/env python3
"""Reference values of the Houdayer-Hartmann collapse quality S(z).

An independent, deliberately plain implementation of the measure of
Houdayer & Hartmann, Phys. Rev. B 70, 014418 (2004), as specified in
server/physics/src/fit/collapse.rs: brute-force neighbour search and a
weighted straight-line fit solved by numpy.linalg.lstsq, with the variance of
the fitted value from the inverse normal matrix. It shares no code with the
Rust implementation. Run it to print the literals used by the Rust test
`collapse::tests::quality_matches_independent_reference`:

    python3 tests/reference/collapse_reference.py

The map is synthetic and deterministic (a Gaussian profile plus a fixed
sine pattern standing in for noise); one point is masked out and one time is
t = 0, which both implementations must drop.
"""
import math
import sys

import numpy as np

OFFSETS = list(range(-3, 4))
TIMES = [0.0, 1.5, 2.5, 4.0]


def value(x, t):
    return math.exp(-x * x / (4.0 * t)) / (2.0 * math.sqrt(math.pi * t)) + 0.004 * math.sin(
        3.7 * x + 1.3 * t
    )


def error(x, t):
    return 0.002 + 0.001 * abs(x) / 3.0


MISSING = {(2, 1)}  # (time index, offset index) not measured


def curves():
    out = []
    for ti, t in enumerate(TIMES):
        if t <= 0.0:
            continue
        pts = [
            (float(x), value(x, t), error(x, t))
            for xi, x in enumerate(OFFSETS)
            if (ti, xi) not in MISSING
        ]
        if len(pts) >= 2:
            out.append((t, pts))
    return out


def quality(z):
    rescaled = []
    for t, pts in curves():
        a = t ** (1.0 / z)
        rescaled.append([(x / a, a * c, a * e) for x, c, e in pts])
    total, n = 0.0, 0
    for i, curve in enumerate(rescaled):
        for u, y, dy in curve:
            nb = []
            for i2, other in enumerate(rescaled):
                if i2 == i:
                    continue
                us = [p[0] for p in other]
                if not (us[0] <= u <= us[-1]):
                    continue
                # nearest neighbours on either side: u_k <= u <= u_{k+1}
                k = max(j for j in range(len(us) - 1) if us[j] <= u)
                nb.append(other[k])
                nb.append(other[k + 1])
            if not nb:
                continue
            uu = np.array([p[0] for p in nb])
            yy = np.array([p[1] for p in nb])
            ww = 1.0 / np.array([p[2] for p in nb]) ** 2
            design = np.column_stack([np.ones_like(uu), uu])
            sw = np.sqrt(ww)
            coef, *_ = np.linalg.lstsq(design * sw[:, None], yy * sw, rcond=None)
            cov = np.linalg.inv(design.T @ (design * ww[:, None]))
            point = np.array([1.0, u])
            fit = point @ coef
            var = point @ cov @ point
            total += (y - fit) ** 2 / (dy * dy + var)
            n += 1
    return total / n, n


if __name__ == "__main__":
    print(f"# numpy {np.__version__}, python {sys.version.split()[0]}")
    for z in (1.2, 1.5, 2.0, 2.5):
        s, n = quality(z)
        print(f"({z}, {float(s)!r}, {n}),")
