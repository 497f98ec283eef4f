//! `spreadscope session new|list|rename`: the sessions of a data directory
//! from the command line, for whoever holds the directory (and so every
//! session in it). Works on the database directly through the service, with
//! or without a server running on the same directory (the database takes
//! one writer at a time and readers beside it).
//!
//! A fresh directory gets no demo session from these commands; `serve` adds
//! the demo only to a directory without any session.

use std::path::PathBuf;

use clap::{Args, Subcommand};

use super::error::CliError;
use crate::service::{Access, Service, ServiceConfig, ServiceError};
use crate::store::{SessionRow, Store};

#[derive(Debug, Args)]
pub struct SessionArgs {
    #[command(subcommand)]
    pub command: SessionCommand,
    /// Directory holding the session database (created if missing).
    #[arg(long, global = true, default_value = "spreadscope-data")]
    pub data: PathBuf,
    /// Address the links are printed under (where `serve` listens).
    #[arg(long, global = true, default_value = "http://127.0.0.1:7878")]
    pub base: String,
    /// Print JSON instead of text.
    #[arg(long, global = true)]
    pub json: bool,
}

#[derive(Debug, Subcommand)]
pub enum SessionCommand {
    /// Create a session and print its edit and view links.
    New {
        /// The session's name (empty: "Untitled session").
        name: String,
    },
    /// List every session in the data directory with its links.
    List,
    /// Rename a session, given the number shown by `list` or its edit link.
    Rename {
        /// Session number (from `list`), edit link or edit token.
        session: String,
        /// The new name.
        name: String,
    },
}

/// Runs a `session` command.
///
/// # Errors
/// Input for a bad name or an unknown session; Failure if the database
/// cannot be opened.
pub fn run(args: &SessionArgs) -> Result<(), CliError> {
    std::fs::create_dir_all(&args.data)
        .map_err(|e| CliError::Failure(format!("data directory {}: {e}", args.data.display())))?;
    let store = Store::open_dir(&args.data).map_err(|e| CliError::Failure(e.to_string()))?;
    let service = Service::new(store, &ServiceConfig::default());
    let runtime = tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .build()
        .map_err(|e| CliError::Failure(e.to_string()))?;
    runtime.block_on(async {
        match &args.command {
            SessionCommand::New { name } => {
                let tokens = service.create_session(name).await.map_err(failure)?;
                let row = find(&service, &tokens.edit_token).await?;
                print_sessions(args, &[row]);
            }
            SessionCommand::List => {
                let rows = service.sessions().await.map_err(failure)?;
                print_sessions(args, &rows);
            }
            SessionCommand::Rename { session, name } => {
                let row = find(&service, session).await?;
                let access = Access {
                    session: row,
                    can_edit: true,
                };
                service
                    .rename_session(&access, name)
                    .await
                    .map_err(failure)?;
                let row = find(&service, &access.session.edit_token).await?;
                print_sessions(args, &[row]);
            }
        }
        Ok(())
    })
}

fn failure(e: ServiceError) -> CliError {
    match e {
        ServiceError::BadRequest(msg) => CliError::Input(msg.replace("field `name`", "name")),
        other => CliError::Failure(other.to_string()),
    }
}

/// The session named by its number, edit link or edit token.
async fn find(service: &Service, given: &str) -> Result<SessionRow, CliError> {
    let given = given.trim().trim_end_matches('/');
    let token = given.rsplit('/').next().unwrap_or(given);
    let rows = service.sessions().await.map_err(failure)?;
    let by_number = given.parse::<i64>().ok();
    rows.into_iter()
        .find(|s| Some(s.id) == by_number || s.edit_token == token)
        .ok_or_else(|| {
            CliError::Input(format!(
                "session `{given}`: no session with that number or edit link \
                 (see `spreadscope session list`)"
            ))
        })
}

fn print_sessions(args: &SessionArgs, rows: &[SessionRow]) {
    let base = args.base.trim_end_matches('/');
    if args.json {
        let list: Vec<serde_json::Value> = rows
            .iter()
            .map(|s| {
                serde_json::json!({
                    "number": s.id,
                    "name": s.name,
                    "created_at": s.created_at,
                    "edit_url": format!("{base}/s/{}", s.edit_token),
                    "view_url": format!("{base}/s/{}", s.view_token),
                })
            })
            .collect();
        println!("{}", serde_json::Value::Array(list));
        return;
    }
    if rows.is_empty() {
        println!("no sessions in {}", args.data.display());
    }
    for s in rows {
        println!("{:>4}  {}  (created {})", s.id, s.name, s.created_at);
        println!("      edit: {base}/s/{}", s.edit_token);
        println!("      view: {base}/s/{}", s.view_token);
    }
}
