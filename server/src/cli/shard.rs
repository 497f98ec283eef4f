//! Sampled runs split into shards and merged: `simulate spin-chain --method
//! dtwa|typicality --shard K/N --out part-K.json` computes every N-th unit of
//! the run, starting with unit K − 1 — the trajectory batches of DTWA, or the
//! (sector, vector) pairs of typicality in their canonical order — each with
//! its own random stream derived from the run's seed (physics crate), and
//! `spreadscope merge part-*.json --out map.csv` reduces them in canonical
//! order into exactly the file one run writes — same bits, same header.
//!
//! A shard file is JSON (floats written in shortest round-trip form and read
//! back exactly): the format name and version, which part of how many, the
//! run (couplings J_ij, Δ, source, times, method and its settings, seed and
//! the header of the final file, equal in every part) and the part's batch
//! sums (DTWA) or vector records (typicality). The merge
//! refuses, naming the file, parts of different runs, a part given twice or
//! missing, and files that are not shards.

use std::path::{Path, PathBuf};
use std::sync::atomic::AtomicBool;

use clap::Args;
use ndarray::Array2;
use serde::{Deserialize, Serialize};
use spreadscope_physics::model::couplings::Couplings;
use spreadscope_physics::model::spin_chain::SpinChain;
use spreadscope_physics::model::spin_chain::dtwa::{self, BatchSums, DtwaOptions};
use spreadscope_physics::model::spin_chain::typicality::{
    self, TypicalityOptions, VectorRecord, vector_ids,
};

use crate::service::theory::SampledRun;

use super::error::CliError;
use super::long_csv::to_long_csv;

/// The format name every shard file starts with.
pub const FORMAT: &str = "spreadscope sampled-run shard";
/// Version of the shard layout.
pub const VERSION: u32 = 2;

/// The sampled method and its settings.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "name", rename_all = "snake_case", deny_unknown_fields)]
pub enum ShardMethod {
    Dtwa {
        trajectories: usize,
        step_scale: f64,
    },
    Typicality {
        samples: usize,
        step_tolerance: f64,
        memory_limit_bytes: u64,
    },
}

/// What one part computed.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum ShardParts {
    /// DTWA: batch sums.
    Batches(Vec<ShardBatch>),
    /// Typicality: one record per (sector, vector).
    Records(Vec<ShardRecord>),
}

/// What one random vector of one sector measured, `[time][site]`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ShardRecord {
    pub up: usize,
    pub vector: usize,
    pub ratios: Vec<Vec<f64>>,
    pub propagation_error: f64,
    pub applications: u64,
}

/// What every part of one run shares.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ShardRun {
    /// Flip-flop couplings J_ij, row by row.
    pub couplings: Vec<Vec<f64>>,
    pub delta: f64,
    pub source: usize,
    pub times: Vec<f64>,
    pub method: ShardMethod,
    pub seed: u64,
    /// The metadata lines of the merged file.
    pub header: Vec<String>,
}

/// The sums of one batch of trajectories, `[time][site]`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ShardBatch {
    pub batch: usize,
    pub count: usize,
    pub sum: Vec<Vec<f64>>,
    pub sum_squares: Vec<Vec<f64>>,
}

/// One shard file.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ShardFile {
    pub format: String,
    pub version: u32,
    /// This part, 1-based.
    pub part: usize,
    /// Of how many parts.
    pub parts: usize,
    pub run: ShardRun,
    /// What this part computed.
    pub computed: ShardParts,
}

/// Parses `K/N` with 1 ≤ K ≤ N.
///
/// # Errors
/// A sentence naming `--shard`.
pub fn parse_part(text: &str) -> Result<(usize, usize), String> {
    let bad = || format!("--shard {text}: expected K/N with 1 ≤ K ≤ N, e.g. 2/8");
    let (k, n) = text.split_once('/').ok_or_else(bad)?;
    let k: usize = k.trim().parse().map_err(|_| bad())?;
    let n: usize = n.trim().parse().map_err(|_| bad())?;
    if k == 0 || k > n {
        return Err(bad());
    }
    Ok((k, n))
}

fn rows(a: &Array2<f64>) -> Vec<Vec<f64>> {
    a.outer_iter().map(|r| r.to_vec()).collect()
}

fn array(rows: &[Vec<f64>], shape: (usize, usize)) -> Option<Array2<f64>> {
    if rows.len() != shape.0 || rows.iter().any(|r| r.len() != shape.1) {
        return None;
    }
    Array2::from_shape_vec(shape, rows.iter().flatten().copied().collect()).ok()
}

/// Computes part `k` of `n` of a sampled run.
///
/// # Errors
/// The run's refusals (bad source, times, options) as sentences.
pub fn compute(
    run: &SampledRun,
    source: usize,
    times: &[f64],
    header: Vec<String>,
    (k, n): (usize, usize),
    progress: &(dyn Fn(f64) + Sync),
) -> Result<ShardFile, String> {
    let never = AtomicBool::new(false);
    let (chain, method, seed, parts) = match run {
        SampledRun::Dtwa(chain, options) => {
            let batches = dtwa::batch_sums(
                chain,
                source,
                times,
                options,
                &|b| b % n == k - 1,
                progress,
                &never,
            )
            .map_err(|e| e.to_string())?;
            let parts = ShardParts::Batches(
                batches
                    .into_iter()
                    .map(|b| ShardBatch {
                        batch: b.batch,
                        count: b.count,
                        sum: rows(&b.sum),
                        sum_squares: rows(&b.sum_squares),
                    })
                    .collect(),
            );
            let method = ShardMethod::Dtwa {
                trajectories: options.trajectories,
                step_scale: options.step_scale,
            };
            (chain, method, options.seed, parts)
        }
        SampledRun::Typicality(chain, options) => {
            let mine: std::collections::HashSet<(usize, usize)> =
                vector_ids(chain.sites(), options.samples)
                    .into_iter()
                    .enumerate()
                    .filter(|(i, _)| i % n == k - 1)
                    .map(|(_, id)| id)
                    .collect();
            let records = typicality::vector_records(
                chain,
                source,
                times,
                options,
                &|up, vector| mine.contains(&(up, vector)),
                progress,
                &never,
            )
            .map_err(|e| e.to_string())?;
            let parts = ShardParts::Records(
                records
                    .into_iter()
                    .map(|r| ShardRecord {
                        up: r.up,
                        vector: r.vector,
                        ratios: rows(&r.ratios),
                        propagation_error: r.propagation_error,
                        applications: r.applications,
                    })
                    .collect(),
            );
            let method = ShardMethod::Typicality {
                samples: options.samples,
                step_tolerance: options.step_tolerance,
                memory_limit_bytes: options.memory_limit_bytes,
            };
            (chain, method, options.seed, parts)
        }
    };
    Ok(ShardFile {
        format: FORMAT.into(),
        version: VERSION,
        part: k,
        parts: n,
        run: ShardRun {
            couplings: rows(chain.flip_flop().matrix()),
            delta: chain.delta().unwrap_or(0.0),
            source,
            times: times.to_vec(),
            method,
            seed,
            header,
        },
        computed: parts,
    })
}

/// Writes a shard file.
///
/// # Errors
/// A failure writing the file (exit 1).
pub fn write(file: &ShardFile, path: &Path) -> Result<(), CliError> {
    let text = serde_json::to_string(file).map_err(|e| CliError::Failure(e.to_string()))?;
    std::fs::write(path, text).map_err(|e| CliError::Failure(format!("{}: {e}", path.display())))
}

#[derive(Debug, Args)]
pub struct MergeArgs {
    /// The shard files of one run (any order).
    #[arg(required = true)]
    pub shards: Vec<PathBuf>,
    /// Output file (long CSV, as `simulate` writes it).
    #[arg(long)]
    pub out: PathBuf,
}

fn read(path: &Path) -> Result<ShardFile, CliError> {
    let name = path.display();
    let bytes = std::fs::read(path).map_err(|e| CliError::Input(format!("{name}: {e}")))?;
    let file: ShardFile = serde_json::from_slice(&bytes).map_err(|e| {
        CliError::Input(format!(
            "{name}: not a shard file written by `simulate --shard` ({e})"
        ))
    })?;
    if file.format != FORMAT || file.version != VERSION {
        return Err(CliError::Input(format!(
            "{name}: format `{}` version {}, expected `{FORMAT}` version {VERSION}",
            file.format, file.version
        )));
    }
    Ok(file)
}

/// A part computed by another method than the run's first part.
fn mixed(path: &Path) -> CliError {
    CliError::Input(format!(
        "{}: computed by another method than the other parts",
        path.display()
    ))
}

/// A part whose arrays do not have the run's shape.
fn bad_shape(path: &Path, what: &str, index: usize, shape: (usize, usize)) -> CliError {
    CliError::Input(format!(
        "{}: {what} {index} is not {} times × {} sites",
        path.display(),
        shape.0,
        shape.1
    ))
}

/// Runs `merge`.
///
/// # Errors
/// Files that are not shards, parts of different runs, a part missing or
/// given twice (exit 2); a failure writing the output (exit 1).
pub fn run(args: &MergeArgs) -> Result<(), CliError> {
    let files = args
        .shards
        .iter()
        .map(|p| read(p))
        .collect::<Result<Vec<_>, _>>()?;
    let first = &files[0];
    let mut seen = vec![None; first.parts];
    for (file, path) in files.iter().zip(&args.shards) {
        let name = path.display();
        if file.run != first.run || file.parts != first.parts {
            return Err(CliError::Input(format!(
                "{name}: part of another run than {} (its chain, times, seed or number of parts differ)",
                args.shards[0].display()
            )));
        }
        if file.part == 0 || file.part > file.parts {
            return Err(CliError::Input(format!(
                "{name}: part {} of {} does not exist",
                file.part, file.parts
            )));
        }
        if let Some(other) = seen[file.part - 1].replace(path) {
            return Err(CliError::Input(format!(
                "{name}: part {}/{} is also given as {}",
                file.part,
                file.parts,
                other.display()
            )));
        }
    }
    if let Some(k) = seen.iter().position(Option::is_none) {
        return Err(CliError::Input(format!(
            "part {}/{} is missing: give every part of the run",
            k + 1,
            first.parts
        )));
    }
    let run = &first.run;
    let n = run.couplings.len();
    let matrix = array(&run.couplings, (n, n)).ok_or_else(|| {
        CliError::Input(format!(
            "{}: the couplings are not square",
            args.shards[0].display()
        ))
    })?;
    let couplings =
        Couplings::from_matrix(matrix).map_err(|e| CliError::Input(format!("couplings: {e}")))?;
    let chain =
        SpinChain::new(&couplings, run.delta).map_err(|e| CliError::Input(e.to_string()))?;
    let shape = (run.times.len(), n);
    let map = match &run.method {
        ShardMethod::Dtwa {
            trajectories,
            step_scale,
        } => {
            let mut batches = Vec::new();
            for (file, path) in files.iter().zip(&args.shards) {
                let ShardParts::Batches(parts) = &file.computed else {
                    return Err(mixed(path));
                };
                for b in parts {
                    let (Some(sum), Some(sum_squares)) =
                        (array(&b.sum, shape), array(&b.sum_squares, shape))
                    else {
                        return Err(bad_shape(path, "batch", b.batch, shape));
                    };
                    batches.push(BatchSums {
                        batch: b.batch,
                        count: b.count,
                        sum,
                        sum_squares,
                    });
                }
            }
            let mut options = DtwaOptions::new(*trajectories, run.seed);
            options.step_scale = *step_scale;
            dtwa::reduce(&chain, run.source, &run.times, &options, batches)
                .and_then(|r| r.to_correlation_map())
        }
        ShardMethod::Typicality {
            samples,
            step_tolerance,
            memory_limit_bytes,
        } => {
            let mut records = Vec::new();
            for (file, path) in files.iter().zip(&args.shards) {
                let ShardParts::Records(parts) = &file.computed else {
                    return Err(mixed(path));
                };
                for r in parts {
                    let Some(ratios) = array(&r.ratios, shape) else {
                        return Err(bad_shape(path, "vector", r.vector, shape));
                    };
                    records.push(VectorRecord {
                        up: r.up,
                        vector: r.vector,
                        ratios,
                        propagation_error: r.propagation_error,
                        applications: r.applications,
                    });
                }
            }
            let options = TypicalityOptions {
                step_tolerance: *step_tolerance,
                memory_limit_bytes: *memory_limit_bytes,
                ..TypicalityOptions::new(*samples, run.seed)
            };
            typicality::reduce(&chain, run.source, &run.times, &options, records)
                .and_then(|r| r.to_correlation_map())
        }
    }
    .map_err(|e| CliError::Input(format!("merge: {e}")))?;
    std::fs::write(&args.out, to_long_csv(&map, &run.header))
        .map_err(|e| CliError::Failure(format!("{}: {e}", args.out.display())))?;
    eprintln!("merge: {} parts → {}", first.parts, args.out.display());
    Ok(())
}
