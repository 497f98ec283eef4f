//! `spreadscope backup --data DIR --out FILE`: a consistent copy of the
//! session database while the server runs, with SQLite's online backup
//! (the copy is one snapshot even when writes happen during it), checked
//! with SQLite's integrity check. Restore by putting the copy in an empty
//! data directory as `spreadscope.sqlite3`.
//!
//! Exit codes: 0 done, 2 bad input (no database in DIR, FILE exists), 1 a
//! failure of the copy.

use std::path::PathBuf;

use clap::Args;

use super::error::CliError;
use crate::store::StoreError;

#[derive(Debug, Args)]
pub struct BackupArgs {
    /// The server's data directory.
    #[arg(long)]
    pub data: PathBuf,
    /// The copy to write (must not exist).
    #[arg(long)]
    pub out: PathBuf,
}

/// Runs `spreadscope backup`.
///
/// # Errors
/// See the module's exit codes.
pub fn run(args: &BackupArgs) -> Result<(), CliError> {
    if args.out.exists() {
        return Err(CliError::Input(format!(
            "--out {}: exists already; choose a new file",
            args.out.display()
        )));
    }
    if !args.data.join("spreadscope.sqlite3").is_file() {
        return Err(CliError::Input(format!(
            "--data {}: no spreadscope database in this directory",
            args.data.display()
        )));
    }
    match crate::store::backup_dir(&args.data, &args.out) {
        Ok(()) => {
            println!(
                "{}: consistent copy of {}",
                args.out.display(),
                args.data.display()
            );
            Ok(())
        }
        Err(e) => {
            // Leave no half-written copy that could be mistaken for a backup.
            let _ = std::fs::remove_file(&args.out);
            Err(match e {
                StoreError::Full => {
                    CliError::Failure(format!("--out {}: the disk is full", args.out.display()))
                }
                e => CliError::Failure(format!("backup: {e}")),
            })
        }
    }
}
