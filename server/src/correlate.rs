//! `spreadscope correlate SHOTS`: shot records → C(x,t) with bootstrap
//! errors, written as long CSV `x,t,C,err`. A CSV shot file is streamed line
//! by line (memory independent of its length); NPZ and HDF5 are read whole.

use std::path::PathBuf;

use clap::Args;

use crate::cli::CliError;
use crate::ingest::shots::{ShotFormat, parse_csv};
use crate::service::shots::{ShotOptions, estimate_meta};
use crate::service::{CONVENTIONS, PROGRAM_VERSION};
use crate::simulate::to_long_csv;

#[derive(Debug, Args)]
pub struct CorrelateArgs {
    /// Shot records: CSV `state_id,t,init_bits,meas_bits`, NPZ or HDF5.
    pub shots: PathBuf,
    /// One source site j (0-based); default the centre.
    #[arg(long, conflicts_with = "bulk")]
    pub source: Option<usize>,
    /// Average over sources A..=B (pairs outside the chain are skipped).
    #[arg(long)]
    pub bulk: Option<String>,
    /// Readout confusion probabilities `p01,p10` = p(0|1), p(1|0) for every
    /// site, or one pair per site separated by `;` (site 0 first).
    #[arg(long, conflicts_with = "readout_from_t0")]
    pub readout: Option<String>,
    /// Calibrate the readout per site from the t = 0 shots.
    #[arg(long)]
    pub readout_from_t0: bool,
    /// Replace C(x) by (C(x) + C(−x))/2.
    #[arg(long)]
    pub symmetrise: bool,
    /// Divide C(x,t) by Σ_x C(x,t) at each time (the factors are reported).
    #[arg(long)]
    pub renormalise: bool,
    /// Bootstrap resamples over initial states.
    #[arg(long, default_value_t = 200)]
    pub bootstrap: usize,
    #[arg(long, default_value_t = 0)]
    pub seed: u64,
    /// Output file (long CSV).
    #[arg(long)]
    pub out: PathBuf,
}

/// Runs `correlate`.
///
/// # Errors
/// A bad file (exit 2, naming the file and line) or bad options.
pub fn run(args: &CorrelateArgs) -> Result<(), CliError> {
    let name = args.shots.display().to_string();
    let options = ShotOptions {
        source: args.source,
        bulk: args.bulk.clone(),
        readout: args.readout.clone(),
        readout_from_t0: args.readout_from_t0,
        symmetrise: args.symmetrise,
        renormalise: args.renormalise,
        bootstrap: Some(args.bootstrap),
        seed: Some(args.seed),
    };
    let settings = options
        .to_estimate_options()
        .map_err(|e| CliError::Input(format!("option {e}")))?;
    let format = ShotFormat::from_file_name(&name).unwrap_or(ShotFormat::Csv);
    let ingested = match format {
        ShotFormat::Csv => {
            let file = std::fs::File::open(&args.shots)
                .map_err(|e| CliError::Input(format!("{name}: {e}")))?;
            parse_csv(std::io::BufReader::new(file))
        }
        other => {
            let bytes =
                std::fs::read(&args.shots).map_err(|e| CliError::Input(format!("{name}: {e}")))?;
            crate::ingest::shots::parse(&bytes, other)
        }
    }
    .map_err(|e| CliError::Input(format!("{name}: {e}")))?;
    let result = spreadscope_physics::model::shots::estimate(&ingested.records, &settings)
        .map_err(|e| CliError::Input(format!("{name}: {e}")))?;
    let provenance =
        serde_json::to_string(&result.provenance).map_err(|e| CliError::Failure(e.to_string()))?;
    let mut header = vec![
        format!("Made by `spreadscope correlate` ({PROGRAM_VERSION}) from {name}"),
        format!("Estimator: {provenance}"),
        format!("Conventions: {CONVENTIONS}"),
    ];
    let meta = estimate_meta(ingested.records.sites(), &result.provenance);
    header.extend(meta.chain_length.map(|n| format!("chain_length: {n}")));
    header.extend(meta.source_site.map(|j| format!("source_site: {j}")));
    header.extend(
        meta.source_window
            .map(|[a, b]| format!("source_window: {a}:{b}")),
    );
    if meta.symmetrised {
        header.push("symmetrised: yes".into());
    }
    for rule in &result.sum_rule {
        header.push(format!(
            "sum rule at t = {}: {:.5} ± {:.5}{}",
            rule.t,
            rule.sum,
            rule.err,
            rule.factor
                .map_or(String::new(), |f| format!(", renormalised by {f:.5}"))
        ));
    }
    std::fs::write(&args.out, to_long_csv(&result.map, &header))
        .map_err(|e| CliError::Failure(format!("{}: {e}", args.out.display())))?;
    eprintln!(
        "correlate: {} states, {} shots, {} sites, {} times → {}",
        ingested.records.n_states(),
        result.shots_per_time.iter().sum::<u64>(),
        ingested.records.sites(),
        result.map.n_times(),
        args.out.display()
    );
    for w in &result.warnings {
        eprintln!("correlate: warning: {w}");
    }
    Ok(())
}
