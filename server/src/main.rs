//! The `spreadscope` binary: a shim over [`spreadscope::cli`].

use clap::Parser;

fn main() -> std::process::ExitCode {
    spreadscope::cli::run(spreadscope::cli::Cli::parse())
}
