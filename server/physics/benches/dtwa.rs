//! Benchmark of the semiclassical (DTWA) solver against the target of the
//! spin-chain notes: 100 sites, 10⁴ trajectories, 50 times to t = 10 within
//! 60 s on 2 cores; and the integration error of the default step, from the
//! same trajectories (same seed, same draws) integrated with steps 4× and
//! 2× smaller and 2× and 4× larger than the default.
//!
//! Run (release, the default for `cargo bench`):
//!   cargo bench -p spreadscope-physics --bench dtwa
//!   cargo bench -p spreadscope-physics --bench dtwa -- 200 2000   # sites, trajectories
//!
//! This is a timing program, never a test: it asserts nothing about speed.

use std::sync::atomic::AtomicBool;
use std::time::Instant;

use spreadscope_physics::model::couplings::Couplings;
use spreadscope_physics::model::spin_chain::SpinChain;
use spreadscope_physics::model::spin_chain::dtwa::{DEFAULT_STEP_SCALE, DtwaOptions, correlations};

fn arg(position: usize, default: usize) -> usize {
    std::env::args()
        .skip(1)
        .filter(|a| a != "--bench")
        .nth(position)
        .map_or(default, |a| {
            a.parse().unwrap_or_else(|_| {
                eprintln!("dtwa bench: `{a}` is not a count");
                std::process::exit(2)
            })
        })
}

fn main() {
    let sites = arg(0, 100);
    let trajectories = arg(1, 10_000);
    let couplings = Couplings::power_law(sites, 1.0, 1.2).expect("valid couplings");
    let chain = SpinChain::new(&couplings, 0.0).expect("valid chain");
    let times: Vec<f64> = (1..=50).map(|k| 0.2 * f64::from(k)).collect();
    let source = sites / 2;
    let never = AtomicBool::new(false);
    let started = Instant::now();
    let result = correlations(
        &chain,
        source,
        &times,
        &DtwaOptions::new(trajectories, 2024),
        &|_| {},
        &never,
    )
    .expect("dtwa run");
    let seconds = started.elapsed().as_secs_f64();
    println!(
        "N = {sites}, alpha = 1.2, Delta = 0, {trajectories} trajectories, 50 times to t = 10: \
         {seconds:.2} s wall on {} threads (target 60 s for N = 100, 10^4 trajectories); \
         step {:.4}; C(0, 10) = {:.4} ± {:.4}",
        rayon::current_num_threads(),
        result.step,
        result.values[(49, source)],
        result.errors[(49, source)],
    );
    // Integration error: the same draws with other steps.
    let probe = 512;
    let with = |scale: f64| {
        let mut options = DtwaOptions::new(probe, 7);
        options.step_scale = scale;
        correlations(&chain, source, &times, &options, &|_| {}, &never).expect("dtwa run")
    };
    let fine = with(DEFAULT_STEP_SCALE / 4.0);
    for factor in [0.5, 1.0, 2.0, 4.0] {
        let scale = DEFAULT_STEP_SCALE * factor;
        let started = Instant::now();
        let coarse = with(scale);
        let seconds = started.elapsed().as_secs_f64();
        let worst = (&coarse.values - &fine.values)
            .iter()
            .fold(0.0f64, |w, d| w.max(d.abs()));
        println!(
            "    step scale {scale:.4}: largest change from a 4x finer step {worst:.1e} \
             ({probe} trajectories, {seconds:.2} s)"
        );
    }
}
