//! The pinned session log: append-only entries with provenance, and their
//! CSV and JSON exports. Entries are never rewritten; a retraction is a new
//! entry that points at the old one.

use serde::{Deserialize, Serialize};
use serde_json::Value;

use super::{Access, PROGRAM_VERSION, Service, ServiceError, ServiceResult, now_utc};
use crate::store::{LogRefusal, LogRow, NewLogEntry};

/// Largest accepted fit report, as JSON text.
const MAX_FIT_BYTES: usize = 1 << 20;

/// What a person pins.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PinRequest {
    pub author: String,
    pub comment: String,
    #[serde(default)]
    pub dataset: Option<i64>,
    /// A fit report as returned by the fits route.
    #[serde(default)]
    pub fit: Option<Value>,
    /// The id of an entry this one retracts.
    #[serde(default)]
    pub retracts: Option<i64>,
}

/// A log entry as every reader sees it.
#[derive(Debug, Clone, Serialize)]
pub struct LogEntry {
    pub id: i64,
    pub created_at: String,
    pub author: String,
    pub comment: String,
    pub dataset: Option<i64>,
    pub dataset_name: Option<String>,
    pub dataset_hash: Option<String>,
    pub retracts: Option<i64>,
    pub fit: Option<Value>,
    pub program_version: String,
}

impl From<LogRow> for LogEntry {
    fn from(row: LogRow) -> Self {
        Self {
            id: row.id,
            created_at: row.created_at,
            author: row.author,
            comment: row.comment,
            dataset: row.dataset_id,
            dataset_name: row.dataset_name,
            dataset_hash: row.dataset_hash,
            retracts: row.retracts,
            // Stored text was produced by serde_json from a Value; a row
            // that no longer parses is shown as a string rather than lost.
            fit: row
                .fit_json
                .map(|t| serde_json::from_str(&t).unwrap_or(Value::String(t))),
            program_version: row.program_version,
        }
    }
}

fn check_text(field: &str, text: &str, max: usize, required: bool) -> ServiceResult<String> {
    let text = text.trim();
    if required && text.is_empty() {
        return Err(ServiceError::BadRequest(format!(
            "field `{field}`: must not be empty"
        )));
    }
    if text.chars().count() > max {
        return Err(ServiceError::BadRequest(format!(
            "field `{field}`: longer than {max} characters"
        )));
    }
    if text
        .chars()
        .any(|c| c.is_control() && c != '\n' && c != '\t')
    {
        return Err(ServiceError::BadRequest(format!(
            "field `{field}`: contains control characters"
        )));
    }
    Ok(text.to_string())
}

/// The serialised log of each session, extended in place: the log only
/// grows (entries are never rewritten), so a read fetches just the entries
/// after the last one already serialised and appends them.
///
/// Invariant: the cached body holds exactly the entries with id ≤ its
/// `last_id`, in id order (SQLite's single writer commits ids in order, so
/// a reader that sees an id sees every smaller one).
#[derive(Debug, Default)]
pub struct LogCache {
    inner: std::sync::Mutex<CachedLogs>,
}

/// Per session: the id of the last serialised entry and the JSON body.
type CachedLogs = std::collections::HashMap<i64, (i64, std::sync::Arc<Vec<u8>>)>;

impl LogCache {
    fn lock(&self) -> std::sync::MutexGuard<'_, CachedLogs> {
        self.inner
            .lock()
            .unwrap_or_else(std::sync::PoisonError::into_inner)
    }
}

impl Service {
    /// The session's log as JSON bytes (an array, oldest first).
    ///
    /// # Errors
    /// Database failure.
    pub async fn log_json(&self, access: &Access) -> ServiceResult<std::sync::Arc<Vec<u8>>> {
        let session_id = access.session.id;
        let cached = self.log_cache.lock().get(&session_id).cloned();
        let (last_id, body) = cached.unwrap_or_else(|| (0, std::sync::Arc::new(b"[]".to_vec())));
        let rows = self.db(move |s| s.log_after(session_id, last_id)).await?;
        let Some(newest) = rows.last().map(|r| r.id) else {
            return Ok(body);
        };
        let mut extended = Vec::with_capacity(body.len() + rows.len() * 256);
        extended.extend_from_slice(&body[..body.len() - 1]);
        for (k, row) in rows.into_iter().enumerate() {
            if k > 0 || body.len() > 2 {
                extended.push(b',');
            }
            serde_json::to_writer(&mut extended, &LogEntry::from(row))
                .map_err(|e| ServiceError::Internal(e.to_string()))?;
        }
        extended.push(b']');
        let extended = std::sync::Arc::new(extended);
        let mut cache = self.log_cache.lock();
        if cache.get(&session_id).is_none_or(|(id, _)| *id < newest) {
            cache.insert(session_id, (newest, extended.clone()));
        }
        Ok(extended)
    }

    /// Pins an entry to the session's log and tells every open page.
    ///
    /// # Errors
    /// Forbidden for view links; BadRequest naming the field; Internal on
    /// database failure (then nothing was written).
    pub async fn pin(&self, access: &Access, request: PinRequest) -> ServiceResult<LogEntry> {
        access.require_edit()?;
        let author = check_text("author", &request.author, 100, true)?;
        let comment = check_text("comment", &request.comment, 10_000, false)?;
        let fit_json = match &request.fit {
            None | Some(Value::Null) => None,
            Some(v @ Value::Object(_)) => {
                let text =
                    serde_json::to_string(v).map_err(|e| ServiceError::Internal(e.to_string()))?;
                if text.len() > MAX_FIT_BYTES {
                    return Err(ServiceError::BadRequest(
                        "field `fit`: larger than 1 MiB".into(),
                    ));
                }
                Some(text)
            }
            Some(_) => {
                return Err(ServiceError::BadRequest(
                    "field `fit`: must be a fit report object".into(),
                ));
            }
        };
        if comment.is_empty() && fit_json.is_none() && request.retracts.is_none() {
            return Err(ServiceError::BadRequest(
                "field `comment`: an entry without a fit or a retraction needs a comment".into(),
            ));
        }
        let session_id = access.session.id;
        let (dataset_id, retracts) = (request.dataset, request.retracts);
        let outcome = self
            .db(move |s| {
                let now = now_utc();
                s.append_log(&NewLogEntry {
                    session_id,
                    created_at: &now,
                    author: &author,
                    comment: &comment,
                    dataset_id,
                    retracts,
                    fit_json: fit_json.as_deref(),
                    program_version: PROGRAM_VERSION,
                })
            })
            .await?;
        let row = outcome.map_err(|refusal| match refusal {
            LogRefusal::NoSuchDataset(id) => ServiceError::BadRequest(format!(
                "field `dataset`: no dataset {id} in this session"
            )),
            LogRefusal::NoSuchEntry(id) => {
                ServiceError::BadRequest(format!("field `retracts`: no entry {id} in this session"))
            }
        })?;
        self.publish(session_id, "log-added", row.id);
        Ok(row.into())
    }

    /// The session's log as CSV, one quantity per column (see [`to_csv`]).
    ///
    /// # Errors
    /// Database failure.
    pub async fn log_csv(&self, access: &Access) -> ServiceResult<String> {
        let entries = self.log(access).await?;
        let alphas: std::collections::HashMap<i64, f64> = self
            .datasets(access)
            .await?
            .into_iter()
            .filter_map(|d| Some((d.id, d.meta.alpha?)))
            .collect();
        to_csv(&entries, &|id| alphas.get(&id).copied())
            .map_err(|e| ServiceError::Internal(e.to_string()))
    }

    /// The session's log, oldest first.
    ///
    /// # Errors
    /// Database failure.
    pub async fn log(&self, access: &Access) -> ServiceResult<Vec<LogEntry>> {
        let session_id = access.session.id;
        let rows = self.db(move |s| s.log(session_id)).await?;
        Ok(rows.into_iter().map(LogEntry::from).collect())
    }
}

/// The columns of the log CSV, in order: one quantity per column, one value
/// per cell. The full fit report is only in the JSON export (a report can
/// exceed a spreadsheet's 32,767-character cell limit).
pub const CSV_HEADER: [&str; 21] = [
    "entry",
    "time (UTC)",
    "author",
    "dataset",
    "dataset hash",
    "α",
    "method",
    "t_min",
    "t_max",
    "x_max",
    "z",
    "z error (stat.)",
    "z error (window)",
    "D (sites^z per time unit)",
    "D error (stat.)",
    "D error (window)",
    "χ²/dof",
    "collapse quality S",
    "retracts entry",
    "retracted by",
    "comment",
];

/// Plain words for a fit method's name.
#[must_use]
pub fn method_label(method: &str) -> &str {
    match method {
        "tail" => "return-probability tail",
        "width" => "width growth",
        "collapse" => "scaling collapse",
        "profile" => "profile fit",
        "lattice_walk" => "lattice-walk fit",
        "short_time" => "short-time check",
        "analysis" => "all estimators",
        other => other,
    }
}

/// The log as CSV (RFC 4180 quoting, UTF-8 with a byte-order mark so that
/// spreadsheets read α and χ² correctly). `alpha` gives each dataset's α
/// from its metadata. Text that a spreadsheet would run as a formula
/// (leading `=`, `+`, `-`, `@`) is prefixed with `'`. Numbers are written in
/// full (shortest exact decimal form); a quantity a fit does not give is an
/// empty cell.
///
/// # Errors
/// Only if writing to memory fails.
pub fn to_csv(
    entries: &[LogEntry],
    alpha: &dyn Fn(i64) -> Option<f64>,
) -> Result<String, csv::Error> {
    let mut retracted_by = std::collections::HashMap::new();
    for e in entries {
        if let Some(old) = e.retracts {
            retracted_by.entry(old).or_insert(e.id);
        }
    }
    let mut writer = csv::Writer::from_writer(Vec::from("\u{feff}".as_bytes()));
    writer.write_record(CSV_HEADER)?;
    let number = |v: Option<f64>| v.filter(|v| v.is_finite()).map(|v| v.to_string());
    for e in entries {
        let fit = e.fit.as_ref();
        let field = |path: &[&str]| -> Option<f64> {
            let mut v = fit?;
            for key in path {
                v = v.get(key)?;
            }
            v.as_f64()
        };
        let windows = fit.and_then(|f| f.get("windows")).map(|w| match w {
            Value::Array(list) => list.first().cloned().unwrap_or(Value::Null),
            other => other.clone(),
        });
        let window = |name: &str| {
            windows
                .as_ref()
                .and_then(|w| w.get(name))
                .and_then(Value::as_f64)
        };
        let method = fit
            .and_then(|f| f.get("method"))
            .and_then(Value::as_str)
            .map(method_label)
            .unwrap_or_default();
        let row = [
            e.id.to_string(),
            e.created_at.clone(),
            text_cell(&e.author),
            e.dataset_name.as_deref().map(text_cell).unwrap_or_default(),
            e.dataset_hash.clone().unwrap_or_default(),
            number(e.dataset.and_then(alpha)).unwrap_or_default(),
            method.to_string(),
            number(window("t_min")).unwrap_or_default(),
            number(window("t_max")).unwrap_or_default(),
            number(window("x_max")).unwrap_or_default(),
            number(field(&["parameters", "z", "value"])).unwrap_or_default(),
            number(field(&["parameters", "z", "err"])).unwrap_or_default(),
            number(field(&["parameters", "z", "err_sys"])).unwrap_or_default(),
            number(field(&["parameters", "D", "value"])).unwrap_or_default(),
            number(field(&["parameters", "D", "err"])).unwrap_or_default(),
            number(field(&["parameters", "D", "err_sys"])).unwrap_or_default(),
            number(field(&["quality", "chi2_dof"])).unwrap_or_default(),
            number(field(&["quality", "collapse_quality"])).unwrap_or_default(),
            e.retracts.map(|d| d.to_string()).unwrap_or_default(),
            retracted_by
                .get(&e.id)
                .map(ToString::to_string)
                .unwrap_or_default(),
            text_cell(&e.comment),
        ];
        writer.write_record(&row)?;
    }
    let bytes = writer.into_inner().map_err(|e| e.into_error())?;
    Ok(String::from_utf8_lossy(&bytes).into_owned())
}

fn text_cell(text: &str) -> String {
    if text.starts_with(['=', '+', '-', '@']) {
        format!("'{text}")
    } else {
        text.to_string()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn csv_quotes_defuses_formulas_and_puts_one_quantity_per_cell() {
        let entry = |id, retracts, fit| LogEntry {
            id,
            created_at: "t".into(),
            author: "=cmd()".into(),
            comment: "a, \"quoted\"\nline".into(),
            dataset: Some(2),
            dataset_name: Some("run 1".into()),
            dataset_hash: Some("h".into()),
            retracts,
            fit,
            program_version: "v".into(),
        };
        let fit = serde_json::json!({"method": "tail", "windows": {"t_min": 2.5},
            "parameters": {"z": {"value": 1.5, "err": 0.1}}, "quality": {"chi2_dof": 0.9}});
        let csv = to_csv(
            &[entry(1, None, Some(fit)), entry(2, Some(1), None)],
            &|id| (id == 2).then_some(1.25),
        )
        .expect("csv");
        let mut reader = csv::Reader::from_reader(csv.trim_start_matches('\u{feff}').as_bytes());
        let header = reader.headers().expect("header").clone();
        assert_eq!(header.iter().collect::<Vec<_>>(), CSV_HEADER);
        let rows: Vec<csv::StringRecord> = reader.records().map(|r| r.expect("row")).collect();
        let cell = |row: usize, name: &str| {
            let k = CSV_HEADER.iter().position(|h| *h == name).expect("column");
            rows[row][k].to_string()
        };
        assert_eq!(cell(0, "author"), "'=cmd()");
        assert_eq!(cell(0, "comment"), "a, \"quoted\"\nline");
        assert_eq!(cell(0, "α"), "1.25");
        assert_eq!(cell(0, "method"), "return-probability tail");
        assert_eq!(cell(0, "t_min"), "2.5");
        assert_eq!(cell(0, "t_max"), "");
        assert_eq!(cell(0, "z"), "1.5");
        assert_eq!(cell(0, "z error (stat.)"), "0.1");
        assert_eq!(cell(0, "z error (window)"), "");
        assert_eq!(cell(0, "χ²/dof"), "0.9");
        assert_eq!(cell(0, "retracted by"), "2");
        assert_eq!(cell(1, "retracts entry"), "1");
    }
}
