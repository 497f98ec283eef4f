#!/usr/bin/env python3
"""Reference computations for spreadscope's spin-chain module, with scipy.

Two modes (synthetic chains only; no measured data):

  --fixture   Exact C_ij(t) = 2^-N Tr[sz_i(t) sz_j] for small chains, from the
              full 2^N Hamiltonian built with Kronecker products of Pauli
              matrices and diagonalised densely (scipy.linalg.eigh). Prints the
              values pasted into the Rust tests, with the library versions.
  (default)   Timing side of benches/spin_chain.rs: the same typicality
              estimate (Gaussian random vector, projector on the source spin,
              C_ij(t) = <psi_j(t)|sz_i|psi_j(t)> / <psi_j|psi_j>) propagated on
              the full 2^N space with scipy.sparse and expm_multiply over the
              same 50 times t = 0.2, 0.4, ..., 10. Prints wall time per run.

Convention: H = sum_{i<j} J_ij (s+_i s-_j + s-_i s+_j + (Delta/2) sz_i sz_j),
J_ij = J / |i-j|^alpha, hbar = 1 (so the flip-flop amplitude is J_ij).

Usage:
  python3 tests/reference/bench_scipy_spin_chain.py --sites 16 --samples 4
  python3 tests/reference/bench_scipy_spin_chain.py --fixture
"""

import argparse
import time

import numpy as np
import scipy
import scipy.linalg
import scipy.sparse
import scipy.sparse.linalg


def couplings(sites, alpha, strength=1.0):
    j = np.zeros((sites, sites))
    for a in range(sites):
        for b in range(sites):
            if a != b:
                r = abs(a - b)
                j[a, b] = strength if r == 1 else (0.0 if np.isinf(alpha) else strength / r**alpha)
    return j


def dense_hamiltonian_kron(j, delta):
    """Textbook construction: s+ s- + s- s+ = (sx sx + sy sy)/2 on every pair."""
    sites = j.shape[0]
    sx = np.array([[0, 1], [1, 0]], dtype=complex)
    sy = np.array([[0, -1j], [1j, 0]], dtype=complex)
    sz = np.array([[1, 0], [0, -1]], dtype=complex)

    def site_op(op, k):
        # Site 0 is the least significant bit, matching the Rust basis words.
        out = np.array([[1.0 + 0j]])
        for s in reversed(range(sites)):
            out = np.kron(out, op if s == k else np.eye(2))
        return out

    h = np.zeros((2**sites, 2**sites), dtype=complex)
    for a in range(sites):
        for b in range(a + 1, sites):
            if j[a, b] != 0.0:
                h += j[a, b] * 0.5 * (site_op(sx, a) @ site_op(sx, b) + site_op(sy, a) @ site_op(sy, b))
                h += j[a, b] * 0.5 * delta * site_op(sz, a) @ site_op(sz, b)
    zs = [np.real(np.diag(site_op(sz, k))) for k in range(sites)]
    return h, zs


def fixture():
    print(f"# scipy {scipy.__version__}, numpy {np.__version__}; dense eigh of the Kronecker-built H")
    for sites, alpha, delta, source, times in [
        (6, 1.0, 1.0, 2, [0.5, 1.0, 2.5]),
        (5, 1.5, -0.6, 0, [0.7, 3.0]),
    ]:
        h, zs = dense_hamiltonian_kron(couplings(sites, alpha), delta)
        w, v = scipy.linalg.eigh(h)
        print(f"# N = {sites}, alpha = {alpha}, Delta = {delta}, source = {source}")
        for t in times:
            u = v @ np.diag(np.exp(-1j * w * t)) @ v.conj().T
            zj = np.diag(zs[source])
            row = []
            for i in range(sites):
                zi_t = u.conj().T @ np.diag(zs[i]) @ u
                row.append(np.real(np.trace(zi_t @ zj)) / 2**sites)
            print(f"t = {t}: [" + ", ".join(repr(float(c)) for c in row) + "]")


def sparse_hamiltonian(j, delta):
    sites = j.shape[0]
    dim = 2**sites
    states = np.arange(dim, dtype=np.int64)
    bits = [((states >> k) & 1).astype(np.int8) for k in range(sites)]
    rows, cols, vals = [], [], []
    diag = np.zeros(dim)
    for a in range(sites):
        for b in range(a + 1, sites):
            if j[a, b] == 0.0:
                continue
            differ = bits[a] != bits[b]
            src = states[differ]
            rows.append(src)
            cols.append(src ^ ((1 << a) | (1 << b)))
            vals.append(np.full(src.size, j[a, b]))
            diag += 0.5 * delta * j[a, b] * np.where(differ, -1.0, 1.0)
    rows.append(states)
    cols.append(states)
    vals.append(diag)
    h = scipy.sparse.csr_matrix(
        (np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))), shape=(dim, dim)
    )
    zs = np.array([2.0 * b - 1.0 for b in bits])
    return h, zs


def bench(sites, samples, seed, alpha=1.0, n_times=50):
    start = time.perf_counter()
    j = couplings(sites, alpha)
    h, zs = sparse_hamiltonian(j, 0.0)
    source = sites // 2
    rng = np.random.default_rng(seed)
    total = np.zeros((n_times, sites))
    for _ in range(samples):
        psi = rng.standard_normal(2**sites) + 1j * rng.standard_normal(2**sites)
        psi = psi * (zs[source] > 0)
        states = scipy.sparse.linalg.expm_multiply(
            -1j * h, psi, start=0.0, stop=10.0, num=n_times + 1, endpoint=True
        )[1:]
        probs = np.abs(states) ** 2
        total += (probs @ zs.T) / probs.sum(axis=1)[:, None]
    elapsed = time.perf_counter() - start
    values = total / samples
    print(
        f"scipy {scipy.__version__}: N = {sites}, alpha = {alpha}, Delta = 0, {samples} samples, "
        f"{n_times} times to t = 10: {elapsed:.2f} s wall; C(0, 10) = {values[-1, source]:.6f}; "
        f"sum rule at t = 10 off by {abs(values[-1].sum() - 1.0):.1e}"
    )


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--fixture", action="store_true")
    parser.add_argument("--sites", type=int, default=16)
    parser.add_argument("--samples", type=int, default=4)
    parser.add_argument("--seed", type=int, default=2024)
    parser.add_argument("--alpha", type=float, default=1.0)
    parser.add_argument("--times", type=int, default=50)
    args = parser.parse_args()
    if args.fixture:
        fixture()
    else:
        bench(args.sites, args.samples, args.seed, args.alpha, args.times)


if __name__ == "__main__":
    main()
