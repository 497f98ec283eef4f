//! Integration tests: one binary, shared harness in `support/`.

mod api;
mod architecture;
mod archive;
mod bad_input;
mod browser;
mod cli;
mod crash;
mod exports;
mod fits;
mod lab;
mod load;
mod parsers_prop;
mod support;
mod wire;
