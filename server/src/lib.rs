//! spreadscope: one binary serving a local dashboard and a command line for
//! transport analysis of quantum-simulator spin chains.
//!
//! Layers (arrows point down; `tests/architecture.rs` enforces them):
//! `cli` → `app` → `api` → `service` → {`store`, `ingest`} → `dataset` and
//! the pure core `spreadscope_physics` (numerics → model → fit).

pub mod analyze;
pub mod api;
pub mod app;
pub mod archive;
pub mod backup;
pub mod cli;
pub mod client;
pub mod correlate;
pub mod dataset;
pub mod ingest;
pub mod loadcheck;
pub mod push;
pub mod service;
pub mod session_cli;
pub mod shard;
pub mod simulate;
pub mod store;
pub mod tls;
pub mod watch;
