//! Tidy CSV exports besides the log: the across-runs comparison table, and
//! a pinned fit's fitted curves and residual map, in long format (one
//! point per row, one quantity per column) with plain column names.
//!
//! Curves and residuals are read from the fit as it was pinned (its
//! `overlay`), so an export always matches the pinned numbers.

use serde_json::Value;

use super::log::method_label;
use super::report::ComparisonRow;
use super::{Access, Service, ServiceError, ServiceResult};

fn writer() -> csv::Writer<Vec<u8>> {
    // A byte-order mark, so that spreadsheets read α and χ² as UTF-8.
    csv::Writer::from_writer(Vec::from("\u{feff}".as_bytes()))
}

fn finish(writer: csv::Writer<Vec<u8>>) -> ServiceResult<String> {
    let bytes = writer
        .into_inner()
        .map_err(|e| ServiceError::Internal(e.to_string()))?;
    String::from_utf8(bytes).map_err(|e| ServiceError::Internal(e.to_string()))
}

fn internal(e: csv::Error) -> ServiceError {
    ServiceError::Internal(e.to_string())
}

fn number(v: Option<f64>) -> String {
    v.filter(|v| v.is_finite())
        .map(|v| v.to_string())
        .unwrap_or_default()
}

/// The comparison table as CSV, one pinned fit per row.
///
/// # Errors
/// Only if writing to memory fails.
pub fn comparison_csv(rows: &[ComparisonRow]) -> ServiceResult<String> {
    let mut w = writer();
    w.write_record([
        "entry",
        "dataset",
        "platform",
        "α",
        "method",
        "z",
        "z error (stat.)",
        "D (sites^z per time unit)",
        "D error (stat.)",
        "time (UTC)",
        "author",
        "retracted",
    ])
    .map_err(internal)?;
    for r in rows {
        w.write_record([
            r.entry.to_string(),
            r.dataset_name.clone().unwrap_or_default(),
            r.platform.clone().unwrap_or_default(),
            number(r.alpha),
            method_label(&r.method).to_string(),
            number(r.z),
            number(r.z_err),
            number(r.d),
            number(r.d_err),
            r.created_at.clone(),
            r.author.clone(),
            if r.retracted { "yes" } else { "no" }.to_string(),
        ])
        .map_err(internal)?;
    }
    finish(w)
}

/// Which part of a pinned fit's overlay to export.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum FitTable {
    /// The fitted curves: C(0,t) of a tail fit, or the model C(x,t).
    Curves,
    /// Data − model on the window's grid, with the data's error.
    Residuals,
}

/// A pinned fit's curves or residuals as long CSV.
///
/// # Errors
/// BadRequest when the fit has no such table (named in the message).
pub fn fit_table_csv(fit: &Value, table: FitTable, time_unit: &str) -> ServiceResult<String> {
    let overlay = &fit["overlay"];
    let method = method_label(fit["method"].as_str().unwrap_or("fit"));
    let t_head = format!("t ({time_unit})");
    let none = |what: &str| {
        ServiceError::BadRequest(format!(
            "this pinned {method} result has no {what} (only the return-probability tail, \
             profile, lattice-walk and all-estimator fits draw curves over the data)"
        ))
    };
    let mut w = writer();
    let axis = |v: &Value| -> Vec<f64> {
        v.as_array()
            .map(|a| a.iter().filter_map(Value::as_f64).collect())
            .unwrap_or_default()
    };
    match table {
        FitTable::Curves => {
            if let Some(tail) = overlay.get("tail").filter(|v| v.is_object()) {
                w.write_record([t_head.as_str(), "C(0,t) fitted"])
                    .map_err(internal)?;
                for (t, c) in axis(&tail["t"]).iter().zip(axis(&tail["C"])) {
                    w.write_record([number(Some(*t)), number(Some(c))])
                        .map_err(internal)?;
                }
            } else if let Some(p) = overlay.get("profile").filter(|v| v.is_object()) {
                w.write_record(["x (sites)", t_head.as_str(), "C(x,t) fitted"])
                    .map_err(internal)?;
                let (x, t) = (axis(&p["x"]), axis(&p["t"]));
                for (ti, tv) in t.iter().enumerate() {
                    let row = &p["C"][ti];
                    for (xi, xv) in x.iter().enumerate() {
                        w.write_record([
                            number(Some(*xv)),
                            number(Some(*tv)),
                            number(row[xi].as_f64()),
                        ])
                        .map_err(internal)?;
                    }
                }
            } else {
                return Err(none("fitted curves"));
            }
        }
        FitTable::Residuals => {
            let r = overlay
                .get("residual")
                .filter(|v| v.is_object())
                .ok_or_else(|| none("residual map"))?;
            w.write_record([
                "x (sites)",
                t_head.as_str(),
                "C data − C fitted",
                "error of C data",
            ])
            .map_err(internal)?;
            let (x, t) = (axis(&r["x"]), axis(&r["t"]));
            for (ti, tv) in t.iter().enumerate() {
                for (xi, xv) in x.iter().enumerate() {
                    let value = r["values"][ti][xi].as_f64();
                    if value.is_none() {
                        continue;
                    }
                    w.write_record([
                        number(Some(*xv)),
                        number(Some(*tv)),
                        number(value),
                        number(r["err"][ti][xi].as_f64()),
                    ])
                    .map_err(internal)?;
                }
            }
        }
    }
    finish(w)
}

impl Service {
    /// The comparison table as CSV.
    ///
    /// # Errors
    /// Database failure.
    pub async fn comparison_csv(&self, access: &Access) -> ServiceResult<String> {
        comparison_csv(&self.comparison(access).await?)
    }

    /// A pinned entry's fitted curves or residuals as CSV, with a file name
    /// built from its content (entry, dataset, method, table).
    ///
    /// # Errors
    /// NotFound for an unknown entry or one without a fit; BadRequest when
    /// the fit has no such table.
    pub async fn fit_table(
        &self,
        access: &Access,
        entry: i64,
        table: FitTable,
    ) -> ServiceResult<(String, String)> {
        let entries = self.log(access).await?;
        let e = entries
            .into_iter()
            .find(|e| e.id == entry)
            .ok_or(ServiceError::NotFound)?;
        let fit = e.fit.as_ref().ok_or(ServiceError::NotFound)?;
        let time_unit = match e.dataset {
            Some(id) => self
                .datasets(access)
                .await?
                .into_iter()
                .find(|d| d.id == id)
                .map(|d| d.meta.time_unit)
                .unwrap_or_default(),
            None => String::new(),
        };
        let time_unit = if time_unit.is_empty() {
            "time units".to_string()
        } else {
            time_unit
        };
        let csv = fit_table_csv(fit, table, &time_unit)?;
        let method = fit["method"].as_str().unwrap_or("fit");
        let dataset = e.dataset_name.as_deref().unwrap_or("dataset");
        let kind = match table {
            FitTable::Curves => "fitted-curves",
            FitTable::Residuals => "residuals",
        };
        let name = file_name(&[&format!("entry{entry}"), dataset, method, kind], "csv");
        Ok((csv, name))
    }
}

/// A safe file name from parts: letters, digits, `.`, `-` and `_` kept,
/// anything else becomes `-`; parts joined by `_`.
#[must_use]
pub fn file_name(parts: &[&str], extension: &str) -> String {
    let clean: Vec<String> = parts
        .iter()
        .map(|p| {
            let s: String = p
                .chars()
                .map(|c| {
                    if c.is_ascii_alphanumeric() || matches!(c, '.' | '-' | '_') {
                        c
                    } else {
                        '-'
                    }
                })
                .collect();
            s.trim_matches('-').to_string()
        })
        .filter(|s| !s.is_empty())
        .collect();
    format!("{}.{extension}", clean.join("_"))
}
