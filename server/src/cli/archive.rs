//! `spreadscope archive export|import`: a whole session as one file, from a
//! running server and into one (a new session with new links). The archive
//! itself is built and checked by the server (see the service's archive
//! module); this is the command-line door to its two routes.
//!
//! Exit codes: 0 done, 2 bad input (an option, an existing output file, an
//! archive the server refused, with its reason), 1 anything else.

use std::io::Write;
use std::path::PathBuf;
use std::time::Duration;

use clap::{Args, Subcommand};

use super::client;
use super::error::CliError;

#[derive(Debug, Args)]
pub struct ArchiveArgs {
    #[command(subcommand)]
    pub action: ArchiveAction,
}

#[derive(Debug, Subcommand)]
pub enum ArchiveAction {
    /// Download a session (view or edit link) as one archive file.
    Export {
        /// The session's link.
        link: String,
        /// The archive file to write (must not exist).
        #[arg(long)]
        out: PathBuf,
        /// A PEM certificate to trust (a lab's self-signed one).
        #[arg(long)]
        ca: Option<PathBuf>,
    },
    /// Import an archive into a new session on a server; prints its links.
    Import {
        /// The archive file.
        file: PathBuf,
        /// The server, e.g. `http://other-pc:7878`.
        #[arg(long)]
        to: String,
        /// A PEM certificate to trust (a lab's self-signed one).
        #[arg(long)]
        ca: Option<PathBuf>,
    },
}

/// Runs `spreadscope archive`.
///
/// # Errors
/// See the module's exit codes.
pub fn run(args: &ArchiveArgs) -> Result<(), CliError> {
    match &args.action {
        ArchiveAction::Export { link, out, ca } => {
            let link = client::parse_link(link, "LINK")?;
            let agent = client::agent(ca.as_deref(), Duration::from_secs(600))?;
            let url = format!("{}/api/s/{}/archive", link.base, link.token);
            let response = agent
                .get(&url)
                .call()
                .map_err(|e| CliError::Failure(format!("{}: {e}", link.base)))?;
            let status = response.status().as_u16();
            let bytes = response
                .into_body()
                .with_config()
                .limit(u64::MAX)
                .read_to_vec()
                .map_err(|e| CliError::Failure(format!("reading the archive: {e}")))?;
            if status != 200 {
                return Err(client::refusal(
                    "LINK",
                    status,
                    &String::from_utf8_lossy(&bytes),
                ));
            }
            let mut file = std::fs::OpenOptions::new()
                .write(true)
                .create_new(true)
                .open(out)
                .map_err(|e| CliError::Input(format!("--out {}: {e}", out.display())))?;
            file.write_all(&bytes)
                .and_then(|()| file.sync_all())
                .map_err(|e| CliError::Failure(format!("--out {}: {e}", out.display())))?;
            println!("{}: session archive, {} bytes", out.display(), bytes.len());
            Ok(())
        }
        ArchiveAction::Import { file, to, ca } => {
            let base = client::server_base(to, "--to")?;
            let bytes = std::fs::read(file)
                .map_err(|e| CliError::Input(format!("{}: {e}", file.display())))?;
            let agent = client::agent(ca.as_deref(), Duration::from_secs(600))?;
            let response = agent
                .post(&format!("{base}/api/archives"))
                .send(&bytes[..])
                .map_err(|e| CliError::Failure(format!("{base}: {e}")))?;
            let status = response.status().as_u16();
            let body = response
                .into_body()
                .read_to_string()
                .map_err(|e| CliError::Failure(format!("reading the answer: {e}")))?;
            if status != 201 {
                return Err(client::refusal(&file.display().to_string(), status, &body));
            }
            let answer: serde_json::Value = serde_json::from_str(&body)
                .map_err(|e| CliError::Failure(format!("answer: {e}")))?;
            println!(
                "imported {} datasets and {} log entries into a new session",
                answer["datasets"], answer["log_entries"]
            );
            println!(
                "  edit: {base}{}",
                answer["edit_url"].as_str().unwrap_or_default()
            );
            println!(
                "  view: {base}{}",
                answer["view_url"].as_str().unwrap_or_default()
            );
            Ok(())
        }
    }
}
