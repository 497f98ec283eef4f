//! Domain values shared by ingest, store, service and api: a dataset's
//! metadata and its summary. No I/O, no HTTP.

use serde::{Deserialize, Serialize};

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
}
