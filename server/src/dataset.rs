//! Domain values shared by ingest, store, service and api: a dataset's
//! metadata and its summary. No I/O, no HTTP.

use serde::{Deserialize, Serialize};
use spreadscope_physics::fit::lattice_walk_fit::SourceAverage;

/// Descriptive metadata of a dataset, editable by people with the edit link.
/// Every field is optional so partial knowledge can be recorded honestly.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct DatasetMeta {
    /// Free label of the platform ("ion chain", "tweezer array", …).
    pub platform: String,
    /// Nominal coupling exponent α of J_ij = J/|i−j|^α; `None` if unknown,
    /// `f64::INFINITY` is not representable in JSON, so nearest-neighbour
    /// chains are recorded with `nearest_neighbour = true`.
    pub alpha: Option<f64>,
    pub nearest_neighbour: bool,
    /// Number of sites of the chain the data come from.
    pub chain_length: Option<u32>,
    /// Source site j (0-based) of C(x,t) = C_{j+x,j}(t), if a single source.
    pub source_site: Option<u32>,
    /// First and last source (0-based, inclusive) when C(x,t) is the mean
    /// over a window of sources, each offset averaging the sources j with
    /// j + x on the chain (as the shot estimator's bulk window does).
    pub source_window: Option<[u32; 2]>,
    /// True when C(x,t) was symmetrised, (C(x) + C(−x))/2.
    pub symmetrised: bool,
    /// Unit of the time axis, e.g. "1/J" or "ms".
    pub time_unit: String,
    pub notes: String,
    /// True for data made by a model rather than measured.
    pub synthetic: bool,
}

impl DatasetMeta {
    /// Checks the values a person may type.
    ///
    /// # Errors
    /// A sentence naming the offending field.
    pub fn validate(&self) -> Result<(), String> {
        if let Some(a) = self.alpha {
            if !(a.is_finite() && a > 0.0) {
                return Err(format!(
                    "field `alpha`: {a} is not a positive finite number"
                ));
            }
        }
        if let (Some(n), Some(j)) = (self.chain_length, self.source_site) {
            if j >= n {
                return Err(format!(
                    "field `source_site`: {j} is outside a chain of {n} sites"
                ));
            }
        }
        if let Some([a, b]) = self.source_window {
            if self.source_site.is_some() {
                return Err(
                    "field `source_window`: give either one source site or a window \
                     of sources, not both"
                        .into(),
                );
            }
            if a > b {
                return Err(format!(
                    "field `source_window`: the first source {a} is after the last {b}"
                ));
            }
            if let Some(n) = self.chain_length.filter(|&n| b >= n) {
                return Err(format!(
                    "field `source_window`: source {b} is outside a chain of {n} sites"
                ));
            }
        }
        for (name, text) in [("platform", &self.platform), ("time_unit", &self.time_unit)] {
            if text.chars().count() > 200 {
                return Err(format!("field `{name}`: longer than 200 characters"));
            }
        }
        if self.notes.chars().count() > 10_000 {
            return Err("field `notes`: longer than 10000 characters".into());
        }
        Ok(())
    }

    /// How the map was formed from several sources, for the lattice-walk
    /// fit: the window of sources, or one symmetrised source; `None` for a
    /// plain single source.
    #[must_use]
    pub fn source_average(&self) -> Option<SourceAverage> {
        match (self.source_window, self.source_site) {
            (Some([a, b]), _) => Some(SourceAverage {
                first: a as usize,
                last: b as usize,
                symmetrised: self.symmetrised,
            }),
            (None, Some(j)) if self.symmetrised => Some(SourceAverage {
                first: j as usize,
                last: j as usize,
                symmetrised: true,
            }),
            _ => None,
        }
    }
}
