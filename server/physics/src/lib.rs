//! spreadscope-physics: the pure core of spreadscope.
//!
//! Owns special functions and linear algebra wrappers (`numerics`), the physics
//! objects — correlation maps, stable densities, lattice walks, spin chains,
//! short-time expansions (`model`) — and every estimator (`fit`).
//!
//! Must not know: HTTP, JSON wire formats, async runtimes, the database or the
//! file system. Values in, values out. `tests/architecture.rs` enforces this.
//!
//! Conventions used throughout (and stated in every output of the program):
//! - C_ij(t) = 2^-N Tr[σ^z_i(t) σ^z_j(0)] (infinite temperature); C(x,t) = C_{j+x,j}(t).
//! - H = Σ_{i<j} J_ij (σ^+_i σ^-_j + σ^-_i σ^+_j + (Δ/2) σ^z_i σ^z_j), ħ = 1.
//! - Scaling form Σ_x C(x,t) e^{ikx} ≈ exp(−D |k|^z t); D in sites^z per time unit.

pub mod fit;
pub mod model;
pub mod numerics;
#[cfg(test)]
mod testing;
pub mod tolerance;

pub use model::correlation_map::{CorrelationMap, MapError, SumRulePoint};
