//! `serve --watch DIR --into SESSION`: resolves the session (its edit link
//! or edit token) and starts the service's folder watcher beside the server.

use std::path::Path;

use super::error::CliError;
use crate::service::Service;
use crate::service::watch::WatchSettings;

/// Starts watching `dir` for the session named by `into`.
///
/// # Errors
/// Bad input: the directory does not exist, or `into` is not an edit link
/// or token of a session of this server.
pub async fn start(service: &Service, dir: &Path, into: &str) -> Result<(), CliError> {
    if !dir.is_dir() {
        return Err(CliError::Input(format!(
            "--watch {}: not a directory",
            dir.display()
        )));
    }
    let token = match into.split_once("/s/") {
        Some((_, rest)) => rest.split(['/', '?', '#']).next().unwrap_or_default(),
        None => into,
    };
    let access = service.access(token).await.map_err(|_| {
        CliError::Input(format!(
            "--into `{into}`: no session of this server has that link"
        ))
    })?;
    if !access.can_edit {
        return Err(CliError::Input(format!(
            "--into `{into}`: a view link; the watched folder needs the session's edit link"
        )));
    }
    eprintln!(
        "spreadscope: watching {} for session “{}”",
        dir.display(),
        access.session.name
    );
    let watcher = service.clone();
    let dir = dir.to_path_buf();
    tokio::spawn(async move {
        watcher
            .watch_folder(access, dir, WatchSettings::default())
            .await;
    });
    Ok(())
}
