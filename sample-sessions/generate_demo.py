#!/usr/bin/env python3
"""Regenerates the synthetic demo session in sample-sessions/demo/.

Scenario (fictional): the "Tern Island" simulation group runs a 101-site chain
with tunable power-law couplings J_ij = J/|i-j|^alpha and measures the
infinite-temperature correlation C(x,t) from the centre site. The data are NOT
measured: they are the classical lattice walk dP_i/dt = sum_j g_ij (P_j - P_i),
g_ij = g0 |i-j|^(-2 alpha) (rates ~ J_ij^2), on the open chain, plus seeded
Gaussian shot noise of a stated number of repetitions, and (run 11) a readout
error that scales C by (1 - 2e)^2 so that the sum rule visibly fails.

Run from the repository root:  python3 sample-sessions/generate_demo.py
Needs numpy only. Output is deterministic for a given numpy version.
"""
import json
import os

import numpy as np

SITES = 101
SOURCE = 50
GAMMA0 = 1.0
HERE = os.path.join(os.path.dirname(os.path.abspath(__file__)), "demo")

RUNS = [
    # file, alpha, last time, repetitions per point, readout error, seed.
    # Each run stops before its spread reaches the chain's ends: widths grow
    # like t^(1/z) with z = 2 alpha - 1 (alpha < 3/2) or 2.
    ("run07-alpha0.9.csv", 0.9, 6.0, 400000, 0.0, 7),
    ("run11-alpha1.2-readout.csv", 1.2, 20.0, 400000, 0.015, 11),
    ("run15-alpha2.0.csv", 2.0, 30.0, 400000, 0.0, 15),
]


def walk(alpha, times):
    i = np.arange(SITES)
    r = np.abs(i[:, None] - i[None, :]).astype(float)
    with np.errstate(divide="ignore"):
        rates = np.where(r > 0, GAMMA0 * r ** (-2.0 * alpha), 0.0)
    generator = rates - np.diag(rates.sum(axis=1))
    values, vectors = np.linalg.eigh(generator)
    start = np.zeros(SITES)
    start[SOURCE] = 1.0
    coeff = vectors.T @ start
    return np.array([vectors @ (np.exp(values * t) * coeff) for t in times])


def main():
    manifest = {"datasets": []}
    for name, alpha, t_last, reps, readout, seed in RUNS:
        rng = np.random.default_rng(seed)
        times = np.geomspace(0.1, t_last, 30)
        c = walk(alpha, times) * (1.0 - 2.0 * readout) ** 2
        err = np.sqrt(np.clip(1.0 - c**2, 0.0, None) / reps)
        noisy = c + rng.normal(size=c.shape) * err
        lines = [
            "# Synthetic demo data made by sample-sessions/generate_demo.py (not measured).",
            f"# Classical lattice walk, {SITES} sites, source {SOURCE}, alpha {alpha}, "
            f"gamma0 {GAMMA0}, {reps} repetitions, readout error {readout}, seed {seed}.",
            "x,t,C,err",
        ]
        for ti, t in enumerate(times):
            for i in range(SITES):
                lines.append(f"{i - SOURCE},{float(t)!r},{float(noisy[ti, i])!r},{float(err[ti, i])!r}")
        with open(os.path.join(HERE, name), "w") as f:
            f.write("\n".join(lines) + "\n")
        note = "Synthetic: classical lattice walk with seeded shot noise"
        if readout:
            note += f" and a readout error of {readout} per site (sum rule below 1)"
        manifest["datasets"].append(
            {
                "name": f"Run {name[3:5]} · α = {alpha}",
                "file": name,
                "meta": {
                    "platform": "Tern Island chain (fictional)",
                    "alpha": alpha,
                    "chain_length": SITES,
                    "source_site": SOURCE,
                    "time_unit": "1/γ0",
                    "notes": note + f"; seed {seed}.",
                    "synthetic": True,
                },
            }
        )
    with open(os.path.join(HERE, "manifest.json"), "w") as f:
        json.dump(manifest, f, indent=2, ensure_ascii=False)
        f.write("\n")


if __name__ == "__main__":
    main()
