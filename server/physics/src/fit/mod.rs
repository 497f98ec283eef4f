//! Estimators: every fit returns a report with parameters, uncertainties,
//! goodness of fit and why it stopped. Depends on `model` and `numerics`.

pub mod analysis;
pub mod calibration;
pub mod collapse;
pub mod couplings_fit;
pub mod diagnosis;
pub mod lattice_walk_fit;
pub mod profile;
pub mod short_time_check;
pub mod tail;
pub mod verdict;
pub mod width;
pub mod windows;
