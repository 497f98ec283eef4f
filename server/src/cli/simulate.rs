//! `spreadscope simulate`: the reference models of the pure core, run from
//! the command line and written as long CSV `x,t,C[,err]` with x = i − source.
//! Every number is printed in Rust's shortest round-trip form, so reading the
//! file back gives the same bits. Metadata lines (`# key: value`) carry the
//! chain, α and `synthetic: true`, so an upload of the file is labelled.

use std::path::PathBuf;

use std::sync::atomic::AtomicBool;

use clap::{Args, ValueEnum};
use spreadscope_physics::CorrelationMap;

use spreadscope_physics::model::stable::StableDensity;

use super::error::CliError;
use crate::ingest::couplings::{CouplingConvention, CouplingsImportOptions, parse_couplings};
use crate::service::CONVENTIONS;
use crate::service::theory::{ModelSpec, SpinMethod, TheoryModel, model_map};

#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum Model {
    /// Sampled scaling form C(x,t) = f(x; μ, (D t)^{1/μ}) at integer x,
    /// f the symmetric stable density (Gaussian at μ = 2).
    Stable,
    /// Classical random walk with rates γ0 |i−j|^(−2α) on the open chain.
    LatticeWalk,
    /// Infinite-temperature spin-chain dynamics (exact ≤ 14 sites, typicality ≤ 24,
    /// semiclassical DTWA for any length; free fermions for nearest neighbours at Δ = 0).
    SpinChain,
    /// The t² (or t⁴) short-time expansion for the chain's couplings.
    ShortTime,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum Method {
    /// Free fermions when exact (nearest neighbours, Δ = 0), else exact
    /// diagonalisation up to 14 sites, typicality up to 18, else DTWA.
    Auto,
    Exact,
    Typicality,
    /// Semiclassical: the discrete truncated Wigner approximation (any length).
    Dtwa,
}

#[derive(Debug, Args)]
pub struct SimulateArgs {
    /// Which model.
    pub model: Model,
    /// Number of sites of the open chain (chain models).
    #[arg(long, default_value_t = 0)]
    pub sites: usize,
    /// A measured N×N coupling matrix (CSV) replacing the power law.
    #[arg(long)]
    pub coupling_matrix: Option<PathBuf>,
    /// The Hamiltonian the matrix file is written for: `flip-flop`
    /// (J(σ⁺σ⁻ + h.c.), as stored), `pauli-xy` (J(σˣσˣ + σʸσʸ), doubled) or
    /// `spin-xy` (J(SˣSˣ + SʸSʸ), halved).
    #[arg(long, value_enum, default_value_t = CouplingConvention::FlipFlop)]
    pub coupling_convention: CouplingConvention,
    /// Stable index μ = z of the `stable` model (0.3 ≤ μ ≤ 2).
    #[arg(long, default_value_t = 2.0)]
    pub mu: f64,
    /// Transport coefficient D of the `stable` model (sites^μ per time unit).
    #[arg(long, default_value_t = 1.0)]
    pub diffusion: f64,
    /// Largest |x| of the `stable` model.
    #[arg(long, default_value_t = 50)]
    pub x_max: i32,
    /// Coupling exponent α of J_ij = J/|i−j|^α; `inf` keeps nearest neighbours.
    #[arg(long, default_value = "inf", allow_hyphen_values = true)]
    pub alpha: f64,
    /// Ising anisotropy Δ (spin chain and short time).
    #[arg(long, default_value_t = 0.0, allow_hyphen_values = true)]
    pub delta: f64,
    /// Nearest-neighbour coupling J (flip-flop amplitude, ħ = 1).
    #[arg(long, default_value_t = 1.0, allow_hyphen_values = true)]
    pub coupling: f64,
    /// Rate prefactor γ0 of the lattice walk.
    #[arg(long, default_value_t = 1.0)]
    pub gamma0: f64,
    /// Source site j (0-based); default the centre, (N−1)/2 rounded down.
    #[arg(long)]
    pub source: Option<usize>,
    /// Times: `1,2,5`, `T0:T1:COUNT` (linear) or `T0:T1:COUNT:log`.
    #[arg(long)]
    pub times: String,
    /// Order of the short-time expansion (2 or 4).
    #[arg(long, default_value_t = 2)]
    pub order: usize,
    /// Spin-chain method.
    #[arg(long, value_enum, default_value_t = Method::Auto)]
    pub method: Method,
    /// Random vectors of the typicality method.
    #[arg(long, default_value_t = 8)]
    pub samples: usize,
    /// Trajectories of the semiclassical (DTWA) method.
    #[arg(long, default_value_t = crate::service::theory::DEFAULT_TRAJECTORIES)]
    pub trajectories: usize,
    /// Compute only part K of N of a sampled run (DTWA trajectories or
    /// typicality vectors) and write it as a shard file (JSON) to `--out`;
    /// `spreadscope merge` joins the N parts into exactly the file one run
    /// writes.
    #[arg(long, value_name = "K/N")]
    pub shard: Option<String>,
    /// Seed of every random number used.
    #[arg(long, default_value_t = 1)]
    pub seed: u64,
    /// Output file (long CSV).
    #[arg(long)]
    pub out: PathBuf,
}

/// Parses `--times`: `1,2,5`, `T0:T1:COUNT` or `T0:T1:COUNT:log`.
///
/// # Errors
/// A sentence naming the `--times` option and what is wrong.
pub fn parse_times(spec: &str) -> Result<Vec<f64>, String> {
    crate::ingest::parse_time_spec(spec, "--times")
}

/// Runs `simulate`.
///
/// # Errors
/// Bad options (exit 2) or a failure writing the file.
pub fn run(args: &SimulateArgs) -> Result<(), CliError> {
    let times = parse_times(&args.times).map_err(CliError::Input)?;
    let (matrix, matrix_notes) = match &args.coupling_matrix {
        None => (None, Vec::new()),
        Some(path) => {
            let name = path.display().to_string();
            let file = std::fs::File::open(path)
                .map_err(|e| CliError::Input(format!("--coupling-matrix {name}: {e}")))?;
            let read = parse_couplings(
                std::io::BufReader::new(file),
                &CouplingsImportOptions {
                    convention: args.coupling_convention,
                    ..CouplingsImportOptions::default()
                },
            )
            .map_err(|e| CliError::Input(format!("--coupling-matrix {name}: {e}")))?;
            let notes = read
                .notes
                .iter()
                .map(|n| format!("notes: coupling matrix {name}: {n}"))
                .collect();
            (Some(read.couplings), notes)
        }
    };
    let sites = match &matrix {
        Some(m) if args.sites == 0 => m.sites(),
        _ => args.sites,
    };
    let source = args.source.unwrap_or(sites.saturating_sub(1) / 2);
    let spec = ModelSpec {
        model: match args.model {
            Model::LatticeWalk => TheoryModel::LatticeWalk,
            Model::SpinChain => TheoryModel::SpinChain,
            Model::ShortTime => TheoryModel::ShortTime,
            Model::Stable => return stable(args, &times),
        },
        matrix,
        sites,
        source,
        alpha: args.alpha,
        coupling: args.coupling,
        delta: args.delta,
        gamma0: args.gamma0,
        order: args.order,
        method: match args.method {
            Method::Auto => SpinMethod::Auto,
            Method::Exact => SpinMethod::Exact,
            Method::Typicality => SpinMethod::Typicality,
            Method::Dtwa => SpinMethod::Dtwa,
        },
        samples: args.samples,
        trajectories: args.trajectories,
        seed: args.seed,
    };
    let bar = indicatif::ProgressBar::new(1000);
    bar.set_style(
        indicatif::ProgressStyle::with_template("{elapsed_precise} [{bar:40}] {percent}%")
            .unwrap_or_else(|_| indicatif::ProgressStyle::default_bar()),
    );
    let alpha_text = if args.alpha.is_infinite() {
        "inf".to_string()
    } else {
        args.alpha.to_string()
    };
    let header = |how: &str| -> Vec<String> {
        vec![
            format!(
                "Made by `spreadscope simulate` ({}): {how}; {} sites, source {source}, alpha {alpha_text}, \
                 J {}, Delta {}, seed {}.",
                env!("CARGO_PKG_VERSION"),
                sites,
                args.coupling,
                args.delta,
                args.seed
            ),
            format!("Conventions: {CONVENTIONS}"),
            "synthetic: true".into(),
            format!("chain_length: {sites}"),
            format!("source_site: {source}"),
        ]
        .into_iter()
        .chain((args.coupling_matrix.is_none()).then(|| format!("alpha: {alpha_text}")))
        .chain(matrix_notes.iter().cloned())
        .chain(std::iter::once(format!("notes: simulated ({how})")))
        .collect()
    };
    if let Some(part) = &args.shard {
        let (k, n) = super::shard::parse_part(part).map_err(CliError::Input)?;
        let run = spec
            .sampled_run()
            .map_err(|e| CliError::Input(format!("--shard {part}: {e}")))?;
        let words = match run {
            crate::service::theory::SampledRun::Dtwa(..) => spec.dtwa_words(),
            crate::service::theory::SampledRun::Typicality(..) => spec.typicality_words(),
        };
        let file = super::shard::compute(&run, source, &times, header(&words), (k, n), &|f| {
            bar.set_position((f * 1000.0) as u64)
        })
        .map_err(|e| CliError::Input(format!("simulate: {e}")))?;
        bar.finish_and_clear();
        return super::shard::write(&file, &args.out);
    }
    let never = AtomicBool::new(false);
    let (map, how) = model_map(
        &spec,
        &times,
        &|f| bar.set_position((f * 1000.0) as u64),
        &never,
    )
    .map_err(|e| {
        // Messages that start with a parameter's name refer to its option.
        let named = ["sites", "source", "alpha", "order"]
            .iter()
            .any(|p| e.starts_with(p));
        CliError::Input(if named {
            format!("--{e}")
        } else {
            format!("simulate: {e}")
        })
    })?;
    bar.finish_and_clear();
    std::fs::write(&args.out, super::long_csv::to_long_csv(&map, &header(&how)))
        .map_err(|e| CliError::Failure(format!("{}: {e}", args.out.display())))
}

/// `simulate stable`: the scaling form sampled at integer offsets.
fn stable(args: &SimulateArgs, times: &[f64]) -> Result<(), CliError> {
    if !(args.diffusion.is_finite() && args.diffusion > 0.0) {
        return Err(CliError::Input(format!(
            "--diffusion {}: must be a positive number",
            args.diffusion
        )));
    }
    if args.x_max < 0 || args.x_max > 100_000 {
        return Err(CliError::Input(format!(
            "--x-max {}: between 0 and 100000",
            args.x_max
        )));
    }
    if times.iter().any(|&t| t <= 0.0) {
        return Err(CliError::Input(
            "--times: the stable model needs times > 0".into(),
        ));
    }
    let offsets: Vec<i32> = (-args.x_max..=args.x_max).collect();
    let mut values = ndarray::Array2::zeros((times.len(), offsets.len()));
    for (ti, &t) in times.iter().enumerate() {
        let density = StableDensity::new(args.mu, (args.diffusion * t).powf(1.0 / args.mu))
            .map_err(|e| CliError::Input(format!("--mu {}: {e}", args.mu)))?;
        for (xi, &x) in offsets.iter().enumerate() {
            values[(ti, xi)] = density.pdf(f64::from(x));
        }
    }
    let map = CorrelationMap::complete(offsets, times.to_vec(), values, None)
        .map_err(|e| CliError::Input(format!("--times: {e}")))?;
    let header = vec![
        format!(
            "Made by `spreadscope simulate stable` ({}): C(x,t) = f(x; mu, (D t)^(1/mu)), mu {}, D {}.",
            env!("CARGO_PKG_VERSION"),
            args.mu,
            args.diffusion
        ),
        format!("Conventions: {CONVENTIONS}"),
        "synthetic: true".into(),
        format!(
            "notes: stable scaling form, mu {}, D {}",
            args.mu, args.diffusion
        ),
    ];
    std::fs::write(&args.out, super::long_csv::to_long_csv(&map, &header))
        .map_err(|e| CliError::Failure(format!("{}: {e}", args.out.display())))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn time_specifications() {
        assert_eq!(parse_times("1,2,5").expect("list"), vec![1.0, 2.0, 5.0]);
        let lin = parse_times("0:1:5").expect("linear");
        assert_eq!(lin.len(), 5);
        assert!((lin[2] - 0.5).abs() < 1e-15);
        let log = parse_times("0.1:10:3:log").expect("log");
        assert!((log[1] - 1.0).abs() < 1e-12);
        for bad in [
            "",
            "1,1",
            "0:1:1",
            "0:1:3:cubic",
            "0:1:3:log",
            "a,b",
            "-1,2",
        ] {
            assert!(parse_times(bad).unwrap_err().contains("--times"), "{bad}");
        }
    }
}
