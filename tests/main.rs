//! Integration tests: one binary, shared harness in `support/`.

mod api;
mod architecture;
mod browser;
mod cli;
mod crash;
mod support;
