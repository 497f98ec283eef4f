//! Benchmark of the whole `analyze` pipeline against the performance target
//! of the estimators issue: a 101-site × 40-time map in ≤ 50 ms without
//! bootstrap and ≤ 1 s with 200 resamples, side by side with a scipy script
//! (`curve_fit` + `levy_stable`) on the same file.
//!
//! The map is synthetic: the lattice walk at α = 1 (Lévy flight, z = 1) on
//! 101 sites from the centre, γ0 = 1, 40 log-spaced times 0.1–10, with
//! seeded Gaussian noise of 1e-4 and that error attached. It is written as
//! long CSV `x,t,C,err` to the system's temporary directory so that the
//! scipy side reads exactly the same numbers.
//!
//! Run (release, the default for `cargo bench`):
//!   cargo bench -p spreadscope-physics --bench analysis
//!   cargo bench -p spreadscope-physics --bench analysis -- --scipy   # also runs python
//! The scipy side alone (the bench prints the exact command with the window):
//!   python3 tests/reference/bench_scipy_analysis.py FILE --t-min T0 --t-max T1
//!
//! This is a timing program, never a test: it asserts nothing about speed.

use std::fmt::Write as _;
use std::path::PathBuf;
use std::process::Command;
use std::time::{Duration, Instant};

use ndarray::Array2;
use spreadscope_physics::CorrelationMap;
use spreadscope_physics::fit::analysis::{AnalysisOptions, AnalysisReport, analyze};
use spreadscope_physics::fit::collapse::{CollapseOptions, CollapseQuality};
use spreadscope_physics::fit::lattice_walk_fit::{LatticeWalkFitOptions, fit_lattice_walk};
use spreadscope_physics::fit::profile::{ProfileOptions, compare_profiles};
use spreadscope_physics::model::lattice_walk::LatticeWalk;
use spreadscope_physics::numerics::stats::{seeded_rng, standard_normal};

const SITES: usize = 101;
const TIMES: usize = 40;
const NOISE: f64 = 1e-4;

fn synthetic_map() -> CorrelationMap {
    let source = SITES / 2;
    let times: Vec<f64> = (0..TIMES)
        .map(|k| 0.1 * 100f64.powf(k as f64 / (TIMES - 1) as f64))
        .collect();
    let walk = LatticeWalk::power_law(SITES, 1.0, 1.0).expect("valid walk");
    let exact = walk.propagate(source, &times).expect("propagates");
    let mut rng = seeded_rng(2024);
    let values = exact.mapv(|c| c + NOISE * standard_normal(&mut rng));
    let errors = Array2::from_elem(values.dim(), NOISE);
    let x = (0..SITES).map(|i| i as i32 - source as i32).collect();
    CorrelationMap::complete(x, times, values, Some(errors)).expect("valid map")
}

/// Long CSV `x,t,C,err` with every number printed so that it round-trips.
fn write_csv(map: &CorrelationMap) -> PathBuf {
    let mut text = String::from(
        "# synthetic: lattice walk alpha = 1, 101 sites, seeded noise 1e-4\nx,t,C,err\n",
    );
    let errors = map.errors().expect("errors attached");
    for (ti, &t) in map.times().iter().enumerate() {
        for (xi, &x) in map.offsets().iter().enumerate() {
            let _ = writeln!(
                text,
                "{x},{t:?},{:?},{:?}",
                map.values()[(ti, xi)],
                errors[(ti, xi)]
            );
        }
    }
    let dir = std::env::temp_dir().join("spreadscope-bench-analysis");
    std::fs::create_dir_all(&dir).expect("temporary directory");
    let path = dir.join("lattice_walk_101x40.csv");
    std::fs::write(&path, text).expect("write the map");
    path
}

/// Median wall time of `runs` calls (after one warm-up call).
fn time(label: &str, runs: usize, f: impl Fn() -> AnalysisReport) -> AnalysisReport {
    let report = f();
    let mut samples: Vec<Duration> = (0..runs)
        .map(|_| {
            let start = Instant::now();
            std::hint::black_box(f());
            start.elapsed()
        })
        .collect();
    samples.sort();
    let median = samples[samples.len() / 2];
    println!(
        "{label:<46} median {:>9.2} ms over {runs} runs (min {:.2} ms, max {:.2} ms)",
        median.as_secs_f64() * 1e3,
        samples[0].as_secs_f64() * 1e3,
        samples[samples.len() - 1].as_secs_f64() * 1e3
    );
    report
}

/// A stable map μ = 1.3 (scale t^{1/μ}, D = 1) of `sites` offsets and
/// `times` log-spaced times 1–20 with seeded noise 1e-4, for the targets of
/// the verdict issue (101 × 60 ≤ 0.5 s and 401 × 400 ≤ 10 s with the
/// default bootstrap, 2 cores).
fn stable_map(sites: usize, times: usize) -> CorrelationMap {
    use spreadscope_physics::model::stable::StableDensity;
    let half = (sites / 2) as i32;
    let x: Vec<i32> = (-half..=half).collect();
    let t: Vec<f64> = (0..times)
        .map(|k| 20f64.powf(k as f64 / (times - 1) as f64))
        .collect();
    let mut rng = seeded_rng(11);
    let values = Array2::from_shape_fn((t.len(), x.len()), |(i, j)| {
        StableDensity::new(1.3, t[i].powf(1.0 / 1.3))
            .expect("density")
            .pdf(f64::from(x[j]))
            + NOISE * standard_normal(&mut rng)
    });
    let errors = Array2::from_elem(values.dim(), NOISE);
    CorrelationMap::complete(x, t, values, Some(errors)).expect("valid map")
}

fn main() {
    let with_scipy = std::env::args().any(|a| a == "--scipy");
    let defaults = AnalysisOptions::default();
    for (sites, times, runs) in [(101, 60, 5), (401, 400, 1)] {
        let m = stable_map(sites, times);
        time(
            &format!(
                "analyze {sites} x {times}, default ({} resamples)",
                defaults.bootstrap
            ),
            runs,
            || analyze(&m, &defaults).expect("analysis runs"),
        );
    }
    let map = synthetic_map();
    let path = write_csv(&map);
    println!(
        "map: {SITES} sites x {TIMES} times (lattice walk, alpha = 1), written to {}",
        path.display()
    );
    println!("rayon threads: {}", rayon::current_num_threads());

    let plain = AnalysisOptions {
        bootstrap: 0,
        ..AnalysisOptions::default()
    };
    let report = time("analyze, no bootstrap", 21, || {
        analyze(&map, &plain).expect("analysis runs")
    });
    let boot = AnalysisOptions {
        bootstrap: 200,
        seed: 7,
        ..AnalysisOptions::default()
    };
    time("analyze, 200 bootstrap resamples", 5, || {
        analyze(&map, &boot).expect("analysis runs")
    });
    let chain = AnalysisOptions {
        bootstrap: 0,
        sites: Some(SITES),
        ..AnalysisOptions::default()
    };
    let with_walk = time("analyze + lattice-walk fit (--sites 101)", 11, || {
        analyze(&map, &chain).expect("analysis runs")
    });
    let chain_boot = AnalysisOptions {
        bootstrap: 200,
        seed: 7,
        sites: Some(SITES),
        ..AnalysisOptions::default()
    };
    time("analyze + lattice walk, 200 resamples", 3, || {
        analyze(&map, &chain_boot).expect("analysis runs")
    });

    // The parts, on the scaling window of the plain run.
    let [t0, t1] = report.windows.t_window;
    let window = map.window(Some(t0), Some(t1), None).expect("window");
    let part = |label: &str, runs: usize, f: &dyn Fn()| {
        f();
        let mut samples: Vec<Duration> = (0..runs)
            .map(|_| {
                let start = Instant::now();
                f();
                start.elapsed()
            })
            .collect();
        samples.sort();
        println!(
            "  part: {label:<38} median {:>9.2} ms",
            samples[samples.len() / 2].as_secs_f64() * 1e3
        );
    };
    for bootstrap in [0, 200] {
        let options = ProfileOptions {
            bootstrap,
            seed: 7,
            ..ProfileOptions::default()
        };
        part(&format!("profiles, {bootstrap} resamples"), 3, &|| {
            std::hint::black_box(compare_profiles(&window, &options).expect("fits"));
        });
        let collapse = CollapseOptions {
            bootstrap_resamples: bootstrap,
            seed: 7,
            ..CollapseOptions::default()
        };
        part(&format!("collapse, {bootstrap} resamples"), 3, &|| {
            let q = CollapseQuality::new(&window).expect("collapse");
            std::hint::black_box(q.best(&collapse).expect("collapse"));
        });
    }
    part("lattice-walk fit, whole map", 5, &|| {
        std::hint::black_box(
            fit_lattice_walk(&map, &LatticeWalkFitOptions::new(SITES, SITES / 2)).expect("fits"),
        );
    });

    println!("\nverdict: {}", with_walk.verdict.headline);
    let script = PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("../../tests/reference/bench_scipy_analysis.py");
    let args = [
        script.display().to_string(),
        path.display().to_string(),
        "--t-min".into(),
        format!("{t0:?}"),
        "--t-max".into(),
        format!("{t1:?}"),
    ];
    if with_scipy {
        println!("running: python3 {}", args.join(" "));
        match Command::new("python3").args(&args).status() {
            Ok(status) if status.success() => {}
            Ok(status) => println!("scipy side exited with {status}"),
            Err(e) => println!("python3 could not be started: {e}"),
        }
    } else {
        println!("scipy side (slow: minutes): python3 {}", args.join(" "));
    }
}
