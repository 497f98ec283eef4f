//! Benchmark of the collapse: the quality S(z) on the size the dashboard's
//! collapse slider works with, 101 sites × 60 times (DEVELOPERS.md,
//! performance targets; one evaluation ≤ 5 ms), and the master-curve fit
//! of z and D with the default bootstrap on 101 × 60 and 401 × 400 maps
//! (its share of the analysis targets, 0.5 s and 10 s). Plain timing loop
//! (no harness): `cargo bench -p spreadscope-physics --bench collapse`.

use ndarray::Array2;
use spreadscope_physics::CorrelationMap;
use spreadscope_physics::fit::collapse::{CollapseOptions, CollapseQuality};
use spreadscope_physics::numerics::stats::{seeded_rng, standard_normal};
use std::hint::black_box;
use std::time::Instant;

/// Synthetic diffusive map (closed-form Gaussian, D = 1) with seeded noise.
fn synthetic_map(sites: i32, times: usize) -> CorrelationMap {
    let half = sites / 2;
    let x: Vec<i32> = (-half..=half).collect();
    let t: Vec<f64> = (1..=times).map(|k| 0.5 * k as f64).collect();
    let mut rng = seeded_rng(1);
    let sigma = 0.002;
    let values = Array2::from_shape_fn((t.len(), x.len()), |(i, j)| {
        let (xv, tv) = (f64::from(x[j]), t[i]);
        (-xv * xv / (4.0 * tv)).exp() / (2.0 * (std::f64::consts::PI * tv).sqrt())
            + sigma * standard_normal(&mut rng)
    });
    let errors = Array2::from_elem(values.dim(), sigma);
    CorrelationMap::complete(x, t, values, Some(errors)).expect("valid synthetic map")
}

fn time_per_call(label: &str, calls: u32, mut f: impl FnMut(u32)) {
    for k in 0..calls.min(5) {
        f(k);
    }
    let start = Instant::now();
    for k in 0..calls {
        f(k);
    }
    let per = start.elapsed() / calls;
    println!("{label}: {} ns per call ({calls} calls)", per.as_nanos());
}

fn main() {
    let map = synthetic_map(101, 60);
    let quality = CollapseQuality::new(&map).expect("valid");
    time_per_call("CollapseQuality::new, 101 sites x 60 times", 50, |_| {
        black_box(CollapseQuality::new(black_box(&map)).expect("valid"));
    });
    time_per_call("quality(z), 101 sites x 60 times", 400, |k| {
        black_box(quality.quality(black_box(1.6 + 0.001 * f64::from(k))));
    });
    let no_bootstrap = CollapseOptions {
        bootstrap_resamples: 0,
        ..CollapseOptions::default()
    };
    time_per_call("best(), no bootstrap, 101 x 60", 10, |_| {
        black_box(quality.best(&no_bootstrap).expect("runs"));
    });
    let fit_only = CollapseOptions {
        bootstrap_resamples: 0,
        quality: false,
        quality_scan: false,
        ..CollapseOptions::default()
    };
    time_per_call(
        "best(), z and D only (no S), no bootstrap, 101 x 60",
        10,
        |_| {
            black_box(quality.best(&fit_only).expect("runs"));
        },
    );
    time_per_call("best(), default bootstrap (100), 101 x 60", 3, |_| {
        black_box(quality.best(&CollapseOptions::default()).expect("runs"));
    });
    let large = synthetic_map(401, 400);
    let large_quality = CollapseQuality::new(&large).expect("valid");
    time_per_call("best(), no bootstrap, 401 x 400", 1, |_| {
        black_box(large_quality.best(&no_bootstrap).expect("runs"));
    });
    time_per_call("best(), default bootstrap (100), 401 x 400", 1, |_| {
        black_box(
            large_quality
                .best(&CollapseOptions::default())
                .expect("runs"),
        );
    });
    let small = synthetic_map(41, 10);
    let small_quality = CollapseQuality::new(&small).expect("valid");
    time_per_call("quality(z), 41 sites x 10 times", 5000, |k| {
        black_box(small_quality.quality(black_box(1.6 + 0.0001 * f64::from(k))));
    });
}
