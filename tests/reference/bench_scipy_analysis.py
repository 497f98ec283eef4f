#!/usr/bin/env python3
"""Timing side of server/physics/benches/analysis.rs with scipy.

Reads the synthetic map the bench writes (long CSV x,t,C,err; a lattice walk,
no measured data) and does the fits a scipy user would write by hand on the
same scaling window:

  * tail:     C(0,t) = A t^(-1/z), weighted scipy.optimize.curve_fit in log space;
  * Gaussian: C = exp(-x^2/(4Dt))/(2 sqrt(pi D t)), curve_fit with sigma = err;
  * stable:   C = levy_stable.pdf(x, mu, 0, scale=(Dt)^(1/mu)), curve_fit with
              sigma = err and bounds 0.3 <= mu <= 2 (scipy's stable index is
              called alpha; its scale c has characteristic function
              exp(-|c k|^mu), the convention of spreadscope's profile fit).

There is no scipy routine for a scaling collapse or a finite-chain lattice-walk
fit, so those are not timed here. With --bootstrap K the Gaussian and stable
fits are repeated on K noisy replicates (slow: the stable one costs minutes per
replicate with levy_stable's default method); without it the script prints
K = 200 times the single-fit time as an extrapolation, marked as such.

Usage:
  python3 tests/reference/bench_scipy_analysis.py FILE --t-min T0 --t-max T1 [--bootstrap K]
"""

import argparse
import csv
import time

import numpy as np
import scipy
from scipy.optimize import curve_fit
from scipy.stats import levy_stable


def load(path):
    rows = []
    with open(path) as handle:
        lines = (line for line in handle if not line.startswith("#"))
        for row in csv.DictReader(lines):
            rows.append((int(row["x"]), float(row["t"]), float(row["C"]), float(row["err"])))
    return np.array(rows)


def gaussian(xt, d):
    x, t = xt
    return np.exp(-x * x / (4.0 * d * t)) / (2.0 * np.sqrt(np.pi * d * t))


def stable(xt, d, mu):
    x, t = xt
    scale = (d * t) ** (1.0 / mu)
    return levy_stable.pdf(x / scale, mu, 0.0) / scale


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("file")
    parser.add_argument("--t-min", type=float, required=True)
    parser.add_argument("--t-max", type=float, required=True)
    parser.add_argument("--bootstrap", type=int, default=0)
    args = parser.parse_args()
    print(f"numpy {np.__version__}, scipy {scipy.__version__}")

    data = load(args.file)
    keep = (data[:, 1] >= args.t_min) & (data[:, 1] <= args.t_max) & (data[:, 1] > 0)
    x, t, c, err = data[keep].T
    print(f"{keep.sum()} points in t = {args.t_min:.4g}..{args.t_max:.4g}")

    start = time.perf_counter()
    auto = (x == 0) & (c > 0)
    (ln_a, slope), cov = curve_fit(
        lambda lt, a, s: a - s * lt,
        np.log(t[auto]),
        np.log(c[auto]),
        sigma=err[auto] / c[auto],
        absolute_sigma=True,
    )
    tail_s = time.perf_counter() - start
    print(f"tail      z = {1 / slope:.4f} +- {np.sqrt(cov[1, 1]) / slope**2:.4f}   {tail_s * 1e3:9.2f} ms")

    start = time.perf_counter()
    d0 = 1.0
    (d_g,), cov_g = curve_fit(gaussian, (x, t), c, p0=[d0], sigma=err, absolute_sigma=True)
    gauss_s = time.perf_counter() - start
    chi2_g = np.sum(((c - gaussian((x, t), d_g)) / err) ** 2)
    print(
        f"gaussian  D = {d_g:.5g} +- {np.sqrt(cov_g[0, 0]):.2g}, chi2/dof = {chi2_g / (len(c) - 1):.4g}"
        f"   {gauss_s * 1e3:9.2f} ms"
    )

    start = time.perf_counter()
    evaluations = [0]

    def counted(xt, d, mu):
        evaluations[0] += 1
        return stable(xt, d, mu)

    (d_s, mu_s), cov_s = curve_fit(
        counted,
        (x, t),
        c,
        p0=[d_g, 1.5],
        sigma=err,
        absolute_sigma=True,
        bounds=([1e-12, 0.3], [np.inf, 2.0]),
    )
    stable_s = time.perf_counter() - start
    chi2_s = np.sum(((c - stable((x, t), d_s, mu_s)) / err) ** 2)
    print(
        f"stable    mu = {mu_s:.4f} +- {np.sqrt(cov_s[1, 1]):.2g}, D = {d_s:.5g} +- {np.sqrt(cov_s[0, 0]):.2g},"
        f" chi2/dof = {chi2_s / (len(c) - 2):.4g}   {stable_s:9.2f} s ({evaluations[0]} model evaluations)"
    )
    total = tail_s + gauss_s + stable_s
    print(f"total (tail + both profiles, no bootstrap): {total:.2f} s")

    if args.bootstrap > 0:
        rng = np.random.default_rng(7)
        start = time.perf_counter()
        for _ in range(args.bootstrap):
            y = c + err * rng.standard_normal(len(c))
            curve_fit(gaussian, (x, t), y, p0=[d_g], sigma=err, absolute_sigma=True)
            curve_fit(stable, (x, t), y, p0=[d_s, mu_s], sigma=err, absolute_sigma=True,
                      bounds=([1e-12, 0.3], [np.inf, 2.0]))
        print(f"bootstrap with {args.bootstrap} replicates: {time.perf_counter() - start:.1f} s")
    else:
        print(f"bootstrap with 200 replicates (extrapolated, not run): ~{200 * (gauss_s + stable_s):.0f} s")


if __name__ == "__main__":
    main()
