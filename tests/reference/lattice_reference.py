#!/usr/bin/env python3
"""Reference values for spreadscope's lattice-walk, zeta and free-fermion tests.

Writes tests/reference/lattice_reference.json next to this script. Every value
is computed with mpmath at high precision (dps below) from a published formula
or a general-purpose routine, never from spreadscope's own code:

- zeta: mpmath.zeta(s) (Riemann zeta, analytic continuation for s < 1);
  zeta_regular: mpmath.zeta(s) - 1/(s-1), and Euler's constant at s = 1.
- lambda: the infinite-lattice walk rate lambda(k)/gamma0 = 2 sum_{r>=1}
  (1 - cos k r) r^(-2 alpha) = 2 [zeta(2 alpha) - Re Li_{2 alpha}(e^{ik})],
  with Li from mpmath.polylog; cross-checked against the Hurwitz-zeta form
  Li_s(e^{2 pi i p/q}) = q^-s sum_{r=1}^q e^{2 pi i r p/q} zeta(s, r/q)
  (DLMF 25.13.2 with 25.11.1) at rational k/(2 pi); the largest relative
  difference is recorded.
- propagator: P(x,t) = (1/pi) int_0^pi cos(k x) exp(-lambda(k) t) dk by
  mpmath.quad (tanh-sinh), with lambda in closed form at alpha = 1
  (gamma0 (pi k - k^2/2), DLMF 25.12.11 with 25.12.7) and alpha = 2
  (Bernoulli polynomial B_4, DLMF 25.12.8 / 24.8.1), and from mpmath.polylog
  at alpha = 0.75, 1.25, 1.5 (25 digits there).
- bessel: mpmath.besselj(n, x).

Run: python3 tests/reference/lattice_reference.py  (takes about two minutes).
"""

import json
import os
import platform
import sys

import mpmath as mp

DPS = 40
mp.mp.dps = DPS


def s(v, digits=25):
    """A value as a decimal string (parsed by the tests with correct rounding)."""
    return mp.nstr(mp.mpf(v), digits)


def d(v):
    """The input exactly as the tests will hold it: the nearest double.

    Inputs are rounded to binary64 before evaluation so that a Rust test
    parsing the same decimal string evaluates at the very same point (near a
    pole of zeta a 1-ulp shift in s changes the value visibly)."""
    return mp.mpf(float(mp.mpf(v)))


def r(v):
    """Decimal string of the double nearest to v (round-trips exactly)."""
    return repr(float(mp.mpf(v)))


def lam_polylog(alpha, k):
    """lambda(k)/gamma0 = 2[zeta(2a) - Re Li_{2a}(e^{ik})]."""
    sexp = 2 * mp.mpf(alpha)
    return 2 * (mp.zeta(sexp) - mp.re(mp.polylog(sexp, mp.expj(k))))


def lam_hurwitz(alpha, p, q):
    """Same at k = 2 pi p / q through Hurwitz zeta values."""
    sexp = 2 * mp.mpf(alpha)
    li = mp.power(q, -sexp) * mp.fsum(
        mp.expj(2 * mp.pi * r * p / q) * mp.zeta(sexp, mp.mpf(r) / q) for r in range(1, q + 1)
    )
    return 2 * (mp.zeta(sexp) - mp.re(li))


def lam_alpha1(k):
    return mp.pi * k - k * k / 2


def lam_alpha2(k):
    # sum cos(n k)/n^4 = pi^4/90 - pi^2 k^2/12 + pi k^3/12 - k^4/48 on [0, 2 pi].
    return 2 * (mp.pi**2 * k**2 / 12 - mp.pi * k**3 / 12 + k**4 / 48)


def propagator(lam, gamma0, x, t, dps=DPS):
    with mp.workdps(dps):
        pts = mp.linspace(0, mp.pi, max(2, abs(int(x)) + 2))
        f = lambda k: mp.cos(k * x) * mp.exp(-gamma0 * lam(k) * t)
        return mp.quad(f, pts) / mp.pi


def main():
    out = {
        "generator": "tests/reference/lattice_reference.py",
        "synthetic": True,
        "versions": {
            "python": platform.python_version(),
            "mpmath": mp.__version__,
            "dps": DPS,
        },
    }

    # --- Riemann zeta -------------------------------------------------------
    zeta_s = [
        "2", "3", "4", "5", "6", "8", "10", "20", "45", "1.5", "1.1", "1.01", "1.0001",
        "0.9999", "0.99", "0.9", "0.75", "0.5", "0.25", "0.1", "0.000001", "0",
        "-0.000001", "-0.25", "-0.5", "-0.9", "-1", "-1.5", "-2.5", "-3", "-7.5", "-11",
        "-20.5", "-41.5", "-180.25", "-200.5", "2.5", "7.3", "3.000001", "0.5000001",
    ]
    out["zeta"] = [{"s": r(v), "zeta": s(mp.zeta(d(v)))} for v in zeta_s]
    reg = []
    for v in ["1", "1.00000001", "0.99999999", "1.001", "0.999", "1.05", "0.9", "1.4"]:
        x = d(v)
        val = mp.euler if x == 1 else mp.zeta(x) - 1 / (x - 1)
        reg.append({"s": r(v), "value": s(val)})
    out["zeta_regular"] = reg

    # --- lambda(k) of the infinite lattice walk -----------------------------
    alphas = ["0.55", "0.75", "1", "1.25", "1.4999", "1.5", "1.500001", "1.75", "2", "2.5", "3.3"]
    ks = ["1e-8", "1e-6", "1e-4", "0.001", "0.01", "0.1", "0.5", "1", "2", "3"]
    lam_rows = []
    for a in alphas:
        for kv in ks:
            lam_rows.append({"alpha": r(a), "k": r(kv), "lambda": s(lam_polylog(d(a), d(kv)))})
        lam_rows.append({"alpha": r(a), "k": r(mp.pi), "lambda": s(lam_polylog(d(a), d(mp.pi)))})
    out["lambda"] = lam_rows

    # Cross-check polylog against the Hurwitz form at rational k/(2 pi).
    worst = mp.mpf(0)
    rational = []
    for a in ["0.75", "1.25", "1.5", "2.5"]:
        for p, q in [(1, 2), (1, 3), (2, 7), (1, 50), (1, 1000)]:
            # Exact rational k/(2 pi): the test evaluates at k = 2 pi p/q in
            # double precision, a relative shift of ~1e-16 in k.
            h = lam_hurwitz(d(a), p, q)
            pl = lam_polylog(d(a), 2 * mp.pi * p / q)
            worst = max(worst, abs(h - pl) / abs(h))
            rational.append({"alpha": r(a), "p": p, "q": q, "lambda": s(h)})
    out["lambda_hurwitz"] = rational
    out["lambda_polylog_vs_hurwitz_max_rel_diff"] = mp.nstr(worst, 3)
    if worst > mp.mpf(10) ** (-30):
        sys.exit(f"polylog and Hurwitz forms disagree: {worst}")
    # The closed forms used for the propagators agree with polylog:
    for kv in ["0.3", "1.7", "3"]:
        k = mp.mpf(kv)
        assert abs(lam_alpha1(k) - lam_polylog(1, k)) < mp.mpf(10) ** (-35)
        assert abs(lam_alpha2(k) - lam_polylog(2, k)) < mp.mpf(10) ** (-35)

    # Small-k coefficients straight from their formulas (DLMF 25.12.12 expansion).
    coeffs = []
    for a in ["0.55", "0.75", "1", "1.25", "1.4999", "1.500001", "1.75", "2", "2.5", "3.3"]:
        al = d(a)
        row = {"alpha": r(a), "k2": s(mp.zeta(2 * al - 2))}
        if al < mp.mpf(1.5):
            row["levy"] = s(mp.pi / (mp.gamma(2 * al) * abs(mp.cos(mp.pi * al))))
        coeffs.append(row)
    out["coefficients_gamma0_1"] = coeffs

    # --- Propagator P(x,t) of the infinite walk -----------------------------
    prop = []
    for gamma0 in ["1", "0.7"]:
        for x, t in [(0, "0.1"), (0, "1"), (1, "0.5"), (3, "1"), (10, "1"), (0, "5"),
                     (7, "5"), (25, "2"), (50, "10"), (2, "0.01")]:
            val = propagator(lam_alpha1, d(gamma0), x, d(t))
            prop.append({"alpha": "1.0", "gamma0": r(gamma0), "x": x, "t": r(t), "p": s(val)})
    for x, t in [(0, "0.5"), (0, "3"), (2, "1"), (5, "4"), (12, "2"), (30, "10")]:
        val = propagator(lam_alpha2, mp.mpf(1), x, d(t))
        prop.append({"alpha": "2.0", "gamma0": "1.0", "x": x, "t": r(t), "p": s(val)})
    for a, points in [("0.75", [(0, "1"), (3, "1"), (10, "2")]),
                      ("1.25", [(0, "1"), (5, "3")]),
                      ("1.5", [(0, "1"), (4, "2")])]:
        for x, t in points:
            val = propagator(lambda k: lam_polylog(d(a), k), mp.mpf(1), x, d(t), dps=25)
            prop.append({"alpha": r(a), "gamma0": "1.0", "x": x, "t": r(t), "p": s(val, 20)})
    out["propagator"] = prop

    # --- Bessel J_n ----------------------------------------------------------
    bes = []
    for n in [0, 1, 2, 5, 10, 30]:
        for xv in ["0.5", "1", "2", "5", "10", "20", "40"]:
            bes.append({"n": n, "x": r(xv), "j": s(mp.besselj(n, d(xv)))})
    out["bessel"] = bes

    path = os.path.join(os.path.dirname(os.path.abspath(__file__)), "lattice_reference.json")
    with open(path, "w") as fh:
        json.dump(out, fh, indent=1)
        fh.write("\n")
    print("wrote", path, "polylog/Hurwitz max rel diff", out["lambda_polylog_vs_hurwitz_max_rel_diff"])


if __name__ == "__main__":
    main()
