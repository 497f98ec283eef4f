//! Where the semiclassical method holds: the largest deviation of DTWA from
//! exact dynamics (every sector diagonalised, 12 sites) or from sector
//! typicality (16 sites) over every site and 21 times in [0, 5] for a
//! central source, per coupling range α and anisotropy Δ. The table in the
//! `dtwa` module documentation and the physics notes comes from this run.
//!
//! Run: `cargo run --release -p spreadscope-physics --example dtwa_validate -- [TRAJECTORIES]`
//! (default 20000).

use std::sync::atomic::AtomicBool;
use std::time::Instant;

use ndarray::Array2;
use spreadscope_physics::model::couplings::Couplings;
use spreadscope_physics::model::spin_chain::SpinChain;
use spreadscope_physics::model::spin_chain::dtwa::{DtwaOptions, correlations};

/// Nearest-neighbour couplings of strength 1 on `sites` sites.
fn nearest_neighbour(sites: usize) -> Couplings {
    let mut m = Array2::<f64>::zeros((sites, sites));
    for i in 0..sites - 1 {
        m[(i, i + 1)] = 1.0;
        m[(i + 1, i)] = 1.0;
    }
    Couplings::from_matrix(m).expect("valid couplings")
}

fn main() {
    let trajectories: usize = match std::env::args().nth(1) {
        None => 20_000,
        Some(a) => a.parse().unwrap_or_else(|_| {
            eprintln!("dtwa_validate: `{a}` is not a number of trajectories");
            std::process::exit(2)
        }),
    };
    let times: Vec<f64> = (0..=20).map(|k| 0.25 * f64::from(k)).collect();
    // (sites, α (None: nearest neighbours), Δ)
    let cases: [(usize, Option<f64>, f64); 11] = [
        (12, Some(0.8), 0.0),
        (12, Some(1.2), 0.0),
        (12, Some(1.2), 1.0),
        (12, Some(1.2), -0.5),
        (12, Some(2.0), 0.0),
        (12, Some(3.0), 0.5),
        (12, None, 0.0),
        (12, None, 1.0),
        (16, Some(0.8), 0.0),
        (16, Some(1.2), 1.0),
        (16, None, 0.0),
    ];
    println!(
        "{:>5} {:>6} {:>5} {:>10} {:>10} {:>12} {:>9}",
        "sites", "alpha", "Delta", "max |dC|", "t <= 1", "DTWA error", "seconds"
    );
    let never = AtomicBool::new(false);
    for (sites, alpha, delta) in cases {
        let couplings = match alpha {
            Some(a) => Couplings::power_law(sites, 1.0, a).expect("valid couplings"),
            None => nearest_neighbour(sites),
        };
        let chain = SpinChain::new(&couplings, delta).expect("valid chain");
        let source = (sites - 1) / 2;
        let reference = if sites <= 14 {
            chain.correlations_exact(source, &times).expect("exact")
        } else {
            chain
                .correlations_typical(source, &times, 8, 11)
                .expect("typicality")
                .values
        };
        let started = Instant::now();
        let dtwa = correlations(
            &chain,
            source,
            &times,
            &DtwaOptions::new(trajectories, 5),
            &|_| {},
            &never,
        )
        .expect("dtwa");
        let seconds = started.elapsed().as_secs_f64();
        let (mut worst, mut early, mut err) = (0.0f64, 0.0f64, 0.0f64);
        for (ti, &t) in times.iter().enumerate() {
            for i in 0..sites {
                let d = (dtwa.values[(ti, i)] - reference[(ti, i)]).abs();
                worst = worst.max(d);
                if t <= 1.0 {
                    early = early.max(d);
                }
                err = err.max(dtwa.errors[(ti, i)]);
            }
        }
        let alpha = alpha.map_or("NN".to_string(), |a| format!("{a}"));
        println!(
            "{sites:>5} {alpha:>6} {delta:>5} {worst:>10.4} {early:>10.4} {err:>12.4} {seconds:>9.2}"
        );
    }
}
