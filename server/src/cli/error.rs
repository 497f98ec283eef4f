//! The failure of a command and the exit code it maps to; a leaf every
//! subcommand uses, so that the dispatcher and its subcommands do not import
//! each other.

/// A failure of a command, with the exit code it maps to.
#[derive(Debug)]
pub enum CliError {
    /// Bad input: exit 2.
    Input(String),
    /// Anything else: exit 1.
    Failure(String),
}
