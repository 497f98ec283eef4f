use super::*;
use crate::tolerance::{CONSERVATION_ABS, close};

fn fixture() -> serde_json::Value {
    serde_json::from_str(include_str!(
        "../../../../../tests/reference/lattice_reference.json"
    ))
    .expect("fixture parses")
}

fn num(v: &serde_json::Value) -> f64 {
    v.as_str().expect("string").parse().expect("number")
}

#[test]
fn finite_chain_conserves_probability_and_is_symmetric() {
    // Σ_i P_i = 1 and P_i(source j) = P_j(source i) follow from the
    // symmetric generator with zero row sums (common practice, no source).
    let walk = LatticeWalk::power_law(300, 1.3, 0.8).expect("valid walk");
    let times = [0.0, 0.01, 0.5, 3.0, 40.0, 1000.0];
    let from_a = walk.propagate(40, &times).expect("propagates");
    let from_b = walk.propagate(211, &times).expect("propagates");
    for ti in 0..times.len() {
        let total: f64 = from_a.row(ti).sum();
        assert!(
            (total - 1.0).abs() < CONSERVATION_ABS,
            "sum {total} at t={}",
            times[ti]
        );
        assert!((from_a[(ti, 211)] - from_b[(ti, 40)]).abs() < CONSERVATION_ABS);
        assert!(from_a.row(ti).iter().all(|&p| p > -1e-13));
    }
    // t = 0 is the initial delta; t → ∞ is the uniform 1/N.
    assert!((from_a[(0, 40)] - 1.0).abs() < 1e-12);
    assert!((from_a[(5, 7)] - 1.0 / 300.0).abs() < 1e-9);
}

#[test]
fn two_site_walk_relaxes_exponentially() {
    // Two sites, rate γ: P_0 = (1 + e^{−2γt})/2 (closed form, common
    // practice, no source).
    let rates = ndarray::array![[0.0, 0.7], [0.7, 0.0]];
    let walk = LatticeWalk::from_rates(rates).expect("valid");
    let p = walk.propagate(0, &[0.3, 2.0]).expect("propagates");
    for (ti, t) in [0.3f64, 2.0].iter().enumerate() {
        let want = 0.5 * (1.0 + (-1.4 * t).exp());
        assert!(close(p[(ti, 0)], want, 1e-13, 0.0));
    }
}

#[test]
fn rejects_bad_input_with_the_place_named() {
    let bad = ndarray::array![[0.0, -1.0], [-1.0, 0.0]];
    assert!(matches!(
        LatticeWalk::from_rates(bad),
        Err(LatticeWalkError::BadRate { i: 0, j: 1, .. })
    ));
    let asym = ndarray::array![[0.0, 1.0], [2.0, 0.0]];
    assert!(matches!(
        LatticeWalk::from_rates(asym),
        Err(LatticeWalkError::NotSymmetric { .. })
    ));
    assert!(matches!(
        LatticeWalk::power_law(MAX_SITES + 1, 1.0, 1.0),
        Err(LatticeWalkError::Sites(_))
    ));
    let walk = LatticeWalk::power_law(5, 1.0, 1.0).expect("valid");
    assert!(matches!(
        walk.propagate(0, &[0.0, -1.0]),
        Err(LatticeWalkError::BadTime { index: 1, .. })
    ));
    assert!(matches!(
        walk.propagate(5, &[1.0]),
        Err(LatticeWalkError::SiteOutOfRange { site: 5, sites: 5 })
    ));
    assert!(InfiniteLatticeWalk::new(1.0, 0.5).is_err());
    assert!(InfiniteLatticeWalk::new(0.0, 1.0).is_err());
}

#[test]
fn couplings_give_squared_rates() {
    // Rates ∝ J² normalised to the strongest pair (documented choice):
    // J/r^α couplings reproduce γ0 r^{−2α}.
    let c = Couplings::power_law(6, 2.5, 1.2).expect("valid");
    let a = LatticeWalk::from_couplings(&c, 0.9).expect("valid");
    let b = LatticeWalk::power_law(6, 0.9, 1.2).expect("valid");
    for (x, y) in a.rates().iter().zip(b.rates()) {
        assert!(close(*x, *y, 1e-14, 0.0));
    }
    let zero = Couplings::from_matrix(Array2::zeros((3, 3))).expect("valid matrix");
    assert!(matches!(
        LatticeWalk::from_couplings(&zero, 1.0),
        Err(LatticeWalkError::NoCouplings)
    ));
}

#[test]
fn correlation_map_uses_offsets_from_source() {
    let walk = LatticeWalk::power_law(9, 1.0, 1.5).expect("valid");
    let map = walk.to_correlation_map(3, &[0.5, 1.0]).expect("map");
    assert_eq!(map.offsets().first(), Some(&-3));
    assert_eq!(map.offsets().last(), Some(&5));
    for point in map.sum_rule() {
        assert!((point.sum - 1.0).abs() < CONSERVATION_ABS);
    }
}

#[test]
fn lambda_matches_mpmath_polylog() {
    // λ(k)/γ0 = 2[ζ(2α) − Re Li_{2α}(e^{ik})], mpmath 1.3.0 polylog at
    // 40 digits, cross-checked with Hurwitz zeta (lattice_reference.py).
    let fx = fixture();
    let rows = fx["lambda"].as_array().expect("rows");
    assert!(rows.len() > 100);
    for row in rows {
        let (alpha, k, want) = (num(&row["alpha"]), num(&row["k"]), num(&row["lambda"]));
        let walk = InfiniteLatticeWalk::new(1.0, alpha).expect("valid");
        let got = walk.lambda(k);
        assert!(
            close(got, want, 2e-14, 0.0),
            "alpha {alpha} k {k}: {got} vs {want}"
        );
        // γ0 scales λ linearly; λ is even and 2π-periodic.
        let scaled = InfiniteLatticeWalk::new(0.3, alpha).expect("valid");
        assert!(close(scaled.lambda(-k), 0.3 * want, 2e-14, 0.0));
        // (Only for k ≥ 0.01: k + 2π rounds away ~1e-16 absolute of k.)
        if k >= 0.01 {
            assert!(close(walk.lambda(k + 2.0 * PI), want, 1e-12, 0.0));
        }
    }
    // Hurwitz-zeta form at k = 2πp/q (DLMF 25.13.2 with 25.11.1).
    for row in fx["lambda_hurwitz"].as_array().expect("rows") {
        let alpha = num(&row["alpha"]);
        let p = row["p"].as_f64().expect("p");
        let q = row["q"].as_f64().expect("q");
        let want = num(&row["lambda"]);
        let walk = InfiniteLatticeWalk::new(1.0, alpha).expect("valid");
        let got = walk.lambda(2.0 * PI * p / q);
        assert!(
            close(got, want, 2e-14, 0.0),
            "alpha {alpha} 2π{p}/{q}: {got} vs {want}"
        );
    }
}

#[test]
fn lambda_at_alpha_one_is_closed_form() {
    // λ = γ0(π|k| − k²/2) for |k| ≤ π at α = 1 (DLMF 25.12.7 with B_2).
    let walk = InfiniteLatticeWalk::new(0.8, 1.0).expect("valid");
    for k in [1e-9, 1e-4, 0.3, 1.0, 2.5, PI] {
        let want = 0.8 * (PI * k - k * k / 2.0);
        assert!(close(walk.lambda(k), want, 1e-14, 0.0), "k {k}");
    }
}

#[test]
fn small_k_coefficients_are_limits_of_the_fixture() {
    // A and γ0 ζ(2α−2) against mpmath's formula values, and as the small-k
    // limit of mpmath's λ(k) (polylog, 40 digits): at k = 1e-4 the next
    // correction is O(k^{4−(2α−1)}) relative to the k² term.
    let fx = fixture();
    let lambda_at = |alpha: f64, k: f64| -> f64 {
        fx["lambda"]
            .as_array()
            .expect("rows")
            .iter()
            .find(|r| {
                close(num(&r["alpha"]), alpha, 0.0, 1e-15) && close(num(&r["k"]), k, 1e-15, 0.0)
            })
            .map(|r| num(&r["lambda"]))
            .expect("fixture row")
    };
    for row in fx["coefficients_gamma0_1"].as_array().expect("rows") {
        let alpha = num(&row["alpha"]);
        let walk = InfiniteLatticeWalk::new(1.0, alpha).expect("valid");
        let k2 = walk.k2_coefficient().expect("alpha != 3/2");
        assert!(
            close(k2, num(&row["k2"]), 1e-13, 0.0),
            "k2 at alpha {alpha}"
        );
        match (walk.levy_coefficient(), row.get("levy")) {
            (Some(a), Some(want)) => assert!(close(a, num(want), 1e-13, 0.0)),
            (None, None) => {}
            other => panic!("levy coefficient presence differs at alpha {alpha}: {other:?}"),
        }
        // Limits of the independent λ(k) values.
        let k = 1e-4;
        let lam = lambda_at(alpha, k);
        if let Some(a) = walk.levy_coefficient() {
            let est = (lam - k2 * k * k) / k.powf(2.0 * alpha - 1.0);
            let rel = k.powf(4.0 - (2.0 * alpha - 1.0)) * 10.0;
            assert!(
                close(est, a, rel.max(1e-12), 0.0),
                "A at alpha {alpha}: {est} vs {a}"
            );
        }
        if alpha > 1.6 {
            let power = -PI
                / (2.0 * crate::numerics::special::gamma(2.0 * alpha) * cos_half_pi(2.0 * alpha));
            let est = (lam - 2.0 * power * k.powf(2.0 * alpha - 1.0)) / (k * k);
            assert!(
                close(est, k2, 1e-6, 0.0),
                "D at alpha {alpha}: {est} vs {k2}"
            );
        }
    }
    // D = π²/6 at α = 2 (physics notes; ζ(2), A&S 23.2.24).
    let w2 = InfiniteLatticeWalk::new(1.0, 2.0).expect("valid");
    assert!(close(
        w2.diffusion_coefficient().expect("diffusive"),
        PI * PI / 6.0,
        1e-14,
        0.0
    ));
    assert!(
        InfiniteLatticeWalk::new(1.0, 1.5)
            .expect("valid")
            .scaling_coefficient()
            .is_none()
    );
}

#[test]
fn dynamical_exponent_is_min_of_two_alpha_minus_one_and_two() {
    // z = min(2α − 1, 2) (physics notes, Transport classes).
    for (alpha, z) in [(0.75, 0.5), (1.0, 1.0), (1.25, 1.5), (2.0, 2.0), (3.0, 2.0)] {
        let w = InfiniteLatticeWalk::new(1.0, alpha).expect("valid");
        assert!((w.dynamical_exponent() - z).abs() < 1e-15);
    }
}

#[test]
fn propagator_matches_mpmath_quadrature() {
    // mpmath 1.3.0 quad (tanh-sinh, 40 digits; 25 digits at α = 0.75)
    // of (1/π)∫_0^π cos(kx) e^{−λ(k)t} dk, λ in closed form at α = 1, 2
    // and from polylog at α = 0.75 (lattice_reference.py).
    let fx = fixture();
    let rows = fx["propagator"].as_array().expect("rows");
    assert!(rows.len() >= 25);
    for row in rows {
        let alpha = num(&row["alpha"]);
        let gamma0 = num(&row["gamma0"]);
        let x = row["x"].as_i64().expect("x");
        let t = num(&row["t"]);
        let want = num(&row["p"]);
        let walk = InfiniteLatticeWalk::new(gamma0, alpha).expect("valid");
        let got = walk.propagator(x, t).expect("valid time");
        assert!(
            close(got, want, 1e-12, 2e-15),
            "alpha {alpha} gamma0 {gamma0} x {x} t {t}: {got} vs {want}"
        );
    }
    // The map shares one grid: same values.
    let walk = InfiniteLatticeWalk::new(1.0, 1.0).expect("valid");
    let map = walk.to_correlation_map(10, &[0.0, 1.0]).expect("map");
    let col = map.column_of(3).expect("offset 3");
    let single = walk.propagator(3, 1.0).expect("valid");
    assert!(close(map.values()[(1, col)], single, 1e-13, 1e-16));
    assert!((map.values()[(0, map.column_of(0).expect("0"))] - 1.0).abs() < 1e-300);
}

#[test]
fn finite_chain_matches_infinite_lattice_in_the_bulk() {
    // Two independent computations (eigendecomposition of the finite
    // generator vs Fourier quadrature of λ): they may differ only by the
    // jumps the finite chain lacks, at most ~ escape rate × t in the bulk.
    for (alpha, sites, t) in [(2.0, 201, 0.7), (1.25, 401, 0.4), (1.0, 401, 0.3)] {
        let finite = LatticeWalk::power_law(sites, 1.0, alpha).expect("valid");
        let infinite = InfiniteLatticeWalk::new(1.0, alpha).expect("valid");
        let centre = sites / 2;
        let p = finite.propagate(centre, &[t]).expect("propagates");
        let bound = 2.0 * escape_rate_estimate(1.0, alpha, sites as f64) * t;
        for x in -15i64..=15 {
            let fin = p[(0, (centre as i64 + x) as usize)];
            let inf = infinite.propagator(x, t).expect("valid");
            assert!(
                (fin - inf).abs() < bound.max(1e-13),
                "alpha {alpha} x {x}: finite {fin} infinite {inf} bound {bound}"
            );
        }
        // The difference is not trivially small: the bound is tight to
        // within a factor ~10 at the source for the long-range cases.
        if alpha < 1.5 {
            let d0 = (p[(0, centre)] - infinite.propagator(0, t).expect("valid")).abs();
            assert!(d0 > bound / 20.0, "alpha {alpha}: {d0} vs {bound}");
        }
    }
}

#[test]
fn escape_estimate_is_the_integral_of_the_missing_rates() {
    // 2 Σ_{r>L/2} r^{−2α} vs 2∫_{L/2}^∞ r^{−2α} dr: Euler–Maclaurin
    // says they agree to O(1/L) relative (common practice, no source).
    let (alpha, length) = (1.25, 400.0);
    let direct: f64 = 2.0
        * (201..2_000_000)
            .map(|r| f64::from(r).powf(-2.5))
            .sum::<f64>();
    let est = escape_rate_estimate(1.0, alpha, length);
    assert!(close(direct, est, 0.01, 0.0), "{direct} vs {est}");
    assert!(escape_rate_estimate(1.0, 0.5, 10.0).is_nan());
}
