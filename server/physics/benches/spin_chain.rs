//! Benchmark of the spin-chain typicality solver against the performance
//! targets in DEVELOPERS.md: N = 20, α = 1, 50 times up to t = 10 within 60 s on
//! 2 cores and 2 GiB; N = 16 at least 10× faster than a scipy
//! `expm_multiply` script doing the same estimate.
//!
//! Run (release, the default for `cargo bench`):
//!   cargo bench -p spreadscope-physics --bench spin_chain
//!   cargo bench -p spreadscope-physics --bench spin_chain -- 16 4   # sites, samples
//!   cargo bench -p spreadscope-physics --bench spin_chain -- 22 2 1  # ... and t_max
//!   cargo bench -p spreadscope-physics --bench spin_chain -- 20 2 10 1.2 20  # ... α, times
//!   cargo bench -p spreadscope-physics --bench spin_chain -- exact 12 14
//! Peak resident memory, measured from outside:
//!   /usr/bin/time -v target/release/deps/spin_chain-* --bench 20 2
//! The scipy side (same chain, times, estimator and sample count):
//!   python3 tests/reference/bench_scipy_spin_chain.py --sites 16 --samples 4
//! Compare the printed wall times; the ratio scipy / spreadscope is the
//! speed-up that the target asks to be ≥ 10.
//!
//! This is a timing program, never a test: it asserts nothing about speed.

use std::sync::atomic::AtomicBool;
use std::time::Instant;

use spreadscope_physics::model::couplings::Couplings;
use spreadscope_physics::model::spin_chain::{SpinChain, TypicalityOptions};

fn run(sites: usize, samples: usize, t_max: f64, alpha: f64, n_times: usize) {
    let couplings = Couplings::power_law(sites, 1.0, alpha).expect("valid couplings");
    let chain = SpinChain::new(&couplings, 0.0).expect("valid chain");
    let times: Vec<f64> = (0..n_times)
        .map(|k| t_max * (k + 1) as f64 / n_times as f64)
        .collect();
    let source = sites / 2;
    let options = TypicalityOptions::new(samples, 2024);
    let never = AtomicBool::new(false);
    let start = Instant::now();
    let result = chain
        .correlations_typical_with(source, &times, &options, &|_| {}, &never)
        .expect("typicality run");
    let seconds = start.elapsed().as_secs_f64();
    let last = times.len() - 1;
    let sum: f64 = result.values.row(last).sum();
    let max_err = result.errors.iter().copied().fold(0.0f64, f64::max);
    println!(
        "N = {sites:2}, alpha = {alpha}, Delta = 0, {samples} samples, {n_times} times to t = {t_max}: \
         {seconds:8.2} s wall, {} threads",
        rayon::current_num_threads()
    );
    println!(
        "    memory plan {:.0} MiB (Krylov dim {}, {} samples in flight); \
         C(0, t_max) = {:.6} ± {:.1e}; sum rule at t_max: {:.3e} off; \
         largest standard error {:.1e}; propagation bound {:.1e}",
        result.memory.bytes as f64 / (1u64 << 20) as f64,
        result.memory.krylov_dim,
        result.memory.concurrent_samples,
        result.values[(last, source)],
        result.errors[(last, source)],
        (sum - 1.0).abs(),
        max_err,
        result.propagation_error,
    );
}

/// The exact method on its largest chain, for reference (no target).
fn run_exact(sites: usize) {
    let couplings = Couplings::power_law(sites, 1.0, 1.0).expect("valid couplings");
    let chain = SpinChain::new(&couplings, 0.0).expect("valid chain");
    let times: Vec<f64> = (0..50).map(|k| 10.0 * (k + 1) as f64 / 50.0).collect();
    let start = Instant::now();
    let values = chain
        .correlations_exact(sites / 2, &times)
        .expect("exact run");
    println!(
        "exact N = {sites:2}, alpha = 1, Delta = 0, 50 times to t = 10: {:8.2} s wall; \
         C(0, 10) = {:.6}",
        start.elapsed().as_secs_f64(),
        values[(times.len() - 1, sites / 2)]
    );
}

fn main() {
    let raw: Vec<String> = std::env::args().skip(1).collect();
    if raw.iter().any(|a| a == "exact") {
        for sites in raw.iter().filter_map(|a| a.parse().ok()) {
            run_exact(sites);
        }
        return;
    }
    let args: Vec<f64> = raw.iter().filter_map(|a| a.parse().ok()).collect();
    let count = |x: f64| x as usize;
    match args.as_slice() {
        [sites, samples, t_max, alpha, n_times, ..] => run(
            count(*sites),
            count(*samples),
            *t_max,
            *alpha,
            count(*n_times),
        ),
        [sites, samples, t_max, ..] => run(count(*sites), count(*samples), *t_max, 1.0, 50),
        [sites, samples] => run(count(*sites), count(*samples), 10.0, 1.0, 50),
        [sites] => run(count(*sites), 2, 10.0, 1.0, 50),
        _ => {
            run(16, 4, 10.0, 1.0, 50);
            run(20, 2, 10.0, 1.0, 50);
            run(20, 2, 10.0, 1.2, 20);
        }
    }
}
