//! Command line: `serve`, and the headless engine (`simulate`, `analyze`,
//! `correlate`). Owns argument parsing and human/JSON printing; the work is
//! done by the service (serve) or the pure core (the rest).
//!
//! Exit codes: 0 success, 2 bad input (a one-line reason naming the file,
//! line or option), 1 any other failure.

pub mod analyze;
pub mod archive;
pub mod backup;
pub mod client;
pub mod correlate;
pub mod error;
pub mod long_csv;
pub mod push;
pub mod session;
pub mod shard;
pub mod simulate;
pub mod watch;

pub use error::CliError;

use std::net::{IpAddr, SocketAddr};
use std::path::PathBuf;
use std::process::ExitCode;

use clap::{Parser, Subcommand};

use crate::api::ApiConfig;
use crate::app::{self, App};

#[derive(Debug, Parser)]
#[command(
    name = "spreadscope",
    version,
    about = "Transport analysis of spin-chain correlation maps: dashboard and headless engine"
)]
pub struct Cli {
    #[command(subcommand)]
    pub command: Command,
}

#[derive(Debug, Subcommand)]
pub enum Command {
    /// Serve the dashboard (a fresh data directory starts with the demo session).
    Serve(ServeArgs),
    /// Run every estimator on a correlation map and print the results.
    Analyze(analyze::AnalyzeArgs),
    /// Estimate C(x,t) with bootstrap errors from shot records.
    Correlate(correlate::CorrelateArgs),
    /// Compute a reference model's C(x,t) and write it as long CSV `x,t,C[,err]`.
    Simulate(simulate::SimulateArgs),
    /// Join the shard files of a semiclassical run (`simulate --shard K/N`) into its map.
    Merge(shard::MergeArgs),
    /// Create, list and rename the sessions of a data directory.
    Session(session::SessionArgs),
    /// Send maps or shot files to a running server's session (safe to retry).
    Push(push::PushArgs),
    /// Export a session as one archive file, or import one into a new session.
    Archive(archive::ArchiveArgs),
    /// Copy the session database consistently while the server runs.
    Backup(backup::BackupArgs),
}

#[derive(Debug, clap::Args)]
pub struct ServeArgs {
    /// Directory holding the session database.
    #[arg(long, default_value = "spreadscope-data")]
    pub data: PathBuf,
    /// Address to bind; anything but loopback exposes the sessions to the network.
    #[arg(long, default_value = "127.0.0.1")]
    pub bind: IpAddr,
    /// Port (0 picks a free one).
    #[arg(long, default_value_t = 7878)]
    pub port: u16,
    /// Largest accepted upload, in MiB.
    #[arg(long, default_value_t = 256)]
    pub max_upload_mb: usize,
    /// Take files that appear in this directory into a session (see `--into`).
    #[arg(long, requires = "into")]
    pub watch: Option<PathBuf>,
    /// The session the watched folder feeds: its edit link or edit token.
    #[arg(long, requires = "watch")]
    pub into: Option<String>,
    /// Serve HTTPS with this PEM certificate (chain) …
    #[arg(long, requires = "tls_key")]
    pub tls_cert: Option<PathBuf>,
    /// … and this PEM private key.
    #[arg(long, requires = "tls_cert")]
    pub tls_key: Option<PathBuf>,
}

/// Runs the parsed command line.
#[must_use]
pub fn run(cli: Cli) -> ExitCode {
    let result = match cli.command {
        Command::Serve(args) => serve(&args),
        Command::Simulate(args) => simulate::run(&args),
        Command::Merge(args) => shard::run(&args),
        Command::Analyze(args) => analyze::run(&args),
        Command::Correlate(args) => correlate::run(&args),
        Command::Session(args) => session::run(&args),
        Command::Push(args) => push::run(&args),
        Command::Archive(args) => archive::run(&args),
        Command::Backup(args) => backup::run(&args),
    };
    match result {
        Ok(()) => ExitCode::SUCCESS,
        Err(CliError::Input(msg)) => {
            eprintln!("spreadscope: {msg}");
            ExitCode::from(2)
        }
        Err(CliError::Failure(msg)) => {
            eprintln!("spreadscope: {msg}");
            ExitCode::from(1)
        }
    }
}

fn serve(args: &ServeArgs) -> Result<(), CliError> {
    let runtime = tokio::runtime::Runtime::new().map_err(|e| CliError::Failure(e.to_string()))?;
    runtime.block_on(async {
        let api = ApiConfig {
            max_upload_bytes: args.max_upload_mb.saturating_mul(1024 * 1024),
            ..ApiConfig::default()
        };
        let app = App::open(&args.data, &api)
            .await
            .map_err(CliError::Failure)?;
        let tls = match (&args.tls_cert, &args.tls_key) {
            (Some(cert), Some(key)) => {
                Some(crate::tls::load(cert, key).await.map_err(CliError::Input)?)
            }
            _ => None,
        };
        if let (Some(dir), Some(into)) = (&args.watch, &args.into) {
            watch::start(&app.service, dir, into).await?;
        }
        let listener = tokio::net::TcpListener::bind(SocketAddr::new(args.bind, args.port))
            .await
            .map_err(|e| {
                CliError::Input(format!("--bind {} --port {}: {e}", args.bind, args.port))
            })?;
        let addr = listener
            .local_addr()
            .map_err(|e| CliError::Failure(e.to_string()))?;
        if !args.bind.is_loopback() {
            if tls.is_some() {
                eprintln!(
                    "spreadscope: WARNING: bound to {addr}, reachable from the network: \
                     anyone holding a link below can read (view) or write (edit) that session."
                );
            } else {
                eprintln!(
                    "spreadscope: WARNING: bound to {addr} without TLS: the links below, and \
                     everything sent with them, can be read by anyone on the network; \
                     anyone holding a link can read (view) or write (edit) that session. \
                     Use --tls-cert and --tls-key on a shared network."
                );
            }
        }
        let scheme = if tls.is_some() { "https" } else { "http" };
        let shutdown = app::shutdown_signal().map_err(|e| CliError::Failure(e.to_string()))?;
        app::print_links_with(&app.service, scheme, addr)
            .await
            .map_err(CliError::Failure)?;
        match tls {
            Some(config) => crate::tls::serve(listener, config, app.router, shutdown)
                .await
                .map_err(|e| CliError::Failure(e.to_string())),
            None => app::serve(listener, app.router, shutdown)
                .await
                .map_err(|e| CliError::Failure(e.to_string())),
        }
    })
}
