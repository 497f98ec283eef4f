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

/// The log as CSV (RFC 4180 quoting). Text that a spreadsheet would run as a
/// formula (leading `=`, `+`, `-`, `@`) is prefixed with `'`. Parameters of a
/// fit appear as `name=value±error` pairs; the full report is the last column.
#[must_use]
pub fn to_csv(entries: &[LogEntry]) -> String {
    let mut out = String::from(
        "id,created_at,author,comment,dataset,dataset_name,dataset_hash,retracts,method,parameters,program_version,fit_json\n",
    );
    for e in entries {
        let fit = e.fit.as_ref();
        let method = fit
            .and_then(|f| f.get("method"))
            .and_then(Value::as_str)
            .unwrap_or("");
        let parameters = fit.map(parameter_summary).unwrap_or_default();
        let fields = [
            e.id.to_string(),
            e.created_at.clone(),
            text_cell(&e.author),
            text_cell(&e.comment),
            e.dataset.map(|d| d.to_string()).unwrap_or_default(),
            e.dataset_name.as_deref().map(text_cell).unwrap_or_default(),
            e.dataset_hash.clone().unwrap_or_default(),
            e.retracts.map(|d| d.to_string()).unwrap_or_default(),
            text_cell(method),
            parameters,
            e.program_version.clone(),
            fit.map(Value::to_string).unwrap_or_default(),
        ];
        let line: Vec<String> = fields.iter().map(|f| quote(f)).collect();
        out.push_str(&line.join(","));
        out.push('\n');
    }
    out
}

/// `name=value±err; …` from a report's `parameters` object of
/// `{name: {value, err}}`.
fn parameter_summary(fit: &Value) -> String {
    let Some(params) = fit.get("parameters").and_then(Value::as_object) else {
        return String::new();
    };
    params
        .iter()
        .map(|(name, p)| {
            let value = p.get("value").map(Value::to_string).unwrap_or_default();
            match p.get("err").filter(|e| !e.is_null()) {
                Some(err) => format!("{name}={value}±{err}"),
                None => format!("{name}={value}"),
            }
        })
        .collect::<Vec<_>>()
        .join("; ")
}

fn text_cell(text: &str) -> String {
    if text.starts_with(['=', '+', '-', '@']) {
        format!("'{text}")
    } else {
        text.to_string()
    }
}

fn quote(field: &str) -> String {
    if field.contains([',', '"', '\n', '\r']) {
        format!("\"{}\"", field.replace('"', "\"\""))
    } else {
        field.to_string()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn csv_quotes_and_defuses_formulas() {
        let entry = LogEntry {
            id: 1,
            created_at: "t".into(),
            author: "=cmd()".into(),
            comment: "a, \"quoted\"\nline".into(),
            dataset: Some(2),
            dataset_name: None,
            dataset_hash: Some("h".into()),
            retracts: None,
            fit: Some(
                serde_json::json!({"method": "tail", "parameters": {"z": {"value": 1.5, "err": 0.1}}}),
            ),
            program_version: "v".into(),
        };
        let csv = to_csv(&[entry]);
        let row = csv.lines().nth(1).expect("row");
        assert!(row.starts_with("1,t,'=cmd(),\"a, \"\"quoted\"\""));
        assert!(csv.contains("z=1.5±0.1"));
    }
}
