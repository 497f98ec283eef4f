//! Speed of the symmetric stable density: nanoseconds per point, by index μ
//! and by the region (method) that serves each point.
//!
//! Run:
//!     cargo bench -p spreadscope-physics --bench stable
//! Side by side with scipy on the same (μ, x) points:
//!     python3 tests/reference/bench_scipy_stable.py
//! Both print one line per μ with the mean time per point over the same point
//! set (61 points log-spaced in [1e-3, 1e3] and 101 points evenly spaced in
//! [0, 20], the range a profile fit samples); this binary also splits the
//! time by method and reports the cost of building a density (per μ: series
//! coefficients, region limits, Nolan grid). Speed targets live here, never
//! in tests.

use std::collections::BTreeMap;
use std::hint::black_box;
use std::time::{Duration, Instant};

use spreadscope_physics::model::stable::{StableDensity, StableMethod};

/// The indices timed (the scipy script uses the same list).
const MUS: [f64; 9] = [0.5, 0.8, 0.999, 1.001, 1.2, 1.5, 1.8, 1.95, 2.0];

/// The x points timed (the scipy script builds the same list).
fn points() -> Vec<f64> {
    let mut xs: Vec<f64> = (0..61)
        .map(|k| 10f64.powf(-3.0 + 0.1 * f64::from(k)))
        .collect();
    xs.extend((0..101).map(|k| 0.2 * f64::from(k)));
    xs
}

/// Mean nanoseconds per call of `f` over `xs`, repeating for at least 50 ms.
fn ns_per_point(xs: &[f64], f: impl Fn(f64) -> f64) -> f64 {
    if xs.is_empty() {
        return f64::NAN;
    }
    let mut calls = 0usize;
    let start = Instant::now();
    while start.elapsed() < Duration::from_millis(50) {
        let mut acc = 0.0;
        for &x in xs {
            acc += f(black_box(x));
        }
        black_box(acc);
        calls += xs.len();
    }
    start.elapsed().as_nanos() as f64 / calls as f64
}

fn main() {
    let xs = points();
    println!(
        "symmetric stable density, {} points per index (ns per point)",
        xs.len()
    );
    println!(
        "{:>6} {:>10} {:>10} {:>10} {:>10} {:>12}  by method (ns/point, count)",
        "mu", "pdf", "cdf", "log_pdf", "d/dx", "build (us)"
    );
    let mut total_pdf = 0.0;
    for &mu in &MUS {
        let build_start = Instant::now();
        let mut builds = 0;
        while build_start.elapsed() < Duration::from_millis(50) {
            black_box(StableDensity::standard(black_box(mu)).expect("valid index"));
            builds += 1;
        }
        let build_us = build_start.elapsed().as_secs_f64() * 1e6 / f64::from(builds);
        let d = StableDensity::standard(mu).expect("valid index");
        let pdf = ns_per_point(&xs, |x| d.pdf(x));
        let cdf = ns_per_point(&xs, |x| d.cdf(x));
        let log_pdf = ns_per_point(&xs, |x| d.log_pdf(x));
        let dx = ns_per_point(&xs, |x| d.d_pdf_dx(x));
        total_pdf += pdf;
        let mut groups: BTreeMap<String, Vec<f64>> = BTreeMap::new();
        for &x in &xs {
            let m: StableMethod = d.pdf_method(x);
            groups.entry(format!("{m:?}")).or_default().push(x);
        }
        let split: Vec<String> = groups
            .iter()
            .map(|(m, g)| format!("{m} {:.0} ({})", ns_per_point(g, |x| d.pdf(x)), g.len()))
            .collect();
        println!(
            "{mu:>6} {pdf:>10.0} {cdf:>10.0} {log_pdf:>10.0} {dx:>10.0} {build_us:>12.1}  {}",
            split.join(", ")
        );
    }
    println!(
        "mean pdf over all indices: {:.0} ns/point",
        total_pdf / MUS.len() as f64
    );
}
