//! The command line as scripts use it: exit codes and outputs.

use std::process::Command;

fn spreadscope() -> Command {
    Command::new(env!("CARGO_BIN_EXE_spreadscope"))
}

#[test]
fn unknown_options_exit_2() {
    let out = spreadscope()
        .args(["serve", "--no-such-flag"])
        .output()
        .expect("runs");
    assert_eq!(out.status.code(), Some(2));
}
