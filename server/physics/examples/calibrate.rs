//! Calibration figures of every estimator and of the verdict on seeded
//! noisy copies of maps made by the project's own models (see
//! `fit::calibration` for the cases): bias, scatter, mean stated error and
//! one-sigma coverage of √(stat² + window²).
//!
//! Run: `cargo run --release -p spreadscope-physics --example calibrate -- [COPIES] [BOOTSTRAP] [WORD]`
//! (defaults 40 copies, 0 resamples: the statistical error is then the
//! fit's covariance, scaled by √(χ²/dof) for poor fits; WORD runs only the
//! cases whose name contains it, e.g. `shots`).

use spreadscope_physics::fit::calibration::{cases, run};

/// The `position`-th argument as a count, `default` when absent; a word that
/// is not a count ends the program with exit code 2 naming it.
fn count_arg(args: &[String], position: usize, name: &str, default: usize) -> usize {
    match args.get(position) {
        None => default,
        Some(a) => a.parse().unwrap_or_else(|_| {
            eprintln!(
                "calibrate: argument {} ({name}): `{a}` is not a count",
                position + 1
            );
            std::process::exit(2)
        }),
    }
}

fn main() {
    let args: Vec<String> = std::env::args().skip(1).collect();
    if args.len() > 3 {
        eprintln!("calibrate: at most three arguments, COPIES, BOOTSTRAP and WORD");
        std::process::exit(2);
    }
    let word = args.get(2).map_or("", String::as_str);
    let copies = count_arg(&args, 0, "COPIES", 40);
    let bootstrap = count_arg(&args, 1, "BOOTSTRAP", 0);
    println!("calibration: {copies} seeded copies per case, {bootstrap} bootstrap resamples");
    println!(
        "{:<34} {:<22} {:>7} {:>9} {:>9} {:>9} {:>9}",
        "case (true z)", "estimator", "applied", "bias", "scatter", "mean err", "coverage"
    );
    for case in cases().into_iter().filter(|c| c.name.contains(word)) {
        let s = run(&case, copies, bootstrap);
        for e in &s.estimators {
            println!(
                "{:<34} {:<22} {:>7} {:>9.4} {:>9.4} {:>9.4} {:>8.0} %",
                format!("{} ({})", s.case, s.z_true),
                e.estimator,
                e.applied,
                e.bias,
                e.scatter,
                e.mean_err,
                100.0 * e.coverage
            );
        }
    }
}
