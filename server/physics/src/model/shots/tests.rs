use std::sync::OnceLock;

use ndarray::Array2;
use rand::Rng;

use super::*;
use crate::numerics::linalg::symmetric_eigen;
use crate::tolerance::close;

mod bookkeeping;

/// Sites of the test chain: H = J Σ_i (σ⁺_i σ⁻_{i+1} + h.c.), J = 1, open.
const N: usize = 10;
const TIMES: [f64; 6] = [0.0, 0.4, 0.8, 1.2, 1.6, 2.2];
const STATES: usize = 1200;
const SHOTS: usize = 4;

/// One clean shot: the prepared (true) bits and the measured bits.
#[derive(Clone)]
struct CleanShot {
    state: usize,
    t: f64,
    meas: Vec<u8>,
}

struct Sampled {
    init: Vec<Vec<u8>>,
    shots: Vec<CleanShot>,
}

/// Exact many-body evolution of product states, built here from the
/// 2^N Hilbert space sector by sector (H conserves the number of up
/// spins), and measurement bitstrings sampled from |ψ(t)|² (Born rule).
/// Seeded: the same shots in every run.
fn sampled() -> &'static Sampled {
    static SAMPLED: OnceLock<Sampled> = OnceLock::new();
    SAMPLED.get_or_init(|| sample_with(20_240_611))
}

fn sample_with(seed: u64) -> Sampled {
    // Sector bases and the position of every word in its sector.
    let mut sectors: Vec<Vec<usize>> = vec![Vec::new(); N + 1];
    let mut position = vec![0usize; 1 << N];
    for (word, place) in position.iter_mut().enumerate() {
        let k = word.count_ones() as usize;
        *place = sectors[k].len();
        sectors[k].push(word);
    }
    // Eigendecomposition of every sector Hamiltonian: the amplitude
    // between words differing by an exchange of neighbours is J = 1.
    let eigen: Vec<_> = sectors
        .iter()
        .map(|basis| {
            let d = basis.len();
            let mut h = Array2::<f64>::zeros((d, d));
            for (a, &word) in basis.iter().enumerate() {
                for i in 0..N - 1 {
                    let mask = (1 << i) | (1 << (i + 1));
                    if (word & mask).count_ones() == 1 {
                        h[(a, position[word ^ mask])] += 1.0;
                    }
                }
            }
            symmetric_eigen(&h).expect("sector eigendecomposition")
        })
        .collect();
    let mut rng = seeded_rng(seed);
    let mut init = Vec::with_capacity(STATES);
    let mut shots = Vec::with_capacity(STATES * TIMES.len() * SHOTS);
    let mut probs = Vec::new();
    for state in 0..STATES {
        let word: usize = rng.random_range(0..(1usize << N));
        init.push((0..N).map(|i| ((word >> i) & 1) as u8).collect::<Vec<_>>());
        let k = word.count_ones() as usize;
        let (basis, e) = (&sectors[k], &eigen[k]);
        let d = basis.len();
        let s = position[word];
        for &t in &TIMES {
            // ψ_a(t) = Σ_n V_an e^{−iE_n t} V_sn.
            probs.clear();
            let phases: Vec<(f64, f64)> = (0..d)
                .map(|n| {
                    let (sin, cos) = (e.values[n] * t).sin_cos();
                    let c = e.vectors[(s, n)];
                    (c * cos, -c * sin)
                })
                .collect();
            let mut total = 0.0;
            for a in 0..d {
                let (mut re, mut im) = (0.0, 0.0);
                for (n, &(pr, pi)) in phases.iter().enumerate() {
                    let v = e.vectors[(a, n)];
                    re += v * pr;
                    im += v * pi;
                }
                total += re * re + im * im;
                probs.push(total);
            }
            for _ in 0..SHOTS {
                let u = rng.random::<f64>() * total;
                let a = probs.partition_point(|&c| c <= u).min(d - 1);
                let outcome = basis[a];
                shots.push(CleanShot {
                    state,
                    t,
                    meas: (0..N).map(|i| ((outcome >> i) & 1) as u8).collect(),
                });
            }
        }
    }
    Sampled { init, shots }
}

/// Free fermions (Jordan–Wigner, exact for nearest neighbours;
/// the physics notes): C_ij(t) = |U_ij(t)|², U = exp(−iKt), K the hopping
/// matrix, here from the eigendecomposition of K.
fn free_fermion(t: f64) -> Array2<f64> {
    let k = Array2::from_shape_fn((N, N), |(i, j)| if i.abs_diff(j) == 1 { 1.0 } else { 0.0 });
    let e = symmetric_eigen(&k).expect("hopping eigendecomposition");
    Array2::from_shape_fn((N, N), |(i, j)| {
        let (mut re, mut im) = (0.0, 0.0);
        for n in 0..N {
            let w = e.vectors[(i, n)] * e.vectors[(j, n)];
            re += w * (e.values[n] * t).cos();
            im -= w * (e.values[n] * t).sin();
        }
        re * re + im * im
    })
}

/// How the recorded file differs from the clean shots.
#[derive(Clone, Copy)]
struct Noise {
    /// p(0|1) and p(1|0) of the final readout.
    p01: f64,
    p10: f64,
    /// Probability that a recorded initial bit differs from the prepared one.
    prep: f64,
    seed: u64,
}

const CLEAN: Noise = Noise {
    p01: 0.0,
    p10: 0.0,
    prep: 0.0,
    seed: 1,
};

fn records(noise: Noise) -> ShotRecords {
    records_from(sampled(), noise)
}

fn records_from(data: &Sampled, noise: Noise) -> ShotRecords {
    let mut rng = seeded_rng(noise.seed);
    let mut acc = ShotAccumulator::new(N).expect("valid size");
    for bits in &data.init {
        let recorded: Vec<u8> = bits
            .iter()
            .map(|&b| {
                if rng.random::<f64>() < noise.prep {
                    1 - b
                } else {
                    b
                }
            })
            .collect();
        acc.add_state(&recorded).expect("N bits");
    }
    let mut meas = vec![0u8; N];
    for shot in &data.shots {
        for (m, &b) in meas.iter_mut().zip(&shot.meas) {
            let flip = if b == 1 { noise.p01 } else { noise.p10 };
            *m = if rng.random::<f64>() < flip { 1 - b } else { b };
        }
        acc.add_shot(shot.state, shot.t, &meas).expect("valid shot");
    }
    acc.finish().expect("shots present")
}

/// χ² per point and the fraction of points whose 1σ bar covers the
/// truth, over every pair at every time t > 0, for C_ij = scale·truth.
fn agreement(estimate: &ShotEstimate, scale: f64) -> (f64, f64) {
    let (mut chi2, mut covered, mut points) = (0.0, 0usize, 0usize);
    for (ti, &t) in estimate.pairs.times.iter().enumerate().skip(1) {
        let truth = free_fermion(t);
        for i in 0..N {
            for j in 0..N {
                let c = estimate.pairs.values[(ti, i, j)];
                let e = estimate.pairs.errors[(ti, i, j)];
                let z = (c - scale * truth[(i, j)]) / e;
                chi2 += z * z;
                covered += usize::from(z.abs() < 1.0);
                points += 1;
            }
        }
    }
    (chi2 / points as f64, covered as f64 / points as f64)
}

/// The weighted least-squares factor r in C ≈ r·truth over t > 0.
fn scale_factor(estimate: &ShotEstimate) -> f64 {
    let (mut num, mut den) = (0.0, 0.0);
    for (ti, &t) in estimate.pairs.times.iter().enumerate().skip(1) {
        let truth = free_fermion(t);
        for ((i, j), &c0) in truth.indexed_iter() {
            let w = estimate.pairs.errors[(ti, i, j)].powi(-2);
            num += w * estimate.pairs.values[(ti, i, j)] * c0;
            den += w * c0 * c0;
        }
    }
    num / den
}

fn options(window: SourceWindow, readout: Readout) -> EstimateOptions {
    EstimateOptions {
        window,
        readout,
        seed: 7,
        ..EstimateOptions::default()
    }
}

#[test]
fn free_fermion_reference_obeys_its_sum_rule_and_two_site_limit() {
    // Σ_i |U_ij|² = 1 (unitarity) and U(0) = 1: checks of the reference
    // itself before it judges the estimator.
    for t in [0.0, 0.7, 2.2] {
        let c = free_fermion(t);
        for j in 0..N {
            assert!(close(c.column(j).sum(), 1.0, 0.0, 1e-12));
        }
    }
    assert!(close(free_fermion(0.0)[(3, 3)], 1.0, 0.0, 1e-12));
}

#[test]
fn estimator_agrees_with_free_fermions_within_its_errors() {
    // Truth: C_ij(t) = |U_ij(t)|² (Jordan–Wigner, the physics notes), shots
    // sampled from exact many-body dynamics. Calibration: χ² per point
    // near 1 and 1σ coverage near 68.3 % (common practice). The 500
    // points share states and are correlated, so one data set's χ² per
    // point scatters: over 24 independent sampler seeds it ranged
    // 0.78–1.28 (coverage 0.62–0.74), and the mean squared deviation
    // from the truth was 0.997 of the mean bootstrap variance.
    let estimate = estimate(
        &records(CLEAN),
        &options(SourceWindow::Central, Readout::None),
    )
    .expect("estimate");
    let (chi2, coverage) = agreement(&estimate, 1.0);
    assert!((0.75..1.3).contains(&chi2), "χ²/point = {chi2}");
    assert!((0.60..0.76).contains(&coverage), "coverage = {coverage}");
    assert_eq!(estimate.states_per_time, vec![STATES; TIMES.len()]);
    assert_eq!(
        estimate.shots_per_time,
        vec![(STATES * SHOTS) as u64; TIMES.len()]
    );
    // The sum rule holds within its errors (U(1), the physics notes).
    for s in &estimate.sum_rule {
        assert!(!s.departs, "{s:?}");
    }
    assert!(estimate.warnings.is_empty(), "{:?}", estimate.warnings);
}

#[test]
fn bulk_map_agrees_with_free_fermions_within_its_errors() {
    // C(x,t) = mean over sources 3..=6 of |U_{j+x,j}(t)|².
    let estimate = estimate(
        &records(CLEAN),
        &options(SourceWindow::Bulk { first: 3, last: 6 }, Readout::None),
    )
    .expect("estimate");
    let map = &estimate.map;
    assert_eq!(map.offsets().first(), Some(&-6));
    assert_eq!(map.offsets().last(), Some(&6));
    let (mut chi2, mut covered, mut points) = (0.0, 0usize, 0usize);
    for (ti, &t) in map.times().iter().enumerate().skip(1) {
        let truth = free_fermion(t);
        for (xi, &x) in map.offsets().iter().enumerate() {
            let sources: Vec<usize> = (3..=6)
                .filter(|&j| (0..N as i32).contains(&(j as i32 + x)))
                .collect();
            let want = sources
                .iter()
                .map(|&j| truth[((j as i32 + x) as usize, j)])
                .sum::<f64>()
                / sources.len() as f64;
            assert_eq!(estimate.sources_per_offset[xi], sources.len());
            let (c, e) = map.get(ti, xi).expect("present");
            let z = (c - want) / e.expect("errors");
            chi2 += z * z;
            covered += usize::from(z.abs() < 1.0);
            points += 1;
        }
    }
    // Only 5 × 13 = 65 points, strongly correlated through shared
    // sources: the binomial spread of the coverage alone is ±0.06, so
    // the bounds are wider than for the pair tensor.
    let (chi2, coverage) = (chi2 / points as f64, covered as f64 / points as f64);
    assert!((0.5..1.6).contains(&chi2), "χ²/point = {chi2}");
    assert!((0.53..0.85).contains(&coverage), "coverage = {coverage}");
    // Offsets −6..=6 over sources 3..=6: 4·13 pairs, of which
    // x = −6,−5,−4 lose 3,2,1 and x = 4,5,6 lose 1,2,3 (counted by hand).
    assert_eq!(estimate.provenance.skipped_pairs, 12);
}

#[test]
fn readout_error_scales_by_the_contrast_and_its_correction_recovers_the_truth() {
    let noise = Noise {
        p01: 0.08,
        p10: 0.04,
        prep: 0.0,
        seed: 3,
    };
    let shots = records(noise);
    let raw = estimate(&shots, &options(SourceWindow::Central, Readout::None)).expect("estimate");
    // Readout of the probe only: C is scaled by 1 − p01 − p10 = 0.88
    // (derivation in the module documentation), not by its square
    // 0.7744.
    let r = scale_factor(&raw);
    assert!((r - 0.88).abs() < 0.02, "scale {r}");
    let (chi2, _) = agreement(&raw, 0.88);
    assert!(chi2 < 1.3, "χ²/point against 0.88·truth = {chi2}");
    // The sum rule is scaled too: Σ ≈ 0.88 within its errors. (Its
    // error is large, ≈ √N/√M ≈ 0.09: the column sum adds the sampling
    // noise of N − 1 cross-covariances that vanish on average.)
    for s in raw.sum_rule.iter().skip(1) {
        assert!((s.sum - 0.88).abs() < 3.5 * s.err, "{s:?}");
        assert!(s.err > 0.03 && s.err < 0.2, "{s:?}");
    }

    let given = estimate(
        &shots,
        &options(
            SourceWindow::Central,
            Readout::Global {
                p01: 0.08,
                p10: 0.04,
            },
        ),
    )
    .expect("estimate");
    let (chi2, coverage) = agreement(&given, 1.0);
    assert!((0.75..1.3).contains(&chi2), "χ²/point = {chi2}");
    assert!((0.60..0.76).contains(&coverage), "coverage = {coverage}");

    let calibrated = estimate(
        &shots,
        &options(
            SourceWindow::Central,
            Readout::FromTimeZero { per_site: true },
        ),
    )
    .expect("estimate");
    let (chi2, coverage) = agreement(&calibrated, 1.0);
    assert!((0.75..1.3).contains(&chi2), "χ²/point = {chi2}");
    assert!((0.60..0.78).contains(&coverage), "coverage = {coverage}");
    let applied = calibrated.readout.as_ref().expect("applied");
    assert_eq!(applied.origin, "time-zero shots");
    let errs = applied.p01_err.as_ref().expect("calibrated errors");
    for (i, (&p, &err)) in applied.p01.iter().zip(errs).enumerate() {
        // Each per-site rate rests on ~2400 t = 0 shots: σ ≈ 0.006.
        assert!((p - 0.08).abs() < 4.0 * err, "site {i}");
        assert!(err > 0.002 && err < 0.012, "σ = {err}");
    }
}

#[test]
fn preparation_and_readout_error_give_the_squared_factor_and_time_zero_calibration_undoes_it() {
    // Symmetric preparation and readout error e = 0.05: uncorrected C is
    // scaled by (1 − 2e)² = 0.81 (physics notes, common practice).
    let e = 0.05;
    let shots = records(Noise {
        p01: e,
        p10: e,
        prep: e,
        seed: 5,
    });
    let raw = estimate(&shots, &options(SourceWindow::Central, Readout::None)).expect("estimate");
    let r = scale_factor(&raw);
    assert!((r - 0.81).abs() < 0.02, "scale {r}");
    let calibrated = estimate(
        &shots,
        &options(
            SourceWindow::Central,
            Readout::FromTimeZero { per_site: false },
        ),
    )
    .expect("estimate");
    let (chi2, coverage) = agreement(&calibrated, 1.0);
    assert!((0.75..1.3).contains(&chi2), "χ²/point = {chi2}");
    assert!((0.60..0.78).contains(&coverage), "coverage = {coverage}");
    // The time-zero rate is the compound e(1−e)·2 = 0.095.
    let applied = calibrated.readout.expect("applied");
    assert!((applied.p01[0] - 0.095).abs() < 0.01, "{}", applied.p01[0]);
}

#[test]
fn renormalisation_restores_the_sum_and_stores_its_factor() {
    let shots = records(Noise {
        p01: 0.1,
        p10: 0.1,
        prep: 0.0,
        seed: 9,
    });
    let mut opts = options(SourceWindow::Single(2), Readout::None);
    opts.renormalise = true;
    let est = estimate(&shots, &opts).expect("estimate");
    for (ti, s) in est.sum_rule.iter().enumerate() {
        // For one source Σ_x C(x,t) of the map is S(t); after dividing
        // by S it is 1 up to rounding (definition).
        let total: f64 = est.map.values().row(ti).sum();
        assert!(close(total, 1.0, 0.0, 1e-12), "t = {}: {total}", s.t);
        let factor = s.factor.expect("stored");
        assert!(close(factor * s.sum, 1.0, 0.0, 1e-12));
        // Readout 0.1 on both: S ≈ 0.8, factor ≈ 1.25 (module docs),
        // within the bootstrap error of the factor.
        let err = s.factor_err.expect("error");
        assert!((factor - 1.25).abs() < 3.5 * err, "{factor} ± {err}");
    }
}

#[test]
fn lost_magnetisation_is_flagged_by_the_sum_rule() {
    // At t = 0 the readings are the prepared bits; reading each up spin
    // as down with probability 0.2 (a loss read as "down") scales every
    // C_ij by 1 − 0.2 = 0.8 (module docs), so S = 0.8 with an error of
    // about 0.8·√(N/M) ≈ 0.02 for M = 4000 states: a clear departure.
    let mut rng = seeded_rng(31);
    let mut acc = ShotAccumulator::new(N).expect("valid");
    let mut meas = vec![0u8; N];
    for k in 0..4000 {
        let bits: Vec<u8> = (0..N).map(|_| u8::from(rng.random::<bool>())).collect();
        acc.add_state(&bits).expect("bits");
        for (m, &b) in meas.iter_mut().zip(&bits) {
            *m = if b == 1 && rng.random::<f64>() < 0.2 {
                0
            } else {
                b
            };
        }
        acc.add_shot(k, 0.0, &meas).expect("valid");
    }
    let est =
        estimate(&acc.finish().expect("shots"), &EstimateOptions::default()).expect("estimate");
    let s = est.sum_rule[0];
    assert!(s.departs && (s.sum - 0.8).abs() < 3.5 * s.err, "{s:?}");
    assert!(
        est.warnings.iter().any(|w| w.contains("sum rule")),
        "{:?}",
        est.warnings
    );
}

#[test]
fn connected_covariance_matches_numpy_on_a_hand_made_example() {
    // Two sites, five states, uneven shots. Reference: numpy 2.4.6,
    // np.cov(X[:, i], S[:, j], ddof=1)[0, 1] with X the per-state mean
    // readings and S the initial spins.
    let mut acc = ShotAccumulator::new(2).expect("valid");
    let states: [&[u8]; 5] = [b"00", b"01", b"10", b"11", b"10"];
    let shots: [&[&[u8]]; 5] = [
        &[b"10", b"00"],
        &[b"01"],
        &[b"11", b"10", b"11"],
        &[b"00", b"01"],
        &[b"10", b"10", b"00", b"11"],
    ];
    for (bits, list) in states.iter().zip(shots) {
        let k = acc.add_state(bits).expect("2 bits");
        for m in list {
            acc.add_shot(k, 1.5, m).expect("valid");
        }
    }
    let records = acc.finish().expect("shots");
    let est = estimate(
        &records,
        &EstimateOptions {
            window: SourceWindow::Bulk { first: 0, last: 1 },
            ..EstimateOptions::default()
        },
    )
    .expect("estimate");
    let want = [[0.4, -0.9], [-0.033333333333333375, 0.5333333333333334]];
    for (i, row) in want.iter().enumerate() {
        for (j, &w) in row.iter().enumerate() {
            assert!(
                close(est.pairs.values[(0, i, j)], w, 1e-13, 1e-15),
                "C[{i}][{j}] = {}",
                est.pairs.values[(0, i, j)]
            );
        }
    }
    // The map at x = 0 is the mean of C_00 and C_11; x = ±1 one pair each.
    let x0 = est.map.column_of(0).expect("x = 0");
    assert!(close(
        est.map.values()[(0, x0)],
        (0.4 + 0.5333333333333334) / 2.0,
        1e-13,
        0.0
    ));
    // Sum rule: mean over both sources of their column sums.
    let s = (0.4 - 0.033333333333333375 - 0.9 + 0.5333333333333334) / 2.0;
    assert!(close(est.sum_rule[0].sum, s, 1e-13, 1e-15));
}
