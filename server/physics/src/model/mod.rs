//! Physics objects: correlation maps, stable densities, lattice walks, spin
//! chains, short-time expansions. Pure values in, values out; depends only on
//! `numerics`.

pub mod correlation_map;
pub mod couplings;
pub mod free_fermion;
pub mod lattice_walk;
pub mod short_time;
pub mod shots;
pub mod spin_chain;
pub mod stable;
