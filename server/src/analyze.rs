//! `spreadscope analyze FILE`: every estimator on one correlation map, with
//! default windows, printed as a readable table or as JSON (`--json`).
//! A file that does not parse is refused with its first problem's line and
//! exit code 2.

use std::path::PathBuf;

use clap::Args;
use serde_json::json;
use spreadscope_physics::fit::analysis::{AnalysisOptions, analyze};
use spreadscope_physics::fit::verdict::DConvention;
use spreadscope_physics::fit::windows::DEFAULT_BOOTSTRAP;

/// The D convention on the command line.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum DConventionArg {
    /// s(t) = (D t)^{1/z} (default).
    Rate,
    /// s(t) = D t^{1/z}.
    Prefactor,
}

impl From<DConventionArg> for DConvention {
    fn from(a: DConventionArg) -> Self {
        match a {
            DConventionArg::Rate => Self::Rate,
            DConventionArg::Prefactor => Self::Prefactor,
        }
    }
}

use crate::cli::CliError;
use crate::ingest::{self, Format, IngestOptions};
use crate::service::{CONVENTIONS, PROGRAM_VERSION};

#[derive(Debug, Args)]
pub struct AnalyzeArgs {
    /// A correlation map: CSV (long or wide), NPZ, NPY or JSON.
    pub file: PathBuf,
    /// Earliest time of the fit windows.
    #[arg(long)]
    pub t_min: Option<f64>,
    /// Latest time of the fit windows.
    #[arg(long)]
    pub t_max: Option<f64>,
    /// Largest |x| used by the fits.
    #[arg(long)]
    pub x_max: Option<i32>,
    /// Chain length: adds the lattice-walk fit and the chain-edge check
    /// (default: the file's `chain_length`).
    #[arg(long)]
    pub sites: Option<usize>,
    /// Source site (0-based; needs the chain length; default: the file's
    /// `source_site`, or its `source_window` of averaged sources).
    #[arg(long)]
    pub source: Option<usize>,
    /// Bootstrap resamples of the collapse and profile fits (0: none).
    #[arg(long, default_value_t = DEFAULT_BOOTSTRAP)]
    pub bootstrap: usize,
    /// Nominal coupling exponent α (for the crossover remark and the
    /// reference line 2α − 1).
    #[arg(long)]
    pub alpha: Option<f64>,
    /// Unit of the time axis, used in D's units.
    #[arg(long, default_value = "time unit")]
    pub time_unit: String,
    /// How D is defined: `rate` for s(t) = (D t)^{1/z}, `prefactor` for
    /// s(t) = D t^{1/z}.
    #[arg(long, value_enum, default_value_t = DConventionArg::Rate)]
    pub d_convention: DConventionArg,
    /// Seed of every random number.
    #[arg(long, default_value_t = 0)]
    pub seed: u64,
    /// File format when the extension does not tell.
    #[arg(long)]
    pub format: Option<Format>,
    /// Print JSON instead of a table.
    #[arg(long)]
    pub json: bool,
}

/// Reads and parses a map file; problems become one line naming the file
/// and the first problem's line (the rest are counted).
///
/// # Errors
/// Unreadable file (exit 1) or rejected content (exit 2).
pub fn read_map(
    path: &std::path::Path,
    format: Option<Format>,
) -> Result<ingest::Ingested, CliError> {
    let bytes =
        std::fs::read(path).map_err(|e| CliError::Input(format!("{}: {e}", path.display())))?;
    let name = path.display().to_string();
    let format = format
        .or_else(|| Format::from_file_name(&name))
        .or_else(|| ingest::sniff(&bytes))
        .ok_or_else(|| CliError::Input(format!("{name}: cannot tell the format; use --format")))?;
    ingest::parse(&bytes, format, &IngestOptions::default())
        .map_err(|e| CliError::Input(format!("{name}: {e}")))
}

/// Runs `analyze`.
///
/// # Errors
/// Bad file or options (exit 2).
pub fn run(args: &AnalyzeArgs) -> Result<(), CliError> {
    let ingested = read_map(&args.file, args.format)?;
    // The file's metadata completes what the options leave open; a source
    // given on the command line replaces the file's window of sources.
    let meta = &ingested.meta;
    let sites = args.sites.or(meta.chain_length.map(|n| n as usize));
    let options = AnalysisOptions {
        t_min: args.t_min,
        t_max: args.t_max,
        x_max: args.x_max,
        sites,
        source: args.source.or(meta
            .source_site
            .map(|j| j as usize)
            .filter(|_| sites.is_some())),
        average: meta
            .source_average()
            .filter(|_| args.source.is_none() && sites.is_some()),
        bootstrap: args.bootstrap,
        seed: args.seed,
        alpha: args.alpha,
        time_unit: args.time_unit.clone(),
        d_convention: args.d_convention.into(),
    };
    let report = analyze(&ingested.map, &options)
        .map_err(|e| CliError::Input(format!("{}: {e}", args.file.display())))?;
    if args.json {
        let mut value =
            serde_json::to_value(&report).map_err(|e| CliError::Failure(e.to_string()))?;
        if let Some(obj) = value.as_object_mut() {
            obj.insert("file".into(), json!(args.file.display().to_string()));
            obj.insert("program_version".into(), json!(PROGRAM_VERSION));
            obj.insert("conventions".into(), json!(CONVENTIONS));
        }
        println!(
            "{}",
            serde_json::to_string_pretty(&value).map_err(|e| CliError::Failure(e.to_string()))?
        );
    } else {
        println!("{} — {}", PROGRAM_VERSION, args.file.display());
        println!("{}", report.render_text());
    }
    Ok(())
}
