//! Calibration figures of every estimator and of the verdict on seeded
//! noisy copies of maps made by the project's own models (see
//! `fit::calibration` for the cases): bias, scatter, mean stated error and
//! one-sigma coverage of √(stat² + window²).
//!
//! Run: `cargo run --release -p spreadscope-physics --example calibrate -- [COPIES] [BOOTSTRAP]`
//! (defaults 40 copies, 0 resamples: the statistical error is then the
//! fit's covariance, scaled by √(χ²/dof) for poor fits).

use spreadscope_physics::fit::calibration::{cases, run};

fn main() {
    let mut args = std::env::args().skip(1);
    let copies: usize = args.next().and_then(|a| a.parse().ok()).unwrap_or(40);
    let bootstrap: usize = args.next().and_then(|a| a.parse().ok()).unwrap_or(0);
    println!("calibration: {copies} seeded copies per case, {bootstrap} bootstrap resamples");
    println!(
        "{:<34} {:<22} {:>7} {:>9} {:>9} {:>9} {:>9}",
        "case (true z)", "estimator", "applied", "bias", "scatter", "mean err", "coverage"
    );
    for case in cases() {
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
