//! Benchmark of the spin-chain typicality solver against the performance
//! targets in DEVELOPERS.md: N = 20, α = 1.2, 2 random vectors, 20 times up
//! to t = 10 within 5 s and 300 MB on 2 cores; N = 24 within 10 min and 3 GB.
//!
//! Run (release, the default for `cargo bench`):
//!   cargo bench -p spreadscope-physics --bench spin_chain
//!   cargo bench -p spreadscope-physics --bench spin_chain -- 16 4   # sites, samples
//!   cargo bench -p spreadscope-physics --bench spin_chain -- 22 2 1  # ... and t_max
//!   cargo bench -p spreadscope-physics --bench spin_chain -- 20 2 10 1.2 20  # ... α, times
//!   cargo bench -p spreadscope-physics --bench spin_chain -- 16 2 10 1.2 20 1e-12  # ... step tolerance
//!   cargo bench -p spreadscope-physics --bench spin_chain -- 24 2 10 1.2 20 1e-8 3  # ... memory limit, GB
//!   cargo bench -p spreadscope-physics --bench spin_chain -- exact 12 14
//! The default run also starts the scipy reference (full 2^N space,
//! `expm_multiply`, the same chain, times and number of random vectors) at
//! 16 sites and prints its wall time on the next line, when `python3` with
//! scipy is on the path:
//!   python3 tests/reference/bench_scipy_spin_chain.py --sites 16 --samples 2 --alpha 1.2 --times 20
//! Peak resident memory, measured from outside:
//!   /usr/bin/time -v target/release/deps/spin_chain-* --bench 20 2 10 1.2 20
//! The machine is shared: "CPU" is the process's user + system time, which
//! says what the run costs even when other work takes a core away.
//!
//! This is a timing program, never a test: it asserts nothing about speed.

use std::process::Command;
use std::sync::atomic::AtomicBool;
use std::time::Instant;

use spreadscope_physics::model::couplings::Couplings;
use spreadscope_physics::model::spin_chain::typicality::{reduce, vector_records};
use spreadscope_physics::model::spin_chain::{SpinChain, TypicalityOptions};

/// User + system CPU seconds of this process so far (Linux `/proc`).
fn cpu_seconds() -> Option<f64> {
    let stat = std::fs::read_to_string("/proc/self/stat").ok()?;
    // Fields after the parenthesised command name; utime and stime are the
    // 14th and 15th fields of the whole line.
    let rest = stat.rsplit_once(')')?.1;
    let fields: Vec<&str> = rest.split_whitespace().collect();
    let ticks: f64 = fields.get(11)?.parse::<f64>().ok()? + fields.get(12)?.parse::<f64>().ok()?;
    Some(ticks / 100.0)
}

fn run(
    sites: usize,
    samples: usize,
    t_max: f64,
    alpha: f64,
    n_times: usize,
    tolerance: Option<f64>,
    memory_gb: Option<f64>,
) {
    let couplings = Couplings::power_law(sites, 1.0, alpha).expect("valid couplings");
    let chain = SpinChain::new(&couplings, 0.0).expect("valid chain");
    let times: Vec<f64> = (0..n_times)
        .map(|k| t_max * (k + 1) as f64 / n_times as f64)
        .collect();
    let source = sites / 2;
    let mut options = TypicalityOptions::new(samples, 2024);
    if let Some(tolerance) = tolerance {
        options.step_tolerance = tolerance;
    }
    if let Some(gb) = memory_gb {
        options.memory_limit_bytes = (gb * 1e9) as u64;
    }
    let never = AtomicBool::new(false);
    let cpu_start = cpu_seconds();
    let start = Instant::now();
    // The two halves of `correlations_typical_with`, to see the records.
    let records = vector_records(
        &chain,
        source,
        &times,
        &options,
        &|_, _| true,
        &|_| {},
        &never,
    )
    .expect("typicality run");
    let central: Vec<u64> = records
        .iter()
        .filter(|r| r.up == sites / 2)
        .map(|r| r.applications)
        .collect();
    let result = reduce(&chain, source, &times, &options, records).expect("complete run");
    let seconds = start.elapsed().as_secs_f64();
    let cpu = match (cpu_start, cpu_seconds()) {
        (Some(a), Some(b)) => format!("{:.2} s CPU", b - a),
        _ => "CPU time unknown".to_string(),
    };
    let last = times.len() - 1;
    let sum: f64 = result.values.row(last).sum();
    let max_err = result.errors.iter().copied().fold(0.0f64, f64::max);
    println!(
        "N = {sites:2}, alpha = {alpha}, Delta = 0, {samples} samples, {n_times} times to t = {t_max}: \
         {seconds:8.2} s wall, {cpu}, {} threads",
        rayon::current_num_threads()
    );
    println!(
        "    {} vectors, {:.1} Hamiltonian applications per vector ({:?} in the largest \
         sector); memory plan {:.0} MiB \
         ({} vectors per pass, window of {} terms, {} output states held); C(0, t_max) = \
         {:.6} ± {:.1e}; sum rule at t_max: {:.3e} off; largest standard error {:.1e}; \
         propagation bound {:.1e}",
        result.vectors,
        result.applications as f64 / result.vectors.max(1) as f64,
        central,
        result.memory.bytes as f64 / (1u64 << 20) as f64,
        result.memory.lanes,
        result.memory.window,
        result.memory.slots,
        result.values[(last, source)],
        result.errors[(last, source)],
        (sum - 1.0).abs(),
        max_err,
        result.propagation_error,
    );
}

/// The scipy reference of the same case, side by side (skipped, with a
/// note, when python3 or scipy is missing).
fn run_scipy(sites: usize, samples: usize, alpha: f64, n_times: usize) {
    let script = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/../../tests/reference/bench_scipy_spin_chain.py"
    );
    let output = Command::new("python3")
        .arg(script)
        .args([
            "--sites",
            &sites.to_string(),
            "--samples",
            &samples.to_string(),
        ])
        .args([
            "--alpha",
            &alpha.to_string(),
            "--times",
            &n_times.to_string(),
        ])
        .output();
    match output {
        Ok(out) if out.status.success() => {
            print!("    reference: {}", String::from_utf8_lossy(&out.stdout));
        }
        Ok(out) => println!(
            "    reference not run: {}",
            String::from_utf8_lossy(&out.stderr)
                .lines()
                .last()
                .unwrap_or("")
        ),
        Err(e) => println!("    reference not run: python3: {e}"),
    }
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
        [sites, samples, t_max, alpha, n_times, rest @ ..] => run(
            count(*sites),
            count(*samples),
            *t_max,
            *alpha,
            count(*n_times),
            rest.first().copied(),
            rest.get(1).copied(),
        ),
        [sites, samples, t_max, ..] => {
            run(count(*sites), count(*samples), *t_max, 1.2, 20, None, None)
        }
        [sites, samples] => run(count(*sites), count(*samples), 10.0, 1.2, 20, None, None),
        [sites] => run(count(*sites), 2, 10.0, 1.2, 20, None, None),
        _ => {
            run(16, 2, 10.0, 1.2, 20, None, None);
            run_scipy(16, 2, 1.2, 20);
            run(18, 2, 10.0, 1.2, 20, None, None);
            run(20, 2, 10.0, 1.2, 20, None, None);
        }
    }
}
