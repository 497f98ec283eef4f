//! spreadscope: one binary serving a local dashboard and a command line for
//! transport analysis of quantum-simulator spin chains.
//!
//! Layers (arrows point down; `tests/architecture.rs` enforces them):
//! `cli` → `app` → `api` → `service` → {`store`, `ingest`} → `dataset` and
//! the pure core `spreadscope_physics` (numerics → model → fit).

pub mod analysis_text;
pub mod api;
pub mod app;
pub mod cli;
pub mod dataset;
pub mod ingest;
pub mod loadcheck;
pub mod service;
pub mod store;
pub mod tls;
