//! Numerics: special functions, quadrature, linear-algebra wrappers, optimisers
//! and statistics. Knows nothing of physics conventions or of any I/O.

pub mod linalg;
pub mod optimize;
pub mod quadrature;
pub mod special;
pub mod stats;
pub mod zeta;
