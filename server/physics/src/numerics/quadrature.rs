//! Numerical integration on finite intervals: Gauss–Legendre rules of any
//! order (nodes and weights as plain arrays) and a globally adaptive
//! Gauss–Kronrod (7/15-point) integrator with an error estimate.
//!
//! Owns: node/weight generation and the adaptive bisection strategy. Must not
//! know: what is being integrated (no physics, no special integrands).
//!
//! Why written by hand rather than taken from a crate: the stable density
//! precomputes, once per index μ, the x-independent part of its integrand at
//! fixed nodes and reuses them for every x, so it needs the nodes and weights
//! themselves rather than an integrator behind a closure interface; and the
//! adaptive rule here (QUADPACK's QAG strategy with its error heuristic,
//! Piessens et al. 1983) is about a hundred lines, easy to audit and free of
//! dependencies. The Gauss–Legendre nodes are found by Newton's method on the
//! three-term recurrence (A&S 25.4.29, 22.7.10), accurate to a few ulps for
//! n ≤ 200.

use std::cmp::Ordering;
use std::collections::BinaryHeap;
use std::f64::consts::PI;

/// An n-point Gauss–Legendre rule on [−1, 1]: exact for polynomials of degree
/// ≤ 2n − 1 (A&S 25.4.29).
#[derive(Debug, Clone)]
pub struct GaussLegendre {
    nodes: Vec<f64>,
    weights: Vec<f64>,
}

impl GaussLegendre {
    /// Builds the n-point rule (n ≥ 1). Nodes are ascending.
    ///
    /// Each node is polished by Newton's method on P_n, started from the
    /// Tricomi approximation cos(π(i − ¼)/(n + ½)); weights are
    /// 2/((1 − x²) P_n'(x)²) (A&S 25.4.29).
    #[must_use]
    pub fn new(n: usize) -> Self {
        let n = n.max(1);
        let mut nodes = vec![0.0; n];
        let mut weights = vec![0.0; n];
        let nf = n as f64;
        for i in 0..n.div_ceil(2) {
            let mut x = (PI * (i as f64 + 0.75) / (nf + 0.5)).cos();
            let mut dp = 1.0;
            for _ in 0..100 {
                let (p, d) = legendre_with_derivative(n, x);
                dp = d;
                let step = p / d;
                x -= step;
                if step.abs() <= 1e-16 * x.abs().max(1e-300) {
                    break;
                }
            }
            let (_, d) = legendre_with_derivative(n, x);
            if d.is_finite() {
                dp = d;
            }
            let w = 2.0 / ((1.0 - x * x) * dp * dp);
            // Node i from the right end; mirror to the left.
            nodes[n - 1 - i] = x;
            nodes[i] = -x;
            weights[n - 1 - i] = w;
            weights[i] = w;
        }
        if n % 2 == 1 {
            nodes[n / 2] = 0.0;
        }
        Self { nodes, weights }
    }

    /// Nodes on [−1, 1], ascending.
    #[must_use]
    pub fn nodes(&self) -> &[f64] {
        &self.nodes
    }

    /// Weights matching [`Self::nodes`]; they sum to 2.
    #[must_use]
    pub fn weights(&self) -> &[f64] {
        &self.weights
    }

    /// ∫_a^b f(x) dx by this rule mapped affinely to [a, b].
    pub fn integrate(&self, mut f: impl FnMut(f64) -> f64, a: f64, b: f64) -> f64 {
        let c = 0.5 * (a + b);
        let h = 0.5 * (b - a);
        let mut s = 0.0;
        for (x, w) in self.nodes.iter().zip(&self.weights) {
            s += w * f(c + h * x);
        }
        s * h
    }
}

/// P_n(x) and P_n'(x) by the three-term recurrence (A&S 22.7.10) and the
/// derivative identity (1 − x²) P_n' = n (P_{n−1} − x P_n) (A&S 22.8.5).
fn legendre_with_derivative(n: usize, x: f64) -> (f64, f64) {
    let mut p0 = 1.0;
    let mut p1 = x;
    for k in 2..=n {
        let kf = k as f64;
        let p2 = ((2.0 * kf - 1.0) * x * p1 - (kf - 1.0) * p0) / kf;
        p0 = p1;
        p1 = p2;
    }
    if n == 0 {
        return (1.0, 0.0);
    }
    let nf = n as f64;
    let d = nf * (p0 - x * p1) / (1.0 - x * x);
    (p1, d)
}

/// Kronrod abscissae of the 15-point rule on [0, 1) (symmetric), descending;
/// entries 1, 3, 5 are the 7-point Gauss nodes (QUADPACK qk15).
const XGK15: [f64; 8] = [
    0.991_455_371_120_812_6,
    0.949_107_912_342_758_5,
    0.864_864_423_359_769_1,
    0.741_531_185_599_394_4,
    0.586_087_235_467_691_1,
    0.405_845_151_377_397_2,
    0.207_784_955_007_898_5,
    0.0,
];

/// Kronrod weights matching [`XGK15`] (QUADPACK qk15).
const WGK15: [f64; 8] = [
    0.022_935_322_010_529_22,
    0.063_092_092_629_978_55,
    0.104_790_010_322_250_2,
    0.140_653_259_715_525_9,
    0.169_004_726_639_267_9,
    0.190_350_578_064_785_4,
    0.204_432_940_075_298_9,
    0.209_482_141_084_727_8,
];

/// 7-point Gauss weights for the nodes XGK15[1], [3], [5] and the centre
/// (QUADPACK qk15).
const WG7: [f64; 4] = [
    0.129_484_966_168_869_7,
    0.279_705_391_489_276_7,
    0.381_830_050_505_118_9,
    0.417_959_183_673_469_4,
];

/// Result of an adaptive integration.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct QuadratureResult {
    /// Estimated integral.
    pub value: f64,
    /// Estimated absolute error (QUADPACK heuristic, usually pessimistic).
    pub error: f64,
    /// Number of integrand evaluations.
    pub evaluations: usize,
    /// Whether the requested tolerance was met within the interval budget.
    pub converged: bool,
}

/// One 15-point Kronrod panel with its 7-point Gauss companion: returns the
/// Kronrod value and QUADPACK's error estimate
/// resasc · min(1, (200 |K − G| / resasc)^{3/2}).
fn kronrod15(f: &mut impl FnMut(f64) -> f64, a: f64, b: f64) -> (f64, f64) {
    let c = 0.5 * (a + b);
    let h = 0.5 * (b - a);
    let fc = f(c);
    let mut kron = WGK15[7] * fc;
    let mut gauss = WG7[3] * fc;
    let mut values = [0.0; 15];
    values[7] = fc;
    for j in 0..7 {
        let dx = h * XGK15[j];
        let f1 = f(c - dx);
        let f2 = f(c + dx);
        values[j] = f1;
        values[14 - j] = f2;
        kron += WGK15[j] * (f1 + f2);
        if j % 2 == 1 {
            gauss += WG7[j / 2] * (f1 + f2);
        }
    }
    let mean = 0.5 * kron;
    let mut resasc = WGK15[7] * (fc - mean).abs();
    for j in 0..7 {
        resasc += WGK15[j] * ((values[j] - mean).abs() + (values[14 - j] - mean).abs());
    }
    let kron = kron * h;
    let resasc = resasc * h.abs();
    let mut err = (kron - gauss * h).abs();
    if resasc > 0.0 && err > 0.0 {
        err = resasc * (200.0 * err / resasc).powf(1.5).min(1.0);
    }
    (kron, err)
}

#[derive(Debug)]
struct Panel {
    a: f64,
    b: f64,
    value: f64,
    error: f64,
}

impl PartialEq for Panel {
    fn eq(&self, other: &Self) -> bool {
        self.error.total_cmp(&other.error) == Ordering::Equal
    }
}
impl Eq for Panel {}
impl PartialOrd for Panel {
    fn partial_cmp(&self, other: &Self) -> Option<Ordering> {
        Some(self.cmp(other))
    }
}
impl Ord for Panel {
    fn cmp(&self, other: &Self) -> Ordering {
        self.error.total_cmp(&other.error)
    }
}

/// ∫ f over the union of `[breaks[i], breaks[i+1]]` by globally adaptive
/// Gauss–Kronrod 7/15 (QUADPACK QAG strategy): the panel with the largest
/// error estimate is bisected until the total estimate is below
/// max(abs_tol, rel_tol·|value|) or `max_panels` panels exist.
///
/// Breakpoints let the caller put known peaks or kinks on panel edges.
/// Accuracy: the estimate is the QUADPACK heuristic; for smooth integrands
/// the true error is usually orders of magnitude smaller.
pub fn integrate_adaptive(
    mut f: impl FnMut(f64) -> f64,
    breaks: &[f64],
    rel_tol: f64,
    abs_tol: f64,
    max_panels: usize,
) -> QuadratureResult {
    let mut heap = BinaryHeap::new();
    let mut evaluations = 0;
    let mut value = 0.0;
    let mut error = 0.0;
    for w in breaks.windows(2) {
        let (v, e) = kronrod15(&mut f, w[0], w[1]);
        evaluations += 15;
        value += v;
        error += e;
        heap.push(Panel {
            a: w[0],
            b: w[1],
            value: v,
            error: e,
        });
    }
    let mut converged = error <= abs_tol.max(rel_tol * value.abs());
    while !converged && heap.len() < max_panels.max(1) {
        let Some(worst) = heap.pop() else { break };
        let mid = 0.5 * (worst.a + worst.b);
        let (v1, e1) = kronrod15(&mut f, worst.a, mid);
        let (v2, e2) = kronrod15(&mut f, mid, worst.b);
        evaluations += 30;
        heap.push(Panel {
            a: worst.a,
            b: mid,
            value: v1,
            error: e1,
        });
        heap.push(Panel {
            a: mid,
            b: worst.b,
            value: v2,
            error: e2,
        });
        // Re-sum rather than update, so that rounding in long runs cannot drift.
        value = heap.iter().map(|p| p.value).sum();
        error = heap.iter().map(|p| p.error).sum();
        converged = error <= abs_tol.max(rel_tol * value.abs());
    }
    QuadratureResult {
        value,
        error,
        evaluations,
        converged,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::tolerance::close;

    #[test]
    fn gauss_legendre_is_exact_to_degree_2n_minus_1() {
        // ∫_{-1}^{1} x^k dx = 2/(k+1) for even k, 0 for odd k (elementary).
        for n in [1usize, 2, 5, 10, 17, 40] {
            let rule = GaussLegendre::new(n);
            let wsum: f64 = rule.weights().iter().sum();
            assert!(
                close(wsum, 2.0, 1e-14, 0.0),
                "n = {n}: weights sum to {wsum}"
            );
            for k in 0..(2 * n) {
                let got = rule.integrate(|x| x.powi(k as i32), -1.0, 1.0);
                let want = if k % 2 == 0 {
                    2.0 / (k as f64 + 1.0)
                } else {
                    0.0
                };
                assert!(
                    close(got, want, 1e-13, 1e-14),
                    "n = {n}, k = {k}: {got} vs {want}"
                );
            }
            // Degree 2n is not integrated exactly; the error is
            // 2^{2n+1} (n!)^4 / ((2n+1) ((2n)!)^2) for x^{2n} (A&S 25.4.30),
            // resolvable in double precision for n ≤ 10.
            if n <= 10 {
                let k = 2 * n;
                let got = rule.integrate(|x| x.powi(k as i32), -1.0, 1.0);
                let fact = |m: usize| (1..=m).map(|i| i as f64).product::<f64>();
                let predicted = 2f64.powi(k as i32 + 1) * fact(n).powi(4)
                    / ((k as f64 + 1.0) * fact(k).powi(2));
                let actual = 2.0 / (k as f64 + 1.0) - got;
                assert!(
                    close(actual, predicted, 1e-6, 0.0),
                    "n = {n}: error {actual:e} vs {predicted:e}"
                );
            }
        }
    }

    #[test]
    fn gauss_legendre_nodes_match_tables() {
        // A&S Table 25.4, n = 5: ±0.906179845938664, ±0.538469310105683, 0;
        // weights 0.236926885056189, 0.478628670499366, 0.568888888888889.
        let rule = GaussLegendre::new(5);
        let x = rule.nodes();
        let w = rule.weights();
        assert!(close(x[4], 0.906_179_845_938_664, 1e-14, 0.0));
        assert!(close(x[3], 0.538_469_310_105_683, 1e-14, 0.0));
        assert!(x[2].abs() < 1e-16);
        assert!(close(w[4], 0.236_926_885_056_189, 1e-13, 0.0));
        assert!(close(w[2], 0.568_888_888_888_889, 1e-13, 0.0));
    }

    #[test]
    fn kronrod_constants_are_exact_to_their_degrees() {
        // K15 is exact to degree 22 and G7 to degree 13 (Kronrod 1965); a typo
        // in any constant breaks one of these identities.
        let f_k = |k: i32| {
            let mut g = |x: f64| x.powi(k);
            kronrod15(&mut g, -1.0, 1.0).0
        };
        for k in (0..=22).step_by(2) {
            assert!(
                close(f_k(k), 2.0 / (k as f64 + 1.0), 1e-14, 0.0),
                "K15 degree {k}"
            );
        }
        let gauss = |k: i32| {
            let mut s = WG7[3] * 0f64.powi(k);
            for j in [1usize, 3, 5] {
                s += WG7[j / 2] * 2.0 * XGK15[j].powi(k);
            }
            s
        };
        for k in (0..=12).step_by(2) {
            assert!(
                close(gauss(k), 2.0 / (k as f64 + 1.0), 1e-14, 1e-300),
                "G7 degree {k}"
            );
        }
    }

    #[test]
    fn adaptive_integrates_a_peaked_function() {
        // ∫_0^1 x^{-1/2} dx = 2 (elementary): an endpoint singularity forces
        // many bisections; ∫_{-1}^{1} 1/(1e-4 + x²) dx = 2·100·atan(100).
        let r = integrate_adaptive(|x| 1.0 / x.sqrt(), &[0.0, 1.0], 1e-12, 0.0, 500);
        assert!(r.converged);
        assert!(close(r.value, 2.0, 1e-10, 0.0), "{r:?}");
        let want = 200.0 * 100f64.atan();
        let r = integrate_adaptive(|x| 1.0 / (1e-4 + x * x), &[-1.0, 0.0, 1.0], 1e-13, 0.0, 500);
        assert!(close(r.value, want, 1e-12, 0.0), "{r:?}");
        assert!(r.error < 1e-10 * want);
    }
}
