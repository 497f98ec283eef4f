//! Semiclassical runs split into shards and merged: `simulate spin-chain
//! --method dtwa --shard K/N --out part-K.json` computes the trajectory
//! batches b with b mod N = K − 1 (each batch has its own random stream
//! derived from the run's seed, physics crate `dtwa`), and `spreadscope
//! merge part-*.json --out map.csv` adds them in batch order into exactly the
//! file one run writes — same bits, same header.
//!
//! A shard file is JSON (floats written in shortest round-trip form and read
//! back exactly): the format name and version, which part of how many, the
//! run (couplings J_ij, Δ, source, times, trajectories, seed and the header
//! of the final file, equal in every part) and the batch sums. The merge
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

use super::error::CliError;
use super::long_csv::to_long_csv;

/// The format name every shard file starts with.
pub const FORMAT: &str = "spreadscope semiclassical shard";
/// Version of the shard layout.
pub const VERSION: u32 = 1;

/// What every part of one run shares.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ShardRun {
    /// Flip-flop couplings J_ij, row by row.
    pub couplings: Vec<Vec<f64>>,
    pub delta: f64,
    pub source: usize,
    pub times: Vec<f64>,
    pub trajectories: usize,
    pub seed: u64,
    pub step_scale: f64,
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
    pub batches: Vec<ShardBatch>,
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

/// Computes part `k` of `n` of a semiclassical run.
///
/// # Errors
/// The run's refusals (bad source, times, options) as sentences.
pub fn compute(
    chain: &SpinChain,
    options: &DtwaOptions,
    source: usize,
    times: &[f64],
    header: Vec<String>,
    (k, n): (usize, usize),
    progress: &(dyn Fn(f64) + Sync),
) -> Result<ShardFile, String> {
    let never = AtomicBool::new(false);
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
            trajectories: options.trajectories,
            seed: options.seed,
            step_scale: options.step_scale,
            header,
        },
        batches: batches
            .into_iter()
            .map(|b| ShardBatch {
                batch: b.batch,
                count: b.count,
                sum: rows(&b.sum),
                sum_squares: rows(&b.sum_squares),
            })
            .collect(),
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
    let mut batches = Vec::new();
    for (file, path) in files.iter().zip(&args.shards) {
        for b in &file.batches {
            let (Some(sum), Some(sum_squares)) =
                (array(&b.sum, shape), array(&b.sum_squares, shape))
            else {
                return Err(CliError::Input(format!(
                    "{}: batch {} is not {} times × {n} sites",
                    path.display(),
                    b.batch,
                    shape.0
                )));
            };
            batches.push(BatchSums {
                batch: b.batch,
                count: b.count,
                sum,
                sum_squares,
            });
        }
    }
    let mut options = DtwaOptions::new(run.trajectories, run.seed);
    options.step_scale = run.step_scale;
    let result = dtwa::reduce(&chain, run.source, &run.times, &options, batches)
        .map_err(|e| CliError::Input(format!("merge: {e}")))?;
    let map = result
        .to_correlation_map()
        .map_err(|e| CliError::Input(format!("merge: {e}")))?;
    std::fs::write(&args.out, to_long_csv(&map, &run.header))
        .map_err(|e| CliError::Failure(format!("{}: {e}", args.out.display())))?;
    eprintln!(
        "merge: {} parts, {} trajectories → {}",
        first.parts,
        run.trajectories,
        args.out.display()
    );
    Ok(())
}
